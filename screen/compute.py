"""Structures and electronic stages in one job: one geometry and its raw levels per molecule.

The workflow runs both expensive stages of a shard in one job
(:func:`run_compute`, rule ``compute``): each molecule's structure is built
(:func:`screen.structures.build_structure`) and its ΔSCF levels computed
(:func:`screen.electronic.vertical_levels`) right after, by the same worker
process. That process keeps the chosen conformer's converged ranking single
point between the two steps and starts the gas-phase neutral's SCF from it
(``neutral_guess``) when it is a valid start (:func:`neutral_guess_allowed`):
the ranking ran the same Hamiltonian on the same atoms, and the geometry was
not optimised afterwards. The outputs are those of
:func:`screen.structures.run_structures` followed by
:func:`screen.electronic.run_electronic`: the same three files
(``structures/shard-NNN.sdf`` and ``.csv``, ``electronic/shard-NNN.csv``), the
same journal files (so :func:`screen.io.run_progress` counts both stages as
before) and the same results-store entries, read before and written after
each molecule (both entries of a molecule in one transaction).

Numbers. The levels are computed on the geometry as written to the SD file
(positions rounded to 10⁻⁴ Å), exactly as the electronic stage reads it; the
ranking single point was converged on the unrounded positions (at most
5·10⁻⁵ Å away), which only moves the SCF's starting point. Converged total
energies do not depend on the start (ΔSCF IP/EA within 10⁻⁷ eV of a cold
start on small molecules); orbital energies converge only to the SCF's
density threshold, so HOMO, LUMO and the frontier integrals differ from a
cold start by up to ~10⁻⁴ eV, as much as either start differs from a tightly
converged SCF. To keep a run's numbers independent of where it was
interrupted, a molecule is resumed as a whole: a structure journalled without
its levels (a job killed in between) is built again. A geometry taken from the
results store has no ranking single point; its neutral starts cold.

References
----------
.. [1] C. Bannwarth, S. Ehlert, S. Grimme, J. Chem. Theory Comput. 15 (2019)
   1652. :doi:`10.1021/acs.jctc.8b01176` (GFN2-xTB)
"""

from __future__ import annotations

from dataclasses import asdict
from pathlib import Path

import numpy as np
import pandas as pd
from rdkit import Chem, RDLogger

from screen.batch import journalled, molecule_caller, report_store_hits
from screen.electronic import (CARRIED_COLUMNS, electronic_engine, electronic_record, molecule_numbers_positions,
                               vertical_levels, write_electronic)
from screen.engines import Engine, SinglePoint
from screen.io import Journal, Progress
from screen.options import ElectronicOptions, StructureOptions
from screen.structures import (build_structure, idle_options, ranking_engine, status_row, structure_record,
                               write_structures)

__all__ = ["neutral_guess_allowed", "structure_step", "levels_step", "run_compute"]

#: the chosen conformer's ranking single point, kept by this process between a molecule's structure step
#: and its levels step: ``{"numbers", "positions_bohr", "singlepoint"}`` (empty when there is none)
_KEPT: dict = {}


def neutral_guess_allowed(structures: StructureOptions, electronic: ElectronicOptions) -> bool:
    """Whether a ranking single point may start the gas-phase neutral's SCF.

    It may when both run the same Hamiltonian in the same backend (tblite, the
    ranking engine; ``ranking_method`` equal to the electronic ``method``): the
    wavefunction then has the neutral's basis and electron count. Per molecule
    the geometry must also be the ranked one (:func:`levels_step` checks it; an
    xTB-optimised geometry has no ranking single point).

    Examples
    --------
    >>> neutral_guess_allowed(StructureOptions(), ElectronicOptions())
    True
    >>> neutral_guess_allowed(StructureOptions(ranking_method="GFN1-xTB"), ElectronicOptions())
    False
    """
    return electronic.engine == "tblite" and structures.ranking_method == electronic.method


def structure_step(smiles: str, options: StructureOptions, engine: Engine, keep: bool) -> tuple[str, dict]:
    """One molecule's structure as (molblock, route record); keep its ranking single point if ``keep``.

    Parameters
    ----------
    smiles : str
        Canonical SMILES (prepare stage).
    options : StructureOptions
    engine : Engine
        Conformer-ranking engine.
    keep : bool
        Keep the chosen conformer's converged ranking single point in this process for
        :func:`levels_step` (:func:`neutral_guess_allowed`); none is kept when nothing was ranked
        or the geometry was optimised afterwards.

    Returns
    -------
    (str, dict)
        As :func:`screen.structures.run_structures` journals them.
    """
    _KEPT.clear()
    mol, info, singlepoint = build_structure(smiles, options, engine, return_singlepoint=True)
    molblock = Chem.MolToMolBlock(mol)
    if keep and singlepoint is not None:
        numbers, positions = molecule_numbers_positions(Chem.MolFromMolBlock(molblock, removeHs=False))
        _KEPT.update(numbers=numbers, positions_bohr=positions, singlepoint=singlepoint)
    return molblock, info


