"""Spaces and their holonomy groups: flat (E1-E17), spherical (lens, prism, polyhedral) and
hyperbolic (from generator files). See :func:`build_space` and :func:`family_names`."""

from .base import Holonomies, Space
from .registry import build_space, family_names, geometry_of

__all__ = ["Holonomies", "Space", "build_space", "family_names", "geometry_of"]
