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
        return "\n".join([r"\begingroup\small\setlength{\tabcolsep}{3pt}", rf"\begin{{longtable}}{{{align}}}", rf"\caption{{{caption}}}\\",
                          r"\toprule", head, r"\midrule", r"\endfirsthead", r"\toprule", head, r"\midrule",
                          r"\endhead", r"\bottomrule", r"\endlastfoot", *body, r"\end{longtable}", r"\endgroup", ""])
    return "\n".join([r"\begin{table}[htbp]", r"\centering", r"\small\setlength{\tabcolsep}{3pt}", rf"\caption{{{caption}}}",
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


def _tag(i: int) -> str:
    return "ABCDEFGHIJKLMNOPQRSTUVWXYZ"[i % 26]


def source_tags(*tables) -> dict:
    """{injected family label: letter} in order of first appearance in the tables' rows."""
    tags: dict = {}
    for t in tables:
        if "injected_family" not in t.colnames:
            continue
        for r in t:
            label = r["injected_family"]
            if label is not np.ma.masked and str(label) and str(label) not in tags:
                tags[str(label)] = _tag(len(tags))
    return tags


def alpha_cell(row, tags: dict) -> str:
    """The letter of the injected family whose alpha_min bounds a row (the caption gives its
    value); a dagger marks a borrowed alpha_min (an assumption)."""
    if "injected_family" not in row.colnames or row["injected_family"] is np.ma.masked:
        return "--"
    tag = tags.get(str(row["injected_family"]), "")
    mark = r"$^\dagger$" if str(row["calibration"]) == "borrowed" else ""
    return f"{tag}{mark}" or "--"


def sources_caption(tags: dict, alpha_by_label: dict | None = None) -> str:
    """The caption text that names the injected families of the alpha_min column."""
    if not tags:
        return ""
    parts = []
    for label, tag in tags.items():
        a = (alpha_by_label or {}).get(label, "?")
        a_tex = "not reached" if a is None else ("" if a == "?" else f"$\\alpha_{{\\min}} = {a:.1f}^\\circ$")
        parts.append(f"{tag} = injected {escape(label)}" + (f" ({a_tex})" if a_tex else ""))
    return (" The $\\alpha_{\\min}$ column names the injected family whose $\\alpha_{\\min}$ bounds each row: " + "; ".join(parts) + ". A dagger ($^\\dagger$) marks a borrowed $\\alpha_{\\min}$: that "
            "space's own family was not injected, and its bound assumes that its circles are found as well as "
            "those of the named family, an assumption, not a measurement.")


def bounds_caption(summary: dict) -> str:
    """What the bounds show: alpha_min, chi_rec, the flat headline and the convention."""
    a = summary["alpha_min_deg"]
    f = summary["flat"]
    conv = (escape(summary["convention"]).replace(r"Omega\_K", r"$\Omega_K$").replace(r"Omega\_Lambda", r"$\Omega_\Lambda$")
            .replace(r"omega\_b h\textasciicircum{}2", r"$\omega_b h^2$").replace(r"omega\_c h\textasciicircum{}2", r"$\omega_c h^2$")
            .replace(r"z\_*", r"$z_*$").replace(r"h\textasciicircum{}2", r"$h^2$"))
    loop, cubic = f["min_loop_over_lss_diameter"], f["cubic_torus_inscribed_radius_over_chi_rec"]
    flat = []
    if loop is not None:
        flat.append(f"shortest loop $> {loop:.4f} \\times 2\\chi_{{\\rm rec}}$")
    if cubic is not None:
        flat.append(f"cubic torus $R_i > {cubic:.4f}\\,\\chi_{{\\rm rec}}$")
    if a is not None and "sources" not in f:
        start = f"Bounds from the absence of matched circles of radius $\\alpha \\geq {a:g}^\\circ$ "
    else:
        start = "Bounds from the absence of matched circles of radius $\\alpha \\geq \\alpha_{\\min}$ "
    return (start + f"($\\chi_{{\\rm rec}} = {summary['chi_rec_mpc']:.0f}$ Mpc)."
            + (f" Flat spaces: {', '.join(flat)}." if flat else "")
            + f" Convention: {conv}.")


def bounds_latex(curved, flat, summary: dict, extra_caption: str = "") -> str:
    """The bounds as LaTeX: a table of flat spaces (any flat space, the cubic torus, configured
    spaces with their verdicts) and a long table of curved spaces (one row per distinct space,
    configured ones with their verdicts), each row with its alpha_min and the injected family
    it comes from (lettered in the caption). Needs booktabs and longtable."""
    tags = source_tags(flat, curved)
    order = list((summary.get("alpha_min_by_family") or {}).keys())  # letters in the injected order
    tags = {label: _tag(i) for i, label in enumerate(sorted(tags, key=lambda k: order.index(k) if k in order
                                                           else len(order)))}
    caption = bounds_caption(summary) + sources_caption(tags, summary.get("alpha_min_by_family")) + extra_caption
    quantity = {"shortest loop / (2 chi_rec)": r"$d_{\min}/2\chi_{\rm rec}$",
                "inscribed radius R_i / chi_rec": r"$R_i/\chi_{\rm rec}$", "scale factor of the shape": "scale $s$"}
    flat_rows = [[escape(r["space"]), quantity.get(str(r["quantity"]), escape(r["quantity"])), cell(r["bound"], ".4f"),
                  cell(r["bound_mpc"] / 1000.0 if r["bound_mpc"] is not np.ma.masked else None, ".2f"),
                  alpha_cell(r, tags), cell(r["verdict"])] for r in flat]
    flat_head = ["space", "quantity", "bound", "[Gpc]", r"$\alpha_{\min}$", "verdict"]
    keep = (lambda row: row) if tags else (lambda row: row[:-2] + row[-1:])  # one given alpha_min: no column
    flat_tex = latex_table(keep(flat_head), [keep(r) for r in flat_rows],
                           "Flat spaces: each quantity is larger than its bound (a configured shape is allowed "
                           "when scaled by more than $s$). " + caption, "llrr" + ("ll" if tags else "l"))
    curved_rows = [[space_tex(r), cell(r["shortest_displacement"], ".4f"), cell(r["omega_k_bound"], ".4f"),
                    cell(r["min_curvature_radius_mpc"] / 1000.0 if r["min_curvature_radius_mpc"] is not np.ma.masked
                         else None, ".1f"), alpha_cell(r, tags), cell(r["verdict"])] for r in curved]
    header = ["space", r"$d_{\min}/R_c$", r"$\Omega_K$ bound",
              r"$\min R_c$ [Gpc]", r"$\alpha_{\min}$", "verdict"]
    curved_tex = latex_table(keep(header), [keep(r) for r in curved_rows],
                             r"Curved spaces: $\Omega_K$ above the bound (spherical) or below it (hyperbolic); "
                             r"bounds.ecsv also gives the largest allowed $\chi_{\rm rec}/R_c$. "
                             + caption, "lrrr" + ("ll" if tags else "l"), long=True)
    return flat_tex + "\n" + curved_tex


def harmonic_latex(t, meta: dict) -> str:
    """The low-l likelihood bounds (table of :func:`topology.report.tables.harmonic_bounds_table`)
    beside the circle bound of the same family, with what they assume in the caption."""
    def status(r) -> str:
        text = str(r["status"])
        return "not computed" if text.startswith("not computed") else text.split(" (")[0]

    rows = [[escape(r["map"]), escape(r["space"]), cell(r["circle_bound"], ".3f"), cell(r["circle_verdict"]),
             cell(r["likelihood_bound"], ".3f"), escape(status(r))] for r in t]
    caption = (r"Flat spaces: the circle bound (the shape is allowed when scaled by more than $s$) beside the low-$\ell$ "
               rf"likelihood bound (every scale up to $s$ excluded at level {meta['level']:g}). The likelihood uses "
               rf"$\ell = 2..{meta['lmax']}$ of the map at $N_{{\rm side}} = {meta['nside']}$ "
               rf"(white noise {meta['noise_uk']:g}\,$\mu$K per pixel, beam {meta['fwhm_deg']:g}$^\circ$, mask: "
               f"{escape(meta['mask'])}; {escape(meta['degradation'])}); statistic: {escape(meta['statistic'])}, "
               f"{escape(meta['orientation'])}; threshold from {meta['n_cal']} simulated maps of each scale "
               f"({escape(meta['terms'])} terms). Spherical and hyperbolic families are not computed: the likelihood "
               "of a map is implemented for flat spaces only.")
    return latex_table(["map", "space", "circles $s$", "circle verdict", r"low-$\ell$ $s$", "status"], rows, caption,
                       "lp{2.6cm}rp{2.4cm}rl")
