"""HEALPix maps and masks: reading, validation and preparation for the circle search.

Reading (:func:`read_healpix`): a FITS binary table as written by HEALPix tools and healpy, full
sky or explicit partial sky (``INDXSCHM = 'EXPLICIT'`` with a ``PIXEL`` column). The pixel
ordering comes from the ``ORDERING`` header key (RING or NESTED); a file without it is an
error unless the caller passes ``ordering``. Every map is returned in RING order. UNSEEN
(-1.6375e30) and NaN pixels, and pixels missing from a partial-sky file, are unobserved.

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

Defaults: FWHM 1 deg (the matched circles of a Planck-like map carry most of their S/N at
l < 300), working N_side 128 (pixel 0.46 deg, two pixels per FWHM), no l-range cut.
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


@dataclass(frozen=True)
class SkyMap:
    """A HEALPix map in RING order; ``observed`` is False on UNSEEN/NaN/missing pixels.
    ``partial`` is True for an explicit partial-sky file (pixels outside it are unobserved)."""

    values: np.ndarray
    observed: np.ndarray
    nside: int
    source: str = ""
    header: dict = field(default_factory=dict)
    partial: bool = False

    @property
    def npix(self) -> int:
        return self.values.size


def _is_unseen(v: np.ndarray) -> np.ndarray:
    return ~np.isfinite(v) | (np.abs(v - UNSEEN) <= 1e-5 * abs(UNSEEN))


def _nside_of(npix: int, where: str) -> int:
    import healpy as hp

    if npix < 12 or not hp.isnpixok(npix):
        raise InputError(f"{npix} pixels is not a HEALPix map (12 N_side^2 pixels, N_side a power of two) and the "
                         f"file has no explicit pixel index (INDXSCHM = 'EXPLICIT' with a PIXEL column)", where)
    return int(hp.npix2nside(npix))


def check_values(sky: SkyMap, what: str = "map") -> None:
    """InputError when no pixel is observed (all UNSEEN/NaN), or, for a map (not a mask), when the
    observed pixels have zero variance (a constant map carries no circles)."""
    if not sky.observed.any():
        raise InputError(f"every pixel of the {what} is UNSEEN or NaN (all-masked {what}: nothing observed)",
                         sky.source)
    if what == "map":
        v = sky.values[sky.observed]
        if np.ptp(v) <= 1e-12 * np.max(np.abs(v)):
            raise InputError(f"the map is constant ({v[0]:.6g} on all {v.size} observed pixels: zero variance)",
                             sky.source)


def as_skymap(values, *, nest: bool = False, source: str = "array") -> SkyMap:
    """A :class:`SkyMap` from an in-memory full-sky array (``nest`` gives its ordering; any
    byte order and float precision, converted to native float64)."""
    import healpy as hp

    v = np.asarray(values, dtype=np.float64).ravel()
    nside = _nside_of(v.size, source)
    if nest:
        v = hp.reorder(v, n2r=True)
    observed = ~_is_unseen(v)
    v = np.where(observed, v, 0.0)
    return SkyMap(v, observed, nside, source)


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


def read_healpix(path: str | Path, *, field: int | str | None = None, ordering: str | None = None,
                 what: str = "map", ordering_from: str = ORDERING_FROM) -> SkyMap:
    """Read one column of the first binary table of a HEALPix FITS file (RING order out).

    ``field``: column index or name; None or 0 is the first (temperature) column, and a note says
    which column was used when there are several. ``ordering`` ("RING"/"NESTED") is used when the
    header has no ORDERING key; when both are present they must agree; ``ordering_from`` names
    where the user gives it (e.g. ``"--ordering"``), for the error messages. Plain or gzipped
    FITS; any numeric column type (FITS data are big-endian; converted to native float64).
    A map (not a mask) that is all UNSEEN/NaN or constant is refused (:func:`check_values`).
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
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            with fits.open(p if unpacked is None else io.BytesIO(unpacked), memmap=False) as hdul:
                table = next((h for h in hdul if isinstance(h, fits.BinTableHDU)), None)
                if table is None:
                    _raise_damaged(caught, what, where, failed=True)
                    raise InputError(f"not a HEALPix {what}: no binary table extension", where)
                header = dict(table.header)
                names = list(table.columns.names)
                data = table.data
                _raise_damaged(caught, what, where)
                indx = str(header.get("INDXSCHM", "IMPLICIT")).strip().upper()
                if indx not in ("IMPLICIT", "EXPLICIT"):
                    raise InputError(f"header INDXSCHM = {indx!r} is neither IMPLICIT nor EXPLICIT", where)
                pix_name = next((n for n in names if n.upper() == "PIXEL"), None)
                if indx == "EXPLICIT":
                    if pix_name is None:
                        raise InputError(f"partial-sky {what} (INDXSCHM = 'EXPLICIT') without a PIXEL column", where)
                    cols = [n for n in names if n != pix_name]
                    pixels = np.asarray(data[pix_name], dtype=np.int64).ravel()
                else:
                    cols = names
                    pixels = None
                col_name = _select_column(cols, field, what, where)
                column = np.asarray(data[col_name], dtype=np.float64).ravel()
                _raise_damaged(caught, what, where)
        except InputError:
            raise
        except VerifyError as e:
            raise InputError(f"damaged FITS header ({' '.join(str(e).split())})", where) from None
        except (OSError, EOFError, ValueError, TypeError, KeyError, IndexError) as e:
            _raise_damaged(caught, what, where, failed=True)
            raise InputError(f"cannot read {what} as FITS ({type(e).__name__}: {e})", where) from None
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
        full = np.full(npix, UNSEEN)
        if order == "NESTED":
            pixels = hp.nest2ring(nside, pixels)
        full[pixels] = column
        column = full
    else:
        nside = _nside_of(column.size, where)
        if "NSIDE" in header and int(header["NSIDE"]) != nside:
            raise InputError(f"header NSIDE = {header['NSIDE']} but the table holds {column.size} pixels", where)
        if order == "NESTED":
            column = hp.reorder(column, n2r=True)
    observed = ~_is_unseen(column)
    values = np.where(observed, column, 0.0)
    keep = {k: header[k] for k in ("ORDERING", "NSIDE", "COORDSYS", "TUNIT1", "TTYPE1") if k in header}
    keep["COLUMN"] = col_name
    sky = SkyMap(values, observed, nside, where, keep, partial=pixels is not None)
    check_values(sky, what)
    if len(cols) > 1 and (field is None or (isinstance(field, (int, np.integer)) and int(field) == 0)):
        note(f"{where} has {len(cols)} columns ({', '.join(cols)}); using the first, {col_name}")
    if pixels is not None:
        note(f"{where} is partial-sky: {100 * observed.mean():.1f}% of the sky observed, the rest masked")
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
        return float(np.mean(np.where(mask.observed, mask.values, 0.0) >= threshold))
    return float(np.mean(mask_weights(mask, sky) >= threshold))


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
        raise InputError(f"{what} {100 * kept:.1f}% of the sky, less than the minimum sky fraction "
                         f"{float(min_fraction):g} ({setting})", who)
    return kept


