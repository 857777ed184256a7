"""Edges found by a property-based audit of the device kernel, the dye-cell sampler, the gap window and the
absorber-gap rule.

F1  the sampler's kernel put the detailed-balance limit in place of a NaN efficiency (a level the model needs
    missing) and skipped the ΔHOMO check of a both-absorb model without the acceptor HOMO;
F2  the dye-cell sampler gave an E₀₋₀ below its 0.30 eV table the limits of 0.30 eV, and its σ = 0 mean was the
    tabulated, not the exact, estimate;
F4  the gap window had no tolerance: a gap written 1.0 was "outside the screening window (1.00–3.00 eV)";
F6  a pair whose absorber gap lay just inside the end of the spectrum was viable with Jsc 2.5e-21 mA cm⁻² and PCE
    written 0.0;
F7  (review of F6) the gap limit held only at EQE = 1: at the models' own EQE a 4.12 eV absorber was viable with
    Jsc 4.27e-5 mA cm⁻² (written 0.0000), and the fitted yield 1 − exp(−Δ/Δ0) gave offsets of a few neV a Jsc of
    6.7e-6; now the model's own Jsc is held to JSC_MIN_MA_CM2, in evaluate() and in the sampler's kernel, flagged by
    the factor that makes it vanish; the kernel takes the needed levels from DeviceModel.needed_missing.

Every expected number is a rule of the model itself (the classification, :meth:`DeviceModel.evaluate`,
:func:`screen.dyecell.model.evaluate`, the detailed-balance limit and Jsc of :mod:`screen.spectrum` on the
ASTM G173-03 AM1.5G table) or a level made up for the test, not a measured material.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

from screen.device import DeviceModel
from screen.dyecell.library import Material, resolve_mediator, resolve_oxide
from screen.dyecell.model import DyeCellModel
from screen.dyecell.model import evaluate as dye_evaluate
from screen.dyecell.model import sample_pce as dye_sample_pce
from screen.flags import describe
from screen.partners import resolve_partner
from screen.rank import _ROUND, RankOptions, rank_candidates
from screen.sampling import jsc_fast, _sq_below_ev, sq_fast, voc_fast
from screen.spectrum import jsc_ma_cm2, sq_pce_pct
from screen.viability import GAP_MAX_EV, gap_valid

#: the audit's pair with the acceptor HOMO missing (levels made up for the test) [eV]
NAN_HOMO_A = (-5.48, -3.94, 4.19, np.nan, -4.00, 2.52)
#: the audit's Scharber both-absorb pair without the acceptor HOMO [eV]
NAN_HOMO_A_SCHARBER = (-5.4, -3.9, 1.6, np.nan, -4.3, 1.5)


def _one(x):
    """The one element of a scalar or one-element result."""
    return np.ravel(x)[0]


def _kernel(model, levels, tables=False):
    """``pce_from_levels`` of one pair: exact, or with the sampler's tables and its detailed-balance shortcut."""
    lv = [np.array([x], dtype=float) for x in levels]
    loss = model.loss_ev()[0] if model.model != "scharber" else np.array(model.value("loss_v"))
    ff = model.ff_of() if model.model != "scharber" else None
    if not tables:
        return float(model.pce_from_levels(lv, loss, ff=ff)[0])
    return float(model.pce_from_levels(lv, loss, ff=ff, jsc_unit=jsc_fast, sq_pct=sq_fast, sq_voc=voc_fast,
                                       sq_below_ev=_sq_below_ev(model))[0])


# --------------------------------------------------------------------------- F1 the kernel and a missing level

@pytest.mark.parametrize("tables", [False, True])
def test_a_missing_level_gives_zero_never_the_detailed_balance_limit(tables):
    # the audit: 12.167 % = sq_pce_pct(2.52 eV) for a pair evaluate() calls input_missing
    m = DeviceModel()
    assert not _one(m.evaluate(*NAN_HOMO_A)["viable"])
    assert _kernel(m, NAN_HOMO_A, tables) == 0.0
    assert float(sq_pce_pct(2.52)) > 12.0  # what it got (the detailed-balance limit of the acceptor's gap)


