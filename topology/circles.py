"""Predicted matched circles: which pairs a space shows an observer, with radius, twist and
orientation in the package's one convention.

For a holonomy g moving the observer x by d < 2 chi (chi: radius of the last-scattering
sphere in the geometry's units), the sphere S(x, chi) meets its image S(g x, chi) in a circle
A, seen from x around the direction of g x at angular radius alpha with (Cornish, Spergel &
Starkman 1998, Class. Quantum Grav. 15, 2657)

    flat:        cos(alpha) = d / (2 chi)
    spherical:   cos(alpha) = tan(d/2) / tan(chi)
    hyperbolic:  cos(alpha) = tanh(d/2) / tanh(chi)

Its partner B = g^-1 A is seen around the direction of g^-1 x, and the temperature agrees
point by point: T(P) = T(g^-1 P).

Circle convention (the contract every stage uses): a circle of centre c and radius alpha is
parametrised by phi as
    n(phi) = cos(alpha) c + sin(alpha) (cos(phi) e_N + sin(phi) e_E),
with e_N the unit projection of the north pole z onto the plane normal to c (the x axis when c
is a pole) and e_E = e_N x c: phi runs counter-clockwise about c as seen by the observer looking
outward along c, from north through east (position angle). A pair (A, B, twist tau,
orientation s) means T_A(phi) = T_B(s phi + tau), s = +1 "same", s = -1 "opposite".

The JSON form of a prediction (:func:`prediction_json`: centres as (lon, lat), angles in
degrees) is what ``topology predict --json`` prints and ``topology synth --pairs`` writes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import geometry as geo
from .spaces.base import Space


@dataclass(frozen=True)
class CirclePair:
    """One predicted pair of matched circles (angles in radians, unit vectors in the sky frame)."""

    center_a: np.ndarray
    center_b: np.ndarray
    radius: float
    twist: float
    orientation: int  # +1 same, -1 opposite
    clone_distance: float  # d(x, g x) in the geometry's units (chi_rec flat, R_c curved)
    element: np.ndarray  # the 4x4 holonomy g: circle A is centred on g x

    def as_dict(self) -> dict:
        la, ba = geo.vec_to_lonlat(self.center_a)
        lb, bb = geo.vec_to_lonlat(self.center_b)
        return {
            "center_a": [float(la), float(ba)],
            "center_b": [float(lb), float(bb)],
            "radius_deg": float(np.degrees(self.radius)),
            "twist_deg": float(np.degrees(self.twist) % 360.0),
            "orientation": "same" if self.orientation > 0 else "opposite",
            "clone_distance": float(self.clone_distance),
        }


def circle_frame(center: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(e_N, e_E) of the circle convention for unit centre vectors (..., 3)."""
    c = np.asarray(center, dtype=float)
    z = np.array([0.0, 0.0, 1.0])
    en = z - (c @ z)[..., None] * c
    norm = np.linalg.norm(en, axis=-1, keepdims=True)
    pole = norm[..., 0] < 1e-12
    en = np.where(pole[..., None], np.array([1.0, 0.0, 0.0]), en / np.where(norm > 0, norm, 1.0))
    ee = np.cross(en, c)
    return en, ee


def circle_points(center: np.ndarray, radius: float | np.ndarray, phi: np.ndarray) -> np.ndarray:
    """Unit vectors n(phi) on circles: centre (..., 3), radius (...) -> (..., len(phi), 3).

    n(phi) = cos(alpha) c + sin(alpha) (cos(phi) e_N + sin(phi) e_E), evaluated as one matrix
    product of the coefficients (N_phi, 3) with each circle's frame (c, e_N, e_E)."""
    c = np.asarray(center, dtype=float)
    en, ee = circle_frame(c)
    r = np.asarray(radius, dtype=float)[..., None]
    phi = np.asarray(phi, dtype=float)
    cr, sr = np.cos(r), np.sin(r)
    coef = np.stack(np.broadcast_arrays(cr, sr * np.cos(phi), sr * np.sin(phi)), axis=-1)  # (..., N_phi, 3)
    frame = np.stack(np.broadcast_arrays(c, en, ee), axis=-2)  # (..., 3, 3): rows c, e_N, e_E
    return np.matmul(coef, frame)


def circle_phase(center: np.ndarray, points: np.ndarray) -> np.ndarray:
    """phi of unit vectors ``points`` (..., 3) about ``center`` (3,) in the circle convention."""
    en, ee = circle_frame(center)
    return np.arctan2(points @ ee, points @ en) % (2.0 * np.pi)


