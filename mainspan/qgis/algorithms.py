"""The plan and check algorithms of the ``mainspan`` processing provider (QGIS).

Both take their parameters from the settings schema (:mod:`mainspan.qgis.params`)
and call mainspan through its public Python API: :class:`mainspan.settings.PlanSettings`
checks every value before any work, :func:`mainspan.read_sites` and
:func:`mainspan.plan_layout` plan, :meth:`mainspan.Layout.write_gpkg` and the
writers write.  Errors are mainspan's one-line messages, raised as
``QgsProcessingException``.  Progress goes to the processing feedback; cancel is
honoured at every progress step of the plan, before anything is written, so a
cancelled run leaves no file behind.  Once the outputs are being written the
run finishes them (each file is written under a temporary name and moved into
place); if one fails, the files this run created are removed again.
"""

from __future__ import annotations

import os
import re

from qgis.core import (QgsCoordinateReferenceSystem, QgsProcessing, QgsProcessingAlgorithm,
                       QgsProcessingException, QgsProcessingOutputBoolean,
                       QgsProcessingOutputNumber, QgsProcessingOutputString,
                       QgsProcessingParameterBoolean, QgsProcessingParameterCrs,
                       QgsProcessingParameterDefinition, QgsProcessingParameterEnum,
                       QgsProcessingParameterField, QgsProcessingParameterFile,
                       QgsProcessingParameterFileDestination,
                       QgsProcessingParameterMultipleLayers, QgsProcessingParameterNumber,
                       QgsProcessingParameterRasterLayer, QgsProcessingParameterString,
                       QgsProcessingParameterVectorLayer, QgsProcessingUtils,
                       QgsProviderRegistry, QgsVectorFileWriter)
from qgis.PyQt.QtGui import QIcon

from . import STAGE_SHARE
from .params import OUTPUT_FILTERS, default_text, plan_parameters

__all__ = ["MainspanAlgorithm", "PlanAlgorithm", "CheckAlgorithm", "Cancelled", "HELP_TAIL",
           "icon", "ICON_PATH"]

#: The plugin's own icon (drawn for mainspan: a tree of mains over contour lines).
ICON_PATH = os.path.join(os.path.dirname(os.path.abspath(__file__)), "plugin", "icon.svg")


def icon():
    """The provider's and every algorithm's icon."""
    return QIcon(ICON_PATH)


def _caution():
    from ..messages import CAUTION
    return CAUTION


#: Shown under every algorithm's help.
HELP_TAIL = ("<p>Results are a preliminary design aid, to be checked by a licensed engineer "
             "against local codes; locate existing utilities before digging.</p>")



class Cancelled(BaseException):
    """The user pressed cancel: raised from a progress step, so no mainspan code catches it."""


class _Progress:
    """``progress(stage, done, total)`` for mainspan that reports to processing feedback."""

    def __init__(self, feedback):
        self.feedback = feedback
        self.done_share = 0.0
        self.stage = None

    def __call__(self, stage, done, total):
        fb = self.feedback
        if fb is None:
            return
        if fb.isCanceled():
            raise Cancelled()
        if stage != self.stage:
            if self.stage in STAGE_SHARE:
                self.done_share += STAGE_SHARE[self.stage]
            self.stage = stage
            fb.setProgressText(f"mainspan: {stage}")
        frac = (done / total) if total else 0.0
        share = STAGE_SHARE.get(stage, 0)
        fb.setProgress(min(100.0, self.done_share + share * min(max(frac, 0.0), 1.0)))


def one_line(exc) -> str:
    """The message of a mainspan error on one line, naming parameters instead of options
    (only mainspan's own options: another tool's flag quoted in a message stays as it is)."""
    from ..settings import by_flag

    msg = " ".join(str(exc).split())
    ours = by_flag()

    def swap(m):
        flag = "--" + m.group(1)
        s = ours.get(flag)
        if s is None:
            return m.group(0)
        return "parameter " + s.option.lstrip("-").replace("-", "_").upper()
    return re.sub(r"(?:option )?--([a-z][a-z0-9-]*)", swap, msg)


