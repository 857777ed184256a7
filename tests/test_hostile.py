"""Hostile input through the whole workflow: every row accounted for, nothing written astray."""

from __future__ import annotations

import gzip
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


# a new-user robustness audit: files and options the run must refuse before any work (exit 2, one message,
# no traceback, nothing written)
_REFUSED = {
    "truncated.csv.gz": (gzip.compress(b"id,smiles\nB1,c1ccccc1\n")[:20], "not a readable gzip file"),
    "table.smi": (b"id,smiles\nB1,c1ccccc1\n", "looks like comma-separated CSV"),
    "twice.csv": (b"id,smiles,SMILES\nB1,c1ccccc1,CC\n", "column 'smiles' appears twice (columns 2 and 3)"),
}


@pytest.mark.parametrize("name", sorted(_REFUSED))
def test_unusable_candidate_file_is_refused_before_any_work(tmp_path, capsys, name):
    from screen.cli import main

    content, message = _REFUSED[name]
    src = tmp_path / name
    src.write_bytes(content)
    rc = main(["run", str(src), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert rc == 2, err
    assert message in err and name in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1, err
    assert not (tmp_path / "out").exists()


def test_an_empty_element_list_is_refused_before_any_work(tmp_path, capsys):
    from screen.cli import main

    src = tmp_path / "c.csv"
    src.write_text("id,smiles\nB1,c1ccccc1\n", encoding="utf-8")
    rc = main(["run", str(src), "--out", str(tmp_path / "out"), "--set", "prepare.allowed_elements=[]"])
    err = capsys.readouterr().err
    assert rc == 2 and "prepare.allowed_elements" in err and "Traceback" not in err
    assert not (tmp_path / "out").exists()
