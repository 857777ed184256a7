"""Prepare stage: read candidate structures, validate them and split them into shards.

The prepare stage is the entry point of the pipeline (see ``design.md``, section 1).  It turns
a user's candidate list into

* ``manifest.csv`` -- one row for **every** input row, in input order, with a status
  (``ok`` or ``rejected``), a machine-readable reason code, a human-readable error message and
  the canonical structure; and
* ``shard-000.csv``, ``shard-001.csv``, ... -- the unique accepted structures (one row per
  structure key), which the expensive stages process independently.

Input formats
-------------
The format is chosen from the file extension (a trailing ``.gz`` is accepted for every format):

``.csv``
    Header row with at least a ``smiles`` column; ``id``, ``name`` and ``role`` are recognised
    (header matching ignores case and surrounding blanks); every other column is passed
    through verbatim.  All fields are read as text, so ids such as ``007`` or ``NA`` survive
    unchanged (the equivalent of ``pandas.read_csv(dtype=str, keep_default_na=False)``; the
    :mod:`csv` module is used so that a malformed line becomes a rejected row in its place
    instead of aborting the read or being dropped).  Lines that are empty, or whose fields are
    all blank (spreadsheet exports often end with ``,,,`` lines), are not rows.
``.smi``, ``.smiles``, ``.txt``
    ``SMILES<whitespace>id`` per line; the id is the rest of the line (it may contain blanks).
    Blank lines and lines starting with ``#`` are skipped, as is a first line whose first token
    is literally ``smiles`` (a header).
``.sdf``, ``.sd``
    The title line of each record is the id; the data items ``name`` and ``role`` (any case)
    fill those columns, other data items are passed through.  A record that RDKit cannot read
    becomes a rejected row (reason ``unparsable``), never a crash.

Reason codes
------------
A rejected row carries exactly one reason (the first problem found, in this order):

``malformed_row``       CSV line with more fields than the header (fields may be misassigned).
``empty``               blank or whitespace-only SMILES.
``unparsable``          SMILES syntax error (message gives RDKit's complaint in short form),
                        SMILES with embedded whitespace, unreadable SDF record, or another
                        sanitisation failure.  Element symbols unknown to RDKit (``[Xx]``)
                        and R-groups (``[R]``) make the SMILES unparsable for RDKit; they are
                        recognised and reported as ``unsupported_element`` / ``dummy_atom``.
``dummy_atom``          ``*``, ``[*:1]``, R-groups (``[R]``, SDF ``R#``), CXSMILES
                        attachment-point labels.
``multi_fragment``      more than one disconnected fragment (salts, mixtures, solvates); the
                        message lists the fragments.  Checked before the element check, so a
                        metal salt such as ``[Na+].[Cl-]`` is reported as a salt (the message
                        also names the disallowed elements).
``unsupported_element`` elements outside ``PrepareOptions.allowed_elements`` (metals, noble
                        gases, ...) or unknown element symbols; the message lists the
                        offending elements and the allowed set.
``valence``             impossible valence, e.g. pentavalent carbon (message names the element
                        and the 0-based atom index in the order of ``smiles_input``).
``aromaticity``         aromatic system that cannot be kekulised, e.g. pyrrole written
                        ``c1ccnc1`` without ``[nH]``.
``charged``             net charge different from zero.  Species that are neutral overall
                        but carry formal charges (nitro groups, N-oxides, zwitterions) are
                        accepted, with a ``charge_separated`` note.
``open_shell``          any atom with radical electrons, or an odd number of electrons.
``too_many_atoms``      more heavy atoms than ``PrepareOptions.max_heavy_atoms``.
``bad_role``            ``role`` other than ``donor``, ``acceptor`` or empty (case and
                        surrounding blanks are ignored; the value is stored in lower case).
``duplicate_id``        second and later rows whose id was already used by an earlier row
                        (whatever that row's status); the message names the first row.
``internal_error``      an unexpected exception while checking this row (the batch goes on).

Rows that are accepted may carry informative notes in the ``note`` column, as ``code: text``
items separated by ``"; "``:

``missing_id``          the id was empty; ``row-<row>`` (``row`` = 0-based input position) was
                        assigned (with a ``-2``, ``-3`` ... suffix if that text is already an id
                        in the file).  Auto-assignment is friendlier than rejection.
``isotopes_removed``    isotope labels were stripped (unless ``keep_isotopes``).
``atom_maps_removed``   atom-map numbers on real atoms were stripped.
``charge_separated``    formal charges present, net charge zero.

Duplicate structures (different SMILES strings of the same molecule) are **not** rejected:
every such row is ``ok``, shares the same ``key`` (so the computation is done once) and, from
the second occurrence on, ``duplicate_of`` holds the id of the first ``ok`` row with that key.
Because only the first row with a given id can be ``ok``, ids of ``ok`` rows are unique and
``duplicate_of`` is unambiguous.

Output files
------------
``manifest.csv`` columns, in order: ``row, id, key, smiles_input, smiles, status, reason,
error, duplicate_of, name, role, heavy_atoms, note`` and then the passthrough columns
(:data:`MANIFEST_COLUMNS`).  ``note`` is not in the original contract; it sits after
``heavy_atoms`` so that passthrough columns stay last.  Ids and passthrough text are written
verbatim (CSV-quoted where needed); text that a spreadsheet would treat as a formula
(``=1+1``) is *not* altered here -- escaping belongs to the report writers.  Read the manifest
back with :func:`read_manifest` (all text) so that ids like ``NA`` survive.  Each shard
``shard-NNN.csv`` has columns ``key, smiles, id``; ``manifest.meta.json`` records the input
file's SHA-256, the options and the RDKit version.

Keys are ``"m" + sha1(canonical isomeric SMILES)[:16]`` -- 17 characters from ``[a-z0-9]``,
safe as file names.  User ids are never used in paths.  Structures are normalised by RDKit
sanitisation (aromaticity, explicit hydrogens, charge-separated nitro groups); stereochemistry
is kept; tautomers and resonance forms other than those RDKit normalises are *not* merged.
"""

