"""The partner-matrix overview page: candidates × partners as a heatmap, self-contained HTML.

One table: a row per candidate (2-D drawing, id, best partner), a column per
partner (its levels and a link to its report), each cell the best viable PCE
estimate coloured on one sequential scale; a grey cell with "—" is a pair
that is not viable, a hatched "same role" cell a candidate of the partner's own
role (not paired), and a dashed-outlined cell with "?" a pair whose alignment is
uncertain (P(aligned) between 0.25 and 0.75).  The best-partner cell names every partner of an exact
tie and says in words when the best estimate is not told apart from another partner's
(:func:`screen.matrix.best_partner_verdict`).  Numbers come from ``matrix.csv`` (:mod:`screen.matrix`);
formatting and drawings are those of the ranking report
(:mod:`screen.report.format`, :mod:`screen.report.drawings`).

Examples
--------
>>> import pandas as pd
>>> m = pd.DataFrame({"id": ["D1"], "name": [""], "smiles": ["c1ccsc1"], "best_partner": ["y6"],
...                   "best_pce_pct": [9.0], "viable_partners": [1], "y6": [9.0], "c60": [float("nan")]})
>>> page = render_overview(m, {"partners": [{"id": "y6"}, {"id": "c60"}]})
>>> page.startswith("<!DOCTYPE html>") and "9.0" in page and "not viable" in page
True
>>> page = render_overview(m, {"partners": [{"id": "y6", "alignment_uncertain": ["D1"]},
...                                         {"id": "c60", "not_paired": ["D1"]}]})
>>> NOT_PAIRED_TITLE in page and UNCERTAIN_TITLE in page
True
"""

from __future__ import annotations

import math
from datetime import datetime, timezone
from pathlib import Path

import pandas as pd

from screen import __version__
from screen.io import atomic_path
from screen.columns import TIE_SEPARATOR
from screen.report.drawings import molecule_svg
from screen.report.format import esc, fmt, isolated, num
from screen.report.header import device_tests_html

__all__ = ["render_overview", "write_overview", "heat_colour", "MAX_ROWS", "NOT_PAIRED_TITLE", "UNCERTAIN_TITLE",
           "BEST_PARTNER_WORDS"]

#: what the best-partner column means, on the page (the rule of :func:`screen.matrix.best_partner_verdict`; an
#: audit: "best partner: pm6" on an exact tie of three partners, and on 0.02 points under a ± of 3.6 each, read as
#: a recommendation)
BEST_PARTNER_WORDS = ("The best partner is the one of the largest estimate; on an exact tie every tied partner is "
                      "named, and “not resolved” says that another partner's estimate lies within the "
                      "uncertainty of the difference (less than √(σ₁² + σ₂²) "
                      "below it, from the rankings' ± of the PCE): the estimates do not choose between them.")

#: tooltip of a cell whose candidate has the partner's own role (a meeting-day audit: it looked like "not viable")
NOT_PAIRED_TITLE = "not paired (same role): the candidate has the partner's own role, so the pair is no device"
#: tooltip of a cell whose pair's alignment is uncertain (info flag ``alignment_uncertain``)
UNCERTAIN_TITLE = ("alignment uncertain: P(aligned) between 0.25 and 0.75, the offsets lie within the levels' "
                   "uncertainty of their thresholds")

#: rows shown on the page (best first); the whole table is matrix.csv
MAX_ROWS = 200
#: rows with a structure drawing
MAX_DRAWINGS = 60

#: a sequential scale, low → high (light yellow to dark blue; readable for common colour-vision deficiencies)
_SCALE = [(255, 255, 204), (161, 218, 180), (65, 182, 196), (44, 127, 184), (37, 52, 148)]

