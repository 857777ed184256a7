"""Polymer repeat units → oligomer series (each oligomer an ordinary molecule).

A polymer is entered as one repeat unit with exactly two attachment points
(``[*]``, ``*`` or ``[*:1]``/``[*:2]``; ``docs/contracts.md``, input). The head is
the attachment point with map number 1, else the first one written; the tail is
the other. An n-mer joins n copies head-to-tail (tail of copy k bonded to the head
of copy k + 1) and caps the two free ends with hydrogen (default) or methyl.

The oligomers are computed like any molecule; their per-n values are extrapolated
to the chain limit by :mod:`screen.extrapolate`.

References
----------
.. [1] J. Gierschner, J. Cornil, H.-J. Egelhaaf, "Optical bandgaps of π-conjugated
   organic materials at the polymer limit: experiment and theory",
   Adv. Mater. 19 (2007) 173. :doi:`10.1002/adma.200600277`

Examples
--------
>>> unit = RepeatUnit.from_smiles("[*]c1ccc([*])s1")
>>> [oligomer_smiles(unit, n) for n in (1, 2, 3)]
['c1ccsc1', 'c1csc(-c2cccs2)c1', 'c1csc(-c2ccc(-c3cccs3)s2)c1']
>>> oligomer_smiles(unit, 2, cap="methyl")
'Cc1ccc(-c2ccc(C)s2)s1'
>>> unit.conjugation_length
2

A unit attached through an aromatic nitrogen (an N-linked carbazole) gets the N–H back at the H-capped end:

>>> oligomer_smiles("[*]n1c2ccccc2c2cc([*])ccc21", 2)
'c1ccc2c(c1)[nH]c1ccc(-n3c4ccccc4c4ccccc43)cc12'
"""

from __future__ import annotations

from dataclasses import dataclass

from rdkit import Chem

from screen.errors import InputError

__all__ = ["RepeatUnit", "oligomer_smiles", "oligomer_series", "count_attachments", "CAPS"]

#: allowed end caps
CAPS = ("H", "methyl")


def count_attachments(mol: Chem.Mol) -> int:
    """Number of attachment (dummy, atomic number 0) atoms of a molecule.

    Examples
    --------
    >>> count_attachments(Chem.MolFromSmiles("[*]c1ccc([*])s1"))
    2
    """
    return sum(1 for a in mol.GetAtoms() if a.GetAtomicNum() == 0)


def _ordered_dummies(mol: Chem.Mol) -> tuple[int, int]:
    dummies = [a for a in mol.GetAtoms() if a.GetAtomicNum() == 0]
    if len(dummies) != 2:
        raise InputError(f"a repeat unit needs exactly two attachment points, found {len(dummies)}")
    mapped = sorted(dummies, key=lambda a: (a.GetAtomMapNum() != 1, a.GetAtomMapNum() or 99, a.GetIdx()))
    return mapped[0].GetIdx(), mapped[1].GetIdx()


def _anchor(mol: Chem.Mol, dummy: int) -> int:
    atom = mol.GetAtomWithIdx(dummy)
    bonds = atom.GetBonds()
    if len(bonds) != 1 or bonds[0].GetBondType() != Chem.BondType.SINGLE:
        raise InputError("each attachment point must sit on exactly one single bond")
    other = bonds[0].GetOtherAtom(atom)
    if other.GetAtomicNum() <= 1:
        raise InputError("an attachment point must be bonded to a heavy atom")
    return other.GetIdx()


@dataclass(frozen=True)
class RepeatUnit:
    """A validated polymer repeat unit.

    Attributes
    ----------
    smiles : str
        Canonical SMILES of the unit with its two attachment points.
    head, tail : int
        Atom indices (in :attr:`mol`) of the head and tail attachment atoms.
    head_anchor, tail_anchor : int
        The heavy atoms the attachment points are bonded to.
    """

    smiles: str
    mol: Chem.Mol
    head: int
    tail: int
    head_anchor: int
    tail_anchor: int

    @classmethod
    def from_smiles(cls, smiles: str) -> "RepeatUnit":
        """Parse and validate a repeat unit (raises :class:`screen.errors.InputError`)."""
        mol = Chem.MolFromSmiles(smiles)
        if mol is None:
            raise InputError(f"cannot parse the repeat unit {smiles!r}")
        head, tail = _ordered_dummies(mol)
        head_anchor, tail_anchor = _anchor(mol, head), _anchor(mol, tail)
        if head_anchor == tail_anchor:
            raise InputError("both attachment points sit on the same atom")
        return cls(Chem.MolToSmiles(mol), mol, head, tail, head_anchor, tail_anchor)

    @property
    def heavy_atoms(self) -> int:
        """Heavy atoms of one unit, attachment points not counted."""
        return sum(1 for a in self.mol.GetAtoms() if a.GetAtomicNum() > 1)

    @property
    def atoms_with_h(self) -> int:
        """Atoms of one unit with hydrogens, attachment points not counted."""
        return Chem.AddHs(self.mol).GetNumAtoms() - 2

    @property
    def conjugation_length(self) -> int:
        """Double bonds along the shortest head→tail path of a Kekulé structure.

        This is the number of coupled oscillators per repeat unit in Kuhn's model
        (:func:`screen.extrapolate.kuhn_fit`): 2 for thiophene, 3 for
        phenylene-vinylene.
        """
        mol = Chem.Mol(self.mol)
        Chem.Kekulize(mol, clearAromaticFlags=True)
        path = Chem.GetShortestPath(mol, self.head_anchor, self.tail_anchor)
        doubles = 0
        for a, b in zip(path, path[1:]):
            if mol.GetBondBetweenAtoms(a, b).GetBondType() in (Chem.BondType.DOUBLE, Chem.BondType.TRIPLE):
                doubles += 1
        # a double bond that leaves the path at an anchor still belongs to the chain
        for anchor in (self.head_anchor, self.tail_anchor):
            for bond in mol.GetAtomWithIdx(anchor).GetBonds():
                other = bond.GetOtherAtomIdx(anchor)
                if other not in path and bond.GetBondType() == Chem.BondType.DOUBLE:
                    doubles += 1
        return max(1, doubles)


