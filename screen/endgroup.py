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

A second, narrower class (:func:`y_core_smiles`): IC-ended acceptors whose ladder core
holds a fully fused 2,1,3-benzothiadiazole (every carbon of its benzo ring shared with a
second ring) -- the Y6/BTP family. With the IC term alone its film gaps still came out too
wide (Y6 and BTP-eC9 +0.14 eV, L8-BO +0.04 eV, leave-one-out on the default protocol)
while the ITIC-type IC acceptors came out too narrow (−0.04 to −0.13 eV): the Y-series
films red-shift more on packing (Y6 ≈ 90 nm from chloroform to film [1]_, ITIC-type
≈ 30–40 nm, from memory). The optical-gap model carries a term for it too; with three
members in the film set it is the smallest class the model has, and its worth is measured
on devices held out (docs/method.md, ``benchmarks/device_validation.py``). The same ladder core with a
benzoselenadiazole or an N-substituted benzotriazole (1H or 2H) in place of the benzothiadiazole is counted in the
class too (since
2026-12-05): the cause named above is the shape and packing of the A–DA′D–A molecule, which such an exchange keeps,
and without the term an acceptor chemist's benzoselenadiazole analogue of Y6 came out 0.17 eV wider in gap than Y6
(a chalcogen exchange that narrows the gap a little, from memory); with it, 1.43 eV against Y6's 1.39. No
acceptor with either core is in the calibration sets, so the fit does not move; one is in the device set, the
benzotriazole-core Y1 (film optical gap 1.44 eV, recalled in ``models/reference/devices.csv``): computed with the
default protocol 1.45 eV with the term, 1.58 eV without. A quinoxaline (six-membered) core and the oxygen analogue
(benzoxadiazole) are not counted: no such acceptor was at hand to check.

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
>>> y_core_smiles("N#CC(C#N)=C1C(=Cc2ccc(-c3ccc4nsnc4c3)s2)C(=O)c2ccccc21")  # IC ends, a free benzothiadiazole
False
"""

from __future__ import annotations

from functools import lru_cache

from rdkit import Chem

from screen.chem import smiles_has

__all__ = ["IC_END_SMARTS", "ic_end_smiles", "Y_CORE_SMARTS", "y_core_smiles"]

#: the end group: malononitrile-ylidene and carbonyl on the five-membered ring of an indanone (any benzo substituents)
IC_END_SMARTS = "N#CC(C#N)=C1C(=[#6])C(=O)c2ccccc12"
_PATTERN = Chem.MolFromSmarts(IC_END_SMARTS)
#: a 2,1,3-benzothiadiazole -- or its selenium or 2H-triazole analogue -- whose six benzo carbons are each in two
#: rings (fused into a ladder core)
Y_CORE_SMARTS = "[#6;R2]1:[#6;R2]:[#6;R2]2:[#7]:[#16,#34,#7]:[#7]:[#6;R2]:2:[#6;R2]:[#6;R2]:1"
_Y_CORE = Chem.MolFromSmarts(Y_CORE_SMARTS)


@lru_cache(maxsize=65536)
def ic_end_smiles(smiles: str) -> bool:
    """True when the structure carries at least one IC end group (False when the SMILES does not parse); cached."""
    return smiles_has(smiles, _PATTERN)


@lru_cache(maxsize=65536)
def y_core_smiles(smiles: str) -> bool:
    """True for an IC-ended acceptor with a fully fused benzothiadiazole in its core (the Y6/BTP family; module
    docstring); False otherwise and when the SMILES does not parse. Cached."""
    return ic_end_smiles(smiles) and smiles_has(smiles, _Y_CORE)
