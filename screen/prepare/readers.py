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

import codecs
import csv
import gzip
import io
import os
import re
import sys
import zlib
from array import array
from bisect import bisect_right
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd
from rdkit import Chem, rdBase

from screen.columns import (CALIBRATED_COLUMNS, ELECTRONIC_COLUMNS, LEVELS_CONTRACT_COLUMNS, RANKING_COLUMNS,
                            RANKING_EXTRA_COLUMNS)
from screen.errors import InputError
from screen.io import looks_utf16, repeated_in_header, separator_problem, utf16_error
from screen.prepare.checks import full_check_limit
from screen.prepare.checks import snippet as _snippet
from screen.prepare.options import KNOWN_ELEMENTS, PrepareOptions
from screen.prepare.shards import MANIFEST_COLUMNS

__all__ = ["read_candidates", "assign_missing_ids", "generated_id", "generated_id_names", "INPUT_LINES", "input_line",
           "not_utf8_error", "utf16_error", "looks_utf16", "ID_ALIASES", "id_columns",
           "MAX_LINE_BYTES", "MAX_SDF_LINE_BYTES"]

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
            names = [h.strip() for h in next(csv.reader([header]))]
            fields = next(csv.reader([line]), [])
            found = id_columns(names)
            at = found[0] if len(found) == 1 else -1
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
    if raw.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        return utf16_error(path, raw, fmt)
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


#: longest line a candidate file may have (bytes): a longer one is not read (:func:`_read_raw`), so that a 200 MB
#: SMILES line cannot exhaust the memory (a security audit: the machine's whole memory, then the OOM killer). A
#: SMILES within ``PrepareOptions.max_heavy_atoms`` takes a few thousand characters
#: (:func:`screen.prepare.checks.smiles_length_limit`); 128 KiB is also the largest field Python's CSV reader takes
#: (``csv.field_size_limit()``), which refused a whole CSV file for one longer field
MAX_LINE_BYTES = 131_072
#: longest line an SD file may have (bytes): its connection table's lines are short, but a data item may hold a long
#: value (an exported image, a fingerprint), which is only text passed through; a longer line rejects its record
MAX_SDF_LINE_BYTES = 16 * 1024 * 1024
#: bytes of a file read at a time
_CHUNK = 1 << 16
#: bytes kept of the start and of the end of a line that is too long, for its message and id
_KEEP = 120


@dataclass
class _LongLine:
    """A line of a candidate file longer than :data:`MAX_LINE_BYTES`: its length and its first and last bytes."""

    length: int
    head: bytes
    tail: bytes

    def text(self, part: bytes) -> str:
        return part.decode("utf-8", errors="replace")

    def describe(self, number: int) -> str:
        """``line 3 is 209715201 bytes long ('CCCC...')``."""
        return f"line {number} is {self.length} bytes long ({_snippet(self.text(self.head))})"

    def advice(self, limit: int = MAX_LINE_BYTES) -> str:
        return (f"more than the {limit} a candidate file line may have (a SMILES within "
                "PrepareOptions.max_heavy_atoms takes a few thousand characters); not read: shorten or remove it")


def _first_break(chunk: bytes, start: int = 0) -> int:
    """The position of the first CR or LF in ``chunk`` from ``start``; -1 when none."""
    cr, lf = chunk.find(b"\r", start), chunk.find(b"\n", start)
    return min(cr, lf) if cr >= 0 and lf >= 0 else max(cr, lf)


def _last_break(chunk: bytes) -> int:
    """The position of the last CR or LF in ``chunk``; -1 when none."""
    return max(chunk.rfind(b"\r"), chunk.rfind(b"\n"))


def _line_count(data: bytes | bytearray) -> int:
    """The number of line breaks in ``data`` (CR LF, CR and LF each one, as :meth:`str.splitlines` counts them)."""
    return data.count(b"\n") + data.count(b"\r") - data.count(b"\r\n")


def _read_capped(chunks, limit: int) -> tuple[bytes, dict[int, _LongLine]]:
    """Join the byte ``chunks`` of a file except the lines longer than ``limit`` bytes, which are left blank (one
    space; their line break kept, so the line numbers stay), and return those by line number (1-based; CR LF, CR and
    LF end a line). At most about ``limit`` bytes of such a line are ever held.

    Examples
    --------
    >>> data, long = _read_capped([b"a\\r\\nBBBBBBBBBB x\\ncc\\n"], 5)
    >>> data, {n: (x.length, x.head, x.tail) for n, x in long.items()}
    (b'a\\r\\n \\ncc\\n', {2: (12, b'BBBBBBBBBB x', b'BBBBBBBBBB x')})
    """
    out = bytearray()
    found: dict[int, _LongLine] = {}
    current = 0  # bytes of the line being read that are in ``out`` (it starts at len(out) - current)
    dropping: _LongLine | None = None  # the long line being skipped, and its number
    number = 0
    for big in chunks:
        for at in range(0, len(big), limit):  # pieces of at most ``limit`` bytes: a line within one is short
            chunk = big[at:at + limit]
            first = _first_break(chunk)
            piece = chunk if first < 0 else chunk[:first]  # the rest of the line being read
            if dropping is None and current + len(piece) > limit:
                start = len(out) - current
                dropping = _LongLine(length=current, head=bytes(out[start:start + _KEEP]),
                                     tail=bytes(out[start:])[-_KEEP:])
                del out[start:]
                number = 1 + _line_count(out)
                out += b" "  # the line left blank: left empty, its CR and the LF after it would make one break
                current = 0
            if dropping is not None:
                dropping.length += len(piece)
                dropping.head = (dropping.head + piece[:_KEEP])[:_KEEP]
                dropping.tail = (dropping.tail + piece)[-_KEEP:]
            else:
                out += piece
                current += len(piece)
            if first < 0:
                continue
            if dropping is not None:
                found[number] = dropping
                dropping = None
            last = _last_break(chunk)
            out += chunk[first:]  # whole lines, each shorter than ``limit``, and the start of the next
            current = len(chunk) - last - 1
    if dropping is not None:
        found[number] = dropping
    return bytes(out), found


