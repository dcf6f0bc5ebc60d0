"""The all-pairs kernels of the coarse level, blocked float32 matrix products over every centre
pair, twist and orientation of one radius.

* Full circles (:func:`allpairs_top`): the harmonic S (statistic.blas_max_over_twist) of every
  pair; the best pairs of the sky go on.
* Cut circles (:func:`masked_partners`): the masked S (the sums over the samples both circles
  keep) of every pair and shift on a coarser sampling of the circles, ranked by S_eq; the best
  partners of every centre go on. The harmonic S of a cut circle is not the masked S (it
  correlates whatever fills the masked stretch and normalises by each circle's own kept power),
  and on a cut sky a true pair over a short overlap ranks in the thousands among the pairs of
  the sky but first among the partners of its own centres (benchmarks/SEARCH_VALIDATION.md).
"""

from __future__ import annotations

import math

import numpy as np

from . import statistic as st
from .context import add_work

def twist_count(m_cut: int, oversample: float) -> int:
    """Twists on the coarse grid: oversample * (m_cut + 1), at least 2 m_cut + 2, even."""
    n = max(2 * m_cut + 2, int(math.ceil(oversample * (m_cut + 1))))
    return n + (n % 2)


def allpairs_top(a: np.ndarray, centers: np.ndarray, valid: np.ndarray, n_tau: int, n_keep: int,
                 min_sep: float, mem_bytes: int, work: dict | None = None, m_cut: int = 0):
    """Best ``n_keep`` unordered pairs per orientation by the blocked BLAS kernel (full circles).

    a (n, M) weighted coefficients; S_ij = max_tau num / (|a_i|^2 + |a_j|^2). Pairs with j <= i,
    invalid circles or centres closer than ``min_sep`` (rad) are excluded. Returns (ia, ib,
    orientation, S) arrays.
    """
    n = a.shape[0]
    peak = float(np.max(np.abs(a))) if a.size else 0.0
    if 0.0 < peak < np.inf:  # S is scale-free: a power-of-two scale (exact) keeps the float32 kernel
        a = a * 2.0 ** -np.frexp(peak)[1]  # from under- or overflowing on a map in tiny or huge units
    norms = np.sum(np.abs(a) ** 2, axis=1).astype(np.float32)
    cols_all = st.column_matrix(a)  # (2M, 2n)
    cos_min = math.cos(min_sep)
    lists = 2  # same, opposite
    best_s = [np.full(0, -np.inf, dtype=np.float32) for _ in range(lists)]
    best_i = [np.zeros(0, dtype=np.int64) for _ in range(lists)]
    best_j = [np.zeros(0, dtype=np.int64) for _ in range(lists)]
    vidx = np.flatnonzero(valid)
    blk = st.block_rows_for(n_tau, vidx.size, mem_bytes)
    buf = None
    for b0 in range(0, vidx.size, blk):
        rows_idx = vidx[b0 : b0 + blk]
        col_idx = vidx[b0:]  # upper triangle including the diagonal block
        rows = st.rotated_rows(a[rows_idx], n_tau)
        cols = np.concatenate([cols_all[:, col_idx], cols_all[:, n + col_idx]], axis=1)
        need = rows_idx.size * n_tau * cols.shape[1]
        if buf is None or buf.size < need:
            buf = np.empty(need, dtype=np.float32)
        num = st.blas_max_over_twist(rows, cols, buf[:need].reshape(rows_idx.size * n_tau, cols.shape[1]))
        nc = col_idx.size
        den = norms[rows_idx][:, None] + norms[col_idx][None, :]
        bad = (rows_idx[:, None] >= col_idx[None, :]) | (centers[rows_idx] @ centers[col_idx].T >= cos_min) | (den <= 0)
        if work is not None:
            add_work(work, int((~bad).sum()), n_tau, m_cut)
        for o in (st.SAME, st.OPPOSITE):
            with np.errstate(invalid="ignore", divide="ignore"):
                sv = num[:, o * nc : (o + 1) * nc] / den
            sv[bad] = -np.inf
            flat = sv.ravel()
            k = min(n_keep, flat.size)
            part = np.argpartition(-flat, k - 1)[:k]
            part = part[np.isfinite(flat[part])]
            ri, cj = np.divmod(part, nc)
            cat_s = np.concatenate([best_s[o], flat[part]])
            cat_i = np.concatenate([best_i[o], rows_idx[ri]])
            cat_j = np.concatenate([best_j[o], col_idx[cj]])
            order = np.argsort(-cat_s, kind="stable")[:n_keep]
            best_s[o], best_i[o], best_j[o] = cat_s[order], cat_i[order], cat_j[order]
    ia = np.concatenate(best_i)
    ib = np.concatenate(best_j)
    orient = np.concatenate([np.full(best_i[o].size, o) for o in range(lists)])
    return ia, ib, orient, np.concatenate(best_s).astype(float)


