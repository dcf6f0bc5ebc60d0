"""Geometric bounds from alpha_min (topology.bounds, topology bound) against published values,
against the predicted circles of spaces just inside and just beyond each bound, and against
brute-force maximisation over observer positions."""

import json
import math

import numpy as np
import pytest
from astropy.cosmology import LambdaCDM
from astropy.table import Table

from topology import bounds
from topology import geometry as geo
from topology.circles import predict_circles
from topology.cli import main
from topology.cosmology import Cosmology
from topology.errors import InputError
from topology.spaces import build_space


def _max_radius(space, observer, chi):
    pairs = predict_circles(space, observer, chi)
    return max((p.radius for p in pairs), default=0.0)


# --------------------------------------------------------------------------------------------
# flat
# --------------------------------------------------------------------------------------------
def test_planck_2015_cubic_torus_14_deg():
    # check: Planck Collaboration 2016, A&A 594, A18 (Planck 2015 XVIII): no circles down to
    # alpha_min ~ 14 deg -> cubic torus R_i > 0.97 chi_rec (cos 14 deg = 0.9703)
    a = math.radians(14.0)
    ri = bounds.cubic_torus_inscribed_radius_over_chi_rec(a)
    assert ri == pytest.approx(0.9703, abs=5e-5)
    assert ri > 0.97
    # the same through the predicted circles of cubic tori just beyond / just inside the bound
    for f, allowed in ((1.0 + 1e-6, True), (1.0 - 1e-6, False)):
        L = 2.0 * ri * f
        space = build_space({"family": "E1", "lengths": [L, L, L]})
        obs = geo.Observer.make("flat", [0.21, -0.33, 0.4])
        assert (_max_radius(space, obs, 1.0) < a) == allowed


def test_petersen_2023_shortest_loop_10_deg():
    # check: Petersen et al. 2023 (COMPACT, "Cosmic topology. Part I", JCAP): circles excluded
    # down to ~10 deg -> shortest loop through us > 98.5% of the LSS diameter (cos 10 = 0.9848)
    a = math.radians(10.0)
    assert bounds.flat_min_loop_over_lss_diameter(a) == pytest.approx(0.985, abs=5e-4)
    # and every flat family's scale bound reproduces it: s_min d_min = 2 chi_rec cos(alpha_min)
    space = build_space({"family": "E3", "lengths": [1.3, 0.7]})
    obs = geo.Observer.make("flat", [0.2, 0.1, 0.0])
    r = bounds.flat_space_bound(space, obs, a, n_positions=50)
    assert r["min_scale_factor"] * r["shortest_displacement_over_chi_rec"] == pytest.approx(2 * math.cos(a), rel=1e-12)


@pytest.mark.parametrize("family,lengths,pos", [
    ("E2", [1.55, 1.7, 0.8], [0.12, -0.05, 0.0]),
    ("E6", [0.9, 1.1, 1.2], [0.3, -0.2, 0.15]),
    ("E7", [1.2, 1.4, 0.7], [0.25, 0.1, -0.3]),
])
def test_flat_scale_bound_against_predicted_circles(family, lengths, pos):
    # consistency with the circle-radius formula cos(alpha) = d/(2 chi) (Cornish, Spergel &
    # Starkman 1998): scaled just beyond s_min no circle reaches alpha_min, just inside one does
    a = math.radians(12.0)
    space = build_space({"family": family, "lengths": lengths})
    r = bounds.flat_space_bound(space, geo.Observer.make("flat", pos), a, n_positions=10)
    s = r["min_scale_factor"]
    assert r["excluded"] == (s >= 1.0)
    for f, allowed in ((1.0 + 1e-6, True), (1.0 - 1e-6, False)):
        sp = build_space({"family": family, "lengths": [v * s * f for v in lengths]})
        obs = geo.Observer.make("flat", [v * s * f for v in pos])
        assert (_max_radius(sp, obs, 1.0) < a) == allowed


@pytest.mark.parametrize("family,lengths", [("E2", [1.55, 1.7, 0.8]), ("E5", [1.5, 0.3]), ("E9", [1.2, 1.3, 0.6]),
                                            ("E12", [1.5, 0.7]), ("E17", [0.8])])
