"""The `dascreen` command: config display, status of a run, quiet workflow with progress, rankings kept apart."""

from __future__ import annotations

import fcntl
import io
import json
import os
import sys
import time
from pathlib import Path

import pandas as pd
import pytest
import yaml

from screen.cli import main
from screen.io import Progress
from screen.launch import _quiet, _watch, error_excerpt
from screen.preflight import schema_fields


def _cli(capsys, *args):
    rc = main(list(args))
    captured = capsys.readouterr()
    return rc, captured.out, captured.err


# --------------------------------------------------------------------------- dascreen config

def test_every_schema_field_has_a_description():
    missing = [f.path for f in schema_fields() if not f.description]
    assert not missing, missing


def test_config_shows_every_field_with_description_unit_default_and_allowed(capsys):
    rc, out, _ = _cli(capsys, "config")
    assert rc == 0
    blocks, current = {}, None
    for line in out.splitlines():
        if line.startswith("  ") and not line.startswith("   "):
            current = blocks.setdefault(line.strip(), [])
        elif line.startswith("      ") and current is not None:
            current.append(line.strip())
    for field in schema_fields():
        block = "\n".join(blocks.get(field.path, []))
        assert block, field.path
        assert "default: " in block and "| unit: " in block and "| allowed: " in block, block
    assert "default: null | unit: dimensionless | allowed: number > 0 and <= 1, or null" in out  # device.eqe
    assert "store.path" in out and "~/.cache/dascreen/store.sqlite" in out


def test_config_yaml_is_a_complete_config_file(capsys):
    rc, out, _ = _cli(capsys, "config", "--yaml")
    assert rc == 0 and {"device", "rank", "store", "structures"} <= set(yaml.safe_load(out))


# --------------------------------------------------------------------------- dascreen status

def _fake_run(root, done: int, total: int = 4, levels: bool = False):
    """A run folder as the workflow leaves it: one prepared shard, ``done`` molecules through electronic."""
    prepared = root / "work" / "candidates" / "prepared"
    prepared.mkdir(parents=True)
    keys = [f"m{i:016x}" for i in range(total)]
    pd.DataFrame({"key": keys, "smiles": ["C"] * total}).to_csv(prepared / "shard-000.csv", index=False)
    for stage in ("structures", "electronic"):
        (root / "work" / "candidates" / stage).mkdir(parents=True)
        journal = root / "work" / "candidates" / stage / "shard-000.csv.journal.jsonl"
        journal.write_text("".join(json.dumps({"key": k}) + "\n" for k in keys[:done]))
    if levels:
        for stage in ("structures", "electronic"):
            (root / "work" / "candidates" / stage / "shard-000.csv.journal.jsonl").unlink()
            pd.DataFrame({"key": keys}).to_csv(root / "work" / "candidates" / stage / "shard-000.csv", index=False)
        time.sleep(0.01)
        (root / "levels.csv").write_text("id\n")
    (root / ".dascreen.lock").write_text("")


def test_status_of_a_finished_run_says_finished(tmp_path, capsys):
    _fake_run(tmp_path, 4, levels=True)
    rc, out, _ = _cli(capsys, "status", "--out", str(tmp_path))
    assert rc == 0 and out.startswith("dascreen: finished: 4/4 molecules computed (100%)"), out
    assert "ETA" not in out


def test_status_of_a_running_and_a_stopped_run(tmp_path, capsys):
    _fake_run(tmp_path, 1)
    rc, out, _ = _cli(capsys, "status", "--out", str(tmp_path))
    assert "not running: 1/4 molecules computed (25%)" in out and "resumes" in out
    with open(tmp_path / ".dascreen.lock", "w") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX | fcntl.LOCK_NB)
        rc, out, _ = _cli(capsys, "status", "--out", str(tmp_path))
    assert rc == 0 and out.startswith("dascreen: running: 1/4 molecules computed (25%)") and "ETA" in out, out


def test_status_of_a_finished_dye_run_lists_its_dye_rankings(tmp_path, capsys):
    # a meeting audit: a finished dye run was "not running ... `dascreen run` with the same --out resumes it"
    _fake_run(tmp_path, 4, levels=True)
    (tmp_path / "levels.csv").rename(tmp_path / "moved.csv")
    folder = tmp_path / "dyecell" / "tio2-anatase--co-bpy3--e52b5c2d"
    folder.mkdir(parents=True)
    (tmp_path / "dyecell" / "levels_raw.csv").write_text("id\n")
    (folder / "ranking.meta.json").write_text(json.dumps({"oxide": {"id": "tio2-anatase"}, "mediator": {"id": "co-bpy3"},
                                                          "counts": {"viable": 11, "ranked": 12, "passing": 11}}))
    rc, out, _ = _cli(capsys, "status", "--out", str(tmp_path))
    assert rc == 0 and out.startswith("dascreen: finished: 4/4 molecules computed"), out
    assert "tio2-anatase--co-bpy3--e52b5c2d: tio2-anatase with co-bpy3; 11 of 12 viable, 11 pass" in out


def test_status_of_a_folder_that_does_not_exist_says_so(tmp_path, capsys):
    rc, _, err = _cli(capsys, "status", "--out", str(tmp_path / "nonexistent"))
    assert rc == 2 and f"--out {tmp_path / 'nonexistent'}: no such folder" in err
    assert "configuration error" not in err and "prepared batch" not in err
    rc, _, err = _cli(capsys, "status", "--out", str(tmp_path))
    assert rc == 2 and "holds no prepared batch" in err


# --------------------------------------------------------------------------- help texts and arguments

def _help(capsys, *args):
    with pytest.raises(SystemExit) as stop:
        main([*args, "--help"])
    assert stop.value.code == 0
    return " ".join(capsys.readouterr().out.split())


