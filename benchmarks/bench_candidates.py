"""Speed of build_candidates("delaunay") against scipy's Qhull and shapely's GEOS, in one run.

    python benchmarks/bench_candidates.py              # 1,000,000 uniform random points
    python benchmarks/bench_candidates.py --n 100000 --repeat 3

Every contender starts from the same (n, 2) float64 array in random order and ends with the
Delaunay links as an int64 (m, 2) array of node indices, ``i < j``, sorted and unique:

* baseline: ``scipy.spatial.Delaunay(xy)`` with its default options, links read from
  ``simplices`` and normalised with ``np.unique`` on ``i * n + j``;
* GEOS: ``shapely.delaunay_triangles(multipoints, only_edges=True)`` (time of the
  triangulation only: mapping its line coordinates back to node indices is not counted);
* ours: ``build_candidates(xy)`` (validation, local origin, Hilbert pre-sort, Qhull, links).

The link sets of ours and the baseline are checked to be identical.  Times are medians of
``--repeat`` interleaved runs; ratios are reference time / our time.
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=1_000_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--no-geos", action="store_true", help="skip the shapely/GEOS run")
    a = ap.parse_args(argv)

    import shapely
    from scipy.spatial import Delaunay

    from mainspan.candidates import build_candidates

    rng = np.random.default_rng(a.seed)
    n = a.n
    xy = rng.random((n, 2)) * np.sqrt(n) * 100.0

    def baseline():
        s = Delaunay(xy).simplices.astype(np.int64)
        p = np.concatenate([s[:, [0, 1]], s[:, [1, 2]], s[:, [0, 2]]])
        lo, hi = p.min(axis=1), p.max(axis=1)
        code = np.unique(lo * n + hi)
        return np.stack([code // n, code % n], axis=1)

    def geos():
        return shapely.delaunay_triangles(shapely.multipoints(xy), only_edges=True)

    def ours():
        return build_candidates(xy).edges

    build_candidates(xy[:1000])                      # compile / load the numba kernels
    contenders = [("scipy Delaunay (defaults) + np.unique", baseline),
                  ("build_candidates(xy) (delaunay)", ours)]
    if not a.no_geos:
        contenders.insert(1, ("shapely.delaunay_triangles(only_edges=True)", geos))
    times = {name: [] for name, _ in contenders}
    out = {}
    for _ in range(a.repeat):
        for name, fn in contenders:
            t0 = time.perf_counter()
            out[name] = fn()
            times[name].append(time.perf_counter() - t0)
    t = {k: statistics.median(v) for k, v in times.items()}
    same = np.array_equal(out[contenders[0][0]], out["build_candidates(xy) (delaunay)"])
    ours_t = t["build_candidates(xy) (delaunay)"]
    print(f"{'contender':48s} {'time s':>8s} {'ours faster by':>15s}")
    for name, _ in contenders:
        ratio = t[name] / ours_t
        print(f"{name:48s} {t[name]:8.2f} {ratio:14.2f}x")
    print(f"n = {n:,} points, {len(out['build_candidates(xy) (delaunay)']):,} links; "
          f"identical link sets to the baseline: {same}; median of {a.repeat} runs; "
          "target: < 8 s for 1,000,000 points on 2 cores")


if __name__ == "__main__":
    main()
