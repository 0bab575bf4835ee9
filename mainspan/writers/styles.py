"""Layer styles written into the GeoPackage, so the layers open styled in a desktop GIS.

A GeoPackage may carry a ``layer_styles`` table (the table desktop GIS such as
QGIS read and write: one row per style, the style as QML text, ``useAsDefault``
marking the one applied on opening).  :func:`write_styles` writes one default
style per layer that mainspan wrote, named ``mainspan``, with our own symbology:

* ``links``: one colour and width per pipe size (the report's size colours), or
  one colour for an unsized plan; links that fail a check get a dashed red
  overlay; labelled ``L<id> DN<size>`` along the line;
* ``nodes``: one marker per role (source/outlet a star, demand a circle,
  junction a small square); failed checks ringed red; labelled with the site id;
* ``fittings`` and ``access_points``: one marker per kind, labelled with the kind;

Rows of other styles (a user's own) are left alone; re-writing replaces only
rows named ``mainspan``.  The bytes are reproducible (fixed ``update_time``).
"""

from __future__ import annotations

import sqlite3
from html import escape

import numpy as np

__all__ = ["write_styles", "layer_qml", "only_our_styles", "SIZE_COLOURS", "STYLE_NAME"]

STYLE_NAME = "mainspan"
#: Our colours for pipe-size classes, smallest first (the report's map uses the same).
SIZE_COLOURS = ("#6fa8dc", "#2f7f5f", "#c98b12", "#8e3b8e", "#b8352a", "#1b3f8b", "#5a8f1f",
                "#d0632c", "#3d7f99", "#7a4b2a", "#a02c5b", "#23524a", "#544e9c", "#8a8a24")
_ROLE_MARKERS = {"source": ("star", "#ffd21f", 5.0), "outlet": ("star", "#ffd21f", 5.0),
                 "demand": ("circle", "#ffffff", 2.4), "junction": ("square", "#9aa3ab", 1.6)}
_KIND_MARKERS = {"air_valve": ("triangle", "#9ad0f5"), "washout": ("triangle", "#a36b2b"),
                 "isolation_valve": ("diamond", "#303030"), "thrust_block": ("square", "#bdbdbd"),
                 "prv": ("hexagon", "#f5d90a"), "manhole": ("circle", "#ffffff"),
                 "spacing": ("circle", "#ffffff"), "grade break": ("circle", "#d9d9d9"),
                 "drop manhole": ("triangle", "#ffe08a"), "lift station": ("pentagon", "#ff9f40")}
_FIXED_TIME = "1970-01-01T00:00:00.000Z"
_CREATE = ("CREATE TABLE IF NOT EXISTS layer_styles (id INTEGER PRIMARY KEY AUTOINCREMENT, "
           "f_table_catalog TEXT(256), f_table_schema TEXT(256), f_table_name TEXT(256), "
           "f_geometry_column TEXT(256), styleName TEXT(30), styleQML TEXT, styleSLD TEXT, "
           "useAsDefault BOOLEAN, description TEXT, owner TEXT(30), ui TEXT(30), "
           "update_time DATETIME DEFAULT CURRENT_TIMESTAMP)")


def _rgba(hex_colour, alpha=255):
    h = hex_colour.lstrip("#")
    return f"{int(h[0:2], 16)},{int(h[2:4], 16)},{int(h[4:6], 16)},{alpha}"


def _line(name, colour, width_mm, dash=False):
    props = {"line_color": _rgba(colour), "line_width": f"{width_mm:g}", "line_width_unit": "MM",
             "capstyle": "round", "joinstyle": "round",
             "line_style": "dash" if dash else "solid"}
    return _symbol(name, "line", "SimpleLine", props)


def _marker(name, shape, fill, size_mm, outline="#202020", outline_mm=0.3):
    props = {"name": shape, "color": _rgba(fill), "outline_color": _rgba(outline),
             "outline_width": f"{outline_mm:g}", "outline_width_unit": "MM",
             "size": f"{size_mm:g}", "size_unit": "MM"}
    return _symbol(name, "marker", "SimpleMarker", props)