def test_help_texts_name_the_defaults_the_commands_use(capsys, monkeypatch):
    from screen.schema import defaults

    top = _help(capsys)
    assert "Scharber-model" not in top and f"default {defaults()['device']['model']}" in top
    run = _help(capsys, "run")
    assert f"the config's partner, {defaults()['partner']})" in run and "scharber-reference-acceptor" not in run
    assert "output folder (default: ./results)" in run
    rank = _help(capsys, "rank")
    assert f"else {defaults()['partner']})" in rank and "(default 10)" in rank
    # the defaults come from the schema when the help is printed, not from text in the CLI
    changed = defaults()
    changed["partner"] = "c70"
    monkeypatch.setattr("screen.schema.defaults", lambda: changed)
    assert "the config's partner, c70)" in _help(capsys, "run")


def test_an_unknown_option_gets_the_sub_commands_usage(capsys):
    with pytest.raises(SystemExit) as stop:
        main(["rank", "--bogus"])
    err = capsys.readouterr().err
    assert stop.value.code == 2 and err.startswith("usage: dascreen rank") and "unrecognized arguments: --bogus" in err
    with pytest.raises(SystemExit):
        main(["--bogus", "rank"])
    assert capsys.readouterr().err.startswith("usage: dascreen [-h]")


def test_config_lists_the_output_folder_the_command_writes_to(capsys):
    rc, out, _ = _cli(capsys, "config")
    block = out.split("\n  out\n", 1)[1].split("\n  partner\n", 1)[0]
    assert rc == 0 and "default: ./results (--out); snakemake without the dascreen command: results/demo" in block
    assert "default: none (the CANDIDATES argument of dascreen run)" in out
    rc, out, _ = _cli(capsys, "config", "--yaml")
    assert out.startswith("# candidates and out serve a snakemake run") and "--out (default ./results)" in out


# --------------------------------------------------------------------------- quiet workflow, progress

class _Tty(io.StringIO):
    def isatty(self):
        return True


def test_progress_is_a_redrawn_bar_on_a_terminal_and_lines_otherwise():
    tty = _Tty()
    bar = Progress("dascreen", stream=tty)
    for done in range(1, 4):
        bar.report(done, 10)
    bar.close()
    text = tty.getvalue()
    assert text.count("\r") == 3 and text.count("\n") == 1 and "3/10 molecules (30%)" in text
    plain = io.StringIO()
    lines = Progress("dascreen", stream=plain, every_s=3600)
    for done in range(1, 11):
        lines.report(done, 10)
    assert plain.getvalue().count("\n") == 2 and "\r" not in plain.getvalue()  # the first and the last


def test_progress_rate_counts_only_this_runs_work():
    p = Progress("x", stream=io.StringIO(), bar=False)
    p.rebase(90)  # 90 molecules came from the results store or an earlier run
    assert "rate unknown" in p.line(90, 100) and "ETA unknown" in p.line(90, 100)


def test_progress_says_when_no_molecule_has_finished_for_a_while(monkeypatch):
    import screen.io as sio

    clock = [1000.0]
    monkeypatch.setattr(sio.time, "monotonic", lambda: clock[0])
    p = Progress("x", stream=io.StringIO(), bar=False)  # stall_s default 300 s
    p.rebase(273)
    p.report(273, 281)
    clock[0] += 299
    assert "no molecule finished" not in p.line(273, 281)
    clock[0] += 2761  # 51 min since the count last moved
    assert p.line(273, 281).endswith("ETA unknown (no molecule finished for 51.0 min, still computing)")
    p.report(274, 281)  # one finished: the count moved, the note goes
    assert "no molecule finished" not in p.line(274, 281)
    p.report(281, 281)
    clock[0] += 4000
    assert "no molecule finished" not in p.line(281, 281)  # all done: nothing to wait for


def test_watch_prints_plain_lines_when_not_a_terminal(tmp_path):
    import threading

    _fake_run(tmp_path, 2)
    stream, stop = io.StringIO(), threading.Event()
    watcher = threading.Thread(target=_watch, args=(tmp_path, stop, "dascreen", stream, 0.01))
    watcher.start()
    deadline = time.monotonic() + 60
    while "\n" not in stream.getvalue() and time.monotonic() < deadline:  # a bound on the wait, no timing check
        time.sleep(0.01)
    time.sleep(0.3)  # some 30 more ticks: a watcher that redrew or printed every tick would add lines here
    stop.set()
    watcher.join()
    text = stream.getvalue()
    assert text.startswith("dascreen: 2/4 molecules (50%)") and "structures 2/4" in text, text
    assert "\r" not in text and text.count("\n") == 1  # one line a minute at most, none redrawn


def test_a_partners_progress_counts_its_own_batch(tmp_path):
    # the progress line of a smiles: partner said "39/39 molecules ...; 8 of them oligomers of 2 polymer(s)": the
    # whole run folder, not the one partner being computed
    from screen.io import run_progress

    _fake_run(tmp_path, 2)
    partner = tmp_path / "work" / "partner-m0123" / "prepared"
    partner.mkdir(parents=True)
    pd.DataFrame({"key": ["mfffffffffffffff0"], "smiles": ["C"]}).to_csv(partner / "shard-000.csv", index=False)
    assert run_progress(tmp_path)["total"] == 5
    assert run_progress(tmp_path, "partner-m0123")["total"] == 1


def test_quiet_run_logs_to_a_file_and_prints_one_line_with_the_cause(tmp_path, capsys):
    script = ("import sys\nprint('Building DAG of jobs...')\nfor i in range(50): print('job', i)\n"
              "print('Error in rule electronic:')\nprint('    jobid: 7')\nprint('RuntimeError: boom', file=sys.stderr)\n"
              "sys.exit(1)\n")
    log = tmp_path / "logs" / "workflow.log"
    rc = _quiet([sys.executable, "-c", script], dict(os.environ), tmp_path, log, "dascreen")
    err = capsys.readouterr().err
    assert rc == 1
    assert "job 3" in log.read_text() and "job 3" not in err  # the engine's chatter stays in the file
    # an overnight operator's report: the engine's whole error (2 kB of command line, twice) filled the console;
    # now one line names the cause and the failed job, and where the whole log is
    assert err.strip() == f"dascreen: the workflow failed: RuntimeError: boom (job electronic); its whole log: {log}"


