"""Real-world candidate files (a chemist's audit of input files): drawing-tool SD polymers, Excel text exports, id
columns under other names, UTF-16, extra fields in SMILES files, separator notes, trailing empty columns, the
spreadsheet copy's encoding and look-alike characters in a SMILES.

Every fixture is written inline: each is the smallest file that shows what a drawing program or a spreadsheet
writes (the byte-order marks, ``M  APO``, ``ATTCHPT=``, ``M  STY ... SRU`` are the published formats: BIOVIA CTfile
formats, ``from memory``; Excel's export names and ``sep=`` line are ``common practice``).
"""

from __future__ import annotations

import codecs
import io
from pathlib import Path

import pandas as pd
import pytest

from screen.errors import InputError
from screen.prepare import prepare, read_candidates, validate
from screen.prepare import readers

THIOPHENE = "c1ccsc1"


def _validated(path: Path) -> pd.DataFrame:
    return validate(read_candidates(path))


@pytest.fixture(autouse=True)
def _fresh_notices(monkeypatch):
    """Each test sees the reader's once-per-file console notices afresh."""
    monkeypatch.setattr(readers, "_SAID", set(), raising=False)


# ------------------------------------------------------------------------------------------------------------
# finding 1: SD polymers drawn with attachment points (M  APO, ATTCHPT=) or an SRU bracket
# ------------------------------------------------------------------------------------------------------------

#: a thiophene ring, atoms 1-4 carbon, 5 sulfur (V2000 atom and bond blocks)
_RING_ATOMS = (
    "    1.2135   -0.1492    0.0000 C   0  0  0  0  0  0  0  0  0  0  0  0\n"
    "    0.7500    1.2774    0.0000 C   0  0  0  0  0  0  0  0  0  0  0  0\n"
    "   -0.7500    1.2774    0.0000 C   0  0  0  0  0  0  0  0  0  0  0  0\n"
    "   -1.2135   -0.1492    0.0000 C   0  0  0  0  0  0  0  0  0  0  0  0\n"
    "   -0.0000   -1.0309    0.0000 S   0  0  0  0  0  0  0  0  0  0  0  0\n"
)
_RING_BONDS = "  1  2  2  0\n  2  3  1  0\n  3  4  2  0\n  4  5  1  0\n  5  1  1  0\n"


def _ring_v2000(title: str, extra: str) -> str:
    return (f"{title}\n  Mrv2014 12052607222D\n\n  5  5  0  0  0  0            999 V2000\n"
            f"{_RING_ATOMS}{_RING_BONDS}{extra}M  END\n$$$$\n")


_APO_V3000 = """P-thio-APO-v3
  Mrv2014 12052607222D

  0  0  0     0  0            999 V3000
M  V30 BEGIN CTAB
M  V30 COUNTS 5 5 0 0 0
M  V30 BEGIN ATOM
M  V30 1 C 1.2135 -0.1492 0 0 ATTCHPT=1
M  V30 2 C 0.75 1.2774 0 0
M  V30 3 C -0.75 1.2774 0 0
M  V30 4 C -1.2135 -0.1492 0 0 ATTCHPT=2
M  V30 5 S 0 -1.0309 0 0
M  V30 END ATOM
M  V30 BEGIN BOND
M  V30 1 2 1 2
M  V30 2 1 2 3
M  V30 3 2 3 4
M  V30 4 1 4 5
M  V30 5 1 5 1
M  V30 END BOND
M  V30 END CTAB
M  END
$$$$
"""


