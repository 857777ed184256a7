"""A carriage return or line feed inside a text cell: every CSV file the project writes quotes it, every reading gets
the text back whole, and the spreadsheet copy holds no line break at all (a security audit).

Python's csv module (and so pandas' ``to_csv``) quotes a field only for the delimiter, the quote character and the
characters of the line terminator: with ``"\\n"`` a lone CR was written bare, and every later reading took it for a
line break. A candidate named ``"ok\\r=1+1"`` then lost a run's whole batch at the levels stage, and
``ranking.safe.csv`` got a row that began with a formula.

The prepare stage now rejects a candidate whose id, name or role holds a control character (``malformed_row``;
tests/test_input_limits.py), so a CR reaches the run's own files only in a column it passes through unchecked
(``notes`` below); a levels file given to ``dascreen rank`` is not prepared, and its names keep their CR.

Every id, name and level below is made up for the test; the molecules are small well-known aromatics used only as
structures (thiophene, furan, bithiophene). No physical value is checked here.
"""

from __future__ import annotations

import io
import re

import numpy as np
import pandas as pd
import pytest

from screen.io import _pandas_csv, csv_text, field_count_lines, read_csv_checked, write_csv
from screen.report.export import _FORMULA_START, safe_csv_bytes, safe_csv_frame, safe_csv_text

#: the names of the audit (t2/c.csv, t11/lv2.csv): a formula after a lone CR, and a CR, a CR LF and a LF
CR_NAME = "ok\r=1+1"
CR_CMD = "ok\r=cmd|' /C calc'!A0"
BREAKS = [CR_NAME, CR_CMD, "line1\r\n=2+2\nline3", "x\n@SUM(A1)", "\r=1", "\n-cmd", "tail\r"]

#: the published donor-only model (Scharber et al., Adv. Mater. 18 (2006) 789, doi:10.1002/adma.200501717)
PUBLISHED_CFG = {"device": {"model": "scharber", "absorber": "donor"}, "rank": {"role": "donor"}}
REF = "scharber-reference-acceptor"


def _read_back(text: str, **kwargs) -> pd.DataFrame:
    """A CSV text read as the project reads its files (pandas' C parser, the text as in the file)."""
    return pd.read_csv(io.StringIO(text, newline=""), **kwargs)


def _physical_lines(text: str) -> list[str]:
    """The lines a reader that ignores quoting sees (a spreadsheet import set to another line end, grep)."""
    return re.split("\r\n|\r|\n", text)


@pytest.mark.parametrize("lineterminator", ["\n", "\r\n", "\r"])
def test_a_text_field_with_a_line_break_is_quoted_whatever_the_line_end(lineterminator):
    frame = pd.DataFrame({"id": BREAKS, "x": np.arange(len(BREAKS), dtype=float)})
    text = csv_text(frame, lineterminator)
    for value in BREAKS:
        assert '"' + value + '"' in text
    back = _read_back(text, dtype={"id": str}, keep_default_na=False, lineterminator=None)
    assert back["id"].tolist() == BREAKS and len(back) == len(frame)


@pytest.mark.parametrize("frame", [
    pd.DataFrame({"id": pd.Series([CR_NAME, "b"], dtype="category"), "x": [1.0, 2.0]}),  # written by pandas
    pd.DataFrame({"id": [CR_NAME, 3], "x": [1.0, 2.0]}),  # mixed objects: written by pandas
    pd.DataFrame({"id": pd.Series([CR_NAME, pd.NA], dtype="string"), "x": [1.0, np.nan]}),  # made column by column
    pd.DataFrame({"only": [CR_NAME, "", "b"]}),  # one column: pandas, a lone empty field quoted
])
def test_every_writing_path_quotes_a_lone_cr_and_reads_back_whole(frame):
    text = csv_text(frame, "\n")
    assert '"ok\r=1+1"' in text
    back = _read_back(text, dtype=str, keep_default_na=False)
    assert len(back) == len(frame) and back.iloc[0, 0] == CR_NAME
    # the header and every row have the header's field count (csv reads the quoted CR inside its field)
    assert text.count("\n") == len(frame) + 1


