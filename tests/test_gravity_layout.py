"""Depth-aware gravity layout: arc prices by trench depth, rounds of layout -> design -> re-price."""

import numpy as np
import pytest

from mainspan.graph.arborescence import min_arborescence
from mainspan.graph.gravity_layout import CarriedDepth, depth_arc_costs, depth_aware_tree, tree_designer
from mainspan.hydraulics import DesignSettings

# Two valleys split by a ridge that stops short of the east end (x < 380 m): the north one
# (B, E) falls east, round the ridge's end (C) into the south one (D, A), which falls west to
# the outlet O.
IDS = ["O", "A", "D", "C", "B", "E"]
XY = np.array([[0.0, 0.0], [150.0, 0.0], [300.0, 0.0], [450.0, 60.0], [150.0, 160.0], [300.0, 160.0]])
RIDGE_Y, RIDGE_H = 80.0, 5.0


def ground(x, y):
    ridge = RIDGE_H * np.exp(-((y - RIDGE_Y) / 25.0) ** 2) / (1.0 + np.exp((x - 380.0) / 12.0))
    t = 1.0 / (1.0 + np.exp(-(y - RIDGE_Y) / 15.0))          # 0 in the south valley, 1 in the north
    return (10.0 + 0.004 * x) * (1 - t) + (13.5 - 0.004 * x) * t + ridge


def _candidates():
    n = len(XY)
    e = np.array([(i, j) for i in range(n) for j in range(i + 1, n)], dtype=np.int64)
    length = np.hypot(*(XY[e[:, 1]] - XY[e[:, 0]]).T)
    offs, st, gz = [0], [], []
    for (a, b), ln in zip(e, length):
        s = np.unique(np.r_[np.arange(0.0, ln, 5.0), ln])
        p = XY[a] + (XY[b] - XY[a]) * (s / ln)[:, None]
        st.append(s)
        gz.append(ground(p[:, 0], p[:, 1]))
        offs.append(offs[-1] + len(s))
    return e, length, np.asarray(offs, np.int64), np.concatenate(st), np.concatenate(gz)


def _run(max_rounds=8, settings=None):
    e, length, off, st, gz = _candidates()
    s = settings or DesignSettings()
    elev = ground(XY[:, 0], XY[:, 1])
    fn = tree_designer(XY, elev, np.r_[0.0, np.full(5, 2.0)], IDS, e, length, off, st, gz, root=0,
                       settings=s)
    arb, arcs, rounds = depth_aware_tree(len(XY), e, 60.0 * length, length, off, st, gz, root=0,
                                         settings=s, design_fn=fn, max_rounds=max_rounds)
    return e, length, arb, arcs, rounds


def _links(parent):
    return {tuple(sorted((int(c), int(p)))) for c, p in enumerate(parent) if p >= 0}


def test_depth_aware_tree_follows_the_valley_round_the_ridge():
    from mainspan.graph.spanning import prim_tree

    e, length, arb, arcs, rounds = _run()
    ab = (1, 4)                                  # A-B: the short way, straight over the ridge
    # the shortest tree crosses the ridge ...
    pt = prim_tree(len(XY), e, length, roots=[0])
    assert ab in _links(pt.parent)
    # ... the depth-aware arborescence goes round its end through C
    assert ab not in _links(arb.parent) and (2, 5) not in _links(arb.parent)
    assert arb.parent[IDS.index("E")] == IDS.index("C") or arb.parent[IDS.index("B")] == IDS.index("E")
    s = rounds.summary()
    assert s["cost_after"] <= s["cost_before"] and s["max_depth_after_m"] <= s["max_depth_before_m"]
    assert rounds.settled and len(rounds.parents) <= 9


def test_arborescence_cost_equals_networkx_minimum_branching():
    # Edmonds' algorithm as implemented independently by networkx (branchings module)
    import networkx as nx

    e, length, arb, arcs, rounds = _run()
    g = nx.DiGraph()
    for t, h, w in zip(arcs.tails, arcs.heads, arcs.weights):
        if h != 0:                       # nothing flows out of the outlet: no arc enters the root
            g.add_edge(int(t), int(h), weight=float(w))
    ref = nx.minimum_spanning_arborescence(g, attr="weight")
    assert sum(d["weight"] for *_, d in ref.edges(data=True)) == pytest.approx(arb.total_weight, rel=1e-12)


def test_rounds_are_deterministic():
    a = _run()
    b = _run()
    assert np.array_equal(a[2].parent, b[2].parent) and a[4].costs == b[4].costs


