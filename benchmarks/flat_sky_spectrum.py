"""Flat skies against the isotropic spectrum of the same physics, and what the complement costs
the matched circles (issue: injected skies as faithful as the null skies).

1. Spectrum. An ensemble of E1 skies of side 4 chi_rec (no circles: the clones are beyond the
   last-scattering diameter) by the grid method (N_side 64, l_max 128) and the eigenmode method
   (l_max 32), seeds 0..n-1, mean C_l over the isotropic C_l in bands of l, with the error of the
   mean (standard deviation / sqrt(n)); beside it the lattice alone (complete=False: the power of
   the cut K = lmax only, the old sky). --terms full: the same with the CAMB terms against
   CAMB's unlensed TT.
2. Circles (--circles). The expected correlation of the two points of a matched pair, from the
   exact covariance of the lattice modes (no random skies): all modes to 5 l_max (the truth to
   2 %), the cut K plus the isotropic complement (the sky made here), and the cut alone, for
   pairs of radius 18-81 deg (E1 of sides 1.9-0.3), l_max 64 with a 2 deg beam (1 deg at
   l_max 128 scaled); about 10 minutes.

    python benchmarks/flat_sky_spectrum.py [--n 40] [--terms sw|full] [--circles] [--figure PATH]
"""

from __future__ import annotations

import argparse
import time

import healpy as hp
import numpy as np

from topology import geometry as geo
from topology.cosmology import Cosmology
from topology.skies.flat import flat_sky
from topology.skies.spectra import isotropic_cl
from topology.spaces import build_space

BANDS = [(2, 5), (6, 10), (11, 20), (21, 30), (31, 50), (51, 75), (76, 100), (101, 128)]


def band_ratio(cls, ref, lo, hi):
    """Per sky: sum (2l+1) C_l / sum (2l+1) C_l^ref over the band."""
    w = 2 * np.arange(lo, hi + 1) + 1
    return (cls[:, lo:hi + 1] @ w) / (ref[lo:hi + 1] @ w)


def ensemble(method, lmax, nside, n, terms, complete):
    cosmo = Cosmology()
    space = build_space({"family": "E1", "lengths": [4.0, 4.0, 4.0]})
    obs = geo.Observer.make("flat", [0.3, 1.1, -2.0], geo.euler_zyz(0.2, 0.5, 0.1))
    cls = []
    meta = None
    for s in range(n):
        kw = {} if complete else {"kchi_max": float(lmax), "complete": False}
        sky = flat_sky(space, obs, cosmo, lmax=lmax, nside=nside, method=method, seed=s, terms=terms, **kw)
        alm = sky.alm if sky.alm is not None else hp.map2alm(sky.map, lmax=lmax, iter=3)
        cls.append(hp.alm2cl(alm, lmax=lmax))
        meta = sky.meta
    return np.array(cls), meta


def spectrum_part(n, terms, figure):
    cosmo = Cosmology()
    rows = []
    for method, lmax, nside in (("grid", 128, 64), ("eigenmode", 32, 16)):
        ref = isotropic_cl(cosmo, lmax, terms)
        for complete in (True, False):
            t = time.perf_counter()
            cls, meta = ensemble(method, lmax, nside, n, terms, complete)
            dt = time.perf_counter() - t
            label = f"{method} l_max {lmax} " + ("cut + complement" if complete else "lattice alone (K = l_max)")
            print(f"{label}: {n} skies in {dt:.0f} s, cut k chi_rec = {meta['kchi_max']:.1f}")
            bands = [(lo, min(hi, lmax)) for lo, hi in BANDS if lo <= lmax]
            for lo, hi in bands:
                r = band_ratio(cls, ref, lo, hi)
                print(f"   l {lo:3d}-{hi:3d}: {r.mean():.4f} +- {r.std(ddof=1) / np.sqrt(n):.4f}")
                rows.append((label, lo, hi, r.mean(), r.std(ddof=1) / np.sqrt(n)))
    if figure:
        from topology.plots import pyplot

        plt = pyplot()
        fig, ax = plt.subplots(figsize=(7, 4))
        for k, label in enumerate(dict.fromkeys(r[0] for r in rows)):
            sel = [r for r in rows if r[0] == label]
            x = np.array([0.5 * (r[1] + r[2]) for r in sel]) * (1 + 0.015 * (k - 1.5))
            ax.errorbar(x, [r[3] for r in sel], yerr=[r[4] for r in sel], fmt="o-" if "complement" in label else "s:",
                        ms=4, capsize=2, label=label)
        ax.axhline(1.0, color="k", lw=0.8)
        ax.axhspan(0.99, 1.01, color="0.85", zorder=0)
        ax.set_xscale("log")
        ax.set_xlabel("multipole l (band centre)")
        ax.set_ylabel("mean C_l / isotropic C_l")
        ax.set_title(f"E1 of side 4 chi_rec, {n} skies per line, terms {list(terms)}")
        ax.legend(fontsize=7)
        fig.tight_layout()
        fig.savefig(figure, dpi=110)
        print(f"figure: {figure}")


