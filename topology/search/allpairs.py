"""The all-pairs kernel of the coarse level: the best pairs of every centre pair, twist and
orientation of one radius, by blocked float32 matrix products (statistic.blas_max_over_twist).

On a masked map the kernel's S (harmonic S of the cut circles as sampled, lowered by roughly the
jointly kept fraction) only filters: the mode evaluates its best POOL_SHARE of all pairs with
the exact masked S (AllPairsMode.coarse), and with ``cut`` the kernel keeps a quota of pairs
with a cut circle, which rank low in it.
"""

from __future__ import annotations

import math

import numpy as np

from . import statistic as st
from .context import add_work

POOL_SHARE = 1.0 / 256  # all-pairs on a masked map: share of the pairs re-evaluated exactly at level 0


def twist_count(m_cut: int, oversample: float) -> int:
    """Twists on the coarse grid: oversample * (m_cut + 1), at least 2 m_cut + 2, even."""
    n = max(2 * m_cut + 2, int(math.ceil(oversample * (m_cut + 1))))
    return n + (n % 2)


def allpairs_top(a: np.ndarray, centers: np.ndarray, valid: np.ndarray, n_tau: int, n_keep: int,
                 min_sep: float, mem_bytes: int, work: dict | None = None, m_cut: int = 0,
                 cut: np.ndarray | None = None):
    """Best ``n_keep`` unordered pairs per orientation by the blocked BLAS kernel.

    a (n, M) weighted coefficients; S_ij = max_tau num / (|a_i|^2 + |a_j|^2). Pairs with j <= i,
    invalid circles or centres closer than ``min_sep`` (rad) are excluded. Returns (ia, ib,
    orientation, S) arrays. With ``cut`` (n,) flags of partly masked circles, a second list of the
    ``n_keep`` best pairs with at least one cut circle is appended (a quota: cut pairs rank low in
    the coarse kernel, see the module docstring).
    """
    n = a.shape[0]
    peak = float(np.max(np.abs(a))) if a.size else 0.0
    if 0.0 < peak < np.inf:  # S is scale-free: a power-of-two scale (exact) keeps the float32 kernel
        a = a * 2.0 ** -np.frexp(peak)[1]  # from under- or overflowing on a map in tiny or huge units
    norms = np.sum(np.abs(a) ** 2, axis=1).astype(np.float32)
    cols_all = st.column_matrix(a)  # (2M, 2n)
    cos_min = math.cos(min_sep)
    lists = 4 if cut is not None else 2  # (same, opposite) all pairs, then (same, opposite) cut pairs
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
        pair_cut = None if cut is None else (cut[rows_idx][:, None] | cut[col_idx][None, :])
        for o in (st.SAME, st.OPPOSITE):
            with np.errstate(invalid="ignore", divide="ignore"):
                sv = num[:, o * nc : (o + 1) * nc] / den
            sv[bad] = -np.inf
            targets = [(o, sv)]
            if pair_cut is not None and pair_cut.any():
                targets.append((2 + o, np.where(pair_cut, sv, -np.inf)))
            for li, vals in targets:
                flat = vals.ravel()
                k = min(n_keep, flat.size)
                part = np.argpartition(-flat, k - 1)[:k]
                part = part[np.isfinite(flat[part])]
                ri, cj = np.divmod(part, nc)
                cat_s = np.concatenate([best_s[li], flat[part]])
                cat_i = np.concatenate([best_i[li], rows_idx[ri]])
                cat_j = np.concatenate([best_j[li], col_idx[cj]])
                order = np.argsort(-cat_s, kind="stable")[:n_keep]
                best_s[li], best_i[li], best_j[li] = cat_s[order], cat_i[order], cat_j[order]
    ia = np.concatenate(best_i)
    ib = np.concatenate(best_j)
    orient = np.concatenate([np.full(best_i[li].size, st.SAME if li % 2 == 0 else st.OPPOSITE)
                             for li in range(lists)])
    return ia, ib, orient, np.concatenate(best_s).astype(float)
