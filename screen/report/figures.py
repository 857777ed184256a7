"""The report's two Matplotlib figures as inline SVG: level alignment and the gap–offset efficiency map.

References
----------
.. [1] M. C. Scharber, D. Mühlbacher, M. Koppe, P. Denk, C. Waldauf,
   A. J. Heeger, C. J. Brabec, "Design rules for donors in bulk-heterojunction
   solar cells — towards 10 % energy-conversion efficiency",
   Adv. Mater. 18 (2006) 789–794. :doi:`10.1002/adma.200501717`
"""

from __future__ import annotations

import contextlib
import io
import math
import re
import warnings
from functools import lru_cache

import numpy as np
import pandas as pd

from screen.report.format import esc, fmt, get, num, shorten, text, texts

__all__ = ["level_diagram_svg", "design_map_svg", "DIAGRAM_MAX", "BELOW_MARK"]

#: Candidates drawn in the level-alignment figure at most.
DIAGRAM_MAX = 12
#: Mark after an offset (or a dye's driving force) below its threshold; such arrows are also dashed
BELOW_MARK = "\u2717"
#: Line style of an arrow below its threshold
BELOW_LS = (0, (3, 2))
_DECIMAL = re.compile(r"(-?\d+\.\d+)")  # captured: re.split keeps the numbers
_GEOMETRY_ATTRIBUTE = re.compile(r'\s(d|x|y|transform|points)="([^"]*)"')
_ID_ATTRIBUTE = re.compile(r'id="([^"]+)"')
_WORD = re.compile(r"\w")
#: one tag of Matplotlib's SVG (its writer escapes "<" and ">" in attribute values and text alike)
_TAG = re.compile(r"(<[^<>]*>)")
#: joins the tags of a drawing for one pass of the rewrites (a character XML 1.0 does not allow)
_TAG_JOIN = "\x00"

# Palette: deep teal, warm amber, slate, ivory, brick (warnings).
_TEAL_DARK = "#0b3b45"
_TEAL = "#137079"
_AMBER = "#d4882b"
_AMBER_DARK = "#9a5a12"
_SLATE = "#3e4c59"
_SLATE_LIGHT = "#9aa5b1"
_BRICK = "#a4362b"
#: hatch of the map's not-viable region: 3.2:1 on its #eef0f2 ground (WCAG 2.1 non-text contrast 3:1; an accessibility
#: audit measured 2.2:1 for the former #9aa5b1)
_HATCH = "#7b8794"
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
    "hatch.color": _HATCH,
    "hatch.linewidth": 0.6,
    "path.simplify": True,
}


# --------------------------------------------------------------------------- #
# SVG serialisation
# --------------------------------------------------------------------------- #
def _short_number(number: str) -> str:
    """A decimal number of Matplotlib's SVG rounded to 0.01 without trailing zeros (SVG user units are pt).

    Examples
    --------
    >>> _short_number("12.345678"), _short_number("3.000000"), _short_number("-0.001")
    ('12.35', '3', '0')
    """
    out = f"{float(number):.2f}".rstrip("0").rstrip(".")
    return "0" if out in ("-0", "") else out


def _round_token(token: str) -> str:
    """Every decimal number of one white-space-free piece of a geometry attribute rounded to 0.01.

    Examples
    --------
    >>> _round_token("12.345678"), _round_token("translate(1.004"), _round_token("L")
    ('12.35', 'translate(1', 'L')
    """
    if _DECIMAL.fullmatch(token):
        return _short_number(token)
    return _DECIMAL.sub(lambda number: _short_number(number.group(0)), token)


def _round_geometry(svg: str) -> str:
    """Every decimal number of the geometry attributes (``d, x, y, transform, points``) rounded to 0.01.

    Runs of white space inside those attributes become one space, and the
    space before the attribute name a plain space.  An attribute is split at
    its white space (no number spans it) and each distinct piece is rounded
    once (a map has ~33 000 numbers, ~8 000 of them distinct).

    Examples
    --------
    >>> _round_geometry('<path d="M 1.234567 2.000000\\nL 3.5 -0.0001"/>')
    '<path d="M 1.23 2 L 3.5 0"/>'
    """
    done: dict[str, str] = {}

    def attribute(match: re.Match) -> str:
        tokens = match.group(2).split()
        value = " ".join([done[t] if t in done else done.setdefault(t, _round_token(t)) for t in tokens])
        return f' {match.group(1)}="{value}"'

    return _GEOMETRY_ATTRIBUTE.sub(attribute, svg)


