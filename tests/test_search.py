"""Labelled multi-source search over a cost grid (mainspan.ground.search)."""

import math

import numpy as np
import pytest

from mainspan.errors import InputError
from mainspan.ground.search import (OFFSETS, SearchGrid, StepCosts, grid_for_sites,
                                    multi_source_search, step_costs)


def _costs(land, *, conn=8, z=None, xing=None, length_w=0.0, climb_mean=0.0, half_lump=0.0,
           cell_m=1.0):
    nr, nc = land.shape
    g = SearchGrid(0.0, nr * cell_m, cell_m, nr, nc)
    p = np.array([length_w, climb_mean, -1.0, 0.0, half_lump, conn], float)
    return StepCosts(g, np.asarray(land, np.float32), None if z is None else np.asarray(z, np.float32),
                     xing, p)


def test_single_source_equals_skimage_mcp_geometric():
    # scikit-image's MCP_Geometric prices a step at length x mean of the two cell costs, the
    # same integral as an 8-connected step here (skimage.graph.MCP_Geometric docs)
    from skimage.graph import MCP_Geometric

    rng = np.random.default_rng(3)
    land = rng.uniform(0.5, 4.0, (23, 31)).astype(np.float32)
    s = multi_source_search(_costs(land), [5 * 31 + 7])
    ref, _ = MCP_Geometric(land.astype(float), fully_connected=True).find_costs([(5, 7)])
    np.testing.assert_allclose(s.dist.reshape(land.shape), ref, rtol=1e-6)
    assert (s.label == 0).all()
    # the traced path back from a far cell costs its distance, step by step
    path = s.path_to_source(22 * 31 + 30)
    assert path[-1] == 5 * 31 + 7
    assert step_costs(s.costs, path[:-1], path[1:]).sum() == pytest.approx(s.dist[-1])


def _knight_cells(r, c, dr, dc):
    # Amanatides & Woo 1987 traversal of the segment (0.5,0.5)->(2.5,1.5) (x=col, y=row) visits
    # cells (0,0),(1,0),(1,1),(2,1): a knight's move spends a quarter of its length in each
    if abs(dc) == 2:
        s = 1 if dc > 0 else -1
        return [(r, c), (r, c + s), (r + dr, c + s), (r + dr, c + dc)]
    s = 1 if dr > 0 else -1
    return [(r, c), (r + s, c), (r + s, c + dc), (r + dr, c + dc)]


def test_multi_source_16_connected_equals_networkx_dijkstra():
    import networkx as nx

    rng = np.random.default_rng(7)
    nr, nc = 12, 14
    land = rng.uniform(1.0, 3.0, (nr, nc))
    z = rng.uniform(0.0, 5.0, (nr, nc))
    lw, cm = 0.5, 2.0
    G = nx.Graph()
    for r in range(nr):
        for c in range(nc):
            for dr, dc in OFFSETS[16][:8]:
                r2, c2 = r + dr, c + dc
                if not (0 <= r2 < nr and 0 <= c2 < nc):
                    continue
                L = math.hypot(dr, dc)
                cells = _knight_cells(r, c, dr, dc) if abs(dr) + abs(dc) == 3 else [(r, c), (r2, c2)]
                mean = sum(land[q] for q in cells) / len(cells)
                dz = float(np.float32(z[r2, c2])) - float(np.float32(z[r, c]))
                w = L * mean + lw * math.hypot(L, dz) + cm * abs(dz)
                G.add_edge(r * nc + c, r2 * nc + c2, weight=w)
    src = [0, 5 * nc + 9, 11 * nc + 2]
    s = multi_source_search(_costs(land, conn=16, z=z, length_w=lw, climb_mean=cm), src)
    dist, paths = nx.multi_source_dijkstra(G, src)
    ref = np.array([dist[v] for v in range(nr * nc)])
    np.testing.assert_allclose(s.dist, ref, rtol=2e-6)
    lab = np.array([src.index(paths[v][0]) for v in range(nr * nc)])
    assert (s.label == lab).mean() > 0.97      # equal-cost ties may go either way


@pytest.mark.parametrize("conn, bound", [(8, 0.0824), (16, 0.0279)])
def test_uniform_grid_elongation_goodchild(conn, bound):
    # worst-case elongation on uniform cost: 8.24 % (8-connected), 2.79 % (16-connected)
    # (Goodchild 1977, as cited by Huber & Church 1985; from memory)
    n = 41
    s = multi_source_search(_costs(np.ones((n, n)), conn=conn), [20 * n + 20])
    r, c = np.divmod(np.arange(n * n), n)
    eu = np.hypot(r - 20, c - 20)
    ratio = s.dist[eu > 0] / eu[eu > 0] - 1.0
    assert ratio.min() > -1e-9
    assert ratio.max() <= bound + 1e-4
    assert ratio.max() > 0.8 * bound          # and the bound is reached near its worst angle


def test_barrier_wall_detour_and_no_corner_squeeze():
    land = np.ones((7, 7))
    land[3, :] = np.inf
    land[3, 6] = 1.0                           # a gap at the east end
    s = multi_source_search(_costs(land), [0])
    path = s.path_to_source(6 * 7 + 0)
    rows, cols = np.divmod(path, 7)
    assert (cols[rows == 3] == 6).all()
    # two barrier cells meeting at a corner: no diagonal step between them
    land2 = np.ones((2, 2))
    land2[0, 1] = land2[1, 0] = np.inf
    s2 = multi_source_search(_costs(land2), [0])
    assert np.isinf(s2.dist[3]) and s2.label[3] == -1


def test_crossing_priced_once_per_strip():
    land = np.ones((5, 9))
    xing = np.full((5, 9), -1, np.int32)
    xing[:, 3:5] = 0                           # a road two cells wide
    s = multi_source_search(_costs(land, xing=xing, half_lump=50.0), [2 * 9])
    # going straight east: 8 m of ground plus one crossing of 100
    assert s.dist[2 * 9 + 8] == pytest.approx(8.0 + 100.0)
    assert s.dist[2 * 9 + 4] == pytest.approx(4.0 + 50.0)   # on the road: half paid


def test_bridges_pick_cheapest_touching_step():
    land = np.ones((3, 10))
    s = multi_source_search(_costs(land), [10 + 0, 10 + 9])
    br = s.bridges()
    assert br["edges"].tolist() == [[0, 1]]
    assert br["cost"][0] == pytest.approx(9.0)


def test_memory_budget_message():
    with pytest.raises(InputError, match=r"needs about .* MiB.*--corridor-cell-m"):
        grid_for_sites([[0, 0], [10000, 10000]], cell_m=0.5, margin_m=10, memory_mb=100)
    g = grid_for_sites([[0, 0], [100, 50]], cell_m=2, margin_m=10)
    assert (g.nrows, g.ncols) == (36, 61)
    assert g.cell_of([[0, 0]])[0] >= 0
