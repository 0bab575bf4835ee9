"""Corridor layout: mains that follow the cheapest ground, meeting at junctions.

:func:`corridor_network` turns the labelled search of
:mod:`mainspan.ground.search` into a network of routed links:

1. every site grows its region at once (multi-source Dijkstra); a step whose
   ends lie in the regions of sites ``s`` and ``t`` proposes the candidate
   link ``s``--``t`` at ``d(s, u) + w(u, v) + d(v, t)`` (Mehlhorn 1988), kept
   at its cheapest;
2. Prim's tree over those candidates;
3. each tree link expands to its cell path (back through both regions);
4. the paths' steps form a graph; its minimum spanning tree is taken and leaves
   that are not sites are cut off (steps 4 and 5 of Kou, Markowsky & Berman
   1981).  Where paths share cells they become one trunk; a cell where three
   or more branches meet becomes a **junction** node (role ``junction``);
5. each link between sites/junctions is simplified (Douglas--Peucker on the
   cell centres, a piece kept straight only if its exact price is at most
   ``1 + tolerance_pct / 100`` times the exact price of the cells it replaces,
   so the link's price rises by no more than the tolerance), then every final
   polyline is re-priced segment by segment with
   :func:`mainspan.ground.costs.price_links` -- the same costing as straight
   links, so every cost component means the same in both modes.

The tree is a Steiner tree in the grid graph within Mehlhorn's bound: at most
``2 (1 - 1/l)`` times the optimum over ``l`` leaves.

References
----------
.. [1] K. Mehlhorn, "A faster approximation algorithm for the Steiner problem
   in graphs", Inf. Process. Lett. 27:125-128, 1988.
.. [2] L. Kou, G. Markowsky and L. Berman, "A fast algorithm for Steiner trees",
   Acta Informatica 15:141-145, 1981.
.. [3] R. C. Prim, "Shortest connection networks and some generalizations",
   Bell Syst. Tech. J. 36(6):1389-1401, 1957.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np

from ..errors import DisconnectedError, InputError
from ..ground.search import OFFSETS, multi_source_search, step_costs

__all__ = ["CorridorNetwork", "corridor_network", "grid_steiner_tree", "price_polylines",
           "segment_pricer"]

_SUM = ("length_m", "surface_length_m", "land_cost", "climb_m", "descent_m", "steep_length_m")


@dataclass
class CorridorNetwork:
    """Routed links over sites and junctions.

    Attributes
    ----------
    junction_xy : ndarray float64 (J, 2)
        Junction nodes, numbered ``n_sites .. n_sites + J - 1``.
    edges : ndarray int64 (L, 2)
        Links, ``edges[:, 0] < edges[:, 1]``, sorted.
    path_offsets : ndarray int64 (L + 1,)
    path_xy : ndarray float64 (P, 2)
        Polyline of link i: ``path_xy[path_offsets[i]:path_offsets[i + 1]]``,
        from node ``edges[i, 0]`` to ``edges[i, 1]``.
    costs : LinkCosts
        The polylines priced with ``price_links`` (components summed over the
        segments; ``max_slope_pct`` their maximum; ``z_from_m``/``z_to_m`` the
        ends; ``nodata_fraction`` length-weighted).
    mehlhorn_edges, mehlhorn_cost : ndarray
        Mehlhorn's candidate links between sites and their search costs.
    tree_search_cost : float
        Search cost of Prim's tree over those candidates (before merging).
    steiner_search_cost : float
        Search cost of the merged tree (after the KMB steps), before simplifying.
    """

    junction_xy: np.ndarray
    edges: np.ndarray
    path_offsets: np.ndarray
    path_xy: np.ndarray
    costs: object
    mehlhorn_edges: np.ndarray
    mehlhorn_cost: np.ndarray
    tree_search_cost: float
    steiner_search_cost: float

    def path(self, i) -> np.ndarray:
        return self.path_xy[self.path_offsets[i]:self.path_offsets[i + 1]]


# --------------------------------------------------------------------------- grid Steiner tree

@numba.njit(cache=True)
def _prune(n, src, dst, terminal, alive):
    """Cut leaves that are not terminals, repeatedly (KMB step 5).  Edges given both ways."""
    deg = np.zeros(n, np.int64)
    for i in range(src.shape[0]):
        if alive[i]:
            deg[src[i]] += 1
    start = np.zeros(n + 1, np.int64)
    for i in range(src.shape[0]):
        start[src[i] + 1] += 1
    for v in range(n):
        start[v + 1] += start[v]
    fill = start[:-1].copy()
    adj = np.empty(src.shape[0], np.int64)
    for i in range(src.shape[0]):
        adj[fill[src[i]]] = i
        fill[src[i]] += 1
    stack = np.empty(n, np.int64)
    top = 0
    for v in range(n):
        if deg[v] == 1 and not terminal[v]:
            stack[top] = v
            top += 1
    while top > 0:
        top -= 1
        v = stack[top]
        if deg[v] != 1:
            continue
        for q in range(start[v], start[v + 1]):
            i = adj[q]
            if alive[i]:
                alive[i] = False
                alive[i ^ 1] = False          # the reverse copy sits next to it
                deg[v] -= 1
                w = dst[i]
                deg[w] -= 1
                if deg[w] == 1 and not terminal[w]:
                    stack[top] = w
                    top += 1
                break


def grid_steiner_tree(search, roots=(0,)):
    """Steps 1-5 above (without simplifying): Steiner tree on the grid's step graph.

    Parameters
    ----------
    search : Search
        A labelled search from every site (source ``i`` is site ``i``).
    roots : sequence of int
        Sites Prim's tree grows from.

    Returns
    -------
    cells : ndarray int64 (k,)
        The grid cells of the tree.
    steps : ndarray int64 (k - 1, 2)
        Its steps, as indices into ``cells``.
    step_cost : ndarray float64 (k - 1,)
    bridges : dict
        Mehlhorn's candidates (see :meth:`Search.bridges`), plus ``tree`` (the
        Prim :class:`~mainspan.graph.spanning.Tree` over them).
    """
    from .spanning import prim_tree

    br = search.bridges()
    n = search.source_cells.shape[0]
    tree = prim_tree(n, br["edges"], br["cost"], roots=roots)
    br["tree"] = tree
    sel = tree.parent_edge[tree.parent >= 0]
    a_list, b_list = [], []
    for j in sel:
        pu = search.path_to_source(br["u"][j])[::-1]
        pv = search.path_to_source(br["v"][j])
        path = np.concatenate([pu, pv])
        a_list.append(path[:-1])
        b_list.append(path[1:])
    if not a_list:
        return search.source_cells.copy(), np.zeros((0, 2), np.int64), np.zeros(0), br
    a = np.concatenate(a_list)
    b = np.concatenate(b_list)
    lo, hi = np.minimum(a, b), np.maximum(a, b)
    pairs = np.unique(np.column_stack([lo, hi]), axis=0)
    cells, inv = np.unique(np.concatenate([pairs.ravel(), search.source_cells]),
                           return_inverse=True)
    e = inv[:2 * len(pairs)].reshape(-1, 2)
    w = step_costs(search.costs, cells[e[:, 0]], cells[e[:, 1]])
    term_idx = inv[2 * len(pairs):]
    # KMB step 4: minimum spanning tree of the paths' subgraph (rooted at the first root)
    t2 = prim_tree(len(cells), e, w, roots=(int(term_idx[roots[0]]),))
    child = np.flatnonzero(t2.parent >= 0)
    k = t2.parent_edge[child]
    src = np.empty(2 * len(k), np.int64)
    dst = np.empty(2 * len(k), np.int64)
    src[0::2], dst[0::2] = child, t2.parent[child]
    src[1::2], dst[1::2] = t2.parent[child], child
    terminal = np.zeros(len(cells), np.bool_)
    terminal[term_idx] = True
    alive = np.ones(2 * len(k), np.bool_)
    _prune(len(cells), src, dst, terminal, alive)         # KMB step 5
    keep = alive[0::2]
    steps = np.column_stack([child[keep], t2.parent[child][keep]])
    used = np.unique(steps.ravel()) if len(steps) else term_idx
    used = np.union1d(used, term_idx)
    remap = np.full(len(cells), -1, np.int64)
    remap[used] = np.arange(len(used))
    return cells[used], remap[steps], w[k][keep], br


# --------------------------------------------------------------------------- links between key nodes

def _chains(n_cells, steps, key):
    """Split a tree of cells into chains between key cells (sites or junctions)."""
    adj = [[] for _ in range(n_cells)]
    for a, b in steps:
        adj[a].append(int(b))
        adj[b].append(int(a))
    seen = set()
    chains = []
    for s in np.flatnonzero(key):
        for nb in sorted(adj[s]):
            if (min(s, nb), max(s, nb)) in seen:
                continue
            chain = [int(s)]
            prev, cur = int(s), nb
            while True:
                seen.add((min(prev, cur), max(prev, cur)))
                chain.append(cur)
                if key[cur]:
                    break
                nxt = [x for x in adj[cur] if x != prev]
                prev, cur = cur, nxt[0]
            chains.append(chain)
    return chains


def _farthest(pts):
    """Index (1..k-2) of the vertex farthest from the chord of *pts*, ties to the lowest."""
    a, b = pts[0], pts[-1]
    d = b - a
    nrm = np.hypot(*d)
    rel = pts[1:-1] - a
    dist = np.abs(rel[:, 0] * d[1] - rel[:, 1] * d[0]) / nrm if nrm > 0 else np.hypot(*rel.T)
    return 1 + int(np.argmax(dist))


def _simplify(polys, price_segments, tolerance):
    """Douglas--Peucker on each polyline, a chord kept only within the cost tolerance.

    ``price_segments(p0, p1)`` gives the exact price of straight segments.
    """
    out = []
    step_price = []
    for p in polys:
        step_price.append(price_segments(p[:-1], p[1:]))
    pending = [(i, 0, len(p) - 1) for i, p in enumerate(polys)]
    kept = [set([0, len(p) - 1]) for p in polys]
    while pending:
        short = [t for t in pending if t[2] - t[1] <= 1]
        test = [t for t in pending if t[2] - t[1] > 1]
        if not test:
            break
        p0 = np.array([polys[i][a] for i, a, b in test])
        p1 = np.array([polys[i][b] for i, a, b in test])
        chord = price_segments(p0, p1)
        pending = []
        for (i, a, b), c in zip(test, chord):
            ref = float(np.sum(step_price[i][a:b]))
            if np.isfinite(c) and c <= ref * (1.0 + tolerance) + 1e-9 * max(ref, 1.0):
                continue
            mid = a + _farthest(polys[i][a:b + 1])
            kept[i].add(mid)
            pending += [(i, a, mid), (i, mid, b)]
        del short
    for p, k in zip(polys, kept):
        out.append(p[sorted(k)])
    return out


def price_polylines(polys, price):
    """Price polylines segment by segment and sum per polyline.

    ``price(p0, p1)`` must return a :class:`~mainspan.ground.costs.LinkCosts`
    for straight segments; the components of each polyline are summed
    (``max_slope_pct`` maximised, ``z_from_m``/``z_to_m`` taken at the ends,
    ``nodata_fraction`` weighted by length), the ``fixed`` price counted once.
    """
    from ..ground.costs import LinkCosts, _count_reasons

    counts = np.array([len(p) - 1 for p in polys], np.int64)
    p0 = np.concatenate([p[:-1] for p in polys])
    p1 = np.concatenate([p[1:] for p in polys])
    lc, fixed = price(p0, p1)
    owner = np.repeat(np.arange(len(polys)), counts)
    first = np.concatenate([[0], np.cumsum(counts)[:-1]])
    last = np.cumsum(counts) - 1
    L = len(polys)
    comps = {}
    for k, v in lc.components.items():
        if k == "max_slope_pct":
            out = np.full(L, -np.inf)
            np.maximum.at(out, owner, np.nan_to_num(v, nan=-np.inf))
            comps[k] = np.where(np.isinf(out), np.nan, out)
        elif k == "z_from_m":
            comps[k] = v[first]
        elif k == "z_to_m":
            comps[k] = v[last]
        elif k == "nodata_fraction":
            comps[k] = np.bincount(owner, v * lc.components["length_m"], L)
        else:
            comps[k] = np.bincount(owner, v, L)
    length = comps["length_m"]
    if "nodata_fraction" in comps:
        comps["nodata_fraction"] = np.divide(comps["nodata_fraction"], length,
                                             out=np.zeros(L), where=length > 0)
    seg_code = lc.reason_code
    code = np.full(L, -1, np.int16)
    bad = seg_code >= 0
    code[owner[bad][::-1]] = seg_code[bad][::-1]          # the first bad segment's reason
    passable = code < 0
    with np.errstate(invalid="ignore"):
        total = np.bincount(owner, np.where(np.isfinite(lc.total), lc.total - fixed, 0.0), L)
    total = total + fixed
    total[~passable] = np.inf
    return LinkCosts(comps, total, passable, int((~passable).sum()),
                     _count_reasons(code, lc.reason_labels), code, lc.reason_labels)


# --------------------------------------------------------------------------- the layout

def corridor_network(xy, step_costs_, price, *, roots=(0,), tolerance_pct=1.0, node_id=None,
                     barrier_names=""):
    """Routed network over *xy* (working CRS) on a filled cost grid.

    Parameters
    ----------
    xy : ndarray float64 (n, 2)
        Sites.
    step_costs_ : StepCosts
        From :func:`mainspan.ground.search.cost_grid`.
    price : callable
        ``price(p0, p1) -> (LinkCosts, fixed)`` for straight segments (exact costing).
    roots : sequence of int
    tolerance_pct : float, default 1.0
        How much simplifying may raise a link's price, percent.
    node_id : sequence of str, optional
        Site ids for messages.
    barrier_names : str
        The barrier layers, for messages.

    Returns
    -------
    CorridorNetwork
    """
    xy = np.asarray(xy, dtype=np.float64)
    n = len(xy)
    ids = [str(v) for v in (node_id if node_id is not None else range(n))]
    grid = step_costs_.grid
    cells = grid.cell_of(xy)
    if (cells < 0).any():
        i = int(np.flatnonzero(cells < 0)[0])
        raise InputError(f"site {ids[i]} lies outside the corridor search grid; "
                         "widen --corridor-margin-m")
    u, first, cnt = np.unique(cells, return_index=True, return_counts=True)
    if (cnt > 1).any():
        c = u[np.flatnonzero(cnt > 1)[0]]
        both = np.flatnonzero(cells == c)[:2]
        raise InputError(f"sites {ids[both[0]]} and {ids[both[1]]} fall in the same corridor "
                         f"cell of {grid.cell_m:g} m; use a smaller --corridor-cell-m")
    blocked = ~np.isfinite(step_costs_.land.reshape(-1)[cells])
    if blocked.any():
        bad = [ids[i] for i in np.flatnonzero(blocked)]
        raise InputError(f"site(s) {', '.join(bad[:8])} lie inside a barrier or on an impassable "
                         f"cell (no data){' (barriers: ' + barrier_names + ')' if barrier_names else ''}"
                         "; move them or correct the barrier layer")
    search = multi_source_search(step_costs_, cells)
    roots = tuple(int(r) for r in roots)
    try:
        tcells, steps, scost, br = grid_steiner_tree(search, roots=roots)
    except DisconnectedError:
        comp = _regions_reached(search, br_edges=search.bridges()["edges"], n=n, roots=roots)
        cut = [ids[i] for i in range(n) if not comp[i]]
        raise InputError(
            f"barriers cut off {len(cut)} site(s) from the root: {', '.join(cut[:8])}"
            f"{' …' if len(cut) > 8 else ''}"
            f"{' (barrier layers: ' + barrier_names + ')' if barrier_names else ''}; open a "
            "gap in the barrier or give those sites their own root (--roots)") from None
    # key cells: sites, and cells where three or more branches meet
    deg = np.bincount(steps.ravel(), minlength=len(tcells)) if len(steps) else np.zeros(
        len(tcells), np.int64)
    site_pos = np.searchsorted(tcells, cells)
    is_site = np.zeros(len(tcells), bool)
    is_site[site_pos] = True
    key = is_site | (deg >= 3)
    junction_cells = np.flatnonzero(key & ~is_site)
    node_of = np.full(len(tcells), -1, np.int64)
    node_of[site_pos] = np.arange(n)
    node_of[junction_cells] = n + np.arange(len(junction_cells))
    jxy = grid.centres(tcells[junction_cells])
    all_xy = np.concatenate([xy, jxy])
    chains = _chains(len(tcells), steps, key)
    centres = grid.centres(tcells)
    polys, ends = [], []
    for ch in chains:
        a, b = int(node_of[ch[0]]), int(node_of[ch[-1]])
        if a > b:
            ch = ch[::-1]
            a, b = b, a
        p = centres[ch].copy()
        p[0], p[-1] = all_xy[a], all_xy[b]
        polys.append(p)
        ends.append((a, b))
    ends = np.asarray(ends, np.int64).reshape(-1, 2)
    order = np.lexsort((ends[:, 1], ends[:, 0]))
    ends = ends[order]
    polys = [polys[i] for i in order]

    def seg_total(p0, p1):
        return price(p0, p1)[0].total

    polys = _simplify(polys, seg_total, tolerance_pct / 100.0)
    costs = price_polylines(polys, price)
    counts = np.array([len(p) for p in polys], np.int64)
    off = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    path_xy = np.concatenate(polys) if polys else np.zeros((0, 2))
    tree = br["tree"]
    return CorridorNetwork(jxy, ends, off, path_xy, costs, br["edges"], br["cost"],
                           float(tree.weight), float(scost.sum()))


def segment_pricer(*, working_crs, extra_terms=(), weights=None, **price_kw):
    """``price(p0, p1) -> (LinkCosts, fixed)``: straight segments priced by ``price_links``.

    ``price_kw`` are the ``price_links`` keywords of the run (terrain, land
    cost, expression, nodata policy, ...); ``extra_terms`` the vector terms.
    """
    from ..ground.costs import CostWeights, price_links

    w = weights if weights is not None else CostWeights()

    def price(p0, p1):
        k = len(p0)
        pts = np.concatenate([np.asarray(p0, float), np.asarray(p1, float)])
        e = np.column_stack([np.arange(k), np.arange(k, 2 * k)])
        return price_links(pts, e, working_crs=working_crs, weights=w,
                           extra_terms=extra_terms, refuse_negative=True, **price_kw), w.fixed

    return price


def _regions_reached(search, *, br_edges, n, roots):
    """Which sites Mehlhorn's candidates connect to a root."""
    parent = np.arange(n)

    def find(x):
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    for a, b in br_edges:
        ra, rb = find(a), find(b)
        if ra != rb:
            parent[max(ra, rb)] = min(ra, rb)
    rr = {find(r) for r in roots}
    return np.array([find(i) in rr for i in range(n)])
