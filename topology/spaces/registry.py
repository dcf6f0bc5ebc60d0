"""Families of space by name: build a :class:`Space` from a config's ``[space]`` table."""

from __future__ import annotations

import difflib
from pathlib import Path

from ..errors import InputError
from . import euclidean, hyperbolic, spherical
from .base import Space


def family_names() -> list[str]:
    flat = sorted(euclidean.FLAT_FAMILIES, key=lambda s: int(s[1:]))
    return flat + list(spherical.SPHERICAL_FAMILIES) + ["hyperbolic"]


def geometry_of(family: str) -> str:
    if family in euclidean.FLAT_FAMILIES:
        return "flat"
    if family in spherical.SPHERICAL_FAMILIES:
        return "spherical"
    if family == "hyperbolic":
        return "hyperbolic"
    raise unknown_family(family)


def unknown_family(family) -> InputError:
    names = family_names()
    close = difflib.get_close_matches(str(family), names, n=1)
    hint = f" (did you mean {close[0]!r}?)" if close else ""
    return InputError(f"unknown family {family!r}{hint}; known: {', '.join(names)}", "[space] family")


def allowed_keys(family: str) -> set[str]:
    g = geometry_of(family)
    if g == "flat":
        return set(euclidean.FLAT_KEYS)
    if g == "spherical":
        return set(spherical.SPHERICAL_KEYS[family])
    return set(hyperbolic.HYPERBOLIC_KEYS)


def build_space(spec: dict, *, chi_rec_mpc: float | None = None, base_dir: Path | None = None) -> Space:
    """Space from a ``[space]`` table: ``family`` and the family's parameters.

    Flat lengths are converted to units of chi_rec here when ``length_unit = "Mpc"``
    (which needs ``chi_rec_mpc``).
    """
    spec = dict(spec)
    family = spec.pop("family", None)
    if family is None:
        raise InputError("missing", "[space] family")
    geometry = geometry_of(family)
    allowed = allowed_keys(family)
    for key in spec:
        if key not in allowed:
            close = difflib.get_close_matches(key, sorted(allowed), n=1)
            hint = f" (did you mean {close[0]!r}?)" if close else ""
            ok = ", ".join(sorted(allowed)) or "none"
            raise InputError(f"unknown key for family {family}{hint}; allowed: {ok}", f"[space] {key}")
    if geometry == "flat":
        unit = spec.pop("length_unit", "chi_rec")
        if unit not in ("chi_rec", "Mpc"):
            raise InputError(f"must be 'chi_rec' or 'Mpc', got {unit!r}", "[space] length_unit")
        if unit == "Mpc" and "lengths" in spec:
            if chi_rec_mpc is None:
                raise InputError("lengths in Mpc need the background cosmology", "[space] length_unit")
            try:
                spec["lengths"] = [float(v) / chi_rec_mpc for v in spec["lengths"]]
            except (TypeError, ValueError):
                raise InputError("must be a list of numbers", "[space] lengths") from None
        return euclidean.FLAT_FAMILIES[family](spec)
    if geometry == "spherical":
        return spherical.SPHERICAL_FAMILIES[family](spec)
    return hyperbolic.make_hyperbolic(spec, base_dir=base_dir)


# The common names of the flat families, as in the docstring of spaces/euclidean.py (the naming
# of Riazuelo et al. 2004 and the COMPACT collaboration, written there from memory).
FLAT_NAMES = {
    "E1": "3-torus", "E2": "half-turn space", "E3": "quarter-turn space", "E4": "third-turn space",
    "E5": "sixth-turn space", "E6": "Hantzsche-Wendt space", "E7": "Klein space",
    "E8": "Klein space with horizontal flip", "E9": "Klein space with vertical flip",
    "E10": "Klein space with half-turn", "E11": "chimney space", "E12": "chimney space with half-turn",
    "E13": "chimney space with vertical flip", "E14": "chimney space with horizontal flip",
    "E15": "chimney space with half-turn and flip", "E16": "slab space", "E17": "slab space with flip",
}


def _number(v) -> str:
    return f"{float(v):.4g}"


def describe_space(family: str, params: dict | None = None) -> str:
    """A space in words for titles: family and parameters, no Python syntax.

    'E2 (half-turn space), lengths 1.55, 1.7, 0.8 chi_rec', 'lens space L(5, 2)',
    'dodecahedral space', 'isotropic sky (no topology)'. Flat lengths are in units of chi_rec
    (as a built :class:`Space` holds them); angles of 90 deg, the default, are left out.
    """
    params = dict(params or {})
    if family == "isotropic":
        return "isotropic sky (no topology)"
    if family in FLAT_NAMES:
        words = [f"{family} ({FLAT_NAMES[family]})"]
        if params.get("lengths"):
            words.append("lengths " + ", ".join(_number(v) for v in params["lengths"]) + " chi_rec")
        angles = params.get("angles")
        if angles is not None and any(float(a) != 90.0 for a in angles):
            words.append("angles " + ", ".join(_number(v) for v in angles) + " deg")
        for key in ("angle", "tilt"):
            if params.get(key) is not None and float(params[key]) != 90.0:
                words.append(f"{key} {_number(params[key])} deg")
        return ", ".join(words)
    if family == "lens" and "p" in params and "q" in params:
        return f"lens space L({params['p']}, {params['q']})"
    if family == "prism" and "m" in params:
        return f"prism space, m = {params['m']}"
    if family in ("tetrahedral", "octahedral", "dodecahedral") and not params:
        return f"{family} space"
    if family == "hyperbolic" and params.get("generators"):
        return f"hyperbolic space, generators {Path(str(params['generators'])).name}"
    rest = ", ".join(f"{k} {', '.join(map(str, v)) if isinstance(v, (list, tuple)) else v}" for k, v in params.items())
    return f"{family}, {rest}" if rest else str(family)
