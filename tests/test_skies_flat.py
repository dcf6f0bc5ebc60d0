"""Skies of flat multiply connected spaces (topology.skies.flat and its flat_modes,
flat_eigenmode, flat_grid): matched circles, spectra, grid against eigenmode method,
determinism and bad input."""

import healpy as hp
import numpy as np
import pytest
import scipy.fft
from scipy.signal import fftconvolve
from scipy.special import spherical_jn

from topology import geometry as geo
from topology.circles import circle_points, predict_circles
from topology.cosmology import Cosmology
from topology.errors import InputError
from topology.skies import flat_eigenmode, flat_grid, flat_modes
from topology.skies.flat import flat_sky
from topology.skies.spectra import sachs_wolfe_cl
from topology.spaces import build_space

COSMO = Cosmology()
OBSERVER = geo.Observer.make("flat", [0.13, -0.21, 0.07], geo.euler_zyz(0.3, 0.9, -0.4))


def _interp(m, vecs):
    theta, phi = hp.vec2ang(np.asarray(vecs).reshape(-1, 3))
    return hp.get_interp_val(m, theta, phi)


def _pearson(a, b):
    return float(np.corrcoef(a, b)[0, 1])


# ---------------------------------------------------------------------------------------------
# the field itself
# ---------------------------------------------------------------------------------------------
def test_plane_wave_alm_reproduces_the_field_on_the_sphere():
    # check: Rayleigh plane-wave expansion e^{ik.x} = 4 pi sum i^l j_l(kr) Y*_lm(k) Y_lm(x)
    # (common practice); healpy's alm2map of our a_lm equals the direct sum over waves.
    rng = np.random.default_rng(1)
    k = rng.normal(size=(6, 3)) * 4.0
    coef = rng.normal(size=6) + 1j * rng.normal(size=6)
    alm = flat_eigenmode.plane_wave_alm(k, coef, 1.0, 40)
    m = hp.alm2map(alm, 32, lmax=40)
    v = np.column_stack(hp.pix2vec(32, np.arange(hp.nside2npix(32))))
    direct = 2.0 * np.real(np.exp(1j * (v @ k.T)) @ coef)
    assert np.abs(m - direct).max() < 1e-9 * np.abs(direct).max()


@pytest.mark.parametrize("family,lengths", [
    ("E1", [1.1, 1.3, 0.9]), ("E2", [1.2, 1.4, 0.7]), ("E3", [1.2, 0.5]), ("E4", [1.1, 0.5]),
    ("E5", [1.2, 0.3]), ("E6", [0.7, 0.8, 0.6]), ("E7", [1.1, 1.2, 0.6]), ("E8", [1.3, 0.5]),
    ("E9", [1.1, 1.2, 0.6]), ("E10", [1.1, 1.2, 0.6])])
def test_field_is_invariant_under_every_holonomy(family, lengths):
    # common practice: a field on E^3/Gamma is a Gamma-invariant field on E^3, f(g x) = f(x)
    space = build_space({"family": family, "lengths": lengths})
    _, k, c = flat_modes.invariant_coefficients(space, COSMO, 7, 15.0)
    x = np.random.default_rng(2).normal(size=(30, 3))

    def f(p):
        return 2.0 * np.real(np.exp(1j * (p @ k.T)) @ c)

    scale = np.abs(f(x)).max()
    for R, t in space.cosets:
        for lam in space.lattice:
            assert np.abs(f(x @ R.T + t + lam) - f(x)).max() < 1e-10 * scale


def test_twisted_phases_remove_the_odd_axial_modes_of_E2():
    # check (from memory): Riazuelo et al. 2004, PRD 69, 103518 (flat-space eigenmodes): in E2
    # the modes along the screw axis k = (0, 0, 2 pi n / (2 L3)) survive only for even n.
    space = build_space({"family": "E2", "lengths": [1.2, 1.4, 0.7]})
    n, _, c = flat_modes.invariant_coefficients(space, COSMO, 3, 40.0)
    axial = (n[:, 0] == 0) & (n[:, 1] == 0)
    assert axial.sum() >= 8
    odd = axial & (n[:, 2] % 2 == 1)
    even = axial & (n[:, 2] % 2 == 0)
    assert np.abs(c[odd]).max() < 1e-12 * np.abs(c[even]).max()
    assert np.all(np.abs(c[even]) > 0)


