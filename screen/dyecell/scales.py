"""The electrochemical scale of the dye-cell mode: V vs NHE, V vs Fc⁺/Fc and the vacuum scale.

Dye-cell work is done in electrode potentials.  This module holds the one set
of conversions between

- ``nhe``: potential of a couple vs the normal (standard) hydrogen electrode [V];
- ``fc`` (with a solvent): potential vs ferrocenium/ferrocene in that solvent [V];
- reference electrodes (SCE, Ag/AgCl) [V];
- ``vacuum``: the energy of an electron at the couple's electrochemical potential,
  relative to an electron at rest in vacuum [eV] (the scale of ``homo_ev``).

The absolute potential of the hydrogen electrode is 4.44 V (IUPAC
recommendation, Trasatti 1986 [1]_): the vacuum-scale energy of a couple at
E vs NHE is :math:`-e\\,(E + 4.44\\ \\mathrm{V})`.  Ferrocene's potential vs
NHE depends on the solvent; the offsets are read from
``screen/data/electrodes.csv`` (sourced there, e.g. +0.63 V in acetonitrile,
the dye-cell convention [2]_, [3]_).

The dye-cell tables carry ``scale = "electrochemical"`` (potentials in V vs
NHE); :func:`require_scale` refuses a table on any other scale
(:class:`screen.errors.ScaleMismatchError`), as ranking does for ``film`` and
``gas`` levels (``docs/contracts.md``, energy scales), with a conversion hint
for the scale refused (:func:`conversion_hint`).  The vacuum scale here is the
absolute one (Fc⁺/Fc in acetonitrile at −(0.63 + 4.44) = −5.07 eV); dascreen's
``film`` scale puts ferrocene at −4.8 eV (:data:`FILM_FC_EV`), so a couple
reads 0.27 eV higher (less negative) on the film scale than here.

References
----------
.. [1] S. Trasatti, "The absolute electrode potential: an explanatory note
   (Recommendations 1986)", Pure Appl. Chem. 58 (1986) 955–966.
   :doi:`10.1351/pac198658070955`
.. [2] V. V. Pavlishchuk, A. W. Addison, "Conversion constants for redox
   potentials measured versus different reference electrodes in acetonitrile
   solutions at 25 °C", Inorg. Chim. Acta 298 (2000) 97–102.
   :doi:`10.1016/S0020-1693(99)00407-7`
.. [3] N. G. Connelly, W. E. Geiger, "Chemical redox agents for organometallic
   chemistry", Chem. Rev. 96 (1996) 877–910. :doi:`10.1021/cr940053x`

Examples
--------
>>> round(float(vacuum_ev_from_nhe(0.0)), 2)
-4.44
>>> round(float(nhe_from_vacuum_ev(-5.5)), 2)
1.06
>>> round(float(to_nhe(0.40, "fc", "acetonitrile")), 2)
1.03
"""

from __future__ import annotations

import math
import re
from functools import lru_cache
from pathlib import Path

import numpy as np
import pandas as pd

from screen.constants import FC_FILM_EV
from screen.errors import InputError, ScaleMismatchError

__all__ = ["ABSOLUTE_NHE_V", "FILM_FC_EV", "ELECTROCHEMICAL", "ELECTRODES_FILE", "vacuum_ev_from_nhe",
           "nhe_from_vacuum_ev", "electrodes", "solvent_key", "needs_solvent", "fc_vs_nhe_v", "reference_entry",
           "solvent_conflict", "reference_vs_nhe_v", "to_nhe", "from_nhe", "require_scale", "conversion_hint",
           "film_scale_offset_ev"]

#: absolute potential of the standard hydrogen electrode (Trasatti 1986, IUPAC) [V]
ABSOLUTE_NHE_V = 4.44
#: vacuum-scale energy of ferrocene on dascreen's ``film`` scale (:data:`screen.constants.FC_FILM_EV`) [eV]
FILM_FC_EV = FC_FILM_EV
#: scale name of every dye-cell potential table (V vs NHE)
ELECTROCHEMICAL = "electrochemical"
#: the sourced reference-electrode table
ELECTRODES_FILE = Path(__file__).resolve().parent.parent / "data" / "electrodes.csv"

