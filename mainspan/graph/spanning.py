"""Prim's algorithm on candidate links, spanning forests, and an optimality certificate.

The engine of mainspan: given ``n_nodes`` points, candidate links ``edges`` (m, 2) and their
prices ``weights`` (m,), :func:`prim_tree` grows the cheapest spanning tree from the source
(or a spanning forest from several roots) and :func:`certify_tree` proves, link by link, that no
candidate left out could have made it cheaper.

Ties are broken by a total order on links, so the result never depends on the order in which
links are listed or on how the heap happens to be laid out: link *e* between nodes *u* and *v*
has the key ``(weights[e], min(u, v), max(u, v), e)``, compared lexicographically.  Because
every key is distinct, the minimum spanning forest under that order is unique, and Prim's
algorithm (any correct implementation of it) returns exactly that forest.

References
----------
(Volume and page details other than Prim's and Shamos & Hoey's are from memory.)

.. [1] R. C. Prim, "Shortest connection networks and some generalizations", Bell System
   Technical Journal 36(6):1389-1401, 1957.
.. [2] V. Jarník, "O jistém problému minimálním", Práce moravské přírodovědecké společnosti
   6:57-63, 1930.
.. [3] R. E. Tarjan, "Applications of path compression on balanced trees", Journal of the ACM
   26(4):690-715, 1979 (verifying a minimum spanning tree by path maxima).
.. [4] E. W. Myers, "An applicative random-access stack", Information Processing Letters
   17(5):241-248, 1983 (the skew-binary jump pointers used for path maxima).
"""

from __future__ import annotations

import numba
import numpy as np

from ..errors import DisconnectedError, InputError
from .certificate import certify_tree, check_certificate
from .tree_data import (LOCALITY_MIN_NODES, Certificate, Tree, _check_edges,  # noqa: F401
                        _check_n_nodes, _check_roots, _check_weights, _frozen, _plain,
                        locality_order)

__all__ = [
    "Tree",
    "Certificate",
    "prim_tree",
    "certify_tree",
    "check_certificate",
    "connected_components",
]


# --------------------------------------------------------------------------------------------
# Compiled kernels
# --------------------------------------------------------------------------------------------

@numba.njit(cache=True)
def _build_csr(n, eu, ev, w, label):
    """Both-direction adjacency of the finite-weight links of the relabelled graph.

    Slot ``p`` of a row takes two int64 words in ``buf``: the link weight (as float64 bits)
    and ``neighbour << 32 | link index``, so relaxing a node reads one contiguous run of
    memory and building the rows costs one random write per slot.  Rows list their links in
    increasing link index.
    """
    m = eu.shape[0]
    la = np.empty(m, dtype=np.int32)
    lb = np.empty(m, dtype=np.int32)
    deg = np.zeros(n + 1, dtype=np.int64)
    for k in range(m):
        if w[k] < np.inf:
            a = label[eu[k]]
            b = label[ev[k]]
            la[k] = a
            lb[k] = b
            deg[a + 1] += 1
            deg[b + 1] += 1
    for i in range(n):
        deg[i + 1] += deg[i]
    indptr = deg
    fill = deg[:n].copy()
    buf = np.empty(2 * indptr[n], dtype=np.int64)
    fb = buf.view(np.float64)
    for k in range(m):
        wk = w[k]
        if wk < np.inf:
            a = np.int64(la[k])
            b = np.int64(lb[k])
            p = fill[a]
            fb[2 * p] = wk
            buf[2 * p + 1] = (b << 32) | k
            fill[a] = p + 1
            p = fill[b]
            fb[2 * p] = wk
            buf[2 * p + 1] = (a << 32) | k
            fill[b] = p + 1
    return indptr, buf


@numba.njit(cache=True, inline="always")
def _key_less(wa, la, ha, wb, lb, hb):
    if wa != wb:
        return wa < wb
    if la != lb:
        return la < lb
    return ha < hb


@numba.njit(cache=True, inline="always")
def _less(wa, va, wb, vb, best_par, orig):
    """Key order of two heap entries (nodes va, vb with their best link weights).

    Entries of two different nodes never share (lo, hi): both ends of such a link would
    have to be outside the tree, yet one of them is the tree end.
    """
    if wa != wb:
        return wa < wb
    a = orig[va]
    b = orig[best_par[va]]
    c = orig[vb]
    d = orig[best_par[vb]]
    return _key_less(wa, min(a, b), max(a, b), wb, min(c, d), max(c, d))


