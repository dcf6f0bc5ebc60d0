"""Background FLRW cosmology: the distance to last scattering and the curvature radius.

E(z)^2 = Omega_r (1+z)^4 + Omega_m (1+z)^3 + Omega_K (1+z)^2 + Omega_Lambda, with photons from
T_cmb (Omega_gamma = 4 sigma_SB T^4 / c^3 / rho_crit) and N_eff species of *massless*
neutrinos, Omega_nu = N_eff (7/8) (4/11)^(4/3) Omega_gamma (the standard relic density; common
practice). The comoving radial distance to last scattering is
chi_rec = (c / H0) int_0^{z_*} dz / E(z), the curvature radius R_c = (c / H0) / sqrt(|Omega_K|).

The default background is flat with the Planck 2018 TT,TE,EE+lowE+lensing central values
(Planck 2018 VI, Table 2: H0 = 67.36, omega_b h^2 = 0.02237, omega_c h^2 = 0.1200;
T_cmb = 2.7255 K from Fixsen 2009; N_eff = 3.046 is the standard-model value), with z_* from
the fitting formula of Hu & Sugiyama (1996, ApJ 471, 542, eq. E1) unless given.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace

import numpy as np
from scipy import constants, integrate, optimize

from .errors import InputError

C_KM_S = constants.c / 1e3
# rho_crit / h^2 in kg/m^3: 3 (100 km/s/Mpc)^2 / (8 pi G)
_MPC_M = constants.parsec * 1e6
_H100_SI = 100e3 / _MPC_M
RHO_CRIT_H2 = 3.0 * _H100_SI**2 / (8.0 * math.pi * constants.G)
# radiation energy density constant a = 4 sigma / c, mass density a T^4 / c^2
_A_RAD_MASS = 4.0 * constants.Stefan_Boltzmann / constants.c**3
NU_FACTOR = 7.0 / 8.0 * (4.0 / 11.0) ** (4.0 / 3.0)

PLANCK2018 = dict(h=0.6736, omega_b_h2=0.02237, omega_c_h2=0.1200, omega_k=0.0, t_cmb=2.7255, n_eff=3.046)


def z_star_hu_sugiyama(omega_b_h2: float, omega_m_h2: float) -> float:
    """Redshift of last scattering, Hu & Sugiyama (1996) eq. (E1)."""
    g1 = 0.0783 * omega_b_h2**-0.238 / (1.0 + 39.5 * omega_b_h2**0.763)
    g2 = 0.560 / (1.0 + 21.1 * omega_b_h2**1.81)
    return 1048.0 * (1.0 + 0.00124 * omega_b_h2**-0.738) * (1.0 + g1 * omega_m_h2**g2)


@dataclass(frozen=True)
class Cosmology:
    """Background parameters. ``z_star = None`` means the Hu & Sugiyama fit."""

    h: float = PLANCK2018["h"]
    omega_b_h2: float = PLANCK2018["omega_b_h2"]
    omega_c_h2: float = PLANCK2018["omega_c_h2"]
    omega_k: float = PLANCK2018["omega_k"]
    t_cmb: float = PLANCK2018["t_cmb"]
    n_eff: float = PLANCK2018["n_eff"]
    z_star: float | None = None

    def __post_init__(self):
        checks = [
            ("h", 0.1 <= self.h <= 2.0, "H0 = 100 h km/s/Mpc needs h in [0.1, 2]"),
            ("omega_b_h2", self.omega_b_h2 > 0, "the physical baryon density must be positive"),
            ("omega_c_h2", self.omega_c_h2 >= 0, "the physical dark-matter density must not be negative"),
            ("t_cmb", self.t_cmb > 0, "the CMB temperature must be positive (K)"),
            ("n_eff", self.n_eff >= 0, "the number of neutrino species must not be negative"),
            ("z_star", self.z_star is None or 1.0 < self.z_star < 1e5, "the redshift of last scattering must be in (1, 1e5)"),
        ]
        for key, ok, msg in checks:
            if not ok:
                raise InputError(f"{msg}, got {getattr(self, key)!r}", f"[cosmology] {key}")
        z_min, e2_min = self.e2_minimum()
        if e2_min <= 0:
            # E^2(0) = 1 > 0, so E^2 crosses zero below z_min: the redshift of the bounce
            z_b = optimize.brentq(lambda z: float(self.e2(z)), 0.0, z_min) if z_min > 0 else 0.0
            raise InputError(
                f"no last-scattering surface: with Omega_m = {self.omega_m:.4g}, Omega_K = {self.omega_k:.4g} and "
                f"Omega_Lambda = {self.omega_lambda:.4g}, H(z)^2 = H0^2 E(z)^2 reaches 0 at z = {z_b:.3g} "
                f"(a bounce, no big bang), before z_* = {self.zstar:.0f}", "[cosmology] omega_k")
        if not -1.0 < self.omega_k < 1.0:
            raise InputError(f"the curvature density must be in (-1, 1), got {self.omega_k!r}", "[cosmology] omega_k")
        if self.omega_k < 0:
            ratio = self.chi_rec_over_curvature_radius
            if ratio >= math.pi:
                raise InputError(f"chi_rec / R_c = {ratio:.3f} >= pi: the last-scattering sphere wraps around S^3 "
                                 f"(a closed universe this curved has no last-scattering sphere to search)",
                                 "[cosmology] omega_k")

    def e2_minimum(self) -> tuple[float, float]:
        """(z, E(z)^2) at the smallest E^2 over 0 <= z <= z_*, exactly.

        E^2 is the polynomial O_r x^4 + O_m x^3 + O_K x^2 + O_L in x = 1 + z; its interior
        extrema solve x (4 O_r x^2 + 3 O_m x + 2 O_K) = 0, so the minimum is at an end point or at
        a positive root of the quadratic.
        """
        x1 = 1.0 + self.zstar
        xs = [1.0, x1]
        roots = np.roots([4.0 * self.omega_r, 3.0 * self.omega_m, 2.0 * self.omega_k])
        xs += [float(r.real) for r in roots if abs(r.imag) < 1e-12 and 1.0 < r.real < x1]
        vals = [float(self.e2(x - 1.0)) for x in xs]
        i = int(np.argmin(vals))
        return xs[i] - 1.0, vals[i]

    # -- densities ---------------------------------------------------------------------------
    @property
    def H0(self) -> float:
        """Hubble constant in km/s/Mpc."""
        return 100.0 * self.h

    @property
    def hubble_distance_mpc(self) -> float:
        return C_KM_S / self.H0

    @property
    def omega_gamma(self) -> float:
        return _A_RAD_MASS * self.t_cmb**4 / (RHO_CRIT_H2 * self.h**2)

    @property
    def omega_nu(self) -> float:
        return self.n_eff * NU_FACTOR * self.omega_gamma

    @property
    def omega_r(self) -> float:
        return self.omega_gamma + self.omega_nu

    @property
    def omega_m(self) -> float:
        return (self.omega_b_h2 + self.omega_c_h2) / self.h**2

    @property
    def omega_lambda(self) -> float:
        return 1.0 - self.omega_m - self.omega_r - self.omega_k

    @property
    def zstar(self) -> float:
        if self.z_star is not None:
            return float(self.z_star)
        return z_star_hu_sugiyama(self.omega_b_h2, self.omega_b_h2 + self.omega_c_h2)

    def e2(self, z):
        a1 = 1.0 + np.asarray(z, dtype=float)
        return self.omega_r * a1**4 + self.omega_m * a1**3 + self.omega_k * a1**2 + self.omega_lambda

    # -- distances ---------------------------------------------------------------------------
    def comoving_distance_mpc(self, z: float) -> float:
        """chi(z) = (c/H0) int_0^z dz'/E(z'), integrated in ln(1+z) for accuracy."""
        f = lambda u: math.exp(u) / math.sqrt(float(self.e2(math.expm1(u))))  # noqa: E731
        val, _ = integrate.quad(f, 0.0, math.log1p(z), epsabs=0.0, epsrel=1e-11, limit=200)
        return self.hubble_distance_mpc * val

    @property
    def chi_rec_mpc(self) -> float:
        return self.comoving_distance_mpc(self.zstar)

    @property
    def curvature_radius_mpc(self) -> float:
        """R_c = (c/H0)/sqrt(|Omega_K|); inf when flat."""
        if self.omega_k == 0:
            return math.inf
        return self.hubble_distance_mpc / math.sqrt(abs(self.omega_k))

    @property
    def geometry(self) -> str:
        if self.omega_k == 0:
            return "flat"
        return "spherical" if self.omega_k < 0 else "hyperbolic"

    @property
    def chi_rec_over_curvature_radius(self) -> float | None:
        """chi_rec / R_c (None when flat)."""
        if self.omega_k == 0:
            return None
        return math.sqrt(abs(self.omega_k)) * self.comoving_distance_mpc(self.zstar) / self.hubble_distance_mpc

    def with_omega_k(self, omega_k: float) -> "Cosmology":
        """The same h, omega_b h^2, omega_c h^2 (and z_*) with Omega_Lambda taking up the change."""
        return replace(self, omega_k=omega_k)

    def as_dict(self) -> dict:
        d = asdict(self)
        d.update(z_star_used=self.zstar, omega_m=self.omega_m, omega_r=self.omega_r,
                 omega_lambda=self.omega_lambda, chi_rec_mpc=self.chi_rec_mpc)
        return d


def omega_k_for_ratio(cosmo: Cosmology, ratio: float, sign: int) -> float | None:
    """Omega_K (sign -1 closed, +1 open) at which chi_rec / R_c equals ``ratio``.

    Varies Omega_K at fixed h, omega_b h^2, omega_c h^2 and z_* with Omega_Lambda taking up the
    difference. chi_rec/R_c grows monotonically with |Omega_K| in the range searched; returns
    None when the ratio is not reached for |Omega_K| < 0.5.
    """
    if ratio <= 0:
        return 0.0
    base = replace(cosmo, z_star=cosmo.zstar)

    def f(ok_abs):
        c = base.with_omega_k(sign * ok_abs) if ok_abs > 0 else base
        return math.sqrt(ok_abs) * c.chi_rec_mpc / c.hubble_distance_mpc - ratio

    hi = 0.5
    try:
        if f(hi) < 0:
            return None
    except InputError:
        hi = 0.2
        if f(hi) < 0:
            return None
    ok_abs = optimize.brentq(f, 1e-14, hi, xtol=1e-14, rtol=1e-12)
    return sign * ok_abs


def cosmology_from_section(sec: dict) -> Cosmology:
    """The background of a ``[cosmology]`` table (keys as in :class:`Cosmology`, or ``omega_lambda``
    instead of ``omega_k``: Omega_K = 1 - Omega_m - Omega_r - Omega_Lambda).

    Errors about the curvature name ``omega_lambda`` when that is the key the table gives.
    """
    sec = {k: (float(v) if v is not None else None) for k, v in dict(sec).items()}
    if "omega_lambda" not in sec:
        return Cosmology(**sec)
    if "omega_k" in sec:
        raise InputError("give omega_k or omega_lambda, not both", "[cosmology] omega_lambda")
    lam = sec.pop("omega_lambda")
    probe = Cosmology(**sec)  # flat: only its Omega_m and Omega_r are used
    sec["omega_k"] = 1.0 - probe.omega_m - probe.omega_r - lam
    try:
        return Cosmology(**sec)
    except InputError as e:
        if e.where != "[cosmology] omega_k":
            raise
        reason = e.reason if "Omega_Lambda =" in e.reason else (
            f"Omega_Lambda = {lam:g} gives Omega_K = 1 - Omega_m - Omega_r - Omega_Lambda = {sec['omega_k']:.4g}: "
            f"{e.reason}")
        raise InputError(reason, "[cosmology] omega_lambda") from None
