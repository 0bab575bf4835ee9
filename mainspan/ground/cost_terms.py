"""The built-in cost terms: ``terrain``, ``land`` and ``length``.

Moved from :mod:`mainspan.ground.costs`, which registers them in
:data:`~mainspan.ground.costs.COST_TERMS` (in this order) and documents the
cost-term protocol; each term is ``term(ctx) -> dict[str, ndarray]``.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numba
import numpy as np

from ..errors import InputError

if TYPE_CHECKING:
    from .cost_data import CostContext

__all__ = ["terrain_term", "land_term", "length_term"]

# links are costed in chunks of about this many profile samples (memory bound)
_CHUNK_SAMPLES = 1_000_000


@numba.njit(cache=True)
def _profile_stats(offsets, station, z, steep_pct, sel, surf, climb, desc, maxs, steep, nod,
                   zf, zt):
    for q in range(sel.shape[0]):
        i = sel[q]
        a = offsets[q]
        b = offsets[q + 1]
        s_len = 0.0
        c = 0.0
        d = 0.0
        mx = -1.0
        st = 0.0
        nd = 0.0
        for k in range(a, b - 1):
            ds = station[k + 1] - station[k]
            z0 = z[k]
            z1 = z[k + 1]
            if np.isnan(z0) or np.isnan(z1):
                nd += ds
                s_len += ds
                continue
            dz = z1 - z0
            s_len += math.sqrt(ds * ds + dz * dz)
            if dz > 0:
                c += dz
            else:
                d -= dz
            if ds > 0:
                slope = abs(dz) / ds * 100.0
                if slope > mx:
                    mx = slope
                if steep_pct >= 0 and slope > steep_pct:
                    st += ds
        surf[i] = s_len
        climb[i] = c
        desc[i] = d
        if mx >= 0:
            maxs[i] = mx
        elif nd > 0:
            maxs[i] = np.nan
        else:
            maxs[i] = 0.0
        steep[i] = st
        nod[i] = nd
        zf[i] = z[a]
        zt[i] = z[b - 1]


def terrain_term(ctx: CostContext) -> dict:
    """Ground profile components and the climb / descent / steep prices."""
    m = ctx.m
    w = ctx.weights
    if ctx.terrain is None:
        nan = np.full(m, np.nan)
        zero = np.zeros(m)
        return {"surface_length_m": ctx.length_m.copy(), "climb_m": zero, "descent_m": zero.copy(),
                "max_slope_pct": zero.copy(), "steep_length_m": zero.copy(), "z_from_m": nan,
                "z_to_m": nan.copy(), "cost": np.zeros(m)}
    surf = ctx.terrain
    spacing = ctx.sample_spacing_m or surf.default_spacing_m()
    cols = {k: np.zeros(m) for k in ("surface_length_m", "climb_m", "descent_m", "max_slope_pct",
                                      "steep_length_m", "nodata_m", "z_from_m", "z_to_m")}
    steep_pct = -1.0 if w.steep_slope_pct is None else float(w.steep_slope_pct)
    order = surf._link_order(ctx.p0, ctx.p1)
    per_link = np.ceil(ctx.length_m[order] / spacing) + 2
    csum = np.cumsum(per_link)
    start = 0
    while start < m:
        base = csum[start - 1] if start else 0.0
        end = max(start + 1, int(np.searchsorted(csum, base + _CHUNK_SAMPLES, side="right")))
        sel = order[start:end]
        off, station, z = surf.profiles(ctx.p0[sel], ctx.p1[sel], spacing_m=spacing)
        _profile_stats(off, station, z, steep_pct, sel, cols["surface_length_m"], cols["climb_m"],
                       cols["descent_m"], cols["max_slope_pct"], cols["steep_length_m"],
                       cols["nodata_m"], cols["z_from_m"], cols["z_to_m"])
        start = end
        if ctx.progress is not None:
            ctx.progress(end, m)
    surf.release()
    cost = w.climb * cols["climb_m"] + w.descent * cols["descent_m"]
    if w.steep_per_m:
        cost = cost + w.steep_per_m * cols["steep_length_m"]
    cols["cost"] = cost
    cols["nodata_source"] = f"terrain raster {surf.path!r}"
    return cols


def _apply_classes(values, table, surf):
    codes, costs = table
    out = np.full(values.shape, np.nan)
    ok = ~np.isnan(values)
    v = values[ok]
    j = np.clip(np.searchsorted(codes, v), 0, codes.shape[0] - 1)
    hit = codes[j] == v
    if not hit.all():
        missing = np.unique(v[~hit])
        shown = ", ".join(f"{c:g}" for c in missing[:20]) + (" ..." if missing.size > 20 else "")
        priced = ", ".join(f"{c:g}" for c in codes)
        raise InputError(f"class raster {surf.name!r} ({surf.path}) has code(s) {shown} along the "
                         f"links that class_costs does not price (priced: {priced}); add them to "
                         "the class table")
    out[ok] = costs[j]
    return out


def land_term(ctx: CostContext) -> dict:
    """Line integral of the land-cost rasters (sum, or a cost expression)."""
    m = ctx.m
    land = np.zeros(m)
    if not ctx.land:
        return {"land_cost": land, "cost": land.copy()}
    per = {name: np.zeros(m) for name in ctx.land}
    nod = np.zeros(m)
    from .surfaces import _accumulate  # the numba accumulator shared with line_integral

    n_pass = 1 if ctx.expression is not None else len(ctx.land)
    done = [0]

    def prog(d, t):
        if ctx.progress is not None:
            ctx.progress(done[0] + d, n_pass * t)

    if ctx.expression is None:
        for name, surf in ctx.land.items():
            scratch = np.zeros(m)
            outside = np.zeros(m)
            table = ctx.class_tables.get(name)
            for oo, rr, cc, ll in surf.iter_crossings(ctx.p0, ctx.p1, outside, progress=prog):
                vals = surf.gather_cells(rr, cc)
                if table is not None:
                    vals = _apply_classes(vals, table, surf)
                _accumulate(oo, ll, vals, per[name], scratch)
            surf.release()
            land += per[name]
            nod = np.maximum(nod, scratch + outside)
            done[0] += m
        sources = ", ".join(f"{s.name!r} ({s.path})" for s in ctx.land.values())
    else:
        used = ctx.expression.names_used
        grid = ctx.land[used[0]] if used else next(iter(ctx.land.values()))
        outside = np.zeros(m)
        scratch = np.zeros(m)
        for oo, rr, cc, ll in grid.iter_crossings(ctx.p0, ctx.p1, outside, progress=prog):
            env = {}
            for name, surf in ctx.land.items():
                vals = surf.gather_cells(rr, cc)
                if name in ctx.class_tables:
                    vals = _apply_classes(vals, ctx.class_tables[name], surf)
                env[name] = vals
                _accumulate(oo, ll, vals, per[name], np.zeros(m))
            if used:
                v = ctx.expression.evaluate(env)
            else:  # a constant expression: one value everywhere on the grid
                v = ctx.expression.evaluate({}) * np.ones(ll.shape[0])
            _accumulate(oo, ll, v, land, scratch)
        for surf in ctx.land.values():
            surf.release()
        nod = scratch + outside
        sources = f"cost expression {ctx.expression.text!r} over " + ", ".join(
            f"{ctx.land[n].name!r} ({ctx.land[n].path})" for n in (used or tuple(ctx.land)))
    out = {"land_cost": land}
    if ctx.named_land:
        for name, col in per.items():
            out[f"land_cost_{name}"] = col
    out["cost"] = ctx.weights.land * land
    out["nodata_m"] = nod
    out["nodata_source"] = f"land-cost raster(s) {sources}"
    return out


def length_term(ctx: CostContext) -> dict:
    """Price of the pipe itself: ``length`` per metre of surface length."""
    return {"cost": ctx.weights.length * ctx.components["surface_length_m"]}
