"""LandXML 1.2 pipe network of a layout.

What is written (namespace ``http://www.landxml.org/schema/LandXML-1.2``):

* ``Units/Metric`` — metres, square metres, cubic metres, millimetre pipe
  diameters, litres per second, metres per second, stated explicitly.
* ``CoordinateSystem`` — the working CRS name, its EPSG code when it has one,
  and its WKT.
* ``Application`` naming mainspan and its version.
* ``PipeNetworks/PipeNetwork`` (``pipeNetType="water"`` for a pressure main,
  ``"sanitary"`` for a gravity main, ``"storm"`` for one designed on the
  storm basis, ``"other"`` when not sized) with one
  ``Struct`` per node (``Center`` as *northing easting*, the standard's
  order; ``elevRim`` = ground, ``elevSump`` = lowest invert; a ``Connection``
  element since the layout does not size structures; one ``Invert`` per
  connected pipe with ``flowDir`` ``in``/``out``) and one ``Pipe`` per link
  (``refStart``/``refEnd`` in the direction of flow: away from the source of a
  pressure main, toward the outlet of a gravity main; ``length`` in metres;
  ``slope`` in percent, positive when the pipe falls along the flow, from the
  inverts where known, else from the ground; ``CircPipe`` with the inner
  ``diameter`` in mm and the ``material``).  Other link and node attributes
  (flow, cost, checks, …) go to a ``Feature`` of ``Property`` label/value
  pairs so nothing is lost.

* Access points (manholes) and fittings (valves, washouts, thrust blocks
  ...) of the design as further ``Struct`` elements (names ``AP<k>`` and
  ``F<k>``; ``elevRim``/``elevSump`` for access points; their link, chainage,
  type and size as ``Feature`` properties), so the structures reach CAD.

LandXML requires ``date`` and ``time`` on the root element: the moment the
file is written (UTC), or ``SOURCE_DATE_EPOCH`` (seconds since 1970, UTC) when
that environment variable is set, so a build can be reproduced byte for byte;
a date given by the run (``run_info["date"]``/``["time"]``, or an ISO
``run_info["timestamp"]``) is used before the clock.

Where no pipe sizes exist (a plan without a system) the pipes carry no
``CircPipe``; where no inverts exist, no ``Invert`` elements are written.

References
----------
LandXML.org, *LandXML 1.2 schema* (``LandXML-1.2.xsd``), 2008: elements
``Units/Metric``, ``CoordinateSystem``, ``PipeNetwork``, ``Struct``, ``Pipe``,
``CircPipe``, ``Invert`` (element order from memory; the unit names are the
schema's enumeration values).
"""

from __future__ import annotations

import re

import numpy as np

from ..errors import InputError
from .tables import atomic_write, format_value, link_inverts

__all__ = ["write_landxml", "LANDXML_NS", "FIXED_DATE", "FIXED_TIME"]

LANDXML_NS = "http://www.landxml.org/schema/LandXML-1.2"
FIXED_DATE = "2000-01-01"
FIXED_TIME = "00:00:00"

# link and node columns already expressed by the LandXML elements themselves
_LINK_DONE = {"link_id", "from_node", "to_node", "length_m", "material", "diameter_mm"}
_NODE_DONE = {"node_id"}


def _f(v, nd=3):
    return f"{float(v):.{nd}f}"


def _finite(v):
    try:
        return v is not None and np.isfinite(float(v))
    except (TypeError, ValueError):
        return False


def _date_time(info):
    """(date, time) for the root element: SOURCE_DATE_EPOCH, else the run's own, else now (UTC)."""
    import datetime
    import os

    sde = os.environ.get("SOURCE_DATE_EPOCH", "").strip()
    if sde:
        try:
            when = datetime.datetime.fromtimestamp(int(sde), tz=datetime.timezone.utc)
        except (ValueError, OverflowError, OSError):
            raise InputError(f"SOURCE_DATE_EPOCH={sde!r} is not a whole number of seconds since 1970; "
                             "set it to an integer (e.g. `date +%s`) or unset it") from None
        return when.strftime("%Y-%m-%d"), when.strftime("%H:%M:%S")
    d, t = str(info.get("date", "")), str(info.get("time", ""))
    stamp = str(info.get("timestamp", ""))
    m = re.match(r"^(\d{4}-\d{2}-\d{2})[T ](\d{2}:\d{2}:\d{2})", stamp)
    if m and not d:
        d, t = m.group(1), m.group(2)
    now = datetime.datetime.now(datetime.timezone.utc)
    if not re.match(r"^\d{4}-\d{2}-\d{2}$", d):
        return now.strftime("%Y-%m-%d"), now.strftime("%H:%M:%S")
    if not re.match(r"^\d{2}:\d{2}:\d{2}$", t):
        t = FIXED_TIME
    return d, t


