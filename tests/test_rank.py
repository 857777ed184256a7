"""Tests of screen.rank: pairing, offsets, flags, sorting, σ propagation, outputs and the CLI."""

from __future__ import annotations

import dataclasses
import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from screen import errors, flags
from screen.device import DeviceModel
from screen.partners import Partner, PartnerError, resolve_partner
from screen.rank import (
    EXTRA_COLUMNS,
    RANKING_COLUMNS,
    RankOptions,
    ScaleMismatchError,
    partner_role,
    rank_candidates,
)
from screen.rank_io import ranking_folder, run_rank
from screen.schema import section_defaults
from screen.spectrum import sq_voc_v

REF = "scharber-reference-acceptor"
#: the published donor-only model (Scharber et al., Adv. Mater. 18 (2006) 789, doi:10.1002/adma.200501717)
PUBLISHED = DeviceModel(model="scharber", absorber="donor")
#: the same through a run configuration
PUBLISHED_CFG = {"device": {"model": "scharber", "absorber": "donor"}}
#: the ranking.csv contract of docs/contracts.md §5, written out independently of the module
CONTRACT = ["rank", "id", "smiles", "role", "homo_ev", "lumo_ev", "gap_opt_ev", "partner", "delta_lumo_ev",
            "delta_homo_ev", "voc_v", "jsc_ma_cm2", "ff", "pce_pct", "pce_sigma_pct", "p_above_target", "passes",
            "flags"]


def _levels(rows, **common):
    frame = pd.DataFrame(rows)
    for key, value in {"scale": "film", **common}.items():
        if key not in frame:
            frame[key] = value
    return frame


#: informational flags that only say which model was used
MODEL_NOTES = {"donor_only_model", "loss_class_pooled"}


def _flags(ranking, ident):
    """Flag codes of one row, without the model notes."""
    return set(filter(None, ranking.set_index("id").loc[ident, "flags"].split(";"))) - MODEL_NOTES


@pytest.fixture(scope="module")
def partner():
    return resolve_partner(REF)


# --------------------------------------------------------------------------- physics through the ranking path

def test_scharber_worked_case(partner):
    # Scharber et al., Adv. Mater. 18 (2006) 789, doi:10.1002/adma.200501717: a donor with
    # HOMO -5.4 eV and a 1.5 eV gap (LUMO -3.9 eV) on the -4.3 eV acceptor gives Voc = 0.8 V
    # (the published rule, exact arithmetic) and close to 10 % efficiency on the paper's map
    # (# from memory); the ASTM G173-03 integral of screen.device gives 9.79 %.
    lv = _levels([{"id": "scharber-donor", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5, "role": "donor"}])
    r = rank_candidates(lv, partner, PUBLISHED, RankOptions())
    row = r.iloc[0]
    assert row["voc_v"] == pytest.approx(0.80, abs=1e-9)
    assert row["pce_pct"] == pytest.approx(9.8, abs=0.05)
    assert row["delta_lumo_ev"] == pytest.approx(0.4) and row["delta_homo_ev"] == pytest.approx(0.7)
    assert row["ff"] == 0.65 and bool(row["passes"]) and row["flags"] == "donor_only_model"
    assert row["partner"] == REF and row["model"] == "scharber" and row["viable"]


def test_sub_threshold_lumo_offset_is_flagged_and_fails(partner):
    lv = _levels([
        {"id": "low", "homo_ev": -5.3, "lumo_ev": -4.1, "gap_opt_ev": 1.2, "role": "donor"},   # ΔLUMO 0.2
        {"id": "edge", "homo_ev": -5.3, "lumo_ev": -4.0, "gap_opt_ev": 1.3, "role": "donor"},  # ΔLUMO 0.3 (fp)
    ])
    r = rank_candidates(lv, partner, PUBLISHED)
    by = r.set_index("id")
    assert by.loc["low", "delta_lumo_ev"] == pytest.approx(0.2)
    assert _flags(r, "low") == {"lumo_offset_low"} and not by.loc["low", "passes"]
    # exactly at the threshold: it passes, and with the partner's σ the alignment is a coin toss (information)
    assert _flags(r, "edge") == {"alignment_uncertain"} and by.loc["edge", "passes"]
    assert by.loc["edge", "p_aligned"] == pytest.approx(0.5, abs=0.01)
    assert list(r["id"]) == ["edge", "low"]  # not viable after viable, whatever its levels
    assert np.isnan(by.loc["low", "pce_pct"]) and not by.loc["low", "viable"]
    assert by.loc["low", "reason"].startswith("LUMO offset to the partner below 0.30 eV")


def test_voc_never_above_the_detailed_balance_voc_of_the_pair():
    # Scharber's rule gives 1.14 V for this pair, above the 1.138 V a 1.40 eV absorber can reach at all
    # (detailed balance, Rühle, Sol. Energy 130 (2016) 139; our sq_limit): capped and flagged
    donor = resolve_partner("pm6")
    lv = _levels([{"id": "nfa", "homo_ev": -5.8, "lumo_ev": -4.05, "gap_opt_ev": 1.4, "role": "acceptor"}])
    row = rank_candidates(lv, donor, DeviceModel(model="scharber", absorber="both"),
                          RankOptions(partner_sigma=False)).iloc[0]
    assert -4.05 - donor.homo_ev - 0.3 > float(sq_voc_v(1.4))
    assert row["voc_v"] == pytest.approx(float(sq_voc_v(1.4)), abs=1e-4)
    assert "voc_capped" in row["flags"] and row["viable"]


