"""Device model beyond the grouped cross-validation: on computed levels, and what limits its Voc ranking.

Computed levels
---------------
The device model is fitted on the published levels of published devices
(:mod:`screen.devicefit`), but a user ranks pairs on *computed* levels: GFN2-xTB
raw values put on the film scale by the calibration (:mod:`screen.calibrate`).
:func:`computed_validation` measures what that user gets.  Many device
materials are also calibration reference structures whose raw values are
stored beside the shipped models (``models/<protocol-id>/reference_raw.csv``,
polymers at the chain limit).  For every device whose donor *and* acceptor
have raw values there:

1. each material's film HOMO, LUMO and optical gap come from the calibration
   refitted *without that structure* (:func:`out_of_sample_levels`: every
   reference row with the same canonical SMILES leaves every set — IP, EA,
   optical gap, film — so no level of the material informs its own
   prediction);
2. the device model is the shipped recipe fitted on the *other* devices with
   their published levels: the model of the grouped fold that holds the
   device's acceptor (or donor) structure out, loss variant chosen inside that
   fold (:func:`screen.devicefit.fold_model`);
3. Voc and PCE are predicted on the computed levels and compared with the
   measured ones, beside Scharber's rule on the same computed levels, the same
   fitted models on the published levels of the same devices, and the
   training-mean Voc;
4. which computed level costs the most: the same predictions with one of the
   six levels (or one material's three) put back to its published value
   (:data:`SUBSTITUTIONS`).

Limits of the Voc ranking
-------------------------
:func:`rank_limits` separates what can limit the Spearman correlation of Voc:
the spread of measured Voc among devices of the same blend (a ceiling for any
model of the levels), how well E_CT alone ranks Voc per acceptor class, and the
held-out figures on devices whose levels all come from the film set against
devices with converted levels (the level noise of the conversion).

References
----------
.. [1] D. Veldman, S. C. J. Meskers, R. A. J. Janssen, Adv. Funct. Mater. 19 (2009) 1939.
   :doi:`10.1002/adfm.200801834`
.. [2] M. C. Scharber et al., Adv. Mater. 18 (2006) 789. :doi:`10.1002/adma.200501717`

Examples
--------
>>> from screen.devicefit import read_devices
>>> cov = coverage(read_devices(), read_raw())
>>> bool(cov.any()) and not bool(cov.all())
True
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from screen.calibrate import apply_models, fit_all
from screen.calibration.reference import canonical, read_reference
from screen.config import protocol_id
from screen.device import DeviceModel
from screen.devicefit import GROUPINGS, _e_ct, _metrics, _rho, fold_model, predict, rank_intervals
from screen.devicelevels import LEVELS

__all__ = ["RAW_PATH", "REFERENCE_DIR", "read_raw", "coverage", "out_of_sample_levels", "computed_levels",
           "computed_validation", "rank_limits", "levels_for", "SUBSTITUTIONS"]

_REPO = Path(__file__).resolve().parent.parent
#: raw GFN2-xTB values of the reference structures of the default protocol (polymers at the chain limit)
RAW_PATH = _REPO / "models" / protocol_id({}) / "reference_raw.csv"
#: the calibration reference sets
REFERENCE_DIR = _REPO / "models" / "reference"
_KINDS = ("homo_ev", "lumo_ev", "gap_opt_ev")


def read_raw(path=RAW_PATH) -> pd.DataFrame:
    """Raw values of the reference structures with a ``_can`` column (canonical SMILES); usable rows only."""
    raw = pd.read_csv(path)
    raw = raw[raw["status"].eq("ok") & pd.to_numeric(raw["xtb_ip_ev"], errors="coerce").notna()].copy()
    raw["_can"] = [canonical(s) for s in raw["smiles"]]
    return raw.drop_duplicates("_can").reset_index(drop=True)


def _structure(smiles) -> str:
    return canonical(smiles) if isinstance(smiles, str) and smiles.strip() else ""


def coverage(d: pd.DataFrame, raw: pd.DataFrame) -> pd.Series:
    """True for device rows whose donor and acceptor both have raw values in ``raw``."""
    known = set(raw["_can"])
    return pd.Series([_structure(a) in known and _structure(b) in known
                      for a, b in zip(d["donor_smiles"], d["acceptor_smiles"])], index=d.index)


def out_of_sample_levels(structures, raw: pd.DataFrame, sets: dict, fit=fit_all) -> pd.DataFrame:
    """Film HOMO, LUMO and optical gap of each structure from a calibration fitted without it.

    Parameters
    ----------
    structures : iterable of str
        Canonical SMILES (:func:`screen.calibration.reference.canonical`) present in ``raw``.
    raw : pandas.DataFrame
        From :func:`read_raw`.
    sets : dict
        Reference sets (:func:`screen.calibration.reference.read_reference`).
    fit : callable
        ``fit(sets, raw, exclude=...)`` → models (default :func:`screen.calibrate.fit_all`).

    Returns
    -------
    pandas.DataFrame
        Indexed by structure: ``homo_ev``, ``lumo_ev``, ``gap_opt_ev`` on the film scale. [eV]
    """
    rows = {}
    for can in dict.fromkeys(structures):
        models = fit(sets, raw, exclude=lambda _name, smiles, can=can: canonical(smiles) == can)
        out = apply_models(raw[raw["_can"].eq(can)], models, "film")
        rows[can] = out[list(_KINDS)].iloc[0].astype(float)
    return pd.DataFrame.from_dict(rows, orient="index", columns=list(_KINDS))


#: level sets put back to their published values one at a time (name → columns), step 4 of the module docstring
SUBSTITUTIONS = {**{col: [col] for col in LEVELS},
                 "donor levels": [c for c in LEVELS if c.startswith("donor_")],
                 "acceptor levels": [c for c in LEVELS if c.startswith("acceptor_")]}


def computed_levels(d: pd.DataFrame, levels: pd.DataFrame) -> pd.DataFrame:
    """The device rows with their six levels replaced by the computed ones (``levels`` from
    :func:`out_of_sample_levels`); NaN where a material has none."""
    out = d.copy()
    for role in ("donor", "acceptor"):
        keys = [_structure(s) for s in d[f"{role}_smiles"]]
        for kind in _KINDS:
            out[f"{role}_{kind}"] = [levels[kind].get(k, np.nan) for k in keys]
    return out


def _fold_predictions(d: pd.DataFrame, rows: pd.DataFrame, views: dict, by: str) -> tuple[dict, pd.Series, dict]:
    """Predictions of each view (name → frame of ``rows`` with levels) by the fold model that holds the row's
    group out; the training mean Voc; and the loss variants chosen."""
    key = GROUPINGS[by]
    preds = {name: [] for name in views}
    baseline = pd.Series(np.nan, index=rows.index)
    chosen: dict[str, int] = {}
    for group, idx in rows.groupby(key).groups.items():
        train = d[d[key] != group]
        model, variant = fold_model(train, key)
        chosen[variant] = chosen.get(variant, 0) + 1
        for name, frame in views.items():
            preds[name].append(predict(model, frame.loc[idx]))
        baseline.loc[idx] = train["voc_v"].mean()
    return {n: pd.concat(p).loc[rows.index] for n, p in preds.items()}, baseline, chosen


def _level_errors(lit: pd.DataFrame, comp: pd.DataFrame) -> dict:
    """Mean signed and mean absolute computed − published level of the devices' materials and of E_CT. [eV]"""
    out = {}
    for name, a, b in [(c, comp[c], lit[c]) for c in LEVELS] + [("e_ct_ev", _e_ct(comp), _e_ct(lit))]:
        diff = np.asarray(a, float) - np.asarray(b, float)
        out[name] = {"bias_ev": float(np.nanmean(diff)), "mae_ev": float(np.nanmean(np.abs(diff)))}
    return out


