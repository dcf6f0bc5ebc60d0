"""Spherical multiply connected skies: S^3 eigenmodes, invariant-mode counts, normalisation,
invariance, matched circles, determinism and bad input."""

from __future__ import annotations

import itertools
import math

import healpy as hp
import numpy as np
import pytest

from topology import geometry as geo
from topology.circles import circle_points, predict_circles
from topology.cosmology import Cosmology, omega_k_for_ratio
from topology.errors import InputError
from topology.skies import s3_harmonics as s3
from topology.skies import s3_invariants as s3i
from topology.skies.spectra import sachs_wolfe_cl
from topology.skies.spherical import (
    KMAX_LIMIT, draw_invariant_field, field_alm, field_alm_by_grid, invariant_mode_counts, s3_sachs_wolfe_cl, spherical_sky,
)
from topology.spaces.spherical import (
    SphericalSpace, klein_molien_series, make_dodecahedral, make_lens, make_octahedral, make_prism,
    make_tetrahedral, mode_counts, su2_characters,
)

KMAX_COUNTS = 60


def closed(ratio: float) -> Cosmology:
    """Default background with Omega_K < 0 chosen so that chi_rec / R_c = ratio."""
    base = Cosmology()
    return base.with_omega_k(omega_k_for_ratio(base, ratio, -1))


def random_quaternions(n: int, seed: int) -> np.ndarray:
    q = np.random.default_rng(seed).normal(size=(n, 4))
    return q / np.linalg.norm(q, axis=1, keepdims=True)


def trivial_space() -> SphericalSpace:
    return SphericalSpace("trivial", np.array([[[1.0, 0, 0, 0], [1.0, 0, 0, 0]]]), {}, homogeneous=True)


# ---------------------------------------------------------------------------------------------
# Wigner matrices are a representation and their entries are S^3 eigenmodes
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("k", [1, 7, 30, 60])
def test_wigner_matrices_are_a_unitary_representation(k):
    # check: D^k is a unitary representation of SU(2) (Peter-Weyl; common practice)
    a, b = random_quaternions(20, 1), random_quaternions(20, 2)
    da, db = s3.wigner_matrices(a, k), s3.wigner_matrices(b, k)
    dab = s3.wigner_matrices(geo.quat_multiply(a, b), k)
    assert np.abs(dab - da @ db).max() < 1e-11
    assert np.abs(da @ np.conj(np.swapaxes(da, 1, 2)) - np.eye(k + 1)).max() < 1e-11
    if k == 1:   # basis u^a v^(1-a): index 0 is v, 1 is u, so D^1 is U with both axes reversed
        assert np.abs(da - s3.su2_matrix(a)[:, ::-1, ::-1]).max() < 1e-15


def test_wigner_entries_are_harmonic_of_degree_k():
    # check: degree-k homogeneous harmonic polynomials on R^4 restrict to eigenfunctions of the
    # S^3 Laplacian with eigenvalue k(k+2) (Stein & Weiss 1971, ch. IV); here the Euclidean
    # Laplacian of each entry is ~0 (finite differences) and the entries scale as |x|^k.
    k, h = 6, 1e-3
    x = random_quaternions(3, 5)
    base = s3.wigner_matrices(x, k)
    lap = -8.0 * base
    for e in np.eye(4):
        lap = lap + s3.wigner_matrices(x + h * e, k) + s3.wigner_matrices(x - h * e, k)
    lap /= h**2
    assert np.abs(lap).max() < 1e-4 * k * (k + 2)
    assert np.abs(s3.wigner_matrices(1.7 * x, k) - 1.7**k * base).max() < 1e-10 * 1.7**k


def test_schur_orthogonality_on_s3():
    # check: int D^k_ab conj(D^k'_cd) dV = 2 pi^2 / (k+1) delta (Schur orthogonality; common
    # practice), by Monte Carlo over Haar-uniform points (tolerance 5 sigma)
    x = random_quaternions(40000, 11)
    d2 = s3.wigner_matrices(x, 2).reshape(len(x), -1)
    d3 = s3.wigner_matrices(x, 3).reshape(len(x), -1)
    gram = 2.0 * math.pi**2 * (d2.conj().T @ d2) / len(x)
    assert np.abs(np.diag(gram) - 2.0 * math.pi**2 / 3.0).max() < 5 * 2 * math.pi**2 / math.sqrt(len(x))
    off = gram - np.diag(np.diag(gram))
    assert np.abs(off).max() < 5 * 2 * math.pi**2 / math.sqrt(len(x))
    cross = 2.0 * math.pi**2 * (d2.conj().T @ d3) / len(x)
    assert np.abs(cross).max() < 5 * 2 * math.pi**2 / math.sqrt(len(x))


