"""Whole-cost layout: Prim–Dijkstra trade-off trees, link exchange, the pipeline stage.

Outside references: networkx ``minimum_spanning_tree`` (Kruskal) and
``single_source_dijkstra`` for the two ends of the trade-off (Alpert, Hu, Huang,
Kahng & Karger, IEEE Trans. CAD 14(7):890-896, 1995, from memory: alpha = 0 is
Prim's tree, alpha = 1 the shortest-path tree).
"""

from __future__ import annotations

import itertools

import networkx as nx
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from mainspan.errors import InputError
from mainspan.graph.spanning import prim_tree
from mainspan.graph.wholecost import (RuleEstimate, WholeCostSettings, apply_exchange,
                                estimate_moves, exchange_search, tradeoff_tree,
                                tree_from_parents)


def _graph(seed, n, extra=1.0, ties=False):
    """A connected random graph: a random spanning path plus random chords."""
    rng = np.random.default_rng(seed)
    perm = rng.permutation(n)
    e = {tuple(sorted((int(perm[i]), int(perm[i + 1])))) for i in range(n - 1)}
    for _ in range(int(extra * n)):
        a, b = rng.integers(0, n, 2)
        if a != b:
            e.add((int(min(a, b)), int(max(a, b))))
    e = np.array(sorted(e), np.int64)
    w = rng.integers(1, 4, len(e)).astype(float) if ties else rng.random(len(e)) * 10 + 0.01
    return e, w


def _nx(e, w):
    g = nx.Graph()
    for (a, b), c in zip(e.tolist(), w.tolist()):
        g.add_edge(a, b, weight=c)
    return g


def _tree_pairs(t, e):
    pe = t.parent_edge[t.parent_edge >= 0]
    return {tuple(x) for x in e[pe].tolist()}


def _dist(t, w):
    d = np.zeros(t.parent.size)
    for v in t.order:
        if t.parent[v] >= 0:
            d[v] = d[t.parent[v]] + w[t.parent_edge[v]]
    return d


# ----------------------------------------------------------------------- trade-off trees
@settings(max_examples=40, deadline=None, derandomize=True)
@given(st.integers(0, 10_000), st.integers(2, 40))
def test_alpha_zero_is_prims_tree(seed, n):
    e, w = _graph(seed, n)
    t = tradeoff_tree(n, e, w, 0.0)
    # networkx Kruskal: same weight and, the weights being distinct, the same link set
    mst = nx.minimum_spanning_tree(_nx(e, w))
    assert t.weight == pytest.approx(mst.size(weight="weight"), rel=1e-12)
    assert _tree_pairs(t, e) == {tuple(sorted(x)) for x in mst.edges()}


@settings(max_examples=30, deadline=None, derandomize=True)
@given(st.integers(0, 10_000), st.integers(2, 30))
def test_alpha_zero_matches_prim_ties_included(seed, n):
    # integer weights with many ties: the same total order on links gives the same tree
    e, w = _graph(seed, n, extra=2.0, ties=True)
    t, p = tradeoff_tree(n, e, w, 0.0, roots=(0, n - 1)), prim_tree(n, e, w, roots=(0, n - 1))
    assert np.array_equal(t.parent, p.parent)
    assert np.array_equal(t.parent_edge, p.parent_edge)
    assert np.array_equal(t.order, p.order)


@settings(max_examples=40, deadline=None, derandomize=True)
@given(st.integers(0, 10_000), st.integers(2, 40), st.booleans())
def test_alpha_one_is_shortest_path_tree(seed, n, ties):
    e, w = _graph(seed, n, ties=ties)
    t = tradeoff_tree(n, e, w, 1.0)
    ref, _ = nx.single_source_dijkstra(_nx(e, w), 0)     # networkx Dijkstra distances
    d = _dist(t, w)
    assert all(d[v] == ref[v] for v in range(n))


def test_tradeoff_between_the_ends():
    # a star of cheap spokes from node 1 vs direct links from the root 0:
    # Prim takes the spokes, the shortest-path tree the direct links
    e = np.array([[0, 1], [1, 2], [1, 3], [0, 2], [0, 3]])
    w = np.array([1.0, 1.0, 1.0, 1.8, 1.8])
    assert tradeoff_tree(4, e, w, 0.0).parent.tolist() == [-1, 0, 1, 1]
    assert tradeoff_tree(4, e, w, 1.0).parent.tolist() == [-1, 0, 0, 0]
    # alpha 0.5: key via 1 = 0.5 * 1 + 1 = 1.5 < 1.8 -> spokes still win
    assert tradeoff_tree(4, e, w, 0.5).parent.tolist() == [-1, 0, 1, 1]
    # alpha 0.9: 1.9 > 1.8 -> direct links
    assert tradeoff_tree(4, e, w, 0.9).parent.tolist() == [-1, 0, 0, 0]


