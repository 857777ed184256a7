"""Geometry sanity checks: never compute levels on a broken structure.

A force field or an embedding can return a structure whose bonds no longer match
the input graph — a fullerene cage with one C–C bond stretched to 2 Å, a ring
opened, two atoms fused. Tight binding then gives an almost metallic orbital gap
and wrong levels without complaint. :func:`geometry_problems` compares the 3-D
structure with the molecular graph it came from:

- every graph bond must be shorter than ``bond_factor`` × (sum of covalent radii), and than that sum plus
  ``bond_slack_a`` (0.35 Å): the factor alone let heavy-atom bonds stretch far (C–S to 2.35 Å; a referee's audit
  computed thiophene with its C–S bond at 2.2 Å, normal 1.72 Å, without complaint and got an EA 1.0 eV too high).
  In 2 971 structures of this project's runs the largest excess of a bond over its sum of radii was 0.17 Å (C–F),
  C–S 0.11 Å, C–C 0.03 Å in 99.9 % of 85 603 bonds (larger only in embeddings exported without a check);
- no two non-bonded atoms closer than ``contact_factor`` × (sum of covalent radii)
  (a gained bond, or atoms on top of each other);
- the cycle rank (independent rings) of the bonds perceived from distances must equal the graph's.

:func:`gap_problem` flags a near-zero orbital gap of a closed-shell neutral.

Covalent radii are RDKit's (``Chem.GetPeriodicTable().GetRcovalent``), from the
Cambridge Structural Database compilation [1]_.

References
----------
.. [1] B. Cordero, V. Gómez, A. E. Platero-Prats, M. Revés, J. Echeverría,
   E. Cremades, F. Barragán, S. Alvarez, Dalton Trans. (2008) 2832.
   :doi:`10.1039/B801115J`

Examples
--------
>>> from rdkit import Chem
>>> from rdkit.Chem import AllChem
>>> mol = Chem.AddHs(Chem.MolFromSmiles("c1ccccc1"))
>>> _ = AllChem.EmbedMolecule(mol, randomSeed=1)
>>> geometry_problems(mol)
[]
>>> conf = mol.GetConformer()
>>> p = conf.GetAtomPosition(0)
>>> conf.SetAtomPosition(0, (p.x + 2.0, p.y + 1.0, p.z))
>>> geometry_problems(mol)[0]
'bond C1-C2 is 3.05 Å (limit 1.87 Å)'
"""

from __future__ import annotations

import numpy as np
from rdkit import Chem

from screen.errors import CalculationError

__all__ = ["geometry_problems", "gap_problem", "BrokenStructureError", "BOND_FACTOR", "BOND_SLACK_A", "CONTACT_FACTOR",
           "MIN_GAP_EV"]


class BrokenStructureError(CalculationError):
    """A structure or electronic structure that must not be used for levels (the message says why)."""


#: a graph bond longer than this × (r_cov,A + r_cov,B) is broken
BOND_FACTOR = 1.30
#: ... or longer than r_cov,A + r_cov,B + this [Å] (the tighter of the two applies)
BOND_SLACK_A = 0.35
#: two non-bonded atoms closer than this × (r_cov,A + r_cov,B) are fused
CONTACT_FACTOR = 0.85
#: an orbital gap below this [eV] in a closed-shell neutral means a broken electronic structure
MIN_GAP_EV = 0.25

_PT = Chem.GetPeriodicTable()


def _radii(mol: Chem.Mol) -> np.ndarray:
    return np.array([_PT.GetRcovalent(a.GetAtomicNum()) for a in mol.GetAtoms()])


def _label(mol: Chem.Mol, idx: int) -> str:
    return f"{mol.GetAtomWithIdx(idx).GetSymbol()}{idx + 1}"


def geometry_problems(mol: Chem.Mol, conf_id: int = -1, bond_factor: float = BOND_FACTOR,
                      contact_factor: float = CONTACT_FACTOR, bond_slack_a: float = BOND_SLACK_A) -> list[str]:
    """Plain-words problems of a 3-D structure against its own graph (empty list = sane).

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        Molecule with explicit hydrogens and a conformer [Å].
    conf_id : int
        Conformer to check.
    bond_factor, contact_factor : float
        Tolerances (see the module docstring).
    bond_slack_a : float
        Largest stretch of a bond over its sum of covalent radii [Å] (see the module docstring).

    Returns
    -------
    list of str
        At most a few messages, e.g. ``"bond C12-C13 is 2.02 Å (limit 1.97 Å)"``.
    """
    pos = mol.GetConformer(conf_id).GetPositions()
    radii = _radii(mol)
    dist = np.linalg.norm(pos[:, None, :] - pos[None, :, :], axis=-1)
    limit = radii[:, None] + radii[None, :]
    longest = np.minimum(bond_factor * limit, limit + bond_slack_a)
    problems = []
    bonded = np.zeros(dist.shape, bool)
    for bond in mol.GetBonds():
        i, j = bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()
        bonded[i, j] = bonded[j, i] = True
        if dist[i, j] > longest[i, j]:
            problems.append(f"bond {_label(mol, i)}-{_label(mol, j)} is {dist[i, j]:.2f} Å "
                            f"(limit {longest[i, j]:.2f} Å)")
    close = np.argwhere(np.triu((dist < contact_factor * limit) & ~bonded, k=1))
    for i, j in close[:3]:
        problems.append(f"atoms {_label(mol, int(i))} and {_label(mol, int(j))} are {dist[i, j]:.2f} Å apart "
                        "but not bonded in the input")
    if not problems:
        perceived = _perceived_rings(dist, longest)
        expected = mol.GetNumBonds() - mol.GetNumAtoms() + len(Chem.GetMolFrags(mol))
        if perceived != expected:
            problems.append(f"the structure has {perceived} rings where the input has {expected}")
    return problems[:5]


def _perceived_rings(dist: np.ndarray, longest: np.ndarray) -> int:
    """Cycle rank (edges − nodes + components) of the distance-perceived bond graph (bonds shorter than ``longest``)."""
    n = len(dist)
    adj = np.triu(dist < longest, k=1)
    edges = int(adj.sum())
    parent = list(range(n))

    def find(a):
        while parent[a] != a:
            parent[a] = parent[parent[a]]
            a = parent[a]
        return a

    for i, j in np.argwhere(adj):
        parent[find(int(i))] = find(int(j))
    components = len({find(i) for i in range(n)})
    return edges - n + components


def gap_problem(gap_ev: float, min_gap_ev: float = MIN_GAP_EV) -> str | None:
    """Message for a near-zero orbital gap of a closed-shell neutral, else None.

    Examples
    --------
    >>> gap_problem(0.02)  # doctest: +ELLIPSIS
    'orbital gap 0.02 eV is below 0.25 eV: the structure is broken (e.g. a double bond twisted ...'
    >>> gap_problem(1.9) is None
    True
    """
    if gap_ev is None or not np.isfinite(gap_ev) or gap_ev >= min_gap_ev:
        return None
    return (f"orbital gap {gap_ev:.2f} eV is below {min_gap_ev:.2f} eV: the structure is broken (e.g. a double bond "
            "twisted by the force field, as in a cumulene), or the molecule is not a closed-shell singlet (a "
            "triplet or diradical ground state, as in O2) or is metallic; levels are not computed")
