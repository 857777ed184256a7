"""Self-contained HTML report of a dye-cell ranking (dyes against one oxide and one mediator).

Sections: run at a glance (oxide, mediator, model and calibration cards),
shortlist with structure drawings and every flag in plain words, the
not-viable dyes with their reasons (when there are any), the dye-cell
energy diagram (:mod:`screen.dyecell.figure`), every ranked dye with
its viability in words, and the dyes that were not ranked with the reason.
Probabilities are shown in percent (``ranking.csv`` keeps fractions 0–1).  A
PCE is shown as value ± σ, σ being the spread of the Monte-Carlo samples that
stay viable, with ``p_viable`` beside it ("7.2 ± 1.4 % · works in 67 % of
samples").  The caution at the top follows the oxide's type (the ideal voltage
E_redox − E_CB or E_VB − E_redox) and, for a p-type oxide, says that its PCEs
are optimistic; where the potentials come from is worded by what the dye file
says (its ``source`` column), a potential converted from another reference
electrode is named with the offset used and whether it is recalled, and a band
edge or mediator potential far outside the library's range gets a notice (a
likely sign slip).
Styles and the sorting script are those of the bulk-heterojunction report
(``static/``); every user text is HTML-escaped; nothing is fetched from the
network.

References
----------
.. [1] A. Hagfeldt, G. Boschloo, L. Sun, L. Kloo, H. Pettersson, Chem. Rev.
   110 (2010) 6595. :doi:`10.1021/cr900356p`
"""

from __future__ import annotations

import math
import os
from datetime import datetime, timezone
from pathlib import Path

import pandas as pd

from screen import __version__
from screen.dyecell.flags import INFO_FLAGS, describe
from screen.dyecell.scales import ABSOLUTE_NHE_V, FILM_FC_EV, fc_vs_nhe_v, film_scale_offset_ev
from screen.flags import codes_of
from screen.io import atomic_path
from screen.report.drawings import molecule_svg
from screen.dyecell.figure import DIAGRAM_MAX, diagram_rows, dyecell_diagram_svg
from screen.report.export import safe_csv_bytes
from screen.report.format import (
    NOT_RECORDED,
    data_value,
    esc,
    fmt,
    get,
    num,
    percent,
    pm_html,
    shorten,
    text,
    truthy,
)
from screen.report.page import described_svg, static_text
from screen.report.tables import caption, flag_item, smiles_code, table_region

__all__ = ["render_dyecell_report", "write_dyecell_report", "EXPORTS"]

#: files beside ``report.html``
EXPORTS = (
    ("ranking.csv", "the full ranking, best first (potentials in V vs NHE, driving forces in eV)"),
    ("shortlist.sdf", "2-D structures of the shortlisted dyes with their estimates as properties"),
    ("ranking.safe.csv", "the ranking for spreadsheet programs (formula-like text cells neutralised)"),
    ("ranking.meta.json", "oxide, mediator, model parameters, calibration and provenance"),
)
#: what the CSV's ``e_ox_excited_v_nhe`` holds on a p-type oxide (added to the ranking.csv line of the file list)
_P_TYPE_CSV_NOTE = ("; on this p-type oxide the column e_ox_excited_v_nhe holds the dye\u2019s estimated reduction "
                    "potential E(S/S\u207b) \u2248 E(S\u207a/S) \u2212 E\u2080\u208b\u2080/e, not E(S\u207a/S*)")
_CAUTION_SOURCE = {
    "computed": ("Potentials come from a semi-empirical quantum-chemistry method with an empirical calibration on a "
                 "small set of recalled literature values"),
}
_CAUTION_REST = (
    ", and the cell model is idealised (sharp absorption edge, fixed photon-to-current efficiency, fill factor "
    "and V<sub>oc</sub> loss below the ideal {ideal}, the same for every dye and every mediator: real cells lose "
    "more with high-potential couples, so comparisons across mediators favour them, e.g. [Cu(dmby)<sub>2</sub>] "
    "1.27 V estimated against about 1.07 V measured, from memory). "
    "Use the numbers to rank and to choose what to discuss, not as predicted measurements. Band edges move with "
    "pH and electrolyte additives. Making and handling any dye follows your lab\u2019s chemical-safety rules and "
    "the safety data sheets of every reagent.")
#: the ideal photovoltage the Voc loss is taken from, by oxide type (HTML)
_IDEAL_VOLTAGE = {"n": "E<sub>redox</sub> \u2212 E<sub>CB</sub>", "p": "E<sub>VB</sub> \u2212 E<sub>redox</sub>"}
#: the p-type caveat (docs/dyecell.md, Limits): n-type η and FF, an estimated reduction potential
_CAUTION_P_TYPE = (
    '<p class="caution" id="caution-p-type"><strong>p-type cell: optimistic PCEs.</strong> On a p-type oxide such '
    "as NiO the photon-to-current efficiency and fill factor of the model are n-type values, and the dye\u2019s "
    "reduction potential is estimated as E(S\u207a/S) \u2212 E\u2080\u208b\u2080/e (exciton binding neglected), "
    "so the PCEs here are optimistic: measured NiO cells reach about 0.1\u20130.2 % (recalled from the "
    "literature). Compare p-type dyes with each other, not with n-type cells.</p>")
