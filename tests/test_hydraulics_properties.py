"""Design rules hold on random trees over random ground (seeded loops).

The rules checked are those of the Recommended Standards for Wastewater
Facilities 2014 (minimum slope by diameter, 0.6 m/s flowing full) and Water
Works §8.2.1 (14 m minimum pressure), with capacities recomputed by
fluids.open_flow.V_Manning and friction by fluids.friction.Colebrook.
"""

from __future__ import annotations

import fluids
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
    lf = r.link_fields
    d = lf["diameter_mm"] / 1000
    L = case["length_m"]
    # grade, inverts and length agree: one straight grade up to the access spacing; longer
    # links may break grade at their access points, and slope_pct is the flattest segment
    fall = lf["invert_up_m"] - lf["invert_down_m"]
    short = L <= s.access_spacing_m
    np.testing.assert_allclose(fall[short], lf["slope_pct"][short] / 100 * L[short])
    assert np.all(fall[~short] >= lf["slope_pct"][~short] / 100 * L[~short] - 1e-9)
    assert np.all(lf["slope_pct"] >= lf["min_slope_pct"] - 1e-9)
    # minimum slope of the standard for each diameter, and 0.6 m/s flowing full
    table = dict(s.gravity_min_slope_table_pct)
    assert all(m >= table[nom] - 1e-12 for m, nom in zip(lf["min_slope_pct"], lf["nominal_mm"]))
    v_full = np.array([fluids.open_flow.V_Manning(dd / 4, sl / 100, nn)
                       for dd, sl, nn in zip(d, lf["slope_pct"], lf["manning_n"])])
    np.testing.assert_allclose(lf["velocity_full_mps"], v_full)
    assert np.all(v_full >= 0.6 - 1e-9)
    ok = ~np.char.startswith(lf["checks"].astype(str), "no_pipe")
    assert np.all(lf["capacity_lps"][ok] >= lf["design_flow_lps"][ok] * (1 - 1e-12))
    # cover over the whole profile (ends and interior stations)
    off, st, gr = case["profile_offsets"], case["profile_station_m"], case["profile_ground_m"]
    for k in range(L.size):
        if L[k] <= s.access_spacing_m:      # one straight grade
            sta = np.r_[0.0, st[off[k]:off[k + 1]], L[k]]  # from the downstream (from_node) end
            g = np.r_[case["elevation_m"][case["from_node"][k]], gr[off[k]:off[k + 1]],
                      case["elevation_m"][k + 1]]
            inv = lf["invert_down_m"][k] + lf["slope_pct"][k] / 100 * sta
            assert np.all(g - inv - d[k] >= s.gravity_cover_m - 1e-9)
            assert lf["depth_max_m"][k] == pytest.approx(np.max(g - inv))
            assert lf["cover_min_m"][k] == pytest.approx(np.min(g - inv - d[k]))
            continue
        # grade breaks at the access points: rebuild segment by segment in plain Python
        # (the rule of the Recommended Standards: a manhole at every change of grade)
        n_seg = int(np.ceil(L[k] / s.access_spacing_m - 1e-12))
        seg = L[k] / n_seg
        # stations from the upstream end, with both ends at their node's ground
        up = np.r_[0.0, L[k] - st[off[k]:off[k + 1]], L[k]]
        g = np.r_[case["elevation_m"][k + 1], gr[off[k]:off[k + 1]],
                  case["elevation_m"][case["from_node"][k]]]
        top, inv = lf["invert_up_m"][k], np.full(up.size, np.nan)
        smin = lf["min_slope_pct"][k] / 100
        for t in range(n_seg):
            a, b = t * seg, (t + 1) * seg
            inside = (up > a + 1e-9) & (up <= b + 1e-9)
            need = ((top - (g[inside] - s.gravity_cover_m - d[k])) / (up[inside] - a)).max(
                initial=smin)
            sl = max(smin, need)
            inv[(up >= a - 1e-9) & ((up <= b + 1e-9) | (t == n_seg - 1))] = top - sl * (
                up[(up >= a - 1e-9) & ((up <= b + 1e-9) | (t == n_seg - 1))] - a)
            top -= sl * seg
        assert lf["invert_down_m"][k] == pytest.approx(top)
        assert np.all(g - inv - d[k] >= s.gravity_cover_m - 1e-9)
        ends = [case["elevation_m"][k + 1] - lf["invert_up_m"][k],
                case["elevation_m"][case["from_node"][k]] - top]
        assert lf["depth_max_m"][k] == pytest.approx(np.max(np.r_[g - inv, ends]))
    # junctions: the outgoing invert is below every incoming invert by the drop, crowns not higher
    for k in range(L.size):
        node = case["to_node"][k]
        incoming = np.flatnonzero(case["from_node"] == node)
        for j in incoming:
            assert lf["invert_up_m"][k] <= lf["invert_down_m"][j] - s.junction_drop_m + 1e-9
            assert lf["invert_up_m"][k] + d[k] <= lf["invert_down_m"][j] + d[j] + 1e-9
    # flags agree with the numbers
    assert np.array_equal(["too_deep" in c for c in lf["checks"]], lf["depth_max_m"] > 4.0 + 1e-9)


@pytest.mark.parametrize("seed", range(4))
def test_pressure_rules_hold(seed):
    case = random_case(100 + seed)
    r = design_network("pressure", settings=DesignSettings(), **case)
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
