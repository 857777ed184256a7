"""Prepare stage: read candidate structures, validate them and split them into shards.

The package is laid out as :mod:`~screen.prepare.readers` (CSV, SMILES and SDF readers),
:mod:`~screen.prepare.checks` (chemistry checks and reason codes),
:mod:`~screen.prepare.validation` (row-level validation), :mod:`~screen.prepare.shards`
(sharding and the manifest), :mod:`~screen.prepare.attachments` (polymer repeat units),
:mod:`~screen.prepare.charges` (unphysical charge separation) and
:mod:`~screen.prepare.options` (:class:`PrepareOptions`);
canonical SMILES and structure keys live in :mod:`screen.chem`.  Everything a caller needs is
importable from ``screen.prepare``.

The prepare stage is the entry point of the pipeline (see ``docs/contracts.md``, §2).  It turns
a user's candidate list into

* ``manifest.csv`` -- one row for **every** input row, in input order, with a status
  (``ok`` or ``rejected``), a machine-readable reason code, a human-readable error message and
  the canonical structure; and
* ``shard-000.csv``, ``shard-001.csv``, ... -- the unique accepted structures (one row per
  structure key), which the expensive stages process independently.

Input formats
-------------
The format is chosen from the file extension (a trailing ``.gz`` is accepted for every format; a
``.gz`` file that is not whole, readable gzip data is refused with ``not a readable gzip file``):

``.csv``
    Header row with at least a ``smiles`` column; ``id``, ``name`` and ``role`` are recognised
    (header matching ignores case and surrounding blanks); every other column is passed
    through verbatim.  Without an ``id`` column, a column named ``Compound ID``, ``compound_id``,
    ``Mol-ID``, ``Identifier``, ``Molecule ID``, ``Sample ID``, ``Structure ID``, ``Cmpd ID`` or
    ``Compound No`` (compared in lower case, letters and digits only:
    :data:`screen.prepare.readers.ID_ALIASES`) is the id column; two such columns are refused.
    A first line ``sep=,`` (a spreadsheet's separator note) is skipped; ``sep=;`` or a header
    separated by ``;`` or tabs (more of them than commas) is refused naming the separator.
    Unnamed columns empty on every row (a spreadsheet's trailing ``,,``) are dropped, and empty
    fields after the last column are not a ``malformed_row``.  A header that names a column
    twice (``smiles`` and ``SMILES``, two ``id`` columns, or any other name exactly repeated) is
    refused: which one is meant cannot be guessed.  All fields are read as text, so ids such as
    ``007`` or ``NA`` survive unchanged (the equivalent of ``pandas.read_csv(dtype=str, keep_default_na=False)``; the
    :mod:`csv` module is used so that a malformed line becomes a rejected row in its place
    instead of aborting the read or being dropped).  Lines that are empty, or whose fields are
    all blank (spreadsheet exports often end with ``,,,`` lines), are not rows.
``.smi``, ``.smiles``, ``.txt``
    ``SMILES<whitespace>id`` per line; the id is the rest of the line (it may contain blanks, not
    tabs: a line whose id is followed by more tab-separated fields is a ``malformed_row`` naming
    them).  Blank lines and lines starting with ``#`` are skipped, as is a first line whose first token
    is literally ``smiles`` (a header; with a tab, ``SMILES<TAB>anything``).  A first line with a
    comma in its first token (no SMILES contains one: a CSV saved as ``.smi``) refuses the file with
    a hint to rename it ``.csv``.  A first line that is a tab-separated header naming a ``smiles``
    column anywhere (and is not ``SMILES<TAB>one other column``) makes the file a table (a
    spreadsheet's "Text (Tab delimited)" export, ``ID<TAB>SMILES<TAB>Name``): it is read by its
    header as a CSV file is (comment lines only before the header).  A first line that looks like a
    header but cannot be read (an id, name or role column and no ``smiles`` column; ``smiles`` not
    first in a header separated by blanks) refuses the file.
``.sdf``, ``.sd``
    The title line of each record is the id; with an empty title, the first non-empty data item
    named ``ID`` or another id spelling (as for CSV).  The data items ``name`` and ``role`` (any case)
    fill those columns, other data items are passed through.  A record that RDKit cannot read
    becomes a rejected row (reason ``unparsable``), never a crash.  Polymer ends drawn by a drawing
    program become the repeat unit's attachment points: attachment points (``M  APO``, V3000
    ``ATTCHPT=``; exactly two, on different atoms that each carry a hydrogen) and an SRU polymer
    bracket (``M  STY ... SRU``: its two crossing bonds, each ending in ``*``, ``R#`` or a one-atom
    stub); anything else of theirs rejects the record with an ``attachment_*`` reason or
    ``unparsable`` and says how to mark the ends (:func:`screen.prepare.readers._drawn_ends`).

A CSV or SMILES file in UTF-16 with its byte-order mark (a spreadsheet's "Unicode text") is read
as such; an SD file in UTF-16 is refused naming ``iconv -f utf-16 -t utf-8``, and a file in UTF-16
without a byte-order mark (a NUL byte beside every character) naming ``iconv -f utf-16le -t utf-8``.

Every format: an id, name or role that holds a control character (NUL, CR, LF or another C0
control; TAB is allowed) rejects its row (``malformed_row``, naming the line, the column and the
character; :func:`validate` checks it, so a frame built in code too), and a line longer than
``readers.MAX_LINE_BYTES`` (128 KiB; 16 MiB in an SD file) is not read: its row is rejected
(``too_many_atoms`` for a SMILES-file line that is all SMILES, else ``malformed_row``), or the file
refused when it is a CSV header line.  A header line repeated later in a CSV or SMILES file (two
files joined) is a ``malformed_row`` saying so.

Reason codes
------------
A rejected row carries exactly one reason (the first problem found, in this order; a structure far
over the size limit is ``too_many_atoms`` right after the attachment-point reasons, see there):

``malformed_row``       CSV line with more (non-empty) fields than the header (fields may be
                        misassigned); a SMILES-file line with tab-separated fields after its id;
                        a repeated header line; a control character in an id, name or role; a
                        line too long to read.
``empty``               blank or whitespace-only SMILES.
``unparsable``          SMILES syntax error (message gives RDKit's complaint in short form, or
                        names the first character that is not ASCII -- a look-alike hyphen or an
                        invisible character copied from a document -- by code point and name),
                        SMILES with embedded whitespace, unreadable SDF record, an SD polymer
                        drawn without usable ends (an SRU bracket no bond crosses, an end group
                        outside it, another polymer S-group type), or another
                        sanitisation failure.  Element symbols unknown to RDKit (``[Xx]``)
                        and R-groups (``[R]``) make the SMILES unparsable for RDKit; they are
                        recognised and reported as ``unsupported_element`` / ``dummy_atom``.
``dummy_atom``          R-group placeholders written in SMILES (``[R]``, ``[R1]``; RDKit
                        cannot read them) and CXSMILES attachment-point labels on real atoms
                        (``_AP1``).  Dummy atoms (``*``) are judged by the attachment-point
                        rules below.
``attachment_single``   exactly one attachment point (``*c1ccccc1``, ``[*:1]CC``): neither a
                        molecule nor a repeat unit.
``attachment_too_many`` more than two attachment points (branched unit, R-group template).
``attachment_bond``     an attachment point with no bond, more than one bond, or a bond that
                        is not single (``*=CC*``).
``attachment_partner``  an attachment point on a hydrogen (``[H]*``, ``[*H]``) or on another
                        attachment point (``**``).
``attachment_same_atom`` both attachment points on the same atom (``*C*``).
``attachment_no_hydrogen`` an attachment point on an aromatic atom with no hydrogen to replace
                        (a ring-fusion carbon, a pyridine-type nitrogen).
``attachment_not_conjugated`` the two attachment points joined through an acyclic saturated carbon
                        or silicon (a side chain, an alkylene linker, ``*CC*``): the units would
                        not be conjugated; ring atoms (a fluorene's C9) are allowed.
``multi_fragment``      more than one disconnected fragment (salts, mixtures, solvates); the
                        message lists the fragments.  A structure whose only disallowed
                        elements are alkali or alkaline-earth counter-ions, such as
                        ``CC(=O)[O-].[Na+]``, is reported as a salt (the message also names
                        those elements).
``unsupported_element`` elements outside ``PrepareOptions.allowed_elements`` (metals, noble
                        gases, ...) or unknown element symbols; the message lists the
                        offending elements and the allowed set, and starts with
                        ``contains <element>: metal complexes ... are outside the calibration``
                        for a metal.  Checked before ``multi_fragment`` for any other
                        disallowed element, so a metal complex written as dot-separated
                        fragments (metal ion and ligands) is reported by its metal.
``charge_separated_sp3`` (a) a charged carbon with four single bonds (counting hydrogens)
                        in a net-neutral structure -- checked before ``valence``, which would
                        otherwise report it; (b) after the ``charged`` check: in a net-neutral
                        structure, a carbanion on an sp3 carbon that is not an ylide on a
                        heteroatom, or a carbocation with no pi system, lone pair or anionic
                        heteroatom next to it (:mod:`screen.prepare.charges`).  Accepted with
                        ``PrepareOptions.allow_charge_separation`` (case (a) then falls to
                        ``valence``).
``valence``             impossible valence, e.g. pentavalent carbon (message names the element
                        and the 0-based atom index in the order of ``smiles_input``).
``aromaticity``         aromatic system that cannot be kekulised, e.g. pyrrole written
                        ``c1ccnc1`` without ``[nH]``.
``charged``             net charge different from zero.  Species that are neutral overall
                        but carry formal charges (nitro groups, N-oxides, ylides on
                        heteroatoms, conjugated zwitterions) are accepted, with a
                        ``charge_separated`` note.
``open_shell``          any atom with radical electrons, or an odd number of electrons.
``hypercoordinate``     an atom with more than four bonded neighbours, hydrogens counted (SF5,
                        PF5, SF6): the embedding and force fields of the geometry step build no
                        five- or six-coordinate centre.
``too_many_atoms``      more heavy atoms than ``PrepareOptions.max_heavy_atoms``.  A structure far
                        over it is refused before RDKit sanitises or writes it (RDKit crashed on a
                        chain of 20 000 atoms), right after the attachment points, without a
                        canonical ``smiles``: a SMILES text longer than 50 characters per heavy
                        atom of the limit (10 000 for 200;
                        :func:`screen.prepare.checks.smiles_length_limit`) is not read at all, and a
                        structure of more than 2000 heavy atoms (or the limit, if larger;
                        :func:`screen.prepare.checks.full_check_limit`), counted on the
                        unsanitised parse or an SD record's atom block, is refused on that count.
``ring_perception_time`` a ring system of many rings fused to a macrocycle (a large
                        cycloparaphenylene nanohoop) whose RDKit aromaticity perception did not
                        finish within ``checks.RING_PERCEPTION_LIMIT_S`` (10 s) in an isolated
                        worker; its cost grows exponentially with the ring count, so the row is
                        skipped rather than stall the batch.
``bad_role``            ``role`` other than ``donor``, ``acceptor`` or empty (case and
                        surrounding blanks are ignored; the value is stored in lower case).
``duplicate_id``        second and later rows whose id was already used by an earlier row
                        (whatever that row's status); the message names the first row.  Ids are
                        compared (and stored) without surrounding blanks: ``" dup "`` repeats ``dup``.
``oligomer_build_failed`` a polymer repeat unit that passed every check but whose oligomer series
                        could not be built (any exception of :mod:`screen.oligomers`); the message
                        gives the exception's text.  Only this row is rejected
                        (:func:`screen.prepare.polymers.build_oligomers`).
``internal_error``      an unexpected exception while checking this row (the batch goes on).

Rows that are accepted may carry informative notes in the ``note`` column, as ``code: text``
items separated by ``"; "``:

``missing_id``          the id was empty; an id named after the row's place in the file was
                        assigned: ``line-<L>`` for a CSV or SMILES row (``L`` = 1-based file line,
                        counting the header and blank lines), ``record-<N>`` for an SD record
                        (1-based), ``row-<row>`` (0-based position) for a frame built in code;
                        with a ``-2``, ``-3`` ... suffix if that text is already an id in the file
                        (:func:`screen.prepare.readers.generated_id`).  Auto-assignment is
                        friendlier than rejection; :func:`read_candidates` says on stderr how many
                        ids it gave (once per file and process: on the console of ``dascreen
                        run``, in the prepare job's log), naming a column that holds a different
                        value on every row and whose name suggests ids; :func:`prepare` records
                        them in ``manifest.meta.json`` (``generated_ids``).
``isotopes_removed``    isotope labels were stripped (unless ``keep_isotopes``).
``atom_maps_removed``   atom-map numbers on real atoms were stripped (labels of attachment
                        points are removed silently).
``charge_separated``    formal charges present, net charge zero.

Polymer repeat units
--------------------
A structure with exactly two valid attachment points -- ``*``, ``[*]``, ``[*:1]``/``[*:2]``,
``[1*]``/``[2*]``, CXSMILES ``_R1``/``_R2`` labels, or R-group atoms (``R#``) of an SDF record
-- is a repeat unit: its ``representation`` is ``polymer`` (otherwise ``molecule``; ``''`` when
the structure could not be classified).  Its canonical SMILES keeps the ends as ``*`` with
their labels removed (``[*:1]c1ccc([*:2])s1`` -> ``*c1ccc(*)s1``), so every way of writing the
unit gives one key, and that key never equals a molecule's (no molecule's SMILES contains
``*``).  ``heavy_atoms`` counts the unit's atoms without the attachment points.

Duplicate structures (different SMILES strings of the same molecule) are **not** rejected:
every such row is ``ok``, shares the same ``key`` (so the computation is done once) and, from
the second occurrence on, ``duplicate_of`` holds the id of the first ``ok`` row with that key.
Because only the first row with a given id can be ``ok``, ids of ``ok`` rows are unique and
``duplicate_of`` is unambiguous.

Output files
------------
``manifest.csv`` columns, in order: ``row, id, key, smiles_input, smiles, status, reason,
error, duplicate_of, name, role, heavy_atoms, note, representation`` and then the passthrough
columns (:data:`MANIFEST_COLUMNS`).  ``note`` and ``representation`` are not in the original
contract; they sit after ``heavy_atoms`` so that passthrough columns stay last.  Ids and passthrough text are written
verbatim (CSV-quoted where needed); text that a spreadsheet would treat as a formula
(``=1+1``) is *not* altered here -- escaping belongs to the report writers.  Read the manifest
back with :func:`read_manifest` (all text) so that ids like ``NA`` survive.  Each shard
``shard-NNN.csv`` has columns ``key, smiles, id, representation``; ``manifest.meta.json`` records the input
file's SHA-256, the options and the RDKit version.

Keys are ``"m" + sha1(canonical isomeric SMILES)[:16]`` -- 17 characters from ``[a-z0-9]``,
safe as file names.  User ids are never used in paths.  Structures are normalised by RDKit
sanitisation (aromaticity, explicit hydrogens, charge-separated nitro groups); stereochemistry
is kept; tautomers and resonance forms other than those RDKit normalises are *not* merged.
"""

