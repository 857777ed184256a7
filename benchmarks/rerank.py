"""Benchmark: re-ranking a large levels table versus recomputing it.

Generates N synthetic levels rows (seeded, clearly labelled ``synthetic-*``;
the numbers are random draws in a plausible range, not predictions for the
SMILES they carry), times :func:`screen.rank_io.run_rank` against a library
partner (best of ``--repeats``), and compares that with the time the full
pipeline would need for the same number of molecules, estimated from the
measured seconds per molecule of the structures + electronic stages.

The synthetic rows are ranked the way a real re-rank finds them: each row has
a structure ``key`` (synthetic, one per row) and the run folder beside the
levels file holds the structures stage's output, ``work/candidates/structures/
shard-NNN.sdf`` with 25 records per shard (the default ``prepare.shard_size``),
one record per key, titled by the key, and the shard's status table
``shard-NNN.csv`` beside it.  The coordinates are one ETKDG
embedding per distinct SMILES of the pool (no force-field step: only reading
them is timed), so the shortlist export reads stored geometries, as it does
after a real run, instead of embedding molecules that have none
(``--no-structures`` times that case: levels files without computed
structures, e.g. a user's own measurements).  :func:`run_rank` reports the
seconds of its phases; the benchmark prints the best of each:

* ``rank_s``: :func:`screen.rank.rank_candidates` inside ``run_rank``;
* ``export_s``: ``ranking.csv``, reading the shortlist's stored geometries and
  ``shortlist.sdf`` (``ranking.meta.json`` is written last, after the report, in no phase);
* ``report_s``: ``report.html`` and ``ranking.safe.csv``.

The first ``run_rank`` of the process is printed apart (``first_rerank_s``): it
also pays the one-off imports (Matplotlib, RDKit drawing) that a fresh
``dascreen rank`` process pays once.

The whole command is timed too, as a user runs it: ``dascreen rank --levels
LEVELS --out DIR --partner P`` in a fresh Python process each time (what the
console script runs; start-up, imports and exit included), ``--command-repeats``
times after one warm-up run that is not counted (it also fills the user's cache
of the AM1.5G table, :func:`screen.spectrum.spectrum_cache_path`).  Printed are
the median wall and CPU (user + system, from the operating system's accounting
of the finished child) with min and max, and ``command_s / rerank_s``.  With
``--baseline DIR`` (another checkout of dascreen, e.g. ``git worktree add
/tmp/before <commit>``) the same command of that checkout runs in turn with this
one (this, baseline, this, baseline, ...) and the ratios this / baseline are taken
pair by pair (median printed), which keeps them meaningful on a machine whose
load drifts.

The pipeline estimate comes from:

* by default, ``--n-demo`` molecules of ``candidates/demo.csv`` are run through
  :func:`screen.structures.build_structure` and
  :func:`screen.electronic.vertical_levels` with the default protocol;
* with ``--levels FILE``, the mean ``structure_wall_s + sp_wall_s`` of the ok
  rows of an existing ``levels.csv`` is used instead.

The estimate is serial (one core) and leaves out prepare, calibration and
scheduling overheads, so it is a lower bound on the pipeline time.

It also times the device kernel alone: :meth:`screen.device.DeviceModel.evaluate`
plus :func:`screen.sampling.sample_pce` for N pairs × 2000 samples (target for
10 000 pairs: < 1 s; the ranking of 10 000 rows: < 2 s).  These targets live here,
not in the tests.

The last line holds ``key=value`` pairs, e.g.
``rerank_s=1.9 rank_only_s=0.8 report_s=0.7 export_s=0.2 ... full_estimate_s=12000 ratio=0.00016 ...
sampler_s=0.4 command_s=2.6 command_cpu_s=2.4 command_over_rerank=1.4 [baseline_command_s=... command_ratio=...
command_cpu_ratio=...] load_before=0.5 load_after=0.9``.

Usage::

    .venv/bin/python benchmarks/rerank.py [--n 10000] [--levels results/demo/levels.csv] [--no-structures]
        [--command-repeats 5] [--baseline /tmp/before]
"""

from __future__ import annotations

import argparse
import hashlib
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from screen.rank import RankOptions, rank_candidates  # noqa: E402
from screen.rank_io import run_rank  # noqa: E402


