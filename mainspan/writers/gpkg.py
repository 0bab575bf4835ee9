"""GeoPackage output: ``links``, ``nodes``, ``run_info`` and companion tables.

Safety rules (the file handling itself is :mod:`mainspan.safeio`):

* The target is locked, its layers are written into a temporary copy in the
  same folder, the copy is fsync-ed and moved into place (``os.replace``), so
  a failed write never leaves a half-written file and a crash never loses the
  old one.  The replaced file keeps its permission bits; a symbolic link is
  written through.
* Every layer mainspan writes carries the run's id (in ``gpkg_contents``'s
  ``description``: ``mainspan run <id>``), and the attribute table
  ``mainspan_layers`` (columns ``layer``, ``run_id``) lists every layer
  mainspan wrote into the file.  The id is a hash of what the run wrote, so
  the same layout gives the same bytes.
* With ``overwrite=True`` every layer listed by the previous run is dropped
  (a re-plan that writes fewer tables leaves no stale ``quantities`` behind);
  layers mainspan did not write are carried over untouched.
* Without ``overwrite`` an existing layer of the same name is refused.
* Readers call :func:`check_one_run`: a file whose layers come from
  different runs is refused, naming the layers.
* ``OGR_CURRENT_DATE`` is pinned so the same layout gives the same bytes.

Layers go through GDAL's Arrow path (``use_arrow=True``): whole columns at a time
rather than one feature at a time.

Ground profiles (``link_profiles``) are packed one row per link: ``link_id``,
``n_stations``, and two BLOB columns ``station_m`` and ``ground_m`` each holding
``n_stations`` little-endian IEEE float64 values (NaN where the ground is
nodata), in the order of the stations from the link's ``from_node``.  In SQL a
value is ``substr(ground_m, 8*k + 1, 8)``; in numpy
``np.frombuffer(blob, "<f8")``.  :func:`unpack_profiles` reads both this form
and the one-row-per-station form of earlier versions.
"""

from __future__ import annotations

import hashlib
import os
import shutil

import numpy as np

from ..errors import DataFileError, OverwriteError

__all__ = ["write_layers", "list_layers", "check_layers_free", "read_table", "FIXED_DATE",
           "MANIFEST", "layer_run_ids", "check_one_run", "mainspan_layers", "pack_profiles",
           "unpack_profiles"]

#: Timestamp written into ``gpkg_contents`` so output bytes are reproducible.
FIXED_DATE = "2000-01-01T00:00:00.000Z"
#: The attribute table listing the layers mainspan wrote into a file.
MANIFEST = "mainspan_layers"
_DESC = "mainspan run "
# layers older mainspan versions wrote before the manifest existed
_LEGACY = ("links", "nodes", "run_info", "quantities", "checks", "access_points",
           "link_profiles", "scenario_links", "scenario_summary")


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


def _sql_rows(path, sql, args=()):
    import sqlite3

    try:
        con = sqlite3.connect(f"file:{os.path.abspath(path)}?mode=ro", uri=True)
        try:
            return list(con.execute(sql, args))
        finally:
            con.close()
    except sqlite3.Error:
        return []


def layer_run_ids(path) -> dict:
    """``{layer: run id or None}`` for every layer in ``gpkg_contents`` of *path*."""
    if not os.path.exists(path):
        return {}
    out = {}
    for name, desc in _sql_rows(path, "SELECT table_name, description FROM gpkg_contents"):
        desc = desc or ""
        out[str(name)] = desc[len(_DESC):].strip() if desc.startswith(_DESC) else None
    return out


def mainspan_layers(path) -> list[str]:
    """Layers that an earlier mainspan run wrote into *path* (the manifest, else by name)."""
    names = list_layers(path)
    if MANIFEST in names:
        rows = _sql_rows(path, f'SELECT layer FROM "{MANIFEST}"')
        return [str(r[0]) for r in rows if str(r[0]) in names] + [MANIFEST]
    if not any(n == "run_info" or n.startswith("run_info_") for n in names):
        return []
    suffixes = [""] + [n[len("run_info"):] for n in names if n.startswith("run_info_")]
    return [n for n in names if any(n == b + s for b in _LEGACY for s in suffixes)
            or n in _LEGACY]


def check_one_run(path, layers):
    """Refuse a file whose *layers* (those present) were written by different runs.

    Raises
    ------
    DataFileError
        Naming the layers of each run, and the fix.
    """
    ids = layer_run_ids(path)
    present = [n for n in layers if n in ids]
    groups: dict = {}
    for n in present:
        groups.setdefault(ids[n], []).append(n)
    if len(groups) <= 1:
        return
    parts = [f"{', '.join(v)} ({'run ' + k if k else 'no mainspan run id'})"
             for k, v in groups.items()]
    raise DataFileError(f"GeoPackage {path!r} mixes layers from different mainspan runs: "
                        f"{'; '.join(parts)}; plan again with --overwrite (or into a new file) "
                        "so that they are written together")


