"""Map and mask FILE input (issue 7): damaged files, wrong pixel counts, partial sky, ordering,
empty or constant maps, masks of another N_side or too little sky, multi-column maps, and
big-endian / single-precision data, for `topology search` and `topology run`.

Every refusal is one line on stderr naming the file, exit status 2, and nothing written."""

import gzip
import json

import healpy as hp
import numpy as np
import pytest
from astropy.io import fits

from test_pipeline import TINY, _toml
from test_search_fields import isotropic_map
from topology.cli import main
from topology.config import config_from_dict
from topology.errors import InputError
from topology.maps import UNSEEN, as_skymap, check_sky_fraction, mask_weights, prepare_map, read_healpix
from topology.run import plan_from_config

NSIDE = 16
NPIX = 12 * NSIDE**2
FAST = ["--nside-work", "16", "--m-max", "12", "--fwhm", "6", "--radii", "30"]
# `topology run` reads its map and mask files when it makes the plan (run.plan.read_map_files);
# the regrade note and notes held back before a refusal there need a further change
# (issue 7 report): strict, so the marker goes once it is made.


def _sky(seed=3):
    return isotropic_map(NSIDE, seed)


def _z():
    return hp.pix2vec(NSIDE, np.arange(NPIX))[2]


def _table(path, columns: dict, **header):
    """A binary-table FITS file with the given columns (float64 unless the array says otherwise)."""
    cols = [fits.Column(name=k, format={"f": "E" if v.dtype.itemsize == 4 else "D", "i": "K"}[v.dtype.kind],
                        array=v) for k, v in columns.items()]
    hdu = fits.BinTableHDU.from_columns(cols)
    for k, v in header.items():
        hdu.header[k] = v
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(path)
    return path


def _good_bytes(tmp_path):
    hp.write_map(tmp_path / "good.fits", _sky(), dtype=np.float64)
    b = (tmp_path / "good.fits").read_bytes()
    (tmp_path / "good.fits").unlink()
    return b


