"""The last plan stages: a grown tree becomes a :class:`~mainspan.pipeline.result.Layout`.

:func:`assemble_layout` builds the ``links`` and ``nodes`` tables (links in
grow order, oriented from the root) and the ground profiles, then calls
:func:`design_stage` (sizing and checks, when a system is given) and
:func:`run_info_stage` (the ``run_info`` table).  The stages before are in
:mod:`mainspan.pipeline.stages`.
"""

from __future__ import annotations

import os

import numpy as np

from .._version import __version__
from ..settings import design_settings as _design_settings
from .result import Layout, Profiles, file_sha256

__all__ = ["assemble_layout", "design_stage", "run_info_stage", "plan_inputs"]


def plan_inputs(sites, plan):
    """The input files of a plan as ``(name, path)`` pairs for ``run_info`` (sites, rasters)."""
    terrain = plan.get("terrain")
    land = plan.get("land_cost")
    land = land if isinstance(land, dict) else ({} if land is None else {"land_cost": land})
    return [("sites", sites.path), ("terrain", getattr(terrain, "path", terrain)), *land.items()]


def assemble_layout(sites, cands, costs, elev, tree, cert=None, directed=None, *,
                    terrain_surface=None, sample_spacing_m=None, system=None, design=None,
                    params=None, inputs=(), progress=None):
    """Turn a grown tree into a :class:`Layout`: links in grow order, nodes, design, run_info.

    Links are oriented from the root (``from_node`` nearer the root); the
    direction-dependent components (``z_from_m``/``z_to_m``,
    ``climb_m``/``descent_m``) are swapped where the candidate was stored the
    other way round.
    """
    say = progress or (lambda *a: None)
    n = sites.n
    edges = cands.edges
    order = np.asarray(tree.order, dtype=np.int64)
    child = order[tree.parent[order] >= 0]
    parent = tree.parent[child]
    eidx = tree.parent_edge[child]
    L = len(child)
    flip = edges[eidx, 0] != parent          # candidate stored (child, parent)
    comp = costs.components
    links = {
        "link_id": np.arange(1, L + 1, dtype=np.int64),
        "from_node": sites.node_id[parent].astype(str),
        "to_node": sites.node_id[child].astype(str),
        "grow_order": np.arange(1, L + 1, dtype=np.int64),
        "candidate_index": eidx.astype(np.int64),
    }
    for name, arr in comp.items():
        links[name] = np.asarray(arr)[eidx]
    for a, b in (("z_from_m", "z_to_m"), ("climb_m", "descent_m")):
        if a in comp and b in comp:
            va, vb = links[a].copy(), links[b].copy()
            links[a], links[b] = np.where(flip, vb, va), np.where(flip, va, vb)
    if terrain_surface is not None:
        links["z_from_m"], links["z_to_m"] = elev[parent], elev[child]
    w_all = np.asarray(costs.total, float)
    links["cost"] = w_all[eidx] if directed is None else directed["cost"][child]
    links.setdefault("max_slope_pct", np.full(L, np.nan))

    link_of_node = np.full(n, -1, dtype=np.int64)
    link_of_node[child] = np.arange(L)
    hops, cost_to_root = _path_sums(tree.parent, order, link_of_node, links["cost"])
    nodes = {
        "node_id": sites.node_id.astype(str),
        "role": sites.role.astype(str),
        "demand_lps": sites.demand.astype(float),
        "elevation_m": elev,
        "parent_node": np.where(tree.parent >= 0, sites.node_id[np.maximum(tree.parent, 0)],
                                "").astype(str),
        "hops_to_root": hops,
        "cost_to_root": cost_to_root,
    }
    for key in ("area_ha", "runoff_c", "population", "min_pressure_m"):   # design basis fields
        if getattr(sites, key, None) is not None:
            nodes[key] = np.asarray(getattr(sites, key), float)
    profiles = None
    if terrain_surface is not None and L:
        off, st, z = terrain_surface.profiles(sites.xy[parent], sites.xy[child],
                                              spacing_m=sample_spacing_m)
        profiles = Profiles(np.asarray(off, np.int64), np.asarray(st, float),
                            np.asarray(z, float))
    lay = Layout(crs=sites.crs, nodes=nodes, node_xy=sites.xy.copy(), links=links,
                 link_ends=np.column_stack([parent, child]).astype(np.int64),
                 profiles=profiles, sites=sites, candidates=cands, costs=costs, tree=tree,
                 certificate=cert)
    if system is not None:
        say("design", 0, 1)
        design_stage(lay, system, design, tree)
        say("design", 1, 1)
    lay.run_info = run_info_stage(lay, sites, cands, costs, tree, cert, directed, system,
                             params or {}, inputs)
    return lay




