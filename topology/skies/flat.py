"""Skies of flat multiply connected spaces E^3 / Gamma (compact E1-E10, non-compact E11-E17):
the public entry :func:`flat_sky` and the choice of method.

The flow: the space's Gamma-invariant modes and their Gaussian amplitudes
(:mod:`topology.skies.flat_modes`), then either their exact a_lm
(:mod:`topology.skies.flat_eigenmode`) or their field on an FFT grid of the covering torus
sampled at the pixel centres (:mod:`topology.skies.flat_grid`). Both methods draw the same
amplitude for the same mode from the same seed.

Modes kept, their boost and the complement. The lattice modes 0 < k chi_rec <= K (the cut,
:func:`choose_cut`) with the radial weight of :func:`topology.skies.flat_cut.cut_profile`: a
taper over the last 8 of K and "boost" bumps below it whose weights make the modes there carry
half (BOOST_SHARE) of the power of the modes beyond the cut (a mode of k chi_rec >> l adds about
the same power to every l < k chi_rec, as those beyond do), placed only where the lattice is
dense. Unless ``complete=False``, the isotropic Gaussian field of the power still missing,
C_l - C_l(K) (:mod:`topology.skies.flat_cut`), drawn from the "tail" stream of the seed (a_lm
to lmax), from the same spectrum function as the isotropic null skies. The expected C_l is then
the isotropic one at every l <= lmax (to 3e-3 for E1 of side 4 chi_rec,
tests/test_skies_flat_cut.py), apart from the lattice's discreteness at low l, which is the
topology. A bare cut would need K ~ 7 lmax for 1 % at l = lmax (SW;
:func:`topology.skies.flat_cut.cut_for_accuracy`), ~350 times the modes of K = lmax. Why half:
on a map cut at l_max the modes beyond the cut match on circles only in part, so lattice modes
carrying all their power overstate the matched-circle correlation of the true sky and an
isotropic field carrying all of it understates it (measured in
:func:`topology.skies.flat_cut.cut_profile` and the README).

Default cut: the lattice cut (:func:`topology.skies.flat_cut.lattice_cut`), the smallest K at
which the boost carries its share to within LATTICE_SHARE = 2 % of every C_l (l <= lmax): 1.15
lmax at lmax 64, 1.1 lmax at lmax 128 (SW), 1.1-1.85 lmax with the CAMB terms, i.e. 1.3-1.5
times the modes of K = lmax (SW). The grid's cut is also capped by the pixels
(:func:`pixel_cut`: the sampled map holds l up to about K, and power beyond 3 N_side would alias
in the harmonic transform) and by the cost (at most GRID_CELLS_PER_PIXEL grid cells per pixel,
the grid of the speed target), never below lmax: K ~ lmax at the speed target (N_side 256,
l_max 512, side 1.6 chi_rec).

Temperature terms:

* ["sw"] (both methods): Delta T / T = -R / 5 at x_obs + chi_rec n, the Sachs-Wolfe term of a
  matter-dominated universe on a thin last-scattering shell (Phi = -3 R / 5; Sachs & Wolfe
  1967, common practice), T = T_cmb of the cosmology, in microK. It matches exactly on
  circle pairs.
* ["sw", "doppler", "isw"] (both methods): the line-of-sight temperature transfer in place of
  j_l(k chi_rec): SW with the transfer function and the thickness of last scattering, Doppler,
  early and late ISW, reionisation (CAMB; its terms are not separable, so other sets raise
  InputError). Eigenmode method: CAMB's Delta_l(k) itself (:mod:`topology.skies.transfer`).
  Grid method: the sky of a few shells, sum_s F_s(x_obs + r_s n) with weights g_s(k) fitted
  to CAMB's Delta_l(k) (:mod:`topology.skies.transfer_shells`; 6 shells near last scattering
  for every k, 19 shells for k chi_rec <= 100: ~6-7 times the SW grid's cost). Without camb
  both use the shell fit shipped for the default cosmology (l <= 1024). The complement has the
  isotropic C_l of these terms (CAMB's unlensed TT, or the shipped table) minus the kept power
  with the same R_l, so the expected C_l is the isotropic one either way.

Methods: ``eigenmode`` -> an alm-type Sky (l <= lmax); ``grid`` -> a map-type Sky at ``nside``
(the field sampled at the pixel centres, no pixel window); ``auto`` -> eigenmode for
lmax <= AUTO_LMAX, else grid.

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

ISW for these skies comes only with the CAMB terms (above).
"""

