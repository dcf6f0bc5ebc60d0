"""The tasks of a run: module-level functions of plain arguments (they run in worker processes),
each taking the whole :class:`~topology.run.plan.RunPlan`.

* ``data/<name>``: search one data map (a FITS file or an inline synthetic sky);
* ``null/<i>``: an isotropic sky with the data's spectrum, beam, noise and mask, searched alike;
* ``inj/<family>/<radius>/<j>`` (radius scan; ``<family>`` is
  :func:`topology.injection.family_key`, the family and a digest of its spec, so a resumed run
  never mixes the skies of two families) or ``inj/target<k>/<j>`` (targeted run): a sky of a
  multiply connected space, observed and searched alike.

In a run of field E or T+E the null and injected skies are polarised (I, Q, U; made by
:func:`topology.run.polarised.simulate_polarised`) and searched in that field, E made from Q, U
as for the data (:func:`polarised_input_of`).

Task ids are made only by the functions below; every random draw of a task comes from the run
seed and its id (:func:`topology.execution.task_seed`), so results do not depend on the engine.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from ..config import Config, config_from_dict
from ..errors import InputError
from ..execution import task_seed

_MASKS: dict = {}


def data_id(name: str) -> str:
    return f"data/{name}"


def null_id(index: int) -> str:
    return f"null/{index:05d}"


def injection_id(family: str, radius_deg: float, index: int) -> str:
    """Id of injected sky ``index`` of family ``family`` (:func:`topology.injection.family_key`)."""
    return f"inj/{family}/{radius_deg:g}/{index:04d}"


def target_injection_id(target: int, index: int) -> str:
    return f"inj/target{target}/{index:04d}"


def int_seed(run_seed: int, task_id: str) -> int:
    """A 32-bit integer seed for task ``task_id`` (from :func:`topology.execution.task_seed`)."""
    return int(task_seed(run_seed, task_id).generate_state(1, dtype=np.uint32)[0])


def run_mask(mask: dict, nside: int):
    """The run's mask as a SkyMap (cached per process), or None."""
    from ..maps import as_skymap, read_healpix

    key = (json.dumps(mask, sort_keys=True, default=str), nside)
    if key not in _MASKS:
        if "path" in mask:
            m = read_healpix(mask["path"], ordering=mask.get("ordering"), what="mask",
                             ordering_from="ordering in [mask]")
        elif mask.get("galactic_b_deg") is not None:
            from ..skies.instrument import galactic_mask

            m = as_skymap(galactic_mask(nside, float(mask["galactic_b_deg"])), source="galactic mask")
        else:
            m = None
        if m is not None:
            kept = float(np.mean((np.where(m.observed, m.values, 0.0)) >= 0.5))
            if kept < float(mask["min_sky_fraction"]):
                raise InputError(f"the mask keeps {kept:.1%} of the sky, less than min_sky_fraction = "
                                 f"{mask['min_sky_fraction']}", mask.get("path", "[mask]"))
        _MASKS[key] = m
    return _MASKS[key]


def mask_at(mask_map, npix: int) -> np.ndarray:
    """Mask weights regraded to the N_side of a map of ``npix`` pixels."""
    from ..maps import regrade_weights

    w = np.where(mask_map.observed, mask_map.values, 0.0)
    return regrade_weights(w, int(round(np.sqrt(npix / 12))))


def search_settings(plan):
    from ..search.engine import SearchSettings

    return SearchSettings(**{k: (tuple(v) if isinstance(v, list) else v) for k, v in plan.search.items()})


def search_values(values, plan, source: str, scenario=None, radii_deg=None, polarised=None) -> dict:
    """Search a map (a SkyMap or a RING array) with the run's settings and mask; ``radii_deg``
    (default: the run's radii) restricts the scan; ``polarised``: the E input of a run of field
    E or T+E (:func:`polarised_input_of`)."""
    import dataclasses

    from ..maps import as_skymap
    from ..search.engine import search_sky

    sky = values if hasattr(values, "observed") else as_skymap(values, source=source)
    mask = run_mask(plan.mask, sky.nside)
    settings = search_settings(plan)
    if radii_deg is not None:
        settings = dataclasses.replace(settings, radii_deg=tuple(float(r) for r in radii_deg))
    return search_sky(sky, mask, settings, scenario=scenario, show_progress=False, map_name=source,
                      polarised=polarised)