@pytest.mark.parametrize("tables", [False, True])
def test_a_both_absorb_model_needs_the_acceptor_homo_in_the_kernel_too(tables):
    # the audit: Scharber with both absorbing gave 9.79 % from the kernel; evaluate: input_missing
    m = DeviceModel(model="scharber")
    out = m.evaluate(*NAN_HOMO_A_SCHARBER)
    assert "input_missing" in _one(out["flags"]) and not _one(out["viable"])
    assert _kernel(m, NAN_HOMO_A_SCHARBER, tables) == 0.0
    # the donor-only model does not need it: kernel and evaluate agree on a number
    d = DeviceModel(model="scharber", absorber="donor")
    assert _kernel(d, NAN_HOMO_A_SCHARBER) == pytest.approx(float(_one(d.evaluate(*NAN_HOMO_A_SCHARBER)["pce_pct"])),
                                                             rel=1e-12)


@pytest.mark.parametrize("spec", [{}, {"model": "scharber"}, {"model": "scharber", "absorber": "donor"},
                                  {"absorber": "donor"}])
def test_kernel_and_evaluate_agree_on_levels_with_holes(spec):
    # property: whatever level is missing, the kernel is 0 where evaluate() is not viable and its value elsewhere
    m = DeviceModel(**spec)
    rng = np.random.default_rng(3)
    n = 400
    gap_d, gap_a = rng.uniform(1.0, 3.0, n), rng.uniform(1.0, 3.0, n)
    homo_d, homo_a = rng.uniform(-6.0, -5.0, n), rng.uniform(-6.2, -5.2, n)
    levels = [homo_d, homo_d + gap_d + rng.uniform(0, 0.4, n), gap_d, homo_a, homo_a + gap_a + 0.2, gap_a]
    for k in range(6):  # one hole per level, every sixth row
        levels[k] = levels[k].copy()
        levels[k][k::6] = np.nan
    ev = m.evaluate(*levels)
    expected = np.where(ev["viable"], ev["pce_pct"], 0.0)
    loss = m.loss_ev()[0] if m.model != "scharber" else np.array(m.value("loss_v"))
    got = m.pce_from_levels(levels, loss, ff=m.ff_of() if m.model != "scharber" else None)
    assert np.all(np.isfinite(got))
    np.testing.assert_allclose(got, expected, rtol=1e-9, atol=1e-12)


# --------------------------------------------------------------------------- F2 the dye-cell sampler

DYE_OPEN = DyeCellModel(voc_loss_p_v=0.0, voc_loss_v=0.0, min_drive_inj_ev=0.0, min_drive_reg_ev=0.0)


def test_dye_sampler_caps_a_narrow_e00_at_its_own_limit():
    # the audit: NiO / iodide, E₀₋₀ 0.2 eV: evaluate 1.489 %, the sampler (σ = 0) 4.184 % (the limits of 0.30 eV)
    nio, iod = resolve_oxide("nio"), resolve_mediator("iodide-triiodide")
    point = float(dye_evaluate(DYE_OPEN, 0.5, 0.2, nio, iod)["pce_pct"][0])
    assert point == pytest.approx(float(sq_pce_pct(0.2)), rel=1e-12)  # the detailed-balance limit binds
    out = dye_sample_pce(DYE_OPEN, 0.5, 0.2, nio, iod)
    assert float(out["pce_mean_pct"][0]) == point


@pytest.mark.parametrize("oxide, e_ox, e00", [("nio", 0.5, 0.25), ("nio", 0.5, 0.32), ("n", 0.205, 0.26)])
def test_dye_sampler_matches_the_exact_model_sample_by_sample(oxide, e_ox, e00):
    # every sample below the 0.30 eV table gets its own detailed-balance limit: the sampler's mean is the mean of
    # evaluate() at the same sampled E₀₋₀ (the same deviates: default_rng(seed).standard_normal((2, n)), row 1)
    ox = (resolve_oxide("nio") if oxide == "nio" else
          Material(id="ox", name="ox", role="oxide", potential_v_nhe=0.0, type="n"))  # made up for the test
    med = (resolve_mediator("iodide-triiodide") if oxide == "nio" else
           Material(id="med", name="med", role="mediator", potential_v_nhe=0.2))
    n, seed, sigma = 4000, 11, 0.05
    eg = e00 + sigma * np.random.default_rng(seed).standard_normal((2, n))[1]
    ex = dye_evaluate(DYE_OPEN, np.full(n, e_ox), eg, ox, med)
    exact = np.where(ex["viable"], ex["pce_pct"], 0.0)
    assert (eg < 0.30).mean() > 0.3  # many samples below the table
    out = dye_sample_pce(DYE_OPEN, e_ox, e00, ox, med, e00_sigma_ev=sigma, n_samples=n, seed=seed, target_pct=1.0)
    # the 1 meV table differs from the exact integrals by ~1e-4 percentage points
    assert float(out["pce_mean_pct"][0]) == pytest.approx(exact.mean(), abs=2e-3)
    assert float(out["p_viable"][0]) == pytest.approx(ex["viable"].mean(), abs=1e-9)
    assert float(out["p_above_target"][0]) == pytest.approx((exact > 1.0).mean(), abs=2e-3)


