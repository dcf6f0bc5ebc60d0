"""The static page of a report: the answer per map first (detected or not, the circles' radius
and significance, alpha_min, the headline bounds), then what the results assume, the figures,
the tables and the provenance. Every figure is inlined; no server, no script, no external
asset. The layout fits a 1,280 px window: images scale down, a wide table scrolls inside its
own box, long names and digests wrap."""

from __future__ import annotations

import base64
import html
import json
import math
from pathlib import Path

import numpy as np
from astropy.table import Table

from .tables import bounds_table, flat_bounds_table

DASH = "\u2013"  # an empty cell: one character, it cannot wrap into "- -"

STYLE = """
*{box-sizing:border-box}
body{font-family:system-ui,sans-serif;max-width:1240px;margin:0 auto;padding:1em 1.5em;line-height:1.4;color:#222}
h1{font-size:1.6em;margin-bottom:0.2em}
h2{border-bottom:1px solid #ccc;padding-bottom:0.2em;margin-top:1.6em}
h3{margin:1em 0 0.3em}
img{max-width:100%;height:auto;display:block}
.answer{border:1px solid #bbb;border-radius:6px;padding:0.4em 1em 0.8em;margin:0.8em 0}
.answer h3{margin-top:0.4em}
.detected{color:#a00}
.verdict-excluded{color:#a00;font-weight:600}
.verdict-allowed{color:#060;font-weight:600}
.warn{background:#fff4e0;border-left:4px solid #e0a030;padding:0.3em 0.8em;margin:0.5em 0}
.caution{background:#f4f6fa;border:1px solid #c8d0e0;padding:0.5em 1em}
.box{max-width:100%;overflow-x:auto;margin:0.4em 0 0.8em}
.box.tall{max-height:30em;overflow-y:auto;border-bottom:1px solid #ccc}
.box.tall th{position:sticky;top:0}
table{border-collapse:collapse;font-size:0.85em}
td,th{border:1px solid #ccc;padding:2px 6px;vertical-align:top;text-align:left}
th{background:#f2f2f2;font-weight:600}
td.num{text-align:right;white-space:nowrap;font-variant-numeric:tabular-nums}
td.text{overflow-wrap:break-word}
td.short{white-space:nowrap}
td.mono{font-family:monospace,monospace;font-size:0.9em;overflow-wrap:anywhere}
.unit{font-weight:normal;color:#555}
.links{white-space:nowrap;font-size:0.9em}
.figures{display:grid;grid-template-columns:repeat(2,minmax(0,1fr));grid-auto-flow:row dense;gap:1.2em 2em}
figure{margin:0;min-width:0}
figure.wide{grid-column:1/-1}
figcaption{font-weight:600;margin-bottom:0.3em}
caption{text-align:left;font-size:0.9em;color:#444;padding:0.2em 0;caption-side:top}
details{font-size:0.85em;margin:0.2em 0 0.6em}
"""


def _e(x) -> str:
    return html.escape(str(x))


def _num(v, unit: str = "") -> str:
    """A number for a cell or a sentence: Mpc as whole megaparsecs with thousands separators,
    other values to four significant figures; None, NaN and masked values as a dash."""
    if v is None or v is np.ma.masked:
        return DASH
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (int, np.integer)):
        return f"{int(v):,}" if unit == "Mpc" else str(int(v))
    v = float(v)
    if not math.isfinite(v):
        return DASH
    if unit == "Mpc" or 1e4 <= abs(v) < 1e12:
        return f"{v:,.0f}"
    return f"{v:.4g}"


def _deg(a) -> str:
    return "none" if a is None else f"{a:.1f} deg"


