"""Trees within limits: sites or flow per branch, links per node, capacity per source.

A *branch* is the part of the tree hanging from one link that leaves a source (a lateral
and everything fed through it).  The limits are

* ``max_branch_sites``: sites (not junctions) on one branch;
* ``max_branch_flow_lps``: demand (L/s) carried by one branch;
* ``max_links_per_node``: links meeting at any node (a manifold, the source itself);
* ``source_capacity_lps``: demand each source may supply; every site is served by one source.

Finding the cheapest spanning tree within branch limits is the capacitated minimum spanning
tree problem, NP-hard in general; :func:`limited_tree` uses the Esau–Williams heuristic [1]_
and then improves the tree by link exchange.  Esau–Williams starts from every site joined to
a source by its own *gate* link and repeatedly joins the component of site *i* to the
component of site *j* through link (i, j), dropping the gate of *i*'s component, choosing
each time the most negative *trade-off* ``t_ij = c_ij - g_i`` (``g_i``: cost of the gate of
*i*'s component) among the joins that keep every limit, until no join saves anything.  Here
the candidate links are sparse, so

* a component's gate is its cheapest candidate link to a source with room; a component with
  none (no candidate link to any source) has ``g = inf`` and must join another one;
* a component whose source is over its capacity or its link limit must join another
  component or move its gate to another source, at the least extra cost (a trade-off that
  may be positive) -- the only way to shed an initial star that breaks a source's limits;
* forced links are joined first and never dropped; forbidden links are never used.

Link exchange then removes one tree link and adds the cheapest non-tree link that rejoins
the two parts within every limit, while that lowers the cost.  The result is feasible but
not proven minimum; the run reports its cost against Prim's unconstrained tree (a lower
bound), and the tests measure the gap against exhaustive enumeration on small instances.

Hot work is numpy over all candidate links per step: O(n m) for the joins and per exchange
pass; meant for the networks limits apply to (hundreds to a few thousand sites).

References
----------
.. [1] L. R. Esau and K. C. Williams, "On teleprocessing system design, part II: a method for
   approximating the optimal network", IBM Systems Journal 5(3):142-147, 1966.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import depth_first_order

from ..errors import DisconnectedError, InputError
from .spanning import Tree

__all__ = ["Limits", "limited_tree", "tree_from_links", "branch_loads", "limit_violations"]

_BIG = np.iinfo(np.int64).max // 4


@dataclass(frozen=True)
class Limits:
    """Limits a tree must respect (None: no limit).

    Attributes
    ----------
    max_branch_sites : int or None
        Sites on one branch leaving a source.
    max_branch_flow_lps : float or None
        Demand carried by one branch leaving a source, L/s.
    max_links_per_node : int or None
        Links meeting at one node (sources included).
    source_capacity_lps : dict of int -> float, optional
        Node index of a source -> demand it may supply, L/s.
    """

    max_branch_sites: int | None = None
    max_branch_flow_lps: float | None = None
    max_links_per_node: int | None = None
    source_capacity_lps: dict = field(default_factory=dict)

    @property
    def active(self) -> bool:
        return bool(self.max_branch_sites is not None or self.max_branch_flow_lps is not None
                    or self.max_links_per_node is not None or self.source_capacity_lps)

    def text(self, node_id=None) -> str:
        parts = []
        if self.max_branch_sites is not None:
            parts.append(f"max_branch_sites={self.max_branch_sites}")
        if self.max_branch_flow_lps is not None:
            parts.append(f"max_branch_flow_lps={self.max_branch_flow_lps:g}")
        if self.max_links_per_node is not None:
            parts.append(f"max_links_per_node={self.max_links_per_node}")
        for s, c in sorted(self.source_capacity_lps.items()):
            name = node_id[s] if node_id is not None else s
            parts.append(f"source_capacity_lps[{name}]={c:g}")
        return ", ".join(parts)


def tree_from_links(n, edges, links, roots, weights=None) -> Tree:
    """A rooted :class:`Tree` from a set of link indices forming a spanning forest.

    Each root's tree is walked depth-first (scipy's ``depth_first_order`` from a virtual
    node joined to every root), so parents precede children in ``order``.
    """
    e = np.asarray(edges, np.int64)
    links = np.asarray(links, np.int64)
    roots = np.asarray(roots, np.int64)
    a = np.concatenate([e[links, 0], np.full(len(roots), n)])
    b = np.concatenate([e[links, 1], roots])
    data = np.concatenate([links + 1, np.zeros(len(roots), np.int64)]).astype(np.float64)
    g = csr_matrix((np.concatenate([data, data]), (np.concatenate([a, b]), np.concatenate([b, a]))),
                   shape=(n + 1, n + 1))
    g.sum_duplicates()
    order, pred = depth_first_order(g, n, directed=False, return_predecessors=True)
    order = order[1:].astype(np.int64)
    if len(order) != n:
        raise InputError(f"the links leave {n - len(order)} node(s) cut off from every root")
    parent = pred[:n].astype(np.int64)
    parent[roots] = -1
    lookup = {(int(x), int(y)): int(k) for k, x, y in zip(links, e[links, 0], e[links, 1])}
    child = order[parent[order] >= 0]
    pe = np.full(n, -1, dtype=np.int64)
    pe[child] = [lookup[(min(int(v), int(parent[v])), max(int(v), int(parent[v])))]
                 for v in child]
    root_of = np.empty(n, dtype=np.int64)
    for v in order.tolist():
        root_of[v] = v if parent[v] < 0 else root_of[parent[v]]
    w = 0.0 if weights is None else float(np.sum(np.asarray(weights, float)[np.sort(links)]))
    return Tree(parent=parent, parent_edge=pe, order=order, roots=roots, root_of=root_of,
                weight=w)


def branch_loads(tree: Tree, demand_lps, site_weight=None):
    """Per node: its branch (the node just below the source), sites and flow of each branch.

    Returns
    -------
    (branch, sites, flow) : ndarray (n,) of the branch head of each node (-1 at roots),
    and dicts branch head -> number of sites / demand (L/s).
    """
    n = tree.n_nodes
    sw = np.ones(n) if site_weight is None else np.asarray(site_weight, float)
    dem = np.asarray(demand_lps, float)
    branch = np.full(n, -1, dtype=np.int64)
    for v in np.asarray(tree.order).tolist():
        p = int(tree.parent[v])
        if p >= 0:
            branch[v] = v if tree.parent[p] < 0 else branch[p]
    m = branch >= 0
    heads = np.unique(branch[m])
    sites = {int(h): float(sw[branch == h].sum()) for h in heads}
    flow = {int(h): float(dem[branch == h].sum()) for h in heads}
    return branch, sites, flow


def limit_violations(tree: Tree, edges, demand_lps, limits: Limits, *, site_weight=None,
                     node_id=None) -> list:
    """Every limit *tree* breaks, one line each (empty: the tree is within the limits)."""
    n = tree.n_nodes
    ids = [str(v) for v in (node_id if node_id is not None else range(n))]
    is_root = np.zeros(n, bool)
    is_root[np.asarray(tree.roots)] = True
    sw = np.ones(n) if site_weight is None else np.asarray(site_weight, float)
    sw = np.where(is_root, 0.0, sw)
    dem = np.where(is_root, 0.0, np.asarray(demand_lps, float))
    branch, sites, flow = branch_loads(tree, dem, sw)
    out = []
    for h in sorted(sites):
        if limits.max_branch_sites is not None and sites[h] > limits.max_branch_sites:
            out.append(f"branch at {ids[h]} holds {sites[h]:g} sites > max_branch_sites="
                       f"{limits.max_branch_sites}")
        if limits.max_branch_flow_lps is not None and flow[h] > limits.max_branch_flow_lps + 1e-9:
            out.append(f"branch at {ids[h]} carries {flow[h]:g} L/s > max_branch_flow_lps="
                       f"{limits.max_branch_flow_lps:g}")
    if limits.max_links_per_node is not None:
        deg = np.bincount(np.asarray(edges, np.int64)[tree.tree_edges].ravel(), minlength=n)
        for v in np.flatnonzero(deg > limits.max_links_per_node).tolist():
            out.append(f"node {ids[v]} has {deg[v]} links > max_links_per_node="
                       f"{limits.max_links_per_node}")
    for s, c in sorted(limits.source_capacity_lps.items()):
        load = float(dem[np.asarray(tree.root_of) == s].sum())
        if load > c + 1e-9:
            out.append(f"source {ids[s]} supplies {load:g} L/s > source_capacity_lps={c:g}")
    return out


class _State:
    """Components of the Esau–Williams joins (struct of arrays indexed by component head)."""

    def __init__(self, n, is_src, sw, dem):
        self.comp = np.where(is_src, -1, np.arange(n))
        self.size = np.where(is_src, 0.0, sw)
        self.flow = np.where(is_src, 0.0, dem)
        self.gate = np.full(n, -1, np.int64)        # link index of the component's gate
        self.gate_cost = np.full(n, np.inf)
        self.gate_node = np.full(n, -1, np.int64)
        self.src = np.full(n, -1, np.int64)
        self.fixed = np.zeros(n, bool)
        self.deg = np.zeros(n, np.int64)
        self.load = np.zeros(n)
        self.links = []


def limited_tree(n_nodes, edges, weights, *, roots, demand_lps, limits: Limits,
                 site_weight=None, forced=(), forbidden=(), node_id=None, improve=True,
                 max_exchange_passes=20):
    """A spanning forest, one tree per source, within *limits* (Esau–Williams + exchange).

    Parameters
    ----------
    n_nodes : int
    edges : array_like of int, shape (m, 2)
    weights : array_like of float, shape (m,)
        Link prices; ``inf`` impassable.
    roots : sequence of int
        The sources.
    demand_lps : array_like, shape (n,)
        Demand of each node, L/s.
    limits : Limits
    site_weight : array_like, shape (n,), optional
        What a node counts towards ``max_branch_sites`` (default 1; 0 for junctions).
    forced, forbidden : array_like of int
        Link indices always / never in the tree.
    node_id : sequence of str, optional
    improve : bool, default=True
        Run link exchange after Esau–Williams.

    Returns
    -------
    (Tree, dict)
        The tree and a record: ``esau_williams_cost``, ``cost``, ``n_joins``, ``n_exchanges``,
        ``joins`` (the first joins as (i, j, trade-off)).

    Raises
    ------
    InputError
        The limits cannot be met (or the heuristic found no way to meet them); the message
        names the limit and the sites.

    Examples
    --------
    >>> e = np.array([[0, 1], [0, 2], [0, 3], [1, 2], [2, 3]])
    >>> w = np.array([10.0, 10.0, 10.0, 1.0, 1.0])
    >>> t, rec = limited_tree(4, e, w, roots=[0], demand_lps=np.ones(4),
    ...                       limits=Limits(max_branch_sites=2))
    >>> sorted(t.tree_edges.tolist()), t.weight
    ([1, 2, 3], 21.0)
    """
    n = int(n_nodes)
    e = np.asarray(edges, np.int64).reshape(-1, 2)
    w = np.array(weights, dtype=np.float64, copy=True)
    ids = [str(v) for v in (node_id if node_id is not None else range(n))]
    roots = np.asarray(roots, np.int64).ravel()
    is_src = np.zeros(n, bool)
    is_src[roots] = True
    dem = np.asarray(demand_lps, float)
    sw = np.ones(n) if site_weight is None else np.asarray(site_weight, float)
    sw = np.where(is_src, 0.0, sw)
    dem_b = np.where(is_src, 0.0, dem)
    forbidden = np.asarray(forbidden, np.int64).ravel()
    forced = np.asarray(forced, np.int64).ravel()
    w[forbidden] = np.inf
    ms = _BIG if limits.max_branch_sites is None else limits.max_branch_sites
    mf = np.inf if limits.max_branch_flow_lps is None else limits.max_branch_flow_lps
    md = _BIG if limits.max_links_per_node is None else limits.max_links_per_node
    cap = np.full(n, np.inf)
    for s, c in limits.source_capacity_lps.items():
        cap[int(s)] = float(c)
    tol = 1e-9
    _precheck(n, e, w, roots, is_src, sw, dem_b, ms, mf, md, cap, limits, ids)

    # Prim's tree (with the forced and forbidden links) is optimal when it keeps the limits
    from .constraints import constrained_tree
    try:
        free, _ = constrained_tree(n, e, w, forced=forced, forbidden=forbidden, roots=roots,
                                   node_id=ids, certify=False)
    except DisconnectedError:
        free = None
    if free is not None and not limit_violations(free, e, dem_b, limits, site_weight=sw,
                                                 node_id=ids):
        return free, {"esau_williams_cost": float("nan"), "cost": free.weight, "n_joins": 0,
                      "n_exchanges": 0, "joins": [], "prim_within_limits": True,
                      "prim_cost": free.weight}
    st = _State(n, is_src, sw, dem_b)
    st.costs = w
    st.vdist = _source_distance(n, e, w, roots)
    fin = np.isfinite(w)
    st.cang = np.zeros(n, bool)         # the component has a candidate link to a source
    st.cang[e[fin & is_src[e[:, 1]], 0]] = True
    st.cang[e[fin & is_src[e[:, 0]], 1]] = True
    st.gate_cost[:] = np.where(is_src, np.inf, st.vdist)
    ok = np.isfinite(w) & (e[:, 0] != e[:, 1])
    A = np.concatenate([e[ok, 0], e[ok, 1]])          # both orientations: a joins via b
    B = np.concatenate([e[ok, 1], e[ok, 0]])
    K = np.concatenate([np.flatnonzero(ok), np.flatnonzero(ok)])
    C = w[K]
    lo_ab, hi_ab = np.minimum(A, B), np.maximum(A, B)
    _initial_gates(st, A, B, K, C, is_src, md, cap)
    for k in forced.tolist():
        _force(st, e, w, k, is_src, ms, mf, md, cap, ids, limits)

    joins, n_joins = [], 0
    for _ in range(4 * n + 100):
        ca = np.where(is_src[A], -1, st.comp[A])
        cb = np.where(is_src[B], -1, st.comp[B])
        movable = (ca >= 0) & ~st.fixed[np.maximum(ca, 0)]
        ga = st.gate_cost[np.maximum(ca, 0)]
        gn = st.gate_node[np.maximum(ca, 0)]
        da = st.deg[A] + 1 - ((gn == A) & (st.gate[np.maximum(ca, 0)] >= 0))
        t = C - ga
        sa = st.src[np.maximum(ca, 0)]
        fa = st.flow[np.maximum(ca, 0)]
        join = movable & (cb >= 0) & (ca != cb)
        cbs = np.maximum(cb, 0)
        sb = np.where(is_src[B], B, st.src[cbs])
        new_size = st.size[np.maximum(ca, 0)] + st.size[cbs]
        new_flow = fa + st.flow[cbs]
        fit_join = join & (new_size <= ms) & (new_flow <= mf + tol)
        # a join into a component with no gate keeps no gate: only between gateless parts,
        # and only while the result can still take a site or itself reaches a source
        b_open = st.gate[cbs] < 0
        a_open = st.gate[np.maximum(ca, 0)] < 0
        reach = st.cang[np.maximum(ca, 0)] | st.cang[cbs]
        fit_join &= ~b_open | (a_open & (reach | ((new_size < ms) & (new_flow < mf - tol))))
        regate = movable & is_src[B] & (B != sa)
        fit_regate = regate & (st.size[np.maximum(ca, 0)] <= ms) & (fa <= mf + tol)
        other_src = (sb >= 0) & (sb != sa)
        room = ~other_src | (st.load[np.maximum(sb, 0)] + fa <= cap[np.maximum(sb, 0)] + tol)
        db = st.deg[B] + 1
        deg_ok = (da <= md) & (db <= md)
        feas = (fit_join | fit_regate) & room & deg_ok
        press = _pressured(st, md, cap, tol)
        need = press[np.maximum(ca, 0)] & movable
        # a pressured component gains nothing by joining another one fed by the same
        # overloaded source: such a join must leave the source
        src_over = (sa >= 0) & ((st.load[np.maximum(sa, 0)] > cap[np.maximum(sa, 0)] + tol))
        helpful = ~src_over | (sb != sa)
        cand = feas & (t < -tol)
        if not cand.any():
            cand = feas & need & helpful
            if not cand.any():
                break
        idx = np.flatnonzero(cand)
        key = np.lexsort((K[idx], hi_ab[idx], lo_ab[idx], C[idx], t[idx]))
        j = int(idx[key[0]])
        a, b, k = int(A[j]), int(B[j]), int(K[j])
        if len(joins) < 50:
            joins.append((a, b, float(t[j])))
        n_joins += 1
        if is_src[b]:
            _set_gate(st, int(ca[j]), k, a, b)
        else:
            _join(st, int(ca[j]), int(cb[j]), k, a, b)
    press = _pressured(st, md, cap, tol)
    heads = np.unique(st.comp[~is_src])
    bad = [h for h in heads.tolist() if press[h]]
    if bad:
        raise _limit_error(st, bad[0], A, B, is_src, ms, mf, md, cap, limits, ids, len(bad))
    links = np.array(sorted(st.links + [int(st.gate[h]) for h in heads.tolist()]), np.int64)
    tree = tree_from_links(n, e, links, roots, w)
    ew_cost = tree.weight
    n_ex = 0
    if improve:
        tree, n_ex = _exchange(tree, e, w, is_src, sw, dem_b, ms, mf, md, cap, forced, tol,
                               max_exchange_passes)
    return tree, {"esau_williams_cost": ew_cost, "cost": tree.weight, "n_joins": n_joins,
                  "n_exchanges": n_ex, "joins": joins, "prim_within_limits": False,
                  "prim_cost": float("nan") if free is None else free.weight}


def _pressured(st, md, cap, tol):
    """Components that must move: no gate, or fed by a source over its capacity or links."""
    n = st.comp.shape[0]
    p = np.zeros(n, bool)
    heads = np.flatnonzero(st.comp == np.arange(n))
    s = st.src[heads]
    over = np.zeros(len(heads), bool)
    has = s >= 0
    over[has] = (st.load[s[has]] > cap[s[has]] + tol) | (st.deg[s[has]] > md)
    p[heads] = (st.gate[heads] < 0) | over
    return p


def _set_gate(st, c, k, a, s):
    if st.gate[c] >= 0:
        st.deg[st.gate_node[c]] -= 1
        st.deg[st.src[c]] -= 1
        st.load[st.src[c]] -= st.flow[c]
    st.gate[c], st.gate_node[c], st.src[c] = k, a, s
    st.gate_cost[c] = -np.inf if st.fixed[c] else _cost_of(st, k)
    st.deg[a] += 1
    st.deg[s] += 1
    st.load[s] += st.flow[c]


def _cost_of(st, k):
    return st.costs[k]


def _join(st, ci, cj, k, a, b):
    """Join component ci to component cj through link k = (a in ci, b in cj); ci's gate goes."""
    if st.gate[ci] >= 0:
        st.deg[st.gate_node[ci]] -= 1
        st.deg[st.src[ci]] -= 1
        st.load[st.src[ci]] -= st.flow[ci]
    if st.src[cj] >= 0:
        st.load[st.src[cj]] += st.flow[ci]
    st.deg[a] += 1
    st.deg[b] += 1
    st.comp[st.comp == ci] = cj
    st.vdist[cj] = min(st.vdist[cj], st.vdist[ci])
    st.cang[cj] |= st.cang[ci]
    if st.gate[cj] < 0:         # no gate yet: priced by the cheapest path to a source
        st.gate_cost[cj] = st.vdist[cj]
    st.size[cj] += st.size[ci]
    st.flow[cj] += st.flow[ci]
    st.links.append(k)


