"""The instrument: Gaussian beam, HEALPix pixel window, white noise and an optional mask.

``observe`` turns a :class:`~topology.skies.base.Sky` into the map an instrument would give:

    a_lm -> a_lm b_l p_l,  b_l = exp(-l (l + 1) sigma^2 / 2), sigma = FWHM / sqrt(8 ln 2)
    (healpy.gauss_beam), p_l the pixel window of N_side (:func:`pixel_window`), then
    T(p) = sum a_lm b_l p_l Y_lm(n_p) + sigma_p g_p,  sigma_p = noise_uk / sqrt(h_p / <h>)

with g_p standard normal from the "noise" stream of the seed (independent of the signal).

The pixel window is computed here, not read from healpy's data files (which healpy downloads
on first use): following its definition (Gorski et al. 2005, ApJ 622, 759, section 4.2),
p_l^2 = < (1/Omega_p^2) int_p int_p P_l(n . n') dn dn' >_pixels, the pixel integrals by
equal-area sub-pixels at N_side * s (s = 8 and 16, Richardson-extrapolated in 1/s^2), the
average over up to 1024 pixels evenly spaced in RING order; accurate to about 3e-4 at
l = 3 N_side - 1 (measured against all pixels at N_side 16).
"""

from __future__ import annotations

import functools
import math

import healpy as hp
import numpy as np

from ..bandlimit import check_band_limit, lmax_limit
from ..errors import InputError
from .base import Sky, stream_rng
from .legendre import legendre_table

MAX_NSIDE = 4096


def check_nside(nside, where: str = "[sky] nside") -> int:
    """N_side must be a power of two in [1, MAX_NSIDE]."""
    if isinstance(nside, bool) or not isinstance(nside, (int, np.integer)) or nside < 1 \
            or (int(nside) & (int(nside) - 1)) or nside > MAX_NSIDE:
        raise InputError(f"must be a power of two between 1 and {MAX_NSIDE}, got {nside!r}", where)
    return int(nside)


def check_lmax(lmax, nside: int, where: str = "[sky] lmax") -> int:
    """0 <= lmax <= 3 N_side - 1."""
    if isinstance(lmax, bool) or not isinstance(lmax, (int, np.integer)) or lmax < 0:
        raise InputError(f"must be a whole number >= 0, got {lmax!r}", where)
    return check_band_limit(lmax, nside, where)


def _pixel_window_sq(nside: int, lmax: int, sub: int, ring: np.ndarray) -> np.ndarray:
    """Mean over pixels ``ring`` of (1/s^4) sum_{ij} P_l(n_i . n_j), n_i the s^2 sub-pixel centres."""
    nest = hp.ring2nest(nside, ring)
    s2 = sub * sub
    tmax = 4.0 / nside                           # > the largest in-pixel separation (~2.4 / N_side)
    nodes = int(math.ceil(lmax * tmax / 0.005)) + 2  # l dtheta <= 0.005 on the interpolation nodes
    dt = tmax / (nodes - 1)
    w = np.zeros(nodes)
    iu, ju = np.triu_indices(s2, k=1)            # pairs i < j count twice, i = j gives P_l(1) = 1
    block = max(1, 2**21 // len(iu))
    for b in range(0, len(nest), block):
        kids = nest[b:b + block, None] * s2 + np.arange(s2)[None, :]
        v = np.array(hp.pix2vec(nside * sub, kids.ravel(), nest=True)).T.reshape(len(kids), s2, 3)
        dots = np.einsum("pik,pik->pi", v[:, iu], v[:, ju]).ravel()
        u = np.arccos(np.clip(dots, -1.0, 1.0)) / dt
        i0 = np.minimum(np.floor(u).astype(np.int64), nodes - 2)
        f = u - i0
        w += 2.0 * (np.bincount(i0, 1.0 - f, nodes) + np.bincount(i0 + 1, f, nodes))  # linear weights
    w[0] += len(nest) * s2
    return legendre_table(np.cos(np.arange(nodes) * dt), lmax) @ w / (len(nest) * s2 * s2)


@functools.lru_cache(maxsize=16)
def _pixel_window_cached(nside: int, lmax: int) -> np.ndarray:
    npix = 12 * nside * nside
    m = min(npix, 1024)
    ring = (np.arange(m, dtype=np.int64) * npix) // m
    w8 = _pixel_window_sq(nside, lmax, 8, ring)
    w16 = _pixel_window_sq(nside, lmax, 16, ring)
    out = np.sqrt(np.clip((4.0 * w16 - w8) / 3.0, 0.0, None))
    out.setflags(write=False)
    return out


def pixel_window(nside: int, lmax: int) -> np.ndarray:
    """Temperature pixel window p_l of HEALPix N_side, l = 0..lmax (see module docstring)."""
    return np.array(_pixel_window_cached(check_nside(nside), int(lmax)))


def beam_window(fwhm_deg: float, lmax: int) -> np.ndarray:
    """Gaussian beam b_l = exp(-l (l + 1) sigma^2 / 2), sigma = FWHM / sqrt(8 ln 2) (healpy.gauss_beam)."""
    if fwhm_deg == 0:
        return np.ones(lmax + 1)
    return hp.gauss_beam(math.radians(fwhm_deg), lmax=lmax)


def galactic_mask(nside: int, b_deg: float) -> np.ndarray:
    """1.0 where |latitude| >= b_deg (kept), 0.0 in the band |b| < b_deg (RING, map frame)."""
    z = hp.pix2vec(nside, np.arange(12 * nside * nside))[2]
    return (np.abs(z) >= math.sin(math.radians(b_deg))).astype(np.float64)


def _check_non_negative(value, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.floating, np.integer)) \
            or not math.isfinite(value) or value < 0:
        raise InputError(f"must be a finite number >= 0, got {value!r}", where)
    return float(value)