def test_acceptor_candidates_against_a_donor_partner():
    donor = resolve_partner("pm6")
    lv = _levels([{"id": "nfa", "homo_ev": -5.8, "lumo_ev": -4.05, "gap_opt_ev": 1.6, "role": "acceptor"}])
    r = rank_candidates(lv, donor, DeviceModel(model="scharber", absorber="both"), RankOptions(partner_sigma=False))
    row = r.iloc[0]
    # sign convention: Δ = donor − acceptor, here the donor is the partner
    assert row["delta_lumo_ev"] == pytest.approx(donor.lumo_ev - (-4.05))
    assert row["delta_homo_ev"] == pytest.approx(donor.homo_ev - (-5.8))
    assert row["voc_v"] == pytest.approx(-4.05 - donor.homo_ev - 0.3)
    assert row["role"] == "acceptor" and row["viable"]
    # the fitted default: Voc = min(LUMO_A − HOMO_D, smaller gap) − loss of the acceptor's class (pooled here)
    from screen.devicepars import load_fitted

    fit = rank_candidates(lv, donor).iloc[0]
    pars = load_fitted()
    e_ct = min(-4.05 - donor.homo_ev, 1.6)
    loss = float(pars.loss_at(pars.loss_ev["pooled"], e_ct))  # the fitted loss at this pair's E_CT
    assert fit["voc_v"] == pytest.approx(e_ct - loss, abs=1e-4)
    assert fit["model"] == "fitted"
    # the shipped fit keeps one pooled loss for every class: that is the model, not a per-row fallback
    assert ("loss_class_pooled" in fit["flags"]) == (set(pars.loss_ev) != {"pooled"})


def test_scale_mismatch_is_refused_naming_both_scales():
    c60 = resolve_partner("c60")
    lv = _levels([{"id": "g", "homo_ev": -7.0, "lumo_ev": -1.5, "gap_opt_ev": 3.0}], scale="gas")
    with pytest.raises(ScaleMismatchError) as err:
        rank_candidates(lv, c60)
    msg = str(err.value)
    assert "levels are on the 'gas' scale but partner 'c60' is on the 'film' scale" in msg
    assert "levels.scale=film" in msg
    mixed = pd.concat([lv, _levels([{"id": "f", "homo_ev": -5.5, "lumo_ev": -3.5, "gap_opt_ev": 2.0}])])
    with pytest.raises(ScaleMismatchError, match="'gas' scale \\(1 rows\\)"):
        rank_candidates(mixed, c60)


def test_rows_not_ok_are_not_ranked(partner):
    lv = _levels([
        {"id": "a", "status": "ok", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5, "scale": "film"},
        {"id": "b", "status": "rejected", "homo_ev": np.nan, "lumo_ev": np.nan, "gap_opt_ev": np.nan, "scale": ""},
        {"id": "c", "status": "failed", "homo_ev": np.nan, "lumo_ev": np.nan, "gap_opt_ev": np.nan, "scale": ""},
    ])
    r = rank_candidates(lv, partner)
    assert list(r["id"]) == ["a"]
    assert r.attrs["not_ranked"] == {"rejected": 1, "failed": 1}


# --------------------------------------------------------------------------- contract, sorting, flags

def test_columns_exactly_per_contract(partner):
    assert RANKING_COLUMNS == CONTRACT
    lv = _levels([{"id": "a", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5}])
    r = rank_candidates(lv, partner)
    assert list(r.columns) == CONTRACT + EXTRA_COLUMNS
    assert r["rank"].tolist() == [1]
    empty = rank_candidates(lv.assign(status="failed"), partner)
    assert list(empty.columns) == CONTRACT + EXTRA_COLUMNS and len(empty) == 0


def test_sorting_passing_first_then_key_then_id(partner):
    rows = [
        {"id": "b-fail", "homo_ev": -5.2, "lumo_ev": -4.2, "gap_opt_ev": 1.0},   # ΔLUMO 0.1, high PCE
        {"id": "z", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5},
        {"id": "a", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5},        # tie with z -> by id
        {"id": "best", "homo_ev": -5.5, "lumo_ev": -3.95, "gap_opt_ev": 1.55},
        {"id": "worse", "homo_ev": -5.6, "lumo_ev": -3.5, "gap_opt_ev": 2.1},
        {"id": "missing", "homo_ev": np.nan, "lumo_ev": -3.5, "gap_opt_ev": 2.0},
    ]
    r = rank_candidates(_levels(rows, role="donor"), partner, PUBLISHED)
    assert r["rank"].tolist() == list(range(1, 7))
    passing = r[r["passes"]]
    assert passing["pce_pct"].is_monotonic_decreasing
    assert list(r["id"]) == ["best", "a", "z", "worse", "b-fail", "missing"]
    assert _flags(r, "missing") == {"input_missing"} and np.isnan(r.set_index("id").loc["missing", "pce_pct"])


def test_sort_by_probability(partner):
    rows = [{"id": "sure", "homo_ev": -5.6, "lumo_ev": -3.9, "gap_opt_ev": 1.7, "homo_sigma_ev": 0.0},
            {"id": "gamble", "homo_ev": -5.45, "lumo_ev": -3.9, "gap_opt_ev": 1.55, "homo_sigma_ev": 0.3}]
    lv = _levels(rows, role="donor")
    opts = RankOptions(sort_by="p_above_target", target_pce_pct=9.0, partner_sigma=False)
    r = rank_candidates(lv, partner, PUBLISHED, options=opts)
    assert r["p_above_target"].is_monotonic_decreasing
    assert r.set_index("id").loc["sure", "p_above_target"] == 1.0


def test_same_role_as_partner_is_flagged(partner):
    lv = _levels([{"id": "acc", "homo_ev": -5.9, "lumo_ev": -4.0, "gap_opt_ev": 1.8, "role": "acceptor"},
                  {"id": "don", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5, "role": "Donor"}])
    r = rank_candidates(lv, partner)
    by = r.set_index("id")
    assert _flags(r, "acc") == {"same_role_as_partner"} and not by.loc["acc", "passes"]
    assert np.isnan(by.loc["acc", "pce_pct"])  # no pair, no device numbers
    assert by.loc["don", "role"] == "donor" and by.loc["don", "passes"]


