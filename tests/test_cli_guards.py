"""Bad command lines refused before any work (exit 2, one line): the findings of a careless user's CLI audit.

Each test names the audit finding (P1 ... P13) it guards. No test computes a molecule: where the old code went on to
compute, the workflow is replaced by a stub that fails the test if it is started.
"""

from __future__ import annotations

import json
import signal
import subprocess
import sys
from pathlib import Path

import pytest

from screen.cli import main
from screen.config import Config

GOOD = "id,homo_ev,lumo_ev,gap_opt_ev,scale\nD1,-5.2,-3.0,1.9,film\nD2,-5.4,-3.2,1.8,film\n"
MEASURED_DYES = "id,e_ox_v_nhe,e00_ev\nX1,1.1,2.0\nX2,1.0,1.9\n"


def _cli(capsys, *args):
    rc = main(list(args))
    captured = capsys.readouterr()
    return rc, captured.out, captured.err


@pytest.fixture
def no_workflow(no_workflow, monkeypatch):
    """The conftest's ``no_workflow``, and a refit fails the test too (the refusal must come first)."""
    monkeypatch.setattr("screen.refit.refit_from_raw", lambda *a, **k: pytest.fail("a refit was started; the command "
                                                                               "line should have been refused first"))


def _write(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


def _one_line(err: str) -> None:
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err, err


# --------------------------------------------------------------------------- P1: dyecell --refit

def test_refit_with_measured_dye_levels_is_refused(tmp_path, capsys, no_workflow):
    levels = _write(tmp_path / "lv.csv", MEASURED_DYES)
    rc, _, err = _cli(capsys, "dyecell", "--levels", str(levels), "--out", str(tmp_path / "o"), "--refit")
    assert rc == 2 and "gives measured values" in err and "leave --refit out" in err, err
    _one_line(err)


def test_refit_does_not_replace_installed_dye_models_without_being_asked(tmp_path, capsys, no_workflow):
    from screen.config import Config

    installed = tmp_path / "dyemodels" / Config.load(None).protocol_id
    installed.mkdir(parents=True)
    for name in ("e_ox.json", "e00.json"):
        _write(installed / name, "{}")
    rc, _, err = _cli(capsys, "dyecell", "--refit", "--models", str(tmp_path / "dyemodels"), "--out",
                      str(tmp_path / "o"))
    assert rc == 2 and f"replace the dye models installed in {installed}" in err and "--replace-installed" in err
    _one_line(err)
    assert (installed / "e_ox.json").read_text() == "{}"


def test_dyecell_empty_levels_is_refused(tmp_path, capsys):
    rc, _, err = _cli(capsys, "dyecell", "--levels", "", "--out", str(tmp_path / "o"))
    assert rc == 2 and "--levels '' names no file" in err, err


# --------------------------------------------------------------------------- P2, P4: calibrate

def test_calibrate_install_into_a_file_is_refused_before_the_fit(tmp_path, capsys, no_workflow, repo_dir):
    target = _write(tmp_path / "good.csv", GOOD)
    rc, _, err = _cli(capsys, "calibrate", "--install", str(target), "--from-raw",
                      str(repo_dir / "models" / Config.of({}).protocol_id), "--out", str(tmp_path / "cal"))
    assert rc == 2 and f"--install {target} is a file, not a folder" in err, err
    _one_line(err)


def test_calibrate_reference_missing_or_empty_is_refused_before_the_workflow(tmp_path, capsys, no_workflow):
    rc, _, err = _cli(capsys, "calibrate", "--reference", str(tmp_path / "nosuch"), "--out", str(tmp_path / "c"))
    assert rc == 2 and "no such folder" in err and "ip_gas.csv" in err, err
    (tmp_path / "empty").mkdir()
    rc, _, err = _cli(capsys, "calibrate", "--reference", str(tmp_path / "empty"), "--out", str(tmp_path / "c"))
    assert rc == 2 and "holds none of the reference files" in err, err
    _write(tmp_path / "empty" / "ip_gas.csv", "name,smiles,value_ev,source\n")
    rc, _, err = _cli(capsys, "calibrate", "--reference", str(tmp_path / "empty"), "--out", str(tmp_path / "c"))
    assert rc == 2 and "lacks ea_gas.csv" in err and "ip_gas.csv," not in err.split("lacks")[1].split(";")[0]


# --------------------------------------------------------------------------- P3: a closed pipe

def test_output_into_a_closed_pipe_ends_without_a_traceback():
    proc = subprocess.Popen([sys.executable, "-m", "screen.cli", "partners", "--full"], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, cwd=Path(__file__).resolve().parent.parent)
    proc.stdout.close()  # the reader is gone before the first line (`| head -0`)
    err = proc.stderr.read().decode()
    assert proc.wait(timeout=120) == 128 + signal.SIGPIPE
    assert "Traceback" not in err and "BrokenPipeError" not in err, err


# --------------------------------------------------------------------------- P5: arguments after --

@pytest.mark.parametrize("extra, said", [
    (["--cores", "5"], "--cores/-c is set by dascreen"),
    (["-d", "/tmp"], "--directory/-d is set by dascreen"),
    (["--until", "prepare"], "--until/-U stops the run before its levels.csv"),
    (["--bogus-flag"], "the engine has no option --bogus-flag"),
    (["all"], "runs part of the workflow"),  # a target: the earlier results were reported as this run's
    (["--touch"], "marks outputs up to date"),
])
def test_engine_arguments_that_clash_or_do_not_exist_are_refused(tmp_path, capsys, no_workflow, extra, said):
    candidates = _write(tmp_path / "c.csv", "id,smiles\nK1,c1ccsc1\n")
    rc, _, err = _cli(capsys, "run", str(candidates), "--out", str(tmp_path / "o"), "--cores", "1", "--dry-run",
                      "--", *extra)
    assert rc == 2 and said in err, err
    _one_line(err)


def test_every_refused_engine_option_exists_in_the_installed_engine():
    # the check compares parsed values by the engine's names for them: a renamed option would switch it off silently
    from snakemake.cli import get_argument_parser

    from screen.launch import ENGINE_OPTIONS_SET

    dests = {a.dest for a in get_argument_parser()._actions}
    assert set(ENGINE_OPTIONS_SET) <= dests, set(ENGINE_OPTIONS_SET) - dests


def test_arguments_after_a_bare_dash_dash_are_for_run_only(tmp_path, capsys):
    levels = _write(tmp_path / "good.csv", GOOD)
    rc, _, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(tmp_path / "o"), "--", "--keep-going")
    assert rc == 2 and "`dascreen rank` takes none" in err, err


