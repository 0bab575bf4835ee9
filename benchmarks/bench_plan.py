"""A full plan at scale against the reference pipeline, and how its time grows with the sites.

Prints, in one run, for random sites over a generated tiled DEM and land-cost raster
(10,000 x 10,000 cells of 5 m, float32):

1. for each size in ``--sizes`` (default 10,000, 100,000 and 1,000,000 sites): the
   reference pipeline -- scipy's Qhull Delaunay, numpy lengths,
   ``scipy.sparse.csgraph.minimum_spanning_tree`` and a pyogrio (Arrow) GeoPackage write of
   the tree's links -- and ``mainspan.plan_layout`` with terrain, land cost and pressure
   design plus ``Layout.write_gpkg``; time per stage, the ratio plan / reference (target:
   at most 2x at 100,000 sites) and the process's peak resident memory;
2. the end-to-end exponent: the slope of log(time) against log(sites) between the
   smallest and largest size (target: at most 1.1 from 10,000 to 1,000,000), for both.

Every size runs in a fresh process so its peak memory is its own.

Usage::

    python benchmarks/bench_plan.py                        # 10k, 100k, 1M sites
    python benchmarks/bench_plan.py --quick                # 2,000^2 cells, 2k and 10k sites
    python benchmarks/bench_plan.py --sizes 100000         # one size
"""

from __future__ import annotations

import argparse
import json
import math
import multiprocessing
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

CRS = "EPSG:32633"
X0, Y1, CELL = 400000.0, 5200000.0, 5.0


def write_rasters(folder: Path, n: int):
    """A smooth DEM and a banded land-cost raster, n x n float32, 256 x 256 deflate tiles."""
    import rasterio
    from rasterio.transform import from_origin
    from rasterio.windows import Window

    prof = dict(driver="GTiff", width=n, height=n, count=1, dtype="float32", crs=CRS,
                transform=from_origin(X0, Y1, CELL, CELL), nodata=-9999.0, tiled=True,
                blockxsize=256, blockysize=256, compress="deflate", zlevel=1, predictor=3,
                BIGTIFF="IF_SAFER")
    dem, cost = folder / "dem.tif", folder / "cost.tif"
    rng = np.random.default_rng(7)
    ph = rng.uniform(0, 6.3, 6)
    step = 256   # rows per write, a multiple of the block height, to keep this small
    with rasterio.open(dem, "w", **prof) as d, rasterio.open(cost, "w", **prof) as c:
        cols = np.arange(n, dtype=np.float64)
        for r0 in range(0, n, step):
            rows = np.arange(r0, min(n, r0 + step), dtype=np.float64)[:, None]
            z = (300 + 40 * np.sin(cols / 700 + ph[0]) * np.cos(rows / 900 + ph[1])
                 + 12 * np.sin(cols / 130 + ph[2]) * np.sin(rows / 170 + ph[3])
                 + 3 * np.cos((cols + rows) / 37 + ph[4]))
            k = 40 + 20 * (np.sin(cols / 300 + ph[5]) > 0.8) + 0 * rows
            k = np.where(np.abs((rows % 2000) - 1000) < 2, 300.0, k)   # road bands
            win = Window(0, r0, n, rows.shape[0])
            d.write(z.astype(np.float32), 1, window=win)
            c.write(k.astype(np.float32), 1, window=win)
    return dem, cost


def delaunay_edges(xy):
    from scipy.spatial import Delaunay

    s = Delaunay(xy).simplices
    e = np.sort(np.concatenate([s[:, [0, 1]], s[:, [1, 2]], s[:, [0, 2]]]), axis=1)
    return np.unique(e, axis=0).astype(np.int64)


def reference(xy, out):
    """scipy Delaunay + numpy lengths + csgraph MST + pyogrio write of the tree links."""
    import geopandas as gpd
    import pyogrio
    import shapely
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import minimum_spanning_tree

    t = time.perf_counter()
    e = delaunay_edges(xy)
    w = np.hypot(*(xy[e[:, 1]] - xy[e[:, 0]]).T)
    mst = minimum_spanning_tree(coo_matrix((w, (e[:, 0], e[:, 1])),
                                           shape=(len(xy), len(xy))).tocsr()).tocoo()
    lines = shapely.linestrings(np.stack([xy[mst.row], xy[mst.col]], axis=1))
    df = gpd.GeoDataFrame({"from_node": mst.row, "to_node": mst.col, "length_m": mst.data},
                          geometry=lines, crs=CRS)
    pyogrio.write_dataframe(df, out, layer="links", driver="GPKG", use_arrow=True)
    return time.perf_counter() - t, float(mst.data.sum())


