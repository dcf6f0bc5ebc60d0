"""From a config to the objects of the theory: background, space, observer, LSS radius.

The LSS radius ``chi`` is expressed in the space's own units: 1 for flat spaces (lengths in
units of chi_rec), chi_rec / R_c for spherical and hyperbolic ones, whose curvature sign must
agree with the background's Omega_K.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

import math

from . import geometry as geo
from .config import NUMBER, Config, naming_file, type_ok
from .cosmology import Cosmology
from .errors import InputError
from .spaces import Space, build_space


@dataclass(frozen=True)
class Scenario:
    cosmology: Cosmology
    space: Space
    observer: geo.Observer
    chi: float  # LSS radius in the space's units

    @property
    def chi_rec_mpc(self) -> float:
        return self.cosmology.chi_rec_mpc


def cosmology_from_config(cfg: Config) -> Cosmology:
    sec = cfg.section("cosmology")
    if "omega_lambda" in sec:
        if "omega_k" in sec:
            raise InputError("give omega_k or omega_lambda, not both", "[cosmology] omega_lambda")
        probe = Cosmology(**{k: v for k, v in sec.items() if k != "omega_lambda"})
        sec["omega_k"] = 1.0 - probe.omega_m - probe.omega_r - float(sec.pop("omega_lambda"))
    return Cosmology(**{k: (float(v) if v is not None else None) for k, v in sec.items()})


def lss_radius(space: Space, cosmo: Cosmology) -> float:
    """chi in the space's units, after checking that the curvature signs agree."""
    if space.geometry == "flat":
        if cosmo.omega_k != 0:
            raise InputError(f"the flat family {space.family} needs omega_k = 0 (a flat space has no curvature), "
                             f"got {cosmo.omega_k}", "[cosmology] omega_k")
        return 1.0
    want = "< 0" if space.geometry == "spherical" else "> 0"
    if cosmo.geometry != space.geometry:
        raise InputError(f"the {space.geometry} family {space.family} needs omega_k {want}, got {cosmo.omega_k}",
                         "[cosmology] omega_k")
    return float(cosmo.chi_rec_over_curvature_radius)


def observer_from_config(cfg: Config, space: Space, cosmo: Cosmology) -> geo.Observer:
    sec = cfg.section("observer")
    default = {"flat": [0.0, 0.0, 0.0], "spherical": [1.0, 0.0, 0.0, 0.0], "hyperbolic": [0.0, 0.0, 0.0]}
    pos = sec.get("position", default[space.geometry])
    try:
        pos = np.asarray(pos, dtype=float)
    except (TypeError, ValueError):
        raise InputError("must be a list of numbers", "[observer] position") from None
    if space.geometry == "flat" and cfg.get("space", "length_unit") == "Mpc":
        pos = pos / cosmo.chi_rec_mpc
    try:
        angles = np.radians(np.asarray(sec.get("orientation", [0.0, 0.0, 0.0]), dtype=float))
    except (TypeError, ValueError):
        raise InputError("must be three numbers (degrees)", "[observer] orientation") from None
    try:
        return geo.Observer.make(space.geometry, pos, geo.euler_zyz(*angles))
    except InputError as e:
        raise InputError(e.reason, "[observer] position") from None


def scenario_from_config(cfg: Config) -> Scenario:
    cosmo = cosmology_from_config(cfg)
    if not cfg.has("space"):
        raise InputError("missing section [space]", str(cfg.path) if cfg.path else "config")
    space = build_space(cfg.section("space"), chi_rec_mpc=cosmo.chi_rec_mpc, base_dir=cfg.base_dir)
    chi = lss_radius(space, cosmo)
    observer = observer_from_config(cfg, space, cosmo)
    return Scenario(cosmo, space, observer, chi)


