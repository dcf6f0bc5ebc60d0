"""Pixel values a map cannot hold (issue 13): sentinels, infinities and absurd outliers are masked
with a note and never dominate the statistic; a map coarser than the working N_side is refused.

Every refusal is one line on stderr naming the file, exit status 2, and nothing written."""

import json

import healpy as hp
import numpy as np
import pytest

from test_search_fields import isotropic_map
from topology.cli import main
from topology.cosmology import Cosmology
from topology.errors import InputError
from topology.maps import OUTLIER_SIGMA, UNSEEN, as_skymap, prepare_map, read_healpix
from topology.search.engine import SearchSettings, search_sky
from topology.skies import isotropic
from topology.skies.instrument import observe

NSIDE = 32
NPIX = 12 * NSIDE**2
FAST = ["--nside-work", "16", "--m-max", "12", "--fwhm", "6", "--json"]
RADII = {"antipodal": ["--radii", "20:60:20"], "all-pairs": ["--radii", "40"]}  # all-pairs: 3 s a radius
ERROR = "topology search: error: "


def _search(tmp_path, monkeypatch, capsys, *args):
    """`topology search` in tmp_path: (exit code, stdout, stderr lines)."""
    monkeypatch.chdir(tmp_path)
    code = main(["search", *map(str, args)])
    out = capsys.readouterr()
    return code, out.out, out.err.strip().splitlines()


def _smax(out: str) -> np.ndarray:
    return np.array([e["S_max"] for e in json.loads(out)["s_max"]])


