"""Exact a_lm of a degree-k field of S^3 on a sphere about the identity, by spherical tensor
operators (no sky grid, no quadrature).

A degree-k field F(y) = tr(C^T D^k(y)) (:mod:`topology.skies.s3_harmonics`) on the geodesic
sphere y = exp(chi u) = cos chi + sin chi u, u a pure unit quaternion, written as
y = R e^{i chi} R^-1 (u = R i R^-1):

    D^k(y) = D(R) Lambda D(R)^-1 = sum_l lambda_l sum_q T^l_q D^l_{q0}(R),
    Lambda = diag(e^{2 i (a - k/2) chi}),  lambda_l = <T^l_0, Lambda>,

where T^l_q (l = 0..k, |q| <= l) are the spherical tensor operators of End(V_{k/2}) normalised
in the Hilbert-Schmidt product (Wigner-Eckart: <j m+q| T^l_q |j m> = sqrt((2l+1)/(2j+1))
<j m; l q | j m+q>, Clebsch-Gordan coefficients with the Condon-Shortley phase) and
D^l_{q0}(R) = sqrt(4 pi/(2l+1)) conj(Y_lq(u)) (e.g. Sakurai, "Modern quantum mechanics",
eq. 3.6.52; Edmonds 1957, ch. 4-5). The directions are taken in the frame x = j, y = k, z = i
of the imaginary quaternions (right-handed: jk = i), where the rotation e^{t i/2} is
e^{-i t J_z} with J_z = -(a - k/2) on e_a, J_+ = -i F, J_- = i E (E, F the ladder operators
of :func:`topology.skies.s3_harmonics.wigner_d_direct`), so that the standard basis is
|j, m = k/2 - a> = i^a e_a. Hence, with m = the azimuthal number of Y_lm,

    a_lm(F) = lambda_l sqrt(4 pi/(2l+1)) (-1)^m i^m r_l sum_a C[a+m, a] <j, k/2-a; l, -m | j, k/2-a-m>,

r_l = sqrt((2l+1)/(k+1)): only the band |a - b| <= lmax of C enters.

Clebsch-Gordan coefficients <j m; l q | j m+q> for all l <= lmax at once by the three-term
recursion in l of Schulten & Gordon (1975, J. Math. Phys. 16, 1961; for 3j symbols in j3, here
with j1 = j2 = j):

    sqrt(((2j+1)^2 - (l+1)^2)((l+1)^2 - q^2)) c_{l+1} = (2l+1)(2m+q) c_l - sqrt(((2j+1)^2 - l^2)(l^2 - q^2)) c_{l-1},

started at l = |q| from c_q propto (-1)^q sqrt((j-m)!/(j-m-q)! (j+m+q)!/(j+m)!) (T^q_q is
proportional to J_+^q; sign from <j1 m1 j2 m2 | J J> propto (-1)^(j1-m1)), normalised by
sum_m c^2 = (2j+1)/(2l+1). The recursion runs forward from l = |q| like the associated
Legendre recursion; tested against sympy at small j and by orthonormality at j = 350, l = 128.
Cost ~ (lmax+1)^2 (k+1) / 2 per degree.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import gammaln


def _start_rows(k: int, top: int) -> np.ndarray:
    """c_{q,q}(a) = <j, k/2-a; q, q | j, k/2-a+q> for q = 0..top (module docstring)."""
    a = np.arange(k + 1, dtype=float)
    q = np.arange(top + 1, dtype=float)
    jm = a[None, :]                           # j - m = a
    jpm = (k - a)[None, :]                    # j + m = k - a
    valid = jm >= q[:, None]
    lg = 0.5 * (gammaln(jm + 1.0) - gammaln(np.where(valid, jm - q[:, None], 0.0) + 1.0)
                + gammaln(jpm + q[:, None] + 1.0) - gammaln(jpm + 1.0))
    lg = np.where(valid, lg, -np.inf)
    lg -= lg.max(axis=1, keepdims=True)
    start = np.exp(lg)
    start *= (np.sqrt((k + 1.0) / (2.0 * q + 1.0)) / np.sqrt((start**2).sum(axis=1)) * (-1.0) ** q)[:, None]
    return start


def _backward_columns(k: int, top: int):
    """Columns (q, a) whose forward recursion in l would lose accuracy before l = top, their
    matching degree l_m, and their values c_l, l_m - 1 <= l <= top, from the backward recursion.

    The recursion has local roots r+- with |r+ / r-| = exp(2 acosh(rho)), rho = (2l+1)|2m+q| /
    (2 sqrt(D B)) > 1 beyond the upper turning point, where the forward solution decays and
    errors grow by that factor per step (Schulten & Gordon 1975). Columns whose growth up to
    ``top`` exceeds 1e5 are recursed backward from l = k, where the recursion is exact (the
    l = k coefficient D vanishes: c_(k-1) / c_k = (2k+1)(2m+q) / B(k)), down to the most
    oscillatory degree l_m = sqrt((N^2 + q^2 - (2m+q)^2) / 2) (N = k + 1), and matched to the
    forward values there. Returns None when no column needs it.
    """
    n2 = (k + 1.0) ** 2
    q, a = np.nonzero(np.arange(k + 1)[None, :] >= np.arange(top + 1)[:, None])
    x = k - 2.0 * a + q
    lm = np.sqrt(np.maximum((n2 + q**2 - x**2) / 2.0, 0.0))
    cand = lm < top
    if not np.any(cand):
        return None
    q, a, x, lm = q[cand], a[cand], x[cand], lm[cand]
    step = max(1, top // 32)
    grid = np.arange(1, top + 1, step, dtype=float)[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        rho = (2.0 * grid + 1.0) * np.abs(x) / (2.0 * np.sqrt((n2 - grid**2) * (grid**2 - q**2)))
        grow = np.where((grid > lm) & (grid > q) & (rho > 1.0), 2.0 * np.arccosh(np.maximum(rho, 1.0)), 0.0)
    need = grow.sum(axis=0) * step > math.log(1e5)
    if not np.any(need):
        return None
    q, a, x = q[need], a[need], x[need]
    lm = np.clip(np.floor(lm[need]).astype(int), q + 1, top)
    low = int(lm.min()) - 1
    ls = np.arange(low + 1, k + 1, dtype=float)[:, None]        # the l of each backward step
    with np.errstate(divide="ignore", invalid="ignore"):
        b = np.sqrt((n2 - ls**2) * np.maximum(ls**2 - q**2, 0.0))
        inv_b = np.where(b > 0, 1.0 / b, 0.0)
        d = np.sqrt(np.maximum(n2 - (ls + 1.0) ** 2, 0.0) * np.maximum((ls + 1.0) ** 2 - q**2, 0.0))
    cx = (2.0 * ls + 1.0) * x * inv_b
    cd = d * inv_b
    vals = np.zeros((top - low + 1, len(q)))                    # c_l for l = low..top
    cur, nxt = np.ones(len(q)), np.zeros(len(q))                 # c_k, c_(k+1)
    for l in range(k, low, -1):                                  # c_(l-1) from c_l, c_(l+1)
        if l <= top:
            vals[l - low] = cur
        i = l - low - 1
        nxt, cur = cur, cx[i] * cur - cd[i] * nxt
        if l % 4 == 0 and np.abs(cur).max() > 1e200:
            scale = np.maximum(np.abs(cur) / 1e100, 1.0)
            cur, nxt = cur / scale, nxt / scale
            vals /= scale
    if low <= top:
        vals[0] = cur
    vals /= np.maximum(np.abs(vals).max(axis=0), 1e-300)       # matching needs only ratios
    return q, a, lm, low, vals


def coupling_rows(k: int, lmax: int):
    """Yield (l, t) for l = 0..min(lmax, k): t[q, a] = <j, k/2-a; l, q | j, k/2-a+q>, q = 0..l.

    t has shape (l+1, k+1) (a view, overwritten by the next step); zero where k/2-a+q > j.
    Forward recursion from l = q, with the columns that need it (:func:`_backward_columns`)
    taken from the backward recursion beyond their matching degree.
    """
    top = min(int(lmax), int(k))
    start = _start_rows(k, top)
    a = np.arange(k + 1, dtype=float)
    q = np.arange(top + 1, dtype=float)
    x = (k - 2.0 * a)[None, :] + q[:, None]   # 2m + q
    n2 = (k + 1.0) ** 2
    ll = np.arange(top, dtype=float)[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        den = np.sqrt((n2 - (ll + 1.0) ** 2) * ((ll + 1.0) ** 2 - q[None, :] ** 2))
        fa = (2.0 * ll + 1.0) / den                                   # [l, q], q <= l
        fb = -np.sqrt((n2 - ll**2) * np.maximum(ll**2 - q[None, :] ** 2, 0.0)) / den
    back = _backward_columns(k, top)
    if back is not None:
        bq, ba, blm, blow, bvals = back
        scale = np.zeros(len(bq))
    cur = np.zeros((top + 1, k + 1))
    prev = np.zeros_like(cur)
    tmp = np.empty_like(cur)
    cur[0] = start[0]
    yield 0, cur[:1]
    for l in range(top):
        n = l + 1
        t = tmp[:n]
        np.multiply(x[:n], cur[:n], out=t)
        t *= fa[l, :n, None]
        p = prev[:n]
        p *= fb[l, :n, None]
        p += t
        cur, prev = prev, cur                  # prev now holds c_l, cur c_{l+1}
        cur[n] = start[n]
        if back is not None and n >= blow:
            sel = blm == n                     # match: least squares over l_m - 1, l_m
            if np.any(sel):
                f1, f0 = cur[bq[sel], ba[sel]], prev[bq[sel], ba[sel]]
                b1, b0 = bvals[n - blow, sel], bvals[n - 1 - blow, sel]
                scale[sel] = (f1 * b1 + f0 * b0) / (b1**2 + b0**2)
            beyond = blm < n
            if np.any(beyond):
                cur[bq[beyond], ba[beyond]] = scale[beyond] * bvals[n - blow, beyond]
        yield n, cur[:n + 1]


def band(c: np.ndarray, lmax: int) -> np.ndarray:
    """The diagonals of C that reach l <= lmax, as a real array (L+1, k+1, 4), L = min(lmax, k):
    [..., 0:2] = re, im of C[a-q, a] and [..., 2:4] = re, im of C[k-a+q, k-a], zero for a < q."""
    k = c.shape[0] - 1
    top = min(int(lmax), k)
    q = np.arange(top + 1)[:, None]
    a = np.arange(k + 1)[None, :]
    ok = a >= q
    lower = np.where(ok, c[np.where(ok, a - q, 0), a], 0.0)
    upper = np.where(ok, c[np.where(ok, k - a + q, 0), k - a], 0.0)
    return np.stack([lower.real, lower.imag, upper.real, upper.imag], axis=-1)


def band_lowrank(left: np.ndarray, right: np.ndarray, lmax: int) -> np.ndarray:
    """:func:`band` of C = left @ right ((k+1, r) and (r, k+1)) without forming C: cost
    2 (L+1)(k+1) r, in blocks of rows q (bounded memory)."""
    k = left.shape[0] - 1
    r = left.shape[1]
    top = min(int(lmax), k)
    out = np.zeros((top + 1, k + 1, 4))
    a = np.arange(k + 1)[None, :]
    rt = right.T                                            # [a, j]
    step = max(1, 2_000_000 // max(1, (k + 1) * r))
    for q0 in range(0, top + 1, step):
        q = np.arange(q0, min(top + 1, q0 + step))[:, None]
        ok = a >= q
        lo = np.einsum("qaj,aj->qa", left[np.where(ok, a - q, 0)], rt)
        up = np.einsum("qaj,aj->qa", left[np.where(ok, k - a + q, 0)], rt[::-1])
        lo[~ok] = 0.0
        up[~ok] = 0.0
        out[q0:q0 + len(q)] = np.stack([lo.real, lo.imag, up.real, up.imag], axis=-1)
    return out


def shell_phases(k: int, chi: float) -> np.ndarray:
    """The diagonal of Lambda = D^k(e^{i chi}) in the standard order: e^{-2 i (k/2 - a) chi}, a = 0..k."""
    return np.exp(-2j * (k / 2.0 - np.arange(k + 1)) * chi)


def multipole_factors(k: int, lam: np.ndarray) -> np.ndarray:
    """f[l, q] = lambda_l (2l+1)/(k+1) sqrt(4 pi/(2l+1)) (-1)^q (l, q = 0..len(lam) - 1), with
    lambda_l = <T^l_0, Lambda> = sum_a t_l[0, a] Lambda_a: the common factor of a_{l,+-q} of a
    degree-k field (module docstring; :meth:`SphereAlm.add`)."""
    ell = np.arange(len(lam))[:, None]
    q = np.arange(len(lam))[None, :]
    f = lam[:, None] * (2.0 * ell + 1.0) / (k + 1.0) * math.sqrt(4.0 * math.pi) / np.sqrt(2.0 * ell + 1.0)
    return f * (-1.0) ** q


class SphereAlm:
    """Accumulates a_lm(F), l <= lmax, |m| <= l, of F = sum_k tr(C_k^T D^k(exp(chi u))) in the
    frame (j, k, i) (module docstring). ``add(k, band(C_k))`` per degree; :meth:`real_alm`
    gives the healpy-ordered a_lm of sqrt(2) Re F."""

    def __init__(self, lmax: int, chi: float):
        self.lmax = int(lmax)
        self.chi = float(chi)
        self.neg = np.zeros((self.lmax + 1, self.lmax + 1), dtype=complex)   # [l, q]: m = -q
        self.pos = np.zeros((self.lmax + 1, self.lmax + 1), dtype=complex)   # [l, q]: m = +q

    def add(self, k: int, b: np.ndarray) -> None:
        """Add degree k given its band ``b`` (:func:`band`, at least min(lmax, k) + 1 rows)."""
        top = min(self.lmax, k)
        ph = shell_phases(k, self.chi)
        sums = np.zeros((top + 1, top + 1, 4))                          # [l, q, part]
        lam = np.zeros(top + 1, dtype=complex)
        for l, t in coupling_rows(k, top):
            lam[l] = t[0] @ ph
            sums[l, :l + 1] = np.matmul(t[:, None, :], b[:l + 1])[:, 0, :]
        ell = np.arange(top + 1)[:, None]
        q = np.arange(top + 1)[None, :]
        f = multipole_factors(k, lam)
        self.neg[:top + 1, :top + 1] += f * (1j ** (-q)) * (sums[..., 0] + 1j * sums[..., 1])
        self.pos[:top + 1, :top + 1] += f * (1j ** q) * (-1.0) ** ell * (sums[..., 2] + 1j * sums[..., 3])

    def real_alm(self, scale: float = 1.0) -> np.ndarray:
        """healpy a_lm (l, m <= lmax) of scale sqrt(2) Re F: (a_lm + (-1)^m conj a_l,-m) / sqrt(2)."""
        from healpy import Alm

        ell, m = Alm.getlm(self.lmax)
        out = self.pos[ell, m] + (-1.0) ** m * np.conj(self.neg[ell, m])
        return scale / math.sqrt(2.0) * out


class ColumnAlm:
    """The a_lm at degree k of single-column coefficient matrices C = u e_b^T (the sparse form of
    :meth:`SphereAlm.add`, for many such C at once: the harmonic covariance of
    :mod:`topology.harmonic.spherical`). Only column a = b of C enters the band, so

        a_{l,-q}(F) = f_lq i^-q t_l[q, b] u[b - q]            (b >= q),
        a_{l,+q}(F) = f_lq i^q (-1)^l t_l[q, k - b] u[b + q]    (b + q <= k),

    F = tr(C^T D^k(exp(chi u))), f = :func:`multipole_factors`, t_l the Clebsch-Gordan rows of
    :func:`coupling_rows` (all l <= min(lmax, k) kept: (L+1)^2 (k+1) numbers)."""

    def __init__(self, k: int, lmax: int, chi: float):
        self.k = int(k)
        self.top = min(int(lmax), self.k)
        ph = shell_phases(self.k, chi)
        self.t = np.zeros((self.top + 1, self.top + 1, self.k + 1))         # [l, q, a]
        lam = np.zeros(self.top + 1, dtype=complex)
        for l, t in coupling_rows(self.k, self.top):
            self.t[l, :l + 1] = t
            lam[l] = t[0] @ ph
        q = np.arange(self.top + 1)
        ell = q[:, None]
        f = multipole_factors(self.k, lam)
        self.f_neg = f * (1j ** (-q))[None, :]
        self.f_pos = f * (1j ** q)[None, :] * (-1.0) ** ell

    def real_alm(self, u: np.ndarray, b: np.ndarray, scale: float = 1.0, ell=None, m=None
                 ) -> tuple[np.ndarray, np.ndarray]:
        """(A, B), each (P, M) complex: the a_lm (healpy's, m >= 0, as :meth:`SphereAlm.real_alm`) at
        the P pairs (``ell``, ``m``) (default: every l <= min(lmax, k), m <= l, healpy's order) of
        scale sqrt(2) Re F_j and of scale sqrt(2) Re (i F_j), F_j the field of C_j = u[:, j] e_{b_j}^T;
        u (k+1, M), b (M,) integer columns."""
        if ell is None:
            from healpy import Alm

            ell, m = Alm.getlm(self.top)
        ell = np.asarray(ell, dtype=int)[:, None]
        q = np.asarray(m, dtype=int)[:, None]
        b = np.asarray(b, dtype=int)[None, :]
        j = np.arange(b.shape[1])[None, :]
        lo, hi = b - q, b + q
        u = np.asarray(u)
        u_lo = np.where(lo >= 0, u[np.clip(lo, 0, self.k), j], 0.0)                    # [pair, j]
        u_hi = np.where(hi <= self.k, u[np.clip(hi, 0, self.k), j], 0.0)
        neg = self.f_neg[ell, q] * self.t[ell, q, b] * u_lo
        pos = self.f_pos[ell, q] * self.t[ell, q, self.k - b] * u_hi
        c = np.conj(neg)
        c *= (-1.0) ** q
        s = scale / math.sqrt(2.0)
        return s * (pos + c), (1j * s) * (pos - c)


def rotate_alm(alm: np.ndarray, lmax: int, q: np.ndarray) -> np.ndarray:
    """a_lm (healpy order) of n -> G(Q n) from those of G, for a 3x3 orthogonal Q.

    det Q = -1: parity (-1)^l, then the proper part. n -> G(Q n) is G turned by R = Q^T; with
    R = R_z(alpha) R_y(beta) R_z(gamma),
        a'_lm = sum_m' e^{-i m alpha} d^l_{m m'}(beta) e^{-i m' gamma} a_lm'
    (Wigner rotation of the a_lm; e.g. Varshalovich et al. 1988, ch. 4; common practice), with
    d^l_{m m'}(beta) = d^(2l)(beta)[l - m, l - m'] of :func:`~topology.skies.s3_harmonics.wigner_d`
    (in the standard basis |l, m> = i^a e_a the rotation e^{k beta / 2} about y is d^(2l)(beta)).
    Checked against healpy.rotate_alm in the tests.
    """
    from healpy import Alm

    from .s3_harmonics import wigner_d

    q = np.asarray(q, dtype=float)
    alm = np.asarray(alm, dtype=complex)
    ell_all, m_all = Alm.getlm(lmax)
    if np.linalg.det(q) < 0:
        alm = alm * (-1.0) ** ell_all
        q = -q
    r = q.T
    beta = math.acos(max(-1.0, min(1.0, r[2, 2])))
    if abs(math.sin(beta)) > 1e-12:
        alpha = math.atan2(r[1, 2], r[0, 2])
        gamma = math.atan2(r[2, 1], -r[2, 0])
    else:
        alpha = math.atan2(r[1, 0], r[0, 0]) if r[2, 2] > 0 else math.atan2(-r[1, 0], -r[0, 0])
        gamma = 0.0
    out = np.zeros_like(alm)
    for k, d in wigner_d(beta, 2 * lmax):
        if k % 2:
            continue
        l = k // 2
        m = np.arange(l, -l - 1, -1)                     # row/column c <-> m = l - c
        idx = Alm.getidx(lmax, l, np.abs(m))
        full = alm[idx].copy()
        neg = m < 0
        full[neg] = (-1.0) ** m[neg] * np.conj(full[neg])
        rot = np.exp(-1j * m * alpha) * (d[0] @ (np.exp(-1j * m * gamma) * full))
        keep = m >= 0
        out[idx[keep]] = rot[keep]
    return out
