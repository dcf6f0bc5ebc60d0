"""How complete the circle search is: synthetic skies of known spaces, searched like data, and the
tally of predicted pairs found, by kept fraction and radius.

A validation sky is a Sachs-Wolfe sky of the project's generators (:mod:`topology.skies`) for
one space and observer, observed with a Gaussian beam and white noise (:func:`topology.skies.
instrument.observe`) and masked (a Galactic-latitude cut and/or point-source holes). Its
predicted pairs (:func:`topology.circles.predict_circles`) are sorted by what the mask leaves
of them, measured directly on the circles (720 points each):

* ``f_a``, ``f_b``: unmasked fraction of each circle;
* ``f_joint``: fraction of circle A's points whose matching point on B (the contract
  T_A(phi) = T_B(s phi + tau)) is unmasked too.

A pair is *in reach* of the all-pairs search when min(f_a, f_b) >= 0.5 and f_joint >= 0.3, of
the antipodal search (back-to-back pairs) when min(f_a, f_b) >= 0.5 and f_joint >= 0.25 (the
thresholds of the completeness goal). It is *found* when a reported candidate at its radius
has the right orientation, both centres within ``centre_tol_deg`` and the twist within
max(``twist_tol_deg``, 2 ``centre_tol_deg`` / sin(radius)) (a centre offset d moves the points of
a circle along it by up to about d / sin(radius)).

Chance level: each record carries the best reported S_eq at its radius that matches no predicted
pair; benchmarks/search_completeness.py (``--against``) also searches isotropic skies observed
and masked alike.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from . import geometry as geo

B_CUT_DEFAULT = 15.0  # deg


@dataclass(frozen=True)
class ValidationSky:
    """One sky of the validation set: a space, an observer and a mask."""

    name: str
    space: dict  # [space] table: family and parameters (lengths in chi_rec for flat spaces)
    position: tuple  # flat: 3 numbers (chi_rec); spherical: 4 numbers on S^3
    euler_deg: tuple  # z-y-z rotation of the sky frame
    ratio: float = 1.0  # spherical: chi_rec / R_c
    b_cut_deg: float = B_CUT_DEFAULT  # Galactic cut |b| < this (0: none)
    holes: int = 0  # point-source holes (0.5-1 deg radius, random positions)
    seed: int = 0


@dataclass(frozen=True)
class Observation:
    """The observed sky and mask of a :class:`ValidationSky`, with its predicted pairs."""

    sky: ValidationSky
    temperature: np.ndarray  # RING, microK
    mask: np.ndarray  # RING, 1 kept / 0 masked
    pairs: list  # topology.circles.CirclePair
    fractions: list  # (f_a, f_b, f_joint) per pair


@dataclass
class SearchSetup:
    """The validation's map and search settings (the completeness goal's: N_side 64 maps, 1 deg
    beam, 5 microK noise, working N_side 32, 2 deg smoothing, m_max 32)."""

    nside: int = 64
    beam_deg: float = 1.0
    noise_uk: float = 5.0
    lmax: int = 120
    search: dict = field(default_factory=lambda: dict(fwhm_deg=2.0, nside_work=32, m_max=32, centre_nside=16,
                                                      n_report=8))
    min_radius_deg: float = 15.0
    max_radius_deg: float = 80.0
    centre_tol_deg: float = 1.5
    twist_tol_deg: float = 6.0  # the twist of the best S_eq trades S against the kept fraction: a few degrees off


# ---------------------------------------------------------------------------------------------
# the validation set
# ---------------------------------------------------------------------------------------------
FLAT_SET = {  # lengths in chi_rec: several pairs of radius 15-75 deg for a generic observer
    "E1": [1.7, 1.5, 1.6], "E2": [1.55, 1.7, 0.8], "E3": [1.6, 1.6, 0.9], "E4": [1.6, 1.6, 0.9],
    "E5": [1.6, 1.6, 0.9], "E6": [1.2, 1.3, 1.4], "E7": [1.5, 1.6, 0.9], "E8": [1.5, 1.5, 0.9],
    "E9": [1.5, 1.6, 0.9], "E10": [1.5, 1.6, 0.9],
}
SPHERICAL_SET = [  # (space, chi_rec / R_c): strongly curved, so that generic observers see pairs of 15-75 deg
    ({"family": "lens", "p": 5, "q": 2}, 0.9), ({"family": "lens", "p": 7, "q": 2}, 1.0),
    ({"family": "lens", "p": 8, "q": 3}, 1.2), ({"family": "lens", "p": 9, "q": 4}, 0.8),
    ({"family": "prism", "m": 3}, 1.0), ({"family": "prism", "m": 4}, 1.0), ({"family": "dodecahedral"}, 0.6)]


def off_axis_position(rng: np.random.Generator, geometry: str, lengths=None) -> tuple:
    """A generic observer: flat, a random point of the box spanned by the lengths (off every
    symmetry axis with probability 1); spherical, a random point of S^3."""
    if geometry == "flat":
        return tuple(float(x) for x in (rng.uniform(-0.5, 0.5, 3) * np.asarray(lengths, dtype=float)))
    v = rng.standard_normal(4)
    return tuple(float(x) for x in v / np.linalg.norm(v))


VALIDATION_SEED = 20261203


def validation_set(n_seeds: int = 1, masks=(("cut", 15.0, 0), ("cut", 20.0, 0), ("holes", 0.0, 300)),
                   families=None, seed: int = VALIDATION_SEED) -> list[ValidationSky]:
    """Flat E1-E10 and lens, prism and dodecahedral skies with generic observers, each under the
    masks in turn (cycled over the skies), ``n_seeds`` observers and seeds per space; ``seed``
    draws the observers (another seed: another set of skies)."""
    rng = np.random.default_rng(seed)
    out = []
    specs = [({"family": f, "lengths": ls}, 1.0) for f, ls in FLAT_SET.items()] + list(SPHERICAL_SET)
    k = 0
    for rep in range(n_seeds):
        for space, ratio in specs:
            geometry = "flat" if space["family"].startswith("E") else "spherical"
            pos = off_axis_position(rng, geometry, space.get("lengths"))
            euler = tuple(float(x) for x in np.degrees(rng.uniform([0, 0, 0], [2 * np.pi, np.pi, 2 * np.pi])))
            kind, b, holes = masks[k % len(masks)]
            out.append(ValidationSky(f"{_label(space)}#{rep}", space, pos, euler, ratio,
                                     b if kind == "cut" else 0.0, holes, seed=(0 if seed == VALIDATION_SEED else seed * 1000) + 100 + k))
            k += 1
    if families is not None:  # a subset of the same skies
        out = [v for v in out if v.space["family"] in families or _label(v.space) in families]
    return out


def _label(space: dict) -> str:
    f = space["family"]
    if f == "lens":
        return f"L({space['p']},{space['q']})"
    if f == "prism":
        return f"D*_{space['m']}"
    return f


# ---------------------------------------------------------------------------------------------
# skies and masks
# ---------------------------------------------------------------------------------------------
def point_source_holes(nside: int, count: int, rng: np.random.Generator, r_min_deg: float = 0.5,
                       r_max_deg: float = 1.0) -> np.ndarray:
    """1/0 RING mask with ``count`` discs of radius uniform in [r_min, r_max] deg at random
    (isotropic) positions masked."""
    import healpy as hp

    m = np.ones(12 * nside * nside)
    v = rng.standard_normal((count, 3))
    v /= np.linalg.norm(v, axis=1, keepdims=True)
    radii = np.radians(rng.uniform(r_min_deg, r_max_deg, count))
    for c, r in zip(v, radii):
        m[hp.query_disc(nside, c, r, inclusive=False)] = 0.0
    return m


def sky_mask(sky: ValidationSky, nside: int) -> np.ndarray:
    from .skies.instrument import galactic_mask

    m = galactic_mask(nside, sky.b_cut_deg) if sky.b_cut_deg > 0 else np.ones(12 * nside * nside)
    if sky.holes:
        m = m * point_source_holes(nside, sky.holes, np.random.default_rng(sky.seed + 7919))
    return m


def _space_and_observer(sky: ValidationSky):
    from .cosmology import Cosmology, omega_k_for_ratio
    from .spaces import build_space

    space = build_space(dict(sky.space))
    rot = geo.euler_zyz(*np.radians(sky.euler_deg))
    cosmo = Cosmology()
    if space.geometry == "flat":
        return space, geo.Observer.make("flat", sky.position, rot), cosmo, 1.0
    cosmo = cosmo.with_omega_k(omega_k_for_ratio(cosmo, sky.ratio, -1))
    return space, geo.Observer.make("spherical", sky.position, rot), cosmo, cosmo.chi_rec_over_curvature_radius


def observe_sky(sky: ValidationSky, setup: SearchSetup) -> Observation:
    """The sky's observed map (beam, pixel window, noise) and mask, and its predicted pairs."""
    from .circles import predict_circles
    from .skies.flat import flat_sky
    from .skies.instrument import observe
    from .skies.spherical import spherical_sky

    space, obs, cosmo, chi = _space_and_observer(sky)
    if space.geometry == "flat":
        s = flat_sky(space, obs, cosmo, lmax=setup.lmax, nside=setup.nside, seed=sky.seed)
    else:
        s = spherical_sky(space, obs, cosmo, lmax=min(setup.lmax, 95), nside=setup.nside, kmax=100, seed=sky.seed)
    t = observe(s, nside=setup.nside, fwhm_deg=setup.beam_deg, noise_uk=setup.noise_uk, seed=sky.seed,
                lmax=min(s.lmax, 3 * setup.nside - 1))
    mask = sky_mask(sky, setup.nside)
    pairs = [p for p in predict_circles(space, obs, chi)
             if setup.min_radius_deg <= math.degrees(p.radius) <= setup.max_radius_deg]
    return Observation(sky, t, mask, pairs, [pair_fractions(p, mask) for p in pairs])


