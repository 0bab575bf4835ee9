"""The review report: one self-contained HTML file for the engineer who checks a layout.

Everything is inside the file: CSS inline, the plan map as a base64 PNG, the
long sections as base64 SVG (PNG for long paths), no scripts, fonts or network
requests — it opens the same offline, in a mail attachment or on a site laptop.
The bytes depend only on the layout and the title-block date (``issue_date``,
else ``SOURCE_DATE_EPOCH``'s day, else today), so two runs can be compared.

Sections (element ids in brackets, for tests and for style overrides): title
block (``title-block``), cautions (``cautions``), summary (``summary``), cost
(``cost``), pump duty (``pump-duty``), map (``plan-map``), failed checks
(``checks``), bill of quantities (``quantities``), long sections
(``long-section-1`` …), schedules of nodes and structures (``node-schedule``,
``structure-schedule``), run parameters and input checksums (``run-info``,
``inputs``), then any ``extra_sections``, and a footer with the version.

Large layouts: tables show at most :data:`~mainspan.report.tables.MAX_ROWS`
rows; :func:`write_report` writes the full tables as CSV beside the report
and names them under each capped table.  The map of a layout above
:data:`~mainspan.report.planmap.LABEL_LIMIT` sites is one raster without labels.
"""

from __future__ import annotations

import base64
import os
import sys

import numpy as np

from ..safeio import HTML_MARKER
from ..writers.tables import _decimals, atomic_write, total_rows
from . import tables as T
from .tables import e as _e

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
h3 { font-size: 1.02em; margin: 1.1em 0 0.3em; }
.sub { color: var(--muted); margin: 0 0 1em; }
.cautions { border: 3px solid var(--warn); background: var(--warnbg); padding: 8px 16px;
            border-radius: 4px; }
.cautions h2 { color: var(--warn); border: 0; margin: 0.2em 0; }
.cautions li { margin: 0.25em 0; font-weight: 600; }
.title-block { display: grid; grid-template-columns: repeat(3, 1fr); border: 2px solid var(--ink);
               margin: 0.6em 0 1em; }
.tb-cell { border: 1px solid var(--line); padding: 4px 8px; }
.tb-label { display: block; font-size: 0.72em; color: var(--muted); text-transform: uppercase;
            letter-spacing: 0.04em; }
.tb-value { font-weight: 600; }
.wide { overflow-x: auto; max-width: 100%; }
table { border-collapse: collapse; margin: 0.5em 0 1em; font-size: 0.86em; }
th, td { border: 1px solid var(--line); padding: 3px 7px; text-align: left;
         vertical-align: top; }
