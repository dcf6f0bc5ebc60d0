"""Speed of the all-pairs S kernel, measured side by side in one run on this machine.

(a) the blocked BLAS kernel's useful floating-point rate (2 * rows * 2M * columns per product)
    as a fraction of numpy's float32 matrix product of the same shapes (pure sgemm into a
    preallocated output), on one radius of an N_side 16 centre grid (3072 circles, M = 64);
(b) its speed-up over a batched numpy FFT implementation of the same statistic (cross-spectra of a
    block of pairs, inverse FFT over the twist, maximum), on the same inputs and twist grid,
    with the same results to 1e-5;
(c) the wall time of an all-pairs search of an N_side 128 map smoothed to 1 deg, centres on an
    N_side 16 grid refined to 1 deg (and polished below), m_max 64, radii 5-90 deg in 1 deg steps,
    both orientations; with the peak resident memory of the process.

Last line: ``ratio_to_sgemm=A speedup_vs_fft=B full_search_s=C``.
Usage: python benchmarks/search_kernel.py [--radii 5:90:1] [--seed 1]
"""

from __future__ import annotations

import argparse
import resource
import sys
import time

import healpy as hp
import numpy as np

from topology.maps import as_skymap
from topology.search import SearchSettings, parse_radii, search_sky
from topology.search import statistic as st
from topology.search.allpairs import twist_count
from topology.search.sampling import centre_grid


def isotropic_sky(nside: int, seed: int) -> np.ndarray:
    """Gaussian sky with C_l = 1 / (l (l + 1)), l >= 2 (Sachs-Wolfe plateau; common practice)."""
    rng = np.random.default_rng(seed)
    lmax = 3 * nside - 1
    ell, m = hp.Alm.getlm(lmax)
    cl = np.zeros(lmax + 1)
    cl[2:] = 1.0 / (np.arange(2, lmax + 1) * np.arange(3, lmax + 2))
    sig = np.sqrt(cl[ell])
    alm = np.where(m == 0, rng.standard_normal(ell.size) * sig,
                   (rng.standard_normal(ell.size) + 1j * rng.standard_normal(ell.size)) * sig / np.sqrt(2))
    return hp.alm2map(alm.astype(complex), nside, lmax=lmax)


def kernel_vs_sgemm(a: np.ndarray, n_tau: int, mem_bytes: int) -> tuple[float, float, float]:
    """Time the blocked kernel (rows rotated by every twist, product, max over twists, S) over the
    upper triangle of all pairs, and pure sgemm of the same block shapes. Returns (t_kernel,
    t_sgemm, useful flops)."""
    n, mc = a.shape
    norms = np.sum(np.abs(a) ** 2, axis=1).astype(np.float32)
    cols_all = st.column_matrix(a)
    blk = st.block_rows_for(n_tau, n, mem_bytes)
    flops = 0.0
    t_kernel = 0.0
    t_sgemm = 0.0
    buf = np.empty(blk * n_tau * 2 * n, dtype=np.float32)
    for b0 in range(0, n, blk):
        rows_idx = np.arange(b0, min(n, b0 + blk))
        col_idx = np.arange(b0, n)
        t0 = time.perf_counter()
        rows = st.rotated_rows(a[rows_idx], n_tau)
        cols = np.concatenate([cols_all[:, col_idx], cols_all[:, n + col_idx]], axis=1)
        out = buf[: rows_idx.size * n_tau * cols.shape[1]].reshape(rows_idx.size * n_tau, cols.shape[1])
        num = st.blas_max_over_twist(rows, cols, out)
        nc = col_idx.size
        den = norms[rows_idx][:, None] + norms[col_idx][None, :]
        s_same = num[:, :nc] / den
        s_opp = num[:, nc:] / den
        s_same.max(), s_opp.max()
        t_kernel += time.perf_counter() - t0
        x = rows.reshape(-1, 2 * mc)
        t0 = time.perf_counter()
        np.matmul(x, cols, out=out)
        t_sgemm += time.perf_counter() - t0
        flops += 2.0 * x.shape[0] * x.shape[1] * cols.shape[1]
    return t_kernel, t_sgemm, flops


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--radii", default="5:90:1")
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args(argv)
    mem = 128 << 20
    # (a), (b): one radius of the coarse stage at m = 64 -----------------------------------------
    rng = np.random.default_rng(args.seed)
    centers = centre_grid(16)
    M = 64
    coeffs = (rng.standard_normal((len(centers), M + 1)) + 1j * rng.standard_normal((len(centers), M + 1)))
    coeffs /= np.sqrt(np.arange(1, M + 2))
    a = st.weighted(coeffs, M)
    n_tau = twist_count(M, 2.0)
    kernel_vs_sgemm(a[:256], n_tau, mem)  # warm up
    t_k, t_g, flops = kernel_vs_sgemm(a, n_tau, mem)
    ratio = t_g / t_k
    print(f"(a) kernel: {len(centers)} circles, M = {M}, {n_tau} twists, both orientations: {t_k:.2f} s, "
          f"{flops / t_k / 1e9:.1f} GFLOP/s useful; sgemm of the same shapes {t_g:.2f} s "
          f"({flops / t_g / 1e9:.1f} GFLOP/s); ratio {ratio:.2f}")
    rows = np.arange(64)
    t0 = time.perf_counter()
    num_b = st.blas_max_over_twist(st.rotated_rows(a[rows], n_tau), st.column_matrix(a))
    t_b = time.perf_counter() - t0
    t0 = time.perf_counter()
    num_f = st.fft_max_over_twist(a[rows], a, n_tau)
    t_f = time.perf_counter() - t0
    den = np.sum(np.abs(a) ** 2, axis=1)
    den2 = np.tile(den[rows][:, None] + den[None, :], (1, 2))
    diff = float(np.max(np.abs(num_b / den2 - num_f / den2)))
    speedup = t_f / t_b
    print(f"(b) {rows.size} x {len(centers)} pairs: BLAS {t_b:.3f} s, batched FFT {t_f:.3f} s, "
          f"speed-up {speedup:.1f}; max |S_blas - S_fft| = {diff:.2e}")
    if diff > 1e-5:
        print("(b) RESULTS DIFFER by more than 1e-5", file=sys.stderr)
        return 1
    # (c) full search -------------------------------------------------------------------------
    sky = as_skymap(isotropic_sky(128, args.seed))
    settings = SearchSettings(mode="all-pairs", radii_deg=parse_radii(args.radii), fwhm_deg=1.0, nside_work=128,
                              m_max=64, centre_nside=16)
    t0 = time.perf_counter()
    out = search_sky(sky, None, settings, show_progress=None)
    full = time.perf_counter() - t0
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    lv = out["levels"]
    print(f"(c) all-pairs search, {len(settings.radii_deg)} radii, levels "
          + ", ".join(f"N_side {v['nside']} (FWHM {v['fwhm_deg']:.2f} deg, m_cut {v['m_cut']})" for v in lv)
          + f": {full:.1f} s; work {out['work']}; peak resident memory {peak_mb:.0f} MB")
    print(f"ratio_to_sgemm={ratio:.2f} speedup_vs_fft={speedup:.2f} full_search_s={full:.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
