"""The one settings schema: every plan setting declared once.

Each :class:`Setting` names its project-file section and key, its kind,
unit, default, bounds or choices and help text.  From this one list come

* the ``mainspan plan`` / ``mainspan check`` options (flag = the key with
  dashes; a section's primary key takes the section's name: ``--sites``,
  ``--crs``, ``--candidates``, ``--output``), with the older spellings kept as
  hidden aliases;
* the project-file keys and their checks (:mod:`mainspan.project`);
* the ``run_info`` entries that record the settings of a run;
* the ``--help`` text, which lists every design key with its unit and default.

The ``costs`` and ``design`` sections are derived from the
:class:`~mainspan.costs.CostWeights` and
:class:`~mainspan.hydraulics.DesignSettings` dataclass fields: type from the
annotation, default from the field, help (and unit where the name does not
carry one) from the class's numpydoc docstring.  A setting added there
appears everywhere without a further edit; any other setting is one
:class:`Setting` line in :data:`STATIC_SETTINGS`.

Every value is checked here, before any work, with one message template::

    <where>: <what> must be <expected>, got <value>; <fix>

and so are the rules that tie settings together (:func:`check_settings`).

Examples
--------
>>> s = setting("design", "velocity_max_mps")
>>> s.option, s.unit, s.default
('--velocity-max-mps', 'm/s', 1.5)
>>> parse_text(setting("candidates", "k"), "6", "option --k")
6
>>> parse_text(s, "fast", "option --design velocity_max_mps")
Traceback (most recent call last):
...
mainspan.errors.InputError: option --design velocity_max_mps: the velocity cap must be a number in m/s, got 'fast'; give a number such as velocity_max_mps=1.5
"""

from __future__ import annotations

import dataclasses
import difflib
import functools
import math
import os
import re
import tomllib
from dataclasses import dataclass

from .errors import InputError

__all__ = ["Setting", "STATIC_SETTINGS", "SECTIONS", "all_settings", "setting", "by_flag",
           "parse_text", "check_value", "check_settings", "unknown_key", "bad_value",
           "run_info_params", "design_help", "format_default", "design_settings", "LAYOUTS",
           "PlanSettings"]

#: Project-file sections of a plan, in order, with the help-group title of each.
SECTIONS = {
    "sites": "sites",
    "crs": "working CRS",
    "rasters": "ground (terrain and land-cost rasters)",
    "costs": "cost weights",
    "candidates": "candidate links",
    "tree": "tree",
    "design": "design",
    "prices": "price table (project file only; on the command line use --prices FILE)",
    "output": "output",
}

#: ``tree``: Prim's tree of link costs; ``gravity``: minimum arborescence towards the
#: outlet; ``whole-cost``: the tree of least whole-life cost (:mod:`mainspan.wholecost`).
LAYOUTS = ("tree", "gravity", "whole-cost")

KINDS = ("text", "path", "number", "integer", "bool", "list", "table", "value")
_EXPECT = {"text": "text", "path": "a file path", "number": "a number", "integer": "an integer",
           "bool": "true or false", "list": "a list", "table": "a table of keys",
           "value": "a value"}


@dataclass(frozen=True)
class Setting:
    """One plan setting.

    Attributes
    ----------
    section, key : str
        Where it sits in a project file (``[section] key``).
    kind : str
        One of ``text, path, number, integer, bool, list, table, value``
        (``value``: any TOML value, e.g. a list of pairs).
    default : object
        The value used when the setting is not given (``None``: not set).
    help : str
        One line for ``--help``.
    unit : str, default=""
    choices : tuple of str or None
    lo, hi : float or None
        Bounds of a number; ``lo_open`` / ``hi_open`` exclude the bound itself.
    optional : bool, default=True
        ``none`` is accepted (numbers of a dataclass annotated ``| None``).
    flag : str or None
        Command-line option; default ``--`` + key with dashes; ``""`` for none.
    aliases : tuple of str
        Older option spellings, accepted but hidden from ``--help``.
    run_info : str or None
        The ``run_info`` entry that records it (a group entry such as
        ``weights`` lists ``key=value`` pairs); None: not recorded.
    api : str or None
        The :func:`mainspan.plan_layout` keyword it feeds (``weights`` and
        ``design`` take the whole section).
    repeat : bool
        The option may be given several times (lists and tables).
    """

    section: str
    key: str
    kind: str
    default: object = None
    help: str = ""
    unit: str = ""
    choices: tuple | None = None
    lo: float | None = None
    hi: float | None = None
    lo_open: bool = False
    hi_open: bool = False
    optional: bool = True
    flag: str | None = None
    aliases: tuple = ()
    run_info: str | None = None
    api: str | None = None
    repeat: bool = False
    metavar: str | None = None

    @property
    def name(self) -> str:
        """``section.key``, the setting's one name."""
        return f"{self.section}.{self.key}"

    @property
    def option(self) -> str:
        return self.flag if self.flag is not None else "--" + self.key.replace("_", "-")

    # ``flag`` is the public spelling; a Setting with flag="" has no option
    @property
    def on_cli(self) -> bool:
        return self.option != ""

    def expected(self) -> str:
        """What a valid value looks like, in words."""
        if self.choices:
            return "one of " + ", ".join(repr(c) for c in self.choices)
        out = _EXPECT[self.kind]
        if self.kind in ("number", "integer"):
            if self.lo is not None:
                out += f" {'>' if self.lo_open else '>='} {self.lo:g}"
            if self.hi is not None:
                out += f"{' and' if self.lo is not None else ''} " \
                       f"{'<' if self.hi_open else '<='} {self.hi:g}"
            if self.unit and self.unit != "-":
                out += f" in {self.unit}"
        return out


