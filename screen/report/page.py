"""Assembly of the report page: head with the inline style, the five sections, footer and sorting script.

The style sheet and the script live in ``static/report.css`` and
``static/report.js`` beside this module and are inlined into the page, so the
page opens offline and fetches nothing.
"""

from __future__ import annotations

import math
from datetime import datetime, timezone
from functools import lru_cache
from importlib import resources

import pandas as pd

from screen import __version__
from screen.report.figures import DIAGRAM_MAX, design_map_svg, level_diagram_svg
from screen.report.format import NOT_RECORDED, esc, fmt, fmt_pm, get, isolated, num, text, truthies
from screen.rank_rows import shortlist_mask
from screen.report.header import counts_strip, device_card, device_tests_html, partner_card, protocol_card
from screen.report.tables import (
    capped_note,
    full_table,
    not_ranked_table,
    not_viable_table,
    select_shortlist,
    shortlist_table,
    table_region,
    with_level_details,
)

__all__ = ["render_report", "EXPORTS", "static_text", "described_svg"]

#: Files written next to ``report.html`` by the ranking stage and this package,
#: with the description shown in the footer.
EXPORTS = (
    ("ranking.csv", "the full ranking, best first, one row per ranked candidate"),
    ("shortlist.sdf", "3-D structures of the shortlisted candidates with their estimates as properties"),
    ("ranking.safe.csv", "the ranking for spreadsheet programs: text cells that begin with = + - @, "
                         "tab or carriage return carry a leading apostrophe so they are never run as "
                         "formulas"),
)

_CAUTION = (
    '<p class="caution" id="caution"><strong>Screening estimates.</strong> Every number on this page comes '
    "from a semi-empirical quantum-chemistry method with an empirical calibration and an idealised device "
    "model. The numbers are for ranking and for choosing what to discuss; they are not predicted "
    "measurements. The \u00b1 values (1\u03c3) carry the calibrated levels\u2019 uncertainty through the device "
    "model, not the device model\u2019s own error (the device card gives its held-out figures), so the "
    "true spread is wider. The estimate is the PCE at the central levels; the \u00b1 is the spread of the "
    "samples that stay viable, and P(aligned) how likely the pair stays viable. An estimate above the target "
    "with P(PCE &gt; target) below one half comes from samples that are not viable (counted as 0 %) or from "
    "viable samples lying mostly below the estimate (the model saturates: the smaller gap caps E<sub>CT</sub> "
    "and the charge-generation yield cannot exceed one, so samples lose more than they gain). Chemical stability "
    "(e.g. of long acenes in air and light), solubility, film morphology and synthetic accessibility are not "
    "assessed. Making and handling any "
    "candidate follows your lab\u2019s chemical-safety rules, the safety data sheets of every reagent and "
    "local regulations.</p>"
)


@lru_cache(maxsize=None)
def static_text(name: str) -> str:
    """Text of one file in ``screen/report/static/`` (UTF-8).

    Examples
    --------
    >>> static_text("report.css").startswith(":root{")
    True
    """
    return resources.files("screen.report").joinpath("static", name).read_text(encoding="utf-8")


def described_svg(svg: str, caption_id: str) -> str:
    """A figure's inline SVG described by its caption: ``aria-describedby`` added to its first tag (an accessibility
    audit: what the figures show reached no screen reader); other text unchanged.

    Examples
    --------
    >>> described_svg('<svg id="fig-x" role="img" aria-label="x"><g/></svg>', "figure-x-caption")
    '<svg id="fig-x" role="img" aria-label="x" aria-describedby="figure-x-caption"><g/></svg>'
    >>> described_svg("", "c")
    ''
    """
    end = svg.find(">")
    if not svg.startswith("<svg") or end < 0:
        return svg
    return f'{svg[:end]} aria-describedby="{caption_id}"{svg[end:]}'


def _candidates_word(partner: dict) -> str:
    """"donors" against an acceptor partner, "acceptors" against a donor, else "materials"."""
    role = text(partner.get("role")).strip().lower() if isinstance(partner, dict) else ""
    return {"acceptor": "donors", "donor": "acceptors"}.get(role, "materials")


def _created(meta: dict) -> str:
    """Report date: ``meta["created"]`` when given (tests), else now in UTC."""
    given = text(meta.get("created")) if isinstance(meta, dict) else ""
    if given:
        return given
    return datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")


