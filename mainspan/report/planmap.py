"""The plan map of the review report: a drawing a reviewer can cross-reference.

Every symbol on the map can be found in the report's tables: sites carry their
ids, links their ids and pipe sizes where there is room, roots are ringed stars,
each kind of failed check has its own symbol (legend), access points and
fittings are drawn where the design placed them, and arrows show which way
water flows.  Backgrounds: terrain hillshade (with contours) or land-cost zones.

Large layouts (more than :data:`LABEL_LIMIT` sites) are drawn without labels,
as one raster image; the tables beside it carry the ids.

References
----------
Horn, B.K.P. (1981) "Hill shading and the reflectance map", *Proc. IEEE*
69(1):14–47 — slope and aspect from the 3×3 neighbourhood (here via central
differences, ``numpy.gradient``), lit from azimuth 315°, altitude 45°.
"""

from __future__ import annotations

import os

import numpy as np

from ..errors import InputError
from ..writers.styles import SIZE_COLOURS

__all__ = ["plan_map", "hillshade", "SIZE_COLOURS", "CHECK_MARKERS", "LABEL_LIMIT",
           "root_nodes", "check_kinds"]

#: Sites above which ids and link labels are left off the map (the tables carry them).
LABEL_LIMIT = 400
#: Links above which link ids and sizes are left off (they would overlap).
LINK_LABEL_LIMIT = 160

#: One marker per failed-check kind, in the order the kinds are first sorted.
CHECK_MARKERS = ("X", "D", "s", "P", "v", "h", "<", "p", ">", "*", "d", "8")
_CHECK_COLOURS = ("#d11f1f", "#e0761a", "#8b1fd1", "#b5006b", "#7a3b00", "#d11f8f")
#: Access-point and fitting symbols by kind (any other kind gets the last entry).
_FEATURE_STYLE = {
    "manhole": ("o", "#ffffff", "#303030", "manhole"),
    "spacing": ("o", "#ffffff", "#303030", "access point (spacing)"),
    "grade break": ("o", "#d9d9d9", "#303030", "access point (grade break)"),
    "drop manhole": ("v", "#ffe08a", "#303030", "drop manhole"),
    "lift station": ("^", "#ff9f40", "#303030", "lift station"),
    "air_valve": ("^", "#9ad0f5", "#003a66", "air valve"),
    "washout": ("v", "#a36b2b", "#3b2200", "washout"),
    "isolation_valve": ("d", "#303030", "#ffffff", "isolation valve"),
    "thrust_block": ("s", "#bdbdbd", "#505050", "thrust block"),
    "prv": ("H", "#f5d90a", "#504000", "pressure-reducing valve"),
    None: ("o", "#eeeeee", "#505050", "fitting"),
}


def _plt():
    import sys

    import matplotlib

    if "matplotlib.pyplot" not in sys.modules:
        matplotlib.use("Agg")
    return matplotlib


def hillshade(z, dx_m, dy_m, *, azimuth_deg=315.0, altitude_deg=45.0):
    """Hillshade in [0, 1] of a north-up grid ``z`` with cell sizes ``dx_m``, ``dy_m``."""
    z = np.asarray(z, float)
    fill = np.nanmean(z) if np.isfinite(z).any() else 0.0
    zf = np.where(np.isfinite(z), z, fill)
    dzdy, dzdx = np.gradient(zf, dy_m, dx_m)     # rows go south: d/dy(row) = -d/dnorth
    slope = np.arctan(np.hypot(dzdx, dzdy))
    aspect = np.arctan2(dzdy, -dzdx)             # downslope direction, math angle
    az = np.radians(90.0 - azimuth_deg)
    alt = np.radians(altitude_deg)
    shade = (np.sin(alt) * np.cos(slope)
             + np.cos(alt) * np.sin(slope) * np.cos(az - aspect))
    shade = np.clip(shade, 0, 1)
    shade[~np.isfinite(z)] = np.nan
    return shade