def S(section, key, kind, default=None, help="", **kw):  # noqa: N802 - a table row
    return Setting(section, key, kind, default, help, **kw)


#: Settings that are not dataclass fields (costs and design keys are derived).
STATIC_SETTINGS = (
    # sites ------------------------------------------------------------------
    S("sites", "path", "path", None, "point layer of sites (any OGR format or CSV)",
      flag="--sites", run_info="sites", metavar="FILE"),
    S("sites", "layer", "text", None, "layer of a multi-layer sites file", run_info="sites_layer"),
    S("sites", "id_field", "text", None, "field holding site ids (default: 'id' if present)"),
    S("sites", "role_field", "text", None, "field holding roles: source, outlet, demand, "
      "junction (default: 'role' if present)"),
    S("sites", "demand_field", "text", None, "field holding demands in L/s "
      "(default: 'demand_lps' if present)"),
    S("sites", "elevation_field", "text", None, "field holding site elevations in metres"),
    S("sites", "x_field", "text", None, "CSV column of x / longitude (default x)"),
    S("sites", "y_field", "text", None, "CSV column of y / latitude (default y)"),
    S("sites", "sites_crs", "text", None, "CRS of the site coordinates: needed when the file "
      "has none (CSV); when given, it overrides the file's own CRS (to correct a wrong one)",
      metavar="CRS"),
    S("sites", "merge_within_m", "number", None, "merge sites closer than this instead of "
      "failing", unit="m", lo=0.0, aliases=("--merge-within",), run_info="merged_sites"),
    S("sites", "area_field", "text", None, "field holding catchment areas in ha "
      "(default: 'area_ha' if present)"),
    S("sites", "runoff_field", "text", None, "field holding runoff coefficients 0-1 "
      "(default: 'runoff_c' if present)"),
    S("sites", "population_field", "text", None, "field holding persons served "
      "(default: 'population' if present)"),
    S("sites", "min_pressure_field", "text", None, "field holding each site's minimum pressure "
      "head in m (default: 'min_pressure_m' if present)"),
    # crs --------------------------------------------------------------------
    S("crs", "working", "text", None, "working CRS (projected); default: the input's projected "
      "CRS or the UTM zone holding most sites", flag="--crs", run_info="working_crs",
      metavar="CRS"),
    # rasters ----------------------------------------------------------------
    S("rasters", "terrain", "path", None, "terrain raster (DEM)", run_info="terrain",
      api="terrain", metavar="DEM"),
    S("rasters", "land_cost", "table", None, "land-cost raster, cost per metre of main; repeat "
      "with names as NAME=RASTER", run_info="land_cost", api="land_cost", repeat=True,
      metavar="[NAME=]RASTER"),
    S("rasters", "cost_expression", "text", None, "unit cost per metre from the named land-cost "
      "rasters, e.g. 'base + where(wet > 0, 200, 0)'", run_info="cost_expression",
      api="cost_expression", metavar="EXPR"),
    S("rasters", "class_costs", "table", None, "cost per metre of each class of a categorical "
      "land-cost raster, as CODE=COST (repeatable)", api="class_costs", repeat=True,
      metavar="CODE=COST"),
    S("rasters", "raster_crs", "text", None, "CRS of rasters that carry none", api="raster_crs",
      metavar="CRS"),
    S("rasters", "on_nodata", "text", "barrier", "links crossing nodata or leaving a raster",
      choices=("barrier", "skip", "error"), run_info="on_nodata", api="on_nodata"),
    S("rasters", "sample_spacing_m", "number", None, "terrain sampling step (default half a "
      "cell)", unit="m", lo=0.0, lo_open=True, api="sample_spacing_m"),
    # candidates -------------------------------------------------------------
    S("candidates", "method", "text", "delaunay", "candidate builder: delaunay, knn, radius, "
      "complete, or a union such as delaunay+knn", flag="--candidates", run_info="candidates",
      api="candidates", metavar="NAME"),
    S("candidates", "k", "integer", 8, "neighbours per site for knn", lo=1, run_info="k",
      api="k"),
    S("candidates", "max_link_m", "number", None, "longest candidate link", unit="m", lo=0.0,
      lo_open=True, run_info="max_link_m", api="max_link_m"),
    S("candidates", "max_complete_nodes", "integer", 5000, "size limit of the complete builder",
      lo=2, api="max_complete_nodes"),
    # tree -------------------------------------------------------------------
    S("tree", "roots", "list", None, "root site id (repeatable); default: sites with role "
      "source/outlet", aliases=("--root",), run_info="roots", api="roots", repeat=True,
      metavar="ID"),
    S("tree", "allow_forest", "bool", False, "return one tree per connected part instead of "
      "failing", api="allow_forest"),
    S("tree", "use_site_z", "bool", False, "use the sites' own Z for node elevations where "
      "given", api="use_site_z"),
    S("tree", "layout", "text", "tree", "tree: Prim's minimum tree; gravity: minimum "
      "arborescence towards the outlet with direction-dependent costs; whole-cost: the tree of "
      "least whole-life cost for pressure mains (sized pipes, trench, pump energy), searched "
      "from Prim's tree", choices=LAYOUTS, run_info="layout", api="layout"),
    # design (the DesignSettings fields follow) --------------------------------
    S("design", "system", "text", None, "size and check the mains as this system",
      choices=("pressure", "gravity"), run_info="system", api="system"),
    S("design", "catalog", "path", None, "pipe catalog CSV of the system's pipes",
      run_info="design_settings", api="design", metavar="CSV"),
    # prices: the price table itself (mainspan.prices); tables, not options ----
    *(S("prices", k, kind, None, f"price table item {k!r} (see mainspan.prices)", flag="",
        run_info="design_settings")
      for k, kind in (("placeholder", "bool"), ("excavation", "table"), ("shoring", "table"),
                      ("bedding", "number"), ("reinstatement", "table"), ("fitting", "table"),
                      ("manhole", "table"), ("crossing", "number"), ("pump_station", "table"),
                      ("energy", "table"), ("operation", "table"))),
    # output -----------------------------------------------------------------
    S("output", "gpkg", "path", None, "output GeoPackage (layers links, nodes, run_info)",
      flag="--output", aliases=("--out",), metavar="LAYOUT.gpkg"),
    S("output", "report", "path", None, "also write the HTML review report", metavar="HTML"),
    S("output", "dxf", "path", None, "also write a DXF drawing", metavar="DXF"),
    S("output", "landxml", "path", None, "also write a LandXML 1.2 file", metavar="XML"),
    S("output", "links_csv", "path", None, "also write the links table as CSV", metavar="CSV"),
    S("output", "quantities_csv", "path", None, "also write the bill of quantities as CSV",
      metavar="CSV"),
    S("output", "overwrite", "bool", False, "replace existing outputs"),
)

