"""Linear models with prediction intervals, constant shifts, leave-one-out and grouped statistics.

Examples
--------
>>> import numpy as np
>>> x = np.array([[1.0], [2.0], [3.0], [4.0]]); y = np.array([2.1, 3.9, 6.1, 7.9])
>>> m = LinearLevelModel(["x"]).fit(x, y)
>>> round(float(m.coef_[0]), 2), round(float(m.intercept_), 2)
(1.96, 0.1)
>>> mean, std = m.predict(np.array([[2.5]]), return_std=True)
>>> round(float(mean[0]), 2), bool(std[0] > 0)
(5.0, True)
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from screen.cage import cage_smiles
from screen.endgroup import ic_end_smiles, y_core_smiles
from screen.quinoidal import tt_unit_smiles
from screen.errors import CalculationError

__all__ = ["CalibrationError", "LinearLevelModel", "FilmShift", "DERIVED", "CLASS_TERMS", "class_terms",
           "feature_matrix", "loo_predictions", "grouped_predictions", "stats", "MIN_GAIN_EV"]

#: a more complex feature set must lower the LOO MAE by more than this [eV]
MIN_GAIN_EV = 0.01


class CalibrationError(CalculationError):
    """A calibration model could not be fitted or read (too few points, a missing or broken file)."""


def _col(frame: pd.DataFrame, name: str) -> np.ndarray:
    if name not in frame:
        raise CalibrationError(f"feature {name!r} is not in the computed values (columns: "
                               f"{', '.join(c for c in frame.columns if c.startswith('xtb_'))})")
    return pd.to_numeric(frame[name], errors="coerce").to_numpy(float)


def _polymer(frame: pd.DataFrame) -> np.ndarray:
    """1.0 for a polymer row (``representation == "polymer"``, chain-limit values), else 0.0."""
    if "representation" not in frame:
        return np.zeros(len(frame))
    return frame["representation"].astype(str).str.strip().eq("polymer").to_numpy(float)


def _structure_class(name: str, member):
    """Indicator feature ``name``: 1.0 for a row whose SMILES ``member(smiles)`` accepts, else 0.0."""
    def indicator(frame: pd.DataFrame) -> np.ndarray:
        if "smiles" not in frame:
            raise CalibrationError(f"feature {name!r} needs the rows' SMILES (column 'smiles')")
        return np.array([float(member(s)) for s in frame["smiles"].astype(str)])
    return indicator


#: closed carbon cages (fullerenes and adducts, :func:`screen.cage.closed_cage`)
_cage = _structure_class("cage", cage_smiles)
#: dicyanomethylene-indanone end groups (:func:`screen.endgroup.ic_end_smiles`)
_ic_end = _structure_class("ic_end", ic_end_smiles)
#: IC-ended acceptors with a fused benzothiadiazole core, the Y6/BTP family (:func:`screen.endgroup.y_core_smiles`)
_y_core = _structure_class("y_core", y_core_smiles)
_tt_unit = _structure_class("tt_polymer", tt_unit_smiles)


def _tt_polymer(frame: pd.DataFrame) -> np.ndarray:
    """1.0 for a polymer row with a thieno[3,4-b]thiophene unit (:mod:`screen.quinoidal`), else 0.0."""
    return _polymer(frame) * _tt_unit(frame)


#: derived features: name → (function of the frame, the raw columns it uses with their coefficients)
DERIVED = {
    "xtb_fund_ev": (lambda f: _col(f, "xtb_ip_ev") - _col(f, "xtb_ea_ev"), {"xtb_ip_ev": 1.0, "xtb_ea_ev": -1.0}),
    # one HOMO→LUMO configuration: singlet ≈ Δε − J + 2K, triplet ≈ Δε − J (screen.excitation)
    "xtb_s1_ev": (lambda f: _col(f, "xtb_gap_ev") + 2.0 * _col(f, "xtb_k_hl_ev"),
                  {"xtb_gap_ev": 1.0, "xtb_k_hl_ev": 2.0}),
    "xtb_s1j_ev": (lambda f: _col(f, "xtb_gap_ev") - _col(f, "xtb_j_hl_ev") + 2.0 * _col(f, "xtb_k_hl_ev"),
                   {"xtb_gap_ev": 1.0, "xtb_j_hl_ev": -1.0, "xtb_k_hl_ev": 2.0}),
    # polymer at the chain limit: the ideal, planar infinite chain overestimates the conjugation of a real film
    # (finite effective conjugation length, torsional disorder); no raw column, so no chain-spread propagation
    "polymer": (_polymer, {}),
    # closed carbon cage: GFN2-xTB's error for a fullerene is a class of its own (on xTB geometries every
    # fullerene of the film set sits 0.4-0.6 eV off the planar-π line in LUMO, all alike), fitted as a term
    "cage": (_cage, {}),
    # dicyanomethylene-indanone end groups of A-D-A acceptors: an optical-gap error of their own (screen.endgroup);
    # a class term of the optical-gap model only (screen.calibration.optical.CLASS_TERMS)
    "ic_end": (_ic_end, {}),
    # the Y6/BTP family among them: a film red shift larger still (screen.endgroup); optical-gap model only
    "y_core": (_y_core, {}),
    # thieno[3,4-b]thiophene polymers (PTB7 family): quinoidal backbones more delocalised in the film than the
    # extrapolated one-chain oligomers; a candidate term of the film HOMO model and a class term of the optical-gap
    # model (screen.quinoidal)
    "tt_polymer": (_tt_polymer, {}),
}

#: class terms added to every feature set of a fit whose rows hold at least this many members of the class
CLASS_TERMS = {"cage": 2}


def class_terms(frame: pd.DataFrame, terms: dict[str, int] | None = None) -> list[str]:
    """The class terms a fit on ``frame`` carries: those with enough member rows to be estimated.

    ``terms`` maps a :data:`DERIVED` class indicator to its minimum member count (default
    :data:`CLASS_TERMS`, the terms of every model).

    Examples
    --------
    >>> class_terms(pd.DataFrame({"smiles": ["c1ccccc1", "CCO"]}))
    []
    """
    if "smiles" not in frame:
        return []
    return [t for t, n in (CLASS_TERMS if terms is None else terms).items() if DERIVED[t][0](frame).sum() >= n]


def feature_matrix(frame: pd.DataFrame, names: list[str]) -> np.ndarray:
    """Columns of ``frame`` (or :data:`DERIVED` features) as a float matrix, one column per name."""
    return np.column_stack([DERIVED[n][0](frame) if n in DERIVED else _col(frame, n) for n in names])


def raw_weights(names: list[str], coef) -> dict[str, float]:
    """d(prediction)/d(raw column) of a linear model: how a raw column's uncertainty propagates."""
    out: dict[str, float] = {}
    for name, c in zip(names, coef):
        for raw, w in (DERIVED[name][1] if name in DERIVED else {name: 1.0}).items():
            out[raw] = out.get(raw, 0.0) + float(c) * w
    return out