def _epsg(crs):
    if crs is None:
        return None
    try:
        return crs.to_epsg()
    except Exception:
        return None


def _features(parent, E, columns, i, skip):
    props = [(k, v) for k, v in columns.items() if k not in skip]
    if not props:
        return
    feat = E("Feature", name="mainspan")
    for k, v in props:
        val = np.asarray(v)[i]
        val = val.item() if hasattr(val, "item") else val
        feat.append(E("Property", label=str(k), value=format_value(val, k)))
    parent.append(feat)


def _structures(structs, E, layout):
    """Access points and fittings as Structs (see the module notes)."""
    for prefix, table, done in (("AP", layout.tables.get("access_points") or {}, {"x", "y", "ground_m", "invert_m"}),
                                ("F", layout.tables.get("fittings") or {}, {"x", "y"})):
        k_all = len(table.get("x", ()))
        for j in range(k_all):
            attrs = {"name": f"{prefix}{j + 1}"}
            g = float(np.asarray(table.get("ground_m", np.full(k_all, np.nan)), float)[j])
            iv = float(np.asarray(table.get("invert_m", np.full(k_all, np.nan)), float)[j])
            if _finite(g):
                attrs["elevRim"] = _f(g)
            if _finite(iv):
                attrs["elevSump"] = _f(iv)
            s = E("Struct", **attrs)
            center = f"{float(table['y'][j]):.3f} {float(table['x'][j]):.3f}"     # northing first
            if _finite(g):
                center += f" {g:.3f}"
            s.append(E("Center", center))
            s.append(E("Connection"))
            _features(s, E, table, j, done)
            structs.append(s)


