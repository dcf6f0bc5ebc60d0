"""Primordial normalisation and the angular power spectra of isotropic skies.

The primordial curvature spectrum is the power law P_R(k) = A_s (k / k_pivot)^(n_s - 1)
(dimensionless, per ln k), with the Planck 2018 central values (Planck 2018 VI, Table 2,
TT,TE,EE+lowE+lensing: 10^9 A_s = 2.100, n_s = 0.9649, k_pivot = 0.05 Mpc^-1, tau = 0.0544).
Every generator of the package (isotropic, flat, spherical) draws its amplitudes from this one
spectrum so that their skies are comparable.

Spectra (all C_l in microK^2, thermodynamic, l = 0..lmax, C_0 = C_1 = 0):

* :func:`sachs_wolfe_cl` - the Sachs-Wolfe term alone, Delta T / T = -R / 5 on the
  last-scattering sphere of a flat matter-dominated universe (Sachs & Wolfe 1967; the 1/5 is
  Phi = -3 R / 5, common practice): C_l = (4 pi / 25) T^2 int dk/k P_R(k) j_l(k chi_rec)^2,
  evaluated in closed form for a power law (Gradshteyn & Ryzhik 6.574.2).
* :func:`camb_cl` - CAMB's *unlensed* scalar TT spectrum for the configured cosmology: every
  linear term (Sachs-Wolfe with the full transfer function, Doppler, early and late ISW and the
  polarisation source), no lensing, no tensors. Unlensed because the skies of this package are
  linear fields of the primordial amplitudes; lensing is a remapping that none of the
  multiply connected generators applies. camb is imported only in this module.
* :func:`shipped_cl` - the same CAMB spectrum for the default cosmology, read from the table
  topology/data/camb_unlensed_tt.txt made by topology/skies/make_spectrum_table.py.
* :func:`isotropic_cl` - picks one of the above for the requested terms.
"""

from __future__ import annotations

import math
from functools import lru_cache
from importlib import resources

import numpy as np
from scipy.special import gammaln

from ..errors import InputError

# check: Planck 2018 VI (Planck Collaboration 2020, A&A 641, A6), Table 2, TT,TE,EE+lowE+lensing
A_S = 2.100e-9        # scalar amplitude at the pivot
N_S = 0.9649          # scalar spectral index
K_PIVOT = 0.05        # pivot scale in Mpc^-1
TAU_REIO = 0.0544     # optical depth to reionisation (used by CAMB only)

#: the lowest lmax CAMB is run for (the lmax of the shipped table)
CAMB_LMAX_CALC = 3100
#: the one table shipped in topology/data
TABLE_NAME = "camb_unlensed_tt.txt"
#: the terms of the full CAMB spectrum
FULL_TERMS = ("sw", "doppler", "isw")


def primordial_power(k_mpc, A_s: float = A_S, n_s: float = N_S, k_pivot: float = K_PIVOT):
    """P_R(k) = A_s (k / k_pivot)^(n_s - 1), k in Mpc^-1 (dimensionless power per ln k)."""
    with np.errstate(divide="ignore"):   # k = 0 gives inf for n_s < 1, as it should
        return A_s * (np.asarray(k_mpc, dtype=float) / k_pivot) ** (n_s - 1.0)


def sw_bessel_integral(ell, n_s: float):
    """I_l(n_s) = int_0^inf dx x^(n_s - 2) j_l(x)^2 in closed form (valid for -2l + 1 < n_s < 3).

    With j_l(x) = sqrt(pi / 2x) J_{l+1/2}(x) and Gradshteyn & Ryzhik 6.574.2 (lambda = 3 - n_s,
    nu = l + 1/2): I_l = (pi/2) Gamma(lambda) Gamma(nu + (1 - lambda)/2)
    / [2^lambda Gamma((1 + lambda)/2)^2 Gamma(nu + (1 + lambda)/2)]. For n_s = 1 this is
    1 / (2 l (l + 1)).
    """
    ell = np.asarray(ell, dtype=float)
    lam = 3.0 - n_s
    nu = ell + 0.5
    log = (gammaln(lam) + gammaln(nu + 0.5 * (1.0 - lam)) - lam * math.log(2.0)
           - 2.0 * gammaln(0.5 * (1.0 + lam)) - gammaln(nu + 0.5 * (1.0 + lam)))
    return 0.5 * math.pi * np.exp(log)


