"""LaTeX tables ready to paste into a paper: one writer for every table of a report.

:func:`latex_table` writes a ``table`` float with a ``tabular``, horizontal rules above and
below the header and at the end, and the caption after the tabular. Cells of text are escaped
(:func:`escape`); headers and captions are LaTeX as given (math in ``$...$``).
"""

from __future__ import annotations

import math

import numpy as np

_SPECIAL = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_",
            "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}"}


def escape(text) -> str:
    """Plain text with LaTeX's special characters escaped."""
    return "".join(_SPECIAL.get(ch, ch) for ch in str(text))


def cell(value, fmt: str = ".4f") -> str:
    """One table cell: '--' for a missing or non-finite number, a formatted number, or escaped text."""
    if value is None or value is np.ma.masked:
        return "--"
    if isinstance(value, (float, np.floating)):
        return "--" if not math.isfinite(float(value)) else format(float(value), fmt)
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    return escape(value)


def latex_table(header: list[str], rows: list[list[str]], caption: str, align: str | None = None) -> str:
    """A LaTeX ``table`` float: ``header`` (LaTeX), ``rows`` (cells already made with
    :func:`cell`), ``caption`` (LaTeX), ``align`` (e.g. "llrr"; default l for the first column,
    r for the others)."""
    align = align or ("l" + "r" * (len(header) - 1))
    lines = [r"\begin{table}[htbp]", r"\centering", rf"\begin{{tabular}}{{{align}}}", r"\hline",
             " & ".join(header) + r" \\", r"\hline"]
    lines += [" & ".join(r) + r" \\" for r in rows]
    lines += [r"\hline", r"\end{tabular}", rf"\caption{{{caption}}}", r"\end{table}", ""]
    return "\n".join(lines)


_BOUNDS_COLUMNS = {
    "geometry": ("geometry", None), "family": ("family", None), "p": ("$p$", None), "q": ("$q$", None),
    "m": ("$m$", None), "shortest_displacement": (r"$d_{\min}/R_c$", ".4f"),
    "max_chi_rec_over_curvature_radius": (r"$\max \chi_{\rm rec}/R_c$", ".4f"),
    "min_curvature_radius_over_chi_rec": (r"$\min R_c/\chi_{\rm rec}$", ".4f"),
    "omega_k_bound": (r"$\Omega_K$ bound", ".4f"), "bound_kind": ("kind", None),
    "min_curvature_radius_mpc": (r"$\min R_c$ [Mpc]", ".0f"),
}


def bounds_caption(summary: dict) -> str:
    """What the bounds table shows: alpha_min, chi_rec, the flat bounds and the convention."""
    a = summary["alpha_min_deg"]
    f = summary["flat"]
    conv = escape(summary["convention"]).replace(r"h^2", "$h^2$").replace(r"h\textasciicircum{}2", "$h^2$")
    return (f"Bounds from the absence of matched circles of radius $\\alpha \\geq {a:g}^\\circ$ "
            f"($\\chi_{{\\rm rec}} = {summary['chi_rec_mpc']:.0f}$ Mpc). Flat spaces: shortest loop "
            f"$> {f['min_loop_over_lss_diameter']:.4f} \\times 2\\chi_{{\\rm rec}}$, cubic torus "
            f"$R_i > {f['cubic_torus_inscribed_radius_over_chi_rec']:.4f}\\,\\chi_{{\\rm rec}}$. "
            f"Convention: {conv}.")


def bounds_latex(table, summary: dict, extra_caption: str = "") -> str:
    """The bounds table (:func:`topology.report.tables.bounds_table`) as LaTeX, with a caption
    giving alpha_min and the convention, followed by ``extra_caption`` (LaTeX)."""
    names = [c for c in _BOUNDS_COLUMNS if c in table.colnames]
    header = [_BOUNDS_COLUMNS[c][0] for c in names]
    rows = [[cell(row[c], _BOUNDS_COLUMNS[c][1] or ".4f") for c in names] for row in table]
    return latex_table(header, rows, bounds_caption(summary) + extra_caption, "ll" + "r" * (len(names) - 2))
