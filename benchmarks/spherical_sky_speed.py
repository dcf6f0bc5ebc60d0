"""Spherical skies to survey resolution: speed of a dodecahedral SW sky next to healpy.synfast,
and the checks of its accuracy that are too slow for the unit tests.

Run: python benchmarks/spherical_sky_speed.py [--omega-k -0.015] [--nside 64] [--lmax 128]
         [--kmax K] [--parts speed,wigner,counts,circles,cl] [--skies 4] [--against REV]

(speed)   topology.skies.spherical.spherical_sky for the Poincare dodecahedral space at Omega_K
          (default -0.015: chi_rec / R_c = 0.384), a generic observer, N_side 64, l_max 128, kmax
          the code's default ceil(2 l_max / chi) (668), plus healpy.alm2map, against
          healpy.synfast of the SW spectrum at the same N_side and l_max, in one run (goal: the
          sky within 5 minutes on 2 cores); and the lens space L(8,3) at the same settings. With --against REV the same sky at a kmax the old
          code can make (--against-kmax, default 100) by revision REV (a git worktree) and by
          this one: time ratio and the largest difference of their a_lm (the draws of degrees
          k <= 150 are those of the old code).
(wigner)  d^k(beta) by the Risbo recursion at k = 700 and 1000: unitarity and the difference to
          an independent exact diagonalisation (s3_harmonics.wigner_d_direct).
(counts)  invariant-mode counts of T*, O*, I*, D*_m and L(p,q) for every k <= 700 against the
          Molien series of Klein's invariants (spaces.spherical.klein_molien_series) and the
          character formula (spaces.spherical.mode_counts), with the largest projector defect.
(circles) the matched-circle identity: S at every predicted pair (predicted twist and
          orientation; project's sampling and S) on maps of the speed sky (N_side 64 and 1024),
          and of the same field (same kmax, seed) with l_max = kmax sin chi + 12, which holds
          all its power, at N_side 1024 (bilinear error ~(l pixel)^2 / 8 < 1e-4).
(cl)      skies of the covering space S^3 (Gamma = 1) at the same kmax with the tail weights:
          band means of C_l(sky) / C_l(expected) over --skies skies with their cosmic-variance
          errors, and the expected spectrum (weighted, and unweighted) over the converged one.
"""

from __future__ import annotations

import argparse
import math
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import healpy as hp
import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from topology import geometry as geo  # noqa: E402
from topology.circles import predict_circles  # noqa: E402
from topology.cosmology import Cosmology  # noqa: E402
from topology.skies.spectra import sachs_wolfe_cl  # noqa: E402
from topology.skies.spherical import s3_sachs_wolfe_cl, spherical_sky  # noqa: E402
from topology.spaces.spherical import (  # noqa: E402
    SphericalSpace, klein_molien_series, make_dodecahedral, make_lens, make_octahedral, make_prism, make_tetrahedral,
    mode_counts,
)

POSITION = [1.0, 0.2, 0.1, 0.3]
EULER = (0.3, 1.1, -0.7)


def observer():
    return geo.Observer.make("spherical", POSITION, geo.euler_zyz(*EULER))


def timed(fn):
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def part_speed(args, cosmo):
    space = make_dodecahedral({})
    t_sph, (sky, tmap) = timed(lambda: _sky_and_map(space, cosmo, args))
    cl = sachs_wolfe_cl(args.lmax, cosmo)

    def synfast():
        np.random.seed(1)   # healpy.synfast draws from numpy's global state
        return hp.synfast(cl, args.nside, lmax=args.lmax)

    t_syn, _ = timed(synfast)
    t_syn = min(t_syn, timed(synfast)[0])
    print(f"(speed) dodecahedral SW sky: Omega_K {cosmo.omega_k:g} (chi_rec/R_c = {sky.meta['chi']:.4f}), "
          f"N_side {args.nside}, l_max {args.lmax}, kmax {sky.meta['kmax']}, {sky.meta['modes']} invariant modes")
    print(f"  spherical_sky + alm2map : {t_sph:8.1f} s  (goal <= 300 s)")
    print(f"  healpy.synfast          : {t_syn:8.3f} s")
    print(f"  ratio                   : {t_sph / t_syn:8.0f} x synfast", flush=True)
    t_lens, (lens, _) = timed(lambda: _sky_and_map(make_lens({"p": 8, "q": 3}), cosmo, args))
    print(f"  lens L(8,3), same settings ({lens.meta['modes']} modes): {t_lens:.1f} s", flush=True)
    return sky, tmap


