"""Semiconductor oxides and redox mediators of the dye-cell mode: the sourced library and user one-row files.

The built-in tables are ``screen/data/semiconductors.csv`` (band edges in V vs
NHE, with type ``n`` or ``p`` and which edge) and ``screen/data/mediators.csv``
(redox potentials in V vs NHE, optional ``min_drive_reg_ev``: a couple-specific
regeneration threshold).  Every row records its source, DOI and whether the
value was recalled (``from_memory``).

A user gives their own oxide or mediator as a path to a one-row CSV file, like
a partner in the bulk-heterojunction mode:

- oxide: ``id, band_edge_v_nhe`` (``type`` n|p; ``name``, ``source``, ``doi``,
  ``notes``); or ``band_edge_v`` with a column
  ``reference`` (or ``band_edge_reference``: NHE, SCE, Ag/AgCl, Fc) and, for
  Fc⁺/Fc, ``solvent`` (required: Fc⁺/Fc vs NHE depends on it, no solvent is
  assumed); or ``band_edge_ev`` on the vacuum scale, converted with the absolute
  NHE potential;
- mediator: ``id, e_redox_v_nhe`` (optional ``min_drive_reg_ev`` ≥ 0, ``name``, …);
  or ``e_redox_v`` with ``reference`` (or ``e_redox_reference``; ``solvent`` for
  Fc⁺/Fc); or ``e_redox_ev`` (vacuum scale).

The ``type`` column stays optional (as it always was), but a file without it,
or with it empty, is no longer silently n-type: the oxide is taken as n-type,
:attr:`Material.type_assumed` is set, the ranking says so on stderr and every
reason that names the band edge adds "type n assumed".  A row with more fields
than the header is refused with its line (:func:`screen.dyecell.checks.check_field_counts`).

Values are checked (:mod:`screen.dyecell.checks`): a potential outside
−1.5…+2 V vs NHE, a positive vacuum-scale energy or a negative threshold is
refused with the likely slip (vacuum-scale eV, mV, a dropped sign) and the fix.
A plausible value that still lies outside the range of the built-in library by
more than :data:`LIBRARY_MARGIN_V` (iodide typed as −0.35 V, an n-type edge of
+0.5 V) is ranked, with a notice naming the likely sign slip
(:func:`plausibility_notice`, on stderr and in the report).  A reference id that
carries its solvent (``fc-mecn``) and a ``solvent`` column naming another one
are refused (:func:`screen.dyecell.scales.solvent_conflict`).

The band edge is a flat-band / conduction-band reference that moves with pH
and electrolyte (about −59 mV per pH unit, and Li⁺ or bases shift it); the
library's ``conditions`` and ``notes`` say under which conditions each value
holds [1]_.  Ids are user text: output folders use :attr:`Material.slug`.

References
----------
.. [1] A. Hagfeldt, M. Grätzel, "Light-induced redox reactions in
   nanocrystalline systems", Chem. Rev. 95 (1995) 49–68. :doi:`10.1021/cr00033a003` (from memory)
.. [2] S. Trasatti, Pure Appl. Chem. 58 (1986) 955. :doi:`10.1351/pac198658070955`

Examples
--------
>>> ox = resolve_oxide("tio2-anatase")
>>> ox.kind, ox.type, ox.potential_v_nhe
('library', 'n', -0.5)
>>> resolve_mediator("Co-BPY3").potential_v_nhe
0.56
"""

from __future__ import annotations

import hashlib
import math
import re
from dataclasses import asdict, dataclass
from functools import lru_cache
from pathlib import Path

import pandas as pd

from screen.dyecell.checks import (
    check_field_counts,
    decimal_comma_hint,
    potential_problem,
    reference_conflict,
    threshold_problem,
    vacuum_problem,
)
from screen.dyecell.scales import needs_solvent, nhe_from_vacuum_ev, reference_entry, solvent_conflict
from screen.errors import InputError
from screen.io import separator_problem

__all__ = ["Material", "OXIDES_FILE", "MEDIATORS_FILE", "LIBRARY_MARGIN_V", "load_oxides", "load_mediators",
           "resolve_oxide", "resolve_mediator", "resolve_material", "close_ids", "type_assumed_notice",
           "plausibility_notice"]

