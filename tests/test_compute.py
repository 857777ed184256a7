"""Structures and electronic stages in one job (screen.compute): the two-stage files and numbers, the gas
neutral started from the ranking single point only when valid, the results store and the journals."""

from __future__ import annotations

import io
import sqlite3
from dataclasses import asdict
from pathlib import Path
from unittest import mock

import pandas as pd
import pytest

import screen.compute
from screen import engines
from screen.compute import run_compute
from screen.constants import HARTREE_EV
from screen.electronic import molecule_numbers_positions, run_electronic
from screen.io import Progress, run_progress
from screen.options import ElectronicOptions, StructureOptions
from screen.store import ResultStore
from screen.structures import run_structures

#: small molecules: propanol and butanol rank 3 and 6 conformers (a ranking single point to reuse), thiophene
#: has one conformer (no ranking single point), and a SMILES that does not parse fails the structure
MOLS = {"m0000000000000001": "CCCO", "m0000000000000002": "c1ccsc1", "m0000000000000003": "C1CC",
        "m0000000000000004": "CCCCO"}
TIMING = ["wall_s", "sp_wall_s", "structure_wall_s"]
#: ΔSCF differences and total energies: converged energies do not depend on the SCF start (tblite's energy
#: threshold 1e-6 Eh at accuracy 1, from memory; measured differences here below 1e-7 eV)
ENERGY_TOL_EV = 1e-5
#: orbital energies and the integrals built from them converge only to the SCF's density threshold: cold
#: starts differ from a tightly converged SCF (accuracy 0.001) by up to 7e-5 eV on these molecules, warm
#: starts by as much (measured), so two starts may differ by twice that
ORBITAL_TOL_EV = 2e-4
#: both tolerances are for SCF accuracy 1; tblite's convergence thresholds scale with the accuracy factor
#: (from memory), and the default ΔSCF accuracy is 10 (orbital energies of two starts measured 1.1e-3 eV apart)
ACCURACY = ElectronicOptions().accuracy
ORBITAL_COLUMNS = ["xtb_homo_ev", "xtb_lumo_ev", "xtb_gap_ev", "xtb_k_hl_ev", "xtb_j_hl_ev"]


def _shard(folder: Path, mols=MOLS) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "shard-000.csv"
    pd.DataFrame({"key": list(mols), "smiles": list(mols.values())}).to_csv(path, index=False)
    return path


def _merged(folder: Path, store=False, structures=StructureOptions(), electronic=ElectronicOptions(),
            isolate=False, progress=None, mols=MOLS):
    """One pass over the shard; the structures table and the electronic table."""
    return run_compute(_shard(folder, mols), folder / "s.sdf", folder / "s.csv", folder / "e.csv", structures, electronic,
                       isolate=isolate, store=store, progress=progress or _quiet())


def _quiet() -> Progress:
    return Progress("test", stream=io.StringIO())


def _read(path: Path) -> pd.DataFrame:
    return pd.read_csv(path, dtype=str, keep_default_na=False)


def _same_files(a: Path, b: Path, exact: bool = True) -> None:
    """The three outputs of two folders agree: SD files and status tables to the letter, electronic tables
    to the letter (``exact``) or within the SCF tolerances."""
    assert (a / "s.sdf").read_text() == (b / "s.sdf").read_text()
    pd.testing.assert_frame_equal(_read(a / "s.csv").drop(columns="wall_s"), _read(b / "s.csv").drop(columns="wall_s"))
    ea, eb = _read(a / "e.csv").drop(columns=TIMING[1:]), _read(b / "e.csv").drop(columns=TIMING[1:])
    if exact:
        pd.testing.assert_frame_equal(ea, eb)
        return
    numeric = [c for c in ea.columns if c.startswith("xtb_")]
    pd.testing.assert_frame_equal(ea.drop(columns=numeric), eb.drop(columns=numeric))
    ok = ea["status"] == "ok"
    diff = (ea.loc[ok, numeric].astype(float) - eb.loc[ok, numeric].astype(float)).abs().max()
    for col in numeric:
        scale = HARTREE_EV if col.endswith("_eh") else 1.0
        tol = (ORBITAL_TOL_EV if col in ORBITAL_COLUMNS else ENERGY_TOL_EV) * max(1.0, ACCURACY)
        assert diff[col] * scale <= tol, (col, diff[col])