# ---------------------------------------------------------------------------------------------
# invariant-mode counts: projector rank vs character formula, Molien series, monomial count
# ---------------------------------------------------------------------------------------------
LEFT_FAMILIES = [
    # (space, Klein family, parameter) - groups acting by left multiplication
    (make_lens({"p": 8, "q": 1}), "cyclic", {"n": 8}),
    (make_prism({"m": 2}), "binary_dihedral", {"m": 2}),
    (make_prism({"m": 3}), "binary_dihedral", {"m": 3}),
    (make_prism({"m": 4}), "binary_dihedral", {"m": 4}),
    (make_tetrahedral({}), "binary_tetrahedral", {}),
    (make_octahedral({}), "binary_octahedral", {}),
    (make_dodecahedral({}), "binary_icosahedral", {}),
]


@pytest.mark.parametrize("space,family,param", LEFT_FAMILIES, ids=lambda v: getattr(v, "describe", lambda: None)())
def test_mode_counts_equal_molien_for_left_groups(space, family, param):
    # check: N_k = (k+1) m_k with m_k the Molien coefficient of Klein's invariant ring
    # (Klein 1884; Lehoucq, Weeks, Uzan, Gausmann & Luminet 2002, CQG 19, 4683, for left actions)
    counts = invariant_mode_counts(space, KMAX_COUNTS)
    molien = klein_molien_series(family, KMAX_COUNTS, **param)
    k = np.arange(KMAX_COUNTS + 1)
    assert np.array_equal(counts, (k + 1) * molien)
    assert np.array_equal(counts, mode_counts(space, KMAX_COUNTS))   # character formula


def test_dodecahedral_mode_degrees():
    # check: Poincare dodecahedral space: first non-constant modes at k = 12 (13 of them), then
    # k = 20, 24, 30 (Lehoucq et al. 2002, CQG 19, 4683, table of S^3/I*; Aurich, Lustig &
    # Steiner 2005, CQG 22, 2061)
    counts = invariant_mode_counts(make_dodecahedral({}), 30)
    assert [k for k in range(31) if counts[k]] == [0, 12, 20, 24, 30]
    assert counts[12] == 13 and counts[20] == 21 and counts[24] == 25 and counts[30] == 31


def lens_monomial_count(p: int, q: int, k: int) -> int:
    """Invariant degree-k harmonics of L(p, q) counted on monomials z1^a zb1^b z2^c zb2^d.

    The action (z1, z2) -> (w z1, w^q z2), w = e^{2 pi i / p}, multiplies a monomial by
    w^((a - b) + q (c - d)); harmonics of degree k = polynomials of degree k minus |x|^2 times
    those of degree k-2, as torus representations (Stein & Weiss 1971, ch. IV).
    """
    def invariant_monomials(n):
        if n < 0:
            return 0
        total = 0
        for a, b, c in itertools.product(range(n + 1), repeat=3):
            d = n - a - b - c
            if d >= 0 and ((a - b) + q * (c - d)) % p == 0:
                total += 1
        return total
    return invariant_monomials(k) - invariant_monomials(k - 2)


@pytest.mark.parametrize("q", [1, 3])
def test_lens_mode_counts(q):
    # check: independent monomial count (above) for k <= 20 and the character formula
    # (Lehoucq et al. 2002, CQG 19, 4683) up to k = 60
    space = make_lens({"p": 8, "q": q})
    counts = invariant_mode_counts(space, KMAX_COUNTS)
    assert np.array_equal(counts, mode_counts(space, KMAX_COUNTS))
    assert [lens_monomial_count(8, q, k) for k in range(21)] == list(counts[:21])


