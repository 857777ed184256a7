"""Fit and validate the device model on published devices (``models/reference/devices.csv``).

The fitted model of :mod:`screen.device` has four kinds of parameter, all
fitted here on measured devices with their published levels:

- the energy loss ΔE_loss = E_CT − qVoc, with
  E_CT = min(|HOMO_D| − |LUMO_A|, smaller optical gap) (Veldman et al. [1]_):
  the mean over the training devices, per acceptor class (a class needs at
  least :data:`MIN_CLASS_ROWS` devices, else its family — fullerene or
  non-fullerene — is used, else the pooled value) when that lowers the
  held-out error, and pooled otherwise;
- the maximum EQE and the offset scale Δ0 of the charge-generation yield
  1 − exp(−Δ/Δ0): least squares on the measured Jsc (EQE closed form for each
  Δ0 on a grid);
- the fill factor: the median measured FF.

Validation is grouped cross-validation: leave one *acceptor structure* out
(every device with that acceptor is held out together, so a material never
helps predict itself).  The same held-out devices are predicted by Scharber's
rule (fixed parameters, donor-only: nothing to fit) for comparison.  Metrics:
Voc MAE and mean signed error [V], Spearman rank correlation of Voc and of PCE,
and how many working devices each model classifies as not viable.  The
comparison uses each model's formula values (Voc capped at the gap, PCE capped
at the detailed-balance limit) for every device, viable or not, so that a model
cannot improve its error by declaring hard devices not viable.

Run ``python -m screen.devicefit`` to print the table, ``--write`` to (re)write
``models/device/fitted.json`` with the parameters fitted on every device, the
cross-validation statistics and the SHA-256 of the device file.

References
----------
.. [1] D. Veldman, S. C. J. Meskers, R. A. J. Janssen, Adv. Funct. Mater. 19 (2009) 1939.
   :doi:`10.1002/adfm.200801834`
.. [2] M. C. Scharber et al., Adv. Mater. 18 (2006) 789. :doi:`10.1002/adma.200501717`
.. [3] K. Vandewal et al., Nat. Mater. 8 (2009) 904. :doi:`10.1038/nmat2548`
"""

from __future__ import annotations

import argparse
import json
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.stats import spearmanr

from screen.device import DeviceModel
from screen.devicepars import FITTED_PATH, POOLED, FittedParameters, family_of
from screen.errors import InputError
from screen.spectrum import jsc_ma_cm2

__all__ = ["DEVICES_PATH", "read_devices", "fit", "cross_validate", "predict", "write_fitted", "main",
           "MIN_CLASS_ROWS", "OFFSET_SCALE_GRID_EV"]

DEVICES_PATH = Path(__file__).resolve().parent.parent / "models" / "reference" / "devices.csv"
#: devices a class needs in the training set for a loss of its own
MIN_CLASS_ROWS = 5
#: offset scales Δ0 tried for the charge-generation yield [eV]
OFFSET_SCALE_GRID_EV = np.round(np.arange(0.01, 0.401, 0.01), 3)
_NEEDED = ["device_id", "acceptor", "acceptor_smiles", "acceptor_class", "donor_homo_ev", "donor_lumo_ev",
           "donor_gap_opt_ev", "acceptor_homo_ev", "acceptor_lumo_ev", "acceptor_gap_opt_ev", "voc_v", "jsc_ma_cm2",
           "ff", "pce_pct"]
_LEVELS = ["donor_homo_ev", "donor_lumo_ev", "donor_gap_opt_ev", "acceptor_homo_ev", "acceptor_lumo_ev",
           "acceptor_gap_opt_ev"]


def read_devices(path=DEVICES_PATH) -> pd.DataFrame:
    """The device table with the rows usable for the Voc fit (all six levels and Voc known).

    Raises
    ------
    InputError
        A needed column is missing (names the file and the columns).
    """
    frame = pd.read_csv(path)
    missing = [c for c in _NEEDED if c not in frame]
    if missing:
        raise InputError(f"{path}: device table lacks columns {missing}")
    for col in _LEVELS + ["voc_v", "jsc_ma_cm2", "ff", "pce_pct"]:
        frame[col] = pd.to_numeric(frame[col], errors="coerce")
    usable = frame[_LEVELS + ["voc_v"]].notna().all(axis=1)
    out = frame[usable].reset_index(drop=True)
    out["acceptor_class"] = out["acceptor_class"].fillna("").astype(str)
    out["group"] = out["acceptor_smiles"].fillna(out["acceptor"]).astype(str)
    return out


def _levels(d: pd.DataFrame) -> list[np.ndarray]:
    return [d[c].to_numpy(float) for c in _LEVELS]


