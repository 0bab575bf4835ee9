"""Processing parameters of the plan and check algorithms, read from the settings schema.

Nothing here imports QGIS: :func:`plan_parameters` walks
:func:`mainspan.settings.all_settings` and gives one :class:`ParamSpec` per
setting that has a command-line option, saying which kind of processing
parameter shows it (a point layer, a field of that layer, a raster, a vector
layer, a CRS, a choice, a number, a file, an output file ...).  The QGIS side
(:mod:`mainspan.qgis.algorithms`) turns each spec into a ``QgsProcessingParameter*``
and :func:`settings_from_values` turns the values a run receives back into
the settings sections that :class:`mainspan.settings.PlanSettings` checks,
so that a setting added to the schema appears in the toolbox with no edit
here, and a value is checked by the same code as on the command line.

The mapping from a setting to a parameter is by its kind, section, key and
metavar (see :func:`spec_of`):

==========================================  =====================================
setting                                     parameter
==========================================  =====================================
``[sites] path``                            point layer (``SITES``)
``[sites] *_field`` (not x/y)               field of the sites layer
a path in ``[rasters]``, ``*_raster``,      raster layer
metavar ``DEM``/``RASTER``
the repeatable ``land_cost`` table          several raster layers, named by layer
a path whose key or metavar names lines,    vector layer
polygons, barriers, crossings or mains
metavar ``CRS``                             CRS
choices                                     enum (the choice texts are the values)
number / integer / bool                     number / integer / checkbox
a path in ``[output]``                      file destination
any other path                              file
list, table, value                          text, as on the command line
==========================================  =====================================

A value equal to the setting's default is left out of the settings, as an
option left off the command line is: the same layout, byte for byte.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

__all__ = ["ParamSpec", "plan_parameters", "spec_of", "param_name", "settings_from_values",
           "SKIPPED", "BASIC", "OUTPUT_FILTERS", "default_text"]

#: Settings a desktop-GIS front end does not show, with the reason.
SKIPPED = {
    "sites.layer": "the layer picker chooses the layer",
    "sites.x_field": "a map layer carries its geometry",
    "sites.y_field": "a map layer carries its geometry",
}

#: Settings shown in the dialog's main part; every other one is an advanced parameter.
BASIC = {"sites.path", "sites.id_field", "sites.role_field", "sites.demand_field",
         "rasters.terrain", "rasters.land_cost", "rasters.cost_expression", "tree.layout",
         "tree.roots", "design.system", "output.gpkg", "output.report", "output.overwrite"}

# per-site fields that hold text (every other sites *_field holds a number)
_TEXT_FIELDS = {"id_field", "role_field"}
_VECTOR_WORDS = ("line", "polygon", "vector", "barrier", "crossing", "existing", "corridor",
                 "mains", "layer")
OUTPUT_FILTERS = {"gpkg": "GeoPackage (*.gpkg)", "html": "HTML (*.html)", "dxf": "DXF (*.dxf)",
                   "xml": "LandXML (*.xml)", "csv": "CSV (*.csv)"}


def _vector_keys(section) -> set:
    """Keys of the vector-layer path settings of *section*."""
    from ..settings import all_settings
    return {s.key for s in all_settings(section) if s.kind == "path" and s.section != "output"
            and s.section != "sites" and _has_word(s, _VECTOR_WORDS)
            and not s.key.endswith("_raster")}


def layer_parent(s):
    """For ``<key>_layer`` / ``<key>_..._field`` text settings beside a vector-layer setting
    ``<key>`` of the same section: that setting's key, else None."""
    if s.kind != "text" or s.section == "sites":
        return None
    for k in sorted(_vector_keys(s.section), key=len, reverse=True):
        if s.key == f"{k}_layer" or (s.key.startswith(f"{k}_") and s.key.endswith("_field")):
            return k
    return None


