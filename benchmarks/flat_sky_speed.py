"""Speed of the flat grid sky against healpy.synfast (issue 3 target: within 20x).

An E1 sky (cubic torus of side 1.6 chi_rec) at N_side 256, l_max 512 by the grid method,
timed next to healpy.synfast of the isotropic SW spectrum at the same N_side and l_max, in
the same run (best of ``--repeat``). Prints both times, the ratio, the grid, the stage times
and the peak resident memory of the process.

    python benchmarks/flat_sky_speed.py [--nside 256] [--lmax 512] [--side 1.6] [--repeat 3]
"""

from __future__ import annotations

import argparse
import resource
import time

import healpy as hp
import numpy as np

from topology import geometry as geo
from topology.cosmology import Cosmology
from topology.skies import flat
from topology.skies.spectra import sachs_wolfe_cl
from topology.spaces import build_space


def best(fn, repeat):
    times = []
    out = None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return min(times), out


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--nside", type=int, default=256)
    ap.add_argument("--lmax", type=int, default=512)
    ap.add_argument("--side", type=float, default=1.6, help="torus side in chi_rec")
    ap.add_argument("--oversample", type=float, default=1.2)
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args()

    cosmo = Cosmology()
    _ = cosmo.chi_rec_mpc
    space = build_space({"family": "E1", "lengths": [a.side] * 3})
    obs = geo.Observer.make("flat", [0.1, 0.2, 0.3], geo.euler_zyz(0.3, 0.7, -0.2))
    cl = sachs_wolfe_cl(a.lmax, cosmo)
    rng = np.random.default_rng(0)

    def synfast():
        # healpy draws from numpy's legacy global RNG; seed it for a fixed workload
        np.random.seed(int(rng.integers(2**31)))
        return hp.synfast(cl, a.nside, lmax=a.lmax)

    def grid_sky():
        return flat.flat_sky(space, obs, cosmo, lmax=a.lmax, nside=a.nside, method="grid", seed=1,
                             oversample=a.oversample)

    synfast()  # warm-up (healpy plans, imports)
    grid_sky()
    t_syn, _ = best(synfast, a.repeat)
    t_grid, sky = best(grid_sky, a.repeat)
    t_fast, _ = best(lambda: flat.flat_sky(space, obs, cosmo, lmax=a.lmax, nside=a.nside, method="grid", seed=1,
                                           oversample=a.oversample, spline_order=2), a.repeat)

    # stage times of one run
    kc = float(a.lmax)
    D = np.linalg.inv(space.lattice).T
    m = flat.index_bounds(space.lattice, kc)
    t0 = time.perf_counter()
    flat.unit_normals_half(1, m, D, kc)
    t1 = time.perf_counter()
    grid = flat.torus_grid(space, cosmo, 1, kc, a.oversample)
    t2 = time.perf_counter()
    vec = np.column_stack(hp.pix2vec(a.nside, np.arange(hp.nside2npix(a.nside))))
    flat.sample_grid(grid, space, obs.point[:3] + vec @ obs.frame[:3, :].T)
    t3 = time.perf_counter()
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0

    print(f"E1 torus side {a.side} chi_rec, N_side {a.nside}, l_max {a.lmax}, grid {sky.meta['grid']} "
          f"(oversample {a.oversample}), k chi_rec <= {kc:g}")
    print(f"healpy.synfast      {t_syn:8.3f} s")
    print(f"flat grid sky       {t_grid:8.3f} s")
    print(f"ratio grid/synfast  {t_grid / t_syn:8.1f}   (target <= 20)")
    print(f"quadratic spline    {t_fast:8.3f} s, ratio {t_fast / t_syn:.1f} (spline_order 2, ~2.5% rms)")
    print(f"stages: normals {t1 - t0:.3f} s, torus_grid (normals + weights + FFT) {t2 - t1:.3f} s, "
          f"sampling {t3 - t2:.3f} s")
    print(f"peak resident memory {peak_mb:.0f} MB")


if __name__ == "__main__":
    main()
