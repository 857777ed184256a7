"""The results store: reuse across runs, safety of concurrent runs, corrupt and foreign rows never used,
`dascreen store`, and the 3-D shortlist geometries it (or the run folder) provides."""

from __future__ import annotations

import json
import sqlite3
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
from rdkit import Chem

from screen import engines
from screen.electronic import run_electronic
from screen.options import ElectronicOptions, StructureOptions
from screen.store import STORE_ENV, ResultStore, stage_protocol_id
from screen.structures import run_structures

#: small rigid molecules (milliseconds each with GFN2-xTB)
MOLS = {"m0000000000000001": "c1ccsc1", "m0000000000000002": "c1ccoc1", "m0000000000000003": "c1cc[nH]c1",
        "m0000000000000004": "c1ccncc1", "m0000000000000005": "c1cc[se]c1", "m0000000000000006": "c1cscn1"}
TIMING = ["wall_s", "sp_wall_s", "structure_wall_s"]


@pytest.fixture()
def calls(monkeypatch):
    """Counts every engine single point (all engines, this process)."""
    seen = []
    original = engines.Engine.singlepoint

    def counting(self, numbers, *args, **kwargs):
        seen.append(len(numbers))
        return original(self, numbers, *args, **kwargs)

    monkeypatch.setattr(engines.Engine, "singlepoint", counting)
    return seen


@pytest.fixture()
def built(monkeypatch):
    """Counts every structure built (the structures stage's unit of work; tiny rigid molecules need no
    engine call there)."""
    import screen.structures

    seen = []
    original = screen.structures.build_structure

    def counting(smiles, *args, **kwargs):
        seen.append(smiles)
        return original(smiles, *args, **kwargs)

    monkeypatch.setattr(screen.structures, "build_structure", counting)
    return seen


def _shard(folder: Path, keys) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "shard-000.csv"
    pd.DataFrame({"key": list(keys), "smiles": [MOLS[k] for k in keys]}).to_csv(path, index=False)
    return path


def _run(folder: Path, keys, store, structures=StructureOptions(), electronic=ElectronicOptions()):
    """Both compute stages of one shard in this process; the electronic table."""
    shard = _shard(folder, keys)
    run_structures(shard, folder / "s.sdf", folder / "s.csv", structures, isolate=False, store=store)
    return run_electronic(folder / "s.sdf", folder / "s.csv", folder / "e.csv", electronic, isolate=False,
                          store=store)


def _same(a: pd.DataFrame, b: pd.DataFrame) -> None:
    cols = [c for c in a.columns if c not in TIMING]
    pd.testing.assert_frame_equal(a[cols].reset_index(drop=True), b[cols].reset_index(drop=True))


# --------------------------------------------------------------------------- the store itself

def test_rows_round_trip_in_wal_mode(tmp_path):
    store = ResultStore(tmp_path / "s.sqlite")
    store.put("structures", "m1", {"seed": 1}, {"status": "ok", "molblock": "x"})
    assert store.get("structures", "m1", stage_protocol_id("structures", {"seed": 1})) == \
        {"status": "ok", "molblock": "x"}
    mode = sqlite3.connect(tmp_path / "s.sqlite").execute("PRAGMA journal_mode").fetchone()[0]
    assert mode == "wal"


def test_corrupt_and_foreign_rows_are_not_returned(tmp_path):
    store = ResultStore(tmp_path / "s.sqlite")
    mine, other = {"method": "GFN2-xTB"}, {"method": "GFN1-xTB"}
    pid = stage_protocol_id("electronic", mine)
    store.put("electronic", "m1", mine, {"status": "ok", "xtb_ip_ev": 9.0}, geometry="g")
    store.put("electronic", "m2", other, {"status": "ok", "xtb_ip_ev": 8.0}, geometry="g")
    assert store.get("electronic", "m1", pid, "g")["xtb_ip_ev"] == 9.0
    assert store.get("electronic", "m1", pid, "another geometry") is None
    with sqlite3.connect(tmp_path / "s.sqlite") as db:
        # a foreign row relabelled with this protocol id, and a row whose payload was damaged
        db.execute("UPDATE results SET protocol_id = ? WHERE key = 'm2'", (pid,))
        db.execute("UPDATE results SET payload = replace(payload, '9.0', '7.0') WHERE key = 'm1'")
    assert store.get("electronic", "m2", pid, "g") is None
    assert store.get("electronic", "m1", pid, "g") is None
    assert store.prune(dry_run=True) == {"protocol": 0, "old": 0, "corrupt": 2}


