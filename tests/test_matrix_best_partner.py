"""The partner matrix's best partner says when the estimates do not choose one (an audit: "best partner: pm6" on an
exact tie of three partners at 13.54 %, and on 12.81 % against 12.79 % under a ± of 3.6 each, read as a
recommendation).

Synthetic rankings and invented levels only (no measurement, no xTB).
"""

from __future__ import annotations

import json
import math

import pandas as pd
import pytest

from screen.cli import main
from screen.matrix import MATRIX_LEAD, partner_matrix
from screen.report.matrix_page import render_overview

NEW = ["best_partner_resolved", "best_partner_note"]


def _ranking(rows):
    """A ranking of ``(id, pce_pct, pce_sigma_pct)`` rows, all passing and viable."""
    return pd.DataFrame([[i, f"C{'C' * n}", pce, sig, True, True] for n, (i, pce, sig) in enumerate(rows)],
                        columns=["id", "smiles", "pce_pct", "pce_sigma_pct", "passes", "viable"])


def _audit_matrix():
    """The audit's two cases (figures as the audit quoted them), a clear winner and one viable partner."""
    pm6 = _ranking([("P1", 13.54, 3.6), ("S1", 12.79, 3.6), ("C1", 12.0, 0.4), ("O1", math.nan, math.nan)])
    d18 = _ranking([("P1", 13.54, 3.6), ("S1", 12.81, 3.6), ("C1", 8.0, 0.5), ("O1", 7.0, 0.5)])
    pbdbt = _ranking([("P1", 13.54, 3.6), ("S1", 9.0, 1.0), ("C1", 7.0, 0.5), ("O1", math.nan, math.nan)])
    return partner_matrix([("pm6", pm6), ("d18", d18), ("pbdb-t", pbdbt)]).set_index("id")


def test_an_exact_tie_names_every_tied_partner_and_is_not_resolved():
    m = _audit_matrix()
    assert m.loc["P1", "best_partner"] == "pm6;d18;pbdb-t"  # not the first in column order
    assert m.loc["P1", "best_pce_pct"] == 13.54  # the number is unchanged
    assert str(m.loc["P1", "best_partner_resolved"]) == "False"  # False, not empty (cannot tell)
    assert "pm6, d18 and pbdb-t tie at 13.54 %" in m.loc["P1", "best_partner_note"]


def test_a_runner_up_within_the_uncertainty_of_the_difference_is_not_resolved():
    m = _audit_matrix()
    assert m.loc["S1", "best_partner"] == "d18" and not m.loc["S1", "best_partner_resolved"]
    note = m.loc["S1", "best_partner_note"]
    # 0.02 points apart under sqrt(3.6² + 3.6²) = 5.09; pbdb-t 3.81 below, more than sqrt(3.6² + 1.0²) = 3.74
    assert "pm6 12.79 ± 3.60 % lies 0.02 points below d18 12.81 ± 3.60 %" in note and "5.09" in note
    assert "pbdb-t" not in note


def test_a_clear_winner_and_a_lone_viable_partner_are_resolved_without_a_note():
    m = _audit_matrix()
    assert m.loc["C1", "best_partner"] == "pm6" and m.loc["C1", "best_partner_resolved"]  # 4 points, ± 0.64
    assert m.loc["O1", "best_partner"] == "d18" and m.loc["O1", "best_partner_resolved"]  # nothing to tell apart
    assert m.loc["C1", "best_partner_note"] == "" and m.loc["O1", "best_partner_note"] == ""


def test_an_unknown_spread_is_said_not_taken_as_resolved():
    a = _ranking([("X1", 9.0, 0.3)])
    b = _ranking([("X1", 8.5, math.nan)])  # pce_sigma_pct left empty (few viable samples)
    m = partner_matrix([("a", a), ("b", b)])
    assert pd.isna(m.loc[0, "best_partner_resolved"]) and m.loc[0, "best_partner"] == "a"
    assert "pce_sigma_pct" in m.loc[0, "best_partner_note"] and "of b is not known" in m.loc[0, "best_partner_note"]


def test_the_sigma_is_that_of_the_row_that_holds_the_cell():
    a = pd.concat([_ranking([("X1", 9.0, 3.0)]), _ranking([("X1", 7.0, 0.1)])])  # two rows of one candidate
    b = _ranking([("X1", 8.8, 0.1)])
    m = partner_matrix([("a", a), ("b", b)])
    assert m.loc[0, "a"] == 9.0 and not m.loc[0, "best_partner_resolved"]  # 0.2 < sqrt(3.0² + 0.1²)


