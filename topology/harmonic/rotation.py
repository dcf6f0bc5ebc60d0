"""Rotations of the sky frame on the real a_lm basis, and a grid of orientations.

An observer whose sky frame is turned by Q (the frame F Q, :meth:`topology.geometry.Observer.make`)
sees T_Q(n) = T(Q n), so its real coefficients are r_Q = D(Q) r with

    D_ab(Q) = int Y^R_a(Q^T m) Y^R_b(m) dm,

block-diagonal in l and orthogonal, and its covariance is D C D^T. The integrand is band-limited
to degree 2 lmax, so a product rule of lmax + 1 Gauss-Legendre nodes in cos(theta) and 2 lmax + 1
equally spaced phi is exact (common practice).
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

from .. import geometry as geo
from .basis import real_harmonics


@lru_cache(maxsize=8)
def _quadrature(lmax: int):
    x, w = np.polynomial.legendre.leggauss(lmax + 1)
    nphi = 2 * lmax + 1
    phi = 2.0 * np.pi * np.arange(nphi) / nphi
    s = np.sqrt(1.0 - x * x)
    v = np.stack([np.outer(s, np.cos(phi)), np.outer(s, np.sin(phi)), np.repeat(x[:, None], nphi, 1)], -1)
    v = v.reshape(-1, 3)
    weight = np.repeat(w * (2.0 * np.pi / nphi), nphi)
    Y = real_harmonics(v, lmax)
    Y.setflags(write=False)
    return v, weight, Y


def real_rotation(Q: np.ndarray, lmax: int) -> np.ndarray:
    """D(Q) (N, N): the real coefficients of T(Q n) are D(Q) r for those r of T(n)."""
    v, w, Y = _quadrature(int(lmax))
    Yq = real_harmonics(v @ np.asarray(Q, dtype=float), lmax)     # Y^R(Q^T m): rows of v are m^T
    D = (Yq * w) @ Y.T
    # entries between different l vanish exactly; drop their rounding
    ell_of = np.repeat(np.arange(2, lmax + 1), 2 * np.arange(2, lmax + 1) + 1)
    D[ell_of[:, None] != ell_of[None, :]] = 0.0
    return D


def orientation_grid(nside: int = 1, n_psi: int = 6) -> list[np.ndarray]:
    """Rotations Q = R_z(phi) R_y(theta) R_z(psi): the frame's z axis at the centres of the 12 nside^2
    HEALPix pixels, psi at n_psi equal steps. Not a group: the profile over it is a maximum or
    mean over a sample of SO(3), coarser than the rotations themselves (calibrate on it)."""
    import healpy as hp

    theta, phi = hp.pix2ang(int(nside), np.arange(12 * int(nside) ** 2))
    return [geo.euler_zyz(float(p), float(t), 2.0 * math.pi * k / n_psi)
            for t, p in zip(theta, phi) for k in range(int(n_psi))]


def random_orientation(rng: np.random.Generator) -> np.ndarray:
    """A rotation uniform on SO(3) (:func:`topology.geometry.random_rotation`)."""
    return geo.euler_zyz(*geo.random_rotation(rng))


