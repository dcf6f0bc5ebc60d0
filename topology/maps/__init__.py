"""HEALPix maps and masks: reading, validation and preparation for the circle search.

One module a step, each importing only those above it:

    pixels.py    blocks of pixels (CHUNK), N_side of a pixel count, NESTED -> RING, the
                 sub-pixels or parent of a pixel at another N_side
    values.py    SkyMap; which pixel values are unobserved (UNSEEN, NaN, inf, sentinels,
                 outliers) with their note; check_values; as_skymap (an in-memory array)
    read.py      read_healpix: FITS binary tables in blocks of rows (RING or NESTED, column
                 choice, explicit partial sky, gzip, damaged files)
    masks.py     mask weights on the map's pixels, regrading, coverage checks, sky fraction
    prepare.py   check_resolution, monopole/dipole fit (normal equations), filter f_l,
                 the working mask, harmonic degrading: prepare_map -> PreparedMap
    polarised.py read_iqu: I, Q, U columns of one file, the Q/U convention (POLCCONV or given)
    emode.py     the E-mode map of Q, U on a masked sky (apodised mask, harmonic E), E/B leakage

Every name below can be imported from ``topology.maps``. The block sizes,
``topology.maps.pixels.CHUNK`` (pixels) and ``topology.maps.read.READ_BYTES`` (rows of a file),
are read where they are defined when each step runs; they are not re-exported here, since a copy
would not change them.
"""

from .masks import check_mask, check_sky_fraction, mask_weights, regrade_weights, sky_fraction, weight_blocks
from .prepare import (PreparedMap, check_resolution, filter_weights, fit_monopole_dipole, fit_normal_equations,
                      prepare_map, remove_monopole_dipole, weighted_alm, working_mask)
from .polarised import PolarisedMap, read_iqu
from .read import ORDERING_FROM, ORDERINGS, read_healpix
from .values import MAD_TO_SIGMA, OUTLIER_SIGMA, SENTINEL_ABS, UNSEEN, SkyMap, as_skymap, bad_count, check_values

__all__ = [
    "MAD_TO_SIGMA", "ORDERINGS", "ORDERING_FROM", "OUTLIER_SIGMA", "PolarisedMap", "PreparedMap", "read_iqu", "SENTINEL_ABS", "SkyMap", "UNSEEN",
    "as_skymap", "bad_count", "check_mask", "check_resolution", "check_sky_fraction", "check_values", "filter_weights",
    "fit_monopole_dipole", "fit_normal_equations", "mask_weights", "prepare_map", "read_healpix", "regrade_weights",
    "remove_monopole_dipole", "sky_fraction", "weight_blocks", "weighted_alm", "working_mask",
]
