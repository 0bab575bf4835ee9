"""LandXML writer: parse the file back with lxml and compare it with the Layout.

No LandXML 1.2 XSD could be had from the package registry (the only LandXML
package listed ships no schema), so the structure is checked by parsing the
file back: namespace, required root attributes, units, element order inside
Struct and Pipe, northing-first coordinates, references and flow direction.
"""

import re

import numpy as np

from mainspan.errors import InputError
import pytest

try:
    from tests.conftest_layouts import make_layout
except ImportError:
    from conftest_layouts import make_layout

from lxml import etree  # noqa: E402

from mainspan.errors import OverwriteError  # noqa: E402
from mainspan.writers.landxml import LANDXML_NS, write_landxml  # noqa: E402

NS = {"x": LANDXML_NS}


def _parse(path):
    return etree.parse(str(path)).getroot()


@pytest.mark.parametrize("system,net_type", [("pressure", "water"), ("gravity", "sanitary"),
                                             (None, "other")])
def test_round_trip(tmp_path, system, net_type):
    lay = make_layout(system)
    p = write_landxml(lay, tmp_path / "net.xml")
    root = _parse(p)
    assert root.tag == f"{{{LANDXML_NS}}}LandXML" and root.get("version") == "1.2"
    # the date is the day the file is written (UTC), not a fixed placeholder
    import datetime

    today = datetime.datetime.now(datetime.timezone.utc).date()
    assert abs((datetime.date.fromisoformat(root.get("date")) - today).days) <= 1
    assert re.match(r"^\d{2}:\d{2}:\d{2}$", root.get("time"))
    metric = root.find("x:Units/x:Metric", NS)
    assert metric.get("linearUnit") == "meter" and metric.get("diameterUnit") == "millimeter"
    cs = root.find("x:CoordinateSystem", NS)
    import pyproj

    assert pyproj.CRS.from_epsg(int(cs.get("epsgCode"))).equals(lay.crs)
    assert pyproj.CRS.from_wkt(cs.get("ogcWktCode")).to_epsg() == 32633
    assert root.find("x:Application", NS).get("name") == "mainspan"
    net = root.find("x:PipeNetworks/x:PipeNetwork", NS)
    assert net.get("pipeNetType") == net_type

    structs = net.findall("x:Structs/x:Struct", NS)
    ids = list(np.asarray(lay.nodes["node_id"]).astype(str))
    assert [s.get("name") for s in structs] == ids
    for i, s in enumerate(structs):
        children = [etree.QName(c).localname for c in s]
        assert children[0] == "Center" and children[1] == "Connection"
        vals = [float(v) for v in s.find("x:Center", NS).text.split()]
        # LandXML points are "northing easting elevation": y first, then x
        assert vals[0] == pytest.approx(lay.node_xy[i, 1], abs=5e-4)
        assert vals[1] == pytest.approx(lay.node_xy[i, 0], abs=5e-4)
        assert vals[2] == pytest.approx(lay.nodes["elevation_m"][i], abs=5e-4)
        assert float(s.get("elevRim")) == pytest.approx(lay.nodes["elevation_m"][i], abs=5e-4)

    pipes = net.findall("x:Pipes/x:Pipe", NS)
    assert len(pipes) == lay.n_links
    total = sum(float(p.get("length")) for p in pipes)
    assert total == pytest.approx(lay.total("length_m"), abs=1e-3 * lay.n_links)
    import networkx as nx

    g = nx.DiGraph([(p.get("refStart"), p.get("refEnd")) for p in pipes])
    assert nx.is_tree(g.to_undirected()) and set(g) == set(ids)
    root_id = ids[0]
    if system == "gravity":
        # everything drains to the outlet: reversed, it is an arborescence rooted there
        assert nx.is_arborescence(g.reverse()) and g.out_degree(root_id) == 0
    else:
        assert nx.is_arborescence(g) and g.in_degree(root_id) == 0
    for k, p in enumerate(pipes):
        circ = p.find("x:CircPipe", NS)
        if system is None:
            assert circ is None
        else:
            assert float(circ.get("diameter")) == pytest.approx(lay.links["diameter_mm"][k])
            assert circ.get("material") == lay.links["material"][k]
        props = {q.get("label"): q.get("value") for q in p.findall("x:Feature/x:Property", NS)}
        assert float(props["cost"]) == pytest.approx(lay.links["cost"][k], abs=0.005)
    if system == "gravity":
        for k, p in enumerate(pipes):
            # slope in percent, falling along the flow (upstream to-node to from-node)
            want = lay.links["slope_pct"][k]
            assert float(p.get("slope")) == pytest.approx(want, abs=1e-4)
        by_name = {s.get("name"): s for s in structs}
        for k, p in enumerate(pipes):
            inv = {(i.get("refPipe"), i.get("flowDir")): float(i.get("elev"))
                   for i in by_name[p.get("refEnd")].findall("x:Invert", NS)}
            assert inv[(p.get("name"), "in")] == pytest.approx(lay.links["invert_from_m"][k],
                                                               abs=5e-4)
    else:
        assert not net.findall(".//x:Invert", NS)


