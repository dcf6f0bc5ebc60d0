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

Eigenmode counts: :func:`mode_count` / :func:`mode_counts` give the number of Gamma-invariant
eigenmodes at harmonic degree k (eigenvalue k(k+2)) by the character formula;
:func:`molien_coefficients` expands the Molien series of a group of quaternions and
:func:`klein_molien_series` gives the closed forms from Klein's invariants (for groups acting by
left multiplication alone, N_k = (k+1) m_k).
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


# ---------------------------------------------------------------------------------------------
# eigenmode counts: how many Laplacian eigenmodes of S^3 survive on S^3/Gamma
# ---------------------------------------------------------------------------------------------
def su2_characters(cos_theta, kmax: int) -> np.ndarray:
    """chi_k(theta) = sin((k+1) theta) / sin(theta) for k = 0..kmax, shape (kmax+1, ...).

    The character of the spin-k/2 representation of SU(2) at a unit quaternion of real part
    cos(theta) (Weyl character formula; common practice). Computed as the Chebyshev polynomial
    U_k(cos theta) by its three-term recurrence, exact at theta = 0 and pi.
    """
    c = np.asarray(cos_theta, dtype=float)
    out = np.empty((kmax + 1,) + c.shape)
    out[0] = 1.0
    if kmax >= 1:
        out[1] = 2.0 * c
    for k in range(2, kmax + 1):
        out[k] = 2.0 * c * out[k - 1] - out[k - 2]
    return out


def _check_kmax(kmax) -> int:
    if isinstance(kmax, bool) or not isinstance(kmax, (int, np.integer)) or kmax < 0:
        raise InputError(f"must be a whole number >= 0, got {kmax!r}", "kmax")
    return int(kmax)


def _rounded_counts(values: np.ndarray, what: str) -> np.ndarray:
    counts = np.rint(values)
    if np.max(np.abs(values - counts), initial=0.0) > 1e-6:
        raise AssertionError(f"{what}: character average is not a whole number (group table broken?)")
    return counts.astype(np.int64)


def mode_counts(space: SphericalSpace, kmax: int) -> np.ndarray:
    """Number of Gamma-invariant eigenmodes of the Laplacian on S^3/Gamma for k = 0..kmax.

    The degree-k harmonics of S^3 (eigenvalue -k(k+2)) carry the SU(2) x SU(2) representation
    V_{k/2} (x) V_{k/2}, the pair (a, b) acting by f(x) -> f(a^-1 x b^-1). Its trace there is
    chi_k(a) chi_k(b) (the characters are real and chi_k(b^-1) = chi_k(b), so the side and
    sense of each factor do not matter), and the dimension of the invariant subspace is the
    group average (character orthogonality; e.g. Lehoucq, Weeks, Uzan, Gausmann & Luminet 2002,
    CQG 19, 4683):

        N_k = (1/|Gamma|) sum_{(a, b) in Gamma} chi_k(a) chi_k(b).
    """
    kmax = _check_kmax(kmax)
    ca = su2_characters(space.pairs[:, 0, 0], kmax)
    cb = su2_characters(space.pairs[:, 1, 0], kmax)
    return _rounded_counts(np.mean(ca * cb, axis=1), space.describe())


def mode_count(space: SphericalSpace, k: int) -> int:
    """Number of Gamma-invariant eigenmodes at harmonic degree k (see :func:`mode_counts`)."""
    k = _check_kmax(k)
    return int(mode_counts(space, k)[k])


def molien_coefficients(group_quaternions, kmax: int) -> np.ndarray:
    """Coefficients m_0..m_kmax of the Molien series of a finite group G of unit quaternions.

    G acts on C^2 through SU(2); the Molien series (Molien 1897) is

        M(t) = (1/|G|) sum_{g in G} 1 / det(1 - t g) = sum_k m_k t^k,

    with det(1 - t g) = 1 - 2 Re(g) t + t^2, m_k the number of independent G-invariant binary
    forms of degree k. Each 1/(1 - 2 c t + t^2) is expanded as a power series by its
    recurrence; for G acting by left multiplication alone, N_k = (k + 1) m_k.
    """
    q = np.asarray(group_quaternions, dtype=float).reshape(-1, 4)
    kmax = _check_kmax(kmax)
    c = q[:, 0]
    # 1/(1 - 2 c t + t^2) = sum_k s_k t^k with s_k = 2 c s_{k-1} - s_{k-2}, s_0 = 1, s_{-1} = 0
    s = np.zeros((kmax + 1, len(c)))
    prev, cur = np.zeros_like(c), np.ones_like(c)
    for k in range(kmax + 1):
        s[k] = cur
        prev, cur = cur, 2.0 * c * cur - prev
    return _rounded_counts(s.mean(axis=1), "molien_coefficients")


def _series(num: dict, den: list[int], kmax: int) -> np.ndarray:
    """Power series of (sum_e num[e] t^e) / prod_d (1 - t^d) up to t^kmax (exact integers)."""
    c = np.zeros(kmax + 1, dtype=np.int64)
    for e, v in num.items():
        if e <= kmax:
            c[e] += v
    for d in den:
        for k in range(d, kmax + 1):
            c[k] += c[k - d]
    return c


def klein_molien_series(family: str, kmax: int, *, m: int | None = None, n: int | None = None) -> np.ndarray:
    """Molien coefficients m_0..m_kmax in closed form from Klein's invariants.

    Klein (1884) "Vorlesungen ueber das Ikosaeder" gives the invariant rings of the finite
    subgroups of SU(2): two algebraically independent invariants of degrees d1, d2 and a third of
    degree d3 whose square is a polynomial in them (see also Springer 1977, "Invariant theory",
    LNM 585, sec. 4.5), so that M(t) = (1 + t^d3) / ((1 - t^d1)(1 - t^d2)):

        cyclic Z_n (diag(z, 1/z))  (1 + t^n)        / ((1 - t^2)(1 - t^n))
        binary dihedral D*_m       (1 + t^(2m+2))   / ((1 - t^4)(1 - t^(2m)))
        binary tetrahedral T*      (1 + t^12)       / ((1 - t^6)(1 - t^8))
        binary octahedral O*       (1 + t^18)       / ((1 - t^8)(1 - t^12))
        binary icosahedral I*      (1 + t^30)       / ((1 - t^12)(1 - t^20))

    family: "cyclic" (needs n), "binary_dihedral" (needs m), "binary_tetrahedral",
    "binary_octahedral", "binary_icosahedral".
    """
    kmax = _check_kmax(kmax)
    if family == "cyclic":
        if n is None or n < 1:
            raise InputError(f"cyclic group needs an order n >= 1, got {n!r}", "n")
        d1, d2, d3 = 2, n, n
    elif family == "binary_dihedral":
        if m is None or m < 1:
            raise InputError(f"binary dihedral group needs m >= 1, got {m!r}", "m")
        d1, d2, d3 = 4, 2 * m, 2 * m + 2
    else:
        table = {"binary_tetrahedral": (6, 8, 12), "binary_octahedral": (8, 12, 18),
                 "binary_icosahedral": (12, 20, 30)}
        if family not in table:
            raise InputError(f"unknown group family {family!r}", "family")
        d1, d2, d3 = table[family]
    return _series({0: 1, d3: 1}, [d1, d2], kmax)

