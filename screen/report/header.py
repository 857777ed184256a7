"""The "Run at a glance" part of the report: counts strip and the partner, computation and device cards.

A value the run did not record is shown as "not recorded", never guessed.
"""

from __future__ import annotations

import math
from numbers import Real
from pathlib import Path

import pandas as pd

from screen.devicepars import OFFSET_SCALE_MIN_EV, calibration_kind, computed_levels_apply
from screen.report.format import NOT_RECORDED, esc, fmt, fmt_pm, get, isolated, num, shorten, text, texts, truthies

__all__ = ["partner_card", "protocol_card", "device_card", "counts_strip", "settings_line"]

_GEOMETRY_WORDS = {
    "ff": "force-field geometry",
    "xtb": "force-field conformer, then xTB-optimised geometry",
}
_CALIBRATION_LABELS = {
    "ip": "ionisation energy (gas)",
    "ea": "electron affinity (gas)",
    "gap_opt": "optical gap (gas/solution)",
    "homo_film": "HOMO, film",
    "lumo_film": "LUMO, film",
    "gap_opt_film": "optical gap, film",
}


def _dl(items) -> str:
    """Definition list from ``(term, value_html)`` pairs."""
    return "<dl>" + "".join(f"<dt>{t}</dt><dd>{v}</dd>" for t, v in items) + "</dl>"


# --------------------------------------------------------------------------- #
# Partner
# --------------------------------------------------------------------------- #
def partner_card(partner: dict, meta: dict) -> str:
    """Partner card: id, name, role, levels with σ, scale, source, provenance notes.

    Examples
    --------
    >>> "\\u22124.30 \\u00b1 0.10 eV" in partner_card({"id": "ref", "lumo_ev": -4.3, "lumo_sigma_ev": 0.1}, {})
    True
    """
    p = partner if isinstance(partner, dict) else {}

    def lev(key):
        x = num(p.get(key))
        if math.isnan(x):
            return NOT_RECORDED
        s = num(p.get(key.replace("_ev", "_sigma_ev")))
        return fmt_pm(x, s) + " eV"

    source = text(p.get("source")).strip()
    doi = text(p.get("doi")).strip()
    if doi:
        source = f"{source} (doi:{doi})" if source else f"doi:{doi}"
    name = text(p.get("name")).strip()
    items = [
        ("Partner", f'<span class="cid">{esc(p.get("id")) or NOT_RECORDED}</span>'
                    + (f" \u2014 {isolated(esc(name))}" if name else "")),
        ("Role", (esc(p.get("role")) or NOT_RECORDED)
         + (" (assumed: the complement of the candidates\u2019 role)"
            if get(meta, "partner_role_assumed") is True else "")),
        ("HOMO", lev("homo_ev")),
        ("LUMO", lev("lumo_ev")),
        ("Optical gap", lev("gap_opt_ev")),
        ("Energy scale", esc(p.get("scale")) or NOT_RECORDED),
        ("Source", esc(source) or NOT_RECORDED),
    ]
    sigmas = [num(p.get(k)) for k in ("homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev")]
    if not any(s > 0 for s in sigmas):  # NaN > 0 is False: none given
        items.append(("Uncertainty", "no \u03c3 given for the partner: its levels are taken as exact, so "
                                     "P(aligned) and P(PCE &gt; target) carry only the candidates\u2019 \u03c3 "
                                     "(the built-in partners carry \u00b10.1\u20130.3 eV); add homo_sigma_ev, "
                                     "lumo_sigma_ev "
                                     "and gap_opt_sigma_ev columns to the partner file to include it"))
    if p.get("from_memory") is True:
        items.append(("Provenance", "values recalled from the literature, not read from the source "
                                    "\u2014 check them before relying on absolute numbers"))
    notes = text(p.get("notes")).strip()
    if notes:
        items.append(("Notes", f'<span class="small">{esc(shorten(notes, 600))}</span>'))
    return '<section class="card" id="card-partner"><h3>Partner material</h3>' + _dl(items) + "</section>"


# --------------------------------------------------------------------------- #
# Computation and calibration
# --------------------------------------------------------------------------- #
def _stat(entry, key):
    """A statistic of one calibration model, at the top level or nested."""
    if isinstance(entry, Real) and key == "loo_mae_ev":
        return num(entry)
    if not isinstance(entry, dict):
        return math.nan
    for node in (entry, entry.get("stats"), entry.get("statistics")):
        if isinstance(node, dict) and key in node:
            return num(node[key])
    return math.nan


