"""HTML tables of the review report: title block, costs, pump duty, schedules, parameters.

Every number is rounded for reading and carries its unit in the column or row
label; long tables are capped (the full table goes to a CSV beside the report,
named in the note under the table).
"""

from __future__ import annotations

import ast
import datetime as _dt
import html
import os
import re

import numpy as np

from ..writers.tables import format_value, total_rows

__all__ = ["table", "kv_table", "title_block", "cost_section", "pump_section",
           "node_schedule", "structure_schedule", "parameters", "TITLE_KEYS", "MAX_ROWS",
           "pretty_value"]

#: Rows shown in a table before it is capped (the full table is written as CSV).
MAX_ROWS = 500
#: run_info keys of the title block and their labels.
TITLE_KEYS = (("scheme_name", "scheme"), ("issue_date", "date"), ("revision", "revision"),
              ("prepared_by", "prepared by"), ("checked_by", "checked by"))


def e(v):
    return html.escape(str(v), quote=True)


def _is_num(v):
    return isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool)


def _fmt(v, name=""):
    if isinstance(v, np.generic):
        v = v.item()
    if isinstance(v, float) and name.endswith("cost"):
        return "" if not np.isfinite(v) else f"{v:,.2f}"
    return format_value(v, name)


def _failed(col):
    s = np.asarray(col).astype(str)
    return ~np.isin(s, ["ok", "", "nan", "None"])


def table(columns: dict, *, tid=None, cls="", total_row=None, max_rows=None, csv_name=None,
          labels=None):
    """An HTML table of columns; at most ``max_rows`` body rows (a note names ``csv_name``)."""
    names = list(columns)
    cols = [np.asarray(columns[k]) for k in names]
    n = len(cols[0]) if cols else 0
    attrs = (f' id="{e(tid)}"' if tid else "") + (f' class="{e(cls)}"' if cls else "")
    heads = [(labels or {}).get(k, k.replace("_", " ")) for k in names]
    out = [f"<table{attrs}><thead><tr>" + "".join(f"<th>{e(h)}</th>" for h in heads)
           + "</tr></thead><tbody>"]
    shown = n if max_rows is None else min(n, max_rows)
    tot = total_rows(columns) if n else np.zeros(0, bool)
    for i in range(shown):
        cells = []
        for k, c in zip(names, cols):
            v = c[i]
            txt = _fmt(v, k)
            if txt == "nan":
                txt = ""
            klass = ' class="num"' if _is_num(v) else ""
            if k == "checks":
                klass = ' class="ok"' if txt in ("ok", "") else ' class="fail"'
            cells.append(f"<td{klass}>{e(txt)}</td>")
        rc = ' class="total"' if tot[i] else ""
        out.append(f"<tr{rc}>" + "".join(cells) + "</tr>")
    if total_row is not None:
        out.append('<tr class="total">' + "".join(
            f'<td class="num">{e(_fmt(total_row[k], k))}</td>' if k in total_row and
            _is_num(total_row[k]) else f"<td>{e(total_row.get(k, ''))}</td>"
            for k in names) + "</tr>")
    out.append("</tbody></table>")
    if shown < n:
        where = f"the full table is in {e(csv_name)}" if csv_name else "see the CSV outputs"
        out.append(f'<p class="sub capped">Showing {shown:,} of {n:,} rows; {where}.</p>')
    return '<div class="wide">' + "".join(out) + "</div>"


def kv_table(pairs, *, tid=None):
    """Two-column table of (label, already-escaped HTML) pairs."""
    rows = "".join(f"<tr><th>{e(k)}</th><td>{v}</td></tr>" for k, v in pairs)
    attr = f' id="{e(tid)}"' if tid else ""
    return f"<table{attr} class=\"kv\"><tbody>{rows}</tbody></table>"


