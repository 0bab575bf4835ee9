"""Report benchmark: the HTML review report of a large layout, capped against uncapped.

    python benchmarks/bench_report.py              # 100,000 sites
    python benchmarks/bench_report.py --quick      # 10,000 sites
    python benchmarks/bench_report.py --n 300000

A pressure layout of n sites is generated here (random points at about 100 m spacing, the
minimum spanning tree of their Delaunay links from scipy, rooted at site 0, pipes sized
by flow, a falling grade line) and its report is written twice in the same run:

* ``capped`` — the report as mainspan writes it: tables capped at ``MAX_ROWS`` rows with
  the full tables as CSV beside the HTML, the map drawn as one raster without labels;
* ``reference`` — the same report with every table row in the page (``MAX_ROWS`` set
  above n), as the report was written before tables were capped.

Each line prints the HTML size, the CSV files' size, and the wall time; the last line the
ratios.  Target (issue 13): at 100,000 sites the HTML is under 5 MB and written in a few
seconds.
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time

import numpy as np


def pressure_layout(n, seed=0):
    """A Layout of n random sites on the minimum spanning tree of their Delaunay links."""
    import pyproj
    import scipy.sparse as sp
    from scipy.sparse.csgraph import breadth_first_order, minimum_spanning_tree
    from scipy.spatial import Delaunay

    from mainspan.pipeline.layout import Layout

    rng = np.random.default_rng(seed)
    side = 100.0 * np.sqrt(n)
    xy = rng.uniform(0, side, (n, 2)) + [500_000.0, 5_000_000.0]
    tri = Delaunay(xy - xy.mean(0))
    e = np.vstack([tri.simplices[:, [0, 1]], tri.simplices[:, [1, 2]],
                   tri.simplices[:, [0, 2]]])
    e = np.unique(np.sort(e, 1), axis=0)
    w = np.hypot(*(xy[e[:, 0]] - xy[e[:, 1]]).T)
    g = sp.coo_matrix((w, (e[:, 0], e[:, 1])), shape=(n, n)).tocsr()
    mst = minimum_spanning_tree(g)
    order, pred = breadth_first_order(mst + mst.T, 0, directed=False)
    child = order[1:]
    ends = np.column_stack([pred[child], child]).astype(np.int64)
    length = np.hypot(*(xy[ends[:, 1]] - xy[ends[:, 0]]).T)
    ground = 200 + 20 * np.sin(xy[:, 0] / 900) + 15 * np.cos(xy[:, 1] / 700)
    demand = np.full(n, 0.05)
    demand[0] = 0.0
    sub = demand.copy()
    for k in range(len(ends) - 1, -1, -1):       # children after parents in BFS order
        sub[ends[k, 0]] += sub[ends[k, 1]]
    flow = sub[ends[:, 1]]
    nominal = np.select([flow > 50, flow > 10, flow > 2], [400, 250, 160], 110).astype(np.int64)
    hl = 0.0004 * length
    hgl = np.zeros(n)
    hgl[0] = 320.0
    for k in range(len(ends)):
        hgl[ends[k, 1]] = hgl[ends[k, 0]] - hl[k]
    ids = np.array([f"H{i:06d}" for i in range(n)], dtype=object)
    role = np.array(["source"] + ["demand"] * (n - 1), dtype=object)
    checks = np.where(hgl - ground < 14, "low_pressure", "ok").astype(object)
    nodes = {"node_id": ids, "role": role, "demand_lps": demand, "elevation_m": ground,
             "hgl_m": hgl, "pressure_head_m": hgl - ground, "checks": checks}
    links = {"link_id": np.arange(1, len(ends) + 1), "from_node": ids[ends[:, 0]],
             "to_node": ids[ends[:, 1]], "length_m": length, "cost": 25.0 * length,
             "z_from_m": ground[ends[:, 0]], "z_to_m": ground[ends[:, 1]], "flow_lps": flow,
             "nominal_mm": nominal, "diameter_mm": nominal * 0.82,
             "pipe": np.array([f"PE DN{d}" for d in nominal], dtype=object),
             "headloss_m": hl, "hgl_from_m": hgl[ends[:, 0]], "hgl_to_m": hgl[ends[:, 1]],
             "trench_depth_m": np.full(len(ends), 1.2),
             "checks": checks[ends[:, 1]]}
    u = np.unique(nominal)
    q = {"category": np.array(["pipe"] * len(u) + ["TOTAL"], dtype=object),
         "item": np.array([f"PE DN{d}" for d in u] + ["TOTAL"], dtype=object),
         "length_m": np.r_[[length[nominal == d].sum() for d in u], length.sum()],
         "total_cost": np.r_[[25.0 * length[nominal == d].sum() for d in u], 25.0 * length.sum()]}
    info = {"version": "bench", "system": "pressure", "working_crs": "WGS 84 / UTM zone 33N",
            "certificate": "not checked (benchmark)", "scheme_name": f"Benchmark {n:,} sites"}
    return Layout(crs=pyproj.CRS.from_epsg(32633), nodes=nodes, node_xy=xy, links=links,
                  link_ends=ends, tables={"quantities": q}, run_info=info)


def _write(lay, folder, name, max_rows):
    from mainspan.report import tables as T
    from mainspan.report.html import write_report

    keep = T.MAX_ROWS
    T.MAX_ROWS = max_rows
    try:
        t = time.perf_counter()
        path = write_report(lay, os.path.join(folder, f"{name}.html"), progress=False)
        dt = time.perf_counter() - t
    finally:
        T.MAX_ROWS = keep
    csv = sum(os.path.getsize(os.path.join(folder, f)) for f in os.listdir(folder)
              if f.startswith(name + "_") and f.endswith(".csv"))
    return os.path.getsize(path), csv, dt


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=100_000)
    ap.add_argument("--quick", action="store_true", help="10,000 sites")
    a = ap.parse_args(argv)
    n = 10_000 if a.quick else a.n
    t = time.perf_counter()
    lay = pressure_layout(n)
    print(f"layout: {n:,} sites, {lay.n_links:,} links generated in "
          f"{time.perf_counter() - t:.1f} s")
    from mainspan.report.tables import MAX_ROWS

    with tempfile.TemporaryDirectory() as folder:
        _write(lay, folder, "warmup", MAX_ROWS)          # imports, fonts, numba caches
        size, csv, dt = _write(lay, folder, "capped", MAX_ROWS)
        print(f"capped    : HTML {size / 1e6:7.2f} MB  + CSV {csv / 1e6:6.2f} MB  "
              f"written in {dt:6.2f} s  (tables capped at {MAX_ROWS} rows)")
        rsize, rcsv, rdt = _write(lay, folder, "reference", 10 * n)
        print(f"reference : HTML {rsize / 1e6:7.2f} MB  + CSV {rcsv / 1e6:6.2f} MB  "
              f"written in {rdt:6.2f} s  (every row in the page)")
    print(f"ratio     : size {size / rsize:.3f} of the reference, time {dt / rdt:.2f}x "
          f"({rdt / dt:.1f}x faster); target at 100,000 sites: HTML < 5 MB, a few seconds")


if __name__ == "__main__":
    main()
