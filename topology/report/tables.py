"""The tables of a report, as astropy Tables with units and their provenance in ``meta``:
candidates, thresholds, efficiency, and the bounds of :func:`topology.bounds.bound_summary`."""

from __future__ import annotations

import math

import numpy as np
from astropy import units as u
from astropy.table import MaskedColumn, Table

from ..cosmology import C_KM_S


def candidates_table(maps: list[dict]) -> Table:
    """The candidates of every map, ranked by S_eq (the score that decides detection), with S,
    the kept fraction f, S_eq, the local p at their radius and the look-elsewhere p."""
    rows = []
    for m in maps:
        for c in m["candidates"]:
            rows.append((m["name"], c["radius_deg"], c["center_a"][0], c["center_a"][1], c["center_b"][0],
                         c["center_b"][1], c["twist_deg"], c["orientation"], c["S"], c.get("overlap", np.nan),
                         c.get("S_eq", np.nan), c.get("p_value_local", np.nan), c["p_value"],
                         bool(c.get("above_threshold", False))))
    names = ("map", "radius", "lon_a", "lat_a", "lon_b", "lat_b", "twist", "orientation", "S", "f", "S_eq",
             "p_value_local", "p_value", "above_threshold")
    dtype = ("U64", float, float, float, float, float, float, "U8", float, float, float, float, float, bool)
    t = Table(rows=rows, names=names, dtype=dtype) if rows else Table(names=names, dtype=dtype)
    for col in ("radius", "lon_a", "lat_a", "lon_b", "lat_b", "twist"):
        t[col].unit = u.deg
    t["f"].description = "fraction of the circle points both circles keep (the mask)"
    t["S_eq"].description = "S_eq = sqrt(1 - (1 - S^2)^f): the full-circle S of the same chance probability"
    t["p_value_local"].description = "p at the candidate's radius: (1 + #null S_max >= S_eq) / (1 + N)"
    t["p_value"].description = "look-elsewhere p over the whole radius range (standardised maximum)"
    t["above_threshold"].description = "S_eq above the whole-range threshold (the test of detection)"
    t.meta["description"] = ("best matched-circle candidates per map, ranked by S_eq; p_value corrected for the "
                             "look-elsewhere effect")
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


def efficiency_table(families: list[dict], radii_deg, level: float, confidence: float) -> Table:
    """Detection efficiency per injected family and radius: recovered of n, the fraction and its
    one-sided exact binomial limits (Clopper & Pearson 1934) at ``confidence``."""
    rows = []
    for f in families:
        for k, r in enumerate(radii_deg):
            rows.append((f["label"], f["kind"], float(r), int(f["recovered"][k]), int(f["n_injections"]),
                         f["efficiency"][k], f["efficiency_lower"][k], f["efficiency_upper"][k]))
    names = ("injected_family", "pairs", "radius", "recovered", "n", "efficiency", "lower", "upper")
    t = Table(rows=rows, names=names, dtype=("U96", "U16", float, int, int, float, float, float))
    t["radius"].unit = u.deg
    t["lower"].description = f"one-sided {confidence:g} lower limit (Clopper & Pearson 1934)"
    t["upper"].description = f"one-sided {confidence:g} upper limit (Clopper & Pearson 1934)"
    t.meta.update(efficiency_level=level, efficiency_confidence=confidence,
                  alpha_min_deg={f["label"]: f["alpha_min_deg"] for f in families},
                  rule="alpha_min: the smallest radius above which the lower limit stays >= efficiency_level")
    return t


def spectra_check_table(rows: list[dict], sigma: float) -> Table:
    """Mean power of each injected family's skies over the null skies' per l band, its error and
    the departure in units of it (topology.run.spectra_check)."""
    names = ("injected_family", "l_min", "l_max", "power_ratio", "error", "departure_sigma", "departs")
    t = Table(rows=[(r["family"], r["l_min"], r["l_max"], r["ratio"], r["error"], r["departure_sigma"],
                     "yes" if r["departs"] else "no") for r in rows],
              names=names, dtype=("U96", int, int, float, float, float, "U3"))
    t["power_ratio"].description = "mean C_l of the injected skies / mean C_l of the null skies (2l+1 weighted)"
    t["error"].description = "1 sigma of the ratio from the scatter of both sets of skies"
    t.meta.update(departure_rule=f"departs: |ratio - 1| > {sigma:g} error")
    return t


