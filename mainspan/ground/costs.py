"""Price every candidate link along the ground it crosses.

:func:`price_links` turns candidate links (int64 node pairs over working-CRS
points) into :class:`LinkCosts`: one float64 column per cost component and a
``total`` that the spanning stage minimises.  The built-in terms are

``terrain``
    Bilinear ground profile of each link from the terrain raster, sampled at
    no more than half a cell (``sample_spacing_m``): ``surface_length_m`` (3D
    length along the profile; a step without data counts its plan length),
    ``climb_m`` / ``descent_m`` (sums of the positive / negative rises from
    ``edges[:, 0]`` to ``edges[:, 1]``), ``max_slope_pct`` (largest
    |rise| / run over profile steps, x 100), ``steep_length_m`` (plan length
    of the steps steeper than ``steep_slope_pct``), ``z_from_m`` and
    ``z_to_m``.  Cost: ``climb * climb_m + descent * descent_m +
    steep_per_m * steep_length_m``.
``land``
    Exact line integral of the land-cost rasters (cost per metre of main laid
    through the cell) over the plan path -- see
    :meth:`mainspan.ground.surfaces.Surface.line_integral`.  With several named
    rasters the land cost is their sum (one ``land_cost_<name>`` column
    each); with ``cost_expression`` the expression is evaluated per crossed
    cell and then integrated (the rasters it uses must share one grid);
    ``class_costs`` turns a class raster into cost per metre by a table
    before either.  Cost: ``land * land_cost``.
``length``
    Cost: ``length * surface_length_m`` (the pipe follows the ground; without
    terrain the surface length is the plan length).  ``fixed`` is added per
    link on top of all terms.

Cost-term protocol (entry-point group ``mainspan.cost_terms``)
-------------------------------------------------------------
A cost term is a callable ``term(ctx) -> dict[str, numpy.ndarray]`` where
``ctx`` is a :class:`CostContext` (the links, their plan lengths, the opened
surfaces, the weights, and ``ctx.components`` -- every column computed by the
built-in terms and by earlier terms, read-only).  The returned mapping holds

* ``"cost"`` (required): float64 array of shape (m,), the term's addition to
  ``total``; ``inf`` makes a link impassable (counted under the term's name);
* ``"nodata_m"`` (optional): float64 (m,), plan length of the link the term
  could not price for lack of data -- the ``on_nodata`` policy is applied to
  it and it feeds ``nodata_fraction``; ``"nodata_source"`` (optional, str)
  names the raster for messages;
* any other key: a new float64 (m,) component column, added after the
  built-in columns in the order given.  Names must not clash with existing
  columns.

Register with ``COST_TERMS.register("name")`` or an entry point
``[project.entry-points."mainspan.cost_terms"] name = "pkg.module:func"``,
then pass ``extra_terms=("name",)`` (or the callable itself).

Nodata policy (``on_nodata``): a link crossing cells without data (nodata
value, mask, non-finite, or outside the raster) is ``"barrier"`` -- not
buildable, total ``inf``, counted in ``n_impassable`` and ``reasons``;
``"skip"`` -- the gap costs nothing (no land cost, no climb; plan length only);
``"error"`` -- :class:`~mainspan.errors.InputError` naming the first such link.
A class code missing from ``class_costs`` is always an error (a silently free
class would be a wrong answer); nodata cells of a class raster are nodata.

References
----------
.. [1] J. Amanatides and A. Woo, "A Fast Voxel Traversal Algorithm for Ray
   Tracing", Eurographics '87, 1987 (the cell traversal behind the land cost).
"""

from __future__ import annotations

import math
import os
import re

import numpy as np

from ..errors import InputError
from .cost_data import OPTION_NAMES, CostContext, CostWeights, LinkCosts, _count_reasons  # noqa: F401
from .cost_terms import land_term, length_term, terrain_term
from .expression import FUNCTIONS, compile_expression
from ..plugins import Registry
from .surfaces import Surface, open_surface, working_crs_of

__all__ = [
    "COST_TERMS",
    "OPTION_NAMES",
    "CostContext",
    "CostWeights",
    "LinkCosts",
    "node_elevations",
    "price_links",
    "sites_outside",
]

BASE_COMPONENTS = (
    "length_m", "surface_length_m", "land_cost", "climb_m", "descent_m", "max_slope_pct",
    "steep_length_m", "nodata_fraction", "z_from_m", "z_to_m",
)
_POLICIES = ("barrier", "skip", "error")
_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")


