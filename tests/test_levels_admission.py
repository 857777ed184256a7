"""Admission of the rows of levels, partner and dye files: the rule of the candidate files
(screen.prepare.checks.text_row_problem) — control characters in id/name/role, SMILES too long or too large to
read — refuses such a file whole (exit 2, one message naming line and column), and the report and the shortlist
never draw or embed a structure far over the size limit (a review: a 20 000-carbon SMILES in a dye file ran for
12 min to 14 GB, a 3000-carbon one stalled the report's drawing and the shortlist's 3-D embedding).

The sizes are counts of atoms and characters, not physical values: 200 heavy atoms is the shipped default of
``prepare.max_heavy_atoms`` (config/config.yaml), 50 characters per heavy atom and 2000 heavy atoms are the limits
of screen.prepare.checks (SMILES_CHARS_PER_HEAVY_ATOM, FULL_CHECK_ATOMS).
"""

from __future__ import annotations

import codecs

import pandas as pd
import pytest

from screen.errors import InputError

#: a SMILES of far more heavy atoms than the prepare stage reads (3000 > 2000), but shorter than its length limit
BIG_SMILES = "C" * 3000 + "C(=O)O"
#: a SMILES text longer than the prepare stage reads for 200 heavy atoms (10 000 characters)
LONG_SMILES = "C" * 12000
#: a level row that passes every other check (film-scale levels of a typical donor, common practice)
LEVELS = {"homo_ev": -5.3, "lumo_ev": -3.4, "gap_opt_ev": 1.8, "scale": "film"}
#: a dye row that passes every other check (E(S+/S) and E00 of a typical organic sensitiser, common practice)
DYE = {"e_ox_v_nhe": 1.0, "e00_ev": 2.5}


def _levels_file(tmp_path, ids, smiles):
    path = tmp_path / "lev.csv"
    pd.DataFrame({"id": ids, "smiles": smiles, **{k: [v] * len(ids) for k, v in LEVELS.items()}}).to_csv(
        path, index=False)
    return path


@pytest.mark.parametrize("ident,code", [("A\x00B", "U+0000 (NUL)"), ("E\x1b[31mRED", "U+001B (ESC)")])
def test_levels_file_refuses_control_character_in_id(tmp_path, ident, code):
    from screen.levels import read_levels
    from screen.rank import check_input_levels

    levels = read_levels(_levels_file(tmp_path, ["ok", ident], ["CC", "CCC"]))
    levels.attrs["source"] = "lev.csv"
    with pytest.raises(InputError) as err:
        check_input_levels(levels)
    message = str(err.value)
    assert message.startswith(f"lev.csv: line 3, column id = {ident!r}: the id")
    assert code in message and "\x00" not in message and "\x1b" not in message


def test_levels_file_refuses_control_character_in_name():
    from screen.levels_check import check_levels

    frame = pd.DataFrame({"id": ["a"], "name": ["x\x07y"], **{k: [v] for k, v in LEVELS.items()}})
    with pytest.raises(InputError, match=r"line 2 \(id 'a'\), column name = 'x\\x07y': the name .* U\+0007 \(BEL\)"):
        check_levels(frame, "lev.csv")
    # a line break stays allowed in a levels file (the CSV outputs quote it, the SD title and the console replace it;
    # tests/test_rank.py ranks an id "two<LF>lines")
    check_levels(pd.DataFrame({"id": ["two\nlines"], "name": ["x\ry"], **{k: [v] for k, v in LEVELS.items()}}))


@pytest.mark.parametrize("smiles,said", [(BIG_SMILES, "3003 heavy atoms, far more than the limit of 200"),
                                         (LONG_SMILES, "SMILES text too long: 12000 characters, more than the 10000")])
def test_levels_file_refuses_structure_too_large_to_read(tmp_path, smiles, said):
    from screen.levels import read_levels
    from screen.rank import check_input_levels

    levels = read_levels(_levels_file(tmp_path, ["BIG"], [smiles]))
    levels.attrs["source"] = "lev.csv"
    with pytest.raises(InputError) as err:
        check_input_levels(levels)
    message = str(err.value)
    assert message.startswith("lev.csv: line 2 (id 'BIG'), column smiles = 'CCCC")
    assert said in message and len(message) < 600  # the SMILES is quoted cut, not whole


def test_partner_file_refuses_control_character_in_id(tmp_path):
    from screen.partners import PartnerError
    from screen.partners import resolve_partner

    path = _levels_file(tmp_path, ["P\x1b[0m"], ["CC"])
    with pytest.raises(PartnerError, match=r"partner file .*lev\.csv: line 2, column id = 'P\\x1b\[0m'.*U\+001B"):
        resolve_partner(str(path))


