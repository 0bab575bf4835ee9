"""Compare, export and report algorithms of the ``mainspan`` processing provider.

They work on files, as the commands of the same names do: ``compare`` on a
project TOML file with scenario sections, ``export`` and ``report`` on a
layout GeoPackage written by ``plan``.  The writers check their outputs first
(same file as an input, folder writable, replace only with OVERWRITE) and
write through a temporary file moved into place.
"""

from __future__ import annotations

import os

from qgis.core import (QgsProcessingOutputString, QgsProcessingParameterBoolean,
                       QgsProcessingParameterEnum, QgsProcessingParameterFile,
                       QgsProcessingParameterFileDestination, QgsProcessingParameterNumber,
                       QgsProcessingParameterString)

from .algorithms import Cancelled, MainspanAlgorithm, _Progress, _caution

__all__ = ["CompareAlgorithm", "ExportAlgorithm", "ReportAlgorithm", "EXPORT_FORMATS"]

#: Export formats: name shown -> (kind for the output checks, file filter).
EXPORT_FORMATS = {
    "DXF drawing": ("dxf", "DXF (*.dxf)"),
    "LandXML 1.2": ("landxml", "LandXML (*.xml)"),
    "links table (CSV)": ("links_csv", "CSV (*.csv)"),
    "bill of quantities (CSV)": ("quantities_csv", "CSV (*.csv)"),
    "long section (PNG, SVG or PDF)": ("figure", "Images (*.png *.svg *.pdf)"),
}


def _layout_param():
    return QgsProcessingParameterFile("LAYOUT", "Layout GeoPackage (written by plan)",
                                      QgsProcessingParameterFile.File, "gpkg")


def _overwrite_param():
    return QgsProcessingParameterBoolean("OVERWRITE", "Replace existing outputs", False, True)


def _check_out(label, path, kind, layout, overwrite):
    from ..safeio import OutputSpec, preflight
    return preflight([OutputSpec(label, path, kind)], [("layout", layout)],
                     cli_overwrite=overwrite)


# ----------------------------------------------------------------------------- compare
class CompareAlgorithm(MainspanAlgorithm):
    _name = "compare"
    _label = "Compare scenarios of a project"
    _help = ("<p>Plans the base settings and every <code>[scenarios.NAME]</code> section of a "
             "project file, sharing the work they have in common, and compares them: cost, "
             "length, pump head, the links they share and the regret of building one "
             "scenario's layout under another's prices. Optionally perturbs the land costs "
             "RUNS times to show how stable each layout is.</p>"
             "<p>Writes one GeoPackage with each scenario's layers and the comparison tables, "
             "and optionally the HTML report.</p>")

    def initAlgorithm(self, config=None):   # noqa: N802
        self.addParameter(QgsProcessingParameterFile(
            "PROJECT", "Project file (TOML) with scenario sections",
            QgsProcessingParameterFile.File, "toml"))
        self.addParameter(QgsProcessingParameterNumber(
            "RUNS", "Stability runs per scenario (0: none)", QgsProcessingParameterNumber.Integer,
            0, True, 0))
        self.addParameter(QgsProcessingParameterNumber(
            "PERTURB_PCT", "Land-cost perturbation of the stability runs [%]",
            QgsProcessingParameterNumber.Double, 10.0, True, 0.0))
        self.addParameter(QgsProcessingParameterNumber(
            "SEED", "Seed of the perturbations", QgsProcessingParameterNumber.Integer, 0, True, 0))
        self.addParameter(QgsProcessingParameterFileDestination(
            "OUTPUT", "Scenario GeoPackage", "GeoPackage (*.gpkg)"))
        self.addParameter(QgsProcessingParameterFileDestination(
            "REPORT", "HTML report of the comparison", "HTML (*.html)", None, True, False))
        self.addParameter(_overwrite_param())
        self.addOutput(QgsProcessingOutputString("TABLE", "Comparison table"))

    def work(self, parameters, context, feedback):
        from ..pipeline.preflight import inputs_of
        from ..safeio import OutputSpec, preflight
        from ..scenarios import report_sections, run_scenarios, write_scenarios
        from ..scenarios.output import layer_names
        from ..settings.project import load_project
        from ..writers.gpkg import check_layers_free

        proj = load_project(self.parameterAsFile(parameters, "PROJECT", context))
        gpkg = self.parameterAsFileOutput(parameters, "OUTPUT", context) or None
        rep = self.parameterAsFileOutput(parameters, "REPORT", context) or None
        overwrite = self.parameterAsBoolean(parameters, "OVERWRITE", context)
        specs = [OutputSpec("parameter OUTPUT", gpkg, "gpkg", layered=True)]
        if rep:
            specs.append(OutputSpec("parameter REPORT", rep, "report"))
        inputs = []
        for name in ["base", *proj.scenarios]:
            inputs += inputs_of(proj.settings_for(name), proj)
        preflight(specs, inputs, cli_overwrite=overwrite)
        check_layers_free(gpkg, layer_names(["base", *proj.scenarios]), overwrite=overwrite)
        sset = run_scenarios(proj, progress=_Progress(feedback),
                             stability_runs=self.parameterAsInt(parameters, "RUNS", context),
                             perturb_pct=self.parameterAsDouble(parameters, "PERTURB_PCT",
                                                                context),
                             seed=self.parameterAsInt(parameters, "SEED", context))
        if feedback.isCanceled():
            raise Cancelled()
        table = sset.table()
        feedback.pushInfo(table)
        write_scenarios(sset, gpkg, overwrite=overwrite)
        res = {"OUTPUT": gpkg, "TABLE": table}
        if rep:
            from ..report.html import write_report
            write_report(sset["base"], rep, overwrite=overwrite,
                         title=f"Scenario comparison: {os.path.basename(proj.path)}",
                         extra_sections=report_sections(sset))
            res["REPORT"] = rep
        if any(sset[n].system for n in sset.names):
            feedback.pushWarning(_caution())
        return res