from __future__ import annotations

import os
from pathlib import Path

from screen.chem import structure_key
from screen.prepare.checks import REASON_CODES
from screen.prepare.options import PrepareOptions
from screen.prepare.polymers import (
    OLIGOMER_COLUMNS,
    PolymerOptions,
    build_oligomers,
    compute_rows,
    read_oligomers,
    truncation_min_carbons,
)
from screen.prepare.readers import read_candidates
from screen.prepare.shards import (
    MANIFEST_COLUMNS,
    SHARD_COLUMNS,
    generated_ids,
    read_manifest,
    shard,
    write_prepared,
)
from screen.prepare.validation import validate

__all__ = [
    "PrepareOptions",
    "PolymerOptions",
    "OLIGOMER_COLUMNS",
    "read_oligomers",
    "MANIFEST_COLUMNS",
    "SHARD_COLUMNS",
    "REASON_CODES",
    "read_candidates",
    "validate",
    "shard",
    "prepare",
    "preview",
    "preview_lines",
    "options_from_config",
    "structure_key",
    "read_manifest",
]


def prepare(
    path: str | os.PathLike[str],
    out_dir: str | os.PathLike[str],
    options: PrepareOptions = PrepareOptions(),
    polymer: PolymerOptions = PolymerOptions(),
    truncate_min_carbons: int | None = None,
) -> dict[str, int]:
    """Run the prepare stage: read, validate, shard and write the results.

    Parameters
    ----------
    path : str or os.PathLike
        Candidate file (see :func:`read_candidates`).
    out_dir : str or os.PathLike
        Output directory, created if needed.  Only these files are written in it:
        ``shard-NNN.csv`` (columns :data:`SHARD_COLUMNS`), ``manifest.meta.json``
        (provenance: input file and SHA-256, options, RDKit version, counts, shard files) and
        ``manifest.csv`` (all rows, columns :data:`MANIFEST_COLUMNS` then passthrough),
        written last so that its presence means the stage finished.  Shard files of an
        earlier run beyond the new shard count are removed.  Every write is atomic.
    options : PrepareOptions
        Validation limits and sharding.
    polymer : PolymerOptions
        Oligomer series of polymer rows: each accepted repeat unit is replaced in the shards
        by its oligomers n = 1 … ``n_max``, and ``oligomers.csv`` (columns
        :data:`OLIGOMER_COLUMNS`) maps polymer key → (n, oligomer key, SMILES); it is
        written only when the batch holds a polymer (:mod:`screen.prepare.polymers`).
    truncate_min_carbons : int, optional
        The structures stage's side-chain truncation, if on: the oligomer atom limit
        counts the atoms that will be computed.

    Returns
    -------
    dict
        ``{'rows', 'ok', 'rejected', 'unique', 'shards'}`` counts (ints).

    Raises
    ------
    screen.errors.InputError
        A problem with the input file as a whole (see :func:`read_candidates`).

    Examples
    --------
    >>> import pathlib, tempfile
    >>> work = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (work / "c.csv").write_text("id,smiles\\na,c1ccsc1\\nb,C1CC\\n", encoding="utf-8")
    >>> prepare(work / "c.csv", work / "prepared")
    {'rows': 2, 'ok': 1, 'rejected': 1, 'unique': 1, 'shards': 1}
    >>> sorted(p.name for p in (work / "prepared").iterdir())
    ['manifest.csv', 'manifest.meta.json', 'shard-000.csv']
    """
    path = Path(path)
    manifest, oligomers, computed = _read_and_check(path, options, polymer, truncate_min_carbons)
    shards = shard(computed, options)
    return write_prepared(manifest, shards, path, Path(out_dir), options, oligomers=oligomers, polymer=polymer)


