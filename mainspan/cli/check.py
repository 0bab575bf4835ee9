"""``mainspan check``: validate the inputs of a plan without computing a layout."""

from __future__ import annotations

import argparse

from ..pipeline.preflight import preflight_outputs
from .options import _plan_options, _run_options, _settings_from

__all__ = ["add_parser", "cmd_check"]


def add_parser(sub):
    from ..settings import design_help

    ck = sub.add_parser("check", help="validate inputs without computing a layout",
                        epilog=design_help(), formatter_class=argparse.RawDescriptionHelpFormatter)
    ck.add_argument("project", nargs="?", help="project TOML file (optional)")
    _run_options(ck, quiet=False)
    _plan_options(ck, output=False)
    ck.add_argument("--allow-outside-project", action="store_true",
                    help="let the project file's [output] paths lie outside its folder")
    ck.set_defaults(func=cmd_check)


def cmd_check(a):
    from ..pipeline.check import check_inputs

    ps, proj = _settings_from(a)     # every value and combination checked here
    settings = ps.sections
    if proj is not None:   # the project's outputs: same checks as plan (existing files aside)
        a.overwrite = True
        preflight_outputs(a, proj, [settings], [(None, "--out", "gpkg", "gpkg"),
                                                (None, "--report", "report", "report")])
    report = check_inputs(settings)
    print(report.text())
    return 0 if report.ok else 2
