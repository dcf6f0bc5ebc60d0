"""Skies of flat multiply connected spaces E^3 / Gamma (compact E1-E10, non-compact E11-E17):
the public entry :func:`flat_sky` and the choice of method.

The flow: the space's Gamma-invariant modes and their Gaussian amplitudes
(:mod:`topology.skies.flat_modes`), then either their exact a_lm
(:mod:`topology.skies.flat_eigenmode`) or their field on an FFT grid of the covering torus
sampled at the pixel centres (:mod:`topology.skies.flat_grid`). Both methods draw the same
amplitude for the same mode from the same seed.

Modes kept: 0 < k chi_rec <= kchi_max (default ``lmax``). The SW C_l of the kept modes is
complete to about l^2 / (2 kchi_max^2) for l << kchi_max (the tail of int dx/x j_l(x)^2 beyond
x = kchi_max; common practice), so the top multipoles of a sky with kchi_max = lmax lack
power; raise ``kchi_max`` for a complete spectrum at high l.

Temperature terms:

* ["sw"] (both methods): Delta T / T = -R / 5 at x_obs + chi_rec n, the Sachs-Wolfe term of a
  matter-dominated universe on a thin last-scattering shell (Phi = -3 R / 5; Sachs & Wolfe
  1967, common practice), T = T_cmb of the cosmology, in microK. It matches exactly on
  circle pairs.
* ["sw", "doppler", "isw"] (eigenmode method only, needs camb): CAMB's line-of-sight
  temperature transfer in place of j_l (:mod:`topology.skies.flat_eigenmode`). CAMB does not
  separate the terms, so other term sets raise InputError; the grid method (one thin shell of
  one 3-D field) makes SW skies only.

Methods: ``eigenmode`` -> an alm-type Sky (l <= lmax); ``grid`` -> a map-type Sky at ``nside``
(the field sampled at the pixel centres, no pixel window); ``auto`` -> eigenmode for
lmax <= AUTO_LMAX or for the CAMB terms, else grid.

Non-compact families E11-E17 (chimneys: one open direction, slabs: two). Their spectrum is
continuous along the open directions. The sky is that of
:func:`~topology.skies.flat_modes.compact_cover`: each open direction e_d is identified with a
period L_d (default FREE_LENGTH = 6 chi_rec, three last-scattering diameters, longer when the
observer is far from a mirror or axis of the group), which turns the group into a subgroup of a
compact one (E11, E16 -> E1; E12 -> E2; E13, E14, E17 -> E7; E15 -> E9: every family embeds)
and discretises the open directions' wave numbers to k_d = 2 pi n / L_d. L_d keeps every image
of the observer added by the period at least FREE_CLEARANCE = 2.5 chi_rec away, so the cover
has exactly the space's circle pairs. Discretisation error of the expected SW spectrum against
the continuous limit (sum over the slab's k_z of the integral over k_perp;
tests/test_skies_noncompact.py): slab of thickness 1.4 chi_rec with L = 6: -0.6% at l = 2,
< 1e-4 from l = 3 on (L = 4: -2%, L = 12: -0.1% at l = 2). Cost: the cover's volume sets the
mode count, e.g. at lmax = kchi_max = 64 (the eigenmode range of "auto") a slab of thickness
1.4 has 2.2e5 modes (~10 s), a chimney of section 1.5 x 1.6 has 6.4e4 (~3 s); the grid of a
slab at lmax 128 is 300 x 300 x 72 cells.

ISW for these skies comes only with the CAMB transfer (above); the grid method has none.
"""

from __future__ import annotations

import numpy as np

from ..bandlimit import check_band_limit
from ..errors import InputError
from .base import TERMS, Sky
from .flat_eigenmode import eigenmode_alm
from .flat_grid import grid_map
from .flat_modes import check_space, compact_cover

METHODS = ("eigenmode", "grid", "auto")
AUTO_LMAX = 64             # method "auto": eigenmode up to this lmax, grid above