def polarised_input_of(plan, iqu, source: str):
    """(temperature SkyMap, PolarisedInput) of simulated (I, Q, U) RING maps in the HEALPix
    convention: E made as for a data map (:func:`topology.maps.emode.emode_sky`, the run's mask,
    ``[search] pol_apod_deg``)."""
    from ..maps import PolarisedMap, as_skymap
    from ..maps.emode import emode_sky
    from ..search.polarised import PolarisedInput

    i, q, u = (as_skymap(np.asarray(x), source=source) for x in iqu)
    settings = search_settings(plan)
    e, e_mask = emode_sky(PolarisedMap(i, q, u, ("I", "Q", "U"), "healpix"), run_mask(plan.mask, i.nside),
                          nside_work=settings.nside_work, apod_deg=settings.pol_apod_deg,
                          threshold=settings.mask_threshold)
    return i, PolarisedInput(plan.pol_field, e, e_mask, {"convention": "healpix", "columns": ["I", "Q", "U"],
                                                          "apod_deg": float(settings.pol_apod_deg),
                                                          "pol_mask": None, "nside_e": int(e.nside)})


def radii_near(plan, radius_deg: float) -> np.ndarray:
    """Mask of the run's radii within ``radius_tolerance_deg`` of ``radius_deg``: where an injected
    circle of that nominal radius counts as found."""
    tolerance = float(plan.significance["radius_tolerance_deg"])
    return np.abs(plan.radii_deg - radius_deg) <= tolerance + 1e-9


def smax_by_radius(result: dict, radii: np.ndarray) -> np.ndarray:
    """Largest S over orientations at each searched radius (-inf where nothing was evaluated)."""
    out = np.full(len(radii), -np.inf)
    for e in result["s_max"]:
        i = int(np.argmin(np.abs(radii - e["radius_deg"])))
        if e["S_max"] is not None and np.isfinite(e["S_max"]):
            out[i] = max(out[i], float(e["S_max"]))
    return out


def smax_by_field(result: dict, radii: np.ndarray) -> dict | None:
    """{"T": ..., "E": ...}: each map's own S_max per searched radius of a T + E search
    (``polarisation.s_max_by_field``; -inf where nothing was evaluated), None for other searches."""
    records = (result.get("polarisation") or {}).get("s_max_by_field")
    if not records:
        return None
    out = {}
    for f in ("T", "E"):
        v = np.full(len(radii), -np.inf)
        for rec in records:
            if rec and rec.get(f) is not None and np.isfinite(rec[f]):
                i = int(np.argmin(np.abs(radii - float(rec["radius_deg"]))))
                v[i] = max(v[i], float(rec[f]))
        out[f] = v
    return out


def run_cosmology(plan):
    from ..scenario import cosmology_from_config

    return cosmology_from_config(config_from_dict({"cosmology": plan.sections.get("cosmology", {})}))


def simulate(plan, space, observer, cosmology, seed: int) -> np.ndarray:
    """An observed simulated sky (RING, N_side ``plan.sim_nside``, l_max ``plan.sim_lmax``) with
    the run's temperature terms, beam and white noise: isotropic when ``space`` is None, else
    the sky of ``space`` seen by ``observer``. One maker for null, injected and target skies."""
    from ..skies.instrument import observe

    nside, lmax = plan.sim_nside, plan.sim_lmax
    inst = plan.instrument
    terms = tuple(inst["terms"])
    if space is None:
        from ..skies.isotropic import isotropic_sky

        sky = isotropic_sky(cosmology, lmax=lmax, terms=terms, seed=seed)
    elif space.geometry == "flat":
        from ..skies.flat import flat_sky

        sky = flat_sky(space, observer, cosmology, lmax=lmax, nside=nside, method="auto", terms=terms, seed=seed)
    elif space.geometry == "spherical":
        from ..skies.spherical import spherical_sky

        sky = spherical_sky(space, observer, cosmology, lmax=lmax, nside=nside, terms=terms, seed=seed)
    else:
        raise InputError(f"no synthetic skies for {space.geometry} spaces yet", "[space] family")
    return observe(sky, nside=nside, lmax=lmax, fwhm_deg=inst["fwhm_deg"], noise_uk=inst["noise_uk"], seed=seed)


def null_map(plan, task_id: str) -> tuple[np.ndarray, int]:
    """The observed isotropic sky of null task ``task_id`` and its seed."""
    seed = int_seed(plan.significance["seed"], task_id)
    return simulate(plan, None, None, run_cosmology(plan), seed), seed


