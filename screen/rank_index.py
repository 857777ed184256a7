"""An index of the rankings in a run folder: ``OUT/rankings-index.csv``.

After a meeting of live re-ranking a run folder holds many ``<partner>--<settings hash>``
folders whose names do not say what sets them apart (a meeting-day audit counted eight
``y6--…`` folders after twenty minutes). :func:`write_ranking_index` rebuilds one table
from every folder's ``ranking.meta.json`` — partner, device model, absorber, target,
sort order, the settings changed from the defaults (``settings``, e.g.
``device.min_delta_homo_ev=0.1``: two folders that differed only in their counts
were the audit of a later meeting), the levels file ranked and whether it is still
as it was ranked (``levels_state``, :func:`levels_state`), counts and when — after
each ranking, and ``dascreen status`` prints it.

Examples
--------
>>> import json, tempfile
>>> out = Path(tempfile.mkdtemp())
>>> folder = out / "rankings" / "y6--0123abcd"
>>> folder.mkdir(parents=True)
>>> meta = {"partner": {"id": "y6"}, "device": {"model": "fitted", "absorber": "both"},
...         "rank": {"target_pce_pct": 10.0, "sort_by": "pce_pct"}, "levels": {"path": "/r/levels.csv"},
...         "counts": {"ranked": 32, "passing": 17, "shortlist": 10}}
>>> _ = (folder / "ranking.meta.json").write_text(json.dumps(meta))
>>> _ = (folder / "ranking.csv").write_text("rank,id\\n")
>>> index = ranking_index(out)
>>> [str(v) for v in index.loc[0, ["folder", "partner", "model", "target_pce_pct", "ranked", "passing"]]]
['y6--0123abcd', 'y6', 'fitted', '10.0', '32', '17']
>>> non_default_settings({"device": {"min_delta_homo_ev": 0.1, "min_delta_homo_ev_set": True},
...                       "rank": {"sort_by": "p_above_target", "target_pce_pct": 10.0}})
['device.min_delta_homo_ev=0.1', 'rank.sort_by=p_above_target']
"""

from __future__ import annotations

from datetime import datetime, timezone
from pathlib import Path

import pandas as pd

__all__ = ["INDEX_COLUMNS", "LEVELS_STATES", "ranking_index", "levels_state", "write_ranking_index",
           "non_default_settings", "settings_text"]

#: columns of ``OUT/rankings-index.csv``
INDEX_COLUMNS = ["folder", "partner", "model", "absorber", "target_pce_pct", "sort_by", "settings", "levels",
                 "levels_state", "ranked", "passing", "shortlisted", "written_utc"]
#: ``levels_state`` of a ranking: its levels file is as it was ranked (SHA-256 of ``levels.path`` as recorded in
#: ``levels.sha256`` of the sidecar), was changed since (a resumed or repeated run rewrote it), is gone, or not known
#: (a sidecar without the hash)
LEVELS_STATES = ("current", "changed", "missing", "unknown")

#: device settings whose default (None) means "the fitted value"; the sidecar says with ``<key>_set`` whether one
#: was given
_FITTED_UNLESS_SET = ("eqe", "ff", "loss_v", "min_delta_lumo_ev", "min_delta_homo_ev")


def _value_text(value) -> str:
    if isinstance(value, bool) or value is None:
        return str(value).lower() if value is not None else "none"
    if isinstance(value, float):
        return f"{value:g}"
    return str(value)


def non_default_settings(meta: dict, skip=()) -> list[str]:
    """``section.key=value`` of every ``device`` and ``rank`` setting of a ranking's sidecar that is not the
    schema default (``skip``: keys such as ``"rank.sort_by"`` said elsewhere).

    A ``--set device.min_delta_homo_ev=0.1`` re-ranking was visible only on the report's device card (a
    meeting-day audit): the console header, ``rankings-index.csv`` and the report header list these.
    """
    from screen.schema import section_defaults

    found = []
    for section in ("device", "rank"):
        given = meta.get(section) if isinstance(meta, dict) else None
        if not isinstance(given, dict):
            continue
        for key, default in section_defaults(section).items():
            name = f"{section}.{key}"
            if name in skip or key not in given:
                continue
            value = given[key]
            if section == "device" and key in _FITTED_UNLESS_SET:
                if given.get(f"{key}_set"):
                    found.append(f"{name}={_value_text(value)}")
            elif value != default and not (value is None and default is None):
                found.append(f"{name}={_value_text(value)}")
    return found


