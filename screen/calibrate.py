"""Calibration: raw xTB values → levels comparable with measurements.

Raw GFN-xTB ΔSCF ionisation energies are several eV too large and electron
affinities likewise shifted; orbital gaps are not optical gaps. Each property
is therefore mapped by an ordinary least-squares model fitted on published
measurements of reference molecules computed with *exactly* the candidates'
protocol (same conformer route, engine, method):

* ``ip``: gas-phase vertical IP ← ΔSCF IP (optionally + HOMO energy);
* ``ea``: gas-phase EA ← ΔSCF EA (optionally + LUMO energy);
* ``gap_opt``: lowest optical gap (S0→S1) ← orbital gap (optionally + ΔSCF
  fundamental gap).

A second feature is kept only if it lowers the leave-one-out (LOO) mean
absolute error by more than :data:`MIN_GAIN_EV`.

Film scale (route b of the design notes): solid-state / electrochemical levels
differ from gas-phase ones mainly by the electronic polarisation energies of
the surrounding solid, P₊ for holes and P₋ for electrons, which are similar
(≈1–1.5 eV) across conjugated organics [3]_. We keep the well-determined gas
calibration and fit only these two shifts on the film reference set:

.. math:: E_{HOMO}^{film} = -(IP_{gas} - P_+), \\qquad E_{LUMO}^{film} = -(EA_{gas} + P_-)

The optical gap gets the same treatment (gas/solution S1 model plus one
film shift), since the Scharber model needs the film absorption onset.
One parameter per level is what a small, heterogeneous film set (different
ferrocene conventions, oligomer stand-ins for polymers) can support; its LOO
scatter is the σ of film levels. Electrochemical values are first brought to
one ferrocene convention (:data:`FC_REFERENCE_EV` = −4.8 eV): a value reported
with Fc at −5.1 eV is shifted by +0.3 eV.

A reference row with a non-empty ``exclude_reason`` stays in its file (and in
the documentation) but is not fitted, e.g. azulene's optical gap: its S1 is an
anomalous, weakly allowed state that no orbital-gap model describes.

Every model file records the protocol fingerprint; :func:`load_models`
refuses a model whose fingerprint does not match the run's.

References
----------
.. [1] C. Bannwarth, S. Ehlert, S. Grimme, J. Chem. Theory Comput. 15 (2019)
   1652. :doi:`10.1021/acs.jctc.8b01176`
.. [2] V. Ásgeirsson, C. A. Bauer, S. Grimme, Chem. Sci. 8 (2017) 4879.
   :doi:`10.1039/c7sc00601b`
.. [3] N. Sato, K. Seki, H. Inokuchi, "Polarization energies of organic solids
   determined by ultraviolet photoelectron spectroscopy", J. Chem. Soc.,
   Faraday Trans. 2, 77 (1981) 1621. :doi:`10.1039/F29817701621`
.. [4] C. M. Cardona, W. Li, A. E. Kaifer, D. Stockdale, G. C. Bazan,
   "Electrochemical considerations for determining absolute frontier orbital
   energy levels of conjugated polymers for solar cell applications",
   Adv. Mater. 23 (2011) 2367. :doi:`10.1002/adma.201004554`
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from rdkit import Chem, RDLogger

from screen.config import Config
from screen.errors import CalculationError, ConfigError
from screen.io import read_csv_checked, write_json
from screen.provenance import provenance

__all__ = [
    "PROPERTIES",
    "FC_REFERENCE_EV",
    "MIN_GAIN_EV",
    "CalibrationError",
    "CalibrationMismatchError",
    "LinearLevelModel",
    "FilmShift",
    "read_reference",
    "reference_inputs",
    "reference_files",
    "reference_hash",
    "fingerprint",
    "fit_all",
    "save_models",
    "load_models",
    "find_models",
    "apply_models",
    "stats_table",
]

#: ferrocene/ferrocenium level assumed when normalising electrochemical data [eV]
FC_REFERENCE_EV = -4.8
#: a second feature must lower the LOO MAE by more than this [eV]
MIN_GAIN_EV = 0.01

#: reference file and candidate feature sets per gas-phase property
PROPERTIES: dict[str, dict] = {
    "ip": {"file": "ip_gas.csv", "target": "ip_ev", "features": [["xtb_ip_ev"], ["xtb_ip_ev", "xtb_homo_ev"]]},
    "ea": {"file": "ea_gas.csv", "target": "ea_ev", "features": [["xtb_ea_ev"], ["xtb_ea_ev", "xtb_lumo_ev"]]},
    "gap_opt": {"file": "gap_optical.csv", "target": "gap_opt_ev",
                "features": [["xtb_gap_ev"], ["xtb_gap_ev", "xtb_fund_ev"]]},
}
FILM_FILE = "levels_film.csv"


class CalibrationError(CalculationError):
    """A calibration model could not be fitted or read (too few points, a missing or broken file)."""


class CalibrationMismatchError(ConfigError, CalibrationError):
    """Models that belong to another protocol or reference set: a configuration problem (exit code 2).

    Refit with ``dascreen calibrate`` or point ``calibration.models`` at the matching folder.

    Examples
    --------
    >>> from screen.errors import exit_code
    >>> err = CalibrationMismatchError("x")
    >>> isinstance(err, CalibrationError), exit_code(err)
    (True, 2)
    """


def _features(frame: pd.DataFrame, names: list[str]) -> np.ndarray:
    cols = []
    for name in names:
        if name == "xtb_fund_ev":
            cols.append(frame["xtb_ip_ev"].to_numpy(float) - frame["xtb_ea_ev"].to_numpy(float))
        else:
            cols.append(frame[name].to_numpy(float))
    return np.column_stack(cols)


@dataclass
class LinearLevelModel:
    """Ordinary least squares ``y = X·coef + intercept`` with prediction intervals.

    Follows scikit-learn's fit/predict convention; fitting itself is done by
    :class:`sklearn.linear_model.LinearRegression`. The prediction standard
    deviation of a new point x₀ is ``s·sqrt(1 + x̃₀ᵀ (X̃ᵀX̃)⁻¹ x̃₀)`` with
    X̃ = [1, X] and s the residual standard error (n − p − 1 degrees of
    freedom), so σ grows when a candidate lies outside the reference range.

    Parameters
    ----------
    features : list of str
        Column names of the features (``xtb_*`` columns).

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

    features: list[str]
    coef_: np.ndarray = field(default_factory=lambda: np.zeros(0))
    intercept_: float = 0.0
    sigma_: float = 0.0
    xtx_inv_: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))

    def fit(self, X: np.ndarray, y: np.ndarray) -> LinearLevelModel:
        from sklearn.linear_model import LinearRegression

        X = np.asarray(X, float)
        y = np.asarray(y, float)
        n, p = X.shape
        if n < p + 2:
            raise CalibrationError(f"{n} reference points are too few for {p} feature(s)")
        reg = LinearRegression().fit(X, y)
        self.coef_, self.intercept_ = reg.coef_.astype(float), float(reg.intercept_)
        resid = y - reg.predict(X)
        self.sigma_ = float(np.sqrt(np.sum(resid**2) / (n - p - 1)))
        Xt = np.column_stack([np.ones(n), X])
        self.xtx_inv_ = np.linalg.pinv(Xt.T @ Xt)
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
    """A constant solid-state shift fitted as the mean of (gas − film) differences.

    ``film = gas_level + sign·shift`` per level; σ is the LOO scatter.

    Examples
    --------
    >>> f = FilmShift("homo").fit(np.array([-7.0, -6.5, -6.2]), np.array([-5.8, -5.4, -5.0]))
    >>> round(f.shift_ev, 3)
    1.167
    """

    level: str
    shift_ev: float = 0.0
    sigma_ev: float = 0.0

    def fit(self, gas_level_ev: np.ndarray, film_level_ev: np.ndarray) -> FilmShift:
        d = np.asarray(film_level_ev, float) - np.asarray(gas_level_ev, float)
        self.shift_ev = float(np.mean(d))
        n = len(d)
        loo = (self.shift_ev * n - d) / (n - 1) if n > 1 else np.full(n, self.shift_ev)
        self.sigma_ev = float(np.sqrt(np.mean((d - loo) ** 2)))
        return self

    def predict(self, gas_level_ev):
        return np.asarray(gas_level_ev, float) + self.shift_ev