def test_ordinary_text_is_what_pandas_writes_byte_for_byte():
    """Nothing changes for a table without CR (a LF is quoted by pandas too when the line end is "\\n")."""
    text = ["", "a", "a,b", 'q"', '"', "line\nbreak", " lead", "\ttab", "=1+1", "-5.4", "\u00fcn\u00ef", "nul\0x"]
    frame = pd.DataFrame({"id": text, "x": np.linspace(-5.5, 1e-5, len(text)), "ok": [True, False] * 6,
                          "when": pd.to_datetime(["2024-01-02"] * len(text))})
    for part in (frame, frame[["id", "x", "ok"]], frame[["id"]]):
        for lineterminator in ("\n", "\r\n"):
            assert csv_text(part, lineterminator) == part.to_csv(index=False, lineterminator=lineterminator)
    assert csv_text(frame, "\n", float_format="%.4g") == frame.to_csv(index=False, lineterminator="\n",
                                                                        float_format="%.4g")


def test_the_fast_writer_and_the_pandas_path_agree_on_line_breaks():
    frame = pd.DataFrame({"id": BREAKS + ["a,b", 'q"'], "x": np.arange(len(BREAKS) + 2) / 3.0})
    assert csv_text(frame, "\n") == _pandas_csv(frame, "\n")


def test_write_csv_round_trips_through_read_csv_checked(tmp_path):
    frame = pd.DataFrame({"id": ["D1", "X\r=1"], "name": [CR_NAME, "b"], "homo_ev": [-5.4, -5.5]})
    path = tmp_path / "t.csv"
    write_csv(frame, path)
    back = read_csv_checked(path, ["id", "name"], dtype={"id": str, "name": str})
    assert back["id"].tolist() == ["D1", "X\r=1"] and back["name"].tolist() == [CR_NAME, "b"]
    assert field_count_lines(path)[1] == []  # csv sees two rows of three fields
    path = tmp_path / "g.csv"  # the device level table's writer: float_format
    write_csv(frame, path, lineterminator="\n", float_format="%.4g")
    assert pd.read_csv(path)["name"].tolist() == [CR_NAME, "b"]


def test_a_cr_in_a_passed_through_column_survives_prepare_and_the_manifest_reading(tmp_path):
    """Audit case a: the levels stage read manifest.csv with a cell split over two rows and stopped the batch. An id
    or name with a CR is now rejected by the prepare stage (tests/test_input_limits.py); a ``notes`` column is
    passed through unchecked, so its CR must reach the manifest whole while the batch goes on."""
    from screen.io import batch_progress
    from screen.prepare import prepare, read_manifest

    source = tmp_path / "c.csv"
    pd.DataFrame({"id": ["D1", "D2"], "name": ["a", "b"], "smiles": ["c1ccsc1", "c1ccoc1"],
                  "notes": ["line1\r=2+2", "tail\r"]}).to_csv(source, index=False, lineterminator="\r\n")
    out = tmp_path / "work" / "candidates" / "prepared"
    prepare(source, out)
    assert b'"line1\r=2+2"' in (out / "manifest.csv").read_bytes()  # quoted: csv reads the CR inside its field
    # read as screen.levels.read_computed reads it
    manifest = pd.read_csv(out / "manifest.csv", dtype=str, keep_default_na=False)
    assert manifest["row"].astype(int).tolist() == [0, 1] and manifest["status"].tolist() == ["ok", "ok"]
    assert manifest["id"].tolist() == ["D1", "D2"] and manifest["notes"].tolist() == ["line1\r=2+2", "tail\r"]
    assert read_manifest(out / "manifest.csv")["notes"].tolist() == ["line1\r=2+2", "tail\r"]
    # the shards (key, smiles, id: the notes stay in the manifest) hold both rows: the batch goes on
    shards = pd.concat([pd.read_csv(p, dtype=str) for p in sorted(out.glob("shard-*.csv"))])
    assert sorted(shards["id"]) == ["D1", "D2"]
    assert batch_progress(tmp_path)["total"] == 2  # `dascreen status` said 3 molecules for these 2


