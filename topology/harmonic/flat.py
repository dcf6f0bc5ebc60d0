"""The invariant modes of a flat space E^3 / Gamma as columns of the real a_lm covariance.

The same modes and amplitudes as the flat skies (:mod:`topology.skies.flat_modes`: the
wave vectors k = 2 pi n D of the covering torus with 0 < k chi_rec <= kchi_max, rms
sigma(k) = (T/5) sqrt(2 pi^2 P_R(k) / (k^3 V)) times the taper w(k) of the cut
(:func:`~topology.skies.flat_modes.cut_weight`), the point-group average c_q = N_g^-1/2
sum_g c~_{R_g q} e^{i (R_g q).t_g}). Written as a sum over the torus's independent unit normals
z_k (<z_k z*_k'> = delta_kk', z_{-k} = z*_k), the invariant field seen from x with sky axes F
(columns, space coordinates) has real coefficients r = sum_k z_k u(k),

    u(k) = 4 pi i^l sigma(k) w(k) R_l(k) N_g^-1/2 sum_g e^{i k.(R_g x + t_g)} Y^R(F^T R_g^T k^),

(R_l = j_l for Sachs-Wolfe; :mod:`topology.harmonic.radial`), hence C = sum_k u(k) u(k)^H over the
whole ball. Two reductions keep it small (both exact): u(-k) = u(k)*, and u(R_h k) =
e^{i (R_h k).t_h} u(k) for every h of the point group (substitute g -> h g; the lattice
translation adds a multiple of 2 pi), so the whole orbit O of k under {+-R_g} contributes
|O| Re(u u^H). :func:`orbit_representatives` picks one wave vector per orbit (the smallest
index key in the half space) and its weight |O|.

Non-compact families E11-E17 use the compact cover the skies use
(:func:`topology.skies.flat_modes.compact_cover`: the open directions given a period).
"""

from __future__ import annotations


import numpy as np

from ..errors import InputError
from ..skies.flat_modes import (check_space, compact_cover, cut_weight, half_ball_modes, index_bounds, mode_sigma,
                                point_group)
from .basis import LMIN, n_coefficients, real_harmonics

#: memory of one block of columns (float64, N x 2 block), bytes
BLOCK_BYTES = 32 * 2**20
#: the largest covariance computed: floating-point operations of its rank updates (a few minutes
#: on one core; E1 of side 2 chi_rec at lmax 30 and the default cut needs 2.5e11)
MAX_WORK = 2e12


def _in_half(v: np.ndarray) -> np.ndarray:
    """n3 > 0, or n3 = 0 and (n2 > 0 or n2 = 0 and n1 > 0): the half space of the skies."""
    return (v[..., 2] > 0) | ((v[..., 2] == 0) & ((v[..., 1] > 0) | ((v[..., 1] == 0) & (v[..., 0] > 0))))


def orbit_representatives(space, kchi_max: float):
    """(n (M, 3) int, k (M, 3) in 1/chi_rec, weight (M,)): one wave vector of each orbit of
    {+-R_g} on the ball 0 < k chi_rec <= kchi_max and the orbit's size."""
    n, k, _ = half_ball_modes(space, kchi_max)
    group = point_group(space)
    if len(group) == 1:
        return n, k, np.full(len(n), 2.0)
    m = index_bounds(space.lattice, kchi_max) + 1   # images stay in the ball; +1 guards rounding
    dims = 2 * m + 1

    def key(v):
        return ((v[..., 0] + m[0]) * dims[1] + (v[..., 1] + m[1])) * dims[2] + (v[..., 2] + m[2])

    images = np.stack([n @ Q for Q, _ in group] + [-(n @ Q) for Q, _ in group])   # (2G, M, 3)
    keys = key(images)
    big = np.iinfo(np.int64).max
    rep = np.where(_in_half(images), keys, big).min(axis=0)
    keep = key(n) == rep
    srt = np.sort(keys[:, keep], axis=0)
    size = 1 + np.count_nonzero(np.diff(srt, axis=0), axis=0)
    return n[keep], k[keep], size.astype(float)