# Units by name ending (longest first); names that carry none are listed below.
_SUFFIX_UNITS = (("_m_per_km", "m/km"), ("_per_m3", "per m³"), ("_mps", "m/s"), ("_lps", "L/s"),
                 ("_lpd", "L/day per person"), ("_mm", "mm"), ("_pct", "%"), ("_min", "min"),
                 ("_ha", "ha"), ("_temperature_c", "°C"), ("_m", "m"))
_NAMED_UNITS = {"manning_n": "s/m^(1/3)", "peaking_factor": "-", "minor_loss_factor": "-",
                "idf": "(min, mm/h) pairs", "gravity_min_slope_table_pct": "(mm, %) pairs", "length": "per m", "land": "-",
                "climb": "per m climbed", "descent": "per m descended", "steep_per_m": "per m",
                "fixed": "per link"}
# Bounds of derived numbers the dataclass also enforces; kept here so --help can show them.
_DERIVED_BOUNDS = {"costs": dict(lo=0.0)}
# the older spellings of the cost-weight options
_COST_ALIASES = {"length": ("--w-length",), "land": ("--w-land",), "climb": ("--w-climb",),
                 "descent": ("--w-descent",), "steep_per_m": ("--w-steep",),
                 "fixed": ("--w-fixed",)}


def _unit_of(name):
    if name in _NAMED_UNITS:
        return _NAMED_UNITS[name]
    for suf, unit in _SUFFIX_UNITS:
        if name.endswith(suf):
            return unit
    return ""