def _sky_and_map(space, cosmo, args):
    sky = spherical_sky(space, observer(), cosmo, lmax=args.lmax, nside=args.nside, kmax=args.kmax, seed=1)
    return sky, hp.alm2map(sky.alm, args.nside, lmax=args.lmax)


_OLD = """
import sys, time, json
import numpy as np
from topology import geometry as geo
from topology.cosmology import Cosmology
from topology.skies.spherical import spherical_sky
from topology.spaces.spherical import make_dodecahedral
a = json.loads(sys.argv[1])
obs = geo.Observer.make("spherical", a["pos"], geo.euler_zyz(*a["euler"]))
cosmo = Cosmology().with_omega_k(a["omega_k"])
t0 = time.perf_counter()
sky = spherical_sky(make_dodecahedral({}), obs, cosmo, lmax=a["lmax"], kmax=a["kmax"], seed=1)
print(time.perf_counter() - t0)
np.save(a["out"], sky.alm)
"""


def part_against(args, cosmo):
    import json

    tmp = Path(tempfile.mkdtemp())
    tree = tmp / "before"
    subprocess.run(["git", "-C", str(ROOT), "worktree", "add", "--detach", str(tree), args.against],
                   check=True, capture_output=True)
    try:
        res = {}
        for label, root in (("before", tree), ("after", ROOT)):
            out = tmp / f"{label}.npy"
            spec = json.dumps({"pos": POSITION, "euler": EULER, "omega_k": cosmo.omega_k, "lmax": args.lmax,
                               "kmax": args.against_kmax, "out": str(out)})
            env = dict(os.environ, PYTHONPATH=str(root))
            run = subprocess.run([sys.executable, "-c", _OLD, spec], env=env, check=True, capture_output=True,
                                 text=True, cwd=str(tmp))
            res[label] = (float(run.stdout.split()[-1]), np.load(out))
        tb, ab = res["before"]
        ta, aa = res["after"]
        print(f"(against {args.against}) dodecahedral sky, l_max {args.lmax}, kmax {args.against_kmax}: "
              f"before {tb:.1f} s, after {ta:.1f} s (ratio {tb / ta:.1f}); "
              f"max |a_lm difference| / max |a_lm| = {np.abs(aa - ab).max() / np.abs(ab).max():.1e}", flush=True)
    finally:
        subprocess.run(["git", "-C", str(ROOT), "worktree", "remove", "--force", str(tree)], capture_output=True)


def part_wigner():
    from topology.skies.s3_harmonics import wigner_d, wigner_d_direct

    beta = 1.1
    want = {700, 1000}
    t0 = time.perf_counter()
    for k, d in wigner_d([beta, math.pi / 2], max(want)):
        if k in want:
            for j, b in enumerate((beta, math.pi / 2)):
                m = d[j]
                unit = np.abs(m @ m.T - np.eye(k + 1)).max()
                diff = np.abs(m - wigner_d_direct(b, k)).max()
                print(f"(wigner) k = {k}, beta = {b:.4f}: |d d^T - 1| = {unit:.1e}, |recursion - diagonalisation| "
                      f"= {diff:.1e}", flush=True)
    print(f"  recursion to k = {max(want)} at two angles: {time.perf_counter() - t0:.1f} s")


