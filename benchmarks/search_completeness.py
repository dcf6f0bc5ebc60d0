"""Completeness of the circle search on masked skies, and what it costs, measured in one run.

(a) The validation set of topology.completeness (flat E1-E10 with observers off every axis; lens,
    prism and dodecahedral spaces with generic observers; |b| < 15 or 20 deg cuts or 300
    point-source holes; Sachs-Wolfe skies at N_side 64, 1 deg beam, 5 microK noise; searched at
    working N_side 32, 2 deg smoothing, m_max 32): found / in reach per mode in bins of the
    jointly kept fraction and the radius, each pair in reach listed with its S_eq and the best
    chance S_eq at its radius.
(b) With ``--against REV``: the same masked all-pairs search run by the code of git revision REV
    (a temporary worktree) and by this tree, side by side on the same skies: wall time per
    radius (ratio), and S_max per radius on isotropic skies observed and masked alike (the
    false-alarm side: a more complete search must not raise the chance level much).

Usage: python benchmarks/search_completeness.py [--seeds 2] [--families E3,E7,...] [--against REV]
       [--nulls 6] [--json out.json]
Last line: ``all_pairs_found=a/b antipodal_found=c/d [cost_ratio=R null_shift=D]``.
"""

from __future__ import annotations

import argparse
import json
import math
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from topology import completeness as C  # noqa: E402

SEARCH_CODE = r"""
import sys, json, time
sys.path.insert(0, sys.argv[1])
import numpy as np
from topology.maps import as_skymap
from topology.search import SearchSettings, search_sky
d = np.load(sys.argv[2])
kw = json.loads(sys.argv[4])
t0 = time.perf_counter()
out = search_sky(as_skymap(d["t"]), as_skymap(d["m"]),
                 SearchSettings(mode=sys.argv[5], radii_deg=tuple(json.loads(sys.argv[3])), **kw))
best = {}
for e in out["s_max"]:
    best[str(e["radius_deg"])] = max(best.get(str(e["radius_deg"]), -1.0), e["S_max"])
print(json.dumps({"time": time.perf_counter() - t0, "s_max": best, "reported": out["reported"]}))
"""


def completeness(args, setup) -> list[dict]:
    names = re.findall(r"[^,(]+(?:\([^)]*\))?", args.families)  # commas inside L(p,q) stay
    skies = C.validation_set(n_seeds=args.seeds, families=[n.strip() for n in names] or None)
    records = []
    t_all = time.perf_counter()
    for sky in skies:
        t0 = time.perf_counter()
        obs = C.observe_sky(sky, setup)
        recs = C.tally_observation(obs, setup, search=other_search(args.search_root) if args.search_root else None)
        records += recs
        for r in recs:
            print(f"  {sky.name:14s} cut {sky.b_cut_deg:4.1f} holes {sky.holes:3d} {r['mode']:9s} "
                  f"r {r['radius_deg']:5.1f}  f_min {r['f_min']:.2f} f_joint {r['f_joint']:.2f}  "
                  f"{'found' if r['found'] else 'MISSED'}  S_eq {r['S_eq']:.3f}  best chance {r['best_chance_S_eq']:.3f}",
                  flush=True)
        print(f"  {sky.name}: {time.perf_counter() - t0:.0f} s", flush=True)
    print(f"(a) {len(skies)} skies in {time.perf_counter() - t_all:.0f} s")
    print("mode       f_joint     radius (deg)  found / in reach")
    for row in C.completeness_table(records):
        f0, f1 = row["f_joint"]
        r0, r1 = row["radius_deg"]
        print(f"{row['mode']:9s}  {f0:.1f}-{f1:.1f}     {r0:2d}-{r1:2d}         {row['found']:3d} / {row['in_reach']}")
    return records


def other_search(root: str):
    """The search of the package in ``root`` (another version of the code), for tally_observation."""
    def search(o, setup, mode, radii):
        return run_search(root, o.temperature, o.mask, radii, setup.search, mode)
    return search


def run_search(root: str, t: np.ndarray, m: np.ndarray, radii, settings: dict, mode: str) -> dict:
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "sky.npz"
        np.savez(path, t=t, m=m)
        out = subprocess.run([sys.executable, "-c", SEARCH_CODE, root, str(path), json.dumps(list(radii)),
                              json.dumps(settings), mode], capture_output=True, text=True, check=True, cwd=tmp)
    return json.loads(out.stdout.strip().splitlines()[-1])


