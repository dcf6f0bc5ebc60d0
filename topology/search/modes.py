"""Search strategies behind one interface: antipodal, all-pairs and targeted.

A mode turns a :class:`~topology.search.context.SearchContext` (prepared map, settings) into
tasks (radii, or observer positions for ``targeted``), runs one task at a time
(:meth:`Mode.run_task`, through :func:`topology.execution.run_tasks`, which stores each result
so that an interrupted search resumes) and summarises the task results. Task results are plain
JSON-able dicts.

Antipodal and all-pairs search each radius on a coarse centre grid of their own (every pair c,
-c; the blocked all-pairs kernel of :mod:`.allpairs`, which on a masked map only filters: its
best POOL_SHARE of all pairs are re-scored with the exact masked S), then refine the best pairs
level by level (:mod:`.hierarchy`). Targeted scans the orientations of one family's predicted
pairs (:mod:`.targeted`).

What the refinement can miss (measured in benchmarks/SEARCH_VALIDATION.md):

(1) a pair whose coarse score is not among the ``n_keep`` best distinct pairs at its radius. On
    the masked, noisy Sachs-Wolfe skies of tests/test_search_skies.py all-pairs misses E2 39.7,
    E3 62.7, E7 62.2 and E7 22.2 deg (``COARSE_MISSES``: test_masked_noisy_sw_skies fails on any
    other miss), a resolution limit of the coarse grid, not of the filter or the ranking;
    tests/test_search_modes.py test_what_refinement_misses shows that the coarse-level smoothing
    is what puts a true pair among the best coarse pairs;
(2) pairs whose centres are closer than ``min_separation_deg`` (test_what_refinement_misses);
(3) pairs with fewer than ``min_overlap`` of the samples jointly kept at the matching phases:
    their masked S is not defined.

The antipodal mode has no such coarse limit on those skies: every antipodal pair with more than
half of each circle unmasked and at least min_overlap jointly kept is found
(test_masked_noisy_sw_skies).
"""

from __future__ import annotations

import numpy as np

from . import statistic as st
from . import targeted as tg
from .allpairs import POOL_SHARE, allpairs_top, twist_count
from .context import Level, SearchContext, add_work, candidate_record, centre_levels, new_work, total_work
from .hierarchy import Candidates, distinct, pair_levels, peak_reach, refine
from .sampling import CircleSet, centre_grid, sample_circles


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


