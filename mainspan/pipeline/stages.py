"""The plan stages: plain functions on arrays, in pipeline order.

::

    read_stage ─► candidates_stage ─► price_stage (+ elevation_stage)
      ─► grow_tree (Prim + certificate | gravity arborescence | whole-cost search)
      ─► assemble_layout (links, nodes) ─► design_stage ─► run_info_stage

:func:`mainspan.pipeline.layout.plan_layout` calls them once each, in that
order; :mod:`mainspan.scenarios.compute` calls the same functions, keeping
the results that scenarios share.  Every stage takes the sites and arrays of
the stage before and the plan options as checked by the settings schema
(``plan``: the dict of :meth:`mainspan.settings.PlanSettings.resolved`,
every :func:`mainspan.plan_layout` keyword set or at its default).
Nothing here checks option values: the schema did, before any work.
"""

from __future__ import annotations

import numpy as np

from ..errors import CertificateError, DisconnectedError, InputError
from ..settings import design_settings as _design_settings

__all__ = ["read_stage", "root_stage", "candidates_stage", "open_terrain", "cost_weights",
           "price_stage", "elevation_stage", "site_elevations", "grow_tree"]


# ---------------------------------------------------------------------- sites
def read_stage(sites):
    """The sites: a :class:`~mainspan.sites.read.Sites` as given, or read from a path."""
    from ..sites.read import Sites, read_sites

    return sites if isinstance(sites, Sites) else read_sites(sites)


def root_stage(sites, roots=None) -> np.ndarray:
    """Node indices of the roots: the given site ids, else the sites' default roots."""
    if roots is not None and len(roots):
        return sites.index_of(roots)
    return sites.default_roots()


# ---------------------------------------------------------------------- candidates
def candidates_stage(sites, plan):
    """Candidate links of *sites* (``plan``: candidates, k, max_link_m, max_complete_nodes)."""
    from ..graph.candidates import build_candidates

    return build_candidates(sites.xy, plan["candidates"], k=plan["k"],
                            max_link_m=plan["max_link_m"],
                            max_complete_nodes=plan["max_complete_nodes"])


# ---------------------------------------------------------------------- ground
def open_terrain(sites, terrain, raster_crs=None):
    """The terrain raster as an opened Surface in the sites' CRS (None without one)."""
    if terrain is None:
        return None
    from ..ground.surfaces import Surface, open_surface

    return terrain if isinstance(terrain, Surface) else open_surface(
        terrain, working_crs=sites.crs, raster_crs=raster_crs)


def cost_weights(weights):
    """A :class:`~mainspan.ground.costs.CostWeights` from None, a dict or itself."""
    from ..ground.costs import CostWeights

    if weights is None:
        return CostWeights()
    return weights if isinstance(weights, CostWeights) else CostWeights(**weights)


def price_stage(sites, edges, plan, *, weights, terrain_surface=None, land_cost=None,
                sample_spacing_m=None, refuse_negative=True, progress=None, engine=None,
                extra_terms=()):
    """Price each candidate link along the ground (:func:`mainspan.ground.costs.price_links`;
    large jobs in tile-aligned chunks on the engine, :func:`mainspan.execution.costing.price_links`).

    Parameters
    ----------
    sites : Sites
    edges : ndarray int64 (m, 2)
    plan : dict
        Reads ``cost_expression``, ``class_costs``, ``on_nodata``, ``raster_crs``.
    weights : CostWeights
    terrain_surface : Surface, optional
        The opened terrain (:func:`open_terrain`).
    land_cost, sample_spacing_m : optional
        Land-cost raster(s) (paths or opened Surfaces) and terrain sampling
        step; given apart from *plan* so that scenarios can price terrain and
        land once each and combine them.
    refuse_negative : bool, default True
    progress : callable, optional
        ``progress(done, total)``.
    engine : Engine, optional
        Where chunks of a large job run (default :func:`mainspan.execution.current`).
    extra_terms : sequence, default ()
        Further cost terms (names or callables), e.g. the barrier / avoid /
        crossing terms of :mod:`mainspan.pipeline.routing`.

    Returns
    -------
    LinkCosts
    """
    from ..execution.costing import price_links   # dask18: large jobs in chunks (--workers)

    return price_links(sites.xy, edges, engine=engine, working_crs=sites.crs,
                       terrain=terrain_surface,
                       land_cost=land_cost, cost_expression=plan["cost_expression"],
                       class_costs=plan["class_costs"], weights=weights,
                       on_nodata=plan["on_nodata"], sample_spacing_m=sample_spacing_m,
                       raster_crs=plan["raster_crs"], progress=progress,
                       node_id=sites.node_id if refuse_negative else None,
                       refuse_negative=refuse_negative, extra_terms=extra_terms)


