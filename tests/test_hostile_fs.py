"""A hostile file system under `dascreen rank` and `dascreen status`: a full disk, files where folders go, pipes,
a levels file that changes while it is read, unreadable inputs (an audit of hostile file systems).

A full disk is simulated by making the write that fails raise ``OSError(ENOSPC)`` (no real mount); as root,
``chmod 000`` does not stop a read, so an unreadable file is simulated the same way.
"""

from __future__ import annotations

import errno
import json
import os
import time
from pathlib import Path

import pandas as pd
import pytest
from conftest import LEVELS_HEADER, LEVELS_ROW, cli_run, one_error_line

import screen.io
from screen.config import Config
from screen.partners import partner_slug
from screen.rank_io import ranking_folder

#: one made-up donor row (conftest), the levels of the CLI tests
ROW, HEADER = LEVELS_ROW, LEVELS_HEADER
_cli, _one_line = cli_run, one_error_line


@pytest.fixture()
def levels(one_row_levels):
    return one_row_levels


@pytest.fixture()
def ranked(levels, tmp_path, capsys):
    """An output folder that holds a complete ranking against y6; returns (out, its ranking folder)."""
    out = tmp_path / "out"
    rc, _, err = _cli(capsys, "rank", "--out", out, "--levels", levels, "--partner", "y6")
    assert rc == 0, err
    folder = next((out / "rankings").glob("y6--*"))
    assert {"ranking.csv", "ranking.meta.json", "report.html", "ranking.safe.csv"} <= {p.name for p in folder.iterdir()}
    return out, folder


def _fail_at(monkeypatch, name: str, target: str, code: int = errno.ENOSPC):
    """Make ``screen.io.<name>`` raise OSError(code) when it writes a file called ``target``."""
    real = getattr(screen.io, name)

    def failing(obj, path, *args, **kwargs):
        if Path(path).name == target:
            raise OSError(code, os.strerror(code), str(Path(path).parent / f".{target}.x1y2z3.tmp"))
        return real(obj, path, *args, **kwargs)

    monkeypatch.setattr(screen.io, name, failing)


# --------------------------------------------------------------------------- 1. a full disk while ranking

def test_a_full_disk_at_the_meta_ends_in_one_line_and_leaves_no_old_file(ranked, levels, monkeypatch, capsys):
    out, folder = ranked
    levels.write_text(HEADER + ROW.replace("-5.55", "-5.47"), encoding="utf-8")  # other levels: a new ranking
    _fail_at(monkeypatch, "write_json", "ranking.meta.json")
    rc, _, err = _cli(capsys, "rank", "--out", out, "--levels", levels, "--partner", "y6")
    line = _one_line(err)
    assert rc == 1 and "No space left on device" in line and str(folder / "ranking.meta.json") in line, err
    assert ".tmp" not in line
    left = {p.name for p in folder.iterdir()}
    assert "ranking.meta.json" not in left, left  # its presence would mean complete
    assert "-5.47" in (folder / "ranking.csv").read_text()
    # the report and safe copy beside the new ranking.csv are the new ones (written before the meta), never the old
    assert "-5.47" in (folder / "ranking.safe.csv").read_text(encoding="utf-8-sig")


def test_a_full_disk_at_the_ranking_csv_leaves_no_old_meta_or_report(ranked, levels, monkeypatch, capsys):
    out, folder = ranked
    _fail_at(monkeypatch, "write_csv", "ranking.csv")
    rc, _, err = _cli(capsys, "rank", "--out", out, "--levels", levels, "--partner", "y6")
    line = _one_line(err)
    assert rc == 1 and "No space left on device" in line and "ranking.csv" in line, err
    left = {p.name for p in folder.iterdir()}
    assert left <= {"ranking.csv"}, left  # the old meta, report, safe CSV and shortlist are gone