def _method_words(lm: dict, el: dict) -> str:
    """Engine, method, ΔSCF and solvent in words (``levels_meta["method"]`` without a protocol)."""
    method = text(el.get("method"))
    engine = text(el.get("engine"))
    if not (method or engine):
        return text(lm.get("method"))
    m = " ".join(x for x in (method, f"({engine})" if engine else "") if x)
    m += " \u0394SCF: vertical ionisation energy and electron affinity at the neutral geometry"
    solvent = text(el.get("solvent"))
    if solvent:
        return m + f"; implicit solvent {solvent}"
    eps = num(el.get("film_epsilon"))
    if not math.isnan(eps):  # film levels come from ions and neutral in a continuum of the solid's ε
        return m + (f", in the gas phase and in a dielectric continuum of \u03b5 = {eps:g} (the solid film; the "
                    "film levels are calibrated on the latter)")
    return m + "; gas phase"


def _geometry_words(lm: dict, st: dict) -> str:
    """Conformer and geometry route in words (``levels_meta["geometry"]`` without a protocol)."""
    geometry = text(st.get("geometry"))
    if not geometry:
        return text(lm.get("geometry"))
    ff = text(st.get("forcefield")).upper()
    words = _GEOMETRY_WORDS.get(geometry, geometry)
    g = f"RDKit ETKDG conformers, {ff + ' ' if ff else ''}{words}"
    if text(st.get("ranking_method")):
        g += f"; conformer chosen by lowest {text(st.get('ranking_method'))} energy"
    if geometry == "ff" and text(st.get("cage_geometry")) == "xtb":
        g += "; fullerene cages xTB-optimised"
    return g


def _calibration_table(cal) -> str:
    """Leave-one-out errors of the calibration models, or a "not recorded" line."""
    if not (isinstance(cal, dict) and cal):
        return f'<p class="quiet">Calibration statistics: {NOT_RECORDED}.</p>'
    rows = []
    for name, entry in cal.items():
        n = _stat(entry, "n")
        mae, rmse = _stat(entry, "loo_mae_ev"), _stat(entry, "loo_rmse_ev")
        near, far = _stat(entry, "sigma_near_ev"), _stat(entry, "sigma_far_ev")
        rows.append(
            f"<tr><td>{esc(_CALIBRATION_LABELS.get(text(name), text(name)))}</td>"
            f'<td class="num">{"" if math.isnan(n) else int(n)}</td>'
            f'<td class="num">{fmt(mae, 3) if not math.isnan(mae) else NOT_RECORDED}</td>'
            f'<td class="num">{fmt(rmse, 3) if not math.isnan(rmse) else NOT_RECORDED}</td>'
            f'<td class="num">{fmt(near, 2) if not math.isnan(near) else NOT_RECORDED}</td>'
            f'<td class="num">{fmt(far, 2) if not math.isnan(far) else NOT_RECORDED}</td></tr>')
    return ('<table class="mini"><caption>Calibration, leave-one-out errors, and σ for a close analogue of the '
            'reference materials (similarity 0.9) and an outsider (0.2)</caption><thead><tr>'
            '<th scope="col">Model</th><th scope="col">n</th><th scope="col">MAE [eV]</th>'
            '<th scope="col">RMSE [eV]</th><th scope="col">σ near [eV]</th><th scope="col">σ far [eV]</th>'
            '</tr></thead><tbody>' + "".join(rows) + "</tbody></table>")


def _calibration_words(lm: dict, shipped) -> str:
    """Which calibration scored the levels (HTML): the one shipped for their protocol, or a custom one (its
    folder), with the first 12 hex digits of the SHA-256 of its model files and of its reference data
    (``levels_meta["calibration_models"]``; ``shipped``: ``device_tests["shipped_calibration"]``,
    :func:`screen.devicepars.shipped_calibration`). Levels that record no hashes keep the models folder alone.

    The card named only the models folder: a custom calibration of the shipped protocol id read like the shipped
    one (a custom-calibration audit).

    Examples
    --------
    >>> cal = {"folder": "/m/p-1", "protocol_id": "p-1", "models_sha256": "ab" * 32, "reference_sha256": "cd" * 32}
    >>> print(_calibration_words({"calibration_models": cal}, cal))
    shipped with dascreen for <code>p-1</code> (models sha256 abababababab…, reference data sha256 cdcdcdcdcdcd…)
    >>> print(_calibration_words({"calibration_models": {**cal, "folder": "/lab/p-1", "models_sha256": "ef" * 32}}, cal))
    custom: <code>/lab/p-1</code>, not the calibration shipped for <code>p-1</code> (models sha256 efefefefefef…, reference data sha256 cdcdcdcdcdcd…)
    >>> _calibration_words({"models": "/m/p-1", "calibration_models": None}, None)
    '/m/p-1'
    """
    cal = lm.get("calibration_models")
    kind = calibration_kind(cal, shipped)
    if not kind:
        return esc(lm.get("models")) or NOT_RECORDED
    hashes = ", ".join(f"{what} sha256 {esc(text(cal.get(key))[:12])}\u2026"
                       for key, what in (("models_sha256", "models"), ("reference_sha256", "reference data"))
                       if text(cal.get(key)))
    pid = text(cal.get("protocol_id")) or text(lm.get("protocol_id"))
    folder = text(cal.get("folder")) or text(lm.get("models"))
    if kind == "shipped":
        head = f"shipped with dascreen for <code>{esc(pid)}</code>" if pid else "shipped with dascreen"
    elif isinstance(shipped, dict) and folder and folder == text(shipped.get("folder")):
        head = (f"an earlier version of the calibration shipped for <code>{esc(pid)}</code> (<code>{esc(folder)}"
                "</code>: its model files have changed since these levels were computed)")
    else:
        head = (f"custom: <code>{esc(folder) or NOT_RECORDED}</code>"
                + (f", not the calibration shipped for <code>{esc(pid)}</code>" if pid else ""))
    return f"{head} ({hashes})" if hashes else head


