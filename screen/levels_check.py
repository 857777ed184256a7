"""Input sanity for levels files and partners, before anything is ranked.

On the vacuum scale a bound material has HOMO < LUMO < 0 (HOMO = −IP,
LUMO = −EA), a positive optical gap that is not much larger than its
LUMO − HOMO gap (the optical gap is the transport gap minus the exciton binding
energy, which is ≥ 0; :data:`GAP_EXCESS_TOL_EV` allows for the spread between
CV and absorption onsets), on the film scale not far below it either
(:data:`GAP_DEFICIT_MAX_EV`), and 0 ≤ σ ≤ :data:`SIGMA_MAX_EV`.  A violation is almost always a typing or
convention slip (an ionisation energy written as a positive HOMO, HOMO and LUMO
swapped or equal, a gap in nm, a σ in meV, a HOMO above :data:`HOMO_MAX_EV` or a
film LUMO above :data:`FILM_LUMO_MAX_EV`, which no material has and which hartree
give: 1 Eh = 27.2114 eV): it stops the ranking with an :class:`InputError` (exit
code 2) that names the file, the line, the column, the value and the fix.
A levels file is also refused for a number that is not finite (``inf``), an
empty or repeated id, a scale other than ``film`` or ``gas``, an acceptor class
that is none of the device model's classes and a role other than ``donor``,
``acceptor`` or empty.  Rows of a run's own levels (a raw ``xtb_ip_ev`` value)
are held to the checks that protect the numbers (ids, finite numbers, scale,
acceptor class, a σ that is ≥ 0 and not in meV); levels that fail the checks
above, which a calibration may give for a molecule outside its domain, make a
not-viable row of the ranking instead (flag ``levels_inconsistent``), and a σ
above 1 eV, which the calibration's own σ can reach far from its reference
data, is kept as it is (:func:`check_levels`).

On the ``gas`` scale a positive LUMO is allowed (an unbound anion, EA < 0).

Examples
--------
>>> import pandas as pd
>>> bad = pd.DataFrame({"id": ["d1"], "homo_ev": [5.3], "lumo_ev": [-3.5], "gap_opt_ev": [1.7], "scale": ["film"]})
>>> check_levels(bad, "my_cv.csv")
Traceback (most recent call last):
...
screen.errors.InputError: my_cv.csv: line 2 (id 'd1'), column homo_ev = 5.3: HOMO is given as a positive ionisation energy; write it as -5.3 (vacuum scale, HOMO = -IP < 0)
"""

from __future__ import annotations

import math
import re

import numpy as np
import pandas as pd

from screen.errors import InputError
from screen.io import text_cells
from screen.spectrum import gap_to_wavelength_nm

__all__ = ["check_levels", "check_partner", "raise_problems", "row_problems", "sigma_problem", "inconsistent_rows", "quoted",
           "scoring_calibration", "file_line", "fmt_value", "hartree_hint", "text_row_problems", "nm_hint", "mv_hint", "not_a_number",
           "decimal_comma_hint", "e00_problem", "HC_EV_NM", "E00_RANGE_EV",
           "GAP_EXCESS_TOL_EV",
           "GAP_DEFICIT_MAX_EV", "LEVEL_MIN_EV", "GAP_MAX_INPUT_EV", "QUOTE_MAX", "SIGMA_MAX_EV", "HOMO_MAX_EV",
           "FILM_LUMO_MAX_EV", "HARTREE_GAP_MAX_EV"]

