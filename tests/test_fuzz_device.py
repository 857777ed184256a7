"""Fuzz tests: no impossible number, ever, and every bad levels or partner file is refused with exit code 2.

Generated inputs (fixed seeds): wrong signs, swapped HOMO/LUMO, inverted alignments, huge and zero gaps,
missing roles.  Properties checked on every row, for both device models and both absorber policies:

- PCE never above the detailed-balance limit for the absorber gap (Rühle, Sol. Energy 130 (2016) 139,
  doi:10.1016/j.solener.2016.02.015; our screen.spectrum.sq_limit on ASTM G173-03 at 300 K);
- Voc never above the detailed-balance Voc of the smallest optical gap of the pair (same sources), so never
  above that gap;
- a pair that is not viable has no efficiency (NaN), never 0 and never a number.
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from screen.cli import main as cli_main
from screen.device import DeviceModel
from screen.partners import resolve_partner
from screen.rank import rank_candidates
from screen.spectrum import sq_pce_pct, sq_voc_v

MODELS = [DeviceModel(), DeviceModel(absorber="donor"), DeviceModel(model="scharber", absorber="donor"),
          DeviceModel(model="scharber", absorber="both"), DeviceModel(eqe=1.0, ff=1.0, loss_v=0.0)]


def _wild_levels(n: int, seed: int):
    """Six level arrays with every kind of trouble: any sign, swapped levels, inverted pairs, zero and huge gaps."""
    rng = np.random.default_rng(seed)
    d_homo, a_homo = rng.uniform(-9, 3, n), rng.uniform(-9, 3, n)
    d_lumo, a_lumo = rng.uniform(-9, 3, n), rng.uniform(-9, 3, n)
    d_gap = rng.choice([0.0, -0.5, 0.3, 1.0, 1.34, 1.8, 4.5, 12.0, 650.0], n) * rng.uniform(0.9, 1.1, n)
    a_gap = rng.choice([0.0, 0.2, 1.1, 1.4, 2.0, 5.0, 40.0], n) * rng.uniform(0.9, 1.1, n)
    d_gap[::17] = np.nan
    return d_homo, d_lumo, d_gap, a_homo, a_lumo, a_gap


@pytest.mark.parametrize("model", MODELS, ids=lambda m: f"{m.model}-{m.absorber}-{m.eqe}")
def test_no_efficiency_above_the_detailed_balance_limit_nor_voc_above_the_gap(model):
    levels = _wild_levels(400, 11)
    out = model.evaluate(*levels, acceptor_class=np.array(["", "fullerene", "nfa-fused", "polymer"] * 100))
    ok = out["viable"]
    assert 0 < ok.sum() < ok.size  # the generator makes both kinds
    limit = sq_pce_pct(out["absorber_gap_ev"][ok])
    assert np.all(out["pce_pct"][ok] <= limit + 1e-9)
    positive = [np.where(g > 0, g, np.nan) for g in (levels[2], levels[5])]  # an invalid gap caps nothing
    smallest = np.fmin(*positive)[ok]
    assert np.all(out["voc_v"][ok] <= smallest + 1e-12)
    assert np.all(out["voc_v"][ok] <= sq_voc_v(smallest) + 1e-12)
    assert np.all(out["voc_v"][ok] > 0) and np.all(out["pce_pct"][ok] >= 0)
    for key in ("voc_v", "jsc_ma_cm2", "ff", "pce_pct"):
        assert np.isnan(out[key][~ok]).all()
    # the sampler's kernel agrees with the flagged path on the same levels (0 where not viable)
    classes = np.array(["", "fullerene", "nfa-fused", "polymer"] * 100)
    loss, _ = model.loss_ev(classes)
    fast = model.pce_from_levels(levels, loss, ff=model.ff_of(classes), eqe=model.eqe_of(classes),
                                 acceptor_absorbs=model.acceptor_absorbs(classes))
    np.testing.assert_allclose(fast, np.where(ok, out["pce_pct"], 0.0), rtol=1e-12, atol=1e-12)


def test_the_cap_binds_for_an_ideal_cell():
    # EQE = FF = 1 and no voltage loss would beat the limit: the cap holds the efficiency to it and says so
    m = DeviceModel(model="scharber", absorber="donor", eqe=1.0, ff=1.0, loss_v=0.0, min_delta_lumo_ev=0.0)
    out = m.evaluate(-5.6, -4.2, 1.34, None, -4.25)  # Voc would be 1.35 V > 1.34 eV
    assert out["voc_capped"] and out["pce_capped"]
    # the detailed-balance Voc at 1.34 eV: ≈ 1.07-1.08 V (Rühle 2016, table, from memory; our sq_limit 1.082 V)
    assert out["voc_v"] == pytest.approx(float(sq_voc_v(1.34)))
    assert 1.06 < out["voc_v"] < 1.09
    assert out["pce_pct"] == pytest.approx(33.7, abs=0.05)  # Rühle 2016 maximum, # from memory


def _sane_rows(n: int, seed: int) -> pd.DataFrame:
    """Levels that pass the input checks, with inverted alignments and missing or given roles."""
    rng = np.random.default_rng(seed)
    homo = rng.uniform(-6.8, -4.6, n)
    gap = rng.uniform(0.8, 3.4, n)
    lumo = np.minimum(homo + gap + rng.uniform(-0.2, 0.5, n), -0.5)
    return pd.DataFrame({"id": [f"f{i:03d}" for i in range(n)], "homo_ev": homo, "lumo_ev": lumo, "gap_opt_ev": gap,
                         "scale": "film", "role": rng.choice(["", "donor", "acceptor", "Donor "], n),
                         "homo_sigma_ev": rng.uniform(0, 0.3, n), "lumo_sigma_ev": rng.uniform(0, 0.3, n),
                         "gap_opt_sigma_ev": rng.uniform(0, 0.2, n)})


@pytest.mark.parametrize("partner_id", ["y6", "pm6", "c60", "scharber-reference-acceptor"])
def test_ranking_of_generated_rows_has_no_impossible_number(partner_id):
    partner = resolve_partner(partner_id)
    lv = _sane_rows(150, 5)
    for model in (DeviceModel(), DeviceModel(model="scharber", absorber="donor")):
        r = rank_candidates(lv, partner, model)
        ok = r["viable"].astype(bool)
        assert 0 < ok.sum() < len(r)  # the generator makes both kinds, so the checks below see rows
        assert r["viable"].is_monotonic_decreasing  # never a not-viable row above a viable one
        assert r.loc[~ok, ["voc_v", "jsc_ma_cm2", "pce_pct", "pce_sigma_pct", "p_above_target"]].isna().all().all()
        assert (r.loc[~ok, "reason"].str.len() > 0).all()
        v = r[ok]
        assert (v["pce_pct"] <= sq_pce_pct(v["absorber_gap_ev"].to_numpy()) + 1e-3).all()
        gaps = np.fmin(v["gap_opt_ev"], partner.gap_opt_ev)
        assert (v["voc_v"] <= gaps + 1e-4).all() and (v["voc_v"] > 0).all()
        assert (v["voc_v"] <= sq_voc_v(gaps.to_numpy()) + 1e-4).all()


BAD_LEVELS = {
    "positive_homo": ("id,homo_ev,lumo_ev,gap_opt_ev,scale\nk1,5.3,-3.5,1.7,film\n", "write it as -5.3"),
    "positive_lumo": ("id,homo_ev,lumo_ev,gap_opt_ev,scale\nk1,-5.3,3.6,1.7,film\n", "write it as -3.6"),
    "swapped": ("id,homo_ev,lumo_ev,gap_opt_ev,scale\nk1,-3.5,-5.3,1.7,film\n", "look swapped"),
    "zero_gap": ("id,homo_ev,lumo_ev,gap_opt_ev,scale\nk1,-5.3,-3.5,0,film\n", "must be positive"),
    "gap_in_nm": ("id,homo_ev,lumo_ev,gap_opt_ev,scale\nk1,-5.3,-3.5,700,film\n", "wavelength in nm"),
    "gap_too_large": ("id,homo_ev,lumo_ev,gap_opt_ev,scale\nk1,-5.3,-3.5,3.2,film\n", "exceeds LUMO - HOMO"),
    "negative_sigma": ("id,homo_ev,lumo_ev,gap_opt_ev,scale,homo_sigma_ev\nk1,-5.3,-3.5,1.7,film,-0.1\n",
                       "finite number >= 0"),
    "text_value": ("id,homo_ev,lumo_ev,gap_opt_ev,scale\nk1,-5.3 eV,-3.5,1.7,film\n", "not a number"),
    "mev": ("id,homo_ev,lumo_ev,gap_opt_ev,scale\nk1,-5300,-3500,1.7,film\n", "not a frontier level"),
}


@pytest.mark.parametrize("kind", sorted(BAD_LEVELS))
def test_bad_levels_file_exits_2_with_its_message(kind, tmp_path, capsys):
    text, fix = BAD_LEVELS[kind]
    path = tmp_path / f"{kind}.csv"
    path.write_text(text, encoding="utf-8")
    rc = cli_main(["rank", "--levels", str(path), "--partner", "y6", "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert rc == 2, err
    assert str(path) in err and fix in err and "line 2" in err and "'k1'" in err
    assert not (tmp_path / "out" / "rankings").exists()  # nothing ranked


def test_bad_partner_file_exits_2(tmp_path, capsys):
    good = tmp_path / "lv.csv"
    good.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale,role\nd1,-5.4,-3.6,1.8,film,donor\n", encoding="utf-8")
    partner = tmp_path / "acc.csv"
    partner.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale,role\nmine,5.9,4.1,1.4,film,acceptor\n",
                       encoding="utf-8")
    rc = cli_main(["rank", "--levels", str(good), "--partner", str(partner), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert rc == 2 and "partner file" in err and "(id 'mine')" in err and "write it as -5.9" in err


def test_installed_command_refuses_a_positive_homo(tmp_path):
    path = tmp_path / "pos.csv"
    path.write_text(BAD_LEVELS["positive_homo"][0], encoding="utf-8")
    res = subprocess.run([sys.executable, "-m", "screen.cli", "rank", "--levels", str(path), "--partner", "y6",
                          "--out", str(tmp_path / "o")], capture_output=True, text=True, timeout=300)
    assert res.returncode == 2 and "write it as -5.3" in res.stderr and "Traceback" not in res.stderr
