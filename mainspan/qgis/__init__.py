"""mainspan in QGIS: a processing provider and the plugin that installs it.

* :mod:`mainspan.qgis.params` -- the processing parameters of plan and check,
  read from the settings schema (no QGIS needed);
* :mod:`mainspan.qgis.provider`, :mod:`~mainspan.qgis.algorithms`,
  :mod:`~mainspan.qgis.handoff`, :mod:`~mainspan.qgis.styles` -- the provider
  ``mainspan`` and its algorithms plan, check, compare, export and report;
  they import QGIS's own Python modules (``qgis.core``);
* ``plugin/`` -- the plugin folder (``metadata.txt``, ``icon.svg``,
  ``classFactory``), shipped inside the package;
* :mod:`mainspan.qgis.package` -- ``python -m mainspan.qgis.package OUTDIR``
  builds the zip that QGIS's plugin manager installs.

Results are a preliminary design aid, to be checked by a licensed engineer
against local codes; locate existing utilities before digging.
"""

#: Modules that import QGIS (``qgis.core``); the others import without it.
QGIS_MODULES = ("mainspan.qgis.algorithms", "mainspan.qgis.handoff", "mainspan.qgis.provider",
                "mainspan.qgis.styles")

#: Folder name of the plugin inside the zip (and so in QGIS's plugins folder).
PLUGIN_NAME = "mainspan_toolbox"

#: Share of the progress bar (per cent) each stage of a plan fills, in order; stages not
#: named here (reading the sites, anything a later mainspan adds) move the bar not at all.
STAGE_SHARE = {"candidates": 5, "costs": 45, "tree": 30, "design": 15, "write": 5}
