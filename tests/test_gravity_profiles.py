"""Gravity grade breaks: hand-solved profiles, the spacing property, published minimum slopes and part-full flow.

Outside references: Recommended Standards for Wastewater Facilities (Great Lakes-Upper Mississippi
River Board, 2014) for the minimum slopes; ``fluids`` (``fluids.geometry.A_partial_circle``,
``fluids.open_flow.V_Manning``) for Manning part-full flow; hand calculation for the profiles.
"""

from __future__ import annotations

import fluids
import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from mainspan.hydraulics import DesignSettings, design_network
from mainspan.hydraulics.catalog import PipeCatalog, default_gravity_catalog
from mainspan.hydraulics.gravity import depth_ratio_for_flow, full_pipe, part_full_section

TOP = 0.2012 + 0.2134 / 35      # 8 in PVC SDR 35: invert to the outside top of the pipe (bore + wall)


def chain(z, lengths, *, demand=None, profile=None, settings=None):
    """Outlet 0 <- 1 <- 2 ... along x; profile = {link: [(chainage from the downstream node, ground)]}."""
    n = len(z)
    x = np.concatenate([[0.0], np.cumsum(lengths)])
    off, sta, gr = [0], [], []
    for k in range(n - 1):
        pts = sorted((profile or {}).get(k, []))
        sta += [p[0] for p in pts]
        gr += [p[1] for p in pts]
        off.append(len(sta))
    L = np.asarray(lengths, float)
    return design_network(
        "gravity", xy=np.column_stack([x, np.zeros(n)]), elevation_m=np.asarray(z, float),
        demand_lps=np.asarray(demand if demand is not None else [0.0] + [1.0] * (n - 1)),
        node_id=[f"N{i}" for i in range(n)], from_node=np.arange(n - 1), to_node=np.arange(1, n), length_m=L,
        surface_length_m=L, roots=[0], profile_offsets=np.array(off), profile_station_m=np.array(sta, float),
        profile_ground_m=np.array(gr, float), settings=settings)


def test_three_links_with_a_dip_hand_solved():
    # O(19.0) <- A(19.6) <- B(20.0) <- C(20.4), 100 m links; the ground between B and A dips to 18.84
    # 40 m below B (60 m from A).  200 mm PVC SDR 35, cover 0.9 m over the outside, 0.4 % minimum
    # (RSWFS 2014), drop 0.03 m.  Hand:
    #   C-B: 20.4 - 0.9 - 0.2073 = 19.2927 -> 0.4 % -> 18.8927 (= minimum cover at B)
    #   B-A: 18.8927 - 0.03 = 18.8627; a manhole at the dip: 18.84 - 1.1073 = 17.7327 (2.825 %),
    #        then 0.4 % over 60 m: 17.4927
    #   A-O: 17.4927 - 0.03 = 17.4627 -> 0.4 % -> 17.0627: the outlet 1.9373 m deep
    # (one straight grade over B-A would have to fall 2.825 % all the way: 16.0377 at A, 3.39 m at O)
    r = chain([19.0, 19.6, 20.0, 20.4], [100.0, 100.0, 100.0], profile={1: [(60.0, 18.84)]})
    lf, nf = r.link_fields, r.node_fields
    np.testing.assert_allclose(lf["invert_up_m"], [17.4627, 18.8627, 19.2927], atol=1e-9)
    np.testing.assert_allclose(lf["invert_down_m"], [17.0627, 17.4927, 18.8927], atol=1e-9)
    np.testing.assert_allclose(lf["slope_pct"], [0.4, 0.4, 0.4])
    assert lf["n_grade_breaks"].tolist() == [0, 1, 0]
    ap = r.access_points
    brk = ap["kind"] == "grade break"
    assert ap["link"][brk].tolist() == [1]
    np.testing.assert_allclose(ap["chainage_m"][brk], [60.0])
    np.testing.assert_allclose(ap["invert_m"][brk], [17.7327])
    np.testing.assert_allclose(nf["depth_m"], [1.9373, 2.1373, 1.1373, 1.1073], atol=1e-9)
    np.testing.assert_allclose(lf["depth_max_m"], [19.6 - 17.4627, 19.6 - 17.4927, 20.0 - 18.8927], atol=1e-9)
    assert lf["cover_min_m"][1] == pytest.approx(0.9)
    assert 19.0 - 17.0627 == pytest.approx(1.9373)
    assert (TOP == pytest.approx(0.2073, abs=1e-4))
    # a finer spacing adds access points but moves no invert
    r60 = chain([19.0, 19.6, 20.0, 20.4], [100.0, 100.0, 100.0], profile={1: [(60.0, 18.84)]},
                settings=DesignSettings(access_spacing_m=60.0))
    np.testing.assert_allclose(r60.node_fields["invert_m"], nf["invert_m"])
    assert r60.link_fields["n_access_points"].tolist() == [1, 1, 1]