def _sru(title: str, end: str, end_group: bool = False, crossing: bool = True) -> str:
    """A thiophene in an SRU bracket whose two crossing bonds end on ``end`` atoms (``*`` or a carbon stub); with
    ``end_group`` a second carbon hangs on the first stub (an end group outside the bracket)."""
    atoms = [f"    2.6401   -0.6127    0.0000 {end:<3} 0  0  0  0  0  0  0  0  0  0  0  0\n",
             "    1.2135   -0.1492    0.0000 C   0  0  0  0  0  0  0  0  0  0  0  0\n",
             "    0.7500    1.2774    0.0000 C   0  0  0  0  0  0  0  0  0  0  0  0\n",
             "   -0.7500    1.2774    0.0000 C   0  0  0  0  0  0  0  0  0  0  0  0\n",
             "   -1.2135   -0.1492    0.0000 C   0  0  0  0  0  0  0  0  0  0  0  0\n",
             f"   -2.6401   -0.6127    0.0000 {end:<3} 0  0  0  0  0  0  0  0  0  0  0  0\n",
             "   -0.0000   -1.0309    0.0000 S   0  0  0  0  0  0  0  0  0  0  0  0\n"]
    bonds = ["  1  2  1  0\n", "  2  3  2  0\n", "  3  4  1  0\n", "  4  5  2  0\n", "  5  6  1  0\n",
             "  5  7  1  0\n", "  7  2  1  0\n"]
    if end_group:
        atoms.append("    3.9000    0.2000    0.0000 C   0  0  0  0  0  0  0  0  0  0  0  0\n")
        bonds.append("  1  8  1  0\n")
    inside = "M  SAL   1  5   2   3   4   5   7\n" if crossing else \
        f"M  SAL   1  {len(atoms)}" + "".join(f"{i:>4}" for i in range(1, len(atoms) + 1)) + "\n"
    return (f"{title}\n  -ChemDraw12052607222D\n\n{len(atoms):>3}{len(bonds):>3}  0  0  0  0  0  0  0  0999 V2000\n"
            + "".join(atoms) + "".join(bonds)
            + "M  STY  1   1 SRU\nM  SLB  1   1   1\nM  SCN  1   1 HT \n" + inside
            + ("M  SBL   1  2   1   5\n" if crossing else "") + "M  SMT   1 n\nM  END\n$$$$\n")


def test_sd_attachment_points_of_a_drawing_program_are_the_repeat_unit_ends(tmp_path: Path) -> None:
    # the audit: M  APO (Marvin/ChemDraw V2000) and ATTCHPT=1/2 (V3000) on a thiophene were screened as thiophene
    path = tmp_path / "apo.sdf"
    path.write_text(_ring_v2000("P-thio-APO", "M  APO  2   1   1   4   2\n") + _APO_V3000, encoding="utf-8")
    out = _validated(path)
    assert list(out.status) == ["ok", "ok"]
    assert list(out.representation) == ["polymer", "polymer"]
    assert list(out.smiles) == ["*c1ccc(*)s1", "*c1ccc(*)s1"]
    assert all("[1*]" in s and "[2*]" in s for s in out.smiles_input)  # the ends as R1/R2 would give them


@pytest.mark.parametrize(("apo", "reason", "words"), [
    ("M  APO  1   1   1\n", "attachment_single", "one attachment point"),
    ("M  APO  1   1   3\n", "attachment_same_atom", "both attachment points"),
    ("M  APO  2   1   1   5   2\n", "attachment_no_hydrogen", "atom 5 (S)"),
])
def test_sd_attachment_points_that_make_no_repeat_unit_reject_the_record(tmp_path: Path, apo: str, reason: str,
                                                                         words: str) -> None:
    path = tmp_path / "apo.sdf"
    path.write_text(_ring_v2000("bad-APO", apo), encoding="utf-8")
    row = _validated(path).iloc[0]
    assert (row.status, row.reason) == ("rejected", reason)
    assert words in row.error and "R1" in row.error and "*" in row.error  # how to mark the ends
    assert row.smiles == ""  # never computed as the molecule


def test_sd_polymer_bracket_gives_the_ends_or_rejects_the_record(tmp_path: Path) -> None:
    path = tmp_path / "sru.sdf"
    path.write_text(_sru("stars", "*") + _sru("stubs", "C") + _sru("end-group", "C", end_group=True)
                    + _sru("no-ends", "C", crossing=False), encoding="utf-8")
    out = _validated(path)
    assert list(out.id) == ["stars", "stubs", "end-group", "no-ends"]
    assert list(out.status) == ["ok", "ok", "rejected", "rejected"]
    assert list(out.smiles[:2]) == ["*c1ccc(*)s1", "*c1ccc(*)s1"]  # the bracket's crossing bonds are the ends
    assert list(out.representation[:2]) == ["polymer", "polymer"]
    assert "end group" in out.error[2] and "bracket" in out.error[2]
    assert "no bond crosses" in out.error[3] and "R1" in out.error[3]
    assert out.smiles[3] == "" and out.smiles[2] == ""