def check_layers_free(path, names, *, overwrite=False):
    """Refuse (:class:`OverwriteError`) if *path* already holds any of *names*.

    Callers use it before long work so that a clash is reported at once;
    :func:`write_layers` applies it again, under the lock, when it writes.
    """
    if overwrite:
        return
    clash = [n for n in list_layers(path) if n in set(names)]
    if clash:
        raise OverwriteError(f"{path!r} already has layer(s) {', '.join(clash[:4])}"
                             f"{' …' if len(clash) > 4 else ''}; pass --overwrite "
                             "(overwrite=True) to replace them, or write elsewhere")


def _run_id(layers) -> str:
    """A hash of everything written: the same layout gives the same id (and bytes)."""
    import pandas as pd
    import shapely

    h = hashlib.sha256()
    for name, df in layers.items():
        h.update(name.encode() + b"\0")
        plain = df.drop(columns=["geometry"]) if "geometry" in df.columns else df
        h.update(",".join(map(str, plain.columns)).encode() + b"\0")
        if len(plain.columns):
            h.update(pd.util.hash_pandas_object(pd.DataFrame(plain), index=False)
                     .to_numpy().tobytes())
        if "geometry" in df.columns:
            g = np.asarray(df.geometry.values, dtype=object)
            h.update(np.ascontiguousarray(shapely.get_coordinates(g, include_z=True)).tobytes())
    return h.hexdigest()[:16]


def _drop_layers(path, names):
    """Drop GeoPackage layers in place (tables, their R-tree and metadata rows)."""
    import sqlite3

    con = sqlite3.connect(path)
    try:
        meta = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type='table'")}
        for name in names:
            if "gpkg_geometry_columns" in meta:
                for (col,) in con.execute("SELECT column_name FROM gpkg_geometry_columns "
                                          "WHERE table_name=?", (name,)).fetchall():
                    con.execute(f'DROP TABLE IF EXISTS "rtree_{name}_{col}"')
            con.execute(f'DROP TABLE IF EXISTS "{name}"')
            for t in ("gpkg_contents", "gpkg_geometry_columns", "gpkg_extensions",
                      "gpkg_data_columns", "gpkg_ogr_contents", "gpkg_metadata_reference"):
                if t in meta:
                    con.execute(f"DELETE FROM {t} WHERE table_name=?", (name,))
        con.commit()
        con.execute("VACUUM")
    finally:
        con.close()


#: GeoPackage version of new files: 1.2 holds everything mainspan writes (features,
#: attribute tables, descriptions) and GDAL before 3.7 (QGIS 3.22) reads it without warning.
GPKG_VERSION = "1.2"


def write_layers(path, layers: dict, *, overwrite=False):
    """Write several (Geo)DataFrames as layers of one GeoPackage, atomically.

    Parameters
    ----------
    path : str
        The ``.gpkg`` file; created if missing.  A symbolic link is written through.
    layers : dict of str -> DataFrame or GeoDataFrame
        Written in the given order. A plain DataFrame becomes an attribute table.
    overwrite : bool, default False
        Replace layers of the same names and drop every other layer the
        previous mainspan run wrote; without it an existing layer is an error.

    Returns
    -------
    str
        The run id written into every layer.
    """
    import pandas as pd
    import pyogrio

    from ..safeio import check_target, output_lock, replace_into, resolve_output, temp_beside

    path = os.fspath(path)
    if not path.lower().endswith(".gpkg"):
        raise DataFileError(f"output {path!r} must end in .gpkg (GeoPackage)")
    if MANIFEST in layers:
        raise DataFileError(f"layer name {MANIFEST!r} is reserved for mainspan's manifest")
    check_target(path, overwrite=True, what="GeoPackage")
    check_layers_free(path, layers, overwrite=overwrite)
    run_id = _run_id(layers)
    target = resolve_output(path)
    try:
        with output_lock(target, what="GeoPackage", shown=path):
            check_layers_free(path, layers, overwrite=overwrite)      # again, under the lock
            existing = list_layers(target)
            ours = set(mainspan_layers(target))
            drop = (ours | set(layers)) & set(existing) if overwrite else set()
            from .styles import only_our_styles      # hand16: our styles go with our layers
            if overwrite and "layer_styles" in existing and only_our_styles(target):
                drop.add("layer_styles")
            keep = [n for n in existing if n not in drop]
            manifest = [n for n in keep if n in ours and n != MANIFEST]
            prev_ids = layer_run_ids(target)
            with temp_beside(target) as tmp:
                # Carry the file over only when it holds layers that stay; otherwise start
                # afresh, so that re-running with --overwrite gives the same bytes.
                if keep:
                    shutil.copyfile(target, tmp)
                    if drop or MANIFEST in keep:
                        _drop_layers(tmp, sorted(drop | ({MANIFEST} & set(keep))))
                pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": FIXED_DATE})
                rows = {n: prev_ids.get(n) or "" for n in manifest}
                rows.update({n: run_id for n in layers})
                frames = dict(layers)
                frames[MANIFEST] = pd.DataFrame({"layer": list(rows),
                                                 "run_id": list(rows.values())})
                for name, df in frames.items():
                    kw = {}
                    if "geometry" in getattr(df, "columns", []) and hasattr(df, "crs"):
                        kw["geometry_type"] = _geometry_type(df)
                    rid = run_id if name != MANIFEST else "manifest"
                    if not os.path.exists(tmp):     # qgis17: GeoPackage 1.2, which older
                        kw["dataset_options"] = {"VERSION": GPKG_VERSION}   # GDALs read quietly
                    pyogrio.write_dataframe(df, tmp, layer=name, driver="GPKG", use_arrow=True,
                                            layer_options={"DESCRIPTION": _DESC + rid}, **kw)
                from .styles import write_styles        # hand16: layer styles of our own
                write_styles(tmp, layers)
                replace_into(tmp, target)
    except (OverwriteError, DataFileError):
        raise
    except Exception as exc:
        raise DataFileError(f"cannot write {path!r}: {exc}") from None
    return run_id


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


