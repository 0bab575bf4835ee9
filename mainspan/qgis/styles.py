"""Load a planned layout into the QGIS project, styled and grouped.

The layers of the output GeoPackage (``links``, ``nodes``) are queued with
``QgsProcessingContext.addLayerToLoadOnCompletion``; when processing loads
them, :class:`LayoutLayers` moves each into one group named after the
GeoPackage and styles it.  The default style the GeoPackage carries (a row of
its ``layer_styles`` table: the style mainspan's writer saves,
:mod:`mainspan.writers.styles`, or one a user saved as default) is loaded;
a GeoPackage without one (written by an older mainspan) gets this fallback:

* links: one line colour per system (pressure mains teal, gravity mains
  brown, an unsized tree slate grey); with sized pipes the line width grows
  with the nominal diameter (0.4 mm up to 150 mm, then one step per class);
* nodes: one marker per role (source and outlet a large square, demand
  a circle, junction a small dot), coloured by role.
"""

from __future__ import annotations

import os
import sqlite3

from qgis.core import (QgsCategorizedSymbolRenderer, QgsLineSymbol, QgsMarkerSymbol,
                       QgsProcessingContext, QgsProcessingLayerPostProcessorInterface,
                       QgsProcessingUtils, QgsProject, QgsRendererCategory, QgsRendererRange,
                       QgsGraduatedSymbolRenderer, QgsSingleSymbolRenderer)

__all__ = ["load_outputs", "LayoutLayers", "style_layer", "GROUP_PREFIX", "ROLE_COLOURS"]

#: Group of the layout's layers in the project's layer tree: this prefix + the file's stem.
GROUP_PREFIX = "mainspan layout: "

SYSTEM_COLOURS = {"pressure": "#137c7a", "gravity": "#8a5a2b", "": "#56606b"}
ROLE_COLOURS = {"source": "#1b4f9c", "outlet": "#1b4f9c", "demand": "#2f9e44",
                "junction": "#868e96"}
_ROLE_SHAPES = {"source": ("square", 4.2), "outlet": ("square", 4.2), "demand": ("circle", 2.6),
                "junction": ("circle", 1.4)}
# nominal diameter classes (mm) -> line width (mm)
_WIDTHS = ((0, 150, 0.4), (150, 250, 0.7), (250, 400, 1.0), (400, 700, 1.4), (700, 1e9, 1.9))

_KEEP = []          # processing keeps only a pointer to a post-processor: keep them alive


def _has_own_style(path, table):
    """Whether the GeoPackage holds a default style for *table* (``layer_styles``)."""
    try:
        con = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    except sqlite3.Error:
        return False
    try:
        # mainspan's writer saves its style there (writers/styles.py); a user may save another
        row = con.execute("SELECT count(*) FROM layer_styles WHERE f_table_name = ? AND "
                          "useAsDefault", (table,)).fetchone()
        return bool(row and row[0])
    except sqlite3.Error:
        return False
    finally:
        con.close()


def style_layer(layer, table, system=""):
    """Apply our style to a ``links`` or ``nodes`` layer of a layout."""
    names = set(layer.fields().names())
    if table.startswith("links"):
        colour = SYSTEM_COLOURS.get(system or "", SYSTEM_COLOURS[""])
        field = next((f for f in ("nominal_mm", "diameter_mm") if f in names), None)
        if field:
            ranges = []
            for lo, hi, width in _WIDTHS:
                sym = QgsLineSymbol.createSimple({"line_color": colour,
                                                  "line_width": str(width),
                                                  "capstyle": "round"})
                label = f"{lo:g}-{hi:g} mm" if hi < 1e8 else f"{lo:g} mm and more"
                ranges.append(QgsRendererRange(lo, hi, sym, label))
            layer.setRenderer(QgsGraduatedSymbolRenderer(field, ranges))
        else:
            sym = QgsLineSymbol.createSimple({"line_color": colour, "line_width": "0.6",
                                              "capstyle": "round"})
            layer.setRenderer(QgsSingleSymbolRenderer(sym))
    elif table.startswith("nodes") and "role" in names:
        cats = []
        for role, colour in ROLE_COLOURS.items():
            shape, size = _ROLE_SHAPES[role]
            sym = QgsMarkerSymbol.createSimple({"name": shape, "color": colour,
                                                "size": str(size), "outline_color": "#ffffff",
                                                "outline_width": "0.3"})
            cats.append(QgsRendererCategory(role, sym, role))
        layer.setRenderer(QgsCategorizedSymbolRenderer("role", cats))
    layer.triggerRepaint()


class LayoutLayers(QgsProcessingLayerPostProcessorInterface):
    """Moves a loaded layer of the layout into its group and styles it."""

    def __init__(self, path, table, system, order):
        super().__init__()
        self.path, self.table, self.system, self.order = path, table, system or "", order

    def postProcessLayer(self, layer, context, feedback):   # noqa: N802 - QGIS API
        project = context.project() or QgsProject.instance()
        # processing loads result layers without their default style: load the one the
        # GeoPackage carries (mainspan's, or one a user saved as default), else ours
        loaded = False
        if _has_own_style(self.path, self.table):
            _msg, loaded = layer.loadDefaultStyle()
        if not loaded:
            style_layer(layer, self.table, self.system)
        root = project.layerTreeRoot()
        name = GROUP_PREFIX + os.path.splitext(os.path.basename(self.path))[0]
        group = root.findGroup(name) or root.insertGroup(0, name)
        node = root.findLayer(layer.id())
        if node is not None and node.parent() is not group:
            clone = node.clone()
            group.insertChildNode(min(self.order, len(group.children())), clone)
            node.parent().removeChildNode(node)


def load_outputs(context, gpkg, lay):
    """Queue the layout's ``nodes`` and ``links`` for loading when the run completes."""
    if not gpkg:
        return []
    project = context.project() or QgsProject.instance()
    queued = []
    for order, table in enumerate(("nodes", "links")):
        uri = f"{gpkg}|layername={table}"
        details = QgsProcessingContext.LayerDetails(table, project, table)
        if hasattr(details, "layerTypeHint"):
            details.layerTypeHint = QgsProcessingUtils.LayerHint.Vector
        post = LayoutLayers(gpkg, table, getattr(lay, "system", "") or "", order)
        _KEEP.append(post)
        details.setPostProcessor(post)
        context.addLayerToLoadOnCompletion(uri, details)
        queued.append(uri)
    return queued