def _check_term(name, fn):
    from ..plugins import PluginError

    if not callable(fn):
        raise PluginError(f"cost term {name!r} must be callable as term(ctx) -> dict")


COST_TERMS = Registry("cost term", "mainspan.cost_terms", option="--cost-term", check=_check_term)



# --------------------------------------------------------------------------- built-in terms
# (mainspan.ground.cost_terms; registered here, in this order)
for _name, _term in (("terrain", terrain_term), ("land", land_term), ("length", length_term)):
    COST_TERMS.register(_name, _term)


_BUILTIN = ("terrain", "land", "length")


# --------------------------------------------------------------------------- helpers
def _refuse_bad_costs(tname, out, cost, ctx, e, node_id, weights, negative):
    """A negative cost, or an overflow of a built-in term, is an input error naming its source.

    Built-in terms are finite wherever their inputs are, so an infinite cost from
    them is an overflow of too large weights, not an impassable link.
    """
    def ends(i):
        return (f"sites {node_id[e[i, 0]]}-{node_id[e[i, 1]]}" if node_id is not None
                else f"nodes {e[i, 0]}-{e[i, 1]}")

    src = out.get("nodata_source") or f"cost term {tname!r}"
    if tname == "land":
        src = src.replace("land-cost raster(s) cost expression", "cost expression", 1)
    with np.errstate(invalid="ignore"):
        neg = cost < 0
    if negative and neg.any():
        i = int(np.flatnonzero(neg)[0])
        raise InputError(f"{src} gives a negative cost on {int(neg.sum())} candidate link(s), "
                         f"e.g. link {i} ({ends(i)}): {float(cost[i]):.6g}; costs must be >= 0: "
                         "correct the raster values, or the expression (e.g. max(..., 0))")
    if tname in _BUILTIN or tname == "total":
        inf = np.isinf(cost)
        if inf.any():
            i = int(np.flatnonzero(inf)[0])
            big = [f"{OPTION_NAMES[k]} {getattr(weights, k):g}" for k in OPTION_NAMES
                   if k != "steep_slope_pct" and getattr(weights, k) > 1e100]
            raise InputError(
                f"the cost of {int(inf.sum())} candidate link(s), e.g. link {i} ({ends(i)}), "
                f"overflows (above 1.8e308) in {'the total' if tname == 'total' else src}"
                + (f" with {', '.join(big)}" if big else "")
                + "; use smaller weights: only their ratios matter for the layout")



def _open(src, *, working_crs, raster_crs, name, what):
    if isinstance(src, Surface):
        if not src.working_crs.equals(working_crs, ignore_axis_order=True):
            raise InputError(f"{what} surface {src.path!r} was opened for working CRS "
                             f"{src.working_crs.to_string()}, not {working_crs.to_string()}; "
                             "open it again with the run's working CRS")
        return src, False
    if isinstance(src, (str, os.PathLike)):
        return open_surface(src, working_crs=working_crs, raster_crs=raster_crs, name=name), True
    raise InputError(f"{what} must be a raster path or a Surface; got {type(src).__name__}")


def _class_tables(class_costs, names, named):
    if class_costs is None:
        return {}
    if not isinstance(class_costs, dict) or not class_costs:
        raise InputError(f"class_costs must be a non-empty dict {{class code: cost per m}}; "
                         f"got {class_costs!r}")
    if all(isinstance(v, dict) for v in class_costs.values()):
        tables = class_costs
    elif len(names) == 1:
        tables = {names[0]: class_costs}
    else:
        raise InputError("class_costs is one table but there are several land-cost rasters "
                         f"({', '.join(names)}); give {{raster name: {{code: cost}}}}")
    out = {}
    for name, table in tables.items():
        if name not in names:
            raise InputError(f"class_costs names raster {name!r}, which is not a land-cost raster "
                             f"(have: {', '.join(names)})")
        codes, costs = [], []
        for k, v in table.items():
            try:
                kf, vf = float(k), float(v)
            except (TypeError, ValueError):
                kf = vf = float("nan")
            if not (math.isfinite(kf) and math.isfinite(vf) and vf >= 0):
                raise InputError(f"class_costs[{name!r}] entry {k!r}: {v!r} must map a numeric "
                                 "class code to a finite cost per metre >= 0")
            codes.append(kf)
            costs.append(vf)
        o = np.argsort(codes)
        out[name] = (np.asarray(codes)[o], np.asarray(costs)[o])
    return out


