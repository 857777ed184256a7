"""Partner materials: the donor or acceptor every candidate is paired with.

A partner is one levels row (HOMO, LUMO, optical gap, their σ, the energy
scale and a role).  :func:`resolve_partner` accepts four kinds of
specification (docs/contracts.md §5):

``<library id>``
    A row of the built-in library ``screen/data/partners.csv`` (see
    ``dascreen partners``); ids are matched case-insensitively.
``<path>``
    A CSV file holding exactly one levels row (columns ``id, homo_ev,
    lumo_ev, gap_opt_ev, scale``; optional ``role``, ``name``, σ columns,
    ``smiles``, ``source``).
``smiles:<SMILES>``
    Computed exactly like the candidates: the workflow runs the molecule as
    its own one-row batch ``partner-<structure key>`` through the same
    prepare, structures, electronic and levels rules, with the run's protocol
    and calibration, and caches it like any other batch.  Here the partner is
    read from that batch's levels file (:func:`partner_levels_path`); this
    module never runs the quantum-chemistry engine.  Computing the partner
    with the candidates' protocol and calibration also cancels part of the
    systematic error of the offsets.
``id:<ID>``
    A row of the current levels table (e.g. a candidate promoted to partner).

Every partner gets a :attr:`Partner.slug`, a path-safe folder name for
``OUT/rankings/<slug>/`` that :func:`partner_slug` computes without any
quantum-chemistry call (the workflow needs it when it parses the Snakefile).

Energies are on the vacuum scale in eV (HOMO = −IP < 0, LUMO = −EA).

References
----------
.. [1] M. C. Scharber et al., "Design rules for donors in bulk-heterojunction
   solar cells — towards 10 % energy-conversion efficiency", Adv. Mater. 18
   (2006) 789. :doi:`10.1002/adma.200501717`
.. [2] C. Bannwarth, S. Ehlert, S. Grimme, J. Chem. Theory Comput. 15 (2019)
   1652. :doi:`10.1021/acs.jctc.8b01176`
"""

from __future__ import annotations

import dataclasses
import hashlib
import math
import re
from functools import lru_cache
from pathlib import Path

import numpy as np
import pandas as pd

from screen.columns import TIE_SEPARATOR
from screen.devicepars import acceptor_class_key
from screen.errors import InputError
from screen.io import text_cells
from screen.levels_check import check_levels, quoted
from screen.partner_library import (LIBRARY_COLUMNS, LIBRARY_PATH, ROLES, SCALES, Partner, PartnerError,
                                   _float, _sigma_value, _text, complement, library_partners, library_table,
                                   load_library)

__all__ = [
    "LIBRARY_PATH",
    "LIBRARY_COLUMNS",
    "ROLES",
    "SCALES",
    "Partner",
    "PartnerError",
    "load_library",
    "library_partners",
    "library_table",
    "partner_slug",
    "slugify",
    "file_tag",
    "suggest",
    "did_you_mean",
    "unknown_partner",
    "split_partners",
    "partner_kind",
    "partner_key",
    "partner_batch",
    "partner_levels_path",
    "resolve_partner",
    "complement",
]

_SMILES_PREFIX = "smiles:"
_ID_PREFIX = "id:"
_SIGMA = ("homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev")


# --------------------------------------------------------------------------- specs and slugs

def _library_ids(path: Path | None = None) -> list[str]:
    try:
        return list(load_library(path)["id"])
    except PartnerError:
        return []


def _library_lookup(spec: str, path: Path | None = None) -> str | None:
    low = spec.strip().lower()
    for pid in _library_ids(path):
        if pid.lower() == low:
            return pid
    return None


def suggest(word: str, choices, n: int = 3, cutoff: float = 0.5) -> list[str]:
    """Close matches of ``word`` among ``choices`` (case-insensitive; :func:`difflib.get_close_matches`).

    Examples
    --------
    >>> suggest("y7", ["y6", "c60", "it-4f"])
    ['y6']
    >>> suggest("C-70", ["c60", "c70"])
    ['c70', 'c60']
    """
    import difflib

    by_low: dict[str, str] = {}
    for choice in choices:
        by_low.setdefault(str(choice).lower(), str(choice))
    hits = difflib.get_close_matches(str(word).strip().lower(), list(by_low), n=n, cutoff=cutoff)
    return [by_low[h] for h in hits]


