"""Speed of min_arborescence against networkx's Edmonds implementation, in one run.

    python benchmarks/bench_arborescence.py                 # n = 250, 500, 1000 nodes, 6 arcs per node
    python benchmarks/bench_arborescence.py --n 2000 --repeat 1

Each case is a random digraph (uniform random arcs, uniform weights) plus a random
Hamiltonian path from the root so that an arborescence exists.  Both contenders get the
same arcs; networkx gets a DiGraph built beforehand (building it is not timed), with arcs
into the root dropped and parallel arcs reduced to the cheapest, so the root is forced.
networkx 3.6's ``minimum_spanning_arborescence`` raises on some graphs that have an
arborescence; then its ``maximum_branching`` on complemented weights is timed instead
(marked ``*``).  Weights are checked equal.  Times are medians of ``--repeat`` runs;
ratio = networkx time / our time.  A final line times ours alone on 10^5 nodes.
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np


def case(rng, n, per_node):
    m = per_node * n
    t = rng.integers(0, n, m)
    h = rng.integers(0, n, m)
    w = rng.random(m)
    perm = rng.permutation(n)
    return np.r_[t, perm[:-1]], np.r_[h, perm[1:]], np.r_[w, 1.0 + rng.random(n - 1)], int(perm[0])


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, nargs="*", default=[250, 500, 1000])
    ap.add_argument("--per-node", type=int, default=6)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--seed", type=int, default=0)
    a = ap.parse_args(argv)

    import networkx as nx

    from mainspan.graph.arborescence import min_arborescence

    rng = np.random.default_rng(a.seed)
    min_arborescence(3, [0, 1], [1, 2], [1.0, 1.0], root=0)  # compile the numba kernels
    print(f"{'nodes':>8} {'arcs':>8} {'ours s':>10} {'networkx s':>11} {'ratio':>8}")
    for n in a.n:
        t, h, w, root = case(rng, n, a.per_node)
        D = nx.DiGraph()
        D.add_nodes_from(range(n))
        for u, v, c in zip(t.tolist(), h.tolist(), w.tolist()):
            if u != v and v != root and (not D.has_edge(u, v) or D[u][v]["weight"] > c):
                D.add_edge(u, v, weight=c)
        C = 1.0 + sum(d["weight"] for *_, d in D.edges(data=True))
        D2 = nx.DiGraph()
        D2.add_nodes_from(D)
        D2.add_weighted_edges_from((u, v, C - d["weight"]) for u, v, d in D.edges(data=True))
        ours, ref = [], []
        fallback = False
        for _ in range(a.repeat):
            t0 = time.perf_counter()
            res = min_arborescence(n, t, h, w, root=root)
            ours.append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            try:
                ref_w = nx.minimum_spanning_arborescence(D).size(weight="weight")
            except nx.NetworkXException:
                fallback = True
                t0 = time.perf_counter()
                B = nx.maximum_branching(D2)
                ref_w = (n - 1) * C - B.size(weight="weight")
            ref.append(time.perf_counter() - t0)
            assert abs(ref_w - res.total_weight) <= 1e-9 * max(1.0, abs(ref_w)), (ref_w, res.total_weight)
        mo, mr = statistics.median(ours), statistics.median(ref)
        print(f"{n:>8} {t.size:>8} {mo:>10.4f} {mr:>10.4f}{'*' if fallback else ' '} {mr / mo:>8.1f}")
    n = 100_000
    t, h, w, root = case(rng, n, a.per_node)
    t0 = time.perf_counter()
    min_arborescence(n, t, h, w, root=root)
    print(f"ours alone, {n} nodes, {t.size} arcs: {time.perf_counter() - t0:.3f} s")


if __name__ == "__main__":
    main()
