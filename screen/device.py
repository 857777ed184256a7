"""Device models for donor/acceptor bulk-heterojunction solar cells.

Frontier levels of a donor and an acceptor (vacuum scale, eV) are turned into
open-circuit voltage, short-circuit current density and power-conversion
efficiency under the ASTM G173-03 AM1.5G reference spectrum.  Every pair is
first classified (:mod:`screen.viability`): only a type-II pair whose offsets
allow charge separation gets numbers; a pair that is not viable gets NaN
(empty, never 0) and its reasons as flags.  Two models, chosen with
``device.model``:

``fitted`` (default) — energy loss and quantum efficiency fitted on published
devices (:mod:`screen.devicefit`, parameters in ``models/device/fitted.json``):

.. math::

    E_{CT} = \\min(E_{LUMO}^{A} - E_{HOMO}^{D},\\; E_g^{min}), \\qquad
    V_{oc} = (E_{CT} - \\Delta E_{loss})/q, \\quad
    \\Delta E_{loss} = \\Delta E_{loss}^{class} + s\\,(\\mathrm{clip}(E_{CT}) - \\bar E_{CT})

    J_{sc} = \\mathrm{EQE}_{max}\\, q \\Big[\\eta_{lo} \\int_{E_g^{lo}}^{E_g^{hi}} \\Phi\\,dE
             + \\tfrac{\\eta_D + \\eta_A}{2} \\int_{E_g^{hi}}^{\\infty} \\Phi\\,dE\\Big],
    \\quad \\eta_D = 1 - e^{-\\Delta_{LUMO}/\\Delta_0},\\; \\eta_A = 1 - e^{-\\Delta_{HOMO}/\\Delta_0}

(the loss per acceptor class where the fit keeps one, with the fitted slope s
of the loss on E_CT; E_CT clipped to the range of the fitted devices, so the
slope is never extrapolated; photons between the two gaps are absorbed by the
lower-gap material only, those above both are shared; the charge-generation
yield of donor excitons falls as ΔLUMO → 0, that of acceptor excitons as
ΔHOMO → 0 — with the shipped Δ0 = 0.01 eV in effect a step at zero offset).
Where the fitted parameters say a fullerene acceptor does not count as an
absorber (:attr:`screen.devicepars.FittedParameters.fullerene_absorbs`,
chosen by a grouped cross-validation of the measured Jsc), a fullerene blend's
current is :math:`\\mathrm{EQE}_{max}\\, q\\, \\eta_D \\int_{E_g^{D}}^{\\infty}
\\Phi\\,dE` (the donor's gap, as in [1]_): the lowest singlet transitions of
C60 are symmetry-forbidden and C70's are weak [6]_, so a fullerene film
absorbs little near its optical gap.  E_CT and the Voc caps keep the smaller
optical gap of the pair.

``scharber`` — the published donor-only rule [1]_ with its own parameters:
:math:`V_{oc} = (E_{LUMO}^{A} - E_{HOMO}^{D})/e - 0.3` V, EQE = FF = 0.65,
ΔLUMO ≥ 0.3 eV (with ``absorber='both'`` also ΔHOMO ≥ 0.3 eV and the smaller
gap sets the current).

Both: a pair whose model Jsc (at the model's EQE and charge-generation yields) is below
:data:`screen.viability.JSC_MIN_MA_CM2` — written as 0 — is not viable, flagged by the factor that makes it vanish
(:func:`screen.viability.dark_current`: the absorber gap, ``absorber_gap_invalid``, or an offset whose yield
1 − exp(−Δ/Δ0) leaves no current, ``lumo_offset_low``/``homo_offset_low`` — with the shipped Δ0 = 0.01 eV only an
offset below 0.02–0.4 µeV at gaps of 1–3 eV would, and such an offset is no type-II offset at all: below
:data:`screen.viability.OFFSET_TOL_EV`, it is written 0.0), in :meth:`DeviceModel.evaluate` and in the sampler's kernel alike.
:math:`\\mathrm{PCE} = V_{oc} J_{sc}\\, \\mathrm{FF} / P_{in}`; Voc is
capped at the detailed-balance Voc of the smallest optical gap of the pair
(below that gap) and PCE at the detailed-balance limit for the absorber gap
(:func:`screen.spectrum.sq_limit`), each flagged.

Everything is vectorised over numpy arrays (broadcasting rules apply).
:mod:`screen.spectrum` holds the spectrum (names re-exported here),
:mod:`screen.sampling` the Monte-Carlo spread.  Defaults of :class:`DeviceModel`
are the schema defaults of the ``device`` section; ``None`` means "the chosen
model's own value".  Flag codes come from :mod:`screen.flags`.

References
----------
.. [1] M. C. Scharber, D. Mühlbacher, M. Koppe, P. Denk, C. Waldauf,
   A. J. Heeger, C. J. Brabec, "Design rules for donors in bulk-heterojunction
   solar cells — towards 10 % energy-conversion efficiency",
   Adv. Mater. 18 (2006) 789–794. :doi:`10.1002/adma.200501717`
.. [2] D. Veldman, S. C. J. Meskers, R. A. J. Janssen, "The energy of
   charge-transfer states in electron donor–acceptor blends: insight into the
   energy losses in organic solar cells", Adv. Funct. Mater. 19 (2009) 1939.
   :doi:`10.1002/adfm.200801834`
.. [3] K. Vandewal, K. Tvingstedt, A. Gadisa, O. Inganäs, J. V. Manca, "On the
   origin of the open-circuit voltage of polymer–fullerene solar cells",
   Nat. Mater. 8 (2009) 904. :doi:`10.1038/nmat2548`
.. [4] ASTM G173-03, "Standard Tables for Reference Solar Spectral
   Irradiances", ASTM International (table as shipped with pvlib);
   W. F. Holmgren et al., J. Open Source Softw. 3 (2018) 884.
   :doi:`10.21105/joss.00884`
.. [5] S. Rühle, Sol. Energy 130 (2016) 139. :doi:`10.1016/j.solener.2016.02.015`
.. [6] S. Leach, M. Vervloet, A. Desprès, E. Bréheret, J. P. Hare, T. J. Dennis,
   H. W. Kroto, R. Taylor, D. R. M. Walton, "Electronic spectra and transitions
   of the fullerene C60", Chem. Phys. 160 (1992) 451 (from memory); the parity
   of the C60 frontier orbitals (h_u HOMO, t_1u LUMO: HOMO→LUMO dipole-forbidden
   in I_h): M. S. Dresselhaus, G. Dresselhaus, R. Saito, Mater. Sci. Eng. B 19
   (1993) 122 (from memory).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from screen.devicekernel import gap_floor, pair_terms, pce_samples, voc_v
from screen.devicepars import FittedParameters, load_fitted
from screen.errors import ConfigError
from screen.flags import join_flags
from screen.schema import check_section, section_defaults
from screen.spectrum import (
    A_M2_TO_MA_CM2,
    SPECTRUM_COLUMN,
    SPECTRUM_STANDARD,
    ReferenceSpectrum,
    as_output,
    gap_to_wavelength_nm,
    incident_power_w_m2,
    jsc_ma_cm2,
    photon_flux_above_gap_m2_s,
    reference_spectrum,
    sq_pce_pct,
    sq_voc_v,
)
from screen.viability import GAP_MAX_EV, OFFSET_TOL_EV, CurrentTerms, classify

__all__ = [
    "DeviceModel",
    "DEVICE_FIELDS",
    "voc_v",
    "efficiency_map",
    "join_flags",
    "OFFSET_TOL_EV",
    "PAIR_LEVELS",
    "MODELS",
    "ABSORBERS",
    "SCHARBER_PARAMETERS",
    "homo_threshold_problem",
    # re-exported from screen.spectrum
    "SPECTRUM_STANDARD",
    "SPECTRUM_COLUMN",
    "ReferenceSpectrum",
    "reference_spectrum",
    "incident_power_w_m2",
    "gap_to_wavelength_nm",
    "photon_flux_above_gap_m2_s",
    "jsc_ma_cm2",
]

#: Schema defaults of the ``device`` config section (the one source of the defaults below).
_DEFAULTS = section_defaults("device")
#: config fields of :class:`DeviceModel` (the schema's ``device`` section)
DEVICE_FIELDS = tuple(_DEFAULTS)
#: Input order of the six pair levels used by :meth:`DeviceModel.pair_arrays`.
PAIR_LEVELS = ("donor_homo_ev", "donor_lumo_ev", "donor_gap_ev", "acceptor_homo_ev", "acceptor_lumo_ev",
               "acceptor_gap_ev")
#: the device models (``device.model``)
MODELS = ("fitted", "scharber")
#: who absorbs (``device.absorber``)
ABSORBERS = ("donor", "both")
#: parameters of the published model, Scharber et al. (2006): EQE, FF [-], loss [V], offsets [eV]
SCHARBER_PARAMETERS = {"eqe": 0.65, "ff": 0.65, "loss_v": 0.3, "min_delta_lumo_ev": 0.3, "min_delta_homo_ev": 0.3}
#: smallest offsets of the fitted model: type II is enough, the yield 1 − exp(−Δ/Δ0) does the rest (with the
#: shipped fit, Δ0 = 0.01 eV, in effect a step at zero offset) [eV]
FITTED_MIN_OFFSET_EV = 0.0
# --------------------------------------------------------------------------- #
# Device model
# --------------------------------------------------------------------------- #
def _config_error(field: str, value, allowed: str) -> ConfigError:
    return ConfigError(f"DeviceModel.{field} = {value!r} is not allowed; allowed: {allowed}")


def homo_threshold_problem(absorber, min_delta_homo_ev) -> str:
    """Why ``device.min_delta_homo_ev`` cannot be set with this ``device.absorber`` ('' if it can).

    With ``absorber='donor'`` (the published donor-only model of Scharber et al. 2006) only the donor absorbs
    and only the LUMO offset is held to a threshold; ΔHOMO must still be > 0 (type II). A HOMO threshold there
    was dropped without a word (the console said ``set device.min_delta_homo_ev=none`` and a pair with
    ΔHOMO = 1e-9 eV passed), so the combination is refused; applying it would make a model that is not the
    published one.

    Examples
    --------
    >>> homo_threshold_problem("both", 0.3), homo_threshold_problem("donor", None)
    ('', '')
    >>> homo_threshold_problem("donor", 0.3)[:72]
    'device.min_delta_homo_ev = 0.3 does not apply with device.absorber=donor'
    """
    if absorber != "donor" or min_delta_homo_ev is None:
        return ""
    return (f"device.min_delta_homo_ev = {min_delta_homo_ev:g} does not apply with device.absorber=donor: the "
            "donor-only view (the published model of Scharber et al. 2006, with either Voc rule) lets only the donor "
            "absorb and holds only the LUMO offset to a threshold (ΔHOMO must still be > 0); leave device.min_delta_homo_ev unset (null), or set "
            "device.absorber=both to hold ΔHOMO to it")


@dataclass(frozen=True)
class DeviceModel:
    """Device model: the fitted energy-loss model or the published Scharber rule.

    Parameters
    ----------
    model : {'fitted', 'scharber'}, default 'fitted'
        'fitted': Voc = (E_CT − ΔE_loss)/q with the loss per acceptor class, an
        EQE times a yield 1 − exp(−Δ/Δ0) of each offset (the shipped Δ0, 0.01 eV,
        makes it in effect a step at zero offset), and the fill factor
        fitted on published devices (``models/device/fitted.json``).
        'scharber': the published donor-only design rule (parameters of [1]_).
    absorber : {'both', 'donor'}, default 'both'
        'both': both materials absorb; photons above the smaller optical gap
        count and both offsets are checked — except, in the fitted model whose
        parameters say so (``fullerene_absorbs`` False), a fullerene acceptor,
        whose weak absorption near its gap is not counted: the donor's gap
        sets Jsc (:meth:`acceptor_absorbs`).  'donor': only the donor absorbs
        (the published model); ΔHOMO must still be > 0 for type II.
    eqe, ff : float or None
        Override the model's maximum EQE and fill factor. [dimensionless]
    loss_v : float or None
        Override the model's voltage loss (every acceptor class). [V]
    min_delta_lumo_ev, min_delta_homo_ev : float or None
        Override the smallest offsets that allow charge separation (Scharber:
        0.3 eV; fitted: 0, type II, the yield doing the rest). [eV]
        ``min_delta_homo_ev`` must stay None with ``absorber='donor'``
        (:func:`homo_threshold_problem`).
    pin_w_m2 : float or None
        Incident power; None uses the spectrum's integral. [W m⁻²] Not a config key.
    parameters : FittedParameters or None
        Fitted parameters; None reads ``models/device/fitted.json``
        (only for ``model='fitted'``). Not a config key.

    Raises
    ------
    screen.errors.ConfigError
        A value out of range or an unknown option (names the field and the allowed values).

    References
    ----------
    .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789. :doi:`10.1002/adma.200501717`
    .. [2] D. Veldman, S. C. J. Meskers, R. A. J. Janssen, Adv. Funct. Mater. 19 (2009) 1939.
       :doi:`10.1002/adfm.200801834`

    Examples
    --------
    >>> from screen.device import DeviceModel
    >>> out = DeviceModel(model="scharber", absorber="donor").evaluate(-5.4, -3.9, 1.5, -6.0, -4.3, 2.0)
    >>> float(round(out["voc_v"], 3)), float(round(out["pce_pct"], 2)), str(out["flags"])
    (0.8, 9.79, 'donor_only_model')
    >>> bad = DeviceModel(model="scharber").evaluate(-5.4, -4.5, 0.9, -6.0, -4.3, 2.0)
    >>> bool(bad["viable"]), bool(np.isnan(bad["pce_pct"])), str(bad["flags"])
    (False, True, 'lumo_inverted')
    """

    model: str = _DEFAULTS["model"]
    absorber: str = _DEFAULTS["absorber"]
    eqe: float | None = _DEFAULTS["eqe"]
    ff: float | None = _DEFAULTS["ff"]
    loss_v: float | None = _DEFAULTS["loss_v"]
    min_delta_lumo_ev: float | None = _DEFAULTS["min_delta_lumo_ev"]
    min_delta_homo_ev: float | None = _DEFAULTS["min_delta_homo_ev"]
    #: not a config key: the spectrum's own integral unless set from Python
    pin_w_m2: float | None = None
    #: not a config key: fitted parameters (None: the shipped file)
    parameters: FittedParameters | None = dataclasses.field(default=None, repr=False, compare=False)

    def __post_init__(self):
        homo = self.min_delta_homo_ev  # the rule's own words before the schema's "is not of type 'null'"
        if isinstance(homo, (int, float, np.integer, np.floating)) and not isinstance(homo, bool):
            problem = homo_threshold_problem(self.absorber, float(homo))
            if problem:
                raise ConfigError(problem)
        # the schema's device section, as a config file and --set are held to it (types, allowed values, finite
        # numbers, bounds with their units): a Python caller's loss_v=300, millivolts, was accepted here and refused
        # only by a ranking
        checked = check_section("device", {name: getattr(self, name) for name in DEVICE_FIELDS}, "DeviceModel")
        for name, value in checked.items():
            object.__setattr__(self, name, float(value) if isinstance(value, int) else value)
        if self.pin_w_m2 is not None:
            self._set_finite("pin_w_m2")
        if self.pin_w_m2 is not None and self.pin_w_m2 <= 0:
            raise _config_error("pin_w_m2", self.pin_w_m2, "None or a positive number [W m-2]")
        if self.model == "fitted" and self.parameters is None:
            object.__setattr__(self, "parameters", load_fitted())

    def _set_finite(self, name: str) -> None:
        """Store field ``name`` as a float; refuse bools, text and non-finite numbers."""
        val = getattr(self, name)
        if isinstance(val, bool) or not isinstance(val, (int, float, np.floating, np.integer)):
            raise _config_error(name, val, "a finite real number")
        if not math.isfinite(float(val)):
            raise _config_error(name, val, "a finite real number")
        object.__setattr__(self, name, float(val))

    # ------------------------------------------------------------ effective parameters
    def _own(self, name: str) -> float:
        """The chosen model's own value of a parameter (before overrides)."""
        if self.model == "scharber":
            return SCHARBER_PARAMETERS[name]
        p = self.parameters
        return {"eqe": p.eqe_max, "ff": p.ff, "loss_v": float(p.loss_ev["pooled"]),
                "min_delta_lumo_ev": FITTED_MIN_OFFSET_EV, "min_delta_homo_ev": FITTED_MIN_OFFSET_EV}[name]

    def value(self, name: str) -> float:
        """Effective value of ``eqe``, ``ff``, ``loss_v``, ``min_delta_lumo_ev`` or ``min_delta_homo_ev``.

        Examples
        --------
        >>> DeviceModel(model="scharber").value("loss_v"), DeviceModel(model="scharber", eqe=0.7).value("eqe")
        (0.3, 0.7)
        """
        val = getattr(self, name)
        return self._own(name) if val is None else float(val)

    @property
    def offset_scale_ev(self) -> float:
        """Offset scale Δ0 of the charge-generation yield (0 = step, the Scharber model). [eV]"""
        return 0.0 if self.model == "scharber" else float(self.parameters.offset_scale_ev)

    @property
    def check_homo_offset(self) -> bool:
        """Whether ΔHOMO is held to ``min_delta_homo_ev`` (both absorb); type II is always required."""
        return self.absorber == "both"

    @property
    def label(self) -> str:
        """Plain-words name of the model for reports and provenance.

        Examples
        --------
        >>> DeviceModel(model="scharber", absorber="donor").label
        'Scharber et al. 2006 rule (published donor-only model)'
        """
        if self.model == "scharber":
            who = "published donor-only model" if self.absorber == "donor" else "with an absorbing acceptor"
            return f"Scharber et al. 2006 rule ({who})"
        who = "both materials absorb" if self.absorber == "both" else "donor absorbs"
        return f"fitted energy-loss model ({who})"

    @property
    def incident_power_w_m2(self) -> float:
        """Incident power used for the efficiency. [W m⁻²]"""
        return incident_power_w_m2() if self.pin_w_m2 is None else float(self.pin_w_m2)

    @property
    def sq_scale(self) -> float:
        """Factor from the detailed-balance efficiency on the spectrum's own power to one on ``pin_w_m2`` (1 by
        default): the cap is the same maximum power, divided by the incident power the efficiency uses."""
        return 1.0 if self.pin_w_m2 is None else incident_power_w_m2() / float(self.pin_w_m2)

    def _sq_pct(self, sq_pct=None):
        """The detailed-balance efficiency [%] of a gap on this model's incident power."""
        base = sq_pce_pct if sq_pct is None else sq_pct
        scale = self.sq_scale
        return base if scale == 1.0 else (lambda g: base(g) * scale)

    def as_dict(self) -> dict:
        """Effective parameters plus model label, spectrum and incident power, for provenance.

        Examples
        --------
        >>> d = DeviceModel(model="scharber").as_dict()
        >>> d["model"], d["absorber"], d["loss_v"], d["min_delta_lumo_ev"]
        ('scharber', 'both', 0.3, 0.3)
        >>> DeviceModel(model="scharber", absorber="donor").as_dict()["min_delta_homo_ev"] is None  # not applied
        True
        """
        d = {"model": self.model, "absorber": self.absorber, "label": self.label}
        for name in ("eqe", "ff", "loss_v", "min_delta_lumo_ev", "min_delta_homo_ev"):
            d[name] = self.value(name)
            d[f"{name}_set"] = getattr(self, name) is not None
        if not self.check_homo_offset:  # the donor-only model checks the LUMO offset alone: no threshold applied
            d["min_delta_homo_ev"] = None
        d["pin_w_m2"] = self.pin_w_m2
        d["offset_scale_ev"] = self.offset_scale_ev
        if self.model == "fitted":
            d["fitted"] = self.parameters.as_dict()
            d["fitted"]["cv"] = self.parameters.meta.get("cv")
            d["fitted"]["devices_sha256"] = self.parameters.meta.get("devices_sha256")
        d["spectrum"] = reference_spectrum().name
        d["incident_power_w_m2"] = self.incident_power_w_m2
        return d

    def pce_factor_pct(self, ff=None):
        """PCE per unit Voc·Jsc: ``PCE [%] = Voc [V] · Jsc [mA cm⁻²] · factor``.

        Parameters
        ----------
        ff : float, numpy.ndarray or None
            Fill factor per pair (from :meth:`ff_of`); None uses ``value('ff')``. [dimensionless]

        Returns
        -------
        float or numpy.ndarray
            ``FF · 10 / P_in · 100`` (10 A m⁻² per mA cm⁻²). [% V⁻¹ mA⁻¹ cm²]

        Examples
        --------
        >>> round(DeviceModel(model="scharber", pin_w_m2=1000.0).pce_factor_pct(), 6)
        0.65
        """
        ff = self.value("ff") if ff is None else ff
        return ff * (1.0 / A_M2_TO_MA_CM2) / self.incident_power_w_m2 * 100.0

    def ff_of(self, acceptor_class=None) -> np.ndarray:
        """Fill factor per pair: the fitted value of the acceptor's class (else its family's, else pooled);
        the override ``ff`` or Scharber's 0.65 for every pair when set or chosen. [dimensionless]

        Examples
        --------
        >>> DeviceModel(model="scharber").ff_of(["fullerene", ""]).tolist()
        [0.65, 0.65]
        """
        return self._per_class("ff", acceptor_class)

    def _per_class(self, name: str, acceptor_class) -> np.ndarray:
        """``name`` ('ff' or 'eqe') per pair: the fitted class values (:meth:`FittedParameters.ff_for`,
        :meth:`FittedParameters.eqe_for`), or the effective value for every pair when set or Scharber's."""
        classes = np.asarray("" if acceptor_class is None else acceptor_class, dtype=object)
        if not self._fitted(name):
            return np.full(classes.shape, self.value(name))
        return getattr(self.parameters, f"{name}_for")(classes)

    def _fitted(self, name: str) -> bool:
        """Whether ``name`` ('ff' or 'eqe') comes from the fitted parameters (no override, not Scharber's rule)."""
        return self.model != "scharber" and getattr(self, name) is None

    def _follows(self, name: str) -> bool:
        """Whether ``name`` ('ff' or 'eqe') depends on the acceptor class: fitted, with values per class."""
        return self._fitted(name) and bool(getattr(self.parameters, f"{name}_by_class"))

    def eqe_of(self, acceptor_class=None) -> np.ndarray:
        """EQE at large offsets per pair: the fitted value of the acceptor's class (else its family's, else
        pooled); the override ``eqe`` or Scharber's 0.65 for every pair when set or chosen. [dimensionless]

        Examples
        --------
        >>> DeviceModel(model="scharber").eqe_of(["fullerene", ""]).tolist()
        [0.65, 0.65]
        """
        return self._per_class("eqe", acceptor_class)

    @property
    def eqe_follows_class(self) -> bool:
        """Whether the EQE depends on the acceptor class (fitted values per class are in use).

        Examples
        --------
        >>> DeviceModel(model="scharber").eqe_follows_class, DeviceModel(eqe=0.7).eqe_follows_class
        (False, False)
        """
        return self._follows("eqe")

    @property
    def follows_class(self) -> bool:
        """Whether the EQE or the fill factor depends on the acceptor class (a pair whose class cannot be told gets
        the pooled values)."""
        return self.eqe_follows_class or self.ff_follows_class

    @property
    def eqe_bound(self) -> float:
        """Largest EQE any pair can get (a bound for the sampler and :meth:`pce_bound_pct`). [dimensionless]"""
        return self.parameters.eqe_bound if self._fitted("eqe") else self.value("eqe")

    @property
    def ff_follows_class(self) -> bool:
        """Whether the fill factor depends on the acceptor class (fitted values per class are in use).

        Examples
        --------
        >>> DeviceModel(model="scharber").ff_follows_class, DeviceModel(ff=0.7).ff_follows_class
        (False, False)
        """
        return self._follows("ff")

    def ect_outside_fit(self, interface_ev, gap_cap_ev) -> np.ndarray:
        """Where the pair's E_CT = min(LUMO_A − HOMO_D, smaller optical gap) lies outside the E_CT range of the
        published devices the fitted model was fitted on (by more than :data:`screen.viability.OFFSET_TOL_EV`);
        all False for Scharber's rule, which is not fitted, and with a voltage loss ``loss_v`` set.

        Outside that range the fitted loss stays at the value of the nearest fitted device (its E_CT slope is not
        extrapolated), so Voc follows E_CT one to one there: an extrapolation of the device data, not a fit
        (a device physicist's audit, 2026-12-05).

        Examples
        --------
        >>> p = FittedParameters(loss_ev={"pooled": 0.5}, eqe_max=0.65, offset_scale_ev=0.01, ff=0.65,
        ...                      ect_min_ev=1.01, ect_max_ev=1.75)
        >>> DeviceModel(parameters=p).ect_outside_fit(np.array([0.9, 1.3, 1.9]), np.array([1.4, 1.4, 2.0])).tolist()
        [True, False, True]
        """
        interface, cap = np.asarray(interface_ev, dtype=float), np.asarray(gap_cap_ev, dtype=float)
        if self.model == "scharber" or self.loss_v is not None:  # no fitted loss to hold at an edge
            return np.zeros(np.broadcast_shapes(interface.shape, cap.shape), dtype=bool)
        e_ct = np.fmin(interface, cap)
        p = self.parameters
        with np.errstate(invalid="ignore"):
            return (e_ct < p.ect_min_ev - OFFSET_TOL_EV) | (e_ct > p.ect_max_ev + OFFSET_TOL_EV)

    def pce_bound_pct(self, acceptor_class: str | None = None) -> float:
        """An upper bound of the PCE any pair can get from this model [%]; with ``acceptor_class``, any pair whose
        acceptor is of that class (its EQE and fill factor; a referee's check: against a fullerene partner no pair
        could reach a 10 % target, and the warning, held to the bound of every class, said nothing).

        Over absorber gaps g up to :data:`screen.viability.GAP_MAX_EV`: Voc no more than the detailed-balance Voc of
        g and g less the fitted floor on E_g − qVoc; Jsc the photons above g at the largest EQE of any class (yields
        ≤ 1); the largest fill factor of any class; and never above the detailed-balance limit. A target above it is
        one no pair can reach: P(PCE > target) is 0 for every row (a device physicist's audit: the fitted model stops
        near 13.7 %, and a target of 15 % gave 0 everywhere without a word). Scharber's rule takes its Voc from the
        levels, whose HOMO–LUMO difference may exceed the optical gap on the film scale, so only the detailed-balance
        Voc bounds it: 16.3 %, not the 11.1 % of its own map, where a donor's HOMO–LUMO difference is its optical gap
        (:func:`efficiency_map`; an adversarial tester found rows at 12.2 % beside a warning that 11.1 % was the most).

        Examples
        --------
        >>> round(DeviceModel(model="scharber").pce_bound_pct(), 1)  # levels whose transport gap exceeds the optical
        16.3
        >>> round(DeviceModel(model="scharber", eqe=1.0, ff=1.0, loss_v=0.0, min_delta_lumo_ev=0.0,
        ...                   min_delta_homo_ev=0.0).pce_bound_pct(), 1)  # detailed balance (Rühle 2016: 33.7 %)
        33.7
        >>> m = DeviceModel()
        >>> m.pce_bound_pct("fullerene") < m.pce_bound_pct() == m.pce_bound_pct("")
        True
        """
        eqe, ff = self.eqe_bound, self.ff_max
        if acceptor_class:
            eqe, ff = float(self.eqe_of([acceptor_class])[0]), float(self.ff_of([acceptor_class])[0])

        # between two grid gaps the Voc bound rises with the gap and Jsc falls (the spectrum's absorption bands make
        # Jsc jagged, so a maximum can fall between grid points): Voc at the upper and Jsc at the lower end bound it
        g = np.arange(0.3, GAP_MAX_EV, 0.001)
        voc = np.clip(np.minimum(np.asarray(sq_voc_v(g), float), g - gap_floor(self)), 0.0, None)
        jsc = np.asarray(jsc_ma_cm2(g, 1.0), float)
        pce = voc[1:] * jsc[:-1] * eqe * ff * 1000.0 / self.incident_power_w_m2
        limit = self._sq_pct(np.asarray(sq_pce_pct(g), float))
        return float(np.max(np.minimum(pce, np.maximum(limit[1:], limit[:-1]))))

    @property
    def ff_max(self) -> float:
        """Largest fill factor any pair can get (a bound for the sampler). [dimensionless]"""
        return self.parameters.ff_max if self._fitted("ff") else self.value("ff")

    def loss_ev(self, acceptor_class=None) -> tuple[np.ndarray, np.ndarray]:
        """Voltage loss per pair [eV] and the mask of pairs that got the pooled (class-free) value.

        Examples
        --------
        >>> DeviceModel(model="scharber").loss_ev(["fullerene"])[0].tolist()
        [0.3]
        """
        classes = np.asarray("" if acceptor_class is None else acceptor_class, dtype=object)
        if self.model == "scharber" or self.loss_v is not None:
            return np.full(classes.shape, self.value("loss_v")), np.zeros(classes.shape, dtype=bool)
        return self.parameters.loss_for(classes), self.parameters.pooled_mask(classes)

    def acceptor_absorbs(self, acceptor_class=None) -> np.ndarray:
        """Per pair: whether the acceptor counts as an absorber for Jsc.

        False only in the fitted model with ``absorber='both'`` whose parameters do
        not count a fullerene (:attr:`screen.devicepars.FittedParameters.fullerene_absorbs`
        False, chosen by :mod:`screen.devicefit` on the measured Jsc of published
        devices), for an acceptor of class ``'fullerene'``; there the donor's gap sets Jsc and the
        detailed-balance PCE cap.  Fullerene films absorb weakly near their
        optical gap — the lowest singlet transitions of C60 are symmetry-forbidden,
        C70's are weak — so counting every photon above the fullerene's gap
        overstates the current; Scharber's model, built for fullerene blends,
        counts the donor's absorption only [1]_.  Scharber's rule and
        ``absorber='donor'`` are unchanged (True everywhere; the donor-only model
        ignores the acceptor's gap anyway).

        Parameters
        ----------
        acceptor_class : array_like of str or None
            Acceptor class per pair (:func:`screen.viability.acceptor_class_of`); None or '' is unknown
            (counts as an absorber).

        Returns
        -------
        numpy.ndarray of bool
            Shape of ``acceptor_class``.

        References
        ----------
        .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789. :doi:`10.1002/adma.200501717`
        .. [2] S. Leach et al., Chem. Phys. 160 (1992) 451 (electronic spectra of C60; from memory).

        Examples
        --------
        >>> from screen.devicepars import FittedParameters
        >>> p = FittedParameters(loss_ev={"pooled": 0.5}, eqe_max=0.7, offset_scale_ev=0.01, ff=0.65,
        ...                      fullerene_absorbs=False)
        >>> DeviceModel(parameters=p).acceptor_absorbs(["fullerene", "nfa-fused"]).tolist()
        [False, True]
        >>> DeviceModel(model="scharber").acceptor_absorbs(["fullerene"]).tolist()
        [True]
        """
        classes = np.asarray("" if acceptor_class is None else acceptor_class, dtype=object)
        if self.model != "fitted" or self.absorber != "both" or self.parameters.fullerene_absorbs:
            return np.ones(classes.shape, dtype=bool)
        return self.parameters.acceptor_absorbs(classes)

    @property
    def _donor_absorber_view(self) -> "DeviceModel":
        """The same model with ``absorber='donor'``: its Jsc and absorber gap are those of a pair whose acceptor
        does not count as an absorber (E_CT and the Voc caps use the smaller gap of the pair in both)."""
        return dataclasses.replace(self, absorber="donor", min_delta_homo_ev=None)  # the both-absorb view held ΔHOMO

    def absorber_gap_ev(self, donor_gap, acceptor_gap, acceptor_class=None):
        """Gap that sets Jsc and the detailed-balance PCE cap: the donor's, or the smaller of the pair for
        ``absorber='both'`` — the donor's again for an acceptor that does not count as an absorber
        (:meth:`acceptor_absorbs`) unless the acceptor's gap is not positive (then that invalid gap, which
        makes the pair not viable, as it does for an absorbing acceptor). [eV]

        Examples
        --------
        >>> from screen.devicepars import FittedParameters
        >>> p = FittedParameters(loss_ev={"pooled": 0.5}, eqe_max=0.7, offset_scale_ev=0.01, ff=0.65,
        ...                      fullerene_absorbs=False)
        >>> DeviceModel(parameters=p).absorber_gap_ev(1.9, 1.65, ["fullerene", "nfa-fused"]).tolist()
        [1.9, 1.65]
        """
        d_gap = np.asarray(donor_gap, dtype=float)
        if self.absorber == "donor":
            return d_gap
        return self._absorber_gap(d_gap, np.asarray(acceptor_gap, float),
                                  np.minimum(d_gap, np.asarray(acceptor_gap, float)),
                                  self.acceptor_absorbs(acceptor_class))

    @staticmethod
    def _absorber_gap(d_gap, a_gap, g_both, absorbs):
        """The absorber gap of :meth:`absorber_gap_ev` from the pair's smaller gap ``g_both`` [eV]."""
        if np.all(absorbs):
            return g_both
        with np.errstate(invalid="ignore"):
            donor_only = ~np.asarray(absorbs, dtype=bool) & ~(a_gap <= 0)
        return np.where(donor_only, d_gap, g_both)

    def check_inputs(self, acceptor_homo_ev, acceptor_lumo_ev, acceptor_gap_ev, caller: str) -> None:
        """Refuse a call without the acceptor levels the model needs.

        Raises
        ------
        ValueError
            ``acceptor_lumo_ev`` is None, or ``absorber='both'`` without the
            acceptor HOMO and gap.
        """
        if acceptor_lumo_ev is None:
            raise ValueError(f"{caller} needs acceptor_lumo_ev")
        if self.absorber == "both" and (acceptor_homo_ev is None or acceptor_gap_ev is None):
            raise ValueError(
                "DeviceModel(absorber='both') needs acceptor_homo_ev and acceptor_gap_ev; "
                "pass them or use absorber='donor'"
            )

    def pair_arrays(self, donor_homo_ev, donor_lumo_ev, donor_gap_ev, acceptor_homo_ev, acceptor_lumo_ev,
                    acceptor_gap_ev, caller: str = "evaluate()"):
        """The six pair levels as float arrays (None → NaN) and their broadcast shape.

        Returns
        -------
        (tuple of numpy.ndarray, tuple)
            Levels in :data:`PAIR_LEVELS` order (not yet broadcast) [eV], and
            the broadcast shape.
        """
        self.check_inputs(acceptor_homo_ev, acceptor_lumo_ev, acceptor_gap_ev, caller)
        levels = (
            np.asarray(donor_homo_ev, dtype=float),
            np.asarray(donor_lumo_ev, dtype=float),
            np.asarray(donor_gap_ev, dtype=float),
            np.asarray(np.nan if acceptor_homo_ev is None else acceptor_homo_ev, dtype=float),
            np.asarray(acceptor_lumo_ev, dtype=float),
            np.asarray(np.nan if acceptor_gap_ev is None else acceptor_gap_ev, dtype=float),
        )
        return levels, np.broadcast_shapes(*(arr.shape for arr in levels))

    def needed_missing(self, levels, shape) -> np.ndarray:
        """True where a level the model needs is NaN, broadcast to ``shape``.

        Needed: donor HOMO, LUMO and gap and acceptor LUMO; with
        ``absorber='both'`` also the acceptor HOMO and gap.  The one list of the
        flagged path (:meth:`figures`), the sampler and its kernel
        (:func:`screen.devicekernel.pce_samples`).

        Examples
        --------
        >>> lv = [np.array([-5.4, -5.4]), -3.9, 1.5, np.array([np.nan, -6.0]), -4.3, 2.0]
        >>> DeviceModel().needed_missing(lv, (2,)).tolist(), DeviceModel(absorber="donor").needed_missing(lv, (2,)).tolist()
        ([True, False], [False, False])
        """
        d_homo, d_lumo, d_gap, a_homo, a_lumo, a_gap = levels
        needed = [d_homo, d_lumo, d_gap, a_lumo]
        if self.absorber == "both":
            needed += [a_homo, a_gap]
        missing = np.zeros(shape, dtype=bool)
        for arr in needed:
            nan = np.isnan(arr)
            if nan.any():  # the sampler's kernel calls this for every block: most have no hole
                missing |= np.broadcast_to(nan, shape)
        return missing

    # ------------------------------------------------------------ the physics
    def figures(self, levels, loss_ev, *, ff=None, jsc_unit=None, sq_pct=None, sq_voc=None,
                keep_model_values=False, acceptor_absorbs=None, eqe=None) -> dict:
        """Classification, Voc, Jsc and PCE of pairs from their six levels (the one formula).

        Parameters
        ----------
        levels : sequence of numpy.ndarray
            The six levels in :data:`PAIR_LEVELS` order (broadcastable). [eV]
        loss_ev : numpy.ndarray
            Voltage loss per pair (broadcastable), from :meth:`loss_ev`. [eV]
        ff : numpy.ndarray or None
            Fill factor per pair (broadcastable), from :meth:`ff_of`; None uses ``value('ff')``.
        eqe : numpy.ndarray or None
            EQE at large offsets per pair (broadcastable), from :meth:`eqe_of`; None uses ``value('eqe')``.
        jsc_unit, sq_pct : callable or None
            Jsc at EQE = 1 [mA cm⁻²] and detailed-balance PCE [%] as functions of
            the gap; None uses the exact :func:`screen.spectrum.jsc_ma_cm2` and
            :func:`screen.spectrum.sq_pce_pct` (the sampler passes tables).
        sq_voc : callable or None
            Detailed-balance Voc [V] of a gap; None uses :func:`screen.spectrum.sq_voc_v`.
        acceptor_absorbs : numpy.ndarray of bool or None
            Per pair (broadcastable), from :meth:`acceptor_absorbs`: False where the acceptor's absorption
            is not counted (the donor's gap sets Jsc and the PCE cap; E_CT and the Voc caps unchanged);
            None: every acceptor counts.

        Returns
        -------
        dict of numpy.ndarray
            ``delta_lumo_ev``, ``delta_homo_ev``, ``absorber_gap_ev`` (the gap that set Jsc),
            ``voc_v``, ``jsc_ma_cm2``, ``pce_pct`` (0 where not viable: callers
            blank them), the masks of :func:`screen.viability.classify`,
            ``viable``, ``voc_capped``, ``pce_capped`` and ``loss_ev`` (the loss applied [eV]); with
            ``keep_model_values`` also ``voc_model_v``, ``jsc_model_ma_cm2`` and ``pce_model_pct``, the
            formula's values whether viable or not (for validation on devices).
        """
        sq_pct = self._sq_pct(sq_pct)
        shape = np.broadcast_shapes(*(np.shape(x) for x in levels), np.shape(loss_ev))
        t = pair_terms(self, levels, loss_ev, jsc_unit, sq_voc, eqe=eqe)
        delta_lumo, delta_homo, g_lo, voc_raw, jsc = t.delta_lumo, t.delta_homo, t.absorber_gap, t.voc_raw, t.jsc
        if self.absorber == "both" and acceptor_absorbs is not None and not np.all(acceptor_absorbs):
            # the donor-absorber formula for Jsc (one formula: the kernel's); Voc, E_CT and caps from t
            t_d = pair_terms(self._donor_absorber_view, levels, loss_ev, jsc_unit, sq_voc, eqe=eqe)
            absorbs = np.asarray(acceptor_absorbs, dtype=bool)
            g_lo = self._absorber_gap(np.asarray(levels[2], float), np.asarray(levels[5], float), g_lo, absorbs)
            jsc = np.where(absorbs, jsc, t_d.jsc)
            current = CurrentTerms(*(np.where(absorbs, b, d) for b, d in zip(t.current, t_d.current)))
            shape = np.broadcast_shapes(shape, absorbs.shape)
        else:
            current = t.current
        missing = self.needed_missing(levels, shape)
        masks = classify(delta_lumo, delta_homo, g_lo, voc_raw, missing, min_lumo=self.value("min_delta_lumo_ev"),
                         min_homo=self.value("min_delta_homo_ev"), check_homo_offset=self.check_homo_offset,
                         current=current)
        viable = masks["viable"]
        with np.errstate(invalid="ignore"):
            safe_lo = np.where(np.isfinite(g_lo) & (g_lo > 0), g_lo, 2.0)  # placeholder keeps NaN out
        jsc_model = jsc
        with np.errstate(invalid="ignore"):
            voc_capped = viable & (voc_raw > t.voc_cap)
        voc_model = np.fmin(voc_raw, t.voc_cap)
        voc = np.where(viable, voc_model, 0.0)
        jsc = np.where(viable, jsc, 0.0)
        factor = self.pce_factor_pct(ff)
        pce = voc * jsc * factor
        limit = sq_pct(safe_lo)
        pce_capped = viable & (pce > limit)
        pce = np.where(pce_capped, limit, pce)
        out = {"delta_lumo_ev": delta_lumo, "delta_homo_ev": delta_homo, "absorber_gap_ev": g_lo,
               "voc_v": voc, "jsc_ma_cm2": jsc, "pce_pct": pce, **masks, "voc_capped": voc_capped,
               "pce_capped": pce_capped, "loss_ev": t.loss, "loss_floor": viable & t.floored & ~voc_capped,
               "ect_outside_fit": viable & self.ect_outside_fit(levels[4] - levels[0], t.gap_cap)}
        if keep_model_values:
            out["voc_model_v"] = voc_model
            out["jsc_model_ma_cm2"] = jsc_model
            with np.errstate(invalid="ignore"):
                out["pce_model_pct"] = np.fmin(np.maximum(voc_model, 0.0) * jsc_model * factor, limit)
        return {k: np.broadcast_to(v, shape) for k, v in out.items()}

    def pce_from_levels(self, levels, loss_ev, *, ff=None, jsc_unit=None, sq_pct=None, sq_voc=None,
                        sq_below_ev=np.inf, acceptor_absorbs=None, eqe=None) -> np.ndarray:
        """Efficiency of (sampled) pair levels; 0 where a sample is not viable. [%]

        The vectorised kernel of :func:`screen.sampling.sample_pce`: the same
        formula as :meth:`evaluate` (:func:`screen.devicekernel.pair_terms`),
        the classification as plain comparisons, no flags (``ff`` and ``eqe`` per pair as in :meth:`figures`).
        ``acceptor_absorbs``
        (from :meth:`acceptor_absorbs`, broadcastable; None: every acceptor
        counts) as in :meth:`figures`: where it is False the efficiency is the
        donor-absorber one (the same classification, Voc and Voc caps), so such
        rows cost the kernel twice.

        Examples
        --------
        >>> import numpy as np
        >>> m = DeviceModel(model="scharber", absorber="donor")
        >>> lv = [np.array([-5.4, -5.4]), np.array([-3.9, -4.5]), 1.5, -6.0, -4.3, 2.0]
        >>> m.pce_from_levels(lv, 0.3).round(2).tolist()
        [9.79, 0.0]
        """
        jsc_unit = (lambda g: jsc_ma_cm2(g, 1.0)) if jsc_unit is None else jsc_unit
        loss = np.asarray(loss_ev, dtype=float)
        if self.absorber != "both" or acceptor_absorbs is None or np.all(acceptor_absorbs):
            return pce_samples(self, levels, loss, jsc_unit, self._sq_pct(sq_pct), sq_below_ev, ff=ff, sq_voc=sq_voc,
                               eqe=eqe)
        out, aligned = pce_samples(self, levels, loss, jsc_unit, self._sq_pct(sq_pct), sq_below_ev, ff=ff,
                                   sq_voc=sq_voc, return_aligned=True, eqe=eqe)
        # viable in the both-absorb kernel but for its current (its offset checks) → the donor-absorber efficiency
        # of that sample, held to the donor-absorber current as figures() holds it
        donor = pce_samples(self._donor_absorber_view, levels, loss, jsc_unit, self._sq_pct(sq_pct), sq_below_ev,
                            ff=ff, sq_voc=sq_voc, eqe=eqe)
        return np.where(np.asarray(acceptor_absorbs, dtype=bool), out, np.where(aligned, donor, 0.0))

    def pce_pct(self, donor_homo_ev, donor_lumo_ev, donor_gap_ev, acceptor_homo_ev=None, acceptor_lumo_ev=None,
                acceptor_gap_ev=None, *, acceptor_class=None, caller: str = "pce_pct()") -> np.ndarray:
        """``evaluate(...)["pce_pct"]`` without the flags: PCE [%], NaN where the pair is not viable.

        The same classification and formula (:meth:`figures`); leaving out the
        per-pair flag strings makes a map grid of 10⁴ pairs about 20 times cheaper.

        Examples
        --------
        >>> import numpy as np
        >>> m = DeviceModel()
        >>> gaps, d_lumo = np.linspace(1.2, 2.4, 5)[:, None], np.linspace(-4.2, -3.0, 4)[None, :]
        >>> levels = (d_lumo - gaps, d_lumo, gaps, -5.65, -4.10, 1.33)
        >>> ref = m.evaluate(*levels, acceptor_class="nfa-fused")["pce_pct"]
        >>> bool(np.array_equal(m.pce_pct(*levels, acceptor_class="nfa-fused"), ref, equal_nan=True))
        True
        """
        levels, _ = self.pair_arrays(donor_homo_ev, donor_lumo_ev, donor_gap_ev, acceptor_homo_ev,
                                     acceptor_lumo_ev, acceptor_gap_ev, caller)
        loss, _ = self.loss_ev(acceptor_class)
        fig = self.figures(levels, loss, ff=self.ff_of(acceptor_class), eqe=self.eqe_of(acceptor_class),
                           acceptor_absorbs=self.acceptor_absorbs(acceptor_class))
        return np.where(fig["viable"], fig["pce_pct"], np.nan).astype(float)

    def evaluate(self, donor_homo_ev, donor_lumo_ev, donor_gap_ev, acceptor_homo_ev=None, acceptor_lumo_ev=None,
                 acceptor_gap_ev=None, *, acceptor_class=None) -> dict:
        """Classify donor/acceptor pairs and estimate the viable ones.

        Parameters
        ----------
        donor_homo_ev, donor_lumo_ev : array_like
            Donor frontier levels, vacuum scale. [eV]
        donor_gap_ev : array_like
            Donor optical gap. [eV]
        acceptor_homo_ev : array_like or None
            Acceptor HOMO; needed for ``absorber='both'``, else checked for type
            II when given. [eV]
        acceptor_lumo_ev : array_like
            Acceptor LUMO (required). [eV]
        acceptor_gap_ev : array_like or None
            Acceptor optical gap; needed for ``absorber='both'``. [eV]
        acceptor_class : array_like of str or None
            Acceptor class per pair (``fullerene``, ``nfa-fused`` …) for the
            fitted loss, EQE, fill factor and whether the acceptor counts as an
            absorber (:meth:`acceptor_absorbs`); None or '' uses the pooled loss.

        Returns
        -------
        dict of numpy.ndarray
            With the broadcast shape of the inputs: ``delta_lumo_ev``,
            ``delta_homo_ev`` [eV]; ``voc_v`` [V], ``jsc_ma_cm2`` [mA cm⁻²],
            ``ff``, ``pce_pct`` [%] — NaN where the pair is not viable;
            ``absorber_gap_ev`` (the gap that set Jsc and the PCE cap) [eV], ``loss_ev`` (the loss
            applied: the class loss, grown with E_CT when the fitted model has a loss slope) [eV]; one boolean mask per
            device flag of :data:`screen.flags.DEVICE_FLAGS`; ``viable`` (and
            its old name ``device_ok``); ``flags`` (';'-joined codes).

        Notes
        -----
        Voc never exceeds the detailed-balance Voc of the smallest optical gap of
        the pair (``voc_capped``), nor, in the fitted model, that gap less the smallest
        total loss E_g − qVoc of the fitted devices (``loss_floor``), and PCE never
        exceeds the detailed-balance limit for the absorber gap (``pce_capped``).  An offset counts as meeting its
        threshold if it is at most :data:`screen.viability.OFFSET_TOL_EV` (half of the last written decimal) below it.  A Jsc below :data:`screen.viability.JSC_MIN_MA_CM2`
        (written as 0) makes the pair not viable: ``absorber_gap_invalid`` where the photons above the absorber gap
        fall short even with every charge-generation yield 1, else ``lumo_offset_low``/``homo_offset_low`` for the
        offset whose yield makes it vanish (:func:`screen.viability.dark_current`).

        References
        ----------
        .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789. :doi:`10.1002/adma.200501717`
        .. [2] D. Veldman et al., Adv. Funct. Mater. 19 (2009) 1939. :doi:`10.1002/adfm.200801834`

        Examples
        --------
        >>> import numpy as np
        >>> from screen.device import DeviceModel
        >>> m = DeviceModel(model="scharber", absorber="both")
        >>> out = m.evaluate(-5.2, np.array([-3.9, -4.1]), 1.6, -5.4, -4.3, 1.4)
        >>> out["absorber_gap_ev"].tolist(), out["flags"].tolist()
        ([1.4, 1.4], ['homo_offset_low', 'lumo_offset_low;homo_offset_low'])
        >>> bool(np.isnan(out["pce_pct"]).all())
        True
        """
        levels, shape = self.pair_arrays(donor_homo_ev, donor_lumo_ev, donor_gap_ev, acceptor_homo_ev,
                                         acceptor_lumo_ev, acceptor_gap_ev, "evaluate()")
        loss, pooled = self.loss_ev(acceptor_class)
        ff = self.ff_of(acceptor_class)
        fig = self.figures(levels, loss, ff=ff, eqe=self.eqe_of(acceptor_class),
                           acceptor_absorbs=self.acceptor_absorbs(acceptor_class))
        shape = fig["viable"].shape
        viable = fig["viable"]

        def blank(x):
            return np.where(viable, x, np.nan).astype(float)

        masks = {code: np.array(fig[code], dtype=bool) for code in
                 ("input_missing", "absorber_gap_invalid", "lumo_inverted", "homo_inverted", "lumo_offset_low",
                  "homo_offset_low", "voc_nonpositive", "voc_capped", "loss_floor", "pce_capped", "ect_outside_fit")}
        masks["loss_class_pooled"] = np.broadcast_to(pooled, shape) & viable
        masks["donor_only_model"] = np.full(shape, self.model == "scharber" and self.absorber == "donor")
        result = {
            "delta_lumo_ev": np.array(fig["delta_lumo_ev"], dtype=float),
            "delta_homo_ev": np.array(fig["delta_homo_ev"], dtype=float),
            "voc_v": blank(fig["voc_v"]),
            "jsc_ma_cm2": blank(fig["jsc_ma_cm2"]),
            "ff": blank(np.broadcast_to(ff, shape)),
            "pce_pct": blank(fig["pce_pct"]),
            "absorber_gap_ev": np.array(fig["absorber_gap_ev"], dtype=float),
            "loss_ev": np.array(fig["loss_ev"], dtype=float),
            **masks,
            "viable": np.array(viable),
            "device_ok": np.array(viable),
            "flags": join_flags(masks),
        }
        return {key: as_output(val) for key, val in result.items()}


