"""Tests of mainspan.graph.candidates: candidate link builders and their normalisation.

References outside the project: shapely/GEOS ``delaunay_triangles`` (an independent Delaunay
implementation), scipy ``cdist`` brute-force distances, scipy ``minimum_spanning_tree`` on the
complete distance matrix, and networkx for connectivity.
"""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.sparse.csgraph import minimum_spanning_tree
from scipy.spatial.distance import cdist

from mainspan.graph.candidates import (CANDIDATE_BUILDERS, Candidates, build_candidates,
                                 normalize_edges, spatial_order)
from mainspan.errors import InputError
from mainspan.graph.spanning import prim_tree


def lengths(xy, edges):
    d = xy[edges[:, 1]] - xy[edges[:, 0]]
    return np.hypot(d[:, 0], d[:, 1])


def random_xy(n, seed=0, size=1000.0):
    return np.random.default_rng(seed).random((n, 2)) * size


def is_connected(n, edges):
    g = nx.Graph()
    g.add_nodes_from(range(n))
    g.add_edges_from(edges.tolist())
    return nx.is_connected(g)


# ------------------------------------------------------------------------------------------
# one contract, run against every builder
# ------------------------------------------------------------------------------------------

class BuilderContract:
    """Invariants every builder must meet; subclasses set ``method`` and ``options``."""

    method = "delaunay"
    options: dict = {}
    connects_random = True  # the builder's graph on 200 random points is connected

    def build(self, xy, **kw):
        return build_candidates(xy, self.method, **{**self.options, **kw})

    def test_normalised(self):
        xy = random_xy(200, seed=1)
        c = self.build(xy)
        assert isinstance(c, Candidates)
        e = c.edges
        assert e.dtype == np.int64 and e.ndim == 2 and e.shape[1] == 2 and len(e) > 0
        assert (e[:, 0] < e[:, 1]).all()
        assert (e >= 0).all() and (e < len(xy)).all()
        code = e[:, 0] * len(xy) + e[:, 1]
        assert (np.diff(code) > 0).all()            # lexicographically sorted and unique
        assert c.origin.dtype == np.uint8 and c.origin.shape == (len(e),)
        assert (c.origin != 0).all()
        assert c.origin_names == tuple(self.method.split("+"))
        if self.connects_random:
            assert is_connected(len(xy), e)

    def test_two_points(self):
        c = self.build(np.array([[10.0, 20.0], [13.0, 24.0]]))
        assert c.edges.tolist() == [[0, 1]]

    def test_collinear_points(self):
        t = np.random.default_rng(3).permutation(30).astype(float) * 7.0
        xy = np.stack([5.0 + 3.0 * t, -2.0 + 4.0 * t], axis=1)
        c = self.build(xy)
        order = np.argsort(t)
        path = {tuple(sorted(p)) for p in zip(order[:-1].tolist(), order[1:].tolist())}
        assert path <= set(map(tuple, c.edges.tolist()))
        assert (c.edges[:, 0] < c.edges[:, 1]).all()

    def test_far_from_origin_same_edges(self):
        xy = random_xy(150, seed=2)
        far = xy + np.array([512_345.0, 5_123_456.0])   # UTM-sized easting and northing
        assert np.array_equal(self.build(xy).edges, self.build(far).edges)

    def test_max_link_m_filters(self):
        xy = random_xy(150, seed=4)
        full = self.build(xy, max_link_m=1e6)
        cut = self.build(xy, max_link_m=120.0)
        assert (lengths(xy, cut.edges) <= 120.0).all()
        keep = lengths(xy, full.edges) <= 120.0
        if self.method != "radius":  # radius searches within max_link_m itself
            assert np.array_equal(cut.edges, full.edges[keep])
            assert cut.n_dropped_long == int((~keep).sum())

    def test_deterministic(self):
        xy = random_xy(120, seed=6)
        assert np.array_equal(self.build(xy).edges, self.build(xy).edges)