def _read_raw(path: Path, gz: bool, limit: int = MAX_LINE_BYTES) -> tuple[bytes, dict[int, _LongLine]]:
    """The file's bytes (decompressed), without the lines longer than ``limit`` (:func:`_read_capped`); a UTF-16
    file (byte-order mark, or NUL bytes between the characters) is read whole, its lines uncut."""
    try:
        with (gzip.open(path, "rb") if gz else open(path, "rb")) as stream:
            start = stream.read(_CHUNK)
            if start.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)) or looks_utf16(start):
                return start + stream.read(), {}
            return _read_capped(_chunks(start, stream), limit)
    except (OSError, EOFError, zlib.error) as exc:  # gzip.BadGzipFile is an OSError
        if not gz or isinstance(exc, FileNotFoundError):
            raise
        raise InputError(
            f"not a readable gzip file: {path} ({exc}); check that it was copied whole, or give the "
            "uncompressed file"
        ) from None


def _chunks(start: bytes, stream):
    """``start``, then the rest of ``stream`` in chunks of :data:`_CHUNK` bytes."""
    yield start
    while True:
        chunk = stream.read(_CHUNK)
        if not chunk:
            return
        yield chunk


def _read_text(path: Path, gz: bool, fmt: str | None = None) -> str:
    """Read the whole file as UTF-8 text (a byte-order mark is ignored); see :func:`_read_file`.

    A ``.gz`` file that is not gzip data, or is truncated or corrupt, raises :class:`InputError`:

    >>> import pathlib, tempfile
    >>> bad = pathlib.Path(tempfile.mkdtemp()) / "c.csv.gz"
    >>> _ = bad.write_bytes(gzip.compress(b"id,smiles\\na,CCO\\n")[:15])
    >>> _read_text(bad, True)  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    screen.errors.InputError: not a readable gzip file: ...c.csv.gz (...); ...
    """
    return _read_file(path, gz, fmt)[0]


def _read_file(path: Path, gz: bool, fmt: str | None = None) -> tuple[str, dict[int, _LongLine]]:
    """Read the whole file as UTF-8 text (a byte-order mark is ignored), and its lines that are too long.

    A line longer than :data:`MAX_LINE_BYTES` (:data:`MAX_SDF_LINE_BYTES` in an SD file) is not read: it is blank
    in the text, and returned by its line number (1-based) for the readers to report (:func:`_read_raw`).

    A CSV or SMILES file that starts with a UTF-16 byte-order mark (FF FE or FE FF: a spreadsheet's "Unicode
    text" export) is read as UTF-16; an SD file in UTF-16 is refused saying so (:func:`utf16_error`: convert it
    with ``iconv -f utf-16 -t utf-8``). A file in UTF-16 without a byte-order mark (a NUL byte beside every ASCII
    character) is refused saying so (:func:`screen.io.utf16_error`).

    Text that is not UTF-8 raises :class:`InputError` naming the line (and the id on it, for ``fmt`` ``"csv"`` or
    ``"smi"``; the SD record for ``"sdf"``) of the first byte that is not UTF-8 (:func:`not_utf8_error`).
    """
    raw, long = _read_raw(path, gz, MAX_SDF_LINE_BYTES if fmt == "sdf" else MAX_LINE_BYTES)
    if raw.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        if fmt == "sdf":
            raise utf16_error(path, raw, fmt)
        try:
            return raw.decode("utf-16"), {}  # the byte-order mark gives the byte order and is dropped
        except UnicodeDecodeError:
            raise utf16_error(path, raw, fmt) from None
    if looks_utf16(raw):
        raise utf16_error(path, raw, fmt)
    try:
        return raw.decode("utf-8-sig"), long
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

#: header spellings of the id column besides ``id``, compared after :func:`_header_key` (lower case, letters and digits
#: only: ``Compound ID``, ``compound_id``, ``Mol-ID``, ``ID`` with blanks around are all id); a column named ``id``
#: wins over them, and two of them without an ``id`` column are refused (which one is meant cannot be guessed)
ID_ALIASES: tuple[str, ...] = ("id", "identifier", "compoundid", "cmpdid", "compoundno", "compoundnumber", "molid",
                               "moleculeid", "structureid", "sampleid")
#: words in a column name that suggest it may hold ids (named in the console line when ids are generated)
_ID_WORDS = re.compile(r"id|name|code|label|title|compound|cmpd|mol|sample|entry|number|no\b|#", re.IGNORECASE)


def _header_key(name: str) -> str:
    """A column name as the id spellings are compared: lower case, letters and digits only.

    >>> _header_key(" Compound ID "), _header_key("compound_id"), _header_key("Mol-ID")
    ('compoundid', 'compoundid', 'molid')
    """
    return "".join(ch for ch in str(name).lower() if ch.isalnum())


def id_columns(header: list[str]) -> list[int]:
    """The positions of the header's id column: the column named ``id`` (any case, blanks around), else every column
    named one of the :data:`ID_ALIASES` spellings (more than one is ambiguous; :func:`_read_csv` refuses it).

    Examples
    --------
    >>> id_columns(["Compound ID", "SMILES"]), id_columns(["compound_id", " ID ", "smiles"]), id_columns(["x"])
    ([0], [1], [])
    >>> id_columns(["Compound ID", "Mol ID", "smiles"])
    [0, 1]
    """
    exact = [i for i, name in enumerate(header) if str(name).strip().lower() == "id"]
    if exact:
        return exact[:1]
    return [i for i, name in enumerate(header) if _header_key(name) in ID_ALIASES]


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


def _smiles_like_hint(header: list[str]) -> str:
    """``"; column 'Canonical SMILES' looks like it: name it 'smiles'"`` when exactly one column name holds the word
    smiles ('' otherwise)."""
    like = [h for h in header if "smiles" in str(h).lower() and str(h).strip().lower() != "smiles"]
    return f"; column {like[0]!r} looks like it: name it 'smiles'" if len(like) == 1 else ""


def _long_line_csv_id(long: _LongLine, delimiter: str, at: int | None) -> str:
    """The id of a CSV line too long to read, when its start shows it (column ``at``, 0-based); '' otherwise."""
    if at is None:
        return ""
    try:
        fields = next(csv.reader([long.text(long.head)], delimiter=delimiter), [])
    except csv.Error:
        return ""
    return fields[at].strip() if at < len(fields) - 1 else ""  # the last field may be cut


def _is_repeated_header(fields: list[str], lowered: list[str]) -> bool:
    """Whether a CSV row's ``fields`` repeat the header (``lowered``: its names in lower case), ignoring case,
    blanks around the names and empty trailing fields."""
    def trimmed(names: list[str]) -> list[str]:
        names = [n.strip().lower() for n in names]
        while names and not names[-1]:
            names.pop()
        return names

    return bool(fields) and trimmed(fields) == trimmed(lowered)


