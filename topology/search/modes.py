"""Search strategies behind one interface: antipodal, all-pairs and targeted.

A mode turns a :class:`SearchContext` (prepared map, settings) into tasks (radii, or observer
positions for ``targeted``), runs one task at a time (so the engine can checkpoint between
them) and summarises the task results. Task results are plain JSON-able dicts.

Hierarchical scheme (antipodal and all-pairs). Centre grids are HEALPix grids of N_side c_0,
2 c_0, 4 c_0, ... up to the first whose pixel size is below FWHM / 4 (at most 4 N_side_work).
Level l is searched on the map smoothed to FWHM_l = max(FWHM, kappa * step_l) (kappa =
``level_smoothing``, default 1.2): a centre that is off by up to half a grid step moves the
circle by about as much, and smoothing to that scale keeps the true pair's S high enough to
rank among the best on a coarse grid. Level 0 evaluates every pair (all-pairs: the blocked
BLAS kernel; antipodal: c with -c); the best ``n_keep`` pairs per radius and orientation go to
the next level, where every combination of the finer-grid centres within one coarse step of
each centre is evaluated with the exact S (sub-grid twist), and so on.

Ranking. Pairs with a cut circle are compared with the exact masked S over the samples both
circles keep (a fraction f) and ranked by the full-circle S of the same chance probability,
S_eq = sqrt(1 - (1 - S^2)^f) (statistic.rank_score: one null spread for every f, and a match
on a cut circle scores what its chance probability allows); for full circles S_eq = S. Each
level keeps the best pairs per orientation after dropping the side lobes of better ones (both
centres within 2 FWHM, at least a coarse step: S falls slowly with centre offsets, and
unsuppressed side lobes of a strong pair took the places of weaker true pairs). All-pairs on a
masked map: the BLAS kernel (harmonic S of the cut circles as sampled, lowered by roughly the
jointly kept fraction) only filters: its best POOL_SHARE of all pairs are evaluated with the
exact masked S and ranked by S_eq before the ``n_keep`` best go on.

What the refinement can miss (tests/test_search_modes.py and tests/test_search_skies.py show
them):

(1) A pair whose coarse score is not among the ``n_keep`` best distinct pairs at its radius.
Two losses lower a true pair's S on the coarse level: the smoothing on the sphere mixes in sky
off the circle, which does not match (E2 39.7 deg pair of the masked, noisy SW sky of
tests/test_search_skies.py at its exact centres: S 0.90 at 2.2 deg FWHM, 0.82 at 4.4 deg), and
the nearest grid centres are off by up to half a step (best of the 3x3 neighbouring grid pairs:
S 0.74 on N_side 32 at 2.2 deg, 0.70 on N_side 16 at 4.4 deg). With 63% of its points jointly
kept this scores S_eq 0.58, while the 64 best chance pairs of the N_side 16 grid score
0.68-0.77 (a few modes at that smoothing; over 40-70% of a circle they reach S 0.8-0.9). It is
not found with n_keep 1024 (38 s for two radii) nor with an N_side 32 coarse grid (106 s);
injected into the coarse candidates it is found (S 0.911, against 0.85 for the best chance
pair). On those skies E3 62.7 (33% jointly kept), E7 62.2 and 22.2 (41-43%) and E2 39.7 (64%)
are missed in this way; E3 62.7 is found with n_keep 256 or level_smoothing 0.9. All-pairs
there finds 4 of the 8 non-antipodal pairs with more than half of each circle unmasked (both
full-circle pairs, 2 of the 6 cut ones). The misses are a resolution limit, not a defect of the
filter or the ranking (measured on E2 39.7 and E7 62.2):
  - the exact masked S_eq of every one of the 3.2-3.6 million coarse pairs (what a perfect
    filter would give) ranks the true pair's best grid pair 4215th and 3005th (raw ranks,
    side lobes of chance peaks included);
  - an N_side 32 coarse grid (2.2 deg, 47 s per radius against 1.5 s) still ranks E2 39.7
    (S_eq 0.625) below its 64 best chance pairs (0.631-0.696), since its S_eq falls from 0.80
    at the exact centres to 0.63 about 1 deg from them;
  - level_smoothing 0.6 (2.2 deg on N_side 16) passes E2 39.7 and E3 62.7 on with margins of
    0.02-0.04 in S_eq but loses E7 62.2, whose centres are 2.5-3.4 deg from the nearest grid
    centres (S_eq 0.42 against 0.53 for the 64th chance pair);
  - rotating the N_side 16 grid changes little: E3 62.7 is found on 3 of 4 rotated grids,
    E2 39.7 and both E7 pairs on none;
  - min_kept applies on every level, so a circle just over half unmasked at its true centre
    (E7 62.2: 52%) can fall below it at a grid centre and be skipped there; min_kept 0.4 on
    the coarse level raises that pair's best grid S_eq from 0.54 to 0.55 only.
(2) Pairs whose centres are closer than ``min_separation_deg`` (excluded: neighbouring circles
overlap and correlate trivially).
(3) Pairs with fewer than ``min_overlap`` of the samples jointly kept at the matching phases:
their masked S is not defined (e.g. two circles 56% unmasked each but 11% jointly); lowering
min_overlap to 0.05 lets chance matches over short arcs (S ~ 0.99) win instead.
The antipodal mode has no such coarse limit in these tests: every antipodal pair with more
than half of each circle unmasked and at least min_overlap jointly kept is found.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .. import geometry as geo
from ..errors import InputError
from . import statistic as st
from .sampling import CircleSet, centre_grid, sample_circles, sample_points


# ---------------------------------------------------------------------------------------------
# context and levels
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Level:
    nside: int  # centre grid (or orientation grid) N_side
    step: float  # grid step (rad): healpy.nside2resol
    fwhm: float  # smoothing of this level's map (rad)


def centre_levels(centre_nside: int, nside_work: int, fwhm: float, kappa: float) -> list[Level]:
    """Grids c_0, 2 c_0, ... until the step is below FWHM / 4 (at most 4 N_side_work: the last
    levels polish centres between the working pixels, which interpolation allows)."""
    import healpy as hp

    out = []
    c = int(centre_nside)
    while True:
        step = hp.nside2resol(c)
        out.append(Level(c, step, max(fwhm, kappa * step)))
        if step < fwhm / 4.0 or c >= 4 * nside_work:
            break
        c *= 2
    return out


@dataclass
class SearchContext:
    """What a mode needs: the prepared map and the settings (see engine.SearchSettings)."""

    prepared: object
    settings: object
    scenario: object = None  # targeted mode: topology.scenario.Scenario

    def n_phi(self, radius: float, level: Level) -> int:
        """Samples per circle: the setting when given, else enough for the level map's band limit
        so that modes m > m_max do not alias onto m <= m_max (aliasing would differ between the
        two circles of a twisted pair): a circle of radius alpha carries m <= l_band sin(alpha),
        l_band = min(3 N_side_work - 1, 3.7 / sigma) where the Gaussian beam has fallen to 1e-3
        (sigma = FWHM / sqrt(8 ln 2)); N_phi = max(2 m_max + 2, 2 ceil(l_band sin alpha) + 2)."""
        s = self.settings
        if s.n_phi is not None:
            return int(s.n_phi)
        l_band = 3 * s.nside_work - 1
        if level.fwhm > 0:
            l_band = min(l_band, int(math.ceil(3.7 * math.sqrt(8.0 * math.log(2.0)) / level.fwhm)))
        return int(max(2 * s.m_max + 2, 2 * math.ceil(l_band * math.sin(min(radius, np.pi / 2))) + 2))

    def level_map(self, level: Level) -> np.ndarray:
        return self.prepared.working_map(level.fwhm)

    @property
    def mask(self) -> np.ndarray | None:
        """Kept pixels on the sampling grid (None when nothing is masked)."""
        if self.prepared.mask.all():
            return None
        return self.prepared.sample_mask

    def level_mask(self, level: Level) -> np.ndarray | None:
        """Kept pixels of the level's map: the mask shrunk where its smoothing leaks masked sky."""
        if self.prepared.mask.all():
            return None
        return self.prepared.level_mask(level.fwhm)