class MainspanAlgorithm(QgsProcessingAlgorithm):
    """What every mainspan algorithm shares: names, help, icon, errors, cancel."""

    _name = ""
    _label = ""
    _group = "Layout"
    _help = ""

    def name(self):
        return self._name

    def displayName(self):          # noqa: N802 - QGIS API
        return self._label

    def group(self):
        return self._group

    def groupId(self):              # noqa: N802
        return self._group.lower().replace(" ", "_")

    def shortHelpString(self):      # noqa: N802
        return self._help + HELP_TAIL

    def icon(self):
        return icon()

    def createInstance(self):       # noqa: N802
        return type(self)()

    def processAlgorithm(self, parameters, context, feedback):   # noqa: N802
        from ..errors import DataFileError, InputError, MainspanError

        try:
            return self.work(parameters, context, feedback)
        except Cancelled:
            raise QgsProcessingException(f"mainspan: {self._name} cancelled; nothing was "
                                         "written") from None
        except QgsProcessingException:
            raise
        except (InputError, DataFileError) as exc:
            raise QgsProcessingException(f"mainspan: error: {one_line(exc)}") from None
        except MainspanError as exc:
            raise QgsProcessingException(f"mainspan: internal error: {one_line(exc)}") from None
        except Exception as exc:  # noqa: BLE001 - one line, as the command line does
            if os.environ.get("MAINSPAN_DEBUG"):
                raise
            raise QgsProcessingException(
                f"mainspan: internal error: {type(exc).__name__}: {one_line(exc)} (set "
                "MAINSPAN_DEBUG=1 for a traceback and please report it)") from None

    def work(self, parameters, context, feedback):   # pragma: no cover - overridden
        raise NotImplementedError


# ----------------------------------------------------------------------------- parameters
def add_schema_parameters(alg, specs):
    """Add one processing parameter per :class:`ParamSpec` to *alg*."""
    for sp in specs:
        p = _parameter(sp)
        if sp.advanced:
            p.setFlags(p.flags() | QgsProcessingParameterDefinition.FlagAdvanced)
        p.setHelp(sp.setting.help)
        alg.addParameter(p)


def _parameter(sp):
    s, name, label, opt = sp.setting, sp.name, sp.description, sp.optional
    w = sp.widget
    if w == "point_layer":
        return QgsProcessingParameterVectorLayer(name, label, [QgsProcessing.TypeVectorPoint],
                                                 optional=opt)
    if w == "field":
        kind = (QgsProcessingParameterField.Numeric if sp.numeric_field
                else QgsProcessingParameterField.Any)
        return QgsProcessingParameterField(name, label, None, sp.parent, kind, optional=opt)
    if w == "raster":
        return QgsProcessingParameterRasterLayer(name, label, optional=opt)
    if w == "rasters":
        return QgsProcessingParameterMultipleLayers(name, label, QgsProcessing.TypeRaster,
                                                    optional=opt)
    if w == "vector":
        return QgsProcessingParameterVectorLayer(name, label, [QgsProcessing.TypeVectorAnyGeometry],
                                                 optional=opt)
    if w == "vectors":
        return QgsProcessingParameterMultipleLayers(name, label,
                                                    QgsProcessing.TypeVectorAnyGeometry,
                                                    optional=opt)
    if w == "crs":
        return QgsProcessingParameterCrs(name, label, None, optional=opt)
    if w == "enum":
        return QgsProcessingParameterEnum(name, label, list(s.choices), False, s.default, opt,
                                          True)
    if w in ("number", "integer"):
        typ = (QgsProcessingParameterNumber.Integer if w == "integer"
               else QgsProcessingParameterNumber.Double)
        p = QgsProcessingParameterNumber(name, label, typ, s.default, opt)
        if s.lo is not None:
            p.setMinimum(float(s.lo))
        if s.hi is not None:
            p.setMaximum(float(s.hi))
        return p
    if w == "bool":
        return QgsProcessingParameterBoolean(name, label, bool(s.default), opt)
    if w == "file":
        return QgsProcessingParameterFile(name, label, QgsProcessingParameterFile.File,
                                          sp.extension, None, opt)
    if w == "destination":
        filt = OUTPUT_FILTERS.get(sp.extension, "")
        return QgsProcessingParameterFileDestination(name, label, filt, None, opt,
                                                     not opt)
    return QgsProcessingParameterString(name, label, default_text(s), False, opt)


def _layer_path(layer, what):
    """``(path, layer name)`` of a file-backed vector layer, or None."""
    if layer is None:
        return None
    parts = QgsProviderRegistry.instance().decodeUri(layer.providerType(), layer.source())
    path = parts.get("path") or ""
    if layer.providerType() in ("ogr", "gdal") and path and os.path.isfile(path) \
            and not parts.get("subset") and not layer.subsetString():
        return path, parts.get("layerName") or None
    return None


def _companion_layer(s):
    """``section.<key>_layer``, the setting naming a layer of *s*'s file, if declared."""
    from ..settings import all_settings
    name = f"{s.key}_layer"
    return next((f"{s.section}.{name}" for t in all_settings(s.section) if t.key == name), None)


