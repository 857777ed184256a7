"""Closed carbon cages (fullerenes and their adducts), recognised from the molecular graph.

A fullerene is a closed polyhedron of five- and six-membered rings, so its fused ring
system obeys Euler's polyhedron formula V − E + F = 2 (atoms, bonds, rings); any planar
or bowl-shaped fused system (naphthalene, coronene, corannulene, a fluorene oligomer)
gives 1. A ring fused on a cage bond (a methano bridge, a pyrrolidine, an indene) adds as
many atoms plus rings as bonds, so adducts keep the value 2.

Why it matters here: MMFF94 types every cage carbon as aromatic and leaves the cage without
its bond-length alternation (C60: 6:6 and 6:5 bonds 1.440 ± 0.045 and 1.436 ± 0.059 Å
measured on our force-field geometry, against 1.401(10) and 1.458(6) Å in the gas-phase
electron-diffraction structure [1]_), and GFN2-xTB on that geometry puts C60's orbital gap
at 0.54 eV instead of 1.75 eV at its own geometry. :func:`screen.structures.build_structure`
therefore optimises a cage with the xTB engine (``structures.cage_geometry``), and the
calibration gives cages a class term of their own (``cage`` in
:data:`screen.calibration.linear.DERIVED`).

References
----------
.. [1] K. Hedberg, L. Hedberg, D. S. Bethune, C. A. Brown, H. C. Dorn, R. D. Johnson,
   M. de Vries, Science 254 (1991) 410. :doi:`10.1126/science.254.5030.410`

Examples
--------
>>> from rdkit import Chem
>>> closed_cage(Chem.MolFromSmiles("c1ccc2cc3ccccc3cc2c1"))  # anthracene: planar, V - E + F = 1
False
>>> cage_smiles("C1=CC=CC=C1"), cage_smiles("not a smiles")
(False, False)
"""

from __future__ import annotations

from functools import lru_cache

from rdkit import Chem, RDLogger

from screen.options import RIGID_RULES

__all__ = ["closed_cage", "cage_smiles", "euler_characteristic", "cycle_rank", "largest_fused_rank",
           "RIGID_CYCLE_RANK", "RIGID_RULES", "rigid_embedding", "rigid_rules_agree"]

#: cycle rank from which a molecule (rule ``cycle_rank``) or its largest fused ring system (rule ``fused_system``)
#: is embedded once from random coordinates instead of by a conformer search (:func:`rigid_embedding`)
RIGID_CYCLE_RANK = 20


def _fused_systems(rings: list[set[int]]) -> list[list[set[int]]]:
    """Rings grouped into fused systems (two rings are fused when they share a bond, i.e. ≥ 2 atoms)."""
    systems: list[list[set[int]]] = []
    for ring in rings:
        touching = [s for s in systems if any(len(ring & other) >= 2 for other in s)]
        merged = [ring] + [r for s in touching for r in s]
        systems = [s for s in systems if not any(s is t for t in touching)] + [merged]
    return systems


def euler_characteristic(mol: Chem.Mol, rings=None) -> int:
    """V − E + F of the molecule's largest fused ring system (symmetrised SSSR; 0 without rings).

    ``rings``: the molecule's symmetrised SSSR when the caller has it already.

    Examples
    --------
    >>> euler_characteristic(Chem.MolFromSmiles("c1ccc2ccccc2c1"))  # 10 atoms, 11 bonds, 2 rings
    1
    """
    rings = [set(r) for r in (Chem.GetSymmSSSR(mol) if rings is None else rings)]
    best: tuple[int, int] | None = None
    for system in _fused_systems(rings):
        atoms = set().union(*system)
        edges = {tuple(sorted((i, j))) for r in system for i in r for j in r
                 if i < j and mol.GetBondBetweenAtoms(i, j) is not None}
        chi = len(atoms) - len(edges) + len(system)
        if best is None or len(atoms) > best[0]:
            best = (len(atoms), chi)
    return 0 if best is None else best[1]


def closed_cage(mol: Chem.Mol) -> bool:
    """True for a molecule whose largest fused ring system is a closed carbon polyhedron (a fullerene).

    At least twelve five-membered all-carbon rings (every fullerene has exactly twelve pentagons)
    and V − E + F = 2 (:func:`euler_characteristic`).
    """
    if mol is None or mol.GetNumAtoms() < 20:
        return False
    rings = [tuple(r) for r in Chem.GetSymmSSSR(mol)]
    pentagons = sum(1 for r in rings if len(r) == 5 and all(mol.GetAtomWithIdx(i).GetAtomicNum() == 6 for i in r))
    return pentagons >= 12 and euler_characteristic(mol, rings) == 2


