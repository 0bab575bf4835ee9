"""design_network on hand-solved pressure and gravity networks."""

from __future__ import annotations

import fluids
import numpy as np
import pytest

from mainspan.errors import InputError
from mainspan.hydraulics import CAUTION, DesignSettings, PipeCatalog, default_catalog, design_network
from mainspan.hydraulics.catalog import default_gravity_catalog

# five nodes: 0 source/outlet; links 0-1, 1-2, 1-3, 2-4
XY = np.array([[0.0, 0.0], [200.0, 0.0], [350.0, 0.0], [200.0, 100.0], [470.0, 0.0]])
FROM = np.array([0, 1, 1, 2])
TO = np.array([1, 2, 3, 4])
LEN = np.array([200.0, 150.0, 100.0, 120.0])
IDS = ["S", "A", "B", "C", "D"]


def one_pipe(rating_m=100.0):
    return PipeCatalog(name=["T100"], nominal_mm=[110.0], inner_mm=[100.0], roughness_mm=[0.01], hw_c=[140.0],
                       rating_m=[rating_m], cost_per_m=[10.0], material=["PVC"])


def pressure(settings, z=(100.0, 98.0, 95.0, 97.0, 93.0), demand=(0.0, 2.0, 3.0, 1.0, 4.0), **kw):
    args = dict(xy=XY, elevation_m=np.array(z), demand_lps=np.array(demand), node_id=IDS, from_node=FROM,
                to_node=TO, length_m=LEN, surface_length_m=LEN, roots=[0], settings=settings)
    args.update(kw)
    return design_network("pressure", **args)


def hand_losses():
    # Hazen–Williams SI (Williams & Hazen 1920) written out, x 1.1 for 10 % minor losses
    q = np.array([10.0, 7.0, 1.0, 4.0]) / 1000  # subtree demands by hand
    return 1.1 * 10.67 * LEN * q**1.852 / (140.0**1.852 * 0.100**4.87)


def test_pressure_hand_solved_minimum_source_head():
    s = DesignSettings(pressure_catalog=one_pipe(), headloss_method="hazen_williams", headloss_max_m_per_km=None,
                       velocity_max_mps=3.0, minor_loss_factor=0.1, min_pressure_m=14.0)
    r = pressure(s)
    h = hand_losses()
    np.testing.assert_allclose(r.link_fields["flow_lps"], [10.0, 7.0, 1.0, 4.0])
    np.testing.assert_allclose(r.link_fields["headloss_m"], h)
    # HGL below the source, by hand along each path
    loss_to = np.array([0.0, h[0], h[0] + h[1], h[0] + h[2], h[0] + h[1] + h[3]])
    z = np.array([100.0, 98.0, 95.0, 97.0, 93.0])
    h0 = max(z + 14.0 + loss_to)  # lowest source HGL giving 14 m everywhere (RSWW §8.2.1, 20 psi)
    np.testing.assert_allclose(r.node_fields["hgl_m"], h0 - loss_to)
    np.testing.assert_allclose(r.node_fields["pressure_head_m"], h0 - loss_to - z)
    assert r.node_fields["pressure_head_m"].min() == pytest.approx(14.0)
    assert r.summary["source_hgl_m"] == [pytest.approx(h0)]
    assert r.summary["source_pressure_head_m"] == [pytest.approx(h0 - 100.0)]
    np.testing.assert_allclose(r.link_fields["hgl_from_m"] - r.link_fields["hgl_to_m"], h)
    assert r.failures == [] and set(r.link_fields["checks"]) == {"ok"}
    assert r.link_fields["flow_direction"].tolist() == ["from→to"] * 4
    # bill of quantities: one pipe; excavation = 25/m3 x (0.110 + 0.6) wide x (0.9 + 0.110 + 0.1) deep
    q = r.quantities
    assert q["pipe"][q["category"] == "pipe"].tolist() == ["T100"] and q["pipe"][-1] == "TOTAL"
    assert q["length_m"][-1] == pytest.approx(LEN.sum())
    assert q["pipe_cost"][-1] == pytest.approx(10.0 * LEN.sum())
    # + the placeholder price table's bedding (45/m3 x 0.71 x 0.1) and reinstatement (4/m2 x 0.71); 1.11 m < 1.5 m: no shoring
    assert q["trench_cost"][-1] == pytest.approx((25.0 * 0.71 * 1.11 + 45.0 * 0.71 * 0.1 + 4.0 * 0.71) * LEN.sum())
    # the bill's TOTAL is the whole-life cost: capital (pipes, trench, fittings, pump station) + energy present value
    assert r.summary["whole_life_cost"] == pytest.approx(q["total_cost"][-1])
    assert r.summary["total_cost"] == pytest.approx(q["total_cost"][-1] - r.summary["energy_cost_pv"])
    assert r.caution == CAUTION and "licensed engineer" in CAUTION