#: Excel's first line naming the field separator (``sep=,``), written by some exports and macros
_SEP_LINE = re.compile(r"sep=(.)", re.IGNORECASE)
_SEPARATOR_NAMES = {",": "commas", ";": "';'", "\t": "tabs"}


def _read_csv(path: Path, text: str, delimiter: str = ",",
              long_lines: dict[int, _LongLine] | None = None) -> tuple[list[dict[str, str]], list[str], list[int], str]:
    """Parse candidate CSV text into row dicts, the passthrough column names and each row's first file line.

    ``delimiter``: ``","`` for a ``.csv`` file, a tab for a SMILES-file that is a table with a header
    (:func:`_read_smi`).  Besides the interpreted columns, the id may be under another common name
    (:func:`id_columns`); a first line ``sep=,`` (a spreadsheet's note of the separator) is skipped when it names
    ``delimiter`` and refuses the file otherwise; unnamed columns that are empty on every row (a spreadsheet's
    trailing empty columns) are dropped; empty fields after the last column are ignored.  Also returned: the column
    that may hold ids when the header has no id column (``"column 'Name'"``; '' otherwise), for the console line
    about generated ids.

    A row is rejected (``malformed_row``, its ``read_error``) when it repeats the header line (two files joined), or
    when one of its lines is too long to read (``long_lines``, :func:`_read_file`; a header line that long refuses
    the file).
    """
    long_lines = long_lines or {}
    seen_long: set[int] = set()
    ends: list[int] = []
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)
    header: list[str] | None = None
    records: list[dict[str, str]] = []
    mapping: dict[int, str] = {}
    passthrough: list[str] = []
    unnamed: list[str] = []
    shown: dict[str, str] = {}  # internal column -> its header text
    lines: list[int] = []
    has_id = False
    id_at: int | None = None
    try:
        before = 0  # lines read before this record: it starts on the next one
        for fields in reader:
            start, before = before + 1, reader.line_num
            if start in long_lines and all(not f.strip() for f in fields):  # too long to read (blank: _read_file)
                long = long_lines[start]
                seen_long.add(start)
                if header is None:
                    raise InputError(f"{path}: {long.describe(start)}, before any row: {long.advice()}")
                record = {"id": _long_line_csv_id(long, delimiter, id_at), "smiles_input": "", "name": "",
                          "role": "", "read_error": f"malformed_row:{long.describe(start)}, {long.advice()}"}
                record.update({col: "" for col in passthrough})
                records.append(record)
                lines.append(start)
                ends.append(start)
                continue
            if header is None:
                if not fields or all(not f.strip() for f in fields):
                    continue
                note = _SEP_LINE.fullmatch(delimiter.join(fields).strip(" "))
                if note and not records and not mapping:
                    if note.group(1) == delimiter:
                        continue  # "sep=," says what the file is: nothing to read on it
                    name = _SEPARATOR_NAMES.get(note.group(1), repr(note.group(1)))
                    raise InputError(
                        f"{path}: the file seems to be separated by {name} (its line {start} is "
                        f"{delimiter.join(fields).strip()!r}, a spreadsheet's note of the separator), not by "
                        f"{_SEPARATOR_NAMES.get(delimiter, repr(delimiter))}: save it as comma-separated CSV, with a "
                        "point as the decimal mark (1.1, not 1,1)")
                header = [f.strip() for f in fields]
                lowered = [h.lower() for h in header]
                if "smiles" not in lowered:
                    problem = separator_problem(delimiter.join(fields))  # the line as written, blanks kept
                    if problem:
                        raise InputError(f"{path}: {problem}")
                    raise InputError(
                        f"{path}: no 'smiles' column; columns found: {header}. "
                        "A candidate CSV needs a header with at least 'smiles' (and usually 'id')"
                        + _smiles_like_hint(header)
                    )
                _check_repeated_columns(path, header)
                ids = id_columns(header)
                if len(ids) > 1:
                    names = " and ".join(repr(header[i]) for i in ids)
                    raise InputError(f"{path}: columns {names} both look like the id column; name the one that "
                                     "holds the ids 'id'")
                has_id = bool(ids)
                id_at = ids[0] if ids else None
                taken: set[str] = set()
                for i, (h, low) in enumerate(zip(header, lowered)):
                    if ids and i == ids[0]:
                        mapping[i] = "id"
                    elif low in _INTERPRETED and low != "id":
                        mapping[i] = "smiles_input" if low == "smiles" else low
                        shown[mapping[i]] = h
                    else:
                        out = _unique_column(h or f"column_{i + 1}", taken)
                        taken.add(out)
                        mapping[i] = out
                        passthrough.append(out)
                        shown[out] = h
                        if not h:
                            unnamed.append(out)
                continue
            if not fields or all(not f.strip() for f in fields):
                continue
            record = {"id": "", "smiles_input": "", "name": "", "role": "", "read_error": ""}
            record.update({col: "" for col in passthrough})
            for i, value in enumerate(fields[: len(header)]):
                record[mapping[i]] = value
            extra = fields[len(header):]
            if _is_repeated_header(fields, lowered):
                record["read_error"] = (
                    f"malformed_row:line {start} repeats the header line {_snippet(delimiter.join(fields))} (two files "
                    "joined into one?); it is no candidate: remove it"
                )
            elif any(f.strip() for f in extra):  # empty fields after the last column (a spreadsheet's ",,") are no data
                record["read_error"] = (
                    f"malformed_row:line {reader.line_num} has {len(fields)} fields but the "
                    f"header has {len(header)} ({'unquoted comma' if delimiter == ',' else 'a tab'} inside a field?); "
                    "the row is not trusted"
                )
            records.append(record)
            lines.append(start)
            ends.append(reader.line_num)
    except csv.Error as exc:
        raise InputError(f"{path}: CSV error near line {reader.line_num}: {exc}") from None
    for number in sorted(set(long_lines) - seen_long):  # a long line inside a quoted field of several lines
        at = bisect_right(lines, number) - 1
        if at >= 0 and number <= ends[at]:
            records[at]["read_error"] = (f"malformed_row:line {lines[at]}: its {long_lines[number].describe(number)}, "
                                         f"{long_lines[number].advice()}")
    empty = [col for col in unnamed if not any(r.get(col, "").strip() for r in records)]
    if empty:  # a spreadsheet's trailing empty columns: nothing in them to carry through
        passthrough = [col for col in passthrough if col not in empty]
        for record in records:
            for col in empty:
                record.pop(col, None)
    hint = "" if has_id else _id_like_column(records, [(c, shown.get(c, c)) for c in ["name"] + passthrough])
    return records, passthrough, lines, (f"column {hint!r}" if hint else "")


