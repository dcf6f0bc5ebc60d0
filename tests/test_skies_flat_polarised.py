"""Polarised skies of flat spaces (topology.skies.flat_polarised): CAMB's E-mode transfer against
CAMB's own EE and TE, the spectra of a large torus within cosmic variance, T equal to the
temperature eigenmode sky of the same seed, B = 0 in the written Q, U, and E circles that match."""

import math
import textwrap

import healpy as hp
import numpy as np
import pytest

from topology import geometry as geo
from topology.circles import predict_circles
from topology.cli import main
from topology.cosmology import Cosmology
from topology.errors import InputError
from topology.search.sampling import sample_circles
from topology.search.statistic import s_of_twist
from topology.skies import spectra
from topology.skies.flat import flat_sky
from topology.skies.flat_polarised import flat_polarised_sky
from topology.skies.polarised import camb_pol_cl
from topology.spaces import build_space

COSMO = Cosmology()
FULL = ("sw", "doppler", "isw")
OBSERVER = geo.Observer.make("flat", [0.13, -0.21, 0.07], geo.euler_zyz(0.3, 0.9, -0.4))


def test_emode_transfer_reproduces_camb_ee_and_te():
    # check: CAMB (get_unlensed_scalar_cls, the same cosmology): 4 pi int dlnk P_R Delta^E_l^2 and
    # 4 pi int dlnk P_R Delta_l Delta^E_l (times T_cmb^2) give CAMB's EE and TE at l = 2..20 to 0.5 %
    # (measured 0.1-0.2 %); without the factor sqrt((l+2)!/(l-2)!) EE would be 24x low at l = 2
    from topology.skies.transfer import emode_transfer, temperature_transfer, transfer_k_range

    lmax = 20
    lo, hi = transfer_k_range(COSMO, lmax)
    k = np.exp(np.linspace(math.log(lo), math.log(hi), 20000))
    ell = np.arange(lmax + 1)
    d_e = emode_transfer(COSMO, lmax)(ell, k)
    d_t = temperature_transfer(COSMO, lmax)(ell, k)
    w = 4 * np.pi * spectra.primordial_power(k) * (COSMO.t_cmb * 1e6) ** 2
    ee = np.trapezoid(w * d_e * d_e, np.log(k), axis=1)
    te = np.trapezoid(w * d_t * d_e, np.log(k), axis=1)
    ref = camb_pol_cl(COSMO, lmax)
    assert np.max(np.abs(ee[2:] / ref["EE"][2:] - 1)) < 5e-3
    assert np.max(np.abs(te[2:] / ref["TE"][2:] - 1)) < 5e-3
    assert np.all(d_e[:2] == 0)


def test_large_torus_te_ee_within_cosmic_variance():
    # check: CAMB's unlensed EE, TE; a torus of side 6 chi_rec (nearly isotropic at l >= 4) with its
    # T, E complement beyond k chi_rec = 40 has on average CAMB's spectra: per l, var(C^_EE) =
    # 2 C_EE^2 / (2l + 1), var(C^_TE) = (C_TT C_EE + C_TE^2) / (2l + 1) (Knox 1995; common practice);
    # the mean z over l = 4..16 and 3 skies within 4, chi^2 within 5 sigma of its count
    space = build_space({"family": "E1", "lengths": [6.0, 6.0, 6.0]})
    obs = geo.Observer.make("flat", [0.3, 1.1, -2.0])
    lmax, skies = 16, 3
    cl = camb_pol_cl(COSMO, lmax)
    ell = np.arange(lmax + 1)
    n = 2 * ell + 1.0
    z = {"EE": [], "TE": [], "-TE": []}
    for s in range(skies):
        sky = flat_polarised_sky(space, obs, COSMO, lmax=lmax, seed=s, kchi_max=40.0)
        a_t, a_e = sky.alm, sky.meta["alm_e"]
        ee = hp.alm2cl(a_e, lmax=lmax)
        te = hp.alm2cl(a_t, a_e, lmax=lmax)
        sel = slice(4, lmax + 1)
        z["EE"].append((ee[sel] - cl["EE"][sel]) / np.sqrt(2 * cl["EE"][sel] ** 2 / n[sel]))
        var_te = (cl["TT"][sel] * cl["EE"][sel] + cl["TE"][sel] ** 2) / n[sel]
        z["TE"].append((te[sel] - cl["TE"][sel]) / np.sqrt(var_te))
        z["-TE"].append((te[sel] + cl["TE"][sel]) / np.sqrt(var_te))
    for key in ("EE", "TE"):
        v = np.concatenate(z[key])
        assert abs(v.sum() / math.sqrt(v.size)) < 4, key
        assert abs(np.sum(v**2) - v.size) < 5 * math.sqrt(2 * v.size), key
    v = np.concatenate(z["-TE"])     # the check can fail: TE of the wrong sign is far out
    assert np.sum(v**2) > v.size + 5 * math.sqrt(2 * v.size)


