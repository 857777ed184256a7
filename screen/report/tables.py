"""The report's HTML tables: the shortlist with drawings, every ranked row, the rows not ranked, the pairs not viable.

Every user text (ids, names, SMILES, pass-through columns, error messages) is
HTML-escaped here; numbers carry a ``data-value`` for the sorting script.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from screen.flags import FLAGS, INFO_FLAGS, codes_of, describe
from screen.io import count_text
from screen.rank_rows import shortlist_mask
from screen.report.drawings import molecule_svg
from screen.report.format import (data_values, esc, fmts, get, has_text, isolated, num, percent, pm_htmls, shorten,
                                  text, texts, truthies)

__all__ = ["with_level_details", "select_shortlist", "shortlist_table", "full_table", "not_ranked_table",
           "not_viable_table", "capped_note", "target_label", "table_region", "caption", "smiles_code", "flag_item",
           "CAPPED_MARK"]

_KNOWN_RANKING = {
    "rank", "id", "name", "smiles", "role", "homo_ev", "lumo_ev", "gap_opt_ev", "partner",
    "delta_lumo_ev", "delta_homo_ev", "voc_v", "jsc_ma_cm2", "ff", "pce_pct", "pce_sigma_pct",
    "p_above_target", "passes", "flags", "homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev",
    "shortlist", "absorber_gap_ev", "scale", "key", "viable", "reason", "model", "acceptor_class", "p_aligned",
}
#: Pass-through columns shown in the full table at most.
_MAX_EXTRA_COLUMNS = 8

_LEVEL_HEADERS = [
    ('HOMO <span class="unit">[eV]</span>', "num", "descending", "homo_ev"),
    ('LUMO <span class="unit">[eV]</span>', "num", "descending", "lumo_ev"),
    ('Optical gap <span class="unit">[eV]</span>', "num", "", "gap_opt_ev"),
    ('\u0394LUMO <span class="unit">[eV]</span>', "num", "descending", "delta_lumo_ev"),
    ('\u0394HOMO <span class="unit">[eV]</span>', "num", "descending", "delta_homo_ev"),
    ('V<sub>oc</sub> <span class="unit">[V]</span>', "num", "descending", "voc_v"),
    ('J<sub>sc</sub> <span class="unit">[mA&#8239;cm<sup>\u22122</sup>]</span>', "num", "descending",
     "jsc_ma_cm2"),
    ('<span title="estimate at the central levels \u00b1 the spread of the Monte-Carlo samples that stay viable; '
     'how likely the pair stays viable is P(aligned)">PCE</span> <span class="unit">[%]</span>', "num", "descending",
     "pce_pct"),
]


# --------------------------------------------------------------------------- #
# Rows
# --------------------------------------------------------------------------- #
def with_level_details(ranking: pd.DataFrame, levels: pd.DataFrame) -> pd.DataFrame:
    """Ranking with ``name`` and σ columns filled from ``levels`` where missing, and the levels' ``note`` as
    ``levels_note`` (it says why a polymer's chain fit is poor)."""
    out = ranking.reset_index(drop=True).copy()
    if levels is None or not len(levels) or "id" not in levels or "id" not in out:
        return out
    ok = levels
    if "status" in levels:
        ok = levels[texts(levels["status"]).str.strip().str.lower().eq("ok")]
    ok = ok.drop_duplicates("id", keep="first")
    ok = ok.set_index(texts(ok["id"]))
    ids = texts(out["id"])
    if "note" in ok and "levels_note" not in out:
        out["levels_note"] = ids.map(ok["note"])
    for col in ("name", "homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev"):
        if col not in ok:
            continue
        filled = ids.map(ok[col])
        if col in out:
            have = has_text(out[col])
            out[col] = out[col].where(have, filled)
        else:
            out[col] = filled
    return out


def select_shortlist(ranking: pd.DataFrame, meta: dict) -> tuple[pd.DataFrame, str]:
    """Rows of the shortlist and a sentence saying how they were chosen.

    A boolean ``shortlist`` column decides when present; otherwise the first
    ``shortlist_size`` rows (default 10) that pass every check.  When none
    pass, the best rows are shown with a note saying so.

    Examples
    --------
    >>> import pandas as pd
    >>> rows, how = select_shortlist(pd.DataFrame({"passes": [True, False, True]}), {})
    >>> list(rows.index), how
    ([0, 2], 'all 2 candidates that pass every check')
    """
    size = num(get(meta, "rank", "shortlist_size"))
    size = 10 if math.isnan(size) or size < 0 else int(size)
    if "shortlist" in ranking:
        mask = truthies(ranking["shortlist"])
        return ranking[mask], "rows marked for the shortlist by the ranking"
    if "passes" in ranking:
        passes = shortlist_mask(ranking)  # passing, and not a second id of one structure
        if passes.any():
            return ranking[passes].head(size), (f"the best {size} candidates that pass every check"
                                                if passes.sum() >= size else
                                                f"all {int(passes.sum())} candidates that pass every check")
        return ranking.head(size), (f"no candidate passes every check; the best {min(size, len(ranking))} "
                                    "rows are shown so the discussion can start somewhere")
    return ranking.head(size), f"the best {size} rows of the ranking"


# --------------------------------------------------------------------------- #
# Cells
# --------------------------------------------------------------------------- #
def _flag_codes(value) -> list[str]:
    """Flag codes of one ``flags`` cell (``;``-joined), empty entries dropped."""
    return codes_of(text(value))


def flag_item(words_html: str, info: bool, attrs: str = "", known: bool = True) -> str:
    """One flag as a list item led by a visible word: "Concern:" for a concern, "Note:" for information, "Flag:" for
    a code the vocabulary does not know (an accessibility audit: the two kinds differed only by colour).

    Examples
    --------
    >>> flag_item("no anchoring group", False)
    '<li class="flag"><span class="flag-kind">Concern:</span> no anchoring group</li>'
    >>> flag_item("role assumed", True, ' data-code="role_assumed"')
    '<li class="flag info" data-code="role_assumed"><span class="flag-kind">Note:</span> role assumed</li>'
    """
    cls, word = ("flag info", "Note") if info else ("flag", "Concern") if known else ("flag unknown", "Flag")
    return f'<li class="{cls}"{attrs}><span class="flag-kind">{word}:</span> {words_html}</li>'


def _flags_html(value, meta: dict) -> str:
    """Bulleted plain-language flags, each led by "Concern:" or "Note:", or a quiet "no concerns" note."""
    codes = _flag_codes(value)
    if not codes:
        return '<span class="ok-note">no concerns flagged</span>'
    items = "".join(flag_item(esc(describe(c, meta)), c in INFO_FLAGS, f' data-code="{esc(c)}"', c in FLAGS)
                    for c in codes)
    return f'<ul class="flags">{items}</ul>'


def _role_badge(role) -> str:
    """Small coloured label for donor / acceptor (escaped text otherwise)."""
    r = text(role).strip()
    if not r:
        return ""
    cls = {"donor": "role-donor", "acceptor": "role-acceptor"}.get(r.lower(), "role-other")
    return f'<span class="role {cls}">{esc(r)}</span>'


def target_label(meta: dict) -> str:
    """``"P(PCE > 10 %)"`` with the recorded target (HTML)."""
    t = num(get(meta, "rank", "target_pce_pct"))
    return (f'P(PCE &gt; <span class="nb">{t:g} %</span>)' if not math.isnan(t)
            else "P(PCE &gt; target)")


_prob = percent  # a probability cell ("43 %")


def _cells(frame: pd.DataFrame, col: str) -> list:
    """The values of one column as ``frame.to_dict("records")`` gives them row by row (None when absent).

    Numeric and boolean columns are their Python numbers, pandas string columns
    with NaN for a missing cell their strings and NaN; any other column is boxed
    by pandas itself (``to_dict("list")``).

    Examples
    --------
    >>> import pandas as pd
    >>> t = pd.DataFrame({"x": [1.5, None], "id": ["a", None]})
    >>> _cells(t, "x"), _cells(t, "id"), _cells(t, "name")
    ([1.5, nan], ['a', nan], [None, None])
    """
    if col not in frame:
        return [None] * len(frame)
    series = frame[col]
    dtype = series.dtype
    if (isinstance(dtype, np.dtype) and dtype.kind in "fiub"
            or isinstance(dtype, pd.StringDtype) and dtype.na_value is np.nan):
        return series.tolist()
    return frame[[col]].to_dict("list")[col]


#: pass-through columns that count things: shown as integers (a meeting-day audit read chain_n_max "4.0")
_INTEGER_EXTRAS = {"chain_n_max"}


def _extra_text(value, column: str) -> str:
    """A pass-through cell as text; a count column's whole number without ".0".

    Examples
    --------
    >>> _extra_text(4.0, "chain_n_max"), _extra_text("", "chain_n_max"), _extra_text(0.5, "other")
    ('4', '', '0.5')
    """
    if column in _INTEGER_EXTRAS:
        return count_text(num(value)) if not math.isnan(num(value)) else text(value)
    return text(value)


def _num_cells(values: list, shown: list[str], extra_class: str = "") -> list[str]:
    """``<td data-value=…>shown</td>`` per row (``shown`` is already HTML; right-aligned by the CSS)."""
    cls = f' class="{extra_class}"' if extra_class else ""
    return [f'<td{cls} data-value="{value}">{html}</td>' for value, html in zip(data_values(values), shown)]


def _rank_cells(frame: pd.DataFrame) -> list[str]:
    """The rank of each row, bold and centred."""
    ranks = [num(r) for r in _cells(frame, "rank")]
    return _num_cells(ranks, ["" if math.isnan(r) else f"{int(r)}" for r in ranks], "rank")


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


def _candidate_cell(ident: str, name, role, smiles=None, representation="", chain=("", "", "")) -> str:
    """Id (bold), name, role badge and, for a polymer repeat unit, a 'polymer' badge saying how many oligomers its
    chain limit rests on, whether the fit is poor and which side chains were cut (``chain``: ``chain_n_max``,
    ``chain_fit_quality``, ``truncated_groups``); the SMILES, shortened, when given (not None).

    Examples
    --------
    >>> cell = _candidate_cell("P1", "", "donor", None, "polymer", ("3", "poor", "per repeat unit: C8H17->CH3"))
    >>> "polymer n\u22643 \u00b7 fit poor" in cell, "side chains cut to methyl: C8H17-&gt;CH3" in cell
    (True, True)
    >>> "polymer n\u22642 \u00b7 no chain limit" in _candidate_cell("P2", "", "donor", None, "polymer", ("2", "poor", ""))
    True
    """
    name = text(name)
    parts = [f'<span class="cid">{esc(ident)}</span>']
    if name and name != ident:
        parts.append(f'<span class="cname">{esc(name)}</span>')
    badge = _role_badge(role)
    if badge:
        parts.append(badge)
    if text(representation).strip().lower() == "polymer":
        n_max, quality, cut, note = (text(c).strip() for c in (*chain, "")[:4])
        n_max = n_max.split(".")[0] if n_max else ""
        title = "polymer repeat unit: levels at the chain limit of its oligomers" + (
            f" n = 1\u2013{n_max}" if n_max else "") + (f", chain fit {quality}" if quality else "")
        if cut:
            title += "; side chains cut to methyl: " + cut.removeprefix("per repeat unit: ") + " per repeat unit"
        why = [part.strip() for part in note.split("; ") if part.strip().startswith("chain_fit_poor:")]
        if why:  # a polymer audit: the flag's text was the same for a dimer-only series and one unfitted gap
            title += "; " + "; ".join(w.removeprefix("chain_fit_poor: ") for w in why)
        short = n_max in ("1", "2")  # a polymer audit: "fit poor" read as "less precise" where nothing was fitted
        if short:
            title += f"; no chain limit: the atom limit left {n_max} oligomer(s), so the levels are those of n = {n_max}"
        label = "polymer" + (f" n\u2264{n_max}" if n_max else "") + (
            " \u00b7 no chain limit" if short else " \u00b7 fit poor" if quality == "poor" else "")
        # the details in words too, not in the tooltip only (an accessibility audit; printed by the style sheet)
        parts.append(f'<span class="role role-other" title="{esc(title)}">{esc(label)}'
                     f'<span class="vh"> \u2014 {esc(title)}</span></span>')
    if smiles is not None:
        smi = text(smiles)
        if smi:
            # hidden from screen readers here, where it would lengthen the row header read with every cell of the
            # row; the whole SMILES is read in the structure cell (:func:`_structure_cell`)
            parts.append(f'<code class="smi" title="{esc(smi)}" aria-hidden="true">{esc(shorten(smi, 48))}</code>')
    # the row's header cell (an accessibility audit: no table had row headers)
    return f'<th scope="row" class="cand" data-value="{esc(ident)}">' + "".join(parts) + "</th>"


def smiles_code(smiles: str, width: int) -> str:
    """``<code class="smi">`` with a SMILES shortened to ``width`` characters, the whole of it in the tooltip and, when
    shortened, for screen readers (an accessibility audit: the full SMILES was in the tooltip only).

    Examples
    --------
    >>> smiles_code("CCO", 48)
    '<code class="smi" title="CCO">CCO</code>'
    >>> print(smiles_code("C" * 10, 6))  # doctest: +NORMALIZE_WHITESPACE
    <code class="smi" title="CCCCCCCCCC"><span aria-hidden="true">CCCCC…</span><span
    class="vh">CCCCCCCCCC</span></code>
    """
    short = shorten(smiles, width)
    if short == smiles:
        return f'<code class="smi" title="{esc(smiles)}">{esc(short)}</code>'
    return (f'<code class="smi" title="{esc(smiles)}"><span aria-hidden="true">{esc(short)}</span>'
            f'<span class="vh">{esc(smiles)}</span></code>')


def caption(table_id: str, words: str) -> str:
    """A table's visually hidden caption, ``id="<table id>-caption"`` (an accessibility audit: no table had a name;
    the heading above it names it on screen).

    Examples
    --------
    >>> caption("full-table", "Every ranked candidate")
    '<caption class="vh" id="full-table-caption">Every ranked candidate</caption>'
    """
    return f'<caption class="vh" id="{table_id}-caption">{words}</caption>'


def table_region(html: str, table_id: str, wide: bool = False) -> str:
    """``<div class="tablewrap">`` around a table: a region named by the table's caption that the keyboard can focus
    and scroll (an accessibility audit: at 200 % zoom the columns right of the screen were out of the keyboard's
    reach); a plain wrapper around a note that stands in for an empty table.

    Examples
    --------
    >>> table_region('<table id="t"></table>', "t", wide=True)
    '<div class="tablewrap wide" role="region" tabindex="0" aria-labelledby="t-caption"><table id="t"></table></div>'
    >>> table_region('<p class="quiet">Every ranked pair is viable.</p>', "t")
    '<div class="tablewrap"><p class="quiet">Every ranked pair is viable.</p></div>'
    """
    cls = "tablewrap wide" if wide else "tablewrap"
    if not html.startswith("<table"):
        return f'<div class="{cls}">{html}</div>'
    return f'<div class="{cls}" role="region" tabindex="0" aria-labelledby="{table_id}-caption">{html}</div>'


def _candidate_cells(frame: pd.DataFrame, ids: list[str], with_smiles: bool) -> list[str]:
    """:func:`_candidate_cell` of each row."""
    smiles = _cells(frame, "smiles") if with_smiles else [None] * len(frame)
    chains = zip(_cells(frame, "chain_n_max"), _cells(frame, "chain_fit_quality"), _cells(frame, "truncated_groups"),
                 _cells(frame, "levels_note"))
    return [_candidate_cell(i, n, r, s, p, c)
            for i, n, r, s, p, c in zip(ids, _cells(frame, "name"), _cells(frame, "role"), smiles,
                                        _cells(frame, "representation"), chains)]


def _level_columns(frame: pd.DataFrame) -> list[list[str]]:
    """HOMO, LUMO, optical gap (each ± σ), ΔLUMO, ΔHOMO, Voc, Jsc cells, one list per column."""
    out = []
    for col in ("homo_ev", "lumo_ev", "gap_opt_ev"):
        values = _cells(frame, col)
        out.append(_num_cells(values, pm_htmls(values, _cells(frame, col.replace("_ev", "_sigma_ev")))))
    for col, digits in (("delta_lumo_ev", 2), ("delta_homo_ev", 2), ("voc_v", 2), ("jsc_ma_cm2", 1)):
        values = _cells(frame, col)
        out.append(_num_cells(values, fmts(values, digits)))
    return out


#: marks a PCE capped at the detailed-balance limit (flag ``pce_capped``); explained by :func:`capped_note`
CAPPED_MARK = "\u2020"


def _capped(frame: pd.DataFrame) -> list[bool]:
    """Whether each row's PCE was capped at the detailed-balance limit (flag ``pce_capped``)."""
    return ["pce_capped" in _flag_codes(f) for f in _cells(frame, "flags")]


def _product_pct(voc, jsc, ff, meta: dict) -> float:
    """Voc × Jsc × FF as a percentage of the incident power (NaN when a factor is missing).

    The incident power is the run's (``device.incident_power_w_m2``, else
    ``pin_w_m2``), else 1000 W m⁻² (the AM1.5G standard's nominal value).

    Examples
    --------
    >>> round(_product_pct(0.9, 20.0, 0.7, {"device": {"incident_power_w_m2": 1000.0}}), 2)
    12.6
    """
    p_in = num(get(meta, "device", "incident_power_w_m2"))
    p_in = num(get(meta, "device", "pin_w_m2")) if math.isnan(p_in) else p_in
    p_in = 1000.0 if math.isnan(p_in) or p_in <= 0 else p_in
    # V × mA cm⁻² = 10 W m⁻²; as % of P_in
    return num(voc) * num(jsc) * num(ff) * 10.0 / p_in * 100.0


def _capped_title(voc, jsc, ff, meta: dict) -> str:
    """Tooltip of a capped PCE: the flag's text and the product it replaced."""
    product = _product_pct(voc, jsc, ff, meta)
    more = "" if math.isnan(product) else f"; Voc \u00d7 Jsc \u00d7 FF would give {product:.1f} %"
    return describe("pce_capped", meta) + more


def _pce_cells(frame: pd.DataFrame, meta: dict | None = None) -> list[str]:
    """PCE ± σ of each row, emphasised; a capped PCE is marked and explained in its title."""
    values = _cells(frame, "pce_pct")
    shown = [f"<strong>{value}</strong>{pm[len(value):]}"
             for value, pm in zip(fmts(values, 1), pm_htmls(values, _cells(frame, "pce_sigma_pct"), 1))]
    out = []
    for value, html, capped, voc, jsc, ff in zip(data_values(values), shown, _capped(frame), _cells(frame, "voc_v"),
                                                 _cells(frame, "jsc_ma_cm2"), _cells(frame, "ff")):
        if capped:
            title = esc(_capped_title(voc, jsc, ff, meta or {}))
            marked = html.replace("</strong>", f'</strong><sup class="capped-mark">{CAPPED_MARK}</sup>', 1)
            out.append(f'<td class="pce capped" title="{title}" data-value="{value}">{marked}</td>')
        else:
            out.append(f'<td class="pce" data-value="{value}">{html}</td>')
    return out


def capped_note(ranking: pd.DataFrame, meta: dict | None = None) -> str:
    """Footnote for the PCE values capped at the detailed-balance limit ("" when none is).

    Examples
    --------
    >>> import pandas as pd
    >>> capped_note(pd.DataFrame({"flags": ["", "role_assumed"]}))
    ''
    >>> "Shockley" in capped_note(pd.DataFrame({"flags": ["pce_capped"]}))
    True
    """
    n = sum(_capped(ranking)) if ranking is not None and len(ranking) else 0
    if not n:
        return ""
    # the products, visible and printed (an accessibility audit: they were in the cells' tooltips only)
    products = [isolated(f"{esc(text(ident))} {_product_pct(voc, jsc, ff, meta or {}):.1f} %")
                for capped, ident, voc, jsc, ff in zip(_capped(ranking), _cells(ranking, "id"),
                                                       _cells(ranking, "voc_v"), _cells(ranking, "jsc_ma_cm2"),
                                                       _cells(ranking, "ff"))
                if capped and not math.isnan(_product_pct(voc, jsc, ff, meta or {}))]
    listed = (f" V<sub>oc</sub> \u00d7 J<sub>sc</sub> \u00d7 FF would give: {', '.join(products[:_CAPPED_LISTED])}"
              + (f" and {len(products) - _CAPPED_LISTED} more" if len(products) > _CAPPED_LISTED else "") + "."
              if products else "")
    return (f"{CAPPED_MARK} PCE capped ({n} row{'s' if n > 1 else ''}): {esc(describe('pce_capped', meta))}. "
            "The PCE shown is that limit, so it is smaller than V<sub>oc</sub> \u00d7 J<sub>sc</sub> \u00d7 FF of "
            "the same row; the product is also in the cell's tooltip." + listed)


#: capped rows whose V_oc × J_sc × FF :func:`capped_note` lists
_CAPPED_LISTED = 20


def _prob_cells(frame: pd.DataFrame, column: str = "p_above_target") -> list[str]:
    """A probability column of each row (by default that of beating the target)."""
    values = _cells(frame, column)
    return _num_cells(values, [_prob(v) for v in values])


def _passes_cell(value) -> str:
    """Check mark for rows that pass every check."""
    t = text(value).strip().lower()
    if t in ("true", "1", "yes"):
        return '<td class="pass" data-value="1">yes</td>'
    if t in ("false", "0", "no"):
        return '<td class="fail" data-value="0">no</td>'
    return f'<td data-value="">{esc(value)}</td>'


def _table_rows(ids: list[str], columns: list[list[str]]) -> list[str]:
    """``<tr data-id=…>`` rows from the cells of each column."""
    return [f'<tr data-id="{esc(ident)}">' + "".join(cells) + "</tr>" for ident, cells in zip(ids, zip(*columns))]


# --------------------------------------------------------------------------- #
# Tables
# --------------------------------------------------------------------------- #
def shortlist_table(rows: pd.DataFrame, meta: dict) -> str:
    """The shortlist table with structure drawings."""
    head = _header([("Rank", "num", "", "rank"), ("Structure", "", "", ""),
                    ("Candidate", "text", "", "id")] + _LEVEL_HEADERS
                   + [(target_label(meta), "num", "descending", "p_above_target"),
                      ("Notes", "", "", "flags")])
    ids = [text(i) for i in _cells(rows, "id")]
    drawings = [_structure_cell(ident, text(smiles)) for ident, smiles in zip(ids, _cells(rows, "smiles"))]
    notes = [f'<td class="notes">{_flags_html(flags, meta)}</td>' for flags in _cells(rows, "flags")]
    body = _table_rows(ids, [_rank_cells(rows), drawings, _candidate_cells(rows, ids, with_smiles=True),
                             *_level_columns(rows), _pce_cells(rows, meta), _prob_cells(rows), notes])
    if not body:
        body.append('<tr><td colspan="13" class="empty">no candidates to show</td></tr>')
    return ('<table class="sortable shortlist" id="shortlist-table">'
            + caption("shortlist-table", "Shortlisted candidates") + f'{head}<tbody>'
            + "\n".join(body) + "</tbody></table>")


def _structure_cell(ident: str, smiles: str) -> str:
    """The drawing of one shortlisted structure and, for screen readers, its whole SMILES (an accessibility audit: the
    SMILES was whole in a tooltip only; the candidate cell shows it shortened).

    Examples
    --------
    >>> _structure_cell("X", "")
    '<td class="struct"><span class="nostruct">no structure available</span></td>'
    """
    svg = molecule_svg(smiles, f"structure of {ident}")
    drawing = svg if svg is not None else '<span class="nostruct">no structure available</span>'
    said = f'<span class="vh">SMILES {esc(smiles)}</span>' if smiles else ""
    return f'<td class="struct">{drawing}{said}</td>'


def _compact_notes(flag_cells: list, meta: dict) -> list[str]:
    """The plain-words flags of each row, ``;``-joined (each distinct flag set described once)."""
    notes_of: dict[str, str] = {}  # a few distinct flag sets among thousands of rows
    out = []
    for cell in flag_cells:
        flags = text(cell)
        notes = notes_of.get(flags)
        if notes is None:
            notes = notes_of[flags] = "; ".join(esc(describe(c, meta)) for c in _flag_codes(flags)) or "\u2014"
        out.append(f'<td class="notes-compact">{notes}</td>')
    return out


def full_table(ranking: pd.DataFrame, meta: dict) -> str:
    """Every ranked row, no drawings; pass-through columns at the end."""
    extra = [c for c in ranking.columns if c not in _KNOWN_RANKING][:_MAX_EXTRA_COLUMNS]
    head = _header([("Rank", "num", "", "rank"), ("Candidate", "text", "", "id")] + _LEVEL_HEADERS
                   + [(target_label(meta), "num", "descending", "p_above_target"),
                      ("P(aligned)", "num", "descending", "p_aligned"),
                      ("Passes", "num", "descending", "passes"), ("Notes", "", "", "flags")]
                   + [(esc(c).replace("_", "_<wbr>"), "text", "", "") for c in extra])  # breakable when printed
    ids = [text(i) for i in _cells(ranking, "id")]
    extras = [[f'<td class="extra">{esc(shorten(_extra_text(v, c), 120))}</td>' for v in _cells(ranking, c)]
              for c in extra]
    body = _table_rows(ids, [_rank_cells(ranking), _candidate_cells(ranking, ids, with_smiles=False),
                             *_level_columns(ranking), _pce_cells(ranking, meta), _prob_cells(ranking),
                             _prob_cells(ranking, "p_aligned"), [_passes_cell(v) for v in _cells(ranking, "passes")],
                             _compact_notes(_cells(ranking, "flags"), meta), *extras])
    if not body:
        body.append('<tr><td colspan="15" class="empty">the ranking is empty</td></tr>')
    return ('<table class="sortable full" id="full-table">' + caption("full-table", "Every ranked candidate")
            + f'{head}<tbody>'
            + "\n".join(body) + "</tbody></table>")


def _unranked_reason(status, error, reason) -> tuple[str, str]:
    """Status (lower case, ``ok`` when blank) and the reason a levels row is not ranked, from its cells."""
    st = text(status).strip().lower() or "ok"
    err = text(error).strip()
    reason = text(reason).strip()
    if st == "ok":
        why = "computed, but absent from the ranking (removed by the ranking settings)"
    elif err and reason and reason not in err:
        why = f"{reason}: {err}"
    else:
        why = err or reason or "no reason recorded"
    return st, why


def _not_viable_rows(ranking: pd.DataFrame) -> pd.DataFrame:
    """Ranked rows whose pair is not viable (column ``viable`` false), with their reason."""
    if ranking is None or "viable" not in ranking or not len(ranking):
        return ranking.iloc[0:0] if ranking is not None else pd.DataFrame()
    bad = ~truthies(ranking["viable"])
    return ranking[bad]


def not_ranked_table(levels: pd.DataFrame, ranking: pd.DataFrame) -> tuple[str, int]:
    """Input rows that are not in the ranking (rejected, failed, or left out by the settings), with their reasons.

    Returns the table and the number of rows listed.

    Examples
    --------
    >>> import pandas as pd
    >>> lv = pd.DataFrame({"id": ["a", "b", "c"], "status": ["ok", "ok", "rejected"], "error": ["", "", "bad SMILES"]})
    >>> rk = pd.DataFrame({"id": ["a", "b"], "viable": [True, False], "reason": ["", "inverted alignment"]})
    >>> html, n = not_ranked_table(lv, rk)
    >>> n, "bad SMILES" in html, "inverted alignment" in html
    (1, True, False)
    """
    if levels is None or not len(levels):
        return '<p class="quiet">No levels table was given, so unranked rows cannot be listed.</p>', 0
    body = _unranked_rows(levels, ranking)
    if not body:
        return '<p class="quiet">Every input row was ranked.</p>', 0
    table = ('<table class="unranked" id="not-ranked-table">' + caption("not-ranked-table", "Input rows not ranked")
             + '<thead><tr><th scope="col">Id</th>'
             '<th scope="col">Name</th><th scope="col">Status</th><th scope="col">Reason</th>'
             '<th scope="col">SMILES as given</th></tr></thead><tbody>' + "\n".join(body)
             + "</tbody></table>")
    return table, len(body)


def not_viable_table(ranking: pd.DataFrame, meta: dict | None = None) -> tuple[str, int, str]:
    """Ranked pairs that are not viable, with their rank and reason.

    Returns
    -------
    tuple of (str, int, str)
        The table, the number of rows listed and their ranks in words
        (``"ranks 3–4"``; "" without rows).

    Examples
    --------
    >>> import pandas as pd
    >>> rk = pd.DataFrame({"rank": [1, 2, 3], "id": ["a", "b", "c"], "viable": [True, False, False],
    ...                    "reason": ["", "inverted alignment", ""], "flags": ["", "", "lumo_offset_low"]})
    >>> html, n, ranks = not_viable_table(rk, {"device": {"min_delta_lumo_ev": 0.3}})
    >>> n, ranks, "inverted alignment" in html, "below 0.30 eV" in html
    (2, 'ranks 2\u20133', True, True)
    """
    bad = _not_viable_rows(ranking)
    if not len(bad):
        return '<p class="quiet">Every ranked pair is viable.</p>', 0, ""
    ranks = [int(r) for r in (num(x) for x in _cells(bad, "rank")) if not math.isnan(r)]
    words = "" if not ranks else (f"rank {ranks[0]}" if min(ranks) == max(ranks)
                                  else f"ranks {min(ranks)}\u2013{max(ranks)}")
    table = ('<table class="unranked" id="not-viable-table">'
             + caption("not-viable-table", "Ranked pairs that are not viable") + '<thead><tr><th scope="col">Rank</th>'
             '<th scope="col">Id</th><th scope="col">Name</th><th scope="col">Reason</th>'
             '<th scope="col">SMILES as given</th></tr></thead><tbody>' + "\n".join(_not_viable_body(bad, meta))
             + "</tbody></table>")
    return table, len(bad), words


def _smiles_cells(values: list) -> list[str]:
    """The "SMILES as given" cell of each row (each distinct SMILES escaped once)."""
    done: dict[str, str] = {}
    out = []
    for value in values:
        smi = text(value)
        cell = done.get(smi)
        if cell is None:
            cell = done[smi] = f"<td>{smiles_code(smi, 60)}</td>"
        out.append(cell)
    return out


def _unranked_row(ident, name, status_html: str, why_html: str, smiles_cell: str) -> str:
    """One row of the not-ranked table: id, name, status badge, reason and SMILES cells."""
    shown = esc(ident)
    return (f'<tr data-id="{shown}"><th scope="row"><span class="cid">{shown}</span></th>'
            f'<td>{isolated(esc(text(name)))}</td>'
            f'<td>{status_html}</td><td class="reason">{why_html}</td>{smiles_cell}</tr>')


def _not_viable_body(bad: pd.DataFrame, meta: dict | None = None) -> list[str]:
    """Table rows of the ranked pairs that are not viable: rank, id, name, the ranking's reason (else their
    flags in words) and SMILES."""
    whys: dict[tuple[str, str], str] = {}  # a few distinct reasons among thousands of rows
    body = []
    for rank, ident, name, reason, flags, cell in zip(
            _rank_cells(bad), _cells(bad, "id"), _cells(bad, "name"), _cells(bad, "reason"), _cells(bad, "flags"),
            _smiles_cells(_cells(bad, "smiles"))):
        key = (text(reason).strip(), text(flags))
        why = whys.get(key)
        if why is None:
            why = whys[key] = esc(key[0] or "; ".join(describe(c, meta) for c in _flag_codes(key[1]))
                                  or "no reason recorded")
        shown = esc(ident)
        body.append(f'<tr data-id="{shown}">{rank}<th scope="row"><span class="cid">{shown}</span></th>'
                    f'<td>{isolated(esc(text(name)))}</td>'
                    f'<td class="reason">{why}</td>{cell}</tr>')
    return body


def _unranked_rows(levels: pd.DataFrame, ranking: pd.DataFrame) -> list[str]:
    """Table rows of the input rows that are not in the ranking."""
    ranked_ids = set(texts(ranking["id"])) if ranking is not None and "id" in ranking else set()
    status = (texts(levels["status"]).str.strip().str.lower() if "status" in levels
              else pd.Series("ok", index=levels.index))
    ids = texts(levels["id"]) if "id" in levels else pd.Series("", index=levels.index)
    missing_ok = status.eq("ok") & ~ids.isin(ranked_ids)
    rows = levels[status.ne("ok") | missing_ok]
    body = []
    for ident, name, state, error, reason, cell in zip(
            _cells(rows, "id"), _cells(rows, "name"), _cells(rows, "status"), _cells(rows, "error"),
            _cells(rows, "reason"), _smiles_cells(_cells(rows, "smiles"))):
        st, why = _unranked_reason(state, error, reason)
        cls = {"rejected": "st-rejected", "failed": "st-failed"}.get(st, "st-other")
        body.append(_unranked_row(ident, name, f'<span class="status {cls}">{esc(st)}</span>', esc(why), cell))
    return body