def _validate_links(xy, edges):
    xy = np.asarray(xy, dtype=np.float64)
    if xy.ndim != 2 or xy.shape[1] != 2:
        raise InputError(f"xy must be a float array of shape (n, 2) in working-CRS metres; "
                         f"got shape {xy.shape}")
    bad = ~np.isfinite(xy).all(axis=1)
    if bad.any():
        raise InputError(f"xy row {int(np.flatnonzero(bad)[0])} is not finite; "
                         "every site needs real coordinates")
    e = np.asarray(edges)
    if e.ndim != 2 or e.shape[1] != 2 or (e.size and not np.issubdtype(e.dtype, np.integer)):
        raise InputError(f"edges must be an int64 array of shape (m, 2); got {e.dtype} "
                         f"shape {e.shape}")
    e = e.astype(np.int64, copy=False)
    if e.size and (e.min() < 0 or e.max() >= xy.shape[0]):
        i = int(np.flatnonzero((e < 0).any(1) | (e >= xy.shape[0]).any(1))[0])
        raise InputError(f"link {i} joins nodes {e[i, 0]}-{e[i, 1]} but there are only "
                         f"{xy.shape[0]} sites (indices 0..{xy.shape[0] - 1})")
    return xy, e


# --------------------------------------------------------------------------- public API

