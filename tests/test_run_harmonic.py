"""`topology run` with a [harmonic] section: the low-l likelihood bound of each flat [bounds]
family, written beside the circle bound (table, page, LaTeX), equal to what the harmonic API
gives for the same map; a spherical family is listed as not computed; bad [harmonic] keys stop
the run in one line before any output; --resume reuses the likelihood tasks."""

import json

import healpy as hp
import numpy as np
import pytest
from astropy.table import Table

from test_bad_input_run import _one_line_error, _toml
from topology.cli import main
from topology.config import config_from_dict
from topology.cosmology import Cosmology
from topology.harmonic.survey import divergence_rows, map_bound, read_map_pixels, settings_from_config

NSIDE = 8
HARMONIC = {"lmax": 5, "nside": NSIDE, "noise_uk": 2.0, "fwhm_deg": 6.0, "scales": [0.3, 0.6, 1.2], "n_cal": 20,
            "n_psi": 1, "seed": 3}
E1 = {"family": "E1", "lengths": [1.0, 1.0, 1.0]}


def _config(folder, **harmonic):
    from topology.skies.instrument import observe
    from topology.skies.isotropic import isotropic_sky

    sky = isotropic_sky(Cosmology(), lmax=3 * NSIDE - 1, terms=("sw",), seed=5)
    hp.write_map(str(folder / "sky.fits"), observe(sky, nside=NSIDE, lmax=3 * NSIDE - 1, fwhm_deg=6.0, noise_uk=2.0,
                                                   seed=5), overwrite=True, dtype=np.float64)
    data = {
        "maps": [{"name": "sky", "path": "sky.fits"}],
        "instrument": {"fwhm_deg": 6.0, "noise_uk": 2.0, "nside": NSIDE, "lmax": 16},
        "search": {"radii": "40:40:10", "nside_work": NSIDE, "fwhm_deg": 8.0, "m_max": 8, "centre_nside": 2},
        "significance": {"n_null": 4, "false_alarm": 0.5, "n_injections": 1, "injection_radii": "40:40:10",
                         "injection_families": ["E1"], "seed": 2},
        "bounds": {"p_max": 3, "m_max": 2},
        "harmonic": {k: v for k, v in {**HARMONIC, **harmonic}.items() if v is not None},
        "execution": {"engine": "serial"},
    }
    cfg = folder / "run.toml"
    families = ('families = [{ family = "E1", lengths = [1.0, 1.0, 1.0] }, { family = "lens", p = 5, q = 1 }]\n')
    cfg.write_text(_toml(data).replace("[bounds]\n", "[bounds]\n" + families))
    return cfg


def _direct(map_path):
    """The same map through `topology harmonic --map`'s functions: the family as [space]."""
    cfg = config_from_dict({"space": E1, "observer": {"position": [0.0, 0.0, 0.0]}, "harmonic": HARMONIC})
    s = settings_from_config(cfg)
    values, px = read_map_pixels(s, map_path, None, Cosmology())
    kept = []
    divergence_rows(cfg, s, keep=kept)
    return map_bound(s, values, px, kept)