# ---------------------------------------------------------------------------------------------
# the answer per map
# ---------------------------------------------------------------------------------------------
def _candidate_text(c: dict, n_null: int | None) -> str:
    s_eq = c.get("S_eq", c["S"])
    stat = f"S_eq = {_num(s_eq)}" + (f" (S = {_num(c['S'])}, kept fraction f = {_num(c['overlap'])})"
                                     if "overlap" in c else "")
    floor = ""
    if n_null and c["p_value"] <= 1.0 / (1 + n_null) + 1e-12:
        floor = f" (the smallest p that {n_null} null skies can give)"
    return (f"radius {_deg(c['radius_deg'])}, centres (lon, lat) ({c['center_a'][0]:.1f}, {c['center_a'][1]:.1f}) and "
            f"({c['center_b'][0]:.1f}, {c['center_b'][1]:.1f}) deg, {_e(c['orientation'])} orientation; {stat}; "
            f"global p = {_num(c['p_value'])}{floor}, local p = {_num(c.get('p_value_local'))}")


def _verdict_html(verdict: str) -> str:
    cls = {"excluded": "verdict-excluded", "allowed": "verdict-allowed"}.get(verdict)
    return f"<span class='{cls}'>{_e(verdict)}</span>" if cls else _e(verdict)


def _headline_bounds(bounds: dict) -> str:
    """The bounds a reader looks for first: any flat space, the cubic torus, every configured
    family with its verdict, the dodecahedral space; each with the alpha_min it rests on."""
    ft, bt = flat_bounds_table(bounds), bounds_table(bounds)
    rows = []

    def source(r) -> str:
        if r["calibration"] == "given" or not r["injected_family"]:
            return _deg(None if r["alpha_min"] is np.ma.masked else float(r["alpha_min"]))
        a = None if r["alpha_min"] is np.ma.masked else float(r["alpha_min"])
        return f"{_deg(a)} ({_e(r['injected_family'])}, {_e(r['calibration'])})"

    for r in ft:
        b = None if r["bound"] is np.ma.masked else float(r["bound"])
        mpc = None if r["bound_mpc"] is np.ma.masked else float(r["bound_mpc"])
        if r["verdict"] in ("bound", "no bound"):
            what = (f"{_e(r['quantity'])} &gt; {_num(b)}" + (f" ({_num(mpc, 'Mpc')} Mpc)" if mpc is not None else "")
                    if b is not None else "no bound")
        else:
            what = _verdict_html(str(r["verdict"])) + (f"; allowed when scaled by more than {_num(b)}"
                                                       if b is not None and r["verdict"] == "excluded" else "")
        rows.append((_e(r["space"]), what, source(r)))
    for r in bt:
        configured = str(r["space"]).endswith("(configured)")
        if not (configured or r["family"] == "dodecahedral"):
            continue
        ok = None if r["omega_k_bound"] is np.ma.masked else float(r["omega_k_bound"])
        rel = "&lt;" if r["geometry"] == "hyperbolic" else "&gt;"
        bound = f"Omega_K {rel} {_num(ok)}" if ok is not None else ""
        what = _verdict_html(str(r["verdict"])) + (f"; {bound}" if bound else "") if configured else (bound or "no bound")
        rows.append((_e(r["space"]), what, source(r)))
    body = "".join(f"<tr><td class='text'>{a}</td><td class='text'>{b}</td><td class='text'>{c}</td></tr>"
                   for a, b, c in rows)
    return ("<div class='box'><table><tr><th>space</th><th>bound or verdict</th><th>alpha_min used "
            f"(injected family, calibration)</th></tr>{body}</table></div>")


