"""Least-cost sizing of pressure mains: the tree method against HiGHS, surge, class choice, pressures."""

import fluids
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from mainspan.errors import InputError
from mainspan.hydraulics import DesignSettings, design_network
from mainspan.hydraulics.catalog import PipeCatalog, default_catalog
from mainspan.hydraulics.sizing import (
    joukowsky_head_m,
    korteweg_wave_speed_mps,
    least_cost_highs,
    least_cost_tree,
    link_hulls,
    material_modulus_pa,
    surge_head_m,
)
from mainspan.graph.network import rooted_network


def random_problem(seed, n, P, free):
    rng = np.random.default_rng(seed)
    parent = np.array([rng.integers(0, i) for i in range(1, n)], dtype=np.int64)
    net = rooted_network(n, parent, np.arange(1, n), roots=[0])
    L = n - 1
    scale = rng.uniform(0.5, 3.0, L)[:, None]
    loss = np.sort(rng.uniform(0.1, 5.0, (L, P)), axis=1) * scale          # larger p: more loss
    cost = np.sort(rng.uniform(1.0, 20.0, (L, P)), axis=1)[:, ::-1] * scale  # ... and cheaper
    cost = cost + rng.uniform(0, 2.0, (L, P))                                # not always convex or monotone
    ok = rng.random((L, P)) < 0.8
    ok[np.arange(L), rng.integers(0, P, L)] = True
    req = rng.uniform(0.0, 10.0, n)
    kw = (dict(root_weight=float(rng.uniform(0, 5)), root_cap_m=float(rng.uniform(60, 200))) if free
          else dict(root_head_m=float(req.max() + rng.uniform(8, 40))))
    return net, loss, cost, ok, req, kw


def heads_from(net, r, loss):
    """Head at every node recomputed from the pieces chosen (independent of the solver's own heads)."""
    k = np.arange(net.n_links)
    q2 = np.where(r.pipe_2 >= 0, r.pipe_2, r.pipe)
    link = (1 - r.fraction_2) * loss[k, r.pipe] + r.fraction_2 * loss[k, q2]
    H = np.zeros(net.n_nodes)
    H[net.roots] = r.root_head_m
    for v in net.order:
        if net.parent[v] >= 0:
            H[v] = H[net.parent[v]] - link[net.parent_link[v]]
    return H


@settings(max_examples=60, deadline=None, derandomize=True)
@given(seed=st.integers(0, 10_000), n=st.integers(2, 30), P=st.integers(1, 7), free=st.booleans())
def test_tree_method_matches_highs(seed, n, P, free):
    # scipy.optimize.milp (HiGHS) solves the same linear programme independently
    net, loss, cost, ok, req, kw = random_problem(seed, n, P, free)
    t = least_cost_tree(net, loss, cost, ok, req, **kw)
    if not t.feasible.all():
        with pytest.raises(InputError):
            least_cost_highs(net, loss, cost, ok, req, **kw)
        return
    h = least_cost_highs(net, loss, cost, ok, req, **kw)
    assert t.objective == pytest.approx(h.objective, rel=1e-6, abs=1e-9)
    # the tree method's pieces: admissible, consecutive on the link's hull, meeting every head
    k = np.arange(net.n_links)
    assert ok[k, t.pipe].all() and ok[k[t.pipe_2 >= 0], t.pipe_2[t.pipe_2 >= 0]].all()
    assert np.all((t.fraction_2 >= 0) & (t.fraction_2 <= 1))
    H = heads_from(net, t, loss)
    assert np.all(H >= req - 1e-7)
    if "root_cap_m" in kw:
        assert t.root_head_m[0] <= kw["root_cap_m"] + 1e-9


