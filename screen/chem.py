"""Canonical SMILES and structure keys: the one home of a structure's identity.

Every stage that needs to know whether two SMILES are the same structure, or that needs a
path-safe name for a structure, uses these functions, so the prepare stage, the partner
resolution and the calibration sets always agree on the key of a molecule.

* :func:`canonical_form` -- canonical isomeric SMILES of an RDKit molecule (hydrogens made
  implicit, then one round trip through RDKit's default SMILES parser so that re-reading the
  canonical SMILES gives the same string again).
* :func:`canonical_smiles` -- the same, starting from SMILES text.
* :func:`structure_key` -- ``"m"`` + the first 16 hex digits of the SHA-1 of the canonical
  SMILES: 17 characters from ``[a-z0-9]``, safe as a file name.

A polymer repeat unit keeps its two attachment points as ``*`` in its canonical SMILES
(``*c1ccc(*)s1``); no molecule's canonical SMILES contains ``*``, so the key of a repeat unit
never equals the key of a molecule.

Examples
--------
>>> canonical_smiles("C1=CC=CC=C1")
'c1ccccc1'
>>> structure_key(canonical_smiles("OCC")) == structure_key(canonical_smiles("CCO"))
True
>>> canonical_smiles("[*]c1ccc([*])s1")
'*c1ccc(*)s1'
"""

from __future__ import annotations

import functools
import hashlib

from rdkit import Chem, rdBase

from screen.errors import InputError

__all__ = ["canonical_form", "canonical_smiles", "canonical", "structure_key", "smiles_has", "KEY_RECIPE"]

#: How :func:`structure_key` is computed (recorded in sidecar files).
KEY_RECIPE = "m + sha1(canonical isomeric SMILES, UTF-8)[:16]"


def canonical_form(mol: Chem.Mol) -> tuple[str, int]:
    """Return the canonical isomeric SMILES and the heavy-atom count of a sanitised molecule.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        A sanitised molecule (explicit hydrogen atoms are allowed; they are made implicit).
        Dummy atoms (attachment points) are kept as ``*``.

    Returns
    -------
    tuple of (str, int)
        The canonical SMILES -- exactly what RDKit's default parser and writer make of the
        SMILES once more, so that canonicalising the result again returns it unchanged -- and
        the number of heavy atoms (dummy atoms and hydrogens not counted).

    Examples
    --------
    >>> canonical_form(Chem.MolFromSmiles("OC(C)([H])C"))
    ('CC(C)O', 4)
    """
    with rdBase.BlockLogs():
        mol = Chem.RemoveHs(mol)
        first = Chem.MolToSmiles(mol)
        again = Chem.MolFromSmiles(first)
        canonical = Chem.MolToSmiles(again) if again is not None else first
        heavy = (again if again is not None else mol).GetNumHeavyAtoms()
    return canonical, heavy


def canonical_smiles(smiles: str) -> str:
    """Return the canonical isomeric SMILES of a SMILES string.

    Parameters
    ----------
    smiles : str
        Any SMILES RDKit can read and sanitise (surrounding blanks are ignored).  No checks
        beyond RDKit's are made here; the prepare stage's validation is
        :func:`screen.prepare.validate`.

    Returns
    -------
    str
        The canonical form (see :func:`canonical_form`).

    Raises
    ------
    screen.errors.InputError
        If RDKit cannot read the SMILES.

    Examples
    --------
    >>> canonical_smiles(" OCC ")
    'CCO'
    >>> canonical_smiles("C1CC")
    Traceback (most recent call last):
    ...
    screen.errors.InputError: SMILES 'C1CC' cannot be read by RDKit
    """
    text = smiles.strip()
    with rdBase.BlockLogs():
        mol = Chem.MolFromSmiles(text) if text else None
    if mol is None:
        raise InputError(f"SMILES {text!r} cannot be read by RDKit")
    return canonical_form(mol)[0]


@functools.lru_cache(maxsize=16384)  # the same reference structures are canonicalised on every read and join
def canonical(smiles: str) -> str:
    """Canonical SMILES with attachment points as bare ``*`` (map numbers and isotopes of dummy atoms dropped), ''
    when RDKit cannot read it: the key that joins reference rows with computed values
    (:mod:`screen.calibration.reference`) and finds a material given twice (:mod:`screen.calibration.refcheck`).

    Examples
    --------
    >>> canonical("[*:1]c1ccc([*:2])s1"), canonical("C1CC")
    ('*c1ccc(*)s1', '')
    """
    with rdBase.BlockLogs():  # an unreadable SMILES is '' here; the scoped block leaves RDKit's logging as it was
        mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        return ""
    for atom in mol.GetAtoms():
        if atom.GetAtomicNum() == 0:
            atom.SetAtomMapNum(0)
            atom.SetIsotope(0)
    return Chem.MolToSmiles(mol)


def structure_key(canonical_smiles: str) -> str:
    """Return the internal structure key of a canonical SMILES.

    Parameters
    ----------
    canonical_smiles : str
        Canonical isomeric SMILES (from :func:`canonical_smiles` or the prepare stage).

    Returns
    -------
    str
        ``"m"`` followed by the first 16 hex digits of the SHA-1 of the UTF-8 SMILES
        (17 characters from ``[a-z0-9]``; 64 bits, so accidental collisions are negligible
        for any realistic library, and :func:`screen.prepare.shard` checks for them anyway).

    Examples
    --------
    >>> structure_key("c1ccccc1")
    'm8448043181b9a6b0'
    """
    return "m" + hashlib.sha1(canonical_smiles.encode("utf-8")).hexdigest()[:16]


def smiles_has(smiles: str, pattern: Chem.Mol) -> bool:
    """True when ``smiles`` parses and contains the substructure ``pattern`` (RDKit's parse messages silenced).

    Examples
    --------
    >>> smiles_has("c1ccsc1", Chem.MolFromSmarts("[#16]")), smiles_has("not a smiles", Chem.MolFromSmarts("[#16]"))
    (True, False)
    """
    with rdBase.BlockLogs():
        mol = Chem.MolFromSmiles(str(smiles))
    return bool(mol is not None and mol.HasSubstructMatch(pattern))
