"""Benchmark: how twisted are the force-field backbones of the reference polymers, and does it cost accuracy?

A one-chain force-field geometry can twist a conjugated backbone where the film chain is near planar
(docs/method.md, "Still wrong by family"). This script measures that twist on the structures the default protocol
computes and sets it beside the calibration's own held-out errors:

* for every polymer of the film reference set (``models/reference/levels_film.csv``) the longest
  oligomer the shipped calibration used (``models/<protocol>/reference_oligomers.csv``) is built by the
  protocol's structure route (:func:`screen.structures.build_structure`, default options: force field,
  conformers ranked by GFN2-xTB);
* its backbone twist is measured by :func:`backbone_twists`: the deviation from planar (0° or 180°)
  of one heavy-atom torsion about every single bond, not in a ring, between conjugated atoms (at least
  one in a ring) that cuts the chain into two parts of at least half a repeat unit each — ring–ring and
  ring–vinyl links along the chain; pendant side groups (thienyl on benzodithiophene, phenyl on
  quinoxaline) and the last atoms at the chain ends do not count;
* the mean and largest twist are printed beside the leave-one-out residuals (predicted − measured) of
  the film optical gap, HOMO and LUMO (``models/<protocol>/*.json``), with Spearman's ρ over the
  polymers and the mean residual above and below a twist threshold.

It answers a question about the route; it changes nothing shipped.

Recorded run (default protocol ``tblite-gfn2-ff-cf90d5d7``, 33 reference polymers, 2 jobs, load 3–4):
31 of the 33 longest oligomers have a mean backbone twist of 34–65° (largest bond 40–87°); only
unsubstituted polythiophene (0°) and the dimer of PSeBDT-TPD (2°) are planar. Spearman's ρ between the
mean twist and the LOO residual: film optical gap −0.32 (n = 33), HOMO −0.09 (29), LUMO −0.41 (25) —
more twist does *not* go with a wider predicted gap or a deeper HOMO: the calibration is fitted on chains
that are all twisted alike, and the twist is no warning sign within that range. A twist flag was
therefore not shipped; the demo polymer KF-P02 (thiophene–difluorothiophene links 52–65°) lies inside the
same range.

Usage::

    .venv/bin/python benchmarks/backbone_twist.py [--protocol <protocol-id>] [--jobs 2] [--limit N]
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from rdkit import Chem  # noqa: E402
from rdkit.Chem import rdMolTransforms  # noqa: E402
from scipy.stats import spearmanr  # noqa: E402

from screen.config import Config  # noqa: E402
from screen.options import StructureOptions  # noqa: E402
from screen.structures import build_structure  # noqa: E402


def _conjugated(atom: Chem.Atom) -> bool:
    return atom.GetIsAromatic() or atom.GetHybridization() in (Chem.HybridizationType.SP2, Chem.HybridizationType.SP)


def _heavy_sides(mol: Chem.Mol, bond: Chem.Bond) -> list[int]:
    """Heavy-atom counts of the parts of ``mol`` left when ``bond`` is cut (one entry when it is in a cycle)."""
    cut = Chem.RWMol(mol)
    cut.RemoveBond(bond.GetBeginAtomIdx(), bond.GetEndAtomIdx())
    parts = Chem.GetMolFrags(cut, asMols=False, sanitizeFrags=False)
    return [sum(1 for i in part if mol.GetAtomWithIdx(i).GetAtomicNum() > 1) for part in parts]


def backbone_bonds(mol: Chem.Mol, min_side: int) -> list[tuple[int, int, int, int]]:
    """One heavy-atom torsion ``(i, j, k, l)`` about every backbone bond ``j–k`` of ``mol`` (module docstring).

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        Molecule (hydrogens may be explicit).
    min_side : int
        Fewest heavy atoms on each side of a backbone bond.
    """
    out = []
    for bond in mol.GetBonds():
        if bond.IsInRing() or bond.GetBondType() != Chem.BondType.SINGLE:
            continue
        a, b = bond.GetBeginAtom(), bond.GetEndAtom()
        if not (_conjugated(a) and _conjugated(b) and (a.IsInRing() or b.IsInRing())):
            continue
        sides = _heavy_sides(mol, bond)
        if len(sides) != 2 or min(sides) < min_side:
            continue
        ends = [[n.GetIdx() for n in x.GetNeighbors() if n.GetIdx() != y.GetIdx() and n.GetAtomicNum() > 1]
                for x, y in ((a, b), (b, a))]
        if ends[0] and ends[1]:
            out.append((ends[0][0], a.GetIdx(), b.GetIdx(), ends[1][0]))
    return out


def backbone_twists(mol: Chem.Mol, min_side: int, conf_id: int = -1) -> list[float]:
    """Twist from planar [degrees] of every backbone bond of ``mol`` in conformer ``conf_id``."""
    conf = mol.GetConformer(conf_id)
    twists = []
    for torsion in backbone_bonds(mol, min_side):
        x = abs(rdMolTransforms.GetDihedralDeg(conf, *torsion))
        twists.append(min(x, 180.0 - x))
    return twists


def longest_oligomers(protocol: str) -> pd.DataFrame:
    """Polymer id, name, longest oligomer SMILES, n and repeat-unit heavy atoms of the reference polymers."""
    side = pd.read_csv(REPO / "models" / protocol / "reference_oligomers.csv")
    side = side[side["n"].astype(str) != "inf"].copy()
    side["n"] = side["n"].astype(float).astype(int)
    side = side[side["status"] == "ok"].drop_duplicates(["polymer_id", "n"])
    longest = side.sort_values("n").groupby("polymer_id").tail(1)
    raw = pd.read_csv(REPO / "models" / protocol / "reference_raw.csv").set_index("id")
    longest = longest.assign(name=[raw.loc[i, "name"] for i in longest["polymer_id"]],
                             unit=[str(raw.loc[i, "smiles"]) for i in longest["polymer_id"]])
    return longest[["polymer_id", "name", "n", "smiles", "unit"]].reset_index(drop=True)


def _unit_heavy(unit: str) -> int:
    mol = Chem.MolFromSmiles(unit)
    return sum(1 for a in mol.GetAtoms() if a.GetAtomicNum() > 1)


def twist_of(smiles: str, unit: str) -> tuple[list[float], float]:
    """Backbone twists [degrees] of the default-route structure of ``smiles``, and the wall time [s]."""
    start = time.perf_counter()
    mol, _ = build_structure(smiles, StructureOptions())
    return backbone_twists(mol, min_side=max(4, _unit_heavy(unit) // 2)), time.perf_counter() - start


def residuals(protocol: str) -> pd.DataFrame:
    """LOO residual (predicted − measured) [eV] of the film gap, HOMO and LUMO per reference polymer name."""
    out = {}
    for model, column in (("gap_opt_film", "gap_res"), ("homo_film", "homo_res"), ("lumo_film", "lumo_res")):
        record = json.loads((REPO / "models" / protocol / f"{model}.json").read_text())
        for r in record["residuals"]:
            if r.get("representation") == "polymer":
                out.setdefault(r["name"], {})[column] = r["loo_ev"] - r["measured_ev"]
    return pd.DataFrame.from_dict(out, orient="index")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--protocol", default=Config.of({}).protocol_id)
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--limit", type=int, default=0, help="first N polymers only (0: all)")
    parser.add_argument("--threshold", type=float, default=35.0, help="twist threshold for the split [degrees]")
    args = parser.parse_args(argv)
    table = longest_oligomers(args.protocol)
    if args.limit:
        table = table.head(args.limit)
    with ProcessPoolExecutor(max_workers=args.jobs) as pool:
        results = list(pool.map(twist_of, table["smiles"], table["unit"]))
    table["twists"] = [r[0] for r in results]
    table["mean_twist"] = [float(np.mean(t)) if t else np.nan for t in table["twists"]]
    table["max_twist"] = [float(np.max(t)) if t else np.nan for t in table["twists"]]
    table["bonds"] = [len(t) for t in table["twists"]]
    table["wall_s"] = [r[1] for r in results]
    table = table.join(residuals(args.protocol), on="name")
    cols = ["name", "n", "bonds", "mean_twist", "max_twist", "gap_res", "homo_res", "lumo_res", "wall_s"]
    with pd.option_context("display.width", 200, "display.max_colwidth", 34):
        print(table[cols].sort_values("mean_twist").to_string(index=False, float_format=lambda x: f"{x:.2f}"))
    print()
    for res in ("gap_res", "homo_res", "lumo_res"):
        ok = table[["mean_twist", res]].dropna()
        rho = spearmanr(ok["mean_twist"], ok[res]).statistic if len(ok) > 2 else np.nan
        hi, lo = ok[ok["mean_twist"] > args.threshold][res], ok[ok["mean_twist"] <= args.threshold][res]
        print(f"{res:8s} n={len(ok):2d}  Spearman(mean twist, residual) {rho:+.2f};  mean residual twist > "
              f"{args.threshold:g}°: {hi.mean():+.3f} eV (n={len(hi)}), ≤ {args.threshold:g}°: {lo.mean():+.3f} eV "
              f"(n={len(lo)})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
