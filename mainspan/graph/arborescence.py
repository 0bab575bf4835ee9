"""Minimum spanning arborescence (Chu–Liu/Edmonds) for gravity-aware layouts.

A gravity main drains towards its outlet, so the cost of a link depends on
the direction water runs in it: running *uphill* towards the outlet forces
the pipe deeper.  An undirected spanning tree cannot see that; a minimum
arborescence rooted at the outlet can.

Direction convention
--------------------
The arborescence is rooted at the outlet and its arcs point *away* from the
root: an arc ``tail → head`` makes ``tail`` the parent (downstream, nearer
the outlet) and ``head`` the child (upstream).  **Water flows head → tail.**
So the price of "flow from ``a`` to ``b``" is the weight of the arc
``b → a``.  :func:`directional_link_costs` builds arcs in exactly this
convention.

The implementation is Tarjan's O(m log m) form of the algorithm, compiled
with numba: each (super)node keeps its entering arcs in a skew heap with
lazy weight offsets, cycles are contracted with a union–find that can be
rolled back, and the contracted cycles are expanded in reverse order at
the end.

References
----------
.. [1] Y. J. Chu and T. H. Liu, "On the shortest arborescence of a directed
   graph", Scientia Sinica 14, 1965, 1396–1400.
.. [2] J. Edmonds, "Optimum branchings", J. Res. Nat. Bur. Standards 71B,
   1967, 233–240.
.. [3] R. E. Tarjan, "Finding optimum branchings", Networks 7, 1977, 25–35.
"""

from __future__ import annotations

from typing import NamedTuple

import numba
import numpy as np

from ..errors import InputError

__all__ = ["Arborescence", "DirectedLinks", "min_arborescence", "directional_link_costs",
           "profile_directional_costs"]


class Arborescence(NamedTuple):
    """Result of :func:`min_arborescence`.

    Attributes
    ----------
    parent_edge : ndarray of int64, shape (n,)
        Index (into the given arcs) of the arc entering each node, -1 at the root.
    parent : ndarray of int64, shape (n,)
        Tail of that arc (the downstream neighbour), -1 at the root.
    total_weight : float
        Sum of the chosen arcs' weights.
    """

    parent_edge: np.ndarray
    parent: np.ndarray
    total_weight: float


class DirectedLinks(NamedTuple):
    """Arcs for :func:`min_arborescence`, two per undirected link.

    ``tails[k] → heads[k]`` with water flowing ``heads[k]`` to ``tails[k]``;
    ``link[k]`` is the index of the undirected link the arc came from.
    """

    tails: np.ndarray
    heads: np.ndarray
    weights: np.ndarray
    link: np.ndarray


@numba.njit(cache=True)
def _prop(a, hl, hr, hw, hd):  # pragma: no cover - compiled
    d = hd[a]
    if d != 0.0:
        hw[a] += d
        if hl[a] >= 0:
            hd[hl[a]] += d
        if hr[a] >= 0:
            hd[hr[a]] += d
        hd[a] = 0.0


@numba.njit(cache=True)
def _less(a, b, hw, rank):  # pragma: no cover - compiled
    return hw[a] < hw[b] or (hw[a] == hw[b] and rank[a] < rank[b])


@numba.njit(cache=True)
def _merge(a, b, hl, hr, hw, hd, rank):  # pragma: no cover - compiled
    """Top-down skew-heap merge of heaps rooted at a and b (-1 = empty)."""
    if a < 0:
        return b
    if b < 0:
        return a
    _prop(a, hl, hr, hw, hd)
    _prop(b, hl, hr, hw, hd)
    if _less(b, a, hw, rank):
        a, b = b, a
    root = a
    x = a
    other = hr[x]
    hr[x] = hl[x]
    y = b
    while True:
        # merge `other` and `y` into the (now empty) left slot of x
        if other < 0:
            hl[x] = y
            break
        _prop(other, hl, hr, hw, hd)
        if _less(y, other, hw, rank):
            other, y = y, other
        hl[x] = other
        x = other
        other = hr[x]
        hr[x] = hl[x]
    return root


@numba.njit(cache=True)
def _find(uf, v):  # pragma: no cover - compiled
    while uf[v] != v:
        v = uf[v]
    return v


