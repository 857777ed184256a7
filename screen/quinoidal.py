"""Thieno[3,4-b]thiophene units: the quinoidal donor polymers of the PTB7 family.

A thieno[3,4-b]thiophene (TT) unit in the backbone stabilises the quinoidal resonance form
of a conjugated polymer, which is why the TT/benzodithiophene copolymers (PTB7, PTB7-Th and
the PBDTTT series) have low optical gaps (Liang and Yu [1]_, from memory). A one-chain
calculation of short oligomers extrapolated to the chain limit does not reach that
delocalisation: on both shipped protocols all five such polymers of the film set came out
with film HOMOs 0.14–0.40 eV too deep and optical gaps up to 0.2 eV too wide (leave-one-out;
docs/method.md), a family off together, while the other benzodithiophene copolymers sat within
±0.1 eV. The calibration carries a class term for TT *polymers*
(:data:`screen.calibration.linear.CLASS_TERMS`, ``tt_polymer``), like the fullerenes'
``cage`` term; a small molecule with a TT unit is not in the class (no such reference row).

Recognised: the bicyclic thieno[3,4-b]thiophene ring system, any substituents (ester,
ketone, fluorine), anywhere in a polymer repeat unit.

References
----------
.. [1] Y. Liang, L. Yu, "Development of semiconducting polymers for solar energy harvesting",
   Acc. Chem. Res. 43 (2010) 1227 (from memory; DOI not checked).

Examples
--------
>>> tt_unit_smiles("[*]c1sc([*])c2sc(C(=O)OC)c(F)c12")  # fluorinated TT ester unit
True
>>> tt_unit_smiles("[*]c1ccc([*])s1"), tt_unit_smiles("c1cc2sccc2s1")  # thiophene; thieno[3,2-b]thiophene
(False, False)
>>> tt_unit_smiles("not a smiles")
False
"""

from __future__ import annotations

from functools import lru_cache

from rdkit import Chem

from screen.chem import smiles_has

__all__ = ["TT_SMARTS", "tt_unit_smiles"]

#: thieno[3,4-b]thiophene: a thiophene fused across its 3,4-bond to the 2,3-bond of a second thiophene
TT_SMARTS = "[#6]1:[#6]:[#6]2:[#6]:[#16]:[#6]:[#6]:2:[#16]:1"
_PATTERN = Chem.MolFromSmarts(TT_SMARTS)


@lru_cache(maxsize=65536)
def tt_unit_smiles(smiles: str) -> bool:
    """True when the structure holds a thieno[3,4-b]thiophene unit (False when the SMILES does not parse); cached."""
    return smiles_has(smiles, _PATTERN)
