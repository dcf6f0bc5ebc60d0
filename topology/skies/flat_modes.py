"""The modes of a flat space E^3 / Gamma: its covering torus, point group, the lattice of
wave vectors and the Gaussian amplitude of each Gamma-invariant mode.

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

Modes kept: 0 < k chi_rec <= kchi_max (a spherical cut is invariant under the point group),
weighted by :func:`cut_weight`, 1 up to kchi_max - TAPER and a sin^2 taper to 0 at kchi_max
(the skies apply it; :func:`invariant_coefficients` returns the unweighted amplitudes). The
taper makes the lattice sum of the kept power equal its continuum integral near the cut: with a
sharp cut the few lattice shells between l and kchi_max sample the oscillation of j_l(k chi)^2
(period pi) unevenly, and the expected C_l of an E1 torus of side 1.6-4 chi_rec fell 1.5-4.5 %
below the continuum at l 101-128 for kchi_max = 128; with TAPER = 8 the difference is < 4e-4
(tests/test_skies_flat_cut.py).

Non-compact families E11-E17 get the modes of :func:`compact_cover`, a compact space whose
open directions are given a period (see :mod:`topology.skies.flat`).
"""

from __future__ import annotations

import math
import os
from concurrent.futures import ThreadPoolExecutor

import numpy as np

from ..errors import InputError
from .base import STREAMS
from .spectra import A_S, K_PIVOT, N_S, primordial_power

BLOCK = 16                 # side of a block of lattice indices drawn from one SeedSequence
TAPER = 8.0                # k chi_rec width of the taper below the cut (at most a quarter of the cut)
_OFFSET = 1 << 20          # shifts block indices to non-negative spawn keys
COMPACT_FAMILIES = ("E1", "E2", "E3", "E4", "E5", "E6", "E7", "E8", "E9", "E10")
NONCOMPACT_FAMILIES = ("E11", "E12", "E13", "E14", "E15", "E16", "E17")
FREE_LENGTH = 6.0          # chi_rec: default period of the open directions of E11-E17
FREE_CLEARANCE = 2.5       # chi_rec: no image added by that period within 2 chi_rec + 0.5


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
def block_gaussians(seed: int, block) -> np.ndarray:
    """(2, BLOCK, BLOCK, BLOCK) float32 standard normals of one block (real, imaginary parts)."""
    ss = np.random.SeedSequence(int(seed), spawn_key=(STREAMS["signal"],) + tuple(int(b) + _OFFSET for b in block))
    return np.random.Generator(np.random.PCG64(ss)).standard_normal((2, BLOCK, BLOCK, BLOCK), dtype=np.float32)


def _block_normals(seed: int, block: tuple[int, int, int]) -> np.ndarray:
    """(BLOCK, BLOCK, BLOCK) complex64 unit normals (<|z|^2> = 1) of one block of indices."""
    g = block_gaussians(seed, block)
    z = np.empty((BLOCK, BLOCK, BLOCK), dtype=np.complex64)
    z.real = g[0]
    z.imag = g[1]
    z *= np.float32(math.sqrt(0.5))
    return z


def thread_count(workers: int | None) -> int:
    """Threads to use: ``workers`` clipped to [1, cpu count]; None or < 1 -> every cpu."""
    n = os.cpu_count() or 1
    if workers is None or workers < 1:
        return n
    return max(1, min(int(workers), n))


