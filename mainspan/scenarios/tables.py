"""Comparison tables of scenarios: regret matrix, the scenario_links table, differences, summary, text table."""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from .pricing import _SUMMARY_TERMS, _key, combine_costs

__all__ = ["ALL_CANDIDATES_MAX", "same_sites", "same_candidates", "difference", "format_table"]

#: Up to this many distinct candidate links, ``scenario_links`` holds every candidate.
ALL_CANDIDATES_MAX = 200_000


def same_sites(a, b) -> bool:
    """Whether two scenario results have the same sites (ids and coordinates, in order)."""
    if a.keys["sites"] == b.keys["sites"]:
        return True
    sa, sb = a.layout.sites, b.layout.sites
    return (sa.n == sb.n and np.array_equal(sa.node_id.astype(str), sb.node_id.astype(str))
            and np.array_equal(sa.xy, sb.xy))


def same_candidates(a, b) -> bool:
    """Whether two scenario results share one candidate set (so ``candidate_index`` matches)."""
    if a.keys["candidates"] == b.keys["candidates"]:
        return True
    return same_sites(a, b) and np.array_equal(a.layout.candidates.edges,
                                               b.layout.candidates.edges)


def _regret_matrix(bench, order, results):
    """regret[i, j] = cost of layout i's links under scenario j's link costs."""
    k = len(order)
    out = np.full((k, k), np.nan)
    for j, sj in enumerate(order):
        rj = results[sj]
        plan = rj.keys["plan"]
        sites = rj.layout.sites
        for i, si in enumerate(order):
            ri = results[si]
            if not same_sites(ri, rj):
                continue                      # different sites: no common price
            cidx = np.asarray(ri.layout.links["candidate_index"], np.int64)
            if same_candidates(ri, rj):
                total = rj.layout.costs.total[cidx]
            else:                             # price layout i's links with j's settings
                e = ri.layout.candidates.edges[cidx]
                ek = _key("tree", si, ri.keys["candidates"])
                t = bench.terrain_parts(ek, sites.xy, e, sites, plan, rj.weights)
                la = bench.land_parts(ek, sites.xy, e, sites, plan)
                total = combine_costs(t, la, rj.weights).total
            out[i, j] = float(total.sum())
    return out


def _universe(order, results):
    """Global node numbering over the scenarios' sites, and each scenario's map into it."""
    ids, xys, block = [], [], {}
    for name in order:
        s = results[name].layout.sites
        if id(s) not in block:
            block[id(s)] = len(ids)
            ids.append(s.node_id.astype(str))
            xys.append(s.xy)
    all_ids = np.concatenate(ids)
    uniq, first, inv = np.unique(all_ids, return_index=True, return_inverse=True)
    rank = np.empty(len(uniq), np.int64)
    rank[np.argsort(first, kind="stable")] = np.arange(len(uniq))
    glob = rank[inv]
    xy = np.empty((len(uniq), 2))
    xy[glob[::-1]] = np.concatenate(xys)[::-1]      # the first occurrence of an id wins
    node_ids = np.empty(len(uniq), dtype=object)
    node_ids[glob] = all_ids
    offsets = np.cumsum([0] + [len(a) for a in ids])
    maps = {}
    for name in order:
        s = results[name].layout.sites
        b = block[id(s)]
        maps[name] = glob[offsets[b]:offsets[b + 1]]
    return node_ids, xy, maps


def _pair_keys(edges_global, n):
    lo = np.minimum(edges_global[:, 0], edges_global[:, 1])
    hi = np.maximum(edges_global[:, 0], edges_global[:, 1])
    return lo * np.int64(n) + hi


def _lookup(table, queries):
    """Row of each query key in *table* (unique int64 keys), -1 where absent."""
    srt = np.argsort(table, kind="stable")
    pos = np.minimum(np.searchsorted(table[srt], queries), max(len(table) - 1, 0))
    hit = table[srt][pos] == queries if len(table) else np.zeros(len(queries), bool)
    return np.where(hit, srt[pos], -1).astype(np.int64)


def _layout_keys(res, gmap, n):
    e = res.layout.candidates.edges[np.asarray(res.layout.links["candidate_index"], np.int64)]
    return _pair_keys(gmap[e], n)


