"""Searching the E-mode map and the combined T + E statistic (``--field E`` / ``--field T+E``).

``E``: the E map of the file's Q, U (:func:`topology.maps.emode.emode_sky`: the search's mask,
or a separate polarisation mask, apodised; E searched over the interior of the taper) is
searched like a temperature map, by the same modes and engine.

``T+E``: both maps are prepared alike (working N_side, FWHM, filter) and each search step uses
the pair statistic of :func:`topology.search.combined.combined_rank_twist`,

    S_TE,eq = (w_T S_eq,T + w_E S_eq,E) / (w_T + w_E),    w_X = rho_X / sigma_X^2,

at one twist and orientation shared by the two maps (one holonomy per pair).

* Radius scan (antipodal, all-pairs): the hierarchy of :mod:`.modes` runs on T and on E alone,
  and the last level's candidates of both (every pair each keeps, not only the reported ones)
  are evaluated with S_TE,eq at the finest level; S_max is the best of them. A pair that ranks
  among the last level's candidates of neither map alone is not seen (a pair weak in both and
  strong only jointly); the null calibration of S_max uses the same procedure, so thresholds
  are consistent with it.
  The record of every radius also keeps each map's own S_max (the best S_eq of its last level,
  what a search of that map alone gives): ``polarisation.s_max_by_field`` of the output.
* Targeted: the orientation scan of :mod:`.targeted` with each predicted pair's value
  S_TE,eq (usable when usable in both maps), averaged over the pairs as for T.

The weights (what they come from; the choice is ours and stated here):

* sigma_X: the spread of S over chance pairs on the map itself at that radius and at the
  finest level's smoothing (:func:`topology.search.combined.chance_spread`: 2000 pairs of
  distinct circles of the coarse centre grid, kept fraction >= min_kept, centres > 0.2 rad
  apart, zero twist; seeded by the radius), so a map's noise and filter enter through it;
* rho_X: the expected S of a true pair in map X, ``[search] rho_t`` (default 1: the matched
  Sachs-Wolfe temperature, exact without noise) and ``rho_e`` (default 0.75: the lower end of
  the correlation of the polarisation at matched points of noise-free torus skies found by
  Riazuelo et al. 2006, Phys. Rev. D 73, 043504, from memory; see topology.maps.emode). Not yet
  measured for this tool's filter and noise: that needs polarised skies of a multiply connected
  space. When the map's noise is known, the signal fraction of the filtered circles
  (C_signal / (C_signal + C_noise)) lowers both; set rho_t, rho_e accordingly.

A weight is 0 when its rho is 0 (the map is then ignored); sigma_X not measurable (fewer than 10
usable chance pairs) falls back to the other map's spread, with the record saying so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError
from . import statistic as st
from . import targeted as tg
from .combined import chance_spread, combined_rank_twist
from .context import SearchContext, add_work, total_work
from .hierarchy import Candidates
from .modes import AllPairsMode, AntipodalMode, Mode, TargetedMode
from .sampling import CircleSet, centre_grid, sample_circles

FIELDS = ("E", "T+E")   # reserved values of --field / [[maps]] field
SIGMA_SEED = 190_000    # seed of the chance pairs of sigma_X: SIGMA_SEED + radius in millidegrees
N_CHANCE = 2000


def polarised_field(field) -> str | None:
    """"E" or "T+E" when ``field`` names a polarised search (case-insensitive), else None."""
    if isinstance(field, str) and field.strip().upper() in FIELDS:
        return field.strip().upper()
    return None


@dataclass(frozen=True)
class PolarisedInput:
    """What a polarised search needs beside the temperature map: ``field`` ("E" or "T+E"), the E
    map and its mask (SkyMaps, :func:`topology.maps.emode.emode_sky`) and ``info`` for the
    output (convention, columns, apodisation, polarisation mask)."""

    field: str
    e: object
    e_mask: object = None
    info: dict = field(default_factory=dict)


@dataclass
class CombinedContext:
    """The two contexts of a T + E search (same settings), and the weights' rho."""

    t: SearchContext
    e: SearchContext
    rho_t: float
    rho_e: float

    @property
    def settings(self):
        return self.t.settings

    @property
    def scenario(self):
        return self.t.scenario


def _subset(c: CircleSet, idx) -> CircleSet:
    return CircleSet(c.centers[idx], c.radius, c.samples[idx], c.kept[idx], c.coeffs[idx])


def _spread(ctx: SearchContext, lv, radius: float, seed: int) -> tuple[float, int]:
    """(sigma of S over chance pairs, number of usable circles) of one map at ``radius``."""
    s = ctx.settings
    grid = centre_grid(s.centre_nside)
    circ = sample_circles(ctx.level_map(lv), grid, radius, ctx.n_phi(radius, lv), s.m_max, ctx.level_mask(lv))
    valid = np.flatnonzero(circ.kept_fraction >= s.min_kept)
    if valid.size < 10:
        return float("nan"), int(valid.size)
    sub = _subset(circ, valid)
    m_cut = st.effective_m_cut(sub.coeffs, s.m_max, s.power_fraction)
    return chance_spread(sub, m_cut, N_CHANCE, seed=seed, min_overlap=s.min_overlap), int(valid.size)


