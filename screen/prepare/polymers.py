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
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, fields
from typing import Any

import pandas as pd
from rdkit import Chem

from screen.chem import canonical_smiles, structure_key
from screen.errors import ConfigError
from screen.oligomers import CAPS, RepeatUnit, oligomer_series
from screen.schema import section_defaults

__all__ = ["PolymerOptions", "OLIGOMER_COLUMNS", "oligomer_table", "compute_rows", "read_oligomers",
           "truncation_min_carbons"]

_DEFAULTS: dict[str, Any] = section_defaults("polymer")

#: columns of ``prepared/oligomers.csv``: the polymer's key and id, then one row per oligomer
OLIGOMER_COLUMNS = ("polymer_key", "polymer_id", "n", "key", "smiles", "n_atoms", "per_unit", "side_chains_cut")


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
                   truncate_min_carbons: int | None = None) -> pd.DataFrame:
    """One row per (polymer, n): the oligomers of every accepted polymer row.

    Parameters
    ----------
    manifest : pandas.DataFrame
        Validated rows (``id, key, smiles, status, representation``).
    options : PolymerOptions
    truncate_min_carbons : int, optional
        When the structures stage truncates side chains (``structures.truncate_min_carbons``),
        ``max_atoms`` counts the atoms of the truncated oligomer, the one computed.

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
    for pkey, pid, smi in zip(poly["key"], poly["id"], poly["smiles"]):
        if pkey in seen:
            continue
        seen.add(pkey)
        cut_smi, cuts = methyl_side_chains(smi, truncate_min_carbons) if truncate_min_carbons else (smi, [])
        unit = RepeatUnit.from_smiles(cut_smi)
        for n, osmi in oligomer_series(unit, options.n_max, options.max_atoms, options.cap, count):
            osmi = canonical_smiles(osmi)  # the prepare stage's form: equal molecules share a key
            rows.append({"polymer_key": pkey, "polymer_id": pid, "n": n, "key": structure_key(osmi),
                         "smiles": osmi, "n_atoms": _atoms_with_h(osmi), "per_unit": unit.conjugation_length,
                         "side_chains_cut": ";".join(cuts)})
    return pd.DataFrame(rows, columns=list(OLIGOMER_COLUMNS))


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
