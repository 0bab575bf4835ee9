"""Long sections as DXF, read back with ezdxf: layers, levels, bands, extents, audit."""

import numpy as np
import pytest

try:
    from tests.conftest_layouts import make_layout
except ImportError:
    from conftest_layouts import make_layout

from mainspan.report.section import band_rows, section_data
from mainspan.writers.section_dxf import LAYERS, write_section_dxf

ezdxf = pytest.importorskip("ezdxf")


@pytest.mark.parametrize("system", ["gravity", "pressure"])
def test_section_dxf_reads_back(tmp_path, system):
    from ezdxf import bbox

    lay = make_layout(system)
    if system == "pressure":
        lay.links["trench_depth_m"] = np.full(lay.n_links, 1.2)
    rep = write_section_dxf(lay, tmp_path / "a.dxf", to_node="F")
    doc = ezdxf.readfile(tmp_path / "a.dxf")
    auditor = doc.audit()
    assert not auditor.has_errors and not auditor.has_fixes
    assert set(LAYERS) <= {ly.dxf.name for ly in doc.layers}
    cv = dict(doc.header.custom_vars)
    datum, vx = float(cv["MAINSPAN_DATUM_M"]), float(cv["MAINSPAN_VERTICAL_EXAGGERATION"])
    top = float(cv["MAINSPAN_BANDS_TOP"])
    assert vx == rep["vertical_exaggeration"] and datum == rep["datum_m"]
    path = lay.path_to_root(lay.node_index("F"))[::-1]
    d = section_data(lay, path)
    msp = doc.modelspace()
    ground = msp.query('LWPOLYLINE[layer=="LS_GROUND"]')[0]
    pts = np.array([(p[0], p[1]) for p in ground.get_points("xy")])
    # the ground read back: chainage and level (datum + height / exaggeration)
    np.testing.assert_allclose(pts[:, 0], d["ground_x"], atol=1e-9)
    np.testing.assert_allclose(datum + (pts[:, 1] - top) / vx, d["ground_z"], atol=1e-9)
    if system == "gravity":
        inv = msp.query('LWPOLYLINE[layer=="LS_PIPE_INVERT"]')
        z0 = datum + (np.array(list(inv[0].get_points("xy")))[0, 1] - top) / vx
        assert z0 == pytest.approx(d["node_level"][0], abs=1e-9)
        assert len(msp.query('LWPOLYLINE[layer=="LS_STRUCTURE"]')) >= len(path)
    else:
        assert len(msp.query('LINE[layer=="LS_GRADE_LINE"]')) == len(path) - 1
    # every band value is written in the band layer, every site id above the profile
    texts = {t.dxf.text for t in msp.query('TEXT[layer=="LS_BAND_TEXT"]')}
    for name, _, vals in band_rows(d):
        assert name in texts and {v for v in vals if v} <= texts
    ids = {t.dxf.text for t in msp.query('TEXT[layer=="LS_NODE_TEXT"]')}
    assert ids == {"S", "A", "D", "F"}
    # the header extents hold every entity (ezdxf's own bounding box as the reference)
    box = bbox.extents(msp, fast=True)
    lo, hi = doc.header["$EXTMIN"], doc.header["$EXTMAX"]
    assert lo[0] <= box.extmin.x and lo[1] <= box.extmin.y
    assert hi[0] >= box.extmax.x and hi[1] >= box.extmax.y
    # same bytes every run
    write_section_dxf(lay, tmp_path / "b.dxf", to_node="F")
    assert (tmp_path / "a.dxf").read_bytes() == (tmp_path / "b.dxf").read_bytes()


def test_export_section_dxf_cli(tmp_path, capsys):
    pytest.importorskip("pyogrio")
    try:
        from tests.conftest import run_cli
    except ImportError:
        from conftest import run_cli
    lay = make_layout("gravity")
    lay.write_gpkg(str(tmp_path / "lay.gpkg"))
    code, out, err = run_cli(["export", tmp_path / "lay.gpkg", "--to", tmp_path / "s.dxf",
                              "--section", "--node", "C"], capsys)
    assert code == 0, err
    assert "vertical exaggeration" in out
    doc = ezdxf.readfile(tmp_path / "s.dxf")
    assert {t.dxf.text for t in doc.modelspace().query('TEXT[layer=="LS_NODE_TEXT"]')} == \
        {"S", "A", "B", "C"}
