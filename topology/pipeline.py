"""The main job, ``topology run``: search the data maps, calibrate on null skies, measure the
detection efficiency on injected skies, turn alpha_min into bounds, write the report.

Stages (each a set of independent tasks, see :mod:`topology.execution`):

1. ``data/<name>``: search each data map (a FITS file or an inline synthetic sky) with the
   configured search;
2. ``null/<i>``: isotropic skies with the same spectrum, beam, noise, mask and filtering,
   searched with identical settings; their S_max per radius calibrate the thresholds
   (:mod:`topology.significance`: per radius and over the whole radius range, standardised-
   maximum look-elsewhere correction) and the candidates' p-values;
3. ``inj/<radius>/<j>``: multiply connected skies with circles of known radius (default: a cubic
   torus E1 of side 2 chi_rec cos(alpha), randomly oriented, which has three back-to-back pairs
   of radius alpha, with alpha drawn uniformly within half a search step of the nominal radius),
   observed and searched like the data; an injection is recovered when S_max within the radius
   tolerance (default one search step) of the nominal radius exceeds the whole-range threshold. The efficiency per
   radius gives alpha_min, the smallest radius above which it stays >= the configured level;
4. bounds from alpha_min (:mod:`topology.bounds`) for every map without a detection;
5. the report (:mod:`topology.report`).

Every task's seed comes from the run seed and its id, so the results do not depend on the
engine or the number of workers; finished tasks are kept in the durable store of the output
folder and a resumed run recomputes only the missing ones.
"""

from __future__ import annotations

import json
import math
import os
import platform
import re
import shutil
import time
from dataclasses import dataclass, field, replace
from pathlib import Path
from types import SimpleNamespace

import numpy as np

from . import __version__
from . import significance as sig
from .config import Config, config_from_dict, validate
from .cosmology import Cosmology
from .errors import InputError, note, raise_if_stopped
from .execution import Task, make_engine, task_seed
from .store import MemoryStore, TaskStore, config_hash, file_digest, fingerprint

N_CANDIDATES = 10  # candidates per map in the summary and tables
_NAME = re.compile(r"^[A-Za-z0-9_.-]{1,64}$")
CAUTION = (
    "A detection or a bound here is only as good as its calibration. The statistic is the m-weighted "
    "S statistic of Cornish, Spergel & Starkman (2004), maximised over centres, twists and both "
    "orientations as configured; thresholds come from {n_null} isotropic Gaussian skies ({terms} "
    "temperature terms, CAMB spectrum or the shipped table) with the configured beam, white noise "
    "and mask, searched with identical settings; the false-alarm probability {false_alarm} holds over "
    "the whole radius range (standardised-maximum look-elsewhere correction) with the binomial error of {n_null} "
    "skies; alpha_min is where the recovery of injected {injection} circles reaches {level:.0%}. "
    "The injected and null skies contain only the listed temperature terms, no foregrounds and no "
    "correlated noise. Bounds assume the listed background cosmology. Any claim in a paper needs "
    "the user's own validation on their data, mask and instrument model."
)


# ---------------------------------------------------------------------------------------------
# the plan: everything validated before any work
# ---------------------------------------------------------------------------------------------
@dataclass
class MapSpec:
    name: str
    path: str | None = None
    field: int | str = 0
    ordering: str | None = None
    inline: dict | None = None


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
    targets: list = field(default_factory=list)  # targeted mode: the spaces tested (see topology.targeted)
    inputs: dict = field(default_factory=dict)  # {file: sha256 of its content} of every file the run reads
    config_path: str | None = None

    @property
    def cosmology(self) -> Cosmology:
        from .scenario import cosmology_from_config

        return cosmology_from_config(config_from_dict(self.sections))


def _resolve(base_dir, path: str) -> str:
    """Absolute path of a config-relative path (workers on other hosts or folders see it too)."""
    p = Path(path)
    return str(p if p.is_absolute() else (Path(base_dir) / p).resolve())


def _map_specs(cfg: Config) -> list[MapSpec]:
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
        if not name or not _NAME.match(str(name)):
            raise InputError("needs a name of letters, digits, '-', '_' or '.' (at most 64)", f"{where} name")
        if name in names:
            raise InputError(f"map name {name!r} is used twice", f"{where} name")
        names.add(name)
        has_path, has_inline = "path" in e, "space" in e
        if has_path == has_inline:
            raise InputError("give either path (a FITS map) or an inline sky (space, observer, sky)", where)
        if has_path:
            path = _resolve(cfg.base_dir, e["path"])
            if not Path(path).is_file():
                raise InputError("map file not found", path)
            specs.append(MapSpec(name, path, e.get("field", 0), e.get("ordering")))
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


def _radii(text: str, where: str) -> np.ndarray:
    from .search.engine import parse_radii

    try:
        r = np.array(parse_radii(text), dtype=float)
    except InputError as e:
        raise InputError(e.reason, where) from None
    if r.size == 0 or r.min() <= 0 or r.max() > 90:
        raise InputError(f"radii must lie in (0, 90] degrees, got {text!r}", where)
    return r


