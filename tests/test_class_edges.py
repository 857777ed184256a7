"""Edges of the per-class device values and the model ceilings (an adversarial tester's findings, 2026-12-05).

Check values: the published rule's own map peaks near 11 % (Scharber et al., Adv. Mater. 18 (2006) 789,
doi:10.1002/adma.200501717, from memory; 11.1 % on ASTM G173-03 here); its true ceiling on levels whose
HOMO–LUMO difference exceeds the optical gap, 16.3 %, is a regression value of :func:`DeviceModel.pce_bound_pct`
(detailed-balance Voc, EQE 0.65, FF 0.65); the rest are consistency checks.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from screen.cli import main
from screen.device import DeviceModel, efficiency_map
from screen.devicepars import FITTED_PATH, load_fitted
from screen.errors import ConfigError


@pytest.mark.parametrize("model", [DeviceModel(model="scharber"), DeviceModel(model="scharber", absorber="donor"),
                                   DeviceModel()])
def test_the_ceiling_bounds_levels_whose_transport_gap_exceeds_the_optical_gap(model):
    rng = np.random.default_rng(11)
    n = 40000
    d_gap, a_gap = rng.uniform(0.9, 2.4, n), rng.uniform(0.9, 2.4, n)
    a_lumo = rng.uniform(-4.4, -3.6, n)
    d_lumo = a_lumo + rng.uniform(0.3, 0.8, n)
    d_homo = d_lumo - d_gap - rng.uniform(0.0, 1.0, n)  # film CV levels: a transport gap up to 1 eV wider
    a_homo = a_lumo - a_gap - rng.uniform(0.0, 1.0, n)
    out = model.evaluate(d_homo, d_lumo, d_gap, a_homo, a_lumo, a_gap, acceptor_class="nfa-fused")
    assert np.nanmax(out["pce_pct"]) <= model.pce_bound_pct() + 1e-9


def test_the_published_map_keeps_its_own_peak():
    pce = efficiency_map(np.arange(0.8, 3.0, 0.01), np.arange(0.0, 1.5, 0.01))
    assert np.nanmax(pce) == pytest.approx(11.1, abs=0.05)
    assert DeviceModel(model="scharber").pce_bound_pct() == pytest.approx(16.25, abs=0.02)


def test_a_set_fill_factor_still_says_the_pooled_eqe(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "d.csv").write_text("id,role,homo_ev,lumo_ev,gap_opt_ev,scale\nD1,donor,-5.3,-3.5,1.7,film\n")
    (tmp_path / "p.csv").write_text("id,role,homo_ev,lumo_ev,gap_opt_ev,scale\nPX,acceptor,-5.7,-4.0,1.4,film\n")
    assert main(["rank", "--levels", "d.csv", "--partner", "p.csv", "--out", "o", "--set", "device.ff=0.65"]) == 0
    err = capsys.readouterr().err
    assert "takes its pooled values (EQE and fill factor)" in err
    ranking = (tmp_path / "o" / "rankings").glob("*/ranking.csv")
    assert "acceptor_class_unknown" in next(ranking).read_text()


def test_no_extrapolation_flag_for_a_loss_the_user_set():
    pm6, far = (-5.49, -3.64, 1.80), (-5.60, -4.60, 0.95)  # E_CT 0.89 eV, below every fitted device
    assert bool(DeviceModel().evaluate(*pm6, *far, acceptor_class="nfa-fused")["ect_outside_fit"])
    assert not bool(DeviceModel(loss_v=0.5).evaluate(*pm6, *far, acceptor_class="nfa-fused")["ect_outside_fit"])


@pytest.mark.parametrize("bad, said", [([0.5], "not a fitted device model"), ({"Fullerene": 0.5}, "has Fullerene"),
                                       ({"pooled": 0.9}, "has pooled")])
def test_a_malformed_class_table_is_refused_naming_the_file(tmp_path, bad, said):
    data = json.loads(FITTED_PATH.read_text(encoding="utf-8"))
    data["parameters"]["eqe_by_class"] = bad
    path = tmp_path / "fitted.json"
    path.write_text(json.dumps(data), encoding="utf-8")
    with pytest.raises(ConfigError, match=said) as err:
        load_fitted(str(path))
    assert str(path) in str(err.value)


def test_a_partner_id_with_the_tie_separator_is_refused(tmp_path, capsys, monkeypatch):
    # the partner matrix joins tied partners' ids with ';': 'x;y' would read as two partners
    monkeypatch.chdir(tmp_path)
    (tmp_path / "d.csv").write_text("id,role,homo_ev,lumo_ev,gap_opt_ev,scale\nD1,donor,-5.3,-3.5,1.7,film\n")
    (tmp_path / "p.csv").write_text("id,role,homo_ev,lumo_ev,gap_opt_ev,scale\nx;y,acceptor,-5.7,-4.0,1.4,film\n")
    assert main(["rank", "--levels", "d.csv", "--partner", "p.csv", "--out", "o"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "the partner's id 'x;y' contains ';'" in err[0] and "rename it" in err[0]
