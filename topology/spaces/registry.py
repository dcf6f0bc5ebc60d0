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
