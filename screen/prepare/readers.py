"""Readers of candidate files: CSV, SMILES and SDF, each optionally gzipped.

:func:`read_candidates` turns a candidate file into a frame of text columns, one row per
input record in input order.  A record that cannot be read (a CSV line with too many fields,
an SDF record RDKit rejects) becomes a row with a ``read_error`` instead of stopping the read;
:func:`screen.prepare.validate` turns it into a rejection.  A problem with the file as a whole
(unknown extension, not readable gzip, not UTF-8, no ``smiles`` column or one named twice, CSV text in a
SMILES file) raises :class:`screen.errors.InputError`.

Examples
--------
>>> import pathlib, tempfile
>>> path = pathlib.Path(tempfile.mkdtemp()) / "c.smi"
>>> _ = path.write_text("c1ccsc1 thiophene\\nCCO\\n", encoding="utf-8")
>>> frame = read_candidates(path)
>>> list(frame.id), list(frame.smiles_input)
(['thiophene', 'line-2'], ['c1ccsc1', 'CCO'])
"""

from __future__ import annotations

import csv
import gzip
import io
import os
import re
import zlib
from array import array
from pathlib import Path
from typing import Any

import pandas as pd
from rdkit import Chem, rdBase

from screen.columns import (CALIBRATED_COLUMNS, ELECTRONIC_COLUMNS, LEVELS_CONTRACT_COLUMNS, RANKING_COLUMNS,
                            RANKING_EXTRA_COLUMNS)
from screen.errors import InputError
from screen.io import repeated_in_header, separator_problem
from screen.prepare.checks import snippet as _snippet
from screen.prepare.shards import MANIFEST_COLUMNS

__all__ = ["read_candidates", "assign_missing_ids", "generated_id", "generated_id_names", "INPUT_LINES", "input_line",
           "not_utf8_error"]

#: key of ``frame.attrs`` where :func:`read_candidates` records each row's place in the file: ``{"file": name,
#: "format": "csv"|"smi"|"sdf", "lines": array of the first file line of row 0, of row 1, ...}`` (1-based, counting
#: the header, blank and comment lines; an SD record's title line)
INPUT_LINES = "dascreen_input_lines"


def input_line(frame: pd.DataFrame, row: int) -> int | None:
    """The file line (1-based) of the input row ``row`` (0-based, the ``row`` column) of a frame read by
    :func:`read_candidates`; ``None`` when the frame does not record it.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "c.csv"
    >>> _ = path.write_text("id,smiles\\n\\nA,c1ccsc1\\n\\n\\nB,c1ccoc1\\n", encoding="utf-8")
    >>> frame = read_candidates(path)
    >>> input_line(frame, 0), input_line(frame, 1), input_line(pd.DataFrame(), 0)
    (3, 6, None)
    """
    lines = (frame.attrs.get(INPUT_LINES) or {}).get("lines") or []
    return lines[row] if 0 <= row < len(lines) else None


#: Names a passthrough column may not take (it would clash with a column this stage writes).
#: names the tool writes into levels.csv or ranking.csv: an input column of such a name is passed through as
#: ``input_<name>`` (before, a measured ``homo_ev`` of the input was overwritten and lost without a word)
_WRITTEN: frozenset[str] = frozenset(ELECTRONIC_COLUMNS + CALIBRATED_COLUMNS + LEVELS_CONTRACT_COLUMNS + RANKING_COLUMNS
                                     + RANKING_EXTRA_COLUMNS + ["chain_n_max", "chain_fit", "chain_fit_quality",
                                                                "reference_similarity"])
#: prefixes of written column families (raw engine values, chain-limit and conformer spreads)
_WRITTEN_PREFIXES = ("xtb_", "chain_spread_", "conf_spread_")
_RESERVED: frozenset[str] = frozenset(MANIFEST_COLUMNS) | {"read_error"} | _WRITTEN

_CSV_SUFFIXES = (".csv",)
_SMI_SUFFIXES = (".smi", ".smiles", ".txt")
_SDF_SUFFIXES = (".sdf", ".sd")

