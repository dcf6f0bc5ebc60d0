"""Figure of a search: S_max against radius, and the best pairs on a Mollweide sky."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np

from ..geometry import lonlat_to_vec


def plot_search(result: dict, path, n_pairs: int = 5) -> None:
    from ..plots import draw_circles, pyplot

    plt = pyplot()
    fig = plt.figure(figsize=(11, 4.2))
    ax1 = fig.add_subplot(1, 2, 1)
    for name, style in (("same", "o-"), ("opposite", "s--")):
        rows = [r for r in result["s_max"] if r["orientation"] == name]
        if rows:
            ax1.plot([r["radius_deg"] for r in rows], [r["S_max"] for r in rows], style, ms=3, label=name)
    ax1.set_xlabel("circle radius (deg)")
    ax1.set_ylabel("S_max")
    ax1.set_ylim(-0.1, 1.05)
    ax1.grid(True, alpha=0.3)
    ax1.legend(fontsize=8)
    ax2 = fig.add_subplot(1, 2, 2, projection="mollweide")
    ax2.grid(True, alpha=0.3)
    ax2.set_xticklabels([f"{v}°" for v in (150, 120, 90, 60, 30, 0, 330, 300, 270, 240, 210)], fontsize=7)
    pairs = [SimpleNamespace(center_a=lonlat_to_vec(*c["center_a"]), center_b=lonlat_to_vec(*c["center_b"]),
                             radius=np.radians(c["radius_deg"]))
             for c in result["candidates"][:n_pairs] if c.get("S") is not None]
    draw_circles(ax2, pairs)
    ax2.set_title(f"best {len(pairs)} pairs (A solid, B dashed)", fontsize=9)
    fig.suptitle(f"topology search ({result['settings']['mode']}): {result['map']}", fontsize=10)
    fig.savefig(path, dpi=110, bbox_inches="tight", format=str(path).rsplit(".", 1)[-1] if "." in str(path) else "png")
    plt.close(fig)
