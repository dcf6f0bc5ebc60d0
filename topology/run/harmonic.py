"""The low-l likelihood bound of a run (``[harmonic]`` in a run config), next to the circle bounds.

For every ``[bounds] families`` entry the likelihood supports (flat families E1-E17, the shape,
observer and orientation as configured; spherical and hyperbolic families are listed as not
computed, with the reason) and every map, a task ``harmonic/<k>/<map>`` computes the
likelihood profile of the map against ``[harmonic] scales`` (the family's lengths and the
observer's position multiplied by each scale, :func:`topology.harmonic.survey.scaled`) and the
lower bound on the scale calibrated on simulated maps
(:func:`topology.harmonic.survey.map_bound`, :func:`topology.harmonic.likelihood.size_bound`).
The scale is the one of the circle bound of the same family (``min_scale_factor``): the shape
is allowed by the circles when scaled by more than it, and every scale <= the likelihood bound
is excluded by the low multipoles.

The map at the harmonic N_side. A map at ``[harmonic] nside`` with ``fwhm_deg`` equal to the
run's ``[instrument] fwhm_deg`` is used as it is. A finer map (or another beam) is degraded in
harmonic space (:func:`degrade`): its unobserved or masked pixels are filled with the mean of
the kept ones, a_lm = map2alm (healpy, 3 iterations) to l = 3 N_h - 1, each multiplied by
f_l = b_l(fwhm_h) p_l(N_h) / (b_l(fwhm_run) p_l(N_run)) (the map is assumed to carry the run's
Gaussian beam and the pixel window of its N_side; common practice), synthesised at N_h. A
pixel of N_h is kept when every one of its sub-pixels is observed and unmasked (weight >= 0.5);
the ringing of the filled pixels into kept ones near the mask edge is not modelled. The run's
white noise sigma_run becomes noise of per-pixel rms sigma_d = [sum_l (2l+1)/(4 pi) f_l^2
sigma_run^2 4 pi / N_pix,run]^1/2 (its correlations neglected); white noise of rms
(noise_uk^2 - sigma_d^2)^1/2 is added (seeded from the run seed and the map's name) so that the
map's noise per pixel is the model's ``[harmonic] noise_uk`` (a noise_uk below sigma_d is
refused before any work). The run's mask, the map's unobserved pixels and ``[harmonic] mask``
are all masked.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from ..errors import InputError
from ..execution import Task, task_seed

WHERE = "[harmonic]"
METHOD = ("harmonic degradation: masked pixels filled with the mean, a_lm to l = 3 N_side - 1 times "
          "b_l p_l(N_side) / (b_l p_l of the map), synthesised at N_side; white noise added to reach noise_uk")
STATISTIC = ("ln L(space) - ln L(isotropic) of the observed pixels (mask, noise, beam, pixel window; monopole and "
             "dipole marginalised; isotropic l > lmax as noise)")


def of(plan) -> dict | None:
    """The plan's checked [harmonic] part (None: no low-l likelihood in this run)."""
    return getattr(plan, "harmonic", None)


def harmonic_id(family: int, name: str) -> str:
    return f"harmonic/{family}/{name}"


def map_nside(plan_maps, instrument: dict) -> dict:
    """{map name: its N_side}: a FITS map's as read, an inline sky's [sky] or [instrument] nside (64)."""
    out = {}
    for m in plan_maps:
        if m.path:
            out[m.name] = int(m.nside)
        else:
            out[m.name] = int((m.inline or {}).get("sky", {}).get("nside", instrument.get("nside") or 64))
    return out


def degraded_noise(noise_uk: float, nside_in: int, window_ratio: np.ndarray) -> float:
    """Per-pixel rms of white noise ``noise_uk`` at ``nside_in`` after the filter f_l (l = 0..L):
    (sum_l (2l+1)/(4 pi) f_l^2 N_l)^1/2, N_l = sigma^2 4 pi / N_pix (common practice)."""
    ell = np.arange(len(window_ratio))
    nl = float(noise_uk) ** 2 * 4.0 * math.pi / (12 * nside_in * nside_in)
    return float(math.sqrt(np.sum((2 * ell + 1) / (4 * math.pi) * window_ratio**2 * nl)))


def window_ratio(settings, fwhm_run: float, nside_in: int) -> np.ndarray:
    """f_l (l = 0..3 N_h - 1) of :func:`degrade` (see the module doc)."""
    from ..bandlimit import lmax_limit
    from ..skies.instrument import beam_window, pixel_window

    top = lmax_limit(settings.nside)
    out = beam_window(float(settings.fwhm_deg), top) * (pixel_window(settings.nside, top) if settings.pixwin else 1.0)
    return out / (beam_window(float(fwhm_run), top) * pixel_window(nside_in, top))


