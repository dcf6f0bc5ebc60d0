"""The Kullback-Leibler divergence of a space's a_lm distribution from the isotropic one.

Two zero-mean Gaussians of dimension n (common practice; e.g. Kullback 1959):

    D(p || q) = 1/2 [tr(C_q^-1 C_p) - n - ln det(C_q^-1 C_p)]     (nats).

Full sky, no noise ("harmonic"): p = the space, q = isotropic, on the N = (lmax + 1)^2 - 4 real
coefficients. With C_q = L L^T (Cholesky) the whitened M = L^-1 C_p L^-T has eigenvalues
lambda_i and D = 1/2 sum (lambda_i - 1 - ln lambda_i). A space whose modes below the cut span
fewer than N directions (a small torus) has lambda_i = 0: D is infinite. Eigenvalues below
RANK_RTOL lambda_max count as zero (double-precision round-off of the sum is ~1e-13 lambda_max);
the divergence is then reported as inf with the rank, never regularised.

With a mask and noise ("pixel"): the maps T = Y W r + n on the n_obs observed pixels of N_side
(Y the real harmonics at the pixel centres, W = b_l p_l the beam and pixel window, n white noise
of rms sigma_p), Sigma = Y W C W Y^T + diag(sigma_p^2). With A = Y^T diag(sigma_p^-2) Y (N x N),
the Woodbury identity and Sylvester's determinant identity turn the n_obs-dimensional divergence
into N x N algebra, exactly:

    D = 1/2 [tr(A (I + C_q A)^-1 (C_p - C_q)) - ln det(I + C_p A) + ln det(I + C_q A)]

(C = W C W). Noise keeps it finite for any space. Without noise a mask changes nothing while Y
keeps full column rank (the band-limited a_lm are recovered exactly from the observed pixels),
so a mask needs noise here.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.linalg import cho_factor, cho_solve, solve_triangular

from ..errors import InputError
from .basis import ells, real_harmonics

RANK_RTOL = 1e-10


@dataclass(frozen=True)
class Divergence:
    """kl_nats (inf when C_p is singular where C_q is not), n (dimension compared), rank (of the
    whitened C_p; n when regular), form ("harmonic" or "pixel"), min_eigenvalue (whitened)."""

    kl_nats: float
    n: int
    rank: int
    form: str
    min_eigenvalue: float

    @property
    def finite(self) -> bool:
        return math.isfinite(self.kl_nats)


def gaussian_kl(C_p: np.ndarray, C_q: np.ndarray) -> Divergence:
    """D(N(0, C_p) || N(0, C_q)) in nats, C_q positive definite (see the module doc)."""
    C_p = np.asarray(C_p, dtype=float)
    C_q = np.asarray(C_q, dtype=float)
    n = C_q.shape[0]
    try:
        L = np.linalg.cholesky(C_q)
    except np.linalg.LinAlgError:
        raise ValueError("the reference covariance is not positive definite") from None
    X = solve_triangular(L, C_p, lower=True)
    M = solve_triangular(L, X.T, lower=True)
    M = 0.5 * (M + M.T)
    lam = np.linalg.eigvalsh(M)
    top = max(float(lam[-1]), 0.0)
    rank = int(np.count_nonzero(lam > RANK_RTOL * top))
    if rank < n:
        return Divergence(math.inf, n, rank, "harmonic", float(lam[0]))
    kl = 0.5 * float(np.sum(lam - 1.0 - np.log(lam)))
    return Divergence(kl, n, n, "harmonic", float(lam[0]))


@dataclass(frozen=True)
class PixelSpace:
    """The observed pixels of a low-resolution map: N_side, lmax, the noise-weighted harmonic
    matrix A = Y^T diag(sigma^-2) Y (N, N), the window b_l p_l on each coefficient (N,), the
    number of observed pixels and a description (mask, noise, beam)."""

    nside: int
    lmax: int
    A: np.ndarray
    window: np.ndarray
    n_pixels: int
    description: str


def pixel_space(nside: int, lmax: int, *, noise_uk, mask=None, fwhm_deg: float = 0.0, pixwin: bool = True,
                where: str = "[harmonic]") -> PixelSpace:
    """The pixel-space form at ``nside``: white noise ``noise_uk`` (rms per pixel, microK; a number
    or a RING map), ``mask`` (RING, 1 kept, 0 masked; None: full sky), Gaussian beam and pixel window."""
    import healpy as hp

    from ..bandlimit import check_band_limit
    from ..skies.instrument import beam_window, pixel_window

    check_band_limit(lmax, nside, f"{where} lmax")
    npix = 12 * nside * nside
    sigma = np.broadcast_to(np.asarray(noise_uk, dtype=float), (npix,))
    if not np.all(np.isfinite(sigma)) or np.any(sigma < 0):
        raise InputError("noise must be finite and >= 0", f"{where} noise_uk")
    keep = np.ones(npix, dtype=bool) if mask is None else np.asarray(mask, dtype=float) > 0
    if keep.shape != (npix,):
        raise InputError(f"the mask has {keep.size} pixels, N_side {nside} has {npix}", f"{where} mask")
    if not keep.any():
        raise InputError("the mask keeps no pixel", f"{where} mask")
    if np.any(sigma[keep] <= 0):
        raise InputError("the pixel-space divergence needs noise > 0 on every observed pixel (without noise a "
                         "band-limited sky is recovered exactly from the observed pixels, and the divergence is "
                         "the full-sky one)", f"{where} noise_uk")
    vec = np.column_stack(hp.pix2vec(nside, np.flatnonzero(keep)))
    Y = real_harmonics(vec, lmax)                       # (N, n_obs)
    Yw = Y / sigma[keep][None, :]
    A = Yw @ Yw.T
    ell = ells(lmax)
    win = beam_window(float(fwhm_deg), lmax) * (pixel_window(nside, lmax) if pixwin else 1.0)
    desc = (f"N_side {nside}, {int(keep.sum())} of {npix} pixels, noise {float(np.max(sigma)):g} microK"
            + (f", beam {fwhm_deg:g} deg" if fwhm_deg else "") + (", pixel window" if pixwin else ""))
    return PixelSpace(int(nside), int(lmax), A, win[ell], int(keep.sum()), desc)


def pixel_kl(C_p: np.ndarray, cq_diag: np.ndarray, px: PixelSpace) -> Divergence:
    """D in nats between the observed maps of two a_lm covariances, C_q diagonal (see the module doc)."""
    w = px.window
    Cp = np.asarray(C_p, dtype=float) * np.outer(w, w)
    dq = np.asarray(cq_diag, dtype=float) * w * w
    if np.any(dq <= 0):
        raise ValueError("the reference covariance is not positive definite")
    s = np.sqrt(dq)
    B = px.A * np.outer(s, s)                            # S A S
    Cw = Cp / np.outer(s, s)                             # S^-1 C_p S^-1
    n = len(s)
    eye = np.eye(n)
    fac = cho_factor(eye + B)
    X = cho_solve(fac, B)                                # (I + B)^-1 B, symmetric
    trace = float(np.sum(X * (Cw - eye)))
    logdet_q = 2.0 * float(np.sum(np.log(np.diag(fac[0]))))
    sign, logdet_p = np.linalg.slogdet(eye + Cw @ B)
    if sign <= 0:
        raise ValueError("I + C_p A has a non-positive determinant: C_p is not a covariance")
    kl = 0.5 * (trace - float(logdet_p) + logdet_q)
    return Divergence(kl, px.n_pixels, px.n_pixels, "pixel", float("nan"))
