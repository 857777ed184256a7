"""Dye-cell energy diagram as inline SVG: oxide band edge, E(S⁺/S), E(S⁺/S*), mediator and driving forces.

Potentials in V vs NHE on the left axis, drawn the way electrochemists draw
them (more negative potentials — higher electron energies — at the top); the
right axis gives the same levels on the vacuum scale, −e(E + 4.44 V)
(Trasatti 1986).

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
from screen.report.figures import _RC, _figure_svg
from screen.report.format import fmt, get, num, shorten, text

__all__ = ["dyecell_diagram_svg", "dyecell_figure", "DIAGRAM_MAX"]

#: dyes drawn at most
DIAGRAM_MAX = 10
_TEAL_DARK, _TEAL, _AMBER, _AMBER_DARK = "#0b3b45", "#137079", "#d4882b", "#9a5a12"
_SLATE, _SLATE_LIGHT, _BRICK = "#3e4c59", "#9aa5b1", "#a4362b"
#: x position of the band-edge and mediator labels (left of the first dye at x = 1)
_LABEL_X = -1.5


def _arrow(ax, x, y_from, y_to, colour, label, stroke):
    if math.isnan(y_from) or math.isnan(y_to):
        return
    if abs(y_to - y_from) > 0.015:
        ax.annotate("", xy=(x, y_to), xytext=(x, y_from),
                    arrowprops=dict(arrowstyle="-|>", color=colour, lw=1.1, shrinkA=0, shrinkB=0, mutation_scale=8))
    ax.text(x + 0.05, 0.5 * (y_from + y_to), label, color=colour, fontsize=8, va="center", ha="left",
            path_effects=stroke)


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
        with ±σ bands, an injection arrow from E(S⁺/S*) to the band edge and a
        regeneration arrow from the mediator to E(S⁺/S), each labelled with its
        driving force in eV (brick red when below the threshold).

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
    thr_inj = num(get(meta, "model", "min_drive_inj_ev"))
    thr_reg = num(meta.get("regeneration_threshold_ev")) if isinstance(meta, dict) else math.nan
    stroke = [patheffects.withStroke(linewidth=2.4, foreground="white")]
    seen = [v for v in (e_edge, e_med) if not math.isnan(v)]
    half = 0.28

    n = len(rows)
    fig = Figure(figsize=(max(8.0, min(12.0, 3.6 + 0.95 * n)), 5.0))
    ax = fig.add_subplot()
    if not math.isnan(e_edge):
        edge_label = f"{'valence' if p_type else 'conduction'} band\n{shorten(text(ox.get('id')), 16)} {fmt(e_edge)} V"
        ax.axhline(e_edge, color=_AMBER_DARK, lw=1.6)
        ax.text(_LABEL_X, e_edge, edge_label, color=_AMBER_DARK, fontsize=8, va="bottom", ha="left",
                path_effects=stroke)
    if not math.isnan(e_med):
        ax.axhline(e_med, color=_TEAL_DARK, lw=1.4, ls=(0, (5, 3)))
        ax.text(_LABEL_X, e_med, f"mediator\n{shorten(text(med.get('id')), 16)} {fmt(e_med)} V", color=_TEAL_DARK,
                fontsize=8, va="bottom", ha="left", path_effects=stroke)
    for i, row in rows.iterrows():
        x = i + 1
        g, e = num(row.get("e_ox_v_nhe")), num(row.get("e_ox_excited_v_nhe"))
        s_g = num(row.get("e_ox_sigma_v"))
        s_e = math.hypot(s_g, num(row.get("e00_sigma_ev"))) if not math.isnan(s_g) else math.nan
        for y, s, colour in ((g, s_g, _SLATE), (e, s_e, _TEAL)):
            if math.isnan(y):
                continue
            seen.append(y)
            if not math.isnan(s) and s > 0:
                ax.fill_between([x - half, x + half], y - s, y + s, color=colour, alpha=0.16, lw=0)
            ax.plot([x - half, x + half], [y, y], color=colour, lw=2.6, solid_capstyle="butt")
        d_inj, d_reg = num(row.get("drive_inj_ev")), num(row.get("drive_reg_ev"))
        low_inj = not math.isnan(thr_inj) and not math.isnan(d_inj) and d_inj < thr_inj - 1e-9
        low_reg = not math.isnan(thr_reg) and not math.isnan(d_reg) and d_reg < thr_reg - 1e-9
        if p_type:
            _arrow(ax, x - half - 0.05, e_edge, g, _BRICK if low_inj else _AMBER_DARK, fmt(d_inj), stroke)
            _arrow(ax, x + half + 0.05, e, e_med, _BRICK if low_reg else _TEAL_DARK, fmt(d_reg), stroke)
        else:
            _arrow(ax, x - half - 0.05, e, e_edge, _BRICK if low_inj else _AMBER_DARK, fmt(d_inj), stroke)
            _arrow(ax, x + half + 0.05, e_med, g, _BRICK if low_reg else _TEAL_DARK, fmt(d_reg), stroke)
    ax.set_xticks(list(range(1, n + 1)))
    ax.set_xticklabels([f"#{int(num(r.get('rank')))}\n{shorten(text(r.get('id')), 12)}"
                        if not math.isnan(num(r.get("rank"))) else shorten(text(r.get("id")), 12)
                        for _, r in rows.iterrows()], fontsize=8.5)
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
    sec.set_ylabel("Energy vs vacuum [eV]")
    if n == 0:
        ax.text(0.5, 0.5, "no dye to draw", transform=ax.transAxes, ha="center", color=_SLATE)
    from matplotlib.lines import Line2D

    handles = [Line2D([], [], color=_SLATE, lw=2.6, label="E(S\u207a/S), ground state"),
               Line2D([], [], color=_TEAL, lw=2.6, label="E(S\u207a/S*), excited state"),
               Line2D([], [], color=_AMBER_DARK, lw=1.1, marker=">", markersize=4,
                      label="injection driving force [eV]"),
               Line2D([], [], color=_TEAL_DARK, lw=1.1, marker=">", markersize=4,
                      label="regeneration driving force [eV]"),
               Line2D([], [], color=_BRICK, lw=1.1, marker=">", markersize=4, label="below threshold")]
    ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=3, fontsize=8.5,
              frameon=False, handlelength=1.6, columnspacing=1.2)
    return fig