def test_role_from_levels_and_default_role(partner):
    lv = _levels([{"id": "x", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5, "role": ""}])
    r = rank_candidates(lv, partner, PUBLISHED)
    assert r.loc[0, "role"] == "donor" and _flags(r, "x") == {"role_from_levels"} and r.loc[0, "passes"]
    r = rank_candidates(lv, partner, PUBLISHED, options=RankOptions(role="donor"))
    assert _flags(r, "x") == set()
    r = rank_candidates(lv.drop(columns="role"), partner, PUBLISHED, options=RankOptions(role="acceptor"))
    assert _flags(r, "x") == {"same_role_as_partner"} and not r.loc[0, "viable"] and np.isnan(r.loc[0, "pce_pct"])
    # a user's levels file: a dye is refused with the line and a pointer to the dye-cell mode
    with pytest.raises(errors.InputError, match=r"line 2 \(id 'x'\), column role = 'dye'.*dascreen dyecell"):
        rank_candidates(lv.assign(role="dye"), partner, PUBLISHED)
    # a run's own levels (raw engine columns): the dye is listed as not viable, the batch goes on
    r = rank_candidates(lv.assign(role="dye", xtb_ip_ev=7.0), partner, PUBLISHED)
    assert _flags(r, "x") == {"role_dye"} and not r.loc[0, "passes"] and not r.loc[0, "viable"]


def test_candidate_without_role_takes_the_role_its_levels_support():
    # the case: a candidate with a shallow LUMO (-2.0 eV) and no role against a polymer donor partner
    # (PM6, LUMO -3.65 eV): as an acceptor ΔLUMO = -1.65 eV (inverted), so it is not viable, never ranked above
    # a working acceptor, and has no efficiency at all
    pm6 = resolve_partner("pm6")
    lv = _levels([{"id": "shallow", "homo_ev": -5.0, "lumo_ev": -2.0, "gap_opt_ev": 2.9},
                  {"id": "nfa", "homo_ev": -5.7, "lumo_ev": -4.0, "gap_opt_ev": 1.5},
                  {"id": "deep", "homo_ev": -5.3, "lumo_ev": -4.2, "gap_opt_ev": 1.1}])
    for model in (DeviceModel(), PUBLISHED):
        r = rank_candidates(lv, pm6, model).set_index("id")
        assert r.index.tolist()[0] == "nfa" and r.loc["nfa", "viable"]
        assert "role_from_levels" in _flags(r.reset_index(), "nfa")
        assert {"role_unsupported", "lumo_inverted"} <= _flags(r.reset_index(), "shallow")
        # HOMO above the donor's, LUMO below: neither role is type II
        assert "no_type_ii_role" in _flags(r.reset_index(), "deep")
        for ident in ("shallow", "deep"):
            assert not r.loc[ident, "viable"] and not r.loc[ident, "passes"]
            assert np.isnan(r.loc[ident, ["voc_v", "jsc_ma_cm2", "pce_pct", "pce_sigma_pct"]].astype(float)).all()
            assert r.loc[ident, "reason"]


def test_sigma_zero_gives_probability_zero_or_one(partner):
    gaps = np.linspace(1.1, 2.1, 12)  # HOMO -5.0 .. -6.0 eV, all above the partner's -6.1 eV (type II)
    lv = _levels({"id": [f"c{i:02d}" for i in range(12)], "homo_ev": -3.9 - gaps, "lumo_ev": -3.9,
                  "gap_opt_ev": gaps})
    r = rank_candidates(lv, partner, PUBLISHED, options=RankOptions(partner_sigma=False, target_pce_pct=9.0))
    assert set(r["p_above_target"]) <= {0.0, 1.0}
    assert (r["pce_sigma_pct"] == 0).all()
    assert ((r["pce_pct"] > 9.0) == (r["p_above_target"] == 1.0)).all()
    # with σ (the partner's, from the library) the probabilities are no longer all 0 or 1
    r = rank_candidates(lv, partner, PUBLISHED, options=RankOptions(target_pce_pct=9.0))
    assert ((r["p_above_target"] > 0) & (r["p_above_target"] < 1)).any() and (r["pce_sigma_pct"] > 0).all()


def test_alignment_probability_and_its_flag(partner):
    # ΔHOMO 0.30 / 0.02 / -0.02 eV against Y6 (HOMO -5.65 eV, Y6's own σ from the library) with a candidate σ of
    # 0.20 eV: far above the threshold it is likely aligned and unflagged, near it uncertain either way
    y6 = resolve_partner("y6")
    lv = _levels([{"id": f"d{i}", "homo_ev": y6.homo_ev + dh, "lumo_ev": -3.5, "gap_opt_ev": 1.8, "role": "donor",
                   "homo_sigma_ev": 0.2, "lumo_sigma_ev": 0.2, "gap_opt_sigma_ev": 0.1}
                  for i, dh in enumerate([0.6, 0.02, -0.02])])
    by = rank_candidates(lv, y6).set_index("id")
    assert by.loc["d0", "p_aligned"] > 0.75 and "alignment_uncertain" not in by.loc["d0", "flags"]
    for ident in ("d1", "d2"):
        assert 0.25 < by.loc[ident, "p_aligned"] < 0.75 and "alignment_uncertain" in by.loc[ident, "flags"]
    assert by.loc["d1", "viable"] and not by.loc["d2", "viable"]  # the verdict itself still follows the levels
    assert by.loc["d1", "p_aligned"] > by.loc["d2", "p_aligned"]
    # without any σ the probability is 0 or 1 and nothing is flagged
    bare = rank_candidates(lv.drop(columns=["homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev"]), y6,
                           options=RankOptions(partner_sigma=False)).set_index("id")
    assert set(bare["p_aligned"]) == {0.0, 1.0} and not bare["flags"].str.contains("alignment_uncertain").any()


