"""Routes through plan_layout and the CLI: corridor links, junctions, barriers, crossings."""

import math

import geopandas as gpd
import numpy as np
import pytest
import rasterio
import shapely
from rasterio.transform import from_origin

import mainspan as ms
from mainspan.errors import InputError
from tests.conftest import run_cli, write_points

UTM = "EPSG:32633"
X0, Y0 = 500000.0, 5000410.0            # top-left of the test rasters


def _raster(path, data, cell=10.0):
    with rasterio.open(path, "w", driver="GTiff", width=data.shape[1], height=data.shape[0],
                       count=1, dtype="float32", crs=UTM, nodata=-9999.0,
                       transform=from_origin(X0, Y0, cell, cell)) as ds:
        ds.write(np.asarray(data, np.float32), 1)
    return str(path)


def _lines(path, geoms):
    gpd.GeoDataFrame({"name": [f"f{i}" for i in range(len(geoms))]}, geometry=list(geoms),
                     crs=UTM).to_file(path, engine="pyogrio")
    return str(path)


@pytest.fixture
def valley(tmp_path):
    """A T of cheap ground (1 per m) in dear ground (20 per m); sites at the ends of the arms."""
    land = np.full((41, 41), 20.0)
    land[20, :] = 1.0
    land[20:, 20] = 1.0
    xy = np.array([[X0 + 5, Y0 - 205], [X0 + 405, Y0 - 205], [X0 + 205, Y0 - 405]])
    return {"land": _raster(tmp_path / "land.tif", land), "xy": xy, "tmp": tmp_path,
            "sites": ms.sites_from_arrays(xy, crs=UTM, node_id=["S", "E", "W"],
                                          role=["source", "demand", "demand"],
                                          demand_lps=[0.0, 4.0, 6.0])}


def test_corridor_plan_designs_the_network_with_a_junction(valley):
    lay = ms.plan_layout(valley["sites"], land_cost=valley["land"], route="corridor",
                         connectivity=8, system="pressure")
    roles = np.asarray(lay.nodes["role"])
    assert (roles == "junction").sum() == 1
    j = int(np.flatnonzero(roles == "junction")[0])
    assert lay.nodes["demand_lps"][j] == 0.0
    assert lay.n_links == 3 and "diameter_mm" in lay.links
    # the junction carries both demands on the trunk from the source
    trunk = int(np.flatnonzero(np.asarray(lay.links["from_node"]) == "S")[0])
    assert lay.design.link_fields["flow_lps"][trunk] == pytest.approx(10.0)
    frames = lay.to_frames()
    geoms = frames["links"].geometry.values
    assert all(len(shapely.get_coordinates(g)) >= 2 for g in geoms)
    # the written geometry is the routed polyline: its length is the link's length_m
    np.testing.assert_allclose(shapely.length(geoms), lay.links["length_m"], rtol=1e-9)
    assert float(lay.run_info["routing_saving_pct"]) > 30.0
    assert lay.run_info["route"] == "corridor" and lay.run_info["n_junctions"] == "1"
    straight = ms.plan_layout(valley["sites"], land_cost=valley["land"])
    assert lay.total("cost") < straight.total("cost")
    assert float(lay.run_info["straight_total_cost"]) == pytest.approx(straight.total("cost"))


def test_corridor_memory_budget_is_refused_before_the_search(valley):
    with pytest.raises(InputError, match=r"needs about [\d,]+ MiB.*--corridor-cell-m"):
        ms.plan_layout(valley["sites"], land_cost=valley["land"], route="corridor",
                       corridor_cell_m=0.05, corridor_memory_mb=64)


def test_straight_junctions_on_an_equilateral_triangle():
    # Steiner minimal tree of an equilateral triangle: sqrt(3) sides (Gilbert & Pollak 1968)
    xy = np.array([[0.0, 0.0], [100.0, 0.0], [50.0, 50.0 * math.sqrt(3)]]) + [500000, 5000000]
    s = ms.sites_from_arrays(xy, crs=UTM)
    lay = ms.plan_layout(s, junctions=True)
    assert lay.total("length_m") == pytest.approx(100 * math.sqrt(3), rel=1e-3)
    assert lay.run_info["n_junctions"] == "1"
    assert float(lay.run_info["routing_saving_pct"]) == pytest.approx(
        100 * (1 - math.sqrt(3) / 2), abs=0.1)