def _cr_levels(path):
    """The audit's levels file (t11/lv2.csv): a quoted name holding a lone CR."""
    path.write_bytes(b"id,name,role,smiles,homo_ev,lumo_ev,gap_opt_ev,scale\n"
                     b"A1,\"ok\r=cmd|' /C calc'!A0\",donor,c1ccsc1,-5.2,-3.3,1.7,film\n"
                     b"A2,b,donor,c1ccoc1,-5.3,-3.3,1.8,film\n")
    return path


def test_the_ranking_keeps_the_text_and_its_safe_copy_holds_no_line_break(tmp_path):
    """Audit case b: ranking.safe.csv held "ok<CR>=cmd|...", read as a new row that began with a formula."""
    from screen.rank_io import run_rank

    path = run_rank(_cr_levels(tmp_path / "lv.csv"), REF, tmp_path / "out", PUBLISHED_CFG)
    raw = read_csv_checked(path, ["id", "name"], dtype=str, keep_default_na=False)
    assert len(raw) == 2 and dict(zip(raw["id"], raw["name"]))["A1"] == CR_CMD  # the raw file: the text exactly
    safe_text = (path.parent / "ranking.safe.csv").read_bytes().decode("utf-8-sig")
    assert "\r" not in safe_text and len(safe_text.split("\n")) == 4  # header, two rows, the final line end
    safe = pd.read_csv(path.parent / "ranking.safe.csv", dtype=str, keep_default_na=False)
    assert dict(zip(safe["id"], safe["name"]))["A1"] == "ok =cmd|' /C calc'!A0"
    for line in _physical_lines(safe_text)[1:]:
        assert not line.startswith(_FORMULA_START)


def test_several_partners_count_and_match_every_candidate_once(tmp_path, capsys):
    """Audit cases c and d: the console summary (it re-reads ranking.csv) showed a phantom third row, and the
    partner matrix lost the PCE of the candidate with the CR in its name."""
    from screen.cli import main

    levels = _cr_levels(tmp_path / "lv.csv")
    assert main(["rank", "--levels", str(levels), "--partner", f"{REF},y6", "--out", str(tmp_path / "o"),
                 "--set", "device.model=scharber", "--set", "device.absorber=donor"]) == 0
    out = capsys.readouterr().out
    assert "2 donors ranked against y6" in out and "3 candidates" not in out
    matrix = pd.read_csv(next((tmp_path / "o" / "rankings").glob("matrix--*/matrix.csv")), dtype={"id": str})
    assert sorted(matrix["id"]) == ["A1", "A2"]
    assert matrix.set_index("id").loc["A1", "best_pce_pct"] > 0  # a number, not lost (its value is not checked)


@pytest.mark.parametrize("cell, shown", [
    (CR_CMD, "ok =cmd|' /C calc'!A0"),
    ("\r=1", "' =1"),  # a leading CR is a formula start (OWASP "CSV Injection"): the apostrophe first
    ("\rcmd", "' cmd"),
    ("\n-cmd", "' -cmd"),
    ("a\r\nb", "a b"),
    ("=x", "'=x"),
    ("plain", "plain"),
])
def test_safe_copy_cells(cell, shown):
    frame = pd.DataFrame({"name": [cell], "homo_ev": [-5.4]})
    assert safe_csv_frame(frame)["name"].tolist() == [shown]
    text = safe_csv_text(frame, csv_text(frame, "\n"))  # the ranking's own text is no shortcut when a cell breaks
    assert text == csv_text(safe_csv_frame(frame), "\n")
    assert safe_csv_bytes(frame).decode("utf-8-sig") == text


def test_a_table_given_to_levels_of_is_written_with_its_cr_quoted(tmp_path):
    """screen.api writes a DataFrame of candidates to a file the prepare stage then reads."""
    from screen.api import _write_candidates

    frame = pd.DataFrame({"id": ["X\r=1", "b"], "smiles": ["c1ccsc1", None]})
    path = _write_candidates(frame, None, None, tmp_path)
    back = pd.read_csv(path, dtype=str, keep_default_na=False)
    assert back["id"].tolist() == ["X\r=1", "b"] and back["smiles"].tolist() == ["c1ccsc1", ""]