#: not-viable dyes listed by name under the shortlist (the rest are in the table of every ranked dye)
NOT_VIABLE_SHOWN = 20
#: the E(S+/S) model is called weak when its nested LOO MAE is above this fraction of a constant model's
WEAK_MODEL_RATIO = 0.8


def _file_source_words(meta: dict) -> str:
    """Where a dye file's potentials come from, by what the file says (its ``source`` column), in HTML.

    Examples
    --------
    >>> _file_source_words({})
    'Potentials are taken from the input file as given (no source column: whether they were measured is not recorded)'
    >>> _file_source_words({"e_ox_sources": {"calibrated from xTB": 2}})
    'Potentials are taken from the input file, whose source column says: \u201ccalibrated from xTB\u201d'
    """
    sources = get(meta, "e_ox_sources", default={}) or {}
    said = {str(k): v for k, v in sources.items() if str(k).strip() and str(k) != "user file"}
    if not said:
        return ("Potentials are taken from the input file as given (no source column: whether they were measured is "
                "not recorded)")
    many = len(sources) > 1
    items = [f"\u201c{esc(shorten(k, 80))}\u201d" + (f" ({esc(v)} dye{'' if v == 1 else 's'})" if many else "")
             for k, v in list(said.items())[:4]]
    rest = f" and {len(said) - 4} more" if len(said) > 4 else ""
    blank = sources.get("user file")
    none = f", and nothing for {esc(blank)} dye{'' if blank == 1 else 's'}" if blank else ""
    return f"Potentials are taken from the input file, whose source column says: {', '.join(items)}{rest}{none}"


def _caution(meta: dict) -> str:
    """The page's caution: where the potentials come from, the idealised cell for the oxide's type, the p-type
    caveat, and a weak E(S⁺/S) model (HTML).

    Examples
    --------
    >>> "as given (no source column" in _caution({})
    True
    >>> "E<sub>redox</sub> \u2212 E<sub>CB</sub>" in _caution({}), "optimistic" in _caution({})
    (True, False)
    >>> p = _caution({"oxide": {"type": "p"}})
    >>> "E<sub>VB</sub> \u2212 E<sub>redox</sub>" in p, "E<sub>CB</sub>" in p, "optimistic" in p
    (True, False, True)
    >>> weak = {"calibration": {"e_ox": {"loo_mae": 0.072, "baseline_loo_mae": 0.077, "unit": "V"}}}
    >>> "barely tells dyes apart" in _caution(weak)
    True
    """
    cal = get(meta, "calibration", default=None)
    source = "computed" if isinstance(cal, dict) and cal else "file"
    p_type = _p_type(meta)
    lead = _CAUTION_SOURCE["computed"] if source == "computed" else _file_source_words(meta)
    out = ('<p class="caution" id="caution"><strong>Screening estimates.</strong> ' + lead
           + _CAUTION_REST.format(ideal=_IDEAL_VOLTAGE["p" if p_type else "n"]) + "</p>")
    if p_type:
        out += _CAUTION_P_TYPE
    notices = [text(n) for n in (get(meta, "notices", default=[]) or []) if text(n)]
    if notices:
        out += ('<p class="caution" id="caution-values"><strong>Check these values.</strong> '
                + " ".join(esc(n[0].upper() + n[1:]) + "." for n in notices) + "</p>")
    e_ox = (cal or {}).get("e_ox") if source == "computed" else None
    mae, base = num((e_ox or {}).get("loo_mae")), num((e_ox or {}).get("baseline_loo_mae"))
    if e_ox and base > 0 and mae > WEAK_MODEL_RATIO * base:
        out += ('<p class="caution" id="caution-e-ox">The E(S\u207a/S) model barely tells dyes apart: nested '
                f"leave-one-out MAE {fmt(mae, 3)} V against {fmt(base, 3)} V for one constant for every dye of its "
                "reference set. A dye\u2019s computed potential says little more than that it is an organic dye, so "
                "a regeneration verdict within about 0.1 V of its threshold is a coin toss (P(viable) in the table "
                "says how close), and a dye unlike the reference set can be off by several tenths of a volt.</p>")
    return out


def _conversions_html(meta: dict) -> str:
    """The reference conversions behind the dyes' E(S⁺/S) (``ranking.meta.json`` ``e_ox_conversions``), HTML;
    ``""`` when no potential was converted.

    Examples
    --------
    >>> html = _conversions_html({"e_ox_conversions": [{"reference": "fc-dcm", "name": "Fc+/Fc in dichloromethane",
    ...                           "offset_v": 0.7, "from_memory": True, "rows": 2}]})
    >>> "+0.70 V" in html, "recalled" in html, "2 dyes" in html
    (True, True, True)
    """
    conv = [c for c in (get(meta, "e_ox_conversions", default=[]) or []) if isinstance(c, dict)]
    if not conv:
        return ""
    items = []
    for c in conv:
        rows = int(num(c.get("rows")) or 0)
        recalled = (" \u2014 a recalled value (<code>from_memory</code>), check it before relying on absolute "
                    "numbers" if c.get("from_memory") is True else "")
        offset = f"{num(c.get('offset_v')):+.3f}"
        offset = offset[:-1] if offset.endswith("0") else offset
        against = esc(c.get("name")) or esc(c.get("reference"))
        items.append(f"<li>{rows} dye{'' if rows == 1 else 's'} given against {against} "
                     f"(<code>{esc(c.get('reference'))}</code>): {offset} V added{recalled}</li>")
    return ('<p class="quiet" id="e-ox-conversions">E(S\u207a/S) of these dyes was given against another '
            "reference electrode and converted to V vs NHE with <code>screen/data/electrodes.csv</code> (per dye: "
            "columns <code>e_ox_reference</code> and <code>e_ox_offset_v</code> of ranking.csv):</p>"
            f'<ul class="small">{"".join(items)}</ul>')


