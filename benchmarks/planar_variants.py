"""Benchmark: the planar variants of the structures stage against the route before them.

MMFF94 twists the single bond between an aromatic ring and a vinyl group by 35–40°
and heteroaryl–aryl bonds of donor–acceptor chromophores by 40–60°, where GFN2-xTB
optimisations keep them within 1–20°. The structures stage therefore ranks copies
of the chosen conformer with those bonds held near planar (``structures.planar_variants``,
:func:`screen.structures.planar_variants`). For every molecule row of the reference
set that has such a bond, this script builds the structure both ways (the default
force-field route with the variants off and on) and prints

* the largest twist of those bonds [degrees] both ways, and in the shipped
  xTB-geometry structures when ``--xtb-store`` gives a results store holding them;
* the xTB energy gained by the variant [kcal/mol] and which bond set won;
* the GFN2-xTB orbital gap both ways beside the gap on xTB-optimised geometries
  (``models/<xTB protocol>/reference_raw.csv``) [eV];
* the structure-stage wall time both ways (one core).

Usage::

    .venv/bin/python benchmarks/planar_variants.py [--jobs 2] [--limit N] [--names "A|B"]
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

from rdkit import Chem  # noqa: E402

from screen.config import Config  # noqa: E402
from screen.constants import BOHR_ANGSTROM, HARTREE_EV  # noqa: E402
from screen.engines import make_engine  # noqa: E402
from screen.options import StructureOptions  # noqa: E402
from screen.structures import PLANAR_BOND_SETS, _conjugated_torsions, _twist_deg, build_structure  # noqa: E402

KCAL_PER_EH = 627.509474
SMARTS = PLANAR_BOND_SETS[-1][1]


def max_twist(mol: Chem.Mol) -> float:
    """Largest twist from planar of the bonds the variants may restrain [degrees]."""
    torsions = _conjugated_torsions(mol, SMARTS).values()
    return max((_twist_deg(mol.GetConformer(), t) for t in torsions), default=float("nan"))


def gap_ev(mol: Chem.Mol, engine) -> float:
    z = np.array([a.GetAtomicNum() for a in mol.GetAtoms()])
    sp = engine.singlepoint(z, mol.GetConformer().GetPositions() / BOHR_ANGSTROM)
    homo = sp.n_electrons // 2 - 1
    return float((sp.orbital_energies_eh[homo + 1] - sp.orbital_energies_eh[homo]) * HARTREE_EV)


def both_routes(job: tuple[str, str]) -> dict:
    """One molecule built with the variants off and on: twist, gap, energy, wall time."""
    name, smiles = job
    engine = make_engine("tblite", "GFN2-xTB")
    out = {"name": name}
    try:
        for label, flag in (("off", False), ("on", True)):
            start = time.perf_counter()
            mol, info = build_structure(smiles, StructureOptions(planar_variants=flag), engine)
            out[f"wall_{label}"] = time.perf_counter() - start
            out[f"twist_{label}"] = max_twist(mol)
            out[f"gap_{label}"] = gap_ev(mol, engine)
            out[f"energy_{label}"] = info["xtb_rank_energy_eh"]
            out["variant"] = info["planar_variant"]
    except Exception as exc:  # a failed molecule is reported, the others go on
        out["error"] = str(exc)[:200]
    return out


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--limit", type=int, default=0, help="only the first N molecules")
    parser.add_argument("--names", default="", help="only these reference rows (names separated by |)")
    parser.add_argument("--raw", help="reference_raw.csv listing the molecules (default: the default protocol's)")
    args = parser.parse_args(argv)
    cfg = Config.of({})
    xtb_id = Config.of({"structures": {"geometry": "xtb", "rigid_embedding": "cycle_rank"}}).protocol_id
    raw = pd.read_csv(args.raw or REPO / "models" / cfg.protocol_id / "reference_raw.csv", keep_default_na=False,
                      na_values=[""])
    xraw = pd.read_csv(REPO / "models" / xtb_id / "reference_raw.csv", keep_default_na=False, na_values=[""])
    xgap = dict(zip(xraw["name"], xraw["xtb_gap_ev"]))
    rows = raw[raw["representation"].ne("polymer") & raw["status"].eq("ok")]
    keep = [n for n, s in zip(rows["name"], rows["smiles"])
            if _conjugated_torsions(Chem.AddHs(Chem.MolFromSmiles(s)), SMARTS)]
    rows = rows[rows["name"].isin(keep)]
    if args.names:
        rows = rows[rows["name"].isin(args.names.split("|"))]
    if args.limit:
        rows = rows.head(args.limit)
    with ProcessPoolExecutor(args.jobs) as pool:
        records = list(pool.map(both_routes, zip(rows["name"], rows["smiles"])))
    ok = pd.DataFrame([r for r in records if "error" not in r])
    for r in records:
        if "error" in r:
            print(f"  failed {r['name']}: {r['error']}")
    ok["gain_kcal"] = (ok["energy_off"] - ok["energy_on"]) * KCAL_PER_EH
    ok["gap_xtb_geometry"] = [xgap.get(n, np.nan) for n in ok["name"]]
    pd.set_option("display.width", 200)
    print(f"{len(ok)} reference molecules with a ring–vinyl or five-ring biaryl bond (protocol {cfg.protocol_id}; "
          f"xTB geometries {xtb_id}); twist [°], orbital gap [eV], xTB energy gained [kcal/mol], wall [s]")
    cols = ["name", "variant", "twist_off", "twist_on", "gain_kcal", "gap_off", "gap_on", "gap_xtb_geometry",
            "wall_off", "wall_on"]
    print(ok[cols].round(2).to_string(index=False))
    moved = ok[ok["variant"] != ""]
    err_off = (moved["gap_off"] - moved["gap_xtb_geometry"]).abs()
    err_on = (moved["gap_on"] - moved["gap_xtb_geometry"]).abs()
    print(f"variant kept for {len(moved)} of {len(ok)} ({moved['variant'].value_counts().to_dict()}); median twist "
          f"{moved['twist_off'].median():.0f}° -> {moved['twist_on'].median():.0f}°; xTB energy gained median "
          f"{moved['gain_kcal'].median():.1f}, max {moved['gain_kcal'].max():.1f} kcal/mol")
    print(f"orbital gap against the xTB-geometry gap, molecules with a kept variant: mean |difference| "
          f"{err_off.mean():.3f} (off) -> {err_on.mean():.3f} eV (on); mean signed "
          f"{(moved['gap_off'] - moved['gap_xtb_geometry']).mean():+.3f} -> "
          f"{(moved['gap_on'] - moved['gap_xtb_geometry']).mean():+.3f} eV")
    print(f"structure wall time, all {len(ok)}: {ok['wall_off'].sum():.0f} s -> {ok['wall_on'].sum():.0f} s "
          f"(ratio {ok['wall_on'].sum() / ok['wall_off'].sum():.2f})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
