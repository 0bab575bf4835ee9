"""Routing stages: barrier / avoid / crossing layers, and the corridor route.

``--route straight`` (the default) keeps straight candidate links; the vector
layers then price them as extra cost terms (:func:`vector_stage`).  ``--route
corridor`` replaces the candidate and costing stages by :func:`corridor_stage`:
a least-cost search over a grid windowed to the sites
(:mod:`mainspan.ground.search`), Mehlhorn's candidates, Prim's tree, trunks
merged at junction nodes and re-priced polylines (:mod:`mainspan.graph.corridor`).
The tree, design and writers then run unchanged on the sites plus junctions;
:func:`attach_paths` puts the routed geometry and its ground profile on the
:class:`~mainspan.pipeline.layout.Layout`.

Choices where the issue is silent (written down here):

* cell size: ``--corridor-cell-m``, default the land-cost raster's cell (else
  the terrain's; without rasters 1/250 of the sites' larger extent); with the
  raster's own cell size the grid is snapped onto the raster's cells;
* margin: ``--corridor-margin-m``, default 10 % of the sites' larger extent
  plus two cells, so that routes can swing around obstacles near the edge;
* ``on_nodata="error"``: the search avoids cells without data like barriers;
  the exact re-pricing then still raises if a final polyline crosses a gap.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ..errors import InputError
from ..settings.schema import ROUTES

__all__ = ["vector_stage", "corridor_stage", "junction_stage", "attach_paths", "junction_sites", "routing_run_info",
           "ROUTES"]



def vector_stage(sites, plan):
    """The barrier, avoid and crossing layers of *plan*, read in the sites' CRS."""
    from ..ground.vectors import VectorCosts

    def items(key, priced):
        v = plan.get(key)
        if not v:
            return ()
        if isinstance(v, dict):
            return tuple((k, float(p)) for k, p in v.items())
        return tuple(v) if isinstance(v, (list, tuple)) else (v,)

    return VectorCosts.read(working_crs=sites.crs, barrier=items("barrier", False),
                            avoid=items("avoid", True), crossing=items("crossing", True))


def _open_land(sites, land_cost, raster_crs):
    from ..ground.surfaces import Surface, open_surface

    if land_cost is None:
        return None, []
    named = isinstance(land_cost, dict)
    items = land_cost.items() if named else [("land_cost", land_cost)]
    out, opened = {}, []
    for name, src in items:
        if isinstance(src, Surface):
            out[name] = src
        else:
            s = open_surface(src, working_crs=sites.crs, raster_crs=raster_crs, name=name)
            opened.append(s)
            out[name] = s
    return (out if named else out["land_cost"]), opened


def junction_sites(sites, junction_xy):
    """*sites* with junction nodes appended (role ``junction``, no demand, ids ``J1``...)."""
    k = len(junction_xy)
    if not k:
        return sites
    have = set(str(v) for v in sites.node_id)
    prefix = "J"
    while any(f"{prefix}{i + 1}" in have for i in range(k)):
        prefix += "_"
    ids = np.array([f"{prefix}{i + 1}" for i in range(k)], dtype=object)

    def ext(a, fill):
        if a is None:
            return None
        return np.concatenate([np.asarray(a), np.full(k, fill, dtype=np.asarray(a).dtype)])

    return replace(
        sites, xy=np.concatenate([sites.xy, junction_xy]),
        node_id=np.concatenate([np.asarray(sites.node_id, dtype=object), ids]),
        role=np.concatenate([np.asarray(sites.role, dtype=object),
                             np.full(k, "junction", dtype=object)]),
        demand=ext(sites.demand, 0.0), elevation=ext(sites.elevation, np.nan),
        area_ha=ext(sites.area_ha, 0.0), runoff_c=ext(sites.runoff_c, 0.0),
        population=ext(sites.population, 0.0), min_pressure_m=ext(sites.min_pressure_m, np.nan))


