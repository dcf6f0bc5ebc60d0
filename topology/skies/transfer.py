"""CAMB temperature transfer functions Delta_l(k) for skies built from plane waves.

For one Fourier mode of the primordial curvature, R(x) = R_k e^{i k.x}, linear theory gives
the observed temperature a_lm = 4 pi i^l Delta_l(k) Y*_lm(k^) R_k, with Delta_l(k) the
line-of-sight integral of the temperature sources (Seljak & Zaldarriaga 1996; CAMB's
``get_cmb_transfer_data``), normalised so that C_l = 4 pi int dk/k P_R(k) Delta_l(k)^2. It
contains the Sachs-Wolfe term with the full transfer function and the finite thickness of
last scattering, the Doppler term, the early and late ISW terms and the polarisation source;
at large scales Delta_l(k) -> -j_l(k chi_rec) / 5 (the SW limit, Delta T / T = -R / 5).

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
def _camb_table(cosmology, lmax: int):
    import camb

    pars = camb_params(cosmology, lmax)
    pars.Accuracy.lSampleBoost = 50          # every l, no interpolation in l
    pars.Accuracy.IntkAccuracyBoost = K_BOOST
    res = camb.get_results(pars)
    td = res.get_cmb_transfer_data()
    L = np.asarray(td.L, dtype=int)
    q = np.asarray(td.q, dtype=float)        # Mpc^-1 (k in a flat universe)
    delta = np.asarray(td.delta_p_l_k[0], dtype=float)  # temperature source, (L, q)
    keep = L <= lmax
    return L[keep], q, delta[keep]



def transfer_k_range(cosmology, lmax: int) -> tuple[float, float]:
    """(k_min, k_max) in Mpc^-1 of CAMB's transfer samples, the range :func:`temperature_transfer` takes."""
    if not have_camb():
        raise InputError("terms beyond 'sw' need camb: pip install 'topology[spectra]'", "[sky] terms")
    _, q, _ = _camb_table(cosmology, 100 * -(-int(lmax) // 100))
    return float(q[0]), float(q[-1])


def temperature_transfer(cosmology, lmax: int):
    """A callable Delta(ell, k_mpc) -> (len(ell), len(k)) of CAMB's temperature transfer.

    ell: integers 0..lmax (Delta_0 = Delta_1 = 0: the monopole and dipole are not computed);
    k_mpc: wave numbers in Mpc^-1 within CAMB's range (InputError otherwise). Cubic spline in k.
    """
    if cosmology.omega_k != 0:
        raise InputError("the CAMB plane-wave transfer is for flat backgrounds only", "[cosmology] omega_k")
    if not have_camb():
        raise InputError("terms beyond 'sw' need camb: pip install 'topology[spectra]'", "[sky] terms")
    L, q, delta = _camb_table(cosmology, 100 * -(-int(lmax) // 100))  # one CAMB run per 100 in lmax
    spline = CubicSpline(q, delta, axis=1)
    row = {int(l): i for i, l in enumerate(L)}

    def transfer(ell, k_mpc):
        ell = np.asarray(ell, dtype=int)
        k = np.asarray(k_mpc, dtype=float)
        if k.size and (k.min() < q[0] or k.max() > q[-1]):
            raise InputError(f"wave numbers {k.min():.3g}..{k.max():.3g} Mpc^-1 fall outside CAMB's transfer "
                             f"range {q[0]:.3g}..{q[-1]:.3g} Mpc^-1 (space too large or kchi_max too high)",
                             "[space] lengths")
        vals = spline(k)                     # (len(L), len(k))
        out = np.zeros((ell.size, k.size))
        for j, l in enumerate(ell):
            if l in row:
                out[j] = vals[row[l]]
        return out

    return transfer