def report_date(info):
    """The title-block date: ``issue_date``, else SOURCE_DATE_EPOCH's day, else today (UTC)."""
    if info.get("issue_date"):
        return str(info["issue_date"])
    sde = os.environ.get("SOURCE_DATE_EPOCH")
    if sde and sde.strip().isdigit():
        return _dt.datetime.fromtimestamp(int(sde), _dt.timezone.utc).date().isoformat()
    return _dt.datetime.now(_dt.timezone.utc).date().isoformat()


def title_block(layout, title):
    info = layout.run_info
    vals = {"scheme_name": info.get("scheme_name") or title, "issue_date": report_date(info)}
    cells = []
    for key, label in TITLE_KEYS:
        v = vals.get(key, info.get(key)) or "—"
        cells.append(f'<div class="tb-cell"><span class="tb-label">{e(label)}</span>'
                     f'<span class="tb-value" id="tb-{key.replace("_", "-")}">{e(v)}</span></div>')
    sysname = info.get("system") or "not sized"
    cells.append(f'<div class="tb-cell"><span class="tb-label">system</span><span '
                 f'class="tb-value">{e(sysname)}; {layout.n_nodes:,} sites, {layout.n_links:,} '
                 f'links</span></div>')
    return '<div class="title-block" id="title-block">' + "".join(cells) + "</div>"


def _num(info, key):
    try:
        v = float(info.get(key, ""))
    except (TypeError, ValueError):
        return None
    return v if np.isfinite(v) else None


def cost_breakdown(layout):
    """``(rows, total, label)``: cost rows ``(item, amount)`` and the one total.

    With a bill of quantities the rows are its totals by category (pipe, trench
    and land of the pipe rows, then each item category) and the total is the
    bill's total; without one, the sum of the link costs that chose the layout.
    """
    q = layout.tables.get("quantities")
    if q and "total_cost" in q:
        body = ~total_rows(q)
        cat = np.asarray(q.get("category", np.full(len(body), "pipe"))).astype(str)
        tc = np.nan_to_num(np.asarray(q["total_cost"], float))
        rows = []
        pipe = body & (cat == "pipe")
        for col, label in (("pipe_cost", "pipes (supply and lay)"), ("trench_cost", "trenching"),
                           ("land_cost", "land")):
            if col in q:
                v = float(np.nansum(np.asarray(q[col], float)[pipe]))
                if v:
                    rows.append((label, v))
        for c in dict.fromkeys(cat[body & ~pipe]):
            rows.append((c, float(tc[body & (cat == c)].sum())))
        total = float(tc[body].sum())
        energy = any("energy" in c for c in cat[body])
        label = ("total cost (capital + energy present value)" if energy
                 else "total cost (capital)")
        return rows, total, label
    if "cost" in layout.links:
        return [], layout.total("cost"), "total cost (sum of link costs)"
    return [], None, "total cost"


def cost_section(layout):
    rows, total, label = cost_breakdown(layout)
    if total is None:
        return '<p id="cost">No costs: the links were not priced.</p>'
    body = "".join(f'<tr><td>{e(k)}</td><td class="num">{v:,.2f}</td></tr>' for k, v in rows)
    body += f'<tr class="total"><td>{e(label)}</td><td class="num">{total:,.2f}</td></tr>'
    out = [f'<table id="cost"><thead><tr><th>item</th><th>amount</th></tr></thead>'
           f"<tbody>{body}</tbody></table>"]
    info = layout.run_info
    cap, energy = _num(info, "design:total_cost"), _num(info, "design:energy_cost_pv")
    if cap is not None and energy:
        out.append(f'<p class="sub">Of which capital {cap:,.2f} and energy (present value) '
                   f"{energy:,.2f}.</p>")
    if rows and "cost" in layout.links:
        out.append(f'<p class="sub">The layout was chosen on link costs (weighted length, '
                   f"land, climb) summing to {layout.total('cost'):,.2f}; that is a ranking "
                   "measure, not a price.</p>")
    if str(info.get("design:prices_placeholder", "")).lower() == "true":
        out.append('<p class="fail">Prices are built-in placeholders, not real rates: give '
                   "your own price table (--prices FILE) before quoting these figures.</p>")
    return "".join(out)


