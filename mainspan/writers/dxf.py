"""CAD exchange: the layout as a DXF drawing (R2013, metres) plus a ``.prj`` beside it.

Layer scheme (our own; every name upper-case, only ``A–Z 0–9 _ -``, ≤ 31
characters so that every CAD reader accepts it):

=====================  ==================================================
``NODE_<ROLE>``        nodes: an insert of block ``MS_NODE`` (``MS_SOURCE``
                       at sources and outlets) with attributes
``STRUCT_ACCESS``      access points (manholes): block ``MS_ACCESS``
``STRUCT_FITTING``     fittings (valves, washouts, thrust blocks ...):
                       block ``MS_FITTING``
``MAIN_<SYSTEM>``      links, ``by="role"``: ``MAIN_PRESSURE``,
                       ``MAIN_GRAVITY`` or ``MAIN_PLANNED`` (not sized)
``MAIN_<MAT>_DN<mm>``  links, ``by="diameter"``: one layer per pipe size
``LABEL_NODE``         node ids
``LABEL_LINK``         link id, size, length and slope along each link
=====================  ==================================================

Structures carry the attributes ``ID`` (visible), ``TYPE``, ``SIZE_MM``,
``GROUND_M``, ``INVERT_M``, ``PRESSURE_M`` and ``DEPTH_M`` (hidden; blank
where they do not apply).  Blocks are drawn one unit across and inserted at
the text height, so symbols scale with the labels.

Size classes (our own scheme): nominal bore up to 63, 110, 160, 250, 400 mm
and above, drawn with lineweights 0.18, 0.25, 0.35, 0.50, 0.70 and 1.00 mm
and a colour ramp from pale teal to deep indigo (true colour, with the
nearest index colour for older readers).  With ``by="diameter"`` the size
layers carry them; with ``by="role"`` each link does.

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

Writing is streamed: ezdxf builds the small part of the drawing (header,
layers, blocks, objects) in its fixed-metadata mode, and the entities are
written straight to the file by our own tag writer (handles continue from
ezdxf's handle seed), so memory and time do not grow with an object per
entity.  Ground profiles are thinned before drawing: a station is dropped
when the polyline without it stays within ``PROFILE_TOLERANCE_M`` (0.05 m)
of the ground vertically (Douglas–Peucker on chainage and level; the link
ends are always kept).  Coordinates are written to 0.1 mm (four decimals of a
metre).  The output is reproducible: no timestamps or random
GUIDs; the same layout gives the same bytes.
"""

from __future__ import annotations

import io
import math
import os
import re

import numpy as np

from ..errors import DataFileError, InputError
from .tables import atomic_write, check_target, format_value, link_inverts

__all__ = ["write_dxf", "safe_layer_name", "size_class", "thin_profile", "LAYER_NAME_RE",
           "PROFILE_TOLERANCE_M", "SIZE_CLASSES"]

#: What we accept as a portable layer name.
LAYER_NAME_RE = re.compile(r"^[A-Z0-9_-]{1,31}$")
APPID = "MAINSPAN"
_ROLE_COLORS = {"source": 1, "outlet": 1, "demand": 3, "junction": 8}   # ACI numbers
#: Vertical tolerance of the drawn ground profiles, metres (see the module notes).
PROFILE_TOLERANCE_M = 0.05
#: Size classes: (largest nominal bore in mm, lineweight in 1/100 mm, RGB) -- our own scheme.
SIZE_CLASSES = (
    (63.0, 18, (120, 196, 186)),
    (110.0, 25, (64, 160, 170)),
    (160.0, 35, (38, 124, 160)),
    (250.0, 50, (40, 90, 150)),
    (400.0, 70, (52, 58, 130)),
    (np.inf, 100, (58, 30, 100)),
)
_ATTR_TAGS = ("ID", "TYPE", "SIZE_MM", "GROUND_M", "INVERT_M", "PRESSURE_M", "DEPTH_M")


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


def size_class(nominal_mm):
    """Index into :data:`SIZE_CLASSES` of each nominal bore (NaN: the smallest class).

    Examples
    --------
    >>> size_class([50, 110, 111, 630]).tolist()
    [0, 1, 2, 5]
    """
    d = np.nan_to_num(np.asarray(nominal_mm, float), nan=0.0)
    return np.searchsorted(np.array([c[0] for c in SIZE_CLASSES]), d, side="left")