def test_gap_window_and_heavy_atom_filters(partner):
    lv = _levels([
        {"id": "wide", "smiles": "c1ccccc1", "homo_ev": -6.0, "lumo_ev": -2.5, "gap_opt_ev": 3.5},
        {"id": "big", "smiles": "c1ccc2cc3ccccc3cc2c1", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5},
        {"id": "nosmiles", "smiles": "", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5},
    ], role="donor")
    r = rank_candidates(lv, partner, options=RankOptions(max_heavy_atoms=10))
    # the published model's reference acceptor has no structure: its class, and so the fill factor, is unknown
    unknown = {"acceptor_class_unknown"}
    assert _flags(r, "wide") == {"gap_out_of_window", "alignment_uncertain"} | unknown  # ΔHOMO 0.1 eV against its σ
    assert _flags(r, "big") == {"too_many_heavy_atoms"} | unknown
    assert _flags(r, "nosmiles") == {"heavy_atoms_unknown"} | unknown and r.set_index("id").loc["nosmiles", "passes"]
    lv["heavy_atoms"] = [6, 14, 5]
    r = rank_candidates(lv, partner, options=RankOptions(max_heavy_atoms=10))
    assert _flags(r, "nosmiles") == unknown
    assert _flags(rank_candidates(lv, resolve_partner("y6")), "big") == set()  # y6's SMILES gives its class


def test_far_from_reference_is_an_info_flag_from_the_similarity_column(partner):
    rows = [{"id": "far", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5, "reference_similarity": 0.21},
            {"id": "near", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5, "reference_similarity": 0.74},
            {"id": "unknown", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5, "reference_similarity": None}]
    r = rank_candidates(_levels(rows, role="donor"), partner).set_index("id")
    assert "far_from_reference" in r.loc["far", "flags"] and r.loc["far", "passes"]
    assert "far_from_reference" not in r.loc["near", "flags"] + r.loc["unknown", "flags"]
    # a user's own levels file without the column: no flag
    r = rank_candidates(_levels([{k: v for k, v in rows[0].items() if k != "reference_similarity"}], role="donor"),
                        partner)
    assert "far_from_reference" not in r.loc[0, "flags"]


def test_lone_pair_homo_is_an_info_flag_from_the_shift_column(partner):
    rows = [{"id": "lp", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5, "xtb_lone_pair_shift_ev": 0.66},
            {"id": "pi", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5, "xtb_lone_pair_shift_ev": 0.0},
            {"id": "unchecked", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5, "xtb_lone_pair_shift_ev": None}]
    r = rank_candidates(_levels(rows, role="donor"), partner).set_index("id")
    assert "lone_pair_homo" in r.loc["lp", "flags"] and r.loc["lp", "passes"]
    assert "lone_pair_homo" not in r.loc["pi", "flags"] + r.loc["unchecked", "flags"]


def test_partner_without_role_takes_the_complement(tmp_path):
    path = tmp_path / "acc.csv"
    pd.DataFrame([{"id": "mine", "homo_ev": -6.0, "lumo_ev": -4.3, "gap_opt_ev": 1.7, "scale": "film"}]
                 ).to_csv(path, index=False)
    p = resolve_partner(str(path))
    lv = _levels([{"id": "d", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5, "role": "donor"}])
    r = rank_candidates(lv, p, PUBLISHED)
    assert r.attrs["partner_role"] == "acceptor" and r.attrs["partner_role_assumed"]
    assert r.loc[0, "voc_v"] == pytest.approx(0.8)
    with pytest.raises(PartnerError, match="no role"):
        rank_candidates(lv.drop(columns="role"), p)


def test_a_smiles_partner_without_role_says_how_to_give_one():
    smiles = Partner(id="smiles:c1ccsc1", name="c1ccsc1", role="", homo_ev=-6.0, lumo_ev=-2.5, gap_opt_ev=3.5,
                     kind="smiles", spec="smiles:c1ccsc1")
    lv = _levels([{"id": "d", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5}])
    with pytest.raises(PartnerError) as err:
        partner_role(lv, smiles, RankOptions())
    msg = str(err.value)
    assert "--role donor|acceptor" in msg and "cannot carry a role" in msg
    assert "give the partner a role column" not in msg  # a smiles: partner has no column


def test_a_missing_level_is_named_in_the_reason_not_the_role(partner):
    lv = _levels([{"id": "h", "homo_ev": np.nan, "lumo_ev": -3.9, "gap_opt_ev": 1.5},
                   {"id": "ok", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5}])
    ranking = rank_candidates(lv, partner, PUBLISHED)
    r = ranking.set_index("id")
    assert _flags(ranking, "h") == {"input_missing", "role_assumed"} and not r.loc["h", "viable"]
    assert r.loc["h", "reason"].startswith("the HOMO (homo_ev) of this row is empty; a level the device model needs")
    assert "no role given" not in r.loc["h", "reason"]
    assert r.loc["ok", "viable"]


def test_ten_thousand_rows(partner):
    # the speed target (10 000 rows < 2 s) is timed in benchmarks/rerank.py, not asserted here
    rng = np.random.default_rng(7)  # synthetic levels
    n = 10_000
    homo = rng.uniform(-5.9, -4.9, n)
    gap = rng.uniform(1.1, 2.6, n)
    lv = _levels({"id": [f"s{i:05d}" for i in range(n)], "homo_ev": homo, "lumo_ev": homo + gap + 0.1,
                  "gap_opt_ev": gap, "homo_sigma_ev": 0.15, "lumo_sigma_ev": 0.2, "gap_opt_sigma_ev": 0.1})
    r = rank_candidates(lv, partner)
    ok = r["viable"].astype(bool)
    assert len(r) == n and r.loc[ok, "pce_sigma_pct"].notna().all() and r.loc[~ok, "pce_pct"].isna().all()
    assert r["rank"].tolist() == list(range(1, n + 1)) and r["passes"].is_monotonic_decreasing
    assert r["viable"].is_monotonic_decreasing and 0 < ok.sum() < n
    # a candidate's numbers do not depend on the other rows (common random numbers, same seed)
    one = rank_candidates(lv.iloc[[1234]], partner).iloc[0]
    row = r.set_index("id").loc[one["id"]]
    for col in ("pce_pct", "pce_sigma_pct", "p_above_target", "flags"):
        assert row[col] == one[col]


def test_rank_options_defaults_are_the_schema_defaults():
    fields = {f.name: f.default for f in dataclasses.fields(RankOptions)}
    assert fields == section_defaults("rank")
    with pytest.raises(errors.ConfigError, match="rank.sort_by"):
        RankOptions(sort_by="voc_v")
    with pytest.raises(errors.ConfigError, match="unknown rank option"):
        RankOptions.from_mapping({"sortby": "pce_pct"})


