"""Levels assembly with calibrated values: σ from the prediction interval and the chain-limit spread.

The models here are fitted on invented numbers (no external check values): the tests check the algebra of
screen.calibrate.apply_models, not a calibration.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from screen.calibrate import LinearLevelModel, apply_models


def _record(features, X, y, **extra):
    model = LinearLevelModel(features).fit(np.asarray(X, float), np.asarray(y, float))
    return {"model": model.to_dict(), "kind": "linear", "scale": "gas", **extra}


@pytest.fixture(scope="module")
def models():
    rng = np.random.default_rng(7)
    ip = np.linspace(6.5, 9.5, 20)
    ea = np.linspace(0.5, 3.5, 20)
    gap = np.linspace(1.5, 4.5, 20)
    k = np.linspace(0.1, 0.6, 20)[::-1]
    film = np.tile([0.0, 1.0], 10)
    noise = rng.normal(0, 0.05, 20)
    gap_rec = _record(["xtb_gap_ev", "xtb_k_hl_ev", "phase_film", "kind_maximum"],
                      np.column_stack([gap, k, film, np.tile([0.0, 0.0, 1.0, 0.0], 5)]),
                      0.8 * gap + 1.5 * k - 0.2 * film + noise, kind="joint")
    return {"ip": _record(["xtb_ip_ev"], ip[:, None], 0.9 * ip - 0.5 + noise),
            "ea": _record(["xtb_ea_ev"], ea[:, None], 0.8 * ea - 2.0 + noise),
            "gap_opt": {**gap_rec, "property": "gap_opt"},
            "gap_opt_film": {**gap_rec, "property": "gap_opt_film", "scale": "film"},
            "homo_film": _record(["xtb_ip_film_ev"], (ip - 1.2)[:, None], 0.9 * ip - 1.6 + noise, sign=-1.0,
                                 scale="film"),
            "lumo_film": {"kind": "shift", "base": "ea", "shift_ev": -1.1, "sigma_ev": 0.2, "scale": "film"}}


def _rows(**over):
    base = {"id": "a", "status": "ok", "xtb_ip_ev": 8.0, "xtb_ea_ev": 2.0, "xtb_homo_ev": -7.0, "xtb_lumo_ev": -3.0,
            "xtb_gap_ev": 3.0, "xtb_k_hl_ev": 0.35, "xtb_ip_film_ev": 6.8}
    return pd.DataFrame([{**base, **o} for o in over.get("rows", [{}])])


def test_sigma_grows_with_distance_from_the_reference_data(models):
    out = apply_models(_rows(rows=[{}, {"id": "far", "xtb_ip_ev": 14.0, "xtb_ip_film_ev": 12.8,
                                        "xtb_gap_ev": 9.0}]), models, scale="film")
    near, far = out.iloc[0], out.iloc[1]
    for col in ("ip_sigma_ev", "homo_sigma_ev", "gap_opt_sigma_ev"):
        assert far[col] > near[col] > 0, col


def test_polymer_chain_spread_widens_sigma_through_the_coefficients(models):
    frame = _rows(rows=[{}, {"id": "p", "representation": "polymer", "chain_spread_xtb_ip_ev": 0.3,
                             "chain_spread_xtb_ip_film_ev": 0.2, "chain_spread_xtb_gap_ev": 0.1}])
    out = apply_models(frame, models, scale="film")
    mol, poly = out.iloc[0], out.iloc[1]
    slope_ip = models["ip"]["model"]["coef"][0]
    assert poly.ip_sigma_ev == pytest.approx(np.hypot(mol.ip_sigma_ev, slope_ip * 0.3), abs=2e-4)
    slope_film = models["homo_film"]["model"]["coef"][0]
    assert poly.homo_sigma_ev == pytest.approx(np.hypot(mol.homo_sigma_ev, slope_film * 0.2), abs=2e-4)
    assert poly.gap_opt_sigma_ev > mol.gap_opt_sigma_ev and poly.ip_ev == mol.ip_ev  # values unchanged


def test_film_gap_is_the_gas_gap_minus_the_red_shift_for_every_row(models):
    frame = _rows(rows=[{}, {"id": "b", "xtb_gap_ev": 2.0, "xtb_k_hl_ev": 0.5}])
    film = apply_models(frame, models, scale="film")
    gas = apply_models(frame, models, scale="gas")
    red = -models["gap_opt_film"]["model"]["coef"][2]
    assert np.allclose(gas.gap_opt_ev - film.gap_opt_ev, red, atol=2e-4)
    # film HOMO from the continuum model (sign −1), film LUMO from the gas model plus a constant
    assert film.homo_ev.iloc[0] == pytest.approx(-(models["homo_film"]["model"]["coef"][0] * 6.8
                                                    + models["homo_film"]["model"]["intercept"]), abs=2e-4)
    assert film.lumo_ev.iloc[0] == pytest.approx(-gas.ea_ev.iloc[0] - 1.1, abs=2e-4)
    assert list(film.scale) == ["film", "film"] and list(gas.scale) == ["gas", "gas"]


def test_fixed_red_shift_record_subtracts_delta_on_the_film_scale(models):
    rng = np.random.default_rng(3)
    gap = np.linspace(1.5, 4.5, 12)
    fixed = _record(["xtb_gap_ev", "kind_maximum"], np.column_stack([gap, np.tile([0.0, 1.0], 6)]),
                    0.7 * gap + 1.0 + rng.normal(0, 0.05, 12), kind="joint", red_shift_ev=0.2)
    both = {**models, "gap_opt": fixed, "gap_opt_film": {**fixed, "scale": "film"}}
    frame = _rows(rows=[{}, {"id": "b", "xtb_gap_ev": 2.2}])
    film = apply_models(frame, both, scale="film")
    gas = apply_models(frame, both, scale="gas")
    assert np.allclose(gas.gap_opt_ev - film.gap_opt_ev, 0.2, atol=2e-4)
    assert np.allclose(gas.gap_opt_sigma_ev, film.gap_opt_sigma_ev)


def test_conformer_spread_widens_sigma_through_the_orbital_proxy(models):
    # the ΔSCF IP (gas and film) is lent the spread of −ε_HOMO, the EA that of −ε_LUMO (screen.conformer_spread)
    frame = _rows(rows=[{}, {"id": "floppy", "conf_spread_homo_ev": 0.1, "conf_spread_lumo_ev": 0.2,
                             "conf_spread_gap_ev": 0.05}, {"id": "old record", "conf_spread_homo_ev": np.nan}])
    out = apply_models(frame, models, scale="film")
    rigid, floppy, unknown = out.iloc[0], out.iloc[1], out.iloc[2]
    w_ip = models["ip"]["model"]["coef"][0]
    assert floppy.ip_sigma_ev == pytest.approx(np.hypot(rigid.ip_sigma_ev, w_ip * 0.1), abs=2e-4)
    w_ea = models["ea"]["model"]["coef"][0]
    assert floppy.ea_sigma_ev == pytest.approx(np.hypot(rigid.ea_sigma_ev, w_ea * 0.2), abs=2e-4)
    w_film = models["homo_film"]["model"]["coef"][0]
    assert floppy.homo_sigma_ev == pytest.approx(np.hypot(rigid.homo_sigma_ev, w_film * 0.1), abs=2e-4)
    w_gap = models["gap_opt_film"]["model"]["coef"][0]
    assert floppy.gap_opt_sigma_ev == pytest.approx(np.hypot(rigid.gap_opt_sigma_ev, w_gap * 0.05), abs=2e-4)
    assert unknown.homo_sigma_ev == rigid.homo_sigma_ev and floppy.homo_ev == rigid.homo_ev  # NaN adds nothing
