"""The search job: settings, validation, and the mode's tasks run through the task runner of
``topology run`` (:func:`topology.execution.run_tasks`) with a store of the store protocol.

``search_sky(sky, mask, settings)`` is the Python entry point (``SkyMap`` objects from
:mod:`topology.maps`); ``search_files(map_path, mask_path, settings)`` reads the files first and
keeps a checkpoint (:func:`file_checkpoint`, a :class:`topology.store.FileStore`) so that an
interrupted search resumes. Both return the JSON-able result of ``topology search --json``.
"""

from __future__ import annotations

import time
from dataclasses import asdict, dataclass, fields
from pathlib import Path

import numpy as np

from ..config import SCHEMA
from ..errors import InputError
from ..execution import SerialEngine, Task, run_tasks
from ..store import FILE_STORE_VERSION, FileStore, MemoryStore, file_digest, fingerprint
from .context import SearchContext
from .modes import AllPairsMode, AntipodalMode, TargetedMode

MODES = {"antipodal": AntipodalMode, "all-pairs": AllPairsMode, "targeted": TargetedMode}


def _default(key: str):
    """The default of a ``[search]`` key: :data:`topology.config.SCHEMA` is the one source of
    the search's keys, defaults and help."""
    return SCHEMA["search"][key].default


def parse_radii(text: str) -> tuple:
    """'START:STOP:STEP' (degrees, both ends included) or a single value -> tuple of floats."""
    where = "--radii"
    try:
        parts = [float(p) for p in str(text).split(":")]
    except ValueError:
        raise InputError(f"expected START:STOP:STEP in degrees, got {text!r}", where) from None
    if len(parts) == 1:
        return (parts[0],)
    if len(parts) != 3:
        raise InputError(f"expected START:STOP:STEP in degrees, got {text!r}", where)
    a, b, step = parts
    if not step > 0 or b < a:
        raise InputError(f"needs START <= STOP and STEP > 0, got {text!r}", where)
    n = int(np.floor((b - a) / step + 1e-9)) + 1
    return tuple(float(round(a + i * step, 10)) for i in range(n))


@dataclass
class SearchSettings:
    """Every setting of a search (degrees at this edge); each default and its meaning is the
    ``[search]`` schema's (``topology keys``). They suit a first look at a Planck-like map: a
    1 deg beam on an N_side 128 working map, m <= 64, radii 5-90 deg."""

    mode: str = _default("mode")
    radii_deg: tuple = parse_radii(_default("radii"))
    fwhm_deg: float = _default("fwhm_deg")
    nside_work: int = _default("nside_work")
    m_max: int = _default("m_max")
    n_phi: int | None = _default("n_phi")
    centre_nside: int = _default("centre_nside")
    level_smoothing: float = _default("level_smoothing")
    n_keep: int = _default("n_keep")
    n_pool: int = _default("n_pool")
    n_partners: int = _default("n_partners")
    n_report: int = _default("n_report")
    n_candidates: int = _default("n_candidates")
    min_kept: float = _default("min_kept")
    min_overlap: float = _default("min_overlap")
    min_separation_deg: float = _default("min_separation_deg")
    twist_oversample: float = _default("twist_oversample")
    power_fraction: float = _default("power_fraction")
    kernel_mem_mb: int = _default("kernel_mem_mb")
    l_range: tuple | None = _default("l_range")
    l_weights: tuple | None = _default("l_weights")
    mask_threshold: float = _default("mask_threshold")
    ordering: str | None = _default("ordering")
    orientation_nside: int = _default("orientation_nside")
    positions: tuple | None = _default("positions")
    rho_t: float = _default("rho_t")
    rho_e: float = _default("rho_e")
    pol_apod_deg: float = _default("pol_apod_deg")

    def as_dict(self) -> dict:
        d = asdict(self)
        d["radii_deg"] = [float(r) for r in self.radii_deg]
        return d


