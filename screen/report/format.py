"""Small number and text helpers of the report: numbers with a typographic minus, ± σ, escaping.

Examples
--------
>>> fmt(-5.423), fmt(None), fmt(0.1, 1, plus=True)
('−5.42', '—', '+0.1')
>>> fmt_pm(-5.4, 0.15), pm_html(-5.4, float("nan"))
('−5.40 ± 0.15', '−5.40')
>>> esc('<a href="x">'), shorten("abcdef", 4)
('&lt;a href=&quot;x&quot;&gt;', 'abc…')
>>> get({"a": {"b": 1}}, "a", "b"), get({"a": 1}, "a", "b", default="-")
(1, '-')
"""

from __future__ import annotations

import html
import math

import numpy as np
import pandas as pd

from screen.io import cell_number as num
from screen.io import cell_text as text

__all__ = ["NOT_RECORDED", "num", "text", "esc", "isolated", "fmt", "fmt_pm", "pm_html", "data_value", "get", "shorten",
           "truthy", "texts", "truthies", "has_text", "numbers", "fmts", "pm_htmls", "data_values", "percent"]

#: Shown for a value the run did not record.
NOT_RECORDED = "not recorded"
_MINUS = "\u2212"
_TRUE_WORDS = ("true", "1", "yes")


def esc(value) -> str:
    """HTML-escaped text of a cell (quotes escaped too, safe in attributes)."""
    return html.escape(text(value), quote=True)


def isolated(html_text: str) -> str:
    """``html_text`` (escaped HTML) in a ``<bdi>`` element, so that no direction mark in it reorders the text
    around it; '' stays ''.

    An id or name with an unterminated right-to-left override (U+202E) turned the rest of its sentence or table
    cell around (a security audit); ``.cid`` and ``.cname`` are isolated in the style sheet.

    Examples
    --------
    >>> isolated("<strong>A1</strong>"), isolated("")
    ('<bdi><strong>A1</strong></bdi>', '')
    """
    return f"<bdi>{html_text}</bdi>" if html_text else ""


def _number(value) -> float:
    """:func:`num` with a shortcut for a plain float (the cells of a table's float columns)."""
    if type(value) is float:
        return value if math.isfinite(value) else math.nan
    return num(value)


def fmt(value, digits: int = 2, plus: bool = False) -> str:
    """Number with a typographic minus; an em dash for a missing value.

    A value that rounds to zero keeps its sign unless it is numerical noise (a meeting-day audit: an inverted
    alignment, ΔHOMO −0.0047 eV, was shown as "0.00" beside the reason "the donor's HOMO is not above the
    acceptor's").

    Examples
    --------
    >>> fmt(-0.0047), fmt(0.0047, plus=True), fmt(-1e-12), fmt(-5.4321), fmt(None)
    ('\u22120.00', '+0.00', '0.00', '\u22125.43', '\u2014')
    """
    x = _number(value)
    if math.isnan(x):
        return "\u2014"
    out = f"{x:+.{digits}f}" if plus else f"{x:.{digits}f}"
    if out.lstrip("+-").strip("0.") == "":  # rounds to zero: the sign of a real value, none for noise
        sign = "" if abs(x) < 1e-9 else "-" if x < 0 else "+" if plus else ""
        out = sign + f"{0.0:.{digits}f}"
    return out.replace("-", _MINUS)


def fmt_pm(value, sigma, digits: int = 2) -> str:
    """``"−5.42 ± 0.15"``; just the value when σ is missing."""
    x, s = _number(value), _number(sigma)
    base = fmt(x, digits)
    if math.isnan(x) or math.isnan(s) or s <= 0:
        return base
    return f"{base} \u00b1 {fmt(s, digits)}"


def pm_html(value, sigma, digits: int = 2) -> str:
    """:func:`fmt_pm` as HTML, the ``± σ`` part in its own span (own line in tables)."""
    x, s = _number(value), _number(sigma)
    base = fmt(x, digits)
    if math.isnan(x) or math.isnan(s) or s <= 0:
        return base
    return f'{base} <span class="pm">\u00b1 {fmt(s, digits)}</span>'


def data_value(value) -> str:
    """``data-value`` attribute for numeric sorting (empty for missing)."""
    x = _number(value)
    return "" if math.isnan(x) else format(x, ".6g")


def numbers(values) -> list[float]:
    """``[num(v) for v in values]``: cells as floats, NaN for anything that is not a finite real number.

    Examples
    --------
    >>> numbers([1.5, float("inf"), None, "2", True])
    [1.5, nan, nan, 2.0, nan]
    """
    return [v if type(v) is float and v - v == 0.0 else num(v) for v in values]  # v - v is NaN for ±inf and NaN