def _library_names(path: Path | None = None) -> dict[str, str]:
    """Library ids by lower-case id and lower-case name (names find their id)."""
    try:
        lib = load_library(path)
    except PartnerError:
        return {}
    out = {pid.lower(): pid for pid in lib["id"]}
    for pid, name in zip(lib["id"], lib["name"]):
        out.setdefault(str(name).strip().lower(), pid)
    return out


def _library_roles(path: Path | None = None) -> dict[str, str]:
    """The role of every library id."""
    try:
        lib = load_library(path)
    except PartnerError:
        return {}
    return dict(zip(lib["id"], lib["role"]))


def did_you_mean(spec: str, path: Path | None = None, role: str | None = None) -> list[str]:
    """Library ids close to an unknown partner name (matching ids and names); with ``role``, only partners of
    that role.

    Examples
    --------
    >>> did_you_mean("scharber-reference")
    ['scharber-reference-acceptor']
    >>> did_you_mean("ptb8"), did_you_mean("ptb8", role="acceptor")
    (['pcdtbt', 'ptb7-th'], [])
    """
    names = _library_names(path)
    if role is not None:
        roles = _library_roles(path)
        names = {k: v for k, v in names.items() if roles.get(v) == role}
    found: list[str] = []
    for hit in suggest(spec, names, n=5):
        if names[hit.lower()] not in found:
            found.append(names[hit.lower()])
    return found[:3]


def unknown_partner(spec: str, path: Path | None = None, role: str | None = None) -> PartnerError:
    """The error of a partner that is neither a library id nor a file, with "did you mean …".

    ``role``: the role the partner must have (the complement of the candidates'); the suggestions are then
    library partners of that role only; without it each suggestion says its role (before, an acceptor
    abbreviation missing from the library got "did you mean" a donor polymer).

    Examples
    --------
    >>> "Did you mean pcdtbt (donor) or ptb7-th (donor)? Library ids:" in str(unknown_partner("ptb8"))
    True
    >>> "Did you mean idtbr? (only acceptors are named: the candidates are donors)" in str(
    ...     unknown_partner("pcdtbx", role="acceptor"))
    True
    """
    ids = _library_ids(path)
    if spec.strip() and _is_folder(spec):  # "not an existing file" of a folder sent the user looking for a typo
        return PartnerError(
            f"partner {quoted(spec)} is a folder, not a file; give the one-row levels CSV in it (id,homo_ev,lumo_ev,"
            f"gap_opt_ev,scale[,role]), a library id ({', '.join(ids[:6]) if ids else 'see `dascreen partners`'}"
            f"{', …' if len(ids) > 6 else ''}), smiles:<SMILES> or id:<ID of a levels row>")
    close = did_you_mean(spec, path, role) if spec.strip() else []
    if close and role is not None:
        hint = f" Did you mean {' or '.join(close)}? (only {role}s are named: the candidates are {complement(role)}s)"
    elif close:
        roles = _library_roles(path)
        hint = " Did you mean " + " or ".join(f"{c} ({roles.get(c, 'role unknown')})" for c in close) + "?"
    else:
        hint = ""
    return PartnerError(
        f"unknown partner {quoted(spec)}: not a library id and not an existing file.{hint} Library ids: "
        f"{', '.join(ids) if ids else '(library unreadable)'}. Other forms: a path to a one-row levels CSV "
        f"(id,homo_ev,lumo_ev,gap_opt_ev,scale[,role]), smiles:<SMILES> or id:<ID of a levels row>"
    )


def _unknown(spec: str, path: Path | None = None) -> PartnerError:
    return unknown_partner(spec, path)


def partner_kind(spec: str, library_path: str | Path | None = None) -> str:
    """Which of the four forms a specification is: library, file, smiles or id.

    Parameters
    ----------
    spec : str
        Partner specification.
    library_path : path-like, optional
        Library CSV (default :data:`LIBRARY_PATH`).

    Raises
    ------
    PartnerError
        Empty specification, or neither a library id nor an existing file
        (the message lists the library ids).

    Examples
    --------
    >>> partner_kind("c60"), partner_kind("smiles:c1ccccc1"), partner_kind("id:KF-D01")
    ('library', 'smiles', 'id')
    """
    spec = (spec or "").strip()
    if not spec:
        raise PartnerError("empty partner specification; " + str(_unknown("", library_path)))
    if spec.lower().startswith(_SMILES_PREFIX):
        return "smiles"
    if spec.lower().startswith(_ID_PREFIX):
        return "id"
    lib = Path(library_path) if library_path is not None else None
    if _library_lookup(spec, lib) is not None:
        return "library"
    if _is_file(spec):
        return "file"
    raise _unknown(spec, lib)