#: how much the optical gap may exceed LUMO − HOMO (CV and absorption onsets scatter by ~0.1–0.3 eV;
#: common practice) [eV]
GAP_EXCESS_TOL_EV = 0.3
#: how far the optical gap may lie below LUMO − HOMO on the film scale: the exciton binding energy plus the
#: scatter of CV and absorption onsets, a few tenths of an eV in organic films (common practice) [eV]
GAP_DEFICIT_MAX_EV = 1.0
#: rounding allowance of the gap comparisons (−3.0 − (−5.3) + 0.3 is 2.5999999999999996) [eV]
_ROUND_EV = 1e-9
#: the scales a levels row may name (docs/contracts.md §6)
_SCALES = ("film", "gas")
#: the roles of the OPV ranking (empty: the ranking chooses)
_ROLES = ("donor", "acceptor", "")
#: levels deeper than this are taken as a unit slip (meV, kJ/mol) [eV]
LEVEL_MIN_EV = -15.0
#: a HOMO above this is no material's and is taken as a unit slip, most often hartree (−0.2 Eh for −5.44 eV):
#: HOMO = −IP, and film HOMOs of organic semiconductors lie at about −4.5…−7 eV, gas-phase ionisation energies
#: of organic molecules above 5 eV (from memory); −2 eV keeps a wide margin below the shallowest [eV]
HOMO_MAX_EV = -2.0
#: a film-scale LUMO above this is no organic semiconductor's and is taken as a unit slip (hartree): film LUMOs lie
#: at about −2…−4.5 eV (from memory). On the gas scale a LUMO between −1 and 0 eV is real (electron affinities of
#: 0–1 eV) and is only taken as hartree beside a HOMO that is [eV]
FILM_LUMO_MAX_EV = -1.0
#: an optical gap below this beside levels that look like hartree is taken as hartree too (0.05 Eh = 1.36 eV):
#: the narrowest-gap organic absorbers have gaps of about 0.6–1 eV (common practice) [eV]
HARTREE_GAP_MAX_EV = 0.3
#: optical gaps above this are taken as a wavelength in nm [eV]
GAP_MAX_INPUT_EV = 15.0
#: largest accepted one-σ uncertainty of a level or gap (``*_sigma_ev``): measured values carry ~0.01–0.1 eV and
#: calibrated ones ~0.1–0.3 eV (common practice); a σ of 1 eV already spans every organic semiconductor's levels, so
#: a larger one is a unit slip (meV), as in the dye mode (:data:`screen.dyecell.checks.SIGMA_MAX`) [eV]
SIGMA_MAX_EV = 1.0
#: a σ from this value up is taken as given in meV (50 meV is a common CV uncertainty) [eV]
_SIGMA_MEV_FROM = 10.0
#: problems listed in one message at most
_MAX_LISTED = 5
_SIGMAS = ("homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev")


#: characters of a user's value quoted in a message at most (a 5 MB cell gave a 5 MB message, a new user's audit)
QUOTE_MAX = 60


#: accepted E₀₋₀ of a dye [eV]: sensitisers absorb in the visible and near infrared, typically 1.2–3.5 eV
#: (common practice); 1.0 eV = 1240 nm, 4.0 eV = 310 nm (the AM1.5G spectrum ends near 280 nm)
E00_RANGE_EV = (1.0, 4.0)


def fmt_value(x: float) -> str:
    """A number as messages show it: six significant digits, no trailing zeros.

    >>> fmt_value(-5.30), fmt_value(1239.84 / 650)
    ('-5.3', '1.90745')
    """
    return f"{x:.6g}"


def mv_hint(value: float, unit: str = "V") -> str | None:
    """The likely slip when a value in V or eV is 100 or more: millivolts or millielectronvolts (None otherwise).

    Examples
    --------
    >>> mv_hint(-5350, "eV"), mv_hint(0.5)
    ('-5350 looks like millielectronvolts: write -5.35 eV', None)
    """
    if abs(value) >= 100.0:
        name = "millivolts" if unit == "V" else "millielectronvolts"
        return f"{fmt_value(value)} looks like {name}: write {value / 1000:.3g} {unit}"
    return None


def not_a_number(text: str, unit: str = "eV", example: str = "-5.3", optional: bool = False) -> str:
    """The message for a cell that is not a number: a decimal comma or a typographic minus named as such (the
    levels, dye and reference-file checks).

    Examples
    --------
    >>> not_a_number("-5,35"), not_a_number("\u22125.35")
    ('not a number; a decimal comma? write -5.35 (eV, with a decimal point)', 'not a number; a typographic minus sign (\u2212)? write -5.35')
    >>> not_a_number("n/a", "V", "1.1", optional=True)
    'not a number; write the value in V, e.g. 1.1 (leave the cell empty if unknown)'
    """
    comma = decimal_comma_hint(text)
    if comma:
        return f"not a number; a decimal comma? write {comma} ({unit}, with a decimal point)"
    plain = str(text).strip().replace("\u2212", "-")
    if plain != str(text).strip() and pd.notna(pd.to_numeric(plain, errors="coerce")):
        return f"not a number; a typographic minus sign (\u2212)? write {plain}"
    return f"not a number; write the value in {unit}, e.g. {example}" + (" (leave the cell empty if unknown)"
                                                                        if optional else "")


#: hc in eV nm (CODATA, :func:`screen.spectrum.gap_to_wavelength_nm` of 1 eV), for an energy written as a wavelength
HC_EV_NM = float(gap_to_wavelength_nm(1.0))


def nm_hint(value: float) -> str:
    """The hint for an energy [eV] written as a wavelength [nm]: E = hc/λ.

    Examples
    --------
    >>> nm_hint(650)
    '650 looks like a wavelength in nm: write 1239.84/650 = 1.91 eV'
    """
    return f"{fmt_value(value)} looks like a wavelength in nm: write {HC_EV_NM:g}/{fmt_value(value)} = " \
           f"{HC_EV_NM / value:.3g} eV"