@pytest.fixture()
def calls(monkeypatch):
    """Every engine single point of this process: (keyword arguments, result)."""
    seen = []
    original = engines.Engine.singlepoint

    def spy(self, numbers, positions, **kwargs):
        result = original(self, numbers, positions, **kwargs)
        seen.append((kwargs, result))
        return result

    monkeypatch.setattr(engines.Engine, "singlepoint", spy)
    return seen


@pytest.fixture()
def built(monkeypatch) -> mock.Mock:
    """Every structure the one-pass job builds (:func:`_smiles` lists them)."""
    spy = mock.Mock(wraps=screen.compute.build_structure)
    monkeypatch.setattr(screen.compute, "build_structure", spy)
    return spy


def _smiles(built: mock.Mock) -> list[str]:
    return [call.args[0] for call in built.call_args_list]


def _gas_neutrals(calls) -> list:
    """(guess, result) of every gas-phase neutral of the ΔSCF (the only calls asking for orbitals)."""
    return [(kw.get("guess"), sp) for kw, sp in calls if kw.get("orbitals")]


def test_one_pass_writes_the_files_of_the_two_stages(tmp_path):
    # isolated workers, as in the workflow
    two = tmp_path / "two"
    shard = _shard(two)
    run_structures(shard, two / "s.sdf", two / "s.csv", isolate=True, store=False, progress=_quiet())
    run_electronic(two / "s.sdf", two / "s.csv", two / "e.csv", isolate=True, store=False, progress=_quiet())
    structures, electronic = _merged(tmp_path / "one", isolate=True)
    _same_files(two, tmp_path / "one", exact=False)
    assert list(electronic["key"]) == list(MOLS) == list(structures["key"])
    assert list(electronic["status"]) == ["ok", "ok", "failed", "ok"]
    assert electronic["error"].iloc[2] == structures["error"].iloc[2] == "structure: SMILES does not parse: 'C1CC'"
    assert not list(tmp_path.rglob("*.journal.jsonl"))


@pytest.mark.parametrize("structures,reused", [
    (StructureOptions(), True),
    (StructureOptions(geometry="xtb"), False),  # optimised after the ranking: another geometry
    (StructureOptions(ranking_method="GFN1-xTB"), False),  # another Hamiltonian and basis
])
def test_gas_neutral_starts_from_the_ranking_single_point_only_when_valid(tmp_path, calls, structures, reused):
    run_compute(_shard(tmp_path, {"m1": "CCCO"}), tmp_path / "s.sdf", tmp_path / "s.csv", tmp_path / "e.csv",
                structures, isolate=False, store=False, progress=_quiet())
    (guess, neutral), = _gas_neutrals(calls)
    first_dscf = next(i for i, (kw, _) in enumerate(calls) if kw.get("orbitals"))
    ranking = [sp for _, sp in calls[:first_dscf]]  # the conformer ranking (loose, then the near-lowest tight)
    assert sum("ladder" in kw for kw, _ in calls[:first_dscf]) == 3
    if reused:
        assert any(guess is sp for sp in ranking)
        # with a loose ranking first (rank_scf_accuracy), the winner is among the tight rechecks (no ladder)
        final = [sp for kw, sp in calls[:first_dscf] if "ladder" not in kw] or ranking
        assert guess.energy_eh == min(sp.energy_eh for sp in final)  # the chosen conformer's
        assert guess.energy_eh == pytest.approx(neutral.energy_eh, abs=1e-6)  # same geometry within 5e-5 Å
    else:
        assert guess is None


