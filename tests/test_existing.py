"""Tests of mainspan.graph.existing: existing mains as junctions, taps and existing links.

Outside reference: shapely's ``shapely.ops.nearest_points`` (GEOS) for tap positions, and
plain geometry (lengths along the line) computed by hand in the comments.
"""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from shapely.ops import nearest_points

from mainspan.errors import InputError
from mainspan.graph.existing import (existing_checks, existing_from_lines, extend_sites,
                                     nearest_on_lines, read_existing)

SITES = np.array([[0.0, 0.0], [50.0, 30.0], [120.0, -20.0], [260.0, 40.0]])
IDS = ["S", "a", "b", "c"]
MAIN = np.array([[0.3, 0.0], [100.0, 0.0], [200.0, 0.0]])     # starts at S (0.3 m: snapped)


def test_tap_positions_equal_shapely_nearest_points():
    rng = np.random.default_rng(1)
    parts = [rng.uniform(0, 500, (6, 2)), rng.uniform(0, 500, (4, 2)), MAIN]
    pts = rng.uniform(-50, 550, (40, 2))
    part, ch, xy, d = nearest_on_lines(parts, pts)
    lines = shapely.MultiLineString([p.tolist() for p in parts])
    for i, p in enumerate(pts):
        ref = nearest_points(lines, shapely.Point(p))[0]           # GEOS
        assert xy[i] == pytest.approx([ref.x, ref.y], abs=1e-7)
        assert d[i] == pytest.approx(ref.distance(shapely.Point(p)), abs=1e-7)
        line = shapely.LineString(parts[part[i]])
        assert ch[i] == pytest.approx(line.project(shapely.Point(xy[i])), abs=1e-6)


def test_nodes_and_links_along_a_main():
    ex = existing_from_lines([MAIN], SITES, site_id=IDS, diameter_mm=[150.0],
                             material=["PVC"])
    # vertices (100, 0), (200, 0); taps at the points nearest a (50, 0), b (120, 0), c (200, 0)
    # -> c's tap is the end vertex itself (clustered within 1 m)
    assert ex.junction_xy.tolist() == [[100.0, 0.0], [200.0, 0.0], [50.0, 0.0], [120.0, 0.0]]
    assert ex.junction_is_tap.tolist() == [False, False, True, True]
    assert ex.junction_id.tolist() == ["ex0.v1", "ex0.v2", "ex0.t1", "ex0.t2"]
    # chain S(0) - 50 (node 6) - 100 (4) - 120 (7) - 200 (5); lengths by hand
    assert ex.links.tolist() == [[0, 6], [4, 6], [4, 7], [5, 7]]
    assert ex.length_m == pytest.approx([49.7, 50.0, 20.0, 80.0])
    assert ex.length_m.sum() == pytest.approx(shapely.LineString(MAIN).length)
    assert ex.diameter_mm.tolist() == [150.0] * 4 and ex.material.tolist() == ["PVC"] * 4
    assert ex.on_main.tolist() == [True, False, False, False, True, True, True, True]


def test_tap_spacing_and_tee():
    tee = np.array([[150.0, 0.4], [150.0, 80.0]])      # ends 0.4 m from the main's interior
    ex = existing_from_lines([MAIN, tee], SITES[:1], tap_spacing_m=60.0)
    xs = sorted(map(tuple, ex.junction_xy.round(6).tolist()))
    # spacing taps at 60, 120, 180 m along the main (from x = 0.3), vertices at 100, 200,
    # the tee at (150, 0) and the tee's far end; the tee's near end joins the tee node
    for p in [(60.3, 0.0), (120.3, 0.0), (180.3, 0.0), (100.0, 0.0), (200.0, 0.0),
              (150.0, 80.0)]:
        assert p in xs
    tee_node = [i for i, p in enumerate(ex.junction_xy.tolist()) if abs(p[0] - 150) < 1e-9
                and abs(p[1]) <= 0.4][0] + 1
    deg = np.bincount(ex.links.ravel(), minlength=1 + ex.n_junctions)
    assert deg[tee_node] == 3                       # a tee: main in, main out, branch
    total = shapely.LineString(MAIN).length + 79.6
    assert ex.length_m.sum() == pytest.approx(total, abs=1e-6)


def test_lines_that_reach_no_site_are_refused():
    stray = np.array([[0.0, 300.0], [100.0, 300.0]])
    with pytest.raises(InputError, match=r"feature 1 reaches no site: it passes 270.0 m from "
                                         r"the nearest site \(a\)"):
        existing_from_lines([MAIN, stray], SITES, site_id=IDS)
    with pytest.raises(InputError, match="holds no lines"):
        existing_from_lines([], SITES)


def test_extend_sites_appends_junctions():
    import mainspan as ms
    s = ms.sites_from_arrays(SITES, crs="EPSG:32633", node_id=IDS,
                             role=["source", "demand", "demand", "demand"],
                             demand_lps=[0, 1, 2, 3])
    ex = existing_from_lines([MAIN], s.xy, site_id=IDS)
    s2 = extend_sites(s, ex)
    assert s2.n == 8 and s2.role[4:].tolist() == ["junction"] * 4
    assert s2.demand[4:].tolist() == [0.0] * 4 and s2.node_id[:4].tolist() == IDS


def test_existing_checks_flags_undersized():
    under, need = existing_checks([150, 100, 200, 100], [100, 150, np.nan, 80],
                                  [True, True, True, False])
    assert under.tolist() == [True, False, False, False]
    assert need[0] == 150 and np.isnan(need[1:]).all()


@pytest.mark.filterwarnings("ignore:.crs. was not provided")
def test_read_existing_layer_and_bad_layers(tmp_path):
    import geopandas as gpd

    path = tmp_path / "mains.gpkg"
    gpd.GeoDataFrame({"diameter_mm": [150.0], "material": ["DI"]},
                     geometry=[shapely.LineString(MAIN)], crs="EPSG:32633").to_file(path)
    ex = read_existing(path, working_crs="EPSG:32633", site_xy=SITES, site_id=IDS)
    assert ex.links.shape == (4, 2) and set(ex.material) == {"DI"}
    with pytest.raises(InputError, match="no field 'dn'"):
        read_existing(path, working_crs="EPSG:32633", site_xy=SITES, diameter_field="dn")
    pts = tmp_path / "pts.gpkg"
    gpd.GeoDataFrame(geometry=[shapely.Point(0, 0)], crs="EPSG:32633").to_file(pts)
    with pytest.raises(InputError, match=r"--existing: .*expected LineString features, got "
                                         r"Point"):
        read_existing(pts, working_crs="EPSG:32633", site_xy=SITES)
    nocrs = tmp_path / "nocrs.shp"
    gpd.GeoDataFrame(geometry=[shapely.LineString(MAIN)]).to_file(nocrs)
    with pytest.raises(InputError, match="has no CRS"):
        read_existing(nocrs, working_crs="EPSG:32633", site_xy=SITES)
    bad = tmp_path / "bad.gpkg"
    gpd.GeoDataFrame({"diameter_mm": [-5.0]}, geometry=[shapely.LineString(MAIN)],
                     crs="EPSG:32633").to_file(bad)
    with pytest.raises(InputError, match="feature 0 field 'diameter_mm' is -5.0"):
        read_existing(bad, working_crs="EPSG:32633", site_xy=SITES)
