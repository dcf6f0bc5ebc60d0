"""Bad config, cosmology and space input through the command line: one line on stderr naming the
file and the key (or the generator file), exit status 2, no traceback, nothing written."""

import json
import math

import numpy as np
import pytest

from topology import geometry as geo
from topology.cli import main
from topology.config import load_config
from topology.cosmology import Cosmology
from topology.run import plan_from_config
from topology.scenario import scenario_from_config
from topology.skies import sky_params
from topology.spaces import seifert_weber as sw

LENS = """
[cosmology]
omega_k = -0.05
[space]
family = "lens"
p = 8
q = 3
"""

E1 = """
[space]
family = "E1"
lengths = [1.5, 1.5, 1.5]
[observer]
position = [0.1, 0.0, 0.0]
"""

SKY = """
[sky]
nside = 16
lmax = 24
seed = 1
"""

ISO = """
[space]
family = "isotropic"
""" + SKY

RUN = """
[[maps]]
name = "torus"
space = { family = "E1", lengths = [1.6, 1.6, 1.6] }
sky = { seed = 3 }

[mask]
galactic_b_deg = 10.0

[instrument]
fwhm_deg = 4.0
noise_uk = 1.0
nside = 16
lmax = 32

[search]
radii = "27:47:5"
nside_work = 16
fwhm_deg = 6.0
m_max = 12
centre_nside = 4

[significance]
n_null = 9
false_alarm = 0.2
n_injections = 3
injection_radii = "32:42:10"

[bounds]
families = [{ family = "E1", lengths = [1.9, 1.9, 1.9] }]
p_max = 6
m_max = 3

[execution]
engine = "serial"
"""

HYP = """
[cosmology]
omega_k = 0.15
[space]
family = "hyperbolic"
generators = "gens.json"
"""


def sub(text: str, old: str, new: str) -> str:
    assert old in text, old
    return text.replace(old, new, 1)


def cli(capsys, *argv):
    rc = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return rc, out, err


def assert_one_line(rc, out, err, words):
    """Exit 2, nothing on stdout, exactly one line on stderr holding every word, no traceback."""
    lines = err.strip().splitlines()
    assert rc == 2, err
    assert out == "" and len(lines) == 1, err
    assert "Traceback" not in err and "internal error" not in err
    for w in words:
        assert w in lines[0], (w, lines[0])


def predict(tmp_path, capsys, text, *words, files=None):
    cfg = tmp_path / "demo.toml"
    cfg.write_text(text)
    for name, body in (files or {}).items():
        (tmp_path / name).write_text(body)
    rc, out, err = cli(capsys, "predict", cfg, "--plot", tmp_path / "circles.png")
    assert_one_line(rc, out, err, words)
    assert not (tmp_path / "circles.png").exists()


def synth(tmp_path, capsys, text, *words, files=None):
    cfg = tmp_path / "demo.toml"
    cfg.write_text(text)
    for name, body in (files or {}).items():
        (tmp_path / name).write_text(body)
    out_files = [tmp_path / n for n in ("sky.fits", "sky.png", "pairs.json")]
    rc, out, err = cli(capsys, "synth", cfg, "--out", out_files[0], "--preview", out_files[1], "--pairs", out_files[2])
    assert_one_line(rc, out, err, words)
    assert not any(p.exists() for p in out_files)
    assert not list(tmp_path.glob("*mask*"))


def run(tmp_path, capsys, text, *words, files=None):
    cfg = tmp_path / "demo.toml"
    cfg.write_text(text)
    for name, body in (files or {}).items():
        (tmp_path / name).write_text(body)
    rc, out, err = cli(capsys, "run", cfg, "--out", tmp_path / "report", "--quiet")
    assert_one_line(rc, out, err, words)
    assert not (tmp_path / "report").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(["demo.toml", *(files or {})])


def bound(tmp_path, capsys, text, *words, files=None):
    cfg = tmp_path / "demo.toml"
    cfg.write_text(text)
    for name, body in (files or {}).items():
        (tmp_path / name).write_text(body)
    rc, out, err = cli(capsys, "bound", cfg, "--alpha-min", 20, "--table", tmp_path / "table", "--p-max", 3, "--m-max", 2)
    assert_one_line(rc, out, err, words)
    assert not list(tmp_path.glob("table*"))


