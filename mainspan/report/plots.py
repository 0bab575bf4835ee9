"""Long sections and plan maps of a layout (matplotlib, Agg backend).

* :func:`long_section` — ground, pipe and nodes along one path of the tree,
  chainage in metres on x, with a stated vertical exaggeration.
* :func:`plan_map` — the layout over a hillshade of the terrain (or the
  land-cost raster), links coloured and thickened by pipe size, sources
  marked, failing checks crossed in red.
* :func:`longest_paths` — the longest root-to-node path and the next-longest
  branches off the paths already taken, found with vectorised pointer jumping
  over ``link_ends`` (no per-node Python loop).

Saved files are reproducible: SVG ids are salted with a fixed string and no
dates or software names are written into PNG, SVG or PDF metadata.

References
----------
Horn, B.K.P. (1981) "Hill shading and the reflectance map", *Proc. IEEE*
69(1):14–47 — slope and aspect from the 3×3 neighbourhood (here via central
differences, ``numpy.gradient``), lit from azimuth 315°, altitude 45°.
Wyllie, J.C. (1979) "The complexity of parallel computations", PhD thesis, Cornell
University (TR 79-387) (from memory)
— pointer jumping (path doubling) for sums along rooted trees.
"""

from __future__ import annotations

import io
import math
import os

import numpy as np

from ..errors import InputError

__all__ = ["long_section", "save_long_section", "plan_map", "save_figure", "longest_paths", "hillshade",
           "distance_to_root", "figure_bytes"]

_SALT = "mainspan"


def _plt():
    """Select the headless Agg backend unless the caller already uses pyplot.

    Figures here are plain :class:`matplotlib.figure.Figure` objects (no
    pyplot state), so an interactive session that has imported pyplot keeps
    its own backend.
    """
    import sys

    import matplotlib

    if "matplotlib.pyplot" not in sys.modules:
        matplotlib.use("Agg")
    return matplotlib


# ------------------------------------------------------------------ tree helpers
def _parent_arrays(layout):
    n = layout.n_nodes
    ends = np.asarray(layout.link_ends, np.int64).reshape(-1, 2)
    parent = np.full(n, -1, np.int64)
    parent[ends[:, 1]] = ends[:, 0]
    plink = np.full(n, -1, np.int64)
    plink[ends[:, 1]] = np.arange(len(ends))
    return parent, plink


def distance_to_root(layout, *, column="length_m"):
    """Cumulative ``column`` (default plan length) from each node's root, by pointer jumping."""
    n = layout.n_nodes
    parent, plink = _parent_arrays(layout)
    w = np.asarray(layout.links.get(column, np.zeros(layout.n_links)), float)
    acc = np.where(plink >= 0, w[np.maximum(plink, 0)], 0.0)
    anc = parent.copy()
    # after step k, acc[i] sums the 2^k links above i and anc[i] is the 2^k-th ancestor
    for _ in range(max(1, int(math.ceil(math.log2(max(n, 2)))) + 1)):
        live = anc >= 0
        if not live.any():
            break
        a = anc[live]
        acc[live] += acc[a]
        anc[live] = anc[a]
    return acc


def _nearest_marked_ancestor(parent, marked):
    """For each node, the nearest ancestor-or-self that is marked (roots count as marked)."""
    up = np.where(marked | (parent < 0), np.arange(len(parent)), parent)
    for _ in range(max(1, int(math.ceil(math.log2(max(len(parent), 2)))) + 1)):
        nxt = up[up]
        if np.array_equal(nxt, up):
            break
        up = nxt
    return up


def longest_paths(layout, *, k=3):
    """Up to ``k`` paths (node index arrays, top to bottom): the longest root→node
    path by plan length, then repeatedly the longest branch off what is covered.
    """
    n = layout.n_nodes
    if layout.n_links == 0 or n == 0:
        return []
    parent, _ = _parent_arrays(layout)
    dist = distance_to_root(layout)
    covered = np.zeros(n, bool)
    out = []
    for _ in range(k):
        top = _nearest_marked_ancestor(parent, covered)
        gain = dist - dist[top]
        gain[covered] = -1.0
        j = int(np.argmax(gain))              # ties → lowest node index
        if gain[j] <= 0:
            break
        path = layout.path_to_root(j)[::-1]
        if covered.any():
            start = int(top[j])
            path = path[int(np.flatnonzero(path == start)[0]):]
        covered[layout.path_to_root(j)] = True
        out.append(path)
    return out