def protocol_card(meta: dict) -> str:
    """Computation and calibration card (from ``meta["levels_meta"]`` and ``meta["levels"]``)."""
    lm = get(meta, "levels_meta", default={}) or {}
    proto = lm.get("protocol") if isinstance(lm.get("protocol"), dict) else {}
    el = proto.get("electronic") if isinstance(proto.get("electronic"), dict) else {}
    st = proto.get("structures") if isinstance(proto.get("structures"), dict) else {}
    items = [
        ("Method", esc(_method_words(lm, el)) or NOT_RECORDED),
        ("Geometry route", esc(_geometry_words(lm, st)) or NOT_RECORDED),
        ("Protocol id", f"<code>{esc(lm.get('protocol_id'))}</code>" if text(lm.get("protocol_id"))
         else NOT_RECORDED),
        ("Calibration models", _calibration_words(lm, get(meta, "device_tests", "shipped_calibration"))),
        ("Levels computed by", f"dascreen {esc(lm.get('dascreen'))}" if text(lm.get("dascreen"))
         else NOT_RECORDED),
    ]
    levels_path = text(get(meta, "levels", "path"))
    if levels_path:
        digest = text(get(meta, "levels", "sha256"))[:12]
        items.append(("Levels file", f"<code>{esc(Path(levels_path).name)}</code>"
                                     + (f" (sha256 {esc(digest)}\u2026)" if digest else "")))
    return ('<section class="card" id="card-protocol"><h3>Computation &amp; calibration</h3>'
            + _dl(items) + _calibration_table(lm.get("calibration")) + "</section>")


# --------------------------------------------------------------------------- #
# Device model and ranking settings
# --------------------------------------------------------------------------- #
def _value(d, key, unit="", digits=2) -> str:
    """A recorded setting: the number with its unit, escaped text, or "not recorded"."""
    x = num(d.get(key)) if isinstance(d, dict) else math.nan
    if math.isnan(x):
        t = text(d.get(key)) if isinstance(d, dict) else ""
        return esc(t) if t else NOT_RECORDED
    return f"{fmt(x, digits)}{(' ' + unit) if unit else ''}"


def _loss_words(dev: dict) -> str:
    """The voltage loss as applied: with the fitted E_CT slope it is a line, not one number.

    Examples
    --------
    >>> _loss_words({"loss_v": 0.3})
    '0.30 V'
    >>> _loss_words({"loss_v": 0.57, "loss_v_set": False, "fitted": {"loss_slope": 0.42, "ect_ref_ev": 1.46}})
    '0.57 V at E<sub>CT</sub> = 1.46 eV, changing by +0.42 V per eV of E<sub>CT</sub> (smaller at lower E<sub>CT</sub>, larger at higher) within the fitted E<sub>CT</sub> range'
    >>> _loss_words({"loss_v": 0.54, "loss_v_set": False, "fitted": {"loss_ev": {"pooled": 0.54}}})
    '0.54 V (one value for every acceptor class: the cross-validation kept no class value)'
    """
    base = _value(dev, "loss_v", "V")
    fitted = dev.get("fitted") if isinstance(dev.get("fitted"), dict) else {}
    slope, ref = num(fitted.get("loss_slope")), num(fitted.get("ect_ref_ev"))
    classes = fitted.get("loss_ev") if isinstance(fitted.get("loss_ev"), dict) else {}
    pooled = ("" if dev.get("loss_v_set") or set(classes) != {"pooled"}
              else " (one value for every acceptor class: the cross-validation kept no class value)")
    floor = num(fitted.get("gap_loss_min_ev"))
    floor_words = ("" if dev.get("loss_v_set") or math.isnan(floor) or floor <= 0 else
                   f"; never less than {fmt(floor)} eV against the smaller optical gap (E<sub>g</sub> \u2212 "
                   "qV<sub>oc</sub>, the smallest of the fitted devices; flag <code>loss_floor</code>)")
    if dev.get("loss_v_set") or math.isnan(slope) or math.isnan(ref) or slope <= 0:
        return base + pooled + floor_words
    return (f"{base} at E<sub>CT</sub> = {fmt(ref)} eV, changing by {fmt(slope, plus=True)} V per eV of "
            f"E<sub>CT</sub> (smaller at lower E<sub>CT</sub>, larger at higher) within the fitted E<sub>CT</sub> "
            f"range{pooled}{floor_words}")


