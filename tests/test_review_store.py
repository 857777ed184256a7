"""A maintainer's review of the locked-store changes: one wording of a locked store, every write transaction says
its wait, one source of the 60 s lock wait, the job-log phrases shared by writer and reader, and a narrow except
around the engine's private argument parser.

Locks are held by a short-lived subprocess; waits are cut to 0.3-0.5 s (a run waits the schema default), so no test
waits long and none measures time.
"""
from __future__ import annotations

import io
import subprocess
import sys
import time
from pathlib import Path

import pytest
import yaml

from screen import batch, launch
from screen import store as store_mod
from screen.io import Progress
from screen.store import ResultStore, StoreLocked, damaged_store_text, run_store_check, stage_protocol_id

#: holds the whole file (exclusive locking mode): nothing can open it
_EXCLUSIVE = ("import sqlite3, sys, time; c = sqlite3.connect(sys.argv[1], isolation_level=None); "
              "c.execute('PRAGMA locking_mode=EXCLUSIVE'); c.execute('BEGIN EXCLUSIVE'); "
              "c.execute('CREATE TABLE IF NOT EXISTS t(x)'); print('held', flush=True); time.sleep(30)")
#: holds the write lock of a WAL database (others can still read it)
_WRITER = ("import sqlite3, sys, time; c = sqlite3.connect(sys.argv[1], isolation_level=None); "
           "c.execute('PRAGMA journal_mode=WAL'); c.execute('BEGIN IMMEDIATE'); print('held', flush=True); "
           "time.sleep(30)")


def _hold(path: Path, code: str) -> subprocess.Popen:
    holder = subprocess.Popen([sys.executable, "-c", code, str(path)], stdout=subprocess.PIPE, text=True)
    assert holder.stdout.readline().strip() == "held"
    return holder


def _release(holder: subprocess.Popen) -> None:
    holder.kill()
    holder.wait()


def _new_store(path: Path) -> None:
    made = ResultStore(path)
    made.check()
    made.close()


# --------------------------------------------------------------------------- 1. one wording of a locked store

def test_locked_store_messages_say_the_same_facts(tmp_path, monkeypatch, capsys):
    """The writable opening built its own why ("database is locked by another process, waited 60 s") and
    damaged_store_text said no wait; every message now carries store._locked_why."""
    path = tmp_path / "store.sqlite"
    _new_store(path)
    monkeypatch.setattr(store_mod, "LOCK_TIMEOUT_S", 0.5)
    facts = store_mod._locked_why(0.5)
    holder = _hold(path, _EXCLUSIVE)
    try:
        with pytest.raises(StoreLocked) as writing:
            ResultStore(path).check()
        with pytest.raises(StoreLocked) as reading:
            ResultStore(path, read_only=True).check()
        lines, usable = run_store_check(path)
    finally:
        _release(holder)
    assert writing.value.why == facts and reading.value.why == facts  # a job log's line
    assert str(writing.value).startswith(f"results store {path} {facts}: wait for that process to finish")
    assert str(writing.value).endswith("or set store.path to another file")
    assert str(reading.value).startswith(f"results store {path} {facts}: wait for that process to finish")
    assert usable is False and f"results store {path} {facts}: this run does not use it" in lines[0]
    import sqlite3

    text = damaged_store_text(path, sqlite3.OperationalError("database is locked"), timeout_s=0.5)
    assert text.startswith(f"results store {path} {facts}: wait for that process") and "move it away" not in text
    capsys.readouterr()


def test_prune_says_its_wait_and_the_lock(tmp_path, capsys):
    """prune's delete transaction waited in silence and ended in a raw 'database is locked'."""
    path = tmp_path / "store.sqlite"
    store = ResultStore(path, timeout_s=0.3)
    store.put("electronic", "m0123456789abcdef", {"method": "GFN2-xTB"}, {"status": "ok", "xtb_ip_ev": 9.1})
    pid = stage_protocol_id("electronic", {"method": "GFN2-xTB"})
    holder = _hold(path, _WRITER)  # the store stays readable: prune counts its rows, then meets the lock
    try:
        with pytest.raises(StoreLocked) as err:
            store.prune(protocols=[pid])
    finally:
        _release(holder)
        store.close()
    assert err.value.why == store_mod._locked_why(0.3)
    assert str(err.value).endswith("the file was not changed")
    assert capsys.readouterr().err.count(f"results store {path} is locked by another process; waiting up to 0.3 s") == 1
    assert ResultStore(path).prune(protocols=[pid]) == {"protocol": 1, "old": 0, "corrupt": 0}  # nothing was lost


def test_schema_write_meeting_a_lock_says_one_wait(tmp_path, capsys):
    """A new store (an SQLite file without the tables) whose schema transaction meets another writer: the wait is
    said once and made once, and the refusal has the shared wording."""
    path = tmp_path / "store.sqlite"
    holder = _hold(path, _WRITER)  # makes the file an empty WAL database and holds its write lock
    try:
        with pytest.raises(StoreLocked) as err:
            ResultStore(path, timeout_s=0.3).check()
    finally:
        _release(holder)
    assert err.value.why == store_mod._locked_why(0.3)
    assert capsys.readouterr().err.count("is locked by another process; waiting up to 0.3 s") == 1
    assert ResultStore(path).check().writable()  # made a store once the lock is gone


