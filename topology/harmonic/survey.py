"""The divergence of a configured space from isotropy, and its dependence on the space's size.

:func:`settings_from_config` checks the ``[harmonic]`` section against the theory (before any
work); :func:`divergence_rows` computes D(space || isotropic) for the configured space and for
each scale s of ``scales``, where the space's lengths and the observer's position are multiplied
by s (the whole picture scaled: the observer keeps its place in the fundamental domain; the open
directions of E11-E17 keep the skies' period). For a spherical space s multiplies the curvature
radius R_c: Omega_K becomes Omega_K / s^2 (h, omega_b h^2, omega_c h^2 fixed, Omega_Lambda
taking up the change), the space S^3/Gamma and the observer's place in it unchanged, so the
last-scattering radius chi_rec / R_c falls about as 1/s. Each row also gives the distance from
the observer to its nearest image (chi_rec for flat spaces, R_c for spherical ones; circles
exist when it is below twice the last-scattering radius).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import InputError, raise_if_stopped
from .covariance import check_kchi_max, check_lmax, space_covariance
from .kl import Divergence, gaussian_kl, pixel_kl
from .pixels import PixelSpace, pixel_space
from .radial import check_terms

#: the largest distance searched for the observer's nearest image (chi_rec)
NEAREST_REACH = 8.0


@dataclass(frozen=True)
class HarmonicSettings:
    """The checked ``[harmonic]`` section: lmax, kchi_max, terms, scales (tuple or None), complement, and the
    pixel-space form (nside, noise_uk, mask, mask_b_deg, fwhm_deg, pixwin; nside None: full sky)."""

    lmax: int = 10
    kchi_max: float | None = None
    terms: tuple = ("sw",)
    scales: tuple | None = None
    complement: bool = True
    nside: int | None = None
    noise_uk: float = 0.0
    mask: str = "none"
    mask_b_deg: float = 20.0
    fwhm_deg: float = 0.0
    pixwin: bool = True
    level: float = 0.95
    n_cal: int = 200
    orientation: str = "max"
    orientation_nside: int = 1
    n_psi: int = 6
    seed: int = 0

    def pixels(self) -> PixelSpace | None:
        """The pixel-space form, or None for the full-sky harmonic form."""
        if self.nside is None:
            return None
        mask = None
        if self.mask == "galactic":
            from ..skies.instrument import galactic_mask

            mask = galactic_mask(self.nside, self.mask_b_deg)
        return pixel_space(self.nside, self.lmax, noise_uk=self.noise_uk, mask=mask, fwhm_deg=self.fwhm_deg,
                           pixwin=self.pixwin)


def settings_from_config(cfg) -> HarmonicSettings:
    """The ``[harmonic]`` settings of a config, cross-checked (InputError naming the key)."""
    g = lambda key: cfg.get("harmonic", key)  # noqa: E731 - schema defaults filled in
    lmax = check_lmax(g("lmax"))
    s = HarmonicSettings(lmax=lmax, kchi_max=check_kchi_max(g("kchi_max"), lmax) if g("kchi_max") is not None
                         else None, terms=check_terms(g("terms")),
                         scales=tuple(float(v) for v in g("scales")) if g("scales") is not None else None,
                         complement=bool(g("complement")),
                         nside=g("nside"), noise_uk=float(g("noise_uk")), mask=g("mask"),
                         mask_b_deg=float(g("mask_b_deg")), fwhm_deg=float(g("fwhm_deg")), pixwin=bool(g("pixwin")),
                         level=float(g("level")), n_cal=int(g("n_cal")), orientation=g("orientation"),
                         orientation_nside=int(g("orientation_nside")), n_psi=int(g("n_psi")), seed=int(g("seed")))
    sec = cfg.section("harmonic")
    if s.nside is None:
        for key in ("noise_uk", "mask", "mask_b_deg", "fwhm_deg", "pixwin"):
            if key in sec and (key != "noise_uk" or s.noise_uk > 0) and (key != "mask" or s.mask != "none"):
                raise InputError("needs nside (the pixel-space divergence at that N_side)", f"[harmonic] {key}")
    elif s.noise_uk <= 0:
        raise InputError("the pixel-space divergence needs noise_uk > 0 (without noise a band-limited sky is "
                         "recovered exactly from the observed pixels: leave out nside for the full-sky one)",
                         "[harmonic] noise_uk")
    return s


def scaled(space_sec: dict, observer, scale: float, cosmology):
    """(space, observer) with the lengths and the observer's position multiplied by ``scale``."""
    from .. import geometry as geo
    from ..spaces import build_space

    spec = dict(space_sec)
    if "lengths" not in spec:
        raise InputError("scales need the family's lengths", "[space] lengths")
    try:
        spec["lengths"] = [float(v) * scale for v in spec["lengths"]]
    except (TypeError, ValueError):
        raise InputError("must be a list of numbers", "[space] lengths") from None
    space = build_space(spec, chi_rec_mpc=cosmology.chi_rec_mpc)
    point = np.array(observer.point, dtype=float)
    point[:3] *= scale
    return space, geo.Observer(observer.geometry, point, np.array(observer.frame))


