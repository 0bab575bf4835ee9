"""Reading and validating site layers: formats, defaults and every bad input."""

import numpy as np
import pytest

from mainspan import InputError, DataFileError, read_sites
from mainspan.sites.read import sites_from_arrays
from tests.conftest import write_points

XY = np.array([[512000.0, 5120000.0], [512100.0, 5120000.0], [512100.0, 5120100.0]])


@pytest.mark.parametrize("name,driver", [("s.gpkg", "GPKG"), ("s.shp", "ESRI Shapefile"),
                                         ("s.geojson", "GeoJSON"), ("s.fgb", "FlatGeobuf")])
def test_every_ogr_format_reads_the_same(tmp_path, name, driver):
    p = write_points(tmp_path / name, XY, fields={"id": ["a", "b", "c"],
                                                  "role": ["source", "demand", "demand"],
                                                  "q": [0.0, 1.5, 2.5]}, driver=driver)
    s = read_sites(p, demand_field="q")
    o = np.argsort(s.node_id.astype(str))   # FlatGeobuf stores features in spatial order
    assert s.node_id[o].tolist() == ["a", "b", "c"]
    assert s.role[o].tolist() == ["source", "demand", "demand"]
    np.testing.assert_allclose(s.demand[o], [0, 1.5, 2.5])
    np.testing.assert_allclose(s.xy[o], XY)
    assert s.crs.to_epsg() == 32633


def test_csv_with_named_columns(tmp_path):
    p = tmp_path / "s.csv"
    p.write_text("name,E,N\nA,512000,5120000\nB,512030,5120040\n")
    s = read_sites(p, id_field="name", x_field="E", y_field="N", sites_crs="EPSG:32633")
    assert s.node_id.tolist() == ["A", "B"]
    assert np.hypot(*(s.xy[1] - s.xy[0])) == pytest.approx(50.0)


def test_csv_in_lon_lat_goes_to_utm(tmp_path):
    p = tmp_path / "s.csv"
    p.write_text("x,y\n15.1,46.2\n15.101,46.2\n")
    s = read_sites(p, sites_crs="EPSG:4326")
    # 15.1 E lies in UTM zone 33 (central meridian 15 E; NGA.SIG.0012 zone = floor((lon+180)/6)+1)
    assert s.crs.to_epsg() == 32633


def test_row_numbers_when_no_id_field(tmp_path):
    p = write_points(tmp_path / "s.gpkg", XY)
    assert read_sites(p).node_id.tolist() == ["1", "2", "3"]


def test_multipoint_of_one_and_z_hint(tmp_path):
    import geopandas as gpd
    import shapely
    g = [shapely.MultiPoint([(512000, 5120000, 101.5)]), shapely.Point(512050, 5120000, 99.0),
         shapely.Point(512000, 5120060, 98.0)]
    p = tmp_path / "m.gpkg"
    gpd.GeoDataFrame({"id": [1, 2, 3]}, geometry=g, crs=32633).to_file(p)
    s = read_sites(p)
    np.testing.assert_allclose(s.elevation, [101.5, 99.0, 98.0])
    assert s.node_id.tolist() == ["1", "2", "3"]


@pytest.mark.parametrize("case,needle", [
    ("nocrs", "has no CRS"), ("empty", "is empty"), ("line", "not a point"),
    ("dupid", "duplicate id"), ("coincident", "coincident"), ("one", "at least 2"),
    ("badrole", "roles are"), ("baddemand", "demands must be"), ("nofield", "not found"),
    ("multi", "MultiPoint of 2"),
])
def test_bad_inputs_have_one_line_messages(tmp_path, case, needle):
    import geopandas as gpd
    import shapely
    p = tmp_path / "bad.gpkg"
    kw = {}
    if case == "nocrs":
        gpd.GeoDataFrame(geometry=shapely.points(XY)).to_file(p)
    elif case == "empty":
        gpd.GeoDataFrame({"id": []}, geometry=[], crs=32633).to_file(p)
    elif case == "line":
        gpd.GeoDataFrame(geometry=[shapely.Point(0, 0), shapely.LineString([(0, 0), (1, 1)])],
                         crs=32633).to_file(p)
    elif case == "dupid":
        write_points(p, XY, fields={"id": ["a", "a", "b"]})
    elif case == "coincident":
        write_points(p, [XY[0], XY[0] + 1e-4, XY[2]])
    elif case == "one":
        write_points(p, XY[:1])
    elif case == "badrole":
        write_points(p, XY, fields={"role": ["source", "pump", "demand"]})
    elif case == "baddemand":
        write_points(p, XY, fields={"q": [1.0, -2.0, 0.0]})
        kw["demand_field"] = "q"
    elif case == "nofield":
        write_points(p, XY)
        kw["id_field"] = "station"
    elif case == "multi":
        gpd.GeoDataFrame(geometry=[shapely.MultiPoint([(0, 0), (1, 1)]), shapely.Point(5, 5)],
                         crs=32633).to_file(p)
    with pytest.raises(InputError) as ei:
        read_sites(p, **kw)
    msg = str(ei.value)
    assert needle in msg and "\n" not in msg
    assert "bad.gpkg" in msg or case in ("nofield",) or "--" in msg


def test_coincident_pairs_listed_and_merged(tmp_path):
    p = write_points(tmp_path / "s.gpkg", [XY[0], XY[0], XY[1], XY[2]],
                     fields={"id": ["a", "b", "c", "d"]})
    with pytest.raises(InputError, match=r"a=b.*--merge-within"):
        read_sites(p)
    assert read_sites(p, merge_within_m=0).node_id.tolist() == ["a", "c", "d"]


def test_nan_coordinates_named(tmp_path):
    p = tmp_path / "s.csv"
    p.write_text("x,y\n1,2\nnan,3\n5,6\n")
    with pytest.raises(InputError, match="row 2"):
        read_sites(p, sites_crs="EPSG:32633")


def test_missing_file_and_layer(tmp_path):
    with pytest.raises(DataFileError, match="does not exist"):
        read_sites(tmp_path / "nope.gpkg")
    p = write_points(tmp_path / "s.gpkg", XY, layer="a")
    write_points(tmp_path / "s.gpkg", XY, layer="b")
    with pytest.raises(InputError, match="choose one with --layer"):
        read_sites(p)
    with pytest.raises(InputError, match="no layer 'c'"):
        read_sites(p, layer="c")
    assert read_sites(p, layer="b").n == 3


def test_merge_within_sums_demand_and_keeps_strongest_role(tmp_path):
    xy = [XY[0], XY[0] + [0.3, 0], XY[1], XY[2]]
    p = write_points(tmp_path / "s.gpkg", xy, fields={
        "id": ["a", "b", "c", "d"], "role": ["demand", "source", "demand", "demand"],
        "q": [1.0, 2.0, 3.0, 4.0]})
    assert read_sites(p, demand_field="q").n == 4      # 0.3 m apart is not coincident
    s = read_sites(p, demand_field="q", merge_within_m=0.5)
    assert s.node_id.tolist() == ["a", "c", "d"]
    assert s.role.tolist() == ["source", "demand", "demand"]
    np.testing.assert_allclose(s.demand, [3.0, 3.0, 4.0])
    assert s.merged == [("a", "b")]


def test_sites_from_arrays_validates():
    s = sites_from_arrays(XY, crs="EPSG:32633")
    assert s.n == 3
    with pytest.raises(InputError):
        sites_from_arrays(XY[:1], crs="EPSG:32633")
    with pytest.raises(InputError):
        sites_from_arrays(np.array([[0.0, np.nan], [1, 1]]), crs="EPSG:32633")