def test_dye_sampler_without_uncertainty_is_the_point_estimate():
    # σ = 0: the exact estimate (the tables gave up to 1.5e-4 percentage points off), P(viable) 0 or 1, σ 0
    tio2, cobalt = resolve_oxide("tio2-anatase"), resolve_mediator("co-bpy3")
    rng = np.random.default_rng(5)
    e_ox, e00 = rng.uniform(0.6, 1.6, 60), rng.uniform(1.5, 3.0, 60)
    point = dye_evaluate(DyeCellModel(), e_ox, e00, tio2, cobalt)
    viable = np.asarray(point["viable"], bool)
    assert 5 < viable.sum() < 55
    out = dye_sample_pce(DyeCellModel(), e_ox, e00, tio2, cobalt, n_samples=50, target_pct=3.0)
    np.testing.assert_array_equal(out["pce_mean_pct"], np.where(viable, point["pce_pct"], 0.0))
    np.testing.assert_array_equal(out["p_viable"], viable.astype(float))
    np.testing.assert_array_equal(out["pce_sigma_pct"], np.where(viable, 0.0, np.nan))
    np.testing.assert_array_equal(out["p_above_target"], (np.where(viable, point["pce_pct"], 0.0) > 3.0) * 1.0)
    # a row with σ is sampled as before, whatever its neighbours are
    mixed = dye_sample_pce(DyeCellModel(), e_ox, e00, tio2, cobalt, e00_sigma_ev=np.r_[0.1, np.zeros(59)],
                           n_samples=50, target_pct=3.0)
    alone = dye_sample_pce(DyeCellModel(), e_ox[:1], e00[:1], tio2, cobalt, e00_sigma_ev=0.1, n_samples=50,
                           target_pct=3.0)
    assert float(mixed["pce_mean_pct"][0]) == float(alone["pce_mean_pct"][0])
    np.testing.assert_array_equal(mixed["pce_mean_pct"][1:], out["pce_mean_pct"][1:])


# --------------------------------------------------------------------------- F4 the gap window

def _rank_gaps(gaps, **options):
    lv = pd.DataFrame({"id": [f"g{i}" for i in range(len(gaps))], "homo_ev": -5.4, "lumo_ev": -3.9,
                       "gap_opt_ev": gaps, "scale": "film", "role": "donor"})
    return rank_candidates(lv, resolve_partner("y6"), options=RankOptions(n_samples=50, **options))


def test_a_gap_written_on_the_window_edge_is_inside_it():
    # the audit: 0.99999 eV, written 1.0, was "outside the screening window (1.00–3.00 eV)"
    r = _rank_gaps([0.99999, 0.99994, 1.50004]).set_index("id")
    assert r.loc["g0", "gap_opt_ev"] == 1.0 and "gap_out_of_window" not in r.loc["g0", "flags"]
    assert bool(r.loc["g0", "viable"])
    assert r.loc["g1", "gap_opt_ev"] == 0.9999 and "gap_out_of_window" in r.loc["g1", "flags"]
    assert "(1.00–3.00 eV)" in r.loc["g1", "reason"]  # the default window quoted as before


@pytest.mark.parametrize("window", [(1.0, 1.5), (1.23456, 1.5), (1.0, 1.49996), (1.2, 1.3001)])
def test_the_reason_never_contradicts_the_written_gap(window):
    # property: a row is flagged exactly when its gap as written lies outside the window as the reason quotes it
    lo, hi = window
    rng = np.random.default_rng(1)
    gaps = np.r_[lo + rng.uniform(-3e-4, 3e-4, 40), hi + rng.uniform(-3e-4, 3e-4, 40)]
    r = _rank_gaps(gaps, gap_min_ev=lo, gap_max_ev=hi)
    quoted = None
    for _, row in r.iterrows():
        flagged = "gap_out_of_window" in row["flags"]
        if flagged:
            m = re.search(r"window \(([\d.]+)–([\d.]+) eV\)", row["reason"])
            quoted = (float(m.group(1)), float(m.group(2)))
            assert not quoted[0] <= row["gap_opt_ev"] <= quoted[1], (row["gap_opt_ev"], quoted)
    assert quoted is not None
    for _, row in r.iterrows():  # every unflagged row's written gap is inside the quoted window
        if "gap_out_of_window" not in row["flags"]:
            assert quoted[0] <= row["gap_opt_ev"] <= quoted[1], (row["gap_opt_ev"], quoted)


