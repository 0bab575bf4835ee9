"""CAD exchange: the layout as a DXF drawing (R2013, metres) plus a ``.prj`` beside it.

Layer scheme (our own; every name upper-case, only ``A–Z 0–9 _ -``, ≤ 31
characters so that every CAD reader accepts it):

=====================  ==================================================
``NODE_<ROLE>``        node markers: a POINT (with elevation) and a circle
``MAIN_<SYSTEM>``      links, ``by="role"``: ``MAIN_PRESSURE``,
                       ``MAIN_GRAVITY`` or ``MAIN_PLANNED`` (not sized)
``MAIN_<MAT>_DN<mm>``  links, ``by="diameter"``: one layer per pipe size
``LABEL_NODE``         node ids
``LABEL_LINK``         link id, size, length and slope along each link
=====================  ==================================================

Any name that had to be changed to fit the rules is listed under
``"renamed"`` in the returned dict.  Links are 3D polylines: for a gravity
main straight from the upstream to the downstream invert; otherwise along
the ground, through the stations of the link's ground profile (plan
chainage from the from-node).  Each link and node entity carries XDATA
under the application id ``MAINSPAN`` (``link_id``/``node_id`` and the pipe)
so a drawing can be traced back to the tables.

Large projected coordinates can be shifted to a local origin; the shift is
recorded in the drawing header (custom properties ``MAINSPAN_ORIGIN_X_M`` /
``MAINSPAN_ORIGIN_Y_M``) and in the returned dict: add it back to get
working-CRS coordinates.

The output is reproducible: ezdxf's fixed-metadata mode is used while saving
so timestamps and GUIDs do not change between runs.
"""

from __future__ import annotations

import io
import math
import os
import re

import numpy as np

from ..errors import DataFileError, InputError
from .tables import atomic_write, check_target, format_value, link_inverts

__all__ = ["write_dxf", "safe_layer_name", "LAYER_NAME_RE"]

#: What we accept as a portable layer name.
LAYER_NAME_RE = re.compile(r"^[A-Z0-9_-]{1,31}$")
APPID = "MAINSPAN"
_ROLE_COLORS = {"source": 1, "outlet": 1, "demand": 3, "junction": 8}   # ACI numbers


def safe_layer_name(name, *, taken=()):
    """``name`` made portable: upper-case, ``A–Z 0–9 _ -`` only, ≤ 31 chars, unique.

    Examples
    --------
    >>> safe_layer_name("main pe100/sdr11 dn110")
    'MAIN_PE100_SDR11_DN110'
    """
    s = re.sub(r"[^A-Z0-9_-]+", "_", str(name).upper()).strip("_") or "LAYER"
    s = s[:31]
    base, k = s, 2
    while s in taken:
        tag = f"_{k}"
        s = base[: 31 - len(tag)] + tag
        k += 1
    return s


def _nice_height(extent_m):
    """Text height about 1/250 of the drawing extent, rounded to 1, 2 or 5 × 10^k, ≥ 0.2 m."""
    h = max(float(extent_m), 50.0) / 250.0
    e = math.floor(math.log10(h))
    for m in (1.0, 2.0, 5.0, 10.0):
        if h <= m * 10 ** e * 1.5:
            return m * 10 ** e
    return 10.0 ** (e + 1)


def _col(layout, name):
    v = layout.links.get(name)
    return None if v is None else np.asarray(v)


def _link_label(layout, i, size_txt):
    lid = layout.links.get("link_id")
    parts = [f"L{lid[i]}" if lid is not None else f"L{i + 1}"]
    if size_txt:
        parts.append(size_txt)
    if "length_m" in layout.links:
        parts.append(f"{float(layout.links['length_m'][i]):.1f} m")
    slope = _col(layout, "slope_pct")
    if slope is not None and np.isfinite(float(slope[i])):
        parts.append(f"{float(slope[i]):.2f} %")
    return " ".join(parts)


def _size_text(layout, i):
    nom = _col(layout, "nominal_mm")
    if nom is not None and np.isfinite(float(nom[i])):
        return f"DN{int(round(float(nom[i])))}"
    dia = _col(layout, "diameter_mm")
    if dia is not None and np.isfinite(float(dia[i])):
        return f"ID{float(dia[i]):.0f}"
    return ""


