"""CAMB's temperature transfer as a sum over a few spherical shells, for flat skies made on a grid.

The line-of-sight integral Delta_l(k) = int dr S(k, r) j_l(k r) (Seljak & Zaldarriaga 1996)
holds the Sachs-Wolfe term with the transfer function and the thickness of last scattering, the
Doppler term, the early and late ISW terms and reionisation. On a grid a sky can sample one 3-D
field on one sphere, so the integral is replaced by a few shells of fixed radii r_s with
weights g_s(k) fitted per wave number:

    R_l(k) = -5 Delta_l(k)  ~  sum_s g_s(k) j_l(k r_s),

i.e. the sky is sum_s F_s(x_obs + r_s n) with F_s the field of amplitudes c_q g_s(|q|)
(:mod:`topology.skies.flat_grid`). R_l -> j_l(k chi_rec) in the SW limit (the normalisation of
:mod:`topology.skies.flat_eigenmode`). Radii (units of chi_rec): NEAR = chi_rec + (-500, -200,
-40, -13, 13, 40) Mpc for every k (recombination: the visibility and its derivative terms within
+-40 Mpc; early ISW a few hundred Mpc later), LATE = 0.05, 0.10, ..., 0.95 for k chi_rec <=
K_LATE = 100 (late ISW and reionisation act on large scales only). The fit minimises, per k,

    sum_{l=2}^{L} (R_l(k) - sum_s g_s j_l(k r_s))^2 / C_l  +  lambda |g|^2,

C_l = int dk/k P_R R_l^2 (equal relative weight per l), lambda = 1e-8 tr / n_s (Tikhonov, so
that g_s(k) is smooth in k and a cubic spline over k chi_rec in steps of 1 holds it); on its own
side of K_LATE each. Measured for the default cosmology (L = 512; R_l from CAMB): the power of
R - R_fit is at most 1e-2 of C_l (l = 12; median 5e-4) and the fitted C_l lies within -1.2 %
.. +0.7 % of CAMB's transfer integral; the complement of :mod:`topology.skies.flat_cut` is
computed with the fitted R_l, so a sky's expected C_l stays the isotropic one.

Source of the weights: :func:`shell_transfer` fits them with CAMB (cached per process) or,
without camb, reads the table shipped for the default cosmology (topology/data/TABLE_NAME,
made by ``python -m topology.skies.make_transfer_table``), valid to l = TABLE_LMAX and
k chi_rec = TABLE_KMAX.
"""

from __future__ import annotations

import math
from functools import lru_cache
from importlib import resources

import numpy as np
from scipy.interpolate import CubicSpline

from ..errors import InputError
from .spectra import have_camb, is_default_cosmology, primordial_power

NEAR_MPC = (-500.0, -200.0, -40.0, -13.0, 13.0, 40.0)   # offsets from chi_rec of the shells for every k
LATE = tuple(0.05 * i for i in range(1, 20))            # radii / chi_rec of the shells for k <= K_LATE
K_LATE = 100.0              # k chi_rec
K_STEP = 1.0                # k chi_rec step of the fitted weights
TIKHONOV = 1e-8
TABLE_NAME = "flat_transfer_shells.npz"
TABLE_LMAX = 1024
TABLE_KMAX = 1536.0


def bessel_rows(lmax: int, z: np.ndarray):
    """Yield j_l(z) for l = 0..lmax (z > 0, any shape) by the upward recurrence
    j_{l+1} = (2l + 1) j_l / z - j_{l-1} (stable for l < z; common practice), set to 0 beyond
    l = z + 4 z^(1/3) + 2, where j_l is below 2e-4 of its peak and the recurrence would amplify
    rounding (measured against scipy's spherical_jn: 7e-5 of the peak at worst, z = 1e-3..1200,
    l <= 400)."""
    z = np.asarray(z, dtype=float)
    inv = 1.0 / z
    j0 = np.sin(z) * inv
    j1 = (j0 - np.cos(z)) * inv
    thr = z + 4.0 * np.cbrt(z) + 2.0
    yield j0
    if lmax >= 1:
        yield j1
    for ell in range(2, int(lmax) + 1):
        j0, j1 = j1, (2 * ell - 1) * inv * j1 - j0
        j1[ell > thr] = 0.0
        yield j1


class ShellTransfer:
    """Weights g (n_k, n_shells) at k chi_rec = ``k`` of the shells at ``radii`` (units of chi_rec);
    the shells after the first ``n_near`` only for k <= k_late. Fitted over l <= ``lmax``."""

    def __init__(self, k, radii, g, k_late: float, lmax: int, n_near: int):
        self.k = np.asarray(k, dtype=float)
        self.radii = np.asarray(radii, dtype=float)
        self.g = np.asarray(g, dtype=float)
        self.k_late = float(k_late)
        self.lmax = int(lmax)
        self.n_near = int(n_near)
        lo = self.k <= self.k_late
        self._low = CubicSpline(self.k[lo], self.g[lo], axis=0)
        self._high = CubicSpline(self.k[~lo], self.g[~lo, :self.n_near], axis=0) if (~lo).sum() >= 2 else None

    @property
    def kmax(self) -> float:
        return float(self.k[-1])

    def weights(self, kchi) -> np.ndarray:
        """g_s(k) (len(k), n_shells) by cubic splines over k on each side of k_late (0 for the
        late shells above it); InputError outside the fitted range."""
        kchi = np.atleast_1d(np.asarray(kchi, dtype=float))
        if kchi.size and (kchi.min() < self.k[0] * (1 - 1e-9) or kchi.max() > self.kmax * (1 + 1e-9)):
            raise InputError(f"wave numbers k chi_rec {kchi.min():.3g}..{kchi.max():.3g} fall outside the shell "
                             f"transfer's range {self.k[0]:.3g}..{self.kmax:.3g}", "[sky] lmax")
        out = np.zeros((kchi.size, len(self.radii)))
        lo = kchi <= self.k_late
        if lo.any():
            out[lo] = self._low(kchi[lo])
        if (~lo).any():
            out[~lo, :self.n_near] = self._high(kchi[~lo])
        return out

    def radial(self, ell, kchi) -> np.ndarray:
        """R_l(k) = sum_s g_s(k) j_l(k r_s) for l >= 2, 0 for l = 0, 1 (as CAMB's Delta_0 = Delta_1 = 0:
        the monopole and dipole are not part of the transfer), shape (len(ell), len(k))."""
        ell = np.atleast_1d(np.asarray(ell, dtype=int))
        kchi = np.atleast_1d(np.asarray(kchi, dtype=float))
        g = self.weights(kchi)
        top = int(ell.max())
        full = np.zeros((top + 1, kchi.size))
        for l, j in enumerate(bessel_rows(top, kchi[:, None] * self.radii[None, :])):
            if l >= 2:
                full[l] = np.einsum("ks,ks->k", j, g)
        return full[ell]