def _hits_at(hits, nside: int) -> np.ndarray:
    h = np.asarray(hits, dtype=float)
    if h.ndim != 1 or not hp.isnpixok(h.size):
        raise InputError(f"is not a HEALPix map ({h.size} pixels)", "[sky] hits")
    if np.any(~np.isfinite(h)) or np.any(h < 0):
        raise InputError("hit counts must be finite and >= 0", "[sky] hits")
    if hp.npix2nside(h.size) != nside:
        h = hp.ud_grade(h, nside, power=-2)      # counts add when pixels merge
    if not np.any(h > 0):
        raise InputError("hit-count map has no observed pixel", "[sky] hits")
    return h


def _sky_alm(sky: Sky, lmax: int) -> np.ndarray:
    """The sky's alm truncated (or read from its map) at ``lmax``."""
    if sky.alm is not None:
        if lmax == sky.lmax:
            return np.array(sky.alm)
        return hp.resize_alm(sky.alm, sky.lmax, sky.lmax, lmax, lmax)
    return hp.map2alm(np.asarray(sky.map, dtype=float), lmax=lmax, iter=3)


def observe(sky: Sky, *, nside: int, fwhm_deg: float = 0.0, noise_uk: float = 0.0, hits=None,
            pixwin: bool = True, seed: int, mask=None, lmax: int | None = None) -> np.ndarray:
    """The observed RING map in microK at ``nside`` (float64).

    Beam of FWHM ``fwhm_deg`` (0: none), pixel window when ``pixwin``, white noise of
    ``noise_uk`` per pixel (uniform, or scaled by 1 / sqrt(hits / mean hits) for a hit-count
    map ``hits``; pixels with no hits become UNSEEN), noise from the "noise" stream of ``seed``.
    ``lmax`` (default ``sky.lmax``) must be <= 3 nside - 1. A map-type Sky at the same N_side
    with no beam and no pixel window is used as it is; otherwise it goes through its a_lm
    (healpy.map2alm, 3 iterations) up to ``lmax``. ``mask`` (1 kept, 0 masked), if given, sets
    the masked pixels to UNSEEN.
    """
    nside = check_nside(nside)
    lmax = check_lmax(sky.lmax if lmax is None else lmax, nside)
    if sky.map is not None:
        lmax = min(lmax, lmax_limit(sky.nside))
    fwhm = _check_non_negative(fwhm_deg, "[sky] fwhm_deg")
    sigma = _check_non_negative(noise_uk, "[sky] noise_uk")
    if sky.map is not None and sky.nside == nside and fwhm == 0 and not pixwin:
        out = np.array(sky.map, dtype=np.float64)
    else:
        alm = _sky_alm(sky, lmax)
        window = beam_window(fwhm, lmax) * (pixel_window(nside, lmax) if pixwin else 1.0)
        out = hp.alm2map(hp.almxfl(alm, window), nside, lmax=lmax)
    npix = 12 * nside * nside
    unseen = np.zeros(npix, dtype=bool)
    if sigma > 0 or hits is not None:
        scale = np.ones(npix)
        if hits is not None:
            h = _hits_at(hits, nside)
            unseen |= h <= 0
            scale = np.where(h > 0, np.sqrt(np.mean(h) / np.where(h > 0, h, 1.0)), 0.0)
        out = out + sigma * scale * stream_rng(seed, "noise").standard_normal(npix)
    if mask is not None:
        m = np.asarray(mask, dtype=float)
        if m.shape != (npix,):
            raise InputError(f"mask has {m.size} pixels, the map {npix}", "[sky] mask")
        unseen |= m <= 0
    out[unseen] = hp.UNSEEN
    return out
