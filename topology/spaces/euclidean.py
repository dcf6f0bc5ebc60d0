"""Flat spaces E^3 / Gamma: the compact families E1-E10 and the non-compact E11-E17.

Each family is a lattice Lambda of pure translations (rank 3 compact, 2 chimney, 1 slab) and
a finite list of coset representatives g_k = (R_k, t_k), so that Gamma = { T(lambda) g_k }.
The elements that move an observer x by less than r are found exactly: for each coset,
|R_k x + t_k + lambda - x| < r is a box of lattice indices bounded through the dual basis.

Parameters (all lengths in units of chi_rec unless the config says ``length_unit = "Mpc"``):

* ``lengths``: for E1 the three lattice lengths [a, b, c] (with optional ``angles``
  [alpha, beta, gamma] in degrees, crystallographic convention: alpha between b and c, beta
  between a and c, gamma between a and b); for the twisted families the lattice translations in
  the plane perpendicular to the screw axis, then the translation of the screw motion itself
  (not the period of the covering torus, which is 2, 4, 3 or 6 times it).

Family definitions follow Wolf (1967) "Spaces of constant curvature" and the naming E1-E18 of
the COMPACT collaboration (Akrami et al. 2024, Petersen et al. 2023).
"""

from __future__ import annotations

import numpy as np

from .. import geometry as geo
from ..errors import InputError
from .base import Holonomies, Space, sort_holonomies

MAX_ELEMENTS = 4_000_000


def affine(R: np.ndarray, t) -> np.ndarray:
    """4x4 matrix of x -> R x + t."""
    m = np.eye(4)
    m[:3, :3] = R
    m[:3, 3] = t
    return m


def lattice_from_cell(lengths, angles_deg=(90.0, 90.0, 90.0)) -> np.ndarray:
    """Rows a, b, c of a lattice with lengths and crystallographic angles (degrees).

    a along x, b in the x-y plane (common practice in crystallography).
    """
    a, b, c = (float(v) for v in lengths)
    al, be, ga = np.radians(np.asarray(angles_deg, dtype=float))
    va = np.array([a, 0.0, 0.0])
    vb = b * np.array([np.cos(ga), np.sin(ga), 0.0])
    cx = np.cos(be)
    cy = (np.cos(al) - np.cos(be) * np.cos(ga)) / np.sin(ga)
    cz2 = 1.0 - cx**2 - cy**2
    if cz2 <= 1e-12:
        raise InputError(f"angles {list(np.degrees([al, be, ga]))} deg do not form a lattice cell", "[space] angles")
    vc = c * np.array([cx, cy, np.sqrt(cz2)])
    return np.vstack([va, vb, vc])


class FlatSpace(Space):
    """A flat space given by its translation lattice and coset representatives."""

    geometry = "flat"

    def __init__(self, family: str, lattice: np.ndarray, cosets: list[tuple[np.ndarray, np.ndarray]],
                 params: dict, *, orientable: bool = True, homogeneous: bool = False):
        super().__init__()
        self.family = family
        self.lattice = np.atleast_2d(np.asarray(lattice, dtype=float))
        self.cosets = [(np.asarray(R, float), np.asarray(t, float)) for R, t in cosets]
        self.params = params
        self.orientable = orientable
        self.homogeneous = homogeneous
        self.compact = self.lattice.shape[0] == 3
        if np.linalg.matrix_rank(self.lattice) != self.lattice.shape[0]:
            raise InputError("lattice translations are degenerate", "[space] lengths")

    @property
    def covering_cell_volume(self) -> float:
        return float(abs(np.linalg.det(self.lattice))) if self.compact else float("inf")

    @property
    def volume(self) -> float:
        """Volume of the space (covering-torus volume / order of the point group)."""
        return self.covering_cell_volume / len(self.cosets)

    def elements_within(self, observer: geo.Observer, radius: float) -> Holonomies:
        x = observer.point[:3]
        B = self.lattice  # (k, 3)
        dual = np.linalg.pinv(B)  # (3, k): lambda = n @ B  ->  n = lambda @ dual
        dual_norm = np.linalg.norm(dual, axis=0)
        mats = []
        for R, t in self.cosets:
            v = R @ x + t - x
            c = v @ dual
            lo = np.floor(-c - radius * dual_norm).astype(int)
            hi = np.ceil(-c + radius * dual_norm).astype(int)
            count = int(np.prod(hi - lo + 1))
            if count * len(self.cosets) > MAX_ELEMENTS:
                raise InputError(
                    f"the space is too small for this search radius: more than {MAX_ELEMENTS} "
                    f"images within {radius:.3g} chi_rec", "[space] lengths")
            grids = np.meshgrid(*[np.arange(a, b + 1) for a, b in zip(lo, hi)], indexing="ij")
            n = np.stack([g.ravel() for g in grids], axis=1)
            lam = n @ B
            d = np.linalg.norm(lam + v, axis=1)
            sel = lam[d < radius]
            m = np.repeat(affine(R, t)[None], len(sel), axis=0)
            m[:, :3, 3] += sel
            mats.append(m)
        return sort_holonomies("flat", observer, np.concatenate(mats), radius)