def pair_fractions(pair, mask: np.ndarray, n: int = 720) -> tuple[float, float, float]:
    """(f_a, f_b, f_joint) of a predicted pair under a RING mask, from ``n`` points per circle."""
    import healpy as hp

    from .circles import circle_points

    nside = hp.npix2nside(mask.size)
    phi = 2.0 * np.pi * np.arange(n) / n
    pa = circle_points(pair.center_a, pair.radius, phi)
    pb = circle_points(pair.center_b, pair.radius, pair.orientation * phi + pair.twist)
    ka = mask[hp.vec2pix(nside, *pa.T)] > 0.5
    kb = mask[hp.vec2pix(nside, *pb.T)] > 0.5
    return float(ka.mean()), float(kb.mean()), float((ka & kb).mean())


def is_back_to_back(pair, tol_deg: float = 0.5) -> bool:
    return float(pair.center_a @ pair.center_b) < -math.cos(math.radians(tol_deg))


def in_reach(pair, fractions, antipodal_joint: float = 0.25, allpairs_joint: float = 0.3) -> str | None:
    """'antipodal' or 'all-pairs' when the mask leaves the pair within that search's goal, else None."""
    fa, fb, fj = fractions
    if min(fa, fb) < 0.5:
        return None
    if is_back_to_back(pair):
        return "antipodal" if fj >= antipodal_joint else None
    return "all-pairs" if fj >= allpairs_joint else None


