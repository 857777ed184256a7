"""Benchmark: the conformer part of σ — is the orbital proxy sound, and does it tell molecules apart?

:mod:`screen.conformer_spread` gives each molecule the Boltzmann-weighted spread of
its frontier orbital energies over the conformers the structures stage ranked
(free: the ranking single points hold them) and lends the ΔSCF IP/EA the spread of
−ε_HOMO/−ε_LUMO. This script checks that proxy and shows the effect:

1. for reference molecules from rigid to floppy, every ranked conformer (the
   default route: ETKDGv3 + MMFF94, the lowest ``ranked_count`` within the
   force-field window) gets the full gas-phase ΔSCF (neutral, cation, anion);
   printed per molecule: the spread of −ε_HOMO and of the ΔSCF IP, of −ε_LUMO and
   of the EA, of the orbital gap [eV], and over all conformers of all molecules the
   least-squares slope of ΔIP on −Δε_HOMO and ΔEA on −Δε_LUMO (deviations from each
   molecule's kept conformer; a slope near 1 supports the proxy);
2. the kept conformer's raw row (with the film-phase ΔSCF) through the shipped
   calibration, σ of film HOMO/LUMO/optical gap without and with the spread.

Usage::

    .venv/bin/python benchmarks/conformer_spread.py [--jobs 2]
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

from screen.calibrate import apply_models, load_models  # noqa: E402
from screen.config import Config  # noqa: E402
from screen.conformer_spread import SPREAD_COLUMNS, boltzmann_rms  # noqa: E402
from screen.constants import BOHR_ANGSTROM, HARTREE_EV  # noqa: E402

#: (name as in the reference sets, SMILES): rigid controls first, then molecules with free torsions
MOLECULES = [
    ("pentacene", "c1ccc2cc3cc4cc5ccccc5cc4cc3cc2c1"),
    ("rubrene", "c1ccc(-c2c3ccccc3c(-c3ccccc3)c3c(-c4ccccc4)c4ccccc4c(-c4ccccc4)c23)cc1"),
    ("2,2':5',2''-terthiophene", "c1csc(-c2ccc(-c3cccs3)s2)c1"),
    ("alpha-quinquethiophene", "c1csc(-c2ccc(-c3ccc(-c4ccc(-c5cccs5)s4)s3)s2)c1"),
    ("alpha-sexithiophene", "c1csc(-c2ccc(-c3ccc(-c4ccc(-c5ccc(-c6cccs6)s5)s4)s3)s2)c1"),
    ("triphenylamine", "c1ccc(N(c2ccccc2)c2ccccc2)cc1"),
    ("L1", "OC(=O)C(C#N)=Cc1ccc(-c2ccc(N(c3ccccc3)c3ccccc3)cc2)s1"),
    ("D5", "OC(=O)C(C#N)=Cc1ccc(C=Cc2ccc(N(c3ccccc3)c3ccccc3)cc2)s1"),
    ("DPP(TBFu)2", "CN1C(=O)C2=C(c3ccc(-c4ccc(-c5cc6ccccc6o5)s4)s3)N(C)C(=O)C2=C1c1ccc(-c2ccc(-c3cc4ccccc4o3)s2)s1"),
    ("DCV5T-Me(3,3)", "CC1=C(C=C(C#N)C#N)SC(=C1)c1ccc(-c2sc(-c3ccc(-c4sc(C=C(C#N)C#N)cc4C)s3)cc2C)s1"),
]


def _one(item):
    from screen.electronic import ElectronicOptions, vertical_levels
    from screen.options import StructureOptions
    from screen.structures import _prefilter, _sane_conformers, conformer_count, ranked_count
    from rdkit import Chem

    name, smiles = item
    start = time.perf_counter()
    opts = StructureOptions()
    mol = Chem.MolFromSmiles(smiles)
    mol_h = Chem.AddHs(mol)
    numbers = np.array([a.GetAtomicNum() for a in mol_h.GetAtoms()])
    ids, _, _, ff_e = _sane_conformers(mol_h, conformer_count(mol, opts), opts)
    ranked = _prefilter(ids, ff_e, ranked_count(len(numbers), opts), opts)
    engine = ElectronicOptions().make_engine()
    rows = []
    for cid in ranked:
        pos = mol_h.GetConformer(cid).GetPositions() / BOHR_ANGSTROM
        lv = vertical_levels(numbers, pos, engine, film_epsilon=None)
        rows.append({"name": name, "conf": cid, "energy_eh": lv["xtb_energy_eh"], "ip": lv["xtb_ip_ev"],
                     "ea": lv["xtb_ea_ev"], "homo": lv["xtb_homo_ev"], "lumo": lv["xtb_lumo_ev"],
                     "gap": lv["xtb_gap_ev"]})
    conf = pd.DataFrame(rows)
    kept = int(conf["energy_eh"].idxmin())
    pos = mol_h.GetConformer(int(conf.loc[kept, "conf"])).GetPositions() / BOHR_ANGSTROM
    raw = vertical_levels(numbers, pos, engine, film_epsilon=3.5)
    return name, smiles, conf, raw, len(numbers), time.perf_counter() - start


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--jobs", type=int, default=2)
    args = ap.parse_args(argv)
    with ProcessPoolExecutor(args.jobs) as pool:
        results = list(pool.map(_one, MOLECULES))

    print(f"{'molecule':28s} {'atoms':>5s} {'conf':>4s}  {'s(-eH)':>7s} {'s(IP)':>7s}  {'s(-eL)':>7s} {'s(EA)':>7s}"
          f"  {'s(gap)':>7s} {'wall s':>7s}")
    dev, raws = [], []
    for name, smiles, conf, raw, n_atoms, wall in results:
        e = conf["energy_eh"].to_numpy()
        s = {q: boltzmann_rms(e, sign * conf[q].to_numpy())
             for q, sign in (("homo", -1), ("ip", 1), ("lumo", -1), ("ea", 1), ("gap", 1))}
        print(f"{name:28s} {n_atoms:5d} {len(conf):4d}  {s['homo']:7.3f} {s['ip']:7.3f}  {s['lumo']:7.3f} "
              f"{s['ea']:7.3f}  {s['gap']:7.3f} {wall:7.0f}")
        k = conf.loc[conf["energy_eh"].idxmin()]
        dev.append(pd.DataFrame({"d_eh": -(conf["homo"] - k["homo"]), "d_ip": conf["ip"] - k["ip"],
                                 "d_el": -(conf["lumo"] - k["lumo"]), "d_ea": conf["ea"] - k["ea"]}))
        spread = {SPREAD_COLUMNS[q]: boltzmann_rms(e, conf[q].to_numpy()) for q in ("homo", "lumo", "gap")}
        raws.append({"id": name, "smiles": smiles, "status": "ok", "representation": "molecule", **raw, **spread})
    d = pd.concat(dev, ignore_index=True)
    d = d[(d["d_eh"].abs() > 1e-6) | (d["d_el"].abs() > 1e-6)]

    def slope(x, y):
        return float(np.sum(x * y) / np.sum(x * x)) if np.sum(x * x) > 0 else float("nan")

    print(f"\nover {len(d)} conformers that differ from their molecule's kept one:")
    print(f"  slope dIP on -d(eps_HOMO) {slope(d['d_eh'], d['d_ip']):.2f}, "
          f"r {np.corrcoef(d['d_eh'], d['d_ip'])[0, 1]:.2f}; "
          f"RMS dIP {np.sqrt(np.mean(d['d_ip'] ** 2)):.3f} vs -d(eps_HOMO) {np.sqrt(np.mean(d['d_eh'] ** 2)):.3f} eV")
    print(f"  slope dEA on -d(eps_LUMO) {slope(d['d_el'], d['d_ea']):.2f}, "
          f"r {np.corrcoef(d['d_el'], d['d_ea'])[0, 1]:.2f}; "
          f"RMS dEA {np.sqrt(np.mean(d['d_ea'] ** 2)):.3f} vs -d(eps_LUMO) {np.sqrt(np.mean(d['d_el'] ** 2)):.3f} eV")

    cfg = Config.of({})
    models = load_models(REPO / "models" / cfg.protocol_id, cfg)
    frame = pd.DataFrame(raws)
    with_spread = apply_models(frame, models)
    without = apply_models(frame.drop(columns=list(SPREAD_COLUMNS.values())), models)
    print(f"\nσ of the calibrated film levels [eV], without -> with the conformer spread ({cfg.protocol_id}):")
    print(f"{'molecule':28s} {'HOMO':>13s} {'LUMO':>13s} {'gap_opt':>13s}")
    for i, name in enumerate(frame["id"]):
        cells = [f"{without.loc[i, c]:.3f}->{with_spread.loc[i, c]:.3f}"
                 for c in ("homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev")]
        print(f"{name:28s} " + " ".join(f"{c:>13s}" for c in cells))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
