"""Head-loss, friction-factor, viscosity and Manning formulas against outside values."""

from __future__ import annotations

import fluids
import numpy as np
import pytest

from mainspan.hydraulics.friction import (
    colebrook_friction,
    darcy_friction,
    darcy_headloss_m,
    hazen_williams_headloss_m,
    swamee_jain_friction,
    water_density_kgpm3,
    water_kinematic_viscosity_m2ps,
)
from mainspan.hydraulics.gravity import (
    MIN_SLOPE_TABLE_PCT,
    depth_ratio_for_flow,
    full_pipe,
    max_flow_depth_ratio,
    min_slope,
    part_full_ratio,
    part_full_section,
)


# Hazen–Williams SI, h = 10.67 L Q^1.852 / (C^1.852 D^4.87); Williams & Hazen,
# Hydraulic Tables 1920 (constant from memory; published constants range
# 10.59–10.70, hence 0.5 %).  Worked values computed by hand from that formula.
@pytest.mark.parametrize(
    "q, d, length, c, expected",
    [
        (0.010, 0.100, 100.0, 130.0, 1.902),
        (0.010, 0.100, 100.0, 150.0, 1.459),
        (0.050, 0.200, 1000.0, 130.0, 12.81),
        (0.100, 0.300, 1000.0, 140.0, 5.597),
    ],
)
def test_hazen_williams_worked_values(q, d, length, c, expected):
    assert hazen_williams_headloss_m(q, d, length, c) == pytest.approx(expected, rel=0.005)


def test_hazen_williams_exponents_exact():
    # The 0.5 % above covers the spread of the published constant, not of the exponents:
    # ratios of losses cancel the constant, so the SI form's exponents (Q^1.852, C^-1.852,
    # D^-4.87; Williams & Hazen 1920, from memory) are checked exactly, and L^1.
    h = hazen_williams_headloss_m
    base = h(0.02, 0.15, 250.0, 140.0)
    assert h(0.04, 0.15, 250.0, 140.0) / base == pytest.approx(2.0 ** 1.852, rel=1e-12)
    assert h(0.02, 0.30, 250.0, 140.0) / base == pytest.approx(0.5 ** 4.87, rel=1e-12)
    assert h(0.02, 0.15, 250.0, 100.0) / base == pytest.approx(1.4 ** 1.852, rel=1e-12)
    assert h(0.02, 0.15, 500.0, 140.0) / base == pytest.approx(2.0, rel=1e-12)


def test_colebrook_published_value():
    # Re 1e5, eps/D 1e-4 -> 0.0185139, value printed in the fluids documentation
    # of fluids.friction.Colebrook (C. F. White's Colebrook 1939 equation, fluids docs)
    assert colebrook_friction(1e5, 1e-4) == pytest.approx(0.0185139, abs=5e-8)


def test_colebrook_worked_pipe():
    # D 0.2 m, Q 0.05 m3/s, eps 0.26 mm, nu 1.004e-6, L 1000 m -> f 0.021722,
    # h_f 14.03 m (computed by hand from Colebrook, J. Inst. Civ. Eng. 11:133, 1939, and
    # Darcy–Weisbach h_f = f L/D V^2/(2g))
    v = 0.05 / (np.pi * 0.2**2 / 4)
    re = v * 0.2 / 1.004e-6
    assert colebrook_friction(re, 0.26e-3 / 0.2) == pytest.approx(0.021722, abs=1e-6)
    assert darcy_headloss_m(0.05, 0.2, 1000.0, 0.26e-3, 1.004e-6) == pytest.approx(14.03, abs=0.005)


RE_GRID = np.geomspace(4e3, 1e8, 25)
ED_GRID = np.geomspace(1e-6, 5e-2, 15)


def test_colebrook_matches_fluids_over_grid():
    # independent reference: fluids.friction.Colebrook (exact Lambert-W solution)
    re, ed = np.meshgrid(RE_GRID, ED_GRID)
    ours = colebrook_friction(re, ed)
    with np.errstate(over="ignore"):  # fluids' closed form overflows internally, then recovers
        ref = np.vectorize(fluids.friction.Colebrook)(re, ed)
    np.testing.assert_allclose(ours, ref, rtol=1e-10)


def test_swamee_jain_matches_fluids_over_grid():
    # independent reference: fluids.friction.Swamee_Jain_1976
    re, ed = np.meshgrid(RE_GRID, ED_GRID)
    ref = np.vectorize(fluids.friction.Swamee_Jain_1976)(re, ed)
    # fluids writes the constant as (6.97/Re)^0.9 = 5.737/Re^0.9; the paper prints 5.74
    np.testing.assert_allclose(swamee_jain_friction(re, ed), ref, rtol=1e-5)
    # Swamee & Jain (1976) claim about 1 % of Colebrook in 5e3 <= Re <= 1e8, 1e-6 <= eps/D <= 1e-2
    ok = (re >= 5e3) & (ed <= 1e-2)
    np.testing.assert_allclose(swamee_jain_friction(re, ed)[ok], colebrook_friction(re, ed)[ok], rtol=0.03)


def test_laminar_below_2000_and_zero_flow():
    # laminar Hagen–Poiseuille f = 64/Re; fluids.friction.friction_factor gives the same below Re 2040
    for re in (100.0, 1000.0, 1999.0):
        assert darcy_friction(re, 1e-4) == pytest.approx(64 / re)
        assert darcy_friction(re, 1e-4) == pytest.approx(fluids.friction.friction_factor(Re=re, eD=1e-4))
    # from Re 2000 the turbulent (Colebrook) value, larger than laminar: conservative
    assert darcy_friction(2000.0, 1e-4) == pytest.approx(colebrook_friction(2000.0, 1e-4))
    assert darcy_friction(2000.0, 1e-4) > 64 / 2000.0
    assert darcy_headloss_m(0.0, 0.1, 100.0, 1e-5, 1e-6) == 0.0
    assert hazen_williams_headloss_m(-0.01, 0.1, 100.0, 130.0) < 0  # sign follows flow


