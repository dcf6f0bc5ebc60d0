"""The S statistic kernels against independent brute-force real-space correlations."""

import numpy as np
import pytest

from topology.search import statistic as st
from topology.search.sampling import CircleSet


def _random_coeffs(rng, k, m_max):
    c = (rng.standard_normal((k, m_max + 1)) + 1j * rng.standard_normal((k, m_max + 1))) / np.sqrt(np.arange(1, m_max + 2))
    c[:, 0] = rng.standard_normal(k)
    return c


def _trig(coeffs, phi):
    """Filtered circle f(phi) = sum_m 2 sqrt(m) Re(T_m e^{i m phi}) by direct sums (no FFT)."""
    m = np.arange(1, coeffs.shape[1])
    a = coeffs[:, 1:] * np.sqrt(m)
    return 2.0 * (np.cos(np.multiply.outer(phi, m)) @ a.real.T - np.sin(np.multiply.outer(phi, m)) @ a.imag.T).T


def _brute_s(ca, cb, tau, s=1, n=400):
    """S(tau) = 2 sum_k f_A(phi_k) f_B(s phi_k + tau) / sum_k (f_A^2 + f_B(s phi_k + tau)^2), direct sums
    over n points (Cornish, Spergel & Starkman 2004, real-space form)."""
    phi = 2 * np.pi * np.arange(n) / n
    fa = _trig(ca[None], phi)[0]
    out = []
    for t in np.atleast_1d(tau):
        fb = _trig(cb[None], s * phi + t)[0]
        out.append(2 * np.sum(fa * fb) / np.sum(fa**2 + fb**2))
    return np.array(out)


def test_blas_and_fft_kernels_agree_with_brute_force():
    # check: Cornish, Spergel & Starkman 2004, S as a real-space correlation (independent sums)
    rng = np.random.default_rng(0)
    M = 12
    A = _random_coeffs(rng, 5, M)
    B = _random_coeffs(rng, 7, M)
    a, b = st.weighted(A), st.weighted(B)
    n_tau = 26
    num_blas = st.blas_max_over_twist(st.rotated_rows(a, n_tau), st.column_matrix(b))
    num_fft = st.fft_max_over_twist(a, b, n_tau)
    den = (np.sum(abs(a) ** 2, 1)[:, None] + np.sum(abs(b) ** 2, 1)[None, :])
    tau = 2 * np.pi * np.arange(n_tau) / n_tau
    for i in range(5):
        for j in range(7):
            same = _brute_s(A[i], B[j], tau, +1).max()
            # opposite: the kernel's grid twist tau' is the contract twist -tau'
            opp = _brute_s(A[i], B[j], -tau, -1).max()
            for num in (num_blas, num_fft):
                assert num[i, j] / den[i, j] == pytest.approx(same, abs=1e-5)
                assert num[i, 7 + j] / den[i, j] == pytest.approx(opp, abs=1e-5)


def test_refined_twist_matches_dense_brute_force_scan():
    rng = np.random.default_rng(1)
    M = 10
    A = _random_coeffs(rng, 4, M)
    B = _random_coeffs(rng, 4, M)
    s, t = st.best_twist_harmonic(A, B)
    dense = 2 * np.pi * np.arange(20000) / 20000
    for i in range(4):
        for o, sign in ((0, 1), (1, -1)):
            vals = _brute_s(A[i], B[i], dense, sign, n=64)
            assert s[i, o] == pytest.approx(vals.max(), abs=1e-5)
            assert _brute_s(A[i], B[i], t[i, o], sign, n=64)[0] == pytest.approx(s[i, o], abs=1e-9)


@pytest.mark.parametrize("s_true", [1, -1])
def test_contract_twist_and_orientation_recovered(s_true):
    # T_A(phi) = T_B(s phi + tau): B built from A, so S = 1 at the contract's (tau, s)
    rng = np.random.default_rng(2)
    M, N = 16, 34
    tb = _random_coeffs(rng, 1, M)
    tau = 1.234
    phi = 2 * np.pi * np.arange(N) / N
    fa_samples = _trig(tb, s_true * phi + tau)[0]  # f_A(phi) = f_B(s phi + tau)
    # back to coefficients T_A (undo the sqrt(m) filter)
    spec = np.fft.rfft(fa_samples) / N
    ta = np.zeros((1, M + 1), complex)
    ta[0, 1:] = spec[1 : M + 1] / np.sqrt(np.arange(1, M + 1))
    s, t = st.best_twist_harmonic(ta, tb)
    o = 0 if s_true > 0 else 1
    assert s[0, o] == pytest.approx(1.0, abs=1e-9)
    assert t[0, o] == pytest.approx(tau, abs=1e-6)
    assert s[0, 1 - o] < 0.9


