"""Anchoring groups of sensitiser dyes, recognised with RDKit SMARTS.

A dye must bind to the oxide surface for its excited state to inject.  The
groups recognised here are those used to bind organic dyes to TiO₂, ZnO, SnO₂
and NiO in the dye-cell literature [1]_, [2]_ (the acids also as their anions):

=========================  ============================================================
name                       pattern (most specific first)
=========================  ============================================================
cyanoacrylic acid          C=C(C#N)–COOH (the usual acceptor/anchor of D–π–A dyes)
rhodanine-3-acetic acid    5-ylidene thiazolidin-4-one with an N–CH₂–COOH arm and, at C2,
                           a thioxo group (rhodanine, as in D102) or an exocyclic C=C (the
                           2-ylidene ring that carries the acid in D149 and D205)
salicylate                 COOH ortho to a phenolic OH on an aromatic ring
hydroxamic acid            C–C(=O)–N–OH (not an N-hydroxyimide)
phosphonic acid            C–P(=O)(OH)₂ with its P–C bond (mono-esters: one OH, still
                           counted); phosphate esters (no P–C bond) are not anchors here
phosphinic acid            C₂P(=O)OH: two P–C bonds, one acidic OH
tetrazole                  5-substituted 1H- or 2H-tetrazole with its N–H (or anion): the acidic
                           isostere of a carboxylic acid; 1- or 2-alkylated tetrazoles do not count
8-hydroxyquinoline         chelating N,O anchor (the one fused pyridine that counts)
β-diketone (acac)          C–C(=O)–CH(R)–C(=O)–C or its enol (acetylacetonate-type chelate); a
                           Knoevenagel 2-ylidene-1,3-dione (no C–H, no enol) is an acceptor and a
                           squaraine's four-ring C–O core a chromophore, not anchors
sulfonic acid              C–S(=O)₂–OH (not a sulfate half-ester)
boronic acid               B(OH)₂
silanol / alkoxysilane     Si–OH or Si(OR)₃
catechol                   two OH on neighbouring carbons of a six-membered aromatic ring
                           (squaric acid's four-ring, aromatic to RDKit, is not a catechol)
carboxylic acid            any other C–C(=O)OH (not a carbonate or carbamate half-ester)
pyridine                   a terminal pyridyl: a pyridine ring (one N, five C, not fused) bonded
                           to the rest of the dye at C4 or C3 only, its other four positions
                           C–H (4-pyridyl binds to Lewis-acid sites of TiO₂ [3]_); a 2-pyridyl
                           (2-phenylpyridine, 2,2'-bipyridine: a chelating ligand, not an
                           anchor), a pyridine inside the π-bridge (two or more substituents),
                           diazines, triazines, quinoxalines and quinolines do not count
=========================  ============================================================

A specific group claims its atoms: the carboxylic acid inside a cyanoacrylic
acid is not counted twice.  Not recognised (reported as no anchor): esters,
amides, nitriles, ethers, thiols, single ketones, dicyanovinyl groups, phosphate esters and
squaric acid.  Tetrazole, 8-hydroxyquinoline and β-diketone anchors are among the alternatives to
carboxylic acids reviewed in [1]_ (from memory); the phosphinic acid is recognised by analogy with
the phosphonic acid (an acidic P–OH on a carbon-bonded phosphorus; from memory, also used to bind
dyes to TiO₂).

References
----------
.. [1] L. Zhang, J. M. Cole, "Anchoring groups for dye-sensitized solar
   cells", ACS Appl. Mater. Interfaces 7 (2015) 3427–3455.
   :doi:`10.1021/am507334m` (from memory)
.. [2] A. Hagfeldt, G. Boschloo, L. Sun, L. Kloo, H. Pettersson,
   "Dye-sensitized solar cells", Chem. Rev. 110 (2010) 6595–6663.
   :doi:`10.1021/cr900356p`
.. [3] Y. Ooyama, S. Inoue, T. Nagano, K. Kushimoto, J. Ohshita, I. Imae,
   K. Komaguchi, Y. Harima, "Dye-sensitized solar cells based on donor–acceptor
   π-conjugated fluorescent dyes with a pyridine ring as an electron-withdrawing
   anchoring group", Angew. Chem. Int. Ed. 50 (2011) 7429–7433.
   :doi:`10.1002/anie.201102552` (from memory)

Examples
--------
>>> find_anchors("OC(=O)C(C#N)=Cc1ccc(N(c2ccccc2)c2ccccc2)cc1")
['cyanoacrylic acid']
>>> find_anchors("N#CC(C#N)=Cc1ccc(N(c2ccccc2)c2ccccc2)cc1")
[]
>>> find_anchors("c1ccc(-c2ccncc2)cc1"), find_anchors("Oc1ccccc1O")
(['pyridine'], ['catechol'])
>>> find_anchors("c1ccc(-c2ccccn2)cc1"), find_anchors("CCOP(=O)(O)OCC"), find_anchors("O=c1c(O)c(O)c1=O")
([], [], [])
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

__all__ = ["ANCHORS", "Anchor", "find_anchors", "anchors_of_mol", "anchor_names"]

_ACID_O = "[OX2H1,OX1-]"


@dataclass(frozen=True)
class Anchor:
    """One anchoring group: name, SMARTS and a plain-words note."""

    name: str
    smarts: str
    note: str


#: anchoring groups, most specific first (a match claims its atoms)
ANCHORS: tuple[Anchor, ...] = (
    Anchor("cyanoacrylic acid", f"[CX3](=[CX3])(C#N)[CX3](=O){_ACID_O}",
           "α-cyanoacrylic acid: acceptor and anchor of most D–π–A dyes"),
    Anchor("rhodanine-3-acetic acid",
           f"[#6]1(=[#6])[#16][#6](=[#16,#6])[#7]([CH2][CX3](=O){_ACID_O})[#6]1=O",
           "rhodanine-3-acetic acid (or its 2-ylidene thiazolidin-4-one form): anchor of the indoline dye family"),
    Anchor("salicylate", f"[OX2H1,OX1-]c:c[CX3](=O){_ACID_O}", "salicylic acid: chelating anchor"),
    Anchor("hydroxamic acid", "[#6][CX3](=O)[NX3;!$(N([CX3]=O)[CX3]=O)][OX2H1,OX1-]",
           "hydroxamic acid: water-stable chelating anchor"),
    Anchor("phosphonic acid", f"[PX4;$(P-[#6])](=O)({_ACID_O})[OX2]", "phosphonic acid: strong, water-stable anchor"),
    Anchor("phosphinic acid", f"[PX4](-[#6])(-[#6])(=O){_ACID_O}", "phosphinic acid: one acidic P–OH"),
    Anchor("tetrazole", "[#6]-[c;$(c1:n:n:[nH1,n-]:n:1),$(c1:[nH1,n-]:n:n:n:1)]",
           "tetrazole N–H: acidic carboxylic-acid isostere"),
    Anchor("8-hydroxyquinoline", "[OX2H1,OX1-]c1cccc2cccnc12", "8-hydroxyquinoline: N,O-chelating anchor"),
    Anchor("β-diketone (acac)",
           "[#6][CX3;!r4](=O)[$([CX4;H1,H2;!r4][CX3](=O)[#6]),$([CX3;!r4]=[CX3]([OX2H1,OX1-])[#6])]",
           "1,3-diketone / acetylacetonate-type chelating anchor"),
    Anchor("sulfonic acid", f"[#6][SX4](=O)(=O){_ACID_O}", "sulfonic acid: weak anchor to oxides"),
    Anchor("boronic acid", f"[BX3]({_ACID_O}){_ACID_O}", "boronic acid"),
    Anchor("silanol", f"[Si]{_ACID_O}", "silanol: condenses with surface OH"),
    Anchor("alkoxysilane", "[Si]([OX2][#6])([OX2][#6])[OX2][#6]", "trialkoxysilane: condenses with surface OH"),
    Anchor("catechol", "[OX2H1,OX1-][c;r6]:[c;r6][OX2H1,OX1-]",
           "catechol: binds TiO₂ directly (charge-transfer complex)"),
    Anchor("carboxylic acid", f"[#6][CX3](=O){_ACID_O}", "carboxylic acid: the common anchor"),
    Anchor("pyridine", "[nX2;R1;$(n1:[cH1]:[cH1]:[c;H0;R1]:[cH1]:[cH1]:1),$(n1:[cH1]:[c;H0;R1]:[cH1]:[cH1]:[cH1]:1)]",
           "terminal 4- or 3-pyridyl nitrogen: binds Lewis-acid surface sites"),
)


@lru_cache(maxsize=1)
def _patterns():
    from rdkit import Chem

    out = []
    for anchor in ANCHORS:
        patt = Chem.MolFromSmarts(anchor.smarts)
        if patt is None:  # pragma: no cover - a broken pattern is a bug here
            raise RuntimeError(f"anchor SMARTS for {anchor.name!r} does not parse")
        out.append((anchor.name, patt))
    return tuple(out)


def anchors_of_mol(mol) -> list[str]:
    """Anchor names found in an RDKit molecule, in :data:`ANCHORS` order, each once.

    A match is kept only when none of its atoms is claimed by a more specific
    group already found.
    """
    claimed: set[int] = set()
    found: list[str] = []
    for name, patt in _patterns():
        for match in mol.GetSubstructMatches(patt, uniquify=True):
            atoms = set(match)
            if atoms & claimed:
                continue
            claimed |= atoms
            if name not in found:
                found.append(name)
    return found


@lru_cache(maxsize=65536)
def find_anchors(smiles: str) -> list[str] | None:
    """Anchor names of a SMILES (see the module table); None if RDKit cannot read it.

    Examples
    --------
    >>> find_anchors("OC(=O)CN1C(=O)C(=Cc2cccs2)SC1=S")
    ['rhodanine-3-acetic acid']
    >>> find_anchors("O=C(O)c1ccccc1O"), find_anchors("CCOC(=O)c1ccccc1")
    (['salicylate'], [])
    >>> find_anchors("not a smiles") is None
    True
    """
    from rdkit import Chem, rdBase

    with rdBase.BlockLogs():
        mol = Chem.MolFromSmiles(str(smiles))
    if mol is None:
        return None
    return anchors_of_mol(mol)


def anchor_names() -> list[str]:
    """Every recognised anchor name, in priority order.

    Examples
    --------
    >>> anchor_names()[0], anchor_names()[-1]
    ('cyanoacrylic acid', 'pyridine')
    """
    return [a.name for a in ANCHORS]
