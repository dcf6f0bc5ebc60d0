"""Mask weights on a map's pixels: regrading, coverage checks and the kept sky fraction.

The weight of a map pixel is the mask weight (0/1 or apodised, clipped to [0, 1]; a mask's
unobserved pixels, e.g. NaN or infinite ones, weigh 0) regraded to the map's N_side, times
"observed" (:func:`mask_weights`; step 1 of :func:`topology.maps.prepare.prepare_map`). A mask of
another N_side is regraded with a note: the mean of the sub-pixels when degrading, the parent's
value when upgrading, as ``healpy.ud_grade`` (:func:`regrade_weights`). Masked and unobserved
pixels lower the kept fraction that ``min_sky_fraction`` sees (:func:`check_sky_fraction`). All
of it goes block by block (:mod:`topology.maps.pixels`).
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError, note
from . import pixels
from .pixels import block_size, blocks, source_pixels
from .values import SkyMap, bad_count, bad_kinds


def sky_fraction(sky: SkyMap | None, mask: SkyMap | None, threshold: float = 0.5) -> float:
    """Fraction of the whole sky kept: mask weight (regraded to the map's N_side) times "observed"
    >= ``threshold``; the mask alone (at its own N_side) when ``sky`` is None."""
    if sky is None:
        if mask is None:
            return 1.0
        chunk = pixels.CHUNK
        kept = sum(int(np.count_nonzero(np.where(mask.observed[a:a + chunk], mask.values[a:a + chunk], 0.0)
                                        >= threshold)) for a in range(0, mask.npix, chunk))
        return kept / mask.npix
    check_mask(mask, sky)
    kept = sum(int(np.count_nonzero(weights_at(mask, sky, pix) >= threshold)) for pix in blocks(sky.npix))
    return kept / sky.npix


def check_sky_fraction(sky: SkyMap | None, mask: SkyMap | None, min_fraction: float, *,
                       threshold: float = 0.5, setting: str = "min_sky_fraction") -> float:
    """The kept fraction (:func:`sky_fraction`), or InputError naming it and the minimum when
    it is below ``min_fraction`` (``setting`` names where the minimum is set)."""
    kept = sky_fraction(sky, mask, threshold)
    if kept < float(min_fraction):
        who = mask.source if mask is not None else sky.source
        what = "the mask keeps" if mask is not None else "the map observes"
        if mask is not None and sky is not None and sky.partial:
            what = "map and mask together keep"
        why = ""
        if sky is not None and bad_count(sky):
            who = sky.source if mask is None else f"{sky.source} with mask {mask.source}"
            what = "the map observes" if mask is None else "map and mask together keep"
            why = f" once {bad_count(sky)} pixels without a usable value are masked ({bad_kinds(sky.bad)})"
        raise InputError(f"{what} {100 * kept:.1f}% of the sky{why}, less than the minimum sky fraction "
                         f"{float(min_fraction):g} ({setting})", who)
    return kept


def _regrade_at(values: np.ndarray, nside_out: int, pix: np.ndarray) -> np.ndarray:
    """``values`` (RING, any N_side) regraded to N_side ``nside_out`` at its RING pixels ``pix``:
    the mean of the sub-pixels (float64) when degrading, the parent's value when upgrading."""
    import healpy as hp

    src = source_pixels(hp.npix2nside(values.size), nside_out, pix)
    return values[src].mean(axis=1, dtype=np.float64)


def regrade_weights(weights: np.ndarray, nside_out: int) -> np.ndarray:
    """Mask weights (RING) to another N_side: the mean of sub-pixels when degrading, a copy
    when upgrading (as ``healpy.ud_grade``), block by block. float32 or bool in: float32 out
    (a mean of 0/1 values over 4^k pixels is exact in it), else float64."""
    import healpy as hp

    w = np.asarray(weights)
    nside_in = hp.npix2nside(w.size)
    out_dtype = np.float32 if w.dtype in (np.float32, np.bool_) else np.float64
    if nside_in == nside_out:
        return w.astype(out_dtype)
    npix = 12 * nside_out * nside_out
    out = np.empty(npix, dtype=out_dtype)
    for pix in blocks(npix, block_size((nside_in // nside_out) ** 2)):
        out[pix[0]:pix[-1] + 1] = _regrade_at(w, nside_out, pix)
    return out


def _mask_values_at(mask: SkyMap, idx: np.ndarray) -> np.ndarray:
    """Mask weights at the mask's pixels ``idx``: its value where observed, else 0, clipped to [0, 1]."""
    return np.clip(np.where(mask.observed[idx], mask.values[idx], 0.0), 0.0, 1.0)


def weights_at(mask: SkyMap | None, sky: SkyMap, pix: np.ndarray, cover: bool = False):
    """Weights at the map's RING pixels ``pix`` (:func:`mask_weights` there, float64); with
    ``cover``, also the regraded fraction of the mask's pixels that have a value."""
    obs = sky.observed[pix]
    if mask is None:
        w = obs.astype(np.float64)
        return (w, np.ones(pix.size)) if cover else w
    src = source_pixels(mask.nside, sky.nside, pix)
    w = _mask_values_at(mask, src).mean(axis=1, dtype=np.float64) * obs
    if cover:
        return w, mask.observed[src].mean(axis=1)
    return w


def check_mask(mask: SkyMap | None, sky: SkyMap) -> None:
    """The checks of :func:`mask_weights`, block by block, with its note on a regraded mask."""
    if mask is None:
        if not sky.observed.any():
            raise InputError("no unmasked pixel left (all-masked map)", sky.source)
        return
    if mask.nside != sky.nside:
        note(f"mask {mask.source} has N_side {mask.nside}, the map {sky.nside}: the mask is regraded to "
             f"N_side {sky.nside}")
    lo, hi = np.inf, -np.inf
    chunk = pixels.CHUNK
    for a in range(0, mask.npix, chunk):
        mv = np.where(mask.observed[a:a + chunk], mask.values[a:a + chunk], 0.0)
        lo, hi = min(lo, float(mv.min())), max(hi, float(mv.max()))
    if lo < -1e-6 or hi > 1.0 + 1e-6:
        raise InputError(f"mask weights must lie in [0, 1] (found {lo:.3g} .. {hi:.3g})", mask.source)
    uncovered = kept = kept_unobserved = positive = 0
    for pix in blocks(sky.npix, block_size((mask.nside // sky.nside) ** 2)):
        src = source_pixels(mask.nside, sky.nside, pix)
        mw = _mask_values_at(mask, src).mean(axis=1, dtype=np.float64)
        cover = mask.observed[src].mean(axis=1)
        obs = sky.observed[pix]
        uncovered += int(np.count_nonzero(obs & (cover < 0.5)))
        kept += int(np.count_nonzero(mw > 0))
        kept_unobserved += int(np.count_nonzero((mw > 0) & ~obs))
        positive += int(np.count_nonzero((mw > 0) & obs))
    if uncovered:
        frac = uncovered / max(int(np.count_nonzero(sky.observed)), 1)
        raise InputError(f"map and mask have different sky coverage: the mask has no value on "
                         f"{100 * frac:.1f}% of the map's observed pixels", mask.source)
    if not sky.partial and kept and kept_unobserved / kept > 0.5:
        raise InputError("map and mask have different sky coverage: most pixels the mask keeps are "
                         "unobserved in the map", mask.source)
    if not positive:
        raise InputError("no unmasked pixel left (all-masked map)", f"{sky.source} with mask {mask.source}")


def _block_for(mask: SkyMap | None, sky: SkyMap) -> int:
    """Map pixels per block when each gathers the mask's sub-pixels (:func:`~topology.maps.pixels.block_size`)."""
    return block_size(1 if mask is None else (mask.nside // sky.nside) ** 2)


def mask_weights(mask: SkyMap | None, sky: SkyMap) -> np.ndarray:
    """Weights in [0, 1] on the map's pixels: the mask regraded, times "observed" (float32 unless
    the mask is float64).

    Raises InputError when the mask does not cover the map's observed pixels, when it keeps
    mostly sky that a full-sky map does not have (different coverage), or when nothing is left.
    A partial-sky map (explicit pixel index) is expected to miss most of the mask's sky. A mask
    of another N_side is regraded, with a note.
    """
    check_mask(mask, sky)
    dtype = np.float64 if mask is not None and mask.values.dtype == np.float64 else np.float32
    w = np.empty(sky.npix, dtype=dtype)
    for pix in blocks(sky.npix, _block_for(mask, sky)):
        w[pix[0]:pix[-1] + 1] = weights_at(mask, sky, pix)
    return w


def weight_blocks(mask: SkyMap | None, sky: SkyMap):
    """(pix, w) over the map in blocks: RING pixel indices and their weights (float64)."""
    for pix in blocks(sky.npix, _block_for(mask, sky)):
        yield pix, weights_at(mask, sky, pix)