def _two_percent():
    m = isotropic_map(NSIDE, 7)
    idx = np.random.default_rng(13).choice(NPIX, NPIX // 50, replace=False)
    return m, idx


@pytest.mark.parametrize("mode", ["antipodal", "all-pairs"])
def test_sentinel_pixels_are_masked_with_a_note_and_search_like_unseen(tmp_path, monkeypatch, capsys, mode):
    # 1e30 in 2% of the pixels (a common "no data" value) gave S_max 0.994-0.999 at every radius
    m, idx = _two_percent()
    hp.write_map(tmp_path / "sentinel.fits", np.where(np.isin(np.arange(NPIX), idx), 1e30, m), dtype=np.float32)
    hp.write_map(tmp_path / "unseen.fits", np.where(np.isin(np.arange(NPIX), idx), UNSEEN, m), dtype=np.float32)
    code, out, err = _search(tmp_path, monkeypatch, capsys, tmp_path / "sentinel.fits", *FAST, *RADII[mode], "--mode",
                             mode)
    assert code == 0
    pct = 100 * idx.size / NPIX
    assert err == [f"note: {tmp_path / 'sentinel.fits'}: {idx.size} pixels ({pct:.3g}% of the sky) masked as "
                   f"unobserved: {idx.size} with a no-data sentinel value (|value| >= 1e+20)"]
    code, ref, err = _search(tmp_path, monkeypatch, capsys, tmp_path / "unseen.fits", *FAST, *RADII[mode], "--mode", mode)
    assert code == 0 and err == []  # UNSEEN is the HEALPix mark of an unobserved pixel: no note
    assert np.allclose(_smax(out), _smax(ref), rtol=0, atol=1e-6)
    assert _smax(out).max() < 0.97  # the chance level of this sky, not the 0.99+ of the sentinels


def test_one_huge_pixel_and_infinities_do_not_crash(tmp_path, monkeypatch, capsys):
    # one pixel of 1e300 ended in an internal error (exit 3) in the refinement
    m = isotropic_map(NSIDE, 8)
    m[100] = 1e300
    hp.write_map(tmp_path / "huge.fits", m, dtype=np.float64)
    for mode in ("antipodal", "all-pairs"):
        code, out, err = _search(tmp_path, monkeypatch, capsys, tmp_path / "huge.fits", *FAST, *RADII[mode], "--mode",
                                 mode)
        assert code == 0 and len(json.loads(out)["s_max"]) == 2 * (3 if mode == "antipodal" else 1)
    capsys.readouterr()
    m = isotropic_map(NSIDE, 8)
    m[[5, 6]] = np.inf
    m[7] = -np.inf
    m[8] = np.nan
    hp.write_map(tmp_path / "inf.fits", m, dtype=np.float64)
    code, out, err = _search(tmp_path, monkeypatch, capsys, tmp_path / "inf.fits", *FAST, "--radii", "30")
    assert code == 0
    assert err == [f"note: {tmp_path / 'inf.fits'}: 4 pixels ({100 * 4 / NPIX:.3g}% of the sky) masked as "
                   f"unobserved: 1 NaN, 3 infinite"]
    sky = read_healpix(tmp_path / "inf.fits")
    assert set(np.flatnonzero(~sky.observed)) == {5, 6, 7, 8} and np.all(np.isfinite(sky.values))


def test_one_huge_pixel_note_names_it(tmp_path, capsys):
    m = isotropic_map(NSIDE, 9)
    m[100] = 1e300
    sky = as_skymap(m, source="huge-array")
    assert not sky.observed[100] and sky.observed.sum() == NPIX - 1 and sky.values[100] == 0.0
    assert capsys.readouterr().err == (f"note: huge-array: 1 pixel ({100 / NPIX:.3g}% of the sky) masked as "
                                       f"unobserved: 1 with a no-data sentinel value (|value| >= 1e+20)\n")
    assert m[100] == 1e300  # the caller's array is not changed


def test_too_little_sky_left_after_masking_bad_values(tmp_path, monkeypatch, capsys):
    m = isotropic_map(NSIDE, 10)
    z = hp.pix2vec(NSIDE, np.arange(NPIX))[2]
    m[z < 0.7] = -1e30  # 85% of the sky holds a sentinel
    path = tmp_path / "mostly_empty.fits"
    hp.write_map(path, m, dtype=np.float32)
    before = sorted(p.name for p in tmp_path.iterdir())
    code, out, err = _search(tmp_path, monkeypatch, capsys, path, *FAST, "--radii", "30", "--plot", tmp_path / "s.png")
    kept = 100 * np.mean(z >= 0.7)
    n_bad = int(np.sum(z < 0.7))
    assert code == 2 and out == "" and len(err) == 1, err
    assert err[0] == (f"{ERROR}{path}: the map observes {kept:.1f}% of the sky once {n_bad} pixels without a usable value "
                      f"are masked ({n_bad} with a no-data sentinel value (|value| >= 1e+20)), less than the "
                      f"minimum sky fraction 0.2 (--min-sky-fraction)")
    assert sorted(p.name for p in tmp_path.iterdir()) == before  # no plot, no checkpoint


def _realistic_sky(nside=256, seed=4):
    """An isotropic CMB sky (microK) through a 10' beam with 20 microK noise per pixel."""
    sky = isotropic.isotropic_sky(Cosmology(), lmax=3 * nside - 1, terms=("sw", "doppler", "isw"), seed=seed)
    return observe(sky, nside=nside, fwhm_deg=10 / 60, noise_uk=20.0, seed=seed)


def test_a_realistic_sky_with_bright_sources_and_a_galactic_band_keeps_every_pixel(capsys):
    m = _realistic_sky()
    npix = m.size
    sigma = float(np.std(m))
    rng = np.random.default_rng(2)
    bright = m.copy()
    bright[rng.choice(npix, 5, replace=False)] += 30 * sigma  # point sources of 30 sigma
    bright[rng.choice(npix, 1)] += 3e3 * sigma  # a Tau A-like source in a small pixel
    theta, _ = hp.pix2ang(256, np.arange(npix))
    b = np.degrees(np.pi / 2 - theta)
    bright += 1e3 * sigma * np.exp(-np.abs(b) / 1.0)  # a Galactic plane of 1e3 sigma, 1 deg scale height
    for units, scale in (("microK", 1.0), ("K", 1e-6)):
        sky = as_skymap(bright * scale, source=f"realistic in {units}")
        assert sky.observed.all() and sky.bad["outlier"] == sky.bad["sentinel"] == sky.bad["inf"] == 0
        assert np.array_equal(sky.values, bright * scale)
    assert capsys.readouterr().err == ""
    # an absurd value (an integer fill of -2^31 in a microK map) is masked as an outlier
    bad = bright.copy()
    bad[42] = -2.0**31
    sky = as_skymap(bad, source="int-fill")
    assert np.flatnonzero(~sky.observed).tolist() == [42] and sky.bad["outlier"] == 1
    assert abs(-2.0**31 - sky.bad["median"]) > OUTLIER_SIGMA * sky.bad["sigma"] > 1e3 * sigma
    err = capsys.readouterr().err
    assert err.startswith(f"note: int-fill: 1 pixel ({100 / npix:.3g}% of the sky) masked as unobserved: "
                          f"1 more than 1e+05 robust sigma from the median (median ")


def test_mask_with_nan_and_inf_pixels_is_unobserved_there(tmp_path, capsys):
    mask = np.ones(NPIX)
    mask[:10] = np.nan
    mask[10:12] = np.inf
    mask[12] = 1e30
    mk = as_skymap(mask, source="mask-array", what="mask")
    assert np.flatnonzero(~mk.observed).tolist() == list(range(13))
    assert capsys.readouterr().err == (f"note: mask-array: 13 pixels ({100 * 13 / NPIX:.3g}% of the sky) masked as "
                                       f"unobserved: 10 NaN, 2 infinite, 1 with a no-data sentinel value "
                                       f"(|value| >= 1e+20)\n")
    hp.write_map(tmp_path / "mask.fits", mask, dtype=np.float32)
    mk = read_healpix(tmp_path / "mask.fits", what="mask")
    assert np.flatnonzero(~mk.observed).tolist() == list(range(13)) and mk.bad.get("outlier", 0) == 0


def test_map_coarser_than_the_working_nside_is_refused(tmp_path, monkeypatch, capsys):
    # an N_side 1 map searched at N_side 16 was upsampled silently and gave S = 1.000 everywhere
    for nside in (1, 8):
        path = tmp_path / f"coarse{nside}.fits"
        hp.write_map(path, isotropic_map(nside, 3) if nside > 1 else np.arange(12.0), dtype=np.float64)
        before = sorted(p.name for p in tmp_path.iterdir())
        code, out, err = _search(tmp_path, monkeypatch, capsys, path, *FAST, "--radii", "30", "--plot",
                                 tmp_path / "s.png")
        assert code == 2 and out == "" and err == [
            f"{ERROR}{path}: the map has N_side {nside}, coarser than the working N_side 16 ([search] nside_work / "
            f"--nside-work); give a working N_side <= {nside} or a finer map"]
        assert sorted(p.name for p in tmp_path.iterdir()) == before
    with pytest.raises(InputError, match="N_side 8, coarser than the working N_side 16"):
        prepare_map(as_skymap(isotropic_map(8, 3)), nside_work=16)  # the Python API too
    hp.write_map(tmp_path / "equal.fits", isotropic_map(16, 3), dtype=np.float64)
    code, out, err = _search(tmp_path, monkeypatch, capsys, tmp_path / "equal.fits", *FAST, "--radii", "30")
    assert code == 0 and json.loads(out)["map_info"]["nside_work"] == 16  # at the map's N_side: fine


def test_search_on_a_sky_with_sentinels_is_the_search_without_them():
    # the Python API: the same S_max (to 1e-6) as the map with those pixels UNSEEN
    m, idx = _two_percent()
    s = SearchSettings(mode="antipodal", radii_deg=(25.0, 50.0), nside_work=16, fwhm_deg=6.0, m_max=12)
    a = m.copy()
    a[idx] = 1e30
    b = m.copy()
    b[idx] = UNSEEN
    ra = search_sky(as_skymap(a, source="sentinel-api"), None, s)["s_max"]
    rb = search_sky(as_skymap(b, source="unseen-api"), None, s)["s_max"]
    assert [e["S_max"] for e in ra] == pytest.approx([e["S_max"] for e in rb], abs=1e-6)
