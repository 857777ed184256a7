"""Calibration: reference-set fits, held-out acene trend, fingerprints, energy scales."""

from __future__ import annotations

import json
import shutil

import numpy as np
import pandas as pd
import pytest

from conftest import ACENES, raw_levels
from screen.calibrate import (CalibrationError, CalibrationMismatchError, LinearLevelModel, apply_models, find_models,
                              fit_all, load_models, read_reference, stats_table)
from screen.config import load_config
from screen.errors import CalculationError, ConfigError, exit_code

# Published gas-phase values (the rows of models/reference/*.csv, where each has its source):
# IP benzene 9.24 (ZEKE, Chewter et al., J. Chem. Phys. 86 (1987) 4737), naphthalene 8.14 (NIST WebBook),
# anthracene 7.44 and pentacene 6.61 (NIST WebBook, from memory), tetracene 6.93 (ZEKE, Zhang, Pei, Kong,
# doi:10.1063/1.2837467); EA benzene −1.12 (electron transmission, from memory), naphthalene −0.19 (ETS,
# NIST WebBook), anthracene 0.53, tetracene 1.07 (from memory), pentacene 1.39 (from memory; 1.43 in a
# newer measurement). Fundamental gap = IP − EA.
FUND_GAP_EV = {"benzene": 10.36, "naphthalene": 8.33, "anthracene": 6.91, "tetracene": 5.86, "pentacene": 5.22}
# Optical gaps, S1 0–0 in the gas phase (jet/vapour spectra, from memory; the same values as
# models/reference/gap_optical.csv): 4.72, 3.97, 3.43, 2.78, 2.31 eV.
OPT_GAP_EV = {"benzene": 4.72, "naphthalene": 3.97, "anthracene": 3.43, "tetracene": 2.78, "pentacene": 2.31}

# Stated tolerances of the held-out predictions [eV] (about twice the models' LOO RMSE). Benzene's S1 is the
# weak, symmetry-forbidden Lb band well below the strong absorption, which an orbital-gap model cannot see:
# its optical tolerance is wider.
FUND_TOL_EV = {"benzene": 0.4, "naphthalene": 0.4, "anthracene": 0.4, "tetracene": 0.4, "pentacene": 0.4}
OPT_TOL_EV = {"benzene": 0.8, "naphthalene": 0.4, "anthracene": 0.4, "tetracene": 0.4, "pentacene": 0.4}

# Leave-one-out MAE ceilings [eV], set a little above the statistics of the shipped default-protocol models
# (see README accuracy table) so that a regression in the protocol or the data fails the suite.
LOO_MAE_MAX_EV = {"ip": 0.16, "ea": 0.27, "gap_opt": 0.26, "homo_film": 0.21, "lumo_film": 0.38,
                  "gap_opt_film": 0.30}


@pytest.fixture(scope="module")
def cfg(repo_dir):
    return load_config(repo_dir / "config" / "config.yaml",
                       {"calibration": {"models": str(repo_dir / "models"),
                                        "reference": str(repo_dir / "models" / "reference")}})


@pytest.fixture(scope="module")
def shipped(cfg):
    folder = find_models(cfg)
    if folder is None:
        pytest.fail("no shipped model matches the default protocol; run `dascreen calibrate --install models`")
    return folder


@pytest.fixture(scope="module")
def reference_raw(shipped):
    return pd.read_csv(shipped / "reference_raw.csv", keep_default_na=False, na_values=[""])


@pytest.fixture(scope="module")
def sets(cfg):
    return read_reference(cfg["calibration"]["reference"])


def test_shipped_models_meet_loo_ceilings(shipped, cfg):
    models = load_models(shipped, cfg)
    for name, ceiling in LOO_MAE_MAX_EV.items():
        assert models[name]["loo_mae_ev"] < ceiling, (name, models[name]["loo_mae_ev"])
    # issue floor: never looser than 0.25 eV (IP) and 0.30 eV (EA)
    assert models["ip"]["loo_mae_ev"] < 0.25 and models["ea"]["loo_mae_ev"] < 0.30
    table = stats_table(models)
    assert list(table["model"]) == ["ip", "ea", "gap_opt", "homo_film", "lumo_film", "gap_opt_film"]


def test_refit_from_stored_raw_values_reproduces_shipped_models(shipped, sets, reference_raw, cfg):
    refit = fit_all(sets, reference_raw)
    models = load_models(shipped, cfg)
    for name in ("ip", "ea", "gap_opt"):
        assert refit[name]["model"]["coef"] == pytest.approx(models[name]["model"]["coef"], abs=1e-9)
        assert refit[name]["loo_mae_ev"] == pytest.approx(models[name]["loo_mae_ev"], abs=1e-9)
    assert refit["homo_film"]["shift_ev"] == pytest.approx(models["homo_film"]["shift_ev"], abs=1e-9)


