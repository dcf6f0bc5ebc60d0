"""Skies of flat multiply connected spaces E^3 / Gamma (compact E1-E10, non-compact E11-E17).

The field. Let Lambda (rows of ``space.lattice``, units of chi_rec) be the translation lattice
and g = (R_g, t_g) the coset representatives of Gamma / Lambda (``space.cosets``). A field on
the covering torus E^3 / Lambda is f(x) = sum_k c~_k e^{i k.x}, k = 2 pi n D (n integer,
D = Lambda^-T the dual basis). Since f(R x + t) = sum_k c~_k e^{i k.t} e^{i (R^T k).x}, the
average over the point group (a projection onto the Gamma-invariant fields; common practice)

    c_q = N^-1/2 sum_g c~_{R_g q} exp(i (R_g q).t_g),      N = number of cosets,

is exactly invariant under every g (the phases are the twisted holonomies' phase relations:
a wave vector fixed by some R_g with exp(i q.t_g) != 1 cancels, e.g. the odd axial modes of
E2). The c~_k are independent complex Gaussians of the covering torus with
<|c~_k|^2> = P(k) / V, P(k) = 2 pi^2 P_R(k) / k^3, V the torus volume (the box normalisation
of a continuous spectrum; common practice); the factor N^1/2 keeps <|c_q|^2> = P(k)/V for
free orbits (|H| P(k)/V for a q with stabiliser H), so the local variance equals the
isotropic one and a torus much larger than chi_rec reproduces the isotropic spectrum. The
field is real: c~_{-k} = conj(c~_k) (so c_{-q} = conj(c_q)) and c~_0 = 0.

Amplitudes. The unit normals z_n (c~ = sigma(k) z) are drawn in blocks of 16^3 lattice
indices, block (b1, b2, b3) from SeedSequence(seed, spawn_key=(0, b1+O, b2+O, b3+O)) (stream
0 = "signal" of :func:`topology.skies.base.stream_rng`), only for n3 >= 0 and mirrored by
Hermitian symmetry. Each z_n therefore depends on (seed, n) alone: both methods and every
cut-off see the same amplitude for the same mode.

Modes kept: 0 < k chi_rec <= kchi_max (default ``lmax``; a spherical cut is invariant under
the point group). The SW C_l of the kept modes is complete to about l^2 / (2 kchi_max^2)
for l << kchi_max (the tail of int dx/x j_l(x)^2 beyond x = kchi_max; common practice), so
the top multipoles of a sky with kchi_max = lmax lack power; raise ``kchi_max`` for a
complete spectrum at high l.

Temperature terms:

* ["sw"] (both methods): Delta T / T = -R / 5 at x_obs + chi_rec n, the Sachs-Wolfe term of a
  matter-dominated universe on a thin last-scattering shell (Phi = -3 R / 5; Sachs & Wolfe
  1967, common practice), T = T_cmb of the cosmology, in microK. It matches exactly on
  circle pairs.
* ["sw", "doppler", "isw"] (eigenmode method only, needs camb): j_l(k chi_rec) is replaced by
  -5 Delta_l(k), CAMB's line-of-sight temperature transfer (:mod:`topology.skies.transfer`):
  SW with the full transfer function and finite LSS thickness, Doppler, early and late ISW,
  exactly the physics of :func:`topology.skies.spectra.camb_cl`. a_00 and a_1m are then 0.
  CAMB does not separate the terms, so other term sets raise InputError; the grid method
  (one thin shell of one 3-D field) makes SW skies only.

Methods:

* ``eigenmode``: exact a_lm (l <= lmax) from e^{i k.x} = 4 pi sum_lm i^l j_l(k r)
  Y*_lm(k^) Y_lm(x^) (Rayleigh's plane-wave expansion), with Y_lm(k^) from the stable
  three-term recursion of the normalised associated Legendre functions (common practice),
  modes in blocks so memory stays bounded. Returns an alm-type Sky.
* ``grid``: the same c_q placed on a 3-D FFT grid of the covering torus in lattice
  coordinates, divided by the Fourier transform of the cubic B-spline (sinc^4 per axis),
  inverse FFT (scipy.fft, float32) and sampled at the HEALPix pixel centres by cubic B-spline
  interpolation of those coefficients (scipy.ndimage.map_coordinates, periodic). This is the
  B-spline non-uniform FFT of Beylkin (1995, Appl. Comput. Harmon. Anal. 2, 363): in-band
  response exact, aliasing per axis ~ (w / (2 pi - w))^4 at w = pi / oversample, sent to
  k > (2 oversample - 1) kchi_max. Grid size per axis: N_d = fast_size(2 oversample
  n_max_d + 2) (the next 2^a 3^b 5^c), n_max_d = kchi_max |a_d| / (2 pi) the largest index of
  the ball, i.e. the shortest wavelength 2 pi chi_rec / kchi_max (= 2 pi chi_rec / lmax by
  default) is sampled by 2 oversample cells. Default oversample 1.2 (2.4 cells): rms error
  ~1% of the map against the eigenmode sky (error power 0.3% of C_l at l = kchi_max, 4e-5 at
  kchi_max / 2: the aliases land mostly above the band), 0.1% at 2, 0.02% at 3 (tests);
  spline_order 2 (quadratic, deconvolved by sinc^3) samples ~2x faster with ~2.5% rms.
  How it is made fast (the arithmetic is that of the exact transform): the torus E1 writes
  -sigma z / B^ block by block straight into the rfft half spectrum
  (:func:`dense_torus_spectrum`; sigma from a table over |n|^2-like integers for commensurate
  lattices, else a float32 power law), twisted families from the mode list
  (:func:`mode_list_spectrum`); the inverse FFT runs in place and skips the rows and planes
  outside the ball's index box (:func:`band_limited_irfft`: the n2 transform on 2 m1 + 1 of N1
  rows, both complex transforms on m3 + 1 of N3/2 + 1 planes); the pixels are sampled in
  NESTED order (neighbouring pixels share grid cells in cache) with coordinates reduced to the
  cell, then put in RING order. The grid sky equals the unpruned transform's to float32
  rounding (~1e-6 of the map rms). Memory: the complex64 half spectrum and the float32 grid
  (~8 bytes x N1 N2 N3 together); E1 of side 1.6 chi_rec at N_side 256, l_max 512: grid
  320^3, peak resident memory ~0.43 GB (float32 throughout the grid: the interpolation error,
  ~1e-2, dwarfs float32 rounding, ~1e-7). Speed: benchmarks/flat_sky_speed.py. Returns a
  map-type Sky at ``nside`` (the field sampled at the pixel centres, no pixel window).

Non-compact families E11-E17 (chimneys: one open direction, slabs: two). Their spectrum is
continuous along the open directions. The sky is that of :func:`compact_cover`: each open
direction e_d is identified with a period L_d (default FREE_LENGTH = 6 chi_rec, three
last-scattering diameters, longer when the observer is far from a mirror or axis of the group),
which turns the group into a subgroup of a compact one (E11, E16 -> E1; E12 -> E2;
E13, E14, E17 -> E7; E15 -> E9: every family embeds) and discretises the open directions' wave
numbers to k_d = 2 pi n / L_d. L_d keeps every image of the observer added by the period at
least FREE_CLEARANCE = 2.5 chi_rec away, so the cover has exactly the space's circle pairs.
Discretisation error of the expected SW spectrum against the continuous limit (sum over the
slab's k_z of the integral over k_perp; tests/test_skies_noncompact.py): slab of thickness 1.4
chi_rec with L = 6: -0.6% at l = 2, < 1e-4 from l = 3 on (L = 4: -2%, L = 12: -0.1% at
l = 2). Cost: the cover's volume sets the mode count, e.g. at lmax = kchi_max = 64 (the
eigenmode range of "auto") a slab of thickness 1.4 has 2.2e5 modes (~10 s), a chimney of
section 1.5 x 1.6 has 6.4e4 (~3 s); the grid of a slab at lmax 128 is 300 x 300 x 72 cells.

ISW for these skies comes only with the CAMB transfer (above); the grid method has none.
"""

