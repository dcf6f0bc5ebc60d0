"""The low-l likelihood of a map (topology.harmonic.likelihood, pixels, rotation): the ratio
against a dense pixel-space Gaussian, its mean against the KL divergence, the rotation of the
covariance, the calibrated false-exclusion rate of the bound, and `topology harmonic --map`."""

import json
import math

import healpy as hp
import numpy as np
import pytest
from scipy import stats

from topology import geometry as geo
from topology.cli import main
from topology.cosmology import Cosmology
from topology.harmonic import real_to_alm, space_covariance
from topology.harmonic.kl import pixel_kl
from topology.harmonic.likelihood import log_ratio, profile, simulate, size_bound
from topology.harmonic.pixels import pixel_space
from topology.harmonic.rotation import orientation_grid, real_rotation
from topology.skies.instrument import galactic_mask
from topology.skies.legendre import legendre_table
from topology.skies.spectra import sachs_wolfe_cl
from topology.spaces import build_space

COSMO = Cosmology()
OBS = geo.Observer.make("flat", [0.1, 0.2, 0.0])


def test_rotated_observer_covariance_is_the_rotated_covariance():
    Q = geo.euler_zyz(0.7, 1.1, -0.4)
    space = build_space({"family": "E2", "lengths": [1.1, 1.3, 0.7]})
    C = space_covariance(space, OBS, COSMO, lmax=6).matrix
    turned = geo.Observer.make("flat", [0.1, 0.2, 0.0], Q)
    Cq = space_covariance(space, turned, COSMO, lmax=6).matrix
    D = real_rotation(Q, 6)
    assert np.abs(D @ C @ D.T - Cq).max() < 1e-12 * np.abs(Cq).max()
    assert np.abs(D @ D.T - np.eye(len(D))).max() < 1e-12


def test_log_ratio_equals_a_dense_pixel_space_gaussian():
    # Sigma = Y W C W Y^T + N + (isotropic l = 5..11, by the addition theorem) + V T T^T with a
    # monopole and dipole variance V = 1e7 microK^2 (the marginalisation is its V -> infinity limit)
    nside, lmax, noise = 4, 4, 5.0
    mask = galactic_mask(nside, 20.0)
    keep = mask > 0
    cl = sachs_wolfe_cl(3 * nside - 1, COSMO)
    px = pixel_space(nside, lmax, noise_uk=noise, mask=mask, dipole=True, extra_cl=cl, fwhm_deg=8.0, pixwin=False)
    cov = space_covariance(build_space({"family": "E1", "lengths": [1.0, 1.0, 1.0]}), OBS, COSMO, lmax=lmax)
    win = hp.gauss_beam(math.radians(8.0), lmax=3 * nside - 1)
    Y = np.array([hp.alm2map(hp.almxfl(real_to_alm(e, lmax), win[:lmax + 1]), nside, lmax=lmax)[keep]
                  for e in np.eye(cov.n)]).T
    v = np.column_stack(hp.pix2vec(nside, np.flatnonzero(keep)))
    ell = np.arange(lmax + 1, 3 * nside)
    P = legendre_table(np.clip(v @ v.T, -1, 1).ravel(), 3 * nside - 1)[lmax + 1:]
    high = (((2 * ell + 1) / (4 * np.pi) * win[ell] ** 2 * cl[ell]) @ P).reshape(len(v), len(v))
    T = np.column_stack([np.ones(len(v)), v])
    base = high + noise**2 * np.eye(len(v)) + 1e7 * T @ T.T
    rng = np.random.default_rng(2)
    m = np.zeros(12 * nside * nside)
    L = np.linalg.cholesky(Y @ cov.matrix @ Y.T + base - 1e7 * T @ T.T)
    m[keep] = L @ rng.standard_normal(len(v)) + T @ np.array([40.0, 5.0, -8.0, 3.0])

    def logpdf(C):   # the dense Gaussian density up to the shared constant
        S = Y @ C @ Y.T + base
        return -0.5 * (m[keep] @ np.linalg.solve(S, m[keep]) + np.linalg.slogdet(S)[1])

    ref = logpdf(cov.matrix) - logpdf(np.diag(cov.iso_diagonal))
    got = float(log_ratio(cov.matrix, cov.iso_diagonal, px, px.weigh(m))[0])
    assert got == pytest.approx(ref, abs=1e-4 * max(1.0, abs(ref)))