# ------------------------------------------------------------------------------------------------------------
# finding 2: Excel "Text (Tab delimited)" .txt and tab-separated SMILES files with a header
# ------------------------------------------------------------------------------------------------------------


def test_tab_separated_text_with_the_id_first_is_read_by_its_header(tmp_path: Path) -> None:
    path = tmp_path / "list.txt"
    path.write_bytes(b"ID\tSMILES\tName\r\n007\tc1ccsc1\tthio\r\nKF-12\tc1ccc(-c2cccs2)s1\tbithio\r\n"
                     b"CCO\tc1ccoc1\tfuran\r\n")
    frame = read_candidates(path)
    assert list(frame.id) == ["007", "KF-12", "CCO"]
    assert list(frame.smiles_input) == ["c1ccsc1", "c1ccc(-c2cccs2)s1", "c1ccoc1"]  # id CCO is no ethanol
    assert list(frame.name) == ["thio", "bithio", "furan"]
    assert readers.input_line(frame, 2) == 4
    assert list(_validated(path).status) == ["ok"] * 3


@pytest.mark.parametrize(("text", "ids", "extra"), [
    ("Name\tSMILES\n007\tc1ccsc1\n", ["line-2"], {"name": ["007"]}),
    ("SMILES\tID\tRole\nc1ccsc1\t007\tdonor\n", ["007"], {"role": ["donor"]}),
    ("# exported\nsmiles\tid\tbatch\n\nc1ccsc1\t007\t12\n", ["007"], {"batch": ["12"]}),
])
def test_tab_separated_smiles_file_with_a_header_is_read_as_a_table(tmp_path: Path, text: str, ids: list[str],
                                                                     extra: dict) -> None:
    path = tmp_path / "c.smi"
    path.write_text(text, encoding="utf-8")
    frame = read_candidates(path)
    assert list(frame.id) == ids and list(frame.smiles_input) == [THIOPHENE]
    for column, values in extra.items():
        assert list(frame[column]) == values


@pytest.mark.parametrize("text", ["ID\tStructure\n007\tc1ccsc1\n", "Compound ID\tName\nCCO\tethanol\n",
                                  "ID SMILES\n007 c1ccsc1\n"])
def test_a_header_without_a_leading_smiles_column_is_refused(tmp_path: Path, text: str) -> None:
    path = tmp_path / "c.txt"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(InputError) as err:
        read_candidates(path)
    message = str(err.value)
    assert "c.txt" in message and "line 1" in message and "smiles" in message.lower()
    assert "\n" not in message


# ------------------------------------------------------------------------------------------------------------
# finding 3: id columns under other names; generated ids said on the console
# ------------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("header", ["Compound ID", "compound_id", " ID ", "Mol-ID", "Identifier"])
def test_common_id_header_spellings_are_the_id_column(tmp_path: Path, header: str) -> None:
    path = tmp_path / "c.csv"
    path.write_text(f'"{header}",SMILES,Role\n007,c1ccsc1,donor\nKF-12,c1ccoc1,donor\n', encoding="utf-8")
    frame = read_candidates(path)
    assert list(frame.id) == ["007", "KF-12"] and list(frame.note) == ["", ""]
    assert header.strip() not in frame.columns  # the ids are the id, not an extra column