def test_quiet_success_prints_nothing_of_the_engine(tmp_path, capsys):
    rc = _quiet([sys.executable, "-c", "print('Finished job 0.')"], dict(os.environ), tmp_path,
                tmp_path / "logs" / "workflow.log", "dascreen")
    captured = capsys.readouterr()
    assert rc == 0 and "Finished job" not in captured.out + captured.err


def test_error_excerpt_without_a_marker_is_the_tail():
    assert error_excerpt("\n".join(map(str, range(200))), tail=3) == "197\n198\n199"


# --------------------------------------------------------------------------- rankings kept apart

@pytest.fixture()
def levels(tmp_path):
    path = tmp_path / "lv.csv"
    path.write_text("id,smiles,homo_ev,lumo_ev,gap_opt_ev,scale,role\n"
                    "KF-D01,c1ccc(-c2cccs2)s1,-5.55,-3.60,1.95,film,donor\n", encoding="utf-8")
    return path


def test_other_device_settings_rank_into_their_own_folder(levels, tmp_path, capsys):
    out = tmp_path / "out"
    assert _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", "c60")[0] == 0
    assert _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", "c60",
                "--set", "device.model=scharber")[0] == 0
    folders = sorted(p.name for p in (out / "rankings").iterdir())
    assert len(folders) == 2 and all(f.startswith("c60--") for f in folders)
    models = {json.loads((out / "rankings" / f / "ranking.meta.json").read_text())["device"]["model"]
              for f in folders}
    assert models == {"fitted", "scharber"}


def test_a_folder_of_another_partner_is_never_overwritten(levels, tmp_path, capsys):
    from screen.rank_io import ranking_folder

    out = tmp_path / "out"
    assert _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", "c60")[0] == 0
    (c60,) = (out / "rankings").iterdir()
    clash = out / "rankings" / ranking_folder("c70", {})
    c60.rename(clash)  # e.g. a slug collision: the folder c70 would use holds c60's ranking
    before = (clash / "ranking.csv").read_bytes()
    rc, _, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", "c70")
    assert rc == 2 and "holds the ranking against partner 'c60'" in err
    assert (clash / "ranking.csv").read_bytes() == before


def test_another_levels_file_ranked_in_a_run_folder_gets_a_folder_of_its_own(levels, tmp_path, capsys):
    # a meeting-day audit: `rank --levels my_cv.csv --out RUN` wrote into the run's own ranking folder, and the next
    # `dascreen run` found "nothing to be done" and printed the two CV rows as the 32-candidate run's ranking
    from screen.rank_io import ranking_folder, set_aside_foreign

    run = tmp_path / "run"
    run.mkdir()
    (run / "levels.csv").write_bytes(levels.read_bytes())
    assert _cli(capsys, "rank", "--levels", str(run / "levels.csv"), "--out", str(run), "--partner", "c60")[0] == 0
    own = run / "rankings" / ranking_folder("c60", {})
    before = (own / "ranking.csv").read_bytes()
    cv = tmp_path / "my cv.csv"
    cv.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale,role\nCV-1,-5.30,-3.40,1.85,film,donor\n", encoding="utf-8")
    rc, _, err = _cli(capsys, "rank", "--levels", str(cv), "--out", str(run), "--partner", "c60")
    assert rc == 0 and "is not this run's levels.csv" in err and "untouched" in err
    assert (own / "ranking.csv").read_bytes() == before
    (theirs,) = [p for p in (run / "rankings").iterdir() if p != own]
    assert theirs.name.startswith(own.name + "--levels-my-cv-")
    assert "CV-1" in (theirs / "ranking.csv").read_text()
    # a folder written the old way (the CV ranking under the run's own name) is moved aside before a run
    theirs.rename(own.with_name("old"))
    own.rename(own.with_name("own"))
    own.with_name("old").rename(own)
    assert set_aside_foreign(run, own.name) == theirs.name and (theirs / "ranking.csv").is_file()
    assert not own.exists()
    assert set_aside_foreign(run, own.name) is None


def test_an_edited_partner_file_ranks_into_a_new_folder_and_keeps_the_earlier_one(levels, tmp_path, capsys):
    # a meeting-day audit: "what if accX's LUMO were -3.70" replaced the -4.00 ranking (the folder name came from
    # the file's path only), and a partner matrix kept showing the old values next to the new ranking
    acc = tmp_path / "accX.csv"
    acc.write_text("id,role,homo_ev,lumo_ev,gap_opt_ev,scale\naccX,acceptor,-5.75,-4.00,1.45,film\n", encoding="utf-8")
    out = tmp_path / "out"
    assert _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", str(acc))[0] == 0
    acc.write_text(acc.read_text(encoding="utf-8").replace("-4.00", "-3.70"), encoding="utf-8")
    assert _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", str(acc))[0] == 0
    metas = [json.loads((p / "ranking.meta.json").read_text()) for p in sorted((out / "rankings").iterdir())]
    assert sorted(m["partner"]["lumo_ev"] for m in metas) == [-4.0, -3.7]