def part_counts(kmax: int = 700):
    from topology.skies.s3_harmonics import wigner_d_halfpi
    from topology.skies.s3_invariants import group_of

    spaces = [("T*", make_tetrahedral({}), "binary_tetrahedral", {}), ("O*", make_octahedral({}), "binary_octahedral", {}),
              ("I*", make_dodecahedral({}), "binary_icosahedral", {}), ("D*_3", make_prism({"m": 3}), "binary_dihedral",
                                                                         {"m": 3}),
              ("D*_7", make_prism({"m": 7}), "binary_dihedral", {"m": 7}),
              ("L(8,1)", make_lens({"p": 8, "q": 1}), "cyclic", {"n": 8}), ("L(8,3)", make_lens({"p": 8, "q": 3}), None, {}),
              ("L(11,4)", make_lens({"p": 11, "q": 4}), None, {})]
    groups = [group_of(sp.pairs) for _, sp, _, _ in spaces]
    counts = np.zeros((len(spaces), kmax + 1), dtype=np.int64)
    defect = np.zeros(len(spaces))
    t0 = time.perf_counter()
    for k, delta in wigner_d_halfpi(kmax):
        for i, g in enumerate(groups):
            d = g.degree(k, delta)
            counts[i, k] = d.count
            defect[i] = max(defect[i], d.defect)
    print(f"(counts) invariant modes for k <= {kmax}, {len(spaces)} groups: {time.perf_counter() - t0:.1f} s")
    k = np.arange(kmax + 1)
    for i, (name, sp, fam, par) in enumerate(spaces):
        chars = mode_counts(sp, kmax)
        molien = (k + 1) * klein_molien_series(fam, kmax, **par) if fam else None
        ok_m = "n/a (two-sided)" if molien is None else ("all equal" if np.array_equal(counts[i], molien) else
                                                         f"DIFFER at {np.flatnonzero(counts[i] != molien)[:5]}")
        ok_c = "all equal" if np.array_equal(counts[i], chars) else f"DIFFER at {np.flatnonzero(counts[i] != chars)[:5]}"
        print(f"  {name:8s} sum {counts[i].sum():9d}  vs Molien: {ok_m:16s} vs characters: {ok_c:10s} "
              f"max defect {defect[i]:.1e}")


def _pair_s(tmap, pairs, m_max):
    """S (m <= m_max, search.statistic) of each predicted pair at its predicted twist and
    orientation: circle B sampled at s phi + tau, S at zero twist."""
    from topology.circles import circle_points
    from topology.search.sampling import sample_points
    from topology.search.statistic import s_of_twist

    n_phi = 4 * m_max
    phi = 2.0 * np.pi * np.arange(n_phi) / n_phi
    out = []
    for p in pairs:
        a = sample_points(tmap, circle_points(p.center_a, p.radius, phi)[None], p.center_a[None], p.radius,
                          n_phi, m_max)
        b = sample_points(tmap, circle_points(p.center_b, p.radius, p.orientation * phi + p.twist)[None],
                          p.center_b[None], p.radius, n_phi, m_max)
        out.append(float(s_of_twist(a.coeffs, b.coeffs, np.zeros(1), 1)[0]))
    return out


def part_circles(sky, args, cosmo):
    space = make_dodecahedral({})
    chi = sky.meta["chi"]
    kmax = sky.meta["kmax"]
    pairs = predict_circles(space, observer(), chi)
    radii = ", ".join(f"{math.degrees(p.radius):.1f}" for p in pairs)
    print(f"(circles) {len(pairs)} predicted pairs, radii {radii} deg; S at the predicted twist, m <= m_max")
    for nside in (args.nside, 1024):
        s = _pair_s(hp.alm2map(sky.alm, nside, lmax=args.lmax), pairs, args.lmax)
        print(f"  the speed sky (l_max {args.lmax}) at N_side {nside:4d}, m_max {args.lmax}: min S {min(s):.4f} "
              f"({', '.join(f'{v:.4f}' for v in s)})", flush=True)
    whole = int(math.ceil(kmax * math.sin(chi))) + 12
    t0 = time.perf_counter()
    full = spherical_sky(space, observer(), cosmo, lmax=whole, kmax=kmax, seed=1)
    t_full = time.perf_counter() - t0
    cl = hp.alm2cl(full.alm)
    for m_max in (args.lmax, 256):
        s = _pair_s(hp.alm2map(full.alm, 1024, lmax=whole), pairs, m_max)
        print(f"  the same field to l_max {whole} = kmax sin chi + 12 ({t_full:.0f} s; C_l({whole}) / C_l({args.lmax}) "
              f"= {cl[whole] / cl[args.lmax]:.1e}) at N_side 1024, m_max {m_max}: min S {min(s):.6f}", flush=True)
    print("  (a map cut at l_max < kmax sin chi misses the field's power above l_max, which lowers S on its circles)")


