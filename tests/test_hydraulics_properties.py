"""Design rules hold on random trees over random ground (seeded loops).

The rules checked are those of the Recommended Standards for Wastewater
Facilities 2014 (minimum slope by diameter, 0.6 m/s flowing full) and Water
Works §8.2.1 (14 m minimum pressure), with capacities recomputed by
fluids.open_flow.V_Manning and friction by fluids.friction.Colebrook.
"""

from __future__ import annotations

import fluids
import networkx as nx
import numpy as np
import pytest

from mainspan.hydraulics import DesignSettings, design_network


def random_case(seed, n=40):
    rng = np.random.default_rng(seed)
    parent = np.array([rng.integers(0, i) for i in range(1, n)])
    xy = rng.random((n, 2)) * 2000
    # ground rising away from the outlet/source at node 0, with noise
    z = 50 + 0.01 * np.hypot(*(xy - xy[0]).T) + rng.normal(0, 1.5, n)
    length = np.hypot(*(xy[1:] - xy[parent]).T) + 1.0
    k = rng.integers(0, 4, n - 1)  # interior profile stations per link
    off = np.concatenate([[0], np.cumsum(k)])
    link = np.repeat(np.arange(n - 1), k)
    st = rng.random(link.size) * length[link]
    frac = st / length[link]
    gr = z[parent][link] * (1 - frac) + z[1:][link] * frac + rng.normal(0, 0.8, link.size)
    demand = rng.random(n) * 3
    return dict(xy=xy, elevation_m=z, demand_lps=demand, node_id=[f"n{i}" for i in range(n)], from_node=parent,
                to_node=np.arange(1, n), length_m=length, surface_length_m=length * 1.01, roots=[0],
                profile_offsets=off, profile_station_m=st, profile_ground_m=gr)


@pytest.mark.parametrize("seed", range(6))
def test_gravity_rules_hold(seed):
    case = random_case(seed)
    s = DesignSettings(gravity_max_depth_m=4.0)
    r = design_network("gravity", settings=s, **case)
    lf, nf, ap = r.link_fields, r.node_fields, r.access_points
    d = lf["diameter_mm"] / 1000
    top = (lf["diameter_mm"] + lf["outer_mm"]) / 2000      # invert to the outside top of the pipe
    L = case["length_m"]
    assert np.all(lf["slope_pct"] >= lf["min_slope_pct"] - 1e-9)
    # minimum slope of the standard for each diameter, and 0.6 m/s flowing full
    table = dict(s.gravity_min_slope_table_pct)
    assert all(m >= table[nom] - 1e-12 for m, nom in zip(lf["min_slope_pct"], lf["nominal_mm"]))
    v_full = np.array([fluids.open_flow.V_Manning(dd / 4, sl / 100, nn)
                       for dd, sl, nn in zip(d, lf["slope_pct"], lf["manning_n"])])
    np.testing.assert_allclose(lf["velocity_full_mps"], v_full)
    assert np.all(v_full >= 0.6 - 1e-9)
    assert np.all(lf["capacity_lps"] >= lf["design_flow_lps"] * (1 - 1e-9))   # steepened if no pipe is big enough
    # the pipe is straight between grade breaks: rebuild it from the access-point table alone, then
    # check cover (to the outside of the pipe) over every profile station, the grades and the spacing
    off, st, gr = case["profile_offsets"], case["profile_station_m"], case["profile_ground_m"]
    z = case["elevation_m"]
    for k in range(L.size):
        here = ap["link"] == k
        brk = here & (ap["kind"] == "grade break")
        lift = here & (ap["kind"] == "lift station") & (ap["node"] == "")   # inside the link: the invert jumps up there
        assert lift.sum() <= 1
        o = np.argsort(ap["chainage_m"][brk])
        ch = np.r_[0.0, ap["chainage_m"][brk][o], L[k]]          # from the downstream (from_node) end
        inv = np.r_[lf["invert_down_m"][k], ap["invert_m"][brk][o], lf["invert_up_m"][k]]
        x = ap["chainage_m"][lift][0] if lift.any() else np.inf
        parts = [(ch <= x, ap["invert_m"][lift][0] if lift.any() else None),
                 (ch >= x, ap["invert_m"][lift][0] - ap["lift_m"][lift][0] if lift.any() else None)]
        sta = np.r_[0.0, st[off[k]:off[k + 1]], L[k]]
        g = np.r_[z[case["from_node"][k]], gr[off[k]:off[k + 1]], z[k + 1]]
        pipe = np.full(sta.size, np.nan)
        flattest = np.inf
        for side, (m, at_x) in enumerate(parts):
            cs, iv = ch[m], inv[m]
            if at_x is not None:           # the lift station's own invert on this side
                cs, iv = np.r_[cs, x], np.r_[iv, at_x]
                srt = np.argsort(cs, kind="stable")
                cs, iv = cs[srt], iv[srt]
            if cs.size < 2:
                continue
            grades = np.diff(iv) / np.diff(cs)
            assert np.all(grades >= lf["min_slope_pct"][k] / 100 * (1 - 1e-9))
            flattest = min(flattest, grades.min())
            sel = (sta <= x) if side == 0 else (sta > x)
            pipe[sel] = np.interp(sta[sel], cs, iv)
        assert flattest == pytest.approx(lf["slope_pct"][k] / 100)
        assert np.all(g - pipe - top[k] >= s.gravity_cover_m - 1e-6)
        assert lf["depth_max_m"][k] == pytest.approx(np.max(g - pipe))
        assert lf["cover_min_m"][k] == pytest.approx(np.min(g - pipe - top[k]))
        inside = here & np.isin(ap["kind"], ["grade break", "spacing"])
        pts = np.sort(np.r_[0.0, ap["chainage_m"][inside], L[k]])
        assert np.all(np.diff(pts) <= s.access_spacing_m + 1e-6)     # RSWFS 2014: at most 120 m apart
    # junctions: the outgoing invert is below every incoming invert by the drop, crowns not higher,
    # never a smaller pipe downstream -- except where a lift station resets the invert
    lifted = nf["structure"] == "lift station"
    for k in range(L.size):
        node = case["to_node"][k]
        incoming = np.flatnonzero(case["from_node"] == node)
        for j in incoming:
            assert d[k] >= d[j]
            if lifted[node]:      # pumped up from the lowest incoming invert
                assert lf["invert_up_m"][k] > lf["invert_down_m"][incoming].min()
                continue
            assert lf["invert_up_m"][k] <= lf["invert_down_m"][j] - s.junction_drop_m + 1e-9
            assert lf["invert_up_m"][k] + d[k] <= lf["invert_down_m"][j] + d[j] + 1e-9
            if lf["invert_down_m"][j] - lf["invert_up_m"][k] > s.drop_manhole_m + 1e-9:
                assert nf["structure"][node] == "drop manhole"
    # grade walk along every leaf-to-outlet path found by networkx (not by mainspan's own network
    # module): the invert falls at every link and every junction, except where a lift station pumps
    # it up; the design flow never falls going downstream
    g_nx = nx.DiGraph()
    g_nx.add_edges_from((int(b), int(a), {"k": k}) for k, (a, b) in
                        enumerate(zip(case["from_node"], case["to_node"])))
    leaves = [v for v in g_nx.nodes if g_nx.in_degree(v) == 0]
    for leaf in leaves:
        path = nx.shortest_path(g_nx, leaf, 0)
        ks = [g_nx.edges[a, b]["k"] for a, b in zip(path[:-1], path[1:])]
        for up, down in zip(ks[:-1], ks[1:]):
            assert lf["design_flow_lps"][down] >= lf["design_flow_lps"][up] - 1e-9
            if lifted[path[ks.index(down)]] or np.any((ap["link"] == up) & (ap["kind"] == "lift station")):
                continue
            assert lf["invert_up_m"][down] <= lf["invert_down_m"][up] + 1e-9
        for k in ks:
            if not np.any((ap["link"] == k) & (ap["kind"] == "lift station") & (ap["node"] == "")):
                assert lf["invert_down_m"][k] < lf["invert_up_m"][k]
    # flags agree with the numbers
    assert np.array_equal(["too_deep" in c for c in lf["checks"]], lf["depth_max_m"] > 4.0 + 1e-9)


