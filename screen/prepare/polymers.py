"""Polymer rows → oligomer rows: what the expensive stages compute for a repeat unit.

A polymer row of the manifest (``representation == "polymer"``, its SMILES holds two
``*``) is never computed itself.  Prepare builds its head-to-tail oligomers
n = 1 … ``n_max`` (:func:`screen.oligomers.oligomer_series`, ends capped with H or
methyl, at most ``max_atoms`` atoms with hydrogens; the monomer is always built),
and each oligomer becomes an ordinary molecule: its own structure key, its own row
in a shard (``representation = "oligomer"``), computed, journalled and resumed like
any molecule.  Oligomers shared by several candidates (or equal to a molecule
candidate) are computed once, since shards hold each key once.

The map polymer → oligomers is written to ``prepared/oligomers.csv`` (columns
:data:`OLIGOMER_COLUMNS`); the levels stage reads it to collect each polymer's
per-n values and extrapolate them to the chain limit (``docs/contracts.md`` §2).

Examples
--------
>>> import pandas as pd
>>> manifest = pd.DataFrame({"id": ["pt", "b"], "key": ["mx", "my"], "smiles": ["*c1ccc(*)s1", "c1ccccc1"],
...                          "status": ["ok", "ok"], "representation": ["polymer", "molecule"]})
>>> table = oligomer_table(manifest, PolymerOptions(n_max=3))
>>> list(table["n"]), list(table["smiles"])
([1, 2, 3], ['c1ccsc1', 'c1csc(-c2cccs2)c1', 'c1csc(-c2ccc(-c3cccs3)s2)c1'])
>>> list(compute_rows(manifest, table)["representation"])
['oligomer', 'oligomer', 'oligomer', 'molecule']

A repeat unit whose oligomers cannot be built rejects its own row only (:func:`build_oligomers`):

>>> def broken(*args):
...     raise ValueError("Can't kekulize mol.")
>>> checked, table = build_oligomers(manifest, PolymerOptions(n_max=2), oligomer_series=broken)
>>> list(checked["status"]), checked["reason"][0], len(table)
(['rejected', 'ok'], 'oligomer_build_failed', 0)
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, fields
from typing import Any

import pandas as pd
from rdkit import Chem, rdBase

from screen import oligomers as _oligomers
from screen.chem import canonical_smiles, structure_key
from screen.errors import ConfigError
from screen.oligomers import CAPS, RepeatUnit
from screen.schema import section_defaults

__all__ = ["PolymerOptions", "OLIGOMER_COLUMNS", "BUILD_FAILED", "oligomer_table", "build_oligomers",
           "compute_rows", "read_oligomers", "truncation_min_carbons"]

_DEFAULTS: dict[str, Any] = section_defaults("polymer")

#: columns of ``prepared/oligomers.csv``: the polymer's key and id, then one row per oligomer
OLIGOMER_COLUMNS = ("polymer_key", "polymer_id", "n", "key", "smiles", "n_atoms", "per_unit", "side_chains_cut")

#: reason code of a polymer row whose oligomer series could not be built (one of
#: :data:`screen.prepare.checks.REASON_CODES`)
BUILD_FAILED = "oligomer_build_failed"


@dataclass(frozen=True)
class PolymerOptions:
    """Settings of the oligomer series; the fields are the keys of the ``polymer`` config section.

    Parameters
    ----------
    n_max : int
        Longest oligomer [repeat units].
    max_atoms : int
        Largest oligomer [atoms, hydrogens included]; the monomer is always built.
    cap : {"H", "methyl"}
        End groups of every oligomer.
    fit_rms_tol_ev : float
        Largest RMS residual of an accepted saturating chain fit [eV]
        (:func:`screen.extrapolate.extrapolate`).
    """

    n_max: int = _DEFAULTS["n_max"]
    max_atoms: int = _DEFAULTS["max_atoms"]
    cap: str = _DEFAULTS["cap"]
    fit_rms_tol_ev: float = _DEFAULTS["fit_rms_tol_ev"]

    def __post_init__(self) -> None:
        if self.cap not in CAPS:
            raise ConfigError(f"polymer.cap must be one of {', '.join(CAPS)}, got {self.cap!r}")
        for name, low in (("n_max", 1), ("max_atoms", 10)):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int) or value < low:
                raise ConfigError(f"polymer.{name} must be an integer >= {low}, got {value!r}")

    @classmethod
    def from_mapping(cls, mapping: Mapping[str, Any] | None) -> PolymerOptions:
        """From a ``polymer`` config section (unknown keys ignored, missing ones default)."""
        names = {f.name for f in fields(cls)}
        return cls(**{k: v for k, v in (mapping or {}).items() if k in names})


def _atoms_with_h(smiles: str) -> int:
    return Chem.AddHs(Chem.MolFromSmiles(smiles)).GetNumAtoms()


def truncation_min_carbons(structures: Mapping) -> int | None:
    """The side-chain truncation the structures stage applies (``structures`` config section), as
    :func:`oligomer_table` takes it: the minimum chain length in carbons, or ``None`` when off.

    >>> truncation_min_carbons({"truncate_side_chains": True, "truncate_min_carbons": 6})
    6
    >>> truncation_min_carbons({"truncate_side_chains": False, "truncate_min_carbons": 6}) is None
    True
    """
    return structures["truncate_min_carbons"] if structures["truncate_side_chains"] else None


def methyl_side_chains(smiles: str, min_carbons: int) -> tuple[str, list[str]]:
    """A repeat unit with its long pendant alkyl groups cut to methyl, and one record per cut group.

    The reference polymers of the calibration are written with methyl stubs (2-ethylhexyl, 2-octyldodecyl,
    hexyl → methyl; ``models/reference/README.md``), so a candidate polymer is computed the same way. The
    molecules' rule (:func:`screen.structures.truncate_side_chains`) keeps a branch point (2-ethylhexyl →
    2-methylpropyl); on polymers that made another structure than the calibration saw: a polymer audit found
    the raw film IP of PffBT4T-2OD oligomers 0.16-0.18 eV off the reference polymer's, and PM6 with its
    2-ethylhexyl chains reached only the dimer within ``polymer.max_atoms``.

    Examples
    --------
    >>> methyl_side_chains("*c1sc(*)c(CC(CC)CCCC)c1F", 6)
    ('*c1sc(*)c(F)c1C', ['C8H17->CH3'])
    >>> methyl_side_chains("*c1ccc(*)s1", 6)
    ('*c1ccc(*)s1', [])
    """
    from screen.structures import truncate_side_chains

    mol, cuts = truncate_side_chains(Chem.MolFromSmiles(smiles), min_carbons, to_methyl=True)
    return (Chem.MolToSmiles(mol), cuts) if cuts else (smiles, [])


def _computed_atoms(min_carbons: int):
    """SMILES → atoms with hydrogens after side-chain truncation (what the structures stage computes)."""
    from screen.structures import truncate_side_chains

    def count(smiles: str) -> int:
        mol, _ = truncate_side_chains(Chem.MolFromSmiles(smiles), min_carbons)
        return Chem.AddHs(mol).GetNumAtoms()

    return count


def oligomer_table(manifest: pd.DataFrame, options: PolymerOptions = PolymerOptions(),
                   truncate_min_carbons: int | None = None, failures: dict[str, str] | None = None,
                   oligomer_series=None) -> pd.DataFrame:
    """One row per (polymer, n): the oligomers of every accepted polymer row.

    Parameters
    ----------
    manifest : pandas.DataFrame
        Validated rows (``id, key, smiles, status, representation``).
    options : PolymerOptions
    truncate_min_carbons : int, optional
        When the structures stage truncates side chains (``structures.truncate_min_carbons``),
        ``max_atoms`` counts the atoms of the truncated oligomer, the one computed.
    failures : dict, optional
        When given, a polymer whose series cannot be built (any exception, e.g. RDKit's
        ``KekulizeException``) gets no rows and ``failures[polymer key]`` says why in words;
        without it the exception propagates.
    oligomer_series : callable, optional
        The series builder (default :func:`screen.oligomers.oligomer_series`; tests replace it).

    Returns
    -------
    pandas.DataFrame
        Columns :data:`OLIGOMER_COLUMNS`; each polymer key once (duplicate rows share
        it), in order of first occurrence, n increasing.  ``per_unit`` is the number of
        coupled double bonds per repeat unit (:attr:`RepeatUnit.conjugation_length`).
    """
    rows: list[dict] = []
    if "representation" not in manifest.columns:
        return pd.DataFrame(columns=list(OLIGOMER_COLUMNS))
    poly = manifest[manifest["status"].eq("ok") & manifest["representation"].eq("polymer")]
    seen: set[str] = set()
    count = _computed_atoms(truncate_min_carbons) if truncate_min_carbons else None
    series = oligomer_series or _oligomers.oligomer_series
    for pkey, pid, smi in zip(poly["key"], poly["id"], poly["smiles"]):
        if pkey in seen:
            continue
        seen.add(pkey)
        try:
            with rdBase.BlockLogs():  # RDKit's own log lines would reach the terminal; the message says it
                rows.extend(_series_rows(pkey, pid, smi, options, truncate_min_carbons, count, series))
        except Exception as exc:  # one row's problem never stops the batch
            if failures is None:
                raise
            failures[pkey] = _build_failure(exc, options)
    return pd.DataFrame(rows, columns=list(OLIGOMER_COLUMNS))


def _series_rows(pkey: str, pid: str, smi: str, options: PolymerOptions, truncate_min_carbons: int | None,
                 count, series) -> list[dict]:
    """The rows of :func:`oligomer_table` for one polymer (raises whatever building them raises)."""
    cut_smi, cuts = methyl_side_chains(smi, truncate_min_carbons) if truncate_min_carbons else (smi, [])
    unit = RepeatUnit.from_smiles(cut_smi)
    rows = []
    for n, osmi in series(unit, options.n_max, options.max_atoms, options.cap, count):
        osmi = canonical_smiles(osmi)  # the prepare stage's form: equal molecules share a key
        rows.append({"polymer_key": pkey, "polymer_id": pid, "n": n, "key": structure_key(osmi),
                     "smiles": osmi, "n_atoms": _atoms_with_h(osmi), "per_unit": unit.conjugation_length,
                     "side_chains_cut": ";".join(cuts)})
    return rows


def _build_failure(exc: BaseException, options: PolymerOptions) -> str:
    """The plain-words message of a polymer row whose oligomers could not be built.

    >>> _build_failure(ValueError("Can't kekulize mol."), PolymerOptions(n_max=3)).split("screened: ")
    ['the oligomers of this repeat unit (n = 1 … 3, ends capped with H) could not be built, so it is not ', \
"ValueError: Can't kekulize mol.; check the two attachment points [*] and the rings they sit on, or write the unit \
another way"]
    """
    lines = str(exc).strip().splitlines()
    detail = f"{type(exc).__name__}: {lines[0].strip()}" if lines else type(exc).__name__
    return (f"the oligomers of this repeat unit (n = 1 … {options.n_max}, ends capped with {options.cap}) could not be "
            f"built, so it is not screened: {detail}; check the two attachment points [*] and the rings they sit on, "
            "or write the unit another way")


def build_oligomers(manifest: pd.DataFrame, options: PolymerOptions = PolymerOptions(),
                    truncate_min_carbons: int | None = None,
                    oligomer_series=None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The oligomer table of a validated manifest, and the manifest with unbuildable polymers rejected.

    Every accepted polymer row whose series cannot be built (:func:`oligomer_table` with ``failures``)
    becomes ``status = rejected``, reason :data:`BUILD_FAILED`, with the message in ``error`` (the
    exception's own text included); its ``key`` and ``duplicate_of`` are cleared, as for any rejected row.
    The other rows and their oligomers are untouched: the batch goes on.

    Returns
    -------
    tuple of pandas.DataFrame
        ``(manifest, oligomers)``; the manifest is a copy when a row was rejected.
    """
    failures: dict[str, str] = {}
    table = oligomer_table(manifest, options, truncate_min_carbons, failures=failures, oligomer_series=oligomer_series)
    if not failures:
        return manifest, table
    out = manifest.copy()
    for col in ("reason", "error", "duplicate_of"):
        if col not in out.columns:
            out[col] = ""
    hit = out["status"].eq("ok") & out["key"].isin(list(failures))
    if "representation" in out.columns:
        hit &= out["representation"].eq("polymer")
    out["error"] = out["error"].where(~hit, out["key"].map(failures))
    out.loc[hit, "status"] = "rejected"
    out.loc[hit, "reason"] = BUILD_FAILED
    out.loc[hit, "key"] = ""
    out.loc[hit, "duplicate_of"] = ""
    return out, table


