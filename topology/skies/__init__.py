"""Synthetic skies: isotropic (simply connected) and multiply connected (flat, spherical).

Generators return a :class:`~topology.skies.base.Sky` (noiseless, unbeamed, microK); the
instrument stage (:mod:`topology.skies.instrument`) observes it. The dispatcher over configs
(``sky_from_config``, ``synthesize``) lives here.
"""

from .base import TERMS, Sky

__all__ = ["Sky", "TERMS"]