def _doc_entries(cls):
    """``name -> (type text, description)`` from a numpydoc class docstring."""
    out, cur = {}, None
    for line in (cls.__doc__ or "").splitlines():
        m = re.match(r"^    (\w+) : (.*)$", line)
        if m:
            cur = m.group(1)
            out[cur] = [m.group(2), []]
        elif cur and line.startswith("        ") and line.strip():
            out[cur][1].append(line.strip())
        elif not line.strip() or not line.startswith("        "):
            cur = None if not line.startswith("        ") else cur
    return {k: (t, " ".join(d)) for k, (t, d) in out.items()}


def _first_sentence(text):
    text = re.sub(r"``([^`]*)``", r"\1", text)
    text = re.sub(r":\w+:`~?([^`]*)`", r"\1", text)
    m = re.match(r"(.+?\.)(\s|$)", text)
    return (m.group(1) if m else text).rstrip(".")


def _kind_of(annotation, name=""):
    t = str(annotation)
    if "PipeCatalog" in t or "PriceTable" in t or name.endswith(("_raster", "_file", "_csv")):
        return "path"
    if "tuple" in t or "dict" in t:
        return "value"
    if "bool" in t:
        return "bool"
    if "float" in t:
        return "number"
    if "int" in t:
        return "integer"
    if "str" in t:
        return "text"
    return "value"


def _from_dataclass(cls, section, *, run_info, api):
    docs = _doc_entries(cls)
    out = []
    for f in dataclasses.fields(cls):
        typ, desc = docs.get(f.name, ("", ""))
        choices = None
        m = re.match(r"\{(.*?)\}", typ)
        if m:
            choices = tuple(c.strip().strip("\"'") for c in m.group(1).split(","))
        default = f.default if f.default is not dataclasses.MISSING else (
            f.default_factory() if f.default_factory is not dataclasses.MISSING else None)
        kind = _kind_of(f.type, f.name)
        metavar = "FILE" if kind == "path" else None
        hlp = _first_sentence(desc) if desc else (f"one of {', '.join(choices)}" if choices
                                                  else f.name)
        if kind == "path" and hlp.startswith("None"):
            hlp = "a file to read; none: " + hlp.split(":", 1)[-1].strip()
        out.append(Setting(
            section, f.name, kind, default, hlp,
            unit=_unit_of(f.name), choices=choices, optional="None" in str(f.type),
            run_info=run_info, api=api, metavar=metavar,
            aliases=_COST_ALIASES.get(f.name, ()) if section == "costs" else (),
            **_DERIVED_BOUNDS.get(section, {}) if kind == "number" else {}))
    return out


@functools.lru_cache(maxsize=1)
def _all():
    from .costs import CostWeights
    from .hydraulics import DesignSettings

    static = list(STATIC_SETTINGS)
    design = _from_dataclass(DesignSettings, "design", run_info="design_settings", api="design")
    have = {s.name for s in static}
    design = [s for s in design if s.name not in have]
    costs = _from_dataclass(CostWeights, "costs", run_info="weights", api="weights")
    out = []
    for sec in SECTIONS:
        out += [s for s in static if s.section == sec]
        if sec == "costs":
            out += costs
        if sec == "design":
            out += design
    return tuple(out)


def all_settings(section=None) -> tuple:
    """Every setting (or those of *section*), in section order."""
    s = _all()
    return s if section is None else tuple(x for x in s if x.section == section)


def setting(section, key) -> Setting:
    """The setting ``[section] key``; unknown keys raise with the nearest valid one."""
    for s in _all():
        if s.section == section and s.key == key:
            return s
    raise unknown_key(f"[{section}]", key, [s.key for s in all_settings(section)])


def by_flag() -> dict:
    """Option spelling (including aliases) -> Setting."""
    out = {}
    for s in _all():
        if s.on_cli:
            out[s.option] = s
            for a in s.aliases:
                out[a] = s
    return out