def test_flags_and_errors_come_from_the_ground_floor(partner):
    from screen import rank

    assert rank.FLAG_ORDER is flags.FLAG_ORDER and rank.INFO_FLAGS is flags.INFO_FLAGS
    assert ScaleMismatchError is errors.ScaleMismatchError
    lv = _levels([{"id": "neg", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5, "lumo_sigma_ev": -0.1}])
    with pytest.raises(errors.InputError, match="'neg'.*lumo_sigma_ev"):
        rank_candidates(lv, partner)
    # every code the ranking writes is a registry code, in registry order
    rows = [{"id": "x", "homo_ev": -5.2, "lumo_ev": -4.2, "gap_opt_ev": 0.9, "role": "solvent", "xtb_ip_ev": 7.0}]
    codes = rank_candidates(_levels(rows), partner, PUBLISHED).loc[0, "flags"].split(";")
    assert codes == ["role_invalid", "lumo_offset_low", "gap_out_of_window", "donor_only_model", "role_assumed"]
    assert codes == [c for c in flags.FLAG_ORDER if c in codes]


def test_every_flag_the_ranking_can_set_is_registered(partner, monkeypatch):
    # a code in rank._flag_masks but not in screen.flags would have no text, no severity and no place in FLAG_ORDER:
    # _passes counts it as failing, so every row it is raised on would fail silently
    from screen import rank

    built = []

    def spy(*args, **kwargs):
        masks = original(*args, **kwargs)
        built.append(set(masks))
        return masks

    original = rank._flag_masks
    monkeypatch.setattr(rank, "_flag_masks", spy)
    rows = [{"id": "d", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5, "role": "donor"}]
    for model in (PUBLISHED, DeviceModel()):
        rank_candidates(_levels(rows), partner, model)
    assert len(built) == 2
    registered = {f.code for f in flags._REGISTRY}
    assert set(flags.FLAGS) == registered and set(flags.DEVICE_FLAGS) <= registered
    for codes in built:
        assert codes >= set(flags.DEVICE_FLAGS)
        assert not codes - registered, f"flag code(s) set by screen.rank but not registered in screen.flags: " \
                                       f"{sorted(codes - registered)}"


# --------------------------------------------------------------------------- run_rank and outputs

@pytest.fixture()
def cv_file(tmp_path):
    """A user's own levels file (e.g. cyclic voltammetry): only the minimum columns."""
    path = tmp_path / "my_cv.csv"
    path.write_text(
        "id,smiles,homo_ev,lumo_ev,gap_opt_ev,scale\n"
        "KF-D01,Cc1ccc(s1)-c1ccc(-c2ccc(C)s2)c2nsnc12,-5.40,-3.90,1.50,film\n"
        "\"two\nlines $$$$\",c1ccc(-c2cccs2)s1,-5.55,-3.60,1.95,film\n"
        "low-offset,c1ccsc1,-5.20,-4.15,1.05,film\n", encoding="utf-8")
    return path


def test_run_rank_writes_ranking_shortlist_and_meta(cv_file, tmp_path):
    from rdkit import Chem

    out = tmp_path / "out"
    cfg = {"rank": {"role": "donor", "shortlist_size": 5}, **PUBLISHED_CFG}
    path = run_rank(cv_file, REF, out, cfg, report=False)
    assert path == out / "rankings" / ranking_folder(REF, cfg) / "ranking.csv"
    table = pd.read_csv(path, dtype={"id": str})
    assert list(table.columns[:18]) == CONTRACT
    assert table.loc[0, "id"] == "KF-D01" and table.loc[0, "voc_v"] == pytest.approx(0.8)
    assert table.loc[0, "pce_pct"] == pytest.approx(9.8, abs=0.05)
    assert table["rank"].tolist() == [1, 2, 3]
    assert table.set_index("id").loc["low-offset", "flags"] == "lumo_offset_low;donor_only_model"
    assert np.isnan(table.set_index("id").loc["low-offset", "pce_pct"])

    mols = [m for m in Chem.SDMolSupplier(str(path.parent / "shortlist.sdf"))]
    assert len(mols) == 2 and all(m is not None for m in mols)  # only the passing rows
    assert mols[0].GetProp("_Name") == "KF-D01" and float(mols[0].GetProp("pce_pct")) == pytest.approx(9.79, abs=0.01)
    assert mols[1].GetProp("_Name") == "two lines $ $ $ $"
    for prop in ("homo_ev", "lumo_ev", "delta_lumo_ev", "voc_v", "jsc_ma_cm2", "pce_sigma_pct", "flags"):
        assert mols[0].HasProp(prop)

    meta = json.loads((path.parent / "ranking.meta.json").read_text())
    assert meta["partner"]["id"] == REF and meta["device"]["eqe"] == 0.65
    assert meta["counts"]["ranked"] == 3 and meta["counts"]["passing"] == 2 and meta["counts"]["shortlist"] == 2
    assert meta["rank"]["shortlist_size"] == 5 and meta["filters"]["min_delta_lumo_ev"] == 0.3
    assert meta["levels"]["path"] == str(cv_file.resolve()) and meta["levels_meta"] is None


