"""Fit and validate the device model on published devices (``models/reference/devices.csv``).

Device levels are put on the film calibration's scale first (:mod:`screen.devicelevels`:
the film-set row of the same material, else the paper's values converted to ferrocene −4.8 eV
and flagged; rows that cannot be converted are dropped with their reason).

Parameters
----------
The fitted model of :mod:`screen.device` has four kinds of parameter:

- the energy loss ΔE_loss = E_CT − qVoc with
  E_CT = min(|HOMO_D| − |LUMO_A|, smaller optical gap) (Veldman et al. [1]_):
  the *median* over the training devices with a Voc (robust to recalled
  outliers; the constant with the least absolute error), either pooled, per
  family (fullerene / non-fullerene) or per acceptor class (a class needs
  :data:`MIN_CLASS_ROWS` devices, else its family, else pooled); and either
  constant (Veldman) or growing with E_CT, loss = loss_class +
  loss_slope·(E_CT − mean E_CT), loss_slope by least squares — the shrinkage
  that recalled reference levels with ~0.1 eV errors call for (Voc then rises
  by 1 − loss_slope per eV of E_CT).  Which of the six variants
  (:data:`LOSS_VARIANTS`) is chosen *inside each training fold* by an inner
  grouped cross-validation of the training devices only, so that the
  held-out devices never choose it;
- the maximum EQE and the offset scale Δ0 of the charge-generation yield
  1 − exp(−Δ/Δ0): least squares on the measured Jsc of every training device
  with a Jsc (whether or not its Voc is known); the EQE pooled, per family or
  per acceptor class (a class or family needs :data:`MIN_CLASS_ROWS` devices
  with a Jsc, else the next coarser value; Δ0 is shared) — the split chosen
  *inside each training fold* by an inner grouped cross-validation of the
  measured Jsc (:func:`choose_eqe_split`).  One pooled EQE put the fullerene
  blends' Jsc about 3 mA cm⁻² above their measured values and the fused-ring
  non-fullerene blends' about 1.5 mA cm⁻² below (held out, leave one acceptor
  out);
- whether a fullerene acceptor counts as an absorber for Jsc
  (:attr:`screen.devicepars.FittedParameters.fullerene_absorbs`): fullerene
  films absorb weakly near their optical gap (the lowest singlet transitions of
  C60 are symmetry-forbidden, C70's are weak; Leach et al. [5]_, from memory),
  and Scharber's model [2]_, built for fullerene blends, counts the donor's
  absorption only.  Counted or not (the donor's gap then sets the current) is
  chosen *inside each training fold* by an inner grouped cross-validation of the
  measured Jsc, the EQE and Δ0 refitted in each inner fold
  (:func:`choose_fullerene_absorber`); a tie keeps the fullerene as an absorber
  (the rule of every other acceptor);
- the fill factor: the median measured FF of the training devices with an FF,
  pooled, per family or per acceptor class (a class or family needs
  :data:`MIN_CLASS_ROWS` devices with an FF, else the next coarser value) — the
  split again chosen inside each training fold by an inner grouped
  cross-validation of the FF (:func:`choose_ff_split`).  Blends of fused-ring
  non-fullerene acceptors and of fullerenes with small-molecule donors differ
  in FF by ≈ 0.1 in the device set (medians 0.70 and 0.58); one pooled FF
  gives every class the same.

Validation
----------
Grouped cross-validation, two groupings: leave one *acceptor structure* out
and leave one *donor structure* out (all devices sharing the held-out
structure leave together; the parameters, and the loss split, are refitted on
the rest).  Held out are Voc MAE and mean signed error [V], Jsc MAE and mean
signed error [mA cm⁻²] (devices with a Jsc), Spearman rank
correlation of Voc (devices with a Voc) and of PCE (every device with levels
and a PCE — the rows without a Voc count here), the same by acceptor class,
and two naive references: the training mean Voc, and the training mean Voc of
the device's acceptor class.  Scharber's rule [2]_ (fixed parameters,
donor-only, nothing to fit) predicts the same devices on the same levels; for
context it is also shown on the papers' own levels (its published convention).
Both models use their formula values (Voc capped at the gap, PCE at the
detailed-balance limit) whether they call a device viable or not, so a model
cannot lower its error by declaring hard devices not viable.

Run ``python -m screen.devicefit`` to print the table, ``--write`` to (re)write
``models/device/fitted.json`` (parameters fitted on every device, both
cross-validations, the rows used and how their levels were sourced, the
SHA-256 of both reference files) and ``models/device/device_levels.csv``.

References
----------
.. [1] D. Veldman, S. C. J. Meskers, R. A. J. Janssen, Adv. Funct. Mater. 19 (2009) 1939.
   :doi:`10.1002/adfm.200801834`
.. [2] M. C. Scharber et al., Adv. Mater. 18 (2006) 789. :doi:`10.1002/adma.200501717`
.. [3] K. Vandewal et al., Nat. Mater. 8 (2009) 904. :doi:`10.1038/nmat2548`
.. [4] C. M. Cardona, W. Li, A. E. Kaifer, D. Stockdale, G. C. Bazan, Adv. Mater. 23 (2011) 2367
   (ferrocene reference values in CV level estimates). :doi:`10.1002/adma.201004554`
.. [5] S. Leach, M. Vervloet, A. Desprès, E. Bréheret, J. P. Hare, T. J. Dennis, H. W. Kroto, R. Taylor,
   D. R. M. Walton, "Electronic spectra and transitions of the fullerene C60", Chem. Phys. 160 (1992) 451
   (from memory).
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
from screen.devicelevels import (DEVICES_PATH, FC_SCALE_EV, FILM_PATH, LEVELS, MIN_SHARED_MATERIALS, level_table,
                                 read_devices, resolve_levels)
from screen.devicekernel import voc_limit
from screen.devicepars import (FITTED_PATH, FULLERENE, NON_FULLERENE, OFFSET_SCALE_MIN_EV, POOLED, FittedParameters,
                               class_values, family_of, slope_loss)
from screen.errors import InputError
from screen.spectrum import jsc_ma_cm2

__all__ = ["DEVICES_PATH", "FILM_PATH", "LEVELS_TABLE_PATH", "read_devices", "level_table", "resolve_levels",
           "fit", "cross_validate", "predict", "write_fitted", "main", "MIN_CLASS_ROWS", "OFFSET_SCALE_GRID_EV",
           "FC_SCALE_EV", "MIN_SHARED_MATERIALS", "LOSS_SPLITS", "LOSS_VARIANTS", "GROUPINGS", "choose_split",
           "fold_model", "CONSTANT_VARIANTS", "FF_SPLITS", "choose_ff_split", "choose_fullerene_absorber",
           "FULLERENE_ABSORBER_CHOICES", "EQE_SPLITS", "choose_eqe_split"]

_REPO = Path(__file__).resolve().parent.parent
#: resolved levels of every device row (written by ``--write``)
LEVELS_TABLE_PATH = _REPO / "models" / "device" / "device_levels.csv"
#: devices a class needs in the training set for a loss of its own
MIN_CLASS_ROWS = 5
#: how the loss may be split, chosen per training fold by inner grouped CV
LOSS_SPLITS = ("pooled", "family", "class")
#: loss variants tried inside each training fold: split, with a constant or an E_CT-dependent loss
LOSS_VARIANTS = tuple(_s + _f for _f in ("", "+slope") for _s in LOSS_SPLITS)
#: how the fill factor may be split, chosen per training fold by inner grouped CV (simplest first)
FF_SPLITS = LOSS_SPLITS
#: how the EQE may be split, chosen per training fold by inner grouped CV of the measured Jsc (simplest first)
EQE_SPLITS = LOSS_SPLITS
#: the constant-loss variants alone (Veldman's constant loss per split)
CONSTANT_VARIANTS = tuple(v for v in LOSS_VARIANTS if "+slope" not in v)
#: grouping name -> column of the group key
GROUPINGS = {"acceptor": "group", "donor": "donor_group"}
#: whether a fullerene acceptor counts as an absorber for Jsc, as tried by :func:`choose_fullerene_absorber`
#: (the current rule first: a tie keeps it), with the names of their scores
FULLERENE_ABSORBER_CHOICES = {True: "fullerene_absorbs", False: "donor_gap_only"}
#: offset scales Δ0 tried for the charge-generation yield [eV]
OFFSET_SCALE_GRID_EV = np.round(np.arange(OFFSET_SCALE_MIN_EV, 0.401, 0.01), 3)
_LEVELS = LEVELS


# --------------------------------------------------------------------------- fit
def _levels(d: pd.DataFrame) -> list[np.ndarray]:
    return [d[c].to_numpy(float) for c in _LEVELS]


def _e_ct(d: pd.DataFrame) -> np.ndarray:
    """E_CT = min(LUMO_A − HOMO_D, smaller optical gap). [eV]"""
    interface = d["acceptor_lumo_ev"].to_numpy(float) - d["donor_homo_ev"].to_numpy(float)
    return np.fmin(interface, np.fmin(d["donor_gap_opt_ev"].to_numpy(float), d["acceptor_gap_opt_ev"].to_numpy(float)))


def _split_flags(split) -> tuple[bool, bool]:
    """(families, classes) of a loss split; ``True`` means 'class' (older callers), ``False`` 'pooled'."""
    split = {True: "class", False: "pooled"}.get(split, split)
    if split not in LOSS_SPLITS:
        raise ValueError(f"loss split {split!r}; choose one of {LOSS_SPLITS}")
    return split in ("family", "class"), split == "class"


def _variant(choice) -> tuple[str, bool]:
    """``(split, free_slope)`` from a variant name like ``'family+slope'``, a split name or a bool."""
    if isinstance(choice, tuple):
        return choice
    choice = {True: "class", False: "pooled"}.get(choice, choice)
    split, _, slope = str(choice).partition("+")
    return split, slope == "slope"


def _variant_name(split: str, free_slope: bool) -> str:
    return split + ("+slope" if free_slope else "")


def _loss_labels(classes: np.ndarray, families: np.ndarray, keys) -> np.ndarray:
    """The loss key each device gets (its class, else its family, else pooled), as
    :meth:`FittedParameters.loss_for` does."""
    label = np.full(len(classes), POOLED, dtype=object)
    for fam in ("fullerene", NON_FULLERENE):
        if fam in keys:
            label[families == fam] = fam
    for key in keys:
        if key not in (POOLED, NON_FULLERENE):
            label[classes == key] = key
    return label


def _split_groups(split, classes, families) -> dict[str, np.ndarray]:
    """Key → member mask of the families and/or classes a split gives a value of their own (each needs
    :data:`MIN_CLASS_ROWS` devices; ``'fullerene'`` is a family and a class, counted once; pooled not included)."""
    fam_ok, cls_ok = _split_flags(split)
    groups: dict[str, np.ndarray] = {}
    for ok, values in ((fam_ok, families), (cls_ok, classes)):
        if not ok:
            continue
        names, counts = np.unique(values.astype(str), return_counts=True)
        for key, count in zip(names, counts):
            if key and key != "nan" and key not in groups and count >= MIN_CLASS_ROWS:
                groups[str(key)] = values == key
    return groups


def _loss_core(e_ct, voc, classes, families, split, free_slope) -> tuple[dict, float, float, tuple]:
    """:func:`_fit_losses` on arrays (devices with a Voc only)."""
    groups = _split_groups(split, classes, families)
    keys = [POOLED, *groups]
    label = _loss_labels(classes, families, keys)
    ref = float(np.mean(e_ct))
    slope = 0.0
    if free_slope and len(voc) > len(keys) + 1:
        used = np.unique(label.astype(str))
        design = np.column_stack([e_ct - ref] + [(label == k).astype(float) for k in used])
        coef = np.linalg.lstsq(design, voc, rcond=None)[0]
        slope = float(np.clip(1.0 - coef[0], 0.0, 0.95))
    adjusted = e_ct - voc - slope * (e_ct - ref)
    out = {}
    for key in keys:
        members = groups.get(key, np.ones(len(voc), bool))  # pooled: every device
        out[str(key)] = max(0.0, float(np.median(adjusted[members])))
    return out, slope, ref, (float(np.min(e_ct)), float(np.max(e_ct)))


def _loss_arrays(d: pd.DataFrame):
    d = d[d["voc_v"].notna()]
    classes = d["acceptor_class"].astype(str).to_numpy(object)
    families = np.array([family_of(c) for c in classes], dtype=object)
    return _e_ct(d), d["voc_v"].to_numpy(float), classes, families


def _fit_losses(d: pd.DataFrame, split="class", free_slope: bool = False) -> tuple[dict, float, float, tuple]:
    """Energy losses of the devices with a Voc: ``(loss_ev, loss_slope, ect_ref_ev, (ect_min_ev, ect_max_ev))``.

    ``loss_ev`` has the median of E_CT − qVoc (less ``loss_slope · (E_CT − ect_ref_ev)``) pooled, and per
    family / per class (at least :data:`MIN_CLASS_ROWS` training devices) as ``split`` allows. With
    ``free_slope`` the slope of Voc on E_CT is fitted by least squares with one intercept per loss key
    (``loss_slope`` = 1 − that slope, kept in [0, 0.95]); else ``loss_slope`` = 0 (Veldman's constant
    loss); the range of E_CT over these devices bounds where the slope applies. [eV]
    """
    return _loss_core(*_loss_arrays(d), split, free_slope)


@dataclass(frozen=True)
class _JscArrays:
    """What the Jsc fit needs of the devices with a measured Jsc: Jsc at EQE = 1 above the smaller, the larger
    and the donor's gap [mA cm⁻²], the offsets ΔLUMO, ΔHOMO [eV], which gap is the donor's, fullerene rows, Jsc,
    acceptor classes and their families."""

    j_lo: np.ndarray
    j_hi: np.ndarray
    j_donor: np.ndarray
    d_l: np.ndarray
    d_h: np.ndarray
    donor_lower: np.ndarray
    fullerene: np.ndarray
    meas: np.ndarray
    classes: np.ndarray
    families: np.ndarray

    def take(self, idx) -> "_JscArrays":
        return _JscArrays(*(getattr(self, f.name)[idx] for f in self.__dataclass_fields__.values()))


def _jsc_arrays(d: pd.DataFrame) -> _JscArrays:
    rows = d[d["jsc_ma_cm2"].notna()]
    g_d, g_a = rows["donor_gap_opt_ev"].to_numpy(float), rows["acceptor_gap_opt_ev"].to_numpy(float)
    classes = rows["acceptor_class"].astype(str).to_numpy(object)
    return _JscArrays(j_lo=jsc_ma_cm2(np.minimum(g_d, g_a), 1.0), j_hi=jsc_ma_cm2(np.maximum(g_d, g_a), 1.0),
                      j_donor=jsc_ma_cm2(g_d, 1.0),
                      d_l=rows["donor_lumo_ev"].to_numpy(float) - rows["acceptor_lumo_ev"].to_numpy(float),
                      d_h=rows["donor_homo_ev"].to_numpy(float) - rows["acceptor_homo_ev"].to_numpy(float),
                      donor_lower=g_d <= g_a, fullerene=rows["acceptor_class"].astype(str).eq(FULLERENE).to_numpy(),
                      meas=rows["jsc_ma_cm2"].to_numpy(float), classes=classes,
                      families=np.array([family_of(c) for c in classes], dtype=object))


def _jsc_basis(a: _JscArrays, scale: float, fullerene_absorbs: bool = True) -> np.ndarray:
    """Jsc at EQE = 1 [mA cm⁻²] of the model (:func:`screen.devicekernel.pair_terms`, ``absorber='both'``) with
    offset scale Δ0 = ``scale``; without ``fullerene_absorbs`` a fullerene blend's is the donor-absorber one."""
    eta_d = np.where(a.d_l > 0, -np.expm1(-np.maximum(a.d_l, 0) / scale), 0.0)
    eta_a = np.where(a.d_h > 0, -np.expm1(-np.maximum(a.d_h, 0) / scale), 0.0)
    eta_lo = np.where(a.donor_lower, eta_d, eta_a)
    basis = (a.j_lo - a.j_hi) * eta_lo + a.j_hi * 0.5 * (eta_d + eta_a)
    if not fullerene_absorbs:
        basis = np.where(a.fullerene, a.j_donor * eta_d, basis)
    return basis