def _is_file(text: str) -> bool:
    """Whether ``text`` names an existing file; False for a text no file name can be (a SMILES longer than the
    system's name limit raised ``OSError: File name too long`` with a traceback, a new user's audit).

    Examples
    --------
    >>> _is_file("smiles:" + "C" * 400)
    False
    """
    try:
        return Path(text).expanduser().is_file()
    except (OSError, ValueError):
        return False


def _is_folder(text: str) -> bool:
    """Whether ``text`` names an existing folder (False for a text no path can be, as :func:`_is_file`)."""
    try:
        return Path(text).expanduser().is_dir()
    except (OSError, ValueError):
        return False


def _short_hash(text: str, n: int = 10) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:n]


def _safe_stem(text: str, limit: int = 40) -> str:
    stem = re.sub(r"[^A-Za-z0-9._-]+", "-", text).strip("-._")[:limit].strip("-._")
    return stem or "partner"


def slugify(text: str, limit: int = 40) -> str:
    """Readable path-safe form of ``text``: runs of other characters than ``[A-Za-z0-9._-]`` become ``-``.

    Examples
    --------
    >>> slugify("KF D01 (batch 2)"), slugify("c1ccc(s1)-c1cccs1"), slugify("///")
    ('KF-D01-batch-2', 'c1ccc-s1-c1cccs1', 'partner')
    """
    slug = re.sub(r"-{2,}", "-", re.sub(r"[^A-Za-z0-9._-]+", "-", str(text)))
    return slug.strip("-._")[:limit].strip("-._") or "partner"


def file_tag(path, prefix: str = "levels", limit: int = 40) -> str:
    """``<prefix>-<slugified file stem>-<6 hex of the SHA-256 of the resolved absolute path>``.

    The folder-name tag of a ranking of another levels file than the run's own (``dascreen rank`` and
    ``dascreen dyecell``): the same file always gets the same tag, two files of one name in different places two.

    Examples
    --------
    >>> file_tag("/data/my cv.csv")[:13], len(file_tag("/data/my cv.csv").rsplit("-", 1)[1])
    ('levels-my-cv-', 6)
    """
    path = Path(path).resolve()
    return f"{prefix}-{slugify(path.stem, limit)}-{hashlib.sha256(str(path).encode('utf-8')).hexdigest()[:6]}"


def _readable_slug(prefix: str, text: str, always_hash: bool = False) -> str:
    """``prefix-<slugified text>``, plus a short hash of ``text`` when the slug does not spell ``text`` exactly or
    ``text`` has a lower-case letter.

    Folder names must differ on a file system that ignores case (macOS, Windows): ``id:KF-a08`` and
    ``id:kf-A08`` ranked into one folder there (a security audit). A name without a hash is the text itself with
    no lower-case letter, so two of them differ in any case; a hash (lower-case hex) tells apart texts that differ
    only in case. Ids written in capitals and digits, as the project's (``KF-D01``, ``LD-01``), keep the folder
    names they had; an id with a lower-case letter gets a hash where it had none (an earlier ranking of it stays
    in its folder, a new one goes to the new name).

    Examples
    --------
    >>> _readable_slug("id", "KF-D01"), _readable_slug("id", "KF D01")
    ('id-KF-D01', 'id-KF-D01-ab575c')
    >>> [_readable_slug("id", t).lower() for t in ("KF-a08", "kf-A08", "KF-A08")]
    ['id-kf-a08-372df7', 'id-kf-a08-d76a8d', 'id-kf-a08']
    """
    slug = slugify(text, 40)
    if always_hash or slug != text or re.search("[a-z]", text):
        slug = f"{slug}-{_short_hash(text, 6)}"
    return f"{prefix}-{slug}"


