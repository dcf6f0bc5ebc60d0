"""``topology search``: matched circles in a HEALPix map (antipodal, all-pairs or targeted)."""

from __future__ import annotations

import math
from pathlib import Path

NAME = "search"
HELP = "search a HEALPix map for matched circles with the S statistic"
EXAMPLE = "topology search map.fits --mask mask.fits --mode all-pairs --radii 10:90:1 --json"
MIN_SKY_FRACTION = 0.2  # as [mask] min_sky_fraction of `topology run`


def add_arguments(p):
    p.add_argument("map", help="HEALPix FITS map (RING or NESTED from the header)")
    p.add_argument("--mask", metavar="MASK.fits", help="mask (0/1 or apodised weights, any N_side)")
    p.add_argument("--field", metavar="COLUMN|E|T+E",
                   help="column of a multi-column map: index from 0 or name (default the first, temperature); "
                        "the reserved words E and T+E search the E-mode map made from the file's Q and U "
                        "columns, or T and E together with the combined statistic (a column named E or T+E "
                        "is chosen by its index)")
    p.add_argument("--pol-convention", choices=["healpix", "iau"], metavar="healpix|iau",
                   help="E, T+E: Q/U sign convention of the file when its header has no POLCCONV key "
                        "(never guessed: such a file without this option is refused)")
    p.add_argument("--pol-mask", metavar="MASK.fits", help="E, T+E: polarisation mask (default --mask), "
                                                           "apodised before E is made")
    p.add_argument("--pol-apod", type=float, metavar="DEG",
                   help="E, T+E: cosine apodisation of the polarisation mask in degrees (default 5); E is searched "
                        "beyond the taper")
    p.add_argument("--ordering", metavar="RING|NESTED",
                   help="pixel ordering of files whose header has no ORDERING key")
    p.add_argument("--min-sky-fraction", type=float, metavar="F", default=MIN_SKY_FRACTION,
                   help=f"refuse a map and mask that keep less of the sky than this (default {MIN_SKY_FRACTION:g})")
    p.add_argument("--mode", choices=["antipodal", "all-pairs", "targeted"], help="search mode (default antipodal)")
    p.add_argument("--radii", metavar="START:STOP:STEP", help="circle radii in degrees, both ends included (default 5:90:1)")
    p.add_argument("--fwhm", type=float, metavar="DEG", help="Gaussian smoothing FWHM in degrees (default 1)")
    p.add_argument("--nside-work", type=int, metavar="N", help="working N_side (default 128)")
    p.add_argument("--m-max", type=int, metavar="M", help="largest circle Fourier mode (default 64)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--plot", metavar="FILE", help="draw S_max against radius and the best pairs (PNG or PDF)")
    p.add_argument("--resume", action="store_true", help="skip radii finished by an interrupted run")
    p.add_argument("--quiet", action="store_true", help="no progress bar and no notes")
    p.add_argument("--config", metavar="CONFIG", help="TOML config: [search] settings; [space], [cosmology], "
                                                      "[observer] for --mode targeted")


def _clean(o):
    """NaN and infinities -> None, so the JSON is strict."""
    if isinstance(o, float):
        return o if math.isfinite(o) else None
    if isinstance(o, dict):
        return {k: _clean(v) for k, v in o.items()}
    if isinstance(o, (list, tuple)):
        return [_clean(v) for v in o]
    return o


def settings_for(args, cfg):
    import numpy as np

    from ..errors import InputError
    from ..search.engine import parse_radii, settings_from

    sec = cfg.section("search") if cfg is not None else {}
    if "radii" in sec:
        sec["radii"] = parse_radii(sec["radii"])
    if "l_weights" in sec:
        p = Path(sec["l_weights"])
        if not p.is_absolute():
            p = cfg.base_dir / p
        try:
            sec["l_weights"] = tuple(np.loadtxt(p, ndmin=1).tolist())
        except (OSError, ValueError) as e:
            raise InputError(f"cannot read l-weights ({e})", "[search] l_weights") from None
    if "l_range" in sec and len(sec["l_range"]) != 2:
        raise InputError("needs [l_min, l_max]", "[search] l_range")
    return settings_from(sec, mode=args.mode, radii=parse_radii(args.radii) if args.radii else None,
                         fwhm_deg=args.fwhm, nside_work=args.nside_work, m_max=args.m_max,
                         ordering=getattr(args, "ordering", None), pol_apod_deg=getattr(args, "pol_apod", None))