def test_tree_method_on_a_hand_solved_chain():
    # two links, two pipes each (loss 1 m cost 10; loss 3 m cost 4): with 5 m to spend the best is to
    # take 2 m extra loss at the cheaper rate -- half of each link on the small pipe or one link all small;
    # cost 10 + 10 - 3 * 2 = 14 (slope -3 per m of head)
    net = rooted_network(3, [0, 1], [1, 2], roots=[0])
    loss = np.array([[1.0, 3.0], [1.0, 3.0]])
    cost = np.array([[10.0, 4.0], [10.0, 4.0]])
    r = least_cost_tree(net, loss, cost, np.ones((2, 2), bool), np.zeros(3), root_head_m=4.0)
    assert r.cost == pytest.approx(14.0)
    r = least_cost_tree(net, loss, cost, np.ones((2, 2), bool), np.zeros(3), root_head_m=3.0)
    assert r.cost == pytest.approx(17.0)                     # 1 m extra: 20 - 3
    r = least_cost_tree(net, loss, cost, np.ones((2, 2), bool), np.zeros(3), root_head_m=1.0)
    assert not r.feasible[0] and r.root_min_head_m[0] == pytest.approx(2.0)
    # free head, energy 2 per m (< 3): spend all the head that saves pipe -> 6 m, cost 8
    r = least_cost_tree(net, loss, cost, np.ones((2, 2), bool), np.zeros(3), root_weight=2.0)
    assert r.root_head_m[0] == pytest.approx(6.0) and r.cost == pytest.approx(8.0)
    # energy 4 per m (> 3): keep the head least, 2 m
    r = least_cost_tree(net, loss, cost, np.ones((2, 2), bool), np.zeros(3), root_weight=4.0)
    assert r.root_head_m[0] == pytest.approx(2.0) and r.cost == pytest.approx(20.0)


def test_hull_drops_points_above_the_chord_and_dominated_pipes():
    loss = np.array([[1.0, 2.0, 3.0, 4.0]])
    cost = np.array([[10.0, 8.0, 2.0, 5.0]])  # 2nd above the chord 1->3; 4th more loss, dearer
    off, p, h, c = link_hulls(loss, cost, np.ones((1, 4), bool))
    assert p.tolist() == [0, 2]


@settings(max_examples=15, deadline=None, derandomize=True)
@given(seed=st.integers(0, 10_000), n=st.integers(2, 10), P=st.integers(2, 5))
def test_one_pipe_per_link_and_monotone_variants(seed, n, P):
    net, loss, cost, ok, req, kw = random_problem(seed, n, P, False)
    t = least_cost_tree(net, loss, cost, ok, req, **kw)
    if not t.feasible.all():
        return
    whole = least_cost_highs(net, loss, cost, ok, req, split=False, **kw)
    assert whole.objective >= t.objective - 1e-6 * abs(t.objective)   # split is a relaxation
    assert np.all(whole.pipe_2 < 0)
    assert np.all(heads_from(net, whole, loss) >= req - 1e-6)
    key = np.arange(P, 0, -1).astype(float)  # pipe 0 the largest
    try:
        mono = least_cost_highs(net, loss, cost, ok, req, monotone_key=key, **kw)
    except InputError:
        return  # no monotone sizing fits the head
    assert mono.objective >= t.objective - 1e-6 * abs(t.objective)
    used_min = np.minimum(key[mono.pipe], np.where(mono.pipe_2 >= 0, key[np.maximum(mono.pipe_2, 0)], np.inf))
    used_max = np.maximum(key[mono.pipe], np.where(mono.pipe_2 >= 0, key[np.maximum(mono.pipe_2, 0)], -np.inf))
    above = net.parent_link[net.from_node]
    has = above >= 0
    assert np.all(used_max[has] <= used_min[above[has]] + 1e-9)


def test_korteweg_and_joukowsky_worked_values():
    # Korteweg wave speed a = 1/sqrt(rho (1/K + D/(E e))), Joukowsky dH = a dV / g (any hydraulics text);
    # water K = 2.2 GPa, PE100 E ~ 1.1 GPa short-term (both from memory): PE100 SDR11, D/e ~ 9 -> a ~ 340 m/s,
    # dV 1.34 m/s -> dH ~ 46 m
    a = korteweg_wave_speed_mps(9.0, 1.0, 1.1e9, bulk_modulus_pa=2.2e9, density_kgpm3=1000.0)
    assert float(a) == pytest.approx(340.3, abs=0.5)
    assert float(joukowsky_head_m(a, 1.34)) == pytest.approx(46.5, abs=0.3)
    # rigid pipe: the speed of sound in water, sqrt(K / rho) ~ 1483 m/s
    assert float(korteweg_wave_speed_mps(1.0, 1.0, 1e30, density_kgpm3=1000.0)) == pytest.approx(np.sqrt(2.2e6), rel=1e-9)
    assert material_modulus_pa(["PE100", "pvc-u"]).tolist() == [1.1e9, 3.0e9]
    with pytest.raises(InputError, match="modulus_gpa"):
        material_modulus_pa(["unobtainium"])