def _check_files(maps: list[MapSpec], mask: dict) -> None:
    """Read every FITS map and the mask once before any work, so that a bad file stops the run
    before an output folder exists (the tasks read them again where they run)."""
    from .maps import mask_weights, read_healpix

    skies = [read_healpix(m.path, field=m.field, ordering=m.ordering, what="map",
                          ordering_from=f"ordering in [[maps]] #{i + 1}")
             for i, m in enumerate(maps) if m.path]
    if "path" in mask:
        mk = _mask_map(mask, 0)
        for sky in skies:
            mask_weights(mk, sky)  # coverage of each map; a note when the mask is regraded
    elif mask.get("galactic_b_deg") is not None:
        kept = 1.0 - math.sin(math.radians(float(mask["galactic_b_deg"])))  # sky fraction with |b| >= b0
        if kept < float(mask["min_sky_fraction"]):
            raise InputError(f"the band |b| < {mask['galactic_b_deg']} deg leaves {kept:.1%} of the sky, less than "
                             f"min_sky_fraction = {mask['min_sky_fraction']}", "[mask] galactic_b_deg")


def _space_tables(obj):
    """Every table of a config (nested tables and arrays of tables included)."""
    if isinstance(obj, dict):
        yield obj
        for v in obj.values():
            yield from _space_tables(v)
    elif isinstance(obj, list):
        for v in obj:
            yield from _space_tables(v)


def input_files(cfg: Config, maps: list[MapSpec], mask: dict) -> list[str]:
    """Every file a run reads, as absolute paths: the FITS maps, the mask, the l-weights, the
    hit-count maps of inline skies, the generator files of hyperbolic spaces anywhere in the
    config, and the spectrum table shipped in the package."""
    from importlib import resources

    from .skies.spectra import TABLE_NAME
    from .spaces.hyperbolic import generators_path

    files = [m.path for m in maps if m.path]
    if "path" in mask:
        files.append(mask["path"])
    weights = cfg.sections.get("search", {}).get("l_weights")
    if weights:
        files.append(_resolve(cfg.base_dir, weights))
    for m in maps:
        hits = (m.inline or {}).get("sky", {}).get("hits")
        if hits:
            files.append(_resolve(cfg.base_dir, hits))
    for table in _space_tables(cfg.sections):
        if isinstance(table.get("generators"), str):
            files.append(str(generators_path(table["generators"], cfg.base_dir).resolve()))
    files.append(str(resources.files("topology").joinpath("data", TABLE_NAME)))
    return sorted({f for f in files if Path(f).is_file()})


def plan_from_config(cfg: Config, out_dir: str | Path | None = None, *, engine: str | None = None,
                     workers: int | None = None, scheduler: str | None = None) -> RunPlan:
    """Validate the whole config of a run (files, counts, families) before any work."""
    from .scenario import cosmology_from_config
    from .search.engine import settings_from
    from .search.engine import validate as validate_search
    from .spaces import build_space

    maps = _map_specs(cfg)
    cosmo = cosmology_from_config(cfg)

    mask = cfg.section("mask")
    if "path" in mask and "galactic_b_deg" in mask:
        raise InputError("give path or galactic_b_deg, not both", "[mask]")
    if "path" in mask:
        mask["path"] = _resolve(cfg.base_dir, mask["path"])
        if not Path(mask["path"]).is_file():
            raise InputError("mask file not found", mask["path"])
    mask.setdefault("min_sky_fraction", cfg.get("mask", "min_sky_fraction"))
    _check_files(maps, mask)

    inst = {k: cfg.get("instrument", k) for k in ("fwhm_deg", "noise_uk", "nside", "lmax", "terms")}
    terms = tuple(inst["terms"])
    if set(terms) - {"sw", "doppler", "isw"} or "sw" not in terms:
        raise InputError(f"must be ['sw'] or ['sw', 'doppler', 'isw'], got {list(terms)}", "[instrument] terms")
    inst["terms"] = terms
    if inst["lmax"] is not None:
        hint = _nside_hint(SimpleNamespace(instrument=inst, maps=maps))
        if inst["lmax"] > 3 * hint - 1:
            raise InputError(f"must be <= 3 nside - 1 = {3 * hint - 1} for the N_side {hint} of null and injected "
                             f"skies, got {inst['lmax']}", "[instrument] lmax")

    sec = cfg.section("search")
    targets = sec.pop("targets", None)
    if sec.get("mode", "antipodal") == "targeted":
        from . import targeted

        targets = targeted.check_targets(targets, cfg.section("cosmology"), cfg.base_dir)
    elif targets:
        raise InputError("targets are searched only with mode = \"targeted\"", "[search] targets")
    else:
        targets = []
    if "l_weights" in sec:
        p = Path(_resolve(cfg.base_dir, sec["l_weights"]))
        try:
            sec["l_weights"] = tuple(np.loadtxt(p, ndmin=1).tolist())
        except (OSError, ValueError) as e:
            raise InputError(f"cannot read l-weights ({e})", "[search] l_weights") from None
    try:
        settings = validate_search(settings_from(sec))
    except InputError as e:  # the engine names command-line flags; a run config has keys
        w = e.where or ""
        if w.startswith("--"):
            key = {"fwhm": "fwhm_deg"}.get(w[2:], w[2:].replace("-", "_"))
            raise InputError(e.reason, f"[search] {key}") from None
        raise
    radii = np.array(settings.radii_deg, dtype=float)

    sg = {k: cfg.get("significance", k) for k in ("n_null", "false_alarm", "efficiency_level", "seed",
                                                   "injection_radii", "n_injections", "injection_family",
                                                   "radius_tolerance_deg")}
    sig.check_null_count(int(sg["n_null"]), float(sg["false_alarm"]))
    inj = _radii(sg["injection_radii"], "[significance] injection_radii")
    if inj.max() >= 90:
        raise InputError("injected circles need radii below 90 deg", "[significance] injection_radii")
    if inj.min() < radii.min() - 1e-9 or inj.max() > radii.max() + 1e-9:
        raise InputError(f"injection radii {inj.min():g}..{inj.max():g} deg lie outside the searched radii "
                         f"{radii.min():g}..{radii.max():g} deg", "[significance] injection_radii")
    from . import injection

    sg["injection_family"] = injection.injection_spec(sg["injection_family"])
    nside_sim = int(inst["nside"] or 64)
    lmax_sim = int(inst["lmax"] or min(2 * nside_sim, 3 * nside_sim - 1))
    if targets:
        from . import targeted

        targeted.check_injectable(targets, cfg.section("cosmology"), cfg.base_dir, lmax_sim)
    else:
        injection.check(sg["injection_family"], cosmo, inj, lmax_sim)
    if sg["radius_tolerance_deg"] is None:
        sg["radius_tolerance_deg"] = float(np.min(np.diff(radii))) if radii.size > 1 else 1.0

    bsec = {k: cfg.get("bounds", k) for k in ("families", "p_max", "m_max")}
    for i, fam in enumerate(bsec["families"]):
        if not isinstance(fam, dict):
            raise InputError("each family is a table like {family = \"lens\", p = 8, q = 3}", f"[bounds] families #{i + 1}")
        spec = {k: v for k, v in fam.items() if k not in ("position", "orientation")}
        try:
            build_space(spec, chi_rec_mpc=cosmo.chi_rec_mpc, base_dir=cfg.base_dir)
        except InputError as e:
            raise InputError(e.reason, f"[bounds] families #{i + 1} ({e.where or 'space'})") from None

    ex = {k: cfg.get("execution", k) for k in ("engine", "workers", "scheduler")}
    ex.update({k: v for k, v in (("engine", engine), ("workers", workers), ("scheduler", scheduler)) if v is not None})
    if ex["engine"] not in ("serial", "local", "dask"):
        raise InputError(f"unknown engine {ex['engine']!r}; choose serial, local or dask", "[execution] engine")

    out = Path(out_dir) if out_dir is not None else Path(cfg.get("output", "dir"))
    inputs = {f: file_digest(f) for f in input_files(cfg, maps, mask)}
    return RunPlan(sections=cfg.sections, base_dir=str(cfg.base_dir), maps=maps, mask=mask, instrument=inst,
                   search=settings.as_dict(), significance=sg, bounds=bsec, radii_deg=radii,
                   injection_radii_deg=inj, out_dir=out, config_hash=config_hash(cfg.sections), execution=ex,
                   targets=targets, inputs=inputs, config_path=str(cfg.path.resolve()) if cfg.path else None)