def test_vectorised_flat_displacements_match_space_enumeration(family, lengths):
    # the Monte Carlo helper against the space's own element enumeration (common practice)
    space = build_space({"family": family, "lengths": lengths})
    X = np.random.default_rng(np.random.SeedSequence(7)).uniform(-1.5, 1.5, (25, 3))
    d1 = bounds.flat_shortest_displacements(space, X)
    d2 = [bounds.shortest_displacement(space, geo.Observer.make("flat", x)) for x in X]
    assert d1 == pytest.approx(d2, abs=1e-12)


def test_excluded_fraction_of_observers_e2_analytic():
    # check: analytic (derived here, common practice): the half turns of E2 with plane lattice
    # L x L have axes on the lattice (L/2) Z^2 and move x by sqrt(L3^2 + 4 rho^2) (rho: distance
    # to the axis). With L = 2.6, L3 = 1.5 the pure translations (>= 2.6) never give circles at
    # 14 deg, so the excluded positions are disjoint discs of radius r, 4 r^2 = 4 cos^2 - L3^2,
    # and the fraction is pi r^2 / (L/2)^2 = pi (4 cos^2(alpha_min) - L3^2) / L^2 = 0.7045.
    a = math.radians(14.0)
    L, L3 = 2.6, 1.5
    want = math.pi * (4 * math.cos(a) ** 2 - L3**2) / L**2
    space = build_space({"family": "E2", "lengths": [L, L, L3]})
    r = bounds.flat_space_bound(space, geo.Observer.make("flat", [0.0, 0.0, 0.0]), a, n_positions=20000, seed=11)
    op = r["observer_positions"]
    assert op["n_positions"] == 20000 and op["seed"] == 11
    assert op["excluded_fraction_stderr"] == pytest.approx(math.sqrt(want * (1 - want) / 20000), rel=0.05)
    assert abs(op["excluded_fraction"] - want) < 4 * op["excluded_fraction_stderr"]
    lo, hi = op["excluded_fraction_95"]
    assert lo < op["excluded_fraction"] < hi
    assert r["excluded"]  # the observer on a screw axis: d = L3 = 1.5 < 2 cos 14 deg
    assert r["shortest_displacement_over_chi_rec"] == pytest.approx(L3)


def test_homogeneous_and_noncompact_fractions():
    a = math.radians(14.0)
    torus = build_space({"family": "E1", "lengths": [2.0, 2.1, 2.2]})  # 2.0 > 2 cos 14 deg
    r = bounds.flat_space_bound(torus, geo.Observer.make("flat", [0.3, 0.0, 0.0]), a)
    assert not r["excluded"] and r["observer_positions"]["excluded_fraction"] == 0.0
    assert r["min_scale_factor"] == pytest.approx(2 * math.cos(a) / 2.0)
    chimney = build_space({"family": "E12", "lengths": [1.5, 0.7]})
    r = bounds.flat_space_bound(chimney, geo.Observer.make("flat", [0.0, 0.0, 0.0]), a)
    assert r["observer_positions"]["excluded_fraction"] is None


# --------------------------------------------------------------------------------------------
# spherical
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize("p,q", [(5, 2), (7, 2), (7, 3), (8, 3), (12, 5), (13, 5)])
def test_lens_maximisation_against_brute_force(p, q):
    # the exact vertex maximisation against random points of S^3 with the group's own matrices
    # (brute force); |z1|^2 is uniform on [0, 1] for uniform points of S^3 (common practice)
    t, d = bounds.lens_best_observer(p, q)
    space = build_space({"family": "lens", "p": p, "q": q})
    X = np.random.default_rng(np.random.SeedSequence([p, q])).normal(size=(20000, 4))
    brute = bounds.spherical_shortest_displacements(space, X)
    assert brute.max() <= d + 1e-12
    assert brute.max() == pytest.approx(d, abs=3e-3)
    # the displacement formula against the matrices at the same points
    Xn = X / np.linalg.norm(X, axis=1, keepdims=True)
    c = bounds.lens_displacement_cosines(p, q, Xn[:, 0] ** 2 + Xn[:, 1] ** 2)
    assert np.arccos(np.clip(c.max(axis=1), -1, 1)) == pytest.approx(brute, abs=1e-7)
    # and at the reported best observer, through the space's element enumeration
    obs = geo.Observer.make("spherical", bounds.lens_observer_point(t))
    assert bounds.shortest_displacement(space, obs) == pytest.approx(d, abs=1e-12)
    # a fine grid over t plus a bounded scalar refinement (scipy) agrees with the vertex search
    from scipy.optimize import minimize_scalar

    grid = np.linspace(0.0, 1.0, 100001)
    F = bounds.lens_displacement_cosines(p, q, grid).max(axis=1)
    assert F.min() >= math.cos(d) - 1e-14
    i = int(np.argmin(F))
    ref = minimize_scalar(lambda u: bounds.lens_displacement_cosines(p, q, u).max(),
                          bounds=(grid[max(i - 1, 0)], grid[min(i + 1, len(grid) - 1)]), method="bounded",
                          options={"xatol": 1e-13})
    assert math.acos(min(1.0, ref.fun)) == pytest.approx(d, abs=1e-7)
    # a local optimiser started anywhere cannot beat it
    d_opt, _ = bounds.spherical_max_over_observers(space, n_points=2000, seed=3)
    assert d_opt <= d + 1e-9 and d_opt == pytest.approx(d, abs=1e-6)