@dataclass
class LinearLevelModel:
    """Ordinary least squares ``y = X·coef + intercept`` with prediction intervals.

    The prediction standard deviation of a new point x₀ is
    ``s·sqrt(1 + x̃₀ᵀ (X̃ᵀX̃)⁻¹ x̃₀)`` with X̃ = [1, X] and s the residual
    standard error (n − p − 1 degrees of freedom), so σ grows with the leverage
    of a candidate, i.e. its distance from the reference data.

    Parameters
    ----------
    features : list of str
        Column names of the features (``xtb_*`` columns, :data:`DERIVED` names or indicators).
    """

    features: list[str]
    coef_: np.ndarray = field(default_factory=lambda: np.zeros(0))
    intercept_: float = 0.0
    sigma_: float = 0.0
    xtx_inv_: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))

    def fit(self, X: np.ndarray, y: np.ndarray) -> LinearLevelModel:
        X = np.asarray(X, float)
        y = np.asarray(y, float)
        n, p = X.shape
        if n < p + 2:
            raise CalibrationError(f"{n} reference points are too few for {p} feature(s)")
        # a feature with one value other than 0 on every reference point (an indicator set on every row) has no
        # slope to fit: it keeps 0 and the fit uses the others (lstsq's minimum-norm answer split the intercept with
        # it); a column of zeros (a class the data lack, as in a leave-family-out fold) gets 0 from lstsq itself
        constant = np.ptp(X, axis=0) == 0.0
        keep = ~(constant & (np.abs(X).max(axis=0) > 0.0))
        cols = np.concatenate([[True], keep])
        Xt = np.column_stack([np.ones(n), X])
        used = Xt if cols.all() else Xt[:, cols]  # Xt itself when every column is used: the same bits as before
        beta = np.zeros(p + 1)
        beta[cols] = np.linalg.lstsq(used, y, rcond=None)[0]
        self.intercept_, self.coef_ = float(beta[0]), beta[1:].astype(float)
        resid = y - Xt @ beta
        self.sigma_ = float(np.sqrt(np.sum(resid**2) / (n - int(cols.sum()))))
        self.xtx_inv_ = np.zeros((p + 1, p + 1))
        self.xtx_inv_[np.ix_(cols, cols)] = np.linalg.pinv(used.T @ used)
        return self

    def predict(self, X: np.ndarray, return_std: bool = False):
        X = np.asarray(X, float)
        mean = X @ self.coef_ + self.intercept_
        if not return_std:
            return mean
        Xt = np.column_stack([np.ones(len(X)), X])
        lev = np.einsum("ij,jk,ik->i", Xt, self.xtx_inv_, Xt)
        return mean, self.sigma_ * np.sqrt(1.0 + lev)

    def to_dict(self) -> dict:
        return {"features": self.features, "coef": self.coef_.tolist(), "intercept": self.intercept_,
                "residual_sigma_ev": self.sigma_, "xtx_inv": self.xtx_inv_.tolist()}

    @classmethod
    def from_dict(cls, d: dict) -> LinearLevelModel:
        return cls(list(d["features"]), np.asarray(d["coef"], float), float(d["intercept"]),
                   float(d["residual_sigma_ev"]), np.asarray(d["xtx_inv"], float))