def cos_radius(geometry: str, d, chi: float):
    """cos(alpha) for clone distance d and LSS radius chi (CSS 1998)."""
    d = np.asarray(d, dtype=float)
    if geometry == "flat":
        return d / (2.0 * chi)
    if geometry == "spherical":
        return np.tan(d / 2.0) / np.tan(chi)
    return np.tanh(d / 2.0) / np.tanh(chi)


def max_clone_distance(geometry: str, chi: float) -> float:
    """Largest d that still gives circles: 2 chi in every geometry (alpha -> 0)."""
    return 2.0 * chi


def _inverse(geometry: str, m: np.ndarray) -> np.ndarray:
    if geometry == "spherical":
        return m.T
    if geometry == "hyperbolic":
        return geo.MINKOWSKI @ m.T @ geo.MINKOWSKI
    return np.linalg.inv(m)


def _key(m: np.ndarray) -> tuple:
    return tuple(np.round(m, 7).ravel())


def pair_for_element(observer: geo.Observer, g: np.ndarray, chi: float, n_check: int = 16) -> CirclePair | None:
    """The circle pair of one holonomy g (None when d(x, g x) >= 2 chi)."""
    geometry = observer.geometry
    x = observer.point
    d = float(geo.distance(geometry, x, g @ x))
    ca = float(cos_radius(geometry, d, chi))
    if not 0.0 <= ca < 1.0:
        return None
    alpha = float(np.arccos(ca))
    ginv = _inverse(geometry, g)
    center_a, _ = observer.log(g @ x)
    center_b, _ = observer.log(ginv @ x)
    phi = np.linspace(0.0, 2.0 * np.pi, n_check, endpoint=False)
    dirs = circle_points(center_a, alpha, phi)
    P = observer.exp(dirs, chi)  # points of circle A on the LSS
    Q = P @ ginv.T  # g^-1 P: the same temperature, seen on circle B
    nb, _ = observer.log(Q)
    phib = circle_phase(center_b, nb)
    # phi_B = s phi + tau: s from the sense of the first step, tau from a circular mean
    step = (phib[1] - phib[0] + np.pi) % (2.0 * np.pi) - np.pi
    s = 1 if step > 0 else -1
    tau = float(np.angle(np.mean(np.exp(1j * (phib - s * phi)))) % (2.0 * np.pi))
    resid = np.abs((phib - s * phi - tau + np.pi) % (2.0 * np.pi) - np.pi)
    if resid.max() > 1e-6:
        raise AssertionError(f"circle map is not a rigid rotation (residual {resid.max():.2e} rad)")
    return CirclePair(center_a, center_b, alpha, tau % (2.0 * np.pi), s, d, g)


def predict_circles(space: Space, observer: geo.Observer, chi: float) -> list[CirclePair]:
    """All matched-circle pairs the observer sees, largest radius first.

    chi: radius of the last-scattering sphere in the space's units (1 for flat spaces whose
    lengths are in units of chi_rec; chi_rec / R_c for curved ones). Pairs from g and g^-1 are
    one pair (kept once, as the element whose matrix key is smaller).
    """
    geometry = space.geometry
    hol = space.elements_within(observer, max_clone_distance(geometry, chi))
    pairs = []
    seen = set()
    for g in hol.matrices:
        k = _key(g)
        if k in seen:
            continue
        ginv = _inverse(geometry, g)
        seen.add(k)
        seen.add(_key(ginv))
        pair = pair_for_element(observer, g, chi)
        if pair is not None:
            pairs.append(pair)
    pairs.sort(key=lambda p: (-p.radius, tuple(np.round(p.center_a, 9))))
    return pairs


def prediction_json(scenario, pairs: list[CirclePair] | None = None) -> dict:
    """The predicted circles of a scenario as one JSON-able dict (the contract of
    ``topology predict --json`` and of ``topology synth --pairs``).

    scenario: a :class:`topology.scenario.Scenario` (space, observer, cosmology, chi); pairs:
    its :func:`predict_circles` if already computed. Keys: family, params, geometry,
    chi_rec_mpc, chi_rec_over_curvature_radius, clone_distance_unit ("chi_rec" flat,
    "curvature_radius" curved) and pairs (:meth:`CirclePair.as_dict`, angles in degrees).
    """
    sc = scenario
    if pairs is None:
        pairs = predict_circles(sc.space, sc.observer, sc.chi)
    return {
        "family": sc.space.family,
        "params": sc.space.params,
        "geometry": sc.space.geometry,
        "chi_rec_mpc": sc.cosmology.chi_rec_mpc,
        "chi_rec_over_curvature_radius": sc.cosmology.chi_rec_over_curvature_radius,
        "clone_distance_unit": "chi_rec" if sc.space.geometry == "flat" else "curvature_radius",
        "pairs": [p.as_dict() for p in pairs],
    }
