"""The static page of a report: every figure inlined, every table, provenance; no server and no
external assets."""

from __future__ import annotations

import base64
import html
import json
from pathlib import Path

import numpy as np
from astropy.table import Table


def _img(folder: Path, name: str) -> str:
    data = base64.b64encode((folder / name).read_bytes()).decode()
    return f'<img alt="{html.escape(name)}" src="data:image/png;base64,{data}" style="max-width:100%">'


def _table_html(t: Table) -> str:
    head = "".join(f"<th>{html.escape(c)}{f' [{t[c].unit}]' if t[c].unit else ''}</th>" for c in t.colnames)
    body = []
    for row in t:
        cells = []
        for c in t.colnames:
            v = row[c]
            cells.append(f"<td>{v:.4g}</td>" if isinstance(v, (float, np.floating)) else f"<td>{html.escape(str(v))}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><tr>{head}</tr>{''.join(body)}</table>"


def write_index(folder: Path, summary: dict, tables: dict[str, Table], figures: dict[str, list[str]], caution: str) -> None:
    parts = ["<!doctype html><html><head><meta charset='utf-8'><title>topology run report</title>",
             "<style>body{font-family:sans-serif;max-width:1000px;margin:auto;padding:1em}"
             "table{border-collapse:collapse;font-size:0.85em}td,th{border:1px solid #ccc;padding:2px 6px}"
             ".caution{background:#fff4e0;border:1px solid #e0b060;padding:0.5em 1em}</style></head><body>",
             "<h1>Matched-circle search report</h1>",
             f"<p class='caution'><b>What these results assume.</b> {html.escape(caution)}</p>", "<h2>Maps</h2><ul>"]
    def deg(a):
        return "none" if a is None else f"{a:.1f} deg"

    for m in summary["maps"]:
        by_family = m.get("alpha_min_by_family")
        if by_family:
            amin = "; ".join(f"{html.escape(label)}: {deg(a)}" for label, a in by_family.items())
            amin = f"alpha_min per injected family: {amin}"
        else:
            amin = f"alpha_min = {deg(m['alpha_min_deg'])}"
        parts.append(f"<li><b>{html.escape(m['name'])}</b>: {'DETECTED' if m['detected'] else 'no detection'}; "
                     f"{amin}; global p-value of the best candidate = {m.get('global_p_value', float('nan')):.3g}"
                     + (f"<br><i>{html.escape(m['note'])}</i>" if m.get("note") else "") + "</li>")
    parts.append("</ul>")
    for key, names in figures.items():
        png = [n for n in names if n.endswith(".png")]
        if png:
            parts.append(f"<h3>{html.escape(key)}</h3>" + _img(folder, png[0]))
            parts.append(" ".join(f"<a href='{html.escape(n)}'>{html.escape(n)}</a>" for n in names))
    for key, t in tables.items():
        parts.append(f"<h2>{html.escape(key)}</h2>" + _table_html(t))
    parts.append("<h2>Provenance</h2><pre>" + html.escape(json.dumps(summary.get("provenance", {}), indent=1)[:20000]) + "</pre>")
    parts.append("</body></html>")
    (folder / "index.html").write_text("\n".join(parts))