def synthetic_levels(n: int, seed: int, smiles_pool: list[str]) -> pd.DataFrame:
    """N synthetic levels rows on the film scale (random, seeded; for timing only).

    Parameters
    ----------
    n : int
        Rows.
    seed : int
        Seed of :func:`numpy.random.default_rng`.
    smiles_pool : list of str
        SMILES cycled through the rows so that the shortlist SDF has structures.

    Returns
    -------
    pandas.DataFrame
        ``levels.csv``-like table: HOMO uniform in [−5.9, −4.9] eV, optical gap
        in [1.1, 2.6] eV, LUMO = HOMO + gap + U(0, 0.4) eV, σ 0.1–0.25 eV,
        roles mostly donor, a few acceptors and empty; ``key`` is a synthetic
        structure key per row (``m`` + 16 hex digits of the SHA-1 of the id).
    """
    rng = np.random.default_rng(seed)
    homo = rng.uniform(-5.9, -4.9, n)
    gap = rng.uniform(1.1, 2.6, n)
    lumo = homo + gap + rng.uniform(0.0, 0.4, n)
    role = rng.choice(["donor", "acceptor", ""], size=n, p=[0.9, 0.05, 0.05])
    return pd.DataFrame({
        "id": [f"synthetic-{i:05d}" for i in range(n)],
        "smiles": [smiles_pool[i % len(smiles_pool)] for i in range(n)],
        "status": "ok", "error": "",
        "homo_ev": homo.round(4), "lumo_ev": lumo.round(4), "gap_opt_ev": gap.round(4),
        "homo_sigma_ev": rng.uniform(0.1, 0.25, n).round(4), "lumo_sigma_ev": rng.uniform(0.1, 0.25, n).round(4),
        "gap_opt_sigma_ev": rng.uniform(0.1, 0.2, n).round(4), "scale": "film", "role": role,
        "source": "synthetic benchmark row (random numbers)",
        "key": [_synthetic_key(i) for i in range(n)],
    })


def _synthetic_key(i: int) -> str:
    """Structure key of synthetic row i (the form of :func:`screen.chem.structure_key`)."""
    return "m" + hashlib.sha1(f"synthetic-{i:05d}".encode("utf-8")).hexdigest()[:16]


def write_structures(levels: pd.DataFrame, run_dir: Path, shard_size: int = 25, seed: int = 61453) -> int:
    """Write the structures stage's output for the synthetic rows: one SD record per key, 25 per shard.

    Each ``shard-NNN.sdf`` gets its status table ``shard-NNN.csv`` beside it, as the stage writes them.

    Parameters
    ----------
    levels : pandas.DataFrame
        From :func:`synthetic_levels` (``key``, ``smiles``).
    run_dir : pathlib.Path
        Folder of the levels file; records go to ``work/candidates/structures/shard-NNN.sdf``.
    shard_size : int
        Records per shard (the default ``prepare.shard_size``).
    seed : int
        ETKDG seed.

    Returns
    -------
    int
        Records written (rows whose SMILES could not be embedded have none, like a failed structure).
    """
    from rdkit import Chem, rdBase
    from rdkit.Chem import AllChem

    blocks = {}
    with rdBase.BlockLogs():
        for smi in dict.fromkeys(levels["smiles"]):
            mol = Chem.MolFromSmiles(smi)
            if mol is None:
                continue
            mol = Chem.AddHs(mol)
            params = AllChem.ETKDGv3()
            params.randomSeed = seed
            if AllChem.EmbedMolecule(mol, params) == 0:
                block = Chem.MolToMolBlock(mol)
                blocks[smi] = block[block.index("\n"):]  # everything after the title line
    folder = run_dir / "work" / "candidates" / "structures"
    folder.mkdir(parents=True, exist_ok=True)
    written = 0
    rows = list(zip(levels["key"], levels["smiles"]))
    for shard, start in enumerate(range(0, len(rows), shard_size)):
        part = rows[start:start + shard_size]
        records = [f"{key}{blocks[smi]}$$$$\n" for key, smi in part if smi in blocks]
        (folder / f"shard-{shard:03d}.sdf").write_text("".join(records), encoding="utf-8")
        # the stage's status table of the shard, written after its SD file (key, status; the other columns left out)
        table = "".join(f"{key},{'ok' if smi in blocks else 'failed'}\n" for key, smi in part)
        (folder / f"shard-{shard:03d}.csv").write_text("key,status\n" + table, encoding="utf-8")
        written += len(records)
    return written


