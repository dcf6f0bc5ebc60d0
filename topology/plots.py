"""Figures: circles on a Mollweide sky (matplotlib, no display needed)."""

from __future__ import annotations

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


def draw_circles(ax, pairs, cmap="tab10"):
    """Draw each pair (A solid, B dashed) on a Mollweide axis; longitudes grow to the left."""
    plt = pyplot()
    colors = plt.get_cmap(cmap)
    for i, p in enumerate(pairs):
        c = colors(i % 10)
        for center, style in ((p.center_a, "-"), (p.center_b, "--")):
            lon, lat = circle_lonlat(center, p.radius)
            # break the line where it wraps across the map edge
            jumps = np.where(np.abs(np.diff(lon)) > 180)[0] + 1
            for seg_lon, seg_lat in zip(np.split(lon, jumps), np.split(lat, jumps)):
                ax.plot(-np.radians(seg_lon), np.radians(seg_lat), style, color=c, lw=1.2)


def plot_circles(pairs, path, title=""):
    plt = pyplot()
    fig = plt.figure(figsize=(9, 5))
    ax = fig.add_subplot(111, projection="mollweide")
    ax.grid(True, alpha=0.3)
    ax.set_xticklabels([f"{v}°" for v in (150, 120, 90, 60, 30, 0, 330, 300, 270, 240, 210)])
    draw_circles(ax, pairs)
    ax.set_title(title + f"\n{len(pairs)} matched-circle pairs (A solid, B dashed)", fontsize=10)
    fig.savefig(path, dpi=110, bbox_inches="tight", format=str(path).rsplit(".", 1)[-1] if "." in str(path) else "png")
    plt.close(fig)
