"""Speed of prim_tree against scipy and networkx, measured in one run.

    python benchmarks/bench_prim.py            # 1,000,000 nodes vs scipy, 100,000 vs networkx
    python benchmarks/bench_prim.py --n 100000 --nx-n 20000 --repeat 3

Links: the Delaunay triangulation of uniform random points (``build_candidates``), weights
their lengths.  Reference libraries:

* ``scipy.sparse.csgraph.minimum_spanning_tree`` (Kruskal, compiled), timed including the
  conversion of the link list to the CSR matrix it needs, as prim_tree's time includes building
  its adjacency.
* ``networkx.minimum_spanning_tree(G, algorithm="prim")``, timed on a graph already built.

prim_tree is timed with the caller's node indices as they come (random point order: from 20,000
nodes on, prim_tree renumbers them breadth-first itself, and that time is included) and with
``node_order=candidates.node_order`` (the Hilbert-curve layout ``build_candidates`` returns
for memory locality, so the pipeline gets it for free); the time of computing that order
afresh with ``spatial_order(xy)`` is shown on its own and added in the "ordered + order"
row.  Numba
compile time is excluded (warm-up run first).  Times are the median of ``--repeat`` runs,
interleaved so that a busy machine slows every contender alike.
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np


def median_time(fn, repeat):
    times = []
    out = None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=1_000_000, help="nodes for the scipy comparison")
    ap.add_argument("--nx-n", type=int, default=100_000, help="nodes for the networkx one")
    ap.add_argument("--repeat", type=int, default=3, help="runs per timing (median)")
    ap.add_argument("--seed", type=int, default=0)
    a = ap.parse_args(argv)

    import networkx as nx
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import minimum_spanning_tree

    from mainspan.graph.candidates import build_candidates, spatial_order
    from mainspan.graph.spanning import certify_tree, prim_tree

    rng = np.random.default_rng(a.seed)

    def graph(n):
        xy = rng.random((n, 2)) * np.sqrt(n) * 100.0      # about 100 m between neighbours
        c = build_candidates(xy)
        e = c.edges
        d = xy[e[:, 1]] - xy[e[:, 0]]
        return xy, e, np.hypot(d[:, 0], d[:, 1]), c.node_order

    # warm-up: compile (or load from the cache) every kernel once
    xy0, e0, w0, o0 = graph(1000)
    certify_tree(1000, e0, w0, prim_tree(1000, e0, w0, node_order=o0))

    rows = []
    xy, e, w, order = graph(a.n)
    n = a.n

    def run_scipy():
        g = coo_matrix((w, (e[:, 0], e[:, 1])), shape=(n, n)).tocsr()
        return minimum_spanning_tree(g)

    t_ord, order2 = median_time(lambda: spatial_order(xy), a.repeat)
    assert np.array_equal(order, order2)
    ts = {"scipy": [], "prim": [], "prim_ordered": []}
    out = {}
    for _ in range(a.repeat):   # interleaved
        for name, fn in (("scipy", run_scipy), ("prim", lambda: prim_tree(n, e, w)),
                         ("prim_ordered", lambda: prim_tree(n, e, w, node_order=order))):
            t0 = time.perf_counter()
            out[name] = fn()
            ts[name].append(time.perf_counter() - t0)
    t = {k: statistics.median(v) for k, v in ts.items()}
    ref_total = float(out["scipy"].sum())
    assert abs(out["prim"].weight - ref_total) <= 1e-9 * ref_total, "totals differ from scipy"
    assert np.array_equal(out["prim"].parent, out["prim_ordered"].parent)
    t_cert, cert = median_time(lambda: certify_tree(n, e, w, out["prim"]), a.repeat)
    assert cert.ok

    rows.append((f"scipy minimum_spanning_tree (n={n:,}, m={len(e):,})", t["scipy"], 1.0))
    rows.append(("prim_tree, random numbering (renumbered inside)", t["prim"], t["scipy"] / t["prim"]))
    rows.append(("prim_tree, node_order=candidates.node_order", t["prim_ordered"],
                 t["scipy"] / t["prim_ordered"]))
    rows.append(("  spatial_order(xy) alone", t_ord, float("nan")))
    rows.append(("prim_tree ordered + spatial_order", t["prim_ordered"] + t_ord,
                 t["scipy"] / (t["prim_ordered"] + t_ord)))
    rows.append(("certify_tree, random numbering", t_cert, t["scipy"] / t_cert))

    # networkx, smaller graph
    nn = a.nx_n
    xy2, e2, w2, o2 = graph(nn)
    g = nx.Graph()
    g.add_nodes_from(range(nn))
    g.add_weighted_edges_from(zip(e2[:, 0].tolist(), e2[:, 1].tolist(), w2.tolist()))
    t_nx, mst = median_time(lambda: nx.minimum_spanning_tree(g, algorithm="prim"),
                            max(1, min(a.repeat, 2)))
    t_p2, tree2 = median_time(lambda: prim_tree(nn, e2, w2), a.repeat)
    t_p3, tree3 = median_time(lambda: prim_tree(nn, e2, w2, node_order=o2), a.repeat)
    assert abs(tree2.weight - mst.size(weight="weight")) <= 1e-9 * tree2.weight
    assert np.array_equal(tree2.parent, tree3.parent)
    rows.append((f"networkx Prim (n={nn:,}, m={len(e2):,})", t_nx, 1.0))
    rows.append(("prim_tree, caller's order", t_p2, t_nx / t_p2))
    rows.append(("prim_tree, node_order=candidates.node_order", t_p3, t_nx / t_p3))

    print(f"{'contender':56s} {'time s':>9s} {'speed-up':>9s}")
    for name, sec, ratio in rows:
        r = "" if ratio != ratio else f"{ratio:8.2f}x"
        print(f"{name:56s} {sec:9.3f} {r:>9s}")
    print(f"certificate: ok={cert.ok}, {cert.n_checked:,} non-tree links checked, "
          f"worst margin {cert.worst_margin:.3g}")
    import os
    print(f"load average at the end {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs (shared "
          "machine: the reference and ours are interleaved, so both meet the same load)")
    print("speed-up = reference time / our time, reference measured in this run "
          f"(median of {a.repeat}); targets: >= 1.0x scipy, >= 50x networkx")


if __name__ == "__main__":
    main()
