"""Speed of the flat grid sky against healpy.synfast (issue 3 target: within 20x).

An E1 sky (cubic torus of side 1.6 chi_rec) at N_side 256, l_max 512 by the grid method,
timed next to healpy.synfast of the isotropic SW spectrum at the same N_side and l_max, in
the same run: ``--repeat`` interleaved runs (synfast, grid, grid with the quadratic spline),
so that a shared machine's load hits both alike; best of each. Prints both times, their
ratio, the spread of the per-run ratios, the grid, the cut k chi_rec, the boost and the
complement's largest share of a C_l (topology.skies.flat_cut), the stage times of the SW grid
(the modes with the cut's profile; the complement: its
spectrum, a_lm draw and alm2map) and the peak resident memory of the process. ``--terms full``:
SW, Doppler and ISW (the grid of shells), against synfast of CAMB's spectrum.

    python benchmarks/flat_sky_speed.py [--nside 256] [--lmax 512] [--side 1.6] [--repeat 5] [--terms sw|full]
"""

from __future__ import annotations

import argparse
import resource
import time

import healpy as hp
import numpy as np

from topology import geometry as geo
from topology.cosmology import Cosmology
from topology.skies import flat_cut, flat_grid, flat_modes
from topology.skies.flat import complement, flat_sky
from topology.skies.spectra import isotropic_cl
from topology.spaces import build_space


def timed(fn):
    t = time.perf_counter()
    out = fn()
    return time.perf_counter() - t, out


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--nside", type=int, default=256)
    ap.add_argument("--lmax", type=int, default=512)
    ap.add_argument("--side", type=float, default=1.6, help="torus side in chi_rec")
    ap.add_argument("--oversample", type=float, default=1.2)
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--terms", choices=("sw", "full"), default="sw",
                    help="full: SW, Doppler and ISW (the grid of shells of topology.skies.transfer_shells)")
    a = ap.parse_args()
    terms = ("sw",) if a.terms == "sw" else ("sw", "doppler", "isw")

    cosmo = Cosmology()
    _ = cosmo.chi_rec_mpc
    space = build_space({"family": "E1", "lengths": [a.side] * 3})
    obs = geo.Observer.make("flat", [0.1, 0.2, 0.3], geo.euler_zyz(0.3, 0.7, -0.2))
    cl = isotropic_cl(cosmo, a.lmax, terms)
    rng = np.random.default_rng(0)

    def synfast():
        # healpy draws from numpy's legacy global RNG; seed it for a fixed workload
        np.random.seed(int(rng.integers(2**31)))
        return hp.synfast(cl, a.nside, lmax=a.lmax)

    def grid_sky():
        return flat_sky(space, obs, cosmo, lmax=a.lmax, nside=a.nside, method="grid", seed=1,
                        oversample=a.oversample, terms=terms)

    synfast()  # warm-up (healpy plans, imports)
    grid_sky()
    # interleaved runs, so that both see the same load of a shared machine; best of each
    t_syn, t_grid, t_fast = [], [], []
    for _ in range(a.repeat):
        t_syn.append(timed(synfast)[0])
        dt, sky = timed(grid_sky)
        t_grid.append(dt)
        t_fast.append(timed(lambda: flat_sky(space, obs, cosmo, lmax=a.lmax, nside=a.nside, method="grid",
                                             seed=1, oversample=a.oversample, spline_order=2, terms=terms))[0])
    pair = sorted(g / s for g, s in zip(t_grid, t_syn))
    t_syn, t_grid, t_fast = min(t_syn), min(t_grid), min(t_fast)

    # stage times of one run (the steps of flat_sky's grid branch, SW)
    kc = float(sky.meta["kchi_max"])
    shape = flat_grid.grid_shape(space, kc, a.oversample)
    t0 = time.perf_counter()
    source = "shells" if sky.meta.get("transfer") == "camb shells" else "sw"
    profile = flat_cut.cut_profile(cosmo, a.lmax, kc, terms, source, volume=space.covering_cell_volume)[0]
    spec = flat_grid.dense_torus_spectrum(space, cosmo, 1, kc, shape, weight=profile)
    t1 = time.perf_counter()
    grid = flat_grid.band_limited_irfft(spec, shape, flat_modes.index_bounds(space.lattice, kc))
    del spec
    t2 = time.perf_counter()
    coords = flat_grid.sphere_grid_coords(space, grid.shape, obs.point[:3], obs.frame[:3, :], a.nside, nest=True)
    t3 = time.perf_counter()
    flat_grid.sample_grid_coords(grid, coords)
    t4 = time.perf_counter()
    extra, _ = complement(cosmo, a.lmax, kc, terms, 1, source, space.covering_cell_volume)
    hp.alm2map(extra, a.nside, lmax=a.lmax)
    t5 = time.perf_counter()
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0

    print(f"E1 torus side {a.side} chi_rec, N_side {a.nside}, l_max {a.lmax}, grid {sky.meta['grid']} "
          f"(oversample {a.oversample}), terms {list(terms)}, cut k chi_rec = {kc:.1f}, boost max w^2 "
          f"{sky.meta.get('boost_max_w2', 1):.2f}, complement at most {sky.meta.get('complement_lmax', 0):.0%} of a C_l")
    print(f"healpy.synfast      {t_syn:8.3f} s")
    print(f"flat grid sky       {t_grid:8.3f} s")
    print(f"ratio grid/synfast  {t_grid / t_syn:8.1f}   (target <= 20; best of each over {a.repeat} interleaved runs)")
    print(f"per-run ratios      {pair[0]:.1f} .. {pair[-1]:.1f}, median {pair[len(pair) // 2]:.1f}")
    print(f"quadratic spline    {t_fast:8.3f} s, ratio {t_fast / t_syn:.1f} (spline_order 2, ~2.5% rms)")
    print(f"stages: spectrum (normals x sigma) {t1 - t0:.3f} s, FFT {t2 - t1:.3f} s, pixel coordinates "
          f"{t3 - t2:.3f} s, sampling {t4 - t3:.3f} s, complement {t5 - t4:.3f} s")
    print(f"peak resident memory {peak_mb:.0f} MB")


if __name__ == "__main__":
    main()