def _dl(items) -> str:
    return "<dl>" + "".join(f"<dt>{t}</dt><dd>{v}</dd>" for t, v in items) + "</dl>"


def _material_card(m: dict, title: str, ident: str, edge_word: str) -> str:
    m = m if isinstance(m, dict) else {}
    source = text(m.get("source"))
    doi = text(m.get("doi"))
    if doi:
        source = f"{source} (doi:{doi})" if source else f"doi:{doi}"
    items = [(title, f'<span class="cid">{esc(m.get("id")) or NOT_RECORDED}</span>'
              + (f" \u2014 {esc(m.get('name'))}" if text(m.get("name")) else "")),
             (edge_word, (fmt(m.get("potential_v_nhe")) + " V vs NHE") if text(m.get("potential_v_nhe")) else
              NOT_RECORDED)]
    if text(m.get("type")):
        kind = "n-type (electron injection)" if m.get("type") == "n" else "p-type (hole injection)"
        if m.get("type_assumed") is True:
            kind += " \u2014 assumed: the oxide file has no type column (add type = n or p)"
        items.append(("Type", kind))
    if text(m.get("conditions")):
        items.append(("Conditions", esc(shorten(text(m.get("conditions")), 200))))
    if text(m.get("conversion")):
        items.append(("Converted", esc(m.get("conversion"))))
    items.append(("Source", esc(source) or NOT_RECORDED))
    if m.get("from_memory") is True:
        items.append(("Provenance", "value recalled from the literature, not read from the source \u2014 check it "
                                    "before relying on absolute numbers"))
    if text(m.get("notes")):
        items.append(("Notes", f'<span class="small">{esc(shorten(text(m.get("notes")), 500))}</span>'))
    return f'<section class="card" id="{ident}"><h3>{title}</h3>' + _dl(items) + "</section>"


def _p_type(meta: dict) -> bool:
    """True when the run's oxide is p-type (hole injection into the valence band)."""
    return text(get(meta, "oxide", "type", default="")).strip().lower() == "p"


def _voc_loss_html(m: dict, p_type: bool) -> str:
    """The Voc-loss line of the model card for the oxide's type."""
    if p_type:
        loss = m.get("voc_loss_p_v")
        return ((fmt(loss, 2) + " V" if text(loss) else NOT_RECORDED)
                + " below the ideal E<sub>VB</sub> \u2212 E<sub>redox</sub>: V<sub>oc</sub> = E<sub>VB</sub> \u2212 "
                "E<sub>redox</sub> \u2212 loss (<code>voc_loss_p_v</code>, p-type)")
    return (fmt(m.get("voc_loss_v"), 2) + " V below the ideal E<sub>redox</sub> \u2212 E<sub>CB</sub>: "
            "V<sub>oc</sub> = E<sub>redox</sub> \u2212 E<sub>CB</sub> \u2212 loss (<code>voc_loss_v</code>, n-type)")


def _own_threshold(meta: dict) -> str:
    """Whose regeneration threshold applies: the mediator's own, a set value, or the default on a p-type oxide.

    Examples
    --------
    >>> _own_threshold({"regeneration_threshold_ev": 0.1, "mediator": {"min_drive_reg_ev": 0.1}})
    ' (this mediator’s own)'
    >>> _own_threshold({"regeneration_threshold_ev": 0.2, "mediator": {"min_drive_reg_ev": 0.1}})
    ' (set; this mediator’s own 0.10 eV)'
    >>> _own_threshold({"regeneration_threshold_ev": 0.2, "regeneration_threshold_source": "default_p_type",
    ...                 "mediator": {"min_drive_reg_ev": 0.5}})[:40]
    ' (the general default: this mediator’s o'
    """
    own, used = num(get(meta, "mediator", "min_drive_reg_ev")), num(meta.get("regeneration_threshold_ev"))
    source = text(meta.get("regeneration_threshold_source"))
    if math.isnan(own):
        return " (set with dyecell.min_drive_reg_ev)" if source == "set" else ""
    if source == "default_p_type":
        return (f" (the general default: this mediator\u2019s own {fmt(own, 2)} eV is stated for regenerating an "
                "oxidised dye on an n-type oxide, not for the p-type step, the reduced dye reducing the mediator; "
                "<code>dyecell.min_drive_reg_ev</code> sets another value)")
    if source == "set" or (not source and own != used):
        return f" (set; this mediator\u2019s own {fmt(own, 2)} eV)"
    return " (this mediator\u2019s own)"


