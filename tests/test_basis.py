"""Design basis of gravity networks: Rational method (storm) and peaking formulas (sanitary)."""

import numpy as np
import pytest

try:
    from tests.conftest_layouts import make_layout
except ImportError:
    from conftest_layouts import make_layout

from mainspan.errors import InputError
from mainspan.hydraulics import DesignSettings, design_network
from mainspan.hydraulics.basis import (babbitt_peaking_factor, harmon_peaking_factor,
                                       idf_intensity_mm_per_h, parse_idf, rational_flow_m3ps,
                                       sanitary_flows, storm_flows, times_of_concentration_min)
from mainspan.graph.network import rooted_network

IDF = ((5.0, 150.0), (10.0, 110.0), (20.0, 75.0), (30.0, 58.0), (60.0, 36.0), (120.0, 22.0))


# ------------------------------------------------------------------ published formulas
def test_rational_method_worked_value():
    # Q = C i A / 360 (Q m3/s, i mm/h, A ha), any drainage text (calc):
    # C 0.5, i 50 mm/h, A 2 ha -> 0.5 * 50 * 2 / 360 = 0.13889 m3/s
    assert rational_flow_m3ps(0.5, 50.0, 2.0) == pytest.approx(0.138889, rel=1e-5)
    # the constant 360: 1 mm/h on 1 ha = 0.001 m * 10 000 m2 per 3600 s (calc)
    assert rational_flow_m3ps(1.0, 1.0, 1.0) == pytest.approx(0.001 * 10_000 / 3600)


def test_harmon_and_babbitt_worked_values():
    # Harmon PF = 1 + 14 / (4 + sqrt(P)), Babbitt PF = 5 / P^0.2, P in thousands;
    # both as quoted by the Recommended Standards for Wastewater Facilities family (from memory)
    assert harmon_peaking_factor(10.0) == pytest.approx(2.955, abs=5e-4)   # 1 + 14/(4 + 3.1623)
    assert babbitt_peaking_factor(10.0) == pytest.approx(3.155, abs=5e-4)  # 5 / 1.5849
    assert harmon_peaking_factor(1.0) == pytest.approx(3.8)                # 1 + 14/5
    assert harmon_peaking_factor(100.0) == pytest.approx(2.0)              # 1 + 14/14
    assert babbitt_peaking_factor(100.0) == pytest.approx(5 / 100 ** 0.2)
    # Babbitt capped at its 1,000-person value for tiny populations (common practice, no single source)
    assert babbitt_peaking_factor(0.01) == 5.0


def test_idf_log_log_interpolation_reproduces_a_power_law():
    # a power-law IDF curve i = a t^-b is a straight line in log-log, so interpolating
    # between two of its points must give the curve itself (calc)
    a, b = 600.0, 0.7
    tab = parse_idf([(5.0, a * 5 ** -b), (60.0, a * 60 ** -b)])
    t = np.array([7.0, 13.0, 42.0])
    assert idf_intensity_mm_per_h(t, tab) == pytest.approx(a * t ** -b, rel=1e-12)
    # extended beyond the longest duration along the last segment, clamped below the shortest
    assert idf_intensity_mm_per_h(120.0, tab) == pytest.approx(a * 120 ** -b, rel=1e-12)
    assert idf_intensity_mm_per_h(1.0, tab) == pytest.approx(a * 5 ** -b)


def test_idf_table_forms_and_errors():
    assert parse_idf({"duration_min": [10, 5], "intensity_mm_per_h": [100, 140]}) == \
        ((5.0, 140.0), (10.0, 100.0))
    with pytest.raises(InputError, match="intensity rises"):
        parse_idf([(5, 100), (10, 120)])
    with pytest.raises(InputError, match="at least two pairs"):
        parse_idf([(5, 100)])
    with pytest.raises(InputError, match="two positive numbers"):
        parse_idf([(5, 100), (-10, 50)])
    with pytest.raises(InputError, match="duration_min"):
        parse_idf({"minutes": [5, 10], "intensity_mm_per_h": [1, 2]})


# ------------------------------------------------------------------ time of concentration
def _chain():
    # outlet 0 <- 1 <- 2 <- 3 (node 3 most upstream); link k joins k (down) and k+1 (up)
    return rooted_network(4, [0, 1, 2], [1, 2, 3], roots=[0])


