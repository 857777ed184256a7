"""Which occupied orbital is the π HOMO: the nitrogen lone pairs GFN2-xTB places too high.

GFN2-xTB puts the σ lone pair of a two-coordinate ("pyridine-type") nitrogen
above the highest π orbital of small aza-aromatics: quinoxaline's lone-pair
combination lies 1.2 eV above its highest π orbital, pyridine's 1.3 eV, while
photoelectron spectra place the first π and lone-pair ionisations of pyridine
within ≈ 0.1 eV of each other and the first band of quinoline, isoquinoline and
quinoxaline at the π ionisation (common practice in the photoelectron
literature; values from memory). With that ordering the ΔSCF cation is a
lone-pair hole and the computed IP came out 0.4–1.1 eV below the measured one
for the four aza-naphthalenes of the gas reference set (quinoxaline −1.13 eV,
the four worst residuals of the IP model), and the orbital gap is an n→π* gap.

The levels this tool reports are π levels (the IP/HOMO that sets a donor's Voc,
the gap of the π→π* absorption), so when the neutral's HOMO is such a lone
pair the raw values are taken for the highest π-type occupied orbital instead:

    ε_HOMO → ε_π,    IP_ΔSCF → IP_ΔSCF + (ε_lp − ε_π),

the second a Koopmans-type shift of the hole that assumes the π hole relaxes
like the lone-pair hole (tblite offers no ΔSCF with a chosen hole). On the
default protocol it brings the four aza-naphthalenes' IPs within 0.06–0.26 eV
(leave-one-out; ``benchmarks/lone_pair_homo.py``). Large conjugated materials
are not touched: their π HOMO lies well above any lone pair.

An orbital is a lone pair when more than :data:`LONE_PAIR_WEIGHT` of its Löwdin
population sits in the σ part (s and in-plane p) of two-coordinate nitrogen
atoms, the plane being that of each nitrogen and its two neighbours; a π
orbital, however much of it sits on nitrogen, has no σ part there.

Examples
--------
>>> import numpy as np
>>> pos = np.array([[0.0, 0.0, 0.0], [2.5, 0.0, 0.0], [-1.2, 2.2, 0.0]])   # N with two neighbours [bohr]
>>> two_coordinate_nitrogen([7, 6, 6], pos).tolist()
[True, False, False]
"""

from __future__ import annotations

import numpy as np
from rdkit import Chem

from screen.constants import BOHR_ANGSTROM

__all__ = ["LONE_PAIR_WEIGHT", "two_coordinate_nitrogen", "lone_pair_weights", "pi_homo"]

#: an occupied orbital with more than this share of its population in nitrogen σ lone pairs is not the π HOMO
LONE_PAIR_WEIGHT = 0.5
#: two atoms are bonded when closer than this factor × the sum of their covalent radii (common practice)
BOND_FACTOR = 1.25
#: cartesian axis (x = 0, y = 1, z = 2) of each real p function in a tblite p shell (m = −1, 0, +1: y, z, x)
P_AXES = (1, 2, 0)

_PT = Chem.GetPeriodicTable()


def _neighbours(numbers: np.ndarray, positions_bohr: np.ndarray) -> list[np.ndarray]:
    radii = np.array([_PT.GetRcovalent(int(z)) for z in numbers]) / BOHR_ANGSTROM
    dist = np.linalg.norm(positions_bohr[:, None, :] - positions_bohr[None, :, :], axis=-1)
    bonded = dist < BOND_FACTOR * (radii[:, None] + radii[None, :])
    np.fill_diagonal(bonded, False)
    return [np.flatnonzero(row) for row in bonded]


def _two_coordinate(numbers: np.ndarray, nbrs: list[np.ndarray]) -> np.ndarray:
    return np.array([int(z) == 7 and len(nb) == 2 for z, nb in zip(numbers, nbrs)], dtype=bool)


def two_coordinate_nitrogen(numbers, positions_bohr) -> np.ndarray:
    """Boolean mask of the nitrogen atoms with exactly two bonded neighbours (pyridine-, imine-, azo-type)."""
    numbers = np.asarray(numbers, int)
    return _two_coordinate(numbers, _neighbours(numbers, np.asarray(positions_bohr, float)))


def lone_pair_weights(numbers, positions_bohr, cprime, ao_atom, ao_l, orbitals) -> np.ndarray:
    """Share of each orbital's Löwdin population in the σ part of two-coordinate nitrogen atoms [0–1].

    Parameters
    ----------
    numbers, positions_bohr : array_like
        Atomic numbers and positions [bohr].
    cprime : array_like
        Löwdin-orthogonalised MO coefficients, AOs × MOs (:func:`screen.excitation.lowdin_coefficients`).
    ao_atom, ao_l : array_like of int
        Atom index and angular momentum of each AO (p functions of a shell consecutive, ordered as
        :data:`P_AXES`).
    orbitals : sequence of int
        Orbital indices to weigh.
    """
    numbers = np.asarray(numbers, int)
    pos = np.asarray(positions_bohr, float)
    ao_atom, ao_l = np.asarray(ao_atom, int), np.asarray(ao_l, int)
    orbitals = list(orbitals)
    nbrs = _neighbours(numbers, pos)
    mask = _two_coordinate(numbers, nbrs)
    weights = np.zeros(len(orbitals))
    if not mask.any():
        return weights
    cprime = np.asarray(cprime, float)[:, orbitals]
    for atom in np.flatnonzero(mask):
        a, b = pos[nbrs[atom]] - pos[atom]
        normal = np.cross(a, b)
        norm = np.linalg.norm(normal)
        if norm < 1e-8:  # linear C–N–C: no plane, no σ/π split
            continue
        normal /= norm
        aos = np.flatnonzero(ao_atom == atom)
        s = aos[ao_l[aos] == 0]
        weights += np.sum(cprime[s] ** 2, axis=0)
        p = aos[ao_l[aos] == 1]
        for shell in p.reshape(-1, 3):
            vec = np.zeros((3, len(orbitals)))
            vec[list(P_AXES)] = cprime[shell]
            weights += np.sum(vec ** 2, axis=0) - (normal @ vec) ** 2
    return weights


def pi_homo(numbers, positions_bohr, cprime, ao_atom, ao_l, homo: int, depth: int = 6) -> int:
    """Index of the highest occupied orbital that is not a nitrogen lone pair (``homo`` when the HOMO is π).

    ``cprime`` are the Löwdin-orthogonalised MO coefficients (see :func:`lone_pair_weights`). Only the
    ``depth`` highest occupied orbitals are examined; if all of them are lone pairs the HOMO is kept.
    """
    candidates = list(range(homo, max(homo - depth, -1), -1))
    weights = lone_pair_weights(numbers, positions_bohr, cprime, ao_atom, ao_l, candidates)
    for k, w in zip(candidates, weights):
        if w <= LONE_PAIR_WEIGHT:
            return k
    return homo
