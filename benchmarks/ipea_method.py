"""Benchmark: would the xTB variant parametrised for ionisation potentials calibrate the gas IP/EA better?

IPEA1-xTB (Ásgeirsson, Bauer, Grimme [1]_) is a GFN1-type Hamiltonian with an extra
diffuse s function, fitted to vertical IPs and EAs; tblite offers it
(``electronic.method=IPEA1-xTB``). The default protocol takes the ΔSCF IP/EA from
GFN2-xTB, and its EA model is the one gas-phase model still off its target (the
strongly bound cyano anions, TCNE and TCNQ, come out ≈ 0.85 eV too weakly bound).
This script asks whether IPEA1-xTB's ΔSCF is the better raw feature, on the same
geometry:

* every molecule of the gas-phase IP and EA reference sets is built by the default
  structure route (:func:`screen.structures.build_structure`, force field);
* the ΔSCF vertical IP/EA is computed on that geometry with GFN2-xTB and with
  IPEA1-xTB (:func:`screen.electronic.vertical_levels`, the nitrogen lone-pair
  rule applied with each method's own orbitals);
* each method's values replace the shipped raw IP/EA columns and the IP and EA
  models are refitted (:func:`screen.calibrate.fit_all`: feature choice, class
  terms and LOO as shipped); the LOO MAE of both and the largest IPEA1 residuals
  are printed.

It answers a protocol question; it does not change the shipped models.

References
----------
.. [1] V. Ásgeirsson, C. A. Bauer, S. Grimme, Chem. Sci. 8 (2017) 4879.
   :doi:`10.1039/c7sc00601b`

Usage::

    .venv/bin/python benchmarks/ipea_method.py [--jobs 2] [--save raw.jsonl | --load raw.jsonl]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from geometry_route import computed_records  # noqa: E402
from screen.calibrate import fit_all, read_reference  # noqa: E402
from screen.config import Config  # noqa: E402
from screen.constants import BOHR_ANGSTROM  # noqa: E402
from screen.electronic import vertical_levels  # noqa: E402
from screen.engines import make_engine  # noqa: E402
from screen.options import StructureOptions  # noqa: E402
from screen.structures import build_structure  # noqa: E402

METHODS = ("GFN2-xTB", "IPEA1-xTB")
MODELS = ("ip", "ea")


def both_methods(job: tuple[str, str]) -> dict:
    """Gas ΔSCF IP/EA of one molecule with each method on one force-field geometry (or the failure)."""
    name, smiles = job
    start = time.perf_counter()
    try:
        mol, _ = build_structure(smiles, StructureOptions())
        numbers = [a.GetAtomicNum() for a in mol.GetAtoms()]
        pos = mol.GetConformer().GetPositions() / BOHR_ANGSTROM
        out = {}
        for method in METHODS:
            values = vertical_levels(numbers, pos, make_engine("tblite", method), film_epsilon=None)
            out[method] = {k: float(values[k]) for k in ("xtb_ip_ev", "xtb_ea_ev", "xtb_lone_pair_shift_ev")}
    except Exception as exc:  # a failed molecule is reported, the others go on
        return {"name": name, "smiles": smiles, "error": str(exc)[:200]}
    return {"name": name, "smiles": smiles, "wall_s": time.perf_counter() - start, **out}


def refit(sets: dict, raw: pd.DataFrame, records: list[dict], method: str) -> dict:
    """IP and EA models refitted with ``method``'s ΔSCF values in place of the shipped raw columns."""
    table = raw.copy()
    for rec in records:
        rows = table.index[table["smiles"] == rec["smiles"]]
        if "error" in rec:
            table.loc[rows, "status"] = "failed"
            continue
        for key in ("xtb_ip_ev", "xtb_ea_ev"):
            table.loc[rows, key] = rec[method][key]
    models = fit_all(sets, table)
    return {m: models[m] for m in MODELS}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--save", help="write the computed values (JSON lines) here")
    parser.add_argument("--load", help="read the computed values from here instead of computing them")
    args = parser.parse_args(argv)
    cfg = Config.of({})
    sets = read_reference(cfg["calibration"]["reference"])
    raw = pd.read_csv(REPO / "models" / cfg.protocol_id / "reference_raw.csv", keep_default_na=False, na_values=[""])
    names = set(sets["ip"]["name"]) | set(sets["ea"]["name"])
    molecules = raw[raw["name"].isin(names) & raw["status"].eq("ok") & raw["representation"].ne("polymer")]
    records = computed_records(both_methods, molecules, args.jobs, args.save, args.load)
    failed = sorted(r["name"] for r in records if "error" in r)
    wall = sum(r.get("wall_s", 0.0) for r in records)
    print(f"{len(records)} gas-phase reference molecules, protocol {cfg.protocol_id} structures; failed: "
          f"{', '.join(failed) or '-'}; {wall / 60:.1f} min of structure + ΔSCF (both methods)")
    fits = {method: refit(sets, raw, records, method) for method in METHODS}
    for m in MODELS:
        print(f"{m}: LOO MAE [eV] " + "; ".join(
            f"{method} {fits[method][m]['loo_mae_ev']:.3f} (n={fits[method][m]['n']}, features "
            f"{'+'.join(fits[method][m]['model']['features'])})" for method in METHODS))
        res = {method: {r["name"]: r["loo_ev"] - r["measured_ev"] for r in fits[method][m]["residuals"]}
               for method in METHODS}
        worst = sorted(res[METHODS[1]], key=lambda n: -abs(res[METHODS[1]][n]))[:8]
        print("  largest IPEA1-xTB LOO errors [eV] (GFN2-xTB beside): " + "; ".join(
            f"{n} {res[METHODS[1]][n]:+.2f} ({res[METHODS[0]].get(n, np.nan):+.2f})" for n in worst))
    print(" ".join(f"{m}_{method.split('-')[0].lower()}_loo={fits[method][m]['loo_mae_ev']:.4f}"
                   for m in MODELS for method in METHODS))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
