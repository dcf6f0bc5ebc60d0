"""Injected skies for the sensitivity stage: a multiply connected space of a chosen family,
scaled so that its largest matched circles have a chosen radius alpha.

The family is given in the ``[space]`` format (``{family = "E2", lengths = [1, 1, 0.8]}``,
``{family = "lens", p = 8, q = 1}``); the default ``"E1"`` is the cubic torus. Its size is fixed
by alpha, from the circle relation of Cornish, Spergel & Starkman (1998) for the shortest clone
distance d_min the (random) observer sees:

* flat families: every length (and the observer position) is multiplied by lambda; distances
  scale with lambda, so cos(alpha) = lambda d_min(1) / 2 gives lambda = 2 cos(alpha) / d_min(1),
  d_min(1) measured at unit scale (lengths as given, in chi_rec);
* spherical families: the shape is fixed and the size is chi = chi_rec / R_c; from
  cos(alpha) = tan(d_min / 2) / tan(chi), chi = arctan(tan(d_min / 2) / cos(alpha)), and Omega_K
  follows (h, omega_b h^2, omega_c h^2 and z_* kept; Omega_Lambda takes up the change).

Observers: flat, uniform in the box spanned by the largest length; spherical, uniform on S^3;
orientation uniform on SO(3). Hyperbolic families have their size fixed by the curvature and
cannot be scaled to a radius: they are refused.

A run injects several families (``[significance] injection_families``), each with its own
efficiency curve and alpha_min. Each family has a *kind of pairs* (:func:`pair_kind`):
"back-to-back" when every observer sees only back-to-back pairs (pure translations E1, Clifford
translations of homogeneous spherical spaces), else "general" (screws and glides seen off their
axis, inhomogeneous lens spaces); a bound on a space whose family was not injected borrows the
alpha_min of an injected family of its own kind (:mod:`topology.run.calibration`).
"""

from __future__ import annotations

import math

import numpy as np

from . import geometry as geo
from .errors import InputError

WHERE = "[significance] injection_families"
BACK_TO_BACK, GENERAL = "back-to-back", "general"


def injection_specs(families, single=None) -> list[dict]:
    """The family specs of ``[significance] injection_families`` (or of the one-family key
    ``injection_family``, as a one-element list), checked for repeats."""
    if single is not None:
        families = [single]
    if not isinstance(families, list) or not families:
        raise InputError("must be a non-empty list of families, e.g. [\"E1\", {family = \"E2\", lengths = "
                         "[1, 1, 0.5]}]", WHERE)
    specs = [injection_spec(v) for v in families]
    keys = [family_key(s) for s in specs]
    for i, k in enumerate(keys):
        if k in keys[:i]:
            raise InputError(f"the family {describe(specs[i])} is listed twice", WHERE)
    return specs


def family_key(spec: dict) -> str:
    """A short, stable name of an injected family for task ids and tables: the family and a
    digest of its whole spec, e.g. 'E2-1a2b3c4d' (a changed spec gives new task ids)."""
    import hashlib
    import json

    def plain(v):  # 1 and 1.0 are the same length
        if isinstance(v, dict):
            return {k: plain(x) for k, x in v.items()}
        if isinstance(v, (list, tuple)):
            return [plain(x) for x in v]
        return float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) else v

    digest = hashlib.sha256(json.dumps(plain(spec), sort_keys=True, default=str).encode()).hexdigest()[:8]
    return f"{spec['family']}-{digest}"


def pair_kind(space) -> str:
    """"back-to-back" when every observer sees only back-to-back pairs: a flat space of pure
    translations (E1) or a homogeneous spherical space (Clifford translations; Gausmann et al.
    2001); else "general"."""
    if space.geometry == "flat":
        return BACK_TO_BACK if space.family == "E1" else GENERAL
    if space.geometry == "spherical":
        return BACK_TO_BACK if getattr(space, "homogeneous", False) else GENERAL
    return GENERAL


def spec_kind(spec: dict) -> str:
    """:func:`pair_kind` of an injected family spec."""
    return pair_kind(_unit_space(spec))


def spec_geometry(spec: dict) -> str:
    return _unit_space(spec).geometry


def injection_spec(value) -> dict:
    """The family spec of one injected family (a name or a [space]-style table)."""
    if isinstance(value, str):
        if value == "E1":
            return {"family": "E1", "lengths": [1.0, 1.0, 1.0]}
        spec = {"family": value}
    elif isinstance(value, dict):
        spec = dict(value)
    else:
        raise InputError("must be a family name or a table like {family = \"E2\", lengths = [1, 1, 0.8]}", WHERE)
    if "family" not in spec:
        raise InputError("the table needs a family", WHERE)
    for k in ("length_unit",):
        if k in spec and spec[k] != "chi_rec":
            raise InputError("injected lengths set only the shape: give them in chi_rec", WHERE)
    return spec