def _model_card(meta: dict) -> str:
    m = get(meta, "model", default={}) or {}
    items = [
        ("Photon-to-current", fmt(m.get("photon_to_current"), 2) + " above E\u2080\u208b\u2080"),
        ("Fill factor", fmt(m.get("ff"), 2)),
        ("V<sub>oc</sub> loss", _voc_loss_html(m, _p_type(meta))),
        ("Injection threshold", fmt(m.get("min_drive_inj_ev"), 2) + " eV"),
        ("Regeneration threshold", fmt(meta.get("regeneration_threshold_ev"), 2) + " eV" + _own_threshold(meta)),
        ("Anchor required", "yes" if m.get("require_anchor") else "no"),
        ("Spectrum", esc(m.get("spectrum")) or NOT_RECORDED),
        ("Target", fmt(get(meta, "rank", "target_pce_pct"), 1) + " % PCE; "
         + esc(get(meta, "rank", "n_samples", default="")) + " Monte-Carlo samples"),
    ]
    cal = get(meta, "calibration", default=None)
    if isinstance(cal, dict) and cal:
        for key, label in (("e_ox", "E(S\u207a/S) model"), ("e00", "E\u2080\u208b\u2080 model")):
            c = cal.get(key) or {}
            if c:
                unit = c.get("unit", "")
                items.append((label, f"{esc(' + '.join(c.get('features', [])))}; n = {esc(c.get('n'))}; "
                                     f"nested leave-one-out MAE {fmt(c.get('loo_mae'), 3)} {esc(unit)} (constant model "
                                     f"{fmt(c.get('baseline_loo_mae'), 3)} {esc(unit)})"))
    else:
        items.append(("Calibration", "potentials from the input file (no dye model)"))
    return '<section class="card" id="card-model"><h3>Cell model and calibration</h3>' + _dl(items) + "</section>"


def _flags_html(cell, meta: dict, extra: dict | None = None, said: bool = False) -> str:
    """The flags of one row in plain words; ``extra`` adds row-specific text per code; ``said``: the row's
    not-viable reason is already shown, so flags of that severity are left out (a meeting audit: LD-12's missing
    anchor was said twice)."""
    codes = codes_of(cell)
    if said:
        codes = [c for c in codes if c in INFO_FLAGS]  # the others are what the shown reason says
        if not codes:
            return ""
    if not codes:
        return '<span class="ok-note">no flags</span>'
    settings = {"model": get(meta, "model", default={}) or {},
                "regeneration_threshold_ev": meta.get("regeneration_threshold_ev"),
                "calibration": get(meta, "calibration", default={}) or {},
                "oxide": get(meta, "oxide", default={}) or {}}
    extra = extra or {}
    # each led by "Concern:" or "Note:" (an accessibility audit: the two kinds differed only by colour)
    items = "".join(flag_item(esc(describe(c, settings)) + esc(extra.get(c, "")), c in INFO_FLAGS) for c in codes)
    return f'<ul class="flags">{items}</ul>'


_HEADERS = [
    ('E(S\u207a/S) <span class="unit">[V vs NHE]</span>', "e_ox_v_nhe"),
    ('E\u2080\u208b\u2080 <span class="unit">[eV]</span>', "e00_ev"),
    ('E(S\u207a/S*) <span class="unit">[V vs NHE]</span>', "e_ox_excited_v_nhe"),
    ('\u0394<sub>inj</sub> <span class="unit">[eV]</span>', "drive_inj_ev"),
    ('\u0394<sub>reg</sub> <span class="unit">[eV]</span>', "drive_reg_ev"),
    ('V<sub>oc</sub> <span class="unit">[V]</span>', "voc_v"),
    ('J<sub>sc</sub> <span class="unit">[mA&#8239;cm<sup>\u22122</sup>]</span>', "jsc_ma_cm2"),
    ('PCE <span class="unit">[%]</span>', "pce_pct"),
]
#: p-type header of ``e_ox_excited_v_nhe``: the estimated reduction potential of the dye
_P_EXCITED_HEADER = 'E(S/S\u207b) \u2248 E(S\u207a/S) \u2212 E\u2080\u208b\u2080 <span class="unit">[V vs NHE]</span>'


def _headers(meta: dict) -> list[tuple[str, str]]:
    """Column headers for the oxide's type (p-type: the estimated E(S/S⁻) instead of E(S⁺/S*))."""
    if not _p_type(meta):
        return list(_HEADERS)
    return [(_P_EXCITED_HEADER if col == "e_ox_excited_v_nhe" else h, col) for h, col in _HEADERS]


def _definitions(meta: dict) -> str:
    """The driving-force definitions for the oxide's type (HTML)."""
    if _p_type(meta):
        return ("\u0394<sub>inj</sub> = E(S*/S\u207b) \u2212 E<sub>VB</sub> \u2248 E(S\u207a/S) \u2212 "
                "E<sub>VB</sub> (hole injection), \u0394<sub>reg</sub> = E<sub>redox</sub> \u2212 E(S/S\u207b) "
                "with E(S/S\u207b) \u2248 E(S\u207a/S) \u2212 E\u2080\u208b\u2080/e (p-type, estimated; both "
                "positive when downhill); V<sub>oc</sub> = E<sub>VB</sub> \u2212 E<sub>redox</sub> \u2212 loss")
    return ("\u0394<sub>inj</sub> = E<sub>CB</sub> \u2212 E(S\u207a/S*), \u0394<sub>reg</sub> = E(S\u207a/S) "
            "\u2212 E<sub>redox</sub> (n-type; both positive when downhill); V<sub>oc</sub> = E<sub>redox</sub> "
            "\u2212 E<sub>CB</sub> \u2212 loss")


