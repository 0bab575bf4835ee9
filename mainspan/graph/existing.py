"""Existing mains: extend a network that is already in the ground.

An existing main is a line layer (``--existing LAYER``) with optional diameter and material
fields.  Each line becomes a chain of *existing links* between nodes at its vertices; those
links are in the network at no build cost (forced links of zero price, see
:mod:`mainspan.graph.constraints`).  New sites may connect anywhere along a main: candidate
*taps* are placed at the point of the nearest main nearest to each site and along every line
at a settable spacing; a tap splits the line and becomes a node of role ``junction``.  A new
link that ends at a node of an existing main pays the tap fee (the connection price of a
tapping, 0 by default) on top of its own price.

Choices (a practising engineer's defaults; the issue is silent):

* vertices closer than ``snap_m`` (1 m) are one node: lines sharing an end (or a vertex) are
  connected; a line end within ``snap_m`` of another line's interior is a tee on that line;
  lines crossing without a shared vertex are not connected (a crossing is not a tee);
* a vertex within ``snap_m`` of a site *is* that site: this is how an existing main reaches
  its source;
* every connected part of the existing mains must reach a site (otherwise nothing feeds it),
  or the layer is refused with a message naming the features;
* candidate taps that no new link uses stay as junction nodes on the existing main, so the
  existing links keep their exact geometry (every vertex is a node).

After design (:func:`existing_checks`), every existing link whose diameter is smaller than
the diameter the design needs for its new flow is flagged ``existing_undersized`` with the
needed size.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ..errors import DataFileError, InputError

__all__ = ["ExistingMains", "existing_from_lines", "read_existing", "extend_sites",
           "nearest_on_lines", "existing_checks"]


@dataclass(frozen=True)
class ExistingMains:
    """Existing mains as nodes and links, ready to join the sites (struct of arrays).

    Attributes
    ----------
    n_sites : int
        Number of sites; junction ``j`` is node ``n_sites + j``.
    junction_xy : ndarray (J, 2)
    junction_id : ndarray of str (J,)
    junction_is_tap : ndarray of bool (J,)
        True for candidate taps (False: a vertex of a line).
    links : ndarray int64 (E, 2)
        Existing links between nodes (sites and junctions), ``i < j``.
    feature : ndarray int64 (E,)
        Feature (row) of the layer each link comes from.
    diameter_mm : ndarray float (E,)
        Diameter from the layer's field; NaN where not given.
    material : ndarray of str (E,)
    length_m : ndarray float (E,)
    on_main : ndarray of bool (n_sites + J,)
        Nodes on an existing main (sites it reaches and every junction).
    """

    n_sites: int
    junction_xy: np.ndarray
    junction_id: np.ndarray
    junction_is_tap: np.ndarray
    links: np.ndarray
    feature: np.ndarray
    diameter_mm: np.ndarray
    material: np.ndarray
    length_m: np.ndarray
    on_main: np.ndarray

    @property
    def n_junctions(self) -> int:
        return int(len(self.junction_xy))


def _uf_find(uf, a):
    while uf[a] != a:
        uf[a] = uf[uf[a]]
        a = uf[a]
    return a


def nearest_on_lines(parts, points):
    """For each point: (part index, chainage m, nearest point (2,), distance m).

    The nearest line part comes from shapely's STRtree; the position on it is the projection
    onto its nearest segment (numpy), clamped to the segment.
    """
    import shapely

    pts = np.asarray(points, float).reshape(-1, 2)
    geoms = np.array([shapely.LineString(np.asarray(p, float)) for p in parts], dtype=object)
    tree = shapely.STRtree(geoms)
    idx = tree.query_nearest(shapely.points(pts), all_matches=False)
    part_of = np.empty(len(pts), np.int64)
    part_of[idx[0]] = idx[1]
    out_ch = np.empty(len(pts))
    out_xy = np.empty((len(pts), 2))
    out_d = np.empty(len(pts))
    for i, p in enumerate(pts):
        c = np.asarray(parts[part_of[i]], float)
        a, b = c[:-1], c[1:]
        ab = b - a
        l2 = np.einsum("ij,ij->i", ab, ab)
        t = np.clip(np.einsum("ij,ij->i", p - a, ab) / np.where(l2 > 0, l2, 1.0), 0.0, 1.0)
        q = a + t[:, None] * ab
        d = np.hypot(*(q - p).T)
        s = int(np.argmin(d))
        seg_len = np.sqrt(l2)
        out_ch[i] = float(seg_len[:s].sum() + t[s] * seg_len[s])
        out_xy[i] = q[s]
        out_d[i] = float(d[s])
    return part_of, out_ch, out_xy, out_d


def existing_from_lines(parts, site_xy, *, feature=None, diameter_mm=None, material=None,
                        tap_spacing_m=None, snap_m=1.0, site_id=None, where="existing mains"):
    """Nodes and links of existing mains given as coordinate arrays (one per line part).

    Parameters
    ----------
    parts : sequence of array_like (k_i, 2)
        Line parts in the working CRS (metres).
    site_xy : array_like (n, 2)
        The sites.
    feature : array_like of int, optional
        Feature index of each part (for messages and the ``links`` table); default 0..
    diameter_mm, material : array_like, optional
        Per part.
    tap_spacing_m : float, optional
        Also place candidate taps along every line at this spacing (none: only the points
        nearest to the sites).
    snap_m : float, default=1.0
        Vertices closer than this are one node; a vertex this close to a site is the site.

    Returns
    -------
    ExistingMains
    """
    from scipy.spatial import cKDTree

    site_xy = np.asarray(site_xy, float).reshape(-1, 2)
    n = len(site_xy)
    ids = [str(v) for v in (site_id if site_id is not None else range(n))]
    parts = [np.asarray(p, float)[:, :2] for p in parts]
    P = len(parts)
    feature = np.arange(P) if feature is None else np.asarray(feature, np.int64)
    dia = np.full(P, np.nan) if diameter_mm is None else np.asarray(diameter_mm, float)
    mat = np.full(P, "", object) if material is None else np.asarray(material, object)
    if P == 0:
        raise InputError(f"{where}: the layer holds no lines; give a layer of existing mains "
                         "or leave the option out")
    for i, c in enumerate(parts):
        if len(c) < 2 or not np.isfinite(c).all() or np.hypot(*np.diff(c, axis=0).T).sum() <= 0:
            raise InputError(f"{where}: feature {int(feature[i])} is empty, a point or has no "
                             "length; remove it or redraw it as a line")
    # candidate points on each part: vertices, spacing taps, then taps nearest to the sites
    pts_xy, pts_part, pts_ch, pts_tap = [], [], [], []
    seglens = []
    for i, c in enumerate(parts):
        sl = np.hypot(*np.diff(c, axis=0).T)
        seglens.append(sl)
        ch = np.concatenate([[0.0], np.cumsum(sl)])
        pts_xy.append(c)
        pts_part.append(np.full(len(c), i))
        pts_ch.append(ch)
        pts_tap.append(np.zeros(len(c), bool))
        if tap_spacing_m:
            s = np.arange(tap_spacing_m, ch[-1] - 1e-9, tap_spacing_m)
            if s.size:
                pts_xy.append(_at_chainage(c, ch, s))
                pts_part.append(np.full(len(s), i))
                pts_ch.append(s)
                pts_tap.append(np.ones(len(s), bool))
    # tees: a part's end near another part's interior splits that part there
    import shapely
    lines = np.array([shapely.LineString(c) for c in parts], dtype=object)
    strtree = shapely.STRtree(lines)
    for i, c in enumerate(parts):
        for end in (c[0], c[-1]):
            near = strtree.query(shapely.Point(end), predicate="dwithin", distance=snap_m)
            for j in sorted(int(x) for x in near if int(x) != i):
                _, jch, jxy, _ = nearest_on_lines([parts[j]], end[None])
                pts_xy.append(jxy)
                pts_part.append(np.array([j]))
                pts_ch.append(jch)
                pts_tap.append(np.array([False]))
    # taps nearest to each site (sites on a main need none)
    sp, sch, sxy, sd = nearest_on_lines(parts, site_xy)
    far = sd > snap_m
    pts_xy.append(sxy[far])
    pts_part.append(sp[far])
    pts_ch.append(sch[far])
    pts_tap.append(np.ones(int(far.sum()), bool))
    xy = np.concatenate(pts_xy)
    part = np.concatenate(pts_part).astype(np.int64)
    ch = np.concatenate(pts_ch)
    tap = np.concatenate(pts_tap)
    # cluster points within snap_m into nodes; a cluster near a site is that site
    m = len(xy)
    uf = np.arange(m)
    for a, b in sorted(cKDTree(xy).query_pairs(snap_m)):
        ra, rb = _uf_find(uf, a), _uf_find(uf, b)
        if ra != rb:
            uf[max(ra, rb)] = min(ra, rb)
    rep = np.array([_uf_find(uf, a) for a in range(m)])
    d_site, i_site = cKDTree(site_xy).query(xy)
    node = np.full(m, -1, np.int64)
    # a cluster touching a site becomes the site (the nearest site of its points)
    best = {}
    for a in np.flatnonzero(d_site <= snap_m).tolist():
        r = rep[a]
        if r not in best or d_site[a] < best[r][0]:
            best[r] = (d_site[a], int(i_site[a]))
    jx, jtap, jid = [], [], []
    jnode = {}
    counters = {}
    for a in range(m):
        r = rep[a]
        if r in best:
            node[a] = best[r][1]
            continue
        if r not in jnode:
            f = int(feature[part[r]])
            kind = "t" if tap[r] else "v"
            counters[(f, kind)] = counters.get((f, kind), 0) + 1
            jnode[r] = n + len(jx)
            jx.append(xy[r])
            jtap.append(bool(tap[r]))
            jid.append(f"ex{f}.{kind}{counters[(f, kind)]}")
        node[a] = jnode[r]
    clash = set(jid) & set(ids)
    if clash:
        raise InputError(f"{where}: site id {sorted(clash)[0]!r} is also the name of a node on "
                         "an existing main; rename that site (ids 'exF.vK'/'exF.tK' are "
                         "reserved for nodes on existing mains)")
    # links: consecutive nodes along each part
    la, lb, lf, ld, lm, ll = [], [], [], [], [], []
    for i in range(P):
        sel = np.flatnonzero(part == i)
        o = sel[np.lexsort((sel, ch[sel]))]
        seq, cs = node[o], ch[o]
        for k in range(len(seq) - 1):
            if seq[k] != seq[k + 1]:
                la.append(min(seq[k], seq[k + 1]))
                lb.append(max(seq[k], seq[k + 1]))
                lf.append(int(feature[i]))
                ld.append(dia[i])
                lm.append(mat[i])
                ll.append(cs[k + 1] - cs[k])
    links = np.column_stack([la, lb]).astype(np.int64)
    # one link per node pair (two lines drawn over each other): the first drawn is kept
    _, first = np.unique(links, axis=0, return_index=True)
    first = np.sort(first)
    links = links[first]
    J = len(jx)
    on_main = np.zeros(n + J, bool)
    on_main[links.ravel()] = True
    _check_reach(n, J, links, np.asarray(lf)[first], parts, feature, site_xy, ids, snap_m, where)
    return ExistingMains(
        n_sites=n, junction_xy=np.asarray(jx, float).reshape(-1, 2),
        junction_id=np.asarray(jid, object), junction_is_tap=np.asarray(jtap, bool),
        links=links, feature=np.asarray(lf, np.int64)[first],
        diameter_mm=np.asarray(ld, float)[first], material=np.asarray(lm, object)[first],
        length_m=np.asarray(ll, float)[first], on_main=on_main)


def _at_chainage(c, ch, s):
    k = np.clip(np.searchsorted(ch, s, side="right") - 1, 0, len(c) - 2)
    t = (s - ch[k]) / np.where(ch[k + 1] > ch[k], ch[k + 1] - ch[k], 1.0)
    return c[k] + t[:, None] * (c[k + 1] - c[k])


def _check_reach(n, J, links, feat, parts, feature, site_xy, ids, snap_m, where):
    """Every connected part of the existing mains must reach a site."""
    N = n + J
    uf = np.arange(N)
    for a, b in links.tolist():
        ra, rb = _uf_find(uf, a), _uf_find(uf, b)
        if ra != rb:
            uf[max(ra, rb)] = min(ra, rb)
    rep = np.array([_uf_find(uf, a) for a in range(N)])
    fed = set(rep[:n].tolist())
    for k in range(len(links)):
        if rep[links[k, 0]] not in fed:
            comp = rep[links[k, 0]]
            fs = sorted(set(feat[(rep[links[:, 0]] == comp)].tolist()))
            import shapely
            i = int(np.flatnonzero(feature == fs[0])[0])
            d = shapely.LineString(parts[i]).distance(shapely.points(site_xy))
            j = int(np.argmin(d))
            s = np.arange(len(site_xy))
            d = np.asarray(d, float)
            more = f" (with feature(s) {', '.join(map(str, fs[1:5]))})" if len(fs) > 1 else ""
            raise InputError(f"{where}: feature {fs[0]}{more} reaches no site: it passes "
                             f"{float(d[j]):.1f} m from the nearest site ({ids[int(s[j])]}), more "
                             f"than {snap_m:g} m; snap the main to the site that feeds it (its "
                             "source) or remove it from the layer")


def read_existing(path, *, working_crs, site_xy, site_id=None, layer=None, diameter_field=None,
                  material_field=None, tap_spacing_m=None, snap_m=1.0,
                  option="--existing") -> ExistingMains:
    """Read a line layer of existing mains (any OGR format) into :class:`ExistingMains`.

    ``diameter_field`` defaults to ``diameter_mm`` and ``material_field`` to ``material``
    when the layer has them.  A layer without a CRS, of other than line geometries, with an
    unknown field or with lines that reach no site is refused with a one-line message.
    """
    import geopandas as gpd
    import shapely

    where = f"option {option}: {str(path)!r}" + (f" layer {layer!r}" if layer else "")
    try:
        df = gpd.read_file(path, layer=layer)
    except Exception as exc:  # noqa: BLE001 - any reader failure is the file's
        raise DataFileError(f"{where}: cannot read it ({str(exc).splitlines()[0]}); give a "
                            "line layer (GeoPackage, Shapefile, GeoJSON)") from None
    if df.crs is None:
        raise InputError(f"{where} has no CRS; set the layer's CRS in a GIS and save it again")
    kinds = set(df.geometry.geom_type.dropna().astype(str))
    if kinds - {"LineString", "MultiLineString"}:
        raise InputError(f"{where}: expected LineString features, got "
                         f"{', '.join(sorted(kinds))}; give the existing mains as lines")
    for name, fld, dflt in (("diameter", diameter_field, "diameter_mm"),
                            ("material", material_field, "material")):
        if fld is not None and fld not in df.columns:
            raise InputError(f"{where}: no field {fld!r} for the {name} (fields: "
                             f"{', '.join(c for c in df.columns if c != 'geometry')}); give one "
                             f"of them or leave the option out")
    dfield = diameter_field or ("diameter_mm" if "diameter_mm" in df.columns else None)
    mfield = material_field or ("material" if "material" in df.columns else None)
    dia = np.full(len(df), np.nan)
    if dfield:
        vals = np.asarray(df[dfield].to_numpy(), object)
        try:
            dia = np.array([np.nan if v is None or v == "" else float(v) for v in vals])
        except (TypeError, ValueError):
            bad = next(i for i, v in enumerate(vals) if not _is_number(v))
            raise InputError(f"{where}: feature {bad} field {dfield!r} holds {vals[bad]!r}, not a "
                             "diameter in mm; correct it or clear it") from None
        badd = np.flatnonzero(~np.isnan(dia) & ~(dia > 0))
        if badd.size:
            raise InputError(f"{where}: feature {int(badd[0])} field {dfield!r} is "
                             f"{float(dia[badd[0]])!r}"
                             "; a diameter must be > 0 mm (clear it when unknown)")
    mat = (np.asarray(df[mfield].fillna("").astype(str).to_numpy(), object) if mfield
           else np.full(len(df), "", object))
    df = df.to_crs(working_crs)
    parts, feat, pd_, pm = [], [], [], []
    for f, g in enumerate(df.geometry.values):
        if g is None or g.is_empty:
            raise InputError(f"{where}: feature {f} has no geometry; remove it or draw it")
        for sub in (g.geoms if g.geom_type == "MultiLineString" else [g]):
            parts.append(shapely.get_coordinates(sub))
            feat.append(f)
            pd_.append(dia[f])
            pm.append(mat[f])
    return existing_from_lines(parts, site_xy, feature=np.asarray(feat), diameter_mm=pd_,
                               material=pm, tap_spacing_m=tap_spacing_m, snap_m=snap_m,
                               site_id=site_id, where=where)


def _is_number(v):
    try:
        float(v)
        return True
    except (TypeError, ValueError):
        return v is None or v == ""


def extend_sites(sites, mains: ExistingMains):
    """Sites with the junctions of *mains* appended (role ``junction``, no demand)."""
    J = mains.n_junctions
    if not J:
        return sites
    add = {"xy": np.vstack([sites.xy, mains.junction_xy]),
           "node_id": np.concatenate([sites.node_id.astype(object), mains.junction_id]),
           "role": np.concatenate([sites.role.astype(object), np.full(J, "junction", object)]),
           "demand": np.concatenate([sites.demand, np.zeros(J)]),
           "elevation": np.concatenate([sites.elevation, np.full(J, np.nan)])}
    for k in ("area_ha", "runoff_c", "population", "min_pressure_m"):
        v = getattr(sites, k, None)
        if v is not None:
            fill = np.nan if k == "min_pressure_m" else 0.0
            add[k] = np.concatenate([np.asarray(v, float), np.full(J, fill)])
    return replace(sites, **add)


def existing_checks(diameter_mm, existing_diameter_mm, is_existing):
    """Flag existing links narrower than the design needs for their new flow.

    Returns
    -------
    (undersized, needed_mm) : ndarray of bool, ndarray of float
        ``undersized`` where the existing diameter is known and smaller than the designed one;
        ``needed_mm`` the designed diameter there (NaN elsewhere).

    Examples
    --------
    >>> u, need = existing_checks([150, 100, 200], [100, 150, np.nan], [True, True, True])
    >>> u.tolist(), need.tolist()
    ([True, False, False], [150.0, nan, nan])
    """
    d = np.asarray(diameter_mm, float)
    ex = np.asarray(existing_diameter_mm, float)
    is_ex = np.asarray(is_existing, bool)
    under = is_ex & np.isfinite(ex) & np.isfinite(d) & (ex < d - 1e-9)
    return under, np.where(under, d, np.nan)
