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

import math
from dataclasses import dataclass

import numba
import numpy as np

from ..errors import CertificateError, DisconnectedError, InputError

__all__ = [
    "Tree",
    "Certificate",
    "prim_tree",
    "certify_tree",
    "check_certificate",
    "connected_components",
]


# --------------------------------------------------------------------------------------------
# Results
# --------------------------------------------------------------------------------------------

def _plain(a, dtype):
    """C-contiguous, writable array of *dtype* (numba compiles read-only arrays separately,
    so results of other stages, which are frozen, are copied once rather than compiled for)."""
    a = np.ascontiguousarray(a, dtype=dtype)
    return a if a.flags.writeable else a.copy()


def _frozen(a, dtype):
    a = np.ascontiguousarray(a, dtype=dtype)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, eq=False)
class Tree:
    """A rooted spanning tree (or forest) over candidate links.

    Attributes
    ----------
    parent : ndarray of int64, shape (n,)
        The node each node hangs from; -1 at roots.
    parent_edge : ndarray of int64, shape (n,)
        Index into the candidate ``edges`` of the link to the parent; -1 at roots.
    order : ndarray of int64, shape (n,)
        The nodes in the sequence Prim took them: the roots first, in the order given, then
        every other node as it joined.  A permutation of ``0 .. n-1``; a node always comes
        after its parent.
    roots : ndarray of int64
        The roots (the given ones, then any added by ``allow_forest=True``).
    root_of : ndarray of int64, shape (n,)
        The root each node hangs from.
    weight : float
        Total weight of the tree links.
    """

    parent: np.ndarray
    parent_edge: np.ndarray
    order: np.ndarray
    roots: np.ndarray
    root_of: np.ndarray
    weight: float

    @property
    def n_nodes(self) -> int:
        """Number of nodes."""
        return int(self.parent.shape[0])

    @property
    def n_links(self) -> int:
        """Number of tree links: ``n_nodes - len(roots)``."""
        return int(self.parent.shape[0] - self.roots.shape[0])

    @property
    def rank(self) -> np.ndarray:
        """Position in which each node joined: ``rank[order[i]] == i``."""
        rank = np.empty(self.order.shape[0], dtype=np.int64)
        rank[self.order] = np.arange(self.order.shape[0], dtype=np.int64)
        return rank

    @property
    def tree_edges(self) -> np.ndarray:
        """Indices into ``edges`` of the tree links, in the order they joined."""
        pe = self.parent_edge[self.order]
        return pe[pe >= 0]


@dataclass(frozen=True)
class Certificate:
    """Outcome of :func:`certify_tree`.

    Attributes
    ----------
    ok : bool
        True if the tree is structurally valid and minimum over the candidates.
    n_checked : int
        Number of non-tree candidate links checked (links with ``inf`` weight are absent
        and not counted).
    worst_margin : float
        Minimum over the non-tree links of ``weight - heaviest tree link on its cycle``;
        ``>= 0`` when ``ok``, ``inf`` when there is nothing to check.
    violating_edge : int
        A link that breaks the cycle property or the tree structure; -1 if ``ok`` or if the
        fault is not tied to one link.
    method : str
        How the check was made.
    detail : str
        One line explaining a failure; empty when ``ok``.
    """

    ok: bool
    n_checked: int
    worst_margin: float
    violating_edge: int
    method: str
    detail: str = ""


# --------------------------------------------------------------------------------------------
# Validation
# --------------------------------------------------------------------------------------------

def _check_n_nodes(n_nodes):
    if isinstance(n_nodes, (bool, np.bool_)) or not isinstance(n_nodes, (int, np.integer)):
        raise InputError(f"n_nodes must be a non-negative integer; got {n_nodes!r} "
                         f"({type(n_nodes).__name__}); pass the number of sites")
    if n_nodes < 1:
        raise InputError(f"n_nodes must be at least 1; got {n_nodes}; pass the number of sites")
    return int(n_nodes)


def _check_edges(edges, n_nodes):
    e = np.asarray(edges)
    if e.size == 0:
        return np.zeros((0, 2), dtype=np.int64)
    if e.ndim != 2 or e.shape[1] != 2:
        raise InputError(f"edges must be an integer array of shape (m, 2); got shape {e.shape}; "
                         "pass one row (i, j) per candidate link")
    if e.dtype.kind not in "iu":
        raise InputError(f"edges must hold integer node indices; got dtype {e.dtype}; "
                         "convert with edges.astype(np.int64) after checking they are whole")
    e = _plain(e, np.int64)
    k, n_out, n_loop = _scan_edges(e, n_nodes)
    if n_out:
        raise InputError(f"link {k} ({int(e[k, 0])}, {int(e[k, 1])}) has a node index outside "
                         f"0..{n_nodes - 1} ({n_out} such links); fix the candidate links "
                         "or n_nodes")
    if n_loop:
        raise InputError(f"link {k} ({int(e[k, 0])}, {int(e[k, 1])}) joins a node to itself "
                         f"({n_loop} such links); drop self loops from the candidate links")
    return e


