"""``topology predict``: the matched circles a space shows an observer."""

from __future__ import annotations

NAME = "predict"
HELP = "list the matched-circle pairs a space predicts for an observer"
EXAMPLE = "topology predict configs/demo.toml --json"


def add_arguments(p):
    p.add_argument("config", help="TOML config with [cosmology], [space], [observer]")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--plot", metavar="FILE", help="draw the circles on a Mollweide map (PNG or PDF)")


def run(args):
    from ..circles import predict_circles, prediction_json
    from ..config import load_config, naming_file
    from ..scenario import check_config
    from ..scenario import scenario_from_config
    from ._common import atomic_write, check_writable, print_json

    cfg = check_config(load_config(args.config))
    if args.plot:
        check_writable(args.plot, "plot")
    with naming_file(cfg):  # errors about a key name the config file too
        sc = scenario_from_config(cfg)
        pairs = predict_circles(sc.space, sc.observer, sc.chi)
        out = prediction_json(sc, pairs)
    if args.plot:
        from ..plots import plot_circles
        from ..spaces.registry import describe_space

        title = describe_space(out["family"], out["params"])
        atomic_write(args.plot, lambda tmp: plot_circles(pairs, tmp, title=title))
    if args.json:
        print_json(out)
        return 0
    unit = "chi_rec" if out["geometry"] == "flat" else "R_c"
    ratio = out["chi_rec_over_curvature_radius"]
    print(f"{out['family']} {out['params']}: chi_rec = {out['chi_rec_mpc']:.1f} Mpc"
          + (f", chi_rec/R_c = {ratio:.4f}" if ratio is not None else ""))
    print(f"{len(out['pairs'])} circle pairs")
    if out["pairs"]:
        print(f"{'radius':>8} {'centre A (lon, lat)':>22} {'centre B (lon, lat)':>22} {'twist':>8} {'orient.':>9} {'d/' + unit:>10}")
        for p in out["pairs"]:
            a = "({:7.2f}, {:6.2f})".format(*p["center_a"])
            b = "({:7.2f}, {:6.2f})".format(*p["center_b"])
            print(f"{p['radius_deg']:7.2f}d {a:>22} {b:>22} {p['twist_deg']:7.2f}d {p['orientation']:>9} {p['clone_distance']:10.4f}")
    if args.plot:
        print(f"plot written to {args.plot}")
    return 0
