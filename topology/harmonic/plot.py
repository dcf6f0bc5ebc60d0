"""The figure of the harmonic view: D(space || isotropic) against the scale of the space."""

from __future__ import annotations

import math


def kl_figure(summary: dict, path, title: str = "") -> None:
    """Write the divergence of each row of ``summary`` (:func:`topology.harmonic.survey.divergence_rows`)
    against its scale, log scale in nats; infinite divergences as markers at the top, scales
    with matched circles (nearest image < 2 chi_rec; spherical: < 2 chi_rec / R_c) shaded. PNG or
    PDF by the suffix of ``path``."""
    from ..plots import pyplot

    plt = pyplot()
    rows = summary["rows"]
    fin = [(r["scale"], r["kl_nats"]) for r in rows if r["finite"] and r["kl_nats"] > 0]
    inf = [r["scale"] for r in rows if not r["finite"]]
    fig, ax = plt.subplots(figsize=(6.0, 4.0))
    if fin:
        ax.semilogy([s for s, _ in fin], [v for _, v in fin], "o-", color="C0",
                    label=f"l = 2..{summary['lmax']}, {summary['form']}")
    top = max([v for _, v in fin], default=1.0) * 3.0
    if inf:
        ax.semilogy(inf, [top] * len(inf), "^", color="C3", label="infinite (singular covariance)")
    near = summary.get("nearest_image")
    spherical = summary.get("geometry") == "spherical"
    if spherical:   # the curvature radius scales with s, chi_rec / R_c not exactly as 1/s: the rows' flags
        ring = [r["scale"] for r in rows if r["circles"]]
        if ring:
            ax.axvspan(min(ring), max(ring), color="0.9", zorder=0, label="matched circles exist")
    elif near:   # every length scales with s, so the nearest image is at s * near: circles below s = 2 / near
        edge = 2.0 / near
        lo = min(r["scale"] for r in rows)
        if edge > lo:
            ax.axvspan(lo, min(edge, max(r["scale"] for r in rows)), color="0.9", zorder=0,
                       label="matched circles exist")
    ax.axhline(1.0, color="0.5", lw=0.8, ls=":")
    ax.set_xlabel("scale s (curvature radius times s: Omega_K / s^2)" if spherical
                  else "scale s (lengths and observer position times s)")
    ax.set_ylabel("KL divergence from isotropy (nats)")
    if math.isfinite(top) and fin:
        ax.set_ylim(top=top * 2.0)
    ax.set_title(title or f"{summary['family']}", fontsize=10)
    ax.legend(fontsize=8)
    fig.tight_layout()
    fig.savefig(str(path), format=str(path).rsplit(".", 1)[-1].lower() if "." in str(path) else "png")
    plt.close(fig)
