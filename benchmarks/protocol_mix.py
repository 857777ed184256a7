"""Benchmark: which geometry route helps molecules and which helps polymers.

Two shipped protocols differ only in the geometry route (``structures.geometry``:
force field or GFN2-xTB). This script mixes their stored raw values by
representation — molecules from one protocol, polymers (chain-limit values of their
oligomers) from the other — refits every calibration model on each of the four
combinations and prints the leave-one-out MAE per model. No xTB is run: seconds.

A mixed protocol would have to be computed as such (a run decides the route per
molecule); this only measures whether one is worth building. ``--write-mix`` saves
the mixed raw values, so ``device_validation.py --raw`` and ``heldout_levels.py --raw``
can check the same combination on devices and well-known materials.

Usage::

    .venv/bin/python benchmarks/protocol_mix.py [--a models/<ff>/reference_raw.csv]
        [--b models/<xtb>/reference_raw.csv] [--write-mix DIR]
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

import pandas as pd  # noqa: E402

from screen.calibrate import MODEL_NAMES, fit_all  # noqa: E402
from screen.calibration.reference import read_reference  # noqa: E402
from screen.config import protocol_id  # noqa: E402
from screen.devicevalidation import RAW_PATH as A_RAW  # noqa: E402  (the default protocol's)
from screen.devicevalidation import read_raw  # noqa: E402

B_RAW = REPO / "models" / protocol_id({"structures": {"geometry": "xtb", "rigid_embedding": "cycle_rank"}}) \
    / "reference_raw.csv"


def mix(molecules: pd.DataFrame, polymers: pd.DataFrame) -> pd.DataFrame:
    """Molecule rows of one raw table with the polymer rows of another."""
    is_poly = lambda t: t["representation"].astype(str).eq("polymer")  # noqa: E731
    return pd.concat([molecules[~is_poly(molecules)], polymers[is_poly(polymers)]], ignore_index=True)


def loo_maes(sets: dict, raw: pd.DataFrame) -> dict[str, float]:
    """Leave-one-out MAE [eV] of every calibration model fitted on ``raw``."""
    models = fit_all(sets, raw)
    return {name: float(models[name]["loo_mae_ev"]) for name in MODEL_NAMES}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--a", type=Path, default=A_RAW, help="reference_raw.csv of protocol A (default: force field)")
    parser.add_argument("--b", type=Path, default=B_RAW, help="reference_raw.csv of protocol B (default: xTB)")
    parser.add_argument("--write-mix", type=Path, help="write the two mixed raw tables into this folder")
    args = parser.parse_args(argv)
    a, b = read_raw(args.a), read_raw(args.b)
    sets = read_reference(REPO / "models" / "reference")
    combos = {"A molecules + A polymers": a, "B molecules + B polymers": b,
              "B molecules + A polymers": mix(b, a), "A molecules + B polymers": mix(a, b)}
    print(f"A = {args.a.parent.name}, B = {args.b.parent.name}; LOO MAE [eV]")
    print(f"{'combination':28s}" + "".join(f"{m:>13s}" for m in MODEL_NAMES) + f"{'sum':>8s}")
    for name, raw in combos.items():
        maes = loo_maes(sets, raw)
        print(f"{name:28s}" + "".join(f"{maes[m]:13.3f}" for m in MODEL_NAMES) + f"{sum(maes.values()):8.3f}")
    if args.write_mix:
        args.write_mix.mkdir(parents=True, exist_ok=True)
        mix(b, a).to_csv(args.write_mix / "b_molecules_a_polymers_raw.csv", index=False)
        mix(a, b).to_csv(args.write_mix / "a_molecules_b_polymers_raw.csv", index=False)
        print(f"mixed raw tables -> {args.write_mix}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
