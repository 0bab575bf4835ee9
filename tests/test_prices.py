"""Price table: defaults, arithmetic, CSV/TOML reading, one-line errors, CLI option."""

import math
import subprocess
import sys

import numpy as np
import pytest

from mainspan.errors import DataFileError
from mainspan.hydraulics.prices import (PriceTable, annuity_factor, default_prices, prices_from_mapping, read_prices,
                             write_prices_csv)


def test_annuity_factor_against_tables():
    # present-worth factor of a uniform series (P/A, i, n), as printed in engineering-economics
    # interest tables (e.g. Grant, Ireson & Leavenworth; from memory): 5 %, 20 a -> 12.4622;
    # 8 %, 10 a -> 6.7101; 10 %, 25 a -> 9.0770
    assert annuity_factor(0.05, 20) == pytest.approx(12.4622, abs=5e-5)
    assert annuity_factor(0.08, 10) == pytest.approx(6.7101, abs=5e-5)
    assert annuity_factor(0.10, 25) == pytest.approx(9.0770, abs=5e-5)
    # by definition the sum of the discounted years; r = 0 -> n
    assert annuity_factor(0.07, 30) == pytest.approx(sum(1.07 ** -t for t in range(1, 31)))
    assert annuity_factor(0.0, 12) == 12


def test_energy_and_station_prices():
    p = replace_prices(energy_per_kwh=0.2, hours_per_year=1000.0, years=20.0, discount_rate=0.05)
    # 100 kW x 1000 h x 0.2 = 20,000 a year, x 12.4622 (annuity table, 5 %, 20 a)
    assert float(p.energy_cost_pv(100.0)) == pytest.approx(20000 * 12.4622, rel=1e-5)
    assert float(p.energy_cost_pv(100.0, hours_per_year=500.0)) == pytest.approx(10000 * 12.4622, rel=1e-5)
    np.testing.assert_allclose(p.pump_station_cost([0.0, 10.0]), [0.0, 40000 + 900 * 10])
    np.testing.assert_allclose(p.manhole_cost([2.0, 3.0], drop=[False, True]), [1500 + 1200, 1500 + 1800 + 1200])


def replace_prices(**kw):
    from dataclasses import replace
    return replace(default_prices(), **kw)


def test_trench_cost_by_hand():
    p = default_prices()
    # 4 m deep, 1 m wide, 10 m long: slices 1.5 m at 25, 1.5 m at 32, 1 m at 42 per m3 -> 127.5 per m2 plan
    parts = p.trench_parts(4.0, 1.0, 10.0, bedding_m=0.1)
    assert float(parts["excavation"]) == pytest.approx((1.5 * 25 + 1.5 * 32 + 1.0 * 42) * 10)
    # deeper than 1.5 m: both walls shored full height, 2 x 4 m x 10 m x 18
    assert float(parts["shoring"]) == pytest.approx(2 * 4 * 10 * 18)
    assert float(parts["bedding"]) == pytest.approx(45 * 1.0 * 0.1 * 10)
    assert float(parts["reinstatement"]) == pytest.approx(4 * 10)
    # no shoring at 1.5 m or less; excavation continuous across a band edge
    assert float(p.trench_parts(1.5, 1.0, 10.0)["shoring"]) == 0.0
    e = p.excavation_cost_per_m2(np.array([1.5 - 1e-9, 1.5 + 1e-9]))
    assert e[1] - e[0] < 1e-6
    # reinstatement by land-use class: 5 (road) at 65, an unknown class at the default 4
    np.testing.assert_allclose(p.reinstatement_rate([5, 1, 99, "default"]), [65.0, 4.0, 4.0, 4.0])
    cost = p.trench_cost([1.0, 1.0], 1.0, 10.0, surface_class=[5, 1], bedding_m=0.0)
    np.testing.assert_allclose(cost, [25 * 10 + 65 * 10, 25 * 10 + 4 * 10])


def test_fitting_prices_interpolate():
    p = default_prices()
    np.testing.assert_allclose(p.fitting_cost("isolation_valve", [32, 71, 110, 20]), [120, 285, 450, 120])
    assert float(p.fitting_cost("air_valve", 750.0)) == pytest.approx(2500 + (2500 - 450) / 350 * 350)
    with pytest.raises(Exception, match="no fitting 'hydrant'"):
        p.fitting_cost("hydrant", 100)