def test_a_report_that_fails_leaves_no_old_report_and_a_complete_meta(ranked, levels, monkeypatch, capsys):
    import screen.report

    out, folder = ranked

    def full(**kwargs):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(kwargs["out_dir"] / "report.html"))

    monkeypatch.setattr(screen.report, "write_report", full)
    rc, _, err = _cli(capsys, "rank", "--out", out, "--levels", levels, "--partner", "y6")
    assert rc == 1 and "the report failed" in err and "Traceback" not in err, err
    left = {p.name for p in folder.iterdir()}
    assert "report.html" not in left and "ranking.safe.csv" not in left and "ranking.meta.json" in left, left


def test_an_unhandled_os_error_is_one_line_with_the_projects_exit_codes():
    from screen.cli import _os_error_text

    class Args:
        out, levels = "/o", "/in/lv.csv"

    text, code = _os_error_text(OSError(errno.EDQUOT, "Disk quota exceeded", "/o/rankings/y6--0/ranking.csv"), Args)
    assert code == 1 and text.startswith("cannot write /o/rankings/y6--0/ranking.csv: Disk quota exceeded;"), text
    text, code = _os_error_text(FileExistsError(errno.EEXIST, "File exists", "/o/rankings/y6--0"), Args)
    assert code == 2 and "/o/rankings/y6--0: File exists; a file is in the way" in text, text
    text, code = _os_error_text(OSError(errno.EIO, "Input/output error", "/in/lv.csv"), Args)
    assert code == 1 and text.startswith("cannot read /in/lv.csv"), text


# --------------------------------------------------------------------------- 2. files where folders go, loops

@pytest.mark.parametrize("blocker", ["rankings", "rankings/FOLDER", "rankings/FOLDER/ranking.csv/"])
def test_a_file_or_folder_in_the_way_is_one_line_exit_2(blocker, levels, tmp_path, capsys):
    out = tmp_path / "out"
    name = ranking_folder(partner_slug("y6"), Config.of({}))
    path = out / blocker.replace("FOLDER", name).rstrip("/")
    path.parent.mkdir(parents=True, exist_ok=True)
    path.mkdir() if blocker.endswith("/") else path.write_text("x")
    rc, _, err = _cli(capsys, "rank", "--out", out, "--levels", levels, "--partner", "y6")
    line = _one_line(err)
    assert rc == 2 and str(path) in line and "move it away" in line, err


def test_a_symlink_loop_as_out_is_one_line_exit_2(levels, tmp_path, capsys):
    (tmp_path / "loopA").symlink_to(tmp_path / "loopB")
    (tmp_path / "loopB").symlink_to(tmp_path / "loopA")
    for command in (["rank", "--levels", levels], ["run", levels]):
        rc, _, err = _cli(capsys, *command, "--out", tmp_path / "loopA")
        line = _one_line(err)
        assert rc == 2 and "loopA" in line and "points back to itself" in line, err


# --------------------------------------------------------------------------- 4. pipes and devices

def test_a_pipe_or_device_as_levels_is_not_called_missing(tmp_path, capsys):
    fifo = tmp_path / "fifo.csv"
    os.mkfifo(fifo)
    for given in (fifo, Path(os.devnull)):
        rc, _, err = _cli(capsys, "rank", "--out", tmp_path / "out", "--levels", given, "--partner", "y6")
        line = _one_line(err)
        assert rc == 2 and "not a regular file (a pipe or device)" in line and "does not exist" not in line, err


# --------------------------------------------------------------------------- 5. a levels file that changes

def test_a_levels_file_that_changes_while_read_is_refused(levels, tmp_path, monkeypatch, capsys):
    import screen.rank_io

    real = screen.rank_io.read_ranked_levels

    def read_then_grow(path):
        frame = real(path)
        with open(path, "a", encoding="utf-8") as fh:  # another program appends a row meanwhile
            fh.write(ROW.replace("KF-D01", "KF-D02"))
        return frame

    monkeypatch.setattr(screen.rank_io, "read_ranked_levels", read_then_grow)
    out = tmp_path / "out"
    rc, _, err = _cli(capsys, "rank", "--out", out, "--levels", levels, "--partner", "y6")
    line = _one_line(err)
    assert rc == 2 and "changed while it was read" in line and str(levels) in line, err
    assert not list((out / "rankings").glob("*/ranking.meta.json")) if (out / "rankings").is_dir() else True


