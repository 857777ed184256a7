"""Parameters of the fitted device model, as shipped in ``models/device/fitted.json``.

The fitted model (:class:`screen.device.DeviceModel` with ``model='fitted'``)
takes its energy loss per acceptor class, its maximum external quantum
efficiency, the offset scale of its charge-generation yield and its fill factor
from a JSON file written by :mod:`screen.devicefit` from the published device
set ``models/reference/devices.csv``.  This module only reads that file; it has
no physics of its own.

Examples
--------
>>> p = FittedParameters(loss_ev={"pooled": 0.4, "fullerene": 0.1, "non-fullerene": 0.5, "nfa-fused": 0.52},
...                      eqe_max=0.7, offset_scale_ev=0.05, ff=0.68)
>>> p.loss_for(["fullerene", "nfa-fused", "polymer", ""]).tolist()
[0.1, 0.52, 0.5, 0.4]
>>> p.pooled_mask(["fullerene", "polymer", ""]).tolist()
[False, False, True]
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path

import numpy as np

from screen.errors import ConfigError, InputError

__all__ = ["FittedParameters", "slope_loss", "FITTED_PATH", "VALIDATION_PATH", "load_fitted", "device_tests", "POOLED",
           "OFFSET_SCALE_MIN_EV",
           "SHIPPED_MODELS", "shipped_calibration", "computed_levels_apply", "calibration_kind",
           "voc_unranked_classes", "UNRANKED_SPEARMAN",
           "NON_FULLERENE", "FULLERENE", "family_of", "class_values", "ACCEPTOR_CLASSES", "acceptor_class_key",
           "ACCEPTOR_CLASSES_TEXT"]

#: the fitted default device model shipped with the repository
FITTED_PATH = Path(__file__).resolve().parent.parent / "models" / "device" / "fitted.json"
#: key of the loss used for acceptor classes the fit has no value for
POOLED = "pooled"
#: the smallest offset scale Δ0 the device fit tries [eV]: a fitted Δ0 there is the grid's edge, in effect a step
#: of the charge-generation yield at zero offset (:data:`screen.devicefit.OFFSET_SCALE_GRID_EV`)
OFFSET_SCALE_MIN_EV = 0.01
#: key of the loss of every non-fullerene class without a value of its own
NON_FULLERENE = "non-fullerene"
#: the fullerene acceptor class (:func:`screen.viability.acceptor_class_of`), also a family of its own
FULLERENE = "fullerene"
#: the acceptor classes: those :func:`screen.viability.acceptor_class_of` gives and the device set
#: (``models/reference/devices.csv``) is labelled with; '' is unknown (the pooled values)
ACCEPTOR_CLASSES = (FULLERENE, "nfa-fused", "nfa-other", "polymer")
#: the classes in words, for messages
ACCEPTOR_CLASSES_TEXT = (", ".join(ACCEPTOR_CLASSES) + " (case, blanks and '_' for '-' do not matter) or empty "
                         "(unknown: the class of the SMILES where there is one, else the pooled values)")


@lru_cache(maxsize=64)
def _class_key(text: str) -> str | None:
    key = "-".join(text.strip().lower().replace("_", "-").split())
    if key in ("", "nan", "none", "<na>"):
        return ""
    return key if key in ACCEPTOR_CLASSES else None


def acceptor_class_key(value) -> str:
    """The acceptor class a given value names: one of :data:`ACCEPTOR_CLASSES`, or '' (None, NaN, empty).

    Case, surrounding blanks and ``_`` for ``-`` do not matter: ``'Fullerene'`` and ``'nfa_other'`` took the
    non-fullerene loss and fill factor without a word (an adversarial review).

    Raises
    ------
    screen.errors.InputError
        Any other value, naming it and the allowed classes.

    Examples
    --------
    >>> acceptor_class_key("Fullerene"), acceptor_class_key(" nfa_other "), acceptor_class_key(None)
    ('fullerene', 'nfa-other', '')
    >>> acceptor_class_key("banana")
    Traceback (most recent call last):
    ...
    screen.errors.InputError: acceptor class 'banana' is not known; allowed: fullerene, nfa-fused, nfa-other, polymer (case, blanks and '_' for '-' do not matter) or empty (unknown: the class of the SMILES where there is one, else the pooled values)
    """
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    key = _class_key(str(value))
    if key is None:
        raise InputError(f"acceptor class {str(value)!r} is not known; allowed: {ACCEPTOR_CLASSES_TEXT}")
    return key


@dataclass(frozen=True)
class FittedParameters:
    """Fitted device-model parameters.

    Attributes
    ----------
    loss_ev : dict of str to float
        Energy loss ΔE_loss = E_CT − qVoc per acceptor class; key ``'pooled'``
        is the value for any other class. [eV]
    eqe_max : float
        External quantum efficiency at large offsets of any acceptor class without a value of its own
        (pooled). [dimensionless]
    offset_scale_ev : float
        Offset scale Δ0 of the charge-generation yield 1 − exp(−Δ/Δ0). [eV]
    ff : float
        Fill factor of any acceptor class without a value of its own (pooled). [dimensionless]
    loss_slope : float
        How fast the loss grows with E_CT: the loss of a pair is
        ``loss_ev[class] + loss_slope · (E_CT − ect_ref_ev)`` (never below 0);
        0 = the constant loss of Veldman et al.  A fitted value above 0 is the
        shrinkage that noisy reference levels call for (Voc rises by
        ``1 − loss_slope`` per eV of E_CT). [dimensionless, 0 ≤ loss_slope < 1]
    ect_ref_ev : float
        E_CT at which ``loss_ev`` applies (mean E_CT of the fitted devices). [eV]
    ect_min_ev, ect_max_ev : float
        Range of E_CT over the fitted devices.  The slope term uses E_CT clipped to
        it, so a fitted slope is never extrapolated (a pair at an E_CT below every
        fitted device keeps the loss of the lowest one, instead of a loss that falls
        towards 0); ±inf (no clipping) when not given. [eV]
    ff_by_class : dict of str to float
        Fill factor per acceptor class or family (keys as in ``loss_ev``, without
        ``'pooled'``); empty when the fit chose one pooled value. [dimensionless]
    eqe_by_class : dict of str to float
        EQE at large offsets per acceptor class or family (keys as in ``loss_ev``, without
        ``'pooled'``); empty when the fit chose one pooled value. One pooled EQE put the
        fullerene blends' Jsc about 3 mA cm⁻² above their measured values and the fused-ring
        non-fullerene blends' below theirs (a device physicist's audit). [dimensionless]
    gap_loss_min_ev : float
        The smallest total loss E_g − qVoc (E_g the smaller optical gap of the pair) among
        the fitted devices: Voc never exceeds ``E_g − gap_loss_min_ev``. Where the optical
        gap sets E_CT, the E_CT slope alone let a narrow-gap pair lose less than any
        measured blend (a device-physics audit: 0.29 eV at a 1.0 eV gap, within 0.05 V of
        the detailed-balance Voc, while every fitted device loses at least 0.45 eV);
        0 = no floor. [eV]
    source : str
        Path the parameters were read from ('' if built in Python).
    meta : dict
        Everything else in the file (cross-validation statistics, data hash …).

    References
    ----------
    .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789. :doi:`10.1002/adma.200501717`
    .. [2] S. Leach, M. Vervloet, A. Desprès, E. Bréheret, J. P. Hare, T. J. Dennis, H. W. Kroto,
       R. Taylor, D. R. M. Walton, "Electronic spectra and transitions of the fullerene C60",
       Chem. Phys. 160 (1992) 451–466 (from memory: the weak, symmetry-forbidden lowest singlet
       transitions of C60 near 1.8–2.0 eV and their vibronically induced absorption).
    """

    loss_ev: dict
    eqe_max: float
    offset_scale_ev: float
    ff: float
    loss_slope: float = 0.0
    ect_ref_ev: float = 0.0
    ff_by_class: dict = field(default_factory=dict)
    eqe_by_class: dict = field(default_factory=dict)
    ect_min_ev: float = -math.inf
    ect_max_ev: float = math.inf
    gap_loss_min_ev: float = 0.0
    fullerene_absorbs: bool = True
    source: str = ""
    meta: dict = field(default_factory=dict, compare=False)

    def __post_init__(self):
        if POOLED not in self.loss_ev:
            raise ConfigError(f"fitted device parameters {self.source or ''}: loss_ev needs a '{POOLED}' entry")
        for name in ("eqe_max", "ff"):
            val = float(getattr(self, name))
            if not 0.0 < val <= 1.0:
                raise ConfigError(f"fitted device parameters {self.source}: {name} = {val}; need 0 < {name} <= 1")
        if not (math.isfinite(self.offset_scale_ev) and self.offset_scale_ev >= 0):
            raise ConfigError(f"fitted device parameters {self.source}: offset_scale_ev must be finite and >= 0")
        if not (math.isfinite(float(self.loss_slope)) and 0.0 <= float(self.loss_slope) < 1.0
                and math.isfinite(float(self.ect_ref_ev))):
            raise ConfigError(f"fitted device parameters {self.source}: loss_slope must be in [0, 1) and "
                              "ect_ref_ev finite")
        if not (math.isfinite(float(self.gap_loss_min_ev)) and float(self.gap_loss_min_ev) >= 0.0):
            raise ConfigError(f"fitted device parameters {self.source}: gap_loss_min_ev must be finite and >= 0")
        if not isinstance(self.fullerene_absorbs, (bool, np.bool_)):
            raise ConfigError(f"fitted device parameters {self.source}: fullerene_absorbs = "
                              f"{self.fullerene_absorbs!r}; need true or false")
        object.__setattr__(self, "fullerene_absorbs", bool(self.fullerene_absorbs))
        if not float(self.ect_min_ev) <= float(self.ect_max_ev):
            raise ConfigError(f"fitted device parameters {self.source}: ect_min_ev must not exceed ect_max_ev")
        for key, val in self.loss_ev.items():
            if not (math.isfinite(float(val)) and float(val) >= 0):
                raise ConfigError(f"fitted device parameters {self.source}: loss_ev[{key!r}] must be >= 0")
        for name in ("ff_by_class", "eqe_by_class"):
            values = getattr(self, name)
            if not isinstance(values, dict):
                raise ConfigError(f"fitted device parameters {self.source}: {name} must be a mapping of acceptor "
                                  f"class to value, not {type(values).__name__}")
            unknown = sorted(str(k) for k in values if k not in (*ACCEPTOR_CLASSES, NON_FULLERENE))
            if unknown:  # a key no pair can have would only lift the ceiling (an adversarial tester: 19.7 %)
                raise ConfigError(f"fitted device parameters {self.source}: {name} has {', '.join(unknown)}; the keys "
                                  f"are acceptor classes ({', '.join(ACCEPTOR_CLASSES)}) or {NON_FULLERENE!r}")
            for key, val in values.items():
                if not (math.isfinite(float(val)) and 0.0 < float(val) <= 1.0):
                    raise ConfigError(f"fitted device parameters {self.source}: {name}[{key!r}] = {val}; "
                                      f"need 0 < {name.split('_')[0]} <= 1")

    def _classes(self, acceptor_class) -> np.ndarray:
        """Classes as a str array of :data:`ACCEPTOR_CLASSES` (:func:`acceptor_class_key`: case and ``_`` for
        ``-`` do not matter); None and NaN become '' (unknown).

        Raises
        ------
        screen.errors.InputError
            A class that is not one of :data:`ACCEPTOR_CLASSES` (it took the pooled values without a word).
        """
        if acceptor_class is None:
            return np.array("", dtype=object)
        classes = np.asarray(acceptor_class, dtype=object)
        return np.vectorize(acceptor_class_key, otypes=[object])(classes) if classes.size else classes

    def loss_for(self, acceptor_class) -> np.ndarray:
        """Energy loss per element of ``acceptor_class``: its own value, else its family's, else pooled. [eV]"""
        return class_values(self.loss_ev, self.loss_ev[POOLED], self._classes(acceptor_class))

    def ff_for(self, acceptor_class) -> np.ndarray:
        """Fill factor per element of ``acceptor_class``: its own value, else its family's, else pooled.

        Examples
        --------
        >>> p = FittedParameters(loss_ev={"pooled": 0.5}, eqe_max=0.7, offset_scale_ev=0.05, ff=0.66,
        ...                      ff_by_class={"fullerene": 0.58, "nfa-fused": 0.70})
        >>> p.ff_for(["fullerene", "nfa-fused", "polymer", ""]).tolist()
        [0.58, 0.7, 0.66, 0.66]
        """
        return class_values(self.ff_by_class, self.ff, self._classes(acceptor_class))

    @property
    def ff_max(self) -> float:
        """Largest fill factor of any class (an upper bound for every pair). [dimensionless]"""
        return max([float(self.ff), *map(float, self.ff_by_class.values())])

    def eqe_for(self, acceptor_class) -> np.ndarray:
        """EQE at large offsets per element of ``acceptor_class``: its own value, else its family's, else pooled.

        Examples
        --------
        >>> p = FittedParameters(loss_ev={"pooled": 0.5}, eqe_max=0.65, offset_scale_ev=0.05, ff=0.66,
        ...                      eqe_by_class={"fullerene": 0.55, "nfa-fused": 0.70})
        >>> p.eqe_for(["fullerene", "nfa-fused", "polymer", ""]).tolist()
        [0.55, 0.7, 0.65, 0.65]
        """
        return class_values(self.eqe_by_class, self.eqe_max, self._classes(acceptor_class))

    @property
    def eqe_bound(self) -> float:
        """Largest EQE of any class (an upper bound for every pair). [dimensionless]"""
        return max([float(self.eqe_max), *map(float, self.eqe_by_class.values())])

    def pooled_mask(self, acceptor_class) -> np.ndarray:
        """True where the pooled loss stands in for a class value (neither the class nor its family was fitted).

        A fit that chose one pooled loss for every class (its cross-validation kept no class value) marks no
        pair: the pooled value is then the model itself, not a fallback, and the report says so once.

        Examples
        --------
        >>> FittedParameters(loss_ev={"pooled": 0.5}, eqe_max=0.7, offset_scale_ev=0.05,
        ...                  ff=0.7).pooled_mask(["fullerene", ""]).tolist()
        [False, False]
        """
        classes = self._classes(acceptor_class).astype(str)
        if set(self.loss_ev) == {POOLED}:
            return np.zeros(classes.shape, dtype=bool)
        known = np.isin(classes, [k for k in self.loss_ev if k not in (POOLED, NON_FULLERENE)])
        if NON_FULLERENE in self.loss_ev:
            known |= (classes != "") & (classes != "fullerene") & (classes != "nan")
        return ~known

    def acceptor_absorbs(self, acceptor_class) -> np.ndarray:
        """Per element of ``acceptor_class``: whether the acceptor counts as an absorber for Jsc (False only
        for a fullerene when :attr:`fullerene_absorbs` is False; an unknown class absorbs).

        Examples
        --------
        >>> p = FittedParameters(loss_ev={"pooled": 0.5}, eqe_max=0.7, offset_scale_ev=0.05, ff=0.7,
        ...                      fullerene_absorbs=False)
        >>> p.acceptor_absorbs(["fullerene", "nfa-fused", ""]).tolist()
        [False, True, True]
        """
        classes = self._classes(acceptor_class)
        if self.fullerene_absorbs:
            return np.ones(np.shape(classes), dtype=bool)
        return np.asarray(classes.astype(str) != FULLERENE, dtype=bool)

    def loss_at(self, loss_ev, e_ct_ev):
        """Loss of pairs with class loss ``loss_ev`` and CT energy ``e_ct_ev`` (see :func:`slope_loss`). [eV]

        Examples
        --------
        >>> p = FittedParameters(loss_ev={"pooled": 0.5}, eqe_max=0.7, offset_scale_ev=0.05, ff=0.7,
        ...                      loss_slope=0.4, ect_ref_ev=1.4, ect_min_ev=1.2, ect_max_ev=1.8)
        >>> p.loss_at(np.array([0.5, 0.5, 0.5]), np.array([1.4, 1.6, 0.6])).round(3).tolist()
        [0.5, 0.58, 0.42]
        """
        return slope_loss(loss_ev, e_ct_ev, self.loss_slope, self.ect_ref_ev, self.ect_min_ev, self.ect_max_ev)

    def as_dict(self) -> dict:
        """Parameters for provenance records."""
        return {"loss_ev": dict(self.loss_ev), "eqe_max": self.eqe_max, "offset_scale_ev": self.offset_scale_ev,
                "eqe_by_class": dict(self.eqe_by_class),
                "ff": self.ff, "ff_by_class": dict(self.ff_by_class), "loss_slope": self.loss_slope,
                "ect_ref_ev": self.ect_ref_ev, "ect_min_ev": self.ect_min_ev, "ect_max_ev": self.ect_max_ev,
                "gap_loss_min_ev": self.gap_loss_min_ev, "fullerene_absorbs": self.fullerene_absorbs,
                "source": self.source}