def _link_vertices(layout, i, xy, z_ground, invert):
    """(k, 3) vertices of link ``i`` in working-CRS coordinates."""
    a, b = layout.link_ends[i]
    p0, p1 = xy[a], xy[b]
    if invert is not None:
        return np.array([[*p0, invert[i, 0]], [*p1, invert[i, 1]]], float)
    z0, z1 = z_ground[i]
    prof = layout.profiles
    if prof is not None and int(prof.offsets[i + 1]) - int(prof.offsets[i]) >= 2:
        st, gz = prof.of(i)
        st = np.asarray(st, float)
        gz = np.asarray(gz, float)
        plan = float(np.hypot(*(p1 - p0)))
        ok = np.isfinite(st) & np.isfinite(gz) & (st > 1e-6) & (st < plan - 1e-6)
        st, gz = st[ok], gz[ok]
        z0 = z0 if np.isfinite(z0) else (gz[0] if gz.size else 0.0)
        z1 = z1 if np.isfinite(z1) else (gz[-1] if gz.size else 0.0)
        t = np.r_[0.0, st / plan, 1.0] if plan > 0 else np.array([0.0, 1.0])
        z = np.r_[z0, gz, z1] if plan > 0 else np.array([z0, z1])
        return np.column_stack([p0[0] + t * (p1[0] - p0[0]), p0[1] + t * (p1[1] - p0[1]), z])
    z0 = z0 if np.isfinite(z0) else 0.0
    z1 = z1 if np.isfinite(z1) else 0.0
    return np.array([[*p0, z0], [*p1, z1]], float)


def _origin(origin, xy):
    if origin is None:
        return 0.0, 0.0
    if isinstance(origin, str):
        if origin != "auto":
            raise InputError(f"origin={origin!r}: expected None, 'auto' or (x0, y0) in metres")
        if xy.size == 0 or np.abs(xy).max() < 100_000:
            return 0.0, 0.0
        lo = np.floor(xy.min(0) / 1000.0) * 1000.0
        return float(lo[0]), float(lo[1])
    try:
        x0, y0 = (float(v) for v in origin)
    except (TypeError, ValueError):
        raise InputError(f"origin={origin!r}: expected None, 'auto' or (x0, y0) in metres") from None
    if not (np.isfinite(x0) and np.isfinite(y0)):
        raise InputError(f"origin={origin!r}: both values must be finite metres")
    return x0, y0


def _prj_text(layout):
    crs = layout.crs
    if crs is None:
        wkt = layout.run_info.get("working_crs_wkt", "")
        if not wkt:
            return None
        import pyproj

        crs = pyproj.CRS.from_wkt(wkt)
    try:
        return crs.to_wkt("WKT1_ESRI")
    except Exception:                               # no ESRI form of this CRS: keep WKT2
        return crs.to_wkt()