def test_crest_inside_a_link_is_passed_under_without_a_break():
    # ground rising over a crest 1 m high mid-link, falling 0.5 m to the outlet over 80 m (0.625 %):
    # the pipe runs straight at minimum cover end to end, well under the crest
    r = chain([10.0, 10.5], [80.0], profile={0: [(40.0, 11.5)]})
    lf = r.link_fields
    assert lf["invert_up_m"][0] == pytest.approx(10.5 - 0.9 - TOP, abs=1e-4)
    assert lf["invert_down_m"][0] == pytest.approx(10.0 - 0.9 - TOP, abs=1e-4)
    assert lf["slope_pct"][0] == pytest.approx(0.625)
    assert lf["n_grade_breaks"][0] == 0
    assert lf["cover_min_m"][0] == pytest.approx(0.9)
    assert lf["depth_max_m"][0] == pytest.approx(11.5 - (10.5 - 0.9 - TOP - 0.00625 * 40), abs=1e-4)


profiles = st.lists(st.floats(-3.0, 3.0, allow_nan=False), min_size=2, max_size=12)


@settings(max_examples=40, deadline=None)
@given(steps=st.lists(profiles, min_size=1, max_size=3), lengths=st.lists(st.floats(30.0, 400.0), min_size=3, max_size=3),
       fine=st.floats(20.0, 119.0), demand=st.floats(0.0, 40.0))
def test_refining_the_spacing_never_makes_a_pipe_deeper(steps, lengths, fine, demand):
    # random ground along a chain of up to three links; the spacing property of the issue: with a
    # smaller access_spacing_m no node, no link end and no point of any pipe gets deeper
    n_links = len(steps)
    z = [50.0]
    prof = {}
    for k, ups in enumerate(steps):
        Lk = lengths[k]
        ch = np.linspace(0, Lk, len(ups) + 1)[1:-1]
        g = z[-1] + np.cumsum(ups)[:-1] * 0.5
        prof[k] = list(zip(ch, g))
        z.append(z[-1] + float(np.sum(ups)) * 0.5 + 0.3)
    dem = [0.0] * n_links + [demand]
    coarse = chain(z, lengths[:n_links], demand=dem, profile=prof,
                   settings=DesignSettings(access_spacing_m=120.0, gravity_max_depth_m=50.0))
    finer = chain(z, lengths[:n_links], demand=dem, profile=prof,
                  settings=DesignSettings(access_spacing_m=fine, gravity_max_depth_m=50.0))
    assert np.all(finer.node_fields["invert_m"] >= coarse.node_fields["invert_m"] - 1e-9)
    for f in ("invert_up_m", "invert_down_m"):
        assert np.all(finer.link_fields[f] >= coarse.link_fields[f] - 1e-9)
    assert finer.summary["max_depth_m"] <= coarse.summary["max_depth_m"] + 1e-9
    assert np.all(finer.link_fields["depth_max_m"] <= coarse.link_fields["depth_max_m"] + 1e-9)


# Recommended Standards for Wastewater Facilities (2014), minimum slopes in ft/100 ft by nominal size
RSWF_MIN_SLOPE_PCT = {8: 0.40, 10: 0.28, 12: 0.22, 15: 0.15, 18: 0.12, 21: 0.10, 24: 0.08}
METRIC = {8: 200, 10: 250, 12: 300, 15: 375, 18: 450, 21: 525, 24: 600}


@pytest.mark.parametrize("inch", sorted(RSWF_MIN_SLOPE_PCT))
def test_flat_ground_runs_at_the_published_minimum_slope(inch):
    # one pipe size at a time on flat ground: the design grade is the table's minimum slope
    cat = default_gravity_catalog()
    k = int(np.flatnonzero(cat.nominal_mm == METRIC[inch])[0])
    one = PipeCatalog(name=[cat.name[k]], nominal_mm=[cat.nominal_mm[k]], inner_mm=[cat.inner_mm[k]],
                      roughness_mm=[0.0], hw_c=[150.0], rating_m=[np.nan], cost_per_m=[1.0],
                      material=[cat.material[k]], manning_n=[0.013], outer_mm=[cat.outer_mm[k]])
    r = chain([10.0, 10.0, 10.0], [80.0, 80.0], settings=DesignSettings(gravity_catalog=one))
    np.testing.assert_allclose(r.link_fields["slope_pct"], RSWF_MIN_SLOPE_PCT[inch])
    assert np.all(r.link_fields["velocity_full_mps"] >= 0.6)       # 2 ft/s flowing full, same standard


@pytest.mark.parametrize("y_over_d", [0.1, 0.25, 0.5, 0.75, 0.9])
def test_manning_part_full_against_fluids(y_over_d):
    d, s, n = 0.3, 0.005, 0.013
    area, perim, _ = part_full_section(y_over_d, d)
    # fluids.geometry.A_partial_circle: circular segment area; wetted arc D * acos(1 - 2 y/D) by hand
    a_ref = fluids.geometry.A_partial_circle(d, y_over_d * d)
    p_ref = d * np.arccos(1 - 2 * y_over_d)
    assert float(area) == pytest.approx(a_ref, rel=1e-12)
    assert float(perim) == pytest.approx(p_ref, rel=1e-12)
    q_ref = fluids.open_flow.V_Manning(a_ref / p_ref, s, n) * a_ref
    assert float(depth_ratio_for_flow(q_ref, d, s, n)) == pytest.approx(y_over_d, abs=1e-9)
    v_full, q_full = full_pipe(d, s, n)
    assert float(v_full) == pytest.approx(fluids.open_flow.V_Manning(d / 4, s, n), rel=1e-12)
