"""Options shared by the commands: the plan options from the settings schema, run options,
and the checked settings of a plan from a project file and/or options (options win).

Every plan option comes from the settings schema (:mod:`mainspan.settings`): the flag is the
project-file key with dashes, older spellings stay as hidden aliases.
"""

from __future__ import annotations

import argparse

from ..errors import InputError

__all__ = ["add_option", "plan_options", "run_options", "settings_from"]


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit 2, as for every bad input
        self.exit(2, f"mainspan: error: {message} (see 'mainspan {self.prog.split()[-1]} --help')\n"
                  if " " in self.prog else f"mainspan: error: {message}\n")


def _dest(s):
    return f"{s.section}__{s.key}"


def _help(s):
    bits = [s.unit] if s.unit and s.unit != "-" else []
    if s.default is not None and s.kind not in ("path", "table", "list"):
        from ..settings import format_default
        bits.append(f"default {format_default(s)}")
    if s.bounds():
        bits.append(s.bounds())
    if s.choices:
        bits.insert(0, "one of " + ", ".join(s.choices))
    text = s.help + (f" [{'; '.join(bits)}]" if bits else "")
    return text.replace("%", "%%")


_METAVAR = {"number": "X", "integer": "N", "text": "TEXT", "path": "FILE", "value": "VALUE",
            "list": "ID", "table": "NAME=VALUE"}


def _add_option(g, s):
    kw = {"dest": _dest(s), "default": None}
    if s.kind == "bool":
        kw["action"] = argparse.BooleanOptionalAction
    else:
        kw["metavar"] = s.metavar or ("{" + ",".join(s.choices) + "}" if s.choices
                                      else _METAVAR[s.kind])
        if s.repeat:
            kw["action"] = "append"
    g.add_argument(s.option, help=_help(s), **kw)
    for alias in s.aliases:        # deprecated spellings: still accepted, not listed
        g.add_argument(alias, help=argparse.SUPPRESS, **kw)


def _plan_options(p, *, output=True):
    from ..settings import SECTIONS, all_settings

    groups = {}
    for sec, title in SECTIONS.items():
        if sec == "output" and not output:
            continue
        cli = [s for s in all_settings(sec) if s.on_cli]
        if not cli:
            continue
        g = groups[sec] = p.add_argument_group(title)
        for s in cli:
            _add_option(g, s)
    groups["design"].add_argument("--design", action="append", metavar="KEY=VALUE",
                                  help="any design setting as KEY=VALUE, e.g. "
                                  "velocity_max_mps=1.2 (repeatable; keys listed below)")


def _run_options(p, *, quiet=True):
    """Options of a run that are not plan settings (they change no result)."""
    if quiet:
        p.add_argument("--quiet", action="store_true", help="no progress on stderr")
    p.add_argument("--memory-limit", metavar="SIZE",
                   help="refuse work estimated to need more memory than SIZE, e.g. 4G "
                   "(default: half the installed memory)")


def _flags_to_settings(a):
    """Settings and their origins (option names) from parsed options, each value checked."""
    from ..settings import all_settings, parse_items, parse_text

    s, origin = {}, {}

    def put(st, val, where):
        s.setdefault(st.section, {})[st.key] = val
        origin[(st.section, st.key)] = where

    for st in all_settings():
        if not st.on_cli:
            continue
        v = getattr(a, _dest(st), None)
        if v is None:
            continue
        where = f"option {st.option}"
        if st.repeat:
            put(st, parse_items(st, v, where), where)
        elif st.kind == "bool":
            put(st, bool(v), where)
        else:
            put(st, parse_text(st, v, where), where)
    for item in getattr(a, "design", None) or ():
        k, sep, v = item.partition("=")
        if not sep or not k.strip():
            raise InputError(f"option --design: {item!r} must be KEY=VALUE, "
                             "e.g. --design velocity_max_mps=1.2")
        st = _design_key(k.strip())
        where = f"option --design {st.key}"
        put(st, parse_text(st, v, where), where)
    return s, origin


def _design_key(key):
    from ..settings import all_settings, unknown_key

    for st in all_settings("design"):
        if st.key == key:
            return st
    raise unknown_key("option --design", key, [st.key for st in all_settings("design")],
                      what="setting")


def _merge(base, over):
    out = {k: dict(v) if isinstance(v, dict) else v for k, v in base.items()}
    for sec, vals in over.items():
        out.setdefault(sec, {})
        out[sec].update(vals)
    return out


def _settings_from(a):
    """Checked plan settings from a project file and/or options (options win).

    Every value and the rules between them are checked here, before any work
    (:func:`mainspan.settings.check_settings`).
    """
    from ..settings.project import load_project
    from ..settings import PlanSettings

    flags, origin = _flags_to_settings(a)
    proj = None
    if a.project:
        proj = load_project(a.project)
        # paths given on the command line are relative to the working directory
        settings = _merge(proj.settings_for(None), flags)
        where_file = f"project {proj.path!r}"
    else:
        if "sites" not in flags or "path" not in flags.get("sites", {}):
            raise InputError("no sites given: pass --sites FILE or a project file "
                             "(mainspan plan PROJECT.toml)")
        settings, where_file = flags, "settings"

    def where(sec, key):
        return origin.get((sec, key), f"{where_file} [{sec}] {key}")
    return PlanSettings.from_sections(settings, where), proj


add_option = _add_option
plan_options = _plan_options
run_options = _run_options
settings_from = _settings_from