def e00_problem(value: float) -> str | None:
    """What is wrong with a dye's E₀₋₀ [eV] (None if it is plausible; NaN is not checked here).

    Examples
    --------
    >>> e00_problem(2.1) is None, e00_problem(-2.1)
    (True, 'E00 is a positive excitation energy in eV (typically 1.2-3.5 eV for a sensitiser); write 2.1')
    """
    lo, hi = E00_RANGE_EV
    if not math.isfinite(value) or lo <= value <= hi:
        return None
    if value <= 0 and lo <= -value <= hi:
        return f"E00 is a positive excitation energy in eV (typically 1.2-3.5 eV for a sensitiser); write {fmt_value(-value)}"
    if value >= 100.0:
        return f"E00 must be in eV; {nm_hint(value)}"
    return (f"E00 must be in eV and lie in {lo:g}-{hi:g} eV (typically 1.2-3.5 eV for a sensitiser, "
            f"E00 = 1239.84/lambda[nm]); check the units")


def decimal_comma_hint(text: str) -> str | None:
    """The number a text written with a decimal comma means (``"0,56"`` → ``"0.56"``), None for any other text.

    Examples
    --------
    >>> decimal_comma_hint("-0,5"), decimal_comma_hint("abc")
    ('-0.5', None)
    """
    text = str(text).strip()
    if not re.fullmatch(r"[+\-\u2212]?\d*,\d+", text):
        return None
    return text.replace(",", ".").replace("\u2212", "-")


def quoted(value, limit: int = QUOTE_MAX) -> str:
    """``repr`` of a user's value for a message, cut to ``limit`` characters with its length said.

    Examples
    --------
    >>> quoted("film")
    "'film'"
    >>> quoted("x" * 5000)
    "'xxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxx'… (5000 characters)"
    """
    text = value if isinstance(value, str) else str(value)
    if len(text) <= limit:
        return repr(value)
    return f"{text[:limit]!r}… ({len(text)} characters)"


#: where a level or gap read as hartree must land for the hint to be offered [eV]: real film HOMOs, LUMOs and optical
#: gaps of organic semiconductors (from memory; an adversarial check: LUMO −0.45 beside a HOMO of −5.4 eV was told to
#: be −12.25 eV)
HARTREE_HOMO_EV, HARTREE_LUMO_EV, HARTREE_GAP_EV = (-9.0, -4.0), (-5.5, -1.5), (0.5, 5.0)


def hartree_hint(value: float, low: float, high: float) -> str:
    """How to write ``value`` if it was given in hartree: when ``value`` × 1 Eh lies in (``low``, ``high``) eV,
    where the level or gap it stands for lies ('' otherwise).

    Examples
    --------
    >>> hartree_hint(-0.2, *HARTREE_HOMO_EV)
    '-0.2 looks like hartree: write -0.2 × 27.2114 = -5.44 eV (1 Eh = 27.2114 eV, CODATA)'
    >>> hartree_hint(-1.5, *HARTREE_HOMO_EV), hartree_hint(-0.45, *HARTREE_LUMO_EV)
    ('', '')
    """
    from screen.constants import HARTREE_EV  # CODATA through scipy.constants; loaded only for this message

    ev = value * HARTREE_EV
    if not low < ev < high:
        return ""
    return (f"{fmt_value(value)} looks like hartree: write {fmt_value(value)} × {HARTREE_EV:.4f} = {ev:.2f} eV "
            f"(1 Eh = {HARTREE_EV:.4f} eV, CODATA)")


def _unit_slip_levels(homo: float, lumo: float, gap: float, film: bool) -> list:
    """Levels no material has, between the vacuum level and :data:`HOMO_MAX_EV` (HOMO) or :data:`FILM_LUMO_MAX_EV`
    (film LUMO): a unit slip, most often hartree (an API audit: HOMO −0.2, LUMO −0.14 and gap 0.05 passed every
    check and were ranked); then a gap below :data:`HARTREE_GAP_MAX_EV` too. ``(column, value, message)`` triples.

    Examples
    --------
    >>> [p[0] for p in _unit_slip_levels(-0.2, -0.14, 0.05, True)]
    ['homo_ev', 'lumo_ev', 'gap_opt_ev']
    >>> _unit_slip_levels(-5.8, -0.5, 2.9, False)  # a gas-scale LUMO of -0.5 eV is real (EA 0.5 eV)
    []
    >>> print(_unit_slip_levels(-5.4, -0.14, 1.5, True)[0][2])
    a film LUMO of -0.14 eV is no organic semiconductor's (no organic semiconductor's film LUMO lies above -1 eV; wide-gap hosts reach about -1.5 eV); -0.14 looks like hartree: write -0.14 × 27.2114 = -3.81 eV (1 Eh = 27.2114 eV, CODATA)
    """
    out = []
    homo_slip = math.isfinite(homo) and HOMO_MAX_EV < homo <= 0
    if homo_slip:
        hint = hartree_hint(homo, *HARTREE_HOMO_EV) or "check the units (eV) and the sign"
        out.append(("homo_ev", homo, f"a HOMO of {fmt_value(homo)} eV is no material's (HOMO = -IP: film HOMOs of organic "
                                     f"semiconductors lie at about -4.5...-7 eV, deep acceptors lower); {hint}"))
    if math.isfinite(lumo) and HOMO_MAX_EV < lumo <= 0 and (homo_slip or (film and lumo > FILM_LUMO_MAX_EV)):
        hint = hartree_hint(lumo, *HARTREE_LUMO_EV) or "check the units (eV) and the sign"
        said = ("beside this HOMO" if homo_slip else
                "(no organic semiconductor's film LUMO lies above -1 eV; wide-gap hosts reach about -1.5 eV)")
        out.append(("lumo_ev", lumo, f"a {'film ' if film else ''}LUMO of {fmt_value(lumo)} eV is no organic "
                                     f"semiconductor's {said}; {hint}"))
    if out and math.isfinite(gap) and 0 < gap < HARTREE_GAP_MAX_EV:
        hint = hartree_hint(gap, *HARTREE_GAP_EV) or "check the units (eV)"
        out.append(("gap_opt_ev", gap, f"an optical gap of {fmt_value(gap)} eV is no organic absorber's (about 0.6 eV "
                                       f"and up); {hint}"))
    return out


