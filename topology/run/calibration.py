"""Calibration per injected family, and which family's alpha_min each bound uses.

Each family of ``[significance] injection_families`` has its own injected skies
(``inj/<family>/<radius>/<j>``), its own efficiency curve with exact one-sided binomial limits
(Clopper & Pearson 1934, :func:`topology.significance.efficiency`) and its own alpha_min: the
smallest radius above which the *lower limit* stays at or above ``efficiency_level``.

A bound uses the alpha_min of its own family when that family was injected with the same kind
of pairs (:func:`topology.injection.pair_kind`: back-to-back or general); otherwise it borrows
one, and says so (``calibration = "borrowed"`` and the assumption in words):

* from injected families of the same kind of pairs and geometry, else of the same kind, else
  from every injected family;
* among several, the weakest (the largest alpha_min; a family that never reaches the level
  leaves the row without a bound), so that a borrowed bound is never stronger than any of its
  sources;
* "any flat space" takes the weakest of all injected flat families (else of all families): it
  holds for every flat space only under the assumption that none hides its circles better.
"""

from __future__ import annotations

import copy
import math

import numpy as np

from .. import injection
from .. import significance as sig
from . import tasks as T

OWN, BORROWED = "own", "borrowed"


def family_info(plan) -> list[dict]:
    """Per injected family: key (for task ids), label, spec, kind of pairs and geometry."""
    out = []
    for spec in plan.significance["injection_families"]:
        out.append({"key": injection.family_key(spec), "label": injection.describe(spec), "spec": spec,
                    "kind": injection.spec_kind(spec), "geometry": injection.spec_geometry(spec)})
    return out


def injection_tasks(plan) -> list[tuple[str, int, float]]:
    """(task id, family index, nominal radius) of every injected sky of a radius scan."""
    out = []
    for f, info in enumerate(family_info(plan)):
        for r in plan.injection_radii_deg:
            for j in range(plan.n_injections):
                out.append((T.injection_id(info["key"], r, j), f, float(r)))
    return out


def family_efficiencies(plan, store, whole_range: np.ndarray) -> list[dict]:
    """Efficiency and alpha_min of every injected family. An injection is recovered when S_max
    within the radius tolerance of its nominal radius exceeds the whole-range threshold."""
    level, confidence = plan.efficiency_level, plan.efficiency_confidence
    inj_radii = plan.injection_radii_deg
    out = []
    for info in family_info(plan):
        recovered = np.zeros((plan.n_injections, len(inj_radii)), dtype=bool)
        for k, r in enumerate(inj_radii):
            near = T.radii_near(plan, r)
            for j in range(plan.n_injections):
                s = np.asarray(store.get(T.injection_id(info["key"], r, j))["s_max"])
                recovered[j, k] = bool(np.any(s[near] > whole_range[near]))
        eff = sig.efficiency(recovered, confidence)
        amin = sig.alpha_min(inj_radii, eff.lower, level)
        out.append({**info, "recovered": eff.recovered.tolist(), "n_injections": plan.n_injections,
                    "efficiency": eff.fraction.tolist(), "efficiency_lower": eff.lower.tolist(),
                    "efficiency_upper": eff.upper.tolist(), "alpha_min_deg": amin,
                    "at_lowest_radius": amin is not None and amin <= float(np.min(inj_radii)) + 1e-9})
    return out


def _weakest(cands: list[dict]) -> dict:
    """The family whose alpha_min bounds least: one without alpha_min, else the largest."""
    none = [c for c in cands if c["alpha_min_deg"] is None]
    return none[0] if none else max(cands, key=lambda c: c["alpha_min_deg"])


def source_for(families: list[dict], kind: str, geometry: str | None, own: str | None = None) -> dict:
    """The injected family whose alpha_min bounds a space (module docstring): {key, injected_family,
    alpha_min_deg, calibration (own / borrowed), assumption}."""
    mine = [f for f in families if own is not None and f["spec"]["family"] == own and f["kind"] == kind]
    if mine:
        f = _weakest(mine)
        return {"key": f["key"], "injected_family": f["label"], "alpha_min_deg": f["alpha_min_deg"],
                "calibration": OWN, "assumption": None}
    pools = ([f for f in families if f["kind"] == kind and f["geometry"] == geometry],
             [f for f in families if f["kind"] == kind], list(families))
    pool = next(p for p in pools if p)
    f = _weakest(pool)
    same_kind = f["kind"] == kind
    what = "back-to-back" if kind == injection.BACK_TO_BACK else "not all back-to-back"
    assumption = (f"borrowed from the injected {f['label']}: assumes this space's circles ({what}) are found "
                  f"as well as that family's" + ("" if same_kind else f" (whose pairs are {f['kind']})"))
    return {"key": f["key"], "injected_family": f["label"], "alpha_min_deg": f["alpha_min_deg"],
            "calibration": BORROWED, "assumption": assumption}


def any_flat_source(families: list[dict]) -> dict:
    """The source of the bound on any flat space: the weakest injected flat family."""
    flat = [f for f in families if f["geometry"] == "flat"] or list(families)
    f = _weakest(flat)
    return {"key": f["key"], "injected_family": f["label"], "alpha_min_deg": f["alpha_min_deg"],
            "calibration": BORROWED,
            "assumption": f"the weakest of the injected flat families ({', '.join(g['label'] for g in flat)}): "
                          "assumes no other flat space hides its circles better"}


_SPHERICAL_BOUND_KEYS = ("max_chi_rec_over_curvature_radius", "min_curvature_radius_over_chi_rec", "min_omega_k",
                         "min_curvature_radius_mpc")