@numba.njit(cache=True)
def _scan_edges(e, n):
    """First link out of range (else first self loop), and the counts of each fault."""
    first_out = -1
    first_loop = -1
    n_out = 0
    n_loop = 0
    for k in range(e.shape[0]):
        a = e[k, 0]
        b = e[k, 1]
        if a < 0 or a >= n or b < 0 or b >= n:
            n_out += 1
            if first_out < 0:
                first_out = k
        elif a == b:
            n_loop += 1
            if first_loop < 0:
                first_loop = k
    return (first_out if n_out else first_loop), n_out, n_loop


@numba.njit(cache=True)
def _scan_weights(w):
    first = -1
    count = 0
    for k in range(w.shape[0]):
        if not w[k] >= 0.0:  # NaN or negative
            count += 1
            if first < 0:
                first = k
    return first, count


def _check_weights(weights, edges):
    m = edges.shape[0]
    w = np.asarray(weights)
    if w.ndim != 1 or w.shape[0] != m:
        raise InputError(f"weights must be a 1-D array with one value per link ({m}); "
                         f"got shape {w.shape}; pass weights[k] for edges[k]")
    if w.dtype.kind not in "fiub":
        raise InputError(f"weights must be numbers; got dtype {w.dtype}; pass float weights")
    w = _plain(w, np.float64)
    k, n_bad = _scan_weights(w)
    if n_bad:
        what = "NaN" if np.isnan(w[k]) else f"negative ({float(w[k])!r})"
        raise InputError(f"link {k} ({int(edges[k, 0])}, {int(edges[k, 1])}) has a {what} "
                         f"weight ({n_bad} such links); weights must be >= 0, or inf for an "
                         "impassable link")
    return w


def _check_roots(roots, n_nodes):
    r = np.atleast_1d(np.asarray(roots))
    if r.ndim != 1 or r.size == 0:
        raise InputError(f"roots must be a non-empty sequence of node indices; got {roots!r}; "
                         "pass e.g. roots=(0,)")
    if r.dtype.kind not in "iu":
        raise InputError(f"roots must be integer node indices; got {roots!r}; "
                         "pass e.g. roots=(0,)")
    r = r.astype(np.int64)
    bad = r[(r < 0) | (r >= n_nodes)]
    if bad.size:
        raise InputError(f"root {int(bad[0])} is outside 0..{n_nodes - 1}; "
                         "pass node indices of the sources")
    u, c = np.unique(r, return_counts=True)
    if (c > 1).any():
        raise InputError(f"root {int(u[c > 1][0])} is given more than once in roots; "
                         "list each source once")
    return r


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
        identical with or without it.

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

    if node_order is None:
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


# --------------------------------------------------------------------------------------------
# Certificate
# --------------------------------------------------------------------------------------------

@numba.njit(cache=True)
def _structure(n, parent, parent_edge, eu, ev, w, is_root):
    """Check the tree links and find a top-down order (parents before children).

    Returns (code, node, topo) with code 0 if valid; otherwise the first fault found.
    """
    m = eu.shape[0]
    for v in range(n):
        p = parent[v]
        k = parent_edge[v]
        if is_root[v]:
            if p != -1 or k != -1:
                return 1, v, np.empty(0, dtype=np.int64)
            continue
        if p < 0 or p >= n or p == v:
            return 2, v, np.empty(0, dtype=np.int64)
        if k < 0 or k >= m:
            return 3, v, np.empty(0, dtype=np.int64)
        if not ((eu[k] == v and ev[k] == p) or (eu[k] == p and ev[k] == v)):
            return 4, v, np.empty(0, dtype=np.int64)
        if not w[k] < np.inf:
            return 5, v, np.empty(0, dtype=np.int64)
    # children lists, then breadth-first from the roots: a node not reached lies on a cycle
    cnt = np.zeros(n + 1, dtype=np.int64)
    for v in range(n):
        if not is_root[v]:
            cnt[parent[v] + 1] += 1
    for i in range(n):
        cnt[i + 1] += cnt[i]
    fill = cnt[:n].copy()
    child = np.empty(cnt[n], dtype=np.int64)
    for v in range(n):
        if not is_root[v]:
            p = parent[v]
            child[fill[p]] = v
            fill[p] += 1
    topo = np.empty(n, dtype=np.int64)
    h = 0
    for v in range(n):
        if is_root[v]:
            topo[h] = v
            h += 1
    t = 0
    while t < h:
        u = topo[t]
        t += 1
        for q in range(cnt[u], cnt[u + 1]):
            topo[h] = child[q]
            h += 1
    if h < n:
        seen = np.zeros(n, dtype=np.bool_)
        for i in range(h):
            seen[topo[i]] = True
        for v in range(n):
            if not seen[v]:
                return 6, v, np.empty(0, dtype=np.int64)
    return 0, -1, topo