def read_inputs(args, settings):
    """Map and mask as SkyMaps, checked (readable, ordering, column, values, not constant, not
    coarser than the working N_side, enough sky) before any work; notes on stderr say what was
    done to them."""
    from ..errors import InputError
    from ..maps import check_resolution, check_sky_fraction, read_healpix
    from ..search.polarised import polarised_field, polarised_input

    if not 0 <= args.min_sky_fraction < 1:
        raise InputError(f"must lie in [0, 1), got {args.min_sky_fraction:g}", "--min-sky-fraction")
    hint = "--ordering (or [search] ordering in the config)"
    field = polarised_field(args.field)
    if field is None:
        for opt, v in (("--pol-convention", args.pol_convention), ("--pol-mask", args.pol_mask),
                       ("--pol-apod", args.pol_apod)):
            if v is not None:
                raise InputError("only with --field E or T+E (a polarised search)", opt)
        sky = read_healpix(args.map, field=args.field, ordering=settings.ordering, what="map", ordering_from=hint)
        check_resolution(sky, settings.nside_work)
    mask = read_healpix(args.mask, ordering=settings.ordering, what="mask", ordering_from=hint) if args.mask else None
    pol = None
    if field is not None:
        pol_mask = (read_healpix(args.pol_mask, ordering=settings.ordering, what="mask", ordering_from=hint)
                    if args.pol_mask else None)
        sky, pol = polarised_input(args.map, field, settings, mask=mask, pol_mask=pol_mask,
                                   convention=args.pol_convention, convention_from="--pol-convention",
                                   ordering_from=hint, pol_mask_name=args.pol_mask)
        check_sky_fraction(pol.e, pol.e_mask, args.min_sky_fraction, threshold=settings.mask_threshold,
                           setting="--min-sky-fraction (E: the interior of the apodised polarisation mask)")
    if field != "E":
        check_sky_fraction(sky, mask, args.min_sky_fraction, threshold=settings.mask_threshold,
                           setting="--min-sky-fraction")
    return sky, mask, pol


def run(args):
    from ..errors import quiet_notes

    with quiet_notes(args.quiet):
        return _run(args)


def _run(args):
    from ..config import load_config
    from ..scenario import check_config
    from ..errors import held_notes
    from ..search.engine import search_read, validate
    from ._common import atomic_write, check_writable, print_json

    cfg = check_config(load_config(args.config)) if args.config else None
    settings = validate(settings_for(args, cfg))
    scenario = None
    if settings.mode == "targeted":
        from ..errors import InputError
        from ..scenario import scenario_from_config

        if cfg is None:
            raise InputError("the targeted search needs a config with [space]", "--config")
        scenario = scenario_from_config(cfg)
    if args.plot:
        check_writable(args.plot, "plot")
    with held_notes():  # a refused input is one line, without the notes read before it
        sky, mask, pol = read_inputs(args, settings)
    out = search_read(sky, mask, args.map, args.mask, settings, field=args.field, scenario=scenario,
                      resume=args.resume, show_progress=False if args.quiet else None, polarised=pol,
                      pol_mask_path=args.pol_mask)
    out = _clean(out)
    if args.plot:
        from ..search.plot import plot_search

        atomic_write(args.plot, lambda tmp: plot_search(out, tmp))
    if args.json:
        print_json(out)
        return 0
    s = out["settings"]
    w = out["work"]
    print(f"{out['map']}: {s['mode']} search, {len(s['radii_deg'])} radii {min(s['radii_deg']):g}-{max(s['radii_deg']):g} deg, "
          f"FWHM {s['fwhm_deg']:g} deg, N_side {s['nside_work']}, m <= {s['m_max']}")
    if out.get("polarisation"):
        from ..search.polarised import weight_note

        pi = out["polarisation"]
        print(f"field {pi['field']}: E from Q, U ({pi['convention']} convention, columns {', '.join(pi['columns'])}), "
              f"mask apodised {pi['apod_deg']:g} deg, E searched over {pi['e_kept_fraction_work']:.2f} of the sky")
        if pi.get("weights"):
            print(weight_note(pi["weights"]))
    print(f"{w['pairs']} circle pairs, {w['twists']} pair-twists, {w['modes']} pair-twist-modes in {out['elapsed_s']:.1f} s; "
          f"{out.get('skipped_circles', 0)} circles skipped (kept fraction < {s['min_kept']:g})")
    if "targeted" in out:
        t = out["targeted"]
        print(f"family {t.get('family')}: best S_combined = {t.get('S_combined')} at Euler angles {t.get('best_euler_deg')} deg")
    if out["candidates"]:
        print("ranked by S_eq, the full-circle S of the same chance probability (S over a kept fraction f)")
        print(f"{'S_eq':>7} {'S':>7} {'f':>5} {'radius':>8} {'centre A (lon, lat)':>22} {'centre B (lon, lat)':>22} "
              f"{'twist':>8} {'orient.':>9}")
        for c in out["candidates"]:
            a = "({:7.2f}, {:6.2f})".format(*c["center_a"])
            b = "({:7.2f}, {:6.2f})".format(*c["center_b"])
            seq, sv, f = (("   n/a" if c.get(k) is None else f"{c[k]:7.3f}") for k in ("S_eq", "S", "overlap"))
            print(f"{seq} {sv} {f[-5:]} {c['radius_deg']:7.2f}d {a:>22} {b:>22} {c['twist_deg']:7.2f}d {c['orientation']:>9}")
    else:
        print("no candidate pairs")
    if args.plot:
        print(f"plot written to {args.plot}")
    return 0