@numba.njit(cache=True)
def _tarjan(n, root, tails, heads, weights, rank):  # pragma: no cover - compiled
    """Minimum arborescence by Tarjan's method; returns (in_arc per node, unreachable node or -1)."""
    m = tails.shape[0]
    hl = np.full(m, -1, np.int64)
    hr = np.full(m, -1, np.int64)
    hw = weights.copy()
    hd = np.zeros(m)
    heap = np.full(n, -1, np.int64)
    for e in range(m):
        heap[heads[e]] = _merge(heap[heads[e]], e, hl, hr, hw, hd, rank)
    uf = np.arange(n)
    size = np.ones(n, np.int64)
    hist = np.empty(n, np.int64)  # child root of each union, for rollback
    n_hist = 0
    seen = np.full(n, -1, np.int64)
    seen[root] = root
    path = np.empty(n, np.int64)
    q = np.empty(n, np.int64)
    in_arc = np.full(n, -1, np.int64)
    cyc_node = np.empty(n, np.int64)
    cyc_time = np.empty(n, np.int64)
    cyc_lo = np.empty(n + 1, np.int64)
    cyc_arcs = np.empty(2 * n, np.int64)
    n_cyc = 0
    n_cyc_arcs = 0
    cyc_lo[0] = 0
    for s in range(n):
        u = s
        qi = 0
        while seen[u] < 0:
            # drop arcs that became loops inside the supernode
            while heap[u] >= 0 and _find(uf, tails[heap[u]]) == u:
                e = heap[u]
                _prop(e, hl, hr, hw, hd)
                heap[u] = _merge(hl[e], hr[e], hl, hr, hw, hd, rank)
            if heap[u] < 0:
                for v in range(n):
                    if _find(uf, v) == u:
                        return in_arc, v
            e = heap[u]
            _prop(e, hl, hr, hw, hd)
            w = hw[e]
            heap[u] = _merge(hl[e], hr[e], hl, hr, hw, hd, rank)
            if heap[u] >= 0:
                hd[heap[u]] -= w  # reduced weights for the rest of u's arcs
            q[qi] = e
            path[qi] = u
            qi += 1
            seen[u] = s
            u = _find(uf, tails[e])
            if seen[u] == s:
                # a cycle: contract the path back to u into one supernode
                cyc = -1
                end = qi
                time = n_hist
                while True:
                    qi -= 1
                    x = path[qi]
                    cyc = _merge(cyc, heap[x], hl, hr, hw, hd, rank)
                    a = _find(uf, u)
                    b = _find(uf, x)
                    if a == b:
                        break
                    if size[a] < size[b]:
                        a, b = b, a
                    uf[b] = a
                    size[a] += size[b]
                    hist[n_hist] = b
                    n_hist += 1
                u = _find(uf, u)
                heap[u] = cyc
                seen[u] = -1
                cyc_node[n_cyc] = u
                cyc_time[n_cyc] = time
                for i in range(qi, end):
                    cyc_arcs[n_cyc_arcs] = q[i]
                    n_cyc_arcs += 1
                n_cyc += 1
                cyc_lo[n_cyc] = n_cyc_arcs
        for i in range(qi):
            in_arc[_find(uf, heads[q[i]])] = q[i]
    # expand cycles, latest first, undoing the unions made since each was formed
    for c in range(n_cyc - 1, -1, -1):
        while n_hist > cyc_time[c]:
            n_hist -= 1
            b = hist[n_hist]
            a = uf[b]
            size[a] -= size[b]
            uf[b] = b
        u = cyc_node[c]
        enter = in_arc[u]
        for i in range(cyc_lo[c], cyc_lo[c + 1]):
            e = cyc_arcs[i]
            in_arc[_find(uf, heads[e])] = e
        in_arc[_find(uf, heads[enter])] = enter
    return in_arc, -1