def covariance_work(space, observer, lmax: int, kchi_max: float) -> float:
    """Floating-point operations of the rank updates, about 2 x (wave vectors of the ball / G) x N^2
    (G the point group's order): the cost :data:`MAX_WORK` limits, from the ball's volume."""
    if not space.compact:
        space, _, _ = compact_cover(space, observer)
    half = 2.0 / 3.0 * np.pi * kchi_max**3 * space.covering_cell_volume / (2.0 * np.pi) ** 3
    return 4.0 * half / len(space.cosets) * float(n_coefficients(lmax)) ** 2


def flat_mode_blocks(space, observer, cosmology, lmax: int, kchi_max: float, radial, block: int | None = None,
                     profile=None):
    """Yield real blocks W (N, 2B), Fortran order, with C = sum over blocks of W W^T: the columns
    sqrt(|O|) Re u and sqrt(|O|) Im u of B orbit representatives (see the module doc).
    ``radial(ell, k)``: the radial function of :mod:`topology.harmonic.radial`; ``profile``: the
    modes' radial weight (:class:`~topology.skies.flat_modes.CutProfile`, the skies' own; default
    the taper of the cut)."""
    check_space(space)
    if observer.geometry != "flat":
        raise InputError(f"a flat space needs a flat observer, got {observer.geometry!r}", "[observer] position")
    work = covariance_work(space, observer, lmax, kchi_max)
    if work > MAX_WORK:
        raise InputError(f"the covariance would need {work:.1e} floating-point operations (limit {MAX_WORK:.0e}): "
                         "lower lmax or kchi_max, or the largest scale (a space much larger than chi_rec is "
                         "isotropic at low l)", "[harmonic] kchi_max")
    if not space.compact:
        space, _, _ = compact_cover(space, observer)
    n_all, k_all, w_all = orbit_representatives(space, kchi_max)
    weight = (lambda k: cut_weight(k, kchi_max)) if profile is None else profile.weight
    x = np.asarray(observer.point[:3], dtype=float)
    F = np.asarray(observer.frame[:3, :], dtype=float)
    cosets = [(np.asarray(R, dtype=float), np.asarray(t, dtype=float)) for R, t in space.cosets]
    N = n_coefficients(lmax)
    if block is None:
        block = max(64, BLOCK_BYTES // (16 * N))
    ell = np.arange(LMIN, lmax + 1)
    for b0 in range(0, len(k_all), block):
        k = k_all[b0:b0 + block]
        B = len(k)
        kn = np.linalg.norm(k, axis=1)
        col = 4.0 * np.pi * mode_sigma(kn, cosmology, space.covering_cell_volume) * weight(kn) \
            * np.sqrt(w_all[b0:b0 + block] / len(cosets))
        ku, inv = np.unique(np.round(kn, 12), return_inverse=True)
        factor = np.asarray(radial(ell, ku))[:, inv] * col[None, :]      # (lmax - 1, B)
        W = np.empty((N, 2 * B), order="F")
        Wr, Wi = W[:, :B], W[:, B:]
        for i, (R, t) in enumerate(cosets):
            kg = k @ R                                                  # R^T k
            ph = kg @ x + k @ t                                         # k.(R x + t)
            Y = real_harmonics(kg @ F, lmax)
            if i == 0:
                np.multiply(Y, np.cos(ph), out=Wr)
                np.multiply(Y, np.sin(ph), out=Wi)
            else:
                Wr += Y * np.cos(ph)
                Wi += Y * np.sin(ph)
        for ll in ell:                                                  # times i^l R_l(k) column factor
            rows = slice(ll * ll - LMIN**2, (ll + 1) ** 2 - LMIN**2)
            a = Wr[rows] * factor[ll - LMIN]
            b = Wi[rows] * factor[ll - LMIN]
            q = ll % 4                                                  # i^l = 1, i, -1, -i
            Wr[rows], Wi[rows] = ((a, b), (-b, a), (-a, -b), (b, -a))[q]
        yield W


def mode_count(space, observer, kchi_max: float) -> int:
    """Wave vectors of the ball 0 < k chi_rec <= kchi_max of the (covering) torus."""
    if not space.compact:
        space, _, _ = compact_cover(space, observer)
    n, _, _ = half_ball_modes(space, kchi_max)
    return 2 * len(n)
