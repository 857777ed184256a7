"""File helpers shared by all stages: atomic writes, a crash-safe journal, sidecars.

An interrupted run must never leave a file that looks finished, and a killed
stage should redo only the molecules it had not finished. Two small tools give
that:

* :func:`atomic_path` — write to a temporary file in the target's directory,
  fsync, then :func:`os.replace` it into place (atomic on POSIX).
* :class:`Journal` — an append-only JSON-lines file with one record per
  finished molecule, flushed and fsynced per record. A torn last line (the
  process died mid-write) is ignored on reading.
"""

from __future__ import annotations

import codecs
import contextlib
import csv
import io
import json
import math
import os
import re
import sys
import tempfile
import time
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pandas as pd

from screen.errors import InputError

__all__ = ["cell_text", "count_text", "field_count_lines", "csv_header", "repeated_column", "repeated_in_header",
           "atomic_path", "csv_text", "write_csv", "write_json", "read_json", "read_csv_checked", "separator_problem",
           "Journal", "Progress"]


@contextlib.contextmanager
def atomic_path(target: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path next to ``target``; move it into place on success.

    Parameters
    ----------
    target : path-like
        Final file name. Its directory is created if missing.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> with atomic_path(d / "x.txt") as tmp:
    ...     _ = tmp.write_text("done")
    >>> (d / "x.txt").read_text()
    'done'
    """
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
    os.close(fd)
    tmp = Path(name)
    try:
        yield tmp
        with open(tmp, "rb") as fh:
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give the usual permissions
        os.replace(tmp, target)
    finally:
        if tmp.exists():
            tmp.unlink()


def cell_text(value) -> str:
    """A table cell as text: ``''`` for None, NaN or pandas NA, ``str(value)`` otherwise.

    Examples
    --------
    >>> cell_text(float("nan")), cell_text(None), cell_text(3)
    ('', '', '3')
    """
    if value is None:
        return ""
    if isinstance(value, str):
        return value
    try:
        if pd.isna(value):
            return ""
    except (TypeError, ValueError):
        pass
    return str(value)


def text_cells(series: pd.Series) -> pd.Series:
    """A column as text: ``''`` for None, NaN and pandas NA (``astype(str)`` alone writes 'nan', 'None', '<NA>');
    use it as ``frame[col].pipe(text_cells)``.

    Examples
    --------
    >>> text_cells(pd.Series(["a", None, float("nan"), pd.NA, 3])).tolist()
    ['a', '', '', '', '3']
    """
    return series.astype(object).fillna("").astype(str)


#: longest data line of an SD record that a reader must accept (CTfile formats, V2000: 200 characters)
SD_LINE_MAX = 200


def sd_text(value, limit: int | None = SD_LINE_MAX) -> str:
    r"""SD title or property text: one line (a CR or LF becomes a space), no record separator ``$$$$``, at most
    ``limit`` characters (the last three ``...`` when cut; None: not cut, for a SMILES that is read back).

    Examples
    --------
    >>> sd_text("a\r\nb$$$$"), sd_text(float("nan")), len(sd_text("x" * 5000)), sd_text("x" * 5000)[-4:]
    ('a  b$ $ $ $', '', 200, 'x...')
    """
    text = " ".join(cell_text(value).replace("\r", "\n").split("\n")).replace("$$$$", "$ $ $ $")
    return text if limit is None or len(text) <= limit else text[:limit - 3] + "..."


def count_text(value) -> str:
    """A count cell as text: a whole number without ``.0`` (a CSV read gives ``4.0`` for 4 in a column with empty
    cells), anything else as :func:`cell_text`.

    Examples
    --------
    >>> count_text(4.0), count_text(float("nan")), count_text("3"), count_text(2.5)
    ('4', '', '3', '2.5')
    """
    if isinstance(value, (float, np.floating)) and np.isfinite(value) and float(value).is_integer():
        return str(int(value))
    return cell_text(value)


def cell_number(value) -> float:
    """A table cell or setting as a float: NaN for anything that is not a finite real number (bools too).

    Examples
    --------
    >>> cell_number("1.5"), cell_number(True), cell_number("x"), cell_number(float("inf"))
    (1.5, nan, nan, nan)
    """
    if isinstance(value, bool) or value is None:
        return math.nan
    try:
        out = float(value)
    except (TypeError, ValueError):
        return math.nan
    return out if math.isfinite(out) else math.nan


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _csv_field(value: str, lineterminator: str) -> str:
    """One text field as :mod:`csv` writes it in a row (quoted when it holds a delimiter, quote or line end), and
    quoted too when it holds a carriage return or line feed that ``lineterminator`` lacks.

    Python's :mod:`csv` (3.11) quotes a field for the characters of the line terminator only, so with ``"\\n"`` a
    lone carriage return was written bare; pandas, a spreadsheet and :mod:`csv` itself read it back as a line
    break, which split the row in two (a candidate named ``"ok\\r=1+1"`` lost a run's whole batch at the levels
    stage, and put a formula at the start of a new row of ``ranking.safe.csv``: a security audit).

    Examples
    --------
    >>> print(_csv_field('a,b"c', "\\n"), _csv_field("plain", "\\n"))
    "a,b""c" plain
    >>> _csv_field("ok\\r=1+1", "\\n"), _csv_field("a\\nb", "\\r")
    ('"ok\\r=1+1"', '"a\\nb"')
    """
    buf = io.StringIO()
    csv.writer(buf, lineterminator=lineterminator).writerow([value, ""])  # two fields: no lone-field rule
    out = buf.getvalue()[:-1 - len(lineterminator)]
    if not out.startswith('"') and ("\r" in value or "\n" in value):
        out = '"' + value + '"'  # unquoted, so it holds no quote character to double
    return out


def _csv_texts(values: list[str], lineterminator: str) -> list[str]:
    """Text fields as :mod:`csv` writes them: only those holding a special character are passed to it.

    The special characters (``,`` ``"`` CR LF NUL and those of the line
    terminator) are a superset of what makes :mod:`csv` quote a field, and a
    field without any is written as it is; one search over the joined column
    rules them out in the usual case; each distinct field that needs it is
    quoted once (:func:`_csv_field`: a field holding CR or LF always is).

    Examples
    --------
    >>> _csv_texts(["a", "b\\rc", "d,e"], "\\n")
    ['a', '"b\\rc"', '"d,e"']
    """
    special = re.compile("[" + re.escape(',"\r\n\0' + lineterminator) + "]")
    if not special.search("".join(values)):
        return values
    quoted = {v: _csv_field(v, lineterminator) for v in set(values) if special.search(v)}
    return [quoted.get(v, v) for v in values]


def _csv_column(series: pd.Series, lineterminator: str) -> list[str] | None:
    """Fields of one column as ``DataFrame.to_csv`` writes them; None for a dtype left to pandas.

    Float columns are ``values.astype(str)`` (what pandas does), integers and
    booleans ``str`` of the Python value, text columns (pandas strings, or
    objects that are all ``str`` or missing) the text itself, quoted where
    :mod:`csv` quotes it (:func:`_csv_texts`); a missing cell is ``''``.  Every
    other dtype (dates, categories, nullable numbers, mixed objects) gives None.
    """
    dtype = series.dtype
    if isinstance(dtype, np.dtype) and dtype.kind == "f":
        values = series.to_numpy()
        out = values.astype(str)
        out[np.isnan(values)] = ""
        return out.tolist()
    if isinstance(dtype, np.dtype) and dtype.kind in "iub":
        return list(map(str, series.to_numpy().tolist()))
    if isinstance(dtype, pd.StringDtype) or dtype == object:
        values = series.to_numpy(dtype=object, copy=True)
        values[pd.isna(values)] = ""
        out = values.tolist()
        return _csv_texts(out, lineterminator) if all(type(v) is str for v in out) else None
    return None


def _pandas_csv(frame: pd.DataFrame, lineterminator: str, **options) -> str:
    """``frame.to_csv(index=False, lineterminator=lineterminator, **options)``, with a text cell that holds a
    carriage return or line feed quoted whatever the line terminator (:func:`_csv_field`).

    pandas hands the cells to :mod:`csv`, which quotes a field for the characters of the line terminator only: with
    ``"\\n"`` a lone CR was written bare and read back as a line break.  When the text holds such a character
    outside the terminator, the frame is written again with ``"\\r\\n"`` (:mod:`csv` then quotes every field
    holding CR or LF), read back into fields by :mod:`csv` and joined again with ``lineterminator``; the fields are
    pandas' own, so numbers, dates and missing values are written as pandas writes them.

    Examples
    --------
    >>> _pandas_csv(pd.DataFrame({"id": ["ok\\r=1", None], "d": pd.to_datetime(["2024-01-02", None])}), "\\n")
    'id,d\\n"ok\\r=1",2024-01-02\\n,\\n'
    >>> _pandas_csv(pd.DataFrame({"x": [1.23456, float("nan")]}), "\\n", float_format="%.3g")
    'x\\n1.23\\n""\\n'
    """
    text = frame.to_csv(index=False, lineterminator=lineterminator, **options)
    loose = {"\r", "\n"} - set(lineterminator)
    if not any(c in text for c in loose):
        return text
    rows = csv.reader(io.StringIO(frame.to_csv(index=False, lineterminator="\r\n", **options), newline=""))
    lines = []
    for row in rows:
        # a lone empty field is written '""' (a bare empty line would be skipped on reading), as csv writes it
        lines.append('""' if row == [""] else ",".join(_csv_texts(row, lineterminator)))
    return "".join(line + lineterminator for line in lines)


def csv_text(frame: pd.DataFrame, lineterminator: str = os.linesep, float_format: str | None = None) -> str:
    """``frame.to_csv(index=False, lineterminator=lineterminator)``, the same text made column by column, except
    that a text field holding a carriage return or line feed is always quoted.

    pandas hands every cell to :mod:`csv`; here each column is converted
    once (:func:`_csv_column`), only the text fields that need quoting go
    through :mod:`csv`, and the rows are joined with ``","``.  A frame with a
    column of another dtype, a column label that is not a string, or fewer
    than two columns is written by pandas itself (:func:`_pandas_csv`), as is
    one with a ``float_format``.

    :mod:`csv` (and so pandas) quotes a field only for a delimiter, a quote or a character of the line
    terminator: with ``"\\n"`` a lone carriage return in an id or name was written bare, and every later
    reading (pandas, :mod:`csv`, a spreadsheet) took it for a line break, splitting the row (a security audit).
    Every CSV file the project writes goes through here (or :func:`write_csv`), so each quotes such a field; the
    text of ordinary tables is pandas' own, byte for byte.

    Parameters
    ----------
    frame : pandas.DataFrame
        The table.
    lineterminator : str
        Line end (pandas' default is ``os.linesep``).
    float_format : str, optional
        ``DataFrame.to_csv``'s ``float_format`` (``"%.4g"``).

    Returns
    -------
    str
        The CSV text, header first.

    Examples
    --------
    >>> t = pd.DataFrame({"id": ["a,b", None], "x": [1.5, float("nan")], "ok": [True, False]})
    >>> csv_text(t, "\\n")
    'id,x,ok\\n"a,b",1.5,True\\n,,False\\n'
    >>> csv_text(t, "\\n") == t.to_csv(index=False, lineterminator="\\n")
    True
    >>> cr = pd.DataFrame({"id": ["ok\\r=1+1", "b"], "x": [1.0, 2.0]})
    >>> csv_text(cr, "\\n")
    'id,x\\n"ok\\r=1+1",1.0\\nb,2.0\\n'
    >>> pd.read_csv(io.StringIO(csv_text(cr, "\\n"), newline=""))["id"].tolist()
    ['ok\\r=1+1', 'b']
    """
    if float_format is not None:
        return _pandas_csv(frame, lineterminator, float_format=float_format)
    names = list(frame.columns)
    columns = [None]
    if len(names) > 1 and all(type(c) is str for c in names):
        columns = [_csv_column(frame.iloc[:, i], lineterminator) for i in range(len(names))]
    if any(c is None for c in columns):
        return _pandas_csv(frame, lineterminator)
    lines = [",".join(_csv_texts(names, lineterminator))]
    lines += map(",".join, zip(*columns))
    return lineterminator.join(lines) + lineterminator


def write_csv(frame: pd.DataFrame, target: str | os.PathLike, lineterminator: str = os.linesep,
              float_format: str | None = None) -> str:
    """Write ``frame`` as CSV (no index, UTF-8, line ends ``os.linesep``) atomically; return the text written.

    The text is ``frame.to_csv(index=False)`` (:func:`csv_text`: a field holding CR or LF quoted), line ends
    ``os.linesep`` as ``DataFrame.to_csv(path)`` writes them unless ``lineterminator`` is given;
    ``float_format`` as ``DataFrame.to_csv``'s.
    """
    text = csv_text(frame, lineterminator, float_format)
    with atomic_path(target) as tmp:
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
    return text


def write_json(obj, target: str | os.PathLike) -> None:
    """Write ``obj`` as indented, key-sorted JSON atomically."""
    with atomic_path(target) as tmp:
        tmp.write_text(json.dumps(obj, indent=2, sort_keys=True, default=str) + "\n", encoding="utf-8")


def read_json(path: str | os.PathLike):
    """Read a JSON file."""
    return json.loads(Path(path).read_text(encoding="utf-8"))


_SEPARATORS = ((";", "';'"), ("\t", "tabs"))


def separator_problem(header) -> str | None:
    """Why a CSV file is not comma-separated, from its header (None when it is, or cannot tell).

    A spreadsheet in a European locale saves "CSV" with ``;`` between fields (and
    decimal commas); a copy from a table may hold tabs. Read with commas, such a
    header is one field, and every column looks missing.  A header with more ``;``
    (or tabs) than commas is taken as separated by them: a column name may hold a
    comma (``ID;SMILES;HOMO (eV, CV)`` was read as the columns ``'ID;SMILES;HOMO (eV'``
    and ``'CV)'``, an input-file audit).  A first line ``sep=,`` (a spreadsheet's note
    of the separator, read as the columns ``sep=`` and an empty one) is named too.

    Parameters
    ----------
    header : str or sequence of str
        The header line of the file, or the column names it was read into with commas.

    Examples
    --------
    >>> separator_problem("id;e_ox_v_nhe;e00_ev")
    "the file seems to be separated by ';' (header 'id;e_ox_v_nhe;e00_ev'), not by commas: save it as comma-separated CSV, with a point as the decimal mark (1.1, not 1,1)"
    >>> separator_problem(["id\\tsmiles"])[:42]
    'the file seems to be separated by tabs (he'
    >>> separator_problem(["ID;SMILES;HOMO (eV", "CV)"])[:41]
    "the file seems to be separated by ';' (he"
    >>> separator_problem("id,smiles;x") is None, separator_problem(["id", "a;b"]) is None
    (True, True)
    >>> separator_problem(["sep=", "Unnamed: 1"])[:57]
    "its first line 'sep=,' is a spreadsheet's note of the sep"
    """
    if not isinstance(header, str):
        names = [str(c) for c in header]
        if names and names[0].strip().lower() == "sep=":  # "sep=," read with commas: 'sep=' and an empty column
            return ("its first line 'sep=,' is a spreadsheet's note of the separator, not the header: delete that "
                    "line (the header must be the first line)")
        header = ",".join(names)
    header = header.strip("\r\n")
    for sep, name in _SEPARATORS:
        if header.count(sep) > header.count(","):
            shown = header if len(header) <= 80 else header[:77] + "..."
            return (f"the file seems to be separated by {name} (header {shown!r}), not by commas: save it as "
                    "comma-separated CSV, with a point as the decimal mark (1.1, not 1,1)")
    return None


def field_count_lines(path, longer_only: bool = False, first_only: bool = False) -> tuple[list[str], list]:
    """The header of a CSV file and ``(line, fields)`` of its lines whose field count differs from the header's
    (``longer_only``: only lines with more fields; ``first_only``: stop at the first); lines counted as in the
    file, header = line 1.

    Examples
    --------
    >>> import tempfile
    >>> f = Path(tempfile.mkdtemp()) / "t.csv"; _ = f.write_text("a,b\\n1,2,3\\n4\\n")
    >>> field_count_lines(f), field_count_lines(f, longer_only=True)
    ((['a', 'b'], [(2, 3), (3, 1)]), (['a', 'b'], [(2, 3)]))
    """
    import csv

    lines = []
    with open(path, newline="", encoding="utf-8-sig", errors="replace") as handle:  # a BOM is no part of a name
        rows = csv.reader(handle)
        header = next(rows, None) or []
        for fields in rows if header else ():
            if fields and (len(fields) > len(header) if longer_only else len(fields) != len(header)):
                lines.append((rows.line_num, len(fields)))
                if first_only:
                    break
    return header, lines


def _field_count_problem(path: Path) -> str | None:
    """The first line whose field count differs from the header's, in words (None when all agree)."""
    header, lines = field_count_lines(path, first_only=True)
    return f"line {lines[0][0]} has {lines[0][1]} fields but the header has {len(header)}" if lines else None


def repeated_column(path: str | os.PathLike) -> str | None:
    """``"column 'x' appears twice (columns 2 and 6); keep one"`` when the header of a CSV file names a column twice
    (None when every name is unique, or the file cannot be read: its reader says why).

    pandas renames the second ``x`` to ``x.1``, so the first one was used without a word and the other value was
    never mentioned (a careless user's audit); the candidates reader refuses such a header in the same words
    (:func:`repeated_in_header`). Names are compared without surrounding blanks; blank
    names (empty cells after the last column of a spreadsheet export) are not compared.

    Examples
    --------
    >>> import tempfile
    >>> f = Path(tempfile.mkdtemp()) / "l.csv"; _ = f.write_text("id,homo_ev,lumo_ev,,homo_ev\\nD1,-5.2,-3,,-5\\n")
    >>> repeated_column(f)
    "column 'homo_ev' appears twice (columns 2 and 5); keep one"
    >>> _ = f.write_text("id,homo_ev,,\\n"); repeated_column(f) is None
    True
    """
    header = csv_header(path)
    return None if header is None else repeated_in_header(header)


def csv_header(path: str | os.PathLike) -> list[str] | None:
    """The column names of a CSV file's first line, blanks stripped (None when it cannot be read).

    Examples
    --------
    >>> import tempfile
    >>> f = Path(tempfile.mkdtemp()) / "h.csv"; _ = f.write_text("id, e00_ev\\nA,2.1\\n")
    >>> csv_header(f), csv_header(f.with_name("none.csv"))
    (['id', 'e00_ev'], None)
    """
    try:
        with open(path, encoding="utf-8-sig", errors="replace", newline="") as handle:
            return [name.strip() for name in next(csv.reader(handle), [])]
    except (OSError, csv.Error):
        return None


def repeated_in_header(header, case_blind=frozenset()) -> str | None:
    """The :func:`repeated_column` message for a header given as a list of names (None when unique).

    ``case_blind``: names compared ignoring case (the candidates reader's interpreted columns: ``SMILES`` and
    ``smiles`` are one column); any other is compared by its exact name, blank names not at all.

    Examples
    --------
    >>> repeated_in_header(["id", "smiles", "note", "Note", "SMILES"], case_blind={"smiles"})
    "column 'smiles' appears twice (columns 2 and 5); keep one"
    """
    first: dict[str, int] = {}
    for i, name in enumerate(header, start=1):
        name = str(name).strip()
        if not name:
            continue
        same = name.lower() if name.lower() in case_blind else name
        if same in first:
            return f"column {same!r} appears twice (columns {first[same]} and {i}); keep one"
        first[same] = i
    return None


def looks_utf16(raw: bytes) -> str:
    r"""``"le"`` or ``"be"`` when ``raw`` (without a byte-order mark) looks like UTF-16 text: a NUL byte beside
    nearly every character of its start (ASCII text in UTF-16); ``""`` otherwise.

    Examples
    --------
    >>> looks_utf16("id,smiles".encode("utf-16-le")), looks_utf16("id,smiles".encode("utf-16-be"))
    ('le', 'be')
    >>> looks_utf16(b"id,smiles\nX\x001,C\n"), looks_utf16(b"")
    ('', '')
    """
    sample = raw[:4096]
    if len(sample) < 4 or b"\x00" not in sample:
        return ""
    half = len(sample) // 2
    odd, even = sample[1::2].count(0), sample[0::2].count(0)
    if odd >= 0.4 * half and even <= 0.1 * half:
        return "le"
    if even >= 0.4 * half and odd <= 0.1 * half:
        return "be"
    return ""


def utf16_error(path: Path, raw: bytes, fmt: str | None = None) -> InputError:
    """The error of a UTF-16 file that is not read as such: with a byte-order mark (FF FE or FE FF: a spreadsheet's
    "Unicode text") an SD file, or UTF-16 that does not decode; without one (a NUL byte beside every ASCII character,
    :func:`looks_utf16`) any file. Before, the first got "not UTF-8 ... from Latin-1: `iconv -f latin1`" with an id
    of NUL characters (an input-file audit), and a CSV without the mark "no 'smiles' column; columns found:
    ['i\\x00d\\x00', ...]" (a security audit).

    Examples
    --------
    >>> print(utf16_error(Path("c.sdf"), codecs.BOM_UTF16_LE + "x".encode("utf-16-le"), "sdf"))  # doctest: +ELLIPSIS
    c.sdf: UTF-16 text (byte-order mark FF FE), not UTF-8: convert it with `iconv -f utf-16 -t utf-8 c.sdf > ...
    >>> str(utf16_error(Path("c.sdf.gz"), codecs.BOM_UTF16_LE, "sdf")).split("`")[1]
    'gunzip -c c.sdf.gz | iconv -f utf-16 -t utf-8 > c-utf8.sdf'
    >>> print(utf16_error(Path("c.csv"), "id,smiles".encode("utf-16-le"), "csv"))  # doctest: +NORMALIZE_WHITESPACE
    c.csv: looks like UTF-16 text without a byte-order mark (a NUL byte after every character), not UTF-8: convert
    it with `iconv -f utf-16le -t utf-8 c.csv > c-utf8.csv` or save it from the spreadsheet as "CSV UTF-8"
    """
    sheet = ' or save it from the spreadsheet as "CSV UTF-8"' if fmt in (None, "csv", "smi") else ""
    if raw.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        mark = "FF FE" if raw.startswith(codecs.BOM_UTF16_LE) else "FE FF"
        encoding = "utf-16"  # the mark gives the byte order
        try:
            raw.decode("utf-16")
            broken = ""
        except UnicodeDecodeError:
            broken = " (and it does not decode as UTF-16 either: check the file)"
        what = f"UTF-16 text (byte-order mark {mark}), not UTF-8{broken}"
    else:
        order = looks_utf16(raw) or "le"
        encoding = f"utf-16{order}"
        what = (f"looks like UTF-16 text without a byte-order mark (a NUL byte {'after' if order == 'le' else 'before'}"
                " every character), not UTF-8")
    if path.name.lower().endswith(".gz"):  # iconv reads text, not gzip data: decompress first
        plain = Path(path.name[:-3])
        command = f"gunzip -c {path.name} | iconv -f {encoding} -t utf-8 > {plain.stem}-utf8{plain.suffix}"
    else:
        command = f"iconv -f {encoding} -t utf-8 {path.name} > {path.stem}-utf8{path.suffix}"
    return InputError(f"{path}: {what}: convert it with `{command}`{sheet}")


def read_csv_checked(path: str | os.PathLike, required, *, what: str = "table", error=InputError,
                     **read_kwargs) -> pd.DataFrame:
    """Read a CSV file and check that it has the ``required`` columns: the one home of that check.

    Parameters
    ----------
    path : path-like
        The CSV file.
    required : sequence of str
        Columns that must be present (others are kept).
    what : str
        What the file is, for the message (``"a levels file"``, ``"the partner library"``).
    error : type
        Exception class raised (a :class:`screen.errors.InputError` subclass).
    **read_kwargs
        Passed to :func:`pandas.read_csv` (``dtype``, ``keep_default_na``, ...).

    Raises
    ------
    InputError
        (or ``error``) The file is missing or unreadable as CSV, names a column twice (:func:`repeated_column`)
        or lacks a column; the message names the file, the missing and the found columns.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> f = pathlib.Path(tempfile.mkdtemp()) / "t.csv"
    >>> _ = f.write_text("id,x\\n1,2\\n")
    >>> list(read_csv_checked(f, ["id"]).columns)
    ['id', 'x']
    >>> read_csv_checked(f, ["id", "y"], what="a levels file")  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    screen.errors.InputError: ...t.csv: a levels file needs columns ['id', 'y']; missing ['y']; found ['id', 'x']
    """
    path = Path(path)
    if not path.is_file():
        raise error(f"{what} {path} is missing")
    with open(path, "rb") as fh:
        head = fh.read(4096)
    if looks_utf16(head):  # UTF-16 without a byte-order mark reads as UTF-8 text with NULs: "found ['i\x00d\x00']"
        raise error(str(utf16_error(path, head)))
    repeated = repeated_column(path)
    if repeated:
        raise error(f"{path}: {repeated}")
    try:
        frame = pd.read_csv(path, **read_kwargs)
    except UnicodeDecodeError as exc:
        if head.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):  # a spreadsheet's "Unicode text"
            raise error(str(utf16_error(path, head))) from None
        raise error(f"{path}: {what} is not a readable CSV file: {exc}") from None
    except (pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise error(f"{path}: {what} is not a readable CSV file: {exc}") from None
    if "index_col" not in read_kwargs and not isinstance(frame.index, pd.RangeIndex):
        # every data row has more fields than the header: pandas took the first column as the index and shifted
        # every value one column to the right (a decimal comma, an unquoted comma), which later checks misread;
        # a file separated by ';' or tabs looks the same and gets its own message
        problem = separator_problem(frame.columns)
        if problem:
            raise error(f"{path}: {problem}")
        raise error(f"{path}: {_field_count_problem(path) or 'the data rows have more fields than the header'}; "
                    "a decimal comma or an unquoted comma inside a field? Write decimals with a point and quote "
                    "fields that hold commas")
    missing = [c for c in required if c not in frame.columns]
    problem = separator_problem(frame.columns) if missing else None
    if problem:
        raise error(f"{path}: {problem}")
    if missing:
        raise error(f"{path}: {what} needs columns {list(required)}; missing {missing}; found {list(frame.columns)}")
    return frame


class Journal:
    """Append-only record of finished work units, safe against SIGKILL.

    Parameters
    ----------
    path : path-like
        The ``.jsonl`` file. Created on first :meth:`append`.
    tag : str, optional
        What the records were computed with (a stage protocol id): written with each line, and
        :meth:`load` skips lines with another or no tag, so a job killed under one protocol is never
        resumed under another. None: lines are neither tagged nor checked.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> j = Journal(pathlib.Path(tempfile.mkdtemp()) / "j.jsonl")
    >>> j.append({"key": "m1", "value": 1.0})
    >>> j.load()
    {'m1': {'key': 'm1', 'value': 1.0}}
    >>> Journal(j.path, tag="p2").load()  # untagged (or another protocol's) lines are not resumed
    {}
    >>> Journal(j.path, tag="p2").append({"key": "m1", "value": 2.0})
    >>> Journal(j.path, tag="p2").load(), Journal(j.path).load()["m1"]["value"]
    ({'m1': {'key': 'm1', 'value': 2.0}}, 2.0)
    """

    #: field of a journal line holding its tag (removed on :meth:`load`)
    TAG_FIELD = "_journal_tag"
    #: field of a journal line whose record came from the results store (a record with a true ``from_store``
    #: attribute, :class:`screen.store.StoredRecord`); removed on :meth:`load`, which lists such keys in
    #: :attr:`from_store`: the progress display leaves them out of the rate
    STORE_FIELD = "_journal_from_store"

    def __init__(self, path: str | os.PathLike, tag: str | None = None):
        self.path = Path(path)
        self.tag = tag
        #: keys whose last record :meth:`load` read came from the results store
        self.from_store: set[str] = set()

    def load(self) -> dict[str, dict]:
        """Records by ``key``; the last record of a key wins, torn lines are skipped."""
        done: dict[str, dict] = {}
        self.from_store = set()
        if not self.path.exists():
            return done
        with open(self.path, encoding="utf-8") as fh:
            for line in fh:
                if not line.endswith("\n"):
                    break  # torn final line from an interrupted write
                try:
                    rec = json.loads(line)
                except json.JSONDecodeError:
                    continue
                if isinstance(rec, dict) and "key" in rec:
                    tag = rec.pop(self.TAG_FIELD, None)
                    stored = rec.pop(self.STORE_FIELD, False)
                    if self.tag is None or tag == self.tag:
                        done[rec["key"]] = rec
                        (self.from_store.add if stored else self.from_store.discard)(rec["key"])
        return done

    def append(self, record: dict) -> None:
        """Append one record durably (flush + fsync)."""
        self.path.parent.mkdir(parents=True, exist_ok=True)
        if getattr(record, "from_store", False):  # the line says so; the record read back is the same
            record = {**record, self.STORE_FIELD: True}
        if self.tag is not None:
            record = {**record, self.TAG_FIELD: self.tag}
        line = json.dumps(record, sort_keys=True, default=_json_default) + "\n"
        with open(self.path, "a", encoding="utf-8") as fh:
            fh.write(line)
            fh.flush()
            os.fsync(fh.fileno())

    def remove(self) -> None:
        """Delete the journal once its content is in a finished output."""
        with contextlib.suppress(FileNotFoundError):
            self.path.unlink()


def _json_default(obj):
    try:
        import numpy as np

        if isinstance(obj, np.generic):
            return obj.item()
        if isinstance(obj, np.ndarray):
            return obj.tolist()
    except ImportError:  # pragma: no cover
        pass
    raise TypeError(f"not JSON serialisable: {type(obj).__name__}")


class Progress:
    """Progress of a long per-molecule loop: count, rate and ETA, as a bar or as plain lines.

    On a terminal (``bar=True``, the default when ``stream`` is a TTY) one line
    is redrawn in place with a bar, cut to the terminal's width (``COLUMNS``, else
    the terminal's own; a longer line wrapped and left a stale row per redraw on
    a narrow terminal) and without the erase-line control sequence on
    ``TERM=dumb`` (spaces overwrite the rest instead); otherwise a plain line is
    printed at most every ``every_s`` seconds and when all items are done (once:
    the same line is not repeated within ``every_s``; a job's log under
    Snakemake, a redirected ``dascreen``).  The rate counts only the items done
    since the first report (or :meth:`rebase`), so work finished earlier (a
    resumed run) does not inflate it, nor do items served by the results store
    (``stored`` of :meth:`report`); once all items are done the rate and ETA stay
    as they were (the run's levels and ranking follow), instead of growing with
    the time that passes.  When no molecule has finished for ``stall_s`` seconds,
    the line says for how long (one 200-atom oligomer on xTB geometries can take
    most of an hour), so a busy run is not mistaken for a hung one.

    Examples
    --------
    >>> import io
    >>> buf = io.StringIO()
    >>> p = Progress("electronic shard-000", stream=buf, every_s=0)
    >>> p.report(1, 2, "m1"); p.report(2, 2, "m2")
    >>> buf.getvalue().splitlines()[-1].startswith("electronic shard-000: 2/2 molecules (100%)")
    True
    >>> bar = Progress("run", stream=io.StringIO(), bar=True)
    >>> bar.line(5, 20).startswith("run [#####") and "5/20 molecules" in bar.line(5, 20)
    True
    >>> slow = Progress("run", stream=io.StringIO(), stall_s=0)
    >>> slow.report(3, 10); slow.line(3, 10).endswith("s, still computing)")
    True
    """

    #: narrowest bar a narrow terminal gets before the text is cut [characters]
    MIN_BAR = 5

    def __init__(self, label: str, stream=None, every_s: float = 10.0, bar: bool | None = None,
                 width: int = 24, stall_s: float = 300.0):
        self.label = label
        self.stream = stream or sys.stdout
        self.every_s = every_s
        self.bar = _isatty(self.stream) if bar is None else bar
        self.width = width
        self.start = time.monotonic()
        self.base = 0
        self._last = -float("inf")
        self._drawn = False
        self.stall_s = stall_s
        self._seen: int | None = None     # the count at the last report
        self._seen_t = self.start         # when that count was first reported
        self._stored = self._stored_base = 0  # items served by the results store (now / at the rebase)
        self._ended: float | None = None  # when every item was first reported done (the rate stops there)
        self._printed: tuple | None = None  # the last plain line's content
        self._drawn_len = 0               # characters of the bar line drawn last

    def rebase(self, done: int, stored: int = 0) -> None:
        """Count the rate from now and from ``done`` items on (items done before are not this run's work);
        ``stored``: how many of them the results store served (:meth:`report` counts later ones from there)."""
        self.start, self.base = time.monotonic(), done
        self._stored = self._stored_base = stored
        self._ended = None

    def _rate_eta(self, done: int, total: int) -> tuple[float, float]:
        finished = bool(total) and done >= total and self._ended is not None
        elapsed = (self._ended if finished else time.monotonic()) - self.start
        new = done - self.base - max(0, self._stored - self._stored_base)  # computed, not served by the store
        per_item = elapsed / new if new > 0 else float("nan")
        return per_item, per_item * (total - done)

    def line(self, done: int, total: int, key: str = "", note: str = "", bar_width: int | None = None) -> str:
        """The progress text of ``done`` of ``total`` (``bar_width``: the bar's characters, default ``width``)."""
        per_item, eta = self._rate_eta(done, total)
        pct = 100.0 * done / total if total else 100.0
        rate = "rate unknown" if per_item != per_item else f"{per_item:.2f} s/molecule"
        eta_text = "ETA unknown" if eta != eta else f"ETA {_duration(eta)}"
        stalled = time.monotonic() - self._seen_t
        if self._seen == done and done < total and stalled >= self.stall_s:
            eta_text += f" (no molecule finished for {_duration(stalled)}, still computing)"
        if self.bar:
            width = self.width if bar_width is None else bar_width
            filled = int(round(width * done / total)) if total else width
            return (f"{self.label} [{'#' * filled}{'.' * (width - filled)}] {done}/{total} molecules "
                    f"({pct:.0f}%), {rate}, {eta_text}{'  ' + note if note else ''}")
        return (f"{self.label}: {done}/{total} molecules ({pct:.0f}%), {rate}, {eta_text}"
                f"{' (last ' + key + ')' if key else ''}{'; ' + note if note else ''}")

    def report(self, done: int, total: int, key: str = "", note: str = "", stored: int | None = None) -> None:
        """Show ``done / total`` (a bar redraw, or a line when ``every_s`` has passed or all is done);
        ``stored``: how many of the ``done`` items the results store served so far (left out of the rate)."""
        now = time.monotonic()
        if done != self._seen:
            self._seen, self._seen_t = done, now
        if stored is not None:
            self._stored = stored
        if total and done >= total:
            self._ended = now if self._ended is None else self._ended
        else:
            self._ended = None
        if self.bar:
            line = self.line(done, total, key, note)
            room = self._room()
            if len(line) > room:  # a narrower bar first, then the text cut to the terminal's width
                width = max(self.MIN_BAR, self.width - (len(line) - room))
                line = self.line(done, total, key, note, bar_width=width)
            self._draw(line)
            return
        shown = (done, total, key, note, self.line(done, total, key, note))
        if now - self._last < self.every_s and (done < total or shown == self._printed):
            return
        self._last, self._printed = now, shown
        print(shown[-1], file=self.stream, flush=True)

    def message(self, text: str) -> None:
        """A status text in place of the counts (e.g. while preparing)."""
        if self.bar:
            self._draw(f"{self.label}: {text}")

    def _room(self) -> int:
        """Characters a bar line may take: the terminal's width less one (the cursor), at least 20."""
        return max(20, _columns(self.stream) - 1)

    def _draw(self, text: str) -> None:
        """Redraw the bar line: cut to the terminal's width; erased with ESC[K, or overwritten with spaces on a
        terminal that has no such sequence (``TERM=dumb``)."""
        room = self._room()
        if len(text) > room:
            text = text[:room - 3] + "..."
        if os.environ.get("TERM", "") == "dumb":
            self.stream.write("\r" + text + " " * max(0, min(self._drawn_len, room) - len(text)))
        else:
            self.stream.write("\r\033[K" + text)
        self.stream.flush()
        self._drawn, self._drawn_len = True, len(text)

    def close(self) -> None:
        """End the bar's line (nothing for plain lines)."""
        if self.bar and self._drawn:
            self.stream.write("\n")
            self.stream.flush()
            self._drawn = False
            self._drawn_len = 0


def _columns(stream) -> int:
    """The width of the terminal ``stream`` writes to: ``COLUMNS`` when set (a positive integer), else the
    terminal's own, else 80.

    Examples
    --------
    >>> import io
    >>> _columns(io.StringIO()) > 0
    True
    """
    try:
        given = int(os.environ.get("COLUMNS", ""))
        if given > 0:
            return given
    except ValueError:
        pass
    try:
        return os.get_terminal_size(stream.fileno()).columns or 80
    except (AttributeError, ValueError, OSError, io.UnsupportedOperation):
        return 80


def _isatty(stream) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):
        return False


def _duration(seconds: float) -> str:
    """``42 s``, ``3.5 min`` or ``2.1 h``."""
    if seconds < 90:
        return f"{seconds:.0f} s"
    if seconds < 5400:
        return f"{seconds / 60:.1f} min"
    return f"{seconds / 3600:.1f} h"


#: :func:`_records` of files already counted, by (path, mtime, size): the progress display asks every second for
#: shard files that do not change (every stage output is written atomically, so a change shows in mtime and size)
_RECORDS_SEEN: dict[tuple[str, int, int], int] = {}


def _records(path: Path) -> int:
    """Data records of a CSV file (its header not counted); a quoted field may span lines.

    Lines were counted before, so an id with a quoted line break counted twice and ``dascreen status`` called a
    finished run "not running: 18/19" (a careless user's audit). Each file version is parsed once per process
    (:data:`_RECORDS_SEEN`).

    Examples
    --------
    >>> import tempfile
    >>> f = Path(tempfile.mkdtemp()) / "shard-000.csv"; _ = f.write_text('key,id\\nm1,"two\\nlines"\\nm2,b\\n')
    >>> _records(f)
    2
    """
    stat = os.stat(path)
    seen = (str(path), stat.st_mtime_ns, stat.st_size)
    if seen not in _RECORDS_SEEN:
        if len(_RECORDS_SEEN) > 4096:  # a long-lived process: forget, do not grow
            _RECORDS_SEEN.clear()
        with open(path, encoding="utf-8", newline="") as handle:
            try:
                _RECORDS_SEEN[seen] = max(0, sum(1 for _ in csv.reader(handle)) - 1)
            except csv.Error:  # a field beyond the csv module's size limit (a pasted 5 MB id): count lines instead
                handle.seek(0)
                _RECORDS_SEEN[seen] = max(0, sum(1 for _ in handle) - 1)
    return _RECORDS_SEEN[seen]


def batch_progress(out_dir: str | os.PathLike, batch: str = "candidates", stage: str = "electronic") -> dict:
    """Molecules done / total of a run folder, with an ETA, from shard outputs and journals.

    Parameters
    ----------
    out_dir : path-like
        The run's output folder (``--out``).
    batch : str
        Work batch (``candidates`` or ``reference``).
    stage : {"structures", "electronic"}
        Which stage to count (a molecule is finished when its electronic result exists).

    Returns
    -------
    dict
        ``total`` unique structures, ``done``, ``elapsed_s`` since the first shard started,
        ``eta_s`` (NaN until something is done), ``stored`` (of ``done``, the molecules the results store
        served: marked in a running shard's journal, said by a finished shard's job log; the progress display
        leaves them out of its rate).
    """
    import math

    work = Path(out_dir) / "work" / batch
    shards = sorted((work / "prepared").glob("shard-*.csv"))
    total = sum(_records(p) for p in shards)
    done, first, stored = 0, None, 0
    for shard in shards:
        final = work / stage / shard.name
        journal = Path(f"{final}.journal.jsonl")
        if final.exists():
            done += _records(final)
            stored += _stored_in_log(Path(out_dir) / "logs" / batch / "compute" / f"{shard.stem}.log", stage)
        elif journal.exists():
            read = Journal(journal)
            done += len(read.load())
            stored += len(read.from_store)
    starts = [p.stat().st_mtime for p in shards]
    if starts:
        first = min(starts)
    elapsed = time.time() - first if first else 0.0
    eta = elapsed / done * (total - done) if done else math.nan
    return {"total": total, "done": done, "elapsed_s": elapsed, "eta_s": eta, "stored": stored}


#: a compute job's log line that says how many molecules of a stage the results store served
#: (:func:`screen.batch.report_store_hits`)
_STORE_HITS = re.compile(r"^.*: (\d+) of \d+ molecules? from the results store\b.*\((\w+)\)\s*$", re.M)
#: :func:`_stored_in_log` of log files already read, by (path, mtime, size)
_STORED_SEEN: dict[tuple[str, int, int, str], int] = {}


def _stored_in_log(log: Path, stage: str) -> int:
    """Molecules of ``stage`` the results store served, as a finished compute job's log says (0 when it does
    not say, or there is no log).

    Examples
    --------
    >>> import tempfile
    >>> log = Path(tempfile.mkdtemp()) / "shard-000.log"
    >>> _ = log.write_text("compute shard-000: 3 of 5 molecules from the results store, 2 computed (electronic)\\n")
    >>> _stored_in_log(log, "electronic"), _stored_in_log(log, "structures"), _stored_in_log(log.with_name("x"), "")
    (3, 0, 0)
    """
    try:
        stat = os.stat(log)
    except OSError:
        return 0
    seen = (str(log), stat.st_mtime_ns, stat.st_size, stage)
    if seen not in _STORED_SEEN:
        if len(_STORED_SEEN) > 4096:
            _STORED_SEEN.clear()
        try:
            text = log.read_text(encoding="utf-8", errors="replace")
        except OSError:
            return 0
        hits = [int(m.group(1)) for m in _STORE_HITS.finditer(text) if m.group(2) == stage]
        _STORED_SEEN[seen] = hits[-1] if hits else 0
    return _STORED_SEEN[seen]


def _oligomer_count(path: Path) -> tuple[int, int]:
    """``(oligomer rows, distinct polymers)`` of a prepared ``oligomers.csv``; ``(0, 0)`` without one."""
    if not path.is_file():
        return 0, 0
    with path.open(encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh))
    return len({r.get("key") for r in rows}), len({r.get("polymer_key") for r in rows})


