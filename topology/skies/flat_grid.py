"""The grid method of flat skies: the invariant modes on a 3-D FFT grid of the covering torus,
sampled at the HEALPix pixel centres.

The same c_q as the eigenmode method (:mod:`topology.skies.flat_modes`) are placed on a 3-D
FFT grid of the covering torus in lattice coordinates, divided by the Fourier transform of the
cubic B-spline (sinc^4 per axis), inverse FFT (scipy.fft, float32) and sampled at the HEALPix
pixel centres by cubic B-spline interpolation of those coefficients
(scipy.ndimage.map_coordinates, periodic). This is the B-spline non-uniform FFT of Beylkin
(1995, Appl. Comput. Harmon. Anal. 2, 363): in-band response exact, aliasing per axis
~ (w / (2 pi - w))^4 at w = pi / oversample, sent to k > (2 oversample - 1) kchi_max. Grid size
per axis: N_d = fast_size(2 oversample n_max_d + 2) (the next 2^a 3^b 5^c), n_max_d = kchi_max
|a_d| / (2 pi) the largest index of the ball, i.e. the shortest wavelength 2 pi chi_rec /
kchi_max (= 2 pi chi_rec / lmax by default) is sampled by 2 oversample cells. Default oversample
1.2 (2.4 cells): rms error ~1% of the map against the eigenmode sky (error power 0.3% of C_l at
l = kchi_max, 4e-5 at kchi_max / 2: the aliases land mostly above the band), 0.1% at 2, 0.02%
at 3 (tests); spline_order 2 (quadratic, deconvolved by sinc^3) samples ~2x faster with ~2.5%
rms. Only the Sachs-Wolfe term (one thin shell of one 3-D field).

How it is made fast (the arithmetic is that of the exact transform): the torus E1 writes
-sigma z / B^ block by block straight into the rfft half spectrum (:func:`dense_torus_spectrum`;
sigma from a table over |n|^2-like integers for commensurate lattices, else a float32 power
law), twisted families from the mode list (:func:`mode_list_spectrum`); the inverse FFT runs in
place and skips the rows and planes outside the ball's index box (:func:`band_limited_irfft`:
the n2 transform on 2 m1 + 1 of N1 rows, both complex transforms on m3 + 1 of N3/2 + 1 planes);
the pixels are sampled in NESTED order (neighbouring pixels share grid cells in cache) with
coordinates reduced to the cell, then put in RING order (:func:`grid_map`). The grid sky equals
the unpruned transform's to float32 rounding (~1e-6 of the map rms). Memory: the complex64 half
spectrum and the float32 grid (~8 bytes x N1 N2 N3 together); E1 of side 1.6 chi_rec at N_side
256, l_max 512: grid 320^3, peak resident memory ~0.43 GB (float32 throughout the grid: the
interpolation error, ~1e-2, dwarfs float32 rounding, ~1e-7). Speed:
benchmarks/flat_sky_speed.py.
"""

from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import scipy.fft
from scipy import ndimage

from ..errors import InputError
from .flat_modes import (
    BLOCK, CutProfile, block_gaussians, hermitian_plane, index_blocks, index_bounds, invariant_coefficients,
    plain_profile, sw_sigma_constant, thread_count,
)
from .spectra import N_S

MAX_GRID_CELLS = 2.0e9     # grid guard: cells of the FFT grid


def fast_size(n: int) -> int:
    """Smallest 2^a 3^b 5^c >= n (sizes pocketfft transforms fastest; common practice)."""
    best = None
    p5 = 1
    while p5 < 2 * n:
        p3 = p5
        while p3 < 2 * n:
            p2 = p3
            while p2 < n:
                p2 *= 2
            best = p2 if best is None else min(best, p2)
            p3 *= 3
        p5 *= 5
    return int(best)


def grid_shape(space, kchi_max: float, oversample: float) -> tuple[int, int, int]:
    """FFT grid (N1, N2, N3): N_d = fast_size(ceil(2 oversample n_max_d) + 2), even."""
    m = index_bounds(space.lattice, kchi_max)
    shape = []
    for d in range(3):
        want = int(math.ceil(2.0 * oversample * m[d])) + 2
        shape.append(fast_size(max(want + (want % 2), 8)))
    return tuple(shape)


def _bspline_deconv(n: np.ndarray, N: int, order: int = 3) -> np.ndarray:
    """1 / FT of the B-spline of ``order`` at w = 2 pi n / N: 1 / sinc^(order+1)(n / N) (numpy sinc)."""
    return (1.0 / np.sinc(np.asarray(n, dtype=float) / N) ** (order + 1)).astype(np.float32)


