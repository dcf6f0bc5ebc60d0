"""Isotropic spectra and skies: CAMB, the shipped table, the Sachs-Wolfe plateau, sample spectra."""

import math

import healpy as hp
import numpy as np
import pytest
from scipy import integrate, special

from topology.cosmology import Cosmology
from topology.errors import InputError
from topology.skies import spectra
from topology.skies.isotropic import gaussian_alm, isotropic_sky

FULL = ("sw", "doppler", "isw")


@pytest.fixture(scope="module")
def camb_full():
    # check: CAMB (Lewis, Challinor & Lasenby 2000), the reference Boltzmann code, run here
    return spectra.camb_cl(Cosmology(), 2000)


def test_shipped_table_reproduces_camb(camb_full):
    # check: CAMB itself for the default cosmology; the table must reproduce it to 1e-3
    tab = spectra.shipped_cl(2000)
    rel = np.abs(tab[2:] / camb_full[2:] - 1.0)
    assert rel.max() < 1e-3
    assert tab[0] == tab[1] == 0.0


def test_isotropic_cl_uses_camb_and_falls_back_to_table(camb_full, monkeypatch):
    # check: CAMB for the same cosmology (isotropic spectrum vs CAMB, 1e-3 relative)
    cl = spectra.isotropic_cl(Cosmology(), 1500, FULL)
    assert np.max(np.abs(cl[2:] / camb_full[2:1501] - 1.0)) < 1e-3
    monkeypatch.setattr(spectra, "have_camb", lambda: False)
    cl_tab = spectra.isotropic_cl(Cosmology(), 1500, FULL)
    assert np.max(np.abs(cl_tab[2:] / camb_full[2:1501] - 1.0)) < 1e-3
    with pytest.raises(InputError, match="spectra"):
        spectra.isotropic_cl(Cosmology(h=0.7), 100, FULL)


def test_camb_follows_the_configured_cosmology(camb_full):
    # check: CAMB run for another cosmology differs from the default table (the cosmology is
    # passed through, not ignored); Hu & Sugiyama 1995: higher omega_b h^2 raises the first
    # acoustic peak relative to the second
    other = spectra.camb_cl(Cosmology(omega_b_h2=0.030), 700)
    ell = np.arange(701)
    d0, d1 = ell * (ell + 1) * camb_full[:701], ell * (ell + 1) * other
    peak = lambda d, lo, hi: d[lo:hi].max()  # noqa: E731
    assert peak(d1, 150, 300) / peak(d1, 400, 650) > 1.05 * peak(d0, 150, 300) / peak(d0, 400, 650)


def test_shipped_table_first_peak_and_header():
    # check: Planck 2018 I (first acoustic peak at l ~ 220, D_l ~ 5700-5800 microK^2), from memory
    ell, cl, header = spectra.read_table()
    d = ell * (ell + 1) * cl / (2 * math.pi)
    lp = int(ell[np.argmax(d[:600])])
    assert 210 <= lp <= 230
    assert 5400 < d[lp] < 6100
    text = "\n".join(header)
    assert "CAMB version" in text and "As = 2.1e-09" in text and "ns = 0.9649" in text
    assert ell.max() >= 3 * 512 - 1
    with pytest.raises(InputError, match="lmax"):
        spectra.shipped_cl(int(ell.max()) + 1)


def test_sachs_wolfe_plateau_scale_invariant():
    # check: Sachs & Wolfe 1967; for n_s = 1, l(l+1) C_l / 2 pi = A_s T^2 / 25 (common practice)
    c = Cosmology()
    cl = spectra.sachs_wolfe_cl(200, c, A_s=2.1e-9, n_s=1.0)
    ell = np.arange(201)
    d = ell[2:] * (ell[2:] + 1) * cl[2:] / (2 * math.pi)
    want = 2.1e-9 * (2.7255e6) ** 2 / 25.0
    assert np.allclose(d, want, rtol=1e-10)
    assert abs(want - 624.0) < 0.1   # (microK^2)


