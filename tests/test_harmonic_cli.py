"""`topology harmonic`: the divergence printed, as JSON, as a figure; bad input in one line."""

import json

import numpy as np
import pytest

from topology import geometry as geo
from topology.cli import main
from topology.cosmology import Cosmology
from topology.harmonic import space_covariance
from topology.harmonic.kl import gaussian_kl
from topology.spaces import build_space

CONFIG = """
[space]
family = "E1"
lengths = [1.2, 1.2, 1.2]

[observer]
position = [0.1, 0.2, 0.3]

[harmonic]
lmax = 4
scales = [1.0, 2.0]
"""


def _write(tmp_path, text, name="h.toml"):
    p = tmp_path / name
    p.write_text(text)
    return p


def test_json_rows_and_plot(tmp_path, capsys):
    cfg = _write(tmp_path, CONFIG)
    png = tmp_path / "kl.png"
    assert main(["harmonic", str(cfg), "--json", "--plot", str(png)]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["lmax"] == 4 and out["n_coefficients"] == 21 and out["form"] == "harmonic"
    assert [r["scale"] for r in out["rows"]] == [1.0, 2.0]
    # the same number from Python: E1 of side 1.2 (the scale 1 row) and 2.4 (the scale 2 row)
    obs = geo.Observer.make("flat", [0.1, 0.2, 0.3])
    cov = space_covariance(build_space({"family": "E1", "lengths": [1.2] * 3}), obs, Cosmology(), lmax=4)
    ref = gaussian_kl(cov.matrix, np.diag(cov.iso_diagonal)).kl_nats
    assert out["kl_nats"] == pytest.approx(ref, rel=1e-12)
    assert out["rows"][0]["kl_nats"] == pytest.approx(ref, rel=1e-12)
    assert out["rows"][1]["kl_nats"] < out["rows"][0]["kl_nats"] / 10        # 2.4 chi_rec: no circles
    assert out["rows"][0]["circles"] and not out["rows"][1]["circles"]
    assert out["rows"][1]["nearest_image"] == pytest.approx(2.4)
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_text_output_with_noise_and_mask(tmp_path, capsys):
    cfg = _write(tmp_path, CONFIG.replace("scales = [1.0, 2.0]", 'nside = 4\nnoise_uk = 5.0\nmask = "galactic"'))
    assert main(["harmonic", str(cfg)]) == 0
    text = capsys.readouterr().out
    assert "pixel form" in text and "KL divergence from isotropy:" in text


@pytest.mark.parametrize("edit,where", [
    (("lmax = 4", "lmax = 4\nlmaks = 3"), "[harmonic] lmaks"),
    (("lmax = 4", "lmax = 1"), "[harmonic] lmax"),
    (("scales = [1.0, 2.0]", "scales = [1.0, -2.0]"), "[harmonic] scales"),
    (("scales = [1.0, 2.0]", 'mask = "galactic"'), "[harmonic] mask"),
    (("scales = [1.0, 2.0]", "nside = 4"), "[harmonic] noise_uk"),
    (("scales = [1.0, 2.0]", "nside = 1"), "[harmonic] lmax"),
    (('family = "E1"\nlengths = [1.2, 1.2, 1.2]', 'family = "lens"\np = 5\nq = 2'), "[harmonic] terms"),
])
def test_bad_input_is_one_line_naming_key_and_file(tmp_path, capsys, edit, where):
    cfg = _write(tmp_path, CONFIG.replace(*edit))
    if edit[1].startswith('family = "lens"'):
        cfg.write_text(cfg.read_text().replace("position = [0.1, 0.2, 0.3]", "position = [1.0, 0.0, 0.0, 0.0]")
                       .replace("lmax = 4", 'lmax = 4\nterms = ["sw", "doppler", "isw"]')   # SW only
                       + "\n[cosmology]\nomega_k = -0.05\n")
    assert main(["harmonic", str(cfg)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and where in err[0] and str(cfg) in err[0], err


def test_plot_needs_scales_and_a_known_suffix(tmp_path, capsys):
    cfg = _write(tmp_path, CONFIG.replace("scales = [1.0, 2.0]", ""))
    assert main(["harmonic", str(cfg), "--plot", str(tmp_path / "kl.png")]) == 2
    assert "--plot" in capsys.readouterr().err
    cfg = _write(tmp_path, CONFIG)
    assert main(["harmonic", str(cfg), "--plot", str(tmp_path / "kl.gif")]) == 2
    assert not (tmp_path / "kl.gif").exists()