#: the acceptor classes in words (codes of ``viability.acceptor_class_of``); a code that is a word needs none
CLASS_NAMES = {"nfa-fused": "fused-ring non-fullerene", "nfa-other": "other non-fullerene",
               "non-fullerene": "non-fullerene", "fullerene": "fullerene", "polymer": "polymer"}


def _class_name(code) -> str:
    """`` (<class in words>)`` beside a class code where the code is not a word itself ('' otherwise)."""
    words = CLASS_NAMES.get(text(code), "")
    return f" ({esc(words)})" if words and words != text(code) else ""


def _per_class_words(dev: dict, name: str = "ff") -> str:
    """Fill factor (``name='eqe'``: the EQE at large offsets): the value, and for a fitted model with class values
    each class's.

    Examples
    --------
    >>> _per_class_words({"ff": 0.6755, "ff_set": False, "fitted": {"ff_by_class": {"fullerene": 0.58, "nfa-fused": 0.698}}})
    '0.68 pooled (pairs whose acceptor class cannot be told); per acceptor class: fullerene 0.58, nfa-fused 0.70 (fused-ring non-fullerene)'

    A family value that no candidate can receive (``non-fullerene`` beside both of its classes) is not listed:

    >>> _per_class_words({"ff": 0.6755, "ff_set": False, "fitted": {"ff_by_class": {"nfa-fused": 0.698, "nfa-other": 0.61,
    ...                                                                   "non-fullerene": 0.6885}}})
    '0.68 pooled (pairs whose acceptor class cannot be told); per acceptor class: nfa-fused 0.70 (fused-ring non-fullerene), nfa-other 0.61 (other non-fullerene)'
    >>> _per_class_words({"eqe": 0.649, "eqe_set": False, "fitted": {"eqe_by_class": {"fullerene": 0.483}}}, "eqe")
    '0.65 pooled (pairs whose acceptor class cannot be told); per acceptor class: fullerene 0.48'
    """
    base = _value(dev, name)
    fitted = dev.get("fitted") if isinstance(dev.get("fitted"), dict) else {}
    by_class = fitted.get(f"{name}_by_class")
    classes = dict(by_class) if isinstance(by_class, dict) else {}
    if {"nfa-fused", "nfa-other"} <= set(classes):  # every non-fullerene candidate gets one of the two
        classes.pop("non-fullerene", None)
    if dev.get(f"{name}_set") or not classes:
        return base
    parts = ", ".join(f"{esc(k)} {fmt(num(v))}{_class_name(k)}" for k, v in sorted(classes.items()))
    # a meeting-day audit read "0.68 for other acceptors" beside "nfa-other 0.61"
    return f"{base} pooled (pairs whose acceptor class cannot be told); per acceptor class: {parts}"


