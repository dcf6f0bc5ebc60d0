"""The three models of topology.geometry: geodesic triangles, exp/log maps, distances, isometries.

Angles of triangles are measured with the package's own Observer.log (sky directions from a
vertex towards the other two); side lengths with geometry.distance.
"""

import numpy as np
import pytest

from topology import geometry as geo

GEOMS = ("flat", "spherical", "hyperbolic")


def random_point(geometry, rng):
    if geometry == "flat":
        return np.concatenate([rng.uniform(-2, 2, 3), [1.0]])
    if geometry == "spherical":
        p = rng.normal(size=4)
        return p / np.linalg.norm(p)
    b = rng.normal(size=3)
    return geo.hyperboloid_from_ball(0.8 * rng.uniform() * b / np.linalg.norm(b))


def observer_at(geometry, point, rng=None):
    rot = None if rng is None else geo.euler_zyz(*rng.uniform(0, 2 * np.pi, 3))
    pos = point[:3] if geometry == "flat" else point
    return geo.Observer.make(geometry, pos, rot)


def triangle(geometry, rng, size):
    """Three points at distance ~size from a random centre, in random directions."""
    centre = observer_at(geometry, random_point(geometry, rng), rng)
    dirs = rng.normal(size=(3, 3))
    dirs /= np.linalg.norm(dirs, axis=1, keepdims=True)
    return centre.exp(dirs, size * rng.uniform(0.5, 1.0, 3))


def angles_and_sides(geometry, pts, rng):
    angles, sides = [], []
    for k in range(3):
        a, b, c = pts[k], pts[(k + 1) % 3], pts[(k + 2) % 3]
        obs = observer_at(geometry, a, rng)  # any sky orientation: angles do not depend on it
        (nb, _), (nc, _) = obs.log(b), obs.log(c)
        angles.append(np.arccos(np.clip(nb @ nc, -1.0, 1.0)))
        sides.append(float(geo.distance(geometry, b, c)))  # side opposite vertex k
    return np.array(angles), np.array(sides)


def lhuilier_area(geometry, sides):
    """Area from the three sides alone (L'Huilier's theorem and its hyperbolic analogue)."""
    a, b, c = sides
    s = (a + b + c) / 2
    f = np.tan if geometry == "spherical" else np.tanh
    return 4 * np.arctan(np.sqrt(f(s / 2) * f((s - a) / 2) * f((s - b) / 2) * f((s - c) / 2)))


@pytest.mark.parametrize("geometry", GEOMS)
@pytest.mark.parametrize("size", [0.05, 0.6, 1.2])
def test_triangle_angle_sum_and_area(geometry, size):
    # check: common practice: angle sum = pi flat, > pi on S^3, < pi on H^3. Any three points of
    # S^3 (H^3) lie in a totally geodesic S^2 (H^2) of unit curvature radius, where Girard's
    # theorem (Gauss-Bonnet) gives area = |sum - pi| R^2; the area is computed independently
    # from the sides by L'Huilier's formula (spherical) and its hyperbolic analogue.
    rng = np.random.default_rng(int(size * 1000) + len(geometry))
    for _ in range(20):
        pts = triangle(geometry, rng, size)
        ang, sides = angles_and_sides(geometry, pts, rng)
        excess = ang.sum() - np.pi
        if geometry == "flat":
            assert abs(excess) < 1e-10
            continue
        if geometry == "spherical":
            assert excess > 0
        else:
            assert excess < 0
        assert abs(excess) == pytest.approx(lhuilier_area(geometry, sides), rel=1e-6, abs=1e-12)


@pytest.mark.parametrize("geometry", GEOMS)
def test_law_of_cosines(geometry):
    # check: common practice: c^2 = a^2 + b^2 - 2ab cos C (flat),
    # cos c = cos a cos b + sin a sin b cos C (sphere), cosh c = cosh a cosh b - sinh a sinh b cos C.
    rng = np.random.default_rng(7)
    for _ in range(20):
        pts = triangle(geometry, rng, 1.0)
        ang, (a, b, c) = angles_and_sides(geometry, pts, rng)
        C = ang[0]  # the angle at vertex 0 lies opposite side a; use it with the other two
        if geometry == "flat":
            assert a**2 == pytest.approx(b**2 + c**2 - 2 * b * c * np.cos(C))
        elif geometry == "spherical":
            assert np.cos(a) == pytest.approx(np.cos(b) * np.cos(c) + np.sin(b) * np.sin(c) * np.cos(C))
        else:
            assert np.cosh(a) == pytest.approx(np.cosh(b) * np.cosh(c) - np.sinh(b) * np.sinh(c) * np.cos(C))


def test_octant_triangle_on_s3():
    # check: common practice (Girard): the octant triangle 1, i, j of S^3 has three right angles
    # and area 4 pi / 8 = pi / 2 on its great 2-sphere.
    pts = np.eye(4)[:3]
    ang, sides = angles_and_sides("spherical", pts, np.random.default_rng(2))
    assert np.allclose(ang, np.pi / 2)
    assert np.allclose(sides, np.pi / 2)
    assert ang.sum() - np.pi == pytest.approx(np.pi / 2)


