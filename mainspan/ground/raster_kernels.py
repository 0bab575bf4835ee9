"""Compiled kernels of the raster surfaces: grid traversal, tile keys, bilinear sampling.

Everything here works in raster index space (``x`` = column, ``y`` = row, cell ``(r, c)`` the
unit square ``[c, c+1] x [r, r+1]``); :class:`mainspan.ground.surfaces.Surface` turns
working-CRS queries into these calls.  :func:`traverse_grid` is the public low-level traversal.

References
----------
.. [1] J. Amanatides and A. Woo, "A Fast Voxel Traversal Algorithm for Ray
   Tracing", Eurographics '87, pp. 3-10, 1987.
"""

from __future__ import annotations

import math

import numba
import numpy as np

__all__ = ["traverse_grid"]


# --------------------------------------------------------------------------- numba kernels

@numba.njit(cache=True)
def _clip_box(x0, y0, x1, y1, w, h):
    """Liang-Barsky clip of the segment to the box [0, w] x [0, h]; returns (ta, tb)."""
    ta = 0.0
    tb = 1.0
    dx = x1 - x0
    dy = y1 - y0
    for k in range(4):
        if k == 0:
            p, q = -dx, x0
        elif k == 1:
            p, q = dx, w - x0
        elif k == 2:
            p, q = -dy, y0
        else:
            p, q = dy, h - y0
        if p == 0.0:
            if q < 0.0:
                return 1.0, 0.0
        else:
            r = q / p
            if p < 0.0:
                if r > ta:
                    ta = r
            else:
                if r < tb:
                    tb = r
    return ta, tb


@numba.njit(cache=True)
def _crossing_bounds(x0, y0, x1, y1, w, h):
    """Upper bound of the number of cells each segment crosses inside the raster."""
    n = x0.shape[0]
    out = np.zeros(n, np.int64)
    for i in range(n):
        ta, tb = _clip_box(x0[i], y0[i], x1[i], y1[i], w, h)
        if tb <= ta:
            continue
        dx = x1[i] - x0[i]
        dy = y1[i] - y0[i]
        xa = x0[i] + ta * dx
        xb = x0[i] + tb * dx
        ya = y0[i] + ta * dy
        yb = y0[i] + tb * dy
        out[i] = (abs(math.floor(xb) - math.floor(xa)) + abs(math.floor(yb) - math.floor(ya)) + 3)
    return out


@numba.njit(cache=True)
def _start_cell(x, d, n):
    c = math.floor(x)
    if d < 0.0 and c == x:
        c -= 1
    if c < 0:
        c = 0
    if c > n - 1:
        c = n - 1
    return c


@numba.njit(cache=True)
def _traverse_segments(x0, y0, x1, y1, scale, owner, w, h, bounds,
                       out_owner, out_row, out_col, out_len, outside):
    """Amanatides & Woo (1987) traversal of straight segments in index space.

    ``x`` is the column coordinate, ``y`` the row coordinate, cells are unit
    squares; ``scale[i]`` is the working-CRS length of segment ``i``, so a
    parameter interval ``dt`` inside a cell is ``dt * scale[i]`` metres.
    Lengths outside the raster are added to ``outside[owner[i]]``.
    Returns the number of crossings written.
    """
    k = 0
    n = x0.shape[0]
    tol = 1e-12
    for i in range(n):
        o = owner[i]
        L = scale[i]
        if not L > 0.0:  # a point: nothing to integrate
            continue
        ta, tb = _clip_box(x0[i], y0[i], x1[i], y1[i], w, h)
        if tb <= ta:
            outside[o] += L
            continue
        outside[o] += L * (1.0 - (tb - ta))
        dx = x1[i] - x0[i]
        dy = y1[i] - y0[i]
        kmax = k + bounds[i]
        ix = _start_cell(x0[i] + ta * dx, dx, w)
        iy = _start_cell(y0[i] + ta * dy, dy, h)
        if dx > 0.0:
            sx = 1
        elif dx < 0.0:
            sx = -1
        else:
            sx = 0
        if dy > 0.0:
            sy = 1
        elif dy < 0.0:
            sy = -1
        else:
            sy = 0
        t = ta
        while t < tb:
            # parameter at which the next column / row boundary is crossed,
            # recomputed from the integer boundary (not accumulated) so that
            # exact corners give exact ties
            if sx > 0:
                tx = (ix + 1 - x0[i]) / dx
            elif sx < 0:
                tx = (ix - x0[i]) / dx
            else:
                tx = np.inf
            if sy > 0:
                ty = (iy + 1 - y0[i]) / dy
            elif sy < 0:
                ty = (iy - y0[i]) / dy
            else:
                ty = np.inf
            tn = min(tx, ty, tb)
            if tn > t and k < kmax:
                out_owner[k] = o
                out_row[k] = iy
                out_col[k] = ix
                out_len[k] = (tn - t) * L
                k += 1
            if tn >= tb:
                break
            if abs(tx - ty) <= tol * max(1.0, abs(tx)):
                ix += sx
                iy += sy
            elif tx < ty:
                ix += sx
            else:
                iy += sy
            t = tn
            if ix < 0 or ix >= w or iy < 0 or iy >= h:
                # round-off at the far edge of the raster: the rest is outside
                outside[o] += (tb - t) * L
                break
    return k