class TestDelaunay(BuilderContract):
    method = "delaunay"

    def test_matches_independent_delaunay(self):
        # references: scipy's Qhull with its default options, and GEOS (shapely) read as lines
        from scipy.spatial import Delaunay

        xy = random_xy(300, seed=7)
        c = build_candidates(xy)
        s = Delaunay(xy).simplices
        ref = {tuple(sorted(p)) for t in s.tolist() for p in ((t[0], t[1]), (t[1], t[2]),
                                                               (t[0], t[2]))}
        assert set(map(tuple, c.edges.tolist())) == ref
        lines = shapely.get_parts(shapely.delaunay_triangles(shapely.multipoints(xy),
                                                             only_edges=True))
        index = {tuple(p): i for i, p in enumerate(xy.tolist())}
        geos = set()
        for line in lines:
            a, b = shapely.get_coordinates(line).tolist()
            i, j = index[tuple(a)], index[tuple(b)]
            geos.add((min(i, j), max(i, j)))
        assert geos == ref

    def test_backends_agree_and_geos_check_refuses_doubtful_input(self):
        from mainspan.graph.candidates import _geos, _qhull

        xy = random_xy(2000, seed=14)
        idx = np.arange(len(xy))
        g, q = _geos(xy, idx), _qhull(xy, idx)
        assert g is not None
        assert np.array_equal(g[0][np.lexsort(g[0].T[::-1])], q[0][np.lexsort(q[0].T[::-1])])
        assert np.array_equal(g[1], q[1])
        # coincident points and points along a hull edge are left to Qhull
        assert _geos(np.concatenate([xy, xy[:1]]), np.arange(len(xy) + 1)) is None
        i, j = np.meshgrid(np.arange(10), np.arange(10))
        grid = np.stack([i.ravel(), j.ravel()], 1) * 10.0 + random_xy(100, 3, 1.0)
        grid[:10, 1] = 0.0                           # ten points on one straight hull edge
        assert _geos(grid, np.arange(100)) is None
        assert is_connected(100, build_candidates(grid).edges)

    def test_duplicate_points_are_linked(self):
        xy = random_xy(50, seed=8)
        xy = np.concatenate([xy, xy[[3, 10]]])     # two points repeated exactly
        c = build_candidates(xy)
        assert is_connected(len(xy), c.edges)
        assert [3, 50] in c.edges.tolist() and [10, 51] in c.edges.tolist()

    def test_all_points_identical(self):
        c = build_candidates(np.full((4, 2), 7.0), k=1)
        assert is_connected(4, c.edges)


class TestKnn(BuilderContract):
    method = "knn"
    options = {"k": 4}
    connects_random = False

    def test_contains_every_nearest_neighbours(self):
        xy = random_xy(200, seed=9)
        c = build_candidates(xy, "knn", k=3)
        links = set(map(tuple, c.edges.tolist()))
        # reference: brute-force distances (scipy cdist)
        d = cdist(xy, xy)
        np.fill_diagonal(d, np.inf)
        near = np.argsort(d, axis=1)[:, :3]
        for i in range(len(xy)):
            for j in near[i]:
                assert (min(i, j), max(i, j)) in links
        # symmetric union: no more than n*k links, at least n*k/2
        assert len(xy) * 3 / 2 <= c.n_links <= len(xy) * 3


class TestRadius(BuilderContract):
    method = "radius"
    options = {"max_link_m": 150.0}

    def test_two_points(self):
        c = build_candidates(np.array([[10.0, 20.0], [13.0, 24.0]]), "radius", max_link_m=5.0)
        assert c.edges.tolist() == [[0, 1]]

    def test_collinear_points(self):
        self.options = {"max_link_m": 8.0 * 5.0}   # consecutive points are 35 m apart
        super().test_collinear_points()

    def test_all_pairs_within_radius(self):
        xy = random_xy(150, seed=10)
        c = build_candidates(xy, "radius", max_link_m=100.0)
        i, j = np.triu_indices(len(xy), 1)
        d = cdist(xy, xy)[i, j]     # reference: brute force
        assert np.array_equal(c.edges, np.stack([i, j], 1)[d <= 100.0])

    def test_needs_max_link_m(self):
        with pytest.raises(InputError, match="radius.*max_link_m"):
            build_candidates(random_xy(10), "radius")