def _read_and_check(path: Path, options: PrepareOptions, polymer: PolymerOptions, truncate_min_carbons: int | None):
    """The stage's reading of a candidate file, shared by :func:`prepare` and :func:`preview`: the manifest (every
    row with its status), the oligomer table and the structures to compute (polymers replaced by their oligomers;
    a polymer whose series cannot be built is rejected)."""
    manifest = validate(read_candidates(path, max_heavy_atoms=options.max_heavy_atoms), options)
    manifest, oligomers = build_oligomers(manifest, polymer, truncate_min_carbons)
    return manifest, oligomers, compute_rows(manifest, oligomers)

def options_from_config(cfg) -> tuple[PrepareOptions, PolymerOptions, int | None]:
    """The prepare stage's options from a run configuration (its ``prepare``, ``polymer`` and ``structures``
    sections): :class:`PrepareOptions`, :class:`PolymerOptions` and the side-chain truncation the oligomer atom limit
    counts with (:func:`screen.prepare.polymers.truncation_min_carbons`). One home for the workflow's prepare job
    and the dry run's preview."""
    from dataclasses import fields

    known = {f.name for f in fields(PrepareOptions)}
    opts = PrepareOptions(**{k: tuple(v) if isinstance(v, list) else v for k, v in cfg["prepare"].items()
                             if k in known})
    return opts, PolymerOptions.from_mapping(cfg["polymer"]), truncation_min_carbons(cfg["structures"])


