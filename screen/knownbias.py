"""Structure families whose calibrated levels are known to be off held out: an info flag, not a correction.

Diketopyrrolopyrrole (DPP) materials (``dpp``). Held out, the default protocol puts the film optical gaps of all
three DPP materials of the film set (PDPP3T, PBDTT-DPP, DPP(TBFu)₂) 0.36–0.53 eV too wide and their HOMOs
0.16–0.34 eV too deep; on xTB-optimised geometries 0.25–0.26 eV and 0.08–0.23 eV (``benchmarks/known_bias.py``: each
structure left out of every reference set). The cause is mostly geometric:
MMFF94 twists the bonds between the DPP core and its flanking rings, and the GFN2-xTB orbital gap of DPP(TBFu)₂
falls from 1.64 eV on that geometry to 1.35 eV with the bonds held planar and 1.22 eV xTB-optimised
(``benchmarks/dpp_geometry.py``). A class term would hide a geometry error, so the ranking only says so
(``known_family_bias``): such a candidate's Voc and rank lean high, its Jsc low where it is the absorber.

Naphthalene diimide (NDI) polymers (``ndi_polymer``): a naphthalene-1,4,5,8-tetracarboxylic diimide core on the
backbone of a polymer repeat unit (the shortest bond path between its two attachment points runs through the
core). Held out, the default protocol puts the film optical gaps of both NDI polymers of the film set (N2200 and
p(gNDI-T2): one NDI–bithiophene backbone, measured by two groups) 0.24–0.25 eV too narrow and their LUMOs
0.28–0.31 eV too deep (HOMOs 0.18–0.32 eV too deep), each 1.0–1.1σ of the σ that calibration gives it; on the
xTB-geometry protocol the gaps 0.04–0.15 eV and the LUMOs 0.15 eV (``benchmarks/known_bias.py``). The default gap
model adds a fundamental-gap term (0.177 × (IP − EA)) to the orbital gap; that term falls along every polymer's
oligomer series alike (N2200 0.48 eV from the monomer to the chain limit, the other polymers 0.19–1.00 eV), but
these two start from the smallest orbital gaps of the film set's polymers (0.53 and 0.61 eV: HOMO and LUMO on different
units): refitted without the term the gap model puts them −0.07 and −0.08 eV off and the other polymers +0.18 eV
on average (the xTB-geometry protocol's gap model has no such term). The same gap error shows on the two donor
polymers whose HOMO and LUMO are as separate (PffBT4T-2OD −0.27, PBDTFBT −0.39 eV), which no structure rule
catches. As the acceptor of a pair such a candidate's Jsc and PCE lean high, and its Voc can sit on the loss
floor of its own too-narrow gap (the info flag ``known_family_bias_ndi``). Perylene diimides are not in the family: PTCDI-C8 held out is close (gap +0.10,
LUMO +0.03 eV), while the one bay-linked PDI dimer of the film set is off like the NDI polymers (gap −0.25, LUMO
−0.45 eV, −1.4σ; a molecule, one row: no family rule rests on it). NDI small molecules and NDI side groups are not in
it either (N,N′-dimethyl-NDI in the gas/solution optical-gap set held out: −0.07 eV).

Examples
--------
>>> known_bias("CN1C(=O)C2=C(c3ccc(C)s3)N(C)C(=O)C2=C1c1ccc(C)s1"), known_bias("O=C1NC(=O)c2ccccc21")
('dpp', '')
>>> known_bias("[*]c1cc2c3c(c(-c4ccc([*])s4)cc4c3c1C(=O)N(C)C4=O)C(=O)N(C)C2=O")
'ndi_polymer'
>>> known_bias("CN1C(=O)c2ccc3C(=O)N(C)C(=O)c4ccc(C1=O)c2c34")  # an NDI small molecule: no evidence
''
"""

from __future__ import annotations

from functools import lru_cache

from rdkit import Chem, rdBase

from screen.chem import smiles_has

__all__ = ["DPP_SMARTS", "NDI_SMARTS", "FAMILIES", "CT_POLYMER_GAP_EV", "CT_POLYMER_OVERLAP", "known_bias",
           "ct_polymer"]