# ---------------------------------------------------------------------------------------------
# task functions (module level, plain arguments: they run in worker processes)
# ---------------------------------------------------------------------------------------------
_CACHE: dict = {}


def _int_seed(run_seed: int, task_id: str) -> int:
    return int(task_seed(run_seed, task_id).generate_state(1, dtype=np.uint32)[0])


def _mask_map(mask: dict, nside: int):
    """The run's mask as a SkyMap (cached per process), or None."""
    from .maps import as_skymap, read_healpix

    key = ("mask", json.dumps(mask, sort_keys=True, default=str), nside)
    if key not in _CACHE:
        if "path" in mask:
            m = read_healpix(mask["path"], ordering=mask.get("ordering"), what="mask",
                             ordering_from="ordering in [mask]")
        elif mask.get("galactic_b_deg") is not None:
            from .skies.instrument import galactic_mask

            m = as_skymap(galactic_mask(nside, float(mask["galactic_b_deg"])), source="galactic mask")
        else:
            m = None
        if m is not None:
            kept = float(np.mean((np.where(m.observed, m.values, 0.0)) >= 0.5))
            if kept < float(mask["min_sky_fraction"]):
                raise InputError(f"the mask keeps {kept:.1%} of the sky, less than min_sky_fraction = "
                                 f"{mask['min_sky_fraction']}", mask.get("path", "[mask]"))
        _CACHE[key] = m
    return _CACHE[key]


def _regrade_mask(mask_map, npix: int) -> np.ndarray:
    """Kept (1) / masked (0) at the N_side of a map of ``npix`` pixels."""
    from .maps import regrade_weights

    w = np.where(mask_map.observed, mask_map.values, 0.0)
    return regrade_weights(w, int(round(np.sqrt(npix / 12))))


def _search(values, plan_d: dict, source: str) -> dict:
    from .maps import as_skymap
    from .search.engine import SearchSettings, search_sky

    settings = SearchSettings(**{k: (tuple(v) if isinstance(v, list) else v) for k, v in plan_d["search"].items()})
    sky = values if hasattr(values, "observed") else as_skymap(values, source=source)
    mask = _mask_map(plan_d["mask"], sky.nside)
    return search_sky(sky, mask, settings, show_progress=False, map_name=source)


def _smax_by_radius(result: dict, radii: np.ndarray) -> np.ndarray:
    """Largest S over orientations at each searched radius (NaN where nothing was evaluated)."""
    out = np.full(len(radii), -np.inf)
    for e in result["s_max"]:
        i = int(np.argmin(np.abs(radii - e["radius_deg"])))
        if e["S_max"] is not None and np.isfinite(e["S_max"]):
            out[i] = max(out[i], float(e["S_max"]))
    return out


def _sim_settings(plan_d: dict, nside_hint: int) -> tuple[int, int]:
    inst = plan_d["instrument"]
    nside = int(inst["nside"] or nside_hint)
    lmax = int(inst["lmax"] or min(2 * nside, 3 * nside - 1))
    return nside, lmax