def test_the_window_is_quoted_with_the_decimals_gaps_are_written_with():
    from screen.flags import WINDOW_DECIMALS

    assert WINDOW_DECIMALS == _ROUND
    text = describe("gap_out_of_window", {"rank": {"gap_min_ev": 1.23456, "gap_max_ev": 3.0}})
    assert text.endswith("(1.2346–3.00 eV)")


# --------------------------------------------------------------------------- F6 a gap at the end of the spectrum

def test_gap_max_is_where_sunlight_gives_no_written_current():
    # ASTM G173-03 AM1.5G (the project's spectrum): from GAP_MAX_EV on even EQE = 1 gives a Jsc written as 0
    # (< 5e-5 mA cm⁻², 4 decimals), a hundredth of an eV below it one that is written: the pre-filter gap_valid can
    # never refuse a pair the Jsc rule would keep (EQE ≤ 1, the yields ≤ 1, the photon current falls with the gap)
    from screen.dyecell.model import JSC_MIN_MA_CM2 as DYE_JSC_MIN
    from screen.viability import JSC_MIN_MA_CM2

    assert float(jsc_ma_cm2(GAP_MAX_EV, 1.0)) < JSC_MIN_MA_CM2
    assert float(jsc_ma_cm2(GAP_MAX_EV - 0.01, 1.0)) >= JSC_MIN_MA_CM2
    assert DYE_JSC_MIN == JSC_MIN_MA_CM2  # one limit for both modes
    assert gap_valid(np.array([GAP_MAX_EV - 1e-6, GAP_MAX_EV])).tolist() == [True, False]


def test_no_viable_pair_with_an_absorber_gap_beyond_the_written_current():
    # the audit: (-7.0, -2.5, 4.40, -7.5, -3.0, 4.40) was viable, Jsc 2.5e-21 mA cm⁻², PCE written 0.0
    m = DeviceModel()
    out = m.evaluate(-7.0, -2.5, 4.40, -7.5, -3.0, 4.40)
    assert not _one(out["viable"]) and _one(out["flags"]) == "absorber_gap_invalid"
    assert f"from {GAP_MAX_EV:.2f} eV on even at EQE = 1" in describe("absorber_gap_invalid")
    # property: along the edge of the spectrum every viable pair gets a Jsc and an efficiency written above 0
    # (4 decimals), and the kernel agrees with evaluate() on which are viable
    gaps = np.linspace(3.9, 4.5, 601)
    for spec in ({}, {"model": "scharber"}, {"model": "scharber", "absorber": "donor"}, {"eqe": 1.0}):
        mm = DeviceModel(**spec)
        levels = [-7.0, -7.0 + gaps + 0.1, gaps, -7.5, -7.0 + gaps - 0.4, gaps + 0.05]
        ev = mm.evaluate(*levels)
        viable = np.asarray(ev["viable"], bool)
        assert viable.any() and not viable.all()
        assert np.all(np.round(ev["pce_pct"][viable], 4) > 0)
        assert np.all(np.round(ev["jsc_ma_cm2"][viable], 4) > 0)
        assert np.all(gaps[viable] < GAP_MAX_EV)
        assert set(ev["flags"][~viable]) <= {"absorber_gap_invalid", "absorber_gap_invalid;donor_only_model"}
        loss = mm.loss_ev()[0] if mm.model != "scharber" else np.array(mm.value("loss_v"))
        kernel = mm.pce_from_levels([np.asarray(x, float) for x in levels], loss,
                                    ff=mm.ff_of() if mm.model != "scharber" else None)
        np.testing.assert_array_equal(kernel > 0, viable)


# --------------------------------------------------------------------------- F7 the model's own current