def _eqe_ls(basis: np.ndarray, meas: np.ndarray) -> float:
    """Least-squares EQE of ``meas ≈ EQE · basis``, kept in [0.01, 1]. [dimensionless]"""
    return float(np.clip(basis @ meas / max(basis @ basis, 1e-12), 0.01, 1.0))


def _eqe_core(a: _JscArrays, fullerene_absorbs: bool = True, split: str = "pooled") -> tuple[float, float, dict]:
    """``(eqe_max, offset_scale_ev, eqe_by_class)`` of :func:`_fit_eqe` on arrays: for each Δ0 of the grid the
    EQE in closed form, pooled over every device and per family/class as ``split`` allows; the Δ0 with the least
    squared Jsc error of the split model."""
    groups = _split_groups(split, a.classes, a.families) if split != "pooled" else {}
    best = (np.inf, 1.0, 0.1, {})
    for scale in OFFSET_SCALE_GRID_EV:
        basis = _jsc_basis(a, scale, fullerene_absorbs)
        eqe = _eqe_ls(basis, a.meas)
        by_class = {key: _eqe_ls(basis[m], a.meas[m]) for key, m in groups.items()}
        per_row = class_values(by_class, eqe, a.classes) if by_class else eqe
        sse = float(np.sum((per_row * basis - a.meas) ** 2))
        if sse < best[0] - 1e-12:
            best = (sse, eqe, float(scale), by_class)
    return best[1], best[2], best[3]