def elevation_stage(sites, terrain_surface=None, *, use_site_z=False):
    """Node elevations: the DEM under each site, or the sites' own Z where asked."""
    from ..ground.costs import node_elevations

    dem = None if terrain_surface is None else node_elevations(sites.xy, terrain_surface)
    return site_elevations(sites, dem, use_site_z=use_site_z)


def site_elevations(sites, dem_elev=None, *, use_site_z=False):
    """Node elevations: the DEM's, or the sites' own Z where asked and given.

    With a DEM, a site it does not cover (and that has no Z of its own when
    ``use_site_z``) is an error listing the sites by id.
    """
    if dem_elev is None:
        return sites.elevation.copy() if use_site_z else np.full(sites.n, np.nan)
    elev = np.asarray(dem_elev, float)
    outside = ~np.isfinite(elev)
    if use_site_z:
        has = np.isfinite(sites.elevation)
        elev = np.where(has, sites.elevation, elev)
        outside &= ~has
    if outside.any():
        ids = [str(v) for v in sites.node_id[outside]]
        raise InputError(
            f"{len(ids)} site(s) lie outside the terrain raster or on nodata: "
            f"{', '.join(ids[:8])}{' …' if len(ids) > 8 else ''}; extend the DEM, remove "
            "those sites, or give their Z with --use-site-z")
    return elev


def grow_tree(sites, edges, costs, elev, root_idx, *, layout="tree", allow_forest=False,
              design=None, certify=True, node_order=None, terrain_surface=None,
              sample_spacing_m=None, system=None, whole_cost=None):
    """Grow the tree over the passable candidates.

    ``node_order`` (a locality order of the nodes, as ``Candidates.node_order``)
    only speeds Prim up; the tree is the same.

    ``layout="tree"``: Prim's tree plus its optimality certificate (a
    failing certificate raises :class:`CertificateError`); ``"gravity"``:
    the minimum arborescence towards the outlet on direction-dependent costs;
    ``"whole-cost"``: the tree of least whole-life cost found from Prim's tree
    (whose certificate is returned) by :func:`mainspan.graph.wholecost.grow_whole_cost`
    with limits ``whole_cost`` (a ``WholeCostSettings`` or dict).

    Returns
    -------
    (Tree over candidate indices, Certificate or None, dict or None)
    """
    from ..graph.spanning import certify_tree, prim_tree

    passable = np.asarray(costs.passable, bool)
    keep = np.flatnonzero(passable)
    w_all = np.asarray(costs.total, float)
    if layout == "gravity":
        tree, directed = _gravity_tree(sites, edges, keep, w_all, costs, elev, root_idx, design,
                                       terrain_surface, sample_spacing_m)
        return tree, None, directed
    sub = edges[keep]
    try:
        tree_k = prim_tree(sites.n, sub, w_all[keep], roots=root_idx, allow_forest=allow_forest,
                           node_order=node_order)
    except DisconnectedError as exc:
        raise _disconnected_message(sites, exc, int((~passable).sum())) from None
    cert = None
    if certify:
        cert = certify_tree(sites.n, sub, w_all[keep], tree_k)
        if not cert.ok:
            raise CertificateError(
                f"optimality certificate failed at candidate link {cert.violating_edge}: the "
                "tree is not minimum over the candidates; this is a bug, please report it")
    # --- whole11: whole-cost layout, searched from Prim's tree (certificate stays Prim's) ---
    if layout == "whole-cost":
        from ..graph.wholecost import grow_whole_cost
        tree_k = grow_whole_cost(sites, edges, costs, elev, root_idx, tree_k, keep,
                                 design=design, terrain_surface=terrain_surface,
                                 sample_spacing_m=sample_spacing_m, allow_forest=allow_forest,
                                 settings=whole_cost, system=system or "pressure")
    # --- end whole11 ---
    return _remap_tree(tree_k, keep), cert, None




def _disconnected_message(sites, exc, n_impassable):
    lab = getattr(exc, "components", None)
    if lab is None:
        return exc
    lab = np.asarray(lab)
    sizes = np.bincount(lab)
    parts = []
    for c in np.argsort(-sizes, kind="stable")[:4]:
        ids = sites.node_id[lab == c][:3].astype(str)
        parts.append(f"{sizes[c]} site(s) [{', '.join(ids)}{' …' if sizes[c] > 3 else ''}]")
    more = f" and {len(sizes) - 4} more" if len(sizes) > 4 else ""
    why = f" ({n_impassable} impassable links were dropped)" if n_impassable else ""
    return DisconnectedError(
        f"the candidate links split the sites into {len(sizes)} unconnected parts{why}: "
        f"{'; '.join(parts)}{more}; use a larger --k or --max-link-m, --candidates "
        "delaunay+knn, or --allow-forest for one tree per part", components=lab)