def test_two_id_like_columns_are_refused(tmp_path: Path) -> None:
    path = tmp_path / "c.csv"
    path.write_text("Compound ID,SMILES,Mol ID\n007,c1ccsc1,M7\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"'Compound ID' and 'Mol ID' both look like the id column"):
        read_candidates(path)


def test_an_id_column_named_id_wins_over_other_spellings(tmp_path: Path) -> None:
    path = tmp_path / "c.csv"
    path.write_text("Compound ID,id,smiles\nC-7,007,c1ccsc1\n", encoding="utf-8")
    frame = read_candidates(path)
    assert list(frame.id) == ["007"] and list(frame["Compound ID"]) == ["C-7"]


def test_sd_record_with_an_empty_title_takes_its_id_data_item(tmp_path: Path) -> None:
    blocks = [_ring_v2000("", "").replace("$$$$\n", "> <ID>\n007\n\n> <Name>\nP\u00e9ryl\u00e8ne-2\n\n$$$$\n"),
              _ring_v2000("T2", "").replace("$$$$\n", "> <ID>\n0042\n\n$$$$\n"),
              _ring_v2000("", "").replace("$$$$\n", "> <Compound ID>\n\n\n$$$$\n")]
    path = tmp_path / "c.sdf"
    path.write_text("".join(blocks), encoding="utf-8")
    frame = read_candidates(path)
    assert list(frame.id) == ["007", "T2", "record-3"]  # the title wins; an empty data item gives no id
    assert frame.name[0] == "P\u00e9ryl\u00e8ne-2"


def test_generated_ids_are_said_on_the_console_once_naming_a_column_of_ids(tmp_path: Path, capsys) -> None:
    path = tmp_path / "c.csv"
    path.write_text("Compound #,SMILES,HOMO_exp\nA7,c1ccsc1,-5.2\nB9,c1ccoc1,-5.1\n", encoding="utf-8")
    read_candidates(path)
    read_candidates(path)  # the dry run reads the file several times: one line
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "2 rows of c.csv had no id" in err
    assert "'Compound #'" in err and "'HOMO_exp'" not in err and "name it 'id'" in err


def test_prepare_says_the_generated_ids_once(tmp_path: Path, capsys) -> None:
    path = tmp_path / "c.smi"
    path.write_text("Name\tSMILES\nT7\tc1ccsc1\n", encoding="utf-8")
    prepare(path, tmp_path / "prepared")
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "had no id" in err and "'Name'" in err


# ------------------------------------------------------------------------------------------------------------
# finding 4: UTF-16 (Excel "Unicode text")
# ------------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("bom, codec", [(codecs.BOM_UTF16_LE, "utf-16-le"), (codecs.BOM_UTF16_BE, "utf-16-be")])
def test_utf16_text_with_a_byte_order_mark_is_read(tmp_path: Path, bom: bytes, codec: str) -> None:
    text = "ID\tSMILES\tName\r\n007\tc1ccsc1\tP\u00e9ryl\u00e8ne-2\r\n"
    path = tmp_path / "unicode.txt"
    path.write_bytes(bom + text.encode(codec))
    frame = read_candidates(path)
    assert list(frame.id) == ["007"] and list(frame.name) == ["P\u00e9ryl\u00e8ne-2"]
    csv_path = tmp_path / "unicode.csv"
    csv_path.write_bytes(bom + "id,smiles\r\n007,c1ccsc1\r\n".encode(codec))
    assert list(read_candidates(csv_path).id) == ["007"]


def test_utf16_sd_file_is_refused_saying_utf16(tmp_path: Path) -> None:
    path = tmp_path / "c.sdf"
    path.write_bytes(codecs.BOM_UTF16_LE + _ring_v2000("T1", "").encode("utf-16-le"))
    with pytest.raises(InputError) as err:
        read_candidates(path)
    message = str(err.value)
    assert "UTF-16" in message and "iconv -f utf-16 -t utf-8" in message and "latin1" not in message
    # the message of the dry run's own check of an SD file (screen.preflight) is the same
    assert str(readers.not_utf8_error(path, path.read_bytes(), "sdf")) == message


# ------------------------------------------------------------------------------------------------------------
# finding 5: extra fields in a SMILES file line
# ------------------------------------------------------------------------------------------------------------


def test_tab_separated_fields_after_the_id_reject_the_row(tmp_path: Path) -> None:
    path = tmp_path / "c.smi"
    path.write_text("c1ccsc1\t007\tdonor\nc1ccoc1 Kestrel sample 2\nCCC\tT3\t\t\nc1ccccc1\tT4\n",
                    encoding="utf-8")
    out = _validated(path)
    assert list(out.id) == ["007", "Kestrel sample 2", "T3", "T4"]  # an id with blanks is still an id
    assert list(out.status) == ["rejected", "ok", "ok", "ok"]
    assert out.reason[0] == "malformed_row" and "'donor'" in out.error[0] and "line 1" in out.error[0]


def test_two_column_smiles_header_keeps_the_second_column_as_the_id(tmp_path: Path) -> None:
    path = tmp_path / "c.smi"
    path.write_text("SMILES\tName\nc1ccsc1\t007\nc1ccoc1 furan part\n", encoding="utf-8")
    frame = read_candidates(path)
    assert list(frame.id) == ["007", "furan part"] and list(frame.name) == ["", ""]


# ------------------------------------------------------------------------------------------------------------
# finding 6: separators
# ------------------------------------------------------------------------------------------------------------


def test_semicolon_file_with_a_comma_in_a_column_name_is_named(tmp_path: Path) -> None:
    path = tmp_path / "c.csv"
    path.write_bytes(codecs.BOM_UTF8 + b"ID;SMILES;HOMO (eV, CV)\r\n007;c1ccsc1;-5,20\r\n")
    with pytest.raises(InputError, match=r"seems to be separated by ';'"):
        read_candidates(path)


def test_excel_separator_line(tmp_path: Path) -> None:
    path = tmp_path / "c.csv"
    path.write_text("sep=,\r\nid,smiles\r\n007,c1ccsc1\r\n", encoding="utf-8")
    frame = read_candidates(path)
    assert list(frame.id) == ["007"] and readers.input_line(frame, 0) == 3
    path.write_text("sep=;\r\nid;smiles\r\n007;c1ccsc1\r\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"separated by ';'.*'sep=;'"):
        read_candidates(path)


def test_separator_problem_counts_the_separators() -> None:
    from screen.io import separator_problem

    assert "';'" in separator_problem("ID;SMILES;HOMO (eV, CV)")
    assert "';'" in separator_problem(["ID;SMILES;HOMO (eV", "CV)"])
    assert separator_problem("id,smiles;x") is None and separator_problem(["id", "a;b"]) is None
    assert "sep=," in separator_problem(["sep=", "Unnamed: 1"])


# ------------------------------------------------------------------------------------------------------------
# finding 7: trailing empty spreadsheet columns
# ------------------------------------------------------------------------------------------------------------


def test_empty_unnamed_columns_are_dropped_and_trailing_empty_fields_accepted(tmp_path: Path) -> None:
    path = tmp_path / "c.csv"
    path.write_text("id,smiles,Batch,,\n007,c1ccsc1,0012,,\n0042,c1ccoc1,00,,\n", encoding="utf-8")
    frame = read_candidates(path)
    assert [c for c in frame.columns if c.startswith("column_")] == []
    assert list(frame.Batch) == ["0012", "00"]
    path.write_text("id,smiles,,\n007,c1ccsc1,,x\n", encoding="utf-8")  # an unnamed column with a value stays
    assert list(read_candidates(path).column_4) == ["x"]
    path.write_text("id,smiles\n007,c1ccsc1,,\n008,c1ccoc1, ,\n009,CCC,,x\n", encoding="utf-8")
    out = _validated(path)
    assert list(out.status) == ["ok", "ok", "rejected"] and out.reason[2] == "malformed_row"


# ------------------------------------------------------------------------------------------------------------
# finding 8: the spreadsheet copy of the ranking carries a UTF-8 byte-order mark
# ------------------------------------------------------------------------------------------------------------


def test_safe_csv_bytes_carry_a_bom_and_read_back(tmp_path: Path) -> None:
    from screen.io import csv_header, read_csv_checked
    from screen.report.export import safe_csv_bytes

    ranking = pd.DataFrame({"rank": [1, 2], "id": ["P\u00e9ryl\u00e8ne-2", "=cmd"], "homo_ev": [-5.4, -5.1]})
    data = safe_csv_bytes(ranking)
    assert data.startswith(codecs.BOM_UTF8)
    path = tmp_path / "ranking.safe.csv"
    path.write_bytes(data)
    back = read_csv_checked(path, ["rank", "id", "homo_ev"], keep_default_na=False)
    assert list(back.columns) == ["rank", "id", "homo_ev"]
    assert list(back.id) == ["P\u00e9ryl\u00e8ne-2", "'=cmd"]
    assert csv_header(path) == ["rank", "id", "homo_ev"]
    assert pd.read_csv(io.BytesIO(data)).columns[0] == "rank"


# ------------------------------------------------------------------------------------------------------------
# finding 9: look-alike and invisible characters in a SMILES
# ------------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize(("smiles", "words"), [
    ("c1cc\u2011sc1", "U+2011 (NON-BREAKING HYPHEN)"),
    ("CC\u2212C", "U+2212 (MINUS SIGN)"),
    ("CC\u200bO", "U+200B (ZERO WIDTH SPACE)"),
    ("CC\u00a0O", "U+00A0 (NO-BREAK SPACE)"),
])
def test_a_character_outside_smiles_is_named(smiles: str, words: str) -> None:
    row = validate(pd.DataFrame({"id": ["x"], "smiles_input": [smiles]})).iloc[0]
    assert (row.status, row.reason) == ("rejected", "unparsable")
    assert words in row.error


