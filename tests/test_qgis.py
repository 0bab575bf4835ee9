"""mainspan in QGIS (issue 17): the provider run headless in QGIS's own Python.

QGIS's Python modules come with Debian's ``python3-qgis`` and load only in the
system interpreter (``/usr/bin/python3``, or ``MAINSPAN_QGIS_PYTHON``).  The
tests here run under any interpreter of the same Python version: they start
that interpreter on ``tests/qgis_session.py`` with this interpreter's
site-packages (and the checkout) on ``PYTHONPATH``, so QGIS loads the very
mainspan and numpy under test.  Without QGIS they skip, and fail with
``CI=true`` (``.ci/run`` installs ``python3-qgis``).  The parts that need no
QGIS (parameters from the schema, the zip, the pip command) run everywhere.
"""

import configparser
import functools
import importlib
import json
import os
import shutil
import subprocess
import sys
import sysconfig
import tempfile
import xml.etree.ElementTree as ET
import zipfile

import pytest

import mainspan
from mainspan.errors import InputError, OverwriteError
from mainspan.qgis import PLUGIN_NAME, params
from mainspan.qgis.package import build_zip
from mainspan.settings import Setting, all_settings, setting

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
DATA = os.path.join(ROOT, "sample_data")
SESSION = os.path.join(ROOT, "tests", "qgis_session.py")
QGIS_PYTHON = os.environ.get("MAINSPAN_QGIS_PYTHON", "/usr/bin/python3")
CAUTION_WORDS = ("licensed engineer", "local codes", "locate existing utilities")

# processing parameter type of each widget (QgsProcessingParameter*.type())
QGIS_TYPE = {"point_layer": "vector", "vector": "vector", "vectors": "multilayer", "field": "field", "raster": "raster",
             "rasters": "multilayer", "crs": "crs", "enum": "enum", "number": "number",
             "integer": "number", "bool": "boolean", "file": "file",
             "destination": "fileDestination", "text": "string"}


# ----------------------------------------------------------------------------- no QGIS needed
def test_schema_settings_map_to_processing_parameters():
    by_name = {sp.setting.name: sp for sp in params.plan_parameters()}
    assert by_name["sites.path"].widget == "point_layer" and by_name["sites.path"].name == "SITES"
    assert not by_name["sites.path"].optional and not by_name["output.gpkg"].optional
    assert by_name["sites.demand_field"].widget == "field"
    assert by_name["sites.demand_field"].numeric_field
    assert not by_name["sites.id_field"].numeric_field
    assert by_name["rasters.terrain"].widget == "raster"
    assert by_name["design.surface_raster"].widget == "raster"
    assert by_name["rasters.land_cost"].widget == "rasters"
    assert by_name["tree.layout"].widget == "enum"
    assert by_name["crs.working"].widget == "crs"
    out_crs = Setting("output", "output_crs", "text", "working", "CRS of the outputs",
                      metavar="CRS")
    assert params.spec_of(out_crs).widget == "text"     # 'input', 'working' or a CRS
    assert by_name["design.catalog"].widget == "file" and by_name["design.catalog"].extension == "csv"
    assert by_name["output.report"].widget == "destination"
    assert by_name["output.report"].extension == "html"
    assert by_name["design.velocity_max_mps"].name == "VELOCITY_MAX_MPS"
    assert by_name["design.velocity_max_mps"].advanced
    # every setting with an option is a parameter, except the three a map layer makes moot
    companions = {s.name for s in all_settings()
                  if params.layer_parent(s) and s.key.endswith("_layer")}
    shown = {s.name for s in all_settings() if s.on_cli} - set(params.SKIPPED) - companions
    assert set(by_name) == shown
    # existing mains (issue 15): a line-layer picker whose fields are picked from it, and
    # the layer of a multi-layer file chosen by the picker, not typed
    assert by_name["network.existing"].widget == "vector"
    fld = by_name["network.existing_diameter_field"]
    assert (fld.widget, fld.parent) == ("field", "EXISTING")
    assert "network.existing_layer" in companions
    assert by_name["network.forced_links_layer"].widget == "vector"
    # barriers (issue 14): several vector layers, each handed on as PATH or PATH|layer
    assert by_name["rasters.barrier"].widget == "vectors"
    sec, _ = params.settings_from_values(list(by_name.values()),
                                         {"BARRIER": ["/d/ponds.gpkg|ponds"]})
    assert sec["rasters"]["barrier"] == ["/d/ponds.gpkg|ponds"]
    assert len({sp.name for sp in by_name.values()}) == len(by_name)     # unique names
    # settings other helpers add appear by their declaration alone
    barrier = Setting("route", "barriers", "path", None, "lines no main may cross",
                      metavar="LINES")
    assert params.spec_of(barrier).widget == "vector"
    in_rasters = Setting("rasters", "barriers", "path", None, "lines no main may cross")
    assert params.spec_of(in_rasters).widget == "vector"
    existing = Setting("existing", "existing_mains", "path", None, "mains already built")
    assert params.spec_of(existing).widget == "vector"
    assert params.spec_of(setting("prices", "bedding")) is None          # project file only


