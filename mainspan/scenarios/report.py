"""Sections of the HTML report for a scenario comparison: table, maps, cost bars."""

from __future__ import annotations

import base64
import html

import numpy as np

from .pricing import _SUMMARY_TERMS
from .tables import same_candidates

__all__ = ["report_sections", "decision_sections", "detail_sections", "regret_table",
           "stability_rows"]

# ------------------------------------------------------------------------------ report
def _png(fig):
    from ..report.plots import figure_bytes

    import matplotlib.pyplot as plt

    data = figure_bytes(fig, "png")
    plt.close(fig)
    return ('<img alt="" style="max-width:100%" src="data:image/png;base64,'
            + base64.b64encode(data).decode("ascii") + '">')


def _maps_html(sset):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.collections import LineCollection

    k = len(sset.names)
    ncol = min(3, k)
    nrow = -(-k // ncol)
    fig, axes = plt.subplots(nrow, ncol, figsize=(4.2 * ncol, 4.0 * nrow), squeeze=False)
    base = sset["base"]
    bset = np.asarray(base.links["candidate_index"])
    for ax in axes.ravel()[k:]:
        ax.set_axis_off()
    for ax, name in zip(axes.ravel(), sset.names):
        lay = sset[name]
        r = sset.results[name]
        seg = lay.node_xy[lay.link_ends]
        cidx = np.asarray(lay.links["candidate_index"])
        shared = same_candidates(r, sset.results["base"])
        new = ~np.isin(cidx, bset) if shared else np.zeros(len(cidx), bool)
        ax.add_collection(LineCollection(seg[~new], colors="#1f3b73", linewidths=1.0))
        if new.any():
            ax.add_collection(LineCollection(seg[new], colors="#e07b00", linewidths=2.0))
        if shared and name != "base":
            gone = np.setdiff1d(np.asarray(base.links["candidate_index"]), cidx)
            if gone.size:
                e = lay.candidates.edges[gone]
                ax.add_collection(LineCollection(lay.node_xy[e], colors="#b00020",
                                                 linewidths=0.8, linestyles="dashed"))
        roots = np.asarray(lay.tree.roots, np.int64)
        ax.plot(lay.node_xy[:, 0], lay.node_xy[:, 1], ".", ms=2, color="#555555")
        ax.plot(lay.node_xy[roots, 0], lay.node_xy[roots, 1], "s", ms=6, color="#000000")
        ax.set_aspect("equal")
        ax.autoscale_view()
        ax.set_title(name, fontsize=10)
        ax.ticklabel_format(useOffset=False, style="plain")
        ax.tick_params(labelsize=6)
    fig.suptitle("Layouts (orange: links not in the base; dashed red: base links left out)",
                 fontsize=10)
    fig.tight_layout()
    return _png(fig)


def _bars_html(sset):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    s = sset.summary
    names = list(s["scenario"])
    parts = [c for c, _, _ in _SUMMARY_TERMS] + ["cost_fixed"]
    fig, ax = plt.subplots(figsize=(max(5.0, 1.3 * len(names) + 2), 3.8))
    bottom = np.zeros(len(names))
    for c in parts:
        v = np.asarray(s[c], float)
        if not v.any():
            continue
        ax.bar(names, v, bottom=bottom, label=c.replace("cost_", ""))
        bottom += v
    ax.set_ylabel("cost")
    ax.set_title("Cost of each layout by term", fontsize=10)
    ax.legend(fontsize=8)
    ax.tick_params(axis="x", labelsize=8, rotation=20)
    fig.tight_layout()
    return _png(fig)


def _num(v, fmt="{:,.0f}"):
    v = float(v)
    return "n/a" if np.isnan(v) else ("impassable" if np.isinf(v) else fmt.format(v))


def regret_table(sset):
    """``extra[i, j]``: what choosing layout i costs over scenario j's own layout, priced
    with scenario j's link costs (NaN where the scenarios do not share candidates)."""
    reg = np.asarray(sset.regret, float)
    own = np.diag(reg)
    return reg - own[None, :]


def stability_rows(sset):
    """Per scenario: runs, mean and least share of runs keeping each tree link, and the
    number of tree links kept by fewer than half the runs (None without runs)."""
    rows = {}
    for n in sset.names:
        r = sset.results[n]
        if r.stability is None or not r.runs:
            rows[n] = None
            continue
        cidx = np.asarray(r.layout.links["candidate_index"], np.int64)
        st = np.asarray(r.stability, float)[cidx]
        rows[n] = (int(r.runs), float(st.mean()) if st.size else 1.0,
                   float(st.min()) if st.size else 1.0, int((st < 0.5).sum()))
    return rows


def _decision_html(sset):
    s = sset.summary
    names = list(s["scenario"])
    esc = html.escape
    extra = regret_table(sset)
    worst = np.where(np.isnan(extra), -np.inf, extra).max(axis=1)
    comparable = ~np.isnan(extra).all(axis=1)
    stab = stability_rows(sset)
    out = []
    if comparable.any() and np.isfinite(worst[comparable]).any():
        best = int(np.flatnonzero(comparable)[np.argmin(worst[comparable])])
        out.append(f'<p id="scenario-decision"><b>Most robust layout: {esc(names[best])}</b> — '
                   f"its largest extra cost over the best layout of any scenario, each priced "
                   f"with that scenario's own link costs, is {_num(worst[best])}.</p>")
    else:
        out.append('<p id="scenario-decision">The scenarios do not share candidate links, so '
                   "their layouts cannot be priced under each other's costs; compare them on "
                   "their own terms below.</p>")
    out.append('<p class="sub">Each total below is under that scenario\'s own cost function; '
               "totals of different scenarios are priced differently and their difference is "
               "not a saving. Compare layouts down a column of the regret table instead.</p>")
    cols = ("scenario", "links", "length (m)", "total under its own costs",
            "largest extra cost (regret)", "under scenario", "links shared with base",
            "failed checks", "stability")
    rows = []
    for i, n in enumerate(names):
        j = int(np.nanargmax(np.where(np.isnan(extra[i]), -np.inf, extra[i]))) \
            if comparable[i] else None
        st = stab.get(n)
        st_txt = ("not run" if st is None else
                  f"{st[0]} runs: links kept {st[1] * 100:.0f} % on average, "
                  f"{st[3]} link(s) in fewer than half")
        jac = s["jaccard_base"][i]
        cells = (esc(n), f"{s['n_links'][i]:,}", _num(s["total_length_m"][i], "{:,.1f}"),
                 _num(s["total_cost"][i], "{:,.2f}"),
                 _num(worst[i]) if comparable[i] else "n/a",
                 esc(names[j]) if j is not None and worst[i] > 0 else "—",
                 "n/a" if np.isnan(jac) else f"{jac * 100:.0f} %", str(s["failed_checks"][i]),
                 esc(st_txt))
        rows.append("<tr>" + "".join(
            f'<td class="num">{c}</td>' if k in (1, 2, 3, 4) else f"<td>{c}</td>"
            for k, c in enumerate(cells)) + "</tr>")
    out.append('<div class="wide"><table id="scenario-decision-table"><thead><tr>'
               + "".join(f"<th>{c}</th>" for c in cols) + "</tr></thead><tbody>"
               + "".join(rows) + "</tbody></table></div>")
    head = "".join(f"<th>{esc(n)}</th>" for n in names)
    body = "".join(
        f"<tr><th>{esc(a)}</th>" + "".join(
            (f"<td class=\"num\"><b>{_num(sset.regret[i, j])}</b></td>" if i == j else
             f"<td class=\"num\">{_num(sset.regret[i, j])}<br><small>+{_num(extra[i, j])}"
             "</small></td>") for j in range(len(names)))
        + "</tr>" for i, a in enumerate(names))
    out.append("<h3>Regret</h3><p>Cost of each layout (row) priced with each scenario's link "
               "costs (column); the own costs in bold, and under each the extra cost over "
               "the column's own layout. Where scenarios share candidate links, each "
               "scenario's own layout is the cheapest in its column.</p>"
               f'<div class="wide"><table id="regret"><thead><tr><th>layout \\ costs</th>'
               f"{head}</tr></thead><tbody>{body}</tbody></table></div>")
    if sset.stability_runs:
        out.append(f"<h3>Stability</h3><p>{sset.stability_runs} run(s) per scenario with land "
                   f"cost perturbed ±{sset.perturb_pct:g} % per link (seed {sset.seed}); a "
                   "link kept in fewer than half the runs is one the choice of layout is not "
                   "sure about.</p>")
    return "".join(out)


def _parameters_html(sset):
    s = sset.summary
    esc = html.escape
    items = []
    for n, d in zip(s["scenario"], s["description"]):
        r = sset.results[n]
        sets = "; ".join(f"[{sec}] " + ", ".join(f"{k} = {v}" for k, v in sorted(vals.items()))
                         for sec, vals in sorted(r.settings.items())
                         if isinstance(vals, dict) and vals and sec != "output")
        items.append(f"<li><b>{esc(n)}</b>: {esc(str(d)) or '(no description)'}"
                     f"<br><small class=\"mono\">{esc(sets)}</small></li>")
    wk = sset.work
    return (f"<ul>{''.join(items)}</ul><p class=\"sub\">Shared work: {wk['sites_reads']} sites "
            f"read(s), {wk['candidate_builds']} candidate build(s), {wk['terrain_pricings']} "
            f"terrain and {wk['land_pricings']} land-cost pricing(s) for "
            f"{len(sset.names)} scenarios.</p>")


def decision_sections(sset):
    """The sections that lead a comparison report: the decision, regret and stability."""
    return [("Scenario comparison: the decision", _decision_html(sset))]


def detail_sections(sset):
    """The sections after the base report: layouts, cost terms, then the parameters."""
    return [("Scenario layouts", _maps_html(sset)),
            ("Cost breakdown by scenario", _bars_html(sset)),
            ("Scenario parameters", _parameters_html(sset))]


def report_sections(sset):
    """``(title, html)`` sections comparing the scenarios, decision first, parameters last."""
    return decision_sections(sset) + detail_sections(sset)
