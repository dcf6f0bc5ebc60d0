"""Hyperbolic spaces from generator files, and the shipped Seifert-Weber dodecahedral space."""

import json
import math
from importlib import resources

import numpy as np
import pytest

from topology import geometry as geo
from topology.circles import circle_points, predict_circles
from topology.errors import InputError
from topology.spaces import build_space
from topology.spaces import seifert_weber as sw
from topology.spaces.hyperbolic import (
    enumerate_words,
    inverse,
    read_generators,
    translation_length,
    validate_lorentz,
)

J = geo.MINKOWSKI
SHIPPED = resources.files("topology") / "data" / "seifert_weber.json"
F = sw.face_distance()


@pytest.fixture(scope="module")
def space():
    return build_space({"family": "hyperbolic", "generators": "seifert_weber.json"})


@pytest.fixture(scope="module")
def shipped():
    return json.loads(SHIPPED.read_text())


def _boost(axis, s):
    return sw.boost4(np.asarray(axis, float) / np.linalg.norm(axis), s)


# --- the shipped file -----------------------------------------------------------------------
def test_shipped_file_is_regenerated_exactly(shipped):
    built = sw.build()
    assert set(built) == set(shipped)
    def same(a, b):
        # floats to 1e-12 (the last bits depend on the BLAS and libm of the machine), the rest exactly
        if isinstance(a, dict):
            return isinstance(b, dict) and set(a) == set(b) and all(same(a[k], b[k]) for k in a)
        if isinstance(a, (list, tuple)):
            return isinstance(b, (list, tuple)) and len(a) == len(b) and all(same(x, y) for x, y in zip(a, b))
        if isinstance(a, float) or isinstance(b, float):
            return abs(a - b) <= 1e-12 * max(1.0, abs(a))
        return a == b

    for key, value in built.items():
        assert same(shipped[key], value), key
    assert json.loads(sw.dumps(built)) == built  # the writer round-trips


def test_shipped_metadata(shipped):
    assert shipped["name"].startswith("Seifert-Weber")
    assert "Weber & Seifert 1933" in shipped["source"]
    # check: volume of the Seifert-Weber space 11.1990647 (from memory; the value Regina's test
    # suite uses for the Weber-Seifert space, Burton, Rubinstein & Tillmann 2012); here it is
    # an independent Klein-model quadrature of the dodecahedron
    assert shipped["volume"] == pytest.approx(11.1990647, abs=2e-7)
    assert shipped["injectivity_radius"] == pytest.approx(shipped["shortest_geodesic"] / 2)
    assert shipped["injectivity_radius"] <= shipped["injectivity_radius_at_center"]


def test_dodecahedron_geometry():
    # check: cos(delta) = 1/sqrt(5) between adjacent face directions (icosahedron vertices),
    # and the constructed face planes meet at the dihedral angle 2 pi/5 = 72 deg of the {5,3,5}
    # cell (Weber & Seifert 1933; Coxeter 1954); outward normals: cos(angle) = -<N1, N2>
    assert math.cos(sw.adjacent_angle()) == pytest.approx(1 / math.sqrt(5))
    N = sw.face_normals(F)
    adj = sw.adjacency()
    assert adj.sum(axis=1).tolist() == [5] * 12
    angles = [math.acos(-(N[i] @ J @ N[j])) for i, j in np.argwhere(adj)]
    assert np.allclose(angles, 2 * math.pi / 5, atol=1e-12)
    assert np.allclose(np.einsum("ni,ij,nj->n", N, J, N), 1.0)  # unit spacelike normals
    # the 20 vertices are points of H^3 (compact dodecahedron), each on exactly three faces
    pts, triples = sw.vertices(F)
    assert len(pts) == 20 and len(set(triples)) == 20
    assert np.allclose(-pts[:, 0] ** 2 + np.sum(pts[:, 1:] ** 2, axis=1), -1.0)
    on = np.abs(pts @ J @ N.T) < 1e-12
    assert on.sum(axis=1).tolist() == [3] * 20
    assert np.all((pts @ J @ N.T)[~on] < 0)  # and inside every other face