def target_tables(maps: list[dict], calibration: dict, th, null, *, false_alarm: float, n_null: int,
                  efficiency_level: float, n_injections: int) -> tuple[Table, Table, Table]:
    """The tables of a targeted run: outcome per map and target, thresholds and efficiency per target."""
    rows = []
    for m in maps:
        for r in m["targets"]:
            s_comb = r.get("S_combined")
            rows.append((m["name"], r["target"], r["Z_combined"], r["threshold"],
                         float("nan") if s_comb is None else s_comb, r["p_value"], r["efficiency"],
                         r["efficiency_lower"], "detected" if r["detected"] else ("excluded" if r["excluded"] else
                                                                                "not excluded")))
    names = ("map", "target", "Z_combined", "Z_threshold", "S_combined", "p_value", "efficiency", "efficiency_lower",
             "outcome")
    t = Table(rows=rows, names=names, dtype=("U64", "U128", float, float, float, float, float, float, "U16"))
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
    et["efficiency_lower"] = calibration["efficiency_lower"]
    et["efficiency_upper"] = calibration["efficiency_upper"]
    et.meta.update(n_injections_per_target=n_injections, efficiency_level=efficiency_level)
    return t, tt, et


def space_label(family: str, params: dict | None = None) -> str:
    """A space in words: 'lens L(7, 2)', 'prism D*_3', 'E2 (lengths 1.55, 1.7, 0.8)'."""
    params = params or {}
    if family == "lens" and "p" in params:
        return f"lens L({params['p']}, {params['q']})"
    if family == "prism" and "m" in params:
        return f"prism D*_{params['m']}"
    shown = {k: v for k, v in params.items() if k not in ("angle", "angles", "length_unit") or v not in (90.0, [90.0] * 3)}
    if not shown:
        return str(family)
    parts = []
    for k, v in shown.items():
        v = ", ".join(f"{x:g}" for x in v) if isinstance(v, (list, tuple)) else (f"{v:g}" if isinstance(v, float) else v)
        parts.append(f"{k} {v}")
    return f"{family} ({'; '.join(parts)})"


def _verdict(entry: dict | None) -> str:
    if entry is None or "excluded" not in entry:
        return "not tested"
    return "excluded" if entry["excluded"] else "allowed"


def _column(rows, name, key, dtype, unit=None, desc=""):
    vals = [r.get(key) for r in rows]
    mask = [v is None for v in vals]
    fill = {"i": 0, "f": np.nan, "U": ""}[np.dtype(dtype).kind]
    data = np.array([fill if v is None else v for v in vals], dtype=dtype)
    return MaskedColumn(data, name=name, mask=mask, unit=unit, description=desc)


def _meta(summary: dict) -> dict:
    return {"alpha_min_deg": summary["alpha_min_deg"], "chi_rec_mpc": summary["chi_rec_mpc"],
            "convention": summary["convention"], "assumptions": summary["assumptions"],
            "cosmology": dict(summary["cosmology"]), "source": "topology.bounds (CSS 1998 circle radii)"}


def _source(src: dict | None, summary: dict) -> dict:
    """The calibration columns of a bounds row: the alpha_min it uses, the injected family it
    comes from and whether that is its own family or borrowed (an assumption); a summary of
    ``topology bound`` has one alpha_min, given by the user."""
    if src is None:
        return {"alpha_min": summary["alpha_min_deg"], "injected_family": "", "calibration": "given"}
    return {"alpha_min": src["alpha_min_deg"], "injected_family": src["injected_family"],
            "calibration": src["calibration"]}


def _source_columns(rows) -> list:
    return [
        _column(rows, "alpha_min", "alpha_min", float, u.deg, "the alpha_min this row is bounded with"),
        _column(rows, "injected_family", "injected_family", "U96",
                desc="the injected family whose efficiency gave that alpha_min"),
        _column(rows, "calibration", "calibration", "U10",
                desc="own: the row's own family was injected; borrowed: the alpha_min of another injected family, "
                     "an assumption that this space's circles are found as well; given: alpha_min given"),
    ]


