"""Search strategies behind one interface: antipodal, all-pairs and targeted.

A mode turns a :class:`~topology.search.context.SearchContext` (prepared map, settings) into
tasks (radii, or observer positions for ``targeted``), runs one task at a time
(:meth:`Mode.run_task`, through :func:`topology.execution.run_tasks`, which stores each result
so that an interrupted search resumes) and summarises the task results. Task results are plain
JSON-able dicts.

Antipodal and all-pairs search each radius on a coarse centre grid of their own, then refine
the pairs it passes on level by level (:mod:`.hierarchy`). Full sky: every antipodal pair c, -c
(antipodal), or the blocked harmonic kernel of :mod:`.allpairs` over all pairs (all-pairs); the
``n_keep`` best distinct pairs go on. Cut sky: every antipodal pair (antipodal), or the best
``n_partners`` partners of every centre by the masked S_eq (allpairs.masked_partners), go on,
and the first refinement evaluates the finer pixels inside their coarse pixels before keeping
the ``n_keep`` best: on a cut sky a true pair over a short overlap ranks first among the
partners of its own centres but below thousands of chance pairs of the sky at the coarse
smoothing and centre offsets. Targeted scans the orientations of one family's predicted pairs
(:mod:`.targeted`). Every list of candidates is ordered by the ranking score S_eq
(statistic.rank_score), S and the jointly kept fraction ("overlap") kept as fields.

What the search can miss (measured in benchmarks/SEARCH_VALIDATION.md, pinned by
tests/test_search_skies.py):

(1) pairs whose circles keep less than half of their points, or whose jointly kept fraction at
    the matching phases is below ``min_overlap``: their masked S is not defined or not searched;
(2) pairs whose centres are closer than ``min_separation_deg`` (test_what_refinement_misses);
(3) weak pairs at the sensitivity limit: on the validation set (flat E1-E10 and spherical spaces
    with generic observers, |b| < 15-20 deg cuts or point-source holes) the figures of
    benchmarks/SEARCH_VALIDATION.md.
"""

from __future__ import annotations

import numpy as np