# --------------------------------------------------------------------------- P6: records, not lines

def test_progress_counts_csv_records_not_lines(tmp_path):
    from screen.io import run_progress

    work = tmp_path / "work" / "candidates"
    (work / "prepared").mkdir(parents=True)
    (work / "electronic").mkdir()
    shard = 'key,id,smiles\nm0000000000000001,"nl\nid",CCS\nm0000000000000002,b,CCO\n'
    _write(work / "prepared" / "shard-000.csv", shard)
    _write(work / "electronic" / "shard-000.csv", shard)
    p = run_progress(tmp_path)
    assert (p["total"], p["done"]) == (2, 2)


# --------------------------------------------------------------------------- P7: a column named twice

def test_a_column_named_twice_is_refused_in_levels_partner_and_dye_files(tmp_path, capsys):
    dup = _write(tmp_path / "dup.csv", "id,homo_ev,lumo_ev,gap_opt_ev,scale,homo_ev\nD1,-5.2,-3.0,1.9,film,-5.0\n")
    rc, _, err = _cli(capsys, "rank", "--levels", str(dup), "--out", str(tmp_path / "r"))
    assert rc == 2 and "column 'homo_ev' appears twice (columns 2 and 6); keep one" in err, err
    good = _write(tmp_path / "good.csv", GOOD)
    partner = _write(tmp_path / "p.csv", "id,homo_ev,lumo_ev,gap_opt_ev,scale,role,lumo_ev\n"
                                         "A1,-5.6,-3.9,1.4,film,acceptor,-4.1\n")
    rc, _, err = _cli(capsys, "rank", "--levels", str(good), "--out", str(tmp_path / "r"), "--partner", str(partner))
    assert rc == 2 and "column 'lumo_ev' appears twice (columns 3 and 7)" in err, err
    dyes = _write(tmp_path / "dyes.csv", "id,e_ox_v_nhe,e00_ev,e00_ev\nX1,1.1,2.0,1.5\n")
    rc, _, err = _cli(capsys, "dyecell", "--levels", str(dyes), "--out", str(tmp_path / "d"))
    assert rc == 2 and "column 'e00_ev' appears twice (columns 3 and 4); keep one" in err, err
    assert not (tmp_path / "r" / "rankings").exists() and not (tmp_path / "d" / "dyecell").exists()


