"""Dicyanomethylene-indanone ("IC") end groups of acceptor–donor–acceptor molecules.

The fused-ring non-fullerene acceptors (ITIC- and Y-type) end in
2-(3-oxo-2,3-dihydro-1H-inden-1-ylidene)malononitrile groups, often fluorinated,
chlorinated or methylated on the benzo ring. Their film optical gaps sit below
what the optical-gap model gives every other material: on the shipped force-field
protocol all eleven of the film set came out too wide, +0.16 eV on average (Y6
and BTP-eC9 +0.29 eV; on xTB geometries +0.23 eV on average), while the six other
non-fullerene acceptors came out too narrow, −0.12 eV on average. Two causes act
in the same direction: a quadrupolar intramolecular charge-transfer excitation
that the tight-binding orbital and ΔSCF gaps describe no better than any other
feature does, and a film absorption red-shifted by ordered (J-type) packing well
beyond the common 0.1–0.3 eV (Y6: absorption maximum ≈ 730 nm in chloroform,
≈ 820 nm in the film, Yuan et al. [1]_, from memory). The optical-gap model
carries a class term for it (:data:`screen.calibration.optical.CLASS_TERMS`),
fitted like the fullerenes' ``cage`` term (``benchmarks/endgroup_term.py`` shows
what it is worth).

Recognised: the indanone ring with its exocyclic C=C(CN)₂ and C=O on the
five-membered ring and any substituents on the benzo ring. Not recognised
(treated as any other molecule): thiophene-fused analogues, the rhodanine and
dicyanovinyl ends of other acceptors.

References
----------
.. [1] J. Yuan et al., Joule 3 (2019) 1140. :doi:`10.1016/j.joule.2019.01.004`

Examples
--------
>>> ic_end_smiles("N#CC(C#N)=C1C(=Cc2cccs2)C(=O)c2ccccc21")  # thienyl-methylene IC
True
>>> ic_end_smiles("N#CC(C#N)=C1C(=Cc2cccs2)C(=O)c2cc(F)c(F)cc21")  # difluorinated IC
True
>>> ic_end_smiles("N#CC(C#N)=Cc1ccc(s1)-c1ccc(C=C(C#N)C#N)s1")  # dicyanovinyl ends: not IC
False
>>> ic_end_smiles("[*]c1ccc([*])s1"), ic_end_smiles("not a smiles")
(False, False)
"""

from __future__ import annotations

from functools import lru_cache

from rdkit import Chem, RDLogger

__all__ = ["IC_END_SMARTS", "ic_end_smiles"]

#: the end group: malononitrile-ylidene and carbonyl on the five-membered ring of an indanone (any benzo substituents)
IC_END_SMARTS = "N#CC(C#N)=C1C(=[#6])C(=O)c2ccccc12"
_PATTERN = Chem.MolFromSmarts(IC_END_SMARTS)


@lru_cache(maxsize=65536)
def ic_end_smiles(smiles: str) -> bool:
    """True when the structure carries at least one IC end group (False when the SMILES does not parse); cached."""
    RDLogger.DisableLog("rdApp.*")
    mol = Chem.MolFromSmiles(str(smiles))
    return bool(mol is not None and mol.HasSubstructMatch(_PATTERN))
