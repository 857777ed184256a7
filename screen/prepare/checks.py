"""Structure checks of the prepare stage and the reason codes they emit.

:func:`_check_structure` runs every check on one SMILES, in the order of the reason codes
listed in the :mod:`screen.prepare` docstring, and returns the canonical form or the first
problem found (a reason code from :data:`REASON_CODES` and a specific message).  A structure far
over the size limit (``too_many_atoms``) is refused before RDKit sanitises or writes it: a text
longer than :func:`smiles_length_limit` is not read, and one of more heavy atoms than
:func:`full_check_limit` (counted on the unsanitised parse, right after the attachment points are
judged) is refused on that count.

Examples
--------
>>> checked = _check_structure("C1=CC=CS1", PrepareOptions())
>>> checked.smiles, checked.heavy_atoms, checked.reason
('c1ccsc1', 5, '')
>>> bad = _check_structure("CC(C)(C)(C)C", PrepareOptions())
>>> bad.reason
'valence'
"""

from __future__ import annotations

import dataclasses
import re
import unicodedata
from dataclasses import dataclass

from rdkit import Chem, rdBase

from screen.chem import canonical_form
from screen.prepare.attachments import (
    ATTACHMENT_REASONS,
    attachment_stereo_note,
    classify,
    clear_attachment_labels,
)
from screen.prepare.charges import localised_carbon_charge, overbonded_charged_carbon
from screen.prepare.options import KNOWN_ELEMENTS as _KNOWN_ELEMENTS
from screen.prepare.options import PrepareOptions

__all__ = ["REASON_CODES", "NONMETALS", "snippet", "smiles_length_limit", "full_check_limit", "control_name",
           "cell_control_problem", "visible_controls", "smiles_length_problem", "text_row_problem"]

#: Every reason code a manifest row can carry (``''`` for ``ok`` rows): those of :func:`screen.prepare.validate`,
#: and ``oligomer_build_failed`` of :func:`screen.prepare.polymers.build_oligomers`.
REASON_CODES: tuple[str, ...] = (
    "malformed_row",
    "empty",
    "unparsable",
    "dummy_atom",
    *ATTACHMENT_REASONS,
    "multi_fragment",
    "unsupported_element",
    "valence",
    "aromaticity",
    "charged",
    "charge_separated_sp3",
    "open_shell",
    "hypercoordinate",
    "too_many_atoms",
    "ring_perception_time",
    "bad_role",
    "duplicate_id",
    "oligomer_build_failed",
    "internal_error",
)

#: A bracket atom of a SMILES, e.g. ``[13CH3+]``; group 1 is the text inside the brackets.
_BRACKET_ATOM = re.compile(r"\[([^\[\]]*)\]")
#: Element symbol at the start of a bracket atom's text, after an optional isotope
#: (aromatic symbols are lower case, e.g. ``se``).
_BRACKET_SYMBOL = re.compile(r"\d*([A-Za-z][a-z]*)")
#: A SMILES followed by a CXSMILES extension block: ``SMILES |...|``.
_CXSMILES = re.compile(r"^\S+ \|[^|]*\|$")
#: RDKit log line prefix ``[hh:mm:ss] ``.
_LOG_PREFIX = re.compile(r"^\[\d\d:\d\d:\d\d\]\s?")

_MAX_FRAGMENTS_SHOWN = 5
#: atomic numbers of the non-metals (metalloids B, Si, Ge, As, Te included): any other element is a metal
NONMETALS = frozenset({1, 2, 5, 6, 7, 8, 9, 10, 14, 15, 16, 17, 18, 32, 33, 34, 35, 36, 52, 53, 54, 85, 86})
#: alkali and alkaline-earth metals: in a structure of several fragments they are counter-ions, so such a
#: structure is reported as a salt (``multi_fragment``); any other disallowed element is reported first
_COUNTER_IONS = frozenset({"Li", "Na", "K", "Rb", "Cs", "Be", "Mg", "Ca", "Sr", "Ba"})
_MAX_SNIPPET = 40


def snippet(text: str, limit: int = _MAX_SNIPPET) -> str:
    """Shorten ``text`` for use inside a message (repr-quoted, newlines visible).

    Examples
    --------
    >>> snippet("a" * 50)
    "'aaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaa...'"
    """
    if len(text) > limit:
        text = text[: limit - 3] + "..."
    return repr(text)



def _short_rdkit_message(log: str, smiles: str = "") -> str:
    """Condense RDKit's multi-line SMILES parse log into one short phrase.

    Parameters
    ----------
    log : str
        Text captured from RDKit's error log.
    smiles : str
        The SMILES that failed, used to show the text around the reported position.

    Returns
    -------
    str
        E.g. ``"unclosed ring"`` or ``"syntax error around position 3 (near 'C[C')"``.
    """
    lines = [_LOG_PREFIX.sub("", ln).strip() for ln in log.splitlines()]
    what = ""
    position: int | None = None
    for ln in lines:
        if not ln:
            continue
        body = ln.split("Error:", 1)[1].strip() if "Error:" in ln else ln
        found = re.match(r"check for mistakes around position (\d+)", body)
        if found:
            position = int(found.group(1))
        elif body.startswith("Failed parsing SMILES"):
            continue
        elif not what and "Error" in ln:
            for sep in (" while parsing:", " for input:"):
                body = body.split(sep, 1)[0]
            what = body.strip()
    what = what or "syntax error"
    if position is None:
        return what
    text = f"{what} around position {position}"
    if smiles:
        lo = max(0, position - 8)
        text += f" (near {smiles[lo:position + 4]!r})"
    return text