def _source_distance(n, e, w, roots):
    """Cheapest path price from every node to its nearest source (Dijkstra, scipy)."""
    from scipy.sparse.csgraph import dijkstra

    ok = np.isfinite(w)
    # scipy reads a stored 0 as no link: shift every weight by a tiny amount
    g = csr_matrix((w[ok] + 1e-12, (e[ok, 0], e[ok, 1])), shape=(n, n))
    d = dijkstra(g, directed=False, indices=np.asarray(roots), min_only=True)
    return np.asarray(d, float)


def _initial_gates(st, A, B, K, C, is_src, md, cap):
    """Each node's gate: its cheapest candidate link to a source (ties: lower indices)."""
    m = is_src[B] & ~is_src[A]
    if not m.any():
        return
    idx = np.flatnonzero(m)
    order = idx[np.lexsort((K[idx], B[idx], C[idx], A[idx]))]
    first = np.ones(len(order), bool)
    first[1:] = A[order][1:] != A[order][:-1]
    for j in order[first].tolist():
        a, s = int(A[j]), int(B[j])
        st.gate[a], st.gate_node[a], st.src[a] = int(K[j]), a, s
        st.gate_cost[a] = C[j]
        st.deg[a] += 1
        st.deg[s] += 1
        st.load[s] += st.flow[a]