_percent = percent  # P(PCE > target), P(viable) as in the donor/acceptor report


def _pce_html(pce, sigma, p_viable, inline: bool = False) -> str:
    """PCE ± σ (σ of the viable samples) with ``p_viable`` beside it, as HTML.

    Examples
    --------
    >>> _pce_html(7.23, 1.41, 0.67, inline=True)
    '7.2 ± 1.4 % · works in 67 % of samples'
    >>> _pce_html(5.3, 1.5, 1.0)
    '5.3 <span class="pm">± 1.5</span><span class="pm works">works in 100 % of samples</span>'
    >>> _pce_html(float("nan"), float("nan"), 0.3)
    '—'
    """
    x, s = num(pce), num(sigma)
    works = f"works in {_percent(p_viable)} of samples" if not math.isnan(num(p_viable)) else ""
    if math.isnan(x):
        return fmt(x, 1)
    if inline:
        base = fmt(x, 1) + (f" \u00b1 {fmt(s, 1)}" if not math.isnan(s) and s > 0 else "") + " %"
        return base + (f" \u00b7 {works}" if works else "")
    return pm_html(x, s, 1) + (f'<span class="pm works">{works}</span>' if works else "")


def _reason_words(viability) -> str:
    """The reason of a not-viable dye without its ``not viable:`` lead (the list's heading says it).

    Examples
    --------
    >>> _reason_words("not viable: no anchoring group, so the dye cannot bind to the oxide")
    'no anchoring group, so the dye cannot bind to the oxide'
    >>> _reason_words(float("nan"))
    'not recorded'
    """
    words = text(viability).strip()
    lead = "not viable:"
    if words.lower().startswith(lead):
        words = words[len(lead):].strip()
    return words or NOT_RECORDED


def _not_viable(ranking: pd.DataFrame) -> str:
    """The ranked dyes that are not viable, id and reason in plain words (HTML); ``""`` when every dye is viable.

    At most :data:`NOT_VIABLE_SHOWN` are listed, in ranking order; the rest are
    counted and left to the table of every ranked dye.

    Examples
    --------
    >>> r = pd.DataFrame({"id": ["a", "<b>"], "viable": [True, False],
    ...                   "viability": ["viable", "not viable: no anchoring group"]})
    >>> html = _not_viable(r)
    >>> "Not viable (1)" in html, "&lt;b&gt;" in html, ">a<" in html, "no anchoring group" in html
    (True, True, False, True)
    >>> _not_viable(r.iloc[:1])
    ''
    """
    if ranking is None or not len(ranking) or "viable" not in ranking:
        return ""
    rows = ranking[~ranking["viable"].map(truthy)]
    if not len(rows):
        return ""
    items = "".join(f'<li><span class="cid">{esc(r.get("id"))}</span>: {esc(_reason_words(r.get("viability")))}'
                    "</li>" for _, r in rows.head(NOT_VIABLE_SHOWN).iterrows())
    more = len(rows) - NOT_VIABLE_SHOWN
    rest = (f'<p class="quiet">\u2026 and {more} more in the table of every ranked dye below.</p>'
            if more > 0 else "")
    return (f'<h3 id="not-viable">Not viable ({len(rows)})</h3>'
            '<p class="quiet">Ranked dyes that cannot work in this cell (no PCE), with the reason.</p>'
            f'<ul class="not-viable" id="not-viable-list">{items}</ul>{rest}')


def _decimals(col: str, value, thresholds: dict) -> int:
    """Decimals of a table cell: 3 for a driving force within 0.01 eV of its threshold (a meeting audit: 0.198 and
    0.204 eV both showed as "0.20" beside a 0.20 eV threshold, one dye viable, the other not), else 1 for Jsc, 2.

    Examples
    --------
    >>> _decimals("drive_reg_ev", 0.198, {"drive_reg_ev": 0.2}), _decimals("drive_reg_ev", 0.35, {"drive_reg_ev": 0.2})
    (3, 2)
    """
    if col == "jsc_ma_cm2":
        return 1
    limit, v = thresholds.get(col, math.nan), num(value)
    return 3 if not (math.isnan(limit) or math.isnan(v)) and abs(v - limit) < 0.01 else 2


#: a sortable header whose first click sorts largest first
_FIRST_DOWN = ' data-first="descending"'