def test_dye_row_of_a_runs_levels_is_not_viable_with_a_reason(tmp_path):
    # a run's own levels.csv (raw engine columns) of a mixed batch: the dye gets no pair, no efficiency and a
    # plain-words reason, also with a default role; the donor next to it is ranked as usual
    lv = tmp_path / "levels.csv"
    _levels([{"id": "dye-1", "smiles": "N#CC(=Cc1ccc(N(C)C)cc1)C(=O)O", "status": "ok", "role": "dye",
              "homo_ev": -5.3, "lumo_ev": -3.2, "gap_opt_ev": 1.9, "xtb_ip_ev": 7.1},
             {"id": "D1", "smiles": "c1ccsc1", "status": "ok", "role": "donor", "homo_ev": -5.4,
              "lumo_ev": -3.9, "gap_opt_ev": 1.5, "xtb_ip_ev": 7.0}]).to_csv(lv, index=False)
    for cfg in (PUBLISHED_CFG, {"rank": {"role": "donor"}, **PUBLISHED_CFG}):
        table = pd.read_csv(run_rank(lv, REF, tmp_path / "out", cfg, report=False), dtype={"id": str})
        assert table["id"].tolist() == ["D1", "dye-1"]
        dye = table.set_index("id").loc["dye-1"]
        assert dye["role"] == "dye" and dye["flags"] == "role_dye" and not dye["viable"] and not dye["passes"]
        assert dye[["delta_lumo_ev", "voc_v", "jsc_ma_cm2", "pce_pct", "pce_sigma_pct"]].isna().all()
        assert dye["reason"].startswith("role 'dye': dye-cell candidates are ranked with `dascreen dyecell`")
        assert table.set_index("id").loc["D1", "pce_pct"] == pytest.approx(9.8, abs=0.05)


def test_run_rank_records_levels_provenance(cv_file, tmp_path):
    (tmp_path / "my_cv.csv.meta.json").write_text(json.dumps({"protocol_id": "tblite-gfn2-ff-x", "scale": "film"}))
    path = run_rank(cv_file, "c60", tmp_path / "o", {}, report=False)
    meta = json.loads((path.parent / "ranking.meta.json").read_text())
    assert meta["levels_meta"]["protocol_id"] == "tblite-gfn2-ff-x"


def test_id_partner_and_file_partner_through_run_rank(tmp_path):
    lv = tmp_path / "levels.csv"
    _levels([{"id": "D1", "role": "donor", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5},
             {"id": "D2", "role": "donor", "homo_ev": -5.3, "lumo_ev": -3.7, "gap_opt_ev": 1.6},
             {"id": "A1", "role": "acceptor", "homo_ev": -6.0, "lumo_ev": -4.3, "gap_opt_ev": 1.7}]
            ).to_csv(lv, index=False)
    path = run_rank(lv, "id:A1", tmp_path, PUBLISHED_CFG, report=False)
    table = pd.read_csv(path).set_index("id")
    assert path.parent.name.startswith("id-")
    assert table.loc["D1", "voc_v"] == pytest.approx(0.8) and table.loc["D1", "partner"] == "A1"
    assert "same_role_as_partner" in table.loc["A1", "flags"]
    assert "is_partner" in table.loc["A1", "flags"]

    one = tmp_path / "acceptor.csv"
    pd.read_csv(lv).iloc[[2]].to_csv(one, index=False)
    path = run_rank(lv, str(one), tmp_path, PUBLISHED_CFG, report=False)
    assert path.parent.name.startswith("file-acceptor-")
    assert pd.read_csv(path).set_index("id").loc["D1", "voc_v"] == pytest.approx(0.8)
    two = tmp_path / "two.csv"
    pd.read_csv(lv).iloc[[1, 2]].to_csv(two, index=False)
    with pytest.raises(PartnerError, match="2 rows"):
        run_rank(lv, str(two), tmp_path, {}, report=False)


def test_run_rank_makes_no_engine_call(cv_file, tmp_path, monkeypatch):
    from screen import engines

    def forbidden(self, *a, **k):
        raise AssertionError("re-ranking called the xTB engine")

    monkeypatch.setattr(engines.Engine, "singlepoint", forbidden)
    path = run_rank(cv_file, "itic", tmp_path, {"rank": {"role": "donor"}}, report=False)
    # the re-ranking did its work (every row of the levels file ranked), without the engine
    assert pd.read_csv(path)["id"].nunique() == 3


def test_cli_rank_does_not_import_the_engine(cv_file, tmp_path):
    out = tmp_path / "cli"
    code = (
        "import sys\n"
        "from screen.cli import main\n"
        f"rc = main(['rank', '--partner', '{REF}', '--levels', {str(cv_file)!r}, '--out', {str(out)!r},"
        " '--role', 'donor', '--target-pce', '9', '--set', 'rank.shortlist_size=1'])\n"
        "assert rc == 0, rc\n"
        # screen.levels imports screen.electronic for its column names; the engine libraries stay unloaded
        "bad = [m for m in sys.modules if m.split('.')[0] in ('tblite', 'xtb')]\n"
        "assert not bad, bad\n"
    )
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stdout + res.stderr
    (folder,) = (out / "rankings").glob(f"{REF}--*")  # the partner and a hash of the settings
    assert str(folder / "ranking.csv") in res.stdout
    assert "KF-D01" in res.stdout
    meta = json.loads((folder / "ranking.meta.json").read_text())
    assert meta["rank"]["target_pce_pct"] == 9.0 and meta["rank"]["shortlist_size"] == 1


def test_cli_rank_reports_scale_mismatch(cv_file, tmp_path):
    gas = tmp_path / "gas.csv"
    pd.read_csv(cv_file).assign(scale="gas").to_csv(gas, index=False)
    res = subprocess.run([sys.executable, "-m", "screen.cli", "rank", "--partner", "c60", "--levels", str(gas),
                          "--out", str(tmp_path)], capture_output=True, text=True, timeout=300)
    assert res.returncode == 2
    assert "'gas' scale but partner 'c60' is on the 'film' scale" in res.stderr


def test_cli_partners_lists_the_library():
    res = subprocess.run([sys.executable, "-m", "screen.cli", "partners"], capture_output=True, text=True,
                         timeout=300)
    assert res.returncode == 0, res.stderr
    for word in ("id", "role", "homo_ev", "lumo_ev", "gap_opt_ev", "scale", "source", REF):
        assert word in res.stdout


def test_report_is_written_when_the_module_exists(cv_file, tmp_path):
    pytest.importorskip("screen.report", reason="screen.report is written separately")
    from screen import report

    if not hasattr(report, "write_report"):
        pytest.skip("screen.report has no write_report yet")
    path = run_rank(cv_file, REF, tmp_path, {"rank": {"role": "donor"}})
    assert (path.parent / "report.html").is_file()


