"""The demo survey end to end (configs/demo.toml): the multiply connected map is detected at
the right radius and place, the isotropic map is not, and its bound follows from the efficiency
curve. Runs the README's main job (a few minutes on 2 cores)."""

import math
from pathlib import Path

import numpy as np
import pytest

from topology.circles import predict_circles
from topology.config import load_config
from topology.run import plan_from_config, run
from topology.scenario import scenario_from_config

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    plan = plan_from_config(load_config(ROOT / "configs" / "demo.toml"), tmp_path_factory.mktemp("demo") / "report")
    return plan, run(plan)


def _vec(lonlat):
    lon, lat = np.radians(lonlat)
    return np.array([np.cos(lat) * np.cos(lon), np.cos(lat) * np.sin(lon), np.sin(lat)])


def test_multiply_connected_map_detected_at_a_predicted_pair(demo):
    plan, summary = demo
    a = next(m for m in summary["maps"] if m["name"] == "survey-A")
    assert a["detected"]
    best = a["candidates"][0]
    assert best["above_threshold"]
    # the predicted back-to-back pairs of the demo space (Cornish, Spergel & Starkman 1998 radii)
    sc = scenario_from_config(load_config(ROOT / "configs" / "synth_survey_a.toml"))
    pairs = [p for p in predict_circles(sc.space, sc.observer, sc.chi) if p.center_a @ p.center_b < -0.999]
    match = [p for p in pairs if abs(math.degrees(p.radius) - best["radius_deg"]) <= 1.0]
    assert match, (best, [math.degrees(p.radius) for p in pairs])
    p = match[0]
    # the found centre A is one of the two predicted centres (a back-to-back pair: B follows)
    sep = min(np.degrees(np.arccos(np.clip(_vec(best["center_a"]) @ c, -1, 1))) for c in (p.center_a, p.center_b))
    assert sep < 2.0
    assert best["orientation"] == "opposite"


def test_isotropic_map_not_detected_and_bound_follows_efficiency(demo):
    plan, summary = demo
    b = next(m for m in summary["maps"] if m["name"] == "survey-B")
    assert not b["detected"]
    cal = summary["calibration"]
    amin = b["alpha_min_deg"]
    assert amin is not None
    eff = np.array(cal["efficiency"])
    radii = np.array(cal["injection_radii_deg"])
    assert np.all(eff[radii >= amin] >= cal["efficiency_level"])
    # check: Planck 2015 XVIII conversion, R_i > chi_rec cos(alpha_min) for the cubic torus
    assert b["bounds"]["flat"]["cubic_torus_inscribed_radius_over_chi_rec"] == pytest.approx(math.cos(math.radians(amin)))
    assert (plan.out_dir / "bounds.tex").read_text().count("alpha") >= 1


def test_report_latex_compiles_and_page_renders(demo, tmp_path):
    # the report's real parts, as a user has them: pdflatex on bounds.tex, Chromium on the page
    from rendering import compile_latex, render_page

    plan, summary = demo
    out = plan.out_dir
    assert any(m["bounds"] for m in summary["maps"])  # survey-B gives a bound: bounds.tex is a table
    compile_latex(out / "bounds.tex", tmp_path / "tex")
    grey, dom = render_page(out / "index.html", tmp_path / "page")
    # candidates, thresholds, efficiency, flat and curved bounds; S_max and sky of both maps, efficiency,
    # Omega_K; the configured families of [bounds] with their verdicts
    assert dom.count("<table") == 5 and dom.count("<img") == 6
    assert "E2 (lengths 1.55, 1.7, 0.8)" in dom and "excluded" in dom and "E1 (lengths 1.8, 1.8, 1.8)" in dom
    assert "What these results assume" in dom
    # the figures are drawn: the screenshot is far from a blank page
    assert grey.shape[1] == 1000 and grey.std() > 0.05 and (grey < 0.5).mean() > 0.01
