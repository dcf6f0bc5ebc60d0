"""Sachs-Wolfe spectra of closed spaces from the modes of S^3: the variance per mode, the C_l of
the simply connected S^3 truncated at a degree, and the weights that hold the C_l of a
truncated sky to those of all degrees.

Truncation. A sky of modes k <= kmax misses the power that degrees above kmax put on
multipole l: about 0.55 (l / (kmax chi))^2 of C_l (from j_l(x)^2 ~ 1/(2 x^2) beyond x ~ l;
measured here at chi = 0.384, l = 128: 13.6 % missing at kmax chi = 2 l, 5.7 % at 3 l, 0.8 %
at 7.5 l). Holding 1 % at every l <= lmax by degrees alone needs kmax ~ 7.4 lmax / chi,
about 14 times the tensor work and 50 times the rest of the default kmax = 2 lmax / chi.

Tail weights (:func:`tail_weights`). The degrees above kmax add to C_l, l <= lmax, a nearly
l-independent amount per (2l+1) mode, and so do the top degrees below kmax; multiplying the
variance of degree k by w_k = 1 + A (k / kmax)^4, with A fitted to the converged spectrum
(about 0.87), brings the C_l of the truncated sky to within 0.1-0.6 % of that of all degrees
at every 2 <= l <= lmax (measured for chi_rec / R_c = 0.2 to 1 and lmax = 20 to 256 at the
default kmax). The field stays a sum of invariant modes: the topology, and so the matched
circles, are exact; only the spectrum of the top degrees in three dimensions is changed, which
the sky at l <= lmax does not see beyond its C_l.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import roots_legendre

from .legendre import legendre_table
from .spectra import A_S, K_PIVOT, N_S, primordial_power

#: lowest physical degree: beta = k + 1 >= 3 (beta = 1, 2 are the constant and gauge modes)
KMIN = 2
#: exponent of the tail weights w_k = 1 + A (k / kmax)^TAIL_POWER
TAIL_POWER = 4


def mode_variance(k, curvature_radius_mpc: float, A_s: float = A_S, n_s: float = N_S,
                  k_pivot: float = K_PIVOT) -> np.ndarray:
    """sigma_k^2 = 2 pi^2 P_R(q) / (beta (beta^2 - 1)), beta = k+1, q = sqrt(beta^2-1)/R_c (Mpc^-1).

    Variance of R per eigenmode normalised to 1 on the unit S^3 (see topology.skies.spherical).
    """
    beta = np.asarray(k, dtype=float) + 1.0
    if np.any(beta < 2.0):
        raise ValueError("mode_variance needs k >= 1")
    q = np.sqrt(beta**2 - 1.0) / curvature_radius_mpc
    return 2.0 * math.pi**2 * primordial_power(q, A_s, n_s, k_pivot) / (beta * (beta**2 - 1.0))


def _partial_spectra(cosmology, lmax: int, kmax: int, weights: list) -> np.ndarray:
    """C_l (microK^2) of sum_k u_k sigma_k^2 Y_k for each weight vector u (k = 0..kmax) in
    ``weights``: C(theta) = (T/5)^2 sum_k u_k sigma_k^2 Y_k(psi), cos psi = cos^2 chi +
    sin^2 chi cos theta (zonal kernel, :func:`~topology.skies.s3_harmonics.zonal_s3`),
    C_l = 2 pi int C P_l d cos theta by a Gauss-Legendre rule exact for every k and l."""
    chi = float(cosmology.chi_rec_over_curvature_radius)
    t_uk = cosmology.t_cmb * 1e6
    x, w = roots_legendre((kmax + lmax) // 2 + 1)
    cos_psi = math.cos(chi) ** 2 + math.sin(chi) ** 2 * x
    var = np.zeros(kmax + 1)
    var[KMIN:] = mode_variance(np.arange(KMIN, kmax + 1), cosmology.curvature_radius_mpc)
    u = np.array(weights, dtype=float) * var[None, :]
    corr = np.zeros((len(u), len(x)))
    prev, cur = np.zeros_like(cos_psi), np.ones_like(cos_psi)        # Chebyshev U_k(cos psi)
    for k in range(kmax + 1):
        if k >= KMIN:
            corr += np.outer(u[:, k] * (k + 1) / (2.0 * math.pi**2), cur)
        prev, cur = cur, 2.0 * cos_psi * cur - prev
    cl = 2.0 * math.pi * (corr * w[None, :]) @ legendre_table(x, lmax).T * (t_uk / 5.0) ** 2
    cl[:, :2] = 0.0
    return cl


def s3_sachs_wolfe_cl(cosmology, lmax: int, kmax: int, weights: np.ndarray | None = None) -> np.ndarray:
    """Expected SW C_l (microK^2) of the simply connected S^3, modes k = KMIN..kmax (variance
    of degree k times ``weights[k]`` if given)."""
    u = np.ones(kmax + 1) if weights is None else np.asarray(weights, dtype=float)[:kmax + 1]
    return _partial_spectra(cosmology, lmax, kmax, [u])[0]


def _richardson(c_2k: np.ndarray, c_4k: np.ndarray) -> np.ndarray:
    """C(inf) = C(4K) + (C(4K) - C(2K)) / 3: the truncation error ~ 1/K^2 extrapolated away."""
    return c_4k + (c_4k - c_2k) / 3.0


def converged_sachs_wolfe_cl(cosmology, lmax: int, kmax: int) -> np.ndarray:
    """SW C_l (microK^2) of the simply connected S^3 with all degrees: Richardson extrapolation of
    the spectra truncated at 2 kmax and 4 kmax (the target of :func:`tail_weights`)."""
    top = 4 * kmax
    k = np.arange(top + 1)
    c_2k, c_4k = _partial_spectra(cosmology, lmax, top, [k <= 2 * kmax, np.ones(top + 1)])
    return _richardson(c_2k, c_4k)


def tail_weights(cosmology, lmax: int, kmax: int) -> tuple[np.ndarray, dict]:
    """w_k = 1 + A (k / kmax)^4, k = 0..kmax, and {"A", "cl_error"} (module docstring).

    The converged C_l by Richardson extrapolation of the truncation error ~ 1/kmax^2 from 2 kmax
    and 4 kmax: C(inf) = C(4K) + (C(4K) - C(2K)) / 3; A minimises the relative squared
    difference of C(K) + A C_ramp(K) and C(inf) over 2 <= l <= lmax; cl_error is the largest
    relative difference left.
    """
    top = 4 * kmax
    k = np.arange(top + 1)
    ramp = np.where(k <= kmax, (k / kmax) ** 4, 0.0)
    c_k, c_2k, c_4k, c_ramp = _partial_spectra(cosmology, lmax, top,
                                               [k <= kmax, k <= 2 * kmax, np.ones(top + 1), ramp])
    full = _richardson(c_2k, c_4k)
    ell = np.arange(2, lmax + 1)
    rel_k, rel_r = (full[ell] - c_k[ell]) / full[ell], c_ramp[ell] / full[ell]
    a = float(rel_k @ rel_r / (rel_r @ rel_r)) if lmax >= 2 else 0.0
    err = float(np.max(np.abs((c_k[ell] + a * c_ramp[ell]) / full[ell] - 1.0), initial=0.0))
    return 1.0 + a * ramp[:kmax + 1], {"A": a, "cl_error": err}