def against(args, setup) -> tuple[float, float]:
    """Side by side with revision REV: time ratio on validation skies, shift of null S_max."""
    from topology.cosmology import Cosmology
    from topology.skies.instrument import observe
    from topology.skies.isotropic import isotropic_sky

    tmp = Path(tempfile.mkdtemp()) / "before"
    subprocess.run(["git", "-C", str(ROOT), "worktree", "add", "--detach", str(tmp), args.against],
                   check=True, capture_output=True)
    try:
        times = {"before": 0.0, "after": 0.0}
        for sky in C.validation_set(n_seeds=1)[:: max(1, args.cost_every)]:
            obs = C.observe_sky(sky, setup)
            radii = sorted({round(math.degrees(p.radius), 4) for p, f in zip(obs.pairs, obs.fractions)
                            if C.in_reach(p, f) == "all-pairs"})[:2]
            if not radii:
                continue
            for label, root in (("before", str(tmp)), ("after", str(ROOT))):
                res = run_search(root, obs.temperature, obs.mask, radii, setup.search, "all-pairs")
                times[label] += res["time"]
            print(f"  cost {sky.name}: radii {radii} before {times['before']:.1f} s after {times['after']:.1f} s "
                  "(cumulative)", flush=True)
        ratio = times["after"] / times["before"]
        radii = (20.0, 35.0, 50.0, 65.0)
        smax = {"before": [], "after": []}
        mask = C.sky_mask(C.ValidationSky("null", {"family": "E1"}, (0, 0, 0), (0, 0, 0), b_cut_deg=15.0), setup.nside)
        for seed in range(args.nulls):
            s = isotropic_sky(Cosmology(), lmax=setup.lmax, seed=5000 + seed)
            t = observe(s, nside=setup.nside, fwhm_deg=setup.beam_deg, noise_uk=setup.noise_uk, seed=5000 + seed,
                        lmax=min(setup.lmax, 3 * setup.nside - 1))
            for label, root in (("before", str(tmp)), ("after", str(ROOT))):
                res = run_search(root, t, mask, radii, setup.search, "all-pairs")
                smax[label].append([res["s_max"][str(r)] for r in radii])
        b, a = np.array(smax["before"]), np.array(smax["after"])
        print(f"(b) cost per radius, after / before: {ratio:.2f}")
        print("    null S_max (|b| < 15 deg cut), mean +- spread over", args.nulls, "skies")
        for j, r in enumerate(radii):
            print(f"    r {r:4.1f}: before {b[:, j].mean():.3f} +- {b[:, j].std():.3f}   "
                  f"after {a[:, j].mean():.3f} +- {a[:, j].std():.3f}")
        return ratio, float((a - b).mean())
    finally:
        subprocess.run(["git", "-C", str(ROOT), "worktree", "remove", "--force", str(tmp)], capture_output=True)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=2, help="observers and seeds per space (17 skies each)")
    ap.add_argument("--families", default="", help="comma-separated families or lens/prism labels, e.g. E3,L(7,2)")
    ap.add_argument("--against", default="", help="git revision to compare cost and null S_max with")
    ap.add_argument("--nulls", type=int, default=6, help="isotropic skies for the null comparison")
    ap.add_argument("--cost-every", type=int, default=3, help="time every k-th validation sky")
    ap.add_argument("--json", default="", help="write the per-pair records here")
    ap.add_argument("--search-root", default="", help="run the searches of (a) with the package in this folder "
                    "(e.g. a worktree of an older commit); skies and tally are this tree's")
    args = ap.parse_args()
    setup = C.SearchSetup()
    records = completeness(args, setup)
    if args.json:
        Path(args.json).write_text(json.dumps(records, indent=1, default=float))
    tail = []
    for mode in ("all-pairs", "antipodal"):
        rec = [r for r in records if r["mode"] == mode]
        tail.append(f"{mode.replace('-', '_')}_found={sum(r['found'] for r in rec)}/{len(rec)}")
    if args.against:
        ratio, shift = against(args, setup)
        tail += [f"cost_ratio={ratio:.2f}", f"null_shift={shift:+.3f}"]
    print(" ".join(tail))


if __name__ == "__main__":
    main()
