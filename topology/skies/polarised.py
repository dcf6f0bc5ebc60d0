"""Isotropic polarised skies: T, Q, U from the TT, EE and TE spectra, and their observation
(which also observes the polarised skies of flat spaces, :mod:`topology.skies.flat_polarised`).

Spectra (C_l in microK^2, thermodynamic, l = 0..lmax, C_0 = C_1 = 0): CAMB's unlensed scalar
TT, EE and TE for the configured cosmology (the same run settings as
:func:`topology.skies.spectra.camb_cl`: set_for_lmax(max(lmax, 3100) + 50), massless
neutrinos, tau = 0.0544), or, without camb, the shipped tables for the default cosmology:
TT from topology/data/camb_unlensed_tt.txt and EE, TE from topology/data/camb_unlensed_ee_te.txt
(made by ``python -m topology.skies.make_polarisation_table``, CAMB version and parameters in
its header). Scalar modes only, so B = 0 (no tensors, no lensing).

Draws: a_T is drawn exactly as the temperature-only isotropic sky of the same seed
(:func:`topology.skies.isotropic.gaussian_alm` on the "signal" stream), so adding polarisation
never changes T; a_E = (C_TE / C_TT) a_T + sqrt(C_EE - C_TE^2 / C_TT) g, with g unit Gaussian
a_lm from a separate stream (the Cholesky factor of the 2x2 covariance per l; common practice).

Observation (:func:`observe_polarised`): a_X b_l p_l for X = T, E (Gaussian beam, the pixel
window of :func:`topology.skies.instrument.pixel_window`), then healpy.alm2map([T, E, B=0],
pol=True): I, Q, U in the HEALPix ("COSMO") convention, in which the polarisation angle grows
from the local meridian towards west (U flips sign in the IAU convention, which grows towards
east; HEALPix primer, "Polarisation conventions"). White noise per pixel: ``noise_uk`` on I,
``noise_pol_uk`` on each of Q and U (independent draws), scaled by a hit-count map like the
temperature noise. The pixel window applied to E is the temperature one: HEALPix's polarised
pixel window differs from it by well under a percent at l < 2 N_side (from memory), below the
cosmic variance of any test here.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

from ..errors import InputError
from . import spectra
from .base import Sky, stream_rng

#: the shipped EE/TE table (TT is spectra.TABLE_NAME)
POL_TABLE_NAME = "camb_unlensed_ee_te.txt"
#: Q/U conventions: HEALPix ("COSMO" in the FITS key POLCCONV) and IAU (U of opposite sign)
CONVENTIONS = {"healpix": "COSMO", "iau": "IAU"}
#: SeedSequence children of a seed used here, far from the streams of skies.base (0, 1, 2...)
POL_STREAMS = {"e_signal": 16, "pol_noise": 17, "e_tail": 18}


def pol_rng(seed, stream: str) -> np.random.Generator:
    """The Generator of one polarisation stream ("e_signal", "pol_noise", "e_tail") of ``seed``
    (a distinct SeedSequence child, as :func:`topology.skies.base.stream_rng`)."""
    index = POL_STREAMS[stream]
    return np.random.default_rng(np.random.SeedSequence(int(seed)).spawn(index + 1)[index])


@lru_cache(maxsize=4)
def _camb_pol(cosmology, lcalc: int) -> np.ndarray:
    """CAMB's unlensed scalar (TT, EE, BB, TE) to ``lcalc``, microK^2, shape (lcalc + 1, 4)."""
    import camb

    pars = spectra.camb_params(cosmology, lcalc)
    cls = camb.get_results(pars).get_unlensed_scalar_cls(lmax=lcalc, CMB_unit="muK", raw_cl=True)
    out = np.array(cls[: lcalc + 1, :4])
    out.setflags(write=False)
    return out


def camb_pol_cl(cosmology, lmax: int) -> dict:
    """{"TT", "EE", "TE"}: CAMB's unlensed scalar spectra (microK^2, l = 0..lmax; C_0 = C_1 = 0)."""
    if not spectra.have_camb():
        raise InputError("camb is not installed: pip install 'topology[spectra]'", "[sky] polarisation")
    lcalc = max(int(lmax), spectra.CAMB_LMAX_CALC)
    cls = _camb_pol(cosmology, lcalc)
    out = {}
    for name, col in (("TT", 0), ("EE", 1), ("TE", 3)):
        c = np.array(cls[: int(lmax) + 1, col])
        c[:2] = 0.0
        out[name] = c
    return out


