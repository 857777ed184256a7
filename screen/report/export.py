"""Spreadsheet-safe copy of a table: text cells that a spreadsheet would run as a formula are neutralised, and
line breaks inside text cells are replaced by spaces.

``ranking.safe.csv`` is the copy meant for people (opened in a spreadsheet); ``ranking.csv`` and every other CSV
file the project writes are the raw data, their text exactly as given (a field holding a line break is quoted:
:func:`screen.io.csv_text`).

References
----------
.. [1] OWASP Foundation, "CSV Injection" (leading ``=``, ``+``, ``-``, ``@``,
   tab and carriage return start a formula in common spreadsheet programs).
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from screen.io import csv_text as _csv_text

__all__ = ["safe_csv_frame", "safe_csv_text", "safe_csv_bytes", "SAFE_CSV_ENCODING"]

#: encoding of ``ranking.safe.csv``: UTF-8 with a byte-order mark, which a spreadsheet program on Windows needs to
#: read the text as UTF-8 (without it, accented ids showed as mojibake: an input-file audit); pandas, the
#: :mod:`csv` readers of :mod:`screen.io` (``utf-8-sig``) and the candidate reader skip the mark
SAFE_CSV_ENCODING = "utf-8-sig"

_FORMULA_START = ("=", "+", "-", "@", "\t", "\r", "\n")
_PLAIN_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")
#: a text cell that begins with a formula character, in the cells joined after NUL characters, or a line break
#: anywhere in a cell
_FORMULA_AFTER_NUL = re.compile("\0[" + re.escape("".join(_FORMULA_START)) + "]|[\r\n]")
#: a line break inside a text cell (CR LF, a lone CR or a lone LF): one space in the safe copy
_LINE_BREAK = re.compile("\r\n|[\r\n]")


def _text_columns(frame: pd.DataFrame) -> list:
    """Columns that may hold text cells (neither numeric nor boolean)."""
    return [c for c, dtype in frame.dtypes.items()
            if not (pd.api.types.is_numeric_dtype(dtype) or pd.api.types.is_bool_dtype(dtype))]


def _formula_cells(values: np.ndarray) -> np.ndarray:
    """Boolean mask of the text cells of an object array that a spreadsheet would run as a formula.

    A cell is one when it is a string that begins with one of
    :data:`_FORMULA_START` and is not a plain number ("-5.4" is a number to a
    spreadsheet, not a formula).

    Examples
    --------
    >>> import numpy as np
    >>> _formula_cells(np.array(["=1+1", "-5.4", "ok", None, 3.0, "@x"], dtype=object)).tolist()
    [True, False, False, False, False, True]
    """
    starts = np.fromiter((isinstance(v, str) and v.startswith(_FORMULA_START) for v in values), dtype=bool,
                         count=len(values))
    for i in np.flatnonzero(starts):
        starts[i] = not _PLAIN_NUMBER.fullmatch(values[i])
    return starts


def _may_hold_formulas(values: np.ndarray) -> bool:
    """False when no text cell of an object array begins with a formula character or holds a line break (one
    search).

    The text cells are joined, each after a NUL character; a NUL inside a cell
    can only add a false alarm, which :func:`_formula_cells` then settles.

    Examples
    --------
    >>> import numpy as np
    >>> _may_hold_formulas(np.array(["ok", None, 3.0], dtype=object)), _may_hold_formulas(np.array(["a", "-1"]))
    (False, True)
    >>> _may_hold_formulas(np.array(["ok\\r=1+1"], dtype=object))
    True
    """
    texts = [v for v in values.tolist() if isinstance(v, str)]
    return _FORMULA_AFTER_NUL.search("\0" + "\0".join(texts)) is not None


def _broken_cells(values: np.ndarray) -> np.ndarray:
    """Boolean mask of the text cells of an object array that hold a carriage return or line feed.

    Examples
    --------
    >>> import numpy as np
    >>> _broken_cells(np.array(["ok\\r=1", "a\\nb", "ok", None], dtype=object)).tolist()
    [True, True, False, False]
    """
    return np.fromiter((isinstance(v, str) and ("\r" in v or "\n" in v) for v in values), dtype=bool,
                       count=len(values))


def _needs_neutralising(frame: pd.DataFrame) -> bool:
    """True when a text cell of ``frame`` would be changed by :func:`safe_csv_frame`."""
    for col in _text_columns(frame):
        values = frame[col].to_numpy(dtype=object)
        if _may_hold_formulas(values) and (_formula_cells(values).any() or _broken_cells(values).any()):
            return True
    return False


def safe_csv_frame(ranking: pd.DataFrame) -> pd.DataFrame:
    """Copy of a table with formula-like text cells neutralised and line breaks in text cells made spaces.

    Parameters
    ----------
    ranking : pandas.DataFrame
        Any table (typically the ranking).

    Returns
    -------
    pandas.DataFrame
        Same shape and columns.  Every *text* cell that begins with ``=``,
        ``+``, ``-``, ``@``, a tab, a carriage return or a line feed gets a
        leading apostrophe, unless it is a plain decimal number such as
        ``"-5.4"``; then every line break inside a text cell (CR LF, a lone CR,
        a lone LF) becomes one space.  Numeric cells (and numeric columns) are
        unchanged, so negative levels stay numbers.

    Notes
    -----
    Line breaks become spaces rather than staying (quoted) in the cell with the
    formula character after them neutralised: this copy is for people, and a
    quoted line break is honoured by some spreadsheet imports and not by others
    (a lone CR, an import set to another line end, a text editor, ``grep``);
    where it is not, the rest of the cell starts a new row, and whatever
    follows the break starts a cell, a formula too.  With a space the cell is
    one line everywhere, and its start is the only place a formula can begin,
    which the apostrophe covers.  Nothing is lost: ``ranking.csv`` keeps the
    text exactly as given, its line breaks quoted (:func:`screen.io.csv_text`).

    References
    ----------
    .. [1] OWASP Foundation, "CSV Injection".

    Examples
    --------
    >>> import pandas as pd
    >>> t = pd.DataFrame({"id": ["=1+1", "ok", "-cmd"], "homo_ev": [-5.4, -5.1, -5.0]})
    >>> safe_csv_frame(t)["id"].tolist(), safe_csv_frame(t)["homo_ev"].tolist()
    (["'=1+1", 'ok', "'-cmd"], [-5.4, -5.1, -5.0])
    >>> safe_csv_frame(pd.DataFrame({"name": ["ok\\r=cmd|' /C calc'!A0", "\\r=1", "a\\r\\nb"]}))["name"].tolist()
    ["ok =cmd|' /C calc'!A0", "' =1", 'a b']
    """
    out = ranking.copy()
    for col in _text_columns(out):
        values = out[col].to_numpy(dtype=object, copy=True)
        mask = _formula_cells(values)
        values[mask] = ["'" + v for v in values[mask]]
        broken = _broken_cells(values)
        values[broken] = [_LINE_BREAK.sub(" ", v) for v in values[broken]]
        out[col] = pd.Series(values, index=out.index, dtype=object)
    return out


def safe_csv_text(ranking: pd.DataFrame, csv_text: str | None = None) -> str:
    """The spreadsheet-safe CSV of a table: ``safe_csv_frame(ranking).to_csv(index=False, lineterminator="\\n")``
    (formula-like cells neutralised, line breaks in cells made spaces).

    The text is made by :func:`screen.io.csv_text` (the same text as pandas').

    Parameters
    ----------
    ranking : pandas.DataFrame
        Any table (typically the ranking).
    csv_text : str, optional
        ``ranking.to_csv(index=False, lineterminator="\\n")`` when the caller
        has made it already (the ranking stage writes it as ``ranking.csv``):
        returned as it is when no cell needs neutralising and none holds a
        line break, which saves formatting every number a second time.

    Returns
    -------
    str
        CSV text, ``\\n`` line ends.

    Examples
    --------
    >>> import pandas as pd
    >>> t = pd.DataFrame({"id": ["=1+1", "ok"], "homo_ev": [-5.4, -5.1]})
    >>> safe_csv_text(t)
    "id,homo_ev\\n'=1+1,-5.4\\nok,-5.1\\n"
    >>> safe_csv_text(t.iloc[1:], "given\\n")
    'given\\n'
    """
    if csv_text is not None and not _needs_neutralising(ranking):
        return csv_text
    return _csv_text(safe_csv_frame(ranking), "\n")


def safe_csv_bytes(ranking: pd.DataFrame, csv_text: str | None = None) -> bytes:
    r"""The bytes of ``ranking.safe.csv``: :func:`safe_csv_text` encoded as :data:`SAFE_CSV_ENCODING` (a UTF-8
    byte-order mark first).

    Examples
    --------
    >>> import pandas as pd
    >>> safe_csv_bytes(pd.DataFrame({"id": ["P\u00e9r"], "homo_ev": [-5.4]}))
    b'\xef\xbb\xbfid,homo_ev\nP\xc3\xa9r,-5.4\n'
    """
    return safe_csv_text(ranking, csv_text).encode(SAFE_CSV_ENCODING)
