"""CSV tables of a layout: the links and the bill of quantities.

Floats are written with a fixed number of decimals chosen from the unit in the
column name (``_m`` → mm resolution, ``_mm`` → 0.1 mm, costs → cents, …), so
the same layout always gives the same bytes and a diff between two runs shows
only real changes.  Missing values (NaN) are written as empty cells.

The file-safety helpers re-exported here (:func:`check_target`,
:func:`atomic_write`) come from :mod:`mainspan.safeio` and are shared by every
mainspan writer: lock, temporary file in the target's folder, fsync, atomic
move; an existing file is only replaced when ``overwrite=True``.
"""

from __future__ import annotations

import csv
import io

import numpy as np

from ..errors import InputError

__all__ = ["write_links_csv", "write_quantities_csv", "format_value", "check_target",
           "atomic_write", "link_inverts", "total_rows"]

# decimals by column-name suffix (first match wins); the rest use 6 significant digits
_DECIMALS = (("_lps", 3), ("_mps", 3), ("_pct", 3), ("_mm", 1), ("_m", 3),
             ("cost", 2), ("_kpa", 1))


# --------------------------------------------------------------------------- file safety
# Lock, temp file, fsync, rights and atomic move live in mainspan.safeio, shared by all writers.
from ..safeio import atomic_write, check_target  # noqa: E402,F401


# --------------------------------------------------------------------------- shared reads
def link_inverts(layout):
    """(L, 2) pipe inverts at each link's (from_node, to_node), or None when not designed.

    Reads ``invert_from_m``/``invert_to_m``, or the gravity design's
    ``invert_down_m``/``invert_up_m`` (downstream end = from_node, nearer the outlet).
    """
    lk = layout.links
    for a, b in (("invert_from_m", "invert_to_m"), ("invert_down_m", "invert_up_m")):
        if a in lk and b in lk:
            return np.column_stack([np.asarray(lk[a], float), np.asarray(lk[b], float)])
    return None


def total_rows(table: dict):
    """Boolean mask of summary rows (a text cell reading "total") in a table of columns."""
    n = len(next(iter(table.values()))) if table else 0
    mask = np.zeros(n, bool)
    for v in table.values():
        a = np.asarray(v)
        if a.dtype.kind in "OUS":
            mask |= np.char.lower(a.astype(str)) == "total"
    return mask


# --------------------------------------------------------------------------- formatting
def _decimals(name):
    for suffix, d in _DECIMALS:
        if name.endswith(suffix) or (suffix == "cost" and "cost" in name):
            return d
    return None


def format_value(v, name=""):
    """One cell as text: fixed decimals by unit suffix of ``name``; NaN → ``""``."""
    if v is None:
        return ""
    if isinstance(v, (bool, np.bool_)):
        return "true" if v else "false"
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (float, np.floating)):
        f = float(v)
        if not np.isfinite(f):
            return "" if np.isnan(f) else ("inf" if f > 0 else "-inf")
        d = _decimals(name)
        if d is None:
            s = f"{f:.6g}"
        else:
            s = f"{f:.{d}f}"
        # no "-0.000": a value that rounds to zero is written unsigned
        return s[1:] if s.startswith("-") and float(s) == 0 else s
    return str(v)


def _rows(columns: dict):
    names = list(columns)
    cols = [np.asarray(columns[k]) for k in names]
    n = len(cols[0]) if cols else 0
    for k, c in zip(names, cols):
        if c.ndim != 1 or len(c) != n:
            raise InputError(f"table column {k!r} has shape {c.shape}, expected ({n},); "
                             "the layout is damaged")
    yield names
    for i in range(n):
        yield [format_value(c[i].item() if hasattr(c[i], "item") else c[i], k)
               for k, c in zip(names, cols)]


def _csv_text(columns: dict) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    for row in _rows(columns):
        w.writerow(row)
    return buf.getvalue()


# --------------------------------------------------------------------------- writers
def write_links_csv(layout, path, *, overwrite=False):
    """Write the ``links`` table to CSV, one row per link in grow order.

    Every link column of the layout is written in its own order, followed by
    the plan coordinates of both ends (``from_x_m``, ``from_y_m``, ``to_x_m``,
    ``to_y_m``) in the working CRS.

    Parameters
    ----------
    layout : mainspan.pipeline.layout.Layout
    path : str or os.PathLike
        Target ``.csv`` file.
    overwrite : bool, default False
        Replace an existing file; otherwise :class:`mainspan.errors.OverwriteError`.

    Returns
    -------
    str
        The path written.
    """
    cols = {k: v for k, v in layout.links.items()}
    xy = np.asarray(layout.node_xy, float)[np.asarray(layout.link_ends, np.int64)]
    xy = xy.reshape(-1, 2, 2)
    for name, (e, a) in {"from_x_m": (0, 0), "from_y_m": (0, 1),
                         "to_x_m": (1, 0), "to_y_m": (1, 1)}.items():
        if name not in cols:
            cols[name] = xy[:, e, a]
    return atomic_write(path, _csv_text(cols), overwrite=overwrite, what="links CSV")


def write_quantities_csv(layout, path, *, overwrite=False):
    """Write the bill of quantities (``layout.tables["quantities"]``) to CSV.

    Parameters
    ----------
    layout : mainspan.pipeline.layout.Layout
    path : str or os.PathLike
    overwrite : bool, default False

    Returns
    -------
    str
        The path written.

    Raises
    ------
    mainspan.errors.InputError
        When the layout has no quantities table (it was planned without a system).
    """
    q = layout.tables.get("quantities")
    if not q:
        raise InputError("layout has no 'quantities' table (pipes were not sized); "
                         "plan with a system (pressure or gravity) to get a bill of quantities")
    return atomic_write(path, _csv_text(dict(q)), overwrite=overwrite, what="quantities CSV")