def price_links(xy, edges, *, working_crs, terrain=None, land_cost=None, cost_expression=None,
                class_costs=None, weights=CostWeights(), on_nodata="barrier",
                sample_spacing_m=None, raster_crs=None, extra_terms=(), progress=None,
                node_id=None, refuse_negative=False):
    """Price candidate links over terrain and land-cost rasters.

    Parameters
    ----------
    xy : array_like of float, shape (n, 2)
        Site coordinates in the working CRS (metres).
    edges : array_like of int, shape (m, 2)
        Candidate links as node-index pairs.
    working_crs : CRS-like
        The metric CRS of ``xy``.
    terrain : str, os.PathLike or Surface, optional
        Terrain raster (elevations in metres).
    land_cost : str, os.PathLike, Surface or dict of str -> path/Surface, optional
        Land-cost raster(s), cost per metre of main through each cell; a dict
        names them (names are identifiers, usable in ``cost_expression``).
    cost_expression : str, optional
        Combine the named rasters per cell (see :mod:`mainspan.ground.expression`);
        needs ``land_cost`` as a dict.
    class_costs : dict, optional
        ``{code: cost per m}`` for the single land raster, or
        ``{raster name: {code: cost per m}}``.
    weights : CostWeights, default=CostWeights()
    on_nodata : {"barrier", "skip", "error"}, default="barrier"
    sample_spacing_m : float, optional
        Profile spacing on the terrain; default half a terrain cell.
    raster_crs : CRS-like, optional
        CRS for rasters that declare none.
    extra_terms : sequence of str or callable, default=()
        Additional cost terms (registry names or callables; see the module
        docstring for the protocol).
    progress : callable, optional
        ``progress(done, total)``; ``total`` is m times the number of passes.
    node_id : sequence of str, optional
        Site ids, so that messages name the sites a link joins.
    refuse_negative : bool, default False
        Raise :class:`InputError` naming the raster or expression (and a link)
        when a cost term gives a negative cost; the planning pipeline sets it,
        as a tree cannot be grown over negative costs.

    Returns
    -------
    LinkCosts

    Raises
    ------
    InputError
        Bad parameters, unknown raster names, grids that differ under an
        expression, nodata under ``on_nodata="error"``.
    DataFileError
        A raster cannot be opened or read.

    Examples
    --------
    >>> import numpy as np
    >>> lc = price_links(np.array([[0.0, 0.0], [3.0, 4.0]]), np.array([[0, 1]]),
    ...                  working_crs="EPSG:32633", weights=CostWeights(fixed=10))
    >>> lc.total.tolist(), lc.components["length_m"].tolist()
    ([15.0], [5.0])
    """
    wcrs = working_crs_of(working_crs)
    xy, e = _validate_links(xy, edges)
    if not isinstance(weights, CostWeights):
        raise InputError(f"weights must be a CostWeights; got {type(weights).__name__}")
    if on_nodata not in _POLICIES:
        raise InputError(f"on_nodata (--on-nodata) must be one of {', '.join(_POLICIES)}; "
                         f"got {on_nodata!r}")
    if sample_spacing_m is not None and not (
            isinstance(sample_spacing_m, (int, float)) and math.isfinite(sample_spacing_m)
            and sample_spacing_m > 0):
        raise InputError(f"sample_spacing_m (--sample-spacing-m) must be a positive length in "
                         f"metres; got {sample_spacing_m!r}")
    if terrain is None and (weights.climb or weights.descent or weights.steep_per_m):
        opt = next(OPTION_NAMES[k] for k in ("climb", "descent", "steep_per_m")
                   if getattr(weights, k))
        raise InputError(f"{opt} prices the terrain but no terrain raster was given; "
                         "pass terrain= (--terrain)")
    terms = []
    for t in extra_terms:
        if isinstance(t, str):
            if t in _BUILTIN:
                raise InputError(f"cost term {t!r} always runs; remove it from extra_terms")
            terms.append((t, COST_TERMS.get(t)))
        elif callable(t):
            terms.append((getattr(t, "__name__", "term"), t))
        else:
            raise InputError(f"extra_terms entries must be cost-term names or callables; got {t!r}")

    opened = []
    try:
        ter = None
        if terrain is not None:
            ter, mine = _open(terrain, working_crs=wcrs, raster_crs=raster_crs, name="terrain",
                              what="terrain")
            if mine:
                opened.append(ter)
        land = {}
        named = isinstance(land_cost, dict)
        if land_cost is not None:
            items = land_cost.items() if named else [("land_cost", land_cost)]
            if named and not land_cost:
                raise InputError("land_cost is an empty dict; give {name: raster path}")
            for name, src in items:
                if named and (not isinstance(name, str) or not _NAME.match(name)
                              or name in FUNCTIONS or name in ("and", "or", "not")):
                    raise InputError(f"land-cost raster name {name!r} must be an identifier "
                                     "(letters, digits, '_') and not a function name")
                s, mine = _open(src, working_crs=wcrs, raster_crs=raster_crs, name=name,
                                what=f"land_cost[{name!r}]" if named else "land_cost")
                if mine:
                    opened.append(s)
                land[name] = s
        expr = None
        if cost_expression is not None:
            if not named:
                raise InputError("cost_expression needs named rasters: pass land_cost={'base': "
                                 "'landcost.tif', ...} (CLI: --land-cost base=landcost.tif)")
            expr = compile_expression(cost_expression, names=list(land))
            ref_name = (expr.names_used or tuple(land))[0]
            for name in land:
                why = land[ref_name].same_grid(land[name])
                if why:
                    raise InputError(f"cost expression rasters must share one grid: {name!r} "
                                     f"({land[name].path}) differs from {ref_name!r} "
                                     f"({land[ref_name].path}) in {why}; resample it onto the "
                                     "same grid (e.g. gdalwarp -tap) first")
        tables = _class_tables(class_costs, list(land), named)
        p0 = xy[e[:, 0]]
        p1 = xy[e[:, 1]]
        m = e.shape[0]
        ctx = CostContext(xy=xy, edges=e, p0=p0, p1=p1, length_m=np.hypot(*(p1 - p0).T),
                          weights=weights, working_crs=wcrs, terrain=ter, land=land,
                          named_land=named, class_tables=tables, expression=expr,
                          sample_spacing_m=sample_spacing_m)
        ctx.components["length_m"] = ctx.length_m
        for s in (ter, *land.values()):   # read only the window the links can touch
            if s is not None and hasattr(s, "focus"):
                s.focus(xy)

        all_terms = [(n, COST_TERMS.get(n)) for n in _BUILTIN] + terms
        n_work = max(1, (ter is not None) + (len(land) if expr is None else bool(land)))
        progressed = [0]

        def stage_progress(d, t):
            if progress is not None:
                progress(min(progressed[0] + d, n_work * m), n_work * m)

        total = np.full(m, weights.fixed)
        code = np.full(m, -1, np.int16)
        labels: list[str] = []
        nodata_fraction = np.zeros(m)
        extra_cols: list[str] = []
        for tname, fn in all_terms:
            ctx.progress = stage_progress
            with np.errstate(over="ignore"):    # overflow is refused by name just below
                out = fn(ctx)
            if tname == "terrain" and ter is not None or tname == "land" and land:
                progressed[0] += m * (1 if tname == "terrain" or expr is not None else len(land))
            _check_output(tname, out, m, ctx.components)
            cost = np.asarray(out["cost"], dtype=np.float64)
            source = out.get("nodata_source", f"cost term {tname!r}")
            _refuse_bad_costs(tname, out, cost, ctx, e, node_id, weights, refuse_negative)
            nod = out.get("nodata_m")
            if nod is not None:
                nod = np.asarray(nod, dtype=np.float64)
                frac = np.divide(nod, ctx.length_m, out=np.zeros(m), where=ctx.length_m > 0)
                nodata_fraction = np.maximum(nodata_fraction, np.minimum(frac, 1.0))
                hit = nod > 1e-9 * np.maximum(ctx.length_m, 1.0)
                if hit.any():
                    if on_nodata == "error":
                        i = int(np.flatnonzero(hit)[0])
                        ends = (f"sites {node_id[e[i, 0]]}-{node_id[e[i, 1]]}" if node_id
                                is not None else f"nodes {e[i, 0]}-{e[i, 1]}")
                        raise InputError(
                            f"link {i} ({ends}) crosses {nod[i]:.1f} m "
                            f"without data in {source}; fill the gap, or choose "
                            "on_nodata='barrier' or 'skip' (--on-nodata)")
                    if on_nodata == "barrier":
                        new = hit & (code < 0)
                        if new.any():
                            labels.append(f"no data in {source}")
                            code[new] = len(labels) - 1
            bad = ~np.isfinite(cost) & (code < 0)
            if bad.any():
                labels.append(f"cost term {tname!r} gave a non-finite cost")
                code[bad] = len(labels) - 1
            with np.errstate(invalid="ignore", over="ignore"):   # overflow refused below
                total = total + np.where(np.isfinite(cost), cost, 0.0)
            for k, v in out.items():
                if k in ("cost", "nodata_m", "nodata_source"):
                    continue
                ctx.components[k] = np.asarray(v, dtype=np.float64)
                if tname not in _BUILTIN or k.startswith("land_cost_"):
                    extra_cols.append(k)
        ctx.components["nodata_fraction"] = nodata_fraction
        over = np.isinf(total) & (code < 0)           # finite terms whose sum overflowed
        if over.any():
            _refuse_bad_costs("total", {}, np.where(over, np.inf, 0.0), ctx, e, node_id, weights,
                              False)
        passable = code < 0
        total[~passable] = np.inf
        comps = {k: ctx.components[k] for k in BASE_COMPONENTS}
        for k in extra_cols:
            comps[k] = ctx.components[k]
        labels_t = tuple(labels)
        return LinkCosts(comps, total, passable, int((~passable).sum()),
                         _count_reasons(code, labels_t), code, labels_t)
    finally:
        for s in opened:
            s.close()


