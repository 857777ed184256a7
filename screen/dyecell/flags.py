"""One registry of the dye-cell flags: code, plain-words text and severity.

The same pattern as :mod:`screen.flags` (bulk-heterojunction ranking): a flag
is defined once and the model, the ranking, the CSV and the report take their
vocabulary from here.  ``severity``:

- ``"fail"``: the dye is not viable in this cell (no PCE, does not pass);
- ``"info"``: the row is told something; it may still pass.

``viability_uncertain`` is the dye analogue of the bulk-heterojunction
``alignment_uncertain`` (:mod:`screen.flags`): ``p_viable`` strictly inside
:data:`VIABILITY_UNCERTAIN`, so the verdict on viability has a one-in-four
chance or more of being the other way for the σ of E(S⁺/S) and E₀₋₀.

Text fields ``{min_inj}``, ``{min_reg}``, ``{elements}``, ``{excited}``,
``{regenerated}`` and ``{ideal}`` are filled by :func:`describe` from the
ranking's settings (``settings["oxide"]["type"] == "p"`` gives the p-type
wording: E(S*/S⁻) for the injecting state, E(S/S⁻) for the reduced dye).

Examples
--------
>>> FLAGS["no_anchor"].severity, is_info("outside_calibration"), is_info("viability_uncertain")
('fail', True, True)
>>> describe("injection_low", {"model": {"min_drive_inj_ev": 0.2}})
'excited-state potential E(S⁺/S*) less than 0.20 eV beyond the oxide band edge: charge injection is not assured'
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from screen.device import join_flags as _join_flags_any
from screen.flags import FAR_FROM_REFERENCE_SIMILARITY

__all__ = ["Flag", "FLAGS", "FLAG_ORDER", "INFO_FLAGS", "VIABILITY_UNCERTAIN", "describe", "is_info", "join_flags",
           "viability_uncertain"]

#: ``p_viable`` strictly between these: the driving forces clear their thresholds in only part of the level
#: uncertainty, flag ``viability_uncertain`` (the band of ``alignment_uncertain``,
#: :data:`screen.rank.ALIGNMENT_UNCERTAIN`)
VIABILITY_UNCERTAIN = (0.25, 0.75)


@dataclass(frozen=True)
class Flag:
    """One dye-cell flag (code written in the ``flags`` column, plain-words text, severity)."""

    code: str
    text: str
    severity: str = "fail"


_REGISTRY = (
    Flag("input_missing", "E(S⁺/S) or E₀₋₀ is missing, so nothing could be estimated"),
    Flag("no_anchor", "no anchoring group (carboxylic, cyanoacrylic or phosphonic acid, pyridine, catechol, …): "
                      "the dye cannot bind to the oxide"),
    Flag("no_sunlight", "absorbs no sunlight: E₀₋₀ lies above the short-wavelength end of the AM1.5G "
                        "spectrum (280 nm = 4.43 eV) or so close to it that Jsc rounds to 0 (< 0.0001 mA cm⁻²), so "
                        "the dye gives no photocurrent"),
    Flag("injection_low", "excited-state potential {excited} less than {min_inj} beyond the oxide band edge: "
                          "charge injection is not assured"),
    Flag("regeneration_low", "{regenerated} less than {min_reg} beyond the mediator potential: "
                             "regeneration of the {dye_state} dye by the mediator is not assured"),
    Flag("voc_nonpositive", "no photovoltage: the ideal voltage {ideal} is not larger than the assumed Voc loss "
                            "(or the mediator lies at or beyond the oxide band edge); judged on the Voc after the "
                            "detailed-balance cap of E₀₋₀"),
    Flag("viability_uncertain", f"P(viable) between {VIABILITY_UNCERTAIN[0]:.2f} and {VIABILITY_UNCERTAIN[1]:.2f}: "
                                "the driving forces clear their thresholds in only part of the level uncertainty",
         "info"),
    Flag("anchor_unknown", "no structure given, so the anchoring group could not be checked", "info"),
    Flag("anchor_missing_allowed", "no anchoring group found, but the anchor check is switched off "
                                   "(dyecell.require_anchor = false): ranked as if the dye binds to the oxide",
         "info"),
    Flag("element_uncalibrated", "contains an element that no dye of the calibration set has{elements}: E(S⁺/S) "
                                 "and E₀₋₀ are extrapolations", "info"),
    Flag("outside_calibration", "E(S⁺/S) or E₀₋₀ more than 0.1 V / 0.1 eV outside the range of the calibration "
                                "dyes: an extrapolation", "info"),
    Flag("unlike_reference_dyes", "structure unlike every dye of the calibration set (nearest fingerprint "
                                  f"similarity below {FAR_FROM_REFERENCE_SIMILARITY:.2f}, column reference_similarity; "
                                  "0 with an element no calibration dye has): E(S⁺/S) and E₀₋₀ are extrapolations, "
                                  "and their σ may understate the error", "info"),
    Flag("p_type_estimate", "p-type cell: the dye's reduction potential E(S/S⁻) (column e_ox_excited_v_nhe) is "
                            "estimated as E(S⁺/S) − E₀₋₀/e, neglecting exciton binding; the electrochemical gap is "
                            "usually larger than E₀₋₀, so the estimate overstates the hole-injection driving force and "
                            "understates the regeneration driving force, each by the difference", "info"),
    Flag("detailed_balance_cap", "the estimate reached the detailed-balance limit for E₀₋₀ and was capped there",
         "info"),
    Flag("few_viable_samples", "fewer than two of the Monte-Carlo samples of the σ of E(S⁺/S) and E₀₋₀ stay viable: "
                               "the dye works at its estimated potentials but almost nowhere around them, so the "
                               "spread of its efficiency is not known (pce_sigma_pct left empty, not 0); p_viable says "
                               "how rarely it works", "info"),
)

#: every flag by code
FLAGS: dict[str, Flag] = {f.code: f for f in _REGISTRY}
#: order of the codes in a ``flags`` cell
FLAG_ORDER: tuple[str, ...] = tuple(f.code for f in _REGISTRY)
#: flags that inform without making a dye fail
INFO_FLAGS = frozenset(f.code for f in _REGISTRY if f.severity == "info")


def is_info(code: str) -> bool:
    """True for a flag that does not make a dye fail."""
    return code in INFO_FLAGS


def _num(value) -> float:
    try:
        out = float(value)
    except (TypeError, ValueError):
        return math.nan
    return out if math.isfinite(out) else math.nan


def describe(code: str, settings: dict | None = None) -> str:
    """Plain-words meaning of one flag with the run's thresholds.

    Parameters
    ----------
    code : str
        Flag code.
    settings : dict, optional
        ``settings["model"]`` with ``min_drive_inj_ev`` and ``min_drive_reg_ev``
        (as in ``ranking.meta.json``), ``settings["regeneration_threshold_ev"]`` (the threshold that applied
        to the mediator; else the model's), ``settings["calibration"]["elements"]``,
        ``settings["oxide"]["type"]`` (``"p"``: p-type wording).

    Examples
    --------
    >>> describe("made_up")
    'made_up'
    >>> describe("injection_low", {"oxide": {"type": "p"}})[:54]
    'excited-state potential E(S*/S⁻) ≈ E(S⁺/S) less than t'
    """
    code = code.strip()
    if code not in FLAGS:
        return code
    model = (settings or {}).get("model") or {}
    inj = _num(model.get("min_drive_inj_ev"))
    reg = _num((settings or {}).get("regeneration_threshold_ev", model.get("min_drive_reg_ev")))
    elements = ((settings or {}).get("calibration") or {}).get("elements") or []
    p_type = str(((settings or {}).get("oxide") or {}).get("type") or "").strip().lower() == "p"
    return FLAGS[code].text.format(
        excited="E(S*/S\u207b) \u2248 E(S\u207a/S)" if p_type else "E(S\u207a/S*)",
        regenerated=("reduced-dye potential E(S/S\u207b) \u2248 E(S\u207a/S) \u2212 E\u2080\u208b\u2080/e"
                     if p_type else "ground-state potential E(S\u207a/S)"),
        dye_state="reduced" if p_type else "oxidised",
        ideal="E_VB \u2212 E_redox" if p_type else "E_redox \u2212 E_CB",
        min_inj="the required minimum" if math.isnan(inj) else f"{inj:.2f} eV",
        min_reg="the required minimum" if math.isnan(reg) else f"{reg:.2f} eV",
        elements=f" (the set covers {', '.join(elements)})" if elements else "",
    )


def viability_uncertain(p_viable):
    """Rows whose ``p_viable`` lies strictly inside :data:`VIABILITY_UNCERTAIN` (NaN: not flagged).

    Parameters
    ----------
    p_viable : array_like
        Fraction of Monte-Carlo samples that inject and regenerate [0–1].

    Returns
    -------
    numpy.ndarray of bool

    Examples
    --------
    >>> viability_uncertain([0.2, 0.25, 0.5, 0.75, 0.9, float("nan")]).tolist()
    [False, False, True, False, False, False]
    """
    p = np.asarray(p_viable, dtype=float)
    with np.errstate(invalid="ignore"):
        return (p > VIABILITY_UNCERTAIN[0]) & (p < VIABILITY_UNCERTAIN[1])


def join_flags(masks: dict):
    """Per-row ``;``-joined codes in :data:`FLAG_ORDER` (see :func:`screen.device.join_flags`).

    Examples
    --------
    >>> join_flags({"injection_low": [True, False], "no_anchor": [True, False]}).tolist()
    ['no_anchor;injection_low', '']
    """
    ordered = {k: masks[k] for k in FLAG_ORDER if k in masks}
    ordered.update({k: v for k, v in masks.items() if k not in ordered})
    return _join_flags_any(ordered)
