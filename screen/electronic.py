"""Electronic stage: ΔSCF vertical ionisation energy and electron affinity.

For each geometry three single points are run with the same Hamiltonian:
the closed-shell neutral, and the cation and anion as doublets (one unpaired
electron, ``uhf = 1``) at the *neutral* geometry, which makes both quantities
vertical:

.. math::

    IP_v = E(M^{+\\bullet}) - E(M), \\qquad EA_v = E(M) - E(M^{-\\bullet})

Positive EA means the anion is bound. A neutral whose orbital gap is below
:data:`screen.sanity.MIN_GAP_EV` fails the row (a broken or metallic electronic
structure gives no usable levels). Orbital energies of the neutral
(HOMO, LUMO) are reported too. All values here are *raw* engine values on the
isolated-molecule (gas) scale; GFN2-xTB ΔSCF IPs are systematically too large
by several eV, which is why the calibration stage exists. Every single point is
spin-restricted (the doublet ions have one orbital set for both spins); tblite's spin
polarisation would shift the IPs by about −0.06 eV and the EAs by +0.06–0.08 eV, almost
uniformly (thiophene, naphthalene; an engine audit's figures), which the linear
calibration absorbs.

References
----------
.. [1] C. Bannwarth, S. Ehlert, S. Grimme, J. Chem. Theory Comput. 15 (2019)
   1652. :doi:`10.1021/acs.jctc.8b01176`
.. [2] V. Ásgeirsson, C. A. Bauer, S. Grimme, Chem. Sci. 8 (2017) 4879.
   :doi:`10.1039/c7sc00601b` (IPEA1-xTB, vertical IP/EA with xTB)
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import asdict
from pathlib import Path

import numpy as np
import pandas as pd
from rdkit import Chem

from screen import sanity
from screen.batch import molecule_caller, run_journalled
from screen.columns import ELECTRONIC_COLUMNS, EXTRA_RAW_COLUMNS, RAW_COLUMNS
from screen.constants import BOHR_ANGSTROM, HARTREE_EV
from screen.engines import Engine, EngineError
from screen.excitation import frontier_integrals, lowdin_coefficients
from screen.lonepair import pi_homo
from screen.io import Journal, Progress, write_csv
from screen.options import ElectronicOptions
from screen.provenance import sha256_file
from screen.structures import STATUS_COLUMNS as STRUCTURE_COLUMNS
from screen.structures import _plain, read_structures

__all__ = ["ElectronicOptions", "vertical_levels", "run_electronic", "electronic_engine", "electronic_record",
           "write_electronic", "molecule_numbers_positions", "ELECTRONIC_COLUMNS", "RAW_COLUMNS",
           "EXTRA_RAW_COLUMNS", "CARRIED_COLUMNS"]

#: ions start their SCF from the converged neutral (same state in the film from the gas-phase one);
#: benchmarks/protocol_cost.py checks that the energies agree within 1e-6 Eh and measures the saving
RESTART_FROM_NEUTRAL = True


def _delta_scf(numbers, positions_bohr, engine: Engine, epsilon=None, guesses=None, restart=True) -> list:
    """Neutral (closed shell), cation and anion (doublets) at one geometry, optionally in a continuum."""
    g = guesses or [None, None, None]
    orbitals = epsilon is None and engine.offers_orbitals
    neutral = engine.singlepoint(numbers, positions_bohr, charge=0, uhf=0, epsilon=epsilon,
                                 guess=g[0] if restart else None, orbitals=orbitals)
    if epsilon is None:  # never compute levels on a broken electronic structure
        homo, lumo = neutral.frontier_eh()
        problem = sanity.gap_problem((lumo - homo) * HARTREE_EV, sanity.MIN_GAP_EV)
        if problem:
            raise sanity.BrokenStructureError(problem)
    start = (lambda i: g[i] or neutral) if restart else (lambda i: None)
    cation = engine.singlepoint(numbers, positions_bohr, charge=1, uhf=1, epsilon=epsilon, guess=start(1))
    anion = engine.singlepoint(numbers, positions_bohr, charge=-1, uhf=1, epsilon=epsilon, guess=start(2))
    return [neutral, cation, anion]


def _frontier(numbers, positions_bohr, neutral, rule: str) -> tuple[int, bool, dict]:
    """The occupied orbital the levels are taken for, whether the lone-pair check ran, and the K, J and
    overlap of that orbital and the LUMO (NaN when the engine gives no orbitals).

    The orbital is the HOMO, or with ``rule="pi"`` the highest π-type orbital when the HOMO is a nitrogen
    lone pair (:mod:`screen.lonepair`); the Löwdin coefficients are computed once for both.
    """
    homo = neutral.n_electrons // 2 - 1
    o = neutral.orbitals
    if o is None:
        return homo, False, {"xtb_k_hl_ev": np.nan, "xtb_j_hl_ev": np.nan, "xtb_overlap_hl": np.nan}
    cprime = lowdin_coefficients(o["coefficients"], o["overlap"])
    checked = rule == "pi" and "ao_l" in o
    hole = pi_homo(numbers, positions_bohr, cprime, o["ao_atom"], o["ao_l"], homo) if checked else homo
    out = frontier_integrals(numbers, positions_bohr, o["coefficients"], o["overlap"], o["ao_atom"],
                             neutral.occupations, homo=hole, lumo=homo + 1, cprime=cprime)
    return hole, checked, {"xtb_k_hl_ev": out["k_hl_ev"], "xtb_j_hl_ev": out["j_hl_ev"],
                           "xtb_overlap_hl": out["overlap_hl"]}


def _film(numbers, positions_bohr, engine: Engine, film_epsilon, gas, restart) -> tuple[dict, list]:
    """ΔSCF IP/EA in the continuum; NaN when switched off or not offered by the engine."""
    nan = {"xtb_ip_film_ev": np.nan, "xtb_ea_film_ev": np.nan, "xtb_energy_film_eh": np.nan,
           "xtb_cation_film_eh": np.nan, "xtb_anion_film_eh": np.nan}
    if film_epsilon is None or not engine.offers_continuum:
        return nan, []
    n, c, a = _delta_scf(numbers, positions_bohr, engine, float(film_epsilon), gas, restart)
    return {"xtb_ip_film_ev": (c.energy_eh - n.energy_eh) * HARTREE_EV,
            "xtb_ea_film_ev": (n.energy_eh - a.energy_eh) * HARTREE_EV,
            "xtb_energy_film_eh": n.energy_eh, "xtb_cation_film_eh": c.energy_eh,
            "xtb_anion_film_eh": a.energy_eh}, [n, c, a]


def _note(engine: Engine, film_epsilon, lone_pair_shift_ev: float = 0.0) -> str:
    notes = []
    if not engine.offers_orbitals:
        notes.append(f"engine {engine.name} gives no AO overlap: frontier integrals not computed, nitrogen "
                     "lone-pair HOMO not checked")
    if lone_pair_shift_ev > 0:
        notes.append(f"lone_pair_homo: the HOMO is a nitrogen lone pair {lone_pair_shift_ev:.2f} eV above the "
                     "highest π orbital; IP, HOMO, gap and integrals taken for the π orbital (screen.lonepair)")
    if film_epsilon is not None and not engine.offers_continuum:
        notes.append(f"engine {engine.name} offers no dielectric continuum: film IP/EA not computed")
    return "; ".join(notes)


def vertical_levels(numbers, positions_bohr, engine: Engine, film_epsilon: float | None = None,
                    restart: bool = RESTART_FROM_NEUTRAL, neutral_guess=None, lone_pair_homo: str = "pi") -> dict:
    """Raw ΔSCF vertical IP/EA, neutral frontier orbitals and their integrals, film-phase IP/EA.

    Parameters
    ----------
    numbers : array_like of int, shape (n,)
        Atomic numbers of a neutral closed-shell molecule.
    positions_bohr : array_like, shape (n, 3)
        Neutral geometry [bohr].
    engine : Engine
        Engine and method.
    film_epsilon : float, optional
        Relative permittivity of the continuum for the film-phase ΔSCF (3.5 by default in the
        stage: common practice for organic semiconductors); ``None`` leaves those values NaN.
    restart : bool
        Start the ions' SCF from the converged neutral (and each film state from its gas-phase
        one) where the engine allows it; the converged energies do not depend on it.
    neutral_guess : screen.engines.SinglePoint, optional
        A converged closed-shell result of the same atoms to start the gas-phase neutral's SCF
        from (with ``restart``), e.g. the chosen conformer's ranking single point
        (:func:`screen.structures.build_structure` with ``return_singlepoint=True``) when the
        structure was made in the same process; the converged energies do not depend on it.
    lone_pair_homo : {"pi", "aufbau"}
        When the neutral's HOMO is the σ lone pair of a two-coordinate nitrogen (GFN2-xTB places
        these too high, :mod:`screen.lonepair`): ``"pi"`` takes the HOMO, the gap, the
        integrals and the IPs (shifted by ε_HOMO − ε_π) for the highest π-type orbital, and
        reports the shift in ``xtb_lone_pair_shift_ev``; ``"aufbau"`` keeps the HOMO as it is.

    Returns
    -------
    dict
        ``xtb_ip_ev``, ``xtb_ea_ev`` [eV] (ΔSCF, vertical), ``xtb_homo_ev``,
        ``xtb_lumo_ev``, ``xtb_gap_ev`` [eV] (neutral orbital energies and
        their difference), ``xtb_k_hl_ev``, ``xtb_j_hl_ev`` [eV] and
        ``xtb_overlap_hl`` (:func:`screen.excitation.frontier_integrals`),
        ``xtb_ip_film_ev``, ``xtb_ea_film_ev`` [eV], ``xtb_lone_pair_shift_ev`` [eV] (0 unless
        the HOMO is a nitrogen lone pair, NaN when not checked), total energies [Eh] of the
        six states, the SCF rung of each state (``"n/c/a"``, film states after
        a ``|``), the summed wall time [s] and a note on what the engine could
        not compute.

    Examples
    --------
    >>> from screen.structures import build_structure
    >>> mol, _ = build_structure("c1ccccc1")
    >>> z = [a.GetAtomicNum() for a in mol.GetAtoms()]
    >>> engine = ElectronicOptions().make_engine()
    >>> r = vertical_levels(z, mol.GetConformer().GetPositions() / BOHR_ANGSTROM, engine, film_epsilon=3.5)
    >>> r["xtb_ip_ev"] > r["xtb_ea_ev"], r["xtb_homo_ev"] < r["xtb_lumo_ev"]
    (True, True)
    >>> r["xtb_ip_film_ev"] < r["xtb_ip_ev"], r["xtb_ea_film_ev"] > r["xtb_ea_ev"]  # the continuum stabilises ions
    (True, True)
    """
    numbers = np.asarray(numbers)
    positions_bohr = np.asarray(positions_bohr, float)
    guesses = None if neutral_guess is None else [neutral_guess, None, None]
    neutral, cation, anion = gas = _delta_scf(numbers, positions_bohr, engine, restart=restart, guesses=guesses)
    homo, lumo = neutral.frontier_eh()
    film, film_states = _film(numbers, positions_bohr, engine, film_epsilon, gas, restart)
    rungs = "/".join(str(s.rung) for s in gas)
    if film_states:
        rungs += "|" + "/".join(str(s.rung) for s in film_states)
    hole, checked, integrals = _frontier(numbers, positions_bohr, neutral, lone_pair_homo)
    shift = (homo - float(neutral.orbital_energies_eh[hole])) * HARTREE_EV  # ≥ 0; 0 when the HOMO is π
    if shift > 0:
        homo -= shift / HARTREE_EV
        film["xtb_ip_film_ev"] = film["xtb_ip_film_ev"] + shift
    return {
        "xtb_ip_ev": (cation.energy_eh - neutral.energy_eh) * HARTREE_EV + shift,
        "xtb_ea_ev": (neutral.energy_eh - anion.energy_eh) * HARTREE_EV,
        "xtb_homo_ev": homo * HARTREE_EV,
        "xtb_lumo_ev": lumo * HARTREE_EV,
        "xtb_gap_ev": (lumo - homo) * HARTREE_EV,
        **integrals,
        **film,
        "xtb_lone_pair_shift_ev": shift if checked else np.nan,
        "xtb_energy_eh": neutral.energy_eh,
        "xtb_cation_eh": cation.energy_eh,
        "xtb_anion_eh": anion.energy_eh,
        "scf_rungs": rungs,
        "sp_wall_s": sum(s.wall_s for s in gas + film_states),
        "electronic_note": _note(engine, film_epsilon, shift),
    }


_ENGINE_CACHE: dict[tuple, Engine] = {}


def electronic_engine(options: dict) -> Engine:
    """The ΔSCF engine of this process for the ``electronic`` options (as a mapping), made once per options."""
    key = tuple(sorted(options.items()))
    engine = _ENGINE_CACHE.get(key)
    if engine is None:
        engine = _ENGINE_CACHE[key] = ElectronicOptions(**options).make_engine()
    return engine


def _electronic_job(numbers, positions_bohr, options: dict) -> dict:
    """Worker-process entry: raw levels of one geometry."""
    return vertical_levels(numbers, positions_bohr, electronic_engine(options), film_epsilon=options["film_epsilon"],
                           lone_pair_homo=options["lone_pair_homo"])


#: structure-route columns an electronic row carries over from the structures status table (besides
#: ``structure_wall_s``, the table's ``wall_s``)
CARRIED_COLUMNS = [c for c in STRUCTURE_COLUMNS if c in ELECTRONIC_COLUMNS and c not in ("key", "status", "error")]


def electronic_record(row: dict, mol: Chem.Mol | None, levels: Callable) -> dict:
    """The journal record of one molecule's raw levels.

    Parameters
    ----------
    row : dict
        The molecule's row of the structures status table.
    mol : rdkit.Chem.Mol or None
        Its geometry (None: missing from the structures file).
    levels : callable
        ``levels(numbers, positions_bohr)`` → the raw values (:func:`vertical_levels`).

    Returns
    -------
    dict
        ``status`` ok with the values, or failed with the structure's reason, a missing geometry or
        ``"electronic: <engine message>"``; the route columns of ``row`` carried over.

    Examples
    --------
    >>> electronic_record({"key": "m1", "status": "failed", "error": "structure: no embedding"}, None, None)["error"]
    'structure: no embedding'
    """
    key = row["key"]
    rec = {"key": key, **{c: row.get(c, "") for c in CARRIED_COLUMNS}, "structure_wall_s": row.get("wall_s", "")}
    if row["status"] != "ok":
        rec.update(status="failed", error=row["error"])
    elif mol is None:
        rec.update(status="failed", error="structure: geometry missing from the structures file")
    else:
        numbers, pos = molecule_numbers_positions(mol)
        start = time.perf_counter()
        try:
            rec.update(levels(numbers, pos), status="ok", error="", n_atoms=len(numbers))
        except (EngineError, RuntimeError) as exc:
            rec.update(status="failed", error=f"electronic: {_plain(exc)}", sp_wall_s=time.perf_counter() - start)
    return rec


def write_electronic(keys, done: dict, out_csv) -> pd.DataFrame:
    """Write a shard's electronic table (columns :data:`ELECTRONIC_COLUMNS`, rows in ``keys`` order) atomically."""
    table = pd.DataFrame([{c: done[k].get(c, "") for c in ELECTRONIC_COLUMNS} for k in keys],
                         columns=ELECTRONIC_COLUMNS)
    write_csv(table, out_csv)
    return table