_STYLE = """
body{font:14px/1.4 system-ui,-apple-system,"Segoe UI",sans-serif;margin:24px;color:#1b1b1b}
h1{font-size:20px;margin:0 0 4px}p.sub{color:#555;margin:0 0 16px;max-width:70em}
p.caution{background:#fff4e0;border-left:5px solid #d9822b;padding:8px 14px;margin:0 0 16px;max-width:70em}
table{border-collapse:collapse}th,td{border:1px solid #ddd;padding:4px 6px;text-align:center}
th.cand,td.cand{text-align:left}tbody th{font-weight:inherit}td.na{background:#eee;color:#555}tr{break-inside:avoid}
td.np{background:repeating-linear-gradient(45deg,#fff 0 4px,#e4e4e4 4px 8px);color:#444;font-size:11px;font-style:italic}
td.unc{outline:2px dashed #d9822b;outline-offset:-3px}td sup.unc{font-weight:700;margin-left:1px}
td.best small{display:block;color:#555;max-width:24em;text-align:left}td.nr{background:#fff4e0}
.legend span.np{background:repeating-linear-gradient(45deg,#fff 0 4px,#e4e4e4 4px 8px)}
.legend span.unc{outline:2px dashed #d9822b;outline-offset:-3px;background:#fff}
thead th{background:#f6f6f6;vertical-align:bottom;font-weight:600}
thead th small{display:block;font-weight:400;color:#555}
svg.mol{display:block}.legend{display:flex;flex-wrap:wrap;align-items:center;gap:6px;margin:8px 0 16px}
.legend span.sw{display:inline-block;width:28px;height:14px;flex:none}footer{color:#666;margin-top:16px;font-size:12px}
p.stale{background:#fde8e4;border-left:5px solid #b03a2e;padding:8px 14px;margin:0 0 16px;max-width:70em}
p.stale code{word-break:break-all}th small.stale{color:#b03a2e;font-weight:600}td.stale{font-style:italic;opacity:.75}
div.tablewrap{overflow-x:auto;max-width:100%;position:relative}
div.tablewrap:focus{outline:none}div.tablewrap:focus-visible{outline:3px solid #0b3b45;outline-offset:2px}
.vh{position:absolute!important;width:1px;height:1px;padding:0;margin:-1px;overflow:hidden;clip:rect(0 0 0 0);
clip-path:inset(50%);white-space:nowrap;border:0}
td,.legend span.sw{-webkit-print-color-adjust:exact;print-color-adjust:exact}
@media (max-width:700px){body{margin:10px}}
@media print{@page{margin:12mm}body{margin:0}div.tablewrap{overflow:visible}thead{display:table-header-group}
h1,.legend{break-after:avoid}}
"""


def heat_colour(value: float, low: float, high: float) -> tuple[str, str]:
    """Background and text colour of a cell on the sequential scale.

    The text colour is the one of higher WCAG contrast ratio on the background; where neither reaches
    :data:`MIN_CONTRAST` (the middle blues, near 73 % of the scale) the background is darkened toward the
    scale's end, #253494, until white text does.

    Examples
    --------
    >>> heat_colour(0.0, 0.0, 10.0)
    ('#ffffcc', '#1b1b1b')
    >>> heat_colour(10.0, 0.0, 10.0)
    ('#253494', '#ffffff')
    >>> heat_colour(7.33, 0.0, 10.0)  # #2d83b9 with white text was 4.15:1
    ('#2d7bb5', '#ffffff')
    >>> worst = min(_contrast(*heat_colour(i / 1000, 0.0, 1.0)) for i in range(1001))
    >>> worst >= MIN_CONTRAST, round(worst, 2)  # over the whole scale
    (True, 4.5)
    """
    t = 0.0 if high <= low else min(1.0, max(0.0, (value - low) / (high - low)))
    pos = t * (len(_SCALE) - 1)
    i = min(int(pos), len(_SCALE) - 2)
    f = pos - i
    rgb = [a + (b - a) * f for a, b in zip(_SCALE[i], _SCALE[i + 1])]
    for k in range(51):  # 2 % steps toward the scale's darkest colour; white on it is 10.5:1
        mixed = [c + (d - c) * k / 50 for c, d in zip(rgb, _SCALE[-1])]
        background = "#{:02x}{:02x}{:02x}".format(*(round(c) for c in mixed))
        # the text colour with the higher WCAG contrast ratio on this background (an accessibility audit: the
        # old rule, unweighted sRGB luminance below 128, chose white where dark text reads better; a second
        # one: neither reached 4.5:1 on part of the scale)
        on_white, on_dark = _contrast(background, "#ffffff"), _contrast(background, _DARK_TEXT)
        if max(on_white, on_dark) >= MIN_CONTRAST:
            break
    return background, ("#ffffff" if on_white > on_dark else _DARK_TEXT)


