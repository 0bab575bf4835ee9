"""Tests of mainspan.graph.spanning: Prim trees, forests and the optimality certificate.

Reference implementations outside the project: networkx (``minimum_spanning_tree``, Prim and
Kruskal in pure Python) and scipy (``scipy.sparse.csgraph.minimum_spanning_tree``, Kruskal in
Cython).  The certificate is the cycle property: a spanning tree is minimum iff every non-tree
link is at least as heavy as every tree link on the tree path between its ends (Cormen et al.,
Introduction to Algorithms, 3rd ed., section 23.1; section number from memory).
"""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import minimum_spanning_tree

from mainspan.errors import CertificateError, DisconnectedError, InputError
from mainspan.graph import spanning
from mainspan.graph.spanning import (Certificate, Tree, certify_tree, check_certificate,
                               connected_components, prim_tree)
from mainspan.graph.tree_data import locality_order


# ------------------------------------------------------------------------------------------
# helpers
# ------------------------------------------------------------------------------------------

def nx_graph(n, edges, weights):
    """Simple graph with the lightest of any parallel links (the MST only ever uses it)."""
    g = nx.Graph()
    g.add_nodes_from(range(n))
    for (a, b), w in zip(edges.tolist(), weights.tolist()):
        if np.isinf(w):
            continue
        if not g.has_edge(a, b) or g[a][b]["weight"] > w:
            g.add_edge(a, b, weight=w)
    return g


def nx_total(g):
    return nx.minimum_spanning_tree(g, weight="weight").size(weight="weight")


def scipy_total(n, edges, weights, offset=1.0):
    """scipy's MST total; scipy reads weight 0 as "no link" and sums duplicate entries, so
    keep the lightest parallel link and add ``offset`` to every weight, then take it off
    again once per tree link."""
    g = nx_graph(n, edges, weights)
    if g.number_of_edges() == 0:
        return 0.0
    e = np.array([(a, b) for a, b in g.edges()])
    w = np.array([g[a][b]["weight"] for a, b in g.edges()]) + offset
    mst = minimum_spanning_tree(coo_matrix((w, (e[:, 0], e[:, 1])), shape=(n, n)).tocsr())
    return float(mst.sum()) - offset * mst.nnz


def check_structure(n, edges, tree, roots):
    assert tree.parent.dtype == np.int64 and tree.parent_edge.dtype == np.int64
    assert tree.order.dtype == np.int64 and tree.root_of.dtype == np.int64
    assert tree.n_links == n - len(tree.roots)
    assert np.count_nonzero(tree.parent_edge >= 0) == n - len(tree.roots)
    assert list(tree.roots[:len(roots)]) == list(roots)
    assert sorted(tree.order.tolist()) == list(range(n))
    rank = tree.rank
    assert (rank[tree.order] == np.arange(n)).all()
    assert set(tree.order[:len(tree.roots)].tolist()) == set(tree.roots.tolist())
    for v in range(n):
        p = tree.parent[v]
        if p < 0:
            assert v in tree.roots and tree.parent_edge[v] == -1 and tree.root_of[v] == v
            continue
        assert set(edges[tree.parent_edge[v]].tolist()) == {v, p}
        assert rank[p] < rank[v]                       # a node joins after its parent
        assert tree.root_of[v] == tree.root_of[p]
    # every node climbs to its root (no cycles)
    for v in range(n):
        u, steps = v, 0
        while tree.parent[u] >= 0:
            u = tree.parent[u]
            steps += 1
            assert steps <= n
        assert u == tree.root_of[v]


def tree_from_links(n, edges, link_ids, roots):
    """A Tree over the given link set, rooted at *roots* (built with networkx BFS)."""
    g = nx.Graph()
    g.add_nodes_from(range(n))
    for k in link_ids:
        g.add_edge(*edges[k].tolist(), k=int(k))
    parent = np.full(n, -1, dtype=np.int64)
    parent_edge = np.full(n, -1, dtype=np.int64)
    root_of = np.full(n, -1, dtype=np.int64)
    order = []
    for r in roots:
        root_of[r] = r
        order.append(r)
    for r in roots:
        for a, b in nx.bfs_edges(g, r):
            parent[b] = a
            parent_edge[b] = g[a][b]["k"]
            root_of[b] = r
            order.append(b)
    weight = 0.0
    return parent, parent_edge, np.array(order, dtype=np.int64), root_of, weight