@pytest.mark.parametrize("lengths,angles", [
    ([1.6, 1.4, 1.2], [90.0, 90.0, 90.0]),    # sigma by the float32 power law
    ([1.5, 1.5, 1.5], [90.0, 90.0, 90.0]),    # cubic: sigma from the table over |n|^2
    ([1.0, 1.0, 2.0], [90.0, 90.0, 90.0]),    # |k|^2 = g (4 n1^2 + 4 n2^2 + n3^2): table
    ([1.3, 1.4, 1.5], [80.0, 95.0, 70.0])])   # skew cell: cross terms, power law
def test_torus_fast_path_equals_the_general_mode_list(lengths, angles):
    # the dense E1 grid spectrum (block by block, sigma from a table or a float32 power) holds
    # the same c_n as the mode list of the eigenmode method (internal consistency, float32)
    space = build_space({"family": "E1", "lengths": lengths, "angles": angles})
    kc = 70.0    # index bounds 11-19: several blocks of 16 per axis, on both sides of n = 0
    shape = flat_grid.grid_shape(space, kc, 1.2)
    dense = flat_grid.dense_torus_spectrum(space, COSMO, 5, kc, shape)
    ref = flat_grid.mode_list_spectrum(space, COSMO, 5, kc, shape)
    assert np.count_nonzero(ref) > 5000
    assert np.array_equal(dense != 0, ref != 0)
    assert np.abs(dense - ref).max() < 1e-5 * np.abs(ref).max()


def test_band_limited_fft_equals_the_full_inverse_fft():
    # the pruned in-place transform skips only rows and planes that are zero
    space = build_space({"family": "E6", "lengths": [0.8, 0.9, 0.7]})
    shape = flat_grid.grid_shape(space, 25.0, 1.2)
    spec = flat_grid.mode_list_spectrum(space, COSMO, 3, 25.0, shape)
    ref = scipy.fft.irfftn(spec, s=shape, norm="forward")
    got = flat_grid.band_limited_irfft(spec.copy(), shape, flat_modes.index_bounds(space.lattice, 25.0))
    assert np.abs(got - ref).max() < 1e-5 * np.abs(ref).max()


# ---------------------------------------------------------------------------------------------
# matched circles
# ---------------------------------------------------------------------------------------------
CIRCLE_SPACES = [
    ("E1", [1.6, 1.6, 1.6]),
    ("E2", [1.5, 1.7, 0.8]),
    ("E3", [1.5, 0.5]),
    ("E6", [0.8, 0.9, 0.7]),
    ("E7", [1.5, 1.6, 0.8]),   # non-orientable (glide)
    ("E10", [1.5, 1.7, 0.75]),  # non-orientable (two glides)
]


def sw_circles_match(space, label):
    """The eigenmode SW sky of ``space`` seen by OBSERVER (l <= 40, N_side 64): correlation >= 0.99
    on both circles of every predicted pair, and no match between random circles of the same
    radius. Returns the sky."""
    pairs = predict_circles(space, OBSERVER, 1.0)
    assert pairs
    sky = flat_sky(space, OBSERVER, COSMO, lmax=40, nside=64, method="eigenmode", seed=11, kchi_max=24.0,
                   complete=False)
    m = hp.alm2map(sky.alm, 64, lmax=40)
    rng = np.random.default_rng(4)
    phi = np.linspace(0.0, 2.0 * np.pi, 256, endpoint=False)
    random_corr = []
    for p in pairs:
        ta = _interp(m, circle_points(p.center_a, p.radius, phi))
        tb = _interp(m, circle_points(p.center_b, p.radius, p.orientation * phi + p.twist))
        assert _pearson(ta, tb) >= 0.99, (label, np.degrees(p.radius))
        for _ in range(5):
            c = rng.normal(size=3)
            c /= np.linalg.norm(c)
            tr = _interp(m, circle_points(c, p.radius, phi + rng.uniform(0, 2 * np.pi)))
            random_corr.append(abs(_pearson(ta, tr)))
    random_corr = np.array(random_corr)
    assert np.median(random_corr) < 0.5
    assert random_corr.max() < 0.95
    return sky


