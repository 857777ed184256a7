"""Benchmark: would xTB-optimised geometries for every molecule calibrate better, and at what cost?

The default route keeps the MMFF94 geometry of the xTB-lowest conformer (fullerene
cages aside, :mod:`screen.cage`). This script recomputes every *molecule* row of
the shipped reference raw values (``models/<protocol-id>/reference_raw.csv``;
polymers keep their force-field oligomer series) with ``structures.geometry=xtb``
(GFN2-xTB optimisation, ASE L-BFGS) and the default ΔSCF, refits the whole
calibration on the mixed table, and prints

* the xTB optimisation cost per molecule by size (wall seconds, one core) and the
  molecules whose optimisation fails (a structure check rejects the result);
* the LOO MAE of every model over all rows, and over the molecule rows present in
  both fits, by family, force-field route → xTB route.

It answers a question for a protocol decision; it does not change the shipped
models. A consistent switch would also need the polymers' oligomer series on xTB
geometries (minutes per 150–250-atom oligomer).

Usage::

    .venv/bin/python benchmarks/geometry_route.py [--jobs 2] [--save raw.jsonl | --load raw.jsonl]
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

from screen.calibrate import fit_all, read_reference  # noqa: E402
from screen.config import Config  # noqa: E402
from screen.constants import BOHR_ANGSTROM  # noqa: E402
from screen.electronic import vertical_levels  # noqa: E402
from screen.options import StructureOptions  # noqa: E402
from screen.structures import build_structure  # noqa: E402

MODELS = ("ip", "ea", "gap_opt", "homo_film", "lumo_film", "gap_opt_film")
SIZE_BINS = ((0, 40), (40, 80), (80, 120), (120, 400))


def xtb_route(job: tuple[str, str]) -> dict:
    """Raw values of one molecule on its xTB-optimised geometry (or the failure)."""
    name, smiles = job
    cfg = Config.of({})
    electronic = cfg.electronic
    start = time.perf_counter()
    try:
        mol, _ = build_structure(smiles, StructureOptions(geometry="xtb"))
        numbers = [a.GetAtomicNum() for a in mol.GetAtoms()]
        values = vertical_levels(numbers, mol.GetConformer().GetPositions() / BOHR_ANGSTROM,
                                 electronic.make_engine(), film_epsilon=electronic.film_epsilon)
    except Exception as exc:  # a failed molecule is reported, the others go on
        return {"name": name, "smiles": smiles, "error": str(exc)[:200]}
    return {"name": name, "smiles": smiles, "wall_s": time.perf_counter() - start, "n_atoms": len(numbers),
            **{k: v for k, v in values.items() if k.startswith("xtb_")}}


def molecule_errors(models: dict, name: str, skip: set[str]) -> dict:
    return {(r["name"], r.get("family"), round(r["measured_ev"], 3)): r["loo_ev"] - r["measured_ev"]
            for r in models[name]["residuals"]
            if r.get("representation", "molecule") != "polymer" and r["name"] not in skip}


def computed_records(work, molecules: pd.DataFrame, jobs: int, save=None, load=None) -> list[dict]:
    """``work((name, smiles))`` of every molecule in ``jobs`` processes, or the records saved by an earlier run
    (``load``); written as JSON lines to ``save`` when given. Shared with ``ipea_method.py``."""
    if load:
        return [json.loads(line) for line in open(load)]
    with ProcessPoolExecutor(jobs) as pool:
        records = list(pool.map(work, zip(molecules["name"], molecules["smiles"])))
    if save:
        Path(save).write_text("".join(json.dumps(r) + "\n" for r in records))
    return records


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--save", help="write the xTB-route raw values (JSON lines) here")
    parser.add_argument("--load", help="read the xTB-route raw values from here instead of computing them")
    args = parser.parse_args(argv)
    cfg = Config.of({})
    sets = read_reference(cfg["calibration"]["reference"])
    raw = pd.read_csv(REPO / "models" / cfg.protocol_id / "reference_raw.csv", keep_default_na=False, na_values=[""])
    molecules = raw[(raw["representation"] != "polymer") & raw["status"].eq("ok")]
    records = computed_records(xtb_route, molecules, args.jobs, args.save, args.load)
    table, failed = raw.copy(), {r["name"] for r in records if "error" in r}
    for rec in records:
        rows = table.index[table["smiles"] == rec["smiles"]]
        if "error" in rec:
            table.loc[rows, "status"] = "failed"
            continue
        for key, value in rec.items():
            if key.startswith("xtb_") and key in table.columns:
                table.loc[rows, key] = value
    ok = [r for r in records if "wall_s" in r]
    wall, atoms = np.array([r["wall_s"] for r in ok]), np.array([r["n_atoms"] for r in ok])
    print(f"{len(records)} molecules on the xTB route: {len(failed)} failed ({', '.join(sorted(failed)) or '-'}); "
          f"structure + ΔSCF wall [s] per molecule, one core:")
    for lo, hi in SIZE_BINS:
        m = (atoms >= lo) & (atoms < hi)
        if m.any():
            print(f"  {lo:3d}-{hi:3d} atoms: n={int(m.sum()):3d} median {np.median(wall[m]):6.1f}  max {wall[m].max():6.1f}")
    print(f"  total {wall.sum() / 60:.1f} min")
    fits = {"force field": fit_all(sets, raw), "xTB (molecules)": fit_all(sets, table)}
    print("\nLOO MAE [eV], all rows: " + "; ".join(
        f"{m} {fits['force field'][m]['loo_mae_ev']:.3f} -> {fits['xTB (molecules)'][m]['loo_mae_ev']:.3f}"
        for m in MODELS))
    print("molecule rows in both fits, LOO MAE [eV] force field -> xTB, by family (n):")
    for m in MODELS:
        a, b = (molecule_errors(fits[t], m, failed) for t in fits)
        keys = sorted(set(a) & set(b))
        fam: dict[str, list[tuple[float, float]]] = {}
        for key in keys:
            fam.setdefault(key[1], []).append((abs(a[key]), abs(b[key])))
        both = np.array([(abs(a[k]), abs(b[k])) for k in keys])
        print(f"  {m:13s} n={len(keys):3d} {both[:, 0].mean():.3f} -> {both[:, 1].mean():.3f} | " + "; ".join(
            f"{f} {np.mean([x for x, _ in v]):.2f}->{np.mean([y for _, y in v]):.2f} ({len(v)})"
            for f, v in sorted(fam.items())))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