def row_problems(homo: float, lumo: float, gap: float, scale: str, sigmas: dict | None = None,
                 deficit: bool = True, typed: bool = True) -> list:
    """Problems of one material's levels: ``(column, value, message)`` triples ([] if sane).

    NaN values are not problems here (the ranking marks them ``input_missing``).
    ``deficit=False`` skips the film-scale check of an optical gap far below LUMO − HOMO. ``typed=False`` (levels
    computed by dascreen) skips the unit-slip check of levels in hartree: a computed film LUMO of −0.8 eV (furan)
    is a small molecule outside the screen, not a slip (a review: it was called inconsistent, a computed partner
    refused).

    Examples
    --------
    >>> [p[0] for p in row_problems(-3.9, -5.4, 1.5, "film")]
    ['homo_ev']
    >>> row_problems(-5.4, -3.9, 650.0, "film")[0][2]
    'an optical gap must be in eV; 650 looks like a wavelength in nm: write 1239.84/650 = 1.91 eV'
    >>> row_problems(-5.0, -5.0, 1.5, "film")[0][2][:39]
    'HOMO and LUMO are equal (-5): that is a'
    >>> row_problems(-5.4, -3.6, 1.6, "film", {"homo_sigma_ev": 50.0})[0][2]
    'an uncertainty must lie in 0-1 eV (measured values carry about 0.01-0.1 eV); 50 looks like millielectronvolts: write 0.05 eV'
    """
    out = []
    film = str(scale).strip().lower() != "gas"
    if math.isfinite(homo) and homo > 0:
        out.append(("homo_ev", homo, f"HOMO is given as a positive ionisation energy; write it as {fmt_value(-homo)} "
                                     "(vacuum scale, HOMO = -IP < 0)"))
    if math.isfinite(lumo) and lumo > 0 and film:
        out.append(("lumo_ev", lumo, f"LUMO is given as a positive electron affinity; write it as {fmt_value(-lumo)} "
                                     "(vacuum scale, LUMO = -EA < 0 on the film scale)"))
    for col, val in (("homo_ev", homo), ("lumo_ev", lumo)):
        if math.isfinite(val) and val < LEVEL_MIN_EV:
            out.append((col, val, f"{val:g} eV is not a frontier level; levels are in eV (not meV or kJ/mol), "
                                  "e.g. -5.3"))
    if not out and typed:
        out += _unit_slip_levels(homo, lumo, gap, film)
    if math.isfinite(homo) and math.isfinite(lumo) and not out and abs(homo - lumo) <= _ROUND_EV:
        out.append(("homo_ev", homo, f"HOMO and LUMO are equal ({fmt_value(homo)}): that is a zero transport gap, which "
                                     "no organic semiconductor has, so one value was probably copied into both "
                                     "columns; write HOMO = -IP and LUMO = -EA, the LUMO above the HOMO (e.g. "
                                     "-5.3 and -3.6)"))
    elif math.isfinite(homo) and math.isfinite(lumo) and not out and homo > lumo:
        out.append(("homo_ev", homo, f"HOMO ({fmt_value(homo)}) is above LUMO ({fmt_value(lumo)}): the two columns look "
                                     "swapped; write the deeper (more negative) level as HOMO"))
    if math.isfinite(gap) and not any(col == "gap_opt_ev" for col, _, _ in out):
        if gap <= 0:
            out.append(("gap_opt_ev", gap, "the optical gap must be positive; write the absorption onset energy in "
                                           "eV, e.g. 1.6"))
        elif gap > GAP_MAX_INPUT_EV:
            out.append(("gap_opt_ev", gap, f"an optical gap must be in eV; {nm_hint(gap)}"))
        elif math.isfinite(homo) and math.isfinite(lumo) and not out:
            if gap > lumo - homo + GAP_EXCESS_TOL_EV + _ROUND_EV:
                out.append(("gap_opt_ev", gap, f"the optical gap ({fmt_value(gap)} eV) exceeds LUMO - HOMO "
                                               f"({fmt_value(lumo - homo)} eV) by more than {GAP_EXCESS_TOL_EV} eV; check "
                                               "the gap (absorption onset in eV) or the levels"))
            elif deficit and film and gap < lumo - homo - GAP_DEFICIT_MAX_EV - _ROUND_EV:
                out.append(("gap_opt_ev", gap, f"the optical gap ({fmt_value(gap)} eV) is more than "
                                               f"{GAP_DEFICIT_MAX_EV} eV below LUMO - HOMO ({fmt_value(lumo - homo)} eV), "
                                               "more than an exciton binding energy in a film; check the gap "
                                               "(absorption onset in eV) or the levels"))
    for col, val in (sigmas or {}).items():
        problem = sigma_problem(val)
        if problem:
            out.append((col, val, problem))
    return out