def test_a_partner_file_without_sigma_is_said_to_be_taken_as_exact(levels, tmp_path, capsys):
    # a meeting-day audit: without σ columns P(PCE > target) came out 0.875 against 0.741 with σ 0.10, unsaid
    acc = tmp_path / "accS0.csv"
    acc.write_text("id,role,homo_ev,lumo_ev,gap_opt_ev,scale\naccS0,acceptor,-5.75,-4.00,1.45,film\n", encoding="utf-8")
    out = tmp_path / "out"
    rc, _, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", str(acc))
    assert rc == 0 and "gives no σ: its levels are taken as exact" in err
    (folder,) = (out / "rankings").iterdir()
    assert "no σ given for the partner" in (folder / "report.html").read_text(encoding="utf-8")
    with_sigma = tmp_path / "accS1.csv"
    with_sigma.write_text("id,role,homo_ev,lumo_ev,gap_opt_ev,scale,homo_sigma_ev,lumo_sigma_ev,gap_opt_sigma_ev\n"
                          "accS1,acceptor,-5.75,-4.00,1.45,film,0.1,0.1,0.1\n", encoding="utf-8")
    rc, _, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", str(with_sigma))
    assert rc == 0 and "partner file" not in err and "gives no σ: its levels are taken as exact" not in err
    assert f"{levels} gives no σ" in err  # the candidates' own levels file has no σ columns either


@pytest.mark.parametrize("extra, said", [
    (["--partner", ""], "--partner '' names no partner"),
    (["--partner", " , "], "names no partner"),
    (["--target-pce", "8", "--set", "rank.target_pce_pct=12"],
     "--target-pce 8.0 and --set rank.target_pce_pct=12 give rank.target_pce_pct two values"),
    (["--role", "donor", "--set", "rank.role=acceptor"], "--role donor and --set rank.role=acceptor"),
])
def test_rank_refuses_an_empty_partner_and_options_that_disagree_with_set(levels, tmp_path, capsys, extra, said):
    # a meeting-day audit: `--partner ''` silently meant the default partner, and `--target-pce 8 --set
    # rank.target_pce_pct=12` silently used 8
    out = tmp_path / "out"
    rc, stdout, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), *extra)
    assert rc == 2 and said in err and len(err.strip().splitlines()) == 1 and not (out / "rankings").exists()


def test_the_published_models_reference_partner_is_named_as_no_measured_material(levels, tmp_path, capsys):
    rc, _, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(tmp_path / "out"),
                      "--partner", "scharber-reference-acceptor")
    assert rc == 0 and "NOT a measured material" in err and "never to rank candidates against real partners" in err


def test_every_ranking_is_listed_in_an_index(levels, tmp_path, capsys):
    # a meeting-day audit: after twenty minutes a run folder held eight y6--<hash> folders and nothing said what set
    # them apart
    out = tmp_path / "out"
    assert _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", "c60")[0] == 0
    assert _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", "c60",
                "--target-pce", "12")[0] == 0
    index = pd.read_csv(out / "rankings-index.csv")
    assert sorted(index["target_pce_pct"]) == [10.0, 12.0] and set(index["partner"]) == {"c60"}
    assert set(index["folder"]) == {p.name for p in (out / "rankings").iterdir() if p.is_dir()}


def test_a_partner_named_twice_in_other_case_is_ranked_once(levels, tmp_path, capsys):
    out = tmp_path / "out"
    assert _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", "c60,C60")[0] == 0
    assert len(list((out / "rankings").iterdir())) == 1


def test_id_and_smiles_partners_get_readable_folders(levels, tmp_path, capsys):
    out = tmp_path / "out"
    assert _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", "id:KF-D01")[0] == 0
    assert [p.name.split("--")[0] for p in (out / "rankings").iterdir()] == ["id-KF-D01"]


def test_an_empty_ranking_says_why_instead_of_naming_no_partner(tmp_path, capsys):
    from screen.cli import _print_ranking

    path = tmp_path / "ranking.csv"
    path.write_text("rank,id,partner,passes,flags\n")
    _print_ranking(path)
    out = capsys.readouterr().out
    assert "no candidate to rank" in out and "levels.csv" in out
    assert "?" not in out


def test_a_protocol_without_calibration_is_announced_before_the_run(tmp_path):
    from screen.calibrate import fingerprint
    from screen.cli import calibration_notice
    from screen.cli_shared import data_path
    from screen.config import Config

    default = Config.of({}).with_paths(data_path)
    assert calibration_notice(default, tmp_path) is None  # the default protocol is shipped
    other = Config.of({"electronic": {"method": "IPEA1-xTB"}}).with_paths(data_path)
    text = calibration_notice(other, tmp_path)
    assert other.protocol_id in text and "reference materials" in text and "hours" in text
    assert default.protocol_id in text  # the closest shipped calibration
    assert "electronic.method: IPEA1-xTB here, GFN2-xTB in the shipped calibration" in text
    # fitted by an earlier run into this folder: model files whose fingerprint is this run's
    fitted = tmp_path / "models" / other.protocol_id
    fitted.mkdir(parents=True)
    fp = fingerprint(other, other["calibration"]["reference"])
    for model in (data_path("models") / default.protocol_id).glob("*.json"):
        (fitted / model.name).write_text(json.dumps({**json.loads(model.read_text()), "fingerprint": fp}))
    assert calibration_notice(other, tmp_path) is None
    # an earlier run's calibration of other polymer settings is no calibration of this run's
    assert "polymer.n_max: 2 here, 4 in the shipped calibration" in calibration_notice(
        other.with_overrides({"polymer": {"n_max": 2}}), tmp_path)


# --------------------------------------------------------------------------- refused before any work (exit 2)

def test_out_that_is_a_file_or_inside_one_is_refused(levels, tmp_path, capsys):
    afile = tmp_path / "afile"
    afile.write_text("x")
    rc, _, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(afile))
    assert rc == 2 and f"--out {afile} is a file, not a folder" in err and "Traceback" not in err
    rc, _, err = _cli(capsys, "run", str(levels), "--out", str(afile / "sub"))
    assert rc == 2 and f"{afile} is a file, not a folder" in err and "not writable" not in err