def _fit_eqe(d: pd.DataFrame, fullerene_absorbs: bool = True, split: str = "pooled") -> tuple[float, float, dict]:
    """``(eqe_max, offset_scale_ev, eqe_by_class)``: least squares on measured Jsc (EQE closed form per Δ0 and
    per family/class as ``split`` allows, Δ0 shared); without ``fullerene_absorbs`` the Jsc of a fullerene blend
    is that of its donor's gap alone."""
    rows = d[d["jsc_ma_cm2"].notna()]
    if len(rows) < 3:
        raise InputError(f"device fit: {len(rows)} devices with Jsc; need at least 3")
    return _eqe_core(_jsc_arrays(rows), fullerene_absorbs, split)


def _jsc_folds(d: pd.DataFrame, key: str) -> tuple[_JscArrays, list[np.ndarray]]:
    """The Jsc arrays of the devices of ``d`` with a measured Jsc and the held-out masks of their groups
    (groups whose training part keeps at least 3 devices)."""
    rows = d[d["jsc_ma_cm2"].notna()]
    groups = rows[key].to_numpy(object)
    folds = [groups == g for g in pd.unique(groups)]
    return _jsc_arrays(rows), [test for test in folds if not test.all() and (~test).sum() >= 3]


def _jsc_cv_mae(a: _JscArrays, folds: list[np.ndarray], fullerene_absorbs: bool, split: str) -> float:
    """Grouped-CV Jsc MAE [mA cm⁻²]: EQE (pooled or split) and Δ0 refitted without each group."""
    pred = np.full(len(a.meas), np.nan)
    for test in folds:
        held = a.take(test)
        eqe, scale, by_class = _eqe_core(a.take(~test), fullerene_absorbs, split)
        pred[test] = class_values(by_class, eqe, held.classes) * _jsc_basis(held, scale, fullerene_absorbs)
    ok = np.isfinite(pred)
    return float(np.mean(np.abs(pred[ok] - a.meas[ok]))) if ok.any() else np.inf


