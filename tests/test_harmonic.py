"""The harmonic view (topology.harmonic): the real a_lm basis, the covariance of a flat space's
a_lm against skies of the same space and against the isotropic spectrum, and the Kullback-Leibler
divergence (full sky and pixel space) against independent computations."""

import math

import healpy as hp
import numpy as np
import pytest
from scipy import stats

from topology import geometry as geo
from topology.cosmology import Cosmology
from topology.harmonic import alm_to_real, ells, n_coefficients, real_harmonics, real_to_alm, space_covariance
from topology.harmonic.kl import gaussian_kl, pixel_kl
from topology.harmonic.pixels import pixel_space
from topology.skies.flat import flat_sky
from topology.skies.instrument import galactic_mask
from topology.skies.spectra import sachs_wolfe_cl
from topology.spaces import build_space

COSMO = Cosmology()
OBSERVER = geo.Observer.make("flat", [0.13, -0.21, 0.07], geo.euler_zyz(0.3, 0.9, -0.4))


def _kl(space, observer=OBSERVER, lmax=6, **kw):
    cov = space_covariance(space, observer, COSMO, lmax=lmax, **kw)
    return gaussian_kl(cov.matrix, np.diag(cov.iso_diagonal))


# ---------------------------------------------------------------------------------------------
# the real basis
# ---------------------------------------------------------------------------------------------
def test_real_basis_matches_healpy_synthesis_and_round_trips():
    # check: healpy alm2map (Condon-Shortley phase, a_{l,-m} = (-1)^m a*_lm): T = sum r Y^R
    lmax, nside = 9, 8
    r = np.random.default_rng(3).normal(size=n_coefficients(lmax))
    alm = real_to_alm(r, lmax)
    vec = np.column_stack(hp.pix2vec(nside, np.arange(12 * nside * nside)))
    direct = real_harmonics(vec, lmax).T @ r
    assert np.abs(direct - hp.alm2map(alm, nside, lmax=lmax)).max() < 1e-10 * np.abs(direct).max()
    assert np.abs(alm_to_real(alm, lmax) - r).max() < 1e-14
    assert n_coefficients(lmax) == (lmax + 1) ** 2 - 4 and ells(lmax)[0] == 2 and ells(lmax)[-1] == lmax


# ---------------------------------------------------------------------------------------------
# the covariance
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("family,lengths,complete", [("E6", [0.9, 1.0, 1.1], False), ("E8", [1.3, 0.5], True)])
def test_covariance_matches_the_sample_covariance_of_skies(family, lengths, complete):
    # 200 skies of the space from the sky maker (skies.flat.flat_sky, eigenmode: the exact a_lm of
    # the kept modes, so no pixelisation enters; with its isotropic complement or without); each
    # entry of the sample covariance S of n zero-mean Gaussian vectors has variance
    # (C_ij^2 + C_ii C_jj) / n (Wishart; common practice)
    lmax, kchi, n = 6, 16.0, 200
    space = build_space({"family": family, "lengths": lengths})
    cov = space_covariance(space, OBSERVER, COSMO, lmax=lmax, kchi_max=kchi, complement=complete)
    R = np.array([alm_to_real(flat_sky(space, OBSERVER, COSMO, lmax=lmax, method="eigenmode", kchi_max=kchi,
                                       seed=seed, complete=complete).alm, lmax) for seed in range(n)])
    S = R.T @ R / n
    iu = np.triu_indices(cov.n)

    def z(C):
        d = np.diag(C)
        return ((S - C) / np.sqrt((C**2 + np.outer(d, d)) / n))[iu]

    z_top = z(cov.matrix)
    assert np.abs(z_top).max() < 5.0                      # 1035 entries
    assert 0.6 < np.mean(z_top**2) < 1.4
    z_iso = z(np.diag(cov.iso_diagonal))                  # the test can tell isotropy from the space
    assert np.mean(z_iso**2) > 3.0


def test_diagonal_tends_to_the_isotropic_spectrum_for_a_large_torus():
    # a torus of side 6 chi_rec: the lattice sum approaches the continuum integral of the same
    # tapered cut (skies.flat_cut.kept_cl). Tolerance: the quadrupole collects its power from the first few
    # lattice shells (j_2^2 peaks near k chi_rec ~ 2, shells 2 pi / 6 apart) and is still 1.1 %
    # off at side 6 (0.36 % at side 8, measured); l >= 3 are within 0.12 %; off-diagonal
    # correlations 0.8 %. A wrong volume, 2 pi or group factor would be off by O(1).
    lmax = 10
    space = build_space({"family": "E1", "lengths": [6.0, 6.0, 6.0]})
    cov = space_covariance(space, OBSERVER, COSMO, lmax=lmax, kchi_max=20.0, complement=False)
    d = np.diag(cov.matrix)
    rel = d / cov.iso_diagonal - 1
    ell = ells(lmax)
    assert np.abs(rel[ell == 2]).max() < 0.02
    assert np.abs(rel[ell >= 3]).max() < 3e-3
    corr = cov.matrix / np.sqrt(np.outer(d, d)) - np.eye(cov.n)
    assert np.abs(corr).max() < 0.02
    # with the complement the reference is the closed-form SW spectrum itself
    full = space_covariance(space, OBSERVER, COSMO, lmax=lmax, kchi_max=20.0)
    assert np.abs(np.diag(full.matrix) / sachs_wolfe_cl(lmax, COSMO)[ell] - 1)[ell >= 3].max() < 3e-3