def unknown_key(where, key, valid, *, what="key"):
    """The InputError for an unknown key: names the nearest valid one."""
    close = difflib.get_close_matches(str(key), list(valid), n=1)
    return InputError(f"{where}: unknown {what} {key!r}"
                      + (f"; did you mean {close[0]!r}?" if close else
                         f"; valid {what}s: {', '.join(valid)}"))


def bad_value(where, what, expected, got, fix) -> InputError:
    """The one message template: where, what, expected, got, fix."""
    return InputError(f"{where}: {what + ' ' if what else ''}must be {expected}, got {got!r}; "
                      f"{fix}")


def format_default(s: Setting) -> str:
    """The default as shown in ``--help``."""
    d = s.default
    if d is None:
        return "none"
    if isinstance(d, bool):
        return "true" if d else "false"
    if isinstance(d, float):
        return f"{d:g}"
    if isinstance(d, tuple):
        return "[" + ", ".join(format_default(Setting("", "", "value", x)) for x in d) + "]"
    return str(d)


def _what(s):
    h = s.help.split(";")[0].split(" (")[0].rstrip(".")
    if s.section in ("design", "costs") and h:
        return "the " + h[0].lower() + h[1:] if not h.lower().startswith(("the ", "a ")) \
            else h[0].lower() + h[1:]
    return ""     # the place already names the key


def _fix(s):
    if s.choices:
        return f"choose one of {', '.join(s.choices)}"
    ex = s.default if s.default is not None else {"number": 1.0, "integer": 1}.get(s.kind)
    if s.kind in ("number", "integer") and ex is not None:
        if isinstance(ex, (int, float)) and s.lo is not None and (
                ex < s.lo or (s.lo_open and ex == s.lo)):
            ex = s.lo + 1
        return f"give a number such as {s.key}={format_default(Setting('', '', 'value', ex))}"
    if s.kind == "bool":
        return "give true or false"
    return f"see 'mainspan plan --help' for {s.key}"


def _is_path(v):
    return isinstance(v, (str, os.PathLike))


def check_value(s: Setting, value, where: str):
    """Check one value of setting *s*; returns it normalised (ints of numbers become floats
    only where the dataclass would do so).  Objects (a Surface, a PipeCatalog, a CostWeights)
    given through the Python API pass unchanged.
    """
    if value is None:
        return None
    k = s.kind
    if k == "bool":
        if not isinstance(value, bool):
            raise bad_value(where, _what(s), "true or false", value, _fix(s))
        return value
    if k in ("number", "integer"):
        if isinstance(value, bool) or not isinstance(value, (int, float)) or (
                k == "integer" and isinstance(value, float) and not value.is_integer()) or (
                isinstance(value, float) and not math.isfinite(value)):
            if k == "number" and s.section == "design" and not isinstance(value, (str, bool)):
                return value    # numpy scalars and the like: the dataclass checks them
            raise bad_value(where, _what(s), s.expected(), value, _fix(s))
        if k == "integer":
            value = int(value)
        lo_bad = s.lo is not None and (value <= s.lo if s.lo_open else value < s.lo)
        hi_bad = s.hi is not None and (value >= s.hi if s.hi_open else value > s.hi)
        if lo_bad or hi_bad:
            raise bad_value(where, _what(s), s.expected(), value, _fix(s))
        return value
    if k == "text":
        if not isinstance(value, str):
            raise bad_value(where, _what(s), s.expected(), value, _fix(s))
        if s.choices and value not in s.choices:
            close = difflib.get_close_matches(value, s.choices, n=1)
            raise bad_value(where, _what(s), s.expected(), value,
                            f"did you mean {close[0]!r}?" if close else _fix(s))
        return value
    if k == "path":
        return value        # a path, or an object made from one (checked where it is opened)
    if k == "list":
        if isinstance(value, str) or not hasattr(value, "__iter__"):
            raise bad_value(where, _what(s), "a list", value, "give a list such as ['A', 'B']")
        return list(value)
    if k == "table":
        if s.key == "land_cost" and not isinstance(value, dict):
            return value    # one unnamed raster
        if not isinstance(value, dict):
            raise bad_value(where, _what(s), "a table of keys", value, _fix(s))
        return value
    return value


def _split_pair(text, where, example):
    name, sep, val = text.partition("=")
    if not sep or not name.strip():
        raise bad_value(where, "each item", "NAME=VALUE", text, f"give e.g. {example}")
    return name.strip(), val.strip()


