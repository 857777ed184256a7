"""Self-contained HTML report of a ranking, for a meeting with synthetic chemists.

:func:`write_report` turns one ranking (candidates against one partner) into
``report.html`` — a single file that opens offline: every style, drawing and
figure is inline, nothing is fetched from the network — and
``ranking.safe.csv``, the ranking with text cells neutralised for spreadsheet
programs.

The page has five parts:

1. *Run at a glance*: partner levels, computation and calibration, device-model
   parameters, ranking settings, counts, date and version, and a caution that
   the numbers are screening estimates.
2. *Shortlist for discussion*: 2-D structure drawings (RDKit, inline SVG), levels
   with σ, offsets, Voc, Jsc, PCE with σ, the probability of beating the target
   and every flag in plain words; sortable by clicking a column header (a small
   inline script; without it the table stays in rank order).  Every ranked row
   follows in a collapsible table.
3. *Level alignment* and *Gap–offset map*: two Matplotlib figures as inline SVG.
4. *Not ranked*: every input row that was rejected or failed, with its reason,
   so nothing disappears silently.
5. *Files beside this report*: relative links to the exports.

All user text (ids, names, SMILES, pass-through columns, error messages) is
HTML-escaped; Matplotlib escapes the text it writes into its SVG.

References
----------
.. [1] M. C. Scharber, D. Mühlbacher, M. Koppe, P. Denk, C. Waldauf,
   A. J. Heeger, C. J. Brabec, "Design rules for donors in bulk-heterojunction
   solar cells — towards 10 % energy-conversion efficiency",
   Adv. Mater. 18 (2006) 789–794. :doi:`10.1002/adma.200501717`
.. [2] OWASP Foundation, "CSV Injection" (leading ``=``, ``+``, ``-``, ``@``,
   tab and carriage return start a formula in common spreadsheet programs).
"""

from __future__ import annotations

import html
import io
import math
import os
import re
from datetime import datetime, timezone
from numbers import Real
from pathlib import Path

import numpy as np
import pandas as pd

from screen import __version__
from screen.io import atomic_path
from screen.io import cell_text as _text

__all__ = [
    "write_report",
    "render_report",
    "safe_csv_frame",
    "describe_flag",
    "molecule_svg",
    "FLAG_TEXT",
    "INFO_FLAGS",
    "EXPORTS",
]

#: Plain-language meaning of the ranking flags.  ``{…}`` fields are filled from
#: the run's settings when they are recorded; see :func:`describe_flag`.
FLAG_TEXT = {
    "input_missing": "a level the device model needs is missing, so no efficiency could be estimated",
    "lumo_offset_low": "LUMO offset to the partner below {min_lumo} — electron transfer from donor to "
                       "acceptor is not assured",
    "homo_offset_low": "HOMO offset to the partner below {min_homo} — hole transfer from acceptor to "
                       "donor is not assured",
    "voc_nonpositive": "no positive open-circuit voltage with this partner, so the efficiency is zero",
    "gap_out_of_window": "optical gap outside the screening window{window}",
    "too_many_heavy_atoms": "larger than the heavy-atom limit of this screen{limit}",
    "same_role_as_partner": "same role as the partner (two donors or two acceptors), so the pair is not "
                            "a working blend",
    "role_assumed": "role not given in the input; assumed to complement the partner",
    "role_invalid": "the role given in the input is neither donor nor acceptor",
    "is_partner": "this row is the partner material itself",
    "heavy_atoms_unknown": "heavy-atom count unknown, so the size limit could not be checked",
}
#: Flags that inform without making a row fail (shown in a neutral colour).
INFO_FLAGS = frozenset({"role_assumed", "heavy_atoms_unknown"})

#: Files written next to ``report.html`` by the ranking stage and this module,
#: with the description shown in the footer.
EXPORTS = (
    ("ranking.csv", "the full ranking, best first, one row per ranked candidate"),
    ("shortlist.sdf", "3-D structures of the shortlisted candidates with their estimates as properties"),
    ("ranking.safe.csv", "the ranking for spreadsheet programs: text cells that begin with = + - @, "
                         "tab or carriage return carry a leading apostrophe so they are never run as "
                         "formulas"),
)

_NOT_RECORDED = "not recorded"
#: Permissions of the written files (the temporary files of atomic writes are 0600).
_FILE_MODE = 0o644
_MINUS = "\u2212"
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_DECIMAL = re.compile(r"-?\d+\.\d+")
_PLAIN_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")
#: Structure drawings, CSS pixels.
_MOL_W, _MOL_H = 170, 116
#: Candidates drawn in the level-alignment figure at most.
_DIAGRAM_MAX = 12

# Palette: deep teal, warm amber, slate, ivory, brick (warnings).
_TEAL_DARK = "#0b3b45"
_TEAL = "#137079"
_AMBER = "#d4882b"
_AMBER_DARK = "#9a5a12"
_SLATE = "#3e4c59"
_SLATE_LIGHT = "#9aa5b1"
_BRICK = "#a4362b"
_MAP_COLOURS = ["#f6f1e7", "#dcebe4", "#a9d2c9", "#5fa8a4", "#23797f", "#0f4f5c", "#0a2e38"]

_RC = {
    "svg.hashsalt": "dascreen-report",
    "svg.fonttype": "none",
    "text.parse_math": False,
    "text.usetex": False,
    "font.family": "sans-serif",
    "font.sans-serif": ["DejaVu Sans"],
    "font.size": 10.0,
    "axes.unicode_minus": True,
    "axes.edgecolor": _SLATE,
    "axes.labelcolor": "#1f2933",
    "axes.titlesize": 11.0,
    "xtick.color": _SLATE,
    "ytick.color": _SLATE,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "hatch.color": _SLATE_LIGHT,
    "hatch.linewidth": 0.6,
    "path.simplify": True,
}


# --------------------------------------------------------------------------- #
# Small formatting helpers
# --------------------------------------------------------------------------- #
def _num(value) -> float:
    """Float of ``value``; NaN for anything that is not a finite real number."""
    if isinstance(value, bool) or value is None:
        return math.nan
    try:
        out = float(value)
    except (TypeError, ValueError):
        return math.nan
    return out if math.isfinite(out) else math.nan




def _e(value) -> str:
    """HTML-escaped text of a cell (quotes escaped too, safe in attributes)."""
    return html.escape(_text(value), quote=True)


def _fmt(value, digits: int = 2, plus: bool = False) -> str:
    """Number with a typographic minus; an em dash for a missing value."""
    x = _num(value)
    if math.isnan(x):
        return "\u2014"
    out = f"{x:+.{digits}f}" if plus else f"{x:.{digits}f}"
    if out.lstrip("+-").strip("0.") == "":  # −0.00 → 0.00
        out = f"{0.0:.{digits}f}"
    return out.replace("-", _MINUS)


def _fmt_pm(value, sigma, digits: int = 2) -> str:
    """``"−5.42 ± 0.15"``; just the value when σ is missing."""
    base = _fmt(value, digits)
    s = _num(sigma)
    if math.isnan(_num(value)) or math.isnan(s) or s <= 0:
        return base
    return f"{base} \u00b1 {_fmt(s, digits)}"


def _pm_html(value, sigma, digits: int = 2) -> str:
    """``_fmt_pm`` as HTML, the ``± σ`` part in its own span (own line in tables)."""
    base = _fmt(value, digits)
    s = _num(sigma)
    if math.isnan(_num(value)) or math.isnan(s) or s <= 0:
        return base
    return f'{base} <span class="pm">\u00b1 {_fmt(s, digits)}</span>'


def _dv(value) -> str:
    """``data-value`` attribute for numeric sorting (empty for missing)."""
    x = _num(value)
    return "" if math.isnan(x) else format(x, ".6g")


def _get(mapping, *keys, default=None):
    """Nested ``mapping[k1][k2]…`` that returns ``default`` on any miss."""
    node = mapping
    for key in keys:
        if not isinstance(node, dict) or key not in node:
            return default
        node = node[key]
    return node


def _shorten(text: str, limit: int) -> str:
    """``text`` cut to ``limit`` characters with an ellipsis."""
    return text if len(text) <= limit else text[: max(1, limit - 1)] + "\u2026"


# --------------------------------------------------------------------------- #
# Flags
# --------------------------------------------------------------------------- #
def describe_flag(code: str, meta: dict | None = None) -> str:
    """Plain-language meaning of one ranking flag.

    Parameters
    ----------
    code : str
        Flag code as written in the ``flags`` column (e.g. ``lumo_offset_low``).
    meta : dict, optional
        Report metadata; thresholds in ``meta["device"]`` and ``meta["rank"]``
        (or ``meta["filters"]``) are quoted in the text when present.

    Returns
    -------
    str
        Unescaped text; unknown codes are returned verbatim (the caller
        escapes them).

    Examples
    --------
    >>> describe_flag("lumo_offset_low", {"device": {"min_delta_lumo_ev": 0.3}})
    'LUMO offset to the partner below 0.30 eV — electron transfer from donor to acceptor is not assured'
    >>> describe_flag("made_up_code")
    'made_up_code'
    """
    code = code.strip()
    if code not in FLAG_TEXT:
        return code
    meta = meta or {}
    min_lumo = _num(_get(meta, "device", "min_delta_lumo_ev"))
    min_homo = _num(_get(meta, "device", "min_delta_homo_ev"))
    g_lo = _setting(meta, "gap_min_ev")
    g_hi = _setting(meta, "gap_max_ev")
    limit = _setting(meta, "max_heavy_atoms")
    window = ""
    if not (math.isnan(g_lo) or math.isnan(g_hi)):
        window = f" ({_fmt(g_lo)}\u2013{_fmt(g_hi)} eV)"
    return FLAG_TEXT[code].format(
        min_lumo="the required minimum" if math.isnan(min_lumo) else f"{_fmt(min_lumo)} eV",
        min_homo="the required minimum" if math.isnan(min_homo) else f"{_fmt(min_homo)} eV",
        window=window,
        limit="" if math.isnan(limit) else f" ({int(limit)})",
    )


