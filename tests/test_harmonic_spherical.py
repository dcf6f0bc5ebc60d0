"""The harmonic view of spherical spaces (topology.harmonic.spherical): the covariance of the real
a_lm from the invariant S^3 modes of the skies, against the skies themselves (exactly, and by the
sample covariance of many skies), the covering space S^3, and the divergence against size."""

import math

import numpy as np
import pytest

from topology import geometry as geo
from topology.cosmology import Cosmology
from topology.harmonic import alm_to_real, n_coefficients, space_covariance
from topology.harmonic.kl import gaussian_kl
from topology.harmonic.rotation import real_rotation
from topology.harmonic.spherical import degree_columns
from topology.skies.s3_spectra import s3_sachs_wolfe_cl
from topology.skies.spherical import sky_frame, spherical_sky
from topology.spaces import build_space
from topology.spaces.spherical import SphericalSpace

CLOSED = Cosmology(omega_k=-0.1)                 # chi_rec / R_c = 1.01: few degrees, cheap skies
POINT = np.array([0.3, -0.5, 0.7, 0.2]) / math.sqrt(0.87)
OFF_CENTRE = geo.Observer.make("spherical", POINT, geo.euler_zyz(0.3, 0.9, -0.4))
CENTRE = geo.Observer.make("spherical", [1.0, 0.0, 0.0, 0.0])


def _kl(space, observer=CENTRE, cosmology=CLOSED, lmax=6, **kw):
    cov = space_covariance(space, observer, cosmology, lmax=lmax, **kw)
    return gaussian_kl(cov.matrix, np.diag(cov.iso_diagonal))


@pytest.mark.parametrize("complement", [True, False])
def test_covering_space_is_exactly_the_isotropic_reference(complement):
    # S^3 itself (Gamma = 1) seen off centre in a turned frame: the sum over its (k+1)^2 modes per
    # degree (spherical tensor operators, the sky frame's rotation) must equal diag(C_l) of the
    # zonal-kernel spectrum (skies.s3_spectra: the two-point function sum_k sigma_k^2 Y_k(psi) and
    # a Gauss-Legendre transform, an independent path; addition theorem of S^3, Lehoucq et al.
    # 2002, CQG 19, 4683; the closed-space SW variance per mode sigma_k^2 = 2 pi^2 P_R(q) /
    # (beta (beta^2 - 1)), Lehoucq et al. 2002 and Aurich, Lustig & Steiner 2005, CQG 22, 2061,
    # as in skies.spherical), so the divergence is zero to rounding
    s3 = SphericalSpace("S3", np.array([[[1.0, 0, 0, 0], [1.0, 0, 0, 0]]]), {}, homogeneous=True)
    lmax = 6
    cov = space_covariance(s3, OFF_CENTRE, CLOSED, lmax=lmax, complement=complement)
    d = np.diag(cov.matrix)
    assert np.abs(d / cov.iso_diagonal - 1).max() < 1e-12
    assert np.abs(cov.matrix - np.diag(d)).max() < 1e-13 * d.max()
    assert gaussian_kl(cov.matrix, np.diag(cov.iso_diagonal)).kl_nats < 1e-20
    assert cov.meta["kmax"] == math.ceil(2 * lmax / cov.meta["chi"]) and cov.n_modes == sum(
        (k + 1) ** 2 for k in range(2, cov.meta["kmax"] + 1))
    # the reference is the closed-space SW spectrum of all degrees: exactly (to the Richardson
    # extrapolation's 1e-5) with the complement, to the skies' tail accuracy without (0.1-0.6 %
    # at lmax >= 20, skies.s3_spectra; 2 % measured here at lmax 6); the complement carries the
    # power beyond kmax (a few per cent)
    full = s3_sachs_wolfe_cl(CLOSED, lmax, 60 * cov.meta["kmax"])
    assert np.abs(cov.cl_iso[2:] / full[2:] - 1).max() < (1e-4 if complement else 0.03)
    share = cov.cl_complement[2:] / cov.cl_iso[2:]
    assert (0.005 < share.min() and share.max() < 0.2) if complement else not share.any()


