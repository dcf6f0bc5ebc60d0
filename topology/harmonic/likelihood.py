"""The low-l likelihood of a map for a space, against the space's size, and a lower bound on it.

The map. The observed pixels d of a map at N_side (mask, white noise of rms sigma_p, beam and
pixel window; :class:`topology.harmonic.kl.PixelSpace` with ``dipole=True``) are Gaussian with
Sigma = Y W C W Y^T + N + (monopole and dipole, marginalised under a flat prior). With P the
noise weight that projects out the monopole and dipole, A = Y P Y^T and b = Y P d (N-vectors),
the Woodbury and Sylvester identities give, up to a constant shared by every model,

    ln L(C) = 1/2 [b^T K b - ln det(I + C A)],     K = C (I + A C)^-1 = L (I + L^T A L)^-1 L^T,

C = W C W, L any square root of C (Cholesky; a singular C of a pure cut through its eigenvalues).
The statistic of a space of covariance C at orientation Q is the log-likelihood ratio to the
isotropic sky, Delta(Q) = ln L(D(Q) C D(Q)^T) - ln L(C_iso) (its mean over maps of the space is
the pixel-space KL divergence, :func:`topology.harmonic.kl.pixel_kl`). Over an orientation grid
(:func:`topology.harmonic.rotation.orientation_grid`) it is maximised (``mode = "max"``, the
profile likelihood) or averaged (``"marginal"``: ln of the mean of L(Q) / L_iso, a uniform prior on
the grid).

The bound. A scale s of the space is excluded at level c when the map's statistic t(s) falls
below the 1 - c quantile of t(s) over n_cal maps of the space itself at that scale, each at an
orientation uniform on SO(3) (so the grid's coarseness is calibrated too): a space of that scale
is then excluded with probability 1 - c (the false-exclusion rate, checked on independent maps
in the tests), whatever the asymptotics of the likelihood ratio. The lower bound on the scale is
the largest scale of the list below which every scale is excluded. The same statistics on
n_cal isotropic maps give the expected exclusion power (the fraction of isotropic maps that
exclude each scale). Each map costs one N-vector b, drawn exactly: b = A r + A^1/2 g with
r ~ N(0, C) and g standard normal (the noise part of b has covariance A).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.linalg import cho_factor, solve_triangular
from scipy.special import logsumexp

from ..errors import InputError, raise_if_stopped
from .pixels import PixelSpace
from .rotation import random_orientation, real_rotation

MODES = ("max", "marginal")


def _root(C: np.ndarray) -> np.ndarray:
    """A square root L (L L^T = C) of a covariance: Cholesky, else eigenvalues clipped at 0."""
    try:
        return np.linalg.cholesky(C)
    except np.linalg.LinAlgError:
        lam, V = np.linalg.eigh(0.5 * (C + C.T))
        return V * np.sqrt(np.maximum(lam, 0.0))


def likelihood_terms(C: np.ndarray, A: np.ndarray, B: np.ndarray) -> tuple[np.ndarray, float]:
    """(b^T K b for each column b of B, ln det(I + C A)) (see the module doc)."""
    L = _root(C)
    n = len(C)
    G = np.eye(n) + L.T @ A @ L
    U, _ = cho_factor(G, lower=False)
    X = solve_triangular(U, L.T @ B, trans="T", lower=False)   # U^-T L^T B
    return np.sum(X * X, axis=0), 2.0 * float(np.sum(np.log(np.diag(U))))


def log_ratio(C: np.ndarray, cq_diag: np.ndarray, px: PixelSpace, B: np.ndarray) -> np.ndarray:
    """ln L(C) - ln L(C_iso) for the data columns b of B (N, k); C, C_iso unwindowed a_lm covariances."""
    w = px.window
    B = np.atleast_2d(np.asarray(B, dtype=float).T).T
    qt, lt = likelihood_terms(np.asarray(C) * np.outer(w, w), px.A, B)
    qi, li = likelihood_terms(np.diag(np.asarray(cq_diag) * w * w), px.A, B)
    return 0.5 * (qt - qi - lt + li)


#: memory of the rotation matrices D(Q) of a grid kept between scales (bytes); above it, recomputed
ROTATION_CACHE_BYTES = 256 * 2**20


class RotationSet:
    """The matrices D(Q) of a list of rotations at lmax: kept when they fit ROTATION_CACHE_BYTES,
    else computed on each pass."""

    def __init__(self, rotations, lmax: int):
        self.rotations = [np.asarray(Q, dtype=float) for Q in rotations]
        self.lmax = int(lmax)
        n = (self.lmax + 1) ** 2 - 4
        self._kept = None
        if len(self.rotations) * n * n * 8 <= ROTATION_CACHE_BYTES:
            self._kept = [real_rotation(Q, self.lmax) for Q in self.rotations]

    def __len__(self) -> int:
        return len(self.rotations)

    def __iter__(self):
        if self._kept is not None:
            return iter(self._kept)
        return (real_rotation(Q, self.lmax) for Q in self.rotations)


def profile(C: np.ndarray, cq_diag: np.ndarray, px: PixelSpace, B: np.ndarray, rotations, mode: str = "max"
            ) -> np.ndarray:
    """The statistic t of each column of B over the orientations ``rotations`` (rotation matrices Q
    or a :class:`RotationSet`) of the covariance C (given in the frame Q = 1): the maximum or the
    log of the mean of exp(Delta(Q))."""
    if mode not in MODES:
        raise InputError(f"must be one of {list(MODES)}, got {mode!r}", "[harmonic] orientation")
    w = px.window
    B = np.atleast_2d(np.asarray(B, dtype=float).T).T
    qi, li = likelihood_terms(np.diag(np.asarray(cq_diag) * w * w), px.A, B)
    out = np.empty((len(rotations), B.shape[1]))
    Cw = np.asarray(C) * np.outer(w, w)
    if not isinstance(rotations, RotationSet):
        rotations = RotationSet(rotations, px.lmax)
    for i, D in enumerate(rotations):
        qt, lt = likelihood_terms(D @ Cw @ D.T, px.A, B)        # W commutes with D (both act per l)
        out[i] = 0.5 * (qt - qi - lt + li)
        raise_if_stopped()
    if mode == "max":
        return out.max(axis=0)
    return logsumexp(out, axis=0) - math.log(len(rotations))


def simulate(C: np.ndarray, px: PixelSpace, n: int, rng: np.random.Generator, random_orientation_each: bool = True
             ) -> np.ndarray:
    """(N, n) data vectors b of n maps of the covariance C (unwindowed), each turned by a rotation
    uniform on SO(3) unless ``random_orientation_each`` is False (see the module doc)."""
    w = px.window
    lam, V = np.linalg.eigh(px.A)
    S = V * np.sqrt(np.maximum(lam, 0.0))
    L = _root(np.asarray(C) * np.outer(w, w))
    g = rng.standard_normal((len(C), n))
    R = L @ g
    if random_orientation_each:
        for j in range(n):
            R[:, j] = real_rotation(random_orientation(rng), px.lmax) @ R[:, j]
    return px.A @ R + S @ rng.standard_normal((len(C), n))


@dataclass(frozen=True)
class SizeBound:
    """The likelihood profile of a map against scale and the bound it gives.

    scales (ascending); t_map: the map's statistic at each scale; threshold: the 1 - level
    quantile of the statistic over n_cal maps of the space at that scale; excluded: t_map <
    threshold; bound: the largest scale below which every scale is excluded (None: the smallest
    is not); iso_excluded: the fraction of n_cal isotropic maps that exclude each scale."""

    scales: tuple
    t_map: tuple
    threshold: tuple
    excluded: tuple
    bound: float | None
    iso_excluded: tuple
    level: float
    n_cal: int
    mode: str
    n_orientations: int

    def as_dict(self) -> dict:
        return {"level": self.level, "n_cal": self.n_cal, "mode": self.mode, "n_orientations": self.n_orientations,
                "bound_scale": self.bound,
                "rows": [{"scale": s, "log_ratio": t, "threshold": q, "excluded": e, "isotropic_exclusion_rate": f}
                         for s, t, q, e, f in zip(self.scales, self.t_map, self.threshold, self.excluded,
                                                  self.iso_excluded)]}


def size_bound(b_map: np.ndarray, scales, covariances, cq_diag: np.ndarray, px: PixelSpace, rotations, *,
               level: float = 0.95, n_cal: int = 200, seed: int = 0, mode: str = "max") -> SizeBound:
    """The bound of one map (its data vector ``b_map`` = px.weigh(map)) from the covariances of the
    space at ``scales`` (unwindowed, frame Q = 1) and the isotropic diagonal ``cq_diag``."""
    if not 0.0 < level < 1.0:
        raise InputError(f"must be in (0, 1), got {level}", "[harmonic] level")
    if n_cal < 10:
        raise InputError(f"needs at least 10 calibration maps, got {n_cal}", "[harmonic] n_cal")
    order = np.argsort(scales)
    scales = [float(scales[i]) for i in order]
    covariances = [covariances[i] for i in order]
    ss = np.random.SeedSequence(int(seed))
    iso_rng, *scale_rngs = [np.random.default_rng(s) for s in ss.spawn(len(scales) + 1)]
    rotations = rotations if isinstance(rotations, RotationSet) else RotationSet(rotations, px.lmax)
    B_iso = simulate(np.diag(cq_diag), px, n_cal, iso_rng, random_orientation_each=False)
    t_map, thr, exc, iso = [], [], [], []
    for s, C, rng in zip(scales, covariances, scale_rngs):
        B_cal = simulate(C, px, n_cal, rng)
        t = profile(C, cq_diag, px, np.column_stack([np.reshape(b_map, (-1, 1)), B_cal, B_iso]), rotations, mode)
        q = float(np.quantile(t[1:1 + n_cal], 1.0 - level))
        t_map.append(float(t[0]))
        thr.append(q)
        exc.append(bool(t[0] < q))
        iso.append(float(np.mean(t[1 + n_cal:] < q)))
    bound = None
    for s, e in zip(scales, exc):
        if not e:
            break
        bound = s
    return SizeBound(tuple(scales), tuple(t_map), tuple(thr), tuple(exc), bound, tuple(iso), float(level),
                     int(n_cal), mode, len(rotations))
