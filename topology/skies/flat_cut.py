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

So a flat sky keeps the lattice modes up to a cut K (:func:`topology.skies.flat.choose_cut`)
and weights them by the profile of :func:`cut_profile`: the taper w(k) of
:func:`topology.skies.flat_modes.cut_weight` plus boost bumps below the cut, chosen by a linear
programme so that the modes below K carry the power of those beyond it. What the boosted lattice
still leaves out is added as the isotropic Gaussian field of C_l - C_l(K), C_l(K) = 4 pi (T/5)^2
int dk/k P_R w^2 R_l^2 (:func:`complement_cl`: from the same spectrum function as the isotropic
null skies, :func:`topology.skies.spectra.isotropic_cl`). Its expected C_l is then the isotropic
one at every l <= lmax, up to the discreteness of the lattice (the topology itself; the taper
and the smooth bumps make the lattice sum near the cut equal its continuum). The complement is
isotropic: it lacks the matched-circle correlations the lattice modes beyond K would carry (for
the Sachs-Wolfe term every lattice mode matches exactly on the circles, whatever its k), which
is why the boost is preferred: at the lattice cut (:func:`lattice_cut`, 1.1-1.2 lmax) the
complement carries at most 2 % of any C_l, against 35-55 % of C_lmax with the taper alone at the
same cut. Measured by benchmarks/flat_sky_spectrum.py --circles (see its output in the README).

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
#: the boost bumps of :func:`cut_profile` cover k chi_rec in [K (1 - BOOST_SPAN), K]
BOOST_SPAN = 0.5
#: the share of the power beyond the cut that the boosted lattice modes carry (the rest: the
#: isotropic complement); see :func:`cut_profile`
BOOST_SHARE = 0.5
#: cost of the largest bump coefficient in the programme of :func:`cut_profile`, per multipole
BOOST_PENALTY = 1e-3
#: the boosted lattice may exceed the isotropic C_l by this fraction of CL_ACCURACY
BOOST_OVERSHOOT = 0.2
#: lattice modes per bump shell below which a boost is not placed (:func:`dense_from`)
DENSE_MODES = 100
#: at the lattice cut (:func:`lattice_cut`) the boost falls short of its share by at most this fraction of any C_l
LATTICE_SHARE = 0.02


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


def complement_cl(cosmology, lmax: int, kchi: float, terms=SW, source: str = "camb", boost: bool = True,
                  volume: float | None = None) -> np.ndarray:
    """max(C_l - C_l(K), 0): the isotropic power the lattice modes up to the cut leave out, with
    C_l the isotropic spectrum of ``terms`` (:func:`topology.skies.spectra.isotropic_cl`, the
    spectrum of the null skies) and C_l(K) the kept power of the boosted profile
    (:func:`cut_profile`, for a torus of ``volume``; the taper alone, :func:`kept_cl`, with
    ``boost=False``). Negative
    differences (CAMB's own C_l below its transfer integral by up to ~0.5 % where the cut leaves
    almost nothing out; the boost's allowance of BOOST_OVERSHOOT CL_ACCURACY) are set to 0."""
    terms = _terms(terms)
    kept = cut_profile(cosmology, lmax, kchi, terms, source, volume=volume)[1] if boost \
        else kept_cl(cosmology, lmax, kchi, terms, source)
    return np.maximum(isotropic_cl(cosmology, int(lmax), terms) - kept, 0.0)


def spectrum_rows(cosmology, lmax: int, x: np.ndarray, terms=SW, source: str = "camb", kchi: float | None = None) -> np.ndarray:
    """f_l(x_i), (lmax + 1, len(x)), l = 0..lmax (rows 0, 1 zero): the isotropic integrand of C_l
    per unit quadrature weight, C_l = sum_i w_i f_l(x_i) (microK^2), x = k chi_rec. SW:
    (4 pi / 25) T^2 A_s (k_p chi)^(1 - n_s) x^(n_s - 2) j_l(x)^2; CAMB terms: 4 pi (T/5)^2
    P_R(x / chi_rec) / x R_l(x)^2 with R_l from ``source`` (the shells fitted up to ``kchi``)."""
    x = np.asarray(x, dtype=float)
    lmax = int(lmax)
    out = np.zeros((lmax + 1, x.size))
    if lmax < 2 or not x.size:
        return out
    terms = _terms(terms)
    if terms == SW:
        f = _sw_scale(cosmology) * x ** (N_S - 2.0)
        for ell, j in enumerate(bessel_rows(lmax, x)):
            if ell >= 2:
                out[ell] = f * j * j
        return out
    if source == "shells":
        from .transfer_shells import shell_transfer

        radial = shell_transfer(cosmology, lmax, float(kchi if kchi is not None else x.max())).radial
    else:
        radial = _transfer_radial(cosmology, lmax)
    t_uk = cosmology.t_cmb * 1e6
    f = 4.0 * math.pi * (t_uk / 5.0) ** 2 * primordial_power(x / cosmology.chi_rec_mpc) / x
    for b in range(0, x.size, CHUNK):
        r = radial(np.arange(2, lmax + 1), x[b:b + CHUNK])
        out[2:, b:b + CHUNK] = f[b:b + CHUNK] * r * r
    return out


