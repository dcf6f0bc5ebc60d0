"""Reading I, Q, U maps: column choice, the Q/U convention (POLCCONV or given, never guessed),
one-line errors for bad input."""

import healpy as hp
import numpy as np
import pytest

from topology.errors import InputError
from topology.maps.polarised import read_iqu


def _write(path, maps, names, polcconv=None):
    extra = [("POLCCONV", polcconv)] if polcconv else []
    hp.write_map(str(path), maps, column_names=names, extra_header=extra, overwrite=True, dtype=np.float64)
    return path


@pytest.fixture
def iqu():
    rng = np.random.default_rng(4)
    return rng.standard_normal((3, 12 * 4 * 4))


def test_standard_columns_and_conventions(tmp_path, iqu):
    f = _write(tmp_path / "a.fits", iqu, ["I_STOKES", "Q_STOKES", "U_STOKES"], "COSMO")
    m = read_iqu(f)
    assert m.convention == "healpix" and m.columns == ("I_STOKES", "Q_STOKES", "U_STOKES")
    assert np.array_equal(m.i.values, iqu[0]) and np.array_equal(m.u.values, iqu[2])
    # check: HEALPix primer, polarisation conventions: U_HEALPix = -U_IAU
    g = _write(tmp_path / "b.fits", iqu, ["TEMPERATURE", "Q_POLARISATION", "U_POLARISATION"], "IAU")
    m = read_iqu(g)
    assert m.convention == "iau" and np.array_equal(m.u.values, -iqu[2]) and np.array_equal(m.q.values, iqu[1])
    # no POLCCONV: the caller says it; a disagreement with the header is an error
    h = _write(tmp_path / "c.fits", iqu, ["A", "B", "C"])
    assert np.array_equal(read_iqu(h, convention="iau").u.values, -iqu[2])
    with pytest.raises(InputError, match="never guessed"):
        read_iqu(h)
    with pytest.raises(InputError, match="POLCCONV"):
        read_iqu(f, convention="iau")
    with pytest.raises(InputError, match="'healpix' or 'iau'"):
        read_iqu(f, convention="cosmic")


def test_columns_by_name_or_index_and_shared_observed_pixels(tmp_path, iqu):
    maps = np.vstack([iqu, iqu[:1] * 0 + 1.0])
    maps[1, 5] = hp.UNSEEN
    f = _write(tmp_path / "d.fits", maps, ["T", "QQ", "UU", "HITS"], "COSMO")
    m = read_iqu(f, columns=["T", 1, "uu"])
    assert m.columns == ("T", "QQ", "UU")
    assert not m.q.observed[5] and not m.u.observed[5] and m.u.values[5] == 0 and m.i.observed[5]


def test_bad_input_one_line(tmp_path, iqu):
    one = _write(tmp_path / "t.fits", iqu[0], ["TEMPERATURE"], "COSMO")
    with pytest.raises(InputError, match=r"1 column\(s\) \(TEMPERATURE\).*I, Q and U") as e:
        read_iqu(one)
    assert str(tmp_path / "t.fits") in str(e.value) and "\n" not in str(e.value)
    f = _write(tmp_path / "e.fits", iqu, ["I_STOKES", "Q_STOKES", "U_STOKES"], "COSMO")
    with pytest.raises(InputError, match="not a column"):
        read_iqu(f, columns=["I_STOKES", "Q_STOKES", "U_POL"])
    with pytest.raises(InputError, match="three columns"):
        read_iqu(f, columns=["I_STOKES", "Q_STOKES"])
    with pytest.raises(InputError, match="not found"):
        read_iqu(tmp_path / "missing.fits")
    (tmp_path / "junk.fits").write_bytes(b"hello")
    with pytest.raises(InputError, match="FITS"):
        read_iqu(tmp_path / "junk.fits")
    bad = _write(tmp_path / "g.fits", iqu, ["I_STOKES", "Q_STOKES", "U_STOKES"], "GALACTIC?")
    with pytest.raises(InputError, match="neither"):
        read_iqu(bad)
