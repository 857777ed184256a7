"""Shards and the manifest: split the unique accepted structures, write and read the files.

Examples
--------
>>> import pandas as pd
>>> frame = pd.DataFrame({"status": ["ok", "ok", "rejected", "ok"], "key": ["ma", "mb", "", "ma"],
...                       "smiles": ["C", "CC", "", "C"], "id": ["a", "b", "c", "d"]})
>>> [list(part.key) for part in shard(frame, PrepareOptions(shard_size=1, min_shards=1))]
[['ma'], ['mb']]
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
import re
from pathlib import Path

import pandas as pd
from rdkit import rdBase

from screen.chem import KEY_RECIPE
from screen.io import atomic_path
from screen.io import cell_text as _text
from screen.io import csv_text as _io_csv_text
from screen.prepare.options import PrepareOptions
from screen.provenance import sha256_file

__all__ = ["MANIFEST_COLUMNS", "SHARD_COLUMNS", "shard", "write_prepared", "read_manifest"]

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
    "representation",
)

#: Columns of every ``shard-NNN.csv``.
SHARD_COLUMNS: tuple[str, ...] = ("key", "smiles", "id", "representation")


#: Shard file names this stage writes (used to remove stale shards of an earlier run).
_SHARD_FILE = re.compile(r"^shard-(\d{3,})\.csv$")


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
        Output of :func:`screen.prepare.validate`.
    options : PrepareOptions
        ``shard_size`` and ``min_shards`` are used.

    Returns
    -------
    list of pandas.DataFrame
        Each with columns :data:`SHARD_COLUMNS`: ``key, smiles, id`` (the id of the first
        ``ok`` row with that key) and ``representation`` (``molecule`` or ``polymer``).
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
    # a frame from before polymer input was accepted has no representation: all molecules
    kinds = ok["representation"] if "representation" in ok.columns else ["molecule"] * len(ok)
    seen: dict[str, str] = {}
    columns: dict[str, list[str]] = {name: [] for name in SHARD_COLUMNS}
    for key, smi, ident, kind in zip(ok["key"], ok["smiles"], ok["id"], kinds):
        key, smi, ident = _text(key), _text(smi), _text(ident)
        if key in seen:
            if seen[key] != smi:
                raise ValueError(
                    f"shard(): key {key} is shared by two different structures "
                    f"{seen[key]!r} and {smi!r}"
                )
            continue
        seen[key] = smi
        for name, value in zip(SHARD_COLUMNS, (key, smi, ident, _text(kind))):
            columns[name].append(value)
    return [
        pd.DataFrame({name: pd.Series(values[start:stop], dtype=object)
                      for name, values in columns.items()})
        for start, stop in _shard_bounds(len(columns["key"]), options)
    ]


def _write_text(path: Path, text: str) -> None:
    """Write UTF-8 ``text`` to ``path`` atomically (line ends kept as given)."""
    with atomic_path(path) as tmp:
        with open(tmp, "w", encoding="utf-8", newline="") as handle:
            handle.write(text)


def _csv_text(frame: pd.DataFrame) -> str:
    """Render a frame as CSV text (no index, ``\\n`` line ends, missing values empty): :func:`screen.io.csv_text`,
    which quotes a field holding a carriage return (pandas wrote it bare, and the levels stage read the manifest
    back with a candidate's name split over two rows: a security audit).

    Examples
    --------
    >>> _csv_text(pd.DataFrame({"id": ["a\\r=1", None], "row": [1, 2]}))
    'id,row\\n"a\\r=1",1\\n,2\\n'
    """
    return _io_csv_text(frame, "\n")


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


#: how many generated ids ``manifest.meta.json`` lists by name (all are counted)
GENERATED_IDS_LISTED = 20


def generated_ids(manifest: pd.DataFrame) -> dict:
    """The ids prepare gave to rows without one (note ``missing_id``; :func:`screen.prepare.readers.generated_id`):
    ``{"count": n, "ids": the first GENERATED_IDS_LISTED}``, recorded in ``manifest.meta.json``.

    Examples
    --------
    >>> generated_ids(pd.DataFrame({"id": ["a", "line-3"], "note": ["", "missing_id: no id given, assigned 'line-3'"]}))
    {'count': 1, 'ids': ['line-3']}
    """
    if "note" not in manifest.columns or not len(manifest):
        return {"count": 0, "ids": []}
    given = manifest["note"].astype(str).str.contains("missing_id:", regex=False)
    ids = [str(i) for i in manifest.loc[given, "id"]]
    return {"count": len(ids), "ids": ids[:GENERATED_IDS_LISTED]}


def write_prepared(
    manifest: pd.DataFrame,
    shards: list[pd.DataFrame],
    source: Path,
    out: Path,
    options: PrepareOptions,
    oligomers: pd.DataFrame | None = None,
    polymer=None,
) -> dict[str, int]:
    """Write the shards, the sidecar and the manifest (last) into ``out``.

    Parameters
    ----------
    manifest : pandas.DataFrame
        Output of :func:`screen.prepare.validate`.
    shards : list of pandas.DataFrame
        Output of :func:`shard`.
    source : pathlib.Path
        The candidate file (its path and SHA-256 go into the sidecar).
    out : pathlib.Path
        Output directory, created if needed.  Shard files of an earlier run beyond the new
        shard count are removed.  Every write is atomic; ``manifest.csv`` is written last so
        that its presence means the stage finished.
    options : PrepareOptions
        Recorded in the sidecar.
    oligomers : pandas.DataFrame, optional
        Polymer → oligomer map (:func:`screen.prepare.polymers.oligomer_table`); written as
        ``oligomers.csv`` when it has rows (a stale one of an earlier run is removed otherwise).
    polymer : PolymerOptions, optional
        Recorded in the sidecar.

    Returns
    -------
    dict
        ``{'rows', 'ok', 'rejected', 'unique', 'shards'}`` counts (ints).
    """
    out.mkdir(parents=True, exist_ok=True)
    names = [f"shard-{k:03d}.csv" for k in range(len(shards))]
    for name, part in zip(names, shards):
        _write_text(out / name, _csv_text(part))
    keep = set(names)
    for entry in sorted(os.listdir(out)):
        if _SHARD_FILE.match(entry) and entry not in keep and (out / entry).is_file():
            (out / entry).unlink()

    if oligomers is not None and len(oligomers):
        _write_text(out / "oligomers.csv", _csv_text(oligomers))
    elif (out / "oligomers.csv").is_file():
        (out / "oligomers.csv").unlink()
    summary = _summary(manifest, shards)
    meta = {
        "stage": "prepare",
        "input": {"path": str(source), "sha256": sha256_file(source)},
        "rdkit_version": rdBase.rdkitVersion,
        "options": dataclasses.asdict(options),
        "polymer": dataclasses.asdict(polymer) if polymer is not None else None,
        "oligomers": int(len(oligomers)) if oligomers is not None else 0,
        "counts": summary,
        "generated_ids": generated_ids(manifest),
        "shards": [{"file": n, "structures": len(s)} for n, s in zip(names, shards)],
        "manifest_columns": list(manifest.columns),
        "key": KEY_RECIPE,
    }
    _write_text(out / "manifest.meta.json", json.dumps(meta, indent=2) + "\n")
    _write_text(out / "manifest.csv", _csv_text(manifest))
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