from __future__ import annotations

import csv
import dataclasses
import gzip
import hashlib
import io
import json
import math
import os
import re
import tempfile
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd
from rdkit import Chem, rdBase

from screen.io import cell_text as _text

__all__ = [
    "PrepareOptions",
    "MANIFEST_COLUMNS",
    "SHARD_COLUMNS",
    "REASON_CODES",
    "read_candidates",
    "validate",
    "shard",
    "prepare",
    "structure_key",
    "read_manifest",
]

#: Columns of ``manifest.csv``, in order; passthrough columns follow.
MANIFEST_COLUMNS: tuple[str, ...] = (
    "row",
    "id",
    "key",
    "smiles_input",
    "smiles",
    "status",
    "reason",
    "error",
    "duplicate_of",
    "name",
    "role",
    "heavy_atoms",
    "note",
)

#: Columns of every ``shard-NNN.csv``.
SHARD_COLUMNS: tuple[str, ...] = ("key", "smiles", "id")

#: Every reason code :func:`validate` can emit (``''`` for ``ok`` rows).
REASON_CODES: tuple[str, ...] = (
    "malformed_row",
    "empty",
    "unparsable",
    "dummy_atom",
    "multi_fragment",
    "unsupported_element",
    "valence",
    "aromaticity",
    "charged",
    "open_shell",
    "too_many_atoms",
    "bad_role",
    "duplicate_id",
    "internal_error",
)

#: Names a passthrough column may not take (it would clash with a column this stage writes).
_RESERVED: frozenset[str] = frozenset(MANIFEST_COLUMNS) | {"read_error"}

_ROLES: frozenset[str] = frozenset({"donor", "acceptor", ""})

_CSV_SUFFIXES = (".csv",)
_SMI_SUFFIXES = (".smi", ".smiles", ".txt")
_SDF_SUFFIXES = (".sdf", ".sd")

_PERIODIC_TABLE = Chem.GetPeriodicTable()
#: Element symbols RDKit knows (atomic numbers 1-118).
_KNOWN_ELEMENTS: frozenset[str] = frozenset(
    _PERIODIC_TABLE.GetElementSymbol(z) for z in range(1, 119)
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
#: Shard file names this stage writes (used to remove stale shards of an earlier run).
_SHARD_FILE = re.compile(r"^shard-(\d{3,})\.csv$")

_MAX_FRAGMENTS_SHOWN = 5
_MAX_SNIPPET = 40


@dataclass(frozen=True)
class PrepareOptions:
    """Settings of the prepare stage.

    Parameters
    ----------
    max_heavy_atoms : int
        Largest accepted number of heavy (non-hydrogen) atoms; larger molecules are rejected
        with reason ``too_many_atoms``.
    allowed_elements : tuple of str
        Element symbols accepted (case as in the periodic table, e.g. ``"Cl"``).  ``"H"`` may
        be left out only for molecules without hydrogens.
    allow_charged : bool
        Accept molecules with a net charge (otherwise reason ``charged``).
    allow_open_shell : bool
        Accept radicals and odd-electron species (otherwise reason ``open_shell``).
    shard_size : int
        Largest number of unique structures per shard.
    min_shards : int
        Make at least this many shards when there are at least this many unique structures
        (useful to spread a small batch over several workers).
    keep_isotopes : bool
        Keep isotope labels in the canonical SMILES (and so in the key).  By default they are
        removed and a note ``isotopes_removed`` is added.

    Raises
    ------
    ValueError
        If a numeric setting is out of range or an element symbol is unknown; the message
        names the field and the allowed values.
    """

    max_heavy_atoms: int = 200
    allowed_elements: tuple[str, ...] = (
        "H", "B", "C", "N", "O", "F", "Si", "P", "S", "Cl", "Se", "Br", "I",
    )
    allow_charged: bool = False
    allow_open_shell: bool = False
    shard_size: int = 25
    min_shards: int = 1
    keep_isotopes: bool = False

    def __post_init__(self) -> None:
        if isinstance(self.allowed_elements, str):
            raise ValueError(
                "PrepareOptions.allowed_elements must be a sequence of element symbols, "
                f"not the string {self.allowed_elements!r}"
            )
        object.__setattr__(self, "allowed_elements", tuple(self.allowed_elements))
        unknown = [s for s in self.allowed_elements if s not in _KNOWN_ELEMENTS]
        if unknown:
            raise ValueError(
                f"PrepareOptions.allowed_elements: unknown element symbol(s) {unknown}; "
                "use periodic-table symbols such as 'C', 'Cl', 'Se'"
            )
        for field, low in (("max_heavy_atoms", 1), ("shard_size", 1), ("min_shards", 1)):
            value = getattr(self, field)
            if isinstance(value, bool) or not isinstance(value, int) or value < low:
                raise ValueError(
                    f"PrepareOptions.{field} must be an integer >= {low}, got {value!r}"
                )


# ----------------------------------------------------------------------------------------------
# small helpers
# ----------------------------------------------------------------------------------------------




def _snippet(text: str, limit: int = _MAX_SNIPPET) -> str:
    """Shorten ``text`` for use inside a message (repr-quoted, newlines visible)."""
    if len(text) > limit:
        text = text[: limit - 3] + "..."
    return repr(text)


def structure_key(canonical_smiles: str) -> str:
    """Return the internal structure key of a canonical SMILES.

    Parameters
    ----------
    canonical_smiles : str
        Canonical isomeric SMILES as produced by :func:`validate`.

    Returns
    -------
    str
        ``"m"`` followed by the first 16 hex digits of the SHA-1 of the UTF-8 SMILES
        (17 characters from ``[a-z0-9]``; 64 bits, so accidental collisions are negligible
        for any realistic library, and :func:`shard` checks for them anyway).
    """
    return "m" + hashlib.sha1(canonical_smiles.encode("utf-8")).hexdigest()[:16]


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
            "needed (replace the R-group by a real substituent, e.g. a methyl)",
        )
    if unknown:
        return _Reject(
            "unsupported_element",
            f"unknown element symbol(s) {', '.join(unknown)}; "
            f"allowed elements: {', '.join(options.allowed_elements)}",
        )
    return None


