"""Writing synthetic skies: HEALPix FITS map (and mask), Mollweide preview, predicted pairs.

FITS: one binary-table HDU written by healpy.write_map, RING ordering, column TEMPERATURE in
microK (thermodynamic), float32 by default (float64 on request). Provenance goes in short
(<= 8 character) header keys, long values continued by the standard CONTINUE convention:

    TOPOVER tool version      FAMILY  family name       GEOMETRY flat / spherical
    PARAMS  family params (JSON)  OBSPOS observer position (JSON)  OBSEUL Euler z-y-z (deg)
    SEED    seed              LMAX    lmax of the sky   TERMS   e.g. 'sw,doppler'
    METHOD  eigenmode / grid / isotropic                KMAX    spherical k_max
    FWHMDEG beam FWHM (deg)   NOISEUK noise per pixel   PIXWIN  pixel window applied
    MASKTYPE none / galactic  MASKBDEG cut (deg)        APPMASK mask applied to the map
    CHIREC  chi_rec (Mpc)     H0, OMBH2, OMCH2, OMK, TCMB, NEFF   the background
    AS, NS, KPIVOT            primordial spectrum       NPAIRS  predicted circle pairs
    SKYMETA other scalar provenance of the generator (JSON)

The files carry no date or host, so the same config and seed give byte-identical files on
the same software stack.
"""

from __future__ import annotations

import io as _io
import json
import math

import numpy as np

from .. import __version__
from . import spectra

DTYPES = {"float32": np.float32, "float64": np.float64}


def _json(obj) -> str:
    from ..store import json_default

    return json.dumps(obj, separators=(",", ":"), default=json_default, allow_nan=False)


def _ascii(s: str) -> str:
    return s.encode("ascii", "replace").decode("ascii")


def _scalar_meta(meta: dict) -> dict:
    skip = {"family", "params", "seed", "method"}
    out = {}
    for k, v in meta.items():
        if k in skip:
            continue
        if isinstance(v, (bool, int, float, str, np.integer, np.floating)):
            if isinstance(v, (float, np.floating)) and not math.isfinite(v):
                continue
            out[str(k)] = v.item() if isinstance(v, np.generic) else v
    return out


def header_cards(cfg, res) -> list:
    """FITS header cards (key, value, comment) recording how ``res`` (a SynthResult) was made."""
    from ..scenario import cosmology_from_config

    p, sky, sc = res.params, res.sky, res.scenario
    cosmo = sc.cosmology if sc is not None else cosmology_from_config(cfg)
    family = sky.meta.get("family", "isotropic")
    obs = cfg.section("observer")
    cards = [
        ("TOPOVER", __version__, "topology version"),
        ("FAMILY", str(family), "family of space"),
        ("GEOMETRY", sc.space.geometry if sc is not None else cosmo.geometry, "geometry"),
        ("PARAMS", _ascii(_json(sky.meta.get("params", {}))), "family parameters (JSON)"),
        ("OBSPOS", _ascii(_json([float(v) for v in np.ravel(sc.observer.point)]) if sc is not None
                          else _json(obs.get("position", []))), "observer position (model coords)"),
        ("OBSEUL", _ascii(_json([float(v) for v in obs.get("orientation", [0.0, 0.0, 0.0])])),
         "observer Euler angles z-y-z (deg)"),
        ("SEED", int(p["seed"]), "random seed (signal and noise streams)"),
        ("LMAX", int(p["lmax"]), "highest multipole of the sky"),
        ("TERMS", ",".join(sky.terms), "temperature terms"),
        ("METHOD", str(sky.meta.get("method", "")), "sky generator"),
    ]
    if "kmax" in sky.meta:
        cards.append(("KMAX", int(sky.meta["kmax"]), "highest S^3 harmonic degree"))
    if "kchi_max" in sky.meta:
        cards.append(("KCHIMAX", float(sky.meta["kchi_max"]), "flat: wave-number cut k chi_rec"))
        cards.append(("COMPLMAX", float(sky.meta.get("complement_lmax", 0.0)),
                      "flat: isotropic complement's share of C_lmax"))
    if sky.meta.get("transfer"):
        cards.append(("TRANSFER", str(sky.meta["transfer"]), "flat: radial function of the modes"))
    cards += [
        ("FWHMDEG", float(p["fwhm_deg"]), "Gaussian beam FWHM (deg)"),
        ("NOISEUK", float(p["noise_uk"]), "white noise rms per pixel (uK)"),
        ("HITS", str(p["hits"]) if p["hits"] else "none", "hit-count map scaling the noise"),
        ("PIXWIN", bool(p["pixwin"]), "pixel window applied"),
        ("MASKTYPE", str(p["mask"]), "mask written alongside"),
        ("MASKBDEG", float(p["mask_b_deg"]), "galactic mask half-width (deg)"),
        ("APPMASK", bool(p["apply_mask"]), "mask applied to this map"),
        ("CHIREC", float(cosmo.chi_rec_mpc), "comoving distance to last scattering (Mpc)"),
        ("H0", float(cosmo.H0), "km/s/Mpc"),
        ("OMBH2", float(cosmo.omega_b_h2), "omega_b h^2"),
        ("OMCH2", float(cosmo.omega_c_h2), "omega_c h^2"),
        ("OMK", float(cosmo.omega_k), "Omega_K"),
        ("TCMB", float(cosmo.t_cmb), "K"),
        ("NEFF", float(cosmo.n_eff), "massless neutrino species"),
        ("AS", spectra.A_S, "primordial amplitude at k_pivot"),
        ("NS", spectra.N_S, "scalar spectral index"),
        ("KPIVOT", spectra.K_PIVOT, "pivot scale (1/Mpc)"),
        ("NPAIRS", len(res.pairs), "predicted matched-circle pairs"),
    ]
    meta = _scalar_meta(sky.meta)
    if meta:
        cards.append(("SKYMETA", _ascii(_json(meta)), "generator provenance (JSON)"))
    return cards