@pytest.mark.parametrize("family,lengths", CIRCLE_SPACES)
def test_sw_sky_circles_match(family, lengths):
    # check: Cornish, Spergel & Starkman 1998: the SW temperature matches exactly on the two
    # circles of every pair, T_A(phi) = T_B(s phi + tau) -> correlation >= 0.99 (common
    # practice); random circles of the same radius do not match.
    sw_circles_match(build_space({"family": family, "lengths": lengths}), family)


# ---------------------------------------------------------------------------------------------
# spectra
# ---------------------------------------------------------------------------------------------
def _cl(alm, lmax):
    return hp.alm2cl(alm, lmax=lmax)


def test_large_torus_reproduces_the_isotropic_sw_spectrum():
    # check: a torus much larger than the LSS (side 6 chi_rec) has, on average, the isotropic
    # SW spectrum l(l+1)C_l/2pi = A_s T^2/25 (Sachs & Wolfe 1967; spectra.sachs_wolfe_cl);
    # mean over 3 skies of l = 2..10 within 3 sigma of cosmic variance sqrt(2/((2l+1) n)).
    space = build_space({"family": "E1", "lengths": [6.0, 6.0, 6.0]})
    obs = geo.Observer.make("flat", [0.3, 1.1, -2.0], geo.euler_zyz(0.2, 0.5, 0.1))
    lmax = 10
    iso = sachs_wolfe_cl(lmax, COSMO)
    cls = np.array([_cl(flat_sky(space, obs, COSMO, lmax=lmax, method="eigenmode", seed=s, kchi_max=40.0).alm,
                        lmax) for s in range(3)])
    ell = np.arange(2, lmax + 1)
    ratio = cls.mean(axis=0)[2:] / iso[2:]
    sigma = np.sqrt(2.0 / ((2 * ell + 1) * len(cls)))
    assert np.all(np.abs(ratio - 1.0) < 3.0 * sigma)
    # the band power l = 2..10 combined (relative cosmic variance ~8% for 3 skies)
    w = 2 * ell + 1
    band = np.sum(w * cls.mean(axis=0)[2:]) / np.sum(w * iso[2:])
    assert band == pytest.approx(1.0, abs=0.25)


def test_expected_torus_spectrum_tends_to_the_isotropic_one():
    # check: the mode sum E[C_l] = 4 pi sum_q sigma_q^2 j_l(q chi)^2 over the torus modes tends
    # to (4 pi / 25) T^2 int dk/k P_R j_l^2 (sachs_wolfe_cl, closed form of Gradshteyn &
    # Ryzhik 6.574.2) for a big torus: 1% at l <= 6, side 6 chi_rec, k chi <= 80.
    space = build_space({"family": "E1", "lengths": [6.0, 6.0, 6.0]})
    _, k, _ = flat_modes.half_ball_modes(space, 80.0)
    kn = np.linalg.norm(k, axis=1)
    sig2 = flat_modes.mode_sigma(kn, COSMO, space.covering_cell_volume) ** 2
    iso = sachs_wolfe_cl(6, COSMO)
    for ell in range(2, 7):
        expect = 4.0 * np.pi * 2.0 * np.sum(sig2 * spherical_jn(ell, kn) ** 2)
        assert expect / iso[ell] == pytest.approx(1.0, abs=0.01)


def test_small_torus_suppresses_the_quadrupole():
    # check (from memory): Stevens, Scott & Silk 1993, toroidal universes: a torus smaller than
    # the LSS lacks the long wavelengths, C_2 falls far below the isotropic SW value. Side
    # 0.9 chi_rec: mean C_2 of 8 skies below 40% of isotropic, while l = 5..8 keep their power.
    space = build_space({"family": "E1", "lengths": [0.9, 0.9, 0.9]})
    lmax = 8
    iso = sachs_wolfe_cl(lmax, COSMO)
    cls = np.array([_cl(flat_sky(space, OBSERVER, COSMO, lmax=lmax, method="eigenmode", seed=s,
                                 kchi_max=30.0).alm, lmax) for s in range(8)])
    mean = cls.mean(axis=0)
    assert mean[2] / iso[2] < 0.4
    assert np.sum(mean[5:9] * np.arange(11, 18, 2)) / np.sum(iso[5:9] * np.arange(11, 18, 2)) > 0.6