def _search_data(values, plan_d: dict, source: str) -> dict:
    if plan_d.get("targets"):
        from .targeted import data_result

        return data_result(values, plan_d, source)
    return _search(values, plan_d, source)


def task_data(plan_d: dict, name: str) -> dict:
    """Search one data map; returns the search result (JSON-able)."""
    spec = next(m for m in plan_d["maps"] if m["name"] == name)
    if spec["path"]:
        from .maps import read_healpix

        sky = read_healpix(spec["path"], field=spec["field"], ordering=spec["ordering"], what="map")
        res = _search_data(sky, plan_d, spec["path"])
        res["nside"] = int(sky.nside)
        return res
    from .skies import synthesize

    inline = spec["inline"]
    nside, lmax = _sim_settings(plan_d, 64)
    own = inline.get("sky", {})
    if "nside" in own and "lmax" not in own and not plan_d["instrument"]["lmax"]:
        lmax = min(2 * own["nside"], 3 * own["nside"] - 1)
    inst = plan_d["instrument"]
    sky_sec = {"nside": nside, "lmax": lmax, "fwhm_deg": inst["fwhm_deg"], "noise_uk": inst["noise_uk"],
               "terms": list(inst["terms"]), **inline.get("sky", {})}
    sections = {k: v for k, v in plan_d["sections"].items() if k == "cosmology"}
    sections.update({"space": inline["space"], "observer": inline.get("observer", {}), "sky": sky_sec})
    cfg = config_from_dict(sections, f"map {name}")
    cfg = Config(cfg.sections, Path(plan_d["base_dir"]) / "inline.toml")
    synth = synthesize(cfg)
    res = _search_data(synth.map, plan_d, f"inline sky {name}")
    res["nside"] = nside
    res["predicted"] = [p.as_dict() for p in synth.pairs]
    res["map_values"] = synth.map.astype(np.float32)
    return res


def null_map(plan_d: dict, task_id: str) -> tuple[np.ndarray, int]:
    """The observed isotropic sky of null task ``task_id`` and its seed (same spectrum, beam and
    noise as the data; seed from the run seed and the task id)."""
    from .scenario import cosmology_from_config
    from .skies.instrument import observe
    from .skies.isotropic import isotropic_sky

    nside, lmax = _sim_settings(plan_d, plan_d["nside_hint"])
    seed = _int_seed(plan_d["significance"]["seed"], task_id)
    cosmo = cosmology_from_config(config_from_dict({"cosmology": plan_d["sections"].get("cosmology", {})}))
    inst = plan_d["instrument"]
    sky = isotropic_sky(cosmo, lmax=lmax, terms=tuple(inst["terms"]), seed=seed)
    return observe(sky, nside=nside, lmax=lmax, fwhm_deg=inst["fwhm_deg"], noise_uk=inst["noise_uk"], seed=seed), seed


def task_null(plan_d: dict, index: int, task_id: str) -> dict:
    m, seed = null_map(plan_d, task_id)
    res = _search(m, plan_d, task_id)
    return {"s_max": _smax_by_radius(res, np.asarray(plan_d["radii_deg"])), "seed": seed,
            "elapsed_s": res["elapsed_s"]}


def random_rotation(rng: np.random.Generator) -> tuple[float, float, float]:
    """Euler angles z-y-z (radians) of a rotation uniform on SO(3): alpha, gamma uniform,
    cos(beta) uniform (common practice)."""
    return float(rng.uniform(0, 2 * np.pi)), float(np.arccos(rng.uniform(-1, 1))), float(rng.uniform(0, 2 * np.pi))


def task_injection(plan_d: dict, radius_deg: float, index: int, task_id: str) -> dict:
    """One injected sky (:mod:`topology.injection`): the configured family scaled so that its
    largest circles have a radius drawn uniformly within half a search step of the nominal one
    (so the efficiency covers circles between the grid radii too), observed and searched."""
    from . import injection
    from .scenario import cosmology_from_config
    from .skies.instrument import observe

    nside, lmax = _sim_settings(plan_d, plan_d["nside_hint"])
    seed = _int_seed(plan_d["significance"]["seed"], task_id)
    rng = np.random.default_rng(task_seed(plan_d["significance"]["seed"], task_id + "/geometry"))
    cosmo = cosmology_from_config(config_from_dict({"cosmology": plan_d["sections"].get("cosmology", {})}))
    half = 0.5 * float(plan_d["radius_step_deg"])
    radius_true = float(np.clip(radius_deg + rng.uniform(-half, half), 0.5, 89.5))
    space, observer, cosmo_inj = injection.scaled(plan_d["significance"]["injection_family"], radius_true, rng, cosmo)
    inst = plan_d["instrument"]
    terms = tuple(inst["terms"])
    if space.geometry == "flat":
        from .skies.flat import flat_sky

        sky = flat_sky(space, observer, cosmo_inj, lmax=lmax, nside=nside, method="auto", terms=terms, seed=seed)
    else:
        from .skies.spherical import spherical_sky

        sky = spherical_sky(space, observer, cosmo_inj, lmax=lmax, nside=nside, terms=terms, seed=seed)
    m = observe(sky, nside=nside, lmax=lmax, fwhm_deg=inst["fwhm_deg"], noise_uk=inst["noise_uk"], seed=seed)
    res = _search(m, plan_d, task_id)
    return {"s_max": _smax_by_radius(res, np.asarray(plan_d["radii_deg"])), "radius_deg": float(radius_deg),
            "radius_true_deg": radius_true, "seed": seed, "elapsed_s": res["elapsed_s"],
            "omega_k": float(cosmo_inj.omega_k)}


