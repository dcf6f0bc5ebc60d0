"""HEALPix maps and masks: reading, validation and preparation for the circle search.

Reading (:func:`read_healpix`): a FITS binary table as written by HEALPix tools and healpy, full
sky or explicit partial sky (``INDXSCHM = 'EXPLICIT'`` with a ``PIXEL`` column). The pixel
ordering comes from the ``ORDERING`` header key (RING or NESTED); a file without it is an
error unless the caller passes ``ordering``. Every map is returned in RING order, in the file's
precision (float32 stays float32), read in blocks of rows. Pixels missing from a partial-sky file
are unobserved, and so are pixels without a usable value (:func:`_mask_bad`, with a note giving
their number unless they are UNSEEN, the HEALPix mark of an unobserved pixel):

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

Masked pixels lower the observed fraction that ``min_sky_fraction`` sees, and a mask's NaN or
infinite pixels make it unobserved there (again with a note).

Preparation (:func:`prepare_map`), in this order (common practice for matched-circle searches,
e.g. Cornish, Spergel & Starkman 2004):

1. weights w = mask weight (0/1 or apodised, regraded to the map's N_side) times "observed";
2. monopole and dipole fitted by weighted least squares over w > 0 and removed (for a 0/1 mask
   this is what ``healpy.remove_dipole`` does on the kept pixels);
3. the map times w is expanded in spherical harmonics up to l_max = min(3 N_side_in - 1,
   3 N_side_work - 1), multiplied by the filter f_l = b_l(FWHM) * [l_min <= l <= l_max] * u_l
   (Gaussian beam of the given FWHM, an optional l-range and optional user l-weights, e.g. a
   Wiener-like filter) and synthesised on the working N_side (harmonic degrading: no pixel
   aliasing);
4. the working mask keeps a working pixel only when every input pixel inside it is kept
   (w >= ``mask_threshold``), so no interpolated sample leans on masked sky.

A map coarser than the working N_side is refused (:func:`check_resolution`): upsampling adds no
information at the working grid's scales (search at or below the map's resolution; common
practice).

Defaults: FWHM 1 deg (the matched circles of a Planck-like map carry most of their S/N at
l < 300), working N_side 128 (pixel 0.46 deg, two pixels per FWHM), no l-range cut.

Memory: an N_side 2048 float32 map and mask (50 million pixels, 200 MB each) are prepared in
about 1.2 GB resident (benchmarks/large_map.py): the files are read in blocks of rows, weights,
regrading, the monopole/dipole fit (normal equations summed over blocks of 2^20 pixels, pix2vec
per block) and its removal go block by block, and the only full-size arrays beside map and mask
are the harmonic transform's input (in the map's precision) and healpy's float64 maps.
"""

from __future__ import annotations

import io
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import InputError, note

UNSEEN = -1.6375e30
ORDERINGS = ("RING", "NESTED")
ORDERING_FROM = "ordering (a key of [[maps]] or [mask] in a run config, --ordering for topology search)"
SENTINEL_ABS = 1e20  # |value| >= this is a no-data sentinel (UNSEEN, +-1e30, 1e300, ...), never a sky value
OUTLIER_SIGMA = 1e5  # a map value this many robust sigma from the median is absurd (module docstring)
MAD_TO_SIGMA = 1.4826  # sigma = 1.4826 MAD for a Gaussian (1 / Phi^-1(3/4); common practice)
CHUNK = 1 << 20  # pixels per block when a whole map is read, checked, fitted or regraded
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


def _is_unseen(v: np.ndarray) -> np.ndarray:
    """Pixels that hold no sky value: NaN, +-inf, HEALPix UNSEEN or any other sentinel-like value
    (|v| >= SENTINEL_ABS). Values a robust spread calls absurd are found by :func:`_mask_bad`."""
    v = np.asarray(v)
    with np.errstate(invalid="ignore"):
        return ~(np.abs(v) < SENTINEL_ABS)  # False for NaN too


def _value_dtype(dtype) -> np.dtype:
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
    parts = []
    for a in range(0, values.size, CHUNK):
        parts.append(values[a:a + CHUNK][observed[a:a + CHUNK]][::step].astype(np.float64))
    s = np.concatenate(parts) if parts else np.zeros(0)
    if s.size == 0:
        return 0.0, 0.0
    med = float(np.median(s))
    dev = np.abs(s - med)
    mad = float(np.median(dev))
    if mad == 0.0 and np.any(dev > 0):
        mad = float(np.median(dev[dev > 0]))
    return med, MAD_TO_SIGMA * mad


