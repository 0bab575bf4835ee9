"""The review report: one self-contained HTML file for the engineer who checks a layout.

Everything is inside the file: CSS inline, the plan map as a base64 PNG, the
long sections as base64 SVG, no scripts, fonts or network requests — it opens
the same offline, in a mail attachment or on a site laptop.  The bytes depend
only on the layout (no timestamps), so two runs can be compared with ``diff``.

Sections (element ids in brackets, for tests and for style overrides):
cautions (``cautions``), map (``plan-map``), summary (``summary``), bill of
quantities (``quantities``), failed checks (``checks``), long sections
(``long-section-1`` …), run parameters and input checksums (``run-info``,
``inputs``), then any ``extra_sections``, and a footer with the version.
"""

from __future__ import annotations

import base64
import html

import numpy as np

from ..safeio import HTML_MARKER
from ..writers.tables import atomic_write, format_value, total_rows

__all__ = ["write_report", "report_html", "CAUTIONS"]

#: Shown at the top of every report.
CAUTIONS = (
    "These results are preliminary design aids. A licensed engineer must check them against "
    "local codes and utility standards before anything is built.",
    "Locate and mark all existing buried services (power, gas, water, telecoms, drains) "
    "before any digging.",
    "Trenches deeper than about 1.5 m need shoring, benching or a trench box under most "
    "safety rules; check the rules that apply on site.",
)

_CSS = """
:root { --ink:#1d2733; --muted:#5b6770; --line:#d5dbe0; --warn:#8a1c1c; --warnbg:#fff3f0; }
* { box-sizing: border-box; }
body { font-family: "DejaVu Sans", "Segoe UI", Arial, sans-serif; color: var(--ink);
       margin: 0 auto; max-width: 1180px; padding: 16px 24px 40px; line-height: 1.4; }
h1 { font-size: 1.6em; margin: 0.2em 0 0.1em; }
h2 { font-size: 1.2em; border-bottom: 2px solid var(--line); padding-bottom: 3px;
     margin-top: 1.6em; }
.sub { color: var(--muted); margin: 0 0 1em; }
.cautions { border: 3px solid var(--warn); background: var(--warnbg); padding: 10px 16px;
            border-radius: 4px; }
.cautions h2 { color: var(--warn); border: 0; margin: 0.2em 0; }
.cautions li { margin: 0.3em 0; font-weight: 600; }
table { border-collapse: collapse; margin: 0.5em 0 1em; font-size: 0.88em; }
th, td { border: 1px solid var(--line); padding: 3px 8px; text-align: left;
         vertical-align: top; }
th { background: #eef2f5; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
tr.total td { font-weight: 700; border-top: 2px solid var(--ink); }
.fail { color: var(--warn); font-weight: 600; }
.ok { color: #1d6b35; font-weight: 600; }
figure { margin: 0.5em 0 1.2em; }
figure img { max-width: 100%; height: auto; border: 1px solid var(--line); }
figcaption { color: var(--muted); font-size: 0.85em; }
code, .mono { font-family: "DejaVu Sans Mono", Consolas, monospace; font-size: 0.85em;
              word-break: break-all; }
details pre { white-space: pre-wrap; word-break: break-all; font-size: 0.75em; }
footer { margin-top: 3em; color: var(--muted); font-size: 0.8em;
         border-top: 1px solid var(--line); padding-top: 6px; }
@media print {
  @page { size: A4; margin: 14mm; }
  body { max-width: none; padding: 0; font-size: 10pt; }
  section.big { break-before: page; }
  th { background: none; }
  .cautions { background: none; }
  table, figure, .cautions { break-inside: avoid; }
  table.long { break-inside: auto; }
  tr { break-inside: avoid; }
  thead { display: table-header-group; }
  figure img { border: 0; }
  details { display: block; }
  details > summary { display: none; }
}
"""


def _e(v):
    return html.escape(str(v), quote=True)


def _fmt(v, name=""):
    if isinstance(v, np.generic):
        v = v.item()
    return format_value(v, name)


def _is_num(v):
    return isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool)


