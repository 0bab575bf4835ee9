"""Small synthetic :class:`mainspan.pipeline.layout.Layout` objects for the writer and report tests.

They are built directly (no pipeline) so the writer tests do not depend on the
planning stages: a 7-site tree in UTM zone 33N with large coordinates (so the
local-origin option matters), ground profiles, and the design columns of a
pressure or a gravity system.  ``system=None`` gives an unsized plan.

Tree (from → to, grow order)::

    S ─1─ A ─2─ B ─3─ C
          │      └─5─ E
          4─ D ─6─ F
"""

from __future__ import annotations

import numpy as np
import pyproj

from mainspan.pipeline.layout import Layout, Profiles

_IDS = np.array(["S", "A", "B", "C", "D", "E", "F"], dtype=object)
_XY = np.array([
    [500_000.0, 5_000_000.0],
    [500_300.0, 5_000_040.0],
    [500_620.0, 5_000_010.0],
    [500_980.0, 5_000_090.0],
    [500_280.0, 5_000_380.0],
    [500_700.0, 4_999_700.0],
    [500_250.0, 5_000_760.0],
])
_ENDS = np.array([[0, 1], [1, 2], [2, 3], [1, 4], [2, 5], [4, 6]], dtype=np.int64)
_GROUND = np.array([212.0, 205.5, 199.0, 193.2, 207.4, 196.1, 209.9])


def _profiles(xy, ends, ground, step_m=25.0):
    """Ground profiles with a gentle wave between the two end elevations."""
    offs, st, gz = [0], [], []
    for a, b in ends:
        length = float(np.hypot(*(xy[b] - xy[a])))
        s = np.unique(np.r_[np.arange(0.0, length, step_m), length])
        t = s / length
        z = ground[a] + (ground[b] - ground[a]) * t + 1.5 * np.sin(np.pi * t * 3)
        st.append(s)
        gz.append(z)
        offs.append(offs[-1] + len(s))
    return Profiles(np.asarray(offs, np.int64), np.concatenate(st), np.concatenate(gz))


