"""ASTM G173-03 AM1.5G reference spectrum: photon flux and short-circuit current above a gap.

The spectrum is the hemispherical (global, 37° tilt) table of ASTM G173-03 as
shipped with pvlib.  From it come the integrated incident power, the photon flux
with photon energy at or above an optical gap and the Scharber short-circuit
current density

.. math::

    J_{sc} = \\mathrm{EQE}\\; q \\int_{E \\ge E_g} \\Phi(E)\\, dE .

Everything is vectorised over numpy arrays (broadcasting rules apply); a 0-d
input gives a numpy scalar.  Internally SI units (:mod:`scipy.constants`); names
carry the boundary units (``_ev``, ``_nm``, ``_w_m2``, ``_m2_s``, ``_ma_cm2``).

References
----------
.. [1] ASTM G173-03, "Standard Tables for Reference Solar Spectral
   Irradiances: Direct Normal and Hemispherical on 37° Tilted Surface",
   ASTM International (table as shipped with pvlib).
.. [2] W. F. Holmgren, C. W. Hansen, M. A. Mikofski, "pvlib python: a python
   package for modeling solar energy systems", J. Open Source Softw. 3 (2018)
   884. :doi:`10.21105/joss.00884`
.. [3] M. C. Scharber et al., Adv. Mater. 18 (2006) 789.
   :doi:`10.1002/adma.200501717`
.. [4] W. Shockley, H. J. Queisser, "Detailed balance limit of efficiency of
   p-n junction solar cells", J. Appl. Phys. 32 (1961) 510.
   :doi:`10.1063/1.1736034`
.. [5] S. Rühle, "Tabulated values of the Shockley–Queisser limit for single
   junction solar cells", Sol. Energy 130 (2016) 139.
   :doi:`10.1016/j.solener.2016.02.015`
"""

from __future__ import annotations

import hashlib
import os
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np
from scipy import constants as _c
from scipy.special import lambertw

__all__ = [
    "SPECTRUM_STANDARD",
    "SPECTRUM_COLUMN",
    "ReferenceSpectrum",
    "reference_spectrum",
    "spectrum_cache_path",
    "incident_power_w_m2",
    "gap_to_wavelength_nm",
    "photon_flux_above_gap_m2_s",
    "jsc_ma_cm2",
    "A_M2_TO_MA_CM2",
    "as_output",
    "SQ_TEMPERATURE_K",
    "sq_limit",
    "sq_pce_pct",
    "sq_voc_v",
]

#: Spectrum used by the device model (pvlib key).
SPECTRUM_STANDARD = "ASTM G173-03"
#: Column of the pvlib table: hemispherical irradiance on a 37° tilted surface.
SPECTRUM_COLUMN = "global"
#: Layout of the cached table (:func:`spectrum_cache_path`); a new layout gets a new file name.
_CACHE_FORMAT = 1

_HC_J_M = _c.h * _c.c  # [J m]
#: hc/e in eV nm: λ [nm] = _HC_EV_NM / E [eV].
_HC_EV_NM = _HC_J_M / _c.e * 1e9
#: A m⁻² → mA cm⁻² (1 A m⁻² = 1000 mA / 10 000 cm² = 0.1 mA cm⁻²).
A_M2_TO_MA_CM2 = 0.1


def as_output(x):
    """Numpy scalar for a 0-d array, anything else unchanged (scalar in, scalar out).

    Examples
    --------
    >>> import numpy as np
    >>> type(as_output(np.array(1.5))).__name__, as_output(np.array([1.5])).shape
    ('float64', (1,))
    """
    if isinstance(x, np.ndarray) and x.ndim == 0:
        return x[()]
    return x