def settings_text(meta: dict, skip=()) -> str:
    """:func:`non_default_settings` joined with ``"; "`` (``""`` when every setting is the default)."""
    return "; ".join(non_default_settings(meta, skip))


def levels_state(levels: dict, hashes: dict | None = None) -> str:
    """Whether the levels file a ranking was made from is still as it was (:data:`LEVELS_STATES`).

    A run that resumed or ran again rewrote ``levels.csv``, and the rankings made from the earlier one were listed
    by ``dascreen status`` as if they were current (a careless user's audit).

    Parameters
    ----------
    levels : dict
        ``levels`` of a ``ranking.meta.json`` (``path``, ``sha256``).
    hashes : dict, optional
        SHA-256 by path, filled and reused across the folders of one index (a file is hashed once).

    Examples
    --------
    >>> import tempfile
    >>> f = Path(tempfile.mkdtemp()) / "levels.csv"; _ = f.write_text("id\\n")
    >>> from screen.provenance import sha256_file
    >>> levels_state({"path": str(f), "sha256": sha256_file(f)}), levels_state({"path": str(f), "sha256": "ab"})
    ('current', 'changed')
    >>> levels_state({"path": str(f.with_name("gone.csv")), "sha256": "ab"}), levels_state({"path": str(f)})
    ('missing', 'unknown')
    """
    from screen.provenance import sha256_file

    path, recorded = levels.get("path"), levels.get("sha256")
    if not path or not recorded:
        return "unknown"
    hashes = {} if hashes is None else hashes
    if path not in hashes:
        try:
            hashes[path] = sha256_file(path) if Path(path).is_file() else None
        except OSError:
            hashes[path] = None
    if hashes[path] is None:
        return "missing"
    return "current" if hashes[path] == recorded else "changed"


def _row(folder: Path, hashes: dict | None = None) -> dict | None:
    from screen.io import read_json

    try:
        meta = read_json(folder / "ranking.meta.json")
        written = (folder / "ranking.csv").stat().st_mtime
    except (OSError, ValueError):
        return None
    if not isinstance(meta, dict):
        return None

    def part(key) -> dict:
        value = meta.get(key)
        return value if isinstance(value, dict) else {}

    counts = part("counts")
    return {"folder": folder.name, "partner": part("partner").get("id", ""), "model": part("device").get("model", ""),
            "absorber": part("device").get("absorber", ""), "target_pce_pct": part("rank").get("target_pce_pct"),
            "sort_by": part("rank").get("sort_by", ""), "settings": settings_text(meta),
            "levels": part("levels").get("path", ""), "levels_state": levels_state(part("levels"), hashes),
            "ranked": counts.get("ranked"), "passing": counts.get("passing"),
            "shortlisted": counts.get("shortlisted_rows", counts.get("shortlist")),  # rows, with or without an SDF
            "written_utc": datetime.fromtimestamp(written, timezone.utc).strftime("%Y-%m-%d %H:%M")}


def ranking_index(out_dir) -> pd.DataFrame:
    """One row per ranking folder of ``OUT/rankings`` (partner matrices and unreadable folders left out),
    the most recently written first."""
    root = Path(out_dir) / "rankings"
    hashes: dict = {}  # the levels file of many rankings is hashed once
    rows = [r for f in sorted(root.iterdir()) if f.is_dir() and (r := _row(f, hashes))] if root.is_dir() else []
    frame = pd.DataFrame(rows, columns=INDEX_COLUMNS)
    return frame.sort_values(["written_utc", "folder"], ascending=[False, True], kind="stable").reset_index(drop=True)


def write_ranking_index(out_dir) -> Path | None:
    """Rebuild ``OUT/rankings-index.csv``; None when there is no ranking."""
    from screen.io import write_csv

    index = ranking_index(out_dir)
    if not len(index):
        return None
    path = Path(out_dir) / "rankings-index.csv"
    write_csv(index, path)
    return path
