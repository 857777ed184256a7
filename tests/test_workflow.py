"""The workflow end to end on a small fixture, through the `dascreen` command and Snakemake."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys

import pandas as pd
import pytest

from screen.calibrate import find_models
from screen.config import load_config

CONTRACT = ["id", "smiles", "status", "error", "ip_ev", "ea_ev", "gap_fund_ev", "homo_ev", "lumo_ev", "gap_opt_ev",
            "ip_sigma_ev", "ea_sigma_ev", "homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev", "scale"]
RAW = ["xtb_ip_ev", "xtb_ea_ev", "xtb_homo_ev", "xtb_lumo_ev"]


def _dascreen(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "screen.cli", *args], capture_output=True, text=True, cwd=cwd,
                          env={**os.environ, "PYTHONUNBUFFERED": "1"})


@pytest.fixture(scope="module")
def five_run(tmp_path_factory, data_dir, repo_dir):
    if find_models(load_config(repo_dir / "config" / "config.yaml",
                               {"calibration": {"models": str(repo_dir / "models"),
                                                "reference": str(repo_dir / "models" / "reference")}})) is None:
        pytest.fail("no shipped calibration model matches the default protocol: run "
                    "`dascreen calibrate --install models` and commit models/")
    out = tmp_path_factory.mktemp("five")
    proc = _dascreen("run", str(data_dir / "five.csv"), "--out", str(out), "--cores", "2", cwd=repo_dir)
    return out, proc


def test_run_exits_zero_and_summarises(five_run):
    out, proc = five_run
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-3000:]
    assert "6 rows: 5 ok, 1 rejected, 0 failed" in proc.stdout


def test_run_is_quiet_and_keeps_the_engine_log_in_a_file(five_run):
    out, proc = five_run
    log = out / "logs" / "workflow.log"
    assert log.is_file() and "Finished job" in log.read_text()
    assert "Finished job" not in proc.stdout + proc.stderr and "Building DAG" not in proc.stdout + proc.stderr
    assert "6 rows: 5 ok" in proc.stdout  # the summary stays on stdout


def test_status_of_the_finished_run_says_finished(five_run):
    out, _ = five_run
    proc = _dascreen("status", "--out", str(out))
    assert proc.stdout.startswith("dascreen: finished: 5/5 molecules computed (100%)"), proc.stdout
    assert "ETA" not in proc.stdout


def test_shortlist_holds_the_computed_3d_structures(five_run):
    from rdkit import Chem

    from screen.structures import read_structures

    out, _ = five_run
    # the five tiny test molecules are not viable against the default partner (y6); against C60 with a wide
    # gap window bithiophene is, so the shortlist holds at least one structure
    proc = _dascreen("rank", "--out", str(out), "--partner", "c60", "--set", "rank.gap_max_ev=5.0")
    assert proc.returncode == 0, proc.stdout[-2000:] + proc.stderr[-2000:]
    (folder,) = [p for p in (out / "rankings").iterdir() if p.name.startswith("c60--")]
    computed = {}
    for sdf in (out / "work" / "candidates" / "structures").glob("shard-*.sdf"):
        computed.update(read_structures(sdf))
    mols = [m for m in Chem.SDMolSupplier(str(folder / "shortlist.sdf"), removeHs=False)]
    meta = json.loads((folder / "ranking.meta.json").read_text())
    assert len(mols) == meta["counts"]["shortlist"] >= 1
    for mol in mols:
        ref = computed[mol.GetProp("structure_key")]
        assert mol.GetNumAtoms() == ref.GetNumAtoms() and any(a.GetAtomicNum() == 1 for a in mol.GetAtoms())
        diff = mol.GetConformer().GetPositions() - ref.GetConformer().GetPositions()
        assert abs(diff).max() < 1e-3 and mol.GetConformer().Is3D()


def test_levels_has_every_row_in_input_order_with_contract_columns(five_run, data_dir):
    out, _ = five_run
    levels = pd.read_csv(out / "levels.csv", dtype={"id": str}, keep_default_na=False)
    inp = pd.read_csv(data_dir / "five.csv", dtype=str, keep_default_na=False)
    assert list(levels["id"]) == list(inp["id"])
    assert levels.columns[: len(CONTRACT)].tolist() == CONTRACT
    assert set(RAW) <= set(levels.columns)
    ok = levels[levels["status"] == "ok"]
    assert len(ok) == 5
    assert (ok["scale"] == "film").all()  # every level says its scale
    assert (pd.to_numeric(ok["homo_ev"]) < pd.to_numeric(ok["lumo_ev"])).all()
    assert (pd.to_numeric(ok["ip_ev"]) > 0).all()
    bad = levels[levels["status"] != "ok"].iloc[0]
    assert bad["status"] == "rejected" and "SMILES syntax error" in bad["error"]


def test_sidecar_records_protocol_and_versions(five_run):
    out, _ = five_run
    meta = json.loads((out / "levels.csv.meta.json").read_text())
    assert meta["protocol"]["electronic"]["method"] == "GFN2-xTB"
    assert meta["protocol_id"].startswith("tblite-gfn2-ff-")
    assert meta["versions"]["tblite"] != "absent"
    assert meta["counts"] == {"rows": 6, "ok": 5, "rejected": 1, "failed": 0}


def test_rerun_is_a_no_op_and_strict_fails_on_bad_rows(five_run, data_dir, repo_dir):
    out, _ = five_run
    before = (out / "levels.csv").read_bytes()
    proc = _dascreen("run", str(data_dir / "five.csv"), "--out", str(out), "--cores", "1", "--strict", cwd=repo_dir)
    assert proc.returncode == 3, proc.stderr[-2000:]
    assert "Nothing to be done" in (out / "logs" / "workflow.log").read_text()  # the engine's log is in a file
    assert (out / "levels.csv").read_bytes() == before


def test_bad_config_is_one_clear_message(tmp_path, data_dir):
    cfg = tmp_path / "bad.yaml"
    cfg.write_text("device:\n  absorber: acceptor\n")
    proc = _dascreen("run", str(data_dir / "five.csv"), "--out", str(tmp_path / "o"), "--config", str(cfg))
    assert proc.returncode == 2
    assert "bad.yaml" in proc.stderr and "device.absorber" in proc.stderr and "donor, both" in proc.stderr


#: the one lint finding the workflow keeps: it runs from the project's virtualenv (its shell lines call that
#: interpreter), so it defines no conda environment or container (tests/test_workflow_direct.py: other partners)
CONDA_LINT = "Specify a conda environment or container for each rule."


def _snakemake_from_the_clone(repo_dir, work, *args) -> subprocess.CompletedProcess:
    """`snakemake ARGS` as from a clone (the top-level Snakefile, found in the working directory), with the engine's
    own folder (.snakemake: logs, metadata) in ``work``, never in the repository: the default configuration copied
    there (config/config.yaml, read from the engine's folder) with the demo candidates and ``work/out``."""
    (work / "config").mkdir(parents=True)
    shutil.copy(repo_dir / "config" / "config.yaml", work / "config" / "config.yaml")
    return subprocess.run([sys.executable, "-m", "snakemake", "--directory", str(work), *args, "--config",
                           f"candidates={repo_dir / 'candidates' / 'demo.csv'}", f"out={work / 'out'}"],
                          capture_output=True, text=True, cwd=repo_dir, timeout=600)


def test_snakemake_from_the_clone_plans_the_workflow(repo_dir, tmp_path):
    # README: "From a clone the same workflow runs with Snakemake directly: `snakemake --cores 8`". A
    # reproducibility audit found it planned nothing ("Nothing to be done", exit 0): the included workflow's
    # `all` is not the default target of the top-level Snakefile.
    proc = _snakemake_from_the_clone(repo_dir, tmp_path, "-n", "--cores", "1")
    text = proc.stdout + proc.stderr
    assert proc.returncode == 0, text[-2000:]
    planned = (("checkpoint", "prepare"), ("rule", "levels"), ("rule", "rank"))
    assert "Nothing to be done" not in text and all(f"{k} {r}:" in text for k, r in planned), text[-2000:]
    assert not (tmp_path / "out").exists()  # a dry run


def test_snakemake_lint_names_only_the_missing_software_definition(repo_dir, tmp_path):
    # every other lint finding must stay away (the default partner; other partners: tests/test_workflow_direct.py)
    proc = _snakemake_from_the_clone(repo_dir, tmp_path, "--lint")
    text = proc.stdout + proc.stderr
    titles = {line.strip()[2:].rstrip(":") for line in text.splitlines() if line.startswith("    * ")}
    assert titles == {CONDA_LINT}, text[-3000:]
    assert proc.returncode == 1  # snakemake --lint: 1 when it found something
    assert not (tmp_path / "out").exists()


def test_status_counts_molecules_done(five_run):
    out, _ = five_run
    proc = _dascreen("status", "--out", str(out))
    assert proc.returncode == 0 and "5/5 molecules computed (100%)" in proc.stdout, proc.stdout + proc.stderr


def test_smiles_partner_is_a_workflow_batch_computed_like_the_candidates(five_run, repo_dir):
    """`dascreen rank --partner smiles:` runs the partner's own batch through the workflow rules; the
    partner then has exactly the levels of the same molecule computed as a candidate (KF-T02, thiophene)."""
    out, _ = five_run
    spec = "smiles:C1=CSC=C1"
    proc = _dascreen("rank", "--partner", spec, "--out", str(out), "--role", "donor", cwd=repo_dir)
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-3000:]
    from screen.partners import partner_levels_path, partner_slug

    batch_levels = partner_levels_path(spec, out)
    assert batch_levels.is_file() and (batch_levels.parent / "prepared" / "manifest.csv").is_file()
    levels = pd.read_csv(out / "levels.csv", dtype={"id": str}, keep_default_na=False).set_index("id")
    (folder,) = (out / "rankings").glob(partner_slug(spec) + "--*")
    meta = json.loads((folder / "ranking.meta.json").read_text())
    for col in ("homo_ev", "lumo_ev", "gap_opt_ev", "homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev"):
        assert meta["partner"][col] == float(levels.loc["KF-T02", col]), col
    # a second ranking reuses the batch: nothing is recomputed
    stamp = batch_levels.stat().st_mtime_ns
    proc = _dascreen("rank", "--partner", "smiles:c1ccsc1", "--out", str(out), "--role", "donor", cwd=repo_dir)
    assert proc.returncode == 0 and batch_levels.stat().st_mtime_ns == stamp, proc.stderr[-2000:]