def corridor_stage(sites, plan, *, weights, root_idx, terrain_surface=None, vectors=None,
                   progress=None):
    """Least-cost routed links over *sites* (``--route corridor``).

    Returns
    -------
    sites : Sites
        The sites with the junction nodes appended.
    cands : Candidates
        The routed links (``method="corridor"``), already a tree.
    costs : LinkCosts
        Their polylines priced exactly (straight-mode costing, segment by segment).
    net : CorridorNetwork
        Paths and search figures.
    """
    from ..graph.candidates import Candidates
    from ..graph.corridor import corridor_network, segment_pricer
    from ..ground.search import cost_grid, grid_for_sites

    say = progress or (lambda *a: None)
    xy = sites.xy
    extent = float(max(np.ptp(xy[:, 0]), np.ptp(xy[:, 1]), 1.0))
    land, opened = _open_land(sites, plan.get("land_cost"), plan.get("raster_crs"))
    try:
        ref = None
        if land is not None:
            ref = land if not isinstance(land, dict) else next(iter(land.values()))
        elif terrain_surface is not None:
            ref = terrain_surface
        cell = plan.get("corridor_cell_m")
        if cell is None:
            cell = ref.cell_size_m if ref is not None else extent / 250.0
        cell = float(cell)
        align = None
        if ref is not None and ref.same_crs and math.isclose(ref.cell_size_m, cell, rel_tol=1e-9) \
                and ref.transform.b == 0 and ref.transform.d == 0:
            align = (ref.transform.c, ref.transform.f)
        margin = plan.get("corridor_margin_m")
        if margin is None:
            margin = 0.1 * extent + 2 * cell
        vectors = vectors if vectors is not None else _no_vectors()
        grid = grid_for_sites(xy, cell_m=cell, margin_m=float(margin),
                              memory_mb=float(plan.get("corridor_memory_mb") or 2048.0),
                              terrain=terrain_surface is not None,
                              crossings=bool(vectors.crossings), align_xy=align)
        say("corridor grid", 0, 1)
        barrier, avoid, xing, prices = vectors.burn(grid)
        price_kw = dict(land_cost=land, cost_expression=plan.get("cost_expression"),
                        class_costs=plan.get("class_costs"), raster_crs=plan.get("raster_crs"),
                        on_nodata=plan.get("on_nodata", "barrier"))
        sc = cost_grid(grid, working_crs=sites.crs, terrain=terrain_surface, weights=weights,
                       barrier=barrier, avoid=avoid, crossing=xing, crossing_price=prices,
                       connectivity=int(plan.get("connectivity") or 16), **price_kw)
        say("corridor grid", 1, 1)
        price = segment_pricer(working_crs=sites.crs, extra_terms=vectors.terms(),
                               weights=weights, terrain=terrain_surface,
                               sample_spacing_m=plan.get("sample_spacing_m"), **price_kw)
        say("corridor search", 0, 1)
        net = corridor_network(xy, sc, price, roots=tuple(int(r) for r in root_idx),
                               tolerance_pct=float(plan.get("corridor_tolerance_pct", 1.0)),
                               node_id=sites.node_id, barrier_names=vectors.names())
        say("corridor search", 1, 1)
    finally:
        for s in opened:
            s.close()
    sites2 = junction_sites(sites, net.junction_xy)
    L = len(net.edges)
    cands = Candidates(edges=net.edges, origin=np.ones(L, np.uint8), origin_names=("corridor",),
                       method="corridor")
    net.grid = grid
    return sites2, cands, net.costs, net