def _mask_bad(values: np.ndarray, observed: np.ndarray, spread: bool) -> dict:
    """In place: mark as unobserved (``observed`` False, value 0) the pixels without a usable value:
    NaN, +-inf, UNSEEN, other sentinel-like values (|v| >= SENTINEL_ABS) and, when ``spread`` (a
    map, not a mask), values more than OUTLIER_SIGMA robust sigma from the median. Returns the
    counts of the pixels so masked that were observed before, by kind (UNSEEN is not counted:
    it is the HEALPix mark of an unobserved pixel), with the median and sigma used."""
    counts = {"nan": 0, "inf": 0, "sentinel": 0, "outlier": 0}
    for a in range(0, values.size, CHUNK):
        v, obs = values[a:a + CHUNK], observed[a:a + CHUNK]
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
            for a in range(0, values.size, CHUNK):
                v, obs = values[a:a + CHUNK], observed[a:a + CHUNK]
                far = obs & (np.abs(v.astype(np.float64) - med) > limit)
                if far.any():
                    counts["outlier"] += int(far.sum())
                    obs &= ~far
                    v[far] = 0.0
            counts["median"], counts["sigma"] = med, sigma
    for a in range(0, values.size, CHUNK):  # unobserved pixels hold 0 (partial-sky fill included)
        v = values[a:a + CHUNK]
        v[~observed[a:a + CHUNK]] = 0.0
    return counts


def _bad_kinds(bad: dict) -> str:
    """'3 NaN, 2 infinite, ...' for the counts of :func:`_mask_bad` (empty when none)."""
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


def _note_bad(sky: SkyMap) -> None:
    n = bad_count(sky)
    if n:
        note(f"{sky.source}: {n} pixel{'s' if n > 1 else ''} ({100 * n / sky.npix:.3g}% of the sky) masked as "
             f"unobserved: {_bad_kinds(sky.bad)}")


def _nest_to_ring(values: np.ndarray) -> np.ndarray:
    """A NESTED map reordered to RING, block by block (no full-size index arrays)."""
    import healpy as hp

    nside = hp.npix2nside(values.size)
    out = np.empty_like(values)
    for a in range(0, values.size, CHUNK):
        ring = np.arange(a, min(a + CHUNK, values.size))
        out[a:a + ring.size] = values[hp.ring2nest(nside, ring)]
    return out


def _nside_of(npix: int, where: str) -> int:
    import healpy as hp

    if npix < 12 or not hp.isnpixok(npix):
        raise InputError(f"{npix} pixels is not a HEALPix map (12 N_side^2 pixels, N_side a power of two) and the "
                         f"file has no explicit pixel index (INDXSCHM = 'EXPLICIT' with a PIXEL column)", where)
    return int(hp.npix2nside(npix))


def _observed_range(sky: SkyMap) -> tuple[float, float, int]:
    """(min, max, count) of the observed values, block by block."""
    lo, hi, n = np.inf, -np.inf, 0
    for a in range(0, sky.npix, CHUNK):
        v = sky.values[a:a + CHUNK][sky.observed[a:a + CHUNK]]
        if v.size:
            lo, hi, n = min(lo, float(v.min())), max(hi, float(v.max())), n + v.size
    return lo, hi, n


def check_values(sky: SkyMap, what: str = "map") -> None:
    """InputError when no pixel is observed (all UNSEEN/NaN or masked as bad values), or, for a
    map (not a mask), when the observed pixels have zero variance (a constant map carries no circles)."""
    if not sky.observed.any():
        extra = f"; {bad_count(sky)} masked as bad values: {_bad_kinds(sky.bad)}" if bad_count(sky) else ""
        raise InputError(f"every pixel of the {what} is UNSEEN or NaN{extra} (all-masked {what}: nothing observed)",
                         sky.source)
    if what == "map":
        lo, hi, n = _observed_range(sky)
        if hi - lo <= 1e-12 * max(abs(lo), abs(hi)):
            raise InputError(f"the map is constant ({lo:.6g} on all {n} observed pixels: zero variance)", sky.source)


def check_resolution(sky: SkyMap, nside_work: int, setting: str = "[search] nside_work / --nside-work") -> None:
    """InputError when the map is coarser than the working N_side: an upsampled map has no
    information on the working grid's scales (search at or below the map's resolution; common
    practice). ``setting`` names where the working N_side is given."""
    if int(nside_work) > int(sky.nside):
        raise InputError(f"the map has N_side {sky.nside}, coarser than the working N_side {int(nside_work)} "
                         f"({setting}); give a working N_side <= {sky.nside} or a finer map", sky.source)


def _finish(values: np.ndarray, observed: np.ndarray, nside: int, source: str, what: str, header=None,
            partial: bool = False) -> SkyMap:
    """Mask bad values (in place), build the SkyMap and note what was masked."""
    bad = _mask_bad(values, observed, spread=what == "map")
    sky = SkyMap(values, observed, nside, source, header or {}, partial=partial, bad=bad)
    return sky