def test_projector_rank_for_a_two_sided_group():
    # the general (non-factorised) projector path: Z3 on the left times Z4 on the right, counts
    # from the character average (1/|G|) sum chi_k(a) chi_k(b) (character orthogonality;
    # common practice) with chi_k(theta) = sin((k+1) theta) / sin(theta)
    a = geo.quat_exp([0.0, 1.0, 0.0], 2 * math.pi / 3)
    b = geo.quat_exp([0.3, 0.0, 1.0], math.pi / 2)
    pa = [np.array([1.0, 0, 0, 0]), a, geo.quat_multiply(a, a)]
    pb = [np.array([1.0, 0, 0, 0])]
    for _ in range(3):
        pb.append(geo.quat_multiply(pb[-1], b))
    pairs = np.array([[x, y] for x in pa for y in pb])
    chars = su2_characters(pairs[:, :, 0], 8)               # (k, pair, side)
    expect = np.rint(np.mean(chars[:, :, 0] * chars[:, :, 1], axis=1)).astype(int)
    assert s3i.group_of(pairs).kind == "general"
    assert [s3i.invariant_rank(pairs, k) for k in range(9)] == list(expect)
    assert sum(expect) > 9                                  # not only the constants


# ---------------------------------------------------------------------------------------------
# the field: invariance, exact a_lm, normalisation
# ---------------------------------------------------------------------------------------------
SPACES = {"L(8,3)": make_lens({"p": 8, "q": 3}), "prism3": make_prism({"m": 3}),
          "dodecahedral": make_dodecahedral({})}


@pytest.mark.parametrize("name", list(SPACES))
def test_field_is_invariant_under_every_group_element(name):
    # check: f(g x) = f(x) for all g in Gamma (definition of a field on S^3/Gamma; common practice)
    space = SPACES[name]
    obs = geo.Observer.make("spherical", [1.0, 0.2, 0.15, -0.1])
    sky = spherical_sky(space, obs, closed(0.5), lmax=24, kmax=24, seed=3)
    field = sky.meta["field"]
    x = random_quaternions(40, 9)
    fx = field.values(x)
    gx = np.einsum("gij,nj->gni", space.matrices, x)
    fgx = field.values(gx)
    assert np.std(fx) > 1.0   # microK: a real signal
    assert np.abs(fgx - fx[None, :]).max() < 1e-9 * np.abs(fx).max()


def test_field_covariance_matches_method_of_images():
    # check: E[R(x)^2] = sum_k sigma_k^2 sum_{g in Gamma} Y_k(x, g x), the method of images for a
    # field on S^3/Gamma (Lachieze-Rey & Luminet 1995, Phys. Rep. 254, 135), with the zonal kernel
    # Y_k of S^3; Monte Carlo over 300 draws at unit sigma_k^2 (tolerance ~4 sigma)
    ndraw = 300
    for space, k in [(make_dodecahedral({}), 12), (make_lens({"p": 8, "q": 3}), 4)]:
        var = np.zeros(k + 1)
        var[k] = 1.0
        x = random_quaternions(4, 21)
        rng = np.random.default_rng(5)
        samples = np.array([draw_invariant_field(space, k, rng, var).values(x) for _ in range(ndraw)])
        cos_psi = np.einsum("gij,nj,ni->gn", space.matrices, x, x)
        expect = s3.zonal_s3(cos_psi, k).sum(axis=0)
        assert np.all(np.abs(np.mean(samples**2, axis=0) / expect - 1.0) < 4 * math.sqrt(2.0 / ndraw))


def test_ring_alm_match_direct_evaluation_at_pixels():
    # check: healpy.alm2map (reference synthesis) of the ring-method a_lm equals the field
    # evaluated directly at the HEALPix pixel centres, and the brute-force grid transform
    space = make_lens({"p": 8, "q": 3})
    rot = geo.euler_zyz(0.3, 1.1, -0.7)
    obs = geo.Observer.make("spherical", [1.0, 0.2, 0.15, -0.1], rot)
    cosmo = closed(0.5)
    chi = cosmo.chi_rec_over_curvature_radius
    sky = spherical_sky(space, obs, cosmo, lmax=40, kmax=20, seed=4)
    nside = 16
    m = hp.alm2map(sky.alm, nside, lmax=sky.lmax)
    dirs = np.array(hp.pix2vec(nside, np.arange(hp.nside2npix(nside)))).T
    direct = sky.meta["field"].values(obs.exp(dirs, chi))
    assert np.abs(m - direct).max() < 1e-9 * np.abs(direct).max()
    ell, _ = hp.Alm.getlm(sky.lmax)
    assert np.all(sky.alm[ell > 20] == 0)                     # l <= kmax: band limit
    grid = field_alm_by_grid(sky.meta["field"], obs, chi, 40)
    assert np.abs(grid - sky.alm).max() < 1e-10 * np.abs(sky.alm).max()
    # lmax below kmax: the same low multipoles
    low = field_alm(sky.meta["field"], obs, chi, 10)
    assert np.abs(low - hp.resize_alm(sky.alm, 40, 40, 10, 10)).max() < 1e-10 * np.abs(low).max()


