"""Circle sampling: the circle convention and the accuracy of bilinear interpolation."""

import healpy as hp
import numpy as np
import pytest
from scipy.special import sph_harm_y

from topology.circles import circle_frame, circle_points
from topology.maps import as_skymap, prepare_map
from topology.search.sampling import sample_circles


def _ylm_map(nside, ell, m):
    """Real map 2 Re Y_lm (healpy alm with a single a_lm = 1, m > 0)."""
    lmax = 3 * nside - 1
    alm = np.zeros(hp.Alm.getsize(lmax), complex)
    alm[hp.Alm.getidx(lmax, ell, m)] = 1.0
    return hp.alm2map(alm, nside, lmax=lmax)


def _ylm_exact(points, ell, m):
    theta = np.arccos(np.clip(points[..., 2], -1, 1))
    phi = np.arctan2(points[..., 1], points[..., 0])
    return 2 * np.real(sph_harm_y(ell, m, theta, phi))


def test_dipole_coefficient_fixes_phi_from_north_through_east():
    # T(n) = n . e on a circle: T_1 = sin(alpha) (e . e_N - i e . e_E) / 2 exactly (circle convention
    # of topology.circles; common practice)
    e = np.array([0.3, -0.5, 0.8])
    nside = 32
    pix = np.array(hp.pix2vec(nside, np.arange(hp.nside2npix(nside)))).T
    sky = as_skymap(pix @ e)
    pm = prepare_map(sky, nside_work=32, fwhm_deg=0.0, remove_dipole=False)
    centers = np.array([[1.0, 0, 0], [0, 0.6, 0.8], [0, 0, 1.0]])
    alpha = np.radians(35.0)
    circ = sample_circles(pm.working_map(), centers, alpha, 16, 4)
    en, ee = circle_frame(centers)
    want = np.sin(alpha) * (en @ e - 1j * (ee @ e)) / 2
    assert np.allclose(circ.coeffs[:, 1], want, atol=5e-3 * np.sin(alpha))


@pytest.mark.parametrize("ell,m", [(6, 2), (20, 5), (40, 13)])
def test_single_ylm_circle_coefficients(ell, m):
    # check: scipy.special.sph_harm_y (independent Y_lm) against samples of a Y_lm map at N_side 64,
    # interpolated on the 2x oversampled grid; error bound (l pix / 2)^2 / 8 relative (common practice
    # for bilinear interpolation of a smooth function), with pix = 0.92 deg the working pixel
    nside = 64
    sky = as_skymap(_ylm_map(nside, ell, m))
    pm = prepare_map(sky, nside_work=nside, fwhm_deg=0.0, remove_dipole=False, iterations=3)
    rng = np.random.default_rng(7)
    v = rng.normal(size=(20, 3))
    centers = v / np.linalg.norm(v, axis=1, keepdims=True)
    alpha = np.radians(30.0)
    n_phi, m_max = 130, 64
    phi = 2 * np.pi * np.arange(n_phi) / n_phi
    exact = _ylm_exact(circle_points(centers, alpha, phi), ell, m)
    exact_c = np.fft.rfft(exact - exact.mean(1, keepdims=True), axis=1)[:, : m_max + 1] / n_phi
    amp = np.abs(exact).max()
    pixel = hp.nside2resol(nside)
    bound = amp * (ell * pixel / 2) ** 2 / 8 + 1e-3 * amp
    for oversample, factor in ((2, 1.0), (1, 4.0)):
        pm.oversample = oversample
        pm._cache.clear()
        circ = sample_circles(pm.working_map(0.0), centers, alpha, n_phi, m_max)
        err = np.abs(circ.coeffs - exact_c).max()
        assert err < factor * bound, (oversample, err, bound)
    # the finer sampling grid is what buys the accuracy (a factor ~4 in the error)
    assert ell < 10 or err > 2 * np.abs(sample_circles(_fine(pm), centers, alpha, n_phi, m_max).coeffs - exact_c).max()


def _fine(pm):
    pm.oversample = 2
    pm._cache.clear()
    return pm.working_map(0.0)


def test_mask_flags_samples_touching_masked_pixels():
    nside = 32
    mask_ring = np.ones(hp.nside2npix(nside), bool)
    theta, _ = hp.pix2ang(nside, np.arange(mask_ring.size))
    mask_ring[np.abs(np.pi / 2 - theta) < np.radians(20)] = False  # |b| < 20 deg
    m = np.ones_like(mask_ring, float)
    circ = sample_circles(m, np.array([[0, 0, 1.0], [1.0, 0, 0]]), np.radians(30), 64, 20, mask_ring)
    assert circ.kept_fraction[0] == 1.0  # a polar cap circle at |b| = 60 deg
    # a circle centred on the equator: kept where |b| >= 20 deg plus a pixel margin
    pts = circle_points(np.array([1.0, 0, 0]), np.radians(30), 2 * np.pi * np.arange(64) / 64)
    b = np.degrees(np.arcsin(pts[:, 2]))
    assert np.all(circ.kept[1][np.abs(b) < 20] == False)  # noqa: E712
    assert np.all(circ.kept[1][np.abs(b) > 20 + 2 * np.degrees(hp.nside2resol(nside))])
