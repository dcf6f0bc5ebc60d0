"""The matched-circle search: circles on a map, the S statistic, search modes, checkpoints.

Python API::

    from topology.maps import read_healpix
    from topology.search import SearchSettings, search_sky, search_files

    result = search_files("map.fits", "mask.fits", SearchSettings(mode="all-pairs"))

Modules: sampling (circles on a map), statistic (S kernels), modes (antipodal, all-pairs,
targeted), checkpoint (resume), progress (the progress bar), engine (the job).
"""

from .engine import MODES, SearchSettings, parse_radii, search_files, search_sky, settings_from, validate

__all__ = ["MODES", "SearchSettings", "parse_radii", "search_files", "search_sky", "settings_from", "validate"]
