"""Long sections as DXF: the profile and its data bands, for the drafter's sheet.

The drawing carries the same numbers as the report's long section
(:func:`mainspan.report.section.section_data` and ``band_rows``):

* x is chainage in metres; y is ``(level − datum) × exaggeration`` above the
  top of the bands, so the profile sits on its datum line with the bands below;
* layers (our own names): ``LS_GROUND``, ``LS_PIPE_INVERT``, ``LS_PIPE_CROWN``,
  ``LS_GRADE_LINE``, ``LS_STRUCTURE``, ``LS_FITTING``, ``LS_DATUM``, ``LS_BAND_GRID``,
  ``LS_BAND_TEXT``, ``LS_NODE_TEXT``;
* custom header variables ``MAINSPAN_DATUM_M`` and ``MAINSPAN_VERTICAL_EXAGGERATION``
  say how to read levels back: ``level = datum + (y − bands) / exaggeration`` with
  ``MAINSPAN_BANDS_TOP``;
* drawing extents are set; the bytes are the same on every run (ezdxf's
  fixed-metadata mode).
"""

from __future__ import annotations

import io
import math

import numpy as np

from .tables import atomic_write

__all__ = ["write_section_dxf", "LAYERS"]

#: Layer name → (colour index, lineweight in 1/100 mm): our own scheme.
LAYERS = {
    "LS_GROUND": (32, 35), "LS_PIPE_INVERT": (150, 50), "LS_PIPE_CROWN": (150, 18),
    "LS_GRADE_LINE": (10, 35), "LS_STRUCTURE": (8, 50), "LS_FITTING": (40, 25),
    "LS_DATUM": (7, 25), "LS_BAND_GRID": (252, 13), "LS_BAND_TEXT": (7, 18),
    "LS_NODE_TEXT": (7, 18),
}


def _runs(x, z):
    """Split NaN-separated polylines into finite runs of (x, z)."""
    x, z = np.asarray(x, float), np.asarray(z, float)
    ok = np.isfinite(x) & np.isfinite(z)
    out, start = [], None
    for i, good in enumerate(ok):
        if good and start is None:
            start = i
        if (not good or i == len(ok) - 1) and start is not None:
            end = i + 1 if good else i
            if end - start >= 2:
                out.append((x[start:end], z[start:end]))
            start = None
    return out