def _prefixed_ids(svg: str, prefix: str) -> str:
    """Every ``id="…"`` attribute (``id`` not preceded by a word character) given ``prefix``.

    The same as ``re.sub(r'\\bid="([^"]+)"', …)``; searching for the literal
    ``id="`` and checking the character before it is much faster on a large
    drawing than a pattern that begins with ``\\b``.

    Examples
    --------
    >>> _prefixed_ids('<g id="a"><g gid="b" xml:id="c">', "p")
    '<g id="p-a"><g gid="b" xml:id="p-c">'
    """
    parts, last, start = [], 0, 0
    while (match := _ID_ATTRIBUTE.search(svg, start)) is not None:
        if match.start() and _WORD.match(svg, match.start() - 1):  # "gid=": no word boundary before "id"
            start = match.start() + 1
            continue
        parts += [svg[last:match.start()], f'id="{prefix}-{match.group(1)}"']
        last = start = match.end()
    parts.append(svg[last:])
    return "".join(parts)


def _in_tags(svg: str, edit) -> str:
    """``svg`` with ``edit`` (a function of text) applied to its tags only, never to text between them.

    The rewrites of ids, references and geometry matched the text of labels as well: an id
    ``K id="Z" d="1.234567"`` was drawn as ``K id="fig-levels-Z" d="1…`` (a security audit). The tags are
    rewritten in one pass, joined by a character no XML text holds.

    Examples
    --------
    >>> _in_tags('<text x="1.234567">K id="Z" d="1.234567"</text>', _round_geometry)
    '<text x="1.23">K id="Z" d="1.234567"</text>'
    """
    parts = _TAG.split(svg)
    tags = parts[1::2]
    if not tags:
        return svg
    if any(_TAG_JOIN in tag for tag in tags):
        parts[1::2] = [edit(tag) for tag in tags]
    else:
        parts[1::2] = edit(_TAG_JOIN.join(tags)).split(_TAG_JOIN)
    return "".join(parts)


def _rewrite_tags(svg: str, prefix: str) -> str:
    """Every ``id`` of a drawing given ``prefix``, with its ``url(#…)`` and ``href`` references, and the geometry
    rounded (:func:`_round_geometry`): in tags only (:func:`_in_tags`)."""
    def edit(tags: str) -> str:
        tags = _prefixed_ids(tags, prefix)
        tags = re.sub(r"url\(#([^)]+)\)", lambda m: f"url(#{prefix}-{m.group(1)})", tags)
        tags = re.sub(r'href="#([^"]+)"', lambda m: f'href="#{prefix}-{m.group(1)}"', tags)
        return _round_geometry(tags)

    return _in_tags(svg, edit)


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
    with matplotlib.rc_context(_RC), _no_glyph_warnings():
        fig.savefig(buf, format="svg", bbox_inches="tight", pad_inches=0.06,
                    metadata={"Date": None, "Creator": None, "Format": None, "Type": None})
    svg = buf.getvalue()
    svg = svg[svg.find("<svg"):]
    svg = re.sub(r"<metadata>.*?</metadata>\s*", "", svg, flags=re.S)
    svg = re.sub(r'<style type="text/css">[^<]*</style>\s*', "", svg)
    svg = re.sub(r"<defs>\s*</defs>\s*", "", svg)
    svg = _rewrite_tags(svg, prefix)
    head_end = svg.find(">")
    head = svg[:head_end]
    width_pt = re.search(r'\swidth="([\d.]+)pt"', head)
    head = re.sub(r'\s(width|height|version)="[^"]*"', "", head)
    style = f' style="max-width:{float(width_pt.group(1)) * 4 / 3:.0f}px"' if width_pt else ""
    head = head.replace("<svg", f'<svg id="{prefix}" class="{css_class}" role="img" aria-label="{esc(label)}"'
                        f"{style}", 1)
    return (head + svg[head_end:]).strip()


@lru_cache(maxsize=1)
def _font_codepoints() -> frozenset | None:
    """Code points the figures' font (``font.sans-serif`` of :data:`_RC`) can draw (None when not known)."""
    try:
        from matplotlib import font_manager
        from matplotlib.ft2font import FT2Font

        path = font_manager.findfont(font_manager.FontProperties(family=_RC["font.sans-serif"]))
        return frozenset(FT2Font(path).get_charmap())
    except Exception:  # noqa: BLE001 - no font information: labels are drawn as given
        return None


def _drawable(label: str, fallback: str = "") -> str:
    """``label`` with every run of characters the font lacks written as ``…``; ``fallback`` when nothing
    readable (no letter or digit) is left.

    Ids in CJK or other scripts the font lacks were drawn as boxes, with a Matplotlib warning per glyph on
    every ranking (a new user's audit); the rank beside them still names the row.

    Examples
    --------
    >>> _drawable("KF-D01"), _drawable("\u5316\u5408\u72697", "#2"), _drawable("\u5316\u5408\u7269", "#2")
    ('KF-D01', '\u20267', '#2')
    """
    known = _font_codepoints()
    if known is None or all(ord(c) in known or c in "\n\t " for c in label):
        return label
    out = re.sub(r"\u2026+", "\u2026", "".join(c if ord(c) in known or c in "\n\t " else "\u2026" for c in label))
    return out if any(c.isalnum() for c in out) else fallback


