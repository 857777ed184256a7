"""Attachment points: tell a polymer repeat unit from a molecule, and explain bad ones.

A SMILES with exactly two attachment points -- dummy atoms written ``*``, ``[*]``,
``[*:1]``/``[*:2]``, ``[1*]``/``[2*]`` (how an SDF R-group ``R#`` reaches the checks), or
CXSMILES ``_R1``/``_R2`` labels -- is a polymer repeat unit (``representation`` =
``polymer``).  Each attachment point must be joined by one single bond to a heavy atom of the
unit, and the two points must sit on different atoms.  Anything else with a dummy atom is
rejected with one of the reason codes of :data:`ATTACHMENT_REASONS`.

The labels of the attachment points (map numbers, isotope labels) only mark the ends; they are
removed from the canonical SMILES (:func:`clear_attachment_labels`), so ``[*:1]CC[*:2]``,
``[*:2]CC[*:1]`` and ``*CC*`` are one repeat unit with one key.

Examples
--------
>>> from rdkit import Chem
>>> classify(Chem.MolFromSmiles("[*:1]c1ccc([*:2])s1", sanitize=False))
('polymer', None)
>>> classify(Chem.MolFromSmiles("CCO", sanitize=False))
('molecule', None)
>>> classify(Chem.MolFromSmiles("*C*", sanitize=False))[1][0]
'attachment_same_atom'
"""

from __future__ import annotations

from rdkit import Chem

__all__ = ["ATTACHMENT_REASONS", "classify", "clear_attachment_labels", "describe", "attachment_stereo_note"]

#: Reason codes of :func:`classify`, in the order they are checked.
ATTACHMENT_REASONS: tuple[str, ...] = (
    "attachment_single",
    "attachment_too_many",
    "attachment_bond",
    "attachment_partner",
    "attachment_same_atom",
    "attachment_no_hydrogen",
    "attachment_not_conjugated",
)

_MAX_SHOWN = 6


def describe(atom: Chem.Atom) -> str:
    """Name a dummy atom as ``<text as written> at atom <index>`` for messages.

    Examples
    --------
    >>> from rdkit import Chem
    >>> mol = Chem.MolFromSmiles("[*:1]CC[2*]", sanitize=False)
    >>> describe(mol.GetAtomWithIdx(0)), describe(mol.GetAtomWithIdx(3))
    ('[*:1] at atom 0', '[2*] at atom 3')
    """
    label = atom.GetProp("atomLabel") if atom.HasProp("atomLabel") else ""
    if atom.GetAtomMapNum():
        text = f"[*:{atom.GetAtomMapNum()}]"
    elif atom.GetIsotope():
        text = f"[{atom.GetIsotope()}*]"
    elif label:
        text = label
    else:
        text = "*"
    return f"{text} at atom {atom.GetIdx()}"


def _bond_problem(atom: Chem.Atom) -> str | None:
    """Why a dummy atom is not joined by exactly one single bond, or None."""
    bonds = list(atom.GetBonds())
    if not bonds:
        return "has no bond"
    if len(bonds) > 1:
        return f"has {len(bonds)} bonds"
    kind = bonds[0].GetBondType()
    if kind != Chem.BondType.SINGLE:
        name = {Chem.BondType.DOUBLE: "double", Chem.BondType.TRIPLE: "triple",
                Chem.BondType.AROMATIC: "aromatic"}.get(kind, str(kind).lower())
        return f"is joined by {'an' if name[:1] in 'aeiou' else 'a'} {name} bond"
    return None


def _partner_problem(atom: Chem.Atom) -> str | None:
    """Why a dummy atom does not sit on a heavy atom of the unit, or None."""
    if atom.GetNumExplicitHs():
        return "carries a hydrogen"
    neighbour = atom.GetNeighbors()[0]
    if neighbour.GetAtomicNum() == 1:
        return f"is bonded to a hydrogen (atom {neighbour.GetIdx()})"
    if neighbour.GetAtomicNum() == 0:
        return f"is bonded to another attachment point ({describe(neighbour)})"
    return None


