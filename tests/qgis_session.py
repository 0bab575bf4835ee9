"""One headless QGIS session for tests/test_qgis.py (run with QGIS's Python, not pytest).

``python3 qgis_session.py TASK ARGS.json`` prints ``RESULT <json>`` as its last line.

TASK ``main``: install the plugin from the zip the way QGIS's plugin manager
does (its own ``pyplugin_installer/unzip.py``), start it as QGIS starts a
processing plugin, list the provider's algorithms and parameters, plan the
demo sites, load the outputs into the project, cancel a run, give a bad
parameter, export and report.  TASK ``missing``: the same plugin start where
mainspan cannot be imported; records the messages it logs.
"""

import importlib.util
import json
import os
import sys
import traceback

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

from qgis.core import (QgsApplication, QgsProcessingContext, QgsProcessingException,  # noqa: E402
                       QgsProcessingFeedback, QgsProject)

APP = QgsApplication([], False)
APP.initQgis()
sys.path.append(os.path.join(QgsApplication.pkgDataPath(), "python"))
sys.path.append(os.path.join(QgsApplication.pkgDataPath(), "python", "plugins"))


def install_plugin(zip_path, plugins_dir):
    """Unzip with QGIS's own installer code and start the plugin as QGIS does."""
    import qgis.utils
    spec = importlib.util.spec_from_file_location(
        "qgis_unzip", os.path.join(QgsApplication.pkgDataPath(), "python", "pyplugin_installer",
                                   "unzip.py"))
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    mod.unzip(zip_path, plugins_dir)
    sys.path.insert(0, plugins_dir)
    qgis.utils.plugin_paths.insert(0, plugins_dir)
    qgis.utils.updateAvailablePlugins()
    name = next(n for n in os.listdir(plugins_dir) if not n.startswith("."))
    loaded = qgis.utils.loadPlugin(name)
    started = qgis.utils.startProcessingPlugin(name)
    return name, bool(loaded), bool(started)


class Feedback(QgsProcessingFeedback):
    def __init__(self, cancel_at=None):
        super().__init__()
        self.texts, self.progress, self.events = [], [], []
        self.cancel_at = cancel_at
        self.progressChanged.connect(self._progress)

    def _progress(self, p):
        self.progress.append(float(p))
        self.events.append(["progress", float(p)])

    def setProgressText(self, text):    # noqa: N802 - QGIS API
        super().setProgressText(text)
        self.texts.append(text)
        self.events.append(["text", text])
        if self.cancel_at and text == self.cancel_at:
            self.cancel()


def run(alg, params, feedback=None):
    import processing
    ctx = QgsProcessingContext()
    ctx.setProject(QgsProject.instance())
    fb = feedback or Feedback()
    try:
        res = processing.run(alg, params, context=ctx, feedback=fb)
        return {"ok": True, "result": {k: (v if isinstance(v, (str, int, float, bool))
                                           or v is None else str(v)) for k, v in res.items()},
                "texts": fb.texts, "progress": fb.progress, "events": fb.events}, ctx
    except QgsProcessingException as exc:
        return {"ok": False, "error": str(exc), "texts": fb.texts,
                "progress": fb.progress}, ctx


def param_info(p):
    info = {"name": p.name(), "type": p.type(), "optional": bool(p.flags() & p.FlagOptional),
            "advanced": bool(p.flags() & p.FlagAdvanced), "default": None}
    d = p.defaultValue()
    info["default"] = d if isinstance(d, (str, int, float, bool)) or d is None else str(d)
    if p.type() == "enum":
        info["options"] = list(p.options())
    if p.type() == "number":
        info["minimum"] = p.minimum()
    return info