# ---------------------------------------------------------------------------------------------
# parameter handling
# ---------------------------------------------------------------------------------------------
def _lengths(params: dict, allowed: tuple[int, ...]) -> np.ndarray:
    if "lengths" not in params:
        raise InputError("missing (the family's lattice and screw lengths)", "[space] lengths")
    try:
        L = np.asarray(params["lengths"], dtype=float).ravel()
    except (TypeError, ValueError):
        raise InputError("must be a list of numbers", "[space] lengths") from None
    if L.size not in allowed:
        want = " or ".join(str(a) for a in allowed)
        raise InputError(f"this family takes {want} lengths, got {L.size}", "[space] lengths")
    if not np.all(np.isfinite(L)) or np.any(L <= 0):
        raise InputError(f"lengths must be positive, got {L.tolist()}", "[space] lengths")
    return L


def _angle(params: dict, default: float = 90.0) -> float:
    g = float(params.get("angle", default))
    if not 0.0 < g < 180.0:
        raise InputError(f"the angle between the plane translations must be in (0, 180) deg, got {g}", "[space] angle")
    return g


def _plane(L1: float, L2: float, gamma_deg: float) -> np.ndarray:
    g = np.radians(gamma_deg)
    return np.array([[L1, 0.0, 0.0], [L2 * np.cos(g), L2 * np.sin(g), 0.0]])


def _equal_plane(L: np.ndarray, family: str) -> tuple[float, float]:
    """Twisted families with a square or hexagonal plane lattice: [L, L3] or [L, L, L3]."""
    if L.size == 3:
        if not np.isclose(L[0], L[1], rtol=1e-9):
            raise InputError(f"{family} needs equal plane translations, got {L[0]} and {L[1]}", "[space] lengths")
        return float(L[0]), float(L[2])
    return float(L[0]), float(L[1])


def _screw_cosets(order: int, L3: float) -> list:
    R = geo.rotation_z(2.0 * np.pi / order)
    return [(np.linalg.matrix_power(R, k), np.array([0.0, 0.0, k * L3])) for k in range(order)]


def make_E1(params):
    L = _lengths(params, (3,))
    angles = params.get("angles", (90.0, 90.0, 90.0))
    lat = lattice_from_cell(L, angles)
    return FlatSpace("E1", lat, [(np.eye(3), np.zeros(3))], {"lengths": L.tolist(), "angles": list(map(float, angles))},
                     homogeneous=True)


def make_E2(params):
    L = _lengths(params, (3,))
    g = _angle(params)
    lat = np.vstack([_plane(L[0], L[1], g), [0.0, 0.0, 2 * L[2]]])
    return FlatSpace("E2", lat, _screw_cosets(2, L[2]), {"lengths": L.tolist(), "angle": g})


def make_E3(params):
    L = _lengths(params, (2, 3))
    a, L3 = _equal_plane(L, "E3")
    lat = np.vstack([_plane(a, a, 90.0), [0.0, 0.0, 4 * L3]])
    return FlatSpace("E3", lat, _screw_cosets(4, L3), {"lengths": [a, a, L3]})


def make_E4(params):
    L = _lengths(params, (2, 3))
    a, L3 = _equal_plane(L, "E4")
    lat = np.vstack([_plane(a, a, 120.0), [0.0, 0.0, 3 * L3]])
    return FlatSpace("E4", lat, _screw_cosets(3, L3), {"lengths": [a, a, L3]})


def make_E5(params):
    L = _lengths(params, (2, 3))
    a, L3 = _equal_plane(L, "E5")
    lat = np.vstack([_plane(a, a, 120.0), [0.0, 0.0, 6 * L3]])
    return FlatSpace("E5", lat, _screw_cosets(6, L3), {"lengths": [a, a, L3]})


def make_E6(params):
    """Hantzsche-Wendt: three half-turn screw motions about mutually perpendicular, disjoint axes.

    a: (x, y, z) -> (x + Lx, -y + Ly, -z); b: (-x, y + Ly, -z + Lz); c: (-x + Lx, -y, z + Lz),
    translation lattice 2Lx, 2Ly, 2Lz (Wolf 1967; a^2, b^2, c^2 are the lattice generators).
    """
    L = _lengths(params, (3,))
    Lx, Ly, Lz = L
    cos = [
        (np.eye(3), np.zeros(3)),
        (np.diag([1.0, -1.0, -1.0]), np.array([Lx, Ly, 0.0])),
        (np.diag([-1.0, 1.0, -1.0]), np.array([0.0, Ly, Lz])),
        (np.diag([-1.0, -1.0, 1.0]), np.array([Lx, 0.0, Lz])),
    ]
    return FlatSpace("E6", np.diag(2 * L), cos, {"lengths": L.tolist()})


def make_E11(params):
    L = _lengths(params, (2,))
    g = _angle(params)
    return FlatSpace("E11", _plane(L[0], L[1], g), [(np.eye(3), np.zeros(3))],
                     {"lengths": L.tolist(), "angle": g}, homogeneous=True)


def make_E16(params):
    L = _lengths(params, (1,))
    return FlatSpace("E16", np.array([[0.0, 0.0, L[0]]]), [(np.eye(3), np.zeros(3))],
                     {"lengths": L.tolist()}, homogeneous=True)


FLAT_FAMILIES = {
    "E1": make_E1, "E2": make_E2, "E3": make_E3, "E4": make_E4, "E5": make_E5, "E6": make_E6,
    "E11": make_E11, "E16": make_E16,
}

FLAT_KEYS = {"lengths", "angles", "angle", "length_unit"}
