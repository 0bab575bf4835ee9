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
from .project import check_design_keys

__all__ = ["main"]

CAUTION = ("CAUTION: preliminary design aid only. Check with a licensed engineer against local "
           "codes and utility standards; locate existing services before any digging; trenches "
           "deeper than about 1.5 m need shoring under most safety rules.")


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit 2, as for every bad input
        self.exit(2, f"mainspan: error: {message} (see 'mainspan {self.prog.split()[-1]} --help')\n"
                  if " " in self.prog else f"mainspan: error: {message}\n")


def _progress(quiet):
    if quiet:
        return None
    last = {}

    def say(stage, done, total):
        if done == 0 and stage not in last:
            last[stage] = -1.0
            print(f"[mainspan] {stage} …", file=sys.stderr, flush=True)
        elif stage.startswith("stability") and total and done:
            # long, repeated work: a line every 10 % so that the user sees it moving
            step = int(10 * done / total)
            if step > last.get(stage, -1):
                last[stage] = step
                print(f"[mainspan] {stage} {done}/{total}", file=sys.stderr, flush=True)
    return say


# --------------------------------------------------------------------- options
def _site_options(p):
    g = p.add_argument_group("sites")
    g.add_argument("--sites", metavar="FILE", help="point layer of sites (any OGR format or CSV)")
    g.add_argument("--layer", help="layer of a multi-layer sites file")
    g.add_argument("--id-field", help="field holding site ids (default: 'id' if present)")
    g.add_argument("--role-field", help="field holding roles: source, outlet, demand, junction "
                   "(default: 'role' if present)")
    g.add_argument("--demand-field", help="field holding demands in L/s "
                   "(default: 'demand_lps' if present)")
    g.add_argument("--elevation-field", help="field holding site elevations in metres")
    g.add_argument("--x-field", help="CSV column of x / longitude (default x)")
    g.add_argument("--y-field", help="CSV column of y / latitude (default y)")
    g.add_argument("--sites-crs", metavar="CRS",
                   help="CRS of the site coordinates: needed when the file has none (CSV); "
                   "when given, it overrides the file's own CRS (to correct a wrong one)")
    g.add_argument("--crs", metavar="CRS", help="working CRS (projected); default: the input's "
                   "projected CRS or the UTM zone holding most sites")
    g.add_argument("--merge-within", type=float, metavar="M",
                   help="merge sites closer than M metres instead of failing")


def _raster_options(p):
    g = p.add_argument_group("ground")
    g.add_argument("--terrain", metavar="DEM", help="terrain raster (DEM)")
    g.add_argument("--land-cost", action="append", metavar="[NAME=]RASTER",
                   help="land-cost raster, cost per metre of main; repeat with names")
    g.add_argument("--cost-expression", metavar="EXPR",
                   help="unit cost per metre from the named land-cost rasters, "
                   "e.g. 'base + where(wet > 0, 200, 0)'")
    g.add_argument("--raster-crs", metavar="CRS", help="CRS of rasters that carry none")
    g.add_argument("--on-nodata", choices=("barrier", "skip", "error"),
                   help="links crossing nodata or leaving a raster: barrier (default), skip, error")
    g.add_argument("--sample-spacing-m", type=float, metavar="M",
                   help="terrain sampling step (default half a cell)")
    g.add_argument("--memory-limit", metavar="SIZE",
                   help="refuse work estimated to need more memory than SIZE, e.g. 4G "
                   "(default: half the installed memory)")
    g.add_argument("--use-site-z", action="store_true", default=None,
                   help="use the sites' own Z for node elevations where given")
    w = p.add_argument_group("cost weights")
    for flag, key, hlp in (("--w-length", "length", "cost per metre of plan length (default 1)"),
                           ("--w-land", "land", "multiplier on the land-cost integral (default 1)"),
                           ("--w-climb", "climb", "cost per metre climbed"),
                           ("--w-descent", "descent", "cost per metre descended"),
                           ("--steep-slope-pct", "steep_slope_pct", "slope above which steep_per_m applies"),
                           ("--w-steep", "steep_per_m", "cost per metre steeper than --steep-slope-pct"),
                           ("--w-fixed", "fixed", "fixed cost per link")):
        w.add_argument(flag, dest=f"w_{key}", type=float, metavar="X", help=hlp)