def _remap_tree(tree_k, keep):
    """Map a tree grown on the passable subset back to candidate indices."""
    from dataclasses import replace
    pe = np.asarray(tree_k.parent_edge).copy()
    m = pe >= 0
    pe[m] = keep[pe[m]]
    return replace(tree_k, parent_edge=pe)




def _gravity_tree(sites, edges, keep, w_all, costs, elev, root_idx, design,
                  terrain_surface=None, sample_spacing_m=None):
    """Minimum arborescence towards the outlet on direction-dependent, depth-aware costs.

    The arcs are priced by the trench each flow direction needs and the tree
    is grown, designed and re-priced until it repeats
    (:func:`mainspan.graph.gravity_layout.depth_aware_tree`); round 0 is the
    earlier layout, priced by extra depth below minimum cover only.

    Returns a :class:`~mainspan.graph.spanning.Tree` over candidate indices and a
    dict with per-node directed link costs, the design cost of the kept tree
    against Prim's tree drained to the same outlet and designed the same
    way, and the rounds (``depth_layout``).
    """
    # --- gravity layout (mainspan.graph.gravity_layout) ---
    from ..graph.gravity_layout import depth_aware_tree, tree_designer
    from ..graph.network import rooted_network
    from ..graph.spanning import Tree, prim_tree

    if len(root_idx) != 1:
        raise InputError(f"--layout gravity needs exactly one outlet (root), got "
                         f"{len(root_idx)}; give one site the role 'outlet' or use --roots")
    if not np.isfinite(elev).all():
        raise InputError("--layout gravity needs ground elevations at every site: give "
                         "--terrain (or site Z with --use-site-z)")
    root = int(root_idx[0])
    n = sites.n
    e = edges[keep]
    w = w_all[keep]
    comp = costs.components
    length = np.asarray(comp["length_m"], float)[keep]
    ds = _design_settings(design, "gravity")
    if terrain_surface is not None:
        # price dips and rises between the sites from the ground profile of every candidate
        off, st, gz = terrain_surface.profiles(sites.xy[e[:, 0]], sites.xy[e[:, 1]],
                                               spacing_m=sample_spacing_m)
        off = np.asarray(off, np.int64)
        st = np.asarray(st, float)
        gz = np.asarray(gz, float).copy()
    else:   # straight ground between the sites
        off = np.arange(0, 2 * len(e) + 1, 2, dtype=np.int64)
        st = np.zeros(2 * len(e))
        st[1::2] = length
        gz = np.zeros(2 * len(e))
    # the ends take the sites' own elevations, as the design stage does
    gz[off[:-1]] = elev[e[:, 0]]
    gz[off[1:] - 1] = elev[e[:, 1]]
    surf_len = np.asarray(comp.get("surface_length_m", comp["length_m"]), float)[keep]
    land = comp.get("land_cost")
    basis = {k: np.asarray(getattr(sites, k), float) for k in ("area_ha", "runoff_c", "population")
             if getattr(sites, k, None) is not None}
    design_fn = tree_designer(sites.xy, elev, sites.demand, sites.node_id, e, length, off, st, gz,
                              root=root, settings=ds, surface_length_m=surf_len,
                              land_cost=None if land is None else np.asarray(land, float)[keep],
                              basis_fields=basis)
    arb, arcs, rounds = depth_aware_tree(n, e, w, length, off, st, gz, root=root, settings=ds,
                                         design_fn=design_fn)
    child = np.flatnonzero(arb.parent >= 0)
    net = rooted_network(n, arb.parent[child], child, roots=[root])
    pe = np.full(n, -1, dtype=np.int64)
    pe[child] = keep[arcs.link[arb.parent_edge[child]]]
    node_cost = np.zeros(n)
    node_cost[child] = arcs.weights[arb.parent_edge[child]]
    tree = Tree(parent=np.asarray(arb.parent, np.int64), parent_edge=pe,
                order=np.asarray(net.order, np.int64), roots=np.array([root], np.int64),
                root_of=np.full(n, root, np.int64), weight=float(arb.total_weight))
    # Prim's undirected tree, drained towards the same outlet and designed the same way
    pt = prim_tree(n, e, w, roots=[root])
    prim_design = design_fn(np.asarray(pt.parent, np.int64), np.asarray(pt.parent_edge, np.int64))
    summ = prim_design.summary
    prim_cost = float(summ.get("whole_life_cost", summ["total_cost"]))
    return tree, {"cost": node_cost, "arborescence_cost": rounds.costs[rounds.chosen],
                  "prim_cost_same_pricing": prim_cost, "depth_layout": rounds.summary()}
    # --- end of the gravity layout ---