def test_protocol_has_not_drifted_from_the_shipped_raw_values(reference_raw):
    # recompute the acenes now with the current code and libraries: same raw numbers as when fitted
    stored = reference_raw.set_index(reference_raw["smiles"].map(lambda s: s))
    from rdkit import Chem

    by_can = {Chem.CanonSmiles(s): row for s, row in stored.iterrows()}
    for smi in ACENES.values():
        row = by_can[Chem.CanonSmiles(smi)]
        now = raw_levels(smi)
        for col in ("xtb_ip_ev", "xtb_ea_ev", "xtb_gap_ev"):
            assert now[col] == pytest.approx(row[col], abs=0.01), (smi, col)


def _is_acene(name, smiles):
    from rdkit import Chem

    return Chem.CanonSmiles(smiles) in {Chem.CanonSmiles(s) for s in ACENES.values()}


def test_acene_trend_with_acenes_held_out(sets, reference_raw):
    models = fit_all(sets, reference_raw, exclude=_is_acene)
    for prop in ("ip", "ea", "gap_opt"):
        assert all(not _is_acene(r["name"], r["smiles"]) for r in models[prop]["residuals"])
    frame = pd.DataFrame([{"id": n, "status": "ok", **raw_levels(s)} for n, s in ACENES.items()])
    levels = apply_models(frame, models, scale="gas")  # the published optical gaps are gas-phase S1 values
    fund = levels["gap_fund_ev"].to_numpy()
    opt = levels["gap_opt_ev"].to_numpy()
    assert np.all(np.diff(fund) < 0), fund
    assert np.all(np.diff(opt) < 0), opt
    for i, name in enumerate(ACENES):
        assert abs(fund[i] - FUND_GAP_EV[name]) < FUND_TOL_EV[name], (name, fund[i])
        assert abs(opt[i] - OPT_GAP_EV[name]) < OPT_TOL_EV[name], (name, opt[i])


def test_foreign_fingerprint_is_refused(shipped, cfg, tmp_path):
    foreign = tmp_path / "foreign"
    shutil.copytree(shipped, foreign)
    path = foreign / "ip.json"
    model = json.loads(path.read_text())
    model["fingerprint"]["protocol_id"] = "tblite-ipea1-xtb-00000000"
    path.write_text(json.dumps(model))
    with pytest.raises(CalibrationMismatchError, match="does not belong to this run's protocol") as err:
        load_models(foreign, cfg)
    assert isinstance(err.value, ConfigError) and exit_code(err.value) == 2  # a configuration problem
    # a different method in the run's config is refused by the shipped model too
    other = dict(cfg, electronic={**cfg["electronic"], "method": "GFN1-xTB"})
    with pytest.raises(CalibrationError, match="protocol_id"):
        load_models(shipped, other)


def test_every_level_row_carries_its_scale(shipped, cfg):
    models = load_models(shipped, cfg)
    frame = pd.DataFrame([{"id": "a", "status": "ok", **raw_levels(ACENES["anthracene"])},
                          {"id": "b", "status": "rejected", **{k: np.nan for k in raw_levels(ACENES["anthracene"])}}])
    film = apply_models(frame, models, scale="film")
    gas = apply_models(frame, models, scale="gas")
    assert list(film["scale"]) == ["film", ""] and list(gas["scale"]) == ["gas", ""]
    assert gas.loc[0, "homo_ev"] == pytest.approx(-gas.loc[0, "ip_ev"], abs=1e-9)
    assert gas.loc[0, "lumo_ev"] == pytest.approx(-gas.loc[0, "ea_ev"], abs=1e-9)
    # film levels lie above (HOMO) and below (LUMO) the gas levels by the polarisation shifts
    assert film.loc[0, "homo_ev"] > gas.loc[0, "homo_ev"] and film.loc[0, "lumo_ev"] < gas.loc[0, "lumo_ev"]
    assert film.loc[0, "homo_sigma_ev"] >= gas.loc[0, "homo_sigma_ev"] > 0
    with pytest.raises(ConfigError, match="'film' or 'gas'"):
        apply_models(frame, models, scale="solution")


def test_prediction_interval_grows_outside_the_data():
    x = np.linspace(7, 10, 12)[:, None]
    y = 0.9 * x[:, 0] - 4 + np.random.default_rng(1).normal(0, 0.1, 12)
    m = LinearLevelModel(["x"]).fit(x, y)
    _, s_in = m.predict(np.array([[8.5]]), return_std=True)
    _, s_out = m.predict(np.array([[14.0]]), return_std=True)
    assert s_out[0] > s_in[0] > m.sigma_


def test_too_few_points_is_an_error():
    with pytest.raises(CalibrationError, match="too few") as err:
        LinearLevelModel(["x"]).fit(np.array([[1.0], [2.0]]), np.array([1.0, 2.0]))
    assert isinstance(err.value, CalculationError) and exit_code(err.value) == 1
