"""Project files: one TOML file that describes a whole run.

Every key is validated; an unknown key is an error naming it, its section
and the nearest valid key.  Paths are relative to the project file.

Layout of a project file (all sections optional except ``[sites]``)::

    [sites]        path, layer, id_field, role_field, demand_field, elevation_field,
                   x_field, y_field, sites_crs, merge_within_m,
                   area_field, runoff_field, population_field, min_pressure_field
    [crs]          working                       # overrides the automatic choice
    [rasters]      terrain, raster_crs, on_nodata, sample_spacing_m,
                   cost_expression, class_costs (table code -> cost per m)
    [rasters.land_cost]   name = "raster.tif"    # one or more named rasters
    [costs]        length, land, climb, descent, steep_slope_pct, steep_per_m, fixed
    [candidates]   method, k, max_link_m, max_complete_nodes
    [tree]         roots, allow_forest, use_site_z, layout
    [design]       system, catalog (pipe catalog CSV), prices (price table CSV or TOML),
                   and any design setting (see mainspan.hydraulics.DesignSettings)
    [prices]       the price table itself (see mainspan.prices); a [design] prices
                   file wins over it
    [output]       gpkg, overwrite, report, dxf, landxml, links_csv, quantities_csv
    [scenarios.NAME]  any of the sections above, overriding the base for that scenario;
                      ``description`` says what the scenario is.
"""

from __future__ import annotations

import copy
import dataclasses
import difflib
import os
import tomllib
from dataclasses import dataclass, field

from .errors import DataFileError, InputError

__all__ = ["Project", "load_project", "plan_kwargs", "check_design_keys", "SCHEMA"]

_STR, _NUM, _INT, _BOOL, _LIST, _TABLE = "text", "number", "integer", "true/false", "list", "table"

SCHEMA = {
    "sites": {"path": _STR, "layer": _STR, "id_field": _STR, "role_field": _STR,
              "demand_field": _STR, "elevation_field": _STR, "x_field": _STR, "y_field": _STR,
              "sites_crs": _STR, "merge_within_m": _NUM,
              "area_field": _STR, "runoff_field": _STR, "population_field": _STR,  # design basis
              "min_pressure_field": _STR},
    "crs": {"working": _STR},
    "rasters": {"terrain": _STR, "raster_crs": _STR, "on_nodata": _STR,
                "sample_spacing_m": _NUM, "cost_expression": _STR, "class_costs": _TABLE,
                "land_cost": _TABLE},
    "costs": None,      # filled from CostWeights
    "candidates": {"method": _STR, "k": _INT, "max_link_m": _NUM, "max_complete_nodes": _INT},
    "tree": {"roots": _LIST, "allow_forest": _BOOL, "use_site_z": _BOOL, "layout": _STR},
    "design": None,     # filled from DesignSettings
    "output": {"gpkg": _STR, "overwrite": _BOOL, "report": _STR, "dxf": _STR, "landxml": _STR,
               "links_csv": _STR, "quantities_csv": _STR},
    "prices": {"placeholder": _BOOL, "excavation": _TABLE, "shoring": _TABLE, "bedding": _NUM,
               "reinstatement": _TABLE, "fitting": _TABLE, "manhole": _TABLE, "crossing": _NUM,
               "pump_station": _TABLE, "energy": _TABLE, "operation": _TABLE},
    "scenarios": _TABLE,
    "stability": {"runs": _INT, "perturb_pct": _NUM, "seed": _INT},
}
_PATH_KEYS = {("sites", "path"), ("rasters", "terrain"), ("output", "gpkg"), ("output", "report"),
              ("output", "dxf"), ("output", "landxml"), ("output", "links_csv"),
              ("output", "quantities_csv"), ("design", "catalog"),
              ("design", "prices"), ("design", "surface_raster")}


def _dataclass_schema(cls):
    out = {}
    for f in dataclasses.fields(cls):
        t = str(f.type)
        if "bool" in t:
            out[f.name] = _BOOL
        elif "int" in t and "float" not in t:
            out[f.name] = _INT
        elif "float" in t:
            out[f.name] = _NUM
        else:
            out[f.name] = None  # any
    return out


def _schema():
    from .costs import CostWeights

    s = copy.deepcopy(SCHEMA)
    s["costs"] = _dataclass_schema(CostWeights)
    try:
        from .hydraulics import DesignSettings
        s["design"] = {"system": _STR, "catalog": _STR, **_dataclass_schema(DesignSettings)}
    except ImportError:  # design stage not available: only 'system' is known
        s["design"] = {"system": _STR}
    return s