@lru_cache(maxsize=65536)
def cage_smiles(smiles: str) -> bool:
    """:func:`closed_cage` of a SMILES (False when it does not parse); cached."""
    RDLogger.DisableLog("rdApp.*")
    return closed_cage(Chem.MolFromSmiles(str(smiles)))


def cycle_rank(mol: Chem.Mol) -> int:
    """Number of independent rings of the molecular graph (bonds − atoms + components).

    Examples
    --------
    >>> cycle_rank(Chem.MolFromSmiles("c1ccc2ccccc2c1")), cycle_rank(Chem.MolFromSmiles("c1ccccc1-c1ccccc1"))
    (2, 2)
    """
    return mol.GetNumBonds() - mol.GetNumAtoms() + len(Chem.GetMolFrags(mol))


def largest_fused_rank(mol: Chem.Mol) -> int:
    """Cycle rank of the molecule's largest fused ring system (0 without rings).

    Rings sharing a bond belong to one system; its rank is bonds − atoms + 1 over the
    system's atoms and the bonds between them (C60: 90 − 60 + 1 = 31; an oligomer of
    thiophenes joined by single bonds: 1).

    Examples
    --------
    >>> largest_fused_rank(Chem.MolFromSmiles("c1ccc2cc3ccccc3cc2c1"))  # anthracene
    3
    >>> largest_fused_rank(Chem.MolFromSmiles("c1ccc(-c2ccc(-c3cccs3)s2)s1"))  # terthiophene
    1
    """
    rings = [set(r) for r in Chem.GetSymmSSSR(mol)]
    best = 0
    for system in _fused_systems(rings):
        atoms = set().union(*system)
        bonds = sum(1 for b in mol.GetBonds() if b.GetBeginAtomIdx() in atoms and b.GetEndAtomIdx() in atoms)
        best = max(best, bonds - len(atoms) + 1)
    return best


def rigid_embedding(mol: Chem.Mol, rule: str = "fused_system") -> bool:
    """Whether the structures stage embeds ``mol`` once from random coordinates (no conformer search).

    ETKDG's torsion terms stall for minutes on a fullerene cage and then fail, while plain
    distance geometry from random coordinates embeds it in under a second; a large fused
    system has no conformers of its own to search.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
    rule : {"fused_system", "cycle_rank"}
        ``fused_system``: the largest fused ring system has cycle rank ≥ :data:`RIGID_CYCLE_RANK`
        (fullerenes and their adducts, large nanographenes); ``cycle_rank``: the whole molecule
        has (the rule before ``structures.rigid_embedding`` existed: it also caught oligomers of
        20 or more rings, which then got one rough embedding instead of a conformer search).

    Returns
    -------
    bool

    Examples
    --------
    >>> c60 = Chem.MolFromSmiles("c12c3c4c5c1c1c6c7c2c2c8c3c3c9c4c4c%10c5c5c1c1c6c6c%11c7c2c2c7c8c3c3c8c9c4c4"
    ...                          "c9c%10c5c5c1c1c6c6c%11c2c2c7c3c3c8c4c4c9c5c1c1c6c2c3c41")
    >>> rigid_embedding(c60), rigid_embedding(c60, "cycle_rank")
    (True, True)
    >>> oligomer = Chem.MolFromSmiles("C" + "c1cc2sc(cc2s1)" * 11 + "C")  # thienothiophene 11-mer: 22 rings
    >>> rigid_embedding(oligomer), rigid_embedding(oligomer, "cycle_rank")
    (False, True)
    """
    if rule not in RIGID_RULES:
        raise ValueError(f"unknown rigid-embedding rule {rule!r}; allowed: {', '.join(RIGID_RULES)}")
    if rule == "cycle_rank":
        return cycle_rank(mol) >= RIGID_CYCLE_RANK
    return cycle_rank(mol) >= RIGID_CYCLE_RANK and largest_fused_rank(mol) >= RIGID_CYCLE_RANK


@lru_cache(maxsize=65536)
def rigid_rules_agree(smiles: str) -> bool:
    """True when both rules of :func:`rigid_embedding` route this SMILES alike (True when it does not parse).

    The results store leaves ``structures.rigid_embedding`` out of such a molecule's protocol id,
    so the option's new default recomputes only the molecules it changes.

    Parameters
    ----------
    smiles : str
        The molecule as given to the structures stage (side-chain truncation removes only acyclic
        atoms, so it routes the molecule as the truncated one).

    Returns
    -------
    bool

    Examples
    --------
    >>> rigid_rules_agree("c1ccsc1"), rigid_rules_agree("C" + "c1cc2sc(cc2s1)" * 11 + "C")
    (True, False)
    """
    RDLogger.DisableLog("rdApp.*")
    mol = Chem.MolFromSmiles(str(smiles))
    return mol is None or rigid_embedding(mol, "fused_system") == rigid_embedding(mol, "cycle_rank")