def _setting(meta: dict, key: str) -> float:
    """A ranking setting from ``meta["rank"]``, else ``meta["filters"]`` (NaN if absent)."""
    x = _num(_get(meta, "rank", key))
    return _num(_get(meta, "filters", key)) if math.isnan(x) else x


def _flag_codes(value) -> list[str]:
    """Flag codes of one ``flags`` cell (``;``-joined), empty entries dropped."""
    return [c.strip() for c in _text(value).split(";") if c.strip()]


def _flags_html(value, meta: dict) -> str:
    """Bulleted plain-language flags, or a quiet "no concerns" note."""
    codes = _flag_codes(value)
    if not codes:
        return '<span class="ok-note">no concerns flagged</span>'
    def cls(code):
        return "flag info" if code in INFO_FLAGS else "flag" if code in FLAG_TEXT else "flag unknown"

    items = "".join(f'<li class="{cls(c)}" data-code="{_e(c)}">{_e(describe_flag(c, meta))}</li>'
                    for c in codes)
    return f'<ul class="flags">{items}</ul>'


# --------------------------------------------------------------------------- #
# Spreadsheet-safe CSV
# --------------------------------------------------------------------------- #
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


# --------------------------------------------------------------------------- #
# Structure drawings
# --------------------------------------------------------------------------- #
def molecule_svg(smiles: str, label: str = "", width: int = _MOL_W, height: int = _MOL_H) -> str | None:
    """Inline SVG drawing of a molecule (RDKit ``MolDraw2DSVG``).

    Parameters
    ----------
    smiles : str
        Molecule; invalid or empty SMILES give None.
    label : str
        Accessible name of the drawing (escaped here).
    width, height : int
        Size in CSS pixels.

    Returns
    -------
    str or None
        ``<svg class="mol" …>`` without XML prolog, header comment or RDKit
        namespace attribute, with a transparent background; None if RDKit
        cannot read the SMILES.

    Examples
    --------
    >>> svg = molecule_svg("c1ccsc1", "thiophene")
    >>> svg.startswith('<svg class="mol"'), "<?xml" in svg
    (True, False)
    >>> molecule_svg("not a smiles") is None
    True
    """
    from rdkit import Chem
    from rdkit.Chem import rdDepictor
    from rdkit.Chem.Draw import rdMolDraw2D
    from rdkit.rdBase import BlockLogs

    smiles = _text(smiles).strip()
    if not smiles:
        return None
    block = BlockLogs()  # an unreadable SMILES is reported on the page, not on stderr
    try:
        mol = Chem.MolFromSmiles(smiles)
        if mol is None or mol.GetNumAtoms() == 0:
            return None
        rdDepictor.Compute2DCoords(mol)
        drawer = rdMolDraw2D.MolDraw2DSVG(int(width), int(height))
        opts = drawer.drawOptions()
        opts.clearBackground = False
        opts.padding = 0.06
        opts.bondLineWidth = 1.5
        opts.fixedFontSize = -1
        rdMolDraw2D.PrepareAndDrawMolecule(drawer, mol)
        drawer.FinishDrawing()
        svg = drawer.GetDrawingText()
    except Exception:  # noqa: BLE001 - a drawing problem must not stop the report
        return None
    finally:
        del block
    svg = svg[svg.find("<svg"):]
    svg = svg.replace("<!-- END OF HEADER -->\n", "").replace("<!-- END OF HEADER -->", "")
    svg = re.sub(r"\s+xmlns:rdkit='[^']*'", "", svg, count=1)
    svg = re.sub(r"\s+xml:space='preserve'", "", svg, count=1)
    svg = re.sub(r"\s*baseProfile='full'", "", svg, count=1)
    svg = re.sub(r"^<svg\s+version='1.1'", "<svg", svg)
    svg = re.sub(r"(width|height)='(\d+)px'", r"\1='\2'", svg, count=2)
    svg = re.sub(r"\s*\n\s*", "\n", svg).strip()
    return svg.replace("<svg", f'<svg class="mol" role="img" aria-label="{_e(label)}"', 1)


# --------------------------------------------------------------------------- #
# Figures
# --------------------------------------------------------------------------- #
def _round_attribute(match: re.Match) -> str:
    """Geometry attribute with its numbers rounded to 0.01 (SVG user units are pt)."""
    def short(num: re.Match) -> str:
        text = f"{float(num.group(0)):.2f}".rstrip("0").rstrip(".")
        return "0" if text in ("-0", "") else text

    value = " ".join(_DECIMAL.sub(short, match.group(2)).split())
    return f' {match.group(1)}="{value}"'


def _figure_svg(fig, prefix: str, css_class: str, label: str) -> str:
    """Serialise a Matplotlib figure as inline SVG for an HTML5 page.

    The XML prolog, DOCTYPE, RDF metadata and Matplotlib's global ``*{…}``
    style are removed; every ``id`` (and its ``url(#…)``/``href`` references)
    gets ``prefix`` so that two figures on one page never share an id; width
    and height are dropped so the drawing scales with the page (``viewBox``
    kept).
    """
    import matplotlib

    buf = io.StringIO()
    with matplotlib.rc_context(_RC):
        fig.savefig(buf, format="svg", bbox_inches="tight", pad_inches=0.06,
                    metadata={"Date": None, "Creator": None, "Format": None, "Type": None})
    svg = buf.getvalue()
    svg = svg[svg.find("<svg"):]
    svg = re.sub(r"<metadata>.*?</metadata>\s*", "", svg, flags=re.S)
    svg = re.sub(r'<style type="text/css">[^<]*</style>\s*', "", svg)
    svg = re.sub(r"<defs>\s*</defs>\s*", "", svg)
    svg = re.sub(r'\bid="([^"]+)"', lambda m: f'id="{prefix}-{m.group(1)}"', svg)
    svg = re.sub(r"url\(#([^)]+)\)", lambda m: f"url(#{prefix}-{m.group(1)})", svg)
    svg = re.sub(r'href="#([^"]+)"', lambda m: f'href="#{prefix}-{m.group(1)}"', svg)
    svg = re.sub(r'\s(d|x|y|transform|points)="([^"]*)"', _round_attribute, svg)
    head_end = svg.find(">")
    head = svg[:head_end]
    width_pt = re.search(r'\swidth="([\d.]+)pt"', head)
    head = re.sub(r'\s(width|height|version)="[^"]*"', "", head)
    style = f' style="max-width:{float(width_pt.group(1)) * 4 / 3:.0f}px"' if width_pt else ""
    head = head.replace("<svg", f'<svg id="{prefix}" class="{css_class}" role="img" aria-label="{_e(label)}"'
                        f"{style}", 1)
    return (head + svg[head_end:]).strip()


def _partner_value(partner: dict, key: str) -> float:
    """A numeric field of the partner dict (NaN if absent)."""
    return _num(partner.get(key)) if isinstance(partner, dict) else math.nan


def _tick_label(rank, ident: str) -> str:
    """``"#3\\nid…"`` for the level-alignment axis."""
    r = _num(rank)
    head = f"#{int(r)}" if not math.isnan(r) else "#?"
    return f"{head}\n{_shorten(ident, 14)}"


def level_diagram_svg(shortlist: pd.DataFrame, partner: dict, meta: dict) -> str:
    """Energy-level diagram of the shortlisted candidates beside the partner.

    Parameters
    ----------
    shortlist : pandas.DataFrame
        Best-first rows with ``rank, id, homo_ev, lumo_ev, delta_lumo_ev`` and
        optionally ``homo_sigma_ev, lumo_sigma_ev``; at most 12 are drawn.
    partner : dict
        Partner levels (``id, homo_ev, lumo_ev``, optional σ).
    meta : dict
        Report metadata (offset threshold in ``meta["device"]``).

    Returns
    -------
    str
        Inline SVG (``id="fig-levels"``): short bars for HOMO (slate) and LUMO
        (teal) of each candidate with ±σ bands, the partner's levels in amber
        as a column of their own and as dashed guides across the plot, and a
        double arrow with the value of ΔLUMO at every candidate (brick red when
        below the threshold).  Vacuum scale, eV.
    """
    from matplotlib import patheffects
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    rows = shortlist.head(_DIAGRAM_MAX).reset_index(drop=True)
    n = len(rows)
    p_homo, p_lumo = _partner_value(partner, "homo_ev"), _partner_value(partner, "lumo_ev")
    p_hs, p_ls = _partner_value(partner, "homo_sigma_ev"), _partner_value(partner, "lumo_sigma_ev")
    thr = _num(_get(meta, "device", "min_delta_lumo_ev"))
    pid = _text(partner.get("id")) if isinstance(partner, dict) else ""

    with __import__("matplotlib").rc_context(_RC):
        width = max(8.8, min(11.5, 2.0 + 0.85 * (n + 1)))
        fig = Figure(figsize=(width, 4.6))
        ax = fig.add_subplot()
        half = 0.30
        levels_seen = []
        stroke = [patheffects.withStroke(linewidth=2.4, foreground="white")]

        def bar(x, y, s, colour, lw=2.6):
            if math.isnan(y):
                return
            levels_seen.append(y)
            if not math.isnan(s) and s > 0:
                ax.fill_between([x - half, x + half], y - s, y + s, color=colour, alpha=0.16, lw=0)
                levels_seen.extend([y - s, y + s])
            ax.plot([x - half, x + half], [y, y], color=colour, lw=lw, solid_capstyle="butt")

        # partner column and guides
        bar(0, p_lumo, p_ls, _AMBER, 3.0)
        bar(0, p_homo, p_hs, _AMBER_DARK, 3.0)
        for y in (p_lumo, p_homo):
            if not math.isnan(y):
                ax.axhline(y, color=_AMBER, lw=0.9, ls=(0, (4, 3)), alpha=0.8, zorder=0)
        for i, row in rows.iterrows():
            x = i + 1
            c_homo, c_lumo = _num(row.get("homo_ev")), _num(row.get("lumo_ev"))
            bar(x, c_lumo, _num(row.get("lumo_sigma_ev")), _TEAL)
            bar(x, c_homo, _num(row.get("homo_sigma_ev")), _SLATE)
            d = _num(row.get("delta_lumo_ev"))
            if not (math.isnan(c_lumo) or math.isnan(p_lumo)):
                low = (not math.isnan(thr) and not math.isnan(d) and d < thr - 1e-9)
                colour = _BRICK if low else _TEAL_DARK
                xa = x + half + 0.08
                if abs(c_lumo - p_lumo) > 0.02:
                    ax.annotate("", xy=(xa, c_lumo), xytext=(xa, p_lumo),
                                arrowprops=dict(arrowstyle="<|-|>", color=colour, lw=1.0,
                                                shrinkA=0, shrinkB=0, mutation_scale=7))
                label = _fmt(d if not math.isnan(d) else c_lumo - p_lumo, 2)
                ax.text(xa + 0.04, 0.5 * (c_lumo + p_lumo), label, color=colour, fontsize=8.5,
                        va="center", ha="left", path_effects=stroke)
        ticks = [0] + list(range(1, n + 1))
        labels = [f"partner\n{_shorten(pid, 14)}"] + [
            _tick_label(r.get("rank"), _text(r.get("id"))) for _, r in rows.iterrows()]
        ax.set_xticks(ticks)
        ax.set_xticklabels(labels, fontsize=8.5)
        ax.set_xlim(-0.7, n + 0.85)
        if levels_seen:
            lo, hi = min(levels_seen), max(levels_seen)
            pad = max(0.25, 0.08 * (hi - lo))
            ax.set_ylim(lo - pad, hi + pad)
        ax.set_ylabel("Energy vs vacuum [eV]")
        ax.tick_params(axis="x", length=0)
        ax.grid(axis="y", color="#e4e7eb", lw=0.6)
        ax.set_axisbelow(True)
        if n == 0:
            ax.text(0.5, 0.5, "no shortlisted candidates", transform=ax.transAxes, ha="center",
                    color=_SLATE)
        handles = [
            Line2D([], [], color=_TEAL, lw=2.6, label="candidate LUMO"),
            Line2D([], [], color=_SLATE, lw=2.6, label="candidate HOMO"),
            Line2D([], [], color=_AMBER, lw=3.0, label="partner LUMO / HOMO"),
            Patch(facecolor=_SLATE, alpha=0.16, label="\u00b11\u03c3 band"),
            Line2D([], [], color=_TEAL_DARK, lw=1.0, marker=">", markersize=4,
                   label="\u0394LUMO [eV]" + ("" if math.isnan(thr) else
                                              f" (brick red: below {_fmt(thr)} eV)")),
        ]
        ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=5, fontsize=8.5,
                  frameon=False, handlelength=1.6, columnspacing=1.2)
        return _figure_svg(fig, "fig-levels", "figure-svg levels-figure",
                           "Energy levels of the shortlisted candidates and the partner, vacuum scale")


