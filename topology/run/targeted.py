"""The targeted run (``[search] mode = "targeted"``): named spaces tested one by one.

With ``[search] mode = "targeted"`` the run tests each space of ``[search] targets`` (tables in
the ``[space]`` format, optionally with an observer ``position``; the background is the run's
``[cosmology]``). For each target the statistic is the targeted search's Stouffer value
Z_comb = P_used^-1/2 sum_p S_eq,p (Stouffer et al. 1949) of the chance-equivalent S (S_eq =
sign(S) sqrt(1 - (1 - S^2)^f) for a jointly kept fraction f; S_eq = S on full circles) of the
target's P_used usable predicted pairs at the orientation of the space (and observer position)
that maximises it, see :mod:`topology.search.targeted`; the mean S_comb = Z_comb / sqrt(P_used)
is reported beside it. Z has one null spread whatever P_used, so an orientation or sky that
leaves few pairs usable is not favoured.

* Null calibration: every null sky is searched for every target; per target, the local
  threshold is the (1 - p) quantile of the null Z_comb and the look-elsewhere threshold over the
  targets is mean + z_thr std with z_thr from each null sky's largest standardised Z_comb over
  the targets (the standardised-maximum method of :mod:`topology.significance`, without the
  smoothing across radius, which has no meaning across targets).
* Sensitivity: ``[significance] n_injections`` skies of each target space itself (random
  orientation, the configured observer position), observed like the data and searched for
  that target: its efficiency is the fraction above its threshold, with one-sided exact
  binomial limits (Clopper & Pearson 1934) at ``efficiency_confidence``.
* Outcome per map and target: detected (Z_comb above the threshold), or excluded (not detected
  and the lower limit of the efficiency at least ``efficiency_level``), or not excluded. No alpha_min is derived in
  this mode: a radius scan (antipodal or all-pairs) does that.
"""

from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path

import numpy as np

from .. import significance as sig
from ..errors import InputError
from ..execution import Task, task_seed
from . import tasks as T
from .report_parts import Analysis

WHERE = "[search] targets"
_SCENARIOS: dict = {}


def check_targets(targets, cosmo, base_dir) -> list[dict]:
    """Validate the targets at plan time; returns them as plain dicts."""
    if not targets:
        raise InputError("the targeted search needs at least one target, e.g. "
                         "targets = [{family = \"lens\", p = 8, q = 1}]", WHERE)
    out = []
    for i, t in enumerate(targets):
        where = f"{WHERE} #{i + 1}"
        if not isinstance(t, dict) or "family" not in t:
            raise InputError("each target is a table like {family = \"lens\", p = 8, q = 1}", where)
        try:
            _scenario_for(dict(t), cosmo, base_dir)
        except InputError as e:
            raise InputError(e.reason, f"{where} ({e.where or 'space'})") from None
        out.append(dict(t))
    return out


def _scenario_for(target: dict, cosmo_section, base_dir):
    """The Scenario of one target with the run's cosmology (cached per process)."""
    from ..config import Config, config_from_dict
    from ..scenario import scenario_from_config

    key = json.dumps([target, cosmo_section, str(base_dir)], sort_keys=True, default=str)
    if key not in _SCENARIOS:
        space = {k: v for k, v in target.items() if k not in ("position",)}
        sections = {"space": space}
        if cosmo_section:
            sections["cosmology"] = dict(cosmo_section)
        if "position" in target:
            sections["observer"] = {"position": target["position"]}
        cfg = config_from_dict(sections, WHERE)
        cfg = Config(cfg.sections, Path(base_dir) / "targets.toml")
        _SCENARIOS[key] = scenario_from_config(cfg)
    return _SCENARIOS[key]


def target_name(target: dict) -> str:
    args = ", ".join(f"{k}={v}" for k, v in target.items() if k != "family")
    return f"{target['family']}({args})" if args else target["family"]


def search_targets(values, plan, source: str) -> dict:
    """Search one sky for every target: {"z_comb": (n_targets,), "results": [search results]} (-inf
    for a target with no usable pair)."""
    from ..maps import as_skymap

    sky = values if hasattr(values, "observed") else as_skymap(values, source=source)
    cosmo = plan.sections.get("cosmology", {})
    z_comb, results = [], []
    for t in plan.targets:
        res = T.search_values(sky, plan, source, scenario=_scenario_for(t, cosmo, plan.base_dir))
        v = res.get("targeted", {}).get("Z_combined")
        z_comb.append(-np.inf if v is None or not np.isfinite(v) else float(v))
        results.append(res)
    return {"z_comb": np.array(z_comb), "results": results}


