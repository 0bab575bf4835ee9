"""End to end on real open point patterns shipped inside PyPI packages."""

import os

import numpy as np
import pyproj
import pytest

from tests.conftest import LIBPYSAL_EXAMPLES, run_cli

pytestmark = pytest.mark.skipif(LIBPYSAL_EXAMPLES is None, reason="libpysal not installed")


def _emst_total(xy):
    # independent reference: scipy's Kruskal-based MST over the complete graph
    from scipy.sparse.csgraph import minimum_spanning_tree
    from scipy.spatial.distance import pdist, squareform
    return float(minimum_spanning_tree(squareform(pdist(xy))).sum())


def test_baltimore_house_sales_points_plan(tmp_path, capsys):
    # libpysal 'baltim' (Dubin 1992): 211 real sale locations; the file has no CRS and its
    # coordinates are in unstated local units, taken here as metres in UTM 18N.
    path = os.path.join(LIBPYSAL_EXAMPLES, "baltim", "baltim.shp")
    out = tmp_path / "b.gpkg"
    code, o, err = run_cli(["plan", "--sites", path, "--sites-crs", "EPSG:32618",
                            "--id-field", "STATION", "--merge-within", "0.01",
                            "--out", out, "--quiet"], capsys)
    assert code == 0, err
    import pyogrio
    links = pyogrio.read_dataframe(out, layer="links")
    pts = pyogrio.read_dataframe(out, layer="nodes")
    xy = np.column_stack([pts.geometry.x, pts.geometry.y])
    # Shamos & Hoey 1975: the Euclidean MST lies in the Delaunay triangulation, so the tree over
    # Delaunay candidates must have the complete graph's MST length.
    assert links.length_m.sum() == pytest.approx(_emst_total(xy), rel=1e-12)
    assert len(links) == len(pts) - 1


def test_soho_addresses_web_mercator_to_utm(tmp_path, capsys):
    # libpysal 'snow_maps' SohoPeople: 324 real address points in EPSG:3857
    path = os.path.join(LIBPYSAL_EXAMPLES, "snow_maps", "SohoPeople.shp")
    out = tmp_path / "s.gpkg"
    code, o, err = run_cli(["plan", "--sites", path, "--merge-within", "0.5", "--out", out,
                            "--candidates", "delaunay+knn", "--quiet"], capsys)
    assert code == 0, err
    assert "UTM zone 30N" in o
    import pyogrio
    nodes = pyogrio.read_dataframe(out, layer="nodes")
    links = pyogrio.read_dataframe(out, layer="links")
    # project the nodes independently with pyproj and compare the tree length with the EMST
    xy = np.column_stack([nodes.geometry.x, nodes.geometry.y])
    assert links.length_m.sum() == pytest.approx(_emst_total(xy), rel=1e-12)
    # ground truth for scale: geodesic length of the tree's links (Karney 2013 via pyproj.Geod)
    t = pyproj.Transformer.from_crs(32630, 4326, always_xy=True)
    lon, lat = t.transform(xy[:, 0], xy[:, 1])
    idx = {k: i for i, k in enumerate(nodes.node_id)}
    a = np.array([idx[v] for v in links.from_node])
    b = np.array([idx[v] for v in links.to_node])
    _, _, geo = pyproj.Geod(ellps="WGS84").inv(lon[a], lat[a], lon[b], lat[b])
    # UTM 30N at lon -0.14 (2.9 deg from the central meridian): k about 1.0002
    ratio = links.length_m.to_numpy() / geo
    assert np.all(np.abs(ratio - 1.0) < 1e-3)