# ---------------------------------------------------------------------------------------------
# the interface
# ---------------------------------------------------------------------------------------------
class Mode:
    """A search strategy: ``tasks(ctx)`` keys, ``run_task(ctx, key)`` -> dict, ``summarise``."""

    name = ""

    def tasks(self, ctx: SearchContext) -> list:
        raise NotImplementedError

    def run_task(self, ctx: SearchContext, key) -> dict:
        raise NotImplementedError

    def summarise(self, ctx: SearchContext, results: dict) -> dict:
        """{candidates, s_max, work, ...} from task results keyed by task key."""
        raise NotImplementedError


def _work(pairs=0, twists=0, modes=0) -> dict:
    return {"pairs": int(pairs), "twists": int(twists), "modes": int(modes)}


def _add(w: dict, pairs, n_tau, m_cut) -> None:
    w["pairs"] += int(pairs)
    w["twists"] += int(pairs) * int(n_tau)
    w["modes"] += int(pairs) * int(n_tau) * int(m_cut)


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


def _candidate(ca, cb, radius, twist, orientation, s, level) -> dict:
    la, ba = geo.vec_to_lonlat(np.asarray(ca))
    lb, bb = geo.vec_to_lonlat(np.asarray(cb))
    return {
        "center_a": [float(la), float(ba)],
        "center_b": [float(lb), float(bb)],
        "radius_deg": float(np.degrees(radius)),
        "twist_deg": float(np.degrees(twist) % 360.0),
        "orientation": st.ORIENTATION_NAME[0 if orientation > 0 else 1],
        "S": float(s),
        "level_nside": int(level),
    }