@contextlib.contextmanager
def _no_glyph_warnings():
    """Silence Matplotlib's "Glyph … missing from font(s)" warnings (the labels are made drawable first)."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=r"Glyph \d+ .*missing from font", category=UserWarning)
        yield


def _partner_value(partner: dict, key: str) -> float:
    """A numeric field of the partner dict (NaN if absent)."""
    return num(partner.get(key)) if isinstance(partner, dict) else math.nan


def _partner_role(partner: dict) -> str:
    """The partner's role in lower case ('' if absent)."""
    return text(partner.get("role")).lower() if isinstance(partner, dict) else ""


# --------------------------------------------------------------------------- #
# Level alignment
# --------------------------------------------------------------------------- #
def _tick_label(rank, ident: str) -> str:
    """``"#3\\nid…"`` for the level-alignment axis (``"#3"`` alone for an id the font cannot draw)."""
    r = num(rank)
    head = f"#{int(r)}" if not math.isnan(r) else "#?"
    ident = _drawable(shorten(ident, 14))
    return f"{head}\n{ident}" if ident else head


def _offset_arrow(ax, x: float, y: float, y_partner: float, value: float, low: bool, colour: str, right: bool,
                  stroke) -> None:
    """A double arrow between a candidate's level and the partner's at ``x`` with its value beside it."""
    if math.isnan(y) or math.isnan(y_partner):
        return
    colour = _BRICK if low else colour
    if abs(y - y_partner) > 0.02:
        ax.annotate("", xy=(x, y), xytext=(x, y_partner),
                    arrowprops=dict(arrowstyle="<|-|>", color=colour, lw=1.0, shrinkA=0, shrinkB=0,
                                    mutation_scale=7, ls=BELOW_LS if low else "-"))
    # below the threshold: dashed and marked, not told by colour alone (an accessibility audit)
    label = f"{fmt(value, 2)} {BELOW_MARK}" if low else fmt(value, 2)
    ax.text(x + (0.04 if right else -0.04), 0.5 * (y + y_partner), label, color=colour, fontsize=8.5,
            va="center", ha="left" if right else "right", fontweight="bold" if low else "normal",
            path_effects=stroke)


def _draw_levels(ax, rows: pd.DataFrame, partner: dict, thr: float, half: float,
                 thr_homo: float = math.nan) -> list[float]:
    """Partner column and guides, candidate bars with σ bands, ΔLUMO arrows on the right and ΔHOMO arrows on
    the left of each candidate (brick red below their thresholds; a meeting audit: ΔHOMO, which often decides
    viability, was not drawn); the energies drawn. [eV]"""
    from matplotlib import patheffects

    p_homo, p_lumo = _partner_value(partner, "homo_ev"), _partner_value(partner, "lumo_ev")
    p_hs, p_ls = _partner_value(partner, "homo_sigma_ev"), _partner_value(partner, "lumo_sigma_ev")
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

    # partner column and guides, dark amber: the light amber reached 2.9:1 on white (an accessibility audit)
    bar(0, p_lumo, p_ls, _AMBER_DARK, 3.0)
    bar(0, p_homo, p_hs, _AMBER_DARK, 3.0)
    for y in (p_lumo, p_homo):
        if not math.isnan(y):
            ax.axhline(y, color=_AMBER_DARK, lw=0.9, ls=(0, (4, 3)), alpha=0.8, zorder=0)
    for i, row in rows.iterrows():
        x = i + 1
        c_homo, c_lumo = num(row.get("homo_ev")), num(row.get("lumo_ev"))
        bar(x, c_lumo, num(row.get("lumo_sigma_ev")), _TEAL)
        bar(x, c_homo, num(row.get("homo_sigma_ev")), _SLATE)
        d = num(row.get("delta_lumo_ev"))
        d = d if not math.isnan(d) else abs(c_lumo - p_lumo)
        _offset_arrow(ax, x + half + 0.08, c_lumo, p_lumo, d,
                      not math.isnan(thr) and d < thr - 1e-9, _TEAL_DARK, True, stroke)
        h = num(row.get("delta_homo_ev"))
        if not math.isnan(h):  # the offset is signed by roles; drawn where the table gives it
            floor = thr_homo if not math.isnan(thr_homo) else 0.0
            _offset_arrow(ax, x - half - 0.08, c_homo, p_homo, h, h < max(floor, 0.0) + 1e-9, _SLATE, False, stroke)
    return levels_seen


