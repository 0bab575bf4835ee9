"""The result of a plan: :class:`Layout` (table-shaped) and :func:`read_layout`.

A :class:`Layout` is table-shaped so that it can be written to a GeoPackage
and read back whole: writers and the report take a Layout and nothing else.
The stages that make one are in :mod:`mainspan.pipeline.stages` and
:mod:`mainspan.pipeline.assemble`; :func:`mainspan.pipeline.layout.plan_layout`
calls them.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

import numpy as np
import pyproj

from ..errors import InputError

__all__ = ["Layout", "Profiles", "read_layout", "file_sha256", "depth_layout_text"]

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