# --------------------------------------------------------------------------- reference data

def read_reference(reference_dir: str | Path) -> dict[str, pd.DataFrame]:
    """Read the reference sets (``ip``, ``ea``, ``gap_opt``, ``film``).

    Raises
    ------
    InputError
        A file is missing or lacks the needed columns.
    """
    reference_dir = Path(reference_dir)
    sets = {}
    for prop, spec in PROPERTIES.items():
        sets[prop] = _read_ref_csv(reference_dir / spec["file"], ["name", "smiles", "value_ev", "source"])
    film = _read_ref_csv(reference_dir / FILM_FILE, ["name", "smiles", "homo_ev", "lumo_ev", "source"])
    sets["film"] = film
    return sets


def _read_ref_csv(path: Path, needed: list[str]) -> pd.DataFrame:
    frame = read_csv_checked(path, needed, what="reference file", dtype=str, keep_default_na=False)
    frame = frame[frame["smiles"].str.strip().ne("")].copy()
    if "exclude_reason" not in frame.columns:
        frame["exclude_reason"] = ""
    return frame


def _canonical(smiles: str) -> str:
    mol = Chem.MolFromSmiles(smiles)
    return Chem.MolToSmiles(mol) if mol is not None else ""


def reference_inputs(sets: dict[str, pd.DataFrame]) -> pd.DataFrame:
    """One candidate row per distinct reference structure (``id, smiles, name``).

    Ids are ``ref-NNN`` in order of first appearance (ip, ea, gap_opt, film).
    """
    RDLogger.DisableLog("rdApp.*")
    seen: dict[str, dict] = {}
    for prop in ("ip", "ea", "gap_opt", "film"):
        for name, smi in zip(sets[prop]["name"], sets[prop]["smiles"]):
            can = _canonical(smi)
            if can and can not in seen:
                seen[can] = {"id": f"ref-{len(seen):03d}", "smiles": smi, "name": name}
    return pd.DataFrame(list(seen.values()), columns=["id", "smiles", "name"])


