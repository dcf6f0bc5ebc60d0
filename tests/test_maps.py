"""HEALPix map and mask reading and preparation (topology.maps)."""

import healpy as hp
import numpy as np
import pytest
from astropy.io import fits

from topology.errors import InputError
from topology.maps import (UNSEEN, as_skymap, fit_monopole_dipole, mask_weights, prepare_map, read_healpix,
                           regrade_weights, remove_monopole_dipole)


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


# ---------------------------------------------------------------------------------------------
# block-wise reading and preparation (issue 13: an N_side 2048 map in bounded memory) against the
# whole-array computations they replace
# ---------------------------------------------------------------------------------------------
def _weights(nside, seed):
    """Apodised weights in [0, 1] with a zero band (|z| < 0.2) and a ramp to 1 at |z| = 0.5."""
    z = np.array(hp.pix2vec(nside, np.arange(hp.nside2npix(nside))))[2]
    return np.clip((np.abs(z) - 0.2) / 0.3, 0.0, 1.0)


def test_dipole_fit_by_normal_equations_equals_lstsq(monkeypatch):
    import topology.maps.pixels as pixels

    monkeypatch.setattr(pixels, "CHUNK", 1000)  # many blocks, one partly filled
    nside = 32
    n = np.array(hp.pix2vec(nside, np.arange(hp.nside2npix(nside))))
    m = _map(nside, 6) + 3.0 + n.T @ [0.4, -1.5, 2.0]
    w = _weights(nside, 0)
    ours = fit_monopole_dipole(m, w)
    # the previous computation: lstsq of the sqrt(w)-scaled design over w > 0
    sel = np.flatnonzero(w > 0)
    design = np.vstack([np.ones(sel.size), n[:, sel]]).T
    ref, *_ = np.linalg.lstsq(design * np.sqrt(w[sel])[:, None], m[sel] * np.sqrt(w[sel]), rcond=None)
    assert np.allclose(ours, ref, rtol=1e-10, atol=0)
    out, coef = remove_monopole_dipole(m.astype(np.float32), w)
    assert out.dtype == np.float64
    want = m.astype(np.float32).astype(np.float64) - coef[0] - coef[1:] @ n
    assert np.max(np.abs(out - want)) <= 1e-12 * np.max(np.abs(want))


def test_regrade_in_blocks_equals_healpy_ud_grade(monkeypatch):
    import topology.maps.pixels as pixels

    monkeypatch.setattr(pixels, "CHUNK", 100)
    w32 = _weights(32, 0)
    # check: healpy.ud_grade (mean of the sub-pixels; a copy of the parent when upgrading)
    assert np.allclose(regrade_weights(w32, 8), hp.ud_grade(w32, 8), rtol=0, atol=1e-15)
    assert np.array_equal(regrade_weights(w32, 64), hp.ud_grade(w32, 64))
    kept = w32 > 0.5
    f = regrade_weights(kept, 4)
    assert f.dtype == np.float32 and np.array_equal(f, hp.ud_grade(kept.astype(float), 4))
    mask = as_skymap(_weights(64, 0), source="apodised64", what="mask")
    sky = as_skymap(_map(32, 2), source="map32")
    assert np.allclose(mask_weights(mask, sky), hp.ud_grade(_weights(64, 0), 32), rtol=0, atol=1e-15)


def test_reading_in_blocks_equals_healpy(tmp_path, monkeypatch):
    import topology.maps.read as read

    monkeypatch.setattr(read, "READ_BYTES", 3 * 4096 + 17)  # blocks of 3 rows of 1024 pixels
    m = _map(32, 9)
    iqu = [m, 2 * m, -m]
    hp.write_map(tmp_path / "n32.fits", [hp.reorder(c, r2n=True) for c in iqu], nest=True, dtype=np.float32)
    got = read_healpix(tmp_path / "n32.fits", field=1)
    assert got.values.dtype == np.float32
    # check: healpy.read_map of the same file and column
    assert np.array_equal(got.values, hp.read_map(tmp_path / "n32.fits", field=1, dtype=np.float32))
    seen = np.arange(m.size) % 3 != 0
    part = np.where(seen, m, UNSEEN)
    hp.write_map(tmp_path / "p.fits", hp.reorder(part, r2n=True), nest=True, partial=True, dtype=np.float64)
    got = read_healpix(tmp_path / "p.fits")
    assert got.values.dtype == np.float64 and np.array_equal(got.observed, seen)
    assert np.array_equal(got.values, np.where(seen, m, 0.0))
    # a scaled integer column (TSCAL/TZERO) goes through astropy, which applies the scaling
    counts = np.arange(m.size, dtype=np.int16) % 1000
    hdu = fits.BinTableHDU.from_columns([fits.Column(name="T", format="I", array=counts)])
    hdu.header["ORDERING"] = "RING"
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(tmp_path / "scaled.fits")
    fits.setval(tmp_path / "scaled.fits", "TSCAL1", value=0.5, ext=1)
    fits.setval(tmp_path / "scaled.fits", "TZERO1", value=-10.0, ext=1)
    got = read_healpix(tmp_path / "scaled.fits")
    assert np.array_equal(got.values, 0.5 * counts - 10.0)