# --------------------------------------------------------------------------- P8: σ in meV

def test_a_sigma_above_one_ev_is_refused_in_levels_and_partner_files(tmp_path, capsys):
    huge = _write(tmp_path / "huge.csv", "id,homo_ev,lumo_ev,gap_opt_ev,scale,homo_sigma_ev\n"
                                         "D1,-5.2,-3.0,1.9,film,50\n")
    rc, _, err = _cli(capsys, "rank", "--levels", str(huge), "--out", str(tmp_path / "r"))
    assert rc == 2 and "column homo_sigma_ev = 50: an uncertainty must lie in 0-1 eV" in err, err
    assert "50 looks like millielectronvolts: write 0.05 eV" in err
    good = _write(tmp_path / "good.csv", GOOD)
    partner = _write(tmp_path / "p.csv", "id,homo_ev,lumo_ev,gap_opt_ev,scale,role,lumo_sigma_ev\n"
                                         "A1,-5.6,-3.9,1.4,film,acceptor,30\n")
    rc, _, err = _cli(capsys, "rank", "--levels", str(good), "--out", str(tmp_path / "r"), "--partner", str(partner))
    assert rc == 2 and "column lumo_sigma_ev = 30: an uncertainty must lie in 0-1 eV" in err, err
    _write(partner, partner.read_text().replace(",30", ",0.1"))  # a measured σ still ranks
    rc, _, err = _cli(capsys, "rank", "--levels", str(good), "--out", str(tmp_path / "r"), "--partner", str(partner))
    assert rc == 0, err




# --------------------------------------------------------------------------- P9: rankings of other levels files

def _unfinished_run(out: Path) -> None:
    """A run folder interrupted while computing: a prepared batch, no levels.csv yet."""
    prepared = out / "work" / "candidates" / "prepared"
    prepared.mkdir(parents=True)
    _write(prepared / "shard-000.csv", "key,id,smiles\nm0000000000000001,K1,c1ccsc1\n")


def test_ranking_another_file_into_an_unfinished_run_gets_a_folder_of_its_own(tmp_path, capsys):
    # it took the run's own folder name, which the resumed run then replaced (a careless user's audit)
    out = tmp_path / "run"
    _unfinished_run(out)
    good = _write(tmp_path / "good.csv", GOOD)
    rc, _, err = _cli(capsys, "rank", "--out", str(out), "--levels", str(good))
    assert rc == 0, err
    folders = [p.name for p in (out / "rankings").iterdir() if p.is_dir()]
    assert len(folders) == 1 and "--levels-good-" in folders[0], folders


def test_a_resuming_run_moves_a_ranking_of_another_file_aside(tmp_path, capsys):
    from screen.cli import _set_aside_foreign_ranking
    from screen.config import Config
    from screen.partners import partner_slug
    from screen.rank_io import ranking_folder

    out = tmp_path / "run"
    _unfinished_run(out)
    cfg = Config.load(None)
    folder = out / "rankings" / ranking_folder(partner_slug(cfg["partner"]), cfg)
    folder.mkdir(parents=True)
    _write(folder / "ranking.meta.json", json.dumps({"levels": {"path": str(tmp_path / "measured.csv")}}))
    _set_aside_foreign_ranking(cfg, out)
    err = capsys.readouterr().err
    assert not folder.exists() and "held the ranking of another levels file; moved to rankings/" in err, err
    moved = [p.name for p in (out / "rankings").iterdir()]
    assert len(moved) == 1 and moved[0].startswith(folder.name + "--levels-measured-"), moved
    # a review: when that name (and its -earlier variant) were taken, the ranking was replaced; now a free name
    for _ in range(2):
        folder.mkdir()
        _write(folder / "ranking.meta.json", json.dumps({"levels": {"path": str(tmp_path / "measured.csv")}}))
        _set_aside_foreign_ranking(cfg, out)
    names = sorted(p.name for p in (out / "rankings").iterdir())
    assert len(names) == 3 and not folder.exists(), names
    assert names[1].endswith("-earlier") and names[2].endswith("-earlier-2"), names


