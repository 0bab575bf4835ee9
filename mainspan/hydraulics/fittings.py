"""Fittings of pressure mains: where valves, washouts and thrust blocks go.

:func:`place_fittings` works on the oriented tree (links from the source
outward) and each link's ground profile:

Mains
    The tree is cut into *mains*: at every node the child link carrying the
    largest flow (ties: lower link index) continues the main, every other
    child link starts a new main beginning at the junction.  So a main runs
    from the source or a junction to a dead end, and a high point at a
    junction is seen by the main that runs through it.
``air_valve`` / ``washout``
    At the high and low points of each main's pipe profile (ground - cover
    - half the nominal size, along every profile station).  A point counts
    only if the pipe falls at least ``min_prominence_m`` on both sides
    before rising above it again (a one-pass turning-point filter); the
    ends of a main are never counted.  Air valves release air where it
    collects, washouts drain low points (AWWA M51, *Air-Release, Air/Vacuum
    and Combination Air Valves*, from memory; prominence threshold: common
    practice, no single source).
``isolation_valve``
    One on every link leaving a node with two or more links leaving it
    (each branch of a tee or cross), at the start of the link.
``thrust_block``
    At every tee (a node with three or more links), every dead end (a
    non-root node with one link) and every bend (a node with exactly one
    link in and one out) whose deflection exceeds ``bend_angle_deg``; sized
    by the largest pipe at the node.
``prv``
    A pressure-reducing valve at the start of every link whose pressure
    head along its profile exceeds ``max_service_pressure_m`` while its
    parent link's does not (the entry to each over-pressure zone).  The
    grade line is *not* recomputed downstream of the valve.

All positions are placed in plan on the straight link between its end
nodes (``chainage_m`` from the link's from_node).

Examples
--------
A V-shaped main (ground 10 m, 2 m, 10 m) and a hump (2 m, 10 m, 2 m):

>>> import numpy as np
>>> from mainspan.graph.network import rooted_network
>>> net = rooted_network(3, [0, 1], [1, 2], roots=[0])
>>> xy = np.array([[0.0, 0.0], [100.0, 0.0], [200.0, 0.0]])
>>> off, st = np.array([0, 2, 4]), np.array([0.0, 100.0, 0.0, 100.0])
>>> f = place_fittings(net, xy, np.array([100.0, 100.0]), off, st, np.array([10.0, 2.0, 2.0, 10.0]),
...                    np.array([110.0, 110.0]), np.array([1.0, 1.0]), cover_m=1.0)
>>> [(t, float(c)) for t, c in zip(f["type"], f["chainage_m"]) if t == "washout"]
[('washout', 100.0)]
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = ["FITTING_TYPES", "place_fittings", "main_ids"]

#: Fitting types placed on pressure mains.
FITTING_TYPES = ("air_valve", "washout", "isolation_valve", "thrust_block", "prv")


@numba.njit(cache=True)
def _main_ids(order, parent_link, cont):  # pragma: no cover - compiled
    """Main id per link: a continuing link inherits its parent link's main."""
    L = cont.shape[0]
    main = np.full(L, -1, np.int64)
    nxt = 0
    for j in range(order.shape[0]):
        k = parent_link[order[j]]
        if k < 0:
            continue
        if cont[k] >= 0:
            main[k] = main[cont[k]]
        else:
            main[k] = nxt
            nxt += 1
    return main


def main_ids(net, flow):
    """Main id per link (see the module notes) and the position of each link along its main.

    Returns
    -------
    main : ndarray of int64, shape (L,)
    depth : ndarray of int64, shape (L,)
        Hops of the link's from_node from the root (orders links along a main).
    """
    L = net.n_links
    if L == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    flow = np.asarray(flow, float)
    k = np.arange(L)
    # the continuing child of each node: largest flow, then lower link index
    srt = np.lexsort((k, -flow, net.from_node))
    first = np.ones(L, bool)
    first[1:] = net.from_node[srt[1:]] != net.from_node[srt[:-1]]
    best = np.full(net.n_nodes, -1, np.int64)
    best[net.from_node[srt[first]]] = srt[first]
    is_cont = best[net.from_node] == k
    parent_of_from = net.parent_link[net.from_node]
    cont = np.where(is_cont & (parent_of_from >= 0), parent_of_from, -1)
    # a link leaving the root: each one starts its own main
    return _main_ids(net.order, net.parent_link, cont.astype(np.int64)), net.hops_to_root[net.from_node]