def test_straight_crossings_and_barrier_through_the_cli(valley, capsys):
    tmp = valley["tmp"]
    sites = write_points(tmp / "s.gpkg", valley["xy"], fields={"id": ["S", "E", "W"],
                                                                "role": ["source", "demand",
                                                                         "demand"]})
    road = _lines(tmp / "road.gpkg", [shapely.LineString([(X0 + 300, Y0 - 500),
                                                          (X0 + 300, Y0)])])
    wall = _lines(tmp / "wall.gpkg", [shapely.LineString([(X0 + 100, Y0 - 450),
                                                          (X0 + 150, Y0 - 300)])])
    out = tmp / "o.gpkg"
    code, so, se = run_cli(["plan", "--sites", sites, "--crossing", f"{road}=2500",
                            "--barrier", wall, "--output", out], capsys)
    assert code == 0, se
    links = gpd.read_file(out, layer="links")
    # the crossing count is shapely's, link by link (shapely intersection)
    ref = shapely.intersects(links.geometry.values, shapely.LineString(
        [(X0 + 300, Y0 - 500), (X0 + 300, Y0)])).astype(int)
    np.testing.assert_array_equal(links["crossings"].to_numpy(), ref)
    np.testing.assert_allclose(links["crossing_cost"], 2500.0 * ref)
    assert not shapely.intersects(links.geometry.values, shapely.LineString(
        [(X0 + 100, Y0 - 450), (X0 + 150, Y0 - 300)])).any()
    code, so, se = run_cli(["plan", "--sites", sites, "--crossing", road, "--output",
                            tmp / "x.gpkg"], capsys)
    assert code == 2 and "--crossing" in se and "Traceback" not in se
    code, so, se = run_cli(["plan", "--sites", sites, "--route", "corridor", "--connectivity",
                            "12", "--output", tmp / "y.gpkg"], capsys)
    assert code == 2 and "connectivity" in se and len(se.strip().splitlines()) == 1


def test_scenario_comparison_refuses_routing_settings(valley, capsys):
    # scenarios share straight-link stages: a route there is refused, never planned straight
    tmp = valley["tmp"]
    write_points(tmp / "s.gpkg", valley["xy"], fields={"id": ["S", "E", "W"],
                                                        "role": ["source", "demand", "demand"]})
    proj = tmp / "p.toml"
    proj.write_text(f'[sites]\npath = "{tmp / "s.gpkg"}"\nid_field = "id"\nrole_field = "role"\n'
                    f'[rasters]\nland_cost = "{valley["land"]}"\n'
                    '[scenarios.routed]\ncandidates = { route = "corridor" }\n')
    code, so, se = run_cli(["compare", proj, "--quiet"], capsys)
    assert code == 2 and "'routed'" in se and "route" in se and "Traceback" not in se


def test_corridor_with_terrain_profiles_follow_the_routes(valley):
    r, c = np.mgrid[0:41, 0:41]
    dem = _raster(valley["tmp"] / "dem.tif", 100.0 + 0.2 * r + 0.1 * c)
    lay = ms.plan_layout(valley["sites"], land_cost=valley["land"], terrain=dem,
                         route="corridor", connectivity=16, system="pressure")
    p = lay.profiles
    assert len(p.offsets) == lay.n_links + 1
    for i in range(lay.n_links):
        st, g = p.of(i)
        # the profile runs the routed polyline's whole length, stations rising
        assert st[0] == 0.0 and st[-1] == pytest.approx(lay.links["length_m"][i], rel=1e-9)
        assert (np.diff(st) >= 0).all() and np.isfinite(g).all()
    assert lay.links["surface_length_m"].sum() >= lay.links["length_m"].sum()
    assert "diameter_mm" in lay.links and lay.run_info["system"] == "pressure"
