"""Reading HEALPix maps and masks from FITS files (:func:`read_healpix`), in bounded memory.

A FITS binary table as written by HEALPix tools and healpy, full sky or explicit partial sky
(``INDXSCHM = 'EXPLICIT'`` with a ``PIXEL`` column). The pixel ordering comes from the
``ORDERING`` header key (RING or NESTED); a file without it is an error unless the caller passes
``ordering``. Every map is returned in RING order, in the file's precision (float32 stays
float32), read in blocks of rows. Pixels missing from a partial-sky file are unobserved, and so
are pixels without a usable value (:mod:`topology.maps.values`). Plain or gzipped files; an
empty, non-FITS, gzip-corrupt, truncated or damaged file is one InputError naming the file.
"""

from __future__ import annotations

import io
import re
from pathlib import Path

import numpy as np

from ..errors import InputError, note
from .pixels import nest_to_ring, nside_of
from .values import SkyMap, build_skymap, check_values, note_bad, value_dtype

ORDERINGS = ("RING", "NESTED")
ORDERING_FROM = "ordering (a key of [[maps]] or [mask] in a run config, --ordering for topology search)"
READ_BYTES = 8 << 20  # rows read per block: about this many bytes


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
    step = max(1, READ_BYTES // max(width, 1))
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
    with a note (:func:`~topology.maps.values.mask_bad_values`). A map (not a mask) that is all
    unobserved or constant is refused (:func:`~topology.maps.values.check_values`).
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
                            kind = np.int64 if n == pix_name else value_dtype(row.fields[n][0].base)
                            got[n] = _read_raw(src, start, row, width, rows, n, kind)
                    finally:
                        if unpacked is None:
                            src.close()
                else:
                    data = table.data
                    for n in wanted:
                        a = np.asarray(data[n]).ravel()
                        kind = np.int64 if n == pix_name else value_dtype(a.dtype)
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
        nside = nside_of(column.size, where)
        if "NSIDE" in header and int(header["NSIDE"]) != nside:
            raise InputError(f"header NSIDE = {header['NSIDE']} but the table holds {column.size} pixels", where)
        values = nest_to_ring(column) if order == "NESTED" else column
        del column
        observed = np.ones(values.size, dtype=bool)
    keep = {k: header[k] for k in ("ORDERING", "NSIDE", "COORDSYS", "TUNIT1", "TTYPE1") if k in header}
    keep["COLUMN"] = col_name
    sky = build_skymap(values, observed, nside, where, what, keep, partial=pixels is not None)
    check_values(sky, what)
    if len(cols) > 1 and (field is None or (isinstance(field, (int, np.integer)) and int(field) == 0)):
        note(f"{where} has {len(cols)} columns ({', '.join(cols)}); using the first, {col_name}")
    if pixels is not None:
        note(f"{where} is partial-sky: {100 * np.count_nonzero(observed) / observed.size:.1f}% of the sky observed, "
             f"the rest masked")
    note_bad(sky)
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
