"""Plausibility of the calibration reference sets, checked when they are read (:func:`check_reference_set`).

A second lab that adds its own rows to a copy of ``models/reference/`` and refits
(``dascreen calibrate --from-raw … --reference MYREF``) gets every row checked before any
work: a value that no material has (levels in meV, an optical gap in nm, a HOMO written as
a positive ionisation energy, a ferrocene level without its minus sign or as the name of an
electrode), a cell that is not a number (``n/a``, a decimal comma), LUMO below HOMO, an
optical gap above LUMO − HOMO, a SMILES the prepare stage cannot use, one structure twice
in a set, a row without its source. Read with ``errors="coerce"`` such a value was dropped
or fitted as it stood, and the calibration was written with exit code 0 (an audit: levels
in millivolts gave a film HOMO model with an intercept of −77 eV).

The file is refused with one :class:`~screen.errors.InputError` (exit code 2) naming the
file, the line (as a spreadsheet shows it, header = line 1), the column, the value and the
fix, in the words of the levels-file checks (:mod:`screen.levels_check`,
:mod:`screen.dyecell.checks`). The windows below are wide on purpose: they refuse slips,
not unusual materials, and every row of the shipped files passes.

Rows with a non-empty ``exclude_reason`` are not fitted, so only their structure and source
are checked; empty numeric cells stay allowed where a row may lack the value (a film
row's level or optical gap, ``fc_reference_ev``, a dye's E₀₋₀); the value of a gas-phase
or series row is required (an empty one stopped the IP fit with a traceback or was dropped
without a word).

Examples
--------
>>> film = pd.DataFrame({"name": ["KF"], "smiles": ["c1ccsc1"], "homo_ev": ["-5350"], "lumo_ev": ["-3.40"],
...                      "gap_opt_ev": ["1.95"], "fc_reference_ev": ["-4.8"], "source": ["lab"]})
>>> check_reference_set("film", film, "levels_film.csv")
Traceback (most recent call last):
...
screen.errors.InputError: reference file levels_film.csv: line 2 (name 'KF'), column homo_ev = -5350: -5350 eV is not a frontier level; levels are in eV (not meV or kJ/mol), e.g. -5.3; -5350 looks like millielectronvolts: write -5.35 eV
>>> fc_problem(4.8)
'the ferrocene level on the vacuum scale is negative; write -4.8'
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from screen.chem import canonical
from screen.levels_check import fmt_value as _g
from screen.levels_check import (HC_EV_NM, decimal_comma_hint, e00_problem, file_line, hartree_hint, mv_hint,
                                 nm_hint, not_a_number, quoted, raise_problems, row_problems)

__all__ = ["DERIVED_LEVELS", "IP_GAS_RANGE_EV", "EA_GAS_RANGE_EV", "OPTICAL_GAP_RANGE_EV", "FILM_HOMO_RANGE_EV", "FILM_LUMO_RANGE_EV",
           "FC_REFERENCE_RANGE_EV", "KINDS", "PHASES", "check_reference_set", "reference_problems",
           "gas_value_problem", "film_level_problems", "fc_problem"]

#: values of the film set's ``derived_level`` column besides empty (both levels measured)
DERIVED_LEVELS = ("homo", "lumo")
#: accepted gas-phase ionisation energy [eV]: organic molecules lie at about 6–11 eV (the shipped set 6.6–9.6 eV;
#: small saturated molecules up to ~13 eV, strong π donors such as tetrathiafulvalene ~6.4 eV; from memory); 5 eV
#: and 15 eV keep a wide margin (IP = −HOMO > 0)
IP_GAS_RANGE_EV = (5.0, 15.0)
#: accepted gas-phase electron affinity [eV]: negative for a temporary (unbound) anion, ETS attachment energies of
#: conjugated molecules reach about −2 eV (benzene −1.13 eV in the shipped set), strong cyano acceptors about
#: 3–3.5 eV (the shipped set −1.13…3.38 eV); no element exceeds chlorine's 3.61 eV (from memory); margins each side
EA_GAS_RANGE_EV = (-3.0, 4.5)
#: accepted optical gap (absorption onset, maximum or 0-0 energy) [eV]: organic absorbers lie at about 1–6 eV (the
#: shipped sets 1.24–5.37 eV; narrow-gap polymers ~1 eV, benzene's S1 origin 4.72 eV, thiophene's band 5.4 eV;
#: from memory / the shipped rows); 0.5 eV (2480 nm) and 7 eV (177 nm) keep a margin
OPTICAL_GAP_RANGE_EV = (0.5, 7.0)
#: accepted film (CV, UPS) HOMO [eV]: organic semiconductors lie at about −4.5…−7 eV (:mod:`screen.levels_check`;
#: the shipped set −6.1…−4.9 eV; deep hole-blocking hosts near −7 eV, from memory); 0.5–1 eV margin
FILM_HOMO_RANGE_EV = (-8.0, -4.0)
#: accepted film LUMO [eV]: OPV materials lie at about −2…−4.5 eV (the shipped set −4.23…−2.65 eV); wide-gap hosts
#: reach about −1.5 eV and strong p-dopants (F4-TCNQ, film EA ≈ 5.2 eV) about −5.2 eV (from memory); the upper
#: end is :data:`screen.levels_check.FILM_LUMO_MAX_EV`
FILM_LUMO_RANGE_EV = (-6.0, -1.0)
#: accepted ``fc_reference_ev`` [eV], the Fc⁺/Fc level on the vacuum scale assumed in converting CV potentials:
#: −4.8 eV (Pommerehne et al., Adv. Mater. 7 (1995) 551) and −5.1 eV (Cardona et al., Adv. Mater. 23 (2011) 2367,
#: :doi:`10.1002/adma.201004554`) are the common values, others in use lie between (citations from memory); the window
#: as the shipped files' test (``tests/test_reference_data.py``)
FC_REFERENCE_RANGE_EV = (-5.2, -4.6)
#: oxidation potentials of organic semiconductors vs Fc⁺/Fc lie at about 0–1.5 V, reduction potentials at about
#: −0.5…−2 V (common practice): a "HOMO" in (0, this] or a "LUMO" in [−this, 0) beside it is a potential [V]
_POTENTIAL_MAX_V = 2.5
#: ``kind`` and ``phase`` of an optical row as the gap model reads them (:mod:`screen.calibration.optical`: only
#: ``maximum`` is an absorption maximum and only ``film`` a film value, exactly as written)
KINDS = ("onset", "maximum", "0-0")
PHASES = ("gas", "solution", "film")
#: the value column of each set and what it holds
_VALUE = {"ip": ("value_ev", "ip"), "ea": ("value_ev", "ea"), "gap_opt": ("value_ev", "gap"),
          "series": ("value_ev", "gap"), "dyes": ("e00_ev", "e00")}
#: sets whose ``source`` is checked (the dye file belongs to the dye-cell mode; only its name, smiles, e00_ev
#: and exclude_reason are used, and hashed, here)
_SOURCED = ("ip", "ea", "gap_opt", "film", "series")
#: columns that tell two rows of one structure apart as different measurements, per set (see :func:`_duplicates`)
_CONDITIONS = {"series": ("kind", "phase", "solvent")}
#: the columns that hold a reference value (a row with one of them filled is a data row)
_VALUE_COLUMNS = ("value_ev", "homo_ev", "lumo_ev", "gap_opt_ev", "e00_ev")
#: what each set's value is, for the messages
_EXAMPLE = {"ip": "7.4", "ea": "1.1", "gap": "2.1", "e00": "2.1"}


def gas_value_problem(what: str, value: float) -> str | None:
    """Why a gas-phase IP (``ip``), EA (``ea``) or an optical gap (``gap``) [eV] is no material's (None if plausible).

    Examples
    --------
    >>> gas_value_problem("ip", 7.4) is None, gas_value_problem("ip", -7.4)
    (True, 'an ionisation energy is positive (IP = -HOMO); write 7.4')
    >>> gas_value_problem("gap", 636.0)
    'an optical gap must lie in 0.5...7 eV (organic absorbers about 1-6 eV); 636 looks like a wavelength in nm: write 1239.84/636 = 1.95 eV'
    >>> gas_value_problem("ea", -3.4)
    'a gas-phase electron affinity must lie in -3...4.5 eV (unbound anions down to about -2 eV, strong acceptors up to about 3.5 eV); EA = -LUMO: if -3.4 is a LUMO, write 3.4'
    """
    if not math.isfinite(value):
        return None
    if what == "ip":
        (lo, hi), said = IP_GAS_RANGE_EV, ("a gas-phase ionisation energy must lie in {} eV (organic molecules about "
                                           "6-11 eV)")
    elif what == "ea":
        (lo, hi), said = EA_GAS_RANGE_EV, ("a gas-phase electron affinity must lie in {} eV (unbound anions down to "
                                           "about -2 eV, strong acceptors up to about 3.5 eV)")
    else:
        (lo, hi), said = OPTICAL_GAP_RANGE_EV, "an optical gap must lie in {} eV (organic absorbers about 1-6 eV)"
    if lo <= value <= hi:
        return None
    if what in ("ip", "gap") and value < 0 and lo <= -value <= hi:
        return ("an ionisation energy is positive (IP = -HOMO); write " if what == "ip" else
                "an excitation energy is positive; write ") + _g(-value)
    hint = None
    if what == "gap" and value >= 100.0 and lo <= HC_EV_NM / value <= hi:
        hint = nm_hint(value)
    elif abs(value) >= 100.0:
        hint = mv_hint(value, "eV")
    elif what == "ea" and value < lo and -value <= hi:
        hint = f"EA = -LUMO: if {_g(value)} is a LUMO, write {_g(-value)}"
    elif what == "ip" and 0 < value < lo:
        hint = hartree_hint(value, lo, hi) or None
    return f"{said.format(f'{lo:g}...{hi:g}')}; {hint or 'check the units (eV) and the sign'}"


def fc_problem(value: float) -> str | None:
    """Why an ``fc_reference_ev`` [eV] is not a ferrocene level on the vacuum scale (None if it is one, or NaN).

    Examples
    --------
    >>> fc_problem(-4.8) is None, fc_problem(-5.1) is None
    (True, True)
    >>> fc_problem(-4.4)
    'fc_reference_ev is the Fc+/Fc level on the vacuum scale (-4.8 or -5.1 eV in use; accepted -5.2...-4.6 eV); -4.4 eV is about the level of SCE (NHE -4.44 eV), not of ferrocene: give the ferrocene level the conversion implies'
    """
    lo, hi = FC_REFERENCE_RANGE_EV
    if not math.isfinite(value) or lo <= value <= hi:
        return None
    if value > 0 and lo <= -value <= hi:
        return f"the ferrocene level on the vacuum scale is negative; write {_g(-value)}"
    if abs(value) >= 100.0:
        hint = mv_hint(value, "eV")
    elif -4.6 < value <= -4.2:
        hint = (f"{_g(value)} eV is about the level of SCE (NHE -4.44 eV), not of ferrocene: give the ferrocene "
                "level the conversion implies")
    elif abs(value) <= _POTENTIAL_MAX_V:
        hint = (f"{_g(value)} looks like a potential in V against an electrode, not a level in eV: give the "
                "vacuum-scale energy assumed for Fc+/Fc (e.g. -4.8)")
    else:
        hint = "check the value (eV, negative)"
    return (f"fc_reference_ev is the Fc+/Fc level on the vacuum scale (-4.8 or -5.1 eV in use; accepted "
            f"{lo:g}...{hi:g} eV); {hint}")


def film_level_problems(homo: float, lumo: float, gap: float, fc: float = float("nan")) -> list:
    """Problems of one film row's HOMO, LUMO and optical gap [eV]: ``(column, value, message)`` triples.

    The checks of a levels file (:func:`screen.levels_check.row_problems`: a positive HOMO, levels in meV or
    hartree, LUMO below HOMO, a gap in nm, a gap above LUMO − HOMO + :data:`screen.levels_check.GAP_EXCESS_TOL_EV`
    or far below it), a HOMO that is an oxidation potential vs Fc⁺/Fc, then the windows
    :data:`FILM_HOMO_RANGE_EV`, :data:`FILM_LUMO_RANGE_EV` and :data:`OPTICAL_GAP_RANGE_EV`. NaN is not a problem.

    Examples
    --------
    >>> film_level_problems(-5.35, -3.40, 1.95)
    []
    >>> [c for c, _, _ in film_level_problems(-3.40, -5.35, 1.95)]
    ['homo_ev']
    >>> print(film_level_problems(0.55, -1.40, 1.95, -4.8)[0][2])
    a HOMO of 0.55 eV is no material's; 0.55 looks like an oxidation potential in V vs Fc+/Fc: write HOMO = -4.8 - 0.55 = -5.35 eV (the Fc+/Fc level in fc_reference_ev)
    """
    fc_used = fc if math.isfinite(fc) else -4.8
    if math.isfinite(homo) and 0 < homo <= _POTENTIAL_MAX_V:
        out = [("homo_ev", homo, f"a HOMO of {_g(homo)} eV is no material's; {_g(homo)} looks like an oxidation "
                                 f"potential in V vs Fc+/Fc: write HOMO = {_g(fc_used)} - {_g(homo)} = "
                                 f"{fc_used - homo:.2f} eV (the Fc+/Fc level in fc_reference_ev)")]
        if math.isfinite(lumo) and -_POTENTIAL_MAX_V <= lumo < 0:
            out.append(("lumo_ev", lumo, f"beside this HOMO, {_g(lumo)} looks like a reduction potential in V vs "
                                         f"Fc+/Fc: write LUMO = {_g(fc_used)} - ({_g(lumo)}) = "
                                         f"{fc_used - lumo:.2f} eV"))
        return out
    out = []
    for col, val, msg in row_problems(homo, lumo, gap, "film"):
        mv = mv_hint(val, "eV") if col != "gap_opt_ev" and abs(val) >= 100.0 else None
        out.append((col, val, f"{msg}; {mv}" if mv else msg))
    said = {c for c, _, _ in out}
    for col, val, (lo, hi), what in (("homo_ev", homo, FILM_HOMO_RANGE_EV, "film HOMOs of organic semiconductors "
                                      "lie at about -4.5...-7 eV"),
                                     ("lumo_ev", lumo, FILM_LUMO_RANGE_EV, "film LUMOs lie at about -2...-4.5 eV, "
                                      "wide-gap hosts and p-dopants up to -1.5 and -5.2 eV"),
                                     ("gap_opt_ev", gap, OPTICAL_GAP_RANGE_EV, "film absorption onsets of organic "
                                      "semiconductors lie at about 1-3 eV")):
        if col not in said and math.isfinite(val) and not lo <= val <= hi:
            out.append((col, val, f"{_g(val)} eV is outside {lo:g}...{hi:g} eV ({what}); check the units (eV), the "
                                  "sign and the column"))
    return out


def _numbers(frame: pd.DataFrame, col: str, example: str, optional: bool, rows, problems: list) -> np.ndarray:
    """A column of ``frame`` as floats (NaN where empty or bad); a problem for each of ``rows`` that is not a
    finite number or, unless ``optional``, is empty."""
    out = np.full(len(frame), np.nan)
    if col not in frame:
        return out
    text = frame[col].astype(str).str.strip()
    num = pd.to_numeric(text, errors="coerce").to_numpy(dtype=float)  # as the fits read it
    text = text.tolist()
    for i in rows:
        t = text[i]
        if not t:
            if not optional:
                problems.append((i, f"column {col} is empty; give the value in eV (e.g. {example}), or give the row "
                                    "an exclude_reason"))
        elif math.isnan(num[i]) and t.lower() != "nan":
            problems.append((i, f"column {col} = {quoted(t)}: {not_a_number(t, 'eV', example, optional)}"))
        elif not math.isfinite(num[i]):
            problems.append((i, f"column {col} = {quoted(t)}: not a finite number; write the value in eV, e.g. "
                                f"{example}"))
        else:
            out[i] = num[i]
    return out


def _structures(frame: pd.DataFrame, rows, allow_empty: bool, problems: list) -> list[str]:
    """Canonical SMILES of each row ('' where empty or unusable); a problem for a SMILES the prepare stage rejects
    for its structure (unparsable, an attachment point that is no repeat unit's) and, unless ``allow_empty``, for
    an empty one beside a value in a row that is not excluded (a row with neither is a note and is skipped, as
    before)."""

    smiles = frame["smiles"].astype(str).tolist()
    keys = [canonical(s) if s.strip() else "" for s in smiles]
    suspect = [i for i in rows if smiles[i].strip() and (not keys[i] or "*" in smiles[i])]
    if suspect:
        from screen.prepare import PrepareOptions, validate
        from screen.prepare.options import KNOWN_ELEMENTS

        # the structure checks of the prepare stage, without the limits a run's settings choose (elements,
        # charge, size: those are judged when the reference structures are computed)
        lenient = PrepareOptions(max_heavy_atoms=10**6, allowed_elements=tuple(sorted(KNOWN_ELEMENTS)),
                                 allow_charged=True, allow_open_shell=True, allow_charge_separation=True)
        checked = validate(pd.DataFrame({"id": [f"row{i}" for i in suspect],
                                         "smiles_input": [smiles[i] for i in suspect]}), lenient)
        for i, status, error in zip(suspect, checked["status"], checked["error"]):
            if status != "ok":
                why = str(error).split("; allowed elements:")[0] or "RDKit cannot read it"
                problems.append((i, f"column smiles = {quoted(smiles[i])}: the structure cannot be computed ({why}); "
                                    "correct the SMILES (a polymer as one repeat unit with two [*])"))
                keys[i] = ""
    if not allow_empty:  # a row without a structure is skipped (a note line, '# ...'), unless it holds a value
        for i in rows:
            values = [c for c in _VALUE_COLUMNS if c in frame and str(frame[c].iat[i]).strip()]
            if not smiles[i].strip() and values and not str(frame["exclude_reason"].iat[i]).strip():
                problems.append((i, f"column smiles is empty beside a value in {', '.join(values)}: the row would "
                                    "be dropped; give the structure as SMILES (a polymer as one repeat unit with two "
                                    "[*]), or give the row an exclude_reason"))
    return keys


def _duplicates(name: str, frame: pd.DataFrame, keys: list[str], rows, problems: list) -> None:
    """A problem for each structure given more than once among ``rows`` (the fitted rows) of a set.

    One structure is one material: twice in a set it weighs double in the fits and, left out for the
    leave-one-out, it is still fitted through its copy. The size series (``gap_series.csv``) hold one molecule
    measured in several ways by design (pentacene's 0-0 energy in the gas, in solution and its film maximum;
    distyrylbenzene's maximum in two solvents): there rows differ when their kind, phase or solvent differ.
    """
    conditions = [c for c in _CONDITIONS.get(name, ()) if c in frame]
    cells = [frame[c].astype(str).str.strip().tolist() for c in conditions]
    names = frame["name"].astype(str).tolist() if "name" in frame else [""] * len(frame)
    groups: dict[tuple, list[int]] = {}
    for i in rows:
        if keys[i]:
            groups.setdefault((keys[i],) + tuple(c[i] for c in cells), []).append(i)
    for members in groups.values():
        if len(members) > 1:
            lines = [f"{file_line(frame, i)} ({quoted(names[i])})" for i in members]
            said = " and ".join(filter(None, [", ".join(conditions[:-1]), conditions[-1]])) if conditions else ""
            same = "the same structure" + (f" with the same {said}" if said else "")
            problems.append((members[-1], f"lines {', '.join(lines[:-1])} and {lines[-1]}, column smiles: {same}; "
                                          "a material given twice weighs double in the fits and stays in the fit "
                                          "through its copy when left out (leave-one-out); keep one row, or give the "
                                          "others an exclude_reason"))


def reference_problems(name: str, frame: pd.DataFrame) -> list[str]:
    """Problems of one reference set as read (``name`` a key of :data:`screen.calibration.reference.FILES`, cells
    as text, index = row number in the file), in file order; ``[]`` when it can be fitted.

    Examples
    --------
    >>> ip = pd.DataFrame({"name": ["benzene", "x"], "smiles": ["c1ccccc1", "c1ccccc1"], "value_ev": ["9.24", "n/a"],
    ...                    "source": ["NIST", ""], "exclude_reason": ["", ""]})
    >>> for p in reference_problems("ip", ip): print(p)
    line 3 (name 'x'), column value_ev = 'n/a': not a number; write the value in eV, e.g. 7.4
    line 3 (name 'x'), column source is empty; every reference row names where its values come from (paper, data set, or 'own measurement' with the lab and year): fill it in
    lines 2 ('benzene') and 3 ('x'), column smiles: the same structure; a material given twice weighs double in the fits and stays in the fit through its copy when left out (leave-one-out); keep one row, or give the others an exclude_reason
    """
    frame = frame.copy()
    for col in frame.columns:
        frame[col] = frame[col].astype(object).where(frame[col].notna(), "").astype(str)
    if "exclude_reason" not in frame:
        frame["exclude_reason"] = ""
    blank = frame.apply(lambda col: col.str.strip().eq("")).all(axis=1).tolist() if len(frame) else []
    every = [i for i in range(len(frame)) if not blank[i]]
    cell = {c: frame[c].str.strip().tolist() for c in frame.columns}
    fitted = [i for i in every if not cell["exclude_reason"][i]]
    problems: list[tuple[int, str]] = []
    keys = _structures(frame, every, allow_empty=name == "dyes", problems=problems)
    # rows without a structure are not computed (the dye file may list a dye by its potentials only)
    fitted_rows = [i for i in fitted if cell["smiles"][i]]
    if name in _VALUE:
        col, what = _VALUE[name]
        values = _numbers(frame, col, _EXAMPLE[what], optional=name == "dyes", rows=fitted_rows, problems=problems)
        for i in fitted_rows:
            if math.isfinite(values[i]):
                why = e00_problem(float(values[i])) if what == "e00" else gas_value_problem(what, float(values[i]))
                if why:
                    problems.append((i, f"column {col} = {_g(values[i])}: {why}"))
    if name in ("gap_opt", "series"):
        for col, allowed in (("kind", KINDS), ("phase", PHASES)):
            if col not in frame:
                continue
            for i in fitted_rows:
                given = cell[col][i]
                if given not in allowed:
                    fix = (f"write {given.lower()!r} (lower case)" if given.lower() in allowed else
                           "the gap model reads 'maximum' as an absorption maximum and 'film' as a film value, "
                           "exactly as written")
                    problems.append((i, f"column {col} = {quoted(given)}: allowed: {', '.join(allowed)}; {fix}"))
    if name == "film":
        _film(frame, fitted_rows, [i for i in every if cell["smiles"][i]], problems)
    if name in _SOURCED and "source" in frame:
        for i in [i for i in every if cell["smiles"][i]]:
            if not cell["source"][i]:
                problems.append((i, "column source is empty; every reference row names where its values come from "
                                    "(paper, data set, or 'own measurement' with the lab and year): fill it in"))
    _duplicates(name, frame, keys, fitted_rows, problems)

    def where(i: int) -> str:
        label = cell["name"][i] if "name" in cell else ""
        return f"line {file_line(frame, i)}" + (f" (name {quoted(label)})" if label else "")

    return [f"{where(i)}, {text}" if text.startswith("column") else f"{text}"
            for i, text in sorted(problems, key=lambda p: p[0])]


def _film(frame: pd.DataFrame, rows, read, problems: list) -> None:
    """Problems of the film set's levels and ``fc_reference_ev`` (fitted rows ``rows``) and ``derived_level``
    (every row read, excluded or not, as before)."""

    if "derived_level" in frame:
        derived = frame["derived_level"].str.strip().tolist()
        for i in read:
            level = derived[i]
            if level not in ("",) + DERIVED_LEVELS:
                problems.append((i, f"column derived_level: {level!r} is not one of {', '.join(DERIVED_LEVELS)} or "
                                    "empty (the level computed from the other one and the optical gap; empty when "
                                    "both were measured)"))
    fc = np.full(len(frame), np.nan)
    if "fc_reference_ev" in frame:
        text = frame["fc_reference_ev"].str.strip()
        num = pd.to_numeric(text, errors="coerce").to_numpy(dtype=float)
        text = text.tolist()
        for i in rows:
            t = text[i]
            if not t:
                continue
            if math.isnan(num[i]) or not math.isfinite(num[i]):
                comma = decimal_comma_hint(t)
                fix = (f"a decimal comma? write {comma} (eV, with a decimal point)" if comma else
                       "give the energy [eV] of Fc+/Fc on the vacuum scale that was assumed when the CV potentials "
                       "were converted (e.g. -4.8), or leave it empty when the levels are not from CV or that level "
                       "is not stated; the reference electrode (Ag/AgCl, SCE) belongs in method, the levels on the "
                       "vacuum scale")
                problems.append((i, f"column fc_reference_ev = {quoted(t)}: not a number; {fix}"))
                continue
            why = fc_problem(float(num[i]))
            if why:
                problems.append((i, f"column fc_reference_ev = {_g(num[i])}: {why}"))
            else:
                fc[i] = num[i]
    levels = {c: _numbers(frame, c, "-5.3" if c == "homo_ev" else ("-3.6" if c == "lumo_ev" else "1.6"),
                          optional=True, rows=rows, problems=problems) for c in ("homo_ev", "lumo_ev", "gap_opt_ev")}
    bad = {(i, text.split(" = ")[0]) for i, text in problems}
    for i in rows:
        for col, val, msg in film_level_problems(levels["homo_ev"][i], levels["lumo_ev"][i],
                                                 levels["gap_opt_ev"][i], fc[i]):
            if (i, f"column {col}") not in bad:
                problems.append((i, f"column {col} = {_g(val)}: {msg}"))


def check_reference_set(name: str, frame: pd.DataFrame, path) -> None:
    """Refuse a reference set with a value, structure, repeat or source that cannot be fitted.

    Parameters
    ----------
    name : str
        The set (``ip``, ``ea``, ``gap_opt``, ``film``, ``series`` or ``dyes``).
    frame : pandas.DataFrame
        The file as read (cells as text, index = row number in the file).
    path : path-like
        The file, for the message.

    Raises
    ------
    InputError
        ``reference file PATH: line N (name 'X'), column C = V: what is wrong; the fix`` (several problems: their
        number and the first five, one a line).
    """
    raise_problems(f"reference file {path}", reference_problems(name, frame))