def radius_weights(ctx: CombinedContext, radius: float, lv) -> dict:
    """{radius_deg, rho_t, rho_e, sigma_t, sigma_e, w_t, w_e} at ``radius`` (rad) on level ``lv``'s
    maps (module docstring)."""
    deg = float(np.degrees(radius))
    seed = SIGMA_SEED + int(round(deg * 1000))
    sig_t, _ = _spread(ctx.t, lv, radius, seed)
    sig_e, _ = _spread(ctx.e, lv, radius, seed)
    rec = {"radius_deg": deg, "rho_t": float(ctx.rho_t), "rho_e": float(ctx.rho_e),
           "sigma_t": sig_t if math.isfinite(sig_t) else None, "sigma_e": sig_e if math.isfinite(sig_e) else None}
    if not (sig_t > 0) and not (sig_e > 0):
        sig_t = sig_e = 1.0
        rec["fallback"] = "no usable chance pairs in either map: sigma_T = sigma_E = 1"
    elif not (sig_t > 0):
        sig_t = sig_e
        rec["fallback"] = "sigma_T not measurable: sigma_E used"
    elif not (sig_e > 0):
        sig_e = sig_t
        rec["fallback"] = "sigma_E not measurable: sigma_T used"
    rec["w_t"] = max(ctx.rho_t, 0.0) / sig_t ** 2
    rec["w_e"] = max(ctx.rho_e, 0.0) / sig_e ** 2
    return rec


class CombinedPairMode(Mode):
    """Antipodal or all-pairs in T + E (module docstring): ``base`` is the temperature mode."""

    def __init__(self, base: Mode):
        self.base = base
        self.name = base.name

    def tasks(self, ctx):
        return self.base.tasks(ctx.t)

    def run_task(self, ctx: CombinedContext, key) -> dict:
        s = ctx.settings
        radius = np.radians(key)
        c_t, work_t, skip_t, info, nside = self.base.final_candidates(ctx.t, key)
        c_e, work_e, skip_e, _, _ = self.base.final_candidates(ctx.e, key)
        work = total_work([{"work": work_t}, {"work": work_e}])
        lv = self.base.levels(ctx.t)[-1]
        weights = radius_weights(ctx, radius, lv)
        skipped = max(skip_t, skip_e)
        # each map's own S_max at this radius: the best S_eq of its last level, what a search of that
        # map alone gives (the same hierarchy), so a run calibrates T, E and T + E on the same skies
        fields = {"radius_deg": key, "T": _best_rank(c_t), "E": _best_rank(c_e)}
        parts = [c for c in (c_t, c_e) if c is not None and len(c)]
        if not parts:
            return {"radius_deg": key, "candidates": [], "s_max": {}, "work": work, "skipped_circles": skipped,
                    "levels": info, "weights": weights, "fields": fields}
        ca = np.vstack([c.center_a for c in parts])
        cb = np.vstack([c.center_b for c in parts])
        orient = np.concatenate([c.orientation for c in parts])
        key_rows = np.round(np.hstack([ca, cb, orient[:, None]]), 9)
        _, first = np.unique(key_rows, axis=0, return_index=True)
        ca, cb, orient = ca[first], cb[first], orient[first]
        k = orient.size
        centers = np.vstack([ca, cb])
        n_phi = ctx.t.n_phi(radius, lv)
        circ_t = sample_circles(ctx.t.level_map(lv), centers, radius, n_phi, s.m_max, ctx.t.level_mask(lv))
        circ_e = sample_circles(ctx.e.level_map(lv), centers, radius, n_phi, s.m_max, ctx.e.level_mask(lv))
        ok = (circ_t.kept_fraction >= s.min_kept) & (circ_e.kept_fraction >= s.min_kept)
        ok = ok[:k] & ok[k:]
        ia, ib = np.flatnonzero(ok), k + np.flatnonzero(ok)
        m_t = st.effective_m_cut(circ_t.coeffs, s.m_max, s.power_fraction)
        m_e = st.effective_m_cut(circ_e.coeffs, s.m_max, s.power_fraction)
        res = combined_rank_twist(circ_t, circ_t, circ_e, circ_e, ia, ib, weights["w_t"], weights["w_e"],
                                  orient[ok], m_cut_t=m_t, m_cut_e=m_e, min_overlap=s.min_overlap)
        add_work(work, 2 * ia.size, n_phi, max(m_t, m_e))
        cands = Candidates(ca[ok], cb[ok], orient[ok], res["s"], res["tau"], res["s_eq"],
                           np.minimum(res["f_t"], res["f_e"]), max(m_t, m_e))
        rep = self.base.report(ctx.t, radius, cands, nside)
        return {"radius_deg": key, **rep, "work": work, "skipped_circles": skipped, "levels": info,
                "weights": weights, "fields": fields}

    def summarise(self, ctx, results: dict) -> dict:
        out = self.base.summarise(ctx.t, results)
        out["weights"] = [results[k]["weights"] for k in sorted(results)]
        out["fields_s_max"] = [results[k].get("fields") for k in sorted(results)]
        return out