def _kept_guess(numbers, positions_bohr) -> SinglePoint | None:
    """The kept ranking single point if it belongs to exactly these atoms and positions (else None); forgotten."""
    kept = dict(_KEPT)
    _KEPT.clear()
    if not kept or not np.array_equal(kept["numbers"], numbers):
        return None
    return kept["singlepoint"] if np.allclose(kept["positions_bohr"], positions_bohr, rtol=0.0, atol=1e-9) else None


def levels_step(numbers, positions_bohr, options: ElectronicOptions, engine: Engine) -> dict:
    """Raw levels of one geometry (:func:`screen.electronic.vertical_levels`), the gas neutral started from the
    kept ranking single point when it was computed on this geometry (:func:`structure_step`).

    Parameters
    ----------
    numbers : array_like of int, shape (n,)
    positions_bohr : array_like, shape (n, 3)
        The geometry as read from its molblock [bohr].
    options : ElectronicOptions
    engine : Engine
        ΔSCF engine.

    Returns
    -------
    dict
        As :func:`screen.electronic.vertical_levels`.
    """
    guess = _kept_guess(np.asarray(numbers), np.asarray(positions_bohr, float))
    return vertical_levels(numbers, positions_bohr, engine, film_epsilon=options.film_epsilon, neutral_guess=guess,
                           lone_pair_homo=options.lone_pair_homo)


def _job(step: str, *args):
    """Worker-process entry: ``("structure", smiles, options, keep)`` or ``("levels", numbers, positions, options)``
    (options as mappings), with this process's engines."""
    if step == "structure":
        smiles, options, keep = args
        return structure_step(smiles, StructureOptions(**options), ranking_engine(options["ranking_method"]), keep)
    numbers, positions_bohr, options = args
    return levels_step(numbers, positions_bohr, ElectronicOptions(**options), electronic_engine(options))


def _local_job(structures: StructureOptions, electronic: ElectronicOptions, rank_engine: Engine | None,
               dscf_engine: Engine | None):
    """Like :func:`_job`, in this process with the given engines (made from the options where None)."""
    rank_engine = rank_engine or ranking_engine(structures.ranking_method)
    dscf_engine = dscf_engine or electronic.make_engine()

    def job(step: str, *args):
        if step == "structure":
            return structure_step(args[0], structures, rank_engine, args[2])
        return levels_step(args[0], args[1], electronic, dscf_engine)

    return job


class _Later:
    """A stage's results-store cache whose writes wait for the molecule's other stage (:meth:`_Shard.store`)."""

    def __init__(self, cache):
        self.cache, self.rows = cache, []

    @property
    def hits(self) -> int:
        return self.cache.hits

    @property
    def read_problem(self) -> str | None:
        return self.cache.read_problem

    @property
    def write_problem(self) -> str | None:
        return self.cache.write_problem

    def lookup(self, item):
        return self.cache.lookup(item)

    def remember(self, item, record) -> None:
        self.rows.append(self.cache.row(item, record))


class _Shard:
    """Journals, results-store caches and records of one shard's two stages.

    A molecule is resumed as a whole: a structure journalled without its levels
    (a job killed in between) is built again, so its levels start from the same
    ranking single point as in an uninterrupted run; a molecule's fresh results
    go to the store together, after both journal lines.
    """

    def __init__(self, out_csv, out_electronic, structures: StructureOptions, electronic: ElectronicOptions, store):
        from screen.store import electronic_cache, stage_protocol_id, structures_cache

        # each line tagged with its stage protocol: a job killed under other options is not resumed
        self.journals = (Journal(f"{out_csv}.journal.jsonl", tag=stage_protocol_id("structures", structures)),
                         Journal(f"{out_electronic}.journal.jsonl", tag=stage_protocol_id("electronic", electronic)))
        loaded = [j.load() for j in self.journals]
        both = loaded[0].keys() & loaded[1].keys()
        self.done = tuple({k: rec for k, rec in d.items() if k in both} for d in loaded)
        self.mols: dict[str, Chem.Mol | None] = {}  # geometries of ok structures, for the electronic store key
        caches = (structures_cache(store, structures, idle_options),
                  electronic_cache(store, electronic, self.mols, CARRIED_COLUMNS))
        self.caches = tuple(None if c is None else _Later(c) for c in caches)

    def recover(self, smiles: dict) -> None:
        """Store the last resumed molecule if a kill between its journal lines and the store write lost it."""
        if self.caches[0] is None or not self.done[1]:
            return
        key = next(reversed(self.done[1]))
        built = self.done[0][key]
        if built.get("status") == "ok":
            self.mols[key] = Chem.MolFromMolBlock(built["molblock"], removeHs=False)
        self.caches[0].cache.keep((key, smiles.get(key, "")), built)
        self.caches[1].cache.keep(status_row(built), self.done[1][key])

    def todo(self, keys) -> list[str]:
        return [k for k in keys if k not in self.done[1]]

    def structure(self, item, compute) -> dict:
        rec = journalled(item, lambda it: it[0], compute, self.journals[0], self.done[0], self.caches[0])
        if rec["status"] == "ok":
            self.mols[rec["key"]] = Chem.MolFromMolBlock(rec["molblock"], removeHs=False)
        return rec

    def levels(self, row: dict, compute) -> dict:
        return journalled(row, lambda r: r["key"], compute, self.journals[1], self.done[1], self.caches[1])

    def store(self) -> None:
        """Write the fresh results of the last molecule(s) to the store in one transaction."""
        if self.caches[0] is None:
            return
        writer, other = self.caches[0].cache, self.caches[1].cache
        writer.write([*self.caches[0].rows, *self.caches[1].rows])
        if writer.write_problem and other.write_problem is None:  # both stages' rows went in that one write
            other.write_problem = writer.write_problem
        for later in self.caches:
            later.rows.clear()


