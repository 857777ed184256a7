"""An overnight-batch operator's findings: a calibration pinned for the whole run and recorded in the levels
sidecar, duplicate-id messages that point at real file lines, `dascreen status` that says what it leaves out,
and the cause of a failed workflow (a full disk) in the one-line console message."""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import pandas as pd
import pytest

from screen.cli import main


def _cli(capsys, *args):
    rc = main(list(args))
    captured = capsys.readouterr()
    return rc, captured.out, captured.err


@pytest.fixture()
def calibration(tmp_path, repo_dir):
    """A private, self-consistent copy of the shipped default calibration and its reference data.

    The models' fingerprints are stamped with the copied reference data, so the copy matches whatever state the
    repository's reference files are in (others may be editing and refitting them)."""
    from screen.calibrate import fingerprint
    from screen.config import Config

    models, reference = tmp_path / "models", tmp_path / "reference"
    shutil.copytree(repo_dir / "models" / "reference", reference)
    cfg = Config.of({"calibration": {"models": str(models), "reference": str(reference)}})
    source = repo_dir / "models" / cfg.protocol_id
    if not source.is_dir():
        source = sorted((repo_dir / "models").glob("tblite-gfn2-ff-*"))[0]
    shutil.copytree(source, models / cfg.protocol_id)
    fp = fingerprint(cfg, reference)
    for path in (models / cfg.protocol_id).glob("*.json"):
        model = json.loads(path.read_text(encoding="utf-8"))
        model["fingerprint"] = fp
        path.write_text(json.dumps(model, indent=1), encoding="utf-8")
    return cfg, models / cfg.protocol_id, reference


def _sets(models_folder: Path, reference: Path) -> list[str]:
    return ["--set", f"calibration.models={models_folder.parent}", "--set", f"calibration.reference={reference}"]


def _change_models(folder: Path) -> None:
    """What a `git pull` of refitted models does: other model files, the same fingerprint."""
    path = folder / "ip.json"
    model = json.loads(path.read_text(encoding="utf-8"))
    model["note_of_a_refit"] = "changed during the run"
    path.write_text(json.dumps(model, indent=1), encoding="utf-8")


def _change_reference(reference: Path) -> None:
    """Reference data edited (the models were fitted on the old data)."""
    with open(reference / "ip_gas.csv", "a", encoding="utf-8") as fh:
        fh.write("# edited during the run\n")


# --------------------------------------------------------------------------- 1. the calibration is pinned

def test_a_dascreen_run_never_plans_a_calibration_when_the_installed_one_changes_after_its_check(
        tmp_path, calibration, data_dir, monkeypatch, capfd):
    # the operator's report: the shipped models changed during a run (a git pull) and the workflow, refit: auto,
    # started fitting its own calibration (389 reference molecules, 2.3 h), said only in logs/workflow.log
    import screen.launch

    cfg, folder, reference = calibration
    start = screen.launch._start

    def changed_then_start(cmd, env, **kwargs):  # the change lands after the pre-flight check and the hand-over
        _change_reference(reference)
        return start(cmd, env, **kwargs)

    monkeypatch.setattr(screen.launch, "_start", changed_then_start)
    candidates = tmp_path / "c.csv"
    candidates.write_text("id,smiles\nT1,c1ccsc1\n", encoding="utf-8")
    rc = main(["run", str(candidates), "--out", str(tmp_path / "out"), "--cores", "1", "--dry-run",
               *_sets(folder, reference)])
    out, err = capfd.readouterr()
    assert rc == 0, out[-3000:] + err[-3000:]
    jobs = out + err
    planned = set(re.findall(r"^(\w+)\s+\d+\s*$", jobs, re.M))  # the job stats table: rule, count
    assert {"prepare", "levels", "rank"} <= planned, jobs[-3000:]
    assert not planned & {"calibrate", "reference_input"}, jobs[-3000:]
    assert "no shipped calibration matches" not in jobs


def test_a_bare_snakemake_run_still_decides_by_itself(tmp_path, calibration):
    # DEVELOPERS.md: only a bare snakemake run with refit: auto refits by itself; the dascreen command pins
    from screen.launch import PIN_ENV, calibration_pin, pinned_calibration

    cfg, folder, reference = calibration
    assert pinned_calibration({}) is None
    pin = calibration_pin(cfg, tmp_path)
    assert pin["folder"] == str(folder.resolve()) and len(pin["models_sha256"]) == 64
    assert pinned_calibration({PIN_ENV: json.dumps(pin)}) == pin
    assert calibration_pin(cfg.with_overrides({"calibration": {"refit": "always"}}), tmp_path) is None  # announced
    _change_reference(reference)
    assert calibration_pin(cfg, tmp_path) == {"folder": None}  # the workflow then stops instead of fitting one


