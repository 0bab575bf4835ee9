"""The result (:class:`Layout`) and the pipeline that makes it (:func:`plan_layout`).

``plan_layout`` calls each stage once, in order, on plain arrays::

    sites → candidates → link costs → Prim tree (+ certificate) → design → Layout

A :class:`Layout` is table-shaped so that it can be written to a GeoPackage
and read back whole: writers and the report take a Layout and nothing else.
"""

from __future__ import annotations

import hashlib
import os
import time
from dataclasses import dataclass, field

import numpy as np
import pyproj

from .._version import __version__
from ..errors import CertificateError, DisconnectedError, InputError
from ..settings import design_settings as _design_settings
from ..settings import run_info_params

__all__ = ["Layout", "Profiles", "plan_layout", "read_layout", "file_sha256", "site_elevations",
           "grow_tree", "assemble_layout", "LAYOUTS"]

# --- whole11: the layout kinds, one constant for plan_layout, the CLI and scenarios ---
#: ``tree``: Prim's tree of link costs; ``gravity``: minimum arborescence towards the
#: outlet; ``whole-cost``: the tree of least whole-life cost (:mod:`mainspan.graph.wholecost`).
from ..settings import LAYOUTS  # noqa: E402 - declared with the settings schema (tree.layout)
# --- end whole11 ---


@dataclass
class Profiles:
    """Ground profiles along each link, CSR: link i spans ``offsets[i]:offsets[i+1]``."""

    offsets: np.ndarray
    station_m: np.ndarray
    ground_m: np.ndarray

    def of(self, i):
        a, b = int(self.offsets[i]), int(self.offsets[i + 1])
        return self.station_m[a:b], self.ground_m[a:b]


