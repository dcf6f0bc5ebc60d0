"""Thresholds, look-elsewhere correction, p-values, efficiency (exact binomial limits) and alpha_min.

The null statistics here are correlated Gaussian draws standing in for S_max curves; the
checks are the binomial behaviour the method promises (common practice)."""

import numpy as np
import pytest

from topology import significance as sig
from topology.errors import InputError


def _null_curves(rng, n, n_radius=30, corr=0.8):
    # AR(1) correlation along radius, mean and spread growing with radius like real S_max
    z = rng.standard_normal((n, n_radius))
    for i in range(1, n_radius):
        z[:, i] = corr * z[:, i - 1] + np.sqrt(1 - corr**2) * z[:, i]
    return 0.2 + 0.01 * np.arange(n_radius) + 0.05 * z


def test_whole_range_threshold_has_nominal_false_alarm_on_fresh_skies():
    rng = np.random.default_rng(11)
    radii = np.arange(5, 35)
    calib = _null_curves(rng, 600)
    th = sig.thresholds(radii, calib, 0.05)
    fresh = _null_curves(rng, 20000)
    rate = (fresh > th.whole_range).any(axis=1).mean()
    # binomial error of the calibration (N=600) dominates: sqrt(p(1-p)/600) = 0.0089
    assert rate == pytest.approx(0.05, abs=3 * np.sqrt(0.05 * 0.95 / 600))
    # the whole-range curve is stricter than the local one (look-elsewhere)
    assert np.all(th.whole_range >= th.local)
    assert th.local_level < 0.05


def test_local_threshold_rate_per_radius():
    rng = np.random.default_rng(3)
    radii = np.arange(10, 20)
    calib = _null_curves(rng, 2000, n_radius=10)
    th = sig.thresholds(radii, calib, 0.1)
    fresh = _null_curves(rng, 20000, n_radius=10)
    rate = (fresh > th.local).mean(axis=0)
    assert np.all(np.abs(rate - 0.1) < 4 * np.sqrt(0.1 * 0.9 / 2000))


def test_p_values_with_plus_one_correction():
    null = np.arange(1, 100, dtype=float)[:, None]  # 99 skies, one radius
    # a value above every null sky: p = 1/100, never zero (Davison & Hinkley 1997)
    assert sig.local_p_values(np.array([[1000.0]]), null)[0, 0] == pytest.approx(0.01)
    # a value equal to the 90th largest: 10 of 99 are >= it
    assert sig.local_p_values(np.array([[90.0]]), null)[0, 0] == pytest.approx(11 / 100)


def test_global_p_value_uniform_under_null():
    rng = np.random.default_rng(5)
    null = _null_curves(rng, 300, n_radius=12)
    fresh = _null_curves(rng, 400, n_radius=12)
    p = np.array([sig.global_p_value(f, null) for f in fresh])
    # uniform: about 10% below 0.1, 50% below 0.5
    assert np.mean(p <= 0.1) == pytest.approx(0.1, abs=0.05)
    assert np.mean(p <= 0.5) == pytest.approx(0.5, abs=0.08)


def test_required_null_count_and_error():
    assert sig.required_null_count(0.05) == 39
    assert sig.required_null_count(0.01) == 199
    with pytest.raises(InputError, match="need at least 39"):
        sig.thresholds([10.0], np.zeros((20, 1)), 0.05)