def _levels_job(tmp_path, cfg, folder, pinned: str = ""):
    """The levels stage as the workflow runs it, on a prepared one-row batch (its molecule not computed)."""
    from screen.prepare import prepare
    from screen.stages import main as stages_main

    candidates = tmp_path / "c.csv"
    candidates.write_text("id,smiles\nT1,c1ccsc1\n", encoding="utf-8")
    prepare(candidates, tmp_path / "prepared")
    sections = json.dumps(cfg.sections("candidates", "structures", "electronic", "polymer", "levels", "calibration"))
    out = tmp_path / "levels.csv"
    args = ["--config", sections, "levels", "--manifest", str(tmp_path / "prepared" / "manifest.csv"),
            "--models", str(folder), "--out", str(out), "--meta", f"{out}.meta.json"]
    return stages_main(args + ([f"--pinned={pinned}"] if pinned else [])), out


def test_the_levels_job_of_a_pinned_run_stops_with_one_message_when_the_models_changed(tmp_path, calibration, capsys):
    from screen.launch import calibration_pin

    cfg, folder, reference = calibration
    pin = json.dumps(calibration_pin(cfg, tmp_path))
    _change_models(folder)
    rc, out = _levels_job(tmp_path, cfg, folder, pin)
    err = capsys.readouterr().err
    err = err[err.index("dascreen: error:"):] if "dascreen: error:" in err else err
    assert rc == 2 and not out.exists()
    assert err.startswith("dascreen: error: the calibration changed during this run: ") and err.count("\n") == 1, err
    assert f"{folder.resolve()} holds other model files than at the start" in err
    assert "Run the same `dascreen run` command again" in err and "dascreen calibrate --from-raw" in err


def test_the_levels_job_names_changed_reference_data_without_a_traceback(tmp_path, calibration, capsys):
    # before: CalibrationMismatchError with a traceback and exit 1 in logs/levels.log
    cfg, folder, reference = calibration
    _change_reference(reference)
    rc, out = _levels_job(tmp_path, cfg, folder)
    err = capsys.readouterr().err
    assert rc == 2 and not out.exists() and "Traceback" not in err
    assert f"the reference data in {reference} are not those the models in {folder.resolve()} were fitted on" in err


def test_a_calibration_changed_during_a_run_stops_it_and_the_same_command_then_records_the_new_one(
        tmp_path, calibration, monkeypatch, capsys):
    import screen.launch

    cfg, folder, reference = calibration
    first = _models_sha256(folder)
    start = screen.launch._start

    def changed_then_start(cmd, env, **kwargs):
        _change_models(folder)  # refitted models for the same reference data arrive mid-run
        return start(cmd, env, **kwargs)

    monkeypatch.setattr(screen.launch, "_start", changed_then_start)
    candidates = tmp_path / "c.csv"
    candidates.write_text("id,smiles\nT1,c1ccsc1\n", encoding="utf-8")
    out = tmp_path / "out"
    command = ["run", str(candidates), "--out", str(out), "--cores", "1", *_sets(folder, reference)]
    rc, _, err = _cli(capsys, *command)
    last = err.strip().splitlines()[-1]
    assert rc == 1 and not (out / "levels.csv").exists(), err[-3000:]
    assert last.startswith("dascreen: the workflow stopped with exit code 1: the calibration changed during this "
                           "run:") and "holds other model files than at the start" in last, last
    assert "Traceback" not in (out / "logs" / "levels.log").read_text(encoding="utf-8")
    assert not (out / "work" / "reference").exists() and not (out / "models").exists()  # nothing fitted

    monkeypatch.setattr(screen.launch, "_start", start)
    rc, _, err = _cli(capsys, *command)  # the fix the message names: the same command again
    assert rc == 0, err[-3000:]
    meta = json.loads((out / "levels.csv.meta.json").read_text(encoding="utf-8"))
    assert meta["calibration_models"]["folder"] == str(folder.resolve())
    assert meta["calibration_models"]["models_sha256"] == _models_sha256(folder) != first
    # the report's calibration table reads the ranking sidecar's levels_meta["calibration"]: the models' statistics,
    # which the provenance record (first named "calibration" too) had displaced ("not recorded" in every row)
    ranked = sorted((out / "rankings").glob("*/ranking.meta.json"))
    assert ranked
    stats = json.loads(ranked[0].read_text(encoding="utf-8"))["levels_meta"]["calibration"]
    assert "loo_mae_ev" in stats["ip"] and "models_sha256" not in stats