def reference_files(reference_dir: str | Path) -> list[str]:
    """Paths of the reference CSV files of a reference folder (existing or not)."""
    return [str(Path(reference_dir) / f) for f in [spec["file"] for spec in PROPERTIES.values()] + [FILM_FILE]]


def reference_hash(reference_dir: str | Path) -> str:
    """SHA-256 over the reference files' bytes (order-fixed)."""
    h = hashlib.sha256()
    for name in reference_files(reference_dir):
        path = Path(name)
        h.update(path.name.encode())
        h.update(path.read_bytes() if path.is_file() else b"")
    return h.hexdigest()


def fingerprint(config, reference_dir: str | Path) -> dict:
    """What a model depends on: protocol, engine version (major.minor), reference data.

    Parameters
    ----------
    config : Config or mapping
        The run configuration (its protocol sections matter).
    reference_dir : path-like
        Folder of the reference sets.
    """
    cfg = Config.of(config)
    prov = provenance(cfg)
    ver = prov["versions"].get(cfg.electronic.engine, "absent")
    return {"protocol_id": cfg.protocol_id, "protocol": cfg.protocol,
            "engine_version": ".".join(ver.split(".")[:2]), "reference_sha256": reference_hash(reference_dir)}


# --------------------------------------------------------------------------- fitting

def _loo_predictions(X: np.ndarray, y: np.ndarray, features: list[str]) -> np.ndarray:
    from sklearn.model_selection import LeaveOneOut

    pred = np.empty_like(y)
    for train, test in LeaveOneOut().split(X):
        pred[test] = LinearLevelModel(features).fit(X[train], y[train]).predict(X[test])
    return pred


def _stats(y: np.ndarray, fit: np.ndarray, loo: np.ndarray) -> dict:
    ss_res = float(np.sum((y - fit) ** 2))
    ss_tot = float(np.sum((y - y.mean()) ** 2))
    err = loo - y
    return {"n": int(len(y)), "r2": 1.0 - ss_res / ss_tot if ss_tot > 0 else float("nan"),
            "loo_mae_ev": float(np.mean(np.abs(err))), "loo_rmse_ev": float(np.sqrt(np.mean(err**2))),
            "max_abs_error_ev": float(np.max(np.abs(err)))}


