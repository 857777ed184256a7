"""Benchmark: the device models against published devices, held out (targets of the device-model issue).

Runs :func:`screen.devicefit.cross_validate` on ``models/reference/devices.csv``
(every acceptor structure held out in turn; the fitted model is refitted
without it, Scharber's rule has nothing to fit) and prints, side by side for the
fitted model and for Scharber's rule: held-out Voc MAE and mean signed error
[V], Spearman rank correlation of Voc and of PCE, and how many working devices
each model calls not viable; then the same split into fullerene and
non-fullerene acceptors, the error of simply predicting the mean training Voc,
and the targets (Voc MAE ≤ 0.10 V, Spearman(Voc) ≥ 0.7, Spearman(PCE) ≥ 0.4)
with met / not met.  Nothing is asserted here.

Usage::

    .venv/bin/python benchmarks/device_validation.py [--devices models/reference/devices.csv]
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np
from scipy.stats import spearmanr

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from screen.devicefit import DEVICES_PATH, cross_validate, read_devices  # noqa: E402

TARGETS = {"voc_mae_v": ("<=", 0.10), "spearman_voc": (">=", 0.7), "spearman_pce": (">=", 0.4)}


def _row(name, d, pred, mask) -> str:
    err = (pred["voc_v"] - d["voc_v"])[mask]
    has = mask & d["pce_pct"].notna() & pred["pce_pct"].notna()
    rho_v = spearmanr(pred.loc[mask, "voc_v"], d.loc[mask, "voc_v"]).statistic
    rho_p = spearmanr(pred.loc[has, "pce_pct"], d.loc[has, "pce_pct"]).statistic
    nv = int((~pred.loc[mask, "viable"].astype(bool)).sum())
    return (f"  {name:<9} n={int(mask.sum()):3d}  Voc MAE {err.abs().mean():.3f} V  signed {err.mean():+.3f} V  "
            f"Spearman Voc {rho_v:5.2f}  Spearman PCE {rho_p:5.2f} (n={int(has.sum())})  not viable {nv}")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--devices", default=str(DEVICES_PATH))
    args = parser.parse_args(argv)
    d = read_devices(args.devices)
    cv = cross_validate(d)
    m = cv.metrics
    print(f"devices: {args.devices} ({len(d)} rows with all six levels and Voc; {m['grouping']}, "
          f"{m['n_groups']} groups)")
    for label, mask in (("all", np.ones(len(d), bool)), ("fullerene", d["acceptor_class"].eq("fullerene")),
                        ("non-fullerene", ~d["acceptor_class"].eq("fullerene"))):
        print(f"{label}:")
        print(_row("fitted", d, cv.fitted, mask.to_numpy() if hasattr(mask, "to_numpy") else mask))
        print(_row("scharber", d, cv.scharber, mask.to_numpy() if hasattr(mask, "to_numpy") else mask))
    print(f"predicting the mean training Voc: MAE {m['mean_voc_baseline_mae_v']:.3f} V")
    verdicts = []
    for key, (op, target) in TARGETS.items():
        val = m["fitted"][key]
        met = val <= target if op == "<=" else val >= target
        verdicts.append(f"{key}={val:.3f} (target {op} {target}: {'met' if met else 'NOT met'})")
    print("fitted model, held out: " + "; ".join(verdicts))
    print(" ".join(f"{model}_{k}={m[model][k]:.4f}" for model in ("fitted", "scharber")
                   for k in ("voc_mae_v", "spearman_voc", "spearman_pce")))
    return 0


if __name__ == "__main__":
    sys.exit(main())
