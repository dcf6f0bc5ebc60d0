"""Spherical spaces S^3 / Gamma: lens spaces L(p, q), prism spaces S^3/D*_m and the
binary tetrahedral, octahedral and icosahedral (Poincare dodecahedral) spaces.

S^3 is the group of unit quaternions; every element of Gamma is stored as a pair of unit
quaternions (a, b) acting by x -> a x b, and as the matching 4x4 matrix. Distances are in units
of the curvature radius.

* L(p, q): (z1, z2) -> (e^{2 pi i/p} z1, e^{2 pi i q/p} z2) with z1 = w + i x, z2 = y + i z,
  i.e. a = e^{i pi (1+q)/p}, b = e^{i pi (1-q)/p} (Gausmann et al. 2001). Homogeneous only
  for q = +-1 (mod p).
* D*_m (order 4m), T* (24), O* (48), I* (120) act by left multiplication (Clifford
  translations, homogeneous spaces), with the element lists of Coxeter, "Regular complex
  polytopes" (binary polyhedral groups as quaternions).
"""

from __future__ import annotations

import itertools
import math

import numpy as np

from .. import geometry as geo
from ..errors import InputError
from .base import Holonomies, Space, sort_holonomies

GOLDEN = (1.0 + math.sqrt(5.0)) / 2.0


class SphericalSpace(Space):
    """S^3/Gamma for a finite group Gamma given as quaternion pairs (a, b): x -> a x b."""

    geometry = "spherical"

    def __init__(self, family: str, pairs: np.ndarray, params: dict, *, homogeneous: bool):
        super().__init__()
        self.family = family
        self.pairs = np.asarray(pairs, dtype=float)  # (order, 2, 4)
        self.params = params
        self.homogeneous = homogeneous
        self.matrices = np.einsum("nij,njk->nik", geo.left_matrix(self.pairs[:, 0]), geo.right_matrix(self.pairs[:, 1]))
        _check_group(self.matrices, family)

    @property
    def order(self) -> int:
        return len(self.pairs)

    @property
    def volume(self) -> float:
        """Volume 2 pi^2 / |Gamma| in units of R_c^3."""
        return 2.0 * math.pi**2 / self.order

    def elements_within(self, observer: geo.Observer, radius: float) -> Holonomies:
        return sort_holonomies("spherical", observer, self.matrices, radius)


def _check_group(mats: np.ndarray, family: str) -> None:
    """Closure under products, and no duplicates (a cheap guard on the tables)."""
    n = len(mats)
    keys = {tuple(np.round(m, 8).ravel()) for m in mats}
    if len(keys) != n:
        raise AssertionError(f"{family}: repeated group elements")
    prods = np.einsum("aij,bjk->abik", mats, mats).reshape(-1, 16)
    if n <= 200:
        if any(tuple(np.round(p, 8)) not in keys for p in prods):
            raise AssertionError(f"{family}: element table is not closed under products")


def _left(quats) -> np.ndarray:
    q = np.asarray(quats, dtype=float)
    one = np.tile([1.0, 0.0, 0.0, 0.0], (len(q), 1))
    return np.stack([q, one], axis=1)


def binary_tetrahedral() -> np.ndarray:
    """T*: the 8 units +-1, +-i, +-j, +-k and the 16 (+-1 +-i +-j +-k)/2."""
    q = [s * e for e in np.eye(4) for s in (1.0, -1.0)]
    q += [np.array(signs) / 2.0 for signs in itertools.product((1.0, -1.0), repeat=4)]
    return np.array(q)


def binary_octahedral() -> np.ndarray:
    """O*: T* and the 24 quaternions with two entries +-1/sqrt(2) and two zeros."""
    q = list(binary_tetrahedral())
    for i, j in itertools.combinations(range(4), 2):
        for si, sj in itertools.product((1.0, -1.0), repeat=2):
            v = np.zeros(4)
            v[i], v[j] = si / math.sqrt(2.0), sj / math.sqrt(2.0)
            q.append(v)
    return np.array(q)