# --- the base configs are valid: each bad case below differs from one by one change ----------
def test_base_configs_are_valid(tmp_path, capsys):
    for name, text in (("lens.toml", LENS), ("e1.toml", E1)):
        (tmp_path / name).write_text(text)
        rc, out, err = cli(capsys, "predict", tmp_path / name, "--json")
        assert rc == 0 and err == "", err
        assert json.loads(out)["pairs"]
    for text in (LENS + SKY, E1 + SKY, ISO):  # what synth reads (the skies are not made here: slow)
        (tmp_path / "sky.toml").write_text(text)
        cfg = load_config(tmp_path / "sky.toml")
        assert sky_params(cfg)["lmax"] == 24
        if text != ISO:
            assert scenario_from_config(cfg).space.family in ("lens", "E1")
    (tmp_path / "run.toml").write_text(RUN)
    plan = plan_from_config(load_config(tmp_path / "run.toml"), tmp_path / "report")
    assert plan.radii_deg.tolist() == [27.0, 32.0, 37.0, 42.0, 47.0]
    assert not (tmp_path / "report").exists()


# --- 9: TOML, sections, keys, types, ranges (predict and synth read the same config) ----------
SPACE_CASES = [
    # (config, words in the error line)
    (LENS + "q = = 3\n", ["demo.toml", "not valid TOML"]),
    (LENS + "[cosmolgy]\nh = 0.7\n", ["demo.toml", "unknown section [cosmolgy]", "did you mean 'cosmology'"]),
    (sub(LENS, "q = 3", "q = 3\nqq = 1"), ["demo.toml: [space] qq", "did you mean 'q'"]),
    (sub(LENS, "q = 3", "q = 3\nm = 1"), ["demo.toml: [space] m", "unknown key for family lens", "allowed: p, q"]),
    (sub(LENS, "omega_k = -0.05", "omega_k = -0.05\nomega_kk = 0"), ["demo.toml: [cosmology] omega_kk", "'omega_k'"]),
    (sub(E1, "position", "positon"), ["demo.toml: [observer] positon", "did you mean 'position'"]),
    (sub(E1, "lengths", "lenghts"), ["demo.toml: [space] lenghts", "did you mean 'lengths'"]),
    (sub(LENS, "p = 8", "p = 8.0"), ["demo.toml: [space] p", "must be int"]),
    (sub(LENS, "omega_k = -0.05", 'omega_k = "-0.05"'), ["demo.toml: [cosmology] omega_k", "must be int or float"]),
    (sub(E1, "[1.5, 1.5, 1.5]", '"1.5"'), ["demo.toml: [space] lengths", "must be list"]),
    (sub(E1, "[1.5, 1.5, 1.5]", '[1.5, "a", 1.5]'), ["demo.toml: [space] lengths", "list of numbers"]),
    (sub(E1, "[1.5, 1.5, 1.5]", "[1.5, nan, 1.5]"), ["demo.toml: [space] lengths", "finite"]),
    (sub(E1, "[0.1, 0.0, 0.0]", "[0.1, 0.0]"), ["demo.toml: [observer] position", "3 numbers"]),
    (E1 + "orientation = [10, 20]\n", ["demo.toml: [observer] orientation", "three Euler angles"]),
    (sub(E1, "[1.5, 1.5, 1.5]", "[1.5, -1.5, 1.5]"), ["demo.toml: [space] lengths", "positive"]),
    (sub(E1, "[1.5, 1.5, 1.5]", "[1.5, 0.0, 1.5]"), ["demo.toml: [space] lengths", "positive"]),
    (sub(E1, "[space]", "[space]\nangles = [0, 90, 90]"), ["demo.toml: [space] angles", "(0, 180)"]),
    (sub(E1, "[space]", '[space]\nlength_unit = "pc"'), ["demo.toml: [space] length_unit", "'Mpc'"]),
    (sub(LENS, "q = 3", "q = 2"), ["demo.toml: [space] q", "coprime"]),
    (sub(LENS, "q = 3", "q = 0"), ["demo.toml: [space] q", ">= 1"]),
    (sub(LENS, "q = 3", "q = -3"), ["demo.toml: [space] q", ">= 1"]),
    (sub(LENS, "q = 3", "q = 8"), ["demo.toml: [space] q", "0 < q < p"]),
    (sub(LENS, "q = 3", "q = 11"), ["demo.toml: [space] q", "0 < q < p"]),
    (sub(sub(LENS, "p = 8", "p = 1"), "q = 3", "q = 1"), ["demo.toml: [space] p", ">= 2"]),
    (sub(sub(LENS, "p = 8", "m = 1"), "family = \"lens\"", "family = \"prism\"").replace("q = 3\n", ""),
     ["demo.toml: [space] m", ">= 2"]),
    (sub(E1, '"E1"', '"E19"'), ["demo.toml: [space] family", "did you mean 'E9'"]),
    (sub(LENS, '"lens"', '"lense"'), ["demo.toml: [space] family", "did you mean 'lens'"]),
    (sub(LENS, '"lens"', '"dodecahedron"'), ["demo.toml: [space] family", "did you mean 'dodecahedral'"]),
    (sub(E1, 'family = "E1"\n', ""), ["demo.toml: [space] family", "missing"]),
    (sub(LENS, "omega_k = -0.05", "omega_k = 0.0"), ["demo.toml: [cosmology] omega_k", "needs omega_k < 0"]),
    ("[cosmology]\nomega_k = -0.02\n" + E1, ["demo.toml: [cosmology] omega_k", "flat family E1 needs omega_k = 0"]),
]