def test_mean_log_ratio_over_maps_of_the_space_is_the_kl_divergence():
    # E_p[ln p - ln q] = D(p || q): the likelihood and the divergence agree (Monte Carlo, 4 sigma)
    nside, lmax = 4, 5
    px = pixel_space(nside, lmax, noise_uk=5.0, mask=galactic_mask(nside, 20.0), dipole=True)
    cov = space_covariance(build_space({"family": "E1", "lengths": [1.2, 1.2, 1.2]}), OBS, COSMO, lmax=lmax)
    B = simulate(cov.matrix, px, 3000, np.random.default_rng(1), random_orientation_each=False)
    d = log_ratio(cov.matrix, cov.iso_diagonal, px, B)
    kl = pixel_kl(cov.matrix, cov.iso_diagonal, px).kl_nats
    assert abs(d.mean() - kl) < 4 * d.std() / math.sqrt(len(d))


def test_bound_has_its_nominal_false_exclusion_rate():
    # maps of the space at the tested scale, at orientations uniform on SO(3), are excluded with
    # the probability 1 - level: the count of 200 independent maps below the threshold lies in the
    # 99.9 % interval of the beta-binomial law of a threshold at the k-th of n_cal draws
    # (order statistics of exchangeable draws; common practice); and isotropic maps exclude a
    # small space almost always
    nside, lmax, level, n_cal, n_test = 4, 4, 0.9, 200, 200
    px = pixel_space(nside, lmax, noise_uk=5.0, mask=galactic_mask(nside, 20.0), dipole=True)
    rots = orientation_grid(1, 4)
    covs = [space_covariance(build_space({"family": "E1", "lengths": [L] * 3}), OBS, COSMO, lmax=lmax)
            for L in (0.5, 1.2)]
    res = size_bound(np.zeros(covs[0].n), [0.5, 1.2], [c.matrix for c in covs], covs[0].iso_diagonal, px, rots,
                     level=level, n_cal=n_cal, seed=7)
    assert res.iso_excluded[0] > 0.9
    t = profile(covs[1].matrix, covs[1].iso_diagonal, px,
                simulate(covs[1].matrix, px, n_test, np.random.default_rng(99)), rots)
    count = int(np.sum(t < res.threshold[1]))
    k = (1 - level) * (n_cal + 1)
    lo, hi = stats.betabinom(n_test, k, n_cal + 1 - k).interval(0.999)
    assert lo <= count <= hi, (count, lo, hi)


def test_cli_map_profile_and_bad_map(tmp_path, capsys):
    nside = 4
    space = build_space({"family": "E1", "lengths": [1.0, 1.0, 1.0]})
    cov = space_covariance(space, OBS, COSMO, lmax=6)
    r = np.linalg.cholesky(cov.matrix) @ np.random.default_rng(3).standard_normal(cov.n)
    m = hp.alm2map(real_to_alm(r, 6), nside, lmax=6) + 5.0 * np.random.default_rng(4).standard_normal(12 * nside**2)
    path = tmp_path / "m.fits"
    hp.write_map(str(path), m, dtype=np.float64)
    cfg = tmp_path / "h.toml"
    cfg.write_text('[space]\nfamily = "E1"\nlengths = [1.0, 1.0, 1.0]\n[observer]\nposition = [0.1, 0.2, 0.0]\n'
                   '[harmonic]\nlmax = 4\nnside = 4\nnoise_uk = 5.0\npixwin = false\nscales = [0.5, 1.0]\n'
                   'n_cal = 20\nn_psi = 2\n')
    assert main(["harmonic", str(cfg), "--map", str(path), "--json"]) == 0
    like = json.loads(capsys.readouterr().out)["likelihood"]
    assert [r["scale"] for r in like["rows"]] == [0.5, 1.0] and like["n_cal"] == 20 and like["n_orientations"] == 24
    assert all(np.isfinite(r["log_ratio"]) and np.isfinite(r["threshold"]) for r in like["rows"])
    hp.write_map(str(tmp_path / "m8.fits"), np.zeros(768) + 1.0 * np.arange(768), dtype=np.float64)
    assert main(["harmonic", str(cfg), "--map", str(tmp_path / "m8.fits")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "m8.fits" in err[0] and "N_side 8" in err[0]
    assert main(["harmonic", str(cfg), "--mask", str(path)]) == 2
    assert "--mask" in capsys.readouterr().err
