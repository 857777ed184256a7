"""How long Snakemake takes to build the DAG for a very large batch (target: 100 000 candidates < 60 s).

Generates N valid conjugated SMILES deterministically (substituted oligothiophene /
benzothiadiazole / fluorene combinations; synthetic, for scale only), runs the prepare stage, then times a
Snakemake dry run of the whole workflow once the prepare checkpoint exists (that is when every shard job
enters the DAG). Also prints the peak memory of the prepare stage.

Usage: python benchmarks/dag_scale.py [--n 100000] [--out /tmp/dag_scale]
Last line: key=value pairs.
"""

from __future__ import annotations

import argparse
import itertools
import json
import resource
import subprocess
import sys
import time
from pathlib import Path

import yaml

CORES = ["c1ccc(-c2ccc({a})s2)s1", "c1ccc2nsnc2c1{a}", "c1ccc2c(c1)Cc1cc({a})ccc1-2", "c1cc2ccccc2cc1{a}",
         "c1csc({a})c1", "c1ccc2[nH]c3ccccc3c2c1{a}", "O=C1c2ccccc2C(=O)N1{a}", "c1ccc({a})nc1"]
SUBSTITUENTS = ["C", "CC", "CCC", "CCCC", "OC", "OCC", "F", "Cl", "C#N", "C(F)(F)F", "N(C)C", "SC", "C=O",
                "C(=O)OC", "c8ccsc8", "c8ccccc8", "c8ccoc8", "C(C)C", "C(C)(C)C", "OC(F)(F)F"]
PATTERNS = ["c9cc({b})cc({c})c9{a}", "c9c({b})cc({c})cc9{a}"]


def molecules(n: int):
    """Yield n SMILES strings: a core carrying a phenyl with three substituents (synthetic, for scale;
    symmetric combinations repeat a structure, which prepare de-duplicates as it would in real data)."""
    count = 0
    for pattern in PATTERNS:
        for core in CORES:
            for a, b, c in itertools.product(SUBSTITUENTS, repeat=3):
                yield core.format(a=pattern.format(a=a, b=b, c=c))
                count += 1
                if count >= n:
                    return


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--n", type=int, default=100_000)
    parser.add_argument("--out", default="/tmp/dascreen-dag-scale")
    args = parser.parse_args()
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    inp = out / "candidates.smi"
    with open(inp, "w") as fh:
        for i, smi in enumerate(molecules(args.n)):
            fh.write(f"{smi} big-{i:06d}\n")

    from screen.config import load_config
    from screen.stages import main as stage

    from screen.cli_shared import data_path

    cfg = load_config(None, {"candidates": str(inp), "out": str(out / "run")}).with_paths(data_path)
    cfg_file = out / "run" / "config.yaml"
    cfg_file.parent.mkdir(parents=True, exist_ok=True)
    cfg_file.write_text(yaml.safe_dump(cfg.to_dict()))
    t0 = time.perf_counter()
    stage(["--config", json.dumps({"prepare": cfg["prepare"]}), "prepare", "--input", str(inp), "--outdir",
           str(out / "run" / "work" / "candidates" / "prepared"), "--max-shards", "400"])
    t_prepare = time.perf_counter() - t0
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    shards = len(list((out / "run" / "work" / "candidates" / "prepared").glob("shard-*.csv")))
    wf = Path(__file__).resolve().parent.parent / "screen" / "workflow" / "Snakefile"
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-m", "snakemake", "--snakefile", str(wf), "--directory",
                           str(out / "run"), "--configfile", str(cfg_file), "--cores", "2", "--dry-run",
                           "--quiet", "all"], capture_output=True, text=True)
    t_dag = time.perf_counter() - t0
    if proc.returncode != 0:
        print(proc.stdout[-2000:], proc.stderr[-2000:])
        raise SystemExit("dry run failed")
    print(f"candidates: {args.n}, shards: {shards}, prepare: {t_prepare:.1f} s (peak RSS {peak_mb:.0f} MB), "
          f"DAG dry run: {t_dag:.1f} s (target < 60 s)")
    print(f"n={args.n} shards={shards} prepare_s={t_prepare:.1f} dag_s={t_dag:.1f} "
          f"dag_ratio_to_target={t_dag / 60:.3f} prepare_peak_mb={peak_mb:.0f}")


if __name__ == "__main__":
    main()