def test_efficiency_and_alpha_min():
    radii = np.array([10, 20, 30, 40, 50, 60], float)
    det = np.zeros((20, 6), bool)
    det[:, 3:] = True  # always found at >= 40 deg
    det[:19, 2] = True  # 95% at 30 deg
    det[:10, 1] = True  # 50% at 20 deg
    eff = sig.efficiency(det, 0.95)
    assert eff.fraction.tolist() == [0, 0.5, 0.95, 1, 1, 1]
    assert eff.recovered.tolist() == [0, 10, 19, 20, 20, 20]
    # check: Clopper & Pearson 1934, Biometrika 26, 404: n of n gives the one-sided lower limit
    # (1 - c)^(1/n) = 0.05^(1/20) = 0.8609, 0 of n the upper limit 1 - 0.05^(1/20) = 0.1391
    assert eff.lower[3] == pytest.approx(0.05 ** (1 / 20), rel=1e-9)
    assert eff.upper[0] == pytest.approx(1 - 0.05 ** (1 / 20), rel=1e-9)
    assert eff.lower[0] == 0.0 and eff.upper[3] == 1.0
    # the point estimate reaches 0.95 at 30 deg, the lower limit nowhere: 20 of 20 give 0.861
    assert sig.alpha_min(radii, eff.fraction, 0.95) == 30.0
    assert sig.alpha_min(radii, eff.lower, 0.95) is None
    assert sig.alpha_min(radii, eff.lower, 0.85) == 40.0
    # a dip above the crossing moves alpha_min up to where efficiency holds for good
    eff2 = np.array([1, 1, 0.5, 1, 1, 1])
    assert sig.alpha_min(radii, eff2, 0.95) == 40.0
    assert sig.alpha_min(radii, np.array([1, 1, 1, 1, 1, 0.2]), 0.95) is None


def test_clopper_pearson_limits_against_closed_forms_and_scipy():
    from scipy.stats import beta, binom

    # check: Clopper & Pearson 1934, Biometrika 26, 404; 4 of 4 at one-sided 95%: 0.05^(1/4) = 0.4729
    lo, hi = sig.clopper_pearson(np.array([4]), 4, 0.95)
    assert lo[0] == pytest.approx(0.4729, abs=1e-4) and hi[0] == 1.0
    for n in (1, 5, 11, 59):
        lo, hi = sig.clopper_pearson(np.array([0, n]), n, 0.95)
        # check: Clopper & Pearson 1934, Biometrika 26, 404: 0 of n, upper = 1 - alpha^(1/n)
        assert hi[0] == pytest.approx(1 - 0.05 ** (1 / n), rel=1e-9)
        # check: Clopper & Pearson 1934, Biometrika 26, 404: n of n, lower = alpha^(1/n)
        assert lo[1] == pytest.approx(0.05 ** (1 / n), rel=1e-9)
    # check: Clopper & Pearson 1934, Biometrika 26, 404: the limits are beta quantiles, and at
    # the lower limit P(X >= k) = 1 - c, at the upper P(X <= k) = 1 - c (binomial tails by scipy)
    k = np.array([1, 3, 7, 12])
    lo, hi = sig.clopper_pearson(k, 20, 0.9)
    assert np.allclose(lo, beta.ppf(0.1, k, 20 - k + 1)) and np.allclose(hi, beta.ppf(0.9, k + 1, 20 - k))
    assert np.allclose(binom.sf(k - 1, 20, lo), 0.1) and np.allclose(binom.cdf(k, 20, hi), 0.1)


def test_injections_needed_for_a_reachable_level():
    # n of n gives (1 - c)^(1/n): 0.95 at 95% needs ln 0.05 / ln 0.95 = 58.4 -> 59 injections
    assert sig.injections_needed(0.95, 0.95) == 59
    assert sig.best_lower_limit(59, 0.95) >= 0.95 > sig.best_lower_limit(58, 0.95)
    assert sig.injections_needed(0.9, 0.95) == 29  # ln 0.05 / ln 0.9 = 28.4
    assert sig.injections_needed(0.5, 0.95) == 5  # 0.05^(1/5) = 0.549, 0.05^(1/4) = 0.473


def test_small_calibration_keeps_nominal_rate_on_average():
    # With the fewest null skies allowed (19 at p = 0.1) and 30 correlated radii, the realised
    # whole-range false-alarm rate, averaged over calibrations, is the nominal one: the
    # standardised maximum is exchangeable, so a fresh sky exceeds the 2nd largest of 19 with
    # probability 2/20 (order statistics; common practice).
    rng = np.random.default_rng(2)
    rates = []
    for _ in range(150):
        th = sig.thresholds(np.arange(30), _null_curves(rng, 19), 0.1)
        fresh = _null_curves(rng, 200)
        rates.append((fresh > th.whole_range).any(axis=1).mean())
    assert np.mean(rates) == pytest.approx(0.1, abs=0.02)
