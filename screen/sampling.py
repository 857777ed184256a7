"""Monte-Carlo spread of the device efficiency from level uncertainties.

:func:`sample_pce` draws independent normal errors on the six pair levels
(donor and acceptor HOMO, LUMO, optical gap) and returns, per pair, the mean and
standard deviation of the sampled efficiency, the probability that it beats a
target and whether the point estimate lies outside the central 90 % of the
samples that stay viable (``estimate_on_edge``).  The
sampler uses common random numbers: one table of standard normal
deviates (fixed seed) is shared by every pair, so a pair's result does not
depend on the other pairs, their order or the block size, and differences
between pairs carry less sampling noise.

The efficiency of every sample comes from the device model itself
(:meth:`screen.device.DeviceModel.pce_from_levels`: classification by the
rules of the point estimate — the offsets (:func:`screen.viability.offset_clears`)
and an absorber gap inside the spectrum, 0 < E_g < :data:`screen.viability.GAP_MAX_EV` (4.13 eV, a pre-filter)
with the model's own Jsc written above 0 (:func:`screen.viability.jsc_written`) —, Voc and gap caps, detailed-balance
cap of each sample's own gap, exact below the tables' 0.25 eV), so the spread is
that of the chosen model; a sample that is not viable counts as 0 %.  The work is cut into the steps of
:func:`sample_pce`:

1. :func:`_block_rows` — block size (pairs per block, cache-sized);
2. :func:`_flat_pair` — flattened levels, σ (validated), losses and the missing mask;
3. :func:`_anchors` — per pair, the exact efficiency at the mean levels minus the
   tabulated one (so that σ = 0 reproduces :meth:`DeviceModel.evaluate`);
4. :func:`_pce_samples` — the efficiency samples of one block;
5. :func:`_block_moments` — mean, σ, exceedance probability and the steep-edge verdict of one block.

References
----------
.. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789.
   :doi:`10.1002/adma.200501717`
.. [2] D. Veldman et al., Adv. Funct. Mater. 19 (2009) 1939. :doi:`10.1002/adfm.200801834`
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from screen.device import DeviceModel
from screen.spectrum import as_output, jsc_ma_cm2, sq_limit

__all__ = ["sample_pce", "DEFAULT_SEED", "DEFAULT_N_SAMPLES", "MAX_N_SAMPLES", "CENTRAL_RANGE", "EDGE_TOL_SIGMA",
           "EDGE_TOL_PCT", "jsc_fast", "sq_fast", "voc_fast"]

#: default seed of the sampler (same input → same numbers)
DEFAULT_SEED = 20240601
#: default samples per pair
DEFAULT_N_SAMPLES = 2000
#: most samples per pair a ranking takes (schema ``rank.n_samples`` maximum): one pair's samples sit in memory at
#: once, about ten float arrays of this length in the device kernel plus the 6-row deviate table (~130 MB at 1e6;
#: 1e8 ended in a MemoryError), and 1e6 samples already put a probability within ±0.0005 (1σ), far inside the
#: two decimals written and the level σ's own uncertainty
MAX_N_SAMPLES = 1_000_000
#: what :func:`sample_pce` returns, in the order of :func:`_block_moments`
_OUTPUTS = ("pce_mean_pct", "pce_sigma_pct", "p_above_target", "estimate_on_edge")
#: rows of the normal-deviate table: donor HOMO, donor LUMO, donor gap, acceptor HOMO, acceptor LUMO, acceptor gap
_Z_ROWS = 6

# Tabulated Jsc(E) used only inside the sampler (uniform grid in photon energy,
# linear interpolation).  The sampler anchors every candidate on the exact value
# at its mean gap, so only the *difference* between samples and the mean comes
# from the table; its maximum deviation from the exact integral is checked in
# the tests.
_TABLE_E_MIN_EV = 0.25
_TABLE_E_MAX_EV = 4.50
_TABLE_STEP_EV = 2.5e-4
#: Default block of the sampler in samples (2**14 float64 = 128 kB per working
#: array): the device kernel keeps about ten such arrays alive, which then stay
#: in the CPU cache; measured faster than 2**15 and 2**16 for 10 000 candidates
#: x 2000 samples (benchmarks/rerank.py).
_AUTO_CHUNK_ELEMENTS = 2**14
#: Hard cap on the samples in one block, also for an explicit chunk_size (8 MB).
_MAX_CHUNK_ELEMENTS = 1_000_000


# --------------------------------------------------------------------------- #
# Jsc table
# --------------------------------------------------------------------------- #
@lru_cache(maxsize=1)
def _tables():
    """Jsc at EQE = 1 [mA cm⁻²], the detailed-balance PCE [%] and Voc [V] on a uniform photon-energy grid."""
    n = int(round((_TABLE_E_MAX_EV - _TABLE_E_MIN_EV) / _TABLE_STEP_EV)) + 1
    grid = _TABLE_E_MIN_EV + _TABLE_STEP_EV * np.arange(n)
    out = []
    limit = sq_limit(grid)
    for tab in (np.asarray(jsc_ma_cm2(grid, eqe=1.0), dtype=float), np.asarray(limit["pce_pct"], dtype=float),
                np.asarray(limit["voc_v"], dtype=float)):
        step = np.diff(tab)
        tab.setflags(write=False)
        step.setflags(write=False)
        out.append((tab, step))
    return tuple(out)


def _jsc_table():
    """Jsc at EQE = 1 on the sampler's grid: ``(values, steps)``."""
    return _tables()[0]