# ---------------------------------------------------------------------------------------------
# the run
# ---------------------------------------------------------------------------------------------
def _plan_dict(plan: RunPlan, nside_hint: int) -> dict:
    return {
        "sections": plan.sections, "base_dir": plan.base_dir,
        "maps": [m.__dict__ for m in plan.maps], "mask": plan.mask, "instrument": plan.instrument,
        "search": plan.search, "significance": plan.significance, "radii_deg": plan.radii_deg.tolist(),
        "nside_hint": nside_hint, "targets": plan.targets,
        "radius_step_deg": float(np.min(np.diff(plan.radii_deg))) if plan.radii_deg.size > 1 else 0.0,
    }


def _nside_hint(plan: RunPlan) -> int:
    """N_side of null/injected skies: [instrument] nside, else that of the first FITS map, else 64."""
    if plan.instrument["nside"]:
        return int(plan.instrument["nside"])
    for m in plan.maps:
        if m.path:
            from astropy.io import fits

            try:
                with fits.open(m.path, memmap=False) as hdul:
                    for h in hdul[1:]:
                        if "NSIDE" in h.header:
                            return int(h.header["NSIDE"])
            except OSError:
                pass
    for m in plan.maps:
        if m.inline and "nside" in m.inline.get("sky", {}):
            return int(m.inline["sky"]["nside"])
    return 64


def task_keys(plan: RunPlan, nside_hint: int) -> tuple[str, dict]:
    """Keys of the inputs a task is computed from (:mod:`topology.store`): every task reads the
    shared inputs (mask, weights, generators, spectrum table; the package and camb versions;
    the N_side of the simulated skies); a data task also reads its own map. Returns (the key of
    simulated-sky tasks, {map name: key of its data task})."""
    own = {m.path for m in plan.maps if m.path}
    shared = {f: d for f, d in plan.inputs.items() if f not in own}
    versions = {k: v for k, v in _versions().items() if k in ("topology", "camb")}
    common = fingerprint(shared, versions, nside_hint)
    data = {m.name: fingerprint(common, plan.inputs.get(m.path) if m.path else None) for m in plan.maps}
    return common, data


def build_tasks(plan: RunPlan) -> list[Task]:
    hint = _nside_hint(plan)
    pd = _plan_dict(plan, hint)
    common, data = task_keys(plan, hint)
    if plan.targets:
        from .targeted import build_tasks as targeted_tasks

        tasks = targeted_tasks(plan, pd)
    else:
        tasks = [Task(f"data/{m.name}", task_data, {"plan_d": pd, "name": m.name}) for m in plan.maps]
        tasks += _simulation_tasks(plan, pd)
    return [replace(t, key=data[t.id[5:]] if t.id.startswith("data/") else common) for t in tasks]


def _simulation_tasks(plan: RunPlan, pd: dict) -> list[Task]:
    tasks = []
    n_null = int(plan.significance["n_null"])
    tasks += [Task(f"null/{i:05d}", task_null, {"plan_d": pd, "index": i, "task_id": f"null/{i:05d}"})
              for i in range(n_null)]
    for r in plan.injection_radii_deg:
        for j in range(int(plan.significance["n_injections"])):
            tid = f"inj/{r:g}/{j:04d}"
            tasks.append(Task(tid, task_injection, {"plan_d": pd, "radius_deg": float(r), "index": j, "task_id": tid}))
    return tasks


def run_tasks(tasks: list[Task], store, engine, show_progress: bool | None = None) -> dict:
    """Run the tasks missing from ``store`` on ``engine``, storing each result as it finishes.

    Returns {"computed": n, "reused": n, "elapsed_s": t}."""
    from .search.progress import progress

    t0 = time.perf_counter()
    todo = [t for t in tasks if not store.has(t.id, t.key)]
    stale = sum(store.stale(t.id, t.key) for t in todo)
    if stale:
        changed = getattr(store, "changed_inputs", [])
        what = f" ({', '.join(changed)} changed since they ran)" if changed else ""
        note(f"{stale} finished task(s) are recomputed: their inputs changed{what}")
    bar = progress(len(tasks), "topology run", show_progress)
    bar.update(len(tasks) - len(todo))
    computed = 0
    try:
        keys = {t.id: t.key for t in todo}
        for tid, result in engine.run(todo):
            store.put(tid, result, keys[tid])
            computed += 1
            bar.update(1)
            raise_if_stopped()
    finally:
        bar.close()
    return {"computed": computed, "reused": len(tasks) - len(todo), "elapsed_s": time.perf_counter() - t0}


def _candidate_objects(cands, n=6):
    from .geometry import lonlat_to_vec

    out = []
    for c in cands[:n]:
        out.append(SimpleNamespace(center_a=lonlat_to_vec(*c["center_a"]), center_b=lonlat_to_vec(*c["center_b"]),
                                   radius=math.radians(c["radius_deg"])))
    return out