def test_parameter_values_become_checked_settings():
    specs = params.plan_parameters()
    values = {"SITES": "s.gpkg", "K": 8, "LAYOUT": "tree", "VELOCITY_MAX_MPS": 1.2,
              "ROOTS": "P1, P2", "CLASS_COSTS": "3=250, 4=100", "SURGE_CHECK": True,
              "GRAVITY_MIN_SLOPE_TABLE_PCT": params.default_text(
                  setting("design", "gravity_min_slope_table_pct")),
              "OUTPUT": "out.gpkg", "REPORT": ""}
    sec, origin = params.settings_from_values(specs, values, layers={"sites.layer": "outlets"})
    # values equal to the defaults are left out, as options left off the command line
    assert "k" not in sec.get("candidates", {}) and "layout" not in sec.get("tree", {})
    assert "surge_check" not in sec.get("design", {})
    assert "gravity_min_slope_table_pct" not in sec.get("design", {})
    assert sec["design"]["velocity_max_mps"] == 1.2
    assert sec["tree"]["roots"] == ["P1", "P2"]
    assert sec["rasters"]["class_costs"] == {"3": 250.0, "4": 100.0}
    assert sec["sites"] == {"path": "s.gpkg", "layer": "outlets"}
    assert "report" not in sec["output"]
    assert origin[("design", "velocity_max_mps")] == "parameter VELOCITY_MAX_MPS"
    with pytest.raises(InputError, match=r"^parameter CLASS_COSTS: .*3=250"):
        params.settings_from_values(specs, {"CLASS_COSTS": "3=cheap"})


def test_plugin_zip_is_reproducible_and_carries_the_version(tmp_path):
    a = build_zip(tmp_path / "a")
    b = build_zip(tmp_path / "b")
    assert open(a, "rb").read() == open(b, "rb").read()
    assert os.path.basename(a) == f"{PLUGIN_NAME}-{mainspan.__version__}.zip"
    with pytest.raises(OverwriteError, match="already exists"):
        build_zip(tmp_path / "a")
    with zipfile.ZipFile(a) as zf:
        names = zf.namelist()
        meta = zf.read(f"{PLUGIN_NAME}/metadata.txt").decode()
        svg = zf.read(f"{PLUGIN_NAME}/icon.svg")
    assert names == sorted(names) and all(n.startswith(PLUGIN_NAME + "/") for n in names)
    # QGIS reads metadata.txt with Python's configparser (qgis.utils.findPlugins)
    cp = configparser.ConfigParser()
    cp.read_string(meta)
    g = cp["general"]
    assert g["version"] == mainspan.__version__
    assert g["hasProcessingProvider"] == "yes" and g["icon"] == "icon.svg"
    assert all(g.get(k) for k in ("name", "description", "about", "qgisMinimumVersion",
                                  "author", "email"))
    assert all(w in g["about"] for w in ("licensed engineer", "locate existing utilities"))
    root = ET.fromstring(svg)
    assert root.tag.endswith("svg") and root.get("viewBox") == "0 0 64 64"


def test_pip_command_names_qgis_python_and_version(monkeypatch, tmp_path):
    plugin = importlib.import_module("mainspan.qgis.plugin")
    exe = os.path.join(tmp_path, "bin", f"python{sys.version_info[0]}.{sys.version_info[1]}")
    os.makedirs(os.path.dirname(exe))
    open(exe, "w").close()
    # inside QGIS, sys.executable is QGIS itself: the interpreter is found beside it
    monkeypatch.setattr(sys, "executable", "/usr/bin/qgis")
    monkeypatch.setattr(sys, "exec_prefix", str(tmp_path))
    cmd = plugin.pip_command()
    assert cmd.startswith(f"{exe} -m pip install ")
    assert cmd.endswith(f" mainspan=={mainspan.__version__}")
    err = ImportError("No module named 'mainspan'", name="mainspan")
    msg = plugin.missing_message(err)
    assert "\n" not in msg and msg.endswith(cmd) and "not installed in QGIS's Python" in msg