# --------------------------------------------------------------------------- #
# Reference spectrum
# --------------------------------------------------------------------------- #
@dataclass(frozen=True)
class ReferenceSpectrum:
    """ASTM G173-03 AM1.5G spectrum with derived photon-flux tables.

    All arrays are read-only and share the wavelength grid of the standard
    (2002 points, 280–4000 nm; 0.5 nm steps below 400 nm, 1 nm to 1700 nm,
    5 nm above).

    Attributes
    ----------
    wavelength_nm : numpy.ndarray
        Wavelength grid of the standard. [nm]
    irradiance_w_m2_nm : numpy.ndarray
        Spectral irradiance, global tilt 37°. [W m⁻² nm⁻¹]
    photon_flux_m2_s_nm : numpy.ndarray
        Spectral photon flux ``irradiance · λ / (h c)``. [m⁻² s⁻¹ nm⁻¹]
    cumulative_photon_flux_m2_s : numpy.ndarray
        Trapezoid integral of the photon flux from the first wavelength up to
        each grid wavelength (first element 0). [m⁻² s⁻¹]
    incident_power_w_m2 : float
        Trapezoid integral of the irradiance over the whole table. [W m⁻²]
    name : str
        Human-readable name of the spectrum.
    """

    wavelength_nm: np.ndarray
    irradiance_w_m2_nm: np.ndarray
    photon_flux_m2_s_nm: np.ndarray
    cumulative_photon_flux_m2_s: np.ndarray
    incident_power_w_m2: float
    name: str = "ASTM G173-03 AM1.5G (global, 37° tilt)"


def spectrum_cache_path(pvlib_version: str | None = None) -> Path | None:
    """File of the cached AM1.5G table for a pvlib version, or None when there is no cache.

    The folder is ``$DASCREEN_CACHE/spectrum`` (an empty value turns the cache
    off), by default ``~/.cache/dascreen/spectrum`` (beside the results store).
    The file name is a hash of the standard, the column, the pvlib version and
    the file layout, so another pvlib gets its own file.

    Parameters
    ----------
    pvlib_version : str, optional
        Default: the installed version (read from the package metadata; pvlib is
        not imported).  ``"absent"`` (pvlib not installed) gives None.

    Examples
    --------
    >>> path = spectrum_cache_path("0.13.1")
    >>> path is None or (path.parent.name, path.suffix) == ("spectrum", ".npy")
    True
    >>> path is None or path != spectrum_cache_path("0.14.0")
    True
    """
    if pvlib_version is None:
        from screen.provenance import package_version

        pvlib_version = package_version("pvlib")
    root = os.environ.get("DASCREEN_CACHE", "~/.cache/dascreen")
    if not root or pvlib_version == "absent":
        return None
    key = f"{SPECTRUM_STANDARD}|{SPECTRUM_COLUMN}|pvlib {pvlib_version}|format {_CACHE_FORMAT}"
    digest = hashlib.sha256(key.encode("utf-8")).hexdigest()[:16]
    return Path(root).expanduser() / "spectrum" / f"am15g-{digest}.npy"


def _table_from_pvlib() -> tuple[np.ndarray, np.ndarray]:
    """Wavelength [nm] and global-tilt irradiance [W m⁻² nm⁻¹] of ASTM G173-03, read by pvlib."""
    from pvlib.spectrum import get_reference_spectra

    table = get_reference_spectra(standard=SPECTRUM_STANDARD)[SPECTRUM_COLUMN]
    return np.asarray(table.index, dtype=float), np.asarray(table.to_numpy(), dtype=float)


def _is_spectrum(lam: np.ndarray, irr: np.ndarray) -> bool:
    """Whether (wavelength, irradiance) is a usable table: one-dimensional, at least two points, a strictly
    increasing grid and finite values."""
    return (lam.ndim == 1 and lam.shape == irr.shape and lam.size >= 2 and bool(np.all(np.diff(lam) > 0))
            and bool(np.all(np.isfinite(lam))) and bool(np.all(np.isfinite(irr))))