def _map_answer(m: dict) -> str:
    name = _e(m["name"])
    n_null = m.get("n_null")
    parts = []
    if "targets" in m:
        head = "a target space detected" if m["detected"] else "no target space detected"
        parts.append(f"<h3>{name}: <span class='{'detected' if m['detected'] else ''}'>{head}</span></h3><ul>")
        for t in m["targets"]:
            what = "DETECTED" if t["detected"] else ("excluded" if t["excluded"] else "not excluded")
            parts.append(f"<li>{_e(t['target'])}: {_verdict_html(what) if what != 'DETECTED' else '<b>detected</b>'} "
                         f"(Z_comb = {_num(t['Z_combined'])}, threshold {_num(t['threshold'])}, S_comb = "
                         f"{_num(t.get('S_combined'))}, global p = "
                         f"{_num(t['p_value'])}, detection efficiency {_num(t['efficiency'])}, lower limit "
                         f"{_num(t['efficiency_lower'])})</li>")
        parts.append("</ul>")
    elif m["detected"]:
        above = [c for c in m["candidates"] if c.get("above_threshold")]
        parts.append(f"<h3>{name}: <span class='detected'>matched circles detected</span></h3>")
        parts.append(f"<p>{len(above)} pair{'s' if len(above) != 1 else ''} above the threshold at false-alarm "
                     f"probability {_num(m['false_alarm'])} (whole radius range). The most significant: "
                     f"{_candidate_text(above[0] if above else m['candidates'][0], n_null)}.</p>")
    else:
        parts.append(f"<h3>{name}: no matched circles detected</h3>")
        best = m["candidates"][0] if m["candidates"] else None
        global_p = m.get("global_p_value")
        text = (f"No pair is above the threshold at false-alarm probability {_num(m['false_alarm'])}; the best "
                f"candidate: {_candidate_text(best, n_null)}." if best else "No candidate pair.")
        if global_p is not None:
            text += f" Global p of the map's S_max curve (its most significant radius): {_num(global_p)}."
        parts.append(f"<p>{text}</p>")
        by_family = m.get("alpha_min_by_family") or {}
        if by_family:
            items = "".join(f"<li>{_e(k)}: {_deg(a)}</li>" for k, a in by_family.items())
            parts.append("<p>alpha_min, the smallest circle radius from which circles would be found (per injected "
                         f"family):</p><ul>{items}</ul>")
        elif m.get("alpha_min_deg") is not None:
            parts.append(f"<p>alpha_min = {_deg(m['alpha_min_deg'])}</p>")
        if m.get("bounds"):
            parts.append("<p>Headline bounds (every family and space in the tables below):</p>"
                         + _headline_bounds(m["bounds"]))
    if m.get("harmonic"):
        parts.append(_harmonic_answer(m["harmonic"]))
    if m.get("note"):
        parts.append(f"<p class='warn'>{_e(m['note'])}</p>")
    return f"<section class='answer' id='map-{name}'>{''.join(parts)}</section>"


def _harmonic_answer(rows: list[dict]) -> str:
    """The low-l likelihood bound of each [bounds] family beside its circle bound (both scale
    factors of the configured shape)."""
    from .tables import space_label

    body = []
    for h in rows:
        circle = (f"allowed when scaled by more than {_num(h['circle_min_scale'])} ({_e(h['circle_verdict'])})"
                  if h["circle_min_scale"] is not None else _e(h["circle_verdict"]))
        if not h["computed"]:
            like = _e(h.get("note") or "not computed")
        elif h["bound_scale"] is None:
            like = "no bound (the smallest scale is not excluded)"
        else:
            like = f"every scale up to {_num(h['bound_scale'])} excluded"
        body.append(f"<tr><td class='text'>{_e(space_label(h['family'], h['params']))}</td><td class='text'>{circle}"
                    f"</td><td class='text'>{like}</td></tr>")
    return ("<p>Low-l likelihood bound beside the circle bound of the same family (assumptions in the table "
            "below and under 'What these results assume'):</p><div class='box'><table><tr><th>space</th><th>matched "
            "circles</th><th>low-l likelihood</th></tr>" + "".join(body) + "</table></div>")


# ---------------------------------------------------------------------------------------------
# figures, tables, provenance
# ---------------------------------------------------------------------------------------------
WIDE_FIGURE_PX = 900  # a PNG wider than this spans both columns of the figure grid (sky maps)


def _figure(folder: Path, key: str, names: list[str]) -> str:
    png = [n for n in names if n.endswith(".png")]
    if not png:
        return ""
    raw = (folder / png[0]).read_bytes()
    width = int.from_bytes(raw[16:20], "big")  # the PNG header's width (IHDR, PNG specification)
    data = base64.b64encode(raw).decode()
    links = " \u00b7 ".join(f"<a href='{_e(n)}'>{_e(n.rsplit('.', 1)[-1].upper())}</a>" for n in names)
    wide = " class='wide'" if width > WIDE_FIGURE_PX else ""
    return (f"<figure{wide}><figcaption>{_e(key)} <span class='links'>({links})</span></figcaption>"
            f'<img alt="{_e(key)}" src="data:image/png;base64,{data}"></figure>')


