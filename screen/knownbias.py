"""Structure families whose calibrated levels are known to be off held out: an info flag, not a correction.

Diketopyrrolopyrrole (DPP) materials. Held out, the default protocol puts the film optical gaps of all three
DPP materials of the film set (PDPP3T, PBDTT-DPP, DPP(TBFu)₂) 0.36–0.54 eV too wide and their HOMOs 0.16–0.34 eV
too deep; on xTB-optimised geometries 0.15–0.26 eV and 0.08–0.23 eV. The cause is mostly geometric: MMFF94
twists the bonds between the DPP core and its flanking rings, and the GFN2-xTB orbital gap of DPP(TBFu)₂ falls
from 1.64 eV on that geometry to 1.35 eV with the bonds held planar and 1.22 eV xTB-optimised
(``benchmarks/dpp_geometry.py``). A class term would hide a geometry error, so the ranking only says so
(``known_family_bias``): such a candidate's Voc and rank lean high, its Jsc low where it is the absorber.

Examples
--------
>>> known_bias("CN1C(=O)C2=C(c3ccc(C)s3)N(C)C(=O)C2=C1c1ccc(C)s1"), known_bias("O=C1NC(=O)c2ccccc21")
('dpp', '')
"""

from __future__ import annotations

from functools import lru_cache

from rdkit import Chem

from screen.chem import smiles_has

__all__ = ["DPP_SMARTS", "known_bias"]

#: the pyrrolo[3,4-c]pyrrole-1,4-dione core, written without aromaticity (RDKit keeps it non-aromatic)
DPP_SMARTS = "O=C1[#7][#6]=[#6]2[#6]1=[#6][#7][#6]2=O"
_DPP = Chem.MolFromSmarts(DPP_SMARTS)


@lru_cache(maxsize=65536)
def known_bias(smiles: str) -> str:
    """The family code of a SMILES with a known held-out bias (``dpp``), else ``""`` (also when it does not parse).

    Parameters
    ----------
    smiles : str
        A molecule or a polymer repeat unit.

    Returns
    -------
    str
    """
    return "dpp" if smiles_has(smiles, _DPP) else ""