def test_generators_are_lorentz_det1_orthochronous(shipped):
    gens = np.array(shipped["generators"])
    assert gens.shape == (6, 4, 4)
    for g in gens:
        # common practice: SO+(3,1) means g^T J g = J, det g = 1, g_00 >= 1
        assert np.abs(g.T @ J @ g - J).max() < 1e-12
        assert np.linalg.det(g) == pytest.approx(1.0, abs=1e-12)
        assert g[0, 0] >= 1.0
        validate_lorentz(g, "test")


def test_pairings_map_opposite_face_onto_face():
    # g_n maps the face of direction -n onto the face of direction n: centre to centre and the
    # five vertices onto the five vertices (Weber & Seifert 1933 gluing)
    g = sw.face_pairings(F)
    C = sw.face_centers(F)
    pts, triples = sw.vertices(F)
    for i in range(12):
        o = (i + 6) % 12
        assert np.abs(g[i] @ C[o] - C[i]).max() < 1e-12
        src = pts[[t for t, tr in enumerate(triples) if o in tr]] @ g[i].T
        dst = pts[[t for t, tr in enumerate(triples) if i in tr]]
        assert all(np.abs(dst - p).max(axis=1).min() < 1e-10 for p in src)
        assert np.abs(g[o] @ g[i] - np.eye(4)).max() < 1e-12  # g_{-n} = g_n^-1
        # the centre moves by 2 f; the axis n is kept; the twist is 3/10 turn
        assert geo.distance("hyperbolic", geo.origin("hyperbolic"), g[i][:, 0]) == pytest.approx(2 * F)


def test_edge_cycles_close_with_angle_sum_2pi():
    # Poincare's polyhedron theorem (common practice): the 30 edges fall into 6 cycles of 5,
    # 5 x 72 deg = 360 deg, so every cycle transformation is the identity (Weber & Seifert 1933)
    cycles = sw.edge_cycles(F)
    assert len(cycles) == 6
    assert sorted(len(path) for path, _ in cycles) == [5] * 6
    assert len(set().union(*[set(p) for p, _ in cycles])) == 30
    for _, prod in cycles:
        assert np.abs(prod - np.eye(4)).max() < 1e-10
    # a wrong twist (2/10 turn) does not even pair faces onto faces
    with pytest.raises(AssertionError):
        sw.edge_cycles(F, twist=2 * 2 * math.pi / 10)


def test_one_vertex_class_and_euler_characteristic_zero():
    # Seifert-Weber cell structure: 1 vertex, 6 edges, 6 faces, 1 cell; a closed 3-manifold
    # has Euler characteristic 0 (common practice)
    g = sw.face_pairings(F)
    pts, triples = sw.vertices(F)
    parent = list(range(20))

    def root(a):
        while parent[a] != a:
            a = parent[a]
        return a

    for i in range(12):
        for t, tr in enumerate(triples):
            if i in tr:
                img = g[(i + 6) % 12] @ pts[t]
                u = int(np.argmin(np.abs(pts - img).max(axis=1)))
                parent[root(t)] = root(u)
    n_vertices = len({root(a) for a in range(20)})
    assert n_vertices == 1
    assert n_vertices - len(sw.edge_cycles(F)) + 6 - 1 == 0


# --- group elements at an observer -----------------------------------------------------------
def test_displacements_at_the_centre(space):
    # the dodecahedron is the Dirichlet domain of its centre: the 12 face pairings move the
    # centre by exactly 2 f, nothing moves it less (common practice)
    obs = geo.Observer.make("hyperbolic", [0.0, 0.0, 0.0])
    h = space.elements_within(obs, 3.0)
    d = h.displacement
    assert d[:12] == pytest.approx(np.full(12, 2 * F), abs=1e-12)
    assert d[12] > 2 * F + 0.5
    assert d.min() > 1e-6
    assert space.shortest_displacement(obs, 3.0) / 2 == pytest.approx(space.meta["injectivity_radius_at_center"])


@pytest.mark.parametrize("ball_point,radius,extra", [
    ([0.0, 0.0, 0.0], 3.0, 1.0), ([0.21, -0.13, 0.3], 2.4, 1.0), ([0.05, 0.45, -0.2], 2.2, 0.6)])
