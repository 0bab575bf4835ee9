"""Rasters aligned to the working CRS: open, sample, integrate along lines.

A :class:`Surface` is one band of a raster (GeoTIFF, COG, VRT or anything
GDAL reads) seen from the working metric CRS of a run.  Every query takes
working-CRS coordinates in metres; when the raster is stored in another CRS
the query positions are transformed into it with pyproj (``always_xy=True``),
while every length is still measured in the working CRS.

Conventions
-----------
* Cell values sit at pixel centres.  GDAL already turns a ``PixelIsPoint``
  (``AREA_OR_POINT=Point``) GeoTIFF into an area geotransform whose origin is
  the outer corner of the first pixel, so in both cases the centre of cell
  ``(row, col)`` is at index coordinates ``(col + 0.5, row + 0.5)``.  The
  raster's ``AREA_OR_POINT`` tag is recorded in :attr:`Surface.area_or_point`.
* Nodata: the band's nodata value, its GDAL mask (per-dataset mask or alpha),
  and any non-finite value (NaN, inf) all mean "no data" and read as NaN.
  Positions outside the raster extent are nodata too.
* Bilinear sampling (:meth:`Surface.sample`, :meth:`Surface.profiles`) uses
  the four surrounding cell centres.  If any of the neighbours that carries a
  non-zero weight is nodata, the result is NaN (no partial re-weighting: a
  value half made of a hole is not a value).  Inside the extent but beyond the
  outermost ring of cell centres (the outer half cell) the position is
  clamped onto that ring, i.e. the edge values are extended.
* Line integrals (:meth:`Surface.line_integral`) are exact for a raster of
  piecewise-constant cells: the sum over the cells the plan segment crosses of
  (length inside the cell) x (cell value), found with the grid traversal of
  Amanatides & Woo (1987).  A segment running exactly along a cell edge is
  counted in the cell on the higher row/column side (the floor convention),
  except along the raster's last row/column edge; a segment passing exactly
  through a cell corner steps diagonally and visits no zero-length cell.
* Raster in another CRS: each segment is densified in the working CRS at no
  more than half a cell, the vertices are transformed, every sub-segment is
  traversed as a straight line in raster space and the lengths found in its
  cells are scaled by (working length of the sub-segment / its raster-space
  length) -- i.e. each sub-segment's working length is shared among its cells
  in proportion to the raster-space fractions.

Memory
------
Cells are kept as float32 when that holds the band exactly (8- and 16-bit
integers, float16/32 bands: the same values as float64, half the memory), else
float64.  Only the job's window is read: :meth:`Surface.focus` (called by
:func:`mainspan.ground.costs.price_links` with the sites) narrows reading to the
block-aligned bounding box of the sites plus a margin.  A window (the whole
raster when nothing narrowed it) that fits ``max_memory_mb`` is read once, in
one piece, with GDAL decoding its blocks on every core, and kept.  A larger one
is never read whole: it is split into tiles (a multiple of the raster's block
size, about 1024 x 1024 cells, smaller if the budget demands), every query is
grouped by tile with a counting sort, each needed tile is read once through a
:class:`rasterio.windows.Window` (windows are aligned on the raster's blocks,
so no block is decoded twice; the few bilinear samples whose neighbours
straddle two tiles are split into their four cells and grouped with the rest,
so each tile is still read once per query), and tiles are kept in a
least-recently-used cache bounded by the budget.  Nodata becomes NaN window by
window as it is read.  Work on many links runs in chunks, links ordered by the
tile of their midpoint so consecutive chunks reuse the cached tiles.  Neither
the window nor the tiles change any result: only which cells are read when.

References
----------
.. [1] J. Amanatides and A. Woo, "A Fast Voxel Traversal Algorithm for Ray
   Tracing", Eurographics '87, pp. 3-10, 1987.
"""

from __future__ import annotations

import math
import os
from collections import OrderedDict

import numpy as np
import pyproj

from ..errors import DataFileError, InputError
from .raster_kernels import _accumulate, traverse_grid  # noqa: F401  (shared with costs)
from .surface_queries import SurfaceQueries

__all__ = ["Surface", "open_surface", "traverse_grid"]