def test_levels_that_is_a_folder_or_has_no_rows_is_refused(tmp_path, capsys):
    rc, _, err = _cli(capsys, "rank", "--levels", str(tmp_path), "--out", str(tmp_path / "o"))
    assert rc == 2 and "is a folder; give a levels file" in err
    header = tmp_path / "header.csv"
    header.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale\n")
    rc, out, err = _cli(capsys, "rank", "--levels", str(header), "--out", str(tmp_path / "o"))
    assert rc == 2 and "has a header but no rows: nothing to rank" in err and not (tmp_path / "o").exists()


def test_a_levels_file_with_repeated_ids_is_refused(tmp_path, capsys):
    path = tmp_path / "dup.csv"
    path.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale\nA,-5.3,-3.4,1.8,film\nA,-5.5,-3.5,1.9,film\n")
    rc, _, err = _cli(capsys, "rank", "--levels", str(path), "--out", str(tmp_path / "o"))
    assert rc == 2 and "line 3, column id = 'A': the same id as line 2" in err


@pytest.mark.parametrize("args, option", [
    (["run", "x.csv", "--cores", "0"], "--cores"),
    (["run", "x.csv", "--cores", "-1"], "--cores"),
    (["rank", "--top", "0"], "--top"),
    (["rank", "--top", "-3"], "--top"),
    (["rank", "--target-pce", "-5"], "--target-pce"),
    (["rank", "--target-pce", "nan"], "--target-pce"),
])
def test_numeric_options_are_refused_at_parse_time_naming_the_option(args, option, capsys):
    with pytest.raises(SystemExit) as stop:
        main(args)
    err = capsys.readouterr().err
    assert stop.value.code == 2 and f"argument {option}:" in err and "config.yaml" not in err


def test_a_smiles_partner_is_computed_into_the_given_out_folder(levels, tmp_path, capsys, monkeypatch):
    """A copied run folder: its config.yaml names the original folder, the partner goes to the copy."""
    import shutil

    import screen.cli

    calls = []

    def workflow(cfg, out, cores, targets=(), **kwargs):
        calls.append((cfg["out"], str(out), list(targets)))
        return 1  # stop here: nothing is computed in a test

    monkeypatch.setattr(screen.cli, "run_workflow", workflow)
    run = tmp_path / "copy"
    run.mkdir()
    shutil.copy(levels, run / "levels.csv")
    (run / "config.yaml").write_text(yaml.safe_dump({"out": str(tmp_path / "original")}))
    rc, _, err = _cli(capsys, "rank", "--out", str(run), "--partner", "smiles:c1ccsc1",
                      "--set", "calibration.refit=always")
    assert rc == 1 and "computing partner" in err
    (cfg_out, out, targets), = calls
    assert cfg_out == out == str(run) and targets[0].startswith(str(run / "work" / "partner-"))


def test_a_smiles_partner_without_role_is_refused_before_it_is_computed(tmp_path, capsys, monkeypatch):
    import screen.cli

    monkeypatch.setattr(screen.cli, "run_workflow", lambda *a, **k: pytest.fail("the partner was computed"))
    path = tmp_path / "lv.csv"
    path.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale\nA,-5.3,-3.4,1.8,film\n")
    rc, _, err = _cli(capsys, "rank", "--levels", str(path), "--out", str(tmp_path / "o"), "--partner",
                      "smiles:c1ccsc1", "--set", "calibration.refit=always")
    assert rc == 2 and "--role donor|acceptor" in err and "cannot carry a role" in err


# --------------------------------------------------------------------------- signals

def _running(pid: int) -> bool:
    """True while ``pid`` is a process that is not a zombie."""
    try:
        with open(f"/proc/{pid}/stat", encoding="utf-8") as fh:
            return fh.read().rsplit(")", 1)[1].split()[0] != "Z"
    except (FileNotFoundError, ProcessLookupError):
        return False


@pytest.mark.skipif(not os.path.isdir("/proc"), reason="reads /proc")
def test_sigterm_stops_the_workflow_and_its_jobs_like_ctrl_c(tmp_path):
    import signal
    import subprocess

    pids = tmp_path / "pids"
    engine = tmp_path / "engine.py"  # stands for Snakemake: starts a job, then waits
    engine.write_text("import os, subprocess, sys, time\n"
                      "job = subprocess.Popen([sys.executable, '-c', 'import time; time.sleep(600)'])\n"
                      f"open({str(pids) + '.tmp'!r}, 'w').write(f'{{os.getpid()}} {{job.pid}}')\n"
                      f"os.replace({str(pids) + '.tmp'!r}, {str(pids)!r})\n"
                      "time.sleep(600)\n")
    launcher = tmp_path / "launcher.py"  # stands for dascreen
    launcher.write_text("import os, sys\nfrom pathlib import Path\nfrom screen.launch import _quiet\n"
                        f"sys.exit(_quiet([sys.executable, {str(engine)!r}], dict(os.environ), Path({str(tmp_path)!r}),"
                        f" Path({str(tmp_path / 'workflow.log')!r}), 'dascreen'))\n")
    proc = subprocess.Popen([sys.executable, str(launcher)], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 120
    while not pids.is_file():
        assert proc.poll() is None and time.monotonic() < deadline, proc.communicate()
        time.sleep(0.1)
    engine_pid, job_pid = map(int, pids.read_text().split())
    try:
        proc.send_signal(signal.SIGTERM)  # as `kill` or `timeout` send it: to dascreen only
        _, err = proc.communicate(timeout=120)
        assert proc.returncode == 128 + signal.SIGTERM, err
        assert "stopped by SIGTERM" in err and "Traceback" not in err
        assert not _running(engine_pid) and not _running(job_pid)
    finally:  # leave nothing behind when the test fails
        for pid in (proc.pid, engine_pid, job_pid):
            if _running(pid):
                os.kill(pid, signal.SIGKILL)


# --------------------------------------------------------------------------- settings a re-ranking cannot apply

@pytest.mark.parametrize("item, said", [
    ("structures.geometry=xtb", "structures.* sets how levels are computed"),
    ("levels.scale=gas", "levels.* sets how levels are computed"),
    ("dyecell.mediator=iodide", "dyecell.* belongs to `dascreen dyecell`"),
])
def test_rank_refuses_a_setting_it_cannot_apply(levels, tmp_path, capsys, item, said):
    # before, `dascreen rank --set levels.scale=gas` exited 0 with film-scale numbers in the same folder
    out = tmp_path / "out"
    rc, stdout, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", "c60",
                           "--set", "device.eqe=0.7", "--set", item)
    assert rc == 2 and said in err and f"--set {item}" in err and "device.eqe" not in err.split(":")[1]
    assert len(err.strip().splitlines()) == 1 and not stdout and not (out / "rankings").exists()