def _device_model(meta: dict):
    """DeviceModel from ``meta["device"]`` (defaults for anything unusable).

    Returns the model and a note (empty when every recorded value was used).
    """
    from screen.device import DeviceModel

    dev = _get(meta, "device", default={}) or {}
    kwargs = {}
    for key in ("eqe", "ff", "loss_v", "min_delta_lumo_ev", "min_delta_homo_ev"):
        x = _num(dev.get(key))
        if not math.isnan(x):
            kwargs[key] = x
    pin = _num(dev.get("pin_w_m2"))
    if not math.isnan(pin):
        kwargs["pin_w_m2"] = pin
    try:
        return DeviceModel(**kwargs), ""
    except ValueError as exc:
        return DeviceModel(), f"recorded device parameters unusable ({exc}); map drawn with defaults"


def _map_points(ranking: pd.DataFrame, partner: dict, meta: dict) -> pd.DataFrame:
    """(absorber gap, ΔLUMO) of every ranked row for the map.

    Donor candidates sit at their own optical gap; acceptor candidates at the
    partner donor's gap ('donor' absorber policy).  With the 'both' policy the
    smaller gap of the pair is used.  An ``absorber_gap_ev`` column, when the
    ranking has one, takes precedence.  Rows with the partner's own role get
    no position (a donor–donor or acceptor–acceptor pair has no place on the
    map); column ``same_role`` marks them.
    """
    absorber = _text(_get(meta, "device", "absorber")) or "donor"
    p_gap = _partner_value(partner, "gap_opt_ev")
    p_role = _text(partner.get("role")).lower() if isinstance(partner, dict) else ""
    default_role = {"acceptor": "donor", "donor": "acceptor"}.get(p_role, "donor")
    gaps = pd.to_numeric(ranking.get("gap_opt_ev"), errors="coerce") if "gap_opt_ev" in ranking \
        else pd.Series(np.nan, index=ranking.index)
    roles = ranking["role"].map(_text).str.lower() if "role" in ranking else pd.Series("", index=ranking.index)
    roles = roles.where(roles.isin(["donor", "acceptor"]), default_role)
    if absorber == "both":
        x = np.fmin(gaps, p_gap) if not math.isnan(p_gap) else gaps
        x = pd.Series(np.where(np.isnan(p_gap) | gaps.isna(), np.nan, x), index=ranking.index)
    else:
        x = gaps.where(roles.eq("donor"), p_gap)
    if "absorber_gap_ev" in ranking:
        given = pd.to_numeric(ranking["absorber_gap_ev"], errors="coerce")
        x = given.where(given.notna(), x)
    y = pd.to_numeric(ranking.get("delta_lumo_ev"), errors="coerce") if "delta_lumo_ev" in ranking \
        else pd.Series(np.nan, index=ranking.index)
    same = roles.eq(p_role) if p_role in ("donor", "acceptor") else pd.Series(False, index=ranking.index)
    x, y = x.astype(float).mask(same), y.astype(float).mask(same)
    return pd.DataFrame({"x": x, "y": y, "rank": ranking.get("rank"), "role": roles, "same_role": same})


def _label_offsets(ax, labels) -> list[tuple[float, float]]:
    """Offsets [pt] for rank labels that avoid each other and the markers (greedy).

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        Axes with final limits (data → points conversion).
    labels : list of (str, float, float)
        Text and data position of each label, best rank first (placed first).

    Returns
    -------
    list of (float, float)
        Offset of each label's lower-left corner from its point. [pt]
    """
    to_pt = 72.0 / ax.figure.dpi
    anchors = [ax.transData.transform((x, y)) * to_pt for _, x, y in labels]
    marker = 4.0  # half-size of a diamond [pt]
    taken = [(ax_ - marker, ay - marker, ax_ + marker, ay + marker) for ax_, ay in anchors]
    out = []
    for (text, _x, _y), (px, py) in zip(labels, anchors):
        w, h = 5.2 * len(text) + 1.0, 8.0
        choices = [(5, 4), (5, -11), (-5 - w, 4), (-5 - w, -11), (-w / 2, 7), (-w / 2, -15),
                   (8, -4), (-8 - w, -4), (12, 10), (-12 - w, 10), (12, -17), (-12 - w, -17)]

        def overlap(dx, dy):
            box = (px + dx, py + dy, px + dx + w, py + dy + h)
            return sum(max(0.0, min(box[2], t[2]) - max(box[0], t[0]))
                       * max(0.0, min(box[3], t[3]) - max(box[1], t[1])) for t in taken)

        best = min(choices, key=lambda c: (overlap(*c) > 0, overlap(*c), choices.index(c)))
        taken.append((px + best[0], py + best[1], px + best[0] + w, py + best[1] + h))
        out.append((float(best[0]), float(best[1])))
    return out