# ------------------------------------------------------------------ long section
def _section_data(layout, path):
    """Chainage/ground samples, per-link spans and node chainages along ``path``."""
    parent, plink = _parent_arrays(layout)
    path = np.asarray(path, np.int64)
    if path.ndim != 1 or len(path) < 2:
        raise InputError("long section path: need at least two node indices (a start node "
                         "and one below it); give to_node= a node that is not a root")
    if np.any(parent[path[1:]] != path[:-1]):
        bad = int(np.flatnonzero(parent[path[1:]] != path[:-1])[0])
        ids = np.asarray(layout.nodes["node_id"]).astype(str)
        raise InputError(f"long section path: node {ids[path[bad + 1]]!r} is not a child of "
                         f"{ids[path[bad]]!r}; give node indices down the tree from one node")
    links = plink[path[1:]]
    length = np.asarray(layout.links["length_m"], float)[links]
    ch0 = float(distance_to_root(layout)[path[0]])
    node_ch = ch0 + np.r_[0.0, np.cumsum(length)]
    zc = layout.link_coordinates("ground")[links, :, 2]
    elev = np.asarray(layout.nodes.get("elevation_m", np.full(layout.n_nodes, np.nan)), float)
    gx, gz = [], []
    prof = layout.profiles
    for j, li in enumerate(links):
        if prof is not None and int(prof.offsets[li + 1]) - int(prof.offsets[li]) >= 2:
            st, g = prof.of(li)
            st, g = np.asarray(st, float), np.asarray(g, float)
        else:
            z0 = zc[j, 0] if np.isfinite(zc[j, 0]) else elev[path[j]]
            z1 = zc[j, 1] if np.isfinite(zc[j, 1]) else elev[path[j + 1]]
            st, g = np.array([0.0, length[j]]), np.array([z0, z1], float)
        gx.append(node_ch[j] + st)
        gz.append(g)
    return {"path": path, "links": links, "node_ch": node_ch, "length": length,
            "ground_x": np.concatenate(gx), "ground_z": np.concatenate(gz)}


_NICE = np.array([1, 2, 5])


def _nice_floor(v):
    """Largest 1, 2 or 5 × 10^k not above ``v``."""
    if not np.isfinite(v) or v <= 0:
        return 1.0
    e = math.floor(math.log10(v))
    cands = _NICE * 10.0 ** e
    ok = cands[cands <= v * (1 + 1e-9)]
    return float(ok.max()) if ok.size else float(10.0 ** (e - 1) * 5)