#: solvent spellings → the solvent key used in ``electrodes.csv`` ids (``fc-<key>``)
_SOLVENT_ALIASES = {
    "mecn": "mecn", "acetonitrile": "mecn", "ch3cn": "mecn", "acn": "mecn",
    "dmf": "dmf", "n,n-dimethylformamide": "dmf", "dimethylformamide": "dmf",
    "dcm": "dcm", "ch2cl2": "dcm", "dichloromethane": "dcm", "methylene chloride": "dcm",
    "thf": "thf", "tetrahydrofuran": "thf",
}
#: spellings of a ferrocene reference whose solvent is given separately
_FERROCENE = ("fc", "fc+/fc", "fc/fc+", "ferrocene")
#: reference-electrode spellings → ``electrodes.csv`` id
_REFERENCE_ALIASES = {
    "nhe": "nhe", "she": "nhe", "v vs nhe": "nhe",
    "sce": "sce", "ag/agcl": "ag-agcl-sat", "ag/agcl (sat)": "ag-agcl-sat", "ag-agcl-sat": "ag-agcl-sat",
    "ag/agcl (3 m kcl)": "ag-agcl-3m", "ag-agcl-3m": "ag-agcl-3m",
}


def _normalised(text) -> str:
    """A solvent or reference name as the tables key it: lower case, blanks collapsed (``" Fc+/Fc "`` → ``fc+/fc``)."""
    return re.sub(r"\s+", " ", str(text).strip().lower())


def vacuum_ev_from_nhe(e_v_nhe):
    """Vacuum-scale energy of a couple at a potential vs NHE: ``−e (E + 4.44 V)``.

    Parameters
    ----------
    e_v_nhe : array_like
        Potential vs NHE. [V]

    Returns
    -------
    numpy.ndarray or float
        Energy relative to the vacuum level (negative for a bound electron). [eV]

    References
    ----------
    .. [1] S. Trasatti, Pure Appl. Chem. 58 (1986) 955. :doi:`10.1351/pac198658070955`

    Examples
    --------
    >>> vacuum_ev_from_nhe([0.0, 1.0]).round(2).tolist()
    [-4.44, -5.44]
    """
    return -(np.asarray(e_v_nhe, dtype=float) + ABSOLUTE_NHE_V)


def nhe_from_vacuum_ev(energy_ev):
    """Potential vs NHE of a couple whose electrons sit at ``energy_ev`` on the vacuum scale.

    The inverse of :func:`vacuum_ev_from_nhe`: ``E = −energy/e − 4.44 V``. [V]

    Examples
    --------
    >>> float(nhe_from_vacuum_ev(-4.44))
    0.0
    """
    return -np.asarray(energy_ev, dtype=float) - ABSOLUTE_NHE_V


@lru_cache(maxsize=4)
def _electrodes(path: str) -> pd.DataFrame:
    frame = pd.read_csv(path, dtype=str, keep_default_na=False)
    missing = [c for c in ("id", "e_vs_nhe_v", "solvent") if c not in frame.columns]
    if missing:
        raise InputError(f"{path}: missing column(s) {missing}")
    frame["e_vs_nhe_v"] = pd.to_numeric(frame["e_vs_nhe_v"], errors="coerce")
    return frame.set_index("id")


def electrodes(path: str | Path | None = None) -> pd.DataFrame:
    """The reference-electrode table (index ``id``; ``e_vs_nhe_v`` [V], ``solvent``, source columns).

    Examples
    --------
    >>> float(electrodes().loc["sce", "e_vs_nhe_v"])
    0.241
    """
    return _electrodes(str(path or ELECTRODES_FILE)).copy()


def solvent_key(solvent: str) -> str:
    """Short key of a solvent name (``acetonitrile`` → ``mecn``); '' if unknown.

    Examples
    --------
    >>> solvent_key("CH2Cl2"), solvent_key(" Acetonitrile "), solvent_key("water")
    ('dcm', 'mecn', '')
    """
    return _SOLVENT_ALIASES.get(_normalised(solvent), "")


def fc_vs_nhe_v(solvent: str = "acetonitrile") -> float:
    """Potential of Fc⁺/Fc vs NHE in a solvent, from ``electrodes.csv``. [V]

    Raises
    ------
    InputError
        The solvent has no sourced Fc⁺/Fc offset (the message lists those that do).

    Examples
    --------
    >>> fc_vs_nhe_v("MeCN"), fc_vs_nhe_v("DMF")
    (0.63, 0.69)
    """
    table = electrodes()
    key = solvent_key(solvent)
    ident = f"fc-{key}"
    if not key or ident not in table.index:
        known = sorted(i[3:] for i in table.index if i.startswith("fc-"))
        raise InputError(f"no Fc+/Fc potential vs NHE is recorded for solvent {solvent!r}; known: "
                         f"{', '.join(known)} (add a sourced row to {ELECTRODES_FILE.name})")
    return float(table.loc[ident, "e_vs_nhe_v"])