@dataclass(frozen=True)
class ParamSpec:
    """One processing parameter, as the schema describes it.

    Attributes
    ----------
    name : str
        Parameter name: the command-line option without dashes, upper case
        (``--velocity-max-mps`` -> ``VELOCITY_MAX_MPS``).
    setting : Setting
        The declaration it shows.
    widget : str
        ``point_layer, field, raster, rasters, vector, crs, enum, number,
        integer, bool, text, file, destination``.
    description : str
        Label in the dialog: the help line, with the unit in brackets.
    optional : bool
    advanced : bool
    numeric_field : bool
        For ``field``: only numeric fields are offered.
    extension : str
        For ``file`` and ``destination``: the file extension (no dot) or "".
    """

    name: str
    setting: object
    widget: str
    description: str
    optional: bool = True
    advanced: bool = False
    numeric_field: bool = False
    extension: str = ""
    parent: str = "SITES"

    @property
    def default(self):
        return self.setting.default


def param_name(s) -> str:
    """Processing parameter name of setting *s* (its option, upper case)."""
    return s.option.lstrip("-").replace("-", "_").upper()


def _has_word(s, words):
    text = f"{s.key} {s.metavar or ''}".lower()
    return any(w in text for w in words)


def _extension(s):
    m = re.search(r"([A-Za-z]+)$", s.metavar or "")
    ext = (m.group(1).lower() if m else "")
    return {"file": "", "landxml": "xml"}.get(ext, ext)


def spec_of(s) -> ParamSpec | None:
    """The processing parameter showing setting *s*; None if it is not shown."""
    if not s.on_cli or s.name in SKIPPED:
        return None
    widget, numeric, ext, parent = None, False, "", "SITES"
    owner = layer_parent(s)
    if owner is not None and s.key == f"{owner}_layer":
        return None             # the layer picker of <owner> chooses the layer
    if owner is not None:       # a field of that layer (any type: sizes, materials, ...)
        from ..settings import setting
        widget, parent = "field", param_name(setting(s.section, owner))
    named_raster = s.key.endswith("_raster") or (s.metavar or "").upper() in ("DEM", "RASTER")
    raster_path = named_raster or (s.section == "rasters" and not _has_word(s, _VECTOR_WORDS))
    if widget == "field":
        pass
    elif s.section == "sites" and s.kind == "path":
        widget = "point_layer"
    elif s.section == "sites" and s.key.endswith("_field"):
        widget, numeric = "field", s.key not in _TEXT_FIELDS
    elif s.kind == "path" and s.section == "output":
        widget, ext = "destination", _extension(s)
    elif s.kind == "path" and raster_path:
        widget = "raster"
    elif s.kind == "table" and s.repeat and "RASTER" in (s.metavar or "").upper():
        widget = "rasters"
    elif s.kind == "list" and s.repeat and (s.metavar or "").upper() == "LAYER":
        widget = "vectors"      # e.g. --barrier LAYER (repeatable): several vector layers
    elif s.kind == "path" and _has_word(s, _VECTOR_WORDS):
        widget = "vector"
    elif s.kind == "path":
        widget, ext = "file", _extension(s)
    elif (s.metavar or "").upper() == "CRS" and s.default is None:
        widget = "crs"          # (a CRS with a word for a default, e.g. "working", is text)
    elif s.choices:
        widget = "enum"
    elif s.kind in ("number", "integer", "bool"):
        widget = s.kind
    else:                       # text, list, table, value: typed as on the command line
        widget = "text"
    unit = f" [{s.unit}]" if s.unit and s.unit != "-" else ""
    label = _label(s)
    required = s.name in ("sites.path", "output.gpkg")
    return ParamSpec(param_name(s), s, widget, label + unit, optional=not required,
                     advanced=s.name not in BASIC, numeric_field=numeric, extension=ext,
                     parent=parent)


def _label(s) -> str:
    """The dialog label: the help line without what only the command line needs."""
    text = s.help or s.key
    if s.choices and re.match(rf"({'|'.join(map(re.escape, s.choices))}):", text):
        text = s.key.replace("_", " ")          # the help explains each choice: a tooltip
    text = text.split(";")[0].replace(" (repeatable)", "").strip()
    if s.kind in ("list", "table") and spec_widget(s) == "text":
        text += " (comma-separated)"
    return text[:1].upper() + text[1:]