def as_skymap(values, *, nest: bool = False, source: str = "array", what: str = "map") -> SkyMap:
    """A :class:`SkyMap` from an in-memory full-sky array (``nest`` gives its ordering; any byte
    order, converted to native float32 for single-precision input, else float64; the caller's
    array is not changed). Pixels without a usable value are unobserved, with a note
    (:func:`_mask_bad`; ``what`` = "mask" skips the outlier rule)."""
    arr = np.asarray(values)
    v = np.array(arr, dtype=_value_dtype(arr.dtype) if arr.dtype.kind in "fiub" else np.float64).ravel()
    nside = _nside_of(v.size, source)
    if nest:
        v = _nest_to_ring(v)
    observed = np.ones(v.size, dtype=bool)
    sky = _finish(v, observed, nside, source, what)
    _note_bad(sky)
    return sky


def _norm_ordering(value, where: str) -> str:
    o = str(value).strip().upper()
    o = {"NEST": "NESTED"}.get(o, o)
    if o not in ORDERINGS:
        raise InputError(f"ordering must be RING or NESTED, got {value!r}", where)
    return o


_GZIP_MAGIC = b"\x1f\x8b"


def _check_fits_bytes(p: Path, what: str, where: str) -> bytes | None:
    """Fail fast on an empty, non-FITS or gzip-corrupt file. A FITS file starts with the card
    ``SIMPLE  =`` (FITS standard 4.0, sec. 4.4.1.1); a gzip stream with 1f 8b (RFC 1952).
    Returns the decompressed bytes of a gzipped file (checking the stream means decompressing it
    whole, so it is read once), None for a plain one."""
    import gzip
    import zlib

    with open(p, "rb") as fh:
        head = fh.read(2880)
    if not head:
        raise InputError(f"{what} file is empty", where)
    data = None
    if head[:2] == _GZIP_MAGIC:
        try:
            with gzip.open(p, "rb") as fh:
                data = fh.read()  # decompress to the end: a damaged or cut stream fails here
        except (OSError, EOFError, zlib.error) as e:
            raise InputError(f"{what} file is not a valid gzip file ({e})", where) from None
        head = data[:2880]
        if not head:
            raise InputError(f"{what} file is empty once decompressed", where)
    if not head.startswith(b"SIMPLE  ="):
        raise InputError("not a FITS file (it does not start with a SIMPLE card)", where)
    return data


def _select_column(cols: list, fld, what: str, where: str) -> str:
    """Column name for ``fld``: None (the first), an index or a name (case-insensitive)."""
    listing = ", ".join(cols) if cols else "none"
    if fld is None:
        fld = 0
    if isinstance(fld, str) and fld.strip().lstrip("-").isdigit():
        fld = int(fld)
    if isinstance(fld, bool) or not isinstance(fld, (int, np.integer, str)):
        raise InputError(f"field must be a column index or name, got {fld!r}; the columns are {listing}", where)
    if isinstance(fld, str):
        match = [c for c in cols if c.upper() == fld.strip().upper()]
        if not match:
            raise InputError(f"field {fld!r} is not a column of this {what}; the columns are {listing}", where)
        return match[0]
    if not 0 <= int(fld) < len(cols):
        raise InputError(f"field {int(fld)} does not exist: the {what} has {len(cols)} column(s) ({listing}), "
                         f"numbered from 0", where)
    return cols[int(fld)]


_RAW_FORMATS = {"E": ">f4", "D": ">f8", "B": "u1", "I": ">i2", "J": ">i4", "K": ">i8"}  # FITS 4.0 table 18
_READ_BYTES = 8 << 20  # rows read per block: about this many bytes


def _raw_column(table, name: str):
    """(row dtype holding only column ``name`` at its byte offset, NAXIS1, NAXIS2) when the column
    can be read straight from the file: a numeric format (E, D, B, I, J, K) without TSCAL/TZERO
    scaling in a table whose row layout astropy agrees with; else None."""
    col = table.columns[name]
    letter = str(getattr(col.format, "format", "") or "")
    if letter not in _RAW_FORMATS or col.bscale not in (None, 1) or col.bzero not in (None, 0):
        return None
    hdr = table.header
    width, rows = int(hdr.get("NAXIS1", -1)), int(hdr.get("NAXIS2", -1))
    layout = table.columns.dtype
    if layout.itemsize != width or rows < 0:
        return None
    base, offset = layout.fields[name][:2]
    shape = base.shape
    raw = np.dtype((_RAW_FORMATS[letter], shape)) if shape else np.dtype(_RAW_FORMATS[letter])
    if raw.itemsize != base.itemsize:
        return None
    return np.dtype({"names": [name], "formats": [raw], "offsets": [offset], "itemsize": width}), width, rows