def choose_eqe_split(d: pd.DataFrame, key: str = "group", splits: tuple = EQE_SPLITS,
                     fullerene_absorbs: bool = True) -> tuple[str, dict]:
    """The EQE split (:data:`EQE_SPLITS`) with the least grouped-CV Jsc MAE [mA cm⁻²] on the devices of ``d``
    with a measured Jsc (ties: the simpler), and each split's MAE.  Only ``d`` is used: called on a training
    fold, held-out devices never choose it.

    Examples
    --------
    >>> best, scores = choose_eqe_split(resolve_levels())
    >>> best in EQE_SPLITS and set(scores) == set(EQE_SPLITS)
    True
    """
    a, folds = _jsc_folds(d, key)
    scores = {split: _jsc_cv_mae(a, folds, fullerene_absorbs, split) for split in splits}
    best = min(splits, key=lambda s: (round(scores[s], 6), splits.index(s)))
    return best, scores


def choose_fullerene_absorber(d: pd.DataFrame, key: str = "group",
                              choices: tuple = tuple(FULLERENE_ABSORBER_CHOICES)) -> tuple[bool, dict]:
    """Whether a fullerene acceptor counts as an absorber for Jsc: the choice with the least grouped-CV Jsc MAE
    [mA cm⁻²] on the devices of ``d`` with a measured Jsc (EQE and Δ0 refitted without each group; ties keep
    the first choice, the fullerene as an absorber), and each choice's MAE keyed by
    :data:`FULLERENE_ABSORBER_CHOICES`.  Only ``d`` is used: called on a training fold, held-out devices never
    choose it.

    Examples
    --------
    >>> absorbs, scores = choose_fullerene_absorber(resolve_levels())
    >>> isinstance(absorbs, bool) and set(scores) == {"fullerene_absorbs", "donor_gap_only"}
    True
    """
    arrays, folds = _jsc_folds(d, key)
    scores = {FULLERENE_ABSORBER_CHOICES[choice]: _jsc_cv_mae(arrays, folds, choice, "pooled") for choice in choices}
    best = min(choices, key=lambda c: (round(scores[FULLERENE_ABSORBER_CHOICES[c]], 6), choices.index(c)))
    return bool(best), scores


def _ff_arrays(d: pd.DataFrame):
    d = d[d["ff"].notna()]
    classes = d["acceptor_class"].astype(str).to_numpy(object)
    return d["ff"].to_numpy(float), classes, np.array([family_of(c) for c in classes], dtype=object)


def _ff_core(ff, classes, families, split) -> tuple[float, dict]:
    """``(pooled FF, FF per family/class)``: medians; a family or class needs :data:`MIN_CLASS_ROWS` devices."""
    by_class = {key: float(np.median(ff[members])) for key, members in _split_groups(split, classes, families).items()}
    return float(np.median(ff)), by_class


def choose_ff_split(d: pd.DataFrame, key: str = "group", splits: tuple = FF_SPLITS) -> tuple[str, dict]:
    """The fill-factor split (:data:`FF_SPLITS`) with the least grouped-CV FF MAE on ``d`` (ties: the simpler),
    and each split's MAE.  Only ``d`` is used: called on a training fold, held-out devices never choose it.

    Examples
    --------
    >>> best, scores = choose_ff_split(resolve_levels())
    >>> best in FF_SPLITS and set(scores) == set(FF_SPLITS)
    True
    """
    ff, classes, families = _ff_arrays(d)
    groups = d.loc[d["ff"].notna(), key].to_numpy(object)
    scores = {}
    for split in splits:
        pred = np.full(len(ff), np.nan)
        for g in pd.unique(groups):
            test = groups == g
            if test.all():
                continue
            pooled, by_class = _ff_core(ff[~test], classes[~test], families[~test], split)
            pred[test] = class_values(by_class, pooled, classes[test])
        ok = np.isfinite(pred)
        scores[split] = float(np.mean(np.abs(pred[ok] - ff[ok]))) if ok.any() else np.inf
    best = min(splits, key=lambda s: (round(scores[s], 6), splits.index(s)))
    return best, scores


def _voc_core(e_ct, cap, classes, families, losses) -> np.ndarray:
    """Voc of devices [V]: E_CT less the loss (:func:`screen.devicepars.slope_loss`), at most ``cap`` (the
    detailed-balance Voc of the smallest gap, :func:`screen.devicekernel.voc_limit`)."""
    loss_ev, slope, ref, (lo, hi) = losses
    label = _loss_labels(classes, families, loss_ev)
    loss = np.array([loss_ev[k] for k in label], dtype=float)
    return np.fmin(e_ct - slope_loss(loss, e_ct, slope, ref, lo, hi), cap)


def choose_split(d: pd.DataFrame, key: str = "group", variants: tuple = LOSS_VARIANTS) -> tuple[str, dict]:
    """The loss variant (split × constant/fitted slope, :data:`LOSS_VARIANTS`) with the least grouped-CV Voc
    MAE on ``d`` (ties: the simpler), and each variant's MAE.  Only ``d`` is used: called on a training fold,
    the held-out devices never choose."""
    d = d[d["voc_v"].notna()]
    e_ct, voc, classes, families = _loss_arrays(d)
    cap = voc_limit(np.fmin(d["donor_gap_opt_ev"].to_numpy(float), d["acceptor_gap_opt_ev"].to_numpy(float)))
    folds = [idx for idx in d.groupby(key).indices.values() if len(idx) < len(d)]
    scores = {}
    for variant in variants:
        split, free = _variant(variant)
        pred = np.full(len(d), np.nan)
        for idx in folds:
            keep = np.ones(len(d), bool)
            keep[idx] = False
            losses = _loss_core(e_ct[keep], voc[keep], classes[keep], families[keep], split, free)
            pred[idx] = _voc_core(e_ct[idx], cap[idx], classes[idx], families[idx], losses)
        ok = np.isfinite(pred)
        scores[variant] = float(np.mean(np.abs(pred[ok] - voc[ok]))) if ok.any() else np.inf
    best = min(variants, key=lambda s: (round(scores[s], 6), variants.index(s)))
    return best, scores


