"""Levels stage: one row per input row, raw engine values and calibrated levels.

This module joins the prepare manifest (every input row, in input order) with
the per-shard electronic tables (one row per unique structure), so duplicate
structures share one computation and rejected rows keep their reason. When
calibration models are supplied, :func:`apply_models` adds the calibrated
columns of the ``levels.csv`` contract (see ``docs/contracts.md``).

Energy scales: ``ip_ev``/``ea_ev``/``gap_fund_ev`` are isolated-molecule
(gas-phase) values; ``homo_ev``/``lumo_ev`` are on the scale named in the
``scale`` column of the same row (``film`` by default).
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np
import pandas as pd

from screen.columns import CALIBRATED_COLUMNS, LEVELS_CONTRACT_COLUMNS, LEVELS_MIN_COLUMNS
from screen.electronic import ELECTRONIC_COLUMNS, RAW_COLUMNS
from screen.io import read_csv_checked

#: leading columns of levels.csv, in order (:data:`screen.columns.LEVELS_CONTRACT_COLUMNS`)
CONTRACT_COLUMNS = LEVELS_CONTRACT_COLUMNS

__all__ = ["CONTRACT_COLUMNS", "CALIBRATED_COLUMNS", "assemble", "summarise", "read_levels", "LEVELS_MIN_COLUMNS"]

_EXTRA = ["name", "role", "key", "duplicate_of", "heavy_atoms", "reason"]


def assemble(manifest: pd.DataFrame, electronic: Iterable[pd.DataFrame]) -> pd.DataFrame:
    """Join the manifest with electronic results: every input row, input order.

    Parameters
    ----------
    manifest : pandas.DataFrame
        ``manifest.csv`` from :func:`screen.prepare.prepare` (columns ``row, id,
        key, smiles, status, reason, error, duplicate_of, ...``).
    electronic : iterable of pandas.DataFrame
        Per-shard tables with :data:`screen.electronic.ELECTRONIC_COLUMNS`.

    Returns
    -------
    pandas.DataFrame
        Contract columns first (calibrated ones empty), then raw ``xtb_*``
        columns, then provenance and pass-through columns. ``status`` is
        ``rejected`` (prepare), ``failed`` (structures/electronic, or a structure
        that was never computed) or ``ok``.
    """
    parts = [t for t in electronic if len(t)]
    elec = (pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=ELECTRONIC_COLUMNS))
    elec = elec.drop_duplicates("key", keep="last").set_index("key")
    out = manifest.copy()
    ok = out["status"].eq("ok")
    keys = out["key"].where(ok, "")
    found = keys.isin(elec.index)
    status = out["status"].copy()
    error = out["error"].fillna("").astype(str).copy()
    missing = ok & ~found
    status[missing] = "failed"
    error[missing] = "not computed: the structure has no electronic result (was its shard run?)"
    sub = elec.reindex(keys.where(found))
    sub.index = out.index
    computed = ok & found
    status[computed] = sub.loc[computed, "status"].astype(str)
    error[computed] = sub.loc[computed, "error"].fillna("").astype(str)
    out["status"], out["error"] = status, error
    for col in ELECTRONIC_COLUMNS:
        if col in ("key", "status", "error"):
            continue
        out[col] = sub[col].where(computed) if col in sub else np.nan
    for col in RAW_COLUMNS:
        out[col] = pd.to_numeric(out[col], errors="coerce")
    for col in CALIBRATED_COLUMNS:
        out[col] = np.nan if col != "scale" else ""
    if "smiles" not in out:
        out["smiles"] = ""
    if "smiles_input" in out:  # rows that never got a canonical SMILES show what the user wrote
        out["smiles"] = out["smiles"].fillna("").astype(str).mask(lambda s: s.eq(""), out["smiles_input"])
    for col in ("n_atoms", "n_conformers", "truncated_chains"):
        out[col] = pd.to_numeric(out[col], errors="coerce").astype("Int64")
    lead = CONTRACT_COLUMNS + RAW_COLUMNS
    rest = [c for c in _EXTRA if c in out and c not in lead]
    tail = [c for c in out.columns if c not in lead and c not in rest and c != "row"]
    return out.sort_values("row", kind="stable")[lead + rest + tail].reset_index(drop=True)


def summarise(levels: pd.DataFrame) -> dict:
    """Counts of ok / rejected / failed rows."""
    counts = levels["status"].value_counts()
    return {"rows": int(len(levels)), **{s: int(counts.get(s, 0)) for s in ("ok", "rejected", "failed")}}


def read_levels(path) -> pd.DataFrame:
    """Read a levels file (ours or a user's) and check the minimum columns.

    Raises
    ------
    InputError
        The file is missing or unreadable, or a required column is missing
        (naming the file and the columns found).
    """
    frame = read_csv_checked(path, LEVELS_MIN_COLUMNS, what="a levels file", dtype={"id": str},
                             keep_default_na=False, na_values=[""])
    frame["id"] = frame["id"].fillna("").astype(str)
    frame["scale"] = frame["scale"].astype(object).where(frame["scale"].notna(), "").astype(str)
    return frame
