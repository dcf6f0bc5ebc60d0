"""Preparation of a map for the circle search (:func:`prepare_map`): the working map and mask.

In this order (common practice for matched-circle searches, e.g. Cornish, Spergel & Starkman 2004):

1. weights w = mask weight (0/1 or apodised, regraded to the map's N_side) times "observed"
   (:mod:`topology.maps.masks`);
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

from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError
from . import pixels
from .masks import check_mask, regrade_weights, weight_blocks, weights_at
from .pixels import block_size, blocks, source_pixels
from .values import SkyMap, check_values


def check_resolution(sky: SkyMap, nside_work: int, setting: str = "[search] nside_work / --nside-work") -> None:
    """InputError when the map is coarser than the working N_side: an upsampled map has no
    information on the working grid's scales (search at or below the map's resolution; common
    practice). ``setting`` names where the working N_side is given."""
    if int(nside_work) > int(sky.nside):
        raise InputError(f"the map has N_side {sky.nside}, coarser than the working N_side {int(nside_work)} "
                         f"({setting}); give a working N_side <= {sky.nside} or a finer map", sky.source)


def _design(nside: int, pix: np.ndarray) -> np.ndarray:
    """Rows 1, x, y, z (shape (4, len(pix))) of the unit vectors of RING pixels ``pix``."""
    import healpy as hp

    d = np.empty((4, pix.size))
    d[0] = 1.0
    d[1], d[2], d[3] = hp.pix2vec(nside, pix)
    return d


def fit_normal_equations(values: np.ndarray, pixel_weights) -> np.ndarray:
    """Weighted least-squares coefficients (a0, dx, dy, dz) of a0 + d . n from normal equations
    summed over ``pixel_weights``: blocks (pix, w) of RING pixels and their weights (pixels with
    w > 0 enter), e.g. :func:`topology.maps.masks.weight_blocks`."""
    import healpy as hp

    nside = hp.npix2nside(values.size)
    ata = np.zeros((4, 4))
    atb = np.zeros(4)
    for pix, w in pixel_weights:
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
    pixel_weights = ((pix, w[pix[0]:pix[-1] + 1].astype(np.float64)) for pix in blocks(values.size))
    return fit_normal_equations(values, pixel_weights)


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
    for pix in blocks(values.size):
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


def working_mask(mask: SkyMap | None, sky: SkyMap, nside_work: int, threshold: float) -> np.ndarray:
    """Working pixels (N_side ``nside_work``) whose every input pixel has weight >= ``threshold``
    (step 4 of the module docstring)."""
    npix = 12 * nside_work * nside_work
    out = np.empty(npix, dtype=bool)
    for pix in blocks(npix, block_size((sky.nside // nside_work) ** 2)):
        src = source_pixels(sky.nside, nside_work, pix)
        w = weights_at(mask, sky, src.ravel()).reshape(src.shape)
        out[pix[0]:pix[-1] + 1] = np.all(w >= threshold, axis=1)
    return out


def _weighted_map(sky: SkyMap, mask: SkyMap | None, coef: np.ndarray, out: np.ndarray, sign: float = 1.0) -> None:
    """out <- (map - a0 - d . n) * w + sign * out, block by block (float64 arithmetic, stored in
    out's precision): the harmonic transform's input (out zero-filled) or the residual of an
    iteration (sign -1: input minus the map synthesised from the current alm)."""
    for pix, w in weight_blocks(mask, sky):
        s = slice(pix[0], pix[-1] + 1)
        x = _minus_dipole(sky.values, coef, pix) * w
        out[s] = x - out[s] if sign < 0 else x


def weighted_alm(sky: SkyMap, mask: SkyMap | None, coef: np.ndarray, lmax: int, iterations: int) -> np.ndarray:
    """alm of (map - monopole - dipole) * w up to ``lmax``, with ``iterations`` Jacobi steps, as
    ``healpy.map2alm(x, lmax, iter=iterations)`` (alm += map2alm(x - alm2map(alm))). The input
    is never held twice: it is built block by block in the map's precision (float32 for a float32
    map and mask: what the file holds) and rebuilt for each residual instead of kept beside it;
    healpy copies its input to float64 inside map2alm. ``coef`` is (a0, dx, dy, dz) of the
    monopole and dipole to remove (zeros: none)."""
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
            chunk = pixels.CHUNK
            for a in range(0, sky.npix, chunk):
                r32[a:a + chunk] = r[a:a + chunk]
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
    if not any(np.any(w >= mask_threshold) for _, w in weight_blocks(mask, sky)):
        raise InputError(f"no pixel has mask weight >= {mask_threshold} (all-masked map)", sky.source)
    if l_range is not None:
        lo, hi = (int(v) for v in l_range)
        if lo < 0 or hi < lo:
            raise InputError(f"l-range needs 0 <= l_min <= l_max, got {list(l_range)}", "[search] l_range")
        l_range = (lo, hi)
    coef = fit_normal_equations(sky.values, weight_blocks(mask, sky)) if remove_dipole else np.zeros(4)
    # working mask: every input pixel inside a working pixel kept
    mask_work = working_mask(mask, sky, int(nside_work), mask_threshold)
    if not mask_work.any():
        raise InputError("no working pixel is fully unmasked (all-masked map at this N_side)", sky.source)
    lmax = int(min(3 * sky.nside - 1, 3 * nside_work - 1))
    alm = weighted_alm(sky, mask, coef, lmax, iterations)
    lw = None if l_weights is None else np.asarray(l_weights, dtype=float)
    return PreparedMap(alm, lmax, int(nside_work), mask_work, float(np.radians(fwhm_deg)), l_range, lw,
                       coef, float(mask_work.mean()), int(oversample))
