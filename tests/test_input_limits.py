"""Input limits of the prepare stage: structures too large for RDKit, lines too long to hold, control characters
in ids, UTF-16 without a byte-order mark and repeated header lines (a security audit of candidate files).

The structures that crashed RDKit (a segmentation fault on a 20 000-carbon chain, an exhausted memory on a 200 MB
line) are checked in a child process, so that a regression fails the test instead of killing the test run.
"""

from __future__ import annotations

import csv
import gzip
import json
import random
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest
from rdkit import Chem, rdBase

from screen.errors import InputError
from screen.prepare import PrepareOptions, checks, read_candidates, readers, validate

ROOT = Path(__file__).resolve().parent.parent
#: the longest line a candidate file may have (readers.MAX_LINE_BYTES; a test checks that it is this)
LINE_LIMIT = 131_072
#: a small donor that passes every check (a thiophene-benzothiadiazole-thiophene)
OK = "Cc1ccc(s1)-c1ccc(-c2ccc(C)s2)c2nsnc12"


def _checked_in_child(path: Path, max_heavy_atoms: int = 200) -> list[dict]:
    """``validate(read_candidates(path))`` in a child process (a crash or a hang there fails the test, not the
    run): each row's id, status, reason, error, smiles and heavy_atoms."""
    code = textwrap.dedent(f"""
        import json, resource, sys
        resource.setrlimit(resource.RLIMIT_AS, (3 * 1024 ** 3, 3 * 1024 ** 3))
        from screen.prepare import PrepareOptions, read_candidates, validate
        options = PrepareOptions(max_heavy_atoms={max_heavy_atoms})
        limit = {{}} if {max_heavy_atoms} == 200 else {{"max_heavy_atoms": {max_heavy_atoms}}}
        out = validate(read_candidates({str(path)!r}, **limit), options)
        rows = out[["id", "status", "reason", "error", "smiles", "heavy_atoms"]].astype(str).to_dict("records")
        print(json.dumps(rows))
    """)
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT, timeout=300)
    assert proc.returncode == 0, f"exit {proc.returncode}: {proc.stderr[-2000:]}"
    return json.loads(proc.stdout.strip().splitlines()[-1])


def _checked(path: Path, options: PrepareOptions | None = None):
    """``validate(read_candidates(path))`` with ``options`` (the reader told a limit other than the default)."""
    if options is None:
        return validate(read_candidates(path))
    return validate(read_candidates(path, max_heavy_atoms=options.max_heavy_atoms), options)


# ----------------------------------------------------------------------------------------------
# structures too large for RDKit
# ----------------------------------------------------------------------------------------------


def test_a_20000_carbon_chain_is_refused_unread_and_the_batch_goes_on(tmp_path):
    # the audit's c20000.smi: before, `dascreen run --dry-run` died of a segmentation fault (exit 139)
    path = tmp_path / "c.smi"
    path.write_text(f"{OK} X1\n{'C' * 20000} X2\n{OK} X3\n", encoding="utf-8")
    rows = _checked_in_child(path)
    assert [r["status"] for r in rows] == ["ok", "rejected", "ok"]
    assert rows[1]["reason"] == "too_many_atoms"
    assert "SMILES text too long: 20000 characters, more than the 10000" in rows[1]["error"]


def test_heavy_atoms_are_counted_before_rdkit_writes_the_structure(tmp_path):
    # within the text limit of a raised max_heavy_atoms (500: 25 000 characters) the chain is parsed, and refused
    # by its count on the unsanitised parse: RDKit's SMILES writer is never reached (it crashed here before)
    path = tmp_path / "c.smi"
    path.write_text(f"{'C' * 20000} X2\n{OK} X3\n", encoding="utf-8")
    rows = _checked_in_child(path, max_heavy_atoms=500)
    assert [r["status"] for r in rows] == ["rejected", "ok"]
    assert rows[0]["reason"] == "too_many_atoms"
    assert rows[0]["error"].startswith("20000 heavy atoms, more than the limit of 500")
    assert rows[0]["heavy_atoms"] == "20000" and rows[0]["smiles"] == ""