th { background: #eef2f5; }
table.kv th { width: 16em; font-weight: 600; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
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
  @page { size: A4; margin: 12mm; }
  body { max-width: none; padding: 0; font-size: 9pt; }
  h2, h3 { break-after: avoid; page-break-after: avoid; }
  h2 + *, h3 + * { break-before: avoid; page-break-before: avoid; }
  section.newpage { break-before: page; }
  th { background: none; }
  .cautions { background: none; }
  table { font-size: 7.5pt; }
  .wide { overflow: visible; }
  figure, .cautions, .title-block, table.kv { break-inside: avoid; }
  tr { break-inside: avoid; }
  thead { display: table-header-group; }
  figure img { border: 0; max-height: 240mm; width: auto; }
  details { display: block; }
  details > summary { display: none; }
}
"""


def _img(data: bytes, mime, img_id, alt):
    b64 = base64.b64encode(data).decode("ascii")
    return f'<img id="{_e(img_id)}" alt="{_e(alt)}" src="data:{mime};base64,{b64}">'


def _summary(layout):
    lk, nd, info = layout.links, layout.nodes, layout.run_info
    roles = np.asarray(nd.get("role", np.full(layout.n_nodes, "site"))).astype(str)
    u, c = np.unique(roles, return_counts=True)
    pairs = [("sites", _e(f"{layout.n_nodes:,} (" + ", ".join(f"{k} {v:,}" for k, v in zip(u, c))
                         + ")")),
             ("links", _e(f"{layout.n_links:,}")),
             ("system", _e(info.get("system") or "not sized")),
             ("working CRS", _e(info.get("working_crs") or
                                (layout.crs.name if layout.crs is not None else "unknown")))]
    if info.get("output_crs"):
        pairs.append(("output CRS (files)", _e(info["output_crs"])))
    for col, label in (("length_m", "total plan length"), ("surface_length_m",
                                                          "total length over ground")):
        if col in lk:
            pairs.append((label, _e(f"{layout.total(col):,.1f} m")))
    _, total, label = T.cost_breakdown(layout)
    if total is not None:
        pairs.append((label, f'<b>{total:,.2f}</b> (breakdown under Cost)'))
    if info.get("design:pump_duty"):
        pairs.append(("pump duty", _e(T.pretty_value(info["design:pump_duty"]))))
    if "checks" in lk:
        nf = int(T._failed(lk["checks"]).sum())
        nfn = int(T._failed(nd["checks"]).sum()) if "checks" in nd else 0
        cls = "fail" if nf + nfn else "ok"
        pairs.append(("failed checks", f'<span class="{cls}">{nf} link(s), {nfn} node(s)</span>'))
    cert = info.get("certificate", "")
    if cert:
        pairs.append(("optimality certificate", _e(T.pretty_value(cert))))
    if info.get("network_result"):      # exist15: existing mains, forced links, limits
        pairs.append(("existing mains, forced links, limits", _e(info["network_result"])))
    return T.kv_table(pairs, tid="summary")


def _checks_section(layout, csv):
    lk, nd = layout.links, layout.nodes
    parts = []
    if "checks" not in lk and "checks" not in nd:
        return '<p id="checks">No design checks: the layout was planned without a system.</p>'
    if "checks" in lk:
        bad = np.flatnonzero(T._failed(lk["checks"]))
        if bad.size:
            ids = np.asarray(nd["node_id"]).astype(str)
            ends = np.asarray(layout.link_ends, np.int64).reshape(-1, 2)
            cols = {"link_id": np.asarray(lk.get("link_id", np.arange(1, layout.n_links + 1)))[bad],
                    "from_node": ids[ends[bad, 0]], "to_node": ids[ends[bad, 1]]}
            cols.update({k: np.asarray(lk[k])[bad] for k in
                         ("pipe", "length_m", "flow_lps", "velocity_mps", "slope_pct",
                          "depth_max_m", "checks") if k in lk})
            parts.append("<h3>Links</h3>" + T.table(cols, tid="checks-links", cls="long",
                                                    max_rows=T.MAX_ROWS, csv_name=csv("links")))
    if "checks" in nd:
        bad = np.flatnonzero(T._failed(nd["checks"]))
        if bad.size:
            cols = {k: np.asarray(nd[k])[bad] for k in
                    ("node_id", "role", "elevation_m", "pressure_head_m", "invert_m", "checks")
                    if k in nd}
            parts.append("<h3>Nodes</h3>" + T.table(cols, tid="checks-nodes", cls="long",
                                                    max_rows=T.MAX_ROWS, csv_name=csv("nodes")))
    if not parts:
        return '<p id="checks" class="ok">Every link and node passed its checks.</p>'
    return '<div id="checks">' + "".join(parts) + "</div>"


_BOQ_DROP = ("material", "inner_mm")


def _quantities(layout, csv):
    q = layout.tables.get("quantities")
    if not q:
        return ('<p id="quantities">No bill of quantities: pipes are not sized '
                "(plan with a pressure or gravity system).</p>")
    cols = {k: v for k, v in q.items() if k not in _BOQ_DROP or "item" not in q}
    labels = {"unit_cost": "rate", "length_m": "length (m)", "nominal_mm": "DN",
              "pipe_cost": "pipe cost", "trench_cost": "trench cost",
              "land_cost": "land cost", "total_cost": "total cost"}
    kw = dict(tid="quantities", max_rows=T.MAX_ROWS, csv_name=csv("quantities"), labels=labels)
    if total_rows(q).any():                 # the table brings its own total row
        return T.table(cols, **kw)
    tot = {k: float(np.nansum(np.asarray(v, float))) for k, v in cols.items()
           if k in ("length_m", "count", "pipe_cost", "trench_cost", "land_cost", "total_cost")}
    if "count" in tot:
        tot["count"] = int(tot["count"])
    tot[next(iter(cols))] = "total"
    return T.table(cols, total_row=tot, **kw)


def _inputs(layout):
    info = layout.run_info
    inputs = [(k[len("input:"):], v) for k, v in info.items() if k.startswith("input:")]
    out = []
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


def _map_caption(layout, fig):
    ids = np.asarray(layout.nodes["node_id"]).astype(str)
    roots = fig.mainspan_roots
    rtxt = ", ".join(ids[roots[:10]]) + (" …" if len(roots) > 10 else "")
    parts = [f"Links coloured and widened by pipe size, labelled with link id (L…) and size "
             f"where there is room; arrows show the direction of flow; root(s) {rtxt} marked "
             f"with a star; each kind of failed check has its own symbol (legend)."]
    if not fig.mainspan_root_from_role:
        parts.append(f"No site had a source or outlet role: the tree was grown from "
                     f"{rtxt}, chosen as the first site.")
    if layout.n_nodes > _LABEL_LIMIT():
        parts.append(f"{layout.n_nodes:,} sites: drawn without labels; the schedules and the "
                     "CSV files carry every id.")
    parts.append(f"Background: {fig.mainspan_background}.")
    return " ".join(parts)


def _LABEL_LIMIT():
    from .planmap import LABEL_LIMIT

    return LABEL_LIMIT


def _sections(layout, n_sections, ids, say):
    from .plots import figure_bytes, longest_paths
    from .section import fit_exaggeration, long_section, section_data

    if layout.n_nodes > _LABEL_LIMIT():
        n_sections = 1          # large layouts: the longest path only (each figure costs seconds)
    full = longest_paths(layout, k=n_sections)
    if not full:
        return "<p>No links.</p>"
    # a sheet holds a readable number of links: long paths are shown from their start
    paths = [p[:MAX_SECTION_LINKS + 1] for p in full]
    # one vertical exaggeration for every section of the report: the one that fits the
    # longest path; shorter, steeper branches are drawn over a wider chainage range
    vx = fit_exaggeration(section_data(layout, paths[0]))
    secs = [f'<p class="sub">Every section is drawn at vertical exaggeration ×{vx:g}.</p>']
    for k, path in enumerate(paths, start=1):
        say(f"report: long section {k} of {len(paths)}")
        what = "longest path" if k == 1 else "branch"
        f = long_section(layout, path=path, vertical_exaggeration=vx,
                         title=f"{what.capitalize()} {ids[path[0]]} → {ids[path[-1]]}")
        n_all = len(full[k - 1]) - 1
        part = (f"{len(path) - 1} links" if n_all == len(path) - 1 else
                f"first {len(path) - 1} of {n_all} links to {ids[full[k - 1][-1]]} (the whole "
                f"path: mainspan export LAYOUT --to FILE.dxf --section --node "
                f"{ids[full[k - 1][-1]]})")
        cap = f"{what} {ids[path[0]]} → {ids[path[-1]]}, {part}, vertical exaggeration ×{vx:g}"
        fmt, mime = ("svg", "image/svg+xml") if len(path) <= 60 else ("png", "image/png")
        secs.append("<figure>" + _img(figure_bytes(f, fmt), mime, f"long-section-{k}",
                                      f"long section: {cap}")
                    + f"<figcaption>{_e(cap)}</figcaption></figure>")
        f.clear()
    return "".join(secs)


def _csv_namer(csv_base, layout):
    """``csv(kind)`` → the CSV name beside the report when that table will be capped."""
    sizes = {"nodes": layout.n_nodes, "links": layout.n_links,
             "quantities": len(next(iter(layout.tables.get("quantities", {"": []}).values()))),
             "structures": max([len(next(iter(layout.tables[t].values())))
                                for t in ("access_points", "fittings")
                                if layout.tables.get(t)] or [0])}

    def csv(kind):
        if csv_base is None or sizes.get(kind, 0) <= T.MAX_ROWS:
            return None
        return f"{csv_base}_{kind}.csv"
    return csv


def _extra(sections, start, cls):
    out = []
    for k, item in enumerate(sections, start=start):
        try:
            sec_title, sec_html = item
        except (TypeError, ValueError):
            from ..errors import InputError

            raise InputError(f"sections[{k - start}]: expected a (title, html) pair, got "
                             f"{type(item).__name__}") from None
        # the section body is trusted HTML from another mainspan module; the title is escaped
        out.append(f'<section class="{cls}" id="extra-{k}"><h2>{_e(sec_title)}</h2>'
                   f"{sec_html}</section>")
    return out


def report_html(layout, *, title=None, extra_sections=(), n_sections=3, csv_base=None,
                progress=None, lead_sections=()):
    """The report as a ``str`` (see :func:`write_report`).

    ``csv_base``: file-name stem of the CSV tables written beside the report
    (named under capped tables); ``progress(stage)``: called per writing stage;
    ``lead_sections``: ``(title, html)`` pairs placed right after the cautions
    (a comparison's decision), numbered after ``extra_sections``.
    """
    from .planmap import plan_map
    from .plots import figure_bytes

    say = progress or (lambda stage: None)
    info = layout.run_info
    title = title or info.get("scheme_name") or info.get("title") or info.get("name") \
        or "Layout review"
    ids = np.asarray(layout.nodes["node_id"]).astype(str)
    csv = _csv_namer(csv_base, layout)
    body = [f"<header><h1>{_e(title)}</h1><p class=\"sub\">Layout review — mainspan "
            f"{_e(info.get('version', ''))}</p>{T.title_block(layout, title)}</header>"]
    body.append('<section id="cautions" class="cautions"><h2>Cautions</h2><ul>'
                + "".join(f"<li>{_e(c)}</li>" for c in CAUTIONS) + "</ul></section>")
    body += _extra(lead_sections, len(extra_sections) + 1, "lead")
    say("report: summary and costs")
    body.append(f"<section><h2>Summary</h2>{_summary(layout)}</section>")
    body.append(f"<section><h2>Cost</h2>{T.cost_section(layout)}</section>")
    pump = T.pump_section(layout)
    if pump:
        body.append(f"<section><h2>Pump duty</h2>{pump}</section>")
    say("report: plan map")
    fig = plan_map(layout)
    body.append('<section class="newpage"><h2>Plan</h2><figure>'
                + _img(figure_bytes(fig, "png"), "image/png", "plan-map", "plan of the layout")
                + f"<figcaption>{_e(_map_caption(layout, fig))}</figcaption></figure></section>")
    fig.clear()
    say("report: tables")
    body.append(f"<section><h2>Failed checks</h2>{_checks_section(layout, csv)}</section>")
    body.append(f"<section><h2>Bill of quantities</h2>{_quantities(layout, csv)}</section>")
    body.append('<section class="newpage" id="long-sections"><h2>Long sections</h2>'
                + _sections(layout, n_sections, ids, say) + "</section>")
    say("report: schedules")
    body.append(f'<section class="newpage"><h2>Schedule of nodes</h2>'
                f'{T.node_schedule(layout, csv_name=csv("nodes"))}</section>')
    struct = T.structure_schedule(layout, csv_name=csv("structures"))
    if struct:
        body.append(f"<section><h2>Schedule of structures and fittings</h2>{struct}</section>")
    body.append(f'<section class="newpage"><h2>Run parameters and inputs</h2>'
                f"{T.parameters(layout)}{_inputs(layout)}</section>")
    body += _extra(extra_sections, 1, "newpage")
    body.append(f"<footer>Written by mainspan {_e(info.get('version', ''))}. "
                f"{_e(CAUTIONS[0])}</footer>")
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"{HTML_MARKER}"
            f"<title>{_e(title)}</title><style>{_CSS}</style></head><body>\n"
            + "\n".join(body) + "\n</body></html>\n")


def _csv_fast(columns: dict) -> str:
    """CSV of columns, numbers rounded by unit suffix (as the report shows them), NaN empty.

    Column-wise through pandas: the per-cell formatter of the links CSV takes ~30 s for
    the tables of 100,000 sites.
    """
    import pandas as pd

    out = {}
    for k, v in columns.items():
        a = np.asarray(v)
        if a.dtype.kind == "f":
            d = _decimals(k)
            a = np.round(a, d) if d is not None else a
            a = np.where(a == 0, 0.0, a)          # no "-0.0"
        elif a.dtype.kind in "OUS":
            a = a.astype(str)
        out[k] = a
    return pd.DataFrame(out).to_csv(index=False, lineterminator="\n", na_rep="")


def _csv_tables(layout):
    ends = np.asarray(layout.link_ends, np.int64).reshape(-1, 2)
    out = {"nodes": dict(layout.nodes), "links": dict(layout.links)}
    if layout.n_links and "from_node" not in out["links"]:
        ids = np.asarray(layout.nodes["node_id"]).astype(str)
        out["links"] = {"from_node": ids[ends[:, 0]], "to_node": ids[ends[:, 1]],
                        **out["links"]}
    if layout.tables.get("quantities"):
        out["quantities"] = dict(layout.tables["quantities"])
    for t in ("access_points", "fittings"):
        if layout.tables.get(t):
            out["structures"] = dict(layout.tables[t])
    return out


#: Links of one long section in the report (longer paths are shown from their start).
MAX_SECTION_LINKS = 80
#: Sites above which write_report prints its stages to stderr when no progress is given.
PROGRESS_FROM_SITES = 20_000


def write_report(layout, path, *, overwrite=False, title=None, extra_sections=(),
                 progress=None, lead_sections=()):
    """Write the self-contained HTML review report of a layout.

    Parameters
    ----------
    layout : mainspan.pipeline.layout.Layout
    path : str or os.PathLike
        Target ``.html`` file.
    overwrite : bool, default False
        Replace existing files (the report and its CSV tables); otherwise
        :class:`mainspan.errors.OverwriteError`.
    title : str, optional
        Heading and page title; default ``run_info["scheme_name"]``, ``"title"``
        or "Layout review".
    extra_sections : sequence of (str, str)
        ``(title, html)`` pairs appended after the run parameters (e.g. a
        scenario comparison).  Titles are escaped; the HTML is inserted as given.
    lead_sections : sequence of (str, str)
        Sections placed first, right after the cautions (a comparison's decision).
    progress : callable or bool, optional
        ``progress(stage)`` per writing stage; ``False`` for none.  By default
        the stages are printed to stderr for layouts above
        :data:`PROGRESS_FROM_SITES` sites.

    Returns
    -------
    str
        The path written.  Tables longer than ``MAX_ROWS`` rows are capped in
        the page and written whole beside it as ``<stem>_<table>.csv``.
    """
    if progress is None and layout.n_nodes > PROGRESS_FROM_SITES:
        def progress(stage):
            print(f"[mainspan] {stage} …", file=sys.stderr, flush=True)
    say = progress or None
    stem = os.path.splitext(os.path.basename(os.fspath(path)))[0]
    text = report_html(layout, title=title, extra_sections=extra_sections, csv_base=stem,
                       progress=say, lead_sections=lead_sections)
    csv = _csv_namer(stem, layout)
    folder = os.path.dirname(os.path.abspath(os.fspath(path)))
    for kind, cols in _csv_tables(layout).items():
        name = csv(kind)
        if name:
            if say:
                say(f"report: {name}")
            atomic_write(os.path.join(folder, name), _csv_fast(cols), overwrite=overwrite,
                         what="report table")
    return atomic_write(path, text, overwrite=overwrite, what="report")
