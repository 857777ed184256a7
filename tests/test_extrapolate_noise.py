"""Labels and spreads of chain-limit fits on noisy oligomer series (screen.extrapolate).

The series are generated: 2.0 + 1.5/n (a 1/n truth, the form that Gierschner, Cornil, Egelhaaf, Adv. Mater. 19
(2007) 173, doi:10.1002/adma.200600277, note saturating fits may miss) with Gaussian noise of 10 meV, the size of
SCF/geometry noise between oligomers (common practice for GFN2-xTB values, from memory), and Meier's exponential,
Meier, Stalmach, Kolshorn, Acta Polym. 48 (1997) 379 (doi:10.1002/actp.1997.010480905). The expected limits are
those of the generating forms, so they are exact.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from screen.extrapolate import exponential_fit, extrapolate

#: a numerical reviewer's reproduction: 2.0 + 1.5/n, n = 1-6, with 10 meV noise (true limit 2.0 eV)
REFEREE = [3.515, 2.749, 2.478, 2.395, 2.288, 2.258]


def test_limit_moved_onto_the_longest_oligomer_of_a_moving_series_is_poor_with_a_spread():
    # the exponential limit (2.268 eV) lies 0.010 eV on the wrong side of the hexamer, within its RMS, and is moved
    # onto it; the Kuhn fit is just over the RMS tolerance; the last step, -0.030 eV after -0.107 eV, is not within
    # the 0.025 eV of a series that has stopped: the limit 2.258 eV claims a saturation the data do not show
    fit = extrapolate(np.arange(1, 7), REFEREE)
    raw, rms = exponential_fit(np.arange(1, 7), REFEREE)
    assert fit.method == "exponential" and fit.limit_ev == 2.258  # the value is unchanged: only label and spread
    assert fit.quality == "poor" and "moved onto it" in fit.reason and "but it has not" in fit.reason
    assert fit.spread_ev >= abs(raw - 2.258) + rms > 0.0
    # 1/√3 of the distance to the 1/n limit (2.108 eV from the last two points): 0.150/√3 = 0.087 eV
    assert fit.spread_ev == pytest.approx(0.150 / np.sqrt(3.0), abs=1e-3)
    assert abs(fit.limit_ev - 2.0) <= 3 * fit.spread_ev  # the true limit within 3 spreads


def test_limit_on_the_longest_oligomer_of_a_stopped_series_stays_good():
    # steps -0.021 and -0.009 eV: both within 0.025 eV, the series has stopped; exponential truth 1.8 eV
    e = [2.991, 2.115, 1.882, 1.833, 1.812, 1.803]
    fit = extrapolate(np.arange(1, 7), e)
    assert fit.method == "exponential" and fit.limit_ev == 1.803 and fit.quality == "good" and fit.reason == ""
    from screen.extrapolate import pinned_reason

    assert pinned_reason(e, 1.8057, 0.01, 1.758) == ("", 0.0)


def test_noisy_one_over_n_series_is_never_good_at_the_longest_oligomer_with_spread_zero():
    # 200 draws of the reviewer's setting: no 'good' label with the limit on the longest oligomer and spread 0 on a
    # series that has not stopped, and 'good' rows off by more than max(3 spread, 0.05 eV) are rare (HEAD of 2026-12-05: 7 and 15 of 200; with the rule 0 and 8)
    rng = np.random.default_rng(7)
    n = np.arange(1, 7)
    pinned_good = off = 0
    for _ in range(200):
        e = 2.0 + 1.5 / n + rng.normal(0.0, 0.010, n.size)
        fit = extrapolate(n, e)
        steps = np.abs(np.diff(e[-3:]))
        if fit.quality == "good" and fit.limit_ev == e[-1] and fit.spread_ev == 0.0 and steps.max() > 0.025:
            pinned_good += 1
        if fit.quality == "good" and abs(fit.limit_ev - 2.0) > max(3 * fit.spread_ev, 0.05):
            off += 1
    assert pinned_good == 0
    assert off <= 10


@pytest.mark.parametrize("n, e, repeated", [([1, 2, 2], [3.0, 2.6, 2.5], "2"),
                                            ([1, 2, 3, 3], [3.0, 2.6, 2.4, 2.41], "3"),
                                            ([3, 1, 2, 1], [2.4, 3.0, 2.6, 3.01], "1")])
def test_repeated_n_is_refused_with_the_repeated_value(n, e, repeated):
    # a repeated n made the two-point 1/n fit degenerate (numpy RankWarning) and the limit meaningless, yet 'good'
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no RankWarning on the way to the error
        with pytest.raises(ValueError, match=rf"repeats n = {repeated}; give each oligomer length once"):
            extrapolate(n, e)


def test_unsorted_distinct_n_is_still_accepted():
    fit = extrapolate([4, 1, 3, 2], [2.3, 3.0, 2.4, 2.6])
    assert fit.n_points == 4 and fit.candidates["longest"] == 2.3