from __future__ import annotations

import numpy as np

from ..bandlimit import check_band_limit, lmax_limit
from ..errors import InputError
from .base import TERMS, Sky, stream_rng
from .flat_eigenmode import eigenmode_alm
from .flat_cut import cut_profile, transfer_source
from .flat_grid import grid_map
from .flat_modes import check_space, compact_cover, plain_profile

METHODS = ("eigenmode", "grid", "auto")
AUTO_LMAX = 64             # method "auto": eigenmode up to this lmax, grid above
#: grid cost bound of the default cut: cells per pixel of N_side (E1 of side 1.6 chi_rec at
#: N_side 256, l_max 512, the speed target of benchmarks/flat_sky_speed.py, has 320^3 cells, 42
#: per pixel)
GRID_CELLS_PER_PIXEL = 42.0


def pixel_cut(nside: int) -> float:
    """The largest cut K whose sky the pixels of N_side hold: a mode k projects onto l up to
    about k chi_rec + 4 (k chi_rec)^(1/3) (j_l(x) < 2e-4 of its peak beyond), and a map with
    power up to 3 N_side - 1 goes to a_lm (l <= 2 N_side) within 1e-3 of the power (healpy
    map2alm, measured), while power beyond 3 N_side aliases by per cents."""
    top = float(lmax_limit(int(nside)))
    k = top
    for _ in range(20):                    # K + 4 K^(1/3) = 3 N_side - 1
        k = top - 4.0 * k ** (1.0 / 3.0)
    return max(k, 1.0)


def choose_cut(space, cosmology, lmax: int, nside: int | None, method: str, terms, oversample: float = 1.2,
               source: str = "sw") -> float:
    """The default cut K (k chi_rec) of a flat sky; see the module doc.

    K_lattice: the smallest cut whose boosted lattice leaves at most LATTICE_SHARE of any C_l to
    the isotropic complement (:func:`topology.skies.flat_cut.lattice_cut`). eigenmode:
    K_lattice, lowered (not below lmax) while the work would pass the eigenmode guard. grid:
    max(lmax, min(K_lattice, K_pix, K_cost)), K_pix of :func:`pixel_cut`, K_cost the largest cut
    whose grid has at most GRID_CELLS_PER_PIXEL x 12 N_side^2 cells.
    """
    from .flat_cut import lattice_cut
    from .flat_eigenmode import MAX_EIGEN_WORK, eigenmode_work
    from .flat_grid import grid_shape

    lmax = int(lmax)
    k_lattice = lattice_cut(cosmology, lmax, terms, source, volume=space.covering_cell_volume)
    if method != "grid":
        k = k_lattice
        while k > lmax and eigenmode_work(space, lmax, k) > MAX_EIGEN_WORK:
            k = max(float(lmax), k - max(1.0, lmax / 20.0))
        return float(k)
    k_pix = pixel_cut(nside) if nside is not None else 0.0
    if k_pix <= lmax:
        return float(lmax)
    cells = GRID_CELLS_PER_PIXEL * 12 * nside * nside

    def fits(k):
        return float(np.prod(grid_shape(space, k, oversample), dtype=float)) <= cells

    if not fits(float(lmax) + 1.0):
        return float(lmax)
    hi = min(k_pix, k_lattice)
    if fits(hi):
        return hi
    lo = float(lmax)
    while hi - lo > 0.5:
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if fits(mid) else (lo, mid)
    return lo


def complement(cosmology, lmax: int, kchi: float, terms, seed: int, source: str = "camb",
               volume: float | None = None) -> tuple[np.ndarray, float]:
    """(a_lm to lmax, healpy order; largest share of any C_l): the isotropic field of the power
    the boosted lattice of a torus of ``volume`` leaves out
    (:func:`topology.skies.flat_cut.complement_cl`, R_l from ``source``), drawn from the "tail"
    stream of ``seed``."""
    from .flat_cut import complement_cl
    from .isotropic import gaussian_alm
    from .spectra import isotropic_cl

    cl = complement_cl(cosmology, lmax, kchi, terms, source, volume=volume)
    iso = isotropic_cl(cosmology, lmax, terms)
    share = float(np.max(cl[2:] / iso[2:])) if lmax >= 2 else 0.0
    return gaussian_alm(cl, stream_rng(seed, "tail")), share


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
    if kchi_max is not None and not (np.isfinite(float(kchi_max)) and float(kchi_max) > 0):
        raise InputError(f"kchi_max must be positive, got {kchi_max}", "[sky] lmax")
    if not 1.0 <= float(oversample) <= 8.0:
        raise InputError(f"oversample must be in [1, 8], got {oversample}", "[sky] method")
    return lmax, nside, terms