def _joined(ref: pd.DataFrame, computed: pd.DataFrame) -> pd.DataFrame:
    """Reference rows with their computed xtb_* columns (by canonical SMILES)."""
    comp = computed[computed["status"].eq("ok")].copy()
    comp["_can"] = [_canonical(s) for s in comp["smiles"]]
    comp = comp.drop_duplicates("_can").set_index("_can")
    ref = ref.copy()
    ref["_can"] = [_canonical(s) for s in ref["smiles"]]
    cols = ["xtb_ip_ev", "xtb_ea_ev", "xtb_homo_ev", "xtb_lumo_ev", "xtb_gap_ev"]
    joined = ref.join(comp[cols], on="_can", how="inner")
    return joined.dropna(subset=cols)


def fit_property(prop: str, ref: pd.DataFrame, computed: pd.DataFrame, exclude=None) -> dict:
    """Fit one gas-phase property; choose the feature set by LOO MAE.

    Parameters
    ----------
    prop : {"ip", "ea", "gap_opt"}
    ref : pandas.DataFrame
        Reference rows (``name, smiles, value_ev, ...``).
    computed : pandas.DataFrame
        Computed levels of the reference molecules (``smiles, status, xtb_*``).
    exclude : callable, optional
        ``exclude(name, smiles) -> bool`` drops rows from the fit (hold-out tests).

    Returns
    -------
    dict
        Model parameters, statistics, residuals and the alternatives tried.
    """
    data = _joined(ref[ref["exclude_reason"].str.strip().eq("")], computed)
    if exclude is not None:
        data = data[[not exclude(n, s) for n, s in zip(data["name"], data["smiles"])]]
    y = data["value_ev"].astype(float).to_numpy()
    best, tried = None, []
    for feats in PROPERTIES[prop]["features"]:
        X = _features(data, feats)
        model = LinearLevelModel(feats).fit(X, y)
        loo = _loo_predictions(X, y, feats)
        stats = _stats(y, model.predict(X), loo)
        tried.append({"features": feats, **stats})
        if best is None or stats["loo_mae_ev"] < best[2]["loo_mae_ev"] - MIN_GAIN_EV:
            best = (model, loo, stats)
    model, loo, stats = best
    X = _features(data, model.features)
    residuals = [{"name": n, "smiles": s, "measured_ev": float(m), "fitted_ev": float(f), "loo_ev": float(lo)}
                 for n, s, m, f, lo in zip(data["name"], data["smiles"], y, model.predict(X), loo)]
    return {"property": prop, "target": PROPERTIES[prop]["target"], "scale": "gas", "kind": "linear",
            "model": model.to_dict(), **stats, "alternatives": tried, "residuals": residuals}


def _normalised_film(film: pd.DataFrame) -> pd.DataFrame:
    film = film.copy()
    fc = pd.to_numeric(film.get("fc_reference_ev", pd.Series("", index=film.index)), errors="coerce")
    shift = (FC_REFERENCE_EV - fc).fillna(0.0)
    for col in ("homo_ev", "lumo_ev"):
        film[col] = pd.to_numeric(film[col], errors="coerce") + shift
    return film


def fit_film(film: pd.DataFrame, computed: pd.DataFrame, ip_model: dict, ea_model: dict,
             gap_model: dict) -> dict[str, dict]:
    """Fit the film shifts on top of the gas models: P₊ (HOMO), P₋ (LUMO) and the optical-gap shift.

    The optical-gap shift collects what separates a film absorption onset from
    the gas/solution S1 energies of the gas set: solid-state red shift, onset
    versus 0–0, and longer effective conjugation in real films.
    """
    film = film[film["exclude_reason"].str.strip().eq("")]
    data = _joined(_normalised_film(film), computed)
    data["gap_opt_ev"] = pd.to_numeric(data.get("gap_opt_ev"), errors="coerce")
    out = {}
    for level, gas_prop, model_d, sign in (("homo", "ip", ip_model, -1.0), ("lumo", "ea", ea_model, -1.0),
                                           ("gap_opt", "gap_opt", gap_model, 1.0)):
        rows = data.dropna(subset=[f"{level}_ev"])
        model = LinearLevelModel.from_dict(model_d["model"])
        gas_level = sign * model.predict(_features(rows, model.features))
        measured = rows[f"{level}_ev"].to_numpy(float)
        shift = FilmShift(level).fit(gas_level, measured)
        n = len(measured)
        loo = gas_level + (shift.shift_ev * n - (measured - gas_level)) / (n - 1)
        stats = _stats(measured, shift.predict(gas_level), loo)
        out[f"{level}_film"] = {
            "property": f"{level}_film", "target": f"{level}_ev", "scale": "film", "kind": "shift",
            "base": gas_prop, "shift_ev": shift.shift_ev, "sigma_ev": shift.sigma_ev,
            "fc_reference_ev": FC_REFERENCE_EV, **stats,
            "residuals": [{"name": nm, "smiles": s, "measured_ev": float(m), "fitted_ev": float(g + shift.shift_ev),
                           "loo_ev": float(lo)} for nm, s, m, g, lo in
                          zip(rows["name"], rows["smiles"], measured, gas_level, loo)],
        }
    return out


