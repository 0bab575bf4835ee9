"""The optimality certificate must fail on every wrong path maximum.

``certify_tree`` answers path-maximum queries with skew-binary jump pointers; a pointer that
forgets one segment of its jump still certifies most trees.  These tests compare the
certificate, link by link, with path maxima read off networkx tree paths
(``networkx.shortest_path`` on the tree, which is the unique tree path), on trees hundreds
of nodes deep, Delaunay-like graphs and graphs with many equal weights.

The reference is the cycle property: a spanning tree is minimum iff every non-tree link is at
least as heavy as every tree link on the tree path between its ends (Cormen, Leiserson,
Rivest and Stein, Introduction to Algorithms, 3rd ed., MIT Press 2009, section 23.1,
exercise 23.1-5 and theorem 23.1; numbers from memory).  A forest with several roots is the
tree of the graph with a super-root joined to every root by a link of weight -inf.
"""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy.spatial import Delaunay

from mainspan.errors import CertificateError
from mainspan.graph.spanning import Tree, certify_tree, check_certificate, prim_tree

SETTINGS = dict(max_examples=12, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.too_slow])
SUPER = -1  # the super-root's label in the networkx reference graph


# ------------------------------------------------------------------------------------------
# graphs
# ------------------------------------------------------------------------------------------

def _unique_pairs(pairs):
    pairs = np.sort(np.asarray(pairs, dtype=np.int64), axis=1)
    pairs = pairs[pairs[:, 0] != pairs[:, 1]]
    return np.unique(pairs, axis=0)


