"""Geometric bounds: turn "no matched circles of radius >= alpha_min" into bounds on the size of
space (flat), on chi_rec / R_c and on Omega_K (curved).

A holonomy g that moves the observer by d gives a circle pair of angular radius alpha with
(Cornish, Spergel & Starkman 1998, Class. Quantum Grav. 15, 2657; :func:`topology.circles.cos_radius`)

    flat:        cos(alpha) = d / (2 chi)
    spherical:   cos(alpha) = tan(d/2) / tan(chi)
    hyperbolic:  cos(alpha) = tanh(d/2) / tanh(chi)

cos(alpha) grows with d, so a search that finds no circle of radius >= alpha_min allows a space
exactly when its shortest displacement at the observer, d_min = min_{g != 1} d(x, g x),
satisfies cos(alpha(d_min)) > cos(alpha_min) (a d_min >= 2 chi gives no circle at all). Hence

* flat: the shortest loop through the observer d_min > 2 chi_rec cos(alpha_min); for the cubic
  torus of side L (inscribed radius R_i = L/2) R_i > chi_rec cos(alpha_min). Scaling a flat
  space and the observer position together by s scales d_min by s, so the smallest allowed
  scale factor is s_min = 2 cos(alpha_min) / d_min (d_min in units of chi_rec).
* spherical: tan(d_min/2) > cos(alpha_min) tan(chi) gives
  chi_rec/R_c < chi_max = arctan(tan(d_min/2) / cos(alpha_min)) (chi < pi/2 throughout: for
  chi >= pi/2 every clone gives a circle of radius >= 90 deg). For an inhomogeneous space the
  space is allowed when *some* observer position sees no such circle, so d_min is maximised over
  observer positions (exactly for lens spaces, :func:`lens_best_observer`).
* hyperbolic: tanh(chi) < tanh(d_min/2) / cos(alpha_min); no bound when the right side is >= 1.

chi_max is turned into a bound on Omega_K with :func:`topology.cosmology.omega_k_for_ratio`:
Omega_K varied at fixed h, omega_b h^2, omega_c h^2 and z_* with Omega_Lambda taking up the
difference (:data:`CONVENTION`). Radians inside; ``alpha_min_deg`` only at :func:`bound_summary`.
"""

from __future__ import annotations

import math

import numpy as np

from . import geometry as geo
from .circles import cos_radius
from .cosmology import Cosmology, omega_k_for_ratio
from .errors import InputError
from .spaces import Space, build_space, family_names
from .spaces.registry import allowed_keys, geometry_of

CONVENTION = ("Omega_K is varied at fixed h, omega_b h^2, omega_c h^2 and z_* of the given background, "
              "with Omega_Lambda taking up the difference")
ASSUMPTIONS = [
    "a search excluded every matched-circle pair of angular radius >= alpha_min (CSS 1998 radius formulas)",
    "a space is allowed when its shortest clone displacement at the observer gives only circles of radius < alpha_min",
    "flat lengths and displacements in units of chi_rec; curved ones in units of the curvature radius R_c",
    "inhomogeneous spherical spaces: the observer position is chosen to weaken the bound (maximum over positions)",
    "L(p, q) and L(p, -q) = L(p, p - q) are isometric (orientation reversed), so lens rows use q <= p/2",
    "spherical bounds use chi_rec/R_c < pi/2 (beyond it every clone gives a circle of radius >= 90 deg)",
    "min_omega_k / max_omega_k are null when the bound is not reached for |Omega_K| < 0.5",
]
DEFAULT_P_MAX = 20
DEFAULT_M_MAX = 10
DEFAULT_POSITIONS = 4000


# ---------------------------------------------------------------------------------------------
# the one criterion
# ---------------------------------------------------------------------------------------------
def check_alpha_min(alpha_min: float, where: str = "--alpha-min") -> float:
    """alpha_min in radians, checked to lie in (0, pi/2]."""
    a = float(alpha_min)
    if not (math.isfinite(a) and 0.0 < a <= math.pi / 2 * (1 + 1e-15)):
        raise InputError(f"alpha_min must be in (0, 90] deg, got {math.degrees(a) if math.isfinite(a) else a} deg", where)
    return a


