"""DXF writer: read the drawing back with ezdxf and compare it with the Layout."""

import os

import numpy as np
import pytest

try:
    from tests.conftest_layouts import make_layout
except ImportError:                      # tests/ itself on sys.path (rootdir-relative import)
    from conftest_layouts import make_layout

ezdxf = pytest.importorskip("ezdxf")
pyproj = pytest.importorskip("pyproj")

from mainspan.errors import InputError, OverwriteError  # noqa: E402
from mainspan.writers.dxf import LAYER_NAME_RE, safe_layer_name, write_dxf  # noqa: E402


def _xdata(e):
    try:
        return dict(v.split("=", 1) for _, v in e.get_xdata("MAINSPAN"))
    except Exception:
        return {}


def _entities(path):
    doc = ezdxf.readfile(path)
    msp = doc.modelspace()
    links, points = {}, {}
    for e in msp:
        xd = _xdata(e)
        if "link_id" in xd:
            links[int(xd["link_id"])] = e
        elif "node_id" in xd:
            points[xd["node_id"]] = e
    return doc, links, points


@pytest.mark.parametrize("system", ["pressure", "gravity", None])
def test_round_trip_3d(tmp_path, system):
    lay = make_layout(system)
    out = tmp_path / "net.dxf"
    rep = write_dxf(lay, out, by="diameter" if system else "role", origin="auto")
    doc, links, points = _entities(out)
    # units: $INSUNITS 6 = metres, $MEASUREMENT 1 = metric (Autodesk DXF Reference, HEADER)
    assert doc.header["$INSUNITS"] == 6 and doc.header["$MEASUREMENT"] == 1
    assert doc.dxfversion == "AC1027"                       # R2013
    x0, y0 = rep["origin"]
    assert (x0, y0) == (500_000.0, 4_999_000.0)
    cv = dict(doc.header.custom_vars)
    assert float(cv["MAINSPAN_ORIGIN_X_M"]) == x0 and float(cv["MAINSPAN_ORIGIN_Y_M"]) == y0
    # ezdxf's own auditor finds nothing to fix
    auditor = doc.audit()
    assert not auditor.has_errors, [str(e) for e in auditor.errors]
    assert len(links) == lay.n_links and len(points) == lay.n_nodes
    ids = np.asarray(lay.nodes["node_id"]).astype(str)
    for k, i in enumerate(lay.links["link_id"]):
        e = links[int(i)]
        assert e.dxftype() == "POLYLINE" and e.is_3d_polyline
        v = np.array([tuple(p.dxf.location) for p in e.vertices]) + [x0, y0, 0]
        a, b = lay.link_ends[k]
        np.testing.assert_allclose(v[0, :2], lay.node_xy[a], atol=1e-9)
        np.testing.assert_allclose(v[-1, :2], lay.node_xy[b], atol=1e-9)
        if system == "gravity":
            np.testing.assert_allclose(v[[0, -1], 2], [lay.links["invert_from_m"][k],
                                                       lay.links["invert_to_m"][k]])
        else:
            # ground along the profile: same elevations at the profile's interior stations
            st, gz = lay.profiles.of(k)
            inner = (st > 1e-6) & (st < lay.links["length_m"][k] - 1e-6)
            np.testing.assert_allclose(v[1:-1, 2], gz[inner])
            np.testing.assert_allclose(v[[0, -1], 2], [lay.links["z_from_m"][k],
                                                       lay.links["z_to_m"][k]])
        # plan length of the drawn polyline = link length (straight link)
        seg = np.hypot(*np.diff(v[:, :2], axis=0).T).sum()
        assert seg == pytest.approx(lay.links["length_m"][k], rel=1e-9)
    for i, nid in enumerate(ids):
        p = np.array(points[nid].dxf.location) + [x0, y0, 0]
        np.testing.assert_allclose(p, [*lay.node_xy[i], lay.nodes["elevation_m"][i]])
    # every layer name passes ezdxf's validator and our stricter portable rule
    from ezdxf.lldxf.validator import is_valid_layer_name

    for layer in doc.layers:
        name = layer.dxf.name
        if name in ("0", "Defpoints"):
            continue
        assert LAYER_NAME_RE.match(name) and is_valid_layer_name(name), name
    # the returned counts agree with what is in the file
    in_file = {}
    for e in doc.modelspace():
        in_file[e.dxf.layer] = in_file.get(e.dxf.layer, 0) + 1
    assert in_file == rep["layers"]


