"""Cost of one polymer candidate: its oligomer series n = 1 … N through structures and electronic.

Usage (from the repository root)::

    .venv/bin/python benchmarks/polymer_cost.py [--smiles '[*]…[*]'] [--n-max 4] [--geometry xtb]

The default repeat unit is a benzodithiophene–benzothiadiazole donor–acceptor copolymer written with
hexyl side chains (truncated to methyl by the structures stage, as in a run). Every oligomer goes through
the default protocol exactly as in the workflow, on one core (OMP_NUM_THREADS=1): conformers, force
field and xTB ranking (:func:`screen.structures.build_structure`), then the neutral, cation and anion in
the gas phase and in the ε = 3.5 continuum with the frontier integrals
(:func:`screen.electronic.vertical_levels`). Prints atoms, conformers and seconds per n, the total, and
the ratio to the 10-minute target of issue 12, then one ``key=value`` line. No assertion: timings depend
on the machine and its load (printed).
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

import pandas as pd  # noqa: E402

from screen.config import Config  # noqa: E402
from screen.electronic import molecule_numbers_positions, vertical_levels  # noqa: E402
from screen.prepare.polymers import PolymerOptions, oligomer_table, truncation_min_carbons  # noqa: E402

DEFAULT = "[*]c1cc2c(OCCCCCC)c3cc(-c4ccc([*])c5nsnc45)sc3c(OCCCCCC)c2s1"
TARGET_S = 600.0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--smiles", default=DEFAULT)
    parser.add_argument("--n-max", type=int, default=4)
    parser.add_argument("--geometry", choices=["ff", "xtb"], default=None,
                        help="structures.geometry of the protocol (default: the default protocol's; xtb: the shipped "
                             "xTB-geometry protocol, tblite-gfn2-xtb-3ce6def9)")
    args = parser.parse_args()
    from screen.structures import build_structure

    overrides = {"polymer": {"n_max": args.n_max}}
    if args.geometry:  # xtb: the shipped xTB-geometry protocol, which keeps the earlier embedding rule
        overrides["structures"] = {"geometry": args.geometry,
                                   **({"rigid_embedding": "cycle_rank"} if args.geometry == "xtb" else {})}
    cfg = Config.of(overrides)
    engine = cfg.electronic.make_engine()
    eps = cfg.electronic.film_epsilon
    print(f"cpus={os.cpu_count()} load={os.getloadavg()} protocol={cfg.protocol_id}")
    total, parts = 0.0, []
    # the series a run builds: the atom limit counts the oligomer after side-chain truncation
    manifest = pd.DataFrame({"id": ["p"], "key": ["p"], "smiles": [args.smiles], "status": ["ok"],
                             "representation": ["polymer"]})
    table = oligomer_table(manifest, PolymerOptions.from_mapping(cfg["polymer"]),
                           truncation_min_carbons(cfg["structures"]))
    series = list(zip(table["n"], table["smiles"]))
    for n, smi in series:
        t0 = time.perf_counter()
        mol, info = build_structure(smi, cfg.structures)
        t1 = time.perf_counter()
        z, pos = molecule_numbers_positions(mol)
        raw = vertical_levels(z, pos, engine, film_epsilon=eps)
        t2 = time.perf_counter()
        total += t2 - t0
        parts.append(f"n{n}_s={t2 - t0:.1f}")
        print(f"n={n}: {len(z):4d} atoms, {info.get('n_conformers', '?')} conformers, structures {t1 - t0:6.1f} s, "
              f"electronic {t2 - t1:6.1f} s, gap {raw['xtb_gap_ev']:.3f} eV, IP {raw['xtb_ip_ev']:.3f} eV, "
              f"IP(film) {raw['xtb_ip_film_ev']:.3f} eV")
    print(f"total {total:.1f} s for n = 1…{series[-1][0]} ({total / TARGET_S:.2f} of the 10-minute target); "
          f"load after {os.getloadavg()}")
    print(f"total_s={total:.1f} target_s={TARGET_S:.0f} ratio={total / TARGET_S:.2f} " + " ".join(parts))


if __name__ == "__main__":
    main()
