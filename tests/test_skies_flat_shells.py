"""Flat skies with the terms sw + doppler + isw on the grid: CAMB's transfer as a few shells
(topology.skies.transfer_shells), the grid sky against the eigenmode sum of the same weights and
of CAMB's own transfer, and the expected spectrum against CAMB's unlensed TT."""

import healpy as hp
import numpy as np
import pytest
from scipy.signal import fftconvolve
from scipy.special import spherical_jn

import topology.skies.spectra as spectra
from topology import geometry as geo
from topology.cosmology import Cosmology
from topology.skies import flat_cut, flat_modes, transfer_shells
from topology.skies.flat import flat_sky
from topology.skies.transfer import temperature_transfer
from topology.spaces import build_space

COSMO = Cosmology()
FULL = ("sw", "doppler", "isw")
OBSERVER = geo.Observer.make("flat", [0.13, -0.21, 0.07], geo.euler_zyz(0.3, 0.9, -0.4))


def test_bessel_rows_against_scipy():
    # check: scipy.special.spherical_jn; error relative to each l's peak value
    z = np.concatenate([np.geomspace(1e-3, 1.0, 50), np.linspace(1.0, 300.0, 1500)])
    for ell, j in enumerate(transfer_shells.bessel_rows(150, z)):
        if ell % 7 == 0 or ell == 150:
            peak = np.abs(spherical_jn(ell, np.linspace(max(ell, 0.1), ell + 20.0, 200))).max()
            assert np.abs(j - spherical_jn(ell, z)).max() < 2e-4 * peak, ell


def test_shipped_shells_reproduce_camb_transfer():
    # check: CAMB's Delta_l(k) (topology.skies.transfer): the shipped shell weights give R_l(k)
    # whose difference from -5 Delta_l carries at most 1.5 % of C_l at every l <= 100 (median
    # 0.5 %), and whose C_l is CAMB's transfer integral to 1.5 % (trapezoid in k chi_rec <= 300)
    lmax = 100
    st = transfer_shells.shell_transfer(COSMO, lmax, 300.0)
    assert st.lmax == transfer_shells.TABLE_LMAX            # the shipped table
    k = np.arange(1.0, 300.0, 0.1)
    ell = np.arange(2, lmax + 1)
    exact = -5.0 * temperature_transfer(COSMO, lmax)(ell, k / COSMO.chi_rec_mpc)
    fitted = st.radial(ell, k)
    w = spectra.primordial_power(k / COSMO.chi_rec_mpc) / k
    cl = exact**2 @ w
    misfit = (fitted - exact) ** 2 @ w / cl
    assert misfit.max() < 0.015 and np.median(misfit) < 0.005
    assert np.abs(fitted**2 @ w / cl - 1.0).max() < 0.015


def test_grid_full_terms_match_the_eigenmode_sums():
    # the grid of shells equals the eigenmode sum of the same shell weights (B-spline grid error,
    # measured 1.1 % rms; Beylkin 1995), and that sum the eigenmode sum of CAMB's own transfer
    # (measured 0.4 % rms: the fit's error)
    space = build_space({"family": "E1", "lengths": [1.6, 1.6, 1.6]})
    kw = dict(lmax=48, nside=32, seed=4, kchi_max=40.0, terms=FULL, complete=False)
    grid = flat_sky(space, OBSERVER, COSMO, method="grid", **kw)
    assert grid.meta["transfer"] == "camb shells"
    exact = hp.alm2map(flat_sky(space, OBSERVER, COSMO, method="eigenmode", **kw).alm, 32, lmax=48)
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(spectra, "have_camb", lambda: False)      # the eigenmode method takes the shells too
        shells = flat_sky(space, OBSERVER, COSMO, method="eigenmode", **kw)
    assert shells.meta["transfer"] == "camb shells"
    me = hp.alm2map(shells.alm, 32, lmax=48)
    assert np.std(grid.map - me) < 0.03 * np.std(me)
    assert np.std(me - exact) < 0.02 * np.std(exact)


def test_shell_sky_expected_spectrum_is_camb_cl():
    # check: CAMB's unlensed TT (camb_cl): a cubic torus of side 6 chi_rec, shell transfer, cut
    # at k chi_rec = 40 (boosted profile): lattice sum 4 pi sum sigma^2 w^2 R_l^2 + complement within 1 % of CAMB
    # in bands of l <= 30
    lmax, K, side = 30, 40.0, 6.0
    nm = int(K * side / (2 * np.pi))
    c1 = np.bincount(np.arange(-nm, nm + 1) ** 2).astype(float)
    counts = np.rint(fftconvolve(np.rint(fftconvolve(c1, c1))[: len(c1)], c1))[1: len(c1)]
    k = 2 * np.pi * np.sqrt(np.arange(1, len(counts) + 1)) / side
    sel = (k <= K) & (counts > 0)
    k, counts = k[sel], counts[sel]
    profile = flat_cut.cut_profile(COSMO, lmax, K, FULL, "shells")[0]
    sig2 = flat_modes.mode_sigma(k, COSMO, side**3) ** 2 * profile.weight(k) ** 2
    r = transfer_shells.shell_transfer(COSMO, lmax, K).radial(np.arange(lmax + 1), k)
    lat = 4 * np.pi * (r**2 @ (counts * sig2))
    lat[:2] = 0
    ref = spectra.camb_cl(COSMO, lmax)
    total = lat + flat_cut.complement_cl(COSMO, lmax, K, FULL, "shells")
    for lo, hi in ((2, 5), (6, 10), (11, 20), (21, 30)):
        w = 2 * np.arange(lo, hi + 1) + 1
        assert np.sum(w * total[lo:hi + 1]) / np.sum(w * ref[lo:hi + 1]) == pytest.approx(1.0, abs=0.01), (lo, hi)