def long_section(layout, *, path=None, to_node=None, longest=True, figsize=(11.0, 4.8),
                 title=None):
    """Long section along one path of the layout.

    Parameters
    ----------
    layout : mainspan.pipeline.layout.Layout
    path : sequence of int, optional
        Node indices down the tree (each the child of the one before), e.g. from
        a root to a chosen node.
    to_node : str, optional
        Node id: the section runs from its root down to it.
    longest : bool, default True
        With neither ``path`` nor ``to_node``, draw the longest root→node path.
    figsize : (float, float), default (11, 4.8)
        Inches.
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure

    Notes
    -----
    Chainage is plan (horizontal) distance from the root along the tree.  The
    ground comes from ``layout.profiles`` (or straight lines between node
    elevations).  Gravity mains show invert and crown (invert + inner
    diameter); pressure mains show the hydraulic grade line.  The vertical
    exaggeration is the largest 1/2/5 step that fits the data and is exact for
    the drawn axes (written in the title as ``V×N``).
    """
    _plt()
    from matplotlib.figure import Figure

    if path is None:
        if to_node is not None:
            path = layout.path_to_root(layout.node_index(to_node))[::-1]
        elif longest:
            paths = longest_paths(layout, k=1)
            if not paths:
                raise InputError("long section: the layout has no links; nothing to draw")
            path = paths[0]
        else:
            raise InputError("long section: give path= or to_node=, or leave longest=True")
    d = _section_data(layout, path)
    lk = layout.links
    ids = np.asarray(layout.nodes["node_id"]).astype(str)
    li, ch = d["links"], d["node_ch"]
    system = (layout.run_info.get("system") or "").lower()

    fig = Figure(figsize=figsize, dpi=100)
    ax = fig.add_axes([0.08, 0.14, 0.78, 0.72])
    ys = [d["ground_z"]]
    ax.plot(d["ground_x"], d["ground_z"], color="#6b4f2a", lw=1.4, label="ground")
    seg_x = np.column_stack([ch[:-1], ch[1:]])
    from ..writers.tables import link_inverts

    inv_all = link_inverts(layout)
    if inv_all is not None:
        inv = inv_all[li]
        dia = (np.asarray(lk["diameter_mm"], float)[li] / 1000.0 if "diameter_mm" in lk
               else np.zeros(len(li)))
        ap = layout.tables.get("access_points") or {}
        ap_id = np.asarray(ap.get("link_id", []), np.int64)
        lid = np.asarray(lk["link_id"], np.int64)[li] if "link_id" in lk else np.zeros(0)
        for j in range(len(li)):
            # the grade may break at access points on long links: draw through them
            hit = np.flatnonzero(ap_id == lid[j]) if ap_id.size else np.zeros(0, np.int64)
            order = np.argsort(np.asarray(ap["chainage_m"], float)[hit]) if hit.size else hit
            xs = np.r_[seg_x[j][0], seg_x[j][0] + np.asarray(ap.get("chainage_m", []),
                                                               float)[hit][order], seg_x[j][1]]
            zs = np.r_[inv[j][0], np.asarray(ap.get("invert_m", []), float)[hit][order],
                       inv[j][1]]
            ax.plot(xs, zs, color="#1f4e9a", lw=1.6, label="invert" if j == 0 else None)
            ax.plot(xs, zs + dia[j], color="#1f4e9a", lw=0.8, ls="--",
                    label="crown" if j == 0 else None)
        ys += [inv.ravel(), (inv + dia[:, None]).ravel()]
    if "hgl_from_m" in lk:
        hgl = np.column_stack([np.asarray(lk["hgl_from_m"], float)[li],
                               np.asarray(lk["hgl_to_m"], float)[li]])
        for j in range(len(li)):
            ax.plot(seg_x[j], hgl[j], color="#c0392b", lw=1.4,
                    label="hydraulic grade line" if j == 0 else None)
        ys.append(hgl.ravel())
    y = np.concatenate([np.asarray(v, float).ravel() for v in ys])
    y = y[np.isfinite(y)]
    if y.size == 0:
        y = np.array([0.0, 1.0])
    margin = 0.02 * max(float(ch[-1] - ch[0]), 1.0)      # keep end labels inside
    x0, x1 = float(ch[0]) - margin, float(ch[-1]) + margin
    xspan = max(x1 - x0, 1.0)
    ymin, ymax = float(y.min()), float(y.max())
    yspan_data = max(ymax - ymin, 0.5) * 1.35            # room for labels
    pos = ax.get_position()
    box_ratio = (pos.height * figsize[1]) / (pos.width * figsize[0])
    vx = _nice_floor(xspan * box_ratio / yspan_data)
    yspan = xspan * box_ratio / vx
    yc = (ymin + ymax) / 2 + 0.08 * yspan
    ax.set_xlim(x0, x0 + xspan)
    ax.set_ylim(yc - yspan / 2, yc + yspan / 2)
    top = yc + yspan / 2
    npath = len(d["path"])
    every = max(1, int(math.ceil(npath / 24)))          # at most ~24 node labels
    for j, node in enumerate(d["path"]):
        ax.axvline(ch[j], color="#888888", lw=0.5, ls=":")
        if j % every and j != npath - 1:
            continue
        ax.annotate(ids[node], (ch[j], top), xytext=(0, -3), textcoords="offset points",
                    ha="center", va="top", fontsize=8, rotation=90 if npath > 12 else 0,
                    clip_on=True)
    size = None
    if "nominal_mm" in lk:
        size = [f"DN{int(round(float(v)))}" for v in np.asarray(lk["nominal_mm"])[li]]
    elif "diameter_mm" in lk:
        size = [f"ID{float(v):.0f}" for v in np.asarray(lk["diameter_mm"])[li]]
    if size is not None and len(li) <= 24:
        bottom = yc - yspan / 2
        for j in range(len(li)):
            if ch[j + 1] - ch[j] < 0.04 * xspan:       # too short to carry a label
                continue
            ax.annotate(size[j], ((ch[j] + ch[j + 1]) / 2, bottom), xytext=(0, 3),
                        textcoords="offset points", ha="center", va="bottom", fontsize=7,
                        color="#1f4e9a")
    ax.set_xlabel("chainage (m)")
    ax.set_ylabel("elevation (m)")
    ax.grid(True, lw=0.3, color="#dddddd")
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, frameon=False)
    vtxt = f"V×{vx:g}"
    t = title or f"Long section {ids[d['path'][0]]} → {ids[d['path'][-1]]}"
    ax.set_title(f"{t}  ({vtxt}; {system or 'not sized'})", fontsize=10)
    fig.mainspan_vertical_exaggeration = vx
    return fig


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
    return save_figure(long_section(layout, **kw), out_path, overwrite=overwrite)