def write_landxml(layout, path, *, overwrite=False):
    """Write the layout as a LandXML 1.2 pipe network.

    Parameters
    ----------
    layout : mainspan.pipeline.layout.Layout
    path : str or os.PathLike
        Target ``.xml`` file.
    overwrite : bool, default False
        Replace an existing file; otherwise :class:`mainspan.errors.OverwriteError`.

    Returns
    -------
    str
        The path written.
    """
    from lxml import etree
    from lxml.builder import ElementMaker

    E = ElementMaker(namespace=LANDXML_NS, nsmap={None: LANDXML_NS})
    info = layout.run_info
    d, t = _date_time(info)
    system = (info.get("system") or "").lower()
    net_type = {"pressure": "water", "gravity": "sanitary"}.get(system, "other")
    if system == "gravity" and str(info.get("design:gravity_basis", "")).lower() == "storm":
        net_type = "storm"   # the design basis says what the gravity mains carry
    gravity = system == "gravity"

    root = E("LandXML", version="1.2", date=d, time=t)
    root.append(E("Units", E("Metric", areaUnit="squareMeter", linearUnit="meter",
                             volumeUnit="cubicMeter", temperatureUnit="celsius",
                             pressureUnit="HPA", diameterUnit="millimeter",
                             elevationUnit="meter", velocityUnit="metersPerSecond",
                             flowUnit="literPerSecond", angularUnit="decimal degrees",
                             directionUnit="decimal degrees")))
    crs = layout.crs
    cs = {"name": str(info.get("working_crs") or (crs.name if crs is not None else "unknown"))}
    epsg = _epsg(crs)
    if epsg is not None:
        cs["epsgCode"] = str(epsg)
    wkt = ""
    if crs is not None:
        try:
            wkt = crs.to_wkt("WKT1_GDAL")      # the OGC WKT1 that ogcWktCode names
        except Exception:
            wkt = crs.to_wkt()
    else:
        wkt = str(info.get("working_crs_wkt", ""))
    if wkt:
        cs["ogcWktCode"] = wkt
    root.append(E("CoordinateSystem", **cs))
    root.append(E("Application", name="mainspan", desc="layout of mains over terrain",
                  version=str(info.get("version", ""))))

    ids = np.asarray(layout.nodes["node_id"]).astype(str)
    n, m = layout.n_nodes, layout.n_links
    if len(set(ids)) != n:
        raise InputError("layout nodes: node_id values are not unique; LandXML structure "
                         "names must be; give every site its own id")
    xy = np.asarray(layout.node_xy, float)
    ends = np.asarray(layout.link_ends, np.int64).reshape(-1, 2)
    lk = layout.links
    lid = np.asarray(lk.get("link_id", np.arange(1, m + 1)))
    pipe_names = [f"L{v}" for v in lid]
    elev = np.asarray(layout.nodes.get("elevation_m", np.full(n, np.nan)), float)
    inv = link_inverts(layout)
    has_inv = inv is not None
    # flow direction: pressure mains flow away from the root, gravity mains toward it
    start_col, end_col = (1, 0) if gravity else (0, 1)
    length = np.asarray(lk.get("length_m", np.hypot(*(xy[ends[:, 1]] - xy[ends[:, 0]]).T)), float)
    zg = layout.link_coordinates("ground")[:, :, 2] if m else np.zeros((0, 2))
    zz = inv if has_inv else zg
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = 100.0 * (zz[:, start_col] - zz[:, end_col]) / length

    # incidence: for each node, the pipes at it in link order
    at_node = [[] for _ in range(n)]
    for k in range(m):
        at_node[ends[k, start_col]].append((k, start_col, "out"))
        at_node[ends[k, end_col]].append((k, end_col, "in"))

    net = E("PipeNetwork", name=str(info.get("name", "mainspan layout")), pipeNetType=net_type)
    structs = E("Structs")
    node_inv = np.asarray(layout.nodes["invert_m"], float) if "invert_m" in layout.nodes else None
    for i in range(n):
        attrs = {"name": ids[i]}
        if _finite(elev[i]):
            attrs["elevRim"] = _f(elev[i])
        sump = [inv[k, c] for k, c, _ in at_node[i] if inv is not None and _finite(inv[k, c])]
        if node_inv is not None and _finite(node_inv[i]):
            sump.append(node_inv[i])
        if sump:
            attrs["elevSump"] = _f(min(sump))
        s = E("Struct", **attrs)
        center = f"{xy[i, 1]:.3f} {xy[i, 0]:.3f}"          # northing first
        if _finite(elev[i]):
            center += f" {elev[i]:.3f}"
        s.append(E("Center", center))
        s.append(E("Connection"))
        if inv is not None:
            for k, c, direction in at_node[i]:
                if _finite(inv[k, c]):
                    s.append(E("Invert", refPipe=pipe_names[k], elev=_f(inv[k, c]),
                               flowDir=direction))
        _features(s, E, layout.nodes, i, _NODE_DONE)
        structs.append(s)
    _structures(structs, E, layout)
    net.append(structs)

    pipes = E("Pipes")
    dia = np.asarray(lk["diameter_mm"], float) if "diameter_mm" in lk else None
    mat = np.asarray(lk["material"]).astype(str) if "material" in lk else None
    wall = None
    for c in ("wall_mm", "thickness_mm"):
        if c in lk:
            wall = np.asarray(lk[c], float)
    for k in range(m):
        attrs = {"name": pipe_names[k], "refStart": ids[ends[k, start_col]],
                 "refEnd": ids[ends[k, end_col]], "length": _f(length[k])}
        if _finite(slope[k]):
            attrs["slope"] = _f(slope[k], 4)
        p = E("Pipe", **attrs)
        if dia is not None and _finite(dia[k]):
            ca = {"diameter": _f(dia[k], 1)}
            if wall is not None and _finite(wall[k]):
                ca["thickness"] = _f(wall[k], 1)
            if mat is not None and mat[k] not in ("", "nan", "None"):
                ca["material"] = mat[k]
            p.append(E("CircPipe", **ca))
        _features(p, E, lk, k, _LINK_DONE)
        pipes.append(p)
    net.append(pipes)
    root.append(E("PipeNetworks", net))

    data = etree.tostring(root, xml_declaration=True, encoding="UTF-8", pretty_print=True)
    return atomic_write(path, data, overwrite=overwrite, what="LandXML")