def read_or_make_map(plan, name: str):
    """The data map ``name``: (SkyMap read from its file, or RING array of its inline sky,
    source name, N_side, extra result fields of an inline sky)."""
    spec = next(m for m in plan.maps if m.name == name)
    if spec.path:
        from ..maps import read_healpix

        sky = read_healpix(spec.path, field=spec.field, ordering=spec.ordering, what="map")
        return sky, spec.path, int(sky.nside), {}
    from ..bandlimit import default_lmax
    from ..skies import synthesize

    inline = spec.inline
    inst = plan.instrument
    nside = int(inst["nside"] or 64)
    lmax = int(inst["lmax"] or default_lmax(nside))
    own = inline.get("sky", {})
    if "nside" in own and "lmax" not in own and not inst["lmax"]:
        lmax = default_lmax(own["nside"])
    sky_section = {"nside": nside, "lmax": lmax, "fwhm_deg": inst["fwhm_deg"], "noise_uk": inst["noise_uk"],
                   "terms": list(inst["terms"]), **own}
    sections = {k: v for k, v in plan.sections.items() if k == "cosmology"}
    sections.update({"space": inline["space"], "observer": inline.get("observer", {}), "sky": sky_section})
    cfg = config_from_dict(sections, f"map {name}")
    synth = synthesize(Config(cfg.sections, Path(plan.base_dir) / "inline.toml"))
    extra = {"predicted": [p.as_dict() for p in synth.pairs], "map_values": synth.map.astype(np.float32)}
    return synth.map, f"inline sky {name}", nside, extra


def task_data(plan, name: str) -> dict:
    """Search one data map of a radius scan; returns the search result (JSON-able)."""
    if plan.pol_field:
        from ..search.polarised import polarised_input

        spec = next(m for m in plan.maps if m.name == name)
        sky, pol = polarised_input(spec.path, plan.pol_field, search_settings(plan),
                                   mask=run_mask(plan.mask, int(spec.nside)), convention=spec.pol_convention,
                                   convention_from="pol_convention in [[maps]]")
        res = search_values(sky, plan, spec.path, polarised=pol)
        res["nside"] = int(sky.nside)
        return res
    values, source, nside, extra = read_or_make_map(plan, name)
    res = search_values(values, plan, source)
    res["nside"] = nside
    res.update(extra)
    return res


def task_null(plan, task_id: str) -> dict:
    from .spectra_check import sky_power

    if plan.pol_field:  # a polarised isotropic sky, searched in E or T+E as the maps are
        seed = int_seed(plan.significance["seed"], task_id)
        from .polarised import simulate_polarised

        m, pol = polarised_input_of(plan, simulate_polarised(plan, None, None, run_cosmology(plan), seed), task_id)
        res = search_values(m, plan, task_id, polarised=pol)
        return {"s_max": smax_by_radius(res, plan.radii_deg), "seed": seed, "elapsed_s": res["elapsed_s"],
                "cl": sky_power(m.values, plan.sim_lmax), "s_max_fields": smax_by_field(res, plan.radii_deg)}
    m, seed = null_map(plan, task_id)
    res = search_values(m, plan, task_id)
    return {"s_max": smax_by_radius(res, plan.radii_deg), "seed": seed, "elapsed_s": res["elapsed_s"],
            "cl": sky_power(m, plan.sim_lmax)}


def task_injection(plan, family: int, radius_deg: float, task_id: str) -> dict:
    """One injected sky (:mod:`topology.injection`): injected family number ``family`` scaled so that its
    largest circles have a radius drawn uniformly within half a search step of the nominal one
    (so the efficiency covers circles between the grid radii too), observed and searched."""
    from .. import injection
    from .spectra_check import sky_power

    seed = int_seed(plan.significance["seed"], task_id)
    rng = np.random.default_rng(task_seed(plan.significance["seed"], task_id + "/geometry"))
    half = 0.5 * plan.radius_step_deg
    radius_true = float(np.clip(radius_deg + rng.uniform(-half, half), 0.5, 89.5))
    space, observer, cosmo_inj = injection.scaled(plan.significance["injection_families"][family], radius_true, rng,
                                                  run_cosmology(plan))
    if plan.pol_field:  # a polarised sky of the flat space, searched in E or T+E as the maps are
        from .polarised import simulate_polarised

        m, pol = polarised_input_of(plan, simulate_polarised(plan, space, observer, cosmo_inj, seed), task_id)
    else:
        m, pol = simulate(plan, space, observer, cosmo_inj, seed), None
    # only the radii where it counts as found are searched (each radius is searched on its own, so
    # S_max there is what a scan of every radius gives); the others stay -inf
    near = plan.radii_deg[radii_near(plan, radius_deg)]
    res = (search_values(m, plan, task_id, radii_deg=near, polarised=pol) if near.size
           else {"s_max": [], "elapsed_s": 0.0})
    return {"s_max": smax_by_radius(res, plan.radii_deg), "radius_deg": float(radius_deg),
            "radius_true_deg": radius_true, "seed": seed, "elapsed_s": res["elapsed_s"],
            "omega_k": float(cosmo_inj.omega_k), "cl": sky_power(getattr(m, "values", m), plan.sim_lmax),
            "s_max_fields": smax_by_field(res, plan.radii_deg)}