def test_tc_accumulation_three_link_chain_by_hand():
    net = _chain()
    area = np.array([0.0, 1.0, 0.5, 2.0])
    c = np.array([0.0, 0.6, 0.8, 0.4])
    length = np.array([300.0, 240.0, 180.0])
    v = np.array([1.0, 1.2, 1.5])          # full-pipe velocity of links 0, 1, 2 (m/s)
    f = storm_flows(net, area_ha=area, runoff_c=c, length_m=length, idf=IDF, inlet_time_min=10.0,
                    velocity_fn=lambda q: v)
    # hand computation (Rational method, times summed along the flow path):
    # node 3: Tc 10 min; link 2 (3->2) travel 180 m / 1.5 m/s = 2.0 min
    # node 2: Tc max(10, 10 + 2) = 12 min;  link 1 (2->1) travel 240 / 1.2 = 200 s = 3.333 min
    # node 1: Tc max(10, 12 + 3.333) = 15.333 min; link 0 carries the lot from node 1
    assert f.tc_min == pytest.approx([15.0 + 1 / 3, 12.0, 10.0])
    assert f.converged and f.iterations == 2
    # sum(C A): link 2 0.8 ha, link 1 0.8 + 0.4 = 1.2 ha, link 0 1.2 + 0.6 = 1.8 ha
    assert f.ca_ha == pytest.approx([1.8, 1.2, 0.8])
    # intensities, log-log between the IDF points (calc):
    # 12 min: 110 * (12/10)^(ln(75/110)/ln 2) = 110 * 1.2^-0.55254 = 99.46 mm/h
    # 15.333 min: 110 * 1.5333^-0.55254 = 86.86 mm/h
    assert f.intensity_mm_per_h == pytest.approx([86.86, 99.46, 110.0], abs=0.01)
    # Q = C i A / 360 in L/s
    assert f.design_flow_lps == pytest.approx([1.8 * 86.86 / 0.36, 1.2 * 99.46 / 0.36,
                                               0.8 * 110.0 / 0.36], rel=2e-4)


def test_tc_takes_the_longest_branch():
    # outlet 0 <- 1, with two branches into 1: a short one (2) and a long one (3 <- 4)
    net = rooted_network(5, [0, 1, 1, 3], [1, 2, 3, 4], roots=[0])
    has = np.array([False, False, True, False, True])
    tc_node, tc_link = times_of_concentration_min(net, has, 10.0, np.array([1.0, 1.0, 4.0, 6.0]))
    assert tc_node[1] == pytest.approx(20.0)         # 10 + 6 (4->3) + 4 (3->1), not 10 + 1
    assert tc_link.tolist() == pytest.approx([20.0, 10.0, 16.0, 10.0])
    assert tc_node[0] == pytest.approx(21.0) and np.isneginf(tc_node[3]) is np.False_


def test_storm_flows_iteration_reaches_a_fixed_point_in_the_design():
    # a real design: the returned Tc must equal inlet time + travel at the designed
    # full-pipe velocities, and the flows must be the Rational flows at those Tc
    xy = [[0, 0], [150, 0], [300, 0], [450, 0], [300, 150]]
    z = [10.0, 11.0, 12.0, 13.0, 12.5]
    s = DesignSettings(gravity_basis="storm", idf=IDF, storm_inlet_time_min=8.0)
    r = design_network("gravity", xy=xy, elevation_m=z, demand_lps=[0.0] * 5,
                       node_id=list("OABCD"), from_node=[0, 1, 2, 2], to_node=[1, 2, 3, 4],
                       length_m=[150.0] * 4, surface_length_m=[150.0] * 4, roots=[0], settings=s,
                       area_ha=[0, 0.4, 0.5, 0.8, 0.25], runoff_c=[0, 0.7, 0.5, 0.4, 0.9])
    lf, summ = r.link_fields, r.summary
    assert summ["gravity_basis"] == "storm" and summ["storm_settled"]
    travel = 150.0 / lf["velocity_full_mps"] / 60.0
    # link 2 (C->B) and 3 (D->B) start at inlets; B adds its own inlet; A likewise
    assert lf["tc_min"][2] == pytest.approx(8.0) and lf["tc_min"][3] == pytest.approx(8.0)
    tc_b = max(8.0, 8.0 + travel[2], 8.0 + travel[3])
    assert lf["tc_min"][1] == pytest.approx(tc_b)
    assert lf["tc_min"][0] == pytest.approx(max(8.0, tc_b + travel[1]))
    ca = np.array([0.28 + 0.25 + 0.32 + 0.225, 0.25 + 0.32 + 0.225, 0.32, 0.225])
    i = idf_intensity_mm_per_h(lf["tc_min"], parse_idf(IDF))
    assert lf["design_flow_lps"] == pytest.approx(ca * i / 0.36, rel=1e-9)
    assert (lf["design_flow_lps"] <= lf["capacity_lps"] + 1e-9).all()