@pytest.mark.parametrize(
    "t, nu",
    # tabulated kinematic viscosity of water (e.g. White, Fluid Mechanics, table A.1) -- from
    # memory; 20 °C: dynamic viscosity 1.0016 mPa s (ISO/TR 3666:1998, from memory) over
    # density 998.21 kg/m3 gives 1.0034e-6 m2/s; our correlation (1978) gives 1.0038e-6
    [(0.0, 1.787e-6), (10.0, 1.306e-6), (20.0, 1.0034e-6), (30.0, 0.801e-6), (40.0, 0.658e-6)],
)
def test_viscosity_matches_tables(t, nu):
    assert water_kinematic_viscosity_m2ps(t) == pytest.approx(nu, rel=0.005)


def test_density_matches_tables():
    # Tanaka et al. 2001 table: 4 °C 999.975, 20 °C 998.207, 40 °C 992.22 kg/m3 (from memory)
    assert water_density_kgpm3(4.0) == pytest.approx(999.975, abs=0.002)
    assert water_density_kgpm3(20.0) == pytest.approx(998.207, abs=0.002)
    assert water_density_kgpm3(40.0) == pytest.approx(992.22, abs=0.01)


def test_manning_full_pipe_worked_value():
    # D 0.300, S 0.005, n 0.013 -> V 0.967 m/s, Q 0.0684 m3/s (computed by hand from Manning,
    # Trans. Inst. Civ. Eng. Ireland 20:161, 1891: V = R^(2/3) S^(1/2) / n, R = D/4)
    v, q = full_pipe(0.300, 0.005, 0.013)
    assert v == pytest.approx(0.967, abs=5e-4)
    assert q == pytest.approx(0.0684, abs=5e-5)


def test_manning_part_full_matches_fluids():
    # independent reference: the circular-segment geometry written out here (any hydraulics
    # text: theta = 2 arccos(1 - 2 y/D), A = D^2 (theta - sin theta) / 8, P = theta D / 2) and
    # fluids.open_flow.V_Manning(Rh, S, n) for the velocity
    d, s, n = 0.45, 0.002, 0.013
    for yd in (0.05, 0.1, 0.25, 0.5, 0.75, 0.9, 0.99):
        theta = 2 * np.arccos(1 - 2 * yd)
        a_ref = d * d * (theta - np.sin(theta)) / 8
        p_ref = theta * d / 2
        area, perim, th = part_full_section(yd, d)
        assert th == pytest.approx(theta, rel=1e-12)
        assert area == pytest.approx(a_ref, rel=1e-12)
        assert perim == pytest.approx(p_ref, rel=1e-12)
        # and the segment area a second way: sector minus triangle, r^2 acos(.) - (r-y) chord/2
        r, y = d / 2, yd * d
        seg = r * r * np.arccos((r - y) / r) - (r - y) * np.sqrt(2 * r * y - y * y)
        assert a_ref == pytest.approx(seg, rel=1e-12)
        v_ref = fluids.open_flow.V_Manning(a_ref / p_ref, s, n)
        q_ref = v_ref * a_ref
        q_full_ref = fluids.open_flow.V_Manning(d / 4, s, n) * np.pi * d * d / 4
        _, qf = full_pipe(d, s, n)
        assert qf == pytest.approx(q_full_ref, rel=1e-12)
        assert part_full_ratio(yd) * qf == pytest.approx(q_ref, rel=1e-12)
        if yd < 0.938:    # below the flow peak the depth for a flow is unique
            assert depth_ratio_for_flow(q_ref, d, s, n) == pytest.approx(yd, abs=1e-9)


def test_part_full_peak():
    # peak part-full flow at y/D ≈ 0.938, 1.076 x full flow (the standard textbook result for
    # Manning with constant n in a circular pipe, e.g. Chow, Open-Channel Hydraulics, 1959;
    # from memory)
    y, r = max_flow_depth_ratio()
    assert y == pytest.approx(0.938, abs=5e-4)
    assert r == pytest.approx(1.076, abs=5e-4)
    # flow above the peak cannot run part-full
    _, qf = full_pipe(0.3, 0.005, 0.013)
    assert np.isnan(depth_ratio_for_flow(1.1 * qf, 0.3, 0.005, 0.013))
    assert depth_ratio_for_flow(0.0, 0.3, 0.005, 0.013) == 0.0


def test_minimum_slope_table_gives_0_6_mps_full():
    # Recommended Standards for Wastewater Facilities 2014: the minimum slopes give at least
    # 0.6 m/s flowing full with n = 0.013 (checked here with nominal bore as diameter)
    d = np.array([dd for dd, _ in MIN_SLOPE_TABLE_PCT])
    pct = np.array([p for _, p in MIN_SLOPE_TABLE_PCT])
    v, _ = full_pipe(d / 1000, pct / 100, 0.013)
    assert np.all(v >= 0.6)
    # so the combined rule returns the table itself
    np.testing.assert_allclose(min_slope(d, d, 0.013), pct / 100)
    # between table sizes the smaller size's (steeper) value is used
    assert min_slope([350.0], [350.0], 0.013)[0] == pytest.approx(0.0022)
    # a rough pipe needs more than the table to reach 0.6 m/s
    assert min_slope([200.0], [200.0], 0.02)[0] > 0.004
