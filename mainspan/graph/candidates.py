"""Candidate links between sites: the links the spanning tree may choose from.

A *builder* proposes links from the site coordinates; the framework here validates the input,
shifts far-from-origin coordinates to a local origin, runs one builder or a union of several
(``"delaunay+knn"``), normalises the result (``i < j``, sorted, unique), drops links longer
than ``max_link_m`` and records which builder proposed each link.

Builders register in :data:`CANDIDATE_BUILDERS` (entry-point group ``mainspan.candidates``);
a builder is ``fn(xy, *, k, max_link_m) -> int array (m, 2)`` in any order and orientation.
It receives coordinates already shifted to the local origin.

References
----------
(Volume and page details other than Prim's and Shamos & Hoey's are from memory.)

.. [1] B. Delaunay, "Sur la sphère vide", Bulletin de l'Académie des Sciences de l'URSS,
   Classe des sciences mathématiques et naturelles 6:793-800, 1934.
.. [2] M. I. Shamos and D. Hoey, "Closest-point problems", 16th Annual IEEE Symposium on
   Foundations of Computer Science (FOCS), 151-162, 1975 (the Euclidean minimum spanning
   tree is a subgraph of the Delaunay triangulation).
.. [3] C. B. Barber, D. P. Dobkin and H. Huhdanpaa, "The Quickhull algorithm for convex
   hulls", ACM Transactions on Mathematical Software 22(4):469-483, 1996 (Qhull).
.. [4] D. Hilbert, "Über die stetige Abbildung einer Linie auf ein Flächenstück",
   Mathematische Annalen 38:459-460, 1891 (the space-filling curve used to order points).
.. [5] L. Guibas and J. Stolfi, "Primitives for the manipulation of general subdivisions and
   the computation of Voronoi diagrams", ACM Transactions on Graphics 4(2):74-123, 1985
   (the incremental method GEOS implements; from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np

from ..errors import InputError
from ..plugins import Registry
from .triangulation import (_geos, _n_cpus, _qhull, _qhull_split,  # noqa: F401 - older import path
                            _triangulate, spatial_order)

__all__ = [
    "CANDIDATE_BUILDERS",
    "Candidates",
    "build_candidates",
    "normalize_edges",
    "spatial_order",
]

CANDIDATE_BUILDERS = Registry("candidate builder", "mainspan.candidates", option="--candidates")


# --------------------------------------------------------------------------------------------
# Result
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class Candidates:
    """Normalised candidate links.

    Attributes
    ----------
    edges : ndarray of int64, shape (m, 2)
        ``edges[:, 0] < edges[:, 1]``, lexicographically sorted, no duplicates.
    origin : ndarray of uint8, shape (m,)
        Bit ``i`` set when builder ``origin_names[i]`` proposed the link.
    origin_names : tuple of str
        Builder names, one per bit.
    method : str
        The builders run, joined by ``"+"``.
    n_dropped_long : int
        Links dropped because they were longer than ``max_link_m``.
    node_order : ndarray of int64, shape (n,)
        The sites along a Hilbert curve (:func:`spatial_order`); pass it to
        ``prim_tree(..., node_order=...)`` to lay the graph out for memory locality (faster,
        same result).
    """

    edges: np.ndarray
    origin: np.ndarray
    origin_names: tuple
    method: str
    n_dropped_long: int = 0
    node_order: np.ndarray | None = None

    @property
    def n_links(self) -> int:
        """Number of candidate links."""
        return int(self.edges.shape[0])

    def proposed_by(self, name: str) -> np.ndarray:
        """Boolean mask of the links proposed by builder *name*."""
        if name not in self.origin_names:
            raise InputError(f"builder {name!r} was not run for these candidates; "
                             f"ran: {', '.join(self.origin_names)}")
        return (self.origin & np.uint8(1 << self.origin_names.index(name))) != 0


# --------------------------------------------------------------------------------------------
# Kernels
# --------------------------------------------------------------------------------------------

@numba.njit(cache=True)
def _sorted_unique_pairs(a, b, n):
    """(lo, hi) rows from pairs (a, b): i < j, lexicographically sorted, unique.

    A counting sort on the lower index, then a sort of each (short) row: O(m + n) for the
    near-constant degrees of candidate graphs.  Self pairs are dropped.
    """
    m = a.shape[0]
    start = np.zeros(n + 1, dtype=np.int64)
    for k in range(m):
        x = a[k]
        y = b[k]
        if x != y:
            start[min(x, y) + 1] += 1
    for i in range(n):
        start[i + 1] += start[i]
    fill = start[:n].copy()
    col = np.empty(start[n], dtype=np.int64)
    for k in range(m):
        x = a[k]
        y = b[k]
        if x != y:
            lo = min(x, y)
            col[fill[lo]] = max(x, y)
            fill[lo] += 1
    out = np.empty((start[n], 2), dtype=np.int64)
    w = 0
    for i in range(n):
        s = start[i]
        e = start[i + 1]
        if e - s > 24:
            col[s:e] = np.sort(col[s:e])
        else:
            for p in range(s + 1, e):
                v = col[p]
                q = p - 1
                while q >= s and col[q] > v:
                    col[q + 1] = col[q]
                    q -= 1
                col[q + 1] = v
        last = -1
        for p in range(s, e):
            v = col[p]
            if v != last:
                out[w, 0] = i
                out[w, 1] = v
                w += 1
                last = v
    return out[:w].copy()



def normalize_edges(edges, n_nodes) -> np.ndarray:
    """Normalise links: ``i < j``, lexicographically sorted, duplicates and self loops dropped.

    Equivalent to encoding each link as ``min * n_nodes + max`` and taking ``np.unique``,
    computed by a counting sort in O(m + n).

    Parameters
    ----------
    edges : array_like of int, shape (m, 2)
        Links in any order and orientation.
    n_nodes : int
        Number of nodes; every index must be in ``0 .. n_nodes - 1``.

    Returns
    -------
    ndarray of int64, shape (m', 2)

    Examples
    --------
    >>> normalize_edges([[2, 0], [0, 2], [1, 0], [1, 1]], 3).tolist()
    [[0, 1], [0, 2]]
    """
    e = np.asarray(edges)
    if e.size == 0:
        return np.zeros((0, 2), dtype=np.int64)
    if e.ndim != 2 or e.shape[1] != 2 or e.dtype.kind not in "iu":
        raise InputError(f"edges must be an integer array of shape (m, 2); got shape {e.shape}, "
                         f"dtype {e.dtype}; pass one row (i, j) per link")
    e = e.astype(np.int64, copy=False)
    if e.min() < 0 or e.max() >= n_nodes:
        k = int(np.flatnonzero(((e < 0) | (e >= n_nodes)).any(axis=1))[0])
        raise InputError(f"link {k} ({int(e[k, 0])}, {int(e[k, 1])}) has a node index outside "
                         f"0..{n_nodes - 1}; fix the links or n_nodes")
    return _sorted_unique_pairs(np.ascontiguousarray(e[:, 0]), np.ascontiguousarray(e[:, 1]),
                                int(n_nodes))


# --------------------------------------------------------------------------------------------
# Builders
# --------------------------------------------------------------------------------------------

def _knn_pairs(xy, k):
    from scipy.spatial import cKDTree

    n = xy.shape[0]
    kk = min(int(k) + 1, n)  # +1: a point is its own nearest neighbour
    _, idx = cKDTree(xy).query(xy, k=kk, workers=-1)
    idx = np.asarray(idx, dtype=np.int64).reshape(n, kk)
    rows = np.repeat(np.arange(n, dtype=np.int64), kk)
    return np.stack([rows, idx.ravel()], axis=1)  # self pairs dropped by normalisation


def _line_edges(xy, k):
    """Links for points on one line: consecutive points along it, plus k nearest neighbours.

    For collinear points the Delaunay graph degenerates to exactly this path.
    """
    c = xy - xy.mean(axis=0)
    _, _, vt = np.linalg.svd(c.T @ c)
    t = c @ vt[0]
    order = np.argsort(t, kind="stable")
    path = np.stack([order[:-1], order[1:]], axis=1)
    return np.concatenate([path, _knn_pairs(xy, k)])


def _is_collinear(xy):
    c = xy - xy.mean(axis=0)
    ev = np.linalg.eigvalsh(c.T @ c)
    return not ev[0] > 1e-20 * max(ev[1], 1e-300) or ev[1] == 0.0


# Below this many points one Qhull run is as fast as two in parallel plus the merge.
_SPLIT_MIN_POINTS = 200_000


def _idle_cpus(interval_s=0.05):
    """CPUs left idle by the whole machine over a short interval (``/proc/stat``), or the
    CPU count less the 1-minute load average where there is no ``/proc/stat``."""
    import os
    import time

    def read():
        with open("/proc/stat") as f:
            v = [int(x) for x in f.readline().split()[1:]]
        return v[3] + (v[4] if len(v) > 4 else 0), sum(v)   # idle + iowait, all

    ncpu = os.cpu_count() or 1
    try:
        i0, t0 = read()
        time.sleep(interval_s)
        i1, t1 = read()
    except (OSError, ValueError, IndexError):
        try:
            return max(0.0, ncpu - os.getloadavg()[0])
        except OSError:
            return float(ncpu)
    return ncpu * (i1 - i0) / max(1, t1 - t0)


def _split_pays(n, split_at):
    """Two half triangulations beat one only when two cores are free to run them: on a
    loaded machine the threads would share one core and add the merge (measured at 1 M
    points on a busy 2-core machine: 15.8 s split vs 10.9 s whole)."""
    return n >= max(split_at, 8) and _n_cpus() >= 2 and _idle_cpus() >= 1.5


@CANDIDATE_BUILDERS.register("delaunay")
def delaunay_links(xy, *, k=8, max_link_m=None, split_min_points=None):
    """Edges of the Delaunay triangulation.

    The triangulation is GEOS's (shapely), accepted only when it passes the Euler-formula
    check of ``_geos``; otherwise Qhull's (scipy), fed points in Hilbert order.  From
    ``split_min_points`` points on (default 200,000) the plane is cut in two halves
    triangulated in parallel and merged exactly (see ``_qhull_split``) when two cores are
    idle at that moment (``/proc/stat`` over 50 ms); if they are not, or the merge cannot
    be confirmed, one Qhull run is made instead.  Both give the same links for points in
    general position.  Collinear points, where no triangle exists,
    fall back to the path along the line plus ``k`` nearest neighbours; points Qhull leaves
    out (coincident with another point) are joined to their nearest neighbour.
    """
    from scipy.spatial import QhullError, cKDTree

    n = xy.shape[0]
    if n < 3 or _is_collinear(xy):
        return _line_edges(xy, k)
    split_at = _SPLIT_MIN_POINTS if split_min_points is None else split_min_points
    tri = _qhull_split(xy) if _split_pays(n, split_at) else None
    if tri is None:
        try:
            tri, _ = _triangulate(xy, np.arange(n, dtype=np.int64))
        except QhullError:
            return _line_edges(xy, k)
    pairs = np.concatenate([tri[:, [0, 1]], tri[:, [1, 2]], tri[:, [0, 2]]])
    used = np.zeros(n, dtype=bool)
    used[tri.ravel()] = True
    missing = np.flatnonzero(~used)
    if missing.size:
        _, idx = cKDTree(xy).query(xy[missing], k=2)
        near = np.where(idx[:, 0] == missing, idx[:, 1], idx[:, 0])
        pairs = np.concatenate([pairs, np.stack([missing, near], axis=1)])
    return pairs


@CANDIDATE_BUILDERS.register("knn")
def knn_links(xy, *, k=8, max_link_m=None):
    """Each point joined to its ``k`` nearest neighbours (scipy cKDTree), symmetric union."""
    return _knn_pairs(xy, k)


@CANDIDATE_BUILDERS.register("radius")
def radius_links(xy, *, k=8, max_link_m=None):
    """All pairs of points at most ``max_link_m`` apart (scipy cKDTree)."""
    from scipy.spatial import cKDTree

    if max_link_m is None:
        raise InputError("candidate builder 'radius' needs max_link_m (the search radius in "
                         "metres); got None; pass max_link_m=...")
    return cKDTree(xy).query_pairs(r=float(max_link_m), output_type="ndarray")


@CANDIDATE_BUILDERS.register("complete")
def complete_links(xy, *, k=8, max_link_m=None):
    """All pairs of points (n(n-1)/2 links)."""
    i, j = np.triu_indices(xy.shape[0], 1)
    return np.stack([i, j], axis=1)


# --------------------------------------------------------------------------------------------
# Framework
# --------------------------------------------------------------------------------------------

def _check_xy(xy):
    a = np.asarray(xy)
    if a.ndim != 2 or a.shape[1] != 2:
        raise InputError(f"xy must be a float array of shape (n, 2) in metres; got shape "
                         f"{a.shape}; pass one (x, y) row per site")
    if a.dtype.kind not in "fiu":
        raise InputError(f"xy must hold numbers; got dtype {a.dtype}; pass float coordinates")
    a = np.ascontiguousarray(a, dtype=np.float64)
    if a.shape[0] < 2:
        raise InputError(f"xy must hold at least 2 sites to link; got {a.shape[0]}; "
                         "add sites")
    bad = np.flatnonzero(~np.isfinite(a).all(axis=1))
    if bad.size:
        raise InputError(f"site {int(bad[0])} has a non-finite coordinate {a[bad[0]].tolist()} "
                         f"({bad.size} such sites); fix or drop those sites")
    return a


def _check_options(k, max_link_m, max_complete_nodes):
    if isinstance(k, (bool, np.bool_)) or not isinstance(k, (int, np.integer)) or k < 1:
        raise InputError(f"k (neighbours per site) must be an integer >= 1; got {k!r}; "
                         "pass e.g. k=8")
    if max_link_m is not None:
        try:
            ml = float(max_link_m)
        except (TypeError, ValueError):
            ml = float("nan")
        if isinstance(max_link_m, (bool, np.bool_)) or not (np.isfinite(ml) and ml > 0):
            raise InputError(f"max_link_m must be a finite length > 0 in metres or None; got "
                             f"{max_link_m!r}; pass e.g. max_link_m=500.0")
        max_link_m = ml
    if (isinstance(max_complete_nodes, (bool, np.bool_))
            or not isinstance(max_complete_nodes, (int, np.integer)) or max_complete_nodes < 2):
        raise InputError(f"max_complete_nodes must be an integer >= 2; got "
                         f"{max_complete_nodes!r}; pass e.g. max_complete_nodes=5000")
    return int(k), max_link_m, int(max_complete_nodes)


def _parse_method(method):
    if not isinstance(method, str) or not method.strip():
        raise InputError(f"method must be a builder name or names joined by '+', e.g. "
                         f"'delaunay+knn'; got {method!r}; valid names are: "
                         f"{', '.join(CANDIDATE_BUILDERS.names())}")
    names = []
    for part in method.split("+"):
        name = part.strip().lower()
        CANDIDATE_BUILDERS.get(name)  # unknown name -> InputError listing the valid ones
        if name not in names:
            names.append(name)
    if len(names) > 8:
        raise InputError(f"method {method!r} unites {len(names)} builders; at most 8 fit the "
                         "origin bitmask; use fewer")
    return names


def build_candidates(xy, method="delaunay", *, k=8, max_link_m=None,
                     max_complete_nodes=5000) -> Candidates:
    """Propose candidate links between sites.

    Parameters
    ----------
    xy : array_like of float, shape (n, 2)
        Site coordinates in a metric CRS (metres), ``n >= 2``, finite.  Coordinates far from
        the origin (UTM northings near 5e6 m) are shifted to a local origin first, so the
        result does not depend on where the sites lie.
    method : str, default="delaunay"
        A builder name, or several joined by ``"+"`` for their union (``"delaunay+knn"``).
        Built in: ``delaunay`` (the Delaunay triangulation, which contains a Euclidean
        minimum spanning tree), ``knn`` (each site to its ``k`` nearest neighbours),
        ``radius`` (all pairs within ``max_link_m``), ``complete`` (all pairs, for up to
        ``max_complete_nodes`` sites).  More can be registered in
        :data:`CANDIDATE_BUILDERS`.
    k : int, default=8
        Neighbours per site for ``knn`` (and for the collinear fall-back of ``delaunay``).
    max_link_m : float, optional
        Longest link kept, in metres (any builder); the search radius of ``radius``.
    max_complete_nodes : int, default=5000
        ``complete`` refuses more sites than this (its links grow as n²).

    Returns
    -------
    Candidates
        ``edges`` (int64 (m, 2), ``i < j``, sorted, unique), ``origin`` bitmask,
        ``origin_names``, ``method``, ``n_dropped_long``.

    Raises
    ------
    InputError
        Bad coordinates or options, an unknown builder, ``radius`` without ``max_link_m``,
        ``complete`` above ``max_complete_nodes``.

    Notes
    -----
    ``delaunay`` triangulates with GEOS (the quad-edge incremental method), checks the result
    covers the convex hull and uses every point (Euler's formula), and otherwise uses Qhull
    on points sorted along a Hilbert curve.  From 200,000 points on, two halves are
    triangulated in parallel and merged exactly.  Points on one line have no triangulation:
    their Delaunay graph is the path along the line, which is returned together with the
    ``k`` nearest neighbours.  Two sites give their one link.

    References
    ----------
    .. [1] B. Delaunay, "Sur la sphère vide", Bull. Acad. Sci. URSS 6:793-800, 1934.
    .. [2] M. I. Shamos and D. Hoey, "Closest-point problems", 16th IEEE FOCS, 151-162, 1975.
    .. [3] C. B. Barber, D. P. Dobkin and H. Huhdanpaa, "The Quickhull algorithm for convex
       hulls", ACM Trans. Math. Softw. 22(4):469-483, 1996.

    Examples
    --------
    >>> import numpy as np
    >>> xy = np.array([[0.0, 0.0], [100.0, 0.0], [0.0, 100.0], [100.0, 100.0], [50.0, 40.0]])
    >>> c = build_candidates(xy)
    >>> c.edges.tolist()
    [[0, 1], [0, 2], [0, 4], [1, 3], [1, 4], [2, 3], [2, 4], [3, 4]]
    >>> c = build_candidates(xy, "delaunay+knn", k=1, max_link_m=120.0)
    >>> c.origin_names, c.n_links, c.n_dropped_long
    (('delaunay', 'knn'), 8, 0)
    >>> int(c.proposed_by("knn").sum())
    4
    """
    a = _check_xy(xy)
    k, max_link_m, max_complete_nodes = _check_options(k, max_link_m, max_complete_nodes)
    names = _parse_method(method)
    n = a.shape[0]
    if "complete" in names and n > max_complete_nodes:
        raise InputError(f"method 'complete' would make n(n-1)/2 = {n * (n - 1) // 2} links for "
                         f"n = {n} sites, above max_complete_nodes={max_complete_nodes} (time "
                         "and memory grow as n²); use 'delaunay' or 'knn', or raise "
                         "max_complete_nodes")
    # A local origin keeps Qhull's and the k-d tree's arithmetic precise for UTM-sized values;
    # an integer shift is exact, so the result does not depend on where the sites lie.
    local = a - np.floor(a.min(axis=0))

    parts = []
    for name in names:
        raw = CANDIDATE_BUILDERS.get(name)(local, k=k, max_link_m=max_link_m)
        raw = np.asarray(raw)
        if raw.size and (raw.ndim != 2 or raw.shape[1] != 2 or raw.dtype.kind not in "iu"):
            raise InputError(f"candidate builder {name!r} returned an array of shape "
                             f"{raw.shape}, dtype {raw.dtype}; a builder must return int "
                             "(m, 2) node index pairs")
        try:
            parts.append(normalize_edges(raw, n))
        except InputError as exc:
            raise InputError(f"candidate builder {name!r}: {exc}") from None
    if len(parts) == 1:
        edges = parts[0]
        origin = np.ones(edges.shape[0], dtype=np.uint8)
    else:
        edges = normalize_edges(np.concatenate(parts), n)
        code = edges[:, 0] * n + edges[:, 1]
        origin = np.zeros(edges.shape[0], dtype=np.uint8)
        for bit, part in enumerate(parts):
            where = np.searchsorted(code, part[:, 0] * n + part[:, 1])
            origin[where] |= np.uint8(1 << bit)

    n_dropped = 0
    if max_link_m is not None and edges.shape[0]:
        d = local[edges[:, 1]] - local[edges[:, 0]]
        keep = np.hypot(d[:, 0], d[:, 1]) <= max_link_m
        n_dropped = int(edges.shape[0] - np.count_nonzero(keep))
        edges = edges[keep]
        origin = origin[keep]
    edges = np.ascontiguousarray(edges, dtype=np.int64)
    edges.setflags(write=False)
    origin.setflags(write=False)
    node_order = spatial_order(a)
    node_order.setflags(write=False)
    return Candidates(edges=edges, origin=origin, origin_names=tuple(names),
                      method="+".join(names), n_dropped_long=n_dropped, node_order=node_order)