def _lookup(table, gap_ev, exact=None) -> np.ndarray:
    """Linear interpolation of a ``(values, steps)`` table at ``gap_ev`` (clipped to the grid); with ``exact``
    (the function the table tabulates), the exact value at a positive gap below the grid.

    Below :data:`_TABLE_E_MIN_EV` the detailed-balance efficiency and Voc fall to zero with the gap (0.13 % at
    0.08 eV against 3.05 % at 0.25 eV), so clipping them there let a sampled narrow gap beat its own limit; such
    samples are few, and their exact values cost little. A gap that is not positive, or NaN, gives NaN, as the exact
    functions do (NaN was an IndexError; a gap ≤ 0 got the table's first value, 68.98 mA cm⁻²).
    """
    tab, step = table
    gap = np.asarray(gap_ev, dtype=float)
    if gap.ndim == 0:  # one gap: a 0-d array cannot take the in-place steps
        return _lookup(table, gap.reshape(1), exact)[0]
    x = (gap - _TABLE_E_MIN_EV) * (1.0 / _TABLE_STEP_EV)
    # one reduction on the sampler's path (its gaps are all positive; min is NaN when any gap is NaN): the masks
    # below cost ~50 ms on a re-rank of 10 000 rows when built for every block
    undefined = bool(gap.size) and not gap.min() > 0
    bad = None
    if undefined:
        with np.errstate(invalid="ignore"):
            bad = ~(gap > 0)
        x = np.where(bad, 0.0, x)
    np.clip(x, 0.0, tab.size - 1 - 1e-9, out=x)
    i = x.astype(np.intp)
    x -= i
    x *= step[i]
    x += tab[i]
    if exact is not None:
        with np.errstate(invalid="ignore"):
            low = gap < _TABLE_E_MIN_EV
            if undefined:
                low &= ~bad
        if low.any():
            x[low] = exact(gap[low])
    if undefined:
        x[bad] = np.nan
    return x


def _sq_pct_exact(gap_ev):
    return np.asarray(sq_limit(gap_ev)["pce_pct"], dtype=float)


def _voc_exact(gap_ev):
    return np.asarray(sq_limit(gap_ev)["voc_v"], dtype=float)


def jsc_fast(gap_ev):
    """Jsc at EQE = 1 [mA cm⁻²]; below the grid the table's first value is exact (the spectrum starts at
    0.31 eV, so every gap below it absorbs every photon); NaN for a gap that is not positive.

    Examples
    --------
    >>> [round(float(v), 2) for v in jsc_fast(np.array([1.34, 0.1]))], np.isnan(jsc_fast(np.array([0.0, np.nan]))).tolist()
    ([35.03, 68.98], [True, True])
    """
    return _lookup(_tables()[0], gap_ev)


def sq_fast(gap_ev):
    """Detailed-balance efficiency [%]: the table, exact below its grid."""
    return _lookup(_tables()[1], gap_ev, _sq_pct_exact)


def voc_fast(gap_ev):
    """Detailed-balance Voc [V]: the table, exact below its grid."""
    return _lookup(_tables()[2], gap_ev, _voc_exact)