# ---------------------------------------------------------------------------------------------
# the divergence
# ---------------------------------------------------------------------------------------------
def test_gaussian_kl_against_closed_form_and_monte_carlo():
    # 1-D closed form: D(N(0, a) || N(0, b)) = (a/b - 1 - ln(a/b)) / 2 (common practice)
    assert gaussian_kl([[3.0]], [[2.0]]).kl_nats == pytest.approx(0.5 * (1.5 - 1 - math.log(1.5)), rel=1e-12)
    # a small torus at lmax 3 (N = 12): D = E_p[log p - log q], by scipy.stats Monte Carlo
    space = build_space({"family": "E3", "lengths": [1.2, 0.8]})
    cov = space_covariance(space, OBSERVER, COSMO, lmax=3)
    d = gaussian_kl(cov.matrix, np.diag(cov.iso_diagonal))
    p = stats.multivariate_normal(np.zeros(cov.n), cov.matrix)
    q = stats.multivariate_normal(np.zeros(cov.n), np.diag(cov.iso_diagonal))
    x = p.rvs(size=20000, random_state=np.random.default_rng(5))
    diff = p.logpdf(x) - q.logpdf(x)
    assert 1.0 < d.kl_nats < 50.0
    assert abs(diff.mean() - d.kl_nats) < 4 * diff.std() / math.sqrt(len(diff))


def test_pure_cut_of_a_small_torus_is_singular_and_reported_infinite():
    # 0.4 chi_rec cube, cut 12: 2 x 7 wave vectors span at most 14 < 21 directions at lmax 4
    space = build_space({"family": "E1", "lengths": [0.4, 0.4, 0.4]})
    d = _kl(space, lmax=4, kchi_max=12.0, complement=False)
    assert math.isinf(d.kl_nats) and not d.finite and d.rank <= 14 < d.n == 21
    assert _kl(space, lmax=4, kchi_max=12.0).finite      # the complement's isotropic power fills it


def test_pixel_form_equals_the_dense_pixel_space_divergence():
    # Woodbury + Sylvester against the n_obs x n_obs covariances built from healpy's alm2map
    nside, lmax, noise = 4, 6, 8.0
    mask = galactic_mask(nside, 20.0)
    space = build_space({"family": "E2", "lengths": [1.0, 1.2, 0.6]})
    cov = space_covariance(space, OBSERVER, COSMO, lmax=lmax)
    px = pixel_space(nside, lmax, noise_uk=noise, mask=mask, fwhm_deg=5.0)
    d = pixel_kl(cov.matrix, cov.iso_diagonal, px)
    keep = mask > 0
    win = hp.gauss_beam(math.radians(5.0), lmax=lmax)
    from topology.skies.instrument import pixel_window

    win = win * pixel_window(nside, lmax)
    Y = np.array([hp.alm2map(hp.almxfl(real_to_alm(e, lmax), win), nside, lmax=lmax)[keep]
                  for e in np.eye(cov.n)]).T                          # (n_obs, N)
    Sp = Y @ cov.matrix @ Y.T + noise**2 * np.eye(keep.sum())
    Sq = (Y * cov.iso_diagonal) @ Y.T + noise**2 * np.eye(keep.sum())
    n = keep.sum()
    ref = 0.5 * (np.trace(np.linalg.solve(Sq, Sp)) - n + np.linalg.slogdet(Sq)[1] - np.linalg.slogdet(Sp)[1])
    assert d.kl_nats == pytest.approx(ref, rel=1e-8) and d.n == n
    # little noise on the full sky: the pixel form tends to the harmonic one (Y has full column rank)
    px0 = pixel_space(nside, lmax, noise_uk=1e-3, pixwin=False)
    full = gaussian_kl(cov.matrix, np.diag(cov.iso_diagonal)).kl_nats
    assert pixel_kl(cov.matrix, cov.iso_diagonal, px0).kl_nats == pytest.approx(full, rel=1e-4)
    assert 0 < d.kl_nats < full                                       # a mask and noise lose information


def test_divergence_of_a_homogeneous_space_does_not_depend_on_the_observer():
    # E1 is homogeneous and the real basis is orthogonal under rotations: D must not change;
    # E2 is not homogeneous: moving off the rotation axis changes D
    e1 = build_space({"family": "E1", "lengths": [1.1, 1.3, 0.9]})
    other = geo.Observer.make("flat", [0.5, 0.1, -0.3], geo.euler_zyz(-1.0, 0.4, 2.0))
    a, b = _kl(e1).kl_nats, _kl(e1, other).kl_nats
    assert a == pytest.approx(b, rel=1e-9)
    e2 = build_space({"family": "E2", "lengths": [1.1, 1.3, 0.9]})
    on_axis = geo.Observer.make("flat", [0.0, 0.0, 0.0])
    off_axis = geo.Observer.make("flat", [0.4, 0.3, 0.0])
    assert abs(_kl(e2, on_axis).kl_nats / _kl(e2, off_axis).kl_nats - 1) > 0.05


def test_divergence_behaves_as_planck_2015_reports():
    # check: Planck 2015 XVIII (A&A 594, A18), Fig. 1 and its caption: the divergence of a torus
    # drops rapidly once the fundamental domain exceeds the last-scattering diameter, and the
    # cubic torus's values are about three times the slab's. Measured here at lmax 6 (l = 2..6):
    # slab = E16 (the skies' compact cover, period 6 chi_rec).
    def kl(spec):
        return _kl(build_space(spec), geo.Observer.make("flat", [0.0, 0.0, 0.0])).kl_nats

    cube = {L: kl({"family": "E1", "lengths": [L, L, L]}) for L in (1.6, 2.0, 2.6)}
    slab = {L: kl({"family": "E16", "lengths": [L]}) for L in (1.6, 2.0)}
    assert cube[1.6] / cube[2.6] > 30                     # steep fall past 2 chi_rec
    for L in (1.6, 2.0):
        assert 2.0 < cube[L] / slab[L] < 4.0