def parse_text(s: Setting, text: str, where: str):
    """A command-line value of setting *s* from its text, checked."""
    t = text.strip()
    if s.optional and s.section == "design" and t.lower() == "none":
        return None
    k = s.kind
    try:
        if k == "number":
            v = float(t)
        elif k == "integer":
            v = int(t)
        elif k == "bool":
            low = t.lower()
            if low not in ("true", "yes", "false", "no", "1", "0"):
                raise ValueError
            v = low in ("true", "yes", "1")
        elif k == "value":
            try:
                v = tomllib.loads(f"v = {t}")["v"]
            except tomllib.TOMLDecodeError:
                v = t
        else:
            v = t
    except ValueError:
        raise bad_value(where, _what(s), s.expected(), text, _fix(s)) from None
    return check_value(s, v, where)


def parse_items(s: Setting, items, where):
    """The values of a repeatable option (``--land-cost``, ``--class-costs``, ``--roots``)."""
    if s.kind == "list":
        out = []
        for it in items:
            out += [p.strip() for p in str(it).split(",") if p.strip()]
        return out
    table = {}
    for it in items:
        if s.key == "land_cost":
            name, sep, p = str(it).partition("=")
            if not sep:
                name, p = ("land_cost" if not table else f"land_cost{len(table) + 1}"), str(it)
            if not name.isidentifier():
                raise bad_value(where, "a raster name", "a simple identifier (letters, digits, _)",
                                name, "write it as in --land-cost base=cost.tif")
            table[name] = p
        else:
            name, val = _split_pair(str(it), where, f"{s.option} 3=250")
            try:
                table[name] = float(val)
            except ValueError:
                raise bad_value(where, f"the cost of class {name}", "a number", val,
                                f"give e.g. {s.option} {name}=250") from None
    return table


# ------------------------------------------------------------------ whole settings
def check_settings(settings: dict, origin=None) -> dict:
    """Check merged settings (``{section: {key: value}}``) before any work.

    Every value is checked against its :class:`Setting`; then the rules that
    tie settings together; then the cost weights and design settings are
    built once (their own range checks run, catalogs and price files are read).

    Parameters
    ----------
    settings : dict
        As from a project file, command-line options or both.
    origin : callable, optional
        ``origin(section, key) -> str`` naming where a value came from (an
        option or a project file); default ``"[section] key"``.

    Returns
    -------
    dict
        The same settings with values normalised.

    Raises
    ------
    InputError
        The first bad value or combination, with the one message template.
    """
    where = origin or (lambda sec, key: f"[{sec}] {key}")
    out = {}
    for sec, vals in settings.items():
        if sec not in SECTIONS:
            if sec in ("scenarios", "stability", "description"):
                out[sec] = vals
                continue
            raise unknown_key("settings", sec, list(SECTIONS), what="section")
        keys = {s.key: s for s in all_settings(sec)}
        out[sec] = {}
        for k, v in (vals or {}).items():
            if k not in keys:
                raise unknown_key(where(sec, k).rsplit(" ", 1)[0] if origin else f"[{sec}]",
                                  k, list(keys), what="setting" if sec == "design" else "key")
            out[sec][k] = check_value(keys[k], v, where(sec, k))
    _cross_rules(out, where)
    _build_objects(out, where)
    return out


def _get(d, sec, key, default=None):
    v = d.get(sec, {}).get(key)
    return default if v is None else v


def _cross_rules(d, where):
    system = _get(d, "design", "system")
    layout = _get(d, "tree", "layout", "tree")
    terrain = _get(d, "rasters", "terrain")
    if layout == "gravity" and system != "gravity":
        raise bad_value(where("tree", "layout"), "a gravity layout", "planned with system "
                        "gravity", f"layout gravity with system {system or 'none'}",
                        "--layout gravity needs --system gravity (it grows the tree towards a "
                        "gravity outlet); add --system gravity")
    if layout == "whole-cost" and system != "pressure":
        raise bad_value(where("tree", "layout"), "a whole-cost layout", "planned with system "
                        "pressure", f"layout whole-cost with system {system or 'none'}",
                        "--layout whole-cost needs --system pressure (it sizes the pressure "
                        "mains of every tree it prices); add --system pressure")
    if system == "gravity" and terrain is None and not _get(d, "tree", "use_site_z", False):
        raise bad_value(where("design", "system"), "a gravity system", "given ground "
                        "elevations", "no terrain", "give --terrain DEM (or the sites' own Z "
                        "with --use-site-z)")
    if terrain is None:
        for key in ("climb", "descent", "steep_per_m"):
            v = _get(d, "costs", key, 0.0)
            if isinstance(v, (int, float)) and v:
                raise bad_value(where("costs", key), f"the {key} weight", "0 without a terrain "
                                "raster", v, "give --terrain DEM, or drop the weight")
    land = _get(d, "rasters", "land_cost")
    for key in ("cost_expression", "class_costs"):
        if _get(d, "rasters", key) is not None and land is None:
            raise bad_value(where("rasters", key), key, "used with a land-cost raster",
                            "no --land-cost", "give --land-cost NAME=RASTER")
    if isinstance(_get(d, "rasters", "class_costs"), dict):
        for code, cost in d["rasters"]["class_costs"].items():
            try:
                int(code)
                ok = isinstance(cost, (int, float)) and not isinstance(cost, bool) and cost >= 0
            except (TypeError, ValueError):
                ok = False
            if not ok:
                raise bad_value(where("rasters", "class_costs"), "each class cost",
                                "an integer class code with a cost >= 0 per metre",
                                f"{code}={cost}", "write e.g. 3 = 250.0")
    method = _get(d, "candidates", "method")
    if method is not None:
        from .candidates import CANDIDATE_BUILDERS
        for part in str(method).split("+"):
            CANDIDATE_BUILDERS.get(part.strip())     # names the option and the nearest name


