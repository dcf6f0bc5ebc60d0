"""Speed of synthetic skies next to healpy.synfast at the same N_side and l_max, in one run.

    python benchmarks/synth_speed.py [--quick]

1. E1 cubic torus of side 1.6 chi_rec, N_side 256, l_max 512, grid method (target: <= 20 x synfast).
2. Dodecahedral space, N_side 64, k <= 60 (target: <= 60 s on 2 cores), l_max 3 N_side - 1 = 191
   and the synfast time at the same N_side and l_max.
Each line prints the time of the sky (generator + instrument, noiseless, no beam, with the pixel
window) and the ratio to synfast. --quick halves N_side and l_max (a smoke run).
"""

from __future__ import annotations

import argparse
import time

import healpy as hp
import numpy as np


def timed(fn, repeat=1):
    best = np.inf
    out = None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def synfast_time(nside, lmax):
    from topology.cosmology import Cosmology
    from topology.skies.spectra import sachs_wolfe_cl

    cl = sachs_wolfe_cl(lmax, Cosmology())
    np.random.seed(0)  # synfast draws from numpy's global RNG; seeded only for this timing
    return timed(lambda: hp.synfast(cl, nside, lmax=lmax, pixwin=False), repeat=3)[0]


def sky_time(cfg_dict):
    from topology.config import config_from_dict
    from topology.skies import sky_from_config, sky_params
    from topology.skies.instrument import observe, pixel_window

    cfg = config_from_dict(cfg_dict)
    p = sky_params(cfg)
    pixel_window(p["nside"], p["lmax"])   # cached once per process, like a run over many skies
    t_sky, (sky, _) = timed(lambda: sky_from_config(cfg, p))
    t_obs, _ = timed(lambda: observe(sky, nside=p["nside"], lmax=p["lmax"], seed=p["seed"]))
    return t_sky, t_obs, sky


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args(argv)
    f = 2 if args.quick else 1

    nside, lmax = 256 // f, 512 // f
    t_syn = synfast_time(nside, lmax)
    t_sky, t_obs, sky = sky_time({"space": {"family": "E1", "lengths": [1.6, 1.6, 1.6]},
                                  "sky": {"nside": nside, "lmax": lmax, "method": "grid", "seed": 1}})
    tot = t_sky + t_obs
    print(f"E1 L=1.6 grid  nside {nside} lmax {lmax}: sky {t_sky:.2f} s + instrument {t_obs:.3f} s = {tot:.2f} s; "
          f"synfast {t_syn:.2f} s; ratio {tot / t_syn:.1f} x (target <= 20 x); grid {sky.meta.get('grid')}")

    nside, lmax, kmax = 64 // f, (3 * 64 - 1) // f, 60 // f
    t_syn = synfast_time(nside, lmax)
    t_sky, t_obs, sky = sky_time({"cosmology": {"omega_k": -0.05}, "space": {"family": "dodecahedral"},
                                  "sky": {"nside": nside, "lmax": lmax, "kmax": kmax, "seed": 1}})
    tot = t_sky + t_obs
    print(f"dodecahedral   nside {nside} lmax {lmax} kmax {kmax}: sky {t_sky:.2f} s + instrument {t_obs:.3f} s = "
          f"{tot:.2f} s (target <= 60 s); synfast {t_syn:.3f} s; ratio {tot / t_syn:.0f} x; "
          f"{sky.meta.get('modes')} invariant modes")


if __name__ == "__main__":
    main()
