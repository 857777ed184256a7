"""One registry of the dye-cell flags: code, plain-words text and severity.

The same pattern as :mod:`screen.flags` (bulk-heterojunction ranking): a flag
is defined once and the model, the ranking, the CSV and the report take their
vocabulary from here.  ``severity``:

- ``"fail"``: the dye is not viable in this cell (no PCE, does not pass);
- ``"info"``: the row is told something; it may still pass.

Text fields ``{min_inj}``, ``{min_reg}`` and ``{elements}`` are filled by
:func:`describe` from the ranking's settings.

Examples
--------
>>> FLAGS["no_anchor"].severity, is_info("outside_calibration")
('fail', True)
>>> describe("injection_low", {"model": {"min_drive_inj_ev": 0.2}})
'excited-state potential E(S⁺/S*) less than 0.20 eV beyond the oxide band edge: charge injection is not assured'
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from screen.device import join_flags as _join_flags_any

__all__ = ["Flag", "FLAGS", "FLAG_ORDER", "INFO_FLAGS", "describe", "is_info", "join_flags"]


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
    Flag("injection_low", "excited-state potential E(S⁺/S*) less than {min_inj} beyond the oxide band edge: "
                          "charge injection is not assured"),
    Flag("regeneration_low", "ground-state potential less than {min_reg} beyond the mediator potential: "
                             "regeneration of the oxidised dye by the mediator is not assured"),
    Flag("voc_nonpositive", "the mediator potential lies beyond the oxide band edge: no photovoltage"),
    Flag("anchor_unknown", "no structure given, so the anchoring group could not be checked", "info"),
    Flag("element_uncalibrated", "contains an element that no dye of the calibration set has{elements}: E(S⁺/S) "
                                 "and E₀₋₀ are extrapolations", "info"),
    Flag("outside_calibration", "E(S⁺/S) or E₀₋₀ more than 0.1 V / 0.1 eV outside the range of the calibration "
                                "dyes: an extrapolation", "info"),
    Flag("p_type_estimate", "p-type cell: the dye's reduction potential is estimated as E(S⁺/S) − E₀₋₀ (exciton "
                            "binding neglected), so the driving forces are rough", "info"),
    Flag("detailed_balance_cap", "the estimate reached the detailed-balance limit for E₀₋₀ and was capped there",
         "info"),
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
        (as in ``ranking.meta.json``), ``settings["calibration"]["elements"]``.

    Examples
    --------
    >>> describe("made_up")
    'made_up'
    """
    code = code.strip()
    if code not in FLAGS:
        return code
    model = (settings or {}).get("model") or {}
    inj, reg = _num(model.get("min_drive_inj_ev")), _num(model.get("min_drive_reg_ev"))
    elements = ((settings or {}).get("calibration") or {}).get("elements") or []
    return FLAGS[code].text.format(
        min_inj="the required minimum" if math.isnan(inj) else f"{inj:.2f} eV",
        min_reg="the required minimum" if math.isnan(reg) else f"{reg:.2f} eV",
        elements=f" (the set covers {', '.join(elements)})" if elements else "",
    )


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