def needs_filter(settings, fwhm_run: float, nside_in: int) -> bool:
    """False when the map is used as it is (same N_side, same beam, pixel window in the model)."""
    return not (nside_in == settings.nside and float(settings.fwhm_deg) == float(fwhm_run) and settings.pixwin)


def check_plan(cfg, maps, instrument: dict, pol_field, spaces: list) -> dict | None:
    """The checked ``[harmonic]`` part of a run plan (None without the section): settings, the
    families (computed or not, why), and per map its N_side, whether it is degraded and the noise
    added; ``spaces``: the [(space, observer)] of [bounds] families (:func:`topology.run.plan.bound_families`).
    One-line InputError before any work."""
    if "harmonic" not in cfg.sections:
        return None
    from ..harmonic.survey import settings_from_config

    s = settings_from_config(cfg)
    if s.nside is None:
        raise InputError("a run's low-l likelihood needs nside (the N_side the maps are degraded to) and noise_uk",
                         f"{WHERE} nside")
    if not s.scales:
        raise InputError("a run's low-l likelihood needs scales (factors of each [bounds] family's lengths)",
                         f"{WHERE} scales")
    if pol_field:
        raise InputError(f"the low-l likelihood is temperature only; the maps are searched in field {pol_field}",
                         WHERE)
    if not cfg.get("bounds", "families"):
        raise InputError("the low-l likelihood bound is computed for each [bounds] families entry: give at least one "
                         "flat family there", f"{WHERE}")
    families = []
    for i, (space, _obs) in enumerate(spaces):
        spec = dict(cfg.get("bounds", "families")[i])
        entry = {"index": i, "family": space.family, "params": dict(space.params), "computed": False, "reason": None}
        if space.geometry != "flat":
            entry["reason"] = (f"not computed: the likelihood of a map is implemented for flat spaces only (a "
                               f"{space.geometry} scale changes the background, and with it the isotropic reference)")
        else:
            lengths = spec.get("lengths", space.params.get("lengths"))
            if lengths is None:
                entry["reason"] = "not computed: the family has no lengths to scale"
            else:
                entry["computed"] = True
                entry["space"] = {k: v for k, v in spec.items() if k not in ("position", "orientation")} | {
                    "lengths": list(lengths)}
        families.append(entry)
    nsides = map_nside(maps, instrument)
    fwhm_run, noise_run = float(instrument["fwhm_deg"]), float(instrument["noise_uk"])
    per_map = {}
    for name, n in nsides.items():
        if n < s.nside:
            raise InputError(f"map {name!r} has N_side {n}, coarser than [harmonic] nside {s.nside}", f"{WHERE} nside")
        filtered = needs_filter(s, fwhm_run, n)
        if filtered and s.fwhm_deg < fwhm_run:
            raise InputError(f"the maps are degraded from the run's beam of {fwhm_run:g} deg: give fwhm_deg >= "
                             f"{fwhm_run:g} (a narrower beam would amplify the noise)", f"{WHERE} fwhm_deg")
        sigma = degraded_noise(noise_run, n, window_ratio(s, fwhm_run, n)) if filtered else noise_run
        if sigma > s.noise_uk * (1 + 1e-9):
            raise InputError(f"the noise of map {name!r} at N_side {s.nside} is {sigma:.4g} microK per pixel (from "
                             f"[instrument] noise_uk {noise_run:g} at N_side {n}): give noise_uk >= {sigma:.4g}",
                             f"{WHERE} noise_uk")
        per_map[name] = {"nside": n, "degraded": filtered, "map_noise_uk": sigma,
                         "added_noise_uk": math.sqrt(max(s.noise_uk**2 - sigma**2, 0.0))}
    if not any(f["computed"] for f in families):
        from ..errors import note

        note(f"{WHERE}: no [bounds] family is flat: the low-l likelihood bound is not computed (said in the report)")
    return {"settings": dataclasses.asdict(s), "families": families, "maps": per_map}


def settings_of(plan):
    from ..harmonic.survey import HarmonicSettings

    d = dict(of(plan)["settings"])
    d["terms"] = tuple(d["terms"])
    d["scales"] = tuple(d["scales"])
    return HarmonicSettings(**d)


def build_tasks(plan) -> list[Task]:
    if not of(plan):
        return []
    return [Task(harmonic_id(f["index"], m.name), task_harmonic, {"plan": plan, "family": f["index"], "name": m.name})
            for f in of(plan)["families"] if f["computed"] for m in plan.maps]