def test_worker_keeps_the_single_point_between_the_two_steps_of_a_molecule(calls):
    from rdkit import Chem

    smiles = "CCCO"
    molblock, info = screen.compute._job("structure", smiles, asdict(StructureOptions()), True)
    z, pos = molecule_numbers_positions(Chem.MolFromMolBlock(molblock, removeHs=False))
    chosen = [sp for _, sp in calls if sp.energy_eh == info["xtb_rank_energy_eh"]]
    screen.compute._job("levels", z, pos + 1e-3, asdict(ElectronicOptions()))  # another geometry: not used ...
    screen.compute._job("structure", smiles, asdict(StructureOptions()), True)
    screen.compute._job("levels", z, pos, asdict(ElectronicOptions()))  # ... this one is, once
    screen.compute._job("levels", z, pos, asdict(ElectronicOptions()))
    guesses = [g for g, _ in _gas_neutrals(calls)]
    assert guesses[0] is None and guesses[2] is None
    assert guesses[1] is not None and guesses[1].energy_eh == chosen[0].energy_eh
    assert not screen.compute._KEPT


def test_rerun_against_a_filled_store_calls_no_engine(tmp_path, calls, built):
    store = ResultStore(tmp_path / "store.sqlite")
    _merged(tmp_path / "a", store)
    rows = list(store.rows())
    assert sorted((r["stage"], r["key"]) for r in rows) == sorted(
        (stage, k) for stage in ("structures", "electronic") for k in MOLS if k != "m0000000000000003")
    n_calls = len(calls)
    built.reset_mock()
    _merged(tmp_path / "b", store)
    assert len(calls) == n_calls  # both entries stored: no engine call ...
    assert _smiles(built) == ["C1CC"]  # ... and only the failed structure (never stored) tried again
    _same_files(tmp_path / "a", tmp_path / "b")
    assert _read(tmp_path / "a" / "e.csv")["sp_wall_s"].equals(_read(tmp_path / "b" / "e.csv")["sp_wall_s"])

    with sqlite3.connect(tmp_path / "store.sqlite") as db:
        db.execute("DELETE FROM results WHERE stage = 'electronic'")
    n_calls = len(calls)
    built.reset_mock()
    _merged(tmp_path / "c", store)
    assert _smiles(built) == ["C1CC"]  # only the structures stored: levels only, six single points a molecule
    assert len(calls) - n_calls == 6 * 3 and all(g is None for g, _ in _gas_neutrals(calls[n_calls:]))
    _same_files(tmp_path / "a", tmp_path / "c", exact=False)
    assert len(list(store.rows())) == len(rows)


class Killed(BaseException):
    """Stands in for SIGKILL: nothing in the job catches it."""


def test_killed_job_resumes_from_its_journals_to_the_same_numbers(tmp_path, monkeypatch, built):
    _merged(tmp_path / "ref")
    work = tmp_path / "run" / "work" / "candidates"
    shard = _shard(work / "prepared")
    outs = (work / "structures" / "shard-000.sdf", work / "structures" / "shard-000.csv",
            work / "electronic" / "shard-000.csv")
    original, seen = screen.compute.electronic_record, []

    def killed_at_the_last(row, *args):
        seen.append(row["key"])
        if len(seen) == len(MOLS):  # butanol's structure is journalled, its levels are not
            raise Killed
        return original(row, *args)

    monkeypatch.setattr(screen.compute, "electronic_record", killed_at_the_last)
    with pytest.raises(Killed):
        run_compute(shard, *outs, isolate=False, store=False, progress=_quiet())
    monkeypatch.setattr(screen.compute, "electronic_record", original)
    screen.compute._KEPT.clear()  # with the killed process, its ranking single point is gone
    assert not any(p.exists() for p in outs)  # nothing that looks finished
    progress = run_progress(tmp_path / "run")  # dascreen run's progress display counts both journals
    assert (progress["total"], progress["structures"], progress["electronic"]) == (4, 4, 3)

    log = io.StringIO()
    built.reset_mock()
    run_compute(shard, *outs, isolate=False, store=False, progress=Progress("compute shard-000", stream=log,
                                                                           every_s=0))
    # the molecule killed between its two steps is built again, so its levels start from the same ranking
    # single point as in the uninterrupted run (and equal its numbers to the letter)
    assert _smiles(built) == ["CCCCO"]
    lines = log.getvalue().splitlines()
    assert any(line.startswith("compute shard-000: 1/1 molecules (100%)") for line in lines)
    # an overnight operator's report: the job's log says what the interruption cost
    assert lines[-1] == ("compute shard-000: 1 molecule computed; 3 more resumed from the journal (an interrupted "
                         "attempt finished them) (structures)")
    for name, out in zip(("s.sdf", "s.csv", "e.csv"), outs):
        out.rename(tmp_path / "run" / name)
    _same_files(tmp_path / "ref", tmp_path / "run")
    assert not list(tmp_path.rglob("*.journal.jsonl"))