def _integer_form(G: np.ndarray, m, max_table: int = 1 << 22):
    """(g, S, s_box) with G = g S, S a small integer matrix (commensurate lattices: every cubic
    torus, sides in ratio sqrt of integers...), so that |k|^2 = g (n S n^T) is an integer
    multiple of g and sigma a table over s = n S n^T <= s_box (a bound over the index box);
    None if G has no such form or the table would exceed ``max_table`` entries."""
    g0 = float(np.min(np.diag(G)))
    mf = np.asarray(m, dtype=float)
    for q in range(1, 25):
        S = G * (q / g0)
        Si = np.rint(S)
        if np.abs(S - Si).max() <= 1e-9 * np.abs(S).max():
            s_box = float(mf @ np.abs(Si) @ mf)
            if s_box + 1 > max_table:
                return None
            return g0 / q, Si.astype(np.int64), int(s_box)
    return None


def _radial_weight(weight, kchi_max: float):
    """(w(|k|) callable, edge below which w = 1) of a grid's ``weight``: None -> the taper of the
    cut; a :class:`~topology.skies.flat_modes.CutProfile` -> its weight and edge; a callable
    (one shell of the transfer) -> itself, edge 0."""
    if weight is None:
        weight = plain_profile(kchi_max)
    if isinstance(weight, CutProfile):
        return weight.weight, weight.edge
    return weight, 0.0