def test_slow_closure_scales_the_surge():
    # Michaud: t_c > 2L/a -> dH = 2 L V / (g t_c); at or below the period the full Joukowsky rise
    full = float(surge_head_m(340.0, 1.0, 1700.0))
    assert float(surge_head_m(340.0, 1.0, 1700.0, closing_time_s=5.0)) == pytest.approx(full)   # 2L/a = 10 s
    assert float(surge_head_m(340.0, 1.0, 1700.0, closing_time_s=20.0)) == pytest.approx(2 * 1700 * 1.0 / (9.80665 * 20))


# --- the design stage -------------------------------------------------------------------------

def tree_case(seed, n=40):
    rng = np.random.default_rng(seed)
    parent = np.array([rng.integers(max(0, i - 4), i) for i in range(1, n)])
    length = 80 + rng.random(n - 1) * 300
    return dict(xy=rng.random((n, 2)) * 2000, elevation_m=100 + rng.random(n) * 25,
                demand_lps=np.where(np.arange(n) > 0, rng.random(n) * 3, 0.0), node_id=[f"N{i}" for i in range(n)],
                from_node=parent, to_node=np.arange(1, n), length_m=length, surface_length_m=length, roots=[0])


def colebrook_heads(r, case, s):
    """HGL at every node from the design's pipes, Colebrook friction from fluids (independent code)."""
    lf = r.link_fields
    nu = r.summary["kinematic_viscosity_m2ps"]
    cat = default_catalog()
    rough = dict(zip(cat.name, cat.roughness_mm))
    q = lf["design_flow_lps"] / 1000
    loss = np.zeros(len(q))
    for k in range(len(q)):
        parts = [(lf["pipe"][k], lf["diameter_mm"][k] / 1000, lf["pipe_length_m"][k] - lf["length_2_m"][k])]
        if lf["pipe_2"][k]:
            parts.append((lf["pipe_2"][k], lf["diameter_2_mm"][k] / 1000, lf["length_2_m"][k]))
        for name, d, length in parts:
            if q[k] == 0 or length == 0:
                continue
            v = q[k] / (np.pi * d * d / 4)
            re = v * d / nu
            f = 64 / re if re < 2000 else fluids.friction.Colebrook(re, rough[name] / 1000 / d)
            loss[k] += (1 + s.minor_loss_factor) * f * length / d * v * v / (2 * 9.80665)
    n = len(case["elevation_m"])
    H = np.full(n, np.nan)
    H[0] = r.summary["source_hgl_m"][0]
    for _ in range(n):
        for k, (a, b) in enumerate(zip(case["from_node"], case["to_node"])):
            if np.isfinite(H[a]) and np.isnan(H[b]):
                H[b] = H[a] - loss[k]
    return H, loss


@pytest.mark.parametrize("seed", range(3))
def test_least_cost_design_meets_every_nodes_own_minimum_pressure(seed):
    case = tree_case(seed)
    n = len(case["elevation_m"])
    pmin = np.where(np.arange(n) % 3 == 0, 30.0, np.nan)   # hydrants asking 30 m, the rest the 14 m default
    s = DesignSettings()
    r = design_network("pressure", settings=s, min_pressure_m=pmin, **case)
    H, loss = colebrook_heads(r, case, s)
    np.testing.assert_allclose(r.link_fields["headloss_m"], loss, rtol=1e-6, atol=1e-9)
    need = np.where(np.isnan(pmin), 14.0, pmin)
    assert np.all(H - case["elevation_m"] >= need - 1e-6)
    np.testing.assert_allclose(r.node_fields["min_pressure_m"], need)
    assert r.failures == []
    assert r.summary["sizing"] == "least-cost"
    # at the source head the rule needs, least-cost sizing costs no more than the rule (same trench rule)
    rule = design_network("pressure", settings=DesignSettings(sizing="rule"), min_pressure_m=pmin, **case)
    at = design_network("pressure", settings=DesignSettings(source_head_m=rule.summary["source_hgl_m"][0]),
                        min_pressure_m=pmin, **case)
    lc, rc = (x.summary["pipe_cost"] + x.summary["trench_cost"] for x in (at, rule))
    assert lc <= rc + 1e-6
    assert at.failures == []


