"""Figures of a layout (matplotlib, Agg backend): tree walks, saving, and the
figure modules' public names.

* :func:`long_section` (:mod:`.section`) — profile with data bands along one
  path of the tree, one stated vertical exaggeration.
* :func:`plan_map` (:mod:`.planmap`) — the labelled plan for review.
* :func:`longest_paths` — the longest root-to-node path and the next-longest
  branches off the paths already taken, found with vectorised pointer jumping
  over ``link_ends`` (no per-node Python loop).

Saved files are reproducible: SVG ids are salted with a fixed string and no
dates or software names are written into PNG, SVG or PDF metadata.

References
----------
Wyllie, J.C. (1979) "The complexity of parallel computations", PhD thesis, Cornell
University (TR 79-387) (from memory)
— pointer jumping (path doubling) for sums along rooted trees.
"""

from __future__ import annotations

import io
import os


from ..errors import InputError
from .tree import _parent_arrays, _plt, distance_to_root, longest_paths  # noqa: F401

__all__ = ["long_section", "save_long_section", "plan_map", "save_figure", "longest_paths", "hillshade",
           "distance_to_root", "figure_bytes"]

_SALT = "mainspan"


def figure_bytes(fig, fmt):
    """Render a figure to bytes without dates or software names (reproducible)."""
    import matplotlib

    meta = {"png": {"Software": None}, "svg": {"Date": None, "Creator": None},
            "pdf": {"CreationDate": None, "ModDate": None, "Creator": None, "Producer": None}}
    if fmt not in meta:
        raise InputError(f"figure format {fmt!r}: expected png, svg or pdf")
    buf = io.BytesIO()
    with matplotlib.rc_context({"svg.hashsalt": _SALT, "svg.fonttype": "path",
                                "pdf.compression": 6}):
        fig.savefig(buf, format=fmt, metadata=meta[fmt], dpi=110 if fmt == "png" else "figure")
    return buf.getvalue()


def save_figure(fig, out_path, *, overwrite=False):
    """Save a figure as PNG, SVG or PDF by extension, atomically."""
    from ..writers.tables import atomic_write

    ext = os.path.splitext(os.fspath(out_path))[1].lower().lstrip(".")
    if ext not in ("png", "svg", "pdf"):
        raise InputError(f"figure output {os.fspath(out_path)!r}: extension must be .png, .svg "
                         "or .pdf")
    return atomic_write(out_path, figure_bytes(fig, ext), overwrite=overwrite, what="figure")


def save_long_section(layout, out_path, *, overwrite=False, **kw):
    """Draw :func:`long_section` (keywords passed on) and save it by extension."""
    from .section import long_section

    return save_figure(long_section(layout, **kw), out_path, overwrite=overwrite)




def __getattr__(name):
    # the figure functions live in their own modules; import them on first use
    if name in ("long_section", "section_data", "fit_exaggeration"):
        from . import section

        return getattr(section, name)
    if name in ("plan_map", "hillshade"):
        from . import planmap

        return getattr(planmap, name)
    raise AttributeError(name)
