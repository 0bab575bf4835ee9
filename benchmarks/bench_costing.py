"""Raster windows and kernels: costing time follows the scheme's extent, sampling near bandwidth.

Prints, in one run:

1. **Job windows.**  A 1,000-site scheme priced (terrain profiles, climb/descent/steep
   prices) over a 20,000 x 20,000 float32 DEM (tiled, deflate; written once to a temporary
   folder), with the sites spread over squares of two sizes.  Each costing runs in a fresh
   process: wall time, peak resident memory (``ru_maxrss``) and the memory ``mainspan check``
   estimates for it.  Time should grow with the scheme's extent (area ratio printed beside the
   time ratio), not with the raster's; target: peak RSS under 400 MiB.
2. **Sampling kernel.**  Bilinear samples at ``--points`` positions inside one window:
   ``open_surface`` + ``Surface.sample`` against the fair reference, ``rasterio`` ``read`` of
   the same window + ``scipy.ndimage.map_coordinates(order=1)`` (both include the read), and
   against the memory bound: a numpy copy of the bytes the kernel must move (positions in,
   values out: 24 bytes a point).
3. **Traversal kernel.**  ``Surface.line_integral`` (exact cell crossings) over the same
   window against a numpy copy of the bytes its crossings occupy (32 bytes a crossing).

Usage::

    python benchmarks/bench_costing.py            # 20,000^2 DEM, 1,000 sites, 10 M points
    python benchmarks/bench_costing.py --quick    # 4,000^2 DEM, 1,000 sites, 1 M points
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from types import SimpleNamespace

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

CRS = "EPSG:32633"
X0, Y1, CELL = 400000.0, 5200000.0, 5.0


def write_dem(path: Path, n: int):
    """A smooth n x n float32 DEM, 512 x 512 deflate tiles, written band by band of rows."""
    import rasterio
    from rasterio.transform import from_origin
    from rasterio.windows import Window

    prof = dict(driver="GTiff", width=n, height=n, count=1, dtype="float32", crs=CRS,
                transform=from_origin(X0, Y1, CELL, CELL), nodata=-9999.0, tiled=True,
                blockxsize=512, blockysize=512, compress="deflate", zlevel=1, predictor=3,
                BIGTIFF="YES")
    cols = np.arange(n, dtype=np.float32)
    a, b = 40 * np.sin(cols / 700), 12 * np.sin(cols / 130)
    with rasterio.open(path, "w", **prof) as d:
        for r0 in range(0, n, 512):
            rows = np.arange(r0, min(n, r0 + 512), dtype=np.float32)[:, None]
            z = 300 + a * np.cos(rows / 900) + b * np.sin(rows / 170) + 0.002 * rows
            d.write(z.astype("float32"), 1, window=Window(0, r0, n, z.shape[0]))


def scheme(n_sites, side_m, seed=1):
    rng = np.random.default_rng(seed)
    return np.column_stack([rng.uniform(X0 + 1000, X0 + 1000 + side_m, n_sites),
                            rng.uniform(Y1 - 1000 - side_m, Y1 - 1000, n_sites)])


def child(args):
    """One costing run in this (fresh) process; prints a JSON line."""
    from mainspan.graph.candidates import build_candidates
    from mainspan.ground.costs import CostWeights, price_links
    from mainspan.ground.surfaces import open_surface
    from mainspan.pipeline.check import _window_bytes

    xy = scheme(args.sites, args.side)
    e = build_candidates(xy).edges
    with open_surface(args.dem, working_crs=CRS) as s:      # warm numba (cached on disk)
        s.focus(xy[:1])                                    # a small window: 512 x 512
        s.sample(xy[:1])
    rss0 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    t = time.perf_counter()
    with open_surface(args.dem, working_crs=CRS) as s:
        lc = price_links(xy, e, working_crs=CRS, terrain=s,
                         weights=CostWeights(climb=5.0, descent=1.0, steep_slope_pct=10.0,
                                             steep_per_m=20.0))
        window, reads = s.window, s.n_window_reads
    dt = time.perf_counter() - t
    rss1 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    raster = _window_bytes(args.dem, SimpleNamespace(crs=CRS, xy=xy), None, "terrain")
    est = 3 * len(xy) * 8 * 24 + len(xy) * 8 * 20 + raster     # the formula check prints
    print(json.dumps({"time_s": dt, "rss_mib": rss1, "rss_before_mib": rss0,
                      "estimate_mib": est / 2**20, "window": list(window), "reads": reads,
                      "links": int(len(e)), "cost": float(np.nansum(lc.total))}))


def run_child(dem, sites, side):
    out = subprocess.run([sys.executable, __file__, "--child", "--dem", str(dem), "--sites",
                          str(sites), "--side", str(side)], capture_output=True, text=True,
                         env={**os.environ, "PYTHONPATH": str(ROOT)})
    if out.returncode:
        raise SystemExit(out.stderr)
    return json.loads(out.stdout.strip().splitlines()[-1])


def timed(fn, repeat=3):
    best, out = np.inf, None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--cells", type=int, help="DEM side in cells (default 20,000; quick 4,000)")
    ap.add_argument("--sites", type=int, default=1000)
    ap.add_argument("--points", type=int, help="sample positions (default 10 M; quick 1 M)")
    ap.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--dem", help=argparse.SUPPRESS)
    ap.add_argument("--side", type=float, help=argparse.SUPPRESS)
    a = ap.parse_args(argv)
    if a.child:
        return child(a)
    n = a.cells or (4000 if a.quick else 20000)
    npts = a.points or (1_000_000 if a.quick else 10_000_000)
    print(f"load average at start: {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs "
          "(the machine is shared: absolute times vary, ratios are from one run)")
    with tempfile.TemporaryDirectory(dir=os.environ.get("TMPDIR")) as tmp:
        dem = Path(tmp) / "dem.tif"
        t = time.perf_counter()
        write_dem(dem, n)
        print(f"DEM: {n:,} x {n:,} float32 cells of {CELL:g} m ({n * n * 4 / 2**30:.1f} GiB as "
              f"float32, {n * n * 8 / 2**30:.1f} GiB as float64; "
              f"{dem.stat().st_size / 2**20:,.0f} MiB on disk), written in "
              f"{time.perf_counter() - t:.0f} s")

        # 1. job windows ------------------------------------------------------------------
        raster_m = n * CELL
        sides = [raster_m / 8, raster_m / 4]
        print(f"\n1. costing {a.sites:,} sites (Delaunay links, terrain profiles at half a cell), "
              "each run in a fresh process")
        print(f"   {'scheme side':>12s} {'links':>7s} {'window (cells)':>16s} {'time s':>7s} "
              f"{'peak RSS MiB':>12s} {'check est. MiB':>14s}")
        res = []
        for side in sides:
            r = run_child(dem, a.sites, side)
            res.append(r)
            w = r["window"]
            print(f"   {side / 1000:>9.1f} km {r['links']:>7,d} {w[2]:>7,d} x {w[3]:<7,d} "
                  f"{r['time_s']:>7.2f} {r['rss_mib']:>12,.0f} {r['estimate_mib']:>14,.0f}   "
                  f"(RSS after imports {r['rss_before_mib']:,.0f} MiB; {r['reads']} read)")
        area = (res[1]["window"][2] * res[1]["window"][3]) / (res[0]["window"][2] *
                                                              res[0]["window"][3])
        print(f"   time ratio {res[1]['time_s'] / res[0]['time_s']:.2f} for a window area ratio "
              f"{area:.2f}; the whole raster is {n * n / (res[0]['window'][2] * res[0]['window'][3]):,.0f}x "
              "the small window")
        print(f"   peak RSS {max(r['rss_mib'] for r in res):,.0f} MiB (target < 400 MiB); "
              "check's estimate covers the data only (add the RSS after imports)")

        # 2. sampling kernel ---------------------------------------------------------------
        import rasterio
        from rasterio.windows import Window
        from scipy.ndimage import map_coordinates

        from mainspan.ground.surfaces import open_surface

        side_c = min(n, 4000)
        rng = np.random.default_rng(2)
        corner = np.array([[X0, Y1 - side_c * CELL], [X0 + side_c * CELL, Y1]])
        # positions as costing makes them: stations every half cell along random links
        per = 400
        m = -(-npts // per)
        a0 = rng.uniform(corner[0] + 1000, corner[1] - 1000, (m, 2))
        a1 = a0 + rng.normal(0, 1.0, (m, 2)) * (per * CELL / 2 / np.sqrt(2))
        f = np.linspace(0.0, 1.0, per)
        xy = (a0[:, None, :] + f[None, :, None] * (a1 - a0)[:, None, :]).reshape(-1, 2)[:npts]
        # at least half a cell inside the crop, where the reference's clamped edge ends
        xy = np.clip(xy, corner[0] + 10, corner[1] - 10)
        with open_surface(dem, working_crs=CRS) as s:       # warm the kernels
            s.focus(corner)
            s.sample(xy[:1000])

        def our_read():
            s = open_surface(dem, working_crs=CRS)
            s.focus(corner)
            s.sample(xy[:1])              # reads the window
            return s

        def ref_read():
            with rasterio.open(dem) as ds:
                return ds.read(1, window=Window(0, 0, side_c, side_c), out_dtype="float32")

        def ref_sample(arr):
            col = (xy[:, 0] - X0) / CELL - 0.5
            row = (Y1 - xy[:, 1]) / CELL - 0.5
            return map_coordinates(arr, [row, col], order=1, mode="nearest")

        t_rr, arr = timed(ref_read)
        t_or, s = timed(our_read)
        t_rs, zr = timed(lambda: ref_sample(arr))
        t_os, z = timed(lambda: s.sample(xy))
        s.close()
        buf = np.empty(npts * 3)
        dst = np.empty_like(buf)
        t_copy, _ = timed(lambda: np.copyto(dst, buf))
        assert np.allclose(z, zr, atol=1e-3), float(np.nanmax(np.abs(z - zr)))
        print(f"\n2. bilinear sampling of {npts:,} profile stations (half a cell apart along "
              f"{m:,} links) in a {side_c:,}^2 window")
        print(f"   {'':44s} {'reference':>10s} {'mainspan':>10s} {'speed-up':>9s}")
        print(f"   {'read the window (rasterio read / focus)':44s} {t_rr:9.3f}s {t_or:9.3f}s "
              f"{t_rr / t_or:8.2f}x")
        print(f"   {'sample (map_coordinates / Surface.sample)':44s} {t_rs:9.3f}s {t_os:9.3f}s "
              f"{t_rs / t_os:8.2f}x")
        print(f"   {'both':44s} {t_rr + t_rs:9.3f}s {t_or + t_os:9.3f}s "
              f"{(t_rr + t_rs) / (t_or + t_os):8.2f}x")
        print(f"   memory bound: numpy copy of the {npts * 24 / 2**20:,.0f} MiB a sample moves "
              f"(24 B: position in, value out) {t_copy:.3f} s -> Surface.sample runs at "
              f"{t_copy / t_os:.2f} of it")

        # 3. traversal kernel --------------------------------------------------------------
        m = max(1000, npts // 200)
        a0 = rng.uniform(corner[0] + 10, corner[1] - 10, (m, 2))
        a1 = np.clip(a0 + rng.normal(0, 400.0, (m, 2)), corner[0] + 10, corner[1] - 10)
        with open_surface(dem, working_crs=CRS) as s:
            s.focus(corner)
            s.line_integral(a0[:10], a1[:10])
            t_tr, _ = timed(lambda: s.line_integral(a0, a1))
            off, *_ = s.traverse(a0, a1)
        nc = int(off[-1])
        b2 = np.empty(nc * 4)
        d2 = np.empty_like(b2)
        t_c2, _ = timed(lambda: np.copyto(d2, b2))
        print(f"\n3. exact traversal (line_integral), {m:,} links, {nc:,} cell crossings")
        print(f"   mainspan Surface.line_integral: {t_tr:.3f} s = {nc / t_tr / 1e6:,.1f} M "
              "crossings/s")
        print(f"   memory bound, numpy copy of {nc * 32 / 2**20:,.0f} MiB (32 B a crossing): "
              f"{t_c2:.3f} s -> the kernel runs at {t_c2 / t_tr:.2f} of it")


if __name__ == "__main__":
    main()