def curvature_scaled(cosmology, scale: float):
    """The background with the curvature radius times ``scale``: Omega_K / scale^2 (InputError
    naming [harmonic] scales when it has no last-scattering surface)."""
    try:
        c = cosmology.with_omega_k(cosmology.omega_k / float(scale) ** 2)
        c.chi_rec_over_curvature_radius
    except InputError as e:
        raise InputError(f"scale {scale:g} (Omega_K = {cosmology.omega_k / float(scale) ** 2:.4g}): {e.reason}",
                         "[harmonic] scales") from None
    return c


def nearest_image(space, observer) -> float | None:
    """The distance from the observer to its nearest image (the space's units: chi_rec flat, R_c
    curved), None beyond NEAREST_REACH."""
    r = 2.0
    while r <= NEAREST_REACH:
        hol = space.elements_within(observer, r)
        if len(hol):
            return float(hol.displacement[0])
        r *= 2.0
    return None


def divergence(space, observer, cosmology, settings: HarmonicSettings, pixels: PixelSpace | None = None
               ) -> tuple[Divergence, object]:
    """(D(space || isotropic), the HarmonicCovariance) for one space and observer."""
    cov = space_covariance(space, observer, cosmology, lmax=settings.lmax, terms=settings.terms,
                           kchi_max=settings.kchi_max, complement=settings.complement)
    if pixels is None:
        return gaussian_kl(cov.matrix, np.diag(cov.iso_diagonal)), cov
    return pixel_kl(cov.matrix, cov.iso_diagonal, pixels), cov


def row(scale: float, d: Divergence, cov, near: float | None, cosmology=None) -> dict:
    """One row of the table; ``cosmology`` (spherical spaces) adds omega_k and chi = chi_rec / R_c."""
    chi = 1.0 if cosmology is None else float(cosmology.chi_rec_over_curvature_radius)
    out = {"scale": float(scale), "kl_nats": d.kl_nats if d.finite else None, "finite": d.finite,
           "rank": d.rank, "n": d.n, "n_modes": int(cov.n_modes), "nearest_image": near,
           "circles": bool(near is not None and near < 2.0 * chi)}
    if cosmology is not None:
        out.update(omega_k=float(cosmology.omega_k), chi=chi, kmax=int(cov.meta["kmax"]))
    return out


