"""Which pixel values of a HEALPix map or mask are unobserved, and the :class:`SkyMap` that holds
them.

Pixels without a usable value are unobserved (:func:`mask_bad_values`), with a note giving their
number unless they are UNSEEN, the HEALPix mark of an unobserved pixel:

* NaN, +-inf, UNSEEN (-1.6375e30) and any other sentinel-like value, |v| >= 1e20 (+-1e30, 1e300,
  ...): no temperature or brightness map holds such a number in any unit in use (K, microK,
  MJy/sr; the CMB monopole is 2.7e9 nK);
* in a map (not a mask), a value more than 1e5 robust sigma from the median (sigma = 1.4826 MAD,
  from a fixed-stride sample of at most 2^21 observed pixels). The brightest real sky is far
  inside this: from memory, the Galactic centre of a Planck-like frequency map at N_side 2048 is
  ~1e3-1e4 robust sigma above the median (30 GHz ~ 10-30 mK and 353 GHz ~ 1 K_CMB against a
  ~100-400 microK high-latitude spread), Tau A a few 1e3 in 1.7' pixels, and a component-separated
  CMB map's residuals and sources tens of sigma; a limit of 50 or 100 sigma would cut the Galactic
  plane and bright sources out of frequency maps. What 1e5 sigma catches is garbage (an integer
  fill such as -2^31 in a microK map, 1e10 or 1e15 values), which would otherwise set every
  circle through it.

A map (not a mask) with nothing observed, or with zero variance, is refused (:func:`check_values`).
:func:`as_skymap` makes a SkyMap of an in-memory array under the same rules as a file
(:func:`topology.maps.read.read_healpix`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError, note
from . import pixels
from .pixels import nest_to_ring, nside_of

UNSEEN = -1.6375e30
SENTINEL_ABS = 1e20  # |value| >= this is a no-data sentinel (UNSEEN, +-1e30, 1e300, ...), never a sky value
OUTLIER_SIGMA = 1e5  # a map value this many robust sigma from the median is absurd (module docstring)
MAD_TO_SIGMA = 1.4826  # sigma = 1.4826 MAD for a Gaussian (1 / Phi^-1(3/4); common practice)
_SPREAD_SAMPLE = 1 << 21  # at most this many observed pixels (a fixed stride) estimate median and MAD


@dataclass(frozen=True)
class SkyMap:
    """A HEALPix map in RING order; ``observed`` is False on UNSEEN/NaN/missing pixels and on
    pixels masked as bad values (``bad`` counts them by kind: "nan", "inf", "sentinel",
    "outlier"). ``partial`` is True for an explicit partial-sky file (pixels outside it are
    unobserved). ``values`` keeps the precision of the input (float32 or float64); it is 0 where
    unobserved."""

    values: np.ndarray
    observed: np.ndarray
    nside: int
    source: str = ""
    header: dict = field(default_factory=dict)
    partial: bool = False
    bad: dict = field(default_factory=dict)

    @property
    def npix(self) -> int:
        return self.values.size


def value_dtype(dtype) -> np.dtype:
    """float32 for single-precision floats and integers exact in float32 (up to 16 bits), else float64."""
    dtype = np.dtype(dtype)
    if (dtype.kind == "f" and dtype.itemsize <= 4) or (dtype.kind in "iub" and dtype.itemsize <= 2):
        return np.dtype(np.float32)
    return np.dtype(np.float64)


def _robust_spread(values: np.ndarray, observed: np.ndarray) -> tuple[float, float]:
    """(median, 1.4826 MAD) of the observed values, from at most ``_SPREAD_SAMPLE`` of them taken
    at a fixed stride (the estimate only has to place a limit 1e5 sigma out). When more than half
    the values equal the median (MAD = 0, e.g. a zero-filled cut), the MAD of the others."""
    n_obs = int(np.count_nonzero(observed))
    step = max(1, n_obs // _SPREAD_SAMPLE)
    chunk = pixels.CHUNK
    parts = []
    for a in range(0, values.size, chunk):
        parts.append(values[a:a + chunk][observed[a:a + chunk]][::step].astype(np.float64))
    s = np.concatenate(parts) if parts else np.zeros(0)
    if s.size == 0:
        return 0.0, 0.0
    med = float(np.median(s))
    dev = np.abs(s - med)
    mad = float(np.median(dev))
    if mad == 0.0 and np.any(dev > 0):
        mad = float(np.median(dev[dev > 0]))
    return med, MAD_TO_SIGMA * mad


def mask_bad_values(values: np.ndarray, observed: np.ndarray, spread: bool) -> dict:
    """In place: mark as unobserved (``observed`` False, value 0) the pixels without a usable value:
    NaN, +-inf, UNSEEN, other sentinel-like values (|v| >= SENTINEL_ABS) and, when ``spread`` (a
    map, not a mask), values more than OUTLIER_SIGMA robust sigma from the median. Returns the
    counts of the pixels so masked that were observed before, by kind (UNSEEN is not counted:
    it is the HEALPix mark of an unobserved pixel), with the median and sigma used."""
    chunk = pixels.CHUNK
    counts = {"nan": 0, "inf": 0, "sentinel": 0, "outlier": 0}
    for a in range(0, values.size, chunk):
        v, obs = values[a:a + chunk], observed[a:a + chunk]
        with np.errstate(invalid="ignore"):
            bad = ~(np.abs(v) < SENTINEL_ABS)
        if bad.any():
            vb = v[bad & obs]
            nan = np.isnan(vb)
            inf = np.isinf(vb)
            unseen = ~nan & ~inf & (np.abs(vb.astype(np.float64) - UNSEEN) <= 1e-5 * abs(UNSEEN))
            counts["nan"] += int(nan.sum())
            counts["inf"] += int(inf.sum())
            counts["sentinel"] += int((~nan & ~inf & ~unseen).sum())
            obs &= ~bad
            v[bad] = 0.0
    if spread:
        med, sigma = _robust_spread(values, observed)
        if sigma > 0:
            limit = OUTLIER_SIGMA * sigma
            for a in range(0, values.size, chunk):
                v, obs = values[a:a + chunk], observed[a:a + chunk]
                far = obs & (np.abs(v.astype(np.float64) - med) > limit)
                if far.any():
                    counts["outlier"] += int(far.sum())
                    obs &= ~far
                    v[far] = 0.0
            counts["median"], counts["sigma"] = med, sigma
    for a in range(0, values.size, chunk):  # unobserved pixels hold 0 (partial-sky fill included)
        v = values[a:a + chunk]
        v[~observed[a:a + chunk]] = 0.0
    return counts


def bad_kinds(bad: dict) -> str:
    """'3 NaN, 2 infinite, ...' for the counts of :func:`mask_bad_values` (empty when none)."""
    parts = []
    if bad.get("nan"):
        parts.append(f"{bad['nan']} NaN")
    if bad.get("inf"):
        parts.append(f"{bad['inf']} infinite")
    if bad.get("sentinel"):
        parts.append(f"{bad['sentinel']} with a no-data sentinel value (|value| >= {SENTINEL_ABS:.0e})")
    if bad.get("outlier"):
        parts.append(f"{bad['outlier']} more than {OUTLIER_SIGMA:.0e} robust sigma from the median "
                     f"(median {bad['median']:.4g}, sigma {bad['sigma']:.4g} = 1.4826 MAD)")
    return ", ".join(parts)


def bad_count(sky: SkyMap) -> int:
    """Number of pixels of ``sky`` masked as bad values (NaN, infinite, sentinel, outlier)."""
    return int(sum(sky.bad.get(k, 0) for k in ("nan", "inf", "sentinel", "outlier")))


def note_bad(sky: SkyMap) -> None:
    """One note on the pixels of ``sky`` masked as bad values (their number, share and kinds); none
    when there are none."""
    n = bad_count(sky)
    if n:
        note(f"{sky.source}: {n} pixel{'s' if n > 1 else ''} ({100 * n / sky.npix:.3g}% of the sky) masked as "
             f"unobserved: {bad_kinds(sky.bad)}")


def _observed_range(sky: SkyMap) -> tuple[float, float, int]:
    """(min, max, count) of the observed values, block by block."""
    chunk = pixels.CHUNK
    lo, hi, n = np.inf, -np.inf, 0
    for a in range(0, sky.npix, chunk):
        v = sky.values[a:a + chunk][sky.observed[a:a + chunk]]
        if v.size:
            lo, hi, n = min(lo, float(v.min())), max(hi, float(v.max())), n + v.size
    return lo, hi, n


def check_values(sky: SkyMap, what: str = "map") -> None:
    """InputError when no pixel is observed (all UNSEEN/NaN or masked as bad values), or, for a
    map (not a mask), when the observed pixels have zero variance (a constant map carries no circles)."""
    if not sky.observed.any():
        extra = f"; {bad_count(sky)} masked as bad values: {bad_kinds(sky.bad)}" if bad_count(sky) else ""
        raise InputError(f"every pixel of the {what} is UNSEEN or NaN{extra} (all-masked {what}: nothing observed)",
                         sky.source)
    if what == "map":
        lo, hi, n = _observed_range(sky)
        if hi - lo <= 1e-12 * max(abs(lo), abs(hi)):
            raise InputError(f"the map is constant ({lo:.6g} on all {n} observed pixels: zero variance)", sky.source)


def build_skymap(values: np.ndarray, observed: np.ndarray, nside: int, source: str, what: str, header=None,
                 partial: bool = False) -> SkyMap:
    """Mask bad values (in place, :func:`mask_bad_values`; the outlier rule only when ``what`` is
    "map") and build the SkyMap. Says nothing: the caller notes what was masked (:func:`note_bad`)."""
    bad = mask_bad_values(values, observed, spread=what == "map")
    sky = SkyMap(values, observed, nside, source, header or {}, partial=partial, bad=bad)
    return sky


def as_skymap(values, *, nest: bool = False, source: str = "array", what: str = "map") -> SkyMap:
    """A :class:`SkyMap` from an in-memory full-sky array (``nest`` gives its ordering; any byte
    order, converted to native float32 for single-precision input, else float64; the caller's
    array is not changed). Pixels without a usable value are unobserved, with a note
    (:func:`mask_bad_values`; ``what`` = "mask" skips the outlier rule)."""
    arr = np.asarray(values)
    v = np.array(arr, dtype=value_dtype(arr.dtype) if arr.dtype.kind in "fiub" else np.float64).ravel()
    nside = nside_of(v.size, source)
    if nest:
        v = nest_to_ring(v)
    observed = np.ones(v.size, dtype=bool)
    sky = build_skymap(v, observed, nside, source, what)
    note_bad(sky)
    return sky