def _e_ct(d: pd.DataFrame) -> np.ndarray:
    """E_CT = min(LUMO_A − HOMO_D, smaller optical gap). [eV]"""
    interface = d["acceptor_lumo_ev"].to_numpy(float) - d["donor_homo_ev"].to_numpy(float)
    return np.fmin(interface, np.fmin(d["donor_gap_opt_ev"].to_numpy(float), d["acceptor_gap_opt_ev"].to_numpy(float)))


def _fit_losses(d: pd.DataFrame, per_class: bool) -> dict:
    """Mean E_CT − qVoc: pooled, and (optionally) per family (fullerene / non-fullerene) and per class with at
    least :data:`MIN_CLASS_ROWS` training devices. [eV]"""
    loss = _e_ct(d) - d["voc_v"].to_numpy(float)
    out = {POOLED: float(np.mean(loss))}
    if per_class:
        classes = d["acceptor_class"].astype(str)
        for key, idx in list(classes.map(family_of).groupby(classes.map(family_of)).indices.items()) \
                + list(classes.groupby(classes).indices.items()):
            if key and key not in out and len(idx) >= MIN_CLASS_ROWS:
                out[str(key)] = float(np.mean(loss[idx]))
    return {k: max(0.0, v) for k, v in out.items()}


def _fit_eqe(d: pd.DataFrame) -> tuple[float, float]:
    """``(eqe_max, offset_scale_ev)``: least squares on measured Jsc (EQE closed form per Δ0)."""
    rows = d[d["jsc_ma_cm2"].notna()]
    if len(rows) < 3:
        raise InputError(f"device fit: {len(rows)} devices with Jsc; need at least 3")
    g_d, g_a = rows["donor_gap_opt_ev"].to_numpy(float), rows["acceptor_gap_opt_ev"].to_numpy(float)
    j_lo, j_hi = jsc_ma_cm2(np.minimum(g_d, g_a), 1.0), jsc_ma_cm2(np.maximum(g_d, g_a), 1.0)
    d_l = rows["donor_lumo_ev"].to_numpy(float) - rows["acceptor_lumo_ev"].to_numpy(float)
    d_h = rows["donor_homo_ev"].to_numpy(float) - rows["acceptor_homo_ev"].to_numpy(float)
    meas = rows["jsc_ma_cm2"].to_numpy(float)
    best = (np.inf, 1.0, 0.1)
    for scale in OFFSET_SCALE_GRID_EV:
        eta_d = np.where(d_l > 0, -np.expm1(-np.maximum(d_l, 0) / scale), 0.0)
        eta_a = np.where(d_h > 0, -np.expm1(-np.maximum(d_h, 0) / scale), 0.0)
        eta_lo = np.where(g_d <= g_a, eta_d, eta_a)
        basis = (j_lo - j_hi) * eta_lo + j_hi * 0.5 * (eta_d + eta_a)
        eqe = float(np.clip(basis @ meas / max(basis @ basis, 1e-12), 0.01, 1.0))
        sse = float(np.sum((eqe * basis - meas) ** 2))
        if sse < best[0] - 1e-12:
            best = (sse, eqe, float(scale))
    return best[1], best[2]


def fit(d: pd.DataFrame, per_class: bool = True) -> FittedParameters:
    """Fitted parameters from a device table (see the module docstring).

    Examples
    --------
    >>> p = fit(read_devices())
    >>> 0 < p.eqe_max <= 1 and 0 < p.ff <= 1 and "pooled" in p.loss_ev
    True
    """
    eqe, scale = _fit_eqe(d)
    ff = d["ff"].dropna()
    return FittedParameters(loss_ev=_fit_losses(d, per_class), eqe_max=eqe, offset_scale_ev=scale,
                            ff=float(ff.median()) if len(ff) else 0.65)


def predict(model: DeviceModel, d: pd.DataFrame) -> pd.DataFrame:
    """Formula Voc [V] and PCE [%] of every device (viable or not) and whether the model calls it viable."""
    classes = d["acceptor_class"].to_numpy(object)
    loss, _ = model.loss_ev(classes)
    fig = model.figures(_levels(d), loss, keep_model_values=True)
    return pd.DataFrame({"voc_v": fig["voc_model_v"], "pce_pct": fig["pce_model_pct"], "viable": fig["viable"]},
                        index=d.index)


def _metrics(d: pd.DataFrame, pred: pd.DataFrame) -> dict:
    err = pred["voc_v"] - d["voc_v"]
    has_pce = d["pce_pct"].notna() & pred["pce_pct"].notna()
    return {"n": int(len(d)), "voc_mae_v": float(err.abs().mean()), "voc_mse_v": float(err.mean()),
            "spearman_voc": float(spearmanr(pred["voc_v"], d["voc_v"]).statistic),
            "n_pce": int(has_pce.sum()),
            "spearman_pce": float(spearmanr(pred.loc[has_pce, "pce_pct"], d.loc[has_pce, "pce_pct"]).statistic),
            "not_viable": int((~pred["viable"].astype(bool)).sum())}