def analyse(plan: RunPlan, store) -> dict:
    """Thresholds, p-values, efficiency, alpha_min and bounds from the stored task results."""
    from .bounds import bound_summary

    if plan.targets:
        from .targeted import analyse as analyse_targets

        return analyse_targets(plan, store)
    radii = plan.radii_deg
    n_null = int(plan.significance["n_null"])
    fa = float(plan.significance["false_alarm"])
    level = float(plan.significance["efficiency_level"])
    null = np.array([store.get(f"null/{i:05d}")["s_max"] for i in range(n_null)])
    null = np.where(np.isfinite(null), null, -1.0)
    th = sig.thresholds(radii, null, fa)

    tol = float(plan.significance["radius_tolerance_deg"])
    inj_r = plan.injection_radii_deg
    n_inj = int(plan.significance["n_injections"])
    detected = np.zeros((n_inj, len(inj_r)), dtype=bool)
    for k, r in enumerate(inj_r):
        near = np.abs(radii - r) <= tol + 1e-9
        for j in range(n_inj):
            s = np.asarray(store.get(f"inj/{r:g}/{j:04d}")["s_max"])
            detected[j, k] = bool(np.any(s[near] > th.whole_range[near]))
    eff, eff_err = sig.efficiency(detected)
    amin = sig.alpha_min(inj_r, eff, level)

    cosmo = plan.cosmology
    maps_out, extra = [], {}
    for spec in plan.maps:
        res = store.get(f"data/{spec.name}")
        smax = _smax_by_radius(res, radii)
        smax_f = np.where(np.isfinite(smax), smax, -1.0)
        is_detected = bool(np.any(smax_f > th.whole_range))
        # the pairs that define S_max (the best-ranked pair per radius and orientation): the same
        # statistic as the null skies', so their p-values are comparable
        source = [e["best"] for e in res["s_max"] if e.get("best")] or res["candidates"]
        cands = []
        for c in source:
            i = int(np.argmin(np.abs(radii - c["radius_deg"])))
            curve = np.full(len(radii), -1.0)
            curve[i] = c["S"]
            p_local = float(sig.local_p_values(np.array([[c["S"]]]), null[:, i:i + 1])[0, 0])
            cands.append({k: c[k] for k in ("center_a", "center_b", "radius_deg", "twist_deg", "orientation", "S")}
                         | {"p_value": sig.global_p_value(curve, null), "p_value_local": p_local,
                            "above_threshold": bool(c["S"] > th.whole_range[i])})
        cands.sort(key=lambda c: (not c["above_threshold"], c["p_value"], -c["S"]))
        cands = cands[:N_CANDIDATES]
        if is_detected or amin is None:
            bounds = None
        else:
            bounds = bound_summary(amin, cosmo, p_max=int(plan.bounds["p_max"]), m_max=int(plan.bounds["m_max"]))
            bounds["families"] = _family_bounds(plan, amin, cosmo)
        maps_out.append({
            "name": spec.name, "source": spec.path or "inline synthetic sky", "detected": is_detected,
            "candidates": cands, "false_alarm": fa, "n_null": n_null,
            "alpha_min_deg": amin, "global_p_value": sig.global_p_value(smax_f, null),
            "s_max": [None if not np.isfinite(v) else float(v) for v in smax],
            "bounds": bounds,
            "predicted": res.get("predicted", []),
            "note": ("circles detected: no bound is derived from this map" if is_detected else
                     ("the efficiency never reaches the level: no alpha_min, no bound" if amin is None else "")),
        })
        extra[spec.name] = {"map_values": res.get("map_values"), "path": spec.path, "nside": res.get("nside")}
    calib = {
        "radii_deg": radii.tolist(), "threshold_whole_range": th.whole_range.tolist(),
        "threshold_local": th.local.tolist(), "local_level": th.local_level, "z_threshold": th.z_threshold,
        "measured_false_alarm": th.measured_false_alarm, "measured_false_alarm_error": th.measured_false_alarm_error,
        "injection_radii_deg": inj_r.tolist(), "efficiency": eff.tolist(), "efficiency_error": eff_err.tolist(),
        "n_injections": n_inj, "efficiency_level": level, "alpha_min_deg": amin,
        "injection_family": plan.significance["injection_family"], "injection": injection_name(plan),
    }
    return {"maps": maps_out, "calibration": calib, "_thresholds": th, "_null": null, "_extra": extra}


def _family_bounds(plan: RunPlan, amin: float, cosmo: Cosmology) -> list[dict]:
    """Per configured family: excluded or not, and the scale / curvature bound."""
    from . import geometry as geo
    from .bounds import bound_summary
    from .spaces import build_space

    out = []
    for fam in plan.bounds["families"]:
        spec = {k: v for k, v in fam.items() if k not in ("position", "orientation")}
        space = build_space(spec, chi_rec_mpc=cosmo.chi_rec_mpc, base_dir=plan.base_dir)
        pos = fam.get("position")
        if pos is None:
            pos = geo.origin(space.geometry)[:3] if space.geometry == "flat" else geo.origin(space.geometry)
        angles = np.radians(np.asarray(fam.get("orientation", [0, 0, 0]), dtype=float))
        obs = geo.Observer.make(space.geometry, pos, geo.euler_zyz(*angles))
        try:
            b = bound_summary(amin, cosmo, space=space, observer=obs, p_max=2, m_max=2)
        except InputError as e:
            out.append({"family": space.family, "params": space.params, "error": str(e)})
            continue
        entry = {"family": space.family, "params": space.params}
        for key in ("configured",):
            if key in b.get("flat", {}):
                entry["flat"] = b["flat"][key]
        for key in ("spherical_configured", "hyperbolic"):
            if b.get(key):
                entry[key] = b[key]
        out.append(entry)
    return out


# ---------------------------------------------------------------------------------------------
# report
# ---------------------------------------------------------------------------------------------
def _json_default(o):
    if isinstance(o, np.generic):
        return o.item()
    if isinstance(o, np.ndarray):
        return o.tolist()
    raise TypeError(type(o).__name__)