def _project_layers_to_paths(text, context):
    """``NAME=PRICE, ...`` where NAME may be a vector layer of the project: its file path."""
    project = context.project()
    out = []
    for item in re.split(r"[,;\n]", text or ""):
        name, sep, price = item.strip().rpartition("=")
        if not sep:
            out.append(item.strip())
            continue
        found = project.mapLayersByName(name.strip()) if project is not None else []
        if found and found[0].type() == 0:          # QgsMapLayerType.VectorLayer
            got = _layer_path(found[0], name) or _export_layer(found[0], context,
                                                               re.sub(r"\W", "_", name))
            name = got[0] if got[1] is None else f"{got[0]}|{got[1]}"
        out.append(f"{name.strip()}={price.strip()}")
    return ", ".join(x for x in out if x)


def _only_layer(path, name):
    """Whether *name* (or None) is the one layer of the file at *path*."""
    import pyogrio
    try:
        names = [str(r[0]) for r in pyogrio.list_layers(path)]
    except Exception:  # noqa: BLE001 - unreadable here: copy the layer instead
        return False
    return len(names) == 1 and name in (None, names[0])


def _export_layer(layer, context, stem):
    """Write a layer that is not a plain file (memory, database, filtered) to a GeoPackage."""
    path = os.path.join(QgsProcessingUtils.tempFolder(), f"{stem}.gpkg")
    opts = QgsVectorFileWriter.SaveVectorOptions()
    opts.driverName = "GPKG"
    opts.layerName = stem
    res = QgsVectorFileWriter.writeAsVectorFormatV3(layer, path, context.transformContext(),
                                                    opts)
    if res[0] != QgsVectorFileWriter.NoError:
        from ..errors import DataFileError
        raise DataFileError(f"layer {layer.name()!r}: cannot copy it to {path!r} for mainspan "
                            f"({res[1]}); save the layer to a GeoPackage and use that")
    return path, stem


def _raster_path(layer):
    parts = QgsProviderRegistry.instance().decodeUri(layer.providerType(), layer.source())
    return parts.get("path") or layer.source()


def _raster_name(layer, taken):
    base = re.sub(r"\W", "_", layer.name()).strip("_") or "land_cost"
    if base[0].isdigit():
        base = "r_" + base
    name, i = base, 2
    while name in taken:
        name, i = f"{base}_{i}", i + 1
    return name


def _crs_text(crs):
    if crs is None or not crs.isValid():
        return None
    return crs.authid() or crs.toWkt(QgsCoordinateReferenceSystem.WKT2_2019)


def schema_values(alg, specs, parameters, context):
    """Plain values of the schema parameters (layers as paths) and the sites layer name."""
    values, layers = {}, {}
    for sp in specs:
        n = sp.name
        if n not in parameters or parameters[n] is None:
            continue
        w = sp.widget
        if w == "point_layer":
            lyr = alg.parameterAsVectorLayer(parameters, n, context)
            if lyr is None:
                continue
            got = _layer_path(lyr, n) or _export_layer(lyr, context, "sites")
            values[n], layers["sites.layer"] = got
        elif w == "vector":
            lyr = alg.parameterAsVectorLayer(parameters, n, context)
            if lyr is not None:
                s = sp.setting
                companion = _companion_layer(s)      # e.g. [network] existing_layer
                got = _layer_path(lyr, n)
                if got is not None and got[1] is not None and companion is not None:
                    layers[companion] = got[1]
                elif got is None or not _only_layer(*got):   # mainspan reads its one layer
                    got = _export_layer(lyr, context, s.key)
                values[n] = got[0]
        elif w == "vectors":       # each as PATH or PATH|layer (mainspan.ground.vectors)
            paths = []
            for lyr in alg.parameterAsLayerList(parameters, n, context):
                got = _layer_path(lyr, n) or _export_layer(lyr, context, sp.setting.key)
                paths.append(got[0] if got[1] is None else f"{got[0]}|{got[1]}")
            values[n] = paths or None
        elif w == "text" and "LAYER=" in (sp.setting.metavar or "").upper():
            values[n] = _project_layers_to_paths(alg.parameterAsString(parameters, n, context),
                                                 context)
        elif w == "field":
            f = alg.parameterAsFields(parameters, n, context)
            values[n] = f[0] if f else None
        elif w == "raster":
            lyr = alg.parameterAsRasterLayer(parameters, n, context)
            values[n] = _raster_path(lyr) if lyr is not None else None
        elif w == "rasters":
            table = {}
            for lyr in alg.parameterAsLayerList(parameters, n, context):
                table[_raster_name(lyr, table)] = _raster_path(lyr)
            values[n] = table or None
        elif w == "crs":
            values[n] = _crs_text(alg.parameterAsCrs(parameters, n, context))
        elif w == "enum":
            values[n] = alg.parameterAsEnumString(parameters, n, context) or None
        elif w == "bool":
            values[n] = alg.parameterAsBoolean(parameters, n, context)
        elif w in ("number", "integer"):
            v = parameters[n]
            values[n] = None if v in (None, "") else (
                alg.parameterAsInt(parameters, n, context) if w == "integer"
                else alg.parameterAsDouble(parameters, n, context))
        elif w == "destination":
            values[n] = alg.parameterAsFileOutput(parameters, n, context) or None
        elif w == "file":
            values[n] = alg.parameterAsFile(parameters, n, context) or None
        else:
            values[n] = alg.parameterAsString(parameters, n, context)
    return values, layers


