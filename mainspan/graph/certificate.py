"""Optimality certificate of a spanning tree or forest: structure and the cycle property.

:func:`certify_tree` proves, link by link, that no candidate left out of a tree could have made
it cheaper (path maxima by skew-binary jump pointers); :func:`check_certificate` turns a failed
certificate into an exception.

References
----------
(Volume and page details are from memory.)

.. [1] R. E. Tarjan, "Applications of path compression on balanced trees", Journal of the ACM
   26(4):690-715, 1979 (verifying a minimum spanning tree by path maxima).
.. [2] E. W. Myers, "An applicative random-access stack", Information Processing Letters
   17(5):241-248, 1983 (the skew-binary jump pointers used for path maxima).
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ..errors import CertificateError
from .tree_data import Certificate, Tree, _check_edges, _check_n_nodes, _check_weights

__all__ = ["certify_tree", "check_certificate"]


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
    # work in the top-down numbering (node topo[i] is number i): parents come before their
    # children and a node's subtree sits near it, so the walks below touch nearby memory
    # whatever the caller's numbering; the answer does not depend on the numbering
    label = np.empty(n, dtype=np.int64)
    for i in range(n):
        label[topo[i]] = i
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
    for v in range(n):
        u = topo[v]
        if is_root[u]:
            p = sr
            wv = -np.inf
        else:
            p = label[parent[u]]
            wv = w[parent_edge[u]]
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
        a = label[eu[k]]
        b = label[ev[k]]
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
    >>> from mainspan.graph.spanning import prim_tree
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