@pytest.mark.parametrize("text, said", [
    ("structures:\n  geometry: xtb\n", "its structures settings give protocol tblite-gfn2-xtb-"),
    ("levels:\n  scale: gas\n", "its levels.scale is gas, the levels are on the film scale"),
])
def test_rank_refuses_a_config_file_that_computes_levels_otherwise(levels, tmp_path, capsys, text, said):
    # `--set structures.geometry=xtb` was refused, but the same setting in a --config file exited 0 with the
    # levels of the other protocol; the levels' sidecar records how they were computed
    from screen.config import Config

    Path(f"{levels}.meta.json").write_text(json.dumps({"protocol_id": Config().protocol_id, "scale": "film"}),
                                           encoding="utf-8")
    cfg = tmp_path / "mine.yaml"
    cfg.write_text("device:\n  eqe: 0.7\n" + text, encoding="utf-8")
    out = tmp_path / "out"
    rc, stdout, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", "c60",
                           "--config", str(cfg))
    assert rc == 2 and said in err and f"--config {cfg}" in err and "dascreen run CANDIDATES" in err
    assert len(err.strip().splitlines()) == 1 and not stdout and not (out / "rankings").exists()
    cfg.write_text("device:\n  eqe: 0.7\nstructures:\n  geometry: ff\n", encoding="utf-8")  # the levels' own
    assert _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", "c60",
                "--config", str(cfg))[0] == 0


def test_dyecell_rerank_refuses_a_device_setting(tmp_path, capsys):
    dyes = tmp_path / "dyes.csv"
    dyes.write_text("id,e_ox_v_nhe,e00_ev\nLD-X,1.10,2.10\n", encoding="utf-8")
    rc, stdout, err = _cli(capsys, "dyecell", "--levels", str(dyes), "--out", str(tmp_path / "out"),
                           "--set", "device.eqe=0.7")
    assert rc == 2 and "device.* belongs to `dascreen rank`" in err and len(err.strip().splitlines()) == 1
    assert _cli(capsys, "dyecell", "--levels", str(dyes), "--out", str(tmp_path / "out"),
                "--set", "dyecell.ff=0.65")[0] == 0


def test_the_workflow_engine_keeps_the_run_lock_when_dascreen_dies(tmp_path):
    # a new user's audit: `kill -9` of the dascreen process alone left Snakemake running, `dascreen status` said
    # "not running" and a rerun started a second workflow in the same folder; the engine now inherits the lock
    import os

    from screen.launch import _lock, _start
    from screen.preflight import run_active

    lock = _lock(tmp_path)
    engine = _start([sys.executable, "-c", "import time; time.sleep(60)"], dict(os.environ), pass_fds=(lock.fileno(),))
    lock.close()  # dascreen is gone; only the engine holds the descriptor
    try:
        assert run_active(tmp_path)
    finally:
        engine.kill()
        engine.wait()
    assert not run_active(tmp_path)


def test_a_changed_candidate_list_is_prepared_again_whatever_its_timestamp(tmp_path):
    # a new user's audit: a list replaced by another with an older modification time (cp -p, rsync -a) made the
    # rerun report the old molecules, and --overwrite kept the old list's rankings
    import json
    import os

    from screen.launch import forget_other_input
    from screen.provenance import sha256_file

    cand = tmp_path / "list.csv"
    cand.write_text("id,smiles\nT3,c1ccsc1\n", encoding="utf-8")
    out = tmp_path / "out"
    prepared = out / "work" / "candidates" / "prepared"
    prepared.mkdir(parents=True)
    (prepared / "manifest.meta.json").write_text(json.dumps(
        {"input": {"path": str(cand.resolve()), "sha256": sha256_file(cand)}}), encoding="utf-8")
    (out / "rankings" / "itic--0000").mkdir(parents=True)
    assert forget_other_input(out, cand) == [] and prepared.is_dir() and (out / "rankings").is_dir()
    old = cand.stat().st_mtime
    cand.write_text("id,smiles\nANT,c1ccc2cc3ccccc3cc2c1\n", encoding="utf-8")
    os.utime(cand, (old - 86400, old - 86400))  # the new content, yesterday's time
    notes = forget_other_input(out, cand)
    assert len(notes) == 2 and "prepared batch is rebuilt" in notes[0] and "itic--0000" in notes[1]
    assert not prepared.exists() and not (out / "rankings").exists()


def test_calibrate_refuses_to_install_over_a_calibration_of_other_reference_data(tmp_path, capsys):
    # a new user's audit: `calibrate --reference MINE --install models` replaced the shipped calibration, and every
    # default run was refused afterwards; now refused before anything is computed, --replace-installed to insist
    import shutil
    from pathlib import Path

    from screen.config import Config

    pid = Config().protocol_id
    repo = Path(__file__).resolve().parent.parent
    installed = tmp_path / "models"
    shutil.copytree(repo / "models" / pid, installed / pid)
    mine = tmp_path / "reference"
    shutil.copytree(repo / "models" / "reference", mine)
    film = mine / "levels_film.csv"
    film.write_text(film.read_text(encoding="utf-8").replace("-5.49,-3.64,1.80", "-5.40,-3.64,1.80", 1),
                    encoding="utf-8")
    rc, _, err = _cli(capsys, "calibrate", "--from-raw", str(repo / "models" / pid), "--reference", str(mine),
                      "--out", str(tmp_path / "cal"), "--install", str(installed))
    assert rc == 2 and "fitted on other reference data" in err and "--replace-installed" in err
    assert not (tmp_path / "cal").exists()  # nothing computed or written


