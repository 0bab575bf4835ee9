"""Fittings of pressure mains: positions solved by hand on small profiles and trees."""

import numpy as np
import pytest

from mainspan.hydraulics import DesignSettings, design_network
from mainspan.hydraulics.fittings import place_fittings
from mainspan.graph.network import rooted_network


def _chain(ground_profiles, xy, nominal=110.0, **kw):
    """A single main of len(ground_profiles) links, each profile sampled every 50 m."""
    L = len(ground_profiles)
    net = rooted_network(L + 1, np.arange(L), np.arange(1, L + 1), roots=[0])
    length = np.hypot(*np.diff(np.asarray(xy, float), axis=0).T)
    off = np.concatenate([[0], np.cumsum([len(g) for g in ground_profiles])])
    st = np.concatenate([np.linspace(0, length[k], len(g)) for k, g in enumerate(ground_profiles)])
    gr = np.concatenate(ground_profiles).astype(float)
    return place_fittings(net, np.asarray(xy, float), length, off, st, gr, np.full(L, nominal), np.ones(L), **kw)


def _of(f, kind):
    m = f["type"] == kind
    return list(zip(f["link"][m].tolist(), np.round(f["chainage_m"][m], 6).tolist()))


def test_v_shaped_profile_gets_one_washout_at_the_bottom():
    # ground 20 -> 10 at 150 m (inside link 1) -> 20: by hand the only low point is link 1, chainage 50 m
    f = _chain([[20, 18, 16], [14, 10, 14], [16, 18, 20]], [[0, 0], [100, 0], [200, 0], [300, 0]], cover_m=1.0)
    assert _of(f, "washout") == [(1, 50.0)]
    assert _of(f, "air_valve") == []
    i = np.flatnonzero(f["type"] == "washout")[0]
    assert (f["x"][i], f["y"][i]) == (150.0, 0.0) and f["node"][i] == ""
    # straight line: no bends; one dead end at the far node; no tee, no isolation valve
    assert _of(f, "thrust_block") == [(2, 100.0)] and _of(f, "isolation_valve") == []


def test_hump_profile_high_point_and_prominence():
    # ground 10 -> 13 at node 1 -> 10 -> 11.5 -> 10: a 3 m hump at node 1 and a 1.5 m one at 300 m
    prof = [[10, 11.5, 13], [13, 11.5, 10], [10, 11.5, 10]]
    xy = [[0, 0], [100, 0], [200, 0], [400, 0]]
    f = _chain(prof, xy, min_prominence_m=1.0)
    # by hand: highs at link 0 end (node 1, 100 m) and link 2 chainage 100 m; lows between them at node 2
    assert _of(f, "air_valve") == [(0, 100.0), (2, 100.0)]
    assert _of(f, "washout") == [(1, 100.0)]
    assert f["node"][(f["type"] == "air_valve")][0] == "1"
    # a prominence of 2 m keeps only the 3 m hump (the 1.5 m rise after the low is too small)
    g = _chain(prof, xy, min_prominence_m=2.0)
    assert _of(g, "air_valve") == [(0, 100.0)] and _of(g, "washout") == []


def test_tee_branch_valves_thrust_blocks_bends_and_prv():
    # source 0 -> 1 (tee) -> 2 straight on, 1 -> 3 branch turning 90°, 3 -> 4 bending 45°, 2 -> 5 bending 5°
    xy = np.array([[0, 0], [100, 0], [200, 0], [100, 100], [200, 200], [300, 8.75]], float)
    frm, to = np.array([0, 1, 1, 3, 2]), np.array([1, 2, 3, 4, 5])
    net = rooted_network(6, frm, to, roots=[0])
    L = 5
    length = np.hypot(*(xy[to] - xy[frm]).T)
    off = np.arange(0, 2 * L + 1, 2)
    st = np.ravel(np.c_[np.zeros(L), length])
    gr = np.zeros(2 * L)
    p_max = np.array([30.0, 45.0, 60.0, 70.0, 50.0])
    f = place_fittings(net, xy, length, off, st, gr, np.array([160, 110, 90, 90, 63.0]), np.array([9, 5, 4, 4, 3.0]),
                       bend_angle_deg=11.25, max_service_pressure_m=55.0, pressure_max_m=p_max,
                       node_id=list("SABCDE"))
    # isolation valves: one on each link leaving the tee at node A (links 1 and 2), at chainage 0
    assert _of(f, "isolation_valve") == [(1, 0.0), (2, 0.0)]
    tb = sorted(f["node"][f["type"] == "thrust_block"].tolist())
    # thrust blocks by hand: tee A, bend C (45°), dead ends D and E; not B (5° < 11.25°)
    assert tb == ["A", "C", "D", "E"]
    assert f["size_mm"][(f["type"] == "thrust_block") & (f["node"] == "A")][0] == 160
    # PRV: links over 55 m whose parent is not: link 2 (A->C) only; link 3 follows an over-pressure link
    assert _of(f, "prv") == [(2, 0.0)]


def test_design_writes_fittings_priced_in_the_bill(tmp_path):
    xy = np.array([[0, 0], [100, 0], [200, 0], [100, 100]], float)
    r = design_network("pressure", xy=xy, elevation_m=[10.0, 20.0, 5.0, 12.0], demand_lps=[0.0, 1.0, 2.0, 3.0],
                       node_id=["s", "a", "b", "c"], from_node=[0, 1, 1], to_node=[1, 2, 3],
                       length_m=[100.0, 100.0, 100.0], surface_length_m=[100.0, 100.0, 100.0], roots=[0],
                       settings=DesignSettings(max_service_pressure_m=25.0))
    fit = r.fittings
    counts = r.summary["fittings"]
    assert counts["air_valve"] == 1 and counts["isolation_valve"] == 2 and counts["prv"] >= 1
    q = r.quantities
    rows = q["category"] == "fitting"
    assert q["count"][rows].sum() == len(fit["type"])
    from mainspan.hydraulics.prices import default_prices
    p = default_prices()
    want = sum(float(p.fitting_cost(k, s)) for k, s in zip(fit["type"], fit["size_mm"]))
    assert q["total_cost"][rows].sum() == pytest.approx(want)
    assert set(fit) == {"type", "size_mm", "x", "y", "link", "chainage_m", "node"}