def _check_output(tname, out, m, existing):
    if not isinstance(out, dict) or "cost" not in out:
        raise InputError(f"cost term {tname!r} must return a dict with a 'cost' array; "
                         f"got {type(out).__name__}")
    for k, v in out.items():
        if k == "nodata_source":
            continue
        a = np.asarray(v)
        if a.shape != (m,):
            raise InputError(f"cost term {tname!r} returned {k!r} with shape {a.shape}; "
                             f"expected ({m},), one value per link")
        if k not in ("cost", "nodata_m") and k in existing:
            raise InputError(f"cost term {tname!r} returned component {k!r}, which already "
                             "exists; give it another name")


def node_elevations(xy, terrain, *, working_crs=None, raster_crs=None):
    """Terrain elevation at each site (bilinear; NaN outside or on nodata).

    Parameters
    ----------
    xy : array_like of float, shape (n, 2)
        Working-CRS points.
    terrain : str, os.PathLike or Surface
        A path needs ``working_crs``.
    working_crs, raster_crs : CRS-like, optional

    Returns
    -------
    ndarray of float64, shape (n,)
    """
    xy = np.asarray(xy, dtype=np.float64).reshape(-1, 2)
    if isinstance(terrain, Surface):
        return terrain.sample(xy)
    if working_crs is None:
        raise InputError("node_elevations needs working_crs= when terrain is a path")
    with open_surface(terrain, working_crs=working_crs, raster_crs=raster_crs) as s:
        return s.sample(xy)


def sites_outside(xy, surface) -> np.ndarray:
    """Boolean mask of the sites outside the raster extent of *surface* (a Surface)."""
    if not isinstance(surface, Surface):
        raise InputError(f"sites_outside needs an opened Surface; got {type(surface).__name__}")
    return ~surface.contains(xy)