def test_a_levels_row_with_more_fields_than_the_header_is_named_as_such(tmp_path, capsys):
    # a batch user's audit: 'A,-5,3,-3.5,1.7,film,0.1' (a decimal comma in HOMO) was read with the first column as
    # the index, every value one column to the right, and refused as "id '-5' ... HOMO is given as a positive ..."
    bad = tmp_path / "lv.csv"
    bad.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale,homo_sigma_ev\nA,-5,3,-3.5,1.7,film,0.1\n", encoding="utf-8")
    rc, _, err = _cli(capsys, "rank", "--levels", str(bad), "--out", str(tmp_path / "o"), "--partner", "y6")
    assert rc == 2 and "line 2 has 7 fields but the header has 6" in err and "decimal comma" in err


def test_a_dry_run_writes_its_configuration_aside(tmp_path, monkeypatch):
    # a batch user's audit: `run A --dry-run` wrote OUT/config.yaml, so the real run of another file B into that
    # folder was refused as "holds the run of A"
    import subprocess

    import screen.launch
    from screen.config import Config
    from screen.launch import run_workflow

    monkeypatch.setattr(screen.launch, "_wait", lambda proc: 0)
    monkeypatch.setattr(screen.launch, "_start", lambda cmd, env, **kw: subprocess.Popen(["true"]))
    out = tmp_path / "o"
    assert run_workflow(Config(), out, 1, dry_run=True) == 0
    assert (out / "config.dry-run.yaml").is_file() and not (out / "config.yaml").exists()


# --------------------------------------------------------------------------- a new user's robustness audit

def test_several_partners_are_all_checked_before_any_ranking_is_written(levels, tmp_path, capsys):
    # `--partner y6,p_gas.csv` wrote rankings/y6--…/ before refusing the gas-scale file, and
    # `--partner y6,c60,p_norole.csv` wrote two rankings, then exited 2
    gas = tmp_path / "p_gas.csv"
    gas.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale,role\nPG,-7.0,-2.5,3.5,gas,acceptor\n", encoding="utf-8")
    norole = tmp_path / "p_norole.csv"
    norole.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale\nPN,-5.6,-4.0,1.5,film\n", encoding="utf-8")
    both = tmp_path / "both.csv"
    both.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale,role\nD1,-5.3,-3.4,1.8,film,donor\n"
                    "A1,-5.7,-4.0,1.5,film,acceptor\n", encoding="utf-8")
    out = tmp_path / "out"
    for lv, partners, said in ((levels, f"y6,{gas}", "on the 'gas' scale"),
                               (both, f"y6,c60,{norole}", "partner 'PN' has no role")):
        rc, stdout, err = _cli(capsys, "rank", "--levels", str(lv), "--out", str(out), "--partner", partners)
        assert rc == 2 and said in err and len(err.strip().splitlines()) == 1, err
        assert not stdout and not out.exists()
    # a later partner's folder holding another partner's ranking: refused before the first partner is ranked
    from screen.rank_io import ranking_folder

    assert _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", "c60")[0] == 0
    (c60,) = (out / "rankings").iterdir()
    c60.rename(out / "rankings" / ranking_folder("c70", {}))
    rc, _, err = _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", "y6,c70")
    assert rc == 2 and "holds the ranking against partner 'c60'" in err
    assert [p.name for p in (out / "rankings").iterdir()] == [ranking_folder("c70", {})]


def test_levels_of_another_protocol_ranked_into_a_run_folder_say_so(levels, tmp_path, capsys):
    # said "--config …/runB/config.yaml: … rank with the run's own config.yaml" although no --config was given
    from screen.config import Config

    run_a, run_b = tmp_path / "runA", tmp_path / "runB"
    run_a.mkdir()
    run_b.mkdir()
    (run_a / "levels.csv").write_bytes(levels.read_bytes())
    ff = Config().protocol_id
    (run_a / "levels.csv.meta.json").write_text(json.dumps({"protocol_id": ff, "scale": "film"}), encoding="utf-8")
    (run_a / "config.yaml").write_text(yaml.safe_dump(Config().to_dict()), encoding="utf-8")
    xtb = Config.of({"structures": {"geometry": "xtb"}})
    (run_b / "config.yaml").write_text(yaml.safe_dump(xtb.to_dict()), encoding="utf-8")
    rc, stdout, err = _cli(capsys, "rank", "--levels", str(run_a / "levels.csv"), "--out", str(run_b), "--partner",
                           "y6")
    assert rc == 2 and len(err.strip().splitlines()) == 1
    assert f"are of protocol {ff}, the run in {run_b} is of protocol {xtb.protocol_id}" in err
    assert "--config" in err and f"--config {run_a / 'config.yaml'}" in err and "another --out" in err
    assert f"--config {run_b / 'config.yaml'}:" not in err  # no --config was given
    assert sorted(p.name for p in run_b.iterdir()) == ["config.yaml"]


