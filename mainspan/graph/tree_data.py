"""Results of the tree stage (:class:`Tree`, :class:`Certificate`) and the input checks
shared by Prim's algorithm (:mod:`mainspan.graph.spanning`) and the optimality certificate
(:mod:`mainspan.graph.certificate`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np

from ..errors import InputError

__all__ = ["Tree", "Certificate"]


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
# Locality order (internal renumbering when the caller gives no node order)
# --------------------------------------------------------------------------------------------

#: below this many nodes the graph fits in cache and renumbering would only cost time
LOCALITY_MIN_NODES = 20_000


@numba.njit(cache=True)
def _bfs_order(n, eu, ev, w, start):
    """Breadth-first order of the finite-weight links' graph, from ``start`` then from the
    lowest node not yet reached, so neighbours get nearby internal numbers.

    A breadth-first front is how Prim's tree grows from a root over a mesh-like graph, so
    the nodes the heap touches together sit together in memory (the Cuthill-McKee idea
    without the degree sort).  Returns ``order`` with ``order[i]`` the caller's node that
    takes internal number ``i``.
    """
    m = eu.shape[0]
    deg = np.zeros(n + 1, dtype=np.int64)
    for k in range(m):
        if w[k] < np.inf:
            deg[eu[k] + 1] += 1
            deg[ev[k] + 1] += 1
    for i in range(n):
        deg[i + 1] += deg[i]
    fill = deg[:n].copy()
    nbr = np.empty(deg[n], dtype=np.int32)
    for k in range(m):
        if w[k] < np.inf:
            a = eu[k]
            b = ev[k]
            nbr[fill[a]] = b
            fill[a] += 1
            nbr[fill[b]] = a
            fill[b] += 1
    seen = np.zeros(n, dtype=np.bool_)
    order = np.empty(n, dtype=np.int64)
    head = 0
    tail = 0
    nxt = 0
    s = start
    while True:
        seen[s] = True
        order[tail] = s
        tail += 1
        while head < tail:
            u = order[head]
            head += 1
            for p in range(deg[u], deg[u + 1]):
                v = nbr[p]
                if not seen[v]:
                    seen[v] = True
                    order[tail] = v
                    tail += 1
        if tail >= n:
            break
        while seen[nxt]:
            nxt += 1
        s = nxt
    return order


def locality_order(n, edges, weights, start=0):
    """Internal node numbering with graph neighbours close together (see :func:`_bfs_order`).

    Only speed depends on it: Prim's algorithm and the certificate break ties on the caller's
    indices, whatever numbering they run in.
    """
    return _bfs_order(n, edges[:, 0], edges[:, 1], weights, int(start))