def sachs_wolfe_cl(lmax: int, cosmology, A_s: float = A_S, n_s: float = N_S,
                   k_pivot: float = K_PIVOT) -> np.ndarray:
    """SW-only isotropic spectrum C_l = (4 pi / 25) T^2 int dk/k P_R(k) j_l(k chi_rec)^2, microK^2.

    For a power law the integral is (k_pivot chi_rec)^(1 - n_s) A_s I_l(n_s)
    (:func:`sw_bessel_integral`); for n_s = 1, l (l + 1) C_l / 2 pi = A_s T^2 / 25
    (Sachs & Wolfe 1967; common practice). C_0 = C_1 = 0. chi_rec in Mpc from ``cosmology``.
    """
    lmax = int(lmax)
    cl = np.zeros(lmax + 1)
    if lmax < 2:
        return cl
    t_uk = cosmology.t_cmb * 1e6
    ell = np.arange(2, lmax + 1)
    scale = (k_pivot * cosmology.chi_rec_mpc) ** (1.0 - n_s)
    cl[2:] = 4.0 * math.pi / 25.0 * t_uk**2 * A_s * scale * sw_bessel_integral(ell, n_s)
    return cl


def have_camb() -> bool:
    """True when the ``spectra`` extra (camb) is importable."""
    try:
        import camb  # noqa: F401
    except ImportError:
        return False
    return True


def camb_params(cosmology, lmax: int, A_s: float = A_S, n_s: float = N_S, k_pivot: float = K_PIVOT):
    """CAMB parameters for ``cosmology``: massless neutrinos (N_eff), no tensors, tau = TAU_REIO.

    The package's background has N_eff massless species (topology.cosmology), so CAMB gets
    mnu = 0 and num_massive_neutrinos = 0; the recombination redshift is CAMB's own.
    """
    import camb

    pars = camb.CAMBparams()
    pars.set_cosmology(H0=100.0 * cosmology.h, ombh2=cosmology.omega_b_h2, omch2=cosmology.omega_c_h2,
                       omk=cosmology.omega_k, TCMB=cosmology.t_cmb, nnu=cosmology.n_eff, mnu=0.0,
                       num_massive_neutrinos=0, tau=TAU_REIO)
    pars.InitPower.set_params(As=A_s, ns=n_s, pivot_scalar=k_pivot)
    pars.set_for_lmax(int(lmax) + 50, lens_potential_accuracy=0)
    pars.WantTensors = False
    pars.DoLensing = False
    return pars


def camb_cl(cosmology, lmax: int, terms=FULL_TERMS, A_s: float = A_S, n_s: float = N_S,
            k_pivot: float = K_PIVOT) -> np.ndarray:
    """CAMB's unlensed scalar TT C_l in microK^2 (l = 0..lmax) for ``cosmology``.

    CAMB always runs with set_for_lmax(max(lmax, CAMB_LMAX_CALC) + 50): its low-l sampling
    depends on that setting (a run for lmax = 100 differs from one for lmax = 3100 by up to
    0.7 % at l ~ 14), so a fixed setting makes every call agree with the shipped table.
    Only the full set of terms ("sw", "doppler", "isw") is available from CAMB (it does not
    separate them without compiling custom sources); other sets raise InputError.
    """
    if tuple(sorted(terms)) != tuple(sorted(FULL_TERMS)):
        raise InputError(f"CAMB gives only the full TT spectrum (terms {list(FULL_TERMS)}), got {list(terms)}",
                         "[sky] terms")
    if not have_camb():
        raise InputError("camb is not installed: pip install 'topology[spectra]'", "[sky] terms")
    lcalc = max(int(lmax), CAMB_LMAX_CALC)
    cls = _camb_tt(cosmology, lcalc, float(A_s), float(n_s), float(k_pivot))
    cl = np.zeros(int(lmax) + 1)
    cl[: min(len(cls), int(lmax) + 1)] = cls[: int(lmax) + 1]
    cl[:2] = 0.0
    return cl