def slope_loss(loss_ev, e_ct_ev, slope: float, ref_ev: float, lo_ev: float = -math.inf, hi_ev: float = math.inf):
    """Energy loss of pairs: ``max(loss_ev + slope · (clip(E_CT, lo, hi) − ref), 0)``. [eV]

    The one formula of the fitted loss (the model, its sampler and the fit's inner
    cross-validation use it); ``slope`` 0 returns ``loss_ev`` (Veldman's constant
    loss).  E_CT is clipped to the fitted devices' range [``lo_ev``, ``hi_ev``]:
    the slope is a fitted shrinkage, not physics to extrapolate.

    Examples
    --------
    >>> slope_loss(np.array([0.5, 0.5]), np.array([1.6, 0.5]), 0.6, 1.4, 1.0, 1.8).round(3).tolist()
    [0.62, 0.26]
    """
    if not slope:
        return loss_ev
    e_ct = np.clip(e_ct_ev, lo_ev, hi_ev)
    return np.maximum(loss_ev + slope * (e_ct - ref_ev), 0.0)


def class_values(values: dict, pooled: float, classes) -> np.ndarray:
    """Per element of ``classes``: its class's entry of ``values``, else its family's (``'fullerene'``,
    ``'non-fullerene'``), else ``pooled``.

    Examples
    --------
    >>> class_values({"fullerene": 0.58, "non-fullerene": 0.69, "nfa-fused": 0.70}, 0.68,
    ...              ["fullerene", "nfa-fused", "polymer", ""]).tolist()
    [0.58, 0.7, 0.69, 0.68]
    """
    classes = np.asarray(classes, dtype=object).astype(str)
    out = np.full(classes.shape, float(pooled))
    for fam_key, members in ((NON_FULLERENE, (classes != "") & (classes != "fullerene") & (classes != "nan")),
                             ("fullerene", classes == "fullerene")):
        if fam_key in values:
            out[members] = float(values[fam_key])
    for key, val in values.items():
        if key not in (POOLED, NON_FULLERENE):
            out[classes == key] = float(val)
    return out