def circle_part(lmax=64, fwhm_deg=2.0, truth=5.0, sides=(0.3, 0.8, 1.6, 1.9), shares=None):
    from scipy.special import eval_legendre, spherical_jn

    from topology.circles import circle_points, predict_circles
    from topology.skies import flat_cut, flat_modes

    cosmo = Cosmology()
    ell = np.arange(lmax + 1)
    sig = np.radians(fwhm_deg) / np.sqrt(8 * np.log(2))
    bl = np.exp(-0.5 * ell * (ell + 1) * sig**2)
    coef = ((2 * ell + 1) * (1j) ** ell * bl)[:, None]
    coef[:2] = 0
    print(f"expected correlation of matched points, l <= {lmax}, beam {fwhm_deg} deg: all modes to {truth:g} l_max "
          "| the cut K with its weights + the isotropic complement (the sky made here)")
    for side in sides:
        space = build_space({"family": "E1", "lengths": [side] * 3})
        obs = geo.Observer.make("flat", [0.13, -0.21, 0.07])
        p = predict_circles(space, obs, 1.0)[0]
        phi = np.linspace(0, 2 * np.pi, 3, endpoint=False)
        na = circle_points(p.center_a, p.radius, phi)
        nb = circle_points(p.center_b, p.radius, p.orientation * phi + p.twist)
        _, k, _ = flat_modes.half_ball_modes(space, truth * lmax)
        kn = np.linalg.norm(k, axis=1)
        sig2 = flat_modes.mode_sigma(kn, cosmo, space.covering_cell_volume) ** 2
        jl = np.array([spherical_jn(l, kn) for l in ell])
        phase = np.exp(1j * (k @ obs.point[:3]))

        def B(nv):
            mu = (k @ nv) / kn
            return (coef * jl * np.array([eval_legendre(l, mu) for l in ell])).sum(0) * phase

        pts = [(B(na[j]), B(nb[j]), float(na[j] @ nb[j])) for j in range(len(phi))]
        out = []
        vol = space.covering_cell_volume
        k_lat = flat_cut.lattice_cut(cosmo, lmax, volume=vol)
        cases = [(f"K = {r:.2f} l_max{' (lattice cut)' if kc == k_lat else ''}, share {b:g}", kc, b)
                 for kc, r in ((float(lmax), 1.0), (k_lat, k_lat / lmax), (1.5 * lmax, 1.5))
                 for b in (shares if shares else (0.0, flat_cut.BOOST_SHARE, 1.0))]
        for label, kc, b in cases:
            w2 = flat_cut.cut_profile(cosmo, lmax, kc, volume=vol, share=b)[0].weight(kn) ** 2
            cl_t = np.maximum(4 * np.pi * (2 * sig2 * (1 - w2) * jl**2).sum(1), 0.0)
            cl_t[:2] = 0
            r_true, r_app = [], []
            for b1, b2, mu in pts:
                c12 = 2 * sig2 * np.real(b1 * np.conj(b2))
                c11, c22 = 2 * sig2 * np.abs(b1) ** 2, 2 * sig2 * np.abs(b2) ** 2
                iso12 = np.sum((2 * ell + 1) / (4 * np.pi) * cl_t * bl**2 * eval_legendre(ell, mu))
                iso11 = np.sum((2 * ell + 1) / (4 * np.pi) * cl_t * bl**2)
                r_true.append(c12.sum() / np.sqrt(c11.sum() * c22.sum()))
                r_app.append(((w2 * c12).sum() + iso12) / np.sqrt(((w2 * c11).sum() + iso11) * ((w2 * c22).sum() + iso11)))
            out.append(f"{label}: {np.mean(r_app):.3f}")
        print(f"   radius {np.degrees(p.radius):4.1f} deg: every mode {np.mean(r_true):.3f}\n      " + "\n      ".join(out),
              flush=True)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=40, help="skies per line")
    ap.add_argument("--terms", choices=("sw", "full"), default="sw")
    ap.add_argument("--circles", action="store_true", help="also the matched-circle correlations (minutes)")
    ap.add_argument("--circles-only", action="store_true", help="only the matched-circle correlations")
    ap.add_argument("--figure", default=None, help="write the band ratios to this PNG")
    a = ap.parse_args()
    terms = ("sw",) if a.terms == "sw" else ("sw", "doppler", "isw")
    if not a.circles_only:
        spectrum_part(a.n, terms, a.figure)
    if a.circles or a.circles_only:
        circle_part()


if __name__ == "__main__":
    main()
