"""The EQE of the fitted device model per acceptor class (a device physicist's audit, 2026-12-05: one pooled EQE put
the fullerene blends' Jsc about 3 mA cm⁻² above their measured values and the fused-ring non-fullerene blends' below).

Check values: the published devices of ``models/reference/devices.csv`` (each row's source and from_memory flag in
the file), held out one acceptor structure at a time; the per-class EQE must lower the held-out Jsc error there (the
reason it exists). Everything else is a consistency check of one formula across its paths.
"""

from __future__ import annotations

import numpy as np
import pytest

from screen import devicefit
from screen.device import DeviceModel
from screen.devicepars import FittedParameters, load_fitted
from screen.errors import ConfigError
from screen.sampling import sample_pce

#: a fused-ring acceptor against a wide-gap polymer donor (illustrative film-scale levels, eV; not a check value)
PAIR = (-5.50, -3.50, 1.80, -5.65, -4.09, 1.36)


@pytest.fixture(scope="module")
def devices():
    return devicefit.resolve_levels()


def _params(**kw) -> FittedParameters:
    base = dict(loss_ev={"pooled": 0.55}, eqe_max=0.65, offset_scale_ev=0.01, ff=0.66)
    return FittedParameters(**(base | kw))


def test_class_values_fall_back_to_the_family_then_pooled():
    p = _params(eqe_by_class={"fullerene": 0.5, "non-fullerene": 0.7, "nfa-fused": 0.72})
    assert p.eqe_for(["fullerene", "nfa-fused", "polymer", ""]).tolist() == [0.5, 0.72, 0.7, 0.65]
    assert p.eqe_bound == 0.72
    assert p.as_dict()["eqe_by_class"] == {"fullerene": 0.5, "non-fullerene": 0.7, "nfa-fused": 0.72}


@pytest.mark.parametrize("bad", [0.0, 1.2, float("nan")])
def test_an_impossible_class_eqe_is_refused(bad):
    with pytest.raises(ConfigError, match=r"eqe_by_class\['fullerene'\].*need 0 < eqe <= 1"):
        _params(eqe_by_class={"fullerene": bad})


def test_the_jsc_of_a_pair_scales_with_its_class_eqe():
    p = _params(eqe_by_class={"fullerene": 0.5, "nfa-fused": 0.75})
    m = DeviceModel(parameters=p)
    out = m.evaluate(*PAIR, acceptor_class=np.array(["nfa-fused", "fullerene", ""]))
    jsc = out["jsc_ma_cm2"]
    assert jsc[0] / jsc[2] == pytest.approx(0.75 / 0.65, rel=1e-12)
    assert jsc[1] / jsc[2] == pytest.approx(0.5 / 0.65, rel=1e-12)
    # a value the user sets is every pair's EQE
    set_ = DeviceModel(parameters=p, eqe=0.6)
    assert set_.eqe_of(["fullerene", "nfa-fused"]).tolist() == [0.6, 0.6] and not set_.eqe_follows_class
    assert DeviceModel(parameters=p).eqe_follows_class


def test_the_sampler_uses_the_class_eqe():
    # with a tiny σ the Monte-Carlo mean is the estimate of the flagged path, class by class
    p = _params(eqe_by_class={"fullerene": 0.5, "nfa-fused": 0.75})
    m = DeviceModel(parameters=p)
    classes = np.array(["nfa-fused", "fullerene", ""])
    exact = m.evaluate(*PAIR, acceptor_class=classes)["pce_pct"]
    mc = sample_pce(m, *PAIR, donor_homo_sigma_ev=1e-4, acceptor_lumo_sigma_ev=1e-4, acceptor_class=classes,
                    n_samples=256)
    np.testing.assert_allclose(mc["pce_mean_pct"], exact, rtol=2e-3)


def test_the_ceiling_takes_the_largest_class_eqe():
    low = DeviceModel(parameters=_params())
    high = DeviceModel(parameters=_params(eqe_by_class={"nfa-fused": 0.78}))
    assert high.pce_bound_pct() == pytest.approx(low.pce_bound_pct() * 0.78 / 0.65, rel=1e-9)


def test_the_shipped_fit_keeps_class_values_and_says_how_it_chose_them():
    p = load_fitted()
    assert p.meta["eqe_split"] in devicefit.EQE_SPLITS
    assert set(p.meta["eqe_split_cv_jsc_mae_ma_cm2"]) == set(devicefit.EQE_SPLITS)
    chosen = p.meta["eqe_split"]
    assert p.meta["eqe_split_cv_jsc_mae_ma_cm2"][chosen] == min(p.meta["eqe_split_cv_jsc_mae_ma_cm2"].values())
    assert bool(p.eqe_by_class) == (chosen != "pooled")


def test_per_class_eqe_lowers_the_held_out_jsc_error(devices):
    # the loss, fill factor and absorber choices fixed (what the shipped fit chose) so that only the EQE differs
    fixed = dict(per_class="pooled+slope", ff_split="class", fullerene_absorbs=True)
    pooled = devicefit.cross_validate(devices, by="acceptor", eqe_split="pooled", **fixed).metrics
    split = devicefit.cross_validate(devices, by="acceptor", eqe_split="class", **fixed).metrics
    assert split["fitted"]["n_jsc"] == pooled["fitted"]["n_jsc"] >= 80
    assert split["fitted"]["jsc_mae_ma_cm2"] < pooled["fitted"]["jsc_mae_ma_cm2"] - 0.2
    # the fullerene blends' current no longer sits ~3 mA cm⁻² high on average
    full = lambda m: m["by_class"]["fullerene"]["fitted_jsc_bias_ma_cm2"]  # noqa: E731
    assert abs(full(split)) < abs(full(pooled))
    # Voc does not depend on the EQE
    assert split["fitted"]["voc_mae_v"] == pytest.approx(pooled["fitted"]["voc_mae_v"], abs=1e-12)


def test_the_eqe_split_is_chosen_inside_each_training_fold(devices, monkeypatch):
    seen = []
    real = devicefit.choose_eqe_split

    def spy(train, key="group", *args, **kwargs):
        seen.append(set(train["device_id"]))
        return real(train, key, *args, **kwargs)

    monkeypatch.setattr(devicefit, "choose_eqe_split", spy)
    fixed = dict(per_class="pooled+slope", ff_split="class", fullerene_absorbs=True)
    cv = devicefit.cross_validate(devices, by="acceptor", **fixed)
    assert len(seen) == devices["group"].nunique()
    # every fold chose without its held-out devices, and says what it chose
    assert all(not (s & set(devices.loc[devices["group"].eq(g), "device_id"]))
               for s, g in zip(seen, sorted(devices["group"].unique())))
    assert all(", eqe " in k for k in cv.metrics["variants_per_fold"])
