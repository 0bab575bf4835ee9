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
    [prices]       the price table itself (see mainspan.hydraulics.prices); a [design] prices
                   file wins over it
    [output]       gpkg, overwrite, report, dxf, landxml, links_csv, quantities_csv
    [scenarios.NAME]  any of the sections above, overriding the base for that scenario;
                      ``description`` says what the scenario is.
"""

from __future__ import annotations

import copy
import difflib
import os
import tomllib
from dataclasses import dataclass, field

from ..errors import DataFileError, InputError
from . import SECTIONS, PlanSettings, check_value, setting, unknown_key

__all__ = ["Project", "load_project", "plan_kwargs", "check_design_keys", "SCHEMA"]

# Every plan key is declared once in mainspan.settings, and the compare command's
# [stability] keys too (COMPARE_SETTINGS); [scenarios.NAME] overrides are this module's own.


def _schema():
    """``section -> {key: Setting or kind}`` of a project file."""
    from . import SECTIONS, all_settings
    from .schema import COMPARE_SETTINGS

    s = {sec: {x.key: x for x in all_settings(sec)} for sec in SECTIONS}
    s["scenarios"] = "table"
    s["stability"] = {x.key: x for x in COMPARE_SETTINGS}
    return s


def __getattr__(name):
    if name == "SCHEMA":        # kept for callers of the old table: section -> key -> kind
        return {sec: (keys if isinstance(keys, str) else {k: v.kind for k, v in keys.items()})
                for sec, keys in _schema().items()}
    raise AttributeError(name)


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
        out[sec] = {}
        for k, v in vals.items():
            if k not in keys:
                close = difflib.get_close_matches(k, list(keys), n=1)
                raise InputError(f"{where}: unknown key {k!r} in [{sec}]"
                                 + (f"; did you mean {close[0]!r}?" if close else
                                    f"; valid keys: {', '.join(keys)}"))
            out[sec][k] = check_value(keys[k], v, f"{where} [{sec}] {k}")
    return out


def _check_output_extensions(d, where):
    """Each [output] key accepts only its own kind of file (see mainspan.safeio.EXTENSIONS)."""
    from ..safeio import EXTENSIONS

    for key, val in (d.get("output") or {}).items():
        if key in EXTENSIONS and isinstance(val, str) and not val.lower().endswith(EXTENSIONS[key]):
            raise InputError(f"{where} [output] {key} = {val!r}: must end in "
                             f"{' or '.join(EXTENSIONS[key])}; choose a file name with that "
                             "extension")


def _resolve_paths(d, root):
    for sec, vals in d.items():
        if not isinstance(vals, dict) or sec not in SECTIONS:
            continue
        for key, v in vals.items():
            if isinstance(v, str) and setting(sec, key).kind == "path":
                vals[key] = os.path.normpath(os.path.join(root, v))
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
        from ..hydraulics.prices import prices_from_mapping
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
            raise unknown_key(where, k, list(known), what="setting")


def plan_kwargs(settings: dict):
    """Split merged settings into (sites path, read_sites kwargs, plan_layout kwargs, output).

    Only a split: :func:`mainspan.plan_layout` checks the keywords (every
    value and the rules between them) before any work, and so does the
    command line on the merged settings.
    """
    ps = settings if isinstance(settings, PlanSettings) else PlanSettings(settings)
    return ps.sites_path, ps.read_kwargs(), ps.plan_kwargs(), ps.output