@dataclass
class Project:
    """A validated project file: base settings plus named scenario overrides."""

    path: str
    root: str
    base: dict
    scenarios: dict = field(default_factory=dict)
    stability: dict = field(default_factory=dict)

    def settings_for(self, name=None) -> dict:
        """The merged settings of scenario *name* (None = the base)."""
        if name is None or name == "base":
            return copy.deepcopy(self.base)
        if name not in self.scenarios:
            raise InputError(f"project {self.path!r}: no scenario {name!r}; scenarios are: "
                             f"{', '.join(self.scenarios) or '(none)'}")
        merged = copy.deepcopy(self.base)
        for sec, vals in self.scenarios[name].items():
            if sec == "description":
                continue
            if isinstance(vals, dict):
                merged.setdefault(sec, {})
                for k, v in vals.items():
                    if isinstance(v, dict) and isinstance(merged[sec].get(k), dict):
                        merged[sec][k] = {**merged[sec][k], **v}
                    else:
                        merged[sec][k] = v
        return merged


def _check_type(where, key, val, kind):
    ok = {
        _STR: isinstance(val, str),
        _NUM: isinstance(val, (int, float)) and not isinstance(val, bool),
        _INT: isinstance(val, int) and not isinstance(val, bool),
        _BOOL: isinstance(val, bool),
        _LIST: isinstance(val, list),
        _TABLE: isinstance(val, dict),
        None: True,
    }[kind]
    if not ok:
        raise InputError(f"{where}: key {key!r} must be {kind}, got {val!r}")


def _validate_sections(doc, where, schema, *, allow_scenarios=True):
    out = {}
    for sec, vals in doc.items():
        if sec not in schema or (sec == "scenarios" and not allow_scenarios) or \
                (sec == "description" and allow_scenarios):
            if sec == "description" and not allow_scenarios:
                continue
            valid = [s for s in schema if allow_scenarios or s not in ("scenarios", "stability")]
            close = difflib.get_close_matches(sec, valid, n=1)
            raise InputError(f"{where}: unknown section [{sec}]"
                             + (f"; did you mean [{close[0]}]?" if close else
                                f"; valid sections: {', '.join(valid)}"))
        if sec == "scenarios":
            continue
        if not isinstance(vals, dict):
            raise InputError(f"{where}: [{sec}] must be a table of keys")
        keys = schema[sec]
        for k, v in vals.items():
            if k not in keys:
                close = difflib.get_close_matches(k, list(keys), n=1)
                raise InputError(f"{where}: unknown key {k!r} in [{sec}]"
                                 + (f"; did you mean {close[0]!r}?" if close else
                                    f"; valid keys: {', '.join(keys)}"))
            _check_type(f"{where} [{sec}]", k, v, keys[k])
        out[sec] = dict(vals)
    return out


def _check_output_extensions(d, where):
    """Each [output] key accepts only its own kind of file (see mainspan.safeio.EXTENSIONS)."""
    from .safeio import EXTENSIONS

    for key, val in (d.get("output") or {}).items():
        if key in EXTENSIONS and isinstance(val, str) and not val.lower().endswith(EXTENSIONS[key]):
            raise InputError(f"{where} [output] {key} = {val!r}: must end in "
                             f"{' or '.join(EXTENSIONS[key])}; choose a file name with that "
                             "extension")


def _resolve_paths(d, root):
    for sec, key in _PATH_KEYS:
        if sec in d and isinstance(d[sec].get(key), str):
            d[sec][key] = os.path.normpath(os.path.join(root, d[sec][key]))
    rl = d.get("rasters", {}).get("land_cost")
    if isinstance(rl, dict):
        for name, p in rl.items():
            if not isinstance(p, str):
                raise InputError(f"[rasters.land_cost] {name!r} must be a raster path, got {p!r}")
            rl[name] = os.path.normpath(os.path.join(root, p))
    return d


