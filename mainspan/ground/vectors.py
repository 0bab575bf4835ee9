"""Vector layers that price or stop mains: barriers, avoided areas and crossings.

``--barrier LAYER``
    Polygons or lines that a main may not cross (buildings, ponds, protected
    land).  A straight link that touches one is impassable; in the corridor
    search every cell a barrier touches is impassable.
``--avoid LAYER=PRICE_PER_M``
    Polygons where each metre of main costs ``PRICE_PER_M`` more.
``--crossing LAYER=PRICE``
    Lines (roads, streams, railways) crossed at a lump sum ``PRICE`` per
    crossing.  A link's ``crossings`` is the number of points where it meets
    the lines (shapely's intersection, counted per line: a link that crosses
    a meandering stream three times pays three times; where it runs along a
    line, each shared stretch counts once).

For straight links these are cost terms for
:func:`mainspan.ground.costs.price_links` (bulk queries on a shapely STRtree);
for the corridor search they are burnt into the grid
(:func:`VectorCosts.burn`).  Geometries are reprojected to the working CRS.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field

import numpy as np

from ..errors import DataFileError, InputError

__all__ = ["VectorLayer", "VectorCosts", "read_vector_layer", "count_crossings"]


@dataclass
class VectorLayer:
    """Geometries of one layer in the working CRS, with its price and where it came from."""

    geoms: np.ndarray
    price: float
    source: str

    @property
    def tree(self):
        import shapely

        if not hasattr(self, "_tree"):
            self._tree = shapely.STRtree(self.geoms)
        return self._tree


def read_vector_layer(spec, *, working_crs, option, kinds, priced):
    """Read ``PATH`` or ``PATH=PRICE`` (a path, or ``(path, price)``) into a VectorLayer.

    ``kinds`` lists the accepted geometry families (``"polygon"``, ``"line"``).
    A layer without a CRS is taken to be in the working CRS.
    """
    import geopandas as gpd
    import shapely

    price = 0.0
    if isinstance(spec, VectorLayer):
        return spec
    if isinstance(spec, (tuple, list)):
        path, price = spec
    elif priced:
        text = os.fspath(spec)
        if "=" not in text:
            raise InputError(f"{option} {text!r}: expected LAYER=PRICE (e.g. roads.gpkg=25000)")
        path, _, p = text.rpartition("=")
        try:
            price = float(p)
        except ValueError:
            raise InputError(f"{option} {text!r}: price {p!r} is not a number; "
                             "give LAYER=PRICE") from None
    else:
        path = spec
    path = os.fspath(path)
    if priced and not (isinstance(price, (int, float)) and math.isfinite(price) and price >= 0):
        raise InputError(f"{option} {path!r}: price must be a finite number >= 0; got {price!r}")
    layer = None
    if "|" in path:
        path, _, layer = path.partition("|")
    try:
        df = gpd.read_file(path, layer=layer)
    except Exception as exc:
        raise DataFileError(f"{option}: cannot read {path!r}: {exc}; check the path and "
                            "layer") from None
    if df.crs is not None:
        df = df.to_crs(working_crs)
    geoms = np.asarray(df.geometry.values, dtype=object)
    keep = ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))
    geoms = geoms[keep]
    fam = np.array([_family(g) for g in geoms])
    bad = np.flatnonzero(~np.isin(fam, kinds))
    if bad.size:
        i = int(np.flatnonzero(keep)[bad[0]])
        raise InputError(f"{option} {path!r}: feature {i} is a {geoms[bad[0]].geom_type}; "
                         f"this option takes {' or '.join(kinds)} features")
    return VectorLayer(geoms, float(price), f"{option} {path!r}")


def _family(g):
    t = g.geom_type
    if "Polygon" in t:
        return "polygon"
    if "LineString" in t or "LinearRing" in t:
        return "line"
    return "point"


def count_crossings(lines, layer: VectorLayer) -> np.ndarray:
    """Number of points where each of *lines* meets the layer's lines (per line crossed).

    A shared stretch (the link runs along a line) counts once per stretch.
    """
    import shapely

    lines = np.asarray(lines, dtype=object)
    out = np.zeros(len(lines), dtype=np.int64)
    if not len(lines) or not len(layer.geoms):
        return out
    li, gi = layer.tree.query(lines, predicate="intersects")
    if not li.size:
        return out
    inter = shapely.intersection(lines[li], layer.geoms[gi])
    parts = shapely.get_parts(inter, return_index=True)
    # each point or shared stretch is one crossing; contiguous stretches merge first
    pieces, idx = parts
    owner = li[idx]
    np.add.at(out, owner, 1)
    return out


@dataclass
class VectorCosts:
    """Barriers, avoided areas and crossings of a run (all in the working CRS)."""

    barriers: list = field(default_factory=list)
    avoid: list = field(default_factory=list)
    crossings: list = field(default_factory=list)

    @classmethod
    def read(cls, *, working_crs, barrier=(), avoid=(), crossing=()):
        """Read the layers given as options (sequences of specs; see the module notes)."""
        return cls(
            [read_vector_layer(s, working_crs=working_crs, option="--barrier",
                               kinds=("polygon", "line"), priced=False) for s in barrier or ()],
            [read_vector_layer(s, working_crs=working_crs, option="--avoid",
                               kinds=("polygon",), priced=True) for s in avoid or ()],
            [read_vector_layer(s, working_crs=working_crs, option="--crossing",
                               kinds=("line",), priced=True) for s in crossing or ()])

    def __bool__(self):
        return bool(self.barriers or self.avoid or self.crossings)

    # ------------------------------------------------------------------ straight links
    def terms(self):
        """Cost terms for ``price_links(extra_terms=...)``: barrier, avoid, crossing."""
        out = []
        if self.barriers:
            out.append(self._barrier_term)
        if self.avoid:
            out.append(self._avoid_term)
        if self.crossings:
            out.append(self._crossing_term)
        return out

    @staticmethod
    def _segments(ctx):
        import shapely

        return shapely.linestrings(np.stack([ctx.p0, ctx.p1], axis=1))

    def _barrier_term(self, ctx):
        segs = self._segments(ctx)
        cost = np.zeros(ctx.m)
        for lay in self.barriers:
            li, _ = lay.tree.query(segs, predicate="intersects")
            cost[li] = np.inf
        return {"cost": cost}

    def _avoid_term(self, ctx):
        import shapely

        segs = self._segments(ctx)
        inside = np.zeros(ctx.m)
        cost = np.zeros(ctx.m)
        for lay in self.avoid:
            li, gi = lay.tree.query(segs, predicate="intersects")
            if li.size:
                ln = shapely.length(shapely.intersection(segs[li], lay.geoms[gi]))
                part = np.zeros(ctx.m)
                np.add.at(part, li, ln)
                inside += part
                cost += lay.price * part
        return {"cost": cost, "avoid_m": inside}

    def _crossing_term(self, ctx):
        segs = self._segments(ctx)
        n = np.zeros(ctx.m)
        cost = np.zeros(ctx.m)
        for lay in self.crossings:
            k = count_crossings(segs, lay).astype(float)
            n += k
            cost += lay.price * k
        return {"cost": cost, "crossings": n, "crossing_cost": cost.copy()}

    # ------------------------------------------------------------------ grid
    def burn(self, grid):
        """Burn the layers into a search grid.

        Returns
        -------
        barrier : ndarray bool (nrows, ncols) or None
            Every cell a barrier touches.
        avoid : ndarray float32 (nrows, ncols) or None
            Added price per metre: cells whose centre lies inside an avoided polygon.
        crossing : ndarray int32 (nrows, ncols) or None
            Index of the crossing line on each cell it touches, -1 elsewhere.
        prices : ndarray float64
            Price of each crossing line, by the index above.
        """
        from rasterio.features import rasterize

        shape = (grid.nrows, grid.ncols)
        tr = grid.transform()
        barrier = avoid = crossing = None
        if self.barriers:
            geoms = [g for lay in self.barriers for g in lay.geoms]
            barrier = rasterize([(g, 1) for g in geoms], out_shape=shape, transform=tr,
                                fill=0, all_touched=True, dtype="uint8").astype(bool)
        if self.avoid:
            avoid = np.zeros(shape, dtype=np.float32)
            for lay in self.avoid:
                m = rasterize([(g, 1) for g in lay.geoms], out_shape=shape, transform=tr,
                              fill=0, all_touched=False, dtype="uint8")
                avoid += np.float32(lay.price) * m
        prices = np.zeros(0)
        if self.crossings:
            geoms, price = [], []
            for lay in self.crossings:
                for g in lay.geoms:
                    geoms.append(g)
                    price.append(lay.price)
            prices = np.asarray(price)
            crossing = rasterize([(g, i + 1) for i, g in enumerate(geoms)], out_shape=shape,
                                 transform=tr, fill=0, all_touched=True,
                                 dtype="int32").astype(np.int32) - 1
        return barrier, avoid, crossing, prices

    def names(self):
        """The barrier layers, for messages."""
        return ", ".join(lay.source for lay in self.barriers)
