"""Dye-cell energy diagram as inline SVG: oxide band edge, E(S⁺/S), E(S⁺/S*), mediator and driving forces.

Potentials in V vs NHE on the left axis, drawn the way electrochemists draw
them (more negative potentials — higher electron energies — at the top); the
right axis gives the same levels on the vacuum scale, −e(E + 4.44 V)
(Trasatti 1986).  That absolute scale puts ferrocene in acetonitrile at
−5.07 eV; the film scale of the donor/acceptor reports puts it at −4.8 eV, so
the same couple reads 0.27 eV lower here (the report's caption says so).

References
----------
.. [1] S. Trasatti, Pure Appl. Chem. 58 (1986) 955. :doi:`10.1351/pac198658070955`
.. [2] A. Hagfeldt, G. Boschloo, L. Sun, L. Kloo, H. Pettersson, Chem. Rev.
   110 (2010) 6595. :doi:`10.1021/cr900356p`
"""

from __future__ import annotations

import math

import pandas as pd

from screen.dyecell.scales import ABSOLUTE_NHE_V
from screen.report.figures import _RC, BELOW_LS, BELOW_MARK, _figure_svg
from screen.report.format import fmt, get, num, shorten, text

__all__ = ["dyecell_diagram_svg", "dyecell_figure", "diagram_rows", "DIAGRAM_MAX", "DIAGRAM_FAILING", "BELOW_MARK"]

#: dyes drawn at most
DIAGRAM_MAX = 10
#: not-viable dyes that miss a driving-force threshold drawn at most beside the shortlist
DIAGRAM_FAILING = 3
_DRIVE_FLAGS = ("injection_low", "regeneration_low")
_TEAL_DARK, _TEAL, _AMBER, _AMBER_DARK = "#0b3b45", "#137079", "#d4882b", "#9a5a12"
_SLATE, _SLATE_LIGHT, _BRICK = "#3e4c59", "#9aa5b1", "#a4362b"
#: x position of the band-edge and mediator labels (left of the first dye at x = 1)
_LABEL_X = -1.5




def _arrow(ax, x, y_from, y_to, colour, label, stroke, low=False):
    """A driving-force arrow with its value beside it; ``low`` (below the threshold): dashed, the label marked ✗
    (an accessibility audit: brick red alone told the failing arrows apart, lost to colour-blind readers and in
    greyscale prints)."""
    if math.isnan(y_from) or math.isnan(y_to):
        return
    if abs(y_to - y_from) > 0.015:
        ax.annotate("", xy=(x, y_to), xytext=(x, y_from),
                    arrowprops=dict(arrowstyle="-|>", color=colour, lw=1.1, shrinkA=0, shrinkB=0, mutation_scale=8,
                                    ls=BELOW_LS if low else "-"))
    ax.text(x + 0.05, 0.5 * (y_from + y_to), f"{label} {BELOW_MARK}" if low else label, color=colour, fontsize=8,
            va="center", ha="left", fontweight="bold" if low else "normal", path_effects=stroke)


def _truthy(value) -> bool:
    if isinstance(value, str):
        return value.strip().lower() in ("true", "1", "yes")
    try:
        return bool(value) and not (isinstance(value, float) and math.isnan(value))
    except (TypeError, ValueError):
        return False


def _drive_label(value: float, thr: float, low: bool) -> str:
    """A driving force with 2 decimals, or 3 when 2 would hide that it is below the threshold (0.198 < 0.20)."""
    if low and not math.isnan(thr) and round(value, 2) >= round(thr, 2):
        return f"{value:.3f}"
    return fmt(value)


def _thresholds(meta: dict) -> tuple[float, float]:
    """Injection and regeneration thresholds of the run [eV] (``regeneration_threshold_ev``: the one that applied)."""
    thr_inj = num(get(meta, "model", "min_drive_inj_ev"))
    thr_reg = num(meta.get("regeneration_threshold_ev"))
    if math.isnan(thr_reg):
        thr_reg = num(get(meta, "model", "min_drive_reg_ev"))
    return thr_inj, thr_reg


