"""Benchmark: would pooling two embeddings make the kept conformer less seed-dependent, and at what cost?

``conformer_seeds.py`` shows that the kept conformer of some molecules depends on
the ETKDG seed (raw orbital gap RMS change 0.059 eV over 92 reference molecules,
up to 0.38 eV). This script measures a candidate route for the next protocol,
without changing the shipped one: embed with two seeds, pool the force-field
optimised conformers, and rank the lowest ``ranked_count`` of the pool (within the
force-field window) with GFN2-xTB exactly as the default route does — the same
number of xTB single points, twice the embedding and force-field work.

For the same molecules as ``conformer_seeds.py`` it computes the kept conformer of

* the default route with seed A and with seed B (single embeddings), and
* the pooled route with seeds (A, B) and with seeds (C, D),

and prints the RMS seed-to-seed change of the kept HOMO / LUMO / gap for both
routes, how often each changes the gap by more than 0.05 eV, the mean xTB energy of
the kept conformer relative to the lowest found anywhere (lower = a more converged
search), and the wall time of each route.

Usage::

    .venv/bin/python benchmarks/conformer_pooling.py [--jobs 2] [--limit N] [--save f.json | --load f.json]
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "benchmarks"))

from conformer_seeds import collect  # noqa: E402

SEEDS = (61453, 20261202, 7, 1234577)  # A (the default), B, C, D


def _embedded(smiles: str, seed: int):
    """(mol_h, [(ff energy, conformer id)], atomic numbers) of one seeded embedding of the default route."""
    from dataclasses import replace

    from rdkit import Chem

    from screen.options import StructureOptions
    from screen.structures import _sane_conformers, conformer_count, truncate_side_chains

    opts = replace(StructureOptions(), seed=seed)
    mol = Chem.MolFromSmiles(smiles)
    mol, _ = truncate_side_chains(mol, opts.truncate_min_carbons)
    mol_h = Chem.AddHs(mol)
    ids, _, _, energies = _sane_conformers(mol_h, conformer_count(mol, opts), opts)
    energies = energies if energies is not None else [0.0] * len(ids)
    return mol_h, list(zip(energies, ids)), np.array([a.GetAtomicNum() for a in mol_h.GetAtoms()])


def _rank(pool, engine, n_keep: int, window: float, cache: dict, sp_s: list):
    """Kept conformer of a pool [(ff energy, key, mol_h, cid, z)] as [xTB energy, HOMO, LUMO] [Eh, eV, eV],
    and the number of single points the route needs."""
    from screen.constants import BOHR_ANGSTROM, HARTREE_EV

    pool = sorted(pool, key=lambda t: (t[0], t[1]))
    e_min = pool[0][0]
    chosen = [t for t in pool if t[0] - e_min <= window][:n_keep]
    best = None
    for _, key, mol_h, cid, z in chosen:
        if key not in cache:
            t = time.perf_counter()
            sp = engine.singlepoint(z, mol_h.GetConformer(cid).GetPositions() / BOHR_ANGSTROM)
            sp_s.append(time.perf_counter() - t)
            homo, lumo = sp.frontier_eh()
            cache[key] = [sp.energy_eh, homo * HARTREE_EV, lumo * HARTREE_EV]
        if best is None or cache[key][0] < best[0] - 1e-9:
            best = cache[key]
    return best, len(chosen) if len(chosen) > 1 else 0


def _one(item):
    from rdkit import RDLogger

    from screen.engines import make_engine
    from screen.options import StructureOptions
    from screen.structures import ranked_count

    RDLogger.DisableLog("rdApp.*")
    name, smiles = item
    engine = make_engine("tblite", "GFN2-xTB")
    opts = StructureOptions()
    out = {"name": name, "smiles": smiles}
    try:
        emb, embed_s = {}, {}
        for seed in SEEDS:
            t = time.perf_counter()
            emb[seed] = _embedded(smiles, seed)
            embed_s[seed] = time.perf_counter() - t
    except Exception as exc:  # noqa: BLE001 - reported, not fatal
        out["error"] = str(exc)
        return out
    n_keep = ranked_count(len(emb[SEEDS[0]][2]), opts)
    cache: dict = {}
    sp_s: list = []

    def pool(*seeds):
        return [(e, (s, cid), emb[s][0], cid, emb[s][2]) for s in seeds for e, cid in emb[s][1]]

    n_sp = {}
    for label, seeds in (("single_a", SEEDS[:1]), ("single_b", SEEDS[1:2]), ("pooled_ab", SEEDS[:2]),
                         ("pooled_cd", SEEDS[2:])):
        out[label], n_sp[label] = _rank(pool(*seeds), engine, n_keep, opts.ff_window_kcal_mol, cache, sp_s)
        out[label + "_embed_s"] = sum(embed_s[s] for s in seeds)
    mean_sp = float(np.mean(sp_s)) if sp_s else 0.0
    for label, n in n_sp.items():
        out[label + "_s"] = out[label + "_embed_s"] + n * mean_sp
    out["lowest_eh"] = min(v[0] for v in cache.values()) if cache else out["single_a"][0]
    return out


def main(argv=None) -> int:
    results = collect(argv, _one, __doc__.split("\n")[0])
    good = [r for r in results if "error" not in r]

    def diff(a, b):
        x, y = np.array([r[a] for r in good]), np.array([r[b] for r in good])
        d = np.column_stack([x[:, 1] - y[:, 1], x[:, 2] - y[:, 2], (x[:, 2] - x[:, 1]) - (y[:, 2] - y[:, 1])])
        return np.sqrt(np.mean(d**2, axis=0)), int(np.sum(np.abs(d[:, 2]) > 0.05))

    print(f"\n{len(good)} molecules; RMS seed-to-seed change of the kept HOMO / LUMO / gap [eV], count |Δgap| > 0.05 eV:")
    for label, (a, b) in (("default route (seed A vs B)", ("single_a", "single_b")),
                          ("pooled route (A+B vs C+D)", ("pooled_ab", "pooled_cd"))):
        rms, n_big = diff(a, b)
        print(f"  {label:28s} {rms[0]:.3f} / {rms[1]:.3f} / {rms[2]:.3f}   {n_big}")
    for label in ("single_a", "single_b", "pooled_ab", "pooled_cd"):
        above = np.array([(r[label][0] - r["lowest_eh"]) * 627.5095 for r in good])
        cost = np.array([r[label + "_s"] for r in good])
        print(f"  {label:10s} kept conformer above the lowest found: mean {above.mean():.2f}, max {above.max():.2f} "
              f"kcal/mol; route time (embedding + own single points) {cost.sum():.0f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