class _Reject(Exception):
    """Internal signal: the row is rejected with ``reason`` and ``message``."""

    def __init__(self, reason: str, message: str) -> None:
        super().__init__(message)
        self.reason = reason
        self.message = message


@dataclass
class _Checked:
    """Result of checking one structure."""

    smiles: str = ""
    heavy_atoms: int | None = None
    notes: list[str] = dataclasses.field(default_factory=list)
    reason: str = ""
    error: str = ""
    representation: str = ""


# ----------------------------------------------------------------------------------------------
# structure checks
# ----------------------------------------------------------------------------------------------


def _scan_failed_smiles(smiles: str, options: PrepareOptions) -> _Reject | None:
    """Explain a SMILES RDKit could not parse by an unknown element or an R-group, if any."""
    unknown: list[str] = []
    rgroups: list[str] = []
    for match in _BRACKET_ATOM.finditer(smiles):
        symbol_match = _BRACKET_SYMBOL.match(match.group(1))
        if symbol_match is None:
            continue
        symbol = symbol_match.group(1)
        if re.fullmatch(r"R\d*", symbol):
            if match.group(0) not in rgroups:
                rgroups.append(match.group(0))
            continue
        canonical = symbol[0].upper() + symbol[1:]
        if canonical not in _KNOWN_ELEMENTS and symbol not in unknown:
            unknown.append(symbol)
    if rgroups:
        return _Reject(
            "dummy_atom",
            f"R-group placeholder(s) {', '.join(rgroups)}: a complete molecule is "
            "needed (replace the R-group by a real substituent, e.g. a methyl); a polymer "
            "repeat unit is written with two attachment points [*]",
        )
    if unknown:
        return _Reject(
            "unsupported_element",
            f"unknown element symbol(s) {', '.join(unknown)}; "
            f"allowed elements: {', '.join(options.allowed_elements)}",
        )
    return None


#: look-alikes of SMILES characters that word processors and web pages put in copied text, and the character meant
_LOOK_ALIKES = {"\u2010": "-", "\u2011": "-", "\u2012": "-", "\u2013": "-", "\u2014": "-", "\u2212": "-",
                "\ufe63": "-", "\u00ad": "", "\u2261": "#", "\u2215": "/", "\u2044": "/", "\u29f5": "\\",
                "\u201c": "", "\u201d": "", "\u2018": "", "\u2019": ""}


#: characters an id, name or role may not hold: the C0 controls except TAB. A NUL ends the text in programs written in
#: C, an ESC starts a terminal escape sequence, a CR or LF splits a line of the outputs that are not quoted CSV; a
#: security audit found an id "X<NUL> 1" in levels.csv, the rankings, the report and the SD titles
_CELL_CONTROL = re.compile(r"[\x00-\x08\x0a-\x1f]")
#: the C0 controls a rejected row's cells show as their Control Pictures symbol (U+2400 + code: NUL as ␀, ESC as ␛),
#: so that none reaches an output or the console; TAB, LF and CR stay (the CSV writers quote them)
_SHOWN = "".join(chr(c) for c in range(32) if c not in (9, 10, 13))
_TO_PICTURE = {ord(c): 0x2400 + ord(c) for c in _SHOWN}
_FROM_PICTURE = {picture: code for code, picture in _TO_PICTURE.items()}


def visible_controls(text: str) -> str:
    r"""``text`` with its control characters other than TAB, LF and CR shown by their Control Pictures symbol.

    >>> visible_controls("X\x00 1\x1b[31m\tA")
    'X␀ 1␛[31m\tA'
    """
    return text.translate(_TO_PICTURE)


def cell_control_problem(cells: dict[str, str]) -> str:
    r"""Why a row's id, name or role is refused: the first of ``cells`` (``{"id": ..., "name": ..., "role": ...}``)
    that holds a control character, named with the character and the fix; '' when none does. TAB is allowed. A
    control's symbol as :func:`visible_controls` writes it (``␀``) counts as the control, so that validating a
    manifest again refuses the row with the same message.

    Examples
    --------
    >>> print(cell_control_problem({"id": "X\x00 1", "name": "a\rb"}))
    the id 'X\x00 1' contains U+0000 (NUL), a character that ends the text in many programs; delete it
    >>> cell_control_problem({"id": visible_controls("X\x00 1")}) == cell_control_problem({"id": "X\x00 1"})
    True
    >>> print(cell_control_problem({"id": "X1", "name": "a\rb"}))
    the name 'a\rb' contains U+000D (CR), a line break; write it on one line
    >>> cell_control_problem({"id": "X\t1", "name": "", "role": "donor"})
    ''
    """
    for key, value in cells.items():
        value = value.translate(_FROM_PICTURE)
        found = _CELL_CONTROL.search(value)
        if found is None:
            continue
        char = found.group(0)
        if char in "\r\n":
            what = "a line break; write it on one line"
        elif char == "\x00":
            what = "a character that ends the text in many programs; delete it"
        else:
            what = "a control character; delete it"
        return f"the {key} {snippet(value)} contains {control_name(char)}, {what}"
    return ""