def _build_objects(d, where):
    """Build the cost weights and design settings now, so their own checks run up front."""
    from .costs import CostWeights

    if d.get("costs"):
        try:
            CostWeights(**d["costs"])
        except InputError as exc:
            key = next((k for k in d["costs"] if k in str(exc)), next(iter(d["costs"])))
            raise InputError(f"{where('costs', key)}: {exc}") from None
    system = _get(d, "design", "system")
    if system is not None:
        des = {k: v for k, v in d.get("design", {}).items() if k != "system"}
        if d.get("prices") and "prices" not in des:
            des["prices"] = dict(d["prices"])
        try:
            design_settings(des or None, system)
        except InputError as exc:
            msg = str(exc)
            key = next((k for k in des if f"'{k}'" in msg or f" {k} " in msg), None)
            if key is None or msg.startswith(where("design", key)):
                raise
            raise InputError(f"{where('design', key)}: {msg}") from None


def design_settings(design, system):
    """DesignSettings from None, a dict (keys as in the project file) or an instance.

    ``catalog`` (a CSV path) is read once and becomes the catalog of *system*;
    ``pressure_catalog`` / ``gravity_catalog`` / ``prices`` given as paths are read.
    """
    from .hydraulics import DesignSettings
    from .hydraulics.catalog import read_catalog

    if design is None:
        return DesignSettings()
    if isinstance(design, DesignSettings):
        return design
    d = dict(design)
    cat = d.pop("catalog", None)
    for key in ("pressure_catalog", "gravity_catalog"):
        if isinstance(d.get(key), (str, os.PathLike)):
            d[key] = read_catalog(d[key])
    if cat is not None:
        d["gravity_catalog" if system == "gravity" else "pressure_catalog"] = read_catalog(cat)
    if isinstance(d.get("prices"), (str, os.PathLike)):
        from .prices import read_prices
        d["prices"] = read_prices(d["prices"])
    elif isinstance(d.get("prices"), dict):
        from .prices import prices_from_mapping
        d["prices"] = prices_from_mapping(d["prices"])
    try:
        return DesignSettings(**d)
    except TypeError as exc:
        raise InputError(f"design settings: {exc}; see mainspan.hydraulics.DesignSettings "
                         "for the valid keys") from None


# ------------------------------------------------------------------ run_info
def _fmt_dataclass(obj):
    if obj is None:
        return ""
    if dataclasses.is_dataclass(obj):
        return ", ".join(f"{k}={v}" for k, v in dataclasses.asdict(obj).items())
    return str(obj)


def run_info_params(kw: dict, *, candidates_label=None) -> dict:
    """The ``run_info`` entries recording the plan settings of *kw* (plan_layout keywords).

    The order and the spelling of each entry are part of the file format:
    layouts written before the schema existed read the same.
    """
    from .costs import CostWeights

    terrain = kw.get("terrain")
    land = kw.get("land_cost")
    land = land if isinstance(land, dict) else ({"land_cost": land} if land is not None else {})
    weights = kw.get("weights")
    if not isinstance(weights, CostWeights):
        weights = CostWeights(**(weights or {}))
    mlm = kw.get("max_link_m")
    return {
        "candidates": str(candidates_label if candidates_label is not None
                          else kw.get("candidates", "delaunay")),
        "k": str(kw.get("k", 8)),
        "max_link_m": "" if mlm is None else f"{mlm:g}",
        "terrain": "" if terrain is None else os.fspath(getattr(terrain, "path", terrain)),
        "land_cost": "; ".join(f"{k}={os.fspath(v)}" for k, v in land.items()),
        "cost_expression": kw.get("cost_expression") or "",
        "on_nodata": kw.get("on_nodata", "barrier"),
        "weights": _fmt_dataclass(weights),
        "layout": kw.get("layout", "tree"),
    }