def design_map_svg(ranking: pd.DataFrame, shortlist_index, partner: dict, meta: dict) -> tuple[str, str]:
    """Gap–offset map: Scharber-model PCE over optical gap × LUMO offset.

    Parameters
    ----------
    ranking : pandas.DataFrame
        Every ranked row (``rank, gap_opt_ev, delta_lumo_ev, role``).
    shortlist_index : sequence
        Index labels of ``ranking`` that are shortlisted (highlighted and
        labelled with their rank).
    partner : dict
        Partner levels (``role, lumo_ev, gap_opt_ev``).
    meta : dict
        Report metadata: device parameters and the target efficiency.

    Returns
    -------
    svg : str
        Inline SVG (``id="fig-map"``) with filled contours and contour lines
        of :func:`screen.device.efficiency_map`, the target efficiency as a
        bold amber contour, the region below the offset threshold hatched,
        every ranked candidate as a dot and the shortlist as labelled amber
        diamonds; colourbar "PCE [%]".
    note : str
        Caption text: how candidates are placed and how many could not be.

    Notes
    -----
    The map takes the donor HOMO as donor LUMO − optical gap, as in [1]_, so
    that :math:`V_{oc} = E_g - \\Delta_{LUMO} - V_{loss}` and the map depends on
    gap and offset only.  A candidate whose own HOMO–LUMO gap differs from its
    optical gap therefore has an estimated PCE (in the tables) that can differ
    from the map colour under its marker.

    References
    ----------
    .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789.
       :doi:`10.1002/adma.200501717`
    """
    import matplotlib
    from matplotlib import patheffects
    from matplotlib.colors import LinearSegmentedColormap
    from matplotlib.figure import Figure

    from screen.device import DeviceModel, efficiency_map

    model, model_note = _device_model(meta)
    map_model = DeviceModel(eqe=model.eqe, ff=model.ff, loss_v=model.loss_v,
                            min_delta_lumo_ev=model.min_delta_lumo_ev, absorber="donor",
                            pin_w_m2=model.pin_w_m2)
    pts = _map_points(ranking, partner, meta)
    finite = pts["x"].notna() & pts["y"].notna()
    gx = pts.loc[finite, "x"].to_numpy(float)
    gy = pts.loc[finite, "y"].to_numpy(float)
    g_lo = min(1.0, float(np.min(gx)) - 0.1) if gx.size else 1.0
    g_hi = max(3.0, float(np.max(gx)) + 0.1) if gx.size else 3.0
    o_lo = min(0.0, float(np.min(gy)) - 0.1) if gy.size else 0.0
    o_hi = max(1.5, float(np.max(gy)) + 0.1) if gy.size else 1.5
    g_lo, g_hi = max(g_lo, 0.5), min(g_hi, 4.4)
    o_lo, o_hi = max(o_lo, -1.5), min(o_hi, 3.0)
    gaps = np.linspace(g_lo, g_hi, 121)
    offsets = np.linspace(o_lo, o_hi, 101)
    p_role = _text(partner.get("role")).lower() if isinstance(partner, dict) else ""
    acc_lumo = _partner_value(partner, "lumo_ev") if p_role != "donor" else math.nan
    pce = efficiency_map(gaps, offsets, map_model,
                         acceptor_lumo_ev=-4.3 if math.isnan(acc_lumo) else acc_lumo)
    target = _num(_get(meta, "rank", "target_pce_pct"))
    thr = model.min_delta_lumo_ev
    absorber = _text(_get(meta, "device", "absorber")) or "donor"
    cmap = LinearSegmentedColormap.from_list("dascreen_pce", _MAP_COLOURS)

    with matplotlib.rc_context(_RC):
        fig = Figure(figsize=(9.4, 6.0))
        ax = fig.add_subplot()
        top = max(1.0, float(np.nanmax(pce)))
        step = 1.0 if top <= 16 else 2.0
        levels = np.arange(0.0, math.ceil(top / step) * step + step, step)
        # x = gap, y = offset; contourf(X, Y, Z) wants Z[y, x], the map is Z[gap, offset]
        filled = ax.contourf(gaps, offsets, pce.T, levels=levels, cmap=cmap)
        lines = ax.contour(gaps, offsets, pce.T, levels=levels[1::2], colors=[_TEAL_DARK],
                           linewidths=0.5, alpha=0.55)
        ax.clabel(lines, fmt=lambda v: f"{v:.0f}", fontsize=7.5, colors=[_TEAL_DARK], inline_spacing=2)
        if not math.isnan(target) and 0 < target < top:
            tline = ax.contour(gaps, offsets, pce.T, levels=[target], colors=[_AMBER], linewidths=1.8)
            ax.clabel(tline, fmt=lambda v: f"target {v:g} %", fontsize=7.5, colors=[_AMBER_DARK])
        if o_lo < thr:
            ax.fill_between([g_lo, g_hi], o_lo, min(thr, o_hi), facecolor="#ffffff", alpha=0.45,
                            hatch="////", edgecolor=_SLATE_LIGHT, lw=0)
            ax.axhline(thr, color=_SLATE, lw=0.9, ls=(0, (5, 3)))
            ax.text(g_hi - 0.03, thr - 0.03, f"\u0394LUMO < {_fmt(thr)} eV: charge transfer not assured",
                    ha="right", va="top", fontsize=7.5, color=_SLATE,
                    path_effects=[patheffects.withStroke(linewidth=2.5, foreground="white")])
        short = pts.index.isin(list(shortlist_index))
        rest = finite & ~short
        ax.plot(pts.loc[rest, "x"], pts.loc[rest, "y"], ls="none", marker="o", ms=4.0, color=_SLATE,
                alpha=0.75, mec="white", mew=0.4, label="ranked candidate", zorder=3)
        sl = finite & short
        ax.scatter(pts.loc[sl, "x"], pts.loc[sl, "y"], s=46, marker="D", c=_AMBER, edgecolors=_TEAL_DARK,
                   linewidths=0.9, label="shortlisted (label = rank)", zorder=4)
        ax.set_xlim(g_lo, g_hi)
        ax.set_ylim(o_lo, o_hi)
        stroke = [patheffects.withStroke(linewidth=2.2, foreground="white")]
        labels = [("?" if math.isnan(_num(p["rank"])) else f"{int(_num(p['rank']))}", p["x"], p["y"])
                  for _, p in pts.loc[sl].iterrows()]
        for (text, x, y), offset in zip(labels, _label_offsets(ax, labels)):
            ax.annotate(text, (x, y), xytext=offset, textcoords="offset points", fontsize=8,
                        color=_TEAL_DARK, fontweight="bold", path_effects=stroke, zorder=5)
        ax.set_xlabel("Donor optical gap [eV]" if absorber != "both"
                      else "Absorber optical gap (smaller gap of the pair) [eV]")
        ax.set_ylabel("LUMO offset \u0394LUMO = LUMO(donor) \u2212 LUMO(acceptor) [eV]")
        cbar = fig.colorbar(filled, ax=ax, pad=0.02, fraction=0.045)
        cbar.set_label("PCE [%]")
        cbar.outline.set_visible(False)
        ax.legend(loc="upper right", fontsize=8, framealpha=0.92, edgecolor="#d9dee4")
        svg = _figure_svg(fig, "fig-map", "figure-svg map-figure",
                          "Estimated efficiency over optical gap and LUMO offset with the ranked candidates")

    n_same = int(pts["same_role"].sum())
    n_missing = int((~finite).sum()) - n_same
    parts = []
    if (pts["role"].eq("acceptor") & ~pts["same_role"]).any() and absorber != "both":
        parts.append("Acceptor candidates sit at the partner donor's optical gap, at their offset "
                     "ΔLUMO = LUMO(partner) − LUMO(candidate).")
    if absorber == "both":
        parts.append("With both materials absorbing, each point sits at the smaller gap of the pair; "
                     "the map itself assumes the donor absorbs.")
    if n_same:
        parts.append(f"{n_same} ranked row(s) with the partner's own role are not drawn.")
    if n_missing:
        parts.append(f"{n_missing} ranked row(s) lack a gap or offset and are not drawn.")
    if model_note:
        parts.append(model_note + ".")
    return svg, " ".join(parts)


# --------------------------------------------------------------------------- #
# Tables
# --------------------------------------------------------------------------- #
_KNOWN_RANKING = {
    "rank", "id", "name", "smiles", "role", "homo_ev", "lumo_ev", "gap_opt_ev", "partner",
    "delta_lumo_ev", "delta_homo_ev", "voc_v", "jsc_ma_cm2", "ff", "pce_pct", "pce_sigma_pct",
    "p_above_target", "passes", "flags", "homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev",
    "shortlist", "absorber_gap_ev", "scale", "key",
}
#: Pass-through columns shown in the full table at most.
_MAX_EXTRA_COLUMNS = 8


def _with_level_details(ranking: pd.DataFrame, levels: pd.DataFrame) -> pd.DataFrame:
    """Ranking with ``name`` and σ columns filled from ``levels`` where missing."""
    out = ranking.reset_index(drop=True).copy()
    if levels is None or not len(levels) or "id" not in levels or "id" not in out:
        return out
    ok = levels
    if "status" in levels:
        ok = levels[levels["status"].map(_text).str.strip().str.lower().eq("ok")]
    ok = ok.drop_duplicates("id", keep="first")
    ok = ok.set_index(ok["id"].map(_text))
    ids = out["id"].map(_text)
    for col in ("name", "homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev"):
        if col not in ok:
            continue
        filled = ids.map(ok[col])
        if col in out:
            have = out[col].map(_text).ne("")
            out[col] = out[col].where(have, filled)
        else:
            out[col] = filled
    return out


def _shortlist(ranking: pd.DataFrame, meta: dict) -> tuple[pd.DataFrame, str]:
    """Rows of the shortlist and a sentence saying how they were chosen.

    A boolean ``shortlist`` column decides when present; otherwise the first
    ``shortlist_size`` rows (default 10) that pass every check.  When none
    pass, the best rows are shown with a note saying so.
    """
    size = _num(_get(meta, "rank", "shortlist_size"))
    size = 10 if math.isnan(size) or size < 0 else int(size)
    if "shortlist" in ranking:
        mask = ranking["shortlist"].map(lambda v: _text(v).strip().lower() in ("true", "1", "yes"))
        return ranking[mask], "rows marked for the shortlist by the ranking"
    if "passes" in ranking:
        passes = ranking["passes"].map(lambda v: _text(v).strip().lower() in ("true", "1", "yes"))
        if passes.any():
            return ranking[passes].head(size), (f"the best {size} candidates that pass every check"
                                                if passes.sum() >= size else
                                                f"all {int(passes.sum())} candidates that pass every check")
        return ranking.head(size), (f"no candidate passes every check; the best {min(size, len(ranking))} "
                                    "rows are shown so the discussion can start somewhere")
    return ranking.head(size), f"the best {size} rows of the ranking"


def _role_badge(role) -> str:
    """Small coloured label for donor / acceptor (escaped text otherwise)."""
    r = _text(role).strip()
    if not r:
        return ""
    cls = {"donor": "role-donor", "acceptor": "role-acceptor"}.get(r.lower(), "role-other")
    return f'<span class="role {cls}">{_e(r)}</span>'


def _target_label(meta: dict) -> str:
    """``"P(PCE > 10 %)"`` with the recorded target."""
    t = _num(_get(meta, "rank", "target_pce_pct"))
    return (f'P(PCE &gt; <span class="nb">{t:g} %</span>)' if not math.isnan(t)
            else "P(PCE &gt; target)")


def _prob(value) -> str:
    """Probability as a percentage (``"43 %"``)."""
    x = _num(value)
    if math.isnan(x):
        return "\u2014"
    pct = 100.0 * x
    if 0 < pct < 1:
        return "&lt;1 %"
    if 99 < pct < 100:
        return "&gt;99 %"
    return f"{pct:.0f} %"


def _num_cell(value, shown: str, extra_class: str = "") -> str:
    """``<td data-value=…>shown</td>`` (``shown`` is already HTML; right-aligned by the CSS)."""
    cls = f' class="{extra_class}"' if extra_class else ""
    return f'<td{cls} data-value="{_dv(value)}">{shown}</td>'


def _header(cells) -> str:
    """``<thead>`` from ``(label_html, sort_type, first_direction, key)`` tuples."""
    out = []
    for label, kind, first, key in cells:
        attrs = f' data-key="{key}"' if key else ""
        if kind == "num":
            attrs += ' class="num-h"'
        if kind:
            attrs += f' data-sort="{kind}"'
            if first:
                attrs += f' data-first="{first}"'
        if key == "rank":
            attrs += ' aria-sort="ascending"'
        out.append(f'<th scope="col"{attrs}>{label}</th>')
    return "<thead><tr>" + "".join(out) + "</tr></thead>"


