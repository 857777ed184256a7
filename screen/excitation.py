"""HOMO→LUMO exchange and Coulomb integrals from tight-binding orbitals.

The GFN2-xTB orbital gap (and the ΔSCF triplet energy) tracks the lowest
*triplet* excitation, not the singlet: for a single HOMO→LUMO configuration

    E(T₁) ≈ Δε − J_HL,    E(S₁) ≈ Δε − J_HL + 2 K_HL,

so the singlet–triplet splitting is 2 K_HL — large for locally excited,
acene-like chromophores, small for donor–acceptor (charge-transfer) ones. This
module computes K_HL and J_HL the way simplified Tamm–Dancoff methods do [1]_:
Löwdin-orthogonalised orbitals, atomic transition (or orbital) charges,

    q_A^{pq} = Σ_{μ∈A} C'_{μp} C'_{μq},    C' = S^{1/2} C,

and a damped Coulomb kernel between atoms (Ohno–Klopman form [2]_, [3]_)

    γ_AB = 1 / √(R_AB² + (2 / (U_A + U_B))²),

with U_A = 2η_A from absolute hardnesses η (Pearson [4]_; values from memory):

    K_HL = Σ_AB q_A^{HL} q_B^{HL} γ_AB,   J_HL = Σ_AB q_A^{HH} q_B^{LL} γ_AB.

They are descriptors for the optical-gap calibration (``screen.calibrate``), not
excitation energies on their own. Unlike sTDA, one unscreened kernel serves both
integrals: sTDA damps the Coulomb kernel of J more strongly and scales exchange with
the hybrid functional's Fock fraction a_x ([1]_: γ^J = (R^β + (a_x η̄)^−β)^−1/β,
γ^K = (R^α + η̄^−α)^−1/α), so K here is within about 10–15 % of sTDA's (naphthalene
0.70 eV here, 0.75–0.77 eV with sTDA kernels at a_x = 0.5–0.25, an engine audit's
figures) but J is the bare Coulomb attraction (naphthalene 5.4 eV against 1.4–3.0 eV),
and Δε − J + 2K built from it (the optical-gap feature ``xtb_s1j_ev`` the selection
may try) is no singlet energy. The shipped optical-gap models chose neither K nor J.

References
----------
.. [1] S. Grimme, J. Chem. Phys. 138 (2013) 244104. :doi:`10.1063/1.4811331`
.. [2] K. Ohno, Theor. Chim. Acta 2 (1964) 219. :doi:`10.1007/BF00528281`
.. [3] G. Klopman, J. Am. Chem. Soc. 86 (1964) 4550. :doi:`10.1021/ja01075a008`
.. [4] R. G. Pearson, Inorg. Chem. 27 (1988) 734. :doi:`10.1021/ic00277a030`

Examples
--------
Two identical atoms 2 bohr apart with one orbital each (H₂-like minimal basis):

>>> import numpy as np
>>> S = np.array([[1.0, 0.5], [0.5, 1.0]])
>>> C = np.array([[1, 1], [1, -1]]) / np.sqrt(np.array([[3.0, 1.0]]))
>>> out = frontier_integrals([1, 1], [[0, 0, 0], [0, 0, 2.0]], C, S, [0, 1], [2.0, 0.0])
>>> round(out["overlap_hl"], 3)
1.0
>>> out["k_hl_ev"] > 0, out["j_hl_ev"] > out["k_hl_ev"]
(True, True)
"""

from __future__ import annotations

import numpy as np

from screen.constants import HARTREE_EV

__all__ = ["HARDNESS_EV", "frontier_integrals", "lowdin_coefficients"]

#: absolute hardness η = (I − A)/2 [eV] of the elements (Pearson 1988; from memory)
HARDNESS_EV = {1: 6.43, 5: 4.01, 6: 5.00, 7: 7.30, 8: 6.08, 9: 7.01, 14: 3.38, 15: 4.88, 16: 4.14,
               17: 4.68, 34: 3.87, 35: 4.22, 53: 3.69}
_DEFAULT_HARDNESS_EV = 5.0