# ---------------------------------------------------------------------------------------------
# checks of a loaded config that need the theory (run before any work; errors name the file)
# ---------------------------------------------------------------------------------------------
def check_config(cfg: Config) -> Config:
    """The background ([cosmology]) and the family, parameters and observer of ``[space]``;
    returns ``cfg``. Errors about a key name the config file too."""
    from .cosmology import cosmology_from_section

    with naming_file(cfg):
        data = cfg.sections
        if "cosmology" not in data and "space" not in data:
            return cfg
        cosmo = cosmology_from_section(data.get("cosmology", {})) if "cosmology" in data else Cosmology()
        if "space" in data:
            check_space_table(cfg.section("space"), cfg.section("observer") if "observer" in data else None,
                              cosmo, cfg.base_dir, curvature=False)
    return cfg


def check_space_table(space_sec: dict, observer_sec: dict | None, cosmo, base_dir, *, curvature: bool,
                      sky: dict | None = None) -> None:
    """Family, parameters and observer of one space table (``isotropic`` takes no parameters);
    with ``curvature``, also the agreement of the family's geometry with the background and the
    sky methods available for it (inline skies of a run)."""
    family = space_sec.get("family")
    if family is None:
        raise InputError('missing: give a family of space (or "isotropic" for a sky)', "[space] family")
    if (sky or {}).get("polarisation"):
        raise InputError("polarised inline skies are not implemented in topology run yet (topology synth makes "
                         "isotropic ones)", "[sky] polarisation")
    if family == "isotropic":
        extra = sorted(k for k in space_sec if k != "family")
        if extra:
            raise InputError(f"the isotropic sky takes no [space] parameters, got {', '.join(extra)}",
                             f"[space] {extra[0]}")
        return
    space = build_space(space_sec, chi_rec_mpc=cosmo.chi_rec_mpc, base_dir=base_dir)
    sub = Config({"space": space_sec, **({"observer": observer_sec} if observer_sec is not None else {})})
    observer_from_config(sub, space, cosmo)
    if curvature:
        lss_radius(space, cosmo)
        if space.geometry == "hyperbolic":
            raise InputError(f"synthetic skies are not available for hyperbolic spaces (family {family})",
                             "[space] family")
        if space.geometry == "spherical" and (sky or {}).get("method") == "grid":
            raise InputError("spherical skies are built from eigenmodes only: use 'eigenmode' or 'auto'",
                             "[sky] method")


def family_observer(space: Space, family: dict) -> geo.Observer:
    """The observer of a ``[bounds] families`` entry: ``position`` (default the origin) and
    ``orientation`` (z-y-z Euler angles in degrees)."""
    angles = family.get("orientation", [0.0, 0.0, 0.0])
    if not (isinstance(angles, list) and len(angles) == 3 and all(type_ok(a, NUMBER) for a in angles)):
        raise InputError(f"must be three Euler angles z-y-z in degrees, got {angles!r}", "[observer] orientation")
    pos = family.get("position")
    if pos is None:
        pos = geo.origin(space.geometry)[:3] if space.geometry == "flat" else geo.origin(space.geometry)
    elif not (isinstance(pos, list) and all(type_ok(a, NUMBER) for a in pos)):
        raise InputError(f"must be a list of numbers, got {pos!r}", "[observer] position")
    try:
        return geo.Observer.make(space.geometry, pos, geo.euler_zyz(*[math.radians(a) for a in angles]))
    except InputError as err:
        raise InputError(err.reason, "[observer] position") from None


def bound_inputs(cfg: Config) -> dict:
    """The background, and the configured space and observer if there is a [space], as keyword
    arguments of :func:`topology.bounds.bound_summary`."""
    cosmo = cosmology_from_config(cfg)
    out = {"cosmology": cosmo}
    if cfg.has("space"):
        space = build_space(cfg.section("space"), chi_rec_mpc=cosmo.chi_rec_mpc, base_dir=cfg.base_dir)
        out.update(space=space, observer=observer_from_config(cfg, space, cosmo))
    return out