def write_report(plan: RunPlan, analysis: dict, provenance: dict, staging: Path) -> dict:
    """Write every report file into ``staging``; returns the summary written as summary.json."""
    from . import report
    from .bounds import bounds_table, write_latex

    if plan.targets:
        return _write_targeted_report(plan, analysis, provenance, staging)
    th, null = analysis["_thresholds"], analysis["_null"]
    radii = plan.radii_deg
    calib = analysis["calibration"]
    figures, tables = {}, {}
    summary = {"maps": analysis["maps"], "calibration": calib, "caution": caution_text(plan), "provenance": provenance}

    t = report.candidates_table(analysis["maps"])
    t.write(staging / "candidates.ecsv", format="ascii.ecsv")
    tables["candidates"] = t
    t = report.thresholds_table(radii, th, null)
    t.write(staging / "thresholds.ecsv", format="ascii.ecsv")
    tables["thresholds"] = t
    t = report.efficiency_table(plan.injection_radii_deg, np.array(calib["efficiency"]), np.array(calib["efficiency_error"]),
                                calib["n_injections"], calib["efficiency_level"])
    t.write(staging / "efficiency.ecsv", format="ascii.ecsv")
    tables["efficiency"] = t

    first_bounds = next((m["bounds"] for m in analysis["maps"] if m["bounds"]), None)
    if first_bounds is not None:
        bt = bounds_table(first_bounds)
        bt.write(staging / "bounds.ecsv", format="ascii.ecsv")
        cap_extra = (f" Circles of radius >= alpha_min = {first_bounds['alpha_min_deg']:.1f} deg are excluded at "
                     f"false-alarm probability {calib_fa(plan)} with detection efficiency >= "
                     f"{calib['efficiency_level']:.0%}, calibrated on {plan.significance['n_null']} isotropic skies.")
        write_latex(bt, first_bounds, staging / "bounds.tex", extra_caption=cap_extra)
        tables["bounds"] = bt
        fig = report.figure_omega_k(staging / "omega_k", first_bounds)
        if fig:
            figures["Omega_K allowed for spherical spaces"] = fig
    else:
        (staging / "bounds.ecsv").write_text("# no bound: every map was detected or the efficiency never reached the level\n")
        (staging / "bounds.tex").write_text("% no bound: every map was detected or the efficiency never reached the level\n")

    for m in analysis["maps"]:
        name = m["name"]
        smax = np.array([np.nan if v is None else v for v in m["s_max"]])
        figures[f"{name}: S_max against radius"] = report.figure_smax(staging / f"smax_{name}", name, radii, smax, th, null)
        fig = _sky_figure(plan, analysis, m, staging)
        if fig:
            figures[f"{name}: sky with best candidate circles"] = fig
    figures["detection efficiency"] = report.figure_efficiency(
        staging / "efficiency", plan.injection_radii_deg, np.array(calib["efficiency"]),
        np.array(calib["efficiency_error"]), calib["efficiency_level"], calib["alpha_min_deg"],
        float(plan.significance["false_alarm"]))

    (staging / "provenance.json").write_text(json.dumps(provenance, indent=1, default=_json_default))
    report.write_index(staging, summary, tables, figures, summary["caution"])
    (staging / "summary.json").write_text(json.dumps(summary, indent=1, default=_json_default, allow_nan=False))
    return summary


def _sky_figure(plan: RunPlan, analysis: dict, m: dict, staging: Path) -> list[str] | None:
    """The map with its best (or above-threshold) candidate circles, or None without a map."""
    from . import report

    name = m["name"]
    values = analysis["_extra"][name]["map_values"]
    if values is None and analysis["_extra"][name]["path"]:
        from .maps import read_healpix

        sk = read_healpix(analysis["_extra"][name]["path"], field=next(s.field for s in plan.maps if s.name == name),
                          ordering=next(s.ordering for s in plan.maps if s.name == name))
        values = np.where(sk.observed, sk.values, np.nan)
    if values is None:
        return None
    shown = _candidate_objects([c for c in m["candidates"] if c["above_threshold"]] or m["candidates"][:1])
    values = np.nan_to_num(np.asarray(values, float), nan=-1.6375e30)
    mk = _mask_map(plan.mask, int(round(np.sqrt(values.size / 12))))
    return report.figure_sky(staging / f"sky_{name}", name, values, shown,
                             title_extra="(detected)" if m["detected"] else "(no detection)",
                             mask=None if mk is None else _regrade_mask(mk, values.size))


def _write_targeted_report(plan: RunPlan, analysis: dict, provenance: dict, staging: Path) -> dict:
    """The report of a targeted run (see :mod:`topology.targeted`): same files, per target."""
    from . import report, targeted

    summary = {"maps": analysis["maps"], "calibration": analysis["calibration"], "caution": caution_text(plan),
               "provenance": provenance}
    outcome, th_t, eff_t = targeted.tables(analysis, plan)
    report.candidates_table(analysis["maps"]).write(staging / "candidates.ecsv", format="ascii.ecsv")
    th_t.write(staging / "thresholds.ecsv", format="ascii.ecsv")
    eff_t.write(staging / "efficiency.ecsv", format="ascii.ecsv")
    outcome.write(staging / "bounds.ecsv", format="ascii.ecsv")
    (staging / "bounds.tex").write_text(targeted.latex(outcome, plan))
    tables = {"targets: detected, excluded or not": outcome, "thresholds per target": th_t,
              "efficiency per target": eff_t, "candidates": report.candidates_table(analysis["maps"])}
    figures = {}
    for m in analysis["maps"]:
        figures[f"{m['name']}: targeted statistic per target"] = targeted.figure_targets(
            staging / f"targets_{m['name']}", m["name"], m, analysis)
        fig = _sky_figure(plan, analysis, m, staging)
        if fig:
            figures[f"{m['name']}: sky with best candidate circles"] = fig
    (staging / "provenance.json").write_text(json.dumps(provenance, indent=1, default=_json_default))
    report.write_index(staging, summary, tables, figures, summary["caution"])
    (staging / "summary.json").write_text(json.dumps(summary, indent=1, default=_json_default, allow_nan=False))
    return summary