def test_high_class_pipe_chosen_where_the_low_class_would_burst():
    # two classes of the same bores: PN6 (61 m) cheap, PN16 (163 m) dear; a deep valley needs PN16 there
    cat = PipeCatalog(name=["A110 PN6", "A110 PN16", "A160 PN6", "A160 PN16"], nominal_mm=[110, 110, 160, 160],
                      inner_mm=[101.6, 90.0, 147.6, 130.8], roughness_mm=[0.007] * 4, hw_c=[150] * 4,
                      rating_m=[61.2, 163.2, 61.2, 163.2], cost_per_m=[8.0, 14.0, 16.0, 28.0], material=["PE100"] * 4)
    case = dict(xy=[[0, 0], [500, 0], [1000, 0]], elevation_m=[100.0, 40.0, 99.0], demand_lps=[0.0, 0.0, 6.0],
                node_id=["S", "V", "H"], from_node=[0, 1], to_node=[1, 2], length_m=[500.0, 500.0],
                surface_length_m=[500.0, 500.0], roots=[0])
    for sizing in ("least-cost", "rule"):
        r = design_network("pressure", settings=DesignSettings(pressure_catalog=cat, sizing=sizing, surge_check=False),
                           **case)
        assert r.failures == [], sizing
        assert all("PN16" in p for p in r.link_fields["pipe"]), sizing  # static ~ 75 m > 61 m in the valley
    # on flat ground the cheaper low class wins
    flat = dict(case, elevation_m=[100.0, 100.0, 99.0])
    r = design_network("pressure", settings=DesignSettings(pressure_catalog=cat, surge_check=False), **flat)
    assert all("PN6" in p for p in r.link_fields["pipe"]) and r.failures == []


def test_surge_enters_the_class_check():
    cat = PipeCatalog(name=["A110 PN6", "A110 PN16"], nominal_mm=[110, 110], inner_mm=[101.6, 90.0],
                      roughness_mm=[0.007] * 2, hw_c=[150] * 2, rating_m=[61.2, 163.2], cost_per_m=[8.0, 14.0],
                      material=["PE100"] * 2)
    case = dict(xy=[[0, 0], [500, 0]], elevation_m=[100.0, 70.0], demand_lps=[0.0, 8.0], node_id=["S", "H"],
                from_node=[0], to_node=[1], length_m=[500.0], surface_length_m=[500.0], roots=[0])
    kw = dict(pressure_catalog=cat, source_head_m=128.0)
    quiet = design_network("pressure", settings=DesignSettings(surge_check=False, **kw), **case)
    assert quiet.link_fields["pipe"][0] == "A110 PN6" and quiet.failures == []   # static 58 m < 61.2 m
    loud = design_network("pressure", settings=DesignSettings(**kw), **case)
    # PN6: D/e = 101.6/4.2 -> a ~ 212 m/s, V 0.99 m/s -> ~21 m of surge: 79 m > 61.2 m
    assert loud.link_fields["pipe"][0] == "A110 PN16" and loud.failures == []
    assert loud.link_fields["surge_head_m"][0] == pytest.approx(340.3 * 8e-3 / (np.pi * 0.09**2 / 4) / 9.80665, rel=0.01)
    slow = design_network("pressure", settings=DesignSettings(valve_closing_time_s=60.0, **kw), **case)
    assert slow.link_fields["pipe"][0] == "A110 PN6"     # 2L/a ~ 4.7 s << 60 s: under 2 m of rise


@pytest.mark.parametrize("kw", [dict(sizing="cheapest"), dict(sizing_solver="glpk"), dict(velocity_min_mps=2.0),
                                dict(pump_efficiency=1.5), dict(valve_closing_time_s=0.0), dict(sizing_split="yes")])
def test_bad_sizing_settings_name_the_option(kw):
    with pytest.raises(InputError, match=list(kw)[0]):
        DesignSettings(**kw)


