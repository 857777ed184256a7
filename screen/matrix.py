"""The partner matrix: candidates × partners, the best viable PCE estimate in each cell.

``dascreen rank --partner a --partner b`` (or ``--partner a,b``) writes one
ranking per partner (:func:`screen.rank_io.run_rank`) and then, here, one
table over all of them: a row per candidate, a column per partner, in each
cell the candidate's best PCE estimate against that partner among its rows
that pass (and, when the ranking says so, are viable); an empty cell means
not viable.  The folder ``OUT/rankings/matrix--<hash>/`` (hash of the
rankings it joins) holds ``matrix.csv``, ``matrix.meta.json`` and
``overview.html``, a small page with the table as a heatmap that links to
each partner's report (:mod:`screen.report.matrix_page`).

Examples
--------
>>> import pandas as pd
>>> a = pd.DataFrame({"id": ["D1", "D2"], "smiles": ["C", "CC"], "pce_pct": [9.0, 4.0], "passes": [True, False]})
>>> b = pd.DataFrame({"id": ["D2", "D1"], "smiles": ["CC", "C"], "pce_pct": [7.5, 3.0], "passes": [True, True]})
>>> m = partner_matrix([("y6", a), ("c60", b)])
>>> m[["id", "y6", "c60", "best_partner"]].values.tolist()
[['D1', 9.0, 3.0, 'y6'], ['D2', nan, 7.5, 'c60']]
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd

__all__ = ["MATRIX_LEAD", "partner_matrix", "matrix_folder", "run_matrix"]

#: the leading columns of ``matrix.csv``; one column per partner follows, named by the partner id
MATRIX_LEAD = ["id", "name", "smiles", "best_partner", "best_pce_pct", "viable_partners"]


def _viable(ranking: pd.DataFrame) -> pd.Series:
    """Rows that pass the filters (and are viable, when the ranking has that column)."""
    ok = ranking["passes"].astype(str).str.lower().isin(["true", "1"])
    if "viable" in ranking:
        ok &= ranking["viable"].astype(str).str.lower().isin(["true", "1"])
    return ok & pd.to_numeric(ranking["pce_pct"], errors="coerce").notna()


def partner_matrix(rankings) -> pd.DataFrame:
    """Candidates × partners table of the best viable PCE estimate [%].

    Parameters
    ----------
    rankings : sequence of (str, pandas.DataFrame)
        Partner id and its ``ranking.csv`` (columns ``id, smiles, pce_pct, passes``; ``viable`` and
        ``name`` when present).

    Returns
    -------
    pandas.DataFrame
        :data:`MATRIX_LEAD` then one column per partner (NaN: not viable); rows in order of the
        best estimate, best first, candidates without any viable partner last (input order).
    """
    cells: dict[str, pd.Series] = {}
    names: dict[tuple, str] = {}
    order: list[tuple] = []
    for partner, ranking in rankings:
        frame = ranking.copy()
        frame["smiles"] = frame.get("smiles", pd.Series("", index=frame.index)).fillna("").astype(str)
        frame["id"] = frame["id"].astype(str)
        idx = list(zip(frame["id"], frame["smiles"]))
        for ident, name in zip(idx, frame.get("name", pd.Series("", index=frame.index)).fillna("").astype(str)):
            if ident not in names:
                names[ident] = name
                order.append(ident)
        pce = pd.to_numeric(frame["pce_pct"], errors="coerce").where(_viable(frame))
        cells[partner] = pd.Series(pce.to_numpy(), index=pd.MultiIndex.from_tuples(idx)).groupby(level=[0, 1]).max()
    index = pd.MultiIndex.from_tuples(order)
    table = pd.DataFrame({p: s.reindex(index) for p, s in cells.items()}, index=index)
    partners = list(cells)
    values = table[partners].to_numpy(dtype=float).reshape(len(table), len(partners))
    filled = np.where(np.isnan(values), -np.inf, values)
    best_at = filled.argmax(axis=1) if len(partners) else np.zeros(len(table), dtype=int)
    best = np.array([values[i, j] if np.isfinite(filled[i, j]) else np.nan for i, j in enumerate(best_at)])
    out = pd.DataFrame({
        "id": [i for i, _ in order], "name": [names[k] for k in order], "smiles": [s for _, s in order],
        "best_partner": ["" if np.isnan(b) else partners[j] for b, j in zip(best, best_at)],
        "best_pce_pct": best, "viable_partners": (~np.isnan(values)).sum(axis=1),
    })
    for p in partners:
        out[p] = table[p].to_numpy()
    out["_order"] = range(len(out))
    out = out.sort_values(["best_pce_pct", "_order"], ascending=[False, True], na_position="last")
    return out.drop(columns="_order").reset_index(drop=True)


def matrix_folder(ranking_dirs) -> str:
    """``matrix--<8 hex>``: the folder name of the matrix over these ranking folders (order kept).

    Examples
    --------
    >>> matrix_folder(["y6--1", "c60--1"]) != matrix_folder(["c60--1", "y6--1"])
    True
    """
    text = json.dumps([Path(d).name for d in ranking_dirs])
    return "matrix--" + hashlib.sha256(text.encode("utf-8")).hexdigest()[:8]


def run_matrix(ranking_paths, out_dir, config=None) -> Path:
    """Join the rankings of several partners into the matrix folder; return that folder.

    Parameters
    ----------
    ranking_paths : sequence of path-like
        ``ranking.csv`` files written by :func:`screen.rank_io.run_rank` (their
        ``ranking.meta.json`` beside them names the partner).
    out_dir : path-like
        The output folder (``OUT``); the matrix goes to ``OUT/rankings/matrix--<hash>/``.
    config : screen.config.Config or mapping, optional
        Recorded in ``matrix.meta.json`` (device and rank sections).

    Returns
    -------
    pathlib.Path
    """
    from screen import __version__
    from screen.config import Config
    from screen.io import read_json, write_csv, write_json
    from screen.report.matrix_page import write_overview

    cfg = Config.of(config)
    rankings, partners, tests = [], [], None
    for path in map(Path, ranking_paths):
        meta = read_json(path.parent / "ranking.meta.json")
        tests = tests or meta.get("device_tests")  # same levels and device model for every partner
        partner = meta["partner"]
        table = pd.read_csv(path, dtype={"id": str, "smiles": str, "name": str}, keep_default_na=False,
                            na_values=[""])
        label = partner["id"] if partner["id"] not in {p["id"] for p in partners} else \
            f"{partner['id']} ({path.parent.name})"  # two partners of one id (e.g. two files) stay apart
        rankings.append((label, table))
        partners.append({"id": label, "name": partner.get("name"), "role": partner.get("role"),
                         "homo_ev": partner.get("homo_ev"), "lumo_ev": partner.get("lumo_ev"),
                         "gap_opt_ev": partner.get("gap_opt_ev"), "scale": partner.get("scale"),
                         "folder": path.parent.name, "report": f"../{path.parent.name}/report.html",
                         "viable": int(_viable(table).sum()), "ranked": int(len(table))})
    matrix = partner_matrix(rankings)
    folder = Path(out_dir) / "rankings" / matrix_folder([Path(p).parent for p in ranking_paths])
    write_csv(matrix, folder / "matrix.csv")
    meta = {"dascreen": __version__, "stage": "partner matrix", "partners": partners,
            "cell": "best PCE estimate [%] of the candidate's viable rows against the partner; empty = not viable",
            "device": cfg["device"], "device_tests": tests, "rank": cfg["rank"], "rows": int(len(matrix)),
            "outputs": {"matrix": "matrix.csv", "overview": "overview.html", "meta": "matrix.meta.json"}}
    write_json(meta, folder / "matrix.meta.json")
    write_overview(matrix, meta, folder / "overview.html")
    return folder
