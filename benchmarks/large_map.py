"""Memory and time of reading and preparing full-resolution maps (issue 13), in one run.

    python benchmarks/large_map.py [--nsides 1024 2048 4096] [--nside-work 128] [--dir DIR]

For each N_side, a float32 map (white noise of 100 microK per pixel, seed 1: this is about memory,
not about the sky) and a float32 0/1 mask (|b| >= 20 deg) are written as HEALPix FITS tables
(1024 pixels per row, RING, like healpy.write_map) into a temporary folder. A fresh process per
N_side then runs the preparation steps of `topology search` one by one:

    read map, read mask, mask weights (the command's sky-fraction check: coverage, regrade, kept
    fraction), dipole fit (normal equations over blocks), working mask, map2alm (the weighted map,
    one Jacobi iteration, l_max = 3 N_side_work - 1), working map (alm2map on the sampling grid)

and prints each step's time, its peak resident memory (VmHWM, reset before the step through
/proc/self/clear_refs) and the memory resident after it; the process's own peak is
the largest step peak (clear_refs resets the high-water mark of getrusage(RUSAGE_SELF).ru_maxrss
too). Finally the whole command

    topology search map.fits --mask mask.fits --nside-work 128 --mode antipodal --radii 20:22:1

runs on the N_side 2048 files as a child process, and its peak resident memory (ru_maxrss of that
child, from os.wait4) is compared with the 1.5 GB target. N_side 4096 (two 805 MB files) is
skipped when the estimated peak (22 bytes per pixel plus 0.2 GB) exceeds what /proc/meminfo
calls available; the output says so.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

TARGET_GB = 1.5
SEED = 1
BYTES_PER_PIXEL = 22  # map and mask (float32 + bool each: 10) + transform input (4) + healpy's float64 (8)
BASE_GB = 0.2


def _status(key: str) -> int:
    """A /proc/self/status value in bytes (VmHWM, VmRSS)."""
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith(key + ":"):
                return int(line.split()[1]) * 1024
    return 0


def _reset_peak() -> bool:
    """Reset VmHWM to the current resident size (Linux >= 4.0); False where not possible."""
    try:
        with open("/proc/self/clear_refs", "w") as fh:
            fh.write("5")
        return True
    except OSError:
        return False


def _available_bytes() -> int:
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return 0


# ---------------------------------------------------------------------------------------------
# input files, written row block by row block (the writer holds one block, not the map)
# ---------------------------------------------------------------------------------------------
def _write_map(path: Path, nside: int, block_values) -> None:
    from astropy.io import fits

    npix = 12 * nside * nside
    rows = npix // 1024
    hdu = fits.BinTableHDU.from_columns([fits.Column(name="TEMPERATURE", format="1024E",
                                                     array=np.zeros((1, 1024), np.float32))])
    hdu.header["NAXIS2"] = rows
    for k, v in (("PIXTYPE", "HEALPIX"), ("ORDERING", "RING"), ("NSIDE", nside), ("INDXSCHM", "IMPLICIT"),
                 ("FIRSTPIX", 0), ("LASTPIX", npix - 1)):
        hdu.header[k] = v
    with open(path, "wb") as fh:
        fh.write(fits.PrimaryHDU().header.tostring().encode("ascii"))
        fh.write(hdu.header.tostring().encode("ascii"))
        written = 0
        for a in range(0, npix, 1 << 22):
            block = block_values(a, min(a + (1 << 22), npix)).astype(">f4")
            fh.write(block.tobytes())
            written += block.nbytes
        fh.write(bytes(-written % 2880))


def make_files(folder: Path, nside: int) -> tuple[Path, Path]:
    import healpy as hp

    rng = np.random.default_rng(SEED)
    m, k = folder / f"map{nside}.fits", folder / f"mask{nside}.fits"
    _write_map(m, nside, lambda a, b: rng.standard_normal(b - a, dtype=np.float32) * 100.0)
    _write_map(k, nside, lambda a, b: (np.abs(hp.pix2vec(nside, np.arange(a, b))[2]) >= np.sin(np.radians(20)))
               .astype(np.float32))
    return m, k


# ---------------------------------------------------------------------------------------------
# the preparation steps, in a fresh process
# ---------------------------------------------------------------------------------------------
def steps(map_path: str, mask_path: str, nside_work: int) -> dict:
    import healpy  # noqa: F401  (imported before the first step: its time and memory are not the map's)
    from astropy.io import fits  # noqa: F401

    from topology import maps
    from topology.errors import quiet_notes

    out = {"base_rss": _status("VmRSS"), "steps": [], "peak_reset": _reset_peak()}
    state = {}

    def step(name, fn):
        _reset_peak()
        t0 = time.perf_counter()
        fn()
        out["steps"].append({"step": name, "s": time.perf_counter() - t0, "peak": _status("VmHWM"),
                             "after": _status("VmRSS")})

    with quiet_notes():
        step("read map", lambda: state.update(sky=maps.read_healpix(map_path)))
        step("read mask", lambda: state.update(mask=maps.read_healpix(mask_path, what="mask")))
        sky, mask = state["sky"], state["mask"]
        step("mask weights", lambda: maps.check_sky_fraction(sky, mask, 0.2))
        step("dipole fit",
             lambda: state.update(coef=maps.fit_normal_equations(sky.values, maps.weight_blocks(mask, sky))))
        step("working mask", lambda: state.update(mask_work=maps.working_mask(mask, sky, nside_work, 0.5)))
        lmax = min(3 * sky.nside - 1, 3 * nside_work - 1)
        step("map2alm", lambda: state.update(alm=maps.weighted_alm(sky, mask, state["coef"], lmax, 1)))
        pm = maps.PreparedMap(state["alm"], lmax, nside_work, state["mask_work"], np.radians(1.0), None, None,
                              state["coef"], float(state["mask_work"].mean()))
        step("working map", lambda: pm.working_map())
    # the process's peak: clear_refs resets the high-water mark that ru_maxrss reports too, so the
    # largest step peak (and ru_maxrss where the reset is not possible)
    out["peak"] = max([s["peak"] for s in out["steps"]] + [resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024])
    return out


def _child_json(args: list[str]) -> dict:
    res = subprocess.run([sys.executable, __file__, *args], capture_output=True, text=True, check=True)
    return json.loads(res.stdout.strip().splitlines()[-1])


def search_peak(map_path: Path, mask_path: Path, nside_work: int, folder: Path) -> tuple[float, int, int]:
    """Wall time, exit status and peak resident bytes (ru_maxrss of this one child) of the command."""
    cmd = [sys.executable, "-m", "topology", "search", str(map_path), "--mask", str(mask_path), "--nside-work",
           str(nside_work), "--mode", "antipodal", "--radii", "20:22:1", "--quiet"]
    t0 = time.perf_counter()
    with open(folder / "search.out", "w") as so, open(folder / "search.err", "w") as se:
        p = subprocess.Popen(cmd, stdout=so, stderr=se, cwd=folder)
        _, status, usage = os.wait4(p.pid, 0)
        p.returncode = os.waitstatus_to_exitcode(status)
    return time.perf_counter() - t0, p.returncode, usage.ru_maxrss * 1024


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("--nsides", type=int, nargs="+", default=[1024, 2048, 4096])
    ap.add_argument("--nside-work", type=int, default=128)
    ap.add_argument("--dir", help="folder for the maps (default: a temporary folder, removed at the end)")
    ap.add_argument("--make", nargs=2, metavar=("NSIDE", "DIR"), help=argparse.SUPPRESS)
    ap.add_argument("--steps", nargs=2, metavar=("MAP", "MASK"), help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.make:
        m, k = make_files(Path(args.make[1]), int(args.make[0]))
        print(json.dumps({"map": str(m), "mask": str(k)}))
        return
    if args.steps:
        print(json.dumps(steps(args.steps[0], args.steps[1], args.nside_work)))
        return

    tmp = tempfile.TemporaryDirectory(prefix="large_map_") if args.dir is None else None
    folder = Path(args.dir or tmp.name)
    folder.mkdir(parents=True, exist_ok=True)
    gb = 1e9
    print(f"float32 map and mask, N_side_work {args.nside_work}; memory in GB (1e9 bytes); "
          f"{_available_bytes() / gb:.1f} GB available, {os.cpu_count()} cores")
    print(f"{'N_side':>6} {'step':<13} {'time s':>7} {'step peak':>10} {'after':>7}")
    files = {}
    try:
        for nside in args.nsides:
            npix = 12 * nside * nside
            need = BYTES_PER_PIXEL * npix + BASE_GB * gb
            disk = 2 * 4 * npix
            if need > _available_bytes() or disk > shutil.disk_usage(folder).free:
                print(f"{nside:>6} skipped: estimated peak {need / gb:.1f} GB ({BYTES_PER_PIXEL} bytes per pixel + "
                      f"{BASE_GB} GB) against {_available_bytes() / gb:.1f} GB available, files {disk / gb:.1f} GB "
                      f"against {shutil.disk_usage(folder).free / gb:.1f} GB free disk")
                continue
            t0 = time.perf_counter()
            made = _child_json(["--make", str(nside), str(folder)])
            files[nside] = (Path(made["map"]), Path(made["mask"]))
            t_make = time.perf_counter() - t0
            res = _child_json(["--steps", made["map"], made["mask"], "--nside-work", str(args.nside_work)])
            for s in res["steps"]:
                print(f"{nside:>6} {s['step']:<13} {s['s']:7.2f} {s['peak'] / gb:10.2f} {s['after'] / gb:7.2f}")
            print(f"{nside:>6} {'whole':<13} {sum(s['s'] for s in res['steps']):7.2f} {res['peak'] / gb:10.2f} "
                  f"{'':>7}  peak of the process = {res['peak'] / npix:.1f} bytes per pixel "
                  f"(start {res['base_rss'] / gb:.2f} GB; files written in {t_make:.1f} s"
                  f"{'' if res['peak_reset'] else '; step peaks cumulative: no clear_refs'})")
            if nside != 2048:
                for p in files.pop(nside):
                    p.unlink()
        if 2048 in files:
            t, code, peak = search_peak(*files[2048], args.nside_work, folder)
            ok = code == 0 and peak <= TARGET_GB * gb
            print(f"topology search, N_side 2048 float32 map and mask, antipodal, N_side_work {args.nside_work}, "
                  f"radii 20:22:1: {t:.1f} s, exit {code}, peak resident {peak / gb:.2f} GB against the "
                  f"{TARGET_GB} GB target: {'within' if ok else 'OVER'}")
        else:
            print("topology search on N_side 2048: not measured (N_side 2048 not among --nsides or skipped)")
    finally:
        if tmp is not None:
            tmp.cleanup()


if __name__ == "__main__":
    main()