def fold_model(train: pd.DataFrame, key: str, per_class=None, variants: tuple = LOSS_VARIANTS, ff_split=None,
               fullerene_absorbs=None, eqe_split=None):
    """``(DeviceModel, variant)`` fitted on one training fold; with ``per_class`` (``ff_split``,
    ``fullerene_absorbs``, ``eqe_split``) None the loss variant (the fill-factor split, whether a fullerene counts
    as an absorber, the EQE split) is chosen by :func:`choose_split` (:func:`choose_ff_split`,
    :func:`choose_fullerene_absorber`, :func:`choose_eqe_split`) on ``train`` alone, grouped by ``key``, so
    held-out devices never choose it.  ``variant`` reads e.g.
    ``'pooled+slope, ff class, fullerene_absorbs, eqe class'``."""
    choice = per_class if per_class is not None else choose_split(train, key, tuple(variants))[0]
    ff_choice = ff_split if ff_split is not None else choose_ff_split(train, key)[0]
    absorbs = (bool(fullerene_absorbs) if fullerene_absorbs is not None
               else choose_fullerene_absorber(train, key)[0])
    eqe_choice = eqe_split if eqe_split is not None else choose_eqe_split(train, key, fullerene_absorbs=absorbs)[0]
    split = _variant_name(*_variant(choice))
    model = DeviceModel(model="fitted", absorber="both",
                        parameters=fit(train, split, ff_choice, absorbs, eqe_choice))
    return model, f"{split}, ff {ff_choice}, {FULLERENE_ABSORBER_CHOICES[absorbs]}, eqe {eqe_choice}"


def fit(d: pd.DataFrame, per_class="class", ff_split="pooled", fullerene_absorbs: bool = True,
        eqe_split: str = "pooled") -> FittedParameters:
    """Fitted parameters from a device table (see the module docstring).

    ``per_class`` is the loss variant: a split (``'pooled'``, ``'family'``,
    ``'class'``; ``True``/``False`` mean class/pooled), optionally with
    ``'+slope'`` for a loss that grows with E_CT.  ``ff_split`` is the
    fill-factor split (:data:`FF_SPLITS`).  ``fullerene_absorbs`` False fits
    the EQE with a fullerene blend's Jsc from its donor's gap alone, and the
    parameters say so (:attr:`FittedParameters.fullerene_absorbs`).  ``eqe_split``
    is the EQE split (:data:`EQE_SPLITS`).

    Examples
    --------
    >>> p = fit(read_devices())
    >>> 0 < p.eqe_max <= 1 and 0 < p.ff <= 1 and "pooled" in p.loss_ev
    True
    """
    eqe, scale, eqe_by_class = _fit_eqe(d, fullerene_absorbs, eqe_split)
    split, free = _variant(per_class)
    loss, slope, ref, (lo, hi) = _fit_losses(d, split, free)
    ff, by_class = _ff_core(*_ff_arrays(d), ff_split) if d["ff"].notna().any() else (0.65, {})
    return FittedParameters(loss_ev=loss, eqe_max=eqe, offset_scale_ev=scale, ff=ff, ff_by_class=by_class,
                            loss_slope=slope, ect_ref_ev=ref, ect_min_ev=lo, ect_max_ev=hi,
                            gap_loss_min_ev=_gap_loss_min(d), fullerene_absorbs=bool(fullerene_absorbs),
                            eqe_by_class=eqe_by_class)


def _gap_loss_min(d: pd.DataFrame) -> float:
    """The smallest E_g − qVoc [eV] of the devices with a Voc (E_g: the smaller optical gap of the pair); 0
    without any. The floor of the fitted model's total loss (:class:`FittedParameters`)."""
    rows = d[d["voc_v"].notna()]
    gap = np.fmin(rows["donor_gap_opt_ev"].to_numpy(float), rows["acceptor_gap_opt_ev"].to_numpy(float))
    loss = gap - rows["voc_v"].to_numpy(float)
    loss = loss[np.isfinite(loss)]
    return float(max(loss.min(), 0.0)) if loss.size else 0.0


def predict(model: DeviceModel, d: pd.DataFrame) -> pd.DataFrame:
    """Formula Voc [V], Jsc [mA cm⁻²] and PCE [%] of every device (viable or not) and whether the model calls
    it viable."""
    classes = d["acceptor_class"].to_numpy(object)
    loss, _ = model.loss_ev(classes)
    fig = model.figures(_levels(d), loss, ff=model.ff_of(classes), keep_model_values=True,
                        acceptor_absorbs=model.acceptor_absorbs(classes), eqe=model.eqe_of(classes))
    return pd.DataFrame({"voc_v": fig["voc_model_v"], "jsc_ma_cm2": fig["jsc_model_ma_cm2"],
                         "pce_pct": fig["pce_model_pct"], "viable": fig["viable"]}, index=d.index)


# --------------------------------------------------------------------------- validation
def _rho(a, b) -> float:
    a, b = np.asarray(a, float), np.asarray(b, float)
    ok = np.isfinite(a) & np.isfinite(b)
    if ok.sum() < 3 or np.ptp(a[ok]) == 0 or np.ptp(b[ok]) == 0:
        return float("nan")
    return float(spearmanr(a[ok], b[ok]).statistic)


#: resamples of the acceptor-group bootstrap of the held-out rank correlations (:func:`group_bootstrap_rho`)
BOOTSTRAP_RESAMPLES = 2000


