"""The combined T + E statistic: agrees with the S kernels on one map, finds the common twist of
both orientations, weights, and the chance spread."""

import math

import numpy as np
import pytest

from topology.search.combined import chance_spread, combined_best_twist, snr_weight
from topology.search.sampling import CircleSet
from topology.search.statistic import best_twist

N_PHI, M = 96, 24


def _circles(samples, kept=None):
    kept = np.ones(samples.shape, dtype=bool) if kept is None else kept
    s = samples - (samples * kept).sum(1, keepdims=True) / kept.sum(1, keepdims=True)
    coeffs = np.fft.rfft(s, axis=1)[:, : M + 1] / N_PHI
    k = samples.shape[0]
    centers = np.tile([0.0, 0.0, 1.0], (k, 1))
    return CircleSet(centers, 0.5, s, kept, coeffs)


def _eval(c, m, phi, shift, sign):
    # f(phi) = 2 Re sum_m c_m e^{i m (sign phi + shift)}
    arg = sign * phi[None, None, :] + np.asarray(shift)[:, None, None]
    return 2 * np.real(np.sum(c[:, :, None] * np.exp(1j * m[None, :, None] * arg), axis=1))


def _pair_sets(seed, tau0, sign, noise_t, noise_e):
    """Circles A and B in T and in E with T_A(phi) = T_B(sign phi + tau0) plus noise."""
    rng = np.random.default_rng(seed)
    k = tau0.size
    m = np.arange(1, M + 1)
    phi = 2 * np.pi * np.arange(N_PHI) / N_PHI
    out = []
    for noise in (noise_t, noise_e):
        c = (rng.standard_normal((k, M)) + 1j * rng.standard_normal((k, M))) / m
        a = _eval(c, m, phi, np.zeros(k), 1)
        # B(psi) = A(sign (psi - tau0)): then A(phi) = B(sign phi + tau0)
        b = _eval(c * np.exp(-1j * m * sign * tau0[:, None]), m, phi, np.zeros(k), sign)
        a = a + noise * a.std() * rng.standard_normal(a.shape)
        b = b + noise * b.std() * rng.standard_normal(b.shape)
        out.append((_circles(a), _circles(b)))
    return out


@pytest.mark.parametrize("sign", [1, -1])
def test_common_twist_and_agreement_with_the_s_kernel(sign):
    tau0 = np.array([0.3, 1.7, 4.0, 5.9])
    (ta, tb), (ea, eb) = _pair_sets(3, tau0, sign, 0.3, 0.8)
    idx = np.arange(tau0.size)
    o = 0 if sign > 0 else 1
    # E weight 0: the statistic is S_T; check against the harmonic maximum of statistic.best_twist
    res = combined_best_twist(ta, tb, ea, eb, idx, idx, 1.0, 0.0)
    s_ref, t_ref = best_twist(ta, tb, idx, idx)
    # a parabola through N_phi = 96 shifts against the exact harmonic maximum: within 0.02
    assert np.allclose(res["s"][:, o], s_ref[:, o], atol=0.02)
    dt = np.angle(np.exp(1j * (res["tau"][:, o] - t_ref[:, o])))
    assert np.max(np.abs(dt)) < 2e-2
    dtrue = np.angle(np.exp(1j * (res["tau"][:, o] - tau0)))
    assert np.max(np.abs(dtrue)) < 0.05
    # both maps: the twist is the common one, S_TE the weighted mean of S_T and S_E there
    both = combined_best_twist(ta, tb, ea, eb, idx, idx, 2.0, 1.0)
    assert np.max(np.abs(np.angle(np.exp(1j * (both["tau"][:, o] - tau0))))) < 0.05
    mean = (2 * both["s_t"][:, o] + both["s_e"][:, o]) / 3
    assert np.allclose(both["s"][:, o], mean, atol=5e-3)
    # white noise of 0.3 and 0.8 times the circle rms: <S> = sum m S_m / sum m (S_m + N_m), signal
    # E|T_m|^2 = S_m = 2 / m^2, noise N_m = sigma^2 / N_phi (Parseval; common practice)
    m = np.arange(1, M + 1)
    sm = 2.0 / m**2
    for key, noise in (("s_t", 0.3), ("s_e", 0.8)):
        expect = np.sum(m * sm) / np.sum(m * (sm + noise**2 * 2 * sm.sum() / N_PHI))
        assert abs(np.mean(both[key][:, o]) - expect) < 0.1
    assert np.all(both["s"][:, o] > both["s"][:, 1 - o])


def test_weights_and_chance_spread():
    assert snr_weight(0.5, 0.1) == pytest.approx(50.0)
    assert snr_weight(-0.1, 0.1) == 0.0
    with pytest.raises(ValueError):
        snr_weight(1.0, 0.0)
    rng = np.random.default_rng(8)
    m = np.arange(1, M + 1)
    phi = 2 * np.pi * np.arange(N_PHI) / N_PHI
    k = 400
    c = (rng.standard_normal((k, M)) + 1j * rng.standard_normal((k, M))) / m
    circ = _circles(_eval(c, m, phi, np.zeros(k), 1))
    v = rng.standard_normal((k, 3))
    circ.centers[:] = v / np.linalg.norm(v, axis=1, keepdims=True)
    # check: for independent circles (1 + S) / 2 ~ Beta(d/2, d/2) with d = 2 M Gaussian modes of
    # equal weighted variance (sqrt(m) T_m with T_m ~ 1/m is not equal, so d_eff = (sum p)^2 / sum p^2
    # with p_m = m |T_m|^2 ~ 1/m); var S = 1 / (d_eff + 1) (common practice, the Beta variance)
    p = 1.0 / m
    d_eff = 2 * p.sum() ** 2 / np.sum(p**2)
    sigma = chance_spread(circ, n_pairs=3000, seed=1)
    assert sigma == pytest.approx(1 / math.sqrt(d_eff + 1), rel=0.12)


def test_on_a_pair_of_maps_antipodal_symmetry():
    # a map of even multipoles only is symmetric under n -> -n, so a circle and its antipodal
    # circle carry the same values (common practice: Y_lm(-n) = (-1)^l Y_lm(n)); an E map of odd
    # multipoles only is antisymmetric, so its antipodal circles anti-match
    import healpy as hp

    from topology.search.combined import combined_s_of_maps

    nside, lmax = 32, 40
    rng = np.random.default_rng(5)
    ell, mm = hp.Alm.getlm(lmax)
    a = (rng.standard_normal(ell.size) + 1j * rng.standard_normal(ell.size)) / np.maximum(ell, 1)
    a[mm == 0] = a[mm == 0].real
    even = hp.alm2map(np.where(ell % 2 == 0, a, 0), nside, lmax=lmax)
    odd = hp.alm2map(np.where(ell % 2 == 1, a, 0), nside, lmax=lmax)
    c = np.array([[0.3, 0.5, 0.81], [0.9, -0.1, 0.2]])
    c /= np.linalg.norm(c, axis=1, keepdims=True)
    res = combined_s_of_maps(even, even, c, -c, 0.6, n_phi=128, m_max=30, w_t=1.0, w_e=1.0)
    assert np.all(np.max(res["s"], axis=1) > 0.97)
    anti = combined_s_of_maps(even, odd, c, -c, 0.6, n_phi=128, m_max=30, w_t=1.0, w_e=0.0)
    best = np.argmax(anti["s"], axis=1)
    r = np.arange(2)
    assert np.all(anti["s_t"][r, best] > 0.97) and np.all(anti["s_e"][r, best] < -0.9)
