"""HEALPix pixel bookkeeping in bounded memory: the block size, blocks of RING pixel indices, the
N_side of a pixel count, NESTED to RING reordering, and the pixels of one N_side inside (or
around) a pixel of another.

Whole maps are read, checked, fitted and regraded in blocks of :data:`CHUNK` pixels (or fewer,
when each pixel of a block stands for many pixels of a finer map), so that these steps make no
full-size index array and no full-size float64 copy of a map. Every module of
:mod:`topology.maps` reads ``pixels.CHUNK`` when it runs, so one change of it (a test's
monkeypatch) sets the block size of every step.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError

CHUNK = 1 << 20  # pixels per block when a whole map is read, checked, fitted or regraded


def blocks(npix: int, size: int | None = None):
    """RING pixel indices 0 .. npix - 1 in consecutive blocks of ``size`` (default :data:`CHUNK`)."""
    size = CHUNK if size is None else size
    for a in range(0, npix, size):
        yield np.arange(a, min(a + size, npix))


def block_size(per: int = 1) -> int:
    """Pixels per block when each pixel stands for ``per`` pixels of a finer map (its sub-pixels),
    so that a block touches about :data:`CHUNK` of them: max(1, CHUNK // per)."""
    return max(1, CHUNK // max(1, per))


def nside_of(npix: int, where: str) -> int:
    """N_side of a full-sky map of ``npix`` pixels, or InputError (``where`` names the file or array)."""
    import healpy as hp

    if npix < 12 or not hp.isnpixok(npix):
        raise InputError(f"{npix} pixels is not a HEALPix map (12 N_side^2 pixels, N_side a power of two) and the "
                         f"file has no explicit pixel index (INDXSCHM = 'EXPLICIT' with a PIXEL column)", where)
    return int(hp.npix2nside(npix))


def nest_to_ring(values: np.ndarray) -> np.ndarray:
    """A NESTED map reordered to RING, block by block (no full-size index arrays)."""
    import healpy as hp

    nside = hp.npix2nside(values.size)
    out = np.empty_like(values)
    for a in range(0, values.size, CHUNK):
        ring = np.arange(a, min(a + CHUNK, values.size))
        out[a:a + ring.size] = values[hp.ring2nest(nside, ring)]
    return out


def source_pixels(nside_in: int, nside_out: int, pix: np.ndarray) -> np.ndarray:
    """RING pixels of N_side ``nside_in`` that make up each RING pixel ``pix`` of N_side
    ``nside_out``: shape (len(pix), 4^k) when degrading by 2^k (the sub-pixels: consecutive in
    NESTED order), (len(pix), 1) when upgrading (the parent) or at the same N_side."""
    import healpy as hp

    pix = np.asarray(pix, dtype=np.int64)
    if nside_in == nside_out:
        return pix[:, None]
    nest = hp.ring2nest(nside_out, pix)
    if nside_in > nside_out:
        b = (nside_in // nside_out) ** 2
        return hp.nest2ring(nside_in, nest[:, None] * b + np.arange(b))
    return hp.nest2ring(nside_in, nest // (nside_out // nside_in) ** 2)[:, None]