def test_simply_connected_s3_reproduces_flat_sachs_wolfe_plateau():
    # check: l(l+1) C_l / 2 pi -> A_s T^2 / 25 for a scale-invariant spectrum (Sachs & Wolfe
    # 1967; flat formula of topology.skies.spectra.sachs_wolfe_cl); with all modes up to
    # k = 800 the closed S^3 spectrum agrees within 1 % at 2 <= l <= 20 (curvature radius
    # 2.5 chi_rec; White & Scott 1996, ApJ 459, 415: closed SW spectra approach the flat
    # plateau; the 1 % is our tolerance)
    cosmo = closed(0.4)
    ref = sachs_wolfe_cl(20, cosmo)
    cl = s3_sachs_wolfe_cl(cosmo, 20, 800)
    assert np.abs(cl[2:] / ref[2:] - 1.0).max() < 0.01


def test_sky_power_matches_expected_spectrum():
    # the generated skies of the simply connected S^3 (Gamma = {1}) have the expected C_l of the
    # zonal-kernel formula (method of images, no Wigner matrices) within cosmic variance:
    # the (2l+1)-weighted mean of C_l(sky)/C_l over 2 <= l <= 12 and 8 seeds has sigma ~ 4 %
    # (common practice: Var C_l / C_l^2 = 2/(2l+1)); tolerance 4 sigma
    cosmo = closed(0.5)
    obs = geo.Observer.make("spherical", [1.0, 0.0, 0.0, 0.0])
    kmax, lmax = 30, 12
    expect = s3_sachs_wolfe_cl(cosmo, lmax, kmax)
    ell = np.arange(2, lmax + 1)
    ratios = []
    for seed in range(8):
        sky = spherical_sky(trivial_space(), obs, cosmo, lmax=lmax, kmax=kmax, seed=seed)
        cl = hp.alm2cl(sky.alm)
        ratios.append(np.sum((2 * ell + 1) * cl[2:] / expect[2:]) / np.sum(2 * ell + 1))
    sigma = math.sqrt(2.0 / (8 * np.sum(2 * ell + 1)))
    assert abs(np.mean(ratios) - 1.0) < 4 * sigma


# ---------------------------------------------------------------------------------------------
# matched circles in noise-free SW skies
# ---------------------------------------------------------------------------------------------
CIRCLE_CASES = [
    # (name, space, observer position, chi_rec / R_c, expected pairs)
    ("L(8,1)", make_lens({"p": 8, "q": 1}), [1.0, 0.2, 0.15, -0.1], 0.55, 1),
    ("L(8,3)", make_lens({"p": 8, "q": 3}), [1.0, 0.2, 0.15, -0.1], 0.55, 1),
    ("dodecahedral", make_dodecahedral({}), [1.0, 0.2, 0.1, 0.3], 0.4, 6),
]


def _corr(a: np.ndarray, b: np.ndarray) -> float:
    a = a - a.mean()
    b = b - b.mean()
    return float(a @ b / math.sqrt((a @ a) * (b @ b)))


@pytest.mark.parametrize("name,space,pos,ratio,npairs", CIRCLE_CASES, ids=[c[0] for c in CIRCLE_CASES])
def test_matched_circles_in_sw_sky(name, space, pos, ratio, npairs):
    # check: exact matching of the SW term on predicted circle pairs, T_A(phi) = T_B(s phi + tau)
    # (Cornish, Spergel & Starkman 1998, CQG 15, 2657; common practice: correlation >= 0.99 in a
    # noise-free SW map); two random circles of the same radius do not match
    cosmo = closed(ratio)
    chi = cosmo.chi_rec_over_curvature_radius
    obs = geo.Observer.make("spherical", pos, geo.euler_zyz(0.3, 1.1, -0.7))
    pairs = predict_circles(space, obs, chi)
    assert len(pairs) == npairs
    assert all(math.radians(20) < p.radius < math.radians(50) for p in pairs)
    nside = 32
    sky = spherical_sky(space, obs, cosmo, lmax=3 * nside - 1, nside=nside, kmax=40, seed=7)
    tmap = hp.alm2map(sky.alm, nside, lmax=sky.lmax)
    field = sky.meta["field"]
    phi = np.linspace(0.0, 2 * np.pi, 360, endpoint=False)

    def sample(center, radius, angles):
        th, ph = hp.vec2ang(circle_points(center, radius, angles))
        return hp.get_interp_val(tmap, th, ph)

    def exact(center, radius, angles):
        return field.values(obs.exp(circle_points(center, radius, angles), chi))

    for p in pairs:
        ta = sample(p.center_a, p.radius, phi)
        tb = sample(p.center_b, p.radius, p.orientation * phi + p.twist)
        assert _corr(ta, tb) >= 0.99                                # on the HEALPix map
        ea = exact(p.center_a, p.radius, phi[::12])
        eb = exact(p.center_b, p.radius, p.orientation * phi[::12] + p.twist)
        assert np.abs(ea - eb).max() < 1e-9 * np.abs(ea).max()     # exact at the LSS points
    rng = np.random.default_rng(2)
    radius = pairs[0].radius
    random_corr = []
    for _ in range(10):
        c1, c2 = (v / np.linalg.norm(v) for v in rng.normal(size=(2, 3)))
        ta = sample(c1, radius, phi)
        tb = sample(c2, radius, rng.choice([-1, 1]) * phi + rng.uniform(0, 2 * np.pi))
        random_corr.append(_corr(ta, tb))
    assert max(random_corr) < 0.9 and np.mean(np.abs(random_corr)) < 0.5


