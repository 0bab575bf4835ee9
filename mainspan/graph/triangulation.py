"""Delaunay triangulation of the sites, and their Hilbert-curve order.

Moved from :mod:`mainspan.graph.candidates` (which still exports every name): GEOS's
triangulation checked by the Euler formula with Qhull as the fallback, the two-half parallel
Qhull run and its exact merge, and :func:`spatial_order`, which feeds Qhull points in
Hilbert order.  See the references of :mod:`mainspan.graph.candidates`.
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = ["spatial_order"]

# Qhull options for 2-D Delaunay: Qbb scales the lifted coordinate (better precision), Qz adds
# a point at infinity (robust for cocircular input), Q12 tolerates wide merges; triangulated
# output (Qt) is always on in scipy.  Measured fastest of the robust sets on 1e6 random points.
_QHULL_OPTIONS = "Qbb Qz Q12"


@numba.njit(cache=True, nogil=True)
def _hilbert_keys(xy, x0, y0, scale, bits):
    # Iterative xy -> distance along the Hilbert curve of side 2**bits.
    side = np.int64(1) << bits
    out = np.empty(xy.shape[0], dtype=np.int64)
    for i in range(xy.shape[0]):
        xi = np.int64((xy[i, 0] - x0) * scale)
        yi = np.int64((xy[i, 1] - y0) * scale)
        d = np.int64(0)
        s = side >> 1
        while s > 0:
            rx = 1 if (xi & s) > 0 else 0
            ry = 1 if (yi & s) > 0 else 0
            d += s * s * ((3 * rx) ^ ry)
            if ry == 0:
                if rx == 1:
                    xi = side - 1 - xi
                    yi = side - 1 - yi
                t = xi
                xi = yi
                yi = t
            s >>= 1
        out[i] = d
    return out


@numba.njit(cache=True, nogil=True)
def _bounds(xy):
    x0 = xy[0, 0]
    x1 = x0
    y0 = xy[0, 1]
    y1 = y0
    for i in range(1, xy.shape[0]):
        x = xy[i, 0]
        y = xy[i, 1]
        x0 = min(x0, x)
        x1 = max(x1, x)
        y0 = min(y0, y)
        y1 = max(y1, y)
    return x0, y0, max(x1 - x0, y1 - y0)


@numba.njit(cache=True, nogil=True)
def _radix_argsort(keys, n_bits):
    """Stable argsort of non-negative integer keys below 2**n_bits (LSD radix, 16-bit digits)."""
    n = keys.shape[0]
    idx = np.arange(n)
    tmp = np.empty(n, dtype=np.int64)
    shift = 0
    while shift < n_bits:
        cnt = np.zeros(65537, dtype=np.int64)
        for i in range(n):
            cnt[((keys[idx[i]] >> shift) & 0xFFFF) + 1] += 1
        for d in range(65536):
            cnt[d + 1] += cnt[d]
        for i in range(n):
            j = idx[i]
            d = (keys[j] >> shift) & 0xFFFF
            tmp[cnt[d]] = j
            cnt[d] += 1
        idx, tmp = tmp, idx
        shift += 16
    return idx


def spatial_order(xy, *, bits=16) -> np.ndarray:
    """Order points along a Hilbert curve, so that points near in space are near in memory.

    Parameters
    ----------
    xy : array_like of float, shape (n, 2)
        Coordinates.
    bits : int, default=16
        Resolution of the curve: a grid of ``2**bits`` cells a side over the bounding square.

    Returns
    -------
    order : ndarray of int64, shape (n,)
        A permutation of ``0 .. n-1``; ties (points in one cell) keep their index order.
        Pass it as ``node_order`` to :func:`mainspan.graph.spanning.prim_tree` for speed.

    Examples
    --------
    >>> spatial_order([[0.0, 0.0], [1.0, 1.0], [0.0, 1.0], [1.0, 0.0]]).tolist()
    [0, 2, 1, 3]
    """
    xy = np.ascontiguousarray(xy, dtype=np.float64)
    if not xy.flags.writeable:
        xy = xy.copy()
    if xy.shape[0] == 0:
        return np.zeros(0, dtype=np.int64)
    x0, y0, span = _bounds(xy)
    scale = ((1 << bits) - 1) / span if span > 0 else 0.0
    keys = _hilbert_keys(xy, x0, y0, scale, bits)
    if xy.shape[0] < 50_000:
        return np.argsort(keys, kind="stable").astype(np.int64)
    return _radix_argsort(keys, 2 * bits)


@numba.njit(cache=True, nogil=True)
def _circle_side(xy, tri, x_split, eps):
    """For each triangle: -1 if its circumcircle lies left of ``x_split - eps``, +1 if right
    of ``x_split + eps``, 0 if it reaches the band between (or is degenerate).

    Vertices are taken in increasing index order so that the same triangle always gives the
    same rounding, whichever triangulation it came from.
    """
    m = tri.shape[0]
    side = np.zeros(m, dtype=np.int8)
    for t in range(m):
        a = tri[t, 0]
        b = tri[t, 1]
        c = tri[t, 2]
        ax = xy[a, 0]
        ay = xy[a, 1]
        bx = xy[b, 0] - ax
        by = xy[b, 1] - ay
        cx = xy[c, 0] - ax
        cy = xy[c, 1] - ay
        d = 2.0 * (bx * cy - by * cx)
        if d == 0.0:
            continue
        b2 = bx * bx + by * by
        c2 = cx * cx + cy * cy
        ux = (cy * b2 - by * c2) / d
        uy = (bx * c2 - cx * b2) / d
        r = np.sqrt(ux * ux + uy * uy)
        ux += ax
        if ux + r < x_split - eps:
            side[t] = -1
        elif ux - r > x_split + eps:
            side[t] = 1
    return side


def _qhull(xy, idx):
    """Delaunay triangles of the points ``xy[idx]`` by Qhull, in global indices, rows sorted,
    plus the global indices of the points on the hull boundary.  Points are fed to Qhull in
    Hilbert order: inserting each point near the last keeps Qhull's point location short."""
    from scipy.spatial import Delaunay

    o = idx[spatial_order(xy[idx])]
    tri = Delaunay(xy[o], qhull_options=_QHULL_OPTIONS)
    return np.sort(o[tri.simplices], axis=1), np.unique(o[tri.convex_hull])


