"""Benchmark: the device models against published devices, held out (targets of the device-model issue).

Levels: every device's donor and acceptor levels are put on the film
calibration's scale first (:func:`screen.devicefit.level_table`: the film-set
row of the same material, else the paper's values converted to ferrocene
−4.8 eV and flagged; rows that cannot be put on the scale are dropped with
their reason, listed below).

Runs :func:`screen.devicefit.cross_validate` twice — leave one acceptor
structure out, and leave one donor structure out (the fitted model, including
its loss variant, is refitted without the held-out devices; Scharber's rule has
nothing to fit) — and prints for each, side by side: held-out Voc MAE and mean
signed error [V], Spearman rank correlation of Voc and of PCE (every device with
a PCE, also those without a Voc), how many working devices each model calls not
viable, Scharber's rule on the papers' own levels for context, two naive
references (training mean Voc; training mean Voc of the acceptor class), the
same by acceptor class, and the targets (Voc MAE ≤ 0.10 V, Spearman(Voc) ≥ 0.7,
Spearman(PCE) ≥ 0.4) with met / not met.  Nothing is asserted here.

Usage::

    .venv/bin/python benchmarks/device_validation.py [--devices models/reference/devices.csv]
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from screen.devicefit import DEVICES_PATH, FILM_PATH, GROUPINGS, cross_validate, read_devices, table  # noqa: E402

TARGETS = {"voc_mae_v": ("<=", 0.10), "spearman_voc": (">=", 0.7), "spearman_pce": (">=", 0.4)}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--devices", default=str(DEVICES_PATH))
    parser.add_argument("--film", default=str(FILM_PATH))
    args = parser.parse_args(argv)
    d = read_devices(args.devices, args.film)
    converted = int(d["levels_converted"].sum())
    print(f"devices: {args.devices}: {len(d)} rows with all six levels on the film scale "
          f"({int(d['voc_v'].notna().sum())} with Voc; {converted} with converted or completed levels, "
          f"{len(d) - converted} entirely from {Path(args.film).name})")
    for row in d.attrs["dropped"]:
        print(f"  dropped {row['device_id']}: {row['drop_reason']}")
    for by in GROUPINGS:
        m = cross_validate(d, None, by).metrics
        print(f"\nheld out: {m['grouping']} ({m['n_groups']} groups; loss variant chosen per training fold: "
              f"{m['loss_split_per_fold']})")
        print(table(m))
        verdicts = []
        for key, (op, target) in TARGETS.items():
            val = m["fitted"][key]
            met = val <= target if op == "<=" else val >= target
            verdicts.append(f"{key}={val:.3f} (target {op} {target}: {'met' if met else 'NOT met'})")
        print(f"fitted model, {by} held out: " + "; ".join(verdicts))
        beat = m["fitted"]["voc_mae_v"] < m["mean_voc_baseline"]["voc_mae_v"]
        print(f"fitted Voc MAE {'below' if beat else 'NOT below'} the training-mean baseline "
              f"({m['fitted']['voc_mae_v']:.3f} vs {m['mean_voc_baseline']['voc_mae_v']:.3f} V)")
        print(" ".join(f"{by}_{model}_{k}={m[model][k]:.4f}" for model in ("fitted", "scharber")
                       for k in ("voc_mae_v", "spearman_voc", "spearman_pce")))
    return 0


if __name__ == "__main__":
    sys.exit(main())