def test_escaping_and_determinism(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1767225600")      # 2026-01-01T00:00:00Z
    lay = make_layout("pressure")
    lay.nodes["node_id"] = lay.nodes["node_id"].copy()
    lay.nodes["node_id"][3] = 'C <&> "quoted"'
    lay.links["to_node"] = lay.links["to_node"].copy()
    lay.links["to_node"][2] = 'C <&> "quoted"'
    a = write_landxml(lay, tmp_path / "a.xml")
    b = write_landxml(lay, tmp_path / "b.xml")
    assert open(a, "rb").read() == open(b, "rb").read()
    root = _parse(a)
    assert (root.get("date"), root.get("time")) == ("2026-01-01", "00:00:00")
    names = [s.get("name") for s in _parse(a).iterfind(".//x:Struct", NS)]
    assert 'C <&> "quoted"' in names
    with pytest.raises(OverwriteError, match="--overwrite"):
        write_landxml(lay, a)


def test_date_from_run_info(tmp_path):
    lay = make_layout(None)
    lay.run_info["timestamp"] = "2026-03-04T05:06:07+00:00"
    root = _parse(write_landxml(lay, tmp_path / "d.xml"))
    assert (root.get("date"), root.get("time")) == ("2026-03-04", "05:06:07")


def test_gravity_design_names_for_inverts(tmp_path):
    """``invert_down_m``/``invert_up_m`` (downstream = from_node) mean the same as from/to."""
    from mainspan.writers.dxf import write_dxf

    lay = make_layout("gravity")
    a = write_landxml(lay, tmp_path / "a.xml")
    da = write_dxf(lay, tmp_path / "a.dxf")["path"]
    lay.links["invert_down_m"] = lay.links.pop("invert_from_m")
    lay.links["invert_up_m"] = lay.links.pop("invert_to_m")
    b = write_landxml(lay, tmp_path / "b.xml")
    db = write_dxf(lay, tmp_path / "b.dxf")["path"]
    strip = lambda t: t.replace(b"invert_down_m", b"X").replace(b"invert_up_m", b"X").replace(  # noqa: E731
        b"invert_from_m", b"X").replace(b"invert_to_m", b"X")
    ra, rb = _parse(a), _parse(b)
    inv_a = [(i.get("refPipe"), i.get("elev")) for i in ra.iterfind(".//x:Invert", NS)]
    inv_b = [(i.get("refPipe"), i.get("elev")) for i in rb.iterfind(".//x:Invert", NS)]
    assert inv_a == inv_b and inv_a
    assert strip(open(da, "rb").read()) == strip(open(db, "rb").read())


def test_bad_source_date_epoch(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "yesterday")
    with pytest.raises(InputError, match="SOURCE_DATE_EPOCH"):
        write_landxml(make_layout(None), tmp_path / "e.xml")


def test_access_points_and_fittings_are_structs(tmp_path):
    # read back with lxml: one Struct per node, access point and fitting, with rims, sumps and centres
    lay = make_layout("gravity")
    lay.tables["access_points"] = {"link_id": np.array([1]), "chainage_m": np.array([10.0]),
                                   "x": np.array([500100.0]), "y": np.array([5000200.0]),
                                   "ground_m": np.array([201.25]), "invert_m": np.array([198.0])}
    lay.tables["fittings"] = {"type": np.array(["washout"], object), "size_mm": np.array([80.0]),
                              "link_id": np.array([2]), "chainage_m": np.array([4.0]), "node": np.array([-1]),
                              "x": np.array([500110.0]), "y": np.array([5000210.0])}
    root = _parse(write_landxml(lay, tmp_path / "s.xml"))
    st = {s.get("name"): s for s in root.iterfind(".//x:Struct", NS)}
    assert len(st) == lay.n_nodes + 2
    ap = st["AP1"]
    assert float(ap.get("elevRim")) == 201.25 and float(ap.get("elevSump")) == 198.0
    assert ap.find("x:Center", NS).text.split() == ["5000200.000", "500100.000", "201.250"]
    props = {p.get("label"): p.get("value") for p in st["F1"].iterfind(".//x:Property", NS)}
    assert props["type"] == "washout" and float(props["size_mm"]) == 80.0 and props["link_id"] == "2"