def fit_all(sets: dict[str, pd.DataFrame], computed: pd.DataFrame, exclude=None) -> dict[str, dict]:
    """Fit every model (``ip``, ``ea``, ``gap_opt``, ``homo_film``, ``lumo_film``)."""
    models = {prop: fit_property(prop, sets[prop], computed, exclude) for prop in PROPERTIES}
    models.update(fit_film(sets["film"], computed, models["ip"], models["ea"], models["gap_opt"]))
    return models


#: columns of ``reference_raw.csv``: what a refit needs without recomputation
RAW_TABLE_COLUMNS = ["id", "name", "smiles", "status", "error", "representation", "xtb_ip_ev", "xtb_ea_ev",
                     "xtb_homo_ev", "xtb_lumo_ev", "xtb_gap_ev", "xtb_k_hl_ev", "xtb_j_hl_ev", "xtb_overlap_hl",
                     "xtb_ip_film_ev", "xtb_ea_film_ev", "chain_n_max", "chain_fit", "chain_fit_quality"]


def raw_table(computed: pd.DataFrame) -> pd.DataFrame:
    """The raw values of the reference batch (polymers at the chain limit) as stored beside the models."""
    cols = [c for c in RAW_TABLE_COLUMNS if c in computed.columns]
    cols += [c for c in computed.columns if c.startswith("chain_spread_")]
    return computed[cols]


def save_models(models: dict[str, dict], out_dir: str | Path, fp: dict) -> Path:
    """Write ``<out_dir>/<protocol-id>/<property>.json`` with the fingerprint."""
    target = Path(out_dir) / fp["protocol_id"]
    for prop, model in models.items():
        write_json({**model, "fingerprint": fp}, target / f"{prop}.json")
    return target


# --------------------------------------------------------------------------- using models

MODEL_NAMES = ("ip", "ea", "gap_opt", "homo_film", "lumo_film", "gap_opt_film")


def _compare(found: dict, expected: dict) -> list[str]:
    return [f"{k}: model has {found.get(k)!r}, run has {expected.get(k)!r}"
            for k in ("protocol_id", "engine_version", "reference_sha256") if found.get(k) != expected.get(k)]


def load_models(model_dir: str | Path, config=None, reference_dir: str | Path | None = None,
                check: bool = True) -> dict[str, dict]:
    """Load the five model files of one folder and check their fingerprint.

    Parameters
    ----------
    model_dir : path-like
        ``models/<protocol-id>`` folder.
    config : Config or mapping, optional
        Run configuration; with ``check`` the fingerprint must match it.
    reference_dir : path-like, optional
        Reference data whose hash must match (default: the config's).

    Raises
    ------
    CalibrationError
        Missing file, or a fingerprint that belongs to another protocol (the
        message lists every difference).
    """
    model_dir = Path(model_dir)
    models = {}
    for name in MODEL_NAMES:
        path = model_dir / f"{name}.json"
        if not path.is_file():
            raise CalibrationError(f"calibration model {path} is missing; run `dascreen calibrate`")
        models[name] = json.loads(path.read_text(encoding="utf-8"))
    if check and config is not None:
        cfg = Config.of(config)
        ref = reference_dir or cfg["calibration"]["reference"]
        expected = fingerprint(cfg, ref)
        for name, model in models.items():
            diffs = _compare(model.get("fingerprint", {}), expected)
            if diffs:
                raise CalibrationMismatchError(f"calibration model {model_dir / (name + '.json')} does not belong to "
                                       f"this run's protocol ({'; '.join(diffs)}); refit with `dascreen calibrate`")
    return models