@pytest.mark.parametrize("text,words", SPACE_CASES)
def test_predict_bad_config(tmp_path, capsys, text, words):
    predict(tmp_path, capsys, text, *words)


@pytest.mark.parametrize("text,words", SPACE_CASES)
def test_synth_bad_config(tmp_path, capsys, text, words):
    synth(tmp_path, capsys, text + SKY, *words)


@pytest.mark.parametrize("change,words", [
    (("nside = 16", "nside = 24"), ["demo.toml: [sky] nside", "power of two"]),
    (("nside = 16", "nside = 0"), ["demo.toml: [sky] nside", "power of two"]),
    (("lmax = 24", "lmax = 48"), ["demo.toml: [sky] lmax", "3 nside - 1 = 47"]),
    (("seed = 1", "seed = 1\nnoise_uk = -3.0"), ["demo.toml: [sky] noise_uk", "negative"]),
    (("seed = 1", "seed = 1\nfwhm_deg = -1.0"), ["demo.toml: [sky] fwhm_deg", "negative"]),
    (("seed = 1", "sead = 1"), ["demo.toml: [sky] sead", "did you mean 'seed'"]),
    (("seed = 1", "seed = 1\nlengths = [1, 1, 1]"), ["demo.toml: [sky] lengths", "unknown key"]),
    (('family = "isotropic"', 'family = "isotropic"\nlengths = [1, 1, 1]'),
     ["demo.toml: [space] lengths", "isotropic sky takes no [space] parameters"]),
])
def test_synth_bad_sky(tmp_path, capsys, change, words):
    synth(tmp_path, capsys, sub(ISO, *change), *words)


def test_bound_bad_config(tmp_path, capsys):
    bound(tmp_path, capsys, sub(LENS, "q = 3", "q = 4"), "demo.toml: [space] q", "coprime")
    bound(tmp_path, capsys, sub(LENS, '"lens"', '"dodecahedron"'), "demo.toml: [space] family", "'dodecahedral'")
    bound(tmp_path, capsys, sub(E1, "[1.5, 1.5, 1.5]", "[1.5, -1.5, 1.5]"), "demo.toml: [space] lengths", "positive")
    rc, out, err = cli(capsys, "bound", "--alpha-min", 95)
    assert_one_line(rc, out, err, ["--alpha-min", "(0, 90]"])