def _parse_unsanitized(smiles: str, options: PrepareOptions) -> Chem.Mol:
    """Parse ``smiles`` without sanitisation; raise :class:`_Reject` with a specific message."""
    stripped = smiles.strip()
    if not stripped:
        raise _Reject("empty", "SMILES is empty")
    if re.search(r"\s", stripped) and not _CXSMILES.match(stripped):
        pos = re.search(r"\s", stripped).start()  # type: ignore[union-attr]
        raise _Reject(
            "unparsable",
            f"SMILES contains whitespace at position {pos} (a SMILES is one token; "
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
        raise _Reject("unparsable", f"SMILES syntax error: {_short_rdkit_message(log, stripped)}")
    if mol.GetNumAtoms() == 0:
        raise _Reject("unparsable", "SMILES contains no atoms")
    return mol


def _check_dummies(mol: Chem.Mol) -> None:
    """Reject dummy atoms, R-groups and attachment-point labels."""
    bad: list[str] = []
    for atom in mol.GetAtoms():
        label = atom.GetProp("atomLabel") if atom.HasProp("atomLabel") else ""
        if atom.GetAtomicNum() == 0:
            text = "*"
            if atom.GetAtomMapNum():
                text = f"[*:{atom.GetAtomMapNum()}]"
            elif label or atom.HasProp("dummyLabel"):
                text = label or atom.GetProp("dummyLabel")
            bad.append(f"atom {atom.GetIdx()} ({text})")
        elif re.fullmatch(r"_(R|AP)\d*", label):
            bad.append(f"atom {atom.GetIdx()} ({label})")
    if bad:
        raise _Reject(
            "dummy_atom",
            f"dummy/attachment atom(s) at {', '.join(bad)}: a complete molecule is needed "
            "(cap open valences, e.g. with hydrogen or methyl)",
        )


def _disallowed_elements(mol: Chem.Mol, options: PrepareOptions) -> list[str]:
    """Element symbols of ``mol``'s explicit atoms that are not allowed, in first-seen order."""
    allowed = set(options.allowed_elements)
    found: list[str] = []
    for atom in mol.GetAtoms():
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
            texts.append(_snippet(Chem.MolToSmiles(frag, canonical=False)))
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
    """Reject atoms of elements outside ``options.allowed_elements``."""
    bad = _disallowed_elements(mol, options)
    if bad:
        raise _Reject(
            "unsupported_element",
            f"element(s) not allowed: {', '.join(bad)}; "
            f"allowed elements: {', '.join(options.allowed_elements)}",
        )


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
        raise _Reject(
            "valence",
            f"atom {idx} ({atom.GetSymbol()}){valence} more bonds than {atom.GetSymbol()} "
            f"allows (0-based atom index in the order of smiles_input; RDKit: {first.Message()}){more}",
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


def _check_structure(smiles: str, options: PrepareOptions) -> _Checked:
    """Run every structure check on one SMILES and return the canonical form or the problem."""
    result = _Checked()
    try:
        mol = _parse_unsanitized(smiles, options)
        _check_dummies(mol)
        _check_fragments(mol, options)
        _check_elements(mol, options)
        _check_chemistry(mol)
        with rdBase.BlockLogs():
            with rdBase.CaptureErrorLog() as capture:
                try:
                    Chem.SanitizeMol(mol)
                except Exception as exc:  # RDKit raises several exception types here
                    detail = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
                    detail = detail or _short_rdkit_message(capture.messages)
                    raise _Reject("unparsable", f"RDKit sanitisation failed: {detail}") from None

        if "H" not in options.allowed_elements and any(a.GetTotalNumHs() for a in mol.GetAtoms()):
            raise _Reject(
                "unsupported_element",
                f"element(s) not allowed: H; allowed elements: {', '.join(options.allowed_elements)}",
            )

        charge = Chem.GetFormalCharge(mol)
        if charge != 0 and not options.allow_charged:
            raise _Reject(
                "charged",
                f"net charge {charge:+d}: only neutral molecules are screened "
                "(formal charges that cancel, as in nitro groups, are fine)",
            )
        if charge == 0:
            note = _formal_charge_note(mol)
            if note:
                result.notes.append(note)

        if not options.allow_open_shell:
            radicals = [a for a in mol.GetAtoms() if a.GetNumRadicalElectrons() > 0]
            if radicals:
                shown = ", ".join(
                    f"{a.GetIdx()} ({a.GetSymbol()}, {a.GetNumRadicalElectrons()})"
                    for a in radicals[:6]
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

        isotopes = [a for a in mol.GetAtoms() if a.GetIsotope()]
        if isotopes and not options.keep_isotopes:
            labels: dict[str, int] = {}
            for atom in isotopes:
                label = f"{atom.GetIsotope()}{atom.GetSymbol()}"
                labels[label] = labels.get(label, 0) + 1
                atom.SetIsotope(0)
            shown = ", ".join(f"[{k}] x{v}" for k, v in labels.items())
            result.notes.append(f"isotopes_removed: {shown}")
        mapped = [a for a in mol.GetAtoms() if a.GetAtomMapNum()]
        if mapped:
            for atom in mapped:
                atom.SetAtomMapNum(0)
            result.notes.append(f"atom_maps_removed: {len(mapped)} atom(s)")

        with rdBase.BlockLogs():
            mol = Chem.RemoveHs(mol)
            # Round trip through SMILES so that the canonical form is exactly what RDKit's
            # default parser makes of it (stereo flags made meaningless by isotope stripping
            # are dropped, and re-validating the canonical SMILES gives the same key).
            first = Chem.MolToSmiles(mol)
            again = Chem.MolFromSmiles(first)
            canonical = Chem.MolToSmiles(again) if again is not None else first
            heavy = (again if again is not None else mol).GetNumHeavyAtoms()
        result.smiles = canonical
        result.heavy_atoms = heavy
        if heavy > options.max_heavy_atoms:
            raise _Reject(
                "too_many_atoms",
                f"{heavy} heavy atoms, more than the limit of {options.max_heavy_atoms} "
                "(PrepareOptions.max_heavy_atoms)",
            )
    except _Reject as rej:
        result.reason = rej.reason
        result.error = rej.message
    return result


# ----------------------------------------------------------------------------------------------
# readers
# ----------------------------------------------------------------------------------------------


def _format_of(path: Path) -> tuple[str, bool]:
    """Return (format, gzipped) for ``path`` from its extension."""
    name = path.name.lower()
    gz = name.endswith(".gz")
    if gz:
        name = name[:-3]
    for fmt, suffixes in (("csv", _CSV_SUFFIXES), ("smi", _SMI_SUFFIXES), ("sdf", _SDF_SUFFIXES)):
        if name.endswith(suffixes):
            return fmt, gz
    allowed = ", ".join(_CSV_SUFFIXES + _SMI_SUFFIXES + _SDF_SUFFIXES)
    raise ValueError(
        f"{path}: unknown candidate file type; use one of the extensions {allowed} "
        "(optionally followed by .gz)"
    )


def _read_text(path: Path, gz: bool) -> str:
    """Read the whole file as UTF-8 text (a byte-order mark is ignored)."""
    raw = gzip.decompress(path.read_bytes()) if gz else path.read_bytes()
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ValueError(
            f"{path}: not UTF-8 text (undecodable byte at offset {exc.start}); "
            "save the file as UTF-8"
        ) from None


def _unique_column(name: str, taken: set[str]) -> str:
    """Return ``name``, prefixed with ``input_`` if it clashes with a column we write."""
    out = name
    while out in _RESERVED or out in taken:
        out = "input_" + out
    return out


def _read_csv(path: Path, text: str) -> tuple[list[dict[str, str]], list[str]]:
    """Parse candidate CSV text into row dicts and the passthrough column names."""
    reader = csv.reader(io.StringIO(text, newline=""))
    header: list[str] | None = None
    records: list[dict[str, str]] = []
    mapping: dict[int, str] = {}
    passthrough: list[str] = []
    try:
        for fields in reader:
            if header is None:
                if not fields or all(not f.strip() for f in fields):
                    continue
                header = [f.strip() for f in fields]
                lowered = [h.lower() for h in header]
                if "smiles" not in lowered:
                    raise ValueError(
                        f"{path}: no 'smiles' column; columns found: {header}. "
                        "A candidate CSV needs a header with at least 'smiles' (and usually 'id')"
                    )
                taken: set[str] = set()
                standard: set[str] = set()
                for i, (h, low) in enumerate(zip(header, lowered)):
                    if low in ("id", "smiles", "name", "role") and low not in standard:
                        standard.add(low)
                        mapping[i] = "smiles_input" if low == "smiles" else low
                    else:
                        out = _unique_column(h or f"column_{i + 1}", taken)
                        taken.add(out)
                        mapping[i] = out
                        passthrough.append(out)
                continue
            if not fields or all(not f.strip() for f in fields):
                continue
            record = {"id": "", "smiles_input": "", "name": "", "role": "", "read_error": ""}
            record.update({col: "" for col in passthrough})
            for i, value in enumerate(fields[: len(header)]):
                record[mapping[i]] = value
            if len(fields) > len(header):
                record["read_error"] = (
                    f"malformed_row:line {reader.line_num} has {len(fields)} fields but the "
                    f"header has {len(header)} (unquoted comma inside a field?); "
                    "the row is not trusted"
                )
            records.append(record)
    except csv.Error as exc:
        raise ValueError(f"{path}: CSV error near line {reader.line_num}: {exc}") from None
    return records, passthrough


def _read_smi(path: Path, text: str) -> tuple[list[dict[str, str]], list[str]]:
    """Parse a SMILES file (``SMILES<whitespace>id`` per line)."""
    records: list[dict[str, str]] = []
    first_data = True
    for line in text.splitlines():
        stripped = line.strip()
        if not stripped or stripped.startswith("#"):
            continue
        parts = stripped.split(None, 1)
        if first_data and parts[0].lower() == "smiles":
            first_data = False
            continue
        first_data = False
        records.append(
            {
                "id": parts[1].strip() if len(parts) > 1 else "",
                "smiles_input": parts[0],
                "name": "",
                "role": "",
                "read_error": "",
            }
        )
    return records, []


def _sdf_records(text: str) -> list[str]:
    """Split SDF text into record blocks at ``$$$$`` lines (a trailing empty block is dropped)."""
    blocks: list[str] = []
    current: list[str] = []
    for line in text.splitlines():
        if line.strip() == "$$$$":
            blocks.append("\n".join(current))
            current = []
        else:
            current.append(line)
    if any(ln.strip() for ln in current):
        blocks.append("\n".join(current))
    return blocks


def _sdf_data_items(lines: list[str]) -> dict[str, str]:
    """Parse ``> <name>`` data items that follow ``M  END``."""
    items: dict[str, str] = {}
    i = 0
    while i < len(lines):
        match = re.match(r"^>.*?<([^>]*)>", lines[i])
        if match:
            key = match.group(1)
            values: list[str] = []
            i += 1
            while i < len(lines) and lines[i].strip() != "":
                values.append(lines[i])
                i += 1
            items.setdefault(key, "\n".join(values))
        i += 1
    return items


def _molblock_problem(lines: list[str]) -> str | None:
    """Describe what is wrong with a V2000 connection table, if a simple check finds it.

    RDKit reports molblock problems on its warning log, which cannot be captured per call, so
    the common faults (bad counts line, truncated atom or bond block, bad coordinates) are
    re-checked here to give a specific message.

    Parameters
    ----------
    lines : list of str
        The record's lines up to and including ``M  END``.

    Returns
    -------
    str or None
        A message, or None if no fault was found (or the record is V3000).
    """
    if len(lines) < 4:
        return f"header too short ({len(lines)} lines before 'M  END', need at least 4)"
    counts = lines[3]
    if "V3000" in counts:
        return None
    try:
        n_atoms, n_bonds = int(counts[0:3]), int(counts[3:6])
    except ValueError:
        return f"counts line (line 4) is not valid: {_snippet(counts)}"
    body = lines[4:-1]
    if len(body) < n_atoms + n_bonds:
        return (
            f"counts line announces {n_atoms} atoms and {n_bonds} bonds but only "
            f"{len(body)} lines follow"
        )
    for k, line in enumerate(body[:n_atoms], start=5):
        try:
            float(line[0:10]), float(line[10:20]), float(line[20:30])
        except ValueError:
            return f"atom line {k} has unreadable coordinates: {_snippet(line)}"
    return None


def _molblock_to_smiles(molblock: str) -> tuple[str | None, str]:
    """Convert a connection table to SMILES, keeping what validation must still judge.

    The block is first read with sanitisation (so stereochemistry is perceived from wedges or
    3D coordinates); if that fails it is read without, so that e.g. a pentavalent carbon
    reaches :func:`validate` and is reported as ``valence`` rather than as unreadable.

    Parameters
    ----------
    molblock : str
        One record up to and including ``M  END``.

    Returns
    -------
    tuple of (str or None, str)
        The SMILES (None if RDKit cannot read the block at all) and RDKit's exception text,
        if any.
    """
    with rdBase.BlockLogs():
        with rdBase.CaptureErrorLog():
            try:
                mol = Chem.MolFromMolBlock(molblock, sanitize=True, removeHs=False)
                if mol is not None:
                    return Chem.MolToSmiles(Chem.RemoveHs(mol)), ""
                mol = Chem.MolFromMolBlock(molblock, sanitize=False, removeHs=False)
                if mol is None:
                    return None, ""
                mol.UpdatePropertyCache(strict=False)
                return Chem.MolToSmiles(mol), ""
            except Exception as exc:  # RDKit raises several exception types on bad blocks
                text = str(exc).strip()
                return None, text.splitlines()[0] if text else type(exc).__name__


def _read_sdf(path: Path, text: str) -> tuple[list[dict[str, str]], list[str]]:
    """Parse an SD file; unreadable records become rows with a read error."""
    records: list[dict[str, str]] = []
    passthrough: list[str] = []
    column_of: dict[str, str] = {}
    for number, block in enumerate(_sdf_records(text), start=1):
        lines = block.split("\n")
        title = lines[0].strip() if lines else ""
        end = next((i for i, ln in enumerate(lines) if ln.startswith("M  END")), None)
        data = _sdf_data_items(lines[end + 1 :]) if end is not None else {}
        record = {"id": title, "smiles_input": "", "name": "", "role": "", "read_error": ""}
        for key, value in data.items():
            low = key.strip().lower()
            if low in ("name", "role") and not record[low]:
                record[low] = value
                continue
            if key not in column_of:
                column_of[key] = _unique_column(key.strip() or "property", set(passthrough))
                passthrough.append(column_of[key])
            record[column_of[key]] = value
        if end is None:
            record["read_error"] = (
                f"unparsable:SDF record {number} (title {_snippet(title)}) could not be read: "
                "no 'M  END' line"
            )
        else:
            smiles, detail = _molblock_to_smiles("\n".join(lines[: end + 1]) + "\n")
            if smiles is None:
                detail = detail or _molblock_problem(lines[: end + 1]) or (
                    "RDKit rejected the connection table"
                )
                record["read_error"] = (
                    f"unparsable:SDF record {number} (title {_snippet(title)}) could not be read: "
                    f"{detail}"
                )
            else:
                record["smiles_input"] = smiles
        records.append(record)
    for record in records:
        for col in passthrough:
            record.setdefault(col, "")
    return records, passthrough


def _assign_missing_ids(ids: list[str], rows: list[int]) -> tuple[list[str], list[str]]:
    """Fill empty (or blank) ids with ``row-<row>``; return the ids and per-row notes."""
    explicit = {i for i in ids if i.strip()}
    out: list[str] = []
    notes: list[str] = []
    for ident, row in zip(ids, rows):
        if ident.strip():
            out.append(ident)
            notes.append("")
            continue
        candidate = f"row-{row}"
        suffix = 2
        while candidate in explicit:
            candidate = f"row-{row}-{suffix}"
            suffix += 1
        explicit.add(candidate)
        out.append(candidate)
        notes.append(f"missing_id: no id given, assigned {candidate!r}")
    return out, notes


def read_candidates(path: str | os.PathLike[str]) -> pd.DataFrame:
    """Read a candidate file (CSV, SMILES or SDF) into a frame of text columns.

    Parameters
    ----------
    path : str or os.PathLike
        Candidate file; the format is chosen by extension (``.csv``, ``.smi``/``.smiles``/
        ``.txt``, ``.sdf``/``.sd``, each optionally ``.gz``).

    Returns
    -------
    pandas.DataFrame
        One row per input record, in input order, with columns ``row`` (0-based input
        position, int), ``id``, ``smiles_input``, ``name``, ``role``, ``note``, ``read_error``
        and then the passthrough columns (all text).  ``read_error`` is ``''`` unless the
        record itself could not be read; it has the form ``"<reason>:<message>"`` and is
        turned into a rejection by :func:`validate`.  Empty ids are replaced by ``row-<row>``
        and noted in ``note``.  Passthrough columns whose names clash with a column of the
        manifest are renamed with an ``input_`` prefix.

    Raises
    ------
    ValueError
        Unknown extension, text that is not UTF-8, a CSV without a ``smiles`` column (the
        message names the file and the columns found) or an unrecoverable CSV syntax error.
    FileNotFoundError
        If ``path`` does not exist.
    """
    path = Path(path)
    fmt, gz = _format_of(path)
    text = _read_text(path, gz)
    if fmt == "csv":
        records, passthrough = _read_csv(path, text)
    elif fmt == "smi":
        records, passthrough = _read_smi(path, text)
    else:
        records, passthrough = _read_sdf(path, text)
    rows = list(range(len(records)))
    ids, notes = _assign_missing_ids([r["id"] for r in records], rows)
    columns: dict[str, list[Any]] = {
        "row": rows,
        "id": ids,
        "smiles_input": [r["smiles_input"] for r in records],
        "name": [r["name"] for r in records],
        "role": [r["role"] for r in records],
        "note": notes,
        "read_error": [r["read_error"] for r in records],
    }
    for col in passthrough:
        columns[col] = [r.get(col, "") for r in records]
    frame = pd.DataFrame(columns)
    frame["row"] = frame["row"].astype("int64")
    for col in frame.columns:
        if col != "row":
            frame[col] = frame[col].astype(object)
    return frame


# ----------------------------------------------------------------------------------------------
# validate, shard, prepare
# ----------------------------------------------------------------------------------------------


def _join_notes(*parts: Iterable[str] | str) -> str:
    """Join note items with ``"; "``, skipping empty and repeated ones (order kept)."""
    items: list[str] = []
    for part in parts:
        if isinstance(part, str):
            part = part.split("; ") if part else []
        items.extend(p for p in part if p and p not in items)
    return "; ".join(items)


def validate(frame: pd.DataFrame, options: PrepareOptions = PrepareOptions()) -> pd.DataFrame:
    """Check every row, canonicalise accepted structures and mark duplicates.

    Parameters
    ----------
    frame : pandas.DataFrame
        Output of :func:`read_candidates`, or any frame with an ``id`` column and a
        ``smiles_input`` (or ``smiles``) column; ``row``, ``name``, ``role``, ``note`` and
        ``read_error`` are optional.  Columns previously written by this function are
        recomputed, so validating a manifest again is safe.
    options : PrepareOptions
        Limits and allowed elements.

    Returns
    -------
    pandas.DataFrame
        A new frame, same rows in the same order, with the columns of
        :data:`MANIFEST_COLUMNS` followed by the passthrough columns: ``key`` (``''`` unless
        ``ok``), ``smiles`` (canonical isomeric SMILES, filled whenever the structure could be
        canonicalised, also for ``too_many_atoms`` and id/role rejections), ``heavy_atoms``
        (nullable int), ``status`` (``'ok'`` or ``'rejected'``), ``reason`` (see the module
        docstring), ``error`` (specific message, ``''`` if ok), ``duplicate_of`` (id of the
        first ``ok`` row with the same key, ``''`` otherwise) and ``note``.

    Raises
    ------
    ValueError
        If the frame has neither ``smiles_input`` nor ``smiles``, or no ``id`` column.
    """
    if "smiles_input" in frame.columns:
        smiles_col = "smiles_input"
    elif "smiles" in frame.columns:
        smiles_col = "smiles"
    else:
        raise ValueError(
            f"validate(): the frame needs a 'smiles_input' or 'smiles' column; "
            f"columns found: {list(frame.columns)}"
        )
    if "id" not in frame.columns:
        raise ValueError(
            f"validate(): the frame needs an 'id' column; columns found: {list(frame.columns)}"
        )
    n = len(frame)
    try:
        rows = [int(r) for r in frame["row"]] if "row" in frame.columns else list(range(n))
    except (TypeError, ValueError):
        rows = list(range(n))

    def column(name: str) -> list[str]:
        return [_text(v) for v in frame[name]] if name in frame.columns else [""] * n

    smiles_in = column(smiles_col)
    ids, id_notes = _assign_missing_ids(column("id"), rows)
    prior_notes = column("note")
    names = column("name")
    roles_raw = column("role")
    read_errors = column("read_error")

    out_key: list[str] = []
    out_smiles: list[str] = []
    out_status: list[str] = []
    out_reason: list[str] = []
    out_error: list[str] = []
    out_dup: list[str] = []
    out_role: list[str] = []
    out_heavy: list[int | None] = []
    out_note: list[str] = []

    first_row_of_id: dict[str, int] = {}
    first_id_of_key: dict[str, str] = {}

    for i in range(n):
        ident = ids[i]
        notes = _join_notes(prior_notes[i], [id_notes[i]])
        role = roles_raw[i].strip().lower()
        checked = _Checked()
        reason = ""
        error = ""
        try:
            if read_errors[i]:
                code, _, message = read_errors[i].partition(":")
                reason, error = (code, message) if code in REASON_CODES and message else (
                    "unparsable",
                    read_errors[i],
                )
            else:
                checked = _check_structure(smiles_in[i], options)
                reason, error = checked.reason, checked.error
                notes = _join_notes(notes, checked.notes)
            if not reason and role not in _ROLES:
                reason = "bad_role"
                error = (
                    f"role {_snippet(roles_raw[i])} is not one of 'donor', 'acceptor' or empty"
                )
            if not reason and ident in first_row_of_id:
                first = first_row_of_id[ident]
                reason = "duplicate_id"
                error = (
                    f"id {_snippet(ident)} is already used by row {first} (0-based, as in the "
                    "'row' column); ids must be unique, so this row is not screened"
                )
        except Exception as exc:  # the batch goes on whatever happens to one row
            reason = "internal_error"
            error = f"unexpected {type(exc).__name__} while checking this row: {exc}"
        first_row_of_id.setdefault(ident, rows[i])

        key = ""
        duplicate_of = ""
        if not reason:
            key = structure_key(checked.smiles)
            if key in first_id_of_key:
                duplicate_of = first_id_of_key[key]
            else:
                first_id_of_key[key] = ident
        out_key.append(key)
        out_smiles.append(checked.smiles)
        out_status.append("rejected" if reason else "ok")
        out_reason.append(reason)
        out_error.append(error)
        out_dup.append(duplicate_of)
        out_role.append(role if role in _ROLES else roles_raw[i])
        out_heavy.append(checked.heavy_atoms)
        out_note.append(notes)

    result = pd.DataFrame(
        {
            "row": pd.Series(rows, dtype="int64"),
            "id": pd.Series(ids, dtype=object),
            "key": pd.Series(out_key, dtype=object),
            "smiles_input": pd.Series(smiles_in, dtype=object),
            "smiles": pd.Series(out_smiles, dtype=object),
            "status": pd.Series(out_status, dtype=object),
            "reason": pd.Series(out_reason, dtype=object),
            "error": pd.Series(out_error, dtype=object),
            "duplicate_of": pd.Series(out_dup, dtype=object),
            "name": pd.Series(names, dtype=object),
            "role": pd.Series(out_role, dtype=object),
            "heavy_atoms": pd.Series(out_heavy, dtype="Int64"),
            "note": pd.Series(out_note, dtype=object),
        }
    )
    own = set(MANIFEST_COLUMNS) | {"read_error", smiles_col}
    for col in frame.columns:
        if col not in own:
            result[col] = [_text(v) for v in frame[col]]
            result[col] = result[col].astype(object)
    return result


def _shard_bounds(unique: int, options: PrepareOptions) -> list[tuple[int, int]]:
    """Return ``[start, stop)`` index ranges of the shards for ``unique`` structures."""
    if unique == 0:
        return []
    # balanced blocks (sizes differ by at most one) so that parallel shards finish together
    count = min(unique, max(options.min_shards, math.ceil(unique / options.shard_size)))
    base, extra = divmod(unique, count)
    bounds: list[tuple[int, int]] = []
    start = 0
    for k in range(count):
        stop = start + base + (1 if k < extra else 0)
        bounds.append((start, stop))
        start = stop
    return bounds


def shard(frame: pd.DataFrame, options: PrepareOptions = PrepareOptions()) -> list[pd.DataFrame]:
    """Split the unique accepted structures into shards.

    Parameters
    ----------
    frame : pandas.DataFrame
        Output of :func:`validate`.
    options : PrepareOptions
        ``shard_size`` and ``min_shards`` are used.

    Returns
    -------
    list of pandas.DataFrame
        Each with columns ``key, smiles, id`` (the id of the first ``ok`` row with that key).
        Every unique key of an ``ok`` row appears in exactly one shard, in order of first
        occurrence.  The number of shards is ``max(min_shards, ceil(unique / shard_size))``,
        but never more than ``unique`` (so no shard is empty; no structures, no shards).
        The structures are split into contiguous blocks whose sizes differ by at most
        one, so that shards running in parallel finish at about the same time.

    Raises
    ------
    ValueError
        If the frame is not a validated frame, or if two different canonical SMILES share a
        key (a hash collision -- never expected in practice).
    """
    missing = [c for c in ("status", "key", "smiles", "id") if c not in frame.columns]
    if missing:
        raise ValueError(f"shard(): the frame lacks {missing}; pass the output of validate()")
    ok = frame[frame["status"] == "ok"]
    seen: dict[str, str] = {}
    keys: list[str] = []
    smiles: list[str] = []
    ids: list[str] = []
    for key, smi, ident in zip(ok["key"], ok["smiles"], ok["id"]):
        key, smi, ident = _text(key), _text(smi), _text(ident)
        if key in seen:
            if seen[key] != smi:
                raise ValueError(
                    f"shard(): key {key} is shared by two different structures "
                    f"{seen[key]!r} and {smi!r}"
                )
            continue
        seen[key] = smi
        keys.append(key)
        smiles.append(smi)
        ids.append(ident)
    shards: list[pd.DataFrame] = []
    for start, stop in _shard_bounds(len(keys), options):
        shards.append(
            pd.DataFrame(
                {
                    "key": pd.Series(keys[start:stop], dtype=object),
                    "smiles": pd.Series(smiles[start:stop], dtype=object),
                    "id": pd.Series(ids[start:stop], dtype=object),
                }
            )
        )
    return shards


def _current_umask() -> int:
    """Return the process umask without changing it where the OS allows (Linux /proc)."""
    try:
        with open("/proc/self/status", encoding="ascii") as status:
            for line in status:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    mask = os.umask(0o022)  # fallback: read by setting and restoring
    os.umask(mask)
    return mask


def _atomic_write_text(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` atomically (temp file in the same directory + os.replace).

    The file gets the permissions an ordinary ``open(path, "w")`` would give (``0o666`` minus
    the umask), not the private ``0o600`` of :func:`tempfile.mkstemp`.
    """
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as handle:
            os.chmod(tmp, 0o666 & ~_current_umask())
            handle.write(text)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def _csv_text(frame: pd.DataFrame) -> str:
    """Render a frame as CSV text (no index, ``\\n`` line ends, missing values empty)."""
    return frame.to_csv(index=False, lineterminator="\n", na_rep="")


def _sha256(path: Path) -> str:
    """SHA-256 hex digest of a file's bytes."""
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        for chunk in iter(lambda: handle.read(1 << 20), b""):
            digest.update(chunk)
    return digest.hexdigest()


def _summary(manifest: pd.DataFrame, shards: list[pd.DataFrame]) -> dict[str, int]:
    """Count rows, accepted, rejected and unique structures."""
    ok = manifest["status"] == "ok"
    return {
        "rows": int(len(manifest)),
        "ok": int(ok.sum()),
        "rejected": int((~ok).sum()),
        "unique": int(sum(len(s) for s in shards)),
        "shards": int(len(shards)),
    }


def prepare(
    path: str | os.PathLike[str],
    out_dir: str | os.PathLike[str],
    options: PrepareOptions = PrepareOptions(),
) -> dict[str, int]:
    """Run the prepare stage: read, validate, shard and write the results.

    Parameters
    ----------
    path : str or os.PathLike
        Candidate file (see :func:`read_candidates`).
    out_dir : str or os.PathLike
        Output directory, created if needed.  Only these files are written in it:
        ``shard-NNN.csv`` (columns ``key, smiles, id``), ``manifest.meta.json``
        (provenance: input file and SHA-256, options, RDKit version, counts, shard files) and
        ``manifest.csv`` (all rows, columns :data:`MANIFEST_COLUMNS` then passthrough),
        written last so that its presence means the stage finished.  Shard files of an
        earlier run beyond the new shard count are removed.  Every write is atomic.
    options : PrepareOptions
        Validation limits and sharding.

    Returns
    -------
    dict
        ``{'rows', 'ok', 'rejected', 'unique', 'shards'}`` counts (ints).

    Raises
    ------
    ValueError
        Configuration problems in the input file (see :func:`read_candidates`).
    """
    path = Path(path)
    out = Path(out_dir)
    frame = read_candidates(path)
    manifest = validate(frame, options)
    shards = shard(manifest, options)
    out.mkdir(parents=True, exist_ok=True)

    names = [f"shard-{k:03d}.csv" for k in range(len(shards))]
    for name, part in zip(names, shards):
        _atomic_write_text(out / name, _csv_text(part))
    keep = set(names)
    for entry in sorted(os.listdir(out)):
        if _SHARD_FILE.match(entry) and entry not in keep and (out / entry).is_file():
            (out / entry).unlink()

    summary = _summary(manifest, shards)
    meta = {
        "stage": "prepare",
        "input": {"path": str(path), "sha256": _sha256(path)},
        "rdkit_version": rdBase.rdkitVersion,
        "options": dataclasses.asdict(options),
        "counts": summary,
        "shards": [{"file": n, "structures": len(s)} for n, s in zip(names, shards)],
        "manifest_columns": list(manifest.columns),
        "key": "m + sha1(canonical isomeric SMILES, UTF-8)[:16]",
    }
    _atomic_write_text(out / "manifest.meta.json", json.dumps(meta, indent=2) + "\n")
    _atomic_write_text(out / "manifest.csv", _csv_text(manifest))
    return summary


def read_manifest(path: str | os.PathLike[str]) -> pd.DataFrame:
    """Read a ``manifest.csv`` back with every column as text (ids like ``NA`` survive).

    Parameters
    ----------
    path : str or os.PathLike
        A manifest written by :func:`prepare`.

    Returns
    -------
    pandas.DataFrame
        All columns as text except ``row`` (int) and ``heavy_atoms`` (nullable int).
    """
    frame = pd.read_csv(path, dtype=str, keep_default_na=False)
    if "row" in frame.columns:
        frame["row"] = frame["row"].astype("int64")
    if "heavy_atoms" in frame.columns:
        frame["heavy_atoms"] = pd.to_numeric(frame["heavy_atoms"].replace("", None)).astype("Int64")
    return frame