def _symbol(name, kind, cls, props):
    p = "".join(f'<prop k="{k}" v="{escape(v)}"/>' for k, v in props.items())
    return (f'<symbol type="{kind}" name="{name}" alpha="1" clip_to_extent="1" force_rhr="0">'
            f'<layer class="{cls}" enabled="1" pass="0" locked="0">{p}</layer></symbol>')


def _quote(field):
    return '"' + field.replace('"', '""') + '"'


def _rules_qml(rules, geometry_type, label_expr, placement):
    """QML of a rule-based renderer (every matching rule draws) with simple labels."""
    body = "".join(f'<rule key="r{i}" filter="{escape(flt)}" label="{escape(lbl)}" '
                   f'symbol="{i}"/>' for i, (flt, lbl, _) in enumerate(rules))
    symbols = "".join(sym(str(i)) for i, (_, _, sym) in enumerate(rules))
    label = ""
    if label_expr:
        label = (
            '<labeling type="simple"><settings calloutType="simple">'
            f'<text-style fieldName="{escape(label_expr)}" isExpression="1" fontSize="7.5" '
            'fontSizeUnit="Point" textColor="26,26,90,255" fontFamily="DejaVu Sans" '
            'fontWeight="50" textOpacity="1" multilineHeight="1" namedStyle="Regular">'
            '<text-buffer bufferDraw="1" bufferSize="0.7" bufferSizeUnits="MM" '
            'bufferColor="255,255,255,255" bufferOpacity="1"/></text-style>'
            '<text-format wrapChar="" multilineAlign="0" plussign="0"/>'
            f'<placement placement="{placement}" dist="0.6" distUnits="MM" '
            'placementFlags="10" priority="5" overrunDistance="0" repeatDistance="0"/>'
            '<rendering obstacle="1" scaleVisibility="0" displayAll="0" limitNumLabels="0" '
            'maxNumLabels="2000" minFeatureSize="0" drawLabels="1" upsidedownLabels="0"/>'
            "</settings></labeling>")
    return ("<!DOCTYPE qgis PUBLIC 'http://mrcc.com/qgis.dtd' 'SYSTEM'>\n"
            f'<qgis version="3.22.0" styleCategories="Symbology|Labeling" '
            f'labelsEnabled="{1 if label_expr else 0}">'
            '<renderer-v2 type="RuleRenderer" symbollevels="0" enableorderby="0" '
            f'forceraster="0"><rules key="root">{body}</rules><symbols>{symbols}</symbols>'
            f"</renderer-v2>{label}<layerGeometryType>{geometry_type}</layerGeometryType>"
            "</qgis>\n")


def _values(df, col):
    return sorted({str(v) for v in np.asarray(df[col]).astype(str)}) if col in df else []