def test_pressure_given_source_head_flags_low_pressure_and_rating():
    s = DesignSettings(pressure_catalog=one_pipe(rating_m=25.0), headloss_method="hazen_williams",
                       headloss_max_m_per_km=None, source_head_m=112.0)
    r = pressure(s)
    h = hand_losses()
    loss_to = np.array([0.0, h[0], h[0] + h[1], h[0] + h[2], h[0] + h[1] + h[3]])
    z = np.array([100.0, 98.0, 95.0, 97.0, 93.0])
    head = 112.0 - loss_to - z
    np.testing.assert_allclose(r.node_fields["pressure_head_m"], head)
    low = head < 14.0
    assert low.any()
    np.testing.assert_array_equal(r.node_fields["checks"] != "ok", low | (112.0 - z > 25.0))
    assert np.array_equal(["low_pressure" in c for c in r.node_fields["checks"]], low)
    # static head 112 - 93 = 19 < 25 rating at D; flags only where static > 25 (none here)
    assert not any("over_rating" in c for c in r.node_fields["checks"])
    assert any(f.startswith("node 'S': low_pressure") for f in r.failures)
    r2 = pressure(DesignSettings(pressure_catalog=one_pipe(rating_m=15.0), headloss_method="hazen_williams",
                                 headloss_max_m_per_km=None, source_head_m=112.0))
    over = 112.0 - z > 15.0
    assert np.array_equal(["over_rating" in c for c in r2.node_fields["checks"]], over)
    assert r2.summary["failing_checks"]["node:over_rating"] == over.sum()


def test_pressure_profile_high_point_is_checked():
    # a hill 8 m above the line in the middle of link 0-1: pressure along the link drops there
    off = np.array([0, 1, 1, 1, 1])
    hill = dict(profile_offsets=off, profile_station_m=np.array([100.0]), profile_ground_m=np.array([107.0]))
    given = DesignSettings(pressure_catalog=one_pipe(), headloss_method="hazen_williams", headloss_max_m_per_km=None,
                           source_head_m=120.0)
    r = pressure(given, **hill)
    hgl0, hgl1 = r.link_fields["hgl_from_m"][0], r.link_fields["hgl_to_m"][0]
    assert hgl0 == 120.0
    assert r.link_fields["pressure_min_m"][0] == pytest.approx((hgl0 + hgl1) / 2 - 107.0)
    assert "low_pressure" in r.link_fields["checks"][0]
    assert r.link_fields["checks"][1:].tolist() == ["ok"] * 3
    # solving the source head lifts the grade line until the hill top has 14 m too
    solved = DesignSettings(pressure_catalog=one_pipe(), headloss_method="hazen_williams", headloss_max_m_per_km=None)
    r2 = pressure(solved, **hill)
    h = hand_losses()
    assert r2.summary["source_hgl_m"][0] == pytest.approx(107.0 + 14.0 + h[0] / 2)
    assert r2.link_fields["pressure_min_m"][0] == pytest.approx(14.0)
    assert r2.failures == []


