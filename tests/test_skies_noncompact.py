"""Skies of the non-compact flat families E11-E17 (topology.skies.flat_modes.compact_cover): the
periodic cover of the open directions, its circles, its spectrum against the continuous limit."""

import healpy as hp
import numpy as np
import pytest
from scipy.special import spherical_jn

from topology import geometry as geo
from topology.circles import predict_circles
from topology.errors import InputError
from topology.skies import flat_modes
from topology.skies.flat import flat_sky
from topology.skies.spectra import primordial_power, sachs_wolfe_cl
from topology.spaces import build_space

from test_skies_flat import COSMO, OBSERVER, _pearson, sw_circles_match

L = flat_modes.FREE_LENGTH


def _elements(space, observer, radius):
    """The group elements within ``radius`` as a sorted array of rounded 3x4 matrices."""
    mats = space.elements_within(observer, radius).matrices[:, :3, :]
    rows = np.round(mats.reshape(len(mats), -1), 9)
    return rows[np.lexsort(rows.T[::-1])]


# each non-compact family, its period cover written as the compact family it should equal
# (the open direction given the period L; derived by hand from the generators in
# topology.spaces.euclidean, not from compact_cover)
COVERS = [
    ({"family": "E11", "lengths": [1.5, 1.6], "angle": 70.0},
     {"family": "E1", "lengths": [1.5, 1.6, L], "angles": [90.0, 90.0, 70.0]}),
    ({"family": "E12", "lengths": [1.5, 0.8]}, {"family": "E2", "lengths": [1.5, L, 0.8]}),
    ({"family": "E13", "lengths": [1.5, 0.8], "tilt": 75.0},
     {"family": "E7", "lengths": [L, 1.5, 0.8], "tilt": 75.0}),
    ({"family": "E14", "lengths": [1.5, 0.8]}, {"family": "E7", "lengths": [1.5, L, 0.8]}),
    ({"family": "E15", "lengths": [1.5, 0.8]}, {"family": "E9", "lengths": [1.5, L, 0.8]}),
    ({"family": "E16", "lengths": [1.4]}, {"family": "E1", "lengths": [L, L, 1.4]}),
    ({"family": "E17", "lengths": [0.75]}, {"family": "E7", "lengths": [L, L, 0.75]}),
]


@pytest.mark.parametrize("params,compact", COVERS, ids=[c[0]["family"] for c in COVERS])
def test_cover_is_the_compact_family_and_adds_no_circles(params, compact):
    # the cover's group is the compact family's (same elements within 7 chi_rec, i.e. past
    # the period), and within 2.5 chi_rec it has exactly the space's own elements, so
    # exactly the space's predicted circle pairs (common practice: a pair per image closer
    # than the LSS diameter, Cornish, Spergel & Starkman 1998)
    space = build_space(params)
    cover, axes, lengths = flat_modes.compact_cover(space, OBSERVER)
    assert cover.compact and lengths == [L] * len(axes)
    ref = build_space(compact)
    np.testing.assert_allclose(_elements(cover, OBSERVER, 7.0), _elements(ref, OBSERVER, 7.0), atol=1e-8)
    np.testing.assert_allclose(_elements(cover, OBSERVER, flat_modes.FREE_CLEARANCE),
                               _elements(space, OBSERVER, flat_modes.FREE_CLEARANCE), atol=1e-8)
    own = predict_circles(space, OBSERVER, 1.0)
    new = predict_circles(cover, OBSERVER, 1.0)
    assert len(own) == len(new) > 0
    for a in own:
        assert any(np.allclose(a.center_a, b.center_a) and np.allclose(a.center_b, b.center_b)
                   and abs(a.radius - b.radius) < 1e-9 for b in new)


def test_period_grows_for_an_observer_far_from_the_mirror():
    # E17 (glide (-x, y, z + h), mirror x = 0): an observer at x = 2.2 has its glide images
    # 4.4 away along x, and the period L_x adds images n L_x - 4.4 away along x, so
    # L_x = 4.4 + 2.5 keeps them at the clearance; the open axis y (no mirror) keeps the
    # requested period 3
    obs = geo.Observer.make("flat", [2.2, 0.3, 0.1])
    space = build_space({"family": "E17", "lengths": [0.75]})
    cover, axes, lengths = flat_modes.compact_cover(space, obs, free_length=3.0)
    assert axes == [0, 1] and lengths == pytest.approx([4.4 + flat_modes.FREE_CLEARANCE, 3.0])
    own = {tuple(r) for r in _elements(space, obs, 8.0)}
    hol = cover.elements_within(obs, 8.0)
    rows = np.round(hol.matrices[:, :3, :].reshape(len(hol), -1), 9)
    extra = np.array([d for r, d in zip(rows, hol.displacement) if tuple(r) not in own])
    # nearest added images: T(L_x x) times the glide or its inverse, moved by (2.5, 0, +-0.75),
    # then T(+-L_y y)
    assert np.sort(extra)[:4] == pytest.approx([np.hypot(2.5, 0.75)] * 2 + [3.0, 3.0])


@pytest.mark.parametrize("params", [
    {"family": "E11", "lengths": [1.5, 1.6]},      # chimney
    {"family": "E16", "lengths": [1.4]},           # slab
    {"family": "E12", "lengths": [1.5, 0.8]},      # chimney with half turn (twisted pairs)
    {"family": "E17", "lengths": [0.75]},          # slab with flip (non-orientable pairs)
], ids=lambda p: p["family"])
def test_noncompact_sw_circles_match(params):
    # check: Cornish, Spergel & Starkman 1998: the SW temperature matches on every predicted
    # pair with its twist and orientation -> correlation >= 0.99 (common practice); random
    # circles of the same radius do not match
    sky = sw_circles_match(build_space(params), params["family"])
    assert sky.meta["free_axes"] and sky.meta["family"] == params["family"]