def _summary_sentence(ranking: pd.DataFrame, partner_id: str, n_pass, sort_by: str = "pce_pct") -> str:
    """One sentence naming the best candidate: the highest PCE estimate among the rows the shortlist may take.

    A row that repeats an earlier row's structure (``same_structure``) is never named, and when the
    ranking is sorted by another column the first row by that order is named beside it. The ids in bold are
    isolated from the sentence by the style sheet (``p.summary strong``: a right-to-left override in an id turned
    the rest of the sentence around, a security audit).

    Examples
    --------
    >>> r = pd.DataFrame({"id": ["B", "A", "C"], "pce_pct": [12.5, 13.4, 13.4], "pce_sigma_pct": [2.7, 1.7, 1.7],
    ...                   "p_above_target": [0.83, 0.71, 0.71], "p_aligned": [0.99, 0.79, 0.79],
    ...                   "passes": [True, True, True], "flags": ["", "", "same_structure"]})
    >>> print(_summary_sentence(r, "y6", 3))  # doctest: +NORMALIZE_WHITESPACE
    3 candidate(s) ranked against <strong>y6</strong>; 3 pass every check (1 of them repeats an earlier row's
    structure and stays out of the shortlist). Best estimate: <strong>A</strong> at 13.4 ± 1.7 % PCE (± from the
    levels' σ alone, not the device model's own error; so are P(PCE &gt; target) and P(aligned)), both offsets
    aligned in 79 % of samples; first in the ranking's order:
    <strong>B</strong> (12.5 % PCE, P(PCE &gt; target) 83 %).
    >>> nv = pd.DataFrame({"id": ["X"], "pce_pct": [float("nan")], "p_aligned": [0.03], "passes": [False],
    ...                    "flags": ["delta_lumo_low"]})
    >>> print(_summary_sentence(nv, "y6", 0))  # doctest: +NORMALIZE_WHITESPACE
    1 candidate(s) ranked against <strong>y6</strong>; 0 pass every check. No pair is viable, so there is no PCE
    estimate; the most nearly aligned: <strong>X</strong>, both offsets aligned in 3 % of samples.
    """
    if not len(ranking):
        return f"No candidate was ranked against {isolated(esc(partner_id)) or 'the partner'}."
    may_enter = shortlist_mask(ranking)
    eligible = ranking[may_enter]
    pool = eligible if len(eligible) else ranking
    pce = pd.to_numeric(pool.get("pce_pct", pd.Series(index=pool.index, dtype=float)), errors="coerce")
    best = pool.loc[pce.idxmax()] if pce.notna().any() else pool.iloc[0]
    passing = "" if n_pass is None else f"; {n_pass} pass every check"
    repeats = int((truthies(ranking["passes"]) & ~may_enter).sum()) if "passes" in ranking else 0
    if passing and repeats:
        passing += (f" ({repeats} of them {'repeats' if repeats == 1 else 'repeat'} an earlier row's structure and "
                    f"{'stays' if repeats == 1 else 'stay'} out of the shortlist)")
    head = f"{len(ranking)} candidate(s) ranked against <strong>{esc(partner_id) or 'the partner'}</strong>{passing}."
    if math.isnan(num(best.get("pce_pct"))):  # no viable row: no "best estimate at — % PCE"
        p_al = pd.to_numeric(ranking.get("p_aligned", pd.Series(index=ranking.index, dtype=float)), errors="coerce")
        best = ranking.loc[p_al.idxmax()] if p_al.notna().any() else ranking.iloc[0]
        return (f"{head} No pair is viable, so there is no PCE estimate; the most nearly aligned: "
                f"<strong>{esc(best.get('id'))}</strong>{_aligned_words(best)}.")
    gas = str(best.get("scale", "")).strip().lower() == "gas"
    sentence = (f"{head} Best estimate: <strong>{esc(best.get('id'))}</strong> at "
                f"{fmt_pm(best.get('pce_pct'), best.get('pce_sigma_pct'), 1)} % PCE"
                + (" (± from the levels' σ alone, not the device model's own error; so are P(PCE &gt; target) and "
                   "P(aligned))"
                   if not math.isnan(num(best.get("pce_sigma_pct"))) else "")
                + (" from gas-scale (isolated-molecule) levels, on which neither device model was fitted or defined"
                   if gas else "")
                + _aligned_words(best))
    ties = int((pce.round(1) == round(num(best.get("pce_pct")), 1)).sum()) - 1 if pce.notna().any() else 0
    if ties > 0:  # a device-physics audit: against a narrow-gap partner most donors tie and the order is by id
        order = ("; ties are ordered by P(aligned), then id" if sort_by == "pce_pct" else "")
        sentence += (f", tied with {ties} other{'s' if ties > 1 else ''} at that estimate (the same V<sub>oc</sub>, "
                     "J<sub>sc</sub> and FF: when the partner's optical gap is the pair's smaller one, it caps "
                     "E<sub>CT</sub> and sets J<sub>sc</sub> for the candidates whose interface gap exceeds it and "
                     f"whose offsets clear their thresholds{order})")
    first = pool.iloc[0]
    if first.get("id") != best.get("id") and num(first.get("pce_pct")) != num(best.get("pce_pct")):
        prob = num(first.get("p_above_target"))
        said = "" if math.isnan(prob) else f", P(PCE &gt; target) {prob * 100:.0f} %"
        sentence += (f"; first in the ranking's order: <strong>{esc(first.get('id'))}</strong> "
                     f"({fmt(first.get('pce_pct'), 1)} % PCE{said})")
    return sentence + "." + _close_top_words(pce, num(best.get("pce_sigma_pct")), sort_by)