def control_name(ch: str) -> str:
    r"""A control character as a message names it: ``U+0000 (NUL)``, ``U+000D (CR)``.

    >>> control_name("\x00"), control_name("\r"), control_name("\x1b"), control_name("a")
    ('U+0000 (NUL)', 'U+000D (CR)', 'U+001B (ESC)', 'U+0061 (LATIN SMALL LETTER A)')
    """
    names = {0: "NUL", 7: "BEL", 8: "BS", 9: "TAB", 10: "LF", 11: "VT", 12: "FF", 13: "CR", 27: "ESC", 127: "DEL"}
    if ord(ch) in names:
        return f"U+{ord(ch):04X} ({names[ord(ch)]})"
    if ord(ch) < 32:
        return f"U+{ord(ch):04X} (control character)"
    return character_name(ch)


def character_name(ch: str) -> str:
    """A character as a message names it: ``U+2011 (NON-BREAKING HYPHEN)``.

    >>> character_name("\u2011"), character_name("\u200b")
    ('U+2011 (NON-BREAKING HYPHEN)', 'U+200B (ZERO WIDTH SPACE)')
    """
    name = unicodedata.name(ch, "")
    return f"U+{ord(ch):04X}" + (f" ({name})" if name else "")


def _foreign_character(smiles: str) -> str:
    """Why a SMILES that does not parse holds a character outside SMILES ('' when it holds none): the first
    character that is not ASCII, named by code point and name, and what to type instead (an input-file audit: a
    non-breaking hyphen copied from a document gave "syntax error around position 5" without naming it).

    Examples
    --------
    >>> _foreign_character("c1cc\u2011sc1")  # doctest: +ELLIPSIS
    "character 5 is U+2011 (NON-BREAKING HYPHEN), not a SMILES character (...); type '-' instead"
    >>> _foreign_character("CC\u200bO")[:56]
    'character 3 is U+200B (ZERO WIDTH SPACE), not a SMILES c'
    >>> _foreign_character("CC(")
    ''
    """
    for position, ch in enumerate(smiles, start=1):
        if ord(ch) < 128:
            continue
        meant = _LOOK_ALIKES.get(ch)
        if meant is None:
            folded = unicodedata.normalize("NFKC", ch)
            meant = folded if folded.isascii() and folded.strip() else None
        invisible = unicodedata.category(ch) in ("Cf", "Zs", "Zl", "Zp", "Cc")
        if meant:
            fix = f"type {meant!r} instead"
        elif invisible or meant == "":
            fix = "delete it (it may be invisible)"
        else:
            fix = "replace it by the SMILES character meant"
        return (f"character {position} is {character_name(ch)}, not a SMILES character (SMILES is plain ASCII; "
                f"text copied from a document or a web page?); {fix}")
    return ""


#: most characters a SMILES may have per heavy atom of ``PrepareOptions.max_heavy_atoms`` before it is read
#: (:func:`smiles_length_limit`): a SMILES of 130 000 characters kept the dry run inside RDKit for minutes and one of
#: 200 MB exhausted the memory (a security audit), so longer text is refused unread. Generous: the shipped SMILES
#: (models/reference, candidates/, tests/data: 3517) take at most 1.9 characters per heavy atom in a molecule of
#: more than ten heavy atoms (the longest, 395 characters for 216 heavy atoms) and 21 in the worst small one
#: (``[2H]C([2H])([2H])[2H]``); a fully bracketed stereo SMILES with every hydrogen written out takes about 15,
#: CXSMILES atom coordinates about 20 more
SMILES_CHARS_PER_HEAVY_ATOM = 50


def smiles_length_limit(max_heavy_atoms: int) -> int:
    """The longest SMILES text (characters, CXSMILES extension included) read for ``max_heavy_atoms``.

    >>> smiles_length_limit(200)
    10000
    """
    return SMILES_CHARS_PER_HEAVY_ATOM * max_heavy_atoms


#: most heavy atoms a structure over ``PrepareOptions.max_heavy_atoms`` may have to be checked in full (every check,
#: then ``too_many_atoms`` with its canonical SMILES, as for any structure over the limit); a larger one is refused on
#: its count before RDKit sanitises it or writes its SMILES (:func:`full_check_limit`). RDKit (2024-2025, on this
#: project's machine) writes the SMILES of a 2000-carbon chain in about 0.1 s, of a 10 000-carbon one in 3.4 s, and
#: crashes (segmentation fault) on one of 20 000
FULL_CHECK_ATOMS = 2000


def full_check_limit(max_heavy_atoms: int) -> int:
    """The most heavy atoms of a structure that is checked in full: the limit, or :data:`FULL_CHECK_ATOMS` if larger.

    >>> full_check_limit(200), full_check_limit(5000)
    (2000, 5000)
    """
    return max(max_heavy_atoms, FULL_CHECK_ATOMS)