def min_arborescence(n_nodes, tails, heads, weights, *, root) -> Arborescence:
    """Minimum-weight spanning arborescence rooted at ``root``.

    Parameters
    ----------
    n_nodes : int
        Number of nodes.
    tails, heads : array_like of int, shape (m,)
        Arc ends; an arc points away from the root (``tail`` is the parent).
        Parallel arcs are allowed; self loops and arcs into the root are ignored.
    weights : array_like of float, shape (m,)
        Arc weights; ``inf`` marks an arc that cannot be used.
    root : int
        Root node (the outlet).

    Returns
    -------
    Arborescence
        ``(parent_edge, parent, total_weight)``.

    Raises
    ------
    InputError
        On malformed arrays, NaN weights, or a node that no arc path from the
        root reaches.

    Notes
    -----
    Tarjan's form of the algorithm: one skew heap of entering arcs per
    (super)node with lazy weight offsets, and a union–find with rollback to
    contract cycles and expand them afterwards; O(m log m) time, O(m) memory.
    Ties between arcs of equal (reduced) weight are broken by lower tail
    index, then lower head index, then lower arc index, so the result is
    deterministic.

    Examples
    --------
    >>> a = min_arborescence(3, [0, 0, 1, 2], [1, 2, 2, 1], [5.0, 1.0, 1.0, 1.0], root=0)
    >>> a.parent.tolist(), a.total_weight
    ([-1, 2, 0], 2.0)
    """
    n = int(n_nodes)
    if n < 1:
        raise InputError(f"arborescence option 'n_nodes' must be >= 1, got {n_nodes}; give at least one node")
    t = np.asarray(tails)
    h = np.asarray(heads)
    w = np.asarray(weights, dtype=np.float64)
    if t.ndim != 1 or t.shape != h.shape or t.shape != w.shape:
        raise InputError(
            f"arborescence inputs 'tails', 'heads', 'weights' must be 1-D of equal length, got shapes {t.shape}, {h.shape}, {w.shape}; "
            "give one entry per arc in each"
        )
    t = t.astype(np.int64)
    h = h.astype(np.int64)
    for name, arr in (("tails", t), ("heads", h)):
        bad = np.flatnonzero((arr < 0) | (arr >= n))
        if bad.size:
            raise InputError(f"arborescence input '{name}' arc {bad[0]} names node {arr[bad[0]]}, outside 0..{n - 1}; pass node indices")
    nan = np.flatnonzero(np.isnan(w))
    if nan.size:
        k = nan[0]
        raise InputError(f"arc {k} ({t[k]}→{h[k]}) has weight NaN; give a number, or inf to forbid the arc")
    r = int(root)
    if not 0 <= r < n:
        raise InputError(f"arborescence option 'root' is {root}, outside 0..{n - 1}; pass the outlet's node index")
    eid = np.flatnonzero((t != h) & (h != r) & np.isfinite(w))
    eu, ev = t[eid], h[eid]
    rank = np.empty(eid.size, np.int64)
    rank[np.lexsort((eid, ev, eu))] = np.arange(eid.size)
    in_arc, lost = _tarjan(n, r, eu, ev, w[eid].copy(), rank)
    if lost >= 0:
        raise InputError(f"node {lost} cannot be reached from root {r} by the given arcs; add an arc towards it or drop it")
    parent_edge = np.where(in_arc >= 0, eid[np.maximum(in_arc, 0)], -1)
    parent_edge[r] = -1
    parent = np.where(parent_edge >= 0, t[np.maximum(parent_edge, 0)], -1)
    total = float(w[parent_edge[parent_edge >= 0]].sum())
    return Arborescence(parent_edge=parent_edge, parent=parent, total_weight=total)


