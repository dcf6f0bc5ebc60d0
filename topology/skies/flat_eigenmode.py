"""The eigenmode method of flat skies: exact a_lm of the invariant modes by the plane-wave
expansion.

e^{i k.x} = 4 pi sum_lm i^l j_l(k r) Y*_lm(k^) Y_lm(x^) (Rayleigh's plane-wave expansion),
with Y_lm(k^) from the stable three-term recursion of the normalised associated Legendre
functions (common practice), summed over the modes c_q of
:func:`topology.skies.flat_modes.invariant_coefficients` in blocks of MODE_BLOCK so memory stays
bounded. The a_lm (l <= lmax) are exact for the kept modes.

Temperature terms. ["sw"]: Delta T / T = -R / 5 at x_obs + chi_rec n, the Sachs-Wolfe term of
a matter-dominated universe on a thin last-scattering shell (Phi = -3 R / 5; Sachs & Wolfe
1967, common practice), i.e. the radial function j_l(k chi_rec). ["sw", "doppler", "isw"]:
j_l(k chi_rec) is replaced by -5 Delta_l(k), CAMB's line-of-sight temperature transfer
(:mod:`topology.skies.transfer`): SW with the full transfer function and finite LSS thickness,
Doppler, early and late ISW, exactly the physics of :func:`topology.skies.spectra.camb_cl`;
without camb its shell fit shipped for the default cosmology
(:mod:`topology.skies.transfer_shells`). a_00 and a_1m are then 0.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import spherical_jn

from ..errors import InputError
from .flat_modes import cut_weight, index_bounds, invariant_coefficients

MAX_EIGEN_WORK = 2.0e9     # eigenmode guard: (modes in the half ball) x (a_lm with m >= 0)
MODE_BLOCK = 8192          # modes per block of the eigenmode sum


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


def eigenmode_work(space, lmax: int, kchi_max: float) -> float:
    """(modes in the half ball) x (a_lm with m >= 0): the cost the eigenmode guard limits."""
    m = index_bounds(space.lattice, kchi_max)
    ball = 4.0 / 3.0 * np.pi * kchi_max**3 * space.covering_cell_volume / (2.0 * np.pi) ** 3 / 2.0
    nmodes = min(ball, float(np.prod(2 * m + 1)) / 2.0)
    return nmodes * (lmax + 1) * (lmax + 2) / 2.0


def eigenmode_alm(space, cosmology, seed: int, kchi_max: float, lmax: int, x_obs: np.ndarray, frame: np.ndarray,
                  transfer: bool = False, profile=None):
    """(a_lm, number of modes): the sky of the compact flat ``space`` seen from ``x_obs`` (chi_rec)
    with sky axes ``frame`` (columns, space coordinates), healpy order, l <= lmax, microK.

    The modes 0 < |k| chi_rec <= kchi_max of :func:`invariant_coefficients` (seed ``seed``),
    weighted by ``profile`` (a :class:`~topology.skies.flat_modes.CutProfile`; default the taper
    :func:`~topology.skies.flat_modes.cut_weight`); the
    number of modes counts both q and -q. ``transfer``: CAMB's line-of-sight transfer instead of
    j_l (the terms sw, doppler, isw; see the module doc). InputError when the work exceeds
    MAX_EIGEN_WORK.
    """
    work = eigenmode_work(space, lmax, kchi_max)
    if work > MAX_EIGEN_WORK:
        raise InputError(f"the eigenmode method would need {work:.2e} mode x a_lm products (limit "
                         f"{MAX_EIGEN_WORK:.0e}); lower lmax or use method = \"grid\"", "[sky] lmax")
    n, k, c = invariant_coefficients(space, cosmology, seed, kchi_max)
    kn = np.linalg.norm(k, axis=1)
    c = c * (cut_weight(kn, kchi_max) if profile is None else profile.weight(kn))
    coef = c * np.exp(1j * (k @ x_obs))      # e^{i q.(x_obs + r n)}
    k_sky = k @ frame                         # (F^T q) components in the sky frame
    radial = None
    if transfer:
        from .flat_cut import transfer_source

        if transfer_source("eigenmode") == "camb":
            from .transfer import temperature_transfer

            delta = temperature_transfer(cosmology, lmax)
            chi_mpc = cosmology.chi_rec_mpc

            def radial(ell, kn):  # -5 Delta_l(k) -> j_l(k chi_rec) in the SW limit
                return -5.0 * delta(ell, kn / chi_mpc)
        else:   # without camb: the shell fit of CAMB's transfer shipped for the default cosmology
            from .transfer_shells import shell_transfer

            radial = shell_transfer(cosmology, lmax, kchi_max).radial
    return plane_wave_alm(k_sky, coef, 1.0, lmax, radial), int(2 * len(n))