# ---------------------------------------------------------------------------------------------
# hierarchical searches over centre pairs
# ---------------------------------------------------------------------------------------------
class _Hierarchical(Mode):
    """Shared machinery of antipodal and all-pairs: coarse stage, then refinement levels."""

    antipodal = False

    def tasks(self, ctx):
        return [float(r) for r in ctx.settings.radii_deg]

    def levels(self, ctx) -> list[Level]:
        s = ctx.settings
        return centre_levels(s.centre_nside, s.nside_work, np.radians(s.fwhm_deg), s.level_smoothing)

    # -- level 0 -----------------------------------------------------------------------------
    def coarse(self, ctx, circles: CircleSet, valid: np.ndarray, m_cut: int, work: dict):
        """Best pairs at the coarse level: (ia, ib, orientation) arrays of grid indices."""
        raise NotImplementedError

    def run_task(self, ctx, key) -> dict:
        s = ctx.settings
        radius = np.radians(key)
        levels = self.levels(ctx)
        work = _work()
        info = []
        # level 0 --------------------------------------------------------------------------
        lv = levels[0]
        centers = centre_grid(lv.nside)
        circ = sample_circles(ctx.level_map(lv), centers, radius, ctx.n_phi(radius, lv), s.m_max, ctx.level_mask(lv))
        valid = circ.kept_fraction >= s.min_kept
        skipped = int((~valid).sum())
        m_cut = st.effective_m_cut(circ.coeffs[valid] if valid.any() else circ.coeffs, s.m_max, s.power_fraction)
        if valid.sum() < (1 if self.antipodal else 2):
            return {"radius_deg": key, "candidates": [], "s_max": {}, "work": work, "skipped_circles": skipped,
                    "levels": info}
        ca, cb, orient = self.coarse(ctx, circ, valid, m_cut, work)
        ca, cb = centers[ca], cb if self.antipodal else centers[cb]
        info.append({"nside": lv.nside, "fwhm_deg": float(np.degrees(lv.fwhm)), "m_cut": int(m_cut),
                     "kept": int(len(orient))})
        none = {"radius_deg": key, "candidates": [], "s_max": {}, "work": work, "skipped_circles": skipped,
                "levels": info}  # no usable pair at this radius (e.g. every S undefined): no candidates
        if len(orient) == 0:
            return none
        # refinement levels ------------------------------------------------------------------
        s_val = twist = None
        for depth, (prev, lv) in enumerate(zip(levels[:-1], levels[1:])):
            keep = max(8, s.n_keep >> depth)  # fewer candidates once the smoothing is close to FWHM
            ca, cb, orient, s_val, twist, m_cut, n_skip = self.refine(ctx, lv, prev, radius, ca, cb, orient, work, keep)
            info.append({"nside": lv.nside, "fwhm_deg": float(np.degrees(lv.fwhm)), "m_cut": int(m_cut),
                         "kept": int(len(orient))})
            if len(orient) == 0:
                return none
        if s_val is None:  # a single level: evaluate the coarse candidates exactly
            ca, cb, orient, s_val, twist, m_cut, n_skip = self.refine(ctx, levels[0], None, radius, ca, cb, orient, work,
                                                                      s.n_keep)
        final_level = levels[-1].nside
        cands = []
        s_max = {}
        best = {}
        for o in (st.SAME, st.OPPOSITE):
            sel = np.flatnonzero(orient == o)
            if sel.size == 0:
                continue
            # distinct reported pairs: no two within 2 FWHM (or a coarse step) of each other
            reach = self.peak_reach(ctx)
            order = list(sel[distinct(ca[sel], cb[sel], self._rank[sel], s.n_report, reach)])
            cs = sel[self._cut[sel]]  # and the best cut pairs by S
            order += [i for i in cs[distinct(ca[cs], cb[cs], s_val[cs], s.n_report, reach)] if i not in order]
            if not order:  # every pair of this orientation has an undefined score
                continue
            name = st.ORIENTATION_NAME[o]
            # S_max: the ranking score of the best pair, the full-circle S of the same chance
            # probability (its S for full circles): a short overlap of high S then does not set the
            # radius's statistic above what its chance probability allows
            s_max[name] = float(self._rank[order[0]])
            for i in order:
                cands.append(_candidate(ca[i], cb[i], radius, twist[i], st.ORIENTATION_SIGN[o], s_val[i], final_level))
                cands[-1]["overlap"] = float(self._overlap[i])
                cands[-1]["S_eq"] = float(self._rank[i])
                if i == order[0]:
                    best[name] = cands[-1]  # the pair that defines S_max (best by the ranking score)
        cands.sort(key=lambda c: -c["S"])
        return {"radius_deg": key, "candidates": cands, "s_max": s_max, "best": best, "work": work,
                "skipped_circles": skipped, "levels": info}

    def peak_reach(self, ctx) -> float:
        """Width (rad) of one peak in centre space: 2 FWHM, at least a coarse grid step."""
        return max(2.0 * np.radians(ctx.settings.fwhm_deg), self.levels(ctx)[0].step)

    # -- refinement ----------------------------------------------------------------------------
    def neighbours(self, nside: int, vec: np.ndarray, radius: float) -> np.ndarray:
        import healpy as hp

        pix = hp.query_disc(nside, vec, radius)
        if pix.size == 0:
            pix = np.array([hp.vec2pix(nside, *vec)])
        return pix

    def refine(self, ctx, lv: Level, prev: Level | None, radius, ca, cb, orient, work, n_keep: int):
        """Evaluate every finer-grid combination around each candidate; keep the best."""
        import healpy as hp

        s = ctx.settings
        if len(ca) == 0:  # nothing to refine: no candidates (not an error)
            self._cut, self._rank, self._overlap = np.zeros(0, bool), np.zeros(0), np.zeros(0)
            return np.zeros((0, 3)), np.zeros((0, 3)), np.zeros(0, int), np.zeros(0), np.zeros(0), 0, 0
        reach = prev.step if prev is not None else 0.0
        pix_a, pix_b, ori = [], [], []
        for a, b, o in zip(ca, cb, orient):
            na = self.neighbours(lv.nside, a, reach) if prev is not None else np.array([hp.vec2pix(lv.nside, *a)])
            if self.antipodal:
                pix_a.append(na)
                pix_b.append(np.full(na.size, -1))
                ori.append(np.full(na.size, o))
                continue
            nb = self.neighbours(lv.nside, b, reach) if prev is not None else np.array([hp.vec2pix(lv.nside, *b)])
            ga, gb = np.meshgrid(na, nb, indexing="ij")
            pix_a.append(ga.ravel())
            pix_b.append(gb.ravel())
            ori.append(np.full(ga.size, o))
        pa = np.concatenate(pix_a)
        pb = np.concatenate(pix_b)
        po = np.concatenate(ori)
        # unique combinations; all-pairs stores the unordered pair once (smaller index first)
        if not self.antipodal:
            lo, hi = np.minimum(pa, pb), np.maximum(pa, pb)
            pa, pb = lo, hi
        combo = np.unique(np.stack([pa, pb, po], axis=1), axis=0)
        pa, pb, po = combo[:, 0], combo[:, 1], combo[:, 2]
        ua, inv_a = np.unique(pa, return_inverse=True)
        va = np.array(hp.pix2vec(lv.nside, ua)).T
        if self.antipodal:
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
        if not self.antipodal:
            sep_cos = np.einsum("ij,ij->i", centers[ia], centers[ib])
            ok &= sep_cos < math.cos(np.radians(s.min_separation_deg))
        ia, ib, po = ia[ok], ib[ok], po[ok]
        sv, tw, fr = st.best_twist(circ, circ, ia, ib, m_cut, s.min_overlap, with_overlap=True, orient=po)
        r = np.arange(ia.size)
        s_val = sv[r, po]
        twist = tw[r, po]
        rank = st.rank_score(s_val, fr[r, po])  # S_eq: cut and full circles on one scale
        _add(work, ia.size, 8 * (m_cut + 1), m_cut)
        # keep the n_keep best per orientation; a candidate whose centres both lie within the peak
        # width of a better one's is a side lobe of that peak (S falls slowly with centre offsets on
        # a smooth sky) and would otherwise take the place of a weaker, distinct pair
        keep = []
        cutp = fr[r, po] < 1.0
        near = self.peak_reach(ctx)
        for o in (st.SAME, st.OPPOSITE):
            sel = np.flatnonzero(po == o)
            keep.append(sel[distinct(centers[ia[sel]], centers[ib[sel]], rank[sel], n_keep, near)])
            sel = sel[cutp[sel]]  # quota for cut pairs
            keep.append(sel[distinct(centers[ia[sel]], centers[ib[sel]], rank[sel], max(1, n_keep // 2), near)])
        keep = np.unique(np.concatenate(keep))
        self._cut = cutp[keep]
        self._rank = rank[keep]
        self._overlap = fr[r, po][keep]
        return (centers[ia[keep]], centers[ib[keep]], po[keep], s_val[keep], twist[keep], m_cut,
                int((~valid).sum()))

    # -- summary --------------------------------------------------------------------------------
    def summarise(self, ctx, results: dict) -> dict:
        s = ctx.settings
        work = _work()
        cands, s_max = [], []
        skipped = 0
        for key in sorted(results):
            r = results[key]
            for k in work:
                work[k] += r["work"][k]
            skipped += r["skipped_circles"]
            cands.extend(r["candidates"])
            for name in st.ORIENTATION_NAME:
                if name in r["s_max"]:
                    best = r.get("best", {}).get(name) or next(c for c in r["candidates"] if c["orientation"] == name)
                    s_max.append({"radius_deg": float(key), "orientation": name, "S_max": r["s_max"][name],
                                  "best": best})
        reported = list(cands)  # per radius: n_report best per orientation, plus the best cut pairs
        cands.sort(key=lambda c: -c["S"])
        return {"candidates": cands[: s.n_candidates], "s_max": s_max, "work": work, "reported": reported,
                "skipped_circles": skipped}


class AntipodalMode(_Hierarchical):
    """Centres opposite each other: c and -c (translations, Clifford translations)."""

    name = "antipodal"
    antipodal = True

    def coarse(self, ctx, circ, valid, m_cut, work):
        import healpy as hp

        s = ctx.settings
        n = len(circ)
        nside = hp.npix2nside(n)
        anti = hp.vec2pix(nside, *(-circ.centers.T))
        first = np.flatnonzero(np.arange(n) < anti)
        first = first[valid[first] & valid[anti[first]]]
        sv, _, fr = st.best_twist(circ, circ, first, anti[first], m_cut, s.min_overlap, with_overlap=True)
        _add(work, first.size, 8 * (m_cut + 1), m_cut)
        ia, orient = [], []
        reach = hp.nside2resol(nside)
        c = circ.centers[first]
        for o in (st.SAME, st.OPPOSITE):
            order = distinct(c, -c, st.rank_score(sv[:, o], fr[:, o]), s.n_keep, reach)
            ia.append(first[order])
            orient.append(np.full(order.size, o))
        ia = np.concatenate(ia)
        return ia, -circ.centers[ia], np.concatenate(orient)


class AllPairsMode(_Hierarchical):
    """Any two centres, every twist, both orientations (the six-parameter search)."""

    name = "all-pairs"

    def coarse(self, ctx, circ, valid, m_cut, work):
        """Unmasked: the ``n_pool * n_keep`` best pairs of the BLAS kernel, then the ``n_keep``
        best distinct ones. With cut circles the kernel's S (harmonic, over circles as sampled) is
        only a filter: its best POOL_SHARE of all pairs (at least ``n_pool * n_keep``; plus as
        many pairs with a cut circle) are evaluated with the exact masked S and ranked by
        S_eq = sqrt(1 - (1 - S^2)^f) (statistic.rank_score) before the ``n_keep`` best distinct ones go on."""
        import healpy as hp

        s = ctx.settings
        a = st.weighted(circ.coeffs, m_cut)
        cut = ~circ.full
        masked = bool(cut[valid].any())
        n_valid = int(valid.sum())
        pool = s.n_pool * s.n_keep
        if masked:
            pool = max(pool, int(POOL_SHARE * n_valid * (n_valid - 1) / 2))
        ia, ib, orient, sv = allpairs_top(a, circ.centers, valid, twist_count(m_cut, s.twist_oversample),
                                          pool, np.radians(s.min_separation_deg),
                                          s.kernel_mem_mb * (1 << 20), work, m_cut,
                                          cut=cut if masked else None)
        reach = hp.nside2resol(hp.npix2nside(len(circ)))
        keep = []
        score = sv
        if masked:
            combo = np.unique(np.stack([ia, ib, orient], axis=1), axis=0)
            ia, ib, orient = combo[:, 0], combo[:, 1], combo[:, 2]
            sx, _, fx = st.best_twist(circ, circ, ia, ib, m_cut, s.min_overlap, with_overlap=True, orient=orient)
            r = np.arange(ia.size)
            score = st.rank_score(sx[r, orient], fx[r, orient])
            _add(work, ia.size, 8 * (m_cut + 1), m_cut)
        for o in (st.SAME, st.OPPOSITE):
            sel = np.flatnonzero(orient == o)
            keep.append(sel[distinct(circ.centers[ia[sel]], circ.centers[ib[sel]], score[sel], s.n_keep, reach)])
        keep = np.unique(np.concatenate(keep))
        combo = np.unique(np.stack([ia[keep], ib[keep], orient[keep]], axis=1), axis=0)
        return combo[:, 0], combo[:, 1], combo[:, 2]


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
            _add(work, int((~bad).sum()), n_tau, m_cut)
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


# ---------------------------------------------------------------------------------------------
# targeted search: one family, its predicted pairs, scanned over orientations (and positions)
# ---------------------------------------------------------------------------------------------
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


class TargetedMode(Mode):
    """Predicted pairs of one family (config [space], [cosmology], [observer]) scanned over sky
    orientations R (z-y-z Euler grid; levels like the centre grids) and observer positions.

    For each R the circles are sampled at R n_A(phi_k) and R n_B(s phi_k + tau) (the contract),
    so each pair's S is taken at zero twist, same orientation; the combined statistic is the
    mean of the pair values S_comb(R) = (1/P) sum_p S_p(R) over the P usable pairs (radius in
    the radius range, both circles kept >= min_kept).
    """

    name = "targeted"

    def tasks(self, ctx):
        return list(range(len(self.positions(ctx))))

    def positions(self, ctx) -> list:
        s = ctx.settings
        if s.positions:
            return [list(map(float, p)) for p in s.positions]
        sc = ctx.scenario
        obs = sc.observer
        if obs.geometry == "flat":
            return [list(map(float, obs.point[:3]))]
        return [list(map(float, obs.point))]

    def predicted(self, ctx, position):
        from ..circles import predict_circles

        sc = ctx.scenario
        try:
            obs = geo.Observer.make(sc.space.geometry, position)
        except InputError as e:
            raise InputError(e.reason, "[search] positions") from None
        lo, hi = min(ctx.settings.radii_deg), max(ctx.settings.radii_deg)
        pairs = [p for p in predict_circles(sc.space, obs, sc.chi) if lo - 1e-9 <= np.degrees(p.radius) <= hi + 1e-9]
        return pairs

    def levels(self, ctx) -> list[Level]:
        s = ctx.settings
        return centre_levels(s.orientation_nside, s.nside_work, np.radians(s.fwhm_deg), s.level_smoothing)

    def evaluate(self, ctx, lv: Level, pairs, euler: np.ndarray, work: dict) -> tuple[np.ndarray, np.ndarray]:
        """S_p(R) for rotations (n_rot, 3 Euler): returns (n_rot, P) pair values and usable flags."""
        from ..circles import circle_points

        s = ctx.settings
        n_phi = ctx.n_phi(max(p.radius for p in pairs), lv)
        phi = 2.0 * np.pi * np.arange(n_phi) / n_phi
        base_a = np.stack([circle_points(p.center_a, p.radius, phi) for p in pairs])  # (P, N, 3)
        base_b = np.stack([circle_points(p.center_b, p.radius, p.orientation * phi + p.twist) for p in pairs])
        mp = ctx.level_map(lv)
        out_s = np.empty((euler.shape[0], len(pairs)))
        out_ok = np.empty((euler.shape[0], len(pairs)), dtype=bool)
        chunk = max(1, 200_000 // (n_phi * len(pairs)))
        m_cut_seen = 0
        for i0 in range(0, euler.shape[0], chunk):
            R = rotations(euler[i0 : i0 + chunk])  # (r, 3, 3)
            pa = np.einsum("rij,pkj->rpki", R, base_a).reshape(-1, n_phi, 3)
            pb = np.einsum("rij,pkj->rpki", R, base_b).reshape(-1, n_phi, 3)
            ctr = np.zeros((pa.shape[0], 3))
            ca = sample_points(mp, pa, ctr, 0.0, n_phi, s.m_max, ctx.level_mask(lv))
            cb = sample_points(mp, pb, ctr, 0.0, n_phi, s.m_max, ctx.level_mask(lv))
            m_cut = st.effective_m_cut(np.vstack([ca.coeffs, cb.coeffs]), s.m_max, s.power_fraction)
            m_cut_seen = max(m_cut_seen, m_cut)
            sv, _, _ = st.s_at_zero(ca, cb, m_cut, s.min_overlap)
            ok = (ca.kept_fraction >= s.min_kept) & (cb.kept_fraction >= s.min_kept)
            r = R.shape[0]
            out_s[i0 : i0 + r] = sv.reshape(r, -1)
            out_ok[i0 : i0 + r] = ok.reshape(r, -1)
            _add(work, sv.size, 1, m_cut)
        return out_s, out_ok

    @staticmethod
    def combine(sv: np.ndarray, ok: np.ndarray) -> np.ndarray:
        cnt = ok.sum(axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(cnt > 0, np.where(ok, sv, 0.0).sum(axis=1) / np.maximum(cnt, 1), -np.inf)

    def run_task(self, ctx, key) -> dict:
        import healpy as hp

        s = ctx.settings
        position = self.positions(ctx)[key]
        pairs = self.predicted(ctx, position)
        work = _work()
        if not pairs:
            return {"position": position, "pairs": [], "S_combined": None, "euler_deg": None, "work": work,
                    "levels": []}
        levels = self.levels(ctx)
        lv = levels[0]
        euler = orientation_grid(lv.nside)
        sv, ok = self.evaluate(ctx, lv, pairs, euler, work)
        comb = self.combine(sv, ok)
        info = [{"nside": lv.nside, "fwhm_deg": float(np.degrees(lv.fwhm)), "orientations": int(euler.shape[0])}]
        best = euler[np.argsort(-comb, kind="stable")[: s.n_keep]]
        for prev, lv in zip(levels[:-1], levels[1:]):
            cand = []
            n_g = 2
            for e in best:
                zdir = np.array([np.sin(e[1]) * np.cos(e[0]), np.sin(e[1]) * np.sin(e[0]), np.cos(e[1])])
                pix = hp.query_disc(lv.nside, zdir, prev.step)
                if pix.size == 0:
                    pix = np.array([hp.vec2pix(lv.nside, *zdir)])
                th, ph = hp.pix2ang(lv.nside, pix)
                g0 = _closest_gamma(rotations(e[None])[0], ph, th)
                for dg in lv.step * np.arange(-n_g, n_g + 1):
                    cand.append(np.stack([ph, th, (g0 + dg) % (2 * np.pi)], axis=1))
            cand = np.unique(np.round(np.vstack(cand), 9), axis=0)
            sv, ok = self.evaluate(ctx, lv, pairs, cand, work)
            comb = self.combine(sv, ok)
            order = np.argsort(-comb, kind="stable")
            best = cand[order[: s.n_keep]]
            info.append({"nside": lv.nside, "fwhm_deg": float(np.degrees(lv.fwhm)), "orientations": int(cand.shape[0])})
        # final values at the best orientation
        sv, ok = self.evaluate(ctx, levels[-1], pairs, best[:1], _work())
        comb = float(self.combine(sv, ok)[0])
        R = rotations(best[:1])[0]
        out_pairs = []
        for p, val, good in zip(pairs, sv[0], ok[0]):
            c = _candidate(R @ p.center_a, R @ p.center_b, p.radius, 0.0, p.orientation, val if good else float("nan"),
                           levels[-1].nside)
            c.pop("twist_deg")
            out_pairs.append({**c, "usable": bool(good)})
        return {"position": position, "pairs": out_pairs, "S_combined": comb,
                "euler_deg": [float(v) for v in np.degrees(best[0])], "work": work, "levels": info,
                "rotation": R.tolist()}

    def summarise(self, ctx, results: dict) -> dict:
        work = _work()
        for r in results.values():
            for k in work:
                work[k] += r["work"][k]
        valid = [r for r in results.values() if r["S_combined"] is not None]
        if not valid:
            return {"candidates": [], "s_max": [], "work": work, "targeted": {"positions": list(results.values())}}
        best = max(valid, key=lambda r: r["S_combined"])
        cands, s_max = _targeted_pairs(ctx, best)
        return {"candidates": cands, "s_max": s_max, "work": work,
                "targeted": {"family": ctx.scenario.space.family, "best_position": best["position"],
                             "best_euler_deg": best["euler_deg"], "S_combined": best["S_combined"],
                             "positions": [{k: r[k] for k in ("position", "S_combined", "euler_deg")}
                                           for r in results.values()]}}


def _closest_gamma(r_old: np.ndarray, alpha: np.ndarray, beta: np.ndarray) -> np.ndarray:
    """gamma making R_z(alpha) R_y(beta) R_z(gamma) closest to r_old (for each alpha, beta)."""
    zero = np.zeros_like(alpha)
    base = rotations(np.stack([alpha, beta, zero], axis=1))  # (n, 3, 3)
    m = np.einsum("nji,jk->nik", base, r_old)  # base^T r_old ~ R_z(gamma)
    return np.arctan2(m[:, 1, 0] - m[:, 0, 1], m[:, 0, 0] + m[:, 1, 1])


def _targeted_pairs(ctx, best: dict):
    """Candidates in the contract of the search output. Rotating the sky by R shifts the phase
    of circle A by a constant delta_A and of B by delta_B, so the twist seen in the rotated
    frame is tau' = tau + delta_B - s delta_A; it is measured from the rotated points."""
    from ..circles import circle_phase, circle_points, predict_circles

    sc = ctx.scenario
    R = np.asarray(best["rotation"])
    obs = geo.Observer.make(sc.space.geometry, best["position"])
    lo, hi = min(ctx.settings.radii_deg), max(ctx.settings.radii_deg)
    pairs = [p for p in predict_circles(sc.space, obs, sc.chi) if lo - 1e-9 <= np.degrees(p.radius) <= hi + 1e-9]
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
        if np.isfinite(c["S"]) and (key not in s_max or c["S"] > s_max[key]):
            s_max[key] = c["S"]
    cands.sort(key=lambda c: -(c["S"] if np.isfinite(c["S"]) else -9))
    return cands, [{"radius_deg": k[0], "orientation": k[1], "S_max": v} for k, v in sorted(s_max.items())]