def _id_like_column(records: list[dict[str, str]], columns: list[tuple[str, str]]) -> str:
    """The header text of the first column whose name suggests ids (:data:`_ID_WORDS`) and that holds a distinct,
    non-empty value on every row ('' when none): what the console line about generated ids names."""
    for col, text in columns:
        if not text or not _ID_WORDS.search(text):
            continue
        values = [r.get(col, "").strip() for r in records]
        if values and all(values) and len(set(values)) == len(values):
            return text
    return ""


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


def _is_smiles(token: str) -> bool:
    """Whether RDKit reads ``token`` as a SMILES (unsanitised, quietly): tells a data line from a header line."""
    with rdBase.BlockLogs():
        return Chem.MolFromSmiles(token, sanitize=False) is not None


def _smi_header(path: Path, number: int, line: str) -> str:
    """What the first line of a SMILES file is: ``"table"`` (a tab-separated header naming a ``smiles`` column that
    is not the documented two-column ``SMILES<TAB>id`` header: the file is read by its header), ``"header"`` (the
    documented header, first field ``smiles``: skipped, the id is the rest of each line) or ``""`` (a data line).

    A first line that is plainly a header but cannot be read as one is refused (:class:`InputError`): a header
    separated by blanks whose ``smiles`` column is not the first, or one naming an id, name or role column and no
    ``smiles`` column (an input-file audit: a tab-separated ``ID<TAB>SMILES`` export was read with the ids as the
    SMILES, the id ``CCO`` computed as ethanol).

    Examples
    --------
    >>> [_smi_header(Path("c.smi"), 1, t) for t in ("SMILES\\tName", "ID\\tSMILES", "smiles id", "c1ccsc1\\tA")]
    ['header', 'table', 'header', '']
    """
    stripped = line.strip()
    tabbed = "\t" in stripped
    fields = [f.strip() for f in (stripped.split("\t") if tabbed else stripped.split())]
    low = [f.lower() for f in fields]
    where = f"{path}: line {number} {_snippet(stripped)}"
    if "smiles" in low:
        if tabbed and not (len(fields) == 2 and low[0] == "smiles"):
            return "table"
        if low[0] == "smiles":
            return "header"
        raise InputError(
            f"{where} looks like a header naming 'smiles' as column {low.index('smiles') + 1}, its columns "
            "separated by blanks; a SMILES file line is SMILES<whitespace>id, SMILES first: separate the header and "
            "the rows with tabs (the file is then read by its header), or save the table as CSV")
    named = [f for f in fields if _header_key(f) in ID_ALIASES or f.lower() in ("name", "role", "title")]
    if named and not _is_smiles(fields[0]):
        raise InputError(
            f"{where} looks like a header (column {named[0]!r}) but names no 'smiles' column; a SMILES file is "
            "SMILES<whitespace>id per line, or a tab-separated table whose header names a 'smiles' column: name the "
            f"SMILES column 'smiles' in the header, or save the table as CSV{_smiles_like_hint(fields)}")
    return ""


def _long_line_smi_id(long: _LongLine) -> str:
    """The id of a SMILES-file line too long to read: what follows the SMILES at its end, when its start is all
    SMILES (no blank in it) and its end shows where the SMILES stops; '' otherwise.

    >>> _long_line_smi_id(_LongLine(10**6, b"CCCCCCCC", b"CCCCCC X 12"))
    'X 12'
    >>> _long_line_smi_id(_LongLine(10**6, b"C x", b"x"))  # the id is what is too long: not shown whole
    ''
    """
    head, tail = long.text(long.head), long.text(long.tail)
    if re.search(r"\s", head.strip()) or not re.search(r"\s", tail.strip()):
        return ""
    return tail.strip().split(None, 1)[1].split("\t")[0].strip()


def _read_smi(path: Path, text: str,
              long_lines: dict[int, _LongLine] | None = None) -> tuple[list[dict[str, str]], list[str], list[int], str]:
    """Parse a SMILES file (``SMILES<whitespace>id`` per line); also each record's file line.

    A file whose first line is a tab-separated header naming a ``smiles`` column (anywhere), other than the
    documented ``SMILES<TAB>id`` header, is a table (a spreadsheet's "Text (Tab delimited)" export): it is read by its
    header like a CSV file (:func:`_read_csv`; comment lines before the header are skipped, after it every line is
    a row).  Otherwise the id is the rest of the line, blanks included; a line whose id is followed by further
    tab-separated fields is rejected (``malformed_row``, naming them) instead of folding them into the id.

    A line is also rejected when it is a header line after the first line (``malformed_row``: two files joined), or
    when it is too long to read (``long_lines``, :func:`_read_file`; ``too_many_atoms`` when its start is all
    SMILES).
    """
    long_lines = long_lines or {}
    all_lines = text.splitlines()
    first = next(((n, ln) for n, ln in enumerate(all_lines, start=1)
                  if ln.strip() and not ln.strip().startswith("#")), None)
    if first is not None and "," in first[1].strip().split(None, 1)[0]:
        _refuse_csv_as_smi(path, first[1].strip())
    kind = _smi_header(path, *first) if first is not None else ""
    if kind == "table":
        table = "\n".join("" if n < first[0] else ln for n, ln in enumerate(all_lines, start=1))
        return _read_csv(path, table, delimiter="\t", long_lines=long_lines)
    records: list[dict[str, str]] = []
    lines: list[int] = []
    for number, line in enumerate(all_lines, start=1):
        stripped = line.strip()
        if number in long_lines and not stripped:  # a line too long to read (left blank by _read_file)
            long = long_lines[number]
            code = "malformed_row" if re.search(r"\s", long.text(long.head).strip()) else "too_many_atoms"
            records.append({"id": _long_line_smi_id(long), "smiles_input": "", "name": "",
                            "role": "", "read_error": f"{code}:{long.describe(number)}, {long.advice()}"})
            lines.append(number)
            continue
        if not stripped or stripped.startswith("#"):
            continue
        if kind == "header" and number == first[0]:
            continue
        parts = stripped.split(None, 1)
        smiles, rest = parts[0], (parts[1].strip() if len(parts) > 1 else "")
        if rest.startswith("|") and "|" in rest[1:]:  # a CXSMILES extension (|$_R1;;_R2$|) belongs to the SMILES
            end = rest.index("|", 1) + 1
            smiles, rest = f"{smiles} {rest[:end]}", rest[end:].strip()
        error = ""
        if "\t" in rest:  # SMILES, id and more columns: the id is not the rest of the line
            fields = [f.strip() for f in rest.split("\t")]
            rest, extra = fields[0], [f for f in fields[1:] if f]
            if extra:
                shown = ", ".join(_snippet(f) for f in extra[:5]) + (", ..." if len(extra) > 5 else "")
                error = (f"malformed_row:line {number} has tab-separated fields after the id {_snippet(rest)}: "
                         f"{shown}; a SMILES file line is SMILES<whitespace>id (an id may hold blanks, not tabs): "
                         "name the columns in a tab-separated header line (e.g. SMILES<TAB>id<TAB>role) or save "
                         "the file as CSV")
        if smiles.strip().lower() == "smiles":  # no SMILES: a header line in the middle of the file
            what = "repeats the header line" if kind == "header" else "is a header line"
            error = (f"malformed_row:line {number} {what} {_snippet(stripped)} after the first line (two files joined "
                     "into one?); it is no candidate: remove it")
        records.append({"id": rest, "smiles_input": smiles, "name": "", "role": "", "read_error": error})
        lines.append(number)
    return records, [], lines, ""


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


