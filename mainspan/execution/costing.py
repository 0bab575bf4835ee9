"""Link costing of large jobs in tile-aligned chunks of links, one task per chunk.

:func:`price_links` takes the arguments of
:func:`mainspan.ground.costs.price_links`.  Up to ``chunk_links`` links it
calls it once, as before.  Above that it sorts the links by the raster tile
that holds their midpoint (the tiles the surface reads as windows; a grid of
:data:`GRID_CELLS` cells for a raster read whole), cuts the sorted list into
chunks of about ``chunk_links`` links at tile boundaries, prices each chunk as
one task of the current engine, and puts the results back in link order.
A worker opens the rasters from their paths and reads only the windows its
chunk's links cross; only the link ends of a chunk travel to it (the site
coordinates go to each worker once).

Every link is priced on its own, so a chunked run gives the same values as
one call.  The chunking depends only on the links and rasters, never on the
engine, so embedded, local and cluster runs give the same bytes, down to
the order of the impassability reasons (first seen, chunk by chunk).  What
differs from one call: a message about a bad link names the first bad link
of the first failing chunk (tile order), and counts in it are that chunk's.
"""

from __future__ import annotations

import re

import numpy as np

from ..errors import DataFileError, InputError
from .engine import current
from .worker import resolve_surface, surface_spec

__all__ = ["price_links", "plan_chunks", "DEFAULT_CHUNK_LINKS", "GRID_CELLS"]

#: Links per chunk unless ``[execution] chunk_links`` says otherwise.
DEFAULT_CHUNK_LINKS = 200_000
#: Side in cells of the chunking grid over a raster that is read whole (not tiled).
GRID_CELLS = 512