def _count_problem(dummies: list[Chem.Atom]) -> tuple[str, str] | None:
    """Reason and message if there are not exactly two attachment points (and at least one)."""
    if len(dummies) == 1:
        bonds = dummies[0].GetDegree()
        inside = (f"; it has {bonds} bonds, as if written inside a ring (C1=CC=C[*]1), where an attachment point "
                  "hangs off the unit by one bond") if bonds > 1 else ""
        return (
            "attachment_single",
            f"one attachment point ({describe(dummies[0])}): a polymer repeat unit needs "
            "exactly two attachment points ([*] at each end of the backbone) and a molecule "
            f"none (cap the open valence, e.g. with hydrogen or methyl){inside}",
        )
    if len(dummies) > 2:
        shown = ", ".join(describe(a) for a in dummies[:_MAX_SHOWN])
        if len(dummies) > _MAX_SHOWN:
            shown += f" and {len(dummies) - _MAX_SHOWN} more"
        units = Chem.GetMolFrags(dummies[0].GetOwningMol(), asMols=False, sanitizeFrags=False)
        if len(units) > 1 and len(dummies) == 2 * len(units):
            return (
                "attachment_too_many",
                f"{len(dummies)} attachment points in {len(units)} dot-separated units ({shown}): a copolymer is "
                "written as one repeat unit that holds its monomers bonded to each other, head first and tail "
                "last (e.g. [*]c1ccc(-c2ccc([*])cc2)s1 for alternating thiophene and phenylene)",
            )
        return (
            "attachment_too_many",
            f"{len(dummies)} attachment points ({shown}): a polymer repeat unit has exactly "
            "two ([*] at each end of the backbone); branched units, R-group templates and "
            "networks are not screened",
        )
    return None


def classify(mol: Chem.Mol) -> tuple[str, tuple[str, str] | None]:
    """Classify a parsed (unsanitised) structure by its attachment points.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        The structure as parsed, before sanitisation (explicit ``[H]`` atoms still present).

    Returns
    -------
    tuple
        ``(representation, problem)``: ``representation`` is ``"molecule"`` (no dummy atom),
        ``"polymer"`` (a valid two-point repeat unit) or ``""`` (invalid); ``problem`` is
        None or ``(reason, message)`` with a reason from :data:`ATTACHMENT_REASONS`.
    """
    dummies = [a for a in mol.GetAtoms() if a.GetAtomicNum() == 0]
    if not dummies:
        return "molecule", None
    problem = _count_problem(dummies)
    if problem is not None:
        return "", problem
    for atom in dummies:
        why = _bond_problem(atom)
        if why:
            return "", (
                "attachment_bond",
                f"the attachment point {describe(atom)} {why}: each attachment point of a "
                "repeat unit must be joined to the unit by exactly one single bond",
            )
    for atom in dummies:
        why = _partner_problem(atom)
        if why:
            return "", (
                "attachment_partner",
                f"the attachment point {describe(atom)} {why}: an attachment point must sit on "
                "a heavy atom of the repeat unit",
            )
    first, second = (a.GetNeighbors()[0] for a in dummies)
    if first.GetIdx() == second.GetIdx():
        return "", (
            "attachment_same_atom",
            f"both attachment points ({describe(dummies[0])}, {describe(dummies[1])}) are bonded "
            f"to atom {first.GetIdx()} ({first.GetSymbol()}): the two ends of a repeat unit must "
            "be different atoms of a conjugated backbone (e.g. [*]c1ccc([*])s1 for a thiophene unit)",
        )
    for atom in dummies:
        why = _no_hydrogen(atom)
        if why:
            return "", ("attachment_no_hydrogen", f"the attachment point {describe(atom)} {why}")
    why = _saturated_backbone(mol, first.GetIdx(), second.GetIdx())
    if why:
        return "", ("attachment_not_conjugated", why)
    return "polymer", None


