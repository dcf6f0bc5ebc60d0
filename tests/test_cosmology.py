"""Background cosmology (topology.cosmology) against astropy.cosmology and CAMB."""

import math

import camb
import pytest
from astropy import constants as const
from astropy.cosmology import FlatLambdaCDM, LambdaCDM

from topology.cli import main
from topology.config import config_from_dict
from topology.cosmology import Cosmology, z_star_hu_sugiyama
from topology.errors import InputError
from topology.scenario import cosmology_from_config

MODELS = [
    dict(h=0.6736, omega_b_h2=0.02237, omega_c_h2=0.1200, omega_k=0.0),  # Planck 2018 VI Table 2
    dict(h=0.70, omega_b_h2=0.0215, omega_c_h2=0.110, omega_k=-0.05),  # closed
    dict(h=0.65, omega_b_h2=0.0240, omega_c_h2=0.130, omega_k=0.05),  # open
    dict(h=0.55, omega_b_h2=0.0220, omega_c_h2=0.125, omega_k=-0.2, n_eff=2.5, t_cmb=2.9),  # far from Planck
]


def _astropy(c: Cosmology):
    """astropy model with the same parameters: massless neutrinos (m_nu = 0), T_cmb, N_eff."""
    kw = dict(H0=100 * c.h, Om0=c.omega_m, Tcmb0=c.t_cmb, Neff=c.n_eff, m_nu=0.0, Ob0=c.omega_b_h2 / c.h**2)
    if c.omega_k == 0:
        return FlatLambdaCDM(**kw)
    return LambdaCDM(Ode0=c.omega_lambda, **kw)


@pytest.mark.parametrize("kw", MODELS)
def test_chi_rec_against_astropy(kw):
    # check: astropy.cosmology FlatLambdaCDM / LambdaCDM (Ode0 set so that Ok0 matches), same
    # h, Omega_m, T_cmb, N_eff and massless neutrinos: comoving radial distance to z_* to 1e-4
    c = Cosmology(**kw)
    ap = _astropy(c)
    assert ap.Ok0 == pytest.approx(c.omega_k, abs=1e-10)
    assert ap.Ogamma0 == pytest.approx(c.omega_gamma, rel=1e-4)
    assert ap.Onu0 == pytest.approx(c.omega_nu, rel=1e-4)
    want = ap.comoving_distance(c.zstar).to_value("Mpc")
    assert c.chi_rec_mpc == pytest.approx(want, rel=1e-4)
    assert c.comoving_distance_mpc(3.0) == pytest.approx(ap.comoving_distance(3.0).to_value("Mpc"), rel=1e-4)


@pytest.mark.parametrize("kw", MODELS[:3])
def test_z_star_fit_against_camb(kw):
    # check: Hu & Sugiyama 1996 (ApJ 471, 542) eq. E1 against CAMB's derived 'zstar' (the
    # recombination history of CAMB, massless neutrinos) within 0.5%
    c = Cosmology(**kw)
    pars = camb.set_params(H0=100 * c.h, ombh2=c.omega_b_h2, omch2=c.omega_c_h2, omk=c.omega_k, TCMB=c.t_cmb,
                           mnu=0.0, num_massive_neutrinos=0, nnu=c.n_eff)
    zstar = camb.get_background(pars).get_derived_params()["zstar"]
    assert c.zstar == pytest.approx(zstar, rel=5e-3)
    assert z_star_hu_sugiyama(c.omega_b_h2, c.omega_b_h2 + c.omega_c_h2) == c.zstar


def test_z_star_given_overrides_fit():
    c = Cosmology(z_star=1100.0)
    assert c.zstar == 1100.0
    assert c.chi_rec_mpc == pytest.approx(_astropy(c).comoving_distance(1100.0).to_value("Mpc"), rel=1e-4)


