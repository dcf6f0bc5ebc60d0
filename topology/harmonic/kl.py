"""The Kullback-Leibler divergence of a space's a_lm distribution from the isotropic one.

Two zero-mean Gaussians of dimension n (common practice; e.g. Kullback 1959):

    D(p || q) = 1/2 [tr(C_q^-1 C_p) - n - ln det(C_q^-1 C_p)]     (nats).

Full sky, no noise ("harmonic"): p = the space, q = isotropic, on the N = (lmax + 1)^2 - 4 real
coefficients. With C_q = L L^T (Cholesky) the whitened M = L^-1 C_p L^-T has eigenvalues
lambda_i and D = 1/2 sum (lambda_i - 1 - ln lambda_i). A space whose modes below the cut span
fewer than N directions (a small torus) has lambda_i = 0: D is infinite. Eigenvalues below
RANK_RTOL lambda_max count as zero (double-precision round-off of the sum is ~1e-13 lambda_max);
the divergence is then reported as inf with the rank, never regularised.

With a mask and noise ("pixel"): the maps d = Y W r + n on the n_obs observed pixels of N_side
(:mod:`topology.harmonic.pixels`: Y the real harmonics at the pixel centres, W = b_l p_l the beam
and pixel window, n noise of covariance N), Sigma = Y W C W Y^T + N. With A = Y N^-1 Y^T (N x N)
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

from .pixels import PixelSpace

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
