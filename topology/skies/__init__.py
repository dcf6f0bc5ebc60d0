"""Synthetic skies: isotropic (simply connected) and multiply connected (flat, spherical).

Generators return a :class:`~topology.skies.base.Sky` (noiseless, unbeamed, microK); the
instrument stage (:mod:`topology.skies.instrument`) observes it. This module is the dispatcher
over configs:

* :func:`sky_params` - the validated ``[sky]`` section with every default filled in;
* :func:`sky_from_config` - the Sky of a config and its Scenario (None for isotropic skies);
* :func:`synthesize` - the observed map, its mask, the Sky, the predicted pairs and the FITS
  header cards (:class:`SynthResult`);
* :func:`synthesize_polarised` - the same for ``[sky] polarisation = true``: I, Q, U of an
  isotropic sky (:mod:`topology.skies.polarised`) or a flat space
  (:mod:`topology.skies.flat_polarised`).

``[space] family = "isotropic"`` gives an isotropic sky and takes no other ``[space]`` key.
Method "auto": flat spaces use the eigenmode sum for lmax <= AUTO_EIGENMODE_LMAX and the grid
above it; spherical spaces always use the eigenmode sum ("grid" is an error there). The
non-compact flat families E11-E17 get the sky of a periodic cover of their open directions
(period 6 chi_rec by default, no added circle pairs;
:func:`topology.skies.flat_modes.compact_cover`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..bandlimit import default_lmax
from ..errors import InputError
from .base import TERMS, Sky

__all__ = ["Sky", "TERMS", "SynthResult", "sky_params", "sky_from_config", "synthesize",
           "AUTO_EIGENMODE_LMAX", "default_kmax", "SKY_TERMS", "check_sky_terms", "synthesize_polarised"]

#: the sets of temperature terms each kind of sky makes (every set with "sw"): isotropic skies
#: (analytic SW, or CAMB's unlensed TT / the shipped table), flat skies (analytic SW, or CAMB's
#: line-of-sight transfer, both methods), spherical skies (SW only). A run's null and injected
#: skies share one set (run.plan checks it); a generator that gains terms is listed here.
SKY_TERMS = {
    "isotropic": (("sw",), ("sw", "doppler", "isw")),
    "flat": (("sw",), ("sw", "doppler", "isw")),
    "spherical": (("sw",),),
}


def check_sky_terms(kind: str, terms, where: str) -> None:
    """InputError (one line, at ``where``) unless skies of ``kind`` ("isotropic", "flat",
    "spherical", "hyperbolic") make exactly the temperature terms ``terms``."""
    t = tuple(x for x in TERMS if x in set(terms))
    sets = SKY_TERMS.get(kind, ())
    if t in sets:
        return
    have = " or ".join(str(list(s)) for s in sets) or "none"
    raise InputError(f"{kind} skies have the terms {have}, not {list(t)}: the null and injected skies of a run "
                     f"must share one set of terms; give [instrument] terms = {list(sets[0]) if sets else []} or "
                     f"inject another family", where)

#: flat "auto" method: eigenmode sum up to this lmax, grid above (the rule lives in skies.flat)
from .flat import AUTO_LMAX as AUTO_EIGENMODE_LMAX  # noqa: E402
#: the family name of the simply connected (isotropic) sky
ISOTROPIC = "isotropic"


@dataclass
class SynthResult:
    """What :func:`synthesize` makes: ``map`` (RING, microK, float64), ``mask`` (RING 0/1 or
    None), the noiseless ``sky``, the predicted circle ``pairs`` and FITS ``header`` cards
    (list of (key, value, comment))."""

    map: np.ndarray
    mask: np.ndarray | None
    sky: Sky
    pairs: list
    header: list = field(default_factory=list)
    scenario: object = None
    params: dict = field(default_factory=dict)


def _sky_get(cfg, key):
    return cfg.get("sky", key)


def sky_params(cfg) -> dict:
    """The ``[sky]`` keys with defaults filled in and cross-checked (lmax <= 3 nside - 1)."""
    from .instrument import check_lmax, check_nside

    p = {key: _sky_get(cfg, key) for key in ("nside", "lmax", "seed", "method", "terms", "fwhm_deg",
                                             "noise_uk", "kmax", "pixwin", "mask", "mask_b_deg",
                                             "apply_mask", "hits")}
    p["nside"] = check_nside(p["nside"])
    if p["lmax"] is None:
        p["lmax"] = default_lmax(p["nside"])
    p["lmax"] = check_lmax(p["lmax"], p["nside"])
    p["terms"] = tuple(t for t in TERMS if t in set(p["terms"]))
    p["fwhm_deg"] = float(p["fwhm_deg"])
    p["noise_uk"] = float(p["noise_uk"])
    return p


def default_kmax(lmax: int, chi: float) -> int:
    """Spherical default: k_max = ceil(2 lmax / chi), chi = chi_rec / R_c.

    A degree-k mode projects onto multipoles l <~ k chi on the last-scattering sphere, and the
    SW power at l collects from k chi >~ l with a tail falling as 1 / (k chi)^2 (the fraction
    beyond K is about l^2 / (2 (K chi)^2), from j_l(x)^2 ~ 1 / (2 x^2); common practice), so
    2 lmax / chi leaves about 1/8 of the power at l = lmax and much less below.
    """
    return max(1, int(math.ceil(2.0 * lmax / chi)))


def _isotropic_space_check(cfg) -> None:
    extra = sorted(k for k in cfg.section("space") if k != "family")
    if extra:
        raise InputError(f"the isotropic sky takes no [space] parameters, got {', '.join(extra)}",
                         f"[space] {extra[0]}")


def read_hits(cfg, nside: int):
    """The hit-count map named by ``[sky] hits`` (relative to the config), or None."""
    name = _sky_get(cfg, "hits")
    if name is None:
        return None
    import healpy as hp

    path = Path(name)
    if not path.is_absolute():
        path = cfg.base_dir / path
    if not path.is_file():
        raise InputError(f"hit-count file not found: {path}", "[sky] hits")
    try:
        h = hp.read_map(str(path), field=0, dtype=np.float64)
    except Exception as e:  # noqa: BLE001 - any reader failure is a bad file
        raise InputError(f"cannot read hit-count map {path} ({type(e).__name__}: {e})", "[sky] hits") from None
    return h


def sky_from_config(cfg, params: dict | None = None):
    """(Sky, Scenario or None) for a config: the noiseless, unbeamed sky of ``[space]``."""
    from ..scenario import cosmology_from_config, scenario_from_config

    p = sky_params(cfg) if params is None else params
    family = cfg.get("space", "family")
    if family is None:
        raise InputError("missing: give a family of space or \"isotropic\"", "[space] family")
    if family == ISOTROPIC:
        _isotropic_space_check(cfg)
        from .isotropic import isotropic_sky

        return isotropic_sky(cosmology_from_config(cfg), lmax=p["lmax"], terms=p["terms"], seed=p["seed"]), None
    sc = scenario_from_config(cfg)   # unknown family, invalid parameters -> InputError here
    geometry = sc.space.geometry
    if geometry == "flat":
        method = p["method"]  # "auto" is resolved by flat_sky (it also knows the CAMB-term rule)
        from .flat import flat_sky

        sky = flat_sky(sc.space, sc.observer, sc.cosmology, lmax=p["lmax"], nside=p["nside"], method=method,
                       terms=p["terms"], seed=p["seed"])
    elif geometry == "spherical":
        if p["method"] == "grid":
            raise InputError("spherical skies are built from eigenmodes only: use 'eigenmode' or 'auto'",
                             "[sky] method")
        from .spherical import spherical_sky

        # kmax None: the generator's default, ceil(2 lmax / chi) (see default_kmax)
        sky = spherical_sky(sc.space, sc.observer, sc.cosmology, lmax=p["lmax"], nside=p["nside"], kmax=p["kmax"],
                            terms=p["terms"], seed=p["seed"])
        sky.meta.setdefault("kmax", p["kmax"] if p["kmax"] is not None else default_kmax(p["lmax"], sc.chi))
    else:
        raise InputError(f"synthetic skies are not available for {geometry} spaces (family {family})",
                         "[space] family")
    sky.meta.setdefault("family", sc.space.family)
    sky.meta.setdefault("params", dict(sc.space.params))
    sky.meta.setdefault("seed", p["seed"])
    return sky, sc


def synthesize(cfg, *, hits=None) -> SynthResult:
    """The observed sky of a config (see :class:`SynthResult`).

    All ``[sky]`` keys and the hit-count file are checked before any sky is generated.
    ``hits`` (an array) overrides ``[sky] hits``.
    """
    from ..circles import predict_circles
    from .instrument import galactic_mask, observe
    from .io import header_cards

    p = sky_params(cfg)
    if hits is None:
        hits = read_hits(cfg, p["nside"])
    mask = galactic_mask(p["nside"], float(p["mask_b_deg"])) if p["mask"] == "galactic" else None
    sky, sc = sky_from_config(cfg, p)
    m = observe(sky, nside=p["nside"], lmax=p["lmax"], fwhm_deg=p["fwhm_deg"], noise_uk=p["noise_uk"], hits=hits,
                pixwin=bool(p["pixwin"]), seed=p["seed"], mask=mask if p["apply_mask"] else None)
    pairs = predict_circles(sc.space, sc.observer, sc.chi) if sc is not None else []
    res = SynthResult(map=m, mask=mask, sky=sky, pairs=pairs, scenario=sc, params=p)
    res.header = header_cards(cfg, res)
    return res


def synthesize_polarised(cfg):
    """The observed I, Q, U sky of a config with ``[sky] polarisation = true``: a SynthResult
    (topology.skies) whose ``map`` is (3, 12 nside^2) in microK, in the configured Q/U
    convention, with the FITS header cards (POLCCONV and the polarisation noise added).
    Isotropic skies and flat spaces E1-E17 (:func:`topology.skies.flat_polarised.flat_polarised_sky`,
    the eigenmode sum; needs camb); every key and the hit-count file are checked before any sky
    is made."""
    from ..scenario import cosmology_from_config
    from .instrument import galactic_mask
    from .io import header_cards
    from .polarised import CONVENTIONS, observe_polarised, polarised_cl, polarised_sky

    family = cfg.get("space", "family")
    p = sky_params(cfg)
    sc = None
    if family == "isotropic":
        extra = sorted(k for k in cfg.section("space") if k != "family")
        if extra:
            raise InputError(f"the isotropic sky takes no [space] parameters, got {', '.join(extra)}",
                             f"[space] {extra[0]}")
        cosmo = cosmology_from_config(cfg)
        polarised_cl(cosmo, p["lmax"], p["terms"])          # terms, camb or table: before any work
    else:
        from ..scenario import scenario_from_config

        sc = scenario_from_config(cfg)
        if sc.space.geometry != "flat":
            raise InputError(f"polarised skies of {sc.space.geometry} spaces are not implemented yet (family "
                             f"{family!r}); isotropic and flat (E1-E17) skies make I, Q, U", "[sky] polarisation")
        cosmo = sc.cosmology
    hits = read_hits(cfg, p["nside"])
    conv = cfg.get("sky", "qu_convention")
    noise_pol = cfg.get("sky", "noise_pol_uk")
    mask = galactic_mask(p["nside"], float(p["mask_b_deg"])) if p["mask"] == "galactic" else None
    pairs = []
    if sc is None:
        sky = polarised_sky(cosmo, lmax=p["lmax"], terms=p["terms"], seed=p["seed"])
    else:
        from ..circles import predict_circles
        from .flat_polarised import flat_polarised_sky

        sky = flat_polarised_sky(sc.space, sc.observer, cosmo, lmax=p["lmax"], nside=p["nside"], seed=p["seed"],
                                 terms=p["terms"], method=p["method"])
        pairs = predict_circles(sc.space, sc.observer, sc.chi)
    m = observe_polarised(sky, nside=p["nside"], lmax=p["lmax"], fwhm_deg=p["fwhm_deg"], noise_uk=p["noise_uk"],
                          noise_pol_uk=noise_pol, hits=hits, pixwin=bool(p["pixwin"]), seed=p["seed"],
                          mask=mask if p["apply_mask"] else None, convention=conv)
    res = SynthResult(map=m, mask=mask, sky=sky, pairs=pairs, scenario=sc, params=p)
    sigma_p = math.sqrt(2.0) * p["noise_uk"] if noise_pol is None else float(noise_pol)
    res.header = header_cards(cfg, res) + [
        ("POLAR", True, "I, Q, U columns"),
        ("POLCCONV", CONVENTIONS[conv], "Q/U convention: COSMO (HEALPix) or IAU"),
        ("NOISEPUK", sigma_p, "white noise rms per pixel on Q and U (uK)"),
    ]
    return res
