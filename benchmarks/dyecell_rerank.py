"""Benchmark: re-rank 10 000 dyes against a new mediator (target < 2 s).

The dye table (E(S⁺/S), E₀₋₀, σ, anchors) is built once — in a run it is the
cached ``OUT/dyecell/dyes.csv`` — and switching oxide or mediator calls only
:func:`screen.dyecell.rank.rank_dyes` (numpy, Monte-Carlo with the configured
samples per dye).  The script times that call for each mediator of the library
after the first, prints the times and their ratio to the target, and the
detailed split (deterministic model, sampling).

Usage::

    .venv/bin/python benchmarks/dyecell_rerank.py [--n 10000] [--samples 2000] [--repeat 3]
"""

from __future__ import annotations

import argparse
import os
import platform
import time

import numpy as np
import pandas as pd

from screen.dyecell.library import load_mediators, resolve_mediator, resolve_oxide
from screen.dyecell.model import DyeCellModel, evaluate, sample_pce
from screen.dyecell.options import RankOptions
from screen.dyecell.rank import DYE_COLUMNS, rank_dyes

TARGET_S = 2.0


def synthetic_dyes(n: int, seed: int = 1) -> pd.DataFrame:
    """A dye table of ``n`` rows spread like the reference dyes (E(S⁺/S) 0.8–1.4 V, E₀₋₀ 1.7–2.8 eV)."""
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({
        "id": [f"d{i:05d}" for i in range(n)], "smiles": "", "name": "", "status": "ok", "error": "",
        "e_ox_v_nhe": rng.uniform(0.8, 1.4, n), "e_ox_sigma_v": 0.09, "e00_ev": rng.uniform(1.7, 2.8, n),
        "e00_sigma_ev": 0.14, "scale": "electrochemical", "anchors": "cyanoacrylic acid",
        "anchored": rng.random(n) > 0.05, "anchor_known": True, "uncalibrated_elements": "",
        "outside_calibration": False, "source": "synthetic", "e_ox_reference": "nhe", "e_ox_offset_v": 0.0,
        "reference_similarity": np.nan, "unlike_reference_dyes": False,
    })
    return frame[DYE_COLUMNS]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=10_000)
    ap.add_argument("--samples", type=int, default=RankOptions().n_samples)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args(argv)

    dyes = synthetic_dyes(args.n)
    oxide = resolve_oxide("tio2-anatase")
    mediators = list(load_mediators()["id"])
    model, options = DyeCellModel(), RankOptions(n_samples=args.samples)
    rank_dyes(dyes.head(50), oxide, resolve_mediator(mediators[0]), model, options)  # warm caches (tables)

    print(f"dyecell re-rank: {args.n} dyes x {args.samples} samples; machine {platform.machine()}, "
          f"{os.cpu_count()} cores, load {os.getloadavg()[0]:.2f}")
    times = []
    for med_id in mediators[1:1 + args.repeat]:
        med = resolve_mediator(med_id)
        t0 = time.perf_counter()
        ranking = rank_dyes(dyes, oxide, med, model, options)
        dt = time.perf_counter() - t0
        times.append(dt)
        print(f"  {med_id:<20s} {dt:6.3f} s  ratio to target {dt / TARGET_S:5.2f}  viable {int(ranking['viable'].sum())}")
    med = resolve_mediator(mediators[1])
    e_ox, e00 = dyes["e_ox_v_nhe"].to_numpy(), dyes["e00_ev"].to_numpy()
    t0 = time.perf_counter()
    evaluate(model, e_ox, e00, oxide, med, dyes["anchored"].to_numpy())
    t_det = time.perf_counter() - t0
    t0 = time.perf_counter()
    sample_pce(model, e_ox, e00, oxide, med, e_ox_sigma_v=0.09, e00_sigma_ev=0.14, n_samples=args.samples)
    t_mc = time.perf_counter() - t0
    best = min(times)
    print(f"  split: deterministic model {t_det:.3f} s, Monte-Carlo {t_mc:.3f} s")
    print(f"best {best:.3f} s for {args.n} dyes; target < {TARGET_S:.1f} s: ratio {best / TARGET_S:.2f} "
          f"({'met' if best < TARGET_S else 'NOT met'})")
    return 0 if best < TARGET_S else 1


if __name__ == "__main__":
    raise SystemExit(main())