@numba.njit(cache=True, nogil=True)
def _coord_hash(x, y, mask):
    h = (np.float64(x + 0.0).view(np.uint64) * np.uint64(0x9E3779B97F4A7C15)) ^ \
        (np.float64(y + 0.0).view(np.uint64) * np.uint64(0xC2B2AE3D27D4EB4F))
    return np.int64((h ^ (h >> np.uint64(29))) & mask)


@numba.njit(cache=True, nogil=True)
def _locate_coords(pts, q):
    """Index in *pts* of each row of *q* (exact coordinate match, -1 if absent), by an
    open-addressing hash table; -2 everywhere if *pts* holds a point twice."""
    n = pts.shape[0]
    bits = 1
    while (np.int64(1) << bits) < 2 * n:
        bits += 1
    size = np.int64(1) << bits
    mask = np.uint64(size - 1)
    table = np.full(size, -1, dtype=np.int64)
    out = np.full(q.shape[0], -1, dtype=np.int64)
    for i in range(n):
        h = _coord_hash(pts[i, 0], pts[i, 1], mask)
        while table[h] >= 0:
            j = table[h]
            if pts[j, 0] == pts[i, 0] and pts[j, 1] == pts[i, 1]:
                out[:] = -2
                return out
            h = (h + 1) & (size - 1)
        table[h] = i
    for i in range(q.shape[0]):
        h = _coord_hash(q[i, 0], q[i, 1], mask)
        while table[h] >= 0:
            j = table[h]
            if pts[j, 0] == q[i, 0] and pts[j, 1] == q[i, 1]:
                out[i] = j
                break
            h = (h + 1) & (size - 1)
    return out


def _geos(xy, idx):
    """Delaunay triangles of ``xy[idx]`` by GEOS (shapely), checked to be a triangulation of
    the convex hull that uses every point; ``None`` when the check fails (coincident points,
    points on a hull edge, or a hull left partly uncovered), so that Qhull is used instead.

    The check is Euler's formula: a triangulation of n points whose boundary is the convex
    hull with h corners has exactly 2n - 2 - h triangles; one that misses part of the hull
    has more boundary points and so fewer triangles.
    """
    import shapely
    from scipy.spatial import ConvexHull, QhullError

    pts = xy[idx]
    n = pts.shape[0]
    coll = shapely.delaunay_triangles(shapely.multipoints(pts))
    c = shapely.get_coordinates(coll)
    if c.shape[0] == 0 or c.shape[0] % 4:
        return None
    loc = _locate_coords(pts, c)
    if loc.min() < 0:
        return None
    tri = loc.reshape(-1, 4)[:, :3]
    try:
        corners = ConvexHull(pts).vertices
    except QhullError:
        return None
    if tri.shape[0] != 2 * n - 2 - corners.shape[0]:
        return None
    if np.bincount(tri.ravel(), minlength=n).min() == 0:
        return None
    return np.sort(idx[tri], axis=1), np.sort(idx[corners])