def test_enlarged_margin_finds_the_same_elements(space, ball_point, radius, extra):
    # the last observer lies outside the inscribed ball (d = 1.09 > f): the wider bound applies
    obs = geo.Observer.make("hyperbolic", ball_point)
    a = space.elements_within(obs, radius)
    b = space.elements_within(obs, radius, margin=space.default_margin(obs) + extra)
    assert len(a) == len(b) >= 10
    assert np.abs(a.displacement - b.displacement).max() < 1e-12
    keys = lambda h: sorted(tuple(np.round(m, 6).ravel()) for m in h.matrices)  # noqa: E731
    assert keys(a) == keys(b)
    # no duplicates, and every element's inverse is there too (a group; common practice)
    ka = set(keys(a))
    assert len(ka) == len(a)
    assert all(tuple(np.round(inverse(m), 6).ravel()) in ka for m in a.matrices)


def test_orbit_count_matches_ball_volume_over_covolume(shipped):
    # lattice-point counting in H^3 (Margulis 1969; common practice): #{g : d(O, g O) < L}
    # ~ vol B(L) / vol(M), vol B(L) = pi (sinh 2L - 2L); a check of volume and discreteness
    L = 5.5
    words = enumerate_words(shipped["generators"], geo.origin("hyperbolic"), L)
    expect = math.pi * (math.sinh(2 * L) - 2 * L) / shipped["volume"]
    assert len(words) == pytest.approx(expect, rel=0.03)


def test_translation_length_from_trace_matches_eigenvalues():
    # the trace condition against numerical eigenvalues e^{+-l} (common practice)
    rng = np.random.default_rng(3)
    for _ in range(5):
        g = _boost(rng.normal(size=3), rng.uniform(0.2, 3)) @ sw.rotation4(rng.normal(size=3), rng.uniform(0, 6))
        want = math.log(np.abs(np.linalg.eigvals(g)).max())
        assert translation_length(g) == pytest.approx(want, abs=1e-9)
    assert translation_length(sw.rotation4([0, 0, 1], 1.0)) == pytest.approx(0.0, abs=1e-7)


def test_shortest_geodesic_is_stable_under_a_deeper_search(shipped):
    # the systole search is complete: a deeper enumeration finds nothing shorter
    R = shipped["fundamental_polyhedron"]["circumradius"]
    words = enumerate_words(shipped["generators"], geo.origin("hyperbolic"), 3 * R + 0.5)
    ell = translation_length(words[1:])
    assert ell.min() == pytest.approx(shipped["shortest_geodesic"], abs=1e-10)


# --- predicted circles --------------------------------------------------------------------------
def test_predicted_circles_at_the_centre(space):
    # check: Cornish, Spergel & Starkman 1998: cos(alpha) = tanh(d/2) / tanh(chi); with
    # 2 f < 2 chi < next displacement only the 6 face pairings (and inverses) give circles
    chi = 1.2
    obs = geo.Observer.make("hyperbolic", [0.0, 0.0, 0.0], geo.euler_zyz(0.3, 0.9, -1.2))
    pairs = predict_circles(space, obs, chi)
    assert len(pairs) == 6
    alpha = math.acos(math.tanh(F) / math.tanh(chi))
    phi = np.linspace(0, 2 * np.pi, 29)
    for p in pairs:
        assert p.radius == pytest.approx(alpha)
        assert p.clone_distance == pytest.approx(2 * F)
        assert p.center_a @ p.center_b == pytest.approx(-1.0)  # opposite faces
        assert p.orientation == -1  # orientation-preserving holonomy, as for the torus
        # independent: circle A lies on the LSS S(x, chi) and on its image S(g x, chi)
        P = obs.exp(circle_points(p.center_a, p.radius, phi), chi)
        assert geo.distance("hyperbolic", (p.element @ obs.point)[None], P) == pytest.approx(np.full(29, chi))
        # contract: T_A(phi) = T_B(s phi + tau), T(P) = T(g^-1 P)
        nB, dist = obs.log(P @ inverse(p.element).T)
        assert dist == pytest.approx(np.full(29, chi))
        want = circle_points(p.center_b, p.radius, p.orientation * phi + p.twist)
        assert np.abs(nB - want).max() < 1e-9
    assert len(predict_circles(space, obs, 0.99)) == 0  # 2 chi < 2 f: no circles