def _candidate_cell(row, with_smiles: bool) -> str:
    """Id (bold), name and role badge; optionally the SMILES, shortened."""
    ident, name = _text(row.get("id")), _text(row.get("name"))
    parts = [f'<span class="cid">{_e(ident)}</span>']
    if name and name != ident:
        parts.append(f'<span class="cname">{_e(name)}</span>')
    badge = _role_badge(row.get("role"))
    if badge:
        parts.append(badge)
    if with_smiles:
        smi = _text(row.get("smiles"))
        if smi:
            parts.append(f'<code class="smi" title="{_e(smi)}">{_e(_shorten(smi, 48))}</code>')
    return f'<td class="cand" data-value="{_e(ident)}">' + "".join(parts) + "</td>"


def _level_cells(row) -> list[str]:
    """HOMO, LUMO, optical gap (each ± σ), ΔLUMO, ΔHOMO, Voc, Jsc cells."""
    cells = [
        _num_cell(row.get("homo_ev"), _pm_html(row.get("homo_ev"), row.get("homo_sigma_ev"))),
        _num_cell(row.get("lumo_ev"), _pm_html(row.get("lumo_ev"), row.get("lumo_sigma_ev"))),
        _num_cell(row.get("gap_opt_ev"), _pm_html(row.get("gap_opt_ev"), row.get("gap_opt_sigma_ev"))),
        _num_cell(row.get("delta_lumo_ev"), _fmt(row.get("delta_lumo_ev"))),
        _num_cell(row.get("delta_homo_ev"), _fmt(row.get("delta_homo_ev"))),
        _num_cell(row.get("voc_v"), _fmt(row.get("voc_v"))),
        _num_cell(row.get("jsc_ma_cm2"), _fmt(row.get("jsc_ma_cm2"), 1)),
    ]
    return cells


def _pce_cell(row) -> str:
    """PCE ± σ, emphasised."""
    value = _fmt(row.get("pce_pct"), 1)
    rest = _pm_html(row.get("pce_pct"), row.get("pce_sigma_pct"), 1)[len(value):]
    return _num_cell(row.get("pce_pct"), f"<strong>{value}</strong>{rest}", "pce")


_LEVEL_HEADERS = [
    ('HOMO <span class="unit">[eV]</span>', "num", "descending", "homo_ev"),
    ('LUMO <span class="unit">[eV]</span>', "num", "descending", "lumo_ev"),
    ('Optical gap <span class="unit">[eV]</span>', "num", "", "gap_opt_ev"),
    ('\u0394LUMO <span class="unit">[eV]</span>', "num", "descending", "delta_lumo_ev"),
    ('\u0394HOMO <span class="unit">[eV]</span>', "num", "descending", "delta_homo_ev"),
    ('V<sub>oc</sub> <span class="unit">[V]</span>', "num", "descending", "voc_v"),
    ('J<sub>sc</sub> <span class="unit">[mA&#8239;cm<sup>\u22122</sup>]</span>', "num", "descending",
     "jsc_ma_cm2"),
    ('PCE <span class="unit">[%]</span>', "num", "descending", "pce_pct"),
]


def _shortlist_table(rows: pd.DataFrame, meta: dict) -> str:
    """The shortlist table with structure drawings."""
    head = _header([("Rank", "num", "", "rank"), ("Structure", "", "", ""),
                    ("Candidate", "text", "", "id")] + _LEVEL_HEADERS
                   + [(_target_label(meta), "num", "descending", "p_above_target"),
                      ("Notes", "", "", "flags")])
    body = []
    for _, row in rows.iterrows():
        ident = _text(row.get("id"))
        svg = molecule_svg(_text(row.get("smiles")), f"structure of {ident}")
        drawing = svg if svg is not None else '<span class="nostruct">no structure available</span>'
        rank = _num(row.get("rank"))
        body.append(
            f'<tr data-id="{_e(ident)}">'
            + _num_cell(rank, "" if math.isnan(rank) else f"{int(rank)}", "rank")
            + f'<td class="struct">{drawing}</td>'
            + _candidate_cell(row, with_smiles=True)
            + "".join(_level_cells(row))
            + _pce_cell(row)
            + _num_cell(row.get("p_above_target"), _prob(row.get("p_above_target")))
            + f'<td class="notes">{_flags_html(row.get("flags"), meta)}</td>'
            + "</tr>"
        )
    if not body:
        ncol = 13
        body.append(f'<tr><td colspan="{ncol}" class="empty">no candidates to show</td></tr>')
    return (f'<table class="sortable shortlist" id="shortlist-table">{head}<tbody>'
            + "\n".join(body) + "</tbody></table>")


def _passes_cell(value) -> str:
    """Check mark for rows that pass every check."""
    t = _text(value).strip().lower()
    if t in ("true", "1", "yes"):
        return '<td class="pass" data-value="1">yes</td>'
    if t in ("false", "0", "no"):
        return '<td class="fail" data-value="0">no</td>'
    return f'<td data-value="">{_e(value)}</td>'


def _full_table(ranking: pd.DataFrame, meta: dict) -> str:
    """Every ranked row, no drawings; pass-through columns at the end."""
    extra = [c for c in ranking.columns if c not in _KNOWN_RANKING][:_MAX_EXTRA_COLUMNS]
    head = _header([("Rank", "num", "", "rank"), ("Candidate", "text", "", "id")] + _LEVEL_HEADERS
                   + [(_target_label(meta), "num", "descending", "p_above_target"),
                      ("Passes", "num", "descending", "passes"), ("Notes", "", "", "flags")]
                   + [(_e(c), "text", "", "") for c in extra])
    body = []
    for _, row in ranking.iterrows():
        ident = _text(row.get("id"))
        rank = _num(row.get("rank"))
        codes = _flag_codes(row.get("flags"))
        notes = "; ".join(_e(describe_flag(c, meta)) for c in codes) or "\u2014"
        extras = "".join(f'<td class="extra">{_e(_shorten(_text(row.get(c)), 120))}</td>' for c in extra)
        body.append(
            f'<tr data-id="{_e(ident)}">'
            + _num_cell(rank, "" if math.isnan(rank) else f"{int(rank)}", "rank")
            + _candidate_cell(row, with_smiles=False)
            + "".join(_level_cells(row))
            + _pce_cell(row)
            + _num_cell(row.get("p_above_target"), _prob(row.get("p_above_target")))
            + _passes_cell(row.get("passes"))
            + f'<td class="notes-compact">{notes}</td>'
            + extras
            + "</tr>"
        )
    if not body:
        body.append('<tr><td colspan="14" class="empty">the ranking is empty</td></tr>')
    return (f'<table class="sortable full" id="full-table">{head}<tbody>'
            + "\n".join(body) + "</tbody></table>")


def _not_ranked(levels: pd.DataFrame, ranking: pd.DataFrame) -> tuple[str, int]:
    """Table of input rows that are not in the ranking, with their reasons."""
    if levels is None or not len(levels):
        return '<p class="quiet">No levels table was given, so unranked rows cannot be listed.</p>', 0
    ranked_ids = set(ranking["id"].map(_text)) if "id" in ranking else set()
    status = (levels["status"].map(_text).str.strip().str.lower() if "status" in levels
              else pd.Series("ok", index=levels.index))
    ids = levels["id"].map(_text) if "id" in levels else pd.Series("", index=levels.index)
    missing_ok = status.eq("ok") & ~ids.isin(ranked_ids)
    rows = levels[status.ne("ok") | missing_ok]
    if not len(rows):
        return '<p class="quiet">Every input row was ranked.</p>', 0
    body = []
    for idx, row in rows.iterrows():
        st = _text(row.get("status")).strip().lower() or "ok"
        err = _text(row.get("error")).strip()
        reason = _text(row.get("reason")).strip()
        if st == "ok":
            why = "computed, but absent from the ranking (removed by the ranking settings)"
        elif err and reason and reason not in err:
            why = f"{reason}: {err}"
        else:
            why = err or reason or "no reason recorded"
        cls = {"rejected": "st-rejected", "failed": "st-failed"}.get(st, "st-other")
        smi = _text(row.get("smiles"))
        name = _text(row.get("name"))
        body.append(
            f'<tr data-id="{_e(row.get("id"))}"><td class="cid">{_e(row.get("id"))}</td>'
            f'<td>{_e(name)}</td><td><span class="status {cls}">{_e(st)}</span></td>'
            f'<td class="reason">{_e(why)}</td>'
            f'<td><code class="smi" title="{_e(smi)}">{_e(_shorten(smi, 60))}</code></td></tr>'
        )
    table = ('<table class="unranked" id="not-ranked-table"><thead><tr><th scope="col">Id</th>'
             '<th scope="col">Name</th><th scope="col">Status</th><th scope="col">Reason</th>'
             '<th scope="col">SMILES as given</th></tr></thead><tbody>' + "\n".join(body)
             + "</tbody></table>")
    return table, len(rows)


# --------------------------------------------------------------------------- #
# Header blocks
# --------------------------------------------------------------------------- #
def _dl(items) -> str:
    """Definition list from ``(term, value_html)`` pairs."""
    return "<dl>" + "".join(f"<dt>{t}</dt><dd>{v}</dd>" for t, v in items) + "</dl>"


def _partner_block(partner: dict, meta: dict) -> str:
    """Partner card: id, name, role, levels with σ, scale, source, provenance notes."""
    p = partner if isinstance(partner, dict) else {}

    def lev(key):
        x = _num(p.get(key))
        if math.isnan(x):
            return _NOT_RECORDED
        s = _num(p.get(key.replace("_ev", "_sigma_ev")))
        return _fmt_pm(x, s) + " eV"

    source = _text(p.get("source")).strip()
    doi = _text(p.get("doi")).strip()
    if doi:
        source = f"{source} (doi:{doi})" if source else f"doi:{doi}"
    name = _text(p.get("name")).strip()
    items = [
        ("Partner", f'<span class="cid">{_e(p.get("id")) or _NOT_RECORDED}</span>'
                    + (f" \u2014 {_e(name)}" if name else "")),
        ("Role", (_e(p.get("role")) or _NOT_RECORDED)
         + (" (assumed: the complement of the candidates\u2019 role)"
            if _get(meta, "partner_role_assumed") is True else "")),
        ("HOMO", lev("homo_ev")),
        ("LUMO", lev("lumo_ev")),
        ("Optical gap", lev("gap_opt_ev")),
        ("Energy scale", _e(p.get("scale")) or _NOT_RECORDED),
        ("Source", _e(source) or _NOT_RECORDED),
    ]
    if p.get("from_memory") is True:
        items.append(("Provenance", "values recalled from the literature, not read from the source "
                                    "\u2014 check them before relying on absolute numbers"))
    notes = _text(p.get("notes")).strip()
    if notes:
        items.append(("Notes", f'<span class="small">{_e(_shorten(notes, 600))}</span>'))
    return '<section class="card" id="card-partner"><h3>Partner material</h3>' + _dl(items) + "</section>"