#: the review's pair: a 4.12 eV donor gap inside GAP_MAX_EV's old 4.12 eV (levels made up for the test) [eV]
EDGE_412 = (-7.0, -2.88, 4.12, -8.0, -3.3, 4.5)
#: the review's pair with both offsets 3e-9 eV (the fitted yield 1 − exp(−Δ/0.01 eV) ≈ 3e-7) [eV]
NEV_OFFSETS = (-5.65 + 3e-9, -4.09 + 3e-9, 1.36, -5.65, -4.09, 1.36)


def _kernel_of(model, levels, classes=None, tables=False):
    """``pce_from_levels`` of levels (arrays) with the model's own loss, EQE, fill factor and absorbers."""
    lv = [np.asarray(x, dtype=float) for x in levels]
    loss, _ = model.loss_ev(classes)
    kw = {"ff": model.ff_of(classes), "eqe": model.eqe_of(classes), "acceptor_absorbs": model.acceptor_absorbs(classes)}
    if tables:
        kw.update(jsc_unit=jsc_fast, sq_pct=sq_fast, sq_voc=voc_fast, sq_below_ev=_sq_below_ev(model))
    return model.pce_from_levels(lv, loss, **kw)


@pytest.mark.parametrize("spec", [{"model": "scharber", "absorber": "donor"}, {}, {"absorber": "donor"},
                                  {"model": "scharber"}])
@pytest.mark.parametrize("tables", [False, True])
def test_an_absorber_whose_current_is_written_as_zero_at_the_models_eqe_is_not_viable(spec, tables):
    # the review: Scharber donor-only (EQE 0.65) was viable with Jsc 4.27e-5 mA cm⁻² (written 0.0000), PCE 9e-5 %;
    # the fitted model (EQE 0.649) the same; at EQE = 1 the photons above 4.12 eV give 6.6e-5
    from screen.viability import JSC_MIN_MA_CM2

    m = DeviceModel(**spec)
    assert m.value("eqe") * float(jsc_ma_cm2(4.12, 1.0)) < JSC_MIN_MA_CM2 <= float(jsc_ma_cm2(4.12, 1.0))
    out = m.evaluate(*EDGE_412)
    assert not _one(out["viable"]) and "absorber_gap_invalid" in _one(out["flags"]).split(";")
    assert np.isnan(_one(out["jsc_ma_cm2"])) and np.isnan(_one(out["pce_pct"]))
    assert _kernel_of(m, [np.array([x]) for x in EDGE_412], tables=tables)[0] == 0.0
    # the same levels at EQE = 1 are viable, with a Jsc written above 0 (the rule is the model's current, not a gap)
    one = DeviceModel(**spec, eqe=1.0).evaluate(*EDGE_412)
    assert _one(one["viable"]) and round(float(_one(one["jsc_ma_cm2"])), 4) > 0


@pytest.mark.parametrize("tables", [False, True])
def test_an_offset_of_a_few_nev_is_no_offset(tables):
    # the review: both offsets 3e-9 eV, the fitted model: viable, Jsc 6.7e-6 mA cm⁻², PCE written 0.0. Offsets are
    # judged as written (4 decimals, screen.viability.OFFSET_TOL_EV): 3e-9 eV is written 0.0, no type-II offset
    # (before that the yields made the current vanish and the flags were lumo_offset_low;homo_offset_low)
    m = DeviceModel()
    out = m.evaluate(*NEV_OFFSETS)
    assert not _one(out["viable"]) and _one(out["flags"]) == "lumo_inverted;homo_inverted"
    assert np.isnan(_one(out["pce_pct"]))
    assert _kernel_of(m, [np.array([x]) for x in NEV_OFFSETS], tables=tables)[0] == 0.0
    d = DeviceModel(absorber="donor")
    assert _one(d.evaluate(*NEV_OFFSETS)["flags"]) == "lumo_inverted;homo_inverted"
    # ΔHOMO of a few neV beside a 0.3 eV ΔLUMO: only the HOMO offset is named
    lone = (-5.65 + 3e-9, -3.79, 4.3, -5.65, -4.09, 1.36)
    assert _one(m.evaluate(*lone)["flags"]) == "homo_inverted"
    assert _kernel_of(m, [np.array([x]) for x in lone], tables=tables)[0] == 0.0
    # the reason says so, not "below 0.00 eV" (the fitted model's threshold is type II)
    settings = {"device": {"min_delta_lumo_ev": 0.0, "min_delta_homo_ev": 0.0}}
    for code in ("lumo_offset_low", "homo_offset_low"):
        text = describe(code, settings)
        assert "0.00 eV" not in text and "charge-generation yield" in text and "0.00005 mA cm⁻²" in text
    assert describe("lumo_offset_low", {"device": {"min_delta_lumo_ev": 0.3}}).startswith(
        "LUMO offset to the partner below 0.30 eV")  # a threshold is quoted as before