def test_ids_the_figure_font_lacks_draw_no_boxes_and_no_warnings(tmp_path, capsys):
    # CJK ids printed a Matplotlib "Glyph … missing from font" warning for every character on every ranking
    import warnings

    path = tmp_path / "cjk.csv"
    path.write_text("id,smiles,homo_ev,lumo_ev,gap_opt_ev,scale,role\n"
                    "\u5316\u5408\u7269,c1ccc(-c2cccs2)s1,-5.55,-3.60,1.95,film,donor\n"
                    "\u5316\u5408\u72697,c1ccc(-c2cccs2)s1,-5.45,-3.50,1.90,film,donor\n", encoding="utf-8")
    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always")
        rc, _, err = _cli(capsys, "rank", "--levels", str(path), "--out", str(tmp_path / "o"), "--partner", "y6")
    assert rc == 0 and "Glyph" not in err
    assert not [w for w in seen if "missing from font" in str(w.message)]
    (report,) = (tmp_path / "o" / "rankings").glob("*/report.html")
    html = report.read_text(encoding="utf-8")
    figures = html[html.index('<svg id="fig-levels"'):]
    assert "\u5316" not in figures.split("</svg>")[0]  # the level diagram: ranks instead of boxes
    assert "\u2026" + "7" in html  # the readable part of an id is kept


def test_the_command_table_lists_every_option_of_run():
    # the run row of docs/contracts.md §7 omitted --config, --strict, --dry-run and --profile
    from screen.cli import build_parser

    doc = (Path(__file__).resolve().parent.parent / "docs" / "contracts.md").read_text(encoding="utf-8")
    row = next(line for line in doc.splitlines() if line.startswith("| `dascreen run "))
    parser = build_parser()
    run = next(a for a in parser._actions if a.dest == "command").choices["run"]
    options = [s for a in run._actions for s in a.option_strings if s.startswith("--") and s != "--help"]
    assert options and all(f"[{o}" in row for o in options), [o for o in options if f"[{o}" not in row]


# --------------------------------------------------------------------------- console table (meeting-17 audit)
def _two_role_levels(tmp_path):
    path = tmp_path / "two.csv"
    path.write_text("id,smiles,homo_ev,lumo_ev,gap_opt_ev,scale,role\n"
                    "KF-D01,c1ccc(-c2cccs2)s1,-5.4574,-3.0014,1.95,film,donor\n"
                    "KF-D02,c1ccc(-c2ccco2)s1,-5.30,-3.20,1.90,film,donor\n"
                    "KF-A01,c1ccc(-c2ccccn2)s1,-5.90,-3.90,1.80,film,acceptor\n", encoding="utf-8")
    return path


def test_the_console_table_has_fixed_decimals_per_column_and_p_aligned(tmp_path, capsys):
    # the meeting-17 audit: `.3g` printed LUMO "-3" for -3.0014 and PCE "13" where the report shows 13.0
    out = tmp_path / "out"
    rc, text, _ = _cli(capsys, "rank", "--levels", str(_two_role_levels(tmp_path)), "--out", str(out),
                       "--partner", "y6")
    assert rc == 0
    lines = text.splitlines()
    head = next(i for i, line in enumerate(lines) if line.split()[:2] == ["rank", "id"])
    assert "p_aligned" in lines[head].split()
    row = next(line for line in lines[head + 1:] if " KF-D01 " in line).split()
    cols = lines[head].split()
    value = dict(zip(cols, row))
    assert value["lumo_ev"] == "-3.00" and value["homo_ev"] == "-5.46"
    for col, decimals in {"voc_v": 3, "jsc_ma_cm2": 1, "pce_pct": 1, "pce_sigma_pct": 1, "p_above_target": 2,
                          "p_aligned": 2, "delta_homo_ev": 2, "delta_lumo_ev": 2}.items():
        assert len(value[col].split(".")[1]) == decimals, (col, value[col])


def test_the_console_header_counts_only_the_candidates_that_pair(tmp_path, capsys):
    # the meeting-17 audit: "32 ranked against y6" counted the acceptors, which cannot pair with an acceptor
    out = tmp_path / "out"
    rc, text, _ = _cli(capsys, "rank", "--levels", str(_two_role_levels(tmp_path)), "--out", str(out),
                       "--partner", "y6")
    assert rc == 0
    assert "dascreen: 2 donors ranked against y6 (1 not paired: same role as the partner);" in text


def test_a_cut_console_cell_ends_with_an_ellipsis():
    from screen.cli import cut_cell, fixed_decimals

    assert cut_cell("same_computed_structure;class_voc_unranked", 40) == "same_computed_structure;class_voc_unran…"
    assert cut_cell("class_voc_unranked", 40) == "class_voc_unranked"
    # the audit's values: LUMO -3.0014, Voc 1.0004, PCE 13.0
    assert (fixed_decimals(-3.0014, 2), fixed_decimals(1.0004, 3), fixed_decimals(13.0, 1)) == ("-3.00", "1.000", "13.0")


def test_a_set_and_a_sort_order_are_named_in_the_header_the_index_and_status(levels, tmp_path, capsys):
    # the meeting-17 audit: `--set device.min_delta_homo_ev=0.1` printed the default run's header, and the index showed
    # two folders that differed only in counts
    out = tmp_path / "out"
    rc, text, _ = _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", "c60",
                       "--set", "device.min_delta_homo_ev=0.1")
    assert rc == 0 and "set device.min_delta_homo_ev=0.1" in text and "sorted by" not in text
    rc, text, _ = _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", "c60",
                       "--sort-by", "p_above_target")
    assert rc == 0 and "sorted by P(PCE > target) (p_above_target)" in text and "set device" not in text
    rc, text, _ = _cli(capsys, "rank", "--levels", str(levels), "--out", str(out), "--partner", "c60")
    assert rc == 0 and "sorted by" not in text and "; set " not in text
    index = pd.read_csv(out / "rankings-index.csv", keep_default_na=False)
    assert sorted(index["settings"]) == ["", "device.min_delta_homo_ev=0.1", "rank.sort_by=p_above_target"]
    from screen.cli import _print_rankings  # the index as `dascreen status` prints it

    _print_rankings(out)
    listed = capsys.readouterr().out
    assert "sorted by pce_pct; set device.min_delta_homo_ev=0.1, levels " in listed
    assert "sorted by p_above_target; set rank.sort_by=p_above_target" in listed