@numba.njit(cache=True)
def _path_max_check(n, parent, parent_edge, eu, ev, w, is_root, topo, in_tree):
    """Cycle-property check of every non-tree link, with skew-binary jump pointers.

    Node ``n`` is a virtual super-root, the parent of every root through a -inf link, so a
    link between two root trees is checked against the two paths to their roots.
    Each node keeps one jump pointer and the heaviest link on the jump (Myers 1983), which
    answers a path-maximum query in O(log n) time with O(n) memory.
    """
    par = np.empty(n + 1, dtype=np.int64)
    up_w = np.empty(n + 1, dtype=np.float64)   # weight of the link to the parent
    depth = np.empty(n + 1, dtype=np.int64)
    jump = np.empty(n + 1, dtype=np.int64)
    jmax = np.empty(n + 1, dtype=np.float64)   # heaviest link from node up to (not past) jump
    sr = n
    par[sr] = sr
    up_w[sr] = -np.inf
    depth[sr] = 0
    jump[sr] = sr
    jmax[sr] = -np.inf
    for i in range(n):
        v = topo[i]
        if is_root[v]:
            p = sr
            wv = -np.inf
        else:
            p = parent[v]
            wv = w[parent_edge[v]]
        par[v] = p
        up_w[v] = wv
        depth[v] = depth[p] + 1
        jp = jump[p]
        if p != sr and depth[p] - depth[jp] == depth[jp] - depth[jump[jp]]:
            jump[v] = jump[jp]
            jmax[v] = max(wv, max(jmax[p], jmax[jp]))
        else:
            jump[v] = p
            jmax[v] = wv
    m = eu.shape[0]
    n_checked = 0
    worst = np.inf
    worst_k = -1
    bad_k = -1
    for k in range(m):
        if in_tree[k] or not w[k] < np.inf:
            continue
        n_checked += 1
        a = eu[k]
        b = ev[k]
        mx = -np.inf
        if depth[a] < depth[b]:
            a, b = b, a
        while depth[a] > depth[b]:
            if depth[jump[a]] >= depth[b]:
                mx = max(mx, jmax[a])
                a = jump[a]
            else:
                mx = max(mx, up_w[a])
                a = par[a]
        while a != b:
            if jump[a] != jump[b]:
                mx = max(mx, max(jmax[a], jmax[b]))
                a = jump[a]
                b = jump[b]
            else:
                mx = max(mx, max(up_w[a], up_w[b]))
                a = par[a]
                b = par[b]
        margin = w[k] - mx
        if margin < worst:
            worst = margin
            worst_k = k
        if margin < 0 and bad_k < 0:
            bad_k = k
    return n_checked, worst, worst_k, bad_k


_FAULTS = {
    1: "root {v} has a parent or parent link",
    2: "node {v} has no valid parent but is not a root",
    3: "node {v} has parent_edge outside the candidate links",
    4: "node {v}: its parent_edge does not join it to its parent",
    5: "node {v} hangs from an impassable (inf) link",
    6: "node {v} lies on a cycle or is cut off from every root",
}


