"""The radial functions of the temperature terms and the isotropic spectrum at a wave-number cut.

A plane wave of the primordial curvature R_k e^{i k.x} gives a_lm = 4 pi i^l (T/5) R_l(k)
Y*_lm(k^) (-R_k) on the last-scattering sphere, with

* terms ["sw"]: R_l(k) = j_l(k chi_rec) (Sachs-Wolfe on a thin shell; Sachs & Wolfe 1967,
  common practice), as in :mod:`topology.skies.flat_eigenmode`;
* terms ["sw", "doppler", "isw"]: R_l(k) = -5 Delta_l(k), CAMB's line-of-sight temperature
  transfer (:mod:`topology.skies.transfer`), the same replacement the flat skies make.

The isotropic covariance compared with a space's must hold the same physics and the same modes:
the space keeps the wave numbers 0 < k chi_rec <= kchi_max, so the reference is

    C_l(kchi_max) = 4 pi (T/5)^2 int_0^kchi_max dk/k P_R(k) R_l(k)^2          (k in 1/chi_rec),

the isotropic spectrum of the same cut (the integral the box sum of the space tends to when the
space grows; common practice). Composite Gauss-Legendre quadrature, panels of width 1/4 in
k chi_rec, 12 nodes each (R_l oscillates with period 2 pi).
"""

from __future__ import annotations

import numpy as np
from scipy.special import spherical_jn

from ..errors import InputError
from ..skies.spectra import primordial_power

PANEL = 0.25        # k chi_rec width of a quadrature panel
NODES = 12          # Gauss-Legendre nodes per panel

SW = ("sw",)
FULL = ("sw", "doppler", "isw")


def check_terms(terms, where: str = "[harmonic] terms") -> tuple:
    """("sw",) or ("sw", "doppler", "isw") in that order; InputError otherwise."""
    t = tuple(terms)
    if set(t) == set(SW) and len(t) == 1:
        return SW
    if set(t) == set(FULL) and len(t) == 3:
        return FULL
    raise InputError(f"must be [\"sw\"] (Sachs-Wolfe) or [\"sw\", \"doppler\", \"isw\"] (CAMB transfer), "
                     f"got {list(t)}", where)


def radial_function(cosmology, lmax: int, terms=SW):
    """R(ell, k_chi) -> (len(ell), len(k)): j_l(k chi_rec) for ["sw"], -5 Delta_l for the CAMB terms."""
    terms = check_terms(terms)
    if terms == SW:
        def radial(ell, k):
            return spherical_jn(np.asarray(ell)[:, None], np.asarray(k, dtype=float)[None, :])
        return radial
    from ..skies.transfer import temperature_transfer

    delta = temperature_transfer(cosmology, lmax)
    chi_mpc = cosmology.chi_rec_mpc

    def radial(ell, k):
        return -5.0 * delta(ell, np.asarray(k, dtype=float) / chi_mpc)
    return radial


def k_floor(cosmology, lmax: int, terms=SW) -> float:
    """Smallest k chi_rec the radial function takes: 0 for SW, CAMB's first transfer sample
    otherwise (below it Delta_l ~ (k chi_rec)^l adds nothing measurable for l >= 2)."""
    if check_terms(terms) == SW:
        return 0.0
    from ..skies.transfer import transfer_k_range

    return transfer_k_range(cosmology, lmax)[0] * cosmology.chi_rec_mpc


def mode_power(k_chi: np.ndarray, cosmology) -> np.ndarray:
    """(T/5)^2 P_R(k) in microK^2 (k in 1/chi_rec): the power per ln k of the SW temperature."""
    t_uk = cosmology.t_cmb * 1e6
    return (t_uk / 5.0) ** 2 * primordial_power(np.asarray(k_chi, dtype=float) / cosmology.chi_rec_mpc)


def isotropic_cl_cut(cosmology, lmax: int, kchi_max: float, terms=SW, kchi_min: float = 0.0) -> np.ndarray:
    """C_l (l = 0..lmax, microK^2; C_0 = C_1 = 0) of the isotropic sky made of the wave numbers
    kchi_min < k chi_rec <= kchi_max (see the module doc)."""
    lmax = int(lmax)
    radial = radial_function(cosmology, lmax, terms)
    n_panels = max(1, int(np.ceil((kchi_max - kchi_min) / PANEL)))
    edges = np.linspace(kchi_min, kchi_max, n_panels + 1)
    x, w = np.polynomial.legendre.leggauss(NODES)
    half = 0.5 * np.diff(edges)
    mid = 0.5 * (edges[1:] + edges[:-1])
    k = (mid[:, None] + half[:, None] * x[None, :]).ravel()
    wk = (half[:, None] * w[None, :]).ravel()
    ell = np.arange(2, lmax + 1)
    cl = np.zeros(lmax + 1)
    weight = wk * mode_power(k, cosmology) / k
    for b in range(0, len(k), 4096):
        r = radial(ell, k[b:b + 4096])
        cl[2:] += (r * r) @ weight[b:b + 4096]
    cl[2:] *= 4.0 * np.pi
    return cl
