"""``mainspan export LAYOUT.gpkg --to FILE``: DXF, LandXML, CSV or a long section."""

from __future__ import annotations

import os

from ..errors import InputError

__all__ = ["add_parser", "cmd_export"]


def add_parser(sub):
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


def cmd_export(a):
    from ..pipeline.layout import read_layout

    to = a.to
    ext = os.path.splitext(to)[1].lower()
    kind = {".dxf": "dxf", ".xml": "landxml", ".landxml": "landxml", ".csv": "links_csv",
            ".png": "figure", ".svg": "figure", ".pdf": "figure"}.get(ext)
    if kind is not None:
        from ..safeio import OutputSpec, preflight
        preflight([OutputSpec("--to", to, kind)], [("layout", a.layout_gpkg)],
                  cli_overwrite=a.overwrite)
        if kind == "dxf":   # the DXF writer also writes the .prj beside it
            prj = os.path.splitext(to)[0] + ".prj"
            from ..safeio import _same
            if _same(prj, a.layout_gpkg):
                raise InputError(f"--to {to!r}: its projection file {prj!r} would replace "
                                 "the layout; write the DXF elsewhere")
    lay = read_layout(a.layout_gpkg)
    if ext == ".dxf" and getattr(a, "section", False):     # hand16: long section as DXF
        if not _has_ground(lay):
            raise InputError(f"layout {a.layout_gpkg!r} has no ground levels, so a long "
                             "section would be empty; plan again with --terrain DEM")
        from ..writers.section_dxf import write_section_dxf
        rep = write_section_dxf(lay, to, to_node=a.node, overwrite=a.overwrite)
        print(f"written {to} (datum {rep['datum_m']:.2f} m, vertical exaggeration "
              f"x{rep['vertical_exaggeration']:g})")
    elif ext == ".dxf":
        from ..writers.dxf import write_dxf
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
        from ..writers.landxml import write_landxml
        write_landxml(lay, to, overwrite=a.overwrite)
        print(f"written {to}")
    elif ext == ".csv":
        from ..writers.tables import write_links_csv, write_quantities_csv
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
        from ..report.plots import save_long_section
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
