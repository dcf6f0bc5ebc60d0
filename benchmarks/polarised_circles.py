"""Matched circles of polarised flat skies: S of E-mode and temperature circles at the predicted
pairs against chance pairs, per band of wave number.

    python benchmarks/polarised_circles.py [--nside 64] [--lmax 96] [--chance 2000]

First the derived law alone: for E1 cubes of side 1.7, 1.2 and 0.8 (radii 11.5-66 deg), modes
30 < k chi_rec <= 64, lmax 80, two seeds, the Pearson correlation of the two circles of each
pair (360 points, interpolated on an N_side 256 map of the a_lm) and their S, per radius,
against rho_E = (3 + cos^2 2 alpha) / 4; then the same for T (SW + Doppler + ISW) of the side-0.8
cube per band of k against cos beta = -cos 2 alpha, the correlation of a pure Doppler term.

Skies (topology.skies.flat_polarised.flat_polarised_sky, noise-free, no beam, no pixel window,
full sky, no isotropic complement): an E1 cube of side 1.7 chi_rec and an E3 (quarter turn) of
sides 1.7, 1.7, 1.6, seen from a generic observer. T has CAMB's SW + Doppler + ISW; E is the E
map of the Q, U maps at N_side (topology.maps.emode.emode_map, full sky). The bands are bands of
the modes' wave number k chi_rec (a profile of weight 1 inside, 0 outside), all below lmax - 16,
so the a_lm to lmax hold the whole field: filtering a_lm in l would itself break the match (an l
filter is a non-local operation on the sphere; measured: an SW sky filtered to l 20-48 gives
S ~ 0.7 at its true pairs). A mode of wave number k projects onto l <~ k chi_rec. The circles are
sampled (N_phi 256) at the predicted pairs (topology.circles) and at chance pairs (random
centres, the same radius) on maps at 2 N_side made from the a_lm.

Printed per band and map: the mean and smallest S of the true pairs at the predicted twist and
orientation (topology.search.statistic.s_of_twist), the expected matched-point correlation of
E at leading order in 1 / (k chi_rec) (README: rho_E = (3 + cos^2 2 alpha) / 4), and over the
chance pairs the mean +- sd of S at the best twist (best_twist_harmonic, the orientation of the
pair) and its largest value. The SW-only sky of the same modes (topology.skies.flat.flat_sky)
is the reference of an exact match.
"""

from __future__ import annotations

import argparse
import math
import time

import healpy as hp
import numpy as np

from topology import geometry as geo
from topology.circles import circle_points, predict_circles
from topology.cosmology import Cosmology
from topology.maps.emode import emode_map
from topology.search.sampling import sample_circles
from topology.search.statistic import best_twist_harmonic, s_of_twist
from topology.skies.flat import flat_sky
from topology.skies.flat_polarised import flat_polarised_sky
from topology.skies.polarised import observe_polarised
from topology.spaces import build_space

SPACES = [("E1", {"family": "E1", "lengths": [1.7, 1.7, 1.7]}),
          ("E3", {"family": "E3", "lengths": [1.7, 1.7, 1.6]})]
OBSERVER = geo.Observer.make("flat", [0.13, -0.21, 0.07], geo.euler_zyz(0.3, 0.9, -0.4))
N_PHI = 256


def expected_e(alpha: float) -> float:
    """rho_E(alpha) = (3 + cos^2 2 alpha) / 4: the leading-order matched-point correlation of E."""
    return (3.0 + math.cos(2.0 * alpha) ** 2) / 4.0


class BandProfile:
    """Weight 1 for lo < k chi_rec <= hi, else 0 (the modes of one band of wave number)."""

    def __init__(self, lo: float, hi: float):
        self.lo, self.hi = float(lo), float(hi)

    def weight(self, k):
        k = np.asarray(k, dtype=float)
        return ((k > self.lo) & (k <= self.hi)).astype(float)


def bands(lmax: int) -> list:
    top = float(lmax - 16)
    edges = [(0.0, 10.0), (10.0, 30.0), (30.0, 0.6 * top), (0.6 * top, top), (0.0, top)]
    return [(lo, hi) for lo, hi in edges if lo < hi]


