"""From search statistics on null and injected skies to thresholds, p-values, detection
efficiency and alpha_min.

Inputs are plain arrays: ``smax_null`` of shape (n_null, n_radius) holds the largest S found at
each radius of each null (isotropic) sky, searched with the same settings as the data.

* Local threshold at radius alpha: the (1 - p) quantile of the null S_max(alpha).
* Look-elsewhere: the whole-range threshold curve at false-alarm probability p is
  S_thr(alpha) = mean(alpha) + z_thr std(alpha) of the null S_max, with z_thr the (1 - p)
  quantile of each null sky's largest standardised S_max over radius (leave-one-out). The
  fraction of null skies exceeding the curve at *any* radius is then p, however the radii are
  correlated, and N >= 2/p - 1 skies suffice (the resampling max-statistic method of Westfall
  & Young 1993, "Resampling-based multiple testing", on standardised statistics).
* p-values carry the +1 correction, p = (1 + #{null >= observed}) / (1 + N) (Davison &
  Hinkley 1997, "Bootstrap methods", eq. 4.11), so that p is never zero.
* Binomial uncertainty on a false-alarm fraction f from N skies: sqrt(f (1 - f) / N).
* Detection efficiency of k recovered out of n injections: the exact binomial (Clopper &
  Pearson 1934, Biometrika 26, 404) one-sided limits at confidence c, lower = B^-1(1 - c; k,
  n - k + 1) and upper = B^-1(c; k + 1, n - k) (beta quantiles; lower 0 at k = 0, upper 1 at
  k = n). n of n gives lower = (1 - c)^(1/n), so a level e is reachable only with
  n >= ln(1 - c) / ln(e) injections. alpha_min requires the lower limit, not the fraction, to
  reach the efficiency level.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import InputError


def required_null_count(false_alarm: float, per_tail: int = 2) -> int:
    """Smallest number of null skies that puts ``per_tail`` skies beyond the threshold on
    average: ceil(per_tail / p) - 1 (so the (1-p) quantile is bracketed by null values)."""
    if not 0.0 < false_alarm < 1.0:
        raise InputError(f"must be in (0, 1), got {false_alarm}", "[significance] false_alarm")
    return int(math.ceil(per_tail / false_alarm)) - 1


def check_null_count(n_null: int, false_alarm: float) -> None:
    need = required_null_count(false_alarm)
    if n_null < need:
        raise InputError(f"{n_null} null skies cannot calibrate a false-alarm probability of {false_alarm}: "
                         f"need at least {need}", "[significance] n_null")


def local_p_values(values: np.ndarray, smax_null: np.ndarray) -> np.ndarray:
    """p = (1 + #{null >= value}) / (1 + N) per radius; values (..., n_radius)."""
    null = np.asarray(smax_null, dtype=float)
    v = np.asarray(values, dtype=float)
    n = null.shape[0]
    exceed = (null[None, ...] >= v.reshape(-1, null.shape[1])[:, None, :]).sum(axis=1)
    return ((1.0 + exceed) / (1.0 + n)).reshape(v.shape)


def _smoother(n_radius: int, degree: int = 3) -> np.ndarray:
    """Least-squares projection onto polynomials of ``degree`` in the radius index: the null
    mean and spread of S_max vary smoothly with radius, and smoothing them keeps the noise of a
    small calibration out of the standardised statistic (common practice)."""
    deg = min(degree, n_radius - 1)
    x = np.linspace(-1.0, 1.0, n_radius)
    v = np.polynomial.legendre.legvander(x, deg)
    return v @ np.linalg.pinv(v)


def _standardise(null: np.ndarray, smooth: bool = True):
    P = _smoother(null.shape[1]) if smooth else np.eye(null.shape[1])
    mean = null.mean(axis=0) @ P
    std = null.std(axis=0, ddof=1) @ P
    return mean, np.where(std > 0, std, 1e-12)


def _loo_max_z(smax_null: np.ndarray, smooth: bool = True) -> np.ndarray:
    """Each null sky's largest standardised S_max over radius, z = (S - mean) / std with the
    (smoothed) mean and spread of the *other* N - 1 skies (leave-one-out, so that a sky does not
    calibrate itself)."""
    null = np.asarray(smax_null, dtype=float)
    n = null.shape[0]
    P = _smoother(null.shape[1]) if smooth else np.eye(null.shape[1])
    tot, tot2 = null.sum(axis=0), (null**2).sum(axis=0)
    mean = (tot[None, :] - null) / (n - 1)
    var = ((tot2[None, :] - null**2) - (n - 1) * mean**2) / (n - 2)
    std = np.sqrt(np.maximum(var, 1e-24)) @ P
    mean = mean @ P
    return ((null - mean) / np.maximum(std, 1e-12)).max(axis=1)


@dataclass(frozen=True)
class Thresholds:
    """Threshold curves per radius (same length as ``radii_deg``)."""

    radii_deg: np.ndarray
    false_alarm: float
    local: np.ndarray  # (1 - p) quantile at each radius
    whole_range: np.ndarray  # look-elsewhere corrected curve: mean + z_thr * std
    local_level: float  # mean fraction of null skies above the whole-range curve at one radius
    z_threshold: float  # the standardised level of the whole-range curve
    n_null: int
    null_mean: np.ndarray
    null_std: np.ndarray
    measured_false_alarm: float  # fraction of null skies (leave-one-out) above the whole-range curve
    measured_false_alarm_error: float  # binomial sqrt(f(1-f)/N)


def _quantile(null: np.ndarray, level: float) -> np.ndarray:
    return np.quantile(null, 1.0 - level, axis=0, method="higher")


def thresholds(radii_deg, smax_null: np.ndarray, false_alarm: float, *, smooth: bool = True) -> Thresholds:
    """Local and look-elsewhere-corrected thresholds from null S_max (n_null, n_radius).

    Whole range: each null sky's largest standardised S_max over radius, T = max_alpha z(alpha)
    (leave-one-out mean and spread), calibrates z_thr, the (1 - p) quantile of T; the curve is
    mean(alpha) + z_thr std(alpha). A sky exceeds the curve somewhere exactly when its T exceeds
    z_thr, so the whole-range false-alarm probability is p whatever the correlation between
    radii, with N >= 2/p - 1 skies (the standardised-maximum method for the look-elsewhere
    effect; e.g. Gross & Vitells 2010 for the trials factor it replaces). ``smooth = False``
    uses the raw per-column mean and spread (columns that are not radii, e.g. targets).
    """
    null = np.asarray(smax_null, dtype=float)
    if null.ndim != 2 or null.shape[1] != len(radii_deg):
        raise ValueError("smax_null must have shape (n_null, n_radius)")
    n = null.shape[0]
    check_null_count(n, false_alarm)
    local = _quantile(null, false_alarm)
    mean, std = _standardise(null, smooth)
    t = _loo_max_z(null, smooth)
    z_thr = float(np.quantile(t, 1.0 - false_alarm, method="higher"))
    whole = mean + z_thr * std
    above = float(np.mean(t > z_thr))
    local_level = float(np.mean(null > whole[None, :]))
    return Thresholds(np.asarray(radii_deg, float), false_alarm, local, whole, local_level, z_thr, n,
                      mean, std, above, float(math.sqrt(max(above * (1 - above), 1e-300) / n)))


def global_p_value(smax: np.ndarray, smax_null: np.ndarray, *, smooth: bool = True) -> float:
    """Look-elsewhere p-value of an S_max curve (NaN or -inf radii ignored): the fraction of null
    skies whose largest standardised S_max is at least the data's, with the +1 correction."""
    null = np.asarray(smax_null, dtype=float)
    mean, std = _standardise(null, smooth)
    z = (np.asarray(smax, float) - mean) / std
    z = z[np.isfinite(z)]
    t_data = z.max() if z.size else -np.inf
    t = _loo_max_z(null, smooth)
    return float((1.0 + np.sum(t >= t_data)) / (1.0 + null.shape[0]))


def clopper_pearson(k, n: int, confidence: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
    """One-sided exact binomial limits (lower, upper) at ``confidence`` for k successes of n:
    lower = B^-1(1 - c; k, n - k + 1), upper = B^-1(c; k + 1, n - k), with B^-1 the beta
    quantile (Clopper & Pearson 1934, Biometrika 26, 404); lower = 0 at k = 0, upper = 1 at k = n."""
    from scipy.stats import beta

    k = np.asarray(k, dtype=float)
    if n < 1 or not 0.0 < confidence < 1.0:
        raise ValueError("need n >= 1 and 0 < confidence < 1")
    with np.errstate(invalid="ignore"):
        lower = np.where(k > 0, beta.ppf(1.0 - confidence, np.maximum(k, 1e-300), n - k + 1.0), 0.0)
        upper = np.where(k < n, beta.ppf(confidence, k + 1.0, np.maximum(n - k, 1e-300)), 1.0)
    return lower, upper


def best_lower_limit(n: int, confidence: float = 0.95) -> float:
    """The largest lower limit n injections can give (all n recovered): (1 - c)^(1/n)."""
    return float((1.0 - confidence) ** (1.0 / n))


def injections_needed(level: float, confidence: float = 0.95) -> int:
    """Fewest injections per radius whose lower limit can reach ``level``: the least n with
    (1 - c)^(1/n) >= level, n = ceil(ln(1 - c) / ln(level))."""
    if level <= 0.0:
        return 1
    n = max(1, int(math.ceil(math.log(1.0 - confidence) / math.log(level) - 1e-12)))
    while best_lower_limit(n, confidence) < level:  # guard the rounding at an exact integer
        n += 1
    return n


@dataclass(frozen=True)
class Efficiency:
    """Detection efficiency per radius: recovered counts out of n, the fraction and its one-sided
    Clopper-Pearson limits at ``confidence``."""

    recovered: np.ndarray
    n: int
    fraction: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    confidence: float


def efficiency(detected: np.ndarray, confidence: float = 0.95) -> Efficiency:
    """Detection fraction and its exact one-sided limits per radius; detected (n_inj, n_radius) bools."""
    d = np.asarray(detected, dtype=bool)
    n = d.shape[0]
    k = d.sum(axis=0)
    lower, upper = clopper_pearson(k, n, confidence)
    return Efficiency(k.astype(int), n, k / n, lower, upper, confidence)


def alpha_min(radii_deg, eff: np.ndarray, level: float) -> float | None:
    """Smallest radius above which the efficiency is >= level at every radius of the grid; give
    the lower limit of :func:`efficiency` (Clopper-Pearson), not the fraction, for a bound.

    Returns None when the efficiency at the largest radius is already below the level (the
    search excludes nothing)."""
    r = np.asarray(radii_deg, dtype=float)
    e = np.asarray(eff, dtype=float)
    order = np.argsort(r)
    r, e = r[order], e[order]
    ok = e >= level
    if not ok[-1]:
        return None
    # walk down from the largest radius while the efficiency holds
    i = len(r) - 1
    while i > 0 and ok[i - 1]:
        i -= 1
    return float(r[i])
