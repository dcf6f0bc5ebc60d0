"""Legendre polynomials on many points at once, for spectra and windows written as sums over P_l.

P_0 = 1, P_1 = x, l P_l = (2 l - 1) x P_{l-1} - (l - 1) P_{l-2} (Bonnet's recurrence, stable
upward for |x| <= 1; common practice).
"""

from __future__ import annotations

import numpy as np


def legendre_table(x: np.ndarray, lmax: int) -> np.ndarray:
    """P_l(x) for l = 0..lmax by Bonnet's recurrence, shape (lmax + 1, len(x)), float64.

    x: 1-D array of points in [-1, 1]; lmax >= 0.
    """
    p = np.empty((lmax + 1, len(x)))
    p[0] = 1.0
    if lmax >= 1:
        p[1] = x
    for ell in range(2, lmax + 1):
        p[ell] = ((2 * ell - 1) * x * p[ell - 1] - (ell - 1) * p[ell - 2]) / ell
    return p