def test_each_rows_own_sigma_separates_candidates():
    # identical levels, different σ columns (as the calibration will give per candidate): different spreads,
    # nothing in the ranking flattens them
    y6 = resolve_partner("y6")
    lv = _levels([{"id": f"s{k}", "homo_ev": -5.45, "lumo_ev": -3.65, "gap_opt_ev": 1.8, "role": "donor",
                   "homo_sigma_ev": sig, "lumo_sigma_ev": sig, "gap_opt_sigma_ev": sig / 2}
                  for k, sig in enumerate([0.02, 0.1, 0.3])])
    r = rank_candidates(lv, y6, options=RankOptions(partner_sigma=False)).set_index("id")
    assert r.loc["s0", "pce_pct"] == r.loc["s2", "pce_pct"]
    assert r.loc["s0", "pce_sigma_pct"] < r.loc["s1", "pce_sigma_pct"] < r.loc["s2", "pce_sigma_pct"]
    assert r.loc["s2", "homo_sigma_ev"] == 0.3


def test_inconsistent_computed_levels_are_not_viable_rows_not_a_file_error():
    # a run's own levels.csv (raw engine columns present): a tiny molecule whose calibrated optical gap
    # exceeds its film transport gap is marked not viable instead of stopping the ranking; the same row in
    # a user's own file (no engine columns) is refused with exit-code-2 InputError
    rows = [{"id": "ok", "homo_ev": -5.4, "lumo_ev": -3.6, "gap_opt_ev": 1.6, "role": "donor", "xtb_ip_ev": 9.9},
            {"id": "tiny", "homo_ev": -6.2, "lumo_ev": -1.8, "gap_opt_ev": 4.9, "role": "donor", "xtb_ip_ev": 12.0}]
    r = rank_candidates(_levels(rows), resolve_partner("y6")).set_index("id")
    assert bool(r.loc["ok", "viable"]) and not bool(r.loc["tiny", "viable"])
    assert "levels_inconsistent" in r.loc["tiny", "flags"] and np.isnan(r.loc["tiny", "pce_pct"])
    with pytest.raises(errors.InputError, match="optical gap"):
        rank_candidates(_levels([{k: v for k, v in row.items() if k != "xtb_ip_ev"} for row in rows]),
                        resolve_partner("y6"))


def test_polymer_rows_carry_their_representation_and_a_poor_chain_fit_flag():
    # issue 12: `representation` travels from levels.csv to the ranking; a poor chain-limit fit is said there too
    lv = _levels([
        {"id": "pt", "smiles": "[*]c1ccc([*])s1", "homo_ev": -5.3, "lumo_ev": -3.3, "gap_opt_ev": 1.9,
         "role": "donor", "representation": "polymer", "chain_fit_quality": "poor"},
        {"id": "pf", "smiles": "[*]c1ccc2c(c1)Cc1cc([*])ccc1-2", "homo_ev": -5.4, "lumo_ev": -3.2, "gap_opt_ev": 2.0,
         "role": "donor", "representation": "polymer", "chain_fit_quality": "good"},
        {"id": "m", "smiles": "c1ccsc1", "homo_ev": -5.5, "lumo_ev": -3.3, "gap_opt_ev": 2.0, "role": "donor",
         "representation": "molecule", "chain_fit_quality": ""},
    ])
    r = rank_candidates(lv, resolve_partner("y6")).set_index("id")
    assert r.loc["pt", "representation"] == "polymer" and r.loc["m", "representation"] == "molecule"
    assert "chain_fit_poor" in r.loc["pt", "flags"] and "chain_fit_poor" not in r.loc["pf", "flags"]
    assert r.loc["pt", "passes"]  # informational: the pair is still estimated
    # a user's levels file without the column: the SMILES decides
    bare = rank_candidates(lv.drop(columns=["representation", "chain_fit_quality"]), resolve_partner("y6"))
    assert bare.set_index("id")["representation"].to_dict() == {"pt": "polymer", "pf": "polymer", "m": "molecule"}


def test_a_second_id_of_one_structure_is_flagged_and_kept_out_of_the_shortlist(tmp_path):
    # a batch user's audit: the same structure under two ids (ANT-a, ANT-b) took two shortlist places; a run's
    # levels.csv names the first in duplicate_of. Both stay ranked; the second is flagged and not shortlisted
    from screen.rank_rows import shortlist_mask

    y6 = resolve_partner("y6")
    lv = _levels([{"id": "ANT-a", "homo_ev": -5.3, "lumo_ev": -3.5, "gap_opt_ev": 1.8, "role": "donor",
                   "duplicate_of": ""},
                  {"id": "ANT-b", "homo_ev": -5.3, "lumo_ev": -3.5, "gap_opt_ev": 1.8, "role": "donor",
                   "duplicate_of": "ANT-a"},
                  {"id": "OTHER", "homo_ev": -5.4, "lumo_ev": -3.6, "gap_opt_ev": 1.7, "role": "donor",
                   "duplicate_of": ""}])
    r = rank_candidates(lv, y6, options=RankOptions(partner_sigma=False))
    by = r.set_index("id")
    assert "same_structure" in by.loc["ANT-b", "flags"] and by.loc["ANT-b", "passes"]
    assert "same_structure" not in by.loc["ANT-a", "flags"]
    assert by.loc["ANT-a", "pce_pct"] == by.loc["ANT-b", "pce_pct"]
    assert set(r[shortlist_mask(r)]["id"]) == {"ANT-a", "OTHER"}
    # a meeting-day audit: a repeat whose id sorts first ("BAD-3" < "KF-D01") ranked above its original and the
    # report's headline named it; it now sorts right after the structure it repeats
    renamed = lv.assign(id=["Z-first", "A-repeat", "OTHER"], duplicate_of=["", "Z-first", ""])
    order = rank_candidates(renamed, y6, options=RankOptions(partner_sigma=False))["id"].tolist()
    assert order.index("Z-first") < order.index("A-repeat")