#: C0 control characters that are not whitespace (NUL, BEL, ESC, ...) and DEL: never part of a SMILES
_CONTROL = re.compile(r"[\x00-\x08\x0e-\x1b\x7f]")
#: their symbols as :func:`visible_controls` shows them in a rejected row's ``smiles_input``
_CONTROL_PICTURES = {chr(0x2400 + c): chr(c) for c in (*range(0, 9), *range(14, 28))}


def smiles_length_problem(smiles: str, max_heavy_atoms: int) -> str:
    """Why a SMILES text is too long to be read for ``max_heavy_atoms`` (:func:`smiles_length_limit`; '' if it is not).

    >>> smiles_length_problem("C" * 10001, 200)[:52]
    'SMILES text too long: 10001 characters, more than th'
    >>> smiles_length_problem("CCO", 200)
    ''
    """
    limit = smiles_length_limit(max_heavy_atoms)
    if len(smiles) <= limit or len(smiles.strip()) <= limit:
        return ""
    return (f"SMILES text too long: {len(smiles.strip())} characters, more than the {limit} read "
            f"({SMILES_CHARS_PER_HEAVY_ATOM} per heavy atom of the limit of {max_heavy_atoms}, "
            "PrepareOptions.max_heavy_atoms); not read: a structure that large is not screened")


def _check_length(smiles: str, options: PrepareOptions) -> None:
    """Refuse a SMILES text too long for ``options.max_heavy_atoms`` before RDKit reads it (``too_many_atoms``)."""
    problem = smiles_length_problem(smiles, options.max_heavy_atoms)
    if problem:
        raise _Reject("too_many_atoms", problem)


def text_row_problem(cells: dict[str, str], smiles: str = "", max_heavy_atoms: int | None = None,
                     line_breaks: bool = False) -> tuple[str, str]:
    r"""Whether one text row of an input table may be read at all: ``(column, why)``, ``("", "")`` when it may.

    The one admission rule of every input table's rows (candidate files, levels and partner files, dye files):
    a control character in an id, name or role (``cells``, :func:`cell_control_problem`); a SMILES text longer than
    :func:`smiles_length_limit` of ``max_heavy_atoms`` (default: ``PrepareOptions.max_heavy_atoms``), which is not
    read; a SMILES of more heavy atoms than :func:`full_check_limit`, counted on RDKit's unsanitised parse (a SMILES
    that does not parse is no admission problem: the table's own checks name it). The candidate validation applies
    the same two primitives (:func:`cell_control_problem`, :func:`smiles_length_problem` and the count of
    :func:`full_check_limit`) row by row with its reason codes; a levels or dye file is refused whole for such a row.
    ``line_breaks=True`` lets a CR or LF through (the levels and dye files: their outputs quote the CSV cells and
    write SD titles and console tables with the line break replaced, which tests/test_rank.py relies on).

    Examples
    --------
    >>> text_row_problem({"id": "A\x00B"}, "CCO")[0]
    'id'
    >>> column, why = text_row_problem({"id": "big"}, "C" * 3000)
    >>> column, why[:48]
    ('smiles', '3000 heavy atoms, far more than the limit of 200')
    >>> text_row_problem({"id": "ok", "name": "thio\tphene"}, "c1ccsc1")
    ('', '')
    """
    texts = {k: "" if v is None else str(v) for k, v in cells.items()}
    if line_breaks:
        texts = {k: re.sub(r"[\r\n\u240a\u240d]", " ", v) for k, v in texts.items()}
    controls = cell_control_problem(texts)
    if controls:
        return next(k for k, v in texts.items() if cell_control_problem({k: v})), controls
    if not smiles or not smiles.strip():
        return "", ""
    limit = PrepareOptions().max_heavy_atoms if max_heavy_atoms is None else max_heavy_atoms
    problem = smiles_length_problem(smiles, limit)
    if problem:
        return "smiles", problem
    if len(smiles) <= full_check_limit(limit):  # every heavy atom takes a character: no parse on a re-rank's rows
        return "", ""
    with rdBase.BlockLogs():
        mol = Chem.MolFromSmiles(smiles.strip(), sanitize=False)
    heavy = mol.GetNumHeavyAtoms() if mol is not None else 0
    if heavy > full_check_limit(limit):
        return "smiles", (f"{heavy} heavy atoms, far more than the limit of {limit} (PrepareOptions.max_heavy_atoms; "
                          f"more than {full_check_limit(limit)} are not read): a structure that large is not screened")
    return "", ""


def _check_heavy_atoms(heavy: int, options: PrepareOptions) -> None:
    """Refuse more heavy atoms than ``options.max_heavy_atoms`` (``too_many_atoms``)."""
    if heavy > options.max_heavy_atoms:
        raise _Reject(
            "too_many_atoms",
            f"{heavy} heavy atoms, more than the limit of {options.max_heavy_atoms} (PrepareOptions.max_heavy_atoms)",
        )


