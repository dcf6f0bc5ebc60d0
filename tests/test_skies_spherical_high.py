"""Spherical skies at high degree: Wigner d to k = 700, invariant-mode counts near k = 700,
Clebsch-Gordan tables, the thin-factor and drawn-weight paths, and skies above the degrees of
the full draw. The full-size checks (k = 668 dodecahedral sky at l_max 128, counts for every
k <= 700, C_l of S^3 skies) are in benchmarks/spherical_sky_speed.py."""

from __future__ import annotations

import math

import healpy as hp
import numpy as np
import pytest

from topology import geometry as geo
from topology.circles import circle_points, predict_circles
from topology.cosmology import Cosmology, omega_k_for_ratio
from topology.skies import s3_harmonics as s3
from topology.skies import s3_invariants as s3i
from topology.skies import s3_tensors as s3t
from topology.skies import spherical as sph
from topology.spaces.spherical import (
    SphericalSpace, klein_molien_series, make_dodecahedral, make_lens, make_octahedral, make_prism,
    make_tetrahedral, mode_counts,
)


def closed(ratio: float) -> Cosmology:
    base = Cosmology()
    return base.with_omega_k(omega_k_for_ratio(base, ratio, -1))


def trivial_space() -> SphericalSpace:
    return SphericalSpace("trivial", np.array([[[1.0, 0, 0, 0], [1.0, 0, 0, 0]]]), {}, homogeneous=True)


def test_wigner_d_recursion_is_unitary_at_k700():
    # check: d^k(beta) is real orthogonal (a representation of SU(2); common practice), and the
    # Risbo recursion equals an independent exact diagonalisation of the generator
    # (s3_harmonics.wigner_d_direct); the Fourier form from Delta = d(pi/2) gives d(beta) v
    k = 700
    (kk, d), = s3.wigner_d(math.pi / 2, k, last_only=True)
    delta = d[0]
    assert delta.shape == (k + 1, k + 1)
    assert np.abs(delta @ delta.T - np.eye(k + 1)).max() < 1e-10
    assert np.abs(delta - s3.wigner_d_direct(math.pi / 2, k)).max() < 1e-10
    v = np.random.default_rng(1).normal(size=(k + 1, 2)) + 1j * np.random.default_rng(2).normal(size=(k + 1, 2))
    direct = s3.wigner_d_direct(1.1, k)
    assert np.abs(s3.apply_d(delta, 1.1, v) - direct @ v).max() < 1e-10 * np.abs(v).max()
    assert np.abs(s3.apply_d(delta, 1.1, v, transpose=True) - direct.T @ v).max() < 1e-10 * np.abs(v).max()


LEFT = [(make_tetrahedral({}), "binary_tetrahedral", {}), (make_octahedral({}), "binary_octahedral", {}),
        (make_dodecahedral({}), "binary_icosahedral", {}), (make_prism({"m": 3}), "binary_dihedral", {"m": 3}),
        (make_lens({"p": 8, "q": 1}), "cyclic", {"n": 8})]


def test_mode_counts_near_k700_equal_molien_series():
    # check: N_k = (k+1) m_k with m_k the Molien coefficient of Klein's invariant ring (Klein 1884;
    # Lehoucq et al. 2002, CQG 19, 4683) for groups acting on one side, and the character average
    # (spaces.spherical.mode_counts) for the two-sided lens spaces L(8,3), L(7,2); the projector
    # of each degree is a projector to 1e-10
    ks = (690, 700)
    deltas = {k: s3.wigner_d_direct(math.pi / 2, k) for k in ks}
    for space, family, param in LEFT:
        group = s3i.group_of(space.pairs)
        assert group.kind == "left"
        molien = klein_molien_series(family, max(ks), **param)
        for k in ks:
            deg = group.degree(k, deltas[k])
            assert deg.count == (k + 1) * molien[k] > 0
            assert deg.defect < 1e-10
    for space in (make_lens({"p": 8, "q": 3}), make_lens({"p": 7, "q": 2})):
        group = s3i.group_of(space.pairs)
        assert group.kind == "diagonal"
        chars = mode_counts(space, max(ks))
        assert [group.degree(k).count for k in ks] == [chars[k] for k in ks]


def test_clebsch_gordan_rows():
    # check: sympy's Clebsch-Gordan coefficients (Condon-Shortley phase) at small j, and the
    # orthogonality sum_m <j m; l q | j m+q> <j m; l' q | j m+q> = (2j+1)/(2l+1) delta_ll'
    # (common practice) where the forward recursion alone fails (l near 2j) and at j = 350
    from sympy import Rational
    from sympy.physics.quantum.cg import CG

    for k, lmax in ((5, 5), (6, 3)):
        j = Rational(k, 2)
        for l, t in s3t.coupling_rows(k, lmax):
            for q in range(l + 1):
                for a in range(k + 1):
                    m = j - a
                    ref = 0.0 if m + q > j else float(CG(j, m, l, q, j, m + q).doit())
                    assert abs(t[q, a] - ref) < 1e-12
    for k, lmax in ((100, 95), (700, 128)):
        prev = None
        for l, t in s3t.coupling_rows(k, lmax):
            assert np.abs((t**2).sum(axis=1) * (2 * l + 1) / (k + 1) - 1.0).max() < 1e-11
            if prev is not None:
                assert np.abs((t[:l] * prev[:l]).sum(axis=1)).max() * (2 * l + 1) / (k + 1) < 1e-11
            prev = t.copy()