def time_device_kernel(n: int, seed: int, repeats: int, n_samples: int = 2000) -> float:
    """Best-of-``repeats`` time of the device model plus the Monte-Carlo spread for n synthetic pairs [s].

    Parameters
    ----------
    n : int
        Donor candidates, paired with a fixed acceptor (LUMO −4.3 eV, σ 0.05 eV).
    seed : int
        Seed of the synthetic levels (:func:`numpy.random.default_rng`).
    repeats : int
        Timed repetitions (the AM1.5G table and the Jsc table are loaded before).
    n_samples : int
        Monte-Carlo samples per pair.
    """
    from screen.device import DeviceModel
    from screen.sampling import sample_pce

    rng = np.random.default_rng(seed)
    homo = rng.uniform(-5.8, -4.9, n)
    gap = rng.uniform(1.2, 2.4, n)
    lumo = homo + gap + rng.uniform(0, 0.3, n)
    sig = np.full(n, 0.12)
    model = DeviceModel()  # the default: fitted model, both absorb (acceptor: Y6-like film levels)
    acc = dict(acceptor_homo_ev=-5.65, acceptor_lumo_ev=-4.10, acceptor_gap_ev=1.33)
    sample_pce(model, homo[:10], lumo[:10], gap[:10], **acc, n_samples=10)  # warm the tables
    best = np.inf
    for _ in range(repeats):
        t = time.perf_counter()
        model.evaluate(homo, lumo, gap, **acc, acceptor_class="nfa-fused")
        sample_pce(model, homo, lumo, gap, **acc, donor_homo_sigma_ev=sig, donor_lumo_sigma_ev=sig,
                   donor_gap_sigma_ev=sig, acceptor_homo_sigma_ev=0.1, acceptor_lumo_sigma_ev=0.1,
                   acceptor_gap_sigma_ev=0.1, n_samples=n_samples, acceptor_class="nfa-fused")
        best = min(best, time.perf_counter() - t)
    return best