# ---------------------------------------------------------------------------------------------
# search and tally
# ---------------------------------------------------------------------------------------------
def _sep_deg(u, v) -> float:
    return math.degrees(math.atan2(np.linalg.norm(np.cross(u, v)), float(np.dot(u, v))))


def match(cand: dict, pair) -> tuple[float, float]:
    """(largest centre error, twist error) in degrees of a candidate against a predicted pair,
    trying both assignments of A and B (swapping keeps the twist for 'opposite', negates it for
    'same')."""
    ca, cb = geo.lonlat_to_vec(*cand["center_a"]), geo.lonlat_to_vec(*cand["center_b"])
    tw = math.radians(cand["twist_deg"])
    best = (math.inf, math.inf)
    for a, b, t in ((pair.center_a, pair.center_b, pair.twist),
                    (pair.center_b, pair.center_a, pair.twist if pair.orientation < 0 else -pair.twist)):
        d = max(_sep_deg(ca, a), _sep_deg(cb, b))
        dt = abs(math.degrees((tw - t + math.pi) % (2 * math.pi) - math.pi))
        if d < best[0]:
            best = (d, dt)
    return best


def search_observation(o: Observation, setup: SearchSetup, mode: str, radii_deg) -> dict:
    from .maps import as_skymap
    from .search import SearchSettings, search_sky

    settings = SearchSettings(mode=mode, radii_deg=tuple(radii_deg), **setup.search)
    return search_sky(as_skymap(o.temperature), as_skymap(o.mask), settings)