# ---------------------------------------------------------------------------------------------
# hierarchical searches over centre pairs
# ---------------------------------------------------------------------------------------------
class PairMode(Mode):
    """What antipodal and all-pairs share: a task per radius, the coarse level (the mode's own),
    the refinement levels of :mod:`.hierarchy`, and the report of the last level's pairs."""

    antipodal = False

    def tasks(self, ctx):
        return [float(r) for r in ctx.settings.radii_deg]

    def levels(self, ctx) -> list[Level]:
        return pair_levels(ctx.settings)

    def coarse(self, ctx, circles: CircleSet, valid: np.ndarray, m_cut: int, work: dict) -> Candidates:
        """Best pairs at the coarse level (centres and orientation)."""
        raise NotImplementedError

    def run_task(self, ctx, key) -> dict:
        s = ctx.settings
        radius = np.radians(key)
        levels = self.levels(ctx)
        work = new_work()
        info = []
        # level 0 --------------------------------------------------------------------------
        lv = levels[0]
        circ = sample_circles(ctx.level_map(lv), centre_grid(lv.nside), radius, ctx.n_phi(radius, lv), s.m_max,
                              ctx.level_mask(lv))
        valid = circ.kept_fraction >= s.min_kept
        skipped = int((~valid).sum())

        def nothing() -> dict:  # no usable pair at this radius (e.g. every S undefined): no candidates
            return {"radius_deg": key, "candidates": [], "s_max": {}, "work": work, "skipped_circles": skipped,
                    "levels": info}

        m_cut = st.effective_m_cut(circ.coeffs[valid] if valid.any() else circ.coeffs, s.m_max, s.power_fraction)
        if valid.sum() < (1 if self.antipodal else 2):
            return nothing()
        cands = self.coarse(ctx, circ, valid, m_cut, work)
        info.append({"nside": lv.nside, "fwhm_deg": float(np.degrees(lv.fwhm)), "m_cut": int(m_cut),
                     "kept": len(cands)})
        if len(cands) == 0:
            return nothing()
        # refinement levels ------------------------------------------------------------------
        for depth, (prev, lv) in enumerate(zip(levels[:-1], levels[1:])):
            keep = max(8, s.n_keep >> depth)  # fewer candidates once the smoothing is close to FWHM
            cands = refine(ctx, lv, prev, radius, cands, work, keep, self.antipodal)
            info.append({"nside": lv.nside, "fwhm_deg": float(np.degrees(lv.fwhm)), "m_cut": int(cands.m_cut),
                         "kept": len(cands)})
            if len(cands) == 0:
                return nothing()
        if cands.s is None:  # a single level: evaluate the coarse candidates exactly
            cands = refine(ctx, levels[0], None, radius, cands, work, s.n_keep, self.antipodal)
        return {"radius_deg": key, **self.report(ctx, radius, cands, levels[-1].nside), "work": work,
                "skipped_circles": skipped, "levels": info}

    def report(self, ctx, radius: float, c: Candidates, final_level: int) -> dict:
        """{candidates, s_max, best} of one radius from the last level's pairs: per orientation the
        ``n_report`` best distinct pairs by the ranking score and the best distinct cut pairs by S."""
        s = ctx.settings
        ca, cb = c.center_a, c.center_b
        cands = []
        s_max = {}
        best = {}
        for o in (st.SAME, st.OPPOSITE):
            sel = np.flatnonzero(c.orientation == o)
            if sel.size == 0:
                continue
            # distinct reported pairs: no two within 2 FWHM (or a coarse step) of each other
            reach = peak_reach(s)
            order = list(sel[distinct(ca[sel], cb[sel], c.rank[sel], s.n_report, reach)])
            cs = sel[c.cut[sel]]  # and the best cut pairs by S
            order += [i for i in cs[distinct(ca[cs], cb[cs], c.s[cs], s.n_report, reach)] if i not in order]
            if not order:  # every pair of this orientation has an undefined score
                continue
            name = st.ORIENTATION_NAME[o]
            # S_max: the ranking score of the best pair, the full-circle S of the same chance
            # probability (its S for full circles): a short overlap of high S then does not set the
            # radius's statistic above what its chance probability allows
            s_max[name] = float(c.rank[order[0]])
            for i in order:
                cands.append(candidate_record(ca[i], cb[i], radius, c.twist[i], st.ORIENTATION_SIGN[o], c.s[i],
                                              final_level))
                cands[-1]["overlap"] = float(c.overlap[i])
                cands[-1]["S_eq"] = float(c.rank[i])
                if i == order[0]:
                    best[name] = cands[-1]  # the pair that defines S_max (best by the ranking score)
        cands.sort(key=lambda e: -e["S"])
        return {"candidates": cands, "s_max": s_max, "best": best}

    def summarise(self, ctx, results: dict) -> dict:
        s = ctx.settings
        cands, s_max = [], []
        skipped = 0
        for key in sorted(results):
            r = results[key]
            skipped += r["skipped_circles"]
            cands.extend(r["candidates"])
            for name in st.ORIENTATION_NAME:
                if name in r["s_max"]:
                    best = r.get("best", {}).get(name) or next(c for c in r["candidates"] if c["orientation"] == name)
                    s_max.append({"radius_deg": float(key), "orientation": name, "S_max": r["s_max"][name],
                                  "best": best})
        reported = list(cands)  # per radius: n_report best per orientation, plus the best cut pairs
        cands.sort(key=lambda c: -c["S"])
        return {"candidates": cands[: s.n_candidates], "s_max": s_max, "work": total_work(results.values()),
                "reported": reported, "skipped_circles": skipped}