def test_not_viable_rows_are_ordered_by_their_chance_of_alignment():
    # a device-physics audit: PM6:ITIC (a working blend, about 10 %: from memory) at dHOMO -0.01 eV, P(aligned) 0.45,
    # sorted among clearly misaligned pairs by id; a near miss now comes first among the not viable
    y6 = resolve_partner("y6")
    lv = _levels([{"id": "A-far", "homo_ev": -6.2, "lumo_ev": -3.5, "gap_opt_ev": 1.8, "role": "donor"},
                  {"id": "B-near", "homo_ev": -5.66, "lumo_ev": -3.5, "gap_opt_ev": 1.8, "role": "donor"},
                  {"id": "C-good", "homo_ev": -5.3, "lumo_ev": -3.5, "gap_opt_ev": 1.8, "role": "donor"}])
    r = rank_candidates(lv, y6)
    assert r["id"].tolist() == ["C-good", "B-near", "A-far"]
    assert not r.set_index("id").loc["B-near", "viable"] and r.set_index("id").loc["B-near", "p_aligned"] > 0.3


def test_an_acceptor_class_without_held_out_voc_skill_is_said():
    # the fitted model's held-out Spearman(Voc) for the 'other non-fullerene' class is 0.02 over 7 devices
    # (models/device/fitted.json, leave one acceptor structure out); a materials check found perylene diimides ranked
    # first against PM6 with no concern flagged
    from screen.devicepars import FITTED_PATH, voc_unranked_classes
    from screen.io import read_json

    rho = read_json(FITTED_PATH)["cv"]["by_class"]["nfa-other"]["fitted_spearman_voc"]
    assert rho < 0.3 and voc_unranked_classes() == frozenset({"nfa-other"})
    donor = resolve_partner("pm6")
    pdi = "CN1C(=O)c2ccc3c4ccc5C(=O)N(C)C(=O)c6ccc(c7ccc(C1=O)c2c37)c4c56"  # N,N'-dimethyl perylene diimide
    itic_like = "N#CC(C#N)=C1C(=Cc2cc3c(s2)-c2cc4c(cc2C3)-c2sc(C=C3C(=O)c5ccccc5C3=C(C#N)C#N)cc2C4)C(=O)c2ccccc21"
    lv = _levels([{"id": "pdi", "smiles": pdi, "homo_ev": -6.0, "lumo_ev": -3.9, "gap_opt_ev": 2.1, "role": "acceptor"},
                  {"id": "ic", "smiles": itic_like, "homo_ev": -5.7, "lumo_ev": -3.9, "gap_opt_ev": 1.6,
                   "role": "acceptor"}])
    r = rank_candidates(lv, donor, DeviceModel(), RankOptions(partner_sigma=False)).set_index("id")
    assert r.loc["pdi", "acceptor_class"] == "nfa-other" and "class_voc_unranked" in r.loc["pdi", "flags"]
    assert r.loc["ic", "acceptor_class"] == "nfa-fused" and "class_voc_unranked" not in r.loc["ic", "flags"]
    published = rank_candidates(lv, donor, DeviceModel(model="scharber"), RankOptions(partner_sigma=False))
    assert not published["flags"].str.contains("class_voc_unranked").any()


def test_gas_scale_levels_are_ranked_but_never_pass_and_say_why():
    # a referee's audit: gas-scale levels against a gas-scale partner got a PCE from the film-fitted device model
    # with no caution. The ranking keeps the numbers (offsets are still informative) but every pair fails the
    # screen with a plain-words flag, and the row's scale is a ranking column.
    gas = Partner(id="gas-acceptor", name="gas acceptor", role="acceptor", homo_ev=-8.0, lumo_ev=-2.4,
                  gap_opt_ev=2.0, scale="gas")
    lv = _levels([{"id": "g", "homo_ev": -6.5, "lumo_ev": -2.0, "gap_opt_ev": 2.0, "role": "donor"}], scale="gas")
    r = rank_candidates(lv, gas)
    assert r.loc[0, "scale"] == "gas" and "gas_scale_levels" in r.loc[0, "flags"]
    assert not r.loc[0, "passes"] and flags.FLAGS["gas_scale_levels"].severity == "fail"
    film = rank_candidates(_levels([{"id": "f", "homo_ev": -5.4, "lumo_ev": -3.9, "gap_opt_ev": 1.5,
                                     "role": "donor"}]), resolve_partner("y6"))
    assert film.loc[0, "scale"] == "film" and "gas_scale_levels" not in film.loc[0, "flags"]


def test_known_family_bias_from_smiles_when_a_runs_levels_lack_the_column():
    # a run's levels.csv written before the known_bias column existed still gets the DPP caution on re-ranking
    # (found re-ranking an older demo); a measured-levels file (no raw engine columns) never does
    dpp = "CN1C(=O)C2=C(c3ccc(C)s3)N(C)C(=O)C2=C1c1ccc(C)s1"
    rows = [{"id": "d", "smiles": dpp, "homo_ev": -5.3, "lumo_ev": -3.5, "gap_opt_ev": 1.7, "role": "donor",
             "xtb_ip_ev": 6.1}]
    r = rank_candidates(_levels(rows), resolve_partner("y6"))
    assert "known_family_bias" in r.loc[0, "flags"]
    measured = rank_candidates(_levels([{k: v for k, v in rows[0].items() if k != "xtb_ip_ev"}]),
                               resolve_partner("y6"))
    assert "known_family_bias" not in measured.loc[0, "flags"]


def test_chain_length_is_written_as_a_count(partner):
    lv = _levels([{"id": "p", "smiles": "[*]c1ccc([*])s1", "homo_ev": -5.3, "lumo_ev": -3.3, "gap_opt_ev": 1.9,
                   "role": "donor", "chain_n_max": 4.0}])
    assert rank_candidates(lv, resolve_partner("y6")).loc[0, "chain_n_max"] == "4"


def test_donor_only_model_records_no_homo_threshold():
    # the published donor-only model checks the LUMO offset alone; its provenance must not list a HOMO threshold
    assert PUBLISHED.as_dict()["min_delta_homo_ev"] is None
    assert DeviceModel(model="scharber").as_dict()["min_delta_homo_ev"] == 0.3