def task_null(plan, task_id: str) -> dict:
    m, seed = T.null_map(plan, task_id)
    return {"z_comb": search_targets(m, plan, task_id)["z_comb"], "seed": seed}


def task_data(plan, name: str) -> dict:
    """The stored result of a data map's targeted search (JSON-able, per target)."""
    values, source, nside, extra = T.read_or_make_map(plan, name)
    out = search_targets(values, plan, source)
    return {"z_comb": out["z_comb"], "targets": [r.get("targeted", {}) for r in out["results"]],
            "candidates": [r["candidates"] for r in out["results"]], "nside": nside, **extra}


def task_injection(plan, target: int, task_id: str) -> dict:
    """A sky of target space ``target`` itself (random orientation), searched for that target."""
    from .. import geometry as geo

    seed = T.int_seed(plan.significance["seed"], task_id)
    rng = np.random.default_rng(task_seed(plan.significance["seed"], task_id + "/geometry"))
    sc = _scenario_for(plan.targets[target], plan.sections.get("cosmology", {}), plan.base_dir)
    obs = geo.Observer.make(sc.space.geometry, sc.observer.point[:3] if sc.space.geometry == "flat" else sc.observer.point,
                            geo.euler_zyz(*geo.random_rotation(rng)))
    if sc.space.geometry == "hyperbolic":
        raise InputError("no synthetic skies for hyperbolic targets yet, so their efficiency cannot be measured",
                         f"{WHERE} #{target + 1}")
    m = T.simulate(plan, sc.space, obs, sc.cosmology, seed)
    out = search_targets(m, replace(plan, targets=[plan.targets[target]]), task_id)
    return {"z_comb": float(out["z_comb"][0]), "seed": seed}


def check_injectable(targets: list[dict], cosmo_section, base_dir, lmax: int) -> None:
    """Plan-time: every target can be synthesised (flat compact or spherical within kmax)."""
    from ..skies.spherical import check_default_kmax

    for i, t in enumerate(targets):
        sc = _scenario_for(t, cosmo_section, base_dir)
        where = f"{WHERE} #{i + 1}"
        if sc.space.geometry == "hyperbolic":
            raise InputError("no synthetic skies for hyperbolic targets yet, so their efficiency cannot be "
                             "measured; test hyperbolic spaces with a radius scan instead", where)
        if sc.space.geometry == "flat" and not getattr(sc.space, "compact", True):
            raise InputError(f"{sc.space.family} is not compact: target a compact family", where)
        if sc.space.geometry == "spherical":
            check_default_kmax(lmax, sc.chi, f"a {sc.space.family} sky at chi_rec/R_c = {sc.chi:.3f}", where)


def build_tasks(plan) -> list[Task]:
    out = [Task(T.data_id(m.name), task_data, {"plan": plan, "name": m.name}) for m in plan.maps]
    out += [Task(T.null_id(i), task_null, {"plan": plan, "task_id": T.null_id(i)}) for i in range(plan.n_null)]
    for k in range(len(plan.targets)):
        for j in range(plan.n_injections):
            tid = T.target_injection_id(k, j)
            out.append(Task(tid, task_injection, {"plan": plan, "target": k, "task_id": tid}))
    return out


