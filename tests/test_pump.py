"""Pump duty: ρ g Q H / η, energy present value and the station in the bill."""

import numpy as np
import pytest

from mainspan.hydraulics import DesignSettings, design_network
from mainspan.hydraulics.pump import pump_duty
from mainspan.hydraulics.prices import annuity_factor, default_prices


def test_pump_power_formula():
    # P = ρ g Q H (any pump handbook); 89.75 L/s at 96.9 m -> 85.3 kW hydraulic, 114 kW at η 0.75
    d = pump_duty([89.75], [96.9 + 210.0], [210.0], default_prices(), efficiency=0.75)
    assert d["hydraulic_kw"][0] == pytest.approx(1000 * 9.80665 * 0.08975 * 96.9 / 1000)
    assert d["hydraulic_kw"][0] == pytest.approx(85.3, abs=0.05)
    assert d["shaft_kw"][0] == pytest.approx(114, abs=0.5)
    p = default_prices()
    assert d["annual_kwh"][0] == pytest.approx(d["shaft_kw"][0] * 1500)
    # energy present value: annual bill x (P/A, 5 %, 25 a) = 14.0939 (annuity tables, from memory)
    assert d["energy_cost_pv"][0] == pytest.approx(d["annual_kwh"][0] * 0.15 * 14.0939, rel=1e-5)
    assert annuity_factor(p.discount_rate, p.years) == pytest.approx(14.0939, abs=5e-5)
    assert d["station_cost"][0] == pytest.approx(40000 + 900 * d["shaft_kw"][0])
    # a source below its sump needs no pump: no power, no station
    z = pump_duty([10.0], [100.0], [120.0], p)
    assert z["head_m"][0] == 0 and z["shaft_kw"][0] == 0 and z["station_cost"][0] == 0


def _line(settings=None):
    return design_network("pressure", xy=[[0, 0], [100, 0], [200, 0]], elevation_m=[50.0, 55.0, 60.0],
                          demand_lps=[0.0, 4.0, 6.0], node_id=["src", "a", "b"], from_node=[0, 1], to_node=[1, 2],
                          length_m=[100.0, 100.0], surface_length_m=[100.0, 100.0], roots=[0], settings=settings)


def test_pump_in_summary_and_bill():
    r = _line()
    pump = r.summary["pump"]
    head = r.summary["source_hgl_m"][0] - 50.0
    assert pump["flow_lps"] == pytest.approx(10.0) and pump["head_m"] == pytest.approx(head)
    assert pump["shaft_kw"] == pytest.approx(9.80665 * 0.010 * head / 0.75)
    q = r.quantities
    energy = q["category"] == "energy (present value)"
    assert q["total_cost"][energy].sum() == pytest.approx(r.summary["energy_cost_pv"]) and r.summary["energy_cost_pv"] > 0
    assert (q["category"] == "pump station").sum() == 1
    # capital excludes the energy; the bill's TOTAL is the whole-life cost
    assert r.summary["whole_life_cost"] == pytest.approx(q["total_cost"][-1])
    assert r.summary["total_cost"] + r.summary["energy_cost_pv"] == pytest.approx(r.summary["whole_life_cost"])
    assert q["total_cost"][:-1].sum() == pytest.approx(q["total_cost"][-1])
    # efficiency and sump settings
    r2 = _line(DesignSettings(pump_efficiency=0.5, pump_sump_m=40.0))
    assert r2.summary["pump"]["head_m"] == pytest.approx(head + 10.0)
    assert r2.summary["pump"]["shaft_kw"] == pytest.approx(9.80665 * 0.010 * (head + 10) / 0.5)
    with pytest.raises(Exception, match="pump_efficiency"):
        DesignSettings(pump_efficiency=1.2)
