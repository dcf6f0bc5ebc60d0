"""Harmonic analysis on S^3 = SU(2): Wigner matrices, Gamma-invariant subspaces, and exact
spherical-harmonic transforms of band-limited functions on the sky.

Eigenfunctions of the Laplacian of S^3 (unit radius). A unit quaternion x = z1 + z2 j with
z1 = w + i x, z2 = y + i z is the SU(2) matrix U(x) = [[z1, z2], [-conj(z2), conj(z1)]]
(U(a b) = U(a) U(b)). Its k-th symmetric power D^k(x) (spin j = k/2, size k+1) in the
orthonormal monomial basis u^a v^(k-a) / sqrt(a! (k-a)!) (index a = 0..k; so D^1 is U with
both axes reversed) has entries that are polynomials of
degree k in (w, x, y, z); the (k+1)^2 entries span the eigenspace of -Laplacian with eigenvalue
k(k+2) (Peter-Weyl theorem; e.g. Vilenkin 1968, "Special functions and the theory of group
representations", ch. III). Schur orthogonality: int |D^k_ab|^2 dV = 2 pi^2 / (k + 1) over the
unit S^3 (volume 2 pi^2).

Group action: the isometry x -> a x b maps f(x) = sum_ab C_ab D^k_ab(x) = tr(C^T D^k(x)) to
f(a x b) = tr((D^k(a)^T C D^k(b)^T)^T D^k(x)). The functions invariant under a finite group
Gamma of pairs (a, b) are those with C = D^k(a)^T C D^k(b)^T for all pairs, i.e. the range of
the projector P(C) = (1/|Gamma|) sum_(a,b) D^k(a)^T C D^k(b)^T (group averaging, common
practice; Lehoucq, Weeks, Uzan, Gausmann & Luminet 2002, CQG 19, 4683).

D^k is computed for many points at once by the recursion D^k = Sym(D^(k-1) (x) U), peeling
one spinor factor per step (Risbo 1996, J. Geodesy 70, 383: the half-integer-step recursion
for Wigner functions): column a of D^k from column a-1 (factor u) when a >= k/2, from column a
(factor v) otherwise, so every step divides by sqrt(m) with m >= k/2.
"""

from __future__ import annotations

import math
from collections.abc import Iterator

import numpy as np
from scipy.special import sph_harm_y


def su2_matrix(q: np.ndarray) -> np.ndarray:
    """U(q) = [[z1, z2], [-conj z2, conj z1]] for unit quaternions (..., 4) -> (..., 2, 2)."""
    q = np.asarray(q, dtype=float)
    z1 = q[..., 0] + 1j * q[..., 1]
    z2 = q[..., 2] + 1j * q[..., 3]
    out = np.empty(q.shape[:-1] + (2, 2), dtype=complex)
    out[..., 0, 0] = z1
    out[..., 0, 1] = z2
    out[..., 1, 0] = -np.conj(z2)
    out[..., 1, 1] = np.conj(z1)
    return out


def wigner_stack(points: np.ndarray, kmax: int) -> Iterator[tuple[int, np.ndarray]]:
    """Yield (k, D^k) for k = 0..kmax, D^k of shape (k+1, k+1, N) for N unit quaternions.

    Recursion (normalised monomial basis, Sym^k of U acting on columns):
        column a >= k/2:  D^k[b, a] = (U00 sqrt(b) D^(k-1)[b-1, a-1] + U10 sqrt(k-b) D^(k-1)[b, a-1]) / sqrt(a)
        column a <  k/2:  D^k[b, a] = (U01 sqrt(b) D^(k-1)[b-1, a]   + U11 sqrt(k-b) D^(k-1)[b, a])   / sqrt(k-a)
    with U = su2_matrix(point). Cost and memory O((k+1)^2 N) per step.
    """
    pts = np.asarray(points, dtype=float).reshape(-1, 4)
    n = len(pts)
    u = su2_matrix(pts)
    u00, u01, u10, u11 = u[:, 0, 0], u[:, 0, 1], u[:, 1, 0], u[:, 1, 1]
    d = np.ones((1, 1, n), dtype=complex)
    yield 0, d
    for k in range(1, kmax + 1):
        new = np.zeros((k + 1, k + 1, n), dtype=complex)
        b = np.arange(k + 1, dtype=float)
        sb = np.sqrt(b[1:])[:, None]           # sqrt(b) for b = 1..k
        skb = np.sqrt(k - b[:-1])[:, None]     # sqrt(k - b) for b = 0..k-1
        half = (k + 1) // 2                    # columns a >= half use the u factor
        # u-peeled columns a = half..k from old columns a-1
        old = d[:, half - 1:k, :]
        cols = np.arange(half, k + 1, dtype=float)
        inv = (1.0 / np.sqrt(cols))[None, :, None]
        new[1:, half:, :] += (u00 * (sb[:, :, None] * old)) * inv
        new[:-1, half:, :] += (u10 * (skb[:, :, None] * old)) * inv
        if half > 0:
            old = d[:, :half, :]
            cols = np.arange(0, half, dtype=float)
            inv = (1.0 / np.sqrt(k - cols))[None, :, None]
            new[1:, :half, :] += (u01 * (sb[:, :, None] * old)) * inv
            new[:-1, :half, :] += (u11 * (skb[:, :, None] * old)) * inv
        d = new
        yield k, d


