"""The S statistic of matched circles and its kernels.

Cornish, Spergel & Starkman (2004, PRL 92, 201302), with T_m the circle coefficients of
:mod:`topology.search.sampling`:

    S(tau) = 2 sum_{m>0} m Re[T_A,m conj(T_B,m) e^{-i m tau}] / sum_{m>0} m (|T_A,m|^2 + |T_B,m|^2)

S = 1 for identical circles, -1 for a circle and its negative. Orientation, derived from the
contract T_A(phi) = T_B(s phi + tau) of :mod:`topology.circles`:

* s = +1: T_A,m = e^{i m tau} T_B,m, so the sum above peaks at tau with S = 1 ("same");
* s = -1: T_A,m = e^{-i m tau} conj(T_B,m): the formula applied to the coefficients of the
  reversed circle B'(phi) = T_B(-phi), which are conj(T_B,m), peaks at tau' = -tau. So for
  "opposite" the kernels use conj(T_B) and report the twist tau = -tau' (mod 2 pi).

With a_m = sqrt(m) T_m, the numerator is 2 Re sum a_A conj(a_B) e^{-i m tau} and the
denominator |a_A|^2 + |a_B|^2. In real space this is the correlation of the filtered circles
f(phi) = sum_{m=1}^{M} 2 sqrt(m) Re(T_m e^{i m phi}) (Parseval):

    S(tau) = 2 sum_k f_A(phi_k) f_B(phi_k + tau) / sum_k [f_A(phi_k)^2 + f_B(phi_k + tau)^2].

Masked variant: the same sums restricted to the samples that both circles keep, w_A,k
w_B,k+j, for each shift j of the sample grid; the three sums are circular correlations,
computed with FFTs of each circle's masked products (once per circle, then one product and
inverse FFT per pair). Sub-grid twists: Newton steps on the trigonometric polynomial
(unmasked), a parabola through three shifts (masked). Pairs are ranked by the full-circle S
of the same chance probability, sqrt(1 - (1 - S^2)^f) for a jointly kept fraction f
(:func:`rank_score`), which puts cut and full circles on one null scale.

All-pairs kernel: for a block of circles the weighted coefficients are rotated by every twist
tau_j = 2 pi j / N_tau, x_jm = a_m e^{-i m tau_j}, written as real rows [Re x, Im x], and
multiplied (float32 matrix product, BLAS sgemm) by the columns [Re a_B, +-Im a_B] of all
circles (+ same, - opposite); the maximum over j is taken block by block.
"""

from __future__ import annotations

import numpy as np

SAME, OPPOSITE = 0, 1  # index of the orientation axis; s = +1, -1
ORIENTATION_SIGN = (1, -1)
ORIENTATION_NAME = ("same", "opposite")


# ---------------------------------------------------------------------------------------------
# coefficients
# ---------------------------------------------------------------------------------------------
def weighted(coeffs: np.ndarray, m_cut: int | None = None) -> np.ndarray:
    """a_m = sqrt(m) T_m for m = 1..m_cut: (n, M+1) -> (n, m_cut) complex."""
    m_cut = coeffs.shape[1] - 1 if m_cut is None else int(m_cut)
    return coeffs[:, 1 : m_cut + 1] * np.sqrt(np.arange(1, m_cut + 1))


