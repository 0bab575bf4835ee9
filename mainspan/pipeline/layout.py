"""The pipeline in one place: :func:`plan_layout` calls each stage once, in order.

::

    sites → candidates → link costs (+ node elevations) → tree (+ certificate)
      → links and nodes → design → run_info → Layout

The stages are plain functions on arrays (:mod:`mainspan.pipeline.stages`,
:mod:`mainspan.pipeline.assemble`); the result, :class:`Layout`, is in
:mod:`mainspan.pipeline.result` and is importable from here as before.
"""

from __future__ import annotations

import time

from ..errors import InputError
from ..settings import LAYOUTS, run_info_params
from ..settings import design_settings as _design_settings  # noqa: F401 - older import path
from .assemble import (_basis_fields, assemble_layout, design_stage,  # noqa: F401
                       plan_inputs, run_info_stage)
from .result import Layout, Profiles, depth_layout_text, file_sha256, read_layout  # noqa: F401
from .stages import (candidates_stage, cost_weights, elevation_stage, grow_tree,  # noqa: F401
                     open_terrain, price_stage, read_stage, root_stage, site_elevations)

__all__ = ["Layout", "Profiles", "plan_layout", "read_layout", "file_sha256", "site_elevations",
           "grow_tree", "assemble_layout", "LAYOUTS"]


