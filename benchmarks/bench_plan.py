"""A full plan — candidates, raster costs, Prim tree, certificate, pressure design — at scale.

Prints, in one run, for random sites over a generated tiled DEM and land-cost raster:

1. the reference: scipy's Qhull Delaunay plus ``scipy.sparse.csgraph.minimum_spanning_tree``
   on plain lengths for the same sites (the graph part alone, with no rasters);
2. ``mainspan.plan_layout`` with terrain, land cost and pressure sizing: time per stage,
   the ratio to the reference, and peak memory (process max RSS; tracemalloc is left off, it slows Python code),
   against the size one float32 copy of each raster would take.

Usage::

    python benchmarks/bench_plan.py            # 10,000 x 10,000 rasters, 100,000 sites
    python benchmarks/bench_plan.py --quick    # 2,000 x 2,000 rasters, 10,000 sites
"""

from __future__ import annotations

import argparse
import multiprocessing
import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_costing import CELL, CRS, X0, Y1, delaunay_edges, write_rasters  # noqa: E402

import mainspan as ms  # noqa: E402


def reference(xy):
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import minimum_spanning_tree

    t = time.perf_counter()
    e = delaunay_edges(xy)
    w = np.hypot(*(xy[e[:, 1]] - xy[e[:, 0]]).T)
    g = coo_matrix((w, (e[:, 0], e[:, 1])), shape=(len(xy), len(xy))).tocsr()
    total = minimum_spanning_tree(g).sum()
    return time.perf_counter() - t, float(total)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="2,000^2 cells, 10,000 sites")
    ap.add_argument("--cells", type=int, default=None)
    ap.add_argument("--sites", type=int, default=None)
    a = ap.parse_args(argv)
    n_cells, n_sites = (2000, 10_000) if a.quick else (10_000, 100_000)
    n_cells, n_sites = a.cells or n_cells, a.sites or n_sites
    extent = n_cells * CELL
    with tempfile.TemporaryDirectory() as tmp:
        child = multiprocessing.get_context("spawn").Process(target=write_rasters,
                                                             args=(Path(tmp), n_cells))
        child.start()
        child.join()
        dem, cost = Path(tmp) / "dem.tif", Path(tmp) / "cost.tif"
        rng = np.random.default_rng(5)
        xy = np.column_stack([rng.uniform(X0 + 50, X0 + extent - 50, n_sites),
                              rng.uniform(Y1 - extent + 50, Y1 - 50, n_sites)])
        q = np.round(rng.uniform(0.01, 0.05, n_sites), 3)
        role = np.full(n_sites, "demand", dtype=object)
        role[0] = "source"
        q[0] = 0
        sites = ms.sites_from_arrays(xy, crs=CRS, role=role, demand_lps=q)

        # warm-up: numba compiles (or loads its cache) on a small copy
        small = ms.sites_from_arrays(xy[:200], crs=CRS, role=role[:200], demand_lps=q[:200])
        kw = dict(terrain=str(dem), land_cost={"base": str(cost)},
                  weights={"length": 25.0, "climb": 5.0}, system="pressure")
        ms.plan_layout(small, **kw)

        t_ref, ref_total = reference(xy)
        stages = {}
        last = [time.perf_counter(), None]

        def progress(stage, done, total):
            now = time.perf_counter()
            if done == 0 and stage != last[1]:
                if last[1] is not None:
                    stages[last[1]] = stages.get(last[1], 0) + now - last[0]
                last[:] = [now, stage]

        rss0 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        t = time.perf_counter()
        lay = ms.plan_layout(sites, progress=progress, **kw)
        t_plan = time.perf_counter() - t
        stages[last[1]] = stages.get(last[1], 0) + time.perf_counter() - last[0]
        rss1 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        raster_mib = n_cells * n_cells * 4 / 2**20
        print(f"sites {n_sites:,}, rasters {n_cells:,} x {n_cells:,} cells "
              f"(one float32 copy = {raster_mib:,.0f} MiB each)")
        print(f"candidate links {lay.run_info['n_candidates']}, tree links {lay.n_links:,}, "
              f"certificate: {lay.run_info['certificate_ok']}")
        print(f"{'stage':<12}{'seconds':>10}")
        for k, v in stages.items():
            print(f"{k:<12}{v:>10.2f}")
        print(f"{'plan total':<12}{t_plan:>10.2f}")
        print(f"reference (scipy Delaunay + csgraph MST on plain lengths, no rasters): "
              f"{t_ref:.2f} s")
        print(f"ratio plan / reference: {t_plan / t_ref:.2f}x "
              "(the plan also prices rasters, certifies and sizes pipes)")
        print(f"peak memory: max RSS {rss1:,.0f} MiB (before the plan {rss0:,.0f} MiB); "
              f"ratio max RSS / two raster copies {rss1 / (2 * raster_mib):.2f}")
        plain = float(np.asarray(lay.costs.components["length_m"])[lay.links["candidate_index"]].sum())
        print(f"tree length {plain:,.0f} m vs shortest-tree length {ref_total:,.0f} m "
              f"({100 * (plain / ref_total - 1):.2f} % longer: the price of the ground)")


if __name__ == "__main__":
    main()
