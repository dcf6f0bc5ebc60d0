"""Refinement of centre pairs from level to level (antipodal and all-pairs searches).

The coarse level (the mode's own: every antipodal pair, or the all-pairs kernel) passes on the
best pairs per radius and orientation as :class:`Candidates`. :func:`refine` evaluates, on the
next finer grid, every combination of the centres within one coarse step of each candidate's
centres with the exact S (sub-grid twist) and keeps the best (:func:`distinct`: side lobes of a
better pair dropped), and so on to the last level.

Ranking. Pairs with a cut circle are compared with the exact masked S over the samples both
circles keep (a fraction f) and ranked by the full-circle S of the same chance probability,
S_eq = sqrt(1 - (1 - S^2)^f) (statistic.rank_score); for full circles S_eq = S. A pair is a
side lobe of a better one when both its centres lie within the peak width (:func:`peak_reach`:
2 FWHM, at least a coarse step) of the better pair's: S falls slowly with centre offsets, and
unsuppressed side lobes of a strong pair took the places of weaker true pairs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from . import statistic as st
from .context import Level, SearchContext, add_work, centre_levels
from .sampling import sample_circles


@dataclass(frozen=True)
class Candidates:
    """Centre pairs a level passes on, one row each. The coarse level's picks carry centres and
    orientation only (``s`` None); a refined level adds the exact values at the best twist."""

    center_a: np.ndarray  # (k, 3) unit vectors
    center_b: np.ndarray  # (k, 3)
    orientation: np.ndarray  # (k,) statistic.SAME or statistic.OPPOSITE
    s: np.ndarray | None = None  # (k,) exact S (masked S on cut circles)
    twist: np.ndarray | None = None  # (k,) contract twist (rad)
    rank: np.ndarray | None = None  # (k,) ranking score S_eq (statistic.rank_score)
    overlap: np.ndarray | None = None  # (k,) jointly kept fraction f at that twist (1: full circles)
    m_cut: int = 0  # modes used at this level

    def __len__(self) -> int:
        return len(self.orientation)

    @property
    def cut(self) -> np.ndarray:
        """Pairs with a cut circle (jointly kept fraction below 1)."""
        return self.overlap < 1.0

    @classmethod
    def empty(cls) -> "Candidates":
        return cls(np.zeros((0, 3)), np.zeros((0, 3)), np.zeros(0, int), np.zeros(0), np.zeros(0), np.zeros(0),
                   np.zeros(0), 0)


def distinct(ca: np.ndarray, cb: np.ndarray, score: np.ndarray, k: int, reach: float,
             symmetric: bool = True) -> np.ndarray:
    """Indices of up to k best pairs, greedily dropping any pair whose two centres both lie within
    ``reach`` (rad) of a better kept pair's centres (either way round when ``symmetric``), so one
    strong peak cannot fill the list with its own neighbours (non-maximum suppression)."""
    order = np.argsort(-score, kind="stable")
    order = order[np.isfinite(score[order])]
    cos_r = math.cos(reach)
    kept: list[int] = []
    for i in order:
        if kept:
            ka, kb = ca[kept], cb[kept]
            near = (ka @ ca[i] > cos_r) & (kb @ cb[i] > cos_r)
            if symmetric:
                near |= (ka @ cb[i] > cos_r) & (kb @ ca[i] > cos_r)
            if near.any():
                continue
        kept.append(int(i))
        if len(kept) >= k:
            break
    return np.asarray(kept, dtype=int)


def pair_levels(settings) -> list[Level]:
    """The centre grids of an antipodal or all-pairs search (:func:`context.centre_levels`)."""
    s = settings
    return centre_levels(s.centre_nside, s.nside_work, np.radians(s.fwhm_deg), s.level_smoothing)


def peak_reach(settings) -> float:
    """Width (rad) of one peak in centre space: 2 FWHM, at least a coarse grid step."""
    return max(2.0 * np.radians(settings.fwhm_deg), pair_levels(settings)[0].step)


def neighbours(nside: int, vec: np.ndarray, radius: float) -> np.ndarray:
    """Pixels of ``nside`` whose centres lie within ``radius`` (rad) of ``vec`` (at least its own)."""
    import healpy as hp

    pix = hp.query_disc(nside, vec, radius)
    if pix.size == 0:
        pix = np.array([hp.vec2pix(nside, *vec)])
    return pix


def _children_combinations(lv: Level, prev: Level, cands: Candidates, antipodal: bool):
    """Pixel pairs (pa, pb, orientation) of ``lv`` inside each candidate's pixels of ``prev``
    (pb -1 for antipodal), for all candidates at once."""
    import healpy as hp

    ratio = lv.nside // prev.nside
    sub = np.arange(ratio * ratio)

    def kids(vecs):  # (k, 3) -> (k, ratio^2) RING pixels of lv
        nest = hp.ring2nest(prev.nside, hp.vec2pix(prev.nside, *vecs.T))
        return hp.nest2ring(lv.nside, nest[:, None] * ratio * ratio + sub[None, :])

    ka = kids(cands.center_a)
    o = np.asarray(cands.orientation)
    if antipodal:
        return ka.ravel(), np.full(ka.size, -1), np.repeat(o, ka.shape[1])
    kb = kids(cands.center_b)
    n = ka.shape[1]
    pa = np.repeat(ka, n, axis=1).ravel()  # every child of A with every child of B
    pb = np.tile(kb, (1, n)).ravel()
    return pa, pb, np.repeat(o, n * n)


def _neighbour_combinations(lv: Level, prev: Level | None, reach: float, cands: Candidates, antipodal: bool):
    """Pixel pairs (pa, pb, orientation) of ``lv`` within ``reach`` of each candidate's centres
    (the nearest pixel only when ``prev`` is None; pb -1 for antipodal)."""
    import healpy as hp

    pix_a, pix_b, ori = [], [], []

    def near(v):
        if prev is None:
            return np.array([hp.vec2pix(lv.nside, *v)])
        return neighbours(lv.nside, v, reach)

    for a, b, o in zip(cands.center_a, cands.center_b, cands.orientation):
        na = near(a)
        if antipodal:
            pix_a.append(na)
            pix_b.append(np.full(na.size, -1))
            ori.append(np.full(na.size, o))
            continue
        nb = near(b)
        ga, gb = np.meshgrid(na, nb, indexing="ij")
        pix_a.append(ga.ravel())
        pix_b.append(gb.ravel())
        ori.append(np.full(ga.size, o))
    return np.concatenate(pix_a), np.concatenate(pix_b), np.concatenate(ori)


def refine(ctx: SearchContext, lv: Level, prev: Level | None, radius: float, cands: Candidates, work: dict,
           n_keep: int, antipodal: bool, inside: bool = False, last: bool = True) -> Candidates:
    """Evaluate every grid-``lv`` combination around each candidate (its centres' neighbours within
    ``prev``'s step; with ``inside``, only the pixels of ``lv`` inside each centre's pixel of
    ``prev``; with ``prev`` None, the nearest grid centres only) with the exact S and keep the
    ``n_keep`` best distinct pairs per orientation, plus up to ``n_keep // 2`` pairs with a cut
    circle. ``antipodal``: circle B's centre is always -A's. Before the ``last`` level the masked S
    is computed in single precision (to about 1e-6; it only ranks pairs there)."""
    import healpy as hp

    s = ctx.settings
    if len(cands) == 0:  # nothing to refine: no candidates (not an error)
        return Candidates.empty()
    reach = prev.step if prev is not None else 0.0
    if inside and prev is not None:
        pa, pb, po = _children_combinations(lv, prev, cands, antipodal)
    else:
        pa, pb, po = _neighbour_combinations(lv, prev, reach, cands, antipodal)
    # unique combinations; all-pairs stores the unordered pair once (smaller index first)
    if not antipodal:
        lo, hi = np.minimum(pa, pb), np.maximum(pa, pb)
        pa, pb = lo, hi
    combo = np.unique(np.stack([pa, pb, po], axis=1), axis=0)
    pa, pb, po = combo[:, 0], combo[:, 1], combo[:, 2]
    ua, inv_a = np.unique(pa, return_inverse=True)
    va = np.array(hp.pix2vec(lv.nside, ua)).T
    if antipodal:
        centers = np.vstack([va, -va])
        ia = inv_a
        ib = inv_a + ua.size
    else:
        ub = np.unique(np.concatenate([pa, pb]))
        centers = np.array(hp.pix2vec(lv.nside, ub)).T
        ia = np.searchsorted(ub, pa)
        ib = np.searchsorted(ub, pb)
    circ = sample_circles(ctx.level_map(lv), centers, radius, ctx.n_phi(radius, lv), s.m_max, ctx.level_mask(lv))
    valid = circ.kept_fraction >= s.min_kept
    m_cut = st.effective_m_cut(circ.coeffs[valid] if valid.any() else circ.coeffs, s.m_max, s.power_fraction)
    ok = valid[ia] & valid[ib]
    if not antipodal:
        sep_cos = np.einsum("ij,ij->i", centers[ia], centers[ib])
        ok &= sep_cos < math.cos(np.radians(s.min_separation_deg))
    ia, ib, po = ia[ok], ib[ok], po[ok]
    sv, tw, fr = st.best_twist(circ, circ, ia, ib, m_cut, s.min_overlap, with_overlap=True, orient=po,
                               single=not last)
    r = np.arange(ia.size)
    s_val = sv[r, po]
    twist = tw[r, po]
    overlap = fr[r, po]
    rank = st.rank_score(s_val, overlap)  # S_eq: cut and full circles on one scale
    add_work(work, ia.size, 8 * (m_cut + 1), m_cut)
    # keep the n_keep best per orientation; a candidate whose centres both lie within the peak
    # width of a better one's is a side lobe of that peak (S falls slowly with centre offsets on
    # a smooth sky) and would otherwise take the place of a weaker, distinct pair
    keep = []
    cutp = overlap < 1.0
    near = peak_reach(s)
    for o in (st.SAME, st.OPPOSITE):
        sel = np.flatnonzero(po == o)
        keep.append(sel[distinct(centers[ia[sel]], centers[ib[sel]], rank[sel], n_keep, near)])
        sel = sel[cutp[sel]]  # quota for cut pairs
        keep.append(sel[distinct(centers[ia[sel]], centers[ib[sel]], rank[sel], max(1, n_keep // 2), near)])
    keep = np.unique(np.concatenate(keep))
    return Candidates(centers[ia[keep]], centers[ib[keep]], po[keep], s_val[keep], twist[keep], rank[keep],
                      overlap[keep], m_cut)
