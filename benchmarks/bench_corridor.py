"""Labelled multi-source corridor search against scikit-image's MCP_Geometric.

Prints, in one run, on an N x N grid of random land costs (seeded):

1. :func:`mainspan.ground.search.multi_source_search` from 16 and from 1,000 sites
   (16-connected and 8-connected): time and cells settled per second;
2. the reference: ``skimage.graph.MCP_Geometric(costs, fully_connected=True)
   .find_costs(starts)`` (8-connected, no labels) from the same sites -- cells per
   second, and the ratio (target >= 2x);
3. the peak resident set size of the process after a labelled search on a
   ``--big`` grid (target: 10,000 x 10,000 within 2 GiB), run last and alone.

Usage::

    python benchmarks/bench_corridor.py              # 4,000 x 4,000
    python benchmarks/bench_corridor.py --quick      # 1,000 x 1,000
    python benchmarks/bench_corridor.py --big 10000  # also the 10,000 x 10,000 memory run
"""

from __future__ import annotations

import argparse
import resource
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from mainspan.ground.search import (SearchGrid, StepCosts, bytes_per_cell,  # noqa: E402
                                    multi_source_search)


def _costs(n, conn, rng):
    land = rng.random((n, n), dtype=np.float32)
    land *= 9.0
    land += 1.0
    g = SearchGrid(0.0, float(n), 1.0, n, n)
    return StepCosts(g, land, None, None, np.array([0.0, 0.0, -1.0, 0.0, 0.0, conn]))


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=4000)
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--big", type=int, default=0)
    a = ap.parse_args(argv)
    n = 1000 if a.quick else a.n
    rng = np.random.default_rng(1)
    from skimage.graph import MCP_Geometric

    warm = _costs(50, 16, rng)
    multi_source_search(warm, [0, 99])                        # compile outside the timing
    multi_source_search(_costs(50, 8, rng), [0, 99])
    print(f"grid {n} x {n} = {n * n:,} cells")
    for n_src in (16, 1000):
        src = rng.choice(n * n, n_src, replace=False)
        rc = np.column_stack(np.divmod(src, n))
        for conn in (16, 8):
            sc = _costs(n, conn, np.random.default_rng(2))
            t = time.perf_counter()
            multi_source_search(sc, src)
            dt = time.perf_counter() - t
            ours = n * n / dt
            print(f"  {n_src:5d} sites, {conn:2d}-connected labelled: {dt:7.2f} s  "
                  f"{ours / 1e6:6.2f} M cells/s")
            if conn == 8:
                land = sc.land.astype(np.float64)
                t = time.perf_counter()
                MCP_Geometric(land, fully_connected=True).find_costs([tuple(x) for x in rc])
                dr = time.perf_counter() - t
                ref = n * n / dr
                print(f"  {n_src:5d} sites, skimage MCP_Geometric (8, unlabelled): {dr:7.2f} s  "
                      f"{ref / 1e6:6.2f} M cells/s   ratio 8-connected {ours / ref:5.2f}x")
    if a.big:
        del sc
        b = a.big
        print(f"memory run {b} x {b}: {bytes_per_cell(terrain=False, crossings=False)} B/cell "
              f"expected = {b * b * bytes_per_cell(terrain=False, crossings=False) / 2**30:.2f} GiB")
        sc = _costs(b, 16, np.random.default_rng(3))
        t = time.perf_counter()
        multi_source_search(sc, rng.choice(b * b, 16, replace=False))
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20
        print(f"  labelled 16-connected: {time.perf_counter() - t:.1f} s, peak RSS {peak:.2f} GiB")


if __name__ == "__main__":
    main()
