"""Rerun of an already computed list: the results store against a first run.

Runs the same candidate list twice into two new output folders that share one
fresh results store, exactly as a user would (`dascreen run`, Snakemake, one
process per job): the first run computes every molecule, the second finds them
all in the store and only prepares, joins, calibrates and ranks. Prints both
wall times and their ratio (target: rerun < 5 % of the first run), the
molecules reused (from the stage logs) and the CPU count and load.

    .venv/bin/python benchmarks/rerun.py [--input candidates/demo.csv] [--cores 2] [--compute-only]

``--compute-only`` stops both runs after the electronic stage (no calibration
model needed): it measures the part the store replaces plus the workflow's
start-up. ``--models DIR`` points at a models folder (``calibration.models``).

Last line: ``n=... cores=... first_s=... rerun_s=... ratio=... reused=... mode=... load_before=... load_after=...``
"""

from __future__ import annotations

import argparse
import os
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent


def _load() -> str:
    return " ".join(f"{x:.2f}" for x in os.getloadavg())


def _full_run(inp: Path, out: Path, cores: int, store: Path, models: str | None) -> float:
    cmd = [sys.executable, "-m", "screen.cli", "run", str(inp), "--out", str(out), "--cores", str(cores)]
    if models:
        cmd += ["--set", f"calibration.models={models}"]
    start = time.perf_counter()
    proc = subprocess.run(cmd, cwd=REPO, capture_output=True, text=True, env={**os.environ, "DASCREEN_STORE": str(store)})
    took = time.perf_counter() - start
    if proc.returncode != 0:
        sys.exit(f"dascreen run failed ({proc.returncode}):\n{proc.stderr[-3000:]}")
    return took


def _compute_run(inp: Path, out: Path, cores: int, store: Path) -> float:
    """Prepare, structures and electronic only (the stages the store serves), through the workflow."""
    from screen.config import Config
    from screen.launch import run_workflow

    os.environ["DASCREEN_STORE"] = str(store)
    cfg = Config.of({"candidates": str(inp.resolve()), "out": str(out)})
    start = time.perf_counter()
    if run_workflow(cfg, out, cores, [str(out / "work" / "candidates" / "prepared")]) != 0:
        sys.exit(f"prepare failed; see {out}/logs/workflow.log")
    shards = sorted((out / "work" / "candidates" / "prepared").glob("shard-*.csv"))
    targets = [str(out / "work" / "candidates" / "electronic" / s.name) for s in shards]
    if run_workflow(cfg, out, cores, targets) != 0:
        sys.exit(f"the compute stages failed; see {out}/logs/workflow.log")
    return time.perf_counter() - start


def _reused(out: Path) -> tuple[int, int]:
    """Molecules the ΔSCF step took from the store, and how many it had to do.

    The compute job of each shard (structures and ΔSCF in one process) logs one line per step,
    ``… N of M molecules from the results store (electronic)``, in ``logs/<batch>/compute/``
    (earlier the electronic stage had its own ``electronic/`` logs, which this read and now no
    longer exist: it reported 0 of 0 reused, a new user's audit).
    """
    hits = total = 0
    logs = sorted((out / "logs" / "candidates").glob("*/shard-*.log"))
    for log in logs:
        for m in re.finditer(r"(\d+) of (\d+) molecules from the results store \(electronic\)|"
                             r"(\d+) of (\d+) molecules from the results store$", log.read_text(), re.M):
            h, t = (m.group(1), m.group(2)) if m.group(1) else (m.group(3), m.group(4))
            hits, total = hits + int(h), total + int(t)
    return hits, total


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--input", default=str(REPO / "candidates" / "demo.csv"))
    parser.add_argument("--cores", type=int, default=2)
    parser.add_argument("--compute-only", action="store_true", help="stop after the electronic stage")
    parser.add_argument("--models", default=None, help="calibration.models folder for the full runs")
    args = parser.parse_args()

    inp = Path(args.input).resolve()
    load_before = _load()
    with tempfile.TemporaryDirectory(prefix="dascreen-rerun-") as tmp:
        tmp = Path(tmp)
        store = tmp / "store.sqlite"
        if args.compute_only:
            first = _compute_run(inp, tmp / "first", args.cores, store)
            rerun = _compute_run(inp, tmp / "rerun", args.cores, store)
        else:
            first = _full_run(inp, tmp / "first", args.cores, store, args.models)
            rerun = _full_run(inp, tmp / "rerun", args.cores, store, args.models)
        hits, total = _reused(tmp / "rerun")
    mode = "compute-only" if args.compute_only else "full"
    print(f"input {inp.name}, cores {args.cores} of {os.cpu_count()}, mode {mode}")
    print(f"first run  {first:8.1f} s (every molecule computed)")
    print(f"rerun      {rerun:8.1f} s ({hits} of {total} molecules from the results store)")
    print(f"ratio      {rerun / first:8.3f} (target < 0.05)")
    print(f"n={total} cores={args.cores} first_s={first:.1f} rerun_s={rerun:.1f} ratio={rerun / first:.4f} "
          f"reused={hits} mode={mode} load_before={load_before} load_after={_load()}")


if __name__ == "__main__":
    main()