def _nearest_aci(rgb):
    from ezdxf.colors import aci2rgb

    best, bd = 7, np.inf
    for i in range(1, 256):
        r, g, b = aci2rgb(i)
        dd = (r - rgb[0]) ** 2 + (g - rgb[1]) ** 2 + (b - rgb[2]) ** 2
        if dd < bd:
            best, bd = i, dd
    return best


def _njit(fn):
    try:
        import numba

        return numba.njit(cache=True)(fn)
    except ImportError:                                  # pragma: no cover - numba is a dependency
        return fn


@_njit
def _thin(offsets, st, z, tol):  # pragma: no cover - compiled
    keep = np.zeros(st.size, np.bool_)
    stack = np.empty((max(st.size, 2), 2), np.int64)
    for k in range(offsets.size - 1):
        a0, a1 = offsets[k], offsets[k + 1]
        if a1 - a0 <= 2:
            for i in range(a0, a1):
                keep[i] = True
            continue
        keep[a0] = True
        keep[a1 - 1] = True
        top = 0
        stack[0, 0] = a0
        stack[0, 1] = a1 - 1
        top = 1
        while top > 0:
            top -= 1
            i, j = stack[top, 0], stack[top, 1]
            if j - i < 2:
                continue
            span = st[j] - st[i]
            worst, at = -1.0, -1
            for m in range(i + 1, j):
                t = (st[m] - st[i]) / span if span > 0 else 0.0
                d = abs(z[m] - (z[i] + t * (z[j] - z[i])))
                if d > worst:
                    worst, at = d, m
            if worst > tol:
                keep[at] = True
                stack[top, 0], stack[top, 1] = i, at
                stack[top + 1, 0], stack[top + 1, 1] = at, j
                top += 2
    return keep


def thin_profile(offsets, station_m, level_m, tol_m=PROFILE_TOLERANCE_M):
    """Vertices to keep of polylines in CSR form so each stays within ``tol_m`` vertically.

    Douglas–Peucker on (chainage, level) per polyline; first and last vertices
    are always kept.

    Examples
    --------
    >>> thin_profile(np.array([0, 4]), np.array([0., 1., 2., 3.]), np.array([0., 0.26, 0.5, 0.])).tolist()
    [True, False, True, True]
    """
    return _thin(np.asarray(offsets, np.int64), np.asarray(station_m, float), np.asarray(level_m, float),
                 float(tol_m))


def _num(v):
    """A DXF real: shortest round-trip text of a float (``repr``), ``0.0`` for non-finite."""
    v = float(v)
    return repr(v) if math.isfinite(v) else "0.0"


def _txt(v):
    return str(v).replace("\r", " ").replace("\n", " ")


