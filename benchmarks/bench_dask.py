"""Scenario throughput embedded against 2 local Dask workers, measured in one run.

    python benchmarks/bench_dask.py                     # 1500 sites, 4 scenarios, 30 runs each
    python benchmarks/bench_dask.py --sites 400 --scenarios 2 --runs 10 --prim-n 100000

Prints, all from this run:

* the time of ``run_scenarios`` (shared stages + one tree task per scenario +
  one task per stability run) embedded and on ``--workers`` local worker
  processes, the speed-up (embedded time / workers time) and scenario and
  stability-run throughputs; the cluster's start-up (processes, imports,
  compiled-code cache) is timed apart, as a long-lived cluster pays it once;
* that both give the same summary and stability shares (bit for bit);
* the overhead per task: a task that does nothing, embedded and on the workers;
* measured per-task costs (link costing per link, Prim + certificate per
  tree, one stability run) and Prim's time on a ``--prim-n``-node Delaunay
  graph against scipy's minimum spanning tree in the same run;
* an estimate on paper of a national-scale job (10 M sites, 100 scenarios,
  100 stability runs each) on 2, 16 and 64 workers, from those costs.

The machine is shared: figures are medians of ``--repeat`` interleaved runs.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import textwrap
import time

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))


def _noop(x):
    return x


def _raster(path, arr, x0, y0, cell):
    import rasterio
    from rasterio.transform import from_origin

    with rasterio.open(path, "w", driver="GTiff", height=arr.shape[0], width=arr.shape[1],
                       count=1, dtype="float64", crs="EPSG:32633",
                       transform=from_origin(x0, y0 + arr.shape[0] * cell, cell, cell)) as ds:
        ds.write(arr, 1)


def make_project(d, n_sites, n_scen, seed=0):
    """Sites, a DEM, two land-cost rasters and a project with *n_scen* scenarios."""
    import geopandas as gpd
    import shapely

    rng = np.random.default_rng(seed)
    x0, y0, cell, ncell = 500000.0, 5100000.0, 20.0, 600
    xy = rng.uniform(100, ncell * cell - 100, (n_sites, 2)) + [x0, y0]
    gpd.GeoDataFrame({"id": [f"S{i}" for i in range(n_sites)],
                      "role": ["source"] + ["demand"] * (n_sites - 1)},
                     geometry=shapely.points(xy), crs="EPSG:32633").to_file(
        os.path.join(d, "sites.gpkg"), engine="pyogrio")
    r, c = np.mgrid[0:ncell, 0:ncell]
    _raster(os.path.join(d, "dem.tif"), 300 + 40 * np.sin(r / 40.0) * np.cos(c / 55.0),
            x0, y0, cell)
    land = 5 + 30 * (np.hypot(r - 250, c - 300) < 90) + 0.02 * r
    _raster(os.path.join(d, "land_a.tif"), land, x0, y0, cell)
    _raster(os.path.join(d, "land_b.tif"), land + 50 * ((c > 200) & (c < 230)), x0, y0, cell)
    text = textwrap.dedent("""
        [sites]
        path = "sites.gpkg"
        id_field = "id"
        role_field = "role"
        [rasters]
        terrain = "dem.tif"
        [rasters.land_cost]
        base = "land_a.tif"
        [costs]
        length = 10.0
        land = 1.0
        climb = 8.0
    """)
    for k in range(1, n_scen):
        text += (f"\n[scenarios.s{k}]\ncosts = {{ length = {10.0 + 3 * k}, climb = {8.0 - k} }}\n"
                 + ('rasters = { land_cost = { base = "land_b.tif" } }\n' if k % 2 else ""))
    path = os.path.join(d, "proj.toml")
    with open(path, "w") as f:
        f.write(text)
    return path


def median_time(fn, repeat):
    times, out = [], None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sites", type=int, default=1500)
    ap.add_argument("--scenarios", type=int, default=4, help="base included")
    ap.add_argument("--runs", type=int, default=30, help="stability runs per scenario")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--tasks", type=int, default=200, help="no-op tasks for the overhead")
    ap.add_argument("--prim-n", type=int, default=1_000_000)
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args(argv)

    from mainspan.execution import Embedded, open_engine
    from mainspan.scenarios import run_scenarios

    with tempfile.TemporaryDirectory() as d:
        proj = make_project(d, a.sites, a.scenarios)
        kw = dict(stability_runs=a.runs, perturb_pct=15.0, seed=1)
        emb = Embedded()
        run_scenarios(proj, engine=emb, stability_runs=1)        # warm-up: imports, JIT
        t0 = time.perf_counter()
        eng = open_engine(workers=a.workers)
        t_start = time.perf_counter() - t0
        try:
            t0 = time.perf_counter()
            run_scenarios(proj, engine=eng, stability_runs=1)    # warm-up on the workers
            t_warm = time.perf_counter() - t0
            te, tl, se, sl = [], [], None, None
            for _ in range(a.repeat):                            # interleaved
                t, se = median_time(lambda: run_scenarios(proj, engine=emb, **kw), 1)
                te.append(t)
                t, sl = median_time(lambda: run_scenarios(proj, engine=eng, **kw), 1)
                tl.append(t)
            same = all(np.array_equal(se.results[n].stability, sl.results[n].stability)
                       for n in se.names) and all(
                np.array_equal(np.asarray(se.summary[k]), np.asarray(sl.summary[k]))
                for k in se.summary if np.asarray(se.summary[k]).dtype.kind == "f")
            items = [(i,) for i in range(a.tasks)]
            t_ovl, _ = median_time(lambda: eng.map(_noop, items), a.repeat)
            t_ove, _ = median_time(lambda: emb.map(_noop, items), a.repeat)
        finally:
            eng.close()
        te, tl = statistics.median(te), statistics.median(tl)
        n_scen = len(se.names)
        n_tasks = n_scen * (1 + a.runs)
        n_links = len(se["base"].candidates.edges)
        costs = per_task_costs(proj, se)

    prim = prim_at(a.prim_n)
    print(f"scenario set: {a.sites} sites, {n_links} candidate links, {n_scen} scenarios x "
          f"{a.runs} stability runs = {n_tasks} tasks (+ shared stages)")
    print(f"  embedded            {te:8.2f} s   {n_scen / te:7.2f} scenarios/s  "
          f"{n_scen * a.runs / te:8.1f} runs/s")
    print(f"  {a.workers} local workers     {tl:8.2f} s   {n_scen / tl:7.2f} scenarios/s  "
          f"{n_scen * a.runs / tl:8.1f} runs/s")
    print(f"  speed-up (embedded / {a.workers} workers): {te / tl:.2f}x   same results: {same}")
    print(f"  cluster start {t_start:.1f} s, first run on it (imports, compiled code) "
          f"{t_warm:.1f} s - paid once per cluster")
    print(f"overhead per task ({a.tasks} no-op tasks): {a.workers} workers "
          f"{1e3 * t_ovl / a.tasks:.2f} ms, embedded {1e6 * t_ove / a.tasks:.1f} us")
    print("measured per-task costs (embedded, this machine):")
    print(f"  link costing        {1e6 * costs['cost_per_link']:8.1f} us per link "
          f"(terrain + land, {n_links} links)")
    print(f"  stability run       {1e3 * costs['run']:8.1f} ms ({a.sites} sites)")
    print(f"  Prim + certificate  {1e3 * costs['tree']:8.1f} ms ({a.sites} sites)")
    print(f"  Prim, {a.prim_n:,}-node Delaunay graph: {prim['prim']:.2f} s "
          f"(scipy minimum_spanning_tree {prim['scipy']:.2f} s, same run; ratio "
          f"{prim['prim'] / prim['scipy']:.2f}); {prim['bytes'] / 2**20:.0f} MiB of link arrays")
    national(costs, prim, a.prim_n, t_ovl / a.tasks)


def per_task_costs(proj, sset):
    """Embedded per-task costs measured on the benchmark's project."""
    from mainspan.ground.costs import CostWeights, price_links
    from mainspan.graph.spanning import certify_tree, prim_tree
    from mainspan.scenarios.tasks import stability_task

    base = sset["base"]
    sites, edges = base.sites, base.candidates.edges
    d = os.path.dirname(proj)
    t_cost, _ = median_time(lambda: price_links(
        sites.xy, edges, working_crs=sites.crs, terrain=os.path.join(d, "dem.tif"),
        land_cost=os.path.join(d, "land_a.tif"), weights=CostWeights(climb=8.0)), 3)
    w = base.costs.total
    ok = np.isfinite(w)
    roots = sites.default_roots()

    def tree():
        t = prim_tree(sites.n, edges[ok], w[ok], roots=roots)
        certify_tree(sites.n, edges[ok], w[ok], t)
    t_tree, _ = median_time(tree, 5)
    from mainspan.scenarios.compute import _checked_settings, _prepare, _Workbench
    from mainspan.settings.project import load_project

    pr = load_project(proj)
    bench = _Workbench(lambda *a: None)
    try:
        j = _prepare(pr, "base", _checked_settings(pr, "base"), bench, lambda *a: None)
        t_run, _ = median_time(lambda: stability_task(
            "base", (0,), 1, 15.0, j["sites"], j["cands"].edges, j["terr"], j["land"],
            j["weights"], j["elev"], roots, j["plan"], None), 5)
    finally:
        bench.close()
    return {"cost_per_link": t_cost / len(edges), "tree": t_tree, "run": t_run}


