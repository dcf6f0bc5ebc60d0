"""HEALPix map and mask reading and preparation (topology.maps)."""

import healpy as hp
import numpy as np
import pytest
from astropy.io import fits

from topology.errors import InputError
from topology.maps import UNSEEN, as_skymap, fit_monopole_dipole, mask_weights, prepare_map, read_healpix


def _map(nside=16, seed=0):
    return np.random.default_rng(seed).standard_normal(hp.nside2npix(nside))


def test_ring_and_nested_files_read_to_the_same_ring_map(tmp_path):
    m = _map()
    hp.write_map(tmp_path / "r.fits", m, nest=False, dtype=np.float64)
    hp.write_map(tmp_path / "n.fits", hp.reorder(m, r2n=True), nest=True, dtype=np.float64)
    a = read_healpix(tmp_path / "r.fits")
    b = read_healpix(tmp_path / "n.fits")
    assert a.nside == 16 and np.array_equal(a.values, m) and np.array_equal(b.values, m)
    # check: healpy.read_map reorders NESTED files the same way
    assert np.array_equal(hp.read_map(tmp_path / "n.fits", dtype=np.float64), b.values)


def _write_without_ordering(path, m):
    col = fits.Column(name="TEMPERATURE", format="D", array=m)
    hdu = fits.BinTableHDU.from_columns([col])
    hdu.header["PIXTYPE"] = "HEALPIX"
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(path)


def test_gzipped_file_reads_like_the_plain_one_and_is_decompressed_once(tmp_path, monkeypatch):
    # a .fits.gz map gives the same RING map as the plain file; the stream is decompressed once
    # (the integrity check already reads it whole, and the FITS reader gets those bytes)
    import gzip
    import shutil

    m = np.random.default_rng(4).standard_normal(hp.nside2npix(8))
    plain = tmp_path / "m.fits"
    hp.write_map(plain, m, nest=True, dtype=np.float64)
    packed = tmp_path / "m.fits.gz"
    with open(plain, "rb") as src, gzip.open(packed, "wb") as dst:
        shutil.copyfileobj(src, dst)
    streams = []
    real_init = gzip.GzipFile.__init__

    def counting_init(self, *args, **kwargs):
        if "r" in str(kwargs.get("mode", args[1] if len(args) > 1 else "rb")):
            streams.append(1)
        real_init(self, *args, **kwargs)

    monkeypatch.setattr(gzip.GzipFile, "__init__", counting_init)
    a = read_healpix(plain)
    b = read_healpix(packed)
    assert len(streams) == 1
    assert np.array_equal(a.values, b.values) and np.array_equal(b.values, hp.reorder(m, n2r=True))


def test_missing_ordering_is_an_error_unless_given(tmp_path):
    m = _map()
    _write_without_ordering(tmp_path / "x.fits", m)
    with pytest.raises(InputError, match="ORDERING"):
        read_healpix(tmp_path / "x.fits")
    got = read_healpix(tmp_path / "x.fits", ordering="NESTED")
    assert np.array_equal(got.values, hp.reorder(m, n2r=True))
    hp.write_map(tmp_path / "r.fits", m)
    with pytest.raises(InputError, match="ORDERING = RING but NESTED"):
        read_healpix(tmp_path / "r.fits", ordering="NESTED")


def test_unseen_and_nan_are_unobserved(tmp_path):
    m = _map()
    m[[3, 10]] = UNSEEN
    m[20] = np.nan
    hp.write_map(tmp_path / "u.fits", m, dtype=np.float64)
    s = read_healpix(tmp_path / "u.fits")
    assert set(np.flatnonzero(~s.observed)) == {3, 10, 20}
    assert np.all(np.isfinite(s.values))