def test_self_cleansing_velocity_follows_the_basis():
    xy = [[0, 0], [200, 0]]
    kw = dict(xy=xy, elevation_m=[10.0, 10.0], node_id=["O", "A"], from_node=[0], to_node=[1],
              length_m=[200.0], surface_length_m=[200.0], roots=[0])
    storm = design_network("gravity", demand_lps=[0, 0], settings=DesignSettings(
        gravity_basis="storm", idf=IDF), area_ha=[0, 0.05], runoff_c=[0, 0.5], **kw)
    san = design_network("gravity", demand_lps=[0, 2.0], settings=DesignSettings(), **kw)
    # 200 mm pipe (inner 0.2 m here from the default catalog): full-pipe velocity 0.9 m/s
    # needs S = (0.9 * 0.013 / (D/4)^(2/3))^2 (Manning, any hydraulics text; calc)
    d = storm.link_fields["diameter_mm"][0] / 1000.0
    s_storm = (0.9 * 0.013 / (d / 4) ** (2 / 3)) ** 2
    assert storm.link_fields["min_slope_pct"][0] == pytest.approx(100 * max(s_storm, 0.004), rel=1e-6)
    assert san.link_fields["min_slope_pct"][0] < storm.link_fields["min_slope_pct"][0]
    assert "low_velocity" in storm.link_fields["checks"][0]   # a trickle at 0.9 m/s
    assert "low_velocity" in san.link_fields["checks"][0]


# ------------------------------------------------------------------ sanitary
def test_sanitary_population_with_harmon_by_hand():
    net = rooted_network(3, [0, 1], [1, 2], roots=[0])
    f = sanitary_flows(net, demand_lps=[0, 0, 0], population=[0, 4000, 6000], per_capita_lpd=380.0,
                       peaking="harmon")
    # average 10,000 persons x 380 L/d / 86,400 s = 43.98 L/s; Harmon at P = 10 -> 2.955 (from memory)
    assert f.average_flow_lps[0] == pytest.approx(10_000 * 380 / 86_400)
    assert f.peaking[0] == pytest.approx(1 + 14 / (4 + np.sqrt(10.0)))
    assert f.design_flow_lps[0] == pytest.approx(43.981 * 2.9547, rel=1e-4)
    b = sanitary_flows(net, demand_lps=[0, 0, 0], population=[0, 4000, 6000], peaking="babbitt")
    assert b.peaking[1] == pytest.approx(5 / 6 ** 0.2)   # 6,000 persons upstream of link 1


def test_sanitary_demand_counts_as_population_equivalent():
    net = rooted_network(2, [0], [1], roots=[0])
    # 4.398 L/s average is the flow of 1,000 persons at 380 L/d: Harmon at P = 1 -> 3.8
    q = 1000 * 380 / 86_400
    f = sanitary_flows(net, demand_lps=[0, q], peaking="harmon")
    assert f.peaking[0] == pytest.approx(3.8)


def test_sanitary_fixed_peaking_keeps_the_given_flows():
    base = dict(xy=[[0, 0], [100, 0], [200, 0]], elevation_m=[10.0, 10.5, 11.0],
                demand_lps=[0.0, 2.0, 3.0], node_id=["o", "a", "b"], from_node=[0, 1], to_node=[1, 2],
                length_m=[100.0, 100.0], surface_length_m=[100.0, 100.0], roots=[0])
    r = design_network("gravity", settings=DesignSettings(peaking_factor=2.0), **base)
    assert r.link_fields["design_flow_lps"].tolist() == [10.0, 6.0]
    assert r.summary["gravity_basis"] == "sanitary"
    h = design_network("gravity", settings=DesignSettings(sanitary_peaking="harmon"),
                       population=[0, 500, 0], **base)
    # 500 persons + 5 L/s (= 1136.8 persons at 380 L/d) -> P = 1.6368 thousand
    p = (500 + 5.0 * 86_400 / 380) / 1000
    assert h.link_fields["peaking_factor"][0] == pytest.approx(1 + 14 / (4 + np.sqrt(p)))


# ------------------------------------------------------------------ settings, inputs, writer
def test_settings_and_input_errors():
    with pytest.raises(InputError, match="gravity_basis"):
        DesignSettings(gravity_basis="combined")
    with pytest.raises(InputError, match="sanitary_peaking"):
        DesignSettings(sanitary_peaking="gifft")
    with pytest.raises(InputError, match="storm_inlet_time_min"):
        DesignSettings(storm_inlet_time_min=0)
    assert DesignSettings(idf={"duration_min": [5, 10], "intensity_mm_per_h": [90, 60]}).idf == \
        ((5.0, 90.0), (10.0, 60.0))
    kw = dict(xy=[[0, 0], [100, 0]], elevation_m=[10.0, 11.0], demand_lps=[0, 0], node_id=["o", "a"],
              from_node=[0], to_node=[1], length_m=[100.0], surface_length_m=[100.0], roots=[0])
    with pytest.raises(InputError, match="'idf' is missing"):
        design_network("gravity", settings=DesignSettings(gravity_basis="storm"), **kw)
    with pytest.raises(InputError, match="area_ha"):
        design_network("gravity", settings=DesignSettings(gravity_basis="storm", idf=IDF), **kw)
    with pytest.raises(InputError, match="runoff_c.*site 1"):
        design_network("gravity", settings=DesignSettings(gravity_basis="storm", idf=IDF),
                       area_ha=[0, 1], runoff_c=[0, 1.5], **kw)


