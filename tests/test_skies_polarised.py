"""Isotropic polarised skies: the shipped EE/TE table against CAMB, sample TE/EE spectra within
cosmic variance, T unchanged by polarisation, the Q/U convention, noise per Stokes parameter."""

import math

import healpy as hp
import numpy as np
import pytest

from topology.cosmology import Cosmology
from topology.errors import InputError
from topology.skies import polarised, spectra
from topology.skies.isotropic import isotropic_sky

FULL = ("sw", "doppler", "isw")


def test_shipped_ee_te_table_reproduces_camb():
    # check: CAMB (Lewis, Challinor & Lasenby 2000) run here for the default cosmology; the
    # table must reproduce it (EE to 1e-3 relative, TE to 1e-3 of sqrt(TT EE), TE crosses zero)
    cl = polarised.camb_pol_cl(Cosmology(), 2000)
    tab = polarised.shipped_pol_cl(2000)
    assert np.max(np.abs(tab["EE"][2:] / cl["EE"][2:] - 1.0)) < 1e-3
    scale = np.sqrt(cl["TT"][2:] * cl["EE"][2:])
    assert np.max(np.abs(tab["TE"][2:] - cl["TE"][2:]) / scale) < 1e-3
    # check: Planck 2018 I, from memory: the EE spectrum's reionisation bump at l < 10 and its
    # (tau = 0.054) and the first acoustic peak near l ~ 400 with D_l ~ 20-25 microK^2; |TE| <= sqrt(TT EE)
    ell = np.arange(2001)
    d_ee = ell * (ell + 1) * cl["EE"] / (2 * math.pi)
    assert 350 <= np.argmax(d_ee[200:600]) + 200 <= 450 and 15 < d_ee[200:600].max() < 30
    assert np.all(np.abs(cl["TE"][2:]) <= np.sqrt(cl["TT"][2:] * cl["EE"][2:]))
    assert d_ee[3:6].max() > 10 * d_ee[10:15].min()
    _, _, _, header = polarised.read_pol_table()
    assert any("CAMB version" in h for h in header)


def _z(est, model_var, model):
    """Mean and chi-square of (est - model) / sqrt(var) over l = 2..lmax."""
    z = (est[2:] - model[2:]) / np.sqrt(model_var[2:])
    return z.sum() / math.sqrt(z.size), float(np.sum(z**2)), z.size


def test_map_te_ee_spectra_within_cosmic_variance():
    # check: var(C^_EE) = 2 C_EE^2 / (2l + 1), var(C^_TE) = (C_TT C_EE + C_TE^2) / (2l + 1)
    # (Knox 1995 / Kamionkowski, Kosowsky & Stebbins 1997; common practice), on the map's own
    # pseudo-spectra at N_side 32, lmax 64 (no beam, no pixel window, full sky)
    lmax, nside = 64, 32
    sky = polarised.polarised_sky(Cosmology(), lmax=lmax, seed=5)
    iqu = polarised.observe_polarised(sky, nside=nside, pixwin=False, seed=5)
    est = hp.anafast(iqu, lmax=lmax, pol=True, iter=3)  # TT, EE, BB, TE, EB, TB
    cl = sky.meta["cl"]
    ell = np.arange(lmax + 1)
    n = 2 * ell + 1.0
    var_ee = 2 * cl["EE"] ** 2 / n
    var_te = (cl["TT"] * cl["EE"] + cl["TE"] ** 2) / n
    for got, model, var in ((est[1], cl["EE"], var_ee), (est[3], cl["TE"], var_te)):
        zm, chi2, k = _z(got, var, model)
        assert abs(zm) < 4 and abs(chi2 - k) < 5 * math.sqrt(2 * k)
    # the check can fail: TE of the opposite sign, or EE x 1.3, is far outside
    assert abs(_z(est[3], var_te, -cl["TE"])[0]) > 8
    assert abs(_z(est[1], var_ee, 1.3 * cl["EE"])[0]) > 4
    # scalar modes only: B of the map is healpy round-off
    assert np.max(est[2][2:] / cl["EE"][2:]) < 1e-6