def test_run_writes_the_likelihood_bound_beside_the_circle_bound(tmp_path, capsys):
    cfg = _config(tmp_path)
    out = tmp_path / "report"
    assert main(["run", str(cfg), "--out", str(out)]) == 0
    direct = _direct(tmp_path / "sky.fits")

    prof = Table.read(out / "harmonic_profile.ecsv", format="ascii.ecsv")
    assert list(prof["scale"]) == HARMONIC["scales"]
    for row, ref in zip(prof, direct["rows"]):
        assert row["log_ratio"] == pytest.approx(ref["log_ratio"], rel=1e-7, abs=1e-7)
        assert row["threshold"] == pytest.approx(ref["threshold"], rel=1e-7, abs=1e-7)
        assert (row["excluded"] == "yes") == ref["excluded"]
        assert row["isotropic_exclusion_rate"] == pytest.approx(ref["isotropic_exclusion_rate"])
    # the smallest torus (side 0.3 chi_rec) is far from this isotropic sky: excluded
    assert direct["rows"][0]["excluded"] and direct["bound_scale"] is not None

    bounds = Table.read(out / "harmonic_bounds.ecsv", format="ascii.ecsv")
    e1, lens = bounds[0], bounds[1]
    assert e1["space"] == "E1 (lengths 1, 1, 1)"
    assert e1["likelihood_bound"] == pytest.approx(direct["bound_scale"])
    assert e1["circle_verdict"].startswith("no circle bound")   # n_injections = 1 gives no alpha_min
    assert lens["status"].startswith("not computed") and np.ma.is_masked(lens["likelihood_bound"])
    assert bounds.meta["n_cal"] == 20 and bounds.meta["lmax"] == 5 and bounds.meta["nside"] == NSIDE

    page = (out / "index.html").read_text()
    assert "bounds: low-l likelihood" in page and "E1 (lengths 1, 1, 1)" in page
    assert f"every scale up to {direct['bound_scale']:.4g} excluded" in page   # the map's answer
    tex = (out / "bounds.tex").read_text()
    assert r"low-$\ell$" in tex and f"{direct['bound_scale']:.3f}" in tex
    from rendering import compile_latex

    compile_latex(out / "bounds.tex", tmp_path / "tex")
    summary = json.loads((out / "summary.json").read_text())
    assert summary["maps"][0]["harmonic"][0]["bound_scale"] == pytest.approx(direct["bound_scale"])
    assert "low-l likelihood" in summary["caution"]

    capsys.readouterr()
    assert main(["run", str(cfg), "--out", str(out), "--resume"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["provenance"]["tasks"]["computed"] == 0
    assert Table.read(out / "harmonic_profile.ecsv", format="ascii.ecsv")["log_ratio"].tolist() == \
        prof["log_ratio"].tolist()


@pytest.mark.parametrize("harmonic, where", [
    ({"lmaxx": 5}, "[harmonic] lmaxx"),
    ({"nside": None}, "needs nside"),
    ({"noise_uk": 1.0}, "[harmonic] noise_uk"),           # below the maps' own noise
])
def test_bad_harmonic_keys_stop_the_run_in_one_line(tmp_path, capsys, harmonic, where):
    cfg = _config(tmp_path, **harmonic)
    out = tmp_path / "report"
    assert main(["run", str(cfg), "--out", str(out)]) == 2
    line = _one_line_error(capsys)
    assert where in line, line
    assert not out.exists()


def test_degrading_keeps_the_signal_and_predicts_the_noise():
    """A band-limited sky at N_side 16 (beam 6 deg, pixel window 16) degraded to N_side 8 (beam 10
    deg, pixel window 8) is the same a_lm synthesised directly at N_side 8 with that window; white
    noise degraded alike has the per-pixel rms degraded_noise predicts (common practice: the noise
    power of a pixel is sum (2l+1)/(4 pi) N_l)."""
    from types import SimpleNamespace

    from topology.run.harmonic import degrade, degraded_noise, window_ratio
    from topology.skies.instrument import beam_window, pixel_window

    s = SimpleNamespace(nside=8, fwhm_deg=10.0, pixwin=True)
    ratio = window_ratio(s, 6.0, 16)
    rng = np.random.default_rng(1)
    lmax = 3 * 8 - 1
    alm = (rng.normal(size=hp.Alm.getsize(lmax)) + 1j * rng.normal(size=hp.Alm.getsize(lmax))) * 30.0
    alm[:lmax + 1] = alm[:lmax + 1].real                       # m = 0 coefficients are real
    fine = hp.alm2map(hp.almxfl(alm, beam_window(6.0, lmax) * pixel_window(16, lmax)), 16, lmax=lmax)
    want = hp.alm2map(hp.almxfl(alm, beam_window(10.0, lmax) * pixel_window(8, lmax)), 8, lmax=lmax)
    keep = np.ones(fine.size, bool)
    got, kept = degrade(fine, keep, 8, ratio)
    assert kept.all()
    assert np.max(np.abs(got - want)) < 1e-3 * np.std(want)

    keep[:48] = False                                          # a polar cap of N_side 16
    _, kept = degrade(fine, keep, 8, ratio)
    parents = np.unique(hp.ring2nest(16, np.arange(48)) // 4)  # NESTED: a pixel's parent is its index // 4
    assert sorted(np.flatnonzero(~kept)) == sorted(hp.nest2ring(8, parents))

    noise = np.array([degrade(rng.normal(0.0, 5.0, fine.size), np.ones(fine.size, bool), 8, ratio)[0]
                      for _ in range(20)])
    assert np.std(noise) == pytest.approx(degraded_noise(5.0, 16, ratio), rel=0.05)