def spec_widget(s):
    return "rasters" if (s.kind == "table" and "RASTER" in (s.metavar or "").upper()) else "text"


def plan_parameters(*, outputs=True) -> list:
    """Every :class:`ParamSpec` of the plan algorithm (``outputs=False``: of check)."""
    from ..settings import all_settings

    out = []
    for s in all_settings():
        if not outputs and s.section == "output":
            continue
        spec = spec_of(s)
        if spec is not None:
            out.append(spec)
    return out


def _items(text):
    return [p.strip() for p in re.split(r"[,;\n]", str(text)) if p.strip()]


def settings_from_values(specs, values: dict, *, layers=None) -> tuple:
    """Settings sections from the values of a run, each checked by the schema.

    Parameters
    ----------
    specs : list of ParamSpec
    values : dict
        Parameter name -> value, already plain Python: layers as file paths
        (``layers`` gives the sites layer name), rasters as paths or, for
        ``rasters``, a dict name -> path; CRSs as text; enums as their
        choice text; unset values as None or "".
    layers : dict, optional
        Setting name -> extra sections entries (the sites ``layer``).

    Returns
    -------
    sections : dict
        ``{section: {key: value}}`` for :meth:`PlanSettings.from_sections`.
    origin : dict
        ``(section, key) -> "parameter NAME"`` for the messages.
    """
    from ..settings import parse_items, parse_text

    sections, origin = {}, {}
    for sp in specs:
        s = sp.setting
        v = values.get(sp.name)
        if v is None or (isinstance(v, str) and not v.strip()) or v == []:
            continue
        where = f"parameter {sp.name}"
        if sp.widget == "vectors":
            v = list(v)
        elif sp.widget in ("text",) and s.kind in ("list", "table"):
            v = parse_items(s, _items(v), where)
        elif sp.widget == "text" and s.kind == "value":
            if s.default is not None and str(v).strip() == _format_value(s.default):
                continue
            v = parse_text(s, str(v), where)
        elif sp.widget in ("number", "integer", "bool") and isinstance(v, str):
            v = parse_text(s, v, where)
        elif sp.widget == "number":
            v = float(v)
        elif sp.widget == "integer":
            v = int(v)
        elif sp.widget == "bool":
            v = bool(v)
        if sp.widget not in ("point_layer", "rasters", "vectors") and s.default is not None \
                and _equal(v, s.default):
            continue            # the default: as if the option were left off
        sections.setdefault(s.section, {})[s.key] = v
        origin[(s.section, s.key)] = where
    for name, extra in (layers or {}).items():
        sec, _, key = name.partition(".")
        if extra is not None:
            sections.setdefault(sec, {})[key] = extra
    return sections, origin


def _equal(a, b):
    try:
        return type(a) is type(b) and bool(a == b) or (
            isinstance(a, (int, float)) and not isinstance(a, bool)
            and isinstance(b, (int, float)) and not isinstance(b, bool) and float(a) == float(b))
    except Exception:   # noqa: BLE001 - arrays and objects: never equal to a default
        return False


def _format_value(v):
    """A default of kind ``value`` as TOML text (tuples as arrays)."""
    if isinstance(v, (tuple, list)):
        return "[" + ", ".join(_format_value(x) for x in v) + "]"
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return '"' + v.replace('"', '\\"') + '"'
    return repr(v)


def default_text(s) -> str | None:
    """The default of a ``text`` parameter as its widget shows it."""
    if s.default is None:
        return None
    if s.kind == "value":
        return _format_value(s.default)
    if s.kind == "list":
        return ", ".join(map(str, s.default))
    if s.kind == "table":
        return ", ".join(f"{k}={v}" for k, v in dict(s.default).items())
    return str(s.default)
