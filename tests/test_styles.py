"""Layer styles in the GeoPackage (``layer_styles``): our own symbology and labels,
read back as QML with lxml and, where QGIS's Python is installed, by QGIS itself."""

import os
import sqlite3
import subprocess

import numpy as np
import pytest

try:
    from tests.conftest_layouts import make_layout
except ImportError:
    from conftest_layouts import make_layout

from mainspan.writers.styles import SIZE_COLOURS, STYLE_NAME

QGIS_PYTHON = "/usr/bin/python3"
_QGIS_SCRIPT = """
import sys
from qgis.core import QgsApplication, QgsVectorLayer
app = QgsApplication([], False); app.initQgis()
for name in sys.argv[2:]:
    lyr = QgsVectorLayer(f"{sys.argv[1]}|layername={name}", name, "ogr")
    r = lyr.renderer()
    rules = [c.label() for c in r.rootRule().children()] if r.type() == "RuleRenderer" else []
    print("|".join([name, str(lyr.isValid()), r.type(), ";".join(rules),
                    str(lyr.labelsEnabled())]), flush=True)
import os
os._exit(0)          # QGIS's own shutdown may crash headless; the answers are printed
"""


def _layout_with_fittings():
    lay = make_layout("pressure")
    lay.tables["fittings"] = {"type": np.array(["air_valve", "washout", "air_valve"], object),
                              "link_id": np.array([1, 2, 4]),
                              "x": np.array([500100.0, 500400.0, 500290.0]),
                              "y": np.array([5000010.0, 5000030.0, 5000200.0])}
    return lay


def _styles(path):
    con = sqlite3.connect(path)
    try:
        return con.execute("SELECT f_table_name, f_geometry_column, styleName, styleQML, "
                           "useAsDefault FROM layer_styles ORDER BY id").fetchall()
    finally:
        con.close()


def test_styles_written_for_links_nodes_fittings(tmp_path):
    etree = pytest.importorskip("lxml.etree")
    lay = _layout_with_fittings()
    p = str(tmp_path / "a.gpkg")
    lay.write_gpkg(p)
    rows = _styles(p)
    assert [r[0] for r in rows] == ["links", "nodes", "fittings"]
    assert all(r[2] == STYLE_NAME and r[4] == 1 and r[1] == "geom" for r in rows)
    qml = {r[0]: etree.fromstring(r[3].split("\n", 1)[1].encode()) for r in rows}
    # links: one rule per pipe size with its own colour, then the failed-check overlay
    rules = qml["links"].findall(".//rules/rule")
    assert [r.get("label") for r in rules] == ["DN110 mm", "DN160 mm", "failed check"]
    colours = [s.find(".//prop[@k='line_color']").get("v")
               for s in qml["links"].findall(".//symbols/symbol")]
    want = [",".join(str(int(c[i:i + 2], 16)) for i in (1, 3, 5)) + ",255"
            for c in SIZE_COLOURS[:2]]
    assert colours[:2] == want and len(set(colours)) == 3
    # labels: link id and size along links, site id at nodes
    assert qml["links"].get("labelsEnabled") == "1"
    assert "link_id" in qml["links"].find(".//text-style").get("fieldName")
    assert qml["nodes"].find(".//text-style").get("fieldName") == '"node_id"'
    roles = [r.get("label") for r in qml["nodes"].findall(".//rules/rule")]
    assert roles == ["demand", "junction", "source", "failed check"]
    assert [r.get("label") for r in qml["fittings"].findall(".//rules/rule")] == \
        ["air valve", "washout"]


def test_restyling_replaces_only_our_rows_and_is_reproducible(tmp_path):
    lay = _layout_with_fittings()
    a, b = str(tmp_path / "a.gpkg"), str(tmp_path / "b.gpkg")
    lay.write_gpkg(a)
    lay.write_gpkg(b)
    assert open(a, "rb").read() == open(b, "rb").read()
    con = sqlite3.connect(a)
    con.execute("INSERT INTO layer_styles (f_table_name, styleName, styleQML, useAsDefault) "
                "VALUES ('links', 'my own', '<qgis/>', 0)")
    con.commit()
    con.close()
    lay.write_gpkg(a, overwrite=True)
    rows = _styles(a)
    assert sorted((r[0], r[2]) for r in rows) == sorted(
        [("fittings", STYLE_NAME), ("links", "my own"), ("links", STYLE_NAME),
         ("nodes", STYLE_NAME)])
    assert sum(r[4] for r in rows if r[0] == "links") == 1


def test_qgis_opens_the_layers_styled(tmp_path):
    if not os.path.exists(QGIS_PYTHON) or subprocess.run(
            [QGIS_PYTHON, "-c", "import qgis.core"], capture_output=True).returncode:
        if os.environ.get("CI", "").lower() in ("1", "true", "yes"):
            pytest.fail("QGIS's Python (python3-qgis) is not installed in CI")
        pytest.skip("QGIS's Python (python3-qgis) is not installed")
    lay = _layout_with_fittings()
    p = str(tmp_path / "a.gpkg")
    lay.write_gpkg(p)
    r = subprocess.run([QGIS_PYTHON, "-c", _QGIS_SCRIPT, p, "links", "nodes", "fittings"],
                       capture_output=True, text=True, timeout=120,
                       env={**os.environ, "QT_QPA_PLATFORM": "offscreen"})
    assert r.returncode == 0, r.stderr[-2000:]
    got = {ln.split("|")[0]: ln.split("|")[1:] for ln in r.stdout.splitlines() if "|" in ln}
    assert got["links"] == ["True", "RuleRenderer", "DN110 mm;DN160 mm;failed check", "True"]
    assert got["nodes"][1] == "RuleRenderer" and got["nodes"][3] == "True"
    assert got["fittings"][2] == "air valve;washout"