def write_dxf(layout, path, *, by="role", polylines="3d", text_height_m=None, origin=None,
              overwrite=False):
    """Write the layout as a DXF drawing in metres, with a ``.prj`` beside it.

    Parameters
    ----------
    layout : mainspan.pipeline.layout.Layout
    path : str or os.PathLike
        Target ``.dxf`` file; the CRS goes to the same name with ``.prj``.
    by : {"role", "diameter"}, default "role"
        Put links on one layer per system (``MAIN_PRESSURE`` …) or one per pipe size.
    polylines : {"3d", "2d"}, default "3d"
        3D polylines carrying elevations (ground along the profile for pressure
        or unsized mains, inverts for gravity mains), or 2D lightweight polylines.
    text_height_m : float, optional
        Label height in drawing units (m); by default about 1/250 of the extent.
    origin : None, "auto" or (float, float), default None
        Local origin subtracted from every coordinate; ``"auto"`` picks the
        kilometre corner below the layout when coordinates exceed 100 km.
    overwrite : bool, default False
        Replace existing files; otherwise :class:`mainspan.errors.OverwriteError`.

    Returns
    -------
    dict
        ``path``, ``prj`` (or None when the layout has no CRS), ``origin``
        (x0, y0), ``text_height_m``, ``layers`` (name → entity count),
        ``renamed`` (wanted name → written name), ``n_links``, ``n_nodes``.

    References
    ----------
    Autodesk, *DXF Reference* (AutoCAD 2013): header variables ``$INSUNITS``
    (6 = metres) and ``$MEASUREMENT`` (1 = metric), POLYLINE/LWPOLYLINE, XDATA.
    """
    import ezdxf

    if by not in ("role", "diameter"):
        raise InputError(f"by={by!r}: expected 'role' or 'diameter'")
    if polylines not in ("3d", "2d"):
        raise InputError(f"polylines={polylines!r}: expected '3d' or '2d'")
    path = check_target(path, overwrite=overwrite, what="DXF")
    prj_path = os.path.splitext(path)[0] + ".prj"
    prj = _prj_text(layout)
    if prj is not None:
        check_target(prj_path, overwrite=overwrite, what="projection file")

    xy = np.asarray(layout.node_xy, float)
    n, m = len(xy), layout.n_links
    x0, y0 = _origin(origin, xy)
    if text_height_m is None:
        ext = float(np.ptp(xy, axis=0).max()) if n else 1.0
        h = _nice_height(ext)
    else:
        h = float(text_height_m)
        if not (np.isfinite(h) and h > 0):
            raise InputError(f"text_height_m={text_height_m!r}: expected a positive number of metres")

    system = (layout.run_info.get("system") or "").lower()
    invert = link_inverts(layout) if system == "gravity" else None
    zg = layout.link_coordinates("ground")[:, :, 2] if m else np.zeros((0, 2))

    # ---- layer names
    renamed, taken, layer_of = {}, set(), {}

    def layer(wanted):
        if wanted in layer_of:
            return layer_of[wanted]
        s = wanted if LAYER_NAME_RE.match(wanted) and wanted not in taken else \
            safe_layer_name(wanted, taken=taken)
        if s != wanted:
            renamed[wanted] = s
        taken.add(s)
        layer_of[wanted] = s
        return s

    if by == "diameter":
        nom = _col(layout, "nominal_mm")
        dia = _col(layout, "diameter_mm")
        if nom is None and dia is None:
            raise InputError("by='diameter': the layout has no pipe sizes (nominal_mm/diameter_mm);"
                             " size the pipes with a system or use by='role'")
        mat = _col(layout, "material")
        link_layer = []
        for i in range(m):
            size = _size_text(layout, i) or "UNSIZED"
            mt = str(mat[i]) if mat is not None and str(mat[i]) not in ("", "nan", "None") else ""
            link_layer.append(layer("MAIN_" + (f"{mt.upper()}_" if mt else "") + size))
    else:
        name = {"pressure": "MAIN_PRESSURE", "gravity": "MAIN_GRAVITY"}.get(system, "MAIN_PLANNED")
        link_layer = [layer(name)] * m
    roles = np.asarray(layout.nodes.get("role", np.full(n, "site", object))).astype(str)
    node_layer = [layer("NODE_" + r.upper()) for r in roles]
    lab_node, lab_link = layer("LABEL_NODE"), layer("LABEL_LINK")

    # ---- drawing (ezdxf's fixed-metadata mode: no dates or random GUIDs, same bytes each run)
    keep = ezdxf.options.write_fixed_meta_data_for_testing
    ezdxf.options.write_fixed_meta_data_for_testing = True
    try:
        doc = ezdxf.new("R2013", setup=False)
    finally:
        ezdxf.options.write_fixed_meta_data_for_testing = keep
    doc.header.custom_vars.append("WRITER", "mainspan")   # marks the file as ours (safeio)
    doc.header["$INSUNITS"] = 6          # metres
    doc.header["$MEASUREMENT"] = 1       # metric
    doc.header["$LUNITS"] = 2            # decimal
    doc.header["$TEXTSIZE"] = h
    doc.appids.add(APPID)
    cv = doc.header.custom_vars
    cv.append("MAINSPAN_ORIGIN_X_M", format_value(x0, "x_m"))
    cv.append("MAINSPAN_ORIGIN_Y_M", format_value(y0, "y_m"))
    cv.append("MAINSPAN_CRS", str(layout.run_info.get("working_crs")
                                  or (layout.crs.name if layout.crs is not None else "")))
    cv.append("MAINSPAN_SYSTEM", system or "planned")
    cv.append("MAINSPAN_VERSION", str(layout.run_info.get("version", "")))
    for wanted, s in layer_of.items():
        if s not in doc.layers:
            color = 7
            if wanted.startswith("NODE_"):
                color = _ROLE_COLORS.get(wanted[5:].lower(), 7)
            elif wanted.startswith("MAIN_"):
                color = 5
            elif wanted.startswith("LABEL_"):
                color = 2
            doc.layers.add(s, color=color)
    msp = doc.modelspace()
    counts = {}
    shift = np.array([x0, y0, 0.0])

    link_ids = layout.links.get("link_id", np.arange(1, m + 1))
    ids = np.asarray(layout.nodes["node_id"]).astype(str)
    for i in range(m):
        v = _link_vertices(layout, i, xy, zg, invert) - shift
        lay = link_layer[i]
        if polylines == "3d":
            e = msp.add_polyline3d([tuple(p) for p in v], dxfattribs={"layer": lay})
        else:
            e = msp.add_lwpolyline([tuple(p[:2]) for p in v[[0, -1]]], dxfattribs={"layer": lay})
        xd = [(1000, f"link_id={link_ids[i]}"),
              (1000, f"from_node={ids[layout.link_ends[i, 0]]}"),
              (1000, f"to_node={ids[layout.link_ends[i, 1]]}")]
        if "pipe" in layout.links:
            xd.append((1000, f"pipe={layout.links['pipe'][i]}"))
        e.set_xdata(APPID, xd)
        counts[lay] = counts.get(lay, 0) + 1
        # label at mid-link, along the link, kept upright
        a, b = layout.link_ends[i]
        d = xy[b] - xy[a]
        ang = math.degrees(math.atan2(d[1], d[0]))
        if ang > 90:
            ang -= 180
        elif ang <= -90:
            ang += 180
        mid = (xy[a] + xy[b]) / 2 - shift[:2]
        # offset the label off the line by half a text height
        nrm = np.array([-math.sin(math.radians(ang)), math.cos(math.radians(ang))])
        t = msp.add_text(_link_label(layout, i, _size_text(layout, i)), height=h, rotation=ang,
                         dxfattribs={"layer": lab_link})
        t.set_placement(tuple(mid + nrm * 0.5 * h), align=ezdxf.enums.TextEntityAlignment.BOTTOM_CENTER)
        counts[lab_link] = counts.get(lab_link, 0) + 1

    elev = np.asarray(layout.nodes.get("elevation_m", np.full(n, np.nan)), float)
    for k in range(n):
        z = float(elev[k]) if np.isfinite(elev[k]) else 0.0
        p = (xy[k, 0] - x0, xy[k, 1] - y0, z if polylines == "3d" else 0.0)
        lay = node_layer[k]
        e = msp.add_point(p, dxfattribs={"layer": lay})
        e.set_xdata(APPID, [(1000, f"node_id={ids[k]}"), (1000, f"role={roles[k]}")])
        msp.add_circle(p, radius=0.6 * h, dxfattribs={"layer": lay})
        counts[lay] = counts.get(lay, 0) + 2
        t = msp.add_text(ids[k], height=h, dxfattribs={"layer": lab_node})
        t.set_placement((p[0] + 0.9 * h, p[1] + 0.9 * h), align=ezdxf.enums.TextEntityAlignment.LEFT)
        counts[lab_node] = counts.get(lab_node, 0) + 1

    if n:
        lo = xy.min(0) - [x0, y0] - 5 * h
        hi = xy.max(0) - [x0, y0] + 5 * h
        doc.header["$EXTMIN"] = (float(lo[0]), float(lo[1]), 0.0)
        doc.header["$EXTMAX"] = (float(hi[0]), float(hi[1]), 0.0)
        doc.set_modelspace_vport(height=float((hi - lo).max()), center=tuple((lo + hi) / 2))

    # ezdxf adds CLASS entries for the entity types in use from a set, whose order follows
    # Python's per-process hash seed: add them now, sorted, so every run writes the same bytes.
    doc.classes.add_required_classes(doc.dxfversion)
    doc.classes.classes = type(doc.classes.classes)(sorted(doc.classes.classes.items()))
    ezdxf.options.write_fixed_meta_data_for_testing = True
    try:
        buf = io.StringIO()
        doc.write(buf)
    finally:
        ezdxf.options.write_fixed_meta_data_for_testing = keep
    try:
        atomic_write(path, buf.getvalue(), overwrite=overwrite, what="DXF")
        if prj is not None:
            atomic_write(prj_path, prj + "\n", overwrite=overwrite, what="projection file")
    except OSError as exc:
        if isinstance(exc, DataFileError):
            raise
        raise DataFileError(f"cannot write DXF {path!r}: {exc}; check the folder is writable") from None
    return {"path": path, "prj": prj_path if prj is not None else None, "origin": (x0, y0),
            "text_height_m": h, "layers": dict(sorted(counts.items())), "renamed": renamed,
            "n_links": m, "n_nodes": n}