def _triangulate(xy, idx):
    """Delaunay triangles of ``xy[idx]``: GEOS when its result checks out, else Qhull."""
    out = _geos(xy, idx) if _BACKEND == "geos" else None
    return out if out is not None else _qhull(xy, idx)


# GEOS's incremental triangulation measured faster than Qhull on 1e6 points here; every
# GEOS result is checked (see _geos) and Qhull takes over when the check fails.
_BACKEND = "geos"


def _qhull_split(xy):
    """Delaunay triangles of all points from two half-plane triangulations run in parallel.

    Returns ``None`` when the merge cannot be confirmed (then the caller triangulates in one
    run).

    Why the merge is exact (for points in general position).  Split at ``x = x_m`` into the
    left half L and right half R.  A triangle of DT(L) whose circumcircle lies strictly left
    of ``x_m`` ("safe") has no point of L inside it (Delaunay in L) and none of R (all right
    of ``x_m``), so it belongs to DT(L u R); likewise on the right.  Let S be the vertices of
    the unsafe triangles of both halves plus both halves' hull points.  Every other triangle
    T of DT(L u R) has its three vertices in S: if all lie in L, T is a triangle of DT(L)
    (its empty circle is empty in L) and unsafe; if a vertex a in L shares T with a vertex
    in R, the centre c of T's empty circle lies in a's Voronoi cell of L, and the circle
    centred there through a reaches past ``x_m``.  The rightmost reach ``x1 + |x - a|`` is
    convex in the centre x, so over a bounded cell it peaks at a cell vertex -- the centre of
    a DT(L) triangle at a whose circle therefore reaches past ``x_m``: unsafe, so a is in S;
    an unbounded cell means a is a hull point of L, in S too (mirror argument on the right).
    Such a T has an empty circle in S as well, so it is a triangle of DT(S); the triangles
    of DT(S) that reach the band and whose circle holds no point of L u R are exactly the
    missing ones.  As a guard against rounding and degenerate (cocircular) input, the result
    must have exactly 2n - 2 - h triangles (Euler's formula, h points on the hull) and use
    every point.
    """
    from concurrent.futures import ThreadPoolExecutor

    from scipy.spatial import Delaunay, QhullError, cKDTree

    n = xy.shape[0]
    ox = np.argsort(xy[:, 0], kind="stable")
    half = n // 2
    left, right = ox[:half], ox[half:]
    x_m = 0.5 * (xy[left[-1], 0] + xy[right[0], 0])
    eps = 1e-9 * float(np.ptp(xy, axis=0).max())

    def side_of(idx):
        tri, hull = _triangulate(xy, idx)
        return tri, hull, _circle_side(xy, tri, x_m, eps)

    try:
        with ThreadPoolExecutor(max_workers=2) as pool:
            fl = pool.submit(side_of, left)
            fr = pool.submit(side_of, right)
            tl, hl, sl = fl.result()
            tr, hr, sr = fr.result()
        safe = np.concatenate([tl[sl == -1], tr[sr == 1]])
        band = np.unique(np.concatenate([tl[sl != -1].ravel(), tr[sr != 1].ravel(), hl, hr]))
        ts_local = Delaunay(xy[band], qhull_options=_QHULL_OPTIONS)
    except QhullError:
        return None
    ts = np.sort(band[ts_local.simplices], axis=1)
    ts = ts[_circle_side(xy, ts, x_m, eps) == 0]
    # keep the band triangles whose circumcircle holds no point (its own three lie on it)
    a, b, c = (xy[ts[:, i]] for i in range(3))
    bx, by = (b - a).T
    cx, cy = (c - a).T
    d = 2.0 * (bx * cy - by * cx)
    with np.errstate(divide="ignore", invalid="ignore"):
        ux = (cy * (bx * bx + by * by) - by * (cx * cx + cy * cy)) / d
        uy = (bx * (cx * cx + cy * cy) - cx * (bx * bx + by * by)) / d
    r = np.hypot(ux, uy)
    ok = np.isfinite(r)
    ts, r, centre = ts[ok], r[ok], np.stack([ux[ok], uy[ok]], axis=1) + a[ok]
    dist, _ = cKDTree(xy, balanced_tree=False, compact_nodes=False).query(centre, k=1)
    ts = ts[dist >= r * (1.0 - 1e-9)]
    tri = np.concatenate([safe, ts])
    h = np.unique(band[ts_local.convex_hull]).size
    if tri.shape[0] != 2 * n - 2 - h or np.bincount(tri.ravel(), minlength=n).min() == 0:
        return None
    return tri


def _n_cpus():
    import os

    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1
