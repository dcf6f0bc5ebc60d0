"""The instrument: beam, pixel window, white noise, hits, mask, N_side/lmax checks."""

import math

import healpy as hp
import numpy as np
import pytest
from scipy import special

from topology.cosmology import Cosmology
from topology.errors import InputError
from topology.skies import Sky
from topology.skies.base import stream_rng
from topology.skies.instrument import galactic_mask, observe, pixel_window
from topology.skies.isotropic import isotropic_sky

FULL = ("sw", "doppler", "isw")


def test_pixel_window_against_monte_carlo_pixel_integrals():
    # check: Gorski et al. 2005 (ApJ 622, 759) definition p_l^2 = < (1/Omega^2) int_p int_p
    # P_l(n.n') >_pixels, estimated independently with ~400 random points in every pixel of
    # N_side 8 (ang2pix membership) and the addition theorem sum_ij P_l(n_i.n_j) =
    # 4 pi / (2l+1) sum_m |sum_i Y_lm(n_i)|^2 (scipy's Y_lm), distinct pairs only (unbiased)
    nside, lmax = 8, 23
    npix = 12 * nside**2
    rng = np.random.default_rng(1)
    v = rng.standard_normal((npix * 400, 3))
    v /= np.linalg.norm(v, axis=1)[:, None]
    pix = hp.vec2pix(nside, *v.T)
    count = np.bincount(pix, minlength=npix).astype(float)
    theta, phi = np.arccos(v[:, 2]), np.arctan2(v[:, 1], v[:, 0])
    ells = np.array([4, 12, 23])
    mc = []
    for ell in ells:
        s2 = np.zeros(npix)
        for m in range(ell + 1):              # |sum Y_l,-m| = |sum Y_lm|
            y = special.sph_harm_y(ell, m, theta, phi)
            s2 += (1 if m == 0 else 2) * (np.bincount(pix, y.real, npix) ** 2 + np.bincount(pix, y.imag, npix) ** 2)
        pair_sum = 4 * math.pi / (2 * ell + 1) * s2 - count      # drop i = j (P_l(1) = 1)
        mc.append(np.mean(pair_sum / (count * (count - 1))))
    mc = np.sqrt(np.array(mc))
    ours = pixel_window(nside, lmax)[ells]
    assert np.allclose(ours, mc, rtol=2e-3)
    assert ours[-1] < 0.75          # a real suppression at l = 3 N_side - 1
    assert pixel_window(nside, lmax)[0] == pytest.approx(1.0, abs=1e-12)


def test_beam_pixel_window_and_noise_in_observed_spectrum():
    # check: observed C_l = C_l b_l^2 p_l^2 + 4 pi sigma^2 / N_pix (common practice), with
    # b_l = exp(-l(l+1) sigma_b^2 / 2), sigma_b = FWHM / sqrt(8 ln 2) written out here
    nside, lmax, fwhm, noise = 64, 191, 2.0, 30.0
    sky = isotropic_sky(Cosmology(), lmax=lmax, terms=FULL, seed=21)
    m = observe(sky, nside=nside, fwhm_deg=fwhm, noise_uk=noise, seed=21)
    cl_hat = hp.anafast(m, lmax=lmax, iter=3)
    ell = np.arange(lmax + 1)
    sb = math.radians(fwhm) / math.sqrt(8 * math.log(2))
    bl = np.exp(-ell * (ell + 1) * sb**2 / 2)
    pl = pixel_window(nside, lmax)
    nl = 4 * math.pi * noise**2 / (12 * nside**2)
    model = hp.alm2cl(sky.alm) * bl**2 * pl**2 + nl      # this realisation's signal power
    sel = slice(2, 2 * nside)
    nu = 2 * ell[sel] + 1
    # relative to the model only the noise (and signal x noise) scatter remains
    var = (2 * nl**2 + 4 * nl * (model[sel] - nl)) / nu
    z = (cl_hat[sel] - model[sel]) / np.sqrt(var)
    assert abs(z.mean()) < 4 / math.sqrt(len(nu))
    assert np.mean(z**2) == pytest.approx(1.0, abs=0.35)
    # without beam and pixel window the same seed differs by exactly b_l p_l (the noise repeats)
    m0 = observe(sky, nside=nside, fwhm_deg=0.0, noise_uk=noise, pixwin=False, seed=21)
    d = hp.anafast(m0 - m, lmax=lmax, iter=3)[sel]
    want = hp.alm2cl(sky.alm)[sel] * (1 - bl[sel] * pl[sel]) ** 2
    assert np.allclose(d, want, rtol=0.02)