def path_like(rng, n):
    """A path 0-1-...-n-1 of light links plus chords: the tree is (nearly) the path, so it
    is hundreds of nodes deep and every query climbs many jump pointers."""
    backbone = np.column_stack([np.arange(n - 1), np.arange(1, n)])
    a = rng.integers(0, n, 3 * n)
    span = rng.integers(2, max(3, n // 2), 3 * n)
    chords = np.column_stack([a, np.minimum(a + span, n - 1)])
    e = _unique_pairs(np.vstack([backbone, chords]))
    on_path = e[:, 1] - e[:, 0] == 1
    # integer weights: many ties; the backbone is lighter on the whole but not everywhere
    w = np.where(on_path, rng.integers(1, 12, len(e)), rng.integers(6, 30, len(e)))
    return e, w.astype(float)


def delaunay_like(rng, n):
    """Delaunay links of random points, weights = lengths rounded to whole metres (ties)."""
    xy = rng.uniform(0, 1000, (n, 2))
    tri = Delaunay(xy).simplices
    e = _unique_pairs(np.vstack([tri[:, [0, 1]], tri[:, [1, 2]], tri[:, [0, 2]]]))
    w = np.round(np.hypot(*(xy[e[:, 0]] - xy[e[:, 1]]).T))
    return e, w


def ties_random(rng, n):
    """A random tree plus random links, weights from {1, 2, 3, 4}: ties everywhere."""
    parent = np.array([rng.integers(max(0, v - 4), v) for v in range(1, n)])  # deep-ish
    tree = np.column_stack([parent, np.arange(1, n)])
    extra = rng.integers(0, n, (2 * n, 2))
    e = _unique_pairs(np.vstack([tree, extra]))
    return e, rng.integers(1, 5, len(e)).astype(float)


KINDS = {"path": path_like, "delaunay": delaunay_like, "ties": ties_random}


@st.composite
def graphs(draw, n_min=150, n_max=400):
    kind = draw(st.sampled_from(sorted(KINDS)))
    n = draw(st.integers(n_min, n_max))
    seed = draw(st.integers(0, 2**31 - 1))
    n_roots = draw(st.sampled_from([1, 1, 2, 5]))
    rng = np.random.default_rng(seed)
    e, w = KINDS[kind](rng, n)
    roots = [0] + sorted(set(rng.choice(np.arange(1, n), n_roots - 1, replace=False).tolist()))
    return n, e, w, roots


# ------------------------------------------------------------------------------------------
# networkx reference
# ------------------------------------------------------------------------------------------

def tree_graph(edges, w, links, roots):
    """networkx graph of the tree links plus a super-root tied to each root by -inf."""
    g = nx.Graph()
    for k in links:
        a, b = edges[k].tolist()
        g.add_edge(a, b, k=int(k), w=float(w[k]))
    for r in roots:
        g.add_edge(SUPER, int(r), k=-1, w=-np.inf)
    return g


def cycle_links(g, a, b):
    """Tree links (candidate indices) on the tree path between a and b, super-root skipped."""
    path = nx.shortest_path(g, int(a), int(b))
    ks = [g[x][y]["k"] for x, y in zip(path[:-1], path[1:])]
    return [k for k in ks if k >= 0]


def reference(n, edges, w, links, roots):
    """(n_checked, worst margin, lowest-index violating link) by networkx tree paths."""
    g = tree_graph(edges, w, links, roots)
    g.add_nodes_from(range(n))
    in_tree = np.zeros(len(edges), bool)
    in_tree[list(links)] = True
    worst, bad, checked = np.inf, -1, 0
    for k in range(len(edges)):
        if in_tree[k] or not np.isfinite(w[k]):
            continue
        checked += 1
        ks = cycle_links(g, *edges[k])
        mx = max((w[j] for j in ks), default=-np.inf)
        margin = w[k] - mx
        worst = min(worst, margin)
        if margin < 0 and bad < 0:
            bad = k
    return checked, worst, bad


def tree_from_links(n, edges, w, links, roots):
    """A Tree over the given links, built by breadth-first search (not by Prim)."""
    g = tree_graph(edges, w, links, roots)
    parent = np.full(n, -1, np.int64)
    parent_edge = np.full(n, -1, np.int64)
    root_of = np.full(n, -1, np.int64)
    order = list(roots)
    for r in roots:
        root_of[r] = r
    for a, b in nx.bfs_edges(g, SUPER):
        if a == SUPER:
            continue
        parent[b], parent_edge[b], root_of[b] = a, g[a][b]["k"], root_of[a]
        order.append(b)
    assert len(order) == n, "the links do not span the nodes"
    return Tree(parent=parent, parent_edge=parent_edge, order=np.array(order, np.int64),
                roots=np.array(roots, np.int64), root_of=root_of,
                weight=float(np.sum(w[sorted(links)])))


def depth_of(tree):
    d = np.zeros(tree.n_nodes, np.int64)
    for v in tree.order:
        if tree.parent[v] >= 0:
            d[v] = d[tree.parent[v]] + 1
    return int(d.max())


# ------------------------------------------------------------------------------------------
# tests
# ------------------------------------------------------------------------------------------

@pytest.mark.parametrize("seed", range(3))
def test_deep_path_every_lighter_link_on_a_long_cycle(seed):
    """On a tree 300 nodes deep, one chord spanning most of it; swapping out each of the
    lighter links on its cycle in turn (every position along the path, the heaviest
    included) must be rejected every time and name the link taken out."""
    rng = np.random.default_rng(seed)
    n = 300
    path = np.column_stack([np.arange(n - 1), np.arange(1, n)])
    chord = np.array([[5, n - 7]])
    edges = np.vstack([path, chord])
    w = np.concatenate([rng.integers(1, 50, n - 1), [60]]).astype(float)
    w[rng.integers(5, n - 7)] = 59.0                 # one heaviest lighter link, anywhere
    tree = prim_tree(n, edges, w)
    assert depth_of(tree) == n - 1
    c0 = certify_tree(n, edges, w, tree)
    cyc = np.arange(5, n - 7)                         # path links between 5 and n-7
    assert c0.ok and c0.worst_margin == 60.0 - w[cyc].max() == 1.0
    f = n - 1                                         # the chord's index
    for e in cyc.tolist():
        links = (set(range(n - 1)) - {e}) | {f}
        wrong = tree_from_links(n, edges, w, links, [0])
        cert = certify_tree(n, edges, w, wrong)
        # e is the only non-tree link, so it is the one named, with margin w[e] - 60
        assert not cert.ok and cert.violating_edge == e, e
        assert cert.worst_margin == w[e] - 60.0
        assert cert.n_checked == 1


def test_deep_path_chords_margins_match_networkx_at_every_depth():
    """A 512-node path (so every jump length of the skew-binary scheme occurs) with one
    chord from each node to a node further down: the worst margin must equal networkx's for
    each chord on its own, i.e. every single path-maximum query is right."""
    rng = np.random.default_rng(7)
    n = 512
    path = np.column_stack([np.arange(n - 1), np.arange(1, n)])
    w_path = rng.permutation(n - 1).astype(float)     # distinct, so one answer per query
    tree_links = list(range(n - 1))
    g = tree_graph(path, w_path, tree_links, [0])
    for a in range(0, n - 2, 3):
        b = int(rng.integers(a + 2, n))
        edges = np.vstack([path, [[a, b]]])
        mx = max(w_path[k] for k in cycle_links(g, a, b))    # networkx path maximum
        w = np.concatenate([w_path, [mx + 0.5]])
        tree = tree_from_links(n, edges, w, tree_links, [0])
        cert = certify_tree(n, edges, w, tree)
        assert cert.ok and cert.worst_margin == 0.5, (a, b)
        w[-1] = mx - 0.5                                      # now the tree is not minimum
        tree = tree_from_links(n, edges, w, tree_links, [0])
        cert = certify_tree(n, edges, w, tree)
        assert not cert.ok and cert.violating_edge == n - 1 and cert.worst_margin == -0.5


@settings(**SETTINGS)
@given(graphs())
def test_worst_margin_equals_networkx_path_maxima(g):
    n, edges, w, roots = g
    tree = prim_tree(n, edges, w, roots=roots)
    links = tree.tree_edges
    checked, worst, bad = reference(n, edges, w, links, roots)
    cert = certify_tree(n, edges, w, tree)
    assert bad == -1                                   # Prim's tree is minimum (networkx)
    assert cert.ok and cert.violating_edge == -1 and cert.detail == ""
    assert cert.n_checked == checked
    # exact: the same two floats are subtracted on both sides
    assert cert.worst_margin == worst


@settings(**SETTINGS)
@given(graphs(), st.data())
def test_every_lighter_cycle_link_swapped_out_is_rejected(g, data):
    """Swap a non-tree link f into the minimum tree and take out a tree link e on its cycle.
    If e is strictly lighter the new tree is heavier and must be rejected, naming the
    lowest-index link whose cycle has a heavier tree link (networkx); if e weighs the same
    the new tree is another minimum tree and must be accepted with the same worst margin."""
    n, edges, w, roots = g
    tree = prim_tree(n, edges, w, roots=roots)
    links = set(tree.tree_edges.tolist())
    gt = tree_graph(edges, w, links, roots)
    non_tree = [k for k in range(len(edges)) if k not in links]
    # non-tree links whose cycle climbs far, so that jump pointers are exercised
    f_all = data.draw(st.lists(st.sampled_from(non_tree), min_size=2, max_size=4, unique=True))
    swaps = 0
    for f in f_all:
        cyc = sorted(cycle_links(gt, *edges[f]), key=lambda k: (w[k], k))
        lighter = [k for k in cyc if w[k] < w[f]]
        equal = [k for k in cyc if w[k] == w[f]]
        picks = set()
        if lighter:
            picks.add(lighter[-1])                              # the heaviest lighter link
            picks.add(lighter[0])                               # the lightest
            picks.add(data.draw(st.sampled_from(lighter)))      # and any one
        if equal:
            picks.add(data.draw(st.sampled_from(equal)))
        for e in sorted(picks):
            new_links = (links - {e}) | {f}
            wrong = tree_from_links(n, edges, w, new_links, roots)
            checked, worst, bad = reference(n, edges, w, new_links, roots)
            cert = certify_tree(n, edges, w, wrong)
            assert cert.n_checked == checked
            assert cert.worst_margin == worst
            if w[e] < w[f]:
                swaps += 1
                assert worst <= w[e] - w[f] < 0               # e itself now violates
                assert not cert.ok
                assert cert.violating_edge == bad
                a, b = edges[bad].tolist()
                assert f"link {bad} ({a}, {b})" in cert.detail
                with pytest.raises(CertificateError, match=rf"link {bad} \({a}, {b}\)"):
                    check_certificate(cert)
            else:
                assert cert.ok and cert.violating_edge == -1
                assert wrong.weight == pytest.approx(tree.weight, rel=1e-12)
