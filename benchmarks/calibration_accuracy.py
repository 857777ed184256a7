"""Calibration accuracy against the issue-12 targets: what the shipped models reach, and why polymers
are taken to the chain limit.

Usage (from the repository root)::

    .venv/bin/python benchmarks/calibration_accuracy.py [--models models/<protocol-id>]

Reads the shipped models of the default protocol (or ``--models``), their stored raw values
(``reference_raw.csv``, polymers at the chain limit) and the per-n values of the reference polymers
(``reference_oligomers.csv``); no quantum chemistry. Prints

* per model: LOO MAE (all rows, small molecules, polymers), leave-one-family-out MAE and the target;
* the family hold-out table of the film models;
* the film red shift δ of the optical-gap model with its standard error and the sensible range;
* the film LOO MAE refitted with polymers represented by their monomer, dimer, … instead of the chain
  limit (the reason the chain-limit feature exists).

Ends with one ``key=value`` line. Targets (LOO MAE, eV): film HOMO 0.12, LUMO 0.15, optical gap 0.12;
gas IP 0.12, EA 0.15.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import pandas as pd

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from screen.calibrate import fit_all, find_models, load_models, read_reference  # noqa: E402
from screen.calibration.validation import raw_at_n  # noqa: E402
from screen.config import load_config  # noqa: E402

TARGETS = {"ip": 0.12, "ea": 0.15, "homo_film": 0.12, "lumo_film": 0.15, "gap_opt_film": 0.12}
FILM = ("homo_film", "lumo_film", "gap_opt_film")


def _folder(arg: str | None) -> Path:
    if arg:
        return Path(arg)
    cfg = load_config(REPO / "config" / "config.yaml", {"calibration": {"models": str(REPO / "models"),
                                                                        "reference": str(REPO / "models/reference")}})
    folder = find_models(cfg)
    if folder is None:
        sys.exit("no shipped model matches the default protocol: run `dascreen calibrate --install models`")
    return folder


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--models", default=None, help="model folder (default: the shipped default-protocol one)")
    args = parser.parse_args()
    folder = _folder(args.models)
    models = load_models(folder)
    print(f"models: {folder}")
    print(f"{'model':14s} {'n':>4s} {'LOO':>7s} {'mol':>7s} {'poly':>7s} {'family':>7s} {'target':>7s}  met")
    summary = {}
    for name, m in models.items():
        rep = m.get("loo_by_representation", {})
        target = TARGETS.get(name)
        met = "" if target is None else ("yes" if m["loo_mae_ev"] <= target else "no")
        print(f"{name:14s} {m['n']:4d} {m['loo_mae_ev']:7.3f} {rep.get('molecule', {}).get('mae_ev', float('nan')):7.3f} "
              f"{rep.get('polymer', {}).get('mae_ev', float('nan')):7.3f} {m.get('grouped_mae_ev', float('nan')):7.3f} "
              f"{target if target else float('nan'):7.2f}  {met}")
        summary[f"{name}_loo"] = round(m["loo_mae_ev"], 3)
    print("\nleave-one-family-out MAE [eV] (n):")
    for name in FILM + ("gap_opt",):
        cells = ", ".join(f"{k} {v['mae_ev']:.2f} ({v['n']})" for k, v in sorted(models[name].get("by_family", {}).items()))
        print(f"  {name}: {cells}")
    g = models["gap_opt_film"]
    print(f"\nfilm red shift δ = {g['red_shift_ev']:.3f} ± {g['red_shift_se_ev']:.3f} eV "
          f"(sensible range {g['red_shift_range_ev'][0]}–{g['red_shift_range_ev'][1]} eV: "
          f"{'inside' if g['red_shift_in_range'] else 'OUTSIDE'}); absorption maximum above onset μ = "
          f"{g['maximum_offset_ev']:.3f} eV")
    summary["red_shift_ev"] = round(g["red_shift_ev"], 3)
    side = folder / "reference_oligomers.csv"
    if side.is_file():
        raw = pd.read_csv(folder / "reference_raw.csv", keep_default_na=False, na_values=[""])
        olig = pd.read_csv(side, dtype={"n": str}, keep_default_na=False, na_values=[""])
        sets = read_reference(REPO / "models" / "reference")
        print("\nfilm LOO MAE [eV] with polymers represented by their n-mer vs the chain limit:")
        for label, frame in [(f"n={n}", raw_at_n(raw, olig, n)) for n in (1, 2, 3, 4)] + [("chain limit", raw)]:
            refit = fit_all(sets, frame)
            cells = "  ".join(f"{k} {refit[k]['loo_mae_ev']:.3f}" for k in FILM)
            print(f"  {label:12s} {cells}")
            summary[f"film_sum_{label.replace(' ', '_').replace('=', '')}"] = round(
                sum(refit[k]["loo_mae_ev"] for k in FILM), 3)
    print(" ".join(f"{k}={v}" for k, v in summary.items()))


if __name__ == "__main__":
    main()
