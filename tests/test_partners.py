"""Tests of screen.partners: library, the four partner forms, slugs, the smiles: cache."""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd
import pytest

from screen.partners import (
    LIBRARY_COLUMNS,
    LIBRARY_PATH,
    Partner,
    PartnerError,
    library_partners,
    library_table,
    load_library,
    partner_kind,
    partner_slug,
    resolve_partner,
)


# --------------------------------------------------------------------------- library

def test_library_loads_with_sources_and_film_scale():
    lib = load_library()
    assert list(lib.columns[: len(LIBRARY_COLUMNS)]) == LIBRARY_COLUMNS
    assert len(lib) >= 2
    partners = library_partners()
    for pid, p in partners.items():
        assert p.source.strip(), f"{pid} has no source"
        assert p.scale == "film", f"{pid} is on scale {p.scale!r}"
        assert p.role in ("donor", "acceptor")
        assert p.homo_ev < p.lumo_ev < 0, f"{pid}: levels not bound / not ordered"
        assert min(p.homo_sigma_ev, p.lumo_sigma_ev, p.gap_opt_sigma_ev) >= 0
        assert p.slug == pid and re.fullmatch(r"[A-Za-z0-9._-]+", p.slug)
        assert resolve_partner(pid) == p


def test_scharber_reference_acceptor_entry():
    # Scharber et al., Adv. Mater. 18 (2006) 789, doi:10.1002/adma.200501717: the model's
    # acceptor sits at LUMO -4.3 eV (the value used for the design-rule map).  # from memory
    p = resolve_partner("scharber-reference-acceptor")
    assert p.role == "acceptor" and p.lumo_ev == pytest.approx(-4.3)
    assert p.doi == "10.1002/adma.200501717"


def test_library_ids_case_insensitive():
    first = next(iter(library_partners()))
    assert resolve_partner(first.upper()).id == first
    assert partner_slug(f"  {first.upper()} ") == first


def test_unknown_name_lists_library_ids():
    with pytest.raises(PartnerError) as err:
        resolve_partner("no-such-material")
    msg = str(err.value)
    assert "no-such-material" in msg
    for pid in library_partners():
        assert pid in msg
    assert "smiles:" in msg and "id:" in msg


def test_library_table_columns():
    table = library_table()
    assert list(table.columns) == ["id", "role", "homo_ev", "lumo_ev", "gap_opt_ev", "scale", "source"]
    assert len(table) == len(load_library())


def test_library_from_a_tmp_file(tmp_path):
    rows = [
        {"id": "acc-x", "name": "Acceptor X", "role": "acceptor", "homo_ev": "-6.0", "lumo_ev": "-4.0",
         "gap_opt_ev": "1.9", "scale": "film", "homo_sigma_ev": "0.1", "lumo_sigma_ev": "", "gap_opt_sigma_ev": "",
         "fc_reference_ev": "-4.8", "smiles": "", "source": "made up for this test", "doi": "",
         "from_memory": "false", "notes": ""},
    ]
    path = tmp_path / "lib.csv"
    pd.DataFrame(rows, columns=LIBRARY_COLUMNS).to_csv(path, index=False)
    p = resolve_partner("acc-x", library_path=path)
    assert (p.homo_ev, p.lumo_ev, p.lumo_sigma_ev, p.from_memory) == (-6.0, -4.0, 0.0, False)
    bad = pd.DataFrame(rows, columns=LIBRARY_COLUMNS).assign(scale="solution")
    bad.to_csv(path, index=False)
    with pytest.raises(PartnerError, match="scale"):
        load_library(path)


def test_real_library_file_is_the_default():
    assert LIBRARY_PATH.name == "partners.csv" and LIBRARY_PATH.parent.name == "data"


# --------------------------------------------------------------------------- file and id partners

def _one_row(path, **over):
    row = {"id": "my-acceptor", "homo_ev": -5.9, "lumo_ev": -4.0, "gap_opt_ev": 1.7, "scale": "film",
           "role": "acceptor", "lumo_sigma_ev": 0.05}
    row.update(over)
    pd.DataFrame([row]).to_csv(path, index=False)
    return path