# --- 9: the sections of `topology run`, inline skies and [bounds] families ---------------------
RUN_CASES = [
    (RUN + "x = \n", ["demo.toml", "not valid TOML"]),
    (RUN + "[signifcance]\nn_null = 9\n", ["demo.toml", "[signifcance]", "did you mean 'significance'"]),
    (sub(RUN, "m_max = 12", "mmax = 12"), ["demo.toml: [search] mmax", "did you mean 'm_max'"]),
    (sub(RUN, "noise_uk = 1.0", "noise = 1.0"), ["demo.toml: [instrument] noise", "'noise_uk'"]),
    (sub(RUN, "galactic_b_deg", "galactic_b"), ["demo.toml: [mask] galactic_b", "'galactic_b_deg'"]),
    (sub(RUN, 'engine = "serial"', 'engin = "serial"'), ["demo.toml: [execution] engin", "'engine'"]),
    (sub(RUN, "p_max = 6", "pmax = 6"), ["demo.toml: [bounds] pmax", "'p_max'"]),
    (sub(RUN, "p_max = 6", "p_max = 1"), ["demo.toml: [bounds] p_max", "at least 2"]),
    (sub(RUN, 'name = "torus"', 'name = "torus"\npth = "m.fits"'), ["demo.toml: [maps] pth", "did you mean 'path'"]),
    # inline space / observer / sky tables of a [[maps]] entry
    (sub(RUN, "lengths = [1.6", "lenghts = [1.6"), ["demo.toml: [[maps]] #1: [space] lenghts", "'lengths'"]),
    (sub(RUN, "[1.6, 1.6, 1.6] }", "[1.6, 1.6, 1.6], p = 3 }"), ["demo.toml: [[maps]] #1: [space] p", "family E1"]),
    (sub(RUN, "sky = { seed = 3 }", "sky = { sed = 3 }"), ["demo.toml: [[maps]] #1: [sky] sed", "'seed'"]),
    (sub(RUN, "sky = { seed = 3 }", "observer = { positon = [0, 0, 0] }"),
     ["demo.toml: [[maps]] #1: [observer] positon", "'position'"]),
    (sub(RUN, "sky = { seed = 3 }", "sky = { seed = 3 }\nobserver = { position = [0, 0] }"),
     ["demo.toml: [[maps]] #1: [observer] position", "3 numbers"]),
    (sub(RUN, "[1.6, 1.6, 1.6] }", "[1.6, -1.6, 1.6] }"), ["demo.toml: [[maps]] #1: [space] lengths", "positive"]),
    (sub(RUN, 'family = "E1", lengths = [1.6', 'family = "E19", lengths = [1.6'),
     ["demo.toml: [[maps]] #1: [space] family", "did you mean 'E9'"]),
    (sub(RUN, 'space = { family = "E1", lengths = [1.6, 1.6, 1.6] }', 'space = { family = "lens", p = 6, q = 3 }'),
     ["demo.toml: [[maps]] #1: [space] q", "coprime"]),
    (sub(RUN, 'space = { family = "E1", lengths = [1.6, 1.6, 1.6] }', 'space = { family = "lens", p = 5, q = 2 }'),
     ["demo.toml: [[maps]] #1: [cosmology] omega_k", "omega_k < 0"]),
    (sub(RUN, 'space = { family = "E1", lengths = [1.6, 1.6, 1.6] }', 'space = { family = "isotropic", p = 3 }'),
     ["demo.toml: [[maps]] #1: [space] p", "isotropic"]),
    (sub(RUN, "sky = { seed = 3 }", "sky = { seed = 3, nside = 20 }"), ["demo.toml: [[maps]] #1: [sky] nside", "power of two"]),
    (sub(RUN, "sky = { seed = 3 }", "sky = { seed = 3, lmax = 60 }"), ["demo.toml: [[maps]] #1 sky lmax", "<= 3 nside - 1 = 47"]),
    (sub(RUN, "sky = { seed = 3 }", "sky = { seed = 3, nside = 8 }"), ["demo.toml: [instrument] lmax", "<= 3 nside - 1 = 23"]),
    (sub(RUN, "sky = { seed = 3 }", "sky = { seed = 3, noise_uk = -1.0 }"), ["demo.toml: [[maps]] #1: [sky] noise_uk", "negative"]),
    (sub(RUN, "sky = { seed = 3 }", "sky = 3"), ["demo.toml: [maps] sky", "must be dict"]),
    # [bounds] families
    (sub(RUN, "{ family = \"E1\", lengths = [1.9", "{ family = \"E1\", lenghts = [1.9"),
     ["demo.toml: [bounds] families #1 lenghts", "did you mean 'lengths'"]),
    (sub(RUN, "[1.9, 1.9, 1.9] }", "[1.9, 1.9, 1.9], positon = [0, 0, 0] }"),
     ["demo.toml: [bounds] families #1 positon", "did you mean 'position'"]),
    (sub(RUN, "[1.9, 1.9, 1.9] }", "[1.9, 1.9, 1.9], position = [0, \"a\", 0] }"),
     ["demo.toml: [bounds] families #1 position", "list of numbers"]),
    (sub(RUN, "[1.9, 1.9, 1.9] }", "[1.9, 1.9, 1.9], orientation = [0, 0] }"),
     ["demo.toml: [bounds] families #1 orientation", "three Euler angles"]),
    (sub(RUN, "[1.9, 1.9, 1.9] }", "[1.9, -1.9, 1.9] }"), ["demo.toml: [bounds] families #1 lengths", "positive"]),
    (sub(RUN, '{ family = "E1", lengths = [1.9, 1.9, 1.9] }', '{ family = "lense", p = 5, q = 2 }'),
     ["demo.toml: [bounds] families #1 family", "did you mean 'lens'"]),
    (sub(RUN, '{ family = "E1", lengths = [1.9, 1.9, 1.9] }', '{ family = "dodecahedron" }'),
     ["demo.toml: [bounds] families #1 family", "did you mean 'dodecahedral'"]),
    (sub(RUN, '[1.9, 1.9, 1.9] }', '[1.9, 1.9, 1.9] }, { family = "lens", p = 8, q = 2 }'),
     ["demo.toml: [bounds] families #2 q", "coprime"]),
    (sub(RUN, '[1.9, 1.9, 1.9] }', '[1.9, 1.9, 1.9] }, { family = "prism", m = 1 }'),
     ["demo.toml: [bounds] families #2 m", ">= 2"]),
    (sub(RUN, '{ family = "E1", lengths = [1.9, 1.9, 1.9] }', '{ family = "isotropic" }'),
     ["demo.toml: [bounds] families #1 family", "multiply connected"]),
    (sub(RUN, '{ family = "E1", lengths = [1.9, 1.9, 1.9] }', '"E1"'), ["demo.toml: [bounds] families #1", "table"]),
    # types and ranges
    (sub(RUN, "nside_work = 16", "nside_work = 12"), ["demo.toml: [search] nside_work", "power of two"]),
    (sub(RUN, "centre_nside = 4", "centre_nside = 3"), ["demo.toml: [search] centre_nside", "power of two"]),
    (sub(RUN, "centre_nside = 4", "centre_nside = 4\norientation_nside = 6"),
     ["demo.toml: [search] orientation_nside", "power of two"]),
    (sub(RUN, "nside = 16", "nside = 20"), ["demo.toml: [instrument] nside", "power of two"]),
    (sub(RUN, "lmax = 32", "lmax = 48"), ["demo.toml: [instrument] lmax", "3 nside - 1 = 47"]),
    (sub(RUN, "noise_uk = 1.0", "noise_uk = -1.0"), ["demo.toml: [instrument] noise_uk", "negative"]),
    (sub(RUN, "fwhm_deg = 4.0", "fwhm_deg = -4.0"), ["demo.toml: [instrument] fwhm_deg", "negative"]),
    (sub(RUN, "fwhm_deg = 6.0", "fwhm_deg = -6.0"), ["demo.toml: [search] fwhm_deg", "negative"]),
    (sub(RUN, "n_null = 9", "n_null = 9.5"), ["demo.toml: [significance] n_null", "must be int"]),
    (sub(RUN, "false_alarm = 0.2", "false_alarm = 1.5"), ["demo.toml: [significance] false_alarm", "(0, 1)"]),
    # radii strings
    (sub(RUN, '"27:47:5"', '"5:90"'), ["demo.toml: [search] radii", "START:STOP:STEP"]),
    (sub(RUN, '"27:47:5"', '"a:b:c"'), ["demo.toml: [search] radii", "START:STOP:STEP"]),
    (sub(RUN, '"27:47:5"', '"27:47:0"'), ["demo.toml: [search] radii", "STEP > 0"]),
    (sub(RUN, '"27:47:5"', '"27:47:-5"'), ["demo.toml: [search] radii", "STEP > 0"]),
    (sub(RUN, '"27:47:5"', '"47:27:5"'), ["demo.toml: [search] radii", "START <= STOP"]),
    (sub(RUN, '"27:47:5"', '"0:47:5"'), ["demo.toml: [search] radii", "(0, 90]"]),
    (sub(RUN, '"27:47:5"', '"27:95:5"'), ["demo.toml: [search] radii", "(0, 90]"]),
    (sub(RUN, '"27:47:5"', '"nan:47:5"'), ["demo.toml: [search] radii", "finite"]),
    (sub(RUN, '"32:42:10"', '"5:90"'), ["demo.toml: [significance] injection_radii", "START:STOP:STEP"]),
    (sub(RUN, '"32:42:10"', '"a:b:c"'), ["demo.toml: [significance] injection_radii", "START:STOP:STEP"]),
    (sub(RUN, '"32:42:10"', '"32:42:0"'), ["demo.toml: [significance] injection_radii", "STEP > 0"]),
    (sub(RUN, '"32:42:10"', '"42:32:10"'), ["demo.toml: [significance] injection_radii", "START <= STOP"]),
    (sub(RUN, '"32:42:10"', '"30:90:30"'), ["demo.toml: [significance] injection_radii", "below 90"]),
    # the background of a run
    (sub(RUN, "[[maps]]", "[cosmology]\nomega_b_h2 = -0.02\n\n[[maps]]"), ["demo.toml: [cosmology] omega_b_h2", "positive"]),
    (sub(RUN, "[[maps]]", "[cosmology]\nomega_lambda = 5.0\n\n[[maps]]"),
     ["demo.toml: [cosmology] omega_lambda", "bounce", "no big bang"]),
]