# --------------------------------------------------------------------------- 2. one source of the wait

def test_lock_wait_default_comes_from_the_schema(tmp_path):
    """LOCK_TIMEOUT_S was a second literal 60.0 beside the schema's store.timeout_s default: a schema default
    changed alone left the store's default behind (checked in a fresh interpreter with a patched default)."""
    code = ("import screen.schema as s; orig = s.section_defaults; "
            "s.section_defaults = lambda sec: {**orig(sec), 'timeout_s': 7.0} if sec == 'store' else orig(sec); "
            "import screen.store as st; print(st.LOCK_TIMEOUT_S, st.ResultStore(sys.argv[1]).timeout_s)")
    done = subprocess.run([sys.executable, "-c", "import sys; " + code, str(tmp_path / "s.sqlite")],
                          capture_output=True, text=True, check=True)
    assert done.stdout.split() == ["7.0", "7.0"]
    assert ResultStore(tmp_path / "t.sqlite", timeout_s=2).timeout_s == 2.0  # the parameter stays


def test_timeout_description_says_what_the_wait_covers():
    schema = yaml.safe_load((Path(store_mod.__file__).parent / "workflow" / "schemas" / "config.schema.yaml")
                            .read_text(encoding="utf-8"))
    text = " ".join(schema["properties"]["store"]["properties"]["timeout_s"]["description"].split())
    assert "another run's write" not in text  # a wait for any process's lock, opening included
    assert "lock on the store" in text and "said on standard error" in text


# --------------------------------------------------------------------------- 3. the job-log phrases, shared

class _Cache:
    def __init__(self, hits=0, read=None, write=None):
        self.hits, self.read_problem, self.write_problem = hits, read, write


def _job_logs(tmp_path: Path, caches: list, resumed: int = 0) -> Path:
    logs = tmp_path / "logs" / "candidates" / "compute"
    logs.mkdir(parents=True, exist_ok=True)
    for i, (cache, n, what) in enumerate(caches):
        stream = io.StringIO()
        batch.report_store_hits(Progress(f"compute shard-00{i}", stream=stream), cache, n, what, resumed=resumed)
        (logs / f"shard-00{i}.log").write_text(stream.getvalue(), encoding="utf-8")
    return tmp_path


def test_unstored_results_reads_the_writers_own_lines(tmp_path):
    """unstored_results parsed report_store_hits' log line with its own copy of the phrases."""
    why = store_mod._locked_why(60.0)
    out = _job_logs(tmp_path, [(_Cache(hits=1, write=why), 3, "structures"), (_Cache(read=why), 2, "electronic")],
                    resumed=4)
    line = launch.unstored_results(out, time.time() - 5, Path("/s.sqlite"))
    assert line == (f"dascreen: warning: new results were not stored in the results store /s.sqlite ({why}; see "
                    "logs/candidates/compute/shard-000.log, logs/candidates/compute/shard-001.log): the next run "
                    "computes up to 4 molecules again")


def test_a_reworded_log_line_still_reaches_the_console(tmp_path, monkeypatch):
    """A rewording of the writer's phrase (here a made-up one) is read by the parser too: one source."""
    monkeypatch.setattr(batch, "STORE_NOT_WRITTEN", "fresh results were not kept")
    monkeypatch.setattr(batch, "STORE_NOT_USABLE", "the store could not be read")
    out = _job_logs(tmp_path, [(_Cache(write="disk full"), 2, "structures"), (_Cache(read="locked"), 1, "")])
    assert "fresh results were not kept" in (tmp_path / "logs/candidates/compute/shard-000.log").read_text()
    line = launch.unstored_results(out, time.time() - 5)
    assert line is not None and "(disk full; locked; see" in line and "up to 3 molecules again" in line


# --------------------------------------------------------------------------- 4. a narrow except

def test_engine_args_check_lets_an_unexpected_error_through(monkeypatch):
    """``except Exception`` hid any error of the engine's parser; only a missing or changed API degrades."""
    import snakemake.cli

    def broken():
        raise RuntimeError("a bug, not a changed API")

    monkeypatch.setattr(snakemake.cli, "get_argument_parser", broken)
    with pytest.raises(RuntimeError):
        launch.check_engine_args(["--keep-going"])

    def renamed():
        raise AttributeError("module 'snakemake.settings' has no attribute 'ExecMode'")

    monkeypatch.setattr(snakemake.cli, "get_argument_parser", renamed)
    assert launch.check_engine_args(["--keep-going"]) is None  # the engine checks its arguments itself
    monkeypatch.delattr(snakemake.cli, "get_argument_parser")
    assert launch.check_engine_args(["--keep-going"]) is None