def test_a_foreign_database_is_refused(tmp_path):
    from screen.errors import InputError

    with sqlite3.connect(tmp_path / "other.sqlite") as db:
        db.execute("CREATE TABLE info (name TEXT PRIMARY KEY, value TEXT NOT NULL)")
        db.execute("INSERT INTO info VALUES ('application', 'something else')")
    with pytest.raises(InputError, match="belongs to 'something else'"):
        ResultStore(tmp_path / "other.sqlite").summary()


# --------------------------------------------------------------------------- the stages with a store

def test_overlapping_list_computes_only_the_new_half(tmp_path, calls, built):
    keys = sorted(MOLS)
    first, second = keys[:4], keys[2:]  # second list: half old, half new
    store = ResultStore(tmp_path / "store.sqlite")
    _run(tmp_path / "a", first, store)
    n_calls, n_built = len(calls), len(built)
    overlap = _run(tmp_path / "b", second, store)
    assert built[n_built:] == [MOLS[k] for k in keys[4:]]  # only the new half got a structure ...
    reused_run = len(calls) - n_calls
    n_calls = len(calls)
    _run(tmp_path / "c", keys[4:], ResultStore(tmp_path / "fresh.sqlite"))
    assert reused_run == len(calls) - n_calls > 0  # ... and exactly the engine calls of the new half
    _same(overlap, _run(tmp_path / "d", second, False))  # with the numbers of a run without a store


def test_rerun_of_a_computed_list_calls_no_engine(tmp_path, calls, built):
    store = ResultStore(tmp_path / "store.sqlite")
    first = _run(tmp_path / "a", sorted(MOLS)[:3], store)
    n, m = len(calls), len(built)
    again = _run(tmp_path / "b", sorted(MOLS)[:3], store)
    assert len(calls) == n and n > 0 and len(built) == m == 3
    _same(first, again)


def test_foreign_protocol_rows_are_not_used(tmp_path, calls):
    keys = sorted(MOLS)[:2]
    store = ResultStore(tmp_path / "store.sqlite")
    other = ElectronicOptions(method="GFN1-xTB")
    _run(tmp_path / "a", keys, store, electronic=other)
    mine = stage_protocol_id("electronic", ElectronicOptions())
    with sqlite3.connect(tmp_path / "store.sqlite") as db:  # relabel the GFN1 rows as if they were GFN2 rows
        db.execute("UPDATE results SET protocol_id = ? WHERE stage = 'electronic'", (mine,))
    n = len(calls)
    table = _run(tmp_path / "b", keys, store)
    used = len(calls) - n
    n = len(calls)
    run_electronic(tmp_path / "b" / "s.sdf", tmp_path / "b" / "s.csv", tmp_path / "b" / "e2.csv", isolate=False,
                   store=False)
    assert used == len(calls) - n > 0  # every electronic single point recomputed, none taken from the store
    _same(table, _run(tmp_path / "c", keys, False))


def test_a_corrupt_row_is_recomputed_and_replaced(tmp_path, built):
    keys = sorted(MOLS)[:2]
    store = ResultStore(tmp_path / "store.sqlite")
    good = _run(tmp_path / "a", keys, store)
    with sqlite3.connect(tmp_path / "store.sqlite") as db:
        db.execute("UPDATE results SET payload = substr(payload, 1, 40) WHERE stage = 'structures' AND key = ?",
                   (keys[0],))
    n = len(built)
    again = _run(tmp_path / "b", keys, store)
    assert built[n:] == [MOLS[keys[0]]]  # the damaged structure was computed again ...
    _same(good, again)  # ... to the same numbers
    assert store.prune(dry_run=True)["corrupt"] == 0  # and its row replaced by a good one


def test_an_unreadable_store_file_only_costs_the_reuse(tmp_path, capfd):
    bad = tmp_path / "store.sqlite"
    bad.write_bytes(b"not a database" * 100)
    table = _run(tmp_path / "a", sorted(MOLS)[:1], ResultStore(bad))
    assert (table["status"] == "ok").all()
    assert "results store" in capfd.readouterr().err


def test_journal_line_is_written_before_the_store(tmp_path):
    from screen.batch import run_journalled
    from screen.io import Journal, Progress

    journal = Journal(tmp_path / "j.jsonl")

    class Cache:
        hits = 0

        def lookup(self, item):
            return None

        def remember(self, item, rec):
            assert item in journal.load()  # a kill between the two loses nothing

    run_journalled(["m1", "m2"], str, lambda k: {"key": k, "status": "ok"}, journal,
                   Progress("t", stream=open(tmp_path / "log", "w")), Cache())