def test_a_structure_far_over_the_limit_is_too_many_atoms_before_its_other_problems():
    # 2500 carbons with a pentavalent one: refused on its count (before: sanitised in full, then "valence")
    row = validate(read_frame("x", "C(C)(C)(C)(C)" + "C" * 2495)).iloc[0]
    assert (row.reason, int(row.heavy_atoms), row.smiles) == ("too_many_atoms", 2500, "")
    # just over the limit, a structure is checked in full as before: its first problem, or its canonical SMILES
    row = validate(read_frame("x", "C(C)(C)(C)(C)" + "C" * 245)).iloc[0]
    assert row.reason == "valence" and str(row.heavy_atoms) == "<NA>"
    row = validate(read_frame("x", "C" * 250)).iloc[0]
    assert (row.reason, int(row.heavy_atoms), row.smiles) == ("too_many_atoms", 250, "C" * 250)


def read_frame(ident: str, smiles: str):
    import pandas as pd

    return pd.DataFrame({"id": [ident], "smiles_input": [smiles]})


def _v3000_chain(title: str, n: int, hydrogens: bool = False) -> str:
    """An SD record of an n-carbon chain in V3000 (the audit's big25.sdf shape), its hydrogens drawn if asked."""
    elements = ["C"] * n
    bonds = [(i, i + 1) for i in range(1, n)]
    if hydrogens:
        for carbon in range(1, n + 1):
            for _ in range(3 if carbon in (1, n) else 2):
                elements.append("H")
                bonds.append((carbon, len(elements)))
    atoms = "".join(f"M  V30 {i} {e} {1.5 * i:.4f} 0.0000 0.0000 0\n" for i, e in enumerate(elements, start=1))
    bond_lines = "".join(f"M  V30 {k} 1 {a} {b}\n" for k, (a, b) in enumerate(bonds, start=1))
    return (f"{title}\n     dascreen\n\n  0  0  0  0  0  0  0  0  0  0999 V3000\nM  V30 BEGIN CTAB\n"
            f"M  V30 COUNTS {len(elements)} {len(bonds)} 0 0 0\nM  V30 BEGIN ATOM\n{atoms}M  V30 END ATOM\n"
            f"M  V30 BEGIN BOND\n{bond_lines}M  V30 END BOND\nM  V30 END CTAB\nM  END\n$$$$\n")


def _v2000(title: str, smiles: str) -> str:
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    mol.SetProp("_Name", title)
    return Chem.MolToMolBlock(mol) + "$$$$\n"


def test_a_25000_atom_sd_record_is_counted_from_its_atom_block(tmp_path):
    # before: segmentation fault in the reader ("job prepare was killed by signal 11", the whole batch lost)
    path = tmp_path / "big.sdf"
    path.write_text(_v2000("S1", OK) + _v3000_chain("BIG25k", 25000) + _v2000("S3", "c1ccsc1"), encoding="utf-8")
    rows = _checked_in_child(path)
    assert [(r["id"], r["status"]) for r in rows] == [("S1", "ok"), ("BIG25k", "rejected"), ("S3", "ok")]
    assert rows[1]["reason"] == "too_many_atoms"
    assert "its atom block holds 25000 heavy atoms, more than the limit of 200" in rows[1]["error"]


def test_sd_hydrogens_do_not_count_as_heavy_atoms(tmp_path):
    # with a limit of 100, records of up to 2000 heavy atoms are converted and checked in full; 700 carbons and
    # 1402 drawn hydrogens (2102 atoms in the atom block) are 700 heavy atoms
    path = tmp_path / "h.sdf"
    path.write_text(_v2000("C60", "C" * 60) + _v3000_chain("C700", 700, hydrogens=True) + _v3000_chain("C2100", 2100),
                    encoding="utf-8")
    out = _checked(path, PrepareOptions(max_heavy_atoms=100))
    assert list(out.status) == ["ok", "rejected", "rejected"] and int(out.heavy_atoms[0]) == 60
    assert (out.reason[1], int(out.heavy_atoms[1]), out.smiles[1]) == ("too_many_atoms", 700, "C" * 700)
    assert out.error[1].startswith("700 heavy atoms, more than the limit of 100")
    assert out.reason[2] == "too_many_atoms" and "atom block holds 2100 heavy atoms" in out.error[2]


def test_v3000_atom_lines_with_continuations_and_r_groups_are_counted():
    block = ["t", "", "", "  0  0  0  0  0  0  0  0  0  0999 V3000", "M  V30 BEGIN CTAB", "M  V30 COUNTS 5 4 0 0 0",
             "M  V30 BEGIN ATOM", "M  V30 1 C 0 0 0 0", "M  V30 2 R# 0 0 0 0 -", "M  V30 RGROUPS=(1 1)",
             "M  V30 3 H 0 0 0 0", "M  V30 4 Se 0 0 0 0 CHG=0 -", "M  V30 MASS=80", "M  V30 5 * 0 0 0 0",
             "M  V30 END ATOM", "M  END"]
    assert readers._molblock_heavy_atoms(block) == 2  # C and Se; not R#, H or *