# ----------------------------------------------------------------------------- QGIS, headless
def _ci():
    return os.environ.get("CI", "").lower() in ("1", "true", "yes")


@functools.lru_cache(maxsize=1)
def _qgis_problem():
    """Why QGIS cannot run here, or None."""
    if not os.path.exists(QGIS_PYTHON):
        return f"{QGIS_PYTHON} not found (set MAINSPAN_QGIS_PYTHON to QGIS's Python)"
    r = subprocess.run([QGIS_PYTHON, "-c", "import sys, qgis.core; "
                        "print('%d.%d' % sys.version_info[:2])"], capture_output=True, text=True,
                       env={**os.environ, "QT_QPA_PLATFORM": "offscreen", "PYTHONPATH": ""},
                       timeout=120)
    if r.returncode:
        return (f"QGIS's Python modules do not load in {QGIS_PYTHON} (apt-get install "
                f"python3-qgis): {r.stderr.strip().splitlines()[-1:]}")
    ours = "%d.%d" % sys.version_info[:2]
    if r.stdout.strip() != ours:
        return (f"QGIS's Python is {r.stdout.strip()} but the tests run {ours}: the packages "
                f"installed here cannot load there; make the venv with {QGIS_PYTHON} -m venv")
    return None


def _need_qgis():
    why = _qgis_problem()
    if why:
        if _ci():   # in CI QGIS is part of the environment: its absence is a failure there
            pytest.fail(f"{why} (CI={os.environ['CI']}; .ci/run installs python3-qgis)")
        pytest.skip(why)


def _session(task, tmp, *, with_mainspan=True):
    zip_path = build_zip(tmp)
    # a copy of the demo inputs: QGIS writes raster statistics (.aux.xml) beside what it opens
    data = os.path.join(tmp, "data")
    os.makedirs(data)
    for name in ("kestrel_outlets.gpkg", "terrain.tif", "landcost.tif"):
        shutil.copyfile(os.path.join(DATA, name), os.path.join(data, name))
    args = {"zip": zip_path, "plugins": os.path.join(tmp, "plugins"), "data": data,
            "work": os.path.join(tmp, "work")}
    os.makedirs(args["work"])
    with open(os.path.join(tmp, "args.json"), "w") as f:
        json.dump(args, f)
    env = {**os.environ, "QT_QPA_PLATFORM": "offscreen",
           "XDG_RUNTIME_DIR": os.path.join(tmp, "xdg"), "PYTHONPATH": ""}
    os.makedirs(env["XDG_RUNTIME_DIR"], mode=0o700)
    cmd = [QGIS_PYTHON, SESSION, task, os.path.join(tmp, "args.json")]
    if with_mainspan:   # this interpreter's mainspan (checkout or install) and its packages
        here = os.path.dirname(os.path.dirname(os.path.abspath(mainspan.__file__)))
        paths = dict.fromkeys([here, sysconfig.get_paths()["purelib"],
                               sysconfig.get_paths()["platlib"]])
        env["PYTHONPATH"] = os.pathsep.join(paths)
    else:
        cmd.insert(1, "-s")     # no user site either: mainspan must not be importable
    r = subprocess.run(cmd, capture_output=True, text=True, env=env, timeout=900)
    lines = [ln for ln in r.stdout.splitlines() if ln.startswith("RESULT ")]
    if not lines:
        pytest.fail(f"QGIS session {task} gave no result (exit {r.returncode}):\n"
                    f"{r.stderr[-3000:]}")
    res = json.loads(lines[-1][len("RESULT "):])
    if "crash" in res:
        pytest.fail(f"QGIS session {task} failed:\n{res['crash']}\n{r.stderr[-2000:]}")
    return res, args


@pytest.fixture(scope="module")
def qgis_run():
    _need_qgis()
    # a folder of its own: pytest's numbered temp folders are pruned by other pytest runs
    with tempfile.TemporaryDirectory(prefix="mainspan-qgis-") as tmp:
        yield _session("main", tmp)