def junction_stage(sites, cands, costs, tree, plan, *, weights, terrain_surface=None,
                   vectors=None):
    """Steiner junctions on the straight tree (``--junctions``).

    Returns the sites with the kept junctions appended, the new links (a tree,
    as Candidates) and their exact prices.
    """
    from ..graph.candidates import Candidates
    from ..graph.corridor import segment_pricer
    from ..graph.steiner import add_junctions

    vectors = vectors if vectors is not None else _no_vectors()
    land, opened = _open_land(sites, plan.get("land_cost"), plan.get("raster_crs"))
    try:
        price = segment_pricer(working_crs=sites.crs, extra_terms=vectors.terms(), weights=weights,
                               terrain=terrain_surface, land_cost=land,
                               cost_expression=plan.get("cost_expression"),
                               class_costs=plan.get("class_costs"),
                               raster_crs=plan.get("raster_crs"),
                               on_nodata=plan.get("on_nodata", "barrier"),
                               sample_spacing_m=plan.get("sample_spacing_m"))
        child = np.flatnonzero(tree.parent >= 0)
        e = cands.edges[tree.parent_edge[child]]
        res = add_junctions(sites.xy, e, price)
    finally:
        for s in opened:
            s.close()
    L = len(res.edges)
    return (junction_sites(sites, res.junction_xy),
            Candidates(edges=res.edges, origin=np.ones(L, np.uint8), origin_names=("junctions",),
                       method=f"{cands.method}+junctions"), res.costs)


def _no_vectors():
    from ..ground.vectors import VectorCosts

    return VectorCosts()


def attach_paths(lay, net, *, terrain_surface=None, sample_spacing_m=None):
    """Put the routed polylines (from node to to node) and their profiles on *lay*.

    Sets ``lay.link_paths = (offsets, xy)`` in link order; with terrain,
    replaces ``lay.profiles`` by the ground along each polyline.
    """
    eidx = np.asarray(lay.links["candidate_index"], np.int64)
    from_idx = lay.link_ends[:, 0]
    polys = []
    for i, k in enumerate(eidx):
        p = net.path(int(k))
        polys.append(p if net.edges[k, 0] == from_idx[i] else p[::-1])
    counts = np.array([len(p) for p in polys], np.int64)
    off = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    lay.link_paths = (off, np.concatenate(polys) if polys else np.zeros((0, 2)))
    if terrain_surface is None or not polys or lay.profiles is None:
        return lay
    offs, sts, zs = [0], [], []
    for p in polys:
        o, st, z = terrain_surface.profiles(p[:-1], p[1:], spacing_m=sample_spacing_m)
        seg_len = np.hypot(*(p[1:] - p[:-1]).T)
        base = np.concatenate([[0.0], np.cumsum(seg_len)[:-1]])
        s_all, z_all = [], []
        for j in range(len(p) - 1):
            a, b = int(o[j]), int(o[j + 1])
            s_j, z_j = st[a:b] + base[j], z[a:b]
            if j:                                   # the shared vertex once
                s_j, z_j = s_j[1:], z_j[1:]
            s_all.append(s_j)
            z_all.append(z_j)
        sts.append(np.concatenate(s_all))
        zs.append(np.concatenate(z_all))
        offs.append(offs[-1] + len(sts[-1]))
    lay.profiles = replace(lay.profiles, offsets=np.asarray(offs, np.int64),
                           station_m=np.concatenate(sts), ground_m=np.concatenate(zs))
    return lay



def routing_run_info(plan) -> dict:
    """The ``run_info`` entries of the routing settings (straight or corridor)."""
    def fmt(v):
        if v is None:
            return ""
        if isinstance(v, dict):
            return "; ".join(f"{k}={p:g}" for k, p in v.items())
        if isinstance(v, (list, tuple)):
            return "; ".join(str(x) for x in v)
        return f"{v:g}" if isinstance(v, float) else str(v)

    return {k: fmt(plan.get(k, d)) for k, d in (
        ("route", "straight"), ("connectivity", 16), ("corridor_cell_m", None),
        ("corridor_margin_m", None), ("corridor_tolerance_pct", 1.0),
        ("corridor_memory_mb", 2048.0), ("barrier", None), ("avoid", None), ("crossing", None),
        ("junctions", False))}