def family_of(acceptor_class: str) -> str:
    """``'fullerene'``, ``'non-fullerene'`` or ``''`` (unknown class)."""
    cls = str(acceptor_class or "").strip()
    return "" if cls in ("", "nan") else ("fullerene" if cls == "fullerene" else NON_FULLERENE)


@lru_cache(maxsize=8)
def load_fitted(path: str | None = None) -> FittedParameters:
    """Read fitted parameters from JSON (default :data:`FITTED_PATH`).

    Raises
    ------
    ConfigError
        The file is missing or lacks a parameter (names the file and the fix).
    """
    target = Path(path) if path else FITTED_PATH
    if not target.is_file():
        raise ConfigError(f"{target}: fitted device model not found; run `python -m screen.devicefit --write` "
                          "or choose device.model=scharber")
    try:
        data = json.loads(target.read_text(encoding="utf-8"))
        params = data["parameters"]
        return FittedParameters(loss_ev={str(k): float(v) for k, v in params["loss_ev"].items()},
                                eqe_max=float(params["eqe_max"]), offset_scale_ev=float(params["offset_scale_ev"]),
                                ff=float(params["ff"]), loss_slope=float(params.get("loss_slope", 0.0)),
                                ect_ref_ev=float(params.get("ect_ref_ev", 0.0)),
                                ect_min_ev=float(params.get("ect_min_ev", -math.inf)),
                                ect_max_ev=float(params.get("ect_max_ev", math.inf)),
                                gap_loss_min_ev=float(params.get("gap_loss_min_ev", 0.0)),
                                fullerene_absorbs=params.get("fullerene_absorbs", True),
                                ff_by_class={str(k): float(v) for k, v in params.get("ff_by_class", {}).items()},
                                eqe_by_class={str(k): float(v) for k, v in params.get("eqe_by_class", {}).items()},
                                source=str(target),
                                meta={k: v for k, v in data.items() if k != "parameters"})
    except (KeyError, TypeError, ValueError, AttributeError) as exc:  # AttributeError: a list where a mapping goes
        raise ConfigError(f"{target}: not a fitted device model ({type(exc).__name__}: {exc}); rewrite it with "
                          "`python -m screen.devicefit --write`") from exc


