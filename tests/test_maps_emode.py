"""The E-mode map of Q, U: healpy's convention on the full sky, the apodised mask, and E/B
leakage through a |b| < 15 deg cut measured on pure-E skies."""

import math

import healpy as hp
import numpy as np
import pytest

from topology.errors import InputError
from topology.maps.emode import apodised_mask, emode_map, leakage_bands
from topology.skies import polarised
from topology.skies.instrument import galactic_mask


def test_full_sky_e_map_is_healpys_e():
    # check: healpy alm2map(pol=True) / map2alm(pol=True) are inverse on the HEALPix convention:
    # a pure-E field (B = 0) gives back its own E map
    lmax, nside = 32, 16
    rng = np.random.default_rng(1)
    cl = polarised.shipped_pol_cl(lmax)["EE"]
    ell, m = hp.Alm.getlm(lmax)
    g = rng.standard_normal((ell.size, 2))
    a = np.where(m == 0, 1.0, np.sqrt(0.5)) * np.sqrt(cl[ell]) * (g[:, 0] + np.where(m == 0, 0, 1j * g[:, 1]))
    zero = np.zeros_like(a)
    _, q, u = hp.alm2map([zero, a, zero], nside, lmax=lmax, pol=True)
    e, w = emode_map(q, u, None, lmax=lmax)
    truth = hp.alm2map(a, nside, lmax=lmax)
    assert np.all(w == 1) and np.max(np.abs(e - truth)) < 1e-4 * truth.std()
    # the sign matters: E of (Q, -U) (the IAU reading of the same numbers) is not E
    e_iau, _ = emode_map(q, -u, None, lmax=lmax)
    assert np.corrcoef(e_iau, truth)[0, 1] < 0.5


def test_apodised_mask_taper():
    nside = 32
    mask = galactic_mask(nside, 15.0)
    w = apodised_mask(mask, 10.0)
    z = hp.pix2vec(nside, np.arange(mask.size))[2]
    b = np.degrees(np.arcsin(z))
    assert np.all(w[mask == 0] == 0) and np.all(w[np.abs(b) > 26.5] == 1)
    # d = |b| - 15 deg from the cut edge (to a pixel's size): w = (1 - cos(pi d / 10 deg)) / 2
    d = np.abs(b) - 15.0
    sel = (mask == 1) & (d < 9.0)
    expect = 0.5 * (1 - np.cos(np.pi * np.clip(d[sel], 0, 10) / 10.0))
    assert np.max(np.abs(w[sel] - expect)) < 0.5 * np.pi * math.degrees(hp.nside2resol(nside)) / 10.0
    assert np.array_equal(apodised_mask(mask, 0.0), mask)
    with pytest.raises(InputError, match="keeps no pixel"):
        apodised_mask(np.zeros(12 * 4 * 4), 5.0)


def test_leakage_through_a_galactic_cut():
    # measured on pure-E skies (no independent reference for the numbers: they are what the README
    # reports); what must hold: B leaks at a level of the E/B mixing of the cut (Lewis, Challinor
    # & Turok 2002: largest at low l), and the E estimate away from the cut follows the true E
    nside, lmax = 32, 64
    cl = polarised.shipped_pol_cl(lmax)["EE"]
    mask = galactic_mask(nside, 15.0)
    rows = leakage_bands(cl, mask, nside=nside, lmax=lmax, apod_deg=5.0, bands=[(2, 10), (11, 30), (31, 60)],
                         seed=2)
    low, mid, high = rows
    assert 0.02 < low["b_over_e"] < 0.3 and high["b_over_e"] < 0.03 < low["b_over_e"]
    assert high["r_interior"] > 0.97 and mid["r_interior"] > 0.9 and low["r_interior"] > 0.85
    # a pure-E field gives B near zero away from the cut at the band limit's scales
    assert high["b_rms_interior"] < 0.06 and low["b_rms_interior"] > 0.1
