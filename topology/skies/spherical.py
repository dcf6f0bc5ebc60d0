"""Sachs-Wolfe skies of spherical spaces S^3/Gamma (lens, prism, tetrahedral, octahedral and
dodecahedral spaces) as sums of Gamma-invariant eigenmodes of S^3.

Field. The comoving curvature perturbation R on the unit S^3 (distances in units of R_c) is
a Gaussian sum over harmonic degrees k = 2..kmax (eigenvalue k(k+2) of -Laplacian, beta = k+1)
of Gamma-invariant eigenfunctions. In the basis of Wigner matrices
(:mod:`topology.skies.s3_harmonics`), f_k(x) = tr(C_k^T D^k(x)), and the invariant
coefficients are the range of the group-averaging projector P_k. The draw is

    C_k = s_k P_k(Z_k),   R(x) = sqrt(2) Re sum_k tr(C_k^T D^k(x)),

Z_k a (k+1) x (k+1) matrix of independent standard complex normals (E|Z|^2 = 1, E Z^2 = 0);
P_k and its range come from :mod:`topology.skies.s3_invariants` (for the groups acting on one
side, C_k = s_k conj(V) (V^T Z_k) with V an orthonormal basis of the fixed vectors).
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
healpy.map2alm) by :func:`field_alm`: per degree, the band |a - b| <= lmax of the coefficients
seen from the observer, contracted with spherical tensor operators
(:mod:`topology.skies.s3_tensors`); :func:`field_alm_by_grid` does the same by brute-force
evaluation and is its cross-check. The sky keeps its l = 0, 1 terms: the matched-circle
identity T(P) = T(g^-1 P) holds for the whole field; a map truncated at l_max < kmax sin chi
(where a degree-k mode has its power) loses the part above l_max, which lowers S on the
circles of the truncated map (not an error of the a_lm). Power at multipole l comes from
k >~ l / chi, so a sky with modes up to kmax holds the fraction ~ 1 - 0.55 (l / (kmax chi))^2
of the simply connected C_l (86 % at kmax chi = 2 l, 94 % at 3 l, 99 % at 7.5 l); by default
the tail weights of :mod:`topology.skies.s3_spectra` restore the rest to ~0.5 %. Degrees
k <= FULL_DRAW_KMAX draw a full (k+1)^2 Z_k as the skies made before (same seed, same sky);
above, only the invariant coefficients are drawn. Memory O(kmax^2) (one degree at a time);
cost per degree k about (lmax+1)^2 k / 2 for the tensors, and for lens spaces (k+1)^3 for the
turn to the observer (numbers in benchmarks/spherical_sky_speed.py).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from .. import geometry as geo
from ..bandlimit import check_band_limit
from ..errors import InputError
from . import default_kmax
from .base import Sky, stream_rng
from .s3_harmonics import gauss_legendre_grid, grid_to_alm, wigner_stack, zonal_s3
from .s3_invariants import degrees, group_of, invariant_ranks
from .s3_tensors import SphereAlm, rotate_alm
from .s3_spectra import KMIN, mode_variance, s3_sachs_wolfe_cl, tail_weights

#: highest harmonic degree accepted: the Wigner matrices keep unitarity to ~1e-13 at k = 700
#: (Risbo recursion, tested) and the invariant projectors their eigenvalues 0 or 1 to ~1e-13
KMAX_LIMIT = 1000


def check_default_kmax(lmax: int, chi: float, what: str, where: str, advice: str = "") -> None:
    """Plan-time: a sky of ``what`` to ``lmax`` at chi = chi_rec / R_c needs k up to
    default_kmax(lmax, chi) = ceil(2 lmax / chi); one-line InputError naming the largest lmax
    that fits when that exceeds KMAX_LIMIT (``advice`` adds another way out)."""
    k = default_kmax(lmax, chi)
    if k > KMAX_LIMIT:
        raise InputError(f"{what} at lmax {lmax} needs S^3 modes up to k = {k} > {KMAX_LIMIT}; lower [instrument] "
                         f"lmax to {int(KMAX_LIMIT * chi / 2)}{advice}", where)
#: degrees up to here draw a full white (k+1) x (k+1) Z_k and project it (the draws of the
#: skies made before, whose limit was k = 150: the same seed gives the same sky); above, only
#: the coefficients of the invariant modes are drawn (the same distribution, a fraction of the
#: random numbers)
FULL_DRAW_KMAX = 150
#: Wigner entries per evaluation block of :meth:`InvariantField.values` (bounds memory)
_BLOCK_ENTRIES = 3_000_000


def _replay(state: dict) -> np.random.Generator:
    rng = np.random.Generator(getattr(np.random, state["bit_generator"])())
    rng.bit_generator.state = state
    return rng


def _draw_z(rng: np.random.Generator, k: int) -> np.ndarray:
    """Z_k: (k+1) x (k+1) independent standard complex normals (E|Z|^2 = 1, E Z^2 = 0)."""
    g = rng.standard_normal((2, k + 1, k + 1))
    return (g[0] + 1j * g[1]) * math.sqrt(0.5)


@dataclass(frozen=True)
class InvariantField:
    """A drawn Gamma-invariant field R(x) = sqrt(2) Re sum_k tr(C_k^T D^k(x)) on S^3.

    C_k = amplitude[k] P_k(Z_k), k = KMIN..kmax, with Z_k drawn in increasing k from a
    generator in ``state`` (its bit-generator state; above FULL_DRAW_KMAX only the invariant
    coefficients are drawn): the field is a recipe, replayed on demand (:meth:`degrees`), so
    that no (k+1)^2 matrix of every degree is ever held at once.
    ``group`` is the invariant-mode builder of :mod:`topology.skies.s3_invariants`; ``scale``
    multiplies R in :meth:`values` (e.g. -T/5 in microK); ``counts[k]`` = invariant modes at k.
    """

    kmax: int
    group: object
    amplitude: np.ndarray
    state: dict
    scale: float = 1.0
    counts: np.ndarray | None = None

    def degrees(self, with_delta: bool = False, rng: np.random.Generator | None = None):
        """Yield (k, degree, weights, Delta^k or None) for k = KMIN..kmax (the degree objects and
        weights of :mod:`topology.skies.s3_invariants`), replaying the draws (from ``rng`` if
        given, which must be in ``state``)."""
        rng = _replay(self.state) if rng is None else rng
        for deg, delta in degrees(self.group, self.kmax, KMIN, with_delta):
            if deg.k <= FULL_DRAW_KMAX:
                w = deg.weights(z=_draw_z(rng, deg.k))
            else:
                w = deg.weights(rng=rng)
            yield deg.k, deg, w, delta

    @property
    def coeffs(self) -> dict:
        """{k: C_k} (dense (k+1)^2 complex each; for small kmax)."""
        return {k: self.amplitude[k] * deg.coefficients(w) for k, deg, w, _ in self.degrees()}

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
                    acc += (d.reshape(len(d), -1) @ c).real
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
    """Number of Gamma-invariant eigenmodes for k = 0..kmax (:mod:`topology.skies.s3_invariants`).

    Equals the character average (topology.spaces.spherical.mode_counts) and, for groups acting
    on one side, (k+1) times the Molien coefficient (tested).
    """
    _check_space(space)
    kmax = _check_int(kmax, "kmax", 0)
    return invariant_ranks(space.pairs, kmax)


def mode_amplitudes(order: int, kmax: int, variance) -> np.ndarray:
    """s_k = sqrt(|Gamma| sigma_k^2 (k+1) / (2 pi^2)) for k >= KMIN, else 0 (|Gamma| = ``order``)."""
    k = np.arange(kmax + 1)
    var = np.array([float(variance[i]) if i >= KMIN else 0.0 for i in k])
    return np.sqrt(order * var * (k + 1) / (2.0 * math.pi**2))


def degree_variances(cosmology, lmax: int, kmax: int, tail: bool) -> tuple[np.ndarray, dict | None]:
    """(sigma_k^2 w_k for k = 0..kmax (zero below KMIN), tail information or None): the variance
    per mode of each degree of a sky to ``lmax`` (:func:`~topology.skies.s3_spectra.mode_variance`),
    times the tail weights w_k when ``tail`` (:func:`~topology.skies.s3_spectra.tail_weights`,
    fitted at this lmax and kmax; the w_k in tail["weights"]). The one source of the skies' spectrum and of the harmonic
    covariance (:mod:`topology.harmonic.spherical`)."""
    variance = np.zeros(kmax + 1)
    variance[KMIN:] = mode_variance(np.arange(KMIN, kmax + 1), cosmology.curvature_radius_mpc)
    tail_info = None
    if tail:
        weights, tail_info = tail_weights(cosmology, lmax, kmax)
        variance *= weights
        tail_info = {**tail_info, "weights": weights}
    return variance, tail_info


def draw_invariant_field(space, kmax: int, rng: np.random.Generator, variance) -> InvariantField:
    """Draw C_k = s_k P_k(Z_k), k = KMIN..kmax, s_k^2 = |Gamma| variance[k] (k+1)/(2 pi^2).

    Z_k is drawn for every k in increasing order (real and imaginary parts from
    rng.standard_normal; above FULL_DRAW_KMAX only the invariant coefficients), so a larger kmax
    extends a field without changing its lower degrees; ``rng`` is advanced past the draws. ``variance`` is a sequence indexed by k (sigma_k^2, read
    for k >= KMIN).
    """
    field = InvariantField(int(kmax), group_of(space.pairs), mode_amplitudes(len(space.pairs), kmax, variance),
                           rng.bit_generator.state)
    for _ in field.degrees(rng=rng):     # advance rng past the draws
        pass
    return field


def sky_frame(observer: geo.Observer) -> np.ndarray:
    """Q (3x3, det +-1) with Q n = the pure quaternion u(n) = conj(x) (frame n) of a direction n
    of the observer's sky, written in the frame (j, k, i) of :mod:`topology.skies.s3_tensors`."""
    x = observer.point
    mq = geo.quat_multiply(geo.quat_conjugate(x)[None, :], observer.frame.T)   # (3, 4): u of e_x, e_y, e_z
    m = mq[:, 1:].T                                                            # M[:, j] = u(e_j) in (i, j, k)
    return m[[1, 2, 0]]                                                        # rows (j, k, i)


