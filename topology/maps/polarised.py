"""Reading polarised HEALPix maps: the I, Q, U columns of one FITS table (:func:`read_iqu`).

Columns: ``columns`` = [I, Q, U] as indices or names (as ``field`` for temperature); without
it, the standard names are looked for (I_STOKES/Q_STOKES/U_STOKES of healpy.write_map,
TEMPERATURE/Q_POLARISATION/U_POLARISATION of the HEALPix Fortran tools, or I/Q/U), else the
first three columns are used with a note. A file with fewer than three columns is refused.

Q/U convention: the polarisation angle grows from the local meridian towards west in the HEALPix
("COSMO") convention and towards east in the IAU one, so U changes sign between them (HEALPix
primer, "Polarisation conventions"; FITS key POLCCONV = 'COSMO' or 'IAU', as in Planck maps).
It is never guessed: the header key POLCCONV, or ``convention`` ("healpix" or "iau") given by
the caller, must say it; when both do they must agree. Maps come back in the HEALPix convention
(an IAU file's U is negated, with a note).

The polarisation mask may differ from the temperature one: read it like any mask
(:func:`topology.maps.read.read_healpix` with ``what="mask"``) and give it to the E-mode step
(:mod:`topology.maps.emode`). Q and U share one observed set: a pixel unobserved in either is
unobserved in both.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from ..errors import InputError, note
from .read import ORDERING_FROM, read_healpix
from .values import SkyMap

CONVENTIONS = ("healpix", "iau")
#: FITS POLCCONV values -> convention
POLCCONV = {"COSMO": "healpix", "HEALPIX": "healpix", "IAU": "iau"}
#: standard column names of I, Q, U (upper case), in order of preference
STANDARD_NAMES = (("I_STOKES", "Q_STOKES", "U_STOKES"),
                  ("TEMPERATURE", "Q_POLARISATION", "U_POLARISATION"),
                  ("TEMPERATURE", "Q_POLARIZATION", "U_POLARIZATION"),
                  ("I", "Q", "U"))


@dataclass(frozen=True)
class PolarisedMap:
    """I, Q, U of one file (RING, microK as stored), Q/U in the HEALPix convention; Q and U share
    ``observed``. ``columns`` are the names read; ``convention`` is that of the file."""

    i: SkyMap
    q: SkyMap
    u: SkyMap
    columns: tuple
    convention: str

    @property
    def nside(self) -> int:
        return self.i.nside


def _table_columns(path) -> tuple[list, dict]:
    """(column names except PIXEL, header) of the first binary table; read_healpix has already
    checked the file, so failures here are not expected."""
    from astropy.io import fits

    with fits.open(path, memmap=False) as hdul:
        hdu = next(h for h in hdul if isinstance(h, fits.BinTableHDU))
        names = [n for n in hdu.columns.names if n.upper() != "PIXEL"]
        return names, dict(hdu.header)


def choose_columns(names: list, columns, where: str) -> list:
    """The three columns (names or indices) to read for I, Q, U (module docstring)."""
    listing = ", ".join(names) if names else "none"
    if columns is not None:
        if isinstance(columns, (str, bytes)) or not hasattr(columns, "__len__") or len(columns) != 3:
            raise InputError(f"columns must list three columns [I, Q, U] (indices or names), got {columns!r}", where)
        return list(columns)
    if len(names) < 3:
        raise InputError(f"has {len(names)} column(s) ({listing}); a polarised map needs I, Q and U columns", where)
    upper = [n.upper() for n in names]
    for trio in STANDARD_NAMES:
        if all(t in upper for t in trio):
            return [names[upper.index(t)] for t in trio]
    note(f"{where}: no standard I, Q, U column names; using the first three columns ({', '.join(names[:3])}) "
         f"as I, Q, U")
    return [0, 1, 2]


def resolve_convention(header: dict, convention, where: str, key: str = "convention") -> str:
    """The file's Q/U convention from its POLCCONV key and/or ``convention`` (module docstring)."""
    given = None
    if convention is not None:
        given = str(convention).strip().lower()
        if given not in CONVENTIONS:
            raise InputError(f"Q/U convention must be 'healpix' or 'iau', got {convention!r}", key)
    head = header.get("POLCCONV")
    from_head = None
    if head is not None:
        from_head = POLCCONV.get(str(head).strip().upper())
        if from_head is None:
            raise InputError(f"header POLCCONV = {head!r} is neither 'COSMO' (HEALPix) nor 'IAU'", where)
    if given is not None and from_head is not None and given != from_head:
        raise InputError(f"header says POLCCONV = {head!r} ({from_head}) but {key} = {given!r} was given", where)
    if given is None and from_head is None:
        raise InputError(f"header has no POLCCONV key: give the Q/U convention ('healpix' or 'iau') with {key}; "
                         f"it changes the sign of U and is never guessed", where)
    return given if given is not None else from_head


def read_iqu(path, *, columns=None, convention: str | None = None, ordering: str | None = None,
             ordering_from: str = ORDERING_FROM, convention_from: str = "convention") -> PolarisedMap:
    """Read I, Q, U of a HEALPix FITS table (module docstring); Q/U returned in the HEALPix
    convention. ``convention_from`` names where the user gives the convention (for errors)."""
    where = str(path)
    names, header = _checked_names(path, ordering, ordering_from)
    chosen = choose_columns(names, columns, where)
    chosen = [names[c] if isinstance(c, (int, np.integer)) and not isinstance(c, bool) and 0 <= c < len(names)
              else c for c in chosen]   # by name: read_healpix's note on the first column is not wanted here
    conv = resolve_convention(header, convention, where, convention_from)
    maps = [read_healpix(path, field=c, ordering=ordering, what="map", ordering_from=ordering_from) for c in chosen]
    i, q, u = maps
    if q.nside != i.nside or u.nside != i.nside:
        raise InputError("I, Q and U columns have different sizes", where)
    observed = q.observed & u.observed
    if conv == "iau":
        note(f"{where}: Q/U in the IAU convention; U negated to the HEALPix convention")
    q = dataclasses.replace(q, values=np.where(observed, q.values, 0).astype(q.values.dtype), observed=observed)
    u_vals = -u.values if conv == "iau" else u.values
    u = dataclasses.replace(u, values=np.where(observed, u_vals, 0).astype(u.values.dtype), observed=observed)
    return PolarisedMap(i, q, u, tuple(m.header.get("COLUMN") for m in maps), conv)


def _checked_names(path, ordering, ordering_from):
    """Column names and header of a file; a file astropy cannot open goes through read_healpix,
    whose checks say in one line what is wrong with it."""
    from pathlib import Path

    p = Path(path)
    if not p.is_file():
        raise InputError("map file not found", str(path))
    try:
        return _table_columns(p)
    except Exception as e:  # noqa: BLE001 - a damaged file: let read_healpix say what is wrong
        read_healpix(path, field=0, ordering=ordering, ordering_from=ordering_from)
        raise InputError(f"cannot read the map's columns ({type(e).__name__}: {e})", str(path)) from None