def plan_chunks(xy, edges, surface, chunk_links):
    """Index arrays of the links of each chunk (ascending within a chunk).

    Links are ordered by the tile of *surface* holding their midpoint
    (links outside the raster last), ties by link index, and cut into
    chunks of at least ``chunk_links`` links at tile boundaries (a tile
    holding more is cut inside, every ``chunk_links`` links).
    """
    xy = np.asarray(xy, dtype=np.float64)
    edges = np.asarray(edges, dtype=np.int64)
    m = len(edges)
    mid = 0.5 * (xy[edges[:, 0]] + xy[edges[:, 1]])
    col, row = surface.to_index(mid)
    tr, tc = surface.tile_shape
    if tr >= surface.height and tc >= surface.width:       # read whole: a notional grid
        tr = tc = GRID_CELLS
    ntc = -(-surface.width // tc)
    ntiles = ntc * -(-surface.height // tr)
    inside = (col >= 0) & (col < surface.width) & (row >= 0) & (row < surface.height)
    key = np.full(m, ntiles, dtype=np.int64)
    key[inside] = (row[inside] // tr).astype(np.int64) * ntc + (col[inside] // tc).astype(
        np.int64)
    order = np.lexsort((np.arange(m), key))
    skey = key[order]
    cuts, start = [], 0
    bounds = np.flatnonzero(np.diff(skey)) + 1          # where a new tile starts
    for b in [*bounds.tolist(), m]:
        while b - start >= 2 * chunk_links:
            start += chunk_links                        # a crowded tile: cut inside it
            cuts.append(start)
        if b - start >= chunk_links and b < m:
            cuts.append(b)
            start = b
    return [np.sort(part) for part in np.split(order, cuts) if len(part)]


def _spec(src, wcrs, raster_crs, name):
    """A raster argument as a worker receives it (open Surfaces become specs)."""
    from ..ground.surfaces import Surface

    if isinstance(src, Surface):
        return surface_spec(src.path, crs=wcrs, raster_crs=raster_crs or src.crs.to_wkt(),
                            name=src.name)
    if src is None:
        return None
    return surface_spec(src, crs=wcrs, raster_crs=raster_crs, name=name)


def _chunk_task(idx, xy, edges, kw):
    """Price one chunk: ``(index array, LinkCosts)``."""
    from ..ground.costs import price_links as price_once

    kw = dict(kw)
    kw["terrain"] = resolve_surface(kw.get("terrain"))
    land = kw.get("land_cost")
    if isinstance(land, dict):
        kw["land_cost"] = {k: resolve_surface(v) for k, v in land.items()}
    else:
        kw["land_cost"] = resolve_surface(land)
    try:
        return idx, price_once(xy, edges, **kw)
    except (InputError, DataFileError) as exc:      # name the link by its index in the job
        msg = re.sub(r"\blink (\d+) \(", lambda g: f"link {int(idx[int(g.group(1))])} (",
                     str(exc))
        exc.args = (msg,) + exc.args[1:]
        raise


def _merge(m, parts):
    """One LinkCosts of *m* links from the chunks' ``(idx, LinkCosts)``, in link order."""
    from ..ground.costs import LinkCosts, _count_reasons

    first = parts[0][1]
    comps = {k: np.empty(m, dtype=np.asarray(v).dtype) for k, v in first.components.items()}
    total = np.empty(m, dtype=np.float64)
    passable = np.empty(m, dtype=bool)
    code = np.full(m, -1, dtype=np.int16)
    labels: list = []
    for idx, c in parts:
        if list(c.components) != list(comps):
            raise InputError("link costing chunks returned different cost columns "
                             f"({list(c.components)} vs {list(comps)}); a cost term must "
                             "return the same columns for every set of links")
        for k, v in c.components.items():
            comps[k][idx] = v
        total[idx] = c.total
        passable[idx] = c.passable
        remap = np.empty(len(c.reason_labels), dtype=np.int16)
        for j, lab in enumerate(c.reason_labels):
            if lab not in labels:
                labels.append(lab)
            remap[j] = labels.index(lab)
        cc = np.asarray(c.reason_code)
        code[idx] = np.where(cc >= 0, remap[np.maximum(cc, 0)] if len(remap) else -1, -1)
    lab_t = tuple(labels)
    return LinkCosts(comps, total, passable, int((~passable).sum()), _count_reasons(code, lab_t),
                     code, lab_t)


def price_links(xy, edges, *, engine=None, chunk_links=None, progress=None, **kw):
    """:func:`mainspan.ground.costs.price_links`, in tile-aligned chunks for large jobs.

    Parameters
    ----------
    xy, edges, **kw
        As :func:`mainspan.ground.costs.price_links` takes them.
    engine : Engine, optional
        Default :func:`mainspan.execution.current`.
    chunk_links : int, optional
        Links per chunk (default: the engine's ``chunk_links``, else
        :data:`DEFAULT_CHUNK_LINKS`); jobs up to this size are priced in one
        call.
    progress : callable, optional
        ``progress(done, total)``.

    Returns
    -------
    LinkCosts
        The same values, link by link, as one call would give.
    """
    from ..ground.costs import price_links as price_once
    from ..ground.surfaces import Surface, open_surface

    eng = engine if engine is not None else current()
    chunk = int(chunk_links or getattr(eng, "chunk_links", None) or DEFAULT_CHUNK_LINKS)
    edges = np.asarray(edges)
    m = len(edges)
    ter, land = kw.get("terrain"), kw.get("land_cost")
    rasters = [r for r in ([ter] + (list(land.values()) if isinstance(land, dict) else [land]))
               if r is not None]
    if m <= chunk or not rasters or edges.ndim != 2:
        return price_once(xy, edges, progress=progress, **kw)
    wcrs, rcrs = kw.get("working_crs"), kw.get("raster_crs")
    ref = rasters[0]
    opened = None if isinstance(ref, Surface) else open_surface(ref, working_crs=wcrs,
                                                                raster_crs=rcrs, name="grid")
    try:
        parts = plan_chunks(xy, edges, ref if opened is None else opened, chunk)
    finally:
        if opened is not None:
            opened.close()
    task_kw = dict(kw)
    if not eng.local:      # workers open the rasters from their paths
        task_kw["terrain"] = _spec(ter, wcrs, rcrs, "terrain")
        task_kw["land_cost"] = ({k: _spec(v, wcrs, rcrs, k) for k, v in land.items()}
                                if isinstance(land, dict) else _spec(land, wcrs, rcrs,
                                                                     "land_cost"))
    xy_h = eng.share(np.asarray(xy, dtype=np.float64))
    items = [(idx, xy_h, edges[idx], task_kw) for idx in parts]
    tick = None if progress is None else (lambda _s, d, t: progress(d * m // t, m))
    out = eng.map(_chunk_task, items, stage="link costing", say=tick)
    return _merge(m, out)
