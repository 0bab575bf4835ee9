"""Working CRS choice and distortion, checked against pyproj and published UTM values."""

import os

import numpy as np
import pyproj
import pytest

from mainspan import InputError, read_sites
from mainspan.sites.crs import choose_working_crs, scale_factor_range, to_crs, utm_epsg
from tests.conftest import LIBPYSAL_EXAMPLES, write_points


def test_utm_zone_formula():
    # NGA.SIG.0012_2.0.0_UTMUPS (2014): central meridian = 6*zone - 183 degrees
    for zone in (1, 17, 33, 60):
        cm = 6 * zone - 183
        assert utm_epsg(cm + 0.5, 10) == 32600 + zone
        assert utm_epsg(cm - 0.5, -10) == 32700 + zone


def test_scale_factor_on_central_meridian_and_at_600km():
    # NGA.SIG.0012: k0 = 0.9996 on the central meridian (false easting 500 000 m)
    kmin, kmax = scale_factor_range(np.array([[500000.0, 5100000.0]]), "EPSG:32633")
    assert kmin == pytest.approx(0.9996, abs=1e-9)
    # computed by hand from the sphere formula k = k0 (1 + x^2 / (2 k0^2 R^2)), Snyder, Map
    # Projections: A Working Manual, USGS PP 1395, 1987, ch. 8 (from memory), R 6 371 000 m:
    # E = 600 000 m -> k = 0.99972324.  pyproj's ellipsoidal factor differs from
    # the spherical approximation by a few 1e-7 at mid latitudes.
    kmin, _ = scale_factor_range(np.array([[600000.0, 5100000.0]]), "EPSG:32633")
    assert kmin == pytest.approx(0.99972324, abs=1e-6)


def test_grid_lengths_match_geodesic_within_scale_distortion():
    rng = np.random.default_rng(11)
    lonlat = np.column_stack([rng.uniform(14.2, 16.6, 200), rng.uniform(45.5, 47.0, 200)])
    w = choose_working_crs(pyproj.CRS("EPSG:4326"), lonlat)
    assert w.crs.to_epsg() == 32633
    xy = to_crs(lonlat, "EPSG:4326", w.crs)
    a, b = np.arange(0, 200, 2), np.arange(1, 200, 2)
    grid = np.hypot(*(xy[b] - xy[a]).T)
    # pyproj.Geod (Karney 2013, J. Geodesy 87:43) is the independent reference
    _, _, geo = pyproj.Geod(ellps="WGS84").inv(lonlat[a, 0], lonlat[a, 1], lonlat[b, 0],
                                               lonlat[b, 1])
    kmin, kmax = scale_factor_range(xy, w.crs)
    ratio = grid / geo
    assert np.all(ratio >= kmin - 2e-5) and np.all(ratio <= kmax + 2e-5)


@pytest.mark.skipif(LIBPYSAL_EXAMPLES is None, reason="libpysal examples not installed")
def test_feet_state_plane_real_layer_reports_metres():
    # geodanet schools: NAD83 Arizona Central in US survey feet, shipped with libpysal
    path = os.path.join(LIBPYSAL_EXAMPLES, "geodanet", "schools.shp")
    s = read_sites(path)
    assert s.crs.axis_info[0].unit_name == "metre"
    src = pyproj.CRS.from_user_input(s.source_crs)
    import pyogrio
    g = pyogrio.read_dataframe(path)
    ft = np.column_stack([g.geometry.x, g.geometry.y])
    d_ft = np.hypot(*(ft[1:] - ft[:-1]).T)
    d_m = np.hypot(*(s.xy[1:] - s.xy[:-1]).T)
    # US survey foot = 1200/3937 m exactly (NIST)
    np.testing.assert_allclose(d_m, d_ft * 1200 / 3937, rtol=1e-9)
    assert src.axis_info[0].unit_name == "US survey foot"


@pytest.mark.skipif(LIBPYSAL_EXAMPLES is None, reason="libpysal examples not installed")
def test_web_mercator_real_layer_is_reprojected_to_utm():
    path = os.path.join(LIBPYSAL_EXAMPLES, "snow_maps", "SohoPeople.shp")
    s = read_sites(path, merge_within_m=0.5)
    assert s.crs.to_epsg() == 32630          # Soho, London: lon -0.14 -> UTM 30N
    assert "distorts lengths" in s.crs_reason
    # pseudo-Mercator scale at 51.5 N is 1/cos(lat) = 1.607 (sphere); the working CRS is ~1
    kmin, kmax = scale_factor_range(s.xy, s.crs)
    assert 0.9996 <= kmin <= kmax < 1.001


def test_crs_override_and_bad_crs(tmp_path):
    p = write_points(tmp_path / "s.gpkg", [[15.0, 46.0], [15.001, 46.0]], crs="EPSG:4326")
    assert read_sites(p, crs="EPSG:3035").crs.to_epsg() == 3035
    with pytest.raises(InputError, match="not a projected CRS"):
        read_sites(p, crs="EPSG:4326")
    with pytest.raises(InputError, match="not a CRS PROJ understands"):
        read_sites(p, crs="EPSG:999999")


def test_impossible_transform_refused(tmp_path):
    # 90 degrees of longitude from UTM 33's central meridian, transverse Mercator gives inf
    p = write_points(tmp_path / "s.gpkg", [[105.0, 0.0], [15.0, 46.0]], crs="EPSG:4326")
    with pytest.raises(InputError, match="cannot be transformed"):
        read_sites(p, crs="EPSG:32633")