def _canonical_key(smiles: str) -> tuple[str, str]:
    """Canonical SMILES (as the prepare stage writes it) and structure key of a partner."""
    from rdkit import Chem, rdBase

    from screen.chem import canonical_form, structure_key

    text = smiles.strip()
    with rdBase.BlockLogs():
        if not text or Chem.MolFromSmiles(text, sanitize=False) is None:
            raise PartnerError(f"partner smiles:{text!r} does not parse as SMILES")
    # the prepare checks first: they sanitise a ring system fused to a macrocycle in a worker with a time limit,
    # where RDKit's own parse below could take hours (a large nanohoop) and hold up the run before it starts
    problem = _prepare_problem(text)
    if problem:
        raise PartnerError(f"partner smiles:{text!r} cannot be computed: {problem}; a smiles: partner is one neutral, "
                           "closed-shell molecule (or a polymer repeat unit with two attachment points [*])")
    with rdBase.BlockLogs():
        mol = Chem.MolFromSmiles(text)
    if mol is None:
        raise PartnerError(f"partner smiles:{text!r} does not parse as SMILES")
    canonical, _ = canonical_form(mol)
    charge = Chem.GetFormalCharge(mol)
    electrons = sum(a.GetAtomicNum() + a.GetTotalNumHs() for a in mol.GetAtoms()) - charge
    if charge != 0:
        raise PartnerError(f"partner smiles:{text!r} has net charge {charge:+d}; partners must be neutral")
    if electrons % 2 or any(a.GetNumRadicalElectrons() for a in mol.GetAtoms()):
        raise PartnerError(f"partner smiles:{text!r} is open-shell; partners must be closed-shell molecules")
    return canonical, structure_key(canonical)


@lru_cache(maxsize=64)
def _prepare_problem(smiles: str) -> str:
    """Why the prepare stage would reject a structure (``'<message> (reason <code>)'``), or ``''``.

    The checks of the candidates (:func:`screen.prepare.validate` with the default options): attachment
    points, salts and mixtures, elements, valence, charge, open shell, size.

    Examples
    --------
    >>> _prepare_problem("c1ccsc1"), _prepare_problem("[*]c1ccsc1").endswith("(reason attachment_single)")
    ('', True)
    """
    from screen.prepare import validate

    row = validate(pd.DataFrame({"id": ["partner"], "smiles": [smiles]})).iloc[0]
    return "" if row["status"] == "ok" else f"{row['error']} (reason {row['reason']})"


def partner_key(spec: str) -> tuple[str, str]:
    """Canonical SMILES and structure key of a ``smiles:`` partner.

    Raises
    ------
    PartnerError
        Not a ``smiles:`` specification, a SMILES that does not parse, a
        charged or an open-shell molecule.

    Examples
    --------
    >>> partner_key("smiles:C1=CSC=C1")[0]
    'c1ccsc1'
    """
    spec = (spec or "").strip()
    if not spec.lower().startswith(_SMILES_PREFIX):
        raise PartnerError(f"partner {spec!r} is not of the form smiles:<SMILES>")
    return _canonical_key(spec[len(_SMILES_PREFIX):])


def partner_batch(spec: str) -> str:
    """Name of the workflow batch that computes a ``smiles:`` partner: ``partner-<structure key>``.

    Examples
    --------
    >>> partner_batch("smiles:c1ccsc1")
    'partner-mc6b0b0df273c39c6'
    """
    return f"partner-{partner_key(spec)[1]}"


def partner_levels_path(spec: str, out_dir) -> Path:
    """The levels file the workflow writes for a ``smiles:`` partner of the run in ``out_dir``.

    Examples
    --------
    >>> partner_levels_path("smiles:c1ccsc1", "results").as_posix()
    'results/work/partner-mc6b0b0df273c39c6/levels.csv'
    """
    return Path(out_dir) / "work" / partner_batch(spec) / "levels.csv"


