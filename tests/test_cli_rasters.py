"""Raster inputs through the real CLI: nodata policies, outside sites, CRS mismatch, no CRS."""

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin

from tests.conftest import run_cli, write_points

X0, Y0 = 512000.0, 5121000.0     # top-left of the test rasters, UTM 33N


def write_raster(path, data, *, crs="EPSG:32633", x0=X0, y0=Y0, cell=10.0, nodata=-9999.0):
    data = np.asarray(data, np.float32)
    with rasterio.open(path, "w", driver="GTiff", width=data.shape[1], height=data.shape[0],
                       count=1, dtype="float32", crs=crs, nodata=nodata,
                       transform=from_origin(x0, y0, cell, cell)) as ds:
        ds.write(data, 1)
    return str(path)


@pytest.fixture
def scene(tmp_path):
    """Six sites on a 100 x 100 cell (1 km) raster; a nodata block in the middle."""
    xy = np.array([[512100, 5120900], [512500, 5120900], [512900, 5120900],
                   [512100, 5120100], [512500, 5120100], [512900, 5120100]], float)
    sites = write_points(tmp_path / "s.gpkg", xy, fields={"id": list("ABCDEF")})
    yy, xx = np.mgrid[0:100, 0:100]
    dem = 200 + 0.05 * xx + 0.02 * yy
    cost = np.full((100, 100), 10.0)
    cost_hole = cost.copy()
    cost_hole[45:55, 45:55] = -9999.0          # nodata under the middle
    return {
        "sites": sites, "xy": xy,
        "dem": write_raster(tmp_path / "dem.tif", dem),
        "cost": write_raster(tmp_path / "cost.tif", cost),
        "hole": write_raster(tmp_path / "hole.tif", cost_hole),
        "out": tmp_path / "o.gpkg", "tmp": tmp_path,
    }


def test_terrain_and_land_cost_fill_the_links(scene, capsys):
    code, out, err = run_cli(["plan", "--sites", scene["sites"], "--terrain", scene["dem"],
                              "--land-cost", scene["cost"], "--out", scene["out"]], capsys)
    assert code == 0, err
    import pyogrio
    links = pyogrio.read_dataframe(scene["out"], layer="links")
    # a uniform 10/m raster integrates to 10 x plan length (exact line integral)
    np.testing.assert_allclose(links.land_cost, 10 * links.length_m, rtol=1e-9)
    assert links.geometry.has_z.all()
    assert (links.surface_length_m >= links.length_m - 1e-9).all()


def test_nodata_policies(scene, capsys):
    base = ["plan", "--sites", scene["sites"], "--land-cost", scene["hole"], "--out", scene["out"],
            "--overwrite", "--candidates", "complete"]
    code, out, err = run_cli(base, capsys)                       # barrier (default)
    assert code == 0, err
    assert "impassable dropped" in out
    import pyogrio
    barrier = pyogrio.read_dataframe(scene["out"], layer="links")
    assert (barrier.nodata_fraction == 0).all()
    assert not any(
        {f, t} == {"B", "E"} for f, t in zip(barrier.from_node, barrier.to_node))
    code, out, err = run_cli(base + ["--on-nodata", "skip"], capsys)
    assert code == 0, err
    # skip: the gap costs nothing, so B-E (800 m straight through the 100 m hole) is now the
    # cheapest link between the rows and joins the tree; its land cost is 10/m over the part
    # outside the hole, measured with shapely (GEOS) against the hole's cell polygon
    import shapely
    skip = pyogrio.read_dataframe(scene["out"], layer="links")
    be = [k for k, (f, t) in enumerate(zip(skip.from_node, skip.to_node)) if {f, t} == {"B", "E"}]
    assert len(be) == 1
    hole = shapely.box(X0 + 450, Y0 - 550, X0 + 550, Y0 - 450)
    for k, g in enumerate(skip.geometry):
        line = shapely.force_2d(g)
        inside = shapely.length(shapely.intersection(line, hole))
        assert skip.nodata_fraction[k] == pytest.approx(inside / line.length, abs=1e-12)
        assert skip.land_cost[k] == pytest.approx(10.0 * (line.length - inside), rel=1e-9)
    assert skip.nodata_fraction[be[0]] == pytest.approx(100.0 / 800.0)
    assert skip.land_cost.sum() < barrier.land_cost.sum()
    code, out, err = run_cli(base + ["--on-nodata", "error"], capsys)
    assert code == 2 and "link" in err and "hole.tif" in err and "sites " in err


