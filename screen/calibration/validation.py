"""Model selection and honest validation: leave-one-out, leave-one-family-out, per representation.

Every model is judged twice: by leave-one-out (LOO) over the reference rows and by
a grouped hold-out that leaves out one material family at a time
(:func:`screen.calibration.reference.family`: non-fullerene acceptors, fullerenes,
polymer classes, small-molecule donors, acenes, oligothiophenes, dyes …), which
measures how well the model transfers to a kind of material it has not seen.
Errors are also split by representation (molecules / polymers at the chain limit).

Examples
--------
>>> import numpy as np, pandas as pd
>>> rng = np.random.default_rng(0)
>>> frame = pd.DataFrame({"x": np.linspace(0, 5, 12)})
>>> y = 2 * frame["x"].to_numpy() + 1 + rng.normal(0, 0.05, 12)
>>> best = select(frame, y, [["x"]], groups=np.repeat(["a", "b", "c"], 4))
>>> best["features"], best["loo_mae_ev"] < 0.1
(['x'], True)
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from screen.calibration.linear import (MIN_GAIN_EV, CalibrationError, LinearLevelModel, class_terms, feature_matrix,
                                       grouped_predictions, loo_predictions, stats)

__all__ = ["select", "breakdown"]


def breakdown(y, pred, labels) -> dict[str, dict]:
    """MAE [eV] and count of hold-out predictions ``pred`` per label (NaN predictions skipped)."""
    y, pred, labels = np.asarray(y, float), np.asarray(pred, float), np.asarray(labels)
    out = {}
    for lab in pd.unique(labels):
        m = (labels == lab) & np.isfinite(pred)
        if m.any():
            out[str(lab)] = {"n": int(m.sum()), "mae_ev": float(np.mean(np.abs(pred[m] - y[m])))}
    return out


def _evaluate(frame: pd.DataFrame, y: np.ndarray, feats: list[str], groups, kinds) -> dict:
    X = feature_matrix(frame, feats)
    model = LinearLevelModel(feats).fit(X, y)
    loo = loo_predictions(X, y, feats)
    grouped = grouped_predictions(X, y, feats, groups)
    ok = np.isfinite(grouped)
    return {"features": feats, "model": model, "loo": loo, "grouped": grouped,
            **stats(y, model.predict(X), loo),
            "grouped_mae_ev": float(np.mean(np.abs(grouped[ok] - y[ok]))) if ok.any() else float("nan"),
            "by_family": breakdown(y, grouped, groups), "loo_by_representation": breakdown(y, loo, kinds)}


def select(frame: pd.DataFrame, y, feature_sets: list[list[str]], groups, kinds=None,
           criterion: str = "loo_mae_ev") -> dict:
    """Fit every feature set, keep the best by ``criterion`` (a larger set must gain > MIN_GAIN_EV).

    Parameters
    ----------
    frame : pandas.DataFrame
        Rows with the feature columns.
    y : array_like
        Targets [eV].
    feature_sets : list of list of str
        Candidates, simplest first; sets whose columns are missing or not finite are skipped. Each
        set also gets the class terms of :func:`screen.calibration.linear.class_terms` (e.g.
        ``cage`` when the rows hold two fullerenes or more).
    groups : array_like
        Family of each row (grouped hold-out).
    kinds : array_like, optional
        Representation of each row (``molecule``/``polymer``) for the LOO split.
    criterion : {"loo_mae_ev", "grouped_mae_ev"}

    Returns
    -------
    dict
        The chosen fit: ``model`` (:class:`LinearLevelModel`), ``features``, LOO and grouped
        predictions and statistics, and ``alternatives`` (statistics of every set tried).
    """
    y = np.asarray(y, float)
    kinds = np.asarray(kinds if kinds is not None else ["molecule"] * len(y))
    terms = class_terms(frame)  # a class with its own method error (fullerene cages) gets its term in every set
    feature_sets = [list(f) + [t for t in terms if t not in f] for f in feature_sets]
    best, tried = None, []
    for feats in feature_sets:
        try:
            X = feature_matrix(frame, feats)
        except CalibrationError:
            continue
        if not np.all(np.isfinite(X)):
            continue
        res = _evaluate(frame, y, feats, groups, kinds)
        tried.append({k: res[k] for k in ("features", "n", "r2", "loo_mae_ev", "loo_rmse_ev", "grouped_mae_ev")})
        if best is None or res[criterion] < best[criterion] - MIN_GAIN_EV * (len(feats) - len(best["features"])):
            best = res
    if best is None:
        raise CalibrationError("no candidate feature set could be evaluated (missing raw columns?)")
    best["alternatives"] = tried
    return best


def raw_at_n(raw: pd.DataFrame, oligomers: pd.DataFrame, n: int) -> pd.DataFrame:
    """Raw values with every polymer row replaced by its n-mer's (the longest computed one if shorter).

    Parameters
    ----------
    raw : pandas.DataFrame
        ``reference_raw.csv`` (polymers at the chain limit; needs ``key`` and ``representation``).
    oligomers : pandas.DataFrame
        ``reference_oligomers.csv`` (the per-n sidecar, :data:`screen.levels.SIDECAR_COLUMNS`).
    n : int
        Repeat units (1: the monomer, the representation before chain-limit extrapolation).
    """
    out = raw.copy()
    per_n = oligomers[oligomers["n"].astype(str) != "inf"].copy()
    per_n["n"] = per_n["n"].astype(int)
    per_n = per_n[(per_n["n"] <= n) & per_n["status"].eq("ok")]
    per_n["value"] = pd.to_numeric(per_n["value"], errors="coerce")
    last = per_n.sort_values("n").groupby(["polymer_key", "quantity"])["value"].last()
    polymer = out["representation"].eq("polymer")
    for q in last.index.get_level_values("quantity").unique():
        if q in out:
            values = last.xs(q, level="quantity")
            out.loc[polymer, q] = out.loc[polymer, "key"].map(values)
    for col in [c for c in out.columns if c.startswith("chain_spread_")]:
        out.loc[polymer, col] = 0.0
    return out