def test_sites_read_basis_fields_and_project_idf(tmp_path):
    from mainspan.settings.project import load_project, plan_kwargs
    from mainspan.sites.read import read_sites

    p = tmp_path / "s.csv"
    p.write_text("id,x,y,role,area_ha,runoff_c,population\nO,0,0,outlet,,,\n"
                 "A,100,0,demand,0.5,0.7,120\n")
    s = read_sites(p, sites_crs="EPSG:32633")
    assert s.area_ha.tolist() == [0.0, 0.5] and s.runoff_c.tolist() == [0.0, 0.7]
    assert s.population.tolist() == [0.0, 120.0]
    bad = tmp_path / "b.csv"
    bad.write_text("id,x,y,c\nO,0,0,0.2\nA,100,0,1.2\n")
    with pytest.raises(InputError, match="site 'A'.*'c'.*between 0 and 1"):
        read_sites(bad, sites_crs="EPSG:32633", runoff_field="c")
    toml = tmp_path / "p.toml"
    toml.write_text('[sites]\npath = "s.csv"\nsites_crs = "EPSG:32633"\n[design]\nsystem = "gravity"\n'
                    'gravity_basis = "storm"\n[design.idf]\nduration_min = [5, 30]\n'
                    'intensity_mm_per_h = [120, 50]\n')
    _, _, plan, _ = plan_kwargs(load_project(toml).settings_for(None))
    assert DesignSettings(**plan["design"]).idf == ((5.0, 120.0), (30.0, 50.0))


@pytest.mark.parametrize("basis,net_type", [("storm", "storm"), ("sanitary", "sanitary")])
def test_landxml_net_type_follows_the_basis(tmp_path, basis, net_type):
    from lxml import etree

    from mainspan.writers.landxml import LANDXML_NS, write_landxml

    lay = make_layout("gravity")
    lay.run_info["design:gravity_basis"] = basis
    root = etree.parse(str(write_landxml(lay, tmp_path / "n.xml"))).getroot()
    net = root.find("x:PipeNetworks/x:PipeNetwork", {"x": LANDXML_NS})
    assert net.get("pipeNetType") == net_type


def test_merged_sites_keep_sum_of_c_times_a():
    from mainspan.sites.read import sites_from_arrays

    s = sites_from_arrays([[0, 0], [0.0005, 0], [100, 0]], crs="EPSG:32633", merge_within_m=0.01,
                          area_ha=[1.0, 3.0, 2.0], runoff_c=[0.9, 0.3, 0.5], population=[10, 5, 1])
    assert s.area_ha.tolist() == [4.0, 2.0] and s.population.tolist() == [15.0, 1.0]
    # area-weighted C keeps sum(C A): 0.9 * 1 + 0.3 * 3 = 1.8 = 4 * 0.45
    assert s.runoff_c == pytest.approx([0.45, 0.5])


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_tc_equals_longest_inlet_path_by_networkx(seed):
    # Tc at a link = inlet time + the longest travel time from any catchment upstream of it;
    # networkx walks the paths independently (shortest_path_length on the reversed tree)
    import networkx as nx

    rng = np.random.default_rng(seed)
    n = 40
    parent = np.array([-1] + [int(rng.integers(0, v)) for v in range(1, n)])
    child = np.arange(1, n)
    net = rooted_network(n, parent[child], child, roots=[0])
    travel = rng.uniform(0.5, 4.0, n - 1)
    has = rng.random(n) < 0.6
    _, tc_link = times_of_concentration_min(net, has, 7.0, travel)
    g = nx.DiGraph()
    for k in range(net.n_links):       # edge upstream -> downstream, weighted by travel time
        g.add_edge(int(net.to_node[k]), int(net.from_node[k]), t=float(travel[k]))
    for k in range(net.n_links):
        up = int(net.to_node[k])
        sources = [v for v in nx.ancestors(g, up) | {up} if has[v]]
        want = max((7.0 + nx.shortest_path_length(g, v, up, weight="t") for v in sources),
                   default=-np.inf)
        assert tc_link[k] == pytest.approx(want)