def validate(s: SearchSettings) -> SearchSettings:
    """One-line InputErrors naming the setting (before any work)."""
    import healpy as hp

    if s.mode not in MODES:
        raise InputError(f"must be one of {', '.join(MODES)}, got {s.mode!r}", "--mode")
    r = np.asarray(s.radii_deg, dtype=float)
    if r.size == 0 or not np.all(np.isfinite(r)) or r.min() <= 0 or r.max() > 90:
        raise InputError(f"radii must lie in (0, 90] degrees, got {r.min() if r.size else '[]'} .. "
                         f"{r.max() if r.size else ''}", "--radii")
    for name, v in (("nside_work", s.nside_work), ("centre_nside", s.centre_nside),
                    ("orientation_nside", s.orientation_nside)):
        if int(v) < 1 or (int(v) & (int(v) - 1)):
            raise InputError(f"must be a power of two, got {v}", f"[search] {name}")
    lmax_work = 3 * s.nside_work - 1
    if s.m_max < 1:
        raise InputError(f"must be at least 1, got {s.m_max}", "--m-max")
    if s.m_max > lmax_work:
        raise InputError(f"m_max = {s.m_max} is above what N_side {s.nside_work} supports "
                         f"(a band-limited map has |m| <= l <= 3 N_side - 1 = {lmax_work} on any circle)",
                         "--m-max")
    if s.n_phi is not None and s.n_phi < 2 * s.m_max + 1:
        raise InputError(f"needs N_phi >= 2 m_max + 1 = {2 * s.m_max + 1}, got {s.n_phi}", "[search] n_phi")
    if s.centre_nside > s.nside_work:
        raise InputError(f"centre grid N_side {s.centre_nside} is finer than the working map "
                         f"(N_side {s.nside_work})", "[search] centre_nside")
    if s.orientation_nside > s.nside_work:
        raise InputError(f"orientation grid N_side {s.orientation_nside} is finer than the working map",
                         "[search] orientation_nside")
    if not s.fwhm_deg >= 0:
        raise InputError(f"must be >= 0 degrees, got {s.fwhm_deg}", "--fwhm")
    if s.fwhm_deg > 0 and np.radians(s.fwhm_deg) < 0.5 * hp.nside2resol(s.nside_work):
        pass  # allowed: the interpolation error then grows (documented in sampling)
    for name in ("min_kept", "min_overlap", "mask_threshold", "power_fraction"):
        v = getattr(s, name)
        if not 0 < v <= 1:
            raise InputError(f"must lie in (0, 1], got {v}", f"[search] {name}")
    for name in ("n_keep", "n_pool", "n_partners", "n_report", "n_candidates", "kernel_mem_mb"):
        if int(getattr(s, name)) < 1:
            raise InputError(f"must be at least 1, got {getattr(s, name)}", f"[search] {name}")
    if s.twist_oversample < 1:
        raise InputError(f"must be >= 1, got {s.twist_oversample}", "[search] twist_oversample")
    for name in ("rho_t", "rho_e"):
        if not 0 <= getattr(s, name) <= 1:
            raise InputError(f"must lie in [0, 1], got {getattr(s, name)}", f"[search] {name}")
    if s.rho_t + s.rho_e <= 0:
        raise InputError("rho_t and rho_e are both 0: the T+E weights would all be 0", "[search] rho_e")
    if not 0 <= s.pol_apod_deg <= 30:
        raise InputError(f"must lie in [0, 30] degrees, got {s.pol_apod_deg}", "[search] pol_apod_deg")
    if not 0 <= s.min_separation_deg < 180:
        raise InputError(f"must lie in [0, 180), got {s.min_separation_deg}", "[search] min_separation_deg")
    return s


def task_id(key) -> str:
    """The store's name of a task key: ``repr`` of a radius (a float, exact and stable), the index
    of an observer position (targeted)."""
    return repr(float(key)) if isinstance(key, float) else str(int(key))


