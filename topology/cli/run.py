"""``topology run``: the main job, from sky maps to calibrated detections or bounds."""

from __future__ import annotations

NAME = "run"
HELP = "search maps for matched circles, calibrate on null and injected skies, derive bounds, write a report"
EXAMPLE = "topology run configs/demo.toml --out demo_report"


def add_arguments(p):
    p.add_argument("config", help="TOML config: [[maps]], [mask], [instrument], [search], [significance], [bounds], ...")
    p.add_argument("--out", metavar="DIR", help="report folder (default: [output] dir)")
    p.add_argument("--force", action="store_true", help="replace an existing report folder")
    p.add_argument("--resume", action="store_true", help="continue an interrupted run in its folder (same config)")
    p.add_argument("--engine", choices=("serial", "local", "dask"), help="override [execution] engine")
    p.add_argument("--workers", type=int, metavar="N", help="override [execution] workers")
    p.add_argument("--scheduler", metavar="ADDRESS", help="dask: address of a running scheduler")
    p.add_argument("--quiet", action="store_true", help="no progress bar")


def headline(m: dict) -> str:
    if "targets" in m:
        parts = []
        for t in m["targets"]:
            what = "DETECTED" if t["detected"] else ("excluded" if t["excluded"] else "not excluded")
            parts.append(f"{t['target']} {what} (S_comb {t['S_combined']:.3f} vs threshold {t['threshold']:.3f}, "
                         f"efficiency {t['efficiency']:.0%})")
        return f"{m['name']}: " + "; ".join(parts)
    if m["detected"]:
        best = m["candidates"][0] if m["candidates"] else None
        what = (f"circles of radius {best['radius_deg']:.1f} deg, S = {best['S']:.3f}, global p = {best['p_value']:.3g}"
                if best else "")
        return f"{m['name']}: DETECTED ({what})"
    if m["alpha_min_deg"] is None:
        return f"{m['name']}: no detection; the efficiency never reaches the level, so no alpha_min and no bound"
    b = m["bounds"]
    dodec = next((s for s in b["spherical"] if s["family"] == "dodecahedral"), None)
    extra = ""
    if dodec and dodec.get("min_omega_k") is not None:
        extra = f"; dodecahedral space: R_c > {dodec['min_curvature_radius_over_chi_rec']:.3f} chi_rec (Omega_K > {dodec['min_omega_k']:.4f})"
    return (f"{m['name']}: no detection; alpha_min = {m['alpha_min_deg']:.1f} deg; cubic torus R_i > "
            f"{b['flat']['cubic_torus_inscribed_radius_over_chi_rec']:.3f} chi_rec{extra}")


def run(args):
    from ..config import load_config
    from ..run import plan_from_config, run as run_plan

    if args.workers is not None and args.workers < 1:
        from ..errors import InputError

        raise InputError(f"must be >= 1, got {args.workers}", "--workers")
    from ..config import naming_file
    from ..errors import held_notes, quiet_notes

    cfg = load_config(args.config)
    with naming_file(cfg), quiet_notes(args.quiet):
        with held_notes():  # a refused config is one line, without the notes of files read before
            plan = plan_from_config(cfg, args.out, engine=args.engine, workers=args.workers,
                                    scheduler=args.scheduler)
        summary = run_plan(plan, force=args.force, resume=args.resume, show_progress=False if args.quiet else None)
    tasks = summary["provenance"]["tasks"]
    print(f"report: {plan.out_dir / 'index.html'} (summary.json, tables and figures beside it); "
          f"{tasks['computed']} tasks computed, {tasks['reused_from_store']} reused")
    for m in summary["maps"]:
        print(headline(m))
    return 0
