"""Film (solid-state / electrochemical) HOMO and LUMO models.

Film levels differ from gas-phase ones mainly by the electronic polarisation of the
surrounding solid, P₊ for holes and P₋ for electrons (≈ 1–1.5 eV, Sato, Seki,
Inokuchi [1]_). P depends on the size and shape of the molecule: it falls along an
oligomer series, so a constant shift cannot serve small molecules and polymers alike.
Routes compared by cross-validation on the film set (``levels_film.csv``, polymers at
the chain limit, CV values brought to Fc at −4.8 eV):

``shift``
    the gas-phase IP/EA model plus one constant (the earlier route);
``continuum``
    the ΔSCF IP/EA computed with neutral and ions in a dielectric continuum of ε = 3.5
    (``xtb_ip_film_ev``/``xtb_ea_film_ev``; the polarisation energy is size-consistent and
    computed for every oligomer before the chain-limit extrapolation) with one linear
    calibration on top, fitted **jointly with the gas-phase reference set**: one slope
    for the ΔSCF value of the phase (gas value for gas rows, continuum value for film
    rows), optionally the orbital energy and a [polymer] offset, and a [film] offset.
    The [polymer] term (≈ +0.3 eV on the film IP, ≈ −0.1 to −0.2 eV on the film EA)
    says that a real polymer film ionises harder, and binds an electron less, than the
    ideal planar chain at the limit n → ∞ predicts: its
    effective conjugation length is finite and torsionally disordered (Gierschner,
    Cornil, Egelhaaf [3]_); the same bias shows when polymers are represented by short
    oligomers instead (their film HOMO LOO is then lower). The gas rows anchor the
    slope over a wide range of IPs/EAs; the film rows alone span only the OPV window
    (IP 4.9–6.1 eV), and a slope fitted there alone (recorded as ``continuum, film rows
    only``) is diluted towards zero by the scatter of recalled values: it wins the film
    LOO by a few hundredths of an eV but places the film LUMO of wide-gap molecules
    (benzene, thiophene) so deep that their transport gap falls below their optical gap,
    so it is not used.

Each level model is fitted on the rows whose level was **measured**: a level that a reference
row derived from its other level and the optical gap (``derived_level`` of ``levels_film.csv``,
"LUMO = HOMO + Eg(opt)", "EA = IP − Eg(opt)", "HOMO = LUMO − Eg(opt)") is an optical level, not the
oxidation/reduction level a CV measurement gives, which is what the model predicts and what the device
model's E_CT = |HOMO_D| − |LUMO_A| uses; for polymers the two can differ by 0.3–0.6 eV (PBDB-T: CV
reduction onset −2.92 eV, HOMO + Eg(opt) −3.53 eV). Such a row is left out of that level's fit only
(:func:`screen.calibration.reference.measured_film`); it stays in the other level's fit and in the
optical-gap model.

The route with the lowest film-row LOO MAE wins (a route with more parameters must gain
more than :data:`screen.calibration.linear.MIN_GAIN_EV` per parameter). LOO and
leave-one-family-out errors over the film rows are recorded.

References
----------
.. [1] N. Sato, K. Seki, H. Inokuchi, J. Chem. Soc., Faraday Trans. 2, 77 (1981) 1621.
   :doi:`10.1039/F29817701621`
.. [2] C. M. Cardona, W. Li, A. E. Kaifer, D. Stockdale, G. C. Bazan, Adv. Mater. 23 (2011)
   2367. :doi:`10.1002/adma.201004554`
.. [3] J. Gierschner, J. Cornil, H.-J. Egelhaaf, Adv. Mater. 19 (2007) 173.
   :doi:`10.1002/adma.200600277`
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from screen.calibration.linear import (DERIVED, MIN_GAIN_EV, CalibrationError, FilmShift, LinearLevelModel,
                                       feature_matrix, stats)
from screen.calibration.reference import FC_REFERENCE_EV, family, joined, measured_film, normalised_film
from screen.calibration.validation import breakdown, select

__all__ = ["LEVELS", "film_dataset", "fit_film_level"]

#: per film level: the gas model it may shift, the continuum features (simplest first). Both levels may add a
#: polymer term (:data:`screen.calibration.linear.DERIVED` ``polymer``), each offered after a nested
#: cross-validation (outer LOO over the film rows, the route and features selected inside the training rows):
#: HOMO 0.175 → 0.151 eV when it was added; LUMO 0.217 → 0.203 eV (default protocol) and 0.172 → 0.161 eV
#: (xTB geometries), chosen in every fold, on the reference set of 2026-12 (it had lost on an earlier, smaller
#: set: 0.212 → 0.220 eV). Both terms say the same thing with opposite signs, a real polymer film has a wider
#: transport gap than the ideal chain limit: IP up (≈ +0.3 eV), EA down (≈ −0.1 to −0.2 eV). Class terms
#: (``cage``) are added to every set by :func:`screen.calibration.validation.select`. The HOMO may also take a term
#: for thieno[3,4-b]thiophene polymers (``tt_polymer``, :mod:`screen.quinoidal`), chosen by the same LOO rule; the
#: LUMO is not offered one (those polymers' LUMO residuals scatter in sign, and with it nested CV got worse).
LEVELS = {
    "homo": {"gas": "ip", "gas_raw": "xtb_ip_ev",
             "features": [["xtb_ip_film_ev"], ["xtb_ip_film_ev", "xtb_homo_ev"], ["xtb_ip_film_ev", "polymer"],
                          ["xtb_ip_film_ev", "polymer", "tt_polymer"]]},
    "lumo": {"gas": "ea", "gas_raw": "xtb_ea_ev",
             "features": [["xtb_ea_film_ev"], ["xtb_ea_film_ev", "xtb_lumo_ev"],
                          ["xtb_ea_film_ev", "xtb_lumo_ev", "polymer"]]},
}


def film_dataset(film: pd.DataFrame, computed: pd.DataFrame, exclude=None) -> pd.DataFrame:
    """Film rows (ferrocene-normalised, derived levels blanked) with their computed values and family."""
    data = joined(measured_film(normalised_film(film)), computed)
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


def _joint_route(spec: dict, data: pd.DataFrame, y: np.ndarray, gas_ref: pd.DataFrame, computed: pd.DataFrame,
                 exclude) -> dict:
    """Continuum ΔSCF + linear calibration fitted on gas and film rows together; statistics over film rows."""
    gas = joined(gas_ref, computed)
    if exclude is not None:
        gas = gas[[not exclude(n, s) for n, s in zip(gas["name"], gas["smiles"])]]
    film_col = spec["features"][0][0]
    cols = sorted({c for f in spec["features"] for c in f if c not in DERIVED})
    g = pd.DataFrame({c: pd.to_numeric(gas[c if c != film_col else spec["gas_raw"]], errors="coerce") for c in cols})
    g["phase_film"], g["y"], g["representation"] = 0.0, gas["value_ev"].astype(float).to_numpy(), "molecule"
    g["family"] = [family(n, s, "molecule", spec["gas"]) for n, s in zip(gas["name"], gas["smiles"])]
    g["smiles"] = gas["smiles"].to_numpy()
    f = data[cols + ["family", "representation", "smiles"]].copy()
    f["phase_film"], f["y"] = 1.0, y
    both = pd.concat([g.reset_index(drop=True), f.reset_index(drop=True)], ignore_index=True)
    rows = both["phase_film"].to_numpy() == 1
    best = None
    for feats in spec["features"]:
        res = select(both, both["y"].to_numpy(float), [feats + ["phase_film"]], both["family"],
                     both["representation"])
        fitted = res["model"].predict(feature_matrix(both, res["features"]))[rows]
        loo, grouped = res["loo"][rows], res["grouped"][rows]
        ok = np.isfinite(grouped)
        res.update(stats(y, fitted, loo), loo=loo, grouped=grouped, fit=fitted,
                   grouped_mae_ev=float(np.mean(np.abs(grouped[ok] - y[ok]))) if ok.any() else float("nan"),
                   n_gas=int((~rows).sum()))
        if best is None or res["loo_mae_ev"] < best["loo_mae_ev"] - MIN_GAIN_EV * (len(feats) - len(best["features"]) + 1):
            best = res
    return best


def fit_film_level(level: str, film: pd.DataFrame, computed: pd.DataFrame, gas_model: dict, exclude=None,
                   gas_ref: pd.DataFrame | None = None) -> dict:
    """Fit the film model of ``level`` (``homo`` or ``lumo``); return its model record.

    The target is the film IP (−HOMO) or EA (−LUMO); HOMO = −prediction, LUMO = −prediction.
    Rows whose ``level`` was derived rather than measured (``derived_level``) are not targets.
    ``gas_ref`` is the gas-phase reference set of the level (``ip_gas.csv``/``ea_gas.csv``)
    for the joint continuum route; without it only the shift route is fitted.
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
        only = select(data, y, spec["features"], data["family"], kinds)
        tried += [{**a, "features": a["features"] + ["(continuum, film rows only: not used)"]}
                  for a in only["alternatives"]]
        if gas_ref is not None:
            cont = _joint_route(spec, data, y, gas_ref, computed, exclude)
            tried.append({"features": cont["features"] + ["(continuum, joint with the gas set)"],
                          **{k: cont[k] for k in ("n", "r2", "loo_mae_ev", "loo_rmse_ev", "grouped_mae_ev")}})
    except CalibrationError:  # no continuum values computed: the shift route stays
        cont = None
    common = {"property": f"{level}_film", "target": f"{level}_ev", "scale": "film", "sign": -1.0,
              "fc_reference_ev": FC_REFERENCE_EV, "alternatives": tried}
    if cont is not None and cont["loo_mae_ev"] < shift["loo_mae_ev"] - MIN_GAIN_EV * len(cont["features"]):
        chosen = cont
        record = {**common, "kind": "linear", "route": "continuum (joint with the gas set)",
                  "model": cont["model"].to_dict(), "n_gas_rows": cont["n_gas"]}
        fitted = cont["fit"]
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