def test_injectivity_radii_give_the_shortest_displacements():
    # check: Gausmann et al. 2001 (Class. Quantum Grav. 18, 5155): injectivity radius pi/p for
    # L(p, 1), pi/10 dodecahedral, pi/8 octahedral, pi/6 tetrahedral (d_min = 2 r_inj); prism
    # D*_m: pi/(2m) (from memory)
    rows = bounds.spherical_family_bounds(math.radians(14.0), Cosmology(), p_max=9, m_max=5)
    by = {(r["family"], r.get("p"), r.get("q"), r.get("m")): r for r in rows}
    want = {("dodecahedral", None, None, None): math.pi / 5, ("octahedral", None, None, None): math.pi / 4,
            ("tetrahedral", None, None, None): math.pi / 3, ("prism", None, None, 5): math.pi / 5}
    want.update({("lens", p, 1, None): 2 * math.pi / p for p in range(2, 10)})
    for k, d in want.items():
        assert by[k]["shortest_displacement_over_curvature_radius"] == pytest.approx(d, abs=1e-9)
        chi = math.atan(math.tan(d / 2) / math.cos(math.radians(14.0)))
        assert by[k]["max_chi_rec_over_curvature_radius"] == pytest.approx(chi, rel=1e-12)
    # coprime q <= p/2, one per isometry class: L(9, 4) is L(9, 2) (4 = -2^-1 mod 9)
    assert sorted(r["q"] for r in rows if r["family"] == "lens" and r["p"] == 9) == [1, 2]
    assert next(r for r in rows if r["family"] == "lens" and (r["p"], r["q"]) == (9, 2))["isometric_q"] == [2, 4]


