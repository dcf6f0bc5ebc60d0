"""What every search mode works on: the prepared map and settings (:class:`SearchContext`), the
levels of its grids (:class:`Level`, :func:`centre_levels`), the count of the work done and the
record of one candidate pair in the search output.

Levels: centre grids (orientation grids for ``targeted``) are HEALPix grids of N_side c_0,
2 c_0, 4 c_0, ... up to the first whose pixel size is below FWHM / 4 (at most 4 N_side_work).
Level l is searched on the map smoothed to FWHM_l = max(FWHM, kappa * step_l) (kappa =
``level_smoothing``, default 1.2): a centre that is off by up to half a grid step moves the
circle by about as much, and smoothing to that scale keeps the true pair's S high enough to
rank among the best on a coarse grid.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .. import geometry as geo
from . import statistic as st


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


def new_work() -> dict:
    """The work counters of a task: circle pairs, pair-twists and pair-twist-modes evaluated."""
    return {"pairs": 0, "twists": 0, "modes": 0}


def add_work(work: dict, pairs, n_tau, m_cut) -> None:
    """Count ``pairs`` pairs evaluated at ``n_tau`` twists with ``m_cut`` modes each."""
    work["pairs"] += int(pairs)
    work["twists"] += int(pairs) * int(n_tau)
    work["modes"] += int(pairs) * int(n_tau) * int(m_cut)


def total_work(results) -> dict:
    """The work counters summed over task results."""
    work = new_work()
    for r in results:
        for k in work:
            work[k] += r["work"][k]
    return work


def candidate_record(ca, cb, radius, twist, orientation, s, level) -> dict:
    """One pair in the search output: centres (lon, lat deg), radius and twist (deg),
    orientation name (from the sign s = +-1), S and the N_side of the level that found it."""
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