def degrade(values: np.ndarray, keep: np.ndarray, nside_out: int, ratio: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(values at ``nside_out``, kept pixels there) of a RING map (see the module doc)."""
    import healpy as hp

    nside_in = hp.npix2nside(values.size)
    filled = np.where(keep, values, float(np.mean(values[keep])))
    alm = hp.map2alm(filled, lmax=len(ratio) - 1, iter=3)
    out = hp.alm2map(hp.almxfl(alm, ratio), nside_out, lmax=len(ratio) - 1)
    k = hp.reorder(keep.astype(float), r2n=True).reshape(12 * nside_out**2, (nside_in // nside_out) ** 2)
    kept = hp.reorder(np.all(k > 0.5, axis=1).astype(float), n2r=True) > 0.5
    return out, kept


def harmonic_map(plan, name: str) -> tuple[np.ndarray, np.ndarray]:
    """(values RING at [harmonic] nside, kept pixels) of data map ``name`` (see the module doc)."""
    from . import tasks as T

    s = settings_of(plan)
    values, _source, nside, _extra = T.read_or_make_map(plan, name)
    keep = np.asarray(values.observed, dtype=bool) if hasattr(values, "observed") else np.ones(values.size, bool)
    values = np.asarray(values.values if hasattr(values, "values") else values, dtype=float)
    mask_map = T.run_mask(plan.mask, nside)
    if mask_map is not None:
        keep &= T.mask_at(mask_map, values.size) >= 0.5
    info = of(plan)["maps"][name]
    fwhm_run = float(plan.instrument["fwhm_deg"])
    if info["degraded"]:
        values, keep = degrade(values, keep, s.nside, window_ratio(s, fwhm_run, nside))
    if info["added_noise_uk"] > 0:
        rng = np.random.default_rng(task_seed(plan.significance["seed"], f"harmonic/{name}/noise"))
        values = values + rng.normal(0.0, info["added_noise_uk"], values.size)
    return values, keep


def task_harmonic(plan, family: int, name: str) -> dict:
    """The likelihood profile and bound of map ``name`` for ``[bounds] families`` entry ``family``."""
    import time

    from ..harmonic.covariance import space_covariance
    from ..harmonic.pixels import pixel_space
    from ..harmonic.survey import map_bound, nearest_image, scaled
    from ..skies.spectra import isotropic_cl
    from ..scenario import family_observer
    from ..spaces import build_space

    t0 = time.perf_counter()
    s = settings_of(plan)
    cosmo = plan.cosmology
    entry = of(plan)["families"][family]
    given = plan.bounds["families"][family]           # the observer as plan.bound_families makes it
    observer = family_observer(build_space(entry["space"], chi_rec_mpc=cosmo.chi_rec_mpc), given)
    values, keep = harmonic_map(plan, name)
    if s.mask == "galactic":
        from ..skies.instrument import galactic_mask

        keep = keep & (galactic_mask(s.nside, s.mask_b_deg) > 0)
    if not keep.any():
        raise InputError(f"map {name!r} keeps no pixel at N_side {s.nside}", f"{WHERE} nside")
    extra = isotropic_cl(cosmo, 3 * s.nside - 1, s.terms)
    px = pixel_space(s.nside, s.lmax, noise_uk=s.noise_uk, mask=keep, fwhm_deg=s.fwhm_deg, pixwin=s.pixwin,
                     dipole=True, extra_cl=extra)
    covs, near = [], []
    for scale in s.scales:
        sp, obs = scaled(entry["space"], observer, scale, cosmo)
        covs.append(space_covariance(sp, obs, cosmo, lmax=s.lmax, terms=s.terms, kchi_max=s.kchi_max,
                                     complement=s.complement))
        near.append(nearest_image(sp, obs))
    out = map_bound(s, values, px, covs)
    for r, d in zip(out["rows"], near):
        r["nearest_image"] = d
    out["elapsed_s"] = time.perf_counter() - t0
    return out


def circle_bound(m: dict, family: int) -> tuple[float | None, str]:
    """(min_scale_factor, verdict) of the circle bound of [bounds] family ``family`` on map ``m``."""
    b = m.get("bounds")
    if not b:
        return None, "no circle bound" + (" (circles detected)" if m.get("detected") else " (no alpha_min)")
    fams = b.get("families") or []
    if family >= len(fams) or "flat" not in fams[family]:
        return None, "not tested"
    f = fams[family]["flat"]
    verdict = "not tested" if "excluded" not in f else ("excluded" if f["excluded"] else "allowed")
    return f.get("min_scale_factor"), verdict


def assumptions(plan) -> dict:
    """What the likelihood bounds assume (table meta, summary, caution)."""
    s = settings_of(plan)
    from ..harmonic.rotation import orientation_grid

    return {"statistic": STATISTIC, "orientation": ("maximum" if s.orientation == "max" else "log of the mean")
            + f" over {len(orientation_grid(s.orientation_nside, s.n_psi))} orientations (HEALPix N_side "
            f"{s.orientation_nside} axes x {s.n_psi} turns)", "level": s.level,
            "n_cal": s.n_cal, "calibration": f"{s.n_cal} simulated maps of the space per scale (uniform random "
            f"orientations) give the threshold; {s.n_cal} isotropic maps give the isotropic exclusion rate",
            "lmax": s.lmax, "nside": s.nside, "noise_uk": s.noise_uk, "fwhm_deg": s.fwhm_deg, "pixwin": s.pixwin,
            "mask": ("galactic |b| < %g deg" % s.mask_b_deg if s.mask == "galactic" else "none")
            + " plus the run's mask and unobserved pixels", "terms": "+".join(s.terms).upper(),
            "kchi_max": s.kchi_max, "seed": s.seed,
            "degradation": METHOD if any(v["degraded"] for v in of(plan)["maps"].values()) else "none (maps at "
            "the harmonic N_side and beam, used as they are)"}


def analyse(plan, store, analysis) -> None:
    """Adds ``harmonic`` rows to each map of ``analysis.maps`` (one per [bounds] family) and the
    assumptions to ``analysis.calibration["harmonic"]``."""
    if not of(plan):
        return
    for m in analysis.maps:
        rows = []
        for f in of(plan)["families"]:
            circle, verdict = circle_bound(m, f["index"])
            row = {"family": f["family"], "params": f["params"], "index": f["index"], "circle_min_scale": circle,
                   "circle_verdict": verdict}
            if f["computed"]:
                res = store.get(harmonic_id(f["index"], m["name"]))
                row.update(computed=True, bound_scale=res["bound_scale"], rows=res["rows"], pixels=res["pixels"],
                           n_orientations=res["n_orientations"], mode=res["mode"])
            else:
                row.update(computed=False, bound_scale=None, note=f["reason"])
            rows.append(row)
        m["harmonic"] = rows
    analysis.calibration["harmonic"] = assumptions(plan) | {"maps": of(plan)["maps"]}


def caution(plan) -> str:
    """The sentence of the caution about the low-l likelihood bounds."""
    if not of(plan):
        return ""
    a = assumptions(plan)
    return (f" The low-l likelihood bounds ([harmonic]) use l = 2..{a['lmax']} of the maps at N_side {a['nside']} "
            f"(white noise {a['noise_uk']:g} microK per pixel, beam {a['fwhm_deg']:g} deg; {a['degradation']}); the "
            f"statistic is the likelihood ratio to the isotropic sky, {a['orientation']}, and a scale is excluded at "
            f"level {a['level']:g} when the map's ratio is below the {1 - a['level']:.3g} quantile of {a['n_cal']} "
            f"simulated maps of that scale ({a['terms']} terms, the family's shape and observer as configured); "
            f"spaces other than flat ones are not computed.")


def write_report(plan, analysis, staging, tables: dict) -> dict:
    """harmonic_bounds.ecsv, harmonic_profile.ecsv, their LaTeX table appended to bounds.tex; returns
    the page's tables with the likelihood bound right after the circle bounds of flat spaces."""
    if not of(plan):
        return tables
    from ..report.tables import harmonic_bounds_table, harmonic_profile_table
    from ..report.latex import harmonic_latex

    meta = assumptions(plan)
    bt = harmonic_bounds_table(analysis.maps, meta)
    bt.write(staging / "harmonic_bounds.ecsv", format="ascii.ecsv")
    pt = harmonic_profile_table(analysis.maps, meta)
    pt.write(staging / "harmonic_profile.ecsv", format="ascii.ecsv")
    tex = staging / "bounds.tex"
    tex.write_text((tex.read_text() if tex.exists() else "") + "\n" + harmonic_latex(bt, meta))
    out, placed = {}, False
    for key, t in tables.items():
        out[key] = t
        if key == "bounds: flat spaces":
            out["bounds: low-l likelihood (flat spaces, beside the circle bound)"] = bt
            placed = True
    if not placed:
        out["bounds: low-l likelihood (flat spaces, beside the circle bound)"] = bt
    out["low-l likelihood profile against scale"] = pt
    return out