# --------------------------------------------------------------------------- everyday use (issue 13)

def test_two_runs_at_once_on_one_store_then_a_rerun_from_the_store(tmp_path, data_dir, repo_dir):
    env = {**os.environ, "PYTHONUNBUFFERED": "1", "DASCREEN_STORE": str(tmp_path / "store.sqlite")}
    cmd = [sys.executable, "-m", "screen.cli", "run", str(data_dir / "five.csv"), "--cores", "1", "--out"]
    procs = [subprocess.Popen(["nice", *cmd, str(tmp_path / name)], cwd=repo_dir, env=env, text=True,
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE) for name in ("a", "b")]
    outs = [p.communicate(timeout=1800) for p in procs]
    assert [p.returncode for p in procs] == [0, 0], [o[1][-2000:] for o in outs]
    rerun = subprocess.run(["nice", *cmd, str(tmp_path / "c")], cwd=repo_dir, env=env, text=True,
                           capture_output=True, timeout=1800)
    assert rerun.returncode == 0, rerun.stderr[-2000:]
    tables = [pd.read_csv(tmp_path / n / "levels.csv", dtype=str, keep_default_na=False) for n in "abc"]
    timing = [c for c in tables[0].columns if c.endswith("_wall_s")]
    for other in tables[1:]:
        pd.testing.assert_frame_equal(tables[0].drop(columns=timing), other.drop(columns=timing))
    logs = "".join(p.read_text() for p in (tmp_path / "c" / "logs" / "candidates").rglob("shard-*.log"))
    reused = sum(int(line.split(": ")[1].split(" of ")[0]) for line in logs.splitlines()
                 if "from the results store" in line and "electronic" in line)
    assert reused == 5  # the rerun computed nothing: every molecule came from the store