@pytest.mark.parametrize("name,space,kmax", [("dodecahedral", make_dodecahedral({}), 30),
                                             ("L(7,2)", make_lens({"p": 7, "q": 2}), 24)])
def test_thin_band_matches_grid(name, space, kmax):
    # the band of the observed coefficients from thin factors (left groups, kmax > 2 lmax) and the
    # turned dense coefficients (lens) give the a_lm of a brute-force evaluation of the field on a
    # Gauss-Legendre grid (exact for a band-limited function; common practice)
    obs = geo.Observer.make("spherical", [1.0, 0.3, -0.2, 0.25], geo.euler_zyz(0.4, 2.0, 1.0))
    cosmo = closed(0.6)
    chi = cosmo.chi_rec_over_curvature_radius
    var = np.zeros(kmax + 1)
    var[sph.KMIN:] = sph.mode_variance(np.arange(sph.KMIN, kmax + 1), cosmo.curvature_radius_mpc)
    field = sph.draw_invariant_field(space, kmax, np.random.default_rng(8), var)
    fast = sph.field_alm(field, obs, chi, 8)
    grid = sph.field_alm_by_grid(field, obs, chi, 8)
    assert np.abs(fast).max() > 0
    assert np.abs(fast - grid).max() < 1e-10 * np.abs(grid).max()


def test_drawn_weights_have_the_method_of_images_covariance(monkeypatch):
    # check: above FULL_DRAW_KMAX only the invariant coefficients are drawn; the field keeps
    # E[R(x)^2] = sum_g Y_k(x, g x) (method of images, Lachieze-Rey & Luminet 1995, Phys. Rep.
    # 254, 135); here that path is forced at small k; Monte Carlo, tolerance ~4 sigma
    monkeypatch.setattr(sph, "FULL_DRAW_KMAX", 0)
    ndraw = 300
    x = np.random.default_rng(21).normal(size=(4, 4))
    x /= np.linalg.norm(x, axis=1, keepdims=True)
    for space, k in [(make_dodecahedral({}), 12), (make_lens({"p": 8, "q": 3}), 4)]:
        var = np.zeros(k + 1)
        var[k] = 1.0
        rng = np.random.default_rng(5)
        samples = np.array([sph.draw_invariant_field(space, k, rng, var).values(x) for _ in range(ndraw)])
        cos_psi = np.einsum("gij,nj,ni->gn", space.matrices, x, x)
        expect = s3.zonal_s3(cos_psi, k).sum(axis=0)
        assert np.all(np.abs(np.mean(samples**2, axis=0) / expect - 1.0) < 4 * math.sqrt(2.0 / ndraw))


def test_matched_circles_of_a_high_degree_sky():
    # check: exact matching on predicted circle pairs, T_A(phi) = T_B(s phi + tau) (Cornish,
    # Spergel & Starkman 1998, CQG 15, 2657), with modes to k = 151 (past the full draw) and the
    # whole field in the a_lm: a degree-k mode on the sphere of radius chi has its power at
    # l <~ k sin chi = 59 and falls off beyond (benchmarks/SPHERICAL_SKIES.md: C_l 12 past it is
    # ~1e-5 of C_l well inside), so l_max 72 holds it; S (m-weighted, search.statistic) >= 0.999
    # on a map of N_side 256 (bilinear error ~(l pixel)^2/8 <~ 3e-3 at l = 59); a random circle
    # does not match
    from topology.search.sampling import sample_points
    from topology.search.statistic import s_of_twist

    space = make_dodecahedral({})
    cosmo = closed(0.4)
    obs = geo.Observer.make("spherical", [1.0, 0.2, 0.1, 0.3], geo.euler_zyz(0.3, 1.1, -0.7))
    sky = sph.spherical_sky(space, obs, cosmo, lmax=72, kmax=151, seed=2)
    tmap = hp.alm2map(sky.alm, 256, lmax=72)
    pairs = predict_circles(space, obs, sky.meta["chi"])
    assert len(pairs) == 6
    n_phi, m_max = 256, 64
    phi = 2 * np.pi * np.arange(n_phi) / n_phi
    rand = np.random.default_rng(4).normal(size=(len(pairs), 3))
    rand /= np.linalg.norm(rand, axis=1, keepdims=True)
    for p, c in zip(pairs, rand):
        a = sample_points(tmap, circle_points(p.center_a, p.radius, phi)[None], p.center_a[None], p.radius, n_phi, m_max)
        b = sample_points(tmap, circle_points(p.center_b, p.radius, p.orientation * phi + p.twist)[None],
                          p.center_b[None], p.radius, n_phi, m_max)
        assert s_of_twist(a.coeffs, b.coeffs, np.zeros(1), 1)[0] >= 0.999
        off = sample_points(tmap, circle_points(c, p.radius, phi)[None], c[None], p.radius, n_phi, m_max)
        assert s_of_twist(a.coeffs, off.coeffs, np.zeros(1), 1)[0] < 0.9