def certify_tree(n_nodes, edges, weights, tree: Tree) -> Certificate:
    """Prove (or refute) that *tree* is a minimum spanning forest over the candidates.

    Checks the structure of the tree (parent links are candidate links joining the right
    nodes, ``n - len(roots)`` links, no cycles, every node reaches a root) and then the cycle
    property for every non-tree candidate link: its weight is at least the heaviest tree link
    on the tree path between its ends.  Links whose ends hang from different roots are
    checked against the two paths to their roots, as if the roots were joined through a
    super-root by links of weight -inf.  Path maxima come from skew-binary jump pointers
    over the rooted tree (O(log n) per link, O(n) memory), all numba-compiled.

    Parameters
    ----------
    n_nodes : int
        Number of nodes.
    edges : array_like of int, shape (m, 2)
        The candidate links the tree was grown on.
    weights : array_like of float, shape (m,)
        Their weights; ``inf`` links are absent and not checked.
    tree : Tree
        The tree to check (from :func:`prim_tree` or elsewhere).

    Returns
    -------
    Certificate
        Never raises for a wrong tree; ``ok`` is False and ``detail`` says why.  Use
        :func:`check_certificate` to turn a failure into an exception.

    References
    ----------
    .. [1] R. E. Tarjan, "Applications of path compression on balanced trees", Journal of
       the ACM 26(4):690-715, 1979.
    .. [2] E. W. Myers, "An applicative random-access stack", Information Processing Letters
       17(5):241-248, 1983.

    Examples
    --------
    >>> import numpy as np
    >>> edges = np.array([[0, 1], [1, 2], [0, 2]])
    >>> weights = np.array([1.0, 2.0, 2.5])
    >>> cert = certify_tree(3, edges, weights, prim_tree(3, edges, weights))
    >>> cert.ok, cert.n_checked, cert.worst_margin
    (True, 1, 0.5)
    """
    method = "structure + cycle property (path maxima by skew-binary jump pointers)"
    n = _check_n_nodes(n_nodes)
    e = _check_edges(edges, n)
    w = _check_weights(weights, e)

    def fail(detail, k=-1):
        return Certificate(ok=False, n_checked=0, worst_margin=-np.inf, violating_edge=int(k),
                           method=method, detail=detail)

    parent = np.asarray(tree.parent)
    parent_edge = np.asarray(tree.parent_edge)
    roots = np.asarray(tree.roots)
    if parent.shape != (n,) or parent_edge.shape != (n,):
        return fail(f"tree arrays have shape {parent.shape}/{parent_edge.shape}, "
                    f"expected ({n},)")
    if roots.ndim != 1 or roots.size == 0 or (roots < 0).any() or (roots >= n).any():
        return fail("tree.roots is empty or holds indices out of range")
    if np.unique(roots).size != roots.size:
        return fail("tree.roots lists a node twice")
    parent = parent.astype(np.int64)
    parent_edge = parent_edge.astype(np.int64)
    is_root = np.zeros(n, dtype=np.bool_)
    is_root[roots.astype(np.int64)] = True
    n_links = int(np.count_nonzero(parent_edge >= 0))
    if n_links != n - roots.size or np.count_nonzero(parent < 0) != roots.size:
        return fail(f"tree has {n_links} links and {np.count_nonzero(parent < 0)} parentless "
                    f"nodes; expected {n - roots.size} links and {roots.size} roots")
    code, v, topo = _structure(n, parent, parent_edge, e[:, 0], e[:, 1], w, is_root)
    if code:
        k = int(parent_edge[v]) if 0 <= parent_edge[v] < e.shape[0] else -1
        return fail(_FAULTS[code].format(v=int(v)), k)
    pe = parent_edge[parent_edge >= 0]
    total = float(np.sum(w[pe]))
    if not math.isclose(total, float(tree.weight), rel_tol=1e-9, abs_tol=1e-9):
        return fail(f"tree.weight {tree.weight!r} differs from the sum of its links {total!r}")
    in_tree = np.zeros(e.shape[0], dtype=np.bool_)
    in_tree[pe] = True
    n_checked, worst, worst_k, bad_k = _path_max_check(n, parent, parent_edge, e[:, 0],
                                                       e[:, 1], w, is_root, topo, in_tree)
    if bad_k >= 0:
        return Certificate(ok=False, n_checked=int(n_checked), worst_margin=float(worst),
                           violating_edge=int(bad_k), method=method,
                           detail=(f"link {bad_k} ({int(e[bad_k, 0])}, {int(e[bad_k, 1])}) "
                                   f"of weight {float(w[bad_k])!r} is lighter than a tree link on "
                                   f"its cycle (margin {worst!r})"))
    return Certificate(ok=True, n_checked=int(n_checked), worst_margin=float(worst),
                       violating_edge=-1, method=method)


def check_certificate(cert: Certificate) -> Certificate:
    """Raise :class:`CertificateError` if *cert* failed; return it unchanged otherwise.

    Examples
    --------
    >>> check_certificate(Certificate(True, 0, float("inf"), -1, "none")).ok
    True
    """
    if not cert.ok:
        raise CertificateError(f"the spanning tree is not minimum over the candidate links: "
                               f"{cert.detail or 'structure check failed'}; this is a bug in "
                               "mainspan, please report it with the input")
    return cert
