"""The tables of a report, as astropy Tables with units and their provenance in ``meta``:
candidates, thresholds, efficiency, and the bounds of :func:`topology.bounds.bound_summary`."""

from __future__ import annotations

import math

import numpy as np
from astropy import units as u
from astropy.table import MaskedColumn, Table

from ..cosmology import C_KM_S


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


def target_tables(maps: list[dict], calibration: dict, th, null, *, false_alarm: float, n_null: int,
                  efficiency_level: float, n_injections: int) -> tuple[Table, Table, Table]:
    """The tables of a targeted run: outcome per map and target, thresholds and efficiency per target."""
    rows = []
    for m in maps:
        for r in m["targets"]:
            rows.append((m["name"], r["target"], r["S_combined"], r["threshold"], r["p_value"], r["efficiency"],
                         r["efficiency_error"], "detected" if r["detected"] else ("excluded" if r["excluded"] else
                                                                               "not excluded")))
    names = ("map", "target", "S_combined", "S_threshold", "p_value", "efficiency", "efficiency_error", "outcome")
    t = Table(rows=rows, names=names, dtype=("U64", "U128", float, float, float, float, float, "U16"))
    t.meta.update(false_alarm=false_alarm, n_null=n_null, efficiency_level=efficiency_level,
                  n_injections_per_target=n_injections)
    tt = Table()
    tt["target"] = calibration["targets"]
    tt["S_thr_whole_range"] = th.whole_range
    tt["S_thr_local"] = th.local
    tt["null_mean"] = null.mean(axis=0)
    tt["null_std"] = null.std(axis=0, ddof=1)
    tt.meta.update(false_alarm=th.false_alarm, n_null=th.n_null, z_threshold=th.z_threshold,
                   measured_false_alarm=th.measured_false_alarm)
    et = Table()
    et["target"] = calibration["targets"]
    et["efficiency"] = calibration["efficiency"]
    et["efficiency_error"] = calibration["efficiency_error"]
    et.meta.update(n_injections_per_target=n_injections, efficiency_level=efficiency_level)
    return t, tt, et


def bounds_table(summary: dict):
    """The curved-space rows of a summary as an astropy Table with units and provenance meta.

    One row per spherical family and parameter set (and the configured hyperbolic or spherical
    space); the flat bounds, alpha_min, chi_rec and the Omega_K convention are in ``meta``.
    """
    rows = [dict(r, geometry="spherical", omega_k_bound=r["min_omega_k"], bound_kind="min")
            for r in summary["spherical"]]
    for key, kind in (("spherical_configured", "min"), ("hyperbolic", "max")):
        if key in summary:
            r = summary[key]
            rows.append(dict(r, **r["params"], geometry=("spherical" if kind == "min" else "hyperbolic"),
                             family=r["family"] + " (configured)",
                             omega_k_bound=r.get("min_omega_k", r.get("max_omega_k")), bound_kind=kind))
    hubble_mpc = C_KM_S / (100.0 * summary["cosmology"]["h"])

    def col(name, key, dtype, unit=None, desc=""):
        vals = [r.get(key) for r in rows]
        mask = [v is None for v in vals]
        fill = {"i": 0, "f": np.nan, "U": ""}[np.dtype(dtype).kind]
        data = np.array([fill if v is None else v for v in vals], dtype=dtype)
        return MaskedColumn(data, name=name, mask=mask, unit=unit, description=desc)

    rc_mpc = [None if r["omega_k_bound"] in (None, 0.0) else hubble_mpc / math.sqrt(abs(r["omega_k_bound"])) for r in rows]
    for r, v in zip(rows, rc_mpc):
        r["rc_mpc"] = v
    t = Table([
        col("geometry", "geometry", "U10"),
        col("family", "family", "U32"),
        col("p", "p", int, desc="lens space order p"),
        col("q", "q", int, desc="lens space q (q <= p/2)"),
        col("m", "m", int, desc="prism space S^3/D*_m"),
        col("shortest_displacement", "shortest_displacement_over_curvature_radius", float, u.dimensionless_unscaled,
            "shortest clone displacement in units of R_c (maximised over observers when inhomogeneous)"),
        col("max_chi_rec_over_curvature_radius", "max_chi_rec_over_curvature_radius", float, u.dimensionless_unscaled,
            "largest allowed chi_rec / R_c"),
        col("min_curvature_radius_over_chi_rec", "min_curvature_radius_over_chi_rec", float, u.dimensionless_unscaled,
            "smallest allowed R_c / chi_rec"),
        col("omega_k_bound", "omega_k_bound", float, u.dimensionless_unscaled,
            "Omega_K > bound (spherical, bound_kind min) or Omega_K < bound (hyperbolic, max); " + summary["convention"]),
        col("bound_kind", "bound_kind", "U3"),
        col("min_curvature_radius_mpc", "rc_mpc", float, u.Mpc, "R_c = (c/H0)/sqrt(|Omega_K|) at the Omega_K bound"),
    ])
    flat = summary["flat"]
    t.meta.update({
        "alpha_min_deg": summary["alpha_min_deg"],
        "chi_rec_mpc": summary["chi_rec_mpc"],
        "convention": summary["convention"],
        "assumptions": summary["assumptions"],
        "flat_min_loop_over_lss_diameter": flat["min_loop_over_lss_diameter"],
        "flat_min_loop_mpc": flat["min_loop_mpc"],
        "cubic_torus_inscribed_radius_over_chi_rec": flat["cubic_torus_inscribed_radius_over_chi_rec"],
        "cosmology": {k: v for k, v in summary["cosmology"].items()},
        "source": "topology.bounds (CSS 1998 circle radii)",
    })
    if "configured" in flat:
        cfg = flat["configured"]
        t.meta["flat_configured"] = {k: cfg[k] for k in ("family", "params", "excluded", "min_scale_factor",
                                                         "shortest_displacement_over_chi_rec")}
        t.meta["flat_configured"]["excluded_fraction"] = cfg["observer_positions"]["excluded_fraction"]
    return t
