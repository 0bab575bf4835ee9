"""Rooted network walks, checked against networkx on random trees."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from mainspan.errors import InputError
from mainspan.graph.network import (
    FLOW_FROM_TO,
    accumulate,
    cost_to_root,
    design_flow_lps,
    hops_to_root,
    longest_path,
    path_to_root,
    rooted_network,
    upstream_nodes,
)


def random_forest(rng, n, n_roots):
    """Random forest as links in random direction; roots are nodes 0..n_roots-1 shuffled."""
    perm = rng.permutation(n)
    roots = perm[:n_roots]
    a, b = [], []
    for i in range(n_roots, n):
        p = perm[rng.integers(0, i)]
        a.append(p)
        b.append(perm[i])
    a, b = np.array(a, np.int64), np.array(b, np.int64)
    flip = rng.random(a.size) < 0.5
    return np.where(flip, b, a), np.where(flip, a, b), roots


@pytest.mark.parametrize("seed", range(8))
def test_orientation_and_walks_match_networkx(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(2, 60))
    n_roots = int(rng.integers(1, min(4, n) + 1))
    a, b, roots = random_forest(rng, n, n_roots)
    net = rooted_network(n, a, b, roots=roots)
    w = rng.random(a.size) * 10
    G = nx.Graph()
    G.add_nodes_from(range(n))
    G.add_weighted_edges_from(zip(a.tolist(), b.tolist(), w.tolist()))
    # reference: networkx shortest paths from each root in its own component
    D = nx.DiGraph()
    D.add_nodes_from(range(n))
    for r in roots:
        hops = nx.single_source_shortest_path_length(G, int(r))
        dist = nx.single_source_dijkstra_path_length(G, int(r))
        for v, h in hops.items():
            assert net.root_of[v] == r
            assert net.hops_to_root[v] == h
        for v, d in dist.items():
            assert cost_to_root(net, w)[v] == pytest.approx(d)
        D.add_edges_from(nx.bfs_edges(G, int(r)))
    # parent and orientation agree with networkx's BFS tree
    for v in range(n):
        preds = list(D.predecessors(v))
        assert net.parent[v] == (preds[0] if preds else -1)
    assert np.all(net.parent[net.to_node] == net.from_node)
    assert np.all(net.reversed == (net.from_node != a))
    # order: roots first, parents before children
    pos = np.empty(n, int)
    pos[net.order] = np.arange(n)
    assert sorted(net.order.tolist()) == list(range(n))
    nonroot = net.parent >= 0
    assert np.all(pos[net.parent[nonroot]] < pos[np.flatnonzero(nonroot)])
    # subtree of each link = networkx descendants of its child (plus the child)
    for k in range(net.n_links):
        c = int(net.to_node[k])
        assert set(upstream_nodes(net, k).tolist()) == nx.descendants(D, c) | {c}
    # paths
    v = int(rng.integers(0, n))
    r = int(net.root_of[v])
    assert path_to_root(net, v).tolist() == nx.shortest_path(G, v, r)
    np.testing.assert_array_equal(hops_to_root(net), net.hops_to_root)


@pytest.mark.parametrize("seed", range(5))
def test_accumulate_conserves_flow_at_every_node(seed):
    rng = np.random.default_rng(100 + seed)
    n = 80
    a, b, roots = random_forest(rng, n, 2)
    net = rooted_network(n, a, b, roots=roots)
    demand = rng.random(n) * 3
    flow = accumulate(net, demand)
    # inflow through the parent link = demand + outflow into child links (pressure);
    # read the other way, outflow = inflow + local inflow (gravity) -- same balance
    inflow = np.zeros(n)
    inflow[net.to_node] = flow
    outflow = np.zeros(n)
    np.add.at(outflow, net.from_node, flow)
    nonroot = net.parent >= 0
    np.testing.assert_allclose(inflow[nonroot], demand[nonroot] + outflow[nonroot])
    # each root delivers the whole demand of its tree except its own
    for r in roots:
        tree = net.root_of == r
        assert outflow[r] == pytest.approx(demand[tree].sum() - demand[r])


def test_accumulate_hand_values_and_design_flow():
    #   0 -> 1 -> 2, 1 -> 3
    net = rooted_network(4, [0, 1, 1], [1, 2, 3], roots=[0])
    flow = accumulate(net, [9.0, 1.0, 2.0, 3.0])
    assert flow.tolist() == [6.0, 2.0, 3.0]
    assert design_flow_lps(flow, peaking_factor=2.0, min_flow_lps=5.0).tolist() == [12.0, 5.0, 6.0]
    assert FLOW_FROM_TO == "from→to"


def test_longest_path_matches_networkx_eccentric_node():
    rng = np.random.default_rng(7)
    a, b, roots = random_forest(rng, 40, 1)
    w = rng.random(a.size) * 100
    net = rooted_network(40, a, b, roots=roots)
    G = nx.Graph()
    G.add_weighted_edges_from(zip(a.tolist(), b.tolist(), w.tolist()))
    dist = nx.single_source_dijkstra_path_length(G, int(roots[0]))
    far = max(dist, key=lambda v: (dist[v], -v))
    path = longest_path(net, w)
    assert path[0] == roots[0] and path[-1] == far
    assert path.tolist() == nx.dijkstra_path(G, int(roots[0]), far)


def test_deep_chain_is_fast_and_correct():
    n = 20000
    net = rooted_network(n, np.arange(n - 1), np.arange(1, n), roots=[0])
    assert net.hops_to_root[-1] == n - 1
    assert accumulate(net, np.ones(n))[0] == n - 1
    assert upstream_nodes(net, n - 2).tolist() == [n - 1]


@pytest.mark.parametrize(
    "args, match",
    [
        ((3, [0, 1, 2], [1, 2, 0], [0]), "links"),  # 3 links for 3 nodes, 1 root
        ((4, [0, 1, 2], [1, 2, 0], [0]), "reached twice"),  # cycle, node 3 separate
        ((4, [0, 2], [1, 3], [0]), "links"),
        ((4, [0, 2, 1], [1, 3, 0], [0]), "reached twice"),  # the same link twice
        ((4, [1, 2, 3], [2, 3, 1], [0]), "not connected"),  # a cycle away from the root
        ((3, [0, 1], [1, 5], [0]), "outside"),
        ((3, [0, 1], [1, 1], [0]), "itself"),
        ((4, [0, 2], [1, 3], [0, 0]), "repeats"),
    ],
)
def test_bad_forests_raise_one_line_errors(args, match):
    n, a, b, roots = args
    with pytest.raises(InputError, match=match) as info:
        rooted_network(n, a, b, roots=roots)
    assert "\n" not in str(info.value)