@pytest.mark.parametrize("seed", range(4))
def test_pressure_rules_hold(seed):
    case = random_case(100 + seed)
    r = design_network("pressure", settings=DesignSettings(sizing="rule"), **case)
    lf, nf = r.link_fields, r.node_fields
    # grade falls in the flow direction by the head loss; every node and profile point >= 14 m
    np.testing.assert_allclose(lf["hgl_from_m"] - lf["hgl_to_m"], lf["headloss_m"])
    assert np.all(lf["headloss_m"] >= 0)
    assert nf["pressure_head_m"].min() >= 14.0 - 1e-9
    assert lf["pressure_min_m"].min() == pytest.approx(14.0) or nf["pressure_head_m"].min() == pytest.approx(14.0)
    # velocity cap and head-loss budget, with Colebrook from fluids
    d = lf["diameter_mm"] / 1000
    q = lf["design_flow_lps"] / 1000
    v = q / (np.pi * d * d / 4)
    np.testing.assert_allclose(lf["velocity_mps"], v)
    # water at 20 °C (the default): 1.0016 mPa s (ISO/TR 3666:1998) / 998.21 kg/m3
    # = 1.0034e-6 m2/s (from memory); the 1978 correlation used by mainspan gives 1.0038e-6
    nu = 1.0034e-6
    assert r.summary["kinematic_viscosity_m2ps"] == pytest.approx(nu, rel=1e-3)
    re = v * d / nu
    # laminar 64/Re below Re 2000 (the documented switch), Colebrook above
    f = np.array([64 / rr if rr < 2000 else fluids.friction.Colebrook(rr, 0.007e-3 / dd) for rr, dd in zip(re, d)])
    hl = 1.1 * f * (case["surface_length_m"] / d) * v * v / (2 * 9.80665)
    # 0.04 % in viscosity moves a laminar friction factor (64 nu / V D) by 0.04 % and a
    # turbulent one by less
    np.testing.assert_allclose(lf["headloss_m"], hl, rtol=5e-4)
    ok = lf["checks"] != "no_pipe"
    assert np.all(v[ok] <= 1.5 + 1e-12)
    assert np.all((hl / case["surface_length_m"] * 1000)[ok] <= 10.0 + 1e-9)
