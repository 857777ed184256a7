"""Benchmark: the π-hole rule for nitrogen lone-pair HOMOs (``electronic.lone_pair_homo``).

GFN2-xTB places the σ lone pair of a two-coordinate nitrogen above the highest
π orbital of small aza-aromatics (:mod:`screen.lonepair`); the ΔSCF cation is
then a lone-pair hole. The shipped rule (``pi``) takes the HOMO, the gap, the
integrals and the IPs for the highest π-type orbital instead and records the
shift ε_lp − ε_π in ``xtb_lone_pair_shift_ev``. For every shipped protocol this
script refits the whole calibration on its stored raw values
(``models/<protocol-id>/reference_raw.csv``) twice,

* ``pi``: the raw values as computed (what ships);
* ``aufbau``: the shift undone (IP and film IP − shift, HOMO + shift, gap − shift),
  i.e. the HOMO as the aufbau order gives it. The HOMO→LUMO integrals cannot be
  undone from the table and keep their π values, and polymer rows (chain-limit
  values) keep theirs: the comparison covers the molecules only,

and prints the LOO MAE of the gas IP, EA and optical gap and of the film HOMO,
LUMO and optical gap, and the leave-one-out error of every reference row whose
HOMO was a lone pair.

Usage::

    .venv/bin/python benchmarks/lone_pair_homo.py
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from screen.calibrate import fit_all  # noqa: E402
from screen.calibration.reference import read_reference  # noqa: E402

MODELS = {"ip": "gas IP", "ea": "gas EA", "gap_opt": "gas gap", "homo_film": "film HOMO", "lumo_film": "film LUMO",
          "gap_opt_film": "film gap"}


def aufbau(raw: pd.DataFrame) -> pd.DataFrame:
    """Raw values with the π-hole shift undone (molecule rows; polymer rows unchanged)."""
    out = raw.copy()
    shift = pd.to_numeric(out["xtb_lone_pair_shift_ev"], errors="coerce").fillna(0.0)
    for col, sign in (("xtb_ip_ev", -1), ("xtb_ip_film_ev", -1), ("xtb_homo_ev", +1), ("xtb_gap_ev", -1)):
        out[col] = pd.to_numeric(out[col], errors="coerce") + sign * shift
    return out


def main(argv=None) -> int:
    argparse.ArgumentParser(description=__doc__.splitlines()[0]).parse_args(argv)
    sets = read_reference(REPO / "models" / "reference")
    folders = sorted(p for p in (REPO / "models").iterdir() if (p / "reference_raw.csv").is_file())
    for folder in folders:
        raw = pd.read_csv(folder / "reference_raw.csv", keep_default_na=False, na_values=[""])
        if "xtb_lone_pair_shift_ev" not in raw:
            print(f"\n{folder.name}: raw values computed before the rule (no xtb_lone_pair_shift_ev column)")
            continue
        shifted = raw[pd.to_numeric(raw["xtb_lone_pair_shift_ev"], errors="coerce").fillna(0) > 0]
        print(f"\n{folder.name}: {len(shifted)} reference molecules with a lone-pair HOMO: "
              + ", ".join(f"{n} ({s:.2f} eV)" for n, s in zip(shifted["name"], shifted["xtb_lone_pair_shift_ev"])))
        fits = {rule: fit_all(sets, table) for rule, table in (("pi", raw), ("aufbau", aufbau(raw)))}
        print("  LOO MAE [eV]     " + "  ".join(f"{label:>9s}" for label in MODELS.values()))
        for rule, models in fits.items():
            print(f"  {rule:16s} " + "  ".join(f"{models[m]['loo_mae_ev']:9.3f}" for m in MODELS))
        names = set(shifted["name"])
        for m in MODELS:
            rows = {rule: pd.DataFrame(fits[rule][m]["residuals"]) for rule in fits}
            hit = rows["pi"][rows["pi"]["name"].isin(names)]
            if not len(hit):
                continue
            base = rows["aufbau"].set_index("name")
            print(f"  {MODELS[m]}: LOO − measured [eV], pi / aufbau: " + ", ".join(
                f"{n} {lo - me:+.2f} / {base.loc[n, 'loo_ev'] - me:+.2f}"
                for n, lo, me in zip(hit["name"], hit["loo_ev"], hit["measured_ev"]) if n in base.index))
    return 0


if __name__ == "__main__":
    np.set_printoptions(precision=3)
    sys.exit(main())
