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
        return (
            "attachment_single",
            f"one attachment point ({describe(dummies[0])}): a polymer repeat unit needs "
            "exactly two attachment points ([*] at each end of the backbone) and a molecule "
            "none (cap the open valence, e.g. with hydrogen or methyl)",
        )
    if len(dummies) > 2:
        shown = ", ".join(describe(a) for a in dummies[:_MAX_SHOWN])
        if len(dummies) > _MAX_SHOWN:
            shown += f" and {len(dummies) - _MAX_SHOWN} more"
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
            "be different atoms (write at least two backbone atoms, e.g. *CC* rather than *C*)",
        )
    return "polymer", None


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