def _aligned_words(row) -> str:
    """``", both offsets aligned in N % of samples"`` for a row's P(aligned) ('' without one).

    P(aligned) is the chance that both offsets clear their thresholds, not that the pair is viable (Voc > 0 and the
    gap window are not part of it): an adversarial referee's audit found "viable in 100 % of samples" beside a 31 %
    chance of Voc <= 0.

    >>> _aligned_words({"p_aligned": 0.784}), _aligned_words({"p_aligned": float("nan")})
    (', both offsets aligned in 78 % of samples', '')
    """
    p = num(row.get("p_aligned"))
    return "" if math.isnan(p) else f", both offsets aligned in {p * 100:.0f} % of samples"


#: how many of the best estimates :func:`_close_top_words` compares
_TOP = 5


def _close_top_words(pce: pd.Series, sigma: float, sort_by: str) -> str:
    """A sentence when the best estimates lie closer together than the best one's ± (a group leader choosing five
    synthesis targets: the top five within 0.3 points under a ± of 1.7, ordered by PCE, which favours the smallest
    HOMO offset, the least likely to work); '' for fewer than three estimates, otherwise, or when the ranking is
    already by P(PCE > target).

    Examples
    --------
    >>> _close_top_words(pd.Series([13.4, 13.3, 13.2, 13.2, 13.1, 9.0]), 1.7, "pce_pct")[:47]
    ' The best 5 estimates lie within 0.3 PCE points'
    >>> _close_top_words(pd.Series([13.4, 11.0, 9.0]), 1.7, "pce_pct")
    ''
    >>> _close_top_words(pd.Series([13.4, 13.3, 13.2]), 1.7, "p_above_target")  # already ordered by the chance
    ''

    """
    top = pce.dropna().sort_values(ascending=False).head(_TOP)
    if sort_by != "pce_pct" or len(top) < 3 or math.isnan(sigma) or top.iloc[0] - top.iloc[-1] >= sigma:
        return ""
    return (f" The best {len(top)} estimates lie within {top.iloc[0] - top.iloc[-1]:.1f} PCE points, less than the "
            f"± of {sigma:.1f}: their order by the estimate says little; P(aligned) and P(PCE &gt; target) tell them "
            "apart, and <code>--set rank.sort_by=p_above_target</code> orders by the chance of clearing the target.")


def _revision(meta: dict) -> str:
    """`` (commit 0123abc)`` from the ranking sidecar's ``code_revision``; empty when not recorded.

    Examples
    --------
    >>> _revision({"code_revision": "0e1117f188b0bc1853e27969e47628714ce4c908+changes"})
    ' (commit 0e1117f, with uncommitted changes)'
    >>> _revision({})
    ''
    """
    rev = str(meta.get("code_revision") or "") if isinstance(meta, dict) else ""
    if not rev:
        return ""
    head, _, changed = rev.partition("+")
    return f" (commit {esc(head[:7])}{', with uncommitted changes' if changed else ''})"


