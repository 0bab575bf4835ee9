"""Writers and the report on layouts made by the real pipeline, not by hand.

A small real run of :func:`mainspan.plan_layout` (12 sites on a generated 1 km DEM, pressure
mains) gives the layout; every output is read back with an outside reader (pyogrio, pandas,
lxml, ezdxf, the standard HTML parser) and compared with the layout's own arrays, and the
hydraulics are recomputed independently: flows as subtree sums over networkx descendants,
the hydraulic grade along networkx paths from the source, node elevations by scipy's
bilinear interpolation of the DEM between cell centres.
"""

from __future__ import annotations

from html.parser import HTMLParser

import networkx as nx
import numpy as np
import pandas as pd
import pytest
import rasterio
from rasterio.transform import from_origin

from mainspan import plan_layout, sites_from_arrays

X0, Y0, CELL = 512000.0, 5121000.0, 10.0


def _dem(path):
    yy, xx = np.mgrid[0:100, 0:100]
    z = 200.0 + 0.08 * xx + 0.03 * yy + 3.0 * np.sin(xx / 7.0)
    with rasterio.open(path, "w", driver="GTiff", width=100, height=100, count=1,
                       dtype="float64", crs="EPSG:32633",
                       transform=from_origin(X0, Y0, CELL, CELL)) as ds:
        ds.write(z, 1)
    return str(path), z