def child(a):
    """One size in this (fresh) process; prints a JSON line."""
    import mainspan as ms

    n = a.n
    extent = a.cells * CELL
    rng = np.random.default_rng(5)
    xy = np.column_stack([rng.uniform(X0 + 50, X0 + extent - 50, n),
                          rng.uniform(Y1 - extent + 50, Y1 - 50, n)])
    q = np.round(rng.uniform(0.01, 0.05, n), 3)
    role = np.full(n, "demand", dtype=object)
    role[0] = "source"
    q[0] = 0
    sites = ms.sites_from_arrays(xy, crs=CRS, role=role, demand_lps=q)
    kw = dict(terrain=a.dem, land_cost={"base": a.cost},
              weights={"length": 25.0, "climb": 5.0}, system="pressure")
    # warm-up: numba loads its cache (or compiles) on a small copy
    small = ms.sites_from_arrays(xy[:200], crs=CRS, role=role[:200], demand_lps=q[:200])
    ms.plan_layout(small, **kw)
    rss0 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024

    t_ref, ref_total = reference(xy, os.path.join(a.tmp, f"ref_{n}.gpkg"))
    stages = {}
    last = [time.perf_counter(), None]

    def progress(stage, done, total):
        now = time.perf_counter()
        if done == 0 and stage != last[1]:
            if last[1] is not None:
                stages[last[1]] = stages.get(last[1], 0) + now - last[0]
            last[:] = [now, stage]

    t = time.perf_counter()
    lay = ms.plan_layout(sites, progress=progress, **kw)
    stages[last[1]] = stages.get(last[1], 0) + time.perf_counter() - last[0]
    t1 = time.perf_counter()
    lay.write_gpkg(os.path.join(a.tmp, f"plan_{n}.gpkg"), overwrite=True)
    stages["write"] = time.perf_counter() - t1
    t_plan = time.perf_counter() - t
    rss1 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    plain = float(np.asarray(lay.costs.components["length_m"])[lay.links["candidate_index"]].sum())
    print(json.dumps({"n": n, "t_ref": t_ref, "t_plan": t_plan, "stages": stages,
                      "rss_mib": rss1, "rss_before_mib": rss0,
                      "candidates": lay.run_info["n_candidates"], "links": lay.n_links,
                      "cert": str(lay.run_info["certificate_ok"]), "ref_total": ref_total,
                      "plain": plain}))


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="2,000^2 cells, 2,000 and 10,000 sites")
    ap.add_argument("--cells", type=int, default=None)
    ap.add_argument("--sizes", default=None, help="comma-separated site counts")
    ap.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--n", type=int, help=argparse.SUPPRESS)
    ap.add_argument("--dem", help=argparse.SUPPRESS)
    ap.add_argument("--cost", help=argparse.SUPPRESS)
    ap.add_argument("--tmp", help=argparse.SUPPRESS)
    a = ap.parse_args(argv)
    if a.child:
        return child(a)
    cells = a.cells or (2000 if a.quick else 10_000)
    sizes = [int(s) for s in (a.sizes or ("2000,10000" if a.quick else
                                          "10000,100000,1000000")).split(",")]
    print(f"load average at start: {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs (the "
          "machine is shared by several users: absolute times vary; each ratio is one run's)")
    with tempfile.TemporaryDirectory(dir=os.environ.get("TMPDIR")) as tmp:
        proc = multiprocessing.get_context("spawn").Process(target=write_rasters,
                                                            args=(Path(tmp), cells))
        proc.start()
        proc.join()
        dem, cost = Path(tmp) / "dem.tif", Path(tmp) / "cost.tif"
        print(f"rasters: DEM and land cost, {cells:,} x {cells:,} float32 cells of {CELL:g} m")
        rows = []
        for n in sizes:
            out = subprocess.run([sys.executable, __file__, "--child", "--n", str(n), "--cells",
                                  str(cells), "--dem", str(dem), "--cost", str(cost), "--tmp",
                                  tmp], capture_output=True, text=True,
                                 env={**os.environ, "PYTHONPATH": str(ROOT)})
            if out.returncode:
                raise SystemExit(out.stderr[-3000:])
            r = json.loads(out.stdout.strip().splitlines()[-1])
            rows.append(r)
            st = ", ".join(f"{k} {v:.1f}" for k, v in r["stages"].items())
            print(f"\n{n:,} sites: {r['candidates']} candidate links, {r['links']:,} tree links, "
                  f"certificate {r['cert']}")
            print(f"  reference (scipy Delaunay + numpy lengths + csgraph MST + pyogrio write): "
                  f"{r['t_ref']:.2f} s")
            print(f"  mainspan plan_layout (terrain, land cost, pressure design) + write_gpkg: "
                  f"{r['t_plan']:.2f} s  [{st}]")
            print(f"  ratio plan / reference: {r['t_plan'] / r['t_ref']:.2f}x (target <= 2x at "
                  f"100,000); peak RSS {r['rss_mib']:,.0f} MiB")
            print(f"  tree length {r['plain']:,.0f} m vs shortest-tree length {r['ref_total']:,.0f}"
                  f" m ({100 * (r['plain'] / r['ref_total'] - 1):.2f} % longer: the price of the "
                  "ground)")
        if len(rows) >= 2:
            a0, a1 = rows[0], rows[-1]
            k = math.log(a1["n"] / a0["n"])
            print(f"\nend-to-end exponent {a0['n']:,} -> {a1['n']:,} sites: plan "
                  f"{math.log(a1['t_plan'] / a0['t_plan']) / k:.2f}, reference "
                  f"{math.log(a1['t_ref'] / a0['t_ref']) / k:.2f} (target <= 1.1)")


if __name__ == "__main__":
    main()