def _parse_unsanitized(smiles: str, options: PrepareOptions) -> Chem.Mol:
    r"""Parse ``smiles`` without sanitisation; raise :class:`_Reject` with a specific message.

    A control character (NUL, ...) is refused naming it (before, a NUL at the end of a SMILES was accepted and
    carried into every output: a security audit):

    >>> try:
    ...     _parse_unsanitized("CCO\x00", PrepareOptions())
    ... except _Reject as rej:
    ...     print(rej.reason, "|", rej.message[:76])
    unparsable | SMILES contains the control character U+0000 (NUL) as character 4: delete it
    """
    stripped = smiles.strip()
    if not stripped:
        raise _Reject("empty", "SMILES is empty")
    control = _CONTROL.search(stripped) or re.search(f"[{''.join(_CONTROL_PICTURES)}]", stripped)
    if control:
        char = _CONTROL_PICTURES.get(control.group(0), control.group(0))
        nul = " (a NUL byte: was the file saved as UTF-16, or is it binary?)" if char == "\x00" else ""
        raise _Reject("unparsable", f"SMILES contains the control character {control_name(char)} as character "
                                    f"{control.start() + 1}: delete it{nul}")
    if re.search(r"\s", stripped) and not _CXSMILES.match(stripped):
        found = re.search(r"\s", stripped)
        pos = found.start()  # type: ignore[union-attr]
        space = stripped[pos]
        what = "whitespace" if space in " \t" else f"whitespace {character_name(space)}"
        raise _Reject(
            "unparsable",
            f"SMILES contains {what} at position {pos} (a SMILES is one token; "
            "put names in a separate column)",
        )
    with rdBase.BlockLogs():
        with rdBase.CaptureErrorLog() as capture:
            mol = Chem.MolFromSmiles(stripped, sanitize=False)
        log = capture.messages
    if mol is None:
        explained = _scan_failed_smiles(stripped, options)
        if explained is not None:
            raise explained
        foreign = _foreign_character(stripped)
        if foreign:
            raise _Reject("unparsable", f"SMILES syntax error: {foreign}")
        raise _Reject("unparsable", f"SMILES syntax error: {_short_rdkit_message(log, stripped)}")
    if mol.GetNumAtoms() == 0:
        raise _Reject("unparsable", "SMILES contains no atoms")
    return mol


def _check_attachments(mol: Chem.Mol) -> str:
    """Return ``"molecule"`` or ``"polymer"``; reject bad attachment points and labels.

    Attachment-point labels on real atoms (CXSMILES ``_AP1``, ``_R1``) are rejected as
    ``dummy_atom``; dummy atoms are judged by :func:`screen.prepare.attachments.classify`.
    """
    labelled: list[str] = []
    for atom in mol.GetAtoms():
        label = atom.GetProp("atomLabel") if atom.HasProp("atomLabel") else ""
        if atom.GetAtomicNum() != 0 and re.fullmatch(r"_(R|AP)\d*", label):
            labelled.append(f"atom {atom.GetIdx()} ({label})")
    if labelled:
        raise _Reject(
            "dummy_atom",
            f"attachment-point label(s) on real atoms at {', '.join(labelled)}: a complete "
            "molecule is needed (cap open valences, e.g. with hydrogen or methyl); a polymer "
            "repeat unit is written with two attachment points [*]",
        )
    representation, problem = classify(mol)
    if problem is not None:
        raise _Reject(*problem)
    return representation


def _disallowed_elements(mol: Chem.Mol, options: PrepareOptions) -> list[str]:
    """Element symbols of ``mol``'s explicit atoms that are not allowed, in first-seen order."""
    allowed = set(options.allowed_elements)
    found: list[str] = []
    for atom in mol.GetAtoms():
        if atom.GetAtomicNum() == 0:
            continue  # attachment points of a repeat unit
        symbol = atom.GetSymbol()
        if symbol not in allowed and symbol not in found:
            found.append(symbol)
    return found


def _check_fragments(mol: Chem.Mol, options: PrepareOptions) -> None:
    """Reject salts, mixtures and solvates (more than one connected component)."""
    frags = Chem.GetMolFrags(mol, asMols=False, sanitizeFrags=False)
    if len(frags) <= 1:
        return
    texts: list[str] = []
    try:
        mol.UpdatePropertyCache(strict=False)
        for frag in Chem.GetMolFrags(mol, asMols=True, sanitizeFrags=False)[:_MAX_FRAGMENTS_SHOWN]:
            texts.append(snippet(Chem.MolToSmiles(frag, canonical=False)))
    except Exception:  # pragma: no cover - depends on RDKit internals
        texts = [f"{len(f)} atoms" for f in frags[:_MAX_FRAGMENTS_SHOWN]]
    more = len(frags) - len(texts)
    listing = ", ".join(texts) + (f" and {more} more" if more > 0 else "")
    message = (
        f"{len(frags)} disconnected fragments ({listing}): salts, mixtures and solvates are "
        "not screened; give the single neutral molecule of interest"
    )
    bad = _disallowed_elements(mol, options)
    if bad:
        message += f"; also contains elements not allowed: {', '.join(bad)}"
    raise _Reject("multi_fragment", message)