# ---------------------------------------------------------------------------------------------
# grid method
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("family,lengths", [("E1", [1.6, 1.6, 1.6]), ("E6", [0.8, 0.9, 0.7]),
                                            ("E8", [1.3, 0.5])])
def test_grid_agrees_with_eigenmode(family, lengths):
    # same seed -> same amplitudes -> the two methods give the same sky (issue requirement
    # corr > 0.99; the B-spline NUFFT error at the default oversampling is ~1%, Beylkin 1995)
    space = build_space({"family": family, "lengths": lengths})
    eig = flat_sky(space, OBSERVER, COSMO, lmax=48, nside=32, method="eigenmode", seed=9, kchi_max=30.0,
                   complete=False)
    grd = flat_sky(space, OBSERVER, COSMO, lmax=48, nside=32, method="grid", seed=9, kchi_max=30.0,
                   complete=False)
    me = hp.alm2map(eig.alm, 32, lmax=48)
    assert _pearson(me, grd.map) > 0.999
    assert np.std(grd.map - me) < 0.03 * np.std(me)


def test_grid_converges_with_oversampling():
    # check: Beylkin 1995 (B-spline unequally spaced FFT): the aliasing error of cubic
    # B-spline interpolation falls as (1 / (2 sigma - 1))^4 with the oversampling sigma;
    # reference: the exact eigenmode sky of the same modes.
    space = build_space({"family": "E1", "lengths": [1.6, 1.5, 1.7]})
    eig = flat_sky(space, OBSERVER, COSMO, lmax=48, nside=32, method="eigenmode", seed=2, kchi_max=30.0,
                   complete=False)
    me = hp.alm2map(eig.alm, 32, lmax=48)
    errs = []
    for ov in (1.1, 1.5, 2.0, 3.0):
        g = flat_sky(space, OBSERVER, COSMO, lmax=48, nside=32, method="grid", seed=2, kchi_max=30.0, oversample=ov,
                     complete=False)
        errs.append(np.std(g.map - me) / np.std(me))
    assert all(a > b for a, b in zip(errs, errs[1:]))
    assert errs[0] < 0.03 and errs[2] < 2e-3 and errs[3] < 5e-4


def test_grid_size_follows_kchi_max():
    # N_d = fast_size(2 oversample n_max_d + 2) with n_max_d = kchi_max |a_d| / 2 pi
    space = build_space({"family": "E1", "lengths": [1.6, 1.6, 1.6]})
    shape = flat_grid.grid_shape(space, 512.0, 1.2)
    nmax = int(512 * 1.6 / (2 * np.pi))
    assert all(2.4 * nmax + 2 <= n < 1.25 * (2.4 * nmax + 2) for n in shape)
    assert flat_grid.fast_size(301) == 320 and flat_grid.fast_size(257) == 270


# ---------------------------------------------------------------------------------------------
# determinism and amplitudes shared between cut-offs
# ---------------------------------------------------------------------------------------------
def test_same_seed_same_alm_and_shared_modes():
    space = build_space({"family": "E3", "lengths": [1.4, 0.6]})
    a = flat_sky(space, OBSERVER, COSMO, lmax=20, method="eigenmode", seed=5, kchi_max=20.0)
    b = flat_sky(space, OBSERVER, COSMO, lmax=20, method="eigenmode", seed=5, kchi_max=20.0)
    c = flat_sky(space, OBSERVER, COSMO, lmax=20, method="eigenmode", seed=6, kchi_max=20.0)
    assert np.array_equal(a.alm, b.alm)
    assert not np.allclose(a.alm, c.alm)
    # a larger cut-off keeps every amplitude of the smaller one
    n1, _, c1 = flat_modes.invariant_coefficients(space, COSMO, 5, 12.0)
    n2, _, c2 = flat_modes.invariant_coefficients(space, COSMO, 5, 25.0)
    lookup = {tuple(v): i for i, v in enumerate(n2)}
    idx = np.array([lookup[tuple(v)] for v in n1])
    assert np.array_equal(c1, c2[idx])