graphs = st.integers(min_value=2, max_value=18).flatmap(
    lambda n: st.tuples(
        st.just(n),
        st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1))
                 .filter(lambda t: t[0] != t[1]), min_size=1, max_size=4 * n),
        st.randoms(use_true_random=False)))


def make_weights(rnd, m, kind):
    if kind == "ties":          # small integer range: many ties, zero weights included
        return np.array([rnd.randint(0, 3) for _ in range(m)], dtype=float)
    return np.array([rnd.random() for _ in range(m)])


# ------------------------------------------------------------------------------------------
# agreement with networkx and scipy
# ------------------------------------------------------------------------------------------

@settings(max_examples=120, deadline=None)
@given(graphs, st.sampled_from(["ties", "float"]))
def test_total_matches_networkx_and_scipy(g, kind):
    n, pairs, rnd = g
    edges = np.array(pairs, dtype=np.int64)
    weights = make_weights(rnd, len(edges), kind)
    ref = nx_graph(n, edges, weights)
    if nx.is_connected(ref):
        tree = prim_tree(n, edges, weights)
        assert list(tree.roots) == [0]
    else:
        with pytest.raises(DisconnectedError):
            prim_tree(n, edges, weights)
        tree = prim_tree(n, edges, weights, allow_forest=True)
        assert len(tree.roots) == nx.number_connected_components(ref)
    # reference: networkx minimum spanning tree/forest (Kruskal), and scipy (Kruskal)
    assert tree.weight == pytest.approx(nx_total(ref), abs=1e-9)
    assert tree.weight == pytest.approx(scipy_total(n, edges, weights), abs=1e-9)
    check_structure(n, edges, tree, [0])
    cert = certify_tree(n, edges, weights, tree)
    assert cert.ok, cert.detail
    assert cert.worst_margin >= 0
    # Prim (networkx's own implementation) agrees too
    assert tree.weight == pytest.approx(
        nx.minimum_spanning_tree(ref, algorithm="prim").size(weight="weight"), abs=1e-9)


@settings(max_examples=80, deadline=None)
@given(graphs, st.sampled_from(["ties", "float"]), st.data())
def test_multiple_roots_match_super_root_mst(g, kind, data):
    n, pairs, rnd = g
    edges = np.array(pairs, dtype=np.int64)
    weights = make_weights(rnd, len(edges), kind)
    roots = data.draw(st.lists(st.integers(0, n - 1), min_size=1, max_size=min(n, 4),
                               unique=True))
    tree = prim_tree(n, edges, weights, roots=roots, allow_forest=True)
    # reference: networkx MST of the graph plus a super-root joined to every root at
    # weight -1, so the super-root links are always taken; take them off again
    ref = nx_graph(n, edges, weights)
    for r in roots:
        ref.add_edge("super", r, weight=-1.0)
    assert tree.weight == pytest.approx(nx_total(ref) + len(roots), abs=1e-9)
    check_structure(n, edges, tree, roots)
    cert = certify_tree(n, edges, weights, tree)
    assert cert.ok, cert.detail
    # each node hangs from a root of its own component
    lab = connected_components(n, edges)
    assert (lab[tree.root_of] == lab).all()


@settings(max_examples=60, deadline=None)
@given(graphs)
def test_node_order_and_link_order_do_not_change_the_result(g):
    n, pairs, rnd = g
    edges = np.array(pairs, dtype=np.int64)
    weights = make_weights(rnd, len(edges), "ties")
    a = prim_tree(n, edges, weights, allow_forest=True)
    b = prim_tree(n, edges, weights, allow_forest=True)
    perm = np.array(rnd.sample(range(n), n), dtype=np.int64)
    c = prim_tree(n, edges, weights, allow_forest=True, node_order=perm)
    # the breadth-first numbering prim_tree uses on its own for large graphs
    bfs = locality_order(n, edges, weights, start=0)
    assert np.array_equal(np.sort(bfs), np.arange(n))
    d = prim_tree(n, edges, weights, allow_forest=True, node_order=bfs)
    for t in (b, c, d):
        for name in ("parent", "parent_edge", "order", "roots", "root_of"):
            assert np.array_equal(getattr(a, name), getattr(t, name)), name
        assert a.weight == t.weight
    # without parallel links the tie-break (weight, lower node, higher node) ignores the
    # order in which links are listed and how each is oriented
    key = np.sort(edges, axis=1)
    _, first = np.unique(key[:, 0] * n + key[:, 1], return_index=True)
    e1, w1 = edges[np.sort(first)], weights[np.sort(first)]
    shuffle = np.array(rnd.sample(range(len(e1)), len(e1)), dtype=np.int64)
    e2 = e1[shuffle][:, ::-1].copy()
    t1 = prim_tree(n, e1, w1, allow_forest=True)
    t2 = prim_tree(n, e2, w1[shuffle], allow_forest=True)
    assert np.array_equal(t1.parent, t2.parent)
    assert np.array_equal(t1.order, t2.order)