def test_two_runs_at_once_on_one_store_finish_with_identical_results(tmp_path):
    keys = sorted(MOLS)
    code = ("import sys\nfrom pathlib import Path\nsys.path.insert(0, {tests!r})\n"
            "from test_store import _run\nfrom screen.store import ResultStore\n"
            "t = _run(Path(sys.argv[1]), {keys!r}, ResultStore(sys.argv[2]))\n"
            "t.to_csv(Path(sys.argv[1]) / 'result.csv', index=False)\n").format(tests=str(Path(__file__).parent),
                                                                               keys=keys)
    store = tmp_path / "shared.sqlite"
    procs = [subprocess.Popen(["nice", sys.executable, "-c", code, str(tmp_path / name), str(store)],
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True) for name in ("x", "y")]
    outs = [p.communicate(timeout=600) for p in procs]
    assert [p.returncode for p in procs] == [0, 0], outs
    a, b = (pd.read_csv(tmp_path / name / "result.csv") for name in ("x", "y"))
    _same(a, b)
    rows = list(ResultStore(store).rows())
    assert len(rows) == 2 * len(keys) and all(r["ok"] for r in rows)


# --------------------------------------------------------------------------- dascreen store

def test_store_command_lists_exports_and_prunes(tmp_path, capsys):
    from screen.cli import main

    store = ResultStore(tmp_path / "store.sqlite")
    _run(tmp_path / "a", sorted(MOLS)[:2], store)
    assert main(["store", "list", "--store", str(store.path)]) == 0
    listed = capsys.readouterr().out
    assert "structures-" in listed and "electronic-" in listed
    # the rows these settings read are marked: the small molecules here are stored under the structures id of the
    # earlier embedding rule (structures.rigid_embedding changes nothing for them), which a prune must spare
    from screen.options import StructureOptions

    earlier = stage_protocol_id("structures", StructureOptions(rigid_embedding="cycle_rank"))
    line = next(x for x in listed.splitlines() if earlier in x)
    assert line.endswith("yes, for molecules that newer structures options leave unchanged")
    assert next(x for x in listed.splitlines() if "electronic-" in x).endswith("yes")
    assert main(["store", "prune", "--store", str(store.path), "--protocol", earlier, "--dry-run"]) == 0
    assert f"note: {earlier} is read by the current settings for molecules that newer" in capsys.readouterr().err
    assert main(["store", "export", "--store", str(store.path), "--to", str(tmp_path / "x.sdf")]) == 0
    mols = list(Chem.SDMolSupplier(str(tmp_path / "x.sdf"), removeHs=False))
    assert len(mols) == 2 and all(any(p.endswith(":xtb_ip_ev") for p in m.GetPropNames()) for m in mols)
    assert main(["store", "export", "--store", str(store.path), "--to", str(tmp_path / "x.csv")]) == 0
    assert len(pd.read_csv(tmp_path / "x.csv")) == 4
    pid = stage_protocol_id("electronic", ElectronicOptions())
    capsys.readouterr()
    assert main(["store", "prune", "--store", str(store.path), "--protocol", pid]) == 0
    assert "deleted 2 rows" in capsys.readouterr().out
    assert [r["stage"] for r in store.rows()] == ["structures", "structures"]


# --------------------------------------------------------------------------- 3-D shortlist

def _levels_for(folder: Path, key: str, smiles: str) -> Path:
    """A levels file of one computed donor (invented levels that pass against c60)."""
    from screen.config import Config

    path = folder / "levels.csv"
    pd.DataFrame([{"id": "KF-D02", "smiles": smiles, "key": key, "status": "ok", "homo_ev": -5.55,
                   "lumo_ev": -3.60, "gap_opt_ev": 1.95, "scale": "film", "role": "donor"}]).to_csv(path, index=False)
    meta = {"protocol": Config.of({}).protocol}
    Path(f"{path}.meta.json").write_text(json.dumps(meta))
    return path


def _shortlisted(path: Path):
    mols = list(Chem.SDMolSupplier(str(path.parent / "shortlist.sdf"), removeHs=False))
    assert len(mols) == 1
    return mols[0]


def _assert_same_geometry(mol, reference) -> None:
    assert mol.GetNumAtoms() == reference.GetNumAtoms() and any(a.GetAtomicNum() == 1 for a in mol.GetAtoms())
    pos, ref = mol.GetConformer().GetPositions(), reference.GetConformer().GetPositions()
    assert abs(pos[:, 2]).max() > 0.1 or abs(pos[:, 1]).max() > 0.1  # coordinates, not all zero
    assert abs(pos - ref).max() < 1e-3
    assert mol.GetConformer().Is3D()