def needs_solvent(reference: str) -> bool:
    """True for a ferrocene reference given without its solvent (``Fc``, ``Fc+/Fc``, ``ferrocene``).

    Fc⁺/Fc vs NHE depends on the solvent (+0.63 V in acetonitrile, +0.70 V in
    dichloromethane, ``electrodes.csv``), so user files must name it; an id such
    as ``fc-dcm`` carries its solvent.

    Examples
    --------
    >>> needs_solvent("Fc+/Fc"), needs_solvent("fc-dcm"), needs_solvent("SCE")
    (True, False, False)
    """
    return _normalised(reference) in _FERROCENE


def reference_entry(reference: str, solvent: str | None = None) -> dict:
    """The ``electrodes.csv`` row a reference electrode is converted with.

    Parameters
    ----------
    reference : str
        ``NHE``/``SHE``, ``SCE``, ``Ag/AgCl``, ``Ag/AgCl (3 M KCl)``, ``Fc`` (ferrocene,
        in the ``solvent`` given) or an id of ``electrodes.csv`` (e.g. ``fc-dcm``).
    solvent : str, optional
        Solvent of a ferrocene reference (None: acetonitrile for a bare ``Fc``).  Given with an id that names
        another solvent (``fc-mecn`` with dichloromethane), it is refused (:func:`solvent_conflict`).

    Returns
    -------
    dict
        ``reference`` (the ``electrodes.csv`` id), ``offset_v`` (its potential vs NHE [V], added to convert),
        ``from_memory`` (bool) and ``source``.

    Raises
    ------
    InputError
        Unknown reference, a ferrocene solvent without a recorded offset, or a reference id and a solvent that
        disagree.

    Examples
    --------
    >>> e = reference_entry("Fc", "CH2Cl2")
    >>> e["reference"], e["offset_v"], e["from_memory"]
    ('fc-dcm', 0.7, True)
    """
    ref = _normalised(reference)
    table = electrodes()
    if ref in _FERROCENE:
        solvent = "acetonitrile" if solvent is None else solvent
        fc_vs_nhe_v(solvent)  # refuses a solvent without a recorded offset, listing those with one
        ident = f"fc-{solvent_key(solvent)}"
    else:
        clash = solvent_conflict(reference, solvent)
        if clash:
            raise InputError(clash)
        ident = _REFERENCE_ALIASES.get(ref, ref)
        if ident not in table.index or ident == "vacuum" or not math.isfinite(table.loc[ident, "e_vs_nhe_v"]):
            raise InputError(f"unknown reference electrode {reference!r}; known: NHE, SHE, SCE, Ag/AgCl, Fc (with a "
                             f"solvent) or an id of {ELECTRODES_FILE.name}")
    row = table.loc[ident]
    memory = str(row.get("from_memory", "")).strip().lower() in ("true", "1", "yes")
    return {"reference": ident, "offset_v": float(row["e_vs_nhe_v"]), "from_memory": memory,
            "source": str(row.get("source", ""))}


def solvent_conflict(reference: str, solvent: str | None, column: str = "reference") -> str | None:
    """A reference id that carries its solvent (``fc-mecn``) given with a ``solvent`` that names another one.

    An unknown solvent name, an empty one, a bare ``Fc`` and electrodes without a solvent of their own (SCE,
    Ag/AgCl, NHE) never clash.

    Examples
    --------
    >>> solvent_conflict("fc-mecn", "MeCN") is None, solvent_conflict("SCE", "dichloromethane") is None
    (True, True)
    >>> solvent_conflict("fc-mecn", "dichloromethane")  # doctest: +ELLIPSIS
    "columns reference = 'fc-mecn' (Fc+/Fc in acetonitrile) and solvent = 'dichloromethane' disagree; ..."
    """
    if solvent is None or not str(solvent).strip():
        return None
    ident = _normalised(reference)
    ident = _REFERENCE_ALIASES.get(ident, ident)
    table = electrodes()
    key = solvent_key(solvent)
    if not ident.startswith("fc-") or ident not in table.index or not key or ident == f"fc-{key}":
        return None
    return (f"columns {column} = {reference!r} (Fc+/Fc in {table.loc[ident, 'solvent']}) and solvent = "
            f"{str(solvent).strip()!r} disagree; keep one: {column} = Fc with the solvent of the measurement in "
            f"column solvent, or {column} = fc-{key} for Fc+/Fc in {str(solvent).strip()}")


