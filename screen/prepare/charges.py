"""Unphysical charge separation in a neutral input (reason ``charge_separated_sp3``).

A net-neutral structure may carry formal charges that describe a real polar bonding
situation: nitro groups, N-oxides, ylides on heteroatoms, conjugated zwitterions.  Charges
placed on a saturated carbon are different: they have no resonance form that spreads them,
and in practice they are drawing artefacts (e.g. a ``[C+]`` left with four single bonds in a
squaraine-type donor drawn from its zwitterionic form).  Two checks find them:

* :func:`overbonded_charged_carbon` (before sanitisation, so that the artefact is named
  instead of being reported as a plain valence error): a charged carbon with four or more
  single bonds, counting hydrogens.
* :func:`localised_carbon_charge` (after sanitisation): a carbanion that RDKit perceives as
  sp³ (its lone pair not conjugated with a pi system) and that is not bonded to a positively
  charged heteroatom (an ylide), or a carbocation with only single bonds, none of them
  conjugated, and no lone-pair heteroatom or negatively charged heteroatom next to it.

Both return None for a structure with a net charge (that is the ``charged`` check's business).

Examples
--------
>>> from rdkit import Chem
>>> localised_carbon_charge(Chem.MolFromSmiles("C[CH-]CC[NH3+]")) is not None
True
>>> localised_carbon_charge(Chem.MolFromSmiles("C[S+](C)[CH2-]")) is None  # ylide
True
>>> overbonded_charged_carbon(Chem.MolFromSmiles("CC[C+](C)(C)CC[O-]", sanitize=False))
... # doctest: +ELLIPSIS
'atom 2 (C, charge +1) is a carbocation with four single bonds...'
"""

from __future__ import annotations

from rdkit import Chem

__all__ = ["localised_carbon_charge", "overbonded_charged_carbon"]

#: Elements whose neutral or anionic atoms have a lone pair that can stabilise a carbocation.
_LONE_PAIR_DONORS = frozenset({7, 8, 9, 15, 16, 17, 34, 35, 53})

_OPT_IN = "or set prepare.allow_charge_separation to accept it"


def _net_charge(mol: Chem.Mol) -> int:
    return sum(a.GetFormalCharge() for a in mol.GetAtoms())


def _charged_carbons(mol: Chem.Mol) -> list[Chem.Atom]:
    return [a for a in mol.GetAtoms() if a.GetAtomicNum() == 6 and a.GetFormalCharge() != 0]


def _kind(atom: Chem.Atom) -> str:
    return "carbocation" if atom.GetFormalCharge() > 0 else "carbanion"


def _all_single(atom: Chem.Atom) -> bool:
    return all(b.GetBondType() == Chem.BondType.SINGLE for b in atom.GetBonds())


def overbonded_charged_carbon(mol: Chem.Mol) -> str | None:
    """Message for a charged carbon with four single bonds in a net-neutral structure, or None.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        The parsed structure, not yet sanitised (hydrogens as written in bracket atoms).
    """
    if _net_charge(mol) != 0:
        return None
    for atom in _charged_carbons(mol):
        sigma = atom.GetDegree() + atom.GetNumExplicitHs()
        if _all_single(atom) and sigma >= 4:
            return (
                f"atom {atom.GetIdx()} (C, charge {atom.GetFormalCharge():+d}) is a {_kind(atom)} "
                f"with {'four' if sigma == 4 else sigma} single bonds (counting hydrogens), i.e. "
                "on an sp3 carbon: a charged carbon cannot have four bonds, so the charges in "
                "this neutral structure are a drawing artefact (seen e.g. in squaraine-type "
                "dyes drawn from a zwitterionic form); draw the uncharged structure, or put the "
                "charges on conjugated atoms"
            )
    return None


def _stabilised(atom: Chem.Atom) -> bool:
    """Whether a charged carbon has a neighbour or pi system that makes its charge physical."""
    neighbours = list(atom.GetNeighbors())
    if atom.GetFormalCharge() < 0:
        if atom.GetHybridization() != Chem.HybridizationType.SP3:
            return True  # lone pair conjugated with a pi system (enolate, allyl, aromatic, ...)
        return any(n.GetAtomicNum() != 6 and n.GetFormalCharge() > 0 for n in neighbours)
    if not _all_single(atom) or any(b.GetIsConjugated() for b in atom.GetBonds()):
        return True
    for n in neighbours:
        if n.GetAtomicNum() != 6 and n.GetFormalCharge() < 0:
            return True  # a polar bond written ionically, like C=O as [C+][O-]
        if n.GetAtomicNum() in _LONE_PAIR_DONORS and n.GetFormalCharge() <= 0:
            return True  # iminium / oxocarbenium-type resonance
    return False


def localised_carbon_charge(mol: Chem.Mol) -> str | None:
    """Message for a localised carbanion or carbocation in a net-neutral structure, or None.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        A sanitised structure (hybridisation and conjugation perceived).
    """
    if Chem.GetFormalCharge(mol) != 0:
        return None
    for atom in _charged_carbons(mol):
        if _stabilised(atom):
            continue
        if atom.GetFormalCharge() < 0:
            why = ("on an sp3 carbon, not conjugated with a pi system and not bonded to a "
                   "positively charged heteroatom (an ylide)")
        else:
            why = ("with only single bonds and no pi system, lone pair or negatively charged "
                   "heteroatom next to it")
        return (
            f"atom {atom.GetIdx()} (C, charge {atom.GetFormalCharge():+d}) is a {_kind(atom)} "
            f"{why}: this charge separation in a neutral structure is not physical; draw the "
            f"uncharged structure, {_OPT_IN}"
        )
    return None