from __future__ import annotations

import math
import os
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import scipy.fft
from scipy import ndimage
from scipy.special import spherical_jn

from ..errors import InputError
from .base import STREAMS, TERMS, Sky
from .spectra import A_S, K_PIVOT, N_S, primordial_power

BLOCK = 16                 # side of a block of lattice indices drawn from one SeedSequence
_OFFSET = 1 << 20          # shifts block indices to non-negative spawn keys
COMPACT_FAMILIES = ("E1", "E2", "E3", "E4", "E5", "E6", "E7", "E8", "E9", "E10")
NONCOMPACT_FAMILIES = ("E11", "E12", "E13", "E14", "E15", "E16", "E17")
FREE_LENGTH = 6.0          # chi_rec: default period of the open directions of E11-E17
FREE_CLEARANCE = 2.5       # chi_rec: no image added by that period within 2 chi_rec + 0.5
MAX_EIGEN_WORK = 2.0e9     # eigenmode guard: (modes in the half ball) x (a_lm with m >= 0)
MAX_GRID_CELLS = 2.0e9     # grid guard: cells of the FFT grid
MODE_BLOCK = 8192          # modes per block of the eigenmode sum
METHODS = ("eigenmode", "grid", "auto")
AUTO_LMAX = 64             # method "auto": eigenmode up to this lmax, grid above


# ---------------------------------------------------------------------------------------------
# the space: lattice, dual basis, point group on lattice indices
# ---------------------------------------------------------------------------------------------
def check_space(space) -> None:
    """InputError unless ``space`` is a flat space this generator supports (E1-E17)."""
    if getattr(space, "geometry", None) != "flat":
        raise InputError(f"flat skies need a flat space, got {getattr(space, 'geometry', None)!r}", "[space] family")
    fam = getattr(space, "family", None)
    if getattr(space, "compact", False):
        if fam not in COMPACT_FAMILIES:
            raise InputError(f"flat multiply connected skies support E1-E17, not {fam}", "[space] family")
    elif fam not in NONCOMPACT_FAMILIES:
        raise InputError(f"flat multiply connected skies support E1-E17, not {fam}", "[space] family")