def partner_slug(spec: str, library_path: str | Path | None = None) -> str:
    """Path-safe folder name of a partner, without any engine call.

    Parameters
    ----------
    spec : str
        Partner specification (library id, file path, ``smiles:…``, ``id:…``).
    library_path : path-like, optional
        Library CSV (default :data:`LIBRARY_PATH`).

    Returns
    -------
    str
        Readable, only ``[A-Za-z0-9._-]`` characters: the library id as written in the library;
        ``smiles-<slugified canonical SMILES>-<6 hex digits of the structure key>``;
        ``file-<slugified file stem>-<hash of the absolute path and the file's content>`` (an edited
        partner file ranks into a folder of its own; the earlier ranking stays); ``id-<the id>`` when the id is
        path-safe (40 characters at most) and has no lower-case letter, else ``id-<slugified id>-<hash of the id>``
        (so that no two folders differ only in case on macOS or Windows).

    Raises
    ------
    PartnerError
        As :func:`partner_kind`, or a SMILES that does not parse.

    Examples
    --------
    >>> partner_slug("C60")
    'c60'
    >>> partner_slug("smiles:C1=CSC=C1")
    'smiles-c1ccsc1-c6b0b0'
    >>> partner_slug("id:KF-D01"), partner_slug("id:KF D01")
    ('id-KF-D01', 'id-KF-D01-ab575c')
    """
    kind = partner_kind(spec, library_path)
    spec = spec.strip()
    if kind == "library":
        return _library_lookup(spec, Path(library_path) if library_path is not None else None)
    if kind == "smiles":
        canonical, key = _canonical_key(spec[len(_SMILES_PREFIX):])
        return f"smiles-{slugify(canonical, 32)}-{key[1:7]}"
    if kind == "id":
        return _readable_slug("id", spec[len(_ID_PREFIX):].strip())
    path = Path(spec).expanduser().resolve()
    try:
        content = hashlib.sha256(path.read_bytes()).hexdigest()
    except OSError:  # not readable (yet): the path alone
        content = ""
    return f"file-{_safe_stem(path.stem)}-{_short_hash(str(path) + content, 8)}"


def split_partners(values) -> list[str]:
    """Partner specifications from repeated ``--partner`` options, each possibly a comma list.

    A value that names an existing file is kept whole (a path may hold commas);
    duplicates are dropped, order kept (library names, which are read
    case-insensitively, also when they differ only in case).

    Examples
    --------
    >>> split_partners(["y6,c60", " c60 ", "smiles:c1ccsc1", "Y6"])
    ['y6', 'c60', 'smiles:c1ccsc1']
    >>> split_partners([])
    []
    """
    out: list[str] = []
    for value in values or []:
        value = str(value).strip()
        parts = [value] if _is_file(value) else [p.strip() for p in value.split(",")]
        for part in parts:
            if part and _same_key(part) not in {_same_key(o) for o in out}:
                out.append(part)
    return out


def _same_key(spec: str) -> str:
    """What makes two partner specifications the same: a library name in any case, else the text."""
    try:
        return spec.lower() if partner_kind(spec) == "library" else spec
    except PartnerError:
        return spec


# --------------------------------------------------------------------------- resolving

def _row_partner(row: dict, *, kind: str, spec: str, slug: str, where: str, source: str) -> Partner:
    pid = _text(row.get("id"))
    status = _text(row.get("status")).lower()
    if status and status != "ok":
        raise PartnerError(f"{where}: row {quoted(pid)} has status {quoted(status)} ({_text(row.get('error'))[:200]}); "
                           "a partner needs computed levels")
    if not pid:
        raise PartnerError(f"{where}: the partner's id is empty; write its name in the id column (it names the "
                           "partner in the ranking)")
    if TIE_SEPARATOR in pid:  # an adversarial tester: 'x;y' read as two partners in best_partner
        raise PartnerError(f"{where}: the partner's id {quoted(pid)} contains {TIE_SEPARATOR!r}, which separates tied "
                           "partners in the partner matrix (best_partner); rename it in the id column")
    vals = {c: _float(row.get(c), f"{where}: {c} of {quoted(pid)}") for c in ("homo_ev", "lumo_ev", "gap_opt_ev")}
    for c in ("homo_ev", "lumo_ev", "gap_opt_ev"):
        if math.isinf(vals[c]):
            raise PartnerError(f"{where}: row {quoted(pid)}, column {c} = {vals[c]}: not a finite number; write the "
                               "value in eV, e.g. -5.3")
        if not math.isfinite(vals[c]):
            raise PartnerError(f"{where}: row {quoted(pid)} has no {c}; a partner needs HOMO, LUMO and optical gap "
                               "(gap_opt_ev: absorption onset in eV, e.g. 1.4)")
    scale = _text(row.get("scale")).lower()
    if scale not in SCALES:
        raise PartnerError(f"{where}: row {quoted(pid)} has scale {quoted(scale)}; every partner must declare "
                           "its scale, 'film' or 'gas'")
    role = _text(row.get("role")).lower()
    if role not in ROLES + ("",):
        raise PartnerError(f"{where}: row {quoted(pid)} has role {quoted(role)}; allowed: donor, acceptor or empty")
    sig = {c: _sigma_value(row.get(c), f"{where}: {c} of {quoted(pid)}") for c in _SIGMA}
    try:  # a partner file's own class is used like a candidate file's (an all-polymer audit: it was checked, then
        # ignored, and the pooled fill factor taken with the flag acceptor_class_unknown)
        given_class = acceptor_class_key(_text(row.get("acceptor_class")))
    except InputError as exc:
        raise PartnerError(f"{where}: row {quoted(pid)}: {exc}") from None
    return Partner(id=pid, name=_text(row.get("name")) or pid, role=role, **vals, **sig, scale=scale,
                   source=_text(row.get("source")) or source, slug=slug, kind=kind, spec=spec,
                   smiles=_text(row.get("smiles")), notes=_text(row.get("notes")), acceptor_class=given_class)