def _table(rows: pd.DataFrame, meta: dict, drawings: bool, ident: str) -> str:
    target = fmt(get(meta, "rank", "target_pce_pct"), 1)
    # the report's sortable markup (report.js arms th[data-sort] of table.sortable: click, Enter, Space); an
    # accessibility audit found "Click a column header to sort" here with headers the script never armed
    head = ['<th scope="col" class="num-h" data-sort="num" data-key="rank" aria-sort="ascending">Rank</th>']
    if drawings:
        head.append('<th scope="col">Structure</th>')
    head.append('<th scope="col" data-sort="text" data-key="id">Dye</th>')
    headers = _headers(meta)
    first = {"drive_inj_ev", "drive_reg_ev", "voc_v", "jsc_ma_cm2", "pce_pct"}  # larger is better: first descending
    head += [f'<th scope="col" class="num-h" data-sort="num"{_FIRST_DOWN if col in first else ""}'
             f' data-key="{col}">{h}</th>' for h, col in headers]
    head += [f'<th scope="col" class="num-h" data-sort="num" data-first="descending" data-key="p_above_target">'
             f'P(PCE &gt; {target} %)</th>',
             '<th scope="col" class="num-h" data-sort="num" data-first="descending" data-key="p_viable">P(viable)</th>',
             '<th scope="col">Anchor</th>', '<th scope="col">Viability and flags</th>']
    body = []
    for _, r in rows.iterrows():
        cells = [f'<td class="rank" data-value="{data_value(r.get("rank"))}">{esc(r.get("rank"))}</td>']
        if drawings:
            svg = molecule_svg(text(r.get("smiles")), f"structure of {text(r.get('id'))}")
            cells.append(f'<td class="struct">{svg or "<span class=nostruct>no drawing</span>"}</td>')
        name = text(r.get("name"))
        # the row's header cell (an accessibility audit: no table had row headers)
        cells.append(f'<th scope="row" class="cand" data-value="{esc(r.get("id"))}"><span class="cid">'
                     f'{esc(r.get("id"))}</span>' + (f'<span class="cname">{esc(name)}</span>' if name else "")
                     + "</th>")
        sig = {"e_ox_v_nhe": "e_ox_sigma_v", "e00_ev": "e00_sigma_ev", "pce_pct": "pce_sigma_pct"}
        thresholds = {"drive_inj_ev": num(get(meta, "model", "min_drive_inj_ev")),
                      "drive_reg_ev": num(meta.get("regeneration_threshold_ev"))}
        for _, col in headers:
            val = r.get(col)
            if col == "pce_pct":
                html = _pce_html(val, r.get("pce_sigma_pct"), r.get("p_viable"))
            elif col in sig:
                html = pm_html(val, r.get(sig[col]), 2)
            else:
                html = fmt(val, _decimals(col, val, thresholds))
            cls = ' class="pce"' if col == "pce_pct" else ""
            cells.append(f'<td{cls} data-value="{data_value(val)}">{html}</td>')
        cells.append(f'<td data-value="{data_value(r.get("p_above_target"))}">{_percent(r.get("p_above_target"))}</td>')
        cells.append(f'<td data-value="{data_value(r.get("p_viable"))}">{_percent(r.get("p_viable"))}</td>')
        cells.append(f'<td class="extra">{esc(r.get("anchors")) or "none found"}</td>')
        why = "" if truthy(r.get("viable")) else f'<p class="small">{esc(r.get("viability"))}</p>'
        own = text(r.get("uncalibrated_elements")).strip()
        extra = {"element_uncalibrated": f"; this dye: {', '.join(own.split())}"} if own else {}
        cells.append(f"<td>{why}{_flags_html(r.get('flags'), meta, extra, said=bool(why))}</td>")
        body.append(f'<tr data-id="{esc(r.get("id"))}">' + "".join(cells) + "</tr>")
    if not body:
        span = len(head)
        body.append(f'<tr><td class="empty" colspan="{span}">no dye</td></tr>')
    words = "Shortlisted dyes" if drawings else "Every ranked dye"
    return (f'<table id="{ident}" class="sortable {"short" if drawings else "full"}">{caption(ident, words)}<thead><tr>'
            f'{"".join(head)}</tr></thead><tbody>{"".join(body)}</tbody></table>')


def _not_ranked(table: pd.DataFrame) -> tuple[str, int]:
    if table is None or not len(table) or "status" not in table:
        return '<p class="quiet">Every input row was ranked.</p>', 0
    rows = table[~table["status"].map(text).str.strip().str.lower().eq("ok")]
    if not len(rows):
        return '<p class="quiet">Every input row was ranked.</p>', 0
    body = "".join(f'<tr><th scope="row"><span class="cid">{esc(r.get("id"))}</span></th>'
                   f'<td>{esc(r.get("status"))}</td>'
                   f'<td class="notes-compact">{esc(r.get("error")) or NOT_RECORDED}</td>'
                   f'<td>{smiles_code(text(r.get("smiles")), 120)}</td></tr>'
                   for _, r in rows.iterrows())
    return ('<table id="not-ranked-table" class="full">' + caption("not-ranked-table", "Input rows not ranked")
            + '<thead><tr><th scope="col">Id</th><th scope="col">Status</th>'
            '<th scope="col">Reason</th><th scope="col">SMILES</th></tr></thead>'
            f"<tbody>{body}</tbody></table>", len(rows))


def _axis_note() -> str:
    """How the diagram's vacuum axis relates to the film scale of the donor/acceptor reports (plain text).

    Examples
    --------
    >>> _axis_note()[:60]
    'This is the absolute scale (Trasatti 1986): ferrocene in ace'
    """
    fc = fc_vs_nhe_v("acetonitrile")
    here = -(fc + ABSOLUTE_NHE_V)
    return (f"This is the absolute scale (Trasatti 1986): ferrocene in acetonitrile (+{fc:.2f} V vs NHE) sits at "
            f"\u2212{abs(here):.2f} eV on it, while the film scale of dascreen\u2019s donor/acceptor reports puts "
            f"ferrocene at \u2212{abs(FILM_FC_EV):.1f} eV: the same couple reads {film_scale_offset_ev():.2f} eV higher "
            "(less negative) there, so compare levels across the two reports only after that shift.")