@pytest.fixture(scope="module")
def real(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("real")
    dem, z = _dem(tmp / "dem.tif")
    rng = np.random.default_rng(5)
    xy = rng.uniform([X0 + 50, Y0 - 950], [X0 + 950, Y0 - 50], (12, 2))
    q = np.r_[0.0, np.round(rng.uniform(0.5, 3.0, 11), 2)]
    sites = sites_from_arrays(xy, crs="EPSG:32633", node_id=[f"P{i:02d}" for i in range(12)],
                              role=["source"] + ["demand"] * 11, demand_lps=q)
    lay = plan_layout(sites, terrain=dem, system="pressure")
    return {"lay": lay, "tmp": tmp, "z": z, "xy": xy, "q": q}


def _graph(lay):
    g = nx.DiGraph()       # pressure mains: from_node -> to_node flows away from the source
    g.add_nodes_from(range(lay.n_nodes))
    for k, (a, b) in enumerate(lay.link_ends):
        up, down = (b, a) if lay.links["reversed"][k] else (a, b)
        g.add_edge(int(up), int(down), k=k)
    return g


def test_real_layout_hydraulics_recomputed(real):
    lay = real["lay"]
    assert lay.certificate.ok and lay.n_links == lay.n_nodes - 1
    ends = lay.link_ends
    # plan lengths from the coordinates
    np.testing.assert_allclose(lay.links["length_m"],
                               np.hypot(*(lay.node_xy[ends[:, 1]] - lay.node_xy[ends[:, 0]]).T),
                               rtol=1e-12)
    # node elevations: bilinear between cell centres (scipy RegularGridInterpolator)
    from scipy.interpolate import RegularGridInterpolator

    cx = X0 + (np.arange(100) + 0.5) * CELL
    cy = Y0 - (np.arange(100) + 0.5) * CELL
    interp = RegularGridInterpolator((cy[::-1], cx), real["z"][::-1])
    np.testing.assert_allclose(lay.nodes["elevation_m"], interp(lay.node_xy[:, ::-1]), atol=1e-9)
    # flows: sum of the demands of the nodes downstream of each link (networkx descendants)
    g = _graph(lay)
    src = lay.node_index("P00")
    assert nx.is_arborescence(g) and g.in_degree(src) == 0
    demand = np.asarray(lay.nodes["demand_lps"], float)
    for a, b, k in g.edges(data="k"):
        want = demand[b] + sum(demand[v] for v in nx.descendants(g, b))
        assert lay.links["flow_lps"][k] == pytest.approx(want, rel=1e-12)
    # hydraulic grade: source grade minus the head losses along the networkx path
    hgl = np.asarray(lay.nodes["hgl_m"], float)
    for v in range(lay.n_nodes):
        path = nx.shortest_path(g, src, v)
        loss = sum(lay.links["headloss_m"][g[a][b]["k"]] for a, b in zip(path[:-1], path[1:]))
        assert hgl[v] == pytest.approx(hgl[src] - loss, abs=1e-9)
    np.testing.assert_allclose(lay.nodes["pressure_head_m"], hgl - lay.nodes["elevation_m"],
                               atol=1e-9)
    np.testing.assert_allclose(lay.links["headloss_m"],
                               lay.links["friction_loss_m"] + lay.links["minor_loss_m"], atol=1e-9)
    # velocity = Q / (pi D^2 / 4) on the chosen inner diameter
    d = lay.links["diameter_mm"] / 1000.0
    np.testing.assert_allclose(lay.links["velocity_mps"],
                               lay.links["design_flow_lps"] / 1000.0 / (np.pi * d * d / 4),
                               rtol=1e-12)


def test_real_layout_geopackage_round_trip(real):
    import pyogrio
    import shapely

    lay = real["lay"]
    p = real["tmp"] / "plan.gpkg"
    lay.write_gpkg(p, overwrite=True)
    links = pyogrio.read_dataframe(p, layer="links")
    nodes = pyogrio.read_dataframe(p, layer="nodes")
    assert len(links) == lay.n_links and len(nodes) == lay.n_nodes
    for name, v in lay.links.items():
        v = np.asarray(v)
        if name not in links.columns:
            continue
        if v.dtype.kind in "fi":
            np.testing.assert_allclose(links[name].to_numpy(float), v.astype(float),
                                       rtol=1e-12, equal_nan=True, err_msg=name)
        elif v.dtype.kind == "b":
            assert links[name].astype(bool).tolist() == v.tolist(), name
        else:
            assert links[name].astype(str).tolist() == v.astype(str).tolist(), name
    for name in ("length_m", "flow_lps", "headloss_m", "diameter_mm", "pipe"):
        assert name in links.columns, name
    # geometry: 2D length of each written line is the plan length
    np.testing.assert_allclose(shapely.length(shapely.force_2d(links.geometry.values)),
                               lay.links["length_m"], rtol=1e-9)
    np.testing.assert_allclose(nodes["hgl_m"], lay.nodes["hgl_m"], rtol=1e-12)
    assert nodes["node_id"].tolist() == list(lay.nodes["node_id"])
    np.testing.assert_allclose(np.column_stack([nodes.geometry.x, nodes.geometry.y]),
                               lay.node_xy, atol=1e-6)


def test_real_layout_csv_and_landxml(real):
    from lxml import etree

    from mainspan.writers.landxml import LANDXML_NS, write_landxml
    from mainspan.writers.tables import write_links_csv

    lay = real["lay"]
    p = write_links_csv(lay, real["tmp"] / "links.csv", overwrite=True)
    df = pd.read_csv(p, keep_default_na=False)
    assert len(df) == lay.n_links
    for name in ("length_m", "flow_lps", "headloss_m", "hgl_from_m", "velocity_mps"):
        # written to fixed decimals (mm, cents, 0.001): half a unit of the last place
        np.testing.assert_allclose(df[name].to_numpy(float), lay.links[name], atol=0.0051,
                                   err_msg=name)
    assert df["pipe"].astype(str).tolist() == [str(v) for v in lay.links["pipe"]]

    x = write_landxml(lay, real["tmp"] / "net.xml", overwrite=True)
    ns = {"x": LANDXML_NS}
    root = etree.parse(str(x)).getroot()
    pipes = root.findall("x:PipeNetworks/x:PipeNetwork/x:Pipes/x:Pipe", ns)
    assert len(pipes) == lay.n_links
    ids = list(lay.nodes["node_id"])
    g = _graph(lay)
    for k, pipe in enumerate(pipes):
        assert float(pipe.get("length")) == pytest.approx(lay.links["length_m"][k], abs=5e-4)
        circ = pipe.find("x:CircPipe", ns)
        # written to 0.1 mm: half a unit of the last place (PE bores at the mean wall fall on 0.05 mm)
        assert float(circ.get("diameter")) == pytest.approx(lay.links["diameter_mm"][k], abs=0.0501)
        # pressure mains: the pipe starts at its upstream end (networkx edge direction)
        up, down = ids.index(pipe.get("refStart")), ids.index(pipe.get("refEnd"))
        assert g.has_edge(up, down) and g[up][down]["k"] == k


def test_real_layout_dxf(real):
    ezdxf = pytest.importorskip("ezdxf")
    from mainspan.writers.dxf import write_dxf

    lay = real["lay"]
    info = write_dxf(lay, real["tmp"] / "plan.dxf", overwrite=True, origin=(0.0, 0.0))
    assert info["n_links"] == lay.n_links and info["layers"]["MAIN_PRESSURE"] == lay.n_links
    doc = ezdxf.readfile(info["path"])
    ends = set()
    for e in doc.modelspace().query('POLYLINE LWPOLYLINE[layer=="MAIN_PRESSURE"]'):
        pts = [tuple(v)[:2] for v in (e.points() if e.dxftype() == "POLYLINE"
                                      else e.get_points("xy"))]
        ends.add((pts[0][0], pts[0][1], pts[-1][0], pts[-1][1]))
    want = set()
    for a, b in lay.link_ends:
        xa, ya = lay.node_xy[a]
        xb, yb = lay.node_xy[b]
        want.add((float(xa), float(ya), float(xb), float(yb)))
    # every link is drawn between its two node positions, in one direction or the other;
    # the DXF writer writes coordinates to 0.1 mm, so compare within that
    got = np.array(sorted(ends))
    for w in want:
        fwd = np.abs(got - np.array(w)).max(axis=1)
        rev = np.abs(got - np.array((w[2], w[3], w[0], w[1]))).max(axis=1)
        assert min(fwd.min(), rev.min()) <= 0.6e-4, w   # half of 0.1 mm, plus float slack


class _Text(HTMLParser):
    def __init__(self):
        super().__init__()
        self.text = []

    def handle_data(self, data):
        self.text.append(data)


def test_real_layout_report(real):
    from mainspan.report.html import CAUTIONS, report_html

    lay = real["lay"]
    html = report_html(lay)
    parser = _Text()
    parser.feed(html)
    text = " ".join(parser.text)
    # summary figures as the report formats them, recomputed from the layout's arrays
    total = float(np.sum(lay.links["length_m"]))
    assert f"{total:,.1f}" in text or f"{total:,.0f}" in text
    for pipe in set(np.asarray(lay.links["pipe"]).astype(str)):
        assert pipe in text
    assert any(c[:40] in text for c in CAUTIONS)
    assert report_html(lay) == html           # same layout, same bytes


def test_real_layout_packed_profiles(real):
    """link_profiles holds one row per link with little-endian float64 arrays; read with
    Python's sqlite3 (an outside reader), the ground equals scipy's bilinear interpolation of
    the DEM between cell centres (map_coordinates, order=1), and read_layout gives the same
    profiles back."""
    import sqlite3

    from scipy.ndimage import map_coordinates

    from mainspan import read_layout

    lay = real["lay"]
    p = real["tmp"] / "profiles.gpkg"
    lay.write_gpkg(p, overwrite=True)
    con = sqlite3.connect(p)
    try:
        rows = con.execute("SELECT link_id, n_stations, station_m, ground_m FROM link_profiles "
                           "ORDER BY fid").fetchall()
    finally:
        con.close()
    assert len(rows) == lay.n_links
    for k, (lid, n, st_blob, z_blob) in enumerate(rows):
        assert lid == lay.links["link_id"][k]
        st = np.frombuffer(st_blob, "<f8")
        z = np.frombuffer(z_blob, "<f8")
        assert st.shape == z.shape == (n,) and n >= 2
        want_st, want_z = lay.profiles.of(k)
        np.testing.assert_array_equal(st, want_st)
        a, b = lay.node_xy[lay.link_ends[k]]
        pos = a + (st / st[-1])[:, None] * (b - a)
        col, row = (pos[:, 0] - X0) / CELL, (Y0 - pos[:, 1]) / CELL
        ref = map_coordinates(real["z"], [row - 0.5, col - 0.5], order=1, mode="nearest")
        np.testing.assert_allclose(z, ref, rtol=1e-9)
    back = read_layout(p)
    for name in ("offsets", "station_m", "ground_m"):
        np.testing.assert_array_equal(getattr(back.profiles, name), getattr(lay.profiles, name))
