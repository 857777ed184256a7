"""A results store shared by runs of several environments and users: rows of other library versions kept, a
damaged, read-only or unusable store said once on the console (never a traceback), the job logs worded truthfully,
the store a run used recorded, and a killed job or worker named as such (a concurrency audit of shared stores)."""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import signal
import sqlite3
import subprocess
import threading
from pathlib import Path

import pandas as pd
import pytest

from screen import store as st
from screen.errors import InputError
from screen.store import STORE_ENV, ResultStore, stage_protocol_id, store_text

#: library versions of two group members' environments (only the RDKit version differs; the installed
#: versions of today are BASE_LIBRARY_VERSIONS, so environment A keys the ids filled stores were written with)
ENV_A = {"rdkit": "2026.9.1", "tblite": "0.8.0"}
ENV_B = {"rdkit": "2027.3.0", "tblite": "0.8.0"}
STRUCTURES = {"seed": 61453}


def _env(monkeypatch, versions: dict) -> None:
    monkeypatch.setattr(st, "package_version", lambda lib: versions.get(lib, "0"))


def _fill(monkeypatch, path: Path, versions: dict, keys=("m00000000000000aa", "m00000000000000bb")) -> str:
    _env(monkeypatch, versions)
    store = ResultStore(path)
    for key in keys:
        store.put("structures", key, STRUCTURES, {"status": "ok", "x": 1})
    store.close()
    return stage_protocol_id("structures", STRUCTURES)


# --------------------------------------------------------------------------- F1: rows of other library versions

@pytest.mark.parametrize("writer, reader", [(ENV_A, ENV_B), (ENV_B, ENV_A)], ids=["base-read-by-upgrade",
                                                                                   "upgrade-read-by-base"])
def test_rows_of_another_library_version_check_out_and_survive_a_prune(tmp_path, monkeypatch, writer, reader):
    # a concurrency audit: `dascreen store prune` run in an environment with another RDKit deleted every row of the
    # other version as "does not check out" (the check re-derived the protocol with the installed versions), in one
    # direction only; a row is checked against its own stored protocol now, whichever environment reads it
    path = tmp_path / "s.sqlite"
    written = _fill(monkeypatch, path, writer)
    _env(monkeypatch, reader)
    store = ResultStore(path)
    assert stage_protocol_id("structures", STRUCTURES) != written  # the reader keys rows of its own ...
    assert store.get("structures", "m00000000000000aa", stage_protocol_id("structures", STRUCTURES)) is None
    assert all(r["ok"] for r in store.rows()) and len(list(store.rows())) == 2  # ... and the writer's check out
    assert store.get("structures", "m00000000000000aa", written) == {"status": "ok", "x": 1}
    assert store.prune() == {"protocol": 0, "old": 0, "corrupt": 0}
    assert len(list(store.rows())) == 2


def test_a_damaged_row_does_not_check_out_in_either_environment(tmp_path, monkeypatch):
    path = tmp_path / "s.sqlite"
    pid = _fill(monkeypatch, path, ENV_B)
    with sqlite3.connect(path) as db:  # a payload changed without its checksum ...
        db.execute("UPDATE results SET payload = replace(payload, '\"x\": 1', '\"x\": 2') "
                   "WHERE key = 'm00000000000000aa'")
        # ... and one whose protocol was changed with a checksum made to match: the protocol hashes to another id
        payload = db.execute("SELECT payload FROM results WHERE key = 'm00000000000000bb'").fetchone()[0]
        data = json.loads(payload)
        data["protocol"]["seed"] = 1
        text = json.dumps(data, sort_keys=True)
        db.execute("UPDATE results SET payload = ?, sha256 = ? WHERE key = 'm00000000000000bb'",
                   (text, st._digest(text)))
    for versions in (ENV_A, ENV_B):
        _env(monkeypatch, versions)
        assert [r["ok"] for r in ResultStore(path).rows()] == [False, False]
        assert ResultStore(path).get("structures", "m00000000000000bb", pid) is None