def preview(path: str | os.PathLike[str], options: PrepareOptions = PrepareOptions(),
            polymer: PolymerOptions = PolymerOptions(), truncate_min_carbons: int | None = None) -> dict:
    """How the prepare stage will read a candidate file, without writing anything (``dascreen run --dry-run``).

    The same reading, validation and oligomer building as :func:`prepare`: a chemist sees before an overnight
    batch which rows are taken as what, and which are rejected and why (an input-file audit: the dry run listed
    the workflow's jobs but no row).

    Returns
    -------
    dict
        ``rows``, ``ok``, ``molecules``, ``polymers`` (accepted rows of each kind), ``oligomers`` (distinct
        oligomer structures the polymers add), ``structures`` (distinct structures to compute), ``rejected``
        (count) and ``rejections``: a frame of the rejected rows (``row`` 0-based, ``id``, ``reason``, ``error``).

    Examples
    --------
    >>> import pathlib, tempfile
    >>> work = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (work / "c.csv").write_text("id,smiles\\na,c1ccsc1\\nb,C1CC\\np,[*]c1ccc([*])s1\\n", encoding="utf-8")
    >>> out = preview(work / "c.csv")
    >>> {k: out[k] for k in ("rows", "ok", "molecules", "polymers", "oligomers", "rejected")}
    {'rows': 3, 'ok': 2, 'molecules': 1, 'polymers': 1, 'oligomers': 4, 'rejected': 1}
    >>> out["rejections"][["id", "reason"]].values.tolist()
    [['b', 'unparsable']]
    >>> sorted(p.name for p in work.iterdir())
    ['c.csv']
    """
    manifest, oligomers, computed = _read_and_check(Path(path), options, polymer, truncate_min_carbons)
    ok = manifest["status"].eq("ok")
    kinds = manifest["representation"] if "representation" in manifest.columns else None
    polymers = int((ok & kinds.eq("polymer")).sum()) if kinds is not None else 0
    rejected = manifest.loc[~ok, ["row", "id", "reason", "error"]].reset_index(drop=True)
    return {"rows": int(len(manifest)), "ok": int(ok.sum()), "molecules": int(ok.sum()) - polymers,
            "polymers": polymers, "oligomers": int(oligomers["key"].nunique()) if len(oligomers) else 0,
            "structures": int(computed["key"].nunique()) if len(computed) else 0,
            "rejected": int(len(rejected)), "rejections": rejected}