#: the contrast ratio every heat cell's text reaches: WCAG 2.1 success criterion 1.4.3, normal text
MIN_CONTRAST = 4.5


#: the dark text colour of the page and of light heat cells
_DARK_TEXT = "#1b1b1b"


def _luminance(colour: str) -> float:
    """WCAG 2 relative luminance of ``#rrggbb`` (linearised sRGB, Rec. 709 weights)."""
    def lin(c: float) -> float:
        return c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4
    r, g, b = (lin(int(colour[i:i + 2], 16) / 255.0) for i in (1, 3, 5))
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def _contrast(a: str, b: str) -> float:
    """WCAG 2 contrast ratio of two ``#rrggbb`` colours (1 to 21).

    Examples
    --------
    >>> round(_contrast("#ffffff", "#000000"), 1)
    21.0
    """
    hi, lo = sorted((_luminance(a), _luminance(b)), reverse=True)
    return (hi + 0.05) / (lo + 0.05)


#: title of a cell whose partner's ranking read other levels than the newest ranking of the matrix
_STALE_TITLE = "ranked from other levels than the newest ranking of this matrix: may be out of date"


def _head_cell(p: dict, stale: bool = False) -> str:
    levels = f"HOMO {fmt(p.get('homo_ev'))}, LUMO {fmt(p.get('lumo_ev'))} eV"
    link = p.get("report")
    name = esc(p.get("id"))
    # the link's name says where it goes, the id stays what is seen (an accessibility audit: "y6" alone)
    title = isolated(f'<a href="{esc(link)}"><span class="vh">ranking report for </span>{name}</a>' if link else name)
    role = esc(p.get("role") or "")
    paired = p.get("paired", p.get("ranked"))  # candidates of the partner's own role do not count
    viable = f"{p['viable']}/{paired} viable" if "viable" in p and paired is not None else ""
    mark = '<small class="stale">stale: earlier levels</small>' if stale else ""
    return f"<th scope=\"col\">{title}<small>{role}</small><small>{levels}</small><small>{viable}</small>{mark}</th>"


def _cell(value, low: float, high: float, stale: bool = False, note: str = "") -> str:
    """One cell; ``note``: ``"not_paired"`` (same role as the partner), ``"uncertain"`` (alignment uncertain) or ""."""
    x = num(value)
    stale_title = f"; {_STALE_TITLE}" if stale else ""
    if note == "not_paired":
        return f'<td class="np{" stale" if stale else ""}" title="{NOT_PAIRED_TITLE}{stale_title}">same role</td>'
    uncertain = note == "uncertain"
    # what the grey, the dash and the "?" mean in words as well (an accessibility audit: a screen reader heard
    # "dash" and "question mark", the meaning was in the colour and the tooltip)
    mark = ('<sup class="unc" aria-hidden="true">?</sup><span class="vh">, alignment uncertain</span>' if uncertain
            else "")
    if math.isnan(x):
        title = "not viable" + (f"; {UNCERTAIN_TITLE}" if uncertain else "") + stale_title
        classes = " ".join(c for c in ("na", "unc" if uncertain else "", "stale" if stale else "") if c)
        return f'<td class="{classes}" title="{title}">\u2014<span class="vh"> not viable</span>{mark}</td>'
    bg, fg = heat_colour(x, low, high)
    classes = " ".join(c for c in ("unc" if uncertain else "", "stale" if stale else "") if c)
    titles = "; ".join(t for t in (UNCERTAIN_TITLE if uncertain else "", _STALE_TITLE if stale else "") if t)
    extra = (f' class="{classes}"' if classes else "") + (f' title="{titles}"' if titles else "")
    return f'<td style="background:{bg};color:{fg}"{extra} data-value="{x:.6g}">{fmt(x, 1)}{mark}</td>'