def random_centres(n: int, rng) -> np.ndarray:
    v = rng.standard_normal((n, 3))
    return v / np.linalg.norm(v, axis=1)[:, None]


def measure(alm: np.ndarray, nside: int, lmax: int, pairs, n_chance: int, seed: int) -> dict:
    m = hp.alm2map(alm, 2 * nside, lmax=lmax)
    m_max = min(lmax, N_PHI // 2 - 1)
    true = []
    for p in pairs:
        a = sample_circles(m, p.center_a[None, :], p.radius, N_PHI, m_max)
        b = sample_circles(m, p.center_b[None, :], p.radius, N_PHI, m_max)
        true.append(float(s_of_twist(a.coeffs, b.coeffs, np.array([p.twist]), p.orientation)[0]))
    rng = np.random.default_rng(seed)
    chance = []
    for radius in sorted({round(p.radius, 9) for p in pairs}):
        orient = [p.orientation for p in pairs if round(p.radius, 9) == radius][0]
        ca, cb = random_centres(n_chance, rng), random_centres(n_chance, rng)
        far = np.einsum("ij,ij->i", ca, cb) < math.cos(0.2)
        a = sample_circles(m, ca[far], radius, N_PHI, m_max)
        b = sample_circles(m, cb[far], radius, N_PHI, m_max)
        s, _ = best_twist_harmonic(a.coeffs, b.coeffs)
        chance.append(s[:, 0 if orient > 0 else 1])
    chance = np.concatenate(chance)
    return {"true": np.array(true), "chance_mean": float(chance.mean()), "chance_sd": float(chance.std()),
            "chance_max": float(chance.max())}


def pointwise() -> None:
    cosmo = Cosmology()
    phi = np.linspace(0.0, 2.0 * np.pi, 360, endpoint=False)
    print("matched-point correlation of E (modes 30 < k chi_rec <= 64, lmax 80, seeds 1-2) against "
          "rho_E = (3 + cos^2 2 alpha) / 4")
    print(f"  {'side':>5} {'radius':>7} {'pairs':>5} {'Pearson':>8} {'S':>6} {'rho_E':>6}")
    for side in (1.7, 1.2, 0.8):
        space = build_space({"family": "E1", "lengths": [side] * 3})
        pairs = predict_circles(space, OBSERVER, 1.0)
        rows = []
        for seed in (1, 2):
            sky = flat_polarised_sky(space, OBSERVER, cosmo, lmax=80, seed=seed, kchi_max=64.0, complete=False,
                                     profile=BandProfile(30.0, 64.0))
            e = hp.alm2map(sky.meta["alm_e"], 256, lmax=80)
            for p in pairs:
                va = hp.get_interp_val(e, *hp.vec2ang(circle_points(p.center_a, p.radius, phi)))
                vb = hp.get_interp_val(e, *hp.vec2ang(circle_points(p.center_b, p.radius,
                                                                    p.orientation * phi + p.twist)))
                a = sample_circles(e, p.center_a[None, :], p.radius, N_PHI, 80)
                b = sample_circles(e, p.center_b[None, :], p.radius, N_PHI, 80)
                s = float(s_of_twist(a.coeffs, b.coeffs, np.array([p.twist]), p.orientation)[0])
                rows.append((round(math.degrees(p.radius), 1), np.corrcoef(va, vb)[0, 1], s, expected_e(p.radius)))
        r = np.array(rows)
        for rad in np.unique(r[:, 0]):
            sel = r[:, 0] == rad
            print(f"  {side:>5.1f} {rad:>7.1f} {sel.sum() // 2:>5d} {r[sel, 1].mean():>8.3f} {r[sel, 2].mean():>6.3f} "
                  f"{r[sel, 3].mean():>6.3f}")


def pointwise_t() -> None:
    """T with the CAMB terms where the Doppler term dominates: Pearson of matched circles against
    cos beta = -cos 2 alpha, the correlation of a pure Doppler term (k^.n at both sightings)."""
    cosmo = Cosmology()
    phi = np.linspace(0.0, 2.0 * np.pi, 360, endpoint=False)
    space = build_space({"family": "E1", "lengths": [0.8, 0.8, 0.8]})
    pairs = predict_circles(space, OBSERVER, 1.0)
    print("matched-point correlation of T (SW + Doppler + ISW), E1 side 0.8, lmax 110, seeds 1-2, "
          "against cos beta = -cos 2 alpha (Doppler) and 1 (SW)")
    for lo, hi in ((0.0, 10.0), (10.0, 30.0), (30.0, 60.0), (60.0, 90.0)):
        rows = []
        for seed in (1, 2):
            sky = flat_polarised_sky(space, OBSERVER, cosmo, lmax=110, seed=seed, kchi_max=hi, complete=False,
                                     profile=BandProfile(lo, hi))
            t = hp.alm2map(sky.alm, 256, lmax=110)
            for p in pairs:
                va = hp.get_interp_val(t, *hp.vec2ang(circle_points(p.center_a, p.radius, phi)))
                vb = hp.get_interp_val(t, *hp.vec2ang(circle_points(p.center_b, p.radius,
                                                                    p.orientation * phi + p.twist)))
                rows.append((round(math.degrees(p.radius), 1), np.corrcoef(va, vb)[0, 1]))
        r = np.array(rows)
        cells = [f"{rad:.1f} deg {r[r[:, 0] == rad, 1].mean():+.2f} ({-math.cos(2 * math.radians(rad)):+.2f})"
                 for rad in np.unique(r[:, 0])]
        print(f"  k chi_rec {lo:>3.0f}-{hi:<3.0f} " + ", ".join(cells))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--nside", type=int, default=64)
    ap.add_argument("--lmax", type=int, default=96)
    ap.add_argument("--chance", type=int, default=2000, help="chance pairs per radius")
    ap.add_argument("--seed", type=int, default=7)
    args = ap.parse_args()
    pointwise()
    pointwise_t()
    cosmo = Cosmology()
    lmax, nside = args.lmax, args.nside
    for name, params in SPACES:
        space = build_space(params)
        pairs = predict_circles(space, OBSERVER, 1.0)
        radii = sorted({round(math.degrees(p.radius), 1) for p in pairs})
        rho = np.mean([expected_e(p.radius) for p in pairs])
        print(f"{name} {params['lengths']}: {len(pairs)} pairs, radii {radii} deg, N_side {nside}, lmax {lmax}; "
              f"expected rho_E (mean over pairs) {rho:.3f}")
        print(f"  {'k chi_rec':>11} {'map':>4} {'S true (mean, min)':>19} {'chance mean +- sd':>18} {'chance max':>10}"
              f" {'sky s':>6}")
        for lo, hi in bands(lmax):
            t0 = time.time()
            sky = flat_polarised_sky(space, OBSERVER, cosmo, lmax=lmax, nside=nside, seed=args.seed, kchi_max=hi,
                                     complete=False, profile=BandProfile(lo, hi))
            t_sky = time.time() - t0
            iqu = observe_polarised(sky, nside=nside, pixwin=False, seed=args.seed)
            a_e = hp.map2alm(emode_map(iqu[1], iqu[2], None, lmax=lmax)[0], lmax=lmax, iter=3)
            maps = [("T", sky.alm), ("E", a_e)]
            if lo == 0.0:
                sw = flat_sky(space, OBSERVER, cosmo, lmax=lmax, method="eigenmode", terms=("sw",), seed=args.seed,
                              kchi_max=hi, complete=False)
                maps.append(("T_sw", sw.alm))
            for label, alm in maps:
                r = measure(alm, nside, lmax, pairs, args.chance, args.seed)
                print(f"  {lo:>5.0f}-{hi:<5.0f} {label:>4} {r['true'].mean():>11.3f} {r['true'].min():>7.3f} "
                      f"{r['chance_mean']:>9.3f} +- {r['chance_sd']:.3f} {r['chance_max']:>10.3f} {t_sky:>6.1f}")


if __name__ == "__main__":
    main()
