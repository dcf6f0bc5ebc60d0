"""The observed pixels of a low-resolution map, as the harmonic view sees them.

A map at N_side is modelled on its observed pixels as d = Y W r + n: Y the real harmonics
(l = 2..lmax) at the pixel centres, W = b_l p_l the Gaussian beam and the pixel window, r the
real a_lm, n Gaussian noise of covariance N. N is white (rms sigma_p per pixel), plus, for a
real map (``extra_cl``), the isotropic signal of the multipoles lmax < l <= 3 N_side - 1 that
the model of the space does not hold (their topological correlations are neglected: a stated
approximation; common practice in low-l pixel likelihoods), N = diag(sigma^2) + Y_h W_h^2
C_h Y_h^T, dense. With ``dipole`` the monopole and dipole are marginalised under a flat prior:
the weight P = N^-1 - N^-1 T (T^T N^-1 T)^-1 T^T N^-1 (T: the constant and the three
coordinates of each pixel; common practice). Everything the divergence and the likelihood need
is then N x N: A = Y P Y^T, and b = Y P d for a map.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import cho_factor, cho_solve

from ..errors import InputError
from .basis import ells, real_harmonics

#: the largest number of observed pixels for the dense noise of ``extra_cl`` (a 512 MB matrix)
MAX_DENSE_PIXELS = 8192


@dataclass(frozen=True)
class PixelSpace:
    """nside, lmax, A = Y P Y^T (N, N), the window b_l p_l of each coefficient (N,), the number of
    observed pixels and a description; for maps: ``keep`` (RING) and what :meth:`weigh` needs."""

    nside: int
    lmax: int
    A: np.ndarray
    window: np.ndarray
    n_pixels: int
    description: str
    keep: np.ndarray | None = None
    Y: np.ndarray | None = None
    noise: tuple | None = None            # ("diag", sigma) or ("dense", Cholesky factor of N)
    templates: np.ndarray | None = None

    def weigh(self, maps: np.ndarray) -> np.ndarray:
        """b = Y P d of RING maps (npix,) or (npix, k) (microK): the data of the likelihood."""
        d = np.asarray(maps, dtype=float)[self.keep]
        return self.Y @ apply_weight(d, self.noise, self.templates)


def _solve_noise(x: np.ndarray, noise: tuple) -> np.ndarray:
    kind, fac = noise
    if kind == "diag":
        w = 1.0 / fac**2
        return x * (w if x.ndim == 1 else w[:, None])
    return cho_solve(fac, x)


def apply_weight(d: np.ndarray, noise: tuple, T: np.ndarray | None) -> np.ndarray:
    """P d (see the module doc): N^-1 d, less its part along the templates T (n_obs, t) when given."""
    nd = _solve_noise(d, noise)
    if T is None:
        return nd
    NT = _solve_noise(T, noise)
    return nd - NT @ np.linalg.solve(T.T @ NT, T.T @ nd)


def pixel_space(nside: int, lmax: int, *, noise_uk, mask=None, fwhm_deg: float = 0.0, pixwin: bool = True,
                dipole: bool = False, extra_cl: np.ndarray | None = None, where: str = "[harmonic]") -> PixelSpace:
    """The observed pixels at ``nside``: white noise ``noise_uk`` (rms per pixel, microK; a number or
    a RING map), ``mask`` (RING, 1 kept, 0 masked; None: full sky), Gaussian beam of ``fwhm_deg``
    and pixel window; ``dipole``: monopole and dipole marginalised; ``extra_cl``: the isotropic
    C_l (l = 0..3 nside - 1 or more) whose multipoles above lmax join the noise (see the module doc)."""
    import healpy as hp

    from ..bandlimit import check_band_limit, lmax_limit
    from ..skies.instrument import beam_window, pixel_window

    check_band_limit(lmax, nside, f"{where} lmax")
    npix = 12 * nside * nside
    sigma = np.broadcast_to(np.asarray(noise_uk, dtype=float), (npix,))
    if not np.all(np.isfinite(sigma)) or np.any(sigma < 0):
        raise InputError("noise must be finite and >= 0", f"{where} noise_uk")
    keep = np.ones(npix, dtype=bool) if mask is None else np.asarray(mask, dtype=float) > 0
    if keep.shape != (npix,):
        raise InputError(f"the mask has {keep.size} pixels, N_side {nside} has {npix}", f"{where} mask")
    if not keep.any():
        raise InputError("the mask keeps no pixel", f"{where} mask")
    if np.any(sigma[keep] <= 0):
        raise InputError("the pixel-space form needs noise > 0 on every observed pixel (without noise a "
                         "band-limited sky is recovered exactly from the observed pixels, and the divergence is "
                         "the full-sky one)", f"{where} noise_uk")
    vec = np.column_stack(hp.pix2vec(nside, np.flatnonzero(keep)))
    sig = np.array(sigma[keep])
    top = lmax_limit(nside) if extra_cl is not None else int(lmax)
    window = beam_window(float(fwhm_deg), top) * (pixel_window(nside, top) if pixwin else 1.0)
    noise = ("diag", sig)
    if extra_cl is not None and top > lmax:
        if len(sig) > MAX_DENSE_PIXELS:
            raise InputError(f"{len(sig)} observed pixels: the dense noise of the multipoles above lmax is limited to "
                             f"{MAX_DENSE_PIXELS}; use a lower N_side", f"{where} nside")
        cl = np.asarray(extra_cl, dtype=float)
        if len(cl) <= top:
            raise ValueError(f"extra_cl needs C_l to l = {top}")
        Yh = real_harmonics(vec, top)[(lmax + 1) ** 2 - 4:]          # rows of l = lmax + 1 .. top
        lh = ells(top)[(lmax + 1) ** 2 - 4:]
        Nmat = (Yh.T * (window[lh] ** 2 * cl[lh])) @ Yh
        Nmat[np.diag_indices_from(Nmat)] += sig**2
        noise = ("dense", cho_factor(Nmat, lower=True))
    Y = real_harmonics(vec, lmax)                                     # (N, n_obs)
    T = np.column_stack([np.ones(len(vec)), vec]) if dipole else None
    A = Y @ apply_weight(Y.T, noise, T)
    A = 0.5 * (A + A.T)
    desc = (f"N_side {nside}, {int(keep.sum())} of {npix} pixels, noise {float(np.max(sigma)):g} microK"
            + (f", beam {fwhm_deg:g} deg" if fwhm_deg else "") + (", pixel window" if pixwin else "")
            + (f", isotropic l = {lmax + 1}..{top} in the noise" if noise[0] == "dense" else "")
            + (", monopole and dipole marginalised" if dipole else ""))
    return PixelSpace(int(nside), int(lmax), A, window[ells(lmax)], int(keep.sum()), desc, keep, Y, noise, T)