_GEOMETRY_WORDS = {
    "ff": "force-field geometry",
    "xtb": "force-field conformer, then xTB-optimised geometry",
}
_CALIBRATION_LABELS = {
    "ip": "ionisation energy (gas)",
    "ea": "electron affinity (gas)",
    "gap_opt": "optical gap (gas/solution)",
    "homo_film": "HOMO, film shift",
    "lumo_film": "LUMO, film shift",
    "gap_opt_film": "optical gap, film shift",
}


def _stat(entry, key):
    """A statistic of one calibration model, at the top level or nested."""
    if isinstance(entry, Real) and key == "loo_mae_ev":
        return _num(entry)
    if not isinstance(entry, dict):
        return math.nan
    for node in (entry, entry.get("stats"), entry.get("statistics")):
        if isinstance(node, dict) and key in node:
            return _num(node[key])
    return math.nan


def _protocol_block(meta: dict) -> str:
    """Computation and calibration card."""
    lm = _get(meta, "levels_meta", default={}) or {}
    proto = lm.get("protocol") if isinstance(lm.get("protocol"), dict) else {}
    el = proto.get("electronic") if isinstance(proto.get("electronic"), dict) else {}
    st = proto.get("structures") if isinstance(proto.get("structures"), dict) else {}
    method = _text(el.get("method"))
    engine = _text(el.get("engine"))
    if method or engine:
        m = " ".join(x for x in (method, f"({engine})" if engine else "") if x)
        m += " \u0394SCF: vertical ionisation energy and electron affinity at the neutral geometry"
        solvent = _text(el.get("solvent"))
        m += f"; implicit solvent {solvent}" if solvent else "; gas phase"
    else:
        m = _text(lm.get("method"))
    geometry = _text(st.get("geometry"))
    if geometry:
        ff = _text(st.get("forcefield")).upper()
        words = _GEOMETRY_WORDS.get(geometry, geometry)
        g = f"RDKit ETKDG conformers, {ff + ' ' if ff else ''}{words}"
        if _text(st.get("ranking_method")):
            g += f"; conformer chosen by lowest {_text(st.get('ranking_method'))} energy"
    else:
        g = _text(lm.get("geometry"))
    items = [
        ("Method", _e(m) or _NOT_RECORDED),
        ("Geometry route", _e(g) or _NOT_RECORDED),
        ("Protocol id", f"<code>{_e(lm.get('protocol_id'))}</code>" if _text(lm.get("protocol_id"))
         else _NOT_RECORDED),
        ("Calibration models", _e(lm.get("models")) or _NOT_RECORDED),
        ("Levels computed by", f"dascreen {_e(lm.get('dascreen'))}" if _text(lm.get("dascreen"))
         else _NOT_RECORDED),
    ]
    levels_path = _text(_get(meta, "levels", "path"))
    if levels_path:
        digest = _text(_get(meta, "levels", "sha256"))[:12]
        items.append(("Levels file", f"<code>{_e(Path(levels_path).name)}</code>"
                                     + (f" (sha256 {_e(digest)}\u2026)" if digest else "")))
    cal = lm.get("calibration")
    if isinstance(cal, dict) and cal:
        rows = []
        for name, entry in cal.items():
            n = _stat(entry, "n")
            mae, rmse = _stat(entry, "loo_mae_ev"), _stat(entry, "loo_rmse_ev")
            rows.append(
                f"<tr><td>{_e(_CALIBRATION_LABELS.get(_text(name), _text(name)))}</td>"
                f'<td class="num">{"" if math.isnan(n) else int(n)}</td>'
                f'<td class="num">{_fmt(mae, 3) if not math.isnan(mae) else _NOT_RECORDED}</td>'
                f'<td class="num">{_fmt(rmse, 3) if not math.isnan(rmse) else _NOT_RECORDED}</td></tr>')
        cal_html = ('<table class="mini"><caption>Calibration, leave-one-out errors</caption><thead><tr>'
                    '<th scope="col">Model</th><th scope="col">n</th><th scope="col">MAE [eV]</th>'
                    '<th scope="col">RMSE [eV]</th></tr></thead><tbody>' + "".join(rows) + "</tbody></table>")
    else:
        cal_html = f'<p class="quiet">Calibration statistics: {_NOT_RECORDED}.</p>'
    return ('<section class="card" id="card-protocol"><h3>Computation &amp; calibration</h3>'
            + _dl(items) + cal_html + "</section>")


def _device_block(meta: dict) -> str:
    """Device-model and ranking-settings card."""
    dev = _get(meta, "device", default={}) or {}
    rank = _get(meta, "rank", default={}) or {}

    def val(d, key, unit="", digits=2):
        x = _num(d.get(key)) if isinstance(d, dict) else math.nan
        if math.isnan(x):
            t = _text(d.get(key)) if isinstance(d, dict) else ""
            return _e(t) if t else _NOT_RECORDED
        return f"{_fmt(x, digits)}{(' ' + unit) if unit else ''}"

    absorber = _text(dev.get("absorber"))
    absorber_words = {"donor": "donor only (published model)",
                      "both": "both materials (smaller gap of the pair)"}.get(absorber, absorber)
    spectrum = _text(dev.get("spectrum"))
    items = [
        ("EQE", val(dev, "eqe")),
        ("Fill factor", val(dev, "ff")),
        ("Voltage loss", val(dev, "loss_v", "V")),
        ("Min. \u0394LUMO", val(dev, "min_delta_lumo_ev", "eV")),
        ("Min. \u0394HOMO", val(dev, "min_delta_homo_ev", "eV")
         + (" (checked only when both absorb)" if absorber == "donor" else "")),
        ("Light absorbed by", _e(absorber_words) or _NOT_RECORDED),
        ("Spectrum", (_e(spectrum) + " AM1.5G") if spectrum and "AM1.5" not in spectrum
         else (_e(spectrum) or _NOT_RECORDED)),
        ("Incident power", val(dev, "pin_w_m2" if not math.isnan(_num(dev.get("pin_w_m2")))
                               else "incident_power_w_m2", "W&#8239;m<sup>\u22122</sup>")),
    ]
    ritems = [
        ("Target PCE", val(rank, "target_pce_pct", "%", 1)),
        ("Shortlist size", _e(rank.get("shortlist_size")) if _text(rank.get("shortlist_size"))
         else _NOT_RECORDED),
        ("Sorted by", f"<code>{_e(rank.get('sort_by'))}</code>" if _text(rank.get("sort_by"))
         else _NOT_RECORDED),
    ]
    lo, hi = _num(rank.get("gap_min_ev")), _num(rank.get("gap_max_ev"))
    if not (math.isnan(lo) or math.isnan(hi)):
        ritems.append(("Gap window", f"{_fmt(lo)}\u2013{_fmt(hi)} eV"))
    return ('<section class="card" id="card-device"><h3>Device model</h3>'
            '<p class="quiet">Scharber model: V<sub>oc</sub> = (LUMO<sub>acc</sub> \u2212 HOMO<sub>don</sub>)/e '
            '\u2212 loss; J<sub>sc</sub> = EQE \u00b7 q \u00b7 photon flux above the gap; '
            'PCE = V<sub>oc</sub>J<sub>sc</sub>FF/P<sub>in</sub>.</p>'
            + _dl(items) + "<h3>Ranking settings</h3>" + _dl(ritems) + "</section>")


def _counts_block(meta: dict, levels: pd.DataFrame, ranking: pd.DataFrame, n_short: int,
                  n_pass: int | None) -> str:
    """Counts strip: input rows, computed, ranked, passing, shortlisted, not ranked."""
    counts = _get(meta, "counts", default={}) or {}
    status = (levels["status"].map(_text).str.strip().str.lower()
              if levels is not None and "status" in levels else None)

    def pick(key, fallback):
        x = _num(counts.get(key)) if isinstance(counts, dict) else math.nan
        return fallback if math.isnan(x) else int(x)

    rows = pick("rows", len(levels) if levels is not None else None)
    ok = pick("ok", int(status.eq("ok").sum()) if status is not None else None)
    rej = pick("rejected", int(status.eq("rejected").sum()) if status is not None else None)
    fail = pick("failed", int(status.eq("failed").sum()) if status is not None else None)
    items = [("input rows", rows), ("computed", ok), ("ranked", len(ranking)),
             ("pass every check", n_pass), ("shortlisted", n_short), ("rejected", rej), ("failed", fail)]
    cells = "".join(
        f'<div class="count"><span class="n">{_NOT_RECORDED if v is None else v}</span>'
        f'<span class="what">{t}</span></div>' for t, v in items)
    return f'<div class="counts" id="counts">{cells}</div>'