# --------------------------------------------------------------------------- #
# Design-rule map
# --------------------------------------------------------------------------- #
def efficiency_map(gaps_ev, offsets_ev, model=None, *, acceptor_lumo_ev=-4.3, acceptor_homo_ev=None,
                   acceptor_gap_ev=None, acceptor_class=None):
    """Efficiency over donor optical gap × LUMO offset for a fixed acceptor.

    Parameters
    ----------
    gaps_ev : array_like, 1-D
        Donor optical gaps (rows of the map). [eV]
    offsets_ev : array_like, 1-D
        ΔLUMO = LUMO_D − LUMO_A (columns of the map). [eV]
    model : DeviceModel or None
        Device model (None: the published Scharber model, donor-only, so that
        the map of [1]_ is reproduced).
    acceptor_lumo_ev : float, default -4.3
        Acceptor LUMO; −4.3 eV is the reference acceptor of [1]_. [eV]
    acceptor_homo_ev, acceptor_gap_ev : float or None
        Acceptor HOMO and optical gap (needed for ``absorber='both'``). [eV]
    acceptor_class : str or None
        Acceptor class for the fitted loss.

    Returns
    -------
    numpy.ndarray, shape (len(gaps_ev), len(offsets_ev))
        PCE [%] with donor LUMO = LUMO_A + ΔLUMO and donor HOMO = donor LUMO −
        gap (optical gap taken as the HOMO–LUMO gap, as in [1]_); NaN where
        the pair is not viable (the masked region of the report's map).

    References
    ----------
    .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789.
       :doi:`10.1002/adma.200501717`

    Examples
    --------
    >>> import numpy as np
    >>> from screen.device import efficiency_map
    >>> pce = efficiency_map([1.4, 1.5, 2.0], [0.2, 0.4])
    >>> pce.shape, bool(np.isnan(pce[1, 0])), float(round(pce[1, 1], 2))
    ((3, 2), True, 9.79)
    """
    model = DeviceModel(model="scharber", absorber="donor") if model is None else model
    gaps = np.asarray(gaps_ev, dtype=float).reshape(-1)
    offsets = np.asarray(offsets_ev, dtype=float).reshape(-1)
    d_lumo = float(acceptor_lumo_ev) + offsets[None, :]
    d_homo = d_lumo - gaps[:, None]
    return model.pce_pct(d_homo, d_lumo, gaps[:, None], acceptor_homo_ev, acceptor_lumo_ev, acceptor_gap_ev,
                         acceptor_class=acceptor_class, caller="efficiency_map()")
