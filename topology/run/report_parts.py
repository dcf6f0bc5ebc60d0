"""Report parts shared by the kinds of run: the sky figure with candidate circles, and the
statement of what the results assume."""

from __future__ import annotations

import math
from pathlib import Path
from dataclasses import dataclass, field
from types import SimpleNamespace

import numpy as np

from . import tasks as T


@dataclass
class Analysis:
    """What a kind of run makes of its task results: ``maps`` and ``calibration`` are the
    JSON-ready parts of summary.json; ``thresholds`` (:class:`topology.significance.Thresholds`)
    and ``null`` (S per null sky and radius or target) feed the tables and figures;
    ``map_values`` holds the sky of each inline map (None for a FITS map, read again for its
    figure); ``injected`` the targeted statistic of each injected sky (targeted runs)."""

    maps: list
    calibration: dict
    thresholds: object
    null: np.ndarray
    map_values: dict = field(default_factory=dict)
    injected: np.ndarray | None = None


def candidate_circles(cands, n=6, *, detected=True):
    """Candidate (or predicted) pair dicts as objects with unit-vector centres, a radius in
    radians and a legend ``label`` (for figures). A candidate above threshold on a ``detected``
    map is "detected", any other "best candidate (not significant)"; a dict without S (a
    predicted pair) is "predicted"."""
    from ..geometry import lonlat_to_vec

    def label(c):
        if "S" not in c:
            return f"predicted: radius {c['radius_deg']:.1f} deg"
        kind = "detected" if c.get("above_threshold") and detected else "best candidate (not significant)"
        score = c.get("S_eq")
        if score is not None and math.isfinite(score) and "overlap" in c:  # ranked and tested on S_eq
            s = f"S_eq = {score:.2f} (S = {c['S']:.2f}, f = {c['overlap']:.2f})"
        else:
            s = f"S = {c['S']:.2f}" if c["S"] is not None and math.isfinite(c["S"]) else "S not measured"
        return f"{kind}: radius {c['radius_deg']:.1f} deg, {s}"

    return [SimpleNamespace(center_a=lonlat_to_vec(*c["center_a"]), center_b=lonlat_to_vec(*c["center_b"]),
                            radius=math.radians(c["radius_deg"]), label=label(c)) for c in cands[:n]]


def sky_figure(plan, analysis: Analysis, m: dict, staging: Path) -> list[str] | None:
    """The map with its best (or above-threshold) candidate circles, each named in the legend,
    and the pairs its space predicts when it is an inline sky; None without a map."""
    from .. import report

    name = m["name"]
    values = analysis.map_values.get(name)
    spec = next(s for s in plan.maps if s.name == name)
    frame, unit = "coordinates of the synthetic sky (observer's frame)", "microK"
    if values is None and spec.path:
        from ..maps import read_healpix, read_iqu
        from ..search.polarised import polarised_field

        if polarised_field(spec.field):  # E / T+E: the circles drawn on the temperature (I) column
            sky = read_iqu(spec.path, convention=spec.pol_convention, ordering=spec.ordering).i
        else:
            sky = read_healpix(spec.path, field=spec.field, ordering=spec.ordering)
        values = np.where(sky.observed, sky.values, np.nan)
        frames = {"G": "Galactic", "E": "ecliptic", "C": "equatorial", "Q": "equatorial"}
        coordsys = str(sky.header.get("COORDSYS", "")).strip().upper()[:1]
        frame = (f"{frames[coordsys]} coordinates (COORDSYS of the file)" if coordsys in frames
                 else "the map's own coordinates (no COORDSYS in the file)")
        unit = str(sky.header.get("TUNIT1", "")).strip() or "unit not stated in the file"
    if values is None:
        return None
    detected = [c for c in m["candidates"] if c["above_threshold"]] if m["detected"] else []
    shown = candidate_circles(detected or m["candidates"][:1], detected=m["detected"])
    extra = "(no detection)"
    if m["detected"]:
        extra = (f"(detected: {len(detected)} pair{'s' if len(detected) > 1 else ''} above threshold"
                 + (f", the {len(shown)} most significant shown)" if len(shown) < len(detected) else ")"))
    values = np.nan_to_num(np.asarray(values, float), nan=-1.6375e30)
    mask_map = T.run_mask(plan.mask, int(round(np.sqrt(values.size / 12))))
    return report.figure_sky(staging / f"sky_{name}", name, values, shown,
                             title_extra=extra,
                             mask=None if mask_map is None else T.mask_at(mask_map, values.size),
                             predicted=candidate_circles(m.get("predicted") or [], n=None), frame=frame, unit=unit)


CAUTION = (
    "A detection or a bound here is only as good as its calibration. The statistic is the m-weighted "
    "S statistic of Cornish, Spergel & Starkman (2004), maximised over centres, twists and both "
    "orientations as configured; thresholds come from {n_null} isotropic Gaussian skies ({terms} "
    "temperature terms, CAMB spectrum or the shipped table) with the configured beam, white noise "
    "and mask, searched with identical settings; the false-alarm probability {false_alarm} holds over "
    "the whole radius range (standardised-maximum look-elsewhere correction) with the binomial error of {n_null} "
    "skies; alpha_min is, for each injected family ({injection}), where the one-sided {confidence:.0%} "
    "exact binomial (Clopper & Pearson 1934) lower limit on its recovery reaches {level:.0%}; a bound "
    "on a space whose family was not injected borrows the alpha_min of an injected one, an "
    "assumption stated beside it. "
    "The injected and null skies contain only the listed temperature terms, no foregrounds and no "
    "correlated noise. Bounds assume the listed background cosmology. Any claim in a paper needs "
    "the user's own validation on their data, mask and instrument model."
)


def field_assumptions(plan) -> str:
    """The field the thresholds, efficiencies and bounds come from, and what its skies assume."""
    if not plan.pol_field:
        return (f"temperature (T): null and injected skies of {'+'.join(plan.instrument['terms']).upper()} "
                f"temperature terms")
    noise_pol = plan.instrument.get("noise_pol_uk")
    noise_pol = f"{noise_pol:g}" if noise_pol is not None else f"sqrt(2) x {plan.instrument['noise_uk']:g}"
    what = {"E": "E alone", "T+E": "T and E combined (S_TE,eq)"}[plan.pol_field]
    return (f"{what}: null skies polarised isotropic and injected skies polarised flat skies (T and E of one "
            f"set of modes), all from CAMB's unlensed TT, EE, TE (scalar modes, B = 0, no lensing, no "
            f"foregrounds), beam {plan.instrument['fwhm_deg']:g} deg, white noise {plan.instrument['noise_uk']:g} "
            f"microK on I and {noise_pol} microK on Q, U per pixel, E made from Q, U with the run's mask as "
            f"for the data")


def caution(plan, injection: str | None = None) -> str:
    """What the results of a run assume, for the report page and summary.json."""
    from ..injection import describe

    text = CAUTION.format(n_null=plan.significance["n_null"], terms="+".join(plan.instrument["terms"]).upper(),
                          false_alarm=f"{plan.false_alarm:g}",
                          injection=injection or "; ".join(describe(f) for f in plan.significance["injection_families"]),
                          level=plan.efficiency_level, confidence=plan.efficiency_confidence)
    if getattr(plan, "pol_field", None):
        text += f" Searched field: {field_assumptions(plan)}."
    return text
