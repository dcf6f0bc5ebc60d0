"""Isotropic Gaussian skies: the simply connected null hypothesis.

a_lm are drawn from C_l (:func:`topology.skies.spectra.isotropic_cl`) with a numpy Generator
(never healpy's global RNG): a_l0 = sqrt(C_l) g, a_lm = sqrt(C_l / 2) (g1 + i g2) for m > 0,
g standard normal (common practice). Draws are made in l-major order (l = 0..lmax, m = 0..l),
so the same seed at a larger lmax extends a sky without changing its low multipoles.

Terms:
* ("sw",): the Sachs-Wolfe term alone, C_l of :func:`~topology.skies.spectra.sachs_wolfe_cl`
  (Delta T / T = -R / 5, power-law P_R, no transfer function): the same physics as the SW
  multiply connected skies.
* ("sw", "doppler", "isw"): CAMB's unlensed scalar TT (SW with the full transfer function,
  Doppler, early and late ISW, polarisation source), or the shipped table without camb.
"""

from __future__ import annotations

import numpy as np

from .base import Sky, stream_rng
from .spectra import isotropic_cl


def lmajor_to_healpy(lmax: int) -> np.ndarray:
    """Healpy alm index of the l-major sequence (l, m) = (0,0), (1,0), (1,1), (2,0), ..."""
    ell = np.repeat(np.arange(lmax + 1), np.arange(1, lmax + 2))
    start = np.repeat(np.cumsum(np.arange(lmax + 1)), np.arange(1, lmax + 2))
    m = np.arange(len(ell)) - start
    return m * (2 * lmax + 1 - m) // 2 + ell


def gaussian_alm(cl: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Gaussian a_lm (healpy ordering, lmax = len(cl) - 1) with <|a_lm|^2> = C_l."""
    lmax = len(cl) - 1
    n = (lmax + 1) * (lmax + 2) // 2
    g = rng.standard_normal((n, 2))
    ell = np.repeat(np.arange(lmax + 1), np.arange(1, lmax + 2))
    start = np.repeat(np.cumsum(np.arange(lmax + 1)), np.arange(1, lmax + 2))
    m = np.arange(n) - start
    sig = np.sqrt(np.asarray(cl, dtype=float)[ell])
    vals = np.where(m == 0, sig * g[:, 0], sig * np.sqrt(0.5) * (g[:, 0] + 1j * g[:, 1]))
    alm = np.zeros(n, dtype=np.complex128)
    alm[lmajor_to_healpy(lmax)] = vals
    return alm


def isotropic_sky(cosmology, *, lmax: int, terms=("sw",), seed: int) -> Sky:
    """A Gaussian isotropic sky (alm, microK) with the spectrum of ``terms`` (see module doc)."""
    terms = tuple(t for t in ("sw", "doppler", "isw") if t in set(terms))
    cl = isotropic_cl(cosmology, int(lmax), terms)
    alm = gaussian_alm(cl, stream_rng(seed, "signal"))
    source = "sachs_wolfe_cl" if terms == ("sw",) else "camb_or_table"
    return Sky(lmax=int(lmax), alm=alm, terms=terms,
               meta={"method": "isotropic", "family": "isotropic", "params": {}, "seed": int(seed),
                     "spectrum": source, "cl": cl})