def _format_of(path: Path) -> tuple[str, bool]:
    """Return (format, gzipped) for ``path`` from its extension."""
    name = path.name.lower()
    gz = name.endswith(".gz")
    if gz:
        name = name[:-3]
    for fmt, suffixes in (("csv", _CSV_SUFFIXES), ("smi", _SMI_SUFFIXES), ("sdf", _SDF_SUFFIXES)):
        if name.endswith(suffixes):
            return fmt, gz
    allowed = ", ".join(_CSV_SUFFIXES + _SMI_SUFFIXES + _SDF_SUFFIXES)
    raise InputError(
        f"{path}: unknown candidate file type; use one of the extensions {allowed} "
        "(optionally followed by .gz)"
    )


def _line_id(lines: list[bytes], number: int, fmt: str | None) -> str:
    """The id on line ``number`` (1-based) of a candidate file, as far as a line shows it ('' when not cheap):
    a CSV's ``id`` column (found on its header line), a SMILES line's second field, an SD file's record number."""
    def text(raw: bytes) -> str:
        return raw.decode("utf-8", errors="replace").strip("\r\n")

    line = text(lines[number - 1])
    try:
        if fmt == "csv":
            header = next((text(raw) for raw in lines[:number - 1] if text(raw).strip()), None)
            if header is None:
                return ""
            names = [h.strip().lower() for h in next(csv.reader([header]))]
            fields = next(csv.reader([line]), [])
            at = names.index("id") if "id" in names else -1
            return fields[at].strip() if 0 <= at < len(fields) else ""
        if fmt == "smi":
            parts = line.strip().split(None, 1)
            return parts[1].strip() if len(parts) > 1 and not line.lstrip().startswith("#") else ""
        if fmt == "sdf":
            return f"SD record {1 + sum(raw.strip() == b'$$$$' for raw in lines[:number - 1])}"
    except (csv.Error, StopIteration):
        return ""
    return ""


def not_utf8_error(path: Path, raw: bytes, fmt: str | None = None) -> InputError:
    """The error of a candidate file that is not UTF-8: the line (and the id on it) of the first undecodable byte,
    how many lines have one, and the fix (before: "undecodable byte at offset 4737", an overnight operator's report).

    ``raw`` is the file's whole (decompressed) content, a leading byte-order mark allowed; ``fmt`` its format
    (``"csv"``, ``"smi"`` or ``"sdf"``: which id the line shows).

    Examples
    --------
    >>> raw = "id,smiles\\nA,CCO\\ncaf\\xe9,c1ccsc1\\nB,CC\\xe9\\n".encode("latin-1")
    >>> print(not_utf8_error(Path("c.csv"), raw, "csv"))  # doctest: +NORMALIZE_WHITESPACE
    c.csv: not UTF-8 text: line 3 (id 'caf\uFFFD') holds byte 0xe9, which is not UTF-8 (2 lines have such bytes:
    3, 4); save the file as UTF-8 (a spreadsheet's "CSV UTF-8"; from Latin-1: `iconv -f latin1 -t utf-8`)
    """
    lines = (raw[3:] if raw.startswith(b"\xef\xbb\xbf") else raw).split(b"\n")
    bad: list[tuple[int, int]] = []  # (line, the first undecodable byte on it)
    for number, line in enumerate(lines, start=1):
        try:
            line.decode("utf-8")
        except UnicodeDecodeError as exc:
            bad.append((number, line[exc.start]))
    if not bad:  # a character cut at the end of the data
        return InputError(f"{path}: not UTF-8 text (it ends inside a character); save the file as UTF-8")
    number, byte = bad[0]
    ident = _line_id(lines, number, fmt)
    where = f"line {number}" + (f" ({ident})" if fmt == "sdf" and ident else f" (id {_snippet(ident)})" if ident
                                else "")
    more = ""
    if len(bad) > 1:
        shown = ", ".join(str(n) for n, _ in bad[:10]) + (", ..." if len(bad) > 10 else "")
        more = f" ({len(bad)} lines have such bytes: {shown})"
    sheet = 'a spreadsheet\'s "CSV UTF-8"; ' if fmt == "csv" else ""
    return InputError(f"{path}: not UTF-8 text: {where} holds byte 0x{byte:02x}, which is not UTF-8{more}; save the "
                      f"file as UTF-8 ({sheet}from Latin-1: `iconv -f latin1 -t utf-8`)")