class AntipodalMode(PairMode):
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
        add_work(work, first.size, 8 * (m_cut + 1), m_cut)
        ia, orient = [], []
        reach = hp.nside2resol(nside)
        c = circ.centers[first]
        for o in (st.SAME, st.OPPOSITE):
            order = distinct(c, -c, st.rank_score(sv[:, o], fr[:, o]), s.n_keep, reach)
            ia.append(first[order])
            orient.append(np.full(order.size, o))
        ia = np.concatenate(ia)
        return Candidates(circ.centers[ia], -circ.centers[ia], np.concatenate(orient))


class AllPairsMode(PairMode):
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
            add_work(work, ia.size, 8 * (m_cut + 1), m_cut)
        for o in (st.SAME, st.OPPOSITE):
            sel = np.flatnonzero(orient == o)
            keep.append(sel[distinct(circ.centers[ia[sel]], circ.centers[ib[sel]], score[sel], s.n_keep, reach)])
        keep = np.unique(np.concatenate(keep))
        combo = np.unique(np.stack([ia[keep], ib[keep], orient[keep]], axis=1), axis=0)
        return Candidates(circ.centers[combo[:, 0]], circ.centers[combo[:, 1]], combo[:, 2])


# ---------------------------------------------------------------------------------------------
# targeted search: one family, its predicted pairs, scanned over orientations (and positions)
# ---------------------------------------------------------------------------------------------
class TargetedMode(Mode):
    """Predicted pairs of one family (config [space], [cosmology], [observer]) scanned over sky
    orientations (:mod:`.targeted`), a task per observer position."""

    name = "targeted"

    def tasks(self, ctx):
        return list(range(len(self.positions(ctx))))

    def positions(self, ctx) -> list:
        s = ctx.settings
        if s.positions:
            return [list(map(float, p)) for p in s.positions]
        obs = ctx.scenario.observer
        if obs.geometry == "flat":
            return [list(map(float, obs.point[:3]))]
        return [list(map(float, obs.point))]

    def levels(self, ctx) -> list[Level]:
        s = ctx.settings
        return centre_levels(s.orientation_nside, s.nside_work, np.radians(s.fwhm_deg), s.level_smoothing)

    def run_task(self, ctx, key) -> dict:
        position = self.positions(ctx)[key]
        pairs = tg.predicted_pairs(ctx, position)
        work = new_work()
        if not pairs:
            return {"position": position, "pairs": [], "S_combined": None, "n_pairs_used": 0, "euler_deg": None,
                    "work": work, "levels": []}
        levels = self.levels(ctx)
        best, info = tg.scan_orientations(ctx, levels, pairs, work)
        # final values at the best orientation
        sv, f, ok = tg.evaluate(ctx, levels[-1], pairs, best[:1], new_work())
        comb, used = tg.combine(sv, f, ok)
        R = tg.rotations(best[:1])[0]
        return {"position": position, "pairs": tg.pair_records(pairs, R, sv[0], f[0], ok[0], levels[-1].nside),
                "S_combined": float(comb[0]) if used[0] else None, "n_pairs_used": int(used[0]),
                "euler_deg": [float(v) for v in np.degrees(best[0])], "work": work, "levels": info,
                "rotation": R.tolist()}

    def summarise(self, ctx, results: dict) -> dict:
        work = total_work(results.values())
        valid = [r for r in results.values() if r["S_combined"] is not None]
        if not valid:
            return {"candidates": [], "s_max": [], "work": work, "targeted": {"positions": list(results.values())}}
        best = max(valid, key=lambda r: r["S_combined"])
        cands, s_max = tg.targeted_candidates(ctx, best)
        return {"candidates": cands, "s_max": s_max, "work": work,
                "targeted": {"family": ctx.scenario.space.family, "best_position": best["position"],
                             "best_euler_deg": best["euler_deg"], "S_combined": best["S_combined"],
                             "n_pairs": len(best["pairs"]), "n_pairs_used": best["n_pairs_used"],
                             "positions": [{k: r.get(k) for k in ("position", "S_combined", "n_pairs_used",
                                                                  "euler_deg")} for r in results.values()]}}