def layer_qml(name, df):
    """Our QML style for one mainspan layer, or None for a layer we do not style."""
    cols = set(getattr(df, "columns", []))
    base = name.rstrip("_0123456789") if name[-1:].isdigit() else name
    if base.startswith("links"):
        size = next((c for c in ("nominal_mm", "diameter_mm") if c in cols), None)
        rules = []
        if size:
            vals = sorted({float(v) for v in np.asarray(df[size], float) if np.isfinite(v)})
            pre = "DN" if size == "nominal_mm" else "ID "
            for k, v in enumerate(vals):
                w = 0.35 + 1.25 * k / max(len(vals) - 1, 1)
                rules.append((f"{_quote(size)} = {v:g}", f"{pre}{v:g} mm",
                              lambda n, c=SIZE_COLOURS[k % len(SIZE_COLOURS)], w=w:
                              _line(n, c, round(w, 2))))
            label = (f"'L' || {_quote('link_id')} || ' {pre.strip()}' || "
                     f"to_string(round({_quote(size)}))")
        else:
            rules.append(("TRUE", "planned main", lambda n: _line(n, "#1b3f8b", 0.5)))
            label = f"'L' || {_quote('link_id')}" if "link_id" in cols else ""
        if "checks" in cols:
            rules.append((f"{_quote('checks')} <> 'ok' AND {_quote('checks')} <> ''",
                          "failed check", lambda n: _line(n, "#d11f1f", 0.6, dash=True)))
        return _rules_qml(rules, 1, label if "link_id" in cols else "", 2)
    if base.startswith("nodes"):
        rules = []
        roles = _values(df, "role") or ["site"]
        for r in roles:
            shape, fill, size = _ROLE_MARKERS.get(r, ("circle", "#ffffff", 2.0))
            flt = f"{_quote('role')} = '{r}'" if "role" in cols else "TRUE"
            rules.append((flt, r, lambda n, s=shape, f=fill, z=size: _marker(n, s, f, z)))
        if "checks" in cols:
            rules.append((f"{_quote('checks')} <> 'ok' AND {_quote('checks')} <> ''",
                          "failed check",
                          lambda n: _marker(n, "circle", "#ffffff", 4.2, "#d11f1f", 0.6)
                          .replace(_rgba("#ffffff"), "255,255,255,0")))
        return _rules_qml(rules, 0, _quote("node_id") if "node_id" in cols else "", 0)
    for tname, kcol in (("fittings", "type"), ("access_points", "kind")):
        if base.startswith(tname) and kcol in cols and "geometry" in cols:
            rules = []
            for v in _values(df, kcol):
                shape, fill = _KIND_MARKERS.get(v, ("circle", "#eeeeee"))
                rules.append((f"{_quote(kcol)} = '{v}'", v.replace("_", " "),
                              lambda n, s=shape, f=fill: _marker(n, s, f, 2.2)))
            return _rules_qml(rules, 0, f"replace({_quote(kcol)}, '_', ' ')", 0)
    return None


def only_our_styles(path) -> bool:
    """Whether every row of the GeoPackage's ``layer_styles`` is one mainspan wrote (so the
    table may go when mainspan's layers are replaced, and re-runs give the same bytes)."""
    try:
        con = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    except sqlite3.Error:
        return False
    try:
        row = con.execute("SELECT count(*) FROM layer_styles WHERE styleName <> ?",
                          (STYLE_NAME,)).fetchone()
        return bool(row) and row[0] == 0
    except sqlite3.Error:
        return False
    finally:
        con.close()


def write_styles(path, layers: dict):
    """Write our default style of each styled layer into the GeoPackage's ``layer_styles``.

    Parameters
    ----------
    path : str
        An existing GeoPackage (written by :func:`mainspan.writers.gpkg.write_layers`).
    layers : dict of str -> DataFrame
        The layers just written (their columns choose the rules).

    Returns
    -------
    list of str
        The layers styled.
    """
    styled = [(n, q) for n, df in layers.items() if (q := layer_qml(n, df)) is not None]
    if not styled:
        return []
    con = sqlite3.connect(path)
    try:
        con.execute(_CREATE)
        con.execute("INSERT OR IGNORE INTO gpkg_contents (table_name, data_type, identifier, "
                    "description, last_change) VALUES ('layer_styles', 'attributes', "
                    "'layer_styles', '', ?)", (_FIXED_TIME,))
        for name, qml in styled:
            geom = con.execute("SELECT column_name FROM gpkg_geometry_columns WHERE "
                               "table_name=?", (name,)).fetchone()
            con.execute("DELETE FROM layer_styles WHERE f_table_name=? AND styleName=?",
                        (name, STYLE_NAME))
            con.execute("UPDATE layer_styles SET useAsDefault=0 WHERE f_table_name=?", (name,))
            con.execute("INSERT INTO layer_styles (f_table_catalog, f_table_schema, "
                        "f_table_name, f_geometry_column, styleName, styleQML, styleSLD, "
                        "useAsDefault, description, owner, ui, update_time) VALUES "
                        "('', '', ?, ?, ?, ?, '', 1, ?, '', NULL, ?)",
                        (name, geom[0] if geom else "", STYLE_NAME, qml,
                         f"mainspan style of {name}", _FIXED_TIME))
        con.commit()
    finally:
        con.close()
    return [n for n, _ in styled]