def reference_vs_nhe_v(reference: str, solvent: str | None = None) -> float:
    """Potential of a reference electrode vs NHE (:func:`reference_entry`). [V]

    Parameters as :func:`reference_entry` (an unknown reference, or a solvent that contradicts an id such as
    ``fc-mecn``, is refused there).

    Examples
    --------
    >>> reference_vs_nhe_v("SCE"), reference_vs_nhe_v("Fc+/Fc", "dichloromethane")
    (0.241, 0.7)
    """
    return reference_entry(reference, solvent)["offset_v"]


def to_nhe(e_v, reference: str, solvent: str | None = None):
    """A potential measured vs ``reference`` converted to V vs NHE: ``E + E_ref(vs NHE)``.

    Examples
    --------
    >>> round(float(to_nhe(0.78, "SCE")), 3)
    1.021
    """
    return np.asarray(e_v, dtype=float) + reference_vs_nhe_v(reference, solvent)


def from_nhe(e_v_nhe, reference: str, solvent: str | None = None):
    """A potential vs NHE expressed vs ``reference`` (inverse of :func:`to_nhe`). [V]

    Examples
    --------
    >>> round(float(from_nhe(1.03, "Fc", "acetonitrile")), 2)
    0.4
    """
    return np.asarray(e_v_nhe, dtype=float) - reference_vs_nhe_v(reference, solvent)


def require_scale(scales, where: str, expected: str = ELECTROCHEMICAL) -> None:
    """Refuse values on another scale than ``expected``.

    Parameters
    ----------
    scales : str or iterable of str
        Scale labels of the values (one per row, or one for a table).
    where : str
        What is being checked (file and column), for the message.
    expected : str
        The scale required (default ``electrochemical``: V vs NHE).

    Raises
    ------
    ScaleMismatchError
        Any label differs from ``expected`` (empty labels included); the message carries the conversion for the
        scales found (:func:`conversion_hint`).

    Examples
    --------
    >>> require_scale(["electrochemical"], "dyes.csv")
    >>> require_scale(["film"], "levels.csv")  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    screen.errors.ScaleMismatchError: levels.csv is on the 'film' scale; the dye-cell mode needs 'electrochemical' (potentials in V vs NHE). Give each dye's oxidation potential as e_ox_v_nhe [V vs NHE] ...
    """
    labels = [scales] if isinstance(scales, str) else list(scales)
    found = sorted({str(s).strip() for s in labels} - {expected})
    if found:
        shown = ", ".join(repr(s) for s in found)
        raise ScaleMismatchError(
            f"{where} is on the {shown} scale; the dye-cell mode needs {expected!r} (potentials in V vs NHE). "
            f"{conversion_hint(found)}")


def film_scale_offset_ev(solvent: str = "acetonitrile") -> float:
    """How much higher (less negative) a couple reads on dascreen's film scale than on the absolute vacuum scale
    of the dye-cell mode: ``−4.8 − (−(E(Fc⁺/Fc vs NHE) + 4.44))``. [eV]

    Examples
    --------
    >>> round(film_scale_offset_ev(), 2)
    0.27
    """
    return FILM_FC_EV + fc_vs_nhe_v(solvent) + ABSOLUTE_NHE_V


def _fc_offsets_text() -> str:
    """``+0.63 V in acetonitrile, +0.70 V in dichloromethane, …`` from ``electrodes.csv`` ('' if none)."""
    offsets = []
    for solvent, shown in (("acetonitrile", "acetonitrile"), ("dichloromethane", "dichloromethane"),
                           ("dmf", "DMF"), ("thf", "THF")):
        try:
            offsets.append(f"{fc_vs_nhe_v(solvent):+.2f} V in {shown}")
        except InputError:  # a table without that solvent: leave it out of the hint
            continue
    return ", ".join(offsets)


def _scale_kind(label: str) -> str:
    """``film``, ``gas`` or ``vacuum`` (any other label: a vacuum-scale value of unknown origin)."""
    low = str(label).strip().lower()
    return low if low in ("film", "gas") else "vacuum"


