"""Flat spaces E^3 / Gamma: the compact families E1-E10 and the non-compact E11-E17.

Each family is a lattice Lambda of pure translations (rank 3 compact, 2 chimney, 1 slab) and
a finite list of coset representatives g_k = (R_k, t_k), so that Gamma = { T(lambda) g_k }.
The elements that move an observer x by less than r are found exactly: for each coset,
|R_k x + t_k + lambda - x| < r is a box of lattice indices bounded through the dual basis.

Parameters (all lengths in units of chi_rec unless the config says ``length_unit = "Mpc"``):

* ``lengths``: for E1 the three lattice lengths [a, b, c] (with optional ``angles``
  [alpha, beta, gamma] in degrees, crystallographic convention: alpha between b and c, beta
  between a and c, gamma between a and b); for every other family the lattice translations in
  the plane (none for the slab with flip E17, one for the chimneys E12-E15), then the
  translation of the screw or glide motion itself (not the period of the covering lattice,
  which is 2, 3, 4 or 6 times it). The screw or glide axis is the z axis (E6: screws along
  x, y and z); glide mirrors contain it. The open directions of the non-compact families:
  E11 z; E12, E14, E15 y; E13 x; E16, E17 x and y.
* ``angle`` (E2, E8, E11): angle in degrees between the two plane translations.
* ``tilt`` (E7, E8, E13): angle in degrees between the glide axis z and the lattice
  translation(s) lying in (E7, E13) or bisected by (E8) the mirror plane; 90 (default) puts
  the plane lattice perpendicular to the glide axis.

Family definitions follow Wolf (1967) "Spaces of constant curvature" (the compact groups
G1-G6 and B1-B4) and the naming E1-E18 of the COMPACT collaboration (Petersen et al. 2023,
"Cosmic topology. Part I", arXiv:2211.02603; Eskilt et al. 2024, "Part IIa",
arXiv:2306.17112; "Part IIb", arXiv:2510.05030, for the non-orientable ones), who took the
names of Riazuelo et al. 2004 (Phys. Rev. D 69, 103518). The stored copies of these papers
reachable from this project show only their abstracts, so the correspondence below, E7-E10 =
B1-B4 in Wolf's order (the table of manifolds in COMPACT Part I), is written from memory, and
the generator matrices are this module's own, derived from the classification of
Bieberbach groups (they agree with Wolf's groups up to a change of coordinates):

  E1 G1 torocosm         E2 G2 dicosm          E3 G4 tetracosm       E4 G3 tricosm
  E5 G5 hexacosm         E6 G6 didicosm (Hantzsche-Wendt)
  E7 B1 first amphicosm (Klein space)          E8 B2 second amphicosm (Klein, horizontal flip)
  E9 B3 first amphidicosm (Klein, vertical flip)  E10 B4 second amphidicosm (Klein, half-turn)
  E11 chimney, E12 chimney with half turn, E13 chimney with vertical flip,
  E14 chimney with horizontal flip, E15 chimney with half-turn and flip, E16 slab,
  E17 slab with flip.

B1-B4 are told apart by their first homology (Conway & Rossetti 2003 "Describing the
platycosms", from memory): B1 Z^2+Z2, B2 Z^2, B3 Z+Z2+Z2, B4 Z+Z4; tests/test_spaces_flat.py
checks a presentation of each group here against these. For the chimneys with a flip the
words "vertical" and "horizontal" are read with the chimney's open direction vertical:
E13 flips the open direction (its lattice lies in the mirror plane, fundamental group Z^2),
E14 flips a direction of the lattice plane (the Klein bottle times a line); this reading of
the names is the module's own.
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
def _only(params: dict, family: str, allowed: set) -> None:
    """Reject a flat-family key this family does not take (e.g. ``angle`` for E3)."""
    for key in params:
        if key not in allowed and key != "length_unit":
            ok = ", ".join(sorted(allowed))
            raise InputError(f"family {family} does not take this key; it takes: {ok}", f"[space] {key}")


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
    try:
        g = float(params.get("angle", default))
    except (TypeError, ValueError):
        raise InputError("must be a number of degrees", "[space] angle") from None
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
    _only(params, "E1", {"lengths", "angles"})
    L = _lengths(params, (3,))
    try:
        angles = [float(v) for v in params.get("angles", (90.0, 90.0, 90.0))]
    except (TypeError, ValueError):
        raise InputError("must be three numbers (degrees)", "[space] angles") from None
    if len(angles) != 3 or not all(0.0 < v < 180.0 for v in angles):
        raise InputError(f"needs three angles in (0, 180) deg, got {angles}", "[space] angles")
    lat = lattice_from_cell(L, angles)
    return FlatSpace("E1", lat, [(np.eye(3), np.zeros(3))], {"lengths": L.tolist(), "angles": list(map(float, angles))},
                     homogeneous=True)


def make_E2(params):
    _only(params, "E2", {"lengths", "angle"})
    L = _lengths(params, (3,))
    g = _angle(params)
    lat = np.vstack([_plane(L[0], L[1], g), [0.0, 0.0, 2 * L[2]]])
    return FlatSpace("E2", lat, _screw_cosets(2, L[2]), {"lengths": L.tolist(), "angle": g})


def make_E3(params):
    _only(params, "E3", {"lengths"})
    L = _lengths(params, (2, 3))
    a, L3 = _equal_plane(L, "E3")
    lat = np.vstack([_plane(a, a, 90.0), [0.0, 0.0, 4 * L3]])
    return FlatSpace("E3", lat, _screw_cosets(4, L3), {"lengths": [a, a, L3]})


def make_E4(params):
    _only(params, "E4", {"lengths"})
    L = _lengths(params, (2, 3))
    a, L3 = _equal_plane(L, "E4")
    lat = np.vstack([_plane(a, a, 120.0), [0.0, 0.0, 3 * L3]])
    return FlatSpace("E4", lat, _screw_cosets(3, L3), {"lengths": [a, a, L3]})


def make_E5(params):
    _only(params, "E5", {"lengths"})
    L = _lengths(params, (2, 3))
    a, L3 = _equal_plane(L, "E5")
    lat = np.vstack([_plane(a, a, 120.0), [0.0, 0.0, 6 * L3]])
    return FlatSpace("E5", lat, _screw_cosets(6, L3), {"lengths": [a, a, L3]})


def make_E6(params):
    """Hantzsche-Wendt: three half-turn screw motions about mutually perpendicular, disjoint axes.

    a: (x, y, z) -> (x + Lx, -y + Ly, -z); b: (-x, y + Ly, -z + Lz); c: (-x + Lx, -y, z + Lz),
    translation lattice 2Lx, 2Ly, 2Lz (Wolf 1967; a^2, b^2, c^2 are the lattice generators).
    """
    _only(params, "E6", {"lengths"})
    L = _lengths(params, (3,))
    Lx, Ly, Lz = L
    cos = [
        (np.eye(3), np.zeros(3)),
        (np.diag([1.0, -1.0, -1.0]), np.array([Lx, Ly, 0.0])),
        (np.diag([-1.0, 1.0, -1.0]), np.array([0.0, Ly, Lz])),
        (np.diag([-1.0, -1.0, 1.0]), np.array([Lx, 0.0, Lz])),
    ]
    return FlatSpace("E6", np.diag(2 * L), cos, {"lengths": L.tolist()})


# ---------------------------------------------------------------------------------------------
# non-orientable and non-compact families (glide reflections, chimneys, slabs)
# ---------------------------------------------------------------------------------------------
FLIP_X = np.diag([-1.0, 1.0, 1.0])  # mirror: the y-z plane (contains the glide axis z)
FLIP_Y = np.diag([1.0, -1.0, 1.0])  # mirror: the x-z plane
HALF_TURN_Z = np.diag([-1.0, -1.0, 1.0])
ID3 = np.eye(3)
ZERO3 = np.zeros(3)


def _tilt(params: dict) -> float:
    """Tilt in degrees of the mirror-plane lattice translations towards the glide axis."""
    try:
        t = float(params.get("tilt", 90.0))
    except (TypeError, ValueError):
        raise InputError("must be a number of degrees", "[space] tilt") from None
    if not 0.0 < t < 180.0 or abs(np.sin(np.radians(t))) < 1e-6:
        raise InputError(f"must lie strictly between 0 and 180 deg, got {t}", "[space] tilt")
    return t


def _tilted(L: float, tilt_deg: float) -> np.ndarray:
    """Translation of length L in the y-z mirror plane at angle tilt from the z axis."""
    c = np.radians(tilt_deg)
    return L * np.array([0.0, np.sin(c), np.cos(c)])


def _glide_cosets(R: np.ndarray, h: float) -> list:
    """Identity and the glide (R, h z) along the z axis."""
    return [(ID3, ZERO3), (R, np.array([0.0, 0.0, h]))]


def make_E7(params):
    """Klein space (Wolf's B1, first amphicosm; the Klein bottle times a circle).

    lengths [L1, L2, h]: glide g: (x, y, z) -> (-x, y, z + h); lattice L1 x, L2 (0, sin tilt,
    cos tilt) and 2h z (= g^2). Volume L1 L2 h sin(tilt).
    """
    _only(params, "E7", {"lengths", "tilt"})
    L = _lengths(params, (3,))
    tilt = _tilt(params)
    lat = np.vstack([[L[0], 0.0, 0.0], _tilted(L[1], tilt), [0.0, 0.0, 2 * L[2]]])
    return FlatSpace("E7", lat, _glide_cosets(FLIP_X, L[2]), {"lengths": L.tolist(), "tilt": tilt},
                     orientable=False)


def make_E8(params):
    """Klein space with horizontal flip (Wolf's B2, second amphicosm).

    lengths [L, h] or [L, L, h] (equal plane translations: the mirror swaps them): glide
    g: (x, y, z) -> (-x, y, z + h); plane lattice a1, a2 = L (+-sin(angle/2), cos(angle/2) u)
    with u = (sin tilt, cos tilt) in the y-z plane, g a1 = a2 (a centred lattice for the
    reflection); lattice a1, a2, 2h z. Volume L^2 sin(angle) h sin(tilt).
    """
    _only(params, "E8", {"lengths", "angle", "tilt"})
    L = _lengths(params, (2, 3))
    a, h = _equal_plane(L, "E8")
    gam = _angle(params)
    tilt = _tilt(params)
    s, c = np.sin(np.radians(gam) / 2), np.cos(np.radians(gam) / 2)
    along = _tilted(a * c, tilt)
    lat = np.vstack([along + [a * s, 0, 0], along - [a * s, 0, 0], [0.0, 0.0, 2 * h]])
    return FlatSpace("E8", lat, _glide_cosets(FLIP_X, h),
                     {"lengths": [a, a, h], "angle": gam, "tilt": tilt}, orientable=False)


def _amphidicosm(family: str, params: dict, shift_y: bool) -> FlatSpace:
    _only(params, family, {"lengths"})
    L = _lengths(params, (3,))
    Lx, Ly, h = L
    a = np.array([0.0, Ly / 2 if shift_y else 0.0, h])  # glide A = (FLIP_X, a)
    b = np.array([Lx / 2, 0.0, 0.0])  # glide B = (FLIP_Y, b)
    cos = [(ID3, ZERO3), (FLIP_X, a), (FLIP_Y, b), (HALF_TURN_Z, FLIP_X @ b + a)]
    return FlatSpace(family, np.diag([Lx, Ly, 2 * h]), cos, {"lengths": L.tolist()}, orientable=False)


def make_E9(params):
    """Klein space with vertical flip (Wolf's B3, first amphidicosm).

    lengths [Lx, Ly, h]: glides A: (-x, y, z + h) and B: (x + Lx/2, -y, z); AB is a half-turn
    screw about a z line by h. Lattice Lx x, Ly y, 2h z; volume Lx Ly h / 2.
    """
    return _amphidicosm("E9", params, shift_y=False)


def make_E10(params):
    """Klein space with half-turn (Wolf's B4, second amphidicosm).

    As E9 but the glide A also shifts by half the y translation: A: (-x, y + Ly/2, z + h),
    B: (x + Lx/2, -y, z). Lattice Lx x, Ly y, 2h z; volume Lx Ly h / 2.
    """
    return _amphidicosm("E10", params, shift_y=True)


def make_E11(params):
    _only(params, "E11", {"lengths", "angle"})
    L = _lengths(params, (2,))
    g = _angle(params)
    return FlatSpace("E11", _plane(L[0], L[1], g), [(np.eye(3), np.zeros(3))],
                     {"lengths": L.tolist(), "angle": g}, homogeneous=True)


def make_E12(params):
    """Chimney with half turn: screw (-x, -y, z + h), lattice L1 x and 2h z (open along y).

    lengths [L1, h].
    """
    _only(params, "E12", {"lengths"})
    L = _lengths(params, (2,))
    lat = np.array([[L[0], 0.0, 0.0], [0.0, 0.0, 2 * L[1]]])
    return FlatSpace("E12", lat, _screw_cosets(2, L[1]), {"lengths": L.tolist()})


def make_E13(params):
    """Chimney with vertical flip: glide (-x, y, z + h) flipping the open direction x.

    lengths [L1, h]: lattice L1 (0, sin tilt, cos tilt) and 2h z, both in the mirror plane.
    """
    _only(params, "E13", {"lengths", "tilt"})
    L = _lengths(params, (2,))
    tilt = _tilt(params)
    lat = np.vstack([_tilted(L[0], tilt), [0.0, 0.0, 2 * L[1]]])
    return FlatSpace("E13", lat, _glide_cosets(FLIP_X, L[1]), {"lengths": L.tolist(), "tilt": tilt},
                     orientable=False)


def make_E14(params):
    """Chimney with horizontal flip (Klein bottle times a line): glide (-x, y, z + h).

    lengths [L1, h]: lattice L1 x (perpendicular to the mirror) and 2h z; open along y.
    """
    _only(params, "E14", {"lengths"})
    L = _lengths(params, (2,))
    lat = np.array([[L[0], 0.0, 0.0], [0.0, 0.0, 2 * L[1]]])
    return FlatSpace("E14", lat, _glide_cosets(FLIP_X, L[1]), {"lengths": L.tolist()}, orientable=False)


def make_E15(params):
    """Chimney with half-turn and flip: E9 without its y translation (open along y).

    lengths [L1, h]: glides A: (-x, y, z + h), B: (x + L1/2, -y, z), their product a half-turn
    screw about a z line; lattice L1 x and 2h z.
    """
    _only(params, "E15", {"lengths"})
    L = _lengths(params, (2,))
    L1, h = L
    a = np.array([0.0, 0.0, h])
    b = np.array([L1 / 2, 0.0, 0.0])
    cos = [(ID3, ZERO3), (FLIP_X, a), (FLIP_Y, b), (HALF_TURN_Z, FLIP_X @ b + a)]
    lat = np.array([[L1, 0.0, 0.0], [0.0, 0.0, 2 * h]])
    return FlatSpace("E15", lat, cos, {"lengths": L.tolist()}, orientable=False)

def make_E16(params):
    _only(params, "E16", {"lengths"})
    L = _lengths(params, (1,))
    return FlatSpace("E16", np.array([[0.0, 0.0, L[0]]]), [(np.eye(3), np.zeros(3))],
                     {"lengths": L.tolist()}, homogeneous=True)



def make_E17(params):
    """Slab with flip: glide (-x, y, z + h) and its square, the translation 2h z.

    lengths [h] (the glide translation; the covering slab has period 2h).
    """
    _only(params, "E17", {"lengths"})
    L = _lengths(params, (1,))
    return FlatSpace("E17", np.array([[0.0, 0.0, 2 * L[0]]]), _glide_cosets(FLIP_X, L[0]),
                     {"lengths": L.tolist()}, orientable=False)


FLAT_FAMILIES = {
    "E1": make_E1, "E2": make_E2, "E3": make_E3, "E4": make_E4, "E5": make_E5, "E6": make_E6,
    "E7": make_E7, "E8": make_E8, "E9": make_E9, "E10": make_E10,
    "E11": make_E11, "E12": make_E12, "E13": make_E13, "E14": make_E14, "E15": make_E15,
    "E16": make_E16, "E17": make_E17,
}

FLAT_KEYS = {"lengths", "angles", "angle", "tilt", "length_unit"}