@dataclass
class FilmShift:
    """A constant shift fitted as the mean of (film − base) differences; σ is the LOO scatter.

    Examples
    --------
    >>> f = FilmShift("homo").fit(np.array([-7.0, -6.5, -6.2]), np.array([-5.8, -5.4, -5.0]))
    >>> round(f.shift_ev, 3)
    1.167
    """

    level: str
    shift_ev: float = 0.0
    sigma_ev: float = 0.0

    def fit(self, base_ev: np.ndarray, film_ev: np.ndarray) -> FilmShift:
        d = np.asarray(film_ev, float) - np.asarray(base_ev, float)
        self.shift_ev = float(np.mean(d))
        n = len(d)
        loo = (self.shift_ev * n - d) / (n - 1) if n > 1 else np.full(n, self.shift_ev)
        self.sigma_ev = float(np.sqrt(np.mean((d - loo) ** 2)))
        return self

    def predict(self, base_ev):
        return np.asarray(base_ev, float) + self.shift_ev


def loo_predictions(X: np.ndarray, y: np.ndarray, features: list[str]) -> np.ndarray:
    """Leave-one-out predictions of a linear model (each point predicted by a fit without it)."""
    return grouped_predictions(X, y, features, np.arange(len(y)))


def grouped_predictions(X: np.ndarray, y: np.ndarray, features: list[str], groups) -> np.ndarray:
    """Hold-out predictions: every group predicted by a fit on all other groups (NaN if too few left)."""
    groups = np.asarray(groups)
    pred = np.full(len(y), np.nan)
    for g in pd.unique(groups):
        test = groups == g
        try:
            pred[test] = LinearLevelModel(features).fit(X[~test], y[~test]).predict(X[test])
        except CalibrationError:
            pass
    return pred


def stats(y: np.ndarray, fit: np.ndarray, loo: np.ndarray) -> dict:
    """n, R², LOO MAE / RMSE and largest LOO error [eV]."""
    y, fit, loo = (np.asarray(a, float) for a in (y, fit, loo))
    ss_res = float(np.sum((y - fit) ** 2))
    ss_tot = float(np.sum((y - y.mean()) ** 2))
    err = loo - y
    return {"n": int(len(y)), "r2": 1.0 - ss_res / ss_tot if ss_tot > 0 else float("nan"),
            "loo_mae_ev": float(np.mean(np.abs(err))), "loo_rmse_ev": float(np.sqrt(np.mean(err**2))),
            "max_abs_error_ev": float(np.max(np.abs(err)))}
