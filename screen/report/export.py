"""Spreadsheet-safe copy of a table: text cells that a spreadsheet would run as a formula are neutralised.

References
----------
.. [1] OWASP Foundation, "CSV Injection" (leading ``=``, ``+``, ``-``, ``@``,
   tab and carriage return start a formula in common spreadsheet programs).
"""

from __future__ import annotations

import re

import pandas as pd

__all__ = ["safe_csv_frame"]

_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_PLAIN_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")


def _neutralise(value):
    """Prefix an apostrophe to a text cell that a spreadsheet would run."""
    if not isinstance(value, str) or not value.startswith(_FORMULA_START):
        return value
    if _PLAIN_NUMBER.fullmatch(value):  # "-5.4" is a number to a spreadsheet, not a formula
        return value
    return "'" + value


def safe_csv_frame(ranking: pd.DataFrame) -> pd.DataFrame:
    """Copy of a table with formula-like text cells neutralised.

    Parameters
    ----------
    ranking : pandas.DataFrame
        Any table (typically the ranking).

    Returns
    -------
    pandas.DataFrame
        Same shape and columns.  Every *text* cell that begins with ``=``,
        ``+``, ``-``, ``@``, a tab or a carriage return gets a leading
        apostrophe, unless it is a plain decimal number such as ``"-5.4"``.
        Numeric cells (and numeric columns) are unchanged, so negative levels
        stay numbers.

    References
    ----------
    .. [1] OWASP Foundation, "CSV Injection".

    Examples
    --------
    >>> import pandas as pd
    >>> t = pd.DataFrame({"id": ["=1+1", "ok", "-cmd"], "homo_ev": [-5.4, -5.1, -5.0]})
    >>> safe_csv_frame(t)["id"].tolist(), safe_csv_frame(t)["homo_ev"].tolist()
    (["'=1+1", 'ok', "'-cmd"], [-5.4, -5.1, -5.0])
    """
    out = ranking.copy()
    for col in out.columns:
        series = out[col]
        if pd.api.types.is_numeric_dtype(series) or pd.api.types.is_bool_dtype(series):
            continue
        out[col] = series.map(_neutralise).astype(series.dtype if series.dtype == object else object)
    return out