def _read_text(path: Path, gz: bool, fmt: str | None = None) -> str:
    """Read the whole file as UTF-8 text (a byte-order mark is ignored).

    Text that is not UTF-8 raises :class:`InputError` naming the line (and the id on it, for ``fmt`` ``"csv"`` or
    ``"smi"``; the SD record for ``"sdf"``) of the first byte that is not UTF-8 (:func:`not_utf8_error`).

    A ``.gz`` file that is not gzip data, or is truncated or corrupt, raises :class:`InputError`:

    >>> import pathlib, tempfile
    >>> bad = pathlib.Path(tempfile.mkdtemp()) / "c.csv.gz"
    >>> _ = bad.write_bytes(gzip.compress(b"id,smiles\\na,CCO\\n")[:15])
    >>> _read_text(bad, True)  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    screen.errors.InputError: not a readable gzip file: ...c.csv.gz (...); ...
    """
    raw = path.read_bytes()
    if gz:
        try:
            raw = gzip.decompress(raw)
        except (OSError, EOFError, zlib.error) as exc:  # gzip.BadGzipFile is an OSError
            raise InputError(
                f"not a readable gzip file: {path} ({exc}); check that it was copied whole, or give the "
                "uncompressed file"
            ) from None
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise not_utf8_error(path, raw, fmt) from None


def _unique_column(name: str, taken: set[str]) -> str:
    """Return ``name``, prefixed with ``input_`` if it clashes with a column we write.

    Examples
    --------
    >>> _unique_column("homo_ev", set()), _unique_column("batch", set()), _unique_column("xtb_gap_ev", set())
    ('input_homo_ev', 'batch', 'input_xtb_gap_ev')
    """
    out = name
    while out in _RESERVED or out in taken or out.startswith(_WRITTEN_PREFIXES):
        out = "input_" + out
    return out


#: CSV columns the reader interprets (matched ignoring case and surrounding blanks)
_INTERPRETED = ("id", "smiles", "name", "role")


def _check_repeated_columns(path: Path, header: list[str]) -> None:
    """Refuse a header that names a column twice: which of the two is meant cannot be guessed.

    The interpreted columns (:data:`_INTERPRETED`) are compared ignoring case (``SMILES`` and
    ``smiles`` are one column), any other by its exact name; blank names (empty cells after the last
    column of a spreadsheet export) are not compared.

    >>> _check_repeated_columns(Path("c.csv"), ["id", "smiles", "note", "Note", "SMILES"])
    Traceback (most recent call last):
    ...
    screen.errors.InputError: c.csv: column 'smiles' appears twice (columns 2 and 5); keep one
    >>> _check_repeated_columns(Path("c.csv"), ["id", "smiles", "", ""])
    """
    repeated = repeated_in_header(header, case_blind=frozenset(_INTERPRETED))
    if repeated:
        raise InputError(f"{path}: {repeated}")