def test_the_written_spreadsheet_copy_carries_a_bom(tmp_path: Path) -> None:
    from screen.report import write_report

    ranking = pd.DataFrame({"rank": [1], "id": ["P\u00e9ryl\u00e8ne-2"], "smiles": [THIOPHENE], "role": ["donor"],
                            "homo_ev": [-5.4], "lumo_ev": [-3.9], "gap_opt_ev": [1.5], "delta_lumo_ev": [0.4],
                            "pce_pct": [9.8], "passes": [True], "flags": [""]})
    out = write_report(ranking, pd.DataFrame(), {"id": "ref", "lumo_ev": -4.3}, {"created": "x"}, tmp_path)
    data = (out.parent / "ranking.safe.csv").read_bytes()
    assert data.startswith(codecs.BOM_UTF8) and "P\u00e9ryl\u00e8ne-2".encode() in data
    assert pd.read_csv(out.parent / "ranking.safe.csv").columns[0] == "rank"


def test_the_dye_mode_sets_aside_a_polymer_drawn_with_attachment_points(tmp_path):
    # the dye mode's shortcut looked for '*' or 'R#' bytes only, so a repeat unit drawn with M  APO / ATTCHPT or an
    # SRU bracket (finding 1) went to the dye stages as a molecule
    from screen.dyecell.cli import _set_aside

    path = tmp_path / "dyes.sdf"
    path.write_text(_ring_v2000("P-thio-APO", "M  APO  2   1   1   4   2\n") + _APO_V3000, encoding="utf-8")
    frame, aside = _set_aside(path)
    assert frame is not None and sorted(aside["id"]) == ["P-thio-APO", "P-thio-APO-v3"]
    assert set(aside["reason"]) == {"not_a_dye"} and set(aside["representation"]) == {"polymer"}


