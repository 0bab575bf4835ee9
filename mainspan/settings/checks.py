"""Checks of setting values and of the rules between settings, before any work.

One message template: ``<where>: <what> must be <expected>, got <value>; <fix>``.
"""

from __future__ import annotations

import difflib
import math
import os
import tomllib

from ..errors import InputError
from .schema import (COMPARE_SETTINGS, SECTIONS, WHOLE_COST_PREFIX, Setting, all_settings,
                     bad_value, format_default, unknown_key)

__all__ = ["check_value", "parse_text", "parse_items", "check_settings", "design_settings",
           "check_stability"]


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
    # --- route14: the corridor search moves by 8 or 16 steps ---
    conn = _get(d, "candidates", "connectivity")
    if conn is not None and conn not in (8, 16):
        raise bad_value(where("candidates", "connectivity"), "the connectivity", "8 or 16", conn,
                        "give --connectivity 8 or --connectivity 16")
    if _get(d, "tree", "junctions", False) and _get(d, "candidates", "route") == "corridor":
        raise bad_value(where("tree", "junctions"), "junctions", "used with straight links",
                        "--route corridor", "drop --junctions: corridor routes make their own "
                        "junctions where they share ground")
    # --- end route14 ---
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
    # --- dask18: one execution mode (mainspan.execution) ---
    if _get(d, "execution", "workers") is not None and _get(d, "execution", "cluster"):
        raise bad_value(where("execution", "cluster"), "--cluster", "given without --workers",
                        f"cluster {d['execution']['cluster']} with workers "
                        f"{d['execution']['workers']}", "--workers N starts a local cluster, "
                        "--cluster ADDRESS attaches to a running one; give only one")
    # --- end dask18 ---
    method = _get(d, "candidates", "method")
    if method is not None:
        from ..graph.candidates import CANDIDATE_BUILDERS
        for part in str(method).split("+"):
            CANDIDATE_BUILDERS.get(part.strip())     # names the option and the nearest name


def _build_objects(d, where):
    """Build the cost weights and design settings now, so their own checks run up front."""
    from ..ground.costs import CostWeights

    if d.get("costs"):
        try:
            CostWeights(**d["costs"])
        except InputError as exc:
            key = next((k for k in d["costs"] if k in str(exc)), next(iter(d["costs"])))
            raise InputError(f"{where('costs', key)}: {exc}") from None
    whole = [k for k, v in d.get("tree", {}).items()
             if k.startswith(WHOLE_COST_PREFIX) and v is not None]
    if whole:
        from ..graph.tradeoff import WholeCostSettings

        n = len(WHOLE_COST_PREFIX)
        try:
            WholeCostSettings(**{k[n:]: d["tree"][k] for k in whole})
        except InputError as exc:
            key = next((k for k in whole if f"'{k[n:]}'" in str(exc)), whole[0])
            raise InputError(f"{where('tree', key)}: {exc}") from None
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


def check_stability(values: dict, origin=None) -> dict:
    """The ``compare`` command's ``[stability]`` settings, checked, defaults filled in.

    ``origin(key) -> str`` names where each value came from (an option or the
    project file); default ``"[stability] key"``.
    """
    where = origin or (lambda key: f"[stability] {key}")
    keys = {s.key: s for s in COMPARE_SETTINGS}
    out = {k: s.default for k, s in keys.items()}
    for k, v in (values or {}).items():
        if k not in keys:
            raise unknown_key("[stability]", k, list(keys))
        if v is not None:
            out[k] = check_value(keys[k], v, where(k))
    return out


def design_settings(design, system):
    """DesignSettings from None, a dict (keys as in the project file) or an instance.

    ``catalog`` (a CSV path) is read once and becomes the catalog of *system*;
    ``pressure_catalog`` / ``gravity_catalog`` / ``prices`` given as paths are read.
    """
    from ..hydraulics import DesignSettings
    from ..hydraulics.catalog import read_catalog

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
        from ..hydraulics.prices import read_prices
        d["prices"] = read_prices(d["prices"])
    elif isinstance(d.get("prices"), dict):
        from ..hydraulics.prices import prices_from_mapping
        d["prices"] = prices_from_mapping(d["prices"])
    try:
        return DesignSettings(**d)
    except TypeError as exc:
        raise InputError(f"design settings: {exc}; see mainspan.hydraulics.DesignSettings "
                         "for the valid keys") from None