@pytest.mark.parametrize("spec", [{"family": "lens", "p": 5, "q": 2}, {"family": "prism", "m": 2},
                                  {"family": "dodecahedral"}])
def test_columns_replay_the_sky_exactly(spec):
    # the covariance's columns are the linear map from the sky's drawn complex weights w to its real
    # a_lm: sum_j sqrt(2) (Re w_j, Im w_j) . (the two columns of mode j) must give the sky of
    # skies.spherical.spherical_sky (same degrees, tail weights, frame) to rounding
    space = build_space(spec)
    lmax = 6
    sky = spherical_sky(space, OFF_CENTRE, CLOSED, lmax=lmax, seed=4)
    field = sky.meta["field"]
    rot = real_rotation(sky_frame(OFF_CENTRE), lmax)
    r = np.zeros(n_coefficients(lmax))
    for k, deg, w, delta in field.degrees(with_delta=True):
        if deg.count == 0:
            continue
        w = w[deg.mask] if hasattr(deg, "mask") else w.ravel()
        for j0, W in degree_columns(deg, k, OFF_CENTRE, sky.meta["chi"], lmax, field.amplitude[k], rot, delta,
                                    field.scale, block=7):
            b = W.shape[1] // 2
            r += math.sqrt(2.0) * (W[:, :b] @ w[j0:j0 + b].real + W[:, b:] @ w[j0:j0 + b].imag)
    ref = alm_to_real(sky.alm, lmax)
    assert np.abs(r - ref).max() < 1e-12 * np.abs(ref).max()


def test_covariance_matches_the_sample_covariance_of_skies():
    # 300 skies of L(5, 2) (not homogeneous) seen off centre, from the sky maker itself, against the
    # covariance of exactly the skies' distribution (complement=False: their degrees and tail
    # weights); each entry of the sample covariance S of n zero-mean Gaussian vectors has variance
    # (C_ij^2 + C_ii C_jj) / n (Wishart; common practice)
    space = build_space({"family": "lens", "p": 5, "q": 2})
    lmax, n = 4, 300
    cov = space_covariance(space, OFF_CENTRE, CLOSED, lmax=lmax, complement=False)
    R = np.array([alm_to_real(spherical_sky(space, OFF_CENTRE, CLOSED, lmax=lmax, seed=s).alm, lmax)
                  for s in range(n)])
    S = R.T @ R / n
    iu = np.triu_indices(cov.n)

    def z(C):
        d = np.diag(C)
        return ((S - C) / np.sqrt((C**2 + np.outer(d, d)) / n))[iu]

    z_top = z(cov.matrix)
    assert np.abs(z_top).max() < 5.0                      # 231 entries
    assert 0.6 < np.mean(z_top**2) < 1.4
    assert np.mean(z(np.diag(cov.iso_diagonal)) ** 2) > 2.0   # the test tells the space from S^3


def test_divergence_grows_as_the_space_shrinks():
    # L(p, 1) has volume 2 pi^2 / p R_c^3: at a fixed background (chi_rec / R_c = 1.01) the
    # divergence grows with p (measured at lmax 6: 1.6, 4.9, 10.2 nats for p = 3, 5, 8). The
    # dodecahedral space (injectivity radius pi/10 = 0.31 R_c) at Omega_K = -0.005, -0.015, -0.05
    # (chi_rec / R_c = 0.22, 0.38, 0.71: no matched circles, then circles) at lmax 8: measured
    # 0.107, 24.3, 63.7 nats. check: Planck 2015 XVIII (A&A 594, A18; qualitative, from memory):
    # as for the tori, the topological signal of the positively curved spaces fades once the space
    # outgrows the last-scattering sphere (no matched circles)
    lens = [_kl(build_space({"family": "lens", "p": p, "q": 1})).kl_nats for p in (3, 5, 8)]
    assert 0.5 < lens[0] < lens[1] < lens[2] < 100
    dodec = build_space({"family": "dodecahedral"})
    big, mid, small = (_kl(dodec, cosmology=Cosmology(omega_k=ok), lmax=8).kl_nats for ok in (-0.005, -0.015, -0.05))
    assert small > mid > 100 * big > 0
    # the divergence converges in the cut with the complement: twice the degrees move it < 2 %
    finer = _kl(dodec, cosmology=Cosmology(omega_k=-0.015), lmax=8, kchi_max=32.0).kl_nats
    assert abs(finer / mid - 1) < 0.02


