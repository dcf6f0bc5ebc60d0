"""The report's figures say what they show: the Omega_K figure one colour per verdict with the
excluded side below each bound; the sky figure a legend naming each circle pair, a labelled
graticule and a symmetric colour scale with a rounded limit; plot titles in words."""

import math
import textwrap
from types import SimpleNamespace

import healpy as hp
import matplotlib.colors as mcolors
import numpy as np
import pytest
from matplotlib.figure import Figure

from topology.bounds import bound_summary
from topology.cli import main
from topology.plots import round_up, symmetric_limit
from topology.report import figures
from topology.run.report_parts import Analysis, sky_figure
from topology.spaces.registry import describe_space


@pytest.fixture
def caught(monkeypatch):
    """The figures handed to save_figure (kept open, not written)."""
    figs = []
    monkeypatch.setattr(figures, "save_figure", lambda fig, base: figs.append(fig) or [base.name + ".png"])
    yield figs
    for f in figs:
        figures.pyplot().close(f)


# --- colour limits -----------------------------------------------------------------------------
@pytest.mark.parametrize("value, expected", [(107.562, 110.0), (124.818, 130.0), (110.0, 110.0), (99.95, 100.0),
                                             (0.000312, 0.00032), (1.0, 1.0), (5.55e6, 5.6e6)])
def test_round_up_to_two_significant_figures(value, expected):
    assert round_up(value) == expected


def test_symmetric_limit_is_the_rounded_percentile():
    rng = np.random.default_rng(1)
    v = rng.normal(0.0, 40.0, 5000)
    p = np.percentile(np.abs(v), 99.5)
    lim = symmetric_limit(np.concatenate([v, [np.nan, np.inf]]))
    assert p <= lim <= 1.1 * p and lim == float(f"{lim:.2g}")
    assert symmetric_limit([]) == 1.0


# --- Omega_K -----------------------------------------------------------------------------------
def _bars(ax):
    """(y centre, left, right, facecolour) of every bar of a barh axis."""
    out = []
    for r in ax.patches:
        x0, w = r.get_x(), r.get_width()
        out.append((round(r.get_y() + r.get_height() / 2, 6), x0, x0 + w, mcolors.to_hex(r.get_facecolor())))
    return out


def test_omega_k_figure_one_colour_per_verdict_excluded_side_below_the_bound(tmp_path, caught):
    bounds = bound_summary(20.0, p_max=5, m_max=3)
    rows = bounds["spherical"]
    bounds["spherical"] = rows + [{"family": "lens", "p": 99, "q": 1, "min_omega_k": None}]
    assert figures.figure_omega_k(tmp_path / "omega_k", bounds) is not None
    (fig,) = caught
    ax = fig.axes[0]
    bars = _bars(ax)
    colours = {c for *_, c in bars}
    assert len(colours) == 2  # one colour for allowed, one for excluded
    left_end = ax.get_xlim()[0]
    allowed = {}
    excluded = {}
    for y, x0, x1, c in bars:
        (allowed if x1 == pytest.approx(0.0, abs=1e-15) else excluded)[y] = (x0, x1, c)
    assert len(allowed) == len(excluded) == len(rows)
    (allowed_colour,) = {c for *_, c in allowed.values()}
    (excluded_colour,) = {c for *_, c in excluded.values()}
    assert allowed_colour != excluded_colour
    # rows top to bottom in table order; allowed from the bound to 0, excluded from the axis end to it
    for row, y in zip(rows, sorted(allowed, reverse=True)):
        bound = row["min_omega_k"]
        assert bound < 0  # spherical spaces are closed
        assert allowed[y][0] == pytest.approx(bound)
        assert excluded[y][0] == pytest.approx(left_end) and excluded[y][1] == pytest.approx(bound)
    assert ax.get_xlim()[1] == 0.0 and left_end < min(r["min_omega_k"] for r in rows)
    # readable: labels of at least 9 pt on a figure at least 0.25 inch per row, each naming its bound
    labels = ax.get_yticklabels()
    assert len(labels) == len(rows)
    assert all(t.get_fontsize() >= 9 for t in labels + ax.get_xticklabels())
    assert fig.get_size_inches()[1] >= 0.25 * len(rows)
    assert labels[0].get_text() == f"lens L(2, 1): > {rows[0]['min_omega_k']:.3g}"
    legend = ax.get_legend()
    texts = [t.get_text() for t in legend.get_texts()]
    assert texts[0].startswith("allowed") and texts[1].startswith("excluded")
    assert [mcolors.to_hex(h.get_facecolor()) for h in legend.legend_handles] == [allowed_colour, excluded_colour]
    assert "excluded" in ax.get_xlabel() and "Omega_K" in ax.get_xlabel()
    assert "not shown: 1 space excluded nowhere" in ax.get_xlabel()


