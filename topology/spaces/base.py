"""What every family of space provides: its geometry, its parameters and its holonomies.

A space is the quotient of a simply connected model (E^3, S^3, H^3) by a group Gamma of
isometries acting freely. Everything the rest of the package needs from a space is
``elements_within(observer, radius)``: the group elements g != 1 that move the observer by
less than ``radius`` (in the geometry's units), as 4x4 matrices (see :mod:`topology.geometry`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import geometry as geo


@dataclass(frozen=True)
class Holonomies:
    """Group elements g != 1 with their displacement of one observer.

    matrices: (n, 4, 4); displacement: (n,) distances d(x, g x), sorted ascending.
    """

    matrices: np.ndarray
    displacement: np.ndarray

    def __len__(self) -> int:
        return len(self.displacement)


class Space:
    """Base class of a family of spaces with fixed parameters.

    Subclasses set ``family`` (registry name), ``geometry`` (one of geometry.GEOMETRIES),
    ``homogeneous`` (True when every observer sees the same circles, up to rotation) and
    implement :meth:`elements_within`. ``params`` is a dict of the family's parameters as
    given (after validation) for reports.
    """

    family: str = ""
    geometry: str = "flat"
    homogeneous: bool = False
    orientable: bool = True
    compact: bool = True

    def __init__(self) -> None:
        self.params: dict = {}

    def elements_within(self, observer: geo.Observer, radius: float) -> Holonomies:
        raise NotImplementedError

    def describe(self) -> str:
        args = ", ".join(f"{k}={v}" for k, v in self.params.items())
        return f"{self.family}({args})"

    # convenience -----------------------------------------------------------------------------
    def shortest_displacement(self, observer: geo.Observer, search_radius: float) -> float:
        """Smallest d(x, g x) over g != 1, looking up to ``search_radius`` (inf if none)."""
        h = self.elements_within(observer, search_radius)
        return float(h.displacement[0]) if len(h) else float("inf")


def sort_holonomies(geometry: str, observer: geo.Observer, mats: np.ndarray, radius: float) -> Holonomies:
    """Keep g with 0 < d(x, g x) < radius and sort by displacement."""
    mats = np.asarray(mats, dtype=float).reshape(-1, 4, 4)
    if len(mats) == 0:
        return Holonomies(np.zeros((0, 4, 4)), np.zeros(0))
    images = mats @ observer.point
    d = geo.distance(geometry, observer.point[None, :], images)
    identity = np.all(np.abs(mats - np.eye(4)).reshape(len(mats), -1) < 1e-9, axis=1)
    keep = (~identity) & (d < radius)
    order = np.argsort(d[keep], kind="stable")
    return Holonomies(mats[keep][order], d[keep][order])
