"""``mainspan plan``: plan a layout from sites (options or a project file) and write it."""

from __future__ import annotations

import argparse

from ..errors import InputError
from ..messages import CAUTION, print_design
from ..messages import progress as _progress
from ..pipeline.preflight import preflight_outputs
from .options import _plan_options, _run_options, _settings_from

__all__ = ["add_parser", "cmd_plan"]


def add_parser(sub):
    from ..settings import design_help
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


def _run_plan(settings, *, quiet=False):
    """Read the sites and plan; *settings* is a PlanSettings or a settings dict."""
    from ..pipeline.layout import plan_layout
    from ..settings import PlanSettings
    from ..sites.read import read_sites

    ps = settings if isinstance(settings, PlanSettings) else PlanSettings.from_sections(settings)
    sites = read_sites(ps.sites_path, **ps.read_kwargs())
    from ..execution import engine_from_settings, use     # --workers / --cluster
    with engine_from_settings(ps.sections.get("execution")) as eng, use(eng):
        return plan_layout(sites, ps, progress=_progress(quiet)), ps.output


# project-file outputs written after the GeoPackage (each checked by preflight first)
_EXTRA_OUTPUTS = ("dxf", "landxml", "links_csv", "quantities_csv")


def _write_extra(lay, spec):
    """Write the report or a hand-off file named by an OutputSpec."""
    if spec.kind == "report":
        from ..report.html import write_report
        write_report(lay, spec.path, overwrite=spec.overwrite)
    elif spec.kind == "dxf":
        from ..writers.dxf import write_dxf
        write_dxf(lay, spec.path, overwrite=spec.overwrite)
    elif spec.kind == "landxml":
        from ..writers.landxml import write_landxml
        write_landxml(lay, spec.path, overwrite=spec.overwrite)
    elif spec.kind == "links_csv":
        from ..writers.tables import write_links_csv
        write_links_csv(lay, spec.path, overwrite=spec.overwrite)
    elif spec.kind == "quantities_csv":
        from ..writers.tables import write_quantities_csv
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
    from ..writers.gpkg import check_layers_free
    check_layers_free(gpkg, ("links", "nodes", "run_info"), overwrite=gspec.overwrite)
    from ..writers.output_crs import check_output_settings, output_layout   # hand16
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