class _RecordProblem(Exception):
    """An SD record that is not screened as drawn: ``code`` (a reason code) and ``message``."""

    def __init__(self, code: str, message: str) -> None:
        super().__init__(message)
        self.code = code
        self.message = message


def _read_molblock(molblock: str) -> tuple[str | None, str, str]:
    """Convert a connection table to SMILES, keeping what validation must still judge.

    The block is first read with sanitisation (so stereochemistry is perceived from wedges or 3D coordinates); if
    that fails it is read without, so that e.g. a pentavalent carbon reaches :func:`validate` and is reported as
    ``valence`` rather than as unreadable. Polymer ends drawn the way drawing programs write them become attachment
    points (:func:`_drawn_ends`).

    Returns
    -------
    tuple of (str or None, str, str)
        The SMILES (None if RDKit cannot read the block at all, or the record is no screenable structure), the
        reason (RDKit's exception text, or why) and the reason code of a record that is read but refused (``''``
        when read, or unreadable: ``unparsable``).
    """
    with rdBase.BlockLogs():
        with rdBase.CaptureErrorLog():
            try:
                mol = Chem.MolFromMolBlock(molblock, sanitize=True, removeHs=False)
                if mol is not None:
                    repeated = _repeated_r_labels(mol)
                    if repeated:
                        return None, repeated, ""
                    drawn = _drawn_ends(mol)
                    if drawn is not mol:  # ends made attachment points: sanitised already where it could be
                        return Chem.MolToSmiles(Chem.RemoveHs(drawn, sanitize=False)), "", ""
                    return Chem.MolToSmiles(Chem.RemoveHs(mol)), "", ""
                mol = Chem.MolFromMolBlock(molblock, sanitize=False, removeHs=False)
                if mol is None:
                    return None, "", ""
                mol.UpdatePropertyCache(strict=False)
                mol = _drawn_ends(mol)
                return Chem.MolToSmiles(mol), "", ""
            except _RecordProblem as problem:
                return None, problem.message, problem.code
            except Exception as exc:  # RDKit raises several exception types on bad blocks
                text = str(exc).strip()
                return None, text.splitlines()[0] if text else type(exc).__name__, ""


#: how a record's ends can be marked, for the messages of :func:`_drawn_ends`
_MARK_ENDS = "mark the two ends of the repeat unit with R1 and R2 (R#) or * atoms"
#: polymer S-group types other than SRU (CTfile formats ``from memory``): not one repeat unit with two ends
_OTHER_POLYMER_SGROUPS = {"COP": "copolymer", "CRO": "crosslink", "GRA": "graft", "MER": "mer", "MON": "monomer",
                          "MOD": "modification", "ANY": "any polymer"}


def _drawn_ends(mol: Chem.Mol) -> Chem.Mol:
    """The record with the polymer ends a drawing program wrote made attachment points (``*``); raise
    :class:`_RecordProblem` when they give no clean repeat unit.  An input-file audit: both forms below were
    screened as the small molecule inside (a thiophene unit as thiophene).

    * A polymer bracket (``M  STY ... SRU``, V3000 ``SRU`` S-group): the bonds crossing it are the ends.  An end
      already drawn as ``*`` or ``R#`` stays; a one-atom stub outside the bracket (the drawn end of a crossing bond)
      becomes ``*``.  No crossing bond, one, more than two, an end group of more than one atom outside the bracket,
      two brackets, or another polymer S-group type (copolymer, graft, ...) reject the record.
    * Attachment points (``M  APO`` in V2000, ``ATTCHPT=1``/``2``/``-1`` in V3000; RDKit's atom property
      ``molAttchpt``): exactly two, on two different atoms that each carry a hydrogen (a single bond's worth of free
      valence, which the bond to the next unit replaces), become ``[1*]`` and ``[2*]`` bonded there, as R1 and R2
      would; one, more, both on one atom, or one on an atom without a hydrogen reject the record with the
      attachment-point reason code of :mod:`screen.prepare.attachments`.

    The result is judged like any repeat unit by :func:`screen.prepare.validate` (bond, partner, conjugation).
    """
    groups = [g for g in Chem.GetMolSubstanceGroups(mol) if g.HasProp("TYPE")]
    other = sorted({g.GetProp("TYPE") for g in groups if g.GetProp("TYPE") in _OTHER_POLYMER_SGROUPS})
    if other:
        raise _RecordProblem("unparsable", (
            f"a polymer S-group of type {other[0]} ({_OTHER_POLYMER_SGROUPS[other[0]]}) is not one repeat unit with "
            f"two ends: draw one repeat unit in an SRU bracket, or {_MARK_ENDS}"))
    brackets = [g for g in groups if g.GetProp("TYPE") == "SRU"]
    if len(brackets) > 1:
        raise _RecordProblem("unparsable", (
            f"{len(brackets)} polymer brackets (SRU): one repeat unit is screened per record; draw one bracket, or "
            f"{_MARK_ENDS}"))
    if brackets:
        mol = _bracket_ends(mol, brackets[0])
    return _attachment_point_ends(mol)