def _tree_options(p):
    g = p.add_argument_group("candidates and tree")
    g.add_argument("--candidates", metavar="NAME",
                   help="candidate builder: delaunay (default), knn, radius, complete, or a "
                   "union such as delaunay+knn")
    g.add_argument("--k", type=int, help="neighbours per site for knn (default 8)")
    g.add_argument("--max-link-m", type=float, metavar="M", help="longest candidate link")
    g.add_argument("--root", action="append", metavar="ID",
                   help="root site id (repeatable); default: sites with role source/outlet")
    g.add_argument("--allow-forest", action="store_true", default=None,
                   help="return one tree per connected part instead of failing")
    d = p.add_argument_group("design")
    d.add_argument("--system", choices=("pressure", "gravity"), help="size and check the mains")
    from .layout import LAYOUTS
    d.add_argument("--layout", choices=LAYOUTS,
                   help="tree: Prim's minimum tree (default); gravity: minimum arborescence "
                   "towards the outlet with direction-dependent costs; whole-cost: the tree "
                   "of least whole-life cost for pressure mains (sized pipes, trench, pump "
                   "energy), searched from Prim's tree")
    d.add_argument("--catalog", metavar="CSV", help="pipe catalog CSV")
    d.add_argument("--prices", metavar="FILE",
                   help="price table (CSV or TOML; `mainspan demo` writes a template)")
    d.add_argument("--design", action="append", metavar="KEY=VALUE",
                   help="any design setting, e.g. velocity_max_mps=1.2 (repeatable)")


def _parse_value(v):
    low = v.lower()
    if low in ("true", "yes"):
        return True
    if low in ("false", "no"):
        return False
    try:
        return int(v)
    except ValueError:
        pass
    try:
        return float(v)
    except ValueError:
        return v


def _flags_to_settings(a) -> dict:
    s: dict = {}

    def put(sec, key, val):
        if val is not None:
            s.setdefault(sec, {})[key] = val

    put("sites", "path", a.sites)
    for k in ("layer", "id_field", "role_field", "demand_field", "elevation_field", "x_field",
              "y_field", "sites_crs"):
        put("sites", k, getattr(a, k))
    put("sites", "merge_within_m", a.merge_within)
    put("crs", "working", a.crs)
    put("rasters", "terrain", a.terrain)
    put("rasters", "raster_crs", a.raster_crs)
    put("rasters", "on_nodata", a.on_nodata)
    put("rasters", "sample_spacing_m", a.sample_spacing_m)
    put("rasters", "cost_expression", a.cost_expression)
    if a.land_cost:
        lc = {}
        for item in a.land_cost:
            name, sep, p = item.partition("=")
            if not sep:
                name, p = ("land_cost" if not lc else f"land_cost{len(lc) + 1}"), item
            if not name.isidentifier():
                raise InputError(f"option --land-cost: name {name!r} must be a simple identifier "
                                 "(letters, digits, _), as in --land-cost base=cost.tif")
            lc[name] = p
        put("rasters", "land_cost", lc)
    for key in ("length", "land", "climb", "descent", "steep_slope_pct", "steep_per_m", "fixed"):
        put("costs", key, getattr(a, f"w_{key}"))
    put("candidates", "method", a.candidates)
    put("candidates", "k", a.k)
    put("candidates", "max_link_m", a.max_link_m)
    put("tree", "roots", a.root)
    put("tree", "allow_forest", a.allow_forest)
    put("tree", "use_site_z", a.use_site_z)
    put("tree", "layout", a.layout)
    put("design", "system", a.system)
    put("design", "catalog", a.catalog)
    put("design", "prices", getattr(a, "prices", None))
    for item in a.design or ():
        k, sep, v = item.partition("=")
        if not sep or not k:
            raise InputError(f"option --design: {item!r} must be KEY=VALUE, "
                             "e.g. --design velocity_max_mps=1.2")
        put("design", k.strip(), _parse_value(v.strip()))
    return s


def _merge(base, over):
    out = {k: dict(v) if isinstance(v, dict) else v for k, v in base.items()}
    for sec, vals in over.items():
        out.setdefault(sec, {})
        out[sec].update(vals)
    return out


# --------------------------------------------------------------------- commands
def _settings_from(a):
    from .project import load_project

    flags = _flags_to_settings(a)
    if a.project:
        proj = load_project(a.project)
        base = proj.settings_for(None)
        # paths given on the command line are relative to the working directory
        return _merge(base, flags), proj
    if "sites" not in flags or "path" not in flags.get("sites", {}):
        raise InputError("no sites given: pass --sites FILE or a project file "
                         "(mainspan plan PROJECT.toml)")
    return flags, None