def test_the_recorded_levels_hash_is_that_of_the_file_ranked(ranked, levels):
    from screen.provenance import sha256_file

    _, folder = ranked
    meta = json.loads((folder / "ranking.meta.json").read_text())
    assert meta["levels"]["sha256"] == sha256_file(levels)


# --------------------------------------------------------------------------- 6. cannot read vs cannot write

def test_an_unreadable_input_says_cannot_read(levels, tmp_path, monkeypatch, capsys):
    import screen.rank_io

    def denied(path):
        raise PermissionError(errno.EACCES, os.strerror(errno.EACCES), str(path))

    monkeypatch.setattr(screen.rank_io, "read_ranked_levels", denied)
    rc, _, err = _cli(capsys, "rank", "--out", tmp_path / "out", "--levels", levels, "--partner", "y6")
    line = _one_line(err)
    assert rc == 2 and line.startswith(f"dascreen: error: cannot read {levels}") and "write" not in line, err


def test_an_unwritable_output_says_cannot_write(ranked, levels, monkeypatch, capsys):
    out, folder = ranked
    _fail_at(monkeypatch, "write_json", "ranking.meta.json", errno.EACCES)
    rc, _, err = _cli(capsys, "rank", "--out", out, "--levels", levels, "--partner", "y6")
    line = _one_line(err)
    assert rc == 2 and f"cannot write {folder / 'ranking.meta.json'}" in line, err


# --------------------------------------------------------------------------- 3. status of an incomplete ranking

def _finished_run(root: Path) -> Path:
    """A run folder whose molecules are all computed (as tests/test_cli.py ``_fake_run``) and its ranking folder."""
    prepared = root / "work" / "candidates" / "prepared"
    prepared.mkdir(parents=True)
    pd.DataFrame({"key": ["m0"], "smiles": ["C"]}).to_csv(prepared / "shard-000.csv", index=False)
    for stage in ("structures", "electronic"):
        (root / "work" / "candidates" / stage).mkdir(parents=True)
        pd.DataFrame({"key": ["m0"]}).to_csv(root / "work" / "candidates" / stage / "shard-000.csv", index=False)
    time.sleep(0.01)
    (root / "levels.csv").write_text(HEADER + ROW)
    (root / "config.yaml").write_text("partner: y6\n")
    (root / ".dascreen.lock").write_text("")
    return root / "rankings" / ranking_folder(partner_slug("y6"), Config.load(root / "config.yaml"))


def test_status_does_not_call_a_run_with_an_incomplete_ranking_finished(tmp_path, capsys):
    folder = _finished_run(tmp_path)
    rc, out, _ = _cli(capsys, "status", "--out", tmp_path)
    assert rc == 0 and out.startswith("dascreen: not finished: 1/1 molecules computed") and "not written" in out, out
    folder.mkdir(parents=True)
    (folder / "ranking.csv").write_text("id\n")  # a full disk after the ranking.csv
    rc, out, _ = _cli(capsys, "status", "--out", tmp_path)
    assert "finished: 1/1" not in out.replace("not finished", "") and "no ranking.meta.json" in out, out
    assert f"ranking {folder} is incomplete" in out, out


def test_status_says_a_ranking_without_its_report_is_incomplete(ranked, capsys):
    out, folder = ranked
    (folder / "report.html").unlink()
    from screen.cli import _print_rankings

    _print_rankings(out)
    text = capsys.readouterr().out
    assert "incomplete: its report.html is missing" in text, text