def dense_from(volume: float | None, half_width: float) -> float:
    """The smallest k chi_rec at which a shell of width 2 h holds DENSE_MODES lattice modes of a
    torus of volume V (chi_rec^3): 4 pi k^2 2h V / (2 pi)^3 = DENSE_MODES (0 for V None: the
    continuum). Below it the lattice sum over a bump is not its continuum integral."""
    if volume is None:
        return 0.0
    return math.sqrt(DENSE_MODES * (2.0 * math.pi) ** 3 / (8.0 * math.pi * half_width * float(volume)))


def _bump_layout(kchi: float, volume: float | None = None) -> tuple[np.ndarray, float]:
    """Centres and half-width of the boost bumps: h = D / 2 (D the taper width), centres K - h,
    K - 2h, ... down to K (1 - BOOST_SPAN) (at least h) and to where the lattice is dense
    (:func:`dense_from`); possibly none."""
    K = float(kchi)
    h = 0.5 * taper_width(K)
    lo = max(h, K * (1.0 - BOOST_SPAN), dense_from(volume, h) + h)
    if lo > K - h:
        return np.zeros(0), h
    n = int(math.floor((K - h - lo) / h)) + 1
    return K - h * (1.0 + np.arange(n)), h


@lru_cache(maxsize=64)
def _profile_cached(cosmology, lmax: int, kchi: float, terms: tuple, source: str, accuracy: float,
                    volume: float | None, share: float):
    from scipy.optimize import linprog

    from .flat_modes import CutProfile

    K = float(kchi)
    taper = _kept_cl_cached(cosmology, lmax, K, terms, source) if lmax >= 2 else np.zeros(lmax + 1)
    centres, h = _bump_layout(K, volume)
    if lmax < 2 or not centres.size:
        return CutProfile(K), taper
    iso = isotropic_cl(cosmology, lmax, terms)
    lo = float(centres.min() - h)
    x, w = quadrature(max(lo, transfer_k_floor(cosmology, lmax) if (terms != SW and source != "shells") else lo), K)
    u = (x[None, :] - centres[:, None]) / h
    bumps = np.where(np.abs(u) < 1.0, np.cos(0.5 * np.pi * u) ** 2, 0.0) * w       # (J, nodes)
    B = spectrum_rows(cosmology, lmax, x, terms, source, K) @ bumps.T               # (lmax + 1, J)
    ell = slice(2, lmax + 1)
    A = B[ell] / iso[ell, None]                     # relative power of each bump at each l
    miss = share * (iso[ell] - taper[ell]) / iso[ell]     # the boost's share of the power the cut leaves out
    L, J = A.shape
    # variables c (J), s (L), o (L), z: minimise sum_l (s_l + o_l) + BOOST_PENALTY L z  s.t.
    # A c <= miss + BOOST_OVERSHOOT accuracy,  miss - A c <= s,  A c - miss <= o,  c_j <= z,  all >= 0
    Z, I = np.zeros, np.eye(L)
    cost = np.concatenate([Z(J), np.ones(2 * L), [BOOST_PENALTY * L]])
    A_ub = np.block([[A, Z((L, 2 * L + 1))],
                     [-A, -I, Z((L, L + 1))],
                     [A, Z((L, L)), -I, Z((L, 1))],
                     [np.eye(J), Z((J, 2 * L)), -np.ones((J, 1))]])
    b_ub = np.concatenate([miss + BOOST_OVERSHOOT * accuracy, -miss, miss, Z(J)])
    res = linprog(cost, A_ub=A_ub, b_ub=b_ub, bounds=(0, None), method="highs")
    c = np.maximum(res.x[:J], 0.0) if res.status == 0 else np.zeros(J)
    keep = c > 0
    profile = CutProfile(K, centres[keep], h, c[keep])
    kept = taper.copy()
    kept[ell] += B[ell] @ c
    return profile, kept