def prim_at(n):
    """Prim (+ nothing else) on an n-node Delaunay graph, and scipy's MST in the same run."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import minimum_spanning_tree

    from mainspan.graph.candidates import build_candidates
    from mainspan.graph.spanning import prim_tree

    rng = np.random.default_rng(0)
    xy = rng.random((n, 2)) * np.sqrt(n) * 100.0
    c = build_candidates(xy, "delaunay")
    e = c.edges
    w = np.hypot(*(xy[e[:, 0]] - xy[e[:, 1]]).T)
    prim_tree(1000, e[(e < 1000).all(1)], w[(e < 1000).all(1)], roots=(0,),
              allow_forest=True)                                       # compile
    t_p, _ = median_time(lambda: prim_tree(n, e, w, roots=(0,), node_order=c.node_order), 3)
    t_s, _ = median_time(lambda: minimum_spanning_tree(
        coo_matrix((w, (e[:, 0], e[:, 1])), shape=(n, n)).tocsr()), 3)
    return {"prim": t_p, "scipy": t_s, "bytes": e.nbytes + w.nbytes + xy.nbytes,
            "links_per_node": len(e) / n}


def national(costs, prim, prim_n, overhead_s, n=10_000_000, scen=100, runs=100):
    """A national-scale job on paper, from the costs measured above."""
    lpn = prim["links_per_node"]
    m = lpn * n
    scale = (n * np.log(n)) / (prim_n * np.log(prim_n))
    t_tree = prim["prim"] * scale * 2.0           # + certificate, about Prim's own time again
    cost_cpu = m * costs["cost_per_link"]         # link costing, once per raster setting
    tree_cpu = scen * (1 + runs) * t_tree
    tasks = scen * (1 + runs) + m / 200_000
    print(f"on paper: {n:,} sites ({m / 1e6:.0f} M links), {scen} scenarios x {runs} stability "
          f"runs (Prim at {n:,} nodes ~ {prim['prim'] * scale:.1f} s, from {prim_n:,} "
          f"scaled by n log n):")
    print(f"  link costing {cost_cpu / 3600:7.2f} CPU-h   trees {tree_cpu / 3600:7.1f} CPU-h   "
          f"task overhead {tasks * overhead_s / 3600:.3f} h")
    for w in (2, 16, 64):
        print(f"  {w:3d} workers: ~{(cost_cpu + tree_cpu) / w / 3600:7.1f} h "
              f"(one tree per task: each worker holds one {n:,}-node job, "
              f"~{prim['bytes'] * n / prim_n / 2**30:.1f} GiB of link arrays)")


if __name__ == "__main__":
    main()
