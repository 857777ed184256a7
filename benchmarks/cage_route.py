"""Benchmark: fullerene cages before and after their xTB geometry route and calibration class term.

Before: every molecule, fullerenes included, kept its MMFF94 geometry, and the
calibration treated cages as any other molecule. After: a closed carbon cage
(:mod:`screen.cage`) is optimised with GFN2-xTB (``structures.cage_geometry``,
default ``xtb``) and every calibration model carries a ``cage`` class term.

For the fullerene structures of the reference sets this script computes, with
the default protocol otherwise,

* the C60 bond lengths of both geometries beside the gas-phase electron-diffraction
  values (6:6 1.401(10) Å, 6:5 1.458(6) Å; Hedberg et al., Science 254 (1991) 410,
  doi:10.1126/science.254.5030.410, abstract read);
* the raw GFN2-xTB orbital gap and ΔSCF EA of every cage on both geometries;

then refits the whole calibration four ways on the shipped raw values
(``models/<protocol-id>/reference_raw.csv``) with the cages' raw values taken
from either geometry, with and without the class term, and prints the LOO MAE of
each model over all rows and over the fullerene rows, and the film LUMO error of
each fullerene. The non-cage rows are the same in all four (the cage route does not
touch them; ``tests/test_cage.py``).

Usage::

    .venv/bin/python benchmarks/cage_route.py
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
from screen.cage import cage_smiles  # noqa: E402
from screen.calibrate import fit_all, read_reference  # noqa: E402
from screen.config import Config  # noqa: E402
from screen.constants import BOHR_ANGSTROM  # noqa: E402
from screen.electronic import vertical_levels  # noqa: E402
from screen.options import ElectronicOptions, StructureOptions  # noqa: E402
from screen.refit import read_raw_source  # noqa: E402
from screen.structures import build_structure  # noqa: E402

#: C60 r_g bond lengths [Å], Hedberg et al. 1991 (see the module docstring)
C60_MEASURED_A = {"6:6": 1.401, "6:5": 1.458}
MODELS = ("ip", "ea", "gap_opt", "homo_film", "lumo_film", "gap_opt_film")


def c60_bonds(mol) -> dict[str, tuple[float, float]]:
    """Mean and SD [Å] of the 6:6 and 6:5 bonds of a C60 geometry."""
    pos = mol.GetConformer().GetPositions()
    pentagons = [set(r) for r in mol.GetRingInfo().AtomRings() if len(r) == 5]
    kinds: dict[str, list[float]] = {"6:6": [], "6:5": []}
    for b in mol.GetBonds():
        i, j = b.GetBeginAtomIdx(), b.GetEndAtomIdx()
        kinds["6:5" if any(i in p and j in p for p in pentagons) else "6:6"].append(np.linalg.norm(pos[i] - pos[j]))
    return {k: (float(np.mean(v)), float(np.std(v))) for k, v in kinds.items()}


def cage_values(raw: pd.DataFrame, route: str, electronic: ElectronicOptions) -> tuple[pd.DataFrame, dict]:
    """Raw values of the cage rows computed with ``cage_geometry=route``; C60's bond statistics."""
    engine = electronic.make_engine()
    out, bonds = raw.copy(), {}
    for i, row in raw[[cage_smiles(s) for s in raw["smiles"]]].iterrows():
        mol, _ = build_structure(row["smiles"], StructureOptions(cage_geometry=route))
        numbers = [a.GetAtomicNum() for a in mol.GetAtoms()]
        values = vertical_levels(numbers, mol.GetConformer().GetPositions() / BOHR_ANGSTROM, engine,
                                 film_epsilon=electronic.film_epsilon)
        for key, value in values.items():
            if key in out.columns:
                out.loc[i, key] = value
        if row["name"] == "C60":
            bonds = c60_bonds(mol)
    return out, bonds


def fit(sets: dict, raw: pd.DataFrame, class_term: bool) -> dict:
    saved = dict(linear.CLASS_TERMS)
    if not class_term:
        linear.CLASS_TERMS.clear()
    try:
        return fit_all(sets, raw)
    finally:
        linear.CLASS_TERMS.clear()
        linear.CLASS_TERMS.update(saved)