def map_bounds(plan, families: list[dict], cosmo) -> dict | None:
    """The bounds of a map without a detection, each from the alpha_min of its own injected family
    or a borrowed one (module docstring); None when no family has an alpha_min."""
    from ..bounds import bound_summary

    amins = sorted({f["alpha_min_deg"] for f in families if f["alpha_min_deg"] is not None})
    if not amins:
        return None
    p_max, m_max = int(plan.bounds["p_max"]), int(plan.bounds["m_max"])
    by_amin = {a: bound_summary(a, cosmo, p_max=p_max, m_max=m_max) for a in amins}
    headline = families[0]["alpha_min_deg"]
    base = by_amin[headline if headline is not None else amins[-1]]
    out = copy.deepcopy(base)
    out["alpha_min_deg"] = headline
    out["alpha_min_by_family"] = {f["label"]: f["alpha_min_deg"] for f in families}

    # flat: any flat space, and the cubic torus
    loop, cubic = any_flat_source(families), source_for(families, injection.BACK_TO_BACK, "flat", own="E1")
    for src, keys in ((loop, ("min_loop_over_lss_diameter", "min_loop_mpc")),
                      (cubic, ("cubic_torus_inscribed_radius_over_chi_rec", "cubic_torus_min_side_over_chi_rec"))):
        a = src["alpha_min_deg"]
        for k in keys:
            out["flat"][k] = None if a is None else by_amin[a]["flat"][k]
    out["flat"]["sources"] = {"any flat space": loop, "cubic torus E1": cubic}

    # spherical families: homogeneous spaces (Clifford translations) have back-to-back pairs
    rows = []
    for i, row in enumerate(base["spherical"]):
        kind = injection.BACK_TO_BACK if row.get("homogeneous") else injection.GENERAL
        src = source_for(families, kind, "spherical", own=row["family"])
        a = src["alpha_min_deg"]
        new = dict(by_amin[a]["spherical"][i]) if a is not None else {
            k: (None if k in _SPHERICAL_BOUND_KEYS else v) for k, v in row.items()}
        rows.append(new | {"source": src})
    out["spherical"] = rows

    # the configured families of [bounds]: each from its own source
    out["families"] = configured_bounds(plan, families, cosmo)
    return out


def family_bounds(plan, amin: float, cosmo) -> list[dict]:
    """Per configured family at one alpha_min: excluded or not, and the scale / curvature bound."""
    from pathlib import Path

    from ..bounds import bound_summary
    from ..config import Config
    from ..errors import InputError
    from .plan import bound_families

    cfg = Config({"bounds": {"families": plan.bounds["families"]}}, Path(plan.base_dir) / "run.toml")
    out = []
    for space, obs in bound_families(cfg, cosmo):
        try:
            b = bound_summary(amin, cosmo, space=space, observer=obs, p_max=2, m_max=2)
        except InputError as e:
            out.append({"family": space.family, "params": space.params, "error": str(e)})
            continue
        entry = {"family": space.family, "params": space.params}
        if "configured" in b.get("flat", {}):
            entry["flat"] = b["flat"]["configured"]
        for key in ("spherical_configured", "hyperbolic"):
            if b.get(key):
                entry[key] = b[key]
        out.append(entry)
    return out


def configured_bounds(plan, families: list[dict], cosmo) -> list[dict]:
    """Verdicts of the ``[bounds] families``, each with the alpha_min of its source."""
    from pathlib import Path

    from ..config import Config
    from .plan import bound_families

    cfg = Config({"bounds": {"families": plan.bounds["families"]}}, Path(plan.base_dir) / "run.toml")
    spaces = bound_families(cfg, cosmo)
    cache: dict = {}
    out = []
    for i, (space, obs) in enumerate(spaces):
        src = source_for(families, injection.pair_kind(space), space.geometry, own=space.family)
        a = src["alpha_min_deg"]
        if a is None:
            note = f"not tested: the injected {src['injected_family']} never reaches the efficiency level"
            part = {"flat": "flat", "spherical": "spherical_configured"}.get(space.geometry, "hyperbolic")
            entry = {"family": space.family, "params": space.params, "note": note,
                     part: {"family": space.family, "params": space.params, "note": note}}
        else:
            if cache.get(a) is None:
                cache[a] = family_bounds(plan, a, cosmo)
            entry = copy.deepcopy(cache[a][i])
        entry["source"] = src
        if space.geometry == "flat":
            back_to_back_verdict(entry, space, obs, families)
        out.append(entry)
    return out


def back_to_back_verdict(entry: dict, space, observer, families: list[dict]) -> None:
    """A flat space whose own family was not excluded may still be excluded by its back-to-back
    pairs alone (pure translations look the same in any family): when one of them has a radius
    >= the alpha_min of an injected back-to-back flat family, the verdict is excluded, borrowed
    from that family and said so."""
    from ..circles import predict_circles

    flat = entry.get("flat", {})
    if flat.get("excluded"):
        return
    src = source_for(families, injection.BACK_TO_BACK, "flat", own="E1")
    if src["alpha_min_deg"] is None:
        return
    radii = [math.degrees(p.radius) for p in predict_circles(space, observer, 1.0)
             if float(p.center_a @ p.center_b) < -1.0 + 1e-6]
    if radii and max(radii) >= src["alpha_min_deg"]:
        flat.pop("note", None)
        entry.pop("note", None)
        flat["excluded"] = True
        flat["excluded_by"] = (f"back-to-back pairs of radius {max(radii):.1f} deg >= alpha_min "
                               f"{src['alpha_min_deg']:g} deg of the injected {src['injected_family']}")
        entry["flat"] = flat
        entry["source"] = src | {"calibration": BORROWED,
                                 "assumption": f"excluded by its back-to-back pairs alone, assumed found as well as "
                                               f"those of the injected {src['injected_family']}"}