def search_sky(sky, mask=None, settings: SearchSettings | None = None, *, scenario=None, store=None,
               show_progress: bool | None = False, map_name: str = "", polarised=None) -> dict:
    """Prepare the map, run the mode's tasks that ``store`` (default a fresh
    :class:`~topology.store.MemoryStore`) has not finished, serially, storing each result as it
    finishes, and summarise. The store stays with the caller (:func:`search_read` discards its
    file checkpoint once the search is complete).

    ``polarised``: a :class:`topology.search.polarised.PolarisedInput` (from
    :func:`polarised_input`): field "E" searches its E map and mask instead of ``sky``, "T+E"
    both with the combined statistic (:mod:`topology.search.polarised`); ``sky`` and ``mask`` are
    then the temperature map (I) and its mask."""
    from ..maps import prepare_map
    from .polarised import CombinedContext, combined_mode

    t0 = time.perf_counter()
    s = validate(settings or SearchSettings())
    if s.mode == "targeted" and scenario is None:
        raise InputError("the targeted search needs a config with [space] (and [cosmology], [observer])", "--config")
    field = polarised.field if polarised is not None else None

    def prepare(m, k):
        return prepare_map(m, k, nside_work=s.nside_work, fwhm_deg=s.fwhm_deg, l_range=s.l_range,
                           l_weights=s.l_weights, mask_threshold=s.mask_threshold)

    if field == "E":
        prepared = prepare(polarised.e, polarised.e_mask)
    else:
        prepared = prepare(sky, mask)
    ctx = SearchContext(prepared, s, scenario)
    mode = MODES[s.mode]()
    if field == "T+E":
        ctx = CombinedContext(ctx, SearchContext(prepare(polarised.e, polarised.e_mask), s, scenario), s.rho_t, s.rho_e)
        mode = combined_mode(s.mode)
    keys = mode.tasks(ctx)
    store = store if store is not None else MemoryStore()
    tasks = [Task(id=task_id(k), fn=mode.run_task, kwargs={"ctx": ctx, "key": k}) for k in keys]
    run_tasks(tasks, store, SerialEngine(), show_progress, label=f"topology search ({s.mode})")
    results = {k: store.get(t.id) for k, t in zip(keys, tasks)}
    summary = mode.summarise(ctx, results)
    pol_info = None
    if polarised is not None:
        pol_info = {**polarised.info, "field": field, "e_kept_fraction_work": float(
            (ctx.e if field == "T+E" else ctx).prepared.kept_fraction)}
        if field == "T+E":
            pol_info["weights"] = summary.pop("weights")
            if "fields_s_max" in summary:  # each map's own S_max per radius (radius scan)
                pol_info["s_max_by_field"] = summary.pop("fields_s_max")
    out = {
        "map": map_name or getattr(sky, "source", ""),
        "field": field if field is not None else sky.header.get("COLUMN"),
        "polarisation": pol_info,
        "settings": s.as_dict(),
        **summary,
        "map_info": {"nside_in": int(sky.nside), "nside_work": int(prepared.nside), "lmax": int(prepared.lmax),
                     "kept_fraction_work": float(prepared.kept_fraction),
                     "monopole_dipole_removed": [float(v) for v in prepared.monopole_dipole]},
        "levels": [r.get("levels", []) for r in list(results.values())[:1]][0] if results else [],
        "elapsed_s": float(time.perf_counter() - t0),
    }
    return out


def search_fingerprint(settings: dict, inputs: dict) -> str:
    """Short fingerprint of the settings and the inputs ({role: content digest, ...}) and of the
    checkpoint's layout (:data:`topology.store.FILE_STORE_VERSION`)."""
    return fingerprint({"settings": settings, "inputs": inputs, "version": FILE_STORE_VERSION})[:16]


def file_checkpoint(map_path, mask_path, settings: SearchSettings, *, scenario=None, column: str | None = None,
                    resume: bool = False, checkpoint_path=None, extra: dict | None = None) -> FileStore:
    """The checkpoint of a search of files, ``.topology-search-<fingerprint>.json`` in the current
    folder unless ``checkpoint_path`` is given: keyed by a fingerprint of the settings, the
    content of the map and mask files (not their names), the map column read and the scenario,
    so a resume never mixes radii of another input."""
    ident = {}
    for name, p in (("map", map_path), ("mask", mask_path)):
        if p:
            ident[name] = file_digest(p)
    if column is not None:
        ident["field"] = column
    ident.update(extra or {})
    if scenario is not None:
        ident["scenario"] = repr((scenario.space.describe(), scenario.chi, scenario.observer.point.tolist()))
    fp = search_fingerprint(settings.as_dict(), ident)
    path = Path(checkpoint_path) if checkpoint_path else Path(f".topology-search-{fp}.json")
    return FileStore(path, fp, resume=resume)


