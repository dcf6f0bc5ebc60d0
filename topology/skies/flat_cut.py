"""The wave-number cut of flat skies and the isotropic complement of the power it leaves out.

A flat sky sums the modes 0 < k chi_rec <= K of its lattice. The isotropic sky of the same
physics collects C_l from every k:

    C_l = 4 pi (T/5)^2 int_0^inf dk/k P_R(k) R_l(k)^2,

R_l(k) = j_l(k chi_rec) for the Sachs-Wolfe term (thin shell; Sachs & Wolfe 1967, common
practice) or -5 Delta_l(k), CAMB's temperature transfer (:mod:`topology.skies.transfer`), for
the terms sw + doppler + isw. The modes beyond K carry the tail

    T_l(K) = 4 pi (T/5)^2 int_K^inf dk/k P_R(k) R_l(k)^2,

and T_l / C_l grows with l: for the SW term j_l(x)^2 averages 1 / (2 x^2) beyond x ~ l, so
T_l / C_l ~ l^2 / (2 K^2) (about 95 % at K = l, 25 % at 1.5 l, 1 % at 7.1 l; measured by
:func:`cut_for_accuracy`). A cut that alone holds C_l to 1 % at l = lmax needs K ~ 7 lmax
(SW) or 3-10 lmax (CAMB transfer, whose tail the finite thickness of last scattering damps only
beyond k chi_rec ~ 10^3), i.e. 30-350 times the modes of K = lmax: beyond any budget.

So a flat sky keeps the lattice modes up to a cut K (:func:`topology.skies.flat.choose_cut`),
weighted by the taper w(k) of :func:`topology.skies.flat_modes.cut_weight`, and adds the
isotropic Gaussian field of C_l - C_l(K), C_l(K) = 4 pi (T/5)^2 int dk/k P_R w^2 R_l^2
(:func:`complement_cl`: the continuum power of the modes beyond the cut, from the same spectrum
function as the isotropic null skies, :func:`topology.skies.spectra.isotropic_cl`). Its expected
C_l is then the isotropic one at every l <= lmax, up to the discreteness of the lattice (the
topology itself; the taper makes the lattice sum near the cut equal its continuum). The
complement is isotropic: it lacks the matched-circle correlations the lattice modes beyond K
would carry (the stationary phase of a mode with k chi_rec >> l puts its projection at multipole
l in caps of radius ~ l / (k chi_rec) about +-k^, which hold both points of a pair only for the
largest and the smallest circles). Measured by benchmarks/flat_sky_spectrum.py --circles (l_max
64, 2 deg beam): at K = l_max the expected correlation of matched points is 0.03-0.05 below that
of every mode for circles of 18-66 deg (0.15 at 81 deg), at K = 1.5 l_max within 0.006 (0.04).

C_l(K) is integrated with composite Gauss-Legendre panels (width PANEL in k chi_rec, NODES
each; R_l oscillates with period 2 pi). For the SW term j_l comes from the upward recurrence
of :func:`topology.skies.transfer_shells.bessel_rows`.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
from scipy.special import spherical_jn

from ..errors import InputError
from .flat_modes import cut_weight, taper_width
from .transfer_shells import bessel_rows
from .spectra import A_S, K_PIVOT, N_S, isotropic_cl, primordial_power, sw_bessel_integral

PANEL = 1.0           # k chi_rec width of a quadrature panel
NODES = 8             # Gauss-Legendre nodes per panel
CHUNK = 4096          # quadrature nodes per block (bounded memory)
SW = ("sw",)
FULL = ("sw", "doppler", "isw")
#: the C_l accuracy a flat sky is held to at every l <= lmax (lattice + complement)
CL_ACCURACY = 0.01


def _terms(terms) -> tuple:
    t = tuple(x for x in FULL if x in set(terms))
    if t not in (SW, FULL):
        raise InputError(f"flat skies take [\"sw\"] or [\"sw\", \"doppler\", \"isw\"], got {list(terms)}",
                         "[sky] terms")
    return t


def quadrature(k_lo: float, k_hi: float) -> tuple[np.ndarray, np.ndarray]:
    """Nodes and weights of the composite Gauss-Legendre rule on [k_lo, k_hi] (k chi_rec)."""
    if k_hi <= k_lo:
        return np.zeros(0), np.zeros(0)
    n = max(1, int(math.ceil((k_hi - k_lo) / PANEL)))
    edges = np.linspace(k_lo, k_hi, n + 1)
    x, w = np.polynomial.legendre.leggauss(NODES)
    half = 0.5 * np.diff(edges)[:, None]
    mid = 0.5 * (edges[1:] + edges[:-1])[:, None]
    return (mid + half * x).ravel(), (half * w).ravel()


def bessel_squares(lmax: int, x: np.ndarray, weight: np.ndarray) -> np.ndarray:
    """S_l = sum_i weight_i j_l(x_i)^2 for l = 0..lmax (x > 0; j_l from
    :func:`topology.skies.transfer_shells.bessel_rows`), in blocks of CHUNK nodes."""
    x = np.asarray(x, dtype=float)
    weight = np.asarray(weight, dtype=float)
    out = np.zeros(int(lmax) + 1)
    for b in range(0, x.size, CHUNK):
        wb = weight[b:b + CHUNK]
        for ell, j in enumerate(bessel_rows(int(lmax), x[b:b + CHUNK])):
            out[ell] += wb @ (j * j)
    return out


def _sw_scale(cosmology) -> float:
    """(4 pi / 25) T^2 A_s (k_pivot chi_rec)^(1 - n_s), microK^2: C_l = scale x int x^(n_s-2) j_l^2 dx."""
    t_uk = cosmology.t_cmb * 1e6
    return 4.0 * math.pi / 25.0 * t_uk**2 * A_S * (K_PIVOT * cosmology.chi_rec_mpc) ** (1.0 - N_S)


def kept_quadrature(k_lo: float, kchi: float) -> tuple[np.ndarray, np.ndarray]:
    """Nodes and weights on [k_lo, K] for the kept power: the weights carry w(k)^2, the taper of
    :func:`~topology.skies.flat_modes.cut_weight` (panels split where it starts)."""
    K = float(kchi)
    edge = max(k_lo, K - taper_width(K))
    x1, w1 = quadrature(k_lo, edge)
    x2, w2 = quadrature(edge, K)
    x = np.concatenate([x1, x2])
    return x, np.concatenate([w1, w2]) * cut_weight(x, K) ** 2


def sw_kept_integral(lmax: int, kchi: float, n_s: float = N_S) -> np.ndarray:
    """I_l(K) = int_0^K dx x^(n_s - 2) w(x)^2 j_l(x)^2, l = 0..lmax, w the taper of the cut."""
    x, w = kept_quadrature(0.0, kchi)
    return bessel_squares(int(lmax), x, w * x ** (n_s - 2.0))


def _transfer_radial(cosmology, lmax: int):
    from .transfer import temperature_transfer

    delta = temperature_transfer(cosmology, lmax)
    chi = cosmology.chi_rec_mpc
    return lambda ell, k: -5.0 * delta(ell, np.asarray(k) / chi)


def transfer_source(method: str) -> str:
    """Where a flat sky's R_l(k) for the terms sw + doppler + isw comes from: "camb" (CAMB's
    transfer, the eigenmode method with camb) or "shells" (the shell fit of
    :mod:`topology.skies.transfer_shells`: the grid method, and the eigenmode method without camb)."""
    from .spectra import have_camb

    return "camb" if method == "eigenmode" and have_camb() else "shells"


def transfer_k_floor(cosmology, lmax: int) -> float:
    """Smallest k chi_rec of CAMB's transfer samples (below it Delta_l ~ (k chi)^l, l >= 2, adds
    nothing measurable)."""
    from .transfer import transfer_k_range

    return transfer_k_range(cosmology, lmax)[0] * cosmology.chi_rec_mpc


@lru_cache(maxsize=64)
def _kept_cl_cached(cosmology, lmax: int, kchi: float, terms: tuple, source: str) -> np.ndarray:
    cl = np.zeros(lmax + 1)
    if lmax < 2:
        return cl
    if terms == SW:
        cl[2:] = _sw_scale(cosmology) * sw_kept_integral(lmax, kchi)[2:]
        return cl
    if source == "shells":
        from .transfer_shells import shell_transfer

        st = shell_transfer(cosmology, lmax, kchi)
        radial, floor = st.radial, float(st.k[0])
    else:
        radial, floor = _transfer_radial(cosmology, lmax), transfer_k_floor(cosmology, lmax)
    x, w = kept_quadrature(floor, kchi)
    t_uk = cosmology.t_cmb * 1e6
    weight = w * (t_uk / 5.0) ** 2 * primordial_power(x / cosmology.chi_rec_mpc) / x
    ell = np.arange(2, lmax + 1)
    for b in range(0, len(x), CHUNK):
        r = radial(ell, x[b:b + CHUNK])
        cl[2:] += (r * r) @ weight[b:b + CHUNK]
    cl[2:] *= 4.0 * math.pi
    return cl


def kept_cl(cosmology, lmax: int, kchi: float, terms=SW, source: str = "camb") -> np.ndarray:
    """C_l(K) (microK^2, l = 0..lmax, C_0 = C_1 = 0): the isotropic spectrum of the modes
    0 < k chi_rec <= K weighted by the taper w(k)^2, the continuum limit of a flat sky's lattice
    sum (see the module doc); for the CAMB terms with R_l from ``source`` (:func:`transfer_source`)."""
    return _kept_cl_cached(cosmology, int(lmax), float(kchi), _terms(terms), str(source)).copy()


def complement_cl(cosmology, lmax: int, kchi: float, terms=SW, source: str = "camb") -> np.ndarray:
    """max(C_l - C_l(K), 0): the isotropic power of the modes beyond the cut, with C_l the
    isotropic spectrum of ``terms`` (:func:`topology.skies.spectra.isotropic_cl`, the spectrum of
    the null skies). Negative differences (CAMB's own C_l below its transfer integral by up to
    ~0.5 % where the cut leaves almost nothing out) are set to 0."""
    terms = _terms(terms)
    return np.maximum(isotropic_cl(cosmology, int(lmax), terms) - kept_cl(cosmology, lmax, kchi, terms, source), 0.0)


def _integrand(cosmology, ell: int, k_lo: float, k_hi: float, terms: tuple):
    """Quadrature nodes x on [k_lo, k_hi] and the weighted integrand of C_ell there (sharp cut)."""
    x, w = quadrature(k_lo, k_hi)
    if terms == SW:
        return x, w * x ** (N_S - 2.0) * spherical_jn(int(ell), x) ** 2
    r = _transfer_radial(cosmology, max(int(ell), 2))(np.array([int(ell)]), x)[0]
    return x, w * primordial_power(x / cosmology.chi_rec_mpc) / x * r * r


def tail_fraction(cosmology, ell: int, kchi: float, terms=SW) -> float:
    """T_l(K) / C_l for a sharp cut: the fraction of multipole ``ell``'s isotropic power beyond
    k chi_rec = K (for CAMB's transfer, of its integral to the end of its samples)."""
    terms = _terms(terms)
    if terms == SW:
        _, f = _integrand(cosmology, ell, 0.0, float(kchi), terms)
        return max(0.0, 1.0 - float(f.sum()) / float(sw_bessel_integral(int(ell), N_S)))
    lmax = max(int(ell), 2)
    x, f = _integrand(cosmology, ell, transfer_k_floor(cosmology, lmax), transfer_k_ceiling(cosmology, lmax), terms)
    return max(0.0, float(f[x > kchi].sum() / f.sum()))


def transfer_k_ceiling(cosmology, lmax: int) -> float:
    """Largest k chi_rec of CAMB's transfer samples for ``lmax``."""
    from .transfer import transfer_k_range

    return transfer_k_range(cosmology, lmax)[1] * cosmology.chi_rec_mpc


@lru_cache(maxsize=16)
def cut_for_accuracy(cosmology, lmax: int, terms=SW, accuracy: float = CL_ACCURACY) -> float:
    """The pure cut: the smallest K with T_lmax(K) / C_lmax <= ``accuracy`` for a sharp cut (the
    tail falls with K at every l, and l = lmax has the largest), from the running integral of
    the integrand of C_lmax on the quadrature nodes. For CAMB's transfer K is capped at the end
    of its samples."""
    terms = _terms(terms)
    lmax = max(int(lmax), 2)
    if terms == SW:
        total = float(sw_bessel_integral(lmax, N_S))
        hi = 2.0 * lmax
        while tail_fraction(cosmology, lmax, hi, terms) > accuracy:
            hi *= 2.0
        x, f = _integrand(cosmology, lmax, 0.0, hi, terms)
    else:
        hi = transfer_k_ceiling(cosmology, lmax)
        x, f = _integrand(cosmology, lmax, transfer_k_floor(cosmology, lmax), hi, terms)
        total = float(f.sum())
    tail = total - np.cumsum(f)
    ok = np.nonzero(tail <= accuracy * total)[0]
    return float(x[ok[0]]) if ok.size else float(hi)