@dataclass(frozen=True)
class CrossValidation:
    """Held-out predictions of both models and their metrics."""

    fitted: pd.DataFrame
    scharber: pd.DataFrame
    metrics: dict


def cross_validate(d: pd.DataFrame, per_class: bool = True) -> CrossValidation:
    """Leave-one-acceptor-out predictions of the fitted model and of Scharber's rule.

    Returns
    -------
    CrossValidation
        ``metrics`` has ``fitted``, ``scharber`` and ``mean_voc_baseline`` (MAE
        of predicting the training mean Voc) plus the grouping.
    """
    fitted = pd.DataFrame(index=d.index, columns=["voc_v", "pce_pct", "viable"], dtype=object)
    baseline = pd.Series(np.nan, index=d.index)
    for _group, idx in d.groupby("group").indices.items():
        train = d.drop(index=d.index[idx])
        model = DeviceModel(model="fitted", absorber="both", parameters=fit(train, per_class))
        fitted.iloc[idx] = predict(model, d.iloc[idx]).to_numpy(object)
        baseline.iloc[idx] = train["voc_v"].mean()
    fitted = fitted.astype({"voc_v": float, "pce_pct": float, "viable": bool})
    scharber = predict(DeviceModel(model="scharber", absorber="donor"), d)
    metrics = {"grouping": "leave one acceptor structure out", "n_groups": int(d["group"].nunique()),
               "fitted": _metrics(d, fitted), "scharber": _metrics(d, scharber),
               "mean_voc_baseline_mae_v": float((baseline - d["voc_v"]).abs().mean())}
    return CrossValidation(fitted, scharber, metrics)


def write_fitted(path=FITTED_PATH, devices=DEVICES_PATH) -> dict:
    """Fit on every device, cross-validate, choose per-class losses if they help, write JSON.

    Returns
    -------
    dict
        What was written.
    """
    from screen.io import write_json
    from screen.provenance import sha256_file

    d = read_devices(devices)
    cv_class, cv_pooled = cross_validate(d, True), cross_validate(d, False)
    per_class = cv_class.metrics["fitted"]["voc_mae_v"] < cv_pooled.metrics["fitted"]["voc_mae_v"]
    cv = cv_class if per_class else cv_pooled
    params = fit(d, per_class)
    data = {
        "model": "fitted energy-loss model (Voc = E_CT - loss; EQE with a smooth offset yield)",
        "parameters": params.as_dict() | {"source": None},
        "per_class_loss": bool(per_class),
        "cv": cv.metrics,
        "cv_other_choice": (cv_pooled if per_class else cv_class).metrics["fitted"],
        "beats_scharber": bool(cv.metrics["fitted"]["voc_mae_v"] < cv.metrics["scharber"]["voc_mae_v"]),
        "devices": str(Path(devices).name),
        "devices_sha256": sha256_file(devices),
        "devices_rows_used": int(len(d)),
        "references": ["Veldman et al., Adv. Funct. Mater. 19 (2009) 1939, doi:10.1002/adfm.200801834",
                       "Scharber et al., Adv. Mater. 18 (2006) 789, doi:10.1002/adma.200501717"],
    }
    write_json(data, path)
    return data


def _table(metrics: dict) -> str:
    rows = [("model", "n", "Voc MAE [V]", "Voc MSE [V]", "Spearman Voc", "Spearman PCE", "not viable")]
    for name in ("fitted", "scharber"):
        m = metrics[name]
        rows.append((name, str(m["n"]), f"{m['voc_mae_v']:.3f}", f"{m['voc_mse_v']:+.3f}",
                     f"{m['spearman_voc']:.2f}", f"{m['spearman_pce']:.2f} (n={m['n_pce']})", str(m["not_viable"])))
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    return "\n".join("  ".join(c.ljust(w) for c, w in zip(r, widths)) for r in rows)


def main(argv=None) -> int:
    """Print the cross-validation table; ``--write`` also writes the fitted model."""
    parser = argparse.ArgumentParser(prog="python -m screen.devicefit", description=__doc__.split("\n")[0])
    parser.add_argument("--devices", default=str(DEVICES_PATH))
    parser.add_argument("--write", action="store_true", help=f"write {FITTED_PATH}")
    args = parser.parse_args(argv)
    if args.write:
        data = write_fitted(FITTED_PATH, args.devices)
        metrics = data["cv"]
        print(f"wrote {FITTED_PATH}: {json.dumps(data['parameters'])}")
    else:
        metrics = cross_validate(read_devices(args.devices)).metrics
    print(f"held-out ({metrics['grouping']}, {metrics['n_groups']} groups):")
    print(_table(metrics))
    print(f"predicting the training mean Voc: MAE {metrics['mean_voc_baseline_mae_v']:.3f} V")
    return 0


if __name__ == "__main__":
    sys.exit(main())
