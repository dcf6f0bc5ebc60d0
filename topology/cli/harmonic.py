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


def run(args):
    from pathlib import Path

    from ..config import load_config, naming_file
    from ..errors import InputError
    from ..harmonic.survey import divergence_rows, settings_from_config
    from ..scenario import check_config
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
        out = divergence_rows(cfg, settings)
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
    print(f"{describe_space(out['family'], out['params'])}: l = 2..{out['lmax']} ({out['n_coefficients']} real a_lm), "
          f"terms {','.join(out['terms'])}, modes k chi_rec <= {out['kchi_max']:g}; {out['form']} form ({where})")
    print(f"KL divergence from isotropy: {format_kl(out['kl_nats'])} nats"
          + ("" if out["finite"] else f" (the space's covariance has rank {out['rank']} of {out['n_coefficients']}: "
                                      "it is singular, the isotropic sky almost never looks like it)"))
    if out["rows"]:
        print(f"{'scale':>8} {'KL (nats)':>12} {'nearest image':>14} {'circles':>8}")
        for r in out["rows"]:
            near = "-" if r["nearest_image"] is None else f"{r['nearest_image']:.3f}"
            print(f"{r['scale']:8.3f} {format_kl(r['kl_nats']):>12} {near:>14} {'yes' if r['circles'] else 'no':>8}")