def _force(st, e, w, k, is_src, ms, mf, md, cap, ids, limits):
    a, b = int(e[k, 0]), int(e[k, 1])
    if is_src[a] or is_src[b]:
        s, v = (a, b) if is_src[a] else (b, a)
        c = st.comp[v]
        st.fixed[c] = True
        _set_gate(st, c, k, v, s)
        return
    ca, cb = st.comp[a], st.comp[b]
    keep, drop = (ca, cb) if st.gate_cost[ca] <= st.gate_cost[cb] else (cb, ca)
    x, y = (b, a) if drop == cb else (a, b)
    if st.fixed[drop] and st.fixed[keep]:
        raise InputError(f"forced links join the sources of sites {ids[a]} and {ids[b]}; drop "
                         "one of the forced links between them")
    if st.fixed[drop]:
        keep, drop, x, y = drop, keep, y, x
    if st.size[keep] + st.size[drop] > ms or st.flow[keep] + st.flow[drop] > mf + 1e-9:
        members = np.flatnonzero((st.comp == keep) | (st.comp == drop))
        raise InputError(f"the forced links make one branch of {len(members)} sites "
                         f"({', '.join(ids[v] for v in members[:8])}) beyond the limits "
                         f"{limits.text(ids)}; force fewer links or raise the limit")
    _join(st, drop, keep, k, x, y)