def _device_items(dev: dict) -> list[tuple[str, str]]:
    """Rows of the device-model list."""
    absorber = text(dev.get("absorber"))
    absorber_words = {"donor": "donor only (published model)",
                      "both": "both materials (smaller gap of the pair)"}.get(absorber, absorber)
    spectrum = text(dev.get("spectrum"))
    fitted = dev.get("fitted") if isinstance(dev.get("fitted"), dict) else {}
    scale = num(dev.get("offset_scale_ev"))
    scale = num(fitted.get("offset_scale_ev")) if math.isnan(scale) else scale
    edge = ("; the smallest value the fit tries, so in effect a step at zero offset"
            if abs(scale - OFFSET_SCALE_MIN_EV) < 1e-9 else "")
    yield_row = ([("EQE offset scale \u0394<sub>0</sub>",
                   f"{fmt(scale)} eV (charge-generation yield 1 \u2212 exp(\u2212\u0394/\u0394<sub>0</sub>){edge})")]
                 if text(dev.get("model")) == "fitted" and not math.isnan(scale) else [])
    return [
        ("EQE", _per_class_words(dev, "eqe")),
        *yield_row,
        ("Fill factor", _per_class_words(dev)),
        ("Voltage loss", _loss_words(dev)),
        ("Min. \u0394LUMO", _value(dev, "min_delta_lumo_ev", "eV")),
        ("Min. \u0394HOMO", _value(dev, "min_delta_homo_ev", "eV")
         + (" (checked only when both absorb)" if absorber == "donor" else "")),
        ("Light absorbed by", esc(absorber_words) or NOT_RECORDED),
        ("Spectrum", (esc(spectrum) + " AM1.5G") if spectrum and "AM1.5" not in spectrum
         else (esc(spectrum) or NOT_RECORDED)),
        ("Incident power", _value(dev, "pin_w_m2" if not math.isnan(num(dev.get("pin_w_m2")))
                                  else "incident_power_w_m2", "W&#8239;m<sup>\u22122</sup>")),
    ]


#: the ranking keys in words (``rank.sort_by``; a meeting-day audit read "Sorted by pce_pct")
_SORT_WORDS = {"pce_pct": "PCE estimate", "p_above_target": "P(PCE above the target)"}


def _ranking_items(rank: dict) -> list[tuple[str, str]]:
    """Rows of the ranking-settings list.

    Examples
    --------
    >>> dict(_ranking_items({"sort_by": "pce_pct"}))["Sorted by"]
    'PCE estimate (<code>pce_pct</code>)'
    """
    items = [
        ("Target PCE", _value(rank, "target_pce_pct", "%", 1)),
        ("Shortlist size", esc(rank.get("shortlist_size")) if text(rank.get("shortlist_size"))
         else NOT_RECORDED),
        ("Sorted by", f"{_SORT_WORDS[text(rank.get('sort_by'))]} (<code>{esc(rank.get('sort_by'))}</code>)"
         if text(rank.get("sort_by")) in _SORT_WORDS
         else f"<code>{esc(rank.get('sort_by'))}</code>" if text(rank.get("sort_by")) else NOT_RECORDED),
    ]
    lo, hi = num(rank.get("gap_min_ev")), num(rank.get("gap_max_ev"))
    if not (math.isnan(lo) or math.isnan(hi)):
        items.append(("Gap window", f"{fmt(lo)}\u2013{fmt(hi)} eV"))
    return items


#: plain-words description of each device model, as shown on the device card
MODEL_TEXT = {
    "fitted": ('Fitted energy-loss model (the default): V<sub>oc</sub> = (E<sub>CT</sub> \u2212 '
               '\u0394E<sub>loss</sub>)/q with E<sub>CT</sub> the smaller of the interface gap '
               '(LUMO<sub>acc</sub> \u2212 HOMO<sub>don</sub>) and the smaller optical gap; '
               '\u0394E<sub>loss</sub> (per acceptor class where the cross-validation keeps one), an EQE per '
               'acceptor class times a charge-generation yield 1 \u2212 exp(\u2212\u0394/\u0394<sub>0</sub>) of each '
               'offset (\u0394<sub>0</sub> below: with level errors of ~0.1 eV the devices could not show a loss '
               'of current at small offsets) and a fill factor per acceptor class, all fitted on published '
               'devices; V<sub>oc</sub> '
               'never above the gap and '
               'PCE never above the detailed-balance limit.'),
    "scharber": ('Published Scharber rule (reference model): V<sub>oc</sub> = (LUMO<sub>acc</sub> \u2212 '
                 'HOMO<sub>don</sub>)/e \u2212 loss; J<sub>sc</sub> = EQE \u00b7 q \u00b7 photon flux above '
                 'the gap; PCE = V<sub>oc</sub>J<sub>sc</sub>FF/P<sub>in</sub>.'
                 ' Its 0.3 V loss goes with the reference acceptor\u2019s LUMO at \u22124.3 eV, a convention \u22480.4 eV deeper than the film/CV levels of real partners, so against them its V<sub>oc</sub> runs high (+0.24 V on average over the project\u2019s published devices).'),
    # the Voc rule with photons above the smaller gap of the pair: not what the paper did
    "scharber-both": ('Scharber V<sub>oc</sub> rule with both materials absorbing (not the published model, which counts '
                      'the donor\u2019s absorption only: add <code>--set device.absorber=donor</code> for it): '
                      'V<sub>oc</sub> = (LUMO<sub>acc</sub> \u2212 HOMO<sub>don</sub>)/e \u2212 loss; J<sub>sc</sub> = '
                      'EQE \u00b7 q \u00b7 photon flux above the smaller optical gap; '
                      'PCE = V<sub>oc</sub>J<sub>sc</sub>FF/P<sub>in</sub>.'
                      ' Its 0.3 V loss goes with the reference acceptor\u2019s LUMO at \u22124.3 eV, a convention \u22480.4 eV deeper than the film/CV levels of real partners, so against them its V<sub>oc</sub> runs high (+0.24 V on average over the project\u2019s published devices).'),
}
#: what the absorber setting means, as shown on the device card
ABSORBER_TEXT = {
    "both": "Both materials absorb: photons above the smaller optical gap count and both offsets are checked.",
    "donor": "Donor-only absorption (the published model's assumption): only photons above the donor's gap count.",
}


