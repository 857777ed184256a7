"""Film levels derived from the other level and the optical gap (``derived_level`` of levels_film.csv).

A level a reference row computed as "LUMO = HOMO + Eg(opt)" (or "HOMO = LUMO - Eg(opt)") is an optical level,
not the oxidation/reduction level the film models predict: it is no target of that level's model, while the
row stays in the other level's fit and in the optical-gap model.
"""

from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest

from screen.calibrate import fit_all, read_reference
from screen.calibration.film import fit_film_level
from screen.calibration.linear import LinearLevelModel
from screen.calibration.reference import canonical
from screen.config import Config
from screen.errors import InputError

# synthetic set: raw values are invented numbers; the film levels are exact linear functions of them
SMILES = ["c1ccccc1", "c1ccncc1", "c1ccsc1", "c1ccoc1", "C=CC=C", "c1ccc2ccccc2c1", "C=CC=O", "c1cc[nH]c1"]
RAW_IP = np.array([9.6, 9.9, 9.3, 9.0, 9.8, 8.4, 10.4, 8.7])
RAW_EA = np.array([-1.4, -0.9, -1.1, -1.6, -1.2, -0.3, -0.4, -1.9])
POLARISATION_EV = 1.0  # constant film polarisation of the synthetic set [eV]


def _synthetic(derived: list[str] | None):
    computed = pd.DataFrame({"smiles": SMILES, "status": "ok", "representation": "molecule", "xtb_ip_ev": RAW_IP,
                             "xtb_ea_ev": RAW_EA, "xtb_homo_ev": -RAW_IP + 1.5, "xtb_lumo_ev": -RAW_EA - 1.5,
                             "xtb_ip_film_ev": RAW_IP - 0.9, "xtb_ea_film_ev": RAW_EA + 0.9})
    homo = -(RAW_IP - POLARISATION_EV)
    lumo = -(RAW_EA + POLARISATION_EV)
    # row 2: LUMO = HOMO + Eg(opt), 0.5 eV deeper than its reduction level; row 5: HOMO = LUMO - Eg(opt), 0.4 eV high
    lumo[2] -= 0.5
    homo[5] += 0.4
    film = pd.DataFrame({"name": [f"m{i}" for i in range(len(SMILES))], "smiles": SMILES,
                         "representation": "molecule", "homo_ev": homo.round(3).astype(str),
                         "lumo_ev": lumo.round(3).astype(str), "gap_opt_ev": "2.0", "fc_reference_ev": "-4.8",
                         "exclude_reason": ""})
    if derived is not None:
        film["derived_level"] = derived
    gas = {"ip": {"model": LinearLevelModel(["xtb_ip_ev"], np.array([1.0]), 0.0, 0.1, np.eye(2)).to_dict()},
           "ea": {"model": LinearLevelModel(["xtb_ea_ev"], np.array([1.0]), 0.0, 0.1, np.eye(2)).to_dict()}}
    return film, computed, gas


def _names(record):
    return {r["name"] for r in record["residuals"]}


def test_a_derived_level_is_left_out_of_its_own_fit_and_kept_for_the_other():
    derived = ["", "", "lumo", "", "", "homo", "", ""]
    film, computed, gas = _synthetic(derived)
    lumo = fit_film_level("lumo", film, computed, gas["ea"])
    homo = fit_film_level("homo", film, computed, gas["ip"])
    assert lumo["route"] == homo["route"] == "shift"
    # m2's LUMO is derived: not a LUMO target, still a HOMO target; m5 the other way round
    assert "m2" not in _names(lumo) and "m2" in _names(homo)
    assert "m5" not in _names(homo) and "m5" in _names(lumo)
    assert lumo["n"] == homo["n"] == len(SMILES) - 1
    # the measured levels are an exact constant shift of the gas values: recovered without error
    assert lumo["loo_mae_ev"] == pytest.approx(0.0, abs=1e-9) and homo["loo_mae_ev"] == pytest.approx(0.0, abs=1e-9)
    assert lumo["shift_ev"] == pytest.approx(-POLARISATION_EV, abs=1e-9)
    assert homo["shift_ev"] == pytest.approx(POLARISATION_EV, abs=1e-9)


def test_without_the_column_every_level_is_a_target():
    # the same rows read as measured (a user's own reference file without derived_level): the optical levels
    # enter both fits and pull them off
    for derived in (None, [""] * len(SMILES)):
        film, computed, gas = _synthetic(derived)
        lumo = fit_film_level("lumo", film, computed, gas["ea"])
        homo = fit_film_level("homo", film, computed, gas["ip"])
        assert lumo["n"] == homo["n"] == len(SMILES)
        assert lumo["loo_mae_ev"] > 0.1 and homo["loo_mae_ev"] > 0.08


@pytest.fixture(scope="module")
def shipped_fit(repo_dir):
    # stored raw values of the default protocol (read directly: this test does not need the shipped models to match)
    folder = repo_dir / "models" / Config.of({}).protocol_id
    raw = pd.read_csv(folder / "reference_raw.csv", keep_default_na=False, na_values=[""])
    sets = read_reference(repo_dir / "models" / "reference")
    return sets, fit_all(sets, raw)


def test_shipped_film_set_fits_each_level_on_measured_rows_only(shipped_fit):
    sets, models = shipped_fit
    film = sets["film"]
    fitted = {name: {canonical(r["smiles"]) for r in models[name]["residuals"]
                     if r.get("phase_film", 1) == 1} for name in ("homo_film", "lumo_film", "gap_opt_film")}
    for level, other in (("lumo", "homo"), ("homo", "lumo")):
        rows = film[film["derived_level"].eq(level) & film["exclude_reason"].str.strip().eq("")]
        assert len(rows) >= 2, level  # the set marks derived LUMOs (PBDB-T, ...) and HOMOs (N2200, PTCDI-C8)
        keys = {canonical(s) for s in rows["smiles"]}
        assert not keys & fitted[f"{level}_film"], level
        assert keys <= fitted[f"{other}_film"] and keys <= fitted["gap_opt_film"], level


def test_reference_reader_fills_and_checks_the_derived_level_column(repo_dir, tmp_path):
    ref = tmp_path / "reference"
    shutil.copytree(repo_dir / "models" / "reference", ref)
    path = ref / "levels_film.csv"
    film = pd.read_csv(path, dtype=str, keep_default_na=False)
    film.drop(columns="derived_level", errors="ignore").to_csv(path, index=False)
    assert read_reference(ref)["film"]["derived_level"].eq("").all()  # no column: every level measured
    film.loc[0, "derived_level"] = "both"
    film.to_csv(path, index=False)
    with pytest.raises(InputError, match=r"derived_level: 'both'"):
        read_reference(ref)