def load_project(path) -> Project:
    """Read and validate a project TOML file.

    Parameters
    ----------
    path : str or path-like
        The TOML file; paths inside it are relative to its folder.

    Returns
    -------
    Project

    Examples
    --------
    >>> import tempfile, os
    >>> d = tempfile.mkdtemp(); p = os.path.join(d, "p.toml")
    >>> _ = open(p, "w").write('[sites]\\npath = "s.gpkg"\\n[candidates]\\nk = 6\\n')
    >>> load_project(p).base["candidates"]["k"]
    6
    """
    path = os.fspath(path)
    if not os.path.exists(path):
        raise DataFileError(f"project file {path!r} does not exist; check the path")
    if os.path.isdir(path):
        raise InputError(f"project file {path!r} is a folder; give the .toml file inside it")
    try:
        with open(path, "rb") as f:
            doc = tomllib.load(f)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"project file {path!r} is not valid TOML: {exc}") from None
    except UnicodeDecodeError:
        raise InputError(f"project file {path!r} is not a text file (TOML must be UTF-8 "
                         "text); check the path") from None
    except OSError as exc:
        raise DataFileError(f"project file {path!r} cannot be read: {exc.strerror or exc}; "
                            "check the path and its permissions") from None
    schema = _schema()
    root = os.path.dirname(os.path.abspath(path))
    base = _validate_sections(doc, f"project {path!r}", schema)
    stability = base.pop("stability", {})
    if "sites" not in base or "path" not in base["sites"]:
        raise InputError(f"project {path!r}: [sites] path is required (the point layer of sites)")
    _check_output_extensions(base, f"project {path!r}")
    base = _resolve_paths(base, root)
    if "prices" in base:        # check the table now, while its lines can be named
        from .prices import prices_from_mapping
        with open(path, encoding="utf-8", errors="replace") as f:
            prices_from_mapping(base["prices"], where=f"project {path} [prices]", text=f.read())
    scen = {}
    for name, body in (doc.get("scenarios") or {}).items():
        if not isinstance(body, dict):
            raise InputError(f"project {path!r}: [scenarios.{name}] must be a table")
        if name == "base":
            raise InputError(f"project {path!r}: 'base' is reserved; rename [scenarios.base]")
        v = _validate_sections(body, f"project {path!r} [scenarios.{name}]", schema,
                               allow_scenarios=False)
        if "description" in body:
            if not isinstance(body["description"], str):
                raise InputError(f"project {path!r} [scenarios.{name}]: description must be text")
            v["description"] = body["description"]
        _check_output_extensions(v, f"project {path!r} [scenarios.{name}]")
        scen[name] = _resolve_paths(v, root)
    return Project(path=path, root=root, base=base, scenarios=scen, stability=stability)


def check_design_keys(settings: dict, *, where="[design]"):
    """Refuse a design setting that DesignSettings does not know, naming the nearest one."""
    known = _schema()["design"]
    for k in settings.get("design", {}):
        if k not in known:
            close = difflib.get_close_matches(k, list(known), n=1)
            raise InputError(f"{where}: unknown setting {k!r}"
                             + (f"; did you mean {close[0]!r}?" if close else
                                f"; valid settings: {', '.join(known)}"))


def plan_kwargs(settings: dict):
    """Split merged settings into (read_sites kwargs, plan_layout kwargs, output dict)."""
    s = settings.get("sites", {})
    read = {k: v for k, v in s.items() if k != "path"}
    crs = settings.get("crs", {}).get("working")
    if crs:
        read["crs"] = crs
    r = dict(settings.get("rasters", {}))
    plan = {}
    for k in ("terrain", "raster_crs", "on_nodata", "sample_spacing_m", "cost_expression"):
        if k in r:
            plan[k] = r[k]
    if "land_cost" in r:
        plan["land_cost"] = r["land_cost"]
    if "class_costs" in r:
        try:
            plan["class_costs"] = {int(k): float(v) for k, v in r["class_costs"].items()}
        except (TypeError, ValueError):
            raise InputError("[rasters.class_costs] keys must be integer class codes and "
                             "values costs per metre") from None
    if settings.get("costs"):
        plan["weights"] = dict(settings["costs"])
    c = settings.get("candidates", {})
    if "method" in c:
        plan["candidates"] = c["method"]
    for k in ("k", "max_link_m", "max_complete_nodes"):
        if k in c:
            plan[k] = c[k]
    t = settings.get("tree", {})
    for k in ("roots", "allow_forest", "use_site_z", "layout"):
        if k in t:
            plan[k] = t[k]
    d = dict(settings.get("design", {}))
    if settings.get("prices") and "prices" not in d:
        d["prices"] = dict(settings["prices"])
    if "system" in d:
        plan["system"] = d.pop("system")
    if d:
        plan["design"] = d
    return s.get("path"), read, plan, dict(settings.get("output", {}))