def wigner_matrices(quats: np.ndarray, k: int) -> np.ndarray:
    """D^k(q) for unit quaternions (n, 4) -> (n, k+1, k+1) (see :func:`wigner_stack`)."""
    q = np.asarray(quats, dtype=float).reshape(-1, 4)
    for kk, d in wigner_stack(q, k):
        if kk == k:
            return np.moveaxis(d, -1, 0).copy()
    raise AssertionError("unreachable")


# ---------------------------------------------------------------------------------------------
# Gamma-invariant subspaces
# ---------------------------------------------------------------------------------------------
def _group_by_right(pairs: np.ndarray):
    """Split pairs (a, b) by their right factor b: list of (b, [indices])."""
    keys: dict[tuple, list[int]] = {}
    reps: dict[tuple, np.ndarray] = {}
    for i, b in enumerate(pairs[:, 1]):
        key = tuple(np.round(b, 9))
        keys.setdefault(key, []).append(i)
        reps.setdefault(key, b)
    return [(reps[key], idx) for key, idx in keys.items()]


class InvariantProjector:
    """P(C) = (1/|Gamma|) sum_(a,b) D^k(a)^T C D^k(b)^T for one degree k (see module docstring).

    Stored as sum over the distinct right factors b of S_b^T C D^k(b)^T with
    S_b = (1/|Gamma|) sum_{a: (a, b) in Gamma} D^k(a), so a group acting on one side only costs
    one matrix product per application. ``da`` (|Gamma|, k+1, k+1) are the D^k(a) of the pairs,
    ``db`` the D^k(b) of the distinct right factors, ``groups`` the pair indices of each b.
    """

    def __init__(self, k: int, da: np.ndarray, db: np.ndarray, groups: list[list[int]]):
        self.k = int(k)
        self.order = len(da)
        self.terms = [(da[idx].sum(axis=0) / self.order, db[j]) for j, idx in enumerate(groups)]

    @classmethod
    def for_pairs(cls, pairs: np.ndarray, k: int) -> "InvariantProjector":
        return next(p for p in projectors(pairs, k) if p.k == k)

    def apply(self, c: np.ndarray) -> np.ndarray:
        """P(C) for a (k+1, k+1) coefficient matrix (or a stack (..., k+1, k+1))."""
        out = np.zeros(np.broadcast_shapes(np.shape(c)), dtype=complex)
        for s, db in self.terms:
            out = out + np.swapaxes(s, -1, -2) @ c @ np.swapaxes(db, -1, -2)
        return out

    def rank(self, tol: float = 1e-8) -> int:
        """Numerical rank of P on the (k+1)^2-dimensional coefficient space (eigenvalues > 1/2).

        One right factor b = +-1 (left action): P = S^T (x) (+-1) and rank = (k+1) rank(S).
        Diagonal D(a), D(b) (lens spaces): P is diagonal. Otherwise the full (k+1)^2 matrix.
        """
        n = self.k + 1
        if len(self.terms) == 1:
            s, db = self.terms[0]
            if np.allclose(np.abs(db), np.eye(n), atol=tol):
                ev = np.linalg.eigvalsh(0.5 * (s + s.conj().T)) * db[0, 0].real
                return int(np.sum(ev > 0.5)) * n
        if all(_is_diagonal(s, tol) and _is_diagonal(db, tol) for s, db in self.terms):
            diag = sum(np.outer(np.diag(s), np.diag(db)) for s, db in self.terms)
            return int(np.sum(diag.real > 0.5))
        full = sum(np.kron(s.T, db) for s, db in self.terms)
        ev = np.linalg.eigvalsh(0.5 * (full + full.conj().T))
        return int(np.sum(ev > 0.5))