_INPUT_LABELS = {("sites", "path"): "sites", ("rasters", "terrain"): "terrain",
                 ("design", "catalog"): "pipe catalog", ("design", "prices"): "price table"}


def _inputs_of(settings, proj=None):
    """(label, path) of every file a run with *settings* reads (every non-output path key)."""
    from .project import _PATH_KEYS

    out = []
    if proj is not None:
        out.append(("project file", proj.path))
    for sec, key in sorted(_PATH_KEYS):
        v = settings.get(sec, {}).get(key)
        if sec != "output" and isinstance(v, str) and v:
            out.append((_INPUT_LABELS.get((sec, key), f"[{sec}] {key}"), v))
    lc = settings.get("rasters", {}).get("land_cost")
    if isinstance(lc, dict):
        out += [(f"land-cost raster {k!r}", v) for k, v in lc.items() if isinstance(v, str)]
    elif isinstance(lc, str):
        out.append(("land-cost raster", lc))
    return out


def _output_specs(a, proj, out, items):
    """OutputSpecs for (option value, project key, kind) triples; the option wins."""
    from .safeio import OutputSpec

    specs = []
    for opt_val, opt_name, key, kind in items:
        if opt_val:
            specs.append(OutputSpec(opt_name, opt_val, kind, layered=kind == "gpkg"))
        elif out.get(key):
            specs.append(OutputSpec(f"[output] {key}", out[key], kind,
                                    from_project=proj is not None, layered=kind == "gpkg"))
    return specs


def preflight_outputs(a, proj, settings_list, items):
    """Run :func:`mainspan.safeio.preflight` for a command; returns the checked OutputSpecs."""
    from .safeio import preflight

    out = (proj.base.get("output", {}) if proj is not None else {})
    specs = _output_specs(a, proj, out, items)
    inputs = []
    for st in settings_list:
        inputs += _inputs_of(st, proj)
    return preflight(specs, inputs, cli_overwrite=bool(getattr(a, "overwrite", False)),
                     project_overwrite=bool(out.get("overwrite", False)),
                     project_root=proj.root if proj is not None else None,
                     allow_outside=bool(getattr(a, "allow_outside_project", False)))


def preflight_compare(a, proj, gpkg, rep):
    """Output checks of ``mainspan compare``; returns (gpkg overwrite, report overwrite)."""
    from .safeio import OutputSpec, preflight

    out = proj.base.get("output", {})
    specs = []
    if gpkg:
        specs.append(OutputSpec("--out" if a.out else "[output] gpkg (+ _scenarios)", gpkg,
                                "gpkg", from_project=not a.out, layered=True))
    if rep:
        specs.append(OutputSpec("--report" if a.report else "[output] report (+ _scenarios)",
                                rep, "report", from_project=not a.report))
    inputs = []
    for name in ["base", *proj.scenarios]:
        inputs += _inputs_of(proj.settings_for(name), proj)
    preflight(specs, inputs, cli_overwrite=bool(a.overwrite),
              project_overwrite=bool(out.get("overwrite", False)), project_root=proj.root,
              allow_outside=bool(getattr(a, "allow_outside_project", False)))
    over = {o.kind: o.overwrite for o in specs}
    return over.get("gpkg", False), over.get("report", False)


def _run_plan(settings, *, quiet=False):
    from .layout import plan_layout
    from .project import plan_kwargs
    from .sites import read_sites

    check_design_keys(settings, where="option --design")
    path, read_kw, plan_kw, out = plan_kwargs(settings)
    sites = read_sites(path, **read_kw)
    return plan_layout(sites, progress=_progress(quiet), **plan_kw), out


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
    settings, proj = _settings_from(a)
    out = settings.get("output", {})
    if not (a.out or out.get("gpkg")):
        raise InputError("no output given: pass --out LAYOUT.gpkg (or [output] gpkg in the "
                         "project file)")
    specs = preflight_outputs(a, proj, [settings],
                              [(a.out, "--out", "gpkg", "gpkg"),
                               (a.report, "--report", "report", "report")]
                              + [(None, "", k, k) for k in _EXTRA_OUTPUTS])
    if any(o.kind == "quantities_csv" for o in specs) and \
            not settings.get("design", {}).get("system"):
        raise InputError("[output] quantities_csv needs sized pipes: set [design] system "
                         "(pressure or gravity), or remove the key")
    gspec = specs[0]
    gpkg = gspec.path
    from .writers.gpkg import check_layers_free
    check_layers_free(gpkg, ("links", "nodes", "run_info"), overwrite=gspec.overwrite)
    lay, _ = _run_plan(settings, quiet=a.quiet)
    lay.write_gpkg(gpkg, overwrite=gspec.overwrite)
    print(lay.summary())
    _print_design(lay)
    print(f"written         {gpkg} (layers: links, nodes, run_info"
          + (", quantities" if "quantities" in lay.tables else "") + ")")
    for spec in specs[1:]:
        _write_extra(lay, spec)
    if lay.system:
        print(CAUTION)
    return 0