@pytest.mark.parametrize("iterations", [1, 3])
def test_iterated_alm_equals_healpy_map2alm(iterations):
    from topology.maps import weighted_alm

    m = _map(32, 11)
    sky = as_skymap(m, source="float64 map")
    alm = weighted_alm(sky, None, np.zeros(4), 60, iterations)
    # check: healpy.map2alm(iter=k) runs the same Jacobi steps on the whole array
    ref = hp.map2alm(m, lmax=60, iter=iterations)
    assert np.max(np.abs(alm - ref)) <= 1e-12 * np.max(np.abs(ref))


def _previous_prepare(sky, mask=None, *, nside_work=128, fwhm_deg=1.0, l_range=None, l_weights=None,
                      mask_threshold=0.5, remove_dipole=True, iterations=1, oversample=2):
    """prepare_map as it was before the block-wise version: float64 copies of every array,
    healpy.ud_grade for the mask, lstsq over the kept pixels, healpy.map2alm(iter=...)."""
    from topology.maps import PreparedMap

    values = sky.values.astype(np.float64)
    w = sky.observed.astype(np.float64)
    if mask is not None:
        mv = np.clip(np.where(mask.observed, mask.values, 0.0).astype(np.float64), 0.0, 1.0)
        w = w * (mv if mask.nside == sky.nside else hp.ud_grade(mv, sky.nside))
    coef = np.zeros(4)
    if remove_dipole:
        sel = np.flatnonzero(w > 0)
        n = np.array(hp.pix2vec(sky.nside, sel))
        sw = np.sqrt(w[sel])
        coef, *_ = np.linalg.lstsq(np.vstack([np.ones(sel.size), n]).T * sw[:, None], values[sel] * sw, rcond=None)
        values = values - coef[0] - coef[1:] @ np.array(hp.pix2vec(sky.nside, np.arange(values.size)))
    lmax = int(min(3 * sky.nside - 1, 3 * nside_work - 1))
    alm = hp.map2alm(values * w, lmax=lmax, iter=iterations)
    mask_work = hp.ud_grade((w >= mask_threshold).astype(np.float64), nside_work) >= 1.0 - 1e-9
    return PreparedMap(alm, lmax, int(nside_work), mask_work, float(np.radians(fwhm_deg)), l_range, None, coef,
                       float(mask_work.mean()), int(oversample))


@pytest.mark.parametrize("mode", ["antipodal", "all-pairs"])
def test_block_preparation_gives_the_previous_search(monkeypatch, mode):
    import topology.maps as maps
    from topology.search.engine import SearchSettings, search_sky

    from test_search_fields import isotropic_map

    m = isotropic_map(64, 21) + 40.0 + np.array(hp.pix2vec(64, np.arange(hp.nside2npix(64)))).T @ [3.0, 1.0, -2.0]
    sky = as_skymap(m, source="n64")
    mask = as_skymap(_weights(128, 0), source="apodised128", what="mask")
    s = SearchSettings(mode=mode, radii_deg=(30.0,) if mode == "all-pairs" else (20.0, 45.0, 70.0), nside_work=32,
                       fwhm_deg=3.0, m_max=24, centre_nside=8)
    new = search_sky(sky, mask, s)
    pm_new = maps.prepare_map(sky, mask, nside_work=32, fwhm_deg=3.0)
    pm_old = _previous_prepare(sky, mask, nside_work=32, fwhm_deg=3.0)
    assert np.array_equal(pm_new.mask, pm_old.mask)
    assert np.allclose(pm_new.monopole_dipole, pm_old.monopole_dipole, rtol=1e-10, atol=0)
    assert np.max(np.abs(pm_new.alm - pm_old.alm)) <= 1e-10 * np.max(np.abs(pm_old.alm))
    monkeypatch.setattr(maps, "prepare_map", _previous_prepare)
    old = search_sky(sky, mask, s)
    assert len(new["candidates"]) == len(old["candidates"]) > 0
    for a, b in zip(new["candidates"], old["candidates"]):
        assert a["S"] == pytest.approx(b["S"], abs=1e-9) and a["radius_deg"] == b["radius_deg"]
        if a["center_a"] != pytest.approx(b["center_a"], abs=1e-9):  # the same pair named B, A: S ties exactly
            a = {**a, "center_a": a["center_b"], "center_b": a["center_a"], "twist_deg": b["twist_deg"]}
        assert a["center_a"] == pytest.approx(b["center_a"], abs=1e-9)
        assert a["center_b"] == pytest.approx(b["center_b"], abs=1e-9)
        assert a["twist_deg"] == pytest.approx(b["twist_deg"], abs=1e-6)