class TestComplete(BuilderContract):
    method = "complete"

    def test_all_pairs(self):
        c = build_candidates(random_xy(20), "complete")
        assert c.n_links == 20 * 19 // 2

    def test_refuses_large_n(self):
        with pytest.raises(InputError) as info:
            build_candidates(random_xy(101), "complete", max_complete_nodes=100)
        msg = str(info.value)
        assert "n = 101" in msg and "5050 links" in msg and "max_complete_nodes=100" in msg


class TestUnion(BuilderContract):
    method = "delaunay+knn"
    options = {"k": 3}

    def test_origin_bits(self):
        xy = random_xy(200, seed=11)
        u = build_candidates(xy, "delaunay+knn", k=3)
        d = build_candidates(xy, "delaunay")
        k = build_candidates(xy, "knn", k=3)
        code = u.edges[:, 0] * 200 + u.edges[:, 1]
        in_d = np.isin(code, d.edges[:, 0] * 200 + d.edges[:, 1])
        in_k = np.isin(code, k.edges[:, 0] * 200 + k.edges[:, 1])
        assert (in_d | in_k).all()
        assert np.array_equal(u.origin & 1 != 0, in_d)
        assert np.array_equal(u.origin & 2 != 0, in_k)
        assert np.array_equal(u.proposed_by("knn"), in_k)
        assert u.n_links == len(np.union1d(d.edges[:, 0] * 200 + d.edges[:, 1],
                                           k.edges[:, 0] * 200 + k.edges[:, 1]))
        assert u.method == "delaunay+knn"


# ------------------------------------------------------------------------------------------
# Euclidean minimum spanning tree
# ------------------------------------------------------------------------------------------

@pytest.mark.parametrize("seed", range(6))
def test_emst_lies_in_delaunay(seed):
    # Shamos & Hoey, "Closest-point problems", 16th IEEE FOCS, 1975: the Euclidean MST is a
    # subgraph of the Delaunay triangulation
    xy = random_xy(80, seed=seed)
    d = build_candidates(xy, "delaunay")
    c = build_candidates(xy, "complete")
    td = prim_tree(len(xy), d.edges, lengths(xy, d.edges))
    tc = prim_tree(len(xy), c.edges, lengths(xy, c.edges))
    assert td.weight == pytest.approx(tc.weight, rel=1e-12)
    # reference: scipy's Kruskal on the full distance matrix
    assert td.weight == pytest.approx(minimum_spanning_tree(cdist(xy, xy)).sum(), rel=1e-12)
    # random coordinates have no tied lengths: the same links
    pairs_d = {tuple(d.edges[k]) for k in td.parent_edge[td.parent_edge >= 0]}
    pairs_c = {tuple(c.edges[k]) for k in tc.parent_edge[tc.parent_edge >= 0]}
    assert pairs_d == pairs_c
    # standard EMST property: in the plane no vertex has more than 6 tree links
    deg = np.bincount(np.concatenate([td.parent[td.parent >= 0], np.flatnonzero(td.parent >= 0)]),
                      minlength=len(xy))
    assert deg.max() <= 6


def test_emst_max_degree_on_a_lattice():
    # a hexagonal lattice lets a vertex reach the bound of 6 equal nearest neighbours
    # (standard EMST property); the tie-break must still keep the degree <= 6
    i, j = np.meshgrid(np.arange(9), np.arange(9))
    xy = np.stack([(i + 0.5 * (j % 2)).ravel(), (j * np.sqrt(3) / 2).ravel()], 1) * 10.0
    c = build_candidates(xy, "delaunay")
    t = prim_tree(len(xy), c.edges, lengths(xy, c.edges))
    deg = np.bincount(np.concatenate([t.parent[t.parent >= 0], np.flatnonzero(t.parent >= 0)]))
    assert deg.max() <= 6
    ref = minimum_spanning_tree(cdist(xy, xy)).sum()   # scipy Kruskal, complete graph
    assert t.weight == pytest.approx(ref, rel=1e-9)


# ------------------------------------------------------------------------------------------
# normalisation, ordering, validation
# ------------------------------------------------------------------------------------------

