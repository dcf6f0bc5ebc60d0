"""The report folder of a run: tables (ECSV, LaTeX), figures (PNG and PDF), a static HTML page.

Everything here reads the plain summary produced by :mod:`topology.run` (dicts and numpy
arrays); nothing is recomputed. Files are written atomically; the caller writes the report into
a temporary folder and renames it into place, so a report is either whole or absent.
"""

from __future__ import annotations

import base64
import html
import json
from pathlib import Path

import numpy as np
from astropy import units as u
from astropy.table import Table

from .plots import pyplot


# ---------------------------------------------------------------------------------------------
# tables
# ---------------------------------------------------------------------------------------------
def candidates_table(maps: list[dict]) -> Table:
    rows = []
    for m in maps:
        for c in m["candidates"]:
            rows.append((m["name"], c["radius_deg"], c["center_a"][0], c["center_a"][1], c["center_b"][0],
                         c["center_b"][1], c["twist_deg"], c["orientation"], c["S"], c["p_value"], c.get("p_value_local", np.nan)))
    names = ("map", "radius", "lon_a", "lat_a", "lon_b", "lat_b", "twist", "orientation", "S", "p_value", "p_value_local")
    dtype = ("U64", float, float, float, float, float, float, "U8", float, float, float)
    t = Table(rows=rows, names=names, dtype=dtype) if rows else Table(names=names, dtype=dtype)
    for col in ("radius", "lon_a", "lat_a", "lon_b", "lat_b", "twist"):
        t[col].unit = u.deg
    t.meta["description"] = "best matched-circle candidates per map; p_value corrected for the look-elsewhere effect"
    return t


def thresholds_table(radii_deg, th, smax_null) -> Table:
    t = Table()
    t["radius"] = np.asarray(radii_deg, float) * u.deg
    t["S_thr_whole_range"] = th.whole_range
    t["S_thr_local"] = th.local
    t["null_mean"] = th.null_mean
    t["null_std"] = th.null_std
    t["null_q16"] = np.quantile(smax_null, 0.16, axis=0)
    t["null_q84"] = np.quantile(smax_null, 0.84, axis=0)
    t.meta.update(false_alarm=th.false_alarm, n_null=th.n_null, local_level=th.local_level, z_threshold=th.z_threshold,
                  measured_false_alarm=th.measured_false_alarm,
                  measured_false_alarm_error=th.measured_false_alarm_error)
    return t


def efficiency_table(radii_deg, eff, err, n_inj: int, level: float) -> Table:
    t = Table()
    t["radius"] = np.asarray(radii_deg, float) * u.deg
    t["efficiency"] = eff
    t["efficiency_error"] = err
    t.meta.update(n_injections_per_radius=int(n_inj), efficiency_level=level)
    return t


# ---------------------------------------------------------------------------------------------
# figures
# ---------------------------------------------------------------------------------------------
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

    from .plots import circle_lonlat

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


# ---------------------------------------------------------------------------------------------
# static page
# ---------------------------------------------------------------------------------------------
def _img(folder: Path, name: str) -> str:
    data = base64.b64encode((folder / name).read_bytes()).decode()
    return f'<img alt="{html.escape(name)}" src="data:image/png;base64,{data}" style="max-width:100%">'


def _table_html(t: Table) -> str:
    head = "".join(f"<th>{html.escape(c)}{f' [{t[c].unit}]' if t[c].unit else ''}</th>" for c in t.colnames)
    body = []
    for row in t:
        cells = []
        for c in t.colnames:
            v = row[c]
            cells.append(f"<td>{v:.4g}</td>" if isinstance(v, (float, np.floating)) else f"<td>{html.escape(str(v))}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><tr>{head}</tr>{''.join(body)}</table>"


def write_index(folder: Path, summary: dict, tables: dict[str, Table], figures: dict[str, list[str]], caution: str) -> None:
    parts = ["<!doctype html><html><head><meta charset='utf-8'><title>topology run report</title>",
             "<style>body{font-family:sans-serif;max-width:1000px;margin:auto;padding:1em}"
             "table{border-collapse:collapse;font-size:0.85em}td,th{border:1px solid #ccc;padding:2px 6px}"
             ".caution{background:#fff4e0;border:1px solid #e0b060;padding:0.5em 1em}</style></head><body>",
             "<h1>Matched-circle search report</h1>",
             f"<p class='caution'><b>What these results assume.</b> {html.escape(caution)}</p>", "<h2>Maps</h2><ul>"]
    for m in summary["maps"]:
        amin = "none" if m["alpha_min_deg"] is None else f"{m['alpha_min_deg']:.1f} deg"
        parts.append(f"<li><b>{html.escape(m['name'])}</b>: {'DETECTED' if m['detected'] else 'no detection'}; "
                     f"alpha_min = {amin}; global p-value of the best candidate = {m.get('global_p_value', float('nan')):.3g}</li>")
    parts.append("</ul>")
    for key, names in figures.items():
        png = [n for n in names if n.endswith(".png")]
        if png:
            parts.append(f"<h3>{html.escape(key)}</h3>" + _img(folder, png[0]))
            parts.append(" ".join(f"<a href='{html.escape(n)}'>{html.escape(n)}</a>" for n in names))
    for key, t in tables.items():
        parts.append(f"<h2>{html.escape(key)}</h2>" + _table_html(t))
    parts.append("<h2>Provenance</h2><pre>" + html.escape(json.dumps(summary.get("provenance", {}), indent=1)[:20000]) + "</pre>")
    parts.append("</body></html>")
    (folder / "index.html").write_text("\n".join(parts))