def test_journals_of_a_killed_job_with_other_options_are_not_resumed(tmp_path, monkeypatch):
    # a job killed under one protocol, rerun under another (a changed config, or an upgrade that changed the
    # defaults): the journal lines of the first protocol must not enter the second run's outputs
    mols = {"m1": "CCO", "m2": "c1ccsc1"}
    shard, outs = _shard(tmp_path / "run", mols), (tmp_path / "s.sdf", tmp_path / "s.csv", tmp_path / "e.csv")
    original = screen.compute.electronic_record

    def killed_at_the_second(row, *args):
        if row["key"] == "m2":
            raise Killed
        return original(row, *args)

    monkeypatch.setattr(screen.compute, "electronic_record", killed_at_the_second)
    with pytest.raises(Killed):
        run_compute(shard, *outs, electronic=ElectronicOptions(method="GFN1-xTB"), isolate=False, store=False,
                    progress=_quiet())
    monkeypatch.setattr(screen.compute, "electronic_record", original)
    screen.compute._KEPT.clear()
    run_compute(shard, *outs, isolate=False, store=False, progress=_quiet())
    _merged(tmp_path / "ref", mols=mols)
    for name, out in zip(("s.sdf", "s.csv", "e.csv"), outs):
        out.rename(tmp_path / "run" / name)
    _same_files(tmp_path / "ref", tmp_path / "run")


def test_a_molecule_killed_before_its_store_write_is_stored_on_resume(tmp_path, monkeypatch):
    # the store write comes after both journal lines: a kill in between leaves the molecule journalled (not
    # computed again on resume) but not stored; the resumed job stores it, so a later run in another folder
    # takes every molecule from the store and computes nothing
    mols = {"m1": "CCO", "m2": "c1ccsc1"}
    store = ResultStore(tmp_path / "store.sqlite")
    shard, outs = _shard(tmp_path / "run", mols), (tmp_path / "s.sdf", tmp_path / "s.csv", tmp_path / "e.csv")
    original, calls = screen.compute._Shard.store, []

    def killed_at_the_second_write(self):
        calls.append(1)
        if len(calls) == 2:
            raise Killed
        original(self)

    monkeypatch.setattr(screen.compute._Shard, "store", killed_at_the_second_write)
    with pytest.raises(Killed):
        run_compute(shard, *outs, isolate=False, store=store, progress=_quiet())
    monkeypatch.setattr(screen.compute._Shard, "store", original)
    assert {r["key"] for r in store.rows()} == {"m1"}  # m2 journalled, not stored
    run_compute(shard, *outs, isolate=False, store=store, progress=_quiet())
    assert sorted((r["stage"], r["key"]) for r in store.rows()) == [
        ("electronic", "m1"), ("electronic", "m2"), ("structures", "m1"), ("structures", "m2")]
    with mock.patch.object(screen.compute, "electronic_record", side_effect=AssertionError("computed")):
        _merged(tmp_path / "again", store=store, mols=mols)
    for name, out in zip(("s.sdf", "s.csv", "e.csv"), outs):
        out.rename(tmp_path / "run" / name)
    _same_files(tmp_path / "run", tmp_path / "again")


def test_two_stage_api_stores_the_last_journalled_record_on_resume(tmp_path):
    from screen.batch import run_journalled
    from screen.io import Journal

    journal, kept = Journal(tmp_path / "j.jsonl"), []
    journal.append({"key": "m1", "status": "ok"})  # a job killed after this line, before its store write

    class Cache:
        hits = 0

        def lookup(self, item):
            return None

        def keep(self, item, rec):
            kept.append((item, rec["key"]))

        def remember(self, item, rec):
            pass

    done = run_journalled(["m1", "m2"], str, lambda k: {"key": k, "status": "ok"}, journal, _quiet(), Cache())
    assert kept == [("m1", "m1")] and sorted(done) == ["m1", "m2"]