def space_allowed(geometry: str, d_min, chi: float, alpha_min: float):
    """True where the shortest displacement d_min leaves only circles of radius < alpha_min.

    cos(alpha(d_min)) > cos(alpha_min) with alpha(d) from :func:`topology.circles.cos_radius`
    (CSS 1998); d_min >= 2 chi (no circle) is allowed.
    """
    d = np.asarray(d_min, dtype=float)
    finite = np.isfinite(d)
    c = np.where(finite, cos_radius(geometry, np.where(finite, d, 0.0), chi), np.inf)
    return c > math.cos(alpha_min)


def largest_circle_radius(geometry: str, d_min: float, chi: float) -> float | None:
    """Radius (radians) of the largest predicted circle, arccos(cos_radius(d_min)); None if none."""
    if not math.isfinite(d_min):
        return None
    c = float(cos_radius(geometry, d_min, chi))
    if not -1.0 <= c < 1.0:
        return None
    return math.acos(c)


# ---------------------------------------------------------------------------------------------
# flat
# ---------------------------------------------------------------------------------------------
def flat_min_loop_over_lss_diameter(alpha_min: float) -> float:
    """Shortest loop through the observer over 2 chi_rec: > cos(alpha_min) (CSS 1998)."""
    return math.cos(alpha_min)


def cubic_torus_inscribed_radius_over_chi_rec(alpha_min: float) -> float:
    """Cubic torus of side L: R_i = L/2 > chi_rec cos(alpha_min) (the loop L > 2 chi_rec cos alpha_min)."""
    return math.cos(alpha_min)


def flat_min_scale_factor(d_min: float, alpha_min: float) -> float:
    """s_min = 2 cos(alpha_min) / d_min (d_min in chi_rec): the configured shape, lengths and
    observer position scaled together by s, is allowed exactly when s > s_min."""
    return 2.0 * math.cos(alpha_min) / d_min


def shortest_displacement(space: Space, observer: geo.Observer, start_radius: float | None = None) -> float:
    """d_min = min_{g != 1} d(x, g x) at the observer, searching with a growing radius.

    The first radius is one that surely contains an element: the shortest lattice translation
    (flat), the shortest generator displacement (hyperbolic), pi (spherical: everything).
    """
    g = space.geometry
    if start_radius is None:
        if g == "spherical":
            start_radius = math.pi
        elif g == "flat" and getattr(space, "lattice", None) is not None:
            start_radius = float(np.min(np.linalg.norm(space.lattice, axis=1)))
        elif g == "hyperbolic" and getattr(space, "generators", None):
            x = observer.point
            start_radius = min(float(geo.distance(g, x, m @ x)) for m in space.generators)
        else:
            start_radius = 1.0
    r = float(start_radius) * (1.0 + 1e-9) + 1e-12
    for _ in range(40):
        h = space.elements_within(observer, r)
        if len(h):
            return float(h.displacement[0])
        if g == "spherical" and r > math.pi:
            return math.inf  # trivial group
        r *= 2.0
    return math.inf