def path_lines(lay, has_z=False):
    """Shapely line strings of the routed links (``lay.link_paths``), in link order.

    With ``has_z`` each vertex takes the ground of the link's profile at its
    chainage (or 0 where there is none), as straight links take their ends'.
    """
    import shapely

    off, xy = lay.link_paths
    out = []
    p = lay.profiles if has_z else None
    for i in range(len(off) - 1):
        v = xy[off[i]:off[i + 1]]
        if not has_z:
            out.append(shapely.linestrings(v))
            continue
        ch = np.concatenate([[0.0], np.cumsum(np.hypot(*np.diff(v, axis=0).T))])
        if p is not None:
            st, g = p.of(i)
            ok = np.isfinite(g)
            z = np.interp(ch, st[ok], g[ok]) if ok.any() else np.zeros(len(v))
        else:
            z = np.zeros(len(v))
        out.append(shapely.linestrings(np.column_stack([v, z])))
    return np.asarray(out, dtype=object)


def straight_reference(sites, plan, *, weights, root_idx, terrain_surface=None, vectors=None):
    """Total price of the straight-link Prim tree over Delaunay candidates (for the saving)."""
    from ..graph.candidates import build_candidates
    from ..graph.corridor import segment_pricer
    from ..graph.spanning import prim_tree

    vectors = vectors if vectors is not None else _no_vectors()
    cands = build_candidates(sites.xy, "delaunay", k=8, max_link_m=None)
    land, opened = _open_land(sites, plan.get("land_cost"), plan.get("raster_crs"))
    try:
        price = segment_pricer(working_crs=sites.crs, extra_terms=vectors.terms(), weights=weights,
                               terrain=terrain_surface, land_cost=land,
                               cost_expression=plan.get("cost_expression"),
                               class_costs=plan.get("class_costs"),
                               raster_crs=plan.get("raster_crs"),
                               on_nodata=plan.get("on_nodata", "barrier"),
                               sample_spacing_m=plan.get("sample_spacing_m"))
        lc = price(sites.xy[cands.edges[:, 0]], sites.xy[cands.edges[:, 1]])[0]
    finally:
        for s in opened:
            s.close()
    ok = lc.passable
    try:
        t = prim_tree(sites.n, cands.edges[ok], lc.total[ok], roots=root_idx)
    except InputError:
        return float("nan")
    return float(t.weight)


# --------------------------------------------------------------------------- plan_layout hooks

def route_stage(sites, plan, *, weights, root_idx, terrain_surface=None, progress=None,
                extend_candidates=None, extend_costs=None, network_active=False):
    """Candidates and their prices for either route (the hook in ``plan_layout``).

    ``straight``: the candidate builders, priced by ``price_links`` with the
    barrier / avoid / crossing terms; ``corridor``: :func:`corridor_stage`.

    Returns
    -------
    (sites, cands, costs, routed) where ``routed`` is a dict with the vector
    layers (``vectors``), the corridor network (``net``, or None) and the
    straight reference total (``straight_total``, corridor only).
    ``extend_candidates(cands)`` and ``extend_costs(costs, cands)`` are the
    network stage's additions (existing mains, forced links) to straight links.
    """
    from .stages import candidates_stage, price_stage

    say = progress or (lambda *a: None)
    vectors = vector_stage(sites, plan)
    routed = {"vectors": vectors, "net": None}
    if plan.get("route", "straight") == "corridor":
        if network_active:
            raise InputError("--route corridor cannot yet be combined with existing mains, "
                             "forced or forbidden links or branch limits; plan those with "
                             "--route straight")
        routed["straight_total"] = straight_reference(
            sites, plan, weights=weights, root_idx=root_idx, terrain_surface=terrain_surface,
            vectors=vectors)
        sites2, cands, costs, net = corridor_stage(sites, plan, weights=weights, root_idx=root_idx,
                                                   terrain_surface=terrain_surface,
                                                   vectors=vectors, progress=progress)
        routed["net"] = net
        return sites2, cands, costs, routed
    say("candidates", 0, 1)
    cands = candidates_stage(sites, {"candidates": plan.get("candidates", "delaunay"),
                                     "k": plan.get("k", 8), "max_link_m": plan.get("max_link_m"),
                                     "max_complete_nodes": plan.get("max_complete_nodes", 5000)})
    if extend_candidates is not None:
        cands = extend_candidates(cands)
    say("candidates", 1, 1)
    say("costs", 0, 1)
    costs = price_stage(sites, cands.edges, {k: plan.get(k) for k in (   # pkg9: the stage
                            "cost_expression", "class_costs", "raster_crs")} | {
                            "on_nodata": plan.get("on_nodata", "barrier")},
                        weights=weights, terrain_surface=terrain_surface,
                        land_cost=plan.get("land_cost"),
                        sample_spacing_m=plan.get("sample_spacing_m"),
                        extra_terms=vectors.terms(),
                        progress=(lambda d, t: say("costs", d, t)))
    if extend_costs is not None:
        costs = extend_costs(costs, cands)
    say("costs", 1, 1)
    return sites, cands, costs, routed


