"""Figures of a layout (matplotlib, Agg backend): tree walks, saving, and the
figure modules' public names.

* :func:`long_section` (:mod:`.section`) — profile with data bands along one
  path of the tree, one stated vertical exaggeration.
* :func:`plan_map` (:mod:`.planmap`) — the labelled plan for review.
* :func:`longest_paths` — the longest root-to-node path and the next-longest
  branches off the paths already taken, found with vectorised pointer jumping
  over ``link_ends`` (no per-node Python loop).

Saved files are reproducible: SVG ids are salted with a fixed string and no
dates or software names are written into PNG, SVG or PDF metadata.

References
----------
Wyllie, J.C. (1979) "The complexity of parallel computations", PhD thesis, Cornell
University (TR 79-387) (from memory)
— pointer jumping (path doubling) for sums along rooted trees.
"""

from __future__ import annotations

import io
import math
import os

import numpy as np

from ..errors import InputError

__all__ = ["long_section", "save_long_section", "plan_map", "save_figure", "longest_paths", "hillshade",
           "distance_to_root", "figure_bytes"]

_SALT = "mainspan"


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


def figure_bytes(fig, fmt):
    """Render a figure to bytes without dates or software names (reproducible)."""
    import matplotlib

    meta = {"png": {"Software": None}, "svg": {"Date": None, "Creator": None},
            "pdf": {"CreationDate": None, "ModDate": None, "Creator": None, "Producer": None}}
    if fmt not in meta:
        raise InputError(f"figure format {fmt!r}: expected png, svg or pdf")
    buf = io.BytesIO()
    with matplotlib.rc_context({"svg.hashsalt": _SALT, "svg.fonttype": "path",
                                "pdf.compression": 6}):
        fig.savefig(buf, format=fmt, metadata=meta[fmt], dpi=110 if fmt == "png" else "figure")
    return buf.getvalue()


def save_figure(fig, out_path, *, overwrite=False):
    """Save a figure as PNG, SVG or PDF by extension, atomically."""
    from ..writers.tables import atomic_write

    ext = os.path.splitext(os.fspath(out_path))[1].lower().lstrip(".")
    if ext not in ("png", "svg", "pdf"):
        raise InputError(f"figure output {os.fspath(out_path)!r}: extension must be .png, .svg "
                         "or .pdf")
    return atomic_write(out_path, figure_bytes(fig, ext), overwrite=overwrite, what="figure")


def save_long_section(layout, out_path, *, overwrite=False, **kw):
    """Draw :func:`long_section` (keywords passed on) and save it by extension."""
    from .section import long_section

    return save_figure(long_section(layout, **kw), out_path, overwrite=overwrite)




def __getattr__(name):
    # the figure functions live in their own modules; import them on first use
    if name in ("long_section", "section_data", "fit_exaggeration"):
        from . import section

        return getattr(section, name)
    if name in ("plan_map", "hillshade"):
        from . import planmap

        return getattr(planmap, name)
    raise AttributeError(name)
