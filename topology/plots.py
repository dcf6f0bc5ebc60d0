"""Figures: circles on a Mollweide sky (matplotlib, no display needed).

Every sky here is drawn in the astronomical convention: longitude grows to the left, and the
longitude labels of the graticule say so (0 deg in the centre, 60 deg to its left).
"""

from __future__ import annotations

import math

import numpy as np


def pyplot():
    """matplotlib.pyplot on the Agg backend (files only, no display needed)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def circle_lonlat(center, radius, n=361):
    """Longitude (wrapped to (-180, 180]) and latitude in degrees of points on a circle."""
    from .circles import circle_points
    from .geometry import vec_to_lonlat

    pts = circle_points(np.asarray(center), radius, np.linspace(0, 2 * np.pi, n))
    lon, lat = vec_to_lonlat(pts)
    lon = (lon + 180.0) % 360.0 - 180.0
    return lon, lat


def round_up(value: float, digits: int = 2) -> float:
    """``value`` > 0 rounded up to ``digits`` significant figures (107.6 -> 110, 0.000312 -> 0.00032)."""
    if not value > 0 or not math.isfinite(value):
        return 1.0
    step = 10.0 ** (math.floor(math.log10(value)) - (digits - 1))
    # the (1 - 1e-12) keeps a value already round (110) from a step up by float noise; the
    # format drops the noise of the product (110.00000000000001)
    return float(f"{math.ceil(value / step * (1 - 1e-12)) * step:.{digits}g}")


def symmetric_limit(values, percentile: float = 99.5, digits: int = 2) -> float:
    """Colour limit v for a scale -v..v: the ``percentile`` of |values| (finite ones) rounded up
    to ``digits`` significant figures; 1.0 when there is nothing to scale."""
    v = np.asarray(values, dtype=float)
    v = np.abs(v[np.isfinite(v)])
    return round_up(float(np.percentile(v, percentile)) if v.size else 0.0, digits)


def sky_image(ax, m, vmax: float, bad=None, n_lon: int = 900, cmap: str = "RdBu_r"):
    """Draw the RING map ``m`` on the Mollweide axis ``ax`` on the scale -vmax..vmax; pixels where
    ``bad`` is true (and non-finite or UNSEEN ones) are grey. Returns the QuadMesh for a colour bar."""
    import healpy as hp

    plt = pyplot()
    m = np.asarray(m, dtype=float)
    nside = hp.npix2nside(m.size)
    hide = ~np.isfinite(m) | (m == hp.UNSEEN)
    if bad is not None:
        hide |= np.asarray(bad, dtype=bool)
    lon = np.linspace(-np.pi, np.pi, n_lon)
    lat = np.linspace(-np.pi / 2, np.pi / 2, n_lon // 2)
    LON, LAT = np.meshgrid(lon, lat)
    pix = hp.ang2pix(nside, np.pi / 2 - LAT, LON % (2 * np.pi))
    img = np.ma.masked_where(hide[pix], m[pix])
    colours = plt.get_cmap(cmap).with_extremes(bad="0.7")
    return ax.pcolormesh(-LON, LAT, img, cmap=colours, vmin=-vmax, vmax=vmax, shading="auto", rasterized=True)


def label_graticule(ax, fontsize: float = 9) -> None:
    """Meridians every 60 deg and parallels every 30 deg on a Mollweide axis, labelled in degrees
    of longitude (growing to the left) and latitude."""
    import matplotlib.patheffects as pe

    ax.set_xticks(np.radians([-120, -60, 0, 60, 120]))
    ax.set_xticklabels([f"{v}°" for v in (120, 60, 0, 300, 240)])
    ax.set_yticks(np.radians([-60, -30, 0, 30, 60]))
    ax.set_yticklabels([f"{v}°" for v in (-60, -30, 0, 30, 60)])
    ax.tick_params(labelsize=fontsize)
    for t in ax.get_xticklabels():  # longitudes sit on the map: a white outline keeps them readable
        t.set_path_effects([pe.withStroke(linewidth=2.5, foreground="white")])
    ax.grid(True, color="0.3", alpha=0.4, lw=0.6)


def draw_circle(ax, center, radius, label=None, **style) -> list:
    """One circle on a Mollweide axis (longitude growing to the left), broken where it crosses
    the map's edge; ``label`` goes on its first segment only. Returns the lines."""
    lon, lat = circle_lonlat(center, radius)
    jumps = np.where(np.abs(np.diff(lon)) > 180)[0] + 1
    lines = []
    for seg_lon, seg_lat in zip(np.split(lon, jumps), np.split(lat, jumps)):
        lines += ax.plot(-np.radians(seg_lon), np.radians(seg_lat), label=None if lines else label, **style)
    return lines


def draw_circles(ax, pairs, cmap="tab10"):
    """Draw each pair (A solid, B dashed) on a Mollweide axis; longitudes grow to the left."""
    plt = pyplot()
    colors = plt.get_cmap(cmap)
    for i, p in enumerate(pairs):
        c = colors(i % 10)
        for center, style in ((p.center_a, "-"), (p.center_b, "--")):
            draw_circle(ax, center, p.radius, ls=style, color=c, lw=1.2)


def plot_circles(pairs, path, title=""):
    plt = pyplot()
    fig = plt.figure(figsize=(9, 5))
    ax = fig.add_subplot(111, projection="mollweide")
    label_graticule(ax)
    draw_circles(ax, pairs)
    ax.set_title(title + f"\n{len(pairs)} matched-circle pairs (A solid, B dashed); longitude grows to the left",
                 fontsize=10)
    fig.savefig(path, dpi=110, bbox_inches="tight", format=str(path).rsplit(".", 1)[-1] if "." in str(path) else "png")
    plt.close(fig)