def _models_sha256(folder: Path) -> str:
    """The contract's check of a calibration: `cat` of the six model files in order | sha256sum."""
    import hashlib

    names = ("ip", "ea", "gap_opt", "homo_film", "lumo_film", "gap_opt_film")
    return hashlib.sha256(b"".join((folder / f"{n}.json").read_bytes() for n in names)).hexdigest()


# --------------------------------------------------------------------------- 2. the calibration in the sidecar

def test_the_calibration_record_tells_two_calibrations_apart(calibration):
    from screen.provenance import calibration_record

    cfg, folder, reference = calibration
    record = calibration_record(folder)
    fp = json.loads((folder / "ip.json").read_text(encoding="utf-8"))["fingerprint"]
    assert record["folder"] == str(folder.resolve()) and record["protocol_id"] == cfg.protocol_id
    assert record["reference_sha256"] == fp["reference_sha256"]
    assert record["models_sha256"] == _models_sha256(folder)
    assert len(record["statistics_sha256"]) == 64
    _change_models(folder)
    assert calibration_record(folder)["models_sha256"] != record["models_sha256"]


# --------------------------------------------------------------------------- 3. duplicate ids point at file lines

def test_a_duplicate_id_names_the_file_lines_of_both_rows(tmp_path):
    from screen.prepare import read_candidates, validate

    path = tmp_path / "dupline.csv"  # the operator's file: blank lines before both rows
    path.write_text("id,smiles\n\nA,c1ccsc1\n\n\nA,c1ccoc1\n", encoding="utf-8")
    error = validate(read_candidates(path)).loc[1, "error"]
    assert "already used by the row on line 3 of dupline.csv" in error and "this row (line 6)" in error, error
    assert "'row' column" not in error and "line 2" not in error

    smi = tmp_path / "c.smi"
    smi.write_text("# comment\nc1ccsc1 A\n\nc1ccoc1 A\n", encoding="utf-8")
    error = validate(read_candidates(smi)).loc[1, "error"]
    assert "line 2 of c.smi" in error and "(line 4)" in error, error


def test_a_duplicate_id_in_an_sd_file_names_the_record_and_its_line(tmp_path):
    from rdkit import Chem

    from screen.prepare import read_candidates, validate

    mol = Chem.MolFromSmiles("CCO")
    mol.SetProp("_Name", "A")
    record = Chem.MolToMolBlock(mol) + "$$$$\n"
    path = tmp_path / "c.sdf"
    path.write_text(record * 2, encoding="utf-8")
    error = validate(read_candidates(path)).loc[1, "error"]
    second = record.count("\n") + 1  # the second record's title line
    assert "already used by SD record 1 (line 1) of c.sdf" in error, error
    assert f"this row (SD record 2, line {second})" in error, error


# --------------------------------------------------------------------------- 4. status says what it leaves out

def _finished_run(root: Path) -> None:
    prepared = root / "work" / "candidates" / "prepared"
    prepared.mkdir(parents=True)
    pd.DataFrame({"key": ["m0000000000000000"], "smiles": ["C"]}).to_csv(prepared / "shard-000.csv", index=False)
    for stage in ("structures", "electronic"):
        (root / "work" / "candidates" / stage).mkdir(parents=True)
        pd.DataFrame({"key": ["m0000000000000000"]}).to_csv(root / "work" / "candidates" / stage / "shard-000.csv",
                                                            index=False)
    (root / "levels.csv").write_text("id\n")