_DATA = Path(__file__).resolve().parent.parent / "data"
#: built-in semiconductor table
OXIDES_FILE = _DATA / "semiconductors.csv"
#: built-in mediator table
MEDIATORS_FILE = _DATA / "mediators.csv"
#: a file's band edge or mediator potential further than this outside the range of the library's (of that role
#: and oxide type) gets a notice (:func:`plausibility_notice`): band edges move by about ±0.2 V with pH and
#: additives, and reported couples reach a little beyond the library's (common practice) [V]
LIBRARY_MARGIN_V = 0.3


@dataclass(frozen=True)
class Material:
    """An oxide or a mediator, with its one potential in V vs NHE.

    Attributes
    ----------
    id, name : str
        Identifier and name (user text for a file).
    role : {'oxide', 'mediator'}
    potential_v_nhe : float
        Oxide: the band edge that takes the charge (conduction band for ``n``,
        valence band for ``p``); mediator: the redox potential. [V vs NHE]
    type : str
        ``n`` or ``p`` for an oxide; '' for a mediator.
    min_drive_reg_ev : float
        Mediator-specific regeneration threshold; NaN = use the configured one. [eV]
    conversion : str
        How the potential was brought to V vs NHE ('' when given so).
    kind : {'library', 'file'}
    slug : str
        Path-safe folder-name part.
    type_assumed : bool
        True for an oxide file without a ``type`` (or with it empty): taken as ``n``, and said so.
    """

    id: str
    name: str
    role: str
    potential_v_nhe: float
    type: str = ""
    min_drive_reg_ev: float = math.nan
    source: str = ""
    doi: str = ""
    from_memory: bool = False
    conditions: str = ""
    notes: str = ""
    conversion: str = ""
    kind: str = "library"
    slug: str = ""
    type_assumed: bool = False

    def as_dict(self) -> dict:
        """Fields as a dict (NaN → None; the potential rounded to 4 decimals, as in ``ranking.csv``), for sidecars.

        Examples
        --------
        >>> Material("m", "m", "mediator", 0.32 + 0.241).as_dict()["potential_v_nhe"]
        0.561
        """
        out = {k: (None if isinstance(v, float) and math.isnan(v) else v) for k, v in asdict(self).items()}
        if isinstance(out.get("potential_v_nhe"), float):
            out["potential_v_nhe"] = round(out["potential_v_nhe"], 4)
        return out


def _text(value) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    return str(value).strip()


def _bool(value) -> bool:
    return _text(value).lower() in ("true", "1", "yes")


def _float(value) -> float:
    try:
        out = float(_text(value))
    except ValueError:
        return math.nan
    return out


@lru_cache(maxsize=8)
def _read(path: str, needed: tuple[str, ...]) -> pd.DataFrame:
    p = Path(path)
    if not p.is_file():
        raise InputError(f"library file {p} is missing")
    check_field_counts(p, "library file")
    frame = pd.read_csv(p, dtype=str, keep_default_na=False)
    missing = [c for c in needed if c not in frame.columns]
    if missing:
        raise InputError(f"{p}: missing column(s) {missing}; found {list(frame.columns)}")
    return frame


def load_oxides(path: str | Path | None = None) -> pd.DataFrame:
    """The semiconductor library as text columns (``band_edge_v_nhe`` numeric).

    Examples
    --------
    >>> sorted(load_oxides()["id"])[:2]
    ['nio', 'sno2']
    """
    frame = _read(str(path or OXIDES_FILE), ("id", "name", "type", "band_edge_v_nhe", "band_edge")).copy()
    frame["band_edge_v_nhe"] = pd.to_numeric(frame["band_edge_v_nhe"], errors="coerce")
    return frame


def load_mediators(path: str | Path | None = None) -> pd.DataFrame:
    """The mediator library (``e_redox_v_nhe`` numeric, ``min_drive_reg_ev`` numeric or NaN).

    Examples
    --------
    >>> "iodide-triiodide" in set(load_mediators()["id"])
    True
    """
    frame = _read(str(path or MEDIATORS_FILE), ("id", "name", "e_redox_v_nhe")).copy()
    frame["e_redox_v_nhe"] = pd.to_numeric(frame["e_redox_v_nhe"], errors="coerce")
    frame["min_drive_reg_ev"] = pd.to_numeric(frame.get("min_drive_reg_ev", pd.Series("", index=frame.index)),
                                              errors="coerce")
    return frame