def _atom_text(mol: Chem.Mol, index: int) -> str:
    """``atom 5 (S) of the atom block``: 1-based, as the record numbers its atoms."""
    return f"atom {index + 1} ({mol.GetAtomWithIdx(index).GetSymbol()}) of the atom block"


def _bracket_ends(mol: Chem.Mol, bracket) -> Chem.Mol:
    """The ends of an SRU bracket made ``*`` atoms (:func:`_drawn_ends`)."""
    inside = set(bracket.GetAtoms())
    crossing = []
    for bond in mol.GetBonds():
        a, b = bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()
        if (a in inside) != (b in inside):
            outer = b if a in inside else a
            if mol.GetAtomWithIdx(outer).GetAtomicNum() != 1:  # a drawn hydrogen of the unit is no end
                crossing.append((a if a in inside else b, outer))
    if not crossing:
        raise _RecordProblem("unparsable", (
            "a polymer bracket (SRU) that no bond crosses: the ends of the repeat unit are not drawn; draw each end "
            f"as a bond crossing the bracket to a * atom, or {_MARK_ENDS}"))
    if len(crossing) != 2:
        code = "attachment_single" if len(crossing) == 1 else "attachment_too_many"
        raise _RecordProblem(code, (
            f"a polymer bracket (SRU) crossed by {len(crossing)} bond{'s' if len(crossing) > 1 else ''}: a repeat "
            f"unit has exactly two ends (branched units and networks are not screened); {_MARK_ENDS}"))
    stubs = []
    for _, outer in crossing:
        atom = mol.GetAtomWithIdx(outer)
        if atom.GetAtomicNum() == 0:
            continue  # drawn as * or R#: already an attachment point
        heavy = [n.GetIdx() for n in atom.GetNeighbors() if n.GetAtomicNum() != 1]
        if len(heavy) > 1:
            raise _RecordProblem("unparsable", (
                f"a polymer bracket (SRU) with an end group outside it ({_atom_text(mol, outer)} and what hangs on "
                "it): the repeat unit is screened alone, and the end group would be lost without a word; end each "
                f"bond crossing the bracket in a * atom (or {_MARK_ENDS}) and leave the end groups out"))
        stubs.append(outer)
    if not stubs:
        return mol
    edit = Chem.RWMol(mol)
    hydrogens = []
    for index in stubs:
        atom = edit.GetAtomWithIdx(index)
        hydrogens += [n.GetIdx() for n in atom.GetNeighbors() if n.GetAtomicNum() == 1]
        atom.SetAtomicNum(0)
        atom.SetIsotope(0)
        atom.SetFormalCharge(0)
        atom.SetNumExplicitHs(0)
        atom.SetNoImplicit(True)
        atom.SetIsAromatic(False)
    for index in sorted(hydrogens, reverse=True):
        edit.RemoveAtom(index)
    return _settled(edit)


def _settled(edit: Chem.RWMol) -> Chem.Mol:
    """An edited record, sanitised when it can be (else with its valences computed leniently: validation says
    what is wrong)."""
    mol = edit.GetMol()
    try:
        Chem.SanitizeMol(mol)
    except Exception:  # noqa: BLE001 - the checks of validate() name the problem
        mol.UpdatePropertyCache(strict=False)
    return mol


def _attachment_point_ends(mol: Chem.Mol) -> Chem.Mol:
    """The attachment points of a record (``M  APO``, ``ATTCHPT=``) made ``[1*]``/``[2*]`` atoms
    (:func:`_drawn_ends`)."""
    points: list[tuple[int, int]] = []
    for atom in mol.GetAtoms():
        if atom.HasProp("molAttchpt"):
            value = atom.GetIntProp("molAttchpt")
            points += [(atom.GetIdx(), 1), (atom.GetIdx(), 2)] if value == -1 else [(atom.GetIdx(), value)]
    if not points:
        return mol
    where = ", ".join(_atom_text(mol, i) for i in dict.fromkeys(i for i, _ in points))
    if len(points) == 1:
        raise _RecordProblem("attachment_single", (
            f"one attachment point (M  APO / ATTCHPT on {where}): a polymer repeat unit needs two, a molecule "
            f"none; {_MARK_ENDS}, or remove the attachment point of a molecule"))
    if len(points) > 2:
        raise _RecordProblem("attachment_too_many", (
            f"{len(points)} attachment points (M  APO / ATTCHPT on {where}): a polymer repeat unit has exactly two; "
            f"{_MARK_ENDS}"))
    if points[0][0] == points[1][0]:
        raise _RecordProblem("attachment_same_atom", (
            f"both attachment points (M  APO / ATTCHPT) are on {where}: the two ends of a repeat unit must be "
            f"different atoms; {_MARK_ENDS} on the two backbone atoms that bond to the next units"))
    for index, label in points:
        atom = mol.GetAtomWithIdx(index)
        if atom.GetTotalNumHs(includeNeighbors=True) < 1:
            raise _RecordProblem("attachment_no_hydrogen", (
                f"attachment point {label} (M  APO / ATTCHPT) sits on {_atom_text(mol, index)}, which has no "
                "hydrogen to replace (no free valence for the bond to the next unit); "
                f"{_MARK_ENDS} on backbone atoms that carry a hydrogen in the monomer"))
    edit = Chem.RWMol(mol)
    hydrogens = []
    for index, label in points:
        atom = edit.GetAtomWithIdx(index)
        drawn = [n.GetIdx() for n in atom.GetNeighbors() if n.GetAtomicNum() == 1 and n.GetIdx() not in hydrogens]
        if drawn and not atom.GetNumImplicitHs():
            hydrogens.append(drawn[0])  # a hydrogen drawn as an atom: the attachment point replaces it
        elif atom.GetNumExplicitHs() and not atom.GetNumImplicitHs():
            atom.SetNumExplicitHs(atom.GetNumExplicitHs() - 1)
        atom.ClearProp("molAttchpt")
        end = edit.AddAtom(Chem.Atom(0))
        edit.GetAtomWithIdx(end).SetIsotope(label)
        edit.GetAtomWithIdx(end).SetNoImplicit(True)
        edit.AddBond(index, end, Chem.BondType.SINGLE)
    for index in sorted(hydrogens, reverse=True):
        edit.RemoveAtom(index)
    return _settled(edit)


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