def read_pol_table(path=None):
    """(ell, C_EE, C_TE in microK^2, header lines) of the shipped table (or the file at ``path``)."""
    data, header = spectra.read_shipped(POL_TABLE_NAME, path)
    return data[:, 0].astype(int), data[:, 1], data[:, 2], header


def shipped_pol_cl(lmax: int) -> dict:
    """{"TT", "EE", "TE"} from the shipped tables (default cosmology), l = 0..lmax."""
    ell, ee, te, _ = read_pol_table()
    if lmax > ell.max():
        raise InputError(f"the shipped EE/TE table stops at lmax = {ell.max()}; install the spectra extra "
                         "(pip install 'topology[spectra]') for higher lmax", "[sky] lmax")
    out = {"TT": spectra.shipped_cl(lmax)}
    for name, col in (("EE", ee), ("TE", te)):
        c = np.zeros(int(lmax) + 1)
        sel = ell <= lmax
        c[ell[sel]] = col[sel]
        c[:2] = 0.0
        out[name] = c
    return out


def polarised_cl(cosmology, lmax: int, terms=spectra.FULL_TERMS) -> dict:
    """{"TT", "EE", "TE"} for a polarised isotropic sky: CAMB when installed, else the shipped
    tables (default cosmology only). Polarisation exists only with the full CAMB physics: terms
    other than ("sw", "doppler", "isw") raise InputError (the SW term alone makes no E)."""
    if set(terms) != set(spectra.FULL_TERMS):
        raise InputError(f"polarised skies need terms [\"sw\", \"doppler\", \"isw\"] (CAMB's TT, EE, TE), "
                         f"got {list(terms)}", "[sky] terms")
    if spectra.have_camb():
        return camb_pol_cl(cosmology, lmax)
    if not spectra.is_default_cosmology(cosmology):
        raise InputError("the shipped EE/TE table is for the default cosmology only; install the spectra "
                         "extra (pip install 'topology[spectra]') for other cosmologies", "[cosmology]")
    return shipped_pol_cl(lmax)