def _header(name: str, unit) -> str:
    shown = _e(name).replace("_", "_<wbr>")
    u = "" if unit is None or str(unit) == "" else str(unit)
    return shown + (f" <span class='unit'>({_e(u)})</span>" if u else "")


def _cell(v, unit) -> str:
    if isinstance(v, (str, np.str_)):
        return f"<td class='{'text short' if len(v) <= SHORT_TEXT else 'text'}'>{_e(v) if str(v) else DASH}</td>"
    if isinstance(v, np.ndarray):
        return f"<td class='text'>{_e(', '.join(_num(x) for x in v.ravel()))}</td>"
    return f"<td class='num'>{_num(v, unit)}</td>"


def _meta_caption(t: Table, first: str = "") -> str:
    """The table's caption: ``first`` (already HTML), then its scalar metadata."""
    items = []
    for k, v in t.meta.items():
        if isinstance(v, (bool, np.bool_)):
            items.append(f"{k} = {'yes' if v else 'no'}")
        elif isinstance(v, (int, float, np.integer, np.floating)):
            items.append(f"{k} = {_num(v)}")
        elif isinstance(v, str) and len(v) <= 200:
            items.append(f"{k}: {v}")
    text = " ".join(p for p in (first, _e("; ".join(items))) if p)
    return f"<caption>{text}</caption>" if text else ""


SHORT_TEXT = 24  # a text cell this short does not wrap (map names such as survey-A stay whole)
TALL_ROWS = 12  # a table with more rows scrolls inside a box of its own height
IN_SPACE_NAME = ("family", "p", "q", "m")  # columns a table with a "space" column names already


def _constant(t: Table, c: str):
    """The one value of column ``c`` when every row has it (and there are several rows), else None."""
    if len(t) < 2:
        return None
    col = t[c]
    if getattr(col, "mask", None) is not None and np.any(col.mask):
        return None
    values = {str(v) for v in col}
    return col[0] if len(values) == 1 else None


def _table_html(t: Table) -> str:
    """A report table for the page: units in the header, a column with one value for every row
    said in the caption instead, columns the space name repeats left out (they stay in the ECSV)."""
    units = {c: ("" if t[c].unit is None or str(t[c].unit) == "" else str(t[c].unit)) for c in t.colnames}
    same = {c: v for c in t.colnames if (v := _constant(t, c)) is not None}
    shown = [c for c in t.colnames if c not in same and not ("space" in t.colnames and c in IN_SPACE_NAME)]
    head = "".join(f"<th>{_header(c, units[c])}</th>" for c in shown)
    body = []
    for row in t:
        body.append("<tr>" + "".join(_cell(row[c], units[c]) for c in shown) + "</tr>")
    described = [(c, t[c].description) for c in shown if t[c].description]
    legend = ""
    if described:
        legend = ("<details><summary>what the columns hold</summary><ul>"
                  + "".join(f"<li><b>{_e(c)}</b>: {_e(d)}</li>" for c, d in described) + "</ul></details>")
    every = "; ".join(f"{c} = {_e(v) if isinstance(v, str) else _num(v, units[c])}"
                      + (f" {_e(units[c])}" if units[c] else "") for c, v in same.items())
    every = f"<b>In every row: {every}.</b>" if every else ""
    box = "box tall" if len(t) > TALL_ROWS else "box"
    return f"<div class='{box}'><table>{_meta_caption(t, every)}<tr>{head}</tr>{''.join(body)}</table></div>{legend}"


def _rows(pairs) -> str:
    return "".join(f"<tr><th>{_e(k)}</th><td class='{cls}'>{v}</td></tr>" for k, v, cls in pairs)