def _read_csv(path: Path, text: str) -> tuple[list[dict[str, str]], list[str], list[int]]:
    """Parse candidate CSV text into row dicts, the passthrough column names and each row's first file line."""
    reader = csv.reader(io.StringIO(text, newline=""))
    header: list[str] | None = None
    records: list[dict[str, str]] = []
    mapping: dict[int, str] = {}
    passthrough: list[str] = []
    lines: list[int] = []
    try:
        before = 0  # lines read before this record: it starts on the next one
        for fields in reader:
            start, before = before + 1, reader.line_num
            if header is None:
                if not fields or all(not f.strip() for f in fields):
                    continue
                header = [f.strip() for f in fields]
                lowered = [h.lower() for h in header]
                if "smiles" not in lowered:
                    problem = separator_problem(header)
                    if problem:
                        raise InputError(f"{path}: {problem}")
                    raise InputError(
                        f"{path}: no 'smiles' column; columns found: {header}. "
                        "A candidate CSV needs a header with at least 'smiles' (and usually 'id')"
                    )
                _check_repeated_columns(path, header)
                taken: set[str] = set()
                for i, (h, low) in enumerate(zip(header, lowered)):
                    if low in _INTERPRETED:
                        mapping[i] = "smiles_input" if low == "smiles" else low
                    else:
                        out = _unique_column(h or f"column_{i + 1}", taken)
                        taken.add(out)
                        mapping[i] = out
                        passthrough.append(out)
                continue
            if not fields or all(not f.strip() for f in fields):
                continue
            record = {"id": "", "smiles_input": "", "name": "", "role": "", "read_error": ""}
            record.update({col: "" for col in passthrough})
            for i, value in enumerate(fields[: len(header)]):
                record[mapping[i]] = value
            if len(fields) > len(header):
                record["read_error"] = (
                    f"malformed_row:line {reader.line_num} has {len(fields)} fields but the "
                    f"header has {len(header)} (unquoted comma inside a field?); "
                    "the row is not trusted"
                )
            records.append(record)
            lines.append(start)
    except csv.Error as exc:
        raise InputError(f"{path}: CSV error near line {reader.line_num}: {exc}") from None
    return records, passthrough, lines


def _refuse_csv_as_smi(path: Path, line: str) -> None:
    """Refuse a SMILES file whose first line holds a comma in its SMILES token: no SMILES has one.

    A ``.smi`` line is ``SMILES<whitespace>id``; a comma in the first token means comma-separated
    text, typically a CSV saved under a SMILES extension (every row would be rejected as a syntax error
    and its header screened as a molecule).

    >>> _refuse_csv_as_smi(Path("c.smi"), "id,smiles")
    Traceback (most recent call last):
    ...
    screen.errors.InputError: c.smi looks like comma-separated CSV (its first line 'id,smiles' is a CSV header, \
not SMILES<whitespace>id); rename it to .csv
    """
    header = "smiles" in [f.strip().lower() for f in line.split(",")]
    what = ("is a CSV header, not SMILES<whitespace>id" if header
            else "has a comma in its first field, and no SMILES contains one")
    hint = "rename it to .csv" if header else "rename it to .csv and give it a header line with a 'smiles' column"
    raise InputError(f"{path} looks like comma-separated CSV (its first line {_snippet(line)} {what}); {hint}")


def _read_smi(path: Path, text: str) -> tuple[list[dict[str, str]], list[str], list[int]]:
    """Parse a SMILES file (``SMILES<whitespace>id`` per line); also each record's file line."""
    records: list[dict[str, str]] = []
    lines: list[int] = []
    first_data = True
    for number, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if not stripped or stripped.startswith("#"):
            continue
        parts = stripped.split(None, 1)
        if first_data and "," in parts[0]:
            _refuse_csv_as_smi(path, stripped)
        if first_data and parts[0].lower() == "smiles":
            first_data = False
            continue
        first_data = False
        smiles, rest = parts[0], (parts[1].strip() if len(parts) > 1 else "")
        if rest.startswith("|") and "|" in rest[1:]:  # a CXSMILES extension (|$_R1;;_R2$|) belongs to the SMILES
            end = rest.index("|", 1) + 1
            smiles, rest = f"{smiles} {rest[:end]}", rest[end:].strip()
        records.append(
            {
                "id": rest,
                "smiles_input": smiles,
                "name": "",
                "role": "",
                "read_error": "",
            }
        )
        lines.append(number)
    return records, [], lines


def _sdf_records(text: str) -> list[str]:
    """Split SDF text into record blocks at ``$$$$`` lines (a trailing empty block is dropped)."""
    blocks: list[str] = []
    current: list[str] = []
    for line in text.splitlines():
        if line.strip() == "$$$$":
            blocks.append("\n".join(current))
            current = []
        else:
            current.append(line)
    if any(ln.strip() for ln in current):
        blocks.append("\n".join(current))
    return blocks


def _sdf_data_items(lines: list[str]) -> dict[str, str]:
    """Parse ``> <name>`` data items that follow ``M  END``."""
    items: dict[str, str] = {}
    i = 0
    while i < len(lines):
        match = re.match(r"^>.*?<([^>]*)>", lines[i])
        if match:
            key = match.group(1)
            values: list[str] = []
            i += 1
            while i < len(lines) and lines[i].strip() != "":
                values.append(lines[i])
                i += 1
            items.setdefault(key, "\n".join(values))
        i += 1
    return items