def cut_profile(cosmology, lmax: int, kchi: float, terms=SW, source: str = "camb",
                accuracy: float = CL_ACCURACY, volume: float | None = None, share: float | None = None):
    """(profile, kept C_l): the radial weight of a flat sky's lattice modes up to the cut K and
    the expected C_l it gives (microK^2, l = 0..lmax).

    The taper alone leaves out C_l - C_l(K) (:func:`kept_cl`). Bumps below the cut
    (:class:`~topology.skies.flat_modes.CutProfile`, over the top BOOST_SPAN of [0, K]) raise the
    weight of the modes there so that they carry the share b (``share``, default BOOST_SHARE) of
    that power: c_j >= 0 from the linear programme

        minimise sum_l |m_l - sum_j c_j A_lj| + p L max_j c_j   s.t.   sum_j c_j A_lj <= m_l + e accuracy

    A_lj the power of bump j at multipole l and m_l = b (C_l - C_l(K)) / C_l, both relative to
    the isotropic C_l (l = 2..lmax, L of them; e = BOOST_OVERSHOOT). The cost on the largest c_j
    (p = BOOST_PENALTY) spreads the boost over the bumps: without it the programme's vertex
    solutions put it in a few (w^2 up to 17 at K = 1.5 lmax). The isotropic complement
    (:func:`complement_cl`) makes up the rest, so the C_l are the isotropic ones to within
    e accuracy above. A mode of k chi_rec >> l adds about the same power to every l < k chi_rec
    (j_l(x)^2 averages 1 / (2 x^2)), as the modes beyond the cut do, and the bumps just below K
    fill l near lmax.

    Why a share: on a map cut at l_max the modes beyond the cut match on the circles only in
    part (a mode of k chi_rec >> l_max loses most of its pattern to the cut in l), so an
    isotropic complement (share 0) understates the matched-circle correlation of the true sky
    and lattice modes carrying all of it (share 1) overstate it. Measured on E1 (l_max 64, 2 deg
    beam, circles of 18-66 deg, benchmarks/flat_sky_spectrum.py --circles): at K = 1.2 l_max
    share 1 gives +0.017 to +0.028 against all modes to 5 l_max, share 0 -0.01 to -0.05; share
    1/2 falls between (the numbers in the README).

    Bumps only where the lattice of a torus of ``volume`` (chi_rec^3; None: the continuum) is
    dense (:func:`dense_from`): the weights act on lattice modes, and C_l of a sparse shell is
    not its continuum integral (a cube of side 0.4 chi_rec has no mode below k chi_rec = 15.7, so
    a boost there would claim power its sky lacks); without dense shells the profile is the
    taper alone."""
    vol = None if volume is None else round(float(volume), 12)
    share = BOOST_SHARE if share is None else float(share)
    return _profile_cached(cosmology, int(lmax), float(kchi), _terms(terms), str(source), float(accuracy), vol,
                           share)


def lattice_cut(cosmology, lmax: int, terms=SW, source: str = "camb", share: float = LATTICE_SHARE,
                k_limit: float | None = None, volume: float | None = None) -> float:
    """The smallest cut K (k chi_rec, in steps of lmax / 20 from lmax) at which the boosted
    lattice (:func:`cut_profile`) carries its share of the power beyond the cut to within
    ``share`` of C_l at every l <= lmax (:func:`boost_shortfall`); ``k_limit`` (default 2 lmax)
    when none below it does."""
    lmax = max(int(lmax), 2)
    top = float(k_limit) if k_limit is not None else 2.0 * lmax
    step = max(1.0, lmax / 20.0)
    K = float(lmax)
    while K < top:
        if float(np.max(boost_shortfall(cosmology, lmax, K, terms, source, volume=volume))) <= share:
            return K
        K += step
    return top


def boost_shortfall(cosmology, lmax: int, kchi: float, terms=SW, source: str = "camb",
                    accuracy: float = CL_ACCURACY, volume: float | None = None) -> np.ndarray:
    """(target - kept) / C_l, l = 2..lmax, clipped at 0: how far the boosted lattice of
    :func:`cut_profile` falls short of carrying BOOST_SHARE of the power beyond the cut, target
    = C_l(K) + BOOST_SHARE (C_l - C_l(K)) with C_l(K) the taper's kept power."""
    terms = _terms(terms)
    iso = isotropic_cl(cosmology, int(lmax), terms)[2:]
    taper = kept_cl(cosmology, lmax, kchi, terms, source)[2:]
    kept = cut_profile(cosmology, lmax, kchi, terms, source, accuracy, volume)[1][2:]
    return np.maximum(taper + BOOST_SHARE * (iso - taper) - kept, 0.0) / iso


def complement_share(cosmology, lmax: int, kchi: float, terms=SW, source: str = "camb",
                     accuracy: float = CL_ACCURACY, volume: float | None = None) -> np.ndarray:
    """(C_l - kept C_l) / C_l, l = 2..lmax, clipped at 0: the share of each multipole the
    isotropic complement carries with the boosted cut of :func:`cut_profile`."""
    terms = _terms(terms)
    iso = isotropic_cl(cosmology, int(lmax), terms)[2:]
    kept = cut_profile(cosmology, lmax, kchi, terms, source, accuracy, volume)[1][2:]
    return np.maximum(iso - kept, 0.0) / iso


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