def make_layout(system="pressure", *, material="PE100 SDR11", fail=True) -> Layout:
    """A 7-node layout; ``system`` is ``"pressure"``, ``"gravity"`` or ``None``.

    With ``fail=True`` one link and one node carry failing checks.
    """
    xy = _XY.copy()
    ends = _ENDS.copy()
    n, m = len(xy), len(ends)
    ground = _GROUND.copy()
    if system == "gravity":
        # gravity drains to the root: make the root the low point
        ground = ground[::-1].copy()
        ground[0] = 180.0
    length = np.hypot(*(xy[ends[:, 1]] - xy[ends[:, 0]]).T)
    dz = ground[ends[:, 1]] - ground[ends[:, 0]]
    parent = np.full(n, -1, np.int64)
    parent[ends[:, 1]] = ends[:, 0]
    hops = np.array([0, 1, 2, 3, 2, 3, 3])
    cost_link = 12.0 * length + 40.0 * np.abs(dz)
    cost_to_root = np.zeros(n)
    for k in range(m):                      # links are in grow order
        cost_to_root[ends[k, 1]] = cost_to_root[ends[k, 0]] + cost_link[k]
    role = np.array(["source" if system != "gravity" else "outlet"] + ["demand"] * (n - 1),
                    dtype=object)
    role[[1, 2, 4]] = "junction"
    demand = np.where(role == "demand", 2.5, 0.0)
    nodes = {
        "node_id": _IDS.copy(), "role": role, "demand_lps": demand, "elevation_m": ground,
        "parent_node": np.array([_IDS[p] if p >= 0 else "" for p in parent], dtype=object),
        "hops_to_root": hops, "cost_to_root": cost_to_root,
    }
    links = {
        "link_id": np.arange(1, m + 1), "from_node": _IDS[ends[:, 0]], "to_node": _IDS[ends[:, 1]],
        "grow_order": np.arange(1, m + 1), "length_m": length,
        "surface_length_m": np.hypot(length, dz), "cost": cost_link,
        "land_cost": 2.0 * length, "climb_m": np.maximum(dz, 0), "descent_m": np.maximum(-dz, 0),
        "z_from_m": ground[ends[:, 0]], "z_to_m": ground[ends[:, 1]],
        "max_slope_pct": 100 * np.abs(dz) / length * 1.3,
    }
    run_info = {"version": "0.1.0", "system": system or "", "working_crs": "WGS 84 / UTM zone 33N",
                "working_crs_wkt": pyproj.CRS.from_epsg(32633).to_wkt(), "terrain": "",
                "land_cost": "", "certificate": "optimal (cycle property, 0 violations)",
                "candidates": "delaunay", "n_candidates": "15",
                "input:sites": "/data/sites <&> demo.gpkg " + "ab" * 32}
    tables = {}
    if system is not None:
        # flows: each demand node 2.5 L/s; subtree sums along the tree
        sub = demand.copy()
        for k in range(m - 1, -1, -1):
            sub[ends[k, 0]] += sub[ends[k, 1]]
        flow = sub[ends[:, 1]]
        nominal = np.where(flow > 5, 160, 110).astype(np.int64)
        inner = np.where(nominal == 160, 130.8, 90.0)
        checks = np.array(["ok"] * m, dtype=object)
        nchecks = np.array(["ok"] * n, dtype=object)
        if fail:
            checks[2] = "low_pressure;too_deep" if system == "pressure" else "too_deep"
            nchecks[3] = "low_pressure" if system == "pressure" else "too_deep"
        links.update({
            "flow_lps": flow, "pipe": np.array([f"{material} DN{d}" for d in nominal], object),
            "material": np.array([material] * m, dtype=object), "nominal_mm": nominal,
            "diameter_mm": inner,
            "velocity_mps": flow / 1000 / (np.pi * (inner / 1000) ** 2 / 4),
            "checks": checks,
        })
        if system == "pressure":
            hl = 0.002 * length
            hgl = np.zeros(n)
            hgl[0] = 240.0
            for k in range(m):
                hgl[ends[k, 1]] = hgl[ends[k, 0]] - hl[k]
            links.update({"headloss_m": hl, "hgl_from_m": hgl[ends[:, 0]],
                          "hgl_to_m": hgl[ends[:, 1]]})
            nodes.update({"hgl_m": hgl, "pressure_head_m": hgl - ground, "checks": nchecks})
        else:
            inv = ground - 1.2
            # pipes must fall toward the root: at least 0.5 % from each to-node
            for k in range(m - 1, -1, -1):
                a, b = ends[k]
                inv[a] = min(inv[a], inv[b] - 0.005 * length[k])
            links.update({"invert_from_m": inv[ends[:, 0]], "invert_to_m": inv[ends[:, 1]],
                          "slope_pct": 100 * (inv[ends[:, 1]] - inv[ends[:, 0]]) / length,
                          "depth_max_m": ground[ends].max(1) - inv[ends].min(1),
                          "n_access_points": np.ceil(length / 120).astype(np.int64)})
            nodes.update({"invert_m": inv, "checks": nchecks})
        u = np.unique(nominal)
        tables["quantities"] = {
            "material": np.array([material] * len(u), dtype=object), "nominal_mm": u,
            "length_m": np.array([length[nominal == d].sum() for d in u]),
            "count": np.array([(nominal == d).sum() for d in u]),
            "pipe_cost": np.array([4.0 * length[nominal == d].sum() for d in u]),
            "trench_cost": np.array([6.0 * length[nominal == d].sum() for d in u]),
            "land_cost": np.array([2.0 * length[nominal == d].sum() for d in u]),
        }
        q = tables["quantities"]
        q["total_cost"] = q["pipe_cost"] + q["trench_cost"] + q["land_cost"]
    return Layout(crs=pyproj.CRS.from_epsg(32633), nodes=nodes, node_xy=xy, links=links,
                  link_ends=ends, tables=tables, run_info=run_info,
                  profiles=_profiles(xy, ends, ground))
