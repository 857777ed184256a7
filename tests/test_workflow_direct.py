"""The packaged workflow run with Snakemake directly, not through `dascreen run` (a Snakemake power user's audit).

One real run of a tiny candidate file (thiophene and a row that does not parse) in a fresh folder; everything else
is a dry run, `--lint` or a job forced on that run. The results store of every run here is a file in the test's
own folder (store.path; DASCREEN_STORE is removed from the environment), never a user's store.
"""

from __future__ import annotations

import fcntl
import json
import os
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

REPO = Path(__file__).resolve().parent.parent
WORKFLOW = REPO / "screen" / "workflow" / "Snakefile"
CANDIDATES = "id,smiles\nT01,c1ccsc1\nBAD,C1CC\n"  # thiophene; an unclosed ring (rejected by the prepare stage)
CONDA_LINT = "Specify a conda environment or container for each rule."


def _env() -> dict:
    env = {k: v for k, v in os.environ.items() if k != "DASCREEN_STORE"}
    return {**env, "PYTHONUNBUFFERED": "1"}


def _smk(run: dict, *args, configfiles=(), pass_fds=(), env=None) -> subprocess.CompletedProcess:
    """Snakemake on the packaged workflow in the run's folder with its configuration (and ``configfiles`` after)."""
    cmd = [sys.executable, "-m", "snakemake", "--snakefile", str(WORKFLOW), "--directory", str(run["dir"]),
           "--cores", "2", "--configfile", str(run["config"]), *map(str, configfiles), *args]
    return subprocess.run(cmd, capture_output=True, text=True, env={**_env(), **(env or {})}, pass_fds=pass_fds,
                          timeout=600)


def _text(proc) -> str:
    return proc.stdout + proc.stderr


@pytest.fixture(scope="module")
def run(tmp_path_factory) -> dict:
    """A finished direct run: `snakemake --cores 2` with `out: res/` (relative, trailing slash)."""
    folder = tmp_path_factory.mktemp("direct")
    (folder / "cands.csv").write_text(CANDIDATES, encoding="utf-8")
    config = folder / "config.yaml"
    config.write_text(
        "candidates: cands.csv\nout: res/\npartner: y6\n"
        f"calibration: {{models: {REPO / 'models'}, reference: {REPO / 'models' / 'reference'}}}\n"
        f"store: {{path: {folder / 'store.sqlite'}}}\n", encoding="utf-8")
    state = {"dir": folder, "config": config, "out": folder / "res"}
    state["proc"] = _smk(state)
    assert state["proc"].returncode == 0, _text(state["proc"])[-3000:]
    (state["ranking"],) = (folder / "res" / "rankings").glob("*/ranking.csv")
    return state


# --------------------------------------------------------------------------- finding 1: the configured store

def test_direct_run_uses_the_store_of_its_configuration(run):
    from screen.store import ResultStore

    store = run["dir"] / "store.sqlite"
    assert store.is_file(), _text(run["proc"])[-2000:]  # before: the jobs got no store (DASCREEN_STORE only)
    stages = {row["stage"]: row["entries"] for row in ResultStore(store).summary()}
    assert stages.get("structures") == 1 and stages.get("electronic") == 1, stages  # thiophene, stored
    assert f"results store {store}" in _text(run["proc"])


# --------------------------------------------------------------------------- finding 2: content, not time

def test_candidate_file_replaced_by_an_older_one_is_prepared_again(run):
    cands = run["dir"] / "cands.csv"
    text, stat = cands.read_text(), cands.stat()
    try:
        cands.write_text(text + "T02,c1ccoc1\n", encoding="utf-8")
        os.utime(cands, (stat.st_atime - 86400, stat.st_mtime - 86400))  # a day older than the prepared batch
        proc = _smk(run, "-n")
        assert proc.returncode == 0, _text(proc)[-2000:]
        assert "checkpoint prepare:" in _text(proc) and "Params have changed" in _text(proc), _text(proc)[-2000:]
    finally:
        cands.write_text(text, encoding="utf-8")
        os.utime(cands, (stat.st_atime, stat.st_mtime))
    assert "Nothing to be done" in _text(_smk(run, "-n"))


# --------------------------------------------------------------------------- finding 3: the run folder's lock

