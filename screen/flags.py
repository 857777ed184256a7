"""One registry of the ranking flags: code, plain-words text and severity.

Ranking (``screen.rank``), the device model (``screen.device``), the report and
the CSV exports all take their flag vocabulary from here, so a flag is defined
once. A flag's ``severity`` says what it does to a row:

- ``"fail"``: the row does not pass the screen (it is still ranked and shown);
- ``"info"``: the row is told something; it may still pass.

``FLAG_ORDER`` is the order of the codes in a ``flags`` cell (``;``-joined).

Examples
--------
>>> FLAGS["lumo_offset_low"].severity
'fail'
>>> is_info("role_assumed")
True
>>> describe("lumo_offset_low", {"device": {"min_delta_lumo_ev": 0.3}})
'LUMO offset to the partner below 0.30 eV — electron transfer from donor to acceptor is not assured'
>>> describe("made_up_code")
'made_up_code'
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["Flag", "FLAGS", "FLAG_ORDER", "INFO_FLAGS", "DEVICE_FLAGS", "describe", "is_info", "codes_of"]

SEVERITIES = ("fail", "info")


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
        ``"fail"`` or ``"info"`` (see the module docstring).
    """

    code: str
    text: str
    severity: str = "fail"


_REGISTRY = (
    Flag("same_role_as_partner", "same role as the partner (two donors or two acceptors), so the pair is not "
                                 "a working blend"),
    Flag("role_invalid", "the role given in the input is neither donor nor acceptor"),
    Flag("is_partner", "this row is the partner material itself"),
    Flag("input_missing", "a level the device model needs is missing, so no efficiency could be estimated"),
    Flag("lumo_offset_low", "LUMO offset to the partner below {min_lumo} — electron transfer from donor to "
                            "acceptor is not assured"),
    Flag("homo_offset_low", "HOMO offset to the partner below {min_homo} — hole transfer from acceptor to "
                            "donor is not assured"),
    Flag("voc_nonpositive", "no positive open-circuit voltage with this partner, so the efficiency is zero"),
    Flag("gap_out_of_window", "optical gap outside the screening window{window}"),
    Flag("too_many_heavy_atoms", "larger than the heavy-atom limit of this screen{limit}"),
    Flag("heavy_atoms_unknown", "heavy-atom count unknown, so the size limit could not be checked", "info"),
    Flag("role_assumed", "role not given in the input; assumed to complement the partner", "info"),
)

#: every flag by code
FLAGS: dict[str, Flag] = {f.code: f for f in _REGISTRY}
#: order of the codes in a ``flags`` cell
FLAG_ORDER: tuple[str, ...] = tuple(f.code for f in _REGISTRY)
#: flags that inform without making a row fail
INFO_FLAGS = frozenset(f.code for f in _REGISTRY if f.severity == "info")
#: the flags the device model itself raises (the rest come from ranking filters)
DEVICE_FLAGS = ("input_missing", "lumo_offset_low", "homo_offset_low", "voc_nonpositive")


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


def _num(value) -> float:
    if isinstance(value, bool) or value is None:
        return math.nan
    try:
        out = float(value)
    except (TypeError, ValueError):
        return math.nan
    return out if math.isfinite(out) else math.nan


def _get(mapping, *keys):
    node = mapping
    for key in keys:
        if not isinstance(node, dict) or key not in node:
            return None
        node = node[key]
    return node


def _fmt(x: float) -> str:
    out = f"{x:.2f}"
    if out.lstrip("+-").strip("0.") == "":
        out = "0.00"
    return out.replace("-", "\u2212")


def _setting(settings: dict, key: str) -> float:
    x = _num(_get(settings, "rank", key))
    return _num(_get(settings, "filters", key)) if math.isnan(x) else x


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
    min_lumo = _num(_get(settings, "device", "min_delta_lumo_ev"))
    min_homo = _num(_get(settings, "device", "min_delta_homo_ev"))
    g_lo, g_hi = _setting(settings, "gap_min_ev"), _setting(settings, "gap_max_ev")
    limit = _setting(settings, "max_heavy_atoms")
    window = "" if math.isnan(g_lo) or math.isnan(g_hi) else f" ({_fmt(g_lo)}\u2013{_fmt(g_hi)} eV)"
    return FLAGS[code].text.format(
        min_lumo="the required minimum" if math.isnan(min_lumo) else f"{_fmt(min_lumo)} eV",
        min_homo="the required minimum" if math.isnan(min_homo) else f"{_fmt(min_homo)} eV",
        window=window,
        limit="" if math.isnan(limit) else f" ({int(limit)})",
    )