def _precheck(n, e, w, roots, is_src, sw, dem, ms, mf, md, cap, limits, ids):
    """Limits no tree can meet, each named with its sites."""
    big = np.flatnonzero(dem > mf + 1e-9)
    if big.size:
        v = int(big[0])
        raise InputError(f"limit max_branch_flow_lps={limits.max_branch_flow_lps:g} cannot be "
                         f"met: site {ids[v]} alone needs {dem[v]:g} L/s"
                         + (f" (and {big.size - 1} more sites)" if big.size > 1 else "")
                         + "; raise the limit or split the site's demand")
    if md < _BIG and n > 2 and md < 2:
        raise InputError(f"limit max_links_per_node={limits.max_links_per_node} cannot be met: a "
                         f"tree of {n} nodes needs a node with 2 links; give at least 2")
    if limits.source_capacity_lps:
        total = float(dem.sum())
        c_all = float(np.sum(cap[roots]))
        if total > c_all + 1e-9:
            srcs = ", ".join(f"{ids[s]} {cap[s]:g}" for s in roots.tolist())
            raise InputError(f"limit source_capacity_lps cannot be met: the sites need "
                             f"{total:g} L/s in all but the sources supply {c_all:g} L/s "
                             f"({srcs}); raise a capacity or add a source")
    if ms < _BIG or md < _BIG:
        fin = np.isfinite(w)
        src_links = {}
        for s in roots.tolist():
            touch = fin & ((e[:, 0] == s) | (e[:, 1] == s))
            nb = np.unique(np.where(e[touch, 0] == s, e[touch, 1], e[touch, 0]))
            src_links[s] = int(np.count_nonzero(~is_src[nb]))
        branches = sum(min(v, md) for v in src_links.values())
        if ms < _BIG and branches * ms < sw.sum():
            srcs = ", ".join(f"{ids[s]} {min(v, md)}" for s, v in src_links.items())
            raise InputError(f"limit max_branch_sites={limits.max_branch_sites} cannot be met: "
                             f"{sw.sum():g} sites need at least {int(np.ceil(sw.sum() / ms))} "
                             f"branches but the sources have {branches} usable candidate links "
                             f"({srcs}); raise the limit, add candidate links at the sources "
                             "(--candidates delaunay+knn) or add a source")