def _check_elements(mol: Chem.Mol, options: PrepareOptions) -> None:
    """Reject atoms of elements outside ``options.allowed_elements``; a metal is named as such."""
    bad = _disallowed_elements(mol, options)
    if bad:
        table = Chem.GetPeriodicTable()
        metals = [e for e in bad if table.GetAtomicNumber(e) not in NONMETALS]
        head = (f"contains {', '.join(metals)}: metal complexes (and other metal-containing molecules) are "
                "outside the calibration; " if metals else "")
        raise _Reject(
            "unsupported_element",
            f"{head}element(s) not allowed: {', '.join(bad)}; "
            f"allowed elements: {', '.join(options.allowed_elements)}"
            + ("" if metals else " (setting prepare.allowed_elements; an element outside the calibration's reference "
                                 "materials gets extrapolated levels, flagged far_from_reference with the widest σ)"),
        )


def _check_elements_and_fragments(mol: Chem.Mol, options: PrepareOptions) -> None:
    """The element check, then the fragment check; a salt of alkali or alkaline-earth ions stays a salt.

    A metal complex written as dot-separated fragments (the metal ion and its
    ligands) is reported by its metal (``unsupported_element``), not as a
    mixture; a salt whose only disallowed elements are alkali or alkaline-earth
    counter-ions (``CC(=O)[O-].[Na+]``) is reported as ``multi_fragment`` (the
    neutral molecule is what is wanted), naming those elements.
    """
    bad = _disallowed_elements(mol, options)
    if bad and not set(bad) <= _COUNTER_IONS:
        _check_elements(mol, options)
    _check_fragments(mol, options)
    _check_elements(mol, options)


def _symbol(atom: Chem.Atom) -> str:
    """Element symbol as written in SMILES (lower case for aromatic atoms)."""
    symbol = atom.GetSymbol()
    return symbol.lower() if atom.GetIsAromatic() else symbol


def _check_chemistry(mol: Chem.Mol) -> None:
    """Reject valence and kekulisation problems with the atom index and element named."""
    with rdBase.BlockLogs():
        with rdBase.CaptureErrorLog():
            problems = list(Chem.DetectChemistryProblems(mol))
    if not problems:
        return
    first = problems[0]
    more = f" (and {len(problems) - 1} more problem(s))" if len(problems) > 1 else ""
    kind = first.GetType()
    if kind == "AtomValenceException":
        idx = first.GetAtomIdx()
        atom = mol.GetAtomWithIdx(idx)
        match = re.search(r"valence for atom # \d+ \w+, (\d+), is greater", first.Message())
        valence = f" has valence {match.group(1)}," if match else ""
        hint = ""
        boron_n = atom.GetSymbol() == "N" and any(n.GetSymbol() == "B" for n in atom.GetNeighbors())
        if (atom.GetSymbol() == "B" or boron_n) and atom.GetFormalCharge() == 0:
            # a four-coordinate boron written neutral (a dative n->B, or a BODIPY-type N-B(F)F) was refused with no
            # way out
            hint = ("; write the N→B coordination as a charge-separated pair, e.g. [n+]…[B-](F)F for n->B(F)F: "
                    "formal charges that cancel are fine")
        raise _Reject(
            "valence",
            f"atom {idx} ({atom.GetSymbol()}){valence} more bonds than {atom.GetSymbol()} "
            f"allows (0-based atom index in the order of smiles_input; RDKit: {first.Message()}){more}{hint}",
        )
    if kind in ("KekulizeException", "AtomKekulizeException"):
        if kind == "KekulizeException":
            indices = list(first.GetAtomIndices())
        else:
            indices = [first.GetAtomIdx()]
        atoms = ", ".join(f"{i} ({_symbol(mol.GetAtomWithIdx(i))})" for i in indices[:12])
        raise _Reject(
            "aromaticity",
            f"cannot kekulise the aromatic atoms {atoms}: check the aromatic notation "
            f"(e.g. a pyrrole-type nitrogen needs [nH]; RDKit: {first.Message()}){more}",
        )
    raise _Reject("unparsable", f"RDKit sanitisation failed: {first.Message()}{more}")


def _formal_charge_note(mol: Chem.Mol) -> str | None:
    """Describe formal charges of a net-neutral molecule, or None if there are none."""
    charged = [a for a in mol.GetAtoms() if a.GetFormalCharge() != 0]
    if not charged:
        return None
    shown = ", ".join(
        f"{a.GetSymbol()}{a.GetIdx()}({a.GetFormalCharge():+d})" for a in charged[:6]
    )
    if len(charged) > 6:
        shown += f" and {len(charged) - 6} more"
    return f"charge_separated: formal charges on {shown}, net charge 0"


#: longest time RDKit's sanitisation may take on one structure of many rings fused to a macrocycle [s]
#: (:func:`_sanitize_in_time`); ordinary structures take milliseconds and are not timed
RING_PERCEPTION_LIMIT_S = 10.0
#: a ring system of at least this many rings (smallest set of smallest rings, rings sharing two or more
#: atoms joined) that contains a ring of more than _MACROCYCLE_ATOMS atoms is timed
_MACROCYCLE_SYSTEM_RINGS = 8
_MACROCYCLE_ATOMS = 12


