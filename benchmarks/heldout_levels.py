"""Benchmark: film levels of well-known materials, each predicted by a calibration fitted without it.

For every named material of ``models/reference/levels_film.csv`` the whole
calibration is refitted on the shipped raw values with that structure left out of
every reference set (:func:`screen.devicevalidation.out_of_sample_levels`), and its
film HOMO, LUMO and optical gap are printed beside the reference values. These are
docs/method.md's "held-out checks on materials we know well".

Usage::

    .venv/bin/python benchmarks/heldout_levels.py [--raw models/<protocol-id>/reference_raw.csv] ["PM6 (PBDB-T-2F)" ...]

``--raw`` validates another shipped protocol (default: the default protocol's raw values).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from screen.calibration.reference import canonical, read_reference  # noqa: E402
from screen.devicevalidation import RAW_PATH, out_of_sample_levels, read_raw  # noqa: E402

#: default materials: polymer donors, fused-ring and fullerene acceptors
NAMES = ["PM6 (PBDB-T-2F)", "PTB7-Th (PBDTT-FTTE)", "ITIC", "Y6 (BTP-4F)", "C60", "C70",
         "ICBA (indene-C60 bisadduct)", "ICMA (indene-C60 monoadduct)", "N-methylfulleropyrrolidine"]


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("names", nargs="*", help="film-set names (default: a fixed list of well-known materials)")
    parser.add_argument("--raw", type=Path, default=RAW_PATH, help="reference_raw.csv of the protocol to validate")
    args = parser.parse_args(argv)
    names = args.names or NAMES
    raw = read_raw(args.raw)
    sets = read_reference(REPO / "models" / "reference")
    film = sets["film"].set_index("name")
    missing = [n for n in names if n not in film.index]
    if missing:
        print(f"not in levels_film.csv: {', '.join(missing)}", file=sys.stderr)
        return 2
    structures = [canonical(film.loc[n, "smiles"]) for n in names]
    levels = out_of_sample_levels(structures, raw, sets)
    print(f"held-out film levels [eV] ({args.raw.parent.name}): predicted HOMO / LUMO / gap  |  reference")
    for name, can in zip(names, structures):
        p, ref = levels.loc[can], film.loc[name]
        print(f"  {name[:30]:30s} {p['homo_ev']:6.2f} {p['lumo_ev']:6.2f} {p['gap_opt_ev']:5.2f}  |  "
              f"{float(ref['homo_ev']):6.2f} {float(ref['lumo_ev']):6.2f} {float(ref['gap_opt_ev']):5.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