def group_bootstrap_rho(pred, measured, groups, resamples: int = BOOTSTRAP_RESAMPLES, seed: int = 0) -> list[float]:
    """95 % percentile interval of Spearman's ρ, resampling whole groups with replacement.

    Devices that share an acceptor are not independent (93 of the 98 devices with a PCE share their acceptor
    structure with another device, 71 of them one of 14 fused-ring acceptor structures), so the interval resamples acceptor
    structures, each with all its devices
    (a cluster bootstrap; Davison and Hinkley, *Bootstrap Methods and their Application*, Cambridge
    University Press (1997), §3.8). Resamples whose ρ is undefined are skipped.

    Examples
    --------
    >>> x = np.arange(40.0)
    >>> lo, hi = group_bootstrap_rho(x, x + np.sin(x), np.arange(40) // 2, resamples=200)
    >>> 0.9 < lo <= hi <= 1.0
    True
    """
    pred, measured, groups = np.asarray(pred, float), np.asarray(measured, float), np.asarray(groups)
    ok = np.isfinite(pred) & np.isfinite(measured)
    pred, measured, groups = pred[ok], measured[ok], groups[ok]
    names, codes = np.unique(groups, return_inverse=True)
    members = [np.flatnonzero(codes == k) for k in range(len(names))]
    rng = np.random.default_rng(seed)
    rhos = []
    for _ in range(resamples):
        idx = np.concatenate([members[k] for k in rng.integers(0, len(members), len(members))])
        rho = _rho(pred[idx], measured[idx])
        if np.isfinite(rho):
            rhos.append(rho)
    if len(rhos) < resamples // 2:
        return [float("nan"), float("nan")]
    return [float(q) for q in np.percentile(rhos, [2.5, 97.5])]


def rank_intervals(d: pd.DataFrame, pred: pd.DataFrame) -> dict:
    """95 % acceptor-group bootstrap intervals of the held-out Spearman ρ of Voc and PCE
    (:func:`group_bootstrap_rho`), as ``spearman_voc_ci95`` and ``spearman_pce_ci95``."""
    has_voc, has_pce = d["voc_v"].notna(), d["pce_pct"].notna() & pred["pce_pct"].notna()
    group = GROUPINGS["acceptor"]
    return {"spearman_voc_ci95": group_bootstrap_rho(pred.loc[has_voc, "voc_v"], d.loc[has_voc, "voc_v"],
                                                     d.loc[has_voc, group]),
            "spearman_pce_ci95": group_bootstrap_rho(pred.loc[has_pce, "pce_pct"], d.loc[has_pce, "pce_pct"],
                                                     d.loc[has_pce, group])}


def _metrics(d: pd.DataFrame, pred: pd.DataFrame) -> dict:
    has_voc = d["voc_v"].notna()
    err = (pred["voc_v"] - d["voc_v"])[has_voc]
    has_pce = d["pce_pct"].notna() & pred["pce_pct"].notna()
    jsc_err = (pred["jsc_ma_cm2"] - d["jsc_ma_cm2"]).dropna()
    return {"n": int(has_voc.sum()), "voc_mae_v": float(err.abs().mean()), "voc_bias_v": float(err.mean()),
            "n_jsc": int(jsc_err.size), "jsc_mae_ma_cm2": float(jsc_err.abs().mean()),
            "jsc_bias_ma_cm2": float(jsc_err.mean()),
            "spearman_voc": _rho(pred.loc[has_voc, "voc_v"], d.loc[has_voc, "voc_v"]),
            "n_pce": int(has_pce.sum()), "n_pce_without_voc": int((has_pce & ~has_voc).sum()),
            "spearman_pce": _rho(pred.loc[has_pce, "pce_pct"], d.loc[has_pce, "pce_pct"]),
            "not_viable": int((~pred.loc[has_voc, "viable"].astype(bool)).sum())}


def _by_class(d, fitted, scharber, baseline, class_baseline) -> dict:
    out = {}
    has_voc = d["voc_v"].notna()
    for cls in sorted(d["acceptor_class"].unique()):
        m = has_voc & d["acceptor_class"].eq(cls)
        if not m.any():
            continue
        meas = d.loc[m, "voc_v"]
        has_pce = d["acceptor_class"].eq(cls) & d["pce_pct"].notna()
        jsc_err = (fitted["jsc_ma_cm2"] - d["jsc_ma_cm2"])[d["acceptor_class"].eq(cls)].dropna()
        out[cls] = {"n": int(m.sum()),
                    "fitted_jsc_bias_ma_cm2": float(jsc_err.mean()) if jsc_err.size else float("nan"),
                    "n_jsc": int(jsc_err.size),
                    "fitted_voc_mae_v": float((fitted.loc[m, "voc_v"] - meas).abs().mean()),
                    "fitted_voc_bias_v": float((fitted.loc[m, "voc_v"] - meas).mean()),
                    "fitted_spearman_voc": _rho(fitted.loc[m, "voc_v"], meas),
                    "fitted_spearman_pce": _rho(fitted.loc[has_pce, "pce_pct"], d.loc[has_pce, "pce_pct"]),
                    "n_pce": int(has_pce.sum()),
                    "scharber_voc_mae_v": float((scharber.loc[m, "voc_v"] - meas).abs().mean()),
                    "scharber_voc_bias_v": float((scharber.loc[m, "voc_v"] - meas).mean()),
                    "mean_voc_baseline_mae_v": float((baseline[m] - meas).abs().mean()),
                    "class_mean_voc_baseline_mae_v": float((class_baseline[m] - meas).abs().mean())}
    return out


@dataclass(frozen=True)
class CrossValidation:
    """Held-out predictions of both models and their metrics."""

    fitted: pd.DataFrame
    scharber: pd.DataFrame
    metrics: dict


def _paper_levels(d: pd.DataFrame) -> pd.DataFrame:
    p = d.copy()
    for col in _LEVELS:
        if f"paper_{col}" in d:
            p[col] = d[f"paper_{col}"]
    return p