class _TagWriter:
    """Our own DXF tag writer for model-space entities (handles from a seed, one owner)."""

    def __init__(self, f, seed, owner):
        self.f = f
        self.h = seed
        self.owner = owner
        self.buf = []

    def handle(self):
        h = self.h
        self.h += 1
        return f"{h:X}"

    def flush(self):
        self.f.write("".join(self.buf))
        self.buf.clear()

    def entity(self, kind, layer, owner=None, style=""):
        h = self.handle()
        self.buf.append(f"  0\n{kind}\n  5\n{h}\n330\n{owner or self.owner}\n100\nAcDbEntity\n  8\n{layer}\n{style}")
        return h

    def xdata(self, pairs):
        self.buf.append(f"1001\n{APPID}\n" + "".join(f"1000\n{_txt(p)}\n" for p in pairs))

    def seqend(self, owner, layer):
        self.entity("SEQEND", layer, owner)

    def polyline3d(self, layer, v, style, xd):
        h = self.entity("POLYLINE", layer, style=style)
        self.buf.append("100\nAcDb3dPolyline\n 66\n1\n 10\n0.0\n 20\n0.0\n 30\n0.0\n 70\n8\n")
        self.xdata(xd)
        pre = f"330\n{h}\n100\nAcDbEntity\n  8\n{layer}\n{style}100\nAcDbVertex\n100\nAcDb3dPolylineVertex\n"
        for x, y, z in np.nan_to_num(v).tolist():
            a = self.h
            self.h += 1
            self.buf.append(f"  0\nVERTEX\n  5\n{a:X}\n{pre} 10\n{x:.4f}\n 20\n{y:.4f}\n 30\n{z:.4f}\n 70\n32\n")
        self.seqend(h, layer)

    def lwpolyline(self, layer, v, style, xd):
        self.entity("LWPOLYLINE", layer, style=style)
        self.buf.append(f"100\nAcDbPolyline\n 90\n{len(v)}\n 70\n0\n" +
                        "".join(f" 10\n{x:.4f}\n 20\n{y:.4f}\n" for x, y in np.nan_to_num(v).tolist()))
        self.xdata(xd)

    def text(self, layer, text, x, y, height, rotation=0.0, centre=False):
        self.entity("TEXT", layer)
        out = (f"100\nAcDbText\n 10\n{x:.4f}\n 20\n{y:.4f}\n 30\n0.0\n 40\n{height:.4f}\n"
               f"  1\n{_txt(text)}\n")
        if rotation:
            out += f" 50\n{rotation:.4f}\n"
        if centre:   # bottom centre: horizontal 1, vertical 1, at the alignment point
            out += f" 72\n1\n 11\n{x:.4f}\n 21\n{y:.4f}\n 31\n0.0\n100\nAcDbText\n 73\n1\n"
        else:
            out += "100\nAcDbText\n"
        self.buf.append(out)

    def insert(self, layer, block, x, y, z, scale, attribs, xd):
        """An insert and its attributes; blank attributes are left out (the block defines them all)."""
        h = self.entity("INSERT", layer)
        sx, sy, sz, ss = f"{x:.4f}", f"{y:.4f}", f"{z:.4f}", f"{scale:.4f}"
        self.buf.append(f"100\nAcDbBlockReference\n 66\n1\n  2\n{block}\n 10\n{sx}\n 20\n{sy}\n 30\n{sz}\n"
                        f" 41\n{ss}\n 42\n{ss}\n 43\n{ss}\n")
        self.xdata(xd)
        # the id shows beside the symbol; the other values are hidden attributes at the same place
        ax, ay = f"{x + 0.9 * scale:.4f}", f"{y + 0.9 * scale:.4f}"
        pre = f"330\n{h}\n100\nAcDbEntity\n  8\n{layer}\n100\nAcDbText\n 10\n{ax}\n 20\n{ay}\n 30\n{sz}\n 40\n{ss}\n"
        first = True
        for tag, value in attribs:
            if value == "" and not first:
                continue
            a = self.h
            self.h += 1
            self.buf.append(f"  0\nATTRIB\n  5\n{a:X}\n{pre}  1\n{_txt(value)}\n100\nAcDbAttribute\n280\n0\n"
                            f"  2\n{tag}\n 70\n{0 if first else 1}\n")
            first = False
        self.seqend(h, layer)


def _fmt_level(v, nd=3):
    v = float(v)
    return f"{v:.{nd}f}" if math.isfinite(v) else ""