#: rejected rows the dry run's preview lists one by one (the rest are counted by reason)
PREVIEW_LISTED = 10


def preview_lines(name: str, summary: dict) -> list[str]:
    """The console lines of :func:`preview`: one line of counts, then up to :data:`PREVIEW_LISTED` rejected rows
    with their reason and message, then the others counted by reason.

    Examples
    --------
    >>> import pandas as pd
    >>> rej = pd.DataFrame({"row": [1], "id": ["b"], "reason": ["unparsable"], "error": ["SMILES syntax error"]})
    >>> for line in preview_lines("c.csv", {"rows": 3, "ok": 2, "molecules": 1, "polymers": 1, "oligomers": 4,
    ...                                     "structures": 5, "rejected": 1, "rejections": rej}):
    ...     print(line)
    dascreen: c.csv reads as 3 rows: 2 accepted (1 molecule, 1 polymer repeat unit as 4 oligomers), 1 rejected; 5 distinct structures to compute or take from the results store
      rejected: input row 2, id 'b': unparsable: SMILES syntax error
    """
    def count(n: int, word: str, plural: str | None = None) -> str:
        return f"{n} {word if n == 1 else (plural or word + 's')}"

    kinds = [count(summary["molecules"], "molecule")]
    if summary["polymers"]:
        kinds.append(f"{count(summary['polymers'], 'polymer repeat unit')} as "
                     f"{count(summary['oligomers'], 'oligomer')}")
    lines = [f"dascreen: {name} reads as {count(summary['rows'], 'row')}: {summary['ok']} accepted "
             f"({', '.join(kinds)}), {summary['rejected']} rejected; "
             f"{count(summary['structures'], 'distinct structure')} to compute or take from the results store"]
    rej = summary["rejections"]
    for _, r in rej.head(PREVIEW_LISTED).iterrows():
        lines.append(f"  rejected: input row {int(r['row']) + 1}, id {str(r['id'])!r}: {r['reason']}: {r['error']}")
    if len(rej) > PREVIEW_LISTED:
        rest = rej.iloc[PREVIEW_LISTED:]["reason"].value_counts()
        lines.append("  and " + ", ".join(f"{n} more {reason}" for reason, n in rest.items()))
    return lines


