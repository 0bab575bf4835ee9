"""Tests of mainspan.graph.constraints: forced and forbidden links.

Outside reference: networkx's minimum spanning tree (Kruskal) on the same graph, with the
forced links given a weight far below every other (so any minimum tree holds them all) and
the forbidden links removed.  That every minimum tree of such a graph holds the forced links
and is minimum among trees containing them is the safe-set argument of Cormen et al.,
Introduction to Algorithms, 3rd ed., section 23.1 (section number from memory).
"""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
from scipy.spatial import Delaunay

from mainspan.errors import DisconnectedError, InputError
from mainspan.graph.constraints import (add_links, constrained_tree, forced_groups, link_pairs,
                                        read_link_layer)
from mainspan.graph.spanning import certify_tree, prim_tree


def delaunay_graph(n, seed):
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0, 1000, (n, 2))
    tri = Delaunay(xy).simplices
    e = np.sort(np.concatenate([tri[:, [0, 1]], tri[:, [1, 2]], tri[:, [0, 2]]]), axis=1)
    e = np.unique(e, axis=0).astype(np.int64)
    w = np.hypot(*(xy[e[:, 0]] - xy[e[:, 1]]).T) * rng.uniform(0.8, 1.5, len(e))
    return xy, e, w


def nx_constrained_total(n, e, w, forced, forbidden):
    """networkx Kruskal with forced links at weight - 1e9 and forbidden links removed."""
    g = nx.Graph()
    g.add_nodes_from(range(n))
    fset, bset = set(forced.tolist()), set(forbidden.tolist())
    for k, (a, b) in enumerate(e.tolist()):
        if k in bset:
            continue
        g.add_edge(a, b, weight=w[k] - (1e9 if k in fset else 0.0), true=w[k])
    t = nx.minimum_spanning_tree(g, weight="weight", algorithm="kruskal")
    return sum(d["true"] for _, _, d in t.edges(data=True))


def check_tree(n, e, tree, roots):
    assert set(tree.roots.tolist()) >= set(roots)
    assert tree.n_links == n - len(tree.roots)
    rank = tree.rank
    for v in range(n):
        p, k = int(tree.parent[v]), int(tree.parent_edge[v])
        if p < 0:
            assert k < 0
            continue
        assert {int(e[k, 0]), int(e[k, 1])} == {v, p}
        assert rank[p] < rank[v]          # parents come first in order


@pytest.mark.parametrize("seed", range(6))
def test_forced_and_forbidden_match_networkx(seed):
    n = 40
    xy, e, w = delaunay_graph(n, seed)
    rng = np.random.default_rng(100 + seed)
    # forced: a random forest (links of a random spanning tree), forbidden: other links
    rt = nx.minimum_spanning_tree(nx.Graph([(int(a), int(b), {"weight": float(x)}) for (a, b), x
                                            in zip(e, rng.uniform(size=len(e)))]))
    tree_links = {tuple(sorted(x)) for x in rt.edges()}
    lookup = {(int(a), int(b)): k for k, (a, b) in enumerate(e)}
    in_rt = np.array(sorted(lookup[x] for x in tree_links))
    forced = rng.choice(in_rt, 8, replace=False)
    others = np.setdiff1d(np.arange(len(e)), in_rt)
    forbidden = rng.choice(others, 10, replace=False)
    tree, cert = constrained_tree(n, e, w, forced=forced, forbidden=forbidden, roots=(0,))
    check_tree(n, e, tree, [0])
    te = set(tree.tree_edges.tolist())
    assert set(forced.tolist()) <= te
    assert not (set(forbidden.tolist()) & te)
    assert cert.ok and "forced" in cert.method
    ref = nx_constrained_total(n, e, w, forced, forbidden)   # networkx Kruskal
    assert tree.weight == pytest.approx(ref, rel=1e-12)
    # forcing links can only cost more than the free minimum tree (networkx again)
    assert tree.weight >= nx_constrained_total(n, e, w, np.array([], int), forbidden) - 1e-9


def test_no_constraints_is_prims_tree():
    n = 60
    _, e, w = delaunay_graph(n, 7)
    ref = prim_tree(n, e, w, roots=(3, 11))
    tree, cert = constrained_tree(n, e, w, roots=(3, 11))
    for a in ("parent", "parent_edge", "order", "roots", "root_of"):
        np.testing.assert_array_equal(getattr(tree, a), getattr(ref, a))
    assert tree.weight == ref.weight and cert.ok
    # an empty forced list and the contraction path agree with Prim's tree link for link
    t2, _ = constrained_tree(n, e, w, roots=(3, 11), forbidden=[], forced=[])
    np.testing.assert_array_equal(t2.parent_edge, ref.parent_edge)


