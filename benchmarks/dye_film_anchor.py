"""Benchmark: could the dyes' E(S⁺/S) be anchored on the film HOMO model instead of its own narrow fit?

The shipped ``e_ox`` model (``models/dyecell/<protocol-id>/e_ox.json``) is a linear fit on 30 recalled
solution potentials spanning 0.92–1.44 V vs NHE; its slope is small (0.17 V per eV of IP), so it tells dyes
apart only weakly. The film HOMO model is fitted on 67 film materials over a wide range. This script asks
whether E(S⁺/S) = −HOMO_film + c — the film model's own slope, one constant fitted on the dyes — predicts the
measured potentials better, by leave-one-out MAE, beside the constant model and a free linear fit on the film
HOMO and on the raw ΔSCF IP. It answers a modelling question; it changes no shipped model.

Input: ``levels.csv`` of a ``dascreen run`` of the dye reference input (write it with
``python -c "from screen.dyecell.calibrate import reference_input; reference_input().to_csv('dyeref.csv', index=False)"``
and ``dascreen run dyeref.csv --out DIR``; minutes with a filled results store).

Usage::

    .venv/bin/python benchmarks/dye_film_anchor.py --levels DIR/levels.csv
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from screen.dyecell.calibrate import _canonical, reference_table  # noqa: E402


def loo_mae(y: np.ndarray, predict) -> float:
    """Leave-one-out MAE of ``predict(train_mask, i)``.

    >>> round(loo_mae(np.array([1.0, 2.0, 3.0]), lambda m, i: 2.0), 3)
    0.667
    """
    n = len(y)
    return float(np.mean([abs(predict(np.arange(n) != i, i) - y[i]) for i in range(n)]))


def linear(x: np.ndarray, y: np.ndarray):
    """Predictor of a least-squares line of ``y`` on ``x`` fitted on the training rows."""
    def predict(train, i):
        slope, icpt = np.polyfit(x[train], y[train], 1)
        return slope * x[i] + icpt
    return predict


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--levels", required=True, help="levels.csv of a dascreen run of the dye reference input")
    args = parser.parse_args(argv)
    ref = reference_table()
    ref = ref[ref["exclude_reason"].fillna("").astype(str).eq("")].copy()
    lv = pd.read_csv(args.levels)
    lv = lv[lv["status"].eq("ok")].copy()
    ref["can"], lv["can"] = ref["smiles"].map(_canonical), lv["smiles"].map(_canonical)
    data = ref.merge(lv[["can", "homo_ev", "xtb_ip_ev"]], on="can").dropna(subset=["e_ox_v_nhe", "homo_ev"])
    y = data["e_ox_v_nhe"].to_numpy(float)
    homo, ip = data["homo_ev"].to_numpy(float), data["xtb_ip_ev"].to_numpy(float)
    print(f"{len(y)} reference dyes with a computed film HOMO; measured E(S+/S) SD {np.std(y):.3f} V, "
          f"computed -HOMO_film SD {np.std(-homo):.3f} eV")
    rows = [("constant (mean of the others)", loo_mae(y, lambda m, i: y[m].mean())),
            ("-HOMO_film + c (film model's slope)", loo_mae(y, lambda m, i: -homo[i] + np.mean(y[m] + homo[m]))),
            ("a * (-HOMO_film) + c", loo_mae(y, linear(-homo, y))),
            ("a * IP(xTB, gas) + c (the shipped feature)", loo_mae(y, linear(ip, y)))]
    for label, mae in rows:
        print(f"  {label:44s} LOO MAE {mae:.3f} V")
    slope = np.polyfit(-homo, y, 1)[0]
    print(f"slope of E(S+/S) on -HOMO_film over all dyes: {slope:.2f} V/eV")
    print(" ".join(f"{k}={v:.3f}" for k, v in zip(("constant", "anchored", "film_free", "ip_free"),
                                                   (r[1] for r in rows))))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