def _scale_words(meta: dict) -> str:
    """What the ranking's energy scale means, for the table captions.

    Examples
    --------
    >>> _scale_words({"scale": "film"})
    'film: solid-state / CV levels'
    >>> _scale_words({"scale": "gas"})[:30]
    'gas: isolated-molecule levels '
    """
    if isinstance(meta, dict) and str(meta.get("scale", "film")).lower() == "gas":
        return ("gas: isolated-molecule levels (HOMO = \u2212IP, LUMO = \u2212EA of the free molecule); the device "
                "models are fitted on film levels, so the Voc, Jsc and PCE shown are not device estimates")
    return "film: solid-state / CV levels"


def _sort_by(meta: dict) -> str:
    """The ranking's sort key from ``meta["rank"]["sort_by"]`` (``pce_pct`` when not recorded)."""
    rank = meta.get("rank") if isinstance(meta, dict) and isinstance(meta.get("rank"), dict) else {}
    return text(rank.get("sort_by")) or "pce_pct"


def _resolve_partner(partner: dict, meta: dict) -> dict:
    """The partner dict; ``meta["partner"]`` when none is given, role from ``meta["partner_role"]`` if blank."""
    if not isinstance(partner, dict) or not partner:
        partner = get(meta, "partner", default={}) or {}
    partner = dict(partner)
    if not text(partner.get("role")).strip() and text(meta.get("partner_role")).strip():
        partner["role"] = text(meta.get("partner_role")).strip()  # the role the ranking used
    return partner


def _pass_counts(ranking: pd.DataFrame, short: pd.DataFrame) -> tuple[int | None, int]:
    """Rows that pass every check (None without a ``passes`` column) and rows shortlisted."""
    n_pass = int(truthies(ranking["passes"]).sum()) if "passes" in ranking else None
    n_short = len(short)
    if "passes" in short and "shortlist" not in short:  # best rows shown although none passes: none listed
        n_short = int(truthies(short["passes"]).sum())
    return n_pass, n_short


def _head(partner: dict, meta: dict) -> list[str]:
    """``<head>`` and the page's top banner."""
    pid = text(partner.get("id"))
    title = f"dascreen report \u2014 candidates against {pid}" if pid else "dascreen report"
    return [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f'<meta name="generator" content="dascreen {esc(__version__)}">',
        f"<title>{esc(title)}</title>",
        f"<style>\n{static_text('report.css')}</style>",
        "</head>",
        "<body>",
        '<header class="top">',
        '<h1><span class="mark">dascreen</span> \u00b7 screening report</h1>',
        f'<p class="sub">Candidate {_candidates_word(partner)}'
        f' against partner <strong>{esc(pid) or NOT_RECORDED}</strong>'
        + (f" ({isolated(esc(partner.get('name')))})" if text(partner.get("name")) else "") + "</p>",
        f'<p class="stamp">Generated {esc(_created(meta))} \u00b7 dascreen {esc(__version__)}{_revision(meta)}</p>',
        "</header>",
    ]


def _shortlist_section(ranking: pd.DataFrame, short: pd.DataFrame, how: str, pid: str, n_pass,
                       meta: dict) -> list[str]:
    """Section 2: summary, shortlist table and the collapsible table of every ranked row."""
    caution = device_tests_html(meta.get("device_tests"), get(meta, "levels_meta", "calibration_models"))[1]
    return [
        '<h2 id="shortlist"><span class="num">2</span> Shortlist for discussion</h2>',
        f'<p class="summary">{_summary_sentence(ranking, pid, n_pass, _sort_by(meta))}</p>',
        *([f'<p class="caution">{caution}</p>'] if caution else []),
        f'<p class="quiet">Shown: {esc(how)}. Levels in eV relative to the vacuum level (HOMO = \u2212IP), on the energy scale of the header ({_scale_words(meta)}), value \u00b1 1\u03c3. '
        "\u0394LUMO = LUMO(donor) \u2212 LUMO(acceptor), \u0394HOMO = HOMO(donor) \u2212 HOMO(acceptor). "
        "P(aligned), in the table of every row, is the probability at the levels\u2019 \u03c3 that both offsets "
        "clear their thresholds; rows with equal estimates, and the not-viable rows, are ordered by P(aligned), "
        "then id. "
        "Click a column header to sort, or press Enter on it.</p>",
        table_region(shortlist_table(short, meta), "shortlist-table", wide=True),
        '<details id="all-ranked">',
        _all_ranked_summary(len(ranking)),
        table_region(full_table(ranking.head(FULL_TABLE_MAX_ROWS), meta), "full-table", wide=True),
        "</details>",
        *([f'<p class="quiet" id="pce-capped-note">{note}</p>'] if (note := capped_note(ranking, meta)) else []),
    ]


