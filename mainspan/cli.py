"""Command line: ``mainspan plan | demo | check | export | report | compare``.

The CLI only parses, calls the library and prints.  Results and a
one-screen summary go to stdout, progress to stderr.  Exit codes: 0 success,
2 bad input (one-line message, no traceback), 1 internal error.
"""

from __future__ import annotations

import argparse
import os
import sys

from ._version import __version__
from .errors import DataFileError, InputError, MainspanError
from .messages import CAUTION, format_quantities, print_design
from .messages import progress as _progress
from .pipeline.preflight import inputs_of as _inputs_of  # noqa: F401 - older private name
from .pipeline.preflight import preflight_compare, preflight_outputs  # noqa: F401

_print_design = print_design   # the older private name, kept for callers

__all__ = ["main"]

class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit 2, as for every bad input
        self.exit(2, f"mainspan: error: {message} (see 'mainspan {self.prog.split()[-1]} --help')\n"
                  if " " in self.prog else f"mainspan: error: {message}\n")


# --------------------------------------------------------------------- options
# Every plan option comes from the settings schema (mainspan.settings): the flag is the
# project-file key with dashes, older spellings stay as hidden aliases.
def _dest(s):
    return f"{s.section}__{s.key}"


def _help(s):
    bits = [s.unit] if s.unit and s.unit != "-" else []
    if s.default is not None and s.kind not in ("path", "table", "list"):
        from .settings import format_default
        bits.append(f"default {format_default(s)}")
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
    from .settings import SECTIONS, all_settings

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
    from .settings import all_settings, parse_items, parse_text, setting

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
    from .settings import all_settings, unknown_key

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


# --------------------------------------------------------------------- commands
def _settings_from(a):
    """Checked plan settings from a project file and/or options (options win).

    Every value and the rules between them are checked here, before any work
    (:func:`mainspan.settings.check_settings`).
    """
    from .settings.project import load_project
    from .settings import PlanSettings

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


def _run_plan(settings, *, quiet=False):
    """Read the sites and plan; *settings* is a PlanSettings or a settings dict."""
    from .pipeline.layout import plan_layout
    from .settings import PlanSettings
    from .sites.read import read_sites

    ps = settings if isinstance(settings, PlanSettings) else PlanSettings.from_sections(settings)
    sites = read_sites(ps.sites_path, **ps.read_kwargs())
    from .execution import engine_from_settings, use     # --workers / --cluster
    with engine_from_settings(ps.sections.get("execution")) as eng, use(eng):
        return plan_layout(sites, ps, progress=_progress(quiet)), ps.output


# project-file outputs written after the GeoPackage (each checked by preflight first)
_EXTRA_OUTPUTS = ("dxf", "landxml", "links_csv", "quantities_csv")


def _write_extra(lay, spec):
    """Write the report or a hand-off file named by an OutputSpec."""
    if spec.kind == "report":
        from .report.html import write_report
        write_report(lay, spec.path, overwrite=spec.overwrite)
    elif spec.kind == "dxf":
        from .writers.dxf import write_dxf
        write_dxf(lay, spec.path, overwrite=spec.overwrite)
    elif spec.kind == "landxml":
        from .writers.landxml import write_landxml
        write_landxml(lay, spec.path, overwrite=spec.overwrite)
    elif spec.kind == "links_csv":
        from .writers.tables import write_links_csv
        write_links_csv(lay, spec.path, overwrite=spec.overwrite)
    elif spec.kind == "quantities_csv":
        from .writers.tables import write_quantities_csv
        write_quantities_csv(lay, spec.path, overwrite=spec.overwrite)
    print(f"{spec.kind:<16}{spec.path}")