def test_forced_links_in_two_source_forest():
    n = 30
    _, e, w = delaunay_graph(n, 3)
    forced = np.array([0, 5, 9])
    tree, cert = constrained_tree(n, e, w, forced=forced, roots=(0, 29))
    check_tree(n, e, tree, [0, 29])
    assert set(forced.tolist()) <= set(tree.tree_edges.tolist())
    # networkx reference of a forest from two roots: join the roots by a link of weight -2e9
    e2 = np.vstack([e, [[0, 29]]])
    w2 = np.append(w, -2e9)
    ref = nx_constrained_total(n, e2, np.where(np.arange(len(w2)) == len(w), 0.0, w2),
                               np.append(forced, len(w)), np.array([], int))
    assert tree.weight == pytest.approx(ref, rel=1e-12)
    assert cert.ok


def test_certificate_relative_to_forced_links_refutes_a_worse_tree():
    n = 25
    _, e, w = delaunay_graph(n, 5)
    tree, cert = constrained_tree(n, e, w, forced=[2, 3])
    assert cert.ok
    # Prim's free tree is cheaper but the plain certificate refutes the forced tree when a
    # forced link is not in Prim's tree: the cycle property does not hold over all trees
    free = prim_tree(n, e, w)
    if not {2, 3} <= set(free.tree_edges.tolist()):
        assert not certify_tree(n, e, w, tree).ok
        assert tree.weight > free.weight


def test_forced_groups_labels_and_cycle_error():
    e = np.array([[0, 1], [1, 2], [0, 2], [3, 4]])
    np.testing.assert_array_equal(forced_groups(5, e, []), [0, 1, 2, 3, 4])
    np.testing.assert_array_equal(forced_groups(5, e, [1, 3]), [0, 1, 1, 2, 2])
    with pytest.raises(InputError, match=r"cycle a-b-c-a|cycle .*drop one"):
        forced_groups(5, e, [0, 1, 2], node_id=list("abcde"))


def test_errors_name_the_sites():
    e = np.array([[0, 1], [1, 2], [0, 2], [2, 3]])
    w = np.array([1.0, 2.0, np.inf, 0.5])
    ids = ["S", "a", "b", "T"]
    with pytest.raises(InputError, match="a,b is both forced and forbidden"):
        constrained_tree(4, e, w, forced=[1], forbidden=[1], node_id=ids)
    with pytest.raises(InputError, match="forced link S,b is impassable"):
        constrained_tree(4, e, w, forced=[2], node_id=ids)
    with pytest.raises(InputError, match="join the roots S and T"):
        constrained_tree(4, e, w, forced=[0, 1, 3], roots=(0, 3), node_id=ids)
    with pytest.raises(DisconnectedError, match="forbidden") as ei:
        constrained_tree(4, e, w, forbidden=[3], node_id=ids)
    assert ei.value.components.tolist() == [0, 0, 0, 1]


def test_link_pairs_and_add_links():
    ids = ["S", "h1", "h2", "h3"]
    p = link_pairs(ids, ["h2:S", ("h1", "h3"), " h3 , h1 "])
    assert p.tolist() == [[0, 2], [1, 3]]
    with pytest.raises(InputError, match=r"--forbid: site id 'zz'"):
        link_pairs(ids, ["S:zz"], option="--forbid")
    with pytest.raises(InputError, match="two site ids"):
        link_pairs(ids, ["S"])
    with pytest.raises(InputError, match="to itself"):
        link_pairs(ids, ["S,S"])
    e, idx, added = add_links(np.array([[0, 1], [1, 2], [2, 3]]), p)
    assert e.tolist() == [[0, 1], [0, 2], [1, 2], [1, 3], [2, 3]]
    assert e[idx].tolist() == p.tolist() and added.tolist() == [False, True, False, True, False]


@pytest.mark.filterwarnings("ignore:.crs. was not provided")
def test_read_link_layer(tmp_path):
    import geopandas as gpd
    import shapely

    xy = np.array([[0.0, 0.0], [100.0, 0.0], [100.0, 100.0]])
    ids = ["S", "a", "b"]
    path = tmp_path / "force.gpkg"
    lines = [shapely.LineString([(0.3, 0.2), (50, 20), (100, 0.5)]),
             shapely.LineString([(100, 100), (100.4, 0)])]
    gpd.GeoDataFrame(geometry=lines, crs="EPSG:32633").to_file(path)
    assert read_link_layer(path, ids, xy, "EPSG:32633").tolist() == [[0, 1], [1, 2]]
    bad = tmp_path / "far.gpkg"
    gpd.GeoDataFrame(geometry=[shapely.LineString([(0, 0), (90, 0)])],
                     crs="EPSG:32633").to_file(bad)
    with pytest.raises(InputError, match=r"feature 0 ends 10.00 m from the nearest site \(a\)"):
        read_link_layer(bad, ids, xy, "EPSG:32633")
    pts = tmp_path / "pts.gpkg"
    gpd.GeoDataFrame(geometry=[shapely.Point(0, 0)], crs="EPSG:32633").to_file(pts)
    with pytest.raises(InputError, match="expected LineString features, got Point"):
        read_link_layer(pts, ids, xy, "EPSG:32633")
    nocrs = tmp_path / "nocrs.shp"
    gpd.GeoDataFrame(geometry=lines).to_file(nocrs)
    with pytest.raises(InputError, match="has no CRS"):
        read_link_layer(nocrs, ids, xy, "EPSG:32633")