def _sw_weight(k):
    """(T/5)^2 2 pi^2 P_R(k) / k^3, k in 1/chi_rec (the variance density of the SW field)."""
    return (COSMO.t_cmb * 1e6 / 5.0) ** 2 * 2 * np.pi**2 * primordial_power(k / COSMO.chi_rec_mpc) / k**3


def _slab_continuum_cl(thickness, ells, kmax, nodes=256):
    """E[C_l] of a slab of the given thickness with a continuous spectrum across it:
    4 pi / L_z sum_n int d^2k_perp / (2 pi)^2 w(k) j_l(k)^2, k_z = 2 pi n / L_z, |k| <= kmax
    (the torus mode sum with sum_{k_perp} -> A / (2 pi)^2 int d^2k_perp), by Gauss-Legendre."""
    x, wq = np.polynomial.legendre.leggauss(nodes)
    nmax = int(kmax * thickness / (2 * np.pi))
    out = np.zeros(len(ells))
    for n in range(-nmax, nmax + 1):
        kz = 2 * np.pi * n / thickness
        qmax = np.sqrt(kmax**2 - kz**2)
        q = 0.5 * qmax * (x + 1)
        k = np.hypot(q, kz)
        f = q * _sw_weight(k) * spherical_jn(np.asarray(ells)[:, None], k[None, :]) ** 2
        out += 0.5 * qmax * (f @ wq) / (2 * np.pi)
    return 4 * np.pi * out / thickness


def _cover_expected_cl(space, ells, kmax, free_length=None):
    cover, _, _ = flat_modes.compact_cover(space, OBSERVER, free_length)
    _, k, _ = flat_modes.half_ball_modes(cover, kmax)
    kn = np.linalg.norm(k, axis=1)
    w = _sw_weight(kn) / cover.covering_cell_volume
    return np.array([4 * np.pi * 2 * np.sum(w * spherical_jn(ell, kn) ** 2) for ell in ells])


def test_slab_spectrum_discretisation_against_the_continuous_limit():
    # the period L of the open directions turns their integral over k_perp into a sum with
    # spacing 2 pi / L: the expected C_l of the cover tends to the continuous one (computed
    # independently by quadrature); default L = 6: within 1% at l = 2, 1e-3 at l = 3..8,
    # and the error falls with L
    space = build_space({"family": "E16", "lengths": [1.4]})
    ells = np.arange(2, 9)
    cont = _slab_continuum_cl(1.4, ells, 30.0)
    err = {Lf: _cover_expected_cl(space, ells, 30.0, Lf) / cont - 1 for Lf in (4.0, L, 12.0)}
    assert abs(err[L][0]) < 0.01 and np.all(np.abs(err[L][1:]) < 1e-3)
    assert abs(err[12.0][0]) < abs(err[L][0]) < abs(err[4.0][0])
    # the thin slab is not isotropic: its low multipoles differ from the SW plateau by > 3%
    iso = sachs_wolfe_cl(8, COSMO)[2:]
    assert np.max(np.abs(cont / iso - 1)) > 0.03


def test_thick_slab_reproduces_the_isotropic_sw_spectrum():
    # check: a slab much thicker than the LSS (5 chi_rec, open directions of period 6) has on
    # average the isotropic SW spectrum l(l+1)C_l/2pi = A_s T^2/25 (Sachs & Wolfe 1967;
    # spectra.sachs_wolfe_cl): mean of 3 skies at l = 2..10 within 3 sigma of cosmic variance
    # sqrt(2/((2l+1) n)), as for the large torus in test_skies_flat.py
    space = build_space({"family": "E16", "lengths": [5.0]})
    obs = geo.Observer.make("flat", [0.3, 1.1, -2.0], geo.euler_zyz(0.2, 0.5, 0.1))
    lmax = 10
    iso = sachs_wolfe_cl(lmax, COSMO)
    cls = np.array([hp.alm2cl(flat_sky(space, obs, COSMO, lmax=lmax, method="eigenmode", seed=s,
                                       kchi_max=40.0).alm, lmax=lmax) for s in range(3)])
    ell = np.arange(2, lmax + 1)
    ratio = cls.mean(axis=0)[2:] / iso[2:]
    sigma = np.sqrt(2.0 / ((2 * ell + 1) * len(cls)))
    assert np.all(np.abs(ratio - 1.0) < 3.0 * sigma)


@pytest.mark.parametrize("params", [{"family": "E16", "lengths": [1.4]}, {"family": "E12", "lengths": [1.5, 0.8]}],
                         ids=lambda p: p["family"])
def test_noncompact_grid_agrees_with_eigenmode(params):
    # same seed -> same amplitudes on the same cover -> the two methods give the same sky
    space = build_space(params)
    eig = flat_sky(space, OBSERVER, COSMO, lmax=48, nside=32, method="eigenmode", seed=9, kchi_max=30.0)
    grd = flat_sky(space, OBSERVER, COSMO, lmax=48, nside=32, method="grid", seed=9, kchi_max=30.0)
    me = hp.alm2map(eig.alm, 32, lmax=48)
    assert _pearson(me, grd.map) > 0.999
    assert grd.meta["free_length"] == eig.meta["free_length"]


def test_noncompact_bad_input():
    space = build_space({"family": "E16", "lengths": [1.4]})
    for bad in (0.0, -3.0, float("nan")):
        with pytest.raises(InputError, match="period"):
            flat_sky(space, OBSERVER, COSMO, lmax=10, method="eigenmode", seed=0, free_length=bad)
