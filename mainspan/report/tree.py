"""Walks of the layout's tree for the figures: distance to the root, longest paths.

References
----------
Wyllie, J.C. (1979) "The complexity of parallel computations", PhD thesis, Cornell
University (TR 79-387) (from memory)
— pointer jumping (path doubling) for sums along rooted trees.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["distance_to_root", "longest_paths"]


def _plt():
    """Select the headless Agg backend unless the caller already uses pyplot.

    Figures here are plain :class:`matplotlib.figure.Figure` objects (no
    pyplot state), so an interactive session that has imported pyplot keeps
    its own backend.
    """
    import sys

    import matplotlib

    if "matplotlib.pyplot" not in sys.modules:
        matplotlib.use("Agg")
    return matplotlib


# ------------------------------------------------------------------ tree helpers
def _parent_arrays(layout):
    n = layout.n_nodes
    ends = np.asarray(layout.link_ends, np.int64).reshape(-1, 2)
    parent = np.full(n, -1, np.int64)
    parent[ends[:, 1]] = ends[:, 0]
    plink = np.full(n, -1, np.int64)
    plink[ends[:, 1]] = np.arange(len(ends))
    return parent, plink


def distance_to_root(layout, *, column="length_m"):
    """Cumulative ``column`` (default plan length) from each node's root, by pointer jumping."""
    n = layout.n_nodes
    parent, plink = _parent_arrays(layout)
    w = np.asarray(layout.links.get(column, np.zeros(layout.n_links)), float)
    acc = np.where(plink >= 0, w[np.maximum(plink, 0)], 0.0)
    anc = parent.copy()
    # after step k, acc[i] sums the 2^k links above i and anc[i] is the 2^k-th ancestor
    for _ in range(max(1, int(math.ceil(math.log2(max(n, 2)))) + 1)):
        live = anc >= 0
        if not live.any():
            break
        a = anc[live]
        acc[live] += acc[a]
        anc[live] = anc[a]
    return acc


def _nearest_marked_ancestor(parent, marked):
    """For each node, the nearest ancestor-or-self that is marked (roots count as marked)."""
    up = np.where(marked | (parent < 0), np.arange(len(parent)), parent)
    for _ in range(max(1, int(math.ceil(math.log2(max(len(parent), 2)))) + 1)):
        nxt = up[up]
        if np.array_equal(nxt, up):
            break
        up = nxt
    return up


def longest_paths(layout, *, k=3):
    """Up to ``k`` paths (node index arrays, top to bottom): the longest root→node
    path by plan length, then repeatedly the longest branch off what is covered.
    """
    n = layout.n_nodes
    if layout.n_links == 0 or n == 0:
        return []
    parent, _ = _parent_arrays(layout)
    dist = distance_to_root(layout)
    covered = np.zeros(n, bool)
    out = []
    for _ in range(k):
        top = _nearest_marked_ancestor(parent, covered)
        gain = dist - dist[top]
        gain[covered] = -1.0
        j = int(np.argmax(gain))              # ties → lowest node index
        if gain[j] <= 0:
            break
        path = layout.path_to_root(j)[::-1]
        if covered.any():
            start = int(top[j])
            path = path[int(np.flatnonzero(path == start)[0]):]
        covered[layout.path_to_root(j)] = True
        out.append(path)
    return out