def _check_inputs(lmax, nside, method, terms, kchi_max, oversample):
    try:
        lmax = int(lmax)
    except (TypeError, ValueError):
        raise InputError(f"must be an integer, got {lmax!r}", "[sky] lmax") from None
    if lmax < 1:
        raise InputError(f"must be >= 1, got {lmax}", "[sky] lmax")
    if nside is not None:
        nside = int(nside)
        if nside < 1 or nside & (nside - 1):
            raise InputError(f"must be a power of two, got {nside}", "[sky] nside")
        check_band_limit(lmax, nside, "[sky] lmax")
    if method not in METHODS:
        raise InputError(f"must be one of {list(METHODS)}, got {method!r}", "[sky] method")
    terms = tuple(terms)
    bad = [t for t in terms if t not in TERMS]
    if bad or "sw" not in terms:
        raise InputError(f"must be a list from {list(TERMS)} including 'sw', got {list(terms)}", "[sky] terms")
    if set(terms) not in ({"sw"}, set(TERMS)):
        raise InputError(f"flat multiply connected skies take [\"sw\"] (analytic Sachs-Wolfe) or "
                         f"[\"sw\", \"doppler\", \"isw\"] (CAMB transfer), got {list(terms)}", "[sky] terms")
    terms = tuple(t for t in TERMS if t in terms)
    kchi = float(lmax if kchi_max is None else kchi_max)
    if not np.isfinite(kchi) or kchi <= 0:
        raise InputError(f"kchi_max must be positive, got {kchi_max}", "[sky] lmax")
    if not 1.0 <= float(oversample) <= 8.0:
        raise InputError(f"oversample must be in [1, 8], got {oversample}", "[sky] method")
    return lmax, nside, terms, kchi


def flat_sky(space, observer, cosmology, *, lmax: int, nside: int | None = None, method: str = "auto",
             terms=("sw",), seed: int = 0, kchi_max: float | None = None, oversample: float = 1.2,
             spline_order: int = 3, workers: int | None = None, free_length: float | None = None) -> Sky:
    """Sky of a flat space E1-E17 seen by ``observer`` (microK, see the module doc).

    space: topology.spaces.euclidean.FlatSpace (lengths in chi_rec); observer: flat Observer
    (position in chi_rec; sky direction n points along frame[:3] @ n); cosmology: T_cmb,
    chi_rec_mpc. kchi_max: largest k chi_rec kept (default lmax). method "eigenmode" -> alm Sky
    (l <= lmax), "grid" -> map Sky at nside, "auto" -> eigenmode for lmax <= 64 or for the CAMB
    terms, else grid. Grid only: oversample (grid cells per shortest half-wavelength),
    spline_order 3 (cubic B-spline, 64 taps) or 2 (quadratic, 27 taps: ~2x faster sampling,
    ~2x the error); workers: threads for the FFT, the normals and the sampling. Non-compact
    families E11-E17: the sky of :func:`~topology.skies.flat_modes.compact_cover` (open
    directions given the period ``free_length``, default FREE_LENGTH = 6 chi_rec; meta
    "free_axes", "free_length").
    """
    if spline_order not in (2, 3):
        raise InputError(f"spline_order must be 2 or 3, got {spline_order!r}", "[sky] method")
    lmax, nside, terms, kchi = _check_inputs(lmax, nside, method, terms, kchi_max, oversample)
    check_space(space)
    if observer.geometry != "flat":
        raise InputError(f"a flat space needs a flat observer, got {observer.geometry!r}", "[observer] position")
    given = space
    free = None
    if not space.compact:
        space, axes, lengths = compact_cover(space, observer, free_length)
        free = ("".join("xyz"[d] for d in axes), lengths)
    full = terms != ("sw",)
    if method == "auto":
        method = "eigenmode" if (lmax <= AUTO_LMAX or full) else "grid"
    if method == "grid" and full:
        raise InputError("the grid method makes Sachs-Wolfe skies only (terms = [\"sw\"]); the Doppler and ISW "
                         "terms need the line-of-sight transfer of the eigenmode method", "[sky] method")
    if method == "grid" and nside is None:
        raise InputError("the grid method needs nside", "[sky] nside")
    x_obs = np.asarray(observer.point[:3], dtype=float)
    F = np.asarray(observer.frame[:3, :], dtype=float)  # columns: sky axes in space coordinates
    meta = {"family": given.family, "params": dict(given.params), "seed": int(seed), "kchi_max": kchi,
            "observer": x_obs.tolist(), "terms": list(terms)}
    if free is not None:   # the open directions' period (the discretisation of their spectrum)
        meta.update(free_axes=free[0], free_length=",".join(f"{L:g}" for L in free[1]))
    if method == "eigenmode":
        alm, n_modes = eigenmode_alm(space, cosmology, seed, kchi, lmax, x_obs, F, transfer=full)
        meta.update(method="eigenmode", n_modes=n_modes, transfer="camb" if full else "sachs-wolfe")
        return Sky(lmax=lmax, alm=alm, nside=nside, terms=terms, meta=meta)
    sky, shape = grid_map(space, cosmology, seed, kchi, x_obs, F, nside, oversample, workers, spline_order)
    meta.update(method="grid", grid=shape, oversample=float(oversample), spline_order=int(spline_order))
    return Sky(lmax=lmax, map=sky, nside=nside, terms=terms, meta=meta)