def sigma_problem(val: float, computed: bool = False, calibration: str = "") -> str:
    """Why a one-σ uncertainty [eV] cannot be used ('' if it can; NaN is empty = 0).

    A typed σ lies in 0–:data:`SIGMA_MAX_EV`. A run's own σ (``computed``) may exceed that far from the
    calibration's reference rows (the gas-scale EA model's σ is about 1.07 eV at zero similarity), so only a
    negative or non-finite one and one from :data:`_SIGMA_MEV_FROM` up (no calibration gives 10 eV; a σ in meV
    does) are refused there. Such a σ comes from a broken calibration (``calibration``: its folder, when known)
    or a hand edit: the message names the calibration first (a custom-calibration audit: "write 0.653 eV" was the
    only advice for a value the calibration had computed).

    Examples
    --------
    >>> sigma_problem(0.1), sigma_problem(1.07, computed=True), sigma_problem(float("nan"))
    ('', '', '')
    >>> sigma_problem(1.07)
    'an uncertainty must lie in 0-1 eV (measured values carry about 0.01-0.1 eV); give the one-sigma uncertainty in eV, e.g. 0.1'
    >>> print(sigma_problem(50.0, computed=True, calibration="/lab/models/p-1"))  # doctest: +NORMALIZE_WHITESPACE
    a σ of 50 eV is no calibration's (a run's own σ stays below 10 eV): the calibration in /lab/models/p-1 gave an
    implausible value; refit it (`dascreen calibrate`, reference levels in eV) or run with the shipped calibration
    (edited by hand? 50 looks like millielectronvolts: 0.05 eV)
    """
    if math.isnan(val):
        return ""
    if not math.isfinite(val) or val < 0:
        return "an uncertainty must be a finite number >= 0 (empty = 0)"
    if computed:
        if val < _SIGMA_MEV_FROM:
            return ""
        which = f"the calibration in {calibration}" if calibration else "the calibration that scored these levels"
        return (f"a σ of {val:g} eV is no calibration's (a run's own σ stays below {_SIGMA_MEV_FROM:g} eV): {which} "
                "gave an implausible value; refit it (`dascreen calibrate`, reference levels in eV) or run with the "
                f"shipped calibration (edited by hand? {val:g} looks like millielectronvolts: {val / 1000:.3g} eV)")
    if val > SIGMA_MAX_EV:
        hint = (f"{val:g} looks like millielectronvolts: write {val / 1000:.3g} eV" if val >= _SIGMA_MEV_FROM
                else "give the one-sigma uncertainty in eV, e.g. 0.1")
        return f"an uncertainty must lie in 0-{SIGMA_MAX_EV:g} eV (measured values carry about 0.01-0.1 eV); {hint}"
    return ""


