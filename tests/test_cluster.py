"""Cluster mode: the real workflow through Snakemake's cluster-generic executor.

``profiles/local-generic`` sends every job (all rules but ``all``) to a
stand-in scheduler, ``tests/cluster/fake_submit.sh``, which runs the
Snakemake jobscript later as a detached process in an *empty* environment
(``env -i PATH=/usr/bin:/bin HOME=...``): no virtualenv on PATH, no variables
and no Python state of the submitting process. A run that succeeds this way
shows that the jobs are self-contained, as they must be on a real cluster
(absolute interpreter and file paths; everything a job needs is in its
jobscript). Its ``levels.csv`` must hold the same numbers as a local run of
the same input.
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from screen.calibrate import find_models
from screen.config import load_config

pytest.importorskip("snakemake_executor_plugin_cluster_generic")

REPO = Path(__file__).resolve().parent.parent
PROFILE = REPO / "profiles" / "local-generic"
SCHEDULER = REPO / "tests" / "cluster"
MARKER = "DASCREEN_TEST_SUBMITTER_ONLY"


def _dascreen(*args, cwd, env=None):
    return subprocess.run([sys.executable, "-m", "screen.cli", *args], capture_output=True, text=True, cwd=cwd,
                          env={**os.environ, "PYTHONUNBUFFERED": "1", **(env or {})})


@pytest.fixture(scope="module")
def runs(tmp_path_factory, data_dir, repo_dir):
    cfg = load_config(repo_dir / "config" / "config.yaml",
                      {"calibration": {"models": str(repo_dir / "models"),
                                       "reference": str(repo_dir / "models" / "reference")}})
    if find_models(cfg) is None:
        pytest.fail("no shipped calibration model matches the default protocol (both runs would refit): run "
                    "`dascreen calibrate --install models` and commit models/")
    base = tmp_path_factory.mktemp("cluster")
    state = base / "scheduler"
    local = _dascreen("run", str(data_dir / "five.csv"), "--out", str(base / "local"), "--cores", "2", cwd=repo_dir)
    # from another working directory, with a variable that must not reach the jobs
    generic = _dascreen("run", str(data_dir / "five.csv"), "--out", str(base / "generic"), "--cores", "2",
                        "--profile", str(PROFILE), cwd=base,
                        env={"DASCREEN_FAKE_CLUSTER": str(state), MARKER: "1"})
    return {"local": base / "local", "generic": base / "generic", "state": state,
            "local_proc": local, "generic_proc": generic}


def _n_jobs(run: Path) -> int:
    """Jobs the scheduler must have seen: prepare, one compute job per shard, levels, rank."""
    shards = len(list((run / "work" / "candidates" / "prepared").glob("shard-*.csv")))
    return 3 + shards


def _table(path: Path) -> pd.DataFrame:
    return pd.read_csv(path, dtype=str, keep_default_na=False)


def test_cluster_run_succeeds_through_the_scheduler(runs):
    proc = runs["generic_proc"]
    assert runs["local_proc"].returncode == 0, runs["local_proc"].stderr[-3000:]
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-3000:]
    assert "6 rows: 5 ok, 1 rejected, 0 failed" in proc.stdout
    log = proc.stdout + proc.stderr + (runs["generic"] / "logs" / "workflow.log").read_text()  # the engine's log
    assert "with external jobid 'fake-" in log
    spooled = sorted(runs["state"].glob("fake-*.sh"))
    assert len(spooled) == _n_jobs(runs["generic"]), [p.name for p in spooled]
    codes = {p.stem: (p.with_suffix(".rc").read_text().strip() if p.with_suffix(".rc").exists() else "missing")
             for p in spooled}
    assert set(codes.values()) == {"0"}, codes


def test_jobs_ran_in_an_empty_environment(runs):
    envs = sorted(runs["state"].glob("fake-*.env"))
    assert len(envs) == _n_jobs(runs["generic"])
    for path in envs:
        env = dict(line.split("=", 1) for line in path.read_text().splitlines() if "=" in line)
        assert env["PATH"] == "/usr/bin:/bin", path.name
        assert MARKER not in env and "VIRTUAL_ENV" not in env and "DASCREEN_FAKE_CLUSTER" not in env, path.name
        assert env.get("PWD") == "/", path.name  # started outside the run folder: the jobscript cds itself


def test_levels_match_a_local_run(runs):
    local = _table(runs["local"] / "levels.csv")
    generic = _table(runs["generic"] / "levels.csv")
    assert list(generic.columns) == list(local.columns)
    timing = [c for c in local.columns if c.endswith("_wall_s")]
    assert timing  # the timing columns are the only ones allowed to differ
    same = local.drop(columns=timing).compare(generic.drop(columns=timing))
    assert same.empty, same.to_string()
    assert (generic["status"] == "ok").sum() == 5


def test_ranking_matches_a_local_run(runs):
    (folder,) = (runs["local"] / "rankings").iterdir()  # <partner>--<settings hash>, the same in both runs
    rel = Path("rankings") / folder.name / "ranking.csv"
    same = _table(runs["local"] / rel).compare(_table(runs["generic"] / rel))
    assert same.empty, same.to_string()


@pytest.mark.parametrize("code,expected", [(0, "success"), (3, "failed")])
def test_stand_in_scheduler_reports_exit_codes(tmp_path, code, expected):
    # the harness must be able to say "failed", else the tests above could not fail on a broken job
    script = tmp_path / "job.sh"
    script.write_text(f"#!/bin/sh\necho running as $(id -u)\nexit {code}\n")
    env = {**os.environ, "DASCREEN_FAKE_CLUSTER": str(tmp_path / "state")}
    job_id = subprocess.run([str(SCHEDULER / "fake_submit.sh"), str(script)], capture_output=True, text=True,
                            env=env, check=True).stdout.strip()
    assert job_id.startswith("fake-")
    status = "running"
    for _ in range(300):  # a bound on the wait, not a timing assertion
        status = subprocess.run([str(SCHEDULER / "fake_status.sh"), job_id], capture_output=True, text=True,
                                env=env, check=True).stdout.strip()
        if status != "running":
            break
        time.sleep(0.1)
    assert status == expected
    assert subprocess.run([str(SCHEDULER / "fake_status.sh"), "fake-999"], capture_output=True, text=True,
                          env=env).stdout.strip() == "failed"