def model_label(meta: dict) -> str:
    """Plain-words name of the device model recorded in ``meta["device"]`` (HTML).

    The Scharber rule is called the published model only with donor-only absorption, its own assumption.

    Examples
    --------
    >>> model_label({"device": {"model": "scharber", "absorber": "donor"}})[:31]
    'Published Scharber rule (refere'
    >>> model_label({"device": {"model": "scharber", "absorber": "both"}})[:63]
    'Scharber V<sub>oc</sub> rule with both materials absorbing (not'
    """
    dev = get(meta, "device", default={}) or {}
    model = text(dev.get("model")) or "scharber"
    if model == "scharber" and text(dev.get("absorber")) == "both":
        model = "scharber-both"
    return MODEL_TEXT.get(model, esc(model))


#: below this held-out rank correlation of PCE on computed levels the card says the PCE does not order good pairs
#: (the target of the device model's validation, Spearman(PCE) ≥ 0.4; README, "Tested on published devices")
PCE_RANK_SKILL = 0.4


def _test_words(rec, levels: str) -> str:
    """One held-out record of the device model on published devices, in words (HTML); empty without one.

    Examples
    --------
    >>> words = _test_words({"voc_mae_v": 0.055, "spearman_voc": 0.5, "spearman_pce": -0.17, "n": 45,
    ...                      "n_pce": 49}, "computed levels")
    >>> words.split(", of ")
    ['computed levels: V<sub>oc</sub> MAE 0.055 V, rank correlation of V<sub>oc</sub> 0.50 (45 devices)', 'PCE −0.17 (49, pooled over acceptor classes)']
    """
    if not isinstance(rec, dict) or math.isnan(num(rec.get("voc_mae_v"))):
        return ""
    n, n_pce = esc(rec.get("n", "?")), esc(rec.get("n_pce", "?"))
    base = num(rec.get("baseline_voc_mae_v"))
    said = "" if math.isnan(base) else f" (predicting the mean V<sub>oc</sub>: {fmt(base, 3)} V)"
    return (f"{levels}: V<sub>oc</sub> MAE {fmt(rec.get('voc_mae_v'), 3)} V{said}, rank correlation of V<sub>oc</sub> "
            f"{fmt(rec.get('spearman_voc'))}{_interval(rec.get('spearman_voc_ci95'))} ({n} devices), of PCE "
            f"{fmt(rec.get('spearman_pce'))}{_interval(rec.get('spearman_pce_ci95'))} ({n_pce}, pooled "
            f"over acceptor classes){_not_viable_words(rec)}")


def _not_viable_words(rec) -> str:
    """How many of the published working devices the model called not viable (a group leader's reading: the
    card did not say that 6 of them come out not viable on computed levels).

    Examples
    --------
    >>> _not_viable_words({"not_viable": 6, "n": 47}), _not_viable_words({"not_viable": 0, "n": 47})
    ('; 6 of these 47 working devices come out not viable', '')
    """
    count = num(rec.get("not_viable"))
    if math.isnan(count) or count <= 0:
        return ""
    return f"; {int(count)} of these {esc(rec.get('n', '?'))} working devices come out not viable"


def _interval(ci) -> str:
    """`` [95 % range lo to hi, resampling whole acceptors]`` of a 95 % acceptor-group bootstrap interval
    ``[lo, hi]``, or '' without one.

    Examples
    --------
    >>> _interval([-0.17, 0.67])
    ' [95 % range −0.17 to 0.67, resampling whole acceptors]'
    """
    if not isinstance(ci, (list, tuple)) or len(ci) != 2 or any(math.isnan(num(x)) for x in ci):
        return ""
    return f" [95 % range {fmt(ci[0])} to {fmt(ci[1])}, resampling whole acceptors]"