@pytest.mark.parametrize("kw", MODELS[1:])
def test_curvature_radius(kw):
    # R_c = (c/H0)/sqrt(|Omega_K|) (common practice); checked through astropy's transverse
    # comoving distance D_M = R_c sin(chi/R_c) (closed) or R_c sinh(chi/R_c) (open)
    c = Cosmology(**kw)
    hubble = const.c.to_value("km/s") / (100 * c.h)
    assert c.curvature_radius_mpc == pytest.approx(hubble / math.sqrt(abs(c.omega_k)), rel=1e-12)
    ratio = c.chi_rec_over_curvature_radius
    assert ratio == pytest.approx(c.chi_rec_mpc / c.curvature_radius_mpc, rel=1e-12)
    f = math.sin if c.omega_k < 0 else math.sinh
    dm = _astropy(c).comoving_transverse_distance(c.zstar).to_value("Mpc")
    assert c.curvature_radius_mpc * f(ratio) == pytest.approx(dm, rel=1e-4)
    assert c.geometry == ("spherical" if c.omega_k < 0 else "hyperbolic")
    flat = Cosmology()
    assert flat.curvature_radius_mpc == math.inf and flat.chi_rec_over_curvature_radius is None


def test_omega_lambda_config_alternative():
    # Omega_K = 1 - Omega_m - Omega_r - Omega_Lambda; checked against astropy LambdaCDM with
    # the same Ode0, whose Ok0 and distance must agree
    cfg = config_from_dict({"cosmology": {"h": 0.68, "omega_lambda": 0.72}})
    c = cosmology_from_config(cfg)
    assert c.omega_lambda == pytest.approx(0.72, abs=1e-14)
    ap = LambdaCDM(H0=68.0, Om0=c.omega_m, Ode0=0.72, Tcmb0=c.t_cmb, Neff=c.n_eff, m_nu=0.0, Ob0=c.omega_b_h2 / 0.68**2)
    assert c.omega_k == pytest.approx(ap.Ok0, abs=1e-8)
    assert c.omega_k < 0
    assert c.chi_rec_mpc == pytest.approx(ap.comoving_distance(c.zstar).to_value("Mpc"), rel=1e-4)
    with pytest.raises(InputError, match="not both"):
        cosmology_from_config(config_from_dict({"cosmology": {"omega_k": 0.0, "omega_lambda": 0.7}}))


def test_with_omega_k_holds_physical_densities():
    # the bound convention: h, omega_b h^2, omega_c h^2 and z_* fixed, Omega_Lambda absorbs Omega_K
    c = Cosmology()
    c2 = c.with_omega_k(-0.02)
    assert (c2.h, c2.omega_b_h2, c2.omega_c_h2, c2.zstar) == (c.h, c.omega_b_h2, c.omega_c_h2, c.zstar)
    assert c2.omega_lambda == pytest.approx(c.omega_lambda + 0.02, abs=1e-15)


@pytest.mark.parametrize("kw,where", [
    (dict(omega_b_h2=-0.01), "omega_b_h2"),
    (dict(omega_c_h2=-0.1), "omega_c_h2"),
    (dict(h=5.0), "h"),
    (dict(h=0.05), "h"),
    (dict(t_cmb=0.0), "t_cmb"),
    (dict(n_eff=-1.0), "n_eff"),
    (dict(omega_k=1.5), "omega_k"),
    (dict(z_star=0.5), "z_star"),
])
def test_bad_cosmology_inputs(kw, where):
    with pytest.raises(InputError) as e:
        Cosmology(**kw)
    assert e.value.where == f"[cosmology] {where}"
    assert "\n" not in str(e.value)


def test_no_last_scattering_surface():
    # E(z)^2 = Omega_m (1+z)^3 + Omega_K (1+z)^2 + Omega_Lambda + ... turns negative before z_*
    # (a bounce) for a low-density, strongly closed model: 0.035 x 10^3 - 0.9 x 10^2 + 1.86 < 0
    with pytest.raises(InputError, match="no last-scattering surface"):
        Cosmology(h=2.0, omega_k=-0.9)
    # chi_rec >= pi R_c: the last-scattering sphere would wrap around S^3
    with pytest.raises(InputError, match="wraps"):
        Cosmology(omega_k=-0.9)


def test_bad_cosmology_in_a_config_exits_2(tmp_path, capsys):
    cfg = tmp_path / "bad.toml"
    cfg.write_text("[cosmology]\nh = 5.0\n")
    assert main(["bound", "--alpha-min", "10", str(cfg)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "[cosmology] h:" in err