#: held-out figures of the device models on levels computed with each shipped calibration protocol, written by
#: ``benchmarks/device_validation.py --write`` (keyed by protocol id)
VALIDATION_PATH = FITTED_PATH.parent / "computed_validation.json"
#: the metrics a test record carries
_TEST_KEYS = ("n", "n_pce", "voc_mae_v", "voc_bias_v", "spearman_voc", "spearman_pce", "spearman_voc_ci95",
              "spearman_pce_ci95", "not_viable")


def _pick(record, key: str) -> dict | None:
    """The :data:`_TEST_KEYS` of ``record[key]`` with the record's grouping; None without a Voc MAE."""
    metrics = record.get(key) if isinstance(record, dict) else None
    if not isinstance(metrics, dict) or "voc_mae_v" not in metrics:
        return None
    base = record.get("mean_voc_baseline") if isinstance(record.get("mean_voc_baseline"), dict) else {}
    return {**{k: metrics[k] for k in _TEST_KEYS if k in metrics}, "grouping": record.get("grouping"),
            "baseline_voc_mae_v": base.get("voc_mae_v")}


#: an acceptor class whose held-out Spearman(Voc) on the device set is below this has no ranking skill there
UNRANKED_SPEARMAN = 0.3


@lru_cache(maxsize=4)
def voc_unranked_classes(path: str | None = None) -> frozenset:
    """Acceptor classes in which the fitted Voc did not rank the published devices held out (leave one acceptor
    structure out; Spearman below :data:`UNRANKED_SPEARMAN`, at least 3 devices), from ``fitted.json``.

    Examples
    --------
    >>> sorted(voc_unranked_classes())
    ['nfa-other']
    """
    try:
        data = json.loads(Path(path or FITTED_PATH).read_text(encoding="utf-8"))
        by_class = data["cv"]["by_class"]
    except (OSError, ValueError, KeyError, TypeError):
        return frozenset()
    out = set()
    for name, rec in by_class.items():
        rho, n = rec.get("fitted_spearman_voc"), rec.get("n", 0)
        if isinstance(rho, (int, float)) and math.isfinite(rho) and n >= 3 and rho < UNRANKED_SPEARMAN:
            out.add(name)
    return frozenset(out)