def compute_rows(manifest: pd.DataFrame, oligomers: pd.DataFrame) -> pd.DataFrame:
    """The structures to compute, as a frame for :func:`screen.prepare.shard`.

    Accepted polymer rows are replaced by their oligomers (``id`` = ``<polymer id> n=<n>``,
    ``representation = "oligomer"``) at the polymer's place; molecule rows stay as they are.
    """
    kinds = manifest["representation"] if "representation" in manifest.columns else pd.Series(
        "molecule", index=manifest.index)
    by_polymer = {k: g for k, g in oligomers.groupby("polymer_key", sort=False)} if len(oligomers) else {}
    out: list[dict] = []
    for (_, row), kind in zip(manifest.iterrows(), kinds):
        if row["status"] != "ok":
            continue
        if kind == "polymer":
            for o in by_polymer.get(row["key"], pd.DataFrame()).itertuples():
                out.append({"status": "ok", "key": o.key, "smiles": o.smiles, "id": f"{row['id']} n={o.n}",
                            "representation": "oligomer"})
        else:
            out.append({"status": "ok", "key": row["key"], "smiles": row["smiles"], "id": row["id"],
                        "representation": kind or "molecule"})
    return pd.DataFrame(out, columns=["status", "key", "smiles", "id", "representation"])


def read_oligomers(path) -> pd.DataFrame:
    """Read ``oligomers.csv`` (an absent file means no polymers: an empty table)."""
    from pathlib import Path

    path = Path(path)
    if not path.is_file():
        return pd.DataFrame(columns=list(OLIGOMER_COLUMNS))
    frame = pd.read_csv(path, dtype={"polymer_key": str, "polymer_id": str, "key": str, "smiles": str,
                                     "side_chains_cut": str}, keep_default_na=False)
    if "side_chains_cut" not in frame:  # written before polymer side chains were cut to methyl
        frame["side_chains_cut"] = ""
    for col in ("n", "n_atoms", "per_unit"):
        frame[col] = pd.to_numeric(frame[col]).astype(int)
    return frame
