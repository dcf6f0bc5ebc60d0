"""From a config to the objects of the theory: background, space, observer, LSS radius.

The LSS radius ``chi`` is expressed in the space's own units: 1 for flat spaces (lengths in
units of chi_rec), chi_rec / R_c for spherical and hyperbolic ones, whose curvature sign must
agree with the background's Omega_K.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import geometry as geo
from .config import Config
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
