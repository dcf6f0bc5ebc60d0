"""The band limit of a HEALPix map, in one place.

A map of N_side holds spherical harmonics up to l = 3 N_side - 1 (Gorski et al. 2005, the
HEALPix paper: beyond it the ring-based quadrature no longer resolves the harmonics); simulated
skies default to l_max = min(2 N_side, 3 N_side - 1), well inside it (common practice).
"""

from __future__ import annotations

from .errors import InputError


def lmax_limit(nside: int) -> int:
    """The largest l a map of ``nside`` holds: 3 N_side - 1."""
    return 3 * int(nside) - 1


def default_lmax(nside: int) -> int:
    """l_max of a simulated sky when none is set: min(2 N_side, 3 N_side - 1)."""
    return min(2 * int(nside), lmax_limit(nside))


def check_band_limit(lmax: int, nside: int, where: str, what: str = "") -> int:
    """``lmax`` if it is at most 3 N_side - 1, else InputError naming ``where`` (and ``what``,
    e.g. "for the N_side 64 of null and injected skies")."""
    limit = lmax_limit(nside)
    if int(lmax) > limit:
        extra = f" {what}" if what else f" for N_side {nside}"
        raise InputError(f"must be <= 3 nside - 1 = {limit}{extra}, got {lmax}", where)
    return int(lmax)