def index_blocks(m: np.ndarray, D: np.ndarray | None, kchi_max: float | None) -> list:
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

    nt = min(thread_count(workers), max(1, len(jobs) // 8))
    if nt > 1:  # numpy's Generator releases the GIL while filling
        with ThreadPoolExecutor(nt) as ex:
            list(ex.map(fill, [jobs[i::nt] for i in range(nt)]))
    else:
        fill(jobs)


def hermitian_plane(plane: np.ndarray, n1: np.ndarray, n2: np.ndarray, mirror1, mirror2) -> None:
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
    _fill_blocks(seed, index_blocks(m, D, kchi_max), out, (m[0], m[1], 0), workers)
    i1 = np.arange(-m[0], m[0] + 1)
    i2 = np.arange(-m[1], m[1] + 1)
    hermitian_plane(out[:, :, 0], i1, i2, slice(None, None, -1), slice(None, None, -1))
    return out


def unit_normals_full(seed: int, m: np.ndarray, D: np.ndarray | None = None, kchi_max: float | None = None,
                      workers: int | None = None) -> np.ndarray:
    """The Hermitian z_n over the whole box [-m, m]^3 (complex64), index n + m."""
    half = unit_normals_half(seed, m, D, kchi_max, workers)
    full = np.empty((2 * m[0] + 1, 2 * m[1] + 1, 2 * m[2] + 1), dtype=np.complex64)
    full[:, :, m[2]:] = half
    full[:, :, :m[2]] = np.conj(half[::-1, ::-1, :0:-1])
    return full


def taper_width(kchi_max: float) -> float:
    """The width of the taper below the cut: min(TAPER, kchi_max / 4)."""
    return min(TAPER, 0.25 * float(kchi_max))


def cut_weight(k_chi, kchi_max: float) -> np.ndarray:
    """w(k) = sin^2(pi/2 min(1, (K - k) / D)) for k <= K, 0 beyond; D = :func:`taper_width` (K)."""
    K = float(kchi_max)
    t = np.clip((K - np.asarray(k_chi, dtype=float)) / taper_width(K), 0.0, 1.0)
    return np.sin(0.5 * np.pi * t) ** 2


class CutProfile:
    """The radial weight w(k) of a flat sky's lattice modes (k in units of 1/chi_rec):

        w(k)^2 = t(k)^2 + sum_j c_j b_j(k),   b_j(k) = cos^2(pi/2 (k - k_j) / h) on |k - k_j| < h,

    t the taper of :func:`cut_weight` (1 below K - D, 0 at the cut K) and b_j the "boost" bumps
    (centres k_j <= K - h, half-width h, c_j >= 0) that let modes below the cut carry the power of
    the modes beyond it (:func:`topology.skies.flat_cut.cut_profile` chooses c_j). Without bumps
    w = t. w = 1 below :attr:`edge`, 0 beyond K; between, from a table of w on a grid of step
    STEP (linear interpolation, error < 1e-5; the taper alone is evaluated exactly).
    """

    STEP = 1.0 / 64.0

    def __init__(self, kchi_max: float, centres=(), half_width: float = 1.0, coeffs=()):
        self.kchi_max = float(kchi_max)
        self.centres = tuple(float(c) for c in centres)
        self.half_width = float(half_width)
        self.coeffs = tuple(float(c) for c in coeffs)
        if len(self.centres) != len(self.coeffs):
            raise ValueError("one coefficient per bump")
        K = self.kchi_max
        lo = K - taper_width(K)
        if self.coeffs:
            lo = min(lo, min(self.centres) - self.half_width)
        self.edge = max(lo, 0.0)
        n = max(2, int(math.ceil((K - self.edge) / self.STEP)) + 1)
        self._k = np.linspace(self.edge, K, n)
        self._w = np.sqrt(cut_weight(self._k, K) ** 2 + self.boost(self._k))

    def boost(self, k) -> np.ndarray:
        """sum_j c_j b_j(k)."""
        k = np.asarray(k, dtype=float)
        out = np.zeros_like(k)
        h = self.half_width
        for c, kj in zip(self.coeffs, self.centres):
            u = (k - kj) / h
            out += c * np.where(np.abs(u) < 1.0, np.cos(0.5 * np.pi * u) ** 2, 0.0)
        return out

    def weight(self, k) -> np.ndarray:
        """w(|k|) (same shape and float kind as ``k``)."""
        k = np.asarray(k)
        if not self.coeffs:
            return cut_weight(k, self.kchi_max)
        w = np.interp(k, self._k, self._w, left=1.0, right=0.0)
        return w.astype(k.dtype, copy=False) if np.issubdtype(k.dtype, np.floating) else w

    @property
    def boosted(self) -> bool:
        return any(c > 0 for c in self.coeffs)

    def largest_square(self) -> float:
        """max_k w(k)^2 (1 without bumps)."""
        return float(max(1.0, np.max(self._w) ** 2))

    def __repr__(self) -> str:
        return f"CutProfile(K={self.kchi_max:g}, bumps={len(self.coeffs)}, max w^2={self.largest_square():.3f})"


def plain_profile(kchi_max: float) -> CutProfile:
    """The taper alone (no boost)."""
    return CutProfile(kchi_max)


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


def sw_sigma_constant(cosmology, volume: float) -> float:
    """C of sigma(k) = C (k^2)^((n_s - 4) / 4), k in 1/chi_rec: the power law of :func:`mode_sigma`,
    C = (T/5) sqrt(2 pi^2 A_s / V) (chi_rec k_pivot)^((1 - n_s) / 2)."""
    t_uk = cosmology.t_cmb * 1e6
    return ((t_uk / 5.0) * math.sqrt(2.0 * np.pi**2 * A_S / volume)
            * (cosmology.chi_rec_mpc * K_PIVOT) ** ((1.0 - N_S) / 2))


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