def _limit_error(st, h, A, B, is_src, ms, mf, md, cap, limits, ids, n_bad):
    members = np.flatnonzero(st.comp == h)
    who = ", ".join(ids[v] for v in members[:8]) + (" ..." if len(members) > 8 else "")
    s = int(st.src[h])
    if st.gate[h] < 0:
        why = "reach no source"
    elif st.load[s] > cap[s] + 1e-9:
        why = (f"overload source {ids[s]} ({st.load[s]:g} L/s against source_capacity_lps="
               f"{cap[s]:g})")
    else:
        why = f"give source {ids[s]} {st.deg[s]} links (max_links_per_node={md})"
    return InputError(f"limits cannot be met ({limits.text(ids)}): the branch of sites {who} "
                      f"({st.size[h]:g} sites, {st.flow[h]:g} L/s) would {why}, and every other "
                      f"way to join it breaks a limit"
                      + (f" ({n_bad} branches in all)" if n_bad > 1 else "")
                      + "; raise the limits, add candidate links (--candidates delaunay+knn) "
                      "or add a source")


def _rooted(tree, n):
    """DFS preorder position, subtree size, branch head and source of every node."""
    order = np.asarray(tree.order)
    parent = np.asarray(tree.parent)
    # the order of tree_from_links is a DFS preorder: subtrees are contiguous
    pos = np.empty(n, np.int64)
    pos[order] = np.arange(n)
    size = np.ones(n, np.int64)
    for v in order[::-1].tolist():
        p = parent[v]
        if p >= 0:
            size[p] += size[v]
    branch = np.full(n, -1, np.int64)
    src = np.empty(n, np.int64)
    for v in order.tolist():
        p = parent[v]
        if p < 0:
            src[v] = v
        else:
            src[v] = src[p]
            branch[v] = v if parent[p] < 0 else branch[p]
    return pos, size, branch, src