def _no_hydrogen(atom: Chem.Atom) -> str:
    """Why a dummy atom sits on an aromatic atom that has no hydrogen to replace ('' when it does not).

    A polymer audit: ``[*]`` on a ring-fusion carbon or a pyridine-type nitrogen failed kekulisation and was
    blamed on the aromatic notation ("a pyrrole-type nitrogen needs [nH]"), which sent the chemist the wrong way.

    Examples
    --------
    >>> mol = Chem.MolFromSmiles("[*]c12sc(-c3ccc([*])s3)cc1scc2", sanitize=False)
    >>> _no_hydrogen(mol.GetAtomWithIdx(0))[:46]
    'sits on atom 1 (c), which has no hydrogen to r'
    >>> _no_hydrogen(Chem.MolFromSmiles("[*]c1ccc([*])s1", sanitize=False).GetAtomWithIdx(0))
    ''
    """
    other = atom.GetNeighbors()[0]
    if not other.GetIsAromatic() or other.GetFormalCharge():
        return ""
    z = other.GetAtomicNum()
    if other.GetNumExplicitHs():  # [*][cH]1...: the attachment replaces that hydrogen, it cannot sit beside it
        if z in (6, 7) and other.GetDegree() + other.GetNumExplicitHs() > (3 if z == 6 else 2) + (z == 7):
            return (f"sits on atom {other.GetIdx()} ({other.GetSymbol().lower()}), which is written with its "
                    f"hydrogen ([{other.GetSymbol().lower()}H]): the attachment point replaces that hydrogen, so "
                    "write the atom without it")
        return ""
    if z in (16, 8, 34) and other.GetDegree() > 2:
        what = "an aromatic ring sulfur, oxygen or selenium"
    elif z == 7 and other.IsInRingSize(5) and other.GetDegree() > 2 and _has_other_donor(other):
        what = "a pyridine-type nitrogen of a five-membered ring that already has its one lone-pair donor"
    else:
        full = {6: 3, 7: 3 if other.IsInRingSize(5) else 2}.get(z)
        if full is None or other.GetDegree() <= full:
            return ""
        what = "a ring-fusion carbon" if z == 6 else "a pyridine-type ring nitrogen"
    return (f"sits on atom {other.GetIdx()} ({other.GetSymbol().lower()}), which has no hydrogen to replace "
            f"({what}): put the attachment point on a ring atom that carries a hydrogen in the monomer")


def _has_other_donor(atom: Chem.Atom) -> bool:
    """True when a five-membered aromatic ring of ``atom`` holds another lone-pair donor (S, O, Se, an N-H or a
    three-connected N): an aromatic five-ring has one, so ``atom`` is then pyridine-type (thiazole, imidazole N3,
    benzothiadiazole)."""
    mol = atom.GetOwningMol()
    for ring in mol.GetRingInfo().AtomRings():
        if len(ring) != 5 or atom.GetIdx() not in ring:
            continue
        for i in ring:
            a = mol.GetAtomWithIdx(i)
            if i == atom.GetIdx() or not a.GetIsAromatic():
                continue
            if a.GetAtomicNum() in (8, 16, 34) or (a.GetAtomicNum() == 7 and (a.GetNumExplicitHs()
                                                                               or a.GetDegree() == 3)):
                return True
    return False


