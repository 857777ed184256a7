"""Benchmark: would a solution-phase ΔSCF ionisation energy predict the dyes' E(S⁺/S) better?

The dye reference potentials (``models/reference/dyes.csv``) are measured in
solution (DMF, CH₂Cl₂, MeCN). The shipped ``e_ox`` model chooses among the gas
ΔSCF IP, the ΔSCF IP in a continuum of the *film's* permittivity (ε = 3.5, the
electronic stage's ``xtb_ip_film_ev``) and IP + HOMO energy. This script asks
whether the ΔSCF IP in a continuum of a polar solvent's permittivity is the
better single feature, on the same geometry:

* every reference dye is built by the default structure route
  (:func:`screen.structures.build_structure`, force field);
* the ΔSCF IP (neutral and cation at that geometry, GFN2-xTB, tblite's implicit
  solvation with the given ε) is computed with ε = 3.5 and ε = 36
  (acetonitrile 35.7, DMF 36.7 at 25 °C, CRC Handbook of Chemistry and Physics,
  from memory) and in the gas phase;
* each is used as the one feature of :func:`screen.dyecell.calibrate.fit_target`
  (the shipped fitting code, nested LOO) and the LOO MAE, Pearson r and the
  constant model's LOO MAE are printed.

It answers a protocol question; it does not change the shipped models.

Usage::

    .venv/bin/python benchmarks/dye_solvent.py [--jobs 2] [--eps 3.5 36]
"""

from __future__ import annotations

import argparse
import sys
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from screen.constants import BOHR_ANGSTROM, HARTREE_EV  # noqa: E402
from screen.dyecell.calibrate import fit_target, reference_table  # noqa: E402
from screen.engines import make_engine  # noqa: E402
from screen.options import StructureOptions  # noqa: E402
from screen.structures import build_structure  # noqa: E402


def _ip(numbers, pos, engine, epsilon) -> float:
    """Vertical ΔSCF IP [eV] at one geometry, in the gas (``epsilon`` None) or a continuum."""
    neutral = engine.singlepoint(numbers, pos, charge=0, uhf=0, epsilon=epsilon)
    cation = engine.singlepoint(numbers, pos, charge=1, uhf=1, epsilon=epsilon, guess=neutral)
    return (cation.energy_eh - neutral.energy_eh) * HARTREE_EV


def ips(job: tuple[str, str, tuple]) -> dict:
    """ΔSCF IPs of one dye on its force-field geometry (or the failure)."""
    name, smiles, epsilons = job
    start = time.perf_counter()
    try:
        mol, _ = build_structure(smiles, StructureOptions())
        numbers = [a.GetAtomicNum() for a in mol.GetAtoms()]
        pos = mol.GetConformer().GetPositions() / BOHR_ANGSTROM
        engine = make_engine("tblite")
        out = {"ip_gas": _ip(numbers, pos, engine, None)}
        out.update({f"ip_eps{eps:g}": _ip(numbers, pos, engine, float(eps)) for eps in epsilons})
    except Exception as exc:  # a failed dye is reported, the others go on
        return {"name": name, "error": str(exc)[:200]}
    return {"name": name, "wall_s": time.perf_counter() - start, **out}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--eps", type=float, nargs="+", default=[3.5, 36.0], help="permittivities to try")
    args = parser.parse_args(argv)
    ref = reference_table()
    with ProcessPoolExecutor(args.jobs) as pool:
        records = list(pool.map(ips, [(n, s, tuple(args.eps)) for n, s in zip(ref["name"], ref["smiles"])]))
    failed = [r["name"] for r in records if "error" in r]
    table = ref.merge(pd.DataFrame([r for r in records if "error" not in r]), on="name")
    print(f"{len(table)} reference dyes ({len(ref)} in the file; failed: {', '.join(failed) or '-'}); "
          f"{sum(r.get('wall_s', 0.0) for r in records) / 60:.1f} min of structure + ΔSCF")
    cols = ["ip_gas"] + [f"ip_eps{eps:g}" for eps in args.eps]
    figures = []
    for col in cols:
        fit = fit_target("e_ox", table.assign(feature=table[col]), feature_sets=[["feature"]])
        r = float(np.corrcoef(table[col], table["e_ox_v_nhe"])[0, 1])
        figures.append(f"{col}_loo={fit['loo_mae']:.4f} {col}_r={r:.3f}")
        print(f"{col:12s} LOO MAE {fit['loo_mae']:.3f} V  r = {r:+.2f}  slope "
              f"{fit['model']['coef'][0]:+.3f} V/eV  (constant model {fit['baseline_loo_mae']:.3f} V)")
    print(" ".join(figures))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