def _level_axes(ax, rows: pd.DataFrame, pid: str, levels_seen: list[float]) -> None:
    """Ticks (partner, then ``#rank id``), limits, label and grid of the level diagram."""
    n = len(rows)
    ticks = [0] + list(range(1, n + 1))
    labels = [f"partner\n{_drawable(shorten(pid, 14))}".rstrip()] + [
        _tick_label(r.get("rank"), text(r.get("id"))) for _, r in rows.iterrows()]
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


def _level_legend(ax, thr: float, thr_homo: float = math.nan) -> None:
    """Legend below the level diagram."""
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    handles = [
        Line2D([], [], color=_TEAL, lw=2.6, label="candidate LUMO"),
        Line2D([], [], color=_SLATE, lw=2.6, label="candidate HOMO"),
        Line2D([], [], color=_AMBER_DARK, lw=3.0, label="partner LUMO / HOMO"),
        Patch(facecolor=_SLATE, alpha=0.16, label="\u00b11\u03c3 band"),
        Line2D([], [], color=_TEAL_DARK, lw=1.0, marker=">", markersize=4,
               label="\u0394LUMO [eV], right" + ("" if math.isnan(thr) else
                                                 f" (below {fmt(thr)} eV: {BELOW_MARK})")),
        Line2D([], [], color=_SLATE, lw=1.0, marker="<", markersize=4,
               label="\u0394HOMO [eV], left" + ("" if math.isnan(thr_homo) else
                                                f" (below {fmt(max(thr_homo, 0.0))} eV: {BELOW_MARK})")),
    ]
    if not (math.isnan(thr) and math.isnan(thr_homo)):
        handles.append(Line2D([], [], color=_BRICK, lw=1.0, ls=BELOW_LS, marker=">", markersize=4,
                              label=f"below its threshold: brick red, dashed, {BELOW_MARK}"))
    ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=3, fontsize=8.5,
              frameon=False, handlelength=1.6, columnspacing=1.2)


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
        double arrow with the value of ΔLUMO right of every candidate and of ΔHOMO
        left of it (brick red, dashed and marked \u2717 when below the threshold).  Vacuum scale, eV.

    Examples
    --------
    >>> import pandas as pd
    >>> rows = pd.DataFrame({"rank": [1], "id": ["demo"], "homo_ev": [-5.4], "lumo_ev": [-3.9],
    ...                      "delta_lumo_ev": [0.4]})
    >>> level_diagram_svg(rows, {"id": "ref", "homo_ev": -6.0, "lumo_ev": -4.3}, {})[:21]
    '<svg id="fig-levels" '
    """
    import matplotlib
    from matplotlib.figure import Figure

    rows = shortlist.head(DIAGRAM_MAX).reset_index(drop=True)
    n = len(rows)
    thr = num(get(meta, "device", "min_delta_lumo_ev"))
    thr_homo = num(get(meta, "device", "min_delta_homo_ev"))
    pid = text(partner.get("id")) if isinstance(partner, dict) else ""

    with matplotlib.rc_context(_RC), _no_glyph_warnings():
        width = max(8.8, min(11.5, 2.0 + 0.85 * (n + 1)))
        fig = Figure(figsize=(width, 4.6))
        ax = fig.add_subplot()
        levels_seen = _draw_levels(ax, rows, partner, thr, half=0.30, thr_homo=thr_homo)
        _level_axes(ax, rows, pid, levels_seen)
        _level_legend(ax, thr, thr_homo)
        return _figure_svg(fig, "fig-levels", "figure-svg levels-figure",
                           "Energy levels of the shortlisted candidates and the partner, vacuum scale")


# --------------------------------------------------------------------------- #
# Gap–offset map
# --------------------------------------------------------------------------- #
def _device_model(meta: dict):
    """DeviceModel of the run from ``meta["device"]`` (model, absorber and the parameters the run set).

    Returns the model and a note (empty when every recorded value was used).
    """
    from screen.device import ABSORBERS, MODELS, DeviceModel

    dev = get(meta, "device", default={}) or {}
    kwargs = {"model": text(dev.get("model")) or "scharber", "absorber": text(dev.get("absorber")) or "donor"}
    if kwargs["model"] not in MODELS or kwargs["absorber"] not in ABSORBERS:
        kwargs = {"model": "scharber", "absorber": "donor"}
    for key in ("eqe", "ff", "loss_v", "min_delta_lumo_ev", "min_delta_homo_ev"):
        x = num(dev.get(key))
        # a recorded value is an override when the run set it (or, in older records, always)
        if not math.isnan(x) and dev.get(f"{key}_set", True):
            kwargs[key] = x
    pin = num(dev.get("pin_w_m2"))
    if not math.isnan(pin):
        kwargs["pin_w_m2"] = pin
    try:
        return DeviceModel(**kwargs), ""
    except ValueError as exc:
        return (DeviceModel(model="scharber", absorber="donor"),
                f"recorded device parameters unusable ({exc}); map drawn with the published Scharber model")


def _map_points(ranking: pd.DataFrame, partner: dict) -> pd.DataFrame:
    """(candidate optical gap, ΔLUMO) of every ranked row, its id, whether it is viable.

    Rows with the partner's own role (no pair) get no position; column
    ``same_role`` marks them.
    """
    p_role = _partner_role(partner)
    default_role = {"acceptor": "donor", "donor": "acceptor"}.get(p_role, "donor")

    def col(name):
        return pd.to_numeric(ranking[name], errors="coerce") if name in ranking \
            else pd.Series(np.nan, index=ranking.index)

    roles = texts(ranking["role"]).str.lower() if "role" in ranking else pd.Series("", index=ranking.index)
    roles = roles.where(roles.isin(["donor", "acceptor"]), default_role)
    same = roles.eq(p_role) if p_role in ("donor", "acceptor") else pd.Series(False, index=ranking.index)
    if "viable" not in ranking:
        viable = col("pce_pct").notna()
    elif ranking["viable"].dtype == np.bool_:
        viable = ranking["viable"]
    else:
        viable = ranking["viable"].map(lambda v: text(v).strip().lower() in ("true", "1"))
    ids = texts(ranking["id"]) if "id" in ranking else pd.Series("", index=ranking.index)
    return pd.DataFrame({"x": col("gap_opt_ev").mask(same), "y": col("delta_lumo_ev").mask(same),
                         "rank": ranking.get("rank"), "id": ids, "role": roles, "same_role": same,
                         "viable": viable.astype(bool)})


def _map_extent(pts: pd.DataFrame, finite: pd.Series) -> tuple[float, float, float, float]:
    """Gap and offset ranges of the map: at least 1–3 eV × −0.2–1.2 eV, widened to every point. [eV]"""
    gx = pts.loc[finite, "x"].to_numpy(float)
    gy = pts.loc[finite, "y"].to_numpy(float)
    g_lo = min(1.0, float(np.min(gx)) - 0.1) if gx.size else 1.0
    g_hi = max(3.0, float(np.max(gx)) + 0.1) if gx.size else 3.0
    o_lo = min(-0.2, float(np.min(gy)) - 0.1) if gy.size else -0.2
    o_hi = max(1.2, float(np.max(gy)) + 0.1) if gy.size else 1.2
    g_lo, g_hi = max(g_lo, 0.5), min(g_hi, 4.4)
    o_lo, o_hi = max(o_lo, -2.0), min(o_hi, 3.0)
    return g_lo, g_hi, o_lo, o_hi


def _map_grid(model, partner: dict, extent) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Candidate gaps, offsets [eV] and the PCE map [%] against the chosen partner (NaN = not viable).

    The candidate's HOMO is its LUMO − optical gap.  An acceptor partner
    fixes the acceptor and the candidate is the donor (LUMO = LUMO_A + ΔLUMO);
    a donor partner fixes the donor and the candidate is the acceptor
    (LUMO = LUMO_D − ΔLUMO).
    """
    from screen.viability import acceptor_class_of

    g_lo, g_hi, o_lo, o_hi = extent
    gaps = np.linspace(g_lo, g_hi, 121)[:, None]
    offsets = np.linspace(o_lo, o_hi, 101)[None, :]
    p = {k: _partner_value(partner, f"{k}_ev") for k in ("homo", "lumo", "gap_opt")}
    if math.isnan(p["lumo"]):
        p = {"homo": -6.1, "lumo": -4.3, "gap_opt": 2.0}  # the published model's reference acceptor
    if math.isnan(p["gap_opt"]):
        p["gap_opt"] = 2.0
    if math.isnan(p["homo"]):
        p["homo"] = p["lumo"] - p["gap_opt"]
    if _partner_role(partner) == "donor":
        a_lumo = p["lumo"] - offsets
        pce = model.pce_pct(p["homo"], p["lumo"], p["gap_opt"], a_lumo - gaps, a_lumo, gaps, caller="the report's map")
    else:
        d_lumo = p["lumo"] + offsets
        cls = acceptor_class_of(partner.get("smiles") if isinstance(partner, dict) else "")
        pce = model.pce_pct(d_lumo - gaps, d_lumo, gaps, p["homo"], p["lumo"], p["gap_opt"], acceptor_class=cls,
                            caller="the report's map")
    return gaps[:, 0], offsets[0], pce