def regrade_weights(weights: np.ndarray, nside_out: int) -> np.ndarray:
    """Mask weights (RING) to another N_side: the mean of sub-pixels when degrading, a copy
    when upgrading (``healpy.ud_grade``)."""
    import healpy as hp

    w = np.asarray(weights, dtype=np.float64)
    nside_in = hp.npix2nside(w.size)
    if nside_in == nside_out:
        return w.copy()
    return hp.ud_grade(w, nside_out, order_in="RING", order_out="RING")


def mask_weights(mask: SkyMap | None, sky: SkyMap) -> np.ndarray:
    """Weights in [0, 1] on the map's pixels: the mask regraded, times "observed".

    Raises InputError when the mask does not cover the map's observed pixels, when it keeps
    mostly sky that a full-sky map does not have (different coverage), or when nothing is left.
    A partial-sky map (explicit pixel index) is expected to miss most of the mask's sky. A mask
    of another N_side is regraded, with a note.
    """
    observed = sky.observed.astype(np.float64)
    if mask is None:
        w = observed
    else:
        if mask.nside != sky.nside:
            note(f"mask {mask.source} has N_side {mask.nside}, the map {sky.nside}: the mask is regraded to "
                 f"N_side {sky.nside}")
        mv = np.where(mask.observed, mask.values, 0.0)
        if np.any(mv < -1e-6) or np.any(mv > 1.0 + 1e-6):
            raise InputError(f"mask weights must lie in [0, 1] (found {mv.min():.3g} .. {mv.max():.3g})", mask.source)
        mv = np.clip(mv, 0.0, 1.0)
        cover = regrade_weights(mask.observed.astype(np.float64), sky.nside)
        mw = regrade_weights(mv, sky.nside)
        if np.any(sky.observed & (cover < 0.5)):
            frac = float(np.mean(sky.observed & (cover < 0.5)) / max(np.mean(sky.observed), 1e-300))
            raise InputError(f"map and mask have different sky coverage: the mask has no value on "
                             f"{100 * frac:.1f}% of the map's observed pixels", mask.source)
        kept = mw > 0
        if not sky.partial and kept.any() and np.mean(~sky.observed[kept]) > 0.5:
            raise InputError("map and mask have different sky coverage: most pixels the mask keeps are "
                             "unobserved in the map", mask.source)
        w = mw * observed
    if not np.any(w > 0):
        what = sky.source if mask is None else f"{sky.source} with mask {mask.source}"
        raise InputError("no unmasked pixel left (all-masked map)", what)
    return w


