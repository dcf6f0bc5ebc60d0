"""Circles on a working map: centre grids, sampling and Fourier coefficients.

A circle of centre c and radius alpha is sampled at phi_k = 2 pi k / N_phi, k = 0..N_phi-1, on
the points n(phi) of :func:`topology.circles.circle_points` (phi from north through east), so
twists and orientations found here are those of ``topology predict``.

Sampling is bilinear interpolation on the working HEALPix map (``healpy.get_interp_weights``:
four neighbouring pixel centres). Why not harmonic synthesis on each circle: exact synthesis
needs a rotation of the a_lm per centre, O(l_max^3) each, i.e. ~10^11 operations for the 3072
centres of an N_side 16 grid at l_max 383, against N_centres * N_phi * 4 gathers here. The price
is an interpolation error of order (l * pixel)^2 / 8 for a harmonic of degree l, small once the
map is smoothed to a FWHM of two working pixels or more; tests/test_search_sampling.py measures
it on maps of a single Y_lm. A sample is kept only when all four pixels it uses are kept.

Fourier coefficients (the package's convention): T(phi) = sum_m T_m e^{i m phi} over
m = -M..M with T_{-m} = conj(T_m), i.e. T_m = (1/N_phi) sum_k T(phi_k) e^{-i m phi_k}.
On a partly masked circle the kept mean is removed; the masked samples keep their values, which
are those of the zero-filled, smoothed map (a taper to zero over ~FWHM, with no step): setting
them to zero instead would put a step at each mask edge that the sqrt(m) weighting of S
amplifies into ringing over the kept samples.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..circles import circle_points
from ..errors import InputError

POINTS_PER_BLOCK = 2_000_000  # bound on samples gathered at once (memory ~ 100 bytes each)


def centre_grid(nside: int) -> np.ndarray:
    """Unit vectors (12 nside^2, 3) of the HEALPix pixel centres (RING order)."""
    import healpy as hp

    return np.array(hp.pix2vec(nside, np.arange(12 * nside * nside))).T


@dataclass
class CircleSet:
    """Sampled circles of one radius.

    centers (n, 3); radius (rad); samples (n, N_phi) minus the kept mean; kept (n, N_phi) bool; coeffs (n, m_max + 1) complex T_m, m = 0..m_max.
    """

    centers: np.ndarray
    radius: float
    samples: np.ndarray
    kept: np.ndarray
    coeffs: np.ndarray

    @property
    def n_phi(self) -> int:
        return self.samples.shape[1]

    @property
    def m_max(self) -> int:
        return self.coeffs.shape[1] - 1

    @property
    def kept_fraction(self) -> np.ndarray:
        return self.kept.mean(axis=1)

    @property
    def full(self) -> np.ndarray:
        return self.kept.all(axis=1)

    def __len__(self) -> int:
        return self.centers.shape[0]


def interpolate(map_ring: np.ndarray, mask: np.ndarray | None, points: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Bilinear values at unit vectors (k, 3) and whether all pixels used are kept."""
    import healpy as hp

    nside = hp.npix2nside(map_ring.size)
    x, y, z = points[:, 0], points[:, 1], points[:, 2]
    pix, wts = hp.get_interp_weights(nside, np.arctan2(np.hypot(x, y), z), np.arctan2(y, x))
    vals = np.einsum("ij,ij->j", wts, map_ring[pix])
    if mask is None:
        return vals, np.ones(vals.shape, dtype=bool)
    return vals, np.all(mask[pix] | (wts <= 0), axis=0)


def sample_circles(map_ring: np.ndarray, centers: np.ndarray, radius: float, n_phi: int, m_max: int,
                   mask: np.ndarray | None = None) -> CircleSet:
    """Sample circles of ``radius`` (rad) around ``centers`` (n, 3) at N_phi points, FFT to T_m."""
    centers = np.atleast_2d(np.asarray(centers, dtype=float))
    phi = 2.0 * np.pi * np.arange(n_phi) / n_phi
    return sample_points(map_ring, lambda sl: circle_points(centers[sl], radius, phi), centers, radius,
                         n_phi, m_max, mask)


def sample_points(map_ring: np.ndarray, points, centers: np.ndarray, radius: float, n_phi: int, m_max: int,
                  mask: np.ndarray | None = None) -> CircleSet:
    """Like :func:`sample_circles` for explicit sample points: ``points`` is an array (n, N_phi, 3)
    or a function of a slice of circles returning that block (bounded memory)."""
    centers = np.atleast_2d(np.asarray(centers, dtype=float))
    if n_phi < 2 * m_max + 1:
        raise InputError(f"N_phi = {n_phi} is below 2 m_max + 1 = {2 * m_max + 1}", "[search] n_phi")
    n = centers.shape[0]
    samples = np.empty((n, n_phi))
    kept = np.empty((n, n_phi), dtype=bool)
    step = max(1, POINTS_PER_BLOCK // n_phi)
    for i0 in range(0, n, step):
        sl = slice(i0, min(n, i0 + step))
        pts = points(sl) if callable(points) else points[sl]
        v, k = interpolate(map_ring, mask, np.asarray(pts).reshape(-1, 3))
        samples[sl] = v.reshape(-1, n_phi)
        kept[sl] = k.reshape(-1, n_phi)
    nk = kept.sum(axis=1)
    mean = np.where(nk > 0, (samples * kept).sum(axis=1) / np.maximum(nk, 1), 0.0)
    samples = samples - mean[:, None]
    coeffs = np.fft.rfft(samples, axis=1)[:, : m_max + 1] / n_phi
    return CircleSet(centers, float(radius), samples, kept, coeffs)