def _map_contours(ax, gaps, offsets, pce, target: float):
    """Filled PCE contours, every other level as a labelled line, the target contour; the filled set."""
    from matplotlib.colors import LinearSegmentedColormap

    cmap = LinearSegmentedColormap.from_list("dascreen_pce", _MAP_COLOURS)
    finite = pce[np.isfinite(pce)]
    top = max(1.0, float(finite.max())) if finite.size else 1.0
    step = 1.0 if top <= 16 else 2.0
    levels = np.arange(0.0, math.ceil(top / step) * step + step, step)
    # x = gap, y = offset; contourf(X, Y, Z) wants Z[y, x], the map is Z[gap, offset]
    filled = ax.contourf(gaps, offsets, pce.T, levels=levels, cmap=cmap)
    from matplotlib import patheffects

    halo = [patheffects.withStroke(linewidth=2.2, foreground="white")]
    lines = ax.contour(gaps, offsets, pce.T, levels=levels[1::2], colors=[_TEAL_DARK],
                       linewidths=0.5, alpha=0.55)
    # labels with a white outline: dark teal on the dark end of the map was unreadable (an accessibility audit)
    for label in ax.clabel(lines, fmt=lambda v: f"{v:.0f}", fontsize=7.5, colors=[_TEAL_DARK], inline_spacing=2):
        label.set_path_effects(halo)
        label.set_alpha(1.0)  # not the lines' 0.55: pale text on its white outline
    if not math.isnan(target) and 0 < target < top:
        # a double line (dark edges, amber core) that stays apart from the map's colours in greyscale
        tline = ax.contour(gaps, offsets, pce.T, levels=[target], colors=[_AMBER], linewidths=1.8)
        tline.set_path_effects([patheffects.Stroke(linewidth=4.2, foreground=_TEAL_DARK),
                                patheffects.Stroke(linewidth=2.6, foreground="white"), patheffects.Normal()])
        for label in ax.clabel(tline, fmt=lambda v: f"target {v:g} %", fontsize=7.5, colors=[_AMBER_DARK]):
            label.set_path_effects(halo)
            label.set_fontweight("bold")
    return filled


