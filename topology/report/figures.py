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


def figure_sky(base: Path, name: str, sky_map, pairs, title_extra="", mask=None) -> list[str]:
    """Mollweide map (healpy) with circle pairs drawn by healpy.projplot (A solid, B dashed)."""
    import healpy as hp

    from ..plots import circle_lonlat

    plt = pyplot()
    fig = plt.figure(figsize=(9, 5))
    m = np.array(sky_map, dtype=float)
    bad = ~np.isfinite(m) | (m == hp.UNSEEN)
    if mask is not None:
        bad |= np.asarray(mask) < 0.5
    m[bad] = hp.UNSEEN
    good = m[~bad]
    lo, hi = (np.percentile(good, [1, 99]) if good.size else (None, None))
    import warnings

    with warnings.catch_warnings():  # healpy's own figure and colormap calls warn on new matplotlib
        warnings.simplefilter("ignore")
        hp.mollview(m, fig=fig.number, title=f"{name} {title_extra}", unit="microK", cmap="RdBu_r", min=lo, max=hi)
    colors = plt.get_cmap("tab10")
    for i, p in enumerate(pairs):
        for center, style in ((p.center_a, "-"), (p.center_b, "--")):
            lon, lat = circle_lonlat(center, p.radius)
            hp.projplot(lon, lat, style, lonlat=True, color=colors(i % 10), lw=1.4)
    hp.graticule(dpar=30, dmer=60, alpha=0.3)
    return save_figure(fig, base)


def figure_efficiency(base: Path, radii_deg, eff, err, level, alpha_min_deg, false_alarm) -> list[str]:
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(7, 4))
    ax.errorbar(radii_deg, eff, yerr=err, fmt="o-", ms=4, capsize=2, label="injected circles recovered")
    ax.axhline(level, color="r", ls="--", label=f"level {level:g}")
    if alpha_min_deg is not None:
        ax.axvline(alpha_min_deg, color="g", ls=":", label=f"alpha_min = {alpha_min_deg:.1f} deg")
    ax.set_ylim(-0.03, 1.05)
    ax.set_xlabel("injected circle radius [deg]")
    ax.set_ylabel(f"detection efficiency at false alarm {false_alarm:g}")
    ax.legend(fontsize=8)
    return save_figure(fig, base)


def figure_omega_k(base: Path, bounds: dict) -> list[str] | None:
    rows = [s for s in (bounds.get("spherical") or []) if s.get("min_omega_k") is not None]
    if not rows:
        return None
    plt = pyplot()
    labels = [s["family"] + "".join(f" {k}={s[k]}" for k in ("p", "q", "m") if s.get(k) is not None) for s in rows]
    vals = np.array([s["min_omega_k"] for s in rows])
    fig, ax = plt.subplots(figsize=(7, 0.3 * len(rows) + 1.5))
    y = np.arange(len(rows))
    ax.barh(y, vals, color="tab:red", alpha=0.3, label="excluded")
    ax.barh(y, -vals, left=vals, color="tab:green", alpha=0.3, label="allowed")
    ax.set_yticks(y, labels, fontsize=7)
    ax.set_xlabel("Omega_K")
    ax.axvline(0, color="k", lw=0.8)
    ax.set_xlim(min(vals.min() * 1.3, -1e-3), 0.0)
    ax.legend(fontsize=8)
    ax.set_title("spherical spaces: Omega_K allowed by the circle search", fontsize=10)
    return save_figure(fig, base)