def analyse(plan, store) -> Analysis:
    """Per map and target: Z_comb, thresholds, p-values, efficiency, detected / excluded."""
    targets = plan.targets
    names = [target_name(t) for t in targets]
    n_null, fa, level, n_inj = plan.n_null, plan.false_alarm, plan.efficiency_level, plan.n_injections
    null = np.array([_stored_z(store, T.null_id(i)) for i in range(n_null)], dtype=float).reshape(n_null, -1)
    th = sig.thresholds(np.arange(len(targets)), null, fa, smooth=False)
    inj = np.array([[_stored_z(store, T.target_injection_id(k, j)) for k in range(len(targets))]
                    for j in range(n_inj)], dtype=float)
    e = sig.efficiency(inj > th.whole_range[None, :], plan.efficiency_confidence)
    eff, eff_lo, eff_hi = e.fraction, e.lower, e.upper

    maps_out, map_values = [], {}
    for spec in plan.maps:
        res = store.get(T.data_id(spec.name))
        s = np.asarray(_stored_z(store, T.data_id(spec.name)), float)
        is_detected = bool(np.any(s > th.whole_range))
        p_local = sig.local_p_values(s[None, :], null)[0]
        rows, cands = [], []
        for k, name in enumerate(names):
            detected_k = bool(s[k] > th.whole_range[k])
            p_k = sig.global_p_value(np.where(np.arange(len(targets)) == k, s, -np.inf), null, smooth=False)
            rows.append({"target": name, "family": targets[k]["family"], "Z_combined": float(s[k]),
                         "S_combined": res["targets"][k].get("S_combined"),
                         "threshold": float(th.whole_range[k]), "threshold_local": float(th.local[k]),
                         "p_value": p_k, "p_value_local": float(p_local[k]), "detected": detected_k,
                         "efficiency": float(eff[k]), "efficiency_lower": float(eff_lo[k]),
                         "efficiency_upper": float(eff_hi[k]),
                         # excluded: the exact lower limit (Clopper & Pearson 1934), not the fraction
                         "excluded": bool(not detected_k and eff_lo[k] >= level),
                         "n_pairs": res["targets"][k].get("n_pairs"),
                         "n_pairs_used": res["targets"][k].get("n_pairs_used"),
                         "best_euler_deg": res["targets"][k].get("best_euler_deg"),
                         "best_position": res["targets"][k].get("best_position")})
            for c in res["candidates"][k][:3]:
                cands.append({kk: c[kk] for kk in ("center_a", "center_b", "radius_deg", "twist_deg", "orientation", "S",
                                                   "overlap", "S_eq")}
                             | {"target": name, "p_value": p_k, "p_value_local": float(p_local[k]),
                                "above_threshold": detected_k})
        cands.sort(key=lambda c: (not c["above_threshold"], c["p_value"], -(c["S_eq"] if np.isfinite(c["S_eq"]) else -9)))
        maps_out.append({
            "name": spec.name, "source": spec.path or "inline synthetic sky", "detected": is_detected,
            "candidates": cands, "false_alarm": fa, "n_null": n_null, "alpha_min_deg": None,
            "global_p_value": sig.global_p_value(s, null, smooth=False), "targets": rows, "bounds": None,
            "predicted": res.get("predicted", []),
            "note": "targeted search: each target space is detected, excluded (not detected, with the one-sided "
                    f"{plan.efficiency_confidence:.0%} lower limit on its efficiency >= {level:.0%}) or not excluded; "
                    "no alpha_min in this mode",
        })
        map_values[spec.name] = res.get("map_values")
    calib = {"targets": names, "threshold_whole_range": th.whole_range.tolist(), "threshold_local": th.local.tolist(),
             "z_threshold": th.z_threshold, "measured_false_alarm": th.measured_false_alarm,
             "measured_false_alarm_error": th.measured_false_alarm_error, "efficiency": eff.tolist(),
             "efficiency_lower": eff_lo.tolist(), "efficiency_upper": eff_hi.tolist(), "n_injections": n_inj,
             "efficiency_level": level, "efficiency_confidence": plan.efficiency_confidence,
             "alpha_min_deg": None}
    return Analysis(maps_out, calib, th, null, map_values, inj)


# ---------------------------------------------------------------------------------------------
# report parts
# ---------------------------------------------------------------------------------------------
def _stored_z(store, task_id: str):
    """The stored Z_comb of a task; InputError for a result stored by a version before Z_comb."""
    res = store.get(task_id)
    if "z_comb" not in res:
        raise InputError("this run's stored targeted results predate the Stouffer statistic Z_comb; "
                         "start the run again with --force or in a new output folder", task_id)
    return res["z_comb"]