def _truncated(tmp_path):
    p = tmp_path / "cut.fits"
    b = _good_bytes(tmp_path)
    p.write_bytes(b[: len(b) // 2])
    return p, "truncated"


def _cut_in_header(tmp_path):
    p = tmp_path / "cuthead.fits"
    p.write_bytes(_good_bytes(tmp_path)[:4000])  # primary header + part of the table header
    return p, "truncated"


def _bad_card(tmp_path):
    p = tmp_path / "badcard.fits"
    b = _good_bytes(tmp_path)
    i = b.index(b"PIXTYPE =")
    p.write_bytes(b[:i] + b"PIXTYPE = HEALPIX unquoted".ljust(80) + b[i + 80:])  # not a FITS value
    return p, "damaged FITS header"


def _text(tmp_path):
    p = tmp_path / "notes.fits"
    p.write_text("T = 2.7255 K\nthis is not a FITS file\n")
    return p, "not a FITS file"


def _empty(tmp_path):
    p = tmp_path / "empty.fits"
    p.write_bytes(b"")
    return p, "empty"


def _gzip_corrupt(tmp_path):
    p = tmp_path / "bad.fits.gz"
    z = bytearray(gzip.compress(_good_bytes(tmp_path)))
    z[len(z) // 2: len(z) // 2 + 64] = bytes(64)
    p.write_bytes(bytes(z))
    return p, "gzip"


def _gzip_cut(tmp_path):
    p = tmp_path / "cut.fits.gz"
    z = gzip.compress(_good_bytes(tmp_path))
    p.write_bytes(z[: len(z) // 2])
    return p, "gzip"


def _pixel_count(tmp_path):
    return _table(tmp_path / "short.fits", {"T": _sky()[:-1]}, ORDERING="RING"), "not a HEALPix map"


def _no_ordering(tmp_path):
    return _table(tmp_path / "noorder.fits", {"T": _sky()}, PIXTYPE="HEALPIX"), "no ORDERING"


def _bad_ordering(tmp_path):
    return _table(tmp_path / "spiral.fits", {"T": _sky()}, ORDERING="SPIRAL"), "neither RING nor NESTED"


def _all_unseen(tmp_path):
    return _table(tmp_path / "unseen.fits", {"T": np.full(NPIX, UNSEEN)}, ORDERING="RING"), "UNSEEN or NaN"


def _all_nan(tmp_path):
    return _table(tmp_path / "nan.fits", {"T": np.full(NPIX, np.nan)}, ORDERING="RING"), "UNSEEN or NaN"


def _constant(tmp_path):
    m = np.full(NPIX, 2.7255)
    m[: NPIX // 3] = UNSEEN  # constant where observed
    return _table(tmp_path / "flat.fits", {"T": m}, ORDERING="RING"), "constant"


BAD_MAPS = [_truncated, _cut_in_header, _bad_card, _text, _empty, _gzip_corrupt, _gzip_cut, _pixel_count, _no_ordering,
            _bad_ordering, _all_unseen, _all_nan, _constant]


def _listing(folder):
    return sorted(p.name for p in folder.iterdir())


def _search(tmp_path, monkeypatch, capsys, *args):
    """Run `topology search` in tmp_path; returns (exit code, stdout, stderr lines)."""
    monkeypatch.chdir(tmp_path)
    code = main(["search", *map(str, args)])
    out = capsys.readouterr()
    return code, out.out, out.err.strip().splitlines()


def _refused(tmp_path, monkeypatch, capsys, culprit, needle, *args):
    before = _listing(tmp_path)
    code, out, err = _search(tmp_path, monkeypatch, capsys, *args, *FAST, "--plot", tmp_path / "s.png")
    assert code == 2 and len(err) == 1, err
    assert culprit.name in err[0] and needle in err[0] and "Traceback" not in err[0], err
    assert out == "" and _listing(tmp_path) == before  # no plot, no checkpoint


# ---------------------------------------------------------------------------------------------
# topology search
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("make", BAD_MAPS, ids=lambda f: f.__name__.strip("_"))
def test_search_refuses_bad_map_file(tmp_path, monkeypatch, capsys, make):
    path, needle = make(tmp_path)
    _refused(tmp_path, monkeypatch, capsys, path, needle, path)


@pytest.mark.parametrize("make", [_truncated, _text, _gzip_corrupt, _no_ordering, _all_unseen],
                         ids=lambda f: f.__name__.strip("_"))
def test_search_refuses_bad_mask_file(tmp_path, monkeypatch, capsys, make):
    hp.write_map(tmp_path / "sky.fits", _sky())
    path, needle = make(tmp_path)
    _refused(tmp_path, monkeypatch, capsys, path, needle, tmp_path / "sky.fits", "--mask", path)


def test_constant_maps_refused_but_a_constant_mask_is_fine():
    with pytest.raises(InputError, match="constant"):
        prepare_map(as_skymap(np.zeros(NPIX)), nside_work=16)  # the Python API too
    ones = as_skymap(np.ones(NPIX), source="ones")
    assert np.array_equal(mask_weights(ones, as_skymap(_sky())), np.ones(NPIX))


def test_ordering_option(tmp_path, monkeypatch, capsys):
    m = _sky()
    path = _table(tmp_path / "noorder.fits", {"T": hp.reorder(m, r2n=True)})
    code, _, err = _search(tmp_path, monkeypatch, capsys, path, *FAST)
    assert code == 2 and len(err) == 1 and "--ordering" in err[0] and "RING or NESTED" in err[0], err
    code, _, err = _search(tmp_path, monkeypatch, capsys, path, *FAST, "--ordering", "SPIRAL")
    assert code == 2 and len(err) == 1 and "--ordering" in err[0] and "'SPIRAL'" in err[0], err
    code, out, err = _search(tmp_path, monkeypatch, capsys, path, *FAST, "--ordering", "nested", "--json")
    assert code == 0 and err == []
    # the same search as on the RING file of the same sky
    hp.write_map(tmp_path / "ring.fits", m, dtype=np.float64)
    code, ref, _ = _search(tmp_path, monkeypatch, capsys, tmp_path / "ring.fits", *FAST, "--json")
    assert code == 0 and json.loads(out)["s_max"] == json.loads(ref)["s_max"]
    # an explicit ordering that contradicts the header
    code, _, err = _search(tmp_path, monkeypatch, capsys, tmp_path / "ring.fits", *FAST, "--ordering", "NESTED")
    assert code == 2 and len(err) == 1 and "ORDERING = RING but NESTED" in err[0], err


def test_partial_sky_iqu_map_with_finer_mask_is_accepted_with_notes(tmp_path, monkeypatch, capsys):
    m = _sky()
    seen = np.abs(_z()) > 0.6  # two caps: 40% of the sky
    iqu = [np.where(seen, m, UNSEEN), 2 * m, -m]
    path = tmp_path / "survey.fits"
    hp.write_map(path, iqu, partial=True, dtype=np.float64)
    assert fits.getheader(path, 1)["INDXSCHM"] == "EXPLICIT"
    mask32 = np.ones(12 * 32**2)
    mask32[:100] = 0.0
    hp.write_map(tmp_path / "mask32.fits", mask32)
    args = [path, "--mask", tmp_path / "mask32.fits", *FAST, "--json"]
    code, _, err = _search(tmp_path, monkeypatch, capsys, *args, "--quiet")
    assert code == 0 and err == []  # --quiet: no notes
    code, out, err = _search(tmp_path, monkeypatch, capsys, *args)
    assert code == 0
    assert err == [
        f"note: {path} has 3 columns (TEMPERATURE, Q_POLARISATION, U_POLARISATION); using the first, TEMPERATURE",
        f"note: {path} is partial-sky: {100 * seen.mean():.1f}% of the sky observed, the rest masked",
        f"note: mask {tmp_path / 'mask32.fits'} has N_side 32, the map 16: the mask is regraded to N_side 16",
    ]
    res = json.loads(out)
    assert res["map_info"]["nside_in"] == NSIDE
    sky = read_healpix(path)
    assert np.array_equal(sky.observed, seen) and np.array_equal(sky.values[seen], m[seen])
    # check: healpy.ud_grade averages the four sub-pixels of the finer mask
    w = mask_weights(read_healpix(tmp_path / "mask32.fits", what="mask"), sky)
    assert np.allclose(w, hp.ud_grade(mask32, NSIDE) * seen)


def test_partial_sky_below_the_minimum_fraction(tmp_path, monkeypatch, capsys):
    seen = _z() > 0.8  # 10% of the sky
    path = tmp_path / "patch.fits"
    hp.write_map(path, np.where(seen, _sky(), UNSEEN), partial=True, dtype=np.float64)
    _refused(tmp_path, monkeypatch, capsys, path, f"observes {100 * seen.mean():.1f}% of the sky", path)


def test_mask_keeping_too_little_sky(tmp_path, monkeypatch, capsys):
    hp.write_map(tmp_path / "sky.fits", _sky())
    keep = _z() > 0.8
    hp.write_map(tmp_path / "cap.fits", keep.astype(float))
    kept = 100 * keep.mean()
    needle = f"the mask keeps {kept:.1f}% of the sky, less than the minimum sky fraction 0.2 (--min-sky-fraction)"
    _refused(tmp_path, monkeypatch, capsys, tmp_path / "cap.fits", needle, tmp_path / "sky.fits",
             "--mask", tmp_path / "cap.fits")
    _refused(tmp_path, monkeypatch, capsys, tmp_path / "cap.fits", "0.5 (--min-sky-fraction)",
             tmp_path / "sky.fits", "--mask", tmp_path / "cap.fits", "--min-sky-fraction", "0.5")
    sky, mask = read_healpix(tmp_path / "sky.fits"), read_healpix(tmp_path / "cap.fits", what="mask")
    assert check_sky_fraction(sky, mask, 0.05) == pytest.approx(keep.mean())  # a lower minimum accepts it
    code, _, err = _search(tmp_path, monkeypatch, capsys, tmp_path / "sky.fits", *FAST, "--min-sky-fraction", "1.5")
    assert code == 2 and len(err) == 1 and "--min-sky-fraction" in err[0]


def test_field_by_index_and_name(tmp_path, monkeypatch, capsys):
    m = _sky()
    path = tmp_path / "iqu.fits"
    hp.write_map(path, [m, 2 * m, -m], dtype=np.float64)
    assert np.array_equal(read_healpix(path).values, m)
    assert "using the first, TEMPERATURE" in capsys.readouterr().err  # the Python API notes too
    assert np.array_equal(read_healpix(path, field="q_polarisation").values, 2 * m)
    assert np.array_equal(read_healpix(path, field=2).values, -m)
    _refused(tmp_path, monkeypatch, capsys, path, "'FOO' is not a column of this map; the columns are "
             "TEMPERATURE, Q_POLARISATION, U_POLARISATION", path, "--field", "FOO")
    _refused(tmp_path, monkeypatch, capsys, path, "field 3 does not exist", path, "--field", "3")
    code, _, err = _search(tmp_path, monkeypatch, capsys, path, *FAST, "--field", "U_POLARISATION", "--json")
    assert code == 0 and err == []  # a chosen column: no note


def test_single_precision_big_endian_file_is_kept_in_single_precision(tmp_path, monkeypatch, capsys):
    # a float32 file is read as native float32 (half the memory of float64; the file holds no more)
    m = _sky()
    m[::97] = UNSEEN
    hp.write_map(tmp_path / "f64.fits", m, dtype=np.float64)
    hp.write_map(tmp_path / "f32.fits", m, dtype=np.float32)
    col = fits.getdata(tmp_path / "f32.fits", 1).dtype[0].base  # healpy writes 1024 pixels per row
    assert col.byteorder == ">" and col.itemsize == 4  # FITS stores big-endian
    a, b = read_healpix(tmp_path / "f32.fits"), read_healpix(tmp_path / "f64.fits")
    assert np.array_equal(a.observed, b.observed)
    assert a.values.dtype == np.float32 and a.values.dtype.isnative and b.values.dtype == np.float64
    assert np.array_equal(a.values, b.values.astype(np.float32))
    # round to nearest: |fl(x) - x| <= 2^-24 |x| (IEEE 754 single precision; common practice)
    assert np.all(np.abs(a.values - b.values) <= 2.0**-24 * np.abs(b.values)) and not np.array_equal(a.values, b.values)
    res = []
    for name in ("f64.fits", "f32.fits"):
        code, out, _ = _search(tmp_path, monkeypatch, capsys, tmp_path / name, *FAST, "--json")
        assert code == 0
        res.append(json.loads(out))
    s64 = [e["S_max"] for e in res[0]["s_max"]]
    s32 = [e["S_max"] for e in res[1]["s_max"]]
    assert np.allclose(s32, s64, rtol=1e-5, atol=0) and s32 != s64  # within float32 precision, not identical
    assert res[0]["candidates"][0]["center_a"] == pytest.approx(res[1]["candidates"][0]["center_a"], abs=1e-9)


def test_big_endian_single_precision_arrays():
    rng = np.random.default_rng(8)
    m = rng.standard_normal(NPIX).astype(">f4")
    native = as_skymap(m.astype("<f8"))
    big = as_skymap(m)
    assert big.values.dtype == np.float32 and big.values.dtype.isnative  # single precision kept
    assert np.array_equal(big.values, native.values)
    a = prepare_map(big, nside_work=16, fwhm_deg=6.0).working_map()
    b = prepare_map(native, nside_work=16, fwhm_deg=6.0).working_map()
    # the float32 map's harmonic input is held in float32: equal to its rounding (2^-24 relative)
    err = np.abs(a - b).max() / np.abs(b).max()
    assert 0 < err < 1e-6


# ---------------------------------------------------------------------------------------------
# topology run: [[maps]] path / field / ordering and [mask] path / ordering / min_sky_fraction
# ---------------------------------------------------------------------------------------------
def _config(tmp_path, map_entry=None, mask=None):
    data = json.loads(json.dumps(TINY))
    if map_entry is not None:
        data["maps"] = [{"name": "data", **{k: str(v) for k, v in map_entry.items()}}]
    if mask is not None:
        data["mask"] = {k: (str(v) if k == "path" else v) for k, v in mask.items()}
    cfg = tmp_path / "run.toml"
    cfg.write_text(_toml(data))
    return cfg, data


def _run_refused(tmp_path, capsys, culprit, needle, **config):
    cfg, _ = _config(tmp_path, **config)
    out = tmp_path / "report"
    code = main(["run", str(cfg), "--out", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1, err
    needles = (needle,) if isinstance(needle, str) else needle
    assert culprit.name in err[0] and all(n in err[0] for n in needles) and "Traceback" not in err[0], err
    assert not out.exists()


@pytest.mark.parametrize("make", BAD_MAPS, ids=lambda f: f.__name__.strip("_"))
def test_run_refuses_bad_map_file(tmp_path, capsys, make):
    path, needle = make(tmp_path)
    _run_refused(tmp_path, capsys, path, needle, map_entry={"path": path})


@pytest.mark.parametrize("make", [_truncated, _gzip_corrupt, _no_ordering, _bad_ordering, _all_unseen],
                         ids=lambda f: f.__name__.strip("_"))
def test_run_refuses_bad_mask_file(tmp_path, capsys, make):
    path, needle = make(tmp_path)
    _run_refused(tmp_path, capsys, path, needle, mask={"path": path})


def test_run_field_and_mask_fraction(tmp_path, capsys):
    m = _sky()
    hp.write_map(tmp_path / "iqu.fits", [m, 2 * m, -m], dtype=np.float64)
    _run_refused(tmp_path, capsys, tmp_path / "iqu.fits", "the columns are TEMPERATURE, Q_POLARISATION, "
                 "U_POLARISATION", map_entry={"path": tmp_path / "iqu.fits", "field": "FOO"})
    keep = _z() > 0.4
    hp.write_map(tmp_path / "cap.fits", keep.astype(float))
    _run_refused(tmp_path, capsys, tmp_path / "cap.fits", (f"keeps {100 * keep.mean():.1f}% of the sky", "0.5"),
                 mask={"path": tmp_path / "cap.fits", "min_sky_fraction": 0.5})


def test_run_plan_accepts_ordering_keys_and_partial_sky(tmp_path, capsys):
    m = _sky()
    _table(tmp_path / "noorder.fits", {"T": hp.reorder(m, r2n=True)})
    _table(tmp_path / "mask_noorder.fits", {"M": np.ones(NPIX)})
    seen = np.abs(_z()) > 0.6
    hp.write_map(tmp_path / "survey.fits", np.where(seen, m, UNSEEN), partial=True, dtype=np.float64)
    for entry, mask in (({"path": tmp_path / "noorder.fits", "ordering": "NESTED"},
                         {"path": tmp_path / "mask_noorder.fits", "ordering": "RING"}),
                        ({"path": tmp_path / "survey.fits"}, {"galactic_b_deg": 10.0})):
        _, data = _config(tmp_path, entry, mask)
        plan = plan_from_config(config_from_dict(data), tmp_path / "report")
        assert plan.maps[0].path.endswith(entry["path"].name)
    err = capsys.readouterr().err
    assert f"{tmp_path / 'survey.fits'} is partial-sky: {100 * seen.mean():.1f}% of the sky observed" in err
    _run_refused(tmp_path, capsys, tmp_path / "noorder.fits", ("ORDERING", "[[maps]]"),
                 map_entry={"path": tmp_path / "noorder.fits"})
    cfg, _ = _config(tmp_path, {"path": tmp_path / "noorder.fits", "ordering": "SPIRAL"})
    assert main(["run", str(cfg), "--out", str(tmp_path / "report")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "'SPIRAL'" in err[0] and not (tmp_path / "report").exists()


def test_run_notes_a_mask_regrade_before_any_work_and_refusals_stay_one_line(tmp_path, capsys):
    seen = np.abs(_z()) > 0.6
    hp.write_map(tmp_path / "survey.fits", np.where(seen, _sky(), UNSEEN), partial=True, dtype=np.float64)
    hp.write_map(tmp_path / "mask32.fits", np.ones(12 * 32**2))
    _, data = _config(tmp_path, {"path": tmp_path / "survey.fits"}, {"path": tmp_path / "mask32.fits"})
    plan_from_config(config_from_dict(data), tmp_path / "report")
    assert "N_side 32, the map 16: the mask is regraded" in capsys.readouterr().err
    # a partial-sky map (a note) with a damaged mask: the refusal is the only line
    bad, needle = _truncated(tmp_path)
    _run_refused(tmp_path, capsys, bad, needle, map_entry={"path": tmp_path / "survey.fits"}, mask={"path": bad})