def test_dye_file_refuses_control_character_and_huge_smiles():
    from screen.dyecell.checks import check_dye_file

    ctl = pd.DataFrame({"id": ["A\x00B", "E\x1b[31mRED"], **{k: [v, v] for k, v in DYE.items()}})
    with pytest.raises(InputError) as err:
        check_dye_file(ctl, "d.csv")
    assert str(err.value).splitlines()[0] == "d.csv: 2 problems:"
    assert "line 2, column id = 'A\\x00B'" in str(err.value) and "\x1b" not in str(err.value)
    big = pd.DataFrame({"id": ["BIG"], "smiles": [LONG_SMILES + "C" * 8000], **{k: [v] for k, v in DYE.items()}})
    with pytest.raises(InputError, match=r"^d\.csv: line 2 \(id 'BIG'\), column smiles = .*SMILES text too long"):
        check_dye_file(big, "d.csv")


def test_dye_file_still_takes_an_ordinary_row():
    from screen.dyecell.checks import check_dye_file

    ok = pd.DataFrame({"id": ["D1"], "name": ["tab\tname"], "smiles": ["OC(=O)c1ccc(cc1)N(c1ccccc1)c1ccccc1"],
                       **{k: [v] for k, v in DYE.items()}})
    assert check_dye_file(ok, "d.csv").tolist() == [1.0]


@pytest.mark.parametrize("bom", [b"", codecs.BOM_UTF16_LE])
def test_dyecell_input_in_utf16_is_named(tmp_path, bom):
    from screen.dyecell.stage import read_input

    path = tmp_path / "u16dye.csv"
    path.write_bytes(bom + "id,smiles,e_ox_v_nhe,e00_ev\nD1,CC,1.0,2.5\n".encode("utf-16-le"))
    with pytest.raises(InputError, match=r"u16dye\.csv: .*UTF-16.*iconv -f utf-16"):
        read_input(path)


def test_report_and_shortlist_skip_a_structure_too_large():
    from screen.rank_io import _embedded
    from screen.report.drawings import DRAW_MAX_HEAVY_ATOMS, drawable, molecule_svg

    assert molecule_svg("C" * (DRAW_MAX_HEAVY_ATOMS + 1)) is None  # the page says "no structure available"
    assert drawable("C" * DRAW_MAX_HEAVY_ATOMS) and not drawable("C" * 10**6)
    assert molecule_svg("c1ccsc1", "thiophene").startswith('<svg class="mol"')
    assert _embedded("C" * 201) is None  # over the 200 heavy atoms of the default limit: no 3-D embedding


def test_candidate_rows_keep_their_reasons_and_messages():
    from screen.prepare import PrepareOptions, validate
    from screen.prepare.checks import smiles_length_problem, text_row_problem

    frame = pd.DataFrame({"id": ["long", "ctl", "ok"], "smiles_input": [LONG_SMILES, "CC", "c1ccsc1"],
                          "name": ["", "a\x00b", ""]})
    out = validate(frame, PrepareOptions())
    assert out["reason"].tolist()[0] == "too_many_atoms" and out["status"].tolist()[2] == "ok"
    assert out["error"].tolist()[0] == smiles_length_problem(LONG_SMILES, 200)
    assert out["status"].tolist()[1] == "rejected" and "U+0000 (NUL)" in out["error"].tolist()[1]
    assert text_row_problem({"id": "ctl", "name": "a\x00b"}, "CC")[0] == "name"


def test_renamed_helpers_are_public():
    from screen.levels_check import file_line, fmt_value, hartree_hint

    assert file_line(pd.DataFrame({"id": ["a"]}), 0) == 2
    assert fmt_value(-5.30) == "-5.3"
    # 1 Eh = 27.2114 eV (CODATA): -0.2 Eh is a HOMO of -5.44 eV
    assert hartree_hint(-0.2, -9.0, -4.0).startswith("-0.2 looks like hartree")


def test_a_levels_file_names_a_decimal_comma_as_the_dye_and_reference_checks_do(tmp_path):
    # the three numeric-column checks wrote their own "not a number" message; a levels file's said only "write the
    # value in eV", where a dye file and a reference file named the decimal comma or the typographic minus
    from screen.errors import InputError
    from screen.levels import read_levels
    from screen.levels_check import check_levels

    path = tmp_path / "lv.csv"
    path.write_text('id,homo_ev,lumo_ev,gap_opt_ev,scale\nD1,"-5,35",-3.4,1.9,film\n', encoding="utf-8")
    with pytest.raises(InputError, match=r"line 2 \(id 'D1'\), column homo_ev = '-5,35': not a number; a decimal "
                                         r"comma\? write -5.35 \(eV, with a decimal point\)"):
        check_levels(read_levels(path), str(path))