def main(argv=None) -> int:
    argparse.ArgumentParser(description=__doc__.splitlines()[0]).parse_args(argv)
    cfg = Config.of({})
    sets = read_reference(cfg["calibration"]["reference"])
    raw, _ = read_raw_source(REPO / "models" / cfg.protocol_id, cfg.protocol_id)
    electronic = cfg.electronic
    tables, bonds = {}, {}
    for route in ("ff", "xtb"):
        tables[route], bonds[route] = cage_values(raw, route, electronic)
    print("C60 bond lengths [Å] (mean ± SD; measured 6:6 1.401, 6:5 1.458, Hedberg et al. 1991):")
    for route, b in bonds.items():
        print(f"  {route:3s}  6:6 {b['6:6'][0]:.3f} ± {b['6:6'][1]:.3f}   6:5 {b['6:5'][0]:.3f} ± {b['6:5'][1]:.3f}   "
              f"alternation {b['6:5'][0] - b['6:6'][0]:+.3f} (measured +0.057)")
    cages = tables["ff"][[cage_smiles(s) for s in tables["ff"]["smiles"]]]
    print("\nraw GFN2-xTB values of the cages, force-field -> xTB geometry [eV]:")
    for i, row in cages.iterrows():
        x = tables["xtb"].loc[i]
        print(f"  {row['name'][:34]:34s} orbital gap {row['xtb_gap_ev']:.2f} -> {x['xtb_gap_ev']:.2f}   "
              f"EA {row['xtb_ea_ev']:.2f} -> {x['xtb_ea_ev']:.2f}   film EA {row['xtb_ea_film_ev']:.2f} -> "
              f"{x['xtb_ea_film_ev']:.2f}")
    print("\nLOO MAE [eV], all rows / fullerene rows (n):")
    print(f"  {'route':34s} " + " ".join(f"{m:>16s}" for m in MODELS))
    lumo, lumo_families = {}, {}
    for route, term, label in (("ff", False, "ff cages, no class term (before)"), ("ff", True, "ff cages + class term"),
                               ("xtb", False, "xtb cages, no class term"), ("xtb", True, "xtb cages + class term (now)")):
        models = fit(sets, tables[route], term)
        cells = []
        for m in MODELS:
            res = models[m]["residuals"]
            full = [r for r in res if r.get("family") == "fullerenes"]
            err = np.abs([r["loo_ev"] - r["measured_ev"] for r in full]) if full else np.array([np.nan])
            cells.append(f"{models[m]['loo_mae_ev']:.3f}/{np.nanmean(err):.2f}({len(full)})")
            if m == "lumo_film":
                lumo[label] = {r["name"]: r["loo_ev"] - r["measured_ev"] for r in full}
                families: dict[str, list[float]] = {}
                for r in res:
                    families.setdefault(r["family"], []).append(abs(r["loo_ev"] - r["measured_ev"]))
                lumo_families[label] = {f: float(np.mean(v)) for f, v in sorted(families.items())}
        print(f"  {label:34s} " + " ".join(f"{c:>16s}" for c in cells))
    print("\nfilm LUMO, LOO error per fullerene [eV]:")
    names = list(next(iter(lumo.values())))
    print("  " + " ".join(f"{n[:8]:>8s}" for n in names) + "   route")
    for label, errs in lumo.items():
        print("  " + " ".join(f"{errs[n]:+8.2f}" for n in names) + f"   {label}")
    print("\nfilm LUMO, LOO MAE by family [eV] (the other classes pay for the fullerenes' own term: without it the")
    print("fullerenes anchor the deep-LUMO end of the fit):")
    fams = list(next(iter(lumo_families.values())))
    print("  " + " ".join(f"{f[:12]:>12s}" for f in fams) + "   route")
    for label, v in lumo_families.items():
        print("  " + " ".join(f"{v.get(f, np.nan):12.3f}" for f in fams) + f"   {label}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