def fit_monopole_dipole(values: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Weighted least-squares coefficients (a0, dx, dy, dz) of a0 + d . n over w > 0 (RING)."""
    import healpy as hp

    nside = hp.npix2nside(values.size)
    sel = np.flatnonzero(weights > 0)
    n = np.array(hp.pix2vec(nside, sel))  # (3, k)
    design = np.vstack([np.ones(sel.size), n]).T  # (k, 4)
    sw = np.sqrt(weights[sel])
    coef, *_ = np.linalg.lstsq(design * sw[:, None], values[sel] * sw, rcond=None)
    return coef


def remove_monopole_dipole(values: np.ndarray, weights: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Map minus its weighted best-fit monopole and dipole; returns (map, (a0, dx, dy, dz))."""
    import healpy as hp

    coef = fit_monopole_dipole(values, weights)
    nside = hp.npix2nside(values.size)
    n = np.array(hp.pix2vec(nside, np.arange(values.size)))
    return values - coef[0] - coef[1:] @ n, coef


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


def prepare_map(sky: SkyMap, mask: SkyMap | None = None, *, nside_work: int = 128, fwhm_deg: float = 1.0,
                l_range: tuple | None = None, l_weights=None, mask_threshold: float = 0.5,
                remove_dipole: bool = True, iterations: int = 1, oversample: int = 2) -> PreparedMap:
    """Steps 1-4 of the module docstring; returns a :class:`PreparedMap`."""
    import healpy as hp

    if nside_work < 1 or (nside_work & (nside_work - 1)):
        raise InputError(f"must be a power of two, got {nside_work}", "--nside-work")
    if fwhm_deg < 0 or not np.isfinite(fwhm_deg):
        raise InputError(f"must be a non-negative number of degrees, got {fwhm_deg}", "--fwhm")
    check_values(sky, "map")
    w = mask_weights(mask, sky)
    kept_in = w >= mask_threshold
    if not kept_in.any():
        raise InputError(f"no pixel has mask weight >= {mask_threshold} (all-masked map)", sky.source)
    values = sky.values
    coef = np.zeros(4)
    if remove_dipole:
        values, coef = remove_monopole_dipole(values, w)
    lmax = int(min(3 * sky.nside - 1, 3 * nside_work - 1))
    if l_range is not None:
        lo, hi = (int(v) for v in l_range)
        if lo < 0 or hi < lo:
            raise InputError(f"l-range needs 0 <= l_min <= l_max, got {list(l_range)}", "[search] l_range")
        l_range = (lo, hi)
    alm = hp.map2alm(values * w, lmax=lmax, iter=iterations)
    # working mask: every input pixel inside a working pixel kept
    frac = regrade_weights(kept_in.astype(np.float64), nside_work)  # mean, or copy on upgrade
    mask_work = frac >= 1.0 - 1e-9
    if not mask_work.any():
        raise InputError("no working pixel is fully unmasked (all-masked map at this N_side)", sky.source)
    lw = None if l_weights is None else np.asarray(l_weights, dtype=float)
    return PreparedMap(alm, lmax, int(nside_work), mask_work, float(np.radians(fwhm_deg)), l_range, lw,
                       coef, float(mask_work.mean()), int(oversample))