@dataclass
class Layout:
    """A planned network of mains, ready for writers and the report.

    Attributes
    ----------
    crs : pyproj.CRS
        Working CRS (metres) of every coordinate.
    nodes : dict of str -> ndarray
        Columns of the ``nodes`` layer, one row per site, in site order.
    node_xy : ndarray (n, 2)
    links : dict of str -> ndarray
        Columns of the ``links`` layer, one row per tree link, in grow order.
    link_ends : ndarray int64 (L, 2)
        Row indices into ``nodes`` of each link's ``from_node`` (nearer the
        root) and ``to_node``.
    tables : dict of str -> dict of str -> ndarray
        Further attribute tables (``quantities``, ``checks``).
    run_info : dict of str -> str
        Run metadata: version, inputs with SHA-256, CRS, parameters, totals,
        certificate.
    profiles : Profiles or None
        Ground profile along each link (stations from ``from_node``).
    """

    crs: pyproj.CRS
    nodes: dict
    node_xy: np.ndarray
    links: dict
    link_ends: np.ndarray
    tables: dict = field(default_factory=dict)
    run_info: dict = field(default_factory=dict)
    profiles: Profiles | None = None
    # pipeline internals; None when a layout is read back from a file
    sites: object = None
    candidates: object = None
    costs: object = None
    tree: object = None
    certificate: object = None
    design: object = None

    # ------------------------------------------------------------------ basics
    @property
    def n_nodes(self) -> int:
        return len(self.node_xy)

    @property
    def n_links(self) -> int:
        return len(self.link_ends)

    @property
    def system(self) -> str | None:
        s = self.run_info.get("system", "")
        return s or None

    @property
    def has_z(self) -> bool:
        z = self.nodes.get("elevation_m")
        return z is not None and bool(np.isfinite(np.asarray(z, float)).any())

    def node_index(self, node_id) -> int:
        ids = np.asarray(self.nodes["node_id"]).astype(str)
        hit = np.flatnonzero(ids == str(node_id))
        if not hit.size:
            raise InputError(f"node id {node_id!r} is not in this layout; "
                             f"ids look like {', '.join(ids[:5])}")
        return int(hit[0])

    def link_coordinates(self, z="ground"):
        """(L, 2, 3) link end coordinates; z from ``ground`` or the pipe ``invert``."""
        xy = self.node_xy[self.link_ends]              # (L, 2, 2)
        out = np.zeros((self.n_links, 2, 3))
        out[:, :, :2] = xy
        if z == "invert" and "invert_from_m" in self.links:
            out[:, 0, 2] = self.links["invert_from_m"]
            out[:, 1, 2] = self.links["invert_to_m"]
        elif "z_from_m" in self.links:
            out[:, 0, 2] = self.links["z_from_m"]
            out[:, 1, 2] = self.links["z_to_m"]
        else:
            out[:, :, 2] = np.nan
        return out

    def total(self, column="length_m") -> float:
        return float(np.nansum(np.asarray(self.links[column], float))) if self.n_links else 0.0

    def path_to_root(self, node) -> np.ndarray:
        """Node indices from *node* (index or id) up to its root, inclusive."""
        i = self.node_index(node) if not isinstance(node, (int, np.integer)) else int(node)
        parent = np.full(self.n_nodes, -1, dtype=np.int64)
        parent[self.link_ends[:, 1]] = self.link_ends[:, 0]
        out = [i]
        while parent[out[-1]] >= 0:
            out.append(int(parent[out[-1]]))
        return np.asarray(out, dtype=np.int64)

    # ------------------------------------------------------------------ output
    def to_frames(self, *, suffix=""):
        """The layers as (Geo)DataFrames keyed by layer name."""
        import geopandas as gpd
        import pandas as pd
        import shapely

        has_z = self.has_z
        c = self.link_coordinates()
        if has_z:
            zz = np.nan_to_num(c[:, :, 2], nan=0.0)
            lines = shapely.linestrings(np.dstack([c[:, :, 0], c[:, :, 1], zz]))
            pts = shapely.points(self.node_xy[:, 0], self.node_xy[:, 1],
                                 np.nan_to_num(np.asarray(self.nodes["elevation_m"], float)))
        else:
            lines = shapely.linestrings(c[:, :, :2]) if self.n_links else np.array([], object)
            pts = shapely.points(self.node_xy)
        if getattr(self, "link_paths", None) is not None and self.n_links:   # route14: routed
            from .routing import path_lines
            lines = path_lines(self, has_z)
        links = gpd.GeoDataFrame(pd.DataFrame({k: _col(v) for k, v in self.links.items()}),
                                 geometry=np.asarray(lines, dtype=object), crs=self.crs)
        nodes = gpd.GeoDataFrame(pd.DataFrame({k: _col(v) for k, v in self.nodes.items()}),
                                 geometry=np.asarray(pts, dtype=object), crs=self.crs)
        out = {f"links{suffix}": links, f"nodes{suffix}": nodes}
        info = pd.DataFrame({"key": list(self.run_info.keys()),
                             "value": [str(v) for v in self.run_info.values()]})
        out[f"run_info{suffix}"] = info
        for name, table in self.tables.items():
            df = pd.DataFrame({k: _col(v) for k, v in table.items()})
            if "x" in table and "y" in table:       # a point table: write it as a layer
                df = gpd.GeoDataFrame(df, geometry=np.asarray(
                    shapely.points(np.asarray(table["x"], float), np.asarray(table["y"], float)),
                    dtype=object), crs=self.crs)
            out[f"{name}{suffix}"] = df
        if self.profiles is not None and self.n_links:
            from ..writers.gpkg import pack_profiles   # one row per link, packed arrays
            p = self.profiles
            out[f"link_profiles{suffix}"] = pack_profiles(self.links["link_id"], p.offsets,
                                                          p.station_m, p.ground_m)
        return out

    def write_gpkg(self, path, *, overwrite=False, suffix=""):
        """Write ``links``, ``nodes``, ``run_info`` (and tables) to a GeoPackage.

        Other layers already in the file are kept; existing layers of the same
        names are refused unless ``overwrite=True``.
        """
        from ..writers.gpkg import write_layers

        write_layers(path, self.to_frames(suffix=suffix), overwrite=overwrite)
        return path

    def summary(self) -> str:
        """A one-screen text summary."""
        ri = self.run_info
        lines = [
            f"sites           {self.n_nodes}",
            f"candidate links {ri.get('n_candidates', '?')} ({ri.get('candidates', '?')})"
            + (f", {ri.get('n_impassable')} impassable dropped" if ri.get('n_impassable', '0') not in ('0', 0) else ""),
            f"tree links      {self.n_links} from {ri.get('n_roots', '?')} root(s)",
            f"total length    {self.total('length_m'):,.1f} m",
            f"total cost      {self.total('cost'):,.1f}",
            f"certificate     {ri.get('certificate', '?')}",
            f"working CRS     {ri.get('working_crs', self.crs.name)}",
        ]
        if ri.get("whole_cost_layout"):                       # whole11
            grade = (f"; grade at the source {float(ri['source_grade_m']):,.1f} m vs "
                     f"{float(ri['prim_source_grade_m']):,.1f} m" if ri.get("source_grade_m")
                     else "")
            lines.insert(5, f"whole-cost tree whole-life cost {float(ri['whole_life_cost']):,.1f} vs "
                         f"Prim's tree {float(ri['prim_whole_life_cost']):,.1f} "
                         f"({ri['whole_cost_saving_pct']} % saved{grade}); local optimum "
                         "under single link exchanges")
        if ri.get("gravity_layout_cost"):
            lines.insert(5, f"gravity layout  arborescence {float(ri['gravity_layout_cost']):,.1f} "
                         f"vs Prim tree {float(ri['prim_layout_cost_same_pricing']):,.1f}, both "
                         f"designed ({ri['gravity_layout_saving_pct']} % saved)")
        if ri.get("depth_layout_rounds"):
            lines.insert(6, "depth-aware     " + depth_layout_text(ri))
        if ri.get("network_result"):                          # exist15
            lines.insert(6, "network         " + ri["network_result"])
        return "\n".join(lines)