def test_provider_lists_algorithms_with_the_schema_parameters(qgis_run):
    res, _ = qgis_run
    assert res["plugin"] == [PLUGIN_NAME, True, True]       # installed from the zip, started
    assert res["provider"] == "mainspan"
    algs = res["algorithms"]
    assert set(algs) == {f"mainspan:{n}" for n in ("plan", "check", "compare", "export",
                                                   "report")}
    for alg_id, outputs in (("mainspan:plan", True), ("mainspan:check", False)):
        got = {p["name"]: p for p in algs[alg_id]}
        specs = params.plan_parameters(outputs=outputs)
        assert [p["name"] for p in algs[alg_id]] == [sp.name for sp in specs]
        for sp in specs:
            p = got[sp.name]
            assert p["type"] == QGIS_TYPE[sp.widget], sp.name
            assert p["optional"] == sp.optional and p["advanced"] == sp.advanced, sp.name
            s = sp.setting
            if sp.widget == "enum":
                assert p["options"] == list(s.choices) and p["default"] == s.default
            if sp.widget in ("number", "integer") and s.default is not None:
                assert p["default"] == s.default, sp.name
            if sp.widget in ("number", "integer") and s.lo is not None:
                assert p["minimum"] == s.lo, sp.name
    for alg_id, text in res["help"].items():
        assert all(w in text for w in CAUTION_WORDS), alg_id


def test_plan_gives_the_cli_layout_byte_for_byte(qgis_run, tmp_path):
    from mainspan.cli import main

    res, args = qgis_run
    data = args["data"]
    plan = res["plan"]
    assert plan["ok"], plan.get("error")
    gpkg = plan["result"]["OUTPUT"]
    out = str(tmp_path / "cli.gpkg")
    rc = main(["plan", "--sites", os.path.join(data, "kestrel_outlets.gpkg"), "--layer", "outlets",
               "--id-field", "id", "--role-field", "role", "--demand-field", "q_lps",
               "--terrain", os.path.join(data, "terrain.tif"),
               "--land-cost", "landcost=" + os.path.join(data, "landcost.tif"),
               "--output", out, "--quiet"])
    assert rc == 0
    assert open(gpkg, "rb").read() == open(out, "rb").read()
    # progress: every stage named, the bar only moves forward and ends full
    assert plan["texts"][:2] == ["mainspan: read", "mainspan: candidates"]
    assert "mainspan: costs" in plan["texts"] and "mainspan: tree" in plan["texts"]
    prog = plan["progress"]
    assert prog == sorted(prog) and prog[-1] == 100.0
    # the bar reaches the end of each stage's share as that stage ends
    from mainspan.qgis import STAGE_SHARE
    ends, total = [], 0.0
    for stage in ("candidates", "costs", "tree"):
        total += STAGE_SHARE[stage]
        ends.append(total)
    assert set(ends) <= set(prog), (ends, prog)


def test_plan_layers_load_grouped_and_styled(qgis_run):
    import pyogrio

    res, _ = qgis_run
    groups = res["tree"]
    assert list(groups) == ["mainspan layout: layout"] and res["root_layers"] == []
    (nodes, n_type, n_count, n_rules), (links, l_type, l_count, l_rules) = \
        groups["mainspan layout: layout"]
    # the style the GeoPackage carries (mainspan.writers.styles): one rule per role present
    assert (nodes, n_type) == ("nodes", "RuleRenderer") and (links, l_type) == ("links",
                                                                                 "RuleRenderer")
    assert {"source", "demand"} <= set(n_rules) and l_rules == ["planned main"]
    # QGIS's OGR provider reads back what pyogrio (GDAL, outside QGIS) reads
    gpkg = res["plan"]["result"]["OUTPUT"]
    assert n_count == pyogrio.read_info(gpkg, layer="nodes")["features"] == 148
    assert l_count == pyogrio.read_info(gpkg, layer="links")["features"] == 147


def test_link_style_by_size_and_a_saved_style_is_kept(qgis_run):
    res, _ = qgis_run
    st = res["styles"]
    typ, field, ranges = st["sized"]
    assert (typ, field) == ("graduatedSymbol", "nominal_mm")
    widths = [w for _, _, w, _ in ranges]
    assert widths == sorted(widths) and len(set(widths)) == st["n_classes"] >= 3
    assert {c for *_, c in ranges} == {st["pressure_colour"]}
    assert all(a[1] == b[0] for a, b in zip(ranges, ranges[1:]))     # no gaps between classes
    # a GeoPackage without layer_styles gets our fallback: one marker per role
    assert st["bare_has_style"] is False and st["bare_renderer"] == "categorizedSymbol"
    # a style a user saved as default in the GeoPackage (with QGIS itself) wins over ours
    assert st["own_before"] is True and st["own_after"] is True
    assert st["own_colour"] == "#ff00ff"