def _class_words(film) -> str:
    """The film-level held-out Voc MAE per acceptor class, with the mean-Voc baseline where the class is no better
    and the PCE rank correlation within the class where it is known.

    Examples
    --------
    >>> words = _class_words({"by_class": {
    ...     "nfa-fused": {"n": 66, "voc_mae_v": 0.037, "baseline_voc_mae_v": 0.066, "spearman_pce": 0.25},
    ...     "nfa-other": {"n": 7, "voc_mae_v": 0.134, "baseline_voc_mae_v": 0.152}}})
    >>> print(words.split("holds): ")[1])  # doctest: +NORMALIZE_WHITESPACE
    nfa-fused 0.037 V (fused-ring non-fullerene; 66; PCE rank correlation within the class 0.25), nfa-other 0.134 V
    (other non-fullerene; 7; predicting the mean: 0.152 V)
    """
    classes = film.get("by_class") if isinstance(film, dict) else None
    if not isinstance(classes, dict) or not classes:
        return ""
    words = []
    for name, rec in classes.items():
        mae, base = num(rec.get("voc_mae_v")), num(rec.get("baseline_voc_mae_v"))
        if math.isnan(mae):
            continue
        close = "" if math.isnan(base) or mae < 0.8 * base else f"; predicting the mean: {fmt(base, 3)} V"
        rho = num(rec.get("spearman_pce"))
        within = "" if math.isnan(rho) else f"; PCE rank correlation within the class {fmt(rho)}"
        named = _class_name(name)[2:-1]
        words.append(f"{esc(name)} {fmt(mae, 3)} V ({named + '; ' if named else ''}{esc(rec.get('n', '?'))}{close}"
                     f"{within})")
    if not words:
        return ""
    return ("; on measured levels, V<sub>oc</sub> MAE by acceptor class (against one partner every pair is of one "
            "class: its within-class figure is the one that says how well the order of this ranking holds): "
            + ", ".join(words))


def device_tests_html(tests, calibration=None) -> tuple[str, str]:
    """The card's "Tested on published devices" value and, when the PCE has not ranked them, a caution (HTML).

    ``tests`` is ``meta["device_tests"]`` (:func:`screen.devicepars.device_tests`); ``calibration`` the levels'
    ``calibration_models`` record (``meta["levels_meta"]``). The figures on computed levels are shown only for
    the calibration they were measured with (:func:`screen.devicepars.computed_levels_apply`): levels scored with
    another calibration of the protocol got the shipped calibration's figures as their own (a custom-calibration
    audit); the card says so instead, and the caution is judged on the measured levels.

    Examples
    --------
    >>> row, caution = device_tests_html({"film_levels": None, "computed_levels": {
    ...     "voc_mae_v": 0.055, "spearman_voc": 0.5, "spearman_pce": -0.17, "n": 45, "n_pce": 49,
    ...     "protocol_id": "p"}})
    >>> row.startswith("held out (one acceptor at a time); levels computed with <code>p</code>")
    True
    >>> "not as an order" in caution
    True
    >>> row, caution = device_tests_html({"film_levels": None, "computed_levels": {
    ...     "voc_mae_v": 0.055, "spearman_voc": 0.5, "spearman_pce": -0.17, "n": 45, "n_pce": 49,
    ...     "protocol_id": "p", "measured_with": {"models_sha256": "ab"}}}, {"models_sha256": "cd"})
    >>> "0.055" in row, caution
    (False, '')
    >>> print(row)  # doctest: +NORMALIZE_WHITESPACE
    held out (one acceptor at a time); levels computed with this ranking's calibration: not tested on published
    devices (the device figures for levels computed with <code>p</code> were measured with the shipped
    calibration of that protocol, not with this one)
    """
    tests = tests if isinstance(tests, dict) else {}
    film, comp = tests.get("film_levels"), tests.get("computed_levels")
    applies = computed_levels_apply(tests, calibration) is not False
    parts = [_test_words(film, "measured film-scale levels")]
    if isinstance(comp, dict) and applies:
        parts.append(_test_words(comp, f"levels computed with <code>{esc(comp.get('protocol_id'))}</code> "
                                       "(each material left out of the calibration)"))
    elif isinstance(comp, dict):
        parts.append("levels computed with this ranking's calibration: not tested on published devices (the "
                     f"device figures for levels computed with <code>{esc(comp.get('protocol_id'))}</code> were "
                     "measured with the shipped calibration of that protocol, not with this one)")
    parts = [p for p in parts if p]
    if not parts:
        return "", ""
    row = "held out (one acceptor at a time); " + "; ".join(parts) + _class_words(film)
    judged = comp if isinstance(comp, dict) and applies else film
    rho = num(judged.get("spearman_pce")) if isinstance(judged, dict) else math.nan
    caution = ""
    if not math.isnan(rho) and rho < PCE_RANK_SKILL:
        caution = (f"On {'computed' if judged is comp else 'measured'} levels the estimated PCE has ranked "
                   f"published devices weakly at best (rank correlation {fmt(rho)}, below {PCE_RANK_SKILL:g}): read it "
                   "to set aside impossible and weak pairs, not as an order of the good ones.")
    return row, caution


