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
from mainspan.writers.dxf import (  # noqa: E402
    LAYER_NAME_RE,
    PROFILE_TOLERANCE_M,
    SIZE_CLASSES,
    safe_layer_name,
    size_class,
    thin_profile,
    write_dxf,
)


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
        np.testing.assert_allclose(v[0, :2], lay.node_xy[a], atol=5e-5)  # written to 0.1 mm
        np.testing.assert_allclose(v[-1, :2], lay.node_xy[b], atol=5e-5)
        if system == "gravity":
            np.testing.assert_allclose(v[[0, -1], 2], [lay.links["invert_from_m"][k],
                                                       lay.links["invert_to_m"][k]], atol=5e-5)
        else:
            # ground along the profile, thinned: every profile station lies within the tolerance of
            # the drawn polyline (linear between kept vertices by chainage), the ends exact
            st, gz = lay.profiles.of(k)
            ch = np.concatenate([[0.0], np.cumsum(np.hypot(*np.diff(v[:, :2], axis=0).T))])
            assert np.all(np.abs(np.interp(st, ch, v[:, 2]) - gz)[(st > 1e-6) & (st < ch[-1] - 1e-6)]
                          <= PROFILE_TOLERANCE_M + 1e-4)
            np.testing.assert_allclose(v[[0, -1], 2], [lay.links["z_from_m"][k],
                                                       lay.links["z_to_m"][k]], atol=5e-5)
        # plan length of the drawn polyline = link length (straight link)
        seg = np.hypot(*np.diff(v[:, :2], axis=0).T).sum()
        assert seg == pytest.approx(lay.links["length_m"][k], abs=1e-3)
    for i, nid in enumerate(ids):
        p = np.array(points[nid].dxf.insert) + [x0, y0, 0]
        np.testing.assert_allclose(p, [*lay.node_xy[i], lay.nodes["elevation_m"][i]], atol=5e-5)
        att = {a.dxf.tag: a.dxf.text for a in points[nid].attribs}
        assert att["ID"] == nid and float(att["GROUND_M"]) == pytest.approx(lay.nodes["elevation_m"][i], abs=5e-4)
        if system == "gravity":
            assert float(att["INVERT_M"]) == pytest.approx(lay.nodes["invert_m"][i], abs=5e-4)
            assert float(att["DEPTH_M"]) == pytest.approx(lay.nodes["elevation_m"][i] - lay.nodes["invert_m"][i],
                                                          abs=1e-3)
        elif system == "pressure":
            assert float(att["PRESSURE_M"]) == pytest.approx(lay.nodes["pressure_head_m"][i], abs=5e-4)
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


def _with_structures(system):
    """The test layout with two access points and two fittings, as the design stage adds them."""
    lay = make_layout(system)
    a, b = lay.link_ends[0]
    mid = (lay.node_xy[a] + lay.node_xy[b]) / 2
    lay.tables["access_points"] = {"link_id": np.array([1, 1]), "chainage_m": np.array([10.0, 20.0]),
                                   "x": np.array([mid[0], mid[0] + 5]), "y": np.array([mid[1], mid[1] + 5]),
                                   "ground_m": np.array([201.25, 202.5]), "invert_m": np.array([198.0, 199.75])}
    lay.tables["fittings"] = {"type": np.array(["air valve", "washout"], object), "size_mm": np.array([50.0, 80.0]),
                              "link_id": np.array([1, 2]), "chainage_m": np.array([3.0, 4.0]), "node": np.array([-1, -1]),
                              "x": np.array([mid[0] - 5, mid[0] - 9]), "y": np.array([mid[1], mid[1]])}
    return lay