def _is_diagonal(m: np.ndarray, tol: float) -> bool:
    return bool(np.all(np.abs(m - np.diag(np.diag(m))) < tol))


def projectors(pairs: np.ndarray, kmax: int) -> Iterator["InvariantProjector"]:
    """The projectors of degrees k = 0..kmax for the pairs (n, 2, 4), in one Wigner recursion."""
    pairs = np.asarray(pairs, dtype=float).reshape(-1, 2, 4)
    groups = _group_by_right(pairs)
    quats = np.concatenate([pairs[:, 0], np.array([b for b, _ in groups])])
    n = len(pairs)
    idx = [i for _, i in groups]
    for k, d in wigner_stack(quats, kmax):
        d = np.moveaxis(d, -1, 0)
        yield InvariantProjector(k, d[:n], d[n:], idx)


def invariant_rank(pairs: np.ndarray, k: int) -> int:
    """Number of Gamma-invariant degree-k eigenmodes: the numerical rank of the projector P."""
    return InvariantProjector.for_pairs(pairs, k).rank()


def invariant_ranks(pairs: np.ndarray, kmax: int) -> np.ndarray:
    """Projector ranks for k = 0..kmax (see :meth:`InvariantProjector.rank`)."""
    return np.array([p.rank() for p in projectors(pairs, kmax)], dtype=np.int64)


# ---------------------------------------------------------------------------------------------
# exact spherical-harmonic transform of a band-limited function on the sky
# ---------------------------------------------------------------------------------------------
def gauss_legendre_grid(n_theta: int, n_phi: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Gauss-Legendre rings for exact transforms of band-limited functions on the sphere.

    theta_i: the n_theta Gauss-Legendre nodes in cos(theta); phi_j = 2 pi j / n_phi. Returns
    (theta (n_theta,), weights (n_theta,), directions (n_theta, n_phi, 3)). For f with l <= K
    the integrals int f conj(Y_lm) dOmega, l <= L, are exact when 2 n_theta - 1 >= K + L and
    n_phi > K + L (polynomial degree in cos theta, trigonometric degree in phi; common practice).
    """
    x, w = np.polynomial.legendre.leggauss(int(n_theta))
    theta = np.arccos(x)
    phi = 2.0 * np.pi * np.arange(int(n_phi)) / int(n_phi)
    st = np.sin(theta)[:, None]
    dirs = np.stack([st * np.cos(phi)[None, :], st * np.sin(phi)[None, :],
                     np.broadcast_to(x[:, None], (len(x), len(phi)))], axis=-1)
    return theta, w, dirs


def grid_to_alm(values: np.ndarray, theta: np.ndarray, weights: np.ndarray, lmax: int) -> np.ndarray:
    """a_lm = int f conj(Y_lm) dOmega on the grid of :func:`gauss_legendre_grid` (healpy order).

    Y_lm are the orthonormal spherical harmonics with the Condon-Shortley phase (scipy
    sph_harm_y, the convention of healpy); f real, values (n_theta, n_phi); l, m <= lmax.
    """
    from healpy import Alm

    values = np.asarray(values, dtype=float)
    nphi = values.shape[1]
    fm = np.fft.rfft(values, axis=1) * (2.0 * np.pi / nphi)   # int f e^{-i m phi} dphi
    alm = np.zeros(Alm.getsize(lmax), dtype=complex)
    for m in range(min(lmax, fm.shape[1] - 1) + 1):
        ell = np.arange(m, lmax + 1)
        lam = sph_harm_y(ell[None, :], m, theta[:, None], 0.0).real      # (n_theta, n_l)
        a = (weights[:, None] * fm[:, m][:, None] * lam).sum(axis=0)
        alm[Alm.getidx(lmax, ell, m)] = a
    return alm


def zonal_s3(cos_psi: np.ndarray, k: int) -> np.ndarray:
    """sum over an orthonormal basis of degree-k modes Y(x) Y(y) = (k+1) sin((k+1) psi) / (2 pi^2 sin psi).

    psi the geodesic distance of x and y on the unit S^3 (addition theorem; the character of
    spin k/2 at angle psi times (k+1) / (2 pi^2); common practice).
    """
    c = np.clip(np.asarray(cos_psi, dtype=float), -1.0, 1.0)
    # Chebyshev U_k(c) = sin((k+1) psi) / sin(psi) by recurrence (exact at psi = 0, pi)
    prev, cur = np.zeros_like(c), np.ones_like(c)
    for _ in range(k):
        prev, cur = cur, 2.0 * c * cur - prev
    return (k + 1) * cur / (2.0 * math.pi**2)