def flat_bounds_table(summary: dict) -> Table:
    """Flat spaces: the bound on any flat space (shortest loop), the cubic torus, and every
    configured flat space with its verdict and the smallest allowed scale of its shape; each row
    with the alpha_min it uses and the injected family that alpha_min comes from."""
    f = summary["flat"]
    sources = f.get("sources", {})
    chi = summary["chi_rec_mpc"]
    cubic = f["cubic_torus_inscribed_radius_over_chi_rec"]
    rows = [{"space": "any flat space", "quantity": "shortest loop / (2 chi_rec)",
             "bound": f["min_loop_over_lss_diameter"], "bound_mpc": f["min_loop_mpc"],
             "verdict": "bound" if f["min_loop_over_lss_diameter"] is not None else "no bound",
             **_source(sources.get("any flat space"), summary)},
            {"space": "cubic torus E1", "quantity": "inscribed radius R_i / chi_rec", "bound": cubic,
             "bound_mpc": None if cubic is None else cubic * chi, "verdict": "bound" if cubic is not None else "no bound",
             **_source(sources.get("cubic torus E1"), summary)}]
    configured = ([(f["configured"], None)] if "configured" in f else []) + [
        (e["flat"], e.get("source")) for e in summary.get("families", []) if "flat" in e]
    for c, src in configured:
        rows.append({"space": space_label(c["family"], c["params"]), "quantity": "scale factor of the shape",
                     "bound": c.get("min_scale_factor"), "verdict": _verdict(c),
                     "shortest_displacement": c.get("shortest_displacement_over_chi_rec"),
                     "largest_circle": c.get("largest_circle_radius_deg"), **_source(src, summary)})
    t = Table([
        _column(rows, "space", "space", "U96"),
        _column(rows, "quantity", "quantity", "U40"),
        _column(rows, "bound", "bound", float, u.dimensionless_unscaled,
                "the quantity is larger than this (scale factor: the shape is allowed when scaled by more)"),
        _column(rows, "bound_mpc", "bound_mpc", float, u.Mpc, "the bound in Mpc"),
        _column(rows, "shortest_displacement", "shortest_displacement", float, u.dimensionless_unscaled,
                "configured space: shortest clone displacement at the observer, in chi_rec"),
        _column(rows, "largest_circle", "largest_circle", float, u.deg,
                "configured space: radius of its largest matched circles"),
        _column(rows, "verdict", "verdict", "U12", desc="excluded / allowed at alpha_min (configured spaces)"),
        *_source_columns(rows),
    ])
    t.meta.update(_meta(summary))
    return t


def bounds_table(summary: dict) -> Table:
    """Curved spaces: one row per spherical family and distinct space (isometric lens spaces
    folded), then the configured spherical or hyperbolic spaces with their verdicts."""
    rows = []
    for r in summary["spherical"]:
        iso = r.get("isometric_q")
        rows.append(dict(r, geometry="spherical",
                         space=space_label(r["family"], {k: r[k] for k in ("p", "q", "m") if k in r}),
                         isometric_q=" ".join(str(q) for q in iso) if iso else None,
                         omega_k_bound=r["min_omega_k"], **_source(r.get("source"), summary),
                         verdict="no bound" if r.get("source") and r["source"]["alpha_min_deg"] is None else "bound"))
    configured = [(summary[k], None, k) for k in ("spherical_configured", "hyperbolic") if k in summary]
    configured += [(e[k], e.get("source"), k) for e in summary.get("families", [])
                   for k in ("spherical_configured", "hyperbolic") if k in e]
    for r, src, key in configured:
        geometry = "hyperbolic" if key == "hyperbolic" else "spherical"
        rows.append(dict(r, **{k: v for k, v in r["params"].items() if k in ("p", "q", "m")}, geometry=geometry,
                         space=space_label(r["family"], r["params"]) + " (configured)",
                         omega_k_bound=r.get("min_omega_k", r.get("max_omega_k")), verdict=_verdict(r),
                         **_source(src, summary)))
    hubble_mpc = C_KM_S / (100.0 * summary["cosmology"]["h"])
    for r in rows:
        ok = r["omega_k_bound"]
        r["rc_mpc"] = None if ok in (None, 0.0) else hubble_mpc / math.sqrt(abs(ok))
    t = Table([
        _column(rows, "geometry", "geometry", "U10"),
        _column(rows, "space", "space", "U64"),
        _column(rows, "family", "family", "U32"),
        _column(rows, "p", "p", int, desc="lens space order p"),
        _column(rows, "q", "q", int, desc="lens space q, the smallest of its isometry class"),
        _column(rows, "isometric_q", "isometric_q", "U32", desc="lens spaces: the q' <= p/2 of isometric L(p, q')"),
        _column(rows, "m", "m", int, desc="prism space S^3/D*_m"),
        _column(rows, "shortest_displacement", "shortest_displacement_over_curvature_radius", float,
                u.dimensionless_unscaled,
                "shortest clone displacement in units of R_c (maximised over observers when inhomogeneous)"),
        _column(rows, "max_chi_rec_over_curvature_radius", "max_chi_rec_over_curvature_radius", float,
                u.dimensionless_unscaled, "largest allowed chi_rec / R_c"),
        _column(rows, "min_curvature_radius_over_chi_rec", "min_curvature_radius_over_chi_rec", float,
                u.dimensionless_unscaled, "smallest allowed R_c / chi_rec"),
        _column(rows, "omega_k_bound", "omega_k_bound", float, u.dimensionless_unscaled,
                "spherical: Omega_K > bound; hyperbolic: Omega_K < bound; " + summary["convention"]),
        _column(rows, "min_curvature_radius_mpc", "rc_mpc", float, u.Mpc,
                "R_c = (c/H0)/sqrt(|Omega_K|) at the Omega_K bound"),
        _column(rows, "verdict", "verdict", "U12",
                desc="bound (a family's limit; no bound: its injected family never reaches the efficiency level) "
                     "or, for a configured space, excluded / allowed / not tested "
                     "(not tested: the background has another curvature, or its injected family never reaches "
                     "the efficiency level)"),
        *_source_columns(rows),
    ])
    t.meta.update(_meta(summary))
    flat = summary["flat"]
    t.meta.update({"flat_min_loop_over_lss_diameter": flat["min_loop_over_lss_diameter"],
                   "flat_min_loop_mpc": flat["min_loop_mpc"],
                   "cubic_torus_inscribed_radius_over_chi_rec": flat["cubic_torus_inscribed_radius_over_chi_rec"]})
    return t


