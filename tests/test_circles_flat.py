"""Predicted circles in flat spaces against Cornish, Spergel & Starkman (1998)."""

import numpy as np
import pytest

from topology import geometry as geo
from topology.circles import circle_phase, circle_points, predict_circles
from topology.spaces import build_space


@pytest.mark.parametrize("pos", [[0, 0, 0], [0.31, -0.42, 0.77], [1.1, 0.2, -0.6]])
def test_cubic_torus_three_pairs_at_36_87_deg(pos):
    # check: Cornish, Spergel & Starkman 1998: cubic torus of side L = 1.6 chi_rec seen from
    # any point: cos(alpha) = L / (2 chi_rec) = 0.8 -> alpha = 36.87 deg, twist 0; the face
    # diagonals (d = 1.6 sqrt 2 > 2 chi_rec) give no circle.
    space = build_space({"family": "E1", "lengths": [1.6, 1.6, 1.6]})
    obs = geo.Observer.make("flat", pos, geo.euler_zyz(0.4, 1.1, -0.3))
    pairs = predict_circles(space, obs, 1.0)
    assert len(pairs) == 3
    for p in pairs:
        assert np.degrees(p.radius) == pytest.approx(36.8699, abs=1e-3)
        assert min(p.twist, 2 * np.pi - p.twist) < 1e-9
        assert p.orientation == -1
        assert p.center_a @ p.center_b == pytest.approx(-1.0)  # back to back


def test_circle_convention_north_then_east():
    # phi = 0 points north, phi = 90 deg points east (position angle; common practice)
    c = geo.lonlat_to_vec(0.0, 0.0)
    pts = circle_points(c, np.radians(10.0), np.radians([0.0, 90.0]))
    lon, lat = geo.vec_to_lonlat(pts)
    assert lat[0] == pytest.approx(10.0) and lon[0] == pytest.approx(0.0, abs=1e-9)
    assert lon[1] == pytest.approx(10.0) and lat[1] == pytest.approx(0.0, abs=1e-9)
    assert circle_phase(c, pts) == pytest.approx(np.radians([0.0, 90.0]))


def test_twisted_pairs_map_temperature_points():
    # The contract T_A(phi) = T_B(s phi + tau): points of A mapped by g^-1 land on B at s phi + tau.
    space = build_space({"family": "E2", "lengths": [1.55, 1.7, 0.8]})
    obs = geo.Observer.make("flat", [0.12, -0.05, 0.0], geo.euler_zyz(0.3, 0.6, -0.2))
    pairs = predict_circles(space, obs, 1.0)
    assert pairs
    phi = np.linspace(0, 2 * np.pi, 37)
    for p in pairs:
        P = obs.exp(circle_points(p.center_a, p.radius, phi), 1.0)
        Q = P @ np.linalg.inv(p.element).T
        nB, dist = obs.log(Q)
        assert dist == pytest.approx(np.ones_like(dist))
        want = circle_points(p.center_b, p.radius, p.orientation * phi + p.twist)
        assert np.abs(nB - want).max() < 1e-9
