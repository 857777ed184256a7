"""An index of the rankings in a run folder: ``OUT/rankings-index.csv``.

After a meeting of live re-ranking a run folder holds many ``<partner>--<settings hash>``
folders whose names do not say what sets them apart (a meeting-day audit counted eight
``y6--…`` folders after twenty minutes). :func:`write_ranking_index` rebuilds one table
from every folder's ``ranking.meta.json`` — partner, device model, absorber, target,
sort order, the settings changed from the defaults (``settings``, e.g.
``device.min_delta_homo_ev=0.1``: two folders that differed only in their counts
were the audit of a later meeting), the levels file ranked, counts and when — after
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

__all__ = ["INDEX_COLUMNS", "ranking_index", "write_ranking_index", "non_default_settings", "settings_text"]

#: columns of ``OUT/rankings-index.csv``
INDEX_COLUMNS = ["folder", "partner", "model", "absorber", "target_pce_pct", "sort_by", "settings", "levels", "ranked",
                 "passing", "shortlisted", "written_utc"]

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


def _row(folder: Path) -> dict | None:
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
            "sort_by": part("rank").get("sort_by", ""), "settings": settings_text(meta), "levels": part("levels").get("path", ""),
            "ranked": counts.get("ranked"), "passing": counts.get("passing"),
            "shortlisted": counts.get("shortlisted_rows", counts.get("shortlist")),  # rows, with or without an SDF
            "written_utc": datetime.fromtimestamp(written, timezone.utc).strftime("%Y-%m-%d %H:%M")}


def ranking_index(out_dir) -> pd.DataFrame:
    """One row per ranking folder of ``OUT/rankings`` (partner matrices and unreadable folders left out),
    the most recently written first."""
    root = Path(out_dir) / "rankings"
    rows = [r for f in sorted(root.iterdir()) if f.is_dir() and (r := _row(f))] if root.is_dir() else []
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