def test_min_pressure_field_reaches_the_design(tmp_path):
    from mainspan.pipeline.layout import plan_layout
    from mainspan.sites.read import read_sites

    p = tmp_path / "s.csv"
    p.write_text("id,x,y,role,q,pmin\nS,0,0,source,0,\nA,300,0,demand,2,30\nB,600,50,demand,3,\n"
                 "C,300,400,demand,1,25\n")
    sites = read_sites(p, sites_crs="EPSG:32633", demand_field="q", min_pressure_field="pmin")
    lay = plan_layout(sites, system="pressure")
    want = {"S": 14.0, "A": 30.0, "B": 14.0, "C": 25.0}
    got = dict(zip(lay.nodes["node_id"], lay.nodes["min_pressure_m"]))
    assert got == pytest.approx(want)
    assert np.all(lay.nodes["pressure_head_m"] >= lay.nodes["min_pressure_m"] - 1e-6)
    p.write_text("id,x,y,role,q,pmin\nS,0,0,source,0,\nA,300,0,demand,2,high\n")
    with pytest.raises(InputError, match="'A'.*'pmin'"):
        read_sites(p, sites_crs="EPSG:32633", demand_field="q", min_pressure_field="pmin")


def test_design_variants_one_pipe_per_link_and_monotone_sizes():
    # HiGHS solves these variants inside design_network (sizing_solver auto, small tree)
    case = tree_case(5, n=25)
    base = design_network("pressure", settings=DesignSettings(), **case)
    whole = design_network("pressure", settings=DesignSettings(sizing_split=False), **case)
    assert whole.summary["sizing_solver"] == "highs" and whole.failures == []
    assert set(whole.link_fields["pipe_2"]) == {""}
    assert whole.summary["sizing_optimum"] >= base.summary["sizing_optimum"] - 1e-6
    mono = design_network("pressure", settings=DesignSettings(sizing_monotone=True), **case)
    assert mono.failures == []
    lf = mono.link_fields
    nom = dict(zip(default_catalog().name, default_catalog().nominal_mm))
    small = [min(nom[a], nom.get(b, np.inf)) for a, b in zip(lf["pipe"], lf["pipe_2"])]
    large = [max(nom[a], nom.get(b, -np.inf)) for a, b in zip(lf["pipe"], lf["pipe_2"])]
    link_to = {int(t): k for k, t in enumerate(lf["to_node"])}
    for k, f in enumerate(lf["from_node"]):
        if int(f) in link_to:   # the link feeding this one must be at least as large
            assert small[link_to[int(f)]] >= large[k]
    # the tree method on a large tree repairs instead (forced here with highs_max_links=0)
    rep = design_network("pressure", settings=DesignSettings(sizing_monotone=True, highs_max_links=0), **case)
    assert rep.summary["sizing_solver"] == "tree" and rep.failures == []
    assert any("not proven optimal" in t for t in rep.summary["sizing_notes"])


def test_forest_each_source_sized_and_priced():
    # two sources, each with its own tree: both meet every pressure; each pump station is its own bill row
    case = tree_case(7, n=20)
    case["from_node"] = np.where(np.arange(19) == 9, 0, case["from_node"])   # keep the trees apart at node 10
    f, t = case["from_node"].copy(), case["to_node"].copy()
    keep = t != 10
    case.update(from_node=f[keep], to_node=t[keep], length_m=case["length_m"][keep],
                surface_length_m=case["surface_length_m"][keep], roots=[0, 10])
    r = design_network("pressure", settings=DesignSettings(), **case)
    assert r.failures == [] and len(r.summary["source_hgl_m"]) == 2
    assert np.all(r.node_fields["pressure_head_m"] >= 14.0 - 1e-6)
    q = r.quantities
    stations = [i for c, i in zip(q["category"], q["item"]) if c == "pump station"]
    assert len(stations) == 2 and all(" at " in s for s in stations)


def random_forest(seed, n, P, R):
    """A forest of R random trees with free, priced and capped source heads (caps often binding)."""
    rng = np.random.default_rng(seed)
    net0, loss, cost, ok, req, _ = random_problem(seed, n, P, True)
    # cut the tree into R trees: nodes 1..R-1 become roots (their parent links dropped)
    keep = net0.to_node >= R
    net = rooted_network(n, net0.from_node[keep], net0.to_node[keep], roots=np.arange(R))
    L = net.n_links
    loss, cost, ok = loss[:L], cost[:L], ok[:L]
    w = rng.uniform(0, 5, R) * (rng.random(R) < 0.8)          # some sources at zero energy price
    least = req + 0.0
    # caps between the least head a tree needs and well above it, so some bind and some do not
    kw = dict(root_weight=w, root_cap_m=float(req.max()) + rng.uniform(5, 60, R))
    return net, loss, cost, ok, req, kw, least