def test_shortlist_carries_the_computed_geometry_of_the_run(tmp_path):
    from screen.rank_io import run_rank

    key, smiles = "m00000000000000aa", "c1ccc(-c2cccs2)s1"
    structures = tmp_path / "work" / "candidates" / "structures"
    shard = _write_one(tmp_path / "work" / "candidates" / "prepared", key, smiles)
    run_structures(shard, structures / "shard-000.sdf", structures / "shard-000.csv", isolate=False, store=False)
    path = run_rank(_levels_for(tmp_path, key, smiles), "c60", tmp_path, {}, report=False)
    mol = _shortlisted(path)
    reference = next(iter(Chem.SDMolSupplier(str(structures / "shard-000.sdf"), removeHs=False)))
    _assert_same_geometry(mol, reference)
    assert mol.GetProp("structure_key") == key and mol.GetProp("geometry_source").startswith("computed")
    assert float(mol.GetProp("homo_ev")) == -5.55 and mol.GetProp("scale") == "film"


def test_shortlist_geometry_from_the_store_when_the_run_folder_has_none(tmp_path, monkeypatch):
    from screen.rank_io import run_rank

    key, smiles = "m00000000000000ab", "c1ccc(-c2cccs2)s1"
    store_path = tmp_path / "store.sqlite"
    work = tmp_path / "elsewhere"
    run_structures(_write_one(work, key, smiles), work / "s.sdf", work / "s.csv", isolate=False,
                   store=ResultStore(store_path))
    monkeypatch.setenv(STORE_ENV, str(store_path))
    run = tmp_path / "run"
    run.mkdir()
    mol = _shortlisted(run_rank(_levels_for(run, key, smiles), "c60", run, {}, report=False))
    _assert_same_geometry(mol, next(iter(Chem.SDMolSupplier(str(work / "s.sdf"), removeHs=False))))
    monkeypatch.setenv(STORE_ENV, "")  # no store, no computed geometry: embedded here, and said so
    other = tmp_path / "run2"
    other.mkdir()
    mol = _shortlisted(run_rank(_levels_for(other, key, smiles), "c60", other, {}, report=False))
    assert mol.GetProp("geometry_source").startswith("no computed geometry")
    assert any(a.GetAtomicNum() == 1 for a in mol.GetAtoms()) and mol.GetConformer().Is3D()


def _write_one(folder: Path, key: str, smiles: str) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "shard-000.csv"
    pd.DataFrame({"key": [key], "smiles": [smiles]}).to_csv(path, index=False)
    return path


def test_later_options_at_their_earlier_values_keep_the_stage_ids():
    # options added after the store existed leave the ids of results computed before them unchanged at the
    # values that give the earlier route (EARLIER_ROUTE_VALUES), and change them at any other value (the defaults
    # since the switch included)
    from dataclasses import asdict

    from screen.options import EARLIER_ROUTE_VALUES, StructureOptions
    from screen.store import stage_protocol_id

    earlier = StructureOptions(**EARLIER_ROUTE_VALUES["structures"])
    plain = {k: v for k, v in asdict(earlier).items() if k not in EARLIER_ROUTE_VALUES["structures"]}
    assert stage_protocol_id("structures", earlier) == stage_protocol_id("structures", plain)
    assert stage_protocol_id("structures", StructureOptions()) != stage_protocol_id("structures", plain)
    assert stage_protocol_id("structures", StructureOptions(**{**EARLIER_ROUTE_VALUES["structures"],
                                                                "rank_warm_start": True})) != \
        stage_protocol_id("structures", plain)


# --------------------------------------------------------------------------- `dascreen store` refuses, changes nothing

def _store_cli(capsys, *args):
    from screen.cli import main

    rc = main(["store", *args])
    return rc, capsys.readouterr()


def _one_row_store(path: Path) -> ResultStore:
    store = ResultStore(path)
    store.put("electronic", "m0123456789abcdef", {"method": "GFN2-xTB"}, {"status": "ok", "xtb_ip_ev": 9.1})
    store.close()
    return store


