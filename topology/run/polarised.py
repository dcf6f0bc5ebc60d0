"""What a run of field E or T+E adds: its checks and its injected skies.

A polarised run builds every simulated sky from one spectrum and one set of terms, as a
temperature run does (:func:`topology.run.plan.check_run_terms`), here CAMB's full physics
(terms sw, doppler, isw): the null skies are isotropic T, Q, U from CAMB's TT, EE, TE
(:func:`topology.skies.polarised.polarised_sky`), the injected skies of each injected family are
polarised skies of that flat space (:func:`topology.skies.flat_polarised.flat_polarised_sky`:
T and E of one set of mode amplitudes through CAMB's T and E transfer, the complement beyond the
cut from the same TT, EE, TE). Both are observed alike (:func:`topology.skies.polarised.observe_polarised`:
the run's beam, ``noise_uk`` on I, ``noise_pol_uk`` on Q and U, pixel window) and E is made from
Q, U with the run's mask and searched as for the data (:func:`topology.run.tasks.polarised_input_of`).

Refused in one line before any work: terms other than the full set (the SW term alone has no
E); the targeted kind of run; an injected family that is not flat (there are no polarised
skies of spherical spaces); injected skies without camb (the E transfer has no shipped table);
an injected family whose polarised eigenmode sum would pass the guard of
:mod:`topology.skies.flat_eigenmode` at the smallest injection radius.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError


def check_polarised_run(field: str, terms: tuple, targets: list, families: list) -> None:
    """One-line InputError for what a run of field E or T+E cannot do (module doc; the work of
    each family's skies: :func:`check_polarised_work`)."""
    from .. import injection
    from ..skies import spectra

    if set(terms) != set(spectra.FULL_TERMS):
        raise InputError(f"field {field!r}: polarised null and injected skies need terms = [\"sw\", \"doppler\", "
                         f"\"isw\"] (CAMB's TT, EE, TE and E transfer), got {list(terms)}", "[instrument] terms")
    if targets:
        raise InputError(f"field {field!r}: the targeted run is temperature only for now; use topology search "
                         f"--mode targeted --field {field}", "[search] mode")
    for k, spec in enumerate(families):
        where = f"{injection.WHERE} #{k + 1}"
        geometry = injection.spec_geometry(spec)
        if geometry != "flat":
            raise InputError(f"field {field!r}: there are no polarised skies of {geometry} spaces; inject flat "
                             f"families only (E1-E10) in a run of field E or T+E", where)
    if families and not spectra.have_camb():
        raise InputError(f"field {field!r}: polarised injected skies need camb (CAMB's E-mode transfer): pip "
                         f"install 'topology[spectra]'", "[instrument] terms")


def check_polarised_work(spec: dict, cosmo, radii_deg, lmax: int, where: str) -> None:
    """The polarised eigenmode sum of ``spec`` at the smallest injection radius (the largest
    space) within the guard: the observer at the origin, on the screw axes of E2-E6, where the
    shortest clone distance is smallest and the scaled space largest."""
    from .. import geometry as geo
    from ..circles import predict_circles
    from ..skies.flat import choose_cut
    from ..skies.flat_eigenmode import MAX_EIGEN_WORK, eigenmode_work
    from ..skies.spectra import FULL_TERMS
    from ..spaces import build_space

    unit = build_space(spec)
    obs = geo.Observer.make("flat", np.zeros(3))
    chi = 2.0 * max(abs(float(v)) for v in unit.params.get("lengths", [1.0])) + 1.0
    pairs = predict_circles(unit, obs, chi)
    if not pairs:
        return  # injection.check says it in one line
    d_min = 2.0 * chi * math.cos(pairs[0].radius)  # shortest clone distance (as topology.injection.scaled)
    lam = 2.0 * math.cos(math.radians(float(np.min(radii_deg)))) / d_min
    sc = dict(spec)
    if "lengths" in sc:
        sc["lengths"] = [lam * float(v) for v in sc["lengths"]]
    space = build_space(sc)
    kchi = choose_cut(space, cosmo, lmax, None, "eigenmode", FULL_TERMS, 1.2, "camb")
    work = 2.0 * eigenmode_work(space, lmax, kchi)
    if work > MAX_EIGEN_WORK:
        raise InputError(f"its polarised skies at {float(np.min(radii_deg)):g} deg would need {work:.2e} mode x "
                         f"a_lm products (limit {MAX_EIGEN_WORK:.0e}); raise the smallest injection radius or "
                         f"lower [instrument] lmax", where)


def simulate_polarised(plan, space, observer, cosmology, seed: int) -> np.ndarray:
    """An observed polarised sky (I, Q, U), (3, 12 N_side^2), RING, HEALPix convention: isotropic
    when ``space`` is None, else the polarised sky of the flat ``space`` seen by ``observer``;
    the run's beam, ``noise_uk`` on I, ``noise_pol_uk`` on Q and U, pixel window (module doc).
    The mask is applied by the search, as for T."""
    from ..skies.polarised import observe_polarised, polarised_sky

    inst = plan.instrument
    if space is None:
        sky = polarised_sky(cosmology, lmax=plan.sim_lmax, terms=tuple(inst["terms"]), seed=seed)
    elif space.geometry == "flat":
        from ..skies.flat_polarised import flat_polarised_sky

        sky = flat_polarised_sky(space, observer, cosmology, lmax=plan.sim_lmax, nside=plan.sim_nside, seed=seed,
                                 terms=tuple(inst["terms"]))
    else:
        raise InputError(f"no polarised skies of {space.geometry} spaces", "[significance] injection_families")
    return observe_polarised(sky, nside=plan.sim_nside, fwhm_deg=inst["fwhm_deg"], noise_uk=inst["noise_uk"],
                             noise_pol_uk=inst.get("noise_pol_uk"), seed=seed, lmax=plan.sim_lmax)

