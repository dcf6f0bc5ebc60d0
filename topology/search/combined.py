"""A combined temperature + E-mode statistic of matched circles, over the S kernels of
:mod:`topology.search.statistic`.

For one pair of circles seen in T and in E (the same centres, radius and sample grid), at each
twist tau and orientation:

    S_TE(tau) = (w_T S_T(tau) + w_E S_E(tau)) / (w_T + w_E)

with S_X the masked real-space S of :func:`topology.search.statistic.masked_s_grid` on the
N_phi shifts (the unmasked S where both circles are whole), maximised over the shifts and refined
by a parabola through the best shift and its neighbours. One twist serves both maps: a pair of
the space has one holonomy, so its T and E circles share the twist and orientation.

Weights (the form used here): a weighted sum of statistics, w_X = rho_X / sigma_X^2, where
rho_X is the expected S of a true pair in map X and sigma_X the spread of S over chance pairs
(:func:`chance_spread`). For independent Gaussian statistics this linear combination maximises
the separation of a true pair from chance, (mean under the signal - mean under the null) / null
spread (Fisher's linear discriminant; common practice). T and E are not independent (TE
correlation), so the weights are near-optimal, not optimal. rho_T = 1 for a Sachs-Wolfe sky
without noise; rho_E < 1 even without noise (:mod:`topology.maps.emode`), and both fall with
noise as signal variance / total variance of the filtered circles.

What the search uses (:mod:`topology.search.polarised`, where the choice is stated in full):
sigma_X from :func:`chance_spread` on the searched map itself, per radius; rho_T = 1 and
rho_E = 0.75 by default (``[search] rho_t``, ``rho_e``), and the ranked form
:func:`combined_rank_twist`, the weighted mean of each map's chance-equivalent S_eq.
"""

from __future__ import annotations

import math

import numpy as np

from .statistic import OPPOSITE, SAME, filtered_circles, masked_s_grid


def snr_weight(rho: float, sigma: float) -> float:
    """w = rho / sigma^2 (module docstring); 0 when rho <= 0."""
    if not (sigma > 0) or not math.isfinite(sigma):
        raise ValueError(f"sigma must be positive and finite, got {sigma!r}")
    return max(float(rho), 0.0) / float(sigma) ** 2


def _reversed(x: np.ndarray) -> np.ndarray:
    """Samples of the reversed circle, x'(phi_k) = x(-phi_k): index (-k) mod N."""
    return np.roll(x[:, ::-1], 1, axis=1)


def _grids(circ_a, circ_b, ia, ib, m_cut, min_overlap):
    """S grids (k, N) per orientation (same, opposite with B reversed) and joint fractions."""
    n = circ_a.n_phi
    fa = filtered_circles(circ_a.coeffs[ia], n, m_cut)
    fb = filtered_circles(circ_b.coeffs[ib], n, m_cut)
    wa = circ_a.kept[ia].astype(float)
    wb = circ_b.kept[ib].astype(float)
    same = masked_s_grid(fa, wa, fb, wb, min_overlap, with_overlap=True)
    opp = masked_s_grid(fa, wa, _reversed(fb), _reversed(wb), min_overlap, with_overlap=True)
    return (same, opp)