# ----------------------------------------------------------------------------- export
class ExportAlgorithm(MainspanAlgorithm):
    _name = "export"
    _label = "Export a layout (DXF, LandXML, CSV, long section)"
    _group = "Hand-off"
    _help = ("<p>Writes a planned layout for the next tool: a DXF drawing in metres (layers by "
             "role or by diameter, with a .prj beside it), a LandXML 1.2 pipe network, the "
             "links table or the bill of quantities as CSV, or the long section from the root "
             "to a node (default: the longest path) as PNG, SVG or PDF.</p>")

    def initAlgorithm(self, config=None):   # noqa: N802
        self.addParameter(_layout_param())
        self.addParameter(QgsProcessingParameterEnum(
            "FORMAT", "Format", list(EXPORT_FORMATS), False, "DXF drawing", False, True))
        self.addParameter(QgsProcessingParameterEnum(
            "DXF_LAYERS", "DXF layers by", ["role", "diameter"], False, "role", True, True))
        self.addParameter(QgsProcessingParameterBoolean("DXF_FLAT", "DXF: 2D polylines",
                                                        False, True))
        self.addParameter(QgsProcessingParameterString(
            "NODE", "Long section: to this node id (default: the longest path)", None, False,
            True))
        self.addParameter(QgsProcessingParameterFileDestination(
            "OUTPUT", "Output file", ";;".join(f for _, f in EXPORT_FORMATS.values())))
        self.addParameter(_overwrite_param())

    def work(self, parameters, context, feedback):
        from ..errors import InputError
        from ..pipeline.layout import read_layout

        layout = self.parameterAsFile(parameters, "LAYOUT", context)
        fmt = self.parameterAsEnumString(parameters, "FORMAT", context)
        kind = EXPORT_FORMATS[fmt][0]
        to = self.parameterAsFileOutput(parameters, "OUTPUT", context)
        overwrite = self.parameterAsBoolean(parameters, "OVERWRITE", context)
        _check_out("parameter OUTPUT", to, kind, layout, overwrite)
        lay = read_layout(layout)
        if feedback.isCanceled():
            raise Cancelled()
        if kind == "dxf":
            from ..writers.dxf import write_dxf
            by = self.parameterAsEnumString(parameters, "DXF_LAYERS", context) or "role"
            flat = self.parameterAsBoolean(parameters, "DXF_FLAT", context)
            write_dxf(lay, to, by=by, polylines="2d" if flat else "3d", overwrite=overwrite)
        elif kind == "landxml":
            from ..writers.landxml import write_landxml
            write_landxml(lay, to, overwrite=overwrite)
        elif kind == "links_csv":
            from ..writers.tables import write_links_csv
            write_links_csv(lay, to, overwrite=overwrite)
        elif kind == "quantities_csv":
            from ..writers.tables import write_quantities_csv
            write_quantities_csv(lay, to, overwrite=overwrite)
        else:
            from ..report.plots import save_long_section
            import numpy as np
            ground = lay.nodes.get("elevation_m")
            if ground is None or not np.isfinite(np.asarray(ground, float)).any():
                raise InputError(f"layout {layout!r} has no ground levels, so a long section "
                                 "would be empty; plan again with a TERRAIN raster")
            node = self.parameterAsString(parameters, "NODE", context) or None
            save_long_section(lay, to, to_node=node, overwrite=overwrite)
        feedback.pushInfo(f"written {to}")
        return {"OUTPUT": to}


# ----------------------------------------------------------------------------- report
class ReportAlgorithm(MainspanAlgorithm):
    _name = "report"
    _label = "Write the review report of a layout"
    _group = "Hand-off"
    _help = ("<p>Writes the self-contained HTML review report of a planned layout: the map, "
             "the optimality certificate, the design checks, the bill of quantities, the long "
             "sections and the settings of the run.</p>")

    def initAlgorithm(self, config=None):   # noqa: N802
        self.addParameter(_layout_param())
        self.addParameter(QgsProcessingParameterFileDestination("OUTPUT", "HTML report",
                                                                "HTML (*.html)"))
        self.addParameter(_overwrite_param())

    def work(self, parameters, context, feedback):
        from ..pipeline.layout import read_layout
        from ..report.html import write_report

        layout = self.parameterAsFile(parameters, "LAYOUT", context)
        out = self.parameterAsFileOutput(parameters, "OUTPUT", context)
        overwrite = self.parameterAsBoolean(parameters, "OVERWRITE", context)
        _check_out("parameter OUTPUT", out, "report", layout, overwrite)
        lay = read_layout(layout)
        if feedback.isCanceled():
            raise Cancelled()
        write_report(lay, out, overwrite=overwrite)
        feedback.pushInfo(f"written {out}")
        return {"OUTPUT": out}