def _sub_sums(tree, vals):
    out = np.asarray(vals, float).copy()
    for v in np.asarray(tree.order)[::-1].tolist():
        p = tree.parent[v]
        if p >= 0:
            out[p] += out[v]
    return out


def _exchange(tree, e, w, is_src, sw, dem, ms, mf, md, cap, forced, tol, max_passes):
    """Link exchange: drop a tree link, add the cheapest non-tree link rejoining the parts
    within every limit, while the cost falls (first improvement, nodes in tree order)."""
    n = tree.n_nodes
    roots = np.asarray(tree.roots)
    fin = np.flatnonzero(np.isfinite(w))
    ea, eb, ew = e[fin, 0], e[fin, 1], w[fin]
    fset = np.zeros(len(w), bool)
    fset[forced] = True
    n_ex = 0
    for _ in range(max_passes):
        improved = False
        for v in np.asarray(tree.order).tolist():
            p = int(tree.parent[v])
            k_old = int(tree.parent_edge[v])
            if p < 0 or fset[k_old]:
                continue
            pos, size, branch, src = _rooted(tree, n)
            deg = np.bincount(e[tree.tree_edges].ravel(), minlength=n)
            in_sub = (pos >= pos[v]) & (pos < pos[v] + size[v])
            cross = in_sub[ea] != in_sub[eb]
            delta = ew - w[k_old]
            cand = np.flatnonzero(cross & (delta < -tol))
            if not cand.size:
                continue
            x = np.where(in_sub[ea[cand]], ea[cand], eb[cand])      # end inside the subtree
            y = np.where(in_sub[ea[cand]], eb[cand], ea[cand])      # end outside
            s_sites = _sub_sums(tree, sw)[v]
            s_flow = _sub_sums(tree, dem)[v]
            br_sites = _branch_totals(branch, sw, n)
            br_flow = _branch_totals(branch, dem, n)
            s_old = src[v]
            same_branch = ~is_src[y] & (branch[np.maximum(y, 0)] == branch[v])
            by = branch[y]
            new_sites = np.where(is_src[y], s_sites, br_sites[np.maximum(by, 0)] + s_sites)
            new_flow = np.where(is_src[y], s_flow, br_flow[np.maximum(by, 0)] + s_flow)
            fits = same_branch | ((new_sites <= ms) & (new_flow <= mf + tol))
            sy = np.where(is_src[y], y, src[y])
            load = _source_loads(tree, src, dem, n)
            room = (sy == s_old) | (load[sy] + s_flow <= cap[sy] + tol)
            dx = deg[x] + 1 - (x == v)
            dy = deg[y] + 1 - (y == p)
            ok = fits & room & (dx <= md) & (dy <= md)
            if not ok.any():
                continue
            good = cand[ok]
            key = np.lexsort((fin[good], eb[good], ea[good], ew[good]))
            k_new = int(fin[good[key[0]]])
            links = np.concatenate([tree.tree_edges[tree.tree_edges != k_old], [k_new]])
            tree = tree_from_links(n, e, links, roots, w)
            n_ex += 1
            improved = True
        if not improved:
            break
    return tree, n_ex


def _branch_totals(branch, vals, n):
    out = np.zeros(n)
    m = branch >= 0
    np.add.at(out, branch[m], np.asarray(vals, float)[m])
    return out


def _source_loads(tree, src, dem, n):
    out = np.zeros(n)
    np.add.at(out, src, np.asarray(dem, float))
    return out
