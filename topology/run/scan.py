"""The radius scan, the default kind of run (``[search] mode`` antipodal or all-pairs).

1. ``data/<name>``: search each data map with the configured search;
2. ``null/<i>``: isotropic skies searched with identical settings; their S_max per radius
   calibrate the thresholds (:mod:`topology.significance`: per radius and over the whole radius
   range, standardised-maximum look-elsewhere correction) and the candidates' p-values;
3. ``inj/<family>/<radius>/<j>``: for each injected family (:mod:`topology.run.calibration`;
   default a cubic torus E1, whose pairs are back to back, and a half-turn space E2 seen off its
   axis, whose largest pairs are not), skies scaled so that the largest circles have a radius
   drawn uniformly within half a search step of the nominal one, observed and searched like the
   data; an injection is recovered when S_max within the radius tolerance (default one search
   step) of the nominal radius exceeds the whole-range threshold. Per family, alpha_min is the
   smallest radius from which the one-sided exact binomial lower limit on the efficiency
   (Clopper & Pearson 1934) stays >= the configured level;
4. bounds (:mod:`topology.bounds`) for every map without a detection, each from the alpha_min of
   its own injected family or a borrowed one, said beside it.

Candidates are ranked and tested on S_eq, the score of S_max (:func:`map_candidates`).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .. import significance as sig
from ..execution import Task
from . import calibration
from . import tasks as T
from . import report_parts
from . import spectra_check
from .fields import field_calibration, fields_table
from .report_parts import Analysis, field_assumptions, sky_figure

N_CANDIDATES = 10  # candidates per map in the summary and tables


def build_tasks(plan) -> list[Task]:
    out = [Task(T.data_id(m.name), T.task_data, {"plan": plan, "name": m.name}) for m in plan.maps]
    out += [Task(T.null_id(i), T.task_null, {"plan": plan, "task_id": T.null_id(i)}) for i in range(plan.n_null)]
    for tid, family, r in calibration.injection_tasks(plan):
        out.append(Task(tid, T.task_injection, {"plan": plan, "family": family, "radius_deg": r, "task_id": tid}))
    return out


def map_candidates(res: dict, radii: np.ndarray, null: np.ndarray, whole_range: np.ndarray) -> list[dict]:
    """The candidates of one searched map, ranked and tested on the score that decides detection:
    S_eq = sqrt(1 - (1 - S^2)^f) (S_max per radius is S_eq). Each carries S, the kept fraction f
    ("overlap"), S_eq, the local p at its radius (against the null S_max there) and the global p
    (look-elsewhere: :func:`topology.significance.global_p_value` of a curve that is S_eq at its
    radius and nothing elsewhere); ``above_threshold`` is S_eq above the whole-range threshold,
    the test of ``detected``."""
    # the pairs that define S_max (the best-ranked pair per radius and orientation), then the
    # other reported pairs: the same statistic as the null skies', so their p-values are comparable
    source = [e["best"] for e in res["s_max"] if e.get("best")]
    seen = {_pair_key(c) for c in source}
    source += [c for c in res.get("candidates", []) if _pair_key(c) not in seen]
    cands = []
    for c in source:
        s_eq = c.get("S_eq", c["S"])  # a full-circle pair (no mask) has S_eq = S
        if s_eq is None or not np.isfinite(s_eq):
            continue
        i = int(np.argmin(np.abs(radii - c["radius_deg"])))
        curve = np.full(len(radii), -np.inf)
        curve[i] = s_eq
        p_local = float(sig.local_p_values(np.array([[s_eq]]), null[:, i:i + 1])[0, 0])
        cands.append({k: c[k] for k in ("center_a", "center_b", "radius_deg", "twist_deg", "orientation", "S")}
                     | {"overlap": float(c.get("overlap", 1.0)), "S_eq": float(s_eq),
                        "p_value": sig.global_p_value(curve, null), "p_value_local": p_local,
                        "above_threshold": bool(s_eq > whole_range[i])})
    cands.sort(key=lambda c: (-c["S_eq"], c["p_value"]))
    # every candidate above threshold is kept (so that a detected map lists its detection, even
    # one at a radius of high threshold), then the best others; the list stays ranked by S_eq
    above = [c for c in cands if c["above_threshold"]]
    others = [c for c in cands if not c["above_threshold"]]
    keep = {id(c) for c in above} | {id(c) for c in others[:max(0, N_CANDIDATES - len(above))]}
    return [c for c in cands if id(c) in keep]


def _pair_key(c: dict) -> tuple:
    return (round(c["radius_deg"], 6), tuple(np.round(c["center_a"], 4)), tuple(np.round(c["center_b"], 4)),
            c["orientation"])


def analyse(plan, store) -> Analysis:
    """Thresholds, p-values, efficiency and alpha_min per injected family, and bounds (each from
    its own family's alpha_min or a stated borrowed one) from the stored task results."""
    from .plan import reachable_note

    radii = plan.radii_deg
    false_alarm, level = plan.false_alarm, plan.efficiency_level
    null = np.array([store.get(T.null_id(i))["s_max"] for i in range(plan.n_null)])
    null = np.where(np.isfinite(null), null, -1.0)
    thresholds = sig.thresholds(radii, null, false_alarm)
    families = calibration.family_efficiencies(plan, store, thresholds.whole_range)
    notes = [n for n in [reachable_note(plan.n_injections, level, plan.efficiency_confidence)] if n]
    notes += [f"alpha_min of the injected {f['label']} is the lowest injected radius ({f['alpha_min_deg']:g} deg): "
              "the bound may be stronger; inject lower radii" for f in families if f["at_lowest_radius"]]
    headline = families[0]["alpha_min_deg"] if families else None
    spectra_rows = spectra_consistency(plan, store)
    notes += spectra_check.departure_notes(spectra_rows)

    cosmo = plan.cosmology
    maps_out, map_values = [], {}
    for spec in plan.maps:
        res = store.get(T.data_id(spec.name))
        smax = T.smax_by_radius(res, radii)
        smax_finite = np.where(np.isfinite(smax), smax, -1.0)
        is_detected = bool(np.any(smax_finite > thresholds.whole_range))
        cands = map_candidates(res, radii, null, thresholds.whole_range)
        bounds = None if is_detected else calibration.map_bounds(plan, families, cosmo)
        maps_out.append({
            "name": spec.name, "source": spec.path or "inline synthetic sky", "detected": is_detected,
            "candidates": cands, "false_alarm": false_alarm, "n_null": plan.n_null,
            "alpha_min_deg": headline,
            "alpha_min_by_family": {f["label"]: f["alpha_min_deg"] for f in families},
            "global_p_value": sig.global_p_value(smax_finite, null),
            "s_max": [None if not np.isfinite(v) else float(v) for v in smax],
            "bounds": bounds,
            "predicted": res.get("predicted", []),
            "note": "; ".join(["circles detected: no bound is derived from this map" if is_detected else
                               ("no injected family reaches the efficiency level: no alpha_min, no bound"
                                if bounds is None else "")] + ([] if is_detected else notes)).strip("; "),
            "field": plan.pol_field or "T",
        })
        map_values[spec.name] = res.get("map_values")
    calibration_out = {
        "radii_deg": radii.tolist(), "threshold_whole_range": thresholds.whole_range.tolist(),
        "threshold_local": thresholds.local.tolist(), "local_level": thresholds.local_level,
        "z_threshold": thresholds.z_threshold, "measured_false_alarm": thresholds.measured_false_alarm,
        "measured_false_alarm_error": thresholds.measured_false_alarm_error,
        "injection_radii_deg": plan.injection_radii_deg.tolist(), "n_injections": plan.n_injections,
        "efficiency_level": level, "efficiency_confidence": plan.efficiency_confidence,
        "efficiency_interval": (f"one-sided exact binomial (Clopper & Pearson 1934) limits at "
                                f"{plan.efficiency_confidence:g} confidence; alpha_min needs the lower limit >= "
                                f"{level:g}"),
        "alpha_min_deg": headline, "notes": notes, "field": plan.pol_field or "T",
        "field_assumptions": field_assumptions(plan),
        "families": [{k: v for k, v in f.items() if k != "key"} | {"task_key": f["key"]} for f in families],
        "spectra_check": spectra_rows,
    }
    analysis = Analysis(maps_out, calibration_out, thresholds, null, map_values)
    by_field = field_calibration(plan, store, analysis)  # T+E: T alone and E alone on the same skies
    if by_field:
        calibration_out["by_field"] = by_field
        for m in maps_out:
            m["by_field"] = {row["field"]: row["maps"][m["name"]] | {"alpha_min_any_flat_deg":
                                                                     row["alpha_min_any_flat_deg"]}
                             for row in by_field}
    return analysis


def spectra_consistency(plan, store) -> list[dict]:
    """Injected over null power per family and l band (:mod:`.spectra_check`); empty when the
    stored skies carry no spectrum (results of an older version, resumed)."""
    null = [store.get(T.null_id(i)).get("cl") for i in range(plan.n_null)]
    if any(c is None for c in null):
        return []
    injected = {}
    for info in calibration.family_info(plan):
        cls = [store.get(T.injection_id(info["key"], r, j)).get("cl") for r in plan.injection_radii_deg
               for j in range(plan.n_injections)]
        if all(c is not None for c in cls):
            injected[info["label"]] = np.array(cls)
    return spectra_check.compare(np.array(null), injected, plan.sim_lmax)


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
    t.meta["field"] = plan.pol_field or "T"
    t.write(staging / "thresholds.ecsv", format="ascii.ecsv")
    tables["thresholds"] = t
    families = calibration["families"]
    t = report.efficiency_table(families, plan.injection_radii_deg, calibration["efficiency_level"],
                                calibration["efficiency_confidence"])
    t.meta["field"] = plan.pol_field or "T"
    t.write(staging / "efficiency.ecsv", format="ascii.ecsv")
    tables["efficiency"] = t

    if calibration.get("by_field"):
        t = fields_table(calibration["by_field"], plan)
        t.write(staging / "fields.ecsv", format="ascii.ecsv")
        tables["T alone, E alone and T+E (same skies)"] = t

    if calibration.get("spectra_check"):
        t = report.spectra_check_table(calibration["spectra_check"], spectra_check.DEPARTURE_SIGMA)
        t.write(staging / "spectra_check.ecsv", format="ascii.ecsv")
        tables["injected / null sky power per l band"] = t

    first_bounds = next((m["bounds"] for m in analysis.maps if m["bounds"]), None)
    if first_bounds is not None:
        bt = report.bounds_table(first_bounds)
        ft = report.flat_bounds_table(first_bounds)
        for t in (bt, ft):  # the field the bound comes from, and what its skies assume
            t.meta["field"] = plan.pol_field or "T"
            t.meta["field_assumptions"] = field_assumptions(plan)
        bt.write(staging / "bounds.ecsv", format="ascii.ecsv")
        ft.write(staging / "flat_bounds.ecsv", format="ascii.ecsv")
        (staging / "bounds.tex").write_text(report.bounds_latex(bt, ft, first_bounds,
                                                                extra_caption=exclusion_caption(plan)))
        tables["bounds: flat spaces"] = ft
        tables["bounds: curved spaces"] = bt
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
        staging / "efficiency", families, plan.injection_radii_deg, calibration["efficiency_level"], plan.false_alarm,
        calibration["efficiency_confidence"])
    fig = report.figure_omega_k(staging / "omega_k", first_bounds) if first_bounds is not None else None
    if fig:  # after the maps' figures and the efficiency it rests on
        figures["Omega_K allowed for spherical spaces"] = fig
    return tables, figures


def exclusion_caption(plan) -> str:
    """The LaTeX caption sentence that says what "excluded" means: the exact lower limit of the
    efficiency, not the recovered fraction, reaches the level."""
    from ..report.latex import escape

    level = escape(format(plan.efficiency_level, ".0%"))
    conf = escape(format(plan.efficiency_confidence, ".0%"))
    field = "" if not plan.pol_field else f" Searched in {escape(plan.pol_field)} (polarised null and injected skies)."
    return field + (
            f" A radius $\\alpha \\geq \\alpha_{{\\min}}$ is excluded at false-alarm probability {plan.false_alarm:g} "
            f"(calibrated on {plan.n_null} isotropic skies) when the one-sided {conf} lower limit on the detection "
            f"efficiency of its injected family (exact binomial, Clopper \\& Pearson 1934; {plan.n_injections} "
            f"injected skies per radius and family), not the recovered fraction, is at least {level} at that radius "
            f"and every larger injected one.")


def caution(plan) -> str:
    """What the results of a radius scan assume."""
    return report_parts.caution(plan)