def test_temperature_is_the_temperature_only_sky_and_qu_convention(monkeypatch):
    # the T a_lm are those of the isotropic temperature sky of the same seed (shipped tables)
    monkeypatch.setattr(spectra, "have_camb", lambda: False)
    sky = polarised.polarised_sky(Cosmology(), lmax=24, seed=9)
    assert np.array_equal(sky.alm, isotropic_sky(Cosmology(), lmax=24, terms=FULL, seed=9).alm)
    # check: healpy's own map2alm(pol=True) inverts alm2map(pol=True) on the HEALPix convention:
    # the E given back, B zero; in the IAU convention U flips sign (HEALPix primer)
    heal = polarised.observe_polarised(sky, nside=16, pixwin=False, seed=9)
    iau = polarised.observe_polarised(sky, nside=16, pixwin=False, seed=9, convention="iau")
    assert np.array_equal(heal[1], iau[1]) and np.array_equal(heal[2], -iau[2])
    _, a_e, a_b = hp.map2alm(heal, lmax=24, pol=True, iter=3)
    rms = np.sqrt(np.mean(np.abs(sky.meta["alm_e"][hp.Alm.getidx(24, 2, 0):]) ** 2))
    assert np.max(np.abs(a_e - sky.meta["alm_e"])) < 1e-4 * rms
    assert np.max(np.abs(a_b)) < 1e-4 * rms
    with pytest.raises(InputError, match="healpix"):
        polarised.observe_polarised(sky, nside=16, seed=9, convention="cosmo")


def test_noise_per_stokes_parameter_and_masks(monkeypatch):
    monkeypatch.setattr(spectra, "have_camb", lambda: False)
    sky = polarised.polarised_sky(Cosmology(), lmax=16, seed=3)
    clean = polarised.observe_polarised(sky, nside=16, seed=3, pixwin=False)
    noisy = polarised.observe_polarised(sky, nside=16, seed=3, noise_uk=10.0, noise_pol_uk=40.0, pixwin=False)
    d = noisy - clean
    npix = d.shape[1]
    # white noise rms per pixel: 10 on I, 40 on Q and U (3072 pixels: 4 sigma of the rms is ~5%)
    assert abs(d[0].std() / 10.0 - 1) < 0.06
    assert abs(d[1].std() / 40.0 - 1) < 0.06 and abs(d[2].std() / 40.0 - 1) < 0.06
    assert abs(np.corrcoef(d[1], d[2])[0, 1]) < 4 / math.sqrt(npix)
    default = polarised.observe_polarised(sky, nside=16, seed=3, noise_uk=10.0, pixwin=False) - clean
    assert abs(default[1].std() / (10.0 * math.sqrt(2)) - 1) < 0.06
    t_mask = np.ones(npix)
    t_mask[:100] = 0
    p_mask = np.ones(npix)
    p_mask[-200:] = 0
    m = polarised.observe_polarised(sky, nside=16, seed=3, mask=t_mask, pol_mask=p_mask, pixwin=False)
    assert np.all(m[0][:100] == hp.UNSEEN) and np.all(m[0][100:] != hp.UNSEEN)
    assert np.all(m[1:, -200:] == hp.UNSEEN) and np.all(m[1:, :-200] != hp.UNSEEN)
    with pytest.raises(InputError, match="noise_pol_uk"):
        polarised.observe_polarised(sky, nside=16, seed=3, noise_pol_uk=float("nan"))


def test_polarisation_needs_the_full_physics_and_the_table_without_camb(monkeypatch):
    with pytest.raises(InputError, match="terms"):
        polarised.polarised_cl(Cosmology(), 10, ("sw",))
    monkeypatch.setattr(spectra, "have_camb", lambda: False)
    cl = polarised.polarised_cl(Cosmology(), 100)
    assert np.allclose(cl["EE"], polarised.shipped_pol_cl(100)["EE"])
    with pytest.raises(InputError, match="default cosmology"):
        polarised.polarised_cl(Cosmology(h=0.7), 10)
