"""The targeted search: the predicted pairs of one family (config [space], [cosmology],
[observer]) scanned over sky orientations R (z-y-z Euler grid; levels like the centre grids).

For each R the circles are sampled at R n_A(phi_k) and R n_B(s phi_k + tau) (the contract of
:mod:`topology.circles`), so each pair's S (Cornish, Spergel & Starkman 2004; the masked
real-space form of :mod:`.statistic`) is taken at zero twist, same orientation, over the jointly
kept fraction f_p of its samples (f_p = 1 for full circles). A pair is usable when its radius is
in the radius range, both circles keep >= ``min_kept`` and f_p >= ``min_overlap``; the others
are left out. The combined statistic is the mean over the P_used usable pairs of the
chance-equivalent values of the radius scan (:func:`.statistic.rank_score`, where the
equal-tail derivation is):

    S_eq,p = sign(S_p) sqrt(1 - (1 - S_p^2)^f_p),    S_comb(R) = (1/P_used) sum_p S_eq,p(R).

Each S_eq,p has the null spread of a full circle of the same radius, so cut and full pairs
enter on one scale; for full circles S_eq,p = S_p and S_comb is the mean S. Orientations (and
observer positions) are ranked, and the run's test statistic is, Stouffer's
Z_comb = sqrt(P_used) S_comb (:func:`orientation_score`), whose null spread does not depend on
how many pairs an orientation leaves usable.
"""

from __future__ import annotations

import math

import numpy as np

from .. import geometry as geo
from ..errors import InputError
from . import statistic as st
from .context import Level, SearchContext, add_work, candidate_record
from .sampling import sample_points


def orientation_grid(nside: int) -> np.ndarray:
    """Euler angles (n, 3) z-y-z (rad): R z on the HEALPix pixel centres of ``nside`` (beta =
    colatitude, alpha = longitude), gamma on a grid of step ~ the pixel size."""
    import healpy as hp

    theta, phi = hp.pix2ang(nside, np.arange(12 * nside * nside))
    n_gamma = max(4, int(math.ceil(2.0 * np.pi / hp.nside2resol(nside))))
    gamma = 2.0 * np.pi * np.arange(n_gamma) / n_gamma
    a = np.repeat(phi, n_gamma)
    b = np.repeat(theta, n_gamma)
    g = np.tile(gamma, theta.size)
    return np.stack([a, b, g], axis=1)


def rotations(euler: np.ndarray) -> np.ndarray:
    """(n, 3) z-y-z Euler angles -> (n, 3, 3) matrices R_z(a) R_y(b) R_z(g) (vectorised)."""
    a, b, g = euler.T

    def rz(t):
        c, s = np.cos(t), np.sin(t)
        z, o = np.zeros_like(t), np.ones_like(t)
        return np.stack([np.stack([c, -s, z], -1), np.stack([s, c, z], -1), np.stack([z, z, o], -1)], -2)

    def ry(t):
        c, s = np.cos(t), np.sin(t)
        z, o = np.zeros_like(t), np.ones_like(t)
        return np.stack([np.stack([c, z, s], -1), np.stack([z, o, z], -1), np.stack([-s, z, c], -1)], -2)

    return rz(a) @ ry(b) @ rz(g)


def closest_gamma(r_old: np.ndarray, alpha: np.ndarray, beta: np.ndarray) -> np.ndarray:
    """gamma making R_z(alpha) R_y(beta) R_z(gamma) closest to r_old (for each alpha, beta)."""
    zero = np.zeros_like(alpha)
    base = rotations(np.stack([alpha, beta, zero], axis=1))  # (n, 3, 3)
    m = np.einsum("nji,jk->nik", base, r_old)  # base^T r_old ~ R_z(gamma)
    return np.arctan2(m[:, 1, 0] - m[:, 0, 1], m[:, 0, 0] + m[:, 1, 1])


def predicted_pairs(ctx: SearchContext, position) -> list:
    """The scenario's predicted pairs seen from ``position`` with radii in the radius range."""
    from ..circles import predict_circles

    sc = ctx.scenario
    try:
        obs = geo.Observer.make(sc.space.geometry, position)
    except InputError as e:
        raise InputError(e.reason, "[search] positions") from None
    lo, hi = min(ctx.settings.radii_deg), max(ctx.settings.radii_deg)
    return [p for p in predict_circles(sc.space, obs, sc.chi) if lo - 1e-9 <= np.degrees(p.radius) <= hi + 1e-9]