def _molblock_problem(lines: list[str]) -> str | None:
    """Describe what is wrong with a V2000 connection table, if a simple check finds it.

    RDKit reports molblock problems on its warning log, which cannot be captured per call, so
    the common faults (bad counts line, truncated atom or bond block, bad coordinates) are
    re-checked here to give a specific message.

    Parameters
    ----------
    lines : list of str
        The record's lines up to and including ``M  END``.

    Returns
    -------
    str or None
        A message, or None if no fault was found (or the record is V3000).
    """
    if len(lines) < 4:
        return f"header too short ({len(lines)} lines before 'M  END', need at least 4)"
    counts = lines[3]
    if "V3000" in counts:
        return None
    try:
        n_atoms, n_bonds = int(counts[0:3]), int(counts[3:6])
    except ValueError:
        return f"counts line (line 4) is not valid: {_snippet(counts)}"
    body = lines[4:-1]
    if len(body) < n_atoms + n_bonds:
        return (
            f"counts line announces {n_atoms} atoms and {n_bonds} bonds but only "
            f"{len(body)} lines follow"
        )
    for k, line in enumerate(body[:n_atoms], start=5):
        try:
            float(line[0:10]), float(line[10:20]), float(line[20:30])
        except ValueError:
            return f"atom line {k} has unreadable coordinates: {_snippet(line)}"
    return None


def _molblock_to_smiles(molblock: str) -> tuple[str | None, str]:
    """Convert a connection table to SMILES, keeping what validation must still judge.

    The block is first read with sanitisation (so stereochemistry is perceived from wedges or
    3D coordinates); if that fails it is read without, so that e.g. a pentavalent carbon
    reaches :func:`validate` and is reported as ``valence`` rather than as unreadable.

    Parameters
    ----------
    molblock : str
        One record up to and including ``M  END``.

    Returns
    -------
    tuple of (str or None, str)
        The SMILES (None if RDKit cannot read the block at all) and RDKit's exception text,
        if any.
    """
    with rdBase.BlockLogs():
        with rdBase.CaptureErrorLog():
            try:
                mol = Chem.MolFromMolBlock(molblock, sanitize=True, removeHs=False)
                if mol is not None:
                    repeated = _repeated_r_labels(mol)
                    if repeated:
                        return None, repeated
                    return Chem.MolToSmiles(Chem.RemoveHs(mol)), ""
                mol = Chem.MolFromMolBlock(molblock, sanitize=False, removeHs=False)
                if mol is None:
                    return None, ""
                mol.UpdatePropertyCache(strict=False)
                return Chem.MolToSmiles(mol), ""
            except Exception as exc:  # RDKit raises several exception types on bad blocks
                text = str(exc).strip()
                return None, text.splitlines()[0] if text else type(exc).__name__


def _repeated_r_labels(mol) -> str:
    """Why an SD record's dummy atoms are no repeat-unit ends ('' otherwise): an "any atom" query (A, Q) is a
    search pattern, and R-group atoms with one label twice mark a symmetric substituent template (a polymer audit
    found both computed as polymers)."""
    queries = sorted({a.GetQueryType() for a in mol.GetAtoms()
                      if a.GetAtomicNum() == 0 and a.HasQuery() and a.GetQueryType() in ("A", "Q", "AH", "QH")})
    if queries:  # an "any atom" query is a search pattern, not an attachment point (a polymer audit)
        return (f"query atom {', '.join(queries)} (any atom) is a search pattern, not an attachment point; mark the "
                "two ends of a polymer repeat unit with R1 and R2 (R#) or *")
    labels = [a.GetIntProp("_MolFileRLabel") for a in mol.GetAtoms() if a.HasProp("_MolFileRLabel")]
    twice = sorted({f"R{x}" for x in labels if labels.count(x) > 1})
    if not twice:
        return ""
    return (f"R-group label {', '.join(twice)} appears on more than one atom: that is a substituent template, not "
            "a polymer repeat unit; mark the two ends of a repeat unit R1 and R2")