# --------------------------------------------------------------------------- #
# Steps of sample_pce
# --------------------------------------------------------------------------- #
def _block_rows(n_samples: int, chunk_size) -> int:
    """Pairs per block: ~2**14 samples by default, at most 1e6 samples for an explicit ``chunk_size``."""
    if chunk_size is None:
        return max(1, _AUTO_CHUNK_ELEMENTS // n_samples)
    if int(chunk_size) < 1:
        raise ValueError(f"sample_pce: chunk_size = {chunk_size}; need at least 1")
    return max(1, min(int(chunk_size), _MAX_CHUNK_ELEMENTS // n_samples))


def _sigma(name, value, shape):
    """One σ input as a flat array of the pair shape (NaN → 0); refuse negative or infinite entries. [eV]"""
    s = np.array(0.0 if value is None else value, dtype=float)
    s = np.where(np.isnan(s), 0.0, s)
    if np.any(s < 0) or not np.all(np.isfinite(s)):
        raise ValueError(
            f"sample_pce: {name} has negative or infinite entries; σ must be finite and >= 0 "
            "(NaN is read as 0)"
        )
    return np.broadcast_to(s, shape).ravel()


@dataclass(frozen=True)
class _FlatPair:
    """Flattened pair levels and σ [eV] in :data:`screen.device.PAIR_LEVELS` order, losses [eV], fill factors,
    missing rows, whether the acceptor counts as an absorber (:meth:`screen.device.DeviceModel.acceptor_absorbs`)."""

    levels: tuple
    sigmas: tuple
    loss: np.ndarray
    ff: np.ndarray
    missing: np.ndarray
    absorbs: np.ndarray
    eqe: np.ndarray


_SIGMA_NAMES = ("donor_homo_sigma_ev", "donor_lumo_sigma_ev", "donor_gap_sigma_ev", "acceptor_homo_sigma_ev",
                "acceptor_lumo_sigma_ev", "acceptor_gap_sigma_ev")


def _flat_pair(model: DeviceModel, levels, shape, sigmas: dict, acceptor_class=None) -> _FlatPair:
    """Flatten the levels, validate every σ, look up the losses and mark rows with a missing level.

    ``sigmas`` maps the six ``*_sigma_ev`` argument names of :func:`sample_pce` to their values.
    """
    flat = tuple(np.ascontiguousarray(np.broadcast_to(m, shape).ravel()) for m in levels)
    checked = tuple(_sigma(name, sigmas[name], shape) for name in _SIGMA_NAMES)
    loss, _pooled = model.loss_ev(acceptor_class)
    loss = np.ascontiguousarray(np.broadcast_to(loss, shape).ravel())
    ff = np.ascontiguousarray(np.broadcast_to(model.ff_of(acceptor_class), shape).ravel())
    missing = model.needed_missing(flat, flat[0].shape)
    absorbs = np.ascontiguousarray(np.broadcast_to(model.acceptor_absorbs(acceptor_class), shape).ravel())
    eqe = np.ascontiguousarray(np.broadcast_to(model.eqe_of(acceptor_class), shape).ravel())
    return _FlatPair(flat, checked, loss, ff, missing, absorbs, eqe)


def _anchors(model: DeviceModel, pair: _FlatPair):
    """Exact-minus-tabulated efficiency at the mean levels [%], the viable rows and the exact efficiency [%]."""
    exact = model.figures(pair.levels, pair.loss, ff=pair.ff, acceptor_absorbs=pair.absorbs, eqe=pair.eqe)
    tab = model.pce_from_levels(pair.levels, pair.loss, ff=pair.ff, jsc_unit=jsc_fast, sq_pct=sq_fast,
                                sq_voc=voc_fast, acceptor_absorbs=pair.absorbs, eqe=pair.eqe)
    corr = np.where(np.isfinite(exact["pce_pct"]) & np.isfinite(tab), exact["pce_pct"] - tab, 0.0)
    return np.asarray(corr, dtype=float), np.asarray(exact["viable"], dtype=bool), np.asarray(exact["pce_pct"])


def _sq_below_ev(model: DeviceModel) -> float:
    """Gap above which the detailed-balance cap cannot bind [eV]: there PCE ≤ E_g · EQE · J_sc(E_g, EQE=1) · factor
    (Voc ≤ the smallest gap ≤ the absorber gap, Jsc ≤ EQE · Jsc at EQE = 1) is below the limit on the whole table."""
    (jt, _), (st, _), _ = _tables()
    grid = _TABLE_E_MIN_EV + _TABLE_STEP_EV * np.arange(jt.size)
    bound = grid * model.eqe_bound * jt * model.pce_factor_pct(model.ff_max)
    binds = np.flatnonzero(bound > st * model.sq_scale * (1 - 1e-9) + 1e-12)
    # below the grid the bound is not checked: the cap applies to every such gap
    return max(float(grid[binds[-1]] + 2 * _TABLE_STEP_EV) if binds.size else 0.0, _TABLE_E_MIN_EV)


def _pce_samples(model: DeviceModel, pair: _FlatPair, a: int, b: int, z, corr, sq_below=np.inf) -> np.ndarray:
    """Efficiency samples [%] of pairs ``a:b`` (rows) × samples (columns); not viable samples are 0."""
    sampled = []
    for level, sigma, zk in zip(pair.levels, pair.sigmas, z):
        s = sigma[a:b, None]
        if np.any(s):
            x = np.multiply(s, zk)
            x += level[a:b, None]
            sampled.append(x)
        else:
            sampled.append(level[a:b, None])
    v = np.array(model.pce_from_levels(sampled, pair.loss[a:b, None], ff=pair.ff[a:b, None], jsc_unit=jsc_fast,
                                       sq_pct=sq_fast, sq_voc=voc_fast, sq_below_ev=sq_below,
                                       acceptor_absorbs=pair.absorbs[a:b, None], eqe=pair.eqe[a:b, None]),
                 dtype=float)
    if v.shape[1] != z.shape[1]:
        v = np.repeat(v, z.shape[1], axis=1)
    v += np.where(v > 0, corr[a:b, None], 0.0)
    np.maximum(v, 0.0, out=v)
    return v


#: the central range of the viable samples' efficiencies the point estimate is held to (``estimate_on_edge``)
CENTRAL_RANGE = (0.05, 0.95)
#: how far the point estimate may lie beyond that range before ``estimate_on_edge``: a quarter of the viable
#: samples' σ, and at least 0.05 percentage points (half the one decimal the console and the report show). An
#: estimate at a cap or plateau its samples share (the loss floor, the detailed-balance cap) lies a few hundredths
#: above their 95th percentile (5 of 1722 viable random pairs of an adversarial review against y6, by 0.003–0.09
#: points): no edge. A yield cliff puts it about a σ away (ΔHOMO 0.003 eV against y6: 6.3 %, 2.0 points or 1.1 σ
#: below the 5th percentile, 8.3 %); 12 of those 1722 pairs, each with an offset below 0.014 eV
EDGE_TOL_SIGMA, EDGE_TOL_PCT = 0.25, 0.05


def _block_moments(v: np.ndarray, target: float, n_samples: int, estimate: np.ndarray):
    """``(mean, sigma, p_above, on_edge)`` per row of a block of samples; ``v`` is overwritten.

    ``mean`` is over all samples (a sample that is not viable counts 0 %); ``sigma`` is the spread of the
    viable samples only (efficiency > 0; every viable sample has Voc, Jsc and FF > 0), ddof = 1, and NaN (not
    known, never 0) when fewer than two are viable; ``p_above`` counts all samples; ``on_edge`` is 1.0 where the
    point ``estimate`` [%] lies outside the viable samples' :data:`CENTRAL_RANGE` by more than
    max(:data:`EDGE_TOL_SIGMA` σ, :data:`EDGE_TOL_PCT`) — more than 95 % of them lie beyond the estimate and that
    margin — else 0.0 (counted, not sorted: a sort of every block cost the sampler about 45 %).  Moments are
    taken about the row's mean, so a constant row gives exactly 0.

    Examples
    --------
    >>> v = np.array([[12.0, 12.5, 13.0, 12.2, 0.0], [6.0, 7.0, 5.0, 6.5, 5.5]])
    >>> _, sigma, _, edge = _block_moments(v, 10.0, 5, np.array([6.3, 6.1]))
    >>> edge.tolist()   # 6.3 % below every working sample of the first row; the second row centres on 6.1 %
    [1.0, 0.0]
    """
    p_above = np.count_nonzero(v > target, axis=1) / n_samples
    ok = v > 0.0
    count = np.count_nonzero(ok, axis=1)
    total = v.sum(axis=1)  # a sample that is not viable is exactly 0
    mean = total / n_samples
    centre = total / np.maximum(count, 1)
    v -= centre[:, None]
    v *= ok
    s2 = np.einsum("ij,ij->i", v, v)
    sigma = np.where(count >= 2, np.sqrt(s2 / np.maximum(count - 1, 1)), np.nan)
    # the estimate against the samples, both about the viable samples' mean
    tol = np.fmax(EDGE_TOL_SIGMA * sigma, EDGE_TOL_PCT)[:, None]
    d = (np.asarray(estimate, dtype=float) - centre)[:, None]
    above = np.count_nonzero(ok & (v > d + tol), axis=1)
    below = np.count_nonzero(ok & (v < d - tol), axis=1)
    share = (1.0 - CENTRAL_RANGE[0]) * count
    on_edge = ((count >= 2) & ((above > share) | (below > share))).astype(float)
    return mean, sigma, p_above, on_edge


# --------------------------------------------------------------------------- #
# The sampler
# --------------------------------------------------------------------------- #
def sample_pce(
    model,
    donor_homo_ev,
    donor_lumo_ev,
    donor_gap_ev,
    acceptor_homo_ev=None,
    acceptor_lumo_ev=None,
    acceptor_gap_ev=None,
    *,
    donor_homo_sigma_ev=0.0,
    donor_lumo_sigma_ev=0.0,
    donor_gap_sigma_ev=0.0,
    acceptor_homo_sigma_ev=0.0,
    acceptor_lumo_sigma_ev=0.0,
    acceptor_gap_sigma_ev=0.0,
    n_samples=DEFAULT_N_SAMPLES,
    seed=DEFAULT_SEED,
    target_pct=10.0,
    chunk_size=None,
    acceptor_class=None,
) -> dict:
    """Monte-Carlo spread of the efficiency from level uncertainties.

    Parameters
    ----------
    model : DeviceModel or None
        Device model (None: defaults).
    donor_homo_ev, donor_lumo_ev, donor_gap_ev : array_like
        Donor levels and optical gap, vacuum scale. [eV]
    acceptor_homo_ev, acceptor_lumo_ev, acceptor_gap_ev : array_like or None
        Acceptor levels and optical gap; HOMO and gap needed for
        ``absorber='both'``. [eV]
    donor_homo_sigma_ev, donor_lumo_sigma_ev, donor_gap_sigma_ev : array_like
        Standard uncertainties of the donor inputs; NaN is read as 0. [eV]
    acceptor_homo_sigma_ev, acceptor_lumo_sigma_ev, acceptor_gap_sigma_ev : array_like
        Standard uncertainties of the acceptor inputs; NaN is read as 0. [eV]
    n_samples : int, default 2000
        Samples per candidate (≥ 2).
    seed : int, default 20240601
        Seed of the :class:`numpy.random.Generator`.
    target_pct : float, default 10.0
        Efficiency threshold for ``p_above_target``. [%]
    chunk_size : int or None, default None
        Candidates processed per block.  None picks about 2**14 samples per
        block (8 candidates at 2000 samples; 128 kB per working array).  An
        explicit value is capped so that a block holds at most 1e6 samples.
        Results do not depend on it.
    acceptor_class : array_like of str or None
        Acceptor class per pair for the fitted model's loss (None: pooled).

    Returns
    -------
    dict of numpy.ndarray
        With the broadcast shape of the inputs:

        - ``pce_mean_pct`` : mean of the sampled efficiencies, a sample that is not viable counting 0 [%]
        - ``pce_sigma_pct`` : standard deviation (ddof=1) of the samples that stay viable -- the spread of
          the estimate if the pair works; how likely it works is ``p_aligned`` of the ranking; NaN (not
          known) when fewer than two samples stay viable, 0 when no σ is given (every sample is the
          estimate) [%]
        - ``p_above_target`` : fraction of all samples with PCE > ``target_pct``
        - ``estimate_on_edge`` : 1.0 where the point estimate lies outside the central 90 % of the samples
          that stay viable (:data:`CENTRAL_RANGE`) by more than max(:data:`EDGE_TOL_SIGMA` σ,
          :data:`EDGE_TOL_PCT`): a steep edge of the model, where the ± describes samples that mostly land
          elsewhere; 0.0 otherwise

        NaN where an input level the model needs is NaN or the pair is not
        viable at its mean levels (no efficiency, so no spread either).

    Notes
    -----
    Each input level gets an independent normal error with its σ;
    correlations (e.g. HOMO and LUMO derived from the same calculation, or a
    gap tied to HOMO−LUMO) are not modelled.  Each sample goes through the
    model's own classification: a sample that is not viable (e.g. an offset
    sampled below its threshold) has efficiency 0.

    One table of standard normal deviates ``z`` (6 × ``n_samples``; rows:
    donor HOMO, donor LUMO, donor gap, acceptor HOMO, acceptor LUMO, acceptor
    gap) is drawn from ``numpy.random.default_rng(seed)`` and every candidate
    uses ``level + σ·z`` (common random numbers).  A candidate's result is
    therefore independent of the other candidates, their order and the chunk
    size, and differences between candidates carry less sampling noise.
    Samples use 0.25 meV-step tables of Jsc and of the detailed-balance
    limit (exact values for a gap below the tables' 0.25 eV); each pair's
    samples are shifted by the exact-minus-tabulated
    efficiency at its mean levels, so σ = 0 reproduces
    :meth:`DeviceModel.evaluate` to rounding error.

    References
    ----------
    .. [1] M. C. Scharber et al., Adv. Mater. 18 (2006) 789.
       :doi:`10.1002/adma.200501717`

    Examples
    --------
    >>> from screen.device import DeviceModel
    >>> from screen.sampling import sample_pce
    >>> m = DeviceModel(model="scharber", absorber="donor", min_delta_lumo_ev=0.0)
    >>> out = sample_pce(m, -5.4, -3.9, 1.5, acceptor_lumo_ev=-4.3, donor_homo_sigma_ev=0.1,
    ...                  acceptor_lumo_sigma_ev=0.1, donor_gap_sigma_ev=0.05, n_samples=4000)
    >>> bool(1.5 < float(out["pce_sigma_pct"]) < 2.5), bool(0.2 < float(out["p_above_target"]) < 0.6)
    (True, True)

    With the published 0.3 eV threshold, samples whose ΔLUMO falls below it
    are not viable (0 %): they lower the mean and the chance of beating the
    target, not the spread of the samples that work:

    >>> m = DeviceModel(model="scharber", absorber="donor")
    >>> out2 = sample_pce(m, -5.4, -3.9, 1.5, acceptor_lumo_ev=-4.3, donor_homo_sigma_ev=0.1,
    ...                   acceptor_lumo_sigma_ev=0.1, donor_gap_sigma_ev=0.05, n_samples=4000)
    >>> bool(out2["pce_mean_pct"] < out["pce_mean_pct"]), bool(out2["p_above_target"] < out["p_above_target"])
    (True, True)
    >>> bool(out2["pce_sigma_pct"] < 1.2 * out["pce_sigma_pct"])
    True
    """
    model = DeviceModel() if model is None else model
    model.check_inputs(acceptor_homo_ev, acceptor_lumo_ev, acceptor_gap_ev, "sample_pce()")
    n_samples = int(n_samples)
    if n_samples < 2:
        raise ValueError(f"sample_pce: n_samples = {n_samples}; need at least 2")
    rows = _block_rows(n_samples, chunk_size)
    levels, shape = model.pair_arrays(donor_homo_ev, donor_lumo_ev, donor_gap_ev, acceptor_homo_ev,
                                      acceptor_lumo_ev, acceptor_gap_ev, "sample_pce()")
    if acceptor_class is not None:
        shape = np.broadcast_shapes(shape, np.shape(acceptor_class))
    pair = _flat_pair(model, levels, shape, dict(zip(_SIGMA_NAMES, (
        donor_homo_sigma_ev, donor_lumo_sigma_ev, donor_gap_sigma_ev, acceptor_homo_sigma_ev,
        acceptor_lumo_sigma_ev, acceptor_gap_sigma_ev))), acceptor_class)
    z = np.random.default_rng(seed).standard_normal((_Z_ROWS, n_samples))
    corr, viable, exact = _anchors(model, pair)
    target = float(target_pct)

    n = pair.loss.size
    out = {key: np.full(n, np.nan) for key in _OUTPUTS}
    todo = viable & ~pair.missing
    fixed = todo & ~np.any(np.vstack(pair.sigmas) > 0, axis=0)  # no uncertainty: every sample is the estimate
    for key, value in zip(_OUTPUTS, (exact, 0.0, (exact > target).astype(float), 0.0)):
        out[key][fixed] = np.broadcast_to(value, exact.shape)[fixed]
    idx = np.flatnonzero(todo & ~fixed)
    sq_below = _sq_below_ev(model)
    for start in range(0, idx.size, rows):
        sel = idx[start:start + rows]
        sub = _FlatPair(tuple(x[sel] for x in pair.levels), tuple(x[sel] for x in pair.sigmas), pair.loss[sel],
                        pair.ff[sel], pair.missing[sel], pair.absorbs[sel], pair.eqe[sel])
        v = _pce_samples(model, sub, 0, sel.size, z, corr[sel], sq_below)
        for key, value in zip(_OUTPUTS, _block_moments(v, target, n_samples, exact[sel])):
            out[key][sel] = value
    return {key: as_output(value.reshape(shape)) for key, value in out.items()}