def field_alm(field: InvariantField, observer: geo.Observer, chi: float, lmax: int) -> np.ndarray:
    """Exact a_lm (healpy order, l <= lmax) of n -> field(exp_x(chi n)) in the observer's sky frame.

    The LSS point is x y(n), y = exp(chi u(n)) = cos chi + sin chi u(n), u(n) = conj(x) (frame n)
    = M n. Per degree, f(x y) = tr(C'^T D^k(y)) with C' = D^k(x)^T C_k (for a left group
    conj(D^k(x^-1) V) W: thin products), and the a_lm of y -> tr(C'^T D^k(y)) on the sphere of
    radius chi follow from the band |a - b| <= lmax of C' by spherical tensor operators
    (:mod:`topology.skies.s3_tensors`), in the frame (j, k, i); a final Wigner rotation of the
    a_lm (s3_tensors.rotate_alm) takes them to the observer's frame. No quadrature: exact up to
    rounding. Cost ~ (lmax+1)^2 kmax^2 / 4 for the tensors plus the group's thin products.
    """
    return _alm_and_counts(field, observer, chi, lmax)[0]


def _alm_and_counts(field: InvariantField, observer: geo.Observer, chi: float, lmax: int):
    lmax = int(lmax)
    band_l = min(lmax, field.kmax)
    acc = SphereAlm(band_l, chi)
    x0 = np.asarray(observer.point, dtype=float)
    counts = np.zeros(field.kmax + 1, dtype=np.int64)
    for k, deg, w, delta in field.degrees(with_delta=True):
        counts[k] = deg.count
        s = field.amplitude[k]
        if s == 0.0 or deg.count == 0:
            continue
        acc.add(k, deg.observed_band(w, x0, delta, band_l, s))
    small = rotate_alm(acc.real_alm(field.scale), band_l, sky_frame(observer))
    from healpy import Alm

    alm = np.zeros(Alm.getsize(lmax), dtype=complex)
    ell, m = Alm.getlm(band_l)
    alm[Alm.getidx(lmax, ell, m)] = small
    return alm, counts


