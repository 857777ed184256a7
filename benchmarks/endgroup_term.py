"""Benchmark: the optical-gap class term of dicyanomethylene-indanone ("IC") end groups.

The fused-ring non-fullerene acceptors of the film set end in IC groups
(:mod:`screen.endgroup`); without a term of their own their film optical gaps came
out too wide (Y6 held out 1.65 eV against 1.36 eV). For every shipped protocol
this script refits the whole calibration on its stored raw values
(``models/<protocol-id>/reference_raw.csv``, seconds) three ways,

* ``none``: no IC term;
* ``optical``: the term in the optical-gap model only;
* ``optical + Y``: that and a second term for the Y6/BTP family among the IC acceptors
  (:func:`screen.endgroup.y_core_smiles`; what ships, :data:`screen.calibration.optical.CLASS_TERMS`);
* ``every model``: the term in every calibration model, as the fullerenes' ``cage`` term,

and prints the LOO MAE of the film HOMO, LUMO and optical gap over all film
rows, the optical-gap LOO and mean signed error of the IC acceptors and of the
other non-fullerene acceptors, the term's coefficient and the film red shift.
The device figures (``device_validation.py``) are the independent check: the
devices were not used in any of these fits.

Usage::

    .venv/bin/python benchmarks/endgroup_term.py
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

import screen.calibration.linear as linear  # noqa: E402
import screen.calibration.optical as optical  # noqa: E402
from screen.calibrate import fit_all  # noqa: E402
from screen.calibration.reference import read_reference  # noqa: E402
from screen.endgroup import ic_end_smiles  # noqa: E402

VARIANTS = {"none": ({}, {}), "optical": ({}, {"ic_end": 2}), "optical + Y": ({}, {"ic_end": 2, "y_core": 2}),
            "every model": ({"ic_end": 2}, {})}


def refit(raw: pd.DataFrame, sets: dict, variant: str) -> dict:
    """All models with the IC term placed as ``variant`` says (the module settings restored afterwards)."""
    every, opt = VARIANTS[variant]
    saved = dict(linear.CLASS_TERMS), dict(optical.CLASS_TERMS)
    try:
        linear.CLASS_TERMS.update(every)
        optical.CLASS_TERMS.clear()
        optical.CLASS_TERMS.update(opt)
        return fit_all(sets, raw)
    finally:
        linear.CLASS_TERMS.clear()
        linear.CLASS_TERMS.update(saved[0])
        optical.CLASS_TERMS.clear()
        optical.CLASS_TERMS.update(saved[1])


def _gap_rows(model: dict) -> pd.DataFrame:
    d = pd.DataFrame(model["residuals"])
    d["err"] = d["loo_ev"] - d["measured_ev"]
    d["ic"] = [ic_end_smiles(s) for s in d["smiles"]]
    return d


def main(argv=None) -> int:
    argparse.ArgumentParser(description=__doc__.splitlines()[0]).parse_args(argv)
    sets = read_reference(REPO / "models" / "reference")
    folders = sorted(p for p in (REPO / "models").iterdir() if (p / "reference_raw.csv").is_file())
    for folder in folders:
        raw = pd.read_csv(folder / "reference_raw.csv", keep_default_na=False, na_values=[""])
        print(f"\n{folder.name}: film LOO MAE [eV]; optical gap of the film rows by group: LOO MAE / mean signed (n)")
        for variant in VARIANTS:
            m = refit(raw, sets, variant)
            g = m["gap_opt_film"]
            d = _gap_rows(g)
            nfa = d["family"].str.startswith("non-fullerene")
            ic, other = d[d["ic"]], d[nfa & ~d["ic"]]
            coefs = dict(zip(g["model"]["features"], g["model"]["coef"]))
            coef, y_coef = coefs.get("ic_end", np.nan), coefs.get("y_core", np.nan)
            print(f"  {variant:12s} HOMO {m['homo_film']['loo_mae_ev']:.3f}  LUMO {m['lumo_film']['loo_mae_ev']:.3f}  "
                  f"gap {g['loo_mae_ev']:.3f} | IC acceptors {ic['err'].abs().mean():.3f} / {ic['err'].mean():+.3f} "
                  f"({len(ic)}), other NFAs {other['err'].abs().mean():.3f} / {other['err'].mean():+.3f} "
                  f"({len(other)}) | term {coef:+.3f} eV (Y6/BTP {y_coef:+.3f}), red shift {g['red_shift_ev']:.2f} eV")
            if variant.startswith("optical"):
                print("    IC acceptors, film optical gap LOO − measured [eV]: " + ", ".join(
                    f"{n.split(' (')[0]} {e:+.2f}" for n, e in zip(ic["name"], ic["err"])))
    return 0


if __name__ == "__main__":
    sys.exit(main())
