"""The figures of a report (PNG and PDF): S_max against radius, the sky with candidate circles,
the detection efficiency and the Omega_K allowed for spherical spaces."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..plots import pyplot


def save_figure(fig, base: Path) -> list[str]:
    """Save ``fig`` as ``base``.png and ``base``.pdf and close it; returns the file names."""
    out = []
    for ext in ("png", "pdf"):
        p = base.with_suffix("." + ext)
        fig.savefig(p, dpi=110, bbox_inches="tight")
        out.append(p.name)
    pyplot().close(fig)
    return out


def figure_smax(base: Path, name: str, radii_deg, smax, th, smax_null) -> list[str]:
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(7, 4))
    lo, hi = np.quantile(smax_null, [0.16, 0.84], axis=0)
    lo2, hi2 = np.quantile(smax_null, [0.025, 0.975], axis=0)
    ax.fill_between(radii_deg, lo2, hi2, color="0.85", label="null 95% band")
    ax.fill_between(radii_deg, lo, hi, color="0.7", label="null 68% band")
    ax.plot(radii_deg, th.whole_range, "r--", label=f"threshold (false alarm {th.false_alarm:g}, whole range)")
    ax.plot(radii_deg, smax, "k.-", label=f"{name}")
    ax.set_xlabel("circle radius alpha [deg]")
    ax.set_ylabel("S_max")
    ax.legend(fontsize=8, loc="best")
    ax.set_title(f"{name}: largest S per radius over {th.n_null} null skies", fontsize=10)
    return save_figure(fig, base)


# candidate circles: colours of this module's choosing that stand out on the red-blue map
CIRCLE_COLOURS = ("black", "#00a651", "#9b30d9", "#e69f00", "#00b5c8", "#ff00c8")
PREDICTED_STYLE = {"color": "0.35", "ls": (0, (5, 3)), "lw": 1.1}


def pair_label(pair, i: int) -> str:
    """The legend text of a candidate pair: its ``label`` when it has one."""
    return getattr(pair, "label", None) or f"pair {i + 1}: radius {np.degrees(pair.radius):.1f} deg"


def figure_sky(base: Path, name: str, sky_map, pairs, title_extra="", mask=None, *, predicted=(),
               frame: str = "the map's own coordinates", unit: str = "microK") -> list[str]:
    """Mollweide map with circle pairs and a labelled graticule (longitude grows to the left).

    ``pairs``: objects with center_a, center_b (unit vectors), radius (radians) and optionally
    ``label`` (the legend text; default the radius); each pair is one colour, both circles solid,
    one legend entry. ``predicted``: pairs of the same kind drawn dashed grey under one legend
    entry. ``frame`` names the coordinates in the title; the colour scale is symmetric with its
    limit rounded up to two significant figures (:func:`topology.plots.symmetric_limit`).
    """
    import healpy as hp
    import matplotlib.patheffects as pe

    from ..plots import draw_circle, label_graticule, sky_image, symmetric_limit

    plt = pyplot()
    m = np.array(sky_map, dtype=float)
    bad = ~np.isfinite(m) | (m == hp.UNSEEN)
    if mask is not None:
        bad |= np.asarray(mask) < 0.5
    vmax = symmetric_limit(m[~bad])
    fig = plt.figure(figsize=(9.5, 6))
    ax = fig.add_subplot(111, projection="mollweide")
    mesh = sky_image(ax, m, vmax, bad=bad)
    label_graticule(ax)
    predicted = list(predicted)
    if predicted:
        radii = [np.degrees(q.radius) for q in predicted]
        span = f"{min(radii):.1f}" if max(radii) - min(radii) < 0.05 else f"{min(radii):.1f}-{max(radii):.1f}"
        label = f"predicted by the sky's space: {len(predicted)} pairs, radius {span} deg"
    for p in predicted:
        for center in (p.center_a, p.center_b):
            draw_circle(ax, center, p.radius, label=label, **PREDICTED_STYLE)
            label = None  # one legend entry for all predicted pairs
    outline = [pe.Stroke(linewidth=3.2, foreground="white"), pe.Normal()]
    for i, p in enumerate(pairs):
        colour = CIRCLE_COLOURS[i % len(CIRCLE_COLOURS)]
        for j, center in enumerate((p.center_a, p.center_b)):
            draw_circle(ax, center, p.radius, label=pair_label(p, i) if j == 0 else None, color=colour, lw=1.8,
                        path_effects=outline)
    bar = fig.colorbar(mesh, ax=ax, orientation="vertical", fraction=0.025, pad=0.02, shrink=0.7)
    bar.set_ticks([-vmax, -vmax / 2, 0.0, vmax / 2, vmax])
    bar.set_label(f"T [{unit}]", fontsize=9)
    bar.ax.tick_params(labelsize=9)
    ax.set_title(f"{name} {title_extra}".strip() + f"\nMollweide, {frame}; longitude grows to the left", fontsize=10)
    if pairs or predicted:
        ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.03), fontsize=9, frameon=False, ncol=1)
    return save_figure(fig, base)


def figure_efficiency(base: Path, families: list[dict], radii_deg, level: float, false_alarm: float,
                      confidence: float) -> list[str]:
    """Detection efficiency against radius, one colour per injected family: the recovered
    fraction, bars from its one-sided lower to upper exact binomial limit (Clopper & Pearson
    1934) at ``confidence``, and each family's alpha_min (where the lower limit reaches the level;
    its legend warns when that is the lowest injected radius, so the true one may be lower)."""
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(7.5, 4.2))
    r = np.asarray(radii_deg, float)
    step = min(0.15 * (np.min(np.diff(r)) if r.size > 1 else 1.0), 0.4)  # degrees between families
    for i, f in enumerate(families):
        colour = CIRCLE_COLOURS[i % len(CIRCLE_COLOURS)] if i else "C0"
        x = r + (i - 0.5 * (len(families) - 1)) * step  # side by side, not over each other
        eff, lo, hi = (np.asarray(f[k], float) for k in ("efficiency", "efficiency_lower", "efficiency_upper"))
        amin = f["alpha_min_deg"]
        lowest = " (the lowest injected radius: it may be lower; inject lower radii)" if f.get("at_lowest_radius") else ""
        ax.errorbar(x, eff, yerr=[eff - lo, hi - eff], fmt="o-", ms=4, capsize=2, color=colour,
                    label=f"{f['label']} ({f['kind']} pairs): alpha_min = "
                          + ("none" if amin is None else f"{amin:.1f} deg{lowest}"))
        ax.plot(x, lo, "v", color=colour, ms=5)
        if amin is not None:
            ax.axvline(amin, color=colour, ls=":", lw=1.2)
    ax.axhline(level, color="r", ls="--", label=f"efficiency level {level:g} (the lower limit must reach it)")
    ax.set_ylim(-0.03, 1.05)
    ax.set_xlabel("injected circle radius [deg]")
    ax.set_ylabel(f"detection efficiency at false alarm {false_alarm:g}")
    ax.set_title(f"recovered fraction; bars and triangles: one-sided {confidence:.0%} exact binomial limits "
                 "(Clopper & Pearson 1934)", fontsize=9)
    ax.legend(fontsize=8, loc="upper center", bbox_to_anchor=(0.5, -0.16), frameon=False)
    return save_figure(fig, base)


ALLOWED_COLOUR = "#4daf4a"
EXCLUDED_COLOUR = "#f4b6b6"
EXCLUDED_EDGE = "#c0392b"


def spherical_row_name(row: dict) -> str:
    """A spherical bounds row in words: 'lens L(5, 2)', 'prism m = 3', 'dodecahedral'."""
    if row["family"] == "lens" and row.get("p") is not None:
        return f"lens L({row['p']}, {row['q']})"
    if row["family"] == "prism" and row.get("m") is not None:
        return f"prism m = {row['m']}"
    return str(row["family"])


def figure_omega_k(base: Path, bounds: dict) -> list[str] | None:
    """The Omega_K each spherical space is allowed by the search: a green bar from the bound
    (min_omega_k < 0) to 0 (flat), the region below it hatched red (excluded). The axis is
    symmetric-log (linear within the decade nearest 0) so that bounds from -0.003 to -0.3 are all
    readable; each row's label states its bound. None when no row has a bound."""
    import matplotlib.patches as mpatches
    from matplotlib.ticker import FuncFormatter

    every = bounds.get("spherical") or []
    rows = [s for s in every if s.get("min_omega_k") is not None]
    if not rows:
        return None
    plt = pyplot()
    vals = np.array([float(s["min_omega_k"]) for s in rows])
    labels = [f"{spherical_row_name(s)}: > {v:.3g}" for s, v in zip(rows, vals)]
    n = len(rows)
    fig, ax = plt.subplots(figsize=(7.5, 0.26 * n + 2.2))
    y = np.arange(n)[::-1]  # the first row at the top
    size = np.abs(vals)
    linthresh = 10.0 ** np.floor(np.log10(size[size > 0].min())) if np.any(size > 0) else 1e-3
    left = -round_up_decade(max(1.5 * size.max(), 10 * linthresh))
    ax.barh(y, vals - left, left=left, height=0.7, color=EXCLUDED_COLOUR, edgecolor=EXCLUDED_EDGE, hatch="///",
            lw=0.0)
    ax.barh(y, -vals, left=vals, height=0.7, color=ALLOWED_COLOUR)
    ax.set_xscale("symlog", linthresh=linthresh, linscale=1.0)
    ax.set_xlim(left, 0.0)
    ax.set_ylim(-0.6, n - 0.4)
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
    ax.set_yticks(y, labels)
    ax.tick_params(axis="both", labelsize=9)
    ax.axvline(0.0, color="k", lw=1.0)
    group = [s["family"] if s["family"] in ("lens", "prism") else "polyhedral" for s in rows]
    for k in range(1, n):  # a line between lens, prism and polyhedral spaces
        if group[k] != group[k - 1]:
            ax.axhline(y[k] + 0.5, color="0.4", lw=0.8)
    missing = len(every) - n
    note = (f"\nnot shown: {missing} space{'s' if missing > 1 else ''} excluded nowhere in -0.5 < Omega_K < 0"
            if missing else "")
    ax.set_xlabel("Omega_K (spherical spaces have Omega_K < 0; excluded left of each green bar)\n"
                  f"symmetric log scale, linear for |Omega_K| < {linthresh:g}" + note, fontsize=9)
    handles = [mpatches.Patch(facecolor=ALLOWED_COLOUR, label="allowed: from the bound up to Omega_K = 0 (flat)"),
               mpatches.Patch(facecolor=EXCLUDED_COLOUR, edgecolor=EXCLUDED_EDGE, hatch="///",
                              label="excluded: circles of radius >= alpha_min would be seen")]
    ax.legend(handles=handles, loc="lower left", bbox_to_anchor=(0.0, 1.0), fontsize=9, frameon=False)
    alpha = bounds.get("alpha_min_deg")
    ax.set_title("spherical spaces: Omega_K allowed by the circle search"
                 + (f" (alpha_min = {alpha:.1f} deg)" if alpha is not None else ""), fontsize=10, pad=48)
    return save_figure(fig, base)


def round_up_decade(x: float) -> float:
    """1, 2 or 5 times a power of ten, the smallest >= x > 0 (an axis end; common practice)."""
    e = 10.0 ** np.floor(np.log10(x))
    return float(next(k * e for k in (1, 2, 5, 10) if k * e >= x * (1 - 1e-12)))