def directional_link_costs(
    edges,
    base_cost,
    length_m,
    elevation_m,
    *,
    min_slope=0.004,
    extra_depth_cost_per_m2=20.0,
) -> DirectedLinks:
    """Price both flow directions of every candidate link for a gravity main.

    Model (local, per link): the pipe leaves its upstream end at minimum
    cover and falls at ``min_slope`` towards its downstream end.  If the
    ground at the downstream end is higher than that grade line allows, the
    trench must go deeper there by::

        extra_m = max(0, z_down - z_up + min_slope * L)

    and the extra excavation, growing linearly from 0 to ``extra_m`` along
    the link, costs ``extra_depth_cost_per_m2 * L * extra_m / 2``
    (``extra_depth_cost_per_m2`` = cost per metre of main per metre of
    extra depth, i.e. trench cost per m³ times trench width).  Running
    downhill steeper than ``min_slope`` costs nothing extra.  Depth carried
    over from links further upstream is not modelled; the invert walk of the
    hydraulics stage prices the chosen tree exactly.

    Parameters
    ----------
    edges : array_like of int, shape (m, 2)
        Undirected candidate links ``(u, v)``.
    base_cost : array_like of float, shape (m,)
        Direction-free cost of each link (from the cost stage).
    length_m : array_like of float, shape (m,)
        Plan length of each link.
    elevation_m : array_like of float, shape (n,)
        Ground level at the nodes.
    min_slope : float, default=0.004
        Grade the pipe is assumed to fall at (0.4 %: the minimum for a
        200 mm sewer in the Recommended Standards for Wastewater Facilities).
    extra_depth_cost_per_m2 : float, default=20.0
        Placeholder demo price (25 per m³ × 0.8 m trench width).

    Returns
    -------
    DirectedLinks
        Arc ``2k`` is ``u → v`` (flow v to u), arc ``2k + 1`` is ``v → u``
        (flow u to v); ``link`` maps both back to ``k``.

    Examples
    --------
    >>> d = directional_link_costs([[0, 1]], [100.0], [100.0], [10.0, 12.0], min_slope=0.0)
    >>> d.tails.tolist(), d.heads.tolist(), d.weights.tolist()
    ([0, 1], [1, 0], [100.0, 2100.0])
    """
    e = np.asarray(edges)
    if e.ndim != 2 or e.shape[1] != 2:
        raise InputError(f"'edges' must be an (m, 2) array of node pairs, got shape {e.shape}; pass candidate links")
    e = e.astype(np.int64)
    m = e.shape[0]
    base = np.asarray(base_cost, dtype=np.float64)
    L = np.asarray(length_m, dtype=np.float64)
    z = np.asarray(elevation_m, dtype=np.float64)
    for name, arr in (("base_cost", base), ("length_m", L)):
        if arr.shape != (m,):
            raise InputError(f"'{name}' must have one value per link ({m}), got shape {arr.shape}; pass a link array")
    if e.size and (e.min() < 0 or e.max() >= z.size):
        raise InputError(f"'edges' name nodes outside 0..{z.size - 1} of 'elevation_m'; pass one elevation per node")
    if np.isnan(z).any():
        k = int(np.flatnonzero(np.isnan(z))[0])
        raise InputError(f"'elevation_m' of node {k} is NaN; gravity layout needs ground levels at every node (give a terrain raster or site Z)")
    if not np.isfinite(min_slope) or min_slope < 0:
        raise InputError(f"option 'min_slope' must be >= 0, got {min_slope}; give a grade such as 0.004")
    if not np.isfinite(extra_depth_cost_per_m2) or extra_depth_cost_per_m2 < 0:
        raise InputError(f"option 'extra_depth_cost_per_m2' must be >= 0, got {extra_depth_cost_per_m2}; give a price")
    u, v = e[:, 0], e[:, 1]
    zu, zv = z[u], z[v]

    def price(z_up, z_down):
        extra = np.maximum(0.0, z_down - z_up + min_slope * L)
        return base + extra_depth_cost_per_m2 * L * extra / 2.0

    tails = np.empty(2 * m, np.int64)
    heads = np.empty(2 * m, np.int64)
    weights = np.empty(2 * m, np.float64)
    tails[0::2], heads[0::2], weights[0::2] = u, v, price(zv, zu)  # flow v -> u
    tails[1::2], heads[1::2], weights[1::2] = v, u, price(zu, zv)  # flow u -> v
    link = np.repeat(np.arange(m, dtype=np.int64), 2)
    return DirectedLinks(tails=tails, heads=heads, weights=weights, link=link)


def profile_link_arrays(edges, base_cost, length_m, profile_offsets, profile_station_m, profile_ground_m):
    """Candidate links and their ground profiles as checked arrays (both gravity layouts use them).

    Returns ``(edges, m, base_cost, length_m, offsets, station_m, ground_m)``.
    """
    e = np.asarray(edges, dtype=np.int64).reshape(-1, 2)
    m = e.shape[0]
    base = np.asarray(base_cost, dtype=np.float64)
    L = np.asarray(length_m, dtype=np.float64)
    off = np.asarray(profile_offsets, dtype=np.int64)
    st = np.asarray(profile_station_m, dtype=np.float64)
    g = np.asarray(profile_ground_m, dtype=np.float64)
    if off.shape != (m + 1,) or np.any(np.diff(off) < 2):
        raise InputError("profile_offsets must give at least two samples (both ends) per link")
    if not np.isfinite(g).all():
        raise InputError("gravity layout: the ground profile of some candidate link has no "
                         "data; fill the DEM or drop those links (--on-nodata barrier)")
    return e, m, base, L, off, st, g