def cmd_plan(a):
    ps, proj = _settings_from(a)
    settings = ps.sections
    out = settings.get("output", {})
    if not out.get("gpkg"):
        raise InputError("no output given: pass --output LAYOUT.gpkg (or [output] gpkg in the "
                         "project file)")
    a.overwrite = bool(a.output__overwrite)     # preflight tells the option from the file
    specs = preflight_outputs(a, proj, [settings],
                              [(a.output__gpkg, "--output", "gpkg", "gpkg"),
                               (a.output__report, "--report", "report", "report")]
                              + [(getattr(a, f"output__{k}"), "--" + k.replace("_", "-"), k, k)
                                 for k in _EXTRA_OUTPUTS])
    if any(o.kind == "quantities_csv" for o in specs) and \
            not settings.get("design", {}).get("system"):
        raise InputError("[output] quantities_csv needs sized pipes: set [design] system "
                         "(pressure or gravity), or remove the key")
    gspec = specs[0]
    gpkg = gspec.path
    from .writers.gpkg import check_layers_free
    check_layers_free(gpkg, ("links", "nodes", "run_info"), overwrite=gspec.overwrite)
    from .writers.output_crs import check_output_settings, output_layout   # hand16
    check_output_settings(out, where="--output-crs")
    lay, _ = _run_plan(ps, quiet=a.quiet)
    files = output_layout(lay, out)     # the files in the output CRS; the report in metres
    files.write_gpkg(gpkg, overwrite=gspec.overwrite)
    print(lay.summary())
    print_design(lay)
    print(f"written         {gpkg} (layers: links, nodes, run_info"
          + (", quantities" if "quantities" in lay.tables else "") + ")")
    for spec in specs[1:]:
        _write_extra(lay if spec.kind == "report" else files, spec)
    if lay.system:
        print(CAUTION)
    return 0


def cmd_check(a):
    from .pipeline.check import check_inputs

    ps, proj = _settings_from(a)     # every value and combination checked here
    settings = ps.sections
    if proj is not None:   # the project's outputs: same checks as plan (existing files aside)
        a.overwrite = True
        preflight_outputs(a, proj, [settings], [(None, "--out", "gpkg", "gpkg"),
                                                (None, "--report", "report", "report")])
    report = check_inputs(settings)
    print(report.text())
    return 0 if report.ok else 2


def cmd_demo(a):
    from .demo import run_demo

    return run_demo(a.outdir, overwrite=a.overwrite, quiet=a.quiet)


def cmd_export(a):
    from .pipeline.layout import read_layout

    to = a.to
    ext = os.path.splitext(to)[1].lower()
    kind = {".dxf": "dxf", ".xml": "landxml", ".landxml": "landxml", ".csv": "links_csv",
            ".png": "figure", ".svg": "figure", ".pdf": "figure"}.get(ext)
    if kind is not None:
        from .safeio import OutputSpec, preflight
        preflight([OutputSpec("--to", to, kind)], [("layout", a.layout_gpkg)],
                  cli_overwrite=a.overwrite)
        if kind == "dxf":   # the DXF writer also writes the .prj beside it
            prj = os.path.splitext(to)[0] + ".prj"
            from .safeio import _same
            if _same(prj, a.layout_gpkg):
                raise InputError(f"--to {to!r}: its projection file {prj!r} would replace "
                                 "the layout; write the DXF elsewhere")
    lay = read_layout(a.layout_gpkg)
    if ext == ".dxf" and getattr(a, "section", False):     # hand16: long section as DXF
        if not _has_ground(lay):
            raise InputError(f"layout {a.layout_gpkg!r} has no ground levels, so a long "
                             "section would be empty; plan again with --terrain DEM")
        from .writers.section_dxf import write_section_dxf
        rep = write_section_dxf(lay, to, to_node=a.node, overwrite=a.overwrite)
        print(f"written {to} (datum {rep['datum_m']:.2f} m, vertical exaggeration "
              f"x{rep['vertical_exaggeration']:g})")
    elif ext == ".dxf":
        from .writers.dxf import write_dxf
        origin = None
        if a.origin:
            if a.origin == "auto":
                origin = "auto"
            else:
                try:
                    x0, y0 = (float(v) for v in a.origin.split(","))
                except ValueError:
                    raise InputError(f"option --origin: {a.origin!r} must be 'auto' or X,Y "
                                     "in metres") from None
                origin = (x0, y0)
        rep = write_dxf(lay, to, by=a.by, polylines="2d" if a.flat else "3d", origin=origin,
                        overwrite=a.overwrite)
        print(f"written {to}")
        for k, v in (rep or {}).items():
            print(f"  {k}: {v}")
    elif ext in (".xml", ".landxml"):
        from .writers.landxml import write_landxml
        write_landxml(lay, to, overwrite=a.overwrite)
        print(f"written {to}")
    elif ext == ".csv":
        from .writers.tables import write_links_csv, write_quantities_csv
        if a.quantities:
            write_quantities_csv(lay, to, overwrite=a.overwrite)
        else:
            write_links_csv(lay, to, overwrite=a.overwrite)
        print(f"written {to}")
    elif ext in (".png", ".svg", ".pdf"):
        if not _has_ground(lay):
            raise InputError(f"layout {a.layout_gpkg!r} has no ground levels (it was planned "
                             "without --terrain and its sites carry no elevations), so a long "
                             "section would be empty; plan again with --terrain DEM")
        from .report.plots import save_long_section
        save_long_section(lay, to, to_node=a.node, overwrite=a.overwrite)
        print(f"written {to}")
    else:
        raise InputError(f"option --to: cannot tell the format of {to!r}; use .dxf, .xml "
                         "(LandXML), .csv, or .png/.svg/.pdf for a long section")
    return 0