# --------------------------------------------------------------------------- #
# Page
# --------------------------------------------------------------------------- #
_CSS = """
:root{--teal-9:#0b3b45;--teal-7:#137079;--teal-2:#d7ebe7;--teal-1:#eef6f4;--amber-6:#c9791f;
--amber-2:#f7e3c4;--amber-1:#fcf4e6;--slate-9:#1f2933;--slate-7:#3e4c59;--slate-5:#7b8794;
--slate-2:#d9dee4;--slate-1:#f2f4f6;--ivory:#fbfaf6;--brick:#a4362b;--brick-1:#f8e6e3}
*{box-sizing:border-box}
html{background:var(--ivory)}
body{margin:0;color:var(--slate-9);font:15px/1.45 system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",
Arial,sans-serif;font-variant-numeric:tabular-nums}
header.top{background:var(--teal-9);color:#f4efe4;padding:22px 32px 18px;border-bottom:4px solid var(--amber-6)}
header.top h1{margin:0;font-size:25px;font-weight:650;letter-spacing:.01em}
header.top h1 .mark{color:var(--amber-2);font-weight:750}
header.top .sub{margin:4px 0 0;font-size:15px;color:#cfe3de}
header.top .stamp{margin:8px 0 0;font-size:12.5px;color:#9fc3bd}
main{max-width:1480px;margin:0 auto;padding:18px 32px 8px}
h2{font-size:19px;color:var(--teal-9);margin:30px 0 8px;padding-bottom:4px;border-bottom:2px solid var(--teal-2)}
h2 .num{display:inline-block;min-width:1.6em;color:var(--amber-6)}
h3{font-size:13px;text-transform:uppercase;letter-spacing:.07em;color:var(--teal-7);margin:0 0 8px}
.caution{background:var(--amber-1);border-left:5px solid var(--amber-6);padding:10px 16px;margin:4px 0 16px;
border-radius:0 6px 6px 0;font-size:14px}
.caution strong{color:#7a4a10}
.counts{display:flex;flex-wrap:wrap;gap:10px;margin:0 0 16px}
.count{background:#fff;border:1px solid var(--slate-2);border-radius:8px;padding:6px 14px;min-width:110px}
.count .n{display:block;font-size:21px;font-weight:650;color:var(--teal-9)}
.count .what{font-size:12px;color:var(--slate-7)}
.cards{display:grid;grid-template-columns:repeat(auto-fit,minmax(320px,1fr));gap:14px}
.card{background:#fff;border:1px solid var(--slate-2);border-radius:8px;padding:14px 16px}
.card h3:not(:first-child){margin-top:14px}
dl{display:grid;grid-template-columns:max-content 1fr;gap:3px 14px;margin:0;font-size:13.5px}
dt{color:var(--slate-7)}dd{margin:0}
p.quiet{color:var(--slate-7);font-size:13px;margin:6px 0}
.small{font-size:12px;color:var(--slate-7)}
.summary{font-size:15px;margin:4px 0 10px}
.tablewrap{overflow-x:auto;background:#fff;border:1px solid var(--slate-2);border-radius:8px}
table{border-collapse:collapse;width:100%}
th,td{padding:6px 9px;text-align:left;vertical-align:middle;border-bottom:1px solid var(--slate-1)}
thead th{background:var(--teal-1);color:var(--teal-9);font-size:12.5px;font-weight:650;position:sticky;top:0;
vertical-align:bottom;border-bottom:2px solid var(--teal-2);z-index:1}
thead th.num-h{text-align:right}
th.js-sort{cursor:pointer;user-select:none}
th.js-sort:hover,th.js-sort:focus{background:var(--teal-2);outline:none}
th.js-sort::after{content:"\\2195";color:var(--slate-5);margin-left:4px;font-size:11px}
th[aria-sort=ascending].js-sort::after{content:"\\25B2";color:var(--amber-6)}
th[aria-sort=descending].js-sort::after{content:"\\25BC";color:var(--amber-6)}
tbody tr:nth-child(even){background:#fafbfb}
tbody tr:hover{background:var(--amber-1)}
td.num,td[data-value]{text-align:right;white-space:nowrap}
td.rank{font-weight:700;color:var(--teal-7);font-size:16px;text-align:center}
td.pce strong{color:var(--teal-9)}
td.struct{padding:2px 4px;width:176px}
svg.mol{display:block;width:170px;height:116px}
td.cand{min-width:140px;max-width:200px;text-align:left;white-space:normal}
.pm{display:block;font-size:11.5px;color:var(--slate-5)}
td.pce .pm{color:var(--slate-7)}
.unit{display:block;font-weight:500;color:var(--slate-7);font-size:11px}
.nb{white-space:nowrap}
.cid{font-weight:650;color:var(--slate-9);word-break:break-word}
.cname{display:block;font-size:13px;color:var(--slate-7)}
code{font:12px/1.3 ui-monospace,SFMono-Regular,Menlo,Consolas,monospace}
code.smi{display:block;color:var(--slate-5);word-break:break-all;margin-top:3px;font-size:11px}
.role{display:block;width:fit-content;font-size:11px;border-radius:9px;padding:0 8px;margin-top:3px;font-weight:600}
.role-donor{background:var(--teal-2);color:var(--teal-9)}
.role-acceptor{background:var(--amber-2);color:#6d420c}
.role-other{background:var(--slate-1);color:var(--slate-7)}
ul.flags{margin:0;padding-left:16px;font-size:12.5px;min-width:170px;max-width:250px}
li.flag{color:#7d2a21}
li.flag.info{color:var(--slate-7)}
li.unknown{color:var(--slate-7);font-family:ui-monospace,monospace}
.ok-note{color:var(--teal-7);font-size:12.5px}
td.notes-compact{font-size:12px;color:#7d2a21;max-width:340px}
td.pass{color:var(--teal-7);font-weight:650;text-align:center}td.fail{color:var(--brick);text-align:center}
td.extra{font-size:12.5px;color:var(--slate-7)}
td.empty{color:var(--slate-5);text-align:center;padding:18px}
.nostruct{color:var(--slate-5);font-size:12px}
details{margin:14px 0}
details>summary{cursor:pointer;font-weight:650;color:var(--teal-7);padding:6px 0}
table.full td,table.full th{font-size:12.5px;padding:4px 8px}
table.mini{width:auto;margin-top:10px;font-size:12.5px}
table.mini caption{text-align:left;color:var(--slate-7);font-size:12px;padding-bottom:3px}
table.mini td,table.mini th{padding:2px 10px 2px 0;border:none;background:none;position:static}
figure{margin:0;background:#fff;border:1px solid var(--slate-2);border-radius:8px;padding:12px 14px}
figure svg{display:block;width:100%;height:auto}
figure svg *{stroke-linejoin:round;stroke-linecap:butt}
figcaption{font-size:13px;color:var(--slate-7);margin-top:8px;max-width:1000px}
.figs{display:grid;grid-template-columns:1fr;gap:16px}
table.unranked td.reason{color:#7d2a21;font-size:13.5px}
.status{font-size:11.5px;font-weight:650;border-radius:9px;padding:1px 8px}
.st-rejected{background:var(--amber-2);color:#6d420c}
.st-failed{background:var(--brick-1);color:var(--brick)}
.st-other{background:var(--slate-1);color:var(--slate-7)}
footer{max-width:1480px;margin:26px auto 0;padding:14px 32px 30px;border-top:1px solid var(--slate-2);
font-size:13.5px;color:var(--slate-7)}
footer ul{margin:6px 0;padding-left:18px}
footer a{color:var(--teal-7);font-weight:600}
@media print{header.top{background:none;color:#000;border-bottom:2px solid #000}
thead th{position:static}.tablewrap{overflow:visible;border:none}details{display:block}}
"""

_SCRIPT = """
(function () {
  "use strict";
  function key(cell, kind) {
    var raw = cell ? cell.getAttribute("data-value") : null;
    if (raw === null) { raw = cell ? cell.textContent : ""; }
    if (kind === "num") {
      var x = parseFloat(raw);
      return isFinite(x) ? x : null;
    }
    raw = String(raw).trim();
    return raw === "" ? null : raw;
  }
  var collator = new Intl.Collator(undefined, {numeric: true, sensitivity: "base"});
  function sortBy(table, th, col) {
    var kind = th.getAttribute("data-sort");
    var current = th.getAttribute("aria-sort");
    var first = th.getAttribute("data-first") || "ascending";
    var dir = current === "ascending" ? "descending" : current === "descending" ? "ascending" : first;
    var body = table.tBodies[0];
    var rows = Array.prototype.slice.call(body.rows).map(function (tr, i) {
      return {tr: tr, i: i, k: key(tr.cells[col], kind)};
    });
    var sign = dir === "ascending" ? 1 : -1;
    rows.sort(function (a, b) {
      if (a.k === null && b.k === null) { return a.i - b.i; }
      if (a.k === null) { return 1; }
      if (b.k === null) { return -1; }
      var c = kind === "num" ? (a.k < b.k ? -1 : a.k > b.k ? 1 : 0) : collator.compare(a.k, b.k);
      return c !== 0 ? sign * c : a.i - b.i;
    });
    var frag = document.createDocumentFragment();
    rows.forEach(function (r) { frag.appendChild(r.tr); });
    body.appendChild(frag);
    Array.prototype.forEach.call(th.parentNode.cells, function (h) { h.removeAttribute("aria-sort"); });
    th.setAttribute("aria-sort", dir);
  }
  Array.prototype.forEach.call(document.querySelectorAll("table.sortable"), function (table) {
    if (!table.tHead || !table.tBodies.length) { return; }
    Array.prototype.forEach.call(table.tHead.rows[0].cells, function (th, col) {
      if (!th.hasAttribute("data-sort")) { return; }
      th.classList.add("js-sort");
      th.tabIndex = 0;
      th.title = "Sort by this column";
      th.addEventListener("click", function () { sortBy(table, th, col); });
      th.addEventListener("keydown", function (ev) {
        if (ev.key === "Enter" || ev.key === " ") { ev.preventDefault(); sortBy(table, th, col); }
      });
    });
  });
})();
"""


def _candidates_word(partner: dict) -> str:
    """"donors" against an acceptor partner, "acceptors" against a donor, else "materials"."""
    role = _text(partner.get("role")).strip().lower() if isinstance(partner, dict) else ""
    return {"acceptor": "donors", "donor": "acceptors"}.get(role, "materials")


def _created(meta: dict) -> str:
    """Report date: ``meta["created"]`` when given (tests), else now in UTC."""
    given = _text(meta.get("created")) if isinstance(meta, dict) else ""
    if given:
        return given
    return datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")