def _cached_table(path: Path | None) -> tuple[np.ndarray, np.ndarray] | None:
    """The table stored in ``path``, a (2, n) float64 array (wavelength, irradiance); None if unusable
    (unreadable, another layout, or no spectrum: fewer than two points, a grid that does not increase, a
    value that is not finite)."""
    if path is None:
        return None
    try:
        with open(path, "rb") as fh:
            both = np.load(fh, allow_pickle=False)
    except (OSError, ValueError, EOFError):
        return None
    if both.dtype != np.float64 or both.ndim != 2 or both.shape[0] != 2 or not _is_spectrum(both[0], both[1]):
        return None
    return both[0], both[1]


def _store_table(path: Path | None, lam: np.ndarray, irr: np.ndarray) -> None:
    """Write the table to ``path`` (atomically); a cache that cannot be written is left out."""
    if path is None:
        return
    from screen.io import atomic_path

    try:
        with atomic_path(path) as tmp, open(tmp, "wb") as fh:
            np.save(fh, np.stack([lam, irr]), allow_pickle=False)
    except OSError:
        pass


def _spectrum_table() -> tuple[np.ndarray, np.ndarray]:
    """Wavelength grid [nm] and irradiance [W m⁻² nm⁻¹]: from the cache file, else from pvlib (then cached)."""
    path = spectrum_cache_path()
    table = _cached_table(path)
    if table is None:
        table = _table_from_pvlib()
        _store_table(path, *table)
    return table


@lru_cache(maxsize=1)
def reference_spectrum() -> ReferenceSpectrum:
    """Load the ASTM G173-03 AM1.5G spectrum (pvlib's table) and derive flux tables.

    The result is cached; its arrays are read-only.

    Returns
    -------
    ReferenceSpectrum
        Wavelength [nm], spectral irradiance [W m⁻² nm⁻¹], spectral photon
        flux [m⁻² s⁻¹ nm⁻¹], cumulative photon flux [m⁻² s⁻¹] and the
        integrated incident power [W m⁻²].

    Notes
    -----
    The photon flux per unit wavelength is :math:`E_\\lambda \\lambda / (h c)`
    (λ converted to metres).  The cumulative table is the trapezoid rule on the
    grid of the standard.

    The table (wavelength grid and irradiance) is read from pvlib once and kept
    in a small file of the user's cache (:func:`spectrum_cache_path`, one file
    per pvlib version); later processes read that file and do not import pvlib.
    Only pvlib's table is stored: the flux tables are derived here every time
    (microseconds), so they cannot disagree with this code.  A missing or
    unreadable file falls back to pvlib.

    References
    ----------
    .. [1] ASTM G173-03 Standard Tables for Reference Solar Spectral
       Irradiances, ASTM International.
    .. [2] W. F. Holmgren et al., J. Open Source Softw. 3 (2018) 884.
       :doi:`10.21105/joss.00884`

    Examples
    --------
    >>> from screen.spectrum import reference_spectrum
    >>> spec = reference_spectrum()
    >>> spec.wavelength_nm[[0, -1]]
    array([ 280., 4000.])
    >>> round(spec.incident_power_w_m2, 1)
    1000.4
    """
    lam, irr = _spectrum_table()
    if not _is_spectrum(lam, irr):
        raise RuntimeError(
            f"pvlib reference spectrum {SPECTRUM_STANDARD!r} has no increasing wavelength grid"
        )
    flux = irr * (lam * 1e-9) / _HC_J_M  # [W m^-2 nm^-1] * [m] / [J m] = [m^-2 s^-1 nm^-1]
    cum = np.concatenate(([0.0], np.cumsum(0.5 * (flux[1:] + flux[:-1]) * np.diff(lam))))
    power = float(np.sum(0.5 * (irr[1:] + irr[:-1]) * np.diff(lam)))
    for arr in (lam, irr, flux, cum):
        arr.setflags(write=False)
    return ReferenceSpectrum(
        wavelength_nm=lam,
        irradiance_w_m2_nm=irr,
        photon_flux_m2_s_nm=flux,
        cumulative_photon_flux_m2_s=cum,
        incident_power_w_m2=power,
    )