def test_a_shipped_or_legitimate_large_smiles_is_within_the_text_limit(reference_rows):
    limit = checks.smiles_length_limit(PrepareOptions().max_heavy_atoms)
    assert limit == 200 * checks.SMILES_CHARS_PER_HEAVY_ATOM == 10000
    shipped = [r.get("smiles", "") for r in reference_rows]
    for name in ("demo.csv", "dyes.csv"):
        with open(ROOT / "candidates" / name, newline="", encoding="utf-8") as fh:
            shipped += [r["smiles"] for r in csv.DictReader(fh)]
    assert max(map(len, shipped)) < limit / 10
    # a repeat unit of 200 heavy atoms written with the most characters per atom a real SMILES takes (every side-chain
    # carbon a bracket atom with an isotope and its hydrogens, common practice for labelled compounds) is read
    chain = "[13CH2]" * 96 + "[13CH3]"  # 97 carbons, and 98 on the other side: 195 and the five ring atoms
    unit = f"[*]c1c({chain})c([13CH2]{chain})c([*])s1"
    row = validate(read_frame("u", unit), PrepareOptions(keep_isotopes=True)).iloc[0]
    assert (row.status, int(row.heavy_atoms)) == ("ok", 200), row.error
    assert len(unit) < limit / 5
    big = "[*]c1ccc(s1)" + "-c1ccc(s1)" * 38 + "-c1ccc([*])s1"  # 40 thiophene units: 200 heavy atoms
    row = validate(read_frame("big", big)).iloc[0]
    assert (row.status, int(row.heavy_atoms)) == ("ok", 200), row.error


# ----------------------------------------------------------------------------------------------
# lines too long to hold
# ----------------------------------------------------------------------------------------------


def test_the_line_limit():
    assert readers.MAX_LINE_BYTES == LINE_LIMIT


def test_a_line_longer_than_the_limit_is_not_held_and_its_row_is_rejected(tmp_path):
    # before: a 200 MB line was read whole and parsed by RDKit until the OOM killer ended the run; here a line
    # just over LINE_LIMIT, in a child with its memory limited
    long = "C" * (LINE_LIMIT + 5000)
    smi = tmp_path / "c.smi"
    smi.write_text(f"{OK} X1\n{long} X2 huge\n{OK} X3\n", encoding="utf-8")
    rows = _checked_in_child(smi)
    assert [(r["id"], r["status"], r["reason"]) for r in rows] == [
        ("X1", "ok", ""), ("X2 huge", "rejected", "too_many_atoms"), ("X3", "ok", "")]
    assert rows[1]["error"].startswith(f"line 2 is {len(long) + 8} bytes long ('CCCC")
    assert f"more than the {LINE_LIMIT} a candidate file line may have" in rows[1]["error"]


@pytest.mark.parametrize("newline", ["\n", "\r\n", "\r"])
def test_a_long_csv_line_is_a_row_error_on_its_own_line(tmp_path, newline):
    long = "C" * (LINE_LIMIT + 10)
    path = tmp_path / "c.csv.gz"
    text = newline.join(["id,smiles", f"X1,{OK}", "", f"X2,{long}", f"X3,{OK}", ""])
    path.write_bytes(gzip.compress(text.encode("utf-8")))
    out = _checked(path)
    assert list(out.id) == ["X1", "X2", "X3"] and list(out.status) == ["ok", "rejected", "ok"]
    assert out.reason[1] == "malformed_row" and out.error[1].startswith("line 4 is ")
    assert out.smiles_input[1] == ""


def test_a_long_sd_data_item_is_still_read(tmp_path):
    # an SD file's lines may be longer (a data item is only text passed through): 200 kB is read as before
    path = tmp_path / "c.sdf"
    record = _v2000("S1", "c1ccsc1").replace("$$$$\n", "> <blob>\n" + "x" * 200_000 + "\n\n$$$$\n")
    out = _checked(path) if path.write_text(record, encoding="utf-8") else None
    assert list(out.status) == ["ok"] and len(out.blob[0]) == 200_000