def run_info_stage(lay, sites, cands, costs, tree, cert, directed, system, params, inputs):
    """The ``run_info`` table: version, CRS, inputs with SHA-256, settings, totals, certificate."""
    kmin, kmax = _scale(sites)
    info = {
        "tool": "mainspan",
        "version": __version__,
        "working_crs": sites.crs.name,
        "working_crs_epsg": str(sites.crs.to_epsg() or ""),
        "working_crs_reason": sites.crs_reason,
        "working_crs_wkt": sites.crs.to_wkt(),
        "grid_scale_factor_min": f"{kmin:.8f}",
        "grid_scale_factor_max": f"{kmax:.8f}",
        "sites": str(sites.path or ""),
        "sites_layer": str(sites.layer or ""),
        "n_sites": str(sites.n),
        "merged_sites": "; ".join(f"{a}<-{b}" for a, b in sites.merged),
        "n_candidates": str(len(cands.edges)),
        "n_dropped_long": str(getattr(cands, "n_dropped_long", 0)),
        "n_impassable": str(int((~np.asarray(costs.passable, bool)).sum())),
    }
    info.update(params)
    info.update({
        "roots": ", ".join(sites.node_id[np.asarray(tree.roots, np.int64)].astype(str)),
        "n_roots": str(len(tree.roots)),
        "system": system or "",
        "n_links": str(lay.n_links),
        "total_length_m": f"{lay.total('length_m'):.3f}",
        "total_cost": f"{lay.total('cost'):.3f}",
        "certificate": (("Prim's tree of link costs (not the whole-cost tree chosen): "
                         if getattr(tree, "search", None) else "") +
                        "cycle property holds for all "
                        f"{cert.n_checked} non-tree candidates (min margin "
                        f"{cert.worst_margin:.6g})" if cert is not None and cert.ok else
                        "not applicable (directed arborescence; optimality by Edmonds)"
                        if cert is None else "FAILED"),
        "certificate_ok": "" if cert is None else str(bool(cert.ok)).lower(),
    })
    info.update(_inputs_info(list(inputs)))
    if lay.design is not None:
        for k_, v in getattr(lay.design, "summary", {}).items():
            info[f"design:{k_}"] = str(v)
        info["design_settings"] = _fmt_dataclass(lay.design_settings)
    if getattr(tree, "search", None):                       # whole11
        from ..graph.wholecost import search_run_info
        info.update(search_run_info(tree.search, lay.design))
    if directed is not None:
        a, b = directed["arborescence_cost"], directed["prim_cost_same_pricing"]
        info["gravity_layout_cost"] = f"{a:.3f}"
        info["prim_layout_cost_same_pricing"] = f"{b:.3f}"
        info["gravity_layout_saving_pct"] = f"{100 * (b - a) / b:.2f}" if b > 0 else "0"
        for k_, v in (directed.get("depth_layout") or {}).items():   # depth-aware rounds
            info[f"depth_layout_{k_}"] = (f"{v:.3f}" if isinstance(v, float) else str(v).lower()
                                          if isinstance(v, bool) else str(v))
    return info




def _inputs_info(named_paths):
    info = {}
    for name, p in named_paths:
        if p is None:
            continue
        if isinstance(p, (str, os.PathLike)) and os.path.exists(p):
            info[f"input:{name}"] = f"{os.fspath(p)} sha256={file_sha256(p)}"
        else:
            info[f"input:{name}"] = str(p)
    return info


def _path_sums(parent, order, link_of_node, link_cost):
    """Hops and cost from each node to its root (parents come first in *order*)."""
    from ..graph.network import _path_sums as along_paths

    order = np.asarray(order, np.int64)
    cost = along_paths(order, parent, link_of_node, np.asarray(link_cost, np.float64))
    hops = along_paths(order, parent, link_of_node, np.ones(len(link_cost)))
    return hops.astype(np.int64), cost



def _fmt_dataclass(obj):
    from dataclasses import asdict, is_dataclass
    if obj is None:
        return ""
    if is_dataclass(obj):
        return ", ".join(f"{k}={v}" for k, v in asdict(obj).items())
    return str(obj)