def compact_cover(space, observer, free_length: float | None = None):
    """(cover, axes, lengths): the non-compact ``space`` (E11-E17) with each open direction
    e_d identified with a period L_d, a compact flat space whose field is that of ``space``
    with a discrete spectrum k_d = 2 pi n / L_d along the open directions.

    The open directions are the coordinate axes orthogonal to the lattice (``axes``); the
    cover's lattice is the space's plus L_d e_d, its cosets are the space's (each R_g maps
    e_d to +-e_d, so the lattice is preserved; :func:`point_group` checks it). The added
    elements T(sum n_d L_d e_d) g (n != 0) move the observer x along e_d by
    n_d L_d + ((R_g - 1) x + t_g).e_d, so L_d = max(free_length, FREE_CLEARANCE + max_g
    |((R_g - 1) x + t_g).e_d|) keeps every added image of the observer at least
    FREE_CLEARANCE (2 chi_rec + 0.5) away: the cover has exactly the space's circle pairs
    (checked here by counting the images within FREE_CLEARANCE). ``free_length`` defaults
    to FREE_LENGTH.
    """
    from ..spaces.euclidean import FlatSpace

    L0 = FREE_LENGTH if free_length is None else float(free_length)
    if not np.isfinite(L0) or L0 <= 0:
        raise InputError(f"the period of the open directions must be positive, got {free_length}", "free_length")
    lat = np.atleast_2d(space.lattice)
    scale = float(np.abs(lat).max())
    axes = [d for d in range(3) if np.all(np.abs(lat[:, d]) <= 1e-12 * scale)]
    if len(axes) + lat.shape[0] != 3:
        raise InputError(f"{space.family}: its open directions are not coordinate axes, so they cannot be given a "
                         "period; no sky for it", "[space] family")
    x = np.asarray(observer.point[:3], dtype=float)
    lengths = []
    rows = [lat]
    for d in axes:
        reach = max(abs(float(((R - np.eye(3)) @ x + t)[d])) for R, t in space.cosets)
        L = max(L0, FREE_CLEARANCE + reach)
        lengths.append(L)
        e = np.zeros(3)
        e[d] = L
        rows.append(e[None, :])
    cover = FlatSpace(space.family, np.vstack(rows), space.cosets, dict(space.params),
                      orientable=space.orientable, homogeneous=space.homogeneous)
    try:
        point_group(cover)
    except InputError:
        raise InputError(f"{space.family}: its group does not embed in a compact flat group by a period along "
                         "its open directions; no sky for it", "[space] family") from None
    own = len(space.elements_within(observer, FREE_CLEARANCE))
    got = len(cover.elements_within(observer, FREE_CLEARANCE))
    if got != own:   # cannot happen with the lengths above; a guard against extra circles
        raise InputError(f"{space.family}: the periodic cover would add {got - own} images of the observer within "
                         f"{FREE_CLEARANCE} chi_rec", "[observer] position")
    return cover, axes, lengths


def point_group(space) -> list[tuple[np.ndarray, np.ndarray]]:
    """(Q_g, u_g) per coset: R_g k = 2 pi (n Q_g) D for k = 2 pi n D, u_g = D t_g (lattice coords).

    Q_g = D R_g^T D^-1 must be an integer matrix (R_g preserves the lattice).
    """
    A = space.lattice
    D = np.linalg.inv(A).T
    out = []
    for R, t in space.cosets:
        Q = D @ R.T @ np.linalg.inv(D)
        Qi = np.rint(Q)
        if np.abs(Q - Qi).max() > 1e-8:
            raise InputError(f"{space.family}: a coset rotation does not preserve the lattice", "[space] lengths")
        out.append((Qi.astype(np.int64), D @ t))
    return out


def index_bounds(lattice: np.ndarray, kchi_max: float) -> np.ndarray:
    """Largest |n_d| of k = 2 pi n D with |k| <= kchi_max: n_d = k.a_d / 2 pi."""
    return np.floor(kchi_max * np.linalg.norm(lattice, axis=1) / (2.0 * np.pi) + 1e-9).astype(np.int64)


def _k_squared(D: np.ndarray, n1, n2, n3):
    """|2 pi n D|^2 by broadcasting the three index arrays (float64)."""
    G = 4.0 * np.pi**2 * (D @ D.T)
    return (G[0, 0] * n1 * n1 + G[1, 1] * n2 * n2 + G[2, 2] * n3 * n3
            + 2.0 * (G[0, 1] * n1 * n2 + G[0, 2] * n1 * n3 + G[1, 2] * n2 * n3))


# ---------------------------------------------------------------------------------------------
# amplitudes
# ---------------------------------------------------------------------------------------------
def _block_gaussians(seed: int, block) -> np.ndarray:
    """(2, BLOCK, BLOCK, BLOCK) float32 standard normals of one block (real, imaginary parts)."""
    ss = np.random.SeedSequence(int(seed), spawn_key=(STREAMS["signal"],) + tuple(int(b) + _OFFSET for b in block))
    return np.random.Generator(np.random.PCG64(ss)).standard_normal((2, BLOCK, BLOCK, BLOCK), dtype=np.float32)


