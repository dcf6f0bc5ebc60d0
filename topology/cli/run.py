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
            parts.append(f"{t['target']} {what} (Z_comb {t['Z_combined']:.3f} vs threshold {t['threshold']:.3f}, "
                         f"efficiency {t['efficiency']:.0%})")
        return f"{m['name']}: " + "; ".join(parts)
    if m["detected"]:
        best = m["candidates"][0] if m["candidates"] else None
        what = (f"circles of radius {best['radius_deg']:.1f} deg, S_eq = {best.get('S_eq', best['S']):.3f}"
                + (f" (S = {best['S']:.3f}, f = {best['overlap']:.2f})" if "overlap" in best else "")
                + f", global p = {best['p_value']:.3g}" if best else "")
        return f"{m['name']}: DETECTED ({what})"
    by_family = m.get("alpha_min_by_family") or {"injected family": m["alpha_min_deg"]}
    amin = ", ".join(f"{k} {'none' if a is None else f'{a:.1f} deg'}" for k, a in by_family.items())
    b = m["bounds"]
    if b is None:
        return f"{m['name']}: no detection; alpha_min: {amin}; {m.get('note') or 'no bound'}"
    parts = []
    cubic = b["flat"]["cubic_torus_inscribed_radius_over_chi_rec"]
    if cubic is not None:
        parts.append(f"cubic torus R_i > {cubic:.3f} chi_rec")
    dodec = next((s for s in b["spherical"] if s["family"] == "dodecahedral"), None)
    if dodec and dodec.get("min_omega_k") is not None:
        src = dodec.get("source")
        parts.append(f"dodecahedral space: R_c > {dodec['min_curvature_radius_over_chi_rec']:.3f} chi_rec (Omega_K > "
                     f"{dodec['min_omega_k']:.4f}" + (f", alpha_min borrowed from {src['injected_family']}"
                                                      if src and src["calibration"] == "borrowed" else "") + ")")
    if m.get("note"):
        parts.append(m["note"])
    return f"{m['name']}: no detection; alpha_min: {amin}" + "".join(f"; {p}" for p in parts)


def run(args):
    from ..config import load_config
    from ..run import plan_from_config, run as run_plan

    if args.workers is not None and args.workers < 1:
        from ..errors import InputError

        raise InputError(f"must be >= 1, got {args.workers}", "--workers")
    from ..config import naming_file
    from ..errors import held_notes, note, quiet_notes

    cfg = load_config(args.config)
    with naming_file(cfg), quiet_notes(args.quiet):
        with held_notes():  # a refused config is one line, without the notes of files read before
            plan = plan_from_config(cfg, args.out, engine=args.engine, workers=args.workers,
                                    scheduler=args.scheduler)
        summary = run_plan(plan, force=args.force, resume=args.resume, show_progress=False if args.quiet else None)
        # the calibration's warnings (no alpha_min possible, alpha_min at the lowest injected
        # radius) on stderr too, once the report is written: an error before this stays one line
        for text in summary["calibration"].get("notes", []):
            note(text)
    tasks = summary["provenance"]["tasks"]
    print(f"report: {plan.out_dir / 'index.html'} (summary.json, tables and figures beside it); "
          f"{tasks['computed']} tasks computed, {tasks['reused_from_store']} reused")
    for m in summary["maps"]:
        print(headline(m))
    return 0