def write_section_dxf(layout, path, *, path_nodes=None, to_node=None, overwrite=False,
                      vertical_exaggeration=None, text_height_m=None):
    """Write one long section (profile and data bands) as a DXF drawing.

    Parameters
    ----------
    layout : mainspan.pipeline.layout.Layout
    path : str or os.PathLike
        Target ``.dxf`` file.
    path_nodes : sequence of int, optional
        Node indices down the tree; default the longest root→node path, or the
        path from the root to ``to_node``.
    to_node : str, optional
        Node id the section runs to from its root.
    overwrite : bool, default False
    vertical_exaggeration : float, optional
        Default: the exaggeration the report would choose for this section.
    text_height_m : float, optional
        Text height in drawing units; default 1/150 of the section's length
        (at least 0.5).

    Returns
    -------
    dict
        ``path``, ``datum_m``, ``vertical_exaggeration``, ``bands_top``.
    """
    import ezdxf
    from ezdxf.enums import TextEntityAlignment

    from ..errors import InputError
    from ..report.section import band_rows, fit_exaggeration, section_data
    from ..report.tree import longest_paths

    if path_nodes is None:
        if to_node is not None:
            path_nodes = layout.path_to_root(layout.node_index(to_node))[::-1]
        else:
            paths = longest_paths(layout, k=1)
            if not paths:
                raise InputError("long section DXF: the layout has no links; nothing to draw")
            path_nodes = paths[0]
    d = section_data(layout, path_nodes)
    vx = float(vertical_exaggeration or fit_exaggeration(d))
    ch = d["node_ch"]
    span = max(float(ch[-1] - ch[0]), 1.0)
    h = float(text_height_m or max(0.5, span / 150.0))
    rows = band_rows(d)
    # node rows hold numbers written upright (rotated 90°): taller than link rows
    heights = [7.0 * h if kind == "node" else 3.2 * h for _, kind, _ in rows]
    bands_top = float(sum(heights))
    levels = [d["ground_z"]] + [v for v in (d["pipe_z"], d["crown_z"]) if v is not None]
    if d["grade_line"] is not None:
        levels.append(d["grade_line"].ravel())
    lv = np.concatenate([np.asarray(v, float).ravel() for v in levels])
    lv = lv[np.isfinite(lv)]
    datum = math.floor((lv.min() if lv.size else 0.0) - 1.0)

    def y(z):
        return bands_top + 2 * h + (np.asarray(z, float) - datum) * vx

    keep = ezdxf.options.write_fixed_meta_data_for_testing
    ezdxf.options.write_fixed_meta_data_for_testing = True
    try:
        doc = ezdxf.new("R2013", setup=False)
    finally:
        ezdxf.options.write_fixed_meta_data_for_testing = keep
    doc.header.custom_vars.append("WRITER", "mainspan")
    doc.header["$INSUNITS"] = 6
    doc.header["$MEASUREMENT"] = 1
    doc.header["$TEXTSIZE"] = h
    cv = doc.header.custom_vars
    cv.append("MAINSPAN_DATUM_M", f"{datum:.3f}")
    cv.append("MAINSPAN_VERTICAL_EXAGGERATION", f"{vx:g}")
    cv.append("MAINSPAN_BANDS_TOP", repr(float(bands_top + 2 * h)))
    for name, (colour, lw) in LAYERS.items():
        doc.layers.add(name, color=colour, dxfattribs={"lineweight": lw})
    msp = doc.modelspace()

    def text(s, x, yy, layer, rot=0.0, align=TextEntityAlignment.MIDDLE_CENTER, height=h):
        t = msp.add_text(s, height=height, rotation=rot, dxfattribs={"layer": layer})
        t.set_placement((float(x), float(yy)), align=align)

    msp.add_lwpolyline(list(zip(d["ground_x"], y(d["ground_z"]))), dxfattribs={"layer": "LS_GROUND"})
    for key, layer in (("pipe_z", "LS_PIPE_INVERT"), ("crown_z", "LS_PIPE_CROWN")):
        if d[key] is not None:
            for xs, zs in _runs(d["pipe_x"], d[key]):
                msp.add_lwpolyline(list(zip(xs, y(zs))), dxfattribs={"layer": layer})
    if d["grade_line"] is not None:
        for j, (a, b) in enumerate(d["grade_line"]):
            msp.add_line((ch[j], float(y(a))), (ch[j + 1], float(y(b))),
                         dxfattribs={"layer": "LS_GRADE_LINE"})
    for c, lo, hi, kind in d["structures"]:
        if np.isfinite(lo) and np.isfinite(hi):
            w = 0.4 * h
            msp.add_lwpolyline([(c - w, float(y(lo))), (c + w, float(y(lo))),
                                (c + w, float(y(hi))), (c - w, float(y(hi)))], close=True,
                               dxfattribs={"layer": "LS_STRUCTURE"})
    last = -np.inf
    for c, z, kind in sorted(d["fittings"]):
        msp.add_circle((c, float(y(z))), radius=0.5 * h, dxfattribs={"layer": "LS_FITTING"})
        if c - last > 8 * h:            # label only where the last label leaves room
            text(kind.replace("_", " "), c, float(y(z)) - 1.4 * h, "LS_FITTING",
                 height=0.7 * h)
            last = c
    # datum line and node ids above the profile
    top = float(y(lv.max())) + 3 * h if lv.size else bands_top + 10 * h
    msp.add_line((ch[0], bands_top + 2 * h), (ch[-1], bands_top + 2 * h),
                 dxfattribs={"layer": "LS_DATUM"})
    text(f"datum {datum:.2f} m   vertical exaggeration x{vx:g}", ch[0], bands_top + 2.8 * h,
         "LS_DATUM", align=TextEntityAlignment.BOTTOM_LEFT)
    ids = np.asarray(layout.nodes["node_id"]).astype(str)
    for j, node in enumerate(d["path"]):
        msp.add_line((ch[j], 0.0), (ch[j], top), dxfattribs={"layer": "LS_BAND_GRID",
                                                            "linetype": "Continuous"})
        text(ids[node], ch[j], top + 0.5 * h, "LS_NODE_TEXT", rot=90.0,
             align=TextEntityAlignment.MIDDLE_LEFT)
    # data bands, top to bottom
    left = ch[0] - 0.02 * span - 14 * h
    y_top = bands_top
    for r, (name, kind, vals) in enumerate(rows):
        row_h = heights[r]
        if r:
            y_top -= heights[r - 1]
        msp.add_line((left, y_top), (ch[-1], y_top), dxfattribs={"layer": "LS_BAND_GRID"})
        text(name, left + 0.5 * h, y_top - row_h / 2, "LS_BAND_TEXT",
             align=TextEntityAlignment.MIDDLE_LEFT)
        for j, v in enumerate(vals):
            if not v:
                continue
            if kind == "node":
                text(v, ch[j] + 0.5 * h, y_top - row_h / 2, "LS_BAND_TEXT", rot=90.0,
                     height=0.8 * h)
            else:
                text(v, (ch[j] + ch[j + 1]) / 2, y_top - row_h / 2, "LS_BAND_TEXT",
                     height=0.8 * h)
    msp.add_line((left, 0.0), (ch[-1], 0.0), dxfattribs={"layer": "LS_BAND_GRID"})
    msp.add_line((left, 0.0), (left, bands_top), dxfattribs={"layer": "LS_BAND_GRID"})
    lo = (left - h, -h)
    hi = (float(ch[-1]) + 2 * h, top + 12 * h)
    # ezdxf copies the model space's own extents into $EXTMIN/$EXTMAX when it writes
    msp.dxf.extmin = (lo[0], lo[1], 0.0)
    msp.dxf.extmax = (hi[0], hi[1], 0.0)
    doc.header["$EXTMIN"] = (lo[0], lo[1], 0.0)
    doc.header["$EXTMAX"] = (hi[0], hi[1], 0.0)
    doc.set_modelspace_vport(height=hi[1] - lo[1], center=((lo[0] + hi[0]) / 2,
                                                            (lo[1] + hi[1]) / 2))
    doc.classes.add_required_classes(doc.dxfversion)
    doc.classes.classes = type(doc.classes.classes)(sorted(doc.classes.classes.items()))
    ezdxf.options.write_fixed_meta_data_for_testing = True
    try:
        buf = io.StringIO()
        doc.write(buf)
    finally:
        ezdxf.options.write_fixed_meta_data_for_testing = keep
    atomic_write(path, buf.getvalue(), overwrite=overwrite, what="long-section DXF")
    return {"path": str(path), "datum_m": float(datum), "vertical_exaggeration": vx,
            "bands_top": bands_top + 2 * h}