def test_prj_is_the_layout_crs(tmp_path):
    lay = make_layout("pressure")
    rep = write_dxf(lay, tmp_path / "a.dxf")
    wkt = open(rep["prj"]).read()
    assert wkt.startswith("PROJCS[")                         # ESRI WKT1 flavour
    crs = pyproj.CRS.from_wkt(wkt)
    # pyproj resolves the ESRI name back to EPSG:32633 (PROJ database)
    assert crs.to_epsg() == 32633 == lay.crs.to_epsg()
    assert crs.equals(lay.crs, ignore_axis_order=True)


def test_2d_labels_and_layers_by_role(tmp_path):
    lay = make_layout("gravity")
    rep = write_dxf(lay, tmp_path / "b.dxf", polylines="2d", text_height_m=2.5)
    doc, links, _ = _entities(tmp_path / "b.dxf")
    assert {e.dxftype() for e in links.values()} == {"LWPOLYLINE"}
    assert all(e.dxf.layer == "MAIN_GRAVITY" for e in links.values())
    texts = [e for e in doc.modelspace() if e.dxftype() == "TEXT"]
    assert all(t.dxf.height == 2.5 for t in texts)
    link_txt = sorted(t.dxf.text for t in texts if t.dxf.layer == "LABEL_LINK")
    assert len(link_txt) == lay.n_links
    k = 0
    want = (f"L1 DN{lay.links['nominal_mm'][k]} {lay.links['length_m'][k]:.1f} m "
            f"{lay.links['slope_pct'][k]:.2f} %")
    assert want in link_txt
    node_txt = sorted(t.dxf.text for t in texts if t.dxf.layer == "LABEL_NODE")
    assert node_txt == sorted(np.asarray(lay.nodes["node_id"]).astype(str))
    assert rep["origin"] == (0.0, 0.0)
    # upright labels: rotation within (-90, 90]
    assert all(-90 < t.dxf.rotation <= 90 for t in texts)


def test_layer_renames_reported(tmp_path):
    lay = make_layout("pressure", material="pe100 sdr/11 — blue stripe, extra long name")
    rep = write_dxf(lay, tmp_path / "c.dxf", by="diameter")
    assert rep["renamed"], "a material with spaces and slashes must be renamed"
    for wanted, got in rep["renamed"].items():
        assert LAYER_NAME_RE.match(got) and got != wanted
    assert len(set(rep["renamed"].values())) == len(rep["renamed"])   # still distinct


def test_safe_layer_name_unique_and_short():
    taken = set()
    for _ in range(12):
        taken.add(safe_layer_name("x" * 40, taken=taken))
    assert len(taken) == 12 and all(LAYER_NAME_RE.match(n) for n in taken)
    assert safe_layer_name("Main: DN 110") == "MAIN_DN_110"
    assert safe_layer_name("MAIN_DN_110", taken={"MAIN_DN_110"}) == "MAIN_DN_110_2"


def test_refuses_overwrite_and_is_reproducible(tmp_path):
    lay = make_layout("pressure")
    p = tmp_path / "d.dxf"
    write_dxf(lay, p)
    first = p.read_bytes()
    with pytest.raises(OverwriteError, match="--overwrite"):
        write_dxf(lay, p)
    write_dxf(lay, p, overwrite=True)
    assert p.read_bytes() == first
    assert not [f for f in os.listdir(tmp_path) if f.endswith(".tmp")]


def test_bad_options(tmp_path):
    lay = make_layout(None)
    with pytest.raises(InputError, match="by='diameter'"):
        write_dxf(lay, tmp_path / "e.dxf", by="diameter")
    with pytest.raises(InputError, match="polylines"):
        write_dxf(lay, tmp_path / "e.dxf", polylines="4d")
    with pytest.raises(InputError, match="origin"):
        write_dxf(lay, tmp_path / "e.dxf", origin="somewhere")