def _drive_margin(row, thr_inj: float, thr_reg: float) -> float:
    """Smallest (driving force − threshold) of a row [eV]; NaN when a driving force is missing."""
    d_inj, d_reg = num(row.get("drive_inj_ev")), num(row.get("drive_reg_ev"))
    if math.isnan(d_inj) or math.isnan(d_reg):
        return math.nan
    return min(d_inj - (0.0 if math.isnan(thr_inj) else thr_inj), d_reg - (0.0 if math.isnan(thr_reg) else thr_reg))


def _misses_drive(row, thr_inj: float, thr_reg: float) -> bool:
    """True when the row fails a driving-force threshold (its flags, or its driving forces)."""
    codes = {c.strip() for c in text(row.get("flags")).split(";")}
    if codes & set(_DRIVE_FLAGS):
        return True
    margin = _drive_margin(row, thr_inj, thr_reg)
    return not math.isnan(margin) and margin < -1e-9


def diagram_rows(ranking: pd.DataFrame, shown: pd.DataFrame, meta: dict,
                 n_failing: int = DIAGRAM_FAILING) -> pd.DataFrame:
    """The rows the energy diagram draws: the shown dyes and the nearest misses among the not-viable ones.

    The not-viable dyes that fail an injection or regeneration threshold (and
    are not already shown) are ordered by their smallest margin, driving force
    − threshold (the nearest miss first); up to ``n_failing`` of them are drawn
    after the shown dyes, which keep at most :data:`DIAGRAM_MAX` − those places.

    Examples
    --------
    >>> r = pd.DataFrame({"rank": [1, 2, 3], "id": ["a", "b", "c"], "viable": [True, False, False],
    ...                   "drive_inj_ev": [0.5, 0.5, 0.5], "drive_reg_ev": [0.5, -0.3, 0.19],
    ...                   "flags": ["", "regeneration_low", "regeneration_low"]})
    >>> meta = {"model": {"min_drive_inj_ev": 0.2}, "regeneration_threshold_ev": 0.2}
    >>> diagram_rows(r, r.head(1), meta)["id"].tolist()
    ['a', 'c', 'b']
    >>> diagram_rows(r, r.head(1), meta, n_failing=1)["id"].tolist()
    ['a', 'c']
    """
    shown = shown if shown is not None else pd.DataFrame()
    if ranking is None or not len(ranking) or n_failing <= 0:
        return shown.head(DIAGRAM_MAX)
    thr_inj, thr_reg = _thresholds(meta if isinstance(meta, dict) else {})
    rest = ranking.loc[~ranking.index.isin(shown.index)] if len(shown) else ranking
    if "viable" in rest:
        rest = rest[~rest["viable"].map(_truthy)]
    picks = [(i, _drive_margin(r, thr_inj, thr_reg)) for i, r in rest.iterrows()
             if _misses_drive(r, thr_inj, thr_reg)]
    picks = [(i, m) for i, m in picks if not math.isnan(m)]
    picks.sort(key=lambda t: -t[1])  # nearest miss first (stable: rank order among equals)
    failing = rest.loc[[i for i, _ in picks[:min(n_failing, DIAGRAM_MAX)]]]
    return pd.concat([shown.head(DIAGRAM_MAX - len(failing)), failing])