def _read_background(path, crs, bounds, max_px=1500):
    """Raster band 1 over ``bounds`` in ``crs``, decimated to ≤ max_px, or None."""
    try:
        import rasterio
        from rasterio.crs import CRS
        from rasterio.enums import Resampling
        from rasterio.vrt import WarpedVRT
        from rasterio.windows import Window, from_bounds
    except ImportError:
        return None
    if not path or not os.path.exists(path):
        return None
    try:
        with rasterio.open(path) as src:
            ds, vrt = src, None
            want = CRS.from_wkt(crs.to_wkt()) if crs is not None else None
            if want is not None and src.crs is not None and src.crs != want:
                vrt = WarpedVRT(src, crs=want, resampling=Resampling.bilinear)
                ds = vrt
            try:
                win = from_bounds(*bounds, transform=ds.transform)
                win = win.round_offsets().round_lengths()
                try:        # only the part of the map the raster covers (no boundless reads)
                    win = win.intersection(Window(0, 0, ds.width, ds.height))
                except Exception:
                    return None
                h, w = max(int(win.height), 1), max(int(win.width), 1)
                f = max(1.0, max(h, w) / max_px)
                shape = (max(1, int(h / f)), max(1, int(w / f)))
                a = ds.read(1, window=win, out_shape=shape, masked=True,
                            resampling=Resampling.average)
                t = ds.window_transform(win)
                west, north = t.c, t.f
                east = west + t.a * win.width
                south = north + t.e * win.height
            finally:
                if vrt is not None:
                    vrt.close()
        return np.ma.filled(a.astype(float), np.nan), (west, east, south, north)
    except Exception as exc:                  # the map is drawn without a background
        import warnings

        warnings.warn(f"background raster {path!r} not drawn: {exc}", stacklevel=3)
        return None


def _raster_paths(value):
    """Paths in a run_info raster entry: ``"a.tif"`` or ``"name=a.tif; other=b.tif"``."""
    out = []
    for part in str(value or "").replace(";", ",").split(","):
        part = part.strip()
        if "=" in part and not os.path.exists(part):
            part = part.split("=", 1)[1].strip()
        if part:
            out.append(part)
    return out


def root_nodes(layout):
    """Indices of the nodes with no parent link (the roots of the tree or forest)."""
    has_parent = np.zeros(layout.n_nodes, bool)
    ends = np.asarray(layout.link_ends, np.int64).reshape(-1, 2)
    has_parent[ends[:, 1]] = True
    return np.flatnonzero(~has_parent)


def _failed_mask(col):
    s = np.asarray(col).astype(str)
    return ~np.isin(s, ["ok", "", "nan", "None"])


def check_kinds(layout):
    """Sorted failed-check kinds over links and nodes, e.g. ``["low_pressure", "too_deep"]``."""
    kinds = set()
    for tab in (layout.links, layout.nodes):
        if "checks" in tab:
            col = np.asarray(tab["checks"]).astype(str)
            for s in np.unique(col[_failed_mask(col)]):
                kinds.update(k.strip() for k in s.split(";") if k.strip())
    return sorted(kinds)


def _nice_floor(v):
    import math

    if not np.isfinite(v) or v <= 0:
        return 1.0
    e = math.floor(math.log10(v))
    cands = np.array([1, 2, 5]) * 10.0 ** e
    ok = cands[cands <= v * (1 + 1e-9)]
    return float(ok.max()) if ok.size else float(10.0 ** (e - 1) * 5)


def _emptiest_corner(xy, bounds):
    """Axes-fraction (x, y) of the map corner with the fewest sites near it."""
    w, h = bounds[2] - bounds[0], bounds[3] - bounds[1]
    fx = (xy[:, 0] - bounds[0]) / w if len(xy) else np.zeros(0)
    fy = (xy[:, 1] - bounds[1]) / h if len(xy) else np.zeros(0)
    best, best_n = (0.93, 0.88), None
    for cx, cy in ((0.93, 0.88), (0.07, 0.88), (0.93, 0.22), (0.07, 0.22)):
        n = int(np.count_nonzero((np.abs(fx - cx) < 0.12) & (np.abs(fy - (cy - 0.03)) < 0.16)))
        if best_n is None or n < best_n:
            best, best_n = (cx, cy), n
    return best


def _size_column(lk):
    for c in ("nominal_mm", "diameter_mm"):
        if c in lk:
            return c, np.asarray(lk[c], float)
    return None, None