@settings(max_examples=60, deadline=None)
@given(st.integers(1, 40).flatmap(
    lambda n: st.tuples(st.just(n), st.lists(st.tuples(st.integers(0, n - 1),
                                                       st.integers(0, n - 1)), max_size=120))))
def test_normalize_edges_matches_encode_unique(case):
    n, pairs = case
    e = np.array(pairs, dtype=np.int64).reshape(-1, 2)
    got = normalize_edges(e, n)
    lo, hi = np.minimum(e[:, 0], e[:, 1]), np.maximum(e[:, 0], e[:, 1])
    code = np.unique((lo * n + hi)[lo != hi])      # reference: encode i*n+j, np.unique
    assert np.array_equal(got, np.stack([code // n, code % n], 1).reshape(-1, 2))


def test_spatial_order_is_a_local_permutation():
    xy = random_xy(2000, seed=12)
    o = spatial_order(xy)
    assert sorted(o.tolist()) == list(range(2000))
    step = np.hypot(*np.diff(xy[o], axis=0).T).mean()
    assert step < 0.2 * np.hypot(*np.diff(xy, axis=0).T).mean()


@pytest.mark.parametrize("kwargs, match", [
    ({"k": 0}, "k .* integer >= 1"),
    ({"k": 2.5}, "k .* integer >= 1"),
    ({"k": True}, "k .* integer >= 1"),
    ({"max_link_m": -1.0}, "max_link_m"),
    ({"max_link_m": float("inf")}, "max_link_m"),
    ({"max_link_m": "far"}, "max_link_m"),
    ({"method": "delaunay+voronoi"}, "unknown candidate builder 'voronoi'.*valid names are: "
                                     "complete, delaunay, knn, radius"),
    ({"method": ""}, "method"),
])
def test_bad_options(kwargs, match):
    with pytest.raises(InputError, match=match):
        build_candidates(random_xy(10), **kwargs)


def test_bad_coordinates():
    with pytest.raises(InputError, match="at least 2 sites"):
        build_candidates(np.zeros((1, 2)))
    with pytest.raises(InputError, match=r"shape \(n, 2\)"):
        build_candidates(np.zeros((5, 3)))
    xy = random_xy(5)
    xy[3, 1] = np.nan
    with pytest.raises(InputError, match="site 3 has a non-finite coordinate"):
        build_candidates(xy)


def test_builders_are_registered():
    assert set(CANDIDATE_BUILDERS.names()) >= {"delaunay", "knn", "radius", "complete"}


# ------------------------------------------------------------------------------------------
# the two-half parallel Delaunay must give the same links as one Qhull run
# ------------------------------------------------------------------------------------------

def test_split_delaunay_only_when_two_cores_are_idle(monkeypatch):
    import os

    from scipy.spatial import ConvexHull

    from mainspan.graph import candidates

    calls = []
    monkeypatch.setattr(candidates, "_n_cpus", lambda: 2)
    monkeypatch.setattr(candidates, "_qhull_split", lambda xy: calls.append(len(xy)))
    xy = np.random.default_rng(3).random((300, 2)) * 1000.0
    for idle, split in ((0.9, False), (1.4, False), (1.6, True)):
        calls.clear()
        monkeypatch.setattr(candidates, "_idle_cpus", lambda idle=idle: idle)
        e = candidates.delaunay_links(xy, split_min_points=8)
        assert bool(calls) == split, idle
        # one Qhull run either way here (the stub merge declines): 3n - 3 - h links, each
        # triangle's three (Euler's formula for a triangulation)
        assert len(normalize_edges(e, len(xy))) == 3 * len(xy) - 3 - len(ConvexHull(xy).vertices)
    assert 0.0 <= candidates._idle_cpus(0.01) <= (os.cpu_count() or 1) + 1e-9


@pytest.mark.parametrize("case", ["uniform", "clustered", "grid", "grid_jittered"])
def test_split_delaunay_equals_single_run(case, monkeypatch):
    from mainspan.graph import candidates, triangulation
    from mainspan.graph.candidates import _qhull_split, delaunay_links

    rng = np.random.default_rng(13)
    if case == "uniform":
        xy = rng.random((2000, 2)) * 5000.0
    elif case == "clustered":
        centres = rng.random((8, 2)) * 5000.0
        xy = centres[rng.integers(0, 8, 2000)] + rng.normal(0.0, 60.0, (2000, 2))
    else:   # a square grid: every cell is cocircular, the merge must fall back or agree
        i, j = np.meshgrid(np.arange(45), np.arange(40))
        xy = np.stack([i.ravel(), j.ravel()], 1) * 25.0
        if case == "grid_jittered":
            xy = xy + rng.normal(0.0, 1.0, xy.shape)
    n = len(xy)
    monkeypatch.setattr(candidates, "_idle_cpus", lambda: 2.0)   # as if two cores were free
    one = normalize_edges(delaunay_links(xy, split_min_points=10**12), n)
    two = normalize_edges(delaunay_links(xy, split_min_points=8), n)
    monkeypatch.setattr(triangulation, "_BACKEND", "qhull")
    three = normalize_edges(delaunay_links(xy, split_min_points=8), n)
    if case != "grid":
        assert _qhull_split(xy) is not None      # the merge is confirmed on general input
        assert np.array_equal(one, two)
        assert np.array_equal(one, three)
    # both are triangulations that hold a Euclidean MST (Shamos & Hoey 1975); reference
    # total from scipy's Kruskal on the full distance matrix
    ref = minimum_spanning_tree(cdist(xy, xy)).sum()
    for e in (one, two, three):
        t = prim_tree(n, e, lengths(xy, e))
        assert t.weight == pytest.approx(ref, rel=1e-9)


def _locally_delaunay_exact(xy, edges, a, b):
    """Exact (rational) check that link (a, b) is locally Delaunay: no common neighbour on
    one side lies strictly inside the circle through a, b and a common neighbour on the
    other (Delaunay's lemma: all links locally Delaunay <=> Delaunay triangulation)."""
    from fractions import Fraction as Fr

    nb = {}
    for i, j in edges.tolist():
        nb.setdefault(i, set()).add(j)
        nb.setdefault(j, set()).add(i)
    common = nb[a] & nb[b]
    p = {v: (Fr(float(xy[v, 0])), Fr(float(xy[v, 1]))) for v in common | {a, b}}

    def orient(u, v, w):
        return ((p[v][0] - p[u][0]) * (p[w][1] - p[u][1])
                - (p[v][1] - p[u][1]) * (p[w][0] - p[u][0]))

    def inside(u, v, w, q):
        if orient(u, v, w) < 0:
            u, v = v, u
        r = [(p[t][0] - p[q][0], p[t][1] - p[q][1]) for t in (u, v, w)]
        r = [(x, y, x * x + y * y) for x, y in r]
        return (r[0][0] * (r[1][1] * r[2][2] - r[1][2] * r[2][1])
                - r[0][1] * (r[1][0] * r[2][2] - r[1][2] * r[2][0])
                + r[0][2] * (r[1][0] * r[2][1] - r[1][1] * r[2][0])) > 0

    left = [c for c in common if orient(a, b, c) > 0]
    right = [c for c in common if orient(a, b, c) < 0]
    return all(not inside(a, b, c, d) and not inside(a, b, d, c) for c in left for d in right)


def test_delaunay_exact_on_a_nearly_cocircular_neighbourhood():
    # 58 points around a nearly cocircular quad found in 1e6 uniform points (seed 0), where
    # floating-point in-circle tests can pick the wrong diagonal; judged here with exact
    # rational arithmetic, independent of any triangulator
    n = 1_000_000
    xy = np.random.default_rng(0).random((n, 2)) * np.sqrt(n) * 100
    centre = xy[[569449, 923522, 456505, 909049]].mean(axis=0)
    sub = xy[np.hypot(*(xy - centre).T) < 400.0]
    e = build_candidates(sub).edges
    # a triangulation of points in general position has 3n - 3 - h links
    from scipy.spatial import ConvexHull
    assert len(e) == 3 * len(sub) - 3 - len(ConvexHull(sub).vertices)
    assert all(_locally_delaunay_exact(sub, e, a, b) for a, b in e.tolist())