#: rows of the collapsible "every ranked candidate" table; the ranking CSV always holds all of them
FULL_TABLE_MAX_ROWS = 2000


def _all_ranked_summary(n: int) -> str:
    """Caption of the collapsible table: every row, or the first :data:`FULL_TABLE_MAX_ROWS` of a long ranking.

    Examples
    --------
    >>> _all_ranked_summary(30)
    '<summary>Every ranked candidate (30 rows)</summary>'
    >>> _all_ranked_summary(10000)  # doctest: +ELLIPSIS
    '<summary>The first 2000 of 10000 ranked candidates (all of them are in ranking.csv)</summary>'
    """
    if n <= FULL_TABLE_MAX_ROWS:
        return f"<summary>Every ranked candidate ({n} rows)</summary>"
    return (f"<summary>The first {FULL_TABLE_MAX_ROWS} of {n} ranked candidates "
            "(all of them are in ranking.csv)</summary>")


def _figures_section(levels_fig: str, map_fig: str, map_note: str, n_short: int, meta: dict) -> list[str]:
    """Section 3: the level-alignment figure and the gap–offset map with their captions."""
    thr = num(get(meta, "device", "min_delta_lumo_ev"))
    n_diag = min(n_short, DIAGRAM_MAX)
    return [
        '<h2 id="figures"><span class="num">3</span> Level alignment and gap\u2013offset map</h2>',
        '<div class="figs">',
        # named by the caption's lead, described by the caption (an accessibility audit: Chrome gave both figures an
        # empty name, and what they show reached no screen reader)
        '<figure class="levels" id="figure-levels" aria-labelledby="figure-levels-name">'
        f'{described_svg(levels_fig, "figure-levels-caption")}<figcaption id="figure-levels-caption">'
        '<strong id="figure-levels-name">Level alignment.</strong> '
        f"HOMO and LUMO of the {'first ' + str(n_diag) + ' ' if n_diag else ''}shortlisted candidates "
        "(numbered by rank) beside the partner, on the vacuum scale; shaded bands are \u00b11\u03c3. "
        "Arrows give \u0394LUMO (right of each candidate) and \u0394HOMO (left) in eV"
        + (f"; an offset below its threshold ({fmt(thr)} eV for \u0394LUMO) is drawn brick red and dashed, its "
           "value marked \u2717" if not math.isnan(thr) else "")
        + ". The levels (\u00b1 \u03c3) and offsets drawn here are in the shortlist table (section 2), the "
          "partner\u2019s levels in the partner card (section 1).</figcaption></figure>",
        '<figure class="map" id="figure-map" aria-labelledby="figure-map-name">'
        f'{described_svg(map_fig, "figure-map-caption")}<figcaption id="figure-map-caption">'
        '<strong id="figure-map-name">Gap\u2013offset map.</strong> '
        "Estimated PCE of this run\u2019s device model against the chosen partner, as a function of the "
        "candidate\u2019s optical gap and LUMO offset (its HOMO taken as LUMO \u2212 optical gap); the hatched "
        "region is not viable (no working alignment) and has no PCE. Dots: ranked candidates; crosses: ranked "
        "candidates that are not viable; diamonds: the shortlist, labelled by id. "
        "A candidate\u2019s own estimate (tables) uses its computed HOMO and can differ from the colour under "
        "its marker. "
        f"{esc(map_note)}</figcaption></figure>",
        "</div>",
    ]