def test_status_says_how_many_rankings_it_does_not_list(tmp_path, capsys):
    from screen.rank_index import write_ranking_index

    _finished_run(tmp_path)
    for i in range(13):
        folder = tmp_path / "rankings" / f"y6--{i:08x}"
        folder.mkdir(parents=True)
        meta = {"partner": {"id": "y6"}, "device": {"model": "fitted", "absorber": "both"},
                "rank": {"target_pce_pct": 10.0 + i, "sort_by": "pce_pct"}, "levels": {"path": str(tmp_path / "levels.csv")},
                "counts": {"ranked": 3, "passing": 1, "shortlist": 1}}
        (folder / "ranking.meta.json").write_text(json.dumps(meta))
        (folder / "ranking.csv").write_text("rank,id\n")
        dye = tmp_path / "dyecell" / f"tio2-anatase--co-bpy3--{i:08x}"
        dye.mkdir(parents=True)
        (dye / "ranking.meta.json").write_text(json.dumps({"oxide": {"id": "tio2-anatase"},
                                                           "mediator": {"id": "co-bpy3"}, "counts": {}}))
    write_ranking_index(tmp_path)
    rc, out, _ = _cli(capsys, "status", "--out", str(tmp_path))
    assert rc == 0 and "13 ranking(s)" in out
    assert f"  ... and 1 more not shown ({tmp_path / 'rankings-index.csv'} lists every one)" in out, out
    assert f"  ... and 1 more not shown (every one is in {tmp_path / 'dyecell'})" in out, out


# --------------------------------------------------------------------------- 5. a full disk in the console line

ENOSPC_LOG = """Error in rule compute:
    jobid: 8
Logfile /r/out/logs/candidates/compute/shard-002.log:
compute shard-002: 1/16 molecules (6%)
Traceback (most reWorkflowError:
Error recording metadata for finished job ([Errno 28] No space left on device). Please ensure write permissions for the directory /r/out/.snakemake
"""


def test_a_failed_run_says_no_space_left_on_device_in_its_one_line_message(tmp_path, calibration, capsys,
                                                                           monkeypatch):
    import screen.cli

    cfg, folder, reference = calibration

    def full_disk(cfg, out, cores, targets=(), **kwargs):
        (out / "logs").mkdir(parents=True, exist_ok=True)
        (out / "logs" / "workflow.log").write_text(ENOSPC_LOG, encoding="utf-8")
        return 1

    monkeypatch.setattr(screen.cli, "run_workflow", full_disk)
    candidates = tmp_path / "c.csv"
    candidates.write_text("id,smiles\nT1,c1ccsc1\n", encoding="utf-8")
    out = tmp_path / "out"
    rc, _, err = _cli(capsys, "run", str(candidates), "--out", str(out), *_sets(folder, reference))
    last = err.strip().splitlines()[-1]
    assert rc == 1
    assert last.startswith("dascreen: the workflow stopped with exit code 1: No space left on device (errno 28, "
                           "ENOSPC): the disk"), last
    assert "run the same command again" in last and f"job logs in {out}/logs/" in last


def test_the_failure_cause_prefers_a_full_disk_and_else_a_jobs_own_message():
    from screen.launch import failure_cause

    assert failure_cause("x\ndascreen: error: the calibration changed during this run: y\n") == \
        "the calibration changed during this run: y"
    assert failure_cause("dascreen: error: z\nOSError: [Errno 28] No space left on device: '/r/a'").startswith(
        "No space left on device (errno 28, ENOSPC)")
    assert failure_cause("RuntimeError: the report failed: OSError: [Errno 122] Disk quota exceeded").startswith(
        "Disk quota exceeded (errno 122, EDQUOT)")
    assert failure_cause("Error in rule x:\n  boom") is None


# --------------------------------------------------------------------------- 6. one console line on a failure

_JOB_COMMAND = ("/v/bin/python -m screen.stages --config '" + json.dumps({"calibration": {"models": "/m"},
                "structures": {f"option_{i}": i for i in range(120)}}) + "' levels --out /r/levels.csv")
#: what the engine printed for the operator's E2 run (a levels job's traceback), the command line twice
E2_LOG = f"""RuleException:
CalledProcessError in file "/w/rules/levels.smk", line 21:
Command 'set -euo pipefail;  {_JOB_COMMAND} > /r/logs/levels.log 2>&1' returned non-zero exit status 1.
Error in rule levels:
    message: None
    jobid: 1
    log: /r/logs/levels.log (check log file(s) for error details)
    shell:
        {_JOB_COMMAND} > /r/logs/levels.log 2>&1
        (command exited with non-zero exit code)
Logfile /r/logs/levels.log:
================================================================================
Traceback (most recent call last):
  File "/w/screen/calibrate.py", line 282, in load_models
screen.calibrate.CalibrationMismatchError: calibration model /m/p/ip.json does not belong to this run's protocol
================================================================================
Shutting down, this might take some time.
WorkflowError:
At least one job did not complete successfully.
"""