def checked_settings(specs, values, layers):
    """:class:`mainspan.settings.PlanSettings` from parameter values, checked by the schema."""
    from ..settings import PlanSettings
    from .params import settings_from_values

    sections, origin = settings_from_values(specs, values, layers=layers)
    # a raster table of one layer needs no name unless an expression refers to it
    return PlanSettings.from_sections(
        sections, lambda sec, key: origin.get((sec, key), f"parameter [{sec}] {key}"))


# ----------------------------------------------------------------------------- plan
class PlanAlgorithm(MainspanAlgorithm):
    _name = "plan"
    _label = "Plan a layout of mains"
    _help = ("<p>Joins the sites of a point layer with the cheapest network of mains: candidate "
             "links between neighbouring sites, each priced along the ground (length, the "
             "land-cost rasters, climb and steep ground from the terrain), then the least-cost "
             "tree grown from the source or outlet, with a certificate that no candidate could "
             "replace one of its links more cheaply. With a system chosen, the mains are sized "
             "and checked as pressure or gravity mains.</p>"
             "<p>Writes a GeoPackage with the layers <i>links</i>, <i>nodes</i> and "
             "<i>run_info</i> (and the bill of quantities), loaded into the project styled and "
             "grouped; optionally the HTML review report, DXF, LandXML and CSV tables. "
             "Every parameter is a mainspan setting: the command line option of the same name "
             "(<code>mainspan plan --help</code>) says more. With several land-cost rasters, "
             "a cost expression names each by its layer name.</p>")

    def initAlgorithm(self, config=None):   # noqa: N802
        self.specs = plan_parameters()
        add_schema_parameters(self, self.specs)
        self.addOutput(QgsProcessingOutputString("SUMMARY", "Summary of the layout"))
        self.addOutput(QgsProcessingOutputNumber("TOTAL_COST", "Total cost of the links"))

    def work(self, parameters, context, feedback):
        from ..sites.read import read_sites
        from .. import plan_layout
        from .styles import load_outputs

        specs = getattr(self, "specs", None) or plan_parameters()
        values, layers = schema_values(self, specs, parameters, context)
        ps = checked_settings(specs, values, layers)
        out = ps.output
        written = _preflight(ps, out)
        say = _Progress(feedback)
        say("read", 0, 1)
        sites = read_sites(ps.sites_path, **ps.read_kwargs())
        with _engine(ps):
            lay = plan_layout(sites, ps, progress=say)
        say("write", 0, 1)          # the last point where cancel is honoured
        feedback.pushInfo(lay.summary())
        from ..writers.output_crs import output_layout
        files = output_layout(lay, out)     # the files in the output CRS; the report in metres
        paths = _write_all(lay, files, written, feedback)
        feedback.setProgress(100)
        if lay.system:
            feedback.pushWarning(_caution())
        load_outputs(context, paths.get("gpkg"), lay)
        res = {"SUMMARY": lay.summary(), "TOTAL_COST": float(lay.total("cost"))}
        for spec in specs:
            if spec.widget == "destination" and spec.setting.key in paths:
                res[spec.name] = paths[spec.setting.key]
        return res


def _engine(ps):
    """Where the plan's tasks run (the ``[execution]`` settings, as on the command line)."""
    import contextlib
    try:
        from ..execution import engine_from_settings, use
    except ImportError:         # a mainspan without the execution layer: all in this process
        return contextlib.nullcontext()
    stack = contextlib.ExitStack()
    eng = stack.enter_context(engine_from_settings(ps.sections.get("execution")))
    stack.enter_context(use(eng))
    return stack


