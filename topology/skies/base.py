"""The shared data type of the sky generators.

Every generator (isotropic, flat, spherical) returns a :class:`Sky`: the noiseless, unbeamed
temperature anisotropy on the observer's sky, in microkelvin (thermodynamic), either as
spherical-harmonic coefficients or as a HEALPix map. The instrument stage
(:func:`topology.skies.instrument.observe`) turns it into an observed map.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

#: the temperature terms a generator may include (see each generator's docstring)
TERMS = ("sw", "doppler", "isw")


@dataclass
class Sky:
    """A noiseless, unbeamed temperature anisotropy field on the sky in microkelvin (thermodynamic).

    Exactly one of ``alm`` (complex128, healpy ordering, lmax=self.lmax) or ``map`` (RING,
    ``nside``) is set. ``terms`` lists the physical terms the field contains; ``meta`` holds
    provenance (method, family, params, seed, counts...) for the FITS header.
    """

    lmax: int
    alm: np.ndarray | None = None
    map: np.ndarray | None = None
    nside: int | None = None
    terms: tuple[str, ...] = ("sw",)
    meta: dict = field(default_factory=dict)   # method, family, params, seed, counts...

    def __post_init__(self):
        if (self.alm is None) == (self.map is None):
            raise ValueError("a Sky needs exactly one of alm or map")
        if self.map is not None and self.nside is None:
            raise ValueError("a map-type Sky needs nside")
        self.terms = tuple(self.terms)

    @property
    def kind(self) -> str:
        """``"alm"`` or ``"map"``."""
        return "alm" if self.alm is not None else "map"


#: named random streams spawned from one seed (numpy SeedSequence.spawn children); "tail": the
#: isotropic complement of a flat sky's wave-number cut (topology.skies.flat_cut)
STREAMS = {"signal": 0, "noise": 1, "tail": 2}


def stream_rng(seed, stream: str) -> np.random.Generator:
    """The Generator of one named stream ("signal", "noise" or "tail") of ``seed``.

    Each stream is a distinct child of ``SeedSequence(seed)`` (numpy's spawn), so the noise
    never repeats or correlates with the signal of the same seed. ``seed`` is an int >= 0.
    """
    index = STREAMS[stream]
    child = np.random.SeedSequence(int(seed)).spawn(index + 1)[index]
    return np.random.default_rng(child)