def dyecell_diagram_svg(rows: pd.DataFrame, meta: dict) -> str:
    """Energy diagram of the shortlisted dyes against the run's oxide and mediator.

    Parameters
    ----------
    rows : pandas.DataFrame
        Best-first ranking rows (``rank, id, e_ox_v_nhe, e_ox_excited_v_nhe,
        drive_inj_ev, drive_reg_ev, viable``, optional σ columns); at most
        :data:`DIAGRAM_MAX` are drawn.
    meta : dict
        ``ranking.meta.json`` content: ``oxide`` (``id, type,
        potential_v_nhe``), ``mediator`` (``id, potential_v_nhe``), ``model``
        (thresholds).

    Returns
    -------
    str
        Inline SVG (``id="fig-dyecell"``): the oxide's band edge (shaded band
        beyond it) and the mediator's potential across the plot; per dye the
        ground-state E(S⁺/S) (slate) and excited-state E(S⁺/S*) (teal) levels
        with ±1σ boxes, an injection arrow from E(S⁺/S*) to the band edge and a
        regeneration arrow from the mediator to E(S⁺/S), each labelled with its
        driving force in eV (brick red, dashed and marked ✗ when below the threshold).  For a
        p-type oxide the teal level is the estimated reduced-dye potential
        E(S/S⁻) ≈ E(S⁺/S) − E₀₋₀/e and the arrows run from the valence band to
        E(S*/S⁻) ≈ E(S⁺/S) and from E(S/S⁻) to the mediator.  Not-viable rows
        are drawn dashed and labelled "not viable" (see :func:`diagram_rows`).

    Examples
    --------
    >>> rows = pd.DataFrame({"rank": [1], "id": ["LD-01"], "e_ox_v_nhe": [1.05], "e_ox_excited_v_nhe": [-1.0],
    ...                      "drive_inj_ev": [0.5], "drive_reg_ev": [0.49], "viable": [True]})
    >>> meta = {"oxide": {"id": "tio2-anatase", "type": "n", "potential_v_nhe": -0.5},
    ...         "mediator": {"id": "co-bpy3", "potential_v_nhe": 0.56}}
    >>> dyecell_diagram_svg(rows, meta)[:22]
    '<svg id="fig-dyecell" '
    """
    import matplotlib

    with matplotlib.rc_context(_RC):
        fig = dyecell_figure(rows, meta)
        return _figure_svg(fig, "fig-dyecell", "figure-svg dyecell-figure",
                           "Dye-cell energy diagram: oxide band edge, dye ground and excited-state potentials, "
                           "mediator potential and driving forces, in V vs NHE")


