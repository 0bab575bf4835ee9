"""Queries of a :class:`mainspan.ground.surfaces.Surface`: sampling, traversal, profiles.

The methods of :class:`SurfaceQueries`, which ``Surface`` inherits; conventions, windows and
tiles are described in :mod:`mainspan.ground.surfaces`.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError
from .raster_kernels import (
    _accumulate, _bilinear_prep, _bilinear_tile, _bilinear_values, _bilinear_window,
    _bilinear_window_xy, _bucket, _cell_keys, _crossing_bounds, _densify, _gather_cells,
    _point_keys, _profile_stations, _stations_to_index, _traverse_segments,
)

__all__ = ["SurfaceQueries"]

_CHUNK_CELLS = 4_000_000       # traversal crossings held at once
_CHUNK_POINTS = 2_000_000      # sample positions held at once
_ORDER_BLOCK = 256             # cells per side of the blocks that order links for locality


class SurfaceQueries:
    """Sampling, traversal and profile queries (mixed into ``Surface``)."""

    def gather_cells(self, rows, cols):
        """Values (float64, NaN nodata) of the cells ``(rows, cols)``, read tile by tile."""
        rows = np.ascontiguousarray(rows, dtype=np.int64)
        cols = np.ascontiguousarray(cols, dtype=np.int64)
        out = np.full(rows.shape[0], np.nan)
        if rows.shape[0] == 0:
            return out
        tr, tc = self.tile_shape
        keys = _cell_keys(rows, cols, tr, tc, self._ntc, *self._shift)
        if bool((keys == keys[0]).all()):          # one tile: no grouping needed
            arr, r0, c0 = self._tile(int(keys[0]))
            _gather_cells(arr, r0, c0, rows, cols, np.arange(rows.shape[0], dtype=np.int64), out)
            return out
        order, starts = _bucket(keys, self._ntr * self._ntc)
        for key in np.flatnonzero(np.diff(starts)):
            arr, r0, c0 = self._tile(key)
            _gather_cells(arr, r0, c0, rows, cols, order[starts[key]:starts[key + 1]], out)
        return out

    def _sample_index(self, colf, rowf):
        colf = np.ascontiguousarray(colf, dtype=np.float64)
        rowf = np.ascontiguousarray(rowf, dtype=np.float64)
        out = np.full(colf.shape[0], np.nan)
        tr, tc = self.tile_shape
        i0, j0, fu, fv, key = _bilinear_prep(colf, rowf, self.width, self.height, tr, tc,
                                             self._ntc, *self._shift)
        n = colf.shape[0]
        if n and key[0] >= 0 and bool((key == key[0]).all()):
            # all in one tile (the usual case once focus() has set the window): no grouping
            arr, r0, c0 = self._tile(int(key[0]))
            none = np.zeros(0, np.int64)
            _bilinear_tile(arr, r0, c0, self.width, self.height, i0, j0, fu, fv,
                           np.arange(n, dtype=np.int64), n, none, none, out, np.zeros(0))
            return out
        # samples whose neighbours straddle tiles are split into their four cells, which
        # join the same tile grouping, so each tile is visited once per call
        strad = np.flatnonzero(key == -2)
        ia, ja = i0[strad], j0[strad]
        ib, jb = np.minimum(ia + 1, self.height - 1), np.minimum(ja + 1, self.width - 1)
        srows = np.concatenate([ia, ia, ib, ib])
        scols = np.concatenate([ja, jb, ja, jb])
        n = colf.shape[0]
        keys = np.concatenate([key, _cell_keys(srows, scols, tr, tc, self._ntc, *self._shift)])
        order, starts = _bucket(keys, self._ntr * self._ntc)
        sval = np.empty(srows.shape[0])
        for k in np.flatnonzero(np.diff(starts)):
            arr, r0, c0 = self._tile(k)
            _bilinear_tile(arr, r0, c0, self.width, self.height, i0, j0, fu, fv,
                           order[starts[k]:starts[k + 1]], n, srows, scols, out, sval)
        if strad.size:
            _bilinear_values(sval, fu[strad], fv[strad], out, strad)
        return out

    def _window_array(self):
        """``(cells, row0, col0)`` of the window read in one piece."""
        (r0, c0), (sr, sc), (tr, tc) = self.window[:2], self._shift, self.tile_shape
        return self._tile(((r0 + sr) // tr) * self._ntc + (c0 + sc) // tc)

    def _sample_many(self, colf, rowf, progress=None):
        """Bilinear values at many index positions, in tile order and bounded chunks."""
        n = colf.shape[0]
        if self.tile_shape == self.window[2:] and n:
            # the window is read in one piece: one pass straight from it, the rare
            # positions beyond it through the tiles
            arr, r0, c0 = self._window_array()
            out = np.empty(n)
            miss = _bilinear_window(np.ascontiguousarray(colf, dtype=np.float64),
                                    np.ascontiguousarray(rowf, dtype=np.float64), arr, r0, c0,
                                    self.width, self.height, out)
            if miss.size:
                out[miss] = self._sample_index(colf[miss], rowf[miss])
            if progress is not None:
                progress(n, n)
            return out
        if n <= _CHUNK_POINTS:
            out = self._sample_index(colf, rowf)
            if progress is not None:
                progress(n, n)
            return out
        nt = self._ntr * self._ntc
        tr, tc = self.tile_shape
        keys = _point_keys(colf, rowf, self.width, self.height, tr, tc, self._ntc, nt,
                           *self._shift)
        order, _ = _bucket(keys, nt + 1)
        del keys
        out = np.empty(n)
        for s in range(0, n, _CHUNK_POINTS):
            idx = order[s:s + _CHUNK_POINTS]
            out[idx] = self._sample_index(colf[idx], rowf[idx])
            if progress is not None:
                progress(min(n, s + _CHUNK_POINTS), n)
        return out

    def _to_index_chunked(self, xy):
        n = xy.shape[0]
        colf = np.empty(n)
        rowf = np.empty(n)
        for s in range(0, n, _CHUNK_POINTS):
            colf[s:s + _CHUNK_POINTS], rowf[s:s + _CHUNK_POINTS] = \
                self.to_index(xy[s:s + _CHUNK_POINTS])
        return colf, rowf

    def sample(self, xy, *, progress=None):
        """Bilinear values at working-CRS points.

        Parameters
        ----------
        xy : array_like, shape (k, 2)
            Points in the working CRS (metres).
        progress : callable, optional
            ``progress(done, total)`` after each chunk of points.

        Returns
        -------
        ndarray of float64, shape (k,)
            NaN outside the raster and where a weighted neighbour is nodata.
        """
        xy = np.ascontiguousarray(xy, dtype=np.float64).reshape(-1, 2)
        if self.same_crs and self.tile_shape == self.window[2:] and xy.shape[0]:
            arr, r0, c0 = self._window_array()      # one pass: point in, value out
            out = np.empty(xy.shape[0])
            miss = _bilinear_window_xy(xy, np.array(self._inv), arr, r0, c0, self.width,
                                       self.height, out)
            if miss.size:
                out[miss] = self._sample_index(*self.to_index(xy[miss]))
            if progress is not None:
                progress(xy.shape[0], xy.shape[0])
            return out
        colf, rowf = self._to_index_chunked(xy)
        return self._sample_many(colf, rowf, progress)

    def _link_order(self, p0, p1):
        """Links ordered by tile, then by 256-cell block, of their midpoint.

        Consecutive chunks then reuse cached tiles, and consecutive links touch
        nearby memory.  The order only affects speed, never results.
        """
        col, row = self.to_index(0.5 * (np.asarray(p0) + np.asarray(p1)))
        tr, tc = self.tile_shape
        b = _ORDER_BLOCK
        with np.errstate(invalid="ignore"):
            row = np.clip(np.nan_to_num(row, nan=0.0), 0, self.height - 1).astype(np.int64)
            col = np.clip(np.nan_to_num(col, nan=0.0), 0, self.width - 1).astype(np.int64)
        row += self._shift[0]
        col += self._shift[1]
        ti, tj = row // tr, col // tc
        # serpentine order over tile rows keeps neighbouring chunks adjacent
        tj = np.where(ti % 2 == 1, self._ntc - 1 - tj, tj)
        nbr, nbc = -(-tr // b), -(-tc // b)
        sub = ((row % tr) // b) * nbc + (col % tc) // b
        key = (ti * self._ntc + tj) * (nbr * nbc) + sub
        return np.argsort(key, kind="stable").astype(np.int64)

    def iter_crossings(self, p0, p1, outside, *, progress=None):
        """Yield chunks ``(owner, rows, cols, length_m)`` of the cells crossed by segments.

        ``outside`` (float64, shape (m,)) receives each segment's length outside
        the raster.  Lengths are working-CRS metres.  Crossings of one segment
        come in visiting order, possibly split over consecutive chunks.
        """
        p0 = np.asarray(p0, dtype=np.float64).reshape(-1, 2)
        p1 = np.asarray(p1, dtype=np.float64).reshape(-1, 2)
        m = p0.shape[0]
        order = self._link_order(p0, p1)
        step = 0.0 if self.same_crs else 0.5 * self.cell_size_m
        # densify in pieces of links to bound memory
        piece = max(1, int(_CHUNK_CELLS // max(1.0, 4.0 * (
            np.hypot(*(p1 - p0).T).mean() / self.cell_size_m + 2.0))) if m else 1)
        done = 0
        for s in range(0, m, piece):
            sel = order[s:s + piece]
            ax, ay, bx, by, own = _densify(p0[:, 0], p0[:, 1], p1[:, 0], p1[:, 1], step, sel)
            scale = np.hypot(bx - ax, by - ay)
            c0, r0 = self.to_index(np.column_stack([ax, ay]))
            c1, r1 = self.to_index(np.column_stack([bx, by]))
            bad = ~(np.isfinite(c0) & np.isfinite(r0) & np.isfinite(c1) & np.isfinite(r1))
            if bad.any():  # positions that do not exist in the raster CRS
                np.add.at(outside, own[bad], scale[bad])
                keep = ~bad
                c0, r0, c1, r1, scale, own = (a[keep] for a in (c0, r0, c1, r1, scale, own))
            bounds = _crossing_bounds(c0, r0, c1, r1, float(self.width), float(self.height))
            csum = np.cumsum(bounds)
            start = 0
            while start < c0.shape[0]:
                base = csum[start - 1] if start else 0
                end = int(np.searchsorted(csum, base + _CHUNK_CELLS, side="right"))
                end = max(end, start + 1)
                nb = int(csum[end - 1] - base)
                oo = np.empty(nb, np.int64)
                rr = np.empty(nb, np.int64)
                cc = np.empty(nb, np.int64)
                ll = np.empty(nb, np.float64)
                k = _traverse_segments(c0[start:end], r0[start:end], c1[start:end], r1[start:end],
                                       scale[start:end], own[start:end], self.width, self.height,
                                       bounds[start:end], oo, rr, cc, ll, outside)
                yield oo[:k], rr[:k], cc[:k], ll[:k]
                start = end
            done += sel.shape[0]
            if progress is not None:
                progress(done, m)

    def line_integral(self, p0, p1, *, progress=None):
        """Exact line integral of the cell values along straight working-CRS segments.

        Parameters
        ----------
        p0, p1 : array_like, shape (m, 2)
            Segment ends in the working CRS (metres).
        progress : callable, optional
            ``progress(done, total)`` in segments.

        Returns
        -------
        integral : ndarray of float64, shape (m,)
            Sum over crossed cells of (length in cell, m) x (cell value);
            nodata cells and the outside contribute nothing.
        length_in_nodata_m : ndarray of float64, shape (m,)
            Length crossing nodata cells inside the raster.
        length_outside_m : ndarray of float64, shape (m,)
            Length outside the raster extent.

        Examples
        --------
        A uniform raster of value ``v`` gives ``v * length`` (see the tests).
        """
        p0 = np.asarray(p0, dtype=np.float64).reshape(-1, 2)
        m = p0.shape[0]
        integral = np.zeros(m)
        nodata = np.zeros(m)
        outside = np.zeros(m)
        for oo, rr, cc, ll in self.iter_crossings(p0, p1, outside, progress=progress):
            _accumulate(oo, ll, self.gather_cells(rr, cc), integral, nodata)
        return integral, nodata, outside

    def traverse(self, p0, p1):
        """Per-cell crossings of working-CRS segments, CSR by segment.

        Returns
        -------
        offsets : ndarray of int64, shape (m + 1,)
        rows, cols : ndarray of int64
            Raster cells in visiting order within each segment.
        length_m : ndarray of float64
            Working-CRS length inside each cell.
        length_outside_m : ndarray of float64, shape (m,)
        """
        p0 = np.asarray(p0, dtype=np.float64).reshape(-1, 2)
        m = p0.shape[0]
        outside = np.zeros(m)
        parts = list(self.iter_crossings(p0, p1, outside))
        if parts:
            oo, rr, cc, ll = (np.concatenate(x) for x in zip(*parts))
        else:
            oo = rr = cc = np.zeros(0, np.int64)
            ll = np.zeros(0)
        srt = np.argsort(oo, kind="stable")
        offsets = np.zeros(m + 1, np.int64)
        np.cumsum(np.bincount(oo, minlength=m), out=offsets[1:])
        return offsets, rr[srt], cc[srt], ll[srt], outside

    def default_spacing_m(self):
        """Default profile spacing: half the smallest cell side, in working metres."""
        return 0.5 * self.cell_size_m

    def profiles(self, p0, p1, *, spacing_m=None, progress=None):
        """Bilinear ground profiles along straight segments, CSR by segment.

        Parameters
        ----------
        p0, p1 : array_like, shape (m, 2)
            Segment ends in the working CRS.
        spacing_m : float, optional
            Largest distance between stations; default half a cell.
        progress : callable, optional
            ``progress(done, total)`` in samples.

        Returns
        -------
        offsets : ndarray of int64, shape (m + 1,)
            Stations of segment ``i`` are ``offsets[i]:offsets[i+1]``; every
            segment has at least two (both ends).
        station_m : ndarray of float64
            Distance from ``p0`` along the segment (plan, working CRS).
        z : ndarray of float64
            Sampled values (NaN for nodata / outside).
        """
        p0 = np.asarray(p0, dtype=np.float64).reshape(-1, 2)
        p1 = np.asarray(p1, dtype=np.float64).reshape(-1, 2)
        if spacing_m is None:
            spacing_m = self.default_spacing_m()
        if not (math.isfinite(spacing_m) and spacing_m > 0):
            raise InputError(f"sample spacing must be a positive length in metres; got {spacing_m!r}")
        d = p1 - p0
        length = np.hypot(d[:, 0], d[:, 1])
        # memory estimate before sampling (mainspan.safeio budget): stations, z, work arrays
        from ..safeio import check_memory
        check_memory(float(np.sum(np.ceil(length / spacing_m) + 2.0)) * 40.0,
                     what=f"sampling raster {self.path!r} every {spacing_m:g} m along "
                     f"{len(length)} link(s)",
                     fix="use a larger --sample-spacing-m (default half a cell) or raise "
                     "--memory-limit")
        offsets, station = _profile_stations(length, float(spacing_m))
        if self.same_crs:
            # the geotransform is affine: stations interpolate linearly in index space too
            c0, r0 = self.to_index(p0)
            c1, r1 = self.to_index(p1)
            colf, rowf = _stations_to_index(offsets, station, length, c0, r0, c1, r1)
        else:
            colf = np.empty(station.shape[0])
            rowf = np.empty(station.shape[0])
            owner = np.repeat(np.arange(p0.shape[0]), np.diff(offsets))
            for s in range(0, station.shape[0], _CHUNK_POINTS):
                o = owner[s:s + _CHUNK_POINTS]
                f = np.divide(station[s:s + _CHUNK_POINTS], length[o],
                              out=np.zeros(o.shape[0]), where=length[o] > 0)
                colf[s:s + _CHUNK_POINTS], rowf[s:s + _CHUNK_POINTS] = \
                    self.to_index(p0[o] + f[:, None] * d[o])
            del owner
        z = self._sample_many(colf, rowf, progress)
        return offsets, station, z