def _even_permutations(n: int):
    for p in itertools.permutations(range(n)):
        inv = sum(1 for i in range(n) for j in range(i + 1, n) if p[i] > p[j])
        if inv % 2 == 0:
            yield p


def binary_icosahedral() -> np.ndarray:
    """I*: T* and the 96 even permutations of (+-phi, +-1, +-1/phi, 0)/2."""
    q = list(binary_tetrahedral())
    base = (GOLDEN, 1.0, 1.0 / GOLDEN, 0.0)
    for p in _even_permutations(4):
        for signs in itertools.product((1.0, -1.0), repeat=3):
            v = np.zeros(4)
            vals = [signs[0] * base[0], signs[1] * base[1], signs[2] * base[2], 0.0]
            for k in range(4):
                v[p[k]] = vals[k] / 2.0
            q.append(v)
    return np.array(q)


def binary_dihedral(m: int) -> np.ndarray:
    """D*_m (order 4m): a^k and a^k j for k = 0..2m-1, a = cos(pi/m) + i sin(pi/m)."""
    q = []
    for k in range(2 * m):
        a = np.array([math.cos(math.pi * k / m), math.sin(math.pi * k / m), 0.0, 0.0])
        q.append(a)
        q.append(geo.quat_multiply(a, [0.0, 0.0, 1.0, 0.0]))
    return np.array(q)


def lens_pairs(p: int, q: int) -> np.ndarray:
    pairs = []
    for k in range(p):
        th = math.pi * k * (1 + q) / p
        ps = math.pi * k * (1 - q) / p
        pairs.append([[math.cos(th), math.sin(th), 0, 0], [math.cos(ps), math.sin(ps), 0, 0]])
    return np.array(pairs, dtype=float)


def _int_param(params: dict, key: str, minimum: int) -> int:
    if key not in params:
        raise InputError("missing", f"[space] {key}")
    v = params[key]
    if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or (isinstance(v, float) and not v.is_integer()):
        raise InputError(f"must be a whole number, got {v!r}", f"[space] {key}")
    v = int(v)
    if v < minimum:
        raise InputError(f"must be >= {minimum}, got {v}", f"[space] {key}")
    return v


def make_lens(params):
    p = _int_param(params, "p", 2)
    q = _int_param(params, "q", 1)
    if not q < p:
        raise InputError(f"lens space L(p, q) needs 0 < q < p, got p = {p}, q = {q}", "[space] q")
    if math.gcd(p, q) != 1:
        raise InputError(f"lens space L(p, q) needs p and q coprime, got gcd({p}, {q}) = {math.gcd(p, q)}", "[space] q")
    homog = (q % p) in (1, p - 1)
    return SphericalSpace("lens", lens_pairs(p, q), {"p": p, "q": q}, homogeneous=homog)


def make_prism(params):
    m = _int_param(params, "m", 2)
    return SphericalSpace("prism", _left(binary_dihedral(m)), {"m": m}, homogeneous=True)


def make_tetrahedral(params):
    return SphericalSpace("tetrahedral", _left(binary_tetrahedral()), {}, homogeneous=True)


def make_octahedral(params):
    return SphericalSpace("octahedral", _left(binary_octahedral()), {}, homogeneous=True)


def make_dodecahedral(params):
    return SphericalSpace("dodecahedral", _left(binary_icosahedral()), {}, homogeneous=True)


SPHERICAL_FAMILIES = {
    "lens": make_lens, "prism": make_prism, "tetrahedral": make_tetrahedral,
    "octahedral": make_octahedral, "dodecahedral": make_dodecahedral,
}
SPHERICAL_KEYS = {"lens": {"p", "q"}, "prism": {"m"}, "tetrahedral": set(), "octahedral": set(), "dodecahedral": set()}