def _command_run(checkout: Path, levels_csv: Path, out: Path, partner: str) -> tuple[float, float]:
    """Wall and CPU seconds (user + system) of one ``dascreen rank`` in a fresh process of ``checkout``."""
    code = "import sys; from screen.cli import main; sys.exit(main())"  # what the dascreen console script runs
    argv = [sys.executable, "-c", code, "rank", "--levels", str(levels_csv), "--out", str(out), "--partner", partner]
    env = dict(os.environ, PYTHONPATH=str(checkout))  # this checkout's package before any installed one
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    run = subprocess.run(argv, env=env, cwd=out.parent, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if run.returncode != 0:
        raise SystemExit(f"dascreen rank of {checkout} failed (exit {run.returncode}):\n{run.stderr[-2000:]}")
    return wall, (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def time_command(levels_csv: Path, work: Path, partner: str, repeats: int,
                 baseline: Path | None = None) -> dict[str, np.ndarray]:
    """Wall and CPU seconds of the whole ``dascreen rank`` command, fresh process per run (start-up included).

    Parameters
    ----------
    levels_csv : pathlib.Path
        The levels file to rank (``--levels``).
    work : pathlib.Path
        Folder for the output folders (one per checkout).
    partner : str
        ``--partner``.
    repeats : int
        Counted runs of each command, after one warm-up run each.
    baseline : pathlib.Path, optional
        Another checkout of dascreen: its command runs in turn with this one's.

    Returns
    -------
    dict of numpy.ndarray
        ``wall``, ``cpu`` (this checkout) and, with a baseline, ``baseline_wall``, ``baseline_cpu``.
    """
    sides = {"": REPO} | ({"baseline_": Path(baseline).resolve()} if baseline else {})
    out = {prefix: work / f"command-{prefix or 'this'}" for prefix in sides}
    for prefix, checkout in sides.items():  # warm-up: file caches, the AM1.5G table cache, Matplotlib's font cache
        _command_run(checkout, levels_csv, out[prefix], partner)
    times: dict[str, list] = {f"{p}{k}": [] for p in sides for k in ("wall", "cpu")}
    for _ in range(repeats):
        for prefix, checkout in sides.items():
            wall, cpu = _command_run(checkout, levels_csv, out[prefix], partner)
            times[f"{prefix}wall"].append(wall)
            times[f"{prefix}cpu"].append(cpu)
    return {k: np.asarray(v) for k, v in times.items()}


def _spread(values: np.ndarray) -> str:
    """``median s (min–max)``."""
    return f"{np.median(values):.2f} s ({values.min():.2f}\u2013{values.max():.2f})"


def _command_pairs(command: dict, rerank_s: float) -> str:
    """``key=value`` pairs of the command timings for the last line ('' when the command was not timed)."""
    if not command:
        return ""
    text = (f"command_s={np.median(command['wall']):.3f} command_cpu_s={np.median(command['cpu']):.3f} "
            f"command_over_rerank={np.median(command['wall']) / rerank_s:.2f} ")
    if "baseline_wall" in command:
        text += (f"baseline_command_s={np.median(command['baseline_wall']):.3f} "
                 f"baseline_command_cpu_s={np.median(command['baseline_cpu']):.3f} "
                 f"command_ratio={np.median(command['wall'] / command['baseline_wall']):.3f} "
                 f"command_cpu_ratio={np.median(command['cpu'] / command['baseline_cpu']):.3f} ")
    return text


def per_molecule_from_levels(path: Path) -> tuple[float, int]:
    """Mean structures + electronic wall time per ok molecule of a levels.csv [s]."""
    frame = pd.read_csv(path)
    missing = [c for c in ("sp_wall_s", "structure_wall_s") if c not in frame]
    if missing:
        raise SystemExit(f"{path} has no column(s) {missing}; give a levels.csv written by the pipeline")
    ok = frame[frame.get("status", "ok").eq("ok")] if "status" in frame else frame
    t = pd.to_numeric(ok["sp_wall_s"], errors="coerce") + pd.to_numeric(ok["structure_wall_s"], errors="coerce")
    t = t.dropna()
    if t.empty:
        raise SystemExit(f"{path}: no ok row with timings")
    return float(t.mean()), int(len(t))


def per_molecule_from_demo(path: Path, n: int) -> tuple[float, int]:
    """Measured structures + electronic wall time per molecule for the first n demo molecules [s]."""
    from screen.electronic import ElectronicOptions, molecule_numbers_positions, vertical_levels
    from screen.structures import StructureOptions, build_structure

    smiles = [s for s in pd.read_csv(path, dtype=str, keep_default_na=False)["smiles"] if "*" not in s][:n]
    engine = ElectronicOptions().make_engine()
    times = []
    for smi in smiles:
        start = time.perf_counter()
        try:
            mol, _ = build_structure(smi, StructureOptions())
            vertical_levels(*molecule_numbers_positions(mol), engine)
        except Exception as exc:  # a failing demo molecule is left out of the mean, and said so
            print(f"  skipped {smi}: {exc}")
            continue
        times.append(time.perf_counter() - start)
        print(f"  {times[-1]:7.2f} s  {smi}")
    if not times:
        raise SystemExit("no demo molecule could be computed")
    return float(np.mean(times)), len(times)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--n", type=int, default=10_000, help="synthetic rows (default 10000)")
    parser.add_argument("--seed", type=int, default=20240601)
    parser.add_argument("--partner", default="y6")
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--levels", default=None, help="levels.csv with sp_wall_s and structure_wall_s columns")
    parser.add_argument("--demo", default=str(REPO / "candidates" / "demo.csv"))
    parser.add_argument("--n-demo", type=int, default=10)
    parser.add_argument("--no-report", action="store_true", help="time run_rank without the HTML report")
    parser.add_argument("--no-structures", action="store_true",
                        help="no stored structures beside the levels file (the shortlist is embedded by run_rank)")
    parser.add_argument("--command-repeats", type=int, default=5,
                        help="counted runs of the whole `dascreen rank` command, fresh process each (0: none)")
    parser.add_argument("--baseline", default=None, metavar="DIR",
                        help="another dascreen checkout whose command runs in turn with this one (ratios this/baseline)")
    args = parser.parse_args(argv)

    load_before = os.getloadavg()[0]
    print(f"{os.cpu_count()} CPUs; load average {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    pool = [s for s in pd.read_csv(args.demo, dtype=str, keep_default_na=False)["smiles"] if "*" not in s]
    work = Path(tempfile.mkdtemp(prefix="dascreen-rerank-"))
    try:
        levels = synthetic_levels(args.n, args.seed, pool)
        if args.no_structures:
            levels = levels.drop(columns="key")
        levels_csv = work / "levels.csv"
        levels.to_csv(levels_csv, index=False)
        stored = 0 if args.no_structures else write_structures(levels, work)

        from screen.partners import resolve_partner
        from screen.spectrum import reference_spectrum

        reference_spectrum()  # one-off load of the AM1.5G table, as in any process that ranks
        partner = resolve_partner(args.partner)
        rank_only = []
        for _ in range(args.repeats):
            t = time.perf_counter()
            rank_candidates(levels, partner, None, RankOptions())
            rank_only.append(time.perf_counter() - t)
        full, phases = [], {}
        t = time.perf_counter()
        run_rank(levels_csv, args.partner, work / "out", {}, report=not args.no_report)
        first = time.perf_counter() - t  # pays the one-off imports of the report (Matplotlib, RDKit drawing)
        for _ in range(args.repeats):
            timings = {}
            t = time.perf_counter()
            path = run_rank(levels_csv, args.partner, work / "out", {}, report=not args.no_report, timings=timings)
            full.append(time.perf_counter() - t)
            for key, value in timings.items():
                phases[key] = min(phases.get(key, np.inf), value)
        outputs = sorted(p.name for p in path.parent.iterdir())
        print(f"run_rank, {args.n} synthetic rows vs {args.partner} "
              f"({stored} stored structures beside the levels file): best of {args.repeats} = {min(full):.2f} s "
              f"(all: {', '.join(f'{x:.2f}' for x in full)}; first run of the process {first:.2f} s); "
              f"rank_candidates alone {min(rank_only):.2f} s; outputs {outputs}")
        print("  phases, best of each: " + ", ".join(f"{k} {v:.2f} s" for k, v in phases.items()))
        command = {}
        if args.command_repeats > 0 and not args.no_report:  # the command always writes the report
            command = time_command(levels_csv, work, args.partner, args.command_repeats, args.baseline)
            print(f"whole `dascreen rank` command, fresh process, median of {args.command_repeats} (min\u2013max): "
                  f"wall {_spread(command['wall'])}, CPU {_spread(command['cpu'])}; "
                  f"command / best run_rank = {np.median(command['wall']) / min(full):.2f}")
            if args.baseline:
                print(f"  baseline {args.baseline}: wall {_spread(command['baseline_wall'])}, "
                      f"CPU {_spread(command['baseline_cpu'])}; this / baseline, pair by pair (median): "
                      f"wall {np.median(command['wall'] / command['baseline_wall']):.2f}, "
                      f"CPU {np.median(command['cpu'] / command['baseline_cpu']):.2f}")

        if args.levels:
            per_mol, n_mol = per_molecule_from_levels(Path(args.levels))
            source = f"levels:{args.levels}"
        else:
            print(f"measuring structures + electronic on {args.n_demo} demo molecules (default protocol, 1 core):")
            per_mol, n_mol = per_molecule_from_demo(Path(args.demo), args.n_demo)
            source = "demo"
        estimate = per_mol * args.n
        ratio = min(full) / estimate
        print(f"structures + electronic: {per_mol:.2f} s per molecule (mean of {n_mol}); {args.n} molecules "
              f"~ {estimate:.0f} s = {estimate / 3600:.1f} h on one core; re-rank / full = {ratio:.2e}")
        target = "met" if min(full) < 10.0 else "MISSED"
        print(f"target re-rank of {args.n} < 10 s: {target}")
        if args.n == 10_000 and not args.no_report:
            print(f"target run_rank with report of 10 000 < 2 s: {'met' if min(full) < 2.0 else 'MISSED'} "
                  f"({min(full):.2f} s)")
        sampler = time_device_kernel(args.n, args.seed, args.repeats)
        print(f"device model + Monte-Carlo spread, {args.n} pairs x 2000 samples: best {sampler:.2f} s "
              f"(target for 10 000 pairs < 1 s); rank_candidates {min(rank_only):.2f} s (target < 2 s)")
        print(f"rerank_s={min(full):.3f} rank_only_s={min(rank_only):.3f} "
              f"report_s={phases.get('report_s', np.nan):.3f} export_s={phases.get('export_s', np.nan):.3f} "
              f"rank_s={phases.get('rank_s', np.nan):.3f} read_s={phases.get('read_s', np.nan):.3f} "
              f"first_rerank_s={first:.3f} stored_structures={stored} full_estimate_s={estimate:.1f} "
              f"ratio={ratio:.3e} per_molecule_s={per_mol:.3f} n={args.n} n_timed_molecules={n_mol} "
              f"source={source} report={not args.no_report} sampler_s={sampler:.3f} "
              + _command_pairs(command, min(full))
              + f"load_before={load_before:.2f} load_after={os.getloadavg()[0]:.2f}")
    finally:
        shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