def test_the_new_columns_follow_the_existing_ones_and_the_page_says_not_resolved():
    m = _audit_matrix().reset_index()
    assert list(m.columns) == MATRIX_LEAD + ["pm6", "d18", "pbdb-t"]
    assert MATRIX_LEAD[:6] == ["id", "name", "smiles", "best_partner", "best_pce_pct", "viable_partners"]
    assert MATRIX_LEAD[6:] == NEW
    page = render_overview(m, {"partners": [{"id": "pm6"}, {"id": "d18"}, {"id": "pbdb-t"}]}, created="x")
    assert '<td class="best nr">pm6, d18, pbdb-t<small>not resolved: pm6, d18 and pbdb-t tie at 13.54 %' in page
    assert '<td class="best nr">d18<small>not resolved: pm6 12.79' in page
    assert '<td class="best">pm6</td>' in page  # C1: resolved, no note
    assert "within the uncertainty of the difference" in page  # the rule in words above the table
    # a matrix.csv written before these columns (a stale matrix redrawn as it is) still shows its best partner
    old = m.drop(columns=NEW)
    assert '<td class="best">pm6</td>' in render_overview(old, {"partners": [{"id": "pm6"}, {"id": "d18"}]})


#: invented partner levels (film scale, not measurements): two donors of identical levels tie exactly
_DONOR = "id,homo_ev,lumo_ev,gap_opt_ev,scale,role\n{id},-5.45,-3.55,1.85,film,donor\n"
_LEVELS = ("id,name,smiles,homo_ev,lumo_ev,gap_opt_ev,scale,role\n"
           "KF-A01,Kestrel acceptor one,c1ccc(-c2cccs2)s1,-5.80,-4.00,1.40,film,acceptor\n"
           "KF-A02,Kestrel acceptor two,c1ccsc1,-5.95,-3.95,1.55,film,acceptor\n")


def test_rank_with_two_partners_of_equal_levels_writes_the_tie_and_the_rule(tmp_path, capsys):
    levels = tmp_path / "lv.csv"
    levels.write_text(_LEVELS, encoding="utf-8")
    one, two = tmp_path / "one.csv", tmp_path / "two.csv"
    one.write_text(_DONOR.format(id="kd-one"), encoding="utf-8")
    two.write_text(_DONOR.format(id="kd-two"), encoding="utf-8")
    out = tmp_path / "out"
    assert main(["rank", "--levels", str(levels), "--out", str(out), "--partner", str(one), "--partner", str(two),
                 "--partner", "pm6"]) == 0
    capsys.readouterr()
    (matrix_dir,) = (out / "rankings").glob("matrix--*")
    m = pd.read_csv(matrix_dir / "matrix.csv", keep_default_na=False, na_values=[""])
    assert list(m.columns) == MATRIX_LEAD + ["kd-one", "kd-two", "pm6"]
    meta = json.loads((matrix_dir / "matrix.meta.json").read_text(encoding="utf-8"))
    rankings = {p["id"]: pd.read_csv(out / "rankings" / p["folder"] / "ranking.csv").set_index("id")
                for p in meta["partners"]}
    for row in m.to_dict("records"):
        assert row["kd-one"] == row["kd-two"]  # the same levels: an exact tie
        named = row["best_partner"].split(";")
        assert {"kd-one", "kd-two"} <= set(named) or named == ["pm6"]  # both tied partners, or pm6 ahead of them
        assert all(row[p] == pytest.approx(row["best_pce_pct"]) for p in named)
        if len(named) > 1:
            assert str(row["best_partner_resolved"]) == "False" and "tie at" in row["best_partner_note"]
            continue
        # pm6 alone: the rule, from the rankings' own figures (whatever the device model makes of these levels)
        pce = {p: rankings[p].loc[row["id"], "pce_pct"] for p in rankings}
        sig = {p: rankings[p].loc[row["id"], "pce_sigma_pct"] for p in rankings}
        within = [p for p in ("kd-one", "kd-two") if pce["pm6"] - pce[p] < math.hypot(sig["pm6"], sig[p])]
        assert str(row["best_partner_resolved"]) == str(not within)
        assert ("kd-one and kd-two" in row["best_partner_note"]) == bool(within)
    assert "sqrt(sigma_best^2 + sigma_k^2)" in meta["best_partner"]
    page = (matrix_dir / "overview.html").read_text(encoding="utf-8")
    assert "kd-one, kd-two" in page and "not resolved" in page
