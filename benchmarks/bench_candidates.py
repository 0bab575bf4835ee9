"""Speed of build_candidates("delaunay") against scipy's Qhull and shapely's GEOS, in one run.

    python benchmarks/bench_candidates.py              # 1,000,000 uniform random points
    python benchmarks/bench_candidates.py --n 100000 --repeat 3

Every contender starts from the same (n, 2) float64 array in random order and ends with the
Delaunay links as an int64 (m, 2) array of node indices, ``i < j``, sorted and unique:

* baseline: ``scipy.spatial.Delaunay(xy)`` with its default options, links read from
  ``simplices`` and normalised with ``np.unique`` on ``i * n + j``;
* GEOS: ``shapely.delaunay_triangles(multipoints, only_edges=True)`` (time of the
  triangulation only: mapping its line coordinates back to node indices is not counted);
* ours: ``build_candidates(xy)`` (validation, local origin, two halves triangulated in
  parallel by GEOS -- each checked by Euler's formula, Qhull on failure -- an exact merge
  along the cut, links normalised, plus the Hilbert node order).  The split runs only when
  two CPUs are idle at that moment; the rows below also time it with one triangulation and
  with the split forced, so both choices are measured under the same load.

The link sets of ours and the baseline are compared.  Where they differ (nearly cocircular
points, where floating-point triangulators may pick different diagonals), each differing
link is judged with an exact rational in-circle test (Python ``fractions``): a link is
locally Delaunay when, for its two triangles abc and abd, d is not strictly inside the
circle through a, b, c; a triangulation whose links are all locally Delaunay is the
Delaunay triangulation (Delaunay's lemma, Delaunay 1934).  Times are medians of
``--repeat`` interleaved runs; ratios are reference time / our time.
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np


def _exact_locally_delaunay(xy, edges, link):
    """Exact check that *link* (a, b) of the triangulation given by *edges* is locally Delaunay."""
    from fractions import Fraction as Fr

    a, b = (int(v) for v in link)
    nb = {}
    for i, j in edges[(edges[:, 0] == a) | (edges[:, 1] == a) | (edges[:, 0] == b)
                      | (edges[:, 1] == b)].tolist():
        nb.setdefault(i, set()).add(j)
        nb.setdefault(j, set()).add(i)
    common = sorted(nb.get(a, set()) & nb.get(b, set()))
    p = {v: (Fr(float(xy[v, 0])), Fr(float(xy[v, 1]))) for v in [a, b] + common}

    def orient(u, v, w):
        return ((p[v][0] - p[u][0]) * (p[w][1] - p[u][1])
                - (p[v][1] - p[u][1]) * (p[w][0] - p[u][0]))

    def inside(u, v, w, q):  # q strictly inside the circle through u, v, w (ccw)
        if orient(u, v, w) < 0:
            u, v = v, u
        r = [(p[t][0] - p[q][0], p[t][1] - p[q][1]) for t in (u, v, w)]
        r = [(x, y, x * x + y * y) for x, y in r]
        det = (r[0][0] * (r[1][1] * r[2][2] - r[1][2] * r[2][1])
               - r[0][1] * (r[1][0] * r[2][2] - r[1][2] * r[2][0])
               + r[0][2] * (r[1][0] * r[2][1] - r[1][1] * r[2][0]))
        return det > 0

    left = [c for c in common if orient(a, b, c) > 0]
    right = [c for c in common if orient(a, b, c) < 0]
    # checked against every common neighbour on each side (a superset of the two triangles)
    return all(not inside(a, b, c, d) and not inside(a, b, d, c)
               for c in left for d in right)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=1_000_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--no-geos", action="store_true", help="skip the shapely/GEOS run")
    a = ap.parse_args(argv)

    import shapely
    from scipy.spatial import Delaunay

    from mainspan.graph import candidates
    from mainspan.graph.candidates import build_candidates

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

    def ours_one_run():
        saved = candidates._SPLIT_MIN_POINTS
        candidates._SPLIT_MIN_POINTS = 10**18
        try:
            return build_candidates(xy).edges
        finally:
            candidates._SPLIT_MIN_POINTS = saved

    def ours_split():
        saved = candidates._idle_cpus
        candidates._idle_cpus = lambda: 2.0          # as if two cores were idle
        try:
            return build_candidates(xy).edges
        finally:
            candidates._idle_cpus = saved

    build_candidates(xy[:1000])                      # compile / load the numba kernels
    idle = candidates._idle_cpus(0.2)
    print(f"idle CPUs now: {idle:.2f} of {candidates._n_cpus()}: the default "
          f"{'splits' if idle >= 1.5 else 'runs one triangulation'} (it splits only with >= 1.5 idle)")
    contenders = [("scipy Delaunay (defaults) + np.unique", baseline),
                  ("build_candidates(xy) (delaunay)", ours),
                  ("  same, one triangulation (no two-half split)", ours_one_run),
                  ("  same, two-half split forced", ours_split)]
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
    ours_e = out["build_candidates(xy) (delaunay)"]
    base_e = out[contenders[0][0]]
    same = np.array_equal(base_e, ours_e)
    if not same:
        code_o = ours_e[:, 0] * n + ours_e[:, 1]
        code_b = base_e[:, 0] * n + base_e[:, 1]
        only_o = ours_e[~np.isin(code_o, code_b)]
        only_b = base_e[~np.isin(code_b, code_o)]
        ok_o = sum(_exact_locally_delaunay(xy, ours_e, e) for e in only_o[:20])
        ok_b = sum(_exact_locally_delaunay(xy, base_e, e) for e in only_b[:20])
        print(f"link sets differ: {len(only_o)} links only in ours, {len(only_b)} only in the "
              f"baseline; exact in-circle test (first 20): ours {ok_o}/{min(20, len(only_o))} "
              f"locally Delaunay, baseline {ok_b}/{min(20, len(only_b))}")
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