def depth_layout_text(ri) -> str:
    """One line: the depth-aware gravity layout against the earlier layout (from run_info)."""
    f = float
    return (f"{ri['depth_layout_rounds']} round(s), "
            f"{'settled' if ri['depth_layout_settled'] == 'true' else 'kept the cheapest'}, "
            f"{ri['depth_layout_links_changed']} links moved: design cost "
            f"{f(ri['depth_layout_cost_before']):,.0f} -> {f(ri['depth_layout_cost_after']):,.0f} "
            f"({f(ri['depth_layout_saving_pct']):.1f} % saved), failed checks "
            f"{ri['depth_layout_failures_before']} -> {ri['depth_layout_failures_after']}, deepest "
            f"invert {f(ri['depth_layout_max_depth_before_m']):.2f} -> "
            f"{f(ri['depth_layout_max_depth_after_m']):.2f} m")


def _col(v):
    a = np.asarray(v)
    if a.dtype == object:
        return a.astype(str)
    return a


def file_sha256(path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def read_layout(path, *, suffix="") -> Layout:
    """Read a layout written by :meth:`Layout.write_gpkg` back from a GeoPackage.

    Parameters
    ----------
    path : str
        The GeoPackage.
    suffix : str, default ""
        Layer-name suffix, as written by scenario runs (``links_<scenario>``).

    Returns
    -------
    Layout
        Without the pipeline internals (candidates, costs, tree), which the
        file does not hold.
    """
    import shapely

    from ..writers.gpkg import check_one_run, list_layers, read_table

    # refuse layers written by different runs (safeio rules; see writers/gpkg.py)
    check_one_run(path, [f"{b}{suffix}" for b in ("links", "nodes", "run_info", "quantities",
                                                  "checks", "access_points", "link_profiles")])
    links_df = read_table(path, f"links{suffix}")
    nodes_df = read_table(path, f"nodes{suffix}")
    names = list_layers(path)
    info = {}
    if f"run_info{suffix}" in names:
        t = read_table(path, f"run_info{suffix}")
        info = dict(zip(t["key"].astype(str), t["value"].astype(str)))
    crs = pyproj.CRS.from_user_input(nodes_df.crs) if nodes_df.crs is not None else None
    node_xy = shapely.get_coordinates(np.asarray(nodes_df.geometry.values))[:, :2]
    nodes = {c: nodes_df[c].to_numpy() for c in nodes_df.columns if c != nodes_df.geometry.name}
    links = {c: links_df[c].to_numpy() for c in links_df.columns if c != links_df.geometry.name}
    ids = np.asarray(nodes["node_id"]).astype(str)
    lookup = {k: i for i, k in enumerate(ids)}
    try:
        ends = np.array([[lookup[str(a)], lookup[str(b)]] for a, b in
                         zip(links["from_node"], links["to_node"])], dtype=np.int64).reshape(-1, 2)
    except KeyError as exc:
        raise InputError(f"{path!r}: link refers to node {exc.args[0]!r} missing from "
                         f"nodes{suffix}; the file is damaged or not a mainspan layout") from None
    tables = {}
    for name in ("quantities", "checks", "access_points", "fittings"):
        if f"{name}{suffix}" in names:
            t = read_table(path, f"{name}{suffix}")
            geom = getattr(t, "geometry", None) if "geometry" in t.columns else None
            tables[name] = {c: t[c].to_numpy() for c in t.columns if c != "geometry"}
            if geom is not None:
                tables[name]["x"], tables[name]["y"] = geom.x.to_numpy(), geom.y.to_numpy()
    profiles = None
    if f"link_profiles{suffix}" in names and len(links.get("link_id", [])):
        from ..writers.gpkg import unpack_profiles
        profiles = Profiles(*unpack_profiles(read_table(path, f"link_profiles{suffix}"),
                                             links["link_id"]))
    return Layout(crs=crs, nodes=nodes, node_xy=node_xy, links=links, link_ends=ends,
                  tables=tables, run_info=info, profiles=profiles)


# ---------------------------------------------------------------------- pipeline
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
    from ..graph.candidates import build_candidates
    from ..execution.costing import price_links   # dask18: large jobs in chunks (--workers)
    from ..ground.costs import CostWeights, node_elevations
    from ..settings import PlanSettings
    from ..sites.read import Sites, read_sites

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
                 crossing=crossing, junctions=junctions, **_network_kwargs(network))
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
    kw = {**{n: defaults_v for n, defaults_v in _PLAN_DEFAULTS.items()},
          **settings.plan_kwargs()}
    terrain, land_cost, cost_expression = kw["terrain"], kw["land_cost"], kw["cost_expression"]
    class_costs, raster_crs, on_nodata = kw["class_costs"], kw["raster_crs"], kw["on_nodata"]
    sample_spacing_m, weights, candidates = kw["sample_spacing_m"], kw["weights"], kw["candidates"]
    k, max_link_m, max_complete_nodes = kw["k"], kw["max_link_m"], kw["max_complete_nodes"]
    roots, allow_forest, use_site_z = kw["roots"], kw["allow_forest"], kw["use_site_z"]
    system, design, layout = kw["system"], kw["design"], kw["layout"]
    say = progress or (lambda *a: None)
    if not isinstance(sites, Sites):
        sites = read_sites(sites)
    n = sites.n
    if weights is None:
        weights = CostWeights()
    elif isinstance(weights, dict):
        weights = CostWeights(**weights)

    if roots is not None and len(roots):
        root_idx = sites.index_of(roots)
    else:
        root_idx = sites.default_roots()
    from .extend import network_stage        # exist15: existing mains, forced links, limits
    net = network_stage(sites, kw, root_idx)
    sites = net.sites

    surf = None
    if terrain is not None:
        from ..ground.surfaces import Surface, open_surface
        surf = terrain if isinstance(terrain, Surface) else open_surface(
            terrain, working_crs=sites.crs, raster_crs=raster_crs)
    # --- route14: candidates and prices of the straight or corridor route ---
    from . import routing
    sites, cands, costs, routed = routing.route_stage(
        sites, kw, weights=weights, root_idx=root_idx, terrain_surface=surf, progress=say,
        extend_candidates=net.candidates, extend_costs=net.costs,           # exist15
        network_active=net.active)
    edges = cands.edges
    # --- end route14 ---

    # Node elevations: DEM, or the sites' own Z when asked (and where given).
    dem_elev = None
    if surf is not None:
        dem_elev = node_elevations(sites.xy, surf)
    elev = site_elevations(sites, dem_elev, use_site_z=use_site_z)

    say("tree", 0, 1)
    if net.active:                            # exist15
        tree, cert = net.grow(sites, edges, costs, root_idx, allow_forest=allow_forest)
        directed = None
    else:
      tree, cert, directed = grow_tree(sites, edges, costs, elev, root_idx, layout=layout,
                                     allow_forest=allow_forest, design=design,
                                     node_order=getattr(cands, "node_order", None),
                                     terrain_surface=surf, sample_spacing_m=sample_spacing_m,
                                     system=system, whole_cost=whole_cost)
    # --- route14: Steiner junctions on the straight tree (--junctions) ---
    sites, cands, costs, tree, cert, el2 = routing.junctions_after_tree(
        sites, cands, costs, tree, cert, kw, weights=weights, root_idx=root_idx,
        terrain_surface=surf, routed=routed,
        grow=lambda s_, e_, c_, z_, r_: grow_tree(s_, e_, c_, z_, r_, system=system),
        elevations=lambda s_: site_elevations(
            s_, None if surf is None else node_elevations(s_.xy, surf), use_site_z=use_site_z))
    elev = elev if el2 is None else el2
    # --- end route14 ---
    say("tree", 1, 1)
    land_paths = land_cost if isinstance(land_cost, dict) else (
        {"land_cost": land_cost} if land_cost is not None else {})
    params = run_info_params({**kw, "weights": weights})
    inputs = [("sites", sites.path), ("terrain", getattr(terrain, "path", terrain)),
              *land_paths.items()]
    corridor = routed["net"] is not None      # route14: design after the routed geometry
    lay = assemble_layout(sites, cands, costs, elev, tree, cert, directed,
                          terrain_surface=surf, sample_spacing_m=sample_spacing_m,
                          system=None if corridor else system, design=design, params=params,
                          inputs=inputs, progress=say)
    net.finish(lay)                           # exist15
    # --- route14: routed geometry, its design, routing run_info ---
    def _redesign(lay_):
        if system is not None:
            _design(lay_, system, design, tree)
        lay_.run_info = _run_info(lay_, sites, cands, costs, tree, cert, directed, system,
                                  params or {}, inputs)
    routing.finish_layout(lay, routed, kw, terrain_surface=surf,
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
                      junctions=False)


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
        _design(lay, system, design, tree)
        say("design", 1, 1)
    lay.run_info = _run_info(lay, sites, cands, costs, tree, cert, directed, system,
                             params or {}, inputs)
    return lay


def _run_info(lay, sites, cands, costs, tree, cert, directed, system, params, inputs):
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


def _remap_tree(tree_k, keep):
    """Map a tree grown on the passable subset back to candidate indices."""
    from dataclasses import replace
    pe = np.asarray(tree_k.parent_edge).copy()
    m = pe >= 0
    pe[m] = keep[pe[m]]
    return replace(tree_k, parent_edge=pe)


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


def _design(lay, system, design, tree):
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