def _engine(tmp_path: Path, text: str, rc: int) -> list[str]:
    """A command that stands for the workflow engine: prints ``text`` (its log) and exits with ``rc``."""
    import sys

    script = tmp_path / f"engine-{rc}.py"
    script.write_text(f"import sys\nsys.stdout.write({text!r})\nsys.exit({rc})\n", encoding="utf-8")
    return [sys.executable, str(script)]


def test_a_failed_run_prints_one_line_with_the_cause_and_the_engine_text_stays_in_the_log(
        tmp_path, calibration, capsys, monkeypatch):
    # the operator's E2.err: the engine's whole error text, ~2 kB of JSON command line printed twice
    import screen.launch

    cfg, folder, reference = calibration
    start = screen.launch._start
    monkeypatch.setattr(screen.launch, "_start", lambda cmd, env, **kw: start(_engine(tmp_path, E2_LOG, 1), env, **kw))
    candidates = tmp_path / "c.csv"
    candidates.write_text("id,smiles\nT1,c1ccsc1\n", encoding="utf-8")
    out = tmp_path / "out"
    rc, _, err = _cli(capsys, "run", str(candidates), "--out", str(out), *_sets(folder, reference))
    assert rc == 1
    assert "set -euo pipefail" not in err and "option_7" not in err and "Traceback" not in err, err
    failure = [line for line in err.splitlines() if "workflow" in line and "progress" not in line]
    assert len(failure) == 1, err
    assert failure[0] == (f"dascreen: the workflow stopped with exit code 1: CalibrationMismatchError: calibration "
                          f"model /m/p/ip.json does not belong to this run's protocol (job levels); job logs in "
                          f"{out}/logs/; the engine's whole log: {out / 'logs' / 'workflow.log'}"), err
    assert err.count("CalibrationMismatchError") == 1  # said once
    assert "set -euo pipefail" in (out / "logs" / "workflow.log").read_text(encoding="utf-8")  # all kept there


def test_the_other_commands_get_one_failure_line_from_the_launcher(tmp_path, capsys):
    from screen.launch import _quiet

    log = tmp_path / "logs" / "workflow.log"
    assert _quiet(_engine(tmp_path, E2_LOG, 1), {}, tmp_path, log, "dascreen") == 1
    err = capsys.readouterr().err.strip()
    assert err == (f"dascreen: the workflow failed: CalibrationMismatchError: calibration model /m/p/ip.json does "
                   f"not belong to this run's protocol (job levels); its whole log: {log}"), err
    assert _quiet(_engine(tmp_path, E2_LOG, 1), {}, tmp_path, log, "dascreen", explain=False) == 1
    assert capsys.readouterr().err == ""  # dascreen run says it in its own line


# --------------------------------------------------------------------------- 8. a non-UTF-8 file names the line

def test_a_latin1_candidate_file_is_refused_naming_the_line_and_id_not_a_byte_offset(tmp_path, capsys):
    path = tmp_path / "batch.csv"
    path.write_bytes("name,id,smiles\nok,A,CCO\n\nlatin,café-3,c1ccsc1\nok,B,CC\nagain,é,C\n".encode("latin-1"))
    rc, _, err = _cli(capsys, "run", str(path), "--out", str(tmp_path / "out"))
    assert rc == 2 and err.count("\n") == 1, err
    assert f"{path}: not UTF-8 text: line 4 (id 'caf\ufffd-3') holds byte 0xe9, which is not UTF-8" in err, err
    assert "2 lines have such bytes: 4, 6" in err and "offset" not in err and "position" not in err, err
    assert not (tmp_path / "out").exists()

    smi = tmp_path / "batch.smi"
    smi.write_bytes("# list\nCCO A\nc1ccsc1 caf\xe9\n".encode("latin-1"))
    rc, _, err = _cli(capsys, "run", str(smi), "--out", str(tmp_path / "out"))
    assert rc == 2 and "line 3 (id 'caf\ufffd') holds byte 0xe9" in err, err


# --------------------------------------------------------------------------- 10. the night's attempts are kept