#: the shipped calibrations, one ``<protocol id>/`` folder each (beside ``device/``)
SHIPPED_MODELS = FITTED_PATH.parent.parent


def shipped_calibration(protocol: str | None) -> dict | None:
    """:func:`screen.provenance.calibration_record` of the calibration shipped for ``protocol``
    (``models/<protocol>/``); ``None`` when none is shipped (or its model files are incomplete).

    Examples
    --------
    >>> shipped_calibration("no-such-protocol") is None, shipped_calibration("../device") is None
    (True, True)
    """
    name = str(protocol or "")
    if not name or Path(name).name != name or name in (".", ".."):
        return None
    folder = SHIPPED_MODELS / name
    if not (folder / "ip.json").is_file():
        return None
    from screen.provenance import calibration_record

    record = calibration_record(folder)
    return record if record.get("models_sha256") else None


def _same(a, b, keys=("models_sha256", "statistics_sha256")) -> bool | None:
    """Whether two calibration records name the same calibration: False when a hash both record differs,
    True when at least one is recorded by both and none differs, None when none can be compared."""
    if not (isinstance(a, dict) and isinstance(b, dict)):
        return None
    pairs = [(a.get(k), b.get(k)) for k in keys if a.get(k) and b.get(k)]
    if not pairs:
        return None
    return all(x == y for x, y in pairs)