def cross_validate(d: pd.DataFrame, per_class=None, by: str = "acceptor",
                   variants: tuple = LOSS_VARIANTS, ff_split=None, fullerene_absorbs=None,
                   eqe_split=None) -> CrossValidation:
    """Grouped cross-validation of the fitted model beside Scharber's rule.

    Parameters
    ----------
    d : pandas.DataFrame
        From :func:`read_devices`.
    per_class : str, bool or None
        The loss split; None (default) chooses it inside each training fold by
        an inner grouped CV of the training devices (:func:`choose_split`).
    by : {'acceptor', 'donor'}
        Leave one acceptor structure out, or one donor structure out.
    variants : tuple of str
        The loss variants the inner CV may choose from (default all of :data:`LOSS_VARIANTS`; the
        constant-loss ones alone show what the E_CT-dependent option adds, chosen the same nested way).
    ff_split : str or None
        The fill-factor split (:data:`FF_SPLITS`); None (default) chooses it inside each training fold
        (:func:`choose_ff_split`).
    fullerene_absorbs : bool or None
        Whether a fullerene acceptor counts as an absorber for Jsc; None (default) chooses it inside each
        training fold (:func:`choose_fullerene_absorber`).
    eqe_split : str or None
        The EQE split (:data:`EQE_SPLITS`); None (default) chooses it inside each training fold
        (:func:`choose_eqe_split`).

    Returns
    -------
    CrossValidation
        ``metrics`` has ``fitted``, ``scharber`` (same levels), ``scharber_paper_levels``
        (papers' own levels, where known), ``mean_voc_baseline`` (training mean Voc),
        ``class_mean_voc_baseline``, ``by_class``, the splits chosen per fold and the grouping.
    """
    key = GROUPINGS[by]
    fitted = pd.DataFrame(index=d.index, columns=["voc_v", "jsc_ma_cm2", "pce_pct", "viable"], dtype=object)
    baseline = pd.Series(np.nan, index=d.index)
    class_baseline = pd.Series(np.nan, index=d.index)
    chosen: dict[str, int] = {}
    for _group, idx in d.groupby(key).indices.items():
        train = d.drop(index=d.index[idx])
        model, split = fold_model(train, key, per_class, variants, ff_split, fullerene_absorbs, eqe_split)
        chosen[split] = chosen.get(split, 0) + 1
        fitted.iloc[idx] = predict(model, d.iloc[idx]).to_numpy(object)
        baseline.iloc[idx] = train["voc_v"].mean()
        cls_mean = train.groupby("acceptor_class")["voc_v"].mean()
        class_baseline.iloc[idx] = d["acceptor_class"].iloc[idx].map(cls_mean).fillna(train["voc_v"].mean()).to_numpy()
    fitted = fitted.astype({"voc_v": float, "jsc_ma_cm2": float, "pce_pct": float, "viable": bool})
    scharber_model = DeviceModel(model="scharber", absorber="donor")
    scharber = predict(scharber_model, d)
    paper = _paper_levels(d)
    known = paper[_LEVELS].notna().all(axis=1)
    has_voc = d["voc_v"].notna()
    err = lambda s: (s - d["voc_v"])[has_voc]  # noqa: E731
    metrics = {"grouping": f"leave one {by} structure out", "by": by, "n_groups": int(d[key].nunique()),
               "variants_per_fold": chosen,
               "fitted": {**_metrics(d, fitted), **rank_intervals(d, fitted)}, "scharber": _metrics(d, scharber),
               "scharber_paper_levels": _metrics(d[known], predict(scharber_model, paper[known])),
               "mean_voc_baseline": {"voc_mae_v": float(err(baseline).abs().mean()),
                                     "voc_bias_v": float(err(baseline).mean())},
               "class_mean_voc_baseline": {"voc_mae_v": float(err(class_baseline).abs().mean()),
                                           "voc_bias_v": float(err(class_baseline).mean())},
               "by_class": _by_class(d, fitted, scharber, baseline, class_baseline)}
    metrics["mean_voc_baseline_mae_v"] = metrics["mean_voc_baseline"]["voc_mae_v"]
    return CrossValidation(fitted, scharber, metrics)


# --------------------------------------------------------------------------- write
def _rows_used(d: pd.DataFrame) -> list[dict]:
    rows = []
    for _, r in d.iterrows():
        used = [part for part, col in (("voc", "voc_v"), ("jsc", "jsc_ma_cm2"), ("ff", "ff"), ("pce", "pce_pct"))
                if pd.notna(r[col])]
        rows.append({"device_id": r["device_id"], "used_for": used, "donor_levels": r["donor_level_source"],
                     "acceptor_levels": r["acceptor_level_source"], "converted": bool(r["levels_converted"])})
    return rows


def write_fitted(path=FITTED_PATH, devices=DEVICES_PATH, film=FILM_PATH, levels_path=LEVELS_TABLE_PATH) -> dict:
    """Resolve levels, cross-validate both ways, fit on every device, write the JSON and the level table.

    Returns
    -------
    dict
        What was written to ``path``.
    """
    from screen.io import write_csv, write_json
    from screen.provenance import sha256_file

    table = level_table(devices, film)
    d = resolve_levels(devices, film)
    cvs = {by: cross_validate(d, None, by) for by in GROUPINGS}
    split, split_scores = choose_split(d, "group")
    ff_split, ff_scores = choose_ff_split(d, "group")
    absorbs, absorb_scores = choose_fullerene_absorber(d, "group")
    eqe_split, eqe_scores = choose_eqe_split(d, "group", fullerene_absorbs=absorbs)
    params = fit(d, split, ff_split, absorbs, eqe_split)
    beats = all(cv.metrics["fitted"]["voc_mae_v"] < cv.metrics["scharber"]["voc_mae_v"] for cv in cvs.values())
    cols = ["device_id", "donor", "acceptor", "acceptor_class", *_LEVELS, "donor_level_source",
            "acceptor_level_source", "levels_converted", "voc_v", "jsc_ma_cm2", "ff", "pce_pct", "drop_reason",
            *[f"paper_{c}" for c in _LEVELS]]
    Path(levels_path).parent.mkdir(parents=True, exist_ok=True)
    write_csv(table[cols], levels_path, lineterminator="\n", float_format="%.4g")  # a CR in a text cell quoted
    data = {
        "model": "fitted energy-loss model (Voc = E_CT - loss; EQE with a smooth offset yield)",
        "parameters": params.as_dict() | {"source": None},
        "loss_variant": split,
        "loss_variant_cv_mae_v": split_scores,
        "ff_split": ff_split,
        "ff_split_cv_mae": ff_scores,
        "fullerene_absorber": FULLERENE_ABSORBER_CHOICES[absorbs],
        "fullerene_absorber_cv_jsc_mae_ma_cm2": absorb_scores,
        "eqe_split": eqe_split,
        "eqe_split_cv_jsc_mae_ma_cm2": eqe_scores,
        "fullerene_absorber_devices_with_jsc": {"all": int(d["jsc_ma_cm2"].notna().sum()),
                                                "fullerene": int((d["jsc_ma_cm2"].notna()
                                                                  & d["acceptor_class"].eq(FULLERENE)).sum())},
        "per_class_loss": not split.startswith("pooled"),
        "cv": cvs["acceptor"].metrics,
        "cv_leave_donor_out": cvs["donor"].metrics,
        "beats_scharber": bool(beats),
        "level_scale": (f"film/CV scale of {Path(film).name} (ferrocene {FC_SCALE_EV} eV); see screen.devicefit "
                        "for the rules"),
        "level_shifts_without_ferrocene": table.attrs["shifts"],
        "level_sources": {"film": int((d["donor_level_source"].str.startswith("film")).sum()
                                      + (d["acceptor_level_source"].str.startswith("film")).sum()),
                          "converted_or_completed": int((~d["donor_level_source"].str.match(r"film[^+]*$")).sum()
                                                        + (~d["acceptor_level_source"].str.match(r"film[^+]*$")).sum()),
                          "rows_all_levels_from_film_set": int((~d["levels_converted"]).sum())},
        "rows_used": _rows_used(d),
        "rows_dropped": d.attrs["dropped"],
        "levels_table": str(Path(levels_path).relative_to(_REPO)) if Path(levels_path).is_relative_to(_REPO)
        else str(levels_path),
        "devices": str(Path(devices).name),
        "devices_sha256": sha256_file(devices),
        "levels_film": str(Path(film).name),
        "levels_film_sha256": sha256_file(film),
        "devices_rows_used": int(len(d)),
        "devices_rows_with_voc": int(d["voc_v"].notna().sum()),
        "references": ["Veldman et al., Adv. Funct. Mater. 19 (2009) 1939, doi:10.1002/adfm.200801834",
                       "Scharber et al., Adv. Mater. 18 (2006) 789, doi:10.1002/adma.200501717",
                       "Cardona et al., Adv. Mater. 23 (2011) 2367, doi:10.1002/adma.201004554 (ferrocene scale)"],
    }
    write_json(data, path)
    return data