def oligomer_smiles(unit: RepeatUnit | str, n: int, cap: str = "H") -> str:
    """Canonical SMILES of the head-to-tail n-mer of a repeat unit.

    Parameters
    ----------
    unit : RepeatUnit or str
        The repeat unit (SMILES with two attachment points accepted).
    n : int
        Number of repeat units (≥ 1).
    cap : {"H", "methyl"}
        End groups replacing the two free attachment points.
    """
    if isinstance(unit, str):
        unit = RepeatUnit.from_smiles(unit)
    if n < 1:
        raise InputError(f"an oligomer needs n >= 1, got {n}")
    if cap not in CAPS:
        raise InputError(f"unknown end cap {cap!r}; allowed: {', '.join(CAPS)}")
    size = unit.mol.GetNumAtoms()
    combo = unit.mol
    for _ in range(n - 1):
        combo = Chem.CombineMols(combo, unit.mol)
    rw = Chem.RWMol(combo)
    for k in range(n - 1):
        rw.AddBond(k * size + unit.tail_anchor, (k + 1) * size + unit.head_anchor, Chem.BondType.SINGLE)
    remove = [k * size + unit.tail for k in range(n - 1)] + [(k + 1) * size + unit.head for k in range(n - 1)]
    ends = ((unit.head, unit.head_anchor), ((n - 1) * size + unit.tail, (n - 1) * size + unit.tail_anchor))
    for idx, anchor in ends:
        atom = rw.GetAtomWithIdx(idx)
        atom.SetAtomMapNum(0)
        atom.SetIsotope(0)
        if cap == "methyl":
            atom.SetAtomicNum(6)
            atom.SetNoImplicit(False)
        else:
            # the hydrogen takes the attachment point's place on its anchor: written explicitly, since an
            # aromatic heteroatom gets no implicit hydrogen (an N-linked carbazole, pyrrole or imidazole
            # needs its [nH] back, else the ring cannot be kekulised)
            end = rw.GetAtomWithIdx(anchor)
            end.SetNumExplicitHs(end.GetNumExplicitHs() + 1)
            remove.append(idx)
    for idx in sorted(remove, reverse=True):
        rw.RemoveAtom(idx)
    mol = rw.GetMol()
    for atom in mol.GetAtoms():
        if not atom.GetIsAromatic() or atom.GetAtomicNum() == 6:
            atom.SetNoImplicit(False)
    Chem.SanitizeMol(mol)
    return Chem.MolToSmiles(mol)


def oligomer_series(unit: RepeatUnit | str, n_max: int = 4, max_atoms: int = 250,
                    cap: str = "H", count=None) -> list[tuple[int, str]]:
    """Oligomers n = 1 … n_max that stay within ``max_atoms`` (hydrogens included).

    The series always holds at least the monomer. Returns ``[(n, smiles), …]``.
    ``count`` (SMILES → atoms) says how many atoms an oligomer will have when it is
    computed, e.g. after side-chain truncation; by default all atoms with hydrogens.

    Examples
    --------
    >>> [n for n, _ in oligomer_series("[*]c1ccc([*])s1", n_max=6, max_atoms=20)]
    [1, 2]
    """
    if isinstance(unit, str):
        unit = RepeatUnit.from_smiles(unit)
    out = []
    for n in range(1, max(1, n_max) + 1):
        smiles = oligomer_smiles(unit, n, cap)
        atoms = count(smiles) if count else Chem.AddHs(Chem.MolFromSmiles(smiles)).GetNumAtoms()
        if n > 1 and atoms > max_atoms:
            break
        out.append((n, smiles))
    return out