def test_store_ids_hash_their_own_stored_protocol(monkeypatch):
    # the check of a row hashes its stored protocol as it is: every id the store writes must be that hash
    from screen.config import Config

    cfgs = [Config.of({}), Config.of({"structures": {"geometry": "xtb"}}),
            Config.of({"structures": {"planar_variants": True}}),
            Config.of({"structures": {"rigid_embedding": "cycle_rank"}, "electronic": {"method": "GFN1-xTB"}})]
    for versions in (ENV_A, ENV_B, {"rdkit": "2027.3.0", "tblite": "0.9.1"}):
        _env(monkeypatch, versions)
        for cfg in cfgs:
            for stage, options in (("structures", cfg.structures), ("electronic", cfg.electronic)):
                protocol = st.stage_protocol(stage, options)
                row = st.store_row(stage, "m1", options, {"status": "ok"})
                assert row[2] == stage_protocol_id(stage, options) == st._protocol_hash(stage, protocol)


def test_the_list_names_the_library_versions_of_rows_written_with_others(tmp_path, monkeypatch, capsys):
    from screen.cli import main

    path = tmp_path / "s.sqlite"
    written = _fill(monkeypatch, path, ENV_A)
    _env(monkeypatch, ENV_B)
    text = store_text(ResultStore(path, read_only=True), keys=True, used={"structures-0000000000000000": "yes"})
    line = next(x for x in text.splitlines() if written in x and "2026" in x)
    assert "other library versions: rdkit 2026.9 (installed 2027.3)" in line
    assert "does not check out" not in text
    assert main(["store", "prune", "--store", str(path)]) == 0
    assert "deleted 0 rows" in capsys.readouterr().out and len(list(ResultStore(path).rows())) == 2


# --------------------------------------------------------------------------- F2: a damaged store file