def find_models(config) -> Path | None:
    """The shipped model folder matching ``config``, or ``None`` when a refit is needed.

    Parameters
    ----------
    config : Config or mapping
        The run configuration (``calibration.models`` and the protocol).
    """
    cfg = Config.of(config)
    folder = Path(cfg["calibration"]["models"]) / cfg.protocol_id
    try:
        load_models(folder, cfg)
    except CalibrationError:
        return None
    return folder


def apply_models(levels: pd.DataFrame, models: dict[str, dict], scale: str = "film") -> pd.DataFrame:
    """Add calibrated columns with σ to a levels table.

    Parameters
    ----------
    levels : pandas.DataFrame
        Table with raw ``xtb_*`` columns (rows without them stay empty).
    models : dict
        From :func:`load_models`.
    scale : {"film", "gas"}
        Scale of ``homo_ev``/``lumo_ev``/``gap_opt_ev``; ``ip_ev``/``ea_ev``/``gap_fund_ev`` are always gas.

    Returns
    -------
    pandas.DataFrame
        Copy with ``ip_ev, ea_ev, gap_fund_ev, homo_ev, lumo_ev, gap_opt_ev``,
        their σ columns and ``scale`` filled for computed rows.
    """
    if scale not in ("film", "gas"):
        raise ConfigError(f"levels.scale must be 'film' or 'gas', not {scale!r}")
    out = levels.copy()
    ok = out["status"].eq("ok") & out["xtb_ip_ev"].notna()
    sub = out[ok]
    pred = {}
    for prop in ("ip", "ea", "gap_opt"):
        m = LinearLevelModel.from_dict(models[prop]["model"])
        pred[prop] = m.predict(_features(sub, m.features), return_std=True)
    (ip, ip_s), (ea, ea_s), (gap, gap_s) = pred["ip"], pred["ea"], pred["gap_opt"]
    if scale == "film":
        h, l_, g = models["homo_film"], models["lumo_film"], models["gap_opt_film"]
        homo, homo_s = -ip + h["shift_ev"], np.hypot(ip_s, h["sigma_ev"])
        lumo, lumo_s = -ea + l_["shift_ev"], np.hypot(ea_s, l_["sigma_ev"])
        gap, gap_s = gap + g["shift_ev"], np.hypot(gap_s, g["sigma_ev"])
    else:
        homo, homo_s, lumo, lumo_s = -ip, ip_s, -ea, ea_s
    values = {"ip_ev": ip, "ea_ev": ea, "gap_fund_ev": ip - ea, "homo_ev": homo, "lumo_ev": lumo,
              "gap_opt_ev": gap, "ip_sigma_ev": ip_s, "ea_sigma_ev": ea_s, "homo_sigma_ev": homo_s,
              "lumo_sigma_ev": lumo_s, "gap_opt_sigma_ev": gap_s}
    for col, arr in values.items():
        out[col] = np.nan
        out.loc[ok, col] = np.round(arr, 4)
    out["scale"] = ""
    out.loc[ok, "scale"] = scale
    return out


def stats_table(models: dict[str, dict]) -> pd.DataFrame:
    """One row per model: n, features, slope(s), intercept/shift, R², LOO MAE/RMSE, max error, σ."""
    rows = []
    for name in MODEL_NAMES:
        m = models[name]
        if m["kind"] == "linear":
            d = m["model"]
            terms = ", ".join(f"{c:+.3f}·{f}" for c, f in zip(d["coef"], d["features"]))
            rows.append({"model": name, "scale": m["scale"], "n": m["n"], "terms": terms,
                         "intercept_ev": round(d["intercept"], 3), "r2": round(m["r2"], 3),
                         "loo_mae_ev": round(m["loo_mae_ev"], 3), "loo_rmse_ev": round(m["loo_rmse_ev"], 3),
                         "max_abs_error_ev": round(m["max_abs_error_ev"], 3),
                         "sigma_ev": round(d["residual_sigma_ev"], 3)})
        else:
            rows.append({"model": name, "scale": m["scale"], "n": m["n"], "terms": f"{m['base']} gas model",
                         "intercept_ev": round(m["shift_ev"], 3), "r2": round(m["r2"], 3),
                         "loo_mae_ev": round(m["loo_mae_ev"], 3), "loo_rmse_ev": round(m["loo_rmse_ev"], 3),
                         "max_abs_error_ev": round(m["max_abs_error_ev"], 3), "sigma_ev": round(m["sigma_ev"], 3)})
    return pd.DataFrame(rows)