def _map_mask(ax, extent) -> None:
    """Hatched background: where the filled contours leave a gap (NaN), the pair is not viable."""
    from matplotlib.patches import Rectangle

    g_lo, g_hi, o_lo, o_hi = extent
    ax.add_patch(Rectangle((g_lo, o_lo), g_hi - g_lo, o_hi - o_lo, facecolor="#eef0f2", hatch="////",
                           edgecolor=_HATCH, lw=0, zorder=0, label="not viable (no efficiency)"))
    ax.axhline(0.0, color=_SLATE, lw=0.9, ls=(0, (5, 3)), zorder=2)


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
    for (label, _x, _y), (px, py) in zip(labels, anchors):
        w, h = 5.2 * len(label) + 1.0, 8.0
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


#: above this many plain markers the map draws them as one embedded raster image (shortlist and axes stay vector)
RASTER_ABOVE = 2000


def _map_candidates(ax, pts: pd.DataFrame, finite: pd.Series, shortlist_index, extent) -> None:
    """Viable rows as dots, not viable ones as crosses, the shortlist as amber diamonds labelled by id."""
    from matplotlib import patheffects

    g_lo, g_hi, o_lo, o_hi = extent
    short = pts.index.isin(list(shortlist_index))
    rest = finite & ~short
    many = int(rest.sum()) > RASTER_ABOVE  # thousands of markers: one embedded image, not one SVG node each
    # a white edge as wide as a cross's: the slate dots were 1.4:1 on the dark end of the map (an accessibility audit)
    ax.plot(pts.loc[rest & pts["viable"], "x"], pts.loc[rest & pts["viable"], "y"], ls="none", marker="o", ms=4.5,
            color=_SLATE, alpha=0.75, mec="white", mew=1.1, label="ranked candidate", zorder=3, rasterized=many)
    if (rest & ~pts["viable"]).any():
        # larger and white-edged: a small brick cross vanished on the dark end of the map (an accessibility audit)
        ax.plot(pts.loc[rest & ~pts["viable"], "x"], pts.loc[rest & ~pts["viable"], "y"], ls="none", marker="x",
                ms=6.5, mew=1.6, color=_BRICK, label="candidate, not viable", zorder=3, rasterized=many,
                path_effects=[patheffects.Stroke(linewidth=3.2, foreground="white"), patheffects.Normal()])
    sl = finite & short
    ax.scatter(pts.loc[sl, "x"], pts.loc[sl, "y"], s=46, marker="D", c=_AMBER, edgecolors=_TEAL_DARK,
               linewidths=0.9, label="shortlisted (label = id)", zorder=4)
    ax.set_xlim(g_lo, g_hi)
    ax.set_ylim(o_lo, o_hi)
    stroke = [patheffects.withStroke(linewidth=2.2, foreground="white")]
    labels = [(_drawable(shorten(text(p["id"]), 16), _rank_label(p.get("rank"))) or "?", p["x"], p["y"])
              for _, p in pts.loc[sl].iterrows()]
    for (label, x, y), offset in zip(labels, _label_offsets(ax, labels)):
        ax.annotate(label, (x, y), xytext=offset, textcoords="offset points", fontsize=8,
                    color=_TEAL_DARK, fontweight="bold", path_effects=stroke, zorder=5)