def dense_torus_spectrum(space, cosmology, seed: int, kchi_max: float, shape, workers: int | None = None,
                         order: int = 3, weight=None) -> np.ndarray:
    """Half spectrum (complex64 (N1, N2, N3//2 + 1), index n mod N) of the torus E1 for the grid:
    -sigma(k) w(k) z_n / B^(n) with B^ the B-spline transform and w the radial weight of
    ``weight`` (None: the taper of :func:`~topology.skies.flat_modes.cut_weight`; a
    :class:`~topology.skies.flat_modes.CutProfile`; or a callable w(|k|), k chi_rec: a shell of
    the transfer, its profile included), zero outside 0 < |k| <= kchi_max (the ball of
    :func:`~topology.skies.flat_modes.half_ball_modes`).

    Block by block: each block's normals (:func:`~topology.skies.flat_modes.block_gaussians`,
    the stream of the eigenmode method) are scaled by sigma and written once into the spectrum;
    no box-sized temporaries. sigma is the power law of
    :func:`~topology.skies.flat_modes.sw_sigma_constant`, taken from a table over s = n S n^T
    when |k|^2 = g s with S an integer matrix (:func:`_integer_form`), else by a float32 power.
    Blocks run on ``workers`` threads (the generator and numpy's loops release the GIL). z_n
    equals the eigenmode method's up to float32 rounding (the factor 1/sqrt 2 is folded into
    sigma).
    """
    A = space.lattice
    D = np.linalg.inv(A).T
    m = index_bounds(A, kchi_max)
    N1, N2, N3 = shape
    spec = np.zeros((N1, N2, N3 // 2 + 1), dtype=np.complex64)
    sf = spec.view(np.float32).reshape(N1, N2, N3 // 2 + 1, 2)   # [..., 0] real, [..., 1] imaginary
    G = 4.0 * np.pi**2 * (D @ D.T)
    idx = [np.arange(-m[0], m[0] + 1), np.arange(-m[1], m[1] + 1), np.arange(0, m[2] + 1)]
    base = [int(m[0]), int(m[1]), 0]                  # index n -> position n + base in the tables
    scale = -sw_sigma_constant(cosmology, space.covering_cell_volume) * math.sqrt(0.5)
    dec = [_bspline_deconv(idx[0], N1, order), _bspline_deconv(idx[1], N2, order),
           _bspline_deconv(idx[2], N3, order)]
    lim = kchi_max**2 * (1 + 1e-12)
    radial_weight, edge = _radial_weight(weight, kchi_max)
    edge2 = edge * edge

    power = (N_S - 4.0) / 4.0
    form = _integer_form(G, m)
    if form is not None:
        g, S, s_box = form
        table = np.zeros(s_box + 1)
        sv = np.arange(1, s_box + 1, dtype=float)
        inside = g * sv <= lim
        table[1:][inside] = scale * (g * sv[inside]) ** power * radial_weight(np.sqrt(g * sv[inside]))
        table = table.astype(np.float32)
        diag = [(S[d, d] * idx[d] ** 2).astype(np.int32) for d in range(3)]
        cross = [(a, c, int(2 * S[a, c])) for a, c in ((0, 1), (0, 2), (1, 2)) if S[a, c] != 0]
    else:
        quad = [G[d, d] * idx[d].astype(float) ** 2 for d in range(3)]
        cross = [(a, c, 2.0 * G[a, c]) for a, c in ((0, 1), (0, 2), (1, 2)) if G[a, c] != 0]
        dec[0] = dec[0] * np.float32(scale)
    sizes = (N1, N2)

    def bcast(arr, d, t):
        shp = [1, 1, 1]
        shp[d] = -1
        return arr[t[d]].reshape(shp)

    def one(b, s, e):
        z = block_gaussians(seed, b)
        o = b * BLOCK
        sub = tuple(slice(s[d] - o[d], e[d] - o[d] + 1) for d in range(3))
        t = [slice(s[d] + base[d], e[d] + base[d] + 1) for d in range(3)]
        origin = s[0] <= 0 <= e[0] and s[1] <= 0 <= e[1] and s[2] == 0
        if form is not None:
            sq = bcast(diag[0], 0, t) + bcast(diag[1], 1, t) + bcast(diag[2], 2, t)
            for a_, c_, w_ in cross:
                sq = sq + w_ * bcast(idx[a_], a_, t).astype(np.int32) * bcast(idx[c_], c_, t).astype(np.int32)
            sig = table.take(sq)                      # s = 0 (the origin) -> 0
        else:
            k2 = bcast(quad[0], 0, t) + bcast(quad[1], 1, t) + bcast(quad[2], 2, t)
            for a_, c_, w_ in cross:
                k2 = k2 + w_ * bcast(idx[a_], a_, t) * bcast(idx[c_], c_, t)
            if origin:
                k2[-s[0], -s[1], 0] = np.inf
            k2[k2 > lim] = np.inf                     # inf^power = 0 (power < 0)
            sig = k2.astype(np.float32)
            np.power(sig, np.float32(power), out=sig)
            taper = np.isfinite(k2) & (k2 > edge2)     # the taper zone below the cut (everywhere for a shell)
            if taper.any():
                sig[taper] *= radial_weight(np.sqrt(k2[taper])).astype(np.float32)
        sig *= bcast(dec[0], 0, t)
        sig *= bcast(dec[1], 1, t) * bcast(dec[2], 2, t)
        # a block never straddles n = 0, so it lands contiguously at n mod N
        dst = tuple(slice(s[d] % sizes[d], s[d] % sizes[d] + e[d] - s[d] + 1) for d in range(2)) + \
            (slice(s[2], e[2] + 1),)
        np.multiply(z[0][sub], sig, out=sf[dst + (0,)])
        np.multiply(z[1][sub], sig, out=sf[dst + (1,)])

    jobs = index_blocks(m, D, kchi_max)
    nt = min(thread_count(workers), max(1, len(jobs) // 8))
    if nt > 1:
        with ThreadPoolExecutor(nt) as ex:
            list(ex.map(lambda part: [one(*j) for j in part], [jobs[i::nt] for i in range(nt)]))
    else:
        for j in jobs:
            one(*j)
    n1 = np.where(np.arange(N1) <= N1 // 2, np.arange(N1), np.arange(N1) - N1)
    n2 = np.where(np.arange(N2) <= N2 // 2, np.arange(N2), np.arange(N2) - N2)
    hermitian_plane(spec[:, :, 0], n1, n2, (-np.arange(N1)) % N1, (-np.arange(N2)) % N2)
    return spec


def mode_list_spectrum(space, cosmology, seed: int, kchi_max: float, shape, workers: int | None = None,
                       order: int = 3, weight=None) -> np.ndarray:
    """The half spectrum of :func:`dense_torus_spectrum` for any family, from the invariant mode
    list c_q of :func:`~topology.skies.flat_modes.invariant_coefficients` (divided by the
    B-spline transform)."""
    N1, N2, N3 = shape
    spec = np.zeros((N1, N2, N3 // 2 + 1), dtype=np.complex64)
    n, k, c = invariant_coefficients(space, cosmology, seed, kchi_max, workers)
    kn = np.linalg.norm(k, axis=1)
    c = c * _radial_weight(weight, kchi_max)[0](kn)
    c = c * (_bspline_deconv(n[:, 0], N1, order) * _bspline_deconv(n[:, 1], N2, order)
             * _bspline_deconv(n[:, 2], N3, order))
    spec[n[:, 0] % N1, n[:, 1] % N2, n[:, 2]] = c
    z0 = n[:, 2] == 0
    spec[(-n[z0, 0]) % N1, (-n[z0, 1]) % N2, 0] = np.conj(c[z0])
    return spec


def band_limited_irfft(spec: np.ndarray, shape, m, workers: int | None = None) -> np.ndarray:
    """scipy.fft.irfftn(spec, s=shape, norm="forward") for a spectrum that vanishes outside
    |n_d| <= m_d, in place and pruned: the n2 transform runs only on the rows |n1| <= m1 and
    both complex transforms only on the planes n3 <= m3 (the others are zero and stay zero);
    then the real transform along axis 3. ``spec`` is overwritten."""
    N1, N2, N3 = shape
    w = thread_count(workers)
    h = int(m[2]) + 1
    if 2 * int(m[0]) + 1 < N1:
        rows = [slice(0, int(m[0]) + 1)] + ([slice(N1 - int(m[0]), N1)] if m[0] > 0 else [])
    else:
        rows = [slice(None)]
    for axis, parts in ((1, rows), (0, [slice(None)])):
        for r in parts:
            v = spec[r, :, :h]
            out = scipy.fft.ifft(v, axis=axis, norm="forward", workers=w, overwrite_x=True)
            if not np.shares_memory(out, spec):   # scipy chose not to work in place
                v[...] = out
    return scipy.fft.irfft(spec, n=N3, axis=2, norm="forward", workers=w, overwrite_x=True)


def torus_grid(space, cosmology, seed: int, kchi_max: float, oversample: float = 1.2,
               workers: int | None = None, order: int = 3, weight=None) -> np.ndarray:
    """B-spline coefficients (float32, shape grid_shape) of the SW temperature on the torus cell
    (with ``weight(|k|)`` in place of the cut's taper: one shell of the transfer).

    Index (j1, j2, j3) is the point x = sum_d (j_d / N_d) a_d; sample with
    :func:`sample_grid`.
    """
    shape = grid_shape(space, kchi_max, oversample)
    if float(np.prod(shape, dtype=float)) > MAX_GRID_CELLS:
        raise InputError(f"the grid method would need {shape} cells (> {MAX_GRID_CELLS:.0e}); lower lmax or "
                         "enlarge the space", "[sky] lmax")
    if len(space.cosets) == 1:
        spec = dense_torus_spectrum(space, cosmology, seed, kchi_max, shape, workers, order, weight)
    else:
        spec = mode_list_spectrum(space, cosmology, seed, kchi_max, shape, workers, order, weight)
    return band_limited_irfft(spec, shape, index_bounds(space.lattice, kchi_max), workers)


def sample_grid(grid: np.ndarray, space, points: np.ndarray, workers: int | None = None,
                order: int = 3) -> np.ndarray:
    """Cubic B-spline interpolation (periodic) of ``grid`` at points (M, 3) in chi_rec, float64."""
    u = points @ np.linalg.inv(space.lattice)        # lattice (fractional) coordinates
    coords = np.ascontiguousarray((u * np.asarray(grid.shape, dtype=float)).T)
    return sample_grid_coords(grid, coords, workers, order)


def sphere_grid_coords(space, shape, x_obs: np.ndarray, frame: np.ndarray, nside: int,
                       nest: bool = False) -> np.ndarray:
    """Grid coordinates (3, npix) of the pixel centres x_obs + F n on the unit (chi_rec) sphere,
    j_d = N_d (A^-T (x_obs + F n))_d reduced to [0, N_d) (one (3, 3) x (3, npix) product),
    in RING or (``nest``) NESTED pixel order."""
    import healpy as hp

    v = np.array(hp.pix2vec(nside, np.arange(12 * nside * nside), nest=nest))   # (3, npix)
    N = np.asarray(shape, dtype=float)[:, None]
    W = N * np.linalg.inv(space.lattice).T
    coords = (W @ frame) @ v
    coords += (W @ x_obs)[:, None]
    # reduce to [0, N] (periodic anyway; ndimage wraps far coordinates more slowly)
    coords -= np.floor(coords * (1.0 / N)) * N
    return coords


def sample_grid_coords(grid: np.ndarray, coords: np.ndarray, workers: int | None = None,
                       order: int = 3) -> np.ndarray:
    """B-spline interpolation (periodic, no prefilter) of ``grid`` at grid coordinates (3, M).

    Points are split over threads (scipy.ndimage releases the GIL), each writing its part of
    the float64 output.
    """
    M = coords.shape[1]
    out = np.empty(M, dtype=np.float64)
    nt = min(thread_count(workers), max(1, M // 50000))

    def run(sl):
        ndimage.map_coordinates(grid, coords[:, sl], order=order, mode="grid-wrap", prefilter=False,
                                output=out[sl])

    if nt == 1:
        run(slice(None))
    else:
        edges = np.linspace(0, M, nt + 1).astype(int)
        with ThreadPoolExecutor(nt) as ex:
            list(ex.map(run, [slice(a, b) for a, b in zip(edges[:-1], edges[1:])]))
    return out


def grid_map(space, cosmology, seed: int, kchi_max: float, x_obs: np.ndarray, frame: np.ndarray, nside: int,
             oversample: float = 1.2, workers: int | None = None, order: int = 3, shells=None, lmax: int | None = None,
             profile=None):
    """(RING map float64, grid shape): the sky of the compact flat ``space`` seen from ``x_obs``
    (chi_rec) with sky axes ``frame`` (columns, space coordinates), sampled at the pixel centres
    of ``nside`` (no pixel window), microK; the grid of :func:`torus_grid`, the modes weighted by
    ``profile`` (a :class:`~topology.skies.flat_modes.CutProfile`; default the taper of the cut).

    ``shells`` None: the SW term, one field on the sphere of radius chi_rec. Else a
    :class:`~topology.skies.transfer_shells.ShellTransfer`: the sky is sum_s F_s(x_obs + r_s n),
    F_s the field of the amplitudes times w(k) g_s(k); the shells for k <= k_late (late ISW)
    have small grids and are sampled at N_side NSIDE_LATE, taken to a_lm (l <= lmax) and added.
    """
    import healpy as hp

    if profile is None:
        profile = plain_profile(kchi_max)
    if shells is None:
        return _sample_sphere(torus_grid(space, cosmology, seed, kchi_max, oversample, workers, order, profile),
                              space, x_obs, frame, nside, workers, order)
    sky, shape = None, None
    for s, r in enumerate(shells.radii[:shells.n_near]):
        def weight(k, s=s):
            return profile.weight(k) * shells.weights(k)[:, s]

        grid = torus_grid(space, cosmology, seed, kchi_max, oversample, workers, order, weight)
        part, shape = _sample_sphere(grid, space, x_obs, frame * r, nside, workers, order)
        sky = part if sky is None else sky + part
    k_late = min(kchi_max, shells.k_late)
    late = None
    for s in range(shells.n_near, len(shells.radii)):
        def weight(k, s=s):
            return profile.weight(k) * shells.weights(np.minimum(k, k_late))[:, s]

        grid = torus_grid(space, cosmology, seed, k_late, oversample, workers, order, weight)
        part, _ = _sample_sphere(grid, space, x_obs, frame * shells.radii[s], NSIDE_LATE, workers, order)
        late = part if late is None else late + part
    if late is not None:
        top = min(int(lmax) if lmax is not None else 3 * nside - 1, 3 * NSIDE_LATE - 1, 3 * nside - 1)
        sky += hp.alm2map(hp.map2alm(late, lmax=top, iter=3), nside, lmax=top)
    # no monopole and dipole: CAMB's transfer has none (Delta_0 = Delta_1 = 0)
    sky -= hp.alm2map(hp.map2alm(sky, lmax=1, iter=3), nside, lmax=1)
    return sky, shape


#: N_side at which the late shells (k chi_rec <= 100, l below ~115) are sampled
NSIDE_LATE = 64


def _sample_sphere(grid, space, x_obs, frame, nside, workers, order):
    """(RING map, grid shape) of ``grid`` at the pixel centres x_obs + frame n of ``nside``."""
    import healpy as hp

    # sampled in NESTED order (neighbouring pixels, neighbouring grid cells: fewer cache misses
    # than RING order), then put in RING order
    vals = sample_grid_coords(grid, sphere_grid_coords(space, grid.shape, x_obs, frame, nside, nest=True), workers,
                              order)
    shape = list(grid.shape)
    del grid
    sky = np.empty_like(vals)
    sky[hp.nest2ring(nside, np.arange(vals.size))] = vals
    return sky, shape
