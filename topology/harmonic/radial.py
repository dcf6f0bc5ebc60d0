"""The radial functions of the temperature terms.

A plane wave of the primordial curvature R_k e^{i k.x} gives a_lm = 4 pi i^l (T/5) R_l(k)
Y*_lm(k^) (-R_k) on the last-scattering sphere, with

* terms ["sw"]: R_l(k) = j_l(k chi_rec) (Sachs-Wolfe on a thin shell; Sachs & Wolfe 1967,
  common practice), as in :mod:`topology.skies.flat_eigenmode`;
* terms ["sw", "doppler", "isw"]: R_l(k) = -5 Delta_l(k), CAMB's line-of-sight temperature
  transfer (:mod:`topology.skies.transfer`), the same replacement the flat skies make.

The isotropic spectra of the same physics and cut come from :mod:`topology.skies.flat_cut`.
"""

from __future__ import annotations

import numpy as np
from scipy.special import spherical_jn

from ..errors import InputError

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
