"""Compact (or finite-volume) hyperbolic spaces H^3 / Gamma from generators in SO+(3,1).

Gamma is given by generator matrices acting on the hyperboloid model (t, x, y, z), read from
a JSON or TOML file::

    {"name": "...", "source": "...", "generators": [[[...4 numbers...], ...4 rows...], ...],
     "fundamental_polyhedron": {"center": [1, 0, 0, 0], "circumradius": 1.9, "inradius": 0.99}}   (optional)

Generators are validated (finite, g^T J g = J with J = diag(-1, 1, 1, 1), det g = +1 and
g_00 >= 1). Elements that move the observer by less than a radius are found by enumerating
words in the generators and their inverses breadth first, keeping words g whose displacement
d(c, g c) of a centre c stays below a limit:

* when the file names a fundamental polyhedron P (centre c, every point of P within
  ``circumradius`` R_P of c, optionally the ball B(c, ``inradius``) inside P) whose face
  pairings are the generators, the translates g P tile H^3 and the tiles meeting a ball form a
  face-connected set. Every g with d(x, g x) < r has d(c, g c) < r + 2 d(c, x), and the tiles
  meeting B(c, L) have d(c, g c) <= L + R_P, so the limit r + 2 d(c, x) + R_P makes the list
  complete; when x lies in B(c, inradius), g x lies in the tile g P, which meets B(x, r), and
  the limit r + d(c, x) + R_P suffices (Poincare's polyhedron theorem; e.g. Ratcliffe,
  "Foundations of hyperbolic manifolds", sec. 11.2; common practice);
* otherwise c is the observer and the limit is r plus twice the largest generator
  displacement (a heuristic margin, common practice; complete for Dirichlet-domain generators
  whose domain lies within that margin of the observer).

A group with a fixed point is not a manifold: an enumerated element g != 1 that moves the
observer by less than 1e-6 R_c, or that is elliptic or parabolic (translation length below
1e-5, from the trace condition below), raises InputError naming the generator file.

Translation length of g in SO+(3,1): its eigenvalues are e^{+-l}, e^{+-i theta}, so
u = lambda + 1/lambda solves u^2 - c1 u + (c2 - 2) = 0 with c1 = tr g, c2 = (tr(g)^2 -
tr(g^2)) / 2, and l = arccosh(u_max / 2) (common practice). l = 0 marks elliptic (fixed point
in H^3) and parabolic elements.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from .. import geometry as geo
from ..errors import InputError
from .base import Holonomies, Space, sort_holonomies

LORENTZ_TOL = 1e-6
MAX_WORDS = 200_000


def _matrix_problem(g) -> str | None:
    """What keeps ``g`` from being a 4x4 matrix of numbers (4 rows of 4 numbers, no booleans or
    strings), or None."""
    if isinstance(g, np.ndarray):
        return None if g.shape == (4, 4) and g.dtype.kind in "iuf" else f"an array of shape {g.shape}"
    if not isinstance(g, (list, tuple)):
        return f"a {type(g).__name__}"
    lens = [len(r) if isinstance(r, (list, tuple)) else None for r in g]
    if all(n is None for n in lens):
        return f"a flat list of {len(g)}"
    if lens != [4, 4, 4, 4]:
        return f"{len(g)} rows of lengths {lens}"
    for i, row in enumerate(g):
        for j, v in enumerate(row):
            if isinstance(v, (bool, np.bool_)) or not isinstance(v, (int, float, np.integer, np.floating)):
                return f"entry [{i}][{j}] = {v!r}, not a number"
    return None


def validate_lorentz(g: np.ndarray, where: str) -> np.ndarray:
    """g as a float array after checking g^T J g = J, det g = +1 and g_00 >= 1 (SO+(3,1))."""
    problem = _matrix_problem(g)
    if problem:
        raise InputError(f"a generator must be a 4x4 matrix of numbers (4 rows of 4), got {problem}", where)
    g = np.asarray(g, dtype=float)
    if not np.all(np.isfinite(g)):
        raise InputError("a generator has entries that are not finite (NaN or infinity)", where)
    J = geo.MINKOWSKI
    err = np.max(np.abs(g.T @ J @ g - J)) / max(1.0, np.max(np.abs(g)) ** 2)
    if err > LORENTZ_TOL:
        raise InputError(f"generator is not a Lorentz transformation (|g^T J g - J| = {err:.2e})", where)
    if g[0, 0] < 1.0 - LORENTZ_TOL:
        raise InputError(f"generator is not orthochronous (g_00 = {g[0, 0]:.6g} < 1)", where)
    if np.linalg.det(g) < 0:
        raise InputError("generator has determinant -1 (orientation reversing); give SO+(3,1) elements", where)
    return g


def read_generators(path: str | Path) -> tuple[list[np.ndarray], dict]:
    """Read generator matrices and metadata from a JSON or TOML file."""
    p = Path(path)
    where = str(p)
    try:
        text = p.read_text(encoding="utf-8-sig")
    except OSError as e:
        raise InputError(f"cannot read generator file ({e.strerror})", where) from None
    except UnicodeDecodeError:
        raise InputError("cannot read generator file (not UTF-8 text: give a JSON or TOML file)", where) from None
    try:
        if p.suffix.lower() == ".toml":
            try:  # Python >= 3.11
                import tomllib
            except ModuleNotFoundError:  # pragma: no cover - Python 3.10
                import tomli as tomllib
            data = tomllib.loads(text)
        else:
            data = json.loads(text)
    except Exception as e:  # noqa: BLE001 - any parse failure is the file's fault
        raise InputError(f"not valid {'TOML' if p.suffix.lower() == '.toml' else 'JSON'} ({e})", where) from None
    if not isinstance(data, dict) or "generators" not in data:
        raise InputError("needs a 'generators' list of 4x4 matrices", where)
    gens = data["generators"]
    if not isinstance(gens, list) or not gens:
        raise InputError("'generators' must be a non-empty list of 4x4 matrices", where)
    mats = [validate_lorentz(g, f"{where} generator {i}") for i, g in enumerate(gens)]
    meta = {k: v for k, v in data.items() if k != "generators"}
    if "fundamental_polyhedron" in meta:
        meta["fundamental_polyhedron"] = _validate_polyhedron(meta["fundamental_polyhedron"], where)
    return mats, meta


def _validate_polyhedron(poly, where: str) -> dict:
    """'fundamental_polyhedron': {'center': point of the hyperboloid, 'circumradius': R_P > 0}."""
    w = f"{where} fundamental_polyhedron"
    if not isinstance(poly, dict) or set(poly) - {"center", "circumradius", "inradius"} or "circumradius" not in poly:
        raise InputError("must be a table with 'circumradius' (R_c) and optional 'inradius' (R_c) and "
                         "'center' [t, x, y, z]", w)
    try:
        c = np.asarray(poly.get("center", [1.0, 0.0, 0.0, 0.0]), dtype=float)
        r = float(poly["circumradius"])
        r_in = float(poly.get("inradius", 0.0))
    except (TypeError, ValueError):
        raise InputError("'center' must be 4 numbers, 'circumradius' and 'inradius' numbers", w) from None
    if not (np.isfinite(r_in) and 0.0 <= r_in <= r):
        raise InputError(f"'inradius' must be a number between 0 and the circumradius, got {poly.get('inradius')!r}", w)
    if c.shape != (4,) or not np.all(np.isfinite(c)) or c[0] <= 0 or abs(-c[0] ** 2 + c[1:] @ c[1:] + 1.0) > 1e-8 * c[0] ** 2:
        raise InputError("'center' must be a point [t, x, y, z] of the upper hyperboloid", w)
    if not (np.isfinite(r) and r > 0):
        raise InputError(f"'circumradius' must be a positive number, got {poly['circumradius']!r}", w)
    return {"center": c.tolist(), "circumradius": r, "inradius": r_in}


MIN_DISPLACEMENT = 1e-6
MIN_TRANSLATION = 1e-5


def inverse(g: np.ndarray) -> np.ndarray:
    """Inverse of Lorentz matrices (..., 4, 4): J g^T J."""
    J = geo.MINKOWSKI
    return J @ np.swapaxes(g, -1, -2) @ J


def translation_length(g: np.ndarray) -> np.ndarray:
    """Translation length l of SO+(3,1) matrices (..., 4, 4) from the trace condition.

    u = 2 cosh(l) is the larger root of u^2 - c1 u + (c2 - 2) = 0, c1 = tr g,
    c2 = (tr(g)^2 - tr(g^2)) / 2 (see the module docstring).
    """
    g = np.asarray(g, dtype=float)
    c1 = np.trace(g, axis1=-2, axis2=-1)
    c2 = 0.5 * (c1**2 - np.trace(g @ g, axis1=-2, axis2=-1))
    disc = np.maximum(c1**2 - 4.0 * (c2 - 2.0), 0.0)
    u = 0.5 * (c1 + np.sqrt(disc))
    return np.arccosh(np.maximum(u / 2.0, 1.0))


def enumerate_words(generators: list[np.ndarray], center: np.ndarray, limit: float,
                    where: str = "[space] generators", check=None) -> np.ndarray:
    """All words g in the generators and inverses with d(c, g c) <= limit, reached breadth first
    through words that stay within the limit (identity included; (n, 4, 4)).

    check: optional function called on each new batch of elements (it may raise), so that a
    group with a fixed point is reported before its non-discrete orbit floods the search.
    """
    gens = []
    for g in generators:
        gens += [np.asarray(g, dtype=float), inverse(np.asarray(g, dtype=float))]
    gens = np.array(gens)
    c = np.asarray(center, dtype=float)
    ident = np.eye(4)
    seen = {_key(ident): ident}
    frontier = ident[None]
    while len(frontier):
        stack = np.einsum("aij,bjk->abik", frontier, gens).reshape(-1, 4, 4)
        d = geo.distance("hyperbolic", c[None], stack @ c)
        stack = stack[d <= limit]
        new = []
        for m, k in zip(stack, _keys(stack)):
            if k not in seen:
                seen[k] = m
                new.append(m)
        if len(seen) > MAX_WORDS:
            raise InputError(f"more than {MAX_WORDS} group elements within {limit:.3g} R_c; "
                             "lower the search radius", where)
        frontier = np.array(new).reshape(-1, 4, 4)
        if check is not None and len(frontier):
            check(frontier)
    return np.array(list(seen.values()))


class HyperbolicSpace(Space):
    geometry = "hyperbolic"

    def __init__(self, generators: list[np.ndarray], params: dict, meta: dict | None = None,
                 source: str = "[space] generators"):
        super().__init__()
        self.family = "hyperbolic"
        self.generators = [np.asarray(g, dtype=float) for g in generators]
        self.params = params
        self.meta = meta or {}
        self.source = source
        self.volume = float(self.meta.get("volume", float("nan")))
        poly = self.meta.get("fundamental_polyhedron")
        self.center = np.asarray(poly["center"], dtype=float) if poly else None
        self.circumradius = float(poly["circumradius"]) if poly else None
        self.inradius = float(poly.get("inradius", 0.0)) if poly else None

    def default_margin(self, observer: geo.Observer) -> float:
        """Limit minus radius of the word search (see the module docstring)."""
        x = observer.point
        if self.center is not None:
            dc = float(geo.distance("hyperbolic", self.center, x))
            return (1.0 if dc <= self.inradius else 2.0) * dc + self.circumradius
        return 2.0 * max(float(geo.distance("hyperbolic", x, g @ x))
                         for g in self.generators + [inverse(g) for g in self.generators])

    def elements_within(self, observer: geo.Observer, radius: float, *, margin: float | None = None) -> Holonomies:
        """Group elements g != 1 with d(x, g x) < radius (R_c), sorted by displacement.

        margin: extra search depth beyond the radius (default :meth:`default_margin`); a larger
        margin must give the same list (completeness check).
        """
        x = observer.point
        center = self.center if self.center is not None else x
        if margin is None:
            margin = self.default_margin(observer)
        mats = enumerate_words(self.generators, center, radius + margin, self.source,
                               check=lambda m: self._check_free(m, x))
        return sort_holonomies("hyperbolic", observer, mats, radius)

    def _check_free(self, mats: np.ndarray, x: np.ndarray) -> None:
        scale = np.abs(mats).reshape(len(mats), -1).max(axis=1)
        nontrivial = np.abs(mats - np.eye(4)).reshape(len(mats), -1).max(axis=1) > 1e-9 * scale
        m = mats[nontrivial]
        if not len(m):
            return
        d = geo.distance("hyperbolic", x[None], m @ x)
        if d.min() < MIN_DISPLACEMENT:
            raise InputError(f"a group element g != 1 moves the observer by only {d.min():.2e} R_c: "
                             "the group has a fixed point near the observer (not a manifold)", self.source)
        ell = translation_length(m)
        if ell.min() < MIN_TRANSLATION:
            i = int(np.argmin(ell))
            raise InputError(f"a group element is elliptic or parabolic (translation length {ell[i]:.1e}, "
                             f"moves the observer by {d[i]:.3g} R_c): the group has a fixed point, "
                             "not a manifold", self.source)


def _keys(mats: np.ndarray) -> list[bytes]:
    """Hashable keys of matrices (n, 4, 4), rounded relative to their largest entry."""
    if len(mats) == 0:
        return []
    scale = np.maximum(1.0, np.abs(mats).reshape(len(mats), -1).max(axis=1))
    q = np.rint(mats.reshape(len(mats), -1) / scale[:, None] * 1e4).astype(np.int64)
    return [row.tobytes() for row in q]


def _key(m: np.ndarray) -> bytes:
    return _keys(np.asarray(m, dtype=float)[None])[0]


def generators_path(name: str, base_dir: Path | None = None) -> Path:
    """The file a ``generators`` key names: as given, else relative to the config's folder,
    else a file shipped in topology/data."""
    path = Path(name)
    if not path.is_absolute() and base_dir is not None and not path.exists():
        path = Path(base_dir) / path
    if not path.exists():
        from importlib import resources
        shipped = resources.files("topology") / "data" / str(name)
        if shipped.is_file():
            path = Path(str(shipped))
    return path


def make_hyperbolic(params, base_dir: Path | None = None):
    if "generators" not in params:
        raise InputError("missing (path of a JSON or TOML file of SO(3,1) generators)", "[space] generators")
    path = generators_path(params["generators"], base_dir)
    gens, meta = read_generators(path)
    return HyperbolicSpace(gens, {"generators": str(params["generators"])}, meta, source=str(path))


HYPERBOLIC_KEYS = {"generators"}
