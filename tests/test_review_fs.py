"""A maintainer's review of the hostile-file-system fixes (2026-12-05): OSErrors that name no path, the verb said
of an error ("cannot write" of a read), symbolic-link loops in every command, a pipe as ``dyecell --levels``,
``status`` of a ranking written without a report on purpose, whose EQE and fill factor a target warning names, and
the rankings index after a failed report.

The levels row is conftest's ``LEVELS_ROW`` (a made-up donor, no measurement). The device constants named
in the warnings are the published rule's (Scharber et al., Adv. Mater. 18 (2006) 789: EQE 0.65, FF 0.65) and values
a test sets itself.
"""

from __future__ import annotations

import argparse
import errno
import json
import os
from pathlib import Path

import pytest
from conftest import cli_run, one_error_line

import screen.cli
from screen.cli import main

_cli, _one_line = cli_run, one_error_line


@pytest.fixture()
def levels(one_row_levels):
    return one_row_levels


@pytest.fixture()
def loop(tmp_path):
    (tmp_path / "loop").symlink_to("loop")
    return tmp_path / "loop"


# --------------------------------------------------------------------------- 1. OSErrors: traceback, verbs

def _raise_in_command(monkeypatch, exc):
    def boom():
        raise exc

    monkeypatch.setattr(screen.cli, "_matplotlib_fallback", boom)  # runs inside _main's try, for every command


@pytest.mark.parametrize("exc", [OSError(errno.ENOMEM, os.strerror(errno.ENOMEM)),
                                 PermissionError(errno.EACCES, os.strerror(errno.EACCES))])
def test_an_os_error_naming_no_path_shows_its_traceback(exc, tmp_path, monkeypatch):
    _raise_in_command(monkeypatch, exc)
    with pytest.raises(type(exc)):
        main(["partners"])


def test_cannot_write_is_said_only_of_writing():
    from screen.cli import _os_error_text

    args = argparse.Namespace(out="/o", levels=None)
    text, code = _os_error_text(OSError(errno.EIO, "Input/output error", "/o/levels.csv"), args)
    assert code == 1 and text.startswith("cannot read /o/levels.csv: Input/output error;"), text
    text, code = _os_error_text(OSError(errno.EIO, "Input/output error", "/o/rankings/y6--0/ranking.csv"), args)
    assert code == 1 and text.startswith("cannot use /o/rankings/y6--0/ranking.csv:"), text
    text, code = _os_error_text(OSError(errno.ENOSPC, "No space left on device", "/o/rankings/y6--0/ranking.csv"),
                                args)
    assert code == 1 and text.startswith("cannot write /o/rankings/y6--0/ranking.csv:"), text


def test_an_unreadable_out_levels_is_said_as_a_read(tmp_path, monkeypatch, capsys):
    out = tmp_path / "o"
    _raise_in_command(monkeypatch, PermissionError(errno.EACCES, os.strerror(errno.EACCES), str(out / "levels.csv")))
    rc, _, err = _cli(capsys, "rank", "--out", out, "--partner", "y6")
    line = _one_line(err)
    assert rc == 2 and line.startswith(f"dascreen: error: cannot read {out / 'levels.csv'}") and "write" not in line


# --------------------------------------------------------------------------- 2. symbolic-link loops, every command

@pytest.mark.parametrize("command", [["dyecell", "--levels", "LEVELS", "--out", "LOOP/x"],
                                     ["calibrate", "--out", "LOOP/y"],
                                     ["rank", "--levels", "LOOP/z", "--out", "OUT"]])
def test_a_symlink_loop_is_one_line_in_every_command(command, levels, loop, tmp_path, capsys):
    argv = [a.replace("LEVELS", str(levels)).replace("LOOP", str(loop)).replace("OUT", str(tmp_path / "o"))
            for a in command]
    rc, _, err = _cli(capsys, *argv)
    line = _one_line(err)
    assert rc == 2 and "points back to itself" in line and str(loop) in line, err


def test_resolved_out_calls_only_a_loop_a_loop(monkeypatch):
    from screen.cli import _resolved_out

    def denied(self, strict=False):
        raise PermissionError(errno.EACCES, os.strerror(errno.EACCES), str(self))

    monkeypatch.setattr(Path, "resolve", denied)
    with pytest.raises(PermissionError):
        _resolved_out("/somewhere/out")


# --------------------------------------------------------------------------- 3. a pipe as dyecell --levels

def test_a_pipe_as_dyecell_levels_is_not_called_missing(tmp_path, capsys):
    fifo = tmp_path / "pipe.csv"
    os.mkfifo(fifo)
    rc, _, err = _cli(capsys, "dyecell", "--levels", fifo, "--out", tmp_path / "o")
    line = _one_line(err)
    assert rc == 2 and "not a regular file (a pipe or device): save it to a file first" in line, err
    assert "does not exist" not in line and "twice" not in line


# --------------------------------------------------------------------------- 4. status of a ranking without report

def test_status_does_not_call_a_ranking_without_a_report_on_purpose_incomplete(levels, tmp_path):
    from screen.cli import _ranking_problem, _report_text
    from screen.rank_io import run_rank

    out = tmp_path / "o"
    folder = run_rank(levels, "y6", out, report=False).parent
    assert not (folder / "report.html").exists()
    assert json.loads((folder / "ranking.meta.json").read_text())["report"] == "off"
    assert _ranking_problem(folder) is None
    assert _report_text(out, argparse.Namespace(folder=folder.name)) == ""


def test_status_still_calls_a_missing_written_report_incomplete(levels, tmp_path):
    from screen.cli import _ranking_problem, _report_text
    from screen.rank_io import run_rank

    out = tmp_path / "o"
    folder = run_rank(levels, "y6", out).parent
    assert json.loads((folder / "ranking.meta.json").read_text())["report"] == "written"
    (folder / "report.html").unlink()
    assert _ranking_problem(folder) == "its report.html is missing"
    assert "incomplete: its report.html is missing" in _report_text(out, argparse.Namespace(folder=folder.name))


# --------------------------------------------------------------------------- 5. whose EQE and fill factor

@pytest.mark.parametrize("sets, said, target", [
    (["device.model=scharber"], "(at most 16.3 %, an upper bound, with the published rule's EQE 0.65 and fill "
                                "factor 0.65)", "17"),
    (["device.eqe=0.8"], "an upper bound, with the EQE 0.80 you set and the fitted nfa-fused acceptors' fill factor 0.70",
     "30")])
def test_the_target_warning_names_whose_eqe_and_ff(sets, said, target, levels, tmp_path, capsys):
    argv = ["rank", "--levels", levels, "--out", tmp_path / "o", "--partner", "y6", "--target-pce", target]
    for s in sets:
        argv += ["--set", s]
    rc, _, err = _cli(capsys, *argv)
    assert rc == 0 and said in err, err
    assert "averages of published devices" not in err, err


# --------------------------------------------------------------------------- 6. a failed report, then the index

def test_a_failed_report_still_writes_the_rankings_index(levels, tmp_path, monkeypatch):
    import screen.report
    from screen.rank_io import run_rank

    def broken(**kwargs):
        raise ValueError("a bug in the report")

    monkeypatch.setattr(screen.report, "write_report", broken)
    out = tmp_path / "o"
    with pytest.raises(RuntimeError, match="the report failed"):
        run_rank(levels, "y6", out)
    assert (out / "rankings-index.csv").is_file()
    meta = json.loads(next((out / "rankings").glob("y6--*/ranking.meta.json")).read_text())
    assert meta["report"] == "failed: ValueError: a bug in the report"
