"""Hostile input through the whole workflow: every row accounted for, nothing written astray."""

from __future__ import annotations

import os
import subprocess
import sys

import pandas as pd
import pytest


def _tree(path):
    return {os.path.relpath(os.path.join(d, f), path) for d, _, files in os.walk(path) for f in files
            if ".venv" not in d and ".git" not in d and "__pycache__" not in d and ".pytest_cache" not in d}


@pytest.fixture(scope="module")
def hostile_run(tmp_path_factory, data_dir, repo_dir):
    parent = tmp_path_factory.mktemp("hostile")
    out = parent / "out"
    repo_before = _tree(repo_dir)
    proc = subprocess.run([sys.executable, "-m", "screen.cli", "run", str(data_dir / "hostile.csv"), "--out",
                           str(out), "--cores", "2"], capture_output=True, text=True, cwd=repo_dir)
    return proc, out, parent, repo_before


def test_batch_exits_zero_with_a_summary(hostile_run):
    proc, *_ = hostile_run
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-3000:]
    assert "95 rows:" in proc.stdout


def test_every_row_has_a_status_and_a_specific_reason(hostile_run, data_dir):
    _, out, *_ = hostile_run
    expected = pd.read_csv(data_dir / "hostile.csv", dtype=str, keep_default_na=False)
    levels = pd.read_csv(out / "levels.csv", dtype=str, keep_default_na=False)
    assert len(levels) == len(expected)
    for (_, exp), (_, got) in zip(expected.iterrows(), levels.iterrows()):
        if exp["id"]:
            assert got["id"] == exp["id"]  # ids survive untouched, newlines and markup included
        if exp["expect_status"] == "rejected":
            assert got["status"] == "rejected", (exp["id"], got["error"])
            assert got["reason"] == exp["expect_reason"], (exp["id"], got["reason"])
            assert len(got["error"]) > 10
        else:
            # accepted rows are computed; if the engine cannot, the row says why
            assert got["status"] in ("ok", "failed"), (exp["id"], got["status"])
            assert got["status"] == "ok" or got["error"], exp["id"]
            if got["status"] == "ok":
                assert got["scale"] == "film" and got["homo_ev"]


def test_nothing_is_written_outside_the_output_folder(hostile_run, repo_dir):
    _, out, parent, repo_before = hostile_run
    assert {p.split(os.sep)[0] for p in _tree(parent)} == {"out"}
    created = _tree(repo_dir) - repo_before
    assert not created, sorted(created)[:10]
    assert not any(name in str(p) for p in out.rglob("*") for name in ("passwd", "<script", "SUM(A1)"))