def _scale(sites):
    from ..sites.crs import scale_factor_range
    try:
        return scale_factor_range(sites.xy, sites.crs)
    except Exception:  # a CRS PROJ cannot give factors for: report NaN, do not fail
        return (float("nan"), float("nan"))




def _surface_share(lay, design):
    """Land-use classes each link crosses (``DesignSettings.surface_raster``), CSR by link; None without one."""
    path = getattr(design, "surface_raster", None)
    if not path or not lay.n_links:
        return None
    from ..ground.surfaces import open_surface
    surf = open_surface(path, working_crs=lay.crs, name="surface_raster")
    try:
        off, rows, cols, length, _ = surf.traverse(lay.node_xy[lay.link_ends[:, 0]],
                                                   lay.node_xy[lay.link_ends[:, 1]])
        return off, surf.gather_cells(rows, cols), length
    finally:
        surf.close()


def design_stage(lay, system, design, tree):
    """Size and check the layout's links as *system* mains; fills ``lay`` in place.

    Design fields join the ``links`` and ``nodes`` tables (identity columns are
    never replaced); quantities, access points and fittings become tables.
    """
    from ..hydraulics import DesignSettings, design_network

    design = _design_settings(design, system)
    L = lay.n_links
    p = lay.profiles
    land = lay.links.get("land_cost")
    res = design_network(
        system, xy=lay.node_xy, elevation_m=np.asarray(lay.nodes["elevation_m"], float),
        demand_lps=np.asarray(lay.nodes["demand_lps"], float),
        node_id=np.asarray(lay.nodes["node_id"]),
        from_node=lay.link_ends[:, 0], to_node=lay.link_ends[:, 1],
        length_m=np.asarray(lay.links["length_m"], float),
        surface_length_m=np.asarray(lay.links.get("surface_length_m", lay.links["length_m"]),
                                    float),
        roots=np.asarray(tree.roots, np.int64),
        profile_offsets=None if p is None else p.offsets,
        profile_station_m=None if p is None else p.station_m,
        profile_ground_m=None if p is None else p.ground_m,
        land_cost=None if land is None else np.asarray(land, float),
        settings=design, surface_share=_surface_share(lay, design),
        existing_link=lay.links.get("existing"), **_basis_fields(lay.nodes))
    ident = ("link_id", "from_node", "to_node", "grow_order", "candidate_index", "node_id",
             "role", "demand_lps", "elevation_m", "parent_node")
    for k_, v in res.link_fields.items():
        if k_ in ident:      # the layout's own identity columns are never replaced
            continue
        if len(v) != L:
            raise RuntimeError(f"design field {k_} has {len(v)} rows for {L} links")
        lay.links[k_] = v
    if "invert_down_m" in lay.links and "invert_up_m" in lay.links:
        # gravity: from_node (nearer the outlet) is the downstream end of the link
        lay.links["invert_from_m"] = np.asarray(lay.links["invert_down_m"], float)
        lay.links["invert_to_m"] = np.asarray(lay.links["invert_up_m"], float)
    for k_, v in res.node_fields.items():
        if k_ not in ident:
            lay.nodes[k_] = v
    if res.quantities:
        lay.tables["quantities"] = res.quantities
    ap = getattr(res, "access_points", None)
    if ap and len(ap.get("x", ())):
        # link index -> the layout's link_id, so the table joins to ``links``
        table = {"link_id": np.asarray(lay.links["link_id"])[np.asarray(ap["link"], np.int64)]}
        table.update({k: np.asarray(v) for k, v in ap.items() if k != "link"})
        lay.tables["access_points"] = table
    fit = getattr(res, "fittings", None)
    if fit and len(fit.get("x", ())):      # a point layer; link index -> link_id as for access points
        table = {"type": np.asarray(fit["type"], object), "size_mm": np.asarray(fit["size_mm"], float),
                 "link_id": np.asarray(lay.links["link_id"])[np.asarray(fit["link"], np.int64)]}
        table.update({k: np.asarray(fit[k]) for k in ("chainage_m", "node", "x", "y")})
        lay.tables["fittings"] = table
    lay.design = res
    lay.design_settings = design


def _basis_fields(nodes):
    """The sites' design-basis columns (see :func:`mainspan.hydraulics.basis.basis_fields`)."""
    from ..hydraulics.basis import basis_fields

    return basis_fields(nodes)


