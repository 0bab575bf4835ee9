"""Rooted tree of mains: orientation, order, flow accumulation and paths.

The spanning stage hands over a forest as plain link arrays.  This module
orients every link away from its root (the source of a pressure system or
the outlet of a gravity system), numbers the nodes in breadth-first order
from the roots, and offers the tree walks the engineering checks need:
subtree sums (flows), cumulative sums along the path to the root (head loss,
cost), paths and subtrees.

Conventions
-----------
* A link joins ``from_node`` (the end nearer the root) and ``to_node`` (the
  child).  :func:`rooted_network` accepts links in either direction and
  records which ones it turned round in ``RootedNetwork.reversed``.
* The *subtree* of a link is the child's subtree: the nodes fed through the
  link in a pressure system, or draining through it in a gravity system.
* Every loop over nodes is a compiled (numba) pass in ``order`` or in
  reverse ``order``; nothing is per-node Python.

References
----------
.. [1] Cormen, Leiserson, Rivest & Stein, *Introduction to Algorithms*,
   3rd ed., MIT Press, 2009, §22.2 (breadth-first search) and §22.3
   (depth-first search, discovery intervals).
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np

from ..errors import InputError

__all__ = [
    "RootedNetwork",
    "rooted_network",
    "accumulate",
    "design_flow_lps",
    "clement_flow_lps",
    "hops_to_root",
    "cost_to_root",
    "path_to_root",
    "longest_path",
    "upstream_nodes",
    "FLOW_FROM_TO",
    "FLOW_TO_FROM",
]

#: Flow runs from the root outward (pressure mains fed by a source).
FLOW_FROM_TO = "from→to"
#: Flow runs towards the root (gravity mains draining to an outlet).
FLOW_TO_FROM = "to→from"


@dataclass(frozen=True)
class RootedNetwork:
    """A forest of links oriented away from its roots.

    Attributes
    ----------
    n_nodes : int
        Number of nodes.
    from_node, to_node : ndarray of int64, shape (L,)
        Link ends after orientation: ``from_node`` is the parent (nearer the
        root), ``to_node`` the child.
    reversed : ndarray of bool, shape (L,)
        True where the link was given the other way round.
    roots : ndarray of int64
        Root nodes, as given.
    parent : ndarray of int64, shape (n,)
        Parent node, -1 at roots.
    parent_link : ndarray of int64, shape (n,)
        Index of the link joining a node to its parent, -1 at roots.
    order : ndarray of int64, shape (n,)
        Breadth-first order from the roots (roots first, in the order given;
        every parent before its children; children by ascending node index).
    hops_to_root : ndarray of int64, shape (n,)
        Number of links between a node and its root.
    children_offsets : ndarray of int64, shape (n + 1,)
    children : ndarray of int64, shape (L,)
        Children of node ``v`` are ``children[children_offsets[v]:children_offsets[v+1]]``
        (ascending).
    root_of : ndarray of int64, shape (n,)
        Root of each node's tree.
    preorder : ndarray of int64, shape (n,)
        Depth-first preorder; the subtree of ``v`` is the contiguous slice
        ``preorder[pre_index[v]:pre_index[v] + subtree_size[v]]``.
    pre_index, subtree_size : ndarray of int64, shape (n,)
    """

    n_nodes: int
    from_node: np.ndarray
    to_node: np.ndarray
    reversed: np.ndarray
    roots: np.ndarray
    parent: np.ndarray
    parent_link: np.ndarray
    order: np.ndarray
    hops_to_root: np.ndarray
    children_offsets: np.ndarray
    children: np.ndarray
    root_of: np.ndarray
    preorder: np.ndarray
    pre_index: np.ndarray
    subtree_size: np.ndarray

    @property
    def n_links(self) -> int:
        """Number of links."""
        return int(self.from_node.shape[0])

    @property
    def link_order(self) -> np.ndarray:
        """Links in root-to-leaf order (the parent link of each node in ``order``)."""
        pl = self.parent_link[self.order]
        return pl[pl >= 0]


@numba.njit(cache=True)
def _bfs(n, adj_off, adj_link, adj_other, roots):  # pragma: no cover - compiled
    parent = np.full(n, -1, np.int64)
    parent_link = np.full(n, -1, np.int64)
    hops = np.full(n, -1, np.int64)
    root_of = np.full(n, -1, np.int64)
    order = np.empty(n, np.int64)
    head = 0
    tail = 0
    for r in roots:
        hops[r] = 0
        root_of[r] = r
        order[tail] = r
        tail += 1
    while head < tail:
        u = order[head]
        head += 1
        for k in range(adj_off[u], adj_off[u + 1]):
            w = adj_other[k]
            if adj_link[k] == parent_link[u]:
                continue
            if hops[w] >= 0:
                # reached twice: a cycle, or two roots in one tree
                return parent, parent_link, order, hops, root_of, tail, w
            hops[w] = hops[u] + 1
            parent[w] = u
            parent_link[w] = adj_link[k]
            root_of[w] = root_of[u]
            order[tail] = w
            tail += 1
    return parent, parent_link, order, hops, root_of, tail, -1


@numba.njit(cache=True)
def _preorder(n, child_off, children, roots):  # pragma: no cover - compiled
    pre = np.empty(n, np.int64)
    pre_index = np.empty(n, np.int64)
    size = np.ones(n, np.int64)
    stack = np.empty(n, np.int64)
    k = 0
    for r in roots:
        top = 0
        stack[top] = r
        top += 1
        while top > 0:
            top -= 1
            u = stack[top]
            pre_index[u] = k
            pre[k] = u
            k += 1
            # push in reverse so the lowest child is visited first
            for j in range(child_off[u + 1] - 1, child_off[u] - 1, -1):
                stack[top] = children[j]
                top += 1
    # subtree sizes: children come after parents in preorder
    for j in range(n - 1, -1, -1):
        u = pre[j]
        for i in range(child_off[u], child_off[u + 1]):
            size[u] += size[children[i]]
    return pre, pre_index, size


def _as_index_array(name, values, n_nodes):
    arr = np.asarray(values)
    if arr.ndim != 1:
        raise InputError(f"network input '{name}' must be a 1-D array of node indices, got shape {arr.shape}; pass one index per entry")
    if arr.size and not np.issubdtype(arr.dtype, np.integer):
        if not np.all(np.isfinite(arr)) or not np.all(arr == np.round(arr)):
            raise InputError(f"network input '{name}' must hold integer node indices, got dtype {arr.dtype}; pass int64 indices")
    arr = arr.astype(np.int64)
    bad = np.flatnonzero((arr < 0) | (arr >= n_nodes))
    if bad.size:
        raise InputError(
            f"network input '{name}' entry {bad[0]} is node {arr[bad[0]]}, outside 0..{n_nodes - 1}; "
            "pass node indices of the site table"
        )
    return arr


def rooted_network(n_nodes, from_node, to_node, *, roots) -> RootedNetwork:
    """Orient a forest of links away from its roots.

    Parameters
    ----------
    n_nodes : int
        Number of nodes.
    from_node, to_node : array_like of int, shape (L,)
        Link ends; either direction is accepted.
    roots : array_like of int
        One root per tree (source or outlet).  Every node must be reached
        from exactly one root, and ``L`` must equal ``n_nodes - len(roots)``.

    Returns
    -------
    RootedNetwork

    Raises
    ------
    InputError
        If the links do not form a forest with one root per tree.

    Examples
    --------
    >>> net = rooted_network(4, [0, 2, 1], [1, 1, 3], roots=[0])
    >>> net.parent.tolist(), net.order.tolist(), net.reversed.tolist()
    ([-1, 0, 1, 1], [0, 1, 2, 3], [False, True, False])
    """
    n = int(n_nodes)
    if n < 1:
        raise InputError(f"network option 'n_nodes' must be >= 1, got {n_nodes}; give at least one node")
    a = _as_index_array("from_node", from_node, n)
    b = _as_index_array("to_node", to_node, n)
    if a.shape != b.shape:
        raise InputError(
            f"network inputs 'from_node' and 'to_node' differ in length ({a.size} vs {b.size}); give one entry per link in each"
        )
    r = _as_index_array("roots", np.atleast_1d(roots), n)
    if r.size == 0:
        raise InputError("network option 'roots' is empty; give the source or outlet node of every tree")
    if np.unique(r).size != r.size:
        raise InputError(f"network option 'roots' repeats a node ({r.tolist()}); give each root once")
    loops = np.flatnonzero(a == b)
    if loops.size:
        raise InputError(f"link {loops[0]} joins node {a[loops[0]]} to itself; drop the link")
    L = a.size
    if L != n - r.size:
        raise InputError(
            f"a forest of {n} nodes and {r.size} root(s) has {n - r.size} links, got {L}; "
            "pass the links of the spanning tree only, one root per tree"
        )
    ends = np.concatenate([a, b])
    other = np.concatenate([b, a])
    link = np.concatenate([np.arange(L), np.arange(L)])
    srt = np.lexsort((other, ends))
    adj_off = np.zeros(n + 1, np.int64)
    np.cumsum(np.bincount(ends, minlength=n), out=adj_off[1:])
    parent, parent_link, order, hops, root_of, reached, clash = _bfs(
        n, adj_off, link[srt].astype(np.int64), other[srt].astype(np.int64), r
    )
    if clash >= 0:
        raise InputError(
            f"node {clash} is reached twice from the roots (a cycle, or two roots in one tree); "
            "pass tree links and one root per tree"
        )
    if reached < n:
        lost = int(np.flatnonzero(hops < 0)[0])
        raise InputError(f"node {lost} is not connected to any root; add a link to it or make it a root")
    # orient every link parent -> child
    child_of_link = np.empty(L, np.int64)
    nonroot = np.flatnonzero(parent_link >= 0)
    child_of_link[parent_link[nonroot]] = nonroot
    new_to = child_of_link
    new_from = parent[new_to]
    rev = new_from != a
    # children CSR, ascending child index within a parent
    by_parent = np.lexsort((new_to, new_from))
    child_off = np.zeros(n + 1, np.int64)
    np.cumsum(np.bincount(new_from, minlength=n), out=child_off[1:])
    children = new_to[by_parent].astype(np.int64)
    pre, pre_index, size = _preorder(n, child_off, children, r)
    return RootedNetwork(
        n_nodes=n,
        from_node=new_from.astype(np.int64),
        to_node=new_to.astype(np.int64),
        reversed=rev,
        roots=r,
        parent=parent,
        parent_link=parent_link,
        order=order,
        hops_to_root=hops,
        children_offsets=child_off,
        children=children,
        root_of=root_of,
        preorder=pre,
        pre_index=pre_index,
        subtree_size=size,
    )


@numba.njit(cache=True)
def _subtree_sums(order, parent, values):  # pragma: no cover - compiled
    acc = values.copy()
    for j in range(order.shape[0] - 1, -1, -1):
        v = order[j]
        p = parent[v]
        if p >= 0:
            acc[p] += acc[v]
    return acc


@numba.njit(cache=True)
def _path_sums(order, parent, parent_link, link_values):  # pragma: no cover - compiled
    out = np.zeros(order.shape[0], np.float64)
    for j in range(order.shape[0]):
        v = order[j]
        p = parent[v]
        if p >= 0:
            out[v] = out[p] + link_values[parent_link[v]]
    return out


def _node_array(net, name, values):
    arr = np.asarray(values, dtype=np.float64)
    if arr.shape != (net.n_nodes,):
        raise InputError(f"'{name}' must have one value per node ({net.n_nodes}), got shape {arr.shape}; pass a node array")
    return arr


def _link_array(net, name, values):
    arr = np.asarray(values, dtype=np.float64)
    if arr.shape != (net.n_links,):
        raise InputError(f"'{name}' must have one value per link ({net.n_links}), got shape {arr.shape}; pass a link array")
    return arr


def accumulate(net: RootedNetwork, node_values) -> np.ndarray:
    """Sum node values over each link's subtree.

    Parameters
    ----------
    net : RootedNetwork
    node_values : array_like of float, shape (n,)
        E.g. demands in L/s.

    Returns
    -------
    ndarray of float64, shape (L,)
        For link ``k`` the sum of ``node_values`` over the subtree of its
        child ``net.to_node[k]`` -- the flow carried by the link, whether it
        runs outward from a source (pressure) or inward to an outlet
        (gravity).

    Examples
    --------
    >>> net = rooted_network(4, [0, 1, 1], [1, 2, 3], roots=[0])
    >>> accumulate(net, [0.0, 1.0, 2.0, 3.0]).tolist()
    [6.0, 2.0, 3.0]
    """
    vals = _node_array(net, "node_values", node_values)
    sub = _subtree_sums(net.order, net.parent, vals)
    return sub[net.to_node]


def design_flow_lps(accumulated, *, peaking_factor=1.0, min_flow_lps=0.0) -> np.ndarray:
    """Design flow of each link from its accumulated demand.

    ``max(peaking_factor * accumulated, min_flow_lps)``.

    Parameters
    ----------
    accumulated : array_like of float
        Accumulated (average) flow per link, L/s.
    peaking_factor : float, default=1.0
        Ratio of design (peak) to average flow, >= 1 in practice.
    min_flow_lps : float, default=0.0
        Floor on the design flow, L/s (so dead-end links still get a pipe
        sized for some flow).

    Examples
    --------
    >>> design_flow_lps([0.0, 2.0], peaking_factor=1.5, min_flow_lps=0.5).tolist()
    [0.5, 3.0]
    """
    if not np.isfinite(peaking_factor) or peaking_factor <= 0:
        raise InputError(f"option 'peaking_factor' must be > 0, got {peaking_factor}; use 1.0 for no peaking")
    if not np.isfinite(min_flow_lps) or min_flow_lps < 0:
        raise InputError(f"option 'min_flow_lps' must be >= 0, got {min_flow_lps}; use 0 for no floor")
    q = np.asarray(accumulated, dtype=np.float64)
    return np.maximum(q * float(peaking_factor), float(min_flow_lps))


def clement_flow_lps(net: RootedNetwork, hydrant_lps, probability, *, quality_u=1.645):
    """On-demand design flow of every link by Clément's first formula.

    For the hydrants ``i`` downstream of a link (its subtree), each of
    nominal discharge ``q_i`` open with probability ``r_i``::

        Q = sum(r_i q_i) + U * sqrt(sum(r_i (1 - r_i) q_i**2))

    capped at ``sum(q_i)`` (every hydrant open), which the formula can exceed
    on links serving only a few hydrants.  Both sums are subtree sums in one
    compiled pass in reverse breadth-first order.

    Parameters
    ----------
    net : RootedNetwork
    hydrant_lps : array_like, shape (n,)
        Nominal hydrant discharge, L/s (0 where there is no hydrant).
    probability : float or array_like, shape (n,)
        Operating probability of each hydrant, 0 < r <= 1.
    quality_u : float, default=1.645
        Standard normal quantile of the quality of operation (1.645: 95 %).

    Returns
    -------
    link_lps : ndarray, shape (L,)
    source_lps : ndarray, shape (len(net.roots),)
        The same formula over every hydrant of each root's tree.

    References
    ----------
    .. [1] R. Clément, "Calcul des débits dans les réseaux d'irrigation
       fonctionnant à la demande", *La Houille Blanche*, 1966 (from memory).

    Examples
    --------
    >>> net = rooted_network(3, [0, 0], [1, 2], roots=[0])
    >>> q, src = clement_flow_lps(net, [0.0, 10.0, 10.0], 0.5, quality_u=1.0)
    >>> q.tolist(), src.round(3).tolist()       # one hydrant: capped at q; two: 10 + sqrt(50)
    ([10.0, 10.0], [17.071])
    """
    q = _node_array(net, "hydrant_lps", hydrant_lps)
    r = np.broadcast_to(np.asarray(probability, dtype=np.float64), q.shape)
    if not np.all((r > 0) & (r <= 1)):
        raise InputError("operating probability must be in (0, 1] for every hydrant; give hours of use / hours available")
    mean = _subtree_sums(net.order, net.parent, r * q)
    var = _subtree_sums(net.order, net.parent, r * (1.0 - r) * q * q)
    full = _subtree_sums(net.order, net.parent, q.copy())
    node = np.minimum(mean + float(quality_u) * np.sqrt(var), full)
    return node[net.to_node], node[net.roots]


def hops_to_root(net: RootedNetwork) -> np.ndarray:
    """Number of links between each node and its root (int64, shape (n,))."""
    return net.hops_to_root.copy()


def cost_to_root(net: RootedNetwork, link_cost) -> np.ndarray:
    """Sum of a link quantity along each node's path to its root.

    Parameters
    ----------
    net : RootedNetwork
    link_cost : array_like of float, shape (L,)

    Returns
    -------
    ndarray of float64, shape (n,)
        0 at roots.

    Examples
    --------
    >>> net = rooted_network(3, [0, 1], [1, 2], roots=[0])
    >>> cost_to_root(net, [2.0, 5.0]).tolist()
    [0.0, 2.0, 7.0]
    """
    c = _link_array(net, "link_cost", link_cost)
    return _path_sums(net.order, net.parent, net.parent_link, c)


def path_to_root(net: RootedNetwork, node) -> np.ndarray:
    """Node indices from ``node`` up to its root, inclusive.

    Examples
    --------
    >>> net = rooted_network(3, [0, 1], [1, 2], roots=[0])
    >>> path_to_root(net, 2).tolist()
    [2, 1, 0]
    """
    v = int(node)
    if not 0 <= v < net.n_nodes:
        raise InputError(f"node {node} is outside 0..{net.n_nodes - 1}; pass a node index")
    out = np.empty(net.hops_to_root[v] + 1, np.int64)
    # the path length is known, so this walk is bounded by the tree depth
    for k in range(out.size):
        out[k] = v
        v = net.parent[v]
    return out


def longest_path(net: RootedNetwork, link_length) -> np.ndarray:
    """Path from a root to the node farthest from it along the tree.

    Ties go to the lowest node index.

    Returns
    -------
    ndarray of int64
        Node indices from the root to the farthest node.

    Examples
    --------
    >>> net = rooted_network(4, [0, 0, 2], [1, 2, 3], roots=[0])
    >>> longest_path(net, [5.0, 2.0, 2.5]).tolist()
    [0, 1]
    """
    dist = cost_to_root(net, link_length)
    far = int(np.argmax(dist))
    return path_to_root(net, far)[::-1].copy()


def upstream_nodes(net: RootedNetwork, link) -> np.ndarray:
    """Nodes in the subtree beyond a link (its child's subtree).

    In a gravity system these are the nodes draining through the link; in a
    pressure system the nodes it feeds.  Returned in depth-first preorder.

    Examples
    --------
    >>> net = rooted_network(4, [0, 1, 1], [1, 2, 3], roots=[0])
    >>> upstream_nodes(net, 0).tolist()
    [1, 2, 3]
    """
    k = int(link)
    if not 0 <= k < net.n_links:
        raise InputError(f"link {link} is outside 0..{net.n_links - 1}; pass a link index")
    c = net.to_node[k]
    s = net.pre_index[c]
    return net.preorder[s : s + net.subtree_size[c]].copy()