def test_pressure_sizing_matches_independent_colebrook():
    # smallest PE pipe with V <= 1.5 m/s and (1 + 0.1) x Darcy loss <= 10 m/km, friction factor from
    # fluids.friction.Colebrook (independent implementation), viscosity of water at 20 °C
    rng = np.random.default_rng(3)
    n = 40
    parent = np.array([rng.integers(0, i) for i in range(1, n)])
    demand = rng.random(n) * 4
    xy = rng.random((n, 2)) * 1000
    length = 50 + rng.random(n - 1) * 200
    r = design_network("pressure", xy=xy, elevation_m=np.zeros(n), demand_lps=demand, node_id=[str(i) for i in range(n)],
                       from_node=parent, to_node=np.arange(1, n), length_m=length, surface_length_m=length, roots=[0],
                       settings=DesignSettings(sizing="rule"))
    cat = default_catalog()
    # water at 20 °C: 1.0016 mPa s (ISO/TR 3666:1998) / 998.21 kg/m3 = 1.0034e-6 m2/s (from
    # memory); mainspan's 1978 correlation gives 1.0038e-6, too little to change a size here
    nu = 1.0034e-6
    for k, qlps in enumerate(r.link_fields["design_flow_lps"]):
        q = qlps / 1000
        want = len(cat) - 1
        for j, d in enumerate(cat.inner_mm / 1000):
            v = q / (np.pi * d * d / 4)
            f = fluids.friction.Colebrook(v * d / nu, 0.007e-3 / d) if v > 0 else 0.0
            grad = 1.1 * f * (1000 / d) * v * v / (2 * 9.80665)
            if v <= 1.5 and grad <= 10.0:
                want = j
                break
        assert r.link_fields["pipe"][k] == cat.name[want]
    assert r.node_fields["pressure_head_m"].min() == pytest.approx(14.0)
    assert r.summary["notes"] == []


def test_pressure_forest_has_one_source_head_per_root():
    s = DesignSettings(pressure_catalog=one_pipe(), headloss_method="hazen_williams", headloss_max_m_per_km=None,
                       source_head_m=(130.0, 125.0))
    # split off node 3 as a second source: links 0-1, 1-2, 2-4; root 3 alone
    r = design_network("pressure", xy=XY, elevation_m=np.array([100.0, 98.0, 95.0, 97.0, 93.0]),
                       demand_lps=np.array([0.0, 2.0, 3.0, 1.0, 4.0]), node_id=IDS, from_node=[0, 1, 2], to_node=[1, 2, 4],
                       length_m=LEN[[0, 1, 3]], surface_length_m=LEN[[0, 1, 3]], roots=[0, 3], settings=s)
    assert r.node_fields["hgl_m"][0] == 130.0 and r.node_fields["hgl_m"][3] == 125.0
    with pytest.raises(InputError, match="source_head_m"):
        design_network("pressure", xy=XY, elevation_m=np.zeros(5), demand_lps=np.zeros(5), node_id=IDS,
                       from_node=[0, 1, 2], to_node=[1, 2, 4], length_m=LEN[:3], surface_length_m=LEN[:3],
                       roots=[0, 3], settings=DesignSettings(source_head_m=(1.0, 2.0, 3.0)))


def test_pressure_without_terrain_assumes_flat_ground_and_says_so():
    r = pressure(DesignSettings(), z=[np.nan] * 5)
    assert r.summary["notes"] and "flat ground" in r.summary["notes"][0]
    with pytest.raises(InputError, match="node 'A' has no ground elevation"):
        pressure(DesignSettings(), z=[1.0, np.nan, 1.0, 1.0, 1.0])


def gravity(z, demand=(0.0, 1.0, 1.0, 1.0, 1.0), length=(50.0, 50.0, 50.0, 50.0), settings=None, **kw):
    length = np.array(length)
    args = dict(xy=XY, elevation_m=np.array(z, float), demand_lps=np.array(demand), node_id=IDS, from_node=FROM,
                to_node=TO, length_m=length, surface_length_m=length, roots=[0], settings=settings)
    args.update(kw)
    return design_network("gravity", **args)