def test_grid_is_deterministic():
    space = build_space({"family": "E2", "lengths": [1.5, 1.7, 0.8]})
    a = flat_sky(space, OBSERVER, COSMO, lmax=24, nside=16, method="grid", seed=1, kchi_max=20.0)
    b = flat_sky(space, OBSERVER, COSMO, lmax=24, nside=16, method="grid", seed=1, kchi_max=20.0)
    assert np.array_equal(a.map, b.map)
    assert a.kind == "map" and a.nside == 16 and a.meta["method"] == "grid"


# ---------------------------------------------------------------------------------------------
# bad input
# ---------------------------------------------------------------------------------------------
def test_bad_input_raises_input_error():
    e1 = build_space({"family": "E1", "lengths": [1.6, 1.6, 1.6]})
    lens = build_space({"family": "lens", "p": 8, "q": 3})
    with pytest.raises(InputError, match="flat space"):
        flat_sky(lens, OBSERVER, COSMO, lmax=10, method="eigenmode", seed=0)
    with pytest.raises(InputError, match="eigenmode"):
        flat_sky(e1, OBSERVER, COSMO, lmax=1500, nside=1024, method="eigenmode", seed=0)
    with pytest.raises(InputError, match="terms"):
        flat_sky(e1, OBSERVER, COSMO, lmax=10, method="eigenmode", terms=("sw", "doppler"), seed=0)
    with pytest.raises(InputError, match="terms"):
        flat_sky(e1, OBSERVER, COSMO, lmax=10, method="eigenmode", terms=("doppler",), seed=0)
    with pytest.raises(InputError, match="method"):
        flat_sky(e1, OBSERVER, COSMO, lmax=10, method="fast", seed=0)
    with pytest.raises(InputError, match="nside"):
        flat_sky(e1, OBSERVER, COSMO, lmax=10, nside=30, method="grid", seed=0)
    with pytest.raises(InputError, match="3 nside"):
        flat_sky(e1, OBSERVER, COSMO, lmax=100, nside=16, method="grid", seed=0)
    with pytest.raises(InputError, match="nside"):
        flat_sky(e1, OBSERVER, COSMO, lmax=10, method="grid", seed=0)


# ---------------------------------------------------------------------------------------------
# SW + Doppler + ISW from CAMB's transfer (eigenmode method)
# ---------------------------------------------------------------------------------------------
FULL = ("sw", "doppler", "isw")


def test_camb_transfer_torus_mode_sum_matches_camb_cl():
    # check: CAMB (camb_cl, unlensed TT): C_l = 4 pi int dk/k P_R Delta_l^2, so the mode sum
    # 4 pi sum_q sigma_q^2 (5 Delta_l(q))^2 of a cubic torus of side 6 chi_rec (k chi <= 300)
    # reproduces CAMB's spectrum at l = 2..10 to 1.5% (CAMB's own C_l and its transfer
    # integral differ by ~0.5%). Shells |n|^2 = s of the cubic lattice with their counts.
    from topology.skies.spectra import camb_cl
    from topology.skies.transfer import temperature_transfer

    lmax, side, kmax = 10, 6.0, 300.0
    nm = int(kmax * side / (2 * np.pi))
    c1 = np.bincount(np.arange(-nm, nm + 1) ** 2).astype(float)
    c2 = np.rint(fftconvolve(c1, c1))[: len(c1)]
    counts = np.rint(fftconvolve(c2, c1))[1: len(c1)]
    s = np.arange(1, len(counts) + 1)
    k = 2 * np.pi * np.sqrt(s) / side
    sel = (k <= kmax) & (counts > 0)
    k, counts = k[sel], counts[sel]
    sig2 = flat_modes.mode_sigma(k, COSMO, side**3) ** 2
    delta = temperature_transfer(COSMO, lmax)(np.arange(lmax + 1), k / COSMO.chi_rec_mpc)
    expect = 4 * np.pi * ((5 * delta) ** 2 @ (counts * sig2))
    ref = camb_cl(COSMO, lmax)
    assert np.all(np.abs(expect[2:] / ref[2:] - 1.0) < 0.015)