def test_each_attempt_keeps_the_earlier_workflow_logs_with_dated_lines(tmp_path, capsys):
    from screen.launch import _quiet

    log = tmp_path / "logs" / "workflow.log"
    for attempt, rc in (("first attempt\n", 1), ("second attempt\n", 0), ("third attempt\n", 0)):
        assert _quiet(_engine(tmp_path, attempt, rc), {}, tmp_path, log, "dascreen") == rc
    capsys.readouterr()
    logs = {p.name: p.read_text(encoding="utf-8") for p in log.parent.iterdir()}
    assert sorted(logs) == ["workflow.1.log", "workflow.2.log", "workflow.log"], sorted(logs)
    assert "third attempt" in logs["workflow.log"] and "second attempt" in logs["workflow.1.log"]
    first = logs["workflow.2.log"].splitlines()
    assert re.fullmatch(r"# dascreen: attempt started \d{4}-\d\d-\d\d \d\d:\d\d:\d\d [+-]\d{4} \(pid \d+\)", first[0])
    assert first[1] == "first attempt" and re.fullmatch(r"# dascreen: attempt ended with exit code 1 \S+ \S+ \S+",
                                                        first[2]), first
    assert "the earlier attempt: workflow.1.log" in logs["workflow.log"].splitlines()[0]


def test_a_job_log_says_how_many_molecules_were_resumed_stored_and_computed(tmp_path):
    import io

    from screen.batch import run_journalled
    from screen.io import Journal, Progress

    class Store:  # the results store holds one of the three molecules left to do
        hits = 0

        def lookup(self, item):
            if item == 4:
                self.hits += 1
                return {"key": "4", "sq": 16}
            return None

        def remember(self, item, record):
            pass

        def keep(self, item, record):
            pass

    journal = Journal(tmp_path / "j.jsonl")
    for i in (1, 2):  # an interrupted attempt finished two molecules
        journal.append({"key": str(i), "sq": i * i})
    progress = Progress("electronic shard-000", stream=io.StringIO(), every_s=0)
    done = run_journalled([1, 2, 3, 4, 5], str, lambda i: {"key": str(i), "sq": i * i}, journal, progress, Store())
    assert sorted(done) == ["1", "2", "3", "4", "5"]
    last = progress.stream.getvalue().strip().splitlines()[-1]
    assert last == ("electronic shard-000: 1 of 3 molecules from the results store, 2 computed; 2 more resumed from "
                    "the journal (an interrupted attempt finished them)"), last


# --------------------------------------------------------------------------- 11. messages that say what happened

def test_a_folder_in_use_is_not_called_a_configuration_error(tmp_path, capsys):
    import fcntl

    from screen.errors import FolderInUse
    from screen.launch import _lock

    candidates = tmp_path / "c.csv"
    candidates.write_text("id,smiles\nT1,c1ccsc1\n", encoding="utf-8")
    out = tmp_path / "out"
    out.mkdir()
    with open(out / ".dascreen.lock", "w") as held:  # another run holds the folder
        fcntl.flock(held, fcntl.LOCK_EX | fcntl.LOCK_NB)
        rc, _, err = _cli(capsys, "run", str(candidates), "--out", str(out))
        with pytest.raises(FolderInUse, match=r"another run \(dascreen or snakemake\) is using"):
            _lock(out)  # the launcher's own check (a run started between the pre-flight check and the lock)
    assert rc == 2 and err.startswith(f"dascreen: folder in use: another run (dascreen or snakemake) is using {out}; "), err
    assert "configuration error" not in err and err.count("\n") == 1, err


def test_a_missing_candidate_file_suggests_only_files_with_a_close_name(tmp_path, capsys):
    for name in ("batch.csv", "cv_bad.csv", "half1.csv"):
        (tmp_path / name).write_text("id,smiles\nA,CCO\n", encoding="utf-8")
    rc, _, err = _cli(capsys, "run", str(tmp_path / "nosuch.csv"), "--out", str(tmp_path / "out"))
    assert rc == 2 and "does not exist" in err and "did you mean" not in err, err  # before: batch.csv or cv_bad.csv
    rc, _, err = _cli(capsys, "run", str(tmp_path / "bacth.csv"), "--out", str(tmp_path / "out"))
    assert rc == 2 and err.strip().endswith(f"does not exist; did you mean {tmp_path / 'batch.csv'}?"), err