_TILE_TARGET = 1024
_DEFAULT_BUDGET_MB = 64
_GDAL_CACHE_BYTES = 8 * 2 ** 20   # blocks are read once into our own cache
_EXACT_IN_F32 = {np.dtype(t) for t in ("uint8", "int8", "uint16", "int16", "float16", "float32")}


# --------------------------------------------------------------------------- Surface

def _as_pyproj(crs, what):
    try:
        return pyproj.CRS.from_user_input(crs)
    except Exception as exc:  # pyproj raises CRSError and others
        raise InputError(f"{what} {crs!r} is not a CRS pyproj understands ({exc}); "
                         "give an EPSG code such as 'EPSG:32633' or a WKT string") from None


def working_crs_of(crs):
    """The working CRS as a pyproj CRS; it must be projected with metre axes.

    Examples
    --------
    >>> working_crs_of("EPSG:32633").to_epsg()
    32633
    """
    out = crs if isinstance(crs, pyproj.CRS) else _as_pyproj(crs, "working CRS")
    units = {ax.unit_name for ax in out.axis_info}
    if not out.is_projected or not units <= {"metre", "meter"}:
        raise InputError(f"working CRS {out.to_string()} is not projected in metres (axes in "
                         f"{', '.join(sorted(units)) or 'unknown units'}); lengths would be "
                         "wrong: use a metric projected CRS such as the local UTM zone")
    return out


def open_surface(path, *, working_crs, raster_crs=None, band=1, name="terrain",
                 max_memory_mb=_DEFAULT_BUDGET_MB):
    """Open one band of a raster as a :class:`Surface` queried in the working CRS.

    Parameters
    ----------
    path : str or os.PathLike
        Any raster GDAL reads (GeoTIFF, COG, VRT, ...).
    working_crs : CRS-like
        The metric CRS of the run; all coordinates given to and lengths
        returned by the surface are in it.
    raster_crs : CRS-like, optional
        CRS to assume when the raster declares none (ignored otherwise).
    band : int, default=1
        1-based band number.
    name : str, default="terrain"
        Name used in messages and component names.
    max_memory_mb : float, default=64
        Budget for cached raster cells: a job window up to this size (about 4,000 x 4,000
        float32 cells) is read in one piece, a larger one tile by tile.  With the libraries
        loaded (about 270 MiB) a costing run then stays under about 400 MiB.

    Returns
    -------
    Surface

    Raises
    ------
    DataFileError
        The file cannot be opened.
    InputError
        No CRS and no ``raster_crs``, bad band or bad budget.
    """
    return Surface(path, working_crs=working_crs, raster_crs=raster_crs, band=band, name=name,
                   max_memory_mb=max_memory_mb)