def field_alm_by_grid(field: InvariantField, observer: geo.Observer, chi: float, lmax: int) -> np.ndarray:
    """The same a_lm as :func:`field_alm` by direct evaluation on a full Gauss-Legendre grid
    (kmax + L + 1 longitudes; cost ~ kmax^5). A cross-check of the tensor method."""
    band_l = min(int(lmax), field.kmax)
    n_theta = (field.kmax + band_l + 2) // 2
    theta, w, dirs = gauss_legendre_grid(n_theta, field.kmax + band_l + 1)
    small = grid_to_alm(field.values(observer.exp(dirs, chi)), theta, w, band_l)
    from healpy import Alm

    alm = np.zeros(Alm.getsize(int(lmax)), dtype=complex)   # l > kmax: exactly zero
    ell, m = Alm.getlm(band_l)
    alm[Alm.getidx(int(lmax), ell, m)] = small
    return alm


def spherical_sky(space, observer: geo.Observer, cosmology, *, lmax: int, nside: int | None = None,
                  kmax: int | None = None, terms=("sw",), seed: int = 0, tail: bool | None = None) -> Sky:
    """Sachs-Wolfe sky (alm, microK) of the spherical space ``space`` seen by ``observer``.

    ``cosmology`` must be closed (omega_k < 0); chi = chi_rec / R_c. kmax defaults to
    ceil(2 lmax / chi) and must be in KMIN..KMAX_LIMIT. ``tail`` (default: when kmax is the
    default) weights the variance of degree k by w_k = 1 + A (k/kmax)^4 so that the C_l hold
    those of all degrees to ~0.5 % at l <= lmax (:func:`~topology.skies.s3_spectra.tail_weights`;
    A in meta["tail_A"], 0 without, and the C_l error left in meta["tail_cl_error"]). Amplitudes come from the "signal" stream of ``seed``.
    ``nside`` (optional) only checks lmax <= 3 nside - 1 and is recorded. See the module
    docstring for the field, spectrum and exactness of the a_lm.
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
    if tail is None:
        tail = kmax is None
    if kmax is None:
        kmax = default_kmax(lmax, chi)
        if kmax > KMAX_LIMIT:
            raise InputError(f"the default kmax = ceil(2 lmax / (chi_rec/R_c)) = {kmax} exceeds {KMAX_LIMIT}; "
                             f"give kmax <= {KMAX_LIMIT} (the sky is then complete to l ~ kmax chi / 2 = "
                             f"{int(KMAX_LIMIT * chi / 2)}) or lower lmax", "[sky] kmax")
    kmax = _check_int(kmax, "[sky] kmax", KMIN, KMAX_LIMIT)
    variance, tail_info = degree_variances(cosmology, lmax, kmax, tail)
    t_uk = cosmology.t_cmb * 1e6
    field = InvariantField(int(kmax), group_of(space.pairs), mode_amplitudes(len(space.pairs), kmax, variance),
                           stream_rng(seed, "signal").bit_generator.state, scale=-t_uk / 5.0)
    alm, counts = _alm_and_counts(field, observer, chi, lmax)
    field = replace(field, counts=counts)
    meta = {"method": "eigenmode", "family": space.family, "params": dict(space.params), "seed": seed,
            "kmax": kmax, "chi": chi, "modes": int(counts[KMIN:].sum()), "nside": nside,
            "observer": [float(v) for v in observer.point], "field": field,
            "tail_A": tail_info["A"] if tail_info else 0.0}
    if tail_info:
        meta["tail_cl_error"] = tail_info["cl_error"]
    return Sky(lmax=lmax, alm=alm, terms=("sw",), meta=meta)


__all__ = ["spherical_sky", "invariant_mode_counts", "mode_variance", "draw_invariant_field", "field_alm",
           "degree_variances", "mode_amplitudes", "sky_frame",
           "field_alm_by_grid", "InvariantField", "s3_sachs_wolfe_cl", "tail_weights", "zonal_s3", "KMAX_LIMIT",
           "KMIN"]