def macrocyclic_ring_system(mol: Chem.Mol) -> tuple[int, int] | None:
    """Return (rings, largest ring size) of a ring system fused to a macrocycle, or None.

    RDKit's aromaticity perception enumerates combinations of the rings of a ring
    system; when many aromatic rings share atoms with one macrocycle, as in a
    cycloparaphenylene nanohoop, that grows exponentially (RDKit 2024–2025 on this
    project's machine: [12]CPP 0.1 s, [14] 2.3 s, [16] 22 s, [20] did not finish in
    hours). Works on an unsanitised molecule (the rings are a graph property).

    Examples
    --------
    >>> from rdkit import Chem
    >>> nanohoop = "c1cc2ccc1" + "-c1ccc(cc1)" * 8 + "-c1ccc-2cc1"   # [10]cycloparaphenylene
    >>> macrocyclic_ring_system(Chem.MolFromSmiles(nanohoop, sanitize=False))[0] >= 11
    True
    >>> macrocyclic_ring_system(Chem.MolFromSmiles("c1ccc2cc3ccccc3cc2c1", sanitize=False)) is None
    True
    """
    rings = [set(ring) for ring in Chem.GetSSSR(mol)]  # not the symmetrised set: 2^n macrocycles of a nanohoop
    systems: list[list[set[int]]] = []
    for ring in rings:
        joined = [system for system in systems if any(len(ring & other) >= 2 for other in system)]
        for system in joined:
            systems.remove(system)
        systems.append([r for system in joined for r in system] + [ring])
    for system in systems:
        largest = max(len(ring) for ring in system)
        if len(system) >= _MACROCYCLE_SYSTEM_RINGS and largest > _MACROCYCLE_ATOMS:
            return len(system), largest
    return None


def _sanitize_copy(block: bytes) -> None:  # runs in an isolated worker process
    """Sanitise a copy of a molecule given as RDKit binary; errors are left to :func:`_sanitize`."""
    mol = Chem.Mol(block)
    with rdBase.BlockLogs():
        try:
            Chem.SanitizeMol(mol)
        except Exception:  # noqa: BLE001 - the parent sanitises again and reports the problem
            pass


def _sanitize_in_time(mol: Chem.Mol) -> None:
    """Refuse a macrocyclic ring system whose sanitisation would stall the batch.

    Only a structure :func:`macrocyclic_ring_system` picks is timed: a copy is
    sanitised in an isolated worker process (about a second to start) and killed
    after :data:`RING_PERCEPTION_LIMIT_S`, so one such row cannot hold up the rest
    of the batch; one that finishes in time goes on as usual.
    """
    found = macrocyclic_ring_system(mol)
    if found is None:
        return
    from screen.isolation import IsolatedWorker, WorkerCrash

    try:
        with IsolatedWorker(_sanitize_copy, timeout_s=RING_PERCEPTION_LIMIT_S) as worker:
            worker(mol.ToBinary())
    except WorkerCrash:
        rings, largest = found
        raise _Reject(
            "ring_perception_time",
            f"RDKit's aromaticity perception did not finish within {RING_PERCEPTION_LIMIT_S:g} s for a ring "
            f"system of {rings} rings fused to a {largest}-atom macrocycle (large nanohoop-type macrocycles "
            "grow exponentially in cost); the row is skipped so that the batch goes on",
        ) from None


def _sanitize(mol: Chem.Mol) -> None:
    """Sanitise ``mol`` in place; an RDKit failure becomes an ``unparsable`` rejection."""
    with rdBase.BlockLogs():
        with rdBase.CaptureErrorLog() as capture:
            try:
                Chem.SanitizeMol(mol)
            except Exception as exc:  # RDKit raises several exception types here
                detail = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
                detail = detail or _short_rdkit_message(capture.messages)
                raise _Reject("unparsable", f"RDKit sanitisation failed: {detail}") from None


def _check_hydrogen_allowed(mol: Chem.Mol, options: PrepareOptions) -> None:
    """Reject hydrogens when ``H`` is not an allowed element."""
    if "H" not in options.allowed_elements and any(a.GetTotalNumHs() for a in mol.GetAtoms()):
        raise _Reject(
            "unsupported_element",
            f"element(s) not allowed: H; allowed elements: {', '.join(options.allowed_elements)}",
        )


def _check_charge(mol: Chem.Mol, options: PrepareOptions, notes: list[str]) -> int:
    """Reject a net charge (unless allowed); note formal charges that cancel; return the charge."""
    charge = Chem.GetFormalCharge(mol)
    if charge != 0 and not options.allow_charged:
        raise _Reject(
            "charged",
            f"net charge {charge:+d}: only neutral molecules are screened "
            "(formal charges that cancel, as in nitro groups, are fine)",
        )
    if charge == 0 and not options.allow_charge_separation:
        message = localised_carbon_charge(mol)
        if message:
            raise _Reject("charge_separated_sp3", message)
    if charge == 0:
        note = _formal_charge_note(mol)
        if note:
            notes.append(note)
    return charge


