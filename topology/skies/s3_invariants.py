"""Gamma-invariant eigenmodes of S^3 at each degree k, for the finite groups of spherical spaces.

A degree-k field f(x) = tr(C^T D^k(x)) (:mod:`topology.skies.s3_harmonics`) is invariant under
x -> a x b for all (a, b) in Gamma iff C = D^k(a)^T C D^k(b)^T; the invariant C are the range
of the group average P(C) = (1/|Gamma|) sum D^k(a)^T C D^k(b)^T, an orthogonal projection
(common practice; Lehoucq, Weeks, Uzan, Gausmann & Luminet 2002, CQG 19, 4683). Three kinds:

* Left groups (b = +-1: D*_m, T*, O*, I* and L(p, 1)): P(C) = S^T C with S = (1/|G|) sum D^k(g),
  the orthogonal projector on the vectors fixed by G. In a frame h where an element g1 of
  largest order is e^{i theta} (D^k(g1) diagonal) the fixed vectors lie in E = {a : e^{i (2a-k)
  theta} = 1}, and S restricted to E is (1/|G|) sum_g Phi(alpha_g) d^k(beta_g) Phi(gamma_g) on
  E x E (Euler form of h g h^-1); a few distinct beta_g (for I*: 0, 63.4, 116.6, 180 deg), each
  from Delta^k = d^k(pi/2) by the Fourier form. S is a projector: its trace is the number m_k
  of fixed vectors, and S applied to a fixed Gaussian block (twice, then orthonormalised) gives
  V with S = V V^H (the departure from a projector is :attr:`LeftDegree.defect`); the (k+1) m_k
  invariant modes are C = conj(V) W, W any m_k x (k+1) matrix.
* Diagonal groups (a, b in {e^{i theta}}: lens spaces L(p, q)): D^k(a), D^k(b) are diagonal and
  P(C) keeps the entries with (2 alpha - k) theta_a + (2 beta - k) theta_b = 0 mod 2 pi for all
  pairs (the explicit modes of the lens space, products e^{i (m1 phi1 + m2 phi2)} in toroidal
  coordinates).
* Any other group: the projector built from the Wigner matrices of all pairs (cost ~ k^3
  |Gamma| per degree; for small k only).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Iterator

import numpy as np

from .. import geometry as geo
from .s3_harmonics import apply_d, euler_angles, phases, wigner_d_direct, wigner_d_halfpi, wigner_stack
from .s3_tensors import band, band_lowrank

_ATOL = 1e-9
#: degrees whose invariant modes a group keeps once computed (small: repeated draws of small fields)
CACHE_KMAX = 64


def _is_diagonal_quat(q: np.ndarray) -> np.ndarray:
    return np.all(np.abs(q[..., 2:]) < _ATOL, axis=-1)


def _rotation_to_i(axis: np.ndarray) -> np.ndarray:
    """A unit quaternion h with h axis h^-1 = i for a pure unit axis (3,)."""
    i_axis = np.array([1.0, 0.0, 0.0])
    if axis @ i_axis < -1.0 + 1e-12:
        return np.array([0.0, 0.0, 1.0, 0.0])          # j i j^-1 = -i
    h = np.concatenate([[1.0 + axis @ i_axis], np.cross(axis, i_axis)])
    return h / np.linalg.norm(h)


def _qmul(a, b):
    return geo.quat_multiply(a, b)


def _qconj(a):
    return geo.quat_conjugate(a)


def rotate_thin(delta: np.ndarray | None, q: np.ndarray, v: np.ndarray, transpose: bool = False) -> np.ndarray:
    """D^k(q) v (or D^k(q)^T v) for one unit quaternion q, by the Euler form and the Fourier form
    of d^k; ``delta`` = d^k(pi/2) (only needed when beta(q) is not 0 or pi)."""
    k = v.shape[0] - 1
    al, be, ga = (float(x) for x in euler_angles(q))
    if transpose:
        al, ga = ga, al
    out = phases(k, ga)[:, None] * v
    if be > _ATOL:
        if be > math.pi - _ATOL:
            out = ((-1.0) ** np.arange(k + 1))[:, None] * out     # d(pi)[k-a, a] = (-1)^a
            out = out[::-1] if not transpose else out[::-1] * (-1.0) ** k
        else:
            out = apply_d(delta, be, out, transpose=transpose)
    return phases(k, al)[:, None] * out


# ---------------------------------------------------------------------------------------------
# left groups
# ---------------------------------------------------------------------------------------------
class LeftDegree:
    """The invariant modes of a left group at degree k: C = conj(V) W (module docstring).

    ``basis`` V (k+1, m) orthonormal in the original frame (None: the trivial group, V = 1),
    ``count`` = (k+1) m, ``defect`` = max(|tr S - m|, |S V - V|).
    """

    def __init__(self, k: int, basis: np.ndarray | None, defect: float):
        self.k = k
        self.basis = basis
        self.rank = k + 1 if basis is None else basis.shape[1]
        self.count = (k + 1) * self.rank
        self.defect = defect

    def weights(self, z: np.ndarray | None = None, rng: np.random.Generator | None = None) -> np.ndarray:
        """W (m, k+1) of a white draw: V^T Z for a given white Z (k+1, k+1) (then conj(V) W =
        P(Z)), else m (k+1) standard complex normals from ``rng`` (the same distribution)."""
        if z is None:
            g = rng.standard_normal((2, self.rank, self.k + 1))
            return (g[0] + 1j * g[1]) * math.sqrt(0.5)
        return np.array(z, dtype=complex) if self.basis is None else self.basis.T @ z

    def coefficients(self, w: np.ndarray) -> np.ndarray:
        """C = conj(V) W (dense)."""
        return np.array(w, dtype=complex) if self.basis is None else np.conj(self.basis) @ w

    def observed_band(self, w, x0, delta, lmax: int, scale: float) -> np.ndarray:
        """band(scale D^k(x0)^T C, lmax) (:func:`topology.skies.s3_tensors.band`): the coefficients
        of y -> f(x0 y); D^k(x0)^T conj(V) W = conj(D^k(x0^-1) V) W, from the thin factors when
        that is cheaper than the full product."""
        k = self.k
        if self.basis is None:
            return band(scale * rotate_thin(delta, x0, np.array(w, dtype=complex), transpose=True), lmax)
        moved = np.conj(rotate_thin(delta, _qconj(x0), self.basis))
        if 2 * (min(lmax, k) + 1) >= k + 1:
            return band(scale * (moved @ w), lmax)
        return band_lowrank(scale * moved, w, lmax)


class LeftGroup:
    """A finite group G of unit quaternions acting by x -> g x (see module docstring)."""

    kind = "left"

    def __init__(self, quats: np.ndarray):
        self.quats = np.asarray(quats, dtype=float).reshape(-1, 4)
        self.order = len(self.quats)
        w = self.quats[:, 0]
        others = np.flatnonzero(w < 1.0 - _ATOL)
        if len(others) == 0:                           # the trivial group
            self.h = np.array([1.0, 0.0, 0.0, 0.0])
            self.theta = 0.0
        else:
            g1 = self.quats[others[np.argmax(w[others])]]
            self.theta = math.acos(max(-1.0, min(1.0, g1[0])))
            axis = g1[1:] / np.linalg.norm(g1[1:])
            self.h = _rotation_to_i(axis)
        self._cache = {}
        self.has_minus_one = bool(np.any(np.all(np.abs(self.quats - [-1.0, 0.0, 0.0, 0.0]) < _ATOL, axis=1)))
        hq = _qmul(_qmul(self.h[None, :], self.quats), _qconj(self.h)[None, :])
        al, be, ga = euler_angles(hq)
        self.h_inv = _qconj(self.h)
        # elements grouped by beta: 0 (diagonal), pi (anti-diagonal), generic (Fourier form)
        self.diag = (al + ga)[be < _ATOL]
        anti = be > math.pi - _ATOL
        self.anti = (al[anti], ga[anti])
        self.generic = []
        gen = (be >= _ATOL) & ~anti
        for b in np.unique(np.round(be[gen], 9)):
            sel = gen & (np.abs(be - b) < 1e-8)
            self.generic.append((float(np.mean(be[sel])), al[sel], ga[sel]))

    @property
    def needs_delta(self) -> bool:
        return bool(self.generic) or not np.allclose(self.h, [1.0, 0.0, 0.0, 0.0])

    def fixed_space(self, k: int) -> np.ndarray:
        """The index set E (in the frame h) that holds the fixed vectors."""
        a = np.arange(k + 1)
        return np.flatnonzero(np.abs(np.exp(1j * (2 * a - k) * self.theta) - 1.0) < 1e-6)

    def degree(self, k: int, delta: np.ndarray | None = None) -> LeftDegree:
        """The invariant modes at degree k (kept for k <= CACHE_KMAX); ``delta`` = d^k(pi/2)
        (computed directly if None)."""
        if k in self._cache:
            return self._cache[k]
        out = self._degree(k, delta)
        if k <= CACHE_KMAX:
            self._cache[k] = out
        return out

    def _degree(self, k: int, delta: np.ndarray | None) -> LeftDegree:
        """The invariant modes at degree k.

        S on E x E is summed per distinct beta (Fourier form; d(pi - beta) from d(beta) through
        d(pi - beta) = d(pi) d(beta)^T). Its rank is its trace (a projector); the basis is the
        range of S applied twice to a fixed Gaussian block, orthonormalised (S is a projector,
        so this is exact up to rounding at a cost O(|E|^2 m) instead of an eigensolver).
        ``defect`` = max(|tr S - rank|, |S V - V|): 0 up to rounding.
        """
        if self.order == 1:
            return LeftDegree(k, None, 0.0)
        if k % 2 and self.has_minus_one:               # D^k(-1) = (-1)^k: no odd-k invariants
            return LeftDegree(k, np.zeros((k + 1, 0), dtype=complex), 0.0)
        if delta is None and self.needs_delta:
            delta = wigner_d_direct(math.pi / 2.0, k)
        e = self.fixed_space(k)
        ne = len(e)
        s = np.zeros((ne, ne), dtype=complex)
        if ne:
            ee = 2 * e - k
            if len(self.diag):
                s[np.arange(ne), np.arange(ne)] += np.exp(1j * np.multiply.outer(self.diag, ee)).sum(axis=0)
            if len(self.anti[0]):
                pos = {int(v): i for i, v in enumerate(e)}
                src = [i for i, v in enumerate(e) if (k - v) in pos]
                dst = [pos[k - int(e[i])] for i in src]
                if src:
                    pa = np.exp(1j * np.multiply.outer(self.anti[0], ee[dst]))     # Phi(alpha)[k - a]
                    pg = np.exp(1j * np.multiply.outer(self.anti[1], ee[src]))     # Phi(gamma)[a]
                    s[dst, src] += (pa * pg).sum(axis=0) * (-1.0) ** e[src]
            blocks = {}
            for beta, al, ga in self.generic:
                s += _phase_sum(ee, al, ga) * _d_block(delta, beta, e, blocks)
            s /= self.order
        s = 0.5 * (s + s.conj().T)
        tr = float(np.trace(s).real)
        rank = int(round(tr))
        vh = np.zeros((k + 1, rank), dtype=complex)
        defect = abs(tr - rank)
        if rank:
            g = np.random.default_rng(k).standard_normal((ne, rank))     # fixed: deterministic
            q = np.linalg.qr(s @ (s @ g))[0]
            q = np.linalg.qr(s @ q)[0]
            defect = max(defect, float(np.abs(s @ q - q).max()))
            vh[e] = q
        basis = rotate_thin(delta, self.h_inv, vh)
        return LeftDegree(k, basis, defect)


def _phase_sum(ee, al, ga) -> np.ndarray:
    """sum_g Phi(alpha_g)[b] Phi(gamma_g)[a] on E x E (ee = 2E - k)."""
    return np.exp(1j * np.multiply.outer(ee, al)) @ np.exp(1j * np.multiply.outer(ga, ee))


def _d_block(delta: np.ndarray, beta: float, e: np.ndarray, cache: dict) -> np.ndarray:
    """d^k(beta)[E, E] by the Fourier form: i^(b-a) sum_c Delta[b,c] Delta[a,c] e^{i (c-k/2) beta}.

    E is symmetric under a -> k - a; d(pi - beta)[b, a] = (-1)^(k-b) d(beta)[a, k-b] reuses a
    block already in ``cache`` (keyed by beta)."""
    k = delta.shape[0] - 1
    for b0, blk in cache.items():
        if abs(b0 + beta - math.pi) < 1e-9:
            return ((-1.0) ** (k - e))[:, None] * blk.T[::-1]
    de = delta[e]
    arg = beta * (np.arange(k + 1) - k / 2.0)
    re = (de * np.cos(arg)) @ de.T
    im = (de * np.sin(arg)) @ de.T
    par = (e[:, None] - e[None, :]) % 4
    out = np.where(par == 0, re, 0.0) - np.where(par == 2, re, 0.0)
    out -= np.where(par == 1, im, 0.0)
    out += np.where(par == 3, im, 0.0)
    cache[beta] = out
    return out


# ---------------------------------------------------------------------------------------------
# diagonal groups (lens spaces)
# ---------------------------------------------------------------------------------------------
class DenseDegree:
    """A degree whose invariant coefficients are the full (k+1, k+1) matrix C itself."""

    def coefficients(self, w: np.ndarray) -> np.ndarray:
        return w

    def observed_band(self, w, x0, delta, lmax: int, scale: float) -> np.ndarray:
        """band(scale D^k(x0)^T C, lmax): the coefficients of y -> f(x0 y)."""
        return band(scale * rotate_thin(delta, x0, w, transpose=True), lmax)


class DiagonalDegree(DenseDegree):
    """Invariant modes of a diagonal group at degree k: the entries of ``mask``."""

    def __init__(self, k: int, mask: np.ndarray):
        self.k = k
        self.mask = mask
        self.count = int(mask.sum())
        self.defect = 0.0

    def weights(self, z: np.ndarray | None = None, rng: np.random.Generator | None = None) -> np.ndarray:
        """C = P(Z) (Z masked), or standard complex normals at the masked entries from ``rng``."""
        if z is not None:
            return np.where(self.mask, z, 0.0)
        g = rng.standard_normal((2, self.count))
        c = np.zeros(self.mask.shape, dtype=complex)
        c[self.mask] = (g[0] + 1j * g[1]) * math.sqrt(0.5)
        return c


class DiagonalGroup:
    """Pairs (a, b) of unit quaternions in {cos t + i sin t} acting by x -> a x b."""

    kind = "diagonal"
    needs_delta = False

    def __init__(self, pairs: np.ndarray):
        pairs = np.asarray(pairs, dtype=float).reshape(-1, 2, 4)
        self.order = len(pairs)
        self.ta = np.arctan2(pairs[:, 0, 1], pairs[:, 0, 0])
        self.tb = np.arctan2(pairs[:, 1, 1], pairs[:, 1, 0])

    def degree(self, k: int, delta=None) -> DiagonalDegree:
        avg = (phases(k, self.ta).T @ phases(k, self.tb)) / self.order   # [alpha, beta]
        return DiagonalDegree(k, avg.real > 0.5)


# ---------------------------------------------------------------------------------------------
# any group: the projector from all Wigner matrices (small k)
# ---------------------------------------------------------------------------------------------
class GeneralDegree(DenseDegree):
    def __init__(self, k: int, da: np.ndarray, db: np.ndarray):
        self.k = k
        n = k + 1
        # P(C)_xy = (1/|G|) sum_g sum_uv D(a)_ux C_uv D(b)_yv: the (n^2, n^2) matrix of P
        self.matrix = np.einsum("gab,gcd->acbd", da, db).reshape(n * n, n * n) / len(da)
        lam = np.linalg.eigvalsh(0.5 * (self.matrix + self.matrix.conj().T))
        self.count = int(np.sum(lam > 0.5))
        self.defect = float(np.max(np.minimum(np.abs(lam), np.abs(1.0 - lam)), initial=0.0))

    def weights(self, z: np.ndarray | None = None, rng: np.random.Generator | None = None) -> np.ndarray:
        """C = P(Z) for a white Z (given, or drawn from ``rng``)."""
        n = self.k + 1
        if z is None:
            g = rng.standard_normal((2, n, n))
            z = (g[0] + 1j * g[1]) * math.sqrt(0.5)
        return (self.matrix @ z.reshape(n * n)).reshape(n, n)


class GeneralGroup:
    kind = "general"
    needs_delta = False

    def __init__(self, pairs: np.ndarray):
        self.pairs = np.asarray(pairs, dtype=float).reshape(-1, 2, 4)
        self.order = len(self.pairs)

    def degree(self, k: int, delta=None) -> GeneralDegree:
        quats = np.concatenate([self.pairs[:, 0], self.pairs[:, 1]])
        for kk, d in wigner_stack(quats, k):
            if kk == k:
                return GeneralDegree(k, d[:self.order].transpose(0, 2, 1), d[self.order:])
        raise AssertionError("unreachable")


def group_of(pairs: np.ndarray):
    """The invariant-mode builder for pairs (n, 2, 4): LeftGroup, DiagonalGroup or GeneralGroup
    (one object per group table, so that its kept degrees are shared)."""
    pairs = np.ascontiguousarray(np.asarray(pairs, dtype=float).reshape(-1, 2, 4))
    return _group_of(pairs.tobytes(), len(pairs))


@functools.lru_cache(maxsize=16)
def _group_of(key: bytes, n: int):
    pairs = np.frombuffer(key, dtype=float).reshape(n, 2, 4)
    b = pairs[:, 1]
    right_sign = np.sign(b[:, 0])
    if np.all(np.abs(np.abs(b[:, 0]) - 1.0) < _ATOL):             # b = +-1: x -> (+-a) x
        return LeftGroup(pairs[:, 0] * right_sign[:, None])
    if np.all(_is_diagonal_quat(pairs[:, 0])) and np.all(_is_diagonal_quat(b)):
        return DiagonalGroup(pairs)
    return GeneralGroup(pairs)


def degrees(group, kmax: int, kmin: int = 0, with_delta: bool = False) -> Iterator:
    """(degree, Delta^k or None) for k = kmin..kmax in one pass (one Risbo recursion for
    Delta^k = d^k(pi/2), run when the group or ``with_delta`` needs it and the degrees are not
    kept already)."""
    if (group.needs_delta and not (kmax <= CACHE_KMAX and group.kind == "left")) or with_delta:
        for k, delta in wigner_d_halfpi(kmax):
            if k >= kmin:
                yield group.degree(k, delta), delta
    else:
        for k in range(kmin, kmax + 1):
            yield group.degree(k), None


def invariant_ranks(pairs: np.ndarray, kmax: int) -> np.ndarray:
    """Number of Gamma-invariant degree-k eigenmodes for k = 0..kmax."""
    return np.array([d.count for d, _ in degrees(group_of(pairs), kmax)], dtype=np.int64)


def invariant_rank(pairs: np.ndarray, k: int) -> int:
    """Number of Gamma-invariant eigenmodes at one degree k (no recursion through lower k)."""
    return int(group_of(pairs).degree(int(k)).count)