def _fmt(x, spec) -> str:
    return "n/a" if x is None or not np.isfinite(x) else format(x, spec)


def interval_text(ci) -> str:
    """`` [lo, hi]`` of a 95 % interval for the text tables ('' without one)."""
    return "" if not ci else f" [{_fmt(ci[0], '.2f')}, {_fmt(ci[1], '.2f')}]"


def table(metrics: dict) -> str:
    """The held-out table of one grouping as text; [lo, hi] is the 95 % acceptor-group bootstrap interval."""
    rows = [("model", "n", "Voc MAE [V]", "signed [V]", "Spearman Voc", "Spearman PCE", "Jsc MAE (signed) [mA/cm2]",
             "not viable")]
    for name, label in (("fitted", "fitted"), ("scharber", "scharber"),
                        ("scharber_paper_levels", "scharber (papers' levels)")):
        m = metrics[name]
        rows.append((label, str(m["n"]), _fmt(m["voc_mae_v"], ".3f"), _fmt(m["voc_bias_v"], "+.3f"),
                     _fmt(m["spearman_voc"], ".2f") + interval_text(m.get("spearman_voc_ci95")),
                     f"{_fmt(m['spearman_pce'], '.2f')}{interval_text(m.get('spearman_pce_ci95'))} (n={m['n_pce']})",
                     f"{_fmt(m.get('jsc_mae_ma_cm2'), '.2f')} ({_fmt(m.get('jsc_bias_ma_cm2'), '+.2f')})",
                     str(m["not_viable"])))
    for name, label in (("mean_voc_baseline", "training mean Voc"),
                        ("class_mean_voc_baseline", "training class-mean Voc")):
        m = metrics[name]
        rows.append((label, str(metrics["fitted"]["n"]), _fmt(m["voc_mae_v"], ".3f"), _fmt(m["voc_bias_v"], "+.3f"),
                     "-", "-", "-", "-"))
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    text = "\n".join("  ".join(c.ljust(w) for c, w in zip(r, widths)) for r in rows)
    cls_rows = [("acceptor class", "n", "fitted MAE", "signed", "rho Voc", "rho PCE", "Jsc signed", "scharber MAE",
                 "mean-Voc MAE", "class-mean MAE")]
    for cls, m in metrics["by_class"].items():
        cls_rows.append((cls, str(m["n"]), _fmt(m["fitted_voc_mae_v"], ".3f"), _fmt(m["fitted_voc_bias_v"], "+.3f"),
                         _fmt(m["fitted_spearman_voc"], ".2f"), f"{_fmt(m['fitted_spearman_pce'], '.2f')}",
                         _fmt(m.get("fitted_jsc_bias_ma_cm2"), "+.2f"), _fmt(m["scharber_voc_mae_v"], ".3f"), _fmt(m["mean_voc_baseline_mae_v"], ".3f"),
                         _fmt(m["class_mean_voc_baseline_mae_v"], ".3f")))
    widths = [max(len(r[i]) for r in cls_rows) for i in range(len(cls_rows[0]))]
    return text + "\n" + "\n".join("  ".join(c.ljust(w) for c, w in zip(r, widths)) for r in cls_rows)


_table = table


def main(argv=None) -> int:
    """Print both cross-validation tables; ``--write`` also writes the fitted model and the level table."""
    parser = argparse.ArgumentParser(prog="python -m screen.devicefit", description=__doc__.split("\n")[0])
    parser.add_argument("--devices", default=str(DEVICES_PATH))
    parser.add_argument("--film", default=str(FILM_PATH))
    parser.add_argument("--write", action="store_true", help=f"write {FITTED_PATH} and {LEVELS_TABLE_PATH}")
    args = parser.parse_args(argv)
    from screen.config import install_problem

    problem = install_problem()  # a non-editable install: no models/ folder, and a FileNotFoundError traceback
    if problem and (args.write or args.devices == str(DEVICES_PATH) or args.film == str(FILM_PATH)):
        print(f"python -m screen.devicefit: {problem}", file=sys.stderr)
        return 2
    if args.write:
        data = write_fitted(FITTED_PATH, args.devices, args.film)
        all_metrics = [data["cv"], data["cv_leave_donor_out"]]
        print(f"wrote {FITTED_PATH}: {json.dumps(data['parameters'])}")
    else:
        d = read_devices(args.devices, args.film)
        all_metrics = [cross_validate(d, None, by).metrics for by in GROUPINGS]
    for metrics in all_metrics:
        print(f"held-out ({metrics['grouping']}, {metrics['n_groups']} groups; loss, FF split and fullerene "
              "absorber per fold "
              f"{metrics['variants_per_fold']}):")
        print(table(metrics))
    return 0


if __name__ == "__main__":
    sys.exit(main())