def test_csv_round_trip_and_placeholder(tmp_path):
    f = tmp_path / "prices.csv"
    write_prices_csv(default_prices(), f)
    back = read_prices(f)
    assert back == default_prices() and back.placeholder
    text = f.read_text().replace("placeholder,,,,1,", "placeholder,,,,0,").replace("energy,per_kwh,,,0.15", "energy,per_kwh,,,0.3")
    f.write_text(text)
    mine = read_prices(f)
    assert not mine.placeholder and mine.energy_per_kwh == 0.3 and mine.defaulted == ()
    assert "user prices" in mine.describe()
    # a partial table keeps the placeholder defaults for the rest, and says so
    g = tmp_path / "partial.csv"
    g.write_text("item,key,size_mm,depth_to_m,value,unit\nenergy,per_kwh,,,0.25,kWh\n")
    part = read_prices(g)
    assert part.energy_per_kwh == 0.25 and part.placeholder and "excavation" in part.defaulted
    assert "PLACEHOLDER" in part.describe()


@pytest.mark.parametrize("body, where", [
    ("excavation,,,1.5,abc,m3", "line 2, column 'value': 'abc' is not a number"),
    ("excavation,,,1.5,20,m3\n\nexcavation,,,-3,30,m3", "line 4, column 'depth_to_m'"),
    ("excavation,,,1.5,20,m3", "column 'depth_to_m': no open band"),
    ("fitting,air_valve,,,300,each", "line 2, column 'size_mm': empty"),
    ("bedding,,,,45,m2", "line 2, column 'unit': 'm2'"),
    ("manhole,bottom,,,45,each", "line 2, column 'key': 'bottom'"),
    ("pipes,,,,4,m", "line 2, column 'item': unknown item 'pipes'"),
    ("operation,discount_rate,,,5,", "line 2, column 'value': discount rate 5 is a fraction"),
    ("energy,per_kwh,,,0.1,kWh\nenergy,per_kwh,,,0.2,kWh", "line 3, column 'item'"),
])
def test_bad_csv_names_file_line_column(tmp_path, body, where):
    f = tmp_path / "bad.csv"
    f.write_text("item,key,size_mm,depth_to_m,value,unit\n" + body + "\n")
    with pytest.raises(DataFileError) as e:
        read_prices(f)
    msg = str(e.value)
    assert "\n" not in msg and str(f) in msg and where in msg


def test_toml_table_and_errors(tmp_path):
    p = prices_from_mapping({"placeholder": False, "excavation": {"1.5": 20.0, "deeper": 30.0},
                             "fitting": {"air_valve": {"50": 400.0, "100": 800.0}},
                             "reinstatement": {"default": 3.0, "5": 70.0}})
    assert p.excavation_depth_to_m == (1.5, math.inf) and p.excavation_per_m3 == (20.0, 30.0)
    assert float(p.fitting_cost("air_valve", 75)) == pytest.approx(600.0)
    assert float(p.fitting_cost("washout", 50)) == 350.0        # kept from the defaults
    f = tmp_path / "p.toml"
    f.write_text("[prices]\nplaceholder = false\nbedding = 40.0\nenergy = { per_kwh = 'x' }\n")
    with pytest.raises(DataFileError, match=r"p.toml, line 4, column 'value': 'x' is not a number"):
        read_prices(f)


