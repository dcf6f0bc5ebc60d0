"""The harmonic view measured: the KL divergence of flat spaces from isotropy against size, lmax,
observer, mask and noise, and what the covariance costs.

    python benchmarks/harmonic_kl.py            # about 2-4 minutes on 2 cores
    python benchmarks/harmonic_kl.py --quick    # the size table at lmax 8 only
    python benchmarks/harmonic_kl.py --spherical   # section 7 only (about a minute)

Prints:
1. D(space || isotropic) of the cubic torus E1 [L, L, L], the chimney E11 [L, L] and the slab E16
   [L] (open directions given the skies' period, 6 chi_rec) against L, and the ratios cube / slab,
   chimney / slab. check: Planck 2015 XVIII (A&A 594, A18), Fig. 1 caption: the divergence
   drops rapidly once the domain exceeds the last-scattering diameter (L = 2 chi_rec), and the
   cubic torus's values are about three times the slab's.
2. The divergence against lmax for the slab at L = 1.0 and 2.2 chi_rec (Planck 2015 XVIII Fig. 1:
   it keeps rising for the smaller one and levels off for the larger one).
3. The divergence of E2 (half-turn) against the observer's distance from the rotation axis.
4. Full sky without noise against pixel space at N_side 16 with noise and a galactic mask.
5. Cost: covariance and divergence time against lmax and size (the rank updates scale as
   (wave vectors of the ball) x N^2, i.e. kchi_max^3 V lmax^4; the divergence as N^3).
6. The likelihood bound: the time of one likelihood ratio (one size, one orientation) at lmax 30,
   and for E1 of side 1.2 chi_rec at lmax 8, N_side 8, 5 microK noise and a |b| < 20 deg cut, the
   fraction of isotropic maps that exclude each scale with a coarse and a finer orientation grid
   (the calibration on maps of the space makes both honest; the finer grid has more power).
7. Spherical spaces (Sachs-Wolfe, against the simply connected S^3 of the same background):
   L(p, 1) against p at Omega_K = -0.05 (chi_rec / R_c = 0.71), and the dodecahedral space at
   Omega_K = -0.015 and -0.05 against lmax: the divergence with the isotropic complement beyond the
   skies' degrees (default), with twice the degrees (convergence), without the complement (exactly
   the skies' distribution: tail weights; singular when the kept modes span fewer than N
   directions), the invariant modes and the time of the covariance.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from topology import geometry as geo
from topology.cosmology import Cosmology
from topology.harmonic import space_covariance
from topology.harmonic.flat import covariance_work
from topology.harmonic.kl import gaussian_kl, pixel_kl
from topology.harmonic.pixels import pixel_space
from topology.skies.instrument import galactic_mask
from topology.spaces import build_space

COSMO = Cosmology()
ORIGIN = geo.Observer.make("flat", [0.0, 0.0, 0.0])


def kl(spec, lmax, observer=ORIGIN, pixels=None):
    cov = space_covariance(build_space(spec), observer, COSMO, lmax=lmax)
    if pixels is None:
        return gaussian_kl(cov.matrix, np.diag(cov.iso_diagonal)).kl_nats
    return pixel_kl(cov.matrix, cov.iso_diagonal, pixels).kl_nats


def size_table(lmax, sizes):
    print(f"1. KL divergence (nats) against size L (chi_rec), lmax {lmax}, observer at the origin")
    print(f"{'L':>5} {'cube E1':>10} {'chimney E11':>12} {'slab E16':>10} {'cube/slab':>10} {'chim/slab':>10}")
    for L in sizes:
        c = kl({"family": "E1", "lengths": [L, L, L]}, lmax)
        h = kl({"family": "E11", "lengths": [L, L]}, lmax)
        s = kl({"family": "E16", "lengths": [L]}, lmax)
        print(f"{L:5.2f} {c:10.4g} {h:12.4g} {s:10.4g} {c / s:10.2f} {h / s:10.2f}")


def lmax_table(lmaxes):
    print("\n2. KL divergence (nats) of the slab E16 against lmax")
    print(f"{'lmax':>5} {'L = 1.0':>10} {'L = 2.2':>10}")
    for lmax in lmaxes:
        a = kl({"family": "E16", "lengths": [1.0]}, lmax)
        b = kl({"family": "E16", "lengths": [2.2]}, lmax)
        print(f"{lmax:5d} {a:10.4g} {b:10.4g}")


def observer_table(lmax):
    print(f"\n3. KL divergence (nats) of E2 [1.6, 1.6, 0.9] against the observer's distance from the axis, lmax {lmax}")
    print(f"{'r':>5} {'KL':>10}")
    for r in (0.0, 0.2, 0.4, 0.8):
        obs = geo.Observer.make("flat", [r, 0.0, 0.0])
        print(f"{r:5.2f} {kl({'family': 'E2', 'lengths': [1.6, 1.6, 0.9]}, lmax, obs):10.4g}")


def pixel_table(lmax, nside=16):
    print(f"\n4. KL divergence (nats) of E1 [L, L, L], lmax {lmax}: full sky against N_side {nside} pixels "
          "(pixel window; white noise per pixel; galactic mask |b| < 20 deg)")
    mask = galactic_mask(nside, 20.0)
    forms = [("full sky", None)]
    for noise in (10.0, 30.0):
        forms.append((f"noise {noise:g}", pixel_space(nside, lmax, noise_uk=noise)))
        forms.append((f"noise {noise:g} + mask", pixel_space(nside, lmax, noise_uk=noise, mask=mask)))
    print(f"{'L':>5} " + " ".join(f"{name:>18}" for name, _ in forms))
    for L in (1.5, 2.0, 2.4):
        spec = {"family": "E1", "lengths": [L, L, L]}
        cov = space_covariance(build_space(spec), ORIGIN, COSMO, lmax=lmax)
        vals = []
        for _, px in forms:
            if px is None:
                vals.append(gaussian_kl(cov.matrix, np.diag(cov.iso_diagonal)).kl_nats)
            else:
                vals.append(pixel_kl(cov.matrix, cov.iso_diagonal, px).kl_nats)
        print(f"{L:5.2f} " + " ".join(f"{v:18.4g}" for v in vals))


def cost_table(cases):
    print("\n5. cost: covariance (rank updates) and divergence (Cholesky + eigenvalues), seconds")
    print(f"{'space':>20} {'lmax':>5} {'N':>5} {'modes':>8} {'flop':>9} {'cov s':>7} {'Gflop/s':>8} {'KL s':>6}")
    for spec, lmax in cases:
        sp = build_space(spec)
        t0 = time.perf_counter()
        cov = space_covariance(sp, ORIGIN, COSMO, lmax=lmax)
        t1 = time.perf_counter()
        gaussian_kl(cov.matrix, np.diag(cov.iso_diagonal))
        t2 = time.perf_counter()
        work = covariance_work(sp, ORIGIN, lmax, cov.kchi_max)
        name = f"{spec['family']} {spec['lengths']}"
        print(f"{name:>20} {lmax:5d} {cov.n:5d} {cov.n_modes:8d} {work:9.2e} {t1 - t0:7.2f} "
              f"{work / (t1 - t0) / 1e9:8.1f} {t2 - t1:6.2f}")


def likelihood_table():
    from topology.harmonic.likelihood import likelihood_terms, size_bound
    from topology.harmonic.rotation import orientation_grid
    from topology.skies.spectra import sachs_wolfe_cl

    print("\n6. likelihood: one ratio at lmax 30 (N_side 16, noise 10 microK, |b| < 20 deg, dipole marginalised)")
    px = pixel_space(16, 30, noise_uk=10.0, mask=galactic_mask(16, 20.0), dipole=True)
    cov = space_covariance(build_space({"family": "E1", "lengths": [1.0, 1.0, 1.0]}), ORIGIN, COSMO, lmax=30)
    b = px.weigh(np.random.default_rng(0).normal(size=12 * 16 * 16) * 30.0)
    t0 = time.perf_counter()
    likelihood_terms(cov.matrix, px.A, b[:, None])
    print(f"   N = {cov.n}: {time.perf_counter() - t0:.2f} s")
    print("   isotropic maps excluding each scale of E1 [1.2 s]^3, lmax 8, N_side 8, 5 microK, |b| < 20 deg, "
          "level 0.95, 200 calibration maps")
    px = pixel_space(8, 8, noise_uk=5.0, mask=galactic_mask(8, 20.0), dipole=True, extra_cl=sachs_wolfe_cl(23, COSMO))
    scales = [0.5, 0.7, 0.85, 1.0, 1.3, 1.8]
    covs = [space_covariance(build_space({"family": "E1", "lengths": [1.2 * s] * 3}), ORIGIN, COSMO, lmax=8)
            for s in scales]
    print(f"{'grid':>22} " + " ".join(f"{s:>6}" for s in scales) + f" {'s':>6}")
    for ns, npsi in ((1, 6), (2, 8)):
        t0 = time.perf_counter()
        res = size_bound(np.zeros(covs[0].n), scales, [c.matrix for c in covs], covs[0].iso_diagonal, px,
                         orientation_grid(ns, npsi), n_cal=200, seed=1)
        name = f"{12 * ns * ns * npsi} orientations"
        print(f"{name:>22} " + " ".join(f"{f:6.2f}" for f in res.iso_excluded) + f" {time.perf_counter() - t0:6.1f}")


def spherical_table(lens_lmax=10, lens_p=(2, 4, 8, 12, 20), dodec_lmax=(10, 16, 20)):
    centre = geo.Observer.make("spherical", [1.0, 0.0, 0.0, 0.0])

    def one(spec, cosmo, lmax, **kw):
        t0 = time.perf_counter()
        cov = space_covariance(build_space(spec), centre, cosmo, lmax=lmax, **kw)
        t1 = time.perf_counter()
        d = gaussian_kl(cov.matrix, np.diag(cov.iso_diagonal)).kl_nats
        return d, cov, t1 - t0

    print("\n7. spherical spaces (SW), KL divergence from S^3 (nats); observer at 1; cov s: covariance time")
    cosmo = Cosmology(omega_k=-0.05)
    chi = cosmo.chi_rec_over_curvature_radius
    print(f"   L(p, 1) at Omega_K = -0.05 (chi_rec/R_c = {chi:.3f}), lmax {lens_lmax}; circles when pi/p < chi")
    print(f"{'p':>5} {'circles':>8} {'KL':>10} {'KL 2 kmax':>10} {'KL skies':>10} {'kmax':>5} {'modes':>8} "
          f"{'cov s':>7}")
    for p in lens_p:
        spec = {"family": "lens", "p": p, "q": 1}
        d, cov, t = one(spec, cosmo, lens_lmax)
        d2 = one(spec, cosmo, lens_lmax, kchi_max=2 * cov.kchi_max)[0]
        d0 = one(spec, cosmo, lens_lmax, complement=False)[0]
        print(f"{p:5d} {'yes' if np.pi / p < chi else 'no':>8} {d:10.4g} {d2:10.4g} {d0:10.4g} {cov.meta['kmax']:5d} "
              f"{cov.n_modes:8d} {t:7.2f}")
    print("   dodecahedral space (circles when pi/10 < chi_rec/R_c)")
    print(f"{'Omega_K':>8} {'chi':>6} {'lmax':>5} {'N':>5} {'KL':>10} {'KL 2 kmax':>10} {'KL skies':>10} {'kmax':>5} "
          f"{'modes':>7} {'cov s':>7}")
    for ok in (-0.015, -0.05):
        c = Cosmology(omega_k=ok)
        for lmax in dodec_lmax:
            spec = {"family": "dodecahedral"}
            d, cov, t = one(spec, c, lmax)
            d2 = one(spec, c, lmax, kchi_max=2 * cov.kchi_max)[0]
            d0 = one(spec, c, lmax, complement=False)[0]
            print(f"{ok:8.3f} {cov.meta['chi']:6.3f} {lmax:5d} {cov.n:5d} {d:10.4g} {d2:10.4g} {d0:10.4g} "
                  f"{cov.meta['kmax']:5d} {cov.n_modes:7d} {t:7.2f}")


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--quick", action="store_true", help="the size table at lmax 8 only")
    sizes = (0.6, 1.0, 1.4, 1.8, 2.0, 2.2, 2.6, 3.0)
    ap.add_argument("--likelihood", action="store_true", help="the likelihood section (6) only")
    ap.add_argument("--spherical", action="store_true", help="the spherical section (7) only")
    args = ap.parse_args()
    if args.spherical:
        spherical_table()
        return
    if args.quick:
        size_table(8, sizes)
        return
    if args.likelihood:
        likelihood_table()
        return
    size_table(16, sizes)
    lmax_table((4, 8, 12, 16, 20))
    observer_table(12)
    pixel_table(16)
    cost_table([({"family": "E1", "lengths": [1.0, 1.0, 1.0]}, 10), ({"family": "E1", "lengths": [1.0, 1.0, 1.0]}, 20),
                ({"family": "E1", "lengths": [1.0, 1.0, 1.0]}, 30), ({"family": "E1", "lengths": [1.5, 1.5, 1.5]}, 30),
                ({"family": "E1", "lengths": [2.0, 2.0, 2.0]}, 30), ({"family": "E6", "lengths": [1.0, 1.0, 1.0]}, 30)])
    likelihood_table()
    spherical_table()


if __name__ == "__main__":
    main()