def test_equilateral_hyperbolic_triangle():
    # check: common practice: an equilateral triangle of side a in H^2 has angle A with
    # cos A = cosh a / (1 + cosh a); its area is pi - 3A.
    a = 1.3
    obs = geo.Observer.make("hyperbolic", [0.0, 0.0, 0.0])
    # circumradius R from the right triangle (R, a/2, angle pi/3 at the centre):
    # sinh(a/2) = sinh(R) sin(pi/3)
    R = np.arcsinh(np.sinh(a / 2) / np.sin(np.pi / 3))
    phis = np.radians([0.0, 120.0, 240.0])
    dirs = np.stack([np.cos(phis), np.sin(phis), np.zeros(3)], axis=1)
    pts = obs.exp(dirs, np.full(3, R))
    ang, sides = angles_and_sides("hyperbolic", pts, np.random.default_rng(4))
    assert np.allclose(sides, a)
    A = np.arccos(np.cosh(a) / (1 + np.cosh(a)))
    assert np.allclose(ang, A)
    assert np.pi - ang.sum() == pytest.approx(np.pi - 3 * A)


@pytest.mark.parametrize("geometry", GEOMS)
def test_exp_log_round_trip(geometry):
    rng = np.random.default_rng(13)
    rmax = {"flat": 3.0, "spherical": 3.0, "hyperbolic": 3.0}[geometry]
    for _ in range(10):
        obs = observer_at(geometry, random_point(geometry, rng), rng)
        dirs = rng.normal(size=(50, 3))
        dirs /= np.linalg.norm(dirs, axis=1, keepdims=True)
        r = rng.uniform(0.01, rmax, 50)
        pts = obs.exp(dirs, r)
        if geometry == "spherical":
            assert np.allclose(np.linalg.norm(pts, axis=1), 1.0)
        if geometry == "hyperbolic":
            assert np.allclose(geo.inner("hyperbolic", pts, pts), -1.0)
        n, d = obs.log(pts)
        assert np.allclose(d, r, atol=1e-9)
        assert np.allclose(n, dirs, atol=1e-8)
        # and the other way round: points -> (direction, distance) -> points
        q = np.stack([random_point(geometry, rng) for _ in range(20)])
        n, d = obs.log(q)
        assert np.allclose(obs.exp(n, d), q, atol=1e-9)


@pytest.mark.parametrize("geometry", GEOMS)
def test_distance_symmetry_and_triangle_inequality(geometry):
    rng = np.random.default_rng(17)
    a = np.stack([random_point(geometry, rng) for _ in range(40)])
    b = np.stack([random_point(geometry, rng) for _ in range(40)])
    c = np.stack([random_point(geometry, rng) for _ in range(40)])
    dab, dba = geo.distance(geometry, a, b), geo.distance(geometry, b, a)
    assert np.allclose(dab, dba, rtol=0, atol=1e-12)
    assert np.allclose(geo.distance(geometry, a, a), 0.0, atol=1e-7)
    assert np.all(dab <= geo.distance(geometry, a, c) + geo.distance(geometry, c, b) + 1e-12)
    if geometry == "spherical":
        assert np.all(dab <= np.pi + 1e-12)


@pytest.mark.parametrize("geometry", GEOMS)
def test_boost_to_is_an_isometry(geometry):
    # check: common practice: boost_to(x) lies in E(3), O(4) or SO+(3,1), takes the origin to x
    # and preserves every distance.
    rng = np.random.default_rng(19)
    J = geo.MINKOWSKI
    for _ in range(10):
        x = random_point(geometry, rng)
        M = geo.boost_to(geometry, x)
        assert np.allclose(M @ geo.origin(geometry), x)
        if geometry == "flat":
            R = M[:3, :3]
            assert np.allclose(R.T @ R, np.eye(3)) and np.allclose(M[3], [0, 0, 0, 1])
        elif geometry == "spherical":
            assert np.allclose(M.T @ M, np.eye(4))
        else:
            assert np.allclose(M.T @ J @ M, J) and M[0, 0] > 0 and np.linalg.det(M) == pytest.approx(1.0)
        p = np.stack([random_point(geometry, rng) for _ in range(20)])
        q = np.stack([random_point(geometry, rng) for _ in range(20)])
        assert np.allclose(geo.distance(geometry, p @ M.T, q @ M.T), geo.distance(geometry, p, q), atol=1e-9)
        # the observer's frame at x is orthonormal and tangent
        obs = observer_at(geometry, x, rng)
        if geometry == "flat":
            assert np.allclose(obs.frame[:3].T @ obs.frame[:3], np.eye(3)) and np.allclose(obs.frame[3], 0)
        else:
            G = geo.inner(geometry, obs.frame.T[:, None, :], obs.frame.T[None, :, :])
            assert np.allclose(G, np.eye(3))
            assert np.allclose(geo.inner(geometry, obs.frame.T, obs.point), 0.0)
