"""The real a_lm basis of the harmonic view: l = 2..lmax, N = (lmax + 1)^2 - 4 coefficients.

Convention. For healpy's complex a_lm (Condon-Shortley phase, a_{l,-m} = (-1)^m a*_lm of a real
sky), the real coefficients of multipole l are, in this order,

    r_l0 = a_l0,  then for m = 1..l:  r_{l,m,re} = sqrt(2) Re a_lm,  r_{l,m,im} = sqrt(2) Im a_lm,

at index l^2 - 4 (m = 0), l^2 - 4 + 2m - 1 (re), l^2 - 4 + 2m (im). They are the coefficients
of the real orthonormal harmonics

    Y_l0,  sqrt(2) Re Y_lm,  -sqrt(2) Im Y_lm      (T = sum r Y^R, r = int T Y^R dOmega),

so an isotropic sky has <r r^T> = diag(C_l) (each coefficient of multipole l has variance C_l;
common practice). The monopole and dipole are left out (a map's are removed before any
analysis). The map is orthogonal: rotations of the sky act on each multipole by an orthogonal
matrix, so a Kullback-Leibler divergence from an isotropic sky does not depend on the sky
frame.
"""

from __future__ import annotations

import math

import numpy as np

LMIN = 2


def n_coefficients(lmax: int) -> int:
    """N = (lmax + 1)^2 - 4: the real coefficients of l = 2..lmax."""
    return (int(lmax) + 1) ** 2 - LMIN**2


def ells(lmax: int) -> np.ndarray:
    """The multipole l of each real coefficient, shape (N,)."""
    return np.repeat(np.arange(LMIN, int(lmax) + 1), 2 * np.arange(LMIN, int(lmax) + 1) + 1)


def index(ell: int, m: int, part: str = "re") -> int:
    """Position of r_{l,m,part} (part "re" or "im"; m = 0 has only "re")."""
    if m == 0:
        return ell * ell - LMIN**2
    return ell * ell - LMIN**2 + 2 * m - (1 if part == "re" else 0)


def _healpy_index(lmax: int, ell: int, m: int) -> int:
    return m * (2 * lmax + 1 - m) // 2 + ell


def alm_to_real(alm: np.ndarray, lmax: int, alm_lmax: int | None = None) -> np.ndarray:
    """Real coefficients (N,) of healpy a_lm (m >= 0, of ``alm_lmax``, default ``lmax``), l = 2..lmax."""
    big = int(lmax if alm_lmax is None else alm_lmax)
    alm = np.asarray(alm)
    out = np.empty(n_coefficients(lmax))
    r2 = math.sqrt(2.0)
    for ell in range(LMIN, int(lmax) + 1):
        i0 = ell * ell - LMIN**2
        out[i0] = alm[_healpy_index(big, ell, 0)].real
        m = np.arange(1, ell + 1)
        a = alm[m * (2 * big + 1 - m) // 2 + ell]
        out[i0 + 2 * m - 1] = r2 * a.real
        out[i0 + 2 * m] = r2 * a.imag
    return out


def real_to_alm(r: np.ndarray, lmax: int) -> np.ndarray:
    """healpy a_lm (complex, m >= 0, size of ``lmax``; l < 2 zero) of real coefficients ``r`` (N,)."""
    r = np.asarray(r, dtype=float)
    alm = np.zeros((lmax + 1) * (lmax + 2) // 2, dtype=np.complex128)
    s = 1.0 / math.sqrt(2.0)
    for ell in range(LMIN, int(lmax) + 1):
        i0 = ell * ell - LMIN**2
        alm[_healpy_index(lmax, ell, 0)] = r[i0]
        m = np.arange(1, ell + 1)
        alm[m * (2 * lmax + 1 - m) // 2 + ell] = s * (r[i0 + 2 * m - 1] + 1j * r[i0 + 2 * m])
    return alm


def real_harmonics(vectors: np.ndarray, lmax: int) -> np.ndarray:
    """Y^R(n) of the basis above at the directions ``vectors`` (M, 3) (any length > 0): (N, M).

    Normalised associated Legendre functions by the stable three-term recursion in l at fixed
    m, started from P_mm = (-1)^m sqrt((2m+1)!! / (4 pi (2m)!!)) sin^m theta (Condon-Shortley
    phase; common practice).
    """
    v = np.asarray(vectors, dtype=float)
    rn = np.linalg.norm(v, axis=1)
    x = np.clip(v[:, 2] / rn, -1.0, 1.0)
    s = np.sqrt(np.maximum(0.0, 1.0 - x * x))
    phi = np.arctan2(v[:, 1], v[:, 0])
    out = np.empty((n_coefficients(lmax), len(v)))
    P = np.empty((lmax + 1, len(v)))
    pmm = np.full(len(v), math.sqrt(1.0 / (4.0 * np.pi)))
    r2 = math.sqrt(2.0)
    for m in range(lmax + 1):
        if m > 0:
            pmm = -math.sqrt((2 * m + 1) / (2.0 * m)) * s * pmm
        P[0] = pmm                                  # P[j] holds P_{m+j, m}
        if m < lmax:
            P[1] = math.sqrt(2 * m + 3) * x * pmm
        for ell in range(m + 2, lmax + 1):
            a = math.sqrt((4.0 * ell * ell - 1.0) / (ell * ell - m * m))
            b = math.sqrt(((ell - 1.0) ** 2 - m * m) / (4.0 * (ell - 1.0) ** 2 - 1.0))
            j = ell - m
            P[j] = a * (x * P[j - 1] - b * P[j - 2])
        lo = max(m, LMIN)
        if lo > lmax:
            continue
        rows = np.arange(lo, lmax + 1)
        base = rows * rows - LMIN**2
        Pl = P[rows - m]
        if m == 0:
            out[base] = Pl
        else:
            out[base + 2 * m - 1] = r2 * Pl * np.cos(m * phi)
            out[base + 2 * m] = -r2 * Pl * np.sin(m * phi)
    return out


def isotropic_diagonal(cl: np.ndarray, lmax: int) -> np.ndarray:
    """diag(C_iso) (N,) of a spectrum C_l (l = 0..lmax or more): C_l on each coefficient of l."""
    return np.asarray(cl, dtype=float)[ells(lmax)]