#: the pyrrolo[3,4-c]pyrrole-1,4-dione core, written without aromaticity (RDKit keeps it non-aromatic)
DPP_SMARTS = "O=C1[#7][#6]=[#6]2[#6]1=[#6][#7][#6]2=O"
_DPP = Chem.MolFromSmarts(DPP_SMARTS)
#: the naphthalene-1,4,5,8-tetracarboxylic diimide core: both peri pairs of one naphthalene closed as imides
#: (a perylene diimide has one imide on each of its two naphthalene halves and does not match)
NDI_SMARTS = "O=[#6]1[#7][#6](=O)c2ccc3[#6](=O)[#7][#6](=O)c4ccc1c2c34"
_NDI = Chem.MolFromSmarts(NDI_SMARTS)
#: family codes in the order a row matching several is named (``+``-joined); ``ct_polymer`` is told by the computed
#: levels (:func:`ct_polymer`), the others by the structure (:func:`known_bias`)
FAMILIES = ("dpp", "ndi_polymer", "ct_polymer")
#: a polymer whose chain-limit tight-binding HOMO and LUMO sit on different units: orbital gap below this [eV] ...
CT_POLYMER_GAP_EV = 1.0
#: ... and |HOMO–LUMO spatial overlap| below this (Löwdin, ``xtb_overlap_hl``; the next reference polymers lie at 0.11
#: and above, the four below it at 0.03 and less)
CT_POLYMER_OVERLAP = 0.05


def ct_polymer(representation, gap_ev, overlap) -> bool:
    """A polymer whose HOMO and LUMO sit on different units (``ct_polymer``): held out, all four such polymers of the
    film set came out with film optical gaps too narrow.

    N2200 −0.24, p(gNDI-T2) −0.25, PffBT4T-2OD −0.27 and PBDTFBT −0.39 eV (leave-one-out residuals of the default
    protocol's film-gap model), and the polymerised Y-series acceptor PY-IT of the device set 0.25 eV too narrow
    (its reference row ``pm6-pyit-2020``); no molecule of the optical-gap reference rows has the signature
    (``benchmarks/known_bias.py``, an all-polymer audit, 2026-12-05). The default gap model's fundamental-gap term
    narrows an already small orbital gap further for such a chain; a signature found by looking at residuals, so
    an info flag, never a correction.

    Examples
    --------
    >>> ct_polymer("polymer", 0.86, 0.001), ct_polymer("polymer", 0.98, 0.55), ct_polymer("molecule", 0.5, 0.0)
    (True, False, False)
    """
    try:
        gap, ovl = float(gap_ev), abs(float(overlap))
    except (TypeError, ValueError):
        return False
    return str(representation).strip() == "polymer" and gap < CT_POLYMER_GAP_EV and ovl < CT_POLYMER_OVERLAP


def _ndi_on_backbone(smiles: str) -> bool:
    """True for a repeat unit (exactly two attachment points) with an NDI core on the path between them.

    Examples
    --------
    >>> _ndi_on_backbone("[*]CC([*])CCn1c(=O)c2ccc3c(=O)n(C)c(=O)c4ccc(c1=O)c2c34")  # an NDI side group
    False
    """
    with rdBase.BlockLogs():
        mol = Chem.MolFromSmiles(str(smiles))
    if mol is None:
        return False
    ends = [a.GetIdx() for a in mol.GetAtoms() if a.GetAtomicNum() == 0]
    if len(ends) != 2:
        return False
    path = set(Chem.GetShortestPath(mol, *ends))
    return any(path.intersection(match) for match in mol.GetSubstructMatches(_NDI))


@lru_cache(maxsize=65536)
def known_bias(smiles: str) -> str:
    """The family code of a SMILES with a known held-out bias (``dpp``, ``ndi_polymer``; both ``+``-joined in
    :data:`FAMILIES` order), else ``""`` (also when it does not parse).

    Parameters
    ----------
    smiles : str
        A molecule or a polymer repeat unit.

    Returns
    -------
    str
    """
    found = {"dpp": smiles_has(smiles, _DPP), "ndi_polymer": _ndi_on_backbone(smiles)}
    return "+".join(code for code in FAMILIES if found.get(code))
