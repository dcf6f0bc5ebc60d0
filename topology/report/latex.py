r"""LaTeX tables ready to paste into a paper: one writer for every table of a report.

:func:`latex_table` writes a ``table`` float (or a ``longtable`` for many rows) with booktabs
rules and the caption above the table (a paper needs ``\usepackage{booktabs,longtable}``).
Cells of text are escaped (:func:`escape`); headers and captions are LaTeX as given (math in
``$...$``).
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


def latex_table(header: list[str], rows: list[list[str]], caption: str, align: str | None = None,
                long: bool = False) -> str:
    r"""A LaTeX table with booktabs rules (``\usepackage{booktabs}``): ``header`` (LaTeX),
    ``rows`` (cells already made with :func:`cell`), ``caption`` (LaTeX), ``align`` (e.g.
    "llrr"; default l for the first column, r for the others). ``long``: a ``longtable``
    (``\usepackage{longtable}``) that breaks across pages, for tables of many rows."""
    align = align or ("l" + "r" * (len(header) - 1))
    head = " & ".join(header) + r" \\"
    body = [" & ".join(r) + r" \\" for r in rows]
    if long:
        return "\n".join([r"\begingroup\small\setlength{\tabcolsep}{4pt}", rf"\begin{{longtable}}{{{align}}}", rf"\caption{{{caption}}}\\",
                          r"\toprule", head, r"\midrule", r"\endfirsthead", r"\toprule", head, r"\midrule",
                          r"\endhead", r"\bottomrule", r"\endlastfoot", *body, r"\end{longtable}", r"\endgroup", ""])
    return "\n".join([r"\begin{table}[htbp]", r"\centering", r"\small\setlength{\tabcolsep}{4pt}", rf"\caption{{{caption}}}",
                      rf"\begin{{tabular}}{{{align}}}", r"\toprule", head, r"\midrule", *body, r"\bottomrule",
                      r"\end{tabular}", r"\end{table}", ""])


def space_tex(row) -> str:
    """A space's name in LaTeX: lens $L(p,q)$, prism $D^*_m$, other names as escaped text."""
    family = str(row["family"])
    configured = " (configured)" if str(row["space"]).endswith("(configured)") else ""
    if family == "lens" and row["p"] is not np.ma.masked:
        p = int(row["p"])
        same = str(row["isometric_q"]).split() if row["isometric_q"] is not np.ma.masked else []
        names = " \\simeq ".join(f"L({p},{q})" for q in (same or [int(row["q"])]))
        return f"${names}${configured}"
    if family == "prism" and row["m"] is not np.ma.masked:
        return f"prism $D^*_{{{int(row['m'])}}}${configured}"
    return escape(row["space"])


def bounds_caption(summary: dict) -> str:
    """What the bounds show: alpha_min, chi_rec, the flat headline and the convention."""
    a = summary["alpha_min_deg"]
    f = summary["flat"]
    conv = (escape(summary["convention"]).replace(r"Omega\_K", r"$\Omega_K$").replace(r"Omega\_Lambda", r"$\Omega_\Lambda$")
            .replace(r"omega\_b h\textasciicircum{}2", r"$\omega_b h^2$").replace(r"omega\_c h\textasciicircum{}2", r"$\omega_c h^2$")
            .replace(r"z\_*", r"$z_*$").replace(r"h\textasciicircum{}2", r"$h^2$"))
    return (f"Bounds from the absence of matched circles of radius $\\alpha \\geq {a:g}^\\circ$ "
            f"($\\chi_{{\\rm rec}} = {summary['chi_rec_mpc']:.0f}$ Mpc). Flat spaces: shortest loop "
            f"$> {f['min_loop_over_lss_diameter']:.4f} \\times 2\\chi_{{\\rm rec}}$, cubic torus "
            f"$R_i > {f['cubic_torus_inscribed_radius_over_chi_rec']:.4f}\\,\\chi_{{\\rm rec}}$. "
            f"Convention: {conv}.")


def bounds_latex(curved, flat, summary: dict, extra_caption: str = "") -> str:
    """The bounds as LaTeX: a table of flat spaces (any flat space, the cubic torus, configured
    spaces with their verdicts) and a long table of curved spaces (one row per distinct space,
    configured ones with their verdicts). Needs booktabs and longtable."""
    caption = bounds_caption(summary) + extra_caption
    quantity = {"shortest loop / (2 chi_rec)": r"$d_{\min}/2\chi_{\rm rec}$",
                "inscribed radius R_i / chi_rec": r"$R_i/\chi_{\rm rec}$", "scale factor of the shape": "scale $s$"}
    flat_rows = [[escape(r["space"]), quantity.get(str(r["quantity"]), escape(r["quantity"])), cell(r["bound"], ".4f"),
                  cell(r["bound_mpc"] / 1000.0 if r["bound_mpc"] is not np.ma.masked else None, ".2f"),
                  cell(r["verdict"])] for r in flat]
    flat_tex = latex_table(["space", "quantity", "bound", "[Gpc]", "verdict"], flat_rows,
                           "Flat spaces: each quantity is larger than its bound (a configured shape is allowed "
                           "when scaled by more than $s$). " + caption, "llrrl")
    curved_rows = [[space_tex(r), cell(r["shortest_displacement"], ".4f"),
                    cell(r["max_chi_rec_over_curvature_radius"], ".4f"), cell(r["omega_k_bound"], ".4f"),
                    cell(r["min_curvature_radius_mpc"] / 1000.0 if r["min_curvature_radius_mpc"] is not np.ma.masked
                         else None, ".1f"), cell(r["verdict"])] for r in curved]
    header = ["space", r"$d_{\min}/R_c$", r"$\max \chi_{\rm rec}/R_c$", r"$\Omega_K$ bound",
              r"$\min R_c$ [Gpc]", "verdict"]
    curved_tex = latex_table(header, curved_rows,
                             r"Curved spaces: $\Omega_K$ above the bound (spherical) or below it (hyperbolic). "
                             + caption, "lrrrrl", long=True)
    return flat_tex + "\n" + curved_tex
