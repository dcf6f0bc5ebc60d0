"""``topology synth``: a synthetic sky (isotropic or multiply connected) as a HEALPix FITS map."""

from __future__ import annotations

NAME = "synth"
HELP = "make a synthetic HEALPix sky (FITS, RING) for a space, with preview and predicted pairs"
EXAMPLE = "topology synth configs/synth_e1.toml --out e1.fits --preview e1.png --pairs e1.json"


def add_arguments(p):
    p.add_argument("config", help="TOML config with [cosmology], [space] (or family = \"isotropic\"), [observer], [sky]")
    p.add_argument("--out", metavar="PATH.fits", help="output HEALPix FITS map (RING, microK)")
    p.add_argument("--preview", metavar="PNG", help="Mollweide preview with the predicted circles drawn")
    p.add_argument("--pairs", metavar="JSON", help="predicted circle pairs (the contract of `topology predict --json`)")
    p.add_argument("--dtype", choices=("float32", "float64"), default="float32",
                   help="data type of the FITS map (default float32)")
    p.add_argument("--force", action="store_true", help="overwrite existing output files")
    p.add_argument("--modes", action="store_true", help="print the number of invariant S^3 eigenmodes per k "
                                                        "(spherical families) instead of making a sky")
    p.add_argument("--kmax", type=int, metavar="K", help="with --modes: highest harmonic degree k (default [sky] kmax)")
    p.add_argument("--json", action="store_true", help="with --modes: print one JSON object")


def mode_table(cfg, kmax) -> dict:
    """{"family", "params", "modes": [{"k": k, "count": n}, ...]} for a spherical family."""
    from ..errors import InputError
    from ..spaces import build_space, geometry_of
    from ..spaces.spherical import mode_count

    family = cfg.get("space", "family")
    if family is None:
        raise InputError("missing", "[space] family")
    if family == "isotropic" or geometry_of(family) != "spherical":
        raise InputError(f"--modes needs a spherical family (lens, prism, tetrahedral, octahedral, dodecahedral), "
                         f"got {family!r}", "[space] family")
    if kmax is None:
        kmax = cfg.get("sky", "kmax")
    if kmax is None:
        raise InputError("--modes needs --kmax K (or [sky] kmax)", "--kmax")
    if kmax < 0:
        raise InputError(f"must be >= 0, got {kmax}", "--kmax")
    space = build_space(cfg.section("space"))
    return {"family": space.family, "params": space.params,
            "modes": [{"k": k, "count": mode_count(space, k)} for k in range(int(kmax) + 1)]}


def _targets(args) -> list:
    """(path, what) of every file this run writes, checked before any work."""
    from pathlib import Path

    from ..errors import InputError
    from ._common import check_writable

    out = []
    if args.out:
        if not str(args.out).lower().endswith(".fits"):
            raise InputError("must end in .fits", "--out")
        out.append((args.out, "output"))
    if args.preview:
        out.append((args.preview, "preview"))
    if args.pairs:
        out.append((args.pairs, "pairs"))
    names = [str(Path(p).resolve()) for p, _ in out]
    if len(set(names)) != len(names):
        raise InputError("two outputs name the same file", "--out/--preview/--pairs")
    for path, what in out:
        check_writable(path, what)
        if Path(path).exists() and not args.force:
            raise InputError(f"{what} file exists (use --force to overwrite)", str(path))
    return out


def _readable(write):
    """Wrap a writer so the file gets the usual mode (0666 less the umask), not mkstemp's 0600."""
    import os

    def inner(tmp):
        write(tmp)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)

    return inner


def run(args):
    from ..config import load_config, naming_file
    from ..scenario import check_config

    cfg = check_config(load_config(args.config))
    with naming_file(cfg):  # errors about a key name the config file too
        return _run(args, cfg)


def _run(args, cfg):
    import json
    from pathlib import Path

    from ..errors import InputError
    from ._common import atomic_write, check_writable, json_default, print_json

    if args.modes:
        table = mode_table(cfg, args.kmax)
        if args.json:
            print_json({"modes": table["modes"]})
        else:
            print(f"{table['family']} {table['params']}: invariant eigenmodes of S^3 per harmonic degree k")
            print(f"{'k':>4} {'count':>8}")
            for row in table["modes"]:
                print(f"{row['k']:>4} {row['count']:>8}")
        return 0
    if args.kmax is not None or args.json:
        raise InputError("--kmax and --json go with --modes", "--modes")
    if not args.out:
        raise InputError("give --out PATH.fits", "--out")
    _targets(args)
    from ..skies import sky_params
    from ..skies.io import mask_path

    params = sky_params(cfg)
    mpath = mask_path(args.out) if params["mask"] != "none" else None
    if mpath is not None:
        check_writable(mpath, "mask")
        if Path(mpath).exists() and not args.force:
            raise InputError("mask file exists (use --force to overwrite)", mpath)

    from ..skies import synthesize
    from ..skies.io import pairs_document, preview_png, write_fits
    from ..spaces.registry import describe_space

    polar = bool(cfg.get("sky", "polarisation"))
    if polar:  # I, Q, U: isotropic and flat skies (skies.polarised, skies.flat_polarised)
        from ..skies import synthesize_polarised
        from ..skies.polarised import write_iqu_fits

        res = synthesize_polarised(cfg)
        write = lambda tmp: write_iqu_fits(tmp, res.map, res.header, dtype=args.dtype)  # noqa: E731
    else:
        res = synthesize(cfg)
        write = lambda tmp: write_fits(tmp, res.map, res.header, dtype=args.dtype)  # noqa: E731
    # everything is computed before the first file is written
    title = f"{describe_space(res.sky.meta.get('family', 'isotropic'), res.sky.meta.get('params'))}, seed {params['seed']}"
    png = preview_png(res.map[0] if polar else res.map, res.pairs, title=title + (", I" if polar else "")) \
        if args.preview else None
    doc = json.dumps(pairs_document(cfg, res), indent=2, allow_nan=False, default=json_default) + "\n" \
        if args.pairs else None
    atomic_write(args.out, _readable(write))
    if mpath is not None:
        cards = [c for c in res.header if c[0] in ("TOPOVER", "MASKTYPE", "MASKBDEG")]
        atomic_write(mpath, _readable(lambda tmp: write_fits(tmp, res.mask, cards, dtype="float32", column="MASK",
                                                             unit="")))
    if png is not None:
        atomic_write(args.preview, _readable(lambda tmp: Path(tmp).write_bytes(png)))
    if doc is not None:
        atomic_write(args.pairs, _readable(lambda tmp: Path(tmp).write_text(doc)))
    written = [args.out] + ([mpath] if mpath else []) + [p for p in (args.preview, args.pairs) if p]
    print(f"{res.sky.meta.get('family', 'isotropic')}: nside {params['nside']}, lmax {params['lmax']}, "
          f"method {res.sky.meta.get('method')}, terms {','.join(res.sky.terms)}, {len(res.pairs)} predicted pairs"
          + (f", I Q U ({cfg.get('sky', 'qu_convention')} convention)" if polar else ""))
    print("wrote " + ", ".join(str(w) for w in written))
    return 0
