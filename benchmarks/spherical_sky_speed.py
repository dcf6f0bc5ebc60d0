"""Speed of a dodecahedral SW sky (N_side 64, modes k <= 60) next to healpy.synfast.

Run: python benchmarks/spherical_sky_speed.py [--nside 64] [--kmax 60] [--repeat 3]

Times, in one run, (1) topology.skies.spherical.spherical_sky for the Poincare dodecahedral
space (chi_rec / R_c = 0.4, a generic observer) at l_max = 3 N_side - 1 with all invariant
modes up to kmax, plus healpy.alm2map of its a_lm to the N_side map, and (2) healpy.synfast of
an isotropic spectrum at the same N_side and l_max. Target: the spherical sky within 60 s on
2 cores. Prints the best of ``repeat`` runs of each and their ratio.
"""

from __future__ import annotations

import argparse
import time

import healpy as hp
import numpy as np

from topology import geometry as geo
from topology.cosmology import Cosmology, omega_k_for_ratio
from topology.skies.spectra import sachs_wolfe_cl
from topology.skies.spherical import spherical_sky
from topology.spaces.spherical import make_dodecahedral


def best_time(fn, repeat: int) -> tuple[float, object]:
    best, out = np.inf, None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--nside", type=int, default=64)
    ap.add_argument("--kmax", type=int, default=60)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args(argv)
    nside, kmax = args.nside, args.kmax
    lmax = 3 * nside - 1
    base = Cosmology()
    cosmo = base.with_omega_k(omega_k_for_ratio(base, 0.4, -1))
    space = make_dodecahedral({})
    obs = geo.Observer.make("spherical", [1.0, 0.2, 0.1, 0.3], geo.euler_zyz(0.3, 1.1, -0.7))

    def spherical():
        sky = spherical_sky(space, obs, cosmo, lmax=lmax, nside=nside, kmax=kmax, seed=1)
        return sky, hp.alm2map(sky.alm, nside, lmax=lmax)

    cl = sachs_wolfe_cl(lmax, cosmo)

    def synfast():
        np.random.seed(1)   # healpy.synfast draws from numpy's global state
        return hp.synfast(cl, nside, lmax=lmax)

    t_sph, (sky, _) = best_time(spherical, args.repeat)
    t_syn, _ = best_time(synfast, args.repeat)
    print(f"dodecahedral SW sky: nside {nside}, lmax {lmax}, kmax {kmax}, "
          f"{sky.meta['modes']} invariant modes, chi_rec/R_c = {sky.meta['chi']:.3f}")
    print(f"  spherical_sky + alm2map : {t_sph:8.3f} s  (target < 60 s)")
    print(f"  healpy.synfast          : {t_syn:8.3f} s")
    print(f"  ratio                   : {t_sph / t_syn:8.1f} x synfast")


if __name__ == "__main__":
    main()