def test_one_row_file_partner(tmp_path):
    path = _one_row(tmp_path / "My Acceptor (CV).csv")
    assert partner_kind(str(path)) == "file"
    p = resolve_partner(str(path))
    assert (p.id, p.role, p.lumo_ev, p.lumo_sigma_ev, p.homo_sigma_ev, p.kind) == \
        ("my-acceptor", "acceptor", -4.0, 0.05, 0.0, "file")
    assert re.fullmatch(r"file-My-Acceptor-CV-[0-9a-f]{8}", p.slug), p.slug
    # same file, same slug; another file of the same name elsewhere, another slug
    assert partner_slug(str(path)) == p.slug
    other = tmp_path / "sub"
    other.mkdir()
    assert partner_slug(str(_one_row(other / path.name))) != p.slug


def test_file_partner_with_two_rows_is_refused(tmp_path):
    path = tmp_path / "two.csv"
    pd.DataFrame([{"id": "a", "homo_ev": -5.9, "lumo_ev": -4.0, "gap_opt_ev": 1.7, "scale": "film"},
                  {"id": "b", "homo_ev": -5.8, "lumo_ev": -3.9, "gap_opt_ev": 1.7, "scale": "film"}]
                 ).to_csv(path, index=False)
    with pytest.raises(PartnerError, match="has 2 rows; a partner file holds exactly one"):
        resolve_partner(str(path))


def test_file_partner_needs_scale_and_levels(tmp_path):
    with pytest.raises(PartnerError, match="scale"):
        resolve_partner(str(_one_row(tmp_path / "a.csv", scale="")))
    with pytest.raises(PartnerError, match="no lumo_ev"):
        resolve_partner(str(_one_row(tmp_path / "b.csv", lumo_ev="")))
    with pytest.raises(PartnerError, match="role"):
        resolve_partner(str(_one_row(tmp_path / "c.csv", role="sensitiser")))


def test_id_partner_from_levels():
    levels = pd.DataFrame({"id": ["D1", "A 7\nx", "bad"], "status": ["ok", "ok", "failed"],
                           "error": ["", "", "electronic: no SCF"],
                           "homo_ev": [-5.3, -5.8, np.nan], "lumo_ev": [-3.4, -4.0, np.nan],
                           "gap_opt_ev": [1.7, 1.6, np.nan], "scale": ["film", "film", ""],
                           "role": ["donor", "acceptor", ""], "lumo_sigma_ev": [0.2, 0.15, np.nan]})
    p = resolve_partner("id:A 7\nx", levels=levels)
    assert (p.id, p.role, p.lumo_ev, p.lumo_sigma_ev, p.kind) == ("A 7\nx", "acceptor", -4.0, 0.15, "id")
    assert re.fullmatch(r"id-[0-9a-f]{10}", p.slug)
    with pytest.raises(PartnerError, match="no row with id 'nope'"):
        resolve_partner("id:nope", levels=levels)
    with pytest.raises(PartnerError, match="status 'failed'"):
        resolve_partner("id:bad", levels=levels)
    with pytest.raises(PartnerError, match="no levels table"):
        resolve_partner("id:D1")


def test_partner_dict_is_json_safe():
    p = Partner("x", "X", "", -6.0, -4.0, float("nan"))
    json.dumps(p.as_dict(), allow_nan=False)


# --------------------------------------------------------------------------- smiles partners

#: hand-made calibration in the format of screen.calibrate.fit_all (numbers invented for the test)
_MODELS = {
    "ip": {"property": "ip", "target": "ip_ev", "scale": "gas", "kind": "linear", "n": 10,
           "model": {"features": ["xtb_ip_ev"], "coef": [0.8], "intercept": 0.2, "residual_sigma_ev": 0.15,
                     "xtx_inv": [[4.0, -0.4], [-0.4, 0.04]]}},
    "ea": {"property": "ea", "target": "ea_ev", "scale": "gas", "kind": "linear", "n": 10,
           "model": {"features": ["xtb_ea_ev"], "coef": [0.9], "intercept": -0.3, "residual_sigma_ev": 0.2,
                     "xtx_inv": [[1.0, 0.0], [0.0, 0.1]]}},
    "gap_opt": {"property": "gap_opt", "target": "gap_opt_ev", "scale": "gas", "kind": "linear", "n": 10,
                "model": {"features": ["xtb_gap_ev"], "coef": [0.7], "intercept": 0.4, "residual_sigma_ev": 0.25,
                          "xtx_inv": [[1.0, 0.0], [0.0, 0.1]]}},
    "homo_film": {"property": "homo_film", "target": "homo_ev", "scale": "film", "kind": "shift", "base": "ip",
                  "shift_ev": 1.1, "sigma_ev": 0.2, "n": 8},
    "lumo_film": {"property": "lumo_film", "target": "lumo_ev", "scale": "film", "kind": "shift", "base": "ea",
                  "shift_ev": -1.0, "sigma_ev": 0.25, "n": 8},
    "gap_opt_film": {"property": "gap_opt_film", "target": "gap_opt_ev", "scale": "film", "kind": "shift",
                     "base": "gap_opt", "shift_ev": -0.5, "sigma_ev": 0.2, "n": 8},
}