def test_identical_one_negated_minus_one():
    rng = np.random.default_rng(3)
    A = _random_coeffs(rng, 3, 8)
    s, t = st.best_twist_harmonic(A, A)
    assert np.allclose(s[:, 0], 1.0) and np.allclose(np.minimum(t[:, 0], 2 * np.pi - t[:, 0]), 0, atol=1e-6)
    assert np.allclose(st.s_of_twist(A, -A, np.zeros(3)), -1.0)


def test_masked_fft_variant_matches_double_loop():
    # brute force: S_j = 2 sum_k W f_A f_B / sum_k W (f_A^2 + f_B^2), W = w_A,k w_B,k+j
    rng = np.random.default_rng(4)
    n = 30
    fa, fb = rng.standard_normal((3, n)), rng.standard_normal((3, n))
    wa, wb = rng.random((3, n)) > 0.3, rng.random((3, n)) > 0.3
    got = st.masked_s_grid(fa, wa, fb, wb, min_overlap=0.0)
    for r in range(3):
        for j in range(n):
            k = np.arange(n)
            w = wa[r] * wb[r, (k + j) % n]
            num = 2 * np.sum(w * fa[r] * fb[r, (k + j) % n])
            den = np.sum(w * (fa[r] ** 2 + fb[r, (k + j) % n] ** 2))
            assert got[r, j] == pytest.approx(num / den, abs=1e-10)


def test_masked_variant_equals_harmonic_on_full_circles():
    # Parseval: with nothing masked the real-space sums over N > 2 M points are the harmonic S
    rng = np.random.default_rng(5)
    M, N = 9, 20
    A, B = _random_coeffs(rng, 4, M), _random_coeffs(rng, 4, M)
    fa, fb = st.filtered_circles(A, N), st.filtered_circles(B, N)
    w = np.ones((4, N), bool)
    grid = st.masked_s_grid(fa, w, fb, w)
    tau = 2 * np.pi * np.arange(N) / N
    harm = st.s_of_twist(A, B, np.tile(tau, (4, 1)), 1)
    assert np.allclose(grid, harm, atol=1e-12)


def test_best_twist_switches_to_masked_variant():
    rng = np.random.default_rng(6)
    M, N = 8, 18
    A = _random_coeffs(rng, 2, M)
    kept = np.ones((2, N), bool)
    kept[1, :5] = False
    circ = CircleSet(np.zeros((2, 3)), 0.5, np.zeros((2, N)), kept, A)
    s, _ = st.best_twist(circ, circ, [0, 1], [0, 1], min_overlap=0.1)
    assert s[0, 0] == pytest.approx(1.0) and s[1, 0] == pytest.approx(1.0)  # a circle with itself


@pytest.mark.parametrize("d_full", [30, 60, 200])
def test_rank_score_is_the_full_circle_s_of_equal_chance_probability(d_full):
    # check: (1 + S) / 2 ~ Beta(d/2, d/2) for independent circles of d equal-variance modes
    # (common practice); the masked score of S over a fraction f (d = f d_full modes) should be
    # the full-circle S with the same exact tail probability (scipy.special.betainc)
    from scipy.optimize import brentq
    from scipy.special import betainc

    for f, s in ((0.3, 0.95), (0.4, 0.974), (0.64, 0.9), (0.5, 0.5), (0.3, 0.99), (0.8, -0.6)):
        d = f * d_full
        p = betainc(d / 2, d / 2, (1 - abs(s)) / 2)
        want = np.sign(s) * brentq(lambda x: betainc(d_full / 2, d_full / 2, (1 - x) / 2) - p, 0.0, 1 - 1e-12)
        assert st.rank_score(np.array([s]), np.array([f]))[0] == pytest.approx(want, abs=0.01)
    assert st.rank_score(np.array([0.7, -np.inf]), np.array([1.0, 0.5])).tolist() == [pytest.approx(0.7), -np.inf]