def write_fits(path, m: np.ndarray, cards: list, *, dtype: str = "float32", column: str = "TEMPERATURE",
               unit: str = "uK") -> None:
    """Write a RING map with header ``cards`` (healpy.write_map; overwrites ``path``)."""
    import healpy as hp

    dt = DTYPES[dtype]
    # a string too long for one card continues (CONTINUE convention) and keeps no comment
    cards = [(k, v, "" if isinstance(v, str) and len(v) > 40 else c) for k, v, c in cards]
    hp.write_map(str(path), np.asarray(m).astype(dt), nest=False, dtype=dt, column_names=[column],
                 column_units=unit, extra_header=list(cards), overwrite=True)


def mask_path(out) -> str:
    """Where the mask of map ``out`` goes: NAME_mask.fits next to NAME.fits."""
    s = str(out)
    stem = s[:-5] if s.lower().endswith(".fits") else s
    return stem + "_mask.fits"


def preview_png(m: np.ndarray, pairs, title: str = "", n_lon: int = 900) -> bytes:
    """A Mollweide PNG of the map with the predicted circles (A solid, B dashed), as bytes.

    Longitude grows to the left (astronomical convention of :mod:`topology.plots`); the colour
    scale is symmetric, its limit rounded up to two significant figures.
    """
    import healpy as hp

    from ..plots import draw_circles, label_graticule, pyplot, sky_image, symmetric_limit

    plt = pyplot()
    values = np.asarray(m, dtype=float)
    vmax = symmetric_limit(values[values != hp.UNSEEN])
    fig = plt.figure(figsize=(9, 5))
    ax = fig.add_subplot(111, projection="mollweide")
    mesh = sky_image(ax, m, vmax, n_lon=n_lon)
    label_graticule(ax)
    draw_circles(ax, pairs)
    bar = fig.colorbar(mesh, ax=ax, orientation="horizontal", fraction=0.05, pad=0.06, label="T [microK]")
    bar.set_ticks([-vmax, -vmax / 2, 0.0, vmax / 2, vmax])
    bar.ax.tick_params(labelsize=9)
    ax.set_title(title + f"\n{len(pairs)} predicted matched-circle pairs (A solid, B dashed); longitude grows to the left",
                 fontsize=10)
    buf = _io.BytesIO()
    fig.savefig(buf, dpi=100, bbox_inches="tight", format="png", metadata={"Software": None})
    plt.close(fig)
    return buf.getvalue()


def pairs_document(cfg, res) -> dict:
    """The predicted pairs in the contract of ``topology predict --json``
    (:func:`topology.circles.prediction_json`; an isotropic sky has none)."""
    if res.scenario is not None:
        from ..circles import prediction_json

        return prediction_json(res.scenario, res.pairs)
    from ..scenario import cosmology_from_config

    cosmo = cosmology_from_config(cfg)
    return {
        "family": "isotropic",
        "params": {},
        "geometry": cosmo.geometry,
        "chi_rec_mpc": cosmo.chi_rec_mpc,
        "chi_rec_over_curvature_radius": cosmo.chi_rec_over_curvature_radius,
        "clone_distance_unit": "chi_rec" if cosmo.geometry == "flat" else "curvature_radius",
        "pairs": [],
    }