def _rank_label(rank) -> str:
    """``#3`` for a rank, '' without one."""
    r = num(rank)
    return "" if math.isnan(r) else f"#{int(r)}"


def _map_summary(gaps: np.ndarray, offsets: np.ndarray, pce: np.ndarray, target: float, cand_role: str) -> str:
    """One sentence saying what the map shows, its text alternative: where the estimate peaks and over which optical
    gaps and offsets it reaches the target (an accessibility audit: the map said nothing to a screen reader).

    ``pce[i, j]`` is the estimate at ``gaps[i]`` and ``offsets[j]`` (NaN: not viable). [eV, %]

    Examples
    --------
    >>> g, o = np.array([1.2, 1.4, 1.6]), np.array([0.0, 0.2])
    >>> _map_summary(g, o, np.array([[np.nan, 8.0], [9.0, 12.5], [np.nan, 10.5]]), 10.0, "donor")
    'The map peaks at 12.5 % PCE at a donor optical gap of 1.40 eV and ΔLUMO 0.20 eV; the 10 % target is \
reached for optical gaps from 1.40 to 1.60 eV, the upper end at the map’s edge (ΔLUMO 0.20 eV).'
    >>> print(_map_summary(g, o, np.array([[11.0, 8.0], [9.0, 12.5], [np.nan, 10.5]]), 10.0, "acceptor"))
    ... # doctest: +NORMALIZE_WHITESPACE
    The map peaks at 12.5 % PCE at an acceptor optical gap of 1.40 eV and ΔLUMO 0.20 eV; the 10 % target is
    reached for optical gaps from 1.20 to 1.60 eV, both ends at the map’s edges (ΔLUMO from 0.00 to 0.20 eV, both
    ends at the map’s edges).
    >>> _map_summary(g, o, np.full((3, 2), np.nan), 10.0, "donor")
    'No pair on the map is viable, so it shows no efficiency.'
    """
    shown = np.where(np.isfinite(pce), pce, -np.inf)
    if not np.isfinite(shown).any():
        return "No pair on the map is viable, so it shows no efficiency."
    i, j = np.unravel_index(int(np.argmax(shown)), shown.shape)
    article = "an" if cand_role[:1].lower() in "aeiou" else "a"
    out = (f"The map peaks at {fmt(pce[i, j], 1)} % PCE at {article} {cand_role} optical gap of {fmt(gaps[i])} eV and "
           f"\u0394LUMO {fmt(offsets[j])} eV")
    if math.isnan(target):
        return out + "."
    reached = shown >= target
    if not reached.any():
        return out + f"; it does not reach the {target:g} % target anywhere."
    rows, cols = np.flatnonzero(reached.any(axis=1)), np.flatnonzero(reached.any(axis=0))

    def span(values, at) -> str:
        lo, hi = fmt(values[at[0]]), fmt(values[at[-1]])
        between = "" if at.size == at[-1] - at[0] + 1 else ", not everywhere between"
        # a range that ends at the map's edge may go on beyond it
        edges = [word for word, edge in (("lower", at[0] == 0), ("upper", at[-1] == values.size - 1)) if edge]
        beyond = ("" if not edges else ", both ends at the map\u2019s edges" if len(edges) == 2
                  else f", the {edges[0]} end at the map\u2019s edge")
        return f"{lo} eV" if lo == hi else f"from {lo} to {hi} eV{between}{beyond}"

    return (out + f"; the {target:g} % target is reached for optical gaps {span(gaps, rows)} "
            f"(\u0394LUMO {span(offsets, cols)}).")


def _map_note(pts: pd.DataFrame, finite: pd.Series, model, partner: dict, model_note: str) -> str:
    """Caption text: model, partner, how candidates are placed and how many could not be."""
    pid = text(partner.get("id")) if isinstance(partner, dict) else ""
    parts = [f"Model: {model.label}; map drawn against the partner {pid or '(unknown)'}, with the candidate\u2019s "
             "HOMO taken as its LUMO \u2212 optical gap; hatched: not viable (no efficiency). Markers are "
             "labelled by candidate id and sit at the candidate\u2019s own optical gap and \u0394LUMO."]
    n_same = int(pts["same_role"].sum())
    n_missing = int((~finite).sum()) - n_same
    n_bad = int((finite & ~pts["viable"]).sum())
    if n_bad:
        parts.append(f"{n_bad} ranked row(s) are not viable (crosses); their reasons are listed under "
                     "\u201cNot viable\u201d (section 4).")
    if n_same:
        parts.append(f"{n_same} ranked row(s) with the partner's own role are not drawn.")
    if n_missing:
        parts.append(f"{n_missing} ranked row(s) lack a gap or offset and are not drawn.")
    if _partner_role(partner) == "donor" and model.follows_class:
        # a referee's check: the table's rows had their class's EQE, the map the pooled one, unsaid
        parts.append("The map's acceptors are levels without a structure, so it takes the fitted model's pooled EQE, "
                     "fill factor and voltage loss; each candidate's own estimate (the table) uses its acceptor "
                     "class's and can lie above or below the contour its marker sits on.")
    if model_note:
        parts.append(model_note + ".")
    return " ".join(parts)