def test_project_prices_section_and_cli(tmp_path, monkeypatch):
    from mainspan.settings.project import load_project, plan_kwargs
    (tmp_path / "p.toml").write_text('[sites]\npath = "s.gpkg"\n[design]\nsystem = "pressure"\n'
                                     '[prices]\nplaceholder = false\n\nbedding = -1.0\n')
    with pytest.raises(DataFileError, match=r"\[prices\], line 8, column 'value': -1.0 must be >= 0"):
        load_project(tmp_path / "p.toml")
    (tmp_path / "p.toml").write_text('[sites]\npath = "s.gpkg"\n[design]\nprices = "x.csv"\n')
    _, _, plan, _ = plan_kwargs(load_project(tmp_path / "p.toml").settings_for(None))
    assert plan["design"]["prices"] == str(tmp_path / "x.csv")
    # the CLI: a bad table is a one-line error and exit 2
    bad = tmp_path / "bad.csv"
    bad.write_text("item,key,size_mm,depth_to_m,value,unit\ncrossing,,,,lots,each\n")
    sites = tmp_path / "s.csv"
    sites.write_text("id,x,y,role,q_lps\nS,0,0,source,0\nA,100,0,outlet,1\nB,100,100,outlet,1\n")
    r = subprocess.run([sys.executable, "-m", "mainspan", "plan", "--sites", str(sites), "--x-field", "x",
                        "--y-field", "y", "--sites-crs", "EPSG:32633", "--role-field", "role", "--demand-field",
                        "q_lps", "--system", "pressure", "--prices", str(bad), "--out", str(tmp_path / "o.gpkg")],
                       capture_output=True, text=True)
    assert r.returncode == 2, r.stderr
    assert "bad.csv, line 2, column 'value': 'lots' is not a number" in r.stderr
    assert "Traceback" not in r.stderr
    assert [ln for ln in r.stderr.splitlines() if "error" in ln][0].endswith("give a number")


def test_design_uses_the_table():
    from mainspan.hydraulics import DesignSettings, design_network
    args = dict(xy=[[0, 0], [100, 0]], elevation_m=[10.0, 10.0], demand_lps=[0.0, 2.0], node_id=["s", "a"],
                from_node=[0], to_node=[1], length_m=[100.0], surface_length_m=[100.0], roots=[0])
    base = design_network("pressure", **args)
    dear = design_network("pressure", **args, settings=DesignSettings(prices=replace_prices(bedding_per_m3=450.0)))
    width = base.link_fields["nominal_mm"][0] / 1000 + 0.6
    assert dear.summary["trench_cost"] - base.summary["trench_cost"] == pytest.approx(405.0 * width * 0.1 * 100)
    flat = design_network("pressure", **args, settings=DesignSettings(trench_cost_per_m3=10.0))
    assert flat.summary["trench_breakdown"]["excavation"] == pytest.approx(
        10.0 * width * base.link_fields["trench_depth_m"][0] * 100)
    assert "PLACEHOLDER" in base.summary["prices"]
    assert isinstance(DesignSettings().price_table(), PriceTable)


def test_reinstatement_by_land_use_raster(tmp_path):
    import rasterio
    from rasterio.transform import from_origin

    from mainspan.pipeline.layout import plan_layout
    from mainspan.sites.read import read_sites
    from tests.conftest import write_points

    # 10 m cells, class 1 (cropland) everywhere but a road strip (class 5) from x = 512100 to 512120
    cls = np.ones((30, 40), np.uint8)
    cls[:, 10:12] = 5
    ras = tmp_path / "landuse.tif"
    with rasterio.open(ras, "w", driver="GTiff", width=40, height=30, count=1, dtype="uint8", nodata=0,
                       crs="EPSG:32633", transform=from_origin(512000, 5120300, 10, 10)) as dst:
        dst.write(cls, 1)
    sites = write_points(tmp_path / "s.gpkg", [[512050, 5120155], [512150, 5120155], [512050, 5120255]],
                         fields={"id": ["S", "E", "N"], "role": ["source", "demand", "demand"], "q": [0, 1.0, 1.0]})
    lay = plan_layout(read_sites(sites, id_field="id", role_field="role", demand_field="q"), system="pressure",
                      design={"surface_raster": str(ras)})
    rate = dict(zip(np.asarray(lay.nodes["node_id"])[lay.link_ends[:, 1]], lay.links["reinstatement_per_m2"]))
    # by hand: the link east crosses 20 m of road in 100 m -> (80 x 4 + 20 x 65) / 100; the link north is all cropland
    assert rate["E"] == pytest.approx((80 * 4 + 20 * 65) / 100) and rate["N"] == pytest.approx(4.0)
    width = np.asarray(lay.links["nominal_mm"]) / 1000 + 0.6
    want = float(np.sum(np.asarray(lay.links["reinstatement_per_m2"]) * width * np.asarray(lay.links["length_m"])))
    assert lay.design.summary["trench_breakdown"]["reinstatement"] == pytest.approx(want)
