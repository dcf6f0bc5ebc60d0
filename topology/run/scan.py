"""The radius scan, the default kind of run (``[search] mode`` antipodal or all-pairs).

1. ``data/<name>``: search each data map with the configured search;
2. ``null/<i>``: isotropic skies searched with identical settings; their S_max per radius
   calibrate the thresholds (:mod:`topology.significance`: per radius and over the whole radius
   range, standardised-maximum look-elsewhere correction) and the candidates' p-values;
3. ``inj/<radius>/<j>``: multiply connected skies with circles of known radius (default: a cubic
   torus E1 of side 2 chi_rec cos(alpha), randomly oriented, which has three back-to-back pairs
   of radius alpha, with alpha drawn uniformly within half a search step of the nominal radius),
   observed and searched like the data; an injection is recovered when S_max within the radius
   tolerance (default one search step) of the nominal radius exceeds the whole-range threshold.
   The efficiency per radius gives alpha_min, the smallest radius above which it stays >= the
   configured level;
4. bounds from alpha_min (:mod:`topology.bounds`) for every map without a detection.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .. import significance as sig
from ..errors import InputError
from ..execution import Task
from . import tasks as T
from . import report_parts
from .report_parts import Analysis, sky_figure

N_CANDIDATES = 10  # candidates per map in the summary and tables


def build_tasks(plan) -> list[Task]:
    out = [Task(T.data_id(m.name), T.task_data, {"plan": plan, "name": m.name}) for m in plan.maps]
    out += [Task(T.null_id(i), T.task_null, {"plan": plan, "task_id": T.null_id(i)}) for i in range(plan.n_null)]
    for r in plan.injection_radii_deg:
        for j in range(plan.n_injections):
            tid = T.injection_id(r, j)
            out.append(Task(tid, T.task_injection, {"plan": plan, "radius_deg": float(r), "task_id": tid}))
    return out


def analyse(plan, store) -> Analysis:
    """Thresholds, p-values, efficiency, alpha_min and bounds from the stored task results."""
    from ..bounds import bound_summary
    from ..injection import describe

    radii = plan.radii_deg
    false_alarm, level = plan.false_alarm, plan.efficiency_level
    null = np.array([store.get(T.null_id(i))["s_max"] for i in range(plan.n_null)])
    null = np.where(np.isfinite(null), null, -1.0)
    thresholds = sig.thresholds(radii, null, false_alarm)

    tolerance = float(plan.significance["radius_tolerance_deg"])
    injection_radii = plan.injection_radii_deg
    recovered = np.zeros((plan.n_injections, len(injection_radii)), dtype=bool)
    for k, r in enumerate(injection_radii):
        near = np.abs(radii - r) <= tolerance + 1e-9
        for j in range(plan.n_injections):
            s = np.asarray(store.get(T.injection_id(r, j))["s_max"])
            recovered[j, k] = bool(np.any(s[near] > thresholds.whole_range[near]))
    eff, eff_err = sig.efficiency(recovered)
    amin = sig.alpha_min(injection_radii, eff, level)

    cosmo = plan.cosmology
    maps_out, map_values = [], {}
    for spec in plan.maps:
        res = store.get(T.data_id(spec.name))
        smax = T.smax_by_radius(res, radii)
        smax_finite = np.where(np.isfinite(smax), smax, -1.0)
        is_detected = bool(np.any(smax_finite > thresholds.whole_range))
        # the pairs that define S_max (the best-ranked pair per radius and orientation): the same
        # statistic as the null skies', so their p-values are comparable
        source = [e["best"] for e in res["s_max"] if e.get("best")] or res["candidates"]
        cands = []
        for c in source:
            i = int(np.argmin(np.abs(radii - c["radius_deg"])))
            curve = np.full(len(radii), -1.0)
            curve[i] = c["S"]
            p_local = float(sig.local_p_values(np.array([[c["S"]]]), null[:, i:i + 1])[0, 0])
            cands.append({k: c[k] for k in ("center_a", "center_b", "radius_deg", "twist_deg", "orientation", "S")}
                         | {"p_value": sig.global_p_value(curve, null), "p_value_local": p_local,
                            "above_threshold": bool(c["S"] > thresholds.whole_range[i])})
        cands.sort(key=lambda c: (not c["above_threshold"], c["p_value"], -c["S"]))
        cands = cands[:N_CANDIDATES]
        if is_detected or amin is None:
            bounds = None
        else:
            bounds = bound_summary(amin, cosmo, p_max=int(plan.bounds["p_max"]), m_max=int(plan.bounds["m_max"]))
            bounds["families"] = family_bounds(plan, amin, cosmo)
        maps_out.append({
            "name": spec.name, "source": spec.path or "inline synthetic sky", "detected": is_detected,
            "candidates": cands, "false_alarm": false_alarm, "n_null": plan.n_null,
            "alpha_min_deg": amin, "global_p_value": sig.global_p_value(smax_finite, null),
            "s_max": [None if not np.isfinite(v) else float(v) for v in smax],
            "bounds": bounds,
            "predicted": res.get("predicted", []),
            "note": ("circles detected: no bound is derived from this map" if is_detected else
                     ("the efficiency never reaches the level: no alpha_min, no bound" if amin is None else "")),
        })
        map_values[spec.name] = res.get("map_values")
    calibration = {
        "radii_deg": radii.tolist(), "threshold_whole_range": thresholds.whole_range.tolist(),
        "threshold_local": thresholds.local.tolist(), "local_level": thresholds.local_level,
        "z_threshold": thresholds.z_threshold, "measured_false_alarm": thresholds.measured_false_alarm,
        "measured_false_alarm_error": thresholds.measured_false_alarm_error,
        "injection_radii_deg": injection_radii.tolist(), "efficiency": eff.tolist(), "efficiency_error": eff_err.tolist(),
        "n_injections": plan.n_injections, "efficiency_level": level, "alpha_min_deg": amin,
        "injection_family": plan.significance["injection_family"],
        "injection": describe(plan.significance["injection_family"]),
    }
    return Analysis(maps_out, calibration, thresholds, null, map_values)


def family_bounds(plan, amin: float, cosmo) -> list[dict]:
    """Per configured family: excluded or not, and the scale / curvature bound."""
    from ..bounds import bound_summary
    from ..config import Config
    from .plan import bound_families

    cfg = Config({"bounds": {"families": plan.bounds["families"]}}, Path(plan.base_dir) / "run.toml")
    out = []
    for space, obs in bound_families(cfg, cosmo):
        try:
            b = bound_summary(amin, cosmo, space=space, observer=obs, p_max=2, m_max=2)
        except InputError as e:
            out.append({"family": space.family, "params": space.params, "error": str(e)})
            continue
        entry = {"family": space.family, "params": space.params}
        if "configured" in b.get("flat", {}):
            entry["flat"] = b["flat"]["configured"]
        for key in ("spherical_configured", "hyperbolic"):
            if b.get(key):
                entry[key] = b[key]
        out.append(entry)
    return out


def write_report(plan, analysis: Analysis, summary: dict, staging: Path) -> tuple[dict, dict]:
    """Tables and figures of a radius scan in ``staging``; returns (tables, figures) for the page."""
    from .. import report

    thresholds, null = analysis.thresholds, analysis.null
    radii = plan.radii_deg
    calibration = analysis.calibration
    figures, tables = {}, {}

    t = report.candidates_table(analysis.maps)
    t.write(staging / "candidates.ecsv", format="ascii.ecsv")
    tables["candidates"] = t
    t = report.thresholds_table(radii, thresholds, null)
    t.write(staging / "thresholds.ecsv", format="ascii.ecsv")
    tables["thresholds"] = t
    t = report.efficiency_table(plan.injection_radii_deg, np.array(calibration["efficiency"]),
                                np.array(calibration["efficiency_error"]), calibration["n_injections"],
                                calibration["efficiency_level"])
    t.write(staging / "efficiency.ecsv", format="ascii.ecsv")
    tables["efficiency"] = t

    first_bounds = next((m["bounds"] for m in analysis.maps if m["bounds"]), None)
    if first_bounds is not None:
        bt = report.bounds_table(first_bounds)
        bt.write(staging / "bounds.ecsv", format="ascii.ecsv")
        ft = report.flat_bounds_table(first_bounds)
        ft.write(staging / "flat_bounds.ecsv", format="ascii.ecsv")
        level_tex = format(calibration["efficiency_level"], ".0%").replace("%", r"\%")
        cap_extra = (f" Circles of radius $\\alpha \\geq \\alpha_{{\\min}} = {first_bounds['alpha_min_deg']:.1f}^\\circ$ are "
                     f"excluded at false-alarm probability {plan.false_alarm:g} with detection efficiency "
                     f"$\\geq$ {level_tex}, calibrated on {plan.n_null} isotropic skies.")
        (staging / "bounds.tex").write_text(report.bounds_latex(bt, ft, first_bounds, extra_caption=cap_extra))
        tables["bounds: flat spaces"] = ft
        tables["bounds: curved spaces"] = bt
        fig = report.figure_omega_k(staging / "omega_k", first_bounds)
        if fig:
            figures["Omega_K allowed for spherical spaces"] = fig
    else:
        no_bound = "no bound: every map was detected or the efficiency never reached the level\n"
        (staging / "bounds.ecsv").write_text("# " + no_bound)
        (staging / "bounds.tex").write_text("% " + no_bound)

    for m in analysis.maps:
        name = m["name"]
        smax = np.array([np.nan if v is None else v for v in m["s_max"]])
        figures[f"{name}: S_max against radius"] = report.figure_smax(staging / f"smax_{name}", name, radii, smax,
                                                                      thresholds, null)
        fig = sky_figure(plan, analysis, m, staging)
        if fig:
            figures[f"{name}: sky with best candidate circles"] = fig
    figures["detection efficiency"] = report.figure_efficiency(
        staging / "efficiency", plan.injection_radii_deg, np.array(calibration["efficiency"]),
        np.array(calibration["efficiency_error"]), calibration["efficiency_level"], calibration["alpha_min_deg"],
        plan.false_alarm)
    return tables, figures


def caution(plan) -> str:
    """What the results of a radius scan assume."""
    return report_parts.caution(plan)