def test_gravity_hand_solved_inverts_on_flat_ground():
    # flat ground at 10 m; 200 mm PVC SDR 35 (8 in: OD 213.4 mm, wall 213.4/35 = 6.1 mm, bore 201.2 mm),
    # 0.4 % minimum slope (RSWFS 2014), cover 0.9 m to the OUTSIDE of the pipe, junction drop 0.03
    r = gravity([10.0] * 5)
    lf = r.link_fields
    top = 0.2012 + 0.0061            # invert to the outside top of the pipe
    # hand: leaves 3 and 4 start at 10 - 0.9 - 0.2073 = 8.8927 and fall 0.004 x 50 = 0.2
    #   link 2-4: 8.8927 -> 8.6927;  link 1-3: 8.8927 -> 8.6927
    #   link 1-2: min(8.8927, 8.6927 - 0.03) = 8.6627 -> 8.4627
    #   link 0-1: min(8.8927, min(8.4627, 8.6927) - 0.03) = 8.4327 -> 8.2327
    assert 10 - 0.9 - top == pytest.approx(8.8927)
    np.testing.assert_allclose(lf["invert_up_m"], [8.4327, 8.6627, 8.8927, 8.8927])
    np.testing.assert_allclose(lf["invert_down_m"], [8.2327, 8.4627, 8.6927, 8.6927])
    np.testing.assert_allclose(lf["slope_pct"], 0.4)
    np.testing.assert_allclose(r.node_fields["invert_m"], [8.2327, 8.4327, 8.6627, 8.8927, 8.8927])
    np.testing.assert_allclose(lf["depth_max_m"], [1.7673, 1.5373, 1.3073, 1.3073])
    np.testing.assert_allclose(lf["cover_min_m"], [1.36, 1.13, 0.90, 0.90])
    assert lf["flow_direction"].tolist() == ["to→from"] * 4
    np.testing.assert_allclose(lf["flow_lps"], [4.0, 2.0, 1.0, 1.0])
    # capacity flowing full against fluids.open_flow.V_Manning (R = D/4)
    v_ref = fluids.open_flow.V_Manning(0.2012 / 4, 0.004, 0.013)
    np.testing.assert_allclose(lf["capacity_lps"], v_ref * np.pi * 0.2012**2 / 4 * 1000)
    assert np.all(lf["velocity_full_mps"] >= 0.6)
    assert r.summary["outlet_invert_m"] == [pytest.approx(8.2327)]
    assert r.node_fields["structure"].tolist() == ["outlet", "manhole", "manhole", "manhole", "manhole"]


def test_gravity_dip_in_profile_breaks_the_grade_at_the_dip():
    # link 0-1 (50 m, flat ends at 10 m) with the ground 1 m lower at mid-length; station from node 0
    off = np.array([0, 1, 1, 1, 1])
    r = gravity([10.0] * 5, profile_offsets=off, profile_station_m=np.array([25.0]), profile_ground_m=np.array([9.0]))
    up = r.link_fields["invert_up_m"][0]
    assert up == pytest.approx(8.4327)
    # hand: a manhole at the dip; the pipe reaches 9.0 - 0.9 - 0.2073 = 7.8927 there, then falls at
    # the minimum 0.4 % over the last 25 m: 7.7927 (one straight grade would end at 2 x 7.8927 - up = 7.3527)
    assert r.link_fields["invert_down_m"][0] == pytest.approx(7.7927)
    assert r.link_fields["slope_pct"][0] == pytest.approx(0.4)       # the flattest segment
    assert r.link_fields["n_grade_breaks"][0] == 1
    assert r.link_fields["cover_min_m"][0] == pytest.approx(0.9)
    assert r.link_fields["depth_max_m"][0] == pytest.approx(10.0 - 7.7927)
    ap = r.access_points
    k = ap["kind"] == "grade break"
    assert ap["chainage_m"][k].tolist() == [25.0] and ap["invert_m"][k] == pytest.approx([7.8927])


def test_gravity_follows_steep_falling_ground_and_flags_rising_ground():
    # ground falls 3 m over link 0-1 towards the outlet: the pipe keeps exactly minimum cover
    r = gravity([7.0, 10.0, 10.0, 10.0, 10.0])
    up = r.link_fields["invert_up_m"][0]
    assert r.link_fields["invert_down_m"][0] == pytest.approx(7.0 - 0.9 - 0.2073)
    assert r.link_fields["slope_pct"][0] == pytest.approx(100 * (up - 5.8927) / 50)
    # outlet 8 m above the far end: everything too deep (a lift station would not help), named in the failures
    r2 = gravity([18.0, 10.0, 10.0, 10.0, 10.0], settings=DesignSettings(gravity_max_depth_m=6.0))
    assert "too_deep" in r2.link_fields["checks"][0]
    assert any(f.startswith("link 1 (S–A): too_deep") for f in r2.failures)
    assert any(f.startswith("node 'S': too_deep") for f in r2.failures)


