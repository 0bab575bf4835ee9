"""What a task needs on a worker: rasters opened from paths, once per worker process."""

from __future__ import annotations

import os
from collections import OrderedDict

__all__ = ["surface_spec", "resolve_surface", "MAX_OPEN_SURFACES"]

#: Rasters a worker process keeps open between tasks (least recently used closed first).
MAX_OPEN_SURFACES = 8

_OPEN: OrderedDict = OrderedDict()


def surface_spec(path, *, crs, raster_crs=None, name="terrain"):
    """A picklable description of a raster, opened on the worker by :func:`resolve_surface`.

    Workers open the file from *path* themselves, so a cluster needs the
    inputs on storage every worker sees under the same path.
    """
    if path is None:
        return None
    return ("surface", os.fspath(path), crs, raster_crs, str(name))


def resolve_surface(x):
    """The :class:`~mainspan.ground.surfaces.Surface` of a spec (a Surface or None as given)."""
    if not (isinstance(x, tuple) and len(x) == 5 and x[0] == "surface"):
        return x
    from ..ground.surfaces import open_surface

    _, path, crs, raster_crs, name = x
    try:     # a long-lived worker must not keep serving a file replaced since
        st = os.stat(path)
        stamp = (st.st_mtime_ns, st.st_size)
    except OSError:
        stamp = None       # open_surface says what is wrong with the path
    key = (path, stamp, crs.to_wkt(), raster_crs, name)
    surf = _OPEN.get(key)
    if surf is None:
        surf = _OPEN[key] = open_surface(path, working_crs=crs, raster_crs=raster_crs, name=name)
        while len(_OPEN) > MAX_OPEN_SURFACES:
            _OPEN.popitem(last=False)[1].close()
    else:
        _OPEN.move_to_end(key)
    return surf