@pytest.fixture()
def smiles_setup(tmp_path):
    from screen.calibrate import fingerprint, save_models
    from screen.config import resolve

    ref = tmp_path / "reference"
    ref.mkdir()
    cfg = resolve({"calibration": {"reference": str(ref), "models": str(tmp_path / "models")}})
    folder = save_models(_MODELS, tmp_path / "models", fingerprint(cfg, ref))
    return cfg, folder, tmp_path / "cache"


def test_smiles_partner_computed_like_candidates_and_cached(smiles_setup, monkeypatch):
    from conftest import raw_levels

    from screen import engines

    cfg, folder, cache = smiles_setup
    calls = {"n": 0}
    original = engines.Engine.singlepoint

    def counting(self, *a, **k):
        calls["n"] += 1
        return original(self, *a, **k)

    monkeypatch.setattr(engines.Engine, "singlepoint", counting)
    spec = "smiles:C1=CSC=C1"  # thiophene, written non-canonically
    p = resolve_partner(spec, config=cfg, cache_dir=cache, models_dir=folder)
    assert calls["n"] > 3  # conformer ranking + neutral, cation, anion
    assert p.kind == "smiles" and p.id == "smiles:c1ccsc1" and p.scale == "film" and p.role == ""
    assert p.slug == partner_slug(spec) and p.slug.startswith("smiles-m")
    # the raw values are those of the candidates' route (default structures + electronic protocol)
    files = list(cache.glob("*.json"))
    assert len(files) == 1
    rec = json.loads(files[0].read_text())
    ref = raw_levels("c1ccsc1")
    for key in ("xtb_ip_ev", "xtb_ea_ev", "xtb_gap_ev"):
        assert rec[key] == pytest.approx(ref[key], abs=1e-6)
    # calibration applied: HOMO_film = -(0.8 IP_xtb + 0.2) + 1.1, LUMO_film = -(0.9 EA_xtb - 0.3) - 1.0,
    # gap_film = 0.7 gap_xtb + 0.4 - 0.5
    assert p.homo_ev == pytest.approx(round(-(0.8 * rec["xtb_ip_ev"] + 0.2) + 1.1, 4), abs=1e-4)
    assert p.lumo_ev == pytest.approx(round(-(0.9 * rec["xtb_ea_ev"] - 0.3) - 1.0, 4), abs=1e-4)
    assert p.gap_opt_ev == pytest.approx(round(0.7 * rec["xtb_gap_ev"] + 0.4 - 0.5, 4), abs=1e-4)
    assert p.homo_sigma_ev > 0.2 and p.lumo_sigma_ev > 0.25

    # second call: no engine call at all
    def forbidden(self, *a, **k):
        raise AssertionError("the engine was called for a cached partner")

    monkeypatch.setattr(engines.Engine, "singlepoint", forbidden)
    again = resolve_partner("smiles:c1ccsc1", config=cfg, cache_dir=cache, models_dir=folder)
    assert again.homo_ev == p.homo_ev and again.lumo_ev == p.lumo_ev and again.slug == p.slug


def test_smiles_partner_needs_matching_models(smiles_setup, tmp_path):
    from screen.config import resolve

    cfg, folder, cache = smiles_setup
    other = resolve({**cfg, "electronic": {"method": "GFN1-xTB"}})
    with pytest.raises(PartnerError, match="does not belong"):
        resolve_partner("smiles:c1ccsc1", config=other, cache_dir=cache, models_dir=folder)
    empty = resolve({**cfg, "calibration": {**cfg["calibration"], "models": str(tmp_path / "none")}})
    with pytest.raises(PartnerError, match="needs the calibration models"):
        resolve_partner("smiles:c1ccsc1", config=empty, cache_dir=cache)


def test_smiles_partner_bad_smiles():
    with pytest.raises(PartnerError, match="does not parse"):
        partner_slug("smiles:C1CC")
    with pytest.raises(PartnerError, match="charge"):
        partner_slug("smiles:[NH4+]")