def evaluate(ctx: SearchContext, lv: Level, pairs, euler: np.ndarray, work: dict) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Pair values for rotations (n_rot, 3 Euler): S, jointly kept fraction f and usable flags,
    each (n_rot, P). Usable: both circles keep >= min_kept and f >= min_overlap."""
    from ..circles import circle_points

    s = ctx.settings
    n_phi = ctx.n_phi(max(p.radius for p in pairs), lv)
    phi = 2.0 * np.pi * np.arange(n_phi) / n_phi
    base_a = np.stack([circle_points(p.center_a, p.radius, phi) for p in pairs])  # (P, N, 3)
    base_b = np.stack([circle_points(p.center_b, p.radius, p.orientation * phi + p.twist) for p in pairs])
    mp = ctx.level_map(lv)
    out_s = np.empty((euler.shape[0], len(pairs)))
    out_f = np.empty((euler.shape[0], len(pairs)))
    out_ok = np.empty((euler.shape[0], len(pairs)), dtype=bool)
    chunk = max(1, 200_000 // (n_phi * len(pairs)))
    for i0 in range(0, euler.shape[0], chunk):
        R = rotations(euler[i0 : i0 + chunk])  # (r, 3, 3)
        pa = np.einsum("rij,pkj->rpki", R, base_a).reshape(-1, n_phi, 3)
        pb = np.einsum("rij,pkj->rpki", R, base_b).reshape(-1, n_phi, 3)
        ctr = np.zeros((pa.shape[0], 3))
        ca = sample_points(mp, pa, ctr, 0.0, n_phi, s.m_max, ctx.level_mask(lv))
        cb = sample_points(mp, pb, ctr, 0.0, n_phi, s.m_max, ctx.level_mask(lv))
        m_cut = st.effective_m_cut(np.vstack([ca.coeffs, cb.coeffs]), s.m_max, s.power_fraction)
        sv, f = st.s_at_zero_overlap(ca, cb, m_cut, s.min_overlap)
        ok = (ca.kept_fraction >= s.min_kept) & (cb.kept_fraction >= s.min_kept) & np.isfinite(sv)
        r = R.shape[0]
        out_s[i0 : i0 + r] = sv.reshape(r, -1)
        out_f[i0 : i0 + r] = f.reshape(r, -1)
        out_ok[i0 : i0 + r] = ok.reshape(r, -1)
        add_work(work, sv.size, 1, m_cut)
    return out_s, out_f, out_ok


def combine(sv: np.ndarray, f: np.ndarray, ok: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """S_comb per rotation, the mean of S_eq = rank_score(S, f) over the usable pairs (-inf where
    none is usable), and the number of pairs that entered (n_rot,)."""
    cnt = ok.sum(axis=1)
    eq = np.where(ok, st.rank_score(np.where(ok, sv, 0.0), f), 0.0)
    return np.where(cnt > 0, eq.sum(axis=1) / np.maximum(cnt, 1), -np.inf), cnt


def orientation_score(comb: np.ndarray, cnt: np.ndarray) -> np.ndarray:
    """The score that ranks orientations (and positions): Stouffer's sum of the usable pairs'
    S_eq over sqrt(P_used), Z = P_used^-1/2 sum_p S_eq,p = sqrt(P_used) S_comb (Stouffer et al.
    1949; -inf where no pair is usable). Each S_eq,p has the null spread of a full circle, so Z
    has one null spread whatever the number of usable pairs, while the mean S_comb spreads as
    P_used^-1/2: ranked by the mean, an orientation that leaves a single chance pair usable
    beats the true one with many (measured in the README's targeted section)."""
    cnt = np.asarray(cnt, dtype=float)
    return np.where(cnt > 0, np.asarray(comb, dtype=float) * np.sqrt(np.maximum(cnt, 1.0)), -np.inf)


def scan_orientations(ctx: SearchContext, levels: list[Level], pairs, work: dict,
                      evaluate_fn=None) -> tuple[np.ndarray, list]:
    """Best orientations (Euler angles, best first; at most ``n_keep``) after the last level, and
    one {nside, fwhm_deg, orientations} record per level. Each level keeps the ``n_keep`` best and
    tries, for each, the next grid's directions within one step and gammas within two steps.
    ``evaluate_fn(ctx, lv, pairs, euler, work)`` gives the pair values (default :func:`evaluate`;
    the T + E search passes its own)."""
    import healpy as hp

    evaluate_fn = evaluate if evaluate_fn is None else evaluate_fn
    s = ctx.settings
    lv = levels[0]
    euler = orientation_grid(lv.nside)
    score = orientation_score(*combine(*evaluate_fn(ctx, lv, pairs, euler, work)))
    info = [{"nside": lv.nside, "fwhm_deg": float(np.degrees(lv.fwhm)), "orientations": int(euler.shape[0])}]
    best = euler[np.argsort(-score, kind="stable")[: s.n_keep]]
    for prev, lv in zip(levels[:-1], levels[1:]):
        cand = []
        n_g = 2
        for e in best:
            zdir = np.array([np.sin(e[1]) * np.cos(e[0]), np.sin(e[1]) * np.sin(e[0]), np.cos(e[1])])
            pix = hp.query_disc(lv.nside, zdir, prev.step)
            if pix.size == 0:
                pix = np.array([hp.vec2pix(lv.nside, *zdir)])
            th, ph = hp.pix2ang(lv.nside, pix)
            g0 = closest_gamma(rotations(e[None])[0], ph, th)
            for dg in lv.step * np.arange(-n_g, n_g + 1):
                cand.append(np.stack([ph, th, (g0 + dg) % (2 * np.pi)], axis=1))
        cand = np.unique(np.round(np.vstack(cand), 9), axis=0)
        score = orientation_score(*combine(*evaluate_fn(ctx, lv, pairs, cand, work)))
        order = np.argsort(-score, kind="stable")
        best = cand[order[: s.n_keep]]
        info.append({"nside": lv.nside, "fwhm_deg": float(np.degrees(lv.fwhm)), "orientations": int(cand.shape[0])})
    return best, info


def pair_records(pairs, R: np.ndarray, sv: np.ndarray, f: np.ndarray, ok: np.ndarray, level_nside: int) -> list[dict]:
    """The predicted pairs rotated by R, without twist, each with its S, jointly kept fraction
    ``overlap`` (f), S_eq = rank_score(S, f) and ``usable`` (S and S_eq NaN when not usable)."""
    out = []
    eq = st.rank_score(np.where(ok, sv, 0.0), f)
    for p, val, frac, e, good in zip(pairs, sv, f, eq, ok):
        c = candidate_record(R @ p.center_a, R @ p.center_b, p.radius, 0.0, p.orientation,
                             val if good else float("nan"), level_nside)
        c.pop("twist_deg")
        out.append({**c, "overlap": float(frac), "S_eq": float(e) if good else float("nan"), "usable": bool(good)})
    return out


def targeted_candidates(ctx: SearchContext, best: dict) -> tuple[list, list]:
    """Candidates and S_max rows in the contract of the search output, from the best position's
    task result: the pairs best first by S_eq (unusable ones last), each with S, ``overlap`` (f)
    and S_eq; S_max is the best S_eq per radius and orientation, as in the radius scan. Rotating the sky by R shifts the phase of circle A by a constant delta_A and of B
    by delta_B, so the twist seen in the rotated frame is tau' = tau + delta_B - s delta_A; it is
    measured from the rotated points."""
    from ..circles import circle_phase, circle_points

    R = np.asarray(best["rotation"])
    pairs = predicted_pairs(ctx, best["position"])
    phi = np.linspace(0.0, 2.0 * np.pi, 16, endpoint=False)
    cands, s_max = [], {}
    for p, rec in zip(pairs, best["pairs"]):
        ca, cb = R @ p.center_a, R @ p.center_b
        psi_a = circle_phase(ca, circle_points(p.center_a, p.radius, phi) @ R.T)
        psi_b = circle_phase(cb, circle_points(p.center_b, p.radius, p.orientation * phi + p.twist) @ R.T)
        tau = float(np.angle(np.mean(np.exp(1j * (psi_b - p.orientation * psi_a)))) % (2 * np.pi))
        c = dict(rec)
        c["twist_deg"] = float(np.degrees(tau) % 360.0)
        cands.append(c)
        key = (round(c["radius_deg"], 6), c["orientation"])
        if c["usable"] and (key not in s_max or c["S_eq"] > s_max[key]):
            s_max[key] = c["S_eq"]
    cands.sort(key=lambda c: -(c["S_eq"] if c["usable"] else -9))
    return cands, [{"radius_deg": k[0], "orientation": k[1], "S_max": v} for k, v in sorted(s_max.items())]
