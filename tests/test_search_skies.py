"""The search on the Sachs-Wolfe skies of topology.skies (flat E1, E2, E3, E7 and spherical
dodecahedral, L(8,3)): every predicted pair is found at its radius; on the observed skies (1 deg
beam, white noise, Galactic band cut) every pair with more than half of each circle unmasked is
found (the antipodal pairs by the antipodal mode, the others by all-pairs, within the limits
the masked test states)."""

import functools
import math

import healpy as hp
import numpy as np
import pytest

from test_search_modes import match
from topology import geometry as geo
from topology.circles import circle_points, predict_circles
from topology.cosmology import Cosmology, omega_k_for_ratio
from topology.maps import as_skymap
from topology.search import SearchSettings, search_sky
from topology.search import modes as md
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
        m = flat_sky(space, obs, COSMO, lmax=120, nside=64, seed=3).map
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


# ---------------------------------------------------------------------------------------------
# observed skies: 1 deg beam, white noise at S/N 10 per smoothed pixel, |b| < 20 deg cut
# ---------------------------------------------------------------------------------------------
B_CUT = 20.0
PHI = 2 * np.pi * np.arange(720) / 720


def _kept_points(points):
    return np.abs(points[..., 2]) >= math.sin(math.radians(B_CUT))


def _fractions(p):
    """Unmasked fraction of circle A, of circle B, and of A's points whose matching point on B
    (the contract T_A(phi) = T_B(s phi + tau)) is unmasked too: direct geometry, 720 points."""
    ka = _kept_points(circle_points(p.center_a, p.radius, PHI))
    kb = _kept_points(circle_points(p.center_b, p.radius, p.orientation * PHI + p.twist))
    return ka.mean(), kb.mean(), (ka & kb).mean()


def _observed(name):
    space, obs, chi, m = _sky(name)
    lmax = 3 * 64 - 1
    t = hp.alm2map(hp.almxfl(hp.map2alm(m, lmax=lmax, iter=3), hp.gauss_beam(math.radians(1.0), lmax=lmax)), 64,
                   lmax=lmax)
    t = t + np.random.default_rng(9).standard_normal(t.size) * t.std() / 10.0
    z = hp.pix2vec(64, np.arange(t.size))[2]
    return space, obs, chi, t, (np.abs(z) >= math.sin(math.radians(B_CUT))).astype(float)


# all-pairs pairs the N_side 16 coarse level ranks below 64 chance pairs on these skies (jointly kept
# fraction in brackets): E2 39.7 deg (0.64), E3 62.7 (0.33), E7 62.2 (0.43) and 22.2 (0.41)
COARSE_MISSES = {("E2", 39.7), ("E3", 62.7), ("E7", 62.2), ("E7", 22.2)}
MASKED = dict(fwhm_deg=2.0, nside_work=32, m_max=48, centre_nside=16, n_report=8)


def _reported_match(out, p):
    want = "same" if p.orientation > 0 else "opposite"
    r = math.degrees(p.radius)
    found = [c for c in out["reported"] if abs(c["radius_deg"] - r) < 1e-3 and c["orientation"] == want]
    return [(match(c, p), c["S"]) for c in found]


@pytest.mark.parametrize("name", ["E1", "E2", "E3", "E7", "L(8,3)", "dodecahedral"])
def test_masked_noisy_sw_skies(name, monkeypatch):
    # Every predicted pair of radius >= 15 deg with more than half of each circle unmasked and at
    # least 25% of its points kept on both circles is found, except the coarse-level misses
    # listed in COARSE_MISSES: reported at its radius with both centres within 1 deg, the twist
    # within 2 deg, the right orientation and S >= 0.9 (a true pair's S is 0.906-0.994 here), and
    # the best candidate at its radius is a predicted pair. The masked S is defined only where at
    # least min_overlap = 25% of the samples are kept on both circles at the matching phases, so
    # pairs with less jointly kept are out of reach (e.g. E1 36.9 deg: 56% of each circle, 11%
    # jointly). Antipodal pairs are searched by the antipodal mode, the others by all-pairs, whose
    # coarse level (N_side 16 centres, 4.4 deg smoothing) passes on the 64 best distinct pairs;
    # for all-pairs the check is that every pair the coarse level passes on is found (none is
    # lost to side lobes, cut-pair normalisation or ranking) and that the pairs it does not pass
    # on are exactly among the measured misses (benchmarks/SEARCH_VALIDATION.md, item 1).
    space, obs, chi, t, mask = _observed(name)
    pairs = [p for p in predict_circles(space, obs, chi) if math.degrees(p.radius) >= 15
             and np.degrees(np.arccos(np.clip(p.center_a @ p.center_b, -1, 1))) > 10]
    visible = [p for p in pairs if min(_fractions(p)[:2]) > 0.5 and _fractions(p)[2] >= 0.25]
    assert visible
    back = [p.center_a @ p.center_b < -math.cos(math.radians(0.5)) for p in visible]
    antipodal = [p for p, a in zip(visible, back) if a]
    others = [p for p, a in zip(visible, back) if not a]

    passed = {}  # radius (deg) -> centre pairs the all-pairs coarse level passes on
    coarse = md.AllPairsMode.coarse

    def recording(self, ctx, circ, valid, m_cut, work):
        picked = coarse(self, ctx, circ, valid, m_cut, work)
        passed[round(math.degrees(circ.radius), 4)] = (picked.center_a, picked.center_b, picked.orientation)
        return picked

    monkeypatch.setattr(md.AllPairsMode, "coarse", recording)
    step = math.degrees(hp.nside2resol(16))
    for mode, group in (("antipodal", antipodal), ("all-pairs", others)):
        if not group:
            continue
        radii = tuple(sorted({round(math.degrees(p.radius), 4) for p in group}))
        out = search_sky(as_skymap(t), as_skymap(mask), SearchSettings(mode=mode, radii_deg=radii, **MASKED))
        for p in group:
            r = round(math.degrees(p.radius), 4)
            if mode == "all-pairs":
                ca, cb, o = passed[r]
                d = [min(max(_deg(a, p.center_a), _deg(b, p.center_b)), max(_deg(a, p.center_b), _deg(b, p.center_a)))
                     for a, b, oo in zip(ca, cb, o) if oo == (0 if p.orientation > 0 else 1)]
                seen = min(d) < step
                # a pair the coarse level does not pass on is one of the measured misses
                # (benchmarks/SEARCH_VALIDATION.md, item 1), all with < 70% jointly kept
                assert seen or ((name, round(r, 1)) in COARSE_MISSES and _fractions(p)[2] < 0.7), (name, r, min(d))
                if not seen:
                    continue
            errs = _reported_match(out, p)
            assert any(d < 1.0 and dt < 2.0 and s >= 0.9 for (d, dt), s in errs), (name, mode, r, _fractions(p), errs)
            _check(out, pairs, r)


def _deg(u, v):
    return math.degrees(math.atan2(np.linalg.norm(np.cross(u, v)), float(np.dot(u, v))))