def flat_shortest_displacements(space: Space, points: np.ndarray, radius: float | None = None,
                                block: int = 2_000_000) -> np.ndarray:
    """d_min(x) for many flat positions x (n, 3) at once (inf where no element moves x by < radius).

    Uses the lattice Lambda and coset representatives (R_k, t_k) of a
    :class:`topology.spaces.euclidean.FlatSpace`: d_min(x) = min_{k, lambda} |R_k x + t_k + lambda - x|
    over non-identity elements. The lattice indices n (lambda = n B) that can give a displacement
    < radius satisfy |n_i + c_i| <= radius |B^+_i| (Cauchy-Schwarz with the dual basis B^+), so
    after reducing c to [-1/2, 1/2] a box of half-width radius |B^+_i| + 1/2 is exact.
    ``radius`` defaults to the shortest lattice row (an element), which makes d_min exact.
    """
    B = np.atleast_2d(np.asarray(space.lattice, dtype=float))
    X = np.atleast_2d(np.asarray(points, dtype=float))
    if radius is None:
        radius = float(np.min(np.linalg.norm(B, axis=1))) * (1.0 + 1e-9)
    dual = np.linalg.pinv(B)  # (3, k); B @ dual = I_k
    dual_norm = np.linalg.norm(dual, axis=0)
    half = np.ceil(radius * dual_norm + 0.5).astype(int)
    grids = np.meshgrid(*[np.arange(-h, h + 1) for h in half], indexing="ij")
    lam = np.stack([g.ravel() for g in grids], axis=1) @ B  # (M, 3)
    scale = float(np.max(np.linalg.norm(B, axis=1)))
    out = np.full(len(X), np.inf)
    step = max(1, block // max(1, len(lam)))
    for R, t in space.cosets:
        V = X @ np.asarray(R).T + np.asarray(t) - X
        V = V - np.rint(V @ dual) @ B
        for s in range(0, len(X), step):
            D = np.linalg.norm(V[s:s + step, None, :] + lam[None, :, :], axis=-1)
            D[D <= 1e-12 * scale] = np.inf  # the identity
            out[s:s + step] = np.minimum(out[s:s + step], D.min(axis=1))
    return np.where(out < radius, out, np.inf)


def _binomial_interval(k: int, n: int, level: float = 0.95) -> tuple[float, float]:
    """Clopper-Pearson interval of a binomial fraction k/n (Clopper & Pearson 1934)."""
    from scipy.stats import beta

    a = (1.0 - level) / 2.0
    lo = 0.0 if k == 0 else float(beta.ppf(a, k, n - k + 1))
    hi = 1.0 if k == n else float(beta.ppf(1.0 - a, k + 1, n - k))
    return lo, hi


def flat_space_bound(space: Space, observer: geo.Observer, alpha_min: float, *, n_positions: int = DEFAULT_POSITIONS,
                     seed: int = 0, chi_rec_mpc: float | None = None) -> dict:
    """Bound on one flat space (lengths in chi_rec) for one observer and over observer positions.

    Returns a JSON-ready dict: the shortest displacement at the observer, whether the configured
    space is excluded (d_min <= 2 cos alpha_min), the smallest allowed overall scale factor
    s_min = 2 cos(alpha_min)/d_min, and for compact inhomogeneous spaces the fraction of observer
    positions, uniform in the covering cell, for which it is excluded (Monte Carlo with the
    given seed; binomial standard error sqrt(f(1-f)/N) and a 95% Clopper-Pearson interval).
    """
    alpha_min = check_alpha_min(alpha_min)
    limit = 2.0 * math.cos(alpha_min)
    d0 = shortest_displacement(space, observer)
    s_min = flat_min_scale_factor(d0, alpha_min) if math.isfinite(d0) else 0.0
    alpha = largest_circle_radius("flat", d0, 1.0)
    params = dict(space.params)
    out = {
        "family": space.family,
        "params": params,
        "observer_position_over_chi_rec": [float(v) for v in observer.point[:3]],
        "shortest_displacement_over_chi_rec": _finite(d0),
        "largest_circle_radius_deg": None if alpha is None else math.degrees(alpha),
        "excluded": bool(not space_allowed("flat", d0, 1.0, alpha_min)),
        "min_scale_factor": s_min,
        "note_scale": "the shape with lengths and observer position multiplied by s is allowed iff s > min_scale_factor",
    }
    if "lengths" in params:
        out["min_lengths_over_chi_rec"] = [s_min * float(v) for v in params["lengths"]]
        if chi_rec_mpc is not None:
            out["min_lengths_mpc"] = [s_min * float(v) * chi_rec_mpc for v in params["lengths"]]
    frac: dict = {"n_positions": 0, "seed": None}
    if space.homogeneous:
        f = 0.0 if space_allowed("flat", d0, 1.0, alpha_min) else 1.0
        frac.update(excluded_fraction=f, excluded_fraction_stderr=0.0, excluded_fraction_95=[f, f],
                    method="exact: homogeneous space, every observer position is equivalent")
    elif not getattr(space, "compact", True) or getattr(space, "lattice", None) is None \
            or np.atleast_2d(space.lattice).shape[0] != 3:
        frac.update(excluded_fraction=None, excluded_fraction_stderr=None, excluded_fraction_95=None,
                    method="not defined: a non-compact inhomogeneous space has no finite covering cell")
    else:
        n = int(n_positions)
        if n < 1:
            raise InputError(f"needs at least one observer position, got {n}", "n_positions")
        rng = np.random.default_rng(np.random.SeedSequence(seed))
        X = rng.random((n, 3)) @ np.asarray(space.lattice, dtype=float)
        d = flat_shortest_displacements(space, X)
        k = int(np.count_nonzero(d <= limit))
        f = k / n
        frac.update(excluded_fraction=f, excluded_fraction_stderr=math.sqrt(f * (1.0 - f) / n),
                    excluded_fraction_95=list(_binomial_interval(k, n)), n_positions=n, seed=int(seed),
                    method="Monte Carlo: positions uniform in the covering cell (lattice parallelepiped)",
                    sampled_shortest_displacement_range=[float(d.min()), float(d.max())],
                    min_scale_factor_all_sampled_positions=limit / float(d.min()),
                    min_scale_factor_some_sampled_position=limit / float(d.max()))
    out["observer_positions"] = frac
    return out


# ---------------------------------------------------------------------------------------------
# spherical
# ---------------------------------------------------------------------------------------------
def spherical_max_chi(d_min: float, alpha_min: float) -> float:
    """chi_max = arctan(tan(d_min/2) / cos(alpha_min)) (from tan(d/2)/tan(chi) > cos alpha_min)."""
    h = 0.5 * float(d_min)
    return math.atan2(math.sin(h), math.cos(h) * math.cos(alpha_min))


def lens_displacement_cosines(p: int, q: int, t) -> np.ndarray:
    """cos d(x, g^k x) for L(p, q) at |z1|^2 = t, k = 1..p-1 -> (..., p-1).

    g^k (z1, z2) = (e^{2 pi i k/p} z1, e^{2 pi i k q/p} z2), so
    cos d_k = t cos(2 pi k/p) + (1 - t) cos(2 pi k q/p) (Gausmann et al. 2001 action).
    """
    k = np.arange(1, p)
    a = np.cos(2.0 * np.pi * k / p)
    b = np.cos(2.0 * np.pi * k * q / p)
    t = np.asarray(t, dtype=float)[..., None]
    return t * a + (1.0 - t) * b


def lens_best_observer(p: int, q: int) -> tuple[float, float]:
    """(t*, d*): the position |z1|^2 = t* in [0, 1] that maximises d_min(t) = min_k d_k(t), and d*.

    max_t min_k d_k = arccos(min_t max_k c_k(t)) with c_k affine in t (:func:`lens_displacement_cosines`).
    A maximum of affine functions is convex and piecewise linear, so its minimum over [0, 1] is
    at t = 0, t = 1 or a crossing of two of the lines: evaluating all of them is exact.
    """
    k = np.arange(1, p // 2 + 1)  # c_k = c_{p-k}
    a = np.cos(2.0 * np.pi * k / p)
    b = np.cos(2.0 * np.pi * k * q / p)
    slope = a - b
    ds = slope[:, None] - slope[None, :]
    db = b[None, :] - b[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        cross = db / ds
    cand = np.concatenate([[0.0, 1.0], cross[np.isfinite(cross) & (cross > 0.0) & (cross < 1.0)]])
    F = np.max(cand[:, None] * a[None, :] + (1.0 - cand[:, None]) * b[None, :], axis=1)
    i = int(np.argmin(F))
    return float(cand[i]), float(math.acos(min(1.0, max(-1.0, F[i]))))


def lens_observer_point(t: float) -> np.ndarray:
    """The S^3 point (w, x, y, z) = (sqrt t, 0, sqrt(1 - t), 0), i.e. z1 = sqrt t, z2 = sqrt(1 - t)."""
    return np.array([math.sqrt(t), 0.0, math.sqrt(max(0.0, 1.0 - t)), 0.0])


def spherical_shortest_displacements(space: Space, points: np.ndarray) -> np.ndarray:
    """d_min at many S^3 points (n, 4) from the group matrices: min_{g != 1} arccos(x . g x)."""
    X = np.atleast_2d(np.asarray(points, dtype=float))
    X = X / np.linalg.norm(X, axis=1, keepdims=True)
    mats = np.asarray(space.matrices, dtype=float)
    ident = np.all(np.abs(mats - np.eye(4)).reshape(len(mats), -1) < 1e-9, axis=1)
    mats = mats[~ident]
    c = np.einsum("ni,gij,nj->ng", X, mats, X)
    return np.arccos(np.clip(c.max(axis=1), -1.0, 1.0))


def spherical_max_over_observers(space: Space, n_points: int = 4000, seed: int = 0) -> tuple[float, np.ndarray]:
    """max over observer positions of d_min for a general spherical space: random points of S^3
    (explicit seed) then a Nelder-Mead refinement of the best few. Returns (d*, point)."""
    from scipy import optimize

    rng = np.random.default_rng(np.random.SeedSequence(seed))
    X = rng.normal(size=(n_points, 4))
    d = spherical_shortest_displacements(space, X)
    best_d, best_x = -1.0, None
    for i in np.argsort(d)[-5:]:
        res = optimize.minimize(lambda v: -spherical_shortest_displacements(space, v)[0], X[i],
                                method="Nelder-Mead", options=dict(xatol=1e-10, fatol=1e-12, maxiter=4000))
        if -res.fun > best_d:
            best_d, best_x = float(-res.fun), res.x / np.linalg.norm(res.x)
    return best_d, best_x


class _OmegaK:
    """omega_k_for_ratio with a cache (many rows share the same chi_max)."""

    def __init__(self, cosmo: Cosmology):
        self.cosmo = cosmo
        self.cache: dict = {}

    def __call__(self, ratio: float | None, sign: int) -> float | None:
        if ratio is None:
            return None
        key = (round(float(ratio), 13), sign)
        if key not in self.cache:
            self.cache[key] = omega_k_for_ratio(self.cosmo, float(ratio), sign)
        return self.cache[key]


def spherical_entry(family: str, params: dict, d_min: float, alpha_min: float, omk, cosmo: Cosmology, *,
                    homogeneous: bool, best_observer=None) -> dict:
    """One row: chi_max, 1/chi_max, min Omega_K (and R_c at that Omega_K in Mpc)."""
    chi = spherical_max_chi(d_min, alpha_min)
    ok = omk(chi, -1)
    row = {"family": family, **params,
           "shortest_displacement_over_curvature_radius": d_min,
           "homogeneous": bool(homogeneous),
           "max_chi_rec_over_curvature_radius": chi,
           "min_curvature_radius_over_chi_rec": 1.0 / chi,
           "min_omega_k": ok,
           "min_curvature_radius_mpc": None if not ok else cosmo.hubble_distance_mpc / math.sqrt(abs(ok))}
    if best_observer is not None:
        row["best_observer_position"] = [float(v) for v in best_observer]
    return row


def lens_isometric_qs(p: int, q: int) -> list[int]:
    """The q' in [1, p/2] with L(p, q') isometric to L(p, q): q' = +-q or +-q^-1 mod p
    (the classification of lens spaces, Reidemeister 1935 / Brody 1960; q coprime to p)."""
    p, q = int(p), int(q)
    inv = pow(q, -1, p) if p > 1 else q
    cands = {(s * x) % p for x in (q, inv) for s in (1, -1)}
    return sorted({min(c, p - c) for c in cands if c})


def lens_canonical_q(p: int, q: int) -> int:
    """The smallest q' in [1, p/2] with L(p, q') isometric to L(p, q)."""
    return lens_isometric_qs(p, q)[0]


def spherical_family_bounds(alpha_min: float, cosmo: Cosmology, *, p_max: int = DEFAULT_P_MAX,
                            m_max: int = DEFAULT_M_MAX, seed: int = 0) -> list[dict]:
    """Rows for every spherical family of the registry: lens L(p, q) for 2 <= p <= p_max, one
    row per isometry class (:func:`lens_canonical_q`; ``isometric_q`` lists the class when it has
    more than one member), maximised over observers; prism D*_m for 2 <= m <= m_max; each family
    without parameters (tetrahedral, octahedral, dodecahedral, ...)."""
    alpha_min = check_alpha_min(alpha_min)
    omk = _OmegaK(cosmo)
    rows = []
    for fam in family_names():
        if geometry_of(fam) != "spherical":
            continue
        if fam == "lens":
            for p in range(2, int(p_max) + 1):
                for q in range(1, p // 2 + 1):
                    if math.gcd(p, q) != 1 or lens_canonical_q(p, q) != q:
                        continue  # one row per isometry class
                    t, d = lens_best_observer(p, q)
                    homog = q % p in (1, p - 1)
                    row = spherical_entry("lens", {"p": p, "q": q}, d, alpha_min, omk, cosmo, homogeneous=homog,
                                          best_observer=None if homog else lens_observer_point(t))
                    same = lens_isometric_qs(p, q)
                    if len(same) > 1:
                        row["isometric_q"] = same
                    rows.append(row)
            continue
        if fam == "prism":
            specs = [{"m": m} for m in range(2, int(m_max) + 1)]
        elif not allowed_keys(fam):
            specs = [{}]
        else:
            continue  # a family with parameters this module does not know how to enumerate
        for spec in specs:
            space = build_space({"family": fam, **spec})
            if space.homogeneous:
                d = shortest_displacement(space, geo.Observer.make("spherical", [1.0, 0.0, 0.0, 0.0]))
                best = None
            else:
                d, best = spherical_max_over_observers(space, seed=seed)
            rows.append(spherical_entry(fam, spec, d, alpha_min, omk, cosmo, homogeneous=space.homogeneous,
                                        best_observer=best))
    return rows


def curved_space_bound(space: Space, observer: geo.Observer, alpha_min: float, cosmo: Cosmology) -> dict:
    """A configured spherical or hyperbolic space at its observer: d_min, chi_max, the Omega_K
    bound (spherical: min_omega_k; hyperbolic: max_omega_k, null when there is no bound) and,
    when the background has the right curvature, whether it is excluded."""
    alpha_min = check_alpha_min(alpha_min)
    g = space.geometry
    d = shortest_displacement(space, observer)
    omk = _OmegaK(cosmo)
    if g == "spherical":
        chi = spherical_max_chi(d, alpha_min) if math.isfinite(d) else math.pi / 2
        out = {"family": space.family, "params": dict(space.params),
               "observer_position": [float(v) for v in observer.point],
               "shortest_displacement_over_curvature_radius": _finite(d),
               "max_chi_rec_over_curvature_radius": chi,
               "min_curvature_radius_over_chi_rec": 1.0 / chi,
               "min_omega_k": omk(chi, -1)}
    else:
        x = math.tanh(d / 2.0) / math.cos(alpha_min) if math.isfinite(d) else math.inf
        chi = math.atanh(x) if x < 1.0 else None
        out = {"family": space.family, "params": dict(space.params),
               "observer_position": [float(v) for v in observer.point],
               "shortest_displacement_over_curvature_radius": _finite(d),
               "max_chi_rec_over_curvature_radius": chi,
               "min_curvature_radius_over_chi_rec": None if chi is None else 1.0 / chi,
               "max_omega_k": omk(chi, +1),
               "note": None if chi is not None else "no bound: tanh(d_min/2) >= cos(alpha_min)"}
    ratio = cosmo.chi_rec_over_curvature_radius
    if cosmo.geometry == g and ratio is not None:
        alpha = largest_circle_radius(g, d, ratio)
        out["background_chi_rec_over_curvature_radius"] = ratio
        out["largest_circle_radius_deg"] = None if alpha is None else math.degrees(alpha)
        out["excluded"] = bool(not space_allowed(g, d, ratio, alpha_min))
    return out


# ---------------------------------------------------------------------------------------------
# the summary and its table
# ---------------------------------------------------------------------------------------------
def _finite(v):
    return float(v) if v is not None and math.isfinite(v) else None


def _int_option(v, where: str, minimum: int) -> int:
    try:
        ok = not isinstance(v, bool) and float(v).is_integer() and int(v) >= minimum
    except (TypeError, ValueError, OverflowError):
        ok = False
    if not ok:
        raise InputError(f"must be a whole number >= {minimum}, got {v!r}", where)
    return int(v)


def bound_summary(alpha_min_deg: float, cosmology: Cosmology | None = None, *,
                  space: Space | None = None, observer: geo.Observer | None = None,
                  p_max: int = DEFAULT_P_MAX, m_max: int = DEFAULT_M_MAX,
                  n_positions: int = DEFAULT_POSITIONS, seed: int = 0) -> dict:
    """Every bound for one alpha_min (degrees) and background, as one JSON-ready dict.

    Keys: alpha_min_deg, chi_rec_mpc, cosmology, convention, assumptions, flat
    {min_loop_over_lss_diameter, min_loop_mpc, cubic_torus_inscribed_radius_over_chi_rec,
    cubic_torus_min_side_over_chi_rec, configured (when a flat space is given)}, spherical (rows
    of :func:`spherical_family_bounds`), spherical_configured / hyperbolic (when such a space is
    given). Without ``cosmology`` the default background; a ``space`` without ``observer`` is
    seen from its origin.
    """
    try:
        a_deg = float(alpha_min_deg)
    except (TypeError, ValueError):
        raise InputError(f"alpha_min must be a number of degrees, got {alpha_min_deg!r}", "--alpha-min") from None
    alpha = check_alpha_min(math.radians(a_deg) if math.isfinite(a_deg) else a_deg)
    p_max = _int_option(p_max, "--p-max", 2)
    m_max = _int_option(m_max, "--m-max", 2)
    if cosmology is None:
        cosmology = Cosmology()
    chi_rec = cosmology.chi_rec_mpc
    if space is not None and observer is None:
        observer = geo.Observer.make(space.geometry, geo.origin(space.geometry)[:3] if space.geometry == "flat"
                                     else geo.origin(space.geometry))
    c = math.cos(alpha)
    out = {
        "alpha_min_deg": a_deg,
        "chi_rec_mpc": chi_rec,
        "cosmology": cosmology.as_dict(),
        "convention": CONVENTION,
        "assumptions": list(ASSUMPTIONS),
        "flat": {
            "min_loop_over_lss_diameter": flat_min_loop_over_lss_diameter(alpha),
            "min_loop_mpc": 2.0 * chi_rec * c,
            "cubic_torus_inscribed_radius_over_chi_rec": cubic_torus_inscribed_radius_over_chi_rec(alpha),
            "cubic_torus_min_side_over_chi_rec": 2.0 * c,
        },
        "spherical": spherical_family_bounds(alpha, cosmology, p_max=p_max, m_max=m_max, seed=seed),
        "p_max": p_max,
        "m_max": m_max,
    }
    if space is not None:
        if space.geometry == "flat":
            out["flat"]["configured"] = flat_space_bound(space, observer, alpha, n_positions=n_positions, seed=seed,
                                                         chi_rec_mpc=chi_rec)
        elif space.geometry == "spherical":
            out["spherical_configured"] = curved_space_bound(space, observer, alpha, cosmology)
        else:
            out["hyperbolic"] = curved_space_bound(space, observer, alpha, cosmology)
    return out