def scoring_calibration(source) -> str:
    """The calibration folder a run's levels file ``source`` records in its sidecar (``<source>.meta.json``:
    ``calibration_models.folder``, else ``models``); '' when there is none to read.

    Examples
    --------
    >>> scoring_calibration("/no/such/levels.csv")
    ''
    """
    import json
    from pathlib import Path

    try:
        meta = json.loads(Path(f"{source}.meta.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return ""
    if not isinstance(meta, dict):
        return ""
    cal = meta.get("calibration_models")
    folder = cal.get("folder") if isinstance(cal, dict) else None
    return str(folder or meta.get("models") or "")


def _number(frame: pd.DataFrame, col: str, source: str, ids, finite: bool = False) -> np.ndarray:
    """A column as floats; text that is not a number (with ``finite``: also ``inf``) is an error naming the
    first offending line."""
    if col not in frame:
        return np.full(len(frame), np.nan)
    raw = frame[col]
    num = pd.to_numeric(raw, errors="coerce")
    text = (num.isna() & raw.notna() & raw.astype(str).str.strip().ne("")).to_numpy()
    bad = text | (np.isinf(num.to_numpy(dtype=float)) if finite else False)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        what = not_a_number(str(raw.iloc[i]), optional=True) if text[i] else \
            "not a finite number; write the value in eV, e.g. -5.3 (leave the cell empty if unknown)"
        shown = quoted(raw.iloc[i]) if text[i] else f"{float(num.iloc[i]):g}"
        raise InputError(f"{source}: line {file_line(frame, i)} (id {quoted(ids[i])}), column {col} = {shown}: {what}")
    return num.to_numpy(dtype=float)


def _text_problems(frame: pd.DataFrame, ids, computed) -> list:
    """``(row, column, value, message)`` of the text columns: empty or repeated ids, scales, acceptor classes and,
    on a user's rows (not ``computed``), roles."""
    out = []
    first: dict[str, int] = {}
    for i, ident in enumerate(ids if "id" in frame else []):
        key = ident.strip()
        if not key:
            out.append((i, "id", ident, "empty; give every row its own id (it names the row in the ranking)"))
        elif key in first:
            out.append((i, "id", ident, f"the same id as line {file_line(frame, first[key])}; give every row its own "
                                        "id (it names the row in the ranking)"))
        else:
            first[key] = i
    if "scale" in frame:
        for i, value in enumerate(frame["scale"].pipe(text_cells)):
            if value.strip().lower() not in _SCALES:
                out.append((i, "scale", value, "allowed: film or gas (CV levels are film)"))
    if "acceptor_class" in frame:
        from screen.devicepars import ACCEPTOR_CLASSES_TEXT, acceptor_class_key

        for i, value in enumerate(frame["acceptor_class"].pipe(text_cells)):
            try:
                acceptor_class_key(value)
            except InputError:
                out.append((i, "acceptor_class", value, f"allowed: {ACCEPTOR_CLASSES_TEXT}"))
    if "role" in frame:
        for i, value in enumerate(frame["role"].pipe(text_cells)):
            if computed[i]:  # a run's own row: a dye of a mixed batch, or a role the ranking flags (role_invalid)
                continue
            role = value.strip().lower()
            if role == "dye":
                out.append((i, "role", value, "a sensitiser dye is screened with `dascreen dyecell`; the "
                                              "donor/acceptor ranking takes donor, acceptor or an empty role"))
            elif role not in _ROLES:
                out.append((i, "role", value, "allowed: donor, acceptor or empty (empty: the role the levels "
                                              "support against the partner)"))
    return sorted(out, key=lambda p: p[0])


def file_line(frame: pd.DataFrame, i: int) -> int:
    """File line of row ``i`` (header = line 1), from the frame's index when it is the file's row number (an
    integer index without repeats; a repeated index, as ``pd.concat([a, a])`` gives, said "line 2 … the same id as
    line 2").

    >>> file_line(pd.DataFrame({"id": ["a", "b"]}, index=[3, 7]), 1), file_line(pd.DataFrame({"id": ["a", "a"]}, index=[0, 0]), 1)
    (9, 3)
    """
    idx = frame.index[i]
    return int(idx) + 2 if isinstance(idx, (int, np.integer)) and frame.index.is_unique else i + 2


#: the text cells of a row that :func:`text_row_problems` holds to :func:`screen.prepare.checks.text_row_problem`
_ROW_TEXT = ("id", "name", "role")


#: a C0 control character, or its Control Pictures symbol (U+2400–U+241F), which the admission rule reads as one
_CONTROL_OR_PICTURE = re.compile("[\x00-\x1f\u2400-\u241f]")


def text_row_problems(frame: pd.DataFrame, ids=None, cells=_ROW_TEXT) -> list:
    r"""``(row, message)`` of the rows of an input table that may not be read at all
    (:func:`screen.prepare.checks.text_row_problem`, the admission rule of the candidate files): a control character
    other than TAB, CR and LF (the outputs quote or replace those) in an id, name or role (a NUL went into the rankings and the SD titles, an ESC sequence to the console), a SMILES
    text longer than the prepare stage reads or of far more heavy atoms than it screens (a 20 000-carbon SMILES in a
    dye file ran for minutes to 14 GB; a 3000-carbon one stalled the report's drawing and the shortlist's 3-D
    embedding). The message names the line, the column and the value (cut to :data:`QUOTE_MAX` characters, its
    control characters escaped) and the fix. Used by :func:`check_levels` and
    :func:`screen.dyecell.checks.check_dye_file`, so that such a file is refused whole.

    Examples
    --------
    >>> f = pd.DataFrame({"id": ["a", "E\x1b[31mRED"], "smiles": ["CCO", "CC"]})
    >>> print(text_row_problems(f)[0][1])  # doctest: +ELLIPSIS
    line 3, column id = 'E\x1b[31mRED': the id 'E\x1b[31mRED' contains U+001B (ESC), a control character; delete it
    >>> text_row_problems(pd.DataFrame({"id": ["big"], "smiles": ["C" * 12000]}))[0][1][:60]
    "line 2 (id 'big'), column smiles = 'CCCCCCCCCCCCCCCCCCCCCCCC"
    """
    from screen.prepare.checks import FULL_CHECK_ATOMS, text_row_problem

    if ids is None:
        ids = frame["id"].pipe(text_cells).to_numpy() if "id" in frame else [""] * len(frame)
    texts = {c: frame[c].pipe(text_cells) for c in cells if c in frame}
    smiles = frame["smiles"].pipe(text_cells) if "smiles" in frame else pd.Series([""] * len(frame), dtype=object)
    # only a row with a control character (or its picture symbol) or a SMILES long enough to hold more heavy atoms
    # than are read in full can fail the rule: the others are not looked at one by one (a re-rank of 10 000 rows)
    suspect = smiles.str.len().to_numpy() > FULL_CHECK_ATOMS
    for column in texts.values():
        suspect |= column.str.contains(_CONTROL_OR_PICTURE).to_numpy()
    texts = {c: v.to_numpy() for c, v in texts.items()}
    smiles = smiles.to_numpy()
    out = []
    for i in np.flatnonzero(suspect):
        col, why = text_row_problem({c: v[i] for c, v in texts.items()}, smiles[i], line_breaks=True)
        if not col:
            continue
        value = texts[col][i] if col in texts else smiles[i]
        named = f" (id {quoted(ids[i])})" if col != "id" else ""
        fix = "; give the structure meant, or leave the smiles cell empty" if col == "smiles" else ""
        out.append((i, f"line {file_line(frame, i)}{named}, column {col} = {quoted(value)}: {why}{fix}"))
    return out


def check_levels(frame: pd.DataFrame, source: str = "levels table", computed=None, calibration: str | None = None
                 ) -> None:
    """Refuse a levels table with impossible levels (see the module docstring).

    Parameters
    ----------
    frame : pandas.DataFrame
        The rows to be ranked (their index = row number in the file, as read).
    source : str
        File name for the message.
    computed : array_like of bool, optional
        Rows of a run's own levels (a raw ``xtb_ip_ev`` value; default none). Every row is refused for what
        would corrupt its numbers: an empty or repeated id, a number that is not finite, a scale other than film
        or gas, an acceptor class that is none of the classes, a negative σ or one in meV. A run's own row may
        hold what the calibration legitimately gives: levels outside its domain (the ranking marks the row
        ``levels_inconsistent``, not viable, instead of refusing the run's output), a σ above
        :data:`SIGMA_MAX_EV` (:func:`sigma_problem`), a role ``dye`` of a mixed batch (or another role the
        ranking flags ``role_invalid``).
    calibration : str, optional
        The calibration folder that scored the computed rows, named in the message of a σ no calibration gives
        (default: the one ``source``'s sidecar records, :func:`scoring_calibration`).

    Raises
    ------
    InputError
        Naming the file, line, id, column, value and the fix; the number of
        problems and the first five of them in one message.

    Examples
    --------
    >>> lv = pd.DataFrame({"id": ["a", "a"], "homo_ev": [-5.4, -6.2], "lumo_ev": [-3.6, -1.8],
    ...                    "gap_opt_ev": [1.6, 4.9], "scale": "film", "homo_sigma_ev": [0.1, 50.0]})
    >>> check_levels(lv, "levels.csv", computed=[True, True])
    Traceback (most recent call last):
    ...
    screen.errors.InputError: levels.csv: 2 problems:
      line 3, column id = 'a': the same id as line 2; give every row its own id (it names the row in the ranking)
      line 3 (id 'a'), column homo_sigma_ev = 50: a σ of 50 eV is no calibration's (a run's own σ stays below 10 eV): the calibration that scored these levels gave an implausible value; refit it (`dascreen calibrate`, reference levels in eV) or run with the shipped calibration (edited by hand? 50 looks like millielectronvolts: 0.05 eV)
    """
    ids = (frame["id"].pipe(text_cells).to_numpy() if "id" in frame
           else np.array([str(i) for i in range(len(frame))]))
    computed = (np.zeros(len(frame), dtype=bool) if computed is None
                else np.broadcast_to(np.asarray(computed, dtype=bool), (len(frame),)))
    homo, lumo, gap = (_number(frame, c, source, ids, finite=True) for c in ("homo_ev", "lumo_ev", "gap_opt_ev"))
    sig = {c: _number(frame, c, source, ids) for c in _SIGMAS if c in frame}
    scale = frame["scale"].astype(str).to_numpy() if "scale" in frame else np.full(len(frame), "film")
    found = [(i, f"line {file_line(frame, i)}" + (f" (id {quoted(ids[i])})" if col != "id" else "") + f", column {col} "
                 f"= {quoted(value)}: {msg}") for i, col, value, msg in _text_problems(frame, ids, computed)]
    # a row with a control character or a structure too large to read: refused as the candidate files refuse it
    found += text_row_problems(frame, ids)
    for i in range(len(frame)):
        if computed[i]:  # levels outside the calibration's domain: the ranking's flag levels_inconsistent
            problems = [(c, s[i], sigma_problem(s[i], computed=True)) for c, s in sig.items()]
            if any(p[2] for p in problems):  # a σ no calibration gives: name the one that scored the file
                calibration = scoring_calibration(source) if calibration is None else calibration
                problems = [(c, v, sigma_problem(v, computed=True, calibration=calibration)) for c, v, _ in problems]
            problems = [p for p in problems if p[2]]
        else:
            problems = row_problems(homo[i], lumo[i], gap[i], scale[i], {c: s[i] for c, s in sig.items()})
        for col, val, msg in problems:
            found.append((i, f"line {file_line(frame, i)} (id {quoted(ids[i])}), column {col} = {val:g}: {msg}"))
    raise_problems(source, [text for _, text in sorted(found, key=lambda p: p[0])])


def raise_problems(where: str, problems: list[str]) -> None:
    """Raise one :class:`InputError` for the problems of a file: ``WHERE: the problem``, or ``WHERE: N problems
    (first 5 shown):`` and one problem a line (:func:`screen.launch.failure_cause` reads that head); nothing when
    ``problems`` is empty. The one message of the levels, dye and reference-file checks.

    Examples
    --------
    >>> raise_problems("f.csv", [f"line {n}: bad" for n in range(2, 9)])
    Traceback (most recent call last):
    ...
    screen.errors.InputError: f.csv: 7 problems (first 5 shown):
      line 2: bad
      line 3: bad
      line 4: bad
      line 5: bad
      line 6: bad
    """
    if not problems:
        return
    more = f" (first {_MAX_LISTED} shown)" if len(problems) > _MAX_LISTED else ""
    head = problems[0] if len(problems) == 1 else f"{len(problems)} problems{more}:\n  " + "\n  ".join(
        problems[:_MAX_LISTED])
    raise InputError(f"{where}: {head}")


def inconsistent_rows(frame: pd.DataFrame) -> np.ndarray:
    """Rows of a levels table computed by dascreen whose levels fail :func:`row_problems`.

    The run's own levels are never refused as a file: a molecule outside what the
    calibration covers (e.g. a tiny molecule whose calibrated optical gap exceeds its
    film transport gap) is marked not viable by the ranking instead
    (flag ``levels_inconsistent``).

    Examples
    --------
    >>> lv = pd.DataFrame({"homo_ev": [-5.4, -6.0], "lumo_ev": [-3.6, -2.0], "gap_opt_ev": [1.6, 4.8],
    ...                    "scale": ["film", "film"]})
    >>> inconsistent_rows(lv).tolist()
    [False, True]
    """
    num = {c: (pd.to_numeric(frame[c], errors="coerce").to_numpy(dtype=float) if c in frame
               else np.full(len(frame), np.nan)) for c in ("homo_ev", "lumo_ev", "gap_opt_ev")}
    scale = frame["scale"].astype(str).to_numpy() if "scale" in frame else np.full(len(frame), "film")
    return np.array([bool(row_problems(num["homo_ev"][i], num["lumo_ev"][i], num["gap_opt_ev"][i], scale[i],
                                       deficit=False, typed=False)) for i in range(len(frame))], dtype=bool)


def check_partner(partner) -> None:
    """Refuse a partner (:class:`screen.partners.Partner`) with impossible levels, naming its source.

    Raises
    ------
    InputError
        e.g. ``partner 'mine' (file acc.csv), column homo_ev = 5.9: HOMO is given as …``.
    """
    # σ typed by a person (a file or the library) is checked; a computed partner's σ (smiles:, id:) comes from the
    # calibration, which may exceed SIGMA_MAX_EV for an exotic molecule on the gas scale (EA σ ≈ 1.07 eV at zero
    # similarity) and is not a unit slip
    typed = getattr(partner, "kind", "file") in ("file", "library")
    sig = {c: float(getattr(partner, c, 0.0) or 0.0) for c in _SIGMAS} if typed else {}
    problems = row_problems(float(partner.homo_ev), float(partner.lumo_ev), float(partner.gap_opt_ev), partner.scale,
                            sig, typed=typed)
    if problems:
        where = f"{partner.kind} {partner.spec}" if getattr(partner, "spec", "") else partner.kind
        col, val, msg = problems[0]
        raise InputError(f"partner {quoted(partner.id)} ({where}), column {col} = {val:g}: {msg}")
