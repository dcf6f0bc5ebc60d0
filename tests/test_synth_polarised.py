"""`topology synth` with [sky] polarisation = true: I, Q, U columns, the Q/U convention, I equal to
the temperature-only sky, one-line errors for what is not implemented."""

import textwrap

import healpy as hp
import numpy as np
import pytest
from astropy.io import fits

from topology.cli import main
from topology.errors import InputError
from topology.maps.polarised import read_iqu
from topology.skies import spectra

POL = """
[space]
family = "isotropic"
[sky]
nside = 16
lmax = 30
seed = 4
terms = ["sw", "doppler", "isw"]
noise_uk = 2.0
fwhm_deg = 3.0
pixwin = false
"""


@pytest.fixture(autouse=True)
def _tables(monkeypatch):
    monkeypatch.setattr(spectra, "have_camb", lambda: False)   # the shipped tables: no CAMB run


def run(capsys, tmp_path, text, name, *extra):
    cfg = tmp_path / f"{name}.toml"
    cfg.write_text(textwrap.dedent(text))
    out = tmp_path / f"{name}.fits"
    rc = main(["synth", str(cfg), "--out", str(out), "--dtype", "float64", *extra])
    _, err = capsys.readouterr()
    return rc, err, out


def test_iqu_columns_convention_and_temperature(tmp_path, capsys):
    rc, err, t = run(capsys, tmp_path, POL, "t")
    assert rc == 0, err
    rc, err, h = run(capsys, tmp_path, POL + "polarisation = true\nnoise_pol_uk = 6.0\n", "h")
    assert rc == 0, err
    rc, err, i = run(capsys, tmp_path, POL + "polarisation = true\nnoise_pol_uk = 6.0\nqu_convention = \"iau\"\n", "i")
    assert rc == 0, err
    head = fits.getheader(h, 1)
    assert [head[f"TTYPE{k}"] for k in (1, 2, 3)] == ["I_STOKES", "Q_STOKES", "U_STOKES"]
    assert head["TUNIT1"] == "uK" and head["POLCCONV"] == "COSMO" and head["NOISEPUK"] == 6.0
    assert fits.getheader(i, 1)["POLCCONV"] == "IAU"
    # I is the temperature-only sky of the same config and seed (signal and noise streams)
    assert np.array_equal(hp.read_map(str(h), field=0, dtype=None), hp.read_map(str(t), dtype=None))
    mh, mi = read_iqu(h), read_iqu(i)      # both back in the HEALPix convention
    assert np.array_equal(mh.u.values, mi.u.values) and np.array_equal(mh.q.values, mi.q.values)
    raw_i = hp.read_map(str(i), field=2, dtype=None)
    assert np.array_equal(raw_i, -mh.u.values)


@pytest.mark.parametrize("text,match", [
    (POL.replace('family = "isotropic"', 'family = "E1"\nlengths = [1.0, 1.0, 1.0]') + "polarisation = true\n",
     "polarised flat skies need camb"),
    ("[cosmology]\nomega_k = -0.02\n" + POL.replace('family = "isotropic"', 'family = "lens"\np = 8\nq = 3\n')
     + "polarisation = true\n",
     "not implemented yet"),
    (POL.replace('terms = ["sw", "doppler", "isw"]', "") + "polarisation = true\n", "terms"),
    (POL + 'polarisation = true\nqu_convention = "cosmo"\n', "'healpix' or 'iau'"),
])
def test_one_line_errors(tmp_path, capsys, text, match):
    rc, err, out = run(capsys, tmp_path, text, "bad")
    assert rc == 2 and match in err and err.count("\n") == 1 and not out.exists()


def test_inline_run_skies_refuse_polarisation():
    from topology.cosmology import Cosmology
    from topology.scenario import check_space_table

    with pytest.raises(InputError, match="not implemented in topology run"):
        check_space_table({"family": "isotropic"}, None, Cosmology(), ".", curvature=True, sky={"polarisation": True})