def _harmonic_meta(t: Table, meta: dict) -> None:
    t.meta.update({k: v for k, v in meta.items() if v is not None and k != "maps"})


def harmonic_bounds_table(maps: list[dict], meta: dict) -> Table:
    """The low-l likelihood bound per map and [bounds] family, beside the circle bound of the same
    family: both are scale factors of the configured shape (lengths and observer position)."""
    rows = []
    for m in maps:
        for h in m.get("harmonic", []):
            scales = [r["scale"] for r in h.get("rows", [])]
            excluded = [r["scale"] for r in h.get("rows", []) if r["excluded"]]
            status = (h.get("note") or "not computed") if not h["computed"] else (
                "bound" if h["bound_scale"] is not None else "no bound (the smallest scale is not excluded)")
            rows.append({"map": m["name"], "space": space_label(h["family"], h["params"]),
                         "circle_bound": h["circle_min_scale"], "circle_verdict": h["circle_verdict"],
                         "likelihood_bound": h["bound_scale"], "status": status,
                         "smallest_scale": min(scales) if scales else None,
                         "largest_scale": max(scales) if scales else None,
                         "n_excluded": len(excluded) if h["computed"] else None,
                         "n_scales": len(scales) if h["computed"] else None})
    t = Table([
        _column(rows, "map", "map", "U64"),
        _column(rows, "space", "space", "U96"),
        _column(rows, "circle_bound", "circle_bound", float, u.dimensionless_unscaled,
                "matched circles: the shape is allowed when scaled by more than this (min_scale_factor)"),
        _column(rows, "circle_verdict", "circle_verdict", "U40", desc="the circle verdict at scale 1"),
        _column(rows, "likelihood_bound", "likelihood_bound", float, u.dimensionless_unscaled,
                "low-l likelihood: every listed scale up to this one is excluded at the level"),
        _column(rows, "smallest_scale", "smallest_scale", float, u.dimensionless_unscaled, "smallest scale tried"),
        _column(rows, "largest_scale", "largest_scale", float, u.dimensionless_unscaled, "largest scale tried"),
        _column(rows, "n_excluded", "n_excluded", int, desc="scales excluded (of n_scales)"),
        _column(rows, "n_scales", "n_scales", int, desc="scales tried ([harmonic] scales)"),
        _column(rows, "status", "status", "U160", desc="bound, no bound, or why it is not computed"),
    ])
    _harmonic_meta(t, meta)
    return t


def harmonic_profile_table(maps: list[dict], meta: dict) -> Table:
    """The likelihood profile of each map and computed family: per scale the map's log-likelihood
    ratio to the isotropic sky, the calibrated threshold, the verdict and the fraction of isotropic
    simulated maps that exclude that scale (the expected power)."""
    rows = []
    for m in maps:
        for h in m.get("harmonic", []):
            for r in h.get("rows", []):
                rows.append({"map": m["name"], "space": space_label(h["family"], h["params"]), "scale": r["scale"],
                             "log_ratio": r["log_ratio"], "threshold": r["threshold"],
                             "excluded": "yes" if r["excluded"] else "no",
                             "isotropic_exclusion_rate": r["isotropic_exclusion_rate"],
                             "nearest_image": r.get("nearest_image")})
    t = Table([
        _column(rows, "map", "map", "U64"),
        _column(rows, "space", "space", "U96"),
        _column(rows, "scale", "scale", float, u.dimensionless_unscaled, "factor of the lengths and observer position"),
        _column(rows, "log_ratio", "log_ratio", float, desc="ln L(space) - ln L(isotropic) of the map (nats)"),
        _column(rows, "threshold", "threshold", float,
                desc="the (1 - level) quantile of the statistic over simulated maps of that scale"),
        _column(rows, "excluded", "excluded", "U3", desc="log_ratio < threshold"),
        _column(rows, "isotropic_exclusion_rate", "isotropic_exclusion_rate", float,
                desc="fraction of isotropic simulated maps that exclude the scale"),
        _column(rows, "nearest_image", "nearest_image", float, u.dimensionless_unscaled,
                "distance to the observer's nearest image, chi_rec (circles exist below 2)"),
    ])
    _harmonic_meta(t, meta)
    return t