def test_the_dry_run_says_how_the_file_is_read_and_computes_nothing(tmp_path, capsys):
    # an input-file audit: the dry run listed the workflow's jobs but no row, and there was no way to see which rows
    # would be taken as what before an overnight batch
    from screen.cli import main

    path = tmp_path / "c.csv"
    path.write_text("id,smiles\na,c1ccsc1\nb,C1CC\np,[*]c1ccc([*])s1\nd,c1ccsc1\n", encoding="utf-8")
    rc = main(["run", str(path), "--out", str(tmp_path / "out"), "--dry-run"])
    err = capsys.readouterr().err
    assert rc == 0
    assert ("c.csv reads as 4 rows: 3 accepted (2 molecules, 1 polymer repeat unit as 4 oligomers), 1 rejected; "
            "4 distinct structures") in err  # d repeats a's thiophene, and so does p's hydrogen-capped monomer
    assert "rejected: input row 2, id 'b': unparsable:" in err
    assert not (tmp_path / "out" / "levels.csv").exists() and not (tmp_path / "out" / "work").exists()


def test_a_utf16_levels_file_gets_the_conversion_not_a_codec_error(tmp_path):
    # a maintainer's review: candidate files in UTF-16 were read, a levels/partner/dye file got "'utf-8' codec can't
    # decode byte 0xff", naming no fix; every CSV reader now says how to convert it
    from screen.errors import InputError
    from screen.io import read_csv_checked

    path = tmp_path / "lv.csv"
    path.write_bytes("id,homo_ev\nx,-5.3\n".encode("utf-16"))
    with pytest.raises(InputError, match=r"UTF-16 text \(byte-order mark FF FE\).*iconv -f utf-16 -t utf-8 lv.csv"):
        read_csv_checked(path, ["id", "homo_ev"], what="a levels file")