@numba.njit(cache=True)
def _prim_kernel(n, indptr, buf, orig, roots):
    """Prim's algorithm with an indexed 4-ary heap (decrease-key) over relabelled nodes.

    ``orig[v]`` is the caller's index of internal node ``v``; tie-breaking uses it so that the
    result is the same whatever internal order is used.  A 4-ary heap is a binary heap with
    four children per slot: half the levels, and the children share a cache line.
    """
    fb = buf.view(np.float64)
    # best_w[v]: weight of v's best link to the tree so far; -inf once v is in the tree, so a
    # single load tells "taken" and "not better" apart while scanning neighbours
    best_w = np.full(n, np.inf)
    best_par = np.full(n, -1, dtype=np.int32)
    best_edge = np.full(n, -1, dtype=np.int64)
    pos = np.full(n, -1, dtype=np.int32)        # heap slot, -1 outside the heap
    hw = np.empty(n, dtype=np.float64)          # heap: key weight per slot
    hv = np.empty(n, dtype=np.int32)            # heap: node per slot
    order = np.empty(n, dtype=np.int64)
    size = 0
    count = 0
    for r in roots:
        best_w[r] = -np.inf
        order[count] = r
        count += 1
    nr = roots.shape[0]
    i_root = 0
    while True:
        # next node to scan: the roots first, then the heap minimum
        if i_root < nr:
            u = np.int64(roots[i_root])
            i_root += 1
        else:
            if size == 0:
                break
            u = np.int64(hv[0])
            pos[u] = -1
            size -= 1
            if size > 0:
                # sift the last entry down from the top, moving the hole rather than swapping
                lw = hw[size]
                lv = hv[size]
                i = 0
                while True:
                    c = 4 * i + 1
                    if c >= size:
                        break
                    best = c
                    bwc = hw[c]
                    last = min(c + 4, size)
                    for q in range(c + 1, last):
                        wq = hw[q]
                        if wq < bwc or (wq == bwc and _less(wq, hv[q], bwc, hv[best],
                                                            best_par, orig)):
                            best = q
                            bwc = wq
                    if _less(bwc, hv[best], lw, lv, best_par, orig):
                        hw[i] = bwc
                        hv[i] = hv[best]
                        pos[hv[i]] = i
                        i = best
                    else:
                        break
                hw[i] = lw
                hv[i] = lv
                pos[lv] = i
            best_w[u] = -np.inf
            order[count] = u
            count += 1
        ou = orig[u]
        for p in range(indptr[u], indptr[u + 1]):
            slot = buf[2 * p + 1]
            v = slot >> 32
            wk = fb[2 * p]
            bw = best_w[v]
            if wk > bw:      # also skips nodes already in the tree (bw == -inf)
                continue
            k = slot & 0xFFFFFFFF
            if wk == bw:
                ov = orig[v]
                ob = orig[best_par[v]]
                lo_new = min(ou, ov)
                hi_new = max(ou, ov)
                lo_old = min(ob, ov)
                hi_old = max(ob, ov)
                if lo_new != lo_old or hi_new != hi_old:
                    if not _key_less(wk, lo_new, hi_new, bw, lo_old, hi_old):
                        continue
                elif k >= best_edge[v]:  # parallel links: the lower link index wins
                    continue
            best_w[v] = wk
            best_par[v] = u
            best_edge[v] = k
            i = np.int64(pos[v])
            if i < 0:
                i = size
                size += 1
            # sift up from slot i, moving the hole
            while i > 0:
                q = (i - 1) >> 2
                if _less(wk, v, hw[q], hv[q], best_par, orig):
                    hw[i] = hw[q]
                    hv[i] = hv[q]
                    pos[hv[i]] = i
                    i = q
                else:
                    break
            hw[i] = wk
            hv[i] = v
            pos[v] = i
    return best_par, best_edge, order, count


@numba.njit(cache=True)
def _map_back(n, best_par, best_edge, order, orig, roots_orig):
    parent = np.full(n, -1, dtype=np.int64)
    parent_edge = np.full(n, -1, dtype=np.int64)
    order_o = np.empty(n, dtype=np.int64)
    root_of = np.full(n, -1, dtype=np.int64)
    for r in roots_orig:
        root_of[r] = r
    for i in range(n):
        v = order[i]
        ov = orig[v]
        order_o[i] = ov
        if best_par[v] >= 0 and root_of[ov] != ov:
            po = orig[best_par[v]]
            parent[ov] = po
            parent_edge[ov] = best_edge[v]
            root_of[ov] = root_of[po]
    return parent, parent_edge, order_o, root_of


# --------------------------------------------------------------------------------------------
# Components
# --------------------------------------------------------------------------------------------