@pytest.mark.parametrize("text,words", RUN_CASES)
def test_run_bad_config(tmp_path, capsys, text, words):
    run(tmp_path, capsys, text, *words)


# --- 10: backgrounds without a last-scattering surface, negative densities -----------------------
COSMO_CASES = [
    ("omega_b_h2 = -0.01", ["[cosmology] omega_b_h2", "positive"]),
    ("omega_b_h2 = 0.0", ["[cosmology] omega_b_h2", "positive"]),
    ("omega_c_h2 = -0.1", ["[cosmology] omega_c_h2", "negative"]),
    ("h = 0.0", ["[cosmology] h", "H0 = 100 h"]),
    ("h = -0.7", ["[cosmology] h", "H0 = 100 h"]),
    ("t_cmb = 0.0", ["[cosmology] t_cmb", "positive"]),
    ("n_eff = -1.0", ["[cosmology] n_eff", "negative"]),
    ("z_star = 0.5", ["[cosmology] z_star", "last scattering"]),
    ("omega_k = 1.5", ["[cosmology] omega_k", "(-1, 1)"]),
    # closed, chi_rec > pi R_c: the last-scattering sphere would wrap around S^3
    ("omega_k = -0.9", ["[cosmology] omega_k", "chi_rec / R_c = ", ">= pi", "wraps around S^3"]),
    ("omega_lambda = 1.5", ["[cosmology] omega_lambda", "Omega_K", ">= pi"]),
    # Omega_Lambda so large that H^2 vanishes after the big bang would have been: a bounce
    ("omega_lambda = 5.0", ["[cosmology] omega_lambda", "no last-scattering surface", "bounce", "no big bang"]),
    ("omega_lambda = 2.0", ["[cosmology] omega_lambda", "bounce"]),
    ("h = 2.0\nomega_k = -0.9", ["[cosmology] omega_k", "no last-scattering surface", "bounce"]),
    ("omega_lambda = -3.0", ["[cosmology] omega_lambda", "Omega_K", "(-1, 1)"]),
    ("omega_lambda = 0.7\nomega_k = 0.0", ["[cosmology] omega_lambda", "not both"]),
]