def test_full_terms_sky_spectrum_and_degraded_circles():
    # check: a big torus (side 6 chi_rec) with CAMB's transfer has on average the mode-sum
    # spectrum (cosmic variance, 3 skies, l = 2..8); the Doppler term (direction dependent)
    # and the ISW term (line of sight) do not match on circles, so the circle correlation of
    # the cubic torus of side 1.6 drops below the SW value (from memory: Cornish, Spergel &
    # Starkman 1998 note that Doppler and ISW dilute the match) but stays well above random.
    from topology.skies.transfer import temperature_transfer

    space = build_space({"family": "E1", "lengths": [6.0, 6.0, 6.0]})
    obs = geo.Observer.make("flat", [0.3, 1.1, -2.0])
    lmax = 8
    cls = np.array([_cl(flat_sky(space, obs, COSMO, lmax=lmax, method="eigenmode", seed=s, kchi_max=40.0,
                                 terms=FULL, complete=False).alm, lmax) for s in range(3)])
    _, k, _ = flat_modes.half_ball_modes(space, 40.0)
    kn = np.linalg.norm(k, axis=1)
    sig2 = flat_modes.mode_sigma(kn, COSMO, space.covering_cell_volume) ** 2
    delta = temperature_transfer(COSMO, lmax)(np.arange(lmax + 1), kn / COSMO.chi_rec_mpc)
    expect = 4 * np.pi * 2 * ((5 * delta) ** 2 @ sig2)
    ell = np.arange(2, lmax + 1)
    sigma = np.sqrt(2.0 / ((2 * ell + 1) * len(cls)))
    assert np.all(np.abs(cls.mean(axis=0)[2:] / expect[2:] - 1) < 3 * sigma)
    assert np.all(cls[:, :2] < 1e-20)  # no monopole or dipole from the transfer

    torus = build_space({"family": "E1", "lengths": [1.6, 1.6, 1.6]})
    pairs = predict_circles(torus, OBSERVER, 1.0)
    phi = np.linspace(0.0, 2.0 * np.pi, 256, endpoint=False)
    corr = {}
    for terms in (("sw",), FULL):
        sky = flat_sky(torus, OBSERVER, COSMO, lmax=60, nside=64, method="eigenmode", seed=11, kchi_max=40.0,
                       terms=terms, complete=False)
        m = hp.alm2map(sky.alm, 64, lmax=60)
        corr[terms] = [_pearson(_interp(m, circle_points(p.center_a, p.radius, phi)),
                                _interp(m, circle_points(p.center_b, p.radius, p.orientation * phi + p.twist)))
                       for p in pairs]
    assert min(corr[("sw",)]) >= 0.99
    assert 0.3 < np.mean(corr[FULL]) < 0.95


def test_full_terms_auto_method():
    # "auto" with the CAMB terms: CAMB's transfer in the eigenmode sum to lmax 64, the grid of
    # shells (skies.transfer_shells; tests/test_skies_flat_shells.py) above
    e1 = build_space({"family": "E1", "lengths": [1.6, 1.6, 1.6]})
    sky = flat_sky(e1, OBSERVER, COSMO, lmax=20, nside=16, method="auto", terms=FULL, seed=0, kchi_max=10.0)
    assert sky.kind == "alm" and sky.meta["transfer"] == "camb"
    sky = flat_sky(e1, OBSERVER, COSMO, lmax=100, nside=64, method="auto", terms=FULL, seed=0, kchi_max=10.0)
    assert sky.kind == "map" and sky.meta["transfer"] == "camb shells"


def test_quadratic_spline_grid_also_agrees():
    # the quadratic B-spline (deconvolved by sinc^3; Beylkin 1995) trades accuracy for speed
    space = build_space({"family": "E1", "lengths": [1.6, 1.5, 1.7]})
    eig = flat_sky(space, OBSERVER, COSMO, lmax=48, nside=32, method="eigenmode", seed=2, kchi_max=30.0,
                   complete=False)
    me = hp.alm2map(eig.alm, 32, lmax=48)
    err = {}
    for order in (2, 3):
        g = flat_sky(space, OBSERVER, COSMO, lmax=48, nside=32, method="grid", seed=2, kchi_max=30.0,
                     spline_order=order, complete=False)
        err[order] = np.std(g.map - me) / np.std(me)
    assert err[3] < err[2] < 0.05
    with pytest.raises(InputError):
        flat_sky(space, OBSERVER, COSMO, lmax=48, nside=32, method="grid", seed=2, spline_order=1)
