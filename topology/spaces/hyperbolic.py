"""Compact (or finite-volume) hyperbolic spaces H^3 / Gamma from generators in SO+(3,1).

Gamma is given by generator matrices acting on the hyperboloid model (t, x, y, z), read from
a JSON or TOML file::

    {"name": "...", "source": "...", "generators": [[[...4 numbers...], ...4 rows...], ...]}

Generators are validated (finite, g^T J g = J with J = diag(-1, 1, 1, 1), det g = +1 and
g_00 >= 1). Elements that move the observer by less than a radius are found by enumerating
words in the generators and their inverses breadth first, keeping words whose displacement stays
below the radius plus twice the largest generator displacement (a margin that the triangle
inequality makes sufficient for every element reachable through shorter ones; common practice).
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


def validate_lorentz(g: np.ndarray, where: str) -> np.ndarray:
    g = np.asarray(g, dtype=float)
    if g.shape != (4, 4) or not np.all(np.isfinite(g)):
        raise InputError(f"a generator must be a 4x4 matrix of finite numbers, got shape {g.shape}", where)
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
        text = p.read_text()
    except OSError as e:
        raise InputError(f"cannot read generator file ({e.strerror})", where) from None
    try:
        if p.suffix.lower() == ".toml":
            from ..config import toml_loads
            data = toml_loads(text)
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
    return mats, meta


class HyperbolicSpace(Space):
    geometry = "hyperbolic"

    def __init__(self, generators: list[np.ndarray], params: dict, meta: dict | None = None):
        super().__init__()
        self.family = "hyperbolic"
        self.generators = [np.asarray(g, dtype=float) for g in generators]
        self.params = params
        self.meta = meta or {}
        self.volume = float(self.meta.get("volume", float("nan")))

    def elements_within(self, observer: geo.Observer, radius: float) -> Holonomies:
        x = observer.point
        gens = []
        for g in self.generators:
            gens += [g, geo.MINKOWSKI @ g.T @ geo.MINKOWSKI]  # inverse of a Lorentz matrix
        gdisp = max(float(geo.distance("hyperbolic", x, g @ x)) for g in gens)
        limit = radius + 2.0 * gdisp
        seen = {}
        frontier = [np.eye(4)]
        seen[_key(np.eye(4))] = np.eye(4)
        while frontier:
            new = []
            stack = np.einsum("aij,bjk->abik", np.array(frontier), np.array(gens)).reshape(-1, 4, 4)
            d = geo.distance("hyperbolic", x[None], stack @ x)
            for m, dd in zip(stack[d < limit], d[d < limit]):
                k = _key(m)
                if k not in seen:
                    seen[k] = m
                    new.append(m)
            if len(seen) > MAX_WORDS:
                raise InputError(f"more than {MAX_WORDS} group elements within {limit:.3g} R_c; "
                                 "lower the search radius", "[space] generators")
            frontier = new
        return sort_holonomies("hyperbolic", observer, np.array(list(seen.values())), radius)


def _key(m: np.ndarray) -> tuple:
    scale = max(1.0, float(np.abs(m).max()))
    return tuple(np.round(m / scale, 6).ravel())


def make_hyperbolic(params, base_dir: Path | None = None):
    if "generators" not in params:
        raise InputError("missing (path of a JSON or TOML file of SO(3,1) generators)", "[space] generators")
    path = Path(params["generators"])
    if not path.is_absolute() and base_dir is not None and not path.exists():
        path = Path(base_dir) / path
    if not path.exists():
        from importlib import resources
        shipped = resources.files("topology") / "data" / str(params["generators"])
        if shipped.is_file():
            path = Path(str(shipped))
    gens, meta = read_generators(path)
    return HyperbolicSpace(gens, {"generators": str(params["generators"])}, meta)


HYPERBOLIC_KEYS = {"generators"}