def latex(t, plan) -> str:
    """The target outcomes as a LaTeX table with the statistic and levels in its caption."""
    from ..report.latex import cell, escape, latex_table

    caption = (r"Targeted matched-circle tests. $Z_{\rm comb} = P^{-1/2}\sum_p S_{{\rm eq},p}$ (Stouffer et al. "
               r"1949) over the $P$ usable predicted pairs at the orientation that maximises it, of the m-weighted S "
               r"statistic (Cornish, Spergel \& Starkman 2004) in its "
               r"chance-equivalent form $S_{\rm eq} = {\rm sign}(S)\sqrt{1 - (1 - S^2)^f}$ for a jointly kept "
               r"fraction $f$ of the circles ($S_{\rm eq} = S$ on full circles); $S_{\rm comb}$ is their mean; "
               f"thresholds at false-alarm probability {plan.false_alarm:g} over all targets, "
               f"from {plan.n_null} isotropic skies; efficiency from {plan.n_injections} skies of each space; a "
               f"space is excluded when it is not detected and the one-sided "
               f"{escape(format(plan.efficiency_confidence, '.0%'))} lower limit on its efficiency (exact binomial, "
               f"Clopper \\& Pearson 1934), not the recovered fraction, is at least "
               f"{escape(format(plan.efficiency_level, '.0%'))}.")
    header = ["map", "space", r"$Z_{\rm comb}$", r"$Z_{\rm thr}$", r"$S_{\rm comb}$", "$p$", "efficiency",
              "outcome"]
    rows = [[cell(row["map"]), cell(row["target"]), cell(row["Z_combined"], ".3f"), cell(row["Z_threshold"], ".3f"),
             cell(row["S_combined"], ".3f"), cell(row["p_value"], ".3g"), cell(row["efficiency"], ".2f"),
             cell(row["outcome"])] for row in t]
    return latex_table(header, rows, caption, "llrrrrrl")


def figure_targets(base, name: str, m: dict, analysis: Analysis) -> list[str]:
    """Z_comb of the map per target over the null spread and the threshold."""
    from ..plots import pyplot
    from ..report.figures import save_figure

    plt = pyplot()
    null, th = analysis.null, analysis.thresholds
    x = np.arange(null.shape[1])
    fig, ax = plt.subplots(figsize=(7, 4))
    ax.boxplot([null[:, k] for k in x], positions=x, widths=0.5, showfliers=True)
    ax.plot(x, th.whole_range, "r_", markersize=30, mew=2, label=f"threshold (false alarm {th.false_alarm:g})")
    ax.plot(x, [r["Z_combined"] for r in m["targets"]], "k*", markersize=12, label=name)
    ax.set_xticks(x, analysis.calibration["targets"], rotation=20, fontsize=7)
    ax.set_ylabel("Z_comb (sum of the usable pairs' S_eq / sqrt of their number)")
    ax.legend(fontsize=8, loc="lower right")
    ax.set_title(f"{name}: targeted statistic against {th.n_null} null skies", fontsize=10)
    return save_figure(fig, base)


def write_report(plan, analysis: Analysis, summary: dict, staging: Path) -> tuple[dict, dict]:
    """Tables and figures of a targeted run in ``staging``; returns (tables, figures) for the page."""
    from .. import report
    from .report_parts import sky_figure

    outcome, th_t, eff_t = report.target_tables(analysis.maps, analysis.calibration, analysis.thresholds,
                                                analysis.null, false_alarm=plan.false_alarm, n_null=plan.n_null,
                                                efficiency_level=plan.efficiency_level,
                                                n_injections=plan.n_injections)
    candidates = report.candidates_table(analysis.maps)
    candidates.write(staging / "candidates.ecsv", format="ascii.ecsv")
    th_t.write(staging / "thresholds.ecsv", format="ascii.ecsv")
    eff_t.write(staging / "efficiency.ecsv", format="ascii.ecsv")
    outcome.write(staging / "bounds.ecsv", format="ascii.ecsv")
    (staging / "bounds.tex").write_text(latex(outcome, plan))
    out_tables = {"targets: detected, excluded or not": outcome, "thresholds per target": th_t,
                  "efficiency per target": eff_t, "candidates": candidates}
    figures = {}
    for m in analysis.maps:
        figures[f"{m['name']}: targeted statistic per target"] = figure_targets(
            staging / f"targets_{m['name']}", m["name"], m, analysis)
        fig = sky_figure(plan, analysis, m, staging)
        if fig:
            figures[f"{m['name']}: sky with best candidate circles"] = fig
    return out_tables, figures


def caution(plan) -> str:
    """What the results of a targeted run assume."""
    from .report_parts import caution as scan_caution

    text = scan_caution(plan, injection="target-space")
    return text.replace("over the whole radius range", "over all targets").replace(
        "alpha_min is where the recovery of injected target-space circles reaches",
        "a target is excluded when it is not detected and skies of that very space are recovered at") + (
        " Targets tested: " + "; ".join(target_name(t) for t in plan.targets) + ". An exclusion holds for "
        "these spaces at these sizes and observer positions only.")