def dyecell_figure(rows: pd.DataFrame, meta: dict):
    """The Matplotlib figure of :func:`dyecell_diagram_svg` (call inside the report's rc context)."""
    from matplotlib import patheffects
    from matplotlib.figure import Figure

    rows = rows.head(DIAGRAM_MAX).reset_index(drop=True)
    ox, med = get(meta, "oxide", default={}) or {}, get(meta, "mediator", default={}) or {}
    e_edge, e_med = num(ox.get("potential_v_nhe")), num(med.get("potential_v_nhe"))
    p_type = text(ox.get("type")).lower() == "p"
    thr_inj, thr_reg = _thresholds(meta) if isinstance(meta, dict) else (math.nan, math.nan)
    stroke = [patheffects.withStroke(linewidth=2.4, foreground="white")]
    seen = [v for v in (e_edge, e_med) if not math.isnan(v)]
    half = 0.28

    n = len(rows)
    fig = Figure(figsize=(max(8.0, min(12.0, 3.6 + 0.95 * n)), 5.0))
    ax = fig.add_subplot()
    # labels sit above their lines; when the lines are close, the lower one's label goes below its line
    close = not (math.isnan(e_edge) or math.isnan(e_med)) and abs(e_edge - e_med) < 0.35
    if not math.isnan(e_edge):
        edge_label = f"{'valence' if p_type else 'conduction'} band\n{shorten(text(ox.get('id')), 16)} {fmt(e_edge)} V"
        ax.axhline(e_edge, color=_AMBER_DARK, lw=1.6)
        ax.text(_LABEL_X, e_edge, edge_label, color=_AMBER_DARK, fontsize=8, va="top" if close and e_edge > e_med
                else "bottom", ha="left",
                path_effects=stroke)
    if not math.isnan(e_med):
        ax.axhline(e_med, color=_TEAL_DARK, lw=1.4, ls=(0, (5, 3)))
        ax.text(_LABEL_X, e_med, f"mediator\n{shorten(text(med.get('id')), 16)} {fmt(e_med)} V", color=_TEAL_DARK,
                fontsize=8, va="top" if close and e_med > e_edge else "bottom", ha="left", path_effects=stroke)
    viable = [_truthy(r.get("viable")) if "viable" in rows else True for _, r in rows.iterrows()]
    any_box = False
    for i, row in rows.iterrows():
        x = i + 1
        if i > 0 and viable[i - 1] and not viable[i]:
            ax.axvline(x - 0.5, color=_SLATE_LIGHT, lw=0.8, ls=(0, (2, 3)))
        g, e = num(row.get("e_ox_v_nhe")), num(row.get("e_ox_excited_v_nhe"))
        s_g = num(row.get("e_ox_sigma_v"))
        s_e = math.hypot(s_g, num(row.get("e00_sigma_ev"))) if not math.isnan(s_g) else math.nan
        for y, s, colour in ((g, s_g, _SLATE), (e, s_e, _TEAL)):
            if math.isnan(y):
                continue
            seen.append(y)
            if not math.isnan(s) and s > 0:
                any_box = True
                ax.fill_between([x - half, x + half], y - s, y + s, color=colour, alpha=0.16, lw=0)
            ax.plot([x - half, x + half], [y, y], color=colour, lw=2.6, solid_capstyle="butt",
                    ls="-" if viable[i] else (0, (2.5, 1.5)))
        d_inj, d_reg = num(row.get("drive_inj_ev")), num(row.get("drive_reg_ev"))
        low_inj = not math.isnan(thr_inj) and not math.isnan(d_inj) and d_inj < thr_inj - 1e-9
        low_reg = not math.isnan(thr_reg) and not math.isnan(d_reg) and d_reg < thr_reg - 1e-9
        inj = (_BRICK if low_inj else _AMBER_DARK, _drive_label(d_inj, thr_inj, low_inj), stroke, low_inj)
        reg = (_BRICK if low_reg else _TEAL_DARK, _drive_label(d_reg, thr_reg, low_reg), stroke, low_reg)
        if p_type:
            _arrow(ax, x - half - 0.05, e_edge, g, *inj)
            _arrow(ax, x + half + 0.05, e, e_med, *reg)
        else:
            _arrow(ax, x - half - 0.05, e, e_edge, *inj)
            _arrow(ax, x + half + 0.05, e_med, g, *reg)
    ax.set_xticks(list(range(1, n + 1)))
    ax.set_xticklabels([(f"#{int(num(r.get('rank')))}\n{shorten(text(r.get('id')), 12)}"
                         if not math.isnan(num(r.get("rank"))) else shorten(text(r.get("id")), 12))
                        + ("" if viable[j] else "\nnot viable")
                        for j, (_, r) in enumerate(rows.iterrows())], fontsize=8.5)
    ax.set_xlim(_LABEL_X - 0.1, n + 0.9)
    if seen:
        lo, hi = min(seen), max(seen)
        pad = max(0.2, 0.08 * (hi - lo))
        ax.set_ylim(hi + pad, lo - pad)  # negative potentials (higher electron energy) at the top
    ax.set_ylabel("Potential [V vs NHE]")
    ax.tick_params(axis="x", length=0)
    ax.grid(axis="y", color="#e4e7eb", lw=0.6)
    ax.set_axisbelow(True)
    sec = ax.secondary_yaxis("right", functions=(lambda v: -(v + ABSOLUTE_NHE_V),
                                                 lambda e: -e - ABSOLUTE_NHE_V))
    sec.set_ylabel("Energy vs vacuum, \u2212e(E + 4.44 V) [eV]")
    if n == 0:
        ax.text(0.5, 0.5, "no dye to draw", transform=ax.transAxes, ha="center", color=_SLATE)
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    second = ("E(S/S\u207b) \u2248 E(S\u207a/S) \u2212 E\u2080\u208b\u2080/e, reduced dye (estimate)" if p_type
              else "E(S\u207a/S*), excited state")
    handles = [Line2D([], [], color=_SLATE, lw=2.6, label="E(S\u207a/S), ground state"),
               Line2D([], [], color=_TEAL, lw=2.6, label=second),
               Line2D([], [], color=_AMBER_DARK, lw=1.1, marker=">", markersize=4,
                      label="injection driving force [eV]"),
               Line2D([], [], color=_TEAL_DARK, lw=1.1, marker=">", markersize=4,
                      label="regeneration driving force [eV]"),
               Line2D([], [], color=_BRICK, lw=1.1, ls=BELOW_LS, marker=">", markersize=4,
                      label=f"below threshold (dashed, {BELOW_MARK})")]
    if any_box:
        handles.append(Patch(facecolor=_SLATE, alpha=0.16, lw=0, label="\u00b11\u03c3 of the level"))
    if not all(viable):
        handles.append(Line2D([], [], color=_SLATE, lw=2.6, ls=(0, (2.5, 1.5)), label="not-viable dye"))
    ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=3, fontsize=8.5,
              frameon=False, handlelength=1.6, columnspacing=1.2)
    return fig
