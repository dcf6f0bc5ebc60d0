"""Test inputs for the search, independent of topology.skies: fields on E^3 invariant under a
flat space's group, evaluated on the last-scattering sphere, and isotropic Gaussian skies.

invariant_field: f(x) = sum_i A_i cos(2 pi q_i . x + p_i) with q_i in the dual of the space's
translation lattice (so f is lattice periodic), summed over the coset representatives g_k:
T(x) = sum_k f(g_k x), invariant under the whole group. Its matched circles are exact by
construction (common practice). Amplitudes A ~ |q|^-3/2 (a scale-invariant, Sachs-Wolfe-like
spectrum: P(k) ~ k^-3; common practice).
"""

import healpy as hp
import numpy as np
import pytest

from topology import geometry as geo
from topology.spaces import build_space


def invariant_field(space, obs, nside, seed, n_waves=1000, qmax=16.0, directions=None):
    """T on the pixel centres (RING) of N_side ``nside`` (or at ``directions`` (n, 3))."""
    rng = np.random.default_rng(seed)
    B = space.lattice
    D = np.linalg.inv(B).T  # rows: dual basis, B_i . D_j = delta_ij
    nmax = int(np.ceil(qmax / np.linalg.norm(D, axis=1).min()))
    grid = np.stack(np.meshgrid(*[np.arange(-nmax, nmax + 1)] * 3, indexing="ij"), -1).reshape(-1, 3)
    q = grid @ D
    qn = np.linalg.norm(q, axis=1)
    ok = np.flatnonzero((qn > 0) & (qn <= qmax))
    idx = rng.choice(ok, min(n_waves, ok.size), replace=False)
    q = q[idx]
    amp = rng.standard_normal(q.shape[0]) * np.linalg.norm(q, axis=1) ** -1.5
    ph = rng.uniform(0.0, 2.0 * np.pi, q.shape[0])
    if directions is None:
        directions = np.array(hp.pix2vec(nside, np.arange(hp.nside2npix(nside)))).T
    x = obs.exp(directions, 1.0)[:, :3]
    T = np.zeros(len(x))
    for R, t in space.cosets:
        y = x @ R.T + t
        for i0 in range(0, len(y), 20000):
            T[i0:i0 + 20000] += np.cos(2.0 * np.pi * (y[i0:i0 + 20000] @ q.T) + ph) @ amp
    return T


def isotropic_map(nside, seed, lmax=None, fwhm_deg=0.0):
    """Gaussian isotropic sky with C_l = 1 / (l (l + 1)) (Sachs-Wolfe plateau), l >= 2, from a
    seeded numpy Generator: a_l0 real with variance C_l, a_lm (m > 0) complex with variance C_l / 2
    per part (the convention of healpy.synalm; common practice)."""
    rng = np.random.default_rng(seed)
    lmax = 3 * nside - 1 if lmax is None else lmax
    ell, m = hp.Alm.getlm(lmax)
    cl = np.zeros(lmax + 1)
    cl[2:] = 1.0 / (np.arange(2, lmax + 1) * np.arange(3, lmax + 2))
    sig = np.sqrt(cl[ell])
    alm = np.where(m == 0, rng.standard_normal(ell.size) * sig,
                   (rng.standard_normal(ell.size) + 1j * rng.standard_normal(ell.size)) * sig / np.sqrt(2))
    if fwhm_deg > 0:
        alm = hp.almxfl(alm, hp.gauss_beam(np.radians(fwhm_deg), lmax=lmax))
    return hp.alm2map(alm.astype(complex), nside, lmax=lmax)


@pytest.mark.parametrize("family,lengths", [("E1", [1.6, 1.6, 1.6]), ("E2", [1.55, 1.7, 0.8]), ("E7", [1.5, 1.6, 0.9])])
def test_invariant_field_is_invariant(family, lengths):
    # T(g x) = T(x) for group elements g (the construction; common practice)
    space = build_space({"family": family, "lengths": lengths})
    obs = geo.Observer.make("flat", [0.1, -0.2, 0.05])
    rng = np.random.default_rng(3)
    pts = rng.normal(size=(50, 3))
    dirs = pts / np.linalg.norm(pts, axis=1, keepdims=True)
    t0 = invariant_field(space, obs, 0, 11, n_waves=200, qmax=6.0, directions=dirs)
    hol = space.elements_within(obs, 2.0)
    for g in hol.matrices[:10]:
        x = obs.exp(dirs, 1.0) @ g.T  # g x in homogeneous coordinates
        d = x[:, :3] / np.linalg.norm(x[:, :3], axis=1, keepdims=True)
        r = np.linalg.norm(x[:, :3], axis=1)
        # evaluate at g x directly: directions from the origin observer at distance r
        t1 = np.array([invariant_field(space, _at(r_i), 0, 11, n_waves=200, qmax=6.0, directions=d_i[None])[0]
                       for r_i, d_i in zip(r, d)])
        assert np.allclose(t0, t1, atol=1e-9 * np.abs(t0).max())


def _at(r):
    """An observer at the origin whose 'last-scattering sphere' has radius r (flat: scale x)."""

    class _Obs:
        def exp(self, dirs, _chi):
            return np.hstack([np.asarray(dirs) * r, np.ones((len(dirs), 1))])

    return _Obs()