@pytest.mark.parametrize("line,words", COSMO_CASES)
def test_bad_cosmology(tmp_path, capsys, line, words):
    text = E1 + "[cosmology]\n" + line + "\n"
    predict(tmp_path, capsys, text, "demo.toml: " + words[0], *words[1:])
    bound(tmp_path, capsys, text, "demo.toml: " + words[0], *words[1:])


def test_bad_cosmology_synth(tmp_path, capsys):
    synth(tmp_path, capsys, E1 + SKY + "[cosmology]\nomega_lambda = 5.0\n", "demo.toml: [cosmology] omega_lambda",
          "no big bang")


def test_e2_minimum_and_bounce_redshift():
    # E^2 on a dense grid of z in [0, z_*] (independent of the closed-form extremum)
    for kw in (dict(), dict(omega_k=-0.5), dict(omega_k=0.5), dict(h=0.4, omega_k=-0.3)):
        c = Cosmology(**kw)
        zz = np.concatenate([np.linspace(0, 10, 200001), np.geomspace(10, c.zstar, 20001)])
        z_min, e2_min = c.e2_minimum()
        assert e2_min == pytest.approx(float(np.min(c.e2(zz))), rel=1e-9, abs=1e-12)
        assert 0 <= z_min <= c.zstar
    # Omega_m = 0.3138, Omega_K = -1.314, Omega_Lambda = 2 (flat probe, then Omega_Lambda given):
    # E^2 = Omega_r x^4 + Omega_m x^3 + Omega_K x^2 + Omega_Lambda vanishes at x = 1 + z_b
    import re

    from topology.cosmology import cosmology_from_section
    from topology.errors import InputError

    with pytest.raises(InputError) as e:
        cosmology_from_section({"omega_lambda": 2.0})
    z_b = float(re.search(r"reaches 0 at z = ([0-9.]+)", e.value.reason).group(1))
    probe = Cosmology()
    x = 1.0 + z_b
    e2 = probe.omega_r * x**4 + probe.omega_m * x**3 + (1 - probe.omega_m - probe.omega_r - 2.0) * x**2 + 2.0
    assert abs(e2) < 5e-3 and 0.5 < z_b < 0.6


