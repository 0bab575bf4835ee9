"""Least-cost search over a cost grid: labelled multi-source Dijkstra.

A :class:`SearchGrid` is a square-celled grid in the working CRS, windowed to
the job's extent (the sites' bounding box plus a margin).  :func:`cost_grid`
fills it with what a step between two cell centres costs, reusing the link
costing of :mod:`mainspan.ground.costs`; :func:`multi_source_search` then grows
every site's region at once, so each cell learns the cheapest cost from any
site, which site that is (its *label*) and the step it came by.

Step costs
----------
A step joins two cell centres by a straight segment, priced as
:func:`mainspan.ground.costs.price_links` prices a link:

* land: the exact line integral of the per-cell land cost over the segment
  (Amanatides & Woo traversal of the grid): an orthogonal or diagonal step
  spends half its length in each end cell (a diagonal passes the shared
  corner only), a knight's move (16-connectivity) a quarter of its length in
  each of the four cells it crosses.  The per-cell land cost per metre is
  itself obtained from ``price_links`` (a half-cell segment through each cell
  centre), so class tables, named rasters and cost expressions mean the same
  in both modes;
* terrain: elevations bilinear at the cell centres (as the profiles sample);
  surface length ``sqrt(L^2 + dz^2)``, the steep term on ``|dz| / L``.  Climb
  and descent are priced at their mean, ``(climb + descent) / 2 * |dz|``,
  so that a step costs the same both ways (the region growth and Mehlhorn's
  candidate costs need a symmetric cost); the final polylines are re-priced
  in their own direction by ``price_links``;
* barriers: a cell marked impassable (a barrier, or nodata under
  ``on_nodata="barrier"``/``"error"``) stops every step that crosses it, and a
  diagonal step may not squeeze between two impassable cells that share its
  corner;
* crossings: a cell lying on crossing line ``j`` carries label ``j``; a step
  between cells of different labels pays half the crossing price for each end
  that lies on a line, so going over a road strip (on, then off) pays one
  price, and walking along it pays nothing more.

Memory: 4 bytes per cell of land cost, 4 of elevation (with terrain), 4 of
crossing label (with crossings), and the search itself 8 (cost) + 4 (label)
+ 1 (step) + 16 (heap of costs and cells, slot per cell) -- 33 to 41 bytes per
cell (:func:`bytes_per_cell`).

References
----------
.. [1] E. W. Dijkstra, "A note on two problems in connexion with graphs",
   Numer. Math. 1:269-271, 1959.
.. [2] J. Amanatides and A. Woo, "A Fast Voxel Traversal Algorithm for Ray
   Tracing", Eurographics '87, 1987.
.. [3] M. F. Goodchild, "An evaluation of lattice solutions to the problem of
   corridor location", Environment and Planning A 9:727-738, 1977 (grid bias
   of 8- and 16-connected moves).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numba
import numpy as np

from ..errors import InputError

__all__ = ["SearchGrid", "StepCosts", "Search", "grid_for_sites", "cost_grid",
           "multi_source_search", "step_costs", "trace_to_source", "bytes_per_cell", "OFFSETS"]

# Step offsets (drow, dcol).  Direction k and k + half are opposite, so a
# search over the first half of a table visits every undirected step once.
_ORTHO_DIAG = [(0, 1), (1, 0), (1, 1), (1, -1)]
_KNIGHT = [(1, 2), (2, 1), (2, -1), (1, -2)]
OFFSETS = {
    8: np.array(_ORTHO_DIAG + [(-a, -b) for a, b in _ORTHO_DIAG], dtype=np.int64),
    16: np.array(_ORTHO_DIAG + _KNIGHT + [(-a, -b) for a, b in _ORTHO_DIAG + _KNIGHT],
                 dtype=np.int64),
}
_CELL_CHUNK = 250_000


@dataclass(frozen=True)
class SearchGrid:
    """A square-celled grid in the working CRS.

    Cell ``(row, col)`` spans ``x_min + col * cell_m .. + cell_m`` and
    ``y_max - (row + 1) * cell_m .. y_max - row * cell_m`` (row 0 is north).
    """

    x_min: float
    y_max: float
    cell_m: float
    nrows: int
    ncols: int

    @property
    def n_cells(self) -> int:
        return self.nrows * self.ncols

    def centres(self, cells) -> np.ndarray:
        """Working-CRS centres (k, 2) of flat cell indices."""
        cells = np.asarray(cells, dtype=np.int64)
        r, c = np.divmod(cells, self.ncols)
        return np.column_stack([self.x_min + (c + 0.5) * self.cell_m,
                                self.y_max - (r + 0.5) * self.cell_m])

    def cell_of(self, xy) -> np.ndarray:
        """Flat index of the cell holding each point; -1 outside the grid."""
        xy = np.asarray(xy, dtype=np.float64).reshape(-1, 2)
        c = np.floor((xy[:, 0] - self.x_min) / self.cell_m).astype(np.int64)
        r = np.floor((self.y_max - xy[:, 1]) / self.cell_m).astype(np.int64)
        ok = (r >= 0) & (r < self.nrows) & (c >= 0) & (c < self.ncols)
        return np.where(ok, r * self.ncols + c, -1)

    def transform(self):
        """The rasterio affine transform of the grid (for burning vector layers)."""
        from affine import Affine

        return Affine(self.cell_m, 0.0, self.x_min, 0.0, -self.cell_m, self.y_max)


def bytes_per_cell(*, terrain: bool, crossings: bool) -> int:
    """Bytes held per grid cell during a search (inputs + Dijkstra state)."""
    return 4 + 4 * bool(terrain) + 4 * bool(crossings) + 8 + 4 + 1 + 16


def grid_for_sites(xy, *, cell_m, margin_m, memory_mb=2048.0, terrain=False, crossings=False,
                   align_xy=None):
    """The search window: the sites' bounding box plus ``margin_m``, cells of ``cell_m``.

    ``align_xy`` (a raster corner in the working CRS) snaps the cell edges onto
    that raster's grid, so that with the raster's own cell size every search
    cell is one raster cell.

    Raises
    ------
    InputError
        When the window needs more than ``memory_mb`` MiB; the message says how
        much it needs and how to reduce it.
    """
    xy = np.asarray(xy, dtype=np.float64).reshape(-1, 2)
    if not (math.isfinite(cell_m) and cell_m > 0):
        raise InputError(f"--corridor-cell-m must be a positive length in metres; got {cell_m!r}")
    if not (math.isfinite(margin_m) and margin_m >= 0):
        raise InputError(f"--corridor-margin-m must be a length >= 0 in metres; got {margin_m!r}")
    lo = xy.min(axis=0) - margin_m
    hi = xy.max(axis=0) + margin_m
    if align_xy is not None:
        ax, ay = (float(v) for v in align_xy)
        lo[0] = ax + math.floor((lo[0] - ax) / cell_m) * cell_m
        hi[1] = ay + math.ceil((hi[1] - ay) / cell_m) * cell_m
    ncols = int(math.floor((hi[0] - lo[0]) / cell_m + 1e-9)) + 1
    nrows = int(math.floor((hi[1] - lo[1]) / cell_m + 1e-9)) + 1
    need = ncols * nrows * bytes_per_cell(terrain=terrain, crossings=crossings) / 2 ** 20
    if need > memory_mb:
        raise InputError(
            f"the corridor search over {nrows} x {ncols} cells of {cell_m:g} m needs about "
            f"{need:,.0f} MiB, more than --corridor-memory-mb {memory_mb:g}; use larger cells "
            f"(--corridor-cell-m {cell_m * math.sqrt(need / memory_mb) * 1.05:.3g} fits), a "
            "smaller --corridor-margin-m, or a larger --corridor-memory-mb")
    return SearchGrid(float(lo[0]), float(hi[1]), float(cell_m), nrows, ncols)


@dataclass
class StepCosts:
    """What a step costs on a grid (see the module notes).

    Attributes
    ----------
    grid : SearchGrid
    land : ndarray float32 (nrows, ncols)
        Land cost per metre of main through each cell, already times the
        ``land`` weight; ``inf`` where impassable.
    z : ndarray float32 (nrows, ncols) or None
        Ground elevation at cell centres (NaN: no data, costs no climb).
    crossing : ndarray int32 (nrows, ncols) or None
        Index of the crossing line on each cell, -1 for none.
    params : ndarray float64 (6,)
        ``length`` weight, mean of ``climb`` and ``descent``, steep threshold
        (percent, -1 off), ``steep_per_m``, half the crossing price, connectivity.
    """

    grid: SearchGrid
    land: np.ndarray
    z: np.ndarray | None
    crossing: np.ndarray | None
    params: np.ndarray

    @property
    def connectivity(self) -> int:
        return int(self.params[5])


def cost_grid(grid, *, working_crs, terrain=None, land_cost=None, cost_expression=None,
              class_costs=None, weights=None, on_nodata="barrier", raster_crs=None,
              barrier=None, avoid=None, crossing=None, crossing_price=0.0, connectivity=16):
    """Fill *grid* with step-cost inputs, pricing cells with :func:`price_links`.

    Parameters
    ----------
    grid : SearchGrid
    working_crs : CRS-like
    terrain, land_cost, cost_expression, class_costs, weights, on_nodata, raster_crs
        As for :func:`mainspan.ground.costs.price_links`; ``terrain`` may be an
        opened Surface.
    barrier : ndarray of bool (nrows, ncols), optional
        Impassable cells (from :func:`mainspan.ground.vectors.burn_barriers`).
    avoid : ndarray of float (nrows, ncols), optional
        Extra price per metre inside each cell (avoided areas).
    crossing : ndarray of int32 (nrows, ncols), optional
        Crossing-line index per cell, -1 for none.
    crossing_price : float or ndarray, default 0
        Price per crossing; an array gives one price per line, and the grid
        then uses the mean (the exact count and price come from the re-pricing).
    connectivity : {8, 16}, default 16

    Returns
    -------
    StepCosts
    """
    from .costs import CostWeights, price_links
    from .surfaces import Surface, open_surface

    if connectivity not in OFFSETS:
        raise InputError(f"--connectivity must be 8 or 16; got {connectivity!r}")
    w = weights if weights is not None else CostWeights()
    nr, nc = grid.nrows, grid.ncols
    land = np.zeros((nr, nc), dtype=np.float32)
    blocked = np.zeros((nr, nc), dtype=bool)
    cells = np.arange(grid.n_cells, dtype=np.int64)
    quarter = grid.cell_m / 4.0
    if land_cost is not None and w.land > 0:
        flat = land.reshape(-1)
        bflat = blocked.reshape(-1)
        for a in range(0, grid.n_cells, _CELL_CHUNK):
            ctr = grid.centres(cells[a:a + _CELL_CHUNK])
            pts = np.concatenate([ctr - [quarter, 0.0], ctr + [quarter, 0.0]])
            k = len(ctr)
            e = np.column_stack([np.arange(k), np.arange(k, 2 * k)])
            lc = price_links(pts, e, working_crs=working_crs, land_cost=land_cost,
                             cost_expression=cost_expression, class_costs=class_costs,
                             weights=CostWeights(length=0.0, land=w.land),
                             on_nodata="skip" if on_nodata == "skip" else "barrier",
                             raster_crs=raster_crs, refuse_negative=True)
            flat[a:a + k] = lc.components["land_cost"] * w.land / (2 * quarter)
            bflat[a:a + k] = ~lc.passable
    z = None
    if terrain is not None:
        surf, mine = (terrain, False) if isinstance(terrain, Surface) else (
            open_surface(terrain, working_crs=working_crs, raster_crs=raster_crs), True)
        try:
            z = np.empty(grid.n_cells, dtype=np.float32)
            for a in range(0, grid.n_cells, _CELL_CHUNK):
                z[a:a + _CELL_CHUNK] = surf.sample(grid.centres(cells[a:a + _CELL_CHUNK]))
        finally:
            if mine:
                surf.close()
        z = z.reshape(nr, nc)
        if on_nodata != "skip":
            blocked |= np.isnan(z)
    if avoid is not None:
        land += np.asarray(avoid, dtype=np.float32)
    if barrier is not None:
        blocked |= np.asarray(barrier, dtype=bool)
    land[blocked] = np.inf
    price = np.asarray(crossing_price, dtype=np.float64)
    half = 0.5 * float(price.mean()) if price.size else 0.0
    steep = -1.0 if w.steep_slope_pct is None else float(w.steep_slope_pct)
    params = np.array([w.length, 0.5 * (w.climb + w.descent), steep, w.steep_per_m, half,
                       connectivity], dtype=np.float64)
    xing = None if crossing is None else np.ascontiguousarray(crossing, dtype=np.int32)
    return StepCosts(grid, land, z, xing, params)


# --------------------------------------------------------------------------- numba kernels

@numba.njit(cache=True, inline="always")
def _step(land, z, xing, has_z, has_x, r, c, dr, dc, length, params):
    """Cost of the step from cell (r, c) to (r + dr, c + dc); inf if impassable."""
    r2 = r + dr
    c2 = c + dc
    va = land[r, c]
    vb = land[r2, c2]
    adr = abs(dr)
    adc = abs(dc)
    if adr + adc == 1:
        s = 0.5 * (va + vb)
    elif adr == 1 and adc == 1:
        if math.isinf(land[r, c2]) and math.isinf(land[r2, c]):
            return np.inf                      # no squeezing between two barrier cells
        s = 0.5 * (va + vb)
    elif adr == 1:                             # knight (1, 2): cells (r, c+s), (r+dr, c+s)
        sc = 1 if dc > 0 else -1
        s = 0.25 * (va + vb + land[r, c + sc] + land[r2, c + sc])
    else:                                      # knight (2, 1): cells (r+s, c), (r+s, c+dc)
        sr = 1 if dr > 0 else -1
        s = 0.25 * (va + vb + land[r + sr, c] + land[r + sr, c2])
    if math.isinf(s):
        return np.inf
    cost = length * (s + params[0])
    if has_z:
        za = z[r, c]
        zb = z[r2, c2]
        if not (math.isnan(za) or math.isnan(zb)):
            dz = abs(float(zb) - float(za))
            cost += params[0] * (math.sqrt(length * length + dz * dz) - length) + params[1] * dz
            if params[2] >= 0.0 and dz / length * 100.0 > params[2]:
                cost += params[3] * length
    if has_x:
        xa = xing[r, c]
        xb = xing[r2, c2]
        if xa != xb:
            cost += params[4] * ((xa >= 0) + (xb >= 0))
    return cost


@numba.njit(cache=True, inline="always")
def _before(hk, hc, i, key, cell):
    """Slot i of the heap comes before (key, cell): lower cost, then lower cell."""
    return hk[i] < key or (hk[i] == key and hc[i] < cell)


@numba.njit(cache=True)
def _sift_up(hk, hc, pos, i, key, cell):
    while i > 0:
        p = (i - 1) >> 2
        if _before(hk, hc, p, key, cell):
            break
        hk[i] = hk[p]
        hc[i] = hc[p]
        pos[hc[i]] = i
        i = p
    hk[i] = key
    hc[i] = cell
    pos[cell] = i


@numba.njit(cache=True)
def _pop(hk, hc, pos, size):
    """Remove the top of the 4-ary heap; returns the new size."""
    top = hc[0]
    pos[top] = -2
    size -= 1
    if size == 0:
        return size
    key = hk[size]
    cell = hc[size]
    i = 0
    while True:
        c = 4 * i + 1
        if c >= size:
            break
        best = c
        last = min(c + 4, size)
        for q in range(c + 1, last):
            if hk[q] < hk[best] or (hk[q] == hk[best] and hc[q] < hc[best]):
                best = q
        if _before(hk, hc, best, key, cell):
            hk[i] = hk[best]
            hc[i] = hc[best]
            pos[hc[i]] = i
            i = best
        else:
            break
    hk[i] = key
    hc[i] = cell
    pos[cell] = i
    return size


@numba.njit(cache=True)
def _search(land, z, xing, has_z, has_x, cell_m, params, offsets, src_cells, dist, label, step):
    nr, nc = land.shape
    n = nr * nc
    hk = np.empty(n, dtype=np.float64)     # 4-ary heap of (cost, cell) with decrease-key
    hc = np.empty(n, dtype=np.int32)
    pos = np.full(n, -1, dtype=np.int32)   # slot in the heap; -1 never seen, -2 settled
    size = 0
    for i in range(src_cells.shape[0]):
        v = src_cells[i]
        dist[v] = 0.0
        label[v] = i
        step[v] = -1
        _sift_up(hk, hc, pos, size, 0.0, v)
        size += 1
    nd = offsets.shape[0]
    dlen = np.empty(nd)
    for k in range(nd):
        dlen[k] = cell_m * math.sqrt(offsets[k, 0] ** 2 + offsets[k, 1] ** 2)
    while size > 0:
        u = hc[0]
        du = hk[0]
        size = _pop(hk, hc, pos, size)
        r = u // nc
        c = u - r * nc
        lu = label[u]
        for k in range(nd):
            dr = offsets[k, 0]
            dc = offsets[k, 1]
            r2 = r + dr
            c2 = c + dc
            if r2 < 0 or r2 >= nr or c2 < 0 or c2 >= nc:
                continue
            v = r2 * nc + c2
            pv = pos[v]
            if pv == -2:
                continue
            w = _step(land, z, xing, has_z, has_x, r, c, dr, dc, dlen[k], params)
            alt = du + w
            if alt < dist[v]:
                dist[v] = alt
                label[v] = lu
                step[v] = k
                if pv < 0:
                    _sift_up(hk, hc, pos, size, alt, v)
                    size += 1
                else:
                    _sift_up(hk, hc, pos, pv, alt, v)


@numba.njit(cache=True)
def _boundary(land, z, xing, has_z, has_x, cell_m, params, offsets, dist, label, count_only,
              out_a, out_b, out_cost, out_u, out_v):
    """Steps whose ends carry different labels: Mehlhorn's bridges d(u) + w + d(v)."""
    nr, nc = land.shape
    half = offsets.shape[0] // 2
    m = 0
    for u in range(nr * nc):
        lu = label[u]
        if lu < 0:
            continue
        r = u // nc
        c = u - r * nc
        for k in range(half):
            r2 = r + offsets[k, 0]
            c2 = c + offsets[k, 1]
            if r2 < 0 or r2 >= nr or c2 < 0 or c2 >= nc:
                continue
            v = r2 * nc + c2
            lv = label[v]
            if lv < 0 or lv == lu:
                continue
            w = _step(land, z, xing, has_z, has_x, r, c, offsets[k, 0], offsets[k, 1],
                      cell_m * math.sqrt(offsets[k, 0] ** 2 + offsets[k, 1] ** 2), params)
            if math.isinf(w):
                continue
            if not count_only:
                if lu < lv:
                    out_a[m] = lu
                    out_b[m] = lv
                    out_u[m] = u
                    out_v[m] = v
                else:
                    out_a[m] = lv
                    out_b[m] = lu
                    out_u[m] = v
                    out_v[m] = u
                out_cost[m] = dist[u] + w + dist[v]
            m += 1
    return m