# ------------------------------------------------------------------ plan map
def hillshade(z, dx_m, dy_m, *, azimuth_deg=315.0, altitude_deg=45.0):
    """Hillshade in [0, 1] of a north-up grid ``z`` with cell sizes ``dx_m``, ``dy_m``."""
    z = np.asarray(z, float)
    fill = np.nanmean(z) if np.isfinite(z).any() else 0.0
    zf = np.where(np.isfinite(z), z, fill)
    dzdy, dzdx = np.gradient(zf, dy_m, dx_m)     # rows go south: d/dy(row) = -d/dnorth
    slope = np.arctan(np.hypot(dzdx, dzdy))
    # downslope direction as a math angle (east 0, north 90°); d/dnorth = -d/drow
    aspect = np.arctan2(dzdy, -dzdx)
    az = np.radians(90.0 - azimuth_deg)          # to math angle
    alt = np.radians(altitude_deg)
    # cos(zenith)·cos(slope) + sin(zenith)·sin(slope)·cos(light direction − aspect)
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
            ds = src
            vrt = None
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
        z = np.ma.filled(a.astype(float), np.nan)
        return z, (west, east, south, north)
    except Exception as exc:                  # the map is drawn without a background
        import warnings

        warnings.warn(f"background raster {path!r} not drawn: {exc}", stacklevel=3)
        return None


def _raster_paths(value):
    """Paths in a run_info raster entry: ``"a.tif"`` or ``"name=a.tif, other=b.tif"``."""
    out = []
    for part in str(value or "").split(","):
        part = part.strip()
        if "=" in part and not os.path.exists(part):
            part = part.split("=", 1)[1].strip()
        if part:
            out.append(part)
    return out