def _figure_caption(meta: dict, n_drawn: int, n_failing: int, any_viable: bool = True) -> str:
    """Caption of the energy diagram for the oxide's type, the drawn dyes and the ±1σ boxes (HTML)."""
    if _p_type(meta):
        levels = ("Ground-state E(S\u207a/S) and the estimated reduced-dye potential E(S/S\u207b) \u2248 "
                  "E(S\u207a/S) \u2212 E\u2080\u208b\u2080/e (p-type: hole injection from the excited dye, "
                  "E(S*/S\u207b) \u2248 E(S\u207a/S), into the valence band)")
        arrows = ("Arrows give the hole-injection driving force E(S\u207a/S) \u2212 E<sub>VB</sub> (valence band "
                  "\u2192 E(S\u207a/S)) and the regeneration driving force E<sub>redox</sub> \u2212 E(S/S\u207b) "
                  "(E(S/S\u207b) \u2192 mediator)")
        sigma = "E(S/S\u207b)"
    else:
        levels = "Ground-state E(S\u207a/S) and excited-state E(S\u207a/S*) = E(S\u207a/S) \u2212 E\u2080\u208b\u2080/e"
        arrows = ("Arrows give the injection driving force E<sub>CB</sub> \u2212 E(S\u207a/S*) (E(S\u207a/S*) \u2192 "
                  "conduction band) and the regeneration driving force E(S\u207a/S) \u2212 E<sub>redox</sub> "
                  "(mediator \u2192 E(S\u207a/S))")
        sigma = "E(S\u207a/S*)"
    n_shown = n_drawn - n_failing
    who = f"{n_shown} shown dye(s)" + ("" if any_viable or not n_shown else " (none viable: drawn dashed)")
    if n_failing:
        who += (f" and, dashed and marked \u201cnot viable\u201d, the {n_failing} not-viable dye(s) that come "
                "closest to a driving-force threshold they miss")
    return ('<strong id="figure-dyecell-name">Dye-cell energy diagram.</strong> '
            f"{levels} of the {who}, numbered by rank, against the oxide\u2019s band edge and the mediator\u2019s "
            "potential. More negative potentials (higher electron energies) are at the top; the right axis gives "
            f"the vacuum scale, \u2212e(E + 4.44 V). {_axis_note()} "
            f"{arrows}, in eV (below the threshold: brick red, dashed and marked \u2717). Shaded boxes, where the "
            "levels carry an "
            "uncertainty, span \u00b11\u03c3: of E(S\u207a/S) for the ground state and, for "
            f"{sigma}, the σ of E(S\u207a/S) and of E\u2080\u208b\u2080 combined in quadrature; values "
            "from a dye file without \u03c3 have no box. The potentials and driving forces drawn here are in the "
            "shortlist table and the table of every ranked dye (section 2), the band edge and the mediator\u2019s "
            "potential in their cards (section 1).")