def combined_best_twist(t_a, t_b, e_a, e_b, ia, ib, w_t: float, w_e: float, *, m_cut_t: int | None = None,
                        m_cut_e: int | None = None, min_overlap: float = 0.25) -> dict:
    """S_TE of pairs (t_a[ia[i]], t_b[ib[i]]) in T and (e_a[ia[i]], e_b[ib[i]]) in E.

    t_a, t_b, e_a, e_b: CircleSets (topology.search.sampling) of one radius on the same centres
    and N_phi. Returns {"s": S_TE (k, 2), "tau": contract twist (k, 2), "s_t", "s_e": S_T and S_E
    at the chosen shift (k, 2), "f": jointly kept fraction of T (k, 2)}; axis 1 is (same,
    opposite). -inf where a circle pair has too little overlap in either map.
    """
    if t_a.n_phi != e_a.n_phi or t_b.n_phi != e_b.n_phi or t_a.n_phi != t_b.n_phi:
        raise ValueError("T and E circles need one sample grid (N_phi)")
    if w_t < 0 or w_e < 0 or w_t + w_e <= 0:
        raise ValueError(f"weights must be >= 0 and not both 0, got {w_t}, {w_e}")
    ia = np.asarray(ia, dtype=int)
    ib = np.asarray(ib, dtype=int)
    n = t_a.n_phi
    gt = _grids(t_a, t_b, ia, ib, m_cut_t, min_overlap)
    ge = _grids(e_a, e_b, ia, ib, m_cut_e, min_overlap)
    k = ia.size
    out = {key: np.full((k, 2), -np.inf) for key in ("s", "s_t", "s_e")}
    out["tau"] = np.zeros((k, 2))
    out["f"] = np.zeros((k, 2))
    r = np.arange(k)
    for o in (SAME, OPPOSITE):
        (st, ft), (se, _) = gt[o], ge[o]
        ok = np.isfinite(st) & np.isfinite(se)
        grid = np.where(ok, (w_t * np.where(ok, st, 0) + w_e * np.where(ok, se, 0)) / (w_t + w_e), -np.inf)
        j = np.argmax(grid, axis=1)
        s0, sm, sp = grid[r, j], grid[r, (j - 1) % n], grid[r, (j + 1) % n]
        curv = sm - 2.0 * s0 + sp
        good = np.isfinite(sm) & np.isfinite(sp) & (curv < 0)
        with np.errstate(invalid="ignore", divide="ignore"):
            d = np.clip(np.where(good, 0.5 * (sm - sp) / np.where(good, curv, -1.0), 0.0), -0.5, 0.5)
        val = np.where(good, s0 - 0.25 * (sm - sp) * d, s0)
        tau = 2.0 * np.pi * (j + d) / n
        out["s"][:, o] = val
        out["tau"][:, o] = (tau if o == SAME else -tau) % (2.0 * np.pi)
        for key, g in (("s_t", st), ("s_e", se)):   # the same quadratic through j - 1, j, j + 1 at j + d
            g0, gm, gp = g[r, j], g[r, (j - 1) % n], g[r, (j + 1) % n]
            with np.errstate(invalid="ignore"):
                out[key][:, o] = np.where(good, g0 + 0.5 * d * (gp - gm) + 0.5 * d * d * (gp - 2 * g0 + gm), g0)
        out["f"][:, o] = ft[r, j]
    return out


def combined_rank_twist(t_a, t_b, e_a, e_b, ia, ib, w_t, w_e, orient, *, m_cut_t: int | None = None,
                        m_cut_e: int | None = None, min_overlap: float = 0.25) -> dict:
    """The ranked form of S_TE used by the search (:mod:`topology.search.polarised`): at each shift
    the weighted mean of the chance-equivalent scores of the two maps,

        S_TE,eq(tau) = (w_T S_eq,T(tau) + w_E S_eq,E(tau)) / (w_T + w_E),
        S_eq,X = rank_score(S_X, f_X)   (f_X: the jointly kept fraction in map X),

    so that cut circles (and a polarisation mask that differs from the temperature one) enter on
    the full-circle null scale of each map, as in the temperature search; for full circles it is
    :func:`combined_best_twist`'s S_TE. Maximised over the N_phi shifts, parabola through the best
    shift and its neighbours. ``w_t``, ``w_e``: scalars or (k,); ``orient`` (k,): SAME or OPPOSITE
    per pair. Returns {"s_eq", "s" (w-weighted S at that shift), "s_t", "s_e", "f_t", "f_e", "tau"},
    each (k,); s_eq -inf where either map's pair has too little overlap."""
    from .statistic import rank_score

    ia = np.asarray(ia, dtype=int)
    ib = np.asarray(ib, dtype=int)
    orient = np.asarray(orient, dtype=int)
    k = ia.size
    w_t = np.broadcast_to(np.asarray(w_t, dtype=float), (k,))
    w_e = np.broadcast_to(np.asarray(w_e, dtype=float), (k,))
    n = t_a.n_phi
    out = {key: np.full(k, -np.inf) for key in ("s_eq", "s", "s_t", "s_e")}
    out.update({key: np.zeros(k) for key in ("f_t", "f_e", "tau")})
    for o in (SAME, OPPOSITE):
        rows = np.flatnonzero(orient == o)
        if rows.size == 0:
            continue
        (st, ft) = _grids(t_a, t_b, ia[rows], ib[rows], m_cut_t, min_overlap)[o]
        (se, fe) = _grids(e_a, e_b, ia[rows], ib[rows], m_cut_e, min_overlap)[o]
        ok = np.isfinite(st) & np.isfinite(se)
        wt, we = w_t[rows, None], w_e[rows, None]
        eq = np.where(ok, (wt * rank_score(np.where(ok, st, 0.0), ft) + we * rank_score(np.where(ok, se, 0.0), fe))
                      / (wt + we), -np.inf)
        raw = np.where(ok, (wt * np.where(ok, st, 0.0) + we * np.where(ok, se, 0.0)) / (wt + we), -np.inf)
        r = np.arange(rows.size)
        j = np.argmax(eq, axis=1)
        e0, em, ep = eq[r, j], eq[r, (j - 1) % n], eq[r, (j + 1) % n]
        curv = em - 2.0 * e0 + ep
        good = np.isfinite(em) & np.isfinite(ep) & (curv < 0)
        with np.errstate(invalid="ignore", divide="ignore"):
            d = np.clip(np.where(good, 0.5 * (em - ep) / np.where(good, curv, -1.0), 0.0), -0.5, 0.5)
        with np.errstate(invalid="ignore"):   # -inf neighbours: the parabola is not used there
            out["s_eq"][rows] = np.where(good, e0 - 0.25 * (em - ep) * d, e0)
        for key, g in (("s", raw), ("s_t", st), ("s_e", se)):   # the same quadratic at j + d
            g0, gm, gp = g[r, j], g[r, (j - 1) % n], g[r, (j + 1) % n]
            with np.errstate(invalid="ignore"):
                out[key][rows] = np.where(good, g0 + 0.5 * d * (gp - gm) + 0.5 * d * d * (gp - 2 * g0 + gm), g0)
        out["f_t"][rows], out["f_e"][rows] = ft[r, j], fe[r, j]
        tau = 2.0 * np.pi * (j + d) / n
        out["tau"][rows] = (tau if o == SAME else -tau) % (2.0 * np.pi)
    return out