def test_layout_geopackage_opens_quietly_in_qgis_gdal(qgis_run):
    import sqlite3

    res, _ = qgis_run
    gpkg = res["plan"]["result"]["OUTPUT"]
    # OGC GeoPackage 1.2 (OGC 12-128r15, 1.1.1): application_id 'GPKG', user_version 10200
    con = sqlite3.connect(gpkg)
    app_id, user_version = (con.execute(f"PRAGMA {p}").fetchone()[0]
                            for p in ("application_id", "user_version"))
    con.close()
    assert (app_id, user_version) == (0x47504B47, 10200)
    warn = res["gdal_warnings"]
    assert warn["layout"] == []
    # the check can fail: the demo sites file, GeoPackage 1.4, draws QGIS 3.22's GDAL warning
    assert any("partially supported" in m for m in warn["sites"]), warn["sites"]


def test_cancel_mid_run_leaves_nothing(qgis_run):
    res, _ = qgis_run
    c = res["cancel"]
    assert not c["ok"] and c["error"] == "mainspan: plan cancelled; nothing was written"
    assert c["texts"][-1] == "mainspan: costs"      # cancelled while pricing the links
    assert c["left"] == []                           # no layout, no report, no temporary file


def test_bad_parameter_gives_one_line(qgis_run):
    res, _ = qgis_run
    b = res["bad"]
    assert not b["ok"] and "\n" not in b["error"]
    assert b["error"].startswith("mainspan: error: unknown candidate builder 'nosuch'")
    assert "(parameter CANDIDATES)" in b["error"]


def test_export_and_report_from_the_toolbox(qgis_run):
    import ezdxf

    res, args = qgis_run
    assert res["export"]["ok"] and res["report"]["ok"], (res["export"], res["report"])
    doc = ezdxf.readfile(res["export"]["result"]["OUTPUT"])       # read by ezdxf, not by us
    assert len(doc.modelspace().query("POLYLINE LWPOLYLINE")) >= 147
    with open(res["report"]["result"]["OUTPUT"], encoding="utf-8") as f:
        assert '<meta name="generator" content="mainspan">' in f.read()


def test_filtered_layer_is_planned_from_a_copy(qgis_run):
    import pyogrio

    res, _ = qgis_run
    sub = res["subset"]
    assert sub["ok"], sub.get("error")
    assert sub["n_features"] == 20
    gpkg = sub["result"]["OUTPUT"]
    assert pyogrio.read_info(gpkg, layer="nodes")["features"] == 20
    assert pyogrio.read_info(gpkg, layer="links")["features"] == 19      # a tree: n - 1 links
    ri = pyogrio.read_dataframe(gpkg, layer="run_info")
    sites = dict(zip(ri.iloc[:, 0], ri.iloc[:, 1]))["sites"]
    assert sites.endswith("sites.gpkg") and "kestrel_outlets" not in sites


def test_check_and_compare_from_the_toolbox(qgis_run):
    import pyogrio

    res, _ = qgis_run
    check = res["check"]
    assert check["ok"], check.get("error")
    assert check["result"]["OK"] is True and check["result"]["PROBLEMS"] == 0
    assert "inputs OK" in check["result"]["REPORT"]
    comp = res["compare"]
    assert comp["ok"], comp.get("error")
    assert "nearest" in comp["result"]["TABLE"]
    names = {str(r[0]) for r in pyogrio.list_layers(comp["result"]["OUTPUT"])}
    assert {"links_base", "links_nearest", "scenario_summary"} <= names


def test_plugin_without_mainspan_names_the_pip_command():
    _need_qgis()
    with tempfile.TemporaryDirectory(prefix="mainspan-qgis-") as tmp:
        res, _ = _session("missing", tmp, with_mainspan=False)
    assert res["mainspan_importable"] is False
    assert res["plugin"][0] == PLUGIN_NAME and res["provider"] is False
    assert len(res["messages"]) == 1                 # one message, not one per algorithm
    text, tag, level = res["messages"][0]
    assert "\n" not in text and level == 2           # Qgis.Critical
    assert "not installed in QGIS's Python" in text
    assert "-m pip install" in text and text.endswith(f"mainspan=={mainspan.__version__}")
    assert text.split(": ")[-1].split()[0] in (res["executable"], QGIS_PYTHON,
                                               os.path.realpath(QGIS_PYTHON))