def _block_normals(seed: int, block: tuple[int, int, int]) -> np.ndarray:
    """(BLOCK, BLOCK, BLOCK) complex64 unit normals (<|z|^2> = 1) of one block of indices."""
    g = _block_gaussians(seed, block)
    z = np.empty((BLOCK, BLOCK, BLOCK), dtype=np.complex64)
    z.real = g[0]
    z.imag = g[1]
    z *= np.float32(math.sqrt(0.5))
    return z


def _threads(workers: int | None) -> int:
    n = os.cpu_count() or 1
    if workers is None or workers < 1:
        return n
    return max(1, min(int(workers), n))


def _blocks(m: np.ndarray, D: np.ndarray | None, kchi_max: float | None) -> list:
    """Blocks (b, start, end) covering n1 in [-m1, m1], n2 in [-m2, m2], n3 in [0, m3].

    With the dual basis D and kchi_max, blocks wholly outside the ball |2 pi n D| <= kchi_max
    are dropped (lower bound |k|^2 >= lambda_min(G) |n|^2, G = 4 pi^2 D D^T).
    """
    lo = np.array([-m[0], -m[1], 0])
    hi = np.array([m[0], m[1], m[2]])
    blo = lo // BLOCK
    bhi = hi // BLOCK
    lam = None
    if D is not None and kchi_max is not None:
        lam = float(np.linalg.eigvalsh(4.0 * np.pi**2 * (D @ D.T)).min())
    axes = [np.arange(blo[d], bhi[d] + 1) for d in range(3)]
    b = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, 3)   # C order: b1, b2, b3
    st = np.maximum(b * BLOCK, lo)
    en = np.minimum(b * BLOCK + BLOCK - 1, hi)
    if lam is not None:
        near = np.clip(0, st, en)  # the box point nearest the origin
        keep = lam * np.einsum("ij,ij->i", near, near).astype(float) <= kchi_max**2 * (1 + 1e-9)
        b, st, en = b[keep], st[keep], en[keep]
    return list(zip(b, st, en))


