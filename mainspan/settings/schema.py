"""The settings schema: one :class:`Setting` per plan setting, and lookups.

Static settings are rows of :data:`STATIC_SETTINGS`; the ``costs`` and
``design`` sections are derived from the CostWeights and DesignSettings
dataclass fields (see :mod:`mainspan.settings`).
"""

from __future__ import annotations

import dataclasses
import difflib
import functools
import re
from dataclasses import dataclass

from ..errors import InputError

__all__ = ["Setting", "STATIC_SETTINGS", "COMPARE_SETTINGS", "GROUPS", "SECTIONS", "LAYOUTS",
           "all_settings", "setting", "by_flag", "unknown_key", "bad_value", "format_default",
           "design_help", "ROUTES"]

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
    "execution": "execution (where the work runs; results are the same in every mode)",
    "network": "existing mains, forced and forbidden links, limits (mainspan.pipeline.extend)",
}

#: ``tree``: Prim's tree of link costs; ``gravity``: minimum arborescence towards the
#: outlet; ``whole-cost``: the tree of least whole-life cost (:mod:`mainspan.graph.wholecost`).
LAYOUTS = ("tree", "gravity", "whole-cost")

# --- route14: routes ---
#: ``straight``: straight links between sites; ``corridor``: least-cost routes over a cost
#: grid that meet at junction nodes (:mod:`mainspan.graph.corridor`).
ROUTES = ("straight", "corridor")
# --- end route14 ---

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

    def bounds(self) -> str:
        """The range of a number in words (``> 0``, ``>= 0 and <= 40``), or ``""``."""
        if self.kind not in ("number", "integer"):
            return ""
        out = []
        if self.lo is not None:
            out.append(f"{'>' if self.lo_open else '>='} {self.lo:g}")
        if self.hi is not None:
            out.append(f"{'<' if self.hi_open else '<='} {self.hi:g}")
        return " and ".join(out)

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
    # --- route14: vector layers that stop or price mains (mainspan.ground.vectors) ---
    S("rasters", "barrier", "list", None, "vector layer of polygons or lines no main may cross "
      "(repeatable)", run_info="barrier", api="barrier", repeat=True, metavar="LAYER"),
    S("rasters", "avoid", "table", None, "vector layer of polygons where each metre of main "
      "costs PRICE more, as LAYER=PRICE (repeatable)", run_info="avoid", api="avoid",
      repeat=True, metavar="LAYER=PRICE"),
    S("rasters", "crossing", "table", None, "vector layer of lines (roads, streams, railways) "
      "crossed at a lump sum PRICE each, as LAYER=PRICE (repeatable)", run_info="crossing",
      api="crossing", repeat=True, metavar="LAYER=PRICE"),
    # --- end route14 ---
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
    # --- route14: corridor routes (mainspan.ground.search, mainspan.graph.corridor) ---
    S("candidates", "route", "text", "straight", "straight: straight links between sites; "
      "corridor: least-cost routes over the rasters that meet at junction nodes",
      choices=ROUTES, run_info="route", api="route"),
    S("candidates", "connectivity", "integer", 16, "moves of the corridor search: 8, or 16 "
      "with knight's moves (less grid bias)", lo=8, hi=16, run_info="connectivity",
      api="connectivity"),
    S("candidates", "corridor_cell_m", "number", None, "cell of the corridor search (default: "
      "the land-cost raster's, else the terrain's)", unit="m", lo=0.0, lo_open=True,
      run_info="corridor_cell_m", api="corridor_cell_m"),
    S("candidates", "corridor_margin_m", "number", None, "reach of the corridor search beyond "
      "the sites (default: a tenth of their extent plus two cells)", unit="m", lo=0.0,
      run_info="corridor_margin_m", api="corridor_margin_m"),
    S("candidates", "corridor_tolerance_pct", "number", 1.0, "how much straightening a routed "
      "link may raise its price", unit="%", lo=0.0, hi=100.0,
      run_info="corridor_tolerance_pct", api="corridor_tolerance_pct"),
    S("candidates", "corridor_memory_mb", "number", 2048.0, "memory budget of the corridor "
      "search", unit="MiB", lo=0.0, lo_open=True, run_info="corridor_memory_mb",
      api="corridor_memory_mb"),
    # --- end route14 ---
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
    # --- route14: Steiner junctions for straight links (mainspan.graph.steiner) ---
    S("tree", "junctions", "bool", False, "add junction nodes between straight links where "
      "they lower the total (Steiner points)", run_info="junctions", api="junctions"),
    # --- end route14 ---
    # design (the DesignSettings fields follow) --------------------------------
    S("design", "system", "text", None, "size and check the mains as this system",
      choices=("pressure", "gravity"), run_info="system", api="system"),
    S("design", "catalog", "path", None, "pipe catalog CSV of the system's pipes",
      run_info="design_settings", api="design", metavar="CSV"),
    # prices: the price table itself (mainspan.hydraulics.prices); tables, not options ----
    *(S("prices", k, kind, None, f"price table item {k!r} (see mainspan.hydraulics.prices)", flag="",
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
    # hand16: output CRS and units, and the report's title block (recorded in run_info by
    # mainspan.writers.output_crs.output_layout, not by plan_layout)
    S("output", "output_crs", "text", "working", "CRS of the written layers and drawings: "
      "input (the sites' own CRS and units), working (the metric working CRS) or any CRS "
      "PROJ reads, e.g. EPSG:2223", metavar="CRS"),
    S("output", "output_lengths", "text", "m", "lengths and levels also given in the output "
      "CRS's unit (crs: extra columns such as length_us_ft) or metres only (m)",
      choices=("m", "crs")),
    S("output", "scheme_name", "text", None, "scheme name for the report's title block"),
    S("output", "revision", "text", None, "revision for the report's title block"),
    S("output", "issue_date", "text", None, "date for the report's title block (default: "
      "the day of the run, or of SOURCE_DATE_EPOCH)"),
    S("output", "prepared_by", "text", None, "prepared-by name for the report's title block"),
    S("output", "checked_by", "text", None, "checked-by name for the report's title block"),
    # execution (mainspan.execution): where tasks run; changes no result, so no run_info ------
    S("execution", "workers", "integer", None, "run tasks on a local Dask cluster of N worker "
      "processes (default: all in this process)", lo=1, metavar="N"),
    S("execution", "cluster", "text", None, "run tasks on the Dask scheduler at this address, "
      "e.g. tcp://10.0.0.5:8786 (inputs must be on storage the workers see)",
      metavar="ADDRESS"),
    S("execution", "connect_timeout_s", "number", 5.0, "give up reaching --cluster after this "
      "long", unit="s", lo=0.0, lo_open=True),
    S("execution", "chunk_links", "integer", 200000, "link costing of more links than this "
      "is split into tile-aligned chunks of about this many links, one task each", lo=1),
    # network (mainspan.pipeline.extend): existing mains, forced/forbidden links, limits ------
    S("network", "existing", "path", None, "line layer of existing mains to extend (optional "
      "diameter_mm and material fields); they cost nothing to keep", run_info="network",
      api="existing", metavar="LAYER"),
    S("network", "existing_layer", "text", None, "layer of a multi-layer existing-mains file",
      run_info="network", api="existing_layer"),
    S("network", "existing_diameter_field", "text", None, "field of the existing mains "
      "holding the nominal diameter in mm (default: 'diameter_mm' if present)",
      run_info="network", api="existing_diameter_field"),
    S("network", "existing_material_field", "text", None, "field of the existing mains "
      "holding the material (default: 'material' if present)", run_info="network",
      api="existing_material_field"),
    S("network", "tap_spacing_m", "number", None, "also offer taps along every existing main "
      "at this spacing (default: only the points nearest the sites)", unit="m", lo=0.0,
      lo_open=True, run_info="network", api="tap_spacing_m"),
    S("network", "tap_fee", "number", 0.0, "price of each new connection (tap) onto an "
      "existing main, added to the link's cost", lo=0.0, run_info="network", api="tap_fee"),
    S("network", "snap_m", "number", 1.0, "line ends and vertices this close to a site (or "
      "to each other) are on it", unit="m", lo=0.0, lo_open=True, run_info="network",
      api="snap_m"),
    S("network", "forced_links", "list", None, "links always in the tree, as site-id pairs "
      "ID1:ID2 (repeatable)", run_info="network", api="forced_links", repeat=True,
      metavar="ID1:ID2"),
    S("network", "forbidden_links", "list", None, "links never in the tree, as site-id pairs "
      "ID1:ID2 (repeatable)", run_info="network", api="forbidden_links", repeat=True,
      metavar="ID1:ID2"),
    S("network", "forced_links_layer", "path", None, "line layer of forced links, each from "
      "one site to another", run_info="network", api="forced_links_layer", metavar="LAYER"),
    S("network", "forbidden_links_layer", "path", None, "line layer of forbidden links, each "
      "from one site to another", run_info="network", api="forbidden_links_layer",
      metavar="LAYER"),
    S("network", "max_branch_sites", "integer", None, "most sites on one branch leaving a "
      "source", lo=1, run_info="network", api="max_branch_sites"),
    S("network", "max_branch_flow_lps", "number", None, "most demand carried by one branch "
      "leaving a source", unit="L/s", lo=0.0, lo_open=True, run_info="network",
      api="max_branch_flow_lps"),
    S("network", "max_links_per_node", "integer", None, "most links meeting at one node "
      "(a manifold, a source)", lo=2, run_info="network", api="max_links_per_node"),
    S("network", "source_capacity_lps", "table", None, "demand each source can supply, as "
      "ID=LPS (repeatable); every site is then served by one source within it",
      run_info="network", api="source_capacity_lps", repeat=True, metavar="ID=LPS"),
)

#: Settings of the ``compare`` command alone (the project file's ``[stability]``
#: section): not plan settings, so the plan front ends do not show them.
COMPARE_SETTINGS = (
    S("stability", "runs", "integer", 0, "perturbed runs per scenario; 0 switches them off",
      lo=0, hi=1000, flag="--stability", metavar="N"),
    S("stability", "perturb_pct", "number", 10.0, "half-width of the uniform factor on each "
      "link's land cost in the perturbed runs", unit="%", lo=0.0, hi=100.0, hi_open=True,
      metavar="X"),
    S("stability", "seed", "integer", 0, "seed of the perturbations", lo=0, metavar="N"),
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
# the whole-cost search limits (mainspan.graph.wholecost.WholeCostSettings) are [tree] keys
# with this prefix; the group is the plan_layout keyword ``whole_cost``
WHOLE_COST_PREFIX = "whole_cost_"
_WHOLE_COST_BOUNDS = {k: (1, None, False, False) for k in ("max_hops", "per_pass",
                                                          "max_evaluations")}
#: The groups of settings that a plan_layout keyword takes whole (section, key prefix).
GROUPS = {"weights": ("costs", ""), "design": ("design", ""),
          "whole_cost": ("tree", WHOLE_COST_PREFIX)}
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


def _from_dataclass(cls, section, *, run_info, api, bounds=None, prefix="", help_prefix=""):
    docs = _doc_entries(cls)
    bounds = bounds or {}
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
            section, prefix + f.name, kind, default, help_prefix + hlp,
            unit=_unit_of(f.name), choices=choices, optional="None" in str(f.type),
            run_info=run_info, api=api, metavar=metavar,
            aliases=_COST_ALIASES.get(f.name, ()) if section == "costs" else (),
            **_bounds_of(section, f.name, kind, bounds)))
    return out