def _link_table(order, results):
    node_ids, gxy, maps = _universe(order, results)
    n = len(node_ids)
    k = len(order)
    tree_keys = [_layout_keys(results[s], maps[s], n) for s in order]
    cand_keys, seen = [], set()
    for s in order:
        ck = results[s].keys["candidates"]
        if ck not in seen:
            seen.add(ck)
            cand_keys.append(_pair_keys(maps[s][results[s].layout.candidates.edges], n))
    all_cands = np.unique(np.concatenate(cand_keys))
    in_any = np.unique(np.concatenate(tree_keys))
    keys = all_cands if len(all_cands) <= ALL_CANDIDATES_MAX else in_any
    n_none = int(len(all_cands) - np.isin(all_cands, in_any).sum())
    member = np.zeros((len(keys), k), bool)
    for j, tk in enumerate(tree_keys):
        member[:, j] = np.isin(keys, tk)
    cnt = member.sum(axis=1)
    presence = np.where(cnt == k, "all", np.where(cnt > 0, "some", "none")).astype(object)
    scen = _membership_labels(member, order)
    lo, hi = keys // n, keys % n
    base = results["base"]
    bkeys = _pair_keys(maps["base"][base.layout.candidates.edges], n)
    cidx = _lookup(bkeys, keys)
    stab = np.full(len(keys), np.nan)
    runs = sum(results[s].runs for s in order)
    if runs:
        acc = np.zeros(len(keys))
        for s in order:
            r = results[s]
            if r.stability is None:
                continue
            at = _lookup(_pair_keys(maps[s][r.layout.candidates.edges], n), keys)
            ok = at >= 0
            acc[ok] += r.stability[at[ok]] * r.runs
        stab = acc / runs
    length = np.hypot(*(gxy[hi] - gxy[lo]).T) if len(keys) else np.zeros(0)
    table = {"candidate_index": cidx, "from_node": node_ids[lo].astype(str),
             "to_node": node_ids[hi].astype(str), "length_m": length, "presence": presence,
             "scenarios": scen, "n_scenarios": cnt.astype(np.int64), "stability": stab}
    return table, np.stack([gxy[lo], gxy[hi]], axis=1), n_none


def _membership_labels(member, order):
    """Comma lists of scenario names per row of a boolean (rows, k) matrix, vectorised."""
    if not len(member):
        return np.array([], dtype=object)
    patterns, inv = np.unique(member, axis=0, return_inverse=True)
    names = np.asarray(order, dtype=object)
    labels = np.array([",".join(names[p]) for p in patterns], dtype=object)
    return labels[np.asarray(inv).ravel()]


def difference(a, b):
    """Links added and removed going from layout *a* to layout *b*.

    Links are matched by ``candidate_index``, so *a* and *b* must come from
    the same candidate set (as scenarios sharing candidate settings do).

    Parameters
    ----------
    a, b : Layout

    Returns
    -------
    added, removed : ndarray of int64
        Sorted candidate indices in *b* but not *a*, and in *a* but not *b*.

    Examples
    --------
    >>> import numpy as np
    >>> from types import SimpleNamespace as NS
    >>> a = NS(links={"candidate_index": np.array([0, 2, 5])})
    >>> b = NS(links={"candidate_index": np.array([0, 3, 5])})
    >>> [x.tolist() for x in difference(a, b)]
    [[3], [2]]
    """
    for lay, what in ((a, "a"), (b, "b")):
        if "candidate_index" not in getattr(lay, "links", {}):
            raise InputError(f"difference(): layout {what} has no 'candidate_index' link field; "
                             "compare layouts planned by mainspan (or read from its output)")
    ia = np.asarray(a.links["candidate_index"], np.int64)
    ib = np.asarray(b.links["candidate_index"], np.int64)
    return np.setdiff1d(ib, ia), np.setdiff1d(ia, ib)


