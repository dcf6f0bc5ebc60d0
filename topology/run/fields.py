"""T alone, E alone and T + E from the same skies: what a run of field T+E reports beside its
own calibration.

The T + E search keeps, per radius, each map's own S_max (the best S_eq of the T and of the E
hierarchy's last level: what a search of that map alone gives, :mod:`topology.search.polarised`),
for the data, null and injected skies alike. Each field then has its thresholds (from the same
polarised null skies, :func:`topology.significance.thresholds`), its efficiency and alpha_min per
injected family (the same injected polarised skies; Clopper & Pearson 1934 lower limits), each
map's verdict, and the bound on any flat space its weakest flat family gives
(:func:`topology.bounds.bound_summary`). The run's bounds tables stay those of T + E.
"""

from __future__ import annotations

import numpy as np


#: the fields a run of field T+E calibrates on the same skies, in the order of its report
FIELDS = ("T", "E", "T+E")


def field_calibration(plan, store, analysis) -> list[dict] | None:
    """A run of field T+E: the thresholds, efficiency and alpha_min of T alone, E alone and T + E
    on the same null and injected skies, each map's verdict in each field, and the bound on any
    flat space each field gives. T and E alone are each map's own S_max of the T + E search
    (:func:`topology.run.tasks.smax_by_field`: what a search of that map alone gives); T + E is the
    run's own calibration (``analysis``). None for other runs, or results without the per-field
    S_max (an older store)."""
    from .. import significance as sig
    from . import calibration
    from . import tasks as T

    if plan.pol_field != "T+E":
        return None
    radii = plan.radii_deg
    null_f = [store.get(T.null_id(i)).get("s_max_fields") for i in range(plan.n_null)]
    if any(n is None for n in null_f):
        return None
    infos = calibration.family_info(plan)
    rows = []
    for field in FIELDS:
        if field == "T+E":
            thr, null, families = analysis.thresholds, analysis.null, analysis.calibration["families"]
        else:
            null = np.array([n[field] for n in null_f])
            null = np.where(np.isfinite(null), null, -1.0)
            thr = sig.thresholds(radii, null, plan.false_alarm)
            families = _field_families(plan, store, infos, field, thr.whole_range)
        maps = {}
        for spec in plan.maps:
            res = store.get(T.data_id(spec.name))
            smax = T.smax_by_radius(res, radii) if field == "T+E" else T.smax_by_field(res, radii)[field]
            smax = np.where(np.isfinite(smax), smax, -1.0)
            maps[spec.name] = {"detected": bool(np.any(smax > thr.whole_range)),
                               "global_p_value": sig.global_p_value(smax, null)}
        flat = [f for f in families if f["geometry"] == "flat"] or families
        amins = [f["alpha_min_deg"] for f in flat]
        weakest = None if not amins or any(a is None for a in amins) else max(amins)
        rows.append({"field": field, "threshold_whole_range": [float(v) for v in thr.whole_range],
                     "families": [{k: f[k] for k in ("label", "recovered", "n_injections", "efficiency",
                                                     "efficiency_lower", "alpha_min_deg")} for f in families],
                     "maps": maps, "alpha_min_any_flat_deg": weakest,
                     "min_loop_over_lss_diameter": _loop_bound(weakest, plan)})
    return rows


def _field_families(plan, store, infos, field: str, whole_range: np.ndarray) -> list[dict]:
    """Efficiency and alpha_min per injected family in ``field`` (as
    :func:`topology.run.calibration.family_efficiencies`, on each map's own S_max)."""
    from .. import significance as sig
    from . import tasks as T

    out = []
    for info in infos:
        recovered = np.zeros((plan.n_injections, len(plan.injection_radii_deg)), dtype=bool)
        for k, r in enumerate(plan.injection_radii_deg):
            near = T.radii_near(plan, r)
            for j in range(plan.n_injections):
                s = np.asarray(store.get(T.injection_id(info["key"], r, j))["s_max_fields"][field])
                recovered[j, k] = bool(np.any(s[near] > whole_range[near]))
        eff = sig.efficiency(recovered, plan.efficiency_confidence)
        out.append({**info, "recovered": eff.recovered.tolist(), "n_injections": plan.n_injections,
                    "efficiency": eff.fraction.tolist(), "efficiency_lower": eff.lower.tolist(),
                    "alpha_min_deg": sig.alpha_min(plan.injection_radii_deg, eff.lower, plan.efficiency_level)})
    return out


def _loop_bound(alpha_min_deg, plan) -> float | None:
    """The bound on the shortest loop of any flat space over the LSS diameter at ``alpha_min_deg``."""
    if alpha_min_deg is None:
        return None
    from ..bounds import bound_summary

    return float(bound_summary(alpha_min_deg, plan.cosmology, p_max=2, m_max=2)["flat"]["min_loop_over_lss_diameter"])


def fields_table(rows: list[dict], plan):
    """The astropy Table of :func:`field_calibration`: one row per field and injected family."""
    from astropy.table import Table

    names = ("field", "injected_family", "recovered", "alpha_min", "alpha_min_any_flat", "min_loop_over_lss_diameter",
             "maps_detected")
    data = {k: [] for k in names}
    for row in rows:
        for f in row["families"]:
            data["field"].append(row["field"])
            data["injected_family"].append(f["label"])
            data["recovered"].append(" ".join(f"{r}/{f['n_injections']}" for r in f["recovered"]))
            data["alpha_min"].append(np.nan if f["alpha_min_deg"] is None else float(f["alpha_min_deg"]))
            data["alpha_min_any_flat"].append(np.nan if row["alpha_min_any_flat_deg"] is None
                                              else float(row["alpha_min_any_flat_deg"]))
            data["min_loop_over_lss_diameter"].append(np.nan if row["min_loop_over_lss_diameter"] is None
                                                      else row["min_loop_over_lss_diameter"])
            data["maps_detected"].append(", ".join(n for n, m in row["maps"].items() if m["detected"]) or "none")
    t = Table(data)
    t["alpha_min"].unit = t["alpha_min_any_flat"].unit = "deg"
    t["alpha_min"].description = "alpha_min of the injected family in this field (nan: never reaches the level)"
    t["alpha_min_any_flat"].description = "the weakest alpha_min of the injected flat families in this field"
    t["min_loop_over_lss_diameter"].description = ("bound on any flat space's shortest loop / LSS diameter from "
                                                   "alpha_min_any_flat (when no map is detected in this field)")
    t["recovered"].description = "injected skies recovered per injection radius"
    t["maps_detected"].description = "maps with S_max above this field's whole-range threshold"
    t.meta["description"] = ("T alone, E alone and T + E on the same null and injected skies: T and E alone are each "
                             "map's own S_max in the T + E search")
    t.meta["injection_radii_deg"] = " ".join(f"{r:g}" for r in plan.injection_radii_deg)
    return t