def pump_section(layout):
    """Pump duty (pressure) or lift stations (gravity) as a table, or '' when none."""
    info = layout.run_info
    rows = []
    p = _literal(info.get("design:pump"))
    if isinstance(p, dict) and p.get("flow_lps") is not None:
        roots = str(info.get("roots", "")) or "source"
        rows.append({"station": roots, "flow (L/s)": p.get("flow_lps"),
                     "head (m)": p.get("head_m"), "hydraulic power (kW)": p.get("hydraulic_kw"),
                     "shaft power (kW)": p.get("shaft_kw"),
                     "energy (kWh/a)": p.get("annual_kwh"),
                     "energy cost (present value)": p.get("energy_cost_pv")})
    lifts = _literal(info.get("design:lift_stations"))
    if isinstance(lifts, list):
        for s in lifts:
            if isinstance(s, dict):
                rows.append({"station": f"lift station at {s.get('node', '?')}",
                             "flow (L/s)": s.get("flow_lps"), "head (m)": s.get("head_m"),
                             "hydraulic power (kW)": None, "shaft power (kW)": s.get("power_kw"),
                             "energy (kWh/a)": s.get("annual_kwh"),
                             "energy cost (present value)": s.get("energy_cost_pv")})
    if not rows:
        return ""
    keys = list(rows[0])
    fmt = {"flow (L/s)": "{:,.2f}", "head (m)": "{:,.2f}", "hydraulic power (kW)": "{:,.1f}",
           "shaft power (kW)": "{:,.1f}", "energy (kWh/a)": "{:,.0f}",
           "energy cost (present value)": "{:,.2f}"}
    head = "".join(f"<th>{e(k)}</th>" for k in keys)
    body = ""
    for r in rows:
        cells = []
        for k in keys:
            v = r.get(k)
            if isinstance(v, (int, float)) and k in fmt:
                cells.append(f'<td class="num">{fmt[k].format(v)}</td>')
            else:
                cells.append(f"<td>{e('' if v is None else v)}</td>")
        body += "<tr>" + "".join(cells) + "</tr>"
    return f'<table id="pump-duty"><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>'


def _literal(v):
    if v is None or v == "":
        return None
    if isinstance(v, (dict, list)):
        return v
    try:
        return ast.literal_eval(str(v))
    except (ValueError, SyntaxError):
        return None


def node_schedule(layout, *, max_rows=None, csv_name=None):
    """Schedule of nodes: pressure (pressure mains) or invert and depth (gravity)."""
    max_rows = MAX_ROWS if max_rows is None else max_rows
    nd = layout.nodes
    want = ("node_id", "role", "demand_lps", "elevation_m", "hgl_m", "pressure_head_m",
            "min_pressure_m", "static_head_m", "invert_m", "depth_m", "structure", "drop_m",
            "lift_m", "checks")
    cols = {k: np.asarray(nd[k]) for k in want if k in nd}
    labels = {"node_id": "site", "demand_lps": "demand (L/s)", "elevation_m": "ground (m)",
              "hgl_m": "grade level (m)", "pressure_head_m": "pressure (m head)",
              "min_pressure_m": "required (m head)", "static_head_m": "static (m head)",
              "invert_m": "invert (m)", "depth_m": "depth (m)", "drop_m": "drop (m)",
              "lift_m": "lift (m)"}
    return table(cols, tid="node-schedule", cls="long", max_rows=max_rows, csv_name=csv_name,
                 labels=labels)


