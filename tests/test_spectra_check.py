"""The run's consistency check of injected and null sky power per l band (topology.run.spectra_check)."""

import healpy as hp
import numpy as np

from topology.run import spectra_check as sc

LMAX, NSIDE = 64, 32


def skies(cl: np.ndarray, n: int, seed: int) -> np.ndarray:
    """C_l of n full-sky Gaussian skies (their a_lm: the map step is tested once below)."""
    np.random.seed(seed)  # healpy's synalm draws from numpy's global state
    return np.array([hp.alm2cl(hp.synalm(cl, lmax=LMAX, new=True)) for _ in range(n)])


def test_sky_power_is_the_spectrum_of_the_map():
    np.random.seed(7)
    alm = hp.synalm(model_cl(), lmax=LMAX, new=True)
    m = hp.alm2map(alm, NSIDE, lmax=LMAX)
    got = np.array(sc.sky_power(m, LMAX))
    # the C_l the sky's own a_lm give (healpy alm2cl); map2alm of a band-limited l <= 2 N_side map
    # with one iteration recovers them to 3e-4 here (measured), so 2e-3 is a loose bound
    assert np.allclose(got[2:], hp.alm2cl(alm)[2:], rtol=2e-3)


def model_cl() -> np.ndarray:
    ell = np.arange(LMAX + 1)
    cl = np.zeros(LMAX + 1)
    cl[2:] = 1e3 / (ell[2:] * (ell[2:] + 1.0))
    return cl


def test_error_of_the_ratio_is_the_cosmic_variance_of_both_sets():
    cl = model_cl()
    null, inj = skies(cl, 40, 1), skies(cl, 30, 2)
    rows = sc.compare(null, {"same": inj}, LMAX)
    assert [(r["l_min"], r["l_max"]) for r in rows] == [(2, 4), (5, 9), (10, 19), (20, 29), (30, 49), (50, 64)]
    # check: cosmic variance of a full-sky C_l estimate, var = 2 C_l^2 / (2l + 1) (Knox 1995);
    # for a 2l+1 weighted band mean B: var(B) = sum_l (2l+1)^2 var_l / (sum 2l+1)^2
    for r in rows:
        ell = np.arange(r["l_min"], r["l_max"] + 1)
        w = 2.0 * ell + 1.0
        band = (w @ cl[ell]) / w.sum()
        var_b = (w ** 2 @ (2.0 * cl[ell] ** 2 / w)) / w.sum() ** 2
        expected = np.sqrt(var_b / band ** 2 * (1 / 40 + 1 / 30))
        # the scatter of 30-40 skies estimates its variance to ~25% (chi-square with ~35 dof)
        assert 0.6 * expected < r["error"] < 1.5 * expected, (r, expected)
        assert abs(r["ratio"] - 1.0) < 4.0 * expected
    assert not any(r["departs"] for r in rows)
    assert sc.departure_notes(rows) == []


def test_a_high_l_deficit_is_flagged_and_named():
    cl = model_cl()
    low = cl.copy()
    low[30:] *= 0.85  # the deficit of a wave-number cut too close to lmax
    rows = sc.compare(skies(cl, 30, 3), {"E1": skies(low, 30, 4)}, LMAX)
    high = [r for r in rows if r["l_min"] >= 30]
    assert all(r["departs"] for r in high)
    assert all(abs(r["ratio"] - 0.85) < 4 * r["error"] for r in high)
    assert not any(r["departs"] for r in rows if r["l_max"] < 20)
    (text,) = sc.departure_notes(rows)
    assert "E1" in text and "l 30-49" in text and "l 50-64" in text


def test_too_few_skies_give_no_rows():
    cl = model_cl()
    assert sc.compare(skies(cl, 1, 5), {"E1": skies(cl, 3, 6)}, LMAX) == []
    assert sc.compare(skies(cl, 3, 5), {"E1": skies(cl, 1, 6)}, LMAX) == []
