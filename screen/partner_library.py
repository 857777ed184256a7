"""The built-in partner library and the :class:`Partner` record (see :mod:`screen.partners`).

``screen/data/partners.csv`` holds sourced frontier levels of common donor and
acceptor materials (``dascreen partners`` prints it).  Energies are on the
vacuum scale in eV (HOMO = −IP < 0, LUMO = −EA).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import pandas as pd

from screen.errors import InputError
from screen.levels_check import quoted

__all__ = ["LIBRARY_PATH", "LIBRARY_COLUMNS", "ROLES", "SCALES", "Partner", "PartnerError", "complement",
           "load_library", "library_partners", "library_table"]

#: the built-in partner library
LIBRARY_PATH = Path(__file__).parent / "data" / "partners.csv"
#: columns of the library file, in order
LIBRARY_COLUMNS = ["id", "name", "role", "homo_ev", "lumo_ev", "gap_opt_ev", "scale", "homo_sigma_ev",
                   "lumo_sigma_ev", "gap_opt_sigma_ev", "fc_reference_ev", "smiles", "source", "doi",
                   "from_memory", "notes"]
#: allowed roles
ROLES = ("donor", "acceptor")
#: allowed energy scales (docs/contracts.md §6)
SCALES = ("film", "gas")

_SIGMA = ("homo_sigma_ev", "lumo_sigma_ev", "gap_opt_sigma_ev")


class PartnerError(InputError):
    """A partner specification that cannot be resolved (message says why and what is allowed)."""


@dataclass(frozen=True)
class Partner:
    """One partner material: frontier levels, optical gap, scale and role.

    Parameters
    ----------
    id : str
        Identifier written to the ``partner`` column of the ranking (library
        id, the id of the file/levels row, or ``smiles:<canonical SMILES>``).
    name : str
        Human-readable name.
    role : str
        ``'donor'``, ``'acceptor'`` or ``''`` (unknown: the ranking then takes
        the complement of the candidates' role).
    homo_ev, lumo_ev : float
        Frontier levels, vacuum scale. [eV]
    gap_opt_ev : float
        Optical gap (NaN if unknown). [eV]
    homo_sigma_ev, lumo_sigma_ev, gap_opt_sigma_ev : float
        Standard uncertainties; 0 when not given. [eV]
    scale : str
        ``'film'`` or ``'gas'`` (docs/contracts.md §6).
    source : str
        Where the numbers come from (citation, file path or protocol).
    slug : str
        Path-safe folder name for ``rankings/<slug>/``.
    kind : str
        ``'library'``, ``'file'``, ``'smiles'`` or ``'id'``.
    spec : str
        The specification as given.
    smiles : str
        SMILES if known.
    doi : str
        DOI of the source if known.
    from_memory : bool or None
        Library entries: the values were recalled rather than read from the
        source (None when not stated).
    notes : str
        Free text (library notes, how a value was obtained).
    acceptor_class : str
        The class a partner file's ``acceptor_class`` column gives (:data:`screen.devicepars.ACCEPTOR_CLASSES`);
        '' when not given: the ranking then takes the class of the SMILES, else the pooled values.
    """

    id: str
    name: str
    role: str
    homo_ev: float
    lumo_ev: float
    gap_opt_ev: float
    homo_sigma_ev: float = 0.0
    lumo_sigma_ev: float = 0.0
    gap_opt_sigma_ev: float = 0.0
    scale: str = "film"
    source: str = ""
    slug: str = ""
    kind: str = "library"
    spec: str = ""
    smiles: str = ""
    doi: str = ""
    from_memory: bool | None = None
    notes: str = ""
    acceptor_class: str = ""

    def as_dict(self) -> dict:
        """Plain dict (NaN written as None) for JSON sidecars and the report.

        Examples
        --------
        >>> p = Partner("x", "X", "acceptor", -6.0, -4.0, float("nan"))
        >>> p.as_dict()["gap_opt_ev"] is None
        True
        """
        out = dataclasses.asdict(self)
        for key, value in out.items():
            if isinstance(value, float) and not math.isfinite(value):
                out[key] = None
        return out


def complement(role: str) -> str:
    """The other role of a donor/acceptor pair.

    Examples
    --------
    >>> complement("donor"), complement("acceptor")
    ('acceptor', 'donor')
    """
    if role not in ROLES:
        raise PartnerError(f"role must be 'donor' or 'acceptor', not {role!r}")
    return "acceptor" if role == "donor" else "donor"


# --------------------------------------------------------------------------- library

def _float(value, what: str) -> float:
    if value is None or (isinstance(value, str) and not value.strip()):
        return float("nan")
    try:
        return float(value)
    except (TypeError, ValueError):
        raise PartnerError(f"{what}: {quoted(value)} is not a number") from None


def _sigma_value(value, what: str) -> float:
    s = _float(value, what)
    if math.isnan(s):
        return 0.0
    if s < 0 or not math.isfinite(s):
        raise PartnerError(f"{what}: σ must be finite and >= 0, not {quoted(value)}")
    return s


def _text(value) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    return str(value).strip()


def load_library(path: str | Path | None = None) -> pd.DataFrame:
    """Read and check the partner library.

    Parameters
    ----------
    path : path-like, optional
        Library CSV (default :data:`LIBRARY_PATH`).

    Returns
    -------
    pandas.DataFrame
        One row per partner with :data:`LIBRARY_COLUMNS`; energies as floats
        [eV], text columns as str.

    Raises
    ------
    PartnerError
        Missing file or column, duplicate id, role or scale outside the
        allowed values, or a level that is not a number.

    Notes
    -----
    A process reads and checks each version of a file once (a ranking looks the
    library up about seven times); every call returns its own copy.

    Examples
    --------
    >>> lib = load_library()
    >>> "scharber-reference-acceptor" in set(lib["id"])
    True
    """
    path = Path(path) if path is not None else LIBRARY_PATH
    try:
        stat = path.stat()
    except OSError:
        return _read_library(path)  # says that the file is missing
    return _read_library_version(path, path.resolve(), stat.st_mtime_ns, stat.st_size).copy()


@lru_cache(maxsize=8)
def _read_library_version(path: Path, resolved: Path, mtime_ns: int, size: int) -> pd.DataFrame:
    """:func:`_read_library` once per file version (path as given, file, modification time and size)."""
    return _read_library(path)


def _read_library(path: Path) -> pd.DataFrame:
    """Read and check a library file (see :func:`load_library`)."""
    from screen.io import read_csv_checked

    frame = read_csv_checked(path, LIBRARY_COLUMNS, what="partner library", error=PartnerError, dtype=str,
                             keep_default_na=False)
    frame["id"] = frame["id"].str.strip()
    dup = frame["id"][frame["id"].str.lower().duplicated()].tolist()
    if dup:
        raise PartnerError(f"{path}: duplicate partner id(s) {dup}")
    for col in ("role", "scale"):
        frame[col] = frame[col].str.strip().str.lower()
    bad_role = frame.loc[~frame["role"].isin(ROLES), "id"].tolist()
    if bad_role:
        raise PartnerError(f"{path}: partner(s) {bad_role} have a role other than 'donor' or 'acceptor'")
    bad_scale = frame.loc[~frame["scale"].isin(SCALES), "id"].tolist()
    if bad_scale:
        raise PartnerError(f"{path}: partner(s) {bad_scale} have a scale other than 'film' or 'gas'")
    for col in ("homo_ev", "lumo_ev", "gap_opt_ev", "fc_reference_ev", *_SIGMA):
        values = pd.to_numeric(frame[col].mask(frame[col].eq("")), errors="coerce")  # replace() warned (pandas 2.2)
        bad = frame.loc[values.isna() & frame[col].str.strip().ne(""), "id"].tolist()
        if bad:
            raise PartnerError(f"{path}: column {col} of partner(s) {bad} is not a number")
        frame[col] = values
    return frame


def _library_row_partner(row: dict, path: Path) -> Partner:
    pid = row["id"]
    for col in ("homo_ev", "lumo_ev"):
        if not math.isfinite(row[col]):
            raise PartnerError(f"{path}: partner {pid!r} has no {col}")
    fm = _text(row.get("from_memory")).lower()
    return Partner(
        id=pid, name=_text(row["name"]) or pid, role=row["role"], homo_ev=float(row["homo_ev"]),
        lumo_ev=float(row["lumo_ev"]), gap_opt_ev=float(row["gap_opt_ev"]),
        homo_sigma_ev=_sigma_value(row["homo_sigma_ev"], f"{path}: {pid} homo_sigma_ev"),
        lumo_sigma_ev=_sigma_value(row["lumo_sigma_ev"], f"{path}: {pid} lumo_sigma_ev"),
        gap_opt_sigma_ev=_sigma_value(row["gap_opt_sigma_ev"], f"{path}: {pid} gap_opt_sigma_ev"),
        scale=row["scale"], source=_text(row["source"]), slug=pid, kind="library", spec=pid,
        smiles=_text(row["smiles"]), doi=_text(row["doi"]),
        from_memory={"true": True, "false": False}.get(fm), notes=_text(row["notes"]),
    )


def library_partners(path: str | Path | None = None) -> dict[str, Partner]:
    """The library as :class:`Partner` objects by id (file order).

    Examples
    --------
    >>> lib = library_partners()
    >>> lib["scharber-reference-acceptor"].lumo_ev
    -4.3
    """
    path = Path(path) if path is not None else LIBRARY_PATH
    frame = load_library(path)
    return {row["id"]: _library_row_partner(row, path) for row in frame.to_dict("records")}


def library_table(path: str | Path | None = None, source_width: int = 70) -> pd.DataFrame:
    """The library as a display table (``dascreen partners``).

    Parameters
    ----------
    path : path-like, optional
        Library CSV (default :data:`LIBRARY_PATH`).
    source_width : int
        Sources longer than this are shortened with ``...`` (0: never).

    Returns
    -------
    pandas.DataFrame
        Columns ``id, role, homo_ev, lumo_ev, gap_opt_ev, scale, source``
        (energies in eV; the source is followed by its DOI when known).
    """
    rows = []
    for p in library_partners(path).values():
        src = p.source + (f" doi:{p.doi}" if p.doi else "")
        if source_width and len(src) > source_width:
            src = src[: source_width - 3] + "..."
        rows.append({"id": p.id, "role": p.role, "homo_ev": p.homo_ev, "lumo_ev": p.lumo_ev,
                     "gap_opt_ev": p.gap_opt_ev, "scale": p.scale, "source": src})
    return pd.DataFrame(rows, columns=["id", "role", "homo_ev", "lumo_ev", "gap_opt_ev", "scale", "source"])
