"""Benchmark: is the diketopyrrolopyrrole (DPP) materials' optical-gap bias geometric?

Held out, the default protocol puts the film optical gaps of the three DPP materials of the film set 0.36–0.54 eV
too wide (HOMO 0.16–0.34 eV too deep, LUMO 0.23–0.26 eV too shallow), the xTB-geometry protocol 0.15–0.26 eV.
This script builds DPP molecules three ways — the default route (MMFF94 geometry of the xTB-lowest conformer),
the same with the opt-in planar variants (``structures.planar_variants``: aryl–vinyl and five-ring biaryl
bonds held near planar, kept when GFN2-xTB puts them lower), and xTB-optimised (``structures.geometry=xtb``) —
and prints the raw GFN2-xTB orbital gap, film-phase ΔSCF IP and EA [eV] and the planar variant chosen. If
the gap falls by tenths of an eV from the first route to the others, the bias comes from the force-field
geometry (twisted DPP–thiophene bonds), not from the method.

Recorded (2026-12-04, 2 processes, default protocol ``tblite-gfn2-ff-eaf1c554``): DPP(TBFu)₂ orbital gap 1.636 →
1.350 (aryl-vinyl ±5°) → 1.215 eV; film IP 10.812 → 10.719 → 10.697 eV; film EA 7.532 → 7.727 → 7.752 eV.
Methyl-capped PDPP3T repeat unit: orbital gap 1.704 → 1.437 → 1.224 eV; film IP 10.878 → 10.740 → 10.667 eV; film EA 7.269 →
7.437 → 7.564 eV.

Usage::

    .venv/bin/python benchmarks/dpp_geometry.py [--jobs 2]
"""

from __future__ import annotations

import argparse
import sys
from concurrent.futures import ProcessPoolExecutor
from dataclasses import asdict, replace
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

#: DPP molecules: the film set's small-molecule donor and its DPP terthiophene polymer's repeat unit capped with methyl
MOLECULES = {
    "DPP(TBFu)2": "CN1C(=O)C2=C(c3ccc(-c4cc5ccccc5o4)s3)N(C)C(=O)C2=C1c1ccc(-c2cc3ccccc3o2)s1",
    "PDPP3T unit": "Cc1ccc(C2=C3C(=O)N(C)C(c4ccc(-c5ccc(C)s5)s4)=C3C(=O)N2C)s1",
}
ROUTES = ("default", "planar variants", "xtb geometry")
QUANTITIES = ("xtb_gap_ev", "xtb_ip_film_ev", "xtb_ea_film_ev")


def one(args: tuple[str, str, str]) -> tuple[str, str, str, dict]:
    """Raw levels of one molecule on one route."""
    name, smiles, route = args
    from screen.config import Config
    from screen.electronic import electronic_engine, molecule_numbers_positions, vertical_levels
    from screen.structures import build_structure, ranking_engine

    cfg = Config.of({})
    so, eo = cfg.structures, cfg.electronic
    opts = {"default": so, "planar variants": replace(so, planar_variants=True),
            "xtb geometry": replace(so, geometry="xtb")}[route]
    mol, info = build_structure(smiles, opts, ranking_engine(so.ranking_method))
    z, pos = molecule_numbers_positions(mol)
    lv = vertical_levels(z, pos, electronic_engine(asdict(eo)), film_epsilon=eo.film_epsilon,
                         lone_pair_homo=eo.lone_pair_homo)
    return name, route, info.get("planar_variant") or "-", {q: float(lv[q]) for q in QUANTITIES}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--jobs", type=int, default=2)
    args = ap.parse_args(argv)
    work = [(n, s, r) for n, s in MOLECULES.items() for r in ROUTES]
    with ProcessPoolExecutor(max_workers=max(1, args.jobs)) as pool:
        results = list(pool.map(one, work))
    print(f"{'molecule':12s} {'route':16s} {'variant':34s} " + " ".join(f"{q:>15s}" for q in QUANTITIES))
    for name, route, variant, values in results:
        print(f"{name:12s} {route:16s} {variant:34s} " + " ".join(f"{values[q]:15.3f}" for q in QUANTITIES))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