def test_gravity_sizes_up_when_flow_exceeds_capacity():
    # 25 L/s at the far leaf: 200 mm (bore 201.2) at 0.4 % carries 21.1 L/s, 250 mm (bore 251.5) at 0.28 % 32.0 L/s
    r = gravity([10.0] * 5, demand=(0.0, 0.0, 0.0, 0.0, 25.0))
    assert r.link_fields["nominal_mm"].tolist() == [250.0, 250.0, 200.0, 250.0]
    # 10 in SDR 35: OD 266.7 mm, wall 7.6 mm: invert to outside top 259.1 mm
    assert r.link_fields["invert_up_m"][3] == pytest.approx(10.0 - 0.9 - 0.2591)
    assert r.link_fields["slope_pct"][3] == pytest.approx(0.28)
    # link 1-3 (no flow) keeps the smallest pipe, crowns matched at node 1
    assert r.link_fields["capacity_lps"][0] >= 25.0
    # no pipe big enough at the minimum grade: the pipe is steepened to carry the flow, and flagged
    tiny = PipeCatalog(name=["p"], nominal_mm=[200.0], inner_mm=[200.0], roughness_mm=[0.0], hw_c=[150.0],
                       rating_m=[np.nan], cost_per_m=[1.0], material=["PVC"], manning_n=[0.013])
    r2 = gravity([10.0] * 5, demand=(0.0, 0.0, 0.0, 0.0, 25.0), settings=DesignSettings(gravity_catalog=tiny))
    assert r2.link_fields["checks"][3].startswith("no_pipe") and "surcharged" not in r2.link_fields["checks"][3]
    assert r2.link_fields["capacity_lps"][3] == pytest.approx(25.0)


def test_gravity_reversed_link_and_profile_give_the_same_design():
    off = np.array([0, 1, 1, 1, 1])
    a = gravity([10.0, 10.2, 10.5, 10.4, 11.0], profile_offsets=off, profile_station_m=np.array([20.0]),
                profile_ground_m=np.array([9.7]))
    # same link 0-1 given as 1 -> 0, its station now measured from node 1
    b = gravity([10.0, 10.2, 10.5, 10.4, 11.0], from_node=np.array([1, 1, 1, 2]), to_node=np.array([0, 2, 3, 4]),
                profile_offsets=off, profile_station_m=np.array([30.0]), profile_ground_m=np.array([9.7]))
    assert b.link_fields["reversed"].tolist() == [True, False, False, False]
    for f in ("invert_up_m", "invert_down_m", "slope_pct", "depth_max_m", "cover_min_m"):
        np.testing.assert_allclose(a.link_fields[f], b.link_fields[f])
    assert b.link_fields["from_node"][0] == 0 and b.link_fields["to_node"][0] == 1


def test_gravity_access_points():
    # RSWFS 2014: access at most 120 m apart -> ceil(L / 120) - 1 intermediate points on flat ground
    r = gravity([10.0] * 5, length=(300.0, 240.0, 120.0, 50.0))
    assert r.link_fields["n_access_points"].tolist() == [2, 1, 0, 0]
    ap = r.access_points
    inside = ap["kind"] == "spacing"
    assert ap["link"][inside].tolist() == [0, 0, 1]
    np.testing.assert_allclose(ap["chainage_m"][inside], [100.0, 200.0, 120.0])
    np.testing.assert_allclose(ap["x"][inside], [200 / 3, 400 / 3, 275.0])
    k = ap["link"][inside]
    np.testing.assert_allclose(ap["invert_m"][inside], r.link_fields["invert_down_m"][k] + r.link_fields["slope_pct"][k] / 100 * ap["chainage_m"][inside])
    assert r.summary["n_access_points"] == 3
    # the 240 m branch arrives 0.74 m above the outgoing invert at node A: a drop manhole (> 0.6 m)
    assert ap["kind"][~inside].tolist() == ["drop manhole"] and ap["node"][~inside].tolist() == ["A"]
    assert r.node_fields["drop_m"][1] == pytest.approx(0.74)


def test_gravity_needs_elevations():
    with pytest.raises(InputError, match="gravity design needs ground elevations: give --terrain or site Z"):
        gravity([np.nan] * 5)