def injection_name(plan: RunPlan) -> str:
    from .injection import describe

    return describe(plan.significance["injection_family"])


def calib_fa(plan: RunPlan) -> str:
    return f"{float(plan.significance['false_alarm']):g}"


def caution_text(plan: RunPlan) -> str:
    if plan.targets:
        from .targeted import target_name

        text = CAUTION.format(n_null=plan.significance["n_null"], terms="+".join(plan.instrument["terms"]).upper(),
                              false_alarm=calib_fa(plan), injection="target-space",
                              level=float(plan.significance["efficiency_level"]))
        return text.replace("over the whole radius range", "over all targets").replace(
            "alpha_min is where the recovery of injected target-space circles reaches",
            "a target is excluded when it is not detected and skies of that very space are recovered at") + (
            " Targets tested: " + "; ".join(target_name(t) for t in plan.targets) + ". An exclusion holds for "
            "these spaces at these sizes and observer positions only.")
    return CAUTION.format(n_null=plan.significance["n_null"], terms="+".join(plan.instrument["terms"]).upper(),
                          false_alarm=calib_fa(plan), injection=injection_name(plan),
                          level=float(plan.significance["efficiency_level"]))


def _versions() -> dict:
    import importlib.metadata as md

    out = {"topology": __version__, "python": platform.python_version()}
    for pkg in ("numpy", "scipy", "healpy", "astropy", "matplotlib", "camb", "dask", "distributed"):
        try:
            out[pkg] = md.version(pkg)
        except md.PackageNotFoundError:
            out[pkg] = None
    return out


def run(plan: RunPlan, *, force: bool = False, resume: bool = False, show_progress: bool | None = None,
        store=None) -> dict:
    """Execute a validated plan end to end; returns the summary (also written to the folder).
    The output folder is claimed and locked for the whole run (:mod:`topology.run_folder`)."""
    if store is not None:
        return _run_in(plan, None, store, show_progress)
    from . import run_folder

    protected = list(plan.inputs) + ([plan.config_path] if plan.config_path else [])
    folder = run_folder.claim(plan.out_dir, force=force, resume=resume, inputs=protected)
    try:
        try:
            store = TaskStore(folder.path / "store", plan.config_hash, resume=resume, inputs=plan.inputs)
        except BaseException:
            folder.discard()
            raise
        return _run_in(plan, folder, store, show_progress)
    finally:
        folder.release()


def _run_in(plan: RunPlan, folder, store, show_progress) -> dict:
    timings = {}
    t0 = time.perf_counter()
    tasks = build_tasks(plan)
    ex = plan.execution
    try:
        engine = make_engine(ex["engine"], ex["workers"], ex["scheduler"])
        try:
            counts = run_tasks(tasks, store, engine, show_progress)
        finally:
            engine.close()
    except BaseException:
        # a run that stops before finishing any task leaves nothing behind; otherwise the store
        # of finished tasks stays for --resume
        if folder is not None and not store.finished():
            folder.discard()
        raise
    timings["tasks_s"] = counts["elapsed_s"]
    t1 = time.perf_counter()
    analysis = analyse(plan, store)
    timings["analysis_s"] = time.perf_counter() - t1
    provenance = {
        "config": plan.sections, "config_hash": plan.config_hash, "versions": _versions(),
        "run_seed": plan.significance["seed"],
        "task_seeds": "numpy SeedSequence(entropy=run seed, spawn_key=sha256(task id)[:16] as 4 uint32)",
        "tasks": {"total": len(tasks), "computed": counts["computed"], "reused_from_store": counts["reused"]},
        "engine": {k: v for k, v in ex.items() if v is not None},
        "inputs_sha256": plan.inputs,
        "timings_s": timings,
    }
    if isinstance(store, MemoryStore):
        return {"maps": analysis["maps"], "calibration": analysis["calibration"], "provenance": provenance,
                "_analysis": analysis}
    out_dir = folder.path
    staging = out_dir / f".report-{os.getpid()}"
    if staging.exists():
        shutil.rmtree(staging)
    try:
        staging.mkdir()
    except OSError as e:
        raise InputError(f"cannot write the report ({e.strerror or e})", str(plan.out_dir)) from None
    try:
        t2 = time.perf_counter()
        timings["report_s"] = 0.0
        summary = write_report(plan, analysis, provenance, staging)
        timings["report_s"] = time.perf_counter() - t2
        timings["total_s"] = time.perf_counter() - t0
        (staging / "provenance.json").write_text(json.dumps(provenance, indent=1, default=_json_default))
        summary["provenance"] = provenance
        (staging / "summary.json").write_text(json.dumps(summary, indent=1, default=_json_default, allow_nan=False))
        # move into place: summary.json last, so a folder with summary.json is a whole report
        (out_dir / "summary.json").unlink(missing_ok=True)
        names = sorted(os.listdir(staging), key=lambda n: n == "summary.json")
        for n in names:
            os.replace(staging / n, out_dir / n)
    except OSError as e:  # disk full, quota, permissions: the store of finished tasks stays valid
        raise InputError(f"cannot write the report ({e.strerror or e}); the finished tasks are kept in the store: "
                         "free space, then rerun with --resume", str(plan.out_dir)) from None
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return summary