def _sdf_starts(text: str) -> list[int]:
    """The file line (1-based) on which each record of :func:`_sdf_records` starts."""
    starts, start, filled = [], 1, False
    for number, line in enumerate(text.splitlines(), start=1):
        if line.strip() == "$$$$":
            starts.append(start)
            start, filled = number + 1, False
        else:
            filled = filled or bool(line.strip())
    if filled:
        starts.append(start)
    return starts


def _read_sdf(path: Path, text: str) -> tuple[list[dict[str, str]], list[str], list[int]]:
    """Parse an SD file; unreadable records become rows with a read error. Also each record's first file line."""
    records: list[dict[str, str]] = []
    passthrough: list[str] = []
    column_of: dict[str, str] = {}
    for number, block in enumerate(_sdf_records(text), start=1):
        lines = block.split("\n")
        title = lines[0].strip() if lines else ""
        end = next((i for i, ln in enumerate(lines) if ln.startswith("M  END")), None)
        data = _sdf_data_items(lines[end + 1 :]) if end is not None else {}
        record = {"id": title, "smiles_input": "", "name": "", "role": "", "read_error": ""}
        for key, value in data.items():
            low = key.strip().lower()
            if low in ("name", "role") and not record[low]:
                record[low] = value
                continue
            if key not in column_of:
                column_of[key] = _unique_column(key.strip() or "property", set(passthrough))
                passthrough.append(column_of[key])
            record[column_of[key]] = value
        if end is None:
            record["read_error"] = (
                f"unparsable:SDF record {number} (title {_snippet(title)}) could not be read: "
                "no 'M  END' line"
            )
        else:
            smiles, detail = _molblock_to_smiles("\n".join(lines[: end + 1]) + "\n")
            if smiles is None:
                detail = detail or _molblock_problem(lines[: end + 1]) or (
                    "RDKit rejected the connection table"
                )
                record["read_error"] = (
                    f"unparsable:SDF record {number} (title {_snippet(title)}) could not be read: "
                    f"{detail}"
                )
            else:
                record["smiles_input"] = smiles
        records.append(record)
    for record in records:
        for col in passthrough:
            record.setdefault(col, "")
    return records, passthrough, _sdf_starts(text)


def generated_id(fmt: str | None, line: int | None, row: int) -> str:
    """The id given to a row without one: named after where the row is in the file, so a user can find it.

    ``line-<L>`` for a CSV or SMILES row (``L`` = the 1-based file line the row starts on, counting the header,
    blank and comment lines: the line a text editor shows), ``record-<N>`` for an SD record (``N`` = 1-based record
    number, the "SD record N" of the messages; its title line is the empty id); ``row-<row>`` (0-based position)
    only for a frame built in code, which has no file line.  (Before, every format got ``row-<row>``, so an empty id
    on line 12 of a CSV became ``row-10``.)

    Examples
    --------
    >>> generated_id("csv", 12, 10), generated_id("smi", 5, 2), generated_id("sdf", 40, 2), generated_id(None, None, 2)
    ('line-12', 'line-5', 'record-3', 'row-2')
    """
    if fmt == "sdf":
        return f"record-{row + 1}"
    if line is not None and fmt in ("csv", "smi"):
        return f"line-{line}"
    return f"row-{row}"


def assign_missing_ids(ids: list[str], rows: list[int],
                       names: list[str] | None = None) -> tuple[list[str], list[str]]:
    """Fill empty (or blank) ids; return the ids and per-row notes.

    ``names`` are the ids to give, one per row (:func:`generated_id`: ``line-12``, ``record-3``); without them
    ``row-<row>``.  A name that is already an id of the file gets a ``-2``, ``-3`` ... suffix.  Given ids are kept
    as they are.

    Examples
    --------
    >>> assign_missing_ids(["a", "", "line-4"], [0, 1, 2], ["line-2", "line-4", "line-5"])
    (['a', 'line-4-2', 'line-4'], ['', "missing_id: no id given, assigned 'line-4-2'", ''])
    """
    explicit = {i for i in ids if i.strip()}
    out: list[str] = []
    notes: list[str] = []
    for k, (ident, row) in enumerate(zip(ids, rows)):
        if ident.strip():
            out.append(ident)
            notes.append("")
            continue
        base = names[k] if names is not None else f"row-{row}"
        candidate = base
        suffix = 2
        while candidate in explicit:
            candidate = f"{base}-{suffix}"
            suffix += 1
        explicit.add(candidate)
        out.append(candidate)
        notes.append(f"missing_id: no id given, assigned {candidate!r}")
    return out, notes