def chance_spread(circ, m_cut: int | None = None, n_pairs: int = 2000, *, seed: int, min_separation: float = 0.2,
                  min_overlap: float = 0.25) -> float:
    """sigma_X: the standard deviation of S at a fixed twist (zero, same orientation) over random
    pairs of distinct circles of ``circ`` whose centres are more than ``min_separation`` rad apart
    (chance pairs; draws from ``seed``)."""
    rng = np.random.default_rng(np.random.SeedSequence(int(seed)))
    n = len(circ)
    ia = rng.integers(0, n, size=4 * n_pairs)
    ib = rng.integers(0, n, size=4 * n_pairs)
    far = np.einsum("ij,ij->i", circ.centers[ia], circ.centers[ib]) < math.cos(min_separation)
    ia, ib = ia[far][:n_pairs], ib[far][:n_pairs]
    fa = filtered_circles(circ.coeffs[ia], circ.n_phi, m_cut)
    fb = filtered_circles(circ.coeffs[ib], circ.n_phi, m_cut)
    s = masked_s_grid(fa, circ.kept[ia].astype(float), fb, circ.kept[ib].astype(float), min_overlap)[:, 0]
    s = s[np.isfinite(s)]
    return float(np.std(s))


def combined_s_of_maps(t_map: np.ndarray, e_map: np.ndarray, centers_a, centers_b, radius: float, *, n_phi: int,
                       m_max: int, w_t: float, w_e: float, mask_t: np.ndarray | None = None,
                       mask_e: np.ndarray | None = None, min_overlap: float = 0.25) -> dict:
    """S_TE of the circle pairs (centers_a[i], centers_b[i]) (unit vectors (k, 3)) of ``radius``
    (rad) on a T and an E working map (RING, same N_side; boolean kept masks, the E one may
    differ): the circles are sampled by :func:`topology.search.sampling.sample_circles` on each
    map and combined by :func:`combined_best_twist`. Returns its dict."""
    from .sampling import sample_circles

    ca = np.atleast_2d(np.asarray(centers_a, dtype=float))
    cb = np.atleast_2d(np.asarray(centers_b, dtype=float))
    sets = [sample_circles(m, c, radius, n_phi, m_max, k) for m, k in ((t_map, mask_t), (e_map, mask_e))
            for c in (ca, cb)]
    idx = np.arange(ca.shape[0])
    return combined_best_twist(*sets, idx, idx, w_t, w_e, min_overlap=min_overlap)