def conversion_hint(scale=None) -> str:
    """How a chemist turns a refused level into the dye file's ``e_ox_v_nhe``, for the scale that was refused.

    - ``film`` (dascreen's film/CV scale, ferrocene at :data:`FILM_FC_EV` = −4.8 eV):
      E vs NHE = −E_film − 4.8 + E(Fc⁺/Fc vs NHE in the solvent);
    - ``gas`` (isolated molecules): no honest conversion, the solvation is missing; compute the dye from its
      SMILES or give the measured potential;
    - anything else (``vacuum``, no label): the absolute scale, E vs NHE = −E_vacuum − 4.44 (Trasatti 1986),
      with the caveat that a CV-derived HOMO or a gas-phase IP is not on that scale.

    Parameters
    ----------
    scale : str or iterable of str, optional
        The refused scale label(s); None: a vacuum-scale value of unknown origin.

    Examples
    --------
    >>> print(conversion_hint("film"))  # doctest: +ELLIPSIS
    Give each dye's oxidation potential as e_ox_v_nhe [V vs NHE] (and scale = electrochemical, or no scale column). Film-scale levels (dascreen's film scale: CV levels with ferrocene at -4.8 eV, docs/contracts.md section 6): E vs NHE [V] = -E_film [eV] - 4.8 + E(Fc+/Fc vs NHE in the solvent) (...), e.g. a film HOMO of -5.30 eV is +0.50 V vs Fc+/Fc = 1.13 V vs NHE in acetonitrile; ...
    """
    labels = [scale] if scale is None or isinstance(scale, str) else list(scale)
    kinds = []
    for label in labels:
        kind = _scale_kind("" if label is None else label)
        if kind not in kinds:
            kinds.append(kind)
    fc = _fc_offsets_text()
    fc_list = f"Fc+/Fc vs NHE: {fc}" if fc else f"Fc+/Fc vs NHE from {ELECTRODES_FILE.name}"
    measured = ("give the measured oxidation potential as e_ox_v with e_ox_reference = Fc and the solvent in column "
                "solvent")
    example = -5.30
    parts = []
    for kind in ("film", "gas", "vacuum"):
        if kind not in kinds:
            continue
        if kind == "film":
            try:
                mecn = fc_vs_nhe_v("acetonitrile")
                vs_fc = -example + FILM_FC_EV
                worked = (f", e.g. a film HOMO of {example:.2f} eV is {vs_fc:+.2f} V vs Fc+/Fc = "
                          f"{vs_fc + mecn:.2f} V vs NHE in acetonitrile")
            except InputError:
                worked = ""
            parts.append(
                f"Film-scale levels (dascreen's film scale: CV levels with ferrocene at {FILM_FC_EV:g} eV, "
                f"docs/contracts.md section 6): E vs NHE [V] = -E_film [eV] - {-FILM_FC_EV:g} + E(Fc+/Fc vs NHE in "
                f"the solvent) ({fc_list}){worked}; a level from a paper that put ferrocene elsewhere (e.g. -5.1 eV) "
                f"takes that value instead of {-FILM_FC_EV:g}; better, {measured}, not the HOMO.")
        elif kind == "gas":
            parts.append(
                f"Gas-scale levels (isolated molecules) have no honest conversion to a potential in solution: "
                f"-IP - {ABSOLUTE_NHE_V:g} leaves out the solvation of the dye and its cation. Compute the dye from "
                "its SMILES with `dascreen dyecell CANDIDATES` (dye models calibrated on measured potentials), or "
                f"give the measured potential (e_ox_v_nhe, or e_ox_v with e_ox_reference and solvent).")
        else:
            parts.append(
                f"From an energy on the absolute (vacuum) scale: E vs NHE [V] = -E_vacuum [eV] - {ABSOLUTE_NHE_V:g} "
                f"(absolute potential of the hydrogen electrode, Trasatti 1986), e.g. {example:.2f} eV gives "
                f"{float(nhe_from_vacuum_ev(example)):.2f} V. This holds only for an energy on the absolute "
                "electrochemical scale: a HOMO derived from cyclic voltammetry holds the vacuum level of ferrocene "
                f"its paper assumed (dascreen's film scale: {FILM_FC_EV:g} eV, giving E vs NHE = -E - "
                f"{-FILM_FC_EV:g} + E(Fc+/Fc vs NHE)), and a computed gas-phase IP lacks solvation; for a HOMO "
                f"from cyclic voltammetry vs Fc+/Fc, {measured} ({fc_list}) instead.")
    return ("Give each dye's oxidation potential as e_ox_v_nhe [V vs NHE] (and scale = "
            f"{ELECTROCHEMICAL}, or no scale column). " + " ".join(parts))