def divergence_rows(cfg, settings: HarmonicSettings | None = None, progress=None, keep: list | None = None) -> dict:
    """The harmonic summary of a config: {"family", "params", "lmax", "n_coefficients", "kchi_max",
    "terms", "form", "pixels", "kl_nats" (None if infinite), "finite", "rank", "rows": [...]}.
    ``progress(i, n)`` is called after each scale; ``keep`` (a list) receives the covariance of
    each scale."""
    from ..scenario import scenario_from_config

    s = settings_from_config(cfg) if settings is None else settings
    sc = scenario_from_config(cfg)
    spherical = sc.space.geometry == "spherical"
    if sc.space.geometry not in ("flat", "spherical"):
        raise InputError(f"the harmonic covariance is available for flat and spherical spaces, not "
                         f"{sc.space.geometry} (family {sc.space.family})", "[space] family")
    backgrounds = [curvature_scaled(sc.cosmology, v) for v in s.scales or ()] if spherical else None
    if spherical:                                   # every scale's cost and cut checked before any work
        from .spherical import check_spherical, check_work, degree_cut

        for c in [sc.cosmology] + backgrounds:
            chi = check_spherical(sc.space, sc.observer, c, s.terms)
            check_work(sc.space, s.lmax, degree_cut(s.lmax, chi, s.kchi_max))
    px = s.pixels()
    d, cov = divergence(sc.space, sc.observer, sc.cosmology, s, px)
    out = {"family": sc.space.family, "params": dict(sc.space.params), "geometry": sc.space.geometry,
           "lmax": s.lmax, "n_coefficients": cov.n, "kchi_max": cov.kchi_max, "terms": list(s.terms),
           "form": d.form, "pixels": px.description if px is not None else None,
           "kl_nats": d.kl_nats if d.finite else None, "finite": d.finite, "rank": d.rank,
           "nearest_image": nearest_image(sc.space, sc.observer), "rows": []}
    if spherical:
        out.update(omega_k=float(sc.cosmology.omega_k), chi=float(cov.meta["chi"]), kmax=int(cov.meta["kmax"]))
    if s.scales:
        space_sec = cfg.section("space")
        for i, scale in enumerate(s.scales):
            if spherical:
                sp, obs, cosmo = sc.space, sc.observer, backgrounds[i]
            else:
                (sp, obs), cosmo = scaled(space_sec, sc.observer, scale, sc.cosmology), sc.cosmology
            di, ci = divergence(sp, obs, cosmo, s, px)
            out["rows"].append(row(scale, di, ci, nearest_image(sp, obs), cosmo if spherical else None))
            if keep is not None:
                keep.append(ci)
            raise_if_stopped()
            if progress is not None:
                progress(i + 1, len(s.scales))
    return out


def format_kl(value) -> str:
    """A divergence for the terminal: 'inf' or 4 significant digits."""
    return "inf" if value is None or not math.isfinite(value) else f"{value:.4g}"


def read_map_pixels(settings: HarmonicSettings, map_path, mask_path=None, cosmology=None):
    """(values RING float64, pixel space) of a map at the [harmonic] nside: its observed pixels,
    less the galactic cut and a mask file (1 kept, 0 masked, the same N_side) when given; the
    monopole and dipole marginalised, the isotropic multipoles lmax < l <= 3 nside - 1 of the terms
    in the noise (:mod:`topology.harmonic.pixels`)."""
    from ..cosmology import Cosmology
    from ..maps import read_healpix
    from ..skies.spectra import isotropic_cl

    if settings.nside is None:
        raise InputError("the likelihood of a map needs nside and noise_uk (the map's N_side and noise)",
                         "[harmonic] nside")
    if not settings.scales:
        raise InputError("the likelihood profile of a map needs scales", "[harmonic] scales")
    sky = read_healpix(map_path, what="map")
    if sky.nside != settings.nside:
        raise InputError(f"the map has N_side {sky.nside}, [harmonic] nside is {settings.nside} (degrade the map "
                         "or change nside)", str(map_path))
    keep = np.asarray(sky.observed, dtype=bool).copy()
    if settings.mask == "galactic":
        from ..skies.instrument import galactic_mask

        keep &= galactic_mask(settings.nside, settings.mask_b_deg) > 0
    if mask_path is not None:
        m = read_healpix(mask_path, what="mask")
        if m.nside != settings.nside:
            raise InputError(f"the mask has N_side {m.nside}, the map {settings.nside}", str(mask_path))
        keep &= np.asarray(m.values, dtype=float) > 0.5
    extra = isotropic_cl(cosmology or Cosmology(), 3 * settings.nside - 1, settings.terms)
    px = pixel_space(settings.nside, settings.lmax, noise_uk=settings.noise_uk, mask=keep, fwhm_deg=settings.fwhm_deg,
                     pixwin=settings.pixwin, dipole=True, extra_cl=extra)
    return np.asarray(sky.values, dtype=float), px


def map_bound(settings: HarmonicSettings, values: np.ndarray, px: PixelSpace, covariances) -> dict:
    """The likelihood profile of a map against the scales and the lower bound on the scale
    (:func:`topology.harmonic.likelihood.size_bound`), as a dict; ``covariances``: one
    HarmonicCovariance per scale of ``settings.scales``."""
    from .likelihood import size_bound
    from .rotation import orientation_grid

    rots = orientation_grid(settings.orientation_nside, settings.n_psi)
    res = size_bound(px.weigh(values), list(settings.scales), [c.matrix for c in covariances],
                     covariances[0].iso_diagonal, px, rots, level=settings.level, n_cal=settings.n_cal,
                     seed=settings.seed, mode=settings.orientation)
    return {**res.as_dict(), "pixels": px.description}