def test_round_zero_only_is_the_earlier_layout():
    from mainspan.graph.arborescence import profile_directional_costs

    e, length, off, st, gz = _candidates()
    _, _, arb, _, rounds = _run(max_rounds=0)
    # the earlier pricing: extra depth below cover at the shallowest excavation price x 0.8 m width
    rate = float(DesignSettings().price_table().excavation_rate(0.0))
    old = profile_directional_costs(e, 60.0 * length, length, off, st, gz, min_slope=0.004,
                                    extra_depth_cost_per_m2=rate * 0.8)
    ref = min_arborescence(len(XY), old.tails, old.heads, old.weights, root=0)
    assert np.array_equal(arb.parent, ref.parent) and len(rounds.parents) == 1


def test_carried_depth_by_hand():
    # chain 3 -> 2 -> 1 -> 0 (outlet); previous inverts 9.0 / 8.0 / 7.0 at nodes 3 / 2 / 1
    c = CarriedDepth(down=np.array([-1, 0, 1, 2]), invert_m=np.array([5.0, 7.0, 8.0, 9.0]),
                     slack_m=np.array([0.0, 0.3, 0.5, 1.0]), marginal=np.array([0.0, 100.0, 200.0, 50.0]))
    # arriving at node 2 at 7.2 m: 0.8 m below its previous invert 8.0
    # link 2->1: 0.8 -> 0.3 (slack 0.5), 200 x (0.8 + 0.3) / 2 = 110
    # link 1->0: 0.3 -> 0.0 (slack 0.3), 100 x (0.3 + 0.0) / 2 = 15
    assert c.cost([2], [7.2])[0] == pytest.approx(125.0)
    assert c.cost([2, 1, 0], [8.5, 7.0, 1.0]).tolist() == [0.0, 0.0, 0.0]


def test_depth_arc_costs_see_the_rise_and_the_carried_depth():
    s = DesignSettings()
    kw = dict(settings=s, flow_lps=[0.0, 2.0])
    flat = dict(profile_offsets=[0, 3], profile_station_m=[0.0, 50.0, 100.0])
    up = depth_arc_costs([[0, 1]], [0.0], [100.0], profile_ground_m=[10.0, 10.5, 11.0],
                         start_depth_m=[0.0, 0.0], **flat, **kw)
    # arc 0 is 0 -> 1: water flows 1 -> 0, downhill; arc 1 runs it uphill and costs more
    assert up.weights[0] < up.weights[1]
    deep = depth_arc_costs([[0, 1]], [0.0], [100.0], profile_ground_m=[10.0, 10.5, 11.0],
                           start_depth_m=[0.0, 4.0], **flat, **kw)
    assert deep.weights[0] > up.weights[0]
    # a bigger flow needs a bigger pipe: dearer
    big = depth_arc_costs([[0, 1]], [0.0], [100.0], profile_ground_m=[10.0, 10.5, 11.0],
                          start_depth_m=[0.0, 0.0], settings=s, flow_lps=[0.0, 300.0], **flat)
    assert big.weights[0] > up.weights[0]


def test_plan_layout_reports_the_gain(tmp_path):
    import rasterio
    from rasterio.transform import from_origin

    from mainspan import plan_layout, sites_from_arrays

    x0, y0, cell = 499_900.0, 5_000_300.0, 5.0
    xs = x0 + cell * (np.arange(140) + 0.5)
    ys = y0 - cell * (np.arange(100) + 0.5)
    gx, gy = np.meshgrid(xs, ys)
    dem = ground(gx - 500_000.0, gy - 5_000_000.0).astype("float32")
    tif = tmp_path / "dem.tif"
    with rasterio.open(tif, "w", driver="GTiff", width=140, height=100, count=1, dtype="float32",
                       crs="EPSG:32633", transform=from_origin(x0, y0, cell, cell)) as dst:
        dst.write(dem, 1)
    sites = sites_from_arrays(XY + [500_000.0, 5_000_000.0], crs="EPSG:32633", node_id=IDS,
                              role=["outlet"] + ["demand"] * 5, demand_lps=[0, 2, 2, 2, 2, 2])
    lay = plan_layout(sites, terrain=str(tif), system="gravity", layout="gravity",
                      candidates="complete")
    ri = lay.run_info
    assert float(ri["depth_layout_cost_after"]) <= float(ri["depth_layout_cost_before"])
    assert int(ri["depth_layout_rounds"]) >= 1 and ri["depth_layout_settled"] in ("true", "false")
    assert "depth-aware" in lay.summary()
    assert float(ri["depth_layout_cost_after"]) == pytest.approx(lay.design.summary.get(
        "whole_life_cost", lay.design.summary["total_cost"]), rel=0.02)