def plan_map(layout, *, background=None, figsize=None, title=None):
    """Plan view of the layout.

    Parameters
    ----------
    layout : mainspan.pipeline.layout.Layout
    background : {None, "terrain", "land_cost", "none"}, default None
        ``None`` uses the terrain (as a hillshade) when ``run_info["terrain"]``
        names a readable raster, else the land-cost raster, else nothing.
    figsize : (float, float), optional
        Inches; by default 9 wide and as tall as the layout's shape needs.
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    _plt()
    from matplotlib.collections import LineCollection
    from matplotlib.figure import Figure
    import matplotlib as mpl

    if background not in (None, "terrain", "land_cost", "none"):
        raise InputError(f"background={background!r}: expected None, 'terrain', 'land_cost' "
                         "or 'none'")
    xy = np.asarray(layout.node_xy, float)
    ends = np.asarray(layout.link_ends, np.int64).reshape(-1, 2)
    lk, nd = layout.links, layout.nodes
    if len(xy):
        lo, hi = xy.min(0), xy.max(0)
    else:
        lo, hi = np.zeros(2), np.ones(2)
    pad = 0.06 * max(float((hi - lo).max()), 10.0)
    bounds = (lo[0] - pad, lo[1] - pad, hi[0] + pad, hi[1] + pad)
    # size the axes to the layout's shape so the map fills its box (equal scales)
    ax_w = 6.3
    ax_h = float(np.clip(ax_w * (bounds[3] - bounds[1]) / (bounds[2] - bounds[0]), 2.5, 10.0))
    if figsize is None:
        figsize = (9.0, ax_h + 1.2)
    fig = Figure(figsize=figsize, dpi=100)
    ax = fig.add_axes([0.09, 0.75 / figsize[1], ax_w / figsize[0],
                       min(ax_h, figsize[1] - 1.1) / figsize[1]])
    bg_used = "none"
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
            dx = (ext[1] - ext[0]) / max(nx, 1)
            dy = (ext[3] - ext[2]) / max(ny, 1)
            ax.imshow(hillshade(z, dx, dy), cmap="gray", vmin=0, vmax=1, extent=ext,
                      origin="upper", interpolation="bilinear", alpha=0.55)
            ax.imshow(z, cmap="terrain", extent=ext, origin="upper", alpha=0.25,
                      interpolation="bilinear")
        else:
            im = ax.imshow(z, cmap="YlOrBr", extent=ext, origin="upper", alpha=0.6,
                           interpolation="nearest")
            fig.colorbar(im, ax=ax, fraction=0.035, pad=0.01, label="land cost")
        bg_used = kind
        break

    segs = xy[ends] if len(ends) else np.zeros((0, 2, 2))
    size = None
    for c in ("nominal_mm", "diameter_mm"):
        if c in lk:
            size = np.asarray(lk[c], float)
            break
    if size is not None and len(size) and np.isfinite(size).any():
        sizes = np.unique(size[np.isfinite(size)])
        blues = mpl.colormaps["Blues"]
        def cmap(t):                       # light-to-dark blue, never near-white
            return blues(0.6 + 0.4 * np.asarray(t, float))
        k = np.searchsorted(sizes, np.nan_to_num(size, nan=sizes[0]))
        colors = cmap(k / max(len(sizes) - 1, 1))
        widths = 1.2 + 3.0 * k / max(len(sizes) - 1, 1)
        ax.add_collection(LineCollection(segs, colors=colors, linewidths=widths, zorder=3))
        lab = "DN" if "nominal_mm" in lk else "ID "
        for j, s in enumerate(sizes):
            ax.plot([], [], color=cmap(j / max(len(sizes) - 1, 1)),
                    lw=1.2 + 3.0 * j / max(len(sizes) - 1, 1), label=f"{lab}{s:g} mm")
    else:
        ax.add_collection(LineCollection(segs, colors="#1f4e9a", linewidths=1.6, zorder=3))
        ax.plot([], [], color="#1f4e9a", lw=1.6, label="planned main")
    role = np.asarray(nd.get("role", np.full(len(xy), ""))).astype(str)
    root = np.isin(role, ["source", "outlet"])
    other = ~root
    ax.scatter(xy[other, 0], xy[other, 1], s=14, c="white", edgecolors="black", linewidths=0.7,
               zorder=4, label="site")
    if root.any():
        ax.scatter(xy[root, 0], xy[root, 1], s=110, marker="^", c="#e67e22", edgecolors="black",
                   zorder=5, label="source" if "source" in role else "outlet")
    fx, fy = [], []
    if "checks" in lk and len(ends):
        bad = ~np.isin(np.asarray(lk["checks"]).astype(str), ["ok", "", "nan", "None"])
        mid = segs[bad].mean(1)
        fx += list(mid[:, 0])
        fy += list(mid[:, 1])
    if "checks" in nd:
        bad = ~np.isin(np.asarray(nd["checks"]).astype(str), ["ok", "", "nan", "None"])
        fx += list(xy[bad, 0])
        fy += list(xy[bad, 1])
    if fx:
        ax.scatter(fx, fy, marker="x", s=90, c="red", linewidths=2.2, zorder=6,
                   label="failed check")
    n = len(xy)
    if n <= 60:
        ids = np.asarray(nd["node_id"]).astype(str)
        for i in range(n):
            ax.annotate(ids[i], xy[i], xytext=(4, 4), textcoords="offset points", fontsize=7,
                        zorder=7)
    ax.set_xlim(bounds[0], bounds[2])
    ax.set_ylim(bounds[1], bounds[3])
    ax.set_aspect("equal", adjustable="box")
    ax.ticklabel_format(useOffset=False, style="plain")
    ax.tick_params(labelsize=7)
    ax.set_xlabel("easting (m)", fontsize=8)
    ax.set_ylabel("northing (m)", fontsize=8)
    # scale bar: a 1/2/5 length near a fifth of the width, lower left
    w = bounds[2] - bounds[0]
    bar = _nice_floor(w / 5)
    x0b, y0b = bounds[0] + 0.04 * w, bounds[1] + 0.04 * (bounds[3] - bounds[1])
    ax.plot([x0b, x0b + bar], [y0b, y0b], color="black", lw=3, zorder=8)
    ax.annotate(f"{bar:g} m", (x0b + bar / 2, y0b), xytext=(0, 4), textcoords="offset points",
                ha="center", fontsize=8, zorder=8)
    ax.annotate("N", xy=(0.95, 0.95), xytext=(0.95, 0.86), xycoords="axes fraction",
                ha="center", va="center", fontsize=10, fontweight="bold",
                arrowprops={"arrowstyle": "-|>", "color": "black"})
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, frameon=False)
    crs = layout.run_info.get("working_crs") or (layout.crs.name if layout.crs is not None else "")
    ax.set_title(title or f"Layout plan ({crs}; grid north up)", fontsize=10)
    fig.mainspan_background = bg_used
    return fig
