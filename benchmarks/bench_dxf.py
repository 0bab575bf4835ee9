"""DXF export against the GeoPackage write of the same layout, same run.

    python benchmarks/bench_dxf.py                  # 100,000 sites
    python benchmarks/bench_dxf.py --n 20000        # another size

Random sites over a generated DEM (``bench_plan.write_rasters``: smooth ground, 5 m cells,
float32 tiles) are planned as a pressure network with terrain, so every link carries its
ground profile.  The layout is then written twice in this process: ``Layout.write_gpkg``
(the reference) and :func:`mainspan.writers.dxf.write_dxf` (3D polylines along the thinned
ground, node, access-point and fitting blocks with attributes, labels).  The line gives
both times, the ratio DXF / GeoPackage (target: at most 1.0x), the file sizes, the
process's peak resident memory and how many profile vertices the thinning kept.
"""

from __future__ import annotations

import argparse
import os
import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=100_000, help="sites (default 100,000)")
    ap.add_argument("--cells", type=int, default=2000, help="DEM side in cells of 5 m (default 2,000)")
    a = ap.parse_args(argv)

    import mainspan as ms
    from bench_plan import CELL, CRS, X0, Y1, write_rasters
    from mainspan.writers.dxf import write_dxf

    tmp = Path(tempfile.mkdtemp(prefix="bench_dxf_"))
    dem, _ = write_rasters(tmp, a.cells)
    extent = a.cells * CELL
    rng = np.random.default_rng(5)
    xy = np.column_stack([rng.uniform(X0 + 50, X0 + extent - 50, a.n), rng.uniform(Y1 - extent + 50, Y1 - 50, a.n)])
    q = np.round(rng.uniform(0.01, 0.05, a.n), 3)
    role = np.full(a.n, "demand", dtype=object)
    role[0], q[0] = "source", 0.0
    sites = ms.sites_from_arrays(xy, crs=CRS, role=role, demand_lps=q)
    t = time.perf_counter()
    lay = ms.plan_layout(sites, terrain=str(dem), system="pressure")
    t_plan = time.perf_counter() - t
    small = ms.plan_layout(ms.sites_from_arrays(xy[:200], crs=CRS, role=role[:200], demand_lps=q[:200]),
                           terrain=str(dem), system="pressure")
    write_dxf(small, tmp / "warm.dxf")                       # compile the thinning kernel
    gpkg, dxf = tmp / "plan.gpkg", tmp / "plan.dxf"
    t = time.perf_counter()
    lay.write_gpkg(str(gpkg), overwrite=True)
    t_gpkg = time.perf_counter() - t
    t = time.perf_counter()
    info = write_dxf(lay, str(dxf), by="diameter", overwrite=True)
    t_dxf = time.perf_counter() - t
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"{a.n:,} sites, {lay.n_links:,} links (plan {t_plan:.1f} s): GeoPackage {t_gpkg:.2f} s "
          f"({os.path.getsize(gpkg) / 2**20:.0f} MiB), DXF {t_dxf:.2f} s ({os.path.getsize(dxf) / 2**20:.0f} MiB); "
          f"DXF / GeoPackage {t_dxf / t_gpkg:.2f}x (target <= 1.0x); peak RSS {rss:.0f} MiB; "
          f"profile vertices {info['n_vertices']:,} of {info['n_stations']:,} kept (0.05 m); "
          f"{info['n_structures']:,} structures")


if __name__ == "__main__":
    main()