def _best_rank(c) -> float | None:
    """The largest finite ranking score S_eq of a level's Candidates (None when there is none)."""
    if c is None or not len(c) or c.rank is None:
        return None
    r = np.asarray(c.rank, dtype=float)
    r = r[np.isfinite(r)]
    return float(r.max()) if r.size else None


class CombinedTargetedMode(TargetedMode):
    """The targeted scan in T + E: each predicted pair's S_TE,eq (module docstring). The pair
    records carry S = S_eq = S_TE,eq and ``overlap`` 1 (the fractions are folded into it)."""

    def run_task(self, ctx, key) -> dict:
        self._weights = []
        out = super().run_task(ctx, key)
        out["weights"] = getattr(self, "_weights", [])
        return out

    def evaluator(self, ctx: CombinedContext, pairs):
        lv = self.levels(ctx)[-1]
        radii = sorted({round(float(p.radius), 12) for p in pairs})
        table = {r: radius_weights(ctx, r, lv) for r in radii}
        self._weights = [table[r] for r in radii]
        w_t = np.array([table[round(float(p.radius), 12)]["w_t"] for p in pairs])
        w_e = np.array([table[round(float(p.radius), 12)]["w_e"] for p in pairs])

        def evaluate(c, lv, pairs, euler, work):
            st_, ft, okt = tg.evaluate(c.t, lv, pairs, euler, work)
            se, fe, oke = tg.evaluate(c.e, lv, pairs, euler, work)
            ok = okt & oke
            eq = (w_t * st.rank_score(np.where(ok, st_, 0.0), ft) + w_e * st.rank_score(np.where(ok, se, 0.0), fe)) \
                / (w_t + w_e)
            return np.where(ok, eq, 0.0), np.ones_like(eq), ok

        return evaluate

    def summarise(self, ctx, results: dict) -> dict:
        out = super().summarise(ctx.t if isinstance(ctx, CombinedContext) else ctx, results)
        out["weights"] = [w for k in sorted(results) for w in results[k].get("weights", [])]
        return out


def polarised_input(path, field: str, settings, *, mask=None, pol_mask=None, convention: str | None = None,
                    convention_from: str = "convention", ordering_from: str | None = None, pol_mask_name=None,
                    columns=None):
    """(temperature SkyMap I, :class:`PolarisedInput`) of a polarised FITS map: I, Q, U read by
    :func:`topology.maps.read_iqu` (the Q/U convention from the header's POLCCONV or
    ``convention``, never guessed; ``convention_from`` names where the user gives it), the E map
    and mask by :func:`topology.maps.emode.emode_sky` with ``pol_mask`` (default ``mask``; mask
    SkyMaps) apodised by ``settings.pol_apod_deg``."""
    from ..maps import check_resolution, read_iqu
    from ..maps.emode import emode_sky
    from ..maps.read import ORDERING_FROM

    name = polarised_field(field)
    if name is None:
        raise InputError(f"is not a polarised field ({', '.join(FIELDS)}), got {field!r}", "field")
    pm = read_iqu(path, columns=columns, convention=convention, ordering=settings.ordering,
                  ordering_from=ordering_from or ORDERING_FROM, convention_from=convention_from)
    check_resolution(pm.i, settings.nside_work)
    used = pol_mask if pol_mask is not None else mask
    e, e_mask = emode_sky(pm, used, nside_work=settings.nside_work, apod_deg=settings.pol_apod_deg,
                          threshold=settings.mask_threshold)
    info = {"convention": pm.convention, "columns": [str(c) for c in pm.columns], "apod_deg": float(settings.pol_apod_deg),
            "pol_mask": pol_mask_name if pol_mask is not None else ("the search's mask" if mask is not None else None),
            "nside_e": int(e.nside), "e_method": "harmonic E of the apodised-masked Q, U (topology.maps.emode); "
                                                 "searched where the apodised weight is 1"}
    return pm.i, PolarisedInput(name, e, e_mask, info)


def combined_mode(name: str) -> Mode:
    """The T + E strategy of a search mode name."""
    if name == "targeted":
        return CombinedTargetedMode()
    return CombinedPairMode({"antipodal": AntipodalMode, "all-pairs": AllPairsMode}[name]())


def weight_note(weights: list) -> str:
    """One line on the weights used (range over radii)."""
    if not weights:
        return ""
    wt = np.array([w["w_t"] for w in weights])
    we = np.array([w["w_e"] for w in weights])
    frac = we / np.maximum(wt + we, 1e-300)
    return (f"T+E weights w = rho / sigma^2 (rho_T {weights[0]['rho_t']:g}, rho_E {weights[0]['rho_e']:g}, sigma "
            f"from chance pairs): E's share {frac.min():.2f}-{frac.max():.2f} over {len(weights)} radii")


