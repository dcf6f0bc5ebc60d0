"""CAMB temperature transfer functions Delta_l(k) for skies built from plane waves.

For one Fourier mode of the primordial curvature, R(x) = R_k e^{i k.x}, linear theory gives
the observed temperature a_lm = 4 pi i^l Delta_l(k) Y*_lm(k^) R_k, with Delta_l(k) the
line-of-sight integral of the temperature sources (Seljak & Zaldarriaga 1996; CAMB's
``get_cmb_transfer_data``), normalised so that C_l = 4 pi int dk/k P_R(k) Delta_l(k)^2. It
contains the Sachs-Wolfe term with the full transfer function and the finite thickness of
last scattering, the Doppler term, the early and late ISW terms and the polarisation source;
at large scales Delta_l(k) -> -j_l(k chi_rec) / 5 (the SW limit, Delta T / T = -R / 5).
The E-mode transfer Delta^E_l(k) (:func:`emode_transfer`) comes from the same CAMB run, so T
and E of one mode share its amplitude R_k and the sky's TE is CAMB's.

The transfer does not depend on the topology of a flat space (the modes are plane waves of
the universal cover), so the same Delta_l(k) serves every flat multiply connected sky.
camb is imported only here and in :mod:`topology.skies.spectra`.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from scipy.interpolate import CubicSpline

from ..errors import InputError
from .spectra import camb_params, have_camb

#: CAMB's output k sampling is refined by this factor (IntkAccuracyBoost): the cubic spline of
#: Delta_l(k) between its samples is then accurate to ~1e-3 of its peak (measured by halving)
K_BOOST = 4


@lru_cache(maxsize=4)
def _camb_sources(cosmology, lmax: int):
    """(L, q, Delta_T, Delta_E) of one CAMB run: every l <= lmax, q in Mpc^-1 (k in a flat
    universe), the temperature and E-mode line-of-sight sources (L, q) as CAMB returns them."""
    import camb

    pars = camb_params(cosmology, lmax)
    pars.Accuracy.lSampleBoost = 50          # every l, no interpolation in l
    pars.Accuracy.IntkAccuracyBoost = K_BOOST
    res = camb.get_results(pars)
    td = res.get_cmb_transfer_data()
    L = np.asarray(td.L, dtype=int)
    q = np.asarray(td.q, dtype=float)        # Mpc^-1 (k in a flat universe)
    src = np.asarray(td.delta_p_l_k, dtype=float)   # (source, L, q): 0 temperature, 1 E
    keep = L <= lmax
    return L[keep], q, src[0][keep], src[1][keep]


def _camb_table(cosmology, lmax: int):
    L, q, delta, _ = _camb_sources(cosmology, lmax)
    return L, q, delta


def transfer_k_range(cosmology, lmax: int) -> tuple[float, float]:
    """(k_min, k_max) in Mpc^-1 of CAMB's transfer samples, the range :func:`temperature_transfer` takes."""
    if not have_camb():
        raise InputError("terms beyond 'sw' need camb: pip install 'topology[spectra]'", "[sky] terms")
    _, q, _ = _camb_table(cosmology, 100 * -(-int(lmax) // 100))
    return float(q[0]), float(q[-1])


def _check(cosmology, what: str, where: str) -> None:
    if cosmology.omega_k != 0:
        raise InputError("the CAMB plane-wave transfer is for flat backgrounds only", "[cosmology] omega_k")
    if not have_camb():
        raise InputError(f"{what} need camb: pip install 'topology[spectra]'", where)


def _spline_callable(L, q, delta):
    """Delta(ell, k_mpc) -> (len(ell), len(k)): cubic spline in k of the rows of ``delta``."""
    spline = CubicSpline(q, delta, axis=1)
    row = {int(l): i for i, l in enumerate(L)}

    def transfer(ell, k_mpc):
        ell = np.asarray(ell, dtype=int)
        k = np.asarray(k_mpc, dtype=float)
        if k.size and (k.min() < q[0] * (1 - 1e-9) or k.max() > q[-1] * (1 + 1e-9)):
            raise InputError(f"wave numbers {k.min():.3g}..{k.max():.3g} Mpc^-1 fall outside CAMB's transfer "
                             f"range {q[0]:.3g}..{q[-1]:.3g} Mpc^-1 (space too large or kchi_max too high)",
                             "[space] lengths")
        vals = spline(np.clip(k, q[0], q[-1]))   # (len(L), len(k))
        out = np.zeros((ell.size, k.size))
        for j, l in enumerate(ell):
            if l in row:
                out[j] = vals[row[l]]
        return out

    return transfer


def temperature_transfer(cosmology, lmax: int):
    """A callable Delta(ell, k_mpc) -> (len(ell), len(k)) of CAMB's temperature transfer.

    ell: integers 0..lmax (Delta_0 = Delta_1 = 0: the monopole and dipole are not computed);
    k_mpc: wave numbers in Mpc^-1 within CAMB's range (InputError otherwise). Cubic spline in k.
    """
    _check(cosmology, "terms beyond 'sw'", "[sky] terms")
    return _cached_transfer(cosmology, 100 * -(-int(lmax) // 100), "T")   # one CAMB run per 100 in lmax


@lru_cache(maxsize=8)
def _cached_transfer(cosmology, lcalc: int, which: str):
    """The spline callable of one source ("T" or "E", the latter with its factorial), built once
    per process (a spline over every l and ~4000 k takes ~0.2 s)."""
    L, q, delta_t, delta_e = _camb_sources(cosmology, lcalc)
    if which == "T":
        return _spline_callable(L, q, delta_t)
    lf = L.astype(float)
    factor = np.sqrt(np.clip((lf - 1.0) * lf * (lf + 1.0) * (lf + 2.0), 0.0, None))
    return _spline_callable(L, q, delta_e * factor[:, None])


def emode_transfer(cosmology, lmax: int):
    """A callable Delta^E(ell, k_mpc) -> (len(ell), len(k)) of CAMB's E-mode transfer, normalised
    like the temperature one: C_l^EE = 4 pi int dk/k P_R(k) Delta^E_l(k)^2 and
    C_l^TE = 4 pi int dk/k P_R Delta_l Delta^E_l (times T_cmb^2), and a_E,lm = 4 pi i^l
    Delta^E_l(k) Y*_lm(k^) R_k for one mode (HEALPix's E, the sign of CAMB's TE).

    CAMB's polarisation source row lacks the factor sqrt((l + 2)! / (l - 2)!) of
    Delta^E_l = sqrt((l+2)!/(l-2)!) int deta S_P j_l(x) / x^2 (Zaldarriaga & Seljak 1997, eq. 18;
    checked against CAMB's own unlensed EE and TE in tests/test_skies_flat_polarised.py); it is
    applied here. Delta^E_0 = Delta^E_1 = 0. Same k range and spline as :func:`temperature_transfer`.
    """
    _check(cosmology, "polarised flat skies", "[sky] polarisation")
    return _cached_transfer(cosmology, 100 * -(-int(lmax) // 100), "E")