def _sdf_title_id(title: str, data: dict[str, str]) -> str:
    """The id of an SD record: its title line, else (an empty title, as many exports write it) the first non-empty
    data item named ``ID`` or another id spelling (:data:`ID_ALIASES`, exact ``id`` first); '' when neither.

    Examples
    --------
    >>> _sdf_title_id("", {"Name": "x", "Compound ID": "C-7", "ID": "007"}), _sdf_title_id("T1", {"ID": "007"})
    ('007', 'T1')
    """
    if title:
        return title
    keys = sorted((k for k in data if _header_key(k) in ID_ALIASES and data[k].strip()),
                  key=lambda k: k.strip().lower() != "id")
    return data[keys[0]].strip() if keys else ""


def _shortlist_repeat_unit(data: dict[str, str]) -> str:
    """The repeat unit of a polymer record of a dascreen shortlist SDF (``representation`` = polymer, ``smiles`` with
    two ``*``), '' for any other record.

    The shortlist holds a polymer's longest computed oligomer, hydrogen-capped, whose connection table reads as one
    molecule: read back, it was screened as that oligomer (an all-polymer audit). Its ``smiles`` data item is the
    repeat unit the levels belong to.

    Examples
    --------
    >>> _shortlist_repeat_unit({"representation": "polymer", "smiles": "*c1ccc(*)s1"})
    '*c1ccc(*)s1'
    >>> _shortlist_repeat_unit({"smiles": "*c1ccc(*)s1"}), _shortlist_repeat_unit({"representation": "polymer"})
    ('', '')
    """
    smiles = data.get("smiles", "").strip()
    if data.get("representation", "").strip().lower() == "polymer" and smiles.count("*") == 2:
        return smiles
    return ""


def _molblock_heavy_atoms(lines: list[str]) -> int | None:
    """The heavy atoms of a connection table as its atom block lists them (V2000 or V3000), counted without RDKit:
    atoms of an element other than hydrogen (``H``, ``D``, ``T``); attachment points, R-groups and query atoms are
    not counted. ``None`` when a V2000 counts line cannot be read.

    Examples
    --------
    >>> block = ["t", "", "", "  3  2  0  0  0  0  0  0  0  0999 V2000"] + [
    ...     f"    0.0000    0.0000    0.0000 {e:<3} 0  0" for e in ("C", "H", "S")] + ["M  END"]
    >>> _molblock_heavy_atoms(block)
    2
    >>> v3000 = ["t", "", "", "  0  0  0  0  0  0  0  0  0  0999 V3000", "M  V30 BEGIN CTAB",
    ...          "M  V30 COUNTS 3 2 0 0 0", "M  V30 BEGIN ATOM", "M  V30 1 C 0 0 0 0", "M  V30 2 R# 0 0 0 0 -",
    ...          "M  V30 RGROUPS=(1 1)", "M  V30 3 Cl 0 0 0 0", "M  V30 END ATOM", "M  END"]
    >>> _molblock_heavy_atoms(v3000)
    2
    """
    if len(lines) < 4:
        return None
    counts = lines[3]
    if "V3000" not in counts:
        try:
            n_atoms = int(counts[0:3])
        except ValueError:
            return None
        return sum(_is_heavy(line[31:34].strip()) for line in lines[4:4 + n_atoms])
    heavy, inside, entry = 0, False, ""
    for line in lines[4:]:
        body = line[7:] if line.startswith("M  V30 ") else None
        if body is None:
            continue
        if body.strip() == "BEGIN ATOM":
            inside = True
            continue
        if body.strip() == "END ATOM":
            break
        if not inside:
            continue
        if entry:  # the continuation of an atom line
            entry += body
        else:
            entry = body
        if entry.rstrip().endswith("-"):
            entry = entry.rstrip()[:-1]
            continue
        fields = entry.split()
        heavy += len(fields) > 1 and _is_heavy(fields[1])
        entry = ""
    return heavy


def _is_heavy(symbol: str) -> bool:
    """Whether an atom block's atom type is an element other than hydrogen."""
    return symbol in KNOWN_ELEMENTS and symbol != "H"


def _sdf_too_many_atoms(lines: list[str], max_heavy_atoms: int) -> str:
    """Why a record's connection table (its lines up to ``M  END``) is too large to convert ('' when it is not): more
    heavy atoms in its atom block than :func:`screen.prepare.checks.full_check_limit` of ``max_heavy_atoms`` (two
    more with a polymer bracket, whose end stubs become attachment points); a record over ``max_heavy_atoms`` within
    that is converted and refused by the checks, with its canonical SMILES. Counted before RDKit reads the block:
    RDKit's SMILES writer crashed (segmentation fault) on a record of 25 000 atoms (a security audit)."""
    max_heavy_atoms_checked = full_check_limit(max_heavy_atoms)
    counts = lines[3] if len(lines) > 3 else ""
    if "V3000" in counts:
        found = next((ln.split() for ln in lines[4:40] if ln.startswith("M  V30 COUNTS")), [])
        announced = int(found[3]) if len(found) > 3 and found[3].isdigit() else None
    else:
        announced = int(counts[0:3]) if counts[0:3].strip().isdigit() else None
    if announced is not None and announced <= max_heavy_atoms_checked:
        return ""
    heavy = _molblock_heavy_atoms(lines)
    slack = 2 if any("SRU" in ln for ln in lines) else 0
    if heavy is None or heavy <= max_heavy_atoms_checked + slack:
        return ""
    return (f"its atom block holds {heavy} heavy atoms, more than the limit of {max_heavy_atoms} "
            "(PrepareOptions.max_heavy_atoms); not converted")