def tally_observation(o: Observation, setup: SearchSetup, modes=("antipodal", "all-pairs"), search=None) -> list[dict]:
    """One record per predicted pair in reach: sky, family, radius, fractions, mode, found, and
    the S / S_eq of the matching candidate (NaN when not found). ``search(o, setup, mode, radii)``
    (default :func:`search_observation`) runs the search, e.g. another version of it."""
    search = search or search_observation
    groups: dict[str, list] = {}
    for p, fr in zip(o.pairs, o.fractions):
        mode = in_reach(p, fr)
        if mode in modes:
            groups.setdefault(mode, []).append((p, fr))
    out = []
    for mode, items in groups.items():
        radii = sorted({round(math.degrees(p.radius), 4) for p, _ in items})
        res = search(o, setup, mode, radii)
        for p, fr in items:
            r = math.degrees(p.radius)
            want = "same" if p.orientation > 0 else "opposite"
            at = [c for c in res["reported"] if abs(c["radius_deg"] - r) < 1e-3 and c["orientation"] == want]
            # a centre off by d moves a circle's points along it by up to about d / sin(radius)
            tw_tol = max(setup.twist_tol_deg, 2.0 * setup.centre_tol_deg / math.sin(p.radius))
            errors = [(c, match(c, p)) for c in at]
            hits = [c for c, (d, dt) in errors if d < setup.centre_tol_deg and dt < tw_tol]
            best = max(hits, key=lambda c: c["S_eq"]) if hits else None
            chance = [c["S_eq"] for c in res["reported"] if abs(c["radius_deg"] - r) < 1e-3
                      and min(match(c, q)[0] for q in o.pairs) > 3.0]
            out.append({"sky": o.sky.name, "family": o.sky.space["family"], "radius_deg": r, "mode": mode,
                        "f_min": min(fr[:2]), "f_joint": fr[2], "found": best is not None,
                        "S": best["S"] if best else math.nan, "S_eq": best["S_eq"] if best else math.nan,
                        "best_chance_S_eq": max(chance) if chance else math.nan, "work": res.get("work")})
    return out


def completeness_table(records: list[dict], f_edges=(0.3, 0.5, 0.7, 1.01), r_edges=(15, 30, 45, 60, 81)) -> list[dict]:
    """found / in-reach counts in bins of jointly kept fraction and radius, per mode."""
    rows = []
    for mode in ("antipodal", "all-pairs"):
        rec = [r for r in records if r["mode"] == mode]
        for f0, f1 in zip(f_edges[:-1], f_edges[1:]):
            for r0, r1 in zip(r_edges[:-1], r_edges[1:]):
                sel = [r for r in rec if f0 <= r["f_joint"] < f1 and r0 <= r["radius_deg"] < r1]
                if sel:
                    rows.append({"mode": mode, "f_joint": (f0, min(f1, 1.0)), "radius_deg": (r0, r1),
                                 "found": sum(r["found"] for r in sel), "in_reach": len(sel)})
    return rows