def profile_directional_costs(edges, base_cost, length_m, profile_offsets, profile_station_m,
                              profile_ground_m, *, min_slope=0.004,
                              extra_depth_cost_per_m2=20.0) -> DirectedLinks:
    """Price both flow directions of every link from its ground profile.

    The pipe leaves its upstream end at minimum cover and runs straight at
    the grade ``S' = max(min_slope, max_s (z_up - z(s)) / s)`` -- the
    flattest grade that keeps cover where the ground dips.  Its depth below
    minimum cover at station ``s`` is then ``z(s) - z_up + S'·s``; the
    extra excavation costs ``extra_depth_cost_per_m2 · L · max(0, mean)``
    of that over the link (trapezoid rule).  On a straight ground line this
    equals :func:`directional_link_costs`; unlike it, a dip or a rise
    between the sites is priced.

    Parameters
    ----------
    edges : array_like of int, shape (m, 2)
    base_cost, length_m : array_like of float, shape (m,)
    profile_offsets : array_like of int, shape (m + 1,)
        CSR offsets of the profiles (at least two samples per link, both ends).
    profile_station_m, profile_ground_m : array_like of float
        Stations from ``edges[:, 0]`` (ascending within a link) and ground levels.
    min_slope, extra_depth_cost_per_m2 : float
        As in :func:`directional_link_costs`.

    Returns
    -------
    DirectedLinks
        Same arc layout as :func:`directional_link_costs`.

    Examples
    --------
    >>> d = profile_directional_costs([[0, 1]], [100.0], [100.0], [0, 3], [0.0, 50.0, 100.0],
    ...                               [10.0, 11.0, 12.0], min_slope=0.0)
    >>> d.weights.tolist()
    [100.0, 2100.0]
    """
    e, m, base, L, off, st, g = profile_link_arrays(edges, base_cost, length_m, profile_offsets,
                                                    profile_station_m, profile_ground_m)
    link = np.repeat(np.arange(m), np.diff(off))
    starts = off[:-1]

    def price(s, z0):
        # s: stations from the upstream end; z0: ground there (per link)
        with np.errstate(divide="ignore", invalid="ignore"):
            need = np.where(s > 1e-9, (z0[link] - g) / s, -np.inf)
        sl = np.maximum(min_slope, np.maximum.reduceat(need, starts))
        extra = g - z0[link] + sl[link] * s            # depth below cover along the pipe
        # trapezoid mean over the link's samples (sorted by s)
        order = np.lexsort((s, link))
        xs, ys, lk = s[order], extra[order], link[order]
        same = lk[1:] == lk[:-1]
        ds = np.where(same, np.abs(np.diff(xs)), 0.0)
        area = np.bincount(lk[1:], weights=ds * (ys[1:] + ys[:-1]) / 2.0, minlength=m)
        mean = np.where(L > 0, area / np.where(L > 0, L, 1.0), 0.0)
        return base + extra_depth_cost_per_m2 * L * np.maximum(mean, 0.0)

    z_first = g[starts]
    z_last = g[off[1:] - 1]
    tails = np.empty(2 * m, np.int64)
    heads = np.empty(2 * m, np.int64)
    weights = np.empty(2 * m, np.float64)
    u, v = e[:, 0], e[:, 1]
    # arc 2k: u -> v, water flows v to u (upstream end v, stations L - s)
    tails[0::2], heads[0::2], weights[0::2] = u, v, price(L[link] - st, z_last)
    # arc 2k+1: v -> u, water flows u to v (upstream end u, stations s)
    tails[1::2], heads[1::2], weights[1::2] = v, u, price(st, z_first)
    return DirectedLinks(tails=tails, heads=heads, weights=weights,
                         link=np.repeat(np.arange(m, dtype=np.int64), 2))