@numba.njit(cache=True)
def _step_list_costs(land, z, xing, has_z, has_x, cell_m, params, ncols, a, b, out):
    for i in range(a.shape[0]):
        r = a[i] // ncols
        c = a[i] - r * ncols
        r2 = b[i] // ncols
        c2 = b[i] - r2 * ncols
        dr = r2 - r
        dc = c2 - c
        out[i] = _step(land, z, xing, has_z, has_x, r, c, dr, dc,
                       cell_m * math.sqrt(dr * dr + dc * dc), params)


# --------------------------------------------------------------------------- public API

@dataclass
class Search:
    """Result of :func:`multi_source_search`.

    Attributes
    ----------
    costs : StepCosts
    source_cells : ndarray int64 (s,)
    dist : ndarray float64 (n_cells,)
        Least cost from the nearest source; ``inf`` where unreachable.
    label : ndarray int32 (n_cells,)
        Index (into ``source_cells``) of that source; -1 where unreachable.
    step : ndarray int8 (n_cells,)
        Index into ``OFFSETS[connectivity]`` of the step that reached the cell
        (-1 at sources and unreachable cells).
    """

    costs: StepCosts
    source_cells: np.ndarray
    dist: np.ndarray
    label: np.ndarray
    step: np.ndarray

    def bridges(self):
        """Mehlhorn's candidate links between sources whose regions touch.

        Returns
        -------
        dict with ``edges`` int64 (m, 2) (lower source first, sorted, unique),
        ``cost`` float64 (m,) = ``d(s, u) + w(u, v) + d(v, t)`` minimised over
        the touching steps (ties: lower ``u``, then lower ``v``), and the
        bridge cells ``u`` (in the region of ``edges[:, 0]``) and ``v``.
        """
        sc = self.costs
        grid = sc.grid
        off = OFFSETS[sc.connectivity]
        args = (sc.land, _z(sc), _x(sc), sc.z is not None, sc.crossing is not None, grid.cell_m,
                sc.params, off, self.dist, self.label)
        e0 = np.empty(0, np.int64)
        m = _boundary(*args, True, e0, e0, np.empty(0), e0, e0)
        a, b, u, v = (np.empty(m, np.int64) for _ in range(4))
        cost = np.empty(m)
        _boundary(*args, False, a, b, cost, u, v)
        o = np.lexsort((v, u, cost, b, a))
        a, b, cost, u, v = a[o], b[o], cost[o], u[o], v[o]
        first = np.ones(m, bool)
        first[1:] = (a[1:] != a[:-1]) | (b[1:] != b[:-1])
        return {"edges": np.column_stack([a[first], b[first]]), "cost": cost[first],
                "u": u[first], "v": v[first]}

    def path_to_source(self, cell) -> np.ndarray:
        """Cells from *cell* back to its source, inclusive (see :func:`trace_to_source`)."""
        return trace_to_source(self.step, OFFSETS[self.costs.connectivity],
                               self.costs.grid.ncols, int(cell))