def test_status_marks_a_ranking_of_an_earlier_version_of_its_levels(tmp_path, capsys):
    from screen.cli import _print_rankings
    from screen.rank_index import ranking_index

    levels = _write(tmp_path / "good.csv", GOOD)
    out = tmp_path / "r"
    rc, _, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(out))
    assert rc == 0, err
    assert ranking_index(out)["levels_state"].tolist() == ["current"]
    _write(levels, GOOD.replace("-5.2", "-5.3"))
    assert ranking_index(out)["levels_state"].tolist() == ["changed"]
    _print_rankings(out)
    shown = capsys.readouterr().out
    assert "ranked from an earlier version of its levels file; re-rank with `dascreen rank --out" in shown, shown
    assert f"--levels {levels}" in shown


# --------------------------------------------------------------------------- P10: options given twice or empty

def test_an_option_given_twice_with_other_values_is_refused(tmp_path, capsys):
    levels = _write(tmp_path / "good.csv", GOOD)
    for args in (["--target-pce", "8", "--target-pce", "12"], ["--role", "donor", "--role", "acceptor"]):
        with pytest.raises(SystemExit) as stop:
            main(["rank", "--levels", str(levels), "--out", str(tmp_path / "r"), *args])
        assert stop.value.code == 2
        assert f"argument {args[0]}: given twice" in capsys.readouterr().err
    assert not (tmp_path / "r").exists()
    rc, out, _ = _cli(capsys, "rank", "--levels", str(levels), "--out", str(tmp_path / "r"), "--target-pce", "8",
                      "--target-pce", "8")  # the same value twice is no slip
    assert rc == 0 and "target 8 % PCE" in out, out


def test_empty_levels_and_a_config_key_given_twice_are_refused(tmp_path, capsys):
    rc, _, err = _cli(capsys, "rank", "--levels", "", "--out", str(tmp_path / "r"))
    assert rc == 2 and "--levels '' names no file" in err, err
    levels = _write(tmp_path / "good.csv", GOOD)
    twice = _write(tmp_path / "twice.yaml", "device:\n  eqe: 0.7\ndevice:\n  eqe: 0.8\n")
    rc, _, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(tmp_path / "r"), "--config", str(twice))
    assert rc == 2 and "key 'device' appears twice (lines 1 and 3)" in err, err


# --------------------------------------------------------------------------- P11: a folder as partner or oxide

def test_a_folder_as_partner_or_oxide_is_called_a_folder(tmp_path, capsys):
    levels = _write(tmp_path / "good.csv", GOOD)
    (tmp_path / "p_dir.csv").mkdir()
    rc, _, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(tmp_path / "r"), "--partner",
                      str(tmp_path / "p_dir.csv"))
    assert rc == 2 and "is a folder, not a file" in err and "not an existing file" not in err, err
    dyes = _write(tmp_path / "lv.csv", MEASURED_DYES)
    rc, _, err = _cli(capsys, "dyecell", "--levels", str(dyes), "--out", str(tmp_path / "d"), "--oxide",
                      str(tmp_path / "p_dir.csv"))
    assert rc == 2 and "oxide" in err and "is a folder, not a file" in err, err


# --------------------------------------------------------------------------- P13: the console line

def test_rank_says_how_many_rows_were_not_ranked(tmp_path, capsys):
    levels = _write(tmp_path / "status.csv", "id,homo_ev,lumo_ev,gap_opt_ev,scale,status\n"
                                             "D1,-5.2,-3.0,1.9,film,failed\nD2,-5.4,-3.2,1.8,film,ok\n")
    rc, out, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(tmp_path / "r"))
    assert rc == 0, err
    assert "dascreen: 1 donor ranked against y6 (1 row not ranked: 1 failed;" in out, out


def test_odd_targets_are_echoed_plainly(tmp_path, capsys):
    levels = _write(tmp_path / "good.csv", GOOD)
    rc, out, _ = _cli(capsys, "rank", "--levels", str(levels), "--out", str(tmp_path / "r"), "--target-pce", "-0")
    assert rc == 0 and "target 0 % PCE" in out and "-0 %" not in out, out
