"""The report of a run: tables (ECSV, LaTeX), figures (PNG, PDF) and a static HTML page.

Everything here reads plain results (dicts, arrays, astropy Tables) and recomputes nothing:
``tables`` makes the astropy Tables with units and provenance meta, ``latex`` the one LaTeX
table writer, ``figures`` the figures, ``html`` the page. The caller writes the report into a
staging folder and moves it into place (:mod:`topology.run.output`), so a report is whole or
absent.
"""

from .figures import figure_efficiency, figure_omega_k, figure_sky, figure_smax, save_figure
from .html import write_index
from .latex import bounds_latex, latex_table
from .tables import (bounds_table, candidates_table, efficiency_table, flat_bounds_table, spectra_check_table,
                     target_tables, thresholds_table)

__all__ = ["bounds_latex", "bounds_table", "candidates_table", "efficiency_table", "figure_efficiency",
           "figure_omega_k", "figure_sky", "figure_smax", "flat_bounds_table", "latex_table", "save_figure", "spectra_check_table", "target_tables",
           "thresholds_table", "write_index"]