class Surface(SurfaceQueries):
    """One raster band aligned to a working CRS (see the module notes).

    Create with :func:`open_surface`.  Attributes: ``path``, ``name``,
    ``band``, ``width``, ``height``, ``transform`` (affine, raster CRS),
    ``crs`` (pyproj CRS of the raster), ``working_crs``, ``nodata``,
    ``area_or_point``, ``cell_size_m`` (smallest cell side in working metres),
    ``tile_shape``, and read statistics ``n_window_reads`` and
    ``max_window_cells``.
    """

    def __init__(self, path, *, working_crs, raster_crs=None, band=1, name="terrain",
                 max_memory_mb=_DEFAULT_BUDGET_MB):
        import rasterio

        self.path = os.fspath(path)
        self.name = str(name)
        if not (isinstance(max_memory_mb, (int, float)) and math.isfinite(max_memory_mb)
                and max_memory_mb > 0):
            raise InputError(f"max_memory_mb must be a positive number of MiB; got {max_memory_mb!r}")
        try:
            self._ds = rasterio.open(self.path)
        except Exception as exc:
            raise DataFileError(f"cannot open raster {self.path!r} ({self.name}): {exc}; "
                                "check the path and that GDAL can read the format") from None
        try:
            self._setup(working_crs, raster_crs, band, max_memory_mb)
        except Exception:
            self._ds.close()
            raise

    def _setup(self, working_crs, raster_crs, band, max_memory_mb):
        ds = self._ds
        if not isinstance(band, (int, np.integer)) or not (1 <= int(band) <= ds.count):
            raise InputError(f"band {band!r} of raster {self.path!r} does not exist; "
                             f"it has bands 1..{ds.count}")
        self.band = int(band)
        self.working_crs = working_crs_of(working_crs)
        if ds.crs is None:
            if raster_crs is None:
                raise InputError(f"raster {self.path!r} ({self.name}) has no CRS; "
                                 "pass --raster-crs EPSG:xxxx (raster_crs=) to say which it is")
            self.crs = _as_pyproj(raster_crs, f"raster_crs for {self.path!r}")
        else:
            self.crs = pyproj.CRS.from_wkt(ds.crs.to_wkt())
        self.width = int(ds.width)
        self.height = int(ds.height)
        self.transform = ds.transform
        if abs(self.transform.determinant) == 0:
            raise DataFileError(f"raster {self.path!r} has a degenerate geotransform; "
                                "fix its georeferencing")
        inv = ~self.transform
        self._inv = (inv.a, inv.b, inv.c, inv.d, inv.e, inv.f)
        self.nodata = ds.nodatavals[self.band - 1]
        self.area_or_point = ds.tags().get("AREA_OR_POINT", "Area")
        flags = ds.mask_flag_enums[self.band - 1]
        fnames = {f.name for f in flags}
        if "nodata" in fnames and self.nodata is not None:
            self._mask_mode = "nodata"
        elif "per_dataset" in fnames or "alpha" in fnames:
            self._mask_mode = "mask"
        else:
            self._mask_mode = "none"
        self.same_crs = self.crs.equals(self.working_crs, ignore_axis_order=True)
        if self.same_crs:
            self._to_raster = None
        else:
            self._to_raster = pyproj.Transformer.from_crs(self.working_crs, self.crs,
                                                          always_xy=True)
        self.cell_size_m = self._working_cell_size()
        # cells are kept in the band's own precision when float32 holds it exactly (8- and
        # 16-bit integers, float16/32): half the memory of float64 and the same values
        self.dtype = np.dtype(np.float32 if np.dtype(ds.dtypes[self.band - 1]) in _EXACT_IN_F32
                              else np.float64)
        self._block = tuple(int(b) for b in ds.block_shapes[self.band - 1])
        self._budget = float(max_memory_mb) * 2 ** 20
        self._cache: OrderedDict = OrderedDict()
        self._cache_bytes = 0
        self.n_window_reads = 0
        self.max_window_cells = 0
        self.window = (0, 0, self.height, self.width)
        self._set_tiles(*self.window)

    def _set_tiles(self, r0, c0, nr, nc):
        """Tile grid for the region ``rows r0..r0+nr, cols c0..c0+nc``: one tile when the
        region fits the budget, else block-aligned tiles of about 1024 cells a side; tile
        borders fall on the region's corner (tile ``(ti, tj)`` starts at row ``ti*tr - sr``)."""
        item = self.dtype.itemsize
        if nr * nc * item <= self._budget:
            tr, tc = nr, nc
        else:
            side = _TILE_TARGET
            while side ** 2 * item > self._budget / 4 and side > 8:
                side //= 2
            bh, bw = self._block
            tr = max(bh, (side // bh) * bh) if bh <= side else side
            tc = max(bw, (side // bw) * bw) if bw <= side else side
            tr, tc = min(tr, nr), min(tc, nc)
        self.tile_shape = (int(tr), int(tc))
        self._shift = (int(-r0 % tr), int(-c0 % tc))
        self._ntr = -(-(self.height + self._shift[0]) // tr)
        self._ntc = -(-(self.width + self._shift[1]) // tc)
        self._cache.clear()
        self._cache_bytes = 0

    def focus(self, xy, *, margin_cells=8):
        """Read only the part of the raster around these working-CRS points.

        The job's extent (the bounding box of *xy* in raster cells, plus ``margin_cells`` and,
        for a raster in another CRS, 5 % of the box for the bend of straight working-CRS
        lines), widened to at least 512 cells a side and aligned outward on the raster's
        blocks, becomes the window that is read: in one piece when it fits
        ``max_memory_mb``, else tile by tile.  Queries outside it stay correct (their tiles
        are read when asked for); only speed and memory depend on the window.

        Parameters
        ----------
        xy : array_like, shape (k, 2)
            Working-CRS points the job's links join (every link lies in their bounding box).
        margin_cells : int, default=8
            Cells added on every side.

        Returns
        -------
        tuple of int
            The window ``(row0, col0, nrows, ncols)``.
        """
        col, row = self.to_index(np.asarray(xy, dtype=np.float64).reshape(-1, 2))
        ok = np.isfinite(col) & np.isfinite(row)
        if not ok.any():
            return self.window
        c_lo, c_hi = float(col[ok].min()), float(col[ok].max())
        r_lo, r_hi = float(row[ok].min()), float(row[ok].max())
        pad_c = pad_r = float(margin_cells)
        if not self.same_crs:
            pad_c += 0.05 * (c_hi - c_lo)
            pad_r += 0.05 * (r_hi - r_lo)
        bounds = []
        for lo, hi, pad, size, blk, whole_blk in (
                (r_lo, r_hi, pad_r, self.height, self._block[0], False),
                (c_lo, c_hi, pad_c, self.width, self._block[1], self._block[1] >= self.width)):
            a = math.floor(lo - pad)
            b = math.ceil(hi + pad) + 1
            short = 512 - (b - a)
            if short > 0:
                a, b = a - short // 2, b + short - short // 2
            a, b = max(0, min(a, size)), max(0, min(b, size))
            if blk > 1 and not whole_blk:   # block-aligned: no block is decoded for nothing
                a, b = (a // blk) * blk, min(size, -(-b // blk) * blk)
            bounds.append((a, b))
        (ra, rb), (ca, cb) = bounds
        if rb <= ra or cb <= ca:
            return self.window           # the points miss the raster: nothing to narrow
        win = (ra, ca, rb - ra, cb - ca)
        if win != self.window:
            self.window = win
            self._set_tiles(*win)
        return self.window

    def resident_bytes(self):
        """Bytes of raster cells this surface holds at most (its window, capped by the budget)."""
        _, _, nr, nc = self.window
        return int(min(nr * nc * self.dtype.itemsize, max(self._budget, self._tile_bytes())))

    def _tile_bytes(self):
        return self.tile_shape[0] * self.tile_shape[1] * self.dtype.itemsize

    # ------------------------------------------------------------------ housekeeping
    def close(self):
        """Close the dataset and drop cached tiles."""
        self._cache.clear()
        self._cache_bytes = 0
        self._ds.close()

    def release(self):
        """Drop cached tiles of a raster read tile by tile (a window read whole is kept)."""
        if self.tile_shape != self.window[2:]:
            self._cache.clear()
            self._cache_bytes = 0

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def __repr__(self):
        return (f"Surface({self.name!r}, {self.path!r}, {self.height}x{self.width}, "
                f"crs={self.crs.to_string()}, tiles={self.tile_shape})")

    def same_grid(self, other) -> str | None:
        """Why *other* is not on the same grid as this surface, or None if it is."""
        if (self.width, self.height) != (other.width, other.height):
            return f"size {other.height}x{other.width} vs {self.height}x{self.width}"
        if not self.transform.almost_equals(other.transform, precision=1e-9):
            return f"geotransform {tuple(other.transform)[:6]} vs {tuple(self.transform)[:6]}"
        if not self.crs.equals(other.crs, ignore_axis_order=True):
            return f"CRS {other.crs.to_string()} vs {self.crs.to_string()}"
        return None

    def _working_cell_size(self):
        t = self.transform
        if self.same_crs:
            return float(min(math.hypot(t.a, t.d), math.hypot(t.b, t.e)))
        back = pyproj.Transformer.from_crs(self.crs, self.working_crs, always_xy=True)
        c, r = self.width / 2.0, self.height / 2.0
        pts = [t * (c, r), t * (c + 1, r), t * (c, r + 1)]
        xs, ys = back.transform([p[0] for p in pts], [p[1] for p in pts])
        dx = math.hypot(xs[1] - xs[0], ys[1] - ys[0])
        dy = math.hypot(xs[2] - xs[0], ys[2] - ys[0])
        size = min(dx, dy)
        if not math.isfinite(size) or size <= 0:
            raise InputError(f"raster {self.path!r} ({self.name}) cannot be placed in the working "
                             f"CRS {self.working_crs.to_string()}; check its CRS or pass raster_crs")
        return float(size)

    # ------------------------------------------------------------------ reading
    def _read_window(self, row0, col0, nrows, ncols):
        """Read one window as :attr:`dtype` with NaN for nodata (the only place that reads)."""
        from rasterio.windows import Window

        import rasterio

        win = Window(col0, row0, ncols, nrows)
        self.n_window_reads += 1
        self.max_window_cells = max(self.max_window_cells, nrows * ncols)
        try:
            # every window is read once and kept in our own cache, so GDAL's block cache
            # (5 % of RAM by default) would only double the memory: keep it small; a window
            # spans many blocks, which GDAL decodes on every core (GeoTIFF, GDAL >= 3.6)
            with rasterio.Env(GDAL_CACHEMAX=_GDAL_CACHE_BYTES, GDAL_NUM_THREADS="ALL_CPUS"):
                a = self._ds.read(self.band, window=win, out_dtype=self.dtype)
        except Exception as exc:
            raise DataFileError(f"cannot read raster {self.path!r} ({self.name}) at rows "
                                f"{row0}..{row0 + nrows - 1}, cols {col0}..{col0 + ncols - 1}: "
                                f"{exc}") from None
        if self._mask_mode == "nodata":
            nd = float(self.nodata)
            if not math.isnan(nd):
                a[a == nd] = np.nan
        elif self._mask_mode == "mask":
            m = self._ds.read_masks(self.band, window=win)
            a[m == 0] = np.nan
        a[~np.isfinite(a)] = np.nan
        return a

    def _tile(self, key):
        hit = self._cache.get(key)
        if hit is not None:
            self._cache.move_to_end(key)
            return hit
        tr, tc = self.tile_shape
        ti, tj = divmod(int(key), self._ntc)
        r0, c0 = ti * tr - self._shift[0], tj * tc - self._shift[1]
        nr = min(r0 + tr, self.height) - max(r0, 0)
        nc = min(c0 + tc, self.width) - max(c0, 0)
        r0, c0 = max(r0, 0), max(c0, 0)
        arr = self._read_window(r0, c0, nr, nc)
        entry = (arr, r0, c0)
        self._cache[key] = entry
        self._cache_bytes += arr.nbytes
        while self._cache_bytes > self._budget and len(self._cache) > 1:
            _, (old, _, _) = self._cache.popitem(last=False)
            self._cache_bytes -= old.nbytes
        return entry

    def read_all(self):
        """The whole band as float64 with NaN nodata (only if it fits the budget)."""
        if self.width * self.height * self.dtype.itemsize > self._budget:
            raise InputError(f"raster {self.path!r} ({self.name}) is larger than max_memory_mb; "
                             "it is only read tile by tile")
        if self.window == (0, 0, self.height, self.width):
            return self._tile(0)[0].astype(np.float64, copy=False)
        return self._read_window(0, 0, self.height, self.width).astype(np.float64, copy=False)

    # ------------------------------------------------------------------ coordinates
    def to_index(self, xy):
        """Working-CRS points (k, 2) -> fractional (col, row) index coordinates."""
        xy = np.asarray(xy, dtype=np.float64).reshape(-1, 2)
        x, y = xy[:, 0], xy[:, 1]
        if self._to_raster is not None:
            x, y = self._to_raster.transform(x, y)
            x = np.asarray(x, dtype=np.float64)
            y = np.asarray(y, dtype=np.float64)
        a, b, c, d, e, f = self._inv
        return a * x + b * y + c, d * x + e * y + f

    def contains(self, xy):
        """Boolean mask: which working-CRS points lie inside the raster extent."""
        col, row = self.to_index(xy)
        with np.errstate(invalid="ignore"):
            return (col >= 0) & (col <= self.width) & (row >= 0) & (row <= self.height)
