"""The device formula shared by :meth:`screen.device.DeviceModel.evaluate` and the Monte-Carlo sampler.

:func:`pair_terms` computes, from the six pair levels, the offsets, the
absorber gap, the model's Voc before any cap and the short-circuit current
(both models of :mod:`screen.device`), used by the flagged path
(:meth:`screen.device.DeviceModel.figures`); :func:`pce_samples` computes the
same efficiency with in-place operations and the viability rules written as
plain comparisons (no flags), fast enough for 10 000 pairs × 2000 samples.
The tests check that both agree.

References
----------
.. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789. :doi:`10.1002/adma.200501717`
.. [2] D. Veldman et al., Adv. Funct. Mater. 19 (2009) 1939. :doi:`10.1002/adfm.200801834`

Examples
--------
>>> import numpy as np
>>> from screen.device import DeviceModel
>>> m = DeviceModel(model="scharber", absorber="donor")
>>> t = pair_terms(m, [np.array(-5.4), np.array(-3.9), np.array(1.5), np.array(-6.0), np.array(-4.3),
...                    np.array(2.0)], np.array(0.3))
>>> float(round(t.voc_raw, 3)), float(round(t.jsc, 2))
(0.8, 18.83)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from screen.devicepars import slope_loss
from screen.spectrum import as_output, jsc_ma_cm2, sq_voc_v
from screen.viability import CurrentTerms, gap_valid, jsc_written, offset_clears

__all__ = ["PairTerms", "pair_terms", "pce_samples", "generation_yield", "voc_v", "gap_floor"]


def generation_yield(delta, scale: float):
    """Charge-generation yield 1 − exp(−Δ/Δ0) for Δ > 0, else 0; 1 everywhere for Δ0 = 0 (step model).

    Examples
    --------
    >>> generation_yield(np.array([-0.1, 0.0, 0.05, 1.0]), 0.05).round(3).tolist()
    [0.0, 0.0, 0.632, 1.0]
    """
    if scale <= 0:
        return 1.0
    with np.errstate(invalid="ignore", over="ignore"):
        return np.where(delta > 0, -np.expm1(-np.maximum(delta, 0.0) / scale), 0.0)


@dataclass(frozen=True)
class PairTerms:
    """Offsets, gaps [eV], Voc before caps [V], Jsc [mA cm⁻²] and the voltage loss applied [eV] of pairs
    (see :func:`pair_terms`); ``current``: the Jsc with its factors for the current rule
    (:class:`screen.viability.CurrentTerms`)."""

    delta_lumo: np.ndarray
    delta_homo: np.ndarray
    absorber_gap: np.ndarray
    gap_cap: np.ndarray
    voc_raw: np.ndarray
    jsc: np.ndarray
    loss: np.ndarray | float = 0.0
    voc_cap: np.ndarray | float = np.nan
    floored: np.ndarray | bool = False
    current: CurrentTerms | None = None


def _slope(model) -> tuple[float, float, float, float]:
    """``(loss_slope, ect_ref_ev, ect_min_ev, ect_max_ev)`` of the fitted model (slope 0 for Scharber's rule or a
    fixed ``loss_v``)."""
    p = model.parameters
    if model.model == "scharber" or getattr(model, "loss_v", None) is not None or p is None:
        return 0.0, 0.0, -np.inf, np.inf
    return (float(getattr(p, "loss_slope", 0.0)), float(getattr(p, "ect_ref_ev", 0.0)),
            float(getattr(p, "ect_min_ev", -np.inf)), float(getattr(p, "ect_max_ev", np.inf)))


def gap_floor(model) -> float:
    """The fitted model's floor on E_g − qVoc [eV] (:attr:`FittedParameters.gap_loss_min_ev`); 0 for Scharber's rule
    or a fixed ``loss_v``."""
    p = model.parameters
    if model.model == "scharber" or getattr(model, "loss_v", None) is not None or p is None:
        return 0.0
    return float(getattr(p, "gap_loss_min_ev", 0.0))


def voc_limit(gap_cap, sq_voc=None):
    """The largest Voc a pair may get: the detailed-balance Voc of its smallest optical gap (never above the gap;
    Rühle 2016). [V]

    Examples
    --------
    >>> voc_limit(np.array([1.34, 2.0])).round(2).tolist()
    [1.08, 1.7]
    """
    sq_voc = sq_voc_v if sq_voc is None else sq_voc
    return np.fmin(gap_cap, sq_voc(gap_cap))


#: slack on the margin within which the detailed-balance Voc may bind (covers table interpolation) [eV]
_SQ_VOC_SLACK_EV = 0.005


def _positive(gap):
    """The gap where it is a positive number, NaN elsewhere (an invalid gap never caps Voc at 0)."""
    with np.errstate(invalid="ignore"):
        return np.where(gap > 0, gap, np.nan)


def _safe_gap(gap):
    """The gap, or 2 eV where it is not a positive number (placeholder that keeps NaN out of tables)."""
    with np.errstate(invalid="ignore"):
        return np.where(np.isfinite(gap) & (gap > 0), gap, 2.0)


def pair_terms(model, levels, loss_ev, jsc_unit=None, sq_voc=None, *, eqe=None) -> PairTerms:
    """Offsets, absorber gap, uncapped Voc and Jsc of pairs for ``model`` (a :class:`~screen.device.DeviceModel`).

    Parameters
    ----------
    model : screen.device.DeviceModel
    levels : sequence of numpy.ndarray
        Donor HOMO, LUMO, gap, acceptor HOMO, LUMO, gap (broadcastable). [eV]
    loss_ev : numpy.ndarray
        Voltage loss per pair. [eV]
    jsc_unit : callable or None
        Jsc at EQE = 1 as a function of the gap [mA cm⁻²]; None: exact.
    sq_voc : callable or None
        Detailed-balance Voc of a gap [V]; None: exact (:func:`screen.spectrum.sq_voc_v`).
    eqe : numpy.ndarray or None
        EQE at large offsets per pair (broadcastable); None uses ``model.value('eqe')``.

    Returns
    -------
    PairTerms
        ``voc_raw`` is :math:`E_{LUMO}^A - E_{HOMO}^D - V_{loss}` (scharber) or
        :math:`\\min(E_{LUMO}^A - E_{HOMO}^D, E_g^{min}) - \\Delta E_{loss}`
        (fitted); ``jsc`` is the model's current whether the pair is viable or
        not (callers apply the classification); ``loss`` is the loss actually applied (the class loss,
        grown with E_CT when the fitted model has a loss slope); ``voc_cap`` is :func:`voc_limit` of the
        smallest optical gap of the pair; ``current`` the same Jsc with every yield 1, with the LUMO
        offset's yield 1 and with the HOMO offset's yield 1 (:func:`screen.viability.dark_current` names the
        factor that leaves a pair no written current).
    """
    jsc_unit = (lambda g: jsc_ma_cm2(g, 1.0)) if jsc_unit is None else jsc_unit
    d_homo, d_lumo, d_gap, a_homo, a_lumo, a_gap = levels
    delta_lumo, delta_homo = d_lumo - a_lumo, d_homo - a_homo
    interface = a_lumo - d_homo  # |HOMO_D| - |LUMO_A| [eV]
    gap_cap = np.fmin(_positive(d_gap), _positive(a_gap))  # smallest (valid) optical gap of the pair
    both = model.absorber == "both"
    g_lo = np.minimum(d_gap, a_gap) if both else d_gap
    floored = False
    if model.model == "scharber":
        voc_raw = interface - loss_ev
    else:
        e_ct = np.where(np.isnan(interface), np.nan, np.fmin(interface, gap_cap))
        slope, ref, lo, hi = _slope(model)
        loss_ev = slope_loss(loss_ev, e_ct, slope, ref, lo, hi)  # grows with E_CT in the fitted range, ≥ 0
        voc_raw = e_ct - loss_ev  # E_CT - loss (Veldman et al. 2009)
        floor = gap_floor(model)
        if floor > 0:  # never less total loss against the gap than any fitted device
            with np.errstate(invalid="ignore"):
                floored = voc_raw > gap_cap - floor
            voc_raw = np.where(floored, gap_cap - floor, voc_raw)
    scale = model.offset_scale_ev
    eqe = model.value("eqe") if eqe is None else np.asarray(eqe, dtype=float)
    eta_d = generation_yield(delta_lumo, scale)
    if both:
        eta_a = generation_yield(delta_homo, scale)
        j_lo, j_hi = jsc_unit(_safe_gap(g_lo)), jsc_unit(_safe_gap(np.maximum(d_gap, a_gap)))
        if scale <= 0:
            jsc = eqe * j_lo
            current = CurrentTerms(jsc, jsc, jsc, jsc)
        else:
            donor_lower = d_gap <= a_gap

            def both_jsc(e_d, e_a):
                return eqe * ((j_lo - j_hi) * np.where(donor_lower, e_d, e_a) + j_hi * 0.5 * (e_d + e_a))

            jsc = both_jsc(eta_d, eta_a)
            current = CurrentTerms(jsc, eqe * j_lo, both_jsc(1.0, eta_a), both_jsc(eta_d, 1.0))
    else:
        photons = eqe * jsc_unit(_safe_gap(g_lo))
        jsc = photons * eta_d
        current = CurrentTerms(jsc, photons, photons, jsc)  # the acceptor's excitons do not count
    return PairTerms(delta_lumo, delta_homo, g_lo, gap_cap, voc_raw, jsc, loss_ev, voc_limit(gap_cap, sq_voc), floored,
                     current)


def pce_samples(model, levels, loss_ev, jsc_unit, sq_pct, sq_below_ev: float = np.inf, *, ff=None,
                sq_voc=None, return_aligned: bool = False, eqe=None):
    """Efficiency [%] of (sampled) pair levels, 0 where a sample is not viable (no flags).

    Parameters
    ----------
    model : screen.device.DeviceModel
    levels : sequence of numpy.ndarray
        The six pair levels (broadcastable, e.g. pairs × samples). [eV]
    loss_ev : numpy.ndarray
        Voltage loss per pair. [eV]
    jsc_unit, sq_pct : callable
        Jsc at EQE = 1 [mA cm⁻²] and the detailed-balance PCE [%] of a gap.
    sq_below_ev : float
        Apply the detailed-balance cap only to absorber gaps below this (the
        caller has shown that it cannot bind above); ``inf`` = everywhere. [eV]
    ff : numpy.ndarray or None
        Fill factor per pair (broadcastable); None uses ``model.value('ff')``.
    eqe : numpy.ndarray or None
        EQE at large offsets per pair (broadcastable); None uses ``model.value('eqe')``.
    sq_voc : callable or None
        Detailed-balance Voc of a gap [V]; None: exact (:func:`screen.spectrum.sq_voc_v`).
    return_aligned : bool
        Also return the mask of the samples that pass every rule but the current one (for the donor-absorber
        view of a pair whose acceptor does not count as an absorber, :meth:`screen.device.DeviceModel.pce_from_levels`).

    Returns
    -------
    numpy.ndarray, or (numpy.ndarray, numpy.ndarray of bool) with ``return_aligned``

    Notes
    -----
    Same formula as :func:`pair_terms` and the same rules as
    :func:`screen.viability.classify` (type II with ΔHOMO unchecked when NaN,
    offsets at their thresholds: :func:`screen.viability.offset_clears`; an absorber gap inside
    the spectrum: :func:`screen.viability.gap_valid`; Voc > 0; the model's Jsc written above 0:
    :func:`screen.viability.jsc_written`), written
    with in-place operations for the sampler.  Voc is capped at the
    detailed-balance Voc of the smallest gap of the pair (:func:`voc_limit`);
    a sample with a level the model needs missing (:meth:`screen.device.DeviceModel.needed_missing`: with
    both absorbing also the acceptor HOMO and gap) or whose efficiency is not a number is not viable (0,
    never the detailed-balance limit that caps it).
    """
    sq_voc = sq_voc_v if sq_voc is None else sq_voc
    d_homo, d_lumo, d_gap, a_homo, a_lumo, a_gap = (np.asarray(x, dtype=float) for x in levels)
    shape = np.broadcast_shapes(*(x.shape for x in (d_homo, d_lumo, d_gap, a_homo, a_lumo, a_gap)),
                                np.shape(loss_ev))
    min_l = model.value("min_delta_lumo_ev")
    min_h = model.value("min_delta_homo_ev") if model.check_homo_offset else 0.0  # type II is always required
    both = model.absorber == "both"
    dl = np.subtract(d_lumo, a_lumo, out=np.empty(shape))
    ok = offset_clears(dl, min_l)
    # a level the model needs is missing: not viable (with both absorbing the acceptor HOMO and gap are needed, so
    # a NaN ΔHOMO is unchecked only where the model does not need it)
    ok &= ~model.needed_missing((d_homo, d_lumo, d_gap, a_homo, a_lumo, a_gap), shape)
    dh = None
    if both or not np.all(np.isnan(a_homo)):
        dh = np.subtract(d_homo, a_homo, out=np.empty(shape))
        ok &= offset_clears(dh, min_h) | np.isnan(dh)  # an unknown acceptor HOMO is not checked (classify)
    cap = np.fmin(_positive(d_gap), _positive(a_gap), out=np.empty(shape))  # smallest valid gap of the pair
    g_lo = np.broadcast_to(np.minimum(d_gap, a_gap) if both else d_gap, shape)  # absorber gap (may be invalid)
    ok &= gap_valid(g_lo)  # a gap sampled at or below 0 or beyond the spectrum absorbs nothing (classify)
    voc = np.subtract(a_lumo, d_homo, out=np.empty(shape))  # interface gap
    slope, ref, lo, hi = (0.0, 0.0, -np.inf, np.inf)
    if np.isnan(voc).any():  # a missing HOMO_D or LUMO_A: not viable (fmin below would hide it)
        ok &= ~np.isnan(voc)
    if model.model != "scharber":
        np.fmin(voc, cap, out=voc)  # E_CT
        slope, ref, lo, hi = _slope(model)
    if slope:  # E_CT - max(loss + slope (clip(E_CT) - ref), 0) = min(E_CT - slope clip(E_CT) + (slope ref - loss), E_CT)
        lowered = np.clip(voc, lo, hi)
        lowered *= -slope
        lowered += voc
        lowered += slope * ref - np.asarray(loss_ev, dtype=float)
        np.fmin(lowered, voc, out=voc)
        del lowered
    else:
        voc -= loss_ev
    floor = gap_floor(model)
    if floor > 0:
        np.fmin(voc, cap - floor, out=voc)
    np.fmin(voc, cap, out=voc)
    # gap − detailed-balance Voc grows with the gap (checked on a 0.5 meV grid, 0.05–4.43 eV), so the cap can bind
    # only where cap − voc is below that difference at the largest gap of the block
    top = float(np.nanmax(cap)) if cap.size and not np.all(np.isnan(cap)) else np.nan
    margin = top - float(sq_voc(np.array([top]))[0]) + _SQ_VOC_SLACK_EV if np.isfinite(top) else -np.inf
    with np.errstate(invalid="ignore"):
        near = np.subtract(cap, voc) < margin
    if near.any():
        voc[near] = np.fmin(voc[near], voc_limit(cap[near], sq_voc))
    ok &= voc > 0
    scale = model.offset_scale_ev
    if scale > 0:  # dl, dh become the negated yields -(1 - exp(-Δ/Δ0)) = expm1(-Δ/Δ0)
        for arr in (dl,) + ((dh,) if both else ()):
            np.maximum(arr, 0.0, out=arr)
            arr *= -1.0 / scale
            np.expm1(arr, out=arr)
    safe_lo = np.where(ok, g_lo, 2.0)
    jsc = jsc_unit(safe_lo)
    if both and scale > 0:
        j_hi = jsc_unit(np.where(ok, np.fmax(d_gap, a_gap), 2.0))
        eta_lo = np.where(np.broadcast_to(d_gap <= a_gap, shape), dl, dh)
        jsc -= j_hi
        jsc *= eta_lo
        dl += dh
        dl *= 0.5
        j_hi *= dl
        jsc += j_hi
        jsc *= -1.0
    elif scale > 0:
        jsc *= dl
        jsc *= -1.0
    eqe = model.value("eqe") if eqe is None else np.asarray(eqe, dtype=float)
    written = jsc_written(np.multiply(jsc, eqe))  # the model's Jsc written above 0 (classify: dark_current)
    voc *= jsc
    voc *= eqe * model.pce_factor_pct(ff)
    # before the detailed-balance cap: np.fmin would put the limit in place of a NaN efficiency
    if not np.isfinite(voc).all():  # not a number: not viable, 0 (NaN × 0 would stay NaN)
        ok &= np.isfinite(voc)
        np.nan_to_num(voc, copy=False, nan=0.0, posinf=0.0, neginf=0.0)
    aligned = ok.copy() if return_aligned else None
    ok &= written
    if np.isfinite(sq_below_ev):
        low = ok & (safe_lo < sq_below_ev)
        if low.any():
            voc[low] = np.fmin(voc[low], sq_pct(safe_lo[low]))
    else:
        np.fmin(voc, sq_pct(safe_lo), out=voc)
    voc *= ok
    return (voc, aligned) if return_aligned else voc


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