def _background(ax, fig, layout, background, bounds, contours):
    order = {"terrain": ["terrain"], "land_cost": ["land_cost"], "none": [],
             None: ["terrain", "land_cost"]}[background]
    for kind in order:
        got = None
        for raster in _raster_paths(layout.run_info.get(kind, "")):
            got = _read_background(raster, layout.crs, bounds)
            if got is not None:
                break
        if got is None:
            continue
        z, ext = got
        if kind == "terrain":
            ny, nx = z.shape
            dx, dy = (ext[1] - ext[0]) / max(nx, 1), (ext[3] - ext[2]) / max(ny, 1)
            ax.imshow(hillshade(z, dx, dy), cmap="gray", vmin=0, vmax=1, extent=ext,
                      origin="upper", interpolation="bilinear", alpha=0.45, zorder=0)
            if contours and np.isfinite(z).sum() > 16:
                lo, hi = np.nanpercentile(z, [1, 99])
                step = _nice_floor(max(hi - lo, 1e-6) / 8)
                levels = np.arange(np.floor(lo / step) * step, hi + step, step)
                xs = np.linspace(ext[0], ext[1], nx)
                ys = np.linspace(ext[3], ext[2], ny)
                cs = ax.contour(xs, ys, z, levels=levels, colors="#8c6d46", linewidths=0.5,
                                alpha=0.8, zorder=1)
                ax.clabel(cs, fontsize=6, fmt="%g", inline=True)
                ax.plot([], [], color="#8c6d46", lw=0.6, label=f"contour ({step:g} m)")
        else:
            # land-cost zones: the raster in five classes by quantile, so zones read at a glance
            finite = z[np.isfinite(z)]
            edges = np.unique(np.quantile(finite, [0, .2, .4, .6, .8, 1])) if finite.size else []
            if len(edges) >= 2:
                import matplotlib as mpl

                cls = np.digitize(z, edges[1:-1]).astype(float)
                cls[~np.isfinite(z)] = np.nan
                cmap = mpl.colors.ListedColormap(
                    ["#f4f1e6", "#e8dcb5", "#d9c08a", "#c79a5b", "#a8713a"][:len(edges) - 1])
                ax.imshow(cls, cmap=cmap, extent=ext, origin="upper", alpha=0.55,
                          interpolation="nearest", zorder=0, vmin=-0.5,
                          vmax=len(edges) - 1.5)
                for j in range(len(edges) - 1):
                    ax.fill_between([], [], color=cmap(j), alpha=0.55,
                                    label=f"land cost {edges[j]:,.3g}–{edges[j + 1]:,.3g}")
        return kind
    return "none"