def pack_profiles(link_id, offsets, station_m, ground_m):
    """The ``link_profiles`` table, one row per link (see the module notes).

    Parameters
    ----------
    link_id : array_like of int, shape (L,)
    offsets : array_like of int, shape (L + 1,)
        Stations of link ``i`` are ``offsets[i]:offsets[i+1]``.
    station_m, ground_m : array_like of float
        Distance along the link from its ``from_node`` and ground level, per station.

    Returns
    -------
    pandas.DataFrame
        Columns ``link_id``, ``n_stations``, ``station_m`` and ``ground_m`` (bytes).

    Examples
    --------
    >>> t = pack_profiles([7], [0, 2], [0.0, 5.0], [101.5, 102.0])
    >>> int(t.n_stations[0]), np.frombuffer(t.ground_m[0], "<f8").tolist()
    (2, [101.5, 102.0])
    """
    import pandas as pd

    off = np.asarray(offsets, dtype=np.int64)
    cols = {"link_id": np.asarray(link_id), "n_stations": np.diff(off)}
    for name, v in (("station_m", station_m), ("ground_m", ground_m)):
        raw = np.ascontiguousarray(v, dtype="<f8").tobytes()
        cols[name] = np.array([raw[8 * a:8 * b] for a, b in zip(off[:-1].tolist(),
                                                               off[1:].tolist())], dtype=object)
    return pd.DataFrame(cols)


def unpack_profiles(table, link_ids):
    """``(offsets, station_m, ground_m)`` in the order of *link_ids* from a ``link_profiles`` table.

    Reads the packed form (one row per link) and the older one row per station.  Links
    without a row get no stations.
    """
    link_ids = np.asarray(link_ids).astype(np.int64)
    lid = np.asarray(table["link_id"]).astype(np.int64)
    where = {int(v): i for i, v in enumerate(link_ids)}
    try:
        idx = np.array([where[int(v)] for v in lid], dtype=np.int64)
    except KeyError as exc:
        raise DataFileError(f"link_profiles names link {exc.args[0]} that is not in the links "
                            "layer; the file is damaged or not a mainspan layout") from None
    if "n_stations" in table.columns:        # packed: one row per link
        counts = np.zeros(link_ids.shape[0], dtype=np.int64)
        n = np.asarray(table["n_stations"]).astype(np.int64)
        counts[idx] = n
        srt = np.argsort(idx, kind="stable")
        st_col, z_col = list(table["station_m"]), list(table["ground_m"])
        st = np.frombuffer(b"".join(bytes(st_col[i]) for i in srt), "<f8").astype(np.float64)
        z = np.frombuffer(b"".join(bytes(z_col[i]) for i in srt), "<f8").astype(np.float64)
        if st.shape[0] != int(n.sum()) or z.shape[0] != st.shape[0]:
            raise DataFileError("link_profiles: the packed arrays do not hold n_stations values "
                                "each; the file is damaged")
    else:                                   # one row per station (earlier versions)
        srt = np.argsort(idx, kind="stable")
        counts = np.bincount(idx, minlength=link_ids.shape[0])
        st = np.asarray(table["station_m"], dtype=np.float64)[srt]
        z = np.asarray(table["ground_m"], dtype=np.float64)[srt]
    offsets = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    return offsets, st, z