def _table(columns: dict, *, tid=None, cls="", total_row=None, max_rows=None):
    names = list(columns)
    cols = [np.asarray(columns[k]) for k in names]
    n = len(cols[0]) if cols else 0
    attrs = (f' id="{_e(tid)}"' if tid else "") + (f' class="{_e(cls)}"' if cls else "")
    out = [f"<table{attrs}><thead><tr>" + "".join(f"<th>{_e(k)}</th>" for k in names)
           + "</tr></thead><tbody>"]
    shown = n if max_rows is None else min(n, max_rows)
    for i in range(shown):
        cells = []
        for k, c in zip(names, cols):
            v = c[i]
            txt = _fmt(v, k)
            klass = ' class="num"' if _is_num(v) else ""
            if k == "checks":
                klass = ' class="ok"' if txt in ("ok", "") else ' class="fail"'
            cells.append(f"<td{klass}>{_e(txt)}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    if total_row is not None:
        out.append('<tr class="total">' + "".join(
            f'<td class="num">{_e(_fmt(total_row[k], k))}</td>' if k in total_row and
            _is_num(total_row[k]) else f"<td>{_e(total_row.get(k, ''))}</td>"
            for k in names) + "</tr>")
    out.append("</tbody></table>")
    if shown < n:
        out.append(f'<p class="sub">… {n - shown} more rows not shown; see the links CSV.</p>')
    return "".join(out)


def _kv_table(pairs, *, tid=None):
    rows = "".join(f"<tr><th>{_e(k)}</th><td>{v}</td></tr>" for k, v in pairs)
    attr = f' id="{_e(tid)}"' if tid else ""
    return f"<table{attr}><tbody>{rows}</tbody></table>"


def _img(data: bytes, mime, img_id, alt):
    b64 = base64.b64encode(data).decode("ascii")
    return f'<img id="{_e(img_id)}" alt="{_e(alt)}" src="data:{mime};base64,{b64}">'


def _failed(col):
    s = np.asarray(col).astype(str)
    return ~np.isin(s, ["ok", "", "nan", "None"])


def _summary(layout):
    lk, nd, info = layout.links, layout.nodes, layout.run_info
    roles = np.asarray(nd.get("role", np.full(layout.n_nodes, "site"))).astype(str)
    u, c = np.unique(roles, return_counts=True)
    pairs = [("sites", _e(f"{layout.n_nodes} (" + ", ".join(f"{k} {v}" for k, v in zip(u, c))
                         + ")")),
             ("links", _e(str(layout.n_links))),
             ("system", _e(info.get("system") or "not sized")),
             ("working CRS", _e(info.get("working_crs") or
                                (layout.crs.name if layout.crs is not None else "unknown")))]
    for col, label in (("length_m", "total plan length"), ("surface_length_m",
                                                          "total length over ground")):
        if col in lk:
            pairs.append((label, _e(f"{layout.total(col):,.1f} m")))
    if "cost" in lk:
        pairs.append(("total cost (tree)", _e(f"{layout.total('cost'):,.2f}")))
    q = layout.tables.get("quantities")
    if q:
        body = ~total_rows(q)
        for col in ("pipe_cost", "trench_cost", "land_cost", "total_cost"):
            if col in q and not (col == "total_cost" and info.get("design:whole_life_cost")):
                v = float(np.nansum(np.asarray(q[col], float)[body]))
                pairs.append((col.replace("_", " "), _e(f"{v:,.2f}")))
    else:
        for col in lk:
            if col.endswith("_cost") or col == "crossings":
                pairs.append((col.replace("_", " "), _e(f"{layout.total(col):,.2f}")))
            elif col in ("climb_m", "descent_m"):
                pairs.append((f"total {col[:-2]}", _e(f"{layout.total(col):,.1f} m")))
    for key, label in (("design:total_cost", "capital cost"), ("design:energy_cost_pv", "energy cost (present value)"),
                       ("design:whole_life_cost", "whole-life cost"), ("design:pump_duty", "pump duty"),
                       ("design:fittings", "fittings"), ("design:prices", "prices")):
        if info.get(key):           # pump, fittings and prices (mainspan.hydraulics.prices): placeholders are flagged
            v = info[key]
            try:
                v = f"{float(v):,.2f}"
            except ValueError:
                v = v.strip("{}").replace("'", "").replace(": ", " ")
            pairs.append((label, _e(v)))
    if "checks" in lk:
        nf = int(_failed(lk["checks"]).sum())
        nfn = int(_failed(nd["checks"]).sum()) if "checks" in nd else 0
        cls = "fail" if nf + nfn else "ok"
        pairs.append(("failed checks", f'<span class="{cls}">{nf} link(s), {nfn} node(s)</span>'))
    cert = info.get("certificate", "")
    if cert:
        pairs.append(("optimality certificate", _e(cert)))
    return _kv_table(pairs, tid="summary")


def _checks_section(layout):
    lk, nd = layout.links, layout.nodes
    parts = []
    if "checks" not in lk and "checks" not in nd:
        return '<p id="checks">No design checks: the layout was planned without a system.</p>'
    if "checks" in lk:
        bad = np.flatnonzero(_failed(lk["checks"]))
        if bad.size:
            ids = np.asarray(nd["node_id"]).astype(str)
            ends = np.asarray(layout.link_ends, np.int64).reshape(-1, 2)
            cols = {"link_id": np.asarray(lk.get("link_id", np.arange(1, layout.n_links + 1)))[bad],
                    "from_node": ids[ends[bad, 0]], "to_node": ids[ends[bad, 1]]}
            cols.update({k: np.asarray(lk[k])[bad] for k in
                         ("pipe", "length_m", "flow_lps", "velocity_mps", "slope_pct",
                          "depth_max_m", "checks") if k in lk})
            parts.append("<h3>Links</h3>" + _table(cols, tid="checks-links", cls="long"))
    if "checks" in nd:
        bad = np.flatnonzero(_failed(nd["checks"]))
        if bad.size:
            cols = {k: np.asarray(nd[k])[bad] for k in
                    ("node_id", "role", "elevation_m", "pressure_head_m", "invert_m", "checks")
                    if k in nd}
            parts.append("<h3>Nodes</h3>" + _table(cols, tid="checks-nodes", cls="long"))
    if not parts:
        return '<p id="checks" class="ok">Every link and node passed its checks.</p>'
    return '<div id="checks">' + "".join(parts) + "</div>"


def _quantities(layout):
    q = layout.tables.get("quantities")
    if not q:
        return ('<p id="quantities">No bill of quantities: pipes are not sized '
                "(plan with a pressure or gravity system).</p>")
    if total_rows(q).any():                 # the table brings its own total row
        return _table(dict(q), tid="quantities")
    tot = {k: float(np.nansum(np.asarray(v, float))) for k, v in q.items()
           if k in ("length_m", "count", "pipe_cost", "trench_cost", "land_cost", "total_cost")}
    if "count" in tot:
        tot["count"] = int(tot["count"])
    first = next(iter(q))
    tot[first] = "total"
    return _table(dict(q), tid="quantities", total_row=tot)


def _run_info(layout):
    info = layout.run_info
    inputs = [(k[len("input:"):], v) for k, v in info.items() if k.startswith("input:")]
    other = [(k, v) for k, v in info.items()
             if not k.startswith("input:") and k != "working_crs_wkt"]
    out = [_kv_table([(k, _e(v)) for k, v in other], tid="run-info")]
    if inputs:
        rows = []
        for name, v in inputs:
            s = str(v)
            path, _, digest = s.rpartition(" ")
            if not path:
                path, digest = s, ""
            digest = digest.removeprefix("sha256=")
            rows.append(f"<tr><td>{_e(name)}</td><td class=\"mono\">{_e(path)}</td>"
                        f"<td class=\"mono\">{_e(digest)}</td></tr>")
        out.append('<h3>Inputs</h3><table id="inputs"><thead><tr><th>input</th><th>path</th>'
                   "<th>SHA-256</th></tr></thead><tbody>" + "".join(rows) + "</tbody></table>")
    wkt = info.get("working_crs_wkt") or (layout.crs.to_wkt() if layout.crs is not None else "")
    if wkt:
        out.append(f"<details><summary>Working CRS as WKT</summary><pre>{_e(wkt)}</pre></details>")
    return "".join(out)


def report_html(layout, *, title=None, extra_sections=(), n_sections=3):
    """The report as a ``str`` (see :func:`write_report`)."""
    from .plots import figure_bytes, long_section, longest_paths, plan_map

    info = layout.run_info
    title = title or info.get("title") or info.get("name") or "Layout review"
    ids = np.asarray(layout.nodes["node_id"]).astype(str)
    body = [f"<header><h1>{_e(title)}</h1><p class=\"sub\">mainspan {_e(info.get('version', ''))}"
            f" — {_e(info.get('system') or 'not sized')} — {layout.n_nodes} sites, "
            f"{layout.n_links} links</p></header>"]
    body.append('<section id="cautions" class="cautions"><h2>Cautions</h2><ul>'
                + "".join(f"<li>{_e(c)}</li>" for c in CAUTIONS) + "</ul></section>")

    fig = plan_map(layout)
    bg = getattr(fig, "mainspan_background", "none")
    body.append('<section class="big"><h2>Map</h2><figure>'
                + _img(figure_bytes(fig, "png"), "image/png", "plan-map", "plan of the layout")
                + f"<figcaption>Links by pipe size; triangles: source/outlet; red crosses: "
                  f"failed checks. Background: {_e(bg)}.</figcaption></figure></section>")
    _close(fig)
    body.append(f"<section><h2>Summary</h2>{_summary(layout)}</section>")
    body.append(f"<section><h2>Bill of quantities</h2>{_quantities(layout)}</section>")
    body.append(f"<section><h2>Failed checks</h2>{_checks_section(layout)}</section>")

    secs = []
    for k, path in enumerate(longest_paths(layout, k=n_sections), start=1):
        what = "longest path" if k == 1 else "branch"
        f = long_section(layout, path=path,
                         title=f"{what.capitalize()} {ids[path[0]]} → {ids[path[-1]]}")
        cap = (f"{what} {ids[path[0]]} → {ids[path[-1]]}, {len(path) - 1} links, "
               f"vertical exaggeration ×{f.mainspan_vertical_exaggeration:g}")
        secs.append("<figure>" + _img(figure_bytes(f, "svg"), "image/svg+xml",
                                      f"long-section-{k}", f"long section: {cap}")
                    + f"<figcaption>{_e(cap)}</figcaption></figure>")
        _close(f)
    body.append('<section class="big" id="long-sections"><h2>Long sections</h2>'
                + ("".join(secs) or "<p>No links.</p>") + "</section>")
    body.append(f'<section class="big"><h2>Run parameters and inputs</h2>{_run_info(layout)}'
                "</section>")
    for k, item in enumerate(extra_sections, start=1):
        try:
            sec_title, sec_html = item
        except (TypeError, ValueError):
            from ..errors import InputError

            raise InputError(f"extra_sections[{k - 1}]: expected a (title, html) pair, got "
                             f"{type(item).__name__}") from None
        # the section body is trusted HTML from another mainspan module; the title is escaped
        body.append(f'<section class="big" id="extra-{k}"><h2>{_e(sec_title)}</h2>'
                    f"{sec_html}</section>")
    body.append(f"<footer>Written by mainspan {_e(info.get('version', ''))}. "
                f"{_e(CAUTIONS[0])}</footer>")
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"{HTML_MARKER}"
            f"<title>{_e(title)}</title><style>{_CSS}</style></head><body>\n"
            + "\n".join(body) + "\n</body></html>\n")


def _close(fig):
    fig.clear()


def write_report(layout, path, *, overwrite=False, title=None, extra_sections=()):
    """Write the self-contained HTML review report of a layout.

    Parameters
    ----------
    layout : mainspan.pipeline.layout.Layout
    path : str or os.PathLike
        Target ``.html`` file.
    overwrite : bool, default False
        Replace an existing file; otherwise :class:`mainspan.errors.OverwriteError`.
    title : str, optional
        Heading and page title; default ``run_info["title"]`` or "Layout review".
    extra_sections : sequence of (str, str)
        ``(title, html)`` pairs appended after the run parameters (e.g. a
        scenario comparison).  Titles are escaped; the HTML is inserted as given.

    Returns
    -------
    str
        The path written.
    """
    return atomic_write(path, report_html(layout, title=title, extra_sections=extra_sections),
                        overwrite=overwrite, what="report")
