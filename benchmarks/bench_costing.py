"""Link-costing throughput against rasterio's point-by-point sampling, and a full costing run.

Prints, in one run:

1. a full :func:`mainspan.ground.costs.price_links` run over the Delaunay links of random sites on a
   tiled DEM plus a land-cost raster (generated in a temporary directory): time, terrain
   samples and land-cost cell crossings per second, with peak memory (tracemalloc peak of
   the costing call, and the process's maximum resident set size);
2. the reference: rasterio ``DatasetReader.sample`` reading profile positions of the links
   one by one (nearest-cell values) -- points per second;
3. :meth:`mainspan.ground.surfaces.Surface.sample` on the same positions (bilinear, tile-grouped) --
   samples per second and the ratio to the reference (target >= 100x).

Usage::

    python benchmarks/bench_costing.py            # 10,000 x 10,000 rasters, 100,000 sites
    python benchmarks/bench_costing.py --quick    # 2,000 x 2,000 rasters, 10,000 sites
"""

from __future__ import annotations

import argparse
import resource
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from mainspan.ground.costs import CostWeights, price_links  # noqa: E402
from mainspan.ground.surfaces import open_surface  # noqa: E402

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


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small run (2,000^2 cells, 10,000 sites)")
    ap.add_argument("--cells", type=int, default=None,
                    help="raster side in cells (default 10000, 2000 with --quick)")
    ap.add_argument("--sites", type=int, default=None,
                    help="number of random sites (default 100000, 10000 with --quick)")
    ap.add_argument("--ref-points", type=int, default=20000,
                    help="positions read point by point by rasterio (default 20000)")
    args = ap.parse_args(argv)
    n_cells, n_sites = (2000, 10_000) if args.quick else (10_000, 100_000)
    n_cells = args.cells or n_cells
    n_sites = args.sites or n_sites
    extent = n_cells * CELL

    with tempfile.TemporaryDirectory() as tmp:
        t = time.perf_counter()
        # written by a child process so that this process's peak RSS is the costing's
        import multiprocessing

        child = multiprocessing.get_context("spawn").Process(target=write_rasters,
                                                             args=(Path(tmp), n_cells))
        child.start()
        child.join()
        if child.exitcode != 0:
            raise SystemExit("writing the benchmark rasters failed")
        dem, cost = Path(tmp) / "dem.tif", Path(tmp) / "cost.tif"
        print(f"rasters: {n_cells} x {n_cells} cells of {CELL:g} m, two float32 tiled GeoTIFFs "
              f"written in {time.perf_counter() - t:.1f} s "
              f"({(dem.stat().st_size + cost.stat().st_size) / 2**20:.0f} MiB)")
        rng = np.random.default_rng(1)
        xy = np.column_stack([rng.uniform(X0, X0 + extent, n_sites),
                              rng.uniform(Y1 - extent, Y1, n_sites)])
        t = time.perf_counter()
        edges = delaunay_edges(xy)
        print(f"sites: {n_sites}, Delaunay links: {len(edges)} ({time.perf_counter() - t:.1f} s)")

        p0, p1 = xy[edges[:, 0]], xy[edges[:, 1]]
        d = p1 - p0
        L = np.hypot(d[:, 0], d[:, 1])
        spacing = CELL / 2

        # warm up numba (compiled functions are cached on disk after the first run)
        with open_surface(dem, working_crs=CRS) as s:
            s.sample(xy[:10])
            s.line_integral(p0[:10], p1[:10])
        rss0 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024

        # 1. full costing (first, so the process's peak RSS is the costing's)
        tracemalloc.start()
        t = time.perf_counter()
        with open_surface(dem, working_crs=CRS) as sd, open_surface(cost, working_crs=CRS) as sc:
            lc = price_links(xy, edges, working_crs=CRS, terrain=sd, land_cost=sc,
                             weights=CostWeights(climb=5.0, descent=1.0, steep_slope_pct=10.0,
                                                 steep_per_m=20.0), sample_spacing_m=spacing)
            reads = (sd.n_window_reads, sd._ntr * sd._ntc, sc.n_window_reads, sd.tile_shape)
        t_cost = time.perf_counter() - t
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        rss1 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        total_samples = int((np.maximum(1, np.ceil(L / spacing)) + 1).sum())
        with open_surface(cost, working_crs=CRS) as s:
            off, *_ = s.traverse(p0[:20000], p1[:20000])
        crossings = int(off[-1] * len(edges) / min(20000, len(edges)))
        print(f"\n[mainspan]  price_links: {len(edges):,} links, {L.sum() / 1000:,.0f} km, "
              f"terrain profiles + land-cost integral in {t_cost:.1f} s ({len(edges) / t_cost:,.0f} "
              "links/s)")
        print(f"            {total_samples:,} bilinear terrain samples + ~{crossings:,} land-cost "
              f"cell crossings = {(total_samples + crossings) / t_cost:,.0f} per s")
        print(f"            impassable: {lc.n_impassable}, total cost {lc.total.sum():,.0f}; "
              f"window reads: DEM {reads[0]}, land cost {reads[2]} (tiles of {reads[3][0]}x"
              f"{reads[3][1]}: {reads[1]} per raster)")
        print(f"            memory: tracemalloc peak {peak / 2**20:,.0f} MiB; max RSS "
              f"{rss1:,.0f} MiB (before costing {rss0:,.0f} MiB; a float64 copy of one raster "
              f"would be {n_cells * n_cells * 8 / 2**20:,.0f} MiB)")

        # 2. the same positions: profile stations of the first links, at half a cell
        take = min(total_samples, 10_000_000)
        nst = (np.maximum(1, np.ceil(L / spacing)) + 1).astype(np.int64)
        nl = int(np.searchsorted(np.cumsum(nst), take)) + 1
        owner = np.repeat(np.arange(nl), nst[:nl])
        frac = (np.arange(owner.size) - np.repeat(np.cumsum(nst[:nl]) - nst[:nl], nst[:nl])) \
            / (nst[owner] - 1)
        pts = p0[owner] + frac[:, None] * d[owner]
        del owner, frac

        import rasterio

        k = min(args.ref_points, len(pts))
        ref_pts = [(float(x), float(y)) for x, y in pts[:k]]
        with rasterio.open(dem) as ds:
            t = time.perf_counter()
            ref = np.fromiter((v[0] for v in ds.sample(ref_pts, indexes=1)), float, count=k)
            t_ref = time.perf_counter() - t
        ref_rate = k / t_ref
        print(f"\n[reference] rasterio DatasetReader.sample, the first {k:,} profile positions one "
              f"by one: {t_ref:.2f} s = {ref_rate:,.0f} points/s")
        with open_surface(dem, working_crs=CRS) as s:
            t = time.perf_counter()
            z = s.sample(pts)
            t_s = time.perf_counter() - t
            tiles = s.tile_shape
        # rasterio returns the cell under the point, we interpolate: they differ by the
        # within-cell variation only (a check that both read the same raster)
        assert np.nanmax(np.abs(z[:k] - ref)) < 5.0, np.nanmax(np.abs(z[:k] - ref))
        rate = len(pts) / t_s
        print(f"[mainspan]  Surface.sample (bilinear, tiles {tiles[0]}x{tiles[1]}), {len(pts):,} "
              f"positions: {t_s:.2f} s = {rate:,.0f} samples/s -> {rate / ref_rate:,.0f}x rasterio")
        print(f"[mainspan]  price_links, terrain samples + crossings per s: "
              f"{(total_samples + crossings) / t_cost / ref_rate:,.0f}x rasterio's point rate")

if __name__ == "__main__":
    main()
