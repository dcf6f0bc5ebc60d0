"""``topology harmonic``: how far a space's low multipoles are from isotropy (KL divergence)."""

from __future__ import annotations

NAME = "harmonic"
HELP = "the KL divergence of a space's a_lm distribution from the isotropic one, against scale"
EXAMPLE = "topology harmonic configs/harmonic_e1.toml --json --plot kl.png"
PLOT_SUFFIXES = (".png", ".pdf")


def add_arguments(p):
    p.add_argument("config", help="TOML config with [cosmology], [space], [observer], [harmonic]")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--plot", metavar="FILE", help="figure of the divergence against [harmonic] scales (PNG or PDF)")
    p.add_argument("--force", action="store_true", help="overwrite an existing plot file")
    p.add_argument("--map", metavar="FITS", help="a HEALPix map at [harmonic] nside (microK, noise noise_uk per "
                                                 "pixel): its likelihood against [harmonic] scales and the lower "
                                                 "bound on the scale, calibrated on simulated maps")
    p.add_argument("--mask", metavar="FITS", help="with --map: a mask at the same N_side (1 kept, 0 masked)")


def run(args):
    from pathlib import Path

    from ..config import load_config, naming_file
    from ..errors import InputError
    from ..harmonic.survey import divergence_rows, map_bound, read_map_pixels, settings_from_config
    from ..scenario import check_config, cosmology_from_config
    from ._common import atomic_write, check_writable, print_json

    cfg = check_config(load_config(args.config))
    with naming_file(cfg):  # errors about a key name the config file too
        settings = settings_from_config(cfg)
        if args.plot:
            if Path(args.plot).suffix.lower() not in PLOT_SUFFIXES:
                raise InputError("must end in .png or .pdf", "--plot")
            if not settings.scales:
                raise InputError("the figure needs [harmonic] scales", "--plot")
            check_writable(args.plot, "plot")
            if Path(args.plot).exists() and not args.force:
                raise InputError("plot file exists (use --force to overwrite)", str(args.plot))
        if args.mask and not args.map:
            raise InputError("--mask goes with --map", "--mask")
        if args.map and cosmology_from_config(cfg).omega_k < 0:
            raise InputError("the likelihood of a map is implemented for flat spaces only (a spherical scale changes "
                             "the background, and with it the isotropic reference)", "--map")
        data = read_map_pixels(settings, args.map, args.mask, cosmology_from_config(cfg)) if args.map else None
        kept = [] if data is not None else None
        out = divergence_rows(cfg, settings, keep=kept)
        if data is not None:
            out["likelihood"] = {"map": str(args.map), **map_bound(settings, data[0], data[1], kept)}
    if args.plot:
        from ..harmonic.plot import kl_figure
        from ..spaces.registry import describe_space

        title = describe_space(out["family"], out["params"])
        atomic_write(args.plot, lambda tmp: kl_figure(out, tmp, title=title))
    if args.json:
        print_json(out)
        return 0
    _print(out)
    if args.plot:
        print(f"plot written to {args.plot}")
    return 0


def _print(out: dict) -> None:
    from ..harmonic.survey import format_kl
    from ..spaces.registry import describe_space

    where = out["pixels"] or "full sky, no noise"
    spherical = out.get("geometry") == "spherical"
    modes = (f"S^3 modes k <= {out['kmax']} (Omega_K = {out['omega_k']:g}, chi_rec/R_c = {out['chi']:.4g})"
             if spherical else f"modes k chi_rec <= {out['kchi_max']:g}")
    print(f"{describe_space(out['family'], out['params'])}: l = 2..{out['lmax']} ({out['n_coefficients']} real a_lm), "
          f"terms {','.join(out['terms'])}, {modes}; {out['form']} form ({where})")
    print(f"KL divergence from isotropy: {format_kl(out['kl_nats'])} nats"
          + ("" if out["finite"] else f" (the space's covariance has rank {out['rank']} of {out['n_coefficients']}: "
                                      "it is singular, the isotropic sky almost never looks like it)"))
    if out["rows"]:
        if spherical:
            print("scales multiply the curvature radius R_c (Omega_K / scale^2); nearest image in units of R_c")
        extra = f" {'Omega_K':>9} {'chi_rec/R_c':>11}" if spherical else ""
        print(f"{'scale':>8}{extra} {'KL (nats)':>12} {'nearest image':>14} {'circles':>8}")
        for r in out["rows"]:
            near = "-" if r["nearest_image"] is None else f"{r['nearest_image']:.3f}"
            extra = f" {r['omega_k']:9.4g} {r['chi']:11.4f}" if spherical else ""
            print(f"{r['scale']:8.3f}{extra} {format_kl(r['kl_nats']):>12} {near:>14} "
                  f"{'yes' if r['circles'] else 'no':>8}")
    like = out.get("likelihood")
    if like:
        print(f"\nlikelihood of {like['map']} ({like['pixels']}): ln L(space) - ln L(isotropic), "
              f"{like['mode']} over {like['n_orientations']} orientations; a scale is excluded when its ratio is "
              f"below the {1 - like['level']:.3g} quantile of {like['n_cal']} simulated maps of that scale")
        print(f"{'scale':>8} {'ln ratio':>10} {'threshold':>10} {'excluded':>9} {'isotropic maps excluding':>25}")
        for r in like["rows"]:
            print(f"{r['scale']:8.3f} {r['log_ratio']:10.3f} {r['threshold']:10.3f} {'yes' if r['excluded'] else 'no':>9} "
                  f"{r['isotropic_exclusion_rate']:25.3f}")
        b = like["bound_scale"]
        print(f"lower bound at level {like['level']:g}: " + ("none (the smallest scale is not excluded)" if b is None
              else f"every scale <= {b:g} excluded (lengths times {b:g})"))