def _summary_sentence(ranking: pd.DataFrame, partner_id: str, n_pass) -> str:
    """One sentence naming the best candidate."""
    if not len(ranking):
        return f"No candidate was ranked against {_e(partner_id) or 'the partner'}."
    best = ranking.iloc[0]
    pce = _fmt_pm(best.get("pce_pct"), best.get("pce_sigma_pct"), 1)
    passing = "" if n_pass is None else f"; {n_pass} pass every check"
    return (f"{len(ranking)} candidate(s) ranked against <strong>{_e(partner_id) or 'the partner'}</strong>"
            f"{passing}. Best estimate: <strong>{_e(best.get('id'))}</strong> at {pce} % PCE.")


def render_report(ranking: pd.DataFrame, levels: pd.DataFrame, partner: dict, meta: dict) -> str:
    """The report page as one HTML5 string.

    Parameters
    ----------
    ranking, levels, partner, meta
        As for :func:`write_report`.

    Returns
    -------
    str
        Complete, self-contained page.  Apart from the date line (set
        ``meta["created"]`` to fix it) the output depends only on the inputs.
    """
    meta = dict(meta or {})
    if not isinstance(partner, dict) or not partner:
        partner = _get(meta, "partner", default={}) or {}
    partner = dict(partner)
    if not _text(partner.get("role")).strip() and _text(meta.get("partner_role")).strip():
        partner["role"] = _text(meta.get("partner_role")).strip()  # the role the ranking used
    ranking = _with_level_details(ranking if ranking is not None else pd.DataFrame(), levels)
    short, how = _shortlist(ranking, meta)
    n_pass = None
    if "passes" in ranking:
        n_pass = int(ranking["passes"].map(lambda v: _text(v).strip().lower() in ("true", "1", "yes")).sum())
    n_short = len(short)
    if "passes" in short and "shortlist" not in short:  # best rows shown although none passes: none listed
        n_short = int(short["passes"].map(lambda v: _text(v).strip().lower() in ("true", "1", "yes")).sum())
    pid = _text(partner.get("id"))
    levels_fig = level_diagram_svg(short, partner, meta)
    map_fig, map_note = design_map_svg(ranking, list(short.index), partner, meta)
    unranked_html, n_unranked = _not_ranked(levels, ranking)
    lm = _get(meta, "levels_meta", default={}) or {}
    lv = _text(lm.get("dascreen")) if isinstance(lm, dict) else ""
    thr = _num(_get(meta, "device", "min_delta_lumo_ev"))
    n_diag = min(len(short), _DIAGRAM_MAX)

    exports = "".join(f'<li><a href="{_e(f)}">{_e(f)}</a> \u2014 {_e(d)}</li>' for f, d in EXPORTS)
    title = f"dascreen report \u2014 candidates against {pid}" if pid else "dascreen report"
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f'<meta name="generator" content="dascreen {_e(__version__)}">',
        f"<title>{_e(title)}</title>",
        f"<style>{_CSS}</style>",
        "</head>",
        "<body>",
        '<header class="top">',
        '<h1><span class="mark">dascreen</span> \u00b7 screening report</h1>',
        f'<p class="sub">Candidate {_candidates_word(partner)}'
        f' against partner <strong>{_e(pid) or _NOT_RECORDED}</strong>'
        + (f" ({_e(partner.get('name'))})" if _text(partner.get("name")) else "") + "</p>",
        f'<p class="stamp">Generated {_e(_created(meta))} \u00b7 dascreen {_e(__version__)}</p>',
        "</header>",
        "<main>",
        '<p class="caution" id="caution"><strong>Screening estimates.</strong> Every number on this page comes '
        "from a semi-empirical quantum-chemistry method with an empirical calibration and an idealised device "
        "model. The numbers are for ranking and for choosing what to discuss; they are not predicted "
        "measurements, and the \u00b1 values are model uncertainties, not guarantees. Making and handling any "
        "candidate follows your lab\u2019s chemical-safety rules, the safety data sheets of every reagent and "
        "local regulations.</p>",
        _counts_block(meta, levels, ranking, n_short, n_pass),
        '<h2 id="run"><span class="num">1</span>Run at a glance</h2>',
        '<div class="cards">',
        _partner_block(partner, meta),
        _protocol_block(meta),
        _device_block(meta),
        "</div>",
        '<h2 id="shortlist"><span class="num">2</span>Shortlist for discussion</h2>',
        f'<p class="summary">{_summary_sentence(ranking, pid, n_pass)}</p>',
        f'<p class="quiet">Shown: {_e(how)}. Levels on the vacuum scale, value \u00b1 1\u03c3. '
        "\u0394LUMO = LUMO(donor) \u2212 LUMO(acceptor), \u0394HOMO = HOMO(donor) \u2212 HOMO(acceptor). "
        "Click a column header to sort.</p>",
        f'<div class="tablewrap">{_shortlist_table(short, meta)}</div>',
        '<details id="all-ranked">',
        f"<summary>Every ranked candidate ({len(ranking)} rows)</summary>",
        f'<div class="tablewrap">{_full_table(ranking, meta)}</div>',
        "</details>",
        '<h2 id="figures"><span class="num">3</span>Level alignment and gap\u2013offset map</h2>',
        '<div class="figs">',
        f'<figure class="levels" id="figure-levels">{levels_fig}<figcaption><strong>Level alignment.</strong> '
        f"HOMO and LUMO of the {'first ' + str(n_diag) + ' ' if n_diag else ''}shortlisted candidates "
        "(numbered by rank) beside the partner, on the vacuum scale; shaded bands are \u00b11\u03c3. "
        "Arrows give \u0394LUMO in eV"
        + (f"; brick red marks offsets below {_fmt(thr)} eV" if not math.isnan(thr) else "")
        + ".</figcaption></figure>",
        f'<figure class="map" id="figure-map">{map_fig}<figcaption><strong>Gap\u2013offset map.</strong> '
        "Estimated PCE of the Scharber model with this run\u2019s device parameters, taking the donor HOMO "
        "as donor LUMO \u2212 optical gap, so the map depends on gap and offset only. Grey dots: every ranked "
        "candidate; amber diamonds: the shortlist, labelled by rank. A candidate\u2019s own estimate (tables) "
        "uses its computed HOMO and can differ from the colour under its marker. "
        f"{_e(map_note)}</figcaption></figure>",
        "</div>",
        f'<h2 id="not-ranked"><span class="num">4</span>Not ranked ({n_unranked})</h2>',
        '<p class="quiet">Input rows that were rejected while reading the input, whose computation '
        "failed, or that the ranking left out \u2014 listed so that nothing disappears.</p>",
        f'<div class="tablewrap">{unranked_html}</div>',
        "</main>",
        '<footer id="files">',
        '<h3>Files beside this report</h3>',
        f"<ul>{exports}</ul>",
        f"<p>Report written by dascreen {_e(__version__)}"
        + (f"; levels computed by dascreen {_e(lv)}" if lv else "")
        + ". The page is self-contained and works offline.</p>",
        "</footer>",
        f"<script>{_SCRIPT}</script>",
        "</body>",
        "</html>",
    ]
    return "\n".join(parts) + "\n"


def write_report(ranking: pd.DataFrame, levels: pd.DataFrame, partner: dict, meta: dict,
                 out_dir: Path) -> Path:
    """Write ``report.html`` and ``ranking.safe.csv`` for one ranking.

    Parameters
    ----------
    ranking : pandas.DataFrame
        Best first, columns of the ranking contract (``rank, id, smiles, role,
        homo_ev, lumo_ev, gap_opt_ev, partner, delta_lumo_ev, delta_homo_ev,
        voc_v, jsc_ma_cm2, ff, pce_pct, pce_sigma_pct, p_above_target, passes,
        flags``), optionally ``name`` and σ columns (filled from ``levels``
        by id when absent) and a boolean ``shortlist``.
    levels : pandas.DataFrame
        The full levels table (every input row, ``status`` and ``error``);
        rows that are not ok, or not ranked, appear in the "Not ranked"
        section.
    partner : dict
        Partner levels: ``id, name, role, homo_ev, lumo_ev, gap_opt_ev,
        scale, source`` and σ keys; an empty dict falls back to
        ``meta["partner"]``.
    meta : dict
        ``device`` (model parameters), ``rank`` (target, shortlist size,
        sort key, gap window), ``levels_meta`` (version, protocol id,
        protocol, models, calibration statistics), ``counts`` and, for
        reproducible output, ``created`` (the date line).  Missing keys are
        shown as "not recorded".
    out_dir : path-like
        Folder for the two files (created if missing).

    Returns
    -------
    pathlib.Path
        Path of ``report.html``.

    Notes
    -----
    Both files are written atomically (temporary file + :func:`os.replace`)
    and made readable for everyone (mode 0644): reports are meant to be shared.
    The shortlist is the ``shortlist`` column when present, else the first
    ``meta["rank"]["shortlist_size"]`` rows (default 10) that pass every
    check.  Structure drawings are made for the shortlist only, which keeps
    the page near 1 MB for 1000 ranked rows.

    Examples
    --------
    >>> import tempfile, pandas as pd
    >>> from pathlib import Path
    >>> r = pd.DataFrame({"rank": [1], "id": ["demo"], "smiles": ["c1ccsc1"], "role": ["donor"],
    ...                   "homo_ev": [-5.4], "lumo_ev": [-3.9], "gap_opt_ev": [1.5],
    ...                   "delta_lumo_ev": [0.4], "pce_pct": [9.8], "passes": [True], "flags": [""]})
    >>> out = write_report(r, pd.DataFrame(), {"id": "ref", "lumo_ev": -4.3}, {"created": "x"},
    ...                    Path(tempfile.mkdtemp()))
    >>> out.name, (out.parent / "ranking.safe.csv").exists()
    ('report.html', True)
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    page = render_report(ranking, levels, partner, meta)
    target = out_dir / "report.html"
    with atomic_path(target) as tmp:
        with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(page)
        os.chmod(tmp, _FILE_MODE)
    with atomic_path(out_dir / "ranking.safe.csv") as tmp:
        source = ranking if ranking is not None else pd.DataFrame()
        safe_csv_frame(source).to_csv(tmp, index=False, lineterminator="\n")
        os.chmod(tmp, _FILE_MODE)
    return target
