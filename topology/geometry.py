"""The three constant-curvature geometries as point sets in R^4 (flat: homogeneous R^3).

Every space of the package lives in one of three models, and every holonomy (deck
transformation) is a 4x4 real matrix acting on column 4-vectors:

* ``flat``: points are homogeneous vectors (x, y, z, 1); an isometry x -> R x + t is the matrix
  [[R, t], [0, 1]]. Distances in units of the distance to last scattering chi_rec unless said.
* ``spherical``: points are unit vectors (w, x, y, z) of R^4, read as the unit quaternion
  w + x i + y j + z k (S^3 of unit curvature radius); isometries are O(4) matrices, e.g. the
  map x -> a x b of two unit quaternions. Distances in units of the curvature radius R_c.
* ``hyperbolic``: points are (t, x, y, z) on the upper sheet -t^2 + x^2 + y^2 + z^2 = -1 of the
  hyperboloid; isometries are SO+(3,1) matrices. Distances in units of R_c.

An observer is a point with an orthonormal frame of three tangent vectors; sky directions are
3-vectors in that frame (the sky frame). Formulas for exp and log maps are the standard ones of
constant-curvature geometry (common practice), e.g. for S^3: exp_x(r v) = cos(r) x + sin(r) v.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import InputError

GEOMETRIES = ("flat", "spherical", "hyperbolic")
MINKOWSKI = np.diag([-1.0, 1.0, 1.0, 1.0])


# ---------------------------------------------------------------------------------------------
# rotations of the sky frame
# ---------------------------------------------------------------------------------------------
def rotation_z(angle: float) -> np.ndarray:
    c, s = np.cos(angle), np.sin(angle)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])


def rotation_y(angle: float) -> np.ndarray:
    c, s = np.cos(angle), np.sin(angle)
    return np.array([[c, 0.0, s], [0.0, 1.0, 0.0], [-s, 0.0, c]])


def euler_zyz(alpha: float, beta: float, gamma: float) -> np.ndarray:
    """Rotation R = R_z(alpha) R_y(beta) R_z(gamma) (radians, active, right-handed)."""
    return rotation_z(alpha) @ rotation_y(beta) @ rotation_z(gamma)


def rotation_about(axis: np.ndarray, angle: float) -> np.ndarray:
    """Right-handed rotation by ``angle`` (radians) about the unit vector ``axis`` (Rodrigues)."""
    a = np.asarray(axis, dtype=float)
    a = a / np.linalg.norm(a)
    k = np.array([[0.0, -a[2], a[1]], [a[2], 0.0, -a[0]], [-a[1], a[0], 0.0]])
    return np.eye(3) + np.sin(angle) * k + (1.0 - np.cos(angle)) * (k @ k)


# ---------------------------------------------------------------------------------------------
# quaternions (S^3) as 4x4 matrices
# ---------------------------------------------------------------------------------------------
def quat_multiply(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Hamilton product of quaternions stored as (..., 4) arrays (w, x, y, z)."""
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    aw, ax, ay, az = np.moveaxis(a, -1, 0)
    bw, bx, by, bz = np.moveaxis(b, -1, 0)
    return np.stack(
        [
            aw * bw - ax * bx - ay * by - az * bz,
            aw * bx + ax * bw + ay * bz - az * by,
            aw * by - ax * bz + ay * bw + az * bx,
            aw * bz + ax * by - ay * bx + az * bw,
        ],
        axis=-1,
    )


def quat_conjugate(a: np.ndarray) -> np.ndarray:
    a = np.array(a, dtype=float)
    a[..., 1:] *= -1.0
    return a


def left_matrix(a: np.ndarray) -> np.ndarray:
    """4x4 matrix of x -> a x (quaternion left multiplication)."""
    return np.stack([quat_multiply(a, e) for e in np.eye(4)], axis=-1)


def right_matrix(b: np.ndarray) -> np.ndarray:
    """4x4 matrix of x -> x b (quaternion right multiplication)."""
    return np.stack([quat_multiply(e, b) for e in np.eye(4)], axis=-1)


def quat_exp(axis: np.ndarray, angle: float) -> np.ndarray:
    """Unit quaternion cos(angle) + sin(angle) (axis . (i, j, k)) for a unit 3-vector axis."""
    axis = np.asarray(axis, dtype=float)
    axis = axis / np.linalg.norm(axis)
    return np.concatenate([[np.cos(angle)], np.sin(angle) * axis])