def test_s3_skies_at_high_degree_have_the_expected_spectrum():
    # the skies of S^3 (Gamma = {1}) with modes to k = 160 (past the full draw) have the C_l of
    # the zonal-kernel formula (s3_sachs_wolfe_cl, no Wigner matrices) within cosmic variance:
    # (2l+1)-weighted band means over 3 seeds, sigma = sqrt(2 / sum (2l+1)) (common practice),
    # tolerance 4 sigma per band
    cosmo = closed(0.5)
    obs = geo.Observer.make("spherical", [1.0, 0.0, 0.0, 0.0])
    kmax, lmax, n = 160, 24, 3
    expect = sph.s3_sachs_wolfe_cl(cosmo, lmax, kmax)
    ratios = [hp.alm2cl(sph.spherical_sky(trivial_space(), obs, cosmo, lmax=lmax, kmax=kmax, seed=s).alm)[2:]
              / expect[2:] for s in range(n)]
    r = np.mean(ratios, axis=0)
    ell = np.arange(2, lmax + 1)
    for lo, hi in ((2, 12), (13, 24)):
        sel = (ell >= lo) & (ell <= hi)
        w = 2 * ell[sel] + 1
        assert abs(np.sum(w * r[sel]) / w.sum() - 1.0) < 4 * math.sqrt(2.0 / (n * w.sum()))


def test_tail_weights_hold_the_converged_spectrum():
    # check: the C_l of modes k <= kmax with the variance of degree k weighted by w_k (s3_spectra)
    # against the C_l of all degrees, here an independent brute-force sum to k = 40 lmax / chi
    # (truncation error ~0.55 (l / (k chi))^2 < 2e-4): within 1 % at every 2 <= l <= lmax, where
    # the unweighted default truncation misses > 10 % at l = lmax; spherical_sky applies the
    # weights at the default kmax and records A
    from topology.skies import default_kmax

    cosmo = closed(0.5)
    chi = cosmo.chi_rec_over_curvature_radius
    lmax = 24
    kmax = default_kmax(lmax, chi)
    w, info = sph.tail_weights(cosmo, lmax, kmax)
    ref = sph.s3_sachs_wolfe_cl(cosmo, lmax, int(math.ceil(40 * lmax / chi)))
    plain = sph.s3_sachs_wolfe_cl(cosmo, lmax, kmax)
    held = sph.s3_sachs_wolfe_cl(cosmo, lmax, kmax, weights=w)
    assert 1.0 - plain[lmax] / ref[lmax] > 0.1
    assert np.abs(held[2:] / ref[2:] - 1.0).max() < 0.01
    assert info["cl_error"] < 0.01 and np.all(w >= 1.0) and w[-1] == pytest.approx(1.0 + info["A"])
    obs = geo.Observer.make("spherical", [1.0, 0.0, 0.0, 0.0])
    sky = sph.spherical_sky(trivial_space(), obs, cosmo, lmax=lmax, seed=1)
    assert sky.meta["kmax"] == kmax and sky.meta["tail_A"] == pytest.approx(info["A"])
    assert sph.spherical_sky(trivial_space(), obs, cosmo, lmax=lmax, kmax=kmax, seed=1).meta["tail_A"] == 0.0


def test_alm_rotation_matches_healpy():
    # check: healpy.rotate_alm (Wigner rotation by recursion, the reference implementation) with
    # the ZYZ angles of R = Q^T, psi = gamma applied first; parity (-1)^l for det Q = -1
    lmax = 20
    rng = np.random.default_rng(0)
    alm = rng.normal(size=hp.Alm.getsize(lmax)) + 1j * rng.normal(size=hp.Alm.getsize(lmax))
    ell, m = hp.Alm.getlm(lmax)
    alm[m == 0] = alm[m == 0].real
    q = geo.euler_zyz(0.4, 2.1, -1.3)
    r = q.T
    beta, alpha, gamma = math.acos(r[2, 2]), math.atan2(r[1, 2], r[0, 2]), math.atan2(r[2, 1], -r[2, 0])
    for sign in (1.0, -1.0):
        ref = alm * (sign ** ell)
        hp.rotate_alm(ref, gamma, beta, alpha, lmax=lmax)
        assert np.abs(s3t.rotate_alm(alm, lmax, sign * q) - ref).max() < 1e-12