def test_partial_sky_file(tmp_path):
    m = _map()
    m[: m.size // 2] = UNSEEN
    hp.write_map(tmp_path / "p.fits", m, partial=True, dtype=np.float64)
    s = read_healpix(tmp_path / "p.fits")
    assert s.observed.sum() == m.size // 2 and np.allclose(s.values[m.size // 2:], m[m.size // 2:])


@pytest.mark.parametrize("content", [b"not a fits file at all", b""])
def test_unreadable_files(tmp_path, content):
    p = tmp_path / "bad.fits"
    p.write_bytes(content)
    with pytest.raises(InputError) as e:
        read_healpix(p)
    assert "bad.fits" in str(e.value) and "\n" not in str(e.value)
    with pytest.raises(InputError, match="not found"):
        read_healpix(tmp_path / "missing.fits")


def test_wrong_pixel_count(tmp_path):
    col = fits.Column(name="T", format="D", array=np.zeros(100))
    hdu = fits.BinTableHDU.from_columns([col])
    hdu.header["ORDERING"] = "RING"
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(tmp_path / "w.fits")
    with pytest.raises(InputError, match="not a HEALPix map"):
        read_healpix(tmp_path / "w.fits")


def test_mask_regrade_coverage_and_all_masked():
    sky = as_skymap(_map(16))
    fine = as_skymap(np.ones(hp.nside2npix(32)))
    assert np.allclose(mask_weights(fine, sky), 1.0)  # any N_side: regraded
    half = sky.values.copy()
    half[: half.size // 2] = UNSEEN
    part = as_skymap(half)
    cover = np.full(sky.npix, UNSEEN)
    cover[sky.npix // 2:] = 1.0
    with pytest.raises(InputError, match="different sky coverage"):
        mask_weights(as_skymap(cover), sky)  # the mask has no value where the map has data
    ones = np.ones(sky.npix)
    ones[sky.npix // 2:] = 0.0
    with pytest.raises(InputError, match="different sky coverage"):
        mask_weights(as_skymap(ones), part)  # it keeps only sky the map does not have
    with pytest.raises(InputError, match="all-masked"):
        mask_weights(as_skymap(np.zeros(sky.npix)), sky)
    with pytest.raises(InputError, match="all-masked"):
        prepare_map(as_skymap(np.full(sky.npix, UNSEEN)), nside_work=16)


def test_monopole_dipole_fit_matches_healpy_remove_dipole():
    # check: healpy.remove_dipole(fitval=True) on the kept pixels (binary mask; common practice)
    nside = 16
    m = _map(nside, 3) + 5.0 + np.array(hp.pix2vec(nside, np.arange(hp.nside2npix(nside)))).T @ [1.0, -2.0, 0.5]
    w = np.ones(m.size)
    theta, _ = hp.pix2ang(nside, np.arange(m.size))
    w[np.abs(np.pi / 2 - theta) < np.radians(20)] = 0
    ours = fit_monopole_dipole(m, w)
    masked = np.where(w > 0, m, UNSEEN)
    _, mono, dip = hp.remove_dipole(masked, fitval=True)
    assert ours[0] == pytest.approx(mono, rel=1e-6)
    assert np.allclose(ours[1:], dip, rtol=1e-6)


def test_filtering_l_range_and_beam():
    # check: healpy.anafast of the prepared map: zero power outside the l-range, beam^2 inside
    nside = 32
    sky = as_skymap(_map(nside, 4))
    pm = prepare_map(sky, nside_work=16, fwhm_deg=5.0, l_range=(4, 30), remove_dipole=False, iterations=3)
    pm.oversample = 1
    out = pm.working_map()
    cl_out = hp.anafast(out, lmax=pm.lmax)
    cl_in = hp.alm2cl(pm.alm)
    assert pm.lmax == 3 * 16 - 1
    assert np.all(cl_out[:4] < 1e-8 * cl_out[4:31].max())
    assert np.all(cl_out[31:] < 1e-3 * cl_out[4:31].max())
    b2 = hp.gauss_beam(np.radians(5.0), lmax=pm.lmax) ** 2
    assert np.allclose(cl_out[4:20] / cl_in[4:20], b2[4:20], rtol=0.1)


def test_working_mask_keeps_only_fully_kept_pixels():
    nside = 32
    sky = as_skymap(_map(nside, 5))
    mask = np.ones(sky.npix)
    mask[100] = 0
    pm = prepare_map(sky, as_skymap(mask), nside_work=16)
    bad = hp.nest2ring(16, hp.ring2nest(32, 100) // 4)
    assert not pm.mask[bad] and pm.mask.sum() == pm.mask.size - 1
