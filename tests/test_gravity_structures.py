"""Gravity structures: drop manholes, lift stations, a fixed outlet invert, pipe sizes, outside diameters, bill rows.

Outside references: Recommended Standards for Wastewater Facilities (2014) -- drop pipe where an
incoming invert is 24 in (0.6 m) or more above the outgoing one (clause from memory); ASTM D3034
SDR 35 PVC sewer pipe outside diameters and ASTM C76 Wall B thickness (from memory); P = rho g Q H / eta
for the pump power; hand calculation for the inverts.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from mainspan.errors import DataFileError
from mainspan.hydraulics import DesignSettings, design_network
from mainspan.hydraulics.catalog import default_gravity_catalog, read_catalog
from mainspan.hydraulics.prices import default_prices

TOP = 0.2073            # 8 in PVC SDR 35: bore 201.2 mm + wall 6.1 mm (OD 213.4 mm / 35)


def tree(z, parent, lengths, demand, *, profile=None, settings=None):
    n = len(z)
    x = np.arange(n) * 50.0
    off, sta, gr = [0], [], []
    for k in range(n - 1):
        pts = sorted((profile or {}).get(k, []))
        sta += [p[0] for p in pts]
        gr += [p[1] for p in pts]
        off.append(len(sta))
    L = np.asarray(lengths, float)
    return design_network(
        "gravity", xy=np.column_stack([x, np.zeros(n)]), elevation_m=np.asarray(z, float), demand_lps=np.asarray(demand, float),
        node_id=[f"N{i}" for i in range(n)], from_node=np.asarray(parent), to_node=np.arange(1, n), length_m=L,
        surface_length_m=L, roots=[0], profile_offsets=np.array(off), profile_station_m=np.array(sta, float),
        profile_ground_m=np.array(gr, float), settings=settings)


def bill_rows(r, category):
    q = r.quantities
    m = q["category"] == category
    return q["item"][m].tolist(), q["quantity"][m], q["unit_cost"][m]


def test_drop_manhole_flagged_and_priced():
    # Y at N1 (ground 10 everywhere): a 300 m branch from N2 arrives at 8.8927 - 1.2 = 7.6927, a 20 m branch
    # from N3 at 8.8927 - 0.08 = 8.8127; the outgoing main leaves at 7.6927 - 0.03 = 7.6627, so N3's branch
    # drops 1.15 m > 0.6 m (RSWFS 2014, 24 in): a drop manhole, priced base + per m x depth + drop extra
    r = tree([10.0] * 4, [0, 1, 1], [100.0, 300.0, 20.0], [0.0, 0.0, 1.0, 1.0])
    nf = r.node_fields
    assert nf["structure"].tolist() == ["outlet", "drop manhole", "manhole", "manhole"]
    assert nf["drop_m"][1] == pytest.approx(8.8127 - 7.6627)
    depth = 10.0 - 7.6627
    assert nf["depth_m"][1] == pytest.approx(depth)
    items, qty, unit = bill_rows(r, "drop manhole")
    assert items == ["drop manhole, 1.5–3 m deep"] and qty.tolist() == [1.0]
    p = default_prices()
    assert unit[0] == pytest.approx(float(p.manhole_cost(depth, drop=True)))
    assert unit[0] == pytest.approx(p.manhole_base + p.manhole_per_m * depth + p.drop_manhole_extra)
    ap = r.access_points
    drop = ap["kind"] == "drop manhole"
    assert ap["node"][drop].tolist() == ["N1"] and ap["drop_m"][drop] == pytest.approx([1.15])
    # a higher limit: a plain manhole; drops are structures, never failures
    r2 = tree([10.0] * 4, [0, 1, 1], [100.0, 300.0, 20.0], [0.0, 0.0, 1.0, 1.0],
              settings=DesignSettings(drop_manhole_m=1.2))
    assert r2.node_fields["structure"][1] == "manhole"
    assert not any("drop" in f for f in r.failures)
    # every manhole is in the bill: nodes (not the outlet) plus access points inside links
    q = r.quantities
    counted = q["quantity"][np.isin(q["category"], ["manhole", "drop manhole"])].sum()
    assert counted == r.summary["n_manholes"] == 3 + r.summary["n_access_points"]


def valley(settings=None):
    # N2 -> N1 crosses a valley 7 m deep halfway (100 m link); N1 -> N0 is flat; 5 L/s from N2.
    # Hand: the pipe clears the valley floor at 3.0 - 0.9 - 0.2073 = 1.8927 and reaches N1 at 1.6927,
    # 8.31 m deep; by gravity N1 -> N0 would run 8.3 to 8.7 m deep.
    return tree([10.0, 10.0, 10.0], [0, 1], [100.0, 100.0], [0.0, 0.0, 5.0], profile={1: [(50.0, 3.0)]},
                settings=settings)


def test_lift_station_where_gravity_would_be_too_deep():
    r = valley()
    lf, nf = r.link_fields, r.node_fields
    assert lf["invert_down_m"][1] == pytest.approx(1.6927)
    assert nf["structure"][1] == "lift station"
    # the station pumps from the invert the outgoing main would have by gravity (1.6927 less the 0.03 m
    # junction drop) back to minimum cover 8.8927; head = lift + 1.5 m allowance
    lift = 8.8927 - (1.6927 - 0.03)
    assert nf["lift_m"][1] == pytest.approx(lift)
    assert lf["invert_up_m"][0] == pytest.approx(8.8927)
    kw = 1000 * 9.81 * 0.005 * (lift + 1.5) / 0.6 / 1000       # P = rho g Q H / eta
    (st,) = r.summary["lift_stations"]
    assert st["power_kw"] == pytest.approx(kw) and st["node"] == "N1"
    p = default_prices()
    items, qty, unit = bill_rows(r, "lift station")
    assert len(items) == 1 and unit[0] == pytest.approx(float(p.pump_station_cost(kw)))
    assert r.summary["energy_cost_pv"] == pytest.approx(float(p.energy_cost_pv(kw)))
    assert r.summary["whole_life_cost"] - r.summary["total_cost"] == pytest.approx(r.summary["energy_cost_pv"])
    # a priced choice, not a failure: N1 -> N0 is fine; only the valley link itself stays too deep
    assert "too_deep" not in lf["checks"][0] and "too_deep" in lf["checks"][1]
    # without lift stations the outgoing main is too deep too
    r2 = valley(DesignSettings(lift_stations=False))
    assert "too_deep" in r2.link_fields["checks"][0] and r2.summary["n_lift_stations"] == 0


def test_lift_or_deep_gravity_chosen_by_cost():
    # depth allowed (20 m): lifting is a pure cost choice -- a cheap station wins over 100 m of 8.7 m deep
    # shored trench, a dear one does not
    cheap = valley(DesignSettings(gravity_max_depth_m=20.0))
    assert cheap.summary["n_lift_stations"] == 1
    dear = valley(DesignSettings(gravity_max_depth_m=20.0, prices=replace(default_prices(), pump_station_fixed=500000.0)))
    assert dear.summary["n_lift_stations"] == 0
    assert dear.node_fields["depth_m"][0] > 8.0
    # the cheaper design is the one chosen, counting the station's energy
    assert cheap.summary["whole_life_cost"] < valley(DesignSettings(gravity_max_depth_m=20.0, lift_stations=False)).summary["whole_life_cost"]


def test_fixed_outlet_invert_met_by_a_lift_or_flagged():
    # flat chain at 10 m: the main reaches the outlet at 8.8927 - 0.4 - 0.03 - 0.4 = 8.0627
    base = tree([10.0] * 3, [0, 1], [100.0, 100.0], [0.0, 1.0, 1.0])
    assert base.node_fields["invert_m"][0] == pytest.approx(8.0627)
    low = tree([10.0] * 3, [0, 1], [100.0, 100.0], [0.0, 1.0, 1.0], settings=DesignSettings(outlet_invert_m=7.5))
    assert low.node_fields["structure"][0] == "outlet" and not any("below_outlet" in f for f in low.failures)
    high = tree([10.0] * 3, [0, 1], [100.0, 100.0], [0.0, 1.0, 1.0], settings=DesignSettings(outlet_invert_m=8.5))
    assert high.node_fields["structure"][0] == "lift station"
    assert high.node_fields["lift_m"][0] == pytest.approx(8.5 - 8.0627)
    assert high.summary["outlet_required_invert_m"] == [8.5]
    off = tree([10.0] * 3, [0, 1], [100.0, 100.0], [0.0, 1.0, 1.0],
               settings=DesignSettings(outlet_invert_m=8.5, lift_stations=False))
    assert off.node_fields["checks"][0] == "below_outlet"
    assert any(f.startswith("node 'N0': below_outlet") for f in off.failures)


def test_never_a_smaller_pipe_downstream():
    # 25 L/s on flat ground needs 250 mm (200 mm at 0.4 % carries 21.1 L/s); the next link falls 20 %,
    # where 200 mm would carry it -- the size is kept
    r = tree([0.0, 20.0, 20.0], [0, 1], [100.0, 100.0], [0.0, 0.0, 25.0])
    assert r.link_fields["nominal_mm"].tolist() == [250.0, 250.0]
    assert "smaller_downstream" not in ";".join(r.link_fields["checks"])


def test_default_gravity_catalog_outside_diameters():
    cat = default_gravity_catalog()
    # ASTM D3034 SDR 35 PVC sewer pipe (from memory): OD 8.400, 10.500, 12.500, 15.300 in; wall = OD / 35
    od_in = {200: 8.400, 250: 10.500, 300: 12.500, 375: 15.300}
    for nom, od in od_in.items():
        k = int(np.flatnonzero(cat.nominal_mm == nom)[0])
        assert cat.outer_mm[k] == pytest.approx(od * 25.4, abs=0.05)
        assert cat.inner_mm[k] == pytest.approx(od * 25.4 * (1 - 2 / 35), abs=0.05)
    # ASTM C76 Wall B (from memory): 24 in pipe, 3 in wall (bore in ft + 1 in)
    k = int(np.flatnonzero(cat.nominal_mm == 600)[0])
    assert cat.inner_mm[k] == 600.0
    assert (cat.outer_mm[k] - cat.inner_mm[k]) / 2 == pytest.approx(25.4 * (600 / 304.8 + 1), abs=0.05)
    assert np.all(cat.outer_mm > cat.inner_mm)


def test_catalog_csv_outer_mm(tmp_path):
    p = tmp_path / "sewer.csv"
    p.write_text("name,nominal_mm,inner_mm,outer_mm,cost_per_m,material,manning_n\n"
                 "A,200,201.2,213.4,30,PVC,0.013\nB,250,251.5,,40,PVC,0.013\n")
    cat = read_catalog(p)
    assert cat.outer_mm[0] == 213.4 and np.isnan(cat.outer_mm[1])
    p.write_text("name,nominal_mm,inner_mm,outer_mm,cost_per_m,material,manning_n\nA,200,201.2,190,30,PVC,0.013\n")
    with pytest.raises(DataFileError, match=r"line 2, column 'outer_mm': 190 is below inner_mm 201.2"):
        read_catalog(p)


def test_lift_station_inside_a_link_that_crosses_a_valley():
    # N2 -> N1 (100 m) crosses a valley 5 m deep halfway, the ground sampled every 10 m. By gravity
    # the pipe leaves the valley floor at 5 - 1.1073 = 3.8927 m and reaches N1 6.31 m deep (> 6 m);
    # a lift station on the valley's N1 side puts both parts within 6 m
    prof = [(x, 10.0 - 0.1 * x) for x in range(10, 50, 10)] + [(50.0, 5.0)] + \
           [(x, 5.0 + 0.1 * (x - 50)) for x in range(60, 100, 10)]
    gravity_only = tree([10.0, 10.0, 10.0], [0, 1], [100.0, 100.0], [0.0, 0.0, 5.0], profile={1: prof},
                             settings=DesignSettings(lift_stations=False))
    assert gravity_only.link_fields["depth_max_m"][1] == pytest.approx(10.0 - (3.8927 - 0.004 * 50), abs=1e-6)
    r = tree([10.0, 10.0, 10.0], [0, 1], [100.0, 100.0], [0.0, 0.0, 5.0], profile={1: prof})
    ap = r.access_points
    lift = (ap["kind"] == "lift station") & (ap["node"] == "")     # inside a link, not at a node
    assert lift.sum() == 1 and ap["link"][lift].tolist() == [1]
    x = float(ap["chainage_m"][lift][0])
    assert 0.0 < x < 50.0                                  # on the rising side, towards N1
    assert np.all(r.link_fields["depth_max_m"] <= 6.0 + 1e-9) and not any("too_deep" in f for f in r.failures)
    # the lift brings the pipe from its gravity invert there up to minimum cover (hand: 5.2 - 0.104 x)
    assert float(ap["lift_m"][lift][0]) == pytest.approx(5.2 - 0.104 * x, abs=1e-6)
    assert float(ap["invert_m"][lift][0]) == pytest.approx(10.0 - 0.1 * x - 0.9 - TOP, abs=1e-4)
    names = [st["node"] for st in r.summary["lift_stations"]]
    assert any(nm.startswith("link 2 at") for nm in names)
    assert gravity_only.summary["n_lift_stations"] == 0