def correlated_alm(cl: dict, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """(a_T, a_E) with <a_T a_T*> = C_TT, <a_E a_E*> = C_EE, <a_T a_E*> = C_TE (module docstring)."""
    import healpy as hp

    from .isotropic import gaussian_alm

    tt, ee, te = (np.asarray(cl[k], dtype=float) for k in ("TT", "EE", "TE"))
    a_t = gaussian_alm(tt, stream_rng(seed, "signal"))
    g = gaussian_alm(np.ones_like(tt), pol_rng(seed, "e_signal"))
    pos = tt > 0
    ratio = np.where(pos, te / np.where(pos, tt, 1.0), 0.0)
    rest = np.sqrt(np.clip(ee - ratio * te, 0.0, None))
    return a_t, hp.almxfl(a_t, ratio) + hp.almxfl(g, rest)


def polarised_sky(cosmology, *, lmax: int, terms=spectra.FULL_TERMS, seed: int) -> Sky:
    """A Gaussian isotropic polarised sky: ``alm`` is a_T (the temperature-only sky of the same
    seed), ``meta["alm_e"]`` a_E (B = 0), ``meta["cl"]`` the TT, EE, TE spectra used."""
    cl = polarised_cl(cosmology, int(lmax), terms)
    a_t, a_e = correlated_alm(cl, seed)
    return Sky(lmax=int(lmax), alm=a_t, terms=tuple(spectra.FULL_TERMS),
               meta={"method": "isotropic", "family": "isotropic", "params": {}, "seed": int(seed),
                     "spectrum": "camb_or_table", "cl": cl, "alm_e": a_e, "polarised": True})


def observe_polarised(sky: Sky, *, nside: int, fwhm_deg: float = 0.0, noise_uk: float = 0.0,
                      noise_pol_uk: float | None = None, hits=None, pixwin: bool = True, seed: int,
                      mask=None, pol_mask=None, convention: str = "healpix", lmax: int | None = None) -> np.ndarray:
    """Observed (I, Q, U) RING maps in microK, shape (3, 12 nside^2).

    Beam, pixel window and the hit-count scaling as :func:`topology.skies.instrument.observe`;
    noise ``noise_uk`` on I and ``noise_pol_uk`` on each of Q, U (default sqrt(2) noise_uk, as
    for a pair of polarisation-sensitive detectors whose sum gives I and difference Q or U;
    common practice).
    ``mask`` (1 kept) sets I to UNSEEN where 0, ``pol_mask`` (default: ``mask``) Q and U.
    ``convention`` "healpix" or "iau" (U of opposite sign).
    """
    import healpy as hp

    from .instrument import beam_window, observe, pixel_window

    if convention not in CONVENTIONS:
        raise InputError(f"must be 'healpix' or 'iau', got {convention!r}", "[sky] qu_convention")
    if "alm_e" not in sky.meta:
        raise InputError("this sky has no polarisation (isotropic and flat polarised skies have E modes)",
                         "[sky] polarisation")
    sigma_p = math.sqrt(2.0) * float(noise_uk) if noise_pol_uk is None else noise_pol_uk
    if isinstance(sigma_p, bool) or not isinstance(sigma_p, (int, float, np.integer, np.floating)) \
            or not math.isfinite(sigma_p) or sigma_p < 0:
        raise InputError(f"must be a finite number >= 0, got {noise_pol_uk!r}", "[sky] noise_pol_uk")
    sigma_p = float(sigma_p)
    i_map = observe(sky, nside=nside, fwhm_deg=fwhm_deg, noise_uk=noise_uk, hits=hits, pixwin=pixwin,
                    seed=seed, mask=mask, lmax=lmax)
    lmax = sky.lmax if lmax is None else int(lmax)
    window = beam_window(float(fwhm_deg), lmax) * (pixel_window(nside, lmax) if pixwin else 1.0)
    a_e = np.asarray(sky.meta["alm_e"])
    if lmax != sky.lmax:
        a_e = hp.resize_alm(a_e, sky.lmax, sky.lmax, lmax, lmax)
    a_e = hp.almxfl(a_e, window)
    zero = np.zeros_like(a_e)
    _, q, u = hp.alm2map([zero, a_e, zero], nside, lmax=lmax, pol=True)
    npix = 12 * nside * nside
    unseen = np.zeros(npix, dtype=bool)
    if sigma_p > 0 or hits is not None:
        scale = np.ones(npix)
        if hits is not None:
            h = np.asarray(hits, dtype=float)   # checked by observe() above
            if h.size != npix:
                h = hp.ud_grade(h, nside, power=-2)      # counts add when pixels merge
            unseen |= h <= 0
            scale = np.where(h > 0, np.sqrt(np.mean(h) / np.where(h > 0, h, 1.0)), 0.0)
        g = pol_rng(seed, "pol_noise").standard_normal((2, npix))
        q = q + sigma_p * scale * g[0]
        u = u + sigma_p * scale * g[1]
    pm = mask if pol_mask is None else pol_mask
    if pm is not None:
        pm = np.asarray(pm, dtype=float)
        if pm.shape != (npix,):
            raise InputError(f"polarisation mask has {pm.size} pixels, the map {npix}", "[sky] mask")
        unseen |= pm <= 0
    if convention == "iau":
        u = -u
    q[unseen] = hp.UNSEEN
    u[unseen] = hp.UNSEEN
    return np.stack([i_map, q, u])


def write_iqu_fits(path, iqu: np.ndarray, cards: list, *, dtype: str = "float32") -> None:
    """Write (I, Q, U) RING maps as columns I_STOKES, Q_STOKES, U_STOKES in uK (healpy.write_map)."""
    import healpy as hp

    from .io import DTYPES

    dt = DTYPES[dtype]
    cards = [(k, v, "" if isinstance(v, str) and len(v) > 40 else c) for k, v, c in cards]
    hp.write_map(str(path), [np.asarray(x).astype(dt) for x in iqu], nest=False, dtype=[dt] * 3,
                 column_names=["I_STOKES", "Q_STOKES", "U_STOKES"], column_units="uK",
                 extra_header=list(cards), overwrite=True)