# ------------------------------------------------------------------ help
def design_help(width=96) -> str:
    """Every design key with its unit and default, for ``mainspan plan --help``."""
    lines = ["design settings (--KEY VALUE or --design KEY=VALUE; unit, default):"]
    for s in all_settings("design"):
        unit = s.unit or "-"
        line = f"  {s.key:<28} [{unit}] default {format_default(s)}"
        if s.choices:
            line += f"; one of {', '.join(s.choices)}"
        lines.append(line)
        lines.append(f"      {s.help}")
    return "\n".join(lines)


# ------------------------------------------------------------------ settings object
class PlanSettings:
    """Checked plan settings: the one object the CLI, project files, scenarios and
    :func:`mainspan.plan_layout` share.

    Build it from sections (:meth:`from_sections`, as a project file or the
    command line gives them) or from :func:`mainspan.plan_layout` keywords
    (:meth:`from_kwargs`); both check every value before any work.

    Examples
    --------
    >>> ps = PlanSettings.from_sections({"sites": {"path": "s.gpkg"},
    ...                                  "candidates": {"method": "knn", "k": 6}})
    >>> ps.plan_kwargs()["k"], ps.sites_path
    (6, 's.gpkg')
    """

    def __init__(self, sections: dict, objects=None):
        self.sections = sections
        self.objects = dict(objects or {})

    @classmethod
    def from_sections(cls, sections: dict, origin=None) -> "PlanSettings":
        """Check *sections* (see :func:`check_settings`) and wrap them."""
        return cls(check_settings(sections, origin))

    @classmethod
    def from_kwargs(cls, **kw) -> "PlanSettings":
        """From :func:`mainspan.plan_layout` keywords, checked with the schema.

        Objects the API accepts beside plain values (a CostWeights, a
        DesignSettings, an opened Surface) are kept as given.
        """
        api = {s.api: s for s in _all() if s.api and s.api not in ("weights", "design")}
        sections, objects = {}, {}
        for name, v in kw.items():
            if name in ("weights", "design"):
                sec = "costs" if name == "weights" else "design"
                if isinstance(v, dict):
                    sections.setdefault(sec, {}).update(v)
                elif v is not None:
                    objects[name] = v       # a CostWeights / DesignSettings: checked already
            elif name in api:
                if v is not None:
                    sections.setdefault(api[name].section, {})[api[name].key] = v
            else:
                raise unknown_key("plan_layout()", name, sorted([*api, "weights", "design"]),
                                  what="keyword")
        return cls(check_settings(sections, lambda sec, key: f"plan_layout({_api_name(sec, key)})"),
                   objects)

    @property
    def sites_path(self):
        return self.sections.get("sites", {}).get("path")

    @property
    def output(self) -> dict:
        return dict(self.sections.get("output", {}))

    def read_kwargs(self) -> dict:
        """Keywords of :func:`mainspan.read_sites`."""
        read = {k: v for k, v in self.sections.get("sites", {}).items() if k != "path"}
        crs = self.sections.get("crs", {}).get("working")
        if crs:
            read["crs"] = crs
        return read

    def plan_kwargs(self) -> dict:
        """Keywords of :func:`mainspan.plan_layout` (only those set)."""
        sec = self.sections
        plan = {}
        for s in _all():
            if not s.api or s.api in ("weights", "design"):
                continue
            v = sec.get(s.section, {}).get(s.key)
            if v is not None:
                plan[s.api] = v
        if "class_costs" in plan:
            plan["class_costs"] = {int(k): float(v) for k, v in plan["class_costs"].items()}
        if sec.get("costs"):
            plan["weights"] = dict(sec["costs"])
        d = {k: v for k, v in sec.get("design", {}).items() if k != "system"}
        if sec.get("prices") and "prices" not in d:
            d["prices"] = dict(sec["prices"])
        if d:
            plan["design"] = d
        plan.update(self.objects)
        return plan


def _api_name(section, key):
    for s in _all():
        if s.section == section and s.key == key:
            if s.api in ("weights", "design"):
                return f"{s.api}[{key!r}]"
            return s.api or key
    return key