def _text(value) -> str:
    """A cell of ``matrix.csv`` as text ("" for an empty one, read as NaN)."""
    return "" if value is None or (isinstance(value, float) and math.isnan(value)) else str(value)


def _resolved(value) -> bool | None:
    """``best_partner_resolved`` as read (True/False, "True"/"False", empty or missing: None)."""
    text = _text(value).strip().lower()
    return True if text in ("true", "1") else False if text in ("false", "0") else None


def _best_cell(row: dict) -> str:
    """The best-partner cell: every tied partner, and the note in words when the choice is not resolved.

    A matrix written before these columns existed shows ``best_partner`` alone.

    Examples
    --------
    >>> _best_cell({"best_partner": "pm6;d18", "best_partner_resolved": False,
    ...             "best_partner_note": "not resolved: pm6 and d18 tie at 13.54 %"})
    '<td class="best nr">pm6, d18<small>not resolved: pm6 and d18 tie at 13.54 %</small></td>'
    >>> _best_cell({"best_partner": "pm6", "best_partner_resolved": True, "best_partner_note": ""})
    '<td class="best">pm6</td>'
    >>> _best_cell({"best_partner": float("nan")})
    '<td class="best">—</td>'
    """
    names = [esc(p) for p in _text(row.get("best_partner")).split(TIE_SEPARATOR) if p]
    if not names:
        return '<td class="best">—</td>'
    note = _text(row.get("best_partner_note"))
    resolved = _resolved(row.get("best_partner_resolved"))
    classes = "best nr" if resolved is False else "best"
    return f'<td class="{classes}">{", ".join(names)}' + (f"<small>{esc(note)}</small>" if note else "") + "</td>"


def _notes(partners: list[dict]) -> dict:
    """``{partner id: {candidate id: note}}`` from the partners' ``not_paired`` and ``alignment_uncertain`` lists."""
    notes = {}
    for p in partners:
        cell = {str(i): "uncertain" for i in p.get("alignment_uncertain") or []}
        cell.update({str(i): "not_paired" for i in p.get("not_paired") or []})
        notes[p["id"]] = cell
    return notes


def _stale_banner(stale) -> str:
    """The banner of a matrix whose columns were not all ranked from the same levels ("" when they were)."""
    if not isinstance(stale, dict) or not stale.get("summary"):
        return ""
    summary = str(stale["summary"])
    return f'<p class="stale" id="stale"><strong>Out of date.</strong> {esc(summary[:1].upper() + summary[1:])}</p>\n'


def _legend(low: float, high: float) -> str:
    steps = [low + (high - low) * i / 4 for i in range(5)]
    swatches = "".join(f'<span class="sw" style="background:{heat_colour(v, low, high)[0]}"></span>' for v in steps)
    return (f'<div class="legend">PCE estimate {fmt(low, 1)} % {swatches} {fmt(high, 1)} %'
            f' <span class="sw" style="background:#eee"></span> not viable'
            f' <span class="sw np"></span> not paired (same role)'
            f' <span class="sw unc"></span><sup>?</sup> alignment uncertain</div>')