def _set_aside_section(levels: pd.DataFrame, ranking: pd.DataFrame, meta: dict) -> list[str]:
    """Section 4: the input rows that were not ranked, then the ranked pairs that are not viable."""
    unranked_html, n_unranked = not_ranked_table(levels, ranking)
    bad_html, n_bad, ranks = not_viable_table(ranking, meta)
    where = f" ({ranks}, below every viable pair)" if ranks else ""
    return [
        '<h2 id="set-aside"><span class="num">4</span> Not ranked and not viable</h2>',
        f'<h3 id="not-ranked">Not ranked ({n_unranked})</h3>',
        '<p class="quiet">Input rows that were rejected while reading the input, whose computation '
        "failed, or that the ranking settings left out \u2014 listed so that nothing disappears.</p>",
        table_region(unranked_html, "not-ranked-table"),
        f'<h3 id="not-viable">Not viable ({n_bad})</h3>',
        '<p class="quiet">Ranked pairs without a working alignment with the partner: they are counted among the '
        f"ranked rows and keep their rank{where}, but get no efficiency. The reason for each:</p>",
        table_region(bad_html, "not-viable-table"),
    ]


def _export_items(meta: dict) -> str:
    """The footer's list of files: a link to each one written, a plain note for a file that was not."""
    outputs = get(meta, "outputs", default={}) or {}
    items = []
    for name, what in EXPORTS:
        if name == "shortlist.sdf" and isinstance(outputs, dict) and "shortlist" in outputs \
                and not outputs["shortlist"]:
            note = text(meta.get("shortlist_note")) or "no shortlist.sdf written"
            items.append(f"<li>{esc(note)}</li>")
        else:
            items.append(f'<li><a href="{esc(name)}">{esc(name)}</a> \u2014 {esc(what)}</li>')
    return "".join(items)


def _tail(meta: dict) -> list[str]:
    """The footer with the exported files, and the sorting script."""
    lm = get(meta, "levels_meta", default={}) or {}
    lv = text(lm.get("dascreen")) if isinstance(lm, dict) else ""
    exports = _export_items(meta)
    return [
        "</main>",
        '<footer id="files">',
        '<h2 id="files-heading">Files beside this report</h2>',  # not a part of section 4 (an accessibility audit)
        f"<ul>{exports}</ul>",
        f"<p>Report written by dascreen {esc(__version__)}"
        + (f"; levels computed by dascreen {esc(lv)}" if lv else "")
        + ". The page is self-contained and works offline.</p>",
        "</footer>",
        f"<script>\n{static_text('report.js')}</script>",
        "</body>",
        "</html>",
    ]


def render_report(ranking: pd.DataFrame, levels: pd.DataFrame, partner: dict, meta: dict) -> str:
    """The report page as one HTML5 string.

    Parameters
    ----------
    ranking, levels, partner, meta
        As for :func:`screen.report.write_report`.

    Returns
    -------
    str
        Complete, self-contained page.  Apart from the date line (set
        ``meta["created"]`` to fix it) the output depends only on the inputs.

    Examples
    --------
    >>> import pandas as pd
    >>> page = render_report(pd.DataFrame(), pd.DataFrame(), {"id": "ref"}, {"created": "today"})
    >>> page.startswith("<!DOCTYPE html>"), "Generated today" in page
    (True, True)
    """
    meta = dict(meta or {})
    partner = _resolve_partner(partner, meta)
    ranking = with_level_details(ranking if ranking is not None else pd.DataFrame(), levels)
    short, how = select_shortlist(ranking, meta)
    n_pass, n_short = _pass_counts(ranking, short)
    pid = text(partner.get("id"))
    levels_fig = level_diagram_svg(short, partner, meta)
    map_fig, map_note = design_map_svg(ranking, list(short.index), partner, meta)
    parts = _head(partner, meta) + [
        "<main>",
        _CAUTION,
        counts_strip(meta, levels, ranking, n_short, n_pass),
        '<h2 id="run"><span class="num">1</span> Run at a glance</h2>',
        '<div class="cards">',
        partner_card(partner, meta),
        protocol_card(meta),
        device_card(meta),
        "</div>",
    ]
    parts += _shortlist_section(ranking, short, how, pid, n_pass, meta)
    parts += _figures_section(levels_fig, map_fig, map_note, len(short), meta)
    parts += _set_aside_section(levels, ranking, meta)
    parts += _tail(meta)
    return "\n".join(parts) + "\n"