def _read_sdf(path: Path, text: str, long_lines: dict[int, _LongLine] | None = None,
              max_heavy_atoms: int | None = None) -> tuple[list[dict[str, str]], list[str], list[int], str]:
    """Parse an SD file; unreadable records become rows with a read error. Also each record's first file line, and
    the data item that may hold ids (``"data item 'Catalog'"``, for the console line about generated ids).

    A record is also rejected, before RDKit reads it, when its atom block holds far more heavy atoms than
    ``max_heavy_atoms`` (``too_many_atoms``, :func:`_sdf_too_many_atoms`; default ``PrepareOptions.max_heavy_atoms``),
    or when one of its lines is too long to read (``long_lines``, :func:`_read_file`).
    """
    limit = PrepareOptions().max_heavy_atoms if max_heavy_atoms is None else max_heavy_atoms
    records: list[dict[str, str]] = []
    passthrough: list[str] = []
    column_of: dict[str, str] = {}
    untitled: list[dict[str, str]] = []  # the data items of the records without any id
    for number, block in enumerate(_sdf_records(text), start=1):
        lines = block.split("\n")
        title = lines[0].strip() if lines else ""
        end = next((i for i, ln in enumerate(lines) if ln.startswith("M  END")), None)
        data = _sdf_data_items(lines[end + 1 :]) if end is not None else {}
        record = {"id": _sdf_title_id(title, data), "smiles_input": "", "name": "", "role": "", "read_error": ""}
        if not record["id"]:
            untitled.append(data)
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
        elif too_large := _sdf_too_many_atoms(lines[: end + 1], limit):
            record["read_error"] = f"too_many_atoms:SD record {number} (title {_snippet(title)}): {too_large}"
        else:
            smiles, detail, code = _read_molblock("\n".join(lines[: end + 1]) + "\n")
            if smiles is None and code:
                record["read_error"] = f"{code}:SDF record {number} (title {_snippet(title)}): {detail}"
            elif smiles is None:
                detail = detail or _molblock_problem(lines[: end + 1]) or (
                    "RDKit rejected the connection table"
                )
                record["read_error"] = (
                    f"unparsable:SDF record {number} (title {_snippet(title)}) could not be read: "
                    f"{detail}"
                )
            else:
                record["smiles_input"] = _shortlist_repeat_unit(data) or smiles
        records.append(record)
    starts = _sdf_starts(text)
    for line_number, long in (long_lines or {}).items():
        at = bisect_right(starts, line_number) - 1
        if 0 <= at < len(records):
            records[at]["read_error"] = (f"malformed_row:SD record {at + 1}: its {long.describe(line_number)}, "
                                         f"{long.advice(MAX_SDF_LINE_BYTES)}")
    for record in records:
        for col in passthrough:
            record.setdefault(col, "")
    hint = _id_like_column(untitled, [(k, k) for k in dict.fromkeys(k for d in untitled for k in d)])
    return records, passthrough, starts, (f"data item {hint!r}" if hint else "")


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


#: console lines already said by this process: (file, size, modification time, text). The dry run reads the
#: candidate file several times (its checks, the partners' role), and each read would say the same
_SAID: set[tuple[str, int, int, str]] = set()


def _say_once(path: Path, text: str) -> None:
    """Print ``text`` on stderr unless this process said it already of this file as it is now."""
    try:
        stat = path.stat()
        key = (str(path.resolve()), stat.st_size, stat.st_mtime_ns, text)
    except OSError:
        key = (str(path), -1, -1, text)
    if key in _SAID:
        return
    _SAID.add(key)
    print(text, file=sys.stderr)


def generated_ids_line(name: str, ids: list[str], hint: str = "") -> str:
    """The one console line about the ids given to rows without one (``hint``: a column that looks like ids,
    ``"column 'Name'"``, from the reader).

    :func:`read_candidates` says it on stderr, once per file and process: on the console when ``dascreen run`` checks
    the file, in the prepare job's log (``OUT/logs/<batch>/prepare.log``) in the workflow.  Before, only the log said
    it, and a file whose ids were under another column name was screened under ``line-N`` ids without a word on the
    console (an input-file audit).

    Examples
    --------
    >>> print(generated_ids_line("c.csv", ["line-2", "line-3"], "column 'Compound #'"))  # doctest: +ELLIPSIS
    dascreen: 2 rows of c.csv had no id; each got one ...: 'line-2', 'line-3' (...); column 'Compound #' holds a \
different value on every row: to use it as the id, name it 'id'
    """
    shown = ", ".join(repr(i) for i in ids[:5]) + (", ..." if len(ids) > 5 else "")
    rows = "1 row" if len(ids) == 1 else f"{len(ids)} rows"
    text = (f"dascreen: {rows} of {name} had no id; each got one named after its place in the file (line-N: file "
            f"line N; record-N: SD record N): {shown} (note 'missing_id' in levels.csv, 'generated_ids' in "
            "manifest.meta.json)")
    if hint.startswith("data item"):
        text += (f"; {hint} holds a different value on every record without a title: to use it as the id, put it "
                 "in the title line or name the data item 'ID'")
    elif hint:
        text += f"; {hint} holds a different value on every row: to use it as the id, name it 'id'"
    return text


def generated_id_names(frame: pd.DataFrame, rows: list[int]) -> list[str] | None:
    """:func:`generated_id` of each row of a frame read by :func:`read_candidates` (its file lines in
    ``frame.attrs``); ``None`` for a frame that does not record them (built in code: ``row-<row>``)."""
    found = frame.attrs.get(INPUT_LINES) or {}
    if not found.get("lines") and found.get("format") != "sdf":
        return None
    return [generated_id(found.get("format"), input_line(frame, row), row) for row in rows]


def read_candidates(path: str | os.PathLike[str], max_heavy_atoms: int | None = None) -> pd.DataFrame:
    """Read a candidate file (CSV, SMILES or SDF) into a frame of text columns.

    Parameters
    ----------
    path : str or os.PathLike
        Candidate file; the format is chosen by extension (``.csv``, ``.smi``/``.smiles``/
        ``.txt``, ``.sdf``/``.sd``, each optionally ``.gz``).
    max_heavy_atoms : int, optional
        An SD record whose atom block holds more heavy atoms than
        :func:`screen.prepare.checks.full_check_limit` of it is not converted (a ``too_many_atoms`` read error);
        default ``PrepareOptions.max_heavy_atoms``.

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
        with a column named twice, a SMILES file that is comma-separated text, a file in UTF-16 without a
        byte-order mark, a CSV header line longer than :data:`MAX_LINE_BYTES`, or an unrecoverable CSV syntax
        error.  (A longer line of a row does not stop the read: its row gets a read error.)
    FileNotFoundError
        If ``path`` does not exist.
    """
    path = Path(path)
    fmt, gz = _format_of(path)
    text, long_lines = _read_file(path, gz, fmt)
    if fmt == "csv":
        records, passthrough, lines, hint = _read_csv(path, text, long_lines=long_lines)
    elif fmt == "smi":
        records, passthrough, lines, hint = _read_smi(path, text, long_lines)
    else:
        records, passthrough, lines, hint = _read_sdf(path, text, long_lines, max_heavy_atoms)
    rows = list(range(len(records)))
    places = lines if len(lines) == len(records) else [None] * len(records)
    ids, notes = assign_missing_ids([r["id"] for r in records], rows,
                                    [generated_id(fmt, line, row) for row, line in zip(rows, places)])
    given = [ident for ident, note in zip(ids, notes) if note]
    if given:
        _say_once(path, generated_ids_line(path.name, given, hint))
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

