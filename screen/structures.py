"""Structures stage: SMILES → one 3D geometry per molecule.

Route (every step seeded, so the same input gives the same geometry):

1. truncation of long pendant alkyl groups (on by default; :func:`truncate_side_chains`):
   hexyl and longer groups keep their atoms up to the first branch point, with
   every branch cut to methyl, while shorter groups stay as written (a
   common-practice simplification: the chains barely change the frontier
   levels of the conjugated core but multiply the conformer space);
2. RDKit ETKDGv3 embedding of several conformers; the count grows with the
   number of rotatable bonds and is capped by size (:func:`conformer_count`), so
   100–250-atom oligomers stay affordable; a molecule with a fused ring system of 20 or
   more rings (a fullerene cage, :func:`screen.cage.rigid_embedding`) is instead
   embedded once from random coordinates, where ETKDG stalls (``rigid_embedding``);
3. MMFF94 optimisation of every conformer (UFF when MMFF lacks parameters,
   e.g. for B; when neither has parameters, e.g. aromatic Se, the chosen
   conformer is optimised with the xTB engine instead, step 6);
4. GFN2-xTB single points on the lowest few conformers by force-field energy,
   keeping the lowest by xTB energy: conformers more than ``ff_window_kcal_mol``
   above the lowest force-field energy are dropped before any xTB call, and at
   most :func:`ranked_count` are ranked (fewer for big molecules; one, and no
   ranking single point, from ``rank_atom_budget`` atoms on); the size caps act
   only from ``size_caps_min_atoms`` atoms (150 by default: polymer oligomers),
   and the ranking runs at a looser SCF accuracy with the near-lowest conformers
   converged again (``rank_scf_accuracy``), each SCF started from the previous
   conformer's (``rank_warm_start``): same choice, less xTB time;
5. planar variants (``planar_variants``, opt-in; force-field route only): MMFF94
   twists conjugated single bonds between an aromatic ring and a vinyl group by 35–40°
   (styrene, stilbene: planar in the gas phase) and heteroaryl–aryl bonds of
   donor–acceptor chromophores by 40–60°, where GFN2-xTB optimisations keep them within
   1–20° (reference set, :func:`planar_variants`). Copies of the chosen conformer with those
   bonds held within ``planar_tolerances_deg`` of planar by a restrained MMFF94
   optimisation are ranked beside it, and the lowest by xTB energy is kept: the force
   field supplies geometries, xTB chooses, as in step 4 (two restraint widths, 5° and 25°:
   for the end groups of fused-ring acceptors GFN2-xTB prefers 15–35° to planar). Off by
   default: recomputed on the reference set it lowers every film LOO error but not the
   device errors on computed levels (``benchmarks/planar_variants.py``); a protocol with it
   needs its own reference calibration;
6. optional (``geometry="xtb"``) GFN2-xTB optimisation of that conformer with
   ASE's L-BFGS optimiser and the engine's ASE calculator.
   A closed carbon cage (a fullerene or its adduct, :mod:`screen.cage`) is always
   optimised so (``cage_geometry="xtb"``, the default): MMFF94 leaves it without bond
   alternation.

Between steps 3 and 4 every conformer is checked against the input graph
(:func:`screen.sanity.geometry_problems`: bond lengths against covalent radii,
fused atoms, ring count); broken ones never reach xTB, and when all are
broken the molecule is embedded again with another seed. A structure that
stays broken (or breaks in step 5) fails the row with the reason in words.

References
----------
.. [1] S. Wang, J. Witek, G. A. Landrum, S. Riniker, "Improving conformer
   generation for small rings and macrocycles based on distance geometry and
   experimental torsional-angle preferences", J. Chem. Inf. Model. 60 (2020)
   2044. :doi:`10.1021/acs.jcim.0c00025` (ETKDGv3)
.. [2] T. A. Halgren, "Merck molecular force field. I.", J. Comput. Chem. 17
   (1996) 490. :doi:`10.1002/(SICI)1096-987X(199604)17:5/6<490::AID-JCC1>3.0.CO;2-P`
.. [3] C. Bannwarth, S. Ehlert, S. Grimme, J. Chem. Theory Comput. 15 (2019)
   1652. :doi:`10.1021/acs.jctc.8b01176`
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import asdict, replace
from pathlib import Path

import numpy as np
import pandas as pd
from rdkit import Chem, RDLogger
from rdkit.Chem import AllChem, rdMolDescriptors, rdMolTransforms

from screen.batch import molecule_caller, run_journalled
from screen.cage import closed_cage, rigid_embedding, rigid_rules_agree
from screen.columns import CONFORMER_SPREAD_COLUMNS
from screen.conformer_spread import RANKING_KEY, ranking_of, spread_columns
from screen.constants import BOHR_ANGSTROM
from screen.engines import SCF_LADDER, Engine, EngineError, make_engine
from screen.io import Journal, Progress, atomic_path, write_csv
from screen.options import EARLIER_PROTOCOL_VALUES, StructureOptions
from screen.sanity import BrokenStructureError, geometry_problems

__all__ = [
    "StructureOptions",
    "conformer_count",
    "ranked_count",
    "truncate_side_chains",
    "build_structure",
    "planar_variants",
    "run_structures",
    "read_structures",
    "ranking_engine",
    "structure_record",
    "status_row",
    "write_structures",
    "STATUS_COLUMNS",
]

#: columns of the per-shard structures status table
STATUS_COLUMNS = ["key", "status", "error", "smiles_computed", "truncated_chains", "truncated_groups", "n_conformers",
                  "embedding",
                  "forcefield", "geometry", "planar_variant", "xtb_rank_energy_eh", *CONFORMER_SPREAD_COLUMNS,
                  "opt_converged", "wall_s"]


def _atom_count(mol: Chem.Mol) -> int:
    """Atoms including implicit and explicit hydrogens."""
    return sum(1 + a.GetTotalNumHs() for a in mol.GetAtoms())


def conformer_count(mol: Chem.Mol, options: StructureOptions = StructureOptions()) -> int:
    """Number of conformers to embed for ``mol``.

    ``min(conformers_max, conformers_base + conformers_per_rotor × rotatable bonds)``,
    capped by size: at most ``conformer_atom_budget / n_atoms`` (never fewer than
    two) for molecules of at least ``size_caps_min_atoms`` atoms (0: all).
    Embedding and force-field optimisation cost grows with atoms × conformers,
    and a 100–250-atom oligomer is a stiff conjugated backbone whose extra
    conformers differ in torsions of nearly equal force-field energy (a probe
    on a 137-atom oligomer: the eight lowest of 24 conformers within 0.6
    kcal/mol), so the cap keeps the stage roughly linear in size.

    Examples
    --------
    >>> conformer_count(Chem.MolFromSmiles("c1ccccc1"))
    4
    >>> conformer_count(Chem.MolFromSmiles("c1ccc(-c2ccccc2)cc1"))
    6
    >>> conformer_count(Chem.MolFromSmiles("c1ccc(-c2ccccc2)cc1"), StructureOptions(conformer_atom_budget=44))
    6
    >>> conformer_count(Chem.MolFromSmiles("c1ccc(-c2ccccc2)cc1"),
    ...                 StructureOptions(conformer_atom_budget=44, size_caps_min_atoms=0))  # cap on every molecule
    2
    """
    n_rot = rdMolDescriptors.CalcNumRotatableBonds(mol)
    by_rotors = min(options.conformers_max, options.conformers_base + options.conformers_per_rotor * n_rot)
    n_atoms = _atom_count(mol)
    if n_atoms < options.size_caps_min_atoms:
        return int(by_rotors)
    by_size = max(2, options.conformer_atom_budget // max(1, n_atoms))
    return int(min(by_rotors, by_size))


def ranked_count(n_atoms: int, options: StructureOptions = StructureOptions()) -> int:
    """How many conformers (the lowest by force-field energy) get an xTB ranking single point.

    ``min(rank_max_conformers, rank_atom_budget // n_atoms)``, at least one; below
    ``size_caps_min_atoms`` atoms the size cap does not act. A
    GFN2-xTB single point costs O(N²)–O(N³) (about 8 s at 137 atoms on one
    core in a probe), so a 250-atom oligomer gets one conformer and no ranking
    single point at all (see :func:`build_structure`).

    Examples
    --------
    >>> ranked_count(30), ranked_count(137), ranked_count(250)  # caps from 150 atoms by default
    (6, 6, 1)
    >>> [ranked_count(n, StructureOptions(size_caps_min_atoms=0)) for n in (137, 250)]  # caps on every molecule
    [2, 1]
    """
    if n_atoms < options.size_caps_min_atoms:
        return int(max(1, options.rank_max_conformers))
    return int(max(1, min(options.rank_max_conformers, options.rank_atom_budget // max(1, n_atoms))))


def _alkyl_atom(atom: Chem.Atom) -> bool:
    # acyclic, uncharged sp3 carbon: a candidate member of a saturated alkyl group
    return (atom.GetAtomicNum() == 6 and not atom.IsInRing() and not atom.GetIsAromatic()
            and atom.GetFormalCharge() == 0 and atom.GetIsotope() == 0
            and atom.GetHybridization() == Chem.HybridizationType.SP3)


def _pendant_groups(mol: Chem.Mol) -> list[tuple[int, set[int]]]:
    """Pendant saturated alkyl groups as (root atom, member atoms).

    A group is a connected set of acyclic sp3 carbons joined to the rest of the
    molecule by exactly one bond (from its root); hydrogens aside it holds
    nothing but carbon, so it is a pure alkyl substituent.
    """
    alkyl = {a.GetIdx() for a in mol.GetAtoms() if _alkyl_atom(a)}
    seen: set[int] = set()
    groups = []
    for start in sorted(alkyl):
        if start in seen:
            continue
        comp, stack = set(), [start]
        while stack:
            i = stack.pop()
            if i not in comp:
                comp.add(i)
                stack.extend(n.GetIdx() for n in mol.GetAtomWithIdx(i).GetNeighbors() if n.GetIdx() in alkyl)
        seen |= comp
        anchors = [i for i in comp for n in mol.GetAtomWithIdx(i).GetNeighbors()
                   if n.GetIdx() not in comp and n.GetAtomicNum() != 1]  # an attachment point (0) counts
        if len(anchors) == 1:
            groups.append((anchors[0], comp))
    return groups


def _kept_part(mol: Chem.Mol, root: int, comp: set[int]) -> set[int]:
    """Atoms of a group that truncation keeps: the path to its first branch point plus one carbon per branch."""
    path, prev, cur = [root], -1, root
    while True:
        children = [n.GetIdx() for n in mol.GetAtomWithIdx(cur).GetNeighbors()
                    if n.GetIdx() in comp and n.GetIdx() != prev]
        if not children:  # reached the end without a branch: a linear chain becomes methyl
            return {root}
        if len(children) > 1:  # first branch point: every branch cut to methyl
            return set(path) | set(children)
        prev, cur = cur, children[0]
        path.append(cur)


def _formula(n_c: int) -> str:
    return f"C{n_c}H{2 * n_c + 1}" if n_c > 1 else "CH3"


def truncate_side_chains(mol: Chem.Mol, min_carbons: int = 6, to_methyl: bool = False) -> tuple[Chem.Mol, list[str]]:
    """Shorten long pendant saturated alkyl groups without merging distinct short substituents.

    Only a pendant saturated alkyl group (acyclic sp3 carbons, pure hydrocarbon,
    one bond to the rest of the molecule) of at least ``min_carbons`` carbons is
    cut: it keeps its atoms up to and including its first branch point, and
    every branch there is cut to methyl. A linear chain becomes methyl
    (n-hexyl → methyl), 2-ethylhexyl and 2-octyldodecyl become 2-methylpropyl.
    Groups shorter than ``min_carbons`` stay as written, so the methyl,
    isopropyl, tert-butyl and tert-amyl versions of one molecule remain four
    different structures. Long-chain variants that differ only beyond their
    first branch point (hexyl/octyl, 2-ethylhexyl/2-butyloctyl) deliberately
    share one computed structure: that is the saving, and ``smiles_computed``
    records it.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        Molecule without explicit hydrogens.
    min_carbons : int
        Smallest group (carbon count) that is cut (6 by default: hexyl and longer).
    to_methyl : bool
        Cut every such group to methyl, branched ones too (2-ethylhexyl → methyl): the rule of
        polymer repeat units, whose reference polymers are written with methyl stubs
        (:func:`screen.prepare.polymers.methyl_side_chains`).

    Returns
    -------
    (rdkit.Chem.Mol, list of str)
        The truncated molecule and one record per cut group, e.g. ``"C8H17->C4H9"``.

    Examples
    --------
    >>> m, cuts = truncate_side_chains(Chem.MolFromSmiles("CCCCCCc1ccsc1"))
    >>> Chem.MolToSmiles(m), cuts
    ('Cc1ccsc1', ['C6H13->CH3'])
    >>> m, cuts = truncate_side_chains(Chem.MolFromSmiles("CCCCC(CC)Cn1c2ccccc2c2ccccc21"))
    >>> Chem.MolToSmiles(m), cuts
    ('CC(C)Cn1c2ccccc2c2ccccc21', ['C8H17->C4H9'])
    >>> truncate_side_chains(Chem.MolFromSmiles("CCC(C)(C)c1ccsc1"))[1]
    []
    >>> Chem.MolToSmiles(truncate_side_chains(Chem.MolFromSmiles("CCCCC(CC)Cc1cc(*)sc1*"), to_methyl=True)[0])
    '*c1cc(C)c(*)s1'

    """
    to_remove: set[int] = set()
    cuts = []
    for root, comp in _pendant_groups(mol):
        if len(comp) < min_carbons:
            continue
        keep = {root} if to_methyl else _kept_part(mol, root, comp)
        if keep == comp:
            continue
        to_remove |= comp - keep
        cuts.append(f"{_formula(len(comp))}->{_formula(len(keep))}")
    if not to_remove:
        return Chem.Mol(mol), []
    rw = Chem.RWMol(mol)
    for idx in sorted(to_remove, reverse=True):
        rw.RemoveAtom(idx)
    out = rw.GetMol()
    for atom in out.GetAtoms():
        atom.SetNoImplicit(False)
        atom.SetNumExplicitHs(0)
    Chem.SanitizeMol(out)
    Chem.AssignStereochemistry(out, cleanIt=True, force=True)  # a cut branch point is no longer a stereocentre
    return out, cuts


def _embed(mol_h: Chem.Mol, n_conf: int, options: StructureOptions) -> tuple[list[int], str]:
    """Embed conformers; returns their ids and the embedding route used."""
    if rigid_embedding(Chem.RemoveHs(mol_h), options.rigid_embedding):
        # fullerenes and other large fused systems: ETKDG's torsion terms stall for minutes on a cage and
        # fail; plain distance geometry from random coordinates embeds them in well under a second
        params = AllChem.ETDG()
        params.randomSeed = int(options.seed)
        params.useRandomCoords = True
        params.numThreads = 1
        return list(AllChem.EmbedMultipleConfs(mol_h, numConfs=1, params=params)), "ETDG-random (cage)"
    params = AllChem.ETKDGv3()
    params.randomSeed = int(options.seed)
    params.pruneRmsThresh = float(options.prune_rms_a)
    params.numThreads = 1
    ids = list(AllChem.EmbedMultipleConfs(mol_h, numConfs=n_conf, params=params))
    if ids:
        return ids, "ETKDGv3"
    params.useRandomCoords = True  # strained macrocycles: random starting coordinates
    params.maxIterations = 2000
    return list(AllChem.EmbedMultipleConfs(mol_h, numConfs=n_conf, params=params)), "ETKDGv3-random"


def _ff_optimise(mol_h: Chem.Mol, options: StructureOptions) -> tuple[str, list[float] | None]:
    """Optimise every conformer; returns the force field used and the energies [kcal/mol]."""
    if options.forcefield == "mmff" and AllChem.MMFFHasAllMoleculeParams(mol_h):
        res = AllChem.MMFFOptimizeMoleculeConfs(mol_h, numThreads=1, maxIters=options.ff_max_iters,
                                                mmffVariant="MMFF94")
        return "MMFF94", [e for _, e in res]
    if AllChem.UFFHasAllMoleculeParams(mol_h):
        res = AllChem.UFFOptimizeMoleculeConfs(mol_h, numThreads=1, maxIters=options.ff_max_iters)
        return "UFF", [e for _, e in res]
    return "none", None


def _prefilter(ids: list[int], energies: list[float] | None, n_keep: int, options: StructureOptions) -> list[int]:
    """Conformers worth an xTB single point: the lowest ``n_keep`` by force-field energy within the window.

    Conformers more than ``ff_window_kcal_mol`` above the lowest force-field
    energy are dropped before any xTB call.
    """
    if energies is None:
        return ids[:n_keep]
    order = sorted(range(len(ids)), key=lambda i: (energies[i], ids[i]))
    e_min = energies[order[0]]
    keep = [ids[i] for i in order if energies[i] - e_min <= options.ff_window_kcal_mol]
    return keep[:n_keep]


def _xtb_optimise(numbers: np.ndarray, positions_a: np.ndarray, engine: Engine,
                  options: StructureOptions) -> tuple[np.ndarray, bool]:
    from ase import Atoms
    from ase.optimize import LBFGS

    atoms = Atoms(numbers=numbers, positions=positions_a)
    atoms.calc = engine.ase_calculator()
    opt = LBFGS(atoms, logfile=None)
    converged = bool(opt.run(fmax=options.xtb_fmax_ev_a, steps=options.xtb_max_steps))
    return atoms.get_positions(), converged


def _neutral_closed_shell(mol: Chem.Mol) -> None:
    """Refuse a molecule the electronic stage would compute in a state it is not in.

    The engine computes the neutral as a closed-shell singlet and the ions as doublets; a dication given through
    the Python stage functions (``PrepareOptions(allow_charged=True)``) came out as its neutral reduced form
    (a referee's check: methyl viologen, xTB IP 8.9 eV). The prepare stage refuses these rows already; this is the
    last guard for every route.

    Examples
    --------
    >>> _neutral_closed_shell(Chem.MolFromSmiles("c1ccsc1"))
    >>> _neutral_closed_shell(Chem.MolFromSmiles("C[n+]1ccc(-c2cc[n+](C)cc2)cc1"))
    Traceback (most recent call last):
    ...
    ValueError: net charge +2: levels are computed for neutral closed-shell molecules only (the engine would compute the neutral form)
    """
    charge = Chem.GetFormalCharge(mol)
    if charge:
        raise ValueError(f"net charge {charge:+d}: levels are computed for neutral closed-shell molecules only (the "
                         "engine would compute the neutral form)")
    electrons = sum(a.GetAtomicNum() + a.GetTotalNumHs() for a in mol.GetAtoms())
    if electrons % 2 or any(a.GetNumRadicalElectrons() for a in mol.GetAtoms()):
        raise ValueError("radical or odd-electron species: levels are computed for neutral closed-shell molecules "
                         "only (the engine would compute a singlet)")


def build_structure(smiles: str, options: StructureOptions = StructureOptions(),
                    engine: Engine | None = None, *, return_singlepoint: bool = False):
    """Make the screening geometry of one molecule.

    Parameters
    ----------
    smiles : str
        Canonical SMILES of a neutral closed-shell molecule (from the prepare stage).
    options : StructureOptions
        Route settings.
    engine : Engine, optional
        Engine for conformer ranking and optional optimisation; by default
        tblite with :attr:`StructureOptions.ranking_method`.
    return_singlepoint : bool
        Also return the chosen conformer's converged ranking single point
        (:class:`screen.engines.SinglePoint`; None when nothing was ranked or the
        geometry was optimised afterwards): a start for the neutral's SCF in
        :func:`screen.electronic.vertical_levels` (``neutral_guess``) when both run
        in one process.

    Returns
    -------
    (rdkit.Chem.Mol, dict) or (rdkit.Chem.Mol, dict, SinglePoint or None)
        Molecule with hydrogens and exactly one conformer [Å], and a record of
        the route (conformer count, force field, xTB ranking energy [Eh], ...).

    Raises
    ------
    ValueError
        The SMILES does not parse or no conformer could be embedded.
    EngineError
        No conformer gave a converged xTB energy.

    Examples
    --------
    >>> mol, info = build_structure("c1ccsc1")
    >>> mol.GetNumAtoms(), info["forcefield"]
    (9, 'MMFF94')
    """
    start = time.perf_counter()
    RDLogger.DisableLog("rdApp.*")
    mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        raise ValueError(f"SMILES does not parse: {smiles!r}")
    _neutral_closed_shell(mol)
    cuts: list[str] = []
    if options.truncate_side_chains:
        mol, cuts = truncate_side_chains(mol, options.truncate_min_carbons)
    mol_h = Chem.AddHs(mol)
    numbers = np.array([a.GetAtomicNum() for a in mol_h.GetAtoms()])
    ids, embedding, ff, ff_energies = _sane_conformers(mol_h, conformer_count(mol, options), options)
    ranked = _prefilter(ids, ff_energies, ranked_count(len(numbers), options), options)
    engine = engine or make_engine("tblite", options.ranking_method)
    best_id, best_e, best_sp, ranking = _rank_by_xtb(mol_h, numbers, ranked, engine,
                                                    warm_start=options.rank_warm_start,
                                                    screen_accuracy=options.rank_scf_accuracy)
    # without force-field parameters (e.g. aromatic Se in UFF) ETKDG geometries are too crude, and MMFF94
    # leaves a fullerene cage without its bond alternation (screen.cage): optimise with the engine instead
    cage = options.cage_geometry == "xtb" and closed_cage(mol_h)
    geometry = "xtb" if ff == "none" or cage else options.geometry
    variant = ""
    if options.planar_variants and geometry == "ff" and ff == "MMFF94":
        best_id, best_sp, variant = planar_variants(mol_h, numbers, best_id, best_sp, engine,
                                                    tuple(options.planar_tolerances_deg))
        if variant:
            best_e = best_sp.energy_eh
    conf = Chem.Conformer(mol_h.GetConformer(best_id))
    conf.SetId(0)
    out = Chem.Mol(mol_h)
    out.RemoveAllConformers()
    out.AddConformer(conf, assignId=False)
    opt_converged = ""
    if geometry == "xtb":
        pos, ok = _xtb_optimise(numbers, out.GetConformer().GetPositions(), engine, options)
        c = out.GetConformer()
        for i, p in enumerate(pos):
            c.SetAtomPosition(i, p.tolist())
        opt_converged = bool(ok)
        if not ok:
            raise EngineError(f"xTB geometry optimisation did not converge in {options.xtb_max_steps} steps")
        problems = geometry_problems(out)
        if problems:
            raise BrokenStructureError(f"broken structure after the xTB optimisation: {'; '.join(problems)}")
    info = {
        "smiles_computed": Chem.MolToSmiles(mol),
        "truncated_chains": len(cuts),
        "truncated_groups": ";".join(cuts),
        "n_conformers": len(ids),
        "n_ranked": len(ranked),
        "embedding": embedding,
        "forcefield": ff,
        "geometry": geometry,
        "planar_variant": variant,
        "xtb_rank_energy_eh": best_e,
        RANKING_KEY: ranking,
        "opt_converged": opt_converged,
        "wall_s": time.perf_counter() - start,
    }
    if return_singlepoint:
        return out, info, (best_sp if geometry == "ff" else None)
    return out, info


#: the planar variants, in order: a name and the SMARTS of the conjugated single bonds (atoms 0 and 1) held near
#: planar; each set contains the one before, a variant is built only when it restrains a bond the one before did not
PLANAR_BOND_SETS = (("aryl-vinyl", ("[a]-!@[CX3]=[CX3]",)),
                    ("aryl-vinyl, five-ring biaryl", ("[a]-!@[CX3]=[CX3]", "[a;r5]-!@[a]")))
#: flat-bottom half-widths of the torsion restraints tried by default (``structures.planar_tolerances_deg``)
#: [degrees]; a copy is built for a width only when a bond of its set is twisted by more. GFN2-xTB single points on
#: restrained MMFF94 geometries fall monotonically from 30° to 5° for phenylene-vinylene chains and cyanoacrylic
#: and dicyanovinyl dyes, but for the end groups of fused-ring acceptors they are lowest at 15–35° (Y6-type 25–35°,
#: like its xTB-optimised geometry); project's own finding, benchmarks/README.md
PLANAR_TOLERANCE_DEG = 5.0
#: force constant of the torsion restraints (RDKit MMFF units) [kcal mol⁻¹ rad⁻²]
PLANAR_FORCE_CONSTANT = 100.0


def _conjugated_torsions(mol_h: Chem.Mol, smarts: tuple[str, ...]) -> dict[tuple[int, int], tuple[int, ...]]:
    """Bond (sorted atom pair) → one heavy-atom torsion (i, j, k, l) about it, for the bonds matching ``smarts``."""
    out: dict[tuple[int, int], tuple[int, ...]] = {}
    for pattern in smarts:
        for match in mol_h.GetSubstructMatches(Chem.MolFromSmarts(pattern)):
            j, k = match[0], match[1]
            bond = (min(j, k), max(j, k))
            if bond in out:
                continue
            ends = [[n.GetIdx() for n in mol_h.GetAtomWithIdx(a).GetNeighbors()
                     if n.GetIdx() != b and n.GetAtomicNum() > 1] for a, b in ((j, k), (k, j))]
            if ends[0] and ends[1]:
                out[bond] = (ends[0][0], j, k, ends[1][0])
    return out


def _twist_deg(conf: Chem.Conformer, torsion: tuple[int, ...]) -> float:
    """Deviation of a torsion from the nearer planar value (0° or 180°) [degrees]."""
    x = abs(rdMolTransforms.GetDihedralDeg(conf, *torsion))
    return min(x, 180.0 - x)


def _restrained_copy(mol_h: Chem.Mol, conf_id: int, torsions, props, tolerance: float = PLANAR_TOLERANCE_DEG) -> int:
    """A copy of conformer ``conf_id`` optimised by MMFF94 with ``torsions`` held within ``tolerance`` [degrees] of
    planar; its id."""
    new_id = mol_h.AddConformer(Chem.Conformer(mol_h.GetConformer(conf_id)), assignId=True)
    ff = AllChem.MMFFGetMoleculeForceField(mol_h, props, confId=new_id)
    conf = mol_h.GetConformer(new_id)
    for t in torsions:
        d = rdMolTransforms.GetDihedralDeg(conf, *t)
        target = 0.0 if abs(d) < 90.0 else (180.0 if d > 0 else -180.0)
        ff.MMFFAddTorsionConstraint(*t, False, target - tolerance, target + tolerance, PLANAR_FORCE_CONSTANT)
    ff.Minimize(maxIts=2000)
    return new_id


def planar_variants(mol_h: Chem.Mol, numbers: np.ndarray, conf_id: int, sp, engine: Engine,
                    tolerances: tuple[float, ...] = (PLANAR_TOLERANCE_DEG,)):
    """The conformer ``conf_id`` or a copy with its conjugated single bonds near planar, whichever xTB puts lowest.

    For each bond set of :data:`PLANAR_BOND_SETS` and each restraint half-width of ``tolerances``
    [degrees] for which a bond of the set is twisted by more than that width in ``conf_id`` (and the
    set adds such a bond to the set before), a copy of the conformer is optimised with MMFF94 while
    flat-bottom torsion restraints hold those bonds within the width of the nearer planar value;
    copies that fail the structure check
    (:func:`screen.sanity.geometry_problems`) are dropped. The copies and the conformer get an xTB
    single point (the conformer's ranking single point ``sp`` is reused when there is one) and the
    lowest energy wins; ties keep the conformer.

    Parameters
    ----------
    mol_h : rdkit.Chem.Mol
        Molecule with hydrogens and MMFF94-optimised conformers; the copies are added to it.
    numbers : numpy.ndarray
        Atomic numbers.
    conf_id : int
        The conformer chosen by the xTB ranking.
    sp : screen.engines.SinglePoint or None
        Its converged single point, when the ranking computed one at the engine's accuracy.
    engine : Engine
        The ranking engine.
    tolerances : tuple of float
        Restraint half-widths tried [degrees].

    Returns
    -------
    (int, SinglePoint or None, str)
        The conformer id kept, its single point (``sp`` when no copy was ranked) and the name of the
        winning bond set with its width, e.g. ``"aryl-vinyl ±5°"`` ("" when the conformer itself stays).

    Examples
    --------
    >>> from screen.engines import make_engine
    >>> mol_h = Chem.AddHs(Chem.MolFromSmiles("c1ccc(/C=C/c2ccc(/C=C/c3ccccc3)cc2)cc1"))
    >>> cid = AllChem.EmbedMolecule(mol_h, randomSeed=7)
    >>> _ = AllChem.MMFFOptimizeMolecule(mol_h)   # MMFF94 twists the four ring-vinyl bonds by 37-40°
    >>> z = np.array([a.GetAtomicNum() for a in mol_h.GetAtoms()])
    >>> kept, sp, name = planar_variants(mol_h, z, cid, None, make_engine("tblite", "GFN2-xTB"))
    >>> name, kept != cid
    ('aryl-vinyl ±5°', True)
    """
    conf = mol_h.GetConformer(conf_id)
    props = None
    copies = []
    sets = [(name, _conjugated_torsions(mol_h, smarts)) for name, smarts in PLANAR_BOND_SETS]
    twist = {b: _twist_deg(conf, t) for _, torsions in sets for b, t in torsions.items()}
    for tolerance in tolerances:
        restrained: set = set()
        for name, torsions in sets:
            twisted = {b for b in torsions if twist[b] > tolerance}
            if not twisted or twisted <= restrained:
                continue
            restrained |= twisted
            props = props or AllChem.MMFFGetMoleculeProperties(mol_h, mmffVariant="MMFF94")
            new_id = _restrained_copy(mol_h, conf_id, list(torsions.values()), props, float(tolerance))
            if geometry_problems(mol_h, new_id):
                mol_h.RemoveConformer(new_id)
                continue
            copies.append((f"{name} ±{float(tolerance):g}°", new_id))
    if not copies:
        return conf_id, sp, ""
    bohr = 1.0 / BOHR_ANGSTROM
    if sp is None:
        sp = engine.singlepoint(numbers, conf.GetPositions() * bohr)
    best = (sp.energy_eh, conf_id, sp, "")
    for name, cid in copies:
        try:
            other = engine.singlepoint(numbers, mol_h.GetConformer(cid).GetPositions() * bohr, guess=sp)
        except EngineError:  # a copy whose SCF fails is not a candidate
            continue
        if other.energy_eh < best[0] - 1e-9:
            best = (other.energy_eh, cid, other, name)
    return best[1], best[2], best[3]


#: embeddings with other seeds tried when every conformer of the first one is broken
SANITY_RETRIES = 2


def _conformers(mol_h: Chem.Mol, n_conf: int, options: StructureOptions):
    """Embedded and force-field optimised conformers: (ids, embedding, force field, energies)."""
    ids, embedding = _embed(mol_h, n_conf, options)
    if not ids:
        raise ValueError(f"RDKit ETKDG could not embed a 3D structure ({n_conf} attempts, random coordinates too)")
    ff, ff_energies = _ff_optimise(mol_h, options)
    return ids, embedding, ff, ff_energies


def _sane_conformers(mol_h: Chem.Mol, n_conf: int, options: StructureOptions):
    """Conformers whose geometry matches the input graph (:func:`screen.sanity.geometry_problems`).

    Broken conformers (a stretched or lost bond, fused atoms, a lost or gained
    ring) are dropped before any xTB call; when all of them are broken the
    molecule is embedded again with another seed, up to :data:`SANITY_RETRIES`
    times. The first embedding that gives a sane conformer is used, so a
    molecule that never needs a retry keeps its old geometry.

    Raises
    ------
    BrokenStructureError
        Every conformer of every embedding is broken (the message gives the first problem).
    """
    problems: list[str] = []
    for attempt in range(SANITY_RETRIES + 1):
        opts = options if attempt == 0 else replace(options, seed=options.seed + 7919 * attempt)
        mol_h.RemoveAllConformers()
        ids, embedding, ff, energies = _conformers(mol_h, n_conf, opts)
        checks = {cid: geometry_problems(mol_h, cid) for cid in ids}
        sane = [i for i, cid in enumerate(ids) if not checks[cid]]
        if sane:
            route = embedding if attempt == 0 else f"{embedding}, seed retry {attempt}"
            return ([ids[i] for i in sane], route, ff, None if energies is None else [energies[i] for i in sane])
        problems = problems or next(p for p in checks.values() if p)
    raise BrokenStructureError(f"broken structure in every conformer of {SANITY_RETRIES + 1} embeddings: "
                               f"{'; '.join(problems)}")


#: loose-then-tight ranking (``rank_scf_accuracy``): every conformer whose loose energy lies within this of the
#: lowest loose energy is converged again at the engine's accuracy [Eh]. Loose and tight energies differed by at
#: most 8e-6 Eh at accuracy 10-30 (probe on D35 and IT-4F, 121 and 126 atoms; 7e-4 Eh at accuracy 100, hence
#: the schema's maximum of 30), so a conformer outside the window cannot be the tight minimum.
RECHECK_WINDOW_EH = 1e-4


def _rank_by_xtb(mol_h: Chem.Mol, numbers: np.ndarray, ranked: list[int], engine: Engine, *,
                 warm_start: bool = False, screen_accuracy: float | None = None):
    """The conformer of lowest xTB energy among ``ranked``, that energy [Eh], its single point, the ranking.

    A single candidate needs no ranking: it is returned with a NaN energy, no
    single point, an empty ranking and no xTB call (the electronic stage computes it anyway).
    The ranking (:func:`screen.conformer_spread.ranking_of`: energy and frontier orbital
    energies of every converged conformer, for the conformer spread) is taken at one SCF
    accuracy (the loose one when ``screen_accuracy`` is given).

    ``warm_start`` starts each SCF from the previous conformer's converged result
    (same atoms): same converged energies, sometimes fewer SCF cycles (little
    saved in practice: ``benchmarks/pruning_levels.py``). ``screen_accuracy``
    ranks with that looser SCF accuracy factor first and converges at the engine's
    own accuracy only the conformers within :data:`RECHECK_WINDOW_EH` of the lowest
    loose energy (each from its loose result); winner and energy are those of the
    tight single points. Ties go to the earlier conformer of ``ranked`` (lower
    force-field energy) in every mode.

    Examples
    --------
    >>> from screen.engines import make_engine
    >>> mol_h = Chem.AddHs(Chem.MolFromSmiles("CCCCO"))
    >>> ids = list(AllChem.EmbedMultipleConfs(mol_h, 4, randomSeed=7))
    >>> z = np.array([a.GetAtomicNum() for a in mol_h.GetAtoms()])
    >>> eng = make_engine("tblite", "GFN2-xTB")
    >>> cold = _rank_by_xtb(mol_h, z, ids, eng)
    >>> fast = _rank_by_xtb(mol_h, z, ids, eng, warm_start=True, screen_accuracy=10.0)
    >>> fast[0] == cold[0], abs(fast[1] - cold[1]) < 1e-6
    (True, True)
    """
    if len(ranked) == 1:
        return ranked[0], float("nan"), None, []
    ladder = SCF_LADDER
    if screen_accuracy is not None:
        ladder = tuple({**rung, "accuracy": float(screen_accuracy)} for rung in SCF_LADDER)
    positions = {cid: mol_h.GetConformer(cid).GetPositions() / BOHR_ANGSTROM for cid in ranked}  # [bohr]
    results, errors, previous = {}, [], None
    for cid in ranked:
        try:
            results[cid] = previous = engine.singlepoint(numbers, positions[cid], ladder=ladder,
                                                         guess=previous if warm_start else None)
        except EngineError as exc:
            errors.append(str(exc))
    ranking = ranking_of(results[cid] for cid in ranked if cid in results)
    if screen_accuracy is not None and results:
        lowest = min(sp.energy_eh for sp in results.values())
        loose, results = results, {}
        for cid in ranked:
            if cid in loose and loose[cid].energy_eh - lowest <= RECHECK_WINDOW_EH:
                try:
                    results[cid] = engine.singlepoint(numbers, positions[cid], guess=loose[cid])
                except EngineError as exc:
                    errors.append(str(exc))
    best_id, best_e = None, np.inf
    for cid in ranked:
        if cid in results and results[cid].energy_eh < best_e - 1e-9:
            best_id, best_e = cid, results[cid].energy_eh
    if best_id is None:
        raise EngineError(f"no conformer gave a converged xTB energy: {errors[0] if errors else 'unknown'}")
    return best_id, float(best_e), results[best_id], ranking


def _molblock_and_info(mol: Chem.Mol, info: dict) -> tuple[str, dict]:
    return Chem.MolToMolBlock(mol), info


_ENGINES: dict[str, Engine] = {}


def ranking_engine(method: str) -> Engine:
    """The conformer-ranking engine of this process (tblite with ``method``, made once per method)."""
    engine = _ENGINES.get(method)
    if engine is None:
        engine = _ENGINES[method] = make_engine("tblite", method)
    return engine


def _structure_job(smiles: str, options: dict) -> tuple[str, dict]:
    """Worker-process entry: one molecule's structure as (molblock, info)."""
    opts = StructureOptions(**options)
    return _molblock_and_info(*build_structure(smiles, opts, ranking_engine(opts.ranking_method)))


def _plain(exc: Exception) -> str:
    """Error text without the exception-type prefix an isolated worker adds."""
    text = str(exc)
    for prefix in ("ValueError: ", "EngineError: ", "ScfError: ", "BrokenStructureError: ", "CalculationError: "):
        if text.startswith(prefix):
            return text[len(prefix):]
    return text


def idle_options(item) -> dict:
    """Structures options that change nothing for a ``(key, smiles)`` item, at their earlier values.

    The results store gives the item the protocol id of those values
    (:class:`screen.store.StoreCache`), so a new default of such an option recomputes
    only the molecules it changes: ``rigid_embedding`` for every molecule that both
    rules route alike (:func:`screen.cage.rigid_rules_agree`).

    Examples
    --------
    >>> idle_options(("m1", "c1ccsc1"))
    {'rigid_embedding': 'cycle_rank'}
    >>> idle_options(("m2", "C" + "c1cc2sc(cc2s1)" * 11 + "C"))
    {}
    """
    return dict(EARLIER_PROTOCOL_VALUES["structures"]) if rigid_rules_agree(item[1]) else {}


def structure_record(key: str, make: Callable[[], tuple[str, dict]]) -> dict:
    """The journal record of one molecule's structure: ``make()`` → (molblock, info), or the failure.

    A structure error (bad SMILES, no embedding, broken geometry, no converged
    xTB energy, a crashed or timed-out worker) becomes ``status = failed`` with
    ``error = "structure: <reason>"``.

    Examples
    --------
    >>> structure_record("m1", lambda: ("<molblock>", {"n_conformers": 4}))["n_conformers"]
    4
    >>> def bad():
    ...     raise ValueError("SMILES does not parse: 'x'")
    >>> structure_record("m2", bad)["error"]
    "structure: SMILES does not parse: 'x'"
    """
    rec = {"key": key}
    try:
        molblock, info = make()
        rec.update(status="ok", error="", molblock=molblock, **info)
    except (ValueError, EngineError, RuntimeError) as exc:
        rec.update(status="failed", error=f"structure: {_plain(exc)}")
    return rec


def status_row(rec: dict) -> dict:
    """A structure record as its row of the status table (:data:`STATUS_COLUMNS`, "" where it has none).

    The conformer-spread columns are computed here from the record's ranking
    (:func:`screen.conformer_spread.spread_columns`), so a stored record gives the
    spread of the current definition; a record without a ranking (stored before it
    was kept) gives none.
    """
    row = {c: rec.get(c, "") for c in STATUS_COLUMNS}
    row.update(dict.fromkeys(CONFORMER_SPREAD_COLUMNS, ""))
    if rec.get("status") == "ok" and RANKING_KEY in rec:
        row.update(spread_columns(rec[RANKING_KEY], rec.get("n_ranked", 1)))
    return row


def write_structures(keys, done: dict, out_sdf, out_csv) -> pd.DataFrame:
    """Write a shard's SD file (ok molecules, title = key) and status table, both atomically, in ``keys`` order.

    Parameters
    ----------
    keys : sequence of str
        Structure keys of the shard, in shard order.
    done : dict
        Structure records by key (:func:`structure_record`).
    out_sdf, out_csv : path-like
        Outputs; the SD records carry the route as ``dascreen_*`` properties.

    Returns
    -------
    pandas.DataFrame
        The status table.
    """
    rows = []
    with atomic_path(out_sdf) as tmp:
        writer = Chem.SDWriter(str(tmp))
        for key in keys:
            rec = done[key]
            rows.append(status_row(rec))
            if rec["status"] != "ok":
                continue
            mol = Chem.MolFromMolBlock(rec["molblock"], removeHs=False)
            mol.SetProp("_Name", key)
            for prop in ("smiles_computed", "forcefield", "geometry", "n_conformers", "truncated_chains",
                         "truncated_groups"):
                mol.SetProp(f"dascreen_{prop}", str(rec[prop]))
            writer.write(mol)
        writer.close()
    table = pd.DataFrame(rows, columns=STATUS_COLUMNS)
    write_csv(table, out_csv)
    return table


def run_structures(shard_csv, out_sdf, out_csv, options: StructureOptions = StructureOptions(),
                   journal_path=None, engine: Engine | None = None, isolate: bool = True,
                   timeout_s: float | None = None, progress: Progress | None = None, store=None) -> pd.DataFrame:
    """Structures stage for one shard: ``shard-NNN.csv`` → SDF + status table.

    Every key of the shard gets a row in ``out_csv`` (``status`` ok or failed with
    the reason); ok molecules are written to ``out_sdf`` (title = key). Finished
    molecules are journalled, so a killed run resumes where it stopped.

    Parameters
    ----------
    shard_csv : path-like
        Shard table with columns ``key, smiles``.
    out_sdf, out_csv : path-like
        Outputs (written atomically).
    options : StructureOptions
    journal_path : path-like, optional
        Journal file; default ``out_csv`` + ``.journal.jsonl``.
    engine : Engine, optional
        Engine for ranking/optimisation; when given, molecules run in this process.
    isolate : bool
        Run each molecule in a child process (:class:`screen.isolation.IsolatedWorker`) so a
        native crash fails one molecule, not the shard.
    timeout_s : float, optional
        Per-molecule time limit [s] (isolated runs only).
    progress : Progress, optional
        Progress reporter (default: lines on standard output).
    store : screen.store.ResultStore, path-like or False, optional
        Results store read before and written after each molecule (default: the
        one named by ``DASCREEN_STORE``, set by ``dascreen run``; False: none).

    Returns
    -------
    pandas.DataFrame
        The status table.
    """
    from screen.store import stage_protocol_id, structures_cache

    RDLogger.DisableLog("rdApp.*")
    progress = progress or Progress(f"structures {Path(shard_csv).stem}")
    shard = pd.read_csv(shard_csv, dtype=str, keep_default_na=False)
    journal = Journal(journal_path or f"{out_csv}.journal.jsonl", tag=stage_protocol_id("structures", options))
    local = None
    if engine is not None or not isolate:
        engine = engine or make_engine("tblite", options.ranking_method)
        local = lambda smi, _opts: _molblock_and_info(*build_structure(smi, options, engine))

    with molecule_caller(_structure_job, local, timeout_s) as call:
        def compute(item) -> dict:
            key, smiles = item
            return structure_record(key, lambda: call(smiles, asdict(options)))

        done = run_journalled(zip(shard["key"], shard["smiles"]), lambda item: item[0], compute, journal, progress,
                              structures_cache(store, options, idle_options))
    table = write_structures(shard["key"], done, out_sdf, out_csv)
    journal.remove()
    return table


def read_structures(sdf_path) -> dict[str, Chem.Mol]:
    """Molecules of a structures SDF by key (hydrogens kept)."""
    supplier = Chem.SDMolSupplier(str(sdf_path), removeHs=False, sanitize=False)
    return {m.GetProp("_Name"): m for m in supplier if m is not None}
