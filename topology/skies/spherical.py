"""Sachs-Wolfe skies of spherical spaces S^3/Gamma (lens, prism, tetrahedral, octahedral and
dodecahedral spaces) as sums of Gamma-invariant eigenmodes of S^3.

Field. The comoving curvature perturbation R on the unit S^3 (distances in units of R_c) is
a Gaussian sum over harmonic degrees k = 2..kmax (eigenvalue k(k+2) of -Laplacian, beta = k+1)
of Gamma-invariant eigenfunctions. In the basis of Wigner matrices
(:mod:`topology.skies.s3_harmonics`), f_k(x) = tr(C_k^T D^k(x)), and the invariant
coefficients are the range of the group-averaging projector P_k. The draw is

    C_k = s_k P_k(Z_k),   R(x) = sqrt(2) Re sum_k tr(C_k^T D^k(x)),

Z_k a (k+1) x (k+1) matrix of independent standard complex normals (E|Z|^2 = 1, E Z^2 = 0).
P_k(Z_k) is white noise on the invariant subspace (an orthogonal projection of white noise),
and sqrt(2) Re(.) of a circular complex field whose span is closed under conjugation is a real
Gaussian field with the same covariance, so this is exactly the same random field as
independent real Gaussian amplitudes on a real orthonormal basis of invariant modes, each of
variance sigma_k^2, at a fraction of the cost:

    E[R(x) R(y)] = sum_k sigma_k^2 sum_{g in Gamma} Y_k(x, g y),

Y_k(x, y) = (k+1)^2/(2 pi^2) sin((k+1) psi)/((k+1) sin psi) the degree-k zonal kernel of S^3
(method of images; modes orthonormal on the quotient of volume 2 pi^2/|Gamma|). Hence
s_k^2 = |Gamma| sigma_k^2 (k+1)/(2 pi^2).

Spectrum. Per unit-normalised mode, sigma_k^2 = 2 pi^2 P_R(q) / (beta (beta^2 - 1)), the
closed-space form of a nearly scale-invariant spectrum (P ~ 1/(beta(beta^2-1)) for
Harrison-Zel'dovich: Lehoucq et al. 2002, CQG 19, 4683; Aurich, Lustig & Steiner 2005, CQG 22,
2061; the 2 pi^2 (from memory) makes sum_beta beta^2 sigma^2/(2 pi^2) -> int d beta/beta P_R,
the flat-space variance per ln k), P_R(q) = A_s (q/k_pivot)^(n_s-1) of
:mod:`topology.skies.spectra` at the physical wavenumber q = sqrt(beta^2 - 1)/R_c. The
beta = 1 (constant) and beta = 2 modes are left out: in a closed FLRW universe the beta = 2
scalar modes are pure gauge (Abbott & Schaefer 1986, ApJ 308, 546; from memory). With Gamma
= {1} this reproduces the flat Sachs-Wolfe plateau l(l+1) C_l / 2 pi ~ A_s T^2/25 at
1 << l << kmax chi (tested).

Temperature. Only the Sachs-Wolfe term: Delta T / T = -R/5 at the last-scattering points
P(n) = exp_x(chi n) of the observer x (chi = chi_rec / R_c), in microK. The Doppler and ISW
terms are not implemented for spherical skies ("doppler", "isw" raise InputError).

Sky. The field on the sky is band-limited to l <= kmax (a degree-k mode seen on a sphere about
the observer has l <= k), so its a_lm are computed exactly (no pixel quadrature, no
healpy.map2alm) by the ring method of :func:`field_alm`: exact Fourier series in longitude,
Gauss-Legendre rings in colatitude, integrated against Y_lm in the observer's sky frame; :func:`field_alm_by_grid` does the same by
brute-force evaluation and is its cross-check. The sky keeps its l = 0, 1 terms: the matched-
circle identity T(P) = T(g^-1 P) holds for the whole field. Power at multipole l comes from
k >~ l / chi, so a sky with modes up to kmax holds the fraction ~ 1 - 0.55 (l / (kmax chi))^2
of the simply connected C_l (measured with :func:`s3_sachs_wolfe_cl`: 86 % at kmax chi = 2 l,
94 % at 3 l, 98 % at 6 l). Cost ~ kmax^4 (about 1 s at kmax = 60, 7 s at 120).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.special import sph_harm_y

from .. import geometry as geo
from ..bandlimit import check_band_limit
from ..errors import InputError
from . import default_kmax
from .base import Sky, stream_rng
from .legendre import legendre_table
from .s3_harmonics import (
    InvariantProjector, gauss_legendre_grid, grid_to_alm, invariant_ranks, projectors,
    wigner_stack, zonal_s3,
)
from .spectra import A_S, K_PIVOT, N_S, primordial_power

#: highest harmonic degree accepted: the Wigner recursion keeps unitarity to 2e-10 at k = 150
#: (1e-13 at k = 60, 4e-8 at k = 200, measured); cost ~ kmax^4, about 1 s at kmax = 60
KMAX_LIMIT = 150


def check_default_kmax(lmax: int, chi: float, what: str, where: str, advice: str = "") -> None:
    """Plan-time: a sky of ``what`` to ``lmax`` at chi = chi_rec / R_c needs k up to
    default_kmax(lmax, chi) = ceil(2 lmax / chi); one-line InputError naming the largest lmax
    that fits when that exceeds KMAX_LIMIT (``advice`` adds another way out)."""
    k = default_kmax(lmax, chi)
    if k > KMAX_LIMIT:
        raise InputError(f"{what} at lmax {lmax} needs S^3 modes up to k = {k} > {KMAX_LIMIT}; lower [instrument] "
                         f"lmax to {int(KMAX_LIMIT * chi / 2)}{advice}", where)
#: lowest physical degree: beta = k + 1 >= 3 (beta = 1, 2 are the constant and gauge modes)
KMIN = 2
#: Wigner entries per evaluation block (bounds memory: ~16 bytes x 6 x this)
_BLOCK_ENTRIES = 3_000_000


def mode_variance(k, curvature_radius_mpc: float, A_s: float = A_S, n_s: float = N_S,
                  k_pivot: float = K_PIVOT) -> np.ndarray:
    """sigma_k^2 = 2 pi^2 P_R(q) / (beta (beta^2 - 1)), beta = k+1, q = sqrt(beta^2-1)/R_c (Mpc^-1).

    Variance of R per eigenmode normalised to 1 on the unit S^3 (see module docstring).
    """
    beta = np.asarray(k, dtype=float) + 1.0
    if np.any(beta < 2.0):
        raise ValueError("mode_variance needs k >= 1")
    q = np.sqrt(beta**2 - 1.0) / curvature_radius_mpc
    return 2.0 * math.pi**2 * primordial_power(q, A_s, n_s, k_pivot) / (beta * (beta**2 - 1.0))


@dataclass(frozen=True)
class InvariantField:
    """A drawn Gamma-invariant field R(x) = sqrt(2) Re sum_k tr(C_k^T D^k(x)) on S^3.

    coeffs[k] is the (k+1, k+1) complex C_k (absent or zero where no mode survives).
    ``scale`` multiplies R to give the field returned by :meth:`values` (e.g. -T/5 in microK).
    ``counts[k]`` is the number of invariant modes at degree k (projector rank), k = 0..kmax.
    """

    kmax: int
    coeffs: dict
    scale: float = 1.0
    counts: np.ndarray | None = None

    def values(self, points: np.ndarray) -> np.ndarray:
        """scale * R at unit quaternions points (..., 4), evaluated in bounded blocks."""
        pts = np.asarray(points, dtype=float)
        shape = pts.shape[:-1]
        pts = pts.reshape(-1, 4)
        out = np.zeros(len(pts))
        live = {k: c.ravel() for k, c in self.coeffs.items() if np.any(c)}
        if not live:
            return out.reshape(shape)
        ktop = max(live)
        block = max(16, _BLOCK_ENTRIES // (ktop + 1) ** 2)
        for start in range(0, len(pts), block):
            sl = slice(start, start + block)
            acc = np.zeros(len(pts[sl]))
            for k, d in wigner_stack(pts[sl], ktop):
                c = live.get(k)
                if c is not None:
                    acc += (c @ d.reshape((k + 1) ** 2, -1)).real
            out[sl] = acc
        return (math.sqrt(2.0) * self.scale * out).reshape(shape)


def _check_int(value, name: str, lo: int, hi: int | None = None) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise InputError(f"must be a whole number, got {value!r}", name)
    v = int(value)
    if v < lo or (hi is not None and v > hi):
        rng = f">= {lo}" if hi is None else f"in {lo}..{hi}"
        raise InputError(f"must be {rng}, got {v}", name)
    return v


def _check_space(space) -> None:
    if getattr(space, "geometry", None) != "spherical" or not hasattr(space, "pairs"):
        raise InputError(f"spherical skies need a spherical space, got {getattr(space, 'family', space)!r}",
                         "[space] family")


def invariant_mode_counts(space, kmax: int) -> np.ndarray:
    """Number of Gamma-invariant eigenmodes for k = 0..kmax: the rank of each projector P_k.

    Equals the character average (topology.spaces.spherical.mode_counts) and, for groups acting
    on one side, (k+1) times the Molien coefficient (tested).
    """
    _check_space(space)
    kmax = _check_int(kmax, "kmax", 0)
    return invariant_ranks(space.pairs, kmax)


def draw_invariant_field(space, kmax: int, rng: np.random.Generator, variance) -> InvariantField:
    """Draw C_k = s_k P_k(Z_k), k = KMIN..kmax, s_k^2 = |Gamma| variance[k] (k+1)/(2 pi^2).

    Z_k is drawn for every k in increasing order (real and imaginary parts from
    rng.standard_normal), so a larger kmax extends a field without changing its lower degrees.
    ``variance`` is a sequence indexed by k (sigma_k^2, read for k >= KMIN).
    """
    order = len(space.pairs)
    coeffs = {}
    counts = np.zeros(kmax + 1, dtype=np.int64)
    for proj in projectors(space.pairs, kmax):
        k = proj.k
        counts[k] = proj.rank()
        if k < KMIN:
            continue
        n = k + 1
        g = rng.standard_normal((2, n, n))
        z = (g[0] + 1j * g[1]) * math.sqrt(0.5)
        s = math.sqrt(order * float(variance[k]) * n / (2.0 * math.pi**2))
        c = s * proj.apply(z)
        if np.max(np.abs(c), initial=0.0) > 1e-12 * s:
            coeffs[k] = c
    return InvariantField(int(kmax), coeffs, counts=counts)


def _ring_geometry(observer: geo.Observer, chi: float, theta: np.ndarray):
    """Quaternions (left, right, rings) with exp_x(chi n(theta, phi)) = left e^{i phi/2} rings(theta) e^{-i phi/2} right.

    With u(n) the pure unit quaternion conj(x) (frame n), the LSS point is x y(n),
    y = cos chi + sin chi u(n). Turning the sky about its z axis by phi turns u about the axis
    a = det(M) M z (M: n -> u, 3x3 orthogonal) by phi, i.e. y(theta, phi) = q y(theta, 0) q^-1
    with q = cos(phi/2) + sin(phi/2) a = h^-1 e^{i phi/2} h for a unit quaternion h taking a to
    i (h a h^-1 = i). So left = x h^-1, right = h, rings = h y(theta, 0) h^-1.
    """
    x = observer.point
    mq = geo.quat_multiply(geo.quat_conjugate(x)[None, :], observer.frame.T)   # (3, 4): u of e_x, e_y, e_z
    m = mq[:, 1:].T                                                            # M[:, j] = u(e_j)
    axis = np.sign(np.linalg.det(m)) * m[:, 2]
    i_axis = np.array([1.0, 0.0, 0.0])
    if axis @ i_axis < -1.0 + 1e-12:
        h = np.array([0.0, 0.0, 1.0, 0.0])          # j i j^-1 = -i
    else:
        h = np.concatenate([[1.0 + axis @ i_axis], np.cross(axis, i_axis)])
        h /= np.linalg.norm(h)
    n0 = np.stack([np.sin(theta), np.zeros_like(theta), np.cos(theta)], axis=-1)
    y0 = np.concatenate([np.full((len(theta), 1), math.cos(chi)), math.sin(chi) * (n0 @ m.T)], axis=1)
    hinv = geo.quat_conjugate(h)
    rings = geo.quat_multiply(geo.quat_multiply(h[None, :], y0), hinv[None, :])
    left = geo.quat_multiply(x, hinv)
    return left, h, rings


def field_alm(field: InvariantField, observer: geo.Observer, chi: float, lmax: int) -> np.ndarray:
    """Exact a_lm (healpy order, l <= lmax) of n -> field(exp_x(chi n)) in the observer's sky frame.

    Ring method: on a ring of colatitude theta the point is left e^{i phi/2} z(theta) e^{-i phi/2}
    right (:func:`_ring_geometry`), and D^k(e^{i phi/2}) = diag(e^{i (a - k/2) phi}), so

        tr(C^T D^k(P)) = sum_M e^{i M phi} sum_{b - a = M} G_ab D^k_ba(z(theta)),  G = D^k(right) C^T D^k(left):

    the Fourier series in phi is exact and needs D^k only at one point per ring. The theta
    integral uses ceil((kmax + L + 1)/2) Gauss-Legendre rings, L = min(lmax, kmax), exact for
    a field with l <= kmax; a_lm = 2 pi sum_i w_i lambda_lm(theta_i) c_m(theta_i). Cost ~ kmax^4.
    """
    lmax = int(lmax)
    kmax = field.kmax
    band = min(lmax, kmax)
    n_theta = (kmax + band + 2) // 2
    x, w = np.polynomial.legendre.leggauss(n_theta)
    theta = np.arccos(x)
    left, right, rings = _ring_geometry(observer, chi, theta)
    quats = np.concatenate([left[None, :], right[None, :], rings])
    fsum = np.zeros((n_theta, 2 * kmax + 1), dtype=complex)        # column M + kmax
    live = {k: c for k, c in field.coeffs.items() if np.any(c)}
    ktop = max(live) if live else -1
    if ktop >= 0:
        for k, d in wigner_stack(quats, ktop):
            c = live.get(k)
            if c is None:
                continue
            g = d[:, :, 1] @ c.T @ d[:, :, 0]                       # G = D(right) C^T D(left)
            h = g.T[:, :, None] * d[:, :, 2:]                        # h[b, a] = G_ab B_ba
            for off in range(-k, k + 1):                             # a - b = off -> M = -off
                fsum[:, kmax - off] += np.trace(h, offset=off, axis1=0, axis2=1)
    scale = field.scale / math.sqrt(2.0)
    from healpy import Alm

    alm = np.zeros(Alm.getsize(lmax), dtype=complex)
    for m in range(band + 1):
        cm = scale * (fsum[:, kmax + m] + np.conj(fsum[:, kmax - m]))
        ell = np.arange(m, band + 1)
        lam = sph_harm_y(ell[None, :], m, theta[:, None], 0.0).real
        alm[Alm.getidx(lmax, ell, m)] = 2.0 * math.pi * ((w * cm)[:, None] * lam).sum(axis=0)
    return alm


def field_alm_by_grid(field: InvariantField, observer: geo.Observer, chi: float, lmax: int) -> np.ndarray:
    """The same a_lm as :func:`field_alm` by direct evaluation on a full Gauss-Legendre grid
    (kmax + L + 1 longitudes; cost ~ kmax^5). A cross-check of the ring method."""
    band = min(int(lmax), field.kmax)
    n_theta = (field.kmax + band + 2) // 2
    theta, w, dirs = gauss_legendre_grid(n_theta, field.kmax + band + 1)
    small = grid_to_alm(field.values(observer.exp(dirs, chi)), theta, w, band)
    from healpy import Alm

    alm = np.zeros(Alm.getsize(int(lmax)), dtype=complex)   # l > kmax: exactly zero
    ell, m = Alm.getlm(band)
    alm[Alm.getidx(int(lmax), ell, m)] = small
    return alm


def spherical_sky(space, observer: geo.Observer, cosmology, *, lmax: int, nside: int | None = None,
                  kmax: int | None = None, terms=("sw",), seed: int = 0) -> Sky:
    """Sachs-Wolfe sky (alm, microK) of the spherical space ``space`` seen by ``observer``.

    ``cosmology`` must be closed (omega_k < 0); chi = chi_rec / R_c. kmax defaults to
    ceil(2 lmax / chi) and must be in KMIN..KMAX_LIMIT. Amplitudes come from the "signal" stream
    of ``seed``. ``nside`` (optional) only checks lmax <= 3 nside - 1 and is recorded.
    See the module docstring for the field, spectrum and exactness of the a_lm.
    """
    _check_space(space)
    if getattr(observer, "geometry", None) != "spherical":
        raise InputError("a spherical sky needs an observer on S^3", "[observer] position")
    if not cosmology.omega_k < 0:
        raise InputError(f"spherical spaces need a closed background, omega_k < 0, got {cosmology.omega_k}",
                         "[cosmology] omega_k")
    terms = tuple(terms)
    bad = [t for t in terms if t != "sw"]
    if bad or not terms:
        raise InputError(f"spherical skies include only the Sachs-Wolfe term ('sw'); not implemented: "
                         f"{bad or 'empty list'}", "[sky] terms")
    lmax = _check_int(lmax, "[sky] lmax", 0)
    if nside is not None:
        nside = _check_int(nside, "[sky] nside", 1)
        check_band_limit(lmax, nside, "[sky] lmax")
    seed = _check_int(seed, "[sky] seed", 0)
    chi = float(cosmology.chi_rec_over_curvature_radius)
    if kmax is None:
        kmax = default_kmax(lmax, chi)
        if kmax > KMAX_LIMIT:
            raise InputError(f"the default kmax = ceil(2 lmax / (chi_rec/R_c)) = {kmax} exceeds {KMAX_LIMIT}; "
                             f"give kmax <= {KMAX_LIMIT} (the sky is then complete to l ~ kmax chi / 2 = "
                             f"{int(KMAX_LIMIT * chi / 2)}) or lower lmax", "[sky] kmax")
    kmax = _check_int(kmax, "[sky] kmax", KMIN, KMAX_LIMIT)
    rc = cosmology.curvature_radius_mpc
    variance = np.zeros(kmax + 1)
    variance[KMIN:] = mode_variance(np.arange(KMIN, kmax + 1), rc)
    field = draw_invariant_field(space, kmax, stream_rng(seed, "signal"), variance)
    t_uk = cosmology.t_cmb * 1e6
    field = InvariantField(field.kmax, field.coeffs, scale=-t_uk / 5.0, counts=field.counts)
    alm = field_alm(field, observer, chi, lmax)
    counts = field.counts
    meta = {"method": "eigenmode", "family": space.family, "params": dict(space.params), "seed": seed,
            "kmax": kmax, "chi": chi, "modes": int(counts[KMIN:].sum()), "nside": nside,
            "observer": [float(v) for v in observer.point], "field": field}
    return Sky(lmax=lmax, alm=alm, terms=("sw",), meta=meta)


# ---------------------------------------------------------------------------------------------
# reference spectra (no Wigner matrices): the simply connected S^3
# ---------------------------------------------------------------------------------------------
def s3_sachs_wolfe_cl(cosmology, lmax: int, kmax: int) -> np.ndarray:
    """Expected SW C_l (microK^2) of the simply connected S^3, modes k = KMIN..kmax.

    C(theta) = (T/5)^2 sum_k sigma_k^2 Y_k(psi) with cos psi = cos^2 chi + sin^2 chi cos theta
    (:func:`~topology.skies.s3_harmonics.zonal_s3`), projected on Legendre polynomials,
    C_l = 2 pi int C(theta) P_l(cos theta) d cos theta, each k by an exact Gauss-Legendre rule.
    """
    chi = float(cosmology.chi_rec_over_curvature_radius)
    t_uk = cosmology.t_cmb * 1e6
    x, w = np.polynomial.legendre.leggauss((kmax + lmax) // 2 + 1)
    cos_psi = math.cos(chi) ** 2 + math.sin(chi) ** 2 * x
    pl = legendre_table(x, lmax)
    var = np.zeros(kmax + 1)
    var[KMIN:] = mode_variance(np.arange(KMIN, kmax + 1), cosmology.curvature_radius_mpc)
    corr = np.zeros(len(x))
    # sum_k sigma_k^2 Y_k by the Chebyshev recurrence in k (one pass)
    prev, cur = np.zeros_like(cos_psi), np.ones_like(cos_psi)
    for k in range(kmax + 1):
        if k >= KMIN:
            corr += var[k] * (k + 1) * cur / (2.0 * math.pi**2)
        prev, cur = cur, 2.0 * cos_psi * cur - prev
    cl = 2.0 * math.pi * (pl * (w * corr)[None, :]).sum(axis=1) * (t_uk / 5.0) ** 2
    cl[:2] = 0.0
    return cl


__all__ = ["spherical_sky", "invariant_mode_counts", "mode_variance", "draw_invariant_field", "field_alm",
           "field_alm_by_grid",
           "InvariantField", "InvariantProjector", "s3_sachs_wolfe_cl", "zonal_s3", "KMAX_LIMIT", "KMIN"]