def test_homogeneous_lens_space_does_not_depend_on_the_observer():
    # L(p, 1) is a Clifford translation group (homogeneous): D must not depend on the observer's
    # point or frame (the real basis is orthogonal under rotations); L(5, 2) is not homogeneous
    homog = build_space({"family": "lens", "p": 6, "q": 1})
    assert _kl(homog).kl_nats == pytest.approx(_kl(homog, OFF_CENTRE).kl_nats, rel=1e-9)
    other = build_space({"family": "lens", "p": 5, "q": 2})
    assert abs(_kl(other).kl_nats / _kl(other, OFF_CENTRE).kl_nats - 1) > 0.05


LENS_CONFIG = """
[cosmology]
omega_k = -0.05

[space]
family = "lens"
p = 6
q = 1

[observer]
position = [1.0, 0.0, 0.0, 0.0]

[harmonic]
lmax = 4
scales = [1.0, 3.0, 0.5]
"""


def test_command_line_spherical_rows_json_and_plot(tmp_path, capsys):
    # `topology harmonic` on a lens space: the scales multiply R_c (Omega_K / s^2); the config's
    # own number equals the Python API's, the scale 1 row repeats it, and the rows follow the size
    import json

    from topology.cli import main

    cfg = tmp_path / "lens.toml"
    cfg.write_text(LENS_CONFIG)
    png = tmp_path / "kl.png"
    assert main(["harmonic", str(cfg), "--json", "--plot", str(png)]) == 0
    out = json.loads(capsys.readouterr().out)
    ref = _kl(build_space({"family": "lens", "p": 6, "q": 1}), cosmology=Cosmology(omega_k=-0.05), lmax=4).kl_nats
    assert out["lmax"] == 4 and out["geometry"] == "spherical"
    assert out["kl_nats"] == pytest.approx(ref, rel=1e-12)
    rows = {r["scale"]: r for r in out["rows"]}
    assert rows[1.0]["kl_nats"] == pytest.approx(ref, rel=1e-12)
    assert rows[0.5]["omega_k"] == pytest.approx(-0.2) and rows[3.0]["omega_k"] == pytest.approx(-0.05 / 9)
    assert rows[0.5]["kl_nats"] > rows[1.0]["kl_nats"] > 10 * rows[3.0]["kl_nats"] > 0
    # injectivity radius pi/6 = 0.52 R_c: circles while chi_rec / R_c exceeds it
    assert rows[0.5]["circles"] and rows[1.0]["circles"] and not rows[3.0]["circles"]
    assert rows[1.0]["nearest_image"] == pytest.approx(math.pi / 3)
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    # a scale without a last-scattering surface: one line naming the key and the file
    cfg.write_text(LENS_CONFIG.replace("scales = [1.0, 3.0, 0.5]", "scales = [1.0, 0.1]"))
    assert main(["harmonic", str(cfg)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "[harmonic] scales" in err[0] and str(cfg) in err[0], err
    # the likelihood of a map is flat-only so far: refused in one line before any work
    cfg.write_text(LENS_CONFIG.replace("lmax = 4", "lmax = 4\nnside = 4\nnoise_uk = 5.0"))
    assert main(["harmonic", str(cfg), "--map", str(tmp_path / "none.fits")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--map" in err[0], err