@pytest.mark.parametrize("ell", [2, 10, 40])
def test_sachs_wolfe_closed_form_vs_quadrature(ell):
    # check: Gradshteyn & Ryzhik 6.574.2 closed form vs direct quadrature of
    # int dk/k P_R(k) j_l(k chi)^2 with scipy.special.spherical_jn
    c = Cosmology()
    chi = c.chi_rec_mpc
    f = lambda x: x ** (spectra.N_S - 2.0) * special.spherical_jn(ell, x) ** 2  # noqa: E731
    edges = np.concatenate([[0.0], np.linspace(max(ell - 5, 0.5), ell + 400, 200)])
    val = sum(integrate.quad(f, a, b, limit=200)[0] for a, b in zip(edges[:-1], edges[1:]))
    val += 0.5 * (ell + 400) ** (spectra.N_S - 3.0) / (3.0 - spectra.N_S)   # <j_l^2> ~ 1/(2 x^2) tail
    want = 4 * math.pi / 25 * (c.t_cmb * 1e6) ** 2 * spectra.A_S * (spectra.K_PIVOT * chi) ** (1 - spectra.N_S) * val
    got = spectra.sachs_wolfe_cl(ell, c)[ell]
    assert got == pytest.approx(want, rel=2e-4)


def _chi2_check(cl_hat, cl, lmin=2):
    # (2l+1) C_hat / C_l is chi-square with 2l+1 degrees of freedom for a Gaussian sky
    # (cosmic variance; common practice)
    ell = np.arange(len(cl))[lmin:]
    nu = 2 * ell + 1
    ratio = cl_hat[lmin:] / cl[lmin:]
    total = np.sum(nu * ratio)
    z_mean = (total - nu.sum()) / math.sqrt(2 * nu.sum())
    z = (nu * ratio - nu) / np.sqrt(2 * nu)
    chi2 = np.sum(z**2)
    return z_mean, chi2, len(ell)


@pytest.mark.parametrize("terms,seed", [(("sw",), 11), (FULL, 12)])
def test_sample_spectrum_within_cosmic_variance(terms, seed):
    sky = isotropic_sky(Cosmology(), lmax=160, terms=terms, seed=seed)
    cl = sky.meta["cl"]
    z_mean, chi2, n = _chi2_check(hp.alm2cl(sky.alm), cl)
    assert abs(z_mean) < 4.0
    assert abs(chi2 - n) < 5.0 * math.sqrt(2 * n)   # sum of z^2 ~ chi-square with n dof
    # the draws respond to the spectrum: a wrong spectrum (x 1.1) fails the same check
    z_bad, _, _ = _chi2_check(hp.alm2cl(sky.alm), 1.1 * cl)
    assert abs(z_bad) > 8.0


def test_gaussian_alm_moments_and_nesting():
    # check: <|a_lm|^2> = C_l, a_l0 real, Re and Im each C_l/2 for m > 0 (common practice)
    lmax = 60
    cl = np.zeros(lmax + 1)
    cl[2:] = 1.0
    draws = np.array([gaussian_alm(cl, np.random.default_rng(s)) for s in range(200)])
    ell, m = hp.Alm.getlm(lmax)
    sel = (ell >= 2) & (m > 0)
    assert np.all(draws[:, m == 0].imag == 0)
    assert np.mean(draws[:, sel].real ** 2) == pytest.approx(0.5, rel=0.02)
    assert np.mean(draws[:, sel].imag ** 2) == pytest.approx(0.5, rel=0.02)
    assert np.mean(draws[:, (ell >= 2) & (m == 0)].real ** 2) == pytest.approx(1.0, rel=0.05)
    assert np.all(draws[:, ell < 2] == 0)
    # the same seed at larger lmax keeps the low multipoles (l-major draw order)
    a = isotropic_sky(Cosmology(), lmax=30, seed=5)
    b = isotropic_sky(Cosmology(), lmax=50, seed=5)
    ia, ib = hp.Alm.getidx(30, *hp.Alm.getlm(30)), hp.Alm.getidx(50, *hp.Alm.getlm(30))
    assert np.array_equal(a.alm[ia], b.alm[ib])
    c = isotropic_sky(Cosmology(), lmax=30, seed=6)
    assert not np.allclose(a.alm, c.alm)


def test_isotropic_terms_rejected():
    with pytest.raises(InputError, match=r"\[sky\] terms"):
        isotropic_sky(Cosmology(), lmax=10, terms=("sw", "doppler"), seed=0)
