"""Chu–Liu/Edmonds minimum arborescence against networkx and brute force.

Reference: networkx.algorithms.tree.branchings, an independent implementation
of Edmonds, "Optimum branchings", J. Res. NBS 71B (1967) 233–240.  Our arcs
point away from the root (parent → child) exactly as networkx's
arborescences do, so arcs are passed unchanged; forcing our root is done by
dropping arcs into it, after which it is the only node networkx can use as
the root.
"""

from __future__ import annotations

import itertools

import networkx as nx
import numpy as np
import pytest

from mainspan.graph.arborescence import directional_link_costs, min_arborescence
from mainspan.errors import InputError


def random_digraph(rng, n):
    m = int(rng.integers(n, 4 * n))
    t = rng.integers(0, n, m)
    h = rng.integers(0, n, m)
    w = rng.integers(1, 6, m).astype(float)  # small integers: many ties
    perm = rng.permutation(n)  # a path from the root reaches every node
    t = np.r_[t, perm[:-1]]
    h = np.r_[h, perm[1:]]
    w = np.r_[w, rng.integers(5, 20, n - 1).astype(float)]
    return t, h, w, int(perm[0])


def networkx_graph(n, t, h, w, root):
    D = nx.DiGraph()
    D.add_nodes_from(range(n))
    for a, b, c in zip(t.tolist(), h.tolist(), w.tolist()):
        if a == b or b == root:
            continue
        if not D.has_edge(a, b) or D[a][b]["weight"] > c:
            D.add_edge(a, b, weight=c)
    return D


def networkx_min_weight(D, n):
    """Minimum arborescence weight from networkx.

    networkx 3.6's minimum_spanning_arborescence raised "No minimum spanning
    arborescence" on a few of these graphs that do have one (brute force
    below confirms); there we use its maximum_branching on complemented
    weights C - w (C larger than any total), whose optimum is spanning and
    so a minimum arborescence.
    """
    try:
        return nx.minimum_spanning_arborescence(D).size(weight="weight")
    except nx.NetworkXException:
        C = 1.0 + sum(d["weight"] for *_, d in D.edges(data=True))
        D2 = nx.DiGraph()
        D2.add_nodes_from(D)
        D2.add_weighted_edges_from((a, b, C - d["weight"]) for a, b, d in D.edges(data=True))
        B = nx.maximum_branching(D2)
        assert B.number_of_edges() == n - 1
        return (n - 1) * C - B.size(weight="weight")


def brute_force(n, t, h, w, root):
    incoming = [[k for k in range(t.size) if h[k] == v and t[k] != v] for v in range(n) if v != root]
    best = np.inf
    for combo in itertools.product(*incoming):
        G = nx.DiGraph()
        G.add_nodes_from(range(n))
        G.add_edges_from((int(t[k]), int(h[k])) for k in combo)
        if nx.is_arborescence(G):
            best = min(best, float(w[list(combo)].sum()))
    return best


def check_valid(res, n, t, h, w, root):
    assert res.parent[root] == -1 and res.parent_edge[root] == -1
    others = np.flatnonzero(np.arange(n) != root)
    assert np.all(h[res.parent_edge[others]] == others)
    assert np.all(t[res.parent_edge[others]] == res.parent[others])
    G = nx.DiGraph()
    G.add_nodes_from(range(n))
    G.add_edges_from(zip(res.parent[others].tolist(), others.tolist()))
    assert nx.is_arborescence(G)
    assert res.total_weight == pytest.approx(w[res.parent_edge[others]].sum())


@pytest.mark.parametrize("seed", range(150))
def test_weight_equals_networkx_on_random_digraphs(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(2, 14))
    t, h, w, root = random_digraph(rng, n)
    res = min_arborescence(n, t, h, w, root=root)
    check_valid(res, n, t, h, w, root)
    ref = networkx_min_weight(networkx_graph(n, t, h, w, root), n)
    assert res.total_weight == pytest.approx(ref, abs=1e-9)  # networkx branchings (Edmonds 1967)


@pytest.mark.parametrize("seed", range(30))
def test_weight_equals_brute_force_on_tiny_digraphs(seed):
    rng = np.random.default_rng(1000 + seed)
    n = int(rng.integers(2, 6))
    t, h, w, root = random_digraph(rng, n)
    keep = rng.random(t.size) < 0.6
    keep[-(n - 1):] = True
    t, h, w = t[keep], h[keep], w[keep]
    res = min_arborescence(n, t, h, w, root=root)
    check_valid(res, n, t, h, w, root)
    assert res.total_weight == pytest.approx(brute_force(n, t, h, w, root))  # exhaustive enumeration


def test_larger_random_graph_matches_networkx():
    rng = np.random.default_rng(42)
    n, m = 300, 1800  # networkx is slow beyond a few hundred nodes
    t = rng.integers(0, n, m)
    h = rng.integers(0, n, m)
    w = rng.random(m)
    perm = rng.permutation(n)
    t, h, w = np.r_[t, perm[:-1]], np.r_[h, perm[1:]], np.r_[w, 1 + rng.random(n - 1)]
    res = min_arborescence(n, t, h, w, root=int(perm[0]))
    check_valid(res, n, t, h, w, int(perm[0]))
    ref = networkx_min_weight(networkx_graph(n, t, h, w, int(perm[0])), n)
    assert res.total_weight == pytest.approx(ref, rel=1e-12)