def test_omega_k_figure_needs_a_bound():
    assert figures.figure_omega_k(None, {"spherical": [{"family": "lens", "p": 2, "q": 1, "min_omega_k": None}]}) is None


# --- sky figure --------------------------------------------------------------------------------
NSIDE = 16


def _cand(lon, lat, radius, s, above):
    return {"center_a": [lon, lat], "center_b": [(lon + 180) % 360, -lat], "radius_deg": radius, "twist_deg": 0.0,
            "orientation": "opposite", "S": s, "p_value": 0.01 if above else 0.4, "above_threshold": above}


def _sky(caught, tmp_path, m, values=None, path=None):
    plan = SimpleNamespace(maps=[SimpleNamespace(name=m["name"], path=path, field=None, ordering=None)], mask={})
    analysis = Analysis(maps=[m], calibration={}, thresholds=None, null=np.zeros((1, 1)),
                        map_values={} if values is None else {m["name"]: values})
    assert sky_figure(plan, analysis, m, tmp_path)
    fig = caught[-1]
    return fig, fig.axes[0], fig.axes[1]


def _random_map(seed=3):
    return np.random.default_rng(seed).normal(0.0, 45.0, hp.nside2npix(NSIDE))


def test_sky_figure_names_each_pair_and_rounds_its_colour_scale(tmp_path, caught):
    values = _random_map()
    m = {"name": "toy", "detected": True,
         "candidates": [_cand(30, 10, 37.0, 0.943, True), _cand(200, -20, 42.0, 0.91, True),
                        _cand(100, 40, 27.0, 0.5, False)],
         "predicted": [_cand(0, 0, 36.87, 0.0, False), _cand(90, 0, 36.87, 0.0, False)]}
    for p in m["predicted"]:
        del p["S"], p["above_threshold"], p["p_value"]
    fig, ax, cbar_ax = _sky(caught, tmp_path, m, values)
    texts = [t.get_text() for t in ax.get_legend().get_texts()]
    assert texts == ["predicted by the sky's space: 2 pairs, radius 36.9 deg",
                     "detected: radius 37.0 deg, S = 0.94", "detected: radius 42.0 deg, S = 0.91"]
    lines = ax.get_legend().get_lines()
    assert lines[0].get_linestyle() == "--" and mcolors.to_hex(lines[0].get_color()) == mcolors.to_hex("0.35")
    assert len({mcolors.to_hex(ln.get_color()) for ln in lines}) == 3
    # symmetric colour scale, limit the 99.5th percentile of |T| rounded up to two significant figures
    (mesh,) = ax.collections
    lo, hi = mesh.get_clim()
    p = np.percentile(np.abs(values), 99.5)
    assert lo == -hi and hi == round_up(p) and hi == float(f"{hi:.2g}") and p <= hi <= 1.1 * p
    ticks = cbar_ax.get_yticks()
    assert ticks[0] == lo and ticks[-1] == hi
    # coordinate frame stated, meridians and parallels labelled
    title = ax.get_title()
    assert "toy (detected: 2 pairs above threshold)" in title and "observer's frame" in title
    assert "longitude grows to the left" in title
    assert [t.get_text() for t in ax.get_xticklabels()] == ["120°", "60°", "0°", "300°", "240°"]
    assert [t.get_text() for t in ax.get_yticklabels()] == ["-60°", "-30°", "0°", "30°", "60°"]
    assert all(t.get_fontsize() >= 9 for t in ax.get_xticklabels() + ax.get_yticklabels())


