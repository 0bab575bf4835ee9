"""The CRS and units of the written files (``[output] output_crs``, ``output_lengths``).

A layout is planned in a metric working CRS.  A surveyor whose base drawing is
in State Plane US survey feet wants the hand-off files in those coordinates, so
they overlay without a transformation: :func:`output_layout` returns a copy of
the layout with every coordinate (sites, link ends, fittings, access points)
in the output CRS, and with ``output_lengths="crs"`` extra columns giving the
lengths and levels in the output CRS's unit (``length_us_ft`` beside
``length_m``).  The metre columns stay as they are, so a layout read back is
still designed in metres; geometry Z values stay in metres (levels in the
output unit are in the extra columns).

``run_info`` records the choice (``output_crs``, ``output_crs_epsg``,
``output_crs_choice``, ``output_lengths``) and the title-block entries of the
report.
"""

from __future__ import annotations

import copy
import re

import numpy as np
import pyproj

from ..errors import InputError

__all__ = ["resolve_output_crs", "output_layout", "check_output_settings", "unit_suffix",
           "TITLE_KEYS"]

#: ``[output]`` keys copied into ``run_info`` for the report's title block.
TITLE_KEYS = ("scheme_name", "revision", "issue_date", "prepared_by", "checked_by")
#: Unit suffixes by conversion factor to metres (US survey foot: 1200/3937 m, NIST SP 811).
_UNIT_SUFFIX = {1.0: "m", 0.3048: "ft", 1200.0 / 3937.0: "us_ft"}
#: Columns converted with output_lengths="crs": lengths and levels in metres.
_LENGTH_COLUMNS = {
    "links": ("length_m", "surface_length_m", "pipe_length_m", "z_from_m", "z_to_m",
              "invert_from_m", "invert_to_m", "invert_up_m", "invert_down_m",
              "depth_max_m", "cover_min_m", "trench_depth_m", "hgl_from_m", "hgl_to_m"),
    "nodes": ("elevation_m", "invert_m", "depth_m", "hgl_m", "drop_m", "lift_m"),
    "access_points": ("chainage_m", "ground_m", "invert_m", "depth_m", "drop_m", "lift_m"),
    "fittings": ("chainage_m",),
}


def _parse(value, what):
    try:
        return pyproj.CRS.from_user_input(value)
    except pyproj.exceptions.CRSError as exc:
        raise InputError(f"{what}: {value!r} is not a CRS PROJ understands ({exc}); give input, "
                         "working, an EPSG code such as EPSG:2223, or a WKT string") from None


def check_output_settings(out: dict, *, where="[output] output_crs"):
    """Check ``output_crs`` before any work (one-line InputError naming the option)."""
    v = (out or {}).get("output_crs")
    if v is None or str(v).strip().lower() in ("input", "working"):
        return
    crs = _parse(str(v), where)
    if not crs.is_projected:
        raise InputError(f"{where}: {v!r} is {'geographic' if crs.is_geographic else 'not projected'}"
                         "; the written lengths and drawings need a projected CRS (e.g. a State "
                         "Plane or UTM EPSG code), or input / working")


def resolve_output_crs(value, *, input_crs=None, working_crs=None):
    """The output :class:`pyproj.CRS` for ``value`` (``input``, ``working`` or a CRS)."""
    v = "working" if value is None else value
    if isinstance(v, pyproj.CRS):
        return v
    key = str(v).strip().lower()
    if key == "working":
        return working_crs
    if key == "input":
        if input_crs is None:
            raise InputError("output_crs=input: the sites' own CRS is not known for this layout "
                             "(it was read back from a file); give an EPSG code instead")
        return input_crs
    check_output_settings({"output_crs": v}, where="output_crs")
    return _parse(str(v), "output_crs")


def unit_suffix(crs) -> tuple[str, float]:
    """(column suffix, metres per unit) of the horizontal axes of a projected CRS."""
    f = float(crs.axis_info[0].unit_conversion_factor)
    for k, s in _UNIT_SUFFIX.items():
        if abs(f - k) <= 1e-12 * k:
            return s, f
    name = re.sub(r"[^a-z0-9]+", "_", crs.axis_info[0].unit_name.lower()).strip("_")
    return name or "unit", f


def _transform(xy, t):
    xy = np.asarray(xy, float).reshape(-1, 2)
    if not len(xy):
        return xy.copy()
    x, y = t.transform(xy[:, 0], xy[:, 1])
    return np.column_stack([x, y])


def output_layout(layout, output: dict | None = None, *, input_crs=None):
    """A copy of ``layout`` in the output CRS and units of the ``[output]`` settings.

    Parameters
    ----------
    layout : mainspan.pipeline.layout.Layout
    output : dict, optional
        ``[output]`` settings: ``output_crs`` (``"working"`` default,
        ``"input"`` or a CRS), ``output_lengths`` (``"m"`` default or
        ``"crs"``) and the title-block keys (:data:`TITLE_KEYS`).
    input_crs : pyproj.CRS, optional
        The sites' own CRS; default ``layout.sites.source_crs``.

    Returns
    -------
    Layout
        The same object when nothing changes but ``run_info``; otherwise a
        copy whose ``crs``, ``node_xy`` and point tables are in the output CRS.
    """
    out = dict(output or {})
    choice = out.get("output_crs") or "working"
    lengths = out.get("output_lengths") or "m"
    if lengths not in ("m", "crs"):
        raise InputError(f"output_lengths: expected m or crs, got {lengths!r}")
    if input_crs is None and getattr(layout, "sites", None) is not None:
        input_crs = getattr(layout.sites, "source_crs", None)
    for k in TITLE_KEYS:
        if out.get(k):
            layout.run_info[k] = str(out[k])
    dst = resolve_output_crs(choice, input_crs=input_crs, working_crs=layout.crs)
    same = dst is None or layout.crs is None or dst == layout.crs
    suffix, factor = unit_suffix(dst if dst is not None else layout.crs) \
        if (dst or layout.crs) is not None and (dst or layout.crs).is_projected else ("m", 1.0)
    info = {"output_crs_choice": str(choice),
            "output_crs": "" if dst is None else dst.name,
            "output_crs_epsg": str((dst.to_epsg() if dst is not None else None) or ""),
            "output_lengths": "metres" if lengths == "m" or suffix == "m"
            else f"metres and {dst.axis_info[0].unit_name} (columns *_{suffix})"}
    layout.run_info.update(info)        # the run records what its files used
    if same and (lengths == "m" or suffix == "m"):
        return layout
    new = copy.copy(layout)
    new.run_info = {**layout.run_info, **info}
    new.nodes, new.links = dict(layout.nodes), dict(layout.links)
    new.tables = {k: dict(v) for k, v in layout.tables.items()}
    if not same:
        t = pyproj.Transformer.from_crs(layout.crs, dst, always_xy=True)
        new.crs = dst
        new.node_xy = _transform(layout.node_xy, t)
        for tab in new.tables.values():
            if "x" in tab and "y" in tab:
                xy = _transform(np.column_stack([np.asarray(tab["x"], float),
                                                 np.asarray(tab["y"], float)]), t)
                tab["x"], tab["y"] = xy[:, 0], xy[:, 1]
        new.run_info["output_crs_wkt"] = dst.to_wkt()
    if lengths == "crs" and suffix != "m":
        for name, cols in _LENGTH_COLUMNS.items():
            tab = {"links": new.links, "nodes": new.nodes}.get(name, new.tables.get(name))
            if not tab:
                continue
            for c in cols:
                if c in tab:
                    tab[c[:-2] + "_" + suffix] = np.asarray(tab[c], float) / factor
    return new
