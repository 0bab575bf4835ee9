"""Forced and forbidden links: the cheapest tree that keeps some links and never uses others.

A *forced* link (a road crossing already sleeved, a main the owner insists on) is always in
the tree; a *forbidden* link (a neighbour refuses access) never is.  Both come as pairs of
site ids (:func:`link_pairs`) or as a line layer whose ends lie on sites
(:func:`read_link_layer`).

:func:`constrained_tree` contracts every group of nodes joined by forced links into one node,
runs the unchanged Prim (:func:`mainspan.graph.spanning.prim_tree`) on the contracted graph
with the forbidden links removed, and maps the result back.  A spanning tree contains the
forced links F iff it is F plus a spanning tree of the contracted graph, so the result is the
minimum among the trees containing F and avoiding the forbidden links, and the optimality
certificate (cycle property, :func:`mainspan.graph.spanning.certify_tree`) is stated on the
contracted graph: relative to the forced links.  Links inside one forced group (they would
close a cycle with forced links) are left out of the contracted graph.

With no forced link the contraction is the identity (each node its own group, numbered as
before) and the tree is exactly Prim's tree.

References
----------
.. [1] R. C. Prim, "Shortest connection networks and some generalizations", Bell System
   Technical Journal 36(6):1389-1401, 1957.
.. [2] Cormen, Leiserson, Rivest & Stein, Introduction to Algorithms, 3rd ed., §23.1
   (contracting the edges of a safe set; from memory for the section number).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from ..errors import DisconnectedError, InputError
from .spanning import Tree, certify_tree, prim_tree

__all__ = ["LinkRules", "link_pairs", "read_link_layer", "add_links", "constrained_tree",
           "forced_groups"]


@dataclass(frozen=True)
class LinkRules:
    """Forced and forbidden links as node-index pairs (each row ``i < j``)."""

    forced: np.ndarray
    forbidden: np.ndarray

    @property
    def empty(self) -> bool:
        return not (len(self.forced) or len(self.forbidden))


def _norm_pairs(p):
    p = np.asarray(p, dtype=np.int64).reshape(-1, 2)
    return np.sort(p, axis=1)


def link_pairs(node_id, pairs, *, option="--force") -> np.ndarray:
    """Node-index pairs (k, 2), ``i < j``, from site-id pairs.

    Parameters
    ----------
    node_id : sequence of str
        The site ids, in node order.
    pairs : sequence
        Each item a pair ``(id_a, id_b)`` or a text ``"id_a:id_b"`` (or ``"id_a,id_b"``).
    option : str
        The option or key named in messages.

    Examples
    --------
    >>> link_pairs(["S", "a", "b"], ["a:S", ("b", "a")]).tolist()
    [[0, 1], [1, 2]]
    """
    ids = [str(v) for v in node_id]
    lookup = {k: i for i, k in enumerate(ids)}
    out = []
    for item in pairs or ():
        if isinstance(item, str):
            parts = [t.strip() for t in item.split(":" if ":" in item else ",")]
        else:
            parts = [str(t).strip() for t in item]
        if len(parts) != 2 or not all(parts):
            raise InputError(f"option {option}: each link must be two site ids as 'ID1:ID2', "
                             f"got {item!r}; give e.g. {option} {ids[0]}:{ids[-1]}")
        a, b = parts
        for v in (a, b):
            if v not in lookup:
                raise InputError(f"option {option}: site id {v!r} (link {a}:{b}) is not among "
                                 f"the {len(ids)} sites (ids look like: "
                                 f"{', '.join(ids[:5])}); give existing ids")
        if a == b:
            raise InputError(f"option {option}: link {a}:{b} joins a site to itself; give two "
                             "different site ids")
        out.append((lookup[a], lookup[b]))
    if not out:
        return np.zeros((0, 2), dtype=np.int64)
    p = _norm_pairs(out)
    return np.unique(p, axis=0)


def read_link_layer(path, node_id, xy, crs, *, layer=None, snap_m=1.0,
                    option="--force-layer") -> np.ndarray:
    """Node-index pairs from a line layer whose two ends lie on sites.

    Each feature is a (multi)line string; its first and last points must lie within
    ``snap_m`` of a site (in the working CRS); the pair of those sites is the link.

    Raises
    ------
    InputError
        Wrong geometry type, no CRS, an end that lies on no site, or both ends on one site;
        the message names the file, the feature and the fix.
    """
    import geopandas as gpd
    import shapely

    from ..errors import DataFileError

    try:
        df = gpd.read_file(path, layer=layer)
    except Exception as exc:  # noqa: BLE001 - any reader failure is the file's
        raise DataFileError(f"option {option}: cannot read {str(path)!r}: "
                            f"{str(exc).splitlines()[0]}; give a line layer (GeoPackage, "
                            "Shapefile, GeoJSON)") from None
    where = f"option {option}: {str(path)!r}" + (f" layer {layer!r}" if layer else "")
    if df.crs is None:
        raise InputError(f"{where} has no CRS; set the layer's CRS in a GIS and save it again")
    geoms = df.geometry.values
    types = set(shapely.get_type_id(np.asarray(geoms)).tolist()) if len(df) else set()
    if types - {1, 5}:
        kinds = sorted(set(df.geometry.geom_type.astype(str)))
        raise InputError(f"{where}: expected LineString features, got {', '.join(kinds)}; "
                         "draw each link as a line from one site to another")
    df = df.to_crs(crs)
    tree_xy = np.asarray(xy, float)
    from scipy.spatial import cKDTree
    kd = cKDTree(tree_xy)
    ids = [str(v) for v in node_id]
    out = []
    for f, g in enumerate(df.geometry.values):
        c = shapely.get_coordinates(g)
        if len(c) < 2:
            raise InputError(f"{where}: feature {f} is empty or a single point; draw the link as "
                             "a line between two sites")
        ends = np.array([c[0], c[-1]])
        d, i = kd.query(ends)
        if (d > snap_m).any():
            k = int(np.argmax(d > snap_m))
            raise InputError(f"{where}: feature {f} {'starts' if k == 0 else 'ends'} "
                             f"{float(d[k]):.2f} m from the nearest site ({ids[int(i[k])]}), more "
                             f"than {snap_m:g} m; snap the line's ends to the sites")
        if i[0] == i[1]:
            raise InputError(f"{where}: feature {f} starts and ends at site {ids[int(i[0])]}; "
                             "a link must join two different sites")
        out.append((int(i[0]), int(i[1])))
    if not out:
        return np.zeros((0, 2), dtype=np.int64)
    return np.unique(_norm_pairs(out), axis=0)


def add_links(edges, pairs):
    """Candidate links with *pairs* added (kept ``i < j``, sorted and unique).

    Returns
    -------
    (edges, index, added) : the new edges, the index of each pair in them, and a boolean
    mask of the new edges that were not candidates before.

    Examples
    --------
    >>> e, idx, added = add_links(np.array([[0, 1], [1, 2]]), np.array([[0, 2]]))
    >>> e.tolist(), idx.tolist(), added.tolist()
    ([[0, 1], [0, 2], [1, 2]], [1], [False, True, False])
    """
    e = np.asarray(edges, np.int64).reshape(-1, 2)
    p = _norm_pairs(pairs)
    both = np.concatenate([e, p])
    key_new = np.concatenate([np.zeros(len(e), bool), np.ones(len(p), bool)])
    # unique rows, old rows first so an existing candidate keeps its identity
    uniq, first = np.unique(both, axis=0, return_index=True)
    added = key_new[first]
    lookup = {(int(a), int(b)): k for k, (a, b) in enumerate(uniq)}
    idx = np.array([lookup[(int(a), int(b))] for a, b in p], dtype=np.int64)
    return uniq.astype(np.int64), idx, added


def _find(uf, a):
    while uf[a] != a:
        uf[a] = uf[uf[a]]
        a = uf[a]
    return a


def _forest_path(adj, a, b):
    """Node path from a to b in a forest given as adjacency lists (a and b connected)."""
    prev = {a: -1}
    todo = [a]
    while todo:
        u = todo.pop()
        if u == b:
            break
        for v in adj.get(u, ()):
            if v not in prev:
                prev[v] = u
                todo.append(v)
    path = [b]
    while prev[path[-1]] != -1:
        path.append(prev[path[-1]])
    return path[::-1]


def forced_groups(n_nodes, edges, forced, *, node_id=None):
    """Group label of every node: nodes joined by forced links share one label.

    Labels are numbered by the lowest node of each group, so with no forced link the
    label of node i is i.  Forced links that close a cycle are an error naming its sites.
    """
    ids = [str(v) for v in (node_id if node_id is not None else range(n_nodes))]
    e = np.asarray(edges, np.int64)
    uf = np.arange(n_nodes, dtype=np.int64)
    adj = {}
    for k in np.asarray(forced, np.int64):
        a, b = int(e[k, 0]), int(e[k, 1])
        ra, rb = _find(uf, a), _find(uf, b)
        if ra == rb:
            cyc = _forest_path(adj, a, b) + [a]
            raise InputError(f"forced links close a cycle {'-'.join(ids[v] for v in cyc)}; a "
                             "tree cannot hold them all: drop one of these forced links")
        uf[max(ra, rb)] = min(ra, rb)
        adj.setdefault(a, []).append(b)
        adj.setdefault(b, []).append(a)
    rep = np.array([_find(uf, a) for a in range(n_nodes)], dtype=np.int64)
    # rank groups by their lowest node (the union keeps the lowest node as representative)
    is_rep = rep == np.arange(n_nodes)
    rank = np.cumsum(is_rep) - 1
    return rank[rep].astype(np.int64)


def constrained_tree(n_nodes, edges, weights, *, forced=(), forbidden=(), roots=(0,),
                     allow_forest=False, node_id=None, certify=True):
    """Minimum spanning tree (or forest) that holds every forced link and no forbidden one.

    Parameters
    ----------
    n_nodes : int
    edges : array_like of int, shape (m, 2)
        Candidate links (as for :func:`~mainspan.graph.spanning.prim_tree`).
    weights : array_like of float, shape (m,)
        Link prices; ``inf`` is impassable.
    forced, forbidden : array_like of int
        Indices into *edges* of the links that must be in the tree / may not be.
    roots : sequence of int, default=(0,)
    allow_forest : bool, default=False
    node_id : sequence of str, optional
        Site ids for messages.
    certify : bool, default=True
        Also prove the result minimum among the trees containing the forced links.

    Returns
    -------
    (Tree, Certificate or None)
        The tree over the original nodes and link indices; ``Tree.weight`` includes the
        forced links.  The certificate checks the cycle property on the contracted graph:
        it proves the tree minimum among all spanning trees that contain the forced links
        and avoid the forbidden ones.

    Raises
    ------
    InputError
        A link both forced and forbidden, an impassable forced link, forced links closing a
        cycle, or forced links joining two roots.
    DisconnectedError
        The links left after removing the forbidden ones do not connect every node to a root.

    Examples
    --------
    >>> e = np.array([[0, 1], [1, 2], [0, 2], [2, 3]])
    >>> w = np.array([1.0, 2.0, 2.5, 0.5])
    >>> t, cert = constrained_tree(4, e, w, forced=[2])
    >>> sorted(t.tree_edges.tolist()), t.weight, cert.ok
    ([0, 2, 3], 4.0, True)
    >>> t, _ = constrained_tree(4, e, w, forbidden=[0])
    >>> sorted(t.tree_edges.tolist()), t.weight
    ([1, 2, 3], 5.0)
    """
    e = np.asarray(edges, np.int64).reshape(-1, 2)
    w = np.array(weights, dtype=np.float64, copy=True)
    n = int(n_nodes)
    ids = [str(v) for v in (node_id if node_id is not None else range(n))]
    forced = np.unique(np.asarray(forced, np.int64).ravel())
    forbidden = np.unique(np.asarray(forbidden, np.int64).ravel())
    for name, arr in (("forced", forced), ("forbidden", forbidden)):
        if arr.size and (arr.min() < 0 or arr.max() >= len(e)):
            raise InputError(f"{name} link index out of range 0..{len(e) - 1}: pass indices "
                             "into the candidate links")
    both = np.intersect1d(forced, forbidden)
    if both.size:
        k = int(both[0])
        raise InputError(f"link {ids[e[k, 0]]},{ids[e[k, 1]]} is both forced and forbidden; "
                         "keep it in one of the two lists")
    bad = forced[~np.isfinite(w[forced])] if forced.size else forced
    if bad.size:
        k = int(bad[0])
        raise InputError(f"forced link {ids[e[k, 0]]},{ids[e[k, 1]]} is impassable (it crosses "
                         "a barrier or nodata); route it elsewhere or drop it from the forced "
                         "links")
    roots = np.asarray(roots, np.int64).ravel()
    if not forced.size and not forbidden.size:
        tree = prim_tree(n, e, w, roots=roots, allow_forest=allow_forest)
        return tree, (certify_tree(n, e, w, tree) if certify else None)

    label = forced_groups(n, e, forced, node_id=ids)
    nc = int(label.max()) + 1 if n else 0
    rl = label[roots]
    if np.unique(rl).size < rl.size:
        seen = {}
        for r, c in zip(roots.tolist(), rl.tolist()):
            if c in seen:
                raise InputError(f"forced links join the roots {ids[seen[c]]} and {ids[r]}; each "
                                 "root feeds its own tree: drop a forced link on the path "
                                 "between them")
            seen[c] = r
    w[forbidden] = np.inf
    cu, cv = label[e[:, 0]], label[e[:, 1]]
    keep = np.flatnonzero((cu != cv) & np.isfinite(w))
    sub = np.column_stack([cu[keep], cv[keep]])
    try:
        tc = prim_tree(nc, sub, w[keep], roots=rl, allow_forest=allow_forest)
    except DisconnectedError as exc:
        lab = np.asarray(exc.components)[label]
        msg = str(exc).split(";")[0].replace("nodes", "groups of sites joined by forced links")
        raise DisconnectedError(
            f"{msg}; without the {forbidden.size} forbidden link(s) some sites reach no root: "
            f"forbid fewer links, add candidate links, or allow a forest",
            components=lab) from None
    cert = None
    if certify:
        cert = certify_tree(nc, sub, w[keep], tc)
        cert = replace(cert, method=(f"{cert.method}, on the graph with the {forced.size} forced "
                                     f"link(s) contracted and {forbidden.size} forbidden "
                                     "link(s) removed: minimum among trees holding the forced "
                                     "links"))
    tree = _expand(n, e, w, label, keep, tc, forced, roots)
    return tree, cert


def _expand(n, e, w, label, keep, tc, forced, roots):
    """Map a tree over forced groups back to the nodes: each group is entered at the end
    of its tree link (or at its root) and walked breadth-first along its forced links."""
    members_adj = [[] for _ in range(n)]
    for k in forced.tolist():
        a, b = int(e[k, 0]), int(e[k, 1])
        members_adj[a].append((b, k))
        members_adj[b].append((a, k))
    for lst in members_adj:
        lst.sort()
    parent = np.full(n, -1, dtype=np.int64)
    parent_edge = np.full(n, -1, dtype=np.int64)
    order = []
    # the lowest node of a group (its representative) roots a group added by allow_forest
    first = np.full(int(label.max()) + 1, n, dtype=np.int64)
    np.minimum.at(first, label, np.arange(n, dtype=np.int64))
    root_of_group = {int(label[r]): int(r) for r in roots.tolist()}
    out_roots = []
    for c in np.asarray(tc.roots).tolist():
        out_roots.append(root_of_group.get(c, int(first[c])))
    entry_of = {int(label[r]): r for r in out_roots}
    for c in np.asarray(tc.order).tolist():
        kc = int(tc.parent_edge[c])
        if kc < 0:
            start = entry_of[c]
        else:
            k = int(keep[kc])
            a, b = int(e[k, 0]), int(e[k, 1])
            start, other = (a, b) if label[a] == c else (b, a)
            parent[start] = other
            parent_edge[start] = k
        order.append(start)
        h = len(order) - 1
        seen_root = start
        while h < len(order):
            u = order[h]
            h += 1
            for v, k in members_adj[u]:
                if v != seen_root and parent_edge[v] < 0 and v != parent[u]:
                    parent[v] = u
                    parent_edge[v] = k
                    order.append(v)
    order = np.asarray(order, dtype=np.int64)
    root_of = np.empty(n, dtype=np.int64)
    for v in order.tolist():
        root_of[v] = v if parent[v] < 0 else root_of[parent[v]]
    pe = parent_edge[parent_edge >= 0]
    weight = float(np.sum(w[np.sort(pe)])) if pe.size else 0.0
    for a in (parent, parent_edge, order, root_of):
        a.setflags(write=False)
    return Tree(parent=parent, parent_edge=parent_edge, order=order,
                roots=np.asarray(out_roots, dtype=np.int64), root_of=root_of,
                weight=weight if math.isfinite(weight) else weight)
