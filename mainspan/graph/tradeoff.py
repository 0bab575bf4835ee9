"""Whole-cost layout, part 1: its settings and the Prim–Dijkstra trade-off start trees.

Split from :mod:`mainspan.graph.wholecost` (which re-exports every name here) so
the settings schema can read :class:`WholeCostSettings` without importing the
search.  Node *v* joins the growing tree from *u* with the key ``α·d(u) + w(u, v)``,
``d(u)`` the link-cost path length from the root to *u*: α = 0 is Prim's tree and
α = 1 the shortest-path tree (Alpert, Hu, Huang, Kahng and Karger, IEEE Trans.
Computer-Aided Design 14(7):890-896, 1995, from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np

from ..errors import InputError
from .spanning import Tree

__all__ = ["WholeCostSettings", "whole_life_cost", "tradeoff_tree", "tree_from_parents"]

# ----------------------------------------------------------------------------------- settings
@dataclass(frozen=True)
class WholeCostSettings:
    """Limits of the whole-cost layout search (documented defaults, no single source).

    Attributes
    ----------
    alphas : tuple of float, default (0.0, 0.1, 0.2, 0.3, 0.5, 1.0)
        Prim–Dijkstra trade-off values of the start trees (0 = Prim, 1 = shortest paths).
    max_hops : int, default 12
        A move drops a tree link at most this many links along the cycle from
        either end of the added link (the neighbourhood limit).
    per_pass : int, default 48
        Moves priced by a full design per pass, best estimate first (the
        estimate ranks well for rule sizing; least-cost sizing re-balances
        pipes and pump head globally, so more of the ranking is priced).
    max_evaluations : int, default 400
        Full designs in all, start trees included; the search stops there and
        ``run_info`` says so.
    """

    alphas: tuple = (0.0, 0.1, 0.2, 0.3, 0.5, 1.0)
    max_hops: int = 12
    per_pass: int = 48
    max_evaluations: int = 400

    def __post_init__(self):
        a = tuple(float(x) for x in np.atleast_1d(np.asarray(self.alphas, float)))
        if not a or not all(np.isfinite(x) and 0.0 <= x <= 1.0 for x in a):
            raise InputError(f"whole-cost option 'alphas' must be numbers in [0, 1], got "
                             f"{self.alphas!r}; e.g. (0.0, 0.1, 0.3)")
        object.__setattr__(self, "alphas", a)
        for name, lo in (("max_hops", 1), ("per_pass", 1), ("max_evaluations", 1)):
            v = getattr(self, name)
            if not isinstance(v, (int, np.integer)) or v < lo:
                raise InputError(f"whole-cost option '{name}' must be an integer >= {lo}, "
                                 f"got {v!r}")


def whole_life_cost(summary) -> float:
    """Whole-life cost from a design summary: ``whole_life_cost``, else capital + energy PV."""
    if "whole_life_cost" in summary:
        return float(summary["whole_life_cost"])
    return float(summary.get("total_cost", 0.0)) + float(summary.get("energy_cost_pv", 0.0) or 0.0)


# ------------------------------------------------------------------ Prim–Dijkstra trade-off tree
@numba.njit(cache=True, inline="always")
def _hless(hk, hlo, hhi, he, i, j):
    if hk[i] != hk[j]:
        return hk[i] < hk[j]
    if hlo[i] != hlo[j]:
        return hlo[i] < hlo[j]
    if hhi[i] != hhi[j]:
        return hhi[i] < hhi[j]
    return he[i] < he[j]


@numba.njit(cache=True, inline="always")
def _hswap(a, i, j):
    t = a[i]
    a[i] = a[j]
    a[j] = t


@numba.njit(cache=True)
def _hpush(hk, hlo, hhi, he, hv, hu, size, key, lo, hi, e, v, u):  # pragma: no cover - compiled
    i = size
    hk[i] = key
    hlo[i] = lo
    hhi[i] = hi
    he[i] = e
    hv[i] = v
    hu[i] = u
    while i > 0:
        p = (i - 1) >> 1
        if not _hless(hk, hlo, hhi, he, i, p):
            break
        _hswap(hk, i, p)
        _hswap(hlo, i, p)
        _hswap(hhi, i, p)
        _hswap(he, i, p)
        _hswap(hv, i, p)
        _hswap(hu, i, p)
        i = p
    return size + 1


@numba.njit(cache=True)
def _hpop(hk, hlo, hhi, he, hv, hu, size):  # pragma: no cover - compiled
    """Remove the minimum (left in slot ``size - 1``); returns the new size."""
    size -= 1
    _hswap(hk, 0, size)
    _hswap(hlo, 0, size)
    _hswap(hhi, 0, size)
    _hswap(he, 0, size)
    _hswap(hv, 0, size)
    _hswap(hu, 0, size)
    i = 0
    while True:
        c = 2 * i + 1
        if c >= size:
            break
        if c + 1 < size and _hless(hk, hlo, hhi, he, c + 1, c):
            c += 1
        if not _hless(hk, hlo, hhi, he, c, i):
            break
        _hswap(hk, i, c)
        _hswap(hlo, i, c)
        _hswap(hhi, i, c)
        _hswap(he, i, c)
        _hswap(hv, i, c)
        _hswap(hu, i, c)
        i = c
    return size


@numba.njit(cache=True)
def _pd_kernel(n, indptr, nbr, arc_edge, w, roots, alpha):  # pragma: no cover - compiled
    """Grow from *roots*; node v joins from u with key alpha*d(u) + w (lazy-deletion heap).

    Each arc is pushed at most once (when its tail joins and its head is still
    outside), so the heap never holds more than the number of arcs.
    """
    cap = nbr.shape[0] + 1
    hk = np.empty(cap)
    hlo = np.empty(cap, np.int64)
    hhi = np.empty(cap, np.int64)
    he = np.empty(cap, np.int64)
    hv = np.empty(cap, np.int64)
    hu = np.empty(cap, np.int64)
    size = 0
    parent = np.full(n, -1, np.int64)
    pedge = np.full(n, -1, np.int64)
    dist = np.zeros(n)
    done = np.zeros(n, np.bool_)
    order = np.empty(n, np.int64)
    cnt = 0
    for r in roots:
        done[r] = True
        order[cnt] = r
        cnt += 1
    qi = 0
    while qi < cnt:
        u = order[qi]
        qi += 1
        for k in range(indptr[u], indptr[u + 1]):
            v = nbr[k]
            if not done[v]:
                e = arc_edge[k]
                size = _hpush(hk, hlo, hhi, he, hv, hu, size, alpha * dist[u] + w[e],
                              min(u, v), max(u, v), e, v, u)
        if qi < cnt:
            continue                      # expand every node in the tree before the next pop
        while size > 0:
            size = _hpop(hk, hlo, hhi, he, hv, hu, size)
            v = hv[size]
            if done[v]:
                continue
            u = hu[size]
            e = he[size]
            done[v] = True
            parent[v] = u
            pedge[v] = e
            dist[v] = dist[u] + w[e]
            order[cnt] = v
            cnt += 1
            break
    return parent, pedge, order, cnt


def _arcs(n, e, w):
    """CSR of both directions of every finite-weight link, by node, then link index."""
    ok = np.flatnonzero(np.isfinite(w))
    tail = np.concatenate([e[ok, 0], e[ok, 1]])
    head = np.concatenate([e[ok, 1], e[ok, 0]])
    eid = np.concatenate([ok, ok])
    srt = np.lexsort((eid, tail))
    indptr = np.zeros(n + 1, np.int64)
    np.cumsum(np.bincount(tail, minlength=n), out=indptr[1:])
    return indptr, np.ascontiguousarray(head[srt]), np.ascontiguousarray(eid[srt])


def tree_from_parents(parent, parent_edge, roots, weights):
    """A :class:`~mainspan.graph.spanning.Tree` from parent arrays (order: breadth-first by index).

    Parameters
    ----------
    parent, parent_edge : array_like of int, shape (n,)
        Parent node and link index of every node; -1 at roots.
    roots : array_like of int
    weights : array_like of float
        Link prices, for ``Tree.weight``.
    """
    from .network import rooted_network
    from .spanning import _frozen

    parent = np.asarray(parent, np.int64)
    n = parent.size
    roots = np.asarray(roots, np.int64)
    child = np.flatnonzero(parent >= 0)
    net = rooted_network(n, parent[child], child, roots=roots)
    pe = np.asarray(parent_edge, np.int64)
    w = np.asarray(weights, float)
    return Tree(parent=_frozen(parent, np.int64), parent_edge=_frozen(pe, np.int64),
                order=_frozen(net.order, np.int64), roots=_frozen(roots, np.int64),
                root_of=_frozen(net.root_of, np.int64), weight=float(np.sum(w[pe[child]])))


def tradeoff_tree(n_nodes, edges, weights, alpha, *, roots=(0,), allow_forest=False):
    """Prim–Dijkstra trade-off tree [1]_: keys ``alpha·d(u) + w(u, v)``.

    Parameters
    ----------
    n_nodes : int
    edges : array_like of int, shape (m, 2)
    weights : array_like of float, shape (m,)
        Link prices >= 0; ``inf`` means impassable.
    alpha : float
        0 gives Prim's minimum spanning tree, 1 the shortest-path tree from the
        roots; values between trade total link cost against path cost.
    roots : sequence of int, default (0,)
    allow_forest : bool, default False
        As in :func:`mainspan.graph.spanning.prim_tree`: unreached parts get their
        lowest-index node as an extra root instead of raising.

    Returns
    -------
    Tree
        ``order`` is the order nodes joined.

    Examples
    --------
    >>> import numpy as np
    >>> e = np.array([[0, 1], [1, 2], [0, 2]])
    >>> w = np.array([1.0, 1.0, 1.5])
    >>> tradeoff_tree(3, e, w, 0.0).parent.tolist(), tradeoff_tree(3, e, w, 1.0).parent.tolist()
    ([-1, 0, 1], [-1, 0, 0])
    """
    from .spanning import _check_edges, _check_n_nodes, _check_roots, _check_weights, _frozen, forest_roots

    a = float(alpha)
    if not (np.isfinite(a) and 0.0 <= a <= 1.0):
        raise InputError(f"trade-off alpha must be in [0, 1], got {alpha!r}")
    n = _check_n_nodes(n_nodes)
    e = _check_edges(edges, n)
    w = _check_weights(weights, e)
    r = _check_roots(roots, n)
    indptr, nbr, aid = _arcs(n, e, w)
    parent, pedge, order, cnt = _pd_kernel(n, indptr, nbr, aid, w, r, a)
    if cnt < n:
        r = forest_roots(n, e, w, r, allow_forest=allow_forest)
        parent, pedge, order, cnt = _pd_kernel(n, indptr, nbr, aid, w, r, a)
    root_of = np.empty(n, np.int64)
    for v in order:                      # parents come first in order
        root_of[v] = v if parent[v] < 0 else root_of[parent[v]]
    child = np.flatnonzero(parent >= 0)
    return Tree(parent=_frozen(parent, np.int64), parent_edge=_frozen(pedge, np.int64),
                order=_frozen(order, np.int64), roots=_frozen(r, np.int64),
                root_of=_frozen(root_of, np.int64), weight=float(np.sum(w[pedge[child]])))