def _preflight(ps, out):
    """The output checks of ``mainspan plan`` (same file as an input, folder, overwrite)."""
    from types import SimpleNamespace

    from ..pipeline.preflight import preflight_outputs
    from ..settings import all_settings
    from ..writers.gpkg import check_layers_free
    from .params import param_name

    items = []
    kinds = {"gpkg": "gpkg", "report": "report"}
    for s in all_settings("output"):
        if s.kind == "path" and out.get(s.key):
            items.append((out[s.key], "parameter " + param_name(s), s.key,
                          kinds.get(s.key, s.key)))
    a = SimpleNamespace(overwrite=bool(out.get("overwrite")))
    specs = preflight_outputs(a, None, [ps.sections], items)
    if any(o.kind == "quantities_csv" for o in specs) and \
            not ps.sections.get("design", {}).get("system"):
        from ..errors import InputError
        raise InputError("parameter QUANTITIES_CSV needs sized pipes: choose a SYSTEM "
                         "(pressure or gravity), or leave it empty")
    for o in specs:
        if o.kind == "gpkg":
            check_layers_free(o.path, ("links", "nodes", "run_info"), overwrite=o.overwrite)
    from ..writers.output_crs import check_output_settings
    check_output_settings(out, where="parameter OUTPUT_CRS")
    return specs


def _write_all(lay, files, specs, feedback):
    """Write every output (the report from *lay*, the others from *files*, the layout in the
    output CRS); on failure remove the files this run created."""
    created, paths = [], {}
    try:
        for o in specs:
            existed = os.path.exists(o.path)
            _write_one(lay if o.kind == "report" else files, o)
            if not existed:
                created.append(o.path)
            paths[o.kind if o.kind != "report" else "report"] = o.path
            feedback.pushInfo(f"written {o.path}")
    except BaseException:
        for p in created:
            for q in (p, os.path.splitext(p)[0] + ".prj") if p.lower().endswith(".dxf") else (p,):
                try:
                    os.unlink(q)
                except OSError:
                    pass
        raise
    return paths


def _write_one(lay, o):
    if o.kind == "gpkg":
        lay.write_gpkg(o.path, overwrite=o.overwrite)
    elif o.kind == "report":
        from ..report.html import write_report
        write_report(lay, o.path, overwrite=o.overwrite)
    elif o.kind == "dxf":
        from ..writers.dxf import write_dxf
        write_dxf(lay, o.path, overwrite=o.overwrite)
    elif o.kind == "landxml":
        from ..writers.landxml import write_landxml
        write_landxml(lay, o.path, overwrite=o.overwrite)
    elif o.kind == "links_csv":
        from ..writers.tables import write_links_csv
        write_links_csv(lay, o.path, overwrite=o.overwrite)
    elif o.kind == "quantities_csv":
        from ..writers.tables import write_quantities_csv
        write_quantities_csv(lay, o.path, overwrite=o.overwrite)


# ----------------------------------------------------------------------------- check
class CheckAlgorithm(MainspanAlgorithm):
    _name = "check"
    _label = "Check the inputs of a layout"
    _help = ("<p>Reads every input a plan would read -- the sites, the rasters, the pipe "
             "catalog and price table -- and reports counts, roles, extents, which sites each "
             "raster covers and a memory estimate, then plans in memory (nothing is written) so "
             "that it refuses exactly what the plan refuses. The problems found are listed in "
             "the log; PROBLEMS counts them.</p>")

    def initAlgorithm(self, config=None):   # noqa: N802
        self.specs = plan_parameters(outputs=False)
        add_schema_parameters(self, self.specs)
        self.addOutput(QgsProcessingOutputBoolean("OK", "Inputs are usable"))
        self.addOutput(QgsProcessingOutputNumber("PROBLEMS", "Number of problems"))
        self.addOutput(QgsProcessingOutputString("REPORT", "The check report"))

    def work(self, parameters, context, feedback):
        from ..pipeline.check import check_inputs

        specs = getattr(self, "specs", None) or plan_parameters(outputs=False)
        values, layers = schema_values(self, specs, parameters, context)
        ps = checked_settings(specs, values, layers)
        if feedback.isCanceled():
            raise Cancelled()
        report = check_inputs(ps.sections)
        for line in report.lines:
            feedback.pushInfo(line)
        for p in report.problems:
            feedback.reportError(p, False)
        return {"OK": report.ok, "PROBLEMS": len(report.problems), "REPORT": report.text()}
