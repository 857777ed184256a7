"""Kill a real run with SIGKILL, start it again: only unfinished molecules are recomputed and the
final numbers equal those of an uninterrupted run."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time

import pandas as pd
import pytest

# floppy enough (hexyl/butyl chains → many conformers) that a shard takes several seconds
MOLECULES = {
    "R1": "CCCCCCc1ccc(-c2cccs2)s1",
    "R2": "CCCCc1ccc(-c2ccc(CCCC)s2)s1",
    "R3": "CCCCCCc1ccc2nsnc2c1",
    "R4": "CCCCc1cc2ccccc2cc1CCCC",
    "R5": "CCCCCCOc1ccc(-c2ccccc2)cc1",
    "R6": "CCCCCc1ccc(-c2ccc(C)s2)s1",
}
TIMING = {"sp_wall_s", "structure_wall_s"}


def _cmd(inp, out):
    return [sys.executable, "-m", "screen.cli", "run", str(inp), "--out", str(out), "--cores", "1",
            "--set", "prepare.min_shards=1"]


@pytest.fixture(scope="module")
def candidates(tmp_path_factory):
    path = tmp_path_factory.mktemp("resume") / "in.csv"
    pd.DataFrame({"id": list(MOLECULES), "smiles": list(MOLECULES.values())}).to_csv(path, index=False)
    return path


def _journals(out):
    return {p: len(p.read_text().splitlines()) for p in out.glob("work/candidates/*/*.journal.jsonl")}


def _journal_lines(out):
    return sum(_journals(out).values())


def test_sigkill_then_restart_gives_the_uninterrupted_numbers(candidates, tmp_path, repo_dir):
    ref_out, out = tmp_path / "ref", tmp_path / "killed"
    ref = subprocess.run(_cmd(candidates, ref_out), capture_output=True, text=True, cwd=repo_dir)
    assert ref.returncode == 0, ref.stderr[-2000:]

    proc = subprocess.Popen(_cmd(candidates, out), cwd=repo_dir, stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL, start_new_session=True)
    deadline = time.monotonic() + 300
    while _journal_lines(out) < 2 and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.05)
    assert proc.poll() is None, "the run finished before it could be interrupted"
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    journals = _journals(out)
    assert sum(journals.values()) >= 2
    assert not (out / "levels.csv").exists()  # nothing that looks finished

    again = subprocess.run(_cmd(candidates, out), capture_output=True, text=True, cwd=repo_dir)
    assert again.returncode == 0, again.stdout[-3000:] + again.stderr[-3000:]
    # each interrupted job resumed: its new log counts only the molecules whose levels its journal did not
    # hold (structures and levels are computed by one job per shard, a molecule at a time)
    for journal, n_done in journals.items():
        if journal.parent.name != "electronic":
            continue
        shard = journal.name.split(".")[0]
        log = (out / "logs" / "candidates" / "compute" / f"{shard}.log").read_text()
        totals = {int(line.split("/")[1].split()[0]) for line in log.splitlines() if " molecules (" in line}
        assert totals == {len(MOLECULES) - n_done}, (n_done, log)

    a = pd.read_csv(ref_out / "levels.csv", dtype=str, keep_default_na=False)
    b = pd.read_csv(out / "levels.csv", dtype=str, keep_default_na=False)
    cols = [c for c in a.columns if c not in TIMING]
    pd.testing.assert_frame_equal(a[cols], b[cols])
    assert not list(out.rglob("*.journal.jsonl")) and not list(out.rglob(".*.tmp"))