def structure_schedule(layout, *, max_rows=None, csv_name=None):
    """Access points (gravity) and fittings (pressure) in one schedule, or ''."""
    max_rows = MAX_ROWS if max_rows is None else max_rows
    parts = []
    ap = layout.tables.get("access_points")
    if ap:
        keep = ("kind", "node", "link_id", "chainage_m", "x", "y", "ground_m", "invert_m",
                "depth_m", "drop_m", "lift_m", "power_kw")
        cols = {k: np.asarray(ap[k]) for k in keep if k in ap}
        parts.append(table(cols, tid="structure-schedule", cls="long", max_rows=max_rows,
                           csv_name=csv_name, labels={
                               "link_id": "link", "chainage_m": "chainage (m)", "x": "easting",
                               "y": "northing", "ground_m": "ground (m)",
                               "invert_m": "invert (m)", "depth_m": "depth (m)",
                               "drop_m": "drop (m)", "lift_m": "lift (m)",
                               "power_kw": "power (kW)"}))
    ft = layout.tables.get("fittings")
    if ft:
        keep = ("type", "size_mm", "node", "link_id", "chainage_m", "x", "y")
        cols = {k: np.asarray(ft[k]) for k in keep if k in ft}
        if "type" in cols:
            cols["type"] = np.char.replace(cols["type"].astype(str), "_", " ")
        tid = "fitting-schedule" if parts else "structure-schedule"
        parts.append(table(cols, tid=tid, cls="long", max_rows=max_rows, csv_name=csv_name,
                           labels={"size_mm": "size (mm)", "link_id": "link",
                                   "chainage_m": "chainage (m)", "x": "easting",
                                   "y": "northing"}))
    return "".join(parts)


# ------------------------------------------------------------------ parameters
_FLOAT = re.compile(r"-?\d+\.\d{4,}(?:e-?\d+)?|-?\d+(?:\.\d+)?e-?\d+")


def _round_float(f):
    if f == 0 or not np.isfinite(f):
        return f"{f:g}"
    if abs(f) >= 1000:
        return f"{f:,.0f}" if abs(f) >= 1e5 else f"{f:,.1f}"
    return f"{f:.4g}"


def pretty_value(v):
    """A run_info value for reading: lists of one number unwrapped, floats rounded,
    dicts as ``key value`` pairs, ``True``/``False`` as yes/no."""
    s = str(v)
    lit = _literal(s) if s[:1] in "[{(" else None
    if isinstance(lit, (list, tuple)) and len(lit) == 1 and not isinstance(lit[0], (dict, list)):
        s = str(lit[0])
    elif isinstance(lit, dict):
        s = "; ".join(f"{str(k).replace('_', ' ')} {pretty_value(x)}" for k, x in lit.items())
        return s
    if s in ("True", "False", "true", "false"):
        return "yes" if s.lower() == "true" else "no"
    try:
        f = float(s)
    except ValueError:
        return _FLOAT.sub(lambda m: _round_float(float(m.group(0))), s)
    if s.strip().lstrip("-").isdigit():
        return s
    return _round_float(f)


def _label(key):
    k = key.removeprefix("design:")
    unit = ""
    for suf, u in (("_m2ps", "m²/s"), ("_lps", "L/s"), ("_kw", "kW"), ("_mm", "mm"),
                   ("_pct", "%"), ("_min", "min"), ("_m", "m")):
        if k.endswith(suf):
            k, unit = k[: -len(suf)], u
            break
    return k.replace("_", " ") + (f" ({unit})" if unit else "")


def parameters(layout):
    """Run parameters, rounded and labelled, in two tables (plan, design)."""
    info = layout.run_info
    skip = {"working_crs_wkt", "design:caution"} | {k for k, _ in TITLE_KEYS}
    plan, design = [], []
    for k, v in info.items():
        if k in skip or k.startswith("input:"):
            continue
        if k == "design_settings":
            for part in str(v).split(", "):
                kk, _, vv = part.partition("=")
                if kk:
                    design.append((_label(kk) + " [setting]", e(pretty_value(vv))))
            continue
        (design if k.startswith("design:") else plan).append((_label(k), e(pretty_value(v))))
    return (kv_table(plan, tid="run-info")
            + (("<h3>Design results and settings</h3>" + kv_table(design, tid="design-info"))
               if design else ""))
