"""The covariance C_{lm,l'm'} of the real temperature a_lm of a space, and the isotropic one.

A source of modes yields real blocks W (N, B) whose columns w_j give the real coefficients
(:mod:`topology.harmonic.basis`) of the sky as r = sum_j g_j w_j with independent unit normals
g_j; then

    C = sum over blocks of W W^T,

one symmetric rank-B update (BLAS dsyrk) per block, so memory stays at one block and C. (A
complex mode u with a circular complex amplitude and its conjugate partner gives the two
columns Re u, Im u, each scaled by sqrt of its multiplicity.) The flat source is
:func:`topology.harmonic.flat.flat_mode_blocks`; a spherical source of invariant S^3 modes
plugs in the same way (:func:`space_covariance` dispatches on the geometry).

The cut, its boost and its complement, as in the flat skies (:mod:`topology.skies.flat_cut`).
The space's modes are kept to 0 < k chi_rec <= kchi_max, tapered over the last few units of
k chi_rec. With ``complement`` (the default) they carry the skies' boosted weight
(:func:`topology.skies.flat_cut.cut_profile`: modes below the cut take over the power of those
beyond it) and the isotropic power still missing, C_l - C_l(kchi_max)
(:func:`topology.skies.flat_cut.complement_cl`), is added on the diagonal, C_l the isotropic
spectrum of the terms (:func:`topology.skies.spectra.isotropic_cl`) and C_l(kchi_max) the
continuum integral of the kept, weighted modes; the reference is then the isotropic C_l itself.
At the default cut (3 lmax + 10) the modes beyond carry a few per cent of C_lmax and little
of the topology (a mode of k chi_rec >> l projects onto multipole l in small caps about
+-k^), and the divergence converges fast in the cut (E1 of side 1, 2, 2.5 chi_rec at lmax 10,
kchi_max = 40 against 80: 0.27, 0.40, -0.04 % with the boosted profile and complement, < 0.2 %
with the complement alone, 10, 6 and 1 % without either). Without it (``complement=False``) the reference is the isotropic sky of the
same cut, C_l(kchi_max): a space much larger than chi_rec tends to it on the diagonal, and a
small space whose modes below the cut span fewer than N directions has a singular covariance.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.linalg.blas import dsyrk

from ..errors import InputError
from .basis import isotropic_diagonal, n_coefficients
from .radial import check_terms, radial_function

#: default wave-number cut of the covariance: kchi_max = KCHI_FACTOR * lmax + KCHI_EXTRA
KCHI_FACTOR = 3.0
KCHI_EXTRA = 10.0
#: largest lmax of a covariance (N = 2597 coefficients: a 54 MB matrix)
MAX_LMAX = 50


def default_kchi_max(lmax: int) -> float:
    """The default cut KCHI_FACTOR lmax + KCHI_EXTRA (see the README's harmonic section for the
    convergence of the divergence with the cut)."""
    return KCHI_FACTOR * int(lmax) + KCHI_EXTRA


@dataclass(frozen=True)
class HarmonicCovariance:
    """The covariance of the real a_lm (l = 2..lmax) of a space and its isotropic reference.

    matrix: (N, N) microK^2; cl_iso: C_l (l = 0..lmax) of the isotropic reference (the full
    spectrum with the complement, that of the same cut without); cl_complement: the isotropic
    power added for the modes beyond the cut (zeros without the complement); n_modes: wave
    vectors summed (both signs); meta: family, params, observer.
    """

    matrix: np.ndarray
    lmax: int
    kchi_max: float
    terms: tuple
    cl_iso: np.ndarray
    cl_complement: np.ndarray
    n_modes: int
    meta: dict = field(default_factory=dict)

    @property
    def n(self) -> int:
        return self.matrix.shape[0]

    @property
    def iso_diagonal(self) -> np.ndarray:
        """diag(C_iso) (N,): C_l of the reference on each coefficient of multipole l."""
        return isotropic_diagonal(self.cl_iso, self.lmax)


def covariance_from_blocks(blocks, n: int) -> np.ndarray:
    """C = sum over real blocks W (n, B) of W W^T, (n, n) float64 (see the module doc)."""
    C = np.zeros((n, n), order="F")
    for W in blocks:
        if W.shape[0] != n:
            raise ValueError(f"a block has {W.shape[0]} rows, the covariance {n}")
        C = dsyrk(1.0, np.asfortranarray(W), beta=1.0, c=C, overwrite_c=1)   # upper triangle: C += W W^T
    iu = np.triu_indices(n, 1)
    C[(iu[1], iu[0])] = C[iu]
    return np.ascontiguousarray(C)


def check_lmax(lmax, where: str = "[harmonic] lmax") -> int:
    if isinstance(lmax, bool) or not isinstance(lmax, (int, np.integer)) or not 2 <= lmax <= MAX_LMAX:
        raise InputError(f"must be a whole number in 2..{MAX_LMAX}, got {lmax!r}", where)
    return int(lmax)


def check_kchi_max(kchi_max, lmax: int, where: str = "[harmonic] kchi_max") -> float:
    k = default_kchi_max(lmax) if kchi_max is None else kchi_max
    if isinstance(k, bool) or not isinstance(k, (int, float, np.integer, np.floating)) or not np.isfinite(k) \
            or k <= 0:
        raise InputError(f"must be a positive number, got {kchi_max!r}", where)
    return float(k)


def spherical_covariance(space, observer, cosmology, *, lmax: int, terms=("sw",), kchi_max: float | None = None,
                         complement: bool = True, block: int | None = None) -> HarmonicCovariance:
    """The covariance of the real a_lm (l = 2..lmax, microK^2) of a spherical space, Sachs-Wolfe:
    the skies' invariant S^3 modes to kmax = ceil(2 lmax / chi) (or ceil(kchi_max / chi)) and, with
    ``complement``, the isotropic power of the degrees beyond against the S^3 spectrum of all
    degrees; without, exactly the skies' distribution (their tail weights) against S^3 of the same
    degrees (:mod:`topology.harmonic.spherical`). kchi_max of the result: kmax chi_rec / R_c."""
    from .spherical import check_spherical, mode_work, spherical_cut, spherical_mode_blocks

    lmax = check_lmax(lmax)
    chi = check_spherical(space, observer, cosmology, terms)
    cut = spherical_cut(cosmology, lmax, chi, kchi_max, complement)
    C = covariance_from_blocks(spherical_mode_blocks(space, observer, cosmology, lmax, cut, block),
                               n_coefficients(lmax))
    C[np.diag_indices_from(C)] += isotropic_diagonal(cut.cl_complement, lmax)
    meta = {"family": space.family, "params": dict(space.params), "observer": [float(v) for v in observer.point],
            "complement": bool(complement), "geometry": "spherical", "kmax": cut.kmax, "chi": chi,
            "tail_A": cut.tail["A"] if cut.tail else 0.0}
    return HarmonicCovariance(C, lmax, cut.kchi_max, tuple(terms), cut.cl_iso, cut.cl_complement,
                              mode_work(space, lmax, cut.kmax)[0], meta)


def space_covariance(space, observer, cosmology, *, lmax: int, terms=("sw",), kchi_max: float | None = None,
                     complement: bool = True, block: int | None = None) -> HarmonicCovariance:
    """The covariance of the real a_lm (l = 2..lmax, microK^2) of ``space`` seen by ``observer``.

    Flat families E1-E17 (lengths in chi_rec; E11-E17 through the skies' compact cover), the
    modes 0 < k chi_rec <= kchi_max (default :func:`default_kchi_max`) and, with ``complement``,
    the isotropic power beyond (see the module doc); terms ["sw"] or ["sw", "doppler", "isw"]
    (CAMB transfer). Spherical spaces (lens, prism, polyhedral): :func:`spherical_covariance`.
    """
    lmax = check_lmax(lmax)
    terms = check_terms(terms)
    geometry = getattr(space, "geometry", None)
    if geometry == "spherical":
        return spherical_covariance(space, observer, cosmology, lmax=lmax, terms=terms, kchi_max=kchi_max,
                                    complement=complement, block=block)
    kchi = check_kchi_max(kchi_max, lmax)
    if geometry != "flat":
        raise InputError(f"the harmonic covariance is available for flat and spherical spaces, not {geometry} "
                         f"(family {getattr(space, 'family', None)})", "[space] family")
    from .flat import flat_mode_blocks, mode_count

    from ..skies.flat_cut import complement_cl, cut_profile, kept_cl
    from ..skies.flat_modes import plain_profile
    from ..skies.spectra import isotropic_cl

    radial = radial_function(cosmology, lmax, terms)
    from ..skies.flat_modes import compact_cover

    volume = (space if space.compact else compact_cover(space, observer)[0]).covering_cell_volume
    profile = cut_profile(cosmology, lmax, kchi, terms, volume=volume)[0] if complement else plain_profile(kchi)
    C = covariance_from_blocks(flat_mode_blocks(space, observer, cosmology, lmax, kchi, radial, block, profile),
                               n_coefficients(lmax))
    if complement:
        cl_ref = isotropic_cl(cosmology, lmax, terms)
        tail = complement_cl(cosmology, lmax, kchi, terms, volume=volume)
        C[np.diag_indices_from(C)] += isotropic_diagonal(tail, lmax)
    else:
        cl_ref, tail = kept_cl(cosmology, lmax, kchi, terms), np.zeros(lmax + 1)
    meta = {"family": space.family, "params": dict(space.params),
            "observer": np.asarray(observer.point[:3], dtype=float).tolist(), "complement": bool(complement)}
    return HarmonicCovariance(C, lmax, kchi, terms, cl_ref, tail, mode_count(space, observer, kchi), meta)


def isotropic_covariance(cl: np.ndarray, lmax: int) -> np.ndarray:
    """diag(C_l) (N, N) of a spectrum on the real basis."""
    return np.diag(isotropic_diagonal(cl, lmax))