@pytest.mark.parametrize("by", ["role", "diameter"])
def test_structures_are_blocks_with_attributes_and_extents_hold_everything(tmp_path, by):
    lay = _with_structures("gravity")
    rep = write_dxf(lay, tmp_path / "s.dxf", by=by, origin="auto")
    doc = ezdxf.readfile(tmp_path / "s.dxf")
    assert not doc.audit().has_errors
    # our blocks, each with the attribute definitions
    for name in ("MS_NODE", "MS_SOURCE", "MS_ACCESS", "MS_FITTING"):
        tags = [e.dxf.tag for e in doc.blocks[name] if e.dxftype() == "ATTDEF"]
        assert tags == ["ID", "TYPE", "SIZE_MM", "GROUND_M", "INVERT_M", "PRESSURE_M", "DEPTH_M"]
    ins = {e.dxf.name: [] for e in doc.modelspace() if e.dxftype() == "INSERT"}
    for e in doc.modelspace().query("INSERT"):
        ins[e.dxf.name].append({a.dxf.tag: a.dxf.text for a in e.attribs})
    assert len(ins["MS_ACCESS"]) == 2 and len(ins["MS_FITTING"]) == 2
    assert ins["MS_SOURCE"][0]["TYPE"] == "outlet"                       # the root, marked
    ap = sorted(ins["MS_ACCESS"], key=lambda d: d["ID"])
    assert [float(d["DEPTH_M"]) for d in ap] == pytest.approx([3.25, 2.75])
    assert {d["TYPE"] for d in ins["MS_FITTING"]} == {"air valve", "washout"}
    assert sorted(d["SIZE_MM"] for d in ins["MS_FITTING"]) == ["50", "80"]
    assert rep["n_structures"] == 4
    # extents: set, and holding every entity's bounding box (ezdxf.bbox computes it independently)
    from ezdxf import bbox

    box = bbox.extents(doc.modelspace())
    lo, hi = np.array(doc.header["$EXTMIN"]), np.array(doc.header["$EXTMAX"])
    assert np.all(lo[:2] <= np.array(box.extmin)[:2] + 1e-9) and np.all(hi[:2] >= np.array(box.extmax)[:2] - 1e-9)
    assert np.all(np.abs(lo) < 1e19)


def test_size_classes_colour_and_lineweight(tmp_path):
    lay = make_layout("pressure")
    rep = write_dxf(lay, tmp_path / "w.dxf", by="diameter")
    doc = ezdxf.readfile(tmp_path / "w.dxf")
    weights = {}
    for layer in doc.layers:
        if layer.dxf.name.startswith("MAIN_"):
            dn = int(layer.dxf.name.rsplit("DN", 1)[1])
            c = SIZE_CLASSES[int(size_class([dn])[0])]
            assert layer.dxf.lineweight == c[1] and layer.rgb == c[2]
            weights[dn] = layer.dxf.lineweight
    assert weights[160] > weights[110]                       # larger bore, heavier line
    # by role: each link carries its class
    write_dxf(lay, tmp_path / "r.dxf")
    doc = ezdxf.readfile(tmp_path / "r.dxf")
    for e in doc.modelspace().query("POLYLINE"):
        k = int(dict(v.split("=", 1) for _, v in e.get_xdata("MAINSPAN"))["link_id"]) - 1
        c = SIZE_CLASSES[int(size_class([lay.links["nominal_mm"][k]])[0])]
        assert e.dxf.lineweight == c[1] and e.rgb == c[2]
    assert rep["layers"]


def test_thin_profile_keeps_the_tolerance():
    # hand-checked: the 0.5 m crest is kept; then the chords 0->2 and 2->4 pass 0.01 m and 0 m from
    # stations 1 and 3, within 0.05 m, so both are dropped
    keep = thin_profile(np.array([0, 5]), np.array([0.0, 1, 2, 3, 4]), np.array([0.0, 0.26, 0.5, 0.25, 0.0]))
    assert keep.tolist() == [True, False, True, False, True]
    rng = np.random.default_rng(3)
    st = np.cumsum(rng.uniform(1, 5, 400))
    z = np.cumsum(rng.normal(0, 0.03, 400))
    keep = thin_profile(np.array([0, 400]), st, z, 0.05)
    assert keep[0] and keep[-1] and keep.sum() < 400
    assert np.max(np.abs(np.interp(st, st[keep], z[keep]) - z)) <= 0.05 + 1e-12
