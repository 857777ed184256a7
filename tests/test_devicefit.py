"""Tests of screen.devicefit: device levels on one scale, and the fitted device model against Scharber's rule on
held-out published devices."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from screen import devicefit
from screen.device import DeviceModel
from screen.devicepars import FITTED_PATH, FittedParameters, load_fitted
from screen.errors import ConfigError
from screen.provenance import sha256_file


@pytest.fixture(scope="module")
def devices():
    return devicefit.read_devices()


@pytest.fixture(scope="module")
def cvs(devices):
    return {by: devicefit.cross_validate(devices, None, by) for by in devicefit.GROUPINGS}


@pytest.mark.parametrize("by", ["acceptor", "donor"])
def test_fitted_model_beats_scharber_rule_on_held_out_devices(cvs, by):
    # models/reference/devices.csv: published devices (sources and from_memory flags in the file); every
    # acceptor (or donor) structure held out in turn. The fitted model must predict Voc better than Scharber's
    # rule (Scharber et al., Adv. Mater. 18 (2006) 789, doi:10.1002/adma.200501717) to be the default.
    m = cvs[by].metrics
    assert m["n_groups"] >= 10 and m["fitted"]["n"] >= 40
    assert m["fitted"]["voc_mae_v"] < m["scharber"]["voc_mae_v"]
    # working devices called not viable: the smooth yield keeps (nearly) all of them
    assert m["fitted"]["not_viable"] < m["scharber"]["not_viable"]
    # the PCE rank check also counts the devices that have a PCE but no Voc
    assert m["fitted"]["n_pce_without_voc"] > 0 and m["fitted"]["n_pce"] > m["fitted"]["n"]


@pytest.mark.parametrize("by", ["acceptor", "donor"])
def test_held_out_means_held_out(devices, cvs, by):
    # a held-out device's prediction must not change when its own Voc changes (also through the loss variant,
    # which is chosen inside each training fold)
    key = devicefit.GROUPINGS[by]
    d = devices.copy()
    target = d.index[d[key].eq(d.loc[d["voc_v"].notna(), key].iloc[0])]
    d.loc[target, "voc_v"] += 0.5
    again = devicefit.cross_validate(d, None, by)
    np.testing.assert_allclose(again.fitted.loc[target, "voc_v"], cvs[by].fitted.loc[target, "voc_v"], atol=1e-12)


def test_fullerene_rows_use_the_film_scale():
    # levels_film.csv, C60 row: E1/2(red) -0.98 V vs Fc/Fc+ (Yang, Arias, Echegoyen et al., J. Am. Chem. Soc. 117
    # (1995) 7801, as quoted on a vendor page; read), Fc = -4.8 eV: LUMO -3.82 eV; the device table quotes
    # vacuum-diagram values (-4.5 eV, UPS/IPES-type, devices.csv rows, from memory) for the same material
    table = devicefit.level_table()
    c60 = table[table["acceptor"].eq("C60")]
    assert len(c60) >= 10
    assert (c60["paper_acceptor_lumo_ev"] == -4.5).all()
    np.testing.assert_allclose(c60["acceptor_lumo_ev"], -3.82)
    assert c60["acceptor_level_source"].eq("film:C60").all()
    # nothing usable keeps a diagram-style fullerene LUMO: -4.25 eV lies between the diagram values (-4.5 eV) and
    # every CV fullerene LUMO of levels_film.csv (-3.72 to -3.86 eV)
    used = table[table["drop_reason"].eq("")]
    assert not used["acceptor_lumo_ev"].le(-4.25).any()


def test_ferrocene_conversion_and_dropped_rows(tmp_path):
    # CV levels quoted with ferrocene at -5.1 eV are 0.3 eV deeper than on the -4.8 eV scale
    # (E = E_Fc - E_onset vs Fc; Cardona et al., Adv. Mater. 23 (2011) 2367, doi:10.1002/adma.201004554)
    src = pd.read_csv(devicefit.DEVICES_PATH)
    row = src[src["device_id"].eq("pbdbt-y1-2019")].copy()  # Y1 has no film-set row
    row["fc_reference_ev"] = -5.1
    row["acceptor_homo_ev"], row["acceptor_lumo_ev"] = -5.75, -4.25
    blank = src[src["device_id"].eq("pbdbt-bcic-2021")]  # acceptor levels not known
    path = tmp_path / "devices.csv"
    pd.concat([row, blank]).to_csv(path, index=False)
    table = devicefit.level_table(path)
    y1 = table.iloc[0]
    assert y1["acceptor_level_source"] == "paper-cv:+0.30" and bool(y1["levels_converted"])
    assert y1["acceptor_homo_ev"] == pytest.approx(-5.45) and y1["acceptor_lumo_ev"] == pytest.approx(-3.95)
    assert y1["acceptor_gap_opt_ev"] == pytest.approx(row["acceptor_gap_opt_ev"].iloc[0])  # gaps not shifted
    assert y1["donor_level_source"].startswith("film:PBDB-T")
    assert "acceptor" in table.iloc[1]["drop_reason"] and "not known" in table.iloc[1]["drop_reason"]
    kept = devicefit.read_devices(path)
    assert list(kept["device_id"]) == ["pbdbt-y1-2019"]
    assert kept.attrs["dropped"][0]["device_id"] == "pbdbt-bcic-2021"


def test_shipped_model_is_fitted_on_the_current_device_set():
    data = json.loads(FITTED_PATH.read_text())
    assert data["devices_sha256"] == sha256_file(devicefit.DEVICES_PATH), "refit: python -m screen.devicefit --write"
    assert data["levels_film_sha256"] == sha256_file(devicefit.FILM_PATH), "refit: python -m screen.devicefit --write"
    assert data["beats_scharber"] is True
    assert DeviceModel().model == "fitted"
    # every row used is in the device table, with both level sources recorded; dropped rows have a reason
    ids = set(pd.read_csv(devicefit.DEVICES_PATH)["device_id"])
    assert {r["device_id"] for r in data["rows_used"]} <= ids
    assert all(r["donor_levels"] and r["acceptor_levels"] for r in data["rows_used"])
    assert len(data["rows_used"]) + len(data["rows_dropped"]) == len(ids)
    assert all(r["drop_reason"] for r in data["rows_dropped"])
    for key in ("cv", "cv_leave_donor_out"):
        m = data[key]
        assert {"fitted", "scharber", "mean_voc_baseline", "by_class"} <= set(m)
    p = load_fitted()
    # Veldman et al., Adv. Funct. Mater. 19 (2009) 1939, doi:10.1002/adfm.200801834: eVoc ≈ E_CT − 0.5 eV in
    # fullerene blends (CT energies measured there); the loss of a non-fullerene blend at the typical E_CT
    # must be of that size
    loss = p.loss_at(p.loss_for(["nfa-fused"]), np.array([p.ect_ref_ev or 1.45]))
    assert 0.3 < float(loss[0]) < 0.7
    assert 0 < p.eqe_max <= 1 and 0 < p.offset_scale_ev < 0.4


def test_report_figures_on_computed_levels_are_current_for_every_shipped_protocol():
    # the report's "Tested on published devices" reads models/device/computed_validation.json: it must have been
    # written on the current device set, device model and each shipped protocol's calibration
    from screen.devicepars import VALIDATION_PATH, device_tests

    data = json.loads(VALIDATION_PATH.read_text())
    folders = sorted(p for p in FITTED_PATH.parent.parent.iterdir() if (p / "statistics.csv").is_file())
    assert folders, "no shipped protocol folder"
    fix = "rerun: python benchmarks/device_validation.py --raw models/{}/reference_raw.csv --write"
    for folder in folders:
        rec = data.get(folder.name)
        assert rec is not None, fix.format(folder.name)
        assert rec["devices_sha256"] == sha256_file(devicefit.DEVICES_PATH), fix.format(folder.name)
        assert rec["levels_film_sha256"] == sha256_file(devicefit.FILM_PATH), fix.format(folder.name)
        assert rec["fitted_sha256"] == sha256_file(FITTED_PATH), fix.format(folder.name)
        assert rec["calibration_statistics_sha256"] == sha256_file(folder / "statistics.csv"), fix.format(folder.name)
        assert rec["raw_sha256"] == sha256_file(folder / "reference_raw.csv"), fix.format(folder.name)
        tests = device_tests("fitted", folder.name)
        comp = tests["computed_levels"]
        assert comp["protocol_id"] == folder.name and comp["n"] == rec["acceptor"]["fitted"]["n"] > 0
        assert device_tests("scharber", folder.name)["computed_levels"]["voc_mae_v"] == pytest.approx(
            rec["acceptor"]["scharber"]["voc_mae_v"])
    # levels the user measured have no protocol: only the film-scale figures apply
    assert device_tests("fitted", None)["computed_levels"] is None


def _synthetic(n=40, seed=3):
    rng = np.random.default_rng(seed)
    d_homo = rng.uniform(-5.6, -5.1, n)
    d_gap, a_gap = rng.uniform(1.5, 1.9, n), rng.uniform(1.2, 1.6, n)
    a_lumo = d_homo + d_gap + 0.3 - rng.uniform(0.02, 0.5, n)  # ΔLUMO 0.02–0.5 eV
    a_homo = d_homo - rng.uniform(0.02, 0.4, n)  # ΔHOMO 0.02–0.4 eV
    frame = pd.DataFrame({"device_id": [f"s{i}" for i in range(n)], "acceptor": [f"a{i % 8}" for i in range(n)],
                          "acceptor_smiles": [f"a{i % 8}" for i in range(n)], "acceptor_class": "nfa-fused",
                          "donor_homo_ev": d_homo, "donor_lumo_ev": d_homo + d_gap + 0.3,
                          "donor_gap_opt_ev": d_gap, "acceptor_homo_ev": a_homo,
                          "acceptor_lumo_ev": a_lumo, "acceptor_gap_opt_ev": a_gap})
    frame["group"] = frame["acceptor_smiles"]
    return frame


def test_fit_recovers_a_known_loss_and_eqe():
    # synthetic devices made with the model's own formula: the fit must give the parameters back
    frame = _synthetic()
    n = len(frame)
    true = FittedParameters(loss_ev={"pooled": 0.55}, eqe_max=0.7, offset_scale_ev=0.05, ff=0.7)
    model = DeviceModel(parameters=true)
    fig = model.figures([frame[c].to_numpy(float) for c in devicefit._LEVELS], np.full(n, 0.55))
    frame["voc_v"], frame["jsc_ma_cm2"] = fig["voc_v"], fig["jsc_ma_cm2"]
    frame["ff"], frame["pce_pct"] = 0.7, fig["pce_pct"]
    fit = devicefit.fit(frame)
    assert fit.loss_ev["pooled"] == pytest.approx(0.55, abs=1e-9) and fit.loss_slope == 0.0
    assert fit.eqe_max == pytest.approx(0.7, rel=0.02) and fit.offset_scale_ev == pytest.approx(0.05, abs=0.011)
    assert fit.ff == pytest.approx(0.7)


def test_fit_recovers_a_loss_that_grows_with_the_ct_energy():
    # synthetic Voc = E_CT − (0.5 + 0.4 (E_CT − mean E_CT)): the '+slope' variant gives 0.4 and 0.5 back, the
    # model's own Voc reproduces the data, and the constant-loss variant does not
    frame = _synthetic(seed=5)
    e_ct = devicefit._e_ct(frame)
    ref = float(e_ct.mean())
    frame["voc_v"] = e_ct - (0.5 + 0.4 * (e_ct - ref))
    frame["jsc_ma_cm2"], frame["ff"], frame["pce_pct"] = 20.0, 0.7, 10.0
    fit = devicefit.fit(frame, "pooled+slope")
    assert fit.loss_slope == pytest.approx(0.4, abs=1e-9) and fit.loss_ev["pooled"] == pytest.approx(0.5, abs=1e-9)
    assert fit.ect_ref_ev == pytest.approx(ref)
    voc = devicefit.predict(DeviceModel(parameters=fit, absorber="both"), frame)["voc_v"]
    np.testing.assert_allclose(voc, frame["voc_v"], atol=1e-9)
    best, scores = devicefit.choose_split(frame)
    assert best.endswith("+slope") and scores["pooled+slope"] < scores["pooled"]


def test_sampler_kernel_agrees_with_the_formula_for_a_sloped_loss():
    # the Monte-Carlo kernel (pce_samples) and the flagged path (figures) share one formula
    p = FittedParameters(loss_ev={"pooled": 0.55}, eqe_max=0.7, offset_scale_ev=0.05, ff=0.7, loss_slope=0.5,
                         ect_ref_ev=1.4)
    m = DeviceModel(parameters=p, absorber="both")
    frame = _synthetic(seed=7)
    levels = [frame[c].to_numpy(float) for c in devicefit._LEVELS]
    fig = m.figures(levels, np.full(len(frame), 0.55))
    np.testing.assert_allclose(m.pce_from_levels(levels, np.full(len(frame), 0.55)), fig["pce_pct"], rtol=1e-9)
    e_ct = devicefit._e_ct(frame)
    np.testing.assert_allclose(fig["voc_model_v"] if "voc_model_v" in fig else
                               m.figures(levels, 0.55, keep_model_values=True)["voc_model_v"],
                               np.fmin(e_ct - np.maximum(0.55 + 0.5 * (e_ct - 1.4), 0),
                                       np.fmin(frame["donor_gap_opt_ev"], frame["acceptor_gap_opt_ev"])), atol=1e-12)


def test_evaluate_reports_the_loss_applied():
    # evaluate() returns the loss the Voc was computed with: the class loss grown by loss_slope·(E_CT − ect_ref_ev)
    # (Voc = E_CT − loss, Veldman et al., Adv. Funct. Mater. 19 (2009) 1939, doi:10.1002/adfm.200801834), not the
    # constant class value
    p = FittedParameters(loss_ev={"pooled": 0.55}, eqe_max=0.7, offset_scale_ev=0.05, ff=0.7, loss_slope=0.5,
                         ect_ref_ev=1.4)
    frame = _synthetic(seed=9)
    levels = [frame[c].to_numpy(float) for c in devicefit._LEVELS]
    e_ct = devicefit._e_ct(frame)
    out = DeviceModel(parameters=p, absorber="both").evaluate(*levels)
    applied = np.maximum(0.55 + 0.5 * (e_ct - 1.4), 0.0)
    np.testing.assert_allclose(out["loss_ev"], applied, atol=1e-12)
    assert np.ptp(out["loss_ev"]) > 0.05
    ok = out["viable"] & ~out["voc_capped"]
    assert ok.sum() > 5
    np.testing.assert_allclose(out["voc_v"][ok], (e_ct - out["loss_ev"])[ok], atol=1e-12)
    flat = DeviceModel(parameters=FittedParameters(loss_ev={"pooled": 0.55}, eqe_max=0.7, offset_scale_ev=0.05,
                                                   ff=0.7), absorber="both").evaluate(*levels)
    np.testing.assert_allclose(flat["loss_ev"], 0.55)


def test_constant_variants_alone_choose_no_slope(devices):
    # the nested CV offered only Veldman's constant loss (per split) never picks an E_CT-dependent loss
    cv = devicefit.cross_validate(devices, None, "acceptor", devicefit.CONSTANT_VARIANTS)
    assert cv.metrics["variants_per_fold"] and not any("+slope" in k for k in cv.metrics["variants_per_fold"])
    assert set(devicefit.CONSTANT_VARIANTS) == {"pooled", "family", "class"}


def test_planar_bilayers_are_not_blends(tmp_path):
    # the model estimates bulk-heterojunction blends; a planar bilayer row is dropped with its reason,
    # an empty architecture means a blend
    src = pd.read_csv(devicefit.DEVICES_PATH)
    rows = src[src["device_id"].isin(["pbdbt-y1-2019", "pentacene-c60-2004"])].copy()
    rows["architecture"] = ["planar bilayer" if d == "pentacene-c60-2004" else "" for d in rows["device_id"]]
    path = tmp_path / "devices.csv"
    rows.to_csv(path, index=False)
    table = devicefit.level_table(path).set_index("device_id")
    assert "planar bilayer, not a bulk-heterojunction blend" in table.at["pentacene-c60-2004", "drop_reason"]
    assert "architecture" not in table.at["pbdbt-y1-2019", "drop_reason"]
    assert "pentacene-c60-2004" not in set(devicefit.read_devices(path)["device_id"])


def test_fill_factor_per_acceptor_class_ranks_held_out_devices_better(devices, cvs):
    # models/reference/devices.csv (published devices): the median FF of fullerene blends (small-molecule
    # donors) is ≈ 0.58 and of fused-ring non-fullerene blends ≈ 0.70. The FF split chosen inside each
    # training fold must rank held-out PCE at least as well as one pooled FF, in both groupings, and well above
    # Scharber's rule on the same devices (≈ −0.35). The issue-11 target Spearman(PCE) ≥ 0.4 (project's own) is
    # printed by benchmarks/device_validation.py: since the C70 film gap was read (Tauc 1.65 eV instead of a
    # recalled 1.80 eV) the acceptor grouping reaches 0.37 (0.374; 0.375 with the fullerene-absorber choice nested
    # in the folds, which keeps fullerenes as absorbers in 21 of 22 folds; donor grouping 0.48), so the floor here
    # guards against a collapse only.
    for by, cv in cvs.items():
        pooled = devicefit.cross_validate(devices, None, by, ff_split="pooled").metrics["fitted"]
        nested = cv.metrics["fitted"]
        assert nested["spearman_pce"] >= pooled["spearman_pce"], by
        assert nested["spearman_pce"] >= 0.3, by
        assert nested["spearman_pce"] >= cv.metrics["scharber"]["spearman_pce"] + 0.3, by
        # the FF does not touch Voc
        assert nested["voc_mae_v"] == pytest.approx(pooled["voc_mae_v"], abs=1e-12)
        assert any(", ff class" in k or ", ff family" in k for k in cv.metrics["variants_per_fold"])


def test_fill_factor_split_recovers_class_values():
    # synthetic devices: FF 0.55 for fullerene and 0.72 for fused-ring acceptors (invented), small noise;
    # the class split wins the inner CV and the fit returns both medians
    frame = _synthetic(seed=3)
    cls = np.where(np.arange(len(frame)) % 2 == 0, "fullerene", "nfa-fused")
    frame = frame.assign(acceptor_class=cls,
                         ff=np.where(cls == "fullerene", 0.55, 0.72) + np.random.default_rng(4).normal(0, 0.01,
                                                                                                      len(frame)))
    best, scores = devicefit.choose_ff_split(frame)
    assert best in ("family", "class") and scores["pooled"] > scores[best] + 0.05
    pooled, by_class = devicefit._ff_core(*devicefit._ff_arrays(frame), best)
    p = FittedParameters(loss_ev={"pooled": 0.5}, eqe_max=0.7, offset_scale_ev=0.05, ff=pooled, ff_by_class=by_class)
    assert p.ff_for(["fullerene"])[0] == pytest.approx(0.55, abs=0.01)
    assert p.ff_for(["nfa-fused"])[0] == pytest.approx(0.72, abs=0.01)
    assert p.ff_for([""])[0] == pytest.approx(np.median(frame["ff"]), abs=1e-12)


def test_fill_factor_per_class_reaches_every_path():
    # evaluate, the sampler and the report header use the class FF; an explicit device.ff overrides it
    p = FittedParameters(loss_ev={"pooled": 0.55}, eqe_max=0.7, offset_scale_ev=0.05, ff=0.65,
                         ff_by_class={"fullerene": 0.52, "nfa-fused": 0.71})
    m = DeviceModel(parameters=p, absorber="both")
    levels = (-5.4, -3.4, 1.9, -5.7, -3.9, 1.5)
    classes = np.array(["fullerene", "nfa-fused", "polymer"])
    out = m.evaluate(*levels, acceptor_class=classes)
    assert out["ff"].tolist() == [0.52, 0.71, 0.65]
    assert out["pce_pct"][1] / out["pce_pct"][0] == pytest.approx(0.71 / 0.52, rel=1e-12)
    from screen.sampling import sample_pce
    s = sample_pce(m, *(np.full(3, x) for x in levels), acceptor_class=classes, n_samples=64)
    np.testing.assert_allclose(s["pce_mean_pct"], out["pce_pct"], rtol=1e-9)
    fixed = DeviceModel(parameters=p, absorber="both", ff=0.6).evaluate(*levels, acceptor_class=classes)
    assert fixed["ff"].tolist() == [0.6, 0.6, 0.6]
    with pytest.raises(ConfigError, match="ff_by_class"):
        FittedParameters(loss_ev={"pooled": 0.5}, eqe_max=0.7, offset_scale_ev=0.05, ff=0.65,
                         ff_by_class={"fullerene": 1.4})
    from screen.report.header import _device_items
    words = dict(_device_items(m.as_dict()))["Fill factor"]
    assert "fullerene 0.52" in words and "nfa-fused 0.71" in words


# --------------------------------------------------------------------------- fullerene as an absorber for Jsc
def _fullerene_frame(absorbs: bool, seed=11, noise=0.2):
    # INVENTED devices (not measurements): half the acceptors are fullerenes whose optical gap (1.55–1.7 eV) lies
    # below the donor's (1.75–2.1 eV), the other half fused-ring acceptors; Jsc made with the model's own formula
    # for the given rule (EQE 0.7, Δ0 0.05 eV) plus N(0, noise) mA cm⁻²
    frame = _synthetic(n=48, seed=seed)
    rng = np.random.default_rng(seed + 1)
    n = len(frame)
    ful = (np.arange(n) // 6) % 2 == 0  # whole acceptor groups mix; class per row
    frame["acceptor"] = [f"{'f' if f else 'n'}{i % 6}" for i, f in enumerate(ful)]
    frame["group"] = frame["acceptor"]
    frame["acceptor_class"] = np.where(ful, "fullerene", "nfa-fused")
    frame["donor_gap_opt_ev"] = np.where(ful, rng.uniform(1.75, 2.1, n), frame["donor_gap_opt_ev"])
    frame["donor_lumo_ev"] = frame["donor_homo_ev"] + frame["donor_gap_opt_ev"] + 0.3
    frame["acceptor_gap_opt_ev"] = np.where(ful, rng.uniform(1.55, 1.7, n), frame["acceptor_gap_opt_ev"])
    frame["acceptor_lumo_ev"] = frame["donor_lumo_ev"] - rng.uniform(0.05, 0.5, n)
    true = FittedParameters(loss_ev={"pooled": 0.55}, eqe_max=0.7, offset_scale_ev=0.05, ff=0.65,
                            fullerene_absorbs=absorbs)
    m = DeviceModel(parameters=true)
    cls = frame["acceptor_class"].to_numpy(object)
    fig = m.figures([frame[c].to_numpy(float) for c in devicefit._LEVELS], np.full(n, 0.55),
                    acceptor_absorbs=m.acceptor_absorbs(cls))
    frame["jsc_ma_cm2"] = fig["jsc_ma_cm2"] + rng.normal(0, noise, n)
    frame["voc_v"], frame["ff"], frame["pce_pct"] = fig["voc_v"], 0.65, fig["pce_pct"]
    return frame


@pytest.mark.parametrize("absorbs", [True, False])
def test_fullerene_absorber_rule_is_recovered_from_invented_devices(absorbs):
    # invented data (see _fullerene_frame): the inner grouped CV of Jsc picks the rule the data were made with,
    # and the fit then gives the EQE back
    frame = _fullerene_frame(absorbs)
    choice, scores = devicefit.choose_fullerene_absorber(frame)
    assert choice is absorbs
    other = devicefit.FULLERENE_ABSORBER_CHOICES[not absorbs]
    assert scores[other] > scores[devicefit.FULLERENE_ABSORBER_CHOICES[absorbs]] + 0.5
    p = devicefit.fit(frame, "pooled", "pooled", choice)
    assert p.fullerene_absorbs is absorbs and p.eqe_max == pytest.approx(0.7, rel=0.03)
    # the fit's Jsc basis is the model's Jsc (one formula)
    m = DeviceModel(parameters=p)
    cls = frame["acceptor_class"].to_numpy(object)
    fig = m.figures(devicefit._levels(frame), np.full(len(frame), 0.55), acceptor_absorbs=m.acceptor_absorbs(cls))
    basis = devicefit._jsc_basis(devicefit._jsc_arrays(frame), p.offset_scale_ev, p.fullerene_absorbs)
    np.testing.assert_allclose(p.eqe_max * basis, fig["jsc_ma_cm2"], rtol=1e-9)


def test_fullerene_absorber_tie_keeps_the_fullerene_as_absorber():
    # no fullerene devices: both rules give the same Jsc, and the current rule stays
    frame = _synthetic(seed=2)
    frame["jsc_ma_cm2"] = 15.0
    choice, scores = devicefit.choose_fullerene_absorber(frame)
    assert choice is True and scores["fullerene_absorbs"] == scores["donor_gap_only"]


def test_fullerene_absorber_is_chosen_inside_each_training_fold(devices, cvs, monkeypatch):
    # nested: the choice sees only the training devices of its fold, and a held-out group's own Jsc cannot move
    # its predictions (invented perturbation: the held-out C70 devices' Jsc tripled)
    by = "acceptor"
    key = devicefit.GROUPINGS[by]
    seen = []
    real = devicefit.choose_fullerene_absorber

    def spy(train, k="group", *args, **kwargs):
        seen.append(set(train["device_id"]))
        return real(train, k, *args, **kwargs)

    monkeypatch.setattr(devicefit, "choose_fullerene_absorber", spy)
    d = devices.copy()
    target = d.index[d["acceptor"].eq("C70") & d["jsc_ma_cm2"].notna()]
    assert len(target) >= 3 and d.loc[target, key].nunique() == 1
    d.loc[target, "jsc_ma_cm2"] *= 3.0
    again = devicefit.cross_validate(d, None, by)
    assert len(seen) == d[key].nunique()
    held = set(d.loc[target, "device_id"])
    assert sum(not (held & s) for s in seen) == 1  # exactly one fold chose without the C70 devices
    np.testing.assert_allclose(again.fitted.loc[target, "pce_pct"], cvs[by].fitted.loc[target, "pce_pct"],
                               atol=1e-12)
    # every fold records its choice
    folds = cvs[by].metrics["variants_per_fold"]
    assert sum(folds.values()) == d[key].nunique()
    assert all(any(f", {v}" in k for v in devicefit.FULLERENE_ABSORBER_CHOICES.values()) for k in folds)


def test_fullerene_absorber_round_trips_through_the_parameter_file(tmp_path):
    # fitted.json keeps the choice; a file written before it existed reads as "fullerenes absorb"
    data = json.loads(FITTED_PATH.read_text())
    for value, expected in ((False, False), (None, True)):
        params = dict(data["parameters"])
        if value is None:
            params.pop("fullerene_absorbs", None)
        else:
            params["fullerene_absorbs"] = value
        path = tmp_path / f"fitted_{value}.json"
        path.write_text(json.dumps({**data, "parameters": params}))
        p = load_fitted(str(path))
        assert p.fullerene_absorbs is expected and p.as_dict()["fullerene_absorbs"] is expected
    with pytest.raises(ConfigError, match="fullerene_absorbs"):
        FittedParameters(loss_ev={"pooled": 0.5}, eqe_max=0.7, offset_scale_ev=0.05, ff=0.65,
                         fullerene_absorbs="no")