def _saturated_backbone(mol: Chem.Mol, a: int, b: int) -> str:
    """Why the backbone between two attachment atoms is not conjugated ('' when it is).

    Some path between the atoms the attachment points sit on must avoid every saturated carbon or silicon (an
    atom with single bonds only, in a ring or not): the bridging sp³ carbon of a fluorene or
    cyclopenta-dithiophene and the silicon of a dithienosilole hang beside a conjugated path, but a CH₂ of a side
    chain or an alkylene linker, a cyclohexylene, a bisphenol-type quaternary carbon or an attachment on a
    fluorene's C9 lie across every path. Audits: a unit written through the O–CH₂ of a methoxy side chain was
    computed and ranked as passing; so were units joined through a cyclohexylene or a cyclopropylene, the
    backbone of a bisphenol-Z-type polymer, or a fluorene's C9 (the shortest-path test let saturated ring atoms
    through).

    Examples
    --------
    >>> m = Chem.MolFromSmiles("[*]c1cc2c(OC[*])c3ccsc3c(OC)c2s1", sanitize=False)
    >>> _saturated_backbone(m, 1, 7)[:60]
    'every path between the two attachment points passes a satura'
    >>> m = Chem.MolFromSmiles("[*]c1ccc2c(c1)C(C)(C)c1cc([*])ccc1-2", sanitize=False)
    >>> _saturated_backbone(m, 1, 14)
    ''
    >>> m = Chem.MolFromSmiles("[*]C1CCC(c2ccc([*])s2)CC1", sanitize=False)  # a cyclohexylene
    >>> _saturated_backbone(m, 1, 11) != ""
    True
    """
    Chem.FastFindRings(mol)

    def saturated(i: int) -> bool:
        atom = mol.GetAtomWithIdx(i)
        return (atom.GetAtomicNum() in (6, 14) and not atom.GetIsAromatic()
                and all(bond.GetBondType() == Chem.BondType.SINGLE for bond in atom.GetBonds()))

    if not (saturated(a) or saturated(b)):
        seen, todo = {a}, [a]
        while todo:  # breadth-first over the atoms that are not saturated C or Si
            i = todo.pop()
            if i == b:
                return ""
            for nb in mol.GetAtomWithIdx(i).GetNeighbors():
                j = nb.GetIdx()
                if j not in seen and nb.GetAtomicNum() != 0 and not saturated(j):
                    seen.add(j)
                    todo.append(j)
    bad = [i for i in Chem.GetShortestPath(mol, a, b) if saturated(i)]
    atoms = ", ".join(f"{i} ({mol.GetAtomWithIdx(i).GetSymbol()})" for i in bad[:_MAX_SHOWN])
    return (f"every path between the two attachment points passes a saturated atom (e.g. {atoms}): the repeat "
            "unit of a conjugated polymer runs along its π backbone, and an attachment point on a side chain, a "
            "saturated (alkylene or cycloalkylene) linker or an sp³ ring carbon breaks the conjugation between "
            "units; put the attachment points on the backbone atoms that bond to the next unit (0-based atom "
            "indices in the order of smiles_input)")


def clear_attachment_labels(mol: Chem.Mol) -> None:
    """Remove map numbers, isotope labels and text labels from the dummy atoms of ``mol``.

    Examples
    --------
    >>> from rdkit import Chem
    >>> mol = Chem.MolFromSmiles("[*:2]CC[1*]")
    >>> clear_attachment_labels(mol)
    >>> Chem.MolToSmiles(mol)
    '*CC*'
    """
    for atom in mol.GetAtoms():
        if atom.GetAtomicNum() == 0:
            atom.SetAtomMapNum(0)
            atom.SetIsotope(0)
            for prop in ("atomLabel", "dummyLabel", "_MolFileRLabel"):
                if atom.HasProp(prop):
                    atom.ClearProp(prop)


def attachment_stereo_note(mol: Chem.Mol) -> str:
    r"""A note when a double bond's cis/trans mark is written on the bond to an attachment point ('' otherwise).

    The oligomers replace the attachment points by the bond to the next unit or a cap, and the mark written on
    the bond to ``*`` does not survive that: the oligomers get an unspecified double bond and the conformer
    search decides (trans, in practice). Written inside the unit, the mark is kept.

    Examples
    --------
    >>> attachment_stereo_note(Chem.MolFromSmiles("[*]/C=C\\c1ccc([*])cc1"))[:19]
    'attachment_stereo: '
    >>> attachment_stereo_note(Chem.MolFromSmiles("[*]c1ccc(/C=C/c2ccc([*])cc2)cc1"))
    ''
    """
    directional = (Chem.BondDir.ENDUPRIGHT, Chem.BondDir.ENDDOWNRIGHT)  # '/' and '\\' as parsed
    marked = [b.GetIdx() for b in mol.GetBonds()
              if b.GetBondDir() in directional
              and 0 in (b.GetBeginAtom().GetAtomicNum(), b.GetEndAtom().GetAtomicNum())]
    if not marked:
        return ""
    return (f"attachment_stereo: a cis/trans mark is written on the bond to an attachment point ({len(marked)}), which the oligomers replace; they are computed without it (the conformer search "
            "decides, in practice trans). To keep it, write the repeat unit so that the double bond lies inside, "
            "e.g. [*]c1ccc(/C=C/c2ccc([*])cc2)cc1")
