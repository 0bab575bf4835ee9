"""Long sections in the trade's usual form: the profile above, data bands below.

The profile shows the ground, the pipe (invert and crown of a gravity main, or
the pressure main at its laying depth with its hydraulic grade line), the
structures on the path (manholes and access points from invert to ground,
fittings on a pressure main) and the site ids.  Below it, one band per row:

========================  =========================================================
chainage (m)              plan distance from the root along the tree, at each node
ground level (m)          at each node
invert level (m)          gravity: pipe invert at the node (outgoing pipe); pressure:
  or grade level (m)      the hydraulic grade line at the node
depth (m)                 gravity: ground − invert at the node; pressure: trench
                          depth of each link
grade                     gravity: pipe slope in %; pressure: head loss per km (m/km)
size                      pipe size of each link
length (m)                plan length of each link
========================  =========================================================

:func:`section_data` returns the numbers drawn; the DXF writer
(:mod:`mainspan.writers.section_dxf`) draws the same numbers.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError

__all__ = ["section_data", "long_section", "fit_exaggeration", "band_rows", "BAND_NAMES",
           "nice_floor"]

#: Band rows from top to bottom.
BAND_NAMES = ("chainage (m)", "ground level (m)", "level (m)", "depth (m)", "grade", "size",
              "length (m)")
_PROFILE_BOX = (0.10, 0.47, 0.72, 0.44)     # left, bottom, width, height (figure fraction)
_BAND_BOX = (0.10, 0.03, 0.72, 0.40)


def nice_floor(v):
    """Largest 1, 2 or 5 × 10^k not above ``v`` (1.0 for nonsense)."""
    if not np.isfinite(v) or v <= 0:
        return 1.0
    e = math.floor(math.log10(v))
    cands = np.array([1, 2, 5]) * 10.0 ** e
    ok = cands[cands <= v * (1 + 1e-9)]
    return float(ok.max()) if ok.size else float(10.0 ** (e - 1) * 5)


def _parent_arrays(layout):
    ends = np.asarray(layout.link_ends, np.int64).reshape(-1, 2)
    parent = np.full(layout.n_nodes, -1, np.int64)
    parent[ends[:, 1]] = ends[:, 0]
    plink = np.full(layout.n_nodes, -1, np.int64)
    plink[ends[:, 1]] = np.arange(len(ends))
    return parent, plink


def _bedding_m(layout):
    """Bedding below the pipe from the recorded design settings (0.1 m when not recorded)."""
    s = str(layout.run_info.get("design_settings", ""))
    for part in s.split(","):
        k, _, v = part.strip().partition("=")
        if k == "bedding_m":
            try:
                return float(v)
            except ValueError:
                break
    return 0.1


def section_data(layout, path):
    """The numbers of one long section along ``path`` (node indices down the tree).

    Returns
    -------
    dict
        ``path``, ``links`` (link rows), ``node_ch`` (chainage at each node),
        ``length``, ``ground_x``/``ground_z`` (profile), ``node_ground``,
        ``system`` ("gravity", "pressure" or ""), ``pipe_x``/``pipe_z`` (pipe
        invert line, NaN-separated per link), ``crown_z`` (same stations),
        ``grade_line`` ((L, 2) hydraulic grade at the link ends, or None),
        ``node_level`` (invert or grade level at each node), ``depth_node``
        (gravity) or ``depth_link`` (pressure), ``grade`` (per link),
        ``grade_unit``, ``size`` (labels), ``structures`` (list of
        (chainage, bottom, top, label)), ``fittings`` (list of (chainage, z,
        kind)).
    """
    from .tree import distance_to_root
    from ..writers.tables import link_inverts

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
    lk, nd = layout.links, layout.nodes
    links = plink[path[1:]]
    length = np.asarray(lk["length_m"], float)[links]
    ch0 = float(distance_to_root(layout)[path[0]])
    node_ch = ch0 + np.r_[0.0, np.cumsum(length)]
    zc = layout.link_coordinates("ground")[links, :, 2]
    elev = np.asarray(nd.get("elevation_m", np.full(layout.n_nodes, np.nan)), float)
    gx, gz, per_link = [], [], []
    prof = layout.profiles
    for j, li in enumerate(links):
        if prof is not None and int(prof.offsets[li + 1]) - int(prof.offsets[li]) >= 2:
            st, g = (np.asarray(a, float) for a in prof.of(li))
        else:
            z0 = zc[j, 0] if np.isfinite(zc[j, 0]) else elev[path[j]]
            z1 = zc[j, 1] if np.isfinite(zc[j, 1]) else elev[path[j + 1]]
            st, g = np.array([0.0, length[j]]), np.array([z0, z1], float)
        gx.append(node_ch[j] + st)
        gz.append(g)
        per_link.append((st, g))
    node_ground = elev[path].copy()
    miss = ~np.isfinite(node_ground)
    if miss.any():
        ends_z = np.r_[gz[0][0], [g[-1] for g in gz]]
        node_ground[miss] = ends_z[miss]
    system = (layout.run_info.get("system") or "").lower()
    out = {"path": path, "links": links, "node_ch": node_ch, "length": length,
           "ground_x": np.concatenate(gx), "ground_z": np.concatenate(gz),
           "node_ground": node_ground, "system": system, "grade_line": None,
           "pipe_x": None, "pipe_z": None, "crown_z": None, "node_level": None,
           "depth_node": None, "depth_link": None, "grade": None, "grade_unit": "",
           "structures": [], "fittings": []}
    dia = (np.asarray(lk["diameter_mm"], float)[links] / 1000.0 if "diameter_mm" in lk
           else np.zeros(len(links)))
    if "nominal_mm" in lk:
        out["size"] = [f"DN{float(v):g}" for v in np.asarray(lk["nominal_mm"], float)[links]]
    elif "diameter_mm" in lk:
        out["size"] = [f"ID{float(v):g}" for v in np.asarray(lk["diameter_mm"], float)[links]]
    else:
        out["size"] = [""] * len(links)
    inv_all = link_inverts(layout)
    ap = layout.tables.get("access_points") or {}
    if inv_all is not None:
        inv = inv_all[links]
        ap_link = np.asarray(ap.get("link_id", []), np.int64)
        ap_ch = np.asarray(ap.get("chainage_m", []), float)
        ap_inv = np.asarray(ap.get("invert_m", []), float)
        ap_gnd = np.asarray(ap.get("ground_m", []), float)
        lid = (np.asarray(lk["link_id"], np.int64)[links] if "link_id" in lk
               else links + 1)
        px, pz, cz = [], [], []
        for j in range(len(links)):
            hit = np.flatnonzero(ap_link == lid[j]) if ap_link.size else np.zeros(0, np.int64)
            hit = hit[np.argsort(ap_ch[hit], kind="stable")]
            # the grade may break at access points inside a link: draw through them
            xs = np.r_[node_ch[j], node_ch[j] + ap_ch[hit], node_ch[j + 1]]
            zs = np.r_[inv[j, 0], ap_inv[hit], inv[j, 1]]
            px += [xs, [np.nan]]
            pz += [zs, [np.nan]]
            cz += [zs + dia[j], [np.nan]]
            for h in hit:
                if 0 < ap_ch[h] < length[j]:
                    out["structures"].append((node_ch[j] + ap_ch[h], ap_inv[h], ap_gnd[h],
                                              "access point"))
        out["pipe_x"], out["pipe_z"] = np.concatenate(px), np.concatenate(pz)
        out["crown_z"] = np.concatenate(cz)
        level = np.r_[inv[0, 0], inv[:, 1]]       # outgoing (downstream) pipe at each node
        out["node_level"] = level
        out["depth_node"] = node_ground - level
        out["grade"] = (np.asarray(lk["slope_pct"], float)[links] if "slope_pct" in lk else
                        100.0 * (inv[:, 1] - inv[:, 0]) / np.maximum(length, 1e-9))
        out["grade_unit"] = "%"
        struct = np.asarray(nd.get("structure", np.full(layout.n_nodes, "manhole"))).astype(str)
        for j, node in enumerate(path):
            out["structures"].append((node_ch[j], level[j], node_ground[j], struct[node]))
    elif "hgl_from_m" in lk:
        hgl = np.column_stack([np.asarray(lk["hgl_from_m"], float)[links],
                               np.asarray(lk["hgl_to_m"], float)[links]])
        out["grade_line"] = hgl
        out["node_level"] = np.r_[hgl[0, 0], hgl[:, 1]]
        if "trench_depth_m" in lk:
            depth = np.asarray(lk["trench_depth_m"], float)[links]
            bed = _bedding_m(layout)
            px, pz, cz = [], [], []
            for j, (st, g) in enumerate(per_link):
                inv_line = g - depth[j] + bed
                px += [node_ch[j] + st, [np.nan]]
                pz += [inv_line, [np.nan]]
                cz += [inv_line + dia[j], [np.nan]]
            out["pipe_x"], out["pipe_z"] = np.concatenate(px), np.concatenate(pz)
            out["crown_z"] = np.concatenate(cz)
            out["depth_link"] = depth
        if "headloss_m" in lk:
            out["grade"] = 1000.0 * np.asarray(lk["headloss_m"], float)[links] / np.maximum(
                length, 1e-9)
            out["grade_unit"] = "m/km"
        fit = layout.tables.get("fittings") or {}
        if "link_id" in fit and "link_id" in lk:
            lid = np.asarray(lk["link_id"], np.int64)[links]
            f_link = np.asarray(fit["link_id"], float)
            f_ch = np.asarray(fit.get("chainage_m", np.zeros(len(f_link))), float)
            f_kind = np.asarray(fit["type"]).astype(str)
            for j in range(len(links)):
                for h in np.flatnonzero(f_link == lid[j]):
                    c = float(np.clip(np.nan_to_num(f_ch[h]), 0, length[j]))
                    st, g = per_link[j]
                    z = float(np.interp(c, st, g)) - (out["depth_link"][j] - _bedding_m(layout)
                                                      if out["depth_link"] is not None else 0)
                    out["fittings"].append((node_ch[j] + c, z, f_kind[h]))
    return out


def band_rows(d):
    """The data bands as rows of ``(name, kind, values)``; kind ``node`` or ``link``."""
    f2 = lambda v: "" if not np.isfinite(v) else f"{v:.2f}"           # noqa: E731
    rows = [("chainage (m)", "node", [f"{v:.1f}" for v in d["node_ch"]]),
            ("ground level (m)", "node", [f2(v) for v in d["node_ground"]])]
    if d["node_level"] is not None:
        name = "invert level (m)" if d["system"] == "gravity" or d["grade_line"] is None \
            else "grade level (m)"
        rows.append((name, "node", [f2(v) for v in d["node_level"]]))
    if d["depth_node"] is not None:
        rows.append(("depth to invert (m)", "node", [f2(v) for v in d["depth_node"]]))
    elif d["depth_link"] is not None:
        rows.append(("trench depth (m)", "link", [f2(v) for v in d["depth_link"]]))
    if d["grade"] is not None:
        fmt = "{:.2f}" if d["grade_unit"] == "%" else "{:.1f}"
        label = "grade (%)" if d["grade_unit"] == "%" else "head loss (m/km)"
        rows.append((label, "link", [fmt.format(v) if np.isfinite(v) else ""
                                     for v in d["grade"]]))
    if any(d["size"]):
        rows.append(("size", "link", list(d["size"])))
    rows.append(("length (m)", "link", [f"{v:.1f}" for v in d["length"]]))
    return rows


def _ylimits(d):
    ys = [d["ground_z"]]
    for k in ("pipe_z", "crown_z"):
        if d[k] is not None:
            ys.append(d[k])
    if d["grade_line"] is not None:
        ys.append(d["grade_line"].ravel())
    y = np.concatenate([np.asarray(v, float).ravel() for v in ys])
    y = y[np.isfinite(y)]
    return (float(y.min()), float(y.max())) if y.size else (0.0, 1.0)


def fit_exaggeration(d, figsize=(11.0, 7.0)):
    """Largest 1/2/5 vertical exaggeration at which section ``d`` fits its profile box."""
    ch = d["node_ch"]
    xspan = max(float(ch[-1] - ch[0]) * 1.04, 1.0)
    ymin, ymax = _ylimits(d)
    yspan = max(ymax - ymin, 0.5) * 1.35
    box_ratio = (_PROFILE_BOX[3] * figsize[1]) / (_PROFILE_BOX[2] * figsize[0])
    return nice_floor(xspan * box_ratio / yspan)


def _plt():
    from .tree import _plt as p

    return p()


def long_section(layout, *, path=None, to_node=None, longest=True, figsize=(11.0, 7.0),
                 title=None, vertical_exaggeration=None):
    """Long section along one path of the layout, with data bands below.

    Parameters
    ----------
    layout : mainspan.pipeline.layout.Layout
    path : sequence of int, optional
        Node indices down the tree (each the child of the one before).
    to_node : str, optional
        Node id: the section runs from its root down to it.
    longest : bool, default True
        With neither ``path`` nor ``to_node``, draw the longest root→node path.
    figsize : (float, float), default (11, 7)
        Inches.
    title : str, optional
    vertical_exaggeration : float, optional
        Use this exaggeration (a report passes one for all its sections);
        default the largest 1/2/5 step at which this section fits.

    Returns
    -------
    matplotlib.figure.Figure
        ``fig.axes[0]`` the profile, ``fig.axes[1]`` the bands;
        ``fig.mainspan_vertical_exaggeration`` the ratio of display scales.
    """
    _plt()
    from matplotlib.figure import Figure

    from .tree import longest_paths

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
    d = section_data(layout, path)
    ids = np.asarray(layout.nodes["node_id"]).astype(str)
    ch = d["node_ch"]
    fig = Figure(figsize=figsize, dpi=100)
    ax = fig.add_axes(list(_PROFILE_BOX))
    ax.plot(d["ground_x"], d["ground_z"], color="#7a5a2e", lw=1.4, label="ground")
    if d["pipe_z"] is not None:
        lbl = "invert" if d["system"] == "gravity" or d["grade_line"] is None else "pipe invert"
        ax.plot(d["pipe_x"], d["pipe_z"], color="#17457a", lw=1.5, label=lbl)
        ax.plot(d["pipe_x"], d["crown_z"], color="#17457a", lw=0.8, ls="--",
                label="crown" if lbl == "invert" else "pipe crown")
    from matplotlib.collections import LineCollection

    if d["grade_line"] is not None:
        gl = d["grade_line"]
        # one polyline broken between links (the grade steps at pumps and valves)
        gx = np.column_stack([ch[:-1], ch[1:], np.full(len(gl), np.nan)]).ravel()
        gz = np.column_stack([gl, np.full(len(gl), np.nan)]).ravel()
        ax.plot(gx, gz, color="#b3262d", lw=1.4, label="hydraulic grade line")
    for key, colour, lw, lab in (("structure", "#404040", 3.2, "structure at node"),
                                 ("access point", "#8a8a8a", 2.0, "access point in link")):
        segs = [((c, lo), (c, hi)) for c, lo, hi, kind in d["structures"]
                if (kind == "access point") == (key == "access point")
                and np.isfinite(lo) and np.isfinite(hi)]
        if segs:
            ax.add_collection(LineCollection(segs, colors=colour, linewidths=lw, zorder=4,
                                             capstyle="butt", label=lab))
    if d["fittings"]:
        from .planmap import _FEATURE_STYLE

        for kind in sorted({k for _, _, k in d["fittings"]}):
            pts = np.array([(c, z) for c, z, k in d["fittings"] if k == kind])
            mk, face, edge, label = _FEATURE_STYLE.get(kind, _FEATURE_STYLE[None])
            ax.scatter(pts[:, 0], pts[:, 1], marker=mk, s=26, c=face, edgecolors=edge,
                       linewidths=0.6, zorder=5, label=label)
    xspan = max(float(ch[-1] - ch[0]) * 1.04, 1.0)
    x0 = float(ch[0]) - 0.02 * xspan / 1.04
    ymin, ymax = _ylimits(d)
    vx = float(vertical_exaggeration) if vertical_exaggeration else fit_exaggeration(d, figsize)
    box_ratio = (_PROFILE_BOX[3] * figsize[1]) / (_PROFILE_BOX[2] * figsize[0])
    # at a given exaggeration a short, steep section may not fit: widen the chainage
    # range instead of changing the exaggeration (the section then fills part of the width)
    xspan = max(xspan, max(ymax - ymin, 0.5) * 1.35 * vx / box_ratio)
    yspan = xspan * box_ratio / vx
    yc = (ymin + ymax) / 2 + 0.08 * yspan
    ax.set_xlim(x0, x0 + xspan)
    ax.set_ylim(yc - yspan / 2, yc + yspan / 2)
    npath = len(d["path"])
    every = max(1, int(math.ceil(npath / 30)))
    top = yc + yspan / 2
    ax.add_collection(LineCollection([((c, -1e9), (c, 1e9)) for c in ch], colors="#9a9a9a",
                                     linewidths=0.5, linestyles=":"))
    for j, node in enumerate(d["path"]):
        if j % every and j != npath - 1:
            continue
        ax.annotate(ids[node], (ch[j], top), xytext=(0, -3), textcoords="offset points",
                    ha="center", va="top", fontsize=7, rotation=90 if npath > 10 else 0)
    ax.set_ylabel("level (m)", fontsize=8)
    ax.tick_params(labelsize=7, labelbottom=False)
    ax.grid(True, lw=0.3, color="#dddddd")
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=7.5, frameon=False)
    t = title or f"Long section {ids[d['path'][0]]} → {ids[d['path'][-1]]}"
    ax.set_title(f"{t}  (vertical exaggeration ×{vx:g}; {d['system'] or 'not sized'})",
                 fontsize=9.5)
    _draw_bands(fig, d, (x0, x0 + xspan), every)
    fig.mainspan_vertical_exaggeration = vx
    fig.mainspan_section = d
    return fig


def _draw_bands(fig, d, xlim, every):
    from matplotlib.collections import LineCollection

    rows = band_rows(d)
    bx = fig.add_axes(list(_BAND_BOX))
    bx.set_xlim(*xlim)
    nr = len(rows)
    bx.set_ylim(0, nr)
    bx.invert_yaxis()
    bx.set_yticks([])
    bx.tick_params(labelsize=7)
    bx.set_xlabel("chainage (m)", fontsize=8)
    for s in bx.spines.values():
        s.set_linewidth(0.8)
    ch = d["node_ch"]
    npath = len(ch)
    for r, (name, kind, vals) in enumerate(rows):
        bx.axhline(r, color="#555555", lw=0.6)
        bx.text(-0.01, r + 0.5, name, transform=bx.get_yaxis_transform(), ha="right",
                va="center", fontsize=7)
        if kind == "node":
            for j, v in enumerate(vals):
                if j % every and j != npath - 1:
                    continue
                bx.text(ch[j], r + 0.5, v, ha="center", va="center", fontsize=6,
                        rotation=90, clip_on=True)
        else:
            span = xlim[1] - xlim[0]
            for j, v in enumerate(vals):
                if ch[j + 1] - ch[j] < 0.035 * span and len(vals) > 1:
                    continue            # too short to carry a number; the CSV has it
                bx.text((ch[j] + ch[j + 1]) / 2, r + 0.5, v, ha="center", va="center",
                        fontsize=6, clip_on=True)
            bx.add_collection(LineCollection([((c, r), (c, r + 1)) for c in ch[1:]],
                                             colors="#999999", linewidths=0.4))
    bx.add_collection(LineCollection([((ch[j], 0), (ch[j], 0.25))
                                      for j in range(0, npath, every)],
                                     colors="#555555", linewidths=0.5))