def test_noise_level_hits_and_independent_stream():
    nside = 32
    npix = 12 * nside**2
    sky = Sky(lmax=10, alm=np.zeros(hp.Alm.getsize(10), complex))
    n = observe(sky, nside=nside, noise_uk=25.0, pixwin=False, seed=3)
    assert np.std(n) == pytest.approx(25.0, rel=0.03)          # 12288 pixels: ~0.6 % scatter
    # the noise stream is not the signal stream of the same seed, nor default_rng(seed)
    for other in (stream_rng(3, "signal").standard_normal(npix), np.random.default_rng(3).standard_normal(npix)):
        assert abs(np.corrcoef(n, other)[0, 1]) < 0.05
    assert np.array_equal(n, observe(sky, nside=nside, noise_uk=25.0, pixwin=False, seed=3))
    assert not np.allclose(n, observe(sky, nside=nside, noise_uk=25.0, pixwin=False, seed=4))
    # hits: sigma_p = noise / sqrt(h / <h>); zero hits -> UNSEEN
    hits = np.where(np.arange(npix) % 2 == 0, 1.0, 4.0)
    hits[:10] = 0.0
    nh = observe(sky, nside=nside, noise_uk=25.0, hits=hits, pixwin=False, seed=3)
    mean_h = hits.mean()
    assert np.all(nh[:10] == hp.UNSEEN)
    assert np.std(nh[10:][hits[10:] == 1]) == pytest.approx(25.0 * math.sqrt(mean_h / 1.0), rel=0.04)
    assert np.std(nh[10:][hits[10:] == 4]) == pytest.approx(25.0 * math.sqrt(mean_h / 4.0), rel=0.04)


def test_map_sky_other_nside_and_passthrough():
    lmax = 30
    sky = isotropic_sky(Cosmology(), lmax=lmax, seed=2)
    ref16 = hp.alm2map(sky.alm, 16, lmax=lmax)
    msky = Sky(lmax=lmax, map=hp.alm2map(sky.alm, 32, lmax=lmax), nside=32)
    got = observe(msky, nside=16, pixwin=False, seed=0)
    assert np.max(np.abs(got - ref16)) < 1e-3 * np.std(ref16)
    same = observe(msky, nside=32, pixwin=False, seed=0)
    assert np.array_equal(same, msky.map)


def test_galactic_mask_and_applied_mask():
    # check: the band |b| < b0 covers sin(b0) of the sphere (common practice)
    m = galactic_mask(64, 20.0)
    assert 1 - m.mean() == pytest.approx(math.sin(math.radians(20.0)), abs=0.01)
    sky = isotropic_sky(Cosmology(), lmax=20, seed=1)
    out = observe(sky, nside=64, pixwin=False, seed=1, mask=m)
    assert np.all((out == hp.UNSEEN) == (m == 0))


@pytest.mark.parametrize("kw,where", [
    (dict(nside=24), "[sky] nside"),
    (dict(nside=0), "[sky] nside"),
    (dict(nside=8192), "[sky] nside"),
    (dict(nside=8, lmax=24), "[sky] lmax"),
    (dict(nside=16, noise_uk=-1.0), "[sky] noise_uk"),
    (dict(nside=16, fwhm_deg=-0.5), "[sky] fwhm_deg"),
    (dict(nside=16, fwhm_deg=float("nan")), "[sky] fwhm_deg"),
])
def test_bad_instrument_input(kw, where):
    sky = Sky(lmax=10, alm=np.zeros(hp.Alm.getsize(10), complex))
    kw = dict(kw)
    lmax = kw.pop("lmax", None)
    with pytest.raises(InputError) as e:
        observe(sky, seed=0, lmax=lmax, **kw)
    assert e.value.where == where


def test_nside_512_supported():
    sky = Sky(lmax=8, alm=np.zeros(hp.Alm.getsize(8), complex))
    out = observe(sky, nside=512, noise_uk=1.0, pixwin=False, seed=0)
    assert out.shape == (12 * 512**2,)