def test_deterministic_tie_break():
    # every arc weight 1: cheapest arc into each node chosen by lower tail, then lower head
    t = np.array([2, 0, 1, 0])
    h = np.array([1, 1, 2, 2])
    res = min_arborescence(3, t, h, np.ones(4), root=0)
    assert res.parent.tolist() == [-1, 0, 0]
    again = min_arborescence(3, t, h, np.ones(4), root=0)
    assert np.array_equal(res.parent_edge, again.parent_edge)


def test_errors():
    with pytest.raises(InputError, match="node 2 cannot be reached"):
        min_arborescence(3, [0], [1], [1.0], root=0)
    with pytest.raises(InputError, match="NaN"):
        min_arborescence(2, [0], [1], [np.nan], root=0)
    with pytest.raises(InputError, match="inf|reached"):
        min_arborescence(2, [0], [1], [np.inf], root=0)
    with pytest.raises(InputError, match="root"):
        min_arborescence(2, [0], [1], [1.0], root=5)


def test_directional_costs_make_the_tree_drain_downhill():
    # three nodes on a slope, outlet 0 at the bottom; 2 is highest
    z = np.array([10.0, 12.0, 14.0])
    edges = np.array([[0, 1], [1, 2], [0, 2]])
    base = np.array([100.0, 100.0, 250.0])
    L = np.array([100.0, 100.0, 200.0])
    d = directional_link_costs(edges, base, L, z, min_slope=0.004, extra_depth_cost_per_m2=20.0)
    # hand: flow 1 -> 0 (arc 0 -> 1) is downhill by 2 m > 0.4 m fall: no extra
    assert d.weights[0] == pytest.approx(100.0)
    # flow 0 -> 1 (arc 1 -> 0) climbs 2 m: extra depth 2 + 0.4 = 2.4 m -> 20 * 100 * 2.4 / 2
    assert d.weights[1] == pytest.approx(100.0 + 2400.0)
    res = min_arborescence(3, d.tails, d.heads, d.weights, root=0)
    assert res.parent.tolist() == [-1, 0, 1]  # 2 drains to 1, 1 drains to 0
    assert d.link[res.parent_edge[1:]].tolist() == [0, 1]


def test_profile_costs_equal_end_point_costs_on_straight_ground():
    # on a straight ground line the profile model reduces to the closed form of
    # directional_link_costs (calc: mean depth below cover = extra_end / 2)
    from mainspan.graph.arborescence import directional_link_costs, profile_directional_costs
    rng = np.random.default_rng(4)
    n, m = 30, 60
    z = rng.uniform(100, 120, n)
    e = np.sort(rng.choice(n, (m, 2), replace=True), axis=1)
    e = e[e[:, 0] != e[:, 1]]
    m = len(e)
    L = rng.uniform(20, 200, m)
    base = rng.uniform(100, 1000, m)
    k = 11
    st = (np.linspace(0, 1, k)[None, :] * L[:, None]).ravel()
    g = (z[e[:, 0]][:, None] + (z[e[:, 1]] - z[e[:, 0]])[:, None] * np.linspace(0, 1, k)).ravel()
    off = np.arange(0, m * k + 1, k)
    a = directional_link_costs(e, base, L, z, min_slope=0.004, extra_depth_cost_per_m2=20.0)
    b = profile_directional_costs(e, base, L, off, st, g, min_slope=0.004,
                                  extra_depth_cost_per_m2=20.0)
    np.testing.assert_allclose(b.weights, a.weights, rtol=1e-9)
    assert np.array_equal(a.tails, b.tails) and np.array_equal(a.heads, b.heads)


def test_profile_costs_price_a_dip_like_brute_force():
    # a stream dip between two sites at equal level: the straight pipe must steepen to keep
    # cover at the dip; brute force over the stations gives the same extra depth
    from mainspan.graph.arborescence import profile_directional_costs
    L = 100.0
    s = np.linspace(0, L, 101)
    g = 50.0 - 2.0 * np.exp(-((s - 30.0) / 5.0) ** 2)
    d = profile_directional_costs([[0, 1]], [0.0], [L], [0, s.size], s, g, min_slope=0.004,
                                  extra_depth_cost_per_m2=1.0)
    for w, (ss, gg) in zip(d.weights, ((L - s[::-1], g[::-1]), (s, g))):
        sl = max(0.004, max((gg[0] - gi) / si for si, gi in zip(ss[1:], gg[1:])))
        depth = gg - gg[0] + sl * ss
        brute = L * max(0.0, np.trapezoid(depth, ss) / L)
        assert w == pytest.approx(brute, rel=1e-9)
    # the dip forces extra depth in both directions
    assert np.all(d.weights > 0)
