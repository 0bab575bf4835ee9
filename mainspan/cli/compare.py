"""``mainspan compare PROJECT.toml``: plan the scenarios of a project and compare them."""

from __future__ import annotations

from .options import _add_option

__all__ = ["add_parser", "cmd_compare"]


def add_parser(sub):
    cp = sub.add_parser("compare", help="plan and compare the scenarios of a project file")
    cp.add_argument("project", help="project TOML file with [scenarios.NAME] sections")
    cp.add_argument("--out", metavar="GPKG", help="GeoPackage for all scenario layers")
    cp.add_argument("--report", metavar="HTML", help="HTML report with the comparison")
    cp.add_argument("--memory-limit", metavar="SIZE",
                    help="refuse work estimated to need more memory than SIZE, e.g. 4G "
                    "(default: half the installed memory)")
    cp.add_argument("--overwrite", action="store_true", help="replace existing outputs")
    cp.add_argument("--allow-outside-project", action="store_true",
                    help="let the project file's [output] paths lie outside its folder")
    cp.add_argument("--quiet", action="store_true", help="no progress on stderr")
    from ..settings.schema import COMPARE_SETTINGS     # --stability, --perturb-pct, --seed
    gs = cp.add_argument_group("stability of the scenario layouts (also [stability] in the "
                               "project file)")
    for s in COMPARE_SETTINGS:
        _add_option(gs, s)
    from ..settings import SECTIONS, all_settings     # --workers, --cluster (mainspan.execution)
    gx = cp.add_argument_group(SECTIONS["execution"])
    for s in all_settings("execution"):
        _add_option(gx, s)
    cp.set_defaults(func=cmd_compare)


def cmd_compare(a):
    from ..scenarios import compare_cli

    return compare_cli(a)