def _summary(order, results, regret, n_none):
    k = len(order)
    base = results["base"]
    col = {"scenario": np.asarray(order, dtype=object),
           "description": np.asarray([results[s].description for s in order], dtype=object)}
    rows = {c: np.zeros(k) for c in ("total_length_m", "total_surface_length_m", "total_cost",
                                     *(t[0] for t in _SUMMARY_TERMS), "cost_fixed")}
    n_links = np.zeros(k, np.int64)
    jac = np.full(k, np.nan)
    added = np.full(k, -1, np.int64)
    removed = np.full(k, -1, np.int64)
    failed = np.zeros(k, np.int64)
    n_cand = np.zeros(k, np.int64)
    n_imp = np.zeros(k, np.int64)
    bset = np.asarray(base.layout.links["candidate_index"], np.int64)
    for i, s in enumerate(order):
        r = results[s]
        lay = r.layout
        cidx = np.asarray(lay.links["candidate_index"], np.int64)
        comp = lay.costs.components
        w = r.weights
        rows["total_length_m"][i] = lay.total("length_m")
        rows["total_surface_length_m"][i] = lay.total("surface_length_m")
        rows["total_cost"][i] = lay.total("cost")
        for colname, cname, wname in _SUMMARY_TERMS:
            rows[colname][i] = float(getattr(w, wname) * comp[cname][cidx].sum()) \
                if getattr(w, wname) else 0.0
        rows["cost_fixed"][i] = w.fixed * len(cidx)
        n_links[i] = len(cidx)
        n_cand[i] = len(lay.candidates.edges)
        n_imp[i] = int(lay.costs.n_impassable)
        if same_candidates(r, base):
            union = np.union1d(bset, cidx).size
            jac[i] = np.intersect1d(bset, cidx).size / union if union else 1.0
            ad, rm = difference(base.layout, lay)
            added[i], removed[i] = len(ad), len(rm)
        if lay.design is not None:
            failed[i] = len(getattr(lay.design, "failures", []) or [])
    col.update(rows)
    col.update({"n_links": n_links, "jaccard_base": jac, "n_added": added, "n_removed": removed,
                "failed_checks": failed, "n_candidates": n_cand, "n_impassable": n_imp,
                "n_candidates_in_none": np.full(k, n_none, np.int64),
                "stability_runs": np.asarray([results[s].runs for s in order], np.int64)})
    for j, s in enumerate(order):
        col[f"cost_under_{s}"] = regret[:, j].copy()
    return col


def format_table(sset) -> str:
    """Fixed-width comparison table: one row per scenario, then the regret matrix."""
    s = sset.summary
    names = list(s["scenario"])
    w = max(8, *(len(n) for n in names))
    base_cost = s["total_cost"][0]
    cost_txt = [f"{v:,.1f}" for v in s["total_cost"]]
    rel_txt = [f"{(v / base_cost - 1.0) * 100:+.1f}%" if base_cost else "n/a"
               for v in s["total_cost"]]
    pm_txt = [f"+{a}/-{r}" if a >= 0 else "n/a" for a, r in zip(s["n_added"], s["n_removed"])]
    cw = max(14, *(len(t) for t in cost_txt))
    rw = max(8, *(len(t) for t in rel_txt))
    pw = max(9, *(len(t) for t in pm_txt))
    head = (f"{'scenario':<{w}} {'links':>6} {'length m':>11} {'cost':>{cw}} "
            f"{'vs base':>{rw}} {'jaccard':>7} {'+/-':>{pw}} {'fails':>5}")
    lines = [head, "-" * len(head)]
    for i, n in enumerate(names):
        jac = s["jaccard_base"][i]
        lines.append(f"{n:<{w}} {s['n_links'][i]:>6d} {s['total_length_m'][i]:>11,.1f} "
                     f"{cost_txt[i]:>{cw}} {rel_txt[i]:>{rw}} "
                     f"{'n/a' if np.isnan(jac) else f'{jac:.3f}':>7} {pm_txt[i]:>{pw}} "
                     f"{s['failed_checks'][i]:>5d}")
    lines += ["", "cost of each layout (row) under each scenario's link costs (column):"]
    cells = [["n/a" if np.isnan(v) else ("impassable" if np.isinf(v) else f"{v:,.0f}")
              for v in row] for row in sset.regret]
    mw = max(10, *(len(n) for n in names), *(len(c) for row in cells for c in row)) + 1
    lines.append(f"{'':<{w}} " + "".join(f"{n:>{mw}} " for n in names))
    for i, n in enumerate(names):
        lines.append(f"{n:<{w}} " + "".join(f"{c:>{mw}}" + ("*" if i == j else " ")
                                            for j, c in enumerate(cells[i])))
    lines.append("(* own costs; a tree is cheapest under its own costs when candidates are shared)")
    wk = sset.work
    lines.append(f"shared work: {wk['sites_reads']} sites read(s), {wk['candidate_builds']} "
                 f"candidate build(s), {wk['terrain_pricings']} terrain and "
                 f"{wk['land_pricings']} land-cost pricing(s) for {len(names)} scenarios")
    if sset.stability_runs:
        lines.append(f"stability: {sset.stability_runs} run(s) per scenario, land cost "
                     f"±{sset.perturb_pct:g} % per link, seed {sset.seed}")
    return "\n".join(line.rstrip() for line in lines)