def _z(sc):
    return sc.z if sc.z is not None else np.zeros((1, 1), np.float32)


def _x(sc):
    return sc.crossing if sc.crossing is not None else np.zeros((1, 1), np.int32)


@numba.njit(cache=True)
def _trace(step, offsets, ncols, cell, out):
    """Cells back to the source into *out*; -1 when *out* is too short."""
    n = 0
    while True:
        if n == out.shape[0]:
            return -1
        out[n] = cell
        n += 1
        k = step[cell]
        if k < 0:
            break
        r = cell // ncols - offsets[k, 0]
        c = cell % ncols - offsets[k, 1]
        cell = r * ncols + c
    return n


def trace_to_source(step, offsets, ncols, cell) -> np.ndarray:
    """Follow the recorded steps from *cell* back to its source (inclusive)."""
    size = 4 * (ncols + step.shape[0] // max(ncols, 1)) + 16
    while True:
        buf = np.empty(min(size, step.shape[0] + 1), dtype=np.int64)
        n = _trace(step, offsets, ncols, np.int64(cell), buf)
        if n >= 0:
            return buf[:n].copy()
        size *= 4


def step_costs(costs: StepCosts, a, b) -> np.ndarray:
    """Cost of the steps between flat cells ``a[i]`` and ``b[i]`` (neighbours in the table)."""
    a = np.ascontiguousarray(a, dtype=np.int64)
    b = np.ascontiguousarray(b, dtype=np.int64)
    out = np.empty(a.shape[0])
    _step_list_costs(costs.land, _z(costs), _x(costs), costs.z is not None,
                     costs.crossing is not None, costs.grid.cell_m, costs.params,
                     costs.grid.ncols, a, b, out)
    return out


def multi_source_search(costs: StepCosts, source_cells) -> Search:
    """Grow every source's region at once over the step costs (labelled Dijkstra).

    Parameters
    ----------
    costs : StepCosts
    source_cells : array_like of int
        Flat cell index of each source (distinct cells).

    Returns
    -------
    Search

    Examples
    --------
    >>> g = SearchGrid(0.0, 3.0, 1.0, 3, 3)
    >>> sc = StepCosts(g, np.ones((3, 3), np.float32), None, None,
    ...                np.array([0.0, 0.0, -1.0, 0.0, 0.0, 8.0]))
    >>> s = multi_source_search(sc, [0, 8])
    >>> s.label.reshape(3, 3).tolist()
    [[0, 0, 0], [0, 0, 1], [0, 1, 1]]
    >>> round(float(s.dist[4]), 4)         # one diagonal step of sqrt(2) m at 1 per metre
    1.4142
    """
    src = np.asarray(source_cells, dtype=np.int64).reshape(-1)
    n = costs.grid.n_cells
    if src.size and (src.min() < 0 or src.max() >= n):
        raise InputError("a source lies outside the search grid; widen --corridor-margin-m")
    if np.unique(src).size != src.size:
        raise InputError("two sources share a search cell; use a smaller --corridor-cell-m")
    dist = np.full(n, np.inf)
    label = np.full(n, -1, dtype=np.int32)
    step = np.full(n, -1, dtype=np.int8)
    _search(costs.land, _z(costs), _x(costs), costs.z is not None, costs.crossing is not None,
            costs.grid.cell_m, costs.params, OFFSETS[costs.connectivity], src, dist, label, step)
    return Search(costs, src, dist, label, step)