# ---------------------------------------------------------------------------------------------
# determinism and bad input
# ---------------------------------------------------------------------------------------------
def test_same_seed_same_sky_and_kmax_extends():
    space = make_prism({"m": 3})
    obs = geo.Observer.make("spherical", [1.0, 0.1, 0.0, 0.2])
    cosmo = closed(0.5)
    a = spherical_sky(space, obs, cosmo, lmax=20, kmax=20, seed=11)
    b = spherical_sky(space, obs, cosmo, lmax=20, kmax=20, seed=11)
    c = spherical_sky(space, obs, cosmo, lmax=20, kmax=20, seed=12)
    d = spherical_sky(space, obs, cosmo, lmax=20, kmax=26, seed=11)
    assert np.array_equal(a.alm, b.alm)
    assert not np.allclose(a.alm, c.alm)
    for k, coef in a.meta["field"].coeffs.items():
        assert np.array_equal(coef, d.meta["field"].coeffs[k])
    assert a.meta["modes"] == int(mode_counts(space, 20)[2:].sum())
    assert a.terms == ("sw",) and a.meta["kmax"] == 20


def test_bad_input():
    space = make_dodecahedral({})
    obs = geo.Observer.make("spherical", [1.0, 0.0, 0.0, 0.0])
    good = closed(0.4)
    with pytest.raises(InputError, match="omega_k"):
        spherical_sky(space, obs, Cosmology(), lmax=10, kmax=10, seed=0)
    with pytest.raises(InputError, match="omega_k"):
        spherical_sky(space, obs, Cosmology(omega_k=0.05), lmax=10, kmax=10, seed=0)
    with pytest.raises(InputError, match="kmax"):
        spherical_sky(space, obs, good, lmax=10, kmax=KMAX_LIMIT + 1, seed=0)
    with pytest.raises(InputError, match="kmax"):
        spherical_sky(space, obs, good, lmax=10, kmax=1, seed=0)
    with pytest.raises(InputError, match="kmax"):
        spherical_sky(space, obs, good, lmax=500, seed=0)          # default 2 lmax / chi too large
    with pytest.raises(InputError, match="terms"):
        spherical_sky(space, obs, good, lmax=10, kmax=10, terms=("sw", "doppler"), seed=0)
    with pytest.raises(InputError, match="terms"):
        spherical_sky(space, obs, good, lmax=10, kmax=10, terms=("isw",), seed=0)
    with pytest.raises(InputError, match="lmax"):
        spherical_sky(space, obs, good, lmax=100, nside=16, kmax=10, seed=0)
    with pytest.raises(InputError, match="seed"):
        spherical_sky(space, obs, good, lmax=10, kmax=10, seed=-1)
    flat_obs = geo.Observer.make("flat", [0.0, 0.0, 0.0])
    with pytest.raises(InputError, match="observer"):
        spherical_sky(space, flat_obs, good, lmax=10, kmax=10, seed=0)
    from topology.spaces.euclidean import FLAT_FAMILIES
    from topology.spaces.registry import build_space
    assert "E1" in FLAT_FAMILIES
    torus = build_space({"family": "E1", "lengths": [1.0, 1.0, 1.0]})
    with pytest.raises(InputError, match="spherical"):
        spherical_sky(torus, obs, good, lmax=10, kmax=10, seed=0)