def _provenance_html(prov: dict) -> str:
    if not prov:
        return "<p>none recorded</p>"
    out = []
    tasks = prov.get("tasks", {})
    general = [("config hash", _e(prov.get("config_hash", DASH)), "mono"),
               ("run seed", _e(prov.get("run_seed", DASH)), "num"),
               ("task seeds", _e(prov.get("task_seeds", DASH)), "text")]
    if tasks:
        general.append(("tasks", _e(f"{tasks.get('total')} in all: {tasks.get('computed')} computed, "
                                    f"{tasks.get('reused_from_store')} reused from the store"), "text"))
    if prov.get("engine"):
        general.append(("engine", _e(", ".join(f"{k} {v}" for k, v in prov["engine"].items())), "text"))
    timings = prov.get("timings_s") or {}
    if timings:
        general.append(("time", _e(", ".join(f"{k.removesuffix('_s')} {v:.1f} s" for k, v in timings.items()
                                             if isinstance(v, (int, float)))), "text"))
    out.append(f"<div class='box'><table>{_rows(general)}</table></div>")
    versions = prov.get("versions") or {}
    if versions:
        out.append("<h3>Versions</h3><div class='box'><table>"
                   + _rows((k, _e(v if v is not None else "not installed"), "text") for k, v in versions.items())
                   + "</table></div>")
    inputs = prov.get("inputs_sha256") or {}
    if inputs:
        out.append("<h3>Input files (sha256)</h3><div class='box'><table>"
                   + "".join(f"<tr><td class='mono'>{_e(f)}</td><td class='mono'>{_e(d)}</td></tr>"
                             for f, d in inputs.items()) + "</table></div>")
    config = prov.get("config") or {}
    if config:
        rows = []
        for section, keys in config.items():
            if isinstance(keys, dict):
                entries = [(f"[{section}]", keys)]
            elif isinstance(keys, list) and all(isinstance(k, dict) for k in keys):  # [[maps]]
                entries = [(f"[[{section}]] {i + 1}", k) for i, k in enumerate(keys)]
            else:
                entries = [(section, {"": keys})]
            for where, items in entries:
                for k, v in items.items():
                    rows.append(f"<tr><td class='text'>{_e(where)}</td><td class='text'>{_e(k)}</td>"
                                f"<td class='mono'>{_e(json.dumps(v, default=str))}</td></tr>")
        out.append("<h3>Configuration</h3><div class='box'><table><tr><th>section</th><th>key</th><th>value</th></tr>"
                   + "".join(rows) + "</table></div>")
    return "".join(out)


def write_index(folder: Path, summary: dict, tables: dict[str, Table], figures: dict[str, list[str]],
                caution: str) -> None:
    """``folder``/index.html from the summary, the report's tables and its figures (file names
    in ``folder``, the PNG inlined)."""
    maps = summary["maps"]
    nav = " \u00b7 ".join(f"<a href='#{h}'>{t}</a>" for h, t in (("results", "results"), ("assumptions", "assumptions"),
                                                                  ("figures", "figures"), ("tables", "tables"),
                                                                  ("provenance", "provenance")))
    parts = ["<!doctype html><html lang='en'><head><meta charset='utf-8'>",
             "<meta name='viewport' content='width=device-width, initial-scale=1'>",
             "<title>topology run report</title><link rel='icon' href='data:,'>",
             f"<style>{STYLE}</style></head><body>",
             "<h1>Matched-circle search report</h1>", f"<p>{nav}</p>",
             "<h2 id='results'>Results</h2>"]
    parts += [_map_answer(m) for m in maps]
    parts.append(f"<h2 id='assumptions'>What these results assume</h2><p class='caution'>{_e(caution)}</p>")
    parts.append("<h2 id='figures'>Figures</h2>")
    parts.append("<div class='figures'>" + "".join(_figure(folder, key, names) for key, names in figures.items())
                 + "</div>")
    parts.append("<h2 id='tables'>Tables</h2>")
    for key, t in tables.items():
        parts.append(f"<h3>{_e(key)}</h3>" + _table_html(t))
    parts.append("<h2 id='provenance'>Provenance</h2>" + _provenance_html(summary.get("provenance", {})))
    parts.append("</body></html>")
    (folder / "index.html").write_text("\n".join(parts), encoding="utf-8")