def test_a_header_line_too_long_refuses_the_file(tmp_path):
    path = tmp_path / "c.csv"
    path.write_text("id,smiles," + "x" * LINE_LIMIT + f"\nX1,{OK},\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"c\.csv: line 1 is \d+ bytes long .*before any row"):
        read_candidates(path)


def test_read_capped_keeps_every_line_within_the_limit_whatever_the_chunks():
    rng = random.Random(7)
    for _ in range(300):
        text = "".join("x" * rng.choice([0, 1, 3, 5, 6, 9, 20]) + rng.choice(["\n", "\r", "\r\n", ""])
                       for _ in range(rng.randint(1, 12)))
        data = text.encode()
        cuts = sorted(rng.sample(range(1, len(data)), min(len(data) - 1, rng.randint(0, 6)))) if len(data) > 1 else []
        chunks = [data[a:b] for a, b in zip([0] + cuts, cuts + [len(data)])]
        got, long = readers._read_capped(chunks, 5)
        lines = text.splitlines(keepends=True)  # the lines as the readers number them
        body = [line.rstrip("\r\n") for line in lines]
        kept = [(b if len(b) <= 5 else " ") + line[len(b):] for b, line in zip(body, lines)]  # too long: blank
        assert got.decode() == "".join(kept), (text, chunks)
        numbers = [n for n, b in enumerate(body, start=1) if len(b) > 5]
        assert sorted(long) == numbers, (text, chunks)
        assert [long[n].length for n in numbers] == [len(body[n - 1]) for n in numbers]
        assert all(got.decode().splitlines()[n - 1] == " " for n in numbers)


# ----------------------------------------------------------------------------------------------
# control characters
# ----------------------------------------------------------------------------------------------


def test_control_characters_in_id_name_and_role_reject_the_row(tmp_path):
    # before: every row was accepted, the NUL id written into levels.csv, the rankings, the report and the SD titles
    path = tmp_path / "c.csv"
    path.write_text(f'Compound ID,Name,smiles,role\n"X\x00 1",a,{OK},\nX2,"b\r=1+1",{OK},\nX3,c,{OK},"donor\x1b[31m"\n'
                    f'"X4\tB",d,{OK},\n"X5\nZ",e,{OK},\n', encoding="utf-8", newline="")
    out = _checked(path)
    assert list(out.status) == ["rejected", "rejected", "rejected", "ok", "rejected"]
    assert set(out.reason[out.status == "rejected"]) == {"malformed_row"}
    assert out.error[0] == ("line 2: the id 'X\\x00 1' contains U+0000 (NUL), a character that ends the text in many "
                            "programs; delete it")
    assert out.error[1] == "line 3: the name 'b\\r=1+1' contains U+000D (CR), a line break; write it on one line"
    assert out.error[2].startswith("line 5: the role 'donor\\x1b[31m' contains U+001B (ESC), a control character")
    # line 7: the CR in X2's quoted name ends a line, as a text editor shows it
    assert out.error[4].startswith("line 7: the id 'X5\\nZ' contains U+000A (LF), a line break")
    # a rejected row shows a NUL or an ESC by its symbol (no output and no console line gets one); TAB, LF and CR are
    # kept (the CSV writers quote them)
    assert list(out.id) == ["X\u2400 1", "X2", "X3", "X4\tB", "X5\nZ"] and out.role[2] == "donor\u241b[31m"
    assert set(out.key[out.status == "rejected"]) == {""}
    again = validate(out)  # validating the output again rejects them again, with the same message
    assert list(again.status) == list(out.status) and list(again.error) == list(out.error)


def test_control_characters_in_smi_and_sdf_ids_and_in_frames_built_in_code(tmp_path):
    smi = tmp_path / "c.smi"
    smi.write_bytes(f"{OK} X\x001\n{OK} X2\n".encode())
    out = _checked(smi)
    assert list(out.status) == ["rejected", "ok"]
    assert out.error[0].startswith("line 1: the id 'X\\x001' contains U+0000 (NUL)")
    sdf = tmp_path / "c.sdf"
    sdf.write_text(_v2000("T\x001", "c1ccsc1") + _v2000("T2", "c1ccoc1"), encoding="utf-8")
    out = _checked(sdf)
    assert list(out.status) == ["rejected", "ok"]
    assert out.error[0].startswith("SD record 1, line 1: the id 'T\\x001' contains U+0000 (NUL)")
    out = validate(read_frame("A\x07", OK))
    assert out.reason[0] == "malformed_row" and out.error[0].startswith("row 0: the id 'A\\x07' contains U+0007 (BEL)")


def test_a_nul_in_a_smiles_is_refused():
    # before: "CCO<NUL>" was accepted and carried into every output
    out = validate(read_frame("x", f"{OK}\x00"))
    assert out.reason[0] == "unparsable" and out.smiles_input[0] == f"{OK}\u2400"
    assert out.error[0].startswith(f"SMILES contains the control character U+0000 (NUL) as character {len(OK) + 1}")
    assert list(validate(out).error) == list(out.error)


# ----------------------------------------------------------------------------------------------
# UTF-16 without a byte-order mark, repeated header lines
# ----------------------------------------------------------------------------------------------


@pytest.mark.parametrize("order", ["le", "be"])
def test_utf16_without_a_byte_order_mark_names_iconv(tmp_path, order):
    path = tmp_path / "c.csv"
    path.write_bytes(f"id,name,smiles\nX1,a,{OK}\n".encode(f"utf-16-{order}"))
    with pytest.raises(InputError) as err:
        read_candidates(path)
    assert str(err.value) == (f"{path}: looks like UTF-16 text without a byte-order mark (a NUL byte "
                              f"{'after' if order == 'le' else 'before'} every character), not UTF-8: convert it "
                              f"with `iconv -f utf-16{order} -t utf-8 c.csv > c-utf8.csv` or save it from the "
                              "spreadsheet as \"CSV UTF-8\"")


def test_a_repeated_header_line_says_so(tmp_path):
    csv_path = tmp_path / "c.csv"
    csv_path.write_text(f"id,name,smiles\nX1,a,{OK}\nID, Name ,SMILES,\nX2,b,{OK}\n", encoding="utf-8")
    out = _checked(csv_path)
    assert list(out.status) == ["ok", "rejected", "ok"] and out.reason[1] == "malformed_row"
    assert out.error[1] == ("line 3 repeats the header line 'ID, Name ,SMILES,' (two files joined into one?); it is "
                            "no candidate: remove it")
    smi = tmp_path / "c.smi"
    smi.write_text(f"SMILES\tName\n{OK}\tX1\nSMILES\tName\n{OK}\tX2\n", encoding="utf-8")
    out = _checked(smi)
    assert list(out.status) == ["ok", "rejected", "ok"]
    assert out.error[1].startswith("line 3 repeats the header line 'SMILES\\tName' after the first line")
    table = tmp_path / "t.smi"
    table.write_text(f"ID\tSMILES\tnote\nX1\t{OK}\tn\nID\tSMILES\tnote\n", encoding="utf-8")
    out = _checked(table)
    assert list(out.status) == ["ok", "rejected"] and out.error[1].startswith("line 3 repeats the header line")


def test_ordinary_files_read_as_before(data_dir):
    # the shipped samples: every row as before (statuses and canonical SMILES; checked against a run before the
    # change, /tmp/s23/fixin/base)
    out = _checked(data_dir / "sample.smi")
    assert list(out.status) == ["ok", "ok", "ok"]
    out = _checked(ROOT / "candidates" / "demo.csv")
    assert (out.status == "ok").all() and len(out) == 32
    with rdBase.BlockLogs():
        assert all(Chem.MolToSmiles(Chem.MolFromSmiles(s)) == c for s, c in zip(out.smiles_input, out.smiles))


def test_utf16_without_a_byte_order_mark_is_named_for_every_reader(tmp_path):
    # a levels or partner file (read_csv_checked) said "needs columns ['id']; found ['i\x00d\x00', ...]", and an SD
    # file "holds no SD record (no 'M  END' line)"; one message for both, with the byte order iconv needs
    from screen.errors import InputError
    from screen.io import read_csv_checked
    from screen.preflight import _check_sdf

    table = tmp_path / "levels.csv"
    table.write_bytes("id,homo_ev\nA,-5.4\n".encode("utf-16-le"))
    with pytest.raises(InputError, match=r"levels.csv: looks like UTF-16 text without a byte-order mark .*"
                                         r"`iconv -f utf-16le -t utf-8 levels.csv > levels-utf8.csv`"):
        read_csv_checked(table, ["id"])
    sdf = tmp_path / "c.sdf"
    sdf.write_bytes("x\n  RDKit\n\n  0  0  0  0  0  0  0  0  0  0999 V2000\nM  END\n$$$$\n".encode("utf-16-be"))
    with pytest.raises(InputError, match=r"c.sdf: looks like UTF-16 text without a byte-order mark \(a NUL byte "
                                         r"before every character\).*`iconv -f utf-16be -t utf-8 c.sdf > c-utf8.sdf`"):
        _check_sdf(sdf)