def render_overview(matrix: pd.DataFrame, meta: dict, created: str | None = None) -> str:
    """The overview page as HTML text.

    Parameters
    ----------
    matrix : pandas.DataFrame
        From :func:`screen.matrix.partner_matrix` (best first).
    meta : dict
        ``partners`` (list of dicts: ``id``, and optionally ``role``, levels, ``report`` link,
        ``viable``/``ranked`` counts); optionally ``device`` and ``device_tests``
        (:func:`screen.devicepars.device_tests`: a caution when the PCE did not rank published devices) and
        ``stale`` (:func:`screen.matrix.stale_columns`: a banner, and its ``partners`` columns marked).
    created : str, optional
        Date line (default: now, UTC).
    """
    partners = meta.get("partners", [])
    ids = [p["id"] for p in partners]
    stale = set((meta.get("stale") or {}).get("partners") or [])
    values = pd.concat([pd.to_numeric(matrix[c], errors="coerce") for c in ids]) if ids else pd.Series(dtype=float)
    low, high = (float(values.min()), float(values.max())) if values.notna().any() else (0.0, 1.0)
    shown = matrix.head(MAX_ROWS)
    notes = _notes(partners)
    rows = []
    for n, row in enumerate(shown.to_dict("records")):
        drawing = ((molecule_svg(row.get("smiles", ""), f"structure of {row['id']}", 120, 80) or "")
                   if n < MAX_DRAWINGS else "")
        # the id ends its cell or comes before the name, which is isolated from it (a direction mark in either
        # reordered the other)
        label = esc(row["id"]) + (f"<br><small>{isolated(esc(row['name']))}</small>" if row.get("name") else "")
        cells = "".join(_cell(row.get(p), low, high, p in stale, notes.get(p, {}).get(str(row["id"]), ""))
                        for p in ids)
        # the candidate cell is the row's header (an accessibility audit: no row headers)
        rows.append(f'<tr><th scope="row" class="cand">{drawing}{label}</th>{cells}'
                    f'{_best_cell(row)}</tr>')
    more = (f"<p>{len(matrix) - len(shown)} more rows are in matrix.csv.</p>" if len(matrix) > len(shown) else "")
    model = esc((meta.get("device") or {}).get("model", "not recorded"))
    when = created or datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    head = "".join(_head_cell(p, p["id"] in stale) for p in partners)
    caution = device_tests_html(meta.get("device_tests"))[1]
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>Partner matrix: {len(matrix)} candidates x {len(ids)} partners</title>"
        f"<style>{_STYLE}</style></head><body>\n"
        f"<header><h1>Partner matrix: {len(matrix)} candidates \u00d7 {len(ids)} partners</h1></header>\n<main>\n"
        "<p class=\"sub\">Each cell is the candidate's best estimated power-conversion efficiency against that "
        f"partner (device model: {model}), among its pairs that pass the filters and are viable; a grey cell "
        "with \u2014 is a pair that is not viable, a hatched \u201csame role\u201d cell a candidate of the "
        "partner's own role (not paired), and a cell marked ? a pair whose alignment is uncertain (P(aligned) "
        "between 0.25 and 0.75). "
        "A column head counts the viable pairs among the candidates that pair with that partner. "
        f"{BEST_PARTNER_WORDS} Estimates for screening, not measurements: follow a partner's link for "
        "its ranking, uncertainties and flags.</p>\n"
        + _stale_banner(meta.get("stale"))
        + (f'<p class="caution">{caution}</p>\n' if caution else "")
        + f"{_legend(low, high)}"
        # a named region the keyboard can scroll, a named table (an accessibility audit)
        '<div class="tablewrap" role="region" tabindex="0" aria-labelledby="matrix-caption"><table>'
        f'<caption class="vh" id="matrix-caption">Best PCE estimate of each candidate against each partner</caption>'
        f"<thead><tr><th class=\"cand\" scope=\"col\">candidate</th>{head}"
        f"<th scope=\"col\">best partner</th></tr></thead>\n"
        f"<tbody>{''.join(rows)}</tbody></table></div>\n{more}</main>\n"
        f"<footer>dascreen {esc(__version__)} \u00b7 {esc(when)} \u00b7 matrix.csv holds every row</footer>"
        "\n</body></html>\n"
    )


def write_overview(matrix: pd.DataFrame, meta: dict, target) -> Path:
    """Write :func:`render_overview` to ``target`` atomically, with the permissions the umask gives like every
    other output (:func:`screen.io.atomic_path`; a fixed ``rw-r--r--`` kept a group sharing the folder under
    umask 002 from replacing it)."""
    target = Path(target)
    with atomic_path(target) as tmp:
        tmp.write_text(render_overview(matrix, meta), encoding="utf-8")
    return target