def test_temperature_is_the_eigenmode_sky_of_the_same_seed():
    # the same amplitudes: T of the polarised sky = flat_sky's lattice part (eigenmode, full terms)
    for family, lengths in (("E1", [1.6, 1.5, 1.7]), ("E2", [1.6, 1.6, 1.4])):
        space = build_space({"family": family, "lengths": lengths})
        pol = flat_polarised_sky(space, OBSERVER, COSMO, lmax=16, seed=9, kchi_max=20.0, complete=False)
        tem = flat_sky(space, OBSERVER, COSMO, lmax=16, method="eigenmode", terms=FULL, seed=9, kchi_max=20.0,
                       complete=False)
        assert np.abs(pol.alm - tem.alm).max() <= 1e-12 * np.abs(tem.alm).max()
        other = flat_polarised_sky(space, OBSERVER, COSMO, lmax=16, seed=10, kchi_max=20.0, complete=False)
        assert np.abs(other.alm - tem.alm).max() > 0.1 * np.abs(tem.alm).max()


def test_e_circles_match_beyond_reionisation():
    # matched E circles of an E1 cube of side 1.7 (circles of 31.8 deg), modes 12 < k chi_rec <= 40
    # (above the reionisation multipoles): the leading-order matched-point correlation is
    # (3 + cos^2 2 alpha) / 4 = 0.80, 0.89 with the S statistic's weighting of m (README,
    # "Polarisation"); measured 0.83-0.90 per pair (0.77-0.90 over seeds 4-6). Circle A of one
    # pair against circle B of another at the predicted twist: |S| <= 0.11 here.
    class Band:
        def weight(self, k):
            k = np.asarray(k, dtype=float)
            return ((k > 12.0) & (k <= 40.0)).astype(float)

    space = build_space({"family": "E1", "lengths": [1.7, 1.7, 1.7]})
    sky = flat_polarised_sky(space, OBSERVER, COSMO, lmax=56, seed=4, kchi_max=40.0, complete=False, profile=Band())
    e = hp.alm2map(sky.meta["alm_e"], 64, lmax=56)
    pairs = predict_circles(space, OBSERVER, 1.0)
    true, chance = [], []
    for i, p in enumerate(pairs):
        a = sample_circles(e, p.center_a[None, :], p.radius, 256, 56)
        b = sample_circles(e, p.center_b[None, :], p.radius, 256, 56)
        true.append(float(s_of_twist(a.coeffs, b.coeffs, np.array([p.twist]), p.orientation)[0]))
        q = pairs[(i + 1) % len(pairs)]   # circle A of one pair against circle B of another
        wrong = sample_circles(e, q.center_b[None, :], p.radius, 256, 56)
        chance.append(float(s_of_twist(a.coeffs, wrong.coeffs, np.array([p.twist]), p.orientation)[0]))
    assert np.all(np.array(true) > 0.7) and np.all(np.abs(chance) < 0.4)


