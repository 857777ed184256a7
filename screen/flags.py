"""One registry of the ranking flags: code, plain-words text and severity.

Ranking (``screen.rank``), the device model (``screen.device``), the report and
the CSV exports all take their flag vocabulary from here, so a flag is defined
once. A flag's ``severity`` says what it does to a row:

- ``"not_viable"``: the pair cannot work as a solar cell (no type-II alignment,
  an offset below the threshold, no positive Voc, a gap outside the window, no
  partner of the other role, a sensitiser dye …).  The row gets no efficiency
  (empty, never 0), does not pass and is sorted below every viable row; the
  flag's text is the reason in plain words;
- ``"fail"``: the pair is estimated but the row does not pass the screen (it is
  still ranked and shown);
- ``"info"``: the row is told something; it may still pass.

``FLAG_ORDER`` is the order of the codes in a ``flags`` cell (``;``-joined).

Examples
--------
>>> FLAGS["lumo_offset_low"].severity
'not_viable'
>>> is_info("role_assumed"), is_not_viable("lumo_inverted")
(True, True)
>>> describe("lumo_offset_low", {"device": {"min_delta_lumo_ev": 0.3}})
'LUMO offset to the partner below 0.30 eV — electron transfer from donor to acceptor is not assured'
>>> describe("made_up_code")
'made_up_code'
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from screen.io import cell_number
from screen.viability import GAP_MAX_EV, JSC_MIN_MA_CM2, WRITTEN_DECIMALS

__all__ = ["Flag", "FLAGS", "FLAG_ORDER", "INFO_FLAGS", "NOT_VIABLE_FLAGS", "DEVICE_FLAGS", "describe", "is_info",
           "is_not_viable", "codes_of", "reason_of", "join_flags", "SEVERITIES",
           "FAR_FROM_REFERENCE_SIMILARITY", "WINDOW_DECIMALS", "window_bound"]

SEVERITIES = ("not_viable", "fail", "info")
#: ``far_from_reference`` below this nearest-neighbour similarity to the calibration's reference rows
#: (``reference_similarity`` of levels.csv): there the film-LUMO and EA models' leave-one-out errors are
#: ≈ 0.5 eV RMS against ≈ 0.2 eV above 0.6 (benchmarks/sigma_domain.py)
FAR_FROM_REFERENCE_SIMILARITY = 0.30


@dataclass(frozen=True)
class Flag:
    """One ranking flag.

    Attributes
    ----------
    code : str
        Machine name written in the ``flags`` column.
    text : str
        Plain-words meaning; ``{min_lumo}``, ``{min_homo}``, ``{window}`` and
        ``{limit}`` are filled from the run's settings by :func:`describe`.
    severity : str
        ``"not_viable"``, ``"fail"`` or ``"info"`` (see the module docstring).
    """

    code: str
    text: str
    severity: str = "fail"


_NV = "not_viable"

_REGISTRY = (
    Flag("role_dye", "role 'dye': dye-cell candidates are ranked with `dascreen dyecell`, not paired with a "
                     "donor or acceptor partner", _NV),
    Flag("same_role_as_partner", "same role as the partner (two donors or two acceptors), so the pair is not "
                                 "a working blend", _NV),
    Flag("role_unsupported", "no role given, and against this partner its levels support only the partner's own "
                             "role, so there is no donor/acceptor pair", _NV),
    Flag("no_type_ii_role", "no role given, and neither role gives a staggered (type-II) alignment with the "
                            "partner", _NV),
    Flag("role_invalid", "the role given in the input is neither donor nor acceptor"),
    Flag("is_partner", "this row is the partner material itself"),
    Flag("levels_inconsistent", "the computed levels are inconsistent (e.g. an optical gap above the transport "
                                "gap): the molecule lies outside what the calibration covers", _NV),
    Flag("input_missing", "a level the device model needs is missing, so no efficiency could be estimated", _NV),
    Flag("absorber_gap_invalid", "the absorber's optical gap is not positive, or lies so high that the AM1.5G "
                                 "photons above it (the spectrum ends at 280 nm = 4.43 eV) give, at the model's EQE, a "
                                 f"Jsc below {JSC_MIN_MA_CM2:.5f} mA cm⁻², what a ranking writes as 0 (from "
                                 f"{GAP_MAX_EV:.2f} eV on even at EQE = 1), so nothing is absorbed", _NV),
    Flag("lumo_inverted", "inverted alignment at the estimated levels: the acceptor's LUMO is not below the "
                          "donor's, so electrons would not move from donor to acceptor", _NV),
    Flag("homo_inverted", "inverted alignment at the estimated levels: the donor's HOMO is not above the "
                          "acceptor's, so holes would not move from acceptor to donor", _NV),
    Flag("lumo_offset_low", "LUMO offset to the partner below {min_lumo} — electron transfer from donor to "
                            "acceptor is not assured", _NV),
    Flag("homo_offset_low", "HOMO offset to the partner below {min_homo} — hole transfer from acceptor to "
                            "donor is not assured", _NV),
    Flag("voc_nonpositive", "no positive open-circuit voltage with this partner (the voltage loss exceeds the "
                            "interface gap)", _NV),
    Flag("gap_out_of_window", "optical gap outside the screening window{window}", _NV),
    Flag("too_many_heavy_atoms", "larger than the heavy-atom limit of this screen{limit}"),
    Flag("gas_scale_levels", "levels on the gas (isolated-molecule) scale: both device models are fitted or defined "
                             "on film (solid-state / electrochemical) levels, so this Voc, Jsc and PCE are not an "
                             "estimate of a device; rank film-scale levels (levels.scale=film) for one"),
    Flag("voc_capped", "open-circuit voltage limited to the detailed-balance voltage of the pair's smallest "
                       "optical gap (the model's value was above it)", "info"),
    Flag("loss_floor", "open-circuit voltage limited to the smaller optical gap minus the smallest energy loss "
                       "E_g − qVoc of the published devices the model was fitted on: below it the fitted loss would "
                       "extrapolate beyond any measured blend (typically a narrow-gap pair)", "info"),
    Flag("pce_capped", "efficiency limited to the detailed-balance (Shockley–Queisser) limit for the absorber "
                       "gap", "info"),
    Flag("ect_outside_fit", "charge-transfer energy E_CT (the smaller of LUMO_A − HOMO_D and the smaller optical gap) "
                            "outside the range of the published devices the model was fitted on{ect_range}: the "
                            "fitted voltage loss is held at the nearest fitted device's, so this Voc is an "
                            "extrapolation",
         "info"),
    Flag("alignment_uncertain", "an offset to the partner lies so close to its threshold, for the levels' σ, that the "
                                "verdict on the alignment has a one-in-four chance or more of being the other "
                                "way (p_aligned between 0.25 and 0.75)", "info"),
    Flag("estimate_on_edge", "the efficiency estimate sits on a steep edge of the model: at the estimated levels "
                             "it lies outside the middle 90 % (5th–95th percentile) of the efficiencies of the "
                             "Monte-Carlo samples that stay viable (more than 95 % of them lie above it, or below, by "
                             "more than a quarter of their σ and at least 0.05 PCE points), so a small "
                             "change of a level moves it a lot and the samples mostly land elsewhere (e.g. a HOMO or "
                             "LUMO offset of a few meV, where the charge-generation yield drops to zero); the ± and "
                             "P(PCE > target) describe those samples, not a spread around this estimate", "info"),
    Flag("few_viable_samples", "fewer than two of the Monte-Carlo samples of the levels' σ stay viable: the pair "
                               "works at its estimated levels but almost nowhere around them, so the spread of its "
                               "efficiency is not known (pce_sigma_pct left empty, not 0); P(PCE > target) and "
                               "p_aligned say how rarely it works", "info"),
    Flag("same_structure", "the same structure, in the same role, as an earlier row of the list (duplicate_of in "
                           "levels.csv names it): ranked like it, and kept out of the shortlist", "info"),
    Flag("same_computed_structure", "computed as the same structure as another row of the same role once long side "
                                    "chains were cut (smiles_computed): the same numbers, which do not resolve "
                                    "the side chains beyond their first branch point", "info"),
    Flag("acceptor_class_unknown", "the acceptor's class (fullerene, fused-ring or other non-fullerene, polymer) "
                                   "could not be told without its SMILES: the pooled EQE and fill factor of all "
                                   "classes are used, which moves the PCE by up to about a third", "info"),
    Flag("class_voc_unranked", "device model: in this pair's acceptor class the fitted Voc did not rank the "
                               "published devices held out (Spearman below 0.3 in models/device/fitted.json; "
                               "today the other non-fullerene acceptors: rylene diimides, rhodanine-ended and "
                               "non-fused ones), so read its Voc and PCE as that class's average, not as an order "
                               "within it", "info"),
    Flag("loss_class_pooled", "voltage loss: the fitted model's pooled value for all acceptor classes (the "
                              "fit keeps no separate value for this pair's class)", "info"),
    Flag("donor_only_model", "published donor-only model: only the donor absorbs and only the LUMO offset is "
                             "checked", "info"),
    Flag("heavy_atoms_unknown", "heavy-atom count unknown, so the size limit could not be checked", "info"),
    Flag("far_from_reference", "unlike every reference material of the calibration (fingerprint similarity "
                               "below 0.30, or an element that fewer than two reference materials contain): its levels are "
                               "extrapolated and carry a wide σ", "info"),
    Flag("known_family_bias", "diketopyrrolopyrrole core (levels.csv known_bias dpp): held out, this family's film "
                              "gaps come out 0.36–0.53 eV too wide and its HOMOs 0.16–0.34 eV too deep on the default "
                              "protocol (0.25–0.26 and 0.08–0.23 eV on xTB geometries; the force field twists the "
                              "bonds to the flanking rings, benchmarks/dpp_geometry.py), so its Voc and rank lean high; "
                              "nothing is corrected", "info"),
    Flag("known_family_bias_ndi", "naphthalene diimide on a polymer backbone (levels.csv known_bias ndi_polymer): held "
                                  "out, this family's film gaps come out 0.24–0.25 eV too narrow and its LUMOs "
                                  "0.28–0.31 eV too deep on the default protocol (0.04–0.15 and 0.15 eV on xTB "
                                  "geometries; benchmarks/known_bias.py), so as an acceptor its Jsc and PCE lean high "
                                  "and its Voc can sit on the loss floor of its own gap; nothing is corrected", "info"),
    Flag("known_family_bias_ct", "polymer whose tight-binding HOMO and LUMO sit on different units (levels.csv "
                                 "known_bias ct_polymer: orbital gap below 1 eV, HOMO–LUMO overlap below 0.05): held "
                                 "out, all four such reference polymers came out with film gaps 0.24–0.39 eV too "
                                 "narrow, and the polymer acceptor PY-IT of the device set 0.25 eV "
                                 "(benchmarks/known_bias.py), so its Jsc and PCE lean high and its Voc can sit on the "
                                 "loss floor of its own gap; a pattern found in the residuals, nothing is corrected",
         "info"),
    Flag("chain_fit_poor", "polymer: the chain-limit extrapolation of its oligomers is poor for a level or the gap "
                           "(no saturating fit accepted, or a series that has not started to saturate; levels.csv "
                           "note says which); its σ carries the extrapolation spread", "info"),
    Flag("lone_pair_homo", "the tight-binding HOMO was a nitrogen lone pair placed above the π orbitals; IP, "
                           "HOMO and gap are those of the highest π orbital (IP shifted by the orbital-energy "
                           "difference)", "info"),
    Flag("role_from_levels", "no role given; evaluated in the role its levels support against the partner "
                             "(type-II alignment)", "info"),
    Flag("role_assumed", "role not given in the input; assumed to complement the partner", "info"),
)

#: every flag by code
FLAGS: dict[str, Flag] = {f.code: f for f in _REGISTRY}
#: order of the codes in a ``flags`` cell
FLAG_ORDER: tuple[str, ...] = tuple(f.code for f in _REGISTRY)
#: flags that inform without making a row fail
INFO_FLAGS = frozenset(f.code for f in _REGISTRY if f.severity == "info")
#: flags that make a pair not viable: no efficiency, sorted below every viable row
NOT_VIABLE_FLAGS = frozenset(f.code for f in _REGISTRY if f.severity == _NV)
#: the flags the device model itself raises (the rest come from ranking filters), in registry order
DEVICE_FLAGS = ("input_missing", "absorber_gap_invalid", "lumo_inverted", "homo_inverted", "lumo_offset_low",
                "homo_offset_low", "voc_nonpositive", "voc_capped", "loss_floor", "pce_capped", "ect_outside_fit",
                "loss_class_pooled", "donor_only_model")


def is_not_viable(code: str) -> bool:
    """True for a flag that makes a pair not viable (no efficiency)."""
    return code in NOT_VIABLE_FLAGS


def is_info(code: str) -> bool:
    """True for a flag that does not make a row fail."""
    return code in INFO_FLAGS


def codes_of(cell) -> list[str]:
    """Flag codes of one ``flags`` cell (``;``-joined), empty entries dropped.

    Examples
    --------
    >>> codes_of("lumo_offset_low; role_assumed;")
    ['lumo_offset_low', 'role_assumed']
    >>> codes_of(float("nan"))
    []
    """
    if cell is None or (isinstance(cell, float) and math.isnan(cell)):
        return []
    return [c.strip() for c in str(cell).split(";") if c.strip()]


def _get(mapping, *keys):
    node = mapping
    for key in keys:
        if not isinstance(node, dict) or key not in node:
            return None
        node = node[key]
    return node


def _fmt(x: float, digits: int = 2) -> str:
    out = f"{x:.{digits}f}"
    if out.lstrip("+-").strip("0.") == "":
        out = f"{0:.{digits}f}"
    return out.replace("-", "\u2212")


#: decimals of a gap-window limit as a reason quotes it and :func:`screen.rank.rank_candidates` compares the written
#: gaps with it: those of the numbers written to a ranking (:data:`screen.viability.WRITTEN_DECIMALS`)
WINDOW_DECIMALS = WRITTEN_DECIMALS


def window_bound(x: float) -> float:
    """A gap-window limit as the reason quotes it: its value to :data:`WINDOW_DECIMALS` decimals. [eV]

    Examples
    --------
    >>> window_bound(1.0), window_bound(2.123456)
    (1.0, 2.1235)

    Rounded as the ranking rounds the gaps it compares (numpy): 4.06635 is 4.0664 in both, where correct decimal
    rounding of its binary value gives 4.0663.

    >>> window_bound(4.06635)
    4.0664
    """
    return float(np.round(float(x), WINDOW_DECIMALS))


def _fmt_bound(x: float) -> str:
    """A gap-window limit with 2 decimals, or as many (up to :data:`WINDOW_DECIMALS`) as :func:`window_bound`
    keeps, so a written gap is never on the other side of the limit quoted."""
    v = window_bound(x)
    for d in range(2, WINDOW_DECIMALS):
        if float(f"{v:.{d}f}") == v:
            return _fmt(v, d)
    return _fmt(v, WINDOW_DECIMALS)


def _setting(settings: dict, key: str) -> float:
    x = cell_number(_get(settings, "rank", key))
    return cell_number(_get(settings, "filters", key)) if math.isnan(x) else x


#: how an offset threshold that rounds to 0.00 eV is quoted: the fitted model's (type II, the charge-generation
#: yield 1 − exp(−Δ/Δ0) doing the rest), where an offset is low when its yield leaves no written current
#: (:func:`screen.viability.dark_current`)
_NO_THRESHOLD = ("what separates charges (so small an offset that its charge-generation yield leaves a Jsc below "
                 f"{JSC_MIN_MA_CM2:.5f} mA cm⁻², written as 0)")


def _min_offset(x: float) -> str:
    """An offset threshold as a reason quotes it.

    Examples
    --------
    >>> _min_offset(0.3), _min_offset(float("nan")), _min_offset(0.0)[:22]
    ('0.30 eV', 'the required minimum', 'what separates charges')
    """
    if math.isnan(x):
        return "the required minimum"
    return _NO_THRESHOLD if _fmt(x) == _fmt(0.0) else f"{_fmt(x)} eV"


def describe(code: str, settings: dict | None = None) -> str:
    """Plain-words meaning of one flag, with the run's thresholds quoted.

    Parameters
    ----------
    code : str
        Flag code as written in the ``flags`` column.
    settings : dict, optional
        Thresholds as recorded in the ranking sidecar: ``settings["device"]``
        (``min_delta_lumo_ev``, ``min_delta_homo_ev``) and ``settings["rank"]``
        (or ``settings["filters"]``: ``gap_min_ev``, ``gap_max_ev``, ``max_heavy_atoms``).

    Returns
    -------
    str
        Unescaped text; an unknown code is returned verbatim.
    """
    code = code.strip()
    if code not in FLAGS:
        return code
    settings = settings or {}
    min_lumo = cell_number(_get(settings, "device", "min_delta_lumo_ev"))
    min_homo = cell_number(_get(settings, "device", "min_delta_homo_ev"))
    g_lo, g_hi = _setting(settings, "gap_min_ev"), _setting(settings, "gap_max_ev")
    limit = _setting(settings, "max_heavy_atoms")
    window = "" if math.isnan(g_lo) or math.isnan(g_hi) else f" ({_fmt_bound(g_lo)}\u2013{_fmt_bound(g_hi)} eV)"
    e_lo = cell_number(_get(settings, "device", "fitted", "ect_min_ev"))
    e_hi = cell_number(_get(settings, "device", "fitted", "ect_max_ev"))
    ect_range = "" if not (math.isfinite(e_lo) and math.isfinite(e_hi)) else f" ({e_lo:.2f}\u2013{e_hi:.2f} eV)"
    return FLAGS[code].text.format(
        ect_range=ect_range,
        min_lumo=_min_offset(min_lumo),
        min_homo=_min_offset(min_homo),
        window=window,
        limit="" if math.isnan(limit) else f" ({int(limit)})",
    )


def reason_of(cell, settings: dict | None = None) -> str:
    """Plain-words reason a pair is not viable: the texts of its not-viable flags ('' if viable).

    Examples
    --------
    >>> reason_of("lumo_inverted;role_from_levels")
    "inverted alignment at the estimated levels: the acceptor's LUMO is not below the donor's, so electrons would not move from donor to acceptor"
    >>> reason_of("role_assumed")
    ''
    """
    return "; ".join(describe(c, settings) for c in codes_of(cell) if is_not_viable(c))


def join_flags(masks: dict) -> np.ndarray:
    """Per-element ``;``-joined codes of the raised flags.

    Parameters
    ----------
    masks : dict of str to array_like of bool
        One boolean mask per flag code (broadcast against each other).

    Returns
    -------
    numpy.ndarray of object
        ``''`` where no flag is raised; codes in :data:`screen.flags.FLAG_ORDER`
        order (codes unknown to the registry last, in ``masks`` order).

    Examples
    --------
    >>> join_flags({"voc_nonpositive": [True, False], "input_missing": [True, False]}).tolist()
    ['input_missing;voc_nonpositive', '']
    """
    names = [k for k in FLAG_ORDER if k in masks] + [k for k in masks if k not in FLAGS]
    shape = np.broadcast_shapes(*(np.shape(v) for v in masks.values()))
    n = int(np.prod(shape, dtype=np.int64))
    stacked = np.zeros((len(names), n), dtype=bool)
    for row, name in zip(stacked, names):
        row[:] = np.ravel(np.broadcast_to(np.asarray(masks[name], dtype=bool), shape))
    out = np.full(n, "", dtype=object)
    for j in np.flatnonzero(stacked.any(axis=0)):
        out[j] = ";".join(name for name, raised in zip(names, stacked[:, j]) if raised)
    return out.reshape(shape)
