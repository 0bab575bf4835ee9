"""Corridor layout: Mehlhorn candidates, KMB merging, junctions, re-pricing, barriers, crossings."""

import math

import numpy as np
import pytest
import rasterio
import shapely
from rasterio.transform import from_origin

from mainspan.errors import InputError
from mainspan.graph.corridor import corridor_network, grid_steiner_tree, segment_pricer
from mainspan.ground.costs import price_links
from mainspan.ground.search import (OFFSETS, SearchGrid, StepCosts, cost_grid, grid_for_sites,
                                    multi_source_search, step_costs)
from mainspan.ground.vectors import VectorCosts, VectorLayer

UTM = "EPSG:32633"


def _write(path, data, *, x0, y_top, cell):
    with rasterio.open(path, "w", driver="GTiff", width=data.shape[1], height=data.shape[0],
                       count=1, dtype="float64", crs=UTM,
                       transform=from_origin(x0, y_top, cell, cell)) as ds:
        ds.write(np.asarray(data, float), 1)
    return str(path)


def _grid_graph(sc):
    import networkx as nx

    g = sc.grid
    G = nx.Graph()
    half = OFFSETS[sc.connectivity][: len(OFFSETS[sc.connectivity]) // 2]
    for r in range(g.nrows):
        for c in range(g.ncols):
            for dr, dc in half:
                r2, c2 = r + dr, c + dc
                if 0 <= r2 < g.nrows and 0 <= c2 < g.ncols:
                    a, b = r * g.ncols + c, r2 * g.ncols + c2
                    G.add_edge(a, b, weight=float(step_costs(sc, [a], [b])[0]))
    return G


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_grid_steiner_equals_networkx_mehlhorn(seed):
    import networkx as nx
    from networkx.algorithms.approximation import steiner_tree

    rng = np.random.default_rng(seed)
    nr, nc = 14, 16
    g = SearchGrid(0.0, float(nr), 1.0, nr, nc)
    land = rng.uniform(1.0, 5.0, (nr, nc)).astype(np.float32)
    sc = StepCosts(g, land, None, None, np.array([0, 0, -1, 0, 0, 8], float))
    terms = [int(v) for v in rng.choice(nr * nc, 6, replace=False)]
    s = multi_source_search(sc, terms)
    cells, steps, w, br = grid_steiner_tree(s, roots=(0,))
    G = _grid_graph(sc)
    # networkx's Mehlhorn (1988) implementation on the same weighted grid graph
    ref = steiner_tree(G, terms, weight="weight", method="mehlhorn")
    assert w.sum() == pytest.approx(ref.size(weight="weight"), rel=1e-9)
    # a tree over all the terminals
    assert len(steps) == len(cells) - 1 and set(terms) <= set(cells.tolist())
    T = nx.Graph([tuple(cells[e]) for e in steps])
    assert nx.is_tree(T)
    # KMB/Mehlhorn bound: never above the spanning tree of the terminals' distance graph
    # (which is at most 2 (1 - 1/l) times the optimum, Mehlhorn 1988)
    D = nx.Graph()
    for i, a in enumerate(terms):
        d = nx.single_source_dijkstra_path_length(G, a)
        for b in terms[i + 1:]:
            D.add_edge(a, b, weight=d[b])
    mst = nx.minimum_spanning_tree(D).size(weight="weight")
    assert w.sum() <= mst + 1e-9
    assert br["tree"].weight == pytest.approx(mst, rel=1e-9)   # Mehlhorn's MST equals it


def test_cheap_valley_makes_a_trunk_with_one_junction(tmp_path):
    # a T of cheap ground: three sites at the ends of the arms meet at the T's centre
    n = 41
    land = np.full((n, n), 20.0)
    land[20, :] = 1.0          # east-west arm
    land[20:, 20] = 1.0        # southern arm
    path = _write(tmp_path / "land.tif", land, x0=0.0, y_top=410.0, cell=10.0)
    xy = np.array([[5.0, 205.0], [405.0, 205.0], [205.0, 5.0]])
    g = grid_for_sites(xy, cell_m=10.0, margin_m=0.0, align_xy=(0.0, 410.0))
    assert (g.x_min, g.y_max, g.nrows, g.ncols) == (0.0, 210.0, 21, 41)
    sc = cost_grid(g, working_crs=UTM, land_cost=path, connectivity=8)
    price = segment_pricer(working_crs=UTM, land_cost=path)
    net = corridor_network(xy, sc, price, roots=(0,), tolerance_pct=0.5)
    assert len(net.junction_xy) == 1
    # the branches part one cell south of the T's centre: a diagonal step between two cheap
    # cells passes their shared corner only (half its length in each end cell)
    np.testing.assert_allclose(net.junction_xy[0], [205.0, 195.0])
    assert net.edges.tolist() == [[0, 3], [1, 3], [2, 3]]
    # re-priced with the exact costing: the polylines priced by price_links, segment by segment
    for i in range(3):
        p = net.path(i)
        k = len(p) - 1
        lc = price_links(p, np.column_stack([np.arange(k), np.arange(1, k + 1)]),
                         working_crs=UTM, land_cost=path)
        assert net.costs.total[i] == pytest.approx(lc.total.sum())
        assert net.costs.components["length_m"][i] == pytest.approx(
            shapely.length(shapely.linestrings(p)))
    # the links follow the cheap arms at 1 per metre of land plus 1 per metre of pipe:
    # 2 x (190 m + one 14.1 m diagonal) for each arm of the bar, 2 x 190 m for the stem
    ref = 2 * (2 * (190 + 10 * math.sqrt(2)) + 190)
    assert ref - 1e-6 <= net.costs.total.sum() <= ref * 1.005
    straight = price_links(xy, np.array([[0, 2], [1, 2]]), working_crs=UTM, land_cost=path)
    assert net.costs.total.sum() < 0.5 * straight.total.sum()


def test_equilateral_triangle_on_uniform_ground():
    # spanning tree of an equilateral triangle: 2 sides; the Steiner minimum is sqrt(3) sides
    # (Gilbert & Pollak 1968); the corridor tree lies between, within the 16-connected grid bias
    xy = np.array([[0.0, 0.0], [100.0, 0.0], [50.0, 50.0 * math.sqrt(3)]])
    g = grid_for_sites(xy, cell_m=2.0, margin_m=10.0)
    sc = cost_grid(g, working_crs=UTM, connectivity=16)
    net = corridor_network(xy, sc, segment_pricer(working_crs=UTM), tolerance_pct=1.0)
    total = net.costs.total.sum()
    assert math.sqrt(3) * 100 - 1e-6 <= total <= 2 * 100 * 1.0279
    assert net.steiner_search_cost <= net.tree_search_cost + 1e-9


def _n_points(a, b):
    """shapely's count of the separate pieces where two lines meet."""
    parts = shapely.get_parts(shapely.intersection(a, b))
    return int((~shapely.is_empty(parts)).sum())


def _square_sites():
    return np.array([[0.0, 0.0], [200.0, 0.0]])


def test_barrier_detour_straight_impassable_and_site_inside_barrier():
    wall = shapely.box(95.0, -100.0, 105.0, 60.0)          # open to the north above y = 60
    vc = VectorCosts(barriers=[VectorLayer(np.array([wall]), 0.0, "--barrier 'wall.gpkg'")])
    xy = _square_sites()
    g = grid_for_sites(xy, cell_m=5.0, margin_m=120.0)
    bar, _, _, _ = vc.burn(g)
    sc = cost_grid(g, working_crs=UTM, barrier=bar, connectivity=16)
    price = segment_pricer(working_crs=UTM, extra_terms=vc.terms())
    net = corridor_network(xy, sc, price, tolerance_pct=1.0, barrier_names=vc.names())
    line = shapely.linestrings(net.path(0))
    assert not shapely.intersects(line, wall)
    assert np.isfinite(net.costs.total[0]) and net.costs.total[0] > 200.0
    st = price_links(xy, np.array([[0, 1]]), working_crs=UTM, extra_terms=vc.terms())
    assert not st.passable[0]
    with pytest.raises(InputError, match=r"site\(s\) 1 lie inside a barrier"):
        corridor_network(np.array([[0.0, 0.0], [100.0, 0.0]]), sc, price)
    # a closed ring cuts the second site off
    ring = shapely.box(150, -50, 250, 50).exterior
    vc2 = VectorCosts(barriers=[VectorLayer(np.array([ring]), 0.0, "--barrier 'ring.gpkg'")])
    sc2 = cost_grid(g, working_crs=UTM, barrier=vc2.burn(g)[0], connectivity=16)
    with pytest.raises(InputError, match=r"cut off 1 site\(s\) from the root: 1 .*ring.gpkg"):
        corridor_network(xy, sc2, price, node_id=["0", "1"], barrier_names=vc2.names())


def test_crossings_counted_like_shapely_and_priced_per_crossing():
    road = shapely.LineString([(100.0, -300.0), (100.0, 300.0)])
    stream = shapely.LineString([(-50, 50), (60, 40), (60, -40), (150, -60)])
    vc = VectorCosts(crossings=[VectorLayer(np.array([road]), 500.0, "--crossing 'road'"),
                                VectorLayer(np.array([stream]), 70.0, "--crossing 'stream'")])
    xy = np.array([[0.0, 0.0], [200.0, 0.0], [0.0, 200.0]])
    st = price_links(xy, np.array([[0, 1], [0, 2], [1, 2]]), working_crs=UTM,
                     extra_terms=vc.terms())
    segs = shapely.linestrings(np.stack([xy[[0, 0, 1]], xy[[1, 2, 2]]], axis=1))
    # shapely's own count of intersection points, line by line
    ref = [sum(_n_points(s, L) for L in (road, stream))
           for s in segs]
    assert st.components["crossings"].tolist() == ref == [2, 1, 1]
    assert st.components["crossing_cost"].tolist() == [570.0, 70.0, 500.0]
    g = grid_for_sites(xy, cell_m=5.0, margin_m=30.0)
    _, _, xing, prices = vc.burn(g)
    sc = cost_grid(g, working_crs=UTM, crossing=xing, crossing_price=prices, connectivity=16)
    net = corridor_network(xy, sc, segment_pricer(working_crs=UTM, extra_terms=vc.terms()))
    for i in range(len(net.edges)):
        line = shapely.linestrings(net.path(i))
        n_ref = sum(_n_points(line, L) for L in (road, stream))
        assert net.costs.components["crossings"][i] == n_ref
    # the road is crossed once in all: the tree hangs both far sites off one side
    assert net.costs.components["crossings"].sum() >= 1
    assert net.costs.components["crossing_cost"].sum() <= 570.0 + 70.0
