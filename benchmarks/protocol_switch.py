"""Benchmark: compute time of a candidate list under the shipped protocol and the one shipped before it.

The issue-13 switch made the pruning route that keeps the no-pruning conformer the default (size caps only
from 150 atoms, warm-started loose-then-tight ranking, ΔSCF at SCF accuracy 10, the gas neutral started from
the chosen conformer's ranking single point in the same job). ``pruning_levels.py`` measures it on the
flexible reference molecules against no pruning, xTB time only. This script measures what a user sees on a
candidate list: the whole per-molecule compute (embedding, force field, ranking, six ΔSCF states) of

- **previous**: the route shipped before the switch, run as the workflow ran it then — the structures
  stage (:func:`screen.structures.run_structures`) and then the electronic stage
  (:func:`screen.electronic.run_electronic`), ``size_caps_min_atoms=0``, ``rank_warm_start=False``,
  ``rank_scf_accuracy=None``, ``electronic.accuracy=1``;
- **shipped**: the default options in one pass (:func:`screen.compute.run_compute`), as the workflow's
  compute job runs it now,

on the shards the prepare stage makes of the input (polymers as their oligomer series), in this process
(one OpenMP thread, no worker processes, no results store), alternating the two routes for ``--rounds``
rounds. It prints process CPU and wall time per route and round and the CPU ratio shipped / previous. The
routes give different numbers where they choose different conformers (molecules of 80-150 atoms, see
``pruning_levels.py``); the largest raw IP/EA difference is printed for information.

Recorded run (idle machine, load 1.0; ``candidates/demo.csv``, 30 candidates in 4 shards, 2 rounds)::

    previous  CPU 62.7 / 62.1 s   wall 62.7 / 62.2 s
    shipped   CPU 55.1 / 54.8 s   wall 55.1 / 54.8 s
    CPU ratio shipped / previous: 0.879, 0.882
    (this script, one round, load 0.6-0.9: 63.0 vs 54.6 s, ratio 0.866; raw IP/EA differ by up to 0.042 eV)

The demo molecules are small (most under 80 atoms), so the previous size caps hardly acted on them and the
saving is the loose ranking, the accuracy-10 ΔSCF and the neutral hand-over (−12 %); on the flexible reference
molecules against no pruning the shipped route saves 33 % of the xTB time (``pruning_levels.py``).

Usage::

    .venv/bin/python benchmarks/protocol_switch.py [--input candidates/demo.csv] [--rounds 2]
"""

from __future__ import annotations

import argparse
import glob
import io
import os
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

import pandas as pd  # noqa: E402

from screen.compute import run_compute  # noqa: E402
from screen.electronic import run_electronic  # noqa: E402
from screen.io import Progress  # noqa: E402
from screen.options import EARLIER_ROUTE_VALUES, ElectronicOptions, StructureOptions  # noqa: E402
from screen.prepare import PolymerOptions, PrepareOptions, prepare  # noqa: E402
from screen.structures import run_structures  # noqa: E402

#: the route shipped before the switch
PREVIOUS = (StructureOptions(**EARLIER_ROUTE_VALUES["structures"]), ElectronicOptions(accuracy=1.0))


def _quiet() -> Progress:
    return Progress("benchmark", stream=io.StringIO())


def run_route(route: str, shards: list[str], folder: Path) -> tuple[float, float]:
    """Process CPU and wall time [s] of one route over every shard; outputs under ``folder``."""
    cpu, wall = time.process_time(), time.perf_counter()
    for shard in shards:
        out = folder / Path(shard).stem
        out.mkdir(parents=True, exist_ok=True)
        if route == "previous":
            structures, electronic = PREVIOUS
            run_structures(shard, out / "s.sdf", out / "s.csv", structures, isolate=False, store=False,
                           progress=_quiet())
            run_electronic(out / "s.sdf", out / "s.csv", out / "e.csv", electronic, isolate=False, store=False,
                           progress=_quiet())
        else:
            run_compute(shard, out / "s.sdf", out / "s.csv", out / "e.csv", StructureOptions(), ElectronicOptions(),
                        isolate=False, store=False, progress=_quiet())
    return time.process_time() - cpu, time.perf_counter() - wall


def _raw(folder: Path) -> pd.DataFrame:
    parts = [pd.read_csv(p) for p in sorted(folder.glob("*/e.csv"))]
    return pd.concat(parts).set_index("key")[["status", "xtb_ip_ev", "xtb_ea_ev"]]


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--input", default=str(REPO / "candidates" / "demo.csv"))
    parser.add_argument("--rounds", type=int, default=2)
    args = parser.parse_args(argv)
    work = Path(tempfile.mkdtemp(prefix="protocol-switch-"))
    structures = StructureOptions()
    prepare(args.input, work / "prepared", PrepareOptions(), PolymerOptions(),
            structures.truncate_min_carbons if structures.truncate_side_chains else None)
    shards = sorted(glob.glob(str(work / "prepared" / "shard-*.csv")))
    n = sum(len(pd.read_csv(s)) for s in shards)
    print(f"{args.input}: {n} molecules to compute in {len(shards)} shards; load {os.getloadavg()}", flush=True)
    times: dict[str, list[tuple[float, float]]] = {"previous": [], "shipped": []}
    for k in range(args.rounds):
        for route in times:
            times[route].append(run_route(route, shards, work / f"{route}-{k}"))
            print(f"round {k} {route:8s} CPU {times[route][-1][0]:7.1f} s  wall {times[route][-1][1]:7.1f} s",
                  flush=True)
    ratios = [s[0] / p[0] for s, p in zip(times["shipped"], times["previous"])]
    a, b = _raw(work / "previous-0"), _raw(work / "shipped-0")
    ok = a["status"].eq("ok") & b["status"].reindex(a.index).eq("ok")
    diff = (a.loc[ok, ["xtb_ip_ev", "xtb_ea_ev"]] - b.loc[a.index[ok], ["xtb_ip_ev", "xtb_ea_ev"]]).abs().max().max()
    print(f"CPU ratio shipped / previous per round: {', '.join(f'{r:.3f}' for r in ratios)}; "
          f"largest raw IP/EA difference between the routes {diff:.3f} eV; load {os.getloadavg()}")
    print(f"RESULT n={n} cpu_ratio={min(ratios):.3f}-{max(ratios):.3f} max_d_raw_ev={diff:.3f}")


if __name__ == "__main__":
    main()