def design_map_svg(ranking: pd.DataFrame, shortlist_index, partner: dict, meta: dict) -> tuple[str, str]:
    """Gap–offset map: the run's device model against the chosen partner over optical gap × LUMO offset.

    Parameters
    ----------
    ranking : pandas.DataFrame
        Every ranked row (``id, gap_opt_ev, delta_lumo_ev, role``, optional ``viable``).
    shortlist_index : sequence
        Index labels of ``ranking`` that are shortlisted (highlighted and labelled with their id).
    partner : dict
        Partner levels (``id, role, homo_ev, lumo_ev, gap_opt_ev``, optional ``smiles``).
    meta : dict
        Report metadata: device model and parameters, target efficiency.

    Returns
    -------
    svg : str
        Inline SVG (``id="fig-map"``): filled PCE contours of
        :meth:`screen.device.DeviceModel.evaluate` for the partner, the
        not-viable region hatched (no colour: no efficiency), ΔLUMO = 0 dashed,
        the target efficiency as a bold amber contour, every ranked candidate
        (crosses when not viable) and the shortlist as amber diamonds labelled
        with their ids; the title names the model.
    note : str
        Caption text: what the map shows in one sentence (:func:`_map_summary`: the peak and where the target is
        reached), then model, partner, placement and counts.

    References
    ----------
    .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789. :doi:`10.1002/adma.200501717`
    .. [2] D. Veldman et al., Adv. Funct. Mater. 19 (2009) 1939. :doi:`10.1002/adfm.200801834`

    Examples
    --------
    >>> import pandas as pd
    >>> rows = pd.DataFrame({"rank": [1], "id": ["demo"], "role": ["donor"], "gap_opt_ev": [1.5],
    ...                      "delta_lumo_ev": [0.4], "viable": [True]})
    >>> partner = {"id": "y6", "role": "acceptor", "homo_ev": -5.65, "lumo_ev": -4.10, "gap_opt_ev": 1.33}
    >>> svg, note = design_map_svg(rows, [0], partner, {"device": {"model": "fitted", "absorber": "both"}})
    >>> svg[:18], note[:13], "Model: fitted energy-loss model (both ma" in note
    ('<svg id="fig-map" ', 'The map peaks', True)
    """
    import matplotlib
    from matplotlib.figure import Figure

    model, model_note = _device_model(meta)
    pts = _map_points(ranking, partner)
    finite = pts["x"].notna() & pts["y"].notna()
    extent = _map_extent(pts, finite)
    gaps, offsets, pce = _map_grid(model, partner, extent)
    target = num(get(meta, "rank", "target_pce_pct"))
    cand_role = "acceptor" if _partner_role(partner) == "donor" else "donor"

    with matplotlib.rc_context(_RC), _no_glyph_warnings():
        fig = Figure(figsize=(9.4, 6.0))
        ax = fig.add_subplot()
        _map_mask(ax, extent)
        filled = _map_contours(ax, gaps, offsets, pce, target)
        _map_candidates(ax, pts, finite, shortlist_index, extent)
        ax.set_title(f"{model.label} \u2014 partner {_drawable(shorten(text(partner.get('id')), 30))}".rstrip(),
                     fontsize=10, color=_TEAL_DARK)
        ax.set_xlabel(f"{cand_role.capitalize()} optical gap [eV]")
        ax.set_ylabel("LUMO offset \u0394LUMO = LUMO(donor) \u2212 LUMO(acceptor) [eV]")
        cbar = fig.colorbar(filled, ax=ax, pad=0.02, fraction=0.045)
        cbar.set_label("PCE [%]")
        cbar.outline.set_visible(False)
        # below the plot: inside it the legend box hid a candidate's marker (a meeting audit)
        ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.11), ncol=3, fontsize=8, frameon=False)
        svg = _figure_svg(fig, "fig-map", "figure-svg map-figure",
                          f"Estimated efficiency ({model.label}) over optical gap and LUMO offset against the "
                          "partner, with the ranked candidates")
    return svg, _map_summary(gaps, offsets, pce, target, cand_role) + " " + _map_note(pts, finite, model, partner,
                                                                                        model_note)