def flat_sky(space, observer, cosmology, *, lmax: int, nside: int | None = None, method: str = "auto",
             terms=("sw",), seed: int = 0, kchi_max: float | None = None, oversample: float = 1.2,
             spline_order: int = 3, workers: int | None = None, free_length: float | None = None,
             complete: bool = True) -> Sky:
    """Sky of a flat space E1-E17 seen by ``observer`` (microK, see the module doc).

    space: topology.spaces.euclidean.FlatSpace (lengths in chi_rec); observer: flat Observer
    (position in chi_rec; sky direction n points along frame[:3] @ n); cosmology: T_cmb,
    chi_rec_mpc. kchi_max: largest k chi_rec kept (default :func:`choose_cut`); ``complete``: add
    the isotropic complement of the power beyond it (module doc; meta "complement_lmax" is its
    share of C_lmax). method "eigenmode" -> alm Sky (l <= lmax), "grid" -> map Sky at nside,
    "auto" -> eigenmode for lmax <= 64, else grid. Grid only: oversample (grid cells per
    shortest half-wavelength),
    spline_order 3 (cubic B-spline, 64 taps) or 2 (quadratic, 27 taps: ~2x faster sampling,
    ~2x the error); workers: threads for the FFT, the normals and the sampling. Non-compact
    families E11-E17: the sky of :func:`~topology.skies.flat_modes.compact_cover` (open
    directions given the period ``free_length``, default FREE_LENGTH = 6 chi_rec; meta
    "free_axes", "free_length").
    """
    if spline_order not in (2, 3):
        raise InputError(f"spline_order must be 2 or 3, got {spline_order!r}", "[sky] method")
    lmax, nside, terms = _check_inputs(lmax, nside, method, terms, kchi_max, oversample)
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
        method = "eigenmode" if lmax <= AUTO_LMAX else "grid"
    if method == "grid" and nside is None:
        raise InputError("the grid method needs nside", "[sky] nside")
    source = transfer_source(method) if full else "sw"
    kchi = float(kchi_max) if kchi_max is not None else choose_cut(space, cosmology, lmax, nside, method, terms,
                                                                    oversample, source)
    volume = space.covering_cell_volume
    profile = cut_profile(cosmology, lmax, kchi, terms, source, volume=volume)[0] if complete else plain_profile(kchi)
    x_obs = np.asarray(observer.point[:3], dtype=float)
    F = np.asarray(observer.frame[:3, :], dtype=float)  # columns: sky axes in space coordinates
    meta = {"family": given.family, "params": dict(given.params), "seed": int(seed), "kchi_max": kchi,
            "observer": x_obs.tolist(), "terms": list(terms)}
    if free is not None:   # the open directions' period (the discretisation of their spectrum)
        meta.update(free_axes=free[0], free_length=",".join(f"{L:g}" for L in free[1]))
    meta["boost_max_w2"] = round(profile.largest_square(), 4)
    meta["transfer"] = {"sw": "sachs-wolfe", "camb": "camb", "shells": "camb shells"}[source]
    if method == "eigenmode":
        alm, n_modes = eigenmode_alm(space, cosmology, seed, kchi, lmax, x_obs, F, transfer=full, profile=profile)
        meta.update(method="eigenmode", n_modes=n_modes)
        if complete:
            extra, meta["complement_lmax"] = complement(cosmology, lmax, kchi, terms, seed, source, volume)
            alm += extra
        return Sky(lmax=lmax, alm=alm, nside=nside, terms=terms, meta=meta)
    shells = None
    if full:
        from .transfer_shells import shell_transfer

        shells = shell_transfer(cosmology, lmax, kchi)
    sky, shape = grid_map(space, cosmology, seed, kchi, x_obs, F, nside, oversample, workers, spline_order, shells,
                          lmax, profile)
    if complete:
        import healpy as hp

        extra, meta["complement_lmax"] = complement(cosmology, lmax, kchi, terms, seed, source, volume)
        sky += hp.alm2map(extra, nside, lmax=lmax)
    meta.update(method="grid", grid=shape, oversample=float(oversample), spline_order=int(spline_order))
    return Sky(lmax=lmax, map=sky, nside=nside, terms=terms, meta=meta)