@pytest.mark.parametrize("seed", [0, 1])
def test_renumbering_of_large_graphs_keeps_the_tree(monkeypatch, seed):
    """Graphs above LOCALITY_MIN_NODES run in a breadth-first numbering: same arrays as the
    caller's numbering (node_order=identity turns it off), total equal to networkx's."""
    rng = np.random.default_rng(seed)
    n = 600
    # random numbering of a grid-like graph with tied weights, two parts and a parallel link
    pairs = [(i, i + 1) for i in range(n - 1) if (i + 1) % 30 and i != 299]
    pairs += [(i, i + 30) for i in range(n - 30) if not 270 <= i < 300]
    perm = rng.permutation(n)
    edges = perm[np.array(pairs + [pairs[5]], dtype=np.int64)]
    weights = rng.integers(1, 5, len(edges)).astype(float)
    monkeypatch.setattr(spanning, "LOCALITY_MIN_NODES", 0)
    auto = prim_tree(n, edges, weights, roots=(int(perm[0]),), allow_forest=True)
    plain = prim_tree(n, edges, weights, roots=(int(perm[0]),), allow_forest=True,
                      node_order=np.arange(n))
    for name in ("parent", "parent_edge", "order", "roots", "root_of"):
        assert np.array_equal(getattr(auto, name), getattr(plain, name)), name
    assert auto.roots.size == 2
    # networkx (Prim in pure Python) gives the same forest weight
    g = nx_graph(n, edges, weights)
    assert auto.weight == pytest.approx(nx_total(g), rel=1e-12)
    cert = certify_tree(n, edges, weights, auto)
    assert cert.ok and cert.n_checked == len(edges) - (n - 2)


def test_order_is_prims_order_like_networkx():
    # With distinct weights, networkx's Prim (grown from node 0) adds nodes in the same order.
    rng = np.random.default_rng(5)
    n = 40
    g = nx.connected_watts_strogatz_graph(n, 4, 0.3, seed=5)
    edges = np.array(list(g.edges()), dtype=np.int64)
    weights = rng.random(len(edges))
    ref = nx_graph(n, edges, weights)
    added = [v for _, v, _ in nx.algorithms.tree.mst.prim_mst_edges(ref, minimum=True)]
    tree = prim_tree(n, edges, weights)
    assert tree.order.tolist() == [0] + added


# ------------------------------------------------------------------------------------------
# tie-breaking, zero and inf weights
# ------------------------------------------------------------------------------------------

def test_ties_broken_by_lower_then_higher_node_index():
    # a square of equal links 0-1-2-3-0: keys (1,0,1) (1,1,2) (1,2,3) (1,0,3); the largest,
    # (1,2,3), is left out
    edges = np.array([[2, 3], [0, 3], [1, 2], [0, 1]])
    tree = prim_tree(4, edges, np.ones(4))
    assert tree.parent.tolist() == [-1, 0, 1, 0]
    assert tree.order.tolist() == [0, 1, 3, 2]   # (1,0,1) < (1,0,3) < (1,1,2)
    assert tree.parent_edge.tolist() == [-1, 3, 2, 1]


def test_parallel_links_lower_index_wins():
    edges = np.array([[0, 1], [1, 0], [0, 1]])
    tree = prim_tree(2, edges, np.array([2.0, 1.0, 1.0]))
    assert tree.parent_edge.tolist() == [-1, 1]
    cert = certify_tree(2, edges, np.array([2.0, 1.0, 1.0]), tree)
    assert cert.ok and cert.n_checked == 2 and cert.worst_margin == 0.0


def test_zero_and_inf_weights():
    edges = np.array([[0, 1], [1, 2], [0, 2], [2, 3]])
    w = np.array([0.0, 0.0, np.inf, 5.0])
    tree = prim_tree(4, edges, w)
    assert tree.weight == 5.0 and tree.parent.tolist() == [-1, 0, 1, 2]
    cert = certify_tree(4, edges, w, tree)
    assert cert.ok and cert.n_checked == 0 and cert.worst_margin == np.inf
    # an impassable link is absent: here it is the only way to node 3
    w2 = np.array([1.0, 1.0, 1.0, np.inf])
    with pytest.raises(DisconnectedError):
        prim_tree(4, edges, w2)