def _check_open_shell(mol: Chem.Mol, options: PrepareOptions, charge: int) -> None:
    """Reject radicals and odd-electron species (unless allowed)."""
    if options.allow_open_shell:
        return
    radicals = [a for a in mol.GetAtoms() if a.GetNumRadicalElectrons() > 0]
    if radicals:
        shown = ", ".join(
            f"{a.GetIdx()} ({a.GetSymbol()}, {a.GetNumRadicalElectrons()})" for a in radicals[:6]
        )
        raise _Reject(
            "open_shell",
            f"radical electrons on atom(s) {shown}: only closed-shell molecules are "
            "screened (a bracket atom has only the hydrogens written in it: [CH3] is a "
            "methyl radical, methane is C or [CH4])",
        )
    electrons = sum(a.GetAtomicNum() + a.GetTotalNumHs() for a in mol.GetAtoms()) - charge
    if electrons % 2:
        raise _Reject(
            "open_shell",
            f"odd number of electrons ({electrons}): only closed-shell molecules are screened",
        )


def _strip_labels(mol: Chem.Mol, options: PrepareOptions, notes: list[str]) -> None:
    """Remove isotope labels (unless kept) and atom-map numbers, with notes.

    Labels of attachment points are removed first, silently: they only mark the ends.
    """
    clear_attachment_labels(mol)
    isotopes = [a for a in mol.GetAtoms() if a.GetIsotope()]
    if isotopes and not options.keep_isotopes:
        labels: dict[str, int] = {}
        for atom in isotopes:
            label = f"{atom.GetIsotope()}{atom.GetSymbol()}"
            labels[label] = labels.get(label, 0) + 1
            atom.SetIsotope(0)
        shown = ", ".join(f"[{k}] x{v}" for k, v in labels.items())
        notes.append(f"isotopes_removed: {shown}")
    mapped = [a for a in mol.GetAtoms() if a.GetAtomMapNum()]
    if mapped:
        for atom in mapped:
            atom.SetAtomMapNum(0)
        notes.append(f"atom_maps_removed: {len(mapped)} atom(s)")


#: most bonded neighbours (hydrogens counted) an atom may have: the geometry step (ETKDG embedding, MMFF94/UFF)
#: builds no five- or six-coordinate centre (a structure audit: an SF5 arene embedded with fluorines 1.0 Å apart
#: and UFF, which has no type for it, pulled them 4.3 Å from the sulfur, so it failed as "7 rings where the input has 1")
MAX_NEIGHBOURS = 4


def _check_coordination(mol: Chem.Mol) -> None:
    """Reject an atom with more than :data:`MAX_NEIGHBOURS` bonded neighbours (SF5, PF5, SF6), naming it."""
    for atom in mol.GetAtoms():
        degree = atom.GetDegree() + atom.GetTotalNumHs()
        if degree > MAX_NEIGHBOURS:
            raise _Reject(
                "hypercoordinate",
                f"atom {atom.GetIdx()} ({atom.GetSymbol()}) has {degree} bonded neighbours (a five- or "
                "six-coordinate centre such as SF5): the geometry step (ETKDG embedding, MMFF94/UFF force "
                "fields) cannot build it, so its structure would come out broken; not supported (0-based atom "
                "index in the order of smiles_input)",
            )


def _check_structure(smiles: str, options: PrepareOptions) -> _Checked:
    """Run every structure check on one SMILES and return the canonical form or the problem."""
    result = _Checked()
    try:
        _check_length(smiles, options)
        mol = _parse_unsanitized(smiles, options)
        result.representation = _check_attachments(mol)
        # a structure far over the limit is refused on its count on the unsanitised parse, before RDKit sanitises
        # and writes it (seconds for thousands of atoms, a segmentation fault for a chain of 20 000: a security
        # audit); one just over it is checked in full, as any other, and refused at the end with its canonical SMILES
        heavy = mol.GetNumHeavyAtoms()
        if heavy > full_check_limit(options.max_heavy_atoms):
            result.heavy_atoms = heavy
            _check_heavy_atoms(heavy, options)
        _check_elements_and_fragments(mol, options)
        if not options.allow_charge_separation:
            message = overbonded_charged_carbon(mol)
            if message:
                raise _Reject("charge_separated_sp3", message)
        _check_chemistry(mol)
        _sanitize_in_time(mol)
        _sanitize(mol)
        _check_hydrogen_allowed(mol, options)
        charge = _check_charge(mol, options, result.notes)
        _check_open_shell(mol, options, charge)
        _check_coordination(mol)
        _strip_labels(mol, options, result.notes)
        if result.representation == "polymer":
            note = attachment_stereo_note(mol)
            if note:
                result.notes.append(note)
        # canonical_form round-trips through SMILES so that the canonical form is exactly what
        # RDKit's default parser makes of it (stereo flags made meaningless by isotope
        # stripping are dropped, and re-validating the canonical SMILES gives the same key).
        result.smiles, result.heavy_atoms = canonical_form(mol)
        _check_heavy_atoms(result.heavy_atoms, options)
    except _Reject as rej:
        result.reason = rej.reason
        result.error = rej.message
    return result
