"""GeoPackage output: ``links``, ``nodes``, ``run_info`` and companion tables.

Safety rules:

* Layers are written into a temporary copy of the target file in the same
  folder, then the copy is moved into place (``os.replace``), so a failed
  write never leaves a half-written file and a crash never loses the old one.
* Existing layers that mainspan is not asked to write are carried over
  untouched.
* A layer that already exists is refused unless ``overwrite=True``.
* ``OGR_CURRENT_DATE`` is pinned so the same layout gives the same bytes.
"""

from __future__ import annotations

import os
import shutil
import tempfile

import numpy as np

from ..errors import DataFileError, OverwriteError

__all__ = ["write_layers", "list_layers", "check_layers_free", "read_table", "FIXED_DATE"]

#: Timestamp written into ``gpkg_contents`` so output bytes are reproducible.
FIXED_DATE = "2000-01-01T00:00:00.000Z"


def list_layers(path) -> list[str]:
    """Names of the layers (and attribute tables) in a GeoPackage."""
    import pyogrio

    if not os.path.exists(path):
        return []
    try:
        return [str(n) for n in pyogrio.list_layers(path)[:, 0]]
    except Exception as exc:
        raise DataFileError(f"{path!r} exists but cannot be opened as a GeoPackage: {exc}; "
                            "choose another output path") from None


def check_layers_free(path, names, *, overwrite=False):
    """Refuse (:class:`OverwriteError`) if *path* already holds any of *names*.

    Callers use it before long work so that a clash is reported at once;
    :func:`write_layers` applies it again when it writes.
    """
    if overwrite:
        return
    clash = [n for n in list_layers(path) if n in set(names)]
    if clash:
        raise OverwriteError(f"{path!r} already has layer(s) {', '.join(clash[:4])}"
                             f"{' …' if len(clash) > 4 else ''}; pass --overwrite "
                             "(overwrite=True) to replace them, or write elsewhere")


def write_layers(path, layers: dict, *, overwrite=False):
    """Write several (Geo)DataFrames as layers of one GeoPackage, atomically.

    Parameters
    ----------
    path : str
        The ``.gpkg`` file; created if missing.
    layers : dict of str -> DataFrame or GeoDataFrame
        Written in the given order. A plain DataFrame becomes an attribute table.
    overwrite : bool, default False
        Replace layers of the same names; without it an existing layer is an error.
    """
    import pyogrio

    path = os.fspath(path)
    if not path.lower().endswith(".gpkg"):
        raise DataFileError(f"output {path!r} must end in .gpkg (GeoPackage)")
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        raise DataFileError(f"output folder {folder!r} does not exist; create it first")
    check_layers_free(path, layers, overwrite=overwrite)
    existing = list_layers(path)
    fd, tmp = tempfile.mkstemp(prefix=".mainspan-", suffix=".gpkg", dir=folder)
    os.close(fd)
    try:
        # Carry the file over only when it holds layers we do not write; otherwise start
        # afresh, so that re-running with --overwrite gives the same bytes as the first run.
        if any(n not in layers for n in existing):
            shutil.copyfile(path, tmp)
        else:
            os.remove(tmp)
            existing = []
        pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": FIXED_DATE})
        for name, df in layers.items():
            opts = {"OVERWRITE": "YES"} if name in existing else None
            kw = {}
            if "geometry" in getattr(df, "columns", []) and hasattr(df, "crs"):
                kw["geometry_type"] = _geometry_type(df)
            pyogrio.write_dataframe(df, tmp, layer=name, driver="GPKG",
                                    layer_options=opts, **kw)
        os.replace(tmp, path)
    except OverwriteError:
        raise
    except Exception as exc:
        if os.path.exists(tmp):
            os.remove(tmp)
        raise DataFileError(f"cannot write {path!r}: {exc}") from None


def _geometry_type(gdf):
    import shapely

    g = np.asarray(gdf.geometry.values, dtype=object)
    if len(g) == 0:
        return "Unknown"
    t = {0: "Point", 1: "LineString", 3: "Polygon"}.get(int(shapely.get_type_id(g[0])), "Unknown")
    if t != "Unknown" and bool(shapely.has_z(g).any()):
        t += " Z"
    return t


def read_table(path, layer):
    """Read one layer as a (Geo)DataFrame, with a clear error when it is missing."""
    import pyogrio

    names = list_layers(path)
    if not names:
        raise DataFileError(f"GeoPackage {path!r} does not exist or has no layers")
    if layer not in names:
        raise DataFileError(f"GeoPackage {path!r} has no layer {layer!r} (layers: "
                            f"{', '.join(names)}); is it a mainspan layout?")
    return pyogrio.read_dataframe(path, layer=layer)
