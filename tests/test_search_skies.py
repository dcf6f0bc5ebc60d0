"""The search on the full Sachs-Wolfe skies of topology.skies (flat E1, E2, E3, E7 and spherical
dodecahedral, L(8,3)): every predicted pair is found at its radius. Masked, noisy skies:
tests/test_search_completeness.py."""

import functools
import math

import healpy as hp
import numpy as np
import pytest

from test_search_modes import match
from topology import geometry as geo
from topology.circles import predict_circles
from topology.cosmology import Cosmology, omega_k_for_ratio
from topology.maps import as_skymap
from topology.search import SearchSettings, search_sky
from topology.skies.flat import flat_sky
from topology.skies.spherical import spherical_sky
from topology.spaces import build_space
from topology.spaces.spherical import make_dodecahedral, make_lens

COSMO = Cosmology()
FLAT = {"E1": [1.6, 1.6, 1.6], "E2": [1.55, 1.7, 0.8], "E3": [1.6, 1.6, 0.9], "E7": [1.5, 1.6, 0.9]}
SPHERICAL = {"L(8,3)": (lambda: make_lens({"p": 8, "q": 3}), [1.0, 0.2, 0.15, -0.1], 0.55),
             "dodecahedral": (lambda: make_dodecahedral({}), [1.0, 0.2, 0.1, 0.3], 0.4)}


@functools.lru_cache(maxsize=None)
def _sky(name):
    """(space, observer, chi, alm, lmax, map N_side 64) of the family's SW sky, built once per run."""
    if name in FLAT:
        space = build_space({"family": name, "lengths": FLAT[name]})
        obs = geo.Observer.make("flat", [0.12, -0.05, 0.03], geo.euler_zyz(0.3, 0.6, -0.2))
        # the lattice field alone: the circle identity holds at every multipole it has (the
        # isotropic complement of the modes beyond the cut, topology.skies.flat_cut, carries no
        # matched circles and lowers S at the top multipoles, as the modes it stands for would)
        m = flat_sky(space, obs, COSMO, lmax=120, nside=64, seed=3, complete=False).map
        return space, obs, 1.0, m
    make, pos, ratio = SPHERICAL[name]
    space = make()
    cosmo = COSMO.with_omega_k(omega_k_for_ratio(COSMO, ratio, -1))
    obs = geo.Observer.make("spherical", pos, geo.euler_zyz(0.3, 1.1, -0.7))
    sky = spherical_sky(space, obs, cosmo, lmax=95, nside=32, kmax=100, seed=7)
    return space, obs, cosmo.chi_rec_over_curvature_radius, hp.alm2map(sky.alm, 64, lmax=sky.lmax)


def _check(out, pairs, radius_deg, d_max=1.0, t_max=2.0, s_min=0.9):
    entries = [e for e in out["s_max"] if abs(e["radius_deg"] - radius_deg) < 1e-4]
    best = max(entries, key=lambda e: e["S_max"])["best"]
    here = [p for p in pairs if abs(math.degrees(p.radius) - radius_deg) < 1e-4]
    d, dt = min((match(best, p) for p in here), key=lambda e: e[0])
    p = min(here, key=lambda q: match(best, q)[0])
    assert best["orientation"] == ("same" if p.orientation > 0 else "opposite")
    assert d < d_max and dt < t_max and best["S"] >= s_min, (radius_deg, d, dt, best["S"])


@pytest.mark.parametrize("family", ["E1", "E2", "E3", "E7"])
def test_flat_sw_skies(family):
    # check: Cornish, Spergel & Starkman 1998/2004 (matched circles, S = 1 on exact matches) on the
    # SW skies of topology.skies.flat; pairs from topology.circles.predict_circles
    space, obs, _, m = _sky(family)
    pairs = [p for p in predict_circles(space, obs, 1.0) if math.degrees(p.radius) >= 15
             and np.degrees(np.arccos(np.clip(p.center_a @ p.center_b, -1, 1))) > 10]
    radii = sorted({float(math.degrees(p.radius)) for p in pairs}, reverse=True)[:2]
    out = search_sky(as_skymap(m), None, SearchSettings(mode="all-pairs", radii_deg=tuple(radii), fwhm_deg=2.0,
                                                       nside_work=64, m_max=48, centre_nside=16))
    for r in radii:
        _check(out, pairs, r)


@pytest.mark.parametrize("name", ["L(8,3)", "dodecahedral"])
def test_spherical_sw_skies(name):
    # check: Cornish, Spergel & Starkman 1998 (spherical matched circles, cos alpha =
    # tan(d/2)/tan(chi)) on the SW skies of topology.skies.spherical
    space, obs, chi, tmap = _sky(name)
    pairs = predict_circles(space, obs, chi)
    radii = sorted({float(math.degrees(p.radius)) for p in pairs if math.degrees(p.radius) >= 15})[:1]
    out = search_sky(as_skymap(tmap), None, SearchSettings(mode="all-pairs", radii_deg=tuple(radii), fwhm_deg=2.0,
                                                          nside_work=64, m_max=48, centre_nside=16))
    for r in radii:
        _check(out, pairs, r)