def connected_components(n_nodes, edges, *, weights=None) -> np.ndarray:
    """Label the connected components of the candidate graph.

    Parameters
    ----------
    n_nodes : int
        Number of nodes.
    edges : array_like of int, shape (m, 2)
        Candidate links.
    weights : array_like of float, shape (m,), optional
        If given, links of weight ``inf`` (impassable) are left out.

    Returns
    -------
    labels : ndarray of int64, shape (n_nodes,)
        Component label per node, 0-based, numbered by the lowest node index in each
        component (node 0 is always in component 0).

    Examples
    --------
    >>> connected_components(5, [[0, 1], [3, 4]]).tolist()
    [0, 0, 1, 2, 2]
    """
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components as _cc

    n = _check_n_nodes(n_nodes)
    e = _check_edges(edges, n)
    if weights is not None:
        w = _check_weights(weights, e)
        e = e[np.isfinite(w)]
    g = coo_matrix((np.ones(e.shape[0], dtype=bool), (e[:, 0], e[:, 1])), shape=(n, n))
    _, lab = _cc(g, directed=False)
    lab = lab.astype(np.int64)
    # renumber by lowest node index, whatever scipy's own numbering
    first = np.full(lab.max() + 1, n, dtype=np.int64)
    np.minimum.at(first, lab, np.arange(n, dtype=np.int64))
    rank = np.empty_like(first)
    rank[np.argsort(first, kind="stable")] = np.arange(first.shape[0], dtype=np.int64)
    return rank[lab]


def forest_roots(n_nodes, edges, weights, roots, *, allow_forest):
    """Roots for a graph the given roots do not span: each unrooted part gains its lowest node.

    Raises :class:`DisconnectedError` naming the parts unless ``allow_forest``.
    """
    labels = connected_components(n_nodes, edges, weights=weights)
    if not allow_forest:
        raise DisconnectedError(_disconnected_message(labels, roots), components=labels)
    n_comp = int(labels.max()) + 1
    rooted = np.zeros(n_comp, dtype=bool)
    rooted[labels[roots]] = True
    first = np.full(n_comp, n_nodes, dtype=np.int64)
    np.minimum.at(first, labels, np.arange(n_nodes, dtype=np.int64))
    return np.concatenate([roots, first[~rooted]])


def _disconnected_message(labels, roots):
    n_comp = int(labels.max()) + 1
    sizes = np.bincount(labels, minlength=n_comp)
    rooted = np.zeros(n_comp, dtype=bool)
    rooted[labels[roots]] = True
    loose = np.flatnonzero(~rooted)
    parts = []
    for c in loose[:5]:
        members = np.flatnonzero(labels == c)
        head = ", ".join(str(int(v)) for v in members[:4])
        more = ", ..." if members.size > 4 else ""
        parts.append(f"[{members.size} node{'s' if members.size > 1 else ''}: {head}{more}]")
    if loose.size > 5:
        parts.append(f"and {loose.size - 5} more")
    size_list = ", ".join(str(int(s)) for s in sizes[:10]) + (", ..." if n_comp > 10 else "")
    return (f"the candidate links split the {labels.shape[0]} nodes into {n_comp} components "
            f"(sizes {size_list}); {loose.size} of them reach no root: {' '.join(parts)}; "
            "add candidate links (a larger k or max_link_m, or method 'delaunay+knn'), "
            "or pass allow_forest=True to give each unconnected part its own root")


# --------------------------------------------------------------------------------------------
# Prim
# --------------------------------------------------------------------------------------------