def device_card(meta: dict) -> str:
    """Device-model and ranking-settings card (from ``meta["device"]``, ``meta["device_tests"]``, ``meta["rank"]``)."""
    dev = get(meta, "device", default={}) or {}
    rank = get(meta, "rank", default={}) or {}
    absorber = ABSORBER_TEXT.get(text(dev.get("absorber")), "")
    tested, _ = device_tests_html(get(meta, "device_tests", default={}),
                                  get(meta, "levels_meta", "calibration_models"))
    items = _device_items(dev) + ([("Tested on published devices", tested)] if tested else [])
    return ('<section class="card" id="card-device"><h3>Device model</h3>'
            f'<p class="quiet">{model_label(meta)}</p>'
            + (f'<p class="quiet">{absorber}</p>' if absorber else "")
            + _dl(items) + "<h3>Ranking settings</h3>" + _dl(_ranking_items(rank)) + "</section>")


# --------------------------------------------------------------------------- #
# Counts
# --------------------------------------------------------------------------- #
def settings_line(meta: dict) -> str:
    """One line naming the device and ranking settings changed from the defaults ("" when none is).

    A ``--set device.min_delta_homo_ev=0.1`` re-ranking was visible only on the device card (a meeting-day audit).

    Examples
    --------
    >>> settings_line({"device": {"min_delta_homo_ev": 0.1, "min_delta_homo_ev_set": True}, "rank": {}})
    '<p class="quiet" id="settings-changed">Settings changed from the defaults: <code>device.min_delta_homo_ev=0.1</code> (see the device card)</p>'
    >>> settings_line({"device": {"model": "fitted"}, "rank": {"sort_by": "pce_pct"}})
    ''
    """
    from screen.rank_index import non_default_settings

    try:
        changed = non_default_settings(meta if isinstance(meta, dict) else {})
    except Exception:  # noqa: BLE001 - an unreadable schema must not stop the report
        return ""
    if not changed:
        return ""
    codes = ", ".join(f"<code>{esc(c)}</code>" for c in changed)
    return (f'<p class="quiet" id="settings-changed">Settings changed from the defaults: {codes} '
            "(see the device card)</p>")


def counts_strip(meta: dict, levels: pd.DataFrame, ranking: pd.DataFrame, n_short: int,
                 n_pass: int | None) -> str:
    """Counts strip: input rows, computed, ranked (of them not viable), passing, shortlisted, not ranked."""
    counts = get(meta, "counts", default={}) or {}
    status = (texts(levels["status"]).str.strip().str.lower()
              if levels is not None and "status" in levels else None)

    def pick(key, fallback):
        x = num(counts.get(key)) if isinstance(counts, dict) else math.nan
        return fallback if math.isnan(x) else int(x)

    rows = pick("rows", len(levels) if levels is not None else None)
    ok = pick("ok", int(status.eq("ok").sum()) if status is not None else None)
    rej = pick("rejected", int(status.eq("rejected").sum()) if status is not None else None)
    fail = pick("failed", int(status.eq("failed").sum()) if status is not None else None)
    items = [("input rows", rows), ("computed", ok), ("ranked", len(ranking))]
    if ranking is not None and "viable" in ranking:
        not_viable = ~truthies(ranking["viable"])
        same = (texts(ranking["flags"]).str.contains("same_role_as_partner", regex=False) & not_viable
                if "flags" in ranking else pd.Series(False, index=ranking.index))
        items.append(("of them not viable", int(not_viable.sum())))
        if same.any():  # a meeting-day audit: never-paired rows read as chemistry verdicts in "not viable"
            items.append(("of those, not paired: same role as the partner", int(same.sum())))
    items += [("pass every check", n_pass), ("shortlisted", n_short), ("rejected", rej), ("failed", fail)]
    cells = "".join(
        f'<div class="count"><span class="n">{NOT_RECORDED if v is None else v}</span>'
        f'<span class="what">{t}</span></div>' for t, v in items)
    return f'<div class="counts" id="counts">{cells}</div>' + settings_line(meta)
