"""Tests of screen.devicevalidation: the device model on computed levels and the limits of its Voc ranking."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from screen import devicefit, devicevalidation
from screen.calibrate import apply_models, load_models
from screen.calibration.reference import canonical, read_reference


@pytest.fixture(scope="module")
def devices():
    return devicefit.read_devices()


@pytest.fixture(scope="module")
def raw():
    return devicevalidation.read_raw()


def test_out_of_sample_levels_leave_each_material_out(raw):
    # every calibration fit used for a material excludes exactly the reference rows of that structure
    shipped = load_models(devicevalidation.RAW_PATH.parent, check=False)
    calls = []

    def fake_fit(sets, computed, exclude=None):
        calls.append(exclude)
        return shipped

    sets = read_reference(devicevalidation.REFERENCE_DIR)
    film = sets["film"]
    picks = [canonical(s) for s in film["smiles"].iloc[:3]]
    picks = [p for p in picks if p in set(raw["_can"])][:2]
    assert len(picks) == 2
    levels = devicevalidation.out_of_sample_levels(picks + picks[:1], raw, sets, fit=fake_fit)
    assert list(levels.index) == picks and len(calls) == 2  # each structure fitted once
    for can, exclude in zip(picks, calls):
        other = next(p for p in picks if p != can)
        assert exclude("any name", can) and not exclude("any name", other)
        expected = apply_models(raw[raw["_can"].eq(can)], shipped, "film")
        np.testing.assert_allclose(levels.loc[can].to_numpy(float),
                                   expected[["homo_ev", "lumo_ev", "gap_opt_ev"]].iloc[0].to_numpy(float))


def test_computed_validation_uses_the_cross_validation_folds(devices, raw):
    # on the published levels the fold models of the computed-level check predict exactly what the grouped
    # cross-validation predicts for the same devices
    rows = devices[devicevalidation.coverage(devices, raw)]
    assert len(rows) >= 10
    preds, baseline, chosen = devicevalidation._fold_predictions(devices, rows, {"published": rows}, "acceptor")
    cv = devicefit.cross_validate(devices, None, "acceptor")
    np.testing.assert_allclose(preds["published"]["voc_v"], cv.fitted.loc[rows.index, "voc_v"], atol=1e-12)
    assert baseline.notna().all() and sum(chosen.values()) == rows["group"].nunique()


def test_computed_levels_replace_the_six_levels(devices, raw):
    rows = devices[devicevalidation.coverage(devices, raw)].head(3)
    keys = {canonical(s) for s in pd.concat([rows["donor_smiles"], rows["acceptor_smiles"]])}
    levels = pd.DataFrame({"homo_ev": -5.0, "lumo_ev": -3.5, "gap_opt_ev": 1.6}, index=sorted(keys))
    comp = devicevalidation.computed_levels(rows, levels)
    assert (comp[["donor_homo_ev", "acceptor_homo_ev"]] == -5.0).all().all()
    assert (comp["acceptor_gap_opt_ev"] == 1.6).all() and comp["voc_v"].equals(rows["voc_v"])


def test_rank_limits_on_a_small_table():
    # blends A (0.80, 0.82), B (0.90), C (0.70, 0.74): within-blend rms sqrt((2·0.01² + 2·0.02²)/2) = 0.02236 V
    d = pd.DataFrame({"donor_group": ["a", "a", "b", "c", "c"], "group": ["x"] * 5,
                      "voc_v": [0.80, 0.82, 0.90, 0.70, 0.74], "acceptor_class": "nfa-fused",
                      "levels_converted": [False, False, True, True, True],
                      "donor_homo_ev": [-5.4, -5.4, -5.5, -5.3, -5.3], "acceptor_lumo_ev": -4.2,
                      "donor_gap_opt_ev": 1.8, "acceptor_gap_opt_ev": 1.4})
    lim = devicevalidation.rank_limits(d, d[["voc_v"]])
    b = lim["blends"]
    assert (b["n"], b["blends"], b["repeated_blends"], b["devices_in_repeated"]) == (5, 3, 2, 4)
    assert b["within_blend_rms_v"] == pytest.approx(np.sqrt(0.0005), abs=1e-9)
    # E_CT 1.2, 1.2, 1.3, 1.1, 1.1 eV: ranks (3.5, 3.5, 5, 1.5, 1.5) against (3, 4, 5, 1, 2) → 9/√90
    assert lim["e_ct_spearman"]["pooled"] == pytest.approx(9 / np.sqrt(90), abs=1e-9)
    assert lim["by_level_source"]["film_set"]["n"] == 2 and lim["by_level_source"]["converted"]["voc_mae_v"] == 0.0


def test_published_levels_put_back_one_set_at_a_time(devices, raw):
    # step 4 of the computed-level check: each substitution replaces exactly its columns by the published values
    rows = devices[devicevalidation.coverage(devices, raw)]
    keys = {canonical(s) for s in pd.concat([rows["donor_smiles"], rows["acceptor_smiles"]])}
    levels = pd.DataFrame({"homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5}, index=sorted(keys))  # one material
    r = devicevalidation.computed_validation(devices, levels, raw, "acceptor")
    subs = r["published_one_at_a_time"]
    assert set(subs) == set(devicevalidation.SUBSTITUTIONS)
    assert np.isnan(r["fitted"]["spearman_pce"])  # every pair the same: nothing to rank
    comp = devicevalidation.computed_levels(rows, levels)
    cols = devicevalidation.SUBSTITUTIONS["acceptor levels"]
    assert cols == ["acceptor_homo_ev", "acceptor_lumo_ev", "acceptor_gap_opt_ev"]
    view = comp.assign(**{c: rows[c] for c in cols})
    preds, _, _ = devicevalidation._fold_predictions(devices, rows, {"v": view}, "acceptor")
    assert subs["acceptor levels"] == devicefit._metrics(view, preds["v"])
    assert np.isfinite(subs["acceptor levels"]["spearman_pce"])
