"""Screenshots of mainspan in QGIS, taken headless: ``python3 tools/qgis_screenshot.py OUTDIR``.

Run with QGIS's Python (``/usr/bin/python3`` with Debian's ``python3-qgis``) and mainspan
importable (e.g. ``PYTHONPATH=$PWD:<venv site-packages>``).  Copies the demo inputs to a
temporary folder, loads them into a project, and writes

* ``qgis_plan_dialog.png`` -- the *Plan a layout of mains* dialog filled in for the demo;
* ``qgis_plan_map.png`` -- the planned layout as it loads into the project (styled, grouped),
  drawn over the demo terrain.
"""

import os
import sys
import tempfile

os.environ["QT_QPA_PLATFORM"] = "offscreen"

from qgis.core import (QgsApplication, QgsMapRendererParallelJob, QgsMapSettings,  # noqa: E402
                       QgsProcessingContext, QgsProcessingFeedback, QgsProject, QgsRasterLayer,
                       QgsVectorLayer)
from qgis.PyQt.QtCore import QSize  # noqa: E402
from qgis.PyQt.QtGui import QColor  # noqa: E402

APP = QgsApplication([], True)
APP.initQgis()
sys.path.append(os.path.join(QgsApplication.pkgDataPath(), "python", "plugins"))


def main(outdir):
    from processing.core.Processing import Processing
    Processing.initialize()
    import processing
    from processing.gui.AlgorithmDialog import AlgorithmDialog
    from processing.gui.Postprocessing import handleAlgorithmResults

    from mainspan.demo import demo_files
    from mainspan.qgis.provider import MainspanProvider

    os.makedirs(outdir, exist_ok=True)
    reg = QgsApplication.processingRegistry()
    reg.addProvider(MainspanProvider())
    tmp = tempfile.mkdtemp(prefix="mainspan-shot-")
    files = demo_files(tmp)
    project = QgsProject.instance()
    sites = QgsVectorLayer(files["kestrel_outlets.gpkg"] + "|layername=outlets",
                           "kestrel_outlets", "ogr")
    terrain = QgsRasterLayer(files["terrain.tif"], "terrain")
    land = QgsRasterLayer(files["landcost.tif"], "landcost")
    for lyr in (sites, terrain, land):
        project.addMapLayer(lyr)
    params = {"SITES": sites.id(), "ID_FIELD": "id", "ROLE_FIELD": "role",
              "DEMAND_FIELD": "q_lps", "TERRAIN": terrain.id(), "LAND_COST": [land.id()],
              "SYSTEM": "pressure", "SIZING": "rule",
              "OUTPUT": os.path.join(tmp, "kestrel_layout.gpkg")}
    alg = reg.algorithmById("mainspan:plan")
    dlg = AlgorithmDialog(alg.create())
    dlg.setParameters(params)
    dlg.resize(980, 720)
    dlg.show()
    APP.processEvents()
    dlg.grab().save(os.path.join(outdir, "qgis_plan_dialog.png"))
    dlg.close()

    ctx = QgsProcessingContext()
    ctx.setProject(project)
    processing.run("mainspan:plan", params, context=ctx, feedback=QgsProcessingFeedback())
    handleAlgorithmResults(alg, ctx, QgsProcessingFeedback())
    group = project.layerTreeRoot().findGroup("mainspan layout: kestrel_layout")
    layers = [node.layer() for node in group.findLayers()] + [terrain]
    ms = QgsMapSettings()
    ms.setLayers(layers)
    ms.setDestinationCrs(layers[0].crs())
    ext = layers[0].extent()
    ext.scale(1.08)
    ms.setExtent(ext)
    ms.setOutputSize(QSize(900, 640))
    ms.setBackgroundColor(QColor("#ffffff"))
    job = QgsMapRendererParallelJob(ms)
    job.start()
    job.waitForFinished()
    job.renderedImage().save(os.path.join(outdir, "qgis_plan_map.png"))
    print("written", outdir)


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else "docs")
    os._exit(0)
