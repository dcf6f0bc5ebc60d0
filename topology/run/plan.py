"""The plan of a run: every setting of ``topology run`` validated and every input file read once,
before any work or output (a bad key or file stops the run before its folder exists).

A :class:`RunPlan` is plain, picklable data: the tasks of :mod:`topology.run.tasks` receive it
whole in worker processes. The N_side and l_max of the simulated (null and injected) skies are
fixed here once: ``[instrument] nside``, else the N_side of the first FITS map, else that of the
first inline sky, else 64; l_max is ``[instrument] lmax``, else min(2 N_side, 3 N_side - 1).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .. import significance as sig
from ..config import Config, config_from_dict, did_you_mean, naming_file, rename_error, validate
from ..bandlimit import check_band_limit, default_lmax, lmax_limit
from ..cosmology import Cosmology
from ..errors import InputError
from ..search.polarised import polarised_field
from ..store import config_hash, file_digest

MAP_NAME = re.compile(r"^[A-Za-z0-9_.-]{1,64}$")


@dataclass
class MapSpec:
    """One ``[[maps]]`` entry: a FITS file (``path``, ``field``, ``ordering``; ``nside`` read at
    plan time) or an inline synthetic sky (``inline``: its space, observer and sky tables)."""

    name: str
    path: str | None = None
    field: int | str = 0
    ordering: str | None = None
    inline: dict | None = None
    nside: int | None = None
    pol_convention: str | None = None  # field "E" / "T+E": the Q/U convention when the header has none


@dataclass
class RunPlan:
    sections: dict
    base_dir: str
    maps: list
    mask: dict
    instrument: dict
    search: dict  # SearchSettings.as_dict()
    significance: dict
    bounds: dict
    radii_deg: np.ndarray
    injection_radii_deg: np.ndarray
    out_dir: Path
    config_hash: str
    execution: dict = field(default_factory=dict)
    targets: list = field(default_factory=list)  # targeted mode: the spaces tested (see topology.run.targeted)
    inputs: dict = field(default_factory=dict)  # {file: sha256 of its content} of every file the run reads
    config_path: str | None = None
    sim_nside: int = 64  # N_side of the null and injected skies
    sim_lmax: int = 128  # their l_max
    pol_field: str | None = None  # "E" or "T+E" when the maps are searched in polarisation (null skies too)
    harmonic: dict | None = None  # [harmonic]: the low-l likelihood bound (topology.run.harmonic.check_plan)

    @property
    def cosmology(self) -> Cosmology:
        from ..scenario import cosmology_from_config

        return cosmology_from_config(config_from_dict(self.sections))

    @property
    def n_null(self) -> int:
        return int(self.significance["n_null"])

    @property
    def n_injections(self) -> int:
        return int(self.significance["n_injections"])

    @property
    def false_alarm(self) -> float:
        return float(self.significance["false_alarm"])

    @property
    def efficiency_level(self) -> float:
        return float(self.significance["efficiency_level"])

    @property
    def efficiency_confidence(self) -> float:
        return float(self.significance["efficiency_confidence"])

    @property
    def radius_step_deg(self) -> float:
        return float(np.min(np.diff(self.radii_deg))) if self.radii_deg.size > 1 else 0.0


def resolve_path(base_dir, path: str) -> str:
    """Absolute path of a config-relative path (workers on other hosts or folders see it too)."""
    p = Path(path)
    return str(p if p.is_absolute() else (Path(base_dir) / p).resolve())


def map_specs(cfg: Config) -> list[MapSpec]:
    entries = cfg.sections.get("maps")
    if not entries:
        raise InputError("no maps: add at least one [[maps]] entry with name and path (or an inline sky)",
                         str(cfg.path) if cfg.path else "config")
    if isinstance(entries, dict):
        entries = [entries]
    specs, names = [], set()
    for i, e in enumerate(entries):
        where = f"[[maps]] #{i + 1}"
        name = e.get("name")
        if not name or not MAP_NAME.match(str(name)):
            raise InputError("needs a name of letters, digits, '-', '_' or '.' (at most 64)", f"{where} name")
        if name in names:
            raise InputError(f"map name {name!r} is used twice", f"{where} name")
        names.add(name)
        has_path, has_inline = "path" in e, "space" in e
        if has_path == has_inline:
            raise InputError("give either path (a FITS map) or an inline sky (space, observer, sky)", where)
        pol = polarised_field(e.get("field"))
        if pol and has_inline:
            raise InputError(f"field = {e['field']!r}: inline skies of a run are temperature only; write a polarised "
                             f"sky with topology synth ([sky] polarisation = true) and give its path", f"{where} field")
        if "pol_convention" in e and not pol:
            raise InputError("only with field = \"E\" or \"T+E\"", f"{where} pol_convention")
        if has_path:
            path = resolve_path(cfg.base_dir, e["path"])
            if not Path(path).is_file():
                raise InputError("map file not found", path)
            specs.append(MapSpec(name, path, pol or e.get("field", 0), e.get("ordering"),
                                 pol_convention=e.get("pol_convention")))
        else:
            inline = {k: dict(e[k]) for k in ("space", "observer", "sky") if k in e}
            for k in ("observer", "sky"):
                if k in e and "space" not in e:
                    raise InputError("an inline sky needs a space table", where)
            try:
                validate({k: v for k, v in inline.items()}, f"{where} (inline sky)")
            except InputError as err:
                raise InputError(err.reason, err.where) from None
            specs.append(MapSpec(name, None, 0, None, inline))
    return specs


def parse_radii_key(text: str, where: str) -> np.ndarray:
    from ..search.engine import parse_radii

    try:
        r = np.array(parse_radii(text), dtype=float)
    except InputError as e:
        raise InputError(e.reason, where) from None
    if r.size == 0 or r.min() <= 0 or r.max() > 90:
        raise InputError(f"radii must lie in (0, 90] degrees, got {text!r}", where)
    return r


def read_map_files(maps: list[MapSpec], mask: dict) -> None:
    """Read every FITS map and the mask once before any work, so that a bad file stops the run
    before an output folder exists: each map's coverage by the mask and the sky fraction it
    keeps (its own unobserved and masked pixels included) against ``min_sky_fraction``. Maps are
    read one at a time (bounded memory); each map's N_side is recorded in its spec (the tasks
    read the files again where they run)."""
    from ..maps import check_sky_fraction, read_healpix
    from .tasks import run_mask

    mask_map = run_mask(mask, 0) if "path" in mask else None
    for i, m in enumerate(maps):
        if m.path and polarised_field(m.field):
            from ..maps import read_iqu

            sky = read_iqu(m.path, convention=m.pol_convention, ordering=m.ordering,
                           ordering_from=f"ordering in [[maps]] #{i + 1}",
                           convention_from=f"pol_convention in [[maps]] #{i + 1}").i
            m.nside = int(sky.nside)
            check_sky_fraction(sky, mask_map, float(mask["min_sky_fraction"]), setting="[mask] min_sky_fraction")
            del sky
        elif m.path:
            sky = read_healpix(m.path, field=m.field, ordering=m.ordering, what="map",
                               ordering_from=f"ordering in [[maps]] #{i + 1}")
            m.nside = int(sky.nside)
            # coverage of the map by the mask (a note when the mask is regraded) and the kept sky
            check_sky_fraction(sky, mask_map, float(mask["min_sky_fraction"]), setting="[mask] min_sky_fraction")
            del sky
    if mask_map is None and mask.get("galactic_b_deg") is not None:
        kept = 1.0 - math.sin(math.radians(float(mask["galactic_b_deg"])))  # sky fraction with |b| >= b0
        if kept < float(mask["min_sky_fraction"]):
            raise InputError(f"the band |b| < {mask['galactic_b_deg']} deg leaves {kept:.1%} of the sky, less than "
                             f"min_sky_fraction = {mask['min_sky_fraction']}", "[mask] galactic_b_deg")


def _tables(obj):
    """Every table of a config (nested tables and arrays of tables included)."""
    if isinstance(obj, dict):
        yield obj
        for v in obj.values():
            yield from _tables(v)
    elif isinstance(obj, list):
        for v in obj:
            yield from _tables(v)


def input_files(cfg: Config, maps: list[MapSpec], mask: dict) -> list[str]:
    """Every file a run reads, as absolute paths: the FITS maps, the mask, the l-weights, the
    hit-count maps of inline skies, the generator files of hyperbolic spaces anywhere in the
    config, and the spectrum table shipped in the package."""
    from importlib import resources

    from ..skies.spectra import TABLE_NAME
    from ..spaces.hyperbolic import generators_path

    files = [m.path for m in maps if m.path]
    if "path" in mask:
        files.append(mask["path"])
    weights = cfg.sections.get("search", {}).get("l_weights")
    if weights:
        files.append(resolve_path(cfg.base_dir, weights))
    for m in maps:
        hits = (m.inline or {}).get("sky", {}).get("hits")
        if hits:
            files.append(resolve_path(cfg.base_dir, hits))
    for table in _tables(cfg.sections):
        if isinstance(table.get("generators"), str):
            files.append(str(generators_path(table["generators"], cfg.base_dir).resolve()))
    files.append(str(resources.files("topology").joinpath("data", TABLE_NAME)))
    return sorted({f for f in files if Path(f).is_file()})


def simulation_nside(instrument: dict, maps: list[MapSpec]) -> int:
    """N_side of null and injected skies (module docstring)."""
    if instrument["nside"]:
        return int(instrument["nside"])
    for m in maps:
        if m.nside:
            return int(m.nside)
    for m in maps:
        if m.inline and "nside" in m.inline.get("sky", {}):
            return int(m.inline["sky"]["nside"])
    return 64


def plan_from_config(cfg: Config, out_dir: str | Path | None = None, *, engine: str | None = None,
                     workers: int | None = None, scheduler: str | None = None) -> RunPlan:
    """Validate the whole config of a run (files, counts, families) before any work."""
    from .. import injection
    from ..scenario import check_config, cosmology_from_config
    from ..search.engine import settings_from
    from ..search.engine import validate as validate_search
    from . import targeted

    check_config(cfg)
    maps = map_specs(cfg)
    kinds = {polarised_field(m.field) or "T" for m in maps}
    if len(kinds) > 1:
        raise InputError(f"the maps mix fields {', '.join(sorted(kinds))}: one field kind per run (T, E or T+E), since "
                         f"the null skies are searched as the maps are", "[[maps]] field")
    pol_field = next(iter(kinds)) if kinds != {"T"} else None
    cosmo = cosmology_from_config(cfg)
    with naming_file(cfg):
        check_inline_skies(cfg, cosmo)
        spaces = bound_families(cfg, cosmo)

    mask = cfg.section("mask")
    if "path" in mask and "galactic_b_deg" in mask:
        raise InputError("give path or galactic_b_deg, not both", "[mask]")
    if "path" in mask:
        mask["path"] = resolve_path(cfg.base_dir, mask["path"])
        if not Path(mask["path"]).is_file():
            raise InputError("mask file not found", mask["path"])
    mask.setdefault("min_sky_fraction", cfg.get("mask", "min_sky_fraction"))
    read_map_files(maps, mask)

    instrument = {k: cfg.get("instrument", k) for k in ("fwhm_deg", "noise_uk", "noise_pol_uk", "nside", "lmax",
                                                         "terms")}
    terms = tuple(instrument["terms"])
    if set(terms) - {"sw", "doppler", "isw"} or "sw" not in terms:
        raise InputError(f"must be ['sw'] or ['sw', 'doppler', 'isw'], got {list(terms)}", "[instrument] terms")
    instrument["terms"] = terms
    sim_nside = simulation_nside(instrument, maps)
    if instrument["lmax"] is not None:
        check_band_limit(instrument["lmax"], sim_nside, "[instrument] lmax",
                         f"for the N_side {sim_nside} of null and injected skies")
    sim_lmax = int(instrument["lmax"] or default_lmax(sim_nside))

    search = cfg.section("search")
    targets = search.pop("targets", None)
    if search.get("mode", "antipodal") == "targeted":
        targets = targeted.check_targets(targets, cfg.section("cosmology"), cfg.base_dir)
    elif targets:
        raise InputError("targets are searched only with mode = \"targeted\"", "[search] targets")
    else:
        targets = []
    if "l_weights" in search:
        p = Path(resolve_path(cfg.base_dir, search["l_weights"]))
        try:
            search["l_weights"] = tuple(np.loadtxt(p, ndmin=1).tolist())
        except (OSError, ValueError) as e:
            raise InputError(f"cannot read l-weights ({e})", "[search] l_weights") from None
    try:
        settings = validate_search(settings_from(search))
    except InputError as e:  # the engine names command-line flags; a run config has keys
        w = e.where or ""
        if w.startswith("--"):
            key = {"fwhm": "fwhm_deg"}.get(w[2:], w[2:].replace("-", "_"))
            raise InputError(e.reason, f"[search] {key}") from None
        raise
    radii = np.array(settings.radii_deg, dtype=float)
    _check_map_resolution(maps, settings.nside_work)
    if sim_nside < settings.nside_work:
        raise InputError(f"null and injected skies of N_side {sim_nside} are coarser than the working N_side "
                         f"{settings.nside_work} ([search] nside_work); give [instrument] nside >= "
                         f"{settings.nside_work}", "[instrument] nside")
    for m in maps:
        own = (m.inline or {}).get("sky", {}).get("nside", instrument["nside"] or 64) if m.inline else None
        if own is not None and own < settings.nside_work:
            raise InputError(f"the inline sky {m.name!r} has N_side {own}, coarser than the working N_side "
                             f"{settings.nside_work} ([search] nside_work)", "[[maps]] sky nside")

    significance = {k: cfg.get("significance", k) for k in (
        "n_null", "false_alarm", "efficiency_level", "efficiency_confidence", "seed", "injection_radii",
        "n_injections", "radius_tolerance_deg")}
    sig.check_null_count(int(significance["n_null"]), float(significance["false_alarm"]))
    injection_radii = parse_radii_key(significance["injection_radii"], "[significance] injection_radii")
    if injection_radii.max() >= 90:
        raise InputError("injected circles need radii below 90 deg", "[significance] injection_radii")
    if injection_radii.min() < radii.min() - 1e-9 or injection_radii.max() > radii.max() + 1e-9:
        raise InputError(f"injection radii {injection_radii.min():g}..{injection_radii.max():g} deg lie outside the "
                         f"searched radii {radii.min():g}..{radii.max():g} deg", "[significance] injection_radii")
    significance["injection_families"] = injection_families(cfg)
    if pol_field:  # polarised null and injected skies (topology.run.polarised)
        from .polarised import check_polarised_run, check_polarised_work

        check_polarised_run(pol_field, terms, targets, significance["injection_families"])
    check_run_terms(terms, cosmo, significance["injection_families"], targets, maps, sim_lmax)
    if targets:
        targeted.check_injectable(targets, cfg.section("cosmology"), cfg.base_dir, sim_lmax)
    else:
        for k, spec in enumerate(significance["injection_families"]):
            try:
                injection.check(spec, cosmo, injection_radii, sim_lmax)
            except InputError as e:
                where = (e.where or "").replace(injection.WHERE, f"{injection.WHERE} #{k + 1}")
                raise InputError(e.reason, where) from None
    for k, spec in enumerate(significance["injection_families"] if pol_field else []):
        check_polarised_work(spec, cosmo, injection_radii, sim_lmax, f"{injection.WHERE} #{k + 1}")
    if significance["radius_tolerance_deg"] is None:
        significance["radius_tolerance_deg"] = float(np.min(np.diff(radii))) if radii.size > 1 else 1.0

    bounds = {k: cfg.get("bounds", k) for k in ("families", "p_max", "m_max")}
    with naming_file(cfg):
        from .harmonic import check_plan

        harmonic = check_plan(cfg, maps, instrument, pol_field, spaces)

    execution = {k: cfg.get("execution", k) for k in ("engine", "workers", "scheduler")}
    execution.update({k: v for k, v in (("engine", engine), ("workers", workers), ("scheduler", scheduler))
                      if v is not None})
    if execution["engine"] not in ("serial", "local", "dask"):
        raise InputError(f"unknown engine {execution['engine']!r}; choose serial, local or dask", "[execution] engine")

    out = Path(out_dir) if out_dir is not None else Path(cfg.get("output", "dir"))
    inputs = {f: file_digest(f) for f in input_files(cfg, maps, mask)}
    return RunPlan(sections=cfg.sections, base_dir=str(cfg.base_dir), maps=maps, mask=mask, instrument=instrument,
                   search=settings.as_dict(), significance=significance, bounds=bounds, radii_deg=radii,
                   injection_radii_deg=injection_radii, out_dir=out, config_hash=config_hash(cfg.sections),
                   execution=execution, targets=targets, inputs=inputs,
                   config_path=str(cfg.path.resolve()) if cfg.path else None, sim_nside=sim_nside,
                   sim_lmax=sim_lmax, pol_field=pol_field, harmonic=harmonic)


def injection_families(cfg: Config) -> list[dict]:
    """The injected families: ``[significance] injection_families``, or the one family of the
    older key ``injection_family`` as a one-element list (giving both is an error)."""
    from .. import injection

    given = cfg.sections.get("significance", {})
    if "injection_family" in given and "injection_families" in given:
        raise InputError("give injection_families (a list) or injection_family (one family), not both",
                         "[significance] injection_family")
    if "injection_family" in given:
        try:
            return injection.injection_specs(None, given["injection_family"])
        except InputError as e:
            raise InputError(e.reason, "[significance] injection_family") from None
    return injection.injection_specs(cfg.get("significance", "injection_families"))


def check_run_terms(terms: tuple, cosmo, families: list[dict], targets: list[dict], maps: list[MapSpec],
                    lmax: int) -> None:
    """One spectrum and one set of terms for every simulated sky of a run: the null skies
    (isotropic, ``[instrument] terms``), the injected families, the targets and the inline data
    skies must all be able to make exactly those terms (:data:`topology.skies.SKY_TERMS`), and
    the full terms need CAMB or, for the default cosmology, the shipped tables (the isotropic
    spectrum, and the shell fit of the transfer for flat skies to l = 1024). One-line InputError
    otherwise, before any work."""
    from .. import injection
    from ..skies import check_sky_terms
    from ..skies.spectra import have_camb, is_default_cosmology
    from ..spaces.registry import geometry_of
    from . import targeted

    kinds = []
    for k, spec in enumerate(families):
        kinds.append((injection.spec_geometry(spec), tuple(terms), f"{injection.WHERE} #{k + 1}"))
    for i, t in enumerate(targets):
        kinds.append((geometry_of(t["family"]), tuple(terms), f"{targeted.WHERE} #{i + 1}"))
    for i, m in enumerate(maps):
        if m.inline:
            own = tuple(m.inline.get("sky", {}).get("terms", terms))
            family = m.inline["space"].get("family")
            kinds.append(("isotropic" if family == "isotropic" else geometry_of(family), own,
                          f"[[maps]] #{i + 1} (inline sky)"))
    for kind, t, where in kinds:
        check_sky_terms(kind, t, where)
    if set(terms) != {"sw"} and not have_camb():
        if not is_default_cosmology(cosmo):
            raise InputError("without camb the Doppler and ISW terms exist only for the default cosmology (the "
                             "shipped CAMB table): pip install 'topology[spectra]' or give terms = [\"sw\"]",
                             "[instrument] terms")
        from ..skies.transfer_shells import TABLE_LMAX

        flat = [where for kind, t, where in kinds if kind == "flat" and set(t) != {"sw"}]
        if flat and lmax > TABLE_LMAX:
            raise InputError(f"flat skies with Doppler and ISW above l = {TABLE_LMAX} (the shipped transfer table) "
                             "need camb: pip install 'topology[spectra]' or lower [instrument] lmax", flat[0])


def reachable_note(n_injections: int, level: float, confidence: float) -> str | None:
    """What to say when ``n_injections`` per radius can never give a lower limit >= ``level``
    (then no alpha_min and no bound can come out): n of n recovered gives (1 - c)^(1/n) (Clopper
    & Pearson 1934). Said in the summary, the report and the command's closing lines, not as an
    error, so that quick trial runs still go through."""
    best = sig.best_lower_limit(n_injections, confidence)
    if best >= level:
        return None
    need = sig.injections_needed(level, confidence)
    return (f"[significance] n_injections = {n_injections} per radius can give an efficiency lower limit of at most "
            f"{best:.3f} ({confidence:g} one-sided, all recovered), below efficiency_level = {level:g}: no alpha_min "
            f"and no bound can come out; give n_injections >= {need}")


def _check_map_resolution(maps: list[MapSpec], nside_work: int) -> None:
    """A FITS map coarser than the working N_side is refused here, before any output."""
    for m in maps:
        if m.nside is not None and m.nside < nside_work:
            raise InputError(f"the map has N_side {m.nside}, coarser than the working N_side {nside_work} "
                             f"([search] nside_work); give nside_work <= {m.nside} or a finer map", m.path)


def check_inline_skies(cfg: Config, cosmo) -> None:
    """Family, observer, background and band limit of every inline sky of ``[[maps]]``."""
    from ..scenario import check_space_table

    maps = cfg.sections.get("maps", [])
    maps = [maps] if isinstance(maps, dict) else maps
    inst = cfg.sections.get("instrument", {})
    for i, e in enumerate(maps):
        if "space" not in e:
            continue
        where = f"[[maps]] #{i + 1}"
        try:
            check_space_table(e["space"], e.get("observer"), cosmo, cfg.base_dir, curvature=True,
                              sky=e.get("sky", {}))
        except InputError as err:
            raise rename_error(err, where) from None
        sky = e.get("sky", {})
        if "lmax" in sky or "lmax" in inst:
            nside = sky.get("nside", inst.get("nside", 64))
            lmax = sky.get("lmax", inst.get("lmax"))
            if lmax > lmax_limit(nside):
                key = f"{where} sky lmax" if "lmax" in sky else "[instrument] lmax"
                raise InputError(f"the inline sky {e.get('name', '')!r} has nside {nside}, which supports lmax <= "
                                 f"3 nside - 1 = {lmax_limit(nside)}, got lmax {lmax}", key)


def bound_families(cfg: Config, cosmo) -> list:
    """The spaces of ``[bounds] families`` with their observers, checked: [(space, observer), ...]."""
    from ..bounds import shortest_displacement
    from ..scenario import family_observer
    from ..spaces import build_space
    from ..spaces.registry import allowed_keys

    out = []
    for i, family in enumerate(cfg.get("bounds", "families") or []):
        where = f"[bounds] families #{i + 1}"
        if not isinstance(family, dict):
            raise InputError('each family is a table like {family = "lens", p = 8, q = 3}', where)
        spec = {k: v for k, v in family.items() if k not in ("position", "orientation")}
        try:
            if spec.get("family") == "isotropic":
                raise InputError("a bound needs a multiply connected family, not 'isotropic'", "[space] family")
            space = build_space(spec, chi_rec_mpc=cosmo.chi_rec_mpc, base_dir=cfg.base_dir)
        except InputError as err:
            if err.where and err.where.startswith("[space] ") and "unknown key" in err.reason:
                # family keys plus the observer's position and orientation
                key = err.where[len("[space] "):]
                ok = sorted(allowed_keys(spec["family"]) | {"position", "orientation"})
                raise InputError(f"unknown key for family {spec['family']}{did_you_mean(key, ok)}; "
                                 f"allowed: {', '.join(ok)}", f"{where} {key}") from None
            raise rename_error(err, where, "[space] ") from None
        try:
            observer = family_observer(space, family)
            if space.geometry == "hyperbolic":
                shortest_displacement(space, observer)  # a fixed point of the group raises here
        except InputError as err:
            raise rename_error(err, where, "[observer] ") from None
        out.append((space, observer))
    return out