def calibration_kind(calibration, shipped) -> str:
    """``'shipped'`` when the levels' calibration record (``calibration_models`` of a levels sidecar) is the
    calibration shipped for its protocol (``shipped``: :func:`shipped_calibration`, same model files), else
    ``'custom'``; ``''`` when the levels record no model hash.

    Examples
    --------
    >>> calibration_kind({"models_sha256": "ab"}, {"models_sha256": "ab"})
    'shipped'
    >>> calibration_kind({"models_sha256": "cd"}, {"models_sha256": "ab"})
    'custom'
    >>> calibration_kind({"models_sha256": "cd"}, None)  # no calibration shipped for the protocol
    'custom'
    >>> calibration_kind(None, {"models_sha256": "ab"})
    ''
    """
    if not (isinstance(calibration, dict) and calibration.get("models_sha256")):
        return ""
    return "shipped" if _same(calibration, shipped, ("models_sha256",)) else "custom"


def computed_levels_apply(tests, calibration=None) -> bool | None:
    """Whether the held-out figures on computed levels (``tests["computed_levels"]`` of :func:`device_tests`)
    were measured with the calibration that scored the levels ranked.

    The figures were measured with the calibration shipped for the protocol (``computed_levels["measured_with"]``);
    levels scored with another calibration of the same protocol id (a group's own reference data, ``dascreen
    calibrate --install``) got them as their own (a custom-calibration audit). ``calibration`` is the levels'
    ``calibration_models`` record (default ``tests["levels_calibration"]``).

    Returns
    -------
    bool or None
        True: same model files (and statistics); False: another calibration; None: nothing to compare (no
        figures on computed levels, or a record without hashes).

    Examples
    --------
    >>> tests = {"computed_levels": {"voc_mae_v": 0.06, "measured_with": {"models_sha256": "ab",
    ...                                                                  "statistics_sha256": "s1"}}}
    >>> computed_levels_apply(tests, {"models_sha256": "ab", "statistics_sha256": "s1"})
    True
    >>> computed_levels_apply(tests, {"models_sha256": "cd", "statistics_sha256": "s2"})
    False
    >>> computed_levels_apply(tests) is None, computed_levels_apply({"computed_levels": None}, {"models_sha256": "ab"})
    (True, None)
    """
    tests = tests if isinstance(tests, dict) else {}
    comp = tests.get("computed_levels")
    if not isinstance(comp, dict):
        return None
    cal = calibration if isinstance(calibration, dict) else tests.get("levels_calibration")
    return _same(cal, comp.get("measured_with"))


