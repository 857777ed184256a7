"""Scharber device model for donor/acceptor bulk-heterojunction solar cells.

Frontier levels of a donor and an acceptor (vacuum scale, eV) are turned into
open-circuit voltage, short-circuit current density and power-conversion
efficiency under the ASTM G173-03 AM1.5G reference spectrum:

.. math::

    V_{oc} = (E_{LUMO}^{A} - E_{HOMO}^{D})/e - V_{loss}

    J_{sc} = \\mathrm{EQE}\\; q \\int_{E \\ge E_g} \\Phi(E)\\, dE

    \\mathrm{PCE} = V_{oc} J_{sc}\\, \\mathrm{FF} / P_{in}

With vacuum-scale levels (HOMO = −IP < 0, LUMO = −EA < 0) the first line is the
published rule :math:`V_{oc} = (|E_{HOMO}^{D}| - |E_{LUMO}^{A}|)/e - 0.3` V.

Everything is vectorised over numpy arrays (numpy broadcasting rules apply), so a
whole candidate list is evaluated in one call.  Internally SI units are used
(:mod:`scipy.constants`); names carry the boundary units (``_ev``, ``_v``,
``_ma_cm2``, ``_pct``, ``_nm``).

The package splits the model in three layers:

- :mod:`screen.spectrum` — the AM1.5G table, photon flux and :math:`J_{sc}` at a
  gap (re-exported here: ``reference_spectrum``, ``jsc_ma_cm2`` …);
- this module — :func:`voc_v`, :class:`DeviceModel` (parameters, offset checks,
  device flags) and the design-rule map :func:`efficiency_map`;
- :mod:`screen.sampling` — the Monte-Carlo efficiency spread
  (:func:`screen.sampling.sample_pce`).

The defaults of :class:`DeviceModel` are the schema defaults of the ``device``
config section (:func:`screen.schema.section_defaults`); a bad value raises
:class:`screen.errors.ConfigError`.  Flag codes come from :mod:`screen.flags`.

References
----------
.. [1] M. C. Scharber, D. Mühlbacher, M. Koppe, P. Denk, C. Waldauf,
   A. J. Heeger, C. J. Brabec, "Design rules for donors in bulk-heterojunction
   solar cells — towards 10 % energy-conversion efficiency",
   Adv. Mater. 18 (2006) 789–794. :doi:`10.1002/adma.200501717`
.. [2] ASTM G173-03, "Standard Tables for Reference Solar Spectral
   Irradiances: Direct Normal and Hemispherical on 37° Tilted Surface",
   ASTM International (table as shipped with pvlib).
.. [3] W. F. Holmgren, C. W. Hansen, M. A. Mikofski, "pvlib python: a python
   package for modeling solar energy systems", J. Open Source Softw. 3 (2018)
   884. :doi:`10.21105/joss.00884`
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from screen.errors import ConfigError
from screen.flags import FLAG_ORDER, FLAGS
from screen.schema import section_defaults
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
)

__all__ = [
    "DeviceModel",
    "voc_v",
    "efficiency_map",
    "join_flags",
    "OFFSET_TOL_EV",
    "PAIR_LEVELS",
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

#: Offsets within this of a threshold count as meeting it (−4.0 − (−4.3) is
#: 0.2999999999999998 in binary floating point). [eV]
OFFSET_TOL_EV = 1e-9
#: Schema defaults of the ``device`` config section (the one source of the defaults below).
_DEFAULTS = section_defaults("device")
#: Input order of the six pair levels used by :meth:`DeviceModel.pair_arrays`.
PAIR_LEVELS = ("donor_homo_ev", "donor_lumo_ev", "donor_gap_ev", "acceptor_homo_ev", "acceptor_lumo_ev",
               "acceptor_gap_ev")


def voc_v(homo_donor_ev, lumo_acceptor_ev, loss_v=0.3, *, return_mask=False):
    """Open-circuit voltage from the donor HOMO and acceptor LUMO (Scharber rule).

    Parameters
    ----------
    homo_donor_ev : array_like
        Donor HOMO on the vacuum scale (negative). [eV]
    lumo_acceptor_ev : array_like
        Acceptor LUMO on the vacuum scale (negative). [eV]
    loss_v : float, default 0.3
        Empirical voltage loss. [V]
    return_mask : bool, default False
        Also return the mask of pairs whose unclipped Voc is ≤ 0.

    Returns
    -------
    voc : numpy.ndarray
        :math:`\\max(0, (E_{LUMO}^{A} - E_{HOMO}^{D})/e - V_{loss})`. [V]
    nonpositive : numpy.ndarray of bool
        Only with ``return_mask=True``: True where the unclipped value is ≤ 0
        (NaN inputs give False and NaN Voc).

    Notes
    -----
    For bound levels (both negative) :math:`E_{LUMO}^{A} - E_{HOMO}^{D} =
    |E_{HOMO}^{D}| - |E_{LUMO}^{A}|`, the form given in [1]_.  The signed form
    is used so that a positive (unbound) LUMO is not silently folded back by an
    absolute value.  Negative Voc is never returned; callers that need to know
    use the mask.

    References
    ----------
    .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789.
       :doi:`10.1002/adma.200501717`

    Examples
    --------
    >>> from screen.device import voc_v
    >>> float(round(voc_v(-5.4, -4.3), 3))
    0.8
    >>> voc, bad = voc_v([-5.4, -4.5], -4.3, return_mask=True)
    >>> voc.round(3).tolist(), bad.tolist()
    ([0.8, 0.0], [False, True])
    """
    raw = (
        np.asarray(lumo_acceptor_ev, dtype=float)
        - np.asarray(homo_donor_ev, dtype=float)
        - float(loss_v)
    )
    with np.errstate(invalid="ignore"):
        nonpositive = raw <= 0.0
    voc = np.where(nonpositive, 0.0, raw)
    if return_mask:
        return as_output(voc), as_output(nonpositive)
    return as_output(voc)


def join_flags(masks: dict) -> np.ndarray:
    """Per-element ``;``-joined codes of the raised flags.

    Parameters
    ----------
    masks : dict of str to array_like of bool
        One boolean mask per flag code (broadcast against each other).

    Returns
    -------
    numpy.ndarray of object
        ``''`` where no flag is raised; codes in :data:`screen.flags.FLAG_ORDER`
        order (codes unknown to the registry last, in ``masks`` order).

    Examples
    --------
    >>> join_flags({"voc_nonpositive": [True, False], "input_missing": [True, False]}).tolist()
    ['input_missing;voc_nonpositive', '']
    """
    names = [k for k in FLAG_ORDER if k in masks] + [k for k in masks if k not in FLAGS]
    shape = np.broadcast_shapes(*(np.shape(v) for v in masks.values()))
    n = int(np.prod(shape, dtype=np.int64))
    stacked = np.zeros((len(names), n), dtype=bool)
    for row, name in zip(stacked, names):
        row[:] = np.ravel(np.broadcast_to(np.asarray(masks[name], dtype=bool), shape))
    out = np.full(n, "", dtype=object)
    for j in np.flatnonzero(stacked.any(axis=0)):
        out[j] = ";".join(name for name, raised in zip(names, stacked[:, j]) if raised)
    return out.reshape(shape)


# --------------------------------------------------------------------------- #
# Device model
# --------------------------------------------------------------------------- #
def _config_error(field: str, value, allowed: str) -> ConfigError:
    return ConfigError(f"DeviceModel.{field} = {value!r} is not allowed; allowed: {allowed}")


@dataclass(frozen=True)
class DeviceModel:
    """Parameters of the Scharber bulk-heterojunction device model.

    Parameters
    ----------
    eqe : float, default 0.65
        External quantum efficiency above the absorber gap. [dimensionless]
    ff : float, default 0.65
        Fill factor. [dimensionless]
    loss_v : float, default 0.3
        Empirical Voc loss. [V]
    min_delta_lumo_ev : float, default 0.3
        Smallest ΔLUMO = LUMO_D − LUMO_A for electron transfer from the excited
        donor to the acceptor. [eV]
    min_delta_homo_ev : float, default 0.3
        Smallest ΔHOMO = HOMO_D − HOMO_A for hole transfer from the excited
        acceptor; only checked with ``absorber='both'``. [eV]
    absorber : {'donor', 'both'}, default 'donor'
        'donor': the donor optical gap sets Jsc and only ΔLUMO is checked (the
        published model).  'both': the smaller optical gap of the pair sets Jsc
        and both ΔLUMO and ΔHOMO must clear their thresholds.
    pin_w_m2 : float or None, default None
        Incident power used in the efficiency; None uses the integral of the
        spectrum that gives Jsc (:func:`incident_power_w_m2`). [W m⁻²]
        Not a config key.

    Raises
    ------
    screen.errors.ConfigError
        A parameter that is not a finite number in its range, or an unknown
        ``absorber`` (the message names the field and the allowed values).

    Notes
    -----
    Every default except ``pin_w_m2`` is the schema default of the ``device``
    config section (:func:`screen.schema.section_defaults`), which are those of [1]_
    (EQE = FF = 0.65, 0.3 V loss, 0.3 eV LUMO
    offset).  The 'both' policy is an extension for blends in which the
    acceptor also absorbs (e.g. low-gap non-fullerene acceptors): it assumes
    full absorption above the lower gap with the same EQE, an optimistic bound.

    References
    ----------
    .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789.
       :doi:`10.1002/adma.200501717`

    Examples
    --------
    >>> from screen.device import DeviceModel
    >>> out = DeviceModel().evaluate(-5.4, -3.9, 1.5, -6.0, -4.3, 2.0)
    >>> float(round(out["voc_v"], 3)), float(round(out["pce_pct"], 2))
    (0.8, 9.79)
    >>> str(out["flags"])
    ''
    """

    eqe: float = _DEFAULTS["eqe"]
    ff: float = _DEFAULTS["ff"]
    loss_v: float = _DEFAULTS["loss_v"]
    min_delta_lumo_ev: float = _DEFAULTS["min_delta_lumo_ev"]
    min_delta_homo_ev: float = _DEFAULTS["min_delta_homo_ev"]
    absorber: str = _DEFAULTS["absorber"]
    #: not a config key: the spectrum's own integral unless set from Python
    pin_w_m2: float | None = None

    def __post_init__(self):
        for name in ("eqe", "ff", "loss_v", "min_delta_lumo_ev", "min_delta_homo_ev"):
            self._set_finite(name)
        if not 0.0 < self.eqe <= 1.0:
            raise _config_error("eqe", self.eqe, "0 < eqe <= 1")
        if not 0.0 < self.ff <= 1.0:
            raise _config_error("ff", self.ff, "0 < ff <= 1")
        if self.absorber not in ("donor", "both"):
            raise _config_error("absorber", self.absorber, "'donor' or 'both'")
        if self.pin_w_m2 is not None:
            self._set_finite("pin_w_m2")
            if self.pin_w_m2 <= 0:
                raise _config_error("pin_w_m2", self.pin_w_m2, "None or a positive number [W m-2]")

    def _set_finite(self, name: str) -> None:
        """Store field ``name`` as a float; refuse bools, text and non-finite numbers."""
        val = getattr(self, name)
        if isinstance(val, bool) or not isinstance(val, (int, float, np.floating, np.integer)):
            raise _config_error(name, val, "a finite real number")
        if not math.isfinite(float(val)):
            raise _config_error(name, val, "a finite real number")
        object.__setattr__(self, name, float(val))

    @property
    def incident_power_w_m2(self) -> float:
        """Incident power used for the efficiency. [W m⁻²]"""
        return incident_power_w_m2() if self.pin_w_m2 is None else float(self.pin_w_m2)

    def as_dict(self) -> dict:
        """Parameters plus spectrum and incident power, for provenance records.

        Returns
        -------
        dict
            Field values, ``spectrum`` (name) and ``incident_power_w_m2``.

        Examples
        --------
        >>> from screen.device import DeviceModel
        >>> DeviceModel().as_dict()["absorber"]
        'donor'
        """
        d = dataclasses.asdict(self)
        d["spectrum"] = reference_spectrum().name
        d["incident_power_w_m2"] = self.incident_power_w_m2
        return d

    def pce_factor_pct(self) -> float:
        """PCE per unit Voc·Jsc: ``PCE [%] = Voc [V] · Jsc [mA cm⁻²] · factor``.

        Returns
        -------
        float
            ``FF · 10 / P_in · 100`` (10 A m⁻² per mA cm⁻²). [% V⁻¹ mA⁻¹ cm²]

        Examples
        --------
        >>> round(DeviceModel(pin_w_m2=1000.0).pce_factor_pct(), 6)
        0.65
        """
        # PCE [%] = Voc [V] * Jsc [mA cm-2] * (10 A m-2 per mA cm-2) * FF / Pin * 100
        return self.ff * (1.0 / A_M2_TO_MA_CM2) / self.incident_power_w_m2 * 100.0

    def absorber_gap_ev(self, donor_gap, acceptor_gap):
        """Gap that sets Jsc: the donor's, or the smaller of the pair for ``absorber='both'``. [eV]"""
        if self.absorber == "donor":
            return np.asarray(donor_gap, dtype=float)
        return np.minimum(np.asarray(donor_gap, float), np.asarray(acceptor_gap, float))

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
        ``absorber='both'`` also the acceptor HOMO and gap.
        """
        d_homo, d_lumo, d_gap, a_homo, a_lumo, a_gap = levels
        needed = [d_homo, d_lumo, d_gap, a_lumo]
        if self.absorber == "both":
            needed += [a_homo, a_gap]
        missing = np.zeros(shape, dtype=bool)
        for arr in needed:
            missing |= np.broadcast_to(np.isnan(arr), shape)
        return missing

    def offset_masks(self, delta_lumo, delta_homo, shape) -> tuple[np.ndarray, np.ndarray]:
        """``(lumo_offset_low, homo_offset_low)``; ΔHOMO is checked only for ``absorber='both'``."""
        with np.errstate(invalid="ignore"):
            lumo_low = delta_lumo < self.min_delta_lumo_ev - OFFSET_TOL_EV
            if self.absorber == "both":
                homo_low = delta_homo < self.min_delta_homo_ev - OFFSET_TOL_EV
            else:
                homo_low = np.zeros(shape, dtype=bool)
        return lumo_low, homo_low

    def evaluate(
        self,
        donor_homo_ev,
        donor_lumo_ev,
        donor_gap_ev,
        acceptor_homo_ev=None,
        acceptor_lumo_ev=None,
        acceptor_gap_ev=None,
    ) -> dict:
        """Device figures and offset checks for donor/acceptor pairs.

        Parameters
        ----------
        donor_homo_ev, donor_lumo_ev : array_like
            Donor frontier levels, vacuum scale. [eV]
        donor_gap_ev : array_like
            Donor optical gap. [eV]
        acceptor_homo_ev : array_like or None
            Acceptor HOMO, vacuum scale; needed for ``absorber='both'``, else
            only used for ``delta_homo_ev`` (NaN if None). [eV]
        acceptor_lumo_ev : array_like
            Acceptor LUMO, vacuum scale (required). [eV]
        acceptor_gap_ev : array_like or None
            Acceptor optical gap; needed for ``absorber='both'``. [eV]

        Returns
        -------
        dict of numpy.ndarray
            All arrays have the broadcast shape of the inputs:

            - ``delta_lumo_ev`` : LUMO_D − LUMO_A [eV]
            - ``delta_homo_ev`` : HOMO_D − HOMO_A [eV]
            - ``voc_v`` : Voc, clipped at 0 [V]
            - ``jsc_ma_cm2`` : Jsc from the absorber gap [mA cm⁻²]
            - ``ff`` : fill factor [dimensionless]
            - ``pce_pct`` : efficiency [%]
            - ``absorber_gap_ev`` : gap that sets Jsc [eV]
            - ``input_missing`` : a level needed by the model is NaN
            - ``lumo_offset_low`` : ΔLUMO < ``min_delta_lumo_ev``
            - ``homo_offset_low`` : ΔHOMO < ``min_delta_homo_ev`` (always False
              for ``absorber='donor'``)
            - ``voc_nonpositive`` : unclipped Voc ≤ 0 (PCE is then 0)
            - ``device_ok`` : none of the flags above
            - ``flags`` : ';'-joined names of the raised flags ('' if none)

        Notes
        -----
        An offset counts as meeting its threshold if it is at most 1e-9 eV
        below it (binary rounding of differences such as −4.0 − (−4.3)).
        Offsets below threshold are flagged but every number is still
        computed; the ranking decides what fails.  NaN inputs propagate as NaN
        numbers and raise ``input_missing`` (comparisons with NaN raise no other
        flag).

        References
        ----------
        .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789.
           :doi:`10.1002/adma.200501717`

        Examples
        --------
        >>> import numpy as np
        >>> from screen.device import DeviceModel
        >>> m = DeviceModel(absorber="both")
        >>> out = m.evaluate(-5.2, np.array([-3.9, -4.1]), 1.6, -5.4, -4.3, 1.4)
        >>> out["absorber_gap_ev"].tolist(), out["flags"].tolist()
        ([1.4, 1.4], ['homo_offset_low', 'lumo_offset_low;homo_offset_low'])
        """
        levels, shape = self.pair_arrays(donor_homo_ev, donor_lumo_ev, donor_gap_ev, acceptor_homo_ev,
                                         acceptor_lumo_ev, acceptor_gap_ev, "evaluate()")
        d_homo, d_lumo, d_gap, a_homo, a_lumo, a_gap = levels
        delta_lumo = np.broadcast_to(d_lumo - a_lumo, shape).astype(float)
        delta_homo = np.broadcast_to(d_homo - a_homo, shape).astype(float)
        gap = np.broadcast_to(self.absorber_gap_ev(d_gap, a_gap), shape).astype(float)
        voc, voc_bad = voc_v(d_homo, a_lumo, self.loss_v, return_mask=True)
        voc = np.broadcast_to(voc, shape).astype(float)
        voc_bad = np.broadcast_to(voc_bad, shape).copy()
        jsc = jsc_ma_cm2(gap, self.eqe)
        pce = voc * jsc * self.pce_factor_pct()

        missing = self.needed_missing(levels, shape)
        lumo_low, homo_low = self.offset_masks(delta_lumo, delta_homo, shape)
        masks = {
            "input_missing": missing,
            "lumo_offset_low": lumo_low,
            "homo_offset_low": homo_low,
            "voc_nonpositive": voc_bad,
        }
        device_ok = ~(missing | lumo_low | homo_low | voc_bad)
        result = {
            "delta_lumo_ev": delta_lumo,
            "delta_homo_ev": delta_homo,
            "voc_v": voc,
            "jsc_ma_cm2": np.asarray(jsc, dtype=float),
            "ff": np.full(shape, self.ff),
            "pce_pct": np.asarray(pce, dtype=float),
            "absorber_gap_ev": gap,
            **masks,
            "device_ok": device_ok,
            "flags": join_flags(masks),
        }
        return {key: as_output(val) for key, val in result.items()}


# --------------------------------------------------------------------------- #
# Design-rule map
# --------------------------------------------------------------------------- #
def efficiency_map(
    gaps_ev,
    offsets_ev,
    model=None,
    *,
    acceptor_lumo_ev=-4.3,
    acceptor_homo_ev=None,
    acceptor_gap_ev=None,
):
    """Efficiency over donor optical gap × LUMO offset for a fixed acceptor.

    Parameters
    ----------
    gaps_ev : array_like, 1-D
        Donor optical gaps (rows of the map). [eV]
    offsets_ev : array_like, 1-D
        ΔLUMO = LUMO_D − LUMO_A (columns of the map). [eV]
    model : DeviceModel or None
        Device model (None: defaults).
    acceptor_lumo_ev : float, default -4.3
        Acceptor LUMO; −4.3 eV is the reference acceptor of [1]_
        ("scharber-reference-acceptor"). [eV]
    acceptor_homo_ev, acceptor_gap_ev : float or None
        Needed only for ``model.absorber == 'both'``. [eV]

    Returns
    -------
    numpy.ndarray, shape (len(gaps_ev), len(offsets_ev))
        PCE [%] with donor LUMO = LUMO_A + ΔLUMO and donor HOMO = donor
        LUMO − gap (optical gap taken as the HOMO–LUMO gap, as in [1]_).
        Cells below the offset threshold are computed too; mask them with
        ``offsets_ev < model.min_delta_lumo_ev`` when plotting.

    References
    ----------
    .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789.
       :doi:`10.1002/adma.200501717`

    Examples
    --------
    >>> import numpy as np
    >>> from screen.device import efficiency_map
    >>> pce = efficiency_map([1.4, 1.5, 2.0], [0.3, 0.4])
    >>> pce.shape
    (3, 2)
    >>> float(round(pce[1, 1], 2))
    9.79
    """
    model = DeviceModel() if model is None else model
    gaps = np.asarray(gaps_ev, dtype=float).reshape(-1)
    offsets = np.asarray(offsets_ev, dtype=float).reshape(-1)
    d_lumo = float(acceptor_lumo_ev) + offsets[None, :]
    d_homo = d_lumo - gaps[:, None]
    out = model.evaluate(
        d_homo,
        d_lumo,
        gaps[:, None],
        acceptor_homo_ev,
        acceptor_lumo_ev,
        acceptor_gap_ev,
    )
    return out["pce_pct"]