@pytest.mark.parametrize("spec", [{}, {"absorber": "donor"}, {"model": "scharber"}, {"fullerene_absorbs": False}])
def test_every_viable_pair_writes_a_current_and_the_kernel_agrees(spec):
    # property: offsets from 0 to 1e-6 eV and absorber gaps 3.9–4.2 eV (and ordinary ones), the model's own EQE and
    # yields: evaluate() keeps exactly the pairs whose Jsc is written above 0; the kernel (exact and tabulated) gives
    # 0 where evaluate() is not viable and its efficiency elsewhere, also where a fullerene acceptor does not count
    # as an absorber (a made-up parameter set: the donor-absorber current decides, not the both-absorb one)
    import dataclasses

    from screen.devicepars import load_fitted
    from screen.viability import JSC_MIN_MA_CM2

    if "fullerene_absorbs" in spec:
        m = DeviceModel(parameters=dataclasses.replace(load_fitted(), fullerene_absorbs=False))
    else:
        m = DeviceModel(**spec)
    rng = np.random.default_rng(7)
    n = 3000
    small = rng.random((2, n)) < 0.5
    d_l = np.where(small[0], rng.uniform(0, 1e-6, n), rng.uniform(0.01, 0.5, n))
    d_h = np.where(small[1], rng.uniform(0, 1e-6, n), rng.uniform(0.01, 0.5, n))
    g_d = np.where(rng.random(n) < 0.5, rng.uniform(3.9, 4.2, n), rng.uniform(1.2, 2.5, n))
    g_a = np.where(rng.random(n) < 0.5, rng.uniform(3.9, 4.2, n), rng.uniform(1.2, 2.5, n))
    h_d = rng.uniform(-7.5, -5.0, n)
    levels = [h_d, -3.0 + d_l, g_d, h_d - d_h, np.full(n, -3.0), g_a]
    classes = rng.choice(np.array(["fullerene", "nfa-fused"], dtype=object), n)
    ev = m.evaluate(*levels, acceptor_class=classes)
    viable = np.asarray(ev["viable"], bool)
    assert 50 < viable.sum() < n - 50
    assert np.all(ev["jsc_ma_cm2"][viable] >= JSC_MIN_MA_CM2)
    reasons = {"absorber_gap_invalid", "lumo_offset_low", "homo_offset_low", "voc_nonpositive", "lumo_inverted",
               "homo_inverted"}
    for cell in ev["flags"][~viable]:  # every pair that is not viable says why, with a reason of this list
        assert set(cell.split(";")) & reasons and set(cell.split(";")) <= reasons | {"donor_only_model"}, cell
    expected = np.where(viable, ev["pce_pct"], 0.0)
    np.testing.assert_allclose(_kernel_of(m, levels, classes), expected, rtol=1e-9, atol=1e-12)
    tab = _kernel_of(m, levels, classes, tables=True)
    # the tables (0.25 meV steps) may differ from the exact integrals only within a hair of the current limit
    near = np.abs(np.asarray(ev["jsc_ma_cm2"], float) / JSC_MIN_MA_CM2 - 1) < 1e-3
    np.testing.assert_array_equal((tab > 0)[~near], viable[~near])


def test_the_kernel_takes_the_needed_levels_from_the_model(monkeypatch):
    # the review: the kernel's loop copied DeviceModel.needed_missing's list of needed levels; one list now
    m = DeviceModel(model="scharber", absorber="donor")
    lv = [np.array([-5.4, -5.4]), np.array([-3.9, -3.9]), 1.5, -6.0, -4.3, 2.0]
    assert _kernel_of(m, lv).tolist() == pytest.approx([9.79, 9.79], abs=5e-3)
    monkeypatch.setattr(DeviceModel, "needed_missing",
                        lambda self, levels, shape: np.broadcast_to(np.array([True, False]), shape))
    got = _kernel_of(m, lv)
    assert got[0] == 0.0 and got[1] == pytest.approx(9.79, abs=5e-3)