def _from_file(spec: str, slug: str) -> Partner:
    from screen.levels import read_levels

    path = Path(spec).expanduser().resolve()
    frame = read_levels(path)
    if len(frame) != 1:
        raise PartnerError(f"partner file {path} has {len(frame)} rows; a partner file holds exactly one levels "
                           "row (columns id, homo_ev, lumo_ev, gap_opt_ev, scale; optional role and σ columns). "
                           "To use one row of a larger levels file, rank that file with --partner id:<ID>")
    try:  # the checks of a levels file: numbers, id, scale, role, impossible levels (naming line and column)
        check_levels(frame, f"partner file {path}")
    except InputError as exc:
        raise PartnerError(str(exc)) from None
    _check_file_smiles(frame, path)
    return _row_partner(frame.iloc[0].to_dict(), kind="file", spec=spec, slug=slug,
                        where=f"partner file {path}, line 2", source=f"file {path}")


def _check_file_smiles(frame: pd.DataFrame, path: Path) -> None:
    """Refuse a partner file whose ``smiles`` cell a ``smiles:`` partner would be refused for.

    The structure classes the acceptor (fullerene, fused-ring …) and draws the partner; ``CC[Fe]`` was accepted
    and classed ``nfa-other`` (a new user's audit). Checked as the candidates are (parses; allowed elements;
    valence; neutral, closed-shell, one molecule), its size aside: the levels are given, not computed.
    """
    if "smiles" not in frame:
        return
    text = _text(frame["smiles"].iloc[0])
    if not text:
        return
    problem = _prepare_problem(text)
    if not problem or problem.endswith("(reason too_many_atoms)"):
        return
    idx = frame.index[0]
    line = int(idx) + 2 if isinstance(idx, (int, np.integer)) else 2
    raise PartnerError(f"partner file {path}: line {line}, column smiles = {quoted(text)}: {problem}; the smiles "
                       "column holds the partner's structure (one neutral, closed-shell molecule, or a polymer repeat "
                       "unit with two attachment points [*]) or stays empty")


def _from_levels(spec: str, slug: str, levels) -> Partner:
    from screen.levels import read_levels

    ident = spec[len(_ID_PREFIX):].strip()
    if levels is None:
        raise PartnerError(f"partner {spec!r} names a row of the levels table, but no levels table was given")
    frame = levels if isinstance(levels, pd.DataFrame) else read_levels(levels)
    where = "levels table" if isinstance(levels, pd.DataFrame) else f"levels file {levels}"
    ids = frame["id"].pipe(text_cells)
    rows = frame[ids.eq(ident)]
    if rows.empty:
        sample = ", ".join(quoted(i) for i in ids.head(8))
        raise PartnerError(f"partner {quoted(spec)}: no row with id {quoted(ident)} in the {where} (ids start "
                           f"{sample})")
    if len(rows) > 1 and "status" in rows:
        ok = rows[rows["status"].astype(str).str.lower().eq("ok")]
        rows = ok if len(ok) else rows.iloc[:1]
    if len(rows) > 1:
        cols = [c for c in ("homo_ev", "lumo_ev", "gap_opt_ev", "scale") if c in rows]
        if len(rows[cols].drop_duplicates()) > 1:
            raise PartnerError(f"partner {spec!r}: {len(rows)} rows of the {where} have id {ident!r} with "
                               "different levels; make the ids unique")
    return _row_partner(rows.iloc[0].to_dict(), kind="id", spec=spec, slug=slug, where=where,
                        source=f"row {ident!r} of the {where}")


