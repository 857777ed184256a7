"""Film (solid-state / electrochemical) HOMO and LUMO models.

Film levels differ from gas-phase ones mainly by the electronic polarisation of the
surrounding solid, P₊ for holes and P₋ for electrons (≈ 1–1.5 eV, Sato, Seki,
Inokuchi [1]_). P depends on the size and shape of the molecule: it falls along an
oligomer series, so a constant shift cannot serve small molecules and polymers alike.
Two routes are compared by cross-validation on the film set (``levels_film.csv``,
polymers at the chain limit, CV values brought to Fc at −4.8 eV):

``shift``
    the gas-phase IP/EA model plus one constant (today's route);
``continuum``
    a linear model of the ΔSCF IP/EA computed with neutral and ions in a dielectric
    continuum of ε = 3.5 (``xtb_ip_film_ev``/``xtb_ea_film_ev``): the polarisation
    energy is size-consistent, computed for every oligomer before the chain-limit
    extrapolation, and one small linear calibration sits on top;
``continuum + orbital``
    the same plus the neutral's orbital energy (as the gas IP model may use).

The route with the lowest LOO MAE wins (a route with more parameters must gain more
than :data:`screen.calibration.linear.MIN_GAIN_EV` per parameter). Both LOO and
leave-one-family-out errors are recorded.

References
----------
.. [1] N. Sato, K. Seki, H. Inokuchi, J. Chem. Soc., Faraday Trans. 2, 77 (1981) 1621.
   :doi:`10.1039/F29817701621`
.. [2] C. M. Cardona, W. Li, A. E. Kaifer, D. Stockdale, G. C. Bazan, Adv. Mater. 23 (2011)
   2367. :doi:`10.1002/adma.201004554`
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from screen.calibration.linear import MIN_GAIN_EV, CalibrationError, FilmShift, LinearLevelModel, feature_matrix, stats
from screen.calibration.reference import FC_REFERENCE_EV, family, joined, normalised_film
from screen.calibration.validation import breakdown, select

__all__ = ["LEVELS", "film_dataset", "fit_film_level"]

#: per film level: the gas model it may shift, the continuum features (simplest first)
LEVELS = {
    "homo": {"gas": "ip", "features": [["xtb_ip_film_ev"], ["xtb_ip_film_ev", "xtb_homo_ev"]]},
    "lumo": {"gas": "ea", "features": [["xtb_ea_film_ev"], ["xtb_ea_film_ev", "xtb_lumo_ev"]]},
}


def film_dataset(film: pd.DataFrame, computed: pd.DataFrame, exclude=None) -> pd.DataFrame:
    """Film rows (ferrocene-normalised) with their computed values and family."""
    data = joined(normalised_film(film), computed)
    if exclude is not None:
        data = data[[not exclude(n, s) for n, s in zip(data["name"], data["smiles"])]]
    data = data.copy()
    rep = data["representation"] if "representation" in data else pd.Series("molecule", index=data.index)
    data["representation"] = rep.replace("", "molecule").fillna("molecule")
    data["family"] = [family(n, s, r, "film") for n, s, r in zip(data["name"], data["smiles"],
                                                                  data["representation"])]
    return data.reset_index(drop=True)


def _shift_route(rows: pd.DataFrame, y_ip: np.ndarray, gas_model: dict) -> dict:
    """Constant shift on the gas model (for IP-like targets: y = gas − P)."""
    gas = LinearLevelModel.from_dict(gas_model["model"])
    base = gas.predict(feature_matrix(rows, gas.features))
    shift = FilmShift("film").fit(base, y_ip)
    n = len(y_ip)
    loo = base + (shift.shift_ev * n - (y_ip - base)) / (n - 1)
    grouped = np.array([base[i] + np.mean((y_ip - base)[rows["family"].to_numpy() != f])
                        if np.any(rows["family"].to_numpy() != f) else np.nan
                        for i, f in enumerate(rows["family"].to_numpy())])
    ok = np.isfinite(grouped)
    return {"shift": shift, "loo": loo, "grouped": grouped, "fit": shift.predict(base),
            **stats(y_ip, shift.predict(base), loo),
            "grouped_mae_ev": float(np.mean(np.abs(grouped[ok] - y_ip[ok]))) if ok.any() else float("nan")}


def fit_film_level(level: str, film: pd.DataFrame, computed: pd.DataFrame, gas_model: dict, exclude=None) -> dict:
    """Fit the film model of ``level`` (``homo`` or ``lumo``); return its model record.

    The target is the film IP (−HOMO) or EA (−LUMO); HOMO = −prediction, LUMO = −prediction.
    """
    spec = LEVELS[level]
    data = film_dataset(film, computed, exclude).dropna(subset=[f"{level}_ev"])
    y = -data[f"{level}_ev"].to_numpy(float)
    kinds = data["representation"].to_numpy()
    shift = _shift_route(data, y, gas_model)
    tried = [{"features": [f"{spec['gas']} gas model + constant"], "n": shift["n"], "r2": shift["r2"],
              "loo_mae_ev": shift["loo_mae_ev"], "loo_rmse_ev": shift["loo_rmse_ev"],
              "grouped_mae_ev": shift["grouped_mae_ev"]}]
    cont = None
    try:
        cont = select(data, y, spec["features"], data["family"], kinds)
        tried += cont["alternatives"]
    except CalibrationError:  # no continuum values computed: the shift route stays
        cont = None
    common = {"property": f"{level}_film", "target": f"{level}_ev", "scale": "film", "sign": -1.0,
              "fc_reference_ev": FC_REFERENCE_EV, "alternatives": tried}
    if cont is not None and cont["loo_mae_ev"] < shift["loo_mae_ev"] - MIN_GAIN_EV * len(cont["features"]):
        chosen, record = cont, {**common, "kind": "linear", "route": "continuum", "model": cont["model"].to_dict()}
        fitted = cont["model"].predict(feature_matrix(data, cont["features"]))
    else:
        chosen = shift
        record = {**common, "kind": "shift", "route": "shift", "base": spec["gas"],
                  "shift_ev": -shift["shift"].shift_ev, "sigma_ev": shift["shift"].sigma_ev}
        fitted = shift["fit"]
    record.update({k: chosen[k] for k in ("n", "r2", "loo_mae_ev", "loo_rmse_ev", "max_abs_error_ev",
                                          "grouped_mae_ev")})
    record["by_family"] = breakdown(y, chosen["grouped"], data["family"])
    record["loo_by_representation"] = breakdown(y, chosen["loo"], kinds)
    record["residuals"] = [{"name": n, "smiles": s, "family": f, "representation": r, "measured_ev": float(-m),
                            "fitted_ev": float(-ft), "loo_ev": float(-lo), "grouped_ev": float(-g)}
                           for n, s, f, r, m, ft, lo, g in zip(data["name"], data["smiles"], data["family"], kinds, y,
                                                               fitted, chosen["loo"], chosen["grouped"])]
    return record