@numba.njit(cache=True)
def _bucket(keys, nkeys):
    """Counting sort of indices by key (keys < 0 are dropped); returns (order, starts)."""
    counts = np.zeros(nkeys + 1, np.int64)
    for i in range(keys.shape[0]):
        kk = keys[i]
        if kk >= 0:
            counts[kk + 1] += 1
    for j in range(nkeys):
        counts[j + 1] += counts[j]
    pos = counts[:-1].copy()
    order = np.empty(counts[nkeys], np.int64)
    for i in range(keys.shape[0]):
        kk = keys[i]
        if kk >= 0:
            order[pos[kk]] = i
            pos[kk] += 1
    return order, counts


@numba.njit(cache=True)
def _cell_keys(rows, cols, tr, tc, ntc, sr, sc):
    """Tile of each cell; tile ``(ti, tj)`` starts at row ``ti * tr - sr``, col ``tj * tc - sc``."""
    out = np.empty(rows.shape[0], np.int64)
    for i in range(rows.shape[0]):
        out[i] = ((rows[i] + sr) // tr) * ntc + (cols[i] + sc) // tc
    return out


@numba.njit(cache=True)
def _point_keys(colf, rowf, w, h, tr, tc, ntc, nt, sr, sc):
    """Tile of each fractional position (``nt`` for positions outside the raster)."""
    out = np.empty(colf.shape[0], np.int64)
    for q in range(colf.shape[0]):
        cf = colf[q]
        rf = rowf[q]
        if cf >= 0.0 and cf <= w and rf >= 0.0 and rf <= h:
            r = min(int(rf), h - 1)
            c = min(int(cf), w - 1)
            out[q] = ((r + sr) // tr) * ntc + (c + sc) // tc
        else:
            out[q] = nt
    return out


@numba.njit(cache=True)
def _gather_cells(arr, r0, c0, rows, cols, idx, out):
    for q in range(idx.shape[0]):
        i = idx[q]
        out[i] = arr[rows[i] - r0, cols[i] - c0]


@numba.njit(cache=True, inline="always")
def _bilinear_cell(cf, rf, w, h):
    """Upper-left neighbour ``(row, col)`` of a position inside the raster and its weights
    ``(fu, fv)`` towards the next column and row; cell centres at index + 0.5, edge values
    extended over the outer half cell."""
    u = min(max(cf - 0.5, 0.0), w - 1.0)
    v = min(max(rf - 0.5, 0.0), h - 1.0)
    jj = min(int(math.floor(u)), w - 1)
    ii = min(int(math.floor(v)), h - 1)
    return ii, jj, u - jj, v - ii


@numba.njit(cache=True, inline="always")
def _bilinear_at(cf, rf, arr, r0, c0, w, h):
    """``(value, found)`` of one position from the window ``arr`` (rows ``r0..``, cols
    ``c0..``): NaN outside the raster, ``found`` False where a neighbour leaves the window."""
    if not (cf >= 0.0 and cf <= w and rf >= 0.0 and rf <= h):
        return np.nan, True
    ii, jj, a, b = _bilinear_cell(cf, rf, w, h)
    ia = ii - r0
    ja = jj - c0
    ib = min(ii + 1, h - 1) - r0
    jb = min(jj + 1, w - 1) - c0
    if ia < 0 or ja < 0 or ib >= arr.shape[0] or jb >= arr.shape[1]:
        return np.nan, False
    return _bilinear_combine(arr[ia, ja], arr[ia, jb], arr[ib, ja], arr[ib, jb], a, b), True


@numba.njit(cache=True)
def _bilinear_window(colf, rowf, arr, r0, c0, w, h, out):
    """Bilinear values of index positions straight from one window, in one pass with no
    intermediate arrays; returns the indices of positions whose neighbours leave the window
    (for the caller to sample otherwise)."""
    n = colf.shape[0]
    miss = np.empty(n, np.int64)
    k = 0
    for q in range(n):
        val, found = _bilinear_at(colf[q], rowf[q], arr, r0, c0, w, h)
        out[q] = val
        if not found:
            miss[k] = q
            k += 1
    return miss[:k]


@numba.njit(cache=True)
def _bilinear_window_xy(xy, inv, arr, r0, c0, w, h, out):
    """As :func:`_bilinear_window` from working-CRS points through the affine ``inv`` (the
    raster's inverse geotransform, same CRS): position in, value out -- 24 bytes a point."""
    n = xy.shape[0]
    a, b, c, d, e, f = inv[0], inv[1], inv[2], inv[3], inv[4], inv[5]
    miss = np.empty(n, np.int64)
    k = 0
    for q in range(n):
        x = xy[q, 0]
        y = xy[q, 1]
        # the same operations, in the same order, as Surface.to_index's numpy expression
        val, found = _bilinear_at(a * x + b * y + c, d * x + e * y + f, arr, r0, c0, w, h)
        out[q] = val
        if not found:
            miss[k] = q
            k += 1
    return miss[:k]


@numba.njit(cache=True)
def _bilinear_prep(colf, rowf, w, h, tr, tc, ntc, sr, sc):
    """Neighbour indices, weights and tile key for bilinear sampling at pixel centres.

    ``key`` is the tile holding all four neighbours, -1 outside the raster, and -2
    when the neighbours straddle a tile border (those are gathered cell by cell).
    """
    n = colf.shape[0]
    i0 = np.zeros(n, np.int64)
    j0 = np.zeros(n, np.int64)
    fu = np.zeros(n, np.float64)
    fv = np.zeros(n, np.float64)
    key = np.full(n, -1, np.int64)
    for q in range(n):
        cf = colf[q]
        rf = rowf[q]
        if not (cf >= 0.0 and cf <= w and rf >= 0.0 and rf <= h):
            continue
        ii, jj, a, b = _bilinear_cell(cf, rf, w, h)
        i0[q] = ii
        j0[q] = jj
        fu[q] = a
        fv[q] = b
        ib = min(ii + 1, h - 1)
        jb = min(jj + 1, w - 1)
        if (ib + sr) // tr != (ii + sr) // tr or (jb + sc) // tc != (jj + sc) // tc:
            key[q] = -2
        else:
            key[q] = ((ii + sr) // tr) * ntc + (jj + sc) // tc
    return i0, j0, fu, fv, key


@numba.njit(cache=True)
def _bilinear_combine(v00, v01, v10, v11, a, b):
    w00 = (1.0 - a) * (1.0 - b)
    w01 = a * (1.0 - b)
    w10 = (1.0 - a) * b
    w11 = a * b
    s = 0.0
    if w00 > 0.0:
        if np.isnan(v00):
            return np.nan
        s += w00 * v00
    if w01 > 0.0:
        if np.isnan(v01):
            return np.nan
        s += w01 * v01
    if w10 > 0.0:
        if np.isnan(v10):
            return np.nan
        s += w10 * v10
    if w11 > 0.0:
        if np.isnan(v11):
            return np.nan
        s += w11 * v11
    return s


@numba.njit(cache=True)
def _bilinear_values(v, fu, fv, out, idx):
    n = idx.shape[0]
    for q in range(n):
        out[idx[q]] = _bilinear_combine(v[q], v[n + q], v[2 * n + q], v[3 * n + q], fu[q], fv[q])


@numba.njit(cache=True)
def _bilinear_tile(arr, r0, c0, w, h, i0, j0, fu, fv, idx, n, srows, scols, out, sval):
    """Bilinear samples (idx < n) and straddler cells (idx >= n) that lie in one tile."""
    for q in range(idx.shape[0]):
        p = idx[q]
        if p >= n:
            k = p - n
            sval[k] = arr[srows[k] - r0, scols[k] - c0]
            continue
        ia = i0[p] - r0
        ja = j0[p] - c0
        ib = min(i0[p] + 1, h - 1) - r0
        jb = min(j0[p] + 1, w - 1) - c0
        out[p] = _bilinear_combine(arr[ia, ja], arr[ia, jb], arr[ib, ja], arr[ib, jb],
                                   fu[p], fv[p])


@numba.njit(cache=True)
def _accumulate(owner, length, values, integral, nodata):
    for k in range(owner.shape[0]):
        v = values[k]
        if np.isnan(v):
            nodata[owner[k]] += length[k]
        else:
            integral[owner[k]] += length[k] * v


@numba.njit(cache=True)
def _densify(p0x, p0y, p1x, p1y, step, order):
    """Sub-segment vertices (CSR by link, links in ``order``) at spacing <= step."""
    m = order.shape[0]
    nsub = np.empty(m, np.int64)
    total = 0
    for q in range(m):
        i = order[q]
        L = math.hypot(p1x[i] - p0x[i], p1y[i] - p0y[i])
        s = max(1, int(math.ceil(L / step))) if step > 0 else 1
        nsub[q] = s
        total += s
    ax = np.empty(total, np.float64)
    ay = np.empty(total, np.float64)
    bx = np.empty(total, np.float64)
    by = np.empty(total, np.float64)
    own = np.empty(total, np.int64)
    k = 0
    for q in range(m):
        i = order[q]
        s = nsub[q]
        for j in range(s):
            f0 = j / s
            f1 = (j + 1) / s
            ax[k] = p0x[i] + f0 * (p1x[i] - p0x[i])
            ay[k] = p0y[i] + f0 * (p1y[i] - p0y[i])
            bx[k] = p0x[i] + f1 * (p1x[i] - p0x[i])
            by[k] = p0y[i] + f1 * (p1y[i] - p0y[i])
            own[k] = i
            k += 1
    return ax, ay, bx, by, own


@numba.njit(cache=True)
def _profile_stations(length, step):
    m = length.shape[0]
    offsets = np.empty(m + 1, np.int64)
    offsets[0] = 0
    for i in range(m):
        s = max(1, int(math.ceil(length[i] / step)))
        offsets[i + 1] = offsets[i] + s + 1
    st = np.empty(offsets[m], np.float64)
    for i in range(m):
        s = offsets[i + 1] - offsets[i] - 1
        for j in range(s + 1):
            st[offsets[i] + j] = length[i] * j / s
        st[offsets[i + 1] - 1] = length[i]
    return offsets, st


@numba.njit(cache=True)
def _stations_to_index(offsets, station, length, c0, r0, c1, r1):
    n = station.shape[0]
    colf = np.empty(n, np.float64)
    rowf = np.empty(n, np.float64)
    for i in range(offsets.shape[0] - 1):
        L = length[i]
        for k in range(offsets[i], offsets[i + 1]):
            f = station[k] / L if L > 0 else 0.0
            colf[k] = c0[i] + f * (c1[i] - c0[i])
            rowf[k] = r0[i] + f * (r1[i] - r0[i])
    return colf, rowf


def traverse_grid(x0, y0, x1, y1, width, height):
    """Cells of a ``height`` x ``width`` unit grid crossed by straight segments.

    Low-level form of the traversal used by :class:`Surface`: coordinates are
    index space (``x`` = column, ``y`` = row; cell ``(r, c)`` is the unit square
    ``[c, c+1] x [r, r+1]``) and lengths are index-space lengths.

    Parameters
    ----------
    x0, y0, x1, y1 : array_like of float, shape (m,)
        Segment ends in index coordinates.
    width, height : int
        Grid size in columns and rows.

    Returns
    -------
    offsets : ndarray of int64, shape (m + 1,)
        Crossings of segment ``i`` are ``offsets[i]:offsets[i+1]``, in the
        order the segment visits them.
    rows, cols : ndarray of int64
        The cells visited.
    lengths : ndarray of float64
        Length of the segment inside each cell.
    outside : ndarray of float64, shape (m,)
        Length of each segment outside the grid.

    Examples
    --------
    >>> off, r, c, L, out = traverse_grid([0.5], [0.5], [2.5], [1.5], 3, 2)
    >>> list(zip(r.tolist(), c.tolist()))
    [(0, 0), (0, 1), (1, 1), (1, 2)]
    >>> round(float(L.sum()), 12) == round(5 ** 0.5, 12)
    True

    References
    ----------
    .. [1] Amanatides & Woo, Eurographics '87, 1987.
    """
    x0, y0, x1, y1 = (np.ascontiguousarray(a, dtype=np.float64).ravel() for a in (x0, y0, x1, y1))
    m = x0.shape[0]
    scale = np.hypot(x1 - x0, y1 - y0)
    owner = np.arange(m, dtype=np.int64)
    bounds = _crossing_bounds(x0, y0, x1, y1, float(width), float(height))
    nb = int(bounds.sum())
    oo = np.empty(nb, np.int64)
    rr = np.empty(nb, np.int64)
    cc = np.empty(nb, np.int64)
    ll = np.empty(nb, np.float64)
    outside = np.zeros(m, np.float64)
    k = _traverse_segments(x0, y0, x1, y1, scale, owner, int(width), int(height), bounds,
                           oo, rr, cc, ll, outside)
    offsets = np.zeros(m + 1, np.int64)
    np.cumsum(np.bincount(oo[:k], minlength=m), out=offsets[1:])
    return offsets, rr[:k], cc[:k], ll[:k], outside