def _held_lock(out: Path):
    fh = open(out / ".dascreen.lock", "a")  # noqa: SIM115 - the test holds it, as the dascreen command does
    fcntl.flock(fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
    return fh


def test_direct_run_refuses_a_folder_another_run_holds(run):
    from screen.preflight import run_active

    assert not run_active(run["out"])  # the finished direct run released the lock it took
    before = run["ranking"].stat().st_mtime_ns
    lock = _held_lock(run["out"])
    try:
        proc = _smk(run, "--forcerun", "rank")
        assert proc.returncode != 0 and "another run is using" in _text(proc), _text(proc)[-2000:]
        assert run["ranking"].stat().st_mtime_ns == before  # nothing ran
        assert _smk(run, "-n", "--forcerun", "rank").returncode == 0  # a dry run writes nothing: not refused
    finally:
        lock.close()


@pytest.mark.parametrize("how", ["dascreen", "flock"])
def test_workflow_started_with_the_locked_descriptor_runs(run, how):
    """`dascreen run` holds the lock and hands its descriptor to the engine (screen.launch.run_workflow, pass_fds,
    with DASCREEN_STORE set), as `flock FILE snakemake ...` does: that workflow must not refuse its own lock."""
    before = run["ranking"].stat().st_mtime_ns
    lock = _held_lock(run["out"])
    env = {"DASCREEN_STORE": str(run["dir"] / "store.sqlite")} if how == "dascreen" else {}
    try:
        proc = _smk(run, "--forcerun", "rank", pass_fds=(lock.fileno(),), env=env)
    finally:
        lock.close()
    assert proc.returncode == 0, _text(proc)[-2000:]
    assert run["ranking"].stat().st_mtime_ns != before


# --------------------------------------------------------------------------- finding 4: strict

def test_strict_fails_a_direct_run_with_a_rejected_row(run, tmp_path):
    strict = tmp_path / "strict.yaml"
    strict.write_text("strict: true\n", encoding="utf-8")
    proc = _smk(run, configfiles=[strict])
    assert proc.returncode != 0, _text(proc)[-2000:]  # before: strict was read by the dascreen command only
    assert "dascreen: error: strict: 2 rows: 1 ok, 1 rejected, 0 failed" in proc.stderr, proc.stderr[-2000:]
    assert (run["out"] / "levels.csv").is_file() and run["ranking"].is_file()  # written, as --strict leaves them
    assert "Nothing to be done" in _text(_smk(run, "-n"))  # strict: false plans no check


# --------------------------------------------------------------------------- findings 5 and 6: threads, re-runs

def test_settings_that_change_no_number_rerun_nothing(run, tmp_path):
    idle = tmp_path / "idle.yaml"
    idle.write_text("electronic: {threads: 2}\nexecution: {isolate: false, molecule_timeout_s: 600}\n"
                    "calibration: {refit: never}\n", encoding="utf-8")
    proc = _smk(run, "-n", configfiles=[idle])
    assert proc.returncode == 0 and "Nothing to be done" in _text(proc), _text(proc)[-3000:]


def test_a_setting_that_changes_numbers_reruns_compute(run, tmp_path):
    tighter = tmp_path / "accuracy.yaml"
    tighter.write_text("electronic: {accuracy: 5}\n", encoding="utf-8")
    proc = _smk(run, "-n", configfiles=[tighter])
    assert proc.returncode == 0 and "rule compute:" in _text(proc), _text(proc)[-3000:]


def test_compute_threads_are_electronic_threads(run, tmp_path):
    threads = tmp_path / "threads.yaml"
    threads.write_text("electronic: {threads: 2}\n", encoding="utf-8")
    proc = _smk(run, "-n", "-p", "--forcerun", "compute", configfiles=[threads])
    assert "OMP_NUM_THREADS=2 " in proc.stdout and "threads: 2" in proc.stdout, _text(proc)[-3000:]


def test_stage_keeps_the_thread_count_the_rule_set(tmp_path, monkeypatch):
    from screen import stages

    monkeypatch.setenv("OMP_NUM_THREADS", "3")  # the compute rule's OMP_NUM_THREADS={threads}
    code = stages.main(["--config", '{"electronic": {"threads": 1}}', "partner-input", "--partner", "smiles:C",
                        "--out", str(tmp_path / "p.csv")])
    assert code == 0 and os.environ["OMP_NUM_THREADS"] == "3"


# --------------------------------------------------------------------------- findings 7 and 8: configuration

def test_bad_setting_is_one_line_and_exit_code_2(run):
    proc = _smk(run, "-n", "--config", "levels_scale=gas")
    lines = [line for line in _text(proc).splitlines() if line.strip()]
    assert proc.returncode == 2, _text(proc)[-2000:]
    assert len(lines) == 1 and "levels_scale" in lines[0] and "allowed fields" in lines[0], lines[:20]


def test_nested_config_values_are_typed(run):
    proc = _smk(run, "-n", "--config", "rank={n_samples: 500, role: donor}", "strict=false")
    assert proc.returncode == 0 and "rule rank:" in _text(proc), _text(proc)[-2000:]  # a new ranking folder
    proc = _smk(run, "-n", "--config", "rank={n_samples: many}")
    assert proc.returncode == 2 and "rank.n_samples" in proc.stderr, _text(proc)[-2000:]


# --------------------------------------------------------------------------- finding 10: checks before any job

@pytest.mark.parametrize("setting, said", [
    ("levels={scale: gas}", "is on the 'film' scale"),
    ("partner=smiles:c1ccoc1", "has no role of its own"),  # the candidates have no role column
])
def test_partner_mistakes_stop_before_any_job(run, setting, said):
    proc = _smk(run, "-n", "--config", setting)
    assert proc.returncode == 2 and "dascreen: error: partner" in proc.stderr and said in proc.stderr, \
        _text(proc)[-2000:]


def test_stage_refusal_is_one_line(run, tmp_path, capsys):
    from screen import stages

    levels = pd.read_csv(run["out"] / "levels.csv", dtype=str, keep_default_na=False)
    levels["scale"] = "gas"
    levels.to_csv(tmp_path / "gas.csv", index=False)
    code = stages.main(["--config", "{}", "rank", "--levels", str(tmp_path / "gas.csv"), "--partner", "y6",
                        "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and err[0].startswith("dascreen: error: levels are on the 'gas' scale"), err


# --------------------------------------------------------------------------- findings 11 and 12: lint, software

@pytest.mark.parametrize("partner", ["file", "smiles:c1ccoc1"])  # the default partner (y6): tests/test_workflow.py
def test_lint_names_only_the_missing_software_definition(run, tmp_path, partner):
    if partner == "file":
        partner = tmp_path / "partner.csv"
        partner.write_text("id,homo_ev,lumo_ev,gap_opt_ev,scale,role\nP,-5.6,-3.6,1.6,film,acceptor\n")
    proc = _smk(run, "--lint", "--config", f"partner={partner}", "rank={role: donor}")
    titles = {line.strip()[2:].rstrip(":") for line in _text(proc).splitlines() if line.startswith("    * ")}
    assert titles == {CONDA_LINT.rstrip(":")}, _text(proc)[-3000:]


def test_no_conda_environment_that_cannot_be_built():
    rules = "".join(p.read_text() for p in (WORKFLOW.parent / "rules").glob("*.smk"))
    assert "conda:" not in rules and not (WORKFLOW.parent / "envs").exists()


# --------------------------------------------------------------------------- findings 13 and 14: outputs, paths

def test_declared_outputs_resources_and_benchmark(run):
    bench = run["out"] / "logs" / "candidates" / "compute" / "shard-000.benchmark.tsv"
    assert bench.is_file() and bench.read_text().startswith("s\th:m:s")
    proc = _smk(run, "-n", "--forcerun", "rank")
    block = _text(proc).split("rule rank:")[1].split("\n\n")[0]
    assert "ranking.safe.csv" in block, block
    assert "mem_mb=2000" in block and "runtime=15" in block, block


def test_out_is_normalised_and_the_sidecars_record_absolute_paths(run):
    assert "double '/'" not in _text(run["proc"])  # `out: res/` gave res//levels.csv
    meta = json.loads((run["out"] / "levels.csv.meta.json").read_text())
    assert meta["input"] == str(run["dir"] / "cands.csv")
    assert Path(meta["models"]).is_absolute() and Path(meta["models"]).is_dir()
    rank_meta = json.loads((run["ranking"].parent / "ranking.meta.json").read_text())
    assert str(run["out"]) in json.dumps(rank_meta) and "res//" not in json.dumps(rank_meta)



# --------------------------------------------------------------------------- a review of the direct-run changes

def test_a_missing_candidate_file_is_refused_in_a_direct_run(run, tmp_path):
    # a finished run re-ran levels and rank from its old batch and recorded the missing file as its input
    proc = _smk(run, "--config", f"candidates={tmp_path / 'nonexist.csv'}")
    assert proc.returncode == 2, _text(proc)[-2000:]
    assert "nonexist.csv is not a file" in proc.stderr


def test_an_open_but_unlocked_descriptor_is_no_held_lock(run):
    # `9<OUT/.dascreen.lock` while another process holds the lock passed as "started by dascreen" (a review)
    lock = run["out"] / ".dascreen.lock"
    lock.touch()
    with open(lock) as held:  # another run's lock: its own open file description
        fcntl.flock(held, fcntl.LOCK_EX | fcntl.LOCK_NB)
        with open(lock) as fd:  # the same file opened again and handed down, not locked
            proc = _smk(run, "--forcerun", "rank", pass_fds=(fd.fileno(),))
    assert proc.returncode != 0 and "another run is using" in _text(proc), _text(proc)[-2000:]