@pytest.mark.parametrize("p", range(2, 16))
def test_isometric_lens_spaces_are_folded_by_the_classification(p):
    # check: the classification of lens spaces (Reidemeister 1935; Brody 1960): L(p, q) and
    # L(p, q') are isometric iff q' = +-q^(+-1) mod p. Isometric spaces share every metric
    # invariant: the largest shortest displacement over observers agrees within each class, and
    # the folded rows are one per class
    qs = [q for q in range(1, p // 2 + 1) if math.gcd(p, q) == 1]
    classes = {}
    for q in qs:
        inv = pow(q, -1, p)
        members = {min(x % p, p - x % p) for x in (q, -q, inv, -inv)}
        classes.setdefault(frozenset(members), []).append(q)
        assert bounds.lens_isometric_qs(p, q) == sorted(members)
    for members in classes:
        d = [bounds.lens_best_observer(p, q)[1] for q in members]
        assert max(d) - min(d) < 1e-9, (p, sorted(members), d)
    rows = bounds.spherical_family_bounds(math.radians(14.0), Cosmology(), p_max=p, m_max=2)
    lens_p = [r["q"] for r in rows if r["family"] == "lens" and r["p"] == p]
    assert sorted(lens_p) == sorted(min(m) for m in classes)


@pytest.mark.parametrize("spec", [{"family": "lens", "p": 7, "q": 2}, {"family": "lens", "p": 12, "q": 5},
                                  {"family": "dodecahedral"}])
def test_spherical_bound_against_predicted_circles(spec):
    # consistency with cos(alpha) = tan(d/2)/tan(chi) (Cornish, Spergel & Starkman 1998): just
    # inside chi_max the best observer sees no circle >= alpha_min; just beyond every observer does
    a = math.radians(14.0)
    rows = bounds.spherical_family_bounds(a, Cosmology(), p_max=12, m_max=2)
    row = next(r for r in rows if r["family"] == spec["family"] and r.get("p") == spec.get("p") and r.get("q") == spec.get("q"))
    chi = row["max_chi_rec_over_curvature_radius"]
    space = build_space(spec)
    best = row.get("best_observer_position", [1.0, 0.0, 0.0, 0.0])
    assert _max_radius(space, geo.Observer.make("spherical", best, geo.euler_zyz(0.3, 0.2, 0.1)), chi * (1 - 1e-6)) < a
    rng = np.random.default_rng(np.random.SeedSequence(5))
    for x in [best] + list(rng.normal(size=(4, 4))):
        assert _max_radius(space, geo.Observer.make("spherical", x), chi * (1 + 1e-6)) >= a


def test_omega_k_round_trip_against_astropy():
    # check: astropy.cosmology.LambdaCDM (same h, densities, T_cmb, N_eff, massless neutrinos)
    # at the bounding Omega_K gives back chi_rec/R_c = chi_max, i.e. sqrt(|Omega_K|) chi_rec H0/c
    cosmo = Cosmology()
    s = bounds.bound_summary(14.0, cosmo, p_max=5, m_max=2)
    assert "Omega_Lambda taking up the difference" in s["convention"]
    for row in s["spherical"]:
        ok, chi = row["min_omega_k"], row["max_chi_rec_over_curvature_radius"]
        assert ok < 0
        c2 = cosmo.with_omega_k(ok)
        assert c2.zstar == pytest.approx(cosmo.zstar, rel=1e-14)  # z_* held fixed
        assert c2.chi_rec_over_curvature_radius == pytest.approx(chi, rel=1e-9)
        ap = LambdaCDM(H0=100 * cosmo.h, Om0=cosmo.omega_m, Ode0=c2.omega_lambda, Tcmb0=cosmo.t_cmb,
                       Neff=cosmo.n_eff, m_nu=0.0, Ob0=cosmo.omega_b_h2 / cosmo.h**2)
        assert ap.Ok0 == pytest.approx(ok, abs=1e-9)
        dc = ap.comoving_distance(cosmo.zstar).to_value("Mpc")
        assert math.sqrt(-ok) * dc / ap.hubble_distance.to_value("Mpc") == pytest.approx(chi, rel=1e-4)
        assert row["min_curvature_radius_mpc"] == pytest.approx(ap.hubble_distance.to_value("Mpc") / math.sqrt(-ok))


# --------------------------------------------------------------------------------------------
# hyperbolic
# --------------------------------------------------------------------------------------------
def _boost_x(length):
    m = np.eye(4)
    m[0, 0] = m[1, 1] = math.cosh(length)
    m[0, 1] = m[1, 0] = math.sinh(length)
    return m


def test_hyperbolic_bound_from_a_generator_file(tmp_path):
    # cos(alpha) = tanh(d/2)/tanh(chi) (Cornish, Spergel & Starkman 1998) for the cyclic group
    # of a boost of length 0.5 (displacement 0.5 at the origin; common practice)
    gen = tmp_path / "boost.json"
    gen.write_text(json.dumps({"name": "test boost", "generators": [_boost_x(0.5).tolist()]}))
    space = build_space({"family": "hyperbolic", "generators": str(gen)})
    obs = geo.Observer.make("hyperbolic", [0.0, 0.0, 0.0])
    a = math.radians(14.0)
    s = bounds.bound_summary(14.0, Cosmology(), space=space, observer=obs, p_max=3, m_max=2)
    h = s["hyperbolic"]
    chi = h["max_chi_rec_over_curvature_radius"]
    assert h["shortest_displacement_over_curvature_radius"] == pytest.approx(0.5, rel=1e-12)
    assert chi == pytest.approx(math.atanh(math.tanh(0.25) / math.cos(a)), rel=1e-12)
    assert _max_radius(space, obs, chi * (1 - 1e-6)) < a <= _max_radius(space, obs, chi * (1 + 1e-6))
    c2 = Cosmology().with_omega_k(h["max_omega_k"])
    assert c2.chi_rec_over_curvature_radius == pytest.approx(chi, rel=1e-9)
    # a long boost: tanh(d/2) >= cos(alpha_min) means no bound at all
    gen.write_text(json.dumps({"generators": [_boost_x(6.0).tolist()]}))
    space = build_space({"family": "hyperbolic", "generators": str(gen)})
    h = bounds.bound_summary(14.0, Cosmology(), space=space, observer=obs, p_max=3, m_max=2)["hyperbolic"]
    assert h["max_chi_rec_over_curvature_radius"] is None and h["max_omega_k"] is None and h["note"]


# --------------------------------------------------------------------------------------------
# command line
# --------------------------------------------------------------------------------------------
def test_cli_json_contract_and_tables(tmp_path, capsys):
    cfg = tmp_path / "c.toml"
    cfg.write_text('[space]\nfamily = "E2"\nlengths = [1.55, 1.7, 0.8]\n[observer]\nposition = [0.12, -0.05, 0.0]\n')
    stem = tmp_path / "bounds"
    rc = main(["bound", "--alpha-min", "14", str(cfg), "--json", "--p-max", "6", "--m-max", "3",
               "--positions", "200", "--table", str(stem) + ".tex"])
    assert rc == 0
    s = json.loads(capsys.readouterr().out)
    for k in ("alpha_min_deg", "chi_rec_mpc", "flat", "spherical", "convention", "assumptions"):
        assert k in s
    assert s["alpha_min_deg"] == 14.0
    # check: Planck 2018 VI central values give chi_rec ~ 13.9 Gpc (from memory)
    assert 13500 < s["chi_rec_mpc"] < 14300
    assert s["flat"]["min_loop_over_lss_diameter"] == pytest.approx(math.cos(math.radians(14)))
    assert s["flat"]["cubic_torus_inscribed_radius_over_chi_rec"] == pytest.approx(math.cos(math.radians(14)))
    assert s["flat"]["configured"]["family"] == "E2"
    assert s["flat"]["configured"]["observer_positions"]["n_positions"] == 200
    fams = {r["family"] for r in s["spherical"]}
    assert {"lens", "prism", "tetrahedral", "octahedral", "dodecahedral"} <= fams
    for r in s["spherical"]:
        for k in ("max_chi_rec_over_curvature_radius", "min_curvature_radius_over_chi_rec", "min_omega_k"):
            assert k in r
        assert ("p" in r and "q" in r) if r["family"] == "lens" else True
        assert "m" in r if r["family"] == "prism" else True
        assert r["min_curvature_radius_over_chi_rec"] == pytest.approx(1 / r["max_chi_rec_over_curvature_radius"])
    t = Table.read(stem.with_suffix(".ecsv"), format="ascii.ecsv")
    assert len(t) == len(s["spherical"])
    assert t.meta["alpha_min_deg"] == 14.0 and "Omega_Lambda" in t.meta["convention"]
    assert str(t["min_curvature_radius_mpc"].unit) == "Mpc"
    assert t["omega_k_bound"][0] == pytest.approx(s["spherical"][0]["min_omega_k"])
    tex = stem.with_suffix(".tex").read_text()
    assert "\\caption{" in tex and "14^\\circ" in tex and "$\\Omega_\\Lambda$ taking up the difference" in tex
    # the long table: caption, header on the first and on later pages, one row per distinct spherical
    # space; the flat table: header, any flat space, cubic torus, the configured E2
    assert tex.count("\\\\") == (len(s["spherical"]) + 3) + (1 + 3) and tex.count("\\toprule") == 3
    from rendering import compile_latex

    compile_latex(stem.with_suffix(".tex"), tmp_path / "tex")


def test_cli_text_output(capsys):
    assert main(["bound", "--alpha-min", "10", "--p-max", "4", "--m-max", "2"]) == 0
    out = capsys.readouterr().out
    assert "shortest loop through us > 0.9848" in out and "dodecahedral" in out


@pytest.mark.parametrize("alpha", ["0", "-3", "90.5", "nan", "inf"])
def test_cli_bad_alpha_exit_2_one_line(alpha, tmp_path, capsys):
    stem = tmp_path / "t"
    assert main(["bound", "--alpha-min", alpha, "--table", str(stem)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--alpha-min" in err
    assert not list(tmp_path.iterdir())  # nothing written


def test_cli_bad_table_folder_and_library_errors(tmp_path, capsys):
    assert main(["bound", "--alpha-min", "10", "--table", str(tmp_path / "missing" / "t")]) == 2
    assert capsys.readouterr().err.count("\n") == 1
    with pytest.raises(InputError):
        bounds.bound_summary(0.0)
    with pytest.raises(InputError):
        bounds.bound_summary(10.0, p_max=1)
    with pytest.raises(InputError):
        bounds.check_alpha_min(math.radians(91.0))