def _from_computed(spec: str, slug: str, partner_levels) -> Partner:
    """A ``smiles:`` partner from the levels file of its workflow batch."""
    from screen.io import read_json
    from screen.levels import read_levels

    canonical, key = partner_key(spec)
    if partner_levels is None:
        raise PartnerError(f"partner {spec!r} is computed by the workflow (batch partner-{key}); pass the levels "
                           "file of that batch (`dascreen rank` and `dascreen run` compute it)")
    path = Path(partner_levels)
    if not path.is_file():
        raise PartnerError(f"partner {spec!r} has not been computed: {path} is missing; `dascreen rank --partner "
                           f"{spec}` computes it through the workflow with the run's protocol and calibration")
    frame = read_levels(path)
    if len(frame) != 1:
        raise PartnerError(f"{path}: the levels file of partner {spec!r} has {len(frame)} rows, not one")
    row = frame.iloc[0].to_dict()
    status = _text(row.get("status")).lower()
    if status and status != "ok":
        raise PartnerError(f"partner smiles:{canonical}: the calculation failed: {_text(row.get('error'))}")
    side = Path(f"{path}.meta.json")
    meta = read_json(side) if side.is_file() else {}
    computed = _row_partner(row, kind="smiles", spec=spec, slug=slug, where=f"partner levels file {path}",
                            source="")
    polymer = ""
    if _text(row.get("representation")) == "polymer":  # said on the partner card (an all-polymer audit)
        polymer = (f"; polymer repeat unit: levels at the chain limit of oligomers up to n = "
                   f"{_text(row.get('chain_n_max')) or '?'}, chain fit {_text(row.get('chain_fit_quality')) or '?'}")
    return dataclasses.replace(
        computed, id=f"smiles:{canonical}", name=canonical, role="", smiles=canonical,
        source=f"computed: protocol {meta.get('protocol_id')}, calibration {meta.get('models')}",
        notes=f"structure key {key}; raw xTB IP {float(row['xtb_ip_ev']):.3f} eV, "
              f"EA {float(row['xtb_ea_ev']):.3f} eV{polymer}")


def resolve_partner(spec: str, *, levels=None, partner_levels=None,
                    library_path: str | Path | None = None) -> Partner:
    """Turn a partner specification into a :class:`Partner`.

    Parameters
    ----------
    spec : str
        Library id (case-insensitive), path to a one-row levels CSV,
        ``smiles:<SMILES>`` or ``id:<ID>``.  A library id wins over a file of
        the same name in the working directory; write ``./name`` for the file.
    levels : pandas.DataFrame or path-like, optional
        The current levels table (needed for ``id:``).
    partner_levels : path-like, optional
        For ``smiles:``: the levels file of the partner's workflow batch
        (:func:`partner_levels_path`), computed with the run's protocol and
        calibration.
    library_path : path-like, optional
        Library CSV (default :data:`LIBRARY_PATH`).

    Returns
    -------
    Partner

    Raises
    ------
    PartnerError
        Unknown name (the message lists the library ids), a file with other
        than one row, a row without scale or levels, or a ``smiles:`` partner
        that has not been computed or whose calculation failed.
    InputError
        A partner file that cannot be read as a levels table (missing columns, impossible values: the checks of a
        levels file); :class:`PartnerError` is a subclass, so ``except InputError`` catches both.

    Notes
    -----
    No form runs the quantum-chemistry engine here: a ``smiles:`` partner is
    computed by the workflow like the candidates and read from its levels file.

    Examples
    --------
    >>> p = resolve_partner("scharber-reference-acceptor")
    >>> p.role, p.lumo_ev, p.scale
    ('acceptor', -4.3, 'film')
    """
    lib = Path(library_path) if library_path is not None else None
    kind = partner_kind(spec, lib)
    slug = partner_slug(spec, lib)
    spec = spec.strip()
    if kind == "library":
        return library_partners(lib)[slug]
    if kind == "file":
        return _from_file(spec, slug)
    if kind == "id":
        return _from_levels(spec, slug, levels)
    return _from_computed(spec, slug, partner_levels)