def _damaged(path: Path) -> Path:
    store = ResultStore(path)
    for i in range(60):
        store.put("structures", f"m{i:016x}", STRUCTURES, {"status": "ok", "molblock": "x" * 3000})
    store.close()
    data = bytearray(path.read_bytes())
    for page in range(3, len(data) // 4096):  # the b-tree pages of the results table: garbage headers
        data[page * 4096:page * 4096 + 8] = b"\xff" * 8
    path.write_bytes(bytes(data))
    with pytest.raises(sqlite3.DatabaseError, match="malformed"):
        list(sqlite3.connect(path).execute("SELECT * FROM results"))
    return path


@pytest.mark.parametrize("action", [["list"], ["list", "--keys"], ["prune"], ["prune", "--dry-run"],
                                    ["export", "--to", "{tmp}/x.csv"]])
def test_a_damaged_store_file_is_one_message_and_exit_2(tmp_path, capsys, action):
    from screen.cli import main

    path = _damaged(tmp_path / "s.sqlite")
    before = path.read_bytes()
    rc = main(["store", *[a.format(tmp=tmp_path) for a in action], "--store", str(path)])
    err = capsys.readouterr().err
    assert rc == 2 and "Traceback" not in err and len(err.strip().splitlines()) == 1, err
    assert err.startswith(f"dascreen: error: results store {path} is damaged (database disk image is malformed)")
    assert "move it away" in err and "computed again" in err
    assert path.read_bytes() == before


def test_a_store_damaged_where_it_is_opened_also_says_move_it_away(tmp_path, capsys):
    # a fact-check of the docs: a store truncated to 100 bytes was refused with "give the store file of a run",
    # which points to another file, not to the fix
    from screen.cli import main

    path = _damaged(tmp_path / "s.sqlite")
    path.write_bytes(path.read_bytes()[:100])
    rc = main(["store", "list", "--store", str(path)])
    err = capsys.readouterr().err
    assert rc == 2 and len(err.strip().splitlines()) == 1, err
    assert " is damaged (" in err and "move it away" in err and "give the store file" not in err, err


# --------------------------------------------------------------------------- F3: a read-only store

@contextlib.contextmanager
def _read_only(path: Path):
    """``path`` (a file or folder) made unwritable even for root: immutable (chattr), else without write bits."""
    if os.geteuid() == 0:
        if shutil.which("chattr") is None or subprocess.call(["chattr", "+i", str(path)],
                                                             stderr=subprocess.DEVNULL) != 0:
            pytest.skip("no chattr +i here: root cannot make a file read-only")
        try:
            yield
        finally:
            subprocess.call(["chattr", "-i", str(path)])
    else:
        mode = path.stat().st_mode
        path.chmod(mode & ~0o222)
        try:
            yield
        finally:
            path.chmod(mode)


@pytest.mark.parametrize("which", ["file", "folder"])
def test_a_read_only_store_is_read_and_says_new_results_are_not_stored(tmp_path, monkeypatch, capsys, which):
    from screen.cli import main

    folder = tmp_path / "shared"
    folder.mkdir()
    path = folder / "s.sqlite"
    pid = _fill(monkeypatch, path, ENV_A)
    monkeypatch.undo()
    with _read_only(path if which == "file" else folder):
        store = ResultStore(path)
        assert store.get("structures", "m00000000000000aa", pid) == {"status": "ok", "x": 1}
        assert not store.writable()
        with pytest.raises(InputError, match="read-only.*new results are not stored"):
            store.put("structures", "m00000000000000cc", STRUCTURES, {"status": "ok"})
        store.close()
        assert main(["store", "list", "--store", str(path)]) == 0
        assert "structures-" in capsys.readouterr().out
        assert main(["store", "prune", "--store", str(path)]) == 2
        err = capsys.readouterr().err
        assert "read-only" in err and len(err.strip().splitlines()) == 1
        lines = st.run_store_lines(path)
        assert len(lines) == 1 and lines[0].startswith(f"dascreen: warning: results store {path} is read-only")
        assert "new results will not be stored" in lines[0]
    if which == "folder":  # nothing could be created beside it
        assert sorted(p.name for p in folder.iterdir()) == ["s.sqlite"]


# --------------------------------------------------------------------------- F4: said on the console, truthfully logged

def _cases(tmp_path: Path) -> dict:
    (tmp_path / "afolder").mkdir()
    (tmp_path / "afile").write_text("x")
    (tmp_path / "text.sqlite").write_text("not a database" * 100)
    return {"folder": (tmp_path / "afolder", "is a folder"),
            "under a file": (tmp_path / "afile" / "s.sqlite", "cannot be created"),
            "not a database": (tmp_path / "text.sqlite", "not an SQLite database"),
            "damaged": (_damaged(tmp_path / "bad.sqlite"), "is damaged")}


def _run_workflow(tmp_path, monkeypatch, cfg=None) -> int:
    import screen.launch
    from screen.config import Config
    from screen.launch import run_workflow

    monkeypatch.setattr(screen.launch, "_wait", lambda proc: 0)
    monkeypatch.setattr(screen.launch, "_start", lambda cmd, env, **kw: subprocess.Popen(["true"]))
    monkeypatch.setattr(screen.launch, "calibration_pin", lambda cfg, out: None)
    return run_workflow(cfg or Config(), tmp_path / "out", 1, verbose=True)


@pytest.mark.parametrize("case", ["folder", "under a file", "not a database", "damaged"])
def test_a_store_that_cannot_be_used_is_one_warning_before_the_run(tmp_path, monkeypatch, capsys, case):
    # a concurrency audit: every store problem was only in the job logs, which said "0 of 3 molecules from the
    # results store" as if the store had been asked
    path, said = _cases(tmp_path)[case]
    monkeypatch.setenv(STORE_ENV, str(path))
    assert _run_workflow(tmp_path, monkeypatch) == 0  # not a refusal: the run computes
    lines = [x for x in capsys.readouterr().err.splitlines() if "results store" in x]
    assert len(lines) == 1 and lines[0].startswith(f"dascreen: warning: results store {path}"), lines
    assert said in lines[0] and "every molecule is computed" in lines[0]


def test_the_run_names_the_store_it_uses_and_a_new_one_it_will_create(tmp_path, monkeypatch, capsys):
    new = tmp_path / "group" / "stores" / "s.sqlite"
    monkeypatch.setenv(STORE_ENV, str(new))
    _run_workflow(tmp_path, monkeypatch)
    err = capsys.readouterr().err
    assert f"dascreen: results store {new} (new: this run creates it, with the folder {new.parent})" in err
    assert not new.parent.exists()  # the check changes nothing
    ResultStore(new).check()
    _run_workflow(tmp_path, monkeypatch)
    assert f"dascreen: results store {new}\n" in capsys.readouterr().err
    monkeypatch.setenv(STORE_ENV, "")
    _run_workflow(tmp_path, monkeypatch)
    assert "dascreen: results store: none (DASCREEN_STORE is empty)" in capsys.readouterr().err


def test_a_job_log_says_the_store_was_not_usable_instead_of_counting_hits(tmp_path):
    import io

    from screen.compute import run_compute
    from screen.io import Progress

    bad = tmp_path / "text.sqlite"
    bad.write_text("not a database" * 100)
    shard = tmp_path / "shard-000.csv"
    pd.DataFrame({"key": ["m0000000000000001"], "smiles": ["c1ccsc1"]}).to_csv(shard, index=False)
    log = io.StringIO()
    run_compute(shard, tmp_path / "s.sdf", tmp_path / "s.csv", tmp_path / "e.csv", isolate=False,
                progress=Progress("compute shard-000", stream=log), store=ResultStore(bad))
    text = log.getvalue()
    assert "from the results store" not in text
    assert "compute shard-000: 1 molecule computed; the results store was not usable: " in text


def test_a_job_log_says_new_results_were_not_stored_when_only_writes_fail():
    import io

    from screen.batch import report_store_hits
    from screen.io import Progress

    class Cache:
        hits, read_problem, write_problem = 1, None, "attempt to write a readonly database"

    p = Progress("compute shard-000", stream=io.StringIO())
    report_store_hits(p, Cache(), 3, "electronic")
    assert p.stream.getvalue() == ("compute shard-000: 1 of 3 molecules from the results store, 2 computed; new "
                                   "results were not stored: attempt to write a readonly database (electronic)\n")


# --------------------------------------------------------------------------- F8: the store a run used is recorded

def test_the_config_of_a_run_records_the_store_it_used(tmp_path, monkeypatch, capsys):
    import yaml

    from screen.config import Config

    used, asked = tmp_path / "env.sqlite", tmp_path / "set.sqlite"
    monkeypatch.setenv(STORE_ENV, str(used))
    _run_workflow(tmp_path, monkeypatch, Config.of({"store": {"path": str(asked)}}))
    recorded = yaml.safe_load((tmp_path / "out" / "config.yaml").read_text())["store"]["path"]
    assert recorded == str(used)
    err = capsys.readouterr().err
    assert f"DASCREEN_STORE={used} overrides store.path {asked}" in err
    monkeypatch.setenv(STORE_ENV, "")
    _run_workflow(tmp_path, monkeypatch, Config.of({"store": {"path": str(asked)}}))
    assert yaml.safe_load((tmp_path / "out" / "config.yaml").read_text())["store"]["path"] is None


# --------------------------------------------------------------------------- F5, F6: a killed job or worker

KILLED_LOG = """\
rule prepare:
    input: /r/c.csv
    log: /r/logs/candidates/prepare.log
    jobid: 2
Finished jobid: 2 (Rule: prepare)
rule compute:
    log: /r/logs/candidates/compute/shard-000.log
    jobid: 6
rule compute:
    log: /r/logs/candidates/compute/shard-001.log
    jobid: 7
/usr/bin/bash: line 1: 23744 Killed                  OMP_NUM_THREADS=1 python -m screen.stages --config '{}'
RuleException:
CalledProcessError in file "/w/rules/compute.smk", line 47:
Command 'set -euo pipefail;  python -m screen.stages > /r/logs/candidates/compute/shard-000.log 2>&1' returned \
non-zero exit status 137.
[Sat Dec  5 08:00:26 2026]
Error in rule compute:
    message: None
    jobid: 6
    log: /r/logs/candidates/compute/shard-000.log (check log file(s) for error details)
    shell:
        python -m screen.stages
        (command exited with non-zero exit code)
Logfile /r/logs/candidates/compute/shard-000.log: empty file
Shutting down, this might take some time.
WorkflowError:
At least one job did not complete successfully.
"""


def test_a_killed_job_is_named_with_its_own_log_and_the_signal():
    from screen.launch import failure_cause

    assert failure_cause(KILLED_LOG) == ("job compute was killed (signal 9: out of memory?); its log: "
                                         "/r/logs/candidates/compute/shard-000.log")
    failed = KILLED_LOG.replace("returned non-zero exit status 137.", "returned non-zero exit status 1.")
    assert failure_cause(failed) == "job compute failed; its log: /r/logs/candidates/compute/shard-000.log"


def test_a_worker_killed_by_sigkill_is_not_called_a_native_crash():
    import crashy
    from screen.isolation import IsolatedWorker, WorkerCrash

    with IsolatedWorker(crashy.work) as w:
        w("a")  # started
        pid = w._proc.pid
        timer = threading.Timer(0.5, os.kill, (pid, signal.SIGKILL))
        timer.start()
        with pytest.raises(WorkerCrash) as crash:
            w("sleep")
        timer.join()
        assert w("b").startswith("done b")
    text = str(crash.value)
    assert "killed by signal SIGKILL (out of memory or killed from outside)" in text
    assert "native crash" not in text