# ---------------------------------------------------------------------------------------------
# the masked coarse kernel: the exact masked S of every pair on a coarser sampling of the circles
# ---------------------------------------------------------------------------------------------
COARSE_MODES = 24  # modes m <= this of each circle in the masked kernel (N = 2 m + 2 samples)


def coarse_samples(circ, m_cut: int, modes: int = COARSE_MODES) -> tuple[np.ndarray, np.ndarray]:
    """Filtered circles f (statistic.filtered_circles, m <= m_c = min(m_cut, modes)) on N = 2 m_c + 2
    samples (exact: f holds no higher mode) and their kept flags (n, N): a sample is kept when
    every sample of the circle's own grid nearest to it is kept (a masked stretch is never
    counted as kept)."""
    m_c = max(1, min(int(m_cut), int(modes)))
    n_c = 2 * m_c + 2
    f = st.filtered_circles(circ.coeffs, n_c, m_c)
    peak = float(np.max(np.abs(f))) if f.size else 0.0
    if 0.0 < peak < np.inf:  # S is scale-free: a power-of-two scale keeps float32 in range
        f = f * 2.0 ** -np.frexp(peak)[1]
    return f.astype(np.float32), st.coarse_kept(circ.kept, n_c).astype(np.float32)


def _shifted(x: np.ndarray) -> np.ndarray:
    """(k, N) -> (k, N, N): row j of circle a is x_a shifted by j, x_a[(u - j) mod N]."""
    n = x.shape[1]
    idx = (np.arange(n)[None, :] - np.arange(n)[:, None]) % n
    return x[:, idx]


