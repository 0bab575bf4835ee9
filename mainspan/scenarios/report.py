"""Sections of the HTML report for a scenario comparison: table, maps, cost bars."""

from __future__ import annotations

import base64
import html

import numpy as np

from .pricing import _SUMMARY_TERMS
from .tables import same_candidates

__all__ = ["report_sections"]

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


def _table_html(sset):
    s = sset.summary
    names = list(s["scenario"])
    esc = html.escape

    def num(v, fmt="{:,.1f}"):
        v = float(v)
        return "n/a" if np.isnan(v) else ("impassable" if np.isinf(v) else fmt.format(v))

    desc = "".join(f"<li><b>{esc(n)}</b>: {esc(str(d)) or '(no description)'}</li>"
                   for n, d in zip(names, s["description"]))
    cols = ("scenario", "links", "length m", "cost", "vs base", "Jaccard", "added",
            "removed", "failed checks")
    rows = []
    base_cost = float(s["total_cost"][0])
    for i, n in enumerate(names):
        rel = (float(s["total_cost"][i]) / base_cost - 1) * 100 if base_cost else float("nan")
        added = s["n_added"][i]
        cells = (esc(n), str(s["n_links"][i]), num(s["total_length_m"][i]),
                 num(s["total_cost"][i]), num(rel, "{:+.1f} %"),
                 num(s["jaccard_base"][i], "{:.3f}"),
                 str(added) if added >= 0 else "n/a",
                 str(s["n_removed"][i]) if added >= 0 else "n/a", str(s["failed_checks"][i]))
        rows.append("<tr>" + "".join(f"<td>{c}</td>" for c in cells) + "</tr>")
    summary = (f"<ul>{desc}</ul><div style=\"overflow-x:auto\"><table><thead><tr>"
               + "".join(f"<th>{c}</th>" for c in cols) + "</tr></thead><tbody>"
               + "".join(rows) + "</tbody></table></div>")
    head = "".join(f"<th>{esc(n)}</th>" for n in names)
    body = "".join(
        f"<tr><th>{esc(a)}</th>" + "".join(
            (f"<td><b>{num(sset.regret[i, j], '{:,.0f}')}</b></td>" if i == j else
             f"<td>{num(sset.regret[i, j], '{:,.0f}')}</td>") for j in range(len(names)))
        + "</tr>" for i, a in enumerate(names))
    regret = ("<p>Cost of each layout (row) priced with each scenario's link costs (column); "
              "the own costs are in bold. Where scenarios share candidate links, each "
              "scenario's own layout is the cheapest in its column, so the difference down a "
              "column is what choosing another scenario's layout would cost.</p>"
              f"<div style=\"overflow-x:auto\"><table><thead><tr><th>layout \\ costs</th>"
              f"{head}</tr></thead><tbody>{body}</tbody></table></div>")
    return summary + regret


def report_sections(sset):
    """``(title, html)`` sections comparing the scenarios, for ``write_report``."""
    return [("Scenario comparison", _table_html(sset)),
            ("Scenario layouts", _maps_html(sset)),
            ("Cost breakdown by scenario", _bars_html(sset))]