@pytest.mark.parametrize("content, said", [
    (b"", "an empty file, not a results store"),
    (b"hello\n", "not a results store (not an SQLite database)"),
    (None, "holds no dascreen results"),
])
@pytest.mark.parametrize("action", [["list"], ["export", "--to", "x.csv"], ["prune"], ["prune", "--dry-run"]])
def test_a_file_that_is_no_store_is_refused_and_left_as_it_was(tmp_path, capsys, monkeypatch, content, said, action):
    # `dascreen store list --store afile` turned an empty or text file into an SQLite database
    monkeypatch.chdir(tmp_path)
    path = tmp_path / "afile"
    if content is None:  # another program's SQLite database
        with sqlite3.connect(path) as db:
            db.execute("CREATE TABLE t (x)")
        db.close()
    else:
        path.write_bytes(content)
    before = path.read_bytes()
    rc, captured = _store_cli(capsys, *action, "--store", str(path))
    assert rc == 2 and said in captured.err and "the file was not changed" in captured.err
    assert len(captured.err.strip().splitlines()) == 1 and "Traceback" not in captured.err
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["afile"]  # no export, no -wal or -shm


def test_list_and_export_leave_a_store_unchanged(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    path = tmp_path / "s.sqlite"
    _one_row_store(path)
    before = path.read_bytes()
    for action in (["list", "--keys"], ["export", "--to", "x.csv"], ["prune", "--dry-run"]):
        assert _store_cli(capsys, *action, "--store", str(path))[0] == 0
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["s.sqlite", "x.csv"]  # the -wal and -shm are gone too


def test_an_unknown_protocol_or_export_type_is_refused(tmp_path, capsys, monkeypatch):
    # `export --protocol nope` wrote an empty file with exit 0, `prune --protocol nope` pruned nothing silently, and
    # `--to x.xyz` wrote SD records under another name
    monkeypatch.chdir(tmp_path)
    path = tmp_path / "s.sqlite"
    _one_row_store(path)
    held = stage_protocol_id("electronic", {"method": "GFN2-xTB"})
    for action in (["export", "--to", "x.sdf"], ["prune"], ["prune", "--dry-run"]):
        rc, captured = _store_cli(capsys, *action, "--store", str(path), "--protocol", "nope")
        assert rc == 2 and f"unknown protocol nope; the store {path} holds: {held}" in captured.err
    rc, captured = _store_cli(capsys, "export", "--store", str(path), "--to", "x.xyz")
    assert rc == 2 and "--to x.xyz: the export is written as .sdf" in captured.err and "--to x.sdf" in captured.err
    rc, captured = _store_cli(capsys, "export", "--store", str(path), "--to", str(tmp_path / "no" / "x.csv"))
    assert rc == 2 and "does not exist" in captured.err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["s.sqlite"]
    assert [r["protocol_id"] for r in ResultStore(path).rows()] == [held]


@pytest.mark.skipif(not Path("/proc/self").is_dir(), reason="needs /proc (a folder no file can be made in)")
def test_an_export_that_cannot_be_written_is_one_message(tmp_path, capsys):
    # `store export --to /sys/x.sdf` gave a traceback
    path = tmp_path / "s.sqlite"
    _one_row_store(path)
    rc, captured = _store_cli(capsys, "export", "--store", str(path), "--to", "/proc/dascreen-x.sdf")
    assert rc == 2 and captured.err.startswith("dascreen: error: --to /proc/dascreen-x.sdf: cannot write")
    assert "Traceback" not in captured.err and len(captured.err.strip().splitlines()) == 1


def test_a_library_upgrade_keys_rows_of_its_own(monkeypatch):
    # an engine audit: the store key left out the tblite and RDKit versions, so a recalibration after an upgrade
    # silently reused numbers of the old version; at today's versions the ids stay those filled stores were written with
    from screen import store
    from screen.config import Config

    cfg = Config.of({})
    before = (store.stage_protocol_id("structures", cfg.structures), store.stage_protocol_id("electronic", cfg.electronic))
    real = store.package_version
    monkeypatch.setattr(store, "package_version", lambda name: "0.9.1" if name == "tblite" else real(name))
    after = (store.stage_protocol_id("structures", cfg.structures), store.stage_protocol_id("electronic", cfg.electronic))
    assert before[0] != after[0] and before[1] != after[1]
    assert store.stage_protocol("electronic", cfg.electronic)["tblite_version"] == "0.9"
    ids = []
    for patch in ("0.8.0", "0.8.7"):  # a patch release keys no new rows
        monkeypatch.setattr(store, "package_version", lambda name, v=patch: v if name == "tblite" else real(name))
        ids.append(store.stage_protocol_id("electronic", cfg.electronic))
    assert ids[0] == ids[1]