def run_compute(shard_csv, out_sdf, out_csv, out_electronic, structures: StructureOptions = StructureOptions(),
                electronic: ElectronicOptions = ElectronicOptions(), *, isolate: bool = True,
                timeout_s: float | None = None, progress: Progress | None = None, store=None,
                rank_engine: Engine | None = None,
                dscf_engine: Engine | None = None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Structures and electronic stages of one shard in one pass: ``shard-NNN.csv`` → SDF, status table, levels.

    The outputs equal those of :func:`screen.structures.run_structures` on
    (``shard_csv``, ``out_sdf``, ``out_csv``) followed by
    :func:`screen.electronic.run_electronic` on (``out_sdf``, ``out_csv``,
    ``out_electronic``), timings aside. Per molecule: the structure comes from the
    structures journal, else the results store, else is built; then the levels
    from the electronic journal, else the store, else are computed, by the same
    worker right after its structure (gas neutral started from the ranking single
    point, see the module notes). Each record is journalled (the stages' own
    journal files, so a killed job resumes) and then stored.

    Parameters
    ----------
    shard_csv : path-like
        Shard table with columns ``key, smiles``.
    out_sdf, out_csv : path-like
        Structures outputs (SD file, status table), written atomically.
    out_electronic : path-like
        Electronic table (:data:`screen.electronic.ELECTRONIC_COLUMNS`), written atomically.
    structures : StructureOptions
    electronic : ElectronicOptions
    isolate : bool
        Run each molecule in a child process (both steps in the same one) so a native crash fails one
        molecule, not the shard.
    timeout_s : float, optional
        Time limit of each step of a molecule [s] (isolated runs only), as in the two stages.
    progress : Progress, optional
        Progress reporter (default: lines on standard output).
    store : screen.store.ResultStore, path-like or False, optional
        Results store (default: the one named by ``DASCREEN_STORE``; False: none).
    rank_engine, dscf_engine : Engine, optional
        Conformer-ranking and ΔSCF engines; when either is given, molecules run in this process.

    Returns
    -------
    (pandas.DataFrame, pandas.DataFrame)
        The structures status table and the electronic table.
    """
    RDLogger.DisableLog("rdApp.*")
    shard = pd.read_csv(shard_csv, dtype=str, keep_default_na=False)
    smiles = dict(zip(shard["key"], shard["smiles"]))
    progress = progress or Progress(f"compute {Path(shard_csv).stem}")
    state = _Shard(out_csv, out_electronic, structures, electronic, store)
    state.recover(smiles)
    keep = neutral_guess_allowed(structures, electronic)
    local = None
    if rank_engine is not None or dscf_engine is not None or not isolate:
        local = _local_job(structures, electronic, rank_engine, dscf_engine)
    todo = state.todo(shard["key"])
    with molecule_caller(_job, local, timeout_s) as call:
        def build(item) -> dict:
            return structure_record(item[0], lambda: call("structure", item[1], asdict(structures), keep))

        def levels(row: dict) -> dict:
            return electronic_record(row, state.mols.get(row["key"]),
                                     lambda z, pos: call("levels", z, pos, asdict(electronic)))

        for i, key in enumerate(todo, 1):
            state.levels(status_row(state.structure((key, smiles[key]), build)), levels)
            state.store()
            progress.report(i, len(todo), key)
    resumed = len(shard) - len(todo)  # finished by an earlier, interrupted attempt (journal)
    if todo:
        for k, (cache, what) in enumerate(zip(state.caches, ("structures", "electronic"))):
            report_store_hits(progress, cache, len(todo), what, resumed=resumed if k == 0 else 0)
    elif resumed:
        report_store_hits(progress, None, 0, resumed=resumed)
    tables = (write_structures(shard["key"], state.done[0], out_sdf, out_csv),
              write_electronic(shard["key"], state.done[1], out_electronic))
    for journal in state.journals:
        journal.remove()
    return tables