def computed_validation(d: pd.DataFrame, levels: pd.DataFrame, raw: pd.DataFrame, by: str = "acceptor") -> dict:
    """Held-out device figures on computed levels (see the module docstring).

    Parameters
    ----------
    d : pandas.DataFrame
        Devices with published levels (:func:`screen.devicefit.read_devices`).
    levels : pandas.DataFrame
        Out-of-sample computed levels per structure (:func:`out_of_sample_levels`).
    raw : pandas.DataFrame
        From :func:`read_raw` (for the coverage count).
    by : {'acceptor', 'donor'}
        The grouping whose fold model predicts each device.

    Returns
    -------
    dict
        ``coverage`` (devices usable / with both materials computed / with Voc / with PCE),
        ``fitted``, ``fitted_published_levels``, ``scharber`` (metrics as in
        :func:`screen.devicefit.cross_validate`), ``mean_voc_baseline``,
        ``level_errors`` (computed − published), ``published_one_at_a_time``
        (the fitted model's metrics with each :data:`SUBSTITUTIONS` entry put back
        to the published values) and the loss variants chosen.
    """
    covered = coverage(d, raw)
    rows = d[covered]
    comp = computed_levels(rows, levels)
    views = {"computed": comp, "published": rows}
    for name, cols in SUBSTITUTIONS.items():
        views[f"put back: {name}"] = comp.assign(**{c: rows[c] for c in cols})
    preds, baseline, chosen = _fold_predictions(d, rows, views, by)
    has_voc = rows["voc_v"].notna()
    err = (baseline - rows["voc_v"])[has_voc]
    return {"grouping": f"leave one {by} structure out", "by": by, "variants_per_fold": chosen,
            "coverage": {"devices": int(len(d)), "computed": int(covered.sum()), "with_voc": int(has_voc.sum()),
                         "with_pce": int(rows["pce_pct"].notna().sum())},
            "fitted": {**_metrics(comp, preds["computed"]), **rank_intervals(comp, preds["computed"])},
            "fitted_published_levels": _metrics(rows, preds["published"]),
            "scharber": _metrics(comp, predict(DeviceModel(model="scharber", absorber="donor"), comp)),
            "mean_voc_baseline": {"voc_mae_v": float(err.abs().mean()), "voc_bias_v": float(err.mean())},
            "level_errors": _level_errors(rows, comp),
            "published_one_at_a_time": {name: _metrics(views[f"put back: {name}"], preds[f"put back: {name}"])
                                        for name in SUBSTITUTIONS}}