def search_files(map_path, mask_path=None, settings: SearchSettings | None = None, *, field=None, scenario=None,
                 resume: bool = False, show_progress: bool | None = None, checkpoint_path=None,
                 convention: str | None = None, pol_mask_path=None) -> dict:
    """Read map (column ``field``: index or name, default the first; "E" or "T+E": the E map of
    the file's Q, U, or T and E combined, :mod:`topology.search.polarised`, with the Q/U
    ``convention`` "healpix" or "iau" unless the header's POLCCONV says it, and the polarisation
    mask ``pol_mask_path``, default the mask) and mask, then :func:`search_sky` with a file
    checkpoint after every task (:func:`file_checkpoint`)."""
    from ..maps import read_healpix
    from .polarised import polarised_field, polarised_input

    s = validate(settings or SearchSettings())
    mask = read_healpix(mask_path, ordering=s.ordering, what="mask") if mask_path else None
    pol = None
    if polarised_field(field):
        pol_mask = read_healpix(pol_mask_path, ordering=s.ordering, what="mask") if pol_mask_path else None
        sky, pol = polarised_input(map_path, field, s, mask=mask, pol_mask=pol_mask, convention=convention,
                                   pol_mask_name=str(pol_mask_path) if pol_mask_path else None)
    else:
        if convention is not None or pol_mask_path is not None:
            raise InputError("a Q/U convention or polarisation mask needs field 'E' or 'T+E'", "field")
        sky = read_healpix(map_path, field=field, ordering=s.ordering, what="map")
    return search_read(sky, mask, map_path, mask_path, s, field=field, scenario=scenario, resume=resume,
                       show_progress=show_progress, checkpoint_path=checkpoint_path, polarised=pol,
                       pol_mask_path=pol_mask_path)


def search_read(sky, mask, map_path, mask_path, settings: SearchSettings, *, field=None, scenario=None,
                resume: bool = False, show_progress: bool | None = None, checkpoint_path=None, polarised=None,
                pol_mask_path=None) -> dict:
    """:func:`search_sky` on maps already read from ``map_path`` (column ``field``) and
    ``mask_path``, with their file checkpoint (``polarised``: :func:`search_sky`'s, whose
    polarisation mask was read from ``pol_mask_path``)."""
    column = sky.header.get("COLUMN") if field is not None else None
    extra = {}
    if polarised is not None:
        column = polarised.field
        extra = {"convention": polarised.info.get("convention"), "columns": list(polarised.info.get("columns", []))}
        if pol_mask_path:
            extra["pol_mask"] = file_digest(pol_mask_path)
    store = file_checkpoint(map_path, mask_path, settings, scenario=scenario, column=column, resume=resume,
                            checkpoint_path=checkpoint_path, extra=extra)
    out = search_sky(sky, mask, settings, scenario=scenario, store=store, show_progress=show_progress,
                     map_name=str(map_path), polarised=polarised)
    store.discard()  # complete: nothing to resume
    return out


def settings_from(section: dict | None = None, **overrides) -> SearchSettings:
    """SearchSettings from a config's [search] section, then explicit overrides (None = unset)."""
    kw = {}
    names = {f.name for f in fields(SearchSettings)}
    for src in (section or {}), overrides:
        for k, v in src.items():
            if v is None:
                continue
            key = {"radii": "radii_deg", "fwhm": "fwhm_deg"}.get(k, k)
            if key not in names:
                raise InputError("unknown search setting", f"[search] {k}")
            kw[key] = v
    if "radii_deg" in kw and isinstance(kw["radii_deg"], str):
        kw["radii_deg"] = parse_radii(kw["radii_deg"])
    elif "radii_deg" in kw:
        r = list(kw["radii_deg"])
        kw["radii_deg"] = tuple(float(v) for v in r)
    for k in ("l_range", "l_weights", "positions"):
        if k in kw and kw[k] is not None and not isinstance(kw[k], tuple):
            kw[k] = tuple(kw[k])
    return SearchSettings(**kw)