def test_tradeoff_errors_and_forest():
    e = np.array([[0, 1], [2, 3]])
    w = np.array([1.0, 1.0])
    with pytest.raises(InputError, match="alpha"):
        tradeoff_tree(4, e, w, 1.5)
    with pytest.raises(InputError):
        WholeCostSettings(alphas=(0.2, -1))
    with pytest.raises(InputError, match="max_hops"):
        WholeCostSettings(max_hops=0)
    from mainspan.errors import DisconnectedError
    with pytest.raises(DisconnectedError):
        tradeoff_tree(4, e, w, 0.3)
    t = tradeoff_tree(4, e, w, 0.3, allow_forest=True)
    assert t.roots.tolist() == [0, 2] and t.parent.tolist() == [-1, 0, -1, 2]


# ------------------------------------------------------------------------- the estimate
def _estimate(n, e, seed, head_price):
    """A rule estimate over a three-pipe catalog on random ground (invented demo data)."""
    from mainspan.hydraulics import DesignSettings
    from mainspan.hydraulics.catalog import PipeCatalog

    rng = np.random.default_rng(seed)
    cat = PipeCatalog(name=["a", "b", "c"], nominal_mm=[63, 110, 200],
                      inner_mm=[51.4, 90.0, 163.6], roughness_mm=[0.007] * 3,
                      hw_c=[150] * 3, rating_m=[160] * 3, cost_per_m=[8.0, 20.0, 60.0],
                      material=["PE"] * 3)
    return RuleEstimate.from_design(
        DesignSettings(pressure_catalog=cat, headloss_max_m_per_km=None),
        demand_lps=rng.random(n) * 6, elevation_m=rng.random(n) * 30,
        length_m=rng.random(len(e)) * 200 + 20, land_cost=rng.random(len(e)) * 50,
        head_price=head_price)


def _base(n, e, t, est):
    return estimate_moves(n, e, t.parent, t.parent_edge, t.roots, t.root_of, est)[3]


@settings(max_examples=30, deadline=None, derandomize=True)
@given(st.integers(0, 10_000), st.integers(3, 25), st.sampled_from([0.0, 50.0]), st.booleans())
def test_move_estimates_equal_recomputed_totals(seed, n, head_price, clement):
    # the O(cycle) incremental estimate of every move equals the estimate of the tree
    # the move makes, recomputed from scratch (continuous and Clement on-demand flows)
    from dataclasses import replace
    e, w = _graph(seed, n, extra=1.5)
    est = _estimate(n, e, seed, head_price)
    if clement:
        est = replace(est, clement_r=1 / 3, clement_u=1.645)
    t = tradeoff_tree(n, e, w, 0.2)
    d, a, c, base = estimate_moves(n, e, t.parent, t.parent_edge, t.roots, t.root_of, est,
                                   max_hops=n)
    assert base == pytest.approx(_base(n, e, t, est))
    for k in range(d.size):
        par, pe = apply_exchange(t.parent, t.parent_edge, e, int(a[k]), int(c[k]))
        t2 = tree_from_parents(par, pe, t.roots, w)
        assert (t2.parent >= 0).sum() == n - 1
        assert _base(n, e, t2, est) - base == pytest.approx(d[k], rel=1e-9, abs=1e-6)


def test_neighbourhood_is_every_single_exchange():
    # with no hop limit the moves are exactly the (added, dropped) pairs on each cycle
    n = 12
    e, w = _graph(3, n, extra=1.0)
    est = _estimate(n, e, 3, 0.0)
    t = prim_tree(n, e, w)
    d, a, c, _ = estimate_moves(n, e, t.parent, t.parent_edge, t.roots, t.root_of, est,
                                max_hops=n)
    got = {(int(x), int(t.parent_edge[y])) for x, y in zip(a, c)}
    g = nx.Graph()
    tree_pe = set(t.parent_edge[t.parent_edge >= 0].tolist())
    g.add_edges_from((int(x), int(y), {"i": i}) for i, (x, y) in enumerate(e) if i in tree_pe)
    want = set()
    for i, (x, y) in enumerate(e.tolist()):
        if i in tree_pe:
            continue
        path = nx.shortest_path(g, x, y)
        for u, v in zip(path, path[1:]):
            want.add((i, g.edges[u, v]["i"]))
    assert got == want
    # a hop limit keeps the links near the ends of the added link only
    d2, a2, c2, _ = estimate_moves(n, e, t.parent, t.parent_edge, t.roots, t.root_of, est,
                                   max_hops=1)
    assert 0 < d2.size < d.size and d2.size <= 2 * (len(e) - n + 1)