def _fmt(v):
    import numpy as np
    if isinstance(v, (list, tuple, np.ndarray)):
        vals = [_fmt(x) for x in v]
        return ", ".join(vals) if vals else "-"
    if isinstance(v, dict):
        items = [f"{k}={_fmt(x)}" for k, x in v.items() if x not in (0, 0.0, None, "")]
        return ", ".join(items) if items else "none"
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (float, np.floating)):
        return f"{v:,.2f}"
    return str(v)


_SKIP = {"caution", "n_nodes", "n_links", "n_roots", "system", "notes"}


def _print_design(lay):
    """Design summary, failed checks and the bill of quantities."""
    d = lay.design
    if d is None:
        return
    summ = getattr(d, "summary", {}) or {}
    print(f"design          {lay.system} mains")
    for k, v in summ.items():
        if k in _SKIP:
            continue
        print(f"  {k:<24}{_fmt(v)}")
    for note in summ.get("notes", []) or []:
        print(f"  note: {note}")
    fails = getattr(d, "failures", []) or []
    print(f"failed checks   {len(fails)}")
    for line in fails[:10]:
        print(f"  - {line}")
    if len(fails) > 10:
        print(f"  … and {len(fails) - 10} more (see the links/nodes 'checks' fields)")
    q = lay.tables.get("quantities")
    if q:
        print(format_quantities(q))


def format_quantities(q) -> str:
    """The bill of quantities as a fixed-width text table."""
    import numpy as np
    cols = [c for c in ("category", "item", "material", "nominal_mm", "unit", "quantity", "unit_cost",
                        "length_m", "count", "pipe_cost", "trench_cost", "land_cost", "total_cost")
            if c in q and not (c in ("material", "nominal_mm", "length_m") and "item" in q)]
    rows = [["" if isinstance(v, (float, np.floating)) and np.isnan(v) else
             _fmt(v) if not isinstance(v, (int, np.integer)) else str(v) for v in
             (q[c][i] for c in cols)] for i in range(len(q[cols[0]]))]
    width = [max(len(c), *(len(r[j]) for r in rows)) for j, c in enumerate(cols)]
    lines = ["bill of quantities:",
             "  " + "  ".join(c.rjust(w) for c, w in zip(cols, width))]
    lines += ["  " + "  ".join(v.rjust(w) for v, w in zip(r, width)) for r in rows]
    return "\n".join(lines)


def cmd_check(a):
    from .check import check_inputs

    settings, proj = _settings_from(a)
    check_design_keys(settings, where="option --design")
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
    from .layout import read_layout

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
    if ext == ".dxf":
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
    from .layout import read_layout
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

    pl = sub.add_parser("plan", help="plan a layout from sites (flags or a project file)")
    pl.add_argument("project", nargs="?", help="project TOML file (optional)")
    _site_options(pl)
    _raster_options(pl)
    _tree_options(pl)
    pl.add_argument("--out", metavar="LAYOUT.gpkg", help="output GeoPackage")
    pl.add_argument("--report", metavar="HTML", help="also write the review report")
    pl.add_argument("--overwrite", action="store_true", help="replace existing outputs")
    pl.add_argument("--allow-outside-project", action="store_true",
                    help="let the project file's [output] paths lie outside its folder")
    pl.add_argument("--quiet", action="store_true", help="no progress on stderr")
    pl.set_defaults(func=cmd_plan)

    ck = sub.add_parser("check", help="validate inputs without computing a layout")
    ck.add_argument("project", nargs="?", help="project TOML file (optional)")
    _site_options(ck)
    _raster_options(ck)
    _tree_options(ck)
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
