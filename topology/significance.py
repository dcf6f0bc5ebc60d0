"""From search statistics on null and injected skies to thresholds, p-values, detection
efficiency and alpha_min.

Inputs are plain arrays: ``smax_null`` of shape (n_null, n_radius) holds the largest S found at
each radius of each null (isotropic) sky, searched with the same settings as the data.

* Local threshold at radius alpha: the (1 - p) quantile of the null S_max(alpha).
* Look-elsewhere: a whole-range threshold curve S_thr(alpha) at false-alarm probability p is
  the local threshold at a smaller local level p_loc chosen so that the fraction of null skies
  exceeding the curve at *any* radius is p. p_loc is found on the null sample itself, from each
  null sky's smallest leave-one-out local p-value over radius (the min-p method of Westfall &
  Young 1993, "Resampling-based multiple testing"; common practice in circle searches).
* p-values carry the +1 correction, p = (1 + #{null >= observed}) / (1 + N) (Davison &
  Hinkley 1997, "Bootstrap methods", eq. 4.11), so that p is never zero.
* Binomial uncertainty on a false-alarm fraction f from N skies: sqrt(f (1 - f) / N).
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


def _loo_min_p(smax_null: np.ndarray) -> np.ndarray:
    """Each null sky's smallest local p-value over radius, against the other N-1 skies."""
    null = np.asarray(smax_null, dtype=float)
    n = null.shape[0]
    # rank of each sky among the others at each radius: #{j != i : null_j >= null_i}
    ge = (null[None, :, :] >= null[:, None, :]).sum(axis=1) - 1
    p = (1.0 + ge) / n  # (1 + count) / (1 + (N - 1))
    return p.min(axis=1)


@dataclass(frozen=True)
class Thresholds:
    """Threshold curves per radius (same length as ``radii_deg``)."""

    radii_deg: np.ndarray
    false_alarm: float
    local: np.ndarray  # (1 - p) quantile at each radius
    whole_range: np.ndarray  # look-elsewhere corrected curve
    local_level: float  # p_loc used for the whole-range curve
    n_null: int
    null_mean: np.ndarray
    null_std: np.ndarray
    measured_false_alarm: float  # fraction of null skies above the whole-range curve
    measured_false_alarm_error: float  # binomial sqrt(f(1-f)/N)

    def exceeds(self, smax: np.ndarray) -> np.ndarray:
        """Boolean per radius: S_max above the whole-range threshold."""
        return np.asarray(smax) > self.whole_range


def _quantile(null: np.ndarray, level: float) -> np.ndarray:
    return np.quantile(null, 1.0 - level, axis=0, method="higher")


def thresholds(radii_deg, smax_null: np.ndarray, false_alarm: float) -> Thresholds:
    """Local and look-elsewhere-corrected thresholds from null S_max (n_null, n_radius)."""
    null = np.asarray(smax_null, dtype=float)
    if null.ndim != 2 or null.shape[1] != len(radii_deg):
        raise ValueError("smax_null must have shape (n_null, n_radius)")
    n = null.shape[0]
    check_null_count(n, false_alarm)
    local = _quantile(null, false_alarm)
    if null.shape[1] == 1:
        p_loc = false_alarm
    else:
        minp = _loo_min_p(null)
        # the largest local level whose min-p exceedance fraction stays <= false_alarm
        p_loc = float(np.quantile(minp, false_alarm, method="lower"))
        p_loc = max(p_loc, 1.0 / n)
    whole = _quantile(null, p_loc)
    above = (null > whole[None, :]).any(axis=1).mean()
    return Thresholds(np.asarray(radii_deg, float), false_alarm, local, whole, p_loc, n,
                      null.mean(axis=0), null.std(axis=0, ddof=1) if n > 1 else np.zeros(null.shape[1]),
                      float(above), float(math.sqrt(max(above * (1 - above), 1e-300) / n)))


def global_p_value(smax: np.ndarray, smax_null: np.ndarray) -> float:
    """Look-elsewhere p-value of a whole S_max curve: the fraction of null skies whose smallest
    local p-value over radius is at most the data's, with the +1 correction."""
    null = np.asarray(smax_null, dtype=float)
    p_data = local_p_values(np.asarray(smax, float)[None, :], null)[0].min()
    minp = _loo_min_p(null)
    return float((1.0 + np.sum(minp <= p_data)) / (1.0 + null.shape[0]))


def efficiency(detected: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Detection fraction and its binomial error per radius; detected (n_inj, n_radius) bools."""
    d = np.asarray(detected, dtype=bool)
    n = d.shape[0]
    f = d.mean(axis=0)
    return f, np.sqrt(np.maximum(f * (1.0 - f), 0.0) / n)


def alpha_min(radii_deg, eff: np.ndarray, level: float) -> float | None:
    """Smallest radius above which the efficiency is >= level at every radius of the grid.

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