def test_sites_outside_terrain_listed_by_id(scene, capsys):
    small = write_raster(scene["tmp"] / "small.tif", np.full((50, 50), 100.0))  # west half only
    code, out, err = run_cli(["plan", "--sites", scene["sites"], "--terrain", small,
                              "--out", scene["out"]], capsys)
    assert code == 2 and "outside the terrain" in err
    assert "C" in err and "F" in err


def test_raster_in_another_crs_gives_same_costs(scene, capsys):
    from rasterio.warp import Resampling, calculate_default_transform, reproject
    src_path = scene["dem"]
    dst_path = scene["tmp"] / "dem_3035.tif"
    with rasterio.open(src_path) as src:
        t, w, h = calculate_default_transform(src.crs, "EPSG:3035", src.width, src.height,
                                              *src.bounds, resolution=5.0)
        with rasterio.open(dst_path, "w", driver="GTiff", width=w, height=h, count=1,
                           dtype="float32", crs="EPSG:3035", transform=t, nodata=-9999) as dst:
            reproject(rasterio.band(src, 1), rasterio.band(dst, 1),
                      resampling=Resampling.bilinear, dst_nodata=-9999)
    a, b = scene["tmp"] / "a.gpkg", scene["tmp"] / "b.gpkg"
    assert run_cli(["plan", "--sites", scene["sites"], "--terrain", src_path, "--out", a,
                    "--quiet"], capsys)[0] == 0
    assert run_cli(["plan", "--sites", scene["sites"], "--terrain", dst_path, "--out", b,
                    "--quiet"], capsys)[0] == 0
    import pyogrio
    la, lb = (pyogrio.read_dataframe(p, layer="links") for p in (a, b))
    # planar DEM: bilinear resampling of a plane is exact, so elevations agree closely
    np.testing.assert_allclose(la.z_from_m, lb.z_from_m, atol=0.05)
    np.testing.assert_allclose(la.surface_length_m, lb.surface_length_m, rtol=1e-5)


def test_raster_without_crs_needs_raster_crs(scene, capsys):
    # a land-cost raster rising 1 per column, with no CRS in the file
    yy, xx = np.mgrid[0:100, 0:100]
    values = 1.0 + xx + 0.5 * yy
    # shifted half a cell so that no link runs along a cell edge (where the cell is ambiguous)
    x0, y0 = X0 - 5.0, Y0 + 5.0
    nocrs = write_raster(scene["tmp"] / "nocrs.tif", values, crs=None, x0=x0, y0=y0)
    code, out, err = run_cli(["plan", "--sites", scene["sites"], "--land-cost", nocrs,
                              "--out", scene["out"]], capsys)
    assert code == 2 and "--raster-crs" in err and "nocrs.tif" in err
    code, out, err = run_cli(["plan", "--sites", scene["sites"], "--land-cost", nocrs,
                              "--raster-crs", "EPSG:32633", "--out", scene["out"]], capsys)
    assert code == 0, err
    # the option places the grid in UTM 33N: each link's land cost is the sum over the cells it
    # crosses of (length in cell) x value, measured with shapely (GEOS) on the cell polygons
    import pyogrio
    import shapely
    links = pyogrio.read_dataframe(scene["out"], layer="links")
    cols, rows = xx.ravel(), yy.ravel()
    cells = shapely.box(x0 + 10.0 * cols, y0 - 10.0 * (rows + 1), x0 + 10.0 * (cols + 1),
                        y0 - 10.0 * rows)
    for g, cost in zip(links.geometry, links.land_cost):
        line = shapely.force_2d(g)
        ref = np.sum(shapely.length(shapely.intersection(line, cells)) * values.ravel())
        assert cost == pytest.approx(ref, rel=1e-9)
    # the same raster read as if it were in another CRS (EPSG:3035) no longer covers the sites
    code, out, err = run_cli(["plan", "--sites", scene["sites"], "--land-cost", nocrs,
                              "--raster-crs", "EPSG:3035", "--out", scene["out"],
                              "--overwrite"], capsys)
    assert code != 0


def test_check_reports_coverage(scene, capsys):
    small = write_raster(scene["tmp"] / "small.tif", np.full((50, 50), 100.0))
    code, out, err = run_cli(["check", "--sites", scene["sites"], "--terrain", small], capsys)
    assert code == 2 and "covers        2 of 6 sites" in out and "outside raster" in out
    code, out, err = run_cli(["check", "--sites", scene["sites"], "--terrain", scene["dem"],
                              "--land-cost", scene["cost"]], capsys)
    assert code == 0 and "memory estimate" in out


def test_bad_expression_names_the_raster(scene, capsys):
    code, out, err = run_cli(["plan", "--sites", scene["sites"], "--land-cost",
                              f"base={scene['cost']}", "--cost-expression", "bse * 2",
                              "--out", scene["out"]], capsys)
    assert code == 2 and "bse" in err