def test_predicted_circles_off_centre(space):
    obs = geo.Observer.make("hyperbolic", [0.2, -0.1, 0.25])
    chi = 1.2
    pairs = predict_circles(space, obs, chi)
    h = space.elements_within(obs, 2 * chi)
    assert len(pairs) == len(h) // 2 > 0
    for p in pairs:
        assert math.cos(p.radius) == pytest.approx(math.tanh(p.clone_distance / 2) / math.tanh(chi))


# --- bad input ------------------------------------------------------------------------------
def _write(tmp_path, gens, name="g.json", **extra):
    path = tmp_path / name
    path.write_text(json.dumps({"generators": [np.asarray(g).tolist() for g in gens], **extra}))
    return path


def test_rotation_generator_has_fixed_point(tmp_path):
    path = _write(tmp_path, [_boost([1, 0, 0], 1.5), sw.rotation4([0, 0, 1], 2 * math.pi / 5)])
    space = build_space({"family": "hyperbolic", "generators": str(path)})
    obs = geo.Observer.make("hyperbolic", [0.0, 0.0, 0.0])
    with pytest.raises(InputError) as e:
        space.elements_within(obs, 2.0)
    assert e.value.where == str(path) and "fixed point" in str(e.value)


def test_elliptic_product_away_from_observer(tmp_path):
    # e = a rotation by 72 deg about an axis 1 R_c away from the observer; a = boost, b = a^-1 e:
    # a b = e is elliptic though a and b are not, and it moves the observer by a finite distance
    e = _boost([1, 0, 0], 1.0) @ sw.rotation4([0, 0, 1], 2 * math.pi / 5) @ _boost([1, 0, 0], -1.0)
    a = _boost([0, 1, 0], 2.0)
    b = inverse(a) @ e
    assert translation_length(a) > 0.5 and translation_length(b) > 0.1
    assert translation_length(e) < 1e-6
    path = _write(tmp_path, [a, b])
    space = build_space({"family": "hyperbolic", "generators": str(path)})
    obs = geo.Observer.make("hyperbolic", [0.0, 0.0, 0.0])
    with pytest.raises(InputError) as e:
        space.elements_within(obs, 1.5)
    assert e.value.where == str(path) and "elliptic" in str(e.value)


@pytest.mark.parametrize("bad,words", [
    (np.diag([1.0, 2.0, 1.0, 1.0]), "not a Lorentz"),
    (np.diag([-1.0, -1.0, 1.0, 1.0]), "orthochronous"),
    (np.diag([1.0, -1.0, 1.0, 1.0]), "determinant"),
    (np.eye(3), "4x4"),
])
def test_invalid_generators(tmp_path, bad, words):
    path = _write(tmp_path, [bad])
    with pytest.raises(InputError) as e:
        read_generators(path)
    assert words in str(e.value) and str(path) in e.value.where


@pytest.mark.parametrize("poly", [{"circumradius": -1.0}, {"center": [2.0, 0, 0, 0], "circumradius": 1.0},
                                  {"radius": 1.0}, "big"])
def test_invalid_polyhedron(tmp_path, poly):
    path = _write(tmp_path, [_boost([1, 0, 0], 1.0)], fundamental_polyhedron=poly)
    with pytest.raises(InputError) as e:
        read_generators(path)
    assert "fundamental_polyhedron" in e.value.where


def test_missing_and_unreadable_files(tmp_path):
    with pytest.raises(InputError):
        build_space({"family": "hyperbolic", "generators": str(tmp_path / "none.json")})
    bad = tmp_path / "bad.json"
    bad.write_text("{not json")
    with pytest.raises(InputError) as e:
        build_space({"family": "hyperbolic", "generators": str(bad)})
    assert e.value.where == str(bad)