def incident_power_w_m2() -> float:
    """Integrated irradiance of the AM1.5G reference spectrum.

    Returns
    -------
    float
        Trapezoid integral of the ASTM G173-03 global-tilt table over
        280–4000 nm. [W m⁻²]

    Notes
    -----
    The standard quotes 1000.4 W m⁻²; the trapezoid rule on pvlib's copy of the
    table gives 1000.37 W m⁻².  This value is the default :math:`P_{in}` of
    :class:`screen.device.DeviceModel`, so the efficiency refers to the same spectrum that
    produced :math:`J_{sc}`.

    References
    ----------
    .. [1] ASTM G173-03 Standard Tables for Reference Solar Spectral
       Irradiances, ASTM International.

    Examples
    --------
    >>> from screen.spectrum import incident_power_w_m2
    >>> round(incident_power_w_m2(), 2)
    1000.37
    """
    return reference_spectrum().incident_power_w_m2


def gap_to_wavelength_nm(gap_ev):
    """Absorption-edge wavelength of an optical gap, λ = hc / E.

    Parameters
    ----------
    gap_ev : array_like
        Optical gap. [eV]

    Returns
    -------
    numpy.ndarray
        Edge wavelength; NaN where the gap is not finite or not positive. [nm]

    Examples
    --------
    >>> from screen.spectrum import gap_to_wavelength_nm
    >>> float(round(gap_to_wavelength_nm(1.5), 1))
    826.6
    """
    gap = np.asarray(gap_ev, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        lam = _HC_EV_NM / gap
    return as_output(np.where(np.isfinite(gap) & (gap > 0), lam, np.nan))


def photon_flux_above_gap_m2_s(gap_ev):
    """AM1.5G photon flux with photon energy at or above a gap.

    Parameters
    ----------
    gap_ev : array_like
        Optical gap. [eV]

    Returns
    -------
    numpy.ndarray
        :math:`\\int_{\\lambda \\le hc/E_g} \\Phi_\\lambda\\, d\\lambda`; NaN for
        non-finite or non-positive gaps. [m⁻² s⁻¹]

    Notes
    -----
    The value is exactly the trapezoid integral of the tabulated photon flux
    over the grid points below the edge wavelength λ_g plus the partial last
    interval [λ_i, λ_g], where the irradiance at λ_g is interpolated linearly
    between the neighbouring grid points and converted to photon flux.  Gaps
    above hc/280 nm (4.43 eV) give 0; gaps below hc/4000 nm (0.31 eV) give the
    flux of the whole table.

    References
    ----------
    .. [1] ASTM G173-03 Standard Tables for Reference Solar Spectral
       Irradiances, ASTM International.

    Examples
    --------
    >>> from screen.spectrum import photon_flux_above_gap_m2_s
    >>> flux = photon_flux_above_gap_m2_s([1.1, 1.5, 2.0])
    >>> bool(flux[0] > flux[1] > flux[2])
    True
    """
    spec = reference_spectrum()
    lam = spec.wavelength_nm
    irr = spec.irradiance_w_m2_nm
    flux = spec.photon_flux_m2_s_nm
    cum = spec.cumulative_photon_flux_m2_s

    lam_g = np.asarray(gap_to_wavelength_nm(gap_ev), dtype=float)
    valid = np.isfinite(lam_g)
    lg = np.clip(np.where(valid, lam_g, lam[0]), lam[0], lam[-1])
    i = np.clip(np.searchsorted(lam, lg, side="right") - 1, 0, lam.size - 2)
    frac = (lg - lam[i]) / (lam[i + 1] - lam[i])
    irr_g = irr[i] + frac * (irr[i + 1] - irr[i])
    flux_g = irr_g * (lg * 1e-9) / _HC_J_M
    total = cum[i] + 0.5 * (flux[i] + flux_g) * (lg - lam[i])
    return as_output(np.where(valid, total, np.nan))


def jsc_ma_cm2(gap_ev, eqe=0.65):
    """Short-circuit current density for absorption above a gap (Scharber model).

    Parameters
    ----------
    gap_ev : array_like
        Optical gap of the absorbing material. [eV]
    eqe : array_like, default 0.65
        External quantum efficiency, constant above the gap. [dimensionless]

    Returns
    -------
    numpy.ndarray
        :math:`J_{sc} = \\mathrm{EQE}\\, q \\int_{E \\ge E_g} \\Phi(E)\\, dE`
        under AM1.5G; NaN for non-finite or non-positive gaps. [mA cm⁻²]

    Notes
    -----
    See :func:`photon_flux_above_gap_m2_s` for the integration rule.  With
    ``eqe=1`` this is the Shockley–Queisser short-circuit current.

    References
    ----------
    .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789.
       :doi:`10.1002/adma.200501717`
    .. [2] S. Rühle, "Tabulated values of the Shockley–Queisser limit for
       single junction solar cells", Sol. Energy 130 (2016) 139.
       :doi:`10.1016/j.solener.2016.02.015`

    Examples
    --------
    >>> from screen.spectrum import jsc_ma_cm2
    >>> float(round(jsc_ma_cm2(1.34, eqe=1.0), 1))
    35.0
    >>> float(round(jsc_ma_cm2(1.5), 2))
    18.83
    """
    flux = photon_flux_above_gap_m2_s(gap_ev)
    return as_output(np.asarray(eqe, dtype=float) * _c.e * np.asarray(flux) * A_M2_TO_MA_CM2)


# --------------------------------------------------------------------------- #
# Detailed-balance (Shockley–Queisser) limit
# --------------------------------------------------------------------------- #
#: Cell temperature of the detailed-balance limit (as in Rühle 2016). [K]
SQ_TEMPERATURE_K = 300.0
#: Terms of the series for the black-body photon flux above a gap (x = Eg/kT > 10 in practice).
_BB_TERMS = 6


def _blackbody_j0_a_m2(gap_ev, temperature_k: float) -> np.ndarray:
    r"""Radiative dark saturation current q·Φ_bb(E ≥ Eg) of a flat cell at ``temperature_k``. [A m⁻²]

    :math:`\Phi_{bb} = \frac{2\pi}{h^3 c^2} \int_{E_g}^{\infty} \frac{E^2\,dE}{e^{E/kT} - 1}`
    (emission into the front hemisphere), with the integral written as the
    series :math:`(kT)^3 \sum_k e^{-kx} (x^2/k + 2x/k^2 + 2/k^3)`, x = Eg/kT.
    """
    kt = _c.k * float(temperature_k)
    x = np.asarray(gap_ev, dtype=float) * _c.e / kt
    series = np.zeros_like(x)
    for k in range(1, _BB_TERMS + 1):
        series += np.exp(-k * x) * (x * x / k + 2.0 * x / k**2 + 2.0 / k**3)
    return _c.e * 2.0 * np.pi / (_c.h**3 * _c.c**2) * kt**3 * series


def sq_limit(gap_ev, temperature_k: float = SQ_TEMPERATURE_K) -> dict:
    r"""Detailed-balance (Shockley–Queisser) limit of a single junction under AM1.5G.

    Parameters
    ----------
    gap_ev : array_like
        Absorber band gap (step absorptance: 1 above, 0 below). [eV]
    temperature_k : float, default 300
        Cell temperature. [K]

    Returns
    -------
    dict of numpy.ndarray
        ``jsc_ma_cm2`` [mA cm⁻²], ``voc_v`` [V], ``ff`` [dimensionless] and
        ``pce_pct`` [%] at the maximum power point; NaN for non-finite or
        non-positive gaps; above 4.43 eV (no photons in the table) current,
        Voc and efficiency 0 and ``ff`` NaN.

    Raises
    ------
    ValueError
        A temperature that is not finite and above 0 K.

    Notes
    -----
    :math:`J(V) = J_{sc} - J_0 (e^{qV/kT} - 1)` with :math:`J_{sc}` from
    :func:`jsc_ma_cm2` (EQE = 1) and :math:`J_0 = q\Phi_{bb}` (black-body
    emission of the cell above the gap into the front hemisphere).  The
    maximum power point is exact: with :math:`x = qV/kT`,
    :math:`1 + x_{mp} = W(e\,(1 + J_{sc}/J_0))` (Lambert W).  Incident power
    is the spectrum's own integral (1000.37 W m⁻²).  This reproduces the
    tabulated maximum of [2]_, 33.7 % near 1.34 eV.

    References
    ----------
    .. [1] W. Shockley, H. J. Queisser, J. Appl. Phys. 32 (1961) 510.
       :doi:`10.1063/1.1736034`
    .. [2] S. Rühle, Sol. Energy 130 (2016) 139.
       :doi:`10.1016/j.solener.2016.02.015`

    Examples
    --------
    >>> from screen.spectrum import sq_limit
    >>> out = sq_limit([1.34, 1.9])
    >>> out["pce_pct"].round(1).tolist(), out["voc_v"].round(2).tolist()
    ([33.7, 25.0], [1.08, 1.61])
    """
    if not (np.isfinite(float(temperature_k)) and float(temperature_k) > 0):
        raise ValueError(f"sq_limit: temperature_k = {temperature_k}; give the cell temperature in kelvin, above 0")
    gap = np.asarray(gap_ev, dtype=float)
    valid = np.isfinite(gap) & (gap > 0)
    g = np.where(valid, gap, 1.0)
    jsc = np.asarray(jsc_ma_cm2(g, 1.0), dtype=float) / A_M2_TO_MA_CM2  # [A m-2]
    j0 = _blackbody_j0_a_m2(g, temperature_k)
    vt = _c.k * float(temperature_k) / _c.e
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        ratio = np.where(jsc > 0, jsc / j0, 0.0)
        voc = vt * np.log1p(ratio)
        x = np.real(lambertw(np.e * (1.0 + ratio))) - 1.0
        j_mp = jsc - j0 * np.expm1(x)
        p_mp = np.where(jsc > 0, x * vt * j_mp, 0.0)
        ff = np.where(jsc > 0, p_mp / (voc * jsc), np.nan)
    pce = 100.0 * p_mp / incident_power_w_m2()
    nan = np.nan
    return {
        "jsc_ma_cm2": as_output(np.where(valid, jsc * A_M2_TO_MA_CM2, nan)),
        "voc_v": as_output(np.where(valid, voc, nan)),
        "ff": as_output(np.where(valid, ff, nan)),
        "pce_pct": as_output(np.where(valid, pce, nan)),
    }


def sq_pce_pct(gap_ev, temperature_k: float = SQ_TEMPERATURE_K):
    """Detailed-balance efficiency limit for a gap (see :func:`sq_limit`). [%]

    References
    ----------
    .. [1] S. Rühle, Sol. Energy 130 (2016) 139. :doi:`10.1016/j.solener.2016.02.015`

    Examples
    --------
    >>> from screen.spectrum import sq_pce_pct
    >>> float(round(sq_pce_pct(1.34), 1))
    33.7
    """
    return sq_limit(gap_ev, temperature_k)["pce_pct"]


def sq_voc_v(gap_ev, temperature_k: float = SQ_TEMPERATURE_K):
    """Detailed-balance open-circuit voltage for a gap (see :func:`sq_limit`): the largest Voc a cell of
    that gap can reach under AM1.5G. [V]

    References
    ----------
    .. [1] S. Rühle, Sol. Energy 130 (2016) 139. :doi:`10.1016/j.solener.2016.02.015`

    Examples
    --------
    >>> from screen.spectrum import sq_voc_v
    >>> float(round(sq_voc_v(1.34), 2))
    1.08
    """
    return sq_limit(gap_ev, temperature_k)["voc_v"]
