"""Read and validate the point layer of sites.

A *site* is a fixed point the network must reach: a source (pump station,
reservoir), an outlet (where a gravity system discharges), a demand point
(field outlet, hydrant, service connection, inlet) or a junction.

Choices made here (documented for users):

* The id field defaults to a field called ``id`` when present, else the
  1-based row number.  Ids are kept as strings.
* The role field defaults to a field called ``role`` when present; without
  one every site is a ``demand`` site.  The demand field defaults to a field
  called ``demand_lps`` when present.  Role values are
  matched case-insensitively.
* Without a demand field every demand is 0 L/s.  Demands must be finite and
  non-negative.
* Design-basis fields (gravity networks, see :mod:`mainspan.hydraulics.basis`):
  catchment area in hectares (``area_field``, default a field called
  ``area_ha``), runoff coefficient 0–1 (``runoff_field``, default
  ``runoff_c``) and persons served (``population_field``, default
  ``population``).  Each is read only when present; an empty value is 0.
* Minimum pressure head per site, m (pressure networks): ``min_pressure_field``
  (default a field called ``min_pressure_m``); an empty value takes the
  design default ``min_pressure_m``.
* Two sites closer than :data:`COINCIDENT_M` (1 mm) are *coincident*: an
  error lists the pairs unless ``merge_within_m`` is given, which merges
  every cluster of sites within that distance into its first site (lowest
  row), summing demands and keeping the strongest role
  (source > outlet > demand > junction).
* A MultiPoint holding one point is accepted as that point; Z coordinates are
  kept as an elevation hint (``elevation``), used only when asked.
* CSV files are read with pandas, coordinates from ``x_field``/``y_field``
  (default ``x``/``y``); their CRS must be given (``sites_crs``), or is taken
  to be the working ``crs`` when only that is given.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np
import pyproj

from .crs import choose_working_crs, parse_crs, to_crs
from ..errors import DataFileError, InputError

__all__ = ["Sites", "read_sites", "sites_from_arrays", "ROLES", "COINCIDENT_M"]

ROLES = ("source", "outlet", "demand", "junction")
_ROLE_RANK = {"source": 0, "outlet": 1, "demand": 2, "junction": 3}
COINCIDENT_M = 1e-3


@dataclass
class Sites:
    """Validated sites in the working metric CRS (struct of arrays).

    Attributes
    ----------
    xy : ndarray of float64, shape (n, 2)
        Working-CRS coordinates in metres.
    node_id : ndarray of str (object)
    role : ndarray of str (object), one of :data:`ROLES`
    demand : ndarray of float64, L/s
    elevation : ndarray of float64, NaN where the input carried no Z
    crs : pyproj.CRS, the working CRS
    area_ha, runoff_c, population : ndarray of float64 or None
        Catchment area (ha), runoff coefficient and persons served per site,
        for the design basis of gravity networks; None when not given.
    min_pressure_m : ndarray of float64 or None
        Each site's own minimum pressure head, m (NaN: the design default);
        None when not given.
    """

    xy: np.ndarray
    node_id: np.ndarray
    role: np.ndarray
    demand: np.ndarray
    elevation: np.ndarray
    crs: pyproj.CRS
    source_crs: pyproj.CRS | None = None
    crs_reason: str = ""
    path: str | None = None
    layer: str | None = None
    merged: list = field(default_factory=list)
    area_ha: np.ndarray | None = None
    runoff_c: np.ndarray | None = None
    population: np.ndarray | None = None
    min_pressure_m: np.ndarray | None = None

    def __len__(self):
        return len(self.node_id)

    @property
    def n(self):
        return len(self.node_id)

    def index_of(self, ids, *, option="--roots"):
        """Node indices of the given ids; an unknown id is an error naming it."""
        lookup = {k: i for i, k in enumerate(self.node_id)}
        out = []
        for v in ids:
            key = str(v)
            if key not in lookup:
                sample = ", ".join(list(self.node_id[:5]))
                raise InputError(f"option {option}: site id {key!r} is not among the {self.n} "
                                 f"sites (ids look like: {sample}); give an existing id")
            out.append(lookup[key])
        return np.asarray(out, dtype=np.int64)

    def default_roots(self):
        """Sites whose role is source or outlet, else the first site."""
        r = np.flatnonzero(np.isin(self.role, ("source", "outlet")))
        return r.astype(np.int64) if r.size else np.array([0], dtype=np.int64)


def _py(v):
    """A numpy scalar as the plain Python value, so messages show -2.5, not np.float64(-2.5)."""
    return v.item() if hasattr(v, "item") and getattr(v, "ndim", 1) == 0 else v


def _where(path, layer):
    return f"{path}" + (f" (layer {layer!r})" if layer else "")


def _read_table(path, layer, x_field, y_field):
    """Return (DataFrame of attributes, xy (n,2), z (n,), crs or None)."""
    import pandas as pd

    if not os.path.exists(path):
        raise DataFileError(f"sites file {path!r} does not exist; check the path")
    if str(path).lower().endswith((".csv", ".txt", ".tsv")):
        try:
            df = pd.read_csv(path, sep=None, engine="python", dtype=str)
        except Exception as exc:
            raise DataFileError(f"sites file {path!r} cannot be read as CSV: {exc}") from None
        xf = x_field or "x"
        yf = y_field or "y"
        for f, opt in ((xf, "--x-field"), (yf, "--y-field")):
            if f not in df.columns:
                raise InputError(f"sites file {path!r}: coordinate column {f!r} not found "
                                 f"(columns: {', '.join(map(str, df.columns))}); name it with {opt}")
        xy = np.empty((len(df), 2))
        for j, f in enumerate((xf, yf)):
            vals = pd.to_numeric(df[f], errors="coerce").to_numpy(float)
            bad = np.flatnonzero(~np.isfinite(vals))
            if bad.size:
                raise InputError(f"sites file {path!r}: column {f!r} row {int(bad[0]) + 1} holds "
                                 f"{df[f].iloc[bad[0]]!r}, not a finite number "
                                 f"({bad.size} such rows); fix or remove those rows")
            xy[:, j] = vals
        attrs = df.drop(columns=[xf, yf])
        return attrs, xy, np.full(len(df), np.nan), None
    import pyogrio
    try:
        layers = pyogrio.list_layers(path)
    except Exception as exc:
        raise DataFileError(f"sites file {path!r} cannot be opened by GDAL/OGR: {exc}; "
                            "give a GeoPackage, Shapefile, GeoJSON, FlatGeobuf or CSV") from None
    names = [str(n) for n in layers[:, 0]]
    if layer is None:
        if len(names) > 1:
            raise InputError(f"sites file {path!r} has {len(names)} layers "
                             f"({', '.join(names)}); choose one with --layer")
        layer = names[0] if names else None
    elif layer not in names:
        raise InputError(f"sites file {path!r} has no layer {layer!r} "
                         f"(layers: {', '.join(names)}); choose one with --layer")
    try:
        gdf = pyogrio.read_dataframe(path, layer=layer)
    except Exception as exc:
        raise DataFileError(f"sites {_where(path, layer)} cannot be read: {exc}") from None
    import shapely

    geom = gdf.geometry.array if hasattr(gdf, "geometry") and "geometry" in gdf else None
    if geom is None:
        raise InputError(f"sites {_where(path, layer)} has no geometry column; "
                         "give a point layer (or a CSV with --x-field/--y-field)")
    geoms = np.asarray(gdf.geometry.values, dtype=object)
    gtypes = shapely.get_type_id(geoms)
    missing = np.flatnonzero(shapely.is_missing(geoms) | shapely.is_empty(geoms))
    if missing.size:
        raise InputError(f"sites {_where(path, layer)}: feature at row {int(missing[0]) + 1} has "
                         f"no geometry ({missing.size} such features); give every site a point")
    # MultiPoint of exactly one point is accepted as that point.
    multi = np.flatnonzero(gtypes == 4)
    if multi.size:
        nparts = shapely.get_num_geometries(geoms[multi])
        badm = multi[nparts != 1]
        if badm.size:
            raise InputError(f"sites {_where(path, layer)}: feature at row {int(badm[0]) + 1} is a "
                             f"MultiPoint of {int(shapely.get_num_geometries(geoms[badm[0]]))} "
                             "points; split it into single points")
        geoms = geoms.copy()
        geoms[multi] = shapely.get_geometry(geoms[multi], 0)
        gtypes = shapely.get_type_id(geoms)
    nonpt = np.flatnonzero(gtypes != 0)
    if nonpt.size:
        kind = shapely.get_type_id(geoms[nonpt[0]])
        tname = {1: "LineString", 2: "LinearRing", 3: "Polygon", 5: "MultiLineString",
                 6: "MultiPolygon", 7: "GeometryCollection"}.get(int(kind), str(kind))
        raise InputError(f"sites {_where(path, layer)}: feature at row {int(nonpt[0]) + 1} is a "
                         f"{tname}, not a point ({nonpt.size} non-point features); "
                         "give a point layer")
    coords = shapely.get_coordinates(geoms, include_z=True)
    xy = coords[:, :2].astype(float)
    z = coords[:, 2].astype(float) if coords.shape[1] > 2 else np.full(len(xy), np.nan)
    crs = gdf.crs
    attrs = gdf.drop(columns=gdf.geometry.name)
    return attrs, xy, z, (pyproj.CRS.from_user_input(crs) if crs is not None else None)


def read_sites(path, *, layer=None, id_field=None, role_field=None, demand_field=None,
               x_field=None, y_field=None, sites_crs=None, crs=None, merge_within_m=None,
               elevation_field=None, area_field=None, runoff_field=None, population_field=None,
               min_pressure_field=None):
    """Read a point layer of sites and bring it into the working metric CRS.

    Parameters
    ----------
    path : str or path-like
        Any OGR vector source (GeoPackage, Shapefile, GeoJSON, FlatGeobuf) or a CSV.
    layer : str, optional
        Layer name for multi-layer sources.
    id_field, role_field, demand_field, elevation_field : str, optional
        Attribute fields; see the module notes for defaults.
    area_field, runoff_field, population_field : str, optional
        Catchment area (ha), runoff coefficient (0–1) and population fields
        of the gravity design basis; see the module notes for defaults.
    min_pressure_field : str, optional
        Each site's minimum pressure head, m (pressure networks).
    x_field, y_field : str, optional
        Coordinate columns of a CSV (default ``x`` and ``y``).
    sites_crs : CRS-like, optional
        CRS of the coordinates: needed when the file carries none (CSV, Shapefile
        without .prj); when given it overrides the file's own CRS.
    crs : CRS-like, optional
        Working CRS override (must be projected).
    merge_within_m : float, optional
        Merge sites closer than this many metres instead of failing.

    Returns
    -------
    Sites

    Examples
    --------
    >>> import tempfile, os
    >>> p = os.path.join(tempfile.mkdtemp(), "s.csv")
    >>> _ = open(p, "w").write("id,x,y,role\\nP,0,0,source\\nA,30,40,demand\\n")
    >>> s = read_sites(p, sites_crs="EPSG:32633")
    >>> s.node_id.tolist(), s.role.tolist()
    (['P', 'A'], ['source', 'demand'])
    """
    path = os.fspath(path)
    attrs, xy, z, file_crs = _read_table(path, layer, x_field, y_field)
    where = _where(path, layer)
    n = len(xy)
    if n == 0:
        raise InputError(f"sites {where} is empty; it needs at least 2 points")
    bad = np.flatnonzero(~np.isfinite(xy).all(axis=1))
    if bad.size:
        raise InputError(f"sites {where}: feature at row {int(bad[0]) + 1} has a NaN or infinite "
                         f"coordinate ({bad.size} such features); fix or remove them")
    cols = list(map(str, attrs.columns))

    def field_values(name, option):
        if name not in attrs.columns:
            raise InputError(f"sites {where}: field {name!r} (option {option}) not found; "
                             f"fields are: {', '.join(cols) or '(none)'}")
        return attrs[name]

    if id_field is not None:
        raw = field_values(id_field, "--id-field")
        if raw.isna().any():
            r = int(np.flatnonzero(raw.isna().to_numpy())[0])
            raise InputError(f"sites {where}: field {id_field!r} is empty at row {r + 1}; "
                             "give every site an id")
        ids = np.array([_id_text(v) for v in raw], dtype=object)
    elif "id" in attrs.columns and not attrs["id"].isna().any():
        ids = np.array([_id_text(v) for v in attrs["id"]], dtype=object)
    else:
        ids = np.array([str(i + 1) for i in range(n)], dtype=object)
    uniq, counts = np.unique(ids.astype(str), return_counts=True)
    if (counts > 1).any():
        dups = uniq[counts > 1]
        raise InputError(f"sites {where}: {dups.size} duplicate id(s) in field "
                         f"{id_field or 'id'!r}: {', '.join(map(str, dups[:5]))}"
                         f"{' …' if dups.size > 5 else ''}; make ids unique or choose "
                         "another --id-field")

    if role_field is None and "role" in attrs.columns:
        role_field = "role"
    if demand_field is None and "demand_lps" in attrs.columns:
        demand_field = "demand_lps"
    if role_field is not None:
        raw = field_values(role_field, "--role-field")
        role = np.array([str(v).strip().lower() if v is not None and v == v else "demand"
                         for v in raw], dtype=object)
        badr = np.flatnonzero(~np.isin(role, ROLES))
        if badr.size:
            i = int(badr[0])
            raise InputError(f"sites {where}: site {ids[i]!r} has role {_py(raw.iloc[i])!r} in "
                             f"field {role_field!r}; roles are {', '.join(ROLES)}")
    else:
        role = np.full(n, "demand", dtype=object)

    if demand_field is not None:
        import pandas as pd
        raw = field_values(demand_field, "--demand-field")
        demand = pd.to_numeric(raw, errors="coerce").to_numpy(float)
        badd = np.flatnonzero(~np.isfinite(demand) | (demand < 0))
        if badd.size:
            i = int(badd[0])
            raise InputError(f"sites {where}: site {ids[i]!r} has demand {_py(raw.iloc[i])!r} in "
                             f"field {demand_field!r}; demands must be numbers >= 0 (L/s)")
    else:
        demand = np.zeros(n)

    if elevation_field is not None:
        import pandas as pd
        z = pd.to_numeric(field_values(elevation_field, "--elevation-field"),
                          errors="coerce").to_numpy(float)

    import pandas as pd
    basis = {}
    for key, name, option, hi in (("area_ha", area_field, "area_field", None),
                                  ("runoff_c", runoff_field, "runoff_field", 1.0),
                                  ("population", population_field, "population_field", None)):
        if name is None and key in attrs.columns:
            name = key
        if name is None:
            continue
        raw = field_values(name, option)
        vals = np.array(pd.to_numeric(raw, errors="coerce"), dtype=float)
        vals[raw.isna().to_numpy()] = 0.0
        bad = np.flatnonzero(~np.isfinite(vals) | (vals < 0) | ((vals > hi) if hi else False))
        if bad.size:
            i = int(bad[0])
            rng = "between 0 and 1" if hi else ">= 0"
            raise InputError(f"sites {where}: site {ids[i]!r} has {_py(raw.iloc[i])!r} in field "
                             f"{name!r}; {key} must be a number {rng}")
        basis[key] = vals
    # each site's own minimum pressure head (pressure networks): empty -> the design default
    if min_pressure_field is None and "min_pressure_m" in attrs.columns:
        min_pressure_field = "min_pressure_m"
    if min_pressure_field is not None:
        raw = field_values(min_pressure_field, "min_pressure_field")
        vals = np.array(pd.to_numeric(raw, errors="coerce"), dtype=float)
        bad = np.flatnonzero(~raw.isna().to_numpy() & ~(np.isfinite(vals) & (vals >= 0)))
        if bad.size:
            i = int(bad[0])
            raise InputError(f"sites {where}: site {ids[i]!r} has {raw.iloc[i]!r} in field {min_pressure_field!r}; "
                             "the minimum pressure must be a number >= 0 (m of head) or empty for the default")
        basis["min_pressure_m"] = vals

    if file_crs is None:
        given = sites_crs if sites_crs is not None else crs
        if given is None:
            raise InputError(f"sites {where} has no CRS; pass --sites-crs with the CRS of its "
                             "coordinates (for example EPSG:32633 or EPSG:4326)")
        file_crs = parse_crs(given, option="--sites-crs" if sites_crs is not None else "--crs")
    elif sites_crs is not None:
        file_crs = parse_crs(sites_crs, option="--sites-crs")
    wk = choose_working_crs(file_crs, xy, crs=crs)
    xy_w = to_crs(xy, file_crs, wk.crs, what=f"sites {where}")
    # Z in feet for a feet CRS: bring elevation hints to metres too.
    try:
        zf = file_crs.axis_info[2].unit_conversion_factor if len(file_crs.axis_info) > 2 else None
    except Exception:
        zf = None
    if zf is None and file_crs.is_projected:
        zf = float(file_crs.axis_info[0].unit_conversion_factor)
    if zf:
        z = z * zf

    sites = Sites(xy=xy_w, node_id=ids, role=role, demand=demand, elevation=z, crs=wk.crs,
                  source_crs=file_crs, crs_reason=wk.reason, path=path, layer=layer, **basis)
    return _check_geometry(sites, where, merge_within_m)


def _id_text(v):
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    return str(v)


def sites_from_arrays(xy, *, crs, node_id=None, role=None, demand_lps=None, elevation_m=None,
                      merge_within_m=None, area_ha=None, runoff_c=None, population=None, min_pressure_m=None):
    """Build validated :class:`Sites` from arrays.

    Parameters
    ----------
    xy : array_like, shape (n, 2)
        Coordinates in *crs*.
    crs : CRS-like
        Their CRS; the working CRS is chosen from it as for files.
    node_id : sequence, optional
        Site ids (default 1..n as text).
    role : sequence of str, optional
        Roles (default all ``demand``).
    demand_lps : array_like, optional
        Demands in L/s (default 0).
    elevation_m : array_like, optional
        Site elevations (default NaN: none given).
    merge_within_m : float, optional
        Merge sites closer than this instead of failing.
    area_ha, runoff_c, population : array_like, optional
        Catchment area (ha), runoff coefficient (0–1) and persons served per
        site (gravity design basis).
    min_pressure_m : array_like, optional
        Each site's minimum pressure head, m (NaN: the design default).

    Returns
    -------
    Sites

    Examples
    --------
    >>> s = sites_from_arrays([[0, 0], [30, 40]], crs="EPSG:32633", demand_lps=[0, 1.5])
    >>> s.n, s.demand.tolist()
    (2, [0.0, 1.5])
    """
    xy = np.asarray(xy, dtype=np.float64)
    if xy.ndim != 2 or xy.shape[1] != 2:
        raise InputError(f"xy must have shape (n, 2), got {xy.shape}")
    n = len(xy)
    if n == 0:
        raise InputError("no sites given; at least 2 points are needed")
    bad = np.flatnonzero(~np.isfinite(xy).all(axis=1))
    if bad.size:
        raise InputError(f"site at row {int(bad[0]) + 1} has a NaN or infinite coordinate; "
                         "fix or remove it")
    crs = parse_crs(crs)
    wk = choose_working_crs(crs, xy)
    if wk.crs != crs:
        xy = to_crs(xy, crs, wk.crs)
    ids = np.array([str(i + 1) for i in range(n)] if node_id is None
                   else [str(v) for v in node_id], dtype=object)
    if len(np.unique(ids.astype(str))) != n:
        raise InputError("node_id values must be unique")
    role = np.full(n, "demand", dtype=object) if role is None else np.array(role, dtype=object)
    if not np.isin(role, ROLES).all():
        raise InputError(f"roles must be one of {', '.join(ROLES)}")
    demand = np.zeros(n) if demand_lps is None else np.asarray(demand_lps, float)
    if (~np.isfinite(demand) | (demand < 0)).any():
        raise InputError("demand_lps must be finite and >= 0")
    z = np.full(n, np.nan) if elevation_m is None else np.asarray(elevation_m, float)
    basis = {}
    for key, vals, hi in (("area_ha", area_ha, None), ("runoff_c", runoff_c, 1.0),
                          ("population", population, None)):
        if vals is not None:
            a = np.asarray(vals, float)
            if a.shape != (n,) or (~np.isfinite(a) | (a < 0) | ((a > hi) if hi else False)).any():
                raise InputError(f"{key} must be one number per site, >= 0"
                                 + (" and <= 1" if hi else ""))
            basis[key] = a
    if min_pressure_m is not None:
        a = np.asarray(min_pressure_m, float)
        if a.shape != (n,) or (a[~np.isnan(a)] < 0).any() or np.isinf(a).any():
            raise InputError("min_pressure_m must be one number per site, >= 0 (NaN: the design default)")
        basis["min_pressure_m"] = a
    s = Sites(xy=xy, node_id=ids, role=role, demand=demand, elevation=z, crs=wk.crs,
              source_crs=crs, crs_reason=wk.reason, **basis)
    return _check_geometry(s, "sites", merge_within_m)


def _check_geometry(sites: Sites, where: str, merge_within_m):
    from scipy.spatial import cKDTree

    n = sites.n
    tol = COINCIDENT_M
    if merge_within_m is not None:
        m = float(merge_within_m)
        if not np.isfinite(m) or m < 0:
            raise InputError(f"option --merge-within-m: must be a distance >= 0 in metres, got "
                             f"{merge_within_m!r}")
        tol = max(tol, m)
    pairs = cKDTree(sites.xy).query_pairs(tol, output_type="ndarray") if n > 1 else np.empty((0, 2), int)
    if len(pairs):
        pairs = pairs[np.lexsort((pairs[:, 1], pairs[:, 0]))]
        if merge_within_m is None:
            shown = "; ".join(f"{sites.node_id[a]}={sites.node_id[b]}" for a, b in pairs[:5])
            raise InputError(
                f"sites {where}: {len(pairs)} pair(s) of coincident sites (closer than "
                f"{COINCIDENT_M * 1000:g} mm): {shown}{' …' if len(pairs) > 5 else ''}; remove "
                "them or pass --merge-within-m METRES to merge them")
        sites = _merge(sites, pairs)
    if sites.n < 2:
        raise InputError(f"sites {where}: only {sites.n} site(s); a network needs at least 2")
    return sites


def _merge(sites: Sites, pairs):
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    n = sites.n
    g = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(n, n))
    _, lab = connected_components(g, directed=False)
    # keep the first row of each cluster
    first = np.full(lab.max() + 1, n, dtype=np.int64)
    np.minimum.at(first, lab, np.arange(n))
    keep = np.sort(first)
    rep = first[lab]
    demand = np.bincount(rep, weights=sites.demand, minlength=n)[keep]
    rank = np.array([_ROLE_RANK[r] for r in sites.role])
    best = np.full(n, 9)
    np.minimum.at(best, rep, rank)
    inv = {v: k for k, v in _ROLE_RANK.items()}
    role = np.array([inv[int(best[k])] for k in keep], dtype=object)
    merged = [(str(sites.node_id[rep[i]]), str(sites.node_id[i])) for i in range(n) if rep[i] != i]
    basis = {}
    if sites.population is not None:
        basis["population"] = np.bincount(rep, weights=sites.population, minlength=n)[keep]
    if sites.area_ha is not None:
        area = np.bincount(rep, weights=sites.area_ha, minlength=n)
        basis["area_ha"] = area[keep]
        if sites.runoff_c is not None:
            # merged catchments: the area-weighted runoff coefficient keeps sum(C·A)
            ca = np.bincount(rep, weights=sites.area_ha * sites.runoff_c, minlength=n)[keep]
            basis["runoff_c"] = np.where(area[keep] > 0, ca / np.where(area[keep] > 0, area[keep], 1),
                                         sites.runoff_c[keep])
    elif sites.runoff_c is not None:
        basis["runoff_c"] = sites.runoff_c[keep]
    if sites.min_pressure_m is not None:
        # merged sites: the strictest minimum pressure of the cluster (NaN only where all are)
        pm = np.full(n, -np.inf)
        np.fmax.at(pm, rep, np.where(np.isnan(sites.min_pressure_m), -np.inf, sites.min_pressure_m))
        basis["min_pressure_m"] = np.where(np.isinf(pm[keep]), np.nan, pm[keep])
    return Sites(xy=sites.xy[keep], node_id=sites.node_id[keep], role=role, demand=demand,
                 elevation=sites.elevation[keep], crs=sites.crs, source_crs=sites.source_crs,
                 crs_reason=sites.crs_reason, path=sites.path, layer=sites.layer, merged=merged,
                 **basis)
