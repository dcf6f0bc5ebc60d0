"""The E-mode map of Q and U on a masked sky, and what leaks into it.

Method (the plain harmonic E of the apodised-masked sky; common practice):

    w(n)   = apodised mask: 0 where masked, 1/2 (1 - cos(pi d / d_apo)) at angular distance
             d < d_apo from the nearest masked pixel, 1 beyond (a cosine taper; common practice)
    a_E    = the E part of healpy.map2alm([0, w Q, w U], pol=True)   (spin-2 transform)
    E(n)   = sum_lm a_E,lm b_l Y_lm(n)                               (healpy.alm2map)

E is a non-local function of Q, U: a_E of w (Q, U) is the full-sky a_E convolved in l with the
mask's harmonics, and the spin-2 window mixes E and B ("E/B leakage", Lewis, Challinor & Turok
2002; Bunn et al. 2003). For a pure-E sky (scalar modes, B = 0) the estimate therefore has:

* a B part, the E power leaked through the mask (measured by :func:`leakage_bands` as the ratio
  of the B to the E pseudo-power per l band);
* an E part that differs from the true E near the mask edge and at the lowest multipoles, whose
  wavelengths are comparable with the cut (measured as the correlation of the band-filtered
  estimate with the band-filtered true E over the pixels where w = 1).

Matched circles in E. The Sachs-Wolfe temperature of a point x of the last-scattering surface is
a scalar, so the two circles of a pair (the same points x seen along two directions) match
exactly. Linear polarisation at x is the quadrupole of the radiation incident at x projected on
the plane perpendicular to the line of sight (Thomson scattering; Kosowsky 1996, Ann. Phys. 246,
49; Zaldarriaga & Seljak 1997): a scalar plane wave k makes P proportional to
sin^2(angle(k, n)), oriented along the projection of k, so the two directions n_A and n_B that see
x give polarisations of the same source with different amplitudes and angles. The E map is in
addition non-local (a function of Q, U over a neighbourhood of about the scale of the band), so
the circles of a pair match only partly: the expected S of a true pair lies below 1 by an amount
set by the distribution of the angle between the two lines of sight at x and by the band.
Riazuelo et al. 2006 ("Constraining cosmic topology with CMB polarization", Phys. Rev. D 73,
043504; journal reference from memory) found the correlation of the polarisation at matched points
of noise-free torus and sixth-turn skies always positive and above 0.75 at every angular scale,
except the reionisation multipoles (l <~ 10, made on a much larger sphere than the last-scattering
one, so they carry no matched circles there); Bielewicz, Banday & Gorski 2012 (arXiv:1111.6046)
searched polarised maps of a 3-torus for matched circles. So the expected S of a true pair in E,
with the reionisation multipoles filtered out, is about 0.75 or more without noise: a target to
check, not yet measured here, since that needs polarised skies of a multiply connected space
(the E-mode transfer of the flat eigenmodes), which are not implemented yet.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError


def apodised_mask(mask: np.ndarray, apod_deg: float) -> np.ndarray:
    """Cosine-tapered weights (module docstring) of a 0/1 RING ``mask`` (any weight <= 0.5
    counts as masked); ``apod_deg`` 0 gives the binary mask. Distances from a k-d tree of the
    masked pixel centres (chord -> angle)."""
    import healpy as hp
    from scipy.spatial import cKDTree

    m = np.asarray(mask, dtype=float)
    if m.ndim != 1 or not hp.isnpixok(m.size):
        raise InputError(f"is not a HEALPix map ({m.size} pixels)", "polarisation mask")
    kept = m > 0.5
    if not kept.any():
        raise InputError("keeps no pixel", "polarisation mask")
    if apod_deg < 0 or not math.isfinite(apod_deg):
        raise InputError(f"must be a finite number >= 0, got {apod_deg!r}", "apodisation (deg)")
    w = kept.astype(float)
    if apod_deg == 0 or kept.all():
        return w
    nside = hp.npix2nside(m.size)
    vec = np.array(hp.pix2vec(nside, np.arange(m.size))).T
    tree = cKDTree(vec[~kept])
    idx = np.flatnonzero(kept)
    chord, _ = tree.query(vec[idx], k=1)
    d = 2.0 * np.arcsin(np.clip(chord / 2.0, 0.0, 1.0))
    a = math.radians(apod_deg)
    w[idx] = np.where(d < a, 0.5 * (1.0 - np.cos(math.pi * d / a)), 1.0)
    return w


def emode_alm(q: np.ndarray, u: np.ndarray, weight: np.ndarray | None, lmax: int, iterations: int = 3):
    """(a_E, a_B) of w Q, w U (HEALPix convention, RING) by healpy.map2alm(pol=True)."""
    import healpy as hp

    q = np.asarray(q, dtype=float)
    u = np.asarray(u, dtype=float)
    w = np.ones_like(q) if weight is None else np.asarray(weight, dtype=float)
    _, a_e, a_b = hp.map2alm([np.zeros_like(q), w * q, w * u], lmax=int(lmax), pol=True, iter=int(iterations))
    return a_e, a_b


def emode_map(q: np.ndarray, u: np.ndarray, mask: np.ndarray | None = None, *, lmax: int, apod_deg: float = 5.0,
              nside_out: int | None = None, fwhm_deg: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """(E map in the units of Q, U at ``nside_out`` (default that of Q), the apodised weights at
    the input N_side): the method of the module docstring, a Gaussian beam of ``fwhm_deg`` on E."""
    import healpy as hp

    q = np.asarray(q, dtype=float)
    nside = hp.npix2nside(q.size)
    w = None if mask is None else apodised_mask(mask, apod_deg)
    a_e, _ = emode_alm(q, u, w, lmax)
    if fwhm_deg > 0:
        a_e = hp.almxfl(a_e, hp.gauss_beam(math.radians(fwhm_deg), lmax=int(lmax)))
    e = hp.alm2map(a_e, nside if nside_out is None else int(nside_out), lmax=int(lmax))
    return e, (np.ones(q.size) if w is None else w)


def band_filter(lmax: int, lo: int, hi: int) -> np.ndarray:
    """1 for lo <= l <= hi, else 0 (l = 0..lmax)."""
    ell = np.arange(int(lmax) + 1)
    return ((ell >= lo) & (ell <= hi)).astype(float)


def leakage_bands(cl_ee: np.ndarray, mask: np.ndarray, *, nside: int, lmax: int, apod_deg: float,
                  bands, seed: int) -> list[dict]:
    """E/B leakage of the method on one pure-E Gaussian sky (C_EE ``cl_ee``, B = 0), per l band:
    ``b_over_e`` the ratio of the B to the E pseudo-power of the estimate in the band, and
    ``r_interior`` the correlation of the band-filtered estimated and true E maps over the pixels
    where the apodised weight is 1, ``b_rms_interior`` the rms of the band-filtered B map there
    over that of the true E. Draws from ``seed`` (numpy Generator)."""
    import healpy as hp

    cl = np.zeros(int(lmax) + 1)
    cl[: min(len(cl_ee), lmax + 1)] = np.asarray(cl_ee, dtype=float)[: lmax + 1]
    ell, m = hp.Alm.getlm(lmax)
    g = np.random.default_rng(np.random.SeedSequence(int(seed))).standard_normal((ell.size, 2))
    sig = np.sqrt(cl[ell])   # a_l0 real, Re and Im of a_lm (m > 0) each of variance C_l / 2
    a_true = np.where(m == 0, sig * g[:, 0], sig * np.sqrt(0.5) * (g[:, 0] + 1j * g[:, 1]))
    zero = np.zeros_like(a_true)
    _, q, u = hp.alm2map([zero, a_true, zero], nside, lmax=lmax, pol=True)
    w = apodised_mask(mask, apod_deg)
    a_e, a_b = emode_alm(q, u, w, lmax)
    inside = w >= 1.0
    ce, cb = hp.alm2cl(a_e), hp.alm2cl(a_b)
    out = []
    for lo, hi in bands:
        f = band_filter(lmax, lo, hi)
        est = hp.alm2map(hp.almxfl(a_e, f), nside, lmax=lmax)[inside]
        tru = hp.alm2map(hp.almxfl(a_true, f), nside, lmax=lmax)[inside]
        b_in = hp.alm2map(hp.almxfl(a_b, f), nside, lmax=lmax)[inside]
        ell = np.arange(lo, hi + 1)
        pe = np.sum((2 * ell + 1) * ce[lo:hi + 1])
        pb = np.sum((2 * ell + 1) * cb[lo:hi + 1])
        r = float(np.sum(est * tru) / math.sqrt(np.sum(est**2) * np.sum(tru**2)))
        out.append({"l_min": int(lo), "l_max": int(hi), "b_over_e": float(pb / pe), "r_interior": r,
                    "b_rms_interior": float(math.sqrt(np.mean(b_in**2) / np.mean(tru**2)))})
    return out


def emode_sky(pol, mask=None, *, nside_work: int, apod_deg: float = 5.0, threshold: float = 0.5):
    """(E map, E mask) as :class:`~topology.maps.values.SkyMap` objects for the circle search, from
    a :class:`~topology.maps.polarised.PolarisedMap` and a mask SkyMap (any N_side, or None).

    Steps: the mask regraded to the map (:func:`~topology.maps.masks.mask_weights`, times the
    observed Q, U pixels) and cut at ``threshold``; Q, U and that binary mask degraded to
    N_side_E = min(N_side, 2 nside_work) when the map is finer (Q, U averaged over sub-pixels, a
    pixel kept only when every sub-pixel is: the search uses l <= 3 nside_work - 1 only, and the
    apodisation's distances at full resolution would cost gigabytes); then :func:`emode_map` with
    ``apod_deg`` at lmax = 3 N_side_E - 1. The E mask keeps the pixels where the apodised weight
    is 1 (the interior, beyond the taper): near the edge E is down-weighted and leaks most
    (:func:`leakage_bands` measures it there). None when nothing is masked."""
    import healpy as hp

    from .masks import mask_weights
    from .values import SkyMap

    q, u = pol.q, pol.u
    kept = np.asarray(mask_weights(mask, q), dtype=float) >= threshold
    nside_e = int(min(q.nside, 2 * int(nside_work)))
    qv = np.where(kept, q.values, 0.0).astype(float)
    uv = np.where(kept, u.values, 0.0).astype(float)
    if nside_e < q.nside:
        qv = hp.ud_grade(qv, nside_e, order_in="RING")
        uv = hp.ud_grade(uv, nside_e, order_in="RING")
        kept = hp.ud_grade(kept.astype(float), nside_e, order_in="RING") >= 1.0 - 1e-9
    if not kept.any():
        raise InputError("keeps no pixel of the Q, U map", "polarisation mask")
    lmax = 3 * nside_e - 1
    whole = bool(kept.all())
    e, w = emode_map(qv, uv, None if whole else kept.astype(float), lmax=lmax, apod_deg=apod_deg)
    ones = np.ones(e.size, dtype=bool)
    header = dict(pol.q.header)
    header["COLUMN"] = "E"
    sky = SkyMap(e.astype(np.float64), ones, nside_e, source=pol.q.source, header=header)
    if whole:
        return sky, None
    inside = (w >= 1.0 - 1e-12).astype(np.float32)
    if not inside.any():
        raise InputError(f"no pixel lies {apod_deg:g} deg or more inside the mask (the E map's apodisation)",
                         "polarisation mask")
    return sky, SkyMap(inside, ones.copy(), nside_e, source="E mask (interior of the apodised mask)")