# ---------------------------------------------------------------------------- the search
def _simple_price(e, demand, length, seed=0):
    """Cost model for the search tests: link cost grows with the flow it carries."""
    def price(tree):
        from mainspan.graph.network import accumulate, rooted_network
        child = np.flatnonzero(tree.parent >= 0)
        net = rooted_network(tree.parent.size, tree.parent[child], child, roots=tree.roots)
        q = accumulate(net, demand)
        k = tree.parent_edge[child]
        cost = float(np.sum(length[k] * (1.0 + q ** 0.6)))
        return 0, cost, None
    return price


@settings(max_examples=25, deadline=None, derandomize=True)
@given(st.integers(0, 10_000), st.integers(3, 18), st.integers(1, 6))
def test_link_exchange_never_raises_cost(seed, n, per_pass):
    e, w = _graph(seed, n, extra=1.5)
    rng = np.random.default_rng(seed + 1)
    demand = rng.random(n) * 5
    est = _estimate(n, e, seed, 0.0)
    from dataclasses import replace
    est = replace(est, demand_lps=demand)
    price = _simple_price(e, demand, est.length_m)
    seen = []

    def tracked(tree):
        out = price(tree)
        seen.append(out[1])
        return out

    start = prim_tree(n, e, w)
    s0 = price(start)
    tree, score, stats = exchange_search(n, e, w, start, tracked, est,
                                         settings=WholeCostSettings(per_pass=per_pass,
                                                                    max_hops=n))
    assert score[1] <= s0[1]
    assert score == price(tree)
    assert (tree.parent >= 0).sum() == n - 1
    assert stats["evaluations"] == len(seen)


@settings(max_examples=15, deadline=None, derandomize=True)
@given(st.integers(0, 10_000), st.integers(3, 12))
def test_search_with_every_move_priced_is_a_local_optimum(seed, n):
    # pricing every move of the full neighbourhood each pass: no single exchange of the
    # result lowers the cost (checked by brute force over all link swaps)
    e, w = _graph(seed, n, extra=1.0)
    demand = np.random.default_rng(seed).random(n) * 5
    est = _estimate(n, e, seed, 0.0)
    price = _simple_price(e, demand, est.length_m)
    big = WholeCostSettings(per_pass=10_000, max_hops=n, max_evaluations=100_000)
    tree, score, stats = exchange_search(n, e, w, prim_tree(n, e, w), price, est, settings=big)
    assert stats["converged"]
    in_tree = set(tree.parent_edge[tree.parent_edge >= 0].tolist())
    for drop, add in itertools.product(sorted(in_tree), range(len(e))):
        if add in in_tree:
            continue
        links = sorted(in_tree - {drop} | {add})
        g = nx.Graph()
        g.add_nodes_from(range(n))
        g.add_edges_from(e[links].tolist())
        if not nx.is_connected(g):
            continue
        assert price(_tree_of(n, e, w, links))[1] >= score[1] - 1e-9 * score[1]


def _tree_of(n, e, w, links):
    from mainspan.graph.network import rooted_network
    links = np.asarray(links, np.int64)
    net = rooted_network(n, e[links, 0], e[links, 1], roots=[0])
    parent = np.full(n, -1, np.int64)
    pe = np.full(n, -1, np.int64)
    parent[net.to_node], pe[net.to_node] = net.from_node, links
    return tree_from_parents(parent, pe, [0], w)


def test_search_is_deterministic():
    n = 30
    e, w = _graph(11, n, extra=1.5)
    demand = np.random.default_rng(5).random(n) * 5
    est = _estimate(n, e, 11, 20.0)
    price = _simple_price(e, demand, est.length_m)
    runs = [exchange_search(n, e, w, tradeoff_tree(n, e, w, 0.1), price, est) for _ in range(2)]
    assert np.array_equal(runs[0][0].parent_edge, runs[1][0].parent_edge)
    assert runs[0][1] == runs[1][1] and runs[0][2] == runs[1][2]


# ------------------------------------------------------------------------- the pipeline
def _scheme(n=40, seed=7):
    """A tiny generated irrigation scheme (invented): a source at one corner, hydrants."""
    import mainspan as ms

    rng = np.random.default_rng(seed)
    xy = np.vstack([[0.0, 0.0], rng.random((n - 1, 2)) * [1500.0, 900.0]])
    z = 50 + 0.02 * xy[:, 0] + 10 * np.sin(xy[:, 1] / 200.0)
    role = ["source"] + ["demand"] * (n - 1)
    q = np.r_[0.0, rng.uniform(1.0, 4.0, n - 1)]
    return ms.sites_from_arrays(xy, crs="EPSG:32633", role=role, demand_lps=q, elevation_m=z)


