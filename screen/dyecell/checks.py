"""Input sanity of the dye-cell mode: a user's dye file, oxide and mediator files, before anything is ranked.

A value outside what a dye, an oxide or a mediator can have is almost always a
unit or convention slip (a wavelength in nm for E₀₋₀, a vacuum-scale energy in
eV for a potential vs NHE, millivolts for volts, a dropped minus sign).  It
stops the run with an :class:`~screen.errors.InputError` (exit code 2) that
names the file, the line, the column, the value and the fix, in the style of
:mod:`screen.levels_check`.  The bounds are wide on purpose (common practice,
see the constants): they refuse slips, not unusual dyes, which the model marks
*not viable* with the reason.

Vacuum scale: :math:`E_{vac} = -e\\,(E_{NHE} + 4.44\\ \\mathrm{V})` (Trasatti 1986,
:mod:`screen.dyecell.scales`).

Examples
--------
>>> import pandas as pd
>>> bad = pd.DataFrame({"id": ["d1"], "e_ox_v_nhe": [1.1], "e00_ev": [590.0]})
>>> check_dye_file(bad, "my_dyes.csv")
Traceback (most recent call last):
...
screen.errors.InputError: my_dyes.csv: line 2 (id 'd1'), column e00_ev = 590: E00 must be in eV; 590 looks like a wavelength in nm: write 1239.84/590 = 2.1 eV
>>> potential_problem(-4.0, "band_edge_v_nhe", "band_edge_ev")
'band edges of oxides and redox potentials of mediators lie roughly in -1.5...+2 V vs NHE; -4 looks like a vacuum-scale energy in eV, not a potential vs NHE: write band_edge_v_nhe = -(-4) - 4.44 = -0.44 V (or give the value as band_edge_ev = -4)'
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from screen.dyecell.scales import ABSOLUTE_NHE_V, needs_solvent, solvent_conflict, to_nhe
from screen.errors import InputError
from screen.levels_check import (E00_RANGE_EV, decimal_comma_hint, e00_problem, file_line, mv_hint, not_a_number,
                                 raise_problems, text_row_problems)

__all__ = ["E_OX_RANGE_V_NHE", "E00_RANGE_EV", "POTENTIAL_RANGE_V_NHE", "THRESHOLD_RANGE_EV", "SIGMA_MAX",
           "NO_ANCHOR_WORDS", "e_ox_problem", "e00_problem", "potential_problem", "vacuum_problem",
           "threshold_problem", "check_dye_file", "smiles_problem", "unreadable_smiles", "reference_conflict",
           "merge_reference_alias", "extra_fields_problem", "check_field_counts", "anchor_column",
           "decimal_comma_hint"]

#: accepted E(S⁺/S) of a dye [V vs NHE]: organic sensitisers lie roughly in −0.5…+2.5 V (common practice);
#: 0.5 V of margin each side so that an unusual dye is ranked (and marked not viable) rather than refused
E_OX_RANGE_V_NHE = (-1.0, 3.0)
#: accepted band edge of an oxide or redox potential of a mediator [V vs NHE]: they lie roughly in −1.5…+2 V
#: (common practice; anatase TiO₂ CB ≈ −0.5 V, NiO VB ≈ +0.5 V, cobalt and copper complexes +0.4…+1.1 V)
POTENTIAL_RANGE_V_NHE = (-1.5, 2.0)
#: accepted driving-force threshold [eV]: ≥ 0 by definition; above 2 eV no dye of E00_RANGE_EV could meet it.
#: The same bounds hold for a mediator file's ``min_drive_reg_ev`` and for the options ``dyecell.min_drive_inj_ev``
#: and ``dyecell.min_drive_reg_ev`` (:class:`screen.dyecell.model.DyeCellModel`, the config schema)
THRESHOLD_RANGE_EV = (0.0, 2.0)
#: largest accepted one-σ uncertainty of a dye's E(S⁺/S) [V] or E₀₋₀ [eV] (``e_ox_sigma_v``, ``e00_sigma_ev``):
#: measured values carry ~0.01–0.1 V and calibrated ones ~0.1–0.2 V (common practice); a σ of 1 V already spans
#: every organic dye, so a larger one is a unit slip (mV, meV)
SIGMA_MAX = 1.0
#: cells of a dye file's ``anchor`` column that mean "no anchoring group" (case-insensitive); an empty cell
#: means "not stated"
NO_ANCHOR_WORDS = ("none", "no", "false", "0", "-")
#: problems listed in one message at most
_MAX_LISTED = 5


def _g(x: float) -> str:
    return f"{x:.6g}"


def _vacuum_hint(value: float, column: str, ev_column: str = "") -> str | None:
    """A hint when a potential vs NHE looks like a vacuum-scale energy (−3…−8 eV) or one without its sign."""
    if -8.0 <= value <= -3.0:
        alt = f" (or give the value as {ev_column} = {_g(value)})" if ev_column else ""
        return (f"{_g(value)} looks like a vacuum-scale energy in eV, not a potential vs NHE: write "
                f"{column} = -({_g(value)}) - 4.44 = {-value - ABSOLUTE_NHE_V:.2f} V{alt}")
    if 3.0 <= value <= 8.0:
        return (f"{_g(value)} looks like a vacuum-scale energy written without its minus sign (E_vac = "
                f"{_g(-value)} eV): write {column} = -E_vac - 4.44 = {value - ABSOLUTE_NHE_V:.2f} V")
    return None


def e_ox_problem(value: float, column: str = "e_ox_v_nhe") -> str | None:
    """What is wrong with a dye's E(S⁺/S) [V vs NHE] (None if it is plausible; NaN is not checked here).

    Examples
    --------
    >>> e_ox_problem(1.07) is None
    True
    >>> e_ox_problem(-5.5)
    'E(S+/S) must be a potential in V vs NHE (organic dyes lie roughly in -0.5...+2.5 V; accepted -1...+3 V); -5.5 looks like a vacuum-scale energy in eV, not a potential vs NHE: write e_ox_v_nhe = -(-5.5) - 4.44 = 1.06 V'

    """
    lo, hi = E_OX_RANGE_V_NHE
    if not math.isfinite(value) or lo <= value <= hi:
        return None
    hint = mv_hint(value) or _vacuum_hint(value, column) or (
        "check the sign, the units (V) and the reference electrode")
    return (f"E(S+/S) must be a potential in V vs NHE (organic dyes lie roughly in -0.5...+2.5 V; accepted "
            f"{lo:+g}...{hi:+g} V); {hint}")


def potential_problem(value: float, column: str, ev_column: str = "") -> str | None:
    """What is wrong with an oxide band edge or a mediator's redox potential [V vs NHE] (None if plausible).

    Parameters
    ----------
    value : float
        The potential. [V vs NHE]
    column : str
        Column it was given in (for the fix).
    ev_column : str
        The file's vacuum-scale column (``band_edge_ev``, ``e_redox_ev``), offered as the alternative.
    """
    lo, hi = POTENTIAL_RANGE_V_NHE
    if lo <= value <= hi:
        return None
    hint = (mv_hint(value) or _vacuum_hint(value, column, ev_column) or
            "check the sign, the units (V) and the reference electrode")
    return (f"band edges of oxides and redox potentials of mediators lie roughly in {lo:+g}...{hi:+g} V vs NHE; "
            f"{hint}")


def vacuum_problem(value: float, column: str) -> str | None:
    """What is wrong with an oxide or mediator energy on the vacuum scale [eV] (None if plausible).

    Examples
    --------
    >>> vacuum_problem(4.0, "band_edge_ev")
    'vacuum-scale energies are negative (about -3 to -6 eV for oxides and mediators): write band_edge_ev = -4 (= -0.44 V vs NHE)'
    >>> vacuum_problem(-4.0, "band_edge_ev") is None
    True
    """
    lo, hi = (-(POTENTIAL_RANGE_V_NHE[1] + ABSOLUTE_NHE_V), -(POTENTIAL_RANGE_V_NHE[0] + ABSOLUTE_NHE_V))
    if lo <= value <= hi:
        return None
    if value > 0 and lo <= -value <= hi:
        return (f"vacuum-scale energies are negative (about -3 to -6 eV for oxides and mediators): write "
                f"{column} = {_g(-value)} (= {value - ABSOLUTE_NHE_V:.2f} V vs NHE)")
    return (mv_hint(value, "eV") or
            f"{_g(value)} eV is outside {lo:.2f}...{hi:.2f} eV (vacuum scale; {POTENTIAL_RANGE_V_NHE[0]:+g}..."
            f"{POTENTIAL_RANGE_V_NHE[1]:+g} V vs NHE), where oxides and mediators lie; check the sign and units")


def threshold_problem(value: float) -> str | None:
    """What is wrong with a driving-force threshold [eV] (None if plausible).

    Examples
    --------
    >>> threshold_problem(-0.2)
    'a driving-force threshold is >= 0 eV (the smallest downhill step that counts, e.g. 0.2); write 0.2'
    """
    lo, hi = THRESHOLD_RANGE_EV
    if lo <= value <= hi:
        return None
    if value < lo:
        return (f"a driving-force threshold is >= 0 eV (the smallest downhill step that counts, e.g. 0.2)"
                + (f"; write {_g(-value)}" if -value <= hi else ""))
    return mv_hint(value, "eV") or f"{_g(value)} eV is above {hi:g} eV: no dye could meet it; give it in eV, e.g. 0.2"


def _cell(value) -> str:
    return "" if value is None or (isinstance(value, float) and math.isnan(value)) else str(value).strip()


def reference_conflict(values: dict[str, str]) -> str | None:
    """Two reference-electrode columns of one row that disagree (None if at most one distinct value is given).

    Examples
    --------
    >>> reference_conflict({"reference": "SCE", "e_ox_reference": " sce "}) is None
    True
    >>> reference_conflict({"reference": "SCE", "e_ox_reference": "Fc"})
    "columns reference = 'SCE' and e_ox_reference = 'Fc' disagree; keep one of the two columns"
    """
    given = {c: _cell(v) for c, v in values.items() if _cell(v)}
    if len({v.lower() for v in given.values()}) <= 1:
        return None
    shown = " and ".join(f"{c} = {v!r}" for c, v in given.items())
    return f"columns {shown} disagree; keep one of the two columns"


def merge_reference_alias(frame: pd.DataFrame, where: str = "dye file") -> pd.DataFrame:
    """A dye file with the alias column ``reference`` folded into ``e_ox_reference`` (the frame itself if absent).

    Both columns may be present when they agree on every row where both are
    filled; a row where they disagree is refused.

    Examples
    --------
    >>> f = merge_reference_alias(pd.DataFrame({"id": ["a"], "e_ox_v": [0.4], "reference": ["SCE"]}))
    >>> f["e_ox_reference"].tolist(), "reference" in f
    (['SCE'], False)
    >>> merge_reference_alias(pd.DataFrame({"id": ["a"], "reference": ["SCE"], "e_ox_reference": ["Fc"]}), "d.csv")
    Traceback (most recent call last):
    ...
    screen.errors.InputError: d.csv: line 2 (id 'a'): columns reference = 'SCE' and e_ox_reference = 'Fc' disagree; keep one of the two columns
    """
    if "reference" not in frame:
        return frame
    alias = [_cell(v) for v in frame["reference"]]
    main = [_cell(v) for v in frame["e_ox_reference"]] if "e_ox_reference" in frame else [""] * len(frame)
    ids = [_cell(v) for v in frame["id"]] if "id" in frame else [""] * len(frame)
    problems = [f"line {file_line(frame, i)} (id {ids[i]!r}): {why}" for i in range(len(frame))
                if (why := reference_conflict({"reference": alias[i], "e_ox_reference": main[i]}))]
    raise_problems(where, problems)
    out = frame.drop(columns="reference")
    out["e_ox_reference"] = [m or a for m, a in zip(main, alias)]
    return out


#: e_ox_v_nhe and a converted e_ox_v of one row may differ by this much (rounding of the conversion) [V]
SAME_POTENTIAL_TOL_V = 0.02


def check_dye_file(frame: pd.DataFrame, where: str = "dye file", *, label: str = "id",
                   one_target: bool = False) -> np.ndarray:
    """Refuse a user's dye file with a missing, duplicated or impossible value; E(S⁺/S) of every row.

    Checks every row: no control character in its id or name and a SMILES the prepare stage would read
    (:func:`screen.levels_check.text_row_problems`, checked first: such a file is refused whole); an id that is
    present and unique; ``e_ox_v_nhe`` (or
    ``e_ox_v`` with ``e_ox_reference``, and ``solvent`` for a ferrocene
    reference) and ``e00_ev`` present, numbers, finite and within
    :data:`E_OX_RANGE_V_NHE` and :data:`E00_RANGE_EV`; σ columns empty or ≥ 0;
    a reference id that carries its solvent (``fc-mecn``) and a ``solvent`` that
    names another one (:func:`screen.dyecell.scales.solvent_conflict`).  A number
    written with a decimal comma is named as such (:func:`decimal_comma_hint`).

    Parameters
    ----------
    frame : pandas.DataFrame
        The file as read (index = row number in the file), with ``id`` and the
        potential columns (checked by the caller).
    where : str
        File name for the message.
    label : str
        The column that names each dye (``id`` in a dye file; ``name`` in the dye reference set).
    one_target : bool
        A row may give only one of E(S⁺/S) and E₀₋₀ (the reference set: each model is fitted on the rows that
        give its target); a row with neither is still refused.

    Returns
    -------
    numpy.ndarray
        E(S⁺/S) of every row. [V vs NHE]

    Raises
    ------
    InputError
        Naming the file, line, id, column, value and the fix (the number of problems, the first five listed);
        ``no rows`` for a file with a header only.
    """
    if len(frame) == 0:
        raise InputError(f"{where}: no rows (only a header); give one dye per line: id,e_ox_v_nhe,e00_ev")
    # a control character in an id or name, a SMILES too large to read: the admission rule of every input table
    # (screen.prepare.checks.text_row_problem), checked before anything reads a structure
    raise_problems(where, [text for _, text in text_row_problems(frame, cells=tuple(dict.fromkeys((label, "name"))))])
    ids = [_cell(v) for v in (frame[label] if label in frame else [""] * len(frame))]
    problems: list[str] = []
    bad: set[tuple[int, str]] = set()  # cells already reported
    empty = [file_line(frame, i) for i, v in enumerate(ids) if not v]
    if empty:
        problems.append(f"line{'s' if len(empty) > 1 else ''} {', '.join(map(str, empty))}: column {label} is empty; "
                        f"give every dye {'an' if label[0] in 'aeiou' else 'a'} {label}")
    seen: dict[str, list[int]] = {}
    for i, v in enumerate(ids):
        if v:
            seen.setdefault(v, []).append(file_line(frame, i))
    for v, lines in seen.items():
        if len(lines) > 1:
            problems.append(f"{label} {v!r} is on lines {', '.join(map(str, lines))}: {label}s must be unique; rename or "
                            "remove the repeated rows")

    def at(i: int, col: str, value) -> str:
        shown = _g(value) if isinstance(value, float) else repr(value)
        return f"line {file_line(frame, i)} ({label} {ids[i]!r}), column {col} = {shown}"

    def number(col: str, unit: str, example: str) -> np.ndarray:
        if col not in frame:
            return np.full(len(frame), np.nan)
        out = np.full(len(frame), np.nan)
        for i, raw in enumerate(frame[col]):
            text = _cell(raw)
            if not text:
                continue
            try:
                out[i] = float(text)
            except ValueError:
                problems.append(f"{at(i, col, text)}: {not_a_number(text, unit, example)}")
                bad.add((i, col))
                continue
            if not math.isfinite(out[i]):
                problems.append(f"{at(i, col, text)}: not a finite number; write the value in {unit}, e.g. "
                                f"{example}")
                bad.add((i, col))
                out[i] = np.nan
        return out

    e_ox = number("e_ox_v_nhe", "V vs NHE", "1.1")
    raw = number("e_ox_v", "V vs the reference electrode in e_ox_reference", "0.4")
    e00 = number("e00_ev", "eV", "2.1")
    sigmas = {c: number(c, u, "0.1") for c, u in (("e_ox_sigma_v", "V"), ("e00_sigma_ev", "eV"))}
    refs = [_cell(v) for v in (frame["e_ox_reference"] if "e_ox_reference" in frame else [""] * len(frame))]
    solv = [_cell(v) for v in (frame["solvent"] if "solvent" in frame else [""] * len(frame))]
    def convert(i: int) -> str | None:
        """E(S+/S) of row ``i`` from ``e_ox_v`` and its reference into ``e_ox``; the problem, if any."""
        if not refs[i]:
            return f"{at(i, 'e_ox_v', raw[i])}: e_ox_v needs the reference electrode in column e_ox_reference " \
                   "(or reference): NHE, SCE, Ag/AgCl or Fc with a solvent"
        if needs_solvent(refs[i]) and not solv[i]:
            return f"{at(i, 'e_ox_reference', refs[i])}: a ferrocene reference needs the solvent in column " \
                   "solvent (Fc+/Fc vs NHE depends on it: acetonitrile, dichloromethane, DMF or THF)"
        try:
            e_ox[i] = float(to_nhe(raw[i], refs[i], solv[i]))
        except InputError as exc:
            return f"{at(i, 'e_ox_reference', refs[i])}: {exc}"
        return None

    for i in range(len(frame)):
        col = "e_ox_v_nhe"
        clash = solvent_conflict(refs[i], solv[i], "e_ox_reference") if refs[i] else None
        if clash:  # a reference id with its own solvent (fc-mecn) and a solvent column naming another one
            problems.append(f"line {file_line(frame, i)} ({label} {ids[i]!r}): {clash}")
            bad.update({(i, "e_ox_v"), (i, "e_ox_v_nhe")})
        if math.isfinite(e_ox[i]) and math.isfinite(raw[i]) and refs[i] and not clash \
                and not (needs_solvent(refs[i]) and not solv[i]):  # both given: they must say the same
            try:
                other = float(to_nhe(raw[i], refs[i], solv[i]))
            except InputError:
                other = math.nan
            if math.isfinite(other) and abs(other - e_ox[i]) > SAME_POTENTIAL_TOL_V:
                problems.append(f"{at(i, 'e_ox_v_nhe', float(e_ox[i]))} and e_ox_v = {raw[i]:g} V vs {refs[i]}"
                                f"{' in ' + solv[i] if solv[i] else ''} (= {other:.2f} V vs NHE) disagree; give one "
                                "of them")
                bad.add((i, col))
                continue
        if math.isnan(e_ox[i]) and math.isfinite(raw[i]) and not clash:
            col = "e_ox_v"
            msg = convert(i)
            if msg:
                problems.append(msg)
                bad.add((i, col))
        if math.isnan(e_ox[i]):
            if not {(i, "e_ox_v_nhe"), (i, "e_ox_v")} & bad and not (one_target and math.isfinite(e00[i])):
                given = "e_ox_v_nhe" + (" and e_ox_v are" if "e_ox_v" in frame else " is")
                problems.append(f"line {file_line(frame, i)} ({label} {ids[i]!r}): {given} empty; give E(S+/S) in V vs NHE "
                                "(or leave the dye out)")
        else:
            msg = e_ox_problem(float(e_ox[i]), "e_ox_v_nhe")
            if msg:
                shown = raw[i] if col == "e_ox_v" else e_ox[i]
                conv = f" (= {e_ox[i]:.2f} V vs NHE with {refs[i]})" if col == "e_ox_v" else ""
                problems.append(f"{at(i, col, float(shown))}{conv}: {msg}")
        if math.isnan(e00[i]):
            if (i, "e00_ev") not in bad and not (one_target and math.isfinite(e_ox[i])):
                problems.append(f"line {file_line(frame, i)} ({label} {ids[i]!r}): e00_ev is empty; give E00 in eV "
                                "(or leave the dye out)")
        else:
            msg = e00_problem(float(e00[i]))
            if msg:
                problems.append(f"{at(i, 'e00_ev', float(e00[i]))}: {msg}")
        for c, s in sigmas.items():
            if math.isfinite(s[i]) and s[i] < 0:
                problems.append(f"{at(i, c, float(s[i]))}: an uncertainty must be >= 0 (empty = 0)")
            elif math.isfinite(s[i]) and s[i] > SIGMA_MAX:
                unit = "V" if c.endswith("_v") else "eV"
                hint = mv_hint(float(s[i]), unit) or f"give the one-sigma uncertainty in {unit}, e.g. 0.1"
                problems.append(f"{at(i, c, float(s[i]))}: an uncertainty must lie in 0-{SIGMA_MAX:g} {unit} "
                                f"(measured values carry about 0.01-0.1 {unit}); {hint}")
    raise_problems(where, problems)
    return e_ox


def smiles_problem(smiles: str) -> str | None:
    """Why RDKit cannot read a SMILES, in the words of the prepare stage (None if it reads, or is empty).

    The message is the one :func:`screen.prepare.validate` writes for the row
    (``SMILES syntax error: …``, a valence or aromaticity problem, an unknown
    element symbol); the dye mode sets no element, charge or size limit, so
    only the reasons RDKit cannot read it are left.

    Examples
    --------
    >>> smiles_problem("OC(=O)c1ccccc1") is None, smiles_problem("") is None
    (True, True)
    >>> smiles_problem("OC(=O)C1CC")
    'SMILES syntax error: unclosed ring'
    """
    from rdkit import Chem, rdBase

    if not smiles.strip():
        return None
    with rdBase.BlockLogs():
        if Chem.MolFromSmiles(smiles) is not None:
            return None
    from screen.prepare import PrepareOptions, validate
    from screen.prepare.options import KNOWN_ELEMENTS

    lenient = PrepareOptions(max_heavy_atoms=10**6, allowed_elements=tuple(sorted(KNOWN_ELEMENTS)),
                             allow_charged=True, allow_open_shell=True, allow_charge_separation=True)
    error = str(validate(pd.DataFrame({"id": ["dye"], "smiles_input": [smiles]}), lenient).loc[0, "error"])
    # the prepare stage lists its allowed elements after an unknown symbol; here every element is allowed
    return error.split("; allowed elements:")[0] or "RDKit cannot read it"


def unreadable_smiles(frame: pd.DataFrame) -> dict[int, str]:
    """Rows of a user's dye file whose SMILES RDKit cannot read: row position → the reason, naming line and id.

    Such a row is not ranked (status ``rejected``, as the prepare stage rejects an
    unparsable SMILES); the other dyes are ranked as usual.

    Examples
    --------
    >>> f = pd.DataFrame({"id": ["a", "b", "c"], "smiles": ["OC(=O)c1ccccc1", "OC(=O)C1CC", None]})
    >>> unreadable_smiles(f)
    {1: "line 3 (id 'b'): the SMILES cannot be parsed (SMILES syntax error: unclosed ring); correct it, or leave it empty to skip the anchor check"}
    """
    if "smiles" not in frame:
        return {}
    ids = [_cell(v) for v in (frame["id"] if "id" in frame else [""] * len(frame))]
    out = {}
    for i, raw in enumerate(frame["smiles"]):
        smiles = _cell(raw)
        why = smiles_problem(smiles)
        if why:
            out[i] = (f"line {file_line(frame, i)} (id {ids[i]!r}): the SMILES cannot be parsed ({why}); correct it, "
                      "or leave it empty to skip the anchor check")
    return out


def extra_fields_problem(path) -> str | None:
    """The lines of a CSV file with more fields than its header, in words (None when there is none).

    Read by pandas, such a row silently shifts its values one column to the right (when it is the first data
    row, the first column becomes the index) and a later check names the wrong column; a row with fewer fields
    is read with empty cells and checked as usual.  Lines are counted as in the file (header = line 1).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> f = pathlib.Path(tempfile.mkdtemp()) / "d.csv"
    >>> _ = f.write_text("id,e_ox_v_nhe,e00_ev\\nd1,1.1,2.0,x\\nd2,1.0,2.1\\n")
    >>> extra_fields_problem(f)
    'line 2 has 4 fields but the header has 3 (id, e_ox_v_nhe, e00_ev)'
    """
    from screen.io import field_count_lines

    # empty extra fields count too: a trailing comma shifts the columns as well
    header, lines = field_count_lines(path, longer_only=True)
    if not lines:
        return None
    names = ", ".join(h.strip() for h in header)
    if len(lines) == 1:
        return f"line {lines[0][0]} has {lines[0][1]} fields but the header has {len(header)} ({names})"
    shown = ", ".join(str(n) for n, _ in lines[:_MAX_LISTED]) + (", ..." if len(lines) > _MAX_LISTED else "")
    return f"{len(lines)} lines ({shown}) have more fields than the header's {len(header)} ({names})"


def check_field_counts(path, what: str) -> None:
    """Refuse a CSV file with a row that has more fields than its header (:func:`extra_fields_problem`), or whose
    header names a column twice (:func:`screen.io.repeated_column`: pandas used the first of two ``e00_ev`` columns
    without a word, a careless user's audit).

    Raises
    ------
    InputError
        Naming the file, the line(s) and the likely slip (an unquoted comma or a decimal comma), or the repeated
        column and both its positions.
    """
    from screen.io import repeated_column

    repeated = repeated_column(path)
    if repeated:
        raise InputError(f"{what} {path}: {repeated}")
    problem = extra_fields_problem(path)
    if problem:
        import csv

        from screen.io import separator_problem

        with open(path, newline="", encoding="utf-8", errors="replace") as handle:
            header = next(csv.reader(handle), [])
        other = separator_problem(header)  # a ';'- or tab-separated export: that is the fix to give
        if other:
            raise InputError(f"{what} {path}: {other}")
        raise InputError(f"{what} {path}: {problem}; an unquoted comma inside a field (a name, a SMILES) or a "
                         "decimal comma? Quote fields that hold commas and write decimals with a point (1.1, not "
                         "1,1)")


def _allowed_anchor_text() -> str:
    from screen.dyecell.anchors import anchor_names

    return (f"{', '.join(anchor_names())} (several joined with ';'), or {'/'.join(NO_ANCHOR_WORDS)} for no "
            "anchoring group, or empty for not stated")


def anchor_column(frame: pd.DataFrame, where: str = "dye file") -> list[list[str] | None]:
    """The ``anchor`` column of a dye file, read against a closed vocabulary: per row the anchor names.

    A cell holds anchor names of :mod:`screen.dyecell.anchors` (any case; several joined with ``;``), one of
    :data:`NO_ANCHOR_WORDS` (no anchoring group: ``[]``) or nothing (not stated: ``None``).

    Raises
    ------
    InputError
        Any other value, naming the file, the line, the id, the value and the allowed values.

    Examples
    --------
    >>> anchor_column(pd.DataFrame({"id": ["a", "b", "c"], "anchor": ["Carboxylic acid", "-", ""]}))
    [['carboxylic acid'], [], None]
    >>> anchor_column(pd.DataFrame({"id": ["a"], "anchor": ["no anchor"]}), "d.csv")  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    screen.errors.InputError: d.csv: line 2 (id 'a'), column anchor = 'no anchor': not an anchoring group the ...
    """
    from screen.dyecell.anchors import anchor_names

    if "anchor" not in frame:
        return [None] * len(frame)
    known = {n.lower(): n for n in anchor_names()}
    ids = [_cell(v) for v in (frame["id"] if "id" in frame else [""] * len(frame))]
    out: list[list[str] | None] = []
    problems = []
    for i, raw in enumerate(frame["anchor"]):
        text = _cell(raw)
        if not text:
            out.append(None)
            continue
        if text.lower() in NO_ANCHOR_WORDS:
            out.append([])
            continue
        parts = [p.strip() for p in text.split(";") if p.strip()]
        bad = [p for p in parts if p.lower() not in known]
        if bad or not parts:
            problems.append(f"line {file_line(frame, i)} (id {ids[i]!r}), column anchor = {text!r}: not an anchoring "
                            f"group the dye-cell mode knows; allowed: {_allowed_anchor_text()}")
            out.append(None)
            continue
        out.append(list(dict.fromkeys(known[p.lower()] for p in parts)))
    raise_problems(where, problems)
    return out