def part_cl(args, cosmo, kmax: int):
    from topology.skies.spherical import tail_weights

    chi = cosmo.chi_rec_over_curvature_radius
    trivial = SphericalSpace("trivial", np.array([[[1.0, 0, 0, 0], [1.0, 0, 0, 0]]]), {}, homogeneous=True)
    obs = geo.Observer.make("spherical", [1.0, 0.0, 0.0, 0.0])
    w, info = tail_weights(cosmo, args.lmax, kmax)
    expect = s3_sachs_wolfe_cl(cosmo, args.lmax, kmax, weights=w)
    plain = s3_sachs_wolfe_cl(cosmo, args.lmax, kmax)
    t0 = time.perf_counter()
    full = s3_sachs_wolfe_cl(cosmo, args.lmax, int(math.ceil(40 * args.lmax / chi)))
    t_full = time.perf_counter() - t0
    ratios = []
    t0 = time.perf_counter()
    for seed in range(args.skies):
        sky = spherical_sky(trivial, obs, cosmo, lmax=args.lmax, kmax=kmax, seed=100 + seed, tail=True)
        ratios.append(hp.alm2cl(sky.alm) / np.where(expect > 0, expect, 1.0))
    r = np.array(ratios)
    print(f"(cl) Gamma = 1, kmax {kmax} with tail weights (A = {info['A']:.3f}), {args.skies} skies "
          f"({(time.perf_counter() - t0) / args.skies:.0f} s each); converged SW = sum to k = 40 l_max / chi "
          f"({t_full:.0f} s)")
    print("  band     sky / expected (+- cosmic variance)   expected / converged   truncated, unweighted / converged")
    for lo, hi in [(2, 30), (31, 50), (51, 75), (76, 100), (101, args.lmax)]:
        ell = np.arange(lo, hi + 1)
        wl = 2 * ell + 1
        mean = float(np.sum(wl * r[:, lo:hi + 1].mean(axis=0)) / wl.sum())
        err = math.sqrt(2.0 / (args.skies * wl.sum()))
        held = expect[lo:hi + 1] / full[lo:hi + 1]
        bare = plain[lo:hi + 1] / full[lo:hi + 1]
        print(f"  {lo:3d}-{hi:3d}  {mean:.4f} +- {err:.4f} ({(mean - 1) / err:+.1f} sigma)          "
              f"{held.min():.4f}-{held.max():.4f}          {bare.min():.4f}-{bare.max():.4f}")


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--omega-k", type=float, default=-0.015)
    ap.add_argument("--nside", type=int, default=64)
    ap.add_argument("--lmax", type=int, default=128)
    ap.add_argument("--kmax", type=int, default=None, help="default: the code's default ceil(2 lmax / chi)")
    ap.add_argument("--parts", default="speed,wigner,counts,circles,cl")
    ap.add_argument("--skies", type=int, default=4, help="skies of S^3 for the C_l check")
    ap.add_argument("--against", default="", help="git revision to time side by side at --against-kmax")
    ap.add_argument("--against-kmax", type=int, default=100)
    args = ap.parse_args(argv)
    parts = set(args.parts.split(","))
    cosmo = Cosmology().with_omega_k(args.omega_k)
    print(f"threads: OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}, "
          f"OMP_NUM_THREADS={os.environ.get('OMP_NUM_THREADS', 'unset')}; {os.cpu_count()} cpus", flush=True)
    sky = None
    if "speed" in parts or "circles" in parts:
        sky, _ = part_speed(args, cosmo)
    if args.against:
        part_against(args, cosmo)
    if "wigner" in parts:
        part_wigner()
    if "counts" in parts:
        part_counts()
    if "circles" in parts:
        part_circles(sky, args, cosmo)
    if "cl" in parts:
        part_cl(args, cosmo, sky.meta["kmax"] if sky is not None else (args.kmax or 668))


if __name__ == "__main__":
    main()