# ---------------------------------------------------------------------------------------------
# points, frames, exp and log maps
# ---------------------------------------------------------------------------------------------
def inner(geometry: str, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """The ambient bilinear form: Euclidean on R^4 (spherical) or Minkowski (hyperbolic)."""
    if geometry == "hyperbolic":
        return -a[..., 0] * b[..., 0] + np.sum(a[..., 1:] * b[..., 1:], axis=-1)
    return np.sum(a * b, axis=-1)


def distance(geometry: str, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Geodesic distance between points (..., 4) in the geometry's own units."""
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    if geometry == "flat":
        return np.linalg.norm(a[..., :3] - b[..., :3], axis=-1)
    if geometry == "spherical":
        # atan2 form is accurate at small and large angles
        cross = np.linalg.norm(b - inner("spherical", a, b)[..., None] * a, axis=-1)
        return np.arctan2(cross, inner("spherical", a, b))
    c = -inner("hyperbolic", a, b)
    return np.arccosh(np.maximum(c, 1.0))


def hyperboloid_from_ball(p: np.ndarray) -> np.ndarray:
    """Point of the Poincare ball (|p| < 1) -> hyperboloid (t, x, y, z)."""
    p = np.asarray(p, dtype=float)
    r2 = float(p @ p)
    if r2 >= 1.0:
        raise InputError(f"a Poincare-ball point needs |p| < 1, got |p| = {np.sqrt(r2):.6g}")
    return np.concatenate([[1.0 + r2], 2.0 * p]) / (1.0 - r2)


def ball_from_hyperboloid(x: np.ndarray) -> np.ndarray:
    x = np.asarray(x, dtype=float)
    return x[..., 1:] / (1.0 + x[..., :1])


def boost_to(geometry: str, x: np.ndarray) -> np.ndarray:
    """An isometry (4x4) taking the origin of the model to the point x.

    Origin: (0,0,0,1) flat, (1,0,0,0) spherical (quaternion 1), (1,0,0,0) hyperbolic. The
    map is chosen so that the standard frame at the origin goes to the frame of
    :func:`standard_frame`.
    """
    x = np.asarray(x, dtype=float)
    if geometry == "flat":
        m = np.eye(4)
        m[:3, 3] = x[:3]
        return m
    if geometry == "spherical":
        return left_matrix(x)
    # pure Lorentz boost from (1,0,0,0) to x
    t, v = x[0], x[1:]
    m = np.eye(4)
    m[0, 0] = t
    m[0, 1:] = v
    m[1:, 0] = v
    m[1:, 1:] = np.eye(3) + np.outer(v, v) / (1.0 + t)
    return m


def origin(geometry: str) -> np.ndarray:
    if geometry == "flat":
        return np.array([0.0, 0.0, 0.0, 1.0])
    return np.array([1.0, 0.0, 0.0, 0.0])


def tangent_basis_at_origin(geometry: str) -> np.ndarray:
    """(4, 3) matrix whose columns are the unit tangent vectors e_x, e_y, e_z at the origin."""
    if geometry == "flat":
        return np.vstack([np.eye(3), np.zeros((1, 3))])
    return np.vstack([np.zeros((1, 3)), np.eye(3)])


@dataclass(frozen=True)
class Observer:
    """An observer: a point of the model space and an orthonormal frame there.

    ``point`` is a 4-vector of the model; ``frame`` is (4, 3): its columns are the ambient
    tangent vectors along which the sky-frame axes x, y, z point.
    """

    geometry: str
    point: np.ndarray
    frame: np.ndarray

    @classmethod
    def make(cls, geometry: str, position, rotation: np.ndarray | None = None) -> "Observer":
        """Observer at ``position`` with sky frame rotated by ``rotation`` (3x3).

        position: flat, 3 numbers; spherical, 4 numbers (normalised here); hyperbolic, 4 numbers
        on the hyperboloid or 3 numbers in the Poincare ball. The frame at the point is the
        transport of the standard frame by :func:`boost_to` (for S^3: e_k = x q_k with
        q = i, j, k), then rotated: sky axis n points along frame @ (rotation @ n).
        """
        if geometry not in GEOMETRIES:
            raise InputError(f"unknown geometry {geometry!r}")
        p = np.asarray(position, dtype=float).ravel()
        if not np.all(np.isfinite(p)):
            raise InputError("observer position must be finite numbers")
        if geometry == "flat":
            if p.size != 3:
                raise InputError(f"a flat observer position has 3 numbers, got {p.size}")
            point = np.concatenate([p, [1.0]])
        elif geometry == "spherical":
            if p.size != 4:
                raise InputError(f"a spherical observer position is a point [w, x, y, z] of S^3, got {p.size} numbers")
            n = np.linalg.norm(p)
            if n == 0:
                raise InputError("a spherical observer position cannot be the zero vector")
            point = p / n
        else:
            if p.size == 3:
                point = hyperboloid_from_ball(p)
            elif p.size == 4:
                q = -p[0] ** 2 + p[1:] @ p[1:]
                if p[0] <= 0 or abs(q + 1.0) > 1e-8 * max(1.0, p[0] ** 2):
                    raise InputError(
                        "a hyperbolic observer position with 4 numbers must lie on the upper "
                        f"hyperboloid -t^2+x^2+y^2+z^2 = -1 (got {q:.6g}, t = {p[0]:.6g})"
                    )
                point = p
            else:
                raise InputError(f"a hyperbolic observer position has 3 (Poincare ball) or 4 (hyperboloid) numbers, got {p.size}")
        rot = np.eye(3) if rotation is None else np.asarray(rotation, dtype=float)
        frame = boost_to(geometry, point) @ tangent_basis_at_origin(geometry) @ rot
        return cls(geometry, point, frame)

    # -- maps between sky directions and points of space ------------------------------------
    def exp(self, directions: np.ndarray, r: float | np.ndarray) -> np.ndarray:
        """Points at distance r along sky directions (..., 3) -> (..., 4)."""
        v = np.asarray(directions, dtype=float) @ self.frame.T
        r = np.asarray(r, dtype=float)[..., None]
        if self.geometry == "flat":
            return self.point + r * v
        if self.geometry == "spherical":
            return np.cos(r) * self.point + np.sin(r) * v
        return np.cosh(r) * self.point + np.sinh(r) * v

    def log(self, points: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Sky directions (..., 3) and distances (...) of points (..., 4) seen from here."""
        p = np.asarray(points, dtype=float)
        x = self.point
        g = self.geometry
        if g == "flat":
            v = p - x
            d = np.linalg.norm(v[..., :3], axis=-1)
            comp = v @ self.frame
        else:
            c = inner(g, x, p)
            if g == "spherical":
                v = p - c[..., None] * x
            else:
                v = p + c[..., None] * x  # tangent part: <x,x> = -1
            comp = inner(g, v[..., None, :], self.frame.T)
            d = distance(g, x, p)
        norm = np.linalg.norm(comp, axis=-1, keepdims=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            n = np.where(norm > 0, comp / norm, 0.0)
        return n, d


def lonlat_to_vec(lon_deg, lat_deg) -> np.ndarray:
    """Longitude, latitude in degrees -> unit vectors (..., 3)."""
    lon = np.radians(lon_deg)
    lat = np.radians(lat_deg)
    return np.stack([np.cos(lat) * np.cos(lon), np.cos(lat) * np.sin(lon), np.sin(lat)], axis=-1)


def vec_to_lonlat(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Unit vectors (..., 3) -> longitude in [0, 360) and latitude in degrees."""
    v = np.asarray(v, dtype=float)
    lon = np.degrees(np.arctan2(v[..., 1], v[..., 0])) % 360.0
    lat = np.degrees(np.arcsin(np.clip(v[..., 2] / np.linalg.norm(v, axis=-1), -1.0, 1.0)))
    return lon, lat


def random_rotation(rng: np.random.Generator) -> tuple[float, float, float]:
    """Euler angles z-y-z (radians) of a rotation uniform on SO(3): alpha, gamma uniform,
    cos(beta) uniform (common practice)."""
    return float(rng.uniform(0, 2 * np.pi)), float(np.arccos(rng.uniform(-1, 1))), float(rng.uniform(0, 2 * np.pi))