def fmts(values, digits: int = 2, plus: bool = False) -> list[str]:
    """``[fmt(v, digits, plus) for v in values]`` in one pass (the cells of a table column).

    Examples
    --------
    >>> fmts([-5.423, None, -0.001, 0.1, -1e-12], 2, plus=True)
    ['−5.42', '—', '−0.00', '+0.10', '0.00']
    """
    spec = f"+.{digits}f" if plus else f".{digits}f"
    zero = f"{0.0:.{digits}f}"
    out = []
    for x in numbers(values):
        if x != x:
            out.append("\u2014")
            continue
        shown = format(x, spec)
        if shown.lstrip("+-") == zero and abs(x) < 1e-9:  # numerical noise: no sign (as fmt)
            shown = zero
        out.append(shown.replace("-", _MINUS))
    return out


def pm_htmls(values, sigmas, digits: int = 2) -> list[str]:
    """``[pm_html(v, s, digits) for v, s in zip(values, sigmas)]`` in one pass.

    Examples
    --------
    >>> pm_htmls([-5.4, -5.4, None], [0.15, 0.0, 0.1])
    ['−5.40 <span class="pm">± 0.15</span>', '−5.40', '—']
    """
    xs, ss = numbers(values), numbers(sigmas)
    return [base if x != x or s != s or s <= 0 else f'{base} <span class="pm">\u00b1 {shown}</span>'
            for base, shown, x, s in zip(fmts(xs, digits), fmts(ss, digits), xs, ss)]


def data_values(values) -> list[str]:
    """``[data_value(v) for v in values]`` in one pass.

    Examples
    --------
    >>> data_values([-5.4231234, None, 3])
    ['-5.42312', '', '3']
    """
    return ["" if x != x else format(x, ".6g") for x in numbers(values)]


def get(mapping, *keys, default=None):
    """Nested ``mapping[k1][k2]…`` that returns ``default`` on any miss."""
    node = mapping
    for key in keys:
        if not isinstance(node, dict) or key not in node:
            return default
        node = node[key]
    return node


def shorten(value: str, limit: int) -> str:
    """``value`` cut to ``limit`` characters with an ellipsis."""
    return value if len(value) <= limit else value[: max(1, limit - 1)] + "\u2026"


def truthy(value) -> bool:
    """True for a cell that reads as yes (``True``, ``1``, ``"yes"``; any case)."""
    return text(value).strip().lower() in _TRUE_WORDS


def texts(series: pd.Series) -> pd.Series:
    """``series.map(text)``, one vectorised step for a string column (``''`` for a missing cell).

    Examples
    --------
    >>> import pandas as pd
    >>> texts(pd.Series(["a", None], dtype="str")).tolist(), texts(pd.Series([1.5, None])).tolist()
    (['a', ''], ['1.5', ''])
    """
    if isinstance(series.dtype, pd.StringDtype):
        return series.fillna("")
    return series.map(text)


def truthies(series: pd.Series) -> pd.Series:
    """``series.map(truthy)``, one vectorised step for a boolean column.

    Examples
    --------
    >>> import pandas as pd
    >>> truthies(pd.Series([True, False])).tolist(), truthies(pd.Series(["yes", None])).tolist()
    ([True, False], [True, False])
    """
    if series.dtype == np.bool_:
        return series.copy()
    return series.map(truthy)


def has_text(series: pd.Series) -> pd.Series:
    """``texts(series).ne("")``: True where a cell is not empty; one step for numeric columns.

    Examples
    --------
    >>> import pandas as pd
    >>> has_text(pd.Series([1.5, None, float("inf")])).tolist(), has_text(pd.Series(["", "a", None])).tolist()
    ([True, False, True], [False, True, False])
    """
    if pd.api.types.is_numeric_dtype(series.dtype) and not pd.api.types.is_bool_dtype(series.dtype):
        return series.notna()
    return texts(series).ne("")


def percent(value) -> str:
    """A probability [0–1] as a percentage for a table cell (``"71 %"``; ``<1 %`` and ``>99 %`` near the ends).

    Examples
    --------
    >>> percent(0.71), percent(0.0), percent(0.004), percent(0.996), percent(1.0), percent(None)
    ('71 %', '0 %', '&lt;1 %', '&gt;99 %', '100 %', '—')
    """
    x = num(value)
    if math.isnan(x):
        return "\u2014"
    pct = 100.0 * x
    if 0 < pct < 1:
        return "&lt;1 %"
    if 99 < pct < 100:
        return "&gt;99 %"
    return f"{pct:.0f} %"