def _has_ground(lay) -> bool:
    """Whether a layout holds any ground level: profiles, link-end or node elevations."""
    import numpy as np

    def finite(v):
        return v is not None and bool(np.isfinite(np.asarray(v, dtype=float)).any())

    prof = lay.profiles
    return ((prof is not None and finite(prof.ground_m)) or finite(lay.links.get("z_from_m"))
            or finite(lay.links.get("z_to_m")) or finite(lay.nodes.get("elevation_m")))


def cmd_report(a):
    from .pipeline.layout import read_layout
    from .report.html import write_report

    from .safeio import OutputSpec, preflight
    preflight([OutputSpec("--out", a.out, "report")], [("layout", a.layout_gpkg)],
              cli_overwrite=a.overwrite)
    lay = read_layout(a.layout_gpkg)
    write_report(lay, a.out, overwrite=a.overwrite)
    print(f"written {a.out}")
    return 0


def cmd_compare(a):
    from .scenarios import compare_cli

    return compare_cli(a)


def build_parser():
    p = _Parser(prog="mainspan", description="Lay out the cheapest network of mains over real "
                "ground and hand it on to design, CAD and review.")
    p.add_argument("--version", action="version", version=f"mainspan {__version__}")
    p.add_argument("--show-versions", action="store_true",
                   help="print mainspan, Python, numpy, GDAL, PROJ and GEOS versions")
    sub = p.add_subparsers(dest="command", parser_class=_Parser)

    from .settings import design_help
    epilog = (design_help() + "\n\nEvery option is also a project-file key: [section] key, the "
              "option name with underscores.")
    pl = sub.add_parser("plan", help="plan a layout from sites (flags or a project file)",
                        epilog=epilog, formatter_class=argparse.RawDescriptionHelpFormatter)
    pl.add_argument("project", nargs="?", help="project TOML file (optional)")
    _run_options(pl)
    pl.add_argument("--allow-outside-project", action="store_true",
                    help="let the project file's [output] paths lie outside its folder")
    _plan_options(pl)
    pl.set_defaults(func=cmd_plan)

    ck = sub.add_parser("check", help="validate inputs without computing a layout",
                        epilog=design_help(), formatter_class=argparse.RawDescriptionHelpFormatter)
    ck.add_argument("project", nargs="?", help="project TOML file (optional)")
    _run_options(ck, quiet=False)
    _plan_options(ck, output=False)
    ck.add_argument("--allow-outside-project", action="store_true",
                    help="let the project file's [output] paths lie outside its folder")
    ck.set_defaults(func=cmd_check)

    dm = sub.add_parser("demo", help="write the demo scenario to OUTDIR and plan it")
    dm.add_argument("outdir")
    dm.add_argument("--overwrite", action="store_true", help="replace existing outputs")
    dm.add_argument("--quiet", action="store_true", help="no progress on stderr")
    dm.set_defaults(func=cmd_demo)

    ex = sub.add_parser("export", help="export a layout to DXF, LandXML, CSV or a long section")
    ex.add_argument("layout_gpkg", metavar="LAYOUT.gpkg")
    ex.add_argument("--to", required=True, metavar="FILE",
                    help="output: .dxf, .xml (LandXML 1.2), .csv, .png/.svg/.pdf (long section)")
    ex.add_argument("--by", choices=("role", "diameter"), default="role",
                    help="DXF layers by role or by diameter")
    ex.add_argument("--flat", action="store_true", help="DXF: 2D polylines instead of 3D")
    ex.add_argument("--origin", metavar="auto|X,Y", help="DXF: subtract a local origin")
    ex.add_argument("--quantities", action="store_true", help="CSV: the bill of quantities")
    ex.add_argument("--section", action="store_true", help="DXF: the long section (profile "
                    "and data bands, path as --node) instead of the plan")
    ex.add_argument("--node", metavar="ID", help="long section: path from the root to this node "
                    "(default: the longest path)")
    ex.add_argument("--overwrite", action="store_true", help="replace an existing file")
    ex.set_defaults(func=cmd_export)

    rp = sub.add_parser("report", help="write the HTML review report of a layout")
    rp.add_argument("layout_gpkg", metavar="LAYOUT.gpkg")
    rp.add_argument("--out", required=True, metavar="HTML")
    rp.add_argument("--overwrite", action="store_true", help="replace an existing file")
    rp.set_defaults(func=cmd_report)

    cp = sub.add_parser("compare", help="plan and compare the scenarios of a project file")
    cp.add_argument("project", help="project TOML file with [scenarios.NAME] sections")
    cp.add_argument("--out", metavar="GPKG", help="GeoPackage for all scenario layers")
    cp.add_argument("--report", metavar="HTML", help="HTML report with the comparison")
    cp.add_argument("--stability", type=int, metavar="N", help="perturbation runs per scenario")
    cp.add_argument("--perturb-pct", type=float, metavar="X", help="± land-cost perturbation")
    cp.add_argument("--seed", type=int, help="seed of the perturbations")
    cp.add_argument("--memory-limit", metavar="SIZE",
                    help="refuse work estimated to need more memory than SIZE, e.g. 4G "
                    "(default: half the installed memory)")
    cp.add_argument("--overwrite", action="store_true", help="replace existing outputs")
    cp.add_argument("--allow-outside-project", action="store_true",
                    help="let the project file's [output] paths lie outside its folder")
    cp.add_argument("--quiet", action="store_true", help="no progress on stderr")
    from .settings import SECTIONS, all_settings     # --workers, --cluster (mainspan.execution)
    gx = cp.add_argument_group(SECTIONS["execution"])
    for s in all_settings("execution"):
        _add_option(gx, s)
    cp.set_defaults(func=cmd_compare)
    return p


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.show_versions:
        from .versions import show_versions
        show_versions()
        return 0
    if not getattr(args, "command", None):
        parser.print_help()
        return 2
    old_term = _catch_sigterm()
    try:
        from .safeio import parse_size, set_memory_limit
        ml = getattr(args, "memory_limit", None)
        set_memory_limit(parse_size(ml) if ml is not None else None)
        return int(args.func(args) or 0)
    except _Terminated:
        print("mainspan: terminated; no output was left half-written", file=sys.stderr)
        return 143
    except (InputError, DataFileError) as exc:
        msg = " ".join(str(exc).split())
        print(f"mainspan: error: {msg}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("mainspan: interrupted", file=sys.stderr)
        return 130
    except MainspanError as exc:
        print(f"mainspan: internal error: {' '.join(str(exc).split())}", file=sys.stderr)
        return 1
    except Exception as exc:  # noqa: BLE001 - last resort, keep it to one line
        if os.environ.get("MAINSPAN_DEBUG"):
            raise
        print(f"mainspan: internal error: {type(exc).__name__}: {exc} (set MAINSPAN_DEBUG=1 "
              "for a traceback and please report it)", file=sys.stderr)
        return 1
    finally:
        _restore_sigterm(old_term)


class _Terminated(BaseException):
    """SIGTERM, raised so that temporary files are removed on the way out."""


def _on_sigterm(signum, frame):
    raise _Terminated()


def _catch_sigterm():
    import signal
    import threading
    if threading.current_thread() is not threading.main_thread():
        return None
    try:
        return signal.signal(signal.SIGTERM, _on_sigterm)
    except (ValueError, OSError):
        return None


def _restore_sigterm(old):
    import signal
    if old is not None:
        try:
            signal.signal(signal.SIGTERM, old)
        except (ValueError, OSError):
            pass
