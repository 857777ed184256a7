"""Tests of screen.levels_check: impossible levels are refused before ranking, naming file, line, column, fix."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from screen.errors import InputError
from screen.levels_check import GAP_DEFICIT_MAX_EV, GAP_EXCESS_TOL_EV, check_levels, check_partner, row_problems
from screen.partners import library_partners


def _frame(**cols):
    base = {"id": ["a"], "homo_ev": [-5.3], "lumo_ev": [-3.5], "gap_opt_ev": [1.7], "scale": ["film"]}
    base.update({k: [v] for k, v in cols.items()})
    return pd.DataFrame(base)


@pytest.mark.parametrize("cols, column, fix", [
    (dict(homo_ev=5.3), "homo_ev", "write it as -5.3"),
    (dict(lumo_ev=3.5), "lumo_ev", "write it as -3.5"),
    (dict(homo_ev=-3.5, lumo_ev=-5.3), "homo_ev", "look swapped"),
    (dict(gap_opt_ev=0.0), "gap_opt_ev", "must be positive"),
    (dict(gap_opt_ev=-1.2), "gap_opt_ev", "must be positive"),
    (dict(gap_opt_ev=730.0), "gap_opt_ev", "1239.84/730 = 1.7 eV"),
    (dict(gap_opt_ev=1.8 + GAP_EXCESS_TOL_EV + 0.05), "gap_opt_ev", "exceeds LUMO - HOMO"),
    (dict(homo_sigma_ev=-0.1), "homo_sigma_ev", ">= 0"),
    (dict(lumo_sigma_ev=np.inf), "lumo_sigma_ev", ">= 0"),
    (dict(homo_ev="-5.3eV"), "homo_ev", "not a number"),
    (dict(gap_opt_ev=np.inf), "gap_opt_ev", "= inf: not a finite number"),
    (dict(homo_ev=-np.inf), "homo_ev", "= -inf: not a finite number"),
    (dict(gap_opt_ev=1.8 - GAP_DEFICIT_MAX_EV - 0.1), "gap_opt_ev", "below LUMO - HOMO"),
    (dict(scale="cv"), "scale", "= 'cv': allowed: film or gas (CV levels are film)"),
    (dict(scale=""), "scale", "= '': allowed: film or gas"),
    (dict(role="dye"), "role", "`dascreen dyecell`"),
    (dict(role="sensitiser"), "role", "allowed: donor, acceptor or empty"),
])
def test_each_problem_names_file_line_column_and_fix(cols, column, fix):
    with pytest.raises(InputError) as err:
        check_levels(_frame(**cols), "cv.csv")
    msg = str(err.value)
    assert msg.startswith("cv.csv: line 2 (id 'a'), column " + column) and fix in msg


def test_sane_rows_pass_and_empty_cells_are_left_to_the_ranking():
    check_levels(_frame(), "cv.csv")
    check_levels(_frame(homo_ev=np.nan, gap_opt_ev=np.nan), "cv.csv")
    # optical gap slightly above LUMO - HOMO (CV and absorption onsets differ): accepted
    check_levels(_frame(gap_opt_ev=1.8 + GAP_EXCESS_TOL_EV - 0.05), "cv.csv")
    # gas scale: an unbound anion (EA < 0, LUMO > 0) is physical
    check_levels(_frame(lumo_ev=0.4, gap_opt_ev=4.0, scale="gas"), "gas.csv")


def test_gap_rules_hold_at_their_boundaries_despite_rounding():
    # LUMO - HOMO = 2.3 eV and a gap 0.3 eV above it: exactly the allowance (-3.0 - (-5.3) is 2.2999999999999998)
    check_levels(_frame(homo_ev=-5.3, lumo_ev=-3.0, gap_opt_ev=2.6), "cv.csv")
    check_levels(_frame(homo_ev=-5.3, lumo_ev=-3.0, gap_opt_ev=2.3 - GAP_DEFICIT_MAX_EV), "cv.csv")
    # a gas-scale transport gap exceeds the optical gap by far more than an exciton binding energy in a film
    check_levels(_frame(homo_ev=-7.5, lumo_ev=-1.0, gap_opt_ev=2.0, scale="gas"), "gas.csv")


def test_empty_and_repeated_ids_are_refused_with_their_lines():
    frame = pd.DataFrame({"id": ["A", "", "A"], "homo_ev": -5.3, "lumo_ev": -3.5, "gap_opt_ev": 1.7,
                          "scale": "film"})
    with pytest.raises(InputError) as err:
        check_levels(frame, "x.csv")
    msg = str(err.value)
    assert msg.startswith("x.csv: 2 problems")
    assert "line 3, column id = '': empty" in msg and "line 4, column id = 'A': the same id as line 2" in msg


def test_several_problems_in_one_message_with_file_lines():
    frame = pd.DataFrame({"id": ["a", "b", "c"], "homo_ev": [5.3, -5.3, -3.0], "lumo_ev": [-3.5, -3.5, -5.0],
                          "gap_opt_ev": [1.7, 1.7, 1.7], "scale": "film"}, index=[0, 4, 7])  # file rows 0, 4, 7
    with pytest.raises(InputError) as err:
        check_levels(frame, "x.csv")
    msg = str(err.value)
    assert msg.startswith("x.csv: 2 problems") and "line 2 (id 'a')" in msg and "line 9 (id 'c')" in msg


def test_every_library_partner_is_sane():
    for pid, partner in library_partners().items():
        check_partner(partner)  # raises on an impossible library row
        assert row_problems(partner.homo_ev, partner.lumo_ev, partner.gap_opt_ev, partner.scale) == [], pid


def test_problem_count_says_how_many_are_shown():
    frame = pd.DataFrame({"id": [f"m{i}" for i in range(7)], "homo_ev": 5.3, "lumo_ev": -3.5, "gap_opt_ev": 1.7,
                          "scale": "film"})                                  # 7 rows with a HOMO > 0
    with pytest.raises(InputError) as err:
        check_levels(frame, "misc.csv")
    msg = str(err.value)
    assert msg.startswith("misc.csv: 7 problems (first 5 shown):") and "more)" not in msg
    assert msg.count("\n  ") == 5


def test_semicolon_separated_levels_file_is_named(tmp_path):
    from screen.levels import read_levels

    f = tmp_path / "levels.csv"
    f.write_text("id;homo_ev;lumo_ev;scale\nm1;-5,3;-3,2;film\n")
    with pytest.raises(InputError, match=r"levels\.csv: the file seems to be separated by ';'.*comma-separated CSV"):
        read_levels(f)


def test_equal_homo_and_lumo_are_called_equal_not_swapped():
    with pytest.raises(InputError) as err:
        check_levels(_frame(homo_ev=-5.0, lumo_ev=-5.0), "cv.csv")
    msg = str(err.value)
    assert "column homo_ev = -5: HOMO and LUMO are equal (-5)" in msg and "zero transport gap" in msg
    assert "swapped" not in msg


@pytest.mark.parametrize("column", ["scale", "homo_ev", "role", "id"])
def test_a_huge_cell_is_quoted_shortened_in_the_message(column):
    # a 5 MB scale cell gave a 5 MB message
    from screen.levels_check import QUOTE_MAX, quoted

    huge = "x" * 5_000_000
    frame = _frame(**{column: huge}) if column != "id" else pd.concat([_frame(id=huge), _frame(id=huge)])
    frame = frame.reset_index(drop=True)
    with pytest.raises(InputError) as err:
        check_levels(frame, "big.csv")
    text = str(err.value)
    assert len(text) < 1000 and "… (5000000 characters)" in text
    assert quoted(huge) == repr("x" * QUOTE_MAX) + "… (5000000 characters)"
    assert quoted("film") == "'film'"
