"""The matched-circle search: circles on a map, the S statistic, search modes, the job.

Python API::

    from topology.maps import read_healpix
    from topology.search import SearchSettings, search_sky, search_files

    result = search_files("map.fits", "mask.fits", SearchSettings(mode="all-pairs"))

Modules, in the order of the flow: sampling (circles on a map), statistic (S kernels), context
(what a mode works on: prepared map, settings, levels), allpairs (the all-pairs kernel of the
coarse level), hierarchy (refinement of centre pairs level by level), targeted (orientation scan
of predicted pairs), modes (antipodal, all-pairs, targeted: tasks and summaries), engine
(settings, the job: tasks through topology.execution.run_tasks, checkpoint in topology.store),
plot (the figure of a result), combined and polarised (the T + E statistic; searches of the E map
and of T + E: ``search_files(path, field="E" or "T+E", convention=...)``).
"""

from .engine import MODES, SearchSettings, parse_radii, search_files, search_sky, settings_from, validate

__all__ = ["MODES", "SearchSettings", "parse_radii", "search_files", "search_sky", "settings_from", "validate"]
