"""The harmonic view of a space: the covariance of its low multipoles and how far it is from isotropy.

Modules, one concern each, data flowing down the list:

* basis.py       the real a_lm basis (l = 2..lmax), real harmonics, conversions from healpy
* radial.py      radial functions of the temperature terms; the isotropic C_l at a wave-number cut
* flat.py        a flat space's invariant modes (those of the skies) as columns of the covariance
* spherical.py   a spherical space's invariant S^3 modes (those of the skies) as columns, its degree cut
* covariance.py  the covariance from blocks of modes (BLAS rank updates) and the dispatch by space
* pixels.py      the observed pixels of a map (noise, mask, beam, monopole and dipole) in N x N form
* kl.py          the Kullback-Leibler divergence of two zero-mean Gaussians, full sky or pixel space
* rotation.py    rotations of the sky frame on the real basis; a grid of orientations
* likelihood.py  the likelihood ratio of a map over orientations and the calibrated bound on the scale
* survey.py      [harmonic] settings of a config, the divergence against scale, a map's bound
* plot.py        the figure of the divergence against scale
"""

from .basis import alm_to_real, ells, n_coefficients, real_harmonics, real_to_alm
from .covariance import HarmonicCovariance, default_kchi_max, isotropic_covariance, space_covariance

__all__ = ["alm_to_real", "real_to_alm", "real_harmonics", "ells", "n_coefficients", "HarmonicCovariance",
           "space_covariance", "isotropic_covariance", "default_kchi_max"]
