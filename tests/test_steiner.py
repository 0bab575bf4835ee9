"""Steiner junctions for straight links (mainspan.graph.steiner)."""

import math

import numpy as np
import pytest

from mainspan.graph.corridor import segment_pricer
from mainspan.graph.steiner import add_junctions, fermat_points

UTM = "EPSG:32633"


def _mst(xy):
    import networkx as nx

    G = nx.Graph()
    for i in range(len(xy)):
        for j in range(i + 1, len(xy)):
            G.add_edge(i, j, weight=math.dist(xy[i], xy[j]))
    T = nx.minimum_spanning_tree(G)
    return np.array(sorted(tuple(sorted(e)) for e in T.edges)), T.size(weight="weight")


def test_equilateral_triangle_gives_the_steiner_minimal_tree():
    # side 100: spanning tree 200, Steiner minimal tree 100 sqrt(3) with the junction at the
    # centroid and 120 degree angles (Gilbert & Pollak 1968)
    xy = np.array([[0.0, 0.0], [100.0, 0.0], [50.0, 50.0 * math.sqrt(3)]])
    r = add_junctions(xy, np.array([[0, 1], [0, 2]]), segment_pricer(working_crs=UTM))
    assert r.costs.total.sum() == pytest.approx(100 * math.sqrt(3), rel=0.02)
    assert len(r.junction_xy) == 1
    np.testing.assert_allclose(r.junction_xy[0], xy.mean(axis=0), atol=0.01)
    arms = xy - r.junction_xy[0]
    ang = np.degrees(np.arccos([arms[i] @ arms[j] / np.linalg.norm(arms[i]) /
                                np.linalg.norm(arms[j]) for i, j in ((0, 1), (1, 2), (0, 2))]))
    np.testing.assert_allclose(ang, 120.0, atol=0.1)
    assert r.edges.tolist() == [[0, 3], [1, 3], [2, 3]]


def test_unit_square_within_a_hair_of_one_plus_sqrt3():
    # four corners of a square of side 1: Steiner minimal tree 1 + sqrt(3) (two junctions),
    # against 3 for the spanning tree (Gilbert & Pollak 1968)
    sq = np.array([[0, 0], [100, 0], [100, 100], [0, 100]], float)
    r = add_junctions(sq, np.array([[0, 1], [1, 2], [2, 3]]), segment_pricer(working_crs=UTM))
    assert r.costs.total.sum() == pytest.approx(100 * (1 + math.sqrt(3)), rel=1e-3)
    assert len(r.junction_xy) == 2


@pytest.mark.parametrize("seed", [0, 1])
def test_random_sites_tree_never_dearer_and_above_the_steiner_ratio(seed):
    import networkx as nx

    xy = np.random.default_rng(seed).uniform(0, 1000, (25, 2))
    e, mst = _mst(xy)
    r = add_junctions(xy, e, segment_pricer(working_crs=UTM))
    total = r.costs.total.sum()
    assert total <= mst + 1e-9
    # Steiner ratio: a Steiner tree is at least sqrt(3)/2 of the spanning tree
    # (Du & Hwang 1992, the Gilbert-Pollak conjecture; from memory)
    assert total >= math.sqrt(3) / 2 * mst
    assert total < mst * 0.99                       # junctions pay on random points
    G = nx.Graph(r.edges.tolist())
    assert nx.is_tree(G) and G.number_of_nodes() == 25 + len(r.junction_xy)
    deg = np.bincount(r.edges.ravel())
    assert (deg[25:] == 3).all()                    # every junction joins three links


def test_fermat_point_of_an_obtuse_triangle_is_its_wide_vertex():
    p = fermat_points([[0.0, 0.0]], [[10.0, 0.0]], [[-10.0, 1.0]])
    np.testing.assert_allclose(p, [[0.0, 0.0]])
