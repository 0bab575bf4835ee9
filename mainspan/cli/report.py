"""``mainspan report LAYOUT.gpkg --out HTML``: the HTML review report of a layout."""

from __future__ import annotations

__all__ = ["add_parser", "cmd_report"]


def add_parser(sub):
    rp = sub.add_parser("report", help="write the HTML review report of a layout")
    rp.add_argument("layout_gpkg", metavar="LAYOUT.gpkg")
    rp.add_argument("--out", required=True, metavar="HTML")
    rp.add_argument("--overwrite", action="store_true", help="replace an existing file")
    rp.set_defaults(func=cmd_report)


def cmd_report(a):
    from ..pipeline.layout import read_layout
    from ..report.html import write_report

    from ..safeio import OutputSpec, preflight
    preflight([OutputSpec("--out", a.out, "report")], [("layout", a.layout_gpkg)],
              cli_overwrite=a.overwrite)
    lay = read_layout(a.layout_gpkg)
    write_report(lay, a.out, overwrite=a.overwrite)
    print(f"written {a.out}")
    return 0