from . import statistic as st
from . import targeted as tg
from .allpairs import allpairs_top, masked_partners, twist_count
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
        cands, work, skipped, info, final_nside = self.final_candidates(ctx, key)
        if cands is None:  # no usable pair at this radius (e.g. every S undefined): no candidates
            return {"radius_deg": key, "candidates": [], "s_max": {}, "work": work, "skipped_circles": skipped,
                    "levels": info}
        return {"radius_deg": key, **self.report(ctx, np.radians(key), cands, final_nside), "work": work,
                "skipped_circles": skipped, "levels": info}

    def final_candidates(self, ctx, key) -> tuple:
        """(the last level's Candidates or None when no pair is usable, work, circles skipped, one
        record per level, the last level's N_side) of radius ``key`` (deg)."""
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
        nothing = (None, work, skipped, info, levels[-1].nside)
        m_cut = st.effective_m_cut(circ.coeffs[valid] if valid.any() else circ.coeffs, s.m_max, s.power_fraction)
        if valid.sum() < (1 if self.antipodal else 2):
            return nothing
        cands = self.coarse(ctx, circ, valid, m_cut, work)
        info.append({"nside": lv.nside, "fwhm_deg": float(np.degrees(lv.fwhm)), "m_cut": int(m_cut),
                     "kept": len(cands)})
        if len(cands) == 0:
            return nothing
        # many coarse candidates (the best partners of every centre on a cut sky): the first
        # refinement evaluates only the finer pixels inside each candidate's coarse pixels
        inside = len(cands) > 4 * s.n_keep
        # refinement levels ------------------------------------------------------------------
        for depth, (prev, lv) in enumerate(zip(levels[:-1], levels[1:])):
            keep = max(8, s.n_keep >> depth)  # fewer candidates once the smoothing is close to FWHM
            cands = refine(ctx, lv, prev, radius, cands, work, keep, self.antipodal, inside=inside and depth == 0,
                           last=depth == len(levels) - 2)
            info.append({"nside": lv.nside, "fwhm_deg": float(np.degrees(lv.fwhm)), "m_cut": int(cands.m_cut),
                         "kept": len(cands)})
            if len(cands) == 0:
                return nothing
        if cands.s is None:  # a single level: evaluate the coarse candidates exactly
            cands = refine(ctx, levels[0], None, radius, cands, work, s.n_keep, self.antipodal)
        return cands, work, skipped, info, levels[-1].nside

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
        cands.sort(key=lambda e: -e["S_eq"])  # the ranking score that decides detection
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
        cands.sort(key=lambda c: -c["S_eq"])  # one ranking everywhere: S_eq (S and overlap stay as fields)
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
        if bool((~circ.full[first]).any() or (~circ.full[anti[first]]).any()):
            # a cut sky: every antipodal pair goes on (a few thousand); the next level evaluates the
            # finer pixels inside each and keeps the best, since at this level's smoothing and
            # centre offsets a true pair over a short overlap ranks below many chance pairs
            c = circ.centers[first]
            return Candidates(np.vstack([c, c]), -np.vstack([c, c]),
                              np.repeat([st.SAME, st.OPPOSITE], first.size))
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
        best distinct ones. With cut circles: the ``n_partners`` best partners of every centre
        by the exact masked S_eq on coarse samples (allpairs.masked_partners), all passed on; the
        next level evaluates the finer pixels inside their coarse pixels and keeps the best."""
        import healpy as hp

        s = ctx.settings
        if bool((~circ.full[valid]).any()):
            ia, ib, orient = masked_partners(circ, valid, m_cut, s.n_partners, np.radians(s.min_separation_deg),
                                             s.min_overlap, s.kernel_mem_mb * (1 << 20), work)
            return Candidates(circ.centers[ia], circ.centers[ib], orient)
        a = st.weighted(circ.coeffs, m_cut)
        ia, ib, orient, sv = allpairs_top(a, circ.centers, valid, twist_count(m_cut, s.twist_oversample),
                                          s.n_pool * s.n_keep, np.radians(s.min_separation_deg),
                                          s.kernel_mem_mb * (1 << 20), work, m_cut)
        reach = hp.nside2resol(hp.npix2nside(len(circ)))
        keep = []
        for o in (st.SAME, st.OPPOSITE):
            sel = np.flatnonzero(orient == o)
            keep.append(sel[distinct(circ.centers[ia[sel]], circ.centers[ib[sel]], sv[sel], s.n_keep, reach)])
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
            return {"position": position, "pairs": [], "S_combined": None, "Z_combined": None, "n_pairs_used": 0,
                    "euler_deg": None,
                    "work": work, "levels": []}
        levels = self.levels(ctx)
        evaluate = self.evaluator(ctx, pairs)
        best, info = tg.scan_orientations(ctx, levels, pairs, work, evaluate)
        # final values at the best orientation
        sv, f, ok = evaluate(ctx, levels[-1], pairs, best[:1], new_work())
        comb, used = tg.combine(sv, f, ok)
        R = tg.rotations(best[:1])[0]
        return {"position": position, "pairs": tg.pair_records(pairs, R, sv[0], f[0], ok[0], levels[-1].nside),
                "S_combined": float(comb[0]) if used[0] else None,
                "Z_combined": float(tg.orientation_score(comb, used)[0]) if used[0] else None,
                "n_pairs_used": int(used[0]),
                "euler_deg": [float(v) for v in np.degrees(best[0])], "work": work, "levels": info,
                "rotation": R.tolist()}

    def evaluator(self, ctx, pairs):
        """The function of the pair values (S, f, usable) per orientation: :func:`.targeted.evaluate`."""
        return tg.evaluate

    def summarise(self, ctx, results: dict) -> dict:
        work = total_work(results.values())
        valid = [r for r in results.values() if r["S_combined"] is not None]
        if not valid:
            return {"candidates": [], "s_max": [], "work": work, "targeted": {"positions": list(results.values())}}
        best = max(valid, key=lambda r: r["Z_combined"])      # Stouffer's Z ranks positions as it ranks orientations
        cands, s_max = tg.targeted_candidates(ctx, best)
        return {"candidates": cands, "s_max": s_max, "work": work,
                "targeted": {"family": ctx.scenario.space.family, "best_position": best["position"],
                             "best_euler_deg": best["euler_deg"], "S_combined": best["S_combined"],
                             "Z_combined": best["Z_combined"],
                             "n_pairs": len(best["pairs"]), "n_pairs_used": best["n_pairs_used"],
                             "positions": [{k: r.get(k) for k in ("position", "S_combined", "Z_combined", "n_pairs_used",
                                                                  "euler_deg")} for r in results.values()]}}