def test_single_node_and_no_links():
    tree = prim_tree(1, np.zeros((0, 2), dtype=np.int64), np.zeros(0))
    assert tree.parent.tolist() == [-1] and tree.weight == 0.0 and tree.n_links == 0
    assert certify_tree(1, np.zeros((0, 2), dtype=int), np.zeros(0), tree).ok


# ------------------------------------------------------------------------------------------
# certificate
# ------------------------------------------------------------------------------------------

def random_connected(seed, n=30, extra=60):
    rng = np.random.default_rng(seed)
    g = nx.random_labeled_tree(n, seed=seed) if hasattr(nx, "random_labeled_tree") \
        else nx.random_tree(n, seed=seed)
    pairs = set(tuple(sorted(e)) for e in g.edges())
    while len(pairs) < n - 1 + extra:
        a, b = rng.integers(0, n, 2)
        if a != b:
            pairs.add((min(a, b), max(a, b)))
    edges = np.array(sorted(pairs), dtype=np.int64)
    return edges, rng.integers(1, 20, len(edges)).astype(float)


@pytest.mark.parametrize("seed", range(5))
def test_swapped_tree_fails_certificate(seed):
    n = 30
    edges, w = random_connected(seed, n)
    tree = prim_tree(n, edges, w)
    assert certify_tree(n, edges, w, tree).ok
    # swap a tree link f for a strictly heavier non-tree link e whose cycle contains f
    in_tree = set(tree.parent_edge[tree.parent_edge >= 0].tolist())
    g = nx.Graph()
    for k in in_tree:
        g.add_edge(*edges[k].tolist(), k=k)
    for e in range(len(edges)):
        if e in in_tree:
            continue
        path = nx.shortest_path(g, *edges[e].tolist())
        cyc = [g[a][b]["k"] for a, b in zip(path[:-1], path[1:])]
        lighter = [f for f in cyc if w[f] < w[e]]
        if lighter:
            f = lighter[0]
            break
    else:
        pytest.skip("no strictly heavier non-tree link")
    links = (in_tree - {f}) | {e}
    parent, parent_edge, order, root_of, _ = tree_from_links(n, edges, sorted(links), [0])
    wrong = Tree(parent, parent_edge, order, np.array([0]), root_of,
                 float(w[sorted(links)].sum()))
    assert wrong.weight > tree.weight
    cert = certify_tree(n, edges, w, wrong)
    assert not cert.ok and cert.worst_margin < 0
    assert cert.violating_edge == f or w[cert.violating_edge] < w[e]
    with pytest.raises(CertificateError, match=r"link \d+ \(\d+, \d+\)"):
        check_certificate(cert)


def test_structurally_broken_trees_fail():
    n = 30
    edges, w = random_connected(1, n)
    tree = prim_tree(n, edges, w)

    def broken(**changes):
        fields = dict(parent=tree.parent.copy(), parent_edge=tree.parent_edge.copy(),
                      order=tree.order, roots=tree.roots, root_of=tree.root_of,
                      weight=tree.weight)
        fields.update(changes)
        return Tree(**fields)

    v = int(tree.order[5])
    pe = tree.parent_edge.copy()
    pe[v] = (pe[v] + 1) % len(edges)          # a link that does not join v to its parent
    c = certify_tree(n, edges, w, broken(parent_edge=pe))
    assert not c.ok and "parent_edge" in c.detail

    parent = tree.parent.copy()
    parent[v] = -1                              # too few links
    assert not certify_tree(n, edges, w, broken(parent=parent)).ok

    c = certify_tree(n, edges, w, broken(weight=tree.weight + 1.0))
    assert not c.ok and "weight" in c.detail

    # a 2-cycle: v and its parent p point at each other through the link joining them
    v = next(int(u) for u in tree.order if tree.parent[u] >= 0 and tree.parent[tree.parent[u]] >= 0)
    p = int(tree.parent[v])
    parent, pe = tree.parent.copy(), tree.parent_edge.copy()
    parent[p], pe[p] = v, pe[v]
    c = certify_tree(n, edges, w, broken(parent=parent, parent_edge=pe))
    assert not c.ok and "cycle" in c.detail