def _skeleton(layer_props, h, header_vars, custom, ext):
    """The drawing without model-space entities, by ezdxf (fixed metadata): text, model-space owner, seed."""
    import ezdxf

    keep = ezdxf.options.write_fixed_meta_data_for_testing
    ezdxf.options.write_fixed_meta_data_for_testing = True
    try:
        doc = ezdxf.new("R2013", setup=False)
        doc.header.custom_vars.append("WRITER", "mainspan")   # marks the file as ours (safeio)
        for k, v in header_vars.items():
            doc.header[k] = v
        doc.appids.add(APPID)
        for k, v in custom:
            doc.header.custom_vars.append(k, v)
        for name, (aci, rgb, lw) in layer_props.items():
            lay = doc.layers.add(name, color=aci)
            if rgb is not None:
                lay.rgb = rgb
            if lw is not None:
                lay.dxf.lineweight = lw
        _blocks(doc)
        if ext is not None:
            lo, hi = ext
            doc.header["$EXTMIN"] = (float(lo[0]), float(lo[1]), float(lo[2]))
            doc.header["$EXTMAX"] = (float(hi[0]), float(hi[1]), float(hi[2]))
            doc.set_modelspace_vport(height=float(max(hi[0] - lo[0], hi[1] - lo[1], 1.0)),
                                     center=((lo[0] + hi[0]) / 2, (lo[1] + hi[1]) / 2))
        # ezdxf adds CLASS entries for the entity types in use from a set, whose order follows
        # Python's per-process hash seed: add them now, sorted, so every run writes the same bytes.
        doc.classes.add_required_classes(doc.dxfversion)
        doc.classes.classes = type(doc.classes.classes)(sorted(doc.classes.classes.items()))
        owner = doc.block_records.get("*Model_Space").dxf.handle
        buf = io.StringIO()
        doc.write(buf)
    finally:
        ezdxf.options.write_fixed_meta_data_for_testing = keep
    text = buf.getvalue()
    if ext is not None:
        # ezdxf writes its own "unknown" extents (1e20); put the drawing's in their place
        for var, v in (("$EXTMIN", ext[0]), ("$EXTMAX", ext[1])):
            text = re.sub(rf"(\n\s*9\n\{var}\n)\s*10\n[^\n]*\n\s*20\n[^\n]*\n\s*30\n[^\n]*\n",
                          lambda mm, v=v: f"{mm.group(1)} 10\n{_num(v[0])}\n 20\n{_num(v[1])}\n 30\n{_num(v[2])}\n",
                          text, count=1)
    m = re.search(r"\$HANDSEED\n\s*5\n([0-9A-Fa-f]+)\n", text)
    return text, owner, int(m.group(1), 16), m


def _blocks(doc):
    """Our structure symbols, one unit across, each with the same attribute definitions."""
    shapes = {
        "MS_NODE": lambda b: b.add_circle((0, 0), 0.5),
        "MS_SOURCE": lambda b: (b.add_circle((0, 0), 0.5),
                                b.add_lwpolyline([(0, 0.45), (-0.39, -0.225), (0.39, -0.225)], close=True)),
        "MS_ACCESS": lambda b: (b.add_circle((0, 0), 0.5), b.add_circle((0, 0), 0.32),
                                b.add_line((-0.32, 0), (0.32, 0))),
        "MS_FITTING": lambda b: b.add_lwpolyline([(0, 0.5), (0.5, 0), (0, -0.5), (-0.5, 0)], close=True),
    }
    for name, draw in shapes.items():
        b = doc.blocks.new(name)
        draw(b)
        for j, tag in enumerate(_ATTR_TAGS):
            b.add_attdef(tag, (0.9, 0.9), dxfattribs={"height": 1.0, "flags": 0 if j == 0 else 1})


