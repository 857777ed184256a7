"""Ids given to candidate rows without one name the row's place in the file (QA audit P13).

Before, an empty id became ``row-<0-based record index>``: the empty id on file line 12 of a CSV was ``row-10``
and the untitled SD record 3 was ``row-2``, neither of which a user can find in the file.
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
from rdkit import Chem

from screen.prepare import prepare, read_candidates, read_manifest, validate


def _csv_with_empty_id_on_line_12(path: Path) -> Path:
    # line 1 header; a blank line and a quoted two-line field push the rows off their record index
    lines = ["id,smiles,what", "a,c1ccsc1,x", "", '"two', 'lines",c1ccoc1,x', "b,CC,x", "c,CCC,x", "d,CCCC,x",
             "e,CCCCC,x", "", "f,CCCCCC,x", ",CCO,empty id on line 12", "line-14,CCN,explicit", ",CCCl,line 14"]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _sdf(path: Path, titles: list[str]) -> Path:
    blocks = []
    for title, smiles in zip(titles, ["c1ccsc1", "CCO", "CCN", "CCC"]):
        mol = Chem.MolFromSmiles(smiles)
        mol.SetProp("_Name", title)
        blocks.append(Chem.MolToMolBlock(mol) + "$$$$\n")
    path.write_text("".join(blocks), encoding="utf-8")
    return path


def test_csv_empty_id_is_named_after_its_file_line(tmp_path: Path) -> None:
    frame = read_candidates(_csv_with_empty_id_on_line_12(tmp_path / "c.csv"))
    assert frame.loc[frame.smiles_input == "CCO", "row"].item() == 7  # the old code named it row-7
    ids = dict(zip(frame.smiles_input, frame.id))
    assert ids["CCO"] == "line-12"
    assert ids["CCCl"] == "line-14-2"  # line-14 is an explicit id of the file
    assert ids["CCN"] == "line-14"
    assert [ids[s] for s in ("c1ccsc1", "c1ccoc1", "CC")] == ["a", "two\nlines", "b"]  # given ids unchanged
    note = frame.loc[frame.id == "line-12", "note"].item()
    assert note == "missing_id: no id given, assigned 'line-12'"
    assert frame.loc[frame.id == "a", "note"].item() == ""


def test_sdf_untitled_record_is_named_after_its_record_number(tmp_path: Path) -> None:
    frame = read_candidates(_sdf(tmp_path / "c.sdf", ["S1", "", "", "S4"]))
    assert list(frame.id) == ["S1", "record-2", "record-3", "S4"]
    assert frame.note[2] == "missing_id: no id given, assigned 'record-3'"


def test_smiles_file_row_without_id_is_named_after_its_line(tmp_path: Path) -> None:
    path = tmp_path / "c.smi"
    path.write_text("# header comment\nc1ccsc1 T1\n\nCCO\n", encoding="utf-8")
    assert list(read_candidates(path).id) == ["T1", "line-4"]


def test_validate_keeps_the_file_names_and_a_frame_built_in_code_keeps_row_numbers(tmp_path: Path) -> None:
    frame = read_candidates(_csv_with_empty_id_on_line_12(tmp_path / "c.csv"))
    blank = frame.copy()  # ids blanked after reading: validate names them from the file lines, as the reader does
    blank.loc[blank.smiles_input == "CCO", "id"] = ""
    blank["note"] = ""
    out = validate(blank)
    assert out.loc[out.smiles_input == "CCO", "id"].item() == "line-12"
    built = validate(pd.DataFrame({"id": ["", "x"], "smiles_input": ["CCO", "CCC"]}))
    assert list(built.id) == ["row-0", "x"]  # no file, no line: the 0-based position


def test_prepare_records_and_says_the_generated_ids(tmp_path: Path, capsys) -> None:
    prepare(_csv_with_empty_id_on_line_12(tmp_path / "c.csv"), tmp_path / "prepared")
    meta = json.loads((tmp_path / "prepared" / "manifest.meta.json").read_text(encoding="utf-8"))
    assert meta["generated_ids"] == {"count": 2, "ids": ["line-12", "line-14-2"]}
    manifest = read_manifest(tmp_path / "prepared" / "manifest.csv")
    assert "line-12" in set(manifest.id)
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "2 rows of c.csv had no id" in err and "'line-12'" in err


def test_prepare_says_nothing_when_every_row_has_an_id(tmp_path: Path, capsys) -> None:
    path = tmp_path / "c.csv"
    path.write_text("id,smiles\na,CCO\n", encoding="utf-8")
    prepare(path, tmp_path / "prepared")
    meta = json.loads((tmp_path / "prepared" / "manifest.meta.json").read_text(encoding="utf-8"))
    assert meta["generated_ids"] == {"count": 0, "ids": []}
    assert capsys.readouterr().err == ""
