"""Property-based tests of the command line (hypothesis): random configs and random small maps
give either success or exit status 2 with exactly one line on stderr, never a traceback, an
internal error (exit 3) or a half-written output."""

import json
import math

import healpy as hp
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from topology.cli import main
from topology.config import SCHEMA

FAMILIES = ["E1", "E2", "E3", "E4", "E5", "E6", "E7", "E8", "E9", "E10", "E11", "E16", "lens", "prism",
            "tetrahedral", "octahedral", "dodecahedral", "isotropic", "E19", "lense", ""]

numbers = st.one_of(st.integers(-5, 200), st.floats(-10, 10), st.sampled_from([math.nan, math.inf, -math.inf]),
                    st.sampled_from([0, 1, 2, 3, 8, 16, 0.5, 1e-9, 89.9, 90, 91]))
values = st.one_of(numbers, st.booleans(), st.text(max_size=6),
                   st.lists(st.one_of(st.integers(-2, 5), st.floats(-2, 3, allow_nan=False)), max_size=5))

space_tables = st.fixed_dictionaries(
    {"family": st.sampled_from(FAMILIES)},
    optional={"lengths": st.lists(st.floats(-1, 3, allow_nan=False, allow_infinity=False), min_size=0, max_size=4),
              "p": st.integers(-2, 12), "q": st.integers(-2, 12), "m": st.integers(-1, 6),
              "angle": st.floats(-10, 200, allow_nan=False), "lenghts": st.just([1.0])})
cosmology_tables = st.fixed_dictionaries(
    {}, optional={"omega_k": st.floats(-1.5, 1.5, allow_nan=False), "h": st.floats(-0.5, 3, allow_nan=False),
                  "omega_c_h2": st.floats(-0.1, 2, allow_nan=False), "omega_lambda": st.floats(-1, 5, allow_nan=False)})
sky_tables = st.fixed_dictionaries(
    {}, optional={"nside": st.sampled_from([0, 3, 4, 8, 12]), "lmax": st.integers(-1, 40),
                  "seed": st.integers(-1, 5), "method": st.sampled_from(["eigenmode", "grid", "auto", "fft"]),
                  "fwhm_deg": st.floats(-1, 10, allow_nan=False), "noise_uk": st.floats(-1, 10, allow_nan=False),
                  "terms": st.sampled_from([["sw"], ["doppler"], ["sw", "sw"], []])})
stray = st.dictionaries(st.sampled_from(sorted({k for sec in SCHEMA.values() for k in sec} | {"colour", "nsid"})),
                        values, max_size=2)


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return json.dumps(v)


def _toml(sections: dict) -> str:
    out = []
    for name, body in sections.items():
        out.append(f"[{name}]")
        out += [f"{k} = {_toml_value(v)}" for k, v in body.items()]
    return "\n".join(out) + "\n"


def _check_outcome(code, capsys, outputs, err=None):
    err = capsys.readouterr().err if err is None else err
    lines = [ln for ln in err.strip().splitlines() if not ln.startswith(("note:", "topology synth: warning",
                                                                          "topology search: warning"))]
    assert code in (0, 2), (code, err)
    assert "Traceback" not in err
    if code == 2:
        assert len(lines) == 1 and "error" in lines[0], err
        for p in outputs:
            assert not p.exists(), p


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(space=space_tables, cosmology=cosmology_tables, sky=sky_tables, extra=stray,
       command=st.sampled_from(["predict", "synth", "bound"]))
def test_random_configs_succeed_or_fail_in_one_line(tmp_path, capsys, space, cosmology, sky, extra, command):
    sections = {"space": dict(space), "cosmology": cosmology, "sky": {**sky, "nside": sky.get("nside", 8),
                                                                       "lmax": sky.get("lmax", 12)}}
    if extra:
        sections["sky"].update(extra)
    cfg = tmp_path / "random.toml"
    cfg.write_text(_toml(sections))
    out = tmp_path / "out.fits"
    for p in tmp_path.glob("out*"):
        p.unlink()
    if command == "predict":
        code, outputs = main(["predict", str(cfg), "--json"]), []
    elif command == "bound":
        code, outputs = main(["bound", "--alpha-min", "20", str(cfg), "--table", str(tmp_path / "outb")]), \
            [tmp_path / "outb.ecsv", tmp_path / "outb.tex"]
    else:
        code, outputs = main(["synth", str(cfg), "--out", str(out)]), [out]
    _check_outcome(code, capsys, outputs)


maps = st.tuples(
    st.sampled_from([4, 8]),
    st.sampled_from(["gauss", "constant", "nan_patch", "all_unseen", "huge"]),
    st.integers(0, 2**16),
    st.sampled_from(["RING", "NESTED", None, "SPIRAL"]),
)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(spec=maps, radii=st.sampled_from(["20:40:10", "0:30:10", "30:20:5", "10:95:5", "a:b:c", "25:25:1"]),
       m_max=st.sampled_from([2, 4, 8, 40]), nside_work=st.sampled_from([4, 8, 6]),
       fwhm=st.sampled_from(["8", "-1", "0"]))
def test_random_small_maps_succeed_or_fail_in_one_line(tmp_path, capsys, spec, radii, m_max, nside_work, fwhm):
    nside, kind, seed, ordering = spec
    rng = np.random.default_rng(seed)
    npix = hp.nside2npix(nside)
    m = rng.normal(size=npix)
    if kind == "constant":
        m = np.full(npix, 3.0)
    elif kind == "nan_patch":
        m[: npix // 3] = np.nan
    elif kind == "all_unseen":
        m = np.full(npix, hp.UNSEEN)
    elif kind == "huge":
        m = m * 1e30
    path = tmp_path / "map.fits"
    from astropy.io import fits

    cols = [fits.Column(name="TEMPERATURE", format="E", array=m.astype(np.float32))]
    hdu = fits.BinTableHDU.from_columns(cols)
    hdu.header["PIXTYPE"] = "HEALPIX"
    hdu.header["NSIDE"] = nside
    if ordering:
        hdu.header["ORDERING"] = ordering
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(path, overwrite=True)
    plot = tmp_path / "plot.png"
    plot.unlink(missing_ok=True)
    code = main(["search", str(path), "--radii", radii, "--m-max", str(m_max), "--nside-work", str(nside_work),
                 "--fwhm", fwhm, "--json", "--quiet", "--plot", str(plot)])
    _check_outcome(code, capsys, [plot], err=capsys.readouterr().err)


@pytest.mark.parametrize("text", ["[space\nfamily=", "\x00\x01", "[space]\nfamily = 'E1'\nfamily = 'E2'\n", ""])
def test_garbage_config_text_is_one_line(tmp_path, capsys, text):
    cfg = tmp_path / "g.toml"
    cfg.write_bytes(text.encode("utf-8", "surrogateescape"))
    code = main(["predict", str(cfg)])
    _check_outcome(code, capsys, [])
    assert code == 2
