"""``show_versions()``: versions a bug report needs."""

from __future__ import annotations

import platform
import sys

from ._version import __version__

__all__ = ["show_versions", "versions"]


def versions() -> dict:
    """Versions of mainspan, Python and the geospatial stack underneath."""
    out = {"mainspan": __version__, "python": sys.version.split()[0],
           "platform": platform.platform()}
    import numpy
    out["numpy"] = numpy.__version__
    for mod in ("scipy", "numba", "shapely", "pyproj", "pyogrio", "rasterio", "geopandas",
                "ezdxf", "matplotlib"):
        try:
            out[mod] = __import__(mod).__version__
        except Exception:  # optional or broken: say so rather than fail
            out[mod] = "not installed"
    try:
        import rasterio
        out["GDAL"] = rasterio.__gdal_version__
    except Exception:
        out["GDAL"] = "unknown"
    try:
        import pyproj
        out["PROJ"] = pyproj.proj_version_str
    except Exception:
        out["PROJ"] = "unknown"
    try:
        import shapely
        out["GEOS"] = shapely.geos_version_string
    except Exception:
        out["GEOS"] = "unknown"
    return out


def show_versions(file=None):
    """Print :func:`versions` one per line."""
    f = file or sys.stdout
    for k, v in versions().items():
        print(f"{k:>11}: {v}", file=f)
