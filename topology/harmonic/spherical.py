"""The invariant modes of a spherical space S^3 / Gamma as columns of the real a_lm covariance.

The same modes, spectrum and cut as the spherical skies (:mod:`topology.skies.spherical`): at
each degree k = KMIN..kmax the field is sum_j s_k w_j F_j with independent standard complex w_j
(E|w|^2 = 1, E w^2 = 0) over an orthonormal basis of the Gamma-invariant coefficient matrices
C_j (:mod:`topology.skies.s3_invariants`), s_k^2 = |Gamma| sigma_k^2 w_k (k+1) / (2 pi^2)
(:func:`~topology.skies.spherical.degree_variances`, :func:`~topology.skies.spherical.mode_amplitudes`),
and the sky is T = -(T_cmb/5) sqrt(2) Re F at the last-scattering sphere of radius
chi = chi_rec / R_c about the observer x. Moved to the observer, C' = D^k(x)^T C, every basis
element is a single column: u e_b^T with u = D^k(x)^T conj(V_i) (groups acting on the left:
C = conj(V) W, the column b of W) or u = D^k(x)^T e_a (lens spaces: the invariant entries
(a, b) of C), so its a_lm are those of :class:`~topology.skies.s3_tensors.ColumnAlm`. The real
coefficients r (:mod:`topology.harmonic.basis`) are real-linear in w_j: r = sum_j (Re w_j a_j +
Im w_j b_j) with Re w_j, Im w_j of variance 1/2, hence the two columns sqrt(1/2) a_j,
sqrt(1/2) b_j per mode and C = sum W W^T (:func:`topology.harmonic.covariance.covariance_from_blocks`).
The sky frame is the skies' (:func:`~topology.skies.spherical.sky_frame`), applied as the real
rotation D(Q) of :mod:`topology.harmonic.rotation`, one l block at a time.

The cut, its complement and the reference, as in the flat view (:mod:`topology.harmonic.covariance`).
The degrees are those of a sky to lmax: KMIN..kmax, kmax = ceil(2 lmax / chi) by default
(``kchi_max`` given: ceil(kchi_max / chi), the k chi_rec / R_c of the top degree). With
``complement`` (the default) the kept degrees carry their plain variance and the power of all
degrees beyond, C_l(S^3) - C_l(S^3, k <= kmax), is added on the diagonal as if isotropic; the
reference is C_l(S^3) of all degrees (the closed-space SW spectrum that the skies' tail weights
aim at; :func:`~topology.skies.s3_spectra.converged_sachs_wolfe_cl`, from the zonal kernel of S^3,
Lehoucq et al. 2002, CQG 19, 4683). A degree k >> l / chi reaches multipole l from a thin shell of
its many modes and carries little of the topology there, and the divergence converges in kmax
(README, harmonic section). Without it (``complement=False``) the covariance is exactly that of
the skies (:func:`~topology.skies.spherical.spherical_sky` at its default kmax): the kept degrees
with the skies' tail weights w_k = 1 + A (k/kmax)^4, against the simply connected S^3 of the same
degrees and weights (:func:`~topology.skies.s3_spectra.s3_sachs_wolfe_cl`); it is singular when the
kept modes span fewer than N directions (a large group at small chi: the dodecahedral space has
no modes between k = 0 and 12). Either way the covering space (Gamma = 1) has exactly
C = diag(C_l) of the reference (tested to rounding), and D(S^3/Gamma || S^3) measures the
topology alone. Sachs-Wolfe only, as the skies. Cost: 2 N^2 per invariant mode (about
(k+1)^2 / |Gamma| modes at degree k), checked against MAX_WORK before any work.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..skies import default_kmax
from ..skies.s3_invariants import degrees, group_of
from ..skies.s3_spectra import KMIN, converged_sachs_wolfe_cl, s3_sachs_wolfe_cl
from ..skies.s3_tensors import ColumnAlm
from ..skies.spherical import KMAX_LIMIT, degree_variances, mode_amplitudes, sky_frame
from .basis import LMIN, n_coefficients
from .radial import SW, check_terms

#: memory of one block of complex intermediates (bytes)
BLOCK_BYTES = 32 * 2**20
#: the largest covariance computed: floating-point operations of its rank updates (as the flat one)
MAX_WORK = 2e12


@dataclass(frozen=True)
class SphericalCut:
    """The degrees of a spherical covariance: kmax, chi = chi_rec / R_c, variance[k] (sigma_k^2, times
    w_k with the tail weights), the reference C_l and the complement C_l added on the diagonal
    (l = 0..lmax; zeros without the complement), the tail information (None without the weights)."""

    kmax: int
    chi: float
    variance: np.ndarray
    cl_iso: np.ndarray
    cl_complement: np.ndarray
    tail: dict | None

    @property
    def kchi_max(self) -> float:
        """kmax chi_rec / R_c: the top degree as a wave number times chi_rec."""
        return self.kmax * self.chi


def check_spherical(space, observer, cosmology, terms) -> float:
    """chi = chi_rec / R_c after checking space, observer, background and terms (InputError)."""
    if getattr(space, "geometry", None) != "spherical" or not hasattr(space, "pairs"):
        raise InputError(f"needs a spherical space, got {getattr(space, 'family', space)!r}", "[space] family")
    if getattr(observer, "geometry", None) != "spherical":
        raise InputError("a spherical space needs an observer on S^3", "[observer] position")
    if not cosmology.omega_k < 0:
        raise InputError(f"spherical spaces need a closed background, omega_k < 0, got {cosmology.omega_k}",
                         "[cosmology] omega_k")
    if check_terms(terms) != SW:
        raise InputError("spherical spaces have the Sachs-Wolfe term only (as their skies): terms = [\"sw\"]",
                         "[harmonic] terms")
    if group_of(space.pairs).kind == "general":
        raise InputError(f"the harmonic covariance of {space.family} (a group acting on both sides that is not a "
                         "lens space) is not implemented", "[space] family")
    return float(cosmology.chi_rec_over_curvature_radius)


def degree_cut(lmax: int, chi: float, kchi_max: float | None = None) -> int:
    """kmax: ceil(2 lmax / chi) (the skies' default) or ceil(kchi_max / chi); InputError outside
    KMIN..KMAX_LIMIT."""
    if kchi_max is None:
        kmax = default_kmax(lmax, chi)
    else:
        if isinstance(kchi_max, bool) or not isinstance(kchi_max, (int, float, np.integer, np.floating)) \
                or not np.isfinite(kchi_max) or kchi_max <= 0:
            raise InputError(f"must be a positive number, got {kchi_max!r}", "[harmonic] kchi_max")
        kmax = int(math.ceil(float(kchi_max) / chi - 1e-9))
    if not KMIN <= kmax <= KMAX_LIMIT:
        raise InputError(f"gives S^3 modes up to k = {kmax} (chi_rec/R_c = {chi:.4g}), outside {KMIN}..{KMAX_LIMIT}: "
                         f"use kchi_max <= {KMAX_LIMIT * chi:.4g} or lower lmax", "[harmonic] kchi_max")
    return kmax


def spherical_cut(cosmology, lmax: int, chi: float, kchi_max: float | None = None,
                  complement: bool = True) -> SphericalCut:
    """The degrees for a covariance to ``lmax``: with ``complement`` the plain variances, the
    reference of all degrees (Richardson from 8 and 16 kmax: ~1e-5) and the complement beyond
    kmax; without, the skies' tail weights and the reference of the same weighted degrees."""
    kmax = degree_cut(lmax, chi, kchi_max)
    if complement:
        variance, tail = degree_variances(cosmology, lmax, kmax, False)
        cl = converged_sachs_wolfe_cl(cosmology, lmax, 4 * kmax)
        rest = np.maximum(cl - s3_sachs_wolfe_cl(cosmology, lmax, kmax), 0.0)
        return SphericalCut(kmax, chi, variance, cl, rest, None)
    variance, tail = degree_variances(cosmology, lmax, kmax, True)
    cl = s3_sachs_wolfe_cl(cosmology, lmax, kmax, tail["weights"])
    return SphericalCut(kmax, chi, variance, cl, np.zeros(lmax + 1), tail)


def mode_work(space, lmax: int, kmax: int) -> tuple[int, float]:
    """(invariant modes of degrees KMIN..kmax, floating-point operations of their rank updates:
    N^2 per real column, two columns per complex mode), from the character formula (cheap)."""
    from ..spaces.spherical import mode_counts

    modes = int(mode_counts(space, kmax)[KMIN:].sum())
    return modes, 2.0 * modes * float(n_coefficients(lmax)) ** 2


def check_work(space, lmax: int, kmax: int) -> int:
    """The number of invariant modes; InputError when their rank updates exceed MAX_WORK."""
    modes, work = mode_work(space, lmax, kmax)
    if work > MAX_WORK:
        raise InputError(f"the covariance of {space.describe()} to lmax {lmax} would need {work:.1e} floating-point "
                         f"operations ({modes} invariant modes to k = {kmax}; limit {MAX_WORK:.0e}): lower lmax or "
                         "kchi_max, or drop the smallest scales (a larger group or curvature radius has fewer modes)",
                         "[harmonic] kchi_max")
    return modes


def _mode_columns(deg, k: int, x0: np.ndarray, delta) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(U (k+1, c), column index into U per mode, b per mode): mode j is C' = U[:, col_j] e_{b_j}^T,
    in the order of the degree's weights (W (m, k+1) row by row; a lens space's invariant entries
    row by row)."""
    from ..skies.s3_invariants import rotate_thin

    eye = np.eye(k + 1, dtype=complex)
    if hasattr(deg, "mask"):                                   # lens spaces: the entries (a, b) of C
        rows, cols = np.nonzero(deg.mask)
        return rotate_thin(delta, x0, eye, transpose=True), rows, cols
    basis = eye if deg.basis is None else np.conj(deg.basis)   # left groups: C = conj(V) W
    u = rotate_thin(delta, x0, basis, transpose=True)
    m = u.shape[1]
    return u, np.repeat(np.arange(m), k + 1), np.tile(np.arange(k + 1), m)


def _pairs(lmax: int, top: int):
    """(l, m) of l = LMIN..top, m = 0..l, and the rows of the real basis they fill: m = 0 -> one
    row (Re), m > 0 -> two (sqrt(2) Re, sqrt(2) Im)."""
    ell = np.concatenate([np.full(l + 1, l) for l in range(LMIN, top + 1)]).astype(int)
    m = np.concatenate([np.arange(l + 1) for l in range(LMIN, top + 1)]).astype(int)
    base = ell * ell - LMIN**2
    zero = m == 0
    return ell, m, zero, base[zero], (base + 2 * m - 1)[~zero], (base + 2 * m)[~zero]


def degree_columns(deg, k: int, observer, chi: float, lmax: int, amplitude: float, rotation: np.ndarray,
                   delta=None, scale: float = 1.0, block: int | None = None):
    """Yield (first mode, real block (N, 2B)) for degree k: the columns sqrt(1/2) r(w_j = 1) of B
    modes, then their sqrt(1/2) r(w_j = i), in the order of the degree's weights (the sky's
    a_lm are sum_j sqrt(2) (Re w_j, Im w_j) . (these two columns)). ``rotation``: D(Q) of the
    sky frame (N, N); ``amplitude`` s_k; ``scale`` the sky's -T_cmb/5 (microK)."""
    u, col, b = _mode_columns(deg, k, np.asarray(observer.point, dtype=float), delta)
    tensors = ColumnAlm(k, lmax, chi)
    ell, m, zero, r0, r_re, r_im = _pairs(lmax, tensors.top)
    if block is None:
        block = max(16, BLOCK_BYTES // (64 * len(ell)))
    f = scale * amplitude / math.sqrt(2.0)
    r2 = math.sqrt(2.0)
    n = n_coefficients(lmax)
    blocks = [slice(l * l - LMIN**2, (l + 1) ** 2 - LMIN**2) for l in range(LMIN, tensors.top + 1)]
    for j0 in range(0, len(b), block):
        sl = slice(j0, j0 + block)
        B = len(b[sl])
        W = np.zeros((n, 2 * B), order="F")
        for half, a in enumerate(tensors.real_alm(u[:, col[sl]], b[sl], f, ell, m)):
            out = W[:, half * B:(half + 1) * B]
            out[r0] = a[zero].real
            out[r_re] = r2 * a[~zero].real
            out[r_im] = r2 * a[~zero].imag
        for rows in blocks:                                             # the sky frame, one l at a time
            W[rows] = rotation[rows, rows] @ W[rows]
        yield j0, W


def spherical_mode_blocks(space, observer, cosmology, lmax: int, cut: SphericalCut, block: int | None = None):
    """Yield real blocks W (N, 2B), Fortran order, with C = sum over blocks of W W^T: the invariant
    modes of every degree KMIN..cut.kmax of ``space`` seen by ``observer`` (module doc)."""
    from .rotation import real_rotation

    check_work(space, lmax, cut.kmax)
    amplitude = mode_amplitudes(len(space.pairs), cut.kmax, cut.variance)
    rotation = real_rotation(sky_frame(observer), lmax)
    scale = -cosmology.t_cmb * 1e6 / 5.0
    for deg, delta in degrees(group_of(space.pairs), cut.kmax, KMIN, with_delta=True):
        if deg.count == 0 or amplitude[deg.k] == 0.0:
            continue
        for _, W in degree_columns(deg, deg.k, observer, cut.chi, lmax, amplitude[deg.k], rotation, delta,
                                   scale, block):
            yield W


__all__ = ["SphericalCut", "check_spherical", "degree_cut", "spherical_cut", "check_work", "spherical_mode_blocks", "degree_columns",
           "mode_work"]