@pytest.fixture(scope="module")
def plans():
    import mainspan as ms

    s = _scheme()
    kw = dict(system="pressure", use_site_z=True, candidates="delaunay")
    return (ms.plan_layout(s, layout="whole-cost", **kw), ms.plan_layout(s, layout="tree", **kw),
            ms.plan_layout(s, layout="whole-cost", **kw))


def test_whole_cost_plan_no_dearer_than_prim(plans):
    from mainspan.graph.wholecost import whole_life_cost

    whole, prim, _ = plans
    ri = whole.run_info
    w_cost = whole_life_cost(whole.design.summary)
    p_cost = whole_life_cost(prim.design.summary)
    assert w_cost <= p_cost
    # run_info reports Prim's tree's whole-life cost as the design stage prices it
    assert float(ri["prim_whole_life_cost"]) == pytest.approx(p_cost, abs=1e-3)
    assert float(ri["whole_life_cost"]) == pytest.approx(w_cost, abs=1e-3)
    # the searched price is the price of the layout written (links handed over the same way)
    assert whole.tree.search["cost"] == pytest.approx(w_cost, rel=1e-12)
    assert "local optimum under single link exchanges" in ri["whole_cost_layout"]
    assert "not a global optimum" in ri["whole_cost_layout"]
    assert ri["certificate"].startswith("Prim's tree of link costs (not the whole-cost")
    assert prim.run_info["certificate"].startswith("cycle property holds")
    assert "whole-cost tree whole-life cost" in whole.summary()
    # every site is in the tree once
    assert whole.n_links == whole.n_nodes - 1
    assert whole.design.summary["n_failures"] <= prim.design.summary["n_failures"]


def test_whole_cost_plan_is_deterministic(plans):
    a, _, b = plans
    assert np.array_equal(a.links["candidate_index"], b.links["candidate_index"])
    assert a.run_info["whole_life_cost"] == b.run_info["whole_life_cost"]


def test_whole_cost_needs_pressure_system():
    import mainspan as ms

    s = _scheme(8)
    with pytest.raises(InputError, match="whole-cost needs --system pressure"):
        ms.plan_layout(s, layout="whole-cost", use_site_z=True)
    with pytest.raises(InputError, match="whole-cost"):
        ms.plan_layout(s, layout="cheapest", use_site_z=True)


def test_cli_layout_choices_come_from_layout():
    from mainspan.cli import build_parser
    from mainspan.pipeline.layout import LAYOUTS
    from mainspan.settings import setting

    p = build_parser()
    # the option comes from the settings schema ([tree] layout), whose choices are LAYOUTS
    act = next(a for sp in p._subparsers._group_actions for a in sp.choices["plan"]._actions
               if a.dest == "tree__layout")
    assert setting("tree", "layout").choices == LAYOUTS and "whole-cost" in LAYOUTS
    assert act.metavar == "{" + ",".join(LAYOUTS) + "}"


def test_project_file_and_cli(tmp_path, capsys, points_file):
    from tests.conftest import run_cli

    s = _scheme(16, seed=3)
    sites = points_file(s.xy, z=s.elevation, fields={
        "id": s.node_id.astype(str), "role": s.role.astype(str), "q_lps": s.demand})
    proj = tmp_path / "p.toml"
    proj.write_text(f'[sites]\npath = "{sites}"\ndemand_field = "q_lps"\n'
                    '[tree]\nuse_site_z = true\nlayout = "whole-cost"\n'
                    '[design]\nsystem = "pressure"\n')
    code, out, err = run_cli(["plan", proj, "--out", tmp_path / "a.gpkg", "--quiet"], capsys)
    assert code == 0, err
    assert "whole-cost tree whole-life cost" in out
    import pyogrio
    info = pyogrio.read_dataframe(tmp_path / "a.gpkg", layer="run_info")
    info = dict(zip(info["key"], info["value"]))
    assert info["layout"] == "whole-cost" and "local optimum" in info["whole_cost_layout"]
    assert float(info["whole_life_cost"]) <= float(info["prim_whole_life_cost"])
    code, out, err = run_cli(["plan", "--sites", sites, "--layout", "whole-cost",
                              "--out", tmp_path / "b.gpkg", "--quiet"], capsys)
    assert code == 2 and "--system pressure" in err