def run_electronic(structures_sdf, structures_csv, out_csv, options: ElectronicOptions = ElectronicOptions(),
                   journal_path=None, engine: Engine | None = None, isolate: bool = True,
                   timeout_s: float | None = None, progress: Progress | None = None, store=None) -> pd.DataFrame:
    """Electronic stage for one shard: structures → raw levels table.

    Every key of the structures table gets one row: molecules whose structure
    failed stay ``failed`` with that reason; an engine failure makes the row
    ``failed`` with the engine's message. Finished molecules are journalled; a
    journal line is resumed only with the options and the SD file it was computed
    with (its tag holds the stage protocol id and the file's digest).

    Parameters
    ----------
    structures_sdf, structures_csv : path-like
        Outputs of :func:`screen.structures.run_structures`.
    out_csv : path-like
        Output table (columns :data:`ELECTRONIC_COLUMNS`), written atomically.
    options : ElectronicOptions
    journal_path : path-like, optional
        Default ``out_csv`` + ``.journal.jsonl``.
    engine : Engine, optional
        Overrides the engine built from ``options``; molecules then run in this process.
    isolate : bool
        Run each molecule in a child process so a native crash fails one molecule only.
    timeout_s : float, optional
        Per-molecule time limit [s] (isolated runs only).
    progress : Progress, optional
        Progress reporter (default: lines on standard output).
    store : screen.store.ResultStore, path-like or False, optional
        Results store read before and written after each molecule, keyed also by
        the geometry (default: the one named by ``DASCREEN_STORE``; False: none).

    Returns
    -------
    pandas.DataFrame
    """
    from screen.store import electronic_cache, stage_protocol_id

    status = pd.read_csv(structures_csv, dtype=str, keep_default_na=False)
    mols = read_structures(structures_sdf)
    # tagged with the protocol and the SD file's digest: after a rerun of the structures stage (other options,
    # other geometries) a killed job's lines are not resumed onto geometries they were not computed on
    tag = f"{stage_protocol_id('electronic', options)}+{sha256_file(structures_sdf)[:16]}"
    journal = Journal(journal_path or f"{out_csv}.journal.jsonl", tag=tag)
    progress = progress or Progress(f"electronic {Path(out_csv).stem}")
    local = None
    if engine is not None or not isolate:
        engine = engine or options.make_engine()
        local = lambda z, pos, _opts: vertical_levels(z, pos, engine, film_epsilon=options.film_epsilon,
                                                      lone_pair_homo=options.lone_pair_homo)

    with molecule_caller(_electronic_job, local, timeout_s) as call:
        def compute(row: dict) -> dict:
            return electronic_record(row, mols.get(row["key"]), lambda z, pos: call(z, pos, asdict(options)))

        done = run_journalled(status.to_dict("records"), lambda row: row["key"], compute, journal, progress,
                              electronic_cache(store, options, mols, CARRIED_COLUMNS))
    table = write_electronic(status["key"], done, out_csv)
    journal.remove()
    return table


def molecule_numbers_positions(mol: Chem.Mol) -> tuple[np.ndarray, np.ndarray]:
    """Atomic numbers and positions [bohr] of a molecule's first conformer."""
    return (np.array([a.GetAtomicNum() for a in mol.GetAtoms()]),
            mol.GetConformer().GetPositions() / BOHR_ANGSTROM)