def _stream_write(path, write, *, overwrite, what):
    """Write through ``write(f)`` into a temporary file beside *path*, then move it into place."""
    from ..safeio import output_lock, replace_into, resolve_output, temp_beside

    target = resolve_output(path)
    try:
        with output_lock(target, what=what, shown=path):
            check_target(path, overwrite=overwrite, what=what)
            with temp_beside(target) as tmp:
                with open(tmp, "w", encoding="utf-8", newline="\n") as f:
                    write(f)
                replace_into(tmp, target)
    except DataFileError:
        raise
    except OSError as exc:
        raise DataFileError(f"cannot write {what} {path!r}: {exc.strerror or exc}; check the folder is "
                            "writable and has space") from None


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
        ``renamed`` (wanted name → written name), ``n_links``, ``n_nodes``,
        ``n_structures`` (access points and fittings), ``n_vertices`` (drawn
        link vertices after thinning) and ``n_stations`` (profile vertices
        before thinning).

    References
    ----------
    Autodesk, *DXF Reference* (AutoCAD 2013): header variables ``$INSUNITS``
    (6 = metres) and ``$MEASUREMENT`` (1 = metric), POLYLINE/LWPOLYLINE, XDATA.
    """
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

    nom = _col(layout, "nominal_mm")
    cls = size_class(nom) if nom is not None else None
    aci_of = [_nearest_aci(c[2]) for c in SIZE_CLASSES]
    props = {}                                  # written name -> (aci, rgb, lineweight)
    if by == "diameter":
        dia = _col(layout, "diameter_mm")
        if nom is None and dia is None:
            raise InputError("by='diameter': the layout has no pipe sizes (nominal_mm/diameter_mm);"
                             " size the pipes with a system or use by='role'")
        mat = _col(layout, "material")
        link_layer = []
        for i in range(m):
            size = _size_text(layout, i) or "UNSIZED"
            mt = str(mat[i]) if mat is not None and str(mat[i]) not in ("", "nan", "None") else ""
            nm = layer("MAIN_" + (f"{mt.upper()}_" if mt else "") + size)
            link_layer.append(nm)
            if cls is not None and nm not in props:
                c = SIZE_CLASSES[cls[i]]
                props[nm] = (aci_of[cls[i]], c[2], c[1])
        link_style = [""] * m
    else:
        name = {"pressure": "MAIN_PRESSURE", "gravity": "MAIN_GRAVITY"}.get(system, "MAIN_PLANNED")
        link_layer = [layer(name)] * m
        if cls is not None:        # the size class on each link: index colour, true colour, lineweight
            style_of = [f" 62\n{aci_of[j]}\n420\n{(c[2][0] << 16) | (c[2][1] << 8) | c[2][2]}\n370\n{c[1]}\n"
                        for j, c in enumerate(SIZE_CLASSES)]
            link_style = [style_of[j] for j in cls]
        else:
            link_style = [""] * m
    roles = np.asarray(layout.nodes.get("role", np.full(n, "site", object))).astype(str)
    node_layer = [layer("NODE_" + r.upper()) for r in roles]
    lab_node, lab_link = layer("LABEL_NODE"), layer("LABEL_LINK")
    ap = layout.tables.get("access_points") or {}
    fit = layout.tables.get("fittings") or {}
    n_ap, n_fit = len(ap.get("x", ())), len(fit.get("x", ()))
    lay_ap = layer("STRUCT_ACCESS") if n_ap else None
    lay_fit = layer("STRUCT_FITTING") if n_fit else None
    for wanted, s in layer_of.items():
        if s in props:
            continue
        color = 7
        if wanted.startswith("NODE_"):
            color = _ROLE_COLORS.get(wanted[5:].lower(), 7)
        elif wanted.startswith("MAIN_"):
            color = 5
        elif wanted.startswith("LABEL_"):
            color = 2
        elif wanted == "STRUCT_ACCESS":
            color = 30
        elif wanted == "STRUCT_FITTING":
            color = 6
        props[s] = (color, None, None)

    # ---- link vertices: profile stations thinned to the tolerance, in one pass
    shift = np.array([x0, y0, 0.0])
    verts, n_stations = [], 0
    for i in range(m):
        verts.append(_link_vertices(layout, i, xy, zg, invert) - shift)
    if invert is None and m:
        cnt = np.array([len(v) for v in verts])
        n_stations = int(cnt.sum())
        off = np.zeros(m + 1, np.int64)
        np.cumsum(cnt, out=off[1:])
        allv = np.concatenate(verts) if m else np.zeros((0, 3))
        chain = np.zeros(len(allv))
        if len(allv):
            step = np.hypot(*np.diff(allv[:, :2], axis=0).T)
            c = np.concatenate([[0.0], np.cumsum(step)])
            chain = c - np.repeat(c[off[:-1]], cnt)
        keep = thin_profile(off, chain, allv[:, 2])
        kept = np.split(allv[keep], np.cumsum(np.bincount(np.repeat(np.arange(m), cnt)[keep], minlength=m))[:-1])
        verts = kept
    else:
        n_stations = int(sum(len(v) for v in verts))
    n_vertices = int(sum(len(v) for v in verts))

    link_text = [_link_label(layout, i, _size_text(layout, i)) for i in range(m)]
    # ---- extents: every node, structure and vertex, plus the symbols and labels around them
    pts = [xy - [x0, y0]] if n else []
    for t in (ap, fit):
        if len(t.get("x", ())):
            pts.append(np.column_stack([np.asarray(t["x"], float), np.asarray(t["y"], float)]) - [x0, y0])
    ext = None
    if pts:
        allp = np.concatenate(pts)
        zs = [v[:, 2] for v in verts if len(v)]
        elev = np.asarray(layout.nodes.get("elevation_m", np.full(n, np.nan)), float)
        zall = np.concatenate(zs + [elev[np.isfinite(elev)]]) if polylines == "3d" else np.zeros(1)
        zall = zall if zall.size else np.zeros(1)
        # a margin for symbols and labels: ids are drawn from 0.9 text heights right of their point, and
        # no character is wider than a text height
        longest = max([len(str(t)) for t in layout.nodes["node_id"]] + [4]) if n else 4
        longest = max(longest, max((len(t) for t in link_text), default=0) // 2 + 1)   # centred link labels
        pad = (2.0 + longest) * h
        lo = np.r_[allp.min(0) - pad, zall.min()]
        hi = np.r_[allp.max(0) + pad, zall.max()]
        ext = (lo, hi)

    header_vars = {"$INSUNITS": 6, "$MEASUREMENT": 1, "$LUNITS": 2, "$TEXTSIZE": h, "$LWDISPLAY": 1}
    custom = [("MAINSPAN_ORIGIN_X_M", format_value(x0, "x_m")), ("MAINSPAN_ORIGIN_Y_M", format_value(y0, "y_m")),
              ("MAINSPAN_CRS", str(layout.run_info.get("working_crs")
                                   or (layout.crs.name if layout.crs is not None else ""))),
              ("MAINSPAN_SYSTEM", system or "planned"),
              ("MAINSPAN_VERSION", str(layout.run_info.get("version", ""))),
              ("MAINSPAN_PROFILE_TOLERANCE_M", format_value(PROFILE_TOLERANCE_M, "tol_m"))]
    text, owner, seed, seed_match = _skeleton(props, h, header_vars, custom, ext)
    start = text.index("ENTITIES\n") + len("ENTITIES\n")
    end = text.index("  0\nENDSEC\n", start)
    counts = {}
    link_ids = layout.links.get("link_id", np.arange(1, m + 1))
    ids = np.asarray(layout.nodes["node_id"]).astype(str)
    pipes = layout.links.get("pipe")
    elev = np.asarray(layout.nodes.get("elevation_m", np.full(n, np.nan)), float)
    inv_n = np.asarray(layout.nodes.get("invert_m", np.full(n, np.nan)), float)
    pres_n = np.asarray(layout.nodes.get("pressure_head_m", np.full(n, np.nan)), float)

    def filled(values):
        return sum(1 for j, v in enumerate(values) if j == 0 or v != "")

    elev_s = [_fmt_level(v) for v in elev.tolist()]
    node_attrs = [list(zip(_ATTR_TAGS, (ids[k], roles[k], "", elev_s[k], _fmt_level(inv_n[k]), _fmt_level(pres_n[k]),
                                        _fmt_level(elev[k] - inv_n[k])))) for k in range(n)]
    ap_attrs, fit_attrs = [], []
    for j in range(n_ap):
        g, iv = float(ap.get("ground_m", [np.nan] * n_ap)[j]), float(ap.get("invert_m", [np.nan] * n_ap)[j])
        kind = str(ap["kind"][j]) if "kind" in ap else "access point"
        ap_attrs.append(list(zip(_ATTR_TAGS, (f"AP{j + 1}", kind, "", _fmt_level(g), _fmt_level(iv), "",
                                              _fmt_level(g - iv)))))
    for j in range(n_fit):
        size = float(fit["size_mm"][j]) if "size_mm" in fit else float("nan")
        fit_attrs.append(list(zip(_ATTR_TAGS, (f"F{j + 1}", str(fit["type"][j]),
                                               f"{size:.0f}" if math.isfinite(size) else "", "", "", "", ""))))
    n_attribs = sum(filled([v for _, v in a]) for a in node_attrs + ap_attrs + fit_attrs)

    def entities(f, w):
        for i in range(m):
            v = verts[i]
            lay = link_layer[i]
            xd = [f"link_id={link_ids[i]}", f"from_node={ids[layout.link_ends[i, 0]]}",
                  f"to_node={ids[layout.link_ends[i, 1]]}"]
            if pipes is not None:
                xd.append(f"pipe={pipes[i]}")
            if polylines == "3d":
                w.polyline3d(lay, v, link_style[i], xd)
            else:
                w.lwpolyline(lay, [tuple(p[:2]) for p in v[[0, -1]]], link_style[i], xd)
            counts[lay] = counts.get(lay, 0) + 1
            # label at mid-link, along the link, kept upright, half a text height off the line
            a, b = layout.link_ends[i]
            d = xy[b] - xy[a]
            ang = math.degrees(math.atan2(d[1], d[0]))
            if ang > 90:
                ang -= 180
            elif ang <= -90:
                ang += 180
            mid = (xy[a] + xy[b]) / 2 - shift[:2]
            r = math.radians(ang)
            w.text(lab_link, link_text[i], mid[0] - math.sin(r) * 0.5 * h,
                   mid[1] + math.cos(r) * 0.5 * h, h, rotation=ang, centre=True)
            counts[lab_link] = counts.get(lab_link, 0) + 1
            if len(w.buf) > 4096:
                w.flush()
        xs, ys, zs = (xy[:, 0] - x0).tolist(), (xy[:, 1] - y0).tolist(), np.nan_to_num(elev).tolist()
        for k in range(n):
            pz = zs[k] if polylines == "3d" else 0.0
            block = "MS_SOURCE" if roles[k] in ("source", "outlet") else "MS_NODE"
            w.insert(node_layer[k], block, xs[k], ys[k], pz, h, node_attrs[k], [f"node_id={ids[k]}", f"role={roles[k]}"])
            counts[node_layer[k]] = counts.get(node_layer[k], 0) + 1
            w.text(lab_node, ids[k], xs[k] + 0.9 * h, ys[k] + 0.9 * h, h)
            counts[lab_node] = counts.get(lab_node, 0) + 1
            if len(w.buf) > 4096:
                w.flush()
        for j in range(n_ap):
            g = float(ap.get("ground_m", [np.nan] * n_ap)[j])
            px, py = float(ap["x"][j]) - x0, float(ap["y"][j]) - y0
            pz = g if (polylines == "3d" and math.isfinite(g)) else 0.0
            w.insert(lay_ap, "MS_ACCESS", px, py, pz, h, ap_attrs[j],
                     [f"access_id=AP{j + 1}", f"link_id={ap['link_id'][j]}" if "link_id" in ap else "link_id="])
            counts[lay_ap] = counts.get(lay_ap, 0) + 1
            if len(w.buf) > 4096:
                w.flush()
        for j in range(n_fit):
            w.insert(lay_fit, "MS_FITTING", float(fit["x"][j]) - x0, float(fit["y"][j]) - y0, 0.0, h, fit_attrs[j],
                     [f"fitting_id=F{j + 1}", f"type={fit['type'][j]}",
                      f"link_id={fit['link_id'][j]}" if "link_id" in fit else "link_id="])
            counts[lay_fit] = counts.get(lay_fit, 0) + 1
            if len(w.buf) > 4096:
                w.flush()
        w.flush()

    # handles are known before writing (one per entity, vertex, attribute and end marker), so the
    # header's handle seed is written first and the entities go straight to the file
    n_link_handles = m * (2 if polylines == "2d" else 0) + (sum(len(v) + 3 for v in verts) if polylines == "3d" else 0)
    n_handles = n_link_handles + n * 3 + (n_ap + n_fit) * 2 + n_attribs

    def write(f):
        f.write(text[:seed_match.start(1)])
        f.write(f"{seed + n_handles:X}")
        f.write(text[seed_match.end(1):start])
        w = _TagWriter(f, seed, owner)
        entities(f, w)
        if w.h != seed + n_handles:                      # pragma: no cover - a bug in the count above
            raise RuntimeError(f"DXF writer used {w.h - seed} handles, counted {n_handles}")
        f.write(text[end:])

    try:
        _stream_write(path, write, overwrite=overwrite, what="DXF")
        if prj is not None:
            atomic_write(prj_path, prj + "\n", overwrite=overwrite, what="projection file")
    except OSError as exc:
        if isinstance(exc, DataFileError):
            raise
        raise DataFileError(f"cannot write DXF {path!r}: {exc}; check the folder is writable") from None
    return {"path": path, "prj": prj_path if prj is not None else None, "origin": (x0, y0),
            "text_height_m": h, "layers": dict(sorted(counts.items())), "renamed": renamed,
            "n_links": m, "n_nodes": n, "n_structures": n_ap + n_fit, "n_vertices": n_vertices,
            "n_stations": n_stations}