def device_tests(model: str, protocol: str | None = None, fitted_path: str | None = None,
                 validation_path: str | Path | None = None, calibration: dict | None = None) -> dict:
    """How well the device ``model`` did on the published device set, held out, for the report.

    Two records, each ``None`` when there is nothing to show: ``film_levels``, the
    cross-validation on the device set's film-scale (measured) levels, leaving one
    acceptor structure out (from ``models/device/fitted.json``); ``computed_levels``,
    the same devices on levels computed with ``protocol`` and its calibration refitted
    without each material (from :data:`VALIDATION_PATH`; only for a protocol that file
    has, and only while it was written on the device set the fitted model was).
    ``computed_levels["measured_with"]`` names the calibration those figures were measured with: the one shipped
    for the protocol (``statistics_sha256`` as the validation recorded it; ``models_sha256`` and ``folder`` of the
    shipped folder while its statistics are those). ``shipped_calibration`` is
    :func:`shipped_calibration` of ``protocol``.

    Parameters
    ----------
    model : {'fitted', 'scharber'}
        The device model of the ranking.
    protocol : str, optional
        Protocol id of the levels ranked; ``None`` for levels given by the user.
    calibration : dict, optional
        The levels' ``calibration_models`` record: kept as ``levels_calibration``, with
        ``computed_levels_apply`` (:func:`computed_levels_apply`: False when the figures on computed levels were
        measured with another calibration than the one that scored the levels).

    Examples
    --------
    >>> t = device_tests("fitted", "no-such-protocol")
    >>> sorted(t), t["computed_levels"] is None, 0.0 < t["film_levels"]["voc_mae_v"] < 0.2
    (['computed_levels', 'film_levels', 'shipped_calibration'], True, True)
    """
    key = "fitted" if model == "fitted" else "scharber"
    try:
        meta = load_fitted(fitted_path).meta
    except ConfigError:
        return {"film_levels": None, "computed_levels": None, "shipped_calibration": shipped_calibration(protocol)}
    film = _pick(meta.get("cv"), key)
    by_class = (meta.get("cv") or {}).get("by_class") if isinstance(meta.get("cv"), dict) else None
    if film is not None and key == "fitted" and isinstance(by_class, dict):  # a device-physics audit: the pooled
        film["by_class"] = {c: {"n": v.get("n"), "voc_mae_v": v.get("fitted_voc_mae_v"),  # MAE hid a -0.12 V class
                                "baseline_voc_mae_v": v.get("mean_voc_baseline_mae_v"),
                                "spearman_pce": v.get("fitted_spearman_pce"), "n_pce": v.get("n_pce")}
                            for c, v in sorted(by_class.items()) if isinstance(v, dict)}
    computed = None
    shipped = shipped_calibration(protocol)
    path = Path(validation_path) if validation_path else VALIDATION_PATH
    if protocol and path.is_file():
        try:
            rec = json.loads(path.read_text(encoding="utf-8")).get(protocol)
        except (OSError, ValueError):
            rec = None
        if isinstance(rec, dict) and rec.get("devices_sha256") == meta.get("devices_sha256"):
            computed = _pick(rec.get("acceptor"), key)
            if computed is not None:
                computed["protocol_id"] = protocol
                stats = rec.get("calibration_statistics_sha256")
                current = shipped is not None and shipped.get("statistics_sha256") == stats
                computed["measured_with"] = {"calibration": "shipped", "statistics_sha256": stats,
                                             "models_sha256": shipped["models_sha256"] if current else None,
                                             "folder": shipped["folder"] if current else None}
    out = {"film_levels": film, "computed_levels": computed, "shipped_calibration": shipped}
    if calibration is not None:
        out["levels_calibration"] = calibration
        out["computed_levels_apply"] = computed_levels_apply(out)
    return out