def generated_id_names(frame: pd.DataFrame, rows: list[int]) -> list[str] | None:
    """:func:`generated_id` of each row of a frame read by :func:`read_candidates` (its file lines in
    ``frame.attrs``); ``None`` for a frame that does not record them (built in code: ``row-<row>``)."""
    found = frame.attrs.get(INPUT_LINES) or {}
    if not found.get("lines") and found.get("format") != "sdf":
        return None
    return [generated_id(found.get("format"), input_line(frame, row), row) for row in rows]


def read_candidates(path: str | os.PathLike[str]) -> pd.DataFrame:
    """Read a candidate file (CSV, SMILES or SDF) into a frame of text columns.

    Parameters
    ----------
    path : str or os.PathLike
        Candidate file; the format is chosen by extension (``.csv``, ``.smi``/``.smiles``/
        ``.txt``, ``.sdf``/``.sd``, each optionally ``.gz``).

    Returns
    -------
    pandas.DataFrame
        One row per input record, in input order, with columns ``row`` (0-based input
        position, int), ``id``, ``smiles_input``, ``name``, ``role``, ``note``, ``read_error``
        and then the passthrough columns (all text).  ``read_error`` is ``''`` unless the
        record itself could not be read; it has the form ``"<reason>:<message>"`` and is
        turned into a rejection by :func:`validate`.  Empty ids are replaced by an id named after
        the row's place in the file (``line-<file line>`` for CSV and SMILES, ``record-<SD record number>`` for
        SDF; :func:`generated_id`) and noted in ``note``.  Passthrough columns whose names clash with a column of the
        manifest are renamed with an ``input_`` prefix.

    Raises
    ------
    screen.errors.InputError
        Unknown extension, a ``.gz`` file that is not readable gzip data, text that is not UTF-8,
        a CSV without a ``smiles`` column (the message names the file and the columns found) or
        with a column named twice, a SMILES file that is comma-separated text, or an
        unrecoverable CSV syntax error.
    FileNotFoundError
        If ``path`` does not exist.
    """
    path = Path(path)
    fmt, gz = _format_of(path)
    text = _read_text(path, gz, fmt)
    if fmt == "csv":
        records, passthrough, lines = _read_csv(path, text)
    elif fmt == "smi":
        records, passthrough, lines = _read_smi(path, text)
    else:
        records, passthrough, lines = _read_sdf(path, text)
    rows = list(range(len(records)))
    places = lines if len(lines) == len(records) else [None] * len(records)
    ids, notes = assign_missing_ids([r["id"] for r in records], rows,
                                    [generated_id(fmt, line, row) for row, line in zip(rows, places)])
    columns: dict[str, list[Any]] = {
        "row": rows,
        "id": ids,
        "smiles_input": [r["smiles_input"] for r in records],
        "name": [r["name"] for r in records],
        "role": [r["role"] for r in records],
        "note": notes,
        "read_error": [r["read_error"] for r in records],
    }
    for col in passthrough:
        columns[col] = [r.get(col, "") for r in records]
    frame = pd.DataFrame(columns)
    frame["row"] = frame["row"].astype("int64")
    for col in frame.columns:
        if col != "row":
            frame[col] = frame[col].astype(object)
    # where each row is in the file, for messages that point at it (:func:`screen.prepare.validate`)
    # (an array: pandas deep-copies attrs with every operation, and a list of 100 000 numbers costs 20 ms each time)
    frame.attrs[INPUT_LINES] = {"file": path.name, "format": fmt,
                                "lines": array("q", lines if len(lines) == len(records) else [])}
    return frame