def plan_map(layout, *, background=None, figsize=None, title=None, contours=True):
    """Plan view of the layout, labelled for review.

    Parameters
    ----------
    layout : mainspan.pipeline.layout.Layout
    background : {None, "terrain", "land_cost", "none"}, default None
        ``None`` uses the terrain (hillshade and contours) when
        ``run_info["terrain"]`` names a readable raster, else the land-cost
        raster as five zones, else nothing.
    figsize : (float, float), optional
        Inches; by default 10 wide and as tall as the layout's shape needs.
    title : str, optional
    contours : bool, default True
        Contours over a terrain background.

    Returns
    -------
    matplotlib.figure.Figure
        With attributes ``mainspan_background`` (what was drawn underneath),
        ``mainspan_roots`` (root node indices), ``mainspan_root_from_role``
        (False when no root site had a source or outlet role) and
        ``mainspan_north_xy`` (axes fraction of the north arrow).
    """
    _plt()
    import matplotlib.patheffects as pe
    from matplotlib.figure import Figure

    if background not in (None, "terrain", "land_cost", "none"):
        raise InputError(f"background={background!r}: expected None, 'terrain', 'land_cost' "
                         "or 'none'")
    xy = np.asarray(layout.node_xy, float).reshape(-1, 2)
    ends = np.asarray(layout.link_ends, np.int64).reshape(-1, 2)
    lk, nd = layout.links, layout.nodes
    n, m = len(xy), len(ends)
    big = n > LABEL_LIMIT
    lo, hi = (xy.min(0), xy.max(0)) if n else (np.zeros(2), np.ones(2))
    pad = 0.07 * max(float((hi - lo).max()), 10.0)
    bounds = (lo[0] - pad, lo[1] - pad, hi[0] + pad, hi[1] + pad)
    ax_w = 7.0
    ax_h = float(np.clip(ax_w * (bounds[3] - bounds[1]) / (bounds[2] - bounds[0]), 3.0, 10.0))
    if figsize is None:
        figsize = (10.4, ax_h + 1.1)
    fig = Figure(figsize=figsize, dpi=100)
    ax = fig.add_axes([0.07, 0.7 / figsize[1], ax_w / figsize[0],
                       min(ax_h, figsize[1] - 1.0) / figsize[1]])
    bg_used = _background(ax, fig, layout, background, bounds, contours and not big)

    segs = xy[ends] if m else np.zeros((0, 2, 2))

    def draw(sel, colour, width, label):
        # one path per class, links broken by NaN: far faster than a collection of 10^5 lines
        pts = np.concatenate([segs[sel], np.full((int(sel.sum()), 1, 2), np.nan)], axis=1)
        ax.plot(pts[:, :, 0].ravel(), pts[:, :, 1].ravel(), color=colour, lw=width, zorder=3,
                solid_capstyle="round", label=label, antialiased=not big, rasterized=big)

    scol, size = _size_column(lk)
    if size is not None and m and np.isfinite(size).any():
        sizes = np.unique(size[np.isfinite(size)])
        k = np.searchsorted(sizes, np.nan_to_num(size, nan=sizes[0]))
        lab = "DN" if scol == "nominal_mm" else "ID "
        for j, s_ in enumerate(sizes):
            draw(k == j, SIZE_COLOURS[j % len(SIZE_COLOURS)],
                 1.0 + 2.6 * j / max(len(sizes) - 1, 1), f"{lab}{s_:g} mm")
    else:
        draw(np.ones(m, bool), "#1b3f8b", 1.4, "planned main")

    # flow arrows at mid-link, pointing the way water flows
    system = (layout.run_info.get("system") or "").lower()
    if m and not big and ("flow_direction" in lk or system in ("pressure", "gravity")):
        if "flow_direction" in lk:
            d = np.asarray(lk["flow_direction"]).astype(str)
            rev = np.char.startswith(d, "to")          # "to→from": flows toward from_node
        else:                                       # gravity drains to the root
            rev = np.full(m, system == "gravity")
        a = np.where(rev[:, None], segs[:, 1], segs[:, 0])
        b = np.where(rev[:, None], segs[:, 0], segs[:, 1])
        mid = (a + b) / 2
        v = (b - a) / np.maximum(np.hypot(*(b - a).T), 1e-9)[:, None]
        arrow = 0.012 * (bounds[2] - bounds[0])
        long_enough = np.hypot(*(b - a).T) > 3 * arrow
        for p, u in zip(mid[long_enough], v[long_enough]):
            ax.annotate("", xy=p + u * arrow / 2, xytext=p - u * arrow / 2, zorder=4,
                        arrowprops={"arrowstyle": "-|>", "color": "#101010", "lw": 0.7,
                                    "mutation_scale": 8})
        ax.plot([], [], marker=r"$\rightarrow$", ls="", color="#101010", ms=9,
                label="flow direction")

    # access points and fittings, one symbol per kind
    for tname, kcol in (("access_points", "kind"), ("fittings", "type")):
        tab = layout.tables.get(tname) or {}
        if "x" not in tab or not len(tab["x"]):
            continue
        kinds = np.asarray(tab[kcol]).astype(str)
        fx, fy = np.asarray(tab["x"], float), np.asarray(tab["y"], float)
        for kname in np.unique(kinds):
            mk, face, edge, label = _FEATURE_STYLE.get(kname, _FEATURE_STYLE[None])
            sel = kinds == kname
            ax.scatter(fx[sel], fy[sel], marker=mk, s=18 if not big else 4, c=face,
                       edgecolors=edge, linewidths=0.6, zorder=5, label=label,
                       rasterized=big)

    # nodes: sites, structures at nodes, roots
    roots = root_nodes(layout)
    role = np.asarray(nd.get("role", np.full(n, ""))).astype(str)
    from_role = bool(n) and bool(np.isin(role[roots], ["source", "outlet"]).all())
    other = np.ones(n, bool)
    other[roots] = False
    if big:             # one pixel per site: a scatter of 10^5 outlined markers is slow
        ax.plot(xy[other, 0], xy[other, 1], ",", color="#202020", zorder=6, label="site")
    else:
        ax.scatter(xy[other, 0], xy[other, 1], s=12, c="#ffffff", edgecolors="#202020",
                   linewidths=0.6, zorder=6, label="site")
    if len(roots):
        rlabel = ("root (" + "/".join(sorted(set(role[roots]))) + ")" if from_role else
                  "root (no site had a source role)")
        ax.scatter(xy[roots, 0], xy[roots, 1], s=220, marker="*", c="#ffd21f",
                   edgecolors="#202020", linewidths=0.9, zorder=8, label=rlabel)

    # failed checks: one symbol per kind
    kinds = check_kinds(layout)
    for j, kname in enumerate(kinds):
        px, py = [], []
        for tab, where in ((lk, "link"), (nd, "node")):
            if "checks" not in tab:
                continue
            col = np.char.add(np.char.add(";", np.asarray(tab["checks"]).astype(str)), ";")
            hit = np.char.find(col, f";{kname};") >= 0
            if not hit.any():
                continue
            pts = segs[hit].mean(1) if where == "link" else xy[hit]
            px += list(pts[:, 0])
            py += list(pts[:, 1])
        mk, colour = CHECK_MARKERS[j % len(CHECK_MARKERS)], _CHECK_COLOURS[j % len(_CHECK_COLOURS)]
        ax.plot(px, py, ls="", marker=mk, ms=10 if not big else 2.5,
                mew=1.8 if not big else 0.6, mec=colour, mfc=colour if mk in "XP" else "none",
                zorder=9, label=f"failed: {kname}")

    halo = [pe.withStroke(linewidth=2.2, foreground="white")]
    if not big:
        ids = np.asarray(nd["node_id"]).astype(str)
        for i in range(n):
            ax.annotate(ids[i], xy[i], xytext=(3, 3), textcoords="offset points", fontsize=6.5,
                        zorder=10, path_effects=halo)
        if m <= LINK_LABEL_LIMIT:
            lid = np.asarray(lk.get("link_id", np.arange(1, m + 1)))
            width_m = bounds[2] - bounds[0]
            seg_len = np.hypot(*(segs[:, 1] - segs[:, 0]).T)
            for j in range(m):
                txt = f"L{lid[j]}"
                if size is not None and np.isfinite(size[j]) and seg_len[j] > 0.07 * width_m:
                    txt += f" {'DN' if scol == 'nominal_mm' else 'ID'}{size[j]:g}"
                p = segs[j].mean(0)
                dx, dy = segs[j, 1] - segs[j, 0]
                ang = float(np.degrees(np.arctan2(dy, dx)))
                ang = ang - 180 if ang > 90 else (ang + 180 if ang < -90 else ang)
                ax.annotate(txt, p, xytext=(0, -7), textcoords="offset points", fontsize=5.5,
                            color="#1a1a6e", ha="center", va="center", rotation=ang,
                            rotation_mode="anchor", zorder=10, path_effects=halo)

    ax.set_xlim(bounds[0], bounds[2])
    ax.set_ylim(bounds[1], bounds[3])
    ax.set_aspect("equal", adjustable="box")
    ax.ticklabel_format(useOffset=False, style="plain")
    ax.tick_params(labelsize=7)
    ax.set_xlabel("easting (m)", fontsize=8)
    ax.set_ylabel("northing (m)", fontsize=8)
    w = bounds[2] - bounds[0]
    bar = _nice_floor(w / 5)
    x0b, y0b = bounds[0] + 0.04 * w, bounds[1] + 0.035 * (bounds[3] - bounds[1])
    ax.plot([x0b, x0b + bar], [y0b, y0b], color="black", lw=3, zorder=11, solid_capstyle="butt")
    ax.annotate(f"{bar:g} m", (x0b + bar / 2, y0b), xytext=(0, 4), textcoords="offset points",
                ha="center", fontsize=8, zorder=11, path_effects=halo)
    nxy = _emptiest_corner(xy, bounds)
    ax.annotate("N", xy=(nxy[0], nxy[1]), xytext=(nxy[0], nxy[1] - 0.09),
                xycoords="axes fraction", ha="center", va="center", fontsize=10,
                fontweight="bold", zorder=11, path_effects=halo,
                arrowprops={"arrowstyle": "-|>", "color": "black", "lw": 1.4})
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=7, frameon=False,
              markerscale=0.8)
    crs = layout.run_info.get("working_crs") or (layout.crs.name if layout.crs is not None else "")
    ax.set_title(title or f"Plan ({crs}; grid north up)", fontsize=10)
    fig.mainspan_background = bg_used
    fig.mainspan_roots = roots
    fig.mainspan_root_from_role = from_role
    fig.mainspan_north_xy = nxy
    return fig