def radii(cosmology) -> tuple[np.ndarray, int]:
    """(radii / chi_rec, number of NEAR shells)."""
    near = 1.0 + np.asarray(NEAR_MPC) / cosmology.chi_rec_mpc
    return np.concatenate([near, np.asarray(LATE)]), len(near)


def fit(cosmology, lmax: int, kmax: float) -> ShellTransfer:
    """Fit the shell weights to CAMB's transfer (needs camb) over l = 2..lmax, k chi_rec up to
    kmax (see the module doc)."""
    from .transfer import temperature_transfer, transfer_k_range

    lmax = int(lmax)
    chi = cosmology.chi_rec_mpc
    k_lo, k_hi = (v * chi for v in transfer_k_range(cosmology, lmax))
    if kmax > k_hi:
        raise InputError(f"k chi_rec up to {kmax:.0f} is beyond CAMB's transfer samples ({k_hi:.0f})", "[sky] lmax")
    k = np.concatenate([np.geomspace(k_lo * 1.0001, 2.0, 24)[:-1], np.arange(2.0, kmax + K_STEP, K_STEP)])
    k = np.unique(np.concatenate([k[k < K_LATE], [K_LATE], k[k > K_LATE]]))
    delta = temperature_transfer(cosmology, lmax)
    ell = np.arange(lmax + 1)
    target = -5.0 * delta(ell, k / chi)                       # (lmax + 1, n_k)
    # weights 1 / C_l from the transfer integral over the fitted range (trapezoid in ln k)
    w = np.gradient(k) / k * primordial_power(k / chi)
    cl = (target**2) @ w
    r, n_near = radii(cosmology)
    use = np.ones((k.size, r.size), dtype=bool)
    use[k > K_LATE, n_near:] = False
    M = np.zeros((k.size, r.size, r.size))
    v = np.zeros((k.size, r.size))
    for l, j in enumerate(bessel_rows(lmax, k[:, None] * r[None, :])):
        if l < 2 or cl[l] <= 0:
            continue
        j = j * use
        M += (j[:, :, None] * j[:, None, :]) / cl[l]
        v += j * (target[l] / cl[l])[:, None]
    lam = TIKHONOV * np.trace(M, axis1=1, axis2=2) / r.size
    M += lam[:, None, None] * np.eye(r.size)
    off = np.nonzero(~use)
    M[off[0], off[1], :] = 0.0
    M[off[0], :, off[1]] = 0.0
    M[off[0], off[1], off[1]] = 1.0
    v[~use] = 0.0
    g = np.linalg.solve(M, v[..., None])[..., 0]
    return ShellTransfer(k=k, radii=r, g=g, k_late=K_LATE, lmax=lmax, n_near=n_near)


def read_table(path=None) -> ShellTransfer:
    """The shipped table (or the .npz at ``path``)."""
    if path is None:
        with resources.files("topology").joinpath("data", TABLE_NAME).open("rb") as fh:
            data = dict(np.load(fh))
    else:
        data = dict(np.load(path))
    return ShellTransfer(k=data["k"], radii=data["radii"], g=data["g"], k_late=float(data["k_late"]),
                         lmax=int(data["lmax"]), n_near=int(data["n_near"]))


@lru_cache(maxsize=4)
def _fitted(cosmology, lmax: int, kmax: float) -> ShellTransfer:
    return fit(cosmology, lmax, kmax)


@lru_cache(maxsize=1)
def _table() -> ShellTransfer:
    return read_table()


def shell_transfer(cosmology, lmax: int, kchi: float) -> ShellTransfer:
    """The shell weights for skies to ``lmax`` with wave numbers up to ``kchi`` (k chi_rec): the
    shipped table for the default cosmology when it covers them, else a fit with CAMB (lmax and
    kmax rounded up to 100, one fit per process and bucket); InputError without camb."""
    lmax = int(lmax)
    if is_default_cosmology(cosmology) and lmax <= TABLE_LMAX and kchi <= TABLE_KMAX:
        return _table()
    if not have_camb():
        if not is_default_cosmology(cosmology):
            raise InputError("flat skies with Doppler and ISW need camb for a cosmology other than the default "
                             "(the shipped shell table): pip install 'topology[spectra]'", "[sky] terms")
        raise InputError(f"the shipped shell table covers l <= {TABLE_LMAX} and k chi_rec <= {TABLE_KMAX:g}; "
                         "install camb (pip install 'topology[spectra]') for more", "[sky] lmax")
    return _fitted(cosmology, 100 * -(-lmax // 100), float(100 * math.ceil(kchi / 100.0)))