def rank_limits(d: pd.DataFrame, held_out: pd.DataFrame) -> dict:
    """What limits the Spearman correlation of Voc (see the module docstring).

    Parameters
    ----------
    d : pandas.DataFrame
        Devices (:func:`screen.devicefit.read_devices`).
    held_out : pandas.DataFrame
        Held-out predictions (``voc_v``) of the same rows (:attr:`CrossValidation.fitted`).

    Returns
    -------
    dict
        ``blends``: devices with a Voc, distinct blends, repeated blends, SD of Voc [V], the root-mean-square
        spread within repeated blends [V] and ``ceiling_spearman`` (each device predicted by its blend's mean
        measured Voc: the best any function of the two structures can rank); ``e_ct_spearman`` pooled and per
        acceptor class; ``by_level_source``: held-out n, Spearman(Voc) and Voc MAE [V] on devices whose levels
        all come from the film set and on devices with converted levels.
    """
    d = d[d["voc_v"].notna()]
    held_out = held_out.loc[d.index]
    blend = d["donor_group"] + "|" + d["group"]
    size, mean = blend.map(blend.value_counts()), blend.map(d.groupby(blend)["voc_v"].mean())
    rep = size > 1
    dof = int(rep.sum() - blend[rep].nunique())
    within = float(np.sqrt(((d["voc_v"] - mean)[rep] ** 2).sum() / dof)) if dof > 0 else float("nan")
    e_ct = pd.Series(_e_ct(d), index=d.index)
    by_class = {str(c): {"n": int(len(s)), "spearman": _rho(e_ct[s.index], s["voc_v"])}
                for c, s in d.groupby("acceptor_class")}
    sources = {}
    for name, mask in (("film_set", ~d["levels_converted"]), ("converted", d["levels_converted"])):
        err = (held_out.loc[mask, "voc_v"] - d.loc[mask, "voc_v"]).abs()
        sources[name] = {"n": int(mask.sum()), "spearman_voc": _rho(held_out.loc[mask, "voc_v"], d.loc[mask, "voc_v"]),
                         "voc_mae_v": float(err.mean())}
    return {"blends": {"n": int(len(d)), "blends": int(blend.nunique()), "repeated_blends": int(blend[rep].nunique()),
                       "devices_in_repeated": int(rep.sum()), "voc_sd_v": float(d["voc_v"].std()),
                       "within_blend_rms_v": within, "ceiling_spearman": _rho(mean, d["voc_v"])},
            "e_ct_spearman": {"pooled": _rho(e_ct, d["voc_v"]), "by_class": by_class},
            "by_level_source": sources}


def levels_for(d: pd.DataFrame, raw: pd.DataFrame, reference_dir=REFERENCE_DIR) -> pd.DataFrame:
    """:func:`out_of_sample_levels` of every material of the covered devices of ``d``."""
    rows = d[coverage(d, raw)]
    structures = [_structure(s) for s in pd.concat([rows["donor_smiles"], rows["acceptor_smiles"]])]
    return out_of_sample_levels(structures, raw, read_reference(reference_dir))
