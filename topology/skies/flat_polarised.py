"""Polarised skies of flat multiply connected spaces: T and E from one primordial field.

One invariant mode q of the space (:func:`topology.skies.flat_modes.invariant_coefficients`,
the amplitudes the temperature sky draws for the same seed) makes, through CAMB's line-of-sight
transfer functions of the same run (:mod:`topology.skies.transfer`),

    a^T_lm = 4 pi i^l T Delta_l(q)   Y*_lm(q^) R_q,     a^E_lm = 4 pi i^l T Delta^E_l(q) Y*_lm(q^) R_q

(Zaldarriaga & Seljak 1997), so the sky's TT, EE and TE are CAMB's (up to the topology) and
B = 0 (scalar modes). Both sums are :func:`topology.skies.flat_eigenmode.plane_wave_alm` of the
same coefficients with the radial functions -5 Delta_l and -5 Delta^E_l (the coefficients are
the SW amplitudes -(T/5) R_q, weighted as in
:func:`topology.skies.flat_eigenmode.eigenmode_alm`). The T a_lm are therefore exactly those of
``flat_sky(method="eigenmode", terms=["sw", "doppler", "isw"], complete=False)`` for the same
seed and cut (tests/test_skies_flat_polarised.py).

Beyond the cut. The lattice keeps 0 < k chi_rec <= K (the cut of the temperature sky,
:func:`topology.skies.flat.choose_cut`) with the weight w(k) of the taper alone
(:func:`topology.skies.flat_modes.plain_profile`, or a given ``profile`` with ``.weight(k)``),
not the temperature sky's boosted profile (:func:`topology.skies.flat_cut.cut_profile`): its
bumps are chosen for TT and overshoot EE near lmax (measured, kept / CAMB EE at l near lmax:
1.25-1.5 for lmax 16-24 and 2.1 at lmax 64, K = 1.2 lmax) and TE (up to 1.4). The power the
lattice leaves out is added as an isotropic Gaussian field with the 2x2 spectrum per l

    C^c_XY = C_XY - 4 pi T^2 int dk/k P_R(k) w(k)^2 Delta^X_l Delta^Y_l      (X, Y = T, E),

C_XY CAMB's unlensed TT, EE, TE (:func:`topology.skies.polarised.camb_pol_cl`), the integral on
the Gauss-Legendre panels of :func:`topology.skies.flat_cut.quadrature`. Negative C^c_TT,
C^c_EE are set to 0 and |C^c_TE| held to sqrt(C^c_TT C^c_EE). a^T_c is drawn from the "tail"
stream of the seed (as the temperature sky's complement), a^E_c = (C^c_TE / C^c_TT) a^T_c +
sqrt(C^c_EE - C^c_TE^2 / C^c_TT) g with g from the polarisation stream "e_tail". Like the
temperature complement it lacks the matched-circle correlations of the modes it stands for, and
without the boost it holds more of TT than the temperature sky's (meta "complement_lmax_tt").

Only the eigenmode method and only with camb (no shipped E-mode transfer table): without camb
InputError. Non-compact E11-E17 use the compact cover of the temperature skies
(:func:`topology.skies.flat_modes.compact_cover`).
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError
from .base import Sky, stream_rng
from . import spectra
from .spectra import FULL_TERMS, primordial_power

CHUNK = 4096      # quadrature nodes per block of the kept-power integrals


def _weight(profile, kn: np.ndarray, kchi: float) -> np.ndarray:
    from .flat_modes import cut_weight

    return cut_weight(kn, kchi) if profile is None else profile.weight(kn)


def _radials(cosmology, lmax: int):
    """(-5 Delta_l, -5 Delta^E_l) as functions radial(ell, k chi_rec) for plane_wave_alm."""
    from .transfer import emode_transfer, temperature_transfer

    d_t = temperature_transfer(cosmology, lmax)
    d_e = emode_transfer(cosmology, lmax)
    chi = cosmology.chi_rec_mpc

    def radial_t(ell, kn):
        return -5.0 * d_t(ell, np.asarray(kn) / chi)

    def radial_e(ell, kn):
        return -5.0 * d_e(ell, np.asarray(kn) / chi)

    return radial_t, radial_e


def kept_pol_cl(cosmology, lmax: int, kchi: float, profile=None) -> dict:
    """{"TT", "EE", "TE"} (microK^2, l = 0..lmax): 4 pi T^2 int dk/k P_R w^2 Delta^X Delta^Y over
    k chi_rec <= K, the continuum power of the weighted lattice modes (module doc)."""
    from .flat_cut import quadrature, transfer_k_floor
    from .transfer import emode_transfer, temperature_transfer

    lmax = int(lmax)
    out = {key: np.zeros(lmax + 1) for key in ("TT", "EE", "TE")}
    if lmax < 2:
        return out
    chi = cosmology.chi_rec_mpc
    x, w = quadrature(transfer_k_floor(cosmology, lmax), float(kchi))
    weight = w * _weight(profile, x, kchi) ** 2 * primordial_power(x / chi) / x
    weight *= 4.0 * math.pi * (cosmology.t_cmb * 1e6) ** 2
    d_t = temperature_transfer(cosmology, lmax)
    d_e = emode_transfer(cosmology, lmax)
    ell = np.arange(2, lmax + 1)
    for b in range(0, len(x), CHUNK):
        k = x[b:b + CHUNK] / chi
        t, e = d_t(ell, k), d_e(ell, k)
        wb = weight[b:b + CHUNK]
        out["TT"][2:] += (t * t) @ wb
        out["EE"][2:] += (e * e) @ wb
        out["TE"][2:] += (t * e) @ wb
    return out


def complement_pol_cl(cosmology, lmax: int, kchi: float, profile=None, tt=None) -> dict:
    """{"TT", "EE", "TE"}: CAMB's unlensed spectra minus :func:`kept_pol_cl`, made a valid 2x2
    covariance per l (module doc). ``tt``: the temperature complement to use instead (that of
    the temperature sky, :func:`topology.skies.flat_cut.complement_cl`)."""
    from .polarised import camb_pol_cl

    iso = camb_pol_cl(cosmology, lmax)
    kept = kept_pol_cl(cosmology, lmax, kchi, profile)
    tt = np.maximum(iso["TT"] - kept["TT"], 0.0) if tt is None else np.asarray(tt, dtype=float)
    ee = np.maximum(iso["EE"] - kept["EE"], 0.0)
    bound = np.sqrt(tt * ee)
    te = np.clip(iso["TE"] - kept["TE"], -bound, bound)
    return {"TT": tt, "EE": ee, "TE": te}


def complement_pol_alm(cl: dict, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """(a_T, a_E) of the complement: a_T from the "tail" stream (as the temperature sky's
    complement), a_E conditioned on it plus the "e_tail" polarisation stream."""
    import healpy as hp

    from .isotropic import gaussian_alm
    from .polarised import pol_rng

    tt, ee, te = (np.asarray(cl[k], dtype=float) for k in ("TT", "EE", "TE"))
    a_t = gaussian_alm(tt, stream_rng(seed, "tail"))
    g = gaussian_alm(np.ones_like(tt), pol_rng(seed, "e_tail"))
    pos = tt > 0
    ratio = np.where(pos, te / np.where(pos, tt, 1.0), 0.0)
    rest = np.sqrt(np.clip(ee - ratio * te, 0.0, None))
    return a_t, hp.almxfl(a_t, ratio) + hp.almxfl(g, rest)


def lattice_pol_alm(space, cosmology, seed: int, kchi: float, lmax: int, x_obs, frame, profile=None):
    """(a_T, a_E, number of modes): the lattice part, healpy order, microK (module doc).

    The coefficients and their weights are those of
    :func:`topology.skies.flat_eigenmode.eigenmode_alm` (same guard on the work)."""
    from .flat_eigenmode import MAX_EIGEN_WORK, eigenmode_work, plane_wave_alm
    from .flat_modes import invariant_coefficients

    work = 2.0 * eigenmode_work(space, lmax, kchi)
    if work > MAX_EIGEN_WORK:
        raise InputError(f"the polarised eigenmode sum would need {work:.2e} mode x a_lm products (limit "
                         f"{MAX_EIGEN_WORK:.0e}); lower lmax", "[sky] lmax")
    n, k, c = invariant_coefficients(space, cosmology, seed, kchi)
    c = c * _weight(profile, np.linalg.norm(k, axis=1), kchi)
    coef = c * np.exp(1j * (k @ np.asarray(x_obs, dtype=float)))
    k_sky = k @ np.asarray(frame, dtype=float)
    radial_t, radial_e = _radials(cosmology, lmax)
    a_t = plane_wave_alm(k_sky, coef, 1.0, lmax, radial_t)
    a_e = plane_wave_alm(k_sky, coef, 1.0, lmax, radial_e)
    return a_t, a_e, int(2 * len(n))


def flat_polarised_sky(space, observer, cosmology, *, lmax: int, seed: int = 0, nside: int | None = None,
                       kchi_max: float | None = None, complete: bool = True, free_length: float | None = None,
                       profile=None, terms=FULL_TERMS, method: str = "eigenmode") -> Sky:
    """Polarised sky of a flat space E1-E17 seen by ``observer`` (microK; module doc).

    ``alm`` is a_T, ``meta["alm_e"]`` a_E (B = 0), as the isotropic polarised skies of
    :func:`topology.skies.polarised.polarised_sky`, so :func:`~topology.skies.polarised.observe_polarised`
    observes it. kchi_max: the cut (default :func:`topology.skies.flat.choose_cut` of the
    eigenmode method, as the temperature sky). ``profile``: the radial weight of the lattice modes
    (an object with ``.weight(k chi_rec)``); default the taper alone
    (:func:`topology.skies.flat_modes.plain_profile`), so T is flat_sky's with ``complete=False``
    (module doc). ``complete``: add the isotropic T, E complement beyond the cut (meta
    "complement_lmax" and "complement_lmax_tt": the largest share of C^EE_l and C^TT_l, l >= 2,
    it holds). ``method``: "eigenmode" or "auto" (the grid method has no E transfer). ``terms``
    must be the full set (CAMB's physics).
    """
    from ..bandlimit import check_band_limit
    from .flat import choose_cut
    from .flat_modes import plain_profile
    from .flat_modes import check_space, compact_cover

    if set(terms) != set(FULL_TERMS):
        raise InputError(f"polarised skies need terms [\"sw\", \"doppler\", \"isw\"] (CAMB's T and E transfer), "
                         f"got {list(terms)}", "[sky] terms")
    if method not in ("eigenmode", "auto"):
        raise InputError(f"polarised flat skies are made by the eigenmode sum only ('eigenmode' or 'auto'), "
                         f"got {method!r}", "[sky] method")
    terms = FULL_TERMS
    if isinstance(lmax, bool) or not isinstance(lmax, (int, np.integer)) or lmax < 2:
        raise InputError(f"must be an integer >= 2, got {lmax!r}", "[sky] lmax")
    lmax = int(lmax)
    if nside is not None:
        nside = int(nside)
        if nside < 1 or nside & (nside - 1):
            raise InputError(f"must be a power of two, got {nside}", "[sky] nside")
        check_band_limit(lmax, nside, "[sky] lmax")
    if kchi_max is not None and not (np.isfinite(float(kchi_max)) and float(kchi_max) > 0):
        raise InputError(f"kchi_max must be positive, got {kchi_max}", "[sky] lmax")
    if not spectra.have_camb():
        raise InputError("polarised flat skies need camb (CAMB's E-mode transfer): pip install "
                         "'topology[spectra]'", "[sky] polarisation")
    check_space(space)
    if observer.geometry != "flat":
        raise InputError(f"a flat space needs a flat observer, got {observer.geometry!r}", "[observer] position")
    given = space
    meta = {"family": given.family, "params": dict(given.params), "seed": int(seed), "terms": list(terms)}
    if not space.compact:
        space, axes, lengths = compact_cover(space, observer, free_length)
        meta.update(free_axes="".join("xyz"[d] for d in axes), free_length=",".join(f"{L:g}" for L in lengths))
    kchi = float(kchi_max) if kchi_max is not None else choose_cut(space, cosmology, lmax, nside, "eigenmode",
                                                                    terms, 1.2, "camb")
    if profile is None:        # the taper alone: the temperature sky's boost is tuned for TT (module doc)
        profile = plain_profile(kchi)
    x_obs = np.asarray(observer.point[:3], dtype=float)
    F = np.asarray(observer.frame[:3, :], dtype=float)
    a_t, a_e, n_modes = lattice_pol_alm(space, cosmology, seed, kchi, lmax, x_obs, F, profile)
    meta.update(method="eigenmode", n_modes=n_modes, kchi_max=kchi, observer=x_obs.tolist(), transfer="camb",
                polarised=True)
    if complete:
        cl = complement_pol_cl(cosmology, lmax, kchi, profile)
        c_t, c_e = complement_pol_alm(cl, seed)
        a_t = a_t + c_t
        a_e = a_e + c_e
        from .polarised import camb_pol_cl

        iso = camb_pol_cl(cosmology, lmax)
        meta["complement_lmax"] = float(np.max(cl["EE"][2:] / iso["EE"][2:])) if lmax >= 2 else 0.0
        meta["complement_lmax_tt"] = float(np.max(cl["TT"][2:] / iso["TT"][2:])) if lmax >= 2 else 0.0
    meta["alm_e"] = a_e
    return Sky(lmax=lmax, alm=a_t, nside=nside, terms=tuple(terms), meta=meta)