def plan_layout(sites, settings=None, *, terrain=None, land_cost=None, cost_expression=None, class_costs=None,
                raster_crs=None, on_nodata="barrier", sample_spacing_m=None, weights=None,
                candidates="delaunay", k=8, max_link_m=None, max_complete_nodes=5000,
                roots=None, allow_forest=False, use_site_z=False, system=None, design=None,
                layout="tree", route="straight", connectivity=16, corridor_cell_m=None,
                corridor_margin_m=None, corridor_tolerance_pct=1.0, corridor_memory_mb=2048.0,
                barrier=None, avoid=None, crossing=None, junctions=False, progress=None,
                extra_run_info=None, whole_cost=None, **network):
    """Plan the cheapest network of mains over the ground for a set of sites.

    Parameters
    ----------
    sites : Sites or path
        From :func:`mainspan.read_sites`, or a path read with its defaults.
    settings : PlanSettings, optional
        Checked settings (:class:`mainspan.settings.PlanSettings`, as the
        command line and project files make them); when given, the keywords
        below that feed settings must be left at their defaults.  Without
        it, the keywords are checked with the same schema before any work.
    terrain : path, optional
        DEM raster; gives elevations, surface lengths, climb and slope.
    land_cost : path or dict of name -> path, optional
        Rasters of cost per metre of main laid through each cell.
    cost_expression : str, optional
        Unit cost per metre combining the named ``land_cost`` rasters cell by cell.
    class_costs : dict, optional
        Class code → cost per metre, for a categorical ``land_cost`` raster.
    raster_crs : CRS-like, optional
        CRS of rasters that carry none.
    on_nodata : {"barrier", "skip", "error"}, default "barrier"
    sample_spacing_m : float, optional
        Terrain sampling step (default: half a cell).
    weights : CostWeights or dict, optional
        Cost weights (see :class:`mainspan.ground.costs.CostWeights`).
    candidates : str, default "delaunay"
        Candidate builder name or a union such as ``"delaunay+knn"``.
    k : int, default 8
        Neighbours per site for ``knn``.
    max_link_m : float, optional
        Longest candidate link; also filters any builder.
    max_complete_nodes : int, default 5000
        Size limit of the ``complete`` builder.
    roots : sequence of site ids, optional
        Roots of the network; default: sites with role source/outlet, else the first site.
    allow_forest : bool, default False
        Return one tree per connected part instead of failing.
    use_site_z : bool, default False
        Prefer the sites' own Z over the DEM for node elevations.
    system : {None, "pressure", "gravity"}
        Size and check the tree as pressure or gravity mains.
    design : DesignSettings or dict, optional
    layout : {"tree", "gravity", "whole-cost"}, default "tree"
        ``"gravity"`` grows a minimum-cost arborescence towards the outlet
        with direction-dependent costs (Chu–Liu/Edmonds) instead of Prim's tree.
        ``"whole-cost"`` (pressure mains) chooses the tree of least whole-life
        cost -- sized pipes, trench, fittings, pump station and energy present
        value -- from Prim's and Prim–Dijkstra trade-off trees improved by link
        exchange (:mod:`mainspan.graph.wholecost`); Prim's certificate still covers
        Prim's tree of link costs, reported beside it.
    route : {"straight", "corridor"}, default "straight"
        ``"corridor"`` routes links along least-cost paths over the rasters,
        merged into trunks at junction nodes (:mod:`mainspan.pipeline.routing`).
    connectivity : {8, 16}, default 16
        Moves of the corridor search (16: with knight's moves).
    corridor_cell_m, corridor_margin_m : float, optional
        Cell and reach of the corridor search grid (defaults: the raster's
        cell; a tenth of the sites' extent plus two cells).
    corridor_tolerance_pct : float, default 1.0
        How much straightening may raise a routed link's price.
    corridor_memory_mb : float, default 2048
        Memory budget of the corridor search.
    barrier : sequence of path, optional
        Vector layers of polygons or lines no main may cross.
    avoid, crossing : dict of path -> price, optional
        Polygons priced per metre inside; lines priced per crossing.
    junctions : bool, default False
        Add Steiner junctions between straight links where they pay.
    progress : callable, optional
        ``progress(stage, done, total)``.
    extra_run_info : dict, optional
        Further ``key: value`` pairs for the ``run_info`` table.
    whole_cost : WholeCostSettings or dict, optional
        Limits of the ``"whole-cost"`` search (start α values, hops, designs
        per pass, total designs); see :class:`mainspan.graph.wholecost.WholeCostSettings`.
        The settings schema declares them as ``[tree] whole_cost_<name>``.
    network : keywords, optional
        The ``[network]`` settings (:mod:`mainspan.pipeline.extend`): ``existing`` (a line
        layer of existing mains), ``existing_layer``, ``existing_diameter_field``,
        ``existing_material_field``, ``tap_spacing_m``, ``tap_fee``, ``snap_m``,
        ``forced_links`` / ``forbidden_links`` (site-id pairs ``"ID1:ID2"``),
        ``forced_links_layer`` / ``forbidden_links_layer``, ``max_branch_sites``,
        ``max_branch_flow_lps``, ``max_links_per_node``, ``source_capacity_lps``
        (``{source id: L/s}``).

    Returns
    -------
    Layout

    Examples
    --------
    >>> import numpy as np, mainspan as ms
    >>> s = ms.sites_from_arrays([[0, 0], [100, 0], [100, 100], [0, 100]], crs="EPSG:32633")
    >>> lay = ms.plan_layout(s)
    >>> lay.n_links, round(lay.total("length_m"), 1)
    (3, 300.0)
    """
    from ..settings import PlanSettings

    t0 = time.perf_counter()
    given = dict(terrain=terrain, land_cost=land_cost, cost_expression=cost_expression,
                 class_costs=class_costs, raster_crs=raster_crs, on_nodata=on_nodata,
                 sample_spacing_m=sample_spacing_m, weights=weights, candidates=candidates, k=k,
                 max_link_m=max_link_m, max_complete_nodes=max_complete_nodes, roots=roots,
                 allow_forest=allow_forest, use_site_z=use_site_z, system=system, design=design,
                 layout=layout, route=route, connectivity=connectivity,
                 corridor_cell_m=corridor_cell_m, corridor_margin_m=corridor_margin_m,
                 corridor_tolerance_pct=corridor_tolerance_pct,
                 corridor_memory_mb=corridor_memory_mb, barrier=barrier, avoid=avoid,
                 crossing=crossing, junctions=junctions, whole_cost=whole_cost,
                 **_network_kwargs(network))
    if settings is None:        # every value and combination checked before any work
        settings = PlanSettings.from_kwargs(**given)
    elif not isinstance(settings, PlanSettings):
        raise InputError(f"plan_layout(settings=...): must be a PlanSettings, got "
                         f"{type(settings).__name__}; build one with "
                         "PlanSettings.from_sections(...) or pass keywords")
    else:
        defaults = _PLAN_DEFAULTS
        clash = [n for n, v in given.items() if not _same(v, defaults.get(n))]
        if clash:
            raise InputError(f"plan_layout: give settings= or the keywords, not both "
                             f"({', '.join(clash)}); fold them into the PlanSettings")
    plan = settings.resolved()
    say = progress or (lambda *a: None)
    sites = read_stage(sites)
    weights = cost_weights(plan["weights"])
    root_idx = root_stage(sites, plan["roots"])
    from .extend import network_stage        # exist15: existing mains, forced links, limits
    net = network_stage(sites, plan, root_idx)
    sites = net.sites

    surf = open_terrain(sites, plan["terrain"], plan["raster_crs"])
    # --- route14: candidates and prices of the straight or corridor route (the straight
    # route calls candidates_stage and price_stage) ---
    from . import routing
    sites, cands, costs, routed = routing.route_stage(
        sites, plan, weights=weights, root_idx=root_idx, terrain_surface=surf, progress=say,
        extend_candidates=net.candidates, extend_costs=net.costs,           # exist15
        network_active=net.active)
    # --- end route14 ---
    elev = elevation_stage(sites, surf, use_site_z=plan["use_site_z"])

    say("tree", 0, 1)
    if net.active:                            # exist15
        tree, cert = net.grow(sites, cands.edges, costs, root_idx,
                              allow_forest=plan["allow_forest"])
        directed = None
    else:
        tree, cert, directed = grow_tree(sites, cands.edges, costs, elev, root_idx,
                                         layout=plan["layout"],
                                         allow_forest=plan["allow_forest"],
                                         design=plan["design"],
                                         node_order=getattr(cands, "node_order", None),
                                         terrain_surface=surf,
                                         sample_spacing_m=plan["sample_spacing_m"],
                                         system=plan["system"], whole_cost=plan["whole_cost"])
    # --- route14: Steiner junctions on the straight tree (--junctions) ---
    sites, cands, costs, tree, cert, el2 = routing.junctions_after_tree(
        sites, cands, costs, tree, cert, plan, weights=weights, root_idx=root_idx,
        terrain_surface=surf, routed=routed,
        grow=lambda s_, e_, c_, z_, r_: grow_tree(s_, e_, c_, z_, r_, system=plan["system"]),
        elevations=lambda s_: elevation_stage(s_, surf, use_site_z=plan["use_site_z"]))
    elev = elev if el2 is None else el2
    # --- end route14 ---
    say("tree", 1, 1)
    system, design = plan["system"], plan["design"]
    params = run_info_params({**plan, "weights": weights})
    inputs = plan_inputs(sites, plan)
    corridor = routed["net"] is not None      # route14: design after the routed geometry
    lay = assemble_layout(sites, cands, costs, elev, tree, cert, directed,
                          terrain_surface=surf, sample_spacing_m=plan["sample_spacing_m"],
                          system=None if corridor else system, design=design, params=params,
                          inputs=inputs, progress=say)
    net.finish(lay)                           # exist15
    # --- route14: routed geometry, its design, routing run_info ---
    def _redesign(lay_):
        if system is not None:
            design_stage(lay_, system, design, tree)
        lay_.run_info = run_info_stage(lay_, sites, cands, costs, tree, cert, directed, system,
                                       params or {}, inputs)
    routing.finish_layout(lay, routed, plan, terrain_surface=surf,
                          redesign=_redesign if corridor else None)
    # --- end route14 ---
    if extra_run_info:
        lay.run_info.update({str(k_): str(v) for k_, v in extra_run_info.items()})
    lay.elapsed_s = time.perf_counter() - t0
    return lay


_PLAN_DEFAULTS = dict(terrain=None, land_cost=None, cost_expression=None, class_costs=None,
                      raster_crs=None, on_nodata="barrier", sample_spacing_m=None, weights=None,
                      candidates="delaunay", k=8, max_link_m=None, max_complete_nodes=5000,
                      roots=None, allow_forest=False, use_site_z=False, system=None, design=None,
                      layout="tree", route="straight", connectivity=16, corridor_cell_m=None,
                      corridor_margin_m=None, corridor_tolerance_pct=1.0,
                      corridor_memory_mb=2048.0, barrier=None, avoid=None, crossing=None,
                      junctions=False, whole_cost=None)


def _network_kwargs(network):
    """The network-stage keywords of plan_layout (exist15); an unknown one is an error."""
    from .extend import NETWORK_KEYS
    from ..settings.schema import unknown_key
    for name in network:
        if name not in NETWORK_KEYS:
            raise unknown_key("plan_layout()", name, sorted([*_PLAN_DEFAULTS, *NETWORK_KEYS]),
                              what="keyword")
    return {k: network.get(k) for k in NETWORK_KEYS}


def _same(a, b):
    try:
        return a is b or bool(a == b)
    except (TypeError, ValueError):       # arrays and the like: treat as given
        return False