def _short_hash(text: str, n: int = 8) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:n]


def _file_slug(path: Path) -> str:
    stem = re.sub(r"[^A-Za-z0-9._-]+", "-", path.stem).strip("-.")[:32] or "file"
    return f"file-{stem}-{_short_hash(str(path.resolve()))}"


def _one_row(path: Path, what: str) -> dict:
    try:
        check_field_counts(path, f"{what} file")
        frame = pd.read_csv(path, dtype=str, keep_default_na=False)
    except (OSError, pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise InputError(f"{what} file {path} cannot be read as CSV: {exc}") from exc
    problem = separator_problem(frame.columns)
    if problem:
        raise InputError(f"{what} file {path}: {problem}")
    if len(frame) != 1:
        raise InputError(f"{what} file {path} must hold exactly one row; it has {len(frame)}")
    return {k.strip(): v for k, v in frame.iloc[0].to_dict().items()}


def _columns_read(row: dict, base: str) -> str:
    """The columns of a one-row file, and a rename for one that looks like a wanted column (other case, a unit)."""
    wanted = (f"{base}_v_nhe", f"{base}_v", f"{base}_ev")
    hints = []
    for col in row:
        plain = re.sub(r"[\(\[].*?[\)\]]", " ", str(col)).strip().lower()  # units in brackets dropped
        plain = re.sub(r"[\s\-]+", "_", plain).strip("_")
        unit = str(col).lower()
        if plain == base and "nhe" in unit:
            plain = f"{base}_v_nhe"
        if plain in wanted and col != plain:
            hints.append(f"rename {col!r} to {plain}")
    shown = f"the file's columns are {list(row)}"
    if hints:
        return f"{shown}; column names are read exactly, lower case and without units: {'; '.join(hints)}"
    return f"{shown} (column names are read exactly, lower case and without units)"


def _potential_from_row(row: dict, base: str, where: str) -> tuple[float, str]:
    """``<base>_v_nhe``, or ``<base>_v`` + ``reference`` (+ ``solvent``), or ``<base>_ev`` (vacuum).

    The value must be plausible for an oxide or a mediator
    (:data:`screen.dyecell.checks.POTENTIAL_RANGE_V_NHE`); a slip of units or
    sign is refused with the fix.  A converted value records the reference, the
    offset added, its ``electrodes.csv`` id and whether it is recalled
    (``from_memory``) in the conversion text.
    """
    given = [c for c in (f"{base}_v_nhe", f"{base}_v", f"{base}_ev") if _text(row.get(c))]
    if len(given) != 1:
        found = f"found {given}" if given else f"found none; {_columns_read(row, base)}"
        raise InputError(f"{where}: give exactly one of {base}_v_nhe [V vs NHE], {base}_v with a column named "
                         f"'reference' (NHE, SCE, Ag/AgCl, or Fc with a column named 'solvent'), or {base}_ev "
                         f"[eV, vacuum scale]; {found}")
    col = given[0]
    value = _float(row[col])
    if not math.isfinite(value):
        unit = "eV on the vacuum scale, e.g. -4.0" if col.endswith("_ev") else "V, e.g. 0.5"
        comma = decimal_comma_hint(_text(row[col]))
        raise InputError(f"{where}: {col} = {row[col]!r} is not a finite number; "
                         + (f"a decimal comma? write {comma} (with a decimal point)" if comma else
                            f"write it in {unit}"))
    if col.endswith("_v_nhe"):
        problem = potential_problem(value, col, f"{base}_ev")
        if problem:
            raise InputError(f"{where}, column {col} = {value:g}: {problem}")
        return value, ""
    if col.endswith("_ev"):
        problem = vacuum_problem(value, col)
        if problem:
            raise InputError(f"{where}, column {col} = {value:g}: {problem}")
        note = f"{col} = {value} eV (vacuum) → V vs NHE with the absolute NHE potential 4.44 V (Trasatti 1986)"
        return float(nhe_from_vacuum_ev(value)), note
    clash = reference_conflict({c: _text(row.get(c)) for c in ("reference", f"{base}_reference")})
    if clash:
        raise InputError(f"{where}: {clash}")
    ref_col = next((c for c in ("reference", f"{base}_reference") if _text(row.get(c))), "")
    if not ref_col:
        raise InputError(f"{where}: {col} needs the reference electrode in a column named 'reference' "
                         f"(or {base}_reference): NHE, SCE, Ag/AgCl, or Fc with a column named 'solvent'")
    reference, solvent = _text(row[ref_col]), _text(row.get("solvent"))
    if needs_solvent(reference) and not solvent:
        raise InputError(f"{where}: {ref_col} = {reference!r} needs a column named 'solvent': Fc+/Fc vs NHE "
                         "depends on it (acetonitrile +0.63 V, dichloromethane +0.70 V; `dascreen dyecell --list` "
                         "prints every reference electrode and solvent of screen/data/electrodes.csv)")
    clash = solvent_conflict(reference, solvent, ref_col)
    if clash:
        raise InputError(f"{where}: {clash}")
    entry = reference_entry(reference, solvent)
    out = value + entry["offset_v"]
    problem = potential_problem(out, f"{base}_v_nhe", f"{base}_ev")
    if problem:
        raise InputError(f"{where}, column {col} = {value:g} V vs {reference} (= {out:.2f} V vs NHE): {problem}")
    recalled = ", from memory" if entry["from_memory"] else ""
    return out, (f"{col} = {value} V vs {reference}{f' ({solvent})' if solvent else ''} "
                 f"{entry['offset_v']:+.3f} V ({entry['reference']} in electrodes.csv{recalled}) → "
                 f"{out:.3f} V vs NHE")


def _lookup(frame: pd.DataFrame, spec: str) -> dict | None:
    low = spec.strip().lower()
    hit = frame[frame["id"].str.lower().eq(low)]
    return None if hit.empty else hit.iloc[0].to_dict()


def _library_or_file(spec: str, table: pd.DataFrame, what: str, columns: str) -> tuple[dict | None, Path | None]:
    """``(library row, None)`` for a library id (any case), ``(None, path)`` for an existing file.

    Raises :class:`InputError` listing the ids when ``spec`` is neither.
    """
    row = _lookup(table, spec) if spec else None
    if row is not None:
        return row, None
    path = Path(spec).expanduser() if spec else None
    if path is not None and path.is_dir():  # "not a file" of a folder sent the user looking for a typo
        raise InputError(f"{what} {spec!r} is a folder, not a file; give the one-row CSV in it ({columns}) or a "
                         f"library id: {', '.join(table['id'])}")
    if path is None or not path.is_file():
        close = close_ids(spec, table) if spec else []
        hint = f" Did you mean {' or '.join(close)}?" if close else ""
        raise InputError(f"unknown {what} {spec!r}: not a library id and not a file.{hint} Library ids: "
                         f"{', '.join(table['id'])}. Or give a one-row CSV: {columns}")
    return None, path


def close_ids(word: str, table: pd.DataFrame) -> list[str]:
    """Library ids close to ``word``: ids that contain it, then close ids or names (difflib), at most three.

    Examples
    --------
    >>> t = pd.DataFrame({"id": ["iodide-triiodide", "co-bpy3"], "name": ["iodide/triiodide", "cobalt bipyridine"]})
    >>> close_ids("iodide", t), close_ids("co-bpy", t), close_ids("zzz", t)
    (['iodide-triiodide'], ['co-bpy3'], [])
    """
    from screen.partners import suggest

    ids = [str(i) for i in table["id"]]
    names = {str(n).lower(): str(i) for i, n in zip(table["id"], table.get("name", table["id"])) if str(n).strip()}
    low = word.strip().lower()
    found = [i for i in ids if len(low) >= 3 and low in i.lower()]
    for hit in suggest(low, ids + list(names), n=5):
        ident = names.get(hit.lower(), hit) if hit not in ids else hit
        if ident not in found:
            found.append(ident)
    return found[:3]


def resolve_material(role: str, spec: str) -> Material:
    """:func:`resolve_oxide` (``role='oxide'``) or :func:`resolve_mediator` of ``spec``.

    Examples
    --------
    >>> try:
    ...     resolve_material("oxide", "tio2-anatse")
    ... except InputError as exc:
    ...     print(str(exc).split(" Library ids")[0])
    unknown oxide 'tio2-anatse': not a library id and not a file. Did you mean tio2-anatase or tio2-rutile?
    """
    return (resolve_oxide if role == "oxide" else resolve_mediator)(spec)


def _described(row: dict, conditions_column: str, default_source: str = "") -> dict:
    """The descriptive fields of a :class:`Material` (name, source, doi, recall flag, conditions, notes)."""
    return {"name": _text(row.get("name")), "source": _text(row.get("source")) or default_source,
            "doi": _text(row.get("doi")), "from_memory": _bool(row.get("from_memory")),
            "conditions": _text(row.get(conditions_column)), "notes": _text(row.get("notes"))}


def resolve_oxide(spec: str, library: str | Path | None = None) -> Material:
    """An oxide from the library (id, any case) or a one-row CSV file.

    Raises
    ------
    InputError
        Unknown id and no such file (the message lists the ids), or a bad file.

    Examples
    --------
    >>> resolve_oxide("nio").type, resolve_oxide("nio").potential_v_nhe
    ('p', 0.5)
    """
    spec = _text(spec)
    row, path = _library_or_file(spec, load_oxides(library), "oxide", "id,band_edge_v_nhe[,type n|p]")
    if path is None:
        return Material(id=row["id"], role="oxide", potential_v_nhe=float(row["band_edge_v_nhe"]),
                        type=_text(row.get("type")).lower() or "n", kind="library", slug=row["id"],
                        **_described(row, "conditions"))
    row = _one_row(path, "oxide")
    where = f"oxide file {path}"
    potential, conversion = _potential_from_row(row, "band_edge", where)
    given = _text(row.get("type")).lower()
    typ = given or "n"  # optional column: n assumed, and said so (Material.type_assumed)
    if typ not in ("n", "p"):
        raise InputError(f"{where}: type = {typ!r}; allowed: n (conduction band takes electrons) or p "
                         "(valence band takes holes)")
    return Material(id=_text(row.get("id")) or path.stem, role="oxide", potential_v_nhe=potential, type=typ,
                    conversion=conversion, kind="file", slug=_file_slug(path), type_assumed=not given,
                    **_described(row, "conditions", str(path)))


def type_assumed_notice(oxide: Material) -> str:
    """The stderr line for an oxide file without a ``type`` (``""`` for any other oxide).

    Examples
    --------
    >>> type_assumed_notice(Material("x", "x", "oxide", -0.5, "n", type_assumed=True))[:60]
    'oxide x has no type (column type missing or empty): taken as'
    """
    if not oxide.type_assumed:
        return ""
    return (f"oxide {oxide.id} has no type (column type missing or empty): taken as n-type (its band edge "
            f"{oxide.potential_v_nhe:+.2f} V vs NHE takes electrons from the excited dye); add a column type with n "
            "or p to the file to say so, e.g. type = p for NiO")


def _library_range(material: Material) -> tuple[float, float, str, pd.DataFrame] | None:
    """(low, high, what, rows) of the library potentials a material is compared with (None: nothing to compare)."""
    if material.role == "oxide":
        table = load_oxides()
        rows = table[table["type"].str.strip().str.lower().eq(material.type or "n")]
        col, what = "band_edge_v_nhe", f"{material.type or 'n'}-type oxides ({OXIDES_FILE.name})"
    else:
        rows = load_mediators()
        col, what = "e_redox_v_nhe", f"mediators ({MEDIATORS_FILE.name})"
    values = pd.to_numeric(rows[col], errors="coerce").dropna()
    if values.empty:
        return None
    rows = rows.assign(_v=pd.to_numeric(rows[col], errors="coerce"))
    return float(values.min()), float(values.max()), what, rows


def plausibility_notice(material: Material) -> str:
    """A notice for an oxide band edge or mediator potential outside the library's range ± :data:`LIBRARY_MARGIN_V`
    (``""`` when inside): ranked anyway, but a dropped or added minus sign is the likely slip, which it names.

    Examples
    --------
    >>> plausibility_notice(resolve_mediator("co-bpy3"))
    ''
    >>> print(plausibility_notice(Material("m", "m", "mediator", -0.35)))  # doctest: +ELLIPSIS
    mediator m: E_redox = -0.35 V vs NHE lies outside the +0.35...+0.97 V of the built-in mediators ...
    """
    found = _library_range(material)
    if found is None or not math.isfinite(material.potential_v_nhe):
        return ""
    lo, hi, what, rows = found
    value, margin = float(material.potential_v_nhe), LIBRARY_MARGIN_V
    if lo - margin <= value <= hi + margin:
        return ""
    if material.role == "oxide":
        label = f"oxide {material.id}: its {'valence' if material.type == 'p' else 'conduction'}-band edge"
    else:
        label = f"mediator {material.id}: E_redox"
    span = f"{lo:+.2f} V" if lo == hi else f"{lo:+.2f}...{hi:+.2f} V"
    text = (f"{label} = {value:+.2f} V vs NHE lies outside the {span} of the built-in {what} by more than "
            f"{margin:.1f} V (common-practice margin); it is ranked as given")
    hints = []
    flipped = -value
    if lo - margin <= flipped <= hi + margin:
        close = rows[(rows["_v"] - flipped).abs() <= 0.02]["id"].tolist()
        named = f", as {' and '.join(close)}" if close else ""
        hints.append(f"a sign slip? {flipped:+.2f} V would lie in the library's range{named}")
    if material.role == "oxide":
        other = "p" if material.type == "n" else "n"
        swap = _library_range(Material(material.id, material.name, "oxide", value, other))
        if swap is not None and swap[0] - margin <= value <= swap[1] + margin:
            article = "an" if other == "n" else "a"
            hints.append(f"or {article} {other}-type oxide? {value:+.2f} V fits the library's {other}-type oxides: "
                         f"give type = {other} in the file")
        elif material.type == "n":
            hints.append("conduction-band edges of the library's n-type oxides lie at or negative of 0 V vs NHE")
    if hints:
        text += "; " + "; ".join(hints)
    return text + "; check the value, its sign and its reference electrode"


def resolve_mediator(spec: str, library: str | Path | None = None) -> Material:
    """A mediator from the library (id, any case) or a one-row CSV file.

    Raises
    ------
    InputError
        Unknown id and no such file (the message lists the ids), or a bad file.

    Examples
    --------
    >>> m = resolve_mediator("iodide-triiodide")
    >>> m.role, m.potential_v_nhe
    ('mediator', 0.35)
    """
    spec = _text(spec)
    row, path = _library_or_file(spec, load_mediators(library), "mediator", "id,e_redox_v_nhe[,min_drive_reg_ev]")
    if path is None:
        return Material(id=row["id"], role="mediator", potential_v_nhe=float(row["e_redox_v_nhe"]),
                        min_drive_reg_ev=_float(row.get("min_drive_reg_ev")), kind="library", slug=row["id"],
                        **_described(row, "solvent"))
    row = _one_row(path, "mediator")
    where = f"mediator file {path}"
    potential, conversion = _potential_from_row(row, "e_redox", where)
    thr = _float(row.get("min_drive_reg_ev")) if _text(row.get("min_drive_reg_ev")) else math.nan
    if _text(row.get("min_drive_reg_ev")) and not math.isfinite(thr):
        raise InputError(f"{where}: min_drive_reg_ev = {row.get('min_drive_reg_ev')!r} is not a number")
    problem = threshold_problem(thr) if math.isfinite(thr) else None
    if problem:
        raise InputError(f"{where}, column min_drive_reg_ev = {thr:g}: {problem}")
    return Material(id=_text(row.get("id")) or path.stem, role="mediator", potential_v_nhe=potential,
                    min_drive_reg_ev=thr, conversion=conversion, kind="file", slug=_file_slug(path),
                    **_described(row, "solvent", str(path)))
