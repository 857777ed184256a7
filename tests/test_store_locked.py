"""A results store locked by another process, and candidate files that are pipes (a filesystem auditor's findings).

The lock is held by a short-lived subprocess; the wait is cut to 0.5 s by monkeypatching
:data:`screen.store.LOCK_TIMEOUT_S` (a run waits 60 s), so no test waits long and none measures time.
"""
from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import pytest

from screen import launch
from screen import store as store_mod
from screen.errors import InputError
from screen.preflight import check_candidates
from screen.store import ResultStore, damaged_store_text, run_store_check

#: the auditor's lock holder: exclusive locking mode and an exclusive transaction, held until killed
_HOLDER = ("import sqlite3, sys, time; c = sqlite3.connect(sys.argv[1], isolation_level=None); "
           "c.execute('PRAGMA locking_mode=EXCLUSIVE'); c.execute('BEGIN EXCLUSIVE'); "
           "c.execute('CREATE TABLE IF NOT EXISTS t(x)'); print('held', flush=True); time.sleep(30)")


@pytest.fixture
def locked(tmp_path, monkeypatch):
    """A dascreen store another process holds locked; the wait cut to 0.5 s."""
    path = tmp_path / "store.sqlite"
    made = ResultStore(path)
    made.check()  # a real (empty) dascreen store
    made.close()
    monkeypatch.setattr(store_mod, "LOCK_TIMEOUT_S", 0.5)
    holder = subprocess.Popen([sys.executable, "-c", _HOLDER, str(path)], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "held"
        yield path
    finally:
        holder.kill()
        holder.wait()


def test_store_command_says_locked_not_damaged(locked, capsys):
    store = ResultStore(locked, read_only=True)
    with pytest.raises(store_mod.StoreLocked) as err:
        store.check()
    text = str(err.value)
    assert "is locked by another process (busy, not broken" in text
    assert "wait for that process to finish" in text
    assert "move it away" not in text and "give the store file of a run" not in text
    # the wait is said as it begins, with its length, instead of silence
    assert f"results store {locked} is locked by another process; waiting up to 0.5 s" in capsys.readouterr().err


def test_run_check_of_locked_store_says_busy_and_how_to_go_on(locked, capsys):
    lines, usable = run_store_check(locked)
    assert usable is False and len(lines) == 1
    line = lines[0]
    assert "is locked by another process (busy, not broken" in line
    assert "every molecule is computed" in line  # the run computes without it
    assert "set DASCREEN_STORE to another file" in line and "wait for that process" in line
    assert "move it away" not in line  # could lose the other process's results
    assert "waiting up to 0.5 s" in capsys.readouterr().err


def test_write_to_locked_store_says_the_wait(locked, capsys):
    store = ResultStore(locked)
    with pytest.raises(InputError) as err:  # opening for writing meets the lock
        store.put_rows([("structures", "m0", "p", "", "{}", "x", time.time())])
    assert "locked by another process" in str(err.value) and "move it away" not in str(err.value)
    assert "waiting up to 0.5 s" in capsys.readouterr().err


def test_store_locked_while_read_is_not_called_damaged(tmp_path):
    import sqlite3

    text = damaged_store_text(tmp_path / "s.sqlite", sqlite3.OperationalError("database is locked"))
    assert "locked by another process (busy, not broken)" in text and "move it away" not in text


def test_unstored_results_reach_the_console(tmp_path):
    logs = tmp_path / "logs" / "candidates" / "compute"
    logs.mkdir(parents=True)
    (logs / "shard-000.log").write_text(
        "dascreen: results store /s.sqlite: new results were not stored: database is locked\n"
        "compute shard-000: 0 of 1 molecule from the results store, 1 computed; new results were not stored: "
        "database is locked (structures)\n"
        "compute shard-000: 0 of 1 molecule from the results store, 1 computed; new results were not stored: "
        "database is locked (electronic)\n")
    (logs / "shard-002.log").write_text(  # the store could not even be opened: "N molecules computed"
        "compute shard-002: 2 molecules computed; the results store was not usable: database is locked by another "
        "process, waited 60 s (structures)\n")
    (logs / "shard-001.log").write_text(
        "compute shard-001: 2 of 2 molecules from the results store, 0 computed (electronic)\n")
    line = launch.unstored_results(tmp_path, time.time() - 5, Path("/s.sqlite"))
    assert line == ("dascreen: warning: new results were not stored in the results store /s.sqlite (database is "
                    "locked; database is locked by another process, waited 60 s; see "
                    "logs/candidates/compute/shard-000.log, logs/candidates/compute/shard-002.log): the next run "
                    "computes up to 3 molecules again")
    old = time.time() - 3600  # logs of an earlier attempt are not this run's
    for name in ("shard-000.log", "shard-002.log"):
        os.utime(logs / name, (old, old))
    assert launch.unstored_results(tmp_path, time.time() - 5) is None


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no named pipes on this system")
def test_candidates_pipe_is_not_called_empty(tmp_path):
    fifo = tmp_path / "cands.csv"
    os.mkfifo(fifo)
    with pytest.raises(InputError) as err:
        check_candidates(fifo)
    assert "is not a regular file (a pipe or device): save it to a file first" in str(err.value)
    assert "is empty" not in str(err.value)