def prim_tree(n_nodes, edges, weights, *, roots=(0,), allow_forest=False,
              node_order=None) -> Tree:
    """Grow the minimum spanning tree (or forest) from the roots with Prim's algorithm.

    Every root starts in the tree, as if all roots were joined to one virtual super-root at
    no cost; every other node joins the root that reaches it most cheaply.  The heap is an
    indexed 4-ary heap (a binary heap with four children per slot: half the levels) with
    decrease-key, compiled with numba; the run takes O(m log n) time.

    Parameters
    ----------
    n_nodes : int
        Number of nodes (sites), indexed ``0 .. n_nodes - 1``.
    edges : array_like of int, shape (m, 2)
        Candidate links, in any order and orientation.  Parallel links are allowed.
    weights : array_like of float, shape (m,)
        Price of each link, ``>= 0``.  Zero is valid; ``inf`` means impassable (the link is
        treated as absent).  NaN or negative values raise :class:`InputError` naming the link.
    roots : sequence of int, default=(0,)
        The sources; unique node indices.
    allow_forest : bool, default=False
        If the candidate graph leaves some nodes with no path to a root, raise
        :class:`DisconnectedError` (False) or give each such component its lowest-index node
        as an extra root (True); ``Tree.roots`` then lists the added roots after the given
        ones.
    node_order : array_like of int, shape (n_nodes,), optional
        A permutation of the nodes used as the internal memory layout (for example a
        space-filling-curve order of the coordinates, see
        :func:`mainspan.graph.candidates.spatial_order`).  It only affects speed: the result is
        identical with or without it.  Without it, graphs of ``LOCALITY_MIN_NODES`` (20,000)
        nodes or more run in a breadth-first numbering from the first root, so that a random
        numbering of the caller's costs no cache misses.

    Returns
    -------
    Tree
        ``parent``, ``parent_edge``, ``order``, ``roots``, ``root_of``, ``weight``.

    Raises
    ------
    InputError
        Bad shapes, indices out of range, self loops, NaN/negative weights, bad roots.
    DisconnectedError
        Some nodes cannot be reached from any root and ``allow_forest`` is False.  Its
        ``components`` attribute holds the component labels.

    Notes
    -----
    Ties are broken by the key ``(weight, lower node index, higher node index, link index)``
    of each link, compared lexicographically (indices are the caller's, not the internal
    ``node_order``).  All keys are distinct, so the minimum spanning forest under this order
    is unique: the same input always gives the same arrays, and ``order`` is the sequence in
    which Prim's algorithm takes nodes when it always extracts the node with the smallest
    key.

    References
    ----------
    .. [1] R. C. Prim, "Shortest connection networks and some generalizations", Bell System
       Technical Journal 36(6):1389-1401, 1957.
    .. [2] V. Jarník, "O jistém problému minimálním", Práce moravské přírodovědecké
       společnosti 6:57-63, 1930.

    Examples
    --------
    >>> import numpy as np
    >>> edges = np.array([[0, 1], [1, 2], [0, 2], [2, 3]])
    >>> weights = np.array([1.0, 2.0, 2.5, 0.5])
    >>> t = prim_tree(4, edges, weights)
    >>> t.parent.tolist(), t.parent_edge.tolist(), t.order.tolist(), t.weight
    ([-1, 0, 1, 2], [-1, 0, 1, 3], [0, 1, 2, 3], 3.5)

    Two sources grow a forest; each node joins the source that reaches it cheapest:

    >>> prim_tree(4, edges, weights, roots=(0, 3)).root_of.tolist()
    [0, 0, 3, 3]
    """
    n = _check_n_nodes(n_nodes)
    e = _check_edges(edges, n)
    w = _check_weights(weights, e)
    r = _check_roots(roots, n)

    if node_order is None and n >= LOCALITY_MIN_NODES:
        # the caller's numbering may be random: run in a breadth-first numbering instead
        orig = locality_order(n, e, w, start=r[0])
        label = np.empty(n, dtype=np.int64)
        label[orig] = np.arange(n, dtype=np.int64)
    elif node_order is None:
        orig = np.arange(n, dtype=np.int64)
        label = orig
    else:
        orig = np.asarray(node_order)
        is_perm = (orig.shape == (n,) and orig.dtype.kind in "iu"
                   and orig.min() >= 0 and orig.max() < n
                   and bool((np.bincount(orig.astype(np.int64), minlength=n) == 1).all()))
        if not is_perm:
            raise InputError(f"node_order must be a permutation of 0..{n - 1} (int array of "
                             f"shape ({n},)); got shape {orig.shape}, dtype {orig.dtype}; "
                             "pass Candidates.node_order or spatial_order(xy), or leave it out")
        orig = _plain(orig, np.int64)
        label = np.empty(n, dtype=np.int64)
        label[orig] = np.arange(n, dtype=np.int64)

    if n >= 2**31 or e.shape[0] >= 2**32:
        raise InputError(f"prim_tree handles fewer than 2**31 nodes and 2**32 links; got "
                         f"{n} nodes and {e.shape[0]} links; split the problem")
    indptr, buf = _build_csr(n, e[:, 0], e[:, 1], w, label)
    best_par, best_edge, order, count = _prim_kernel(n, indptr, buf, orig, label[r])
    if count < n:
        r = forest_roots(n, e, w, r, allow_forest=allow_forest)
        best_par, best_edge, order, count = _prim_kernel(n, indptr, buf, orig, label[r])
        assert count == n
    parent, parent_edge, order_o, root_of = _map_back(n, best_par, best_edge, order, orig, r)
    pe = parent_edge[parent_edge >= 0]
    weight = float(np.sum(w[pe]))  # in node order: deterministic
    return Tree(parent=_frozen(parent, np.int64), parent_edge=_frozen(parent_edge, np.int64),
                order=_frozen(order_o, np.int64), roots=_frozen(r, np.int64),
                root_of=_frozen(root_of, np.int64), weight=weight)