def render_dyecell_report(ranking: pd.DataFrame, table: pd.DataFrame, meta: dict) -> str:
    """The dye-cell report page as one HTML5 string.

    Parameters
    ----------
    ranking : pandas.DataFrame
        From :func:`screen.dyecell.rank.rank_dyes` (best first).
    table : pandas.DataFrame
        The dye table (every input row, ``status`` and ``error``).
    meta : dict
        ``ranking.meta.json`` content; ``meta["created"]`` fixes the date line.

    Examples
    --------
    >>> page = render_dyecell_report(pd.DataFrame(), pd.DataFrame(), {"created": "today"})
    >>> page.startswith("<!DOCTYPE html>"), "Generated today" in page
    (True, True)
    """
    meta = dict(meta or {})
    ranking = ranking if ranking is not None else pd.DataFrame()
    ox, med = get(meta, "oxide", default={}) or {}, get(meta, "mediator", default={}) or {}
    created = text(meta.get("created")) or datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    size = int(num(get(meta, "rank", "shortlist_size", default=10)) or 10)
    passing = ranking[ranking["passes"].map(truthy)] if "passes" in ranking else ranking.iloc[0:0]
    short = passing.head(size)
    how = f"the {len(short)} best viable dye(s)"
    if not len(short) and len(ranking):
        short, how = ranking.head(min(size, DIAGRAM_MAX)), "no dye is viable; the best-ranked rows are shown"
    n_pass = len(passing)
    drawn = diagram_rows(ranking, short, meta)
    n_extra = int((~drawn.index.isin(short.index)).sum()) if len(drawn) else 0
    figure = dyecell_diagram_svg(drawn, meta)
    unranked, n_unranked = _not_ranked(table)
    title = f"dye cell: {text(ox.get('id'))} with {text(med.get('id'))}"
    if len(ranking) and len(passing):
        best = passing.iloc[0]
        summary = (f"{len(ranking)} dye(s) ranked; {n_pass} viable. Best estimate: <strong>{esc(best.get('id'))}"
                   f"</strong> at {_pce_html(best.get('pce_pct'), best.get('pce_sigma_pct'), math.nan, True)} PCE"
                   + (f" \u00b7 works in {_percent(best.get('p_viable'))} of samples"
                      if not math.isnan(num(best.get("p_viable"))) else "") + ".")
    else:
        summary = f"{len(ranking)} dye(s) ranked; none is viable with this oxide and mediator."
    counts = get(meta, "counts", default={}) or {}
    strip = "".join(f'<div class="count"><span class="n">{esc(v)}</span><span class="what">{w}</span></div>'
                    for v, w in ((counts.get("rows", len(table) if table is not None else 0), "input rows"),
                                 (len(ranking), "ranked"), (n_pass, "viable"), (n_unranked, "not ranked")))
    p_note = _P_TYPE_CSV_NOTE if _p_type(meta) else ""
    exports = "".join(f'<li><a href="{esc(f)}">{esc(f)}</a> \u2014 {esc(d)}'
                      f'{esc(p_note) if f in ("ranking.csv", "ranking.safe.csv") else ""}</li>' for f, d in EXPORTS)
    parts = [
        "<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f'<meta name="generator" content="dascreen {esc(__version__)}">', f"<title>dascreen {esc(title)}</title>",
        f"<style>\n{static_text('report.css')}</style>", "</head>", "<body>", '<header class="top">',
        '<h1><span class="mark">dascreen</span> \u00b7 dye-cell report</h1>',
        f'<p class="sub">Sensitiser dyes on <strong>{esc(ox.get("id")) or NOT_RECORDED}</strong> with the mediator '
        f'<strong>{esc(med.get("id")) or NOT_RECORDED}</strong></p>',
        f'<p class="stamp">Generated {esc(created)} \u00b7 dascreen {esc(__version__)}</p>', "</header>", "<main>",
        _caution(meta), f'<div class="counts">{strip}</div>',
        '<h2 id="run"><span class="num">1</span> Run at a glance</h2>', '<div class="cards">',
        _material_card(ox, "Oxide", "card-oxide", "Band edge"),
        _material_card(med, "Mediator", "card-mediator", "Redox potential"), _model_card(meta), "</div>",
        _conversions_html(meta),
        '<h2 id="shortlist"><span class="num">2</span> Shortlist for discussion</h2>',
        f'<p class="summary">{summary}</p>',
        f'<p class="quiet">Shown: {esc(how)}. Potentials in V vs NHE, value \u00b1 1\u03c3; driving forces in '
        "eV; PCE \u00b1 1\u03c3 of the Monte-Carlo samples that stay viable (the spread if the dye works), with "
        "\u201cworks in \u2026 % of samples\u201d, P(viable), beside it: the fraction of samples of E(S\u207a/S) "
        "and E\u2080\u208b\u2080 within their \u03c3 that inject and regenerate. "
        f"{_definitions(meta)}. Viable dyes are ordered by estimated PCE; with one oxide, one mediator and the "
        "same photon-to-current efficiency, fill factor and V<sub>oc</sub> loss for every dye, that is in effect the "
        "order of E\u2080\u208b\u2080 (smallest first): E(S\u207a/S) enters only through the injection and "
        "regeneration checks. Not-viable dyes follow, by id. Click a column header to sort, or press Enter on it.</p>",
        table_region(_table(short, meta, True, "shortlist-table"), "shortlist-table", wide=True), _not_viable(ranking),
        '<details id="all-ranked">', f"<summary>Every ranked dye ({len(ranking)} rows)</summary>",
        table_region(_table(ranking, meta, False, "full-table"), "full-table", wide=True), "</details>",
        '<h2 id="figures"><span class="num">3</span> Energy diagram</h2>',
        # named by the caption's lead, described by the caption (an accessibility audit)
        '<figure class="levels" id="figure-dyecell" aria-labelledby="figure-dyecell-name">'
        f'{described_svg(figure, "figure-dyecell-caption")}<figcaption id="figure-dyecell-caption">'
        f"{_figure_caption(meta, len(drawn), n_extra, n_pass > 0)}</figcaption></figure>",
        f'<h2 id="not-ranked"><span class="num">4</span> Not ranked ({n_unranked})</h2>',
        '<p class="quiet">Input rows that were rejected or whose computation failed, with the reason.</p>',
        table_region(unranked, "not-ranked-table"), "</main>", '<footer id="files">',
        '<h2 id="files-heading">Files beside this report</h2>', f"<ul>{exports}</ul>",
        f"<p>Report written by dascreen {esc(__version__)}. The page is self-contained and works offline.</p>",
        "</footer>", f"<script>\n{static_text('report.js')}</script>", "</body>", "</html>",
    ]
    return "\n".join(parts) + "\n"


def write_dyecell_report(ranking: pd.DataFrame, table: pd.DataFrame, meta: dict, out_dir) -> Path:
    """Write ``report.html`` and ``ranking.safe.csv`` (atomically, mode 0644) into ``out_dir``.

    Examples
    --------
    >>> import tempfile
    >>> out = write_dyecell_report(pd.DataFrame({"id": ["x"], "passes": [False]}), pd.DataFrame(),
    ...                            {"created": "x"}, tempfile.mkdtemp())
    >>> out.name, (out.parent / "ranking.safe.csv").exists()
    ('report.html', True)
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    page = render_dyecell_report(ranking, table, meta)
    target = out_dir / "report.html"
    with atomic_path(target) as tmp:
        with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(page)
        os.chmod(tmp, 0o644)
    with atomic_path(out_dir / "ranking.safe.csv") as tmp:
        tmp.write_bytes(safe_csv_bytes(ranking if ranking is not None else pd.DataFrame()))
        os.chmod(tmp, 0o644)
    return target