def lowdin_coefficients(coeffs: np.ndarray, overlap: np.ndarray) -> np.ndarray:
    """Löwdin-orthogonalised MO coefficients C' = S^{1/2} C (AOs × MOs).

    S is symmetric positive definite, so S^{1/2} comes from its eigen-decomposition
    (faster and real, unlike a general matrix square root).

    Examples
    --------
    >>> S = np.array([[1.0, 0.5], [0.5, 1.0]])
    >>> C = np.linalg.inv(np.sqrt(3.0) * np.eye(2)) @ np.array([[1.0], [1.0]])
    >>> np.round(lowdin_coefficients(C, S).ravel(), 4).tolist()  # a normalised orbital stays normalised
    [0.7071, 0.7071]
    """
    w, v = np.linalg.eigh(np.asarray(overlap, float))
    half = (v * np.sqrt(np.clip(w, 0.0, None))) @ v.T
    return half @ np.asarray(coeffs, float)


def _atom_charges(cprime: np.ndarray, ao_atom: np.ndarray, n_atoms: int, p: int, q: int) -> np.ndarray:
    return np.bincount(ao_atom, weights=cprime[:, p] * cprime[:, q], minlength=n_atoms)


def _gamma(numbers: np.ndarray, positions_bohr: np.ndarray) -> np.ndarray:
    eta = np.array([HARDNESS_EV.get(int(z), _DEFAULT_HARDNESS_EV) for z in numbers]) / HARTREE_EV
    u = 2.0 * eta
    r = np.linalg.norm(positions_bohr[:, None, :] - positions_bohr[None, :, :], axis=-1)
    damp = 2.0 / (u[:, None] + u[None, :])
    return 1.0 / np.sqrt(r**2 + damp**2)


def frontier_integrals(numbers, positions_bohr, coeffs, overlap, ao_atom, occupations,
                       homo: int | None = None, lumo: int | None = None, cprime=None) -> dict:
    """HOMO→LUMO exchange K, Coulomb J and spatial overlap of a closed-shell molecule.

    Parameters
    ----------
    numbers : array_like of int
        Atomic numbers (n_atoms).
    positions_bohr : array_like
        Cartesian positions [bohr], shape (n_atoms, 3).
    coeffs : array_like
        MO coefficients, shape (n_ao, n_mo), columns ordered by orbital energy.
    overlap : array_like
        AO overlap matrix, shape (n_ao, n_ao).
    ao_atom : array_like of int
        Atom index (0-based) of each AO.
    occupations : array_like
        Orbital occupations (the HOMO is the highest with occupation > 1 unless ``homo`` is given).
    homo : int, optional
        Index of the HOMO (0-based, ascending orbital energies).
    lumo : int, optional
        Index of the LUMO (default: the orbital after ``homo``).
    cprime : array_like, optional
        The Löwdin coefficients :func:`lowdin_coefficients` gives for ``coeffs`` and ``overlap``,
        when the caller has them already.

    Returns
    -------
    dict
        ``k_hl_ev`` and ``j_hl_ev`` [eV]; ``overlap_hl`` = Σ_A √(p_A^H p_A^L) [0–1]
        with Löwdin orbital populations p (1 for identical densities, → 0 for
        separated HOMO and LUMO).

    Notes
    -----
    With a degenerate HOMO or LUMO (e.g. C60) the values depend on which
    orbitals of the degenerate set the diagonaliser returns; they are still
    reported, as the calibration only uses them as descriptors.
    """
    numbers = np.asarray(numbers, int)
    pos = np.asarray(positions_bohr, float)
    occ = np.asarray(occupations, float)
    if homo is None:
        homo = int(np.flatnonzero(occ > 1.0).max())
    if lumo is None:
        lumo = homo + 1
    if lumo >= np.shape(coeffs)[1]:
        raise ValueError(f"no LUMO: orbital {lumo} of {np.shape(coeffs)[1]}")
    cprime = lowdin_coefficients(coeffs, overlap) if cprime is None else np.asarray(cprime, float)
    ao_atom = np.asarray(ao_atom, int)
    n = len(numbers)
    q_hl = _atom_charges(cprime, ao_atom, n, homo, lumo)
    p_h = _atom_charges(cprime, ao_atom, n, homo, homo)
    p_l = _atom_charges(cprime, ao_atom, n, lumo, lumo)
    gamma = _gamma(numbers, pos)
    k = float(q_hl @ gamma @ q_hl) * HARTREE_EV
    j = float(p_h @ gamma @ p_l) * HARTREE_EV
    ovl = float(np.sum(np.sqrt(np.clip(p_h, 0, None) * np.clip(p_l, 0, None))))
    return {"k_hl_ev": k, "j_hl_ev": j, "overlap_hl": ovl}