def test_certificate_between_roots_uses_paths_to_roots():
    # 0 - 1 - 2 - 3 with roots 0 and 3; link (1, 2) joins the two root trees
    edges = np.array([[0, 1], [1, 2], [2, 3]])
    w = np.array([1.0, 2.0, 3.0])
    tree = prim_tree(4, edges, w, roots=(0, 3))
    assert tree.root_of.tolist() == [0, 0, 0, 3]     # 2 joins via (1,2)=2 before (2,3)=3
    cert = certify_tree(4, edges, w, tree)
    # the non-tree link (2,3) of weight 3 against the path 2-1-0 (max 2) and root 3: margin 1
    assert cert.ok and cert.n_checked == 1 and cert.worst_margin == 1.0


def test_check_certificate_passes_ok():
    cert = Certificate(ok=True, n_checked=3, worst_margin=0.0, violating_edge=-1, method="x")
    assert check_certificate(cert) is cert


# ------------------------------------------------------------------------------------------
# errors
# ------------------------------------------------------------------------------------------

def test_bad_weights_name_the_link():
    edges = np.array([[0, 1], [1, 2], [2, 3], [3, 0]])
    with pytest.raises(InputError, match=r"link 2 \(2, 3\) has a NaN weight"):
        prim_tree(4, edges, np.array([1.0, 1.0, np.nan, 1.0]))
    with pytest.raises(InputError, match=r"link 1 \(1, 2\) has a negative"):
        prim_tree(4, edges, np.array([1.0, -0.5, 1.0, 1.0]))
    with pytest.raises(InputError, match="one value per link"):
        prim_tree(4, edges, np.ones(3))


def test_bad_edges_and_roots():
    w = np.ones(2)
    with pytest.raises(InputError, match=r"link 1 \(1, 7\).*outside 0\.\.3"):
        prim_tree(4, np.array([[0, 1], [1, 7]]), w)
    with pytest.raises(InputError, match=r"link 0 \(-1, 1\)"):
        prim_tree(4, np.array([[-1, 1], [1, 2]]), w)
    with pytest.raises(InputError, match=r"link 1 \(2, 2\) joins a node to itself"):
        prim_tree(4, np.array([[0, 1], [2, 2]]), w)
    with pytest.raises(InputError, match=r"shape \(m, 2\)"):
        prim_tree(4, np.array([[0, 1, 2]]), np.ones(1))
    with pytest.raises(InputError, match="integer"):
        prim_tree(4, np.array([[0.0, 1.0]]), np.ones(1))
    edges = np.array([[0, 1], [1, 2]])
    with pytest.raises(InputError, match="root 5"):
        prim_tree(3, edges, w, roots=(5,))
    with pytest.raises(InputError, match="more than once"):
        prim_tree(3, edges, w, roots=(1, 1))
    with pytest.raises(InputError, match="n_nodes"):
        prim_tree(0, edges, w)
    with pytest.raises(InputError, match="node_order"):
        prim_tree(3, edges, w, node_order=[0, 0, 1])


def test_disconnected_lists_components_and_forest_works():
    # components {0,1,2}, {3,4}, {5}, {6,7}
    edges = np.array([[0, 1], [1, 2], [3, 4], [6, 7]])
    w = np.array([1.0, 2.0, 3.0, 4.0])
    with pytest.raises(DisconnectedError) as info:
        prim_tree(8, edges, w)
    msg = str(info.value)
    assert "4 components" in msg and "3 of them reach no root" in msg
    assert "[2 nodes: 3, 4]" in msg and "[1 node: 5]" in msg and "[2 nodes: 6, 7]" in msg
    assert "larger k or max_link_m" in msg and "\n" not in msg
    # labels agree with networkx's connected components (numbered by lowest node)
    g = nx_graph(8, edges, w)
    ref = np.empty(8, dtype=np.int64)
    for i, comp in enumerate(sorted(nx.connected_components(g), key=min)):
        ref[list(comp)] = i
    assert np.array_equal(info.value.components, ref)
    assert np.array_equal(connected_components(8, edges), ref)

    tree = prim_tree(8, edges, w, allow_forest=True)
    assert tree.roots.tolist() == [0, 3, 5, 6]
    assert tree.order[:4].tolist() == [0, 3, 5, 6]
    assert tree.root_of.tolist() == [0, 0, 0, 3, 3, 5, 6, 6]
    assert tree.weight == 10.0 and tree.n_links == 4
    assert certify_tree(8, edges, w, tree).ok
    # the given root need not be node 0
    tree = prim_tree(8, edges, w, roots=(4,), allow_forest=True)
    assert tree.roots.tolist() == [4, 0, 5, 6]