def _bounds_of(section, name, kind, bounds):
    if kind not in ("number", "integer"):
        return {}
    if name in bounds:
        lo, hi, lo_open, hi_open = bounds[name]
        return dict(lo=lo, hi=hi, lo_open=lo_open, hi_open=hi_open)
    return _DERIVED_BOUNDS.get(section, {}) if kind == "number" else {}


@functools.lru_cache(maxsize=1)
def _all():
    from ..ground.costs import CostWeights
    from ..hydraulics import DesignSettings

    static = list(STATIC_SETTINGS)
    from ..hydraulics.design_settings import DESIGN_BOUNDS

    design = _from_dataclass(DesignSettings, "design", run_info="design_settings", api="design",
                             bounds=DESIGN_BOUNDS)
    have = {s.name for s in static}
    design = [s for s in design if s.name not in have]
    costs = _from_dataclass(CostWeights, "costs", run_info="weights", api="weights")
    from ..graph.tradeoff import WholeCostSettings

    whole = _from_dataclass(WholeCostSettings, "tree", run_info="whole_cost_settings",
                            api="whole_cost", bounds=_WHOLE_COST_BOUNDS, prefix=WHOLE_COST_PREFIX,
                            help_prefix="whole-cost layout: ")
    out = []
    for sec in SECTIONS:
        out += [s for s in static if s.section == sec]
        if sec == "costs":
            out += costs
        if sec == "tree":
            out += whole
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


# ------------------------------------------------------------------ help
def design_help(width=96) -> str:
    """Every design key with its unit, default and range, for ``mainspan plan --help``."""
    lines = ["design settings (--KEY VALUE or --design KEY=VALUE; unit, default, range):"]
    for s in all_settings("design"):
        unit = s.unit or "-"
        line = f"  {s.key:<28} [{unit}] default {format_default(s)}"
        if s.choices:
            line += f"; one of {', '.join(s.choices)}"
        if s.bounds():
            line += f"; {s.bounds()}"
        lines.append(line)
        lines.append(f"      {s.help}")
    return "\n".join(lines)