def main_task(a):
    from processing.core.Processing import Processing
    Processing.initialize()
    out = {}
    out["plugin"] = install_plugin(a["zip"], a["plugins"])
    reg = QgsApplication.processingRegistry()
    prov = reg.providerById("mainspan")
    out["provider"] = None if prov is None else prov.id()
    out["algorithms"] = {alg.id(): [param_info(p) for p in alg.parameterDefinitions()]
                         for alg in (prov.algorithms() if prov else [])}
    out["help"] = {alg.id(): alg.shortHelpString() for alg in (prov.algorithms() if prov else [])}
    d, w = a["data"], a["work"]
    base = {"SITES": os.path.join(d, "kestrel_outlets.gpkg") + "|layername=outlets",
            "ID_FIELD": "id", "ROLE_FIELD": "role", "DEMAND_FIELD": "q_lps",
            "TERRAIN": os.path.join(d, "terrain.tif"),
            "LAND_COST": [os.path.join(d, "landcost.tif")]}
    # the plan, then its layers loaded into the project as processing loads results
    os.makedirs(os.path.join(w, "plan"))
    res, ctx = run("mainspan:plan", {**base, "OUTPUT": os.path.join(w, "plan", "layout.gpkg")})
    out["plan"] = res
    if res["ok"]:
        from processing.gui.Postprocessing import handleAlgorithmResults
        handleAlgorithmResults(reg.algorithmById("mainspan:plan"), ctx, Feedback())
        root = QgsProject.instance().layerTreeRoot()
        out["tree"] = {g.name(): [(c.name(), c.layer().renderer().type(), c.layer().featureCount(),
                                   rule_labels(c.layer()))
                                  for c in g.children()] for g in root.findGroups()}
        out["root_layers"] = [c.name() for c in root.children() if hasattr(c, "layer")]
        out["gdal_warnings"] = {name: gdal_messages(p) for name, p in (
            ("layout", os.path.join(w, "plan", "layout.gpkg")),
            ("sites", os.path.join(d, "kestrel_outlets.gpkg")))}
        out["styles"] = style_checks(os.path.join(w, "plan", "layout.gpkg"), w)
    # cancel while the links are priced: nothing may be left in the folder
    cancel_dir = os.path.join(w, "cancel")
    os.makedirs(cancel_dir)
    res, _ = run("mainspan:plan", {**base, "OUTPUT": os.path.join(cancel_dir, "layout.gpkg"),
                                   "REPORT": os.path.join(cancel_dir, "report.html")},
                 Feedback(cancel_at="mainspan: costs"))
    out["cancel"] = {**res, "left": sorted(os.listdir(cancel_dir))}
    # a value the schema refuses: mainspan's one-line message
    res, _ = run("mainspan:plan", {**base, "CANDIDATES": "delaunay+nosuch",
                                   "OUTPUT": os.path.join(w, "bad.gpkg")})
    out["bad"] = res
    # a filtered layer is not a plain file: mainspan plans a copy of its features
    from qgis.core import QgsVectorLayer
    import shutil     # its own copy: QGIS may write to a GeoPackage it opened (the byte test)
    shutil.copyfile(os.path.join(d, "kestrel_outlets.gpkg"), os.path.join(w, "part_src.gpkg"))
    part = QgsVectorLayer(os.path.join(w, "part_src.gpkg") + "|layername=outlets",
                          "kestrel part", "ogr")
    part.setSubsetString("fid <= 20")
    QgsProject.instance().addMapLayer(part)
    os.makedirs(os.path.join(w, "part"))
    out["subset"], _ = run("mainspan:plan", {"SITES": part.id(), "ID_FIELD": "id",
                                             "ROLE_FIELD": "role",
                                             "OUTPUT": os.path.join(w, "part", "part.gpkg")})
    out["subset"]["n_features"] = part.featureCount()
    QgsProject.instance().removeMapLayer(part.id())
    # check and compare on the sites alone (no rasters): quick
    sites_only = {k: base[k] for k in ("SITES", "ID_FIELD", "ROLE_FIELD", "DEMAND_FIELD")}
    out["check"], _ = run("mainspan:check", sites_only)
    project = os.path.join(w, "project.toml")
    with open(project, "w") as f:
        f.write(f"[sites]\npath = {json.dumps(os.path.join(d, 'kestrel_outlets.gpkg'))}\n"
                "layer = \"outlets\"\nid_field = \"id\"\nrole_field = \"role\"\n"
                "[scenarios.nearest]\ncandidates = { method = \"knn\", k = 6 }\n")
    out["compare"], _ = run("mainspan:compare", {"PROJECT": project,
                                                 "OUTPUT": os.path.join(w, "compare.gpkg")})
    if out["plan"]["ok"]:
        lay = os.path.join(w, "plan", "layout.gpkg")
        out["export"], _ = run("mainspan:export", {"LAYOUT": lay, "FORMAT": "DXF drawing",
                                                   "OUTPUT": os.path.join(w, "layout.dxf")})
        out["report"], _ = run("mainspan:report", {"LAYOUT": lay,
                                                   "OUTPUT": os.path.join(w, "layout.html")})
    return out