def _fill_blocks(seed: int, jobs: list, out: np.ndarray, offset, workers: int | None) -> None:
    """Write the normals of each block into ``out`` at index n + offset (per axis)."""
    offset = np.asarray(offset)

    def fill(part):
        for b, s, e in part:
            z = _block_normals(seed, tuple(b))
            o = b * BLOCK
            d0 = s + offset
            out[d0[0]:d0[0] + e[0] - s[0] + 1, d0[1]:d0[1] + e[1] - s[1] + 1, d0[2]:d0[2] + e[2] - s[2] + 1] = \
                z[s[0] - o[0]:e[0] - o[0] + 1, s[1] - o[1]:e[1] - o[1] + 1, s[2] - o[2]:e[2] - o[2] + 1]

    nt = min(_threads(workers), max(1, len(jobs) // 8))
    if nt > 1:  # numpy's Generator releases the GIL while filling
        with ThreadPoolExecutor(nt) as ex:
            list(ex.map(fill, [jobs[i::nt] for i in range(nt)]))
    else:
        fill(jobs)


def _hermitian_plane(plane: np.ndarray, n1: np.ndarray, n2: np.ndarray, mirror1, mirror2) -> None:
    """On the n3 = 0 plane keep n2 > 0 (and n2 = 0, n1 > 0) and set z_{-n} = conj z_n, z_0 = 0.

    n1, n2: the signed index of each row / column; mirror1/2: the row / column of -n.
    """
    mirrored = np.conj(plane[mirror1][:, mirror2])
    keep = (n2[None, :] > 0) | ((n2[None, :] == 0) & (n1[:, None] > 0))
    plane[...] = np.where(keep, plane, mirrored)
    plane[(n1[:, None] == 0) & (n2[None, :] == 0)] = 0.0


def unit_normals_half(seed: int, m: np.ndarray, D: np.ndarray | None = None, kchi_max: float | None = None,
                      workers: int | None = None) -> np.ndarray:
    """z_n for n1 in [-m1, m1], n2 in [-m2, m2], n3 in [0, m3] (complex64, shape (2m1+1, 2m2+1, m3+1)).

    Hermitian on the n3 = 0 plane (z_{-n} = conj z_n, z_0 = 0), so the full Hermitian field
    follows by z_{-n} = conj(z_n). With D and kchi_max, blocks outside the ball stay zero.
    """
    m = np.asarray(m, dtype=np.int64)
    out = np.zeros((2 * m[0] + 1, 2 * m[1] + 1, m[2] + 1), dtype=np.complex64)
    _fill_blocks(seed, _blocks(m, D, kchi_max), out, (m[0], m[1], 0), workers)
    i1 = np.arange(-m[0], m[0] + 1)
    i2 = np.arange(-m[1], m[1] + 1)
    _hermitian_plane(out[:, :, 0], i1, i2, slice(None, None, -1), slice(None, None, -1))
    return out


def unit_normals_full(seed: int, m: np.ndarray, D: np.ndarray | None = None, kchi_max: float | None = None,
                      workers: int | None = None) -> np.ndarray:
    """The Hermitian z_n over the whole box [-m, m]^3 (complex64), index n + m."""
    half = unit_normals_half(seed, m, D, kchi_max, workers)
    full = np.empty((2 * m[0] + 1, 2 * m[1] + 1, 2 * m[2] + 1), dtype=np.complex64)
    full[:, :, m[2]:] = half
    full[:, :, :m[2]] = np.conj(half[::-1, ::-1, :0:-1])
    return full


def mode_sigma(k_chi: np.ndarray, cosmology, volume_chi3: float) -> np.ndarray:
    """rms of the SW temperature amplitude per torus mode, microK.

    sigma = (T_cmb / 5) sqrt(2 pi^2 P_R(k) / (k^3 V)) with k in 1/chi_rec, V in chi_rec^3,
    P_R at k / chi_rec_mpc Mpc^-1 (the sign of Delta T / T = -R / 5 is applied by the caller).
    """
    k = np.asarray(k_chi, dtype=float)
    t_uk = cosmology.t_cmb * 1e6
    with np.errstate(divide="ignore", invalid="ignore"):
        p = primordial_power(k / cosmology.chi_rec_mpc)
        s = (t_uk / 5.0) * np.sqrt(2.0 * np.pi**2 * p / (k**3 * volume_chi3))
    return np.where(k > 0, s, 0.0)


def half_ball_modes(space, kchi_max: float):
    """Integer indices n (M, 3) of the half space {n3 > 0, or n3 = 0 and (n2 > 0 or n2 = 0, n1 > 0)}
    with 0 < |k| chi_rec <= kchi_max, and their wave vectors k (M, 3) in 1/chi_rec."""
    A = space.lattice
    D = np.linalg.inv(A).T
    m = index_bounds(A, kchi_max)
    i1 = np.arange(-m[0], m[0] + 1)[:, None, None]
    i2 = np.arange(-m[1], m[1] + 1)[None, :, None]
    i3 = np.arange(0, m[2] + 1)[None, None, :]
    k2 = _k_squared(D, i1, i2, i3)
    half = (i3 > 0) | ((i3 == 0) & ((i2 > 0) | ((i2 == 0) & (i1 > 0))))
    sel = half & (k2 <= kchi_max**2 * (1 + 1e-12))
    idx = np.argwhere(sel)
    n = idx - np.array([m[0], m[1], 0])
    return n.astype(np.int64), 2.0 * np.pi * (n @ D), m


def invariant_coefficients(space, cosmology, seed: int, kchi_max: float, workers: int | None = None):
    """Modes of E^3/Gamma on the half ball: (n (M,3), k (M,3) in 1/chi_rec, c (M,) microK complex).

    c_q = -sigma(q) N^-1/2 sum_g z_{q Q_g} exp(2 pi i (q Q_g).u_g) (see the module doc); the
    other half follows from c_{-q} = conj(c_q).
    """
    n, k, m = half_ball_modes(space, kchi_max)
    group = point_group(space)
    D = np.linalg.inv(space.lattice).T
    sig = mode_sigma(np.linalg.norm(k, axis=1), cosmology, space.covering_cell_volume)
    if len(group) == 1:
        z = unit_normals_half(seed, m, D, kchi_max, workers)
        c = z[n[:, 0] + m[0], n[:, 1] + m[1], n[:, 2]].astype(np.complex128)
    else:
        z = unit_normals_full(seed, m, D, kchi_max, workers)
        c = np.zeros(len(n), dtype=np.complex128)
        for Q, u in group:
            nq = n @ Q
            c += z[nq[:, 0] + m[0], nq[:, 1] + m[1], nq[:, 2] + m[2]] * np.exp(2j * np.pi * (nq @ u))
        c /= math.sqrt(len(group))
    return n, k, -sig * c


# ---------------------------------------------------------------------------------------------
# eigenmode method: a_lm from the plane-wave expansion
# ---------------------------------------------------------------------------------------------
def _alm_index(lmax: int, ell: int, m: int) -> int:
    return m * (2 * lmax + 1 - m) // 2 + ell


def plane_wave_alm(k_sky: np.ndarray, coef: np.ndarray, r: float, lmax: int, radial=None) -> np.ndarray:
    """a_lm (healpy order, m >= 0) of the real field sum_q [coef_q e^{i q.x} + c.c.] on |x| = r.

    k_sky: (M, 3) wave vectors in the sky frame (1/length), coef (M,) complex. With
    e^{i q.x} = 4 pi sum i^l j_l(q r) Y*_lm(q^) Y_lm(x^) and Y_lm(-q^) = (-1)^l Y_lm(q^):
    a_lm = 4 pi i^l sum_q j_l(q r) Y*_lm(q^) [coef_q + (-1)^l conj(coef_q)].
    Normalised P_lm by the three-term recursion (Condon-Shortley phase; common practice).
    ``radial(ell, |q|)`` -> (len(ell), M) replaces j_l(q r) (e.g. -5 x CAMB's Delta_l(k)).
    """
    nalm = (lmax + 1) * (lmax + 2) // 2
    alm = np.zeros(nalm, dtype=np.complex128)
    ell = np.arange(lmax + 1)
    phase = 4.0 * np.pi * (1j) ** ell
    even_l = (ell % 2 == 0)
    # recursion coefficients a_lm, b_lm of P_lm = a (x P_{l-1,m} - b P_{l-2,m})
    for b0 in range(0, len(coef), MODE_BLOCK):
        kv = np.asarray(k_sky[b0:b0 + MODE_BLOCK], dtype=float)
        cf = np.asarray(coef[b0:b0 + MODE_BLOCK], dtype=np.complex128)
        kn = np.linalg.norm(kv, axis=1)
        x = np.clip(kv[:, 2] / kn, -1.0, 1.0)
        s = np.sqrt(np.maximum(0.0, 1.0 - x * x))
        phi = np.arctan2(kv[:, 1], kv[:, 0])
        # radial functions once per distinct |k| (lattice shells repeat it many times)
        ku, inv = np.unique(np.round(kn, 12), return_inverse=True)
        if radial is None:
            jl = spherical_jn(ell[:, None], ku[None, :] * r)[:, inv]  # (lmax+1, M)
        else:
            jl = radial(ell, ku)[:, inv]
        d_even = 2.0 * cf.real                   # coef + conj(coef)
        d_odd = 2.0 * cf.imag                    # (coef - conj(coef)) / i
        emphi = np.exp(-1j * phi)                # Y*_lm carries e^{-i m phi}
        em = np.ones_like(emphi)
        pmm = np.full(len(kn), math.sqrt(1.0 / (4.0 * np.pi)))
        P = np.empty((lmax + 1, len(kn)))
        for mm in range(lmax + 1):
            if mm > 0:
                pmm = -math.sqrt((2 * mm + 1) / (2.0 * mm)) * s * pmm
                em = em * emphi
            P[0] = pmm
            if mm < lmax:
                P[1] = math.sqrt(2 * mm + 3) * x * pmm
            for ll in range(mm + 2, lmax + 1):
                a = math.sqrt((4.0 * ll * ll - 1.0) / (ll * ll - mm * mm))
                bb = math.sqrt(((ll - 1.0) ** 2 - mm * mm) / (4.0 * (ll - 1.0) ** 2 - 1.0))
                j = ll - mm
                np.multiply(x, P[j - 1], out=P[j])
                P[j] -= bb * P[j - 2]
                P[j] *= a
            nl = lmax + 1 - mm
            JP = jl[mm:] * P[:nl]
            ue = d_even * em
            uo = d_odd * em
            U = np.stack([ue.real, ue.imag, uo.real, uo.imag], axis=1)
            R = JP @ U                               # (nl, 4), BLAS
            ev = even_l[mm:]
            val = np.where(ev, R[:, 0] + 1j * R[:, 1], 1j * (R[:, 2] + 1j * R[:, 3]))
            i0 = _alm_index(lmax, mm, mm)
            alm[i0:i0 + nl] += phase[mm:] * val
    return alm


# ---------------------------------------------------------------------------------------------
# grid method
# ---------------------------------------------------------------------------------------------
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


def _sw_constant(cosmology, volume: float) -> float:
    """C of sigma(k) = C (k^2)^((n_s - 4) / 4), k in 1/chi_rec: the power law of :func:`mode_sigma`,
    C = (T/5) sqrt(2 pi^2 A_s / V) (chi_rec k_pivot)^((1 - n_s) / 2)."""
    t_uk = cosmology.t_cmb * 1e6
    return (t_uk / 5.0) * math.sqrt(2.0 * np.pi**2 * A_S / volume) * (cosmology.chi_rec_mpc * K_PIVOT) ** ((1.0 - N_S) / 2)


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


def dense_torus_spectrum(space, cosmology, seed: int, kchi_max: float, shape, workers: int | None = None,
                         order: int = 3) -> np.ndarray:
    """Half spectrum (complex64 (N1, N2, N3//2 + 1), index n mod N) of the torus E1 for the grid:
    -sigma(k) z_n / B^(n) with B^ the B-spline transform, zero outside 0 < |k| <= kchi_max
    (the ball of :func:`half_ball_modes`).

    Block by block: each block's normals (:func:`_block_gaussians`, the stream of the
    eigenmode method) are scaled by sigma and written once into the spectrum; no box-sized
    temporaries. sigma is the power law of :func:`_sw_constant`, taken from a table over
    s = n S n^T when |k|^2 = g s with S an integer matrix (:func:`_integer_form`), else by a
    float32 power. Blocks run on ``workers`` threads (the generator and numpy's loops release
    the GIL). z_n equals the eigenmode method's up to float32 rounding (the factor 1/sqrt 2 is
    folded into sigma).
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
    scale = -_sw_constant(cosmology, space.covering_cell_volume) * math.sqrt(0.5)
    dec = [_bspline_deconv(idx[0], N1, order), _bspline_deconv(idx[1], N2, order),
           _bspline_deconv(idx[2], N3, order)]
    lim = kchi_max**2 * (1 + 1e-12)
    power = (N_S - 4.0) / 4.0
    form = _integer_form(G, m)
    if form is not None:
        g, S, s_box = form
        table = np.zeros(s_box + 1)
        sv = np.arange(1, s_box + 1, dtype=float)
        table[1:] = np.where(g * sv <= lim, scale * (g * sv) ** power, 0.0)
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
        z = _block_gaussians(seed, b)
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
        sig *= bcast(dec[0], 0, t)
        sig *= bcast(dec[1], 1, t) * bcast(dec[2], 2, t)
        # a block never straddles n = 0, so it lands contiguously at n mod N
        dst = tuple(slice(s[d] % sizes[d], s[d] % sizes[d] + e[d] - s[d] + 1) for d in range(2)) + \
            (slice(s[2], e[2] + 1),)
        np.multiply(z[0][sub], sig, out=sf[dst + (0,)])
        np.multiply(z[1][sub], sig, out=sf[dst + (1,)])

    jobs = _blocks(m, D, kchi_max)
    nt = min(_threads(workers), max(1, len(jobs) // 8))
    if nt > 1:
        with ThreadPoolExecutor(nt) as ex:
            list(ex.map(lambda part: [one(*j) for j in part], [jobs[i::nt] for i in range(nt)]))
    else:
        for j in jobs:
            one(*j)
    n1 = np.where(np.arange(N1) <= N1 // 2, np.arange(N1), np.arange(N1) - N1)
    n2 = np.where(np.arange(N2) <= N2 // 2, np.arange(N2), np.arange(N2) - N2)
    _hermitian_plane(spec[:, :, 0], n1, n2, (-np.arange(N1)) % N1, (-np.arange(N2)) % N2)
    return spec


def mode_list_spectrum(space, cosmology, seed: int, kchi_max: float, shape, workers: int | None = None,
                       order: int = 3) -> np.ndarray:
    """The half spectrum of :func:`dense_torus_spectrum` for any family, from the invariant mode
    list c_q of :func:`invariant_coefficients` (divided by the B-spline transform)."""
    N1, N2, N3 = shape
    spec = np.zeros((N1, N2, N3 // 2 + 1), dtype=np.complex64)
    n, _, c = invariant_coefficients(space, cosmology, seed, kchi_max, workers)
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
    w = _threads(workers)
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
               workers: int | None = None, order: int = 3) -> np.ndarray:
    """B-spline coefficients (float32, shape grid_shape) of the SW temperature on the torus cell.

    Index (j1, j2, j3) is the point x = sum_d (j_d / N_d) a_d; sample with
    :func:`sample_grid`.
    """
    shape = grid_shape(space, kchi_max, oversample)
    if float(np.prod(shape, dtype=float)) > MAX_GRID_CELLS:
        raise InputError(f"the grid method would need {shape} cells (> {MAX_GRID_CELLS:.0e}); lower lmax or "
                         "enlarge the space", "[sky] lmax")
    if len(space.cosets) == 1:
        spec = dense_torus_spectrum(space, cosmology, seed, kchi_max, shape, workers, order)
    else:
        spec = mode_list_spectrum(space, cosmology, seed, kchi_max, shape, workers, order)
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
    nt = min(_threads(workers), max(1, M // 50000))

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


# ---------------------------------------------------------------------------------------------
# the public entry point
# ---------------------------------------------------------------------------------------------
def eigenmode_work(space, lmax: int, kchi_max: float) -> float:
    """(modes in the half ball) x (a_lm with m >= 0): the cost the eigenmode guard limits."""
    m = index_bounds(space.lattice, kchi_max)
    ball = 4.0 / 3.0 * np.pi * kchi_max**3 * space.covering_cell_volume / (2.0 * np.pi) ** 3 / 2.0
    nmodes = min(ball, float(np.prod(2 * m + 1)) / 2.0)
    return nmodes * (lmax + 1) * (lmax + 2) / 2.0


def _check_inputs(lmax, nside, method, terms, kchi_max, oversample):
    try:
        lmax = int(lmax)
    except (TypeError, ValueError):
        raise InputError(f"must be an integer, got {lmax!r}", "[sky] lmax") from None
    if lmax < 1:
        raise InputError(f"must be >= 1, got {lmax}", "[sky] lmax")
    if nside is not None:
        nside = int(nside)
        if nside < 1 or nside & (nside - 1):
            raise InputError(f"must be a power of two, got {nside}", "[sky] nside")
        if lmax > 3 * nside - 1:
            raise InputError(f"lmax = {lmax} exceeds 3 nside - 1 = {3 * nside - 1}", "[sky] lmax")
    if method not in METHODS:
        raise InputError(f"must be one of {list(METHODS)}, got {method!r}", "[sky] method")
    terms = tuple(terms)
    bad = [t for t in terms if t not in TERMS]
    if bad or "sw" not in terms:
        raise InputError(f"must be a list from {list(TERMS)} including 'sw', got {list(terms)}", "[sky] terms")
    if set(terms) not in ({"sw"}, set(TERMS)):
        raise InputError(f"flat multiply connected skies take [\"sw\"] (analytic Sachs-Wolfe) or "
                         f"[\"sw\", \"doppler\", \"isw\"] (CAMB transfer), got {list(terms)}", "[sky] terms")
    terms = tuple(t for t in TERMS if t in terms)
    kchi = float(lmax if kchi_max is None else kchi_max)
    if not np.isfinite(kchi) or kchi <= 0:
        raise InputError(f"kchi_max must be positive, got {kchi_max}", "[sky] lmax")
    if not 1.0 <= float(oversample) <= 8.0:
        raise InputError(f"oversample must be in [1, 8], got {oversample}", "[sky] method")
    return lmax, nside, terms, kchi


def flat_sky(space, observer, cosmology, *, lmax: int, nside: int | None = None, method: str = "auto",
             terms=("sw",), seed: int = 0, kchi_max: float | None = None, oversample: float = 1.2,
             spline_order: int = 3, workers: int | None = None, free_length: float | None = None) -> Sky:
    """Sky of a flat space E1-E17 seen by ``observer`` (microK, see the module doc).

    space: topology.spaces.euclidean.FlatSpace (lengths in chi_rec); observer: flat Observer
    (position in chi_rec; sky direction n points along frame[:3] @ n); cosmology: T_cmb,
    chi_rec_mpc. kchi_max: largest k chi_rec kept (default lmax). method "eigenmode" -> alm Sky
    (l <= lmax), "grid" -> map Sky at nside, "auto" -> eigenmode for lmax <= 64 or for the CAMB
    terms, else grid. Grid only: oversample (grid cells per shortest half-wavelength),
    spline_order 3 (cubic B-spline, 64 taps) or 2 (quadratic, 27 taps: ~2x faster sampling,
    ~2x the error); workers: threads for the FFT, the normals and the sampling. Non-compact
    families E11-E17: the sky of :func:`compact_cover` (open directions given the period
    ``free_length``, default FREE_LENGTH = 6 chi_rec; meta "free_axes", "free_length").
    """
    if spline_order not in (2, 3):
        raise InputError(f"spline_order must be 2 or 3, got {spline_order!r}", "[sky] method")
    lmax, nside, terms, kchi = _check_inputs(lmax, nside, method, terms, kchi_max, oversample)
    check_space(space)
    if observer.geometry != "flat":
        raise InputError(f"a flat space needs a flat observer, got {observer.geometry!r}", "[observer] position")
    given = space
    free = None
    if not space.compact:
        space, axes, lengths = compact_cover(space, observer, free_length)
        free = ("".join("xyz"[d] for d in axes), lengths)
    full = terms != ("sw",)
    if method == "auto":
        method = "eigenmode" if (lmax <= AUTO_LMAX or full) else "grid"
    if method == "grid" and full:
        raise InputError("the grid method makes Sachs-Wolfe skies only (terms = [\"sw\"]); the Doppler and ISW "
                         "terms need the line-of-sight transfer of the eigenmode method", "[sky] method")
    if method == "grid" and nside is None:
        raise InputError("the grid method needs nside", "[sky] nside")
    x_obs = np.asarray(observer.point[:3], dtype=float)
    F = np.asarray(observer.frame[:3, :], dtype=float)  # columns: sky axes in space coordinates
    meta = {"family": given.family, "params": dict(given.params), "seed": int(seed), "kchi_max": kchi,
            "observer": x_obs.tolist(), "terms": list(terms)}
    if free is not None:   # the open directions' period (the discretisation of their spectrum)
        meta.update(free_axes=free[0], free_length=",".join(f"{L:g}" for L in free[1]))
    if method == "eigenmode":
        work = eigenmode_work(space, lmax, kchi)
        if work > MAX_EIGEN_WORK:
            raise InputError(f"the eigenmode method would need {work:.2e} mode x a_lm products (limit "
                             f"{MAX_EIGEN_WORK:.0e}); lower lmax or use method = \"grid\"", "[sky] lmax")
        n, k, c = invariant_coefficients(space, cosmology, seed, kchi)
        coef = c * np.exp(1j * (k @ x_obs))      # e^{i q.(x_obs + r n)}
        k_sky = k @ F                             # (F^T q) components in the sky frame
        radial = None
        if full:
            from .transfer import temperature_transfer

            delta = temperature_transfer(cosmology, lmax)
            chi_mpc = cosmology.chi_rec_mpc

            def radial(ell, kn):  # -5 Delta_l(k) -> j_l(k chi_rec) in the SW limit
                return -5.0 * delta(ell, kn / chi_mpc)
        alm = plane_wave_alm(k_sky, coef, 1.0, lmax, radial)
        meta.update(method="eigenmode", n_modes=int(2 * len(n)), transfer="camb" if full else "sachs-wolfe")
        return Sky(lmax=lmax, alm=alm, nside=nside, terms=terms, meta=meta)
    grid = torus_grid(space, cosmology, seed, kchi, oversample, workers, spline_order)
    # sampled in NESTED order (neighbouring pixels, neighbouring grid cells: fewer cache misses
    # than RING order), then put in RING order
    import healpy as hp

    vals = sample_grid_coords(grid, sphere_grid_coords(space, grid.shape, x_obs, F, nside, nest=True), workers,
                              spline_order)
    shape = list(grid.shape)
    del grid
    sky = np.empty_like(vals)
    sky[hp.nest2ring(nside, np.arange(vals.size))] = vals
    meta.update(method="grid", grid=shape, oversample=float(oversample), spline_order=int(spline_order))
    return Sky(lmax=lmax, map=sky, nside=nside, terms=terms, meta=meta)