@settings(max_examples=40, deadline=None, derandomize=True)
@given(seed=st.integers(0, 10_000), n=st.integers(6, 40), P=st.integers(2, 7), R=st.integers(2, 4))
def test_tree_method_matches_highs_on_forests_with_binding_caps(seed, n, P, R):
    # scipy.optimize.milp (HiGHS) on the whole forest; the tree method folds steep segments per source
    # and escalates the fold's price where a cap binds, so capped and uncapped sources are both covered
    net, loss, cost, ok, req, kw, _ = random_forest(seed, n, P, R)
    t = least_cost_tree(net, loss, cost, ok, req, **kw)
    if not t.feasible.all():
        with pytest.raises(InputError):
            least_cost_highs(net, loss, cost, ok, req, **kw)
        return
    h = least_cost_highs(net, loss, cost, ok, req, **kw)
    assert t.objective == pytest.approx(h.objective, rel=1e-6, abs=1e-9)
    assert np.all(t.root_head_m <= kw["root_cap_m"] + 1e-9)
    assert np.all(heads_from(net, t, loss) >= req - 1e-7)


def test_solving_some_sources_again_keeps_the_others():
    # solve_roots/previous: re-solving source 1 alone, on a result where it was solved with other
    # pipes allowed, gives the same trees as one solve of everything
    from mainspan.hydraulics.sizing import merge_trees, tree_objectives

    net, loss, cost, ok, req, kw, _ = random_forest(11, 30, 5, 3)
    full = least_cost_tree(net, loss, cost, ok, req, **kw)
    ok2 = ok.copy()
    ok2[:, -1] = False                                         # a different problem for every source
    ok2[~ok2.any(axis=1), 0] = True
    other = least_cost_tree(net, loss, cost, ok2, req, **kw)
    again = least_cost_tree(net, loss, cost, ok, req, **kw, solve_roots=[False, True, False], previous=other)
    per_full, per_other, per_again = (tree_objectives(net, cost, x, kw["root_weight"]) for x in (full, other, again))
    assert per_again[1] == pytest.approx(per_full[1]) and per_again[[0, 2]] == pytest.approx(per_other[[0, 2]])
    mixed = merge_trees(net, loss, cost, other, full, [False, True, False], kw["root_weight"])
    assert mixed.objective == pytest.approx(again.objective)
    assert mixed.objective == pytest.approx(per_again.sum())


def test_binding_classes_say_what_is_proved():
    # the valley case: without class limits the cheap PN6 pipes are chosen, but they cannot hold the
    # valley's static head, so classes bind; the summary says what is proved, and the relaxation's
    # objective bounds the design's from below (a relaxation can only be cheaper)
    cat = PipeCatalog(name=["A110 PN6", "A110 PN16", "A160 PN6", "A160 PN16"], nominal_mm=[110, 110, 160, 160],
                      inner_mm=[101.6, 90.0, 147.6, 130.8], roughness_mm=[0.007] * 4, hw_c=[150] * 4,
                      rating_m=[61.2, 163.2, 61.2, 163.2], cost_per_m=[8.0, 14.0, 16.0, 28.0], material=["PE100"] * 4)
    case = dict(xy=[[0, 0], [500, 0], [1000, 0]], elevation_m=[100.0, 40.0, 99.0], demand_lps=[0.0, 0.0, 6.0],
                node_id=["S", "V", "H"], from_node=[0, 1], to_node=[1, 2], length_m=[500.0, 500.0],
                surface_length_m=[500.0, 500.0], roots=[0])
    b = design_network("pressure", settings=DesignSettings(pressure_catalog=cat, surge_check=False), **case)
    assert b.summary["sizing_classes_bind"] and b.summary["sizing_proof"].startswith("classes bind")
    assert b.summary["sizing_lower_bound"] <= b.summary["sizing_objective"] + 1e-9
    assert b.summary["sizing_gap_pct"] >= 0.0
    flat = dict(case, elevation_m=[100.0, 100.0, 99.0])
    r = design_network("pressure", settings=DesignSettings(pressure_catalog=cat, surge_check=False), **flat)
    assert not r.summary["sizing_classes_bind"] and r.summary["sizing_proof"].startswith("optimal")
    assert "sizing_lower_bound" not in r.summary