def junctions_after_tree(sites, cands, costs, tree, cert, plan, *, weights, root_idx, grow,
                         elevations, terrain_surface=None, routed=None):
    """``--junctions``: Steiner junctions on Prim's straight tree, then the tree regrown.

    ``grow(sites, edges, costs, elev, root_idx)`` and ``elevations(sites)`` are
    the pipeline's tree and elevation stages.  Returns (sites, cands, costs,
    tree, cert, elev); unchanged (elev None) without the setting.  The
    certificate then covers the tree over the new links (which are a tree).
    """
    if not plan.get("junctions") or plan.get("route", "straight") == "corridor":
        return sites, cands, costs, tree, cert, None
    before = float(np.asarray(costs.total)[tree.parent_edge[tree.parent >= 0]].sum())
    sites2, cands2, costs2 = junction_stage(sites, cands, costs, tree, plan, weights=weights,
                                            terrain_surface=terrain_surface,
                                            vectors=(routed or {}).get("vectors"))
    elev = elevations(sites2)
    tree2, cert2, _ = grow(sites2, cands2.edges, costs2, elev, root_idx)
    if routed is not None:
        routed["straight_total"] = before
    return sites2, cands2, costs2, tree2, cert2, elev


def finish_layout(lay, routed, plan, *, terrain_surface=None, redesign=None):
    """Routed geometry, the design on it, and the routing entries of ``run_info``.

    For a corridor route ``lay`` was assembled without a design, so that
    ``redesign(lay)`` (the pipeline's design and run_info stages) reads the
    ground along the routed polylines.
    """
    net = routed.get("net")
    if net is not None:
        attach_paths(lay, net, terrain_surface=terrain_surface,
                     sample_spacing_m=plan.get("sample_spacing_m"))
        if redesign is not None:
            redesign(lay)
    info = routing_run_info(plan)
    if net is not None:
        info["corridor_grid"] = (f"{net.grid.nrows} x {net.grid.ncols} cells of "
                                 f"{net.grid.cell_m:g} m")
    nj = int((np.asarray(lay.nodes["role"]) == "junction").sum())
    info["n_junctions"] = str(nj)
    ref = routed.get("straight_total")
    if ref is not None and np.isfinite(ref) and ref > 0:
        tot = lay.total("cost")
        info["straight_total_cost"] = f"{ref:.3f}"
        info["routing_saving_pct"] = f"{100.0 * (ref - tot) / ref:.2f}"
    lay.run_info.update(info)
    return lay


def refuse_in_scenarios(plan, name):
    """Scenario runs share straight-link stages; a routing setting there is an error."""
    used = [k for k in ("barrier", "avoid", "crossing") if plan.get(k)]
    if plan.get("route", "straight") != "straight":
        used.insert(0, "route")
    if plan.get("junctions"):
        used.append("junctions")
    if used:
        raise InputError(f"scenario {name!r}: {', '.join(used)} cannot be used in scenario "
                         "comparisons yet; plan that scenario with 'mainspan plan' instead")