def masked_partners(circ, valid: np.ndarray, m_cut: int, n_best: int, min_sep: float, min_overlap: float,
                    mem_bytes: int, work: dict | None = None, modes: int = COARSE_MODES):
    """The ``n_best`` best partners of every circle per orientation by the masked S_eq, over all
    pairs: returns unique (ia, ib, orientation) with ia < ib.

    On the coarse samples (:func:`coarse_samples`) the sums of the masked S are, for every pair
    and every shift j of the N samples, num_j = sum_t g_A,t g_B,t+j, den_j = sum_t (h_A,t w_B,t+j +
    w_A,t h_B,t+j) and over_j = sum_t w_A,t w_B,t+j (g = w f, h = w f^2; the reversed circle B for
    "opposite"): three blocked float32 matrix products of each circle's N shifted copies with
    all circles. A pair's score is max_j S_eq, S_eq = sqrt(1 - (1 - S_j^2)^(over_j / N)),
    S_j = 2 num_j / den_j (statistic.rank_score), taken where over_j >= min_overlap N.

    Keeping the best partners of every circle rather than the best pairs of the sky: a true pair
    then competes with the chance partners of its own circles (a few thousand), not with every
    pair on the sky (millions), where a weak pair over a short overlap ranks in the thousands."""
    n = len(circ)
    f, w = coarse_samples(circ, m_cut, modes)
    n_c = f.shape[1]
    g, h = w * f, w * f * f
    rev = np.roll(f[:, ::-1], 1, axis=1), np.roll(w[:, ::-1], 1, axis=1)  # x'(t) = x(-t)
    g_r, w_r = rev[1] * rev[0], rev[1]
    h_r = g_r * rev[0]
    cols_g = np.concatenate([g, g_r]).T  # (N, 2n): same, then opposite
    cols_w = np.concatenate([w, w_r]).T
    cols_d = np.concatenate([np.concatenate([w, w_r]).T, np.concatenate([h, h_r]).T], axis=0)  # (2N, 2n)
    min_over = min_overlap * n_c - 1e-3
    cos_min = math.cos(min_sep)
    best_v = np.full((n, 2, n_best), -np.inf, dtype=np.float32)
    best_p = np.full((n, 2, n_best), -1, dtype=np.int64)
    vidx = np.flatnonzero(valid)
    blk = st.block_rows_for(n_c, vidx.size, mem_bytes // 3)  # num, den and over at once
    bufs = None
    for b0 in range(0, vidx.size, blk):
        rows_idx = vidx[b0 : b0 + blk]
        col_idx = vidx[b0:]
        k, nc = rows_idx.size, col_idx.size
        cols = np.concatenate([col_idx, n + col_idx])
        size = k * n_c * 2 * nc
        if bufs is None or bufs[0].size < size:  # reused: fresh pages for every block cost as much as the products
            bufs = [np.empty(size, dtype=np.float32) for _ in range(3)]
        num, over, den = (x[:size].reshape(k * n_c, 2 * nc) for x in bufs)
        np.matmul(_shifted(g[rows_idx]).reshape(k * n_c, n_c), cols_g[:, cols], out=num)
        np.matmul(_shifted(w[rows_idx]).reshape(k * n_c, n_c), cols_w[:, cols], out=over)
        np.matmul(np.concatenate([_shifted(h[rows_idx]), _shifted(w[rows_idx])], axis=2).reshape(k * n_c, 2 * n_c),
                  cols_d[:, cols], out=den)
        # q = -over log(1 - S^2) >= 0 for S > 0 (0 elsewhere): S_eq^2 = 1 - exp(-q / N), monotone in
        # q; in slices of a few circles, so that the passes below work in cache
        q = np.empty((k, 2 * nc), dtype=np.float32)
        step = max(1, (1 << 18) // (n_c * 2 * nc))
        for r0 in range(0, k, step):
            sl = slice(r0 * n_c, min(k, r0 + step) * n_c)
            x, ov, dn = num[sl], over[sl], den[sl]
            np.putmask(dn, ov < min_over, np.inf)  # too little jointly kept: S = 0 (den > 0 elsewhere)
            np.divide(x, dn, out=x)  # S / 2
            np.clip(x, 0.0, 0.5 - 1e-7, out=x)
            np.multiply(x, x, out=x)
            x *= -4.0  # -S^2
            np.log1p(x, out=x)
            x *= ov
            np.min(x.reshape(-1, n_c, 2 * nc), axis=1, out=q[r0 : r0 + step])
        np.negative(q, out=q)  # the largest q over shifts (>= 0)
        score = np.sqrt(-np.expm1(-q / n_c))  # S_eq at the best shift
        bad = (rows_idx[:, None] >= col_idx[None, :]) | (circ.centers[rows_idx] @ circ.centers[col_idx].T >= cos_min)
        if work is not None:
            add_work(work, int((~bad).sum()), n_c, n_c)
        for o in (st.SAME, st.OPPOSITE):
            sv = score[:, o * nc : (o + 1) * nc].astype(np.float32)
            sv[bad] = -np.inf
            sv[sv <= 0] = -np.inf
            _merge_best(best_v[:, o], best_p[:, o], rows_idx, sv, col_idx, n_best)  # rows' partners
            _merge_best(best_v[:, o], best_p[:, o], col_idx, sv.T, rows_idx, n_best)  # columns' partners
    ia, ib, orient = [], [], []
    for o in (st.SAME, st.OPPOSITE):
        i, kk = np.nonzero(best_p[:, o] >= 0)
        j = best_p[:, o][i, kk]
        ia.append(np.minimum(i, j))
        ib.append(np.maximum(i, j))
        orient.append(np.full(i.size, o))
    combo = np.unique(np.stack([np.concatenate(ia), np.concatenate(ib), np.concatenate(orient)], axis=1), axis=0)
    return combo[:, 0], combo[:, 1], combo[:, 2]


def _merge_best(best_v: np.ndarray, best_p: np.ndarray, who: np.ndarray, vals: np.ndarray, partners: np.ndarray,
                n_best: int) -> None:
    """Merge the ``n_best`` largest of each row of vals (len(who), len(partners)) into the lists
    (best_v, best_p)[who] (n, n_best), in place."""
    kk = min(n_best, vals.shape[1])
    top = np.argpartition(-vals, kk - 1, axis=1)[:, :kk]
    cand_v = np.concatenate([best_v[who], np.take_along_axis(vals, top, 1)], axis=1)
    cand_p = np.concatenate([best_p[who], partners[top]], axis=1)
    cand_p = np.where(np.isfinite(cand_v), cand_p, -1)
    order = np.argsort(-cand_v, axis=1, kind="stable")[:, :n_best]
    best_v[who] = np.take_along_axis(cand_v, order, 1)
    best_p[who] = np.take_along_axis(cand_p, order, 1)