def test_sky_figure_without_detection_names_the_best_candidate(tmp_path, caught):
    m = {"name": "quiet", "detected": False,
         "candidates": [_cand(30, 10, 32.0, 0.412, False), _cand(200, -20, 42.0, 0.3, False)], "predicted": []}
    _, ax, _ = _sky(caught, tmp_path, m, _random_map(4))
    assert [t.get_text() for t in ax.get_legend().get_texts()] == [
        "best candidate (not significant): radius 32.0 deg, S = 0.41"]
    assert "quiet (no detection)" in ax.get_title()


def test_sky_figure_of_a_fits_map_states_its_frame_and_unit(tmp_path, caught):
    path = tmp_path / "galactic.fits"
    hp.write_map(str(path), _random_map(5), coord="G", column_units="uK", dtype=np.float64)
    m = {"name": "data", "detected": False, "candidates": [_cand(10, 5, 30.0, 0.2, False)], "predicted": []}
    _, ax, cbar_ax = _sky(caught, tmp_path, m, path=str(path))
    assert "Galactic coordinates" in ax.get_title()
    assert cbar_ax.get_ylabel() == "T [uK]"


# --- titles in words ---------------------------------------------------------------------------
@pytest.fixture
def titles(monkeypatch):
    """The axis titles of every figure saved."""
    seen = []
    save = Figure.savefig

    def record(self, *a, **kw):
        seen.extend(ax.get_title() for ax in self.axes if ax.get_title())
        return save(self, *a, **kw)

    monkeypatch.setattr(Figure, "savefig", record)
    return seen


def _cfg(tmp_path, text):
    p = tmp_path / "c.toml"
    p.write_text(textwrap.dedent(text))
    return str(p)


def test_predict_plot_title_is_words(tmp_path, titles, capsys):
    cfg = _cfg(tmp_path, """
        [space]
        family = "E2"
        lengths = [1.55, 1.7, 0.8]
        [observer]
        position = [0.12, -0.05, 0.0]
        """)
    assert main(["predict", cfg, "--plot", str(tmp_path / "c.png")]) == 0
    (title,) = titles
    assert title.startswith("E2 (half-turn space), lengths 1.55, 1.7, 0.8 chi_rec\n")
    assert "{" not in title and "'" not in title


def test_synth_preview_title_is_words(tmp_path, titles, capsys):
    cfg = _cfg(tmp_path, """
        [cosmology]
        omega_k = -0.05
        [space]
        family = "dodecahedral"
        [sky]
        nside = 16
        lmax = 8
        kmax = 12
        seed = 3
        """)
    assert main(["synth", cfg, "--out", str(tmp_path / "d.fits"), "--preview", str(tmp_path / "d.png")]) == 0
    (title,) = titles
    assert title.startswith("dodecahedral space, seed 3\n") and "{" not in title


@pytest.mark.parametrize("family, params, words", [
    ("E1", {"lengths": [1.0, 1.0, 1.0], "angles": [90.0, 90.0, 60.0]},
     "E1 (3-torus), lengths 1, 1, 1 chi_rec, angles 90, 90, 60 deg"),
    ("E2", {"lengths": [1.0, 1.0, 0.5], "angle": 60.0}, "E2 (half-turn space), lengths 1, 1, 0.5 chi_rec, angle 60 deg"),
    ("lens", {"p": 5, "q": 2}, "lens space L(5, 2)"),
    ("prism", {"m": 3}, "prism space, m = 3"),
    ("hyperbolic", {"generators": "/some/where/sw.json"}, "hyperbolic space, generators sw.json"),
    ("isotropic", {}, "isotropic sky (no topology)"),
])
def test_describe_space(family, params, words):
    assert describe_space(family, params) == words