# --- 11: hyperbolic generator files ------------------------------------------------------------
def _boost(axis, s):
    return sw.boost4(np.asarray(axis, dtype=float), s)


def _gens(mats, **extra):
    return json.dumps({"generators": [np.asarray(m).tolist() if isinstance(m, np.ndarray) else m for m in mats],
                       **extra})


_ROT = sw.rotation4(np.array([0.0, 0.0, 1.0]), 2 * math.pi / 5)
# e: a 72 deg rotation about an axis 1 R_c from the observer; a b = e is elliptic, a and b are not
_E = _boost([1, 0, 0], 1.0) @ _ROT @ _boost([1, 0, 0], -1.0)
_A = _boost([0, 1, 0], 2.0)
_B = geo.MINKOWSKI @ _A.T @ geo.MINKOWSKI @ _E
_NAN = _boost([1, 0, 0], 1.5).tolist()
_NAN[0][0] = float("nan")
_ROW3 = np.eye(4).tolist()
_ROW3[1] = [0, 1, 0]

GEN_CASES = [
    (_gens([np.diag([1.0, 2.0, 1.0, 1.0])]), ["gens.json generator 0", "not a Lorentz transformation"]),
    (_gens([np.diag([-1.0, -1.0, 1.0, 1.0])]), ["gens.json generator 0", "not orthochronous"]),
    (_gens([np.diag([1.0, -1.0, 1.0, 1.0])]), ["gens.json generator 0", "determinant -1"]),
    (_gens([np.eye(3)]), ["gens.json generator 0", "4x4", "3 rows"]),
    (_gens([_ROW3]), ["gens.json generator 0", "4x4", "lengths [4, 3, 4, 4]"]),
    (_gens([[["a", 0, 0, 0], [0, 1, 0, 0], [0, 0, 1, 0], [0, 0, 0, 1]]]), ["gens.json generator 0", "not a number"]),
    (_gens([[[True, 0, 0, 0], [0, 1, 0, 0], [0, 0, 1, 0], [0, 0, 0, 1]]]), ["gens.json generator 0", "not a number"]),
    (_gens([None]), ["gens.json generator 0", "4x4"]),
    (json.dumps({"generators": [_NAN]}), ["gens.json generator 0", "not finite"]),
    (_gens([_boost([1, 0, 0], 1.0).tolist()[0]]), ["gens.json generator 0", "flat list"]),
    (_gens([]), ["gens.json", "non-empty list"]),
    (json.dumps({"matrices": []}), ["gens.json", "needs a 'generators' list"]),
    (json.dumps([np.eye(4).tolist()]), ["gens.json", "needs a 'generators' list"]),
    ("{not json", ["gens.json", "not valid JSON"]),
    (_gens([_boost([1, 0, 0], 1.5)], fundamental_polyhedron={"circumradius": -1.0}),
     ["gens.json fundamental_polyhedron"]),
    # a fixed point: the observer (at the centre) on the axis of a rotation
    (_gens([_boost([1, 0, 0], 1.5), _ROT]), ["gens.json", "fixed point near the observer"]),
    # an elliptic product of two hyperbolic generators, its fixed axis 1 R_c from the observer
    (_gens([_A, _B]), ["gens.json", "elliptic", "fixed point"]),
]