def describe(spec: dict) -> str:
    """A short name of the injected family for reports: 'cubic-torus (E1)', 'E2(lengths=...)'."""
    lengths = spec.get("lengths")
    if spec.get("family") == "E1" and lengths and np.allclose(lengths, lengths[0]) and not spec.get("angles"):
        return "cubic-torus (E1)"
    if spec.get("family") == "E2" and set(spec) <= {"family", "lengths"} and lengths:
        return f"half-turn E2 (lengths {', '.join(f'{float(v):g}' for v in lengths)})"
    if spec.get("family") == "E3" and set(spec) <= {"family", "lengths"} and lengths:
        return f"quarter-turn E3 (lengths {', '.join(f'{float(v):g}' for v in lengths)})"
    args = ", ".join(f"{k}={v}" for k, v in spec.items() if k != "family")
    return f"{spec['family']}({args})" if args else spec["family"]


def _unit_space(spec: dict):
    from .spaces import build_space

    try:
        return build_space(spec)
    except InputError as e:
        raise InputError(e.reason, f"{WHERE} ({e.where or 'space'})") from None


def _d_min(space, observer) -> float:
    """Shortest clone distance of the observer (flat: in the lengths' units; spherical: radians)."""
    from .circles import predict_circles

    if space.geometry == "flat":
        chi = 2.0 * max(abs(float(v)) for v in space.params.get("lengths", [1.0])) + 1.0
        pairs = predict_circles(space, observer, chi)
        if not pairs:
            raise InputError("no clone of the observer found: the family has no circles to inject", WHERE)
        return 2.0 * chi * math.cos(pairs[0].radius)
    chi = 0.5 * math.pi - 1e-3
    pairs = predict_circles(space, observer, chi)
    if not pairs:
        raise InputError("no clone of the observer found: the family has no circles to inject", WHERE)
    return 2.0 * math.atan(math.cos(pairs[0].radius) * math.tan(chi))


def _random_observer(space, rng: np.random.Generator):
    if space.geometry == "flat":
        box = max(abs(float(v)) for v in space.params.get("lengths", [1.0]))
        pos = rng.uniform(0.0, box, 3)
    else:
        x = rng.normal(size=4)
        pos = x / np.linalg.norm(x)
    return pos, geo.euler_zyz(*geo.random_rotation(rng))


def check(spec: dict, cosmo, radii_deg, lmax: int) -> None:
    """Plan-time checks: a compact flat or spherical family whose skies exist at these radii."""
    space = _unit_space(spec)
    if space.geometry == "hyperbolic":
        raise InputError("hyperbolic spaces have their size fixed by the curvature and cannot be scaled to an "
                         "injection radius; use a flat or spherical family", WHERE)
    if not getattr(space, "compact", True):
        raise InputError(f"{space.family} is not compact; inject a compact family", WHERE)
    pos = np.zeros(3) if space.geometry == "flat" else np.array([1.0, 0.0, 0.0, 0.0])
    obs = geo.Observer.make(space.geometry, pos)
    d = _d_min(space, obs)
    if space.geometry == "spherical":
        from .skies.spherical import check_default_kmax

        chi = math.atan(math.tan(d / 2.0) / math.cos(math.radians(float(min(radii_deg)))))
        check_default_kmax(lmax, chi, f"a {space.family} sky with circles of {min(radii_deg):g} deg (chi_rec/R_c = "
                           f"{chi:.3f})", WHERE, " or raise the smallest injection radius")


def scaled(spec: dict, alpha_deg: float, rng: np.random.Generator, cosmo):
    """(space, observer, cosmology) of one injection whose largest circles have radius alpha."""
    from .spaces import build_space

    alpha = math.radians(alpha_deg)
    unit = _unit_space(spec)
    pos, rot = _random_observer(unit, rng)
    if unit.geometry == "flat":
        d1 = _d_min(unit, geo.Observer.make("flat", pos))
        lam = 2.0 * math.cos(alpha) / d1
        sc = dict(spec)
        if "lengths" in sc:
            sc["lengths"] = [lam * float(v) for v in sc["lengths"]]
        space = build_space(sc)
        return space, geo.Observer.make("flat", lam * np.asarray(pos), rot), cosmo
    from .cosmology import omega_k_for_ratio

    d = _d_min(unit, geo.Observer.make("spherical", pos))
    chi = math.atan(math.tan(d / 2.0) / math.cos(alpha))
    ok = omega_k_for_ratio(cosmo, chi, -1)
    if ok is None:
        raise InputError(f"no Omega_K > -0.5 gives chi_rec/R_c = {chi:.3f} for circles of {alpha_deg:g} deg", WHERE)
    return unit, geo.Observer.make("spherical", pos, rot), cosmo.with_omega_k(ok)