def test_e_matched_point_correlation_follows_the_derived_law():
    # the derived leading-order correlation of E at the two sightings of a point of last
    # scattering, rho_E = (3 + cos^2 2 alpha) / 4 (README, "Polarisation": sin^2 theta weighting of
    # a plane wave's E, averaged over isotropic k), against the Pearson correlation of the two
    # circles of each of the 40 pairs (radii 11.5-66 deg) of an E1 cube of side 0.8, modes
    # 24 < k chi_rec <= 48 (well beyond reionisation): measured mean difference -0.005 (seeds 1-4:
    # -0.005 to -0.039, rms per pair 0.05-0.07); an exact match (rho = 1) would be 0.2 off
    from topology.circles import circle_points

    class Band:
        def weight(self, k):
            k = np.asarray(k, dtype=float)
            return ((k > 24.0) & (k <= 48.0)).astype(float)

    space = build_space({"family": "E1", "lengths": [0.8, 0.8, 0.8]})
    sky = flat_polarised_sky(space, OBSERVER, COSMO, lmax=64, seed=1, kchi_max=48.0, complete=False, profile=Band())
    e = hp.alm2map(sky.meta["alm_e"], 128, lmax=64)
    phi = np.linspace(0.0, 2.0 * np.pi, 360, endpoint=False)
    got, rho, radius = [], [], []
    for p in predict_circles(space, OBSERVER, 1.0):
        va = hp.get_interp_val(e, *hp.vec2ang(circle_points(p.center_a, p.radius, phi)))
        vb = hp.get_interp_val(e, *hp.vec2ang(circle_points(p.center_b, p.radius, p.orientation * phi + p.twist)))
        got.append(np.corrcoef(va, vb)[0, 1])
        rho.append((3.0 + math.cos(2.0 * p.radius) ** 2) / 4.0)
        radius.append(p.radius)
    got, rho, radius = map(np.array, (got, rho, radius))
    assert len(got) == 40 and abs(np.mean(got - rho)) < 0.03
    small, near45 = radius < math.radians(15), np.abs(radius - math.radians(45)) < math.radians(10)
    assert got[small].mean() > 0.9 and got[near45].mean() < 0.82    # the law's radius dependence


CONFIG = """
[space]
family = "E1"
lengths = [1.6, 1.6, 1.6]
[sky]
nside = 16
lmax = 24
seed = 2
terms = ["sw", "doppler", "isw"]
method = "eigenmode"
pixwin = false
polarisation = true
"""


def test_synth_writes_flat_iqu_with_zero_b(tmp_path, capsys):
    # B = 0 for scalar modes: healpy.map2alm of the written Q, U (float64) gives B power below
    # 1e-6 of the E power at every l <= lmax (numerical noise of the pixel transform), and the E of
    # the file equals the sky's a_E (check: healpy map2alm / alm2map, spin 2)
    cfg = tmp_path / "e1.toml"
    cfg.write_text(textwrap.dedent(CONFIG))
    out = tmp_path / "e1.fits"
    rc = main(["synth", str(cfg), "--out", str(out), "--dtype", "float64"])
    _, err = capsys.readouterr()
    assert rc == 0, err
    iqu = hp.read_map(str(out), field=(0, 1, 2), dtype=None)
    _, a_e, a_b = hp.map2alm(iqu, lmax=24, pol=True, iter=5)
    ee, bb = hp.alm2cl(a_e), hp.alm2cl(a_b)
    assert np.all(bb[2:] < 1e-6 * ee[2:])
    from topology.config import load_config
    from topology.skies import synthesize_polarised

    res = synthesize_polarised(load_config(str(cfg)))
    assert len(res.pairs) == 3 and res.sky.meta["method"] == "eigenmode"
    ref = res.sky.meta["alm_e"]
    assert np.abs(a_e - ref).max() < 1e-3 * np.abs(ref).max()


def test_bad_input():
    space = build_space({"family": "E1", "lengths": [1.6, 1.6, 1.6]})
    with pytest.raises(InputError, match="terms"):
        flat_polarised_sky(space, OBSERVER, COSMO, lmax=8, terms=("sw",))
    with pytest.raises(InputError, match="eigenmode sum only"):
        flat_polarised_sky(space, OBSERVER, COSMO, lmax=8, method="grid")
    with pytest.raises(InputError, match="3 nside"):
        flat_polarised_sky(space, OBSERVER, COSMO, lmax=40, nside=8)
