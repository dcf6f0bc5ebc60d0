"""``topology bound``: lower bounds on the size of space and the curvature radius from alpha_min.

``--table FILE`` writes two files from one stem: FILE.ecsv (astropy ECSV, units and metadata)
and FILE.tex (LaTeX table with a caption giving alpha_min and the Omega_K convention). A
trailing ``.ecsv`` or ``.tex`` on FILE is dropped first, so ``--table out/bounds``,
``--table out/bounds.ecsv`` and ``--table out/bounds.tex`` all write out/bounds.ecsv and
out/bounds.tex. Both paths are checked before any work; each is written atomically.
"""

from __future__ import annotations

import math
from pathlib import Path

NAME = "bound"
HELP = "turn 'no circles of radius >= alpha_min' into bounds on the size of space and on Omega_K"
EXAMPLE = "topology bound --alpha-min 10 configs/demo.toml --json"


def add_arguments(p):
    p.add_argument("config", nargs="?", help="TOML config ([cosmology], optional [space] and [observer])")
    p.add_argument("--alpha-min", type=float, required=True, metavar="DEG",
                   help="circles of radius >= DEG degrees are excluded (0 < DEG <= 90)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--table", metavar="FILE", help="write FILE.ecsv and FILE.tex (a .ecsv/.tex suffix is dropped)")
    p.add_argument("--p-max", type=int, default=None, metavar="N", help="lens spaces L(p, q) up to p = N (default 20)")
    p.add_argument("--m-max", type=int, default=None, metavar="N", help="prism spaces D*_m up to m = N (default 10)")
    p.add_argument("--positions", type=int, default=None, metavar="N",
                   help="Monte Carlo observer positions for a configured flat space (default 4000)")
    p.add_argument("--seed", type=int, default=0, help="seed of the observer-position Monte Carlo (default 0)")


def table_paths(name: str) -> tuple[Path, Path]:
    """(stem.ecsv, stem.tex) from FILE, dropping a .ecsv or .tex suffix."""
    p = Path(name)
    if p.suffix.lower() in (".ecsv", ".tex"):
        p = p.with_suffix("")
    return p.with_name(p.name + ".ecsv"), p.with_name(p.name + ".tex")


def run(args):
    from .. import bounds, report
    from ..errors import InputError
    from ._common import atomic_write, check_writable, print_json

    a = args.alpha_min
    if not (math.isfinite(a) and 0.0 < a <= 90.0):
        raise InputError(f"must be in (0, 90] degrees, got {a}", "--alpha-min")
    paths = None
    if args.table:
        paths = table_paths(args.table)
        for p in paths:
            check_writable(p, "table")
    cfg = None
    if args.config:
        from ..config import load_config
        from ..scenario import check_config

        cfg = check_config(load_config(args.config))
    kw = {}
    if args.p_max is not None:
        kw["p_max"] = args.p_max
    if args.m_max is not None:
        kw["m_max"] = args.m_max
    if args.positions is not None:
        kw["n_positions"] = args.positions
    from ..config import naming_file

    with naming_file(cfg):  # errors about a key name the config file too
        if cfg is not None:
            from ..scenario import bound_inputs

            kw.update(bound_inputs(cfg))
        summary = bounds.bound_summary(a, seed=args.seed, **kw)
    if paths:
        table = report.bounds_table(summary)
        flat = report.flat_bounds_table(summary)
        ecsv, tex = paths

        def write_both(tmp):
            table.write(tmp, format="ascii.ecsv", overwrite=True)
            atomic_write(tex, lambda t2: Path(t2).write_text(report.bounds_latex(table, flat, summary)))

        atomic_write(ecsv, write_both)
    if args.json:
        print_json(summary)
        return 0
    print_text(summary)
    if paths:
        print(f"table written to {paths[0]} and {paths[1]}")
    return 0


def _g(v, spec=".4f"):
    return "--" if v is None else format(v, spec)


def print_text(s: dict) -> None:
    f = s["flat"]
    c = s["cosmology"]
    print(f"no circles of radius >= {s['alpha_min_deg']:g} deg; chi_rec = {s['chi_rec_mpc']:.1f} Mpc "
          f"(h = {c['h']}, Omega_K = {c['omega_k']}, z_* = {c['z_star_used']:.2f})")
    print("flat:")
    print(f"  shortest loop through us > {f['min_loop_over_lss_diameter']:.4f} x 2 chi_rec = {f['min_loop_mpc']:.0f} Mpc")
    print(f"  cubic torus: inscribed radius R_i > {f['cubic_torus_inscribed_radius_over_chi_rec']:.4f} chi_rec "
          f"(side L > {f['cubic_torus_min_side_over_chi_rec']:.4f} chi_rec)")
    if "configured" in f:
        r = f["configured"]
        verdict = "EXCLUDED" if r["excluded"] else "allowed"
        print(f"  configured {r['family']} {r['params']} at {r['observer_position_over_chi_rec']}: {verdict} "
              f"(shortest displacement {_g(r['shortest_displacement_over_chi_rec'])} chi_rec, largest circle "
              f"{_g(r['largest_circle_radius_deg'], '.2f')} deg)")
        print(f"    allowed when scaled by s > {r['min_scale_factor']:.4f} (lengths and observer position together)")
        op = r["observer_positions"]
        if op["excluded_fraction"] is None:
            print(f"    fraction of observer positions: {op['method']}")
        else:
            lo, hi = op["excluded_fraction_95"]
            print(f"    excluded for a fraction {op['excluded_fraction']:.4f} +- {op['excluded_fraction_stderr']:.4f} "
                  f"of observer positions (95%: {lo:.4f}..{hi:.4f}; {op['method']}; N = {op['n_positions']})")
    print(f"spherical (largest allowed chi_rec/R_c; {s['convention']}):")
    print(f"  {'family':<14} {'params':<10} {'d_min/R_c':>10} {'max chi/R_c':>12} {'min R_c/chi':>12} {'min Omega_K':>12}")
    for r in s["spherical"]:
        par = ", ".join(f"{k}={r[k]}" for k in ("p", "q", "m") if k in r)
        print(f"  {r['family']:<14} {par:<10} {r['shortest_displacement_over_curvature_radius']:10.4f} "
              f"{r['max_chi_rec_over_curvature_radius']:12.4f} {r['min_curvature_radius_over_chi_rec']:12.4f} "
              f"{_g(r['min_omega_k'], '12.5f'):>12}")
    for key in ("spherical_configured", "hyperbolic"):
        if key in s:
            r = s[key]
            kind = "min_omega_k" if key == "spherical_configured" else "max_omega_k"
            print(f"configured {r['family']} {r['params']}: shortest displacement "
                  f"{_g(r['shortest_displacement_over_curvature_radius'])} R_c, max chi_rec/R_c "
                  f"{_g(r['max_chi_rec_over_curvature_radius'])}, {kind.replace('_', ' ')} {_g(r[kind], '.5f')}"
                  + (f"; {r['note']}" if r.get("note") else "")
                  + (f"; background {'EXCLUDED' if r['excluded'] else 'allowed'}" if "excluded" in r else ""))