def filtered_circles(coeffs: np.ndarray, n_phi: int, m_cut: int | None = None) -> np.ndarray:
    """f(phi_k) = sum_{m=1}^{M} 2 sqrt(m) Re(T_m e^{i m phi_k}) on the N_phi grid: (n, n_phi)."""
    a = weighted(coeffs, m_cut)
    spec = np.zeros((a.shape[0], n_phi // 2 + 1), dtype=complex)
    spec[:, 1 : a.shape[1] + 1] = a
    return np.fft.irfft(spec, n=n_phi, axis=1) * n_phi


def effective_m_cut(coeffs: np.ndarray, m_max: int, fraction: float = 0.999, minimum: int = 4) -> int:
    """Smallest m_cut holding ``fraction`` of the m-weighted power sum_m m |T_m|^2 averaged over
    circles (modes beyond carry nothing the beam left); at least ``minimum``, at most m_max."""
    p = np.mean(np.abs(coeffs[:, 1 : m_max + 1]) ** 2, axis=0) * np.arange(1, m_max + 1)
    total = p.sum()
    if not total > 0:
        return int(min(m_max, minimum))
    c = np.cumsum(p) / total
    return int(np.clip(np.searchsorted(c, fraction) + 1, min(minimum, m_max), m_max))


# ---------------------------------------------------------------------------------------------
# single pairs: exact S as a function of the twist, and its maximum
# ---------------------------------------------------------------------------------------------
def s_of_twist(ta: np.ndarray, tb: np.ndarray, tau, orientation: int = 1, m_cut: int | None = None) -> np.ndarray:
    """S at contract twists: coefficient rows (k, M+1), tau (k,) or (k, t) -> S of tau's shape.

    orientation +1: T_A(phi) = T_B(phi + tau); -1: T_A(phi) = T_B(-phi + tau).
    """
    a = weighted(np.atleast_2d(ta), m_cut)
    b = weighted(np.atleast_2d(tb), m_cut)
    m = np.arange(1, a.shape[1] + 1)
    tau = np.asarray(tau, dtype=float)
    t2 = tau.reshape(a.shape[0], -1)
    if orientation > 0:
        cross = a * np.conj(b)
        phase = np.exp(-1j * m * t2[..., None])
    else:
        cross = a * b  # a conj(conj b), peaking at tau' = -tau
        phase = np.exp(1j * m * t2[..., None])
    num = 2.0 * np.real(np.sum(cross[:, None, :] * phase, axis=-1))
    den = np.sum(np.abs(a) ** 2 + np.abs(b) ** 2, axis=1)[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / den, 0.0).reshape(tau.shape)


def best_twist_harmonic(ta: np.ndarray, tb: np.ndarray, m_cut: int | None = None, oversample: int = 4,
                        newton_steps: int = 3, orient: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """max over tau of S for unmasked pairs, both orientations (or only ``orient[i]`` per pair).

    ta, tb: (k, M+1). Returns S (k, 2) and the contract twist tau (k, 2) in [0, 2 pi): a grid of
    oversample * 2 (m_cut + 1) twists (one inverse real FFT), then Newton steps on the
    trigonometric polynomial, kept only when they improve on the grid value. Entries of the
    orientation not asked for are -inf.
    """
    a = weighted(np.atleast_2d(ta), m_cut)
    b = weighted(np.atleast_2d(tb), m_cut)
    k, mc = a.shape
    m = np.arange(1, mc + 1)
    den = np.sum(np.abs(a) ** 2 + np.abs(b) ** 2, axis=1)
    n_grid = int(oversample) * 2 * (mc + 1)
    h = 2.0 * np.pi / n_grid
    s_out = np.full((k, 2), -np.inf)
    t_out = np.zeros((k, 2))
    for o in (SAME, OPPOSITE):
        rows = np.arange(k) if orient is None else np.flatnonzero(np.asarray(orient) == o)
        if rows.size == 0:
            continue
        cross = 2.0 * (a[rows] * (np.conj(b[rows]) if o == SAME else b[rows]))
        spec = np.zeros((rows.size, n_grid // 2 + 1), dtype=complex)
        spec[:, 1 : mc + 1] = np.conj(cross)
        grid = np.fft.irfft(spec, n=n_grid, axis=1) * (n_grid / 2.0)  # Re sum_m c_m e^{-i m tau_j}
        j = np.argmax(grid, axis=1)
        best = grid[np.arange(rows.size), j]
        t0 = h * j
        tau = t0.copy()
        for _ in range(newton_steps):
            e = cross * np.exp(-1j * np.outer(tau, m))
            d1 = np.real(np.sum(-1j * m * e, axis=1))
            d2 = np.real(np.sum(-(m**2) * e, axis=1))
            step = np.where(d2 < 0, -d1 / np.where(d2 < 0, d2, -1.0), 0.0)
            tau = np.clip(tau + step, t0 - h, t0 + h)
        val = np.real(np.sum(cross * np.exp(-1j * np.outer(tau, m)), axis=1))
        better = val >= best
        tau = np.where(better, tau, t0)
        val = np.where(better, val, best)
        with np.errstate(invalid="ignore", divide="ignore"):
            s_out[rows, o] = np.where(den[rows] > 0, val / den[rows], 0.0)
        t_out[rows, o] = (tau if o == SAME else -tau) % (2.0 * np.pi)
    return s_out, t_out


def rank_score(s: np.ndarray, f: np.ndarray) -> np.ndarray:
    """Ranking score of a pair whose S is taken over a jointly kept fraction f of the samples: the
    full-circle S with the same chance probability, S_eq = sign(S) sqrt(1 - (1 - S^2)^f)
    (-inf stays -inf; S_eq = S for full circles).

    Why: for independent circles whose weighted modes are d independent Gaussian numbers of one
    variance, u = (x + y) / sqrt 2 and v = (x - y) / sqrt 2 are independent and
    S = (|u|^2 - |v|^2) / (|u|^2 + |v|^2), so (1 + S) / 2 ~ Beta(d/2, d/2) (common practice), whose
    tail is P(S' > S) ~ (1 - S^2)^(d/2) up to factors polynomial in d. The modes over an overlap
    number d ~ f d_full, so equal tails give 1 - S_eq^2 = (1 - S^2)^f: within 0.01 of the exact
    Beta equal-tail value for d_full = 30..200 (tests/test_search_statistic.py). Near S = 0,
    S_eq ~ S sqrt(f): one null spread for cut and full circles (tests/test_search_modes.py); a
    short overlap with S near 1 scores what its chance probability allows (S = 0.95 over 30% of the
    circle ranks as a full circle of S = 0.71), neither capped at sqrt(f) nor over-credited as by a
    Gaussian approximation of artanh(S), whose tails are too light for few modes."""
    s = np.asarray(s, dtype=float)
    f = np.clip(np.asarray(f, dtype=float), 0.0, 1.0)
    fin = np.isfinite(s)
    x = np.clip(np.where(fin, s, 0.0), -1.0, 1.0)
    eq = np.sign(x) * np.sqrt(np.maximum(1.0 - (1.0 - x * x) ** f, 0.0))
    return np.where(fin, eq, -np.inf)


def masked_spectra(f: np.ndarray, w: np.ndarray, dtype=np.float64) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Real FFTs (n, N/2 + 1) of g = w f, h = w f^2 and w for filtered circles f and kept flags w
    (n, N): the sums of the masked S are circular correlations of these, so each circle's spectra
    are computed once however many pairs use it. ``dtype`` float32: single-precision transforms
    (about twice as fast; S to about 1e-6)."""
    w = np.asarray(w, dtype=dtype)
    f = np.asarray(f, dtype=dtype)
    g = w * f
    return np.fft.rfft(g, axis=1), np.fft.rfft(g * f, axis=1), np.fft.rfft(w, axis=1)


def masked_sums(spec_a, spec_b, n: int, opposite=None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """For row-aligned spectra (:func:`masked_spectra`) and every shift j of the N-sample grid:
    num_j = sum_k g_A,k g_B,k+j, den_j = sum_k (h_A,k w_B,k+j + w_A,k h_B,k+j), over_j = sum_k w_A,k w_B,k+j
    (k, N) each, c_j = sum_k x_k y_k+j = irfft(conj(X) Y)_j. ``opposite`` (k,) bool: B is the
    reversed circle (sample k at phi = -phi_k), whose spectra are the conjugates (real samples)."""
    ga, ha, wa = (np.conj(x) for x in spec_a)
    gb, hb, wb = spec_b
    if opposite is not None:
        op = np.asarray(opposite, dtype=bool)
        if op.all():
            gb, hb, wb = np.conj(gb), np.conj(hb), np.conj(wb)
        elif op.any():
            op = op[:, None]
            gb, hb, wb = (np.where(op, np.conj(x), x) for x in (gb, hb, wb))
    num = np.fft.irfft(ga * gb, n=n, axis=1)
    den = np.fft.irfft(ha * wb + wa * hb, n=n, axis=1)
    over = np.fft.irfft(wa * wb, n=n, axis=1)
    return num, den, over


def _masked_grid(num, den, over, n, min_overlap):
    num, den, over = (np.asarray(x, dtype=float) for x in (num, den, over))
    ok = (over >= min_overlap * n - 1e-6) & (den > 1e-300)
    with np.errstate(invalid="ignore", divide="ignore"):
        grid = np.where(ok, 2.0 * num / np.where(ok, den, 1.0), -np.inf)
    return grid, np.clip(over / n, 0.0, 1.0)


def masked_s_grid(fa: np.ndarray, wa: np.ndarray, fb: np.ndarray, wb: np.ndarray,
                  min_overlap: float = 0.25, with_overlap: bool = False):
    """Masked real-space S_j = 2 sum_k W f_A,k f_B,k+j / sum_k W (f_A,k^2 + f_B,k+j^2), W = w_A,k w_B,k+j,
    for every shift j (tau_j = 2 pi j / N) of rows (k, N); -inf where the jointly kept samples are
    fewer than ``min_overlap`` N. ``with_overlap`` also returns the jointly kept fraction (k, N)."""
    n = fa.shape[1]
    grid, frac = _masked_grid(*masked_sums(masked_spectra(fa, wa), masked_spectra(fb, wb), n), n, min_overlap)
    if with_overlap:
        return grid, frac
    return grid


def _parabola_peak(s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Index offset and value of the parabola through each row's maximum and its neighbours."""
    k, n = s.shape
    s = np.where(np.isfinite(s), s, -1e300)
    j = np.argmax(s, axis=1)
    r = np.arange(k)
    s0 = s[r, j]
    sm = s[r, (j - 1) % n]
    sp = s[r, (j + 1) % n]
    curv = sm - 2.0 * s0 + sp
    good = (sm > -1e299) & (sp > -1e299) & (curv < 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        d = np.where(good, 0.5 * (sm - sp) / np.where(good, curv, -1.0), 0.0)
    d = np.clip(d, -0.5, 0.5)
    val = np.where(good, s0 - 0.25 * (sm - sp) * d, np.where(s0 > -1e299, s0, -np.inf))
    return j + d, val


def _masked_best(spec_a, spec_b, n: int, opposite: np.ndarray, min_overlap: float):
    """S, contract twist and jointly kept fraction (k,) at the shift of highest rank score, each row
    in its own orientation (``opposite`` (k,) bool)."""
    grid, frac = _masked_grid(*masked_sums(spec_a, spec_b, n, opposite), n, min_overlap)
    k = grid.shape[0]
    r = np.arange(k)
    j = np.argmax(rank_score(grid, frac), axis=1)
    sm, s0, sp = grid[r, (j - 1) % n], grid[r, j], grid[r, (j + 1) % n]
    d, val = _parabola_peak(np.stack([sm, s0, sp], axis=1))
    tau = 2.0 * np.pi * (j + (d - 1)) / n
    s = np.where(np.isfinite(val), val, -np.inf)
    return s, np.where(opposite, -tau, tau) % (2.0 * np.pi), frac[r, j]


def _masked_rows(spec_a, spec_b, n, min_overlap, orient):
    """Masked S of row-aligned circles (their :func:`masked_spectra`): S (k, 2), contract twist
    (k, 2), jointly kept fraction f (k, 2), both orientations (or only ``orient[i]`` per row; the
    other entries are -inf, 0, 0).

    The shift chosen maximises the rank score sqrt(1 - (1 - S^2)^f) (:func:`rank_score`), not S:
    under the null the spread of S grows as f falls (fewer modes), so a short overlap cannot win by
    chance alone. The S reported is the S at that shift (parabola-refined over the neighbouring shifts).
    """
    k = spec_a[0].shape[0]
    s_out = np.full((k, 2), -np.inf)
    t_out = np.zeros((k, 2))
    f_out = np.zeros((k, 2))
    if orient is None:
        for o in (SAME, OPPOSITE):
            s_out[:, o], t_out[:, o], f_out[:, o] = _masked_best(spec_a, spec_b, n, np.full(k, o == OPPOSITE),
                                                                 min_overlap)
    else:
        o = np.asarray(orient, dtype=int)
        for oo in (SAME, OPPOSITE):  # one orientation per call: no per-row conjugation
            rows = np.flatnonzero(o == oo)
            if rows.size:
                s_out[rows, oo], t_out[rows, oo], f_out[rows, oo] = _masked_best(
                    _take(spec_a, rows), _take(spec_b, rows), n, np.full(rows.size, oo == OPPOSITE), min_overlap)
    return s_out, t_out, f_out


def _take(spec, idx):
    return tuple(x[idx] for x in spec)


def coarse_kept(kept: np.ndarray, n_c: int) -> np.ndarray:
    """Kept flags (n, N) of a circle grid resampled to n_c samples: a sample is kept when every
    sample of the N grid nearest to it is kept (a masked stretch is never counted as kept)."""
    n = kept.shape[1]
    if n_c == n:
        return np.asarray(kept, dtype=bool)
    nearest = np.floor(np.arange(n) * n_c / n + 0.5).astype(int) % n_c
    out = np.ones((kept.shape[0], n_c), dtype=bool)
    for k in range(n_c):
        out[:, k] = kept[:, nearest == k].all(axis=1)
    return out


def best_twist(circ_a, circ_b, ia: np.ndarray, ib: np.ndarray, m_cut: int | None = None,
               min_overlap: float = 0.25, block: int = 4096, with_overlap: bool = False,
               orient: np.ndarray | None = None, single: bool = False):
    """S and contract twist (k, 2) for pairs (circ_a[ia[i]], circ_b[ib[i]]): the exact harmonic
    maximum when both circles are fully kept, the masked real-space variant otherwise
    (``with_overlap`` adds the jointly kept fraction, 1 for full circles). With ``orient`` only
    that orientation per pair is evaluated (the other entries are -inf). ``single``: the masked
    sums in single precision (masked_spectra), for ranking between levels."""
    ia = np.asarray(ia, dtype=int)
    ib = np.asarray(ib, dtype=int)
    oo_all = None if orient is None else np.asarray(orient, dtype=int)
    s = np.full((ia.size, 2), -np.inf) if orient is not None else np.zeros((ia.size, 2))
    t = np.zeros((ia.size, 2))
    f = np.ones((ia.size, 2))
    full = circ_a.full[ia] & circ_b.full[ib]
    cut = np.flatnonzero(~full)
    n = circ_a.n_phi
    if cut.size:
        # spectra of each cut pair's circles, once per circle
        same_set = circ_a is circ_b
        ua, inv = np.unique(np.concatenate([ia[cut], ib[cut]]) if same_set else ia[cut], return_inverse=True)
        dt = np.float32 if single else np.float64
        spec_a = masked_spectra(filtered_circles(circ_a.coeffs[ua], n, m_cut), circ_a.kept[ua], dt)
        if same_set:
            inv_a, inv_b, spec_b = inv[: cut.size], inv[cut.size :], spec_a
        else:
            ub, inv_b = np.unique(ib[cut], return_inverse=True)
            inv_a = inv
            spec_b = masked_spectra(filtered_circles(circ_b.coeffs[ub], n, m_cut), circ_b.kept[ub], dt)
    whole = np.flatnonzero(full)
    for i0 in range(0, whole.size, block):
        rows = whole[i0 : i0 + block]
        oo = None if oo_all is None else oo_all[rows]
        s[rows], t[rows] = best_twist_harmonic(circ_a.coeffs[ia[rows]], circ_b.coeffs[ib[rows]], m_cut, orient=oo)
    for c0 in range(0, cut.size, block):
        rows = cut[c0 : c0 + block]
        sa, sb = _take(spec_a, inv_a[c0 : c0 + block]), _take(spec_b, inv_b[c0 : c0 + block])
        oo = None if oo_all is None else oo_all[rows]
        s[rows], t[rows], f[rows] = _masked_rows(sa, sb, n, min_overlap, oo)
    if with_overlap:
        return s, t, f
    return s, t


def s_at_zero(circ_a, circ_b, m_cut: int | None = None, min_overlap: float = 0.25) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """S at zero twist, same orientation, of row-aligned circles (the targeted search samples B
    at s phi + tau already). Returns S, numerator and denominator (n,) (masked variant where a
    circle is cut)."""
    full = circ_a.full & circ_b.full
    a = weighted(circ_a.coeffs, m_cut)
    b = weighted(circ_b.coeffs, m_cut)
    num = 2.0 * np.real(np.sum(a * np.conj(b), axis=1))
    den = np.sum(np.abs(a) ** 2 + np.abs(b) ** 2, axis=1)
    if (~full).any():
        n = circ_a.n_phi
        fa = filtered_circles(circ_a.coeffs[~full], n, m_cut)
        fb = filtered_circles(circ_b.coeffs[~full], n, m_cut)
        wa = circ_a.kept[~full].astype(float)
        wb = circ_b.kept[~full].astype(float)
        w = wa * wb
        ok = w.sum(axis=1) >= min_overlap * n
        num_m = 2.0 * np.sum(w * fa * fb, axis=1)
        den_m = np.sum(w * (fa**2 + fb**2), axis=1)
        # masked sums are N times the harmonic ones (Parseval); keep one scale
        num[~full] = np.where(ok, num_m / n, 0.0)
        den[~full] = np.where(ok, den_m / n, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        s = np.where(den > 0, num / den, 0.0)
    return s, num, den


# ---------------------------------------------------------------------------------------------
# all-pairs kernels: blocked matrix products (and the FFT reference they are checked against)
# ---------------------------------------------------------------------------------------------
def twist_grid(n_tau: int) -> np.ndarray:
    return 2.0 * np.pi * np.arange(n_tau) / n_tau


def rotated_rows(a: np.ndarray, n_tau: int) -> np.ndarray:
    """Real rows [Re x, Im x] of x_jm = a_m e^{-i m tau_j}: (n, M) complex -> (n, n_tau, 2M) float32."""
    n, mc = a.shape
    m = np.arange(1, mc + 1)
    rot = np.exp(-1j * np.outer(twist_grid(n_tau), m))  # (n_tau, M)
    x = a[:, None, :] * rot[None]
    out = np.empty((n, n_tau, 2 * mc), dtype=np.float32)
    out[..., :mc] = x.real
    out[..., mc:] = x.imag
    return out


def column_matrix(b: np.ndarray) -> np.ndarray:
    """(2M, 2n) float32 columns [Re b; Im b] (same) then [Re b; -Im b] (opposite)."""
    br = b.real.astype(np.float32).T
    bi = b.imag.astype(np.float32).T
    return np.ascontiguousarray(np.block([[br, br], [bi, -bi]]))


def blas_max_over_twist(rows: np.ndarray, cols: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """max_j of 2 [Re x_j, Im x_j] . [Re b, +-Im b]: rows (k, n_tau, 2M), cols (2M, c) -> (k, c)."""
    k, n_tau, two_m = rows.shape
    c = cols.shape[1]
    if out is None or out.shape != (k * n_tau, c):
        out = np.empty((k * n_tau, c), dtype=np.float32)
    np.matmul(rows.reshape(k * n_tau, two_m), cols, out=out)
    res = out.reshape(k, n_tau, c).max(axis=1)
    res *= 2.0
    return res


def fft_max_over_twist(a: np.ndarray, b: np.ndarray, n_tau: int) -> np.ndarray:
    """Reference: cross-spectra of every pair, inverse FFT over the twist, maximum.

    a (k, M), b (c, M) complex -> (k, 2c) numerators (same columns, then opposite), float32.
    """
    k, mc = a.shape
    res = np.empty((k, 2 * b.shape[0]), dtype=np.float32)
    a = a.astype(np.complex64)
    b = b.astype(np.complex64)
    for o, bb in ((0, np.conj(b)), (1, b)):
        cross = a[:, None, :] * bb[None, :, :]  # (k, c, M)
        spec = np.zeros((k, b.shape[0], n_tau // 2 + 1), dtype=np.complex64)
        spec[..., 1 : mc + 1] = np.conj(cross)
        # Re sum_m c_m e^{-i m tau_j} = (n_tau / 2) irfft(conj c)_j for c_0 = 0
        vals = np.fft.irfft(spec, n=n_tau, axis=-1)
        res[:, o * b.shape[0] : (o + 1) * b.shape[0]] = vals.max(axis=-1) * n_tau
    return res


def block_rows_for(n_tau: int, n_cols: int, mem_bytes: int) -> int:
    """Rows per block so the float32 product (rows * n_tau, 2 n_cols) stays under mem_bytes."""
    return int(max(1, mem_bytes // (4 * n_tau * 2 * max(n_cols, 1))))


def s_at_zero_overlap(circ_a, circ_b, m_cut: int | None = None, min_overlap: float = 0.25) -> tuple[np.ndarray, np.ndarray]:
    """S at zero twist of row-aligned circles (:func:`s_at_zero`) and their jointly kept fraction
    f = (1/N) sum_k w_A,k w_B,k (n,): f = 1 for full circles; S is -inf (undefined, as in the
    masked twist grid) where fewer than ``min_overlap`` N samples are jointly kept."""
    s, _, _ = s_at_zero(circ_a, circ_b, m_cut, min_overlap)
    both = circ_a.kept & circ_b.kept
    f = both.mean(axis=1)
    defined = both.sum(axis=1) >= min_overlap * circ_a.n_phi  # the test of s_at_zero
    return np.where(defined, s, -np.inf), f