@lru_cache(maxsize=4)
def _camb_tt(cosmology, lcalc: int, A_s: float, n_s: float, k_pivot: float) -> np.ndarray:
    """CAMB's unlensed TT to ``lcalc`` (microK^2), once per process for each cosmology: every
    null sky and every flat sky's complement of a run asks for the same spectrum."""
    import camb

    pars = camb_params(cosmology, lcalc, A_s, n_s, k_pivot)
    cls = camb.get_results(pars).get_unlensed_scalar_cls(lmax=lcalc, CMB_unit="muK", raw_cl=True)
    out = np.array(cls[:, 0])
    out.setflags(write=False)
    return out


def read_shipped(name: str, path=None) -> tuple[np.ndarray, list[str]]:
    """(columns (n_rows, n_cols), header lines) of the shipped table ``name`` in topology/data
    (or of the file at ``path``)."""
    if path is None:
        text = resources.files("topology").joinpath("data", name).read_text()
    else:
        with open(path) as fh:
            text = fh.read()
    header = [ln for ln in text.splitlines() if ln.startswith("#")]
    return np.loadtxt(text.splitlines(), comments="#", ndmin=2), header


def read_table(path=None):
    """(ell, C_l in microK^2, header lines) of the shipped table (or the file at ``path``)."""
    data, header = read_shipped(TABLE_NAME, path)
    return data[:, 0].astype(int), data[:, 1], header


def shipped_lmax() -> int:
    ell, _, _ = read_table()
    return int(ell.max())


def shipped_cl(lmax: int) -> np.ndarray:
    """The shipped CAMB unlensed TT table (default cosmology) as C_l, microK^2, l = 0..lmax."""
    ell, cl_tab, _ = read_table()
    if lmax > ell.max():
        raise InputError(f"the shipped spectrum table stops at lmax = {ell.max()}; install the spectra extra "
                         "(pip install 'topology[spectra]') for higher lmax", "[sky] lmax")
    cl = np.zeros(int(lmax) + 1)
    sel = ell <= lmax
    cl[ell[sel]] = cl_tab[sel]
    cl[:2] = 0.0
    return cl


def is_default_cosmology(cosmology) -> bool:
    """True when ``cosmology`` is the package default (the cosmology of the shipped table)."""
    from ..cosmology import Cosmology

    return cosmology == Cosmology()


def isotropic_cl(cosmology, lmax: int, terms=("sw",)) -> np.ndarray:
    """The isotropic TT spectrum for ``terms`` (C_l in microK^2, l = 0..lmax).

    ("sw",): :func:`sachs_wolfe_cl` (analytic, any cosmology, no camb needed).
    ("sw", "doppler", "isw"): CAMB's unlensed TT (:func:`camb_cl`) when camb is installed,
    else the shipped table (:func:`shipped_cl`) for the default cosmology only.
    Other sets of terms raise InputError.
    """
    terms = tuple(terms)
    if set(terms) == {"sw"}:
        return sachs_wolfe_cl(lmax, cosmology)
    if set(terms) != set(FULL_TERMS):
        raise InputError(f"isotropic skies take terms [\"sw\"] or [\"sw\", \"doppler\", \"isw\"], got {list(terms)}",
                         "[sky] terms")
    if have_camb():
        return camb_cl(cosmology, lmax, terms)
    if not is_default_cosmology(cosmology):
        raise InputError("the shipped spectrum table is for the default cosmology only; install the spectra "
                         "extra (pip install 'topology[spectra]') for other cosmologies", "[cosmology]")
    return shipped_cl(lmax)
