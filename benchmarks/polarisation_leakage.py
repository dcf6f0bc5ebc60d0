"""E-mode maps on a cut sky: E/B leakage and interior fidelity per l band, and the chance spread
of S for T and E circles on isotropic polarised skies (the sigma of the T + E weights).

    python benchmarks/polarisation_leakage.py [--nside 128] [--lmax 190] [--skies 4] [--cut 15]

Leakage (topology.maps.emode.leakage_bands): pure-E Gaussian skies with the shipped CAMB C_EE,
a |b| < cut mask, apodisation 0, 5 and 10 deg; per band the B/E pseudo-power of the estimate and
the correlation of the estimated and true E (band-filtered) where the apodised weight is 1.
Spread (topology.search.combined.chance_spread): sigma of S at a fixed twist over random pairs of
circles of radius 30 deg on full-sky T and E maps smoothed to 2 deg, N_side 64.
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np

from topology.cosmology import Cosmology
from topology.maps.emode import emode_map, leakage_bands
from topology.search.combined import chance_spread
from topology.search.sampling import centre_grid, sample_circles
from topology.skies import polarised
from topology.skies.instrument import galactic_mask

BANDS = [(2, 10), (11, 30), (31, 60), (61, 120), (121, 190)]


def leakage(nside: int, lmax: int, skies: int, cut: float) -> None:
    cl = polarised.shipped_pol_cl(lmax)["EE"]
    mask = galactic_mask(nside, cut)
    bands = [b for b in BANDS if b[1] <= lmax]
    print(f"E/B leakage, |b| < {cut} deg, N_side {nside}, lmax {lmax}, {skies} pure-E skies (mean +- sd)")
    for apod in (0.0, 5.0, 10.0):
        t = time.time()
        rows = [leakage_bands(cl, mask, nside=nside, lmax=lmax, apod_deg=apod, bands=bands, seed=s)
                for s in range(skies)]
        print(f"  apodisation {apod:4.1f} deg ({time.time() - t:.1f} s)")
        for i, (lo, hi) in enumerate(bands):
            be = np.array([r[i]["b_over_e"] for r in rows])
            rr = np.array([r[i]["r_interior"] for r in rows])
            bi = np.array([r[i]["b_rms_interior"] for r in rows])
            print(f"    l {lo:>3}-{hi:<3}  B/E {be.mean():.3f} +- {be.std():.3f}   "
                  f"r_interior {rr.mean():.3f} +- {rr.std():.3f}   B/E rms interior {bi.mean():.3f}")


def spread(seed: int = 1) -> None:
    nside, lmax, fwhm = 64, 128, 2.0
    sky = polarised.polarised_sky(Cosmology(), lmax=lmax, seed=seed)
    iqu = polarised.observe_polarised(sky, nside=nside, fwhm_deg=fwhm, pixwin=False, seed=seed)
    e, _ = emode_map(iqu[1], iqu[2], None, lmax=lmax)
    centres = centre_grid(8)
    radius = math.radians(30.0)
    print(f"chance spread of S, radius 30 deg, FWHM {fwhm} deg, N_side {nside}, {len(centres)} centres")
    for name, m in (("T", iqu[0]), ("E", e)):
        circ = sample_circles(m, centres, radius, 192, 64)
        print(f"  {name}: sigma_S = {chance_spread(circ, n_pairs=4000, seed=seed):.3f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--nside", type=int, default=128)
    ap.add_argument("--lmax", type=int, default=190)
    ap.add_argument("--skies", type=int, default=4)
    ap.add_argument("--cut", type=float, default=15.0)
    args = ap.parse_args()
    spread()
    leakage(args.nside, args.lmax, args.skies, args.cut)


if __name__ == "__main__":
    main()