def run_progress(out_dir: str | os.PathLike, batch: str | None = None) -> dict:
    """Progress of every batch of a run folder (candidates, reference, partners), counted per stage;
    of ``batch`` alone when given (a ``smiles:`` partner's computation).

    Returns
    -------
    dict
        ``total`` unique structures of all prepared batches, ``structures`` and
        ``electronic`` (molecules finished by each stage), ``done`` (=
        ``electronic``), ``stored`` (of ``done``, served by the results store), ``steps`` (structures +
        electronic, out of ``2 × total``),
        ``prepared`` (whether any batch is prepared), ``started`` (Unix time of
        the first prepared shard, NaN without one), ``oligomers`` and ``polymers``
        (oligomer structures among ``total`` and the polymers they belong to, from
        each batch's ``prepared/oligomers.csv``).

    Examples
    --------
    >>> import tempfile
    >>> run_progress(tempfile.mkdtemp())["prepared"]
    False
    """
    work = Path(out_dir) / "work"
    batches = sorted(p.parent.name for p in work.glob("*/prepared")) if work.is_dir() else []
    if batch is not None:
        batches = [b for b in batches if b == batch]
    out = {"total": 0, "structures": 0, "electronic": 0, "prepared": bool(batches), "started": float("nan"),
           "oligomers": 0, "polymers": 0, "stored": 0}
    for batch in batches:
        olig, poly = _oligomer_count(work / batch / "prepared" / "oligomers.csv")
        out["oligomers"] += olig
        out["polymers"] += poly
        for stage in ("structures", "electronic"):
            p = batch_progress(out_dir, batch, stage)
            out[stage] += p["done"]
        out["stored"] += p["stored"]  # of the electronic stage, whose count is ``done``
        out["total"] += p["total"]
        shards = list((work / batch / "prepared").glob("shard-*.csv"))
        if shards:
            first = min(s.stat().st_mtime for s in shards)
            out["started"] = first if out["started"] != out["started"] else min(out["started"], first)
    out["done"], out["steps"] = out["electronic"], out["structures"] + out["electronic"]
    return out