@pytest.mark.parametrize(
    "kw, msg",
    [
        (dict(velocity_max_mps=-1), "design option 'velocity_max_mps' must be > 0, got -1; set a positive velocity"),
        (dict(headloss_method="manning"), "design option 'headloss_method'"),
        (dict(water_temperature_c=80), "water_temperature_c"),
        (dict(gravity_min_slope_table_pct=((200, -1),)), "gravity_min_slope_table_pct"),
        (dict(headloss_max_m_per_km=0), "headloss_max_m_per_km"),
        (dict(pressure_catalog="pe.csv"), "pressure_catalog"),
    ],
)
def test_settings_validation_messages(kw, msg):
    with pytest.raises(InputError) as info:
        DesignSettings(**kw)
    assert msg in str(info.value) and "\n" not in str(info.value)


def test_bad_inputs_name_the_field():
    with pytest.raises(InputError, match="'demand_lps' entry 2"):
        pressure(DesignSettings(), demand=(0.0, 1.0, -1.0, 0.0, 0.0))
    with pytest.raises(InputError, match="system"):
        design_network("steam", xy=XY, elevation_m=np.zeros(5), demand_lps=np.zeros(5), node_id=IDS, from_node=FROM,
                       to_node=TO, length_m=LEN, surface_length_m=LEN, roots=[0])
    with pytest.raises(InputError, match="beyond its plan length"):
        pressure(DesignSettings(), profile_offsets=np.array([0, 1, 1, 1, 1]), profile_station_m=np.array([500.0]),
                 profile_ground_m=np.array([1.0]))


def test_default_gravity_catalog_is_used_by_default():
    r = gravity([10.0] * 5)
    assert set(r.link_fields["pipe"]) <= set(default_gravity_catalog().name)


def test_access_point_ground_follows_the_profile():
    # link 0-1 is 300 m with a profile point at 150 m where the ground bends: the grade breaks there
    # (a straight pipe would run up to 0.5 m deeper, into shored trench), then one access point
    # halfway along each 150 m segment
    off = np.array([0, 1, 1, 1, 1])
    r = gravity([10.0, 13.0, 13.0, 13.0, 13.0], length=(300.0, 50.0, 50.0, 50.0), profile_offsets=off,
                profile_station_m=np.array([150.0]), profile_ground_m=np.array([12.0]))
    ap = r.access_points
    assert ap["kind"].tolist() == ["spacing", "grade break", "spacing"]
    np.testing.assert_allclose(ap["chainage_m"], [75.0, 150.0, 225.0])
    # hand: linear between (0, 10) and (150, 12), then (150, 12) and (300, 13)
    np.testing.assert_allclose(ap["ground_m"], [10.0 + 2.0 * 75 / 150, 12.0, 12.0 + 1.0 * 75 / 150])
    np.testing.assert_allclose(ap["depth_m"], ap["ground_m"] - ap["invert_m"])


def test_result_docstring_lists_the_fields_returned():
    # the DesignResult docstring is the writers' contract: every field it names must be there
    import re

    from mainspan.hydraulics import DesignResult

    doc = DesignResult.__doc__
    link_doc = doc[doc.index("link_fields"):doc.index("node_fields :")]
    node_doc = doc[doc.index("node_fields :"):doc.index("quantities :")]
    q_doc = doc[doc.index("quantities :"):doc.index("access_points :")]

    def names(text):
        return set(re.findall(r"\b([a-z]+(?:_[a-z0-9]+)+|flow_direction|pipe|material|checks|reversed)\b", text)) - {
            "link_fields", "node_fields", "input_link_order"}

    p = pressure(DesignSettings())
    g = gravity([10.0] * 5)
    for r in (p, g):
        assert set(r.link_fields) <= names(link_doc) | {"pipe", "material", "checks", "reversed"}
        assert set(r.node_fields) <= names(node_doc) | {"checks", "structure"}
        assert set(r.quantities) <= names(q_doc) | {"pipe", "material", "count", "category", "item", "unit", "quantity"}
    assert {"headloss_m", "hgl_from_m", "hgl_to_m", "pressure_min_m", "rating_m"} <= set(p.link_fields)
    assert {"invert_up_m", "invert_down_m", "slope_pct", "depth_max_m", "cover_min_m", "capacity_lps",
            "depth_ratio", "n_access_points", "n_grade_breaks", "outer_mm"} <= set(g.link_fields)