@pytest.mark.parametrize("body,words", GEN_CASES)
def test_bad_generators_predict(tmp_path, capsys, body, words):
    predict(tmp_path, capsys, HYP, *words, files={"gens.json": body})


@pytest.mark.parametrize("body,words", [GEN_CASES[0], GEN_CASES[4], GEN_CASES[-2]])
def test_bad_generators_bound(tmp_path, capsys, body, words):
    bound(tmp_path, capsys, HYP, *words, files={"gens.json": body})


@pytest.mark.parametrize("body,words", [GEN_CASES[0], GEN_CASES[5], GEN_CASES[-2], GEN_CASES[-1]])
def test_bad_generators_run_bounds(tmp_path, capsys, body, words):
    text = sub(RUN, '{ family = "E1", lengths = [1.9, 1.9, 1.9] }', '{ family = "hyperbolic", generators = "gens.json" }')
    run(tmp_path, capsys, text, *words, files={"gens.json": body})


def test_unreadable_generator_files(tmp_path, capsys):
    predict(tmp_path, capsys, HYP, "gens.json", "cannot read generator file")  # missing
    (tmp_path / "gens.json").mkdir()
    predict(tmp_path, capsys, HYP, "gens.json", "cannot read generator file")  # a folder
    (tmp_path / "gens.json").rmdir()
    (tmp_path / "gens.json").write_bytes(b"\xff\xfe\x00\x81")
    predict(tmp_path, capsys, HYP, "gens.json", "not UTF-8")
    toml = sub(HYP, "gens.json", "gens.toml")
    predict(tmp_path, capsys, toml, "gens.toml", "not valid TOML", files={"gens.toml": "generators = [[1, 2]"})
    predict(tmp_path, capsys, toml, "gens.toml generator 0", "not a Lorentz",
            files={"gens.toml": "generators = [[[1, 0, 0, 0], [0, 2, 0, 0], [0, 0, 1, 0], [0, 0, 0, 1]]]"})
    predict(tmp_path, capsys, toml, "gens.toml generator 0", "4x4",
            files={"gens.toml": "generators = [[[1, 0, 0, 0], [0, 1, 0], [0, 0, 1, 0], [0, 0, 0, 1]]]"})
    predict(tmp_path, capsys, sub(HYP, '"gens.json"', "3"), "demo.toml: [space] generators", "must be str")
    predict(tmp_path, capsys, HYP + "[observer]\nposition = [0.0, 0.0, 1.2]\n", "demo.toml: [observer] position",
            "|p| < 1", files={"gens.json": _gens([_boost([1, 0, 0], 1.5)])})


def test_small_lss_radius_in_seifert_weber(tmp_path, capsys):
    # regression: a search radius smaller than every generator's displacement left an empty
    # batch of words (internal error). chi_rec / R_c = 0.03 < half the shortest closed geodesic
    # (1.7458 R_c, shipped metadata), so there are no circles
    (tmp_path / "sw.toml").write_text('[cosmology]\nomega_k = 0.0001\n[space]\nfamily = "hyperbolic"\n'
                                      'generators = "seifert_weber.json"\n')
    rc, out, err = cli(capsys, "predict", tmp_path / "sw.toml", "--json")
    doc = json.loads(out)
    assert rc == 0 and doc["pairs"] == [] and doc["chi_rec_over_curvature_radius"] < 1.7458 / 2