def rule_labels(layer):
    r = layer.renderer()
    return [c.label() for c in r.rootRule().children()] if r.type() == "RuleRenderer" else []


def gdal_messages(path):
    """What the GDAL that QGIS uses says on opening *path*."""
    from osgeo import gdal
    msgs = []
    gdal.PushErrorHandler(lambda cls, no, msg: msgs.append(msg))
    try:
        ds = gdal.OpenEx(path)
        del ds
    finally:
        gdal.PopErrorHandler()
    return msgs


def style_checks(gpkg, w):
    """Our link style for sized pipes; a style saved in the GeoPackage is kept."""
    import shutil
    from qgis.core import QgsLineSymbol, QgsSingleSymbolRenderer, QgsVectorLayer
    from mainspan.qgis.styles import (_WIDTHS, SYSTEM_COLOURS, LayoutLayers, _has_own_style,
                                      style_layer)
    out = {"n_classes": len(_WIDTHS), "pressure_colour": SYSTEM_COLOURS["pressure"]}
    mem = QgsVectorLayer("LineString?crs=EPSG:32633&field=nominal_mm:double", "links", "memory")
    style_layer(mem, "links", "pressure")
    r = mem.renderer()
    out["sized"] = [r.type(), r.classAttribute(), [(g.lowerValue(), g.upperValue(),
                    g.symbol().width(), g.symbol().color().name()) for g in r.ranges()]]
    # without layer_styles (an older mainspan's file): our fallback style
    bare = os.path.join(w, "bare.gpkg")
    shutil.copyfile(gpkg, bare)
    import sqlite3
    con = sqlite3.connect(bare)
    con.execute("DELETE FROM layer_styles")
    con.commit()
    con.close()
    out["bare_has_style"] = _has_own_style(bare, "nodes")
    lyr = QgsVectorLayer(bare + "|layername=nodes", "nodes", "ogr")
    QgsProject.instance().addMapLayer(lyr)
    ctx0 = QgsProcessingContext()
    ctx0.setProject(QgsProject.instance())
    LayoutLayers(bare, "nodes", "", 0).postProcessLayer(lyr, ctx0, Feedback())
    out["bare_renderer"] = lyr.renderer().type()
    own = os.path.join(w, "own_style.gpkg")
    shutil.copyfile(gpkg, own)
    out["own_before"] = _has_own_style(own, "links")
    lyr = QgsVectorLayer(own + "|layername=links", "links", "ogr")
    lyr.setRenderer(QgsSingleSymbolRenderer(QgsLineSymbol.createSimple(
        {"line_color": "#ff00ff", "line_width": "2"})))
    lyr.saveStyleToDatabase("house style", "", True, "")
    del lyr
    out["own_after"] = _has_own_style(own, "links")
    again = QgsVectorLayer(own + "|layername=links", "links", "ogr")   # loads the saved style
    QgsProject.instance().addMapLayer(again)
    ctx = QgsProcessingContext()
    ctx.setProject(QgsProject.instance())
    LayoutLayers(own, "links", "pressure", 0).postProcessLayer(again, ctx, Feedback())
    out["own_colour"] = again.renderer().symbol().color().name()
    return out


def missing_task(a):
    msgs = []
    QgsApplication.messageLog().messageReceived.connect(
        lambda m, tag, level: msgs.append([m, tag, int(level)]))
    out = {"mainspan_importable": importlib.util.find_spec("mainspan") is not None}
    out["plugin"] = install_plugin(a["zip"], a["plugins"])
    out["provider"] = QgsApplication.processingRegistry().providerById("mainspan") is not None
    out["messages"] = [m for m in msgs if m[1] == "mainspan"]
    out["executable"] = sys.executable
    return out


if __name__ == "__main__":
    task, args = sys.argv[1], json.load(open(sys.argv[2]))
    try:
        result = {"main": main_task, "missing": missing_task}[task](args)
    except Exception:
        result = {"crash": traceback.format_exc()}
    print("RESULT " + json.dumps(result), flush=True)
    os._exit(0)     # skip QGIS's exit-time clean-up, which can crash headless