@numba.njit(cache=True)
def _turning_points(z, main_off, prominence):  # pragma: no cover - compiled
    """Indices of confirmed highs (+1) and lows (-1) of each main's profile."""
    idx = []
    kind = []
    for m in range(main_off.shape[0] - 1):
        a, b = main_off[m], main_off[m + 1]
        if b - a < 3:
            continue
        trend = 0
        ext = a
        for i in range(a + 1, b):
            if trend == 0:
                if z[i] - z[a] >= prominence:
                    trend = 1
                    ext = i
                elif z[a] - z[i] >= prominence:
                    trend = -1
                    ext = i
            elif trend == 1:
                if z[i] > z[ext]:
                    ext = i
                elif z[ext] - z[i] >= prominence:
                    idx.append(ext)
                    kind.append(1)
                    trend = -1
                    ext = i
            else:
                if z[i] < z[ext]:
                    ext = i
                elif z[i] - z[ext] >= prominence:
                    idx.append(ext)
                    kind.append(-1)
                    trend = 1
                    ext = i
    out_i = np.empty(len(idx), np.int64)
    out_k = np.empty(len(idx), np.int64)
    for j in range(len(idx)):
        out_i[j] = idx[j]
        out_k[j] = kind[j]
    return out_i, out_k


def place_fittings(net, xy, length_m, profile_offsets, profile_station_m, profile_ground_m, nominal_mm, flow_lps, *,
                   cover_m=0.9, min_prominence_m=1.0, bend_angle_deg=11.25, max_service_pressure_m=None,
                   pressure_max_m=None, node_id=None):
    """Place the fittings of a tree of pressure mains (see the module notes).

    Parameters
    ----------
    net : RootedNetwork
        Oriented from the source(s).
    xy : ndarray, shape (n, 2)
        Node coordinates, m.
    length_m : ndarray, shape (L,)
        Plan length of each link.
    profile_offsets, profile_station_m, profile_ground_m : ndarray
        Ground profile per link (CSR), stations from the oriented from_node,
        sorted, both ends included.
    nominal_mm : ndarray, shape (L,)
        Nominal size of each link's pipe.
    flow_lps : ndarray, shape (L,)
        Design flow, to choose which child continues a main.
    cover_m : float, default=0.9
    min_prominence_m : float, default=1.0
        Smallest rise and fall around a high or low point.
    bend_angle_deg : float, default=11.25
        Deflections above this get a thrust block (11.25° is the smallest
        standard bend; common practice).
    max_service_pressure_m : float or None, default=None
        Pressure head above which a PRV is placed; None places none.
    pressure_max_m : ndarray, shape (L,), optional
        Highest pressure head along each link (needed for PRVs).
    node_id : array_like of str, optional
        Node ids for the ``node`` column.

    Returns
    -------
    dict of str to ndarray
        type, size_mm, x, y, link (index), chainage_m, node (id, or "" for a
        point inside a link), sorted by (link, chainage_m, type).
    """
    L, n = net.n_links, net.n_nodes
    ids = np.asarray(node_id if node_id is not None else np.arange(n)).astype(str)
    a, b = net.from_node, net.to_node
    nominal = np.asarray(nominal_mm, float)
    length = np.asarray(length_m, float)
    off = np.asarray(profile_offsets, np.int64)
    st = np.asarray(profile_station_m, float)
    gr = np.asarray(profile_ground_m, float)
    parts = []  # (type, link, chainage, size, node)

    def add(kind, link, chainage, size, node):
        link = np.asarray(link, np.int64)
        parts.append((np.full(link.size, kind, dtype=object), link, np.asarray(chainage, float) * np.ones(link.size),
                      np.asarray(size, float) * np.ones(link.size), np.asarray(node, np.int64) * np.ones(link.size, np.int64)))

    if L:
        # -- high and low points along each main
        main, depth = main_ids(net, flow_lps)
        order = np.lexsort((depth, main))
        counts = np.diff(off)[order]
        plink = np.repeat(order, counts)
        pos = np.repeat(off[order] - (np.cumsum(counts) - counts), counts) + np.arange(counts.sum())
        pmain = main[plink]
        # drop the first station of a link that continues the main (the same node as the previous end)
        keep = np.ones(pos.size, bool)
        starts = np.cumsum(counts) - counts
        newmain = np.ones(L, bool)
        newmain[1:] = main[order[1:]] != main[order[:-1]]
        keep[starts[~newmain]] = False
        pos, plink, pmain = pos[keep], plink[keep], pmain[keep]
        z = gr[pos] - cover_m - nominal[plink] / 2000.0
        main_off = np.concatenate([[0], np.cumsum(np.bincount(pmain, minlength=int(main.max()) + 1))]).astype(np.int64)
        ti, tk = _turning_points(z, main_off, float(min_prominence_m))
        lk = plink[ti]
        ch = st[pos[ti]]
        at_end = np.where(ch <= 1e-9, a[lk], np.where(ch >= length[lk] - 1e-9, b[lk], -1))
        for kind, sign in (("air_valve", 1), ("washout", -1)):
            m = tk == sign
            add(kind, lk[m], ch[m], nominal[lk[m]], at_end[m])
        # -- isolation valves on every branch leaving a junction
        out_deg = np.bincount(a, minlength=n)
        br = np.flatnonzero(out_deg[a] >= 2)
        add("isolation_valve", br, 0.0, nominal[br], a[br])
        # -- thrust blocks: tees, dead ends, bends
        deg = np.bincount(a, minlength=n) + np.bincount(b, minlength=n)
        size_at = np.zeros(n)
        np.maximum.at(size_at, a, nominal)
        np.maximum.at(size_at, b, nominal)
        any_link = np.full(n, -1, np.int64)
        any_link[b] = np.arange(L)          # the link into a node (its parent link)
        tee = np.flatnonzero(deg >= 3)
        tee_link = np.where(any_link[tee] >= 0, any_link[tee], _first_out(a, tee, n))
        tee_ch = np.where(any_link[tee] >= 0, length[tee_link], 0.0)
        add("thrust_block", tee_link, tee_ch, size_at[tee], tee)
        is_root = np.zeros(n, bool)
        is_root[net.roots] = True
        dead = np.flatnonzero((deg == 1) & ~is_root)
        add("thrust_block", any_link[dead], length[any_link[dead]], size_at[dead], dead)
        mid = np.flatnonzero((deg == 2) & ~is_root)
        if mid.size:
            k_in = any_link[mid]
            k_out = _first_out(a, mid, n)
            u = xy[mid] - xy[a[k_in]]
            v = xy[b[k_out]] - xy[mid]
            cosang = np.einsum("ij,ij->i", u, v) / np.maximum(np.hypot(*u.T) * np.hypot(*v.T), 1e-300)
            ang = np.degrees(np.arccos(np.clip(cosang, -1.0, 1.0)))
            bend = ang > bend_angle_deg
            add("thrust_block", k_in[bend], length[k_in[bend]], size_at[mid[bend]], mid[bend])
        # -- PRVs at the entry of each over-pressure zone
        if max_service_pressure_m is not None and pressure_max_m is not None:
            over = np.asarray(pressure_max_m, float) > max_service_pressure_m
            par = net.parent_link[a]
            entry = np.flatnonzero(over & ((par < 0) | ~over[np.maximum(par, 0)]))
            add("prv", entry, 0.0, nominal[entry], a[entry])
    if parts:
        kind = np.concatenate([p[0] for p in parts])
        link = np.concatenate([p[1] for p in parts])
        chain = np.concatenate([p[2] for p in parts])
        size = np.concatenate([p[3] for p in parts])
        node = np.concatenate([p[4] for p in parts])
    else:
        kind, link, chain, size, node = (np.zeros(0, object), np.zeros(0, np.int64), np.zeros(0), np.zeros(0),
                                         np.zeros(0, np.int64))
    srt = np.lexsort((kind.astype(str), chain, link))
    kind, link, chain, size, node = kind[srt], link[srt], chain[srt], size[srt], node[srt]
    frac = np.where(length[link] > 0, chain / np.where(length[link] > 0, length[link], 1.0), 0.0) if link.size else chain
    p0, p1 = xy[a[link]], xy[b[link]]
    return {
        "type": kind.astype(object),
        "size_mm": size,
        "x": p0[:, 0] + (p1[:, 0] - p0[:, 0]) * frac,
        "y": p0[:, 1] + (p1[:, 1] - p0[:, 1]) * frac,
        "link": link,
        "chainage_m": chain,
        "node": np.where(node >= 0, ids[np.maximum(node, 0)], "").astype(object),
    }


def _first_out(from_node, nodes, n):
    """The lowest-index link leaving each of *nodes*."""
    first = np.full(n, -1, np.int64)
    k = np.arange(from_node.size)[::-1]
    first[from_node[k]] = k
    return first[nodes]