def _read_raw(source, start: int, row: np.dtype, width: int, rows: int, name: str, out_dtype) -> np.ndarray:
    """Column ``name`` of ``rows`` rows of ``width`` bytes from byte ``start`` of ``source`` (an open
    file or the bytes of a decompressed one), converted block by block to native ``out_dtype``."""
    per_row = int(np.prod(row.fields[name][0].shape or (1,)))
    out = np.empty(rows * per_row, dtype=out_dtype)
    step = max(1, _READ_BYTES // max(width, 1))
    for r0 in range(0, rows, step):
        n = min(step, rows - r0)
        if isinstance(source, (bytes, bytearray, memoryview)):
            block = np.frombuffer(source, dtype=row, count=n, offset=start + r0 * width)
        else:
            source.seek(start + r0 * width)
            block = np.frombuffer(source.read(n * width), dtype=row, count=n)
        out[r0 * per_row:(r0 + n) * per_row] = block[name].reshape(-1)
    return out


def read_healpix(path: str | Path, *, field: int | str | None = None, ordering: str | None = None,
                 what: str = "map", ordering_from: str = ORDERING_FROM) -> SkyMap:
    """Read one column of the first binary table of a HEALPix FITS file (RING order out).

    ``field``: column index or name; None or 0 is the first (temperature) column, and a note says
    which column was used when there are several. ``ordering`` ("RING"/"NESTED") is used when the
    header has no ORDERING key; when both are present they must agree; ``ordering_from`` names
    where the user gives it (e.g. ``"--ordering"``), for the error messages. Plain or gzipped
    FITS; any numeric column type (FITS data are big-endian): single-precision floats and 8- or
    16-bit integers become native float32, the rest float64. A numeric column is read from the
    file in blocks of rows (a full-resolution map never sits in memory twice); a scaled
    (TSCAL/TZERO) or other column through astropy. Pixels without a usable value are unobserved,
    with a note (:func:`_mask_bad`). A map (not a mask) that is all unobserved or constant is
    refused (:func:`check_values`).
    """
    import warnings

    import healpy as hp
    from astropy.io import fits
    from astropy.io.fits.verify import VerifyError

    where = str(path)
    p = Path(path)
    if not p.is_file():
        raise InputError(f"{what} file not found", where)
    if ordering is not None:
        ordering = _norm_ordering(ordering, ordering_from)
    unpacked = _check_fits_bytes(p, what, where)
    size = p.stat().st_size if unpacked is None else len(unpacked)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            with fits.open(p if unpacked is None else io.BytesIO(unpacked), memmap=False) as hdul:
                index = next((i for i, h in enumerate(hdul) if isinstance(h, fits.BinTableHDU)), None)
                if index is None:
                    _raise_damaged(caught, what, where, failed=True)
                    raise InputError(f"not a HEALPix {what}: no binary table extension", where)
                table = hdul[index]
                header = dict(table.header)
                names = list(table.columns.names)
                _raise_damaged(caught, what, where)
                indx = str(header.get("INDXSCHM", "IMPLICIT")).strip().upper()
                if indx not in ("IMPLICIT", "EXPLICIT"):
                    raise InputError(f"header INDXSCHM = {indx!r} is neither IMPLICIT nor EXPLICIT", where)
                pix_name = next((n for n in names if n.upper() == "PIXEL"), None)
                if indx == "EXPLICIT":
                    if pix_name is None:
                        raise InputError(f"partial-sky {what} (INDXSCHM = 'EXPLICIT') without a PIXEL column", where)
                    cols = [n for n in names if n != pix_name]
                else:
                    cols = names
                col_name = _select_column(cols, field, what, where)
                wanted = [col_name] + ([pix_name] if indx == "EXPLICIT" else [])
                raw = {n: _raw_column(table, n) for n in wanted}
                start = int(hdul.fileinfo(index)["datLoc"])
                got = {}
                if all(r is not None for r in raw.values()):
                    row, width, rows = raw[col_name]
                    if start + width * rows > size:
                        raise InputError(f"{what} file is truncated (its table needs {start + width * rows} bytes, "
                                         f"the file has {size})", where)
                    src = unpacked if unpacked is not None else open(p, "rb")
                    try:
                        for n, (row, width, rows) in raw.items():
                            kind = np.int64 if n == pix_name else _value_dtype(row.fields[n][0].base)
                            got[n] = _read_raw(src, start, row, width, rows, n, kind)
                    finally:
                        if unpacked is None:
                            src.close()
                else:
                    data = table.data
                    for n in wanted:
                        a = np.asarray(data[n]).ravel()
                        kind = np.int64 if n == pix_name else _value_dtype(a.dtype)
                        got[n] = np.array(a, dtype=kind)
                    del data
                column = got[col_name]
                pixels = got.get(pix_name) if indx == "EXPLICIT" else None
                _raise_damaged(caught, what, where)
        except InputError:
            raise
        except VerifyError as e:
            raise InputError(f"damaged FITS header ({' '.join(str(e).split())})", where) from None
        except (OSError, EOFError, ValueError, TypeError, KeyError, IndexError) as e:
            _raise_damaged(caught, what, where, failed=True)
            raise InputError(f"cannot read {what} as FITS ({type(e).__name__}: {e})", where) from None
    del unpacked
    head_order = header.get("ORDERING")
    if head_order is not None:
        head_order = str(head_order).strip().upper()
        head_order = {"NEST": "NESTED"}.get(head_order, head_order)
        if head_order not in ORDERINGS:
            raise InputError(f"header ORDERING = {header.get('ORDERING')!r} is neither RING nor NESTED", where)
        if ordering is not None and ordering != head_order:
            raise InputError(f"header says ORDERING = {head_order} but {ordering} was given ({ordering_from})", where)
        order = head_order
    elif ordering is not None:
        order = ordering
    else:
        raise InputError(f"header has no ORDERING key; give the pixel ordering, RING or NESTED, with {ordering_from}",
                         where)
    if pixels is not None:
        if "NSIDE" not in header:
            raise InputError(f"partial-sky {what} without NSIDE in the header", where)
        nside = int(header["NSIDE"])
        if nside < 1 or (nside & (nside - 1)):
            raise InputError(f"NSIDE = {nside} is not a power of two", where)
        npix = 12 * nside * nside
        if pixels.size != column.size or pixels.min(initial=0) < 0 or pixels.max(initial=0) >= npix:
            raise InputError(f"partial-sky {what}: PIXEL column does not fit NSIDE = {nside}", where)
        if np.unique(pixels).size != pixels.size:
            raise InputError(f"partial-sky {what}: the PIXEL column lists a pixel twice", where)
        if order == "NESTED":
            pixels = hp.nest2ring(nside, pixels)
        values = np.zeros(npix, dtype=column.dtype)
        observed = np.zeros(npix, dtype=bool)
        values[pixels] = column
        observed[pixels] = True
        del column
    else:
        nside = _nside_of(column.size, where)
        if "NSIDE" in header and int(header["NSIDE"]) != nside:
            raise InputError(f"header NSIDE = {header['NSIDE']} but the table holds {column.size} pixels", where)
        values = _nest_to_ring(column) if order == "NESTED" else column
        del column
        observed = np.ones(values.size, dtype=bool)
    keep = {k: header[k] for k in ("ORDERING", "NSIDE", "COORDSYS", "TUNIT1", "TTYPE1") if k in header}
    keep["COLUMN"] = col_name
    sky = _finish(values, observed, nside, where, what, keep, partial=pixels is not None)
    check_values(sky, what)
    if len(cols) > 1 and (field is None or (isinstance(field, (int, np.integer)) and int(field) == 0)):
        note(f"{where} has {len(cols)} columns ({', '.join(cols)}); using the first, {col_name}")
    if pixels is not None:
        note(f"{where} is partial-sky: {100 * np.count_nonzero(observed) / observed.size:.1f}% of the sky observed, "
             f"the rest masked")
    _note_bad(sky)
    return sky


def _raise_damaged(caught, what: str, where: str, failed: bool = False) -> None:
    """Turn astropy's warnings about a cut file into one InputError; when the read ``failed``,
    its warnings about headers too (a readable file with an odd header card is accepted)."""
    for w in caught:
        text = " ".join(str(w.message).split())
        if "truncated" in text.lower():
            raise InputError(f"{what} file is truncated ({text})", where)
    for w in caught if failed else ():
        text = re.sub(r"\s*\(note:[^)]*\)", "", " ".join(str(w.message).split()))  # astropy's aside on indexing
        if "header" in text.lower() or "verif" in type(w.message).__name__.lower():
            raise InputError(f"damaged or truncated FITS {what} file ({text[:240]})", where)


def sky_fraction(sky: SkyMap | None, mask: SkyMap | None, threshold: float = 0.5) -> float:
    """Fraction of the whole sky kept: mask weight (regraded to the map's N_side) times "observed"
    >= ``threshold``; the mask alone (at its own N_side) when ``sky`` is None."""
    if sky is None:
        if mask is None:
            return 1.0
        kept = sum(int(np.count_nonzero(np.where(mask.observed[a:a + CHUNK], mask.values[a:a + CHUNK], 0.0)
                                        >= threshold)) for a in range(0, mask.npix, CHUNK))
        return kept / mask.npix
    check_mask(mask, sky)
    kept = sum(int(np.count_nonzero(_weights_at(mask, sky, pix) >= threshold)) for pix in _blocks(sky.npix))
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
            why = f" once {bad_count(sky)} pixels without a usable value are masked ({_bad_kinds(sky.bad)})"
        raise InputError(f"{what} {100 * kept:.1f}% of the sky{why}, less than the minimum sky fraction "
                         f"{float(min_fraction):g} ({setting})", who)
    return kept


def _blocks(npix: int, size: int = CHUNK):
    """RING pixel indices in consecutive blocks of ``size``."""
    for a in range(0, npix, size):
        yield np.arange(a, min(a + size, npix))


def _source_pixels(nside_in: int, nside_out: int, pix: np.ndarray) -> np.ndarray:
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


def _regrade_at(values: np.ndarray, nside_out: int, pix: np.ndarray) -> np.ndarray:
    """``values`` (RING, any N_side) regraded to N_side ``nside_out`` at its RING pixels ``pix``:
    the mean of the sub-pixels (float64) when degrading, the parent's value when upgrading."""
    import healpy as hp

    src = _source_pixels(hp.npix2nside(values.size), nside_out, pix)
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
    size = max(1, CHUNK // max(1, (nside_in // nside_out) ** 2))
    for pix in _blocks(npix, size):
        out[pix[0]:pix[-1] + 1] = _regrade_at(w, nside_out, pix)
    return out


def _mask_values_at(mask: SkyMap, idx: np.ndarray) -> np.ndarray:
    """Mask weights at the mask's pixels ``idx``: its value where observed, else 0, clipped to [0, 1]."""
    return np.clip(np.where(mask.observed[idx], mask.values[idx], 0.0), 0.0, 1.0)


def _weights_at(mask: SkyMap | None, sky: SkyMap, pix: np.ndarray, cover: bool = False):
    """Weights at the map's RING pixels ``pix`` (:func:`mask_weights` there, float64); with
    ``cover``, also the regraded fraction of the mask's pixels that have a value."""
    obs = sky.observed[pix]
    if mask is None:
        w = obs.astype(np.float64)
        return (w, np.ones(pix.size)) if cover else w
    src = _source_pixels(mask.nside, sky.nside, pix)
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
    for a in range(0, mask.npix, CHUNK):
        mv = np.where(mask.observed[a:a + CHUNK], mask.values[a:a + CHUNK], 0.0)
        lo, hi = min(lo, float(mv.min())), max(hi, float(mv.max()))
    if lo < -1e-6 or hi > 1.0 + 1e-6:
        raise InputError(f"mask weights must lie in [0, 1] (found {lo:.3g} .. {hi:.3g})", mask.source)
    uncovered = kept = kept_unobserved = positive = 0
    for pix in _blocks(sky.npix, max(1, CHUNK // max(1, (mask.nside // sky.nside) ** 2))):
        src = _source_pixels(mask.nside, sky.nside, pix)
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
    size = CHUNK if mask is None else max(1, CHUNK // max(1, (mask.nside // sky.nside) ** 2))
    for pix in _blocks(sky.npix, size):
        w[pix[0]:pix[-1] + 1] = _weights_at(mask, sky, pix)
    return w


def _design(nside: int, pix: np.ndarray) -> np.ndarray:
    """Rows 1, x, y, z (shape (4, len(pix))) of the unit vectors of RING pixels ``pix``."""
    import healpy as hp

    d = np.empty((4, pix.size))
    d[0] = 1.0
    d[1], d[2], d[3] = hp.pix2vec(nside, pix)
    return d


def _fit_normal(values: np.ndarray, weight_blocks) -> np.ndarray:
    """Weighted least squares of a0 + d . n from normal equations summed over blocks
    (pix, w) of RING pixels and their weights (pixels with w > 0 enter)."""
    import healpy as hp

    nside = hp.npix2nside(values.size)
    ata = np.zeros((4, 4))
    atb = np.zeros(4)
    for pix, w in weight_blocks:
        sel = w > 0
        if not sel.any():
            continue
        p = pix[sel]
        d = _design(nside, p)
        dw = d * w[sel]
        ata += dw @ d.T
        atb += dw @ values[p].astype(np.float64)
    # lstsq of the 4x4 system: the minimum-norm solution when it is singular (a tiny patch of sky)
    coef, *_ = np.linalg.lstsq(ata, atb, rcond=None)
    return coef


def fit_monopole_dipole(values: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Weighted least-squares coefficients (a0, dx, dy, dz) of a0 + d . n over w > 0 (RING), from
    the normal equations accumulated over blocks of pixels (pix2vec block by block)."""
    w = np.asarray(weights)
    return _fit_normal(values, ((pix, w[pix[0]:pix[-1] + 1].astype(np.float64)) for pix in _blocks(values.size)))


def _minus_dipole(values: np.ndarray, coef: np.ndarray, pix: np.ndarray) -> np.ndarray:
    """values[pix] - (a0 + d . n) in float64."""
    import healpy as hp

    v = values[pix[0]:pix[-1] + 1].astype(np.float64)
    if not np.any(coef):
        return v
    nside = hp.npix2nside(values.size)
    x, y, z = hp.pix2vec(nside, pix)
    return v - coef[0] - (coef[1] * x + coef[2] * y + coef[3] * z)


def remove_monopole_dipole(values: np.ndarray, weights: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Map minus its weighted best-fit monopole and dipole; returns (map (float64), (a0, dx, dy, dz))."""
    coef = fit_monopole_dipole(values, weights)
    out = np.empty(values.size)
    for pix in _blocks(values.size):
        out[pix[0]:pix[-1] + 1] = _minus_dipole(values, coef, pix)
    return out, coef


def filter_weights(lmax: int, fwhm_rad: float = 0.0, l_range: tuple | None = None,
                   l_weights: np.ndarray | None = None) -> np.ndarray:
    """f_l, l = 0..lmax: Gaussian beam b_l = exp(-l(l+1) sigma^2 / 2), sigma = FWHM/sqrt(8 ln 2)
    (healpy.gauss_beam), times an l-range window and user weights (zero beyond their length)."""
    import healpy as hp

    f = hp.gauss_beam(fwhm_rad, lmax=lmax) if fwhm_rad > 0 else np.ones(lmax + 1)
    if l_range is not None:
        lo, hi = l_range
        ell = np.arange(lmax + 1)
        f = f * ((ell >= lo) & (ell <= hi))
    if l_weights is not None:
        u = np.zeros(lmax + 1)
        lw = np.asarray(l_weights, dtype=float).ravel()[: lmax + 1]
        u[: lw.size] = lw
        f = f * u
    return f


@dataclass
class PreparedMap:
    """A map ready for circle sampling: alm of the weighted, monopole/dipole-free input, and
    working maps synthesised on demand for any smoothing (cached by FWHM).

    ``mask`` is the boolean working mask (True = kept) on N_side ``nside``.
    """

    alm: np.ndarray
    lmax: int
    nside: int
    mask: np.ndarray
    fwhm_rad: float
    l_range: tuple | None
    l_weights: np.ndarray | None
    monopole_dipole: np.ndarray
    kept_fraction: float
    oversample: int = 2
    _cache: dict = field(default_factory=dict, repr=False)

    @property
    def nside_sample(self) -> int:
        """N_side of the maps that circles are interpolated on: ``oversample`` * N_side_work.
        The same band-limited map synthesised on a finer grid cuts the bilinear interpolation
        error by ~oversample^2 at no cost in l_max (tests/test_search_sampling.py)."""
        return self.nside * self.oversample

    @property
    def sample_mask(self) -> np.ndarray:
        """The working mask upgraded (copied) to :attr:`nside_sample`."""
        return self.level_mask(0.0)

    def level_mask(self, fwhm_rad: float, leak: float = 0.5) -> np.ndarray:
        """Kept pixels (N_side :attr:`nside_sample`) of a map smoothed to ``fwhm_rad``: the working
        mask minus the pixels where more than ``leak`` of the beam falls on masked sky (there the
        zero-filled sky leaks in): kept where the mask smoothed with the same beam is >= 1 - leak."""
        import healpy as hp

        key = ("mask", round(float(fwhm_rad), 12))
        if key not in self._cache:
            base = regrade_weights(self.mask.astype(np.float64), self.nside_sample) > 0.5
            if fwhm_rad > 0 and not base.all():
                sm = hp.smoothing(base.astype(np.float64), fwhm=fwhm_rad, lmax=min(self.lmax, 3 * self.nside_sample - 1))
                base = base & (sm >= 1.0 - leak)
            self._cache[key] = base
        return self._cache[key]

    @property
    def lmax_supported(self) -> int:
        return self.lmax

    def working_map(self, fwhm_rad: float | None = None) -> np.ndarray:
        """The filtered map (RING, N_side :attr:`nside_sample`), smoothed to ``fwhm_rad`` (default:
        the prepared FWHM); the l-range and user weights always apply. l <= l_max of the
        working N_side whatever the sampling grid."""
        import healpy as hp

        fw = self.fwhm_rad if fwhm_rad is None else float(fwhm_rad)
        key = round(fw, 12)
        if key not in self._cache:
            f = filter_weights(self.lmax, fw, self.l_range, self.l_weights)
            self._cache[key] = hp.alm2map(hp.almxfl(self.alm, f), self.nside_sample, lmax=self.lmax)
        return self._cache[key]


def _weight_blocks(mask: SkyMap | None, sky: SkyMap):
    """(pix, w) over the map in blocks: RING pixel indices and their weights (float64)."""
    size = CHUNK if mask is None else max(1, CHUNK // max(1, (mask.nside // sky.nside) ** 2))
    for pix in _blocks(sky.npix, size):
        yield pix, _weights_at(mask, sky, pix)


def _working_mask(mask: SkyMap | None, sky: SkyMap, nside_work: int, threshold: float) -> np.ndarray:
    """Working pixels (N_side ``nside_work``) whose every input pixel has weight >= ``threshold``."""
    npix = 12 * nside_work * nside_work
    out = np.empty(npix, dtype=bool)
    per = max(1, (sky.nside // nside_work) ** 2)
    for pix in _blocks(npix, max(1, CHUNK // per)):
        src = _source_pixels(sky.nside, nside_work, pix)
        w = _weights_at(mask, sky, src.ravel()).reshape(src.shape)
        out[pix[0]:pix[-1] + 1] = np.all(w >= threshold, axis=1)
    return out


def _weighted_map(sky: SkyMap, mask: SkyMap | None, coef: np.ndarray, out: np.ndarray, sign: float = 1.0) -> None:
    """out <- (map - a0 - d . n) * w + sign * out, block by block (float64 arithmetic, stored in
    out's precision): the harmonic transform's input (out zero-filled) or the residual of an
    iteration (sign -1: input minus the map synthesised from the current alm)."""
    for pix, w in _weight_blocks(mask, sky):
        s = slice(pix[0], pix[-1] + 1)
        x = _minus_dipole(sky.values, coef, pix) * w
        out[s] = x - out[s] if sign < 0 else x


def _weighted_alm(sky: SkyMap, mask: SkyMap | None, coef: np.ndarray, lmax: int, iterations: int) -> np.ndarray:
    """alm of (map - monopole - dipole) * w up to ``lmax``, with ``iterations`` Jacobi steps, as
    ``healpy.map2alm(x, lmax, iter=iterations)`` (alm += map2alm(x - alm2map(alm))). The input
    is never held twice: it is built block by block in the map's precision (float32 for a float32
    map and mask: what the file holds) and rebuilt for each residual instead of kept beside it;
    healpy copies its input to float64 inside map2alm."""
    import healpy as hp

    dtype = np.float32 if sky.values.dtype == np.float32 and (mask is None or mask.values.dtype == np.float32) \
        else np.float64
    x = np.empty(sky.npix, dtype=dtype)
    _weighted_map(sky, mask, coef, x)
    alm = hp.map2alm(x, lmax=lmax, iter=0)
    del x
    for _ in range(int(iterations)):
        r = hp.alm2map(alm, sky.nside, lmax=lmax)  # float64
        _weighted_map(sky, mask, coef, r, sign=-1.0)
        if dtype == np.float32:  # the residual in the input's precision: map2alm copies to float64 anyway
            r32 = np.empty(sky.npix, dtype=np.float32)
            for a in range(0, sky.npix, CHUNK):
                r32[a:a + CHUNK] = r[a:a + CHUNK]
            del r
            r = r32
        alm = alm + hp.map2alm(r, lmax=lmax, iter=0)
        del r
    return alm


def prepare_map(sky: SkyMap, mask: SkyMap | None = None, *, nside_work: int = 128, fwhm_deg: float = 1.0,
                l_range: tuple | None = None, l_weights=None, mask_threshold: float = 0.5,
                remove_dipole: bool = True, iterations: int = 1, oversample: int = 2,
                nside_from: str = "[search] nside_work / --nside-work") -> PreparedMap:
    """Steps 1-4 of the module docstring; returns a :class:`PreparedMap`. A map coarser than
    ``nside_work`` is refused (:func:`check_resolution`; ``nside_from`` names the setting).

    Memory: besides the map and mask, one full-resolution array in the map's precision and the
    float64 maps of the harmonic transforms; weights, the dipole fit (normal equations) and the
    working mask go block by block (benchmarks/large_map.py)."""
    if nside_work < 1 or (nside_work & (nside_work - 1)):
        raise InputError(f"must be a power of two, got {nside_work}", "--nside-work")
    if fwhm_deg < 0 or not np.isfinite(fwhm_deg):
        raise InputError(f"must be a non-negative number of degrees, got {fwhm_deg}", "--fwhm")
    check_resolution(sky, nside_work, nside_from)
    check_values(sky, "map")
    check_mask(mask, sky)
    if not any(np.any(w >= mask_threshold) for _, w in _weight_blocks(mask, sky)):
        raise InputError(f"no pixel has mask weight >= {mask_threshold} (all-masked map)", sky.source)
    if l_range is not None:
        lo, hi = (int(v) for v in l_range)
        if lo < 0 or hi < lo:
            raise InputError(f"l-range needs 0 <= l_min <= l_max, got {list(l_range)}", "[search] l_range")
        l_range = (lo, hi)
    coef = _fit_normal(sky.values, _weight_blocks(mask, sky)) if remove_dipole else np.zeros(4)
    # working mask: every input pixel inside a working pixel kept
    mask_work = _working_mask(mask, sky, int(nside_work), mask_threshold)
    if not mask_work.any():
        raise InputError("no working pixel is fully unmasked (all-masked map at this N_side)", sky.source)
    lmax = int(min(3 * sky.nside - 1, 3 * nside_work - 1))
    alm = _weighted_alm(sky, mask, coef, lmax, iterations)
    lw = None if l_weights is None else np.asarray(l_weights, dtype=float)
    return PreparedMap(alm, lmax, int(nside_work), mask_work, float(np.radians(fwhm_deg)), l_range, lw,
                       coef, float(mask_work.mean()), int(oversample))
