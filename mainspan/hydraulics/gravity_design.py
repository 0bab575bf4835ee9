"""The gravity branch of :func:`mainspan.hydraulics.design.design_network`.

:func:`design_gravity` sizes the pipes, walks the inverts from the upstream
ends down to the outlet, places access points and runs the gravity checks.
The dispatcher in :mod:`mainspan.hydraulics.design` validates the inputs,
orients the tree and builds the ground profiles; this module fills in the
gravity link/node fields, the check flags and the failure lines, and hands
back what the common costing needs.  See the module notes of
:mod:`mainspan.hydraulics.design` for the conventions and the checks.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..network import FLOW_TO_FROM
from .catalog import default_gravity_catalog
from .gravity import depth_ratio_for_flow, full_pipe, min_slope, part_full_section, walk_inverts

__all__ = ["design_gravity"]


def _profile_at(off, station, value, length, link, chainage):
    """Linear interpolation of a per-link profile at (link, chainage) pairs, vectorised."""
    if link.size == 0:
        return np.zeros(0)
    shift = np.concatenate([[0.0], np.cumsum(length + 1.0)[:-1]])  # links laid end to end, 1 m apart
    plink = np.repeat(np.arange(off.size - 1), np.diff(off))
    flat = station + shift[plink]
    x = chainage + shift[link]
    hi = np.clip(np.searchsorted(flat, x, side="right"), off[link] + 1, off[link + 1] - 1)
    lo = hi - 1
    span = flat[hi] - flat[lo]
    t = np.where(span > 0, (x - flat[lo]) / np.where(span > 0, span, 1.0), 0.0)
    return value[lo] + t * (value[hi] - value[lo])


def _segment_mean(off, station, value):
    """Length-weighted mean of a piecewise-linear profile value per link (trapezoid rule)."""
    L = off.size - 1
    link = np.repeat(np.arange(L), np.diff(off))
    same = link[1:] == link[:-1]
    ds = np.where(same, np.diff(station), 0.0)
    area = ds * (value[1:] + value[:-1]) / 2.0
    tot = np.bincount(link[1:], weights=area, minlength=L)
    span = np.bincount(link[1:], weights=ds, minlength=L)
    return np.where(span > 0, tot / np.where(span > 0, span, 1.0), value[off[:-1]])


def design_gravity(s, net, xy, elev, plan, off, st, gr, q_lps, links, nodes, flags_l, flags_n, details, summary):
    """Design the gravity mains of an oriented tree.

    Parameters
    ----------
    s : DesignSettings
    net : RootedNetwork
        Rooted at the outlet(s); links oriented away from the root.
    xy : ndarray, shape (n, 2)
        Node coordinates, m.
    elev : ndarray, shape (n,)
        Ground level at the nodes, m.
    plan : ndarray, shape (L,)
        Plan length of each link, m.
    off, st, gr : ndarray
        Oriented per-link profile CSR: offsets, stations from ``from_node``
        (m) and ground level (m).
    q_lps : ndarray, shape (L,)
        Design flow per link, L/s.
    links, nodes, flags_l, flags_n, summary : dict
        Updated in place with the gravity fields, check flags and totals.
    details : list of (kind, index, check, text)
        Failure details, appended to.

    Returns
    -------
    cat_used : PipeCatalog
    pipe : ndarray of int, shape (L,)
        Index into ``cat_used`` per link.
    pipe_len : ndarray, shape (L,)
        Pipe length along the grade line, m.
    trench_depth : ndarray, shape (L,)
        Mean depth to the bottom of the bedding, m.
    access : dict of str to ndarray
        Access points: link, chainage_m (from from_node), x, y, ground_m, invert_m.
    """
    n = elev.shape[0]
    L = net.n_links
    full_cat = cat_used = s.gravity_catalog if s.gravity_catalog is not None else default_gravity_catalog()
    keep = np.flatnonzero(full_cat.nominal_mm >= s.gravity_min_diameter_mm)
    if keep.size == 0:
        raise InputError(
            f"gravity pipe catalog has no pipe of at least {s.gravity_min_diameter_mm:g} mm nominal; add larger pipes or lower 'gravity_min_diameter_mm'"
        )
    d_m = full_cat.inner_mm[keep] / 1000.0
    n_man = np.where(np.isnan(full_cat.manning_n[keep]), s.manning_n, full_cat.manning_n[keep])
    smin = min_slope(full_cat.nominal_mm[keep], full_cat.inner_mm[keep], n_man,
                     table_pct=s.gravity_min_slope_table_pct, min_velocity_mps=s.gravity_min_velocity_mps)
    plink = np.repeat(np.arange(L), np.diff(off))
    st_up = plan[plink] - st  # stations from the upstream (to_node) end
    q = q_lps / 1000.0
    sub, inv_up, inv_down, slope, no_pipe, inv_s = walk_inverts(
        net, elev, off, st_up, gr, q, d_m, n_man, smin, cover_m=s.gravity_cover_m,
        drop_m=s.junction_drop_m, access_spacing_m=s.access_spacing_m,
        return_station_inverts=True)
    pipe = keep[sub]
    d = d_m[sub]
    nn = n_man[sub]
    v_full, q_full = full_pipe(d, slope, nn)
    yd = depth_ratio_for_flow(q, d, slope, nn)
    area, _, _ = part_full_section(np.where(np.isnan(yd), 1.0, yd), d)
    with np.errstate(invalid="ignore", divide="ignore"):
        v_act = np.where(q > 0, q / np.where(area > 0, area, np.inf), 0.0)
    v_act = np.where(np.isnan(yd), q / (np.pi * d * d / 4.0), v_act)
    depth_s = gr - inv_s      # the grade may break at access points: use station inverts
    depth_max = np.maximum.reduceat(depth_s, off[:-1]) if L else np.zeros(0)
    cover_min = np.minimum.reduceat(depth_s - d[plink], off[:-1]) if L else np.zeros(0)
    node_inv = np.full(n, np.inf)
    np.minimum.at(node_inv, net.to_node, inv_up)
    np.minimum.at(node_inv, net.from_node, inv_down)
    node_inv[np.isinf(node_inv)] = np.nan
    tol = 1e-9
    flags_l["no_pipe"] = no_pipe
    flags_l["surcharged"] = q > q_full * (1 + 1e-9)
    flags_l["too_deep"] = depth_max > s.gravity_max_depth_m + tol
    flags_l["adverse_grade"] = (slope <= 0) | (slope < smin[sub] * (1 - 1e-9))
    flags_l["low_velocity"] = (q > 0) & (v_act < s.gravity_min_velocity_mps - tol)
    flags_l["low_cover"] = cover_min < s.gravity_cover_m - 1e-6
    flags_n["too_deep"] = (elev - node_inv) > s.gravity_max_depth_m + tol
    n_ap = np.where(plan > s.access_spacing_m, np.ceil(plan / s.access_spacing_m - 1e-12) - 1, 0).astype(np.int64)
    ap_link = np.repeat(np.arange(L), n_ap)
    ap_k = np.arange(ap_link.size) - np.repeat(np.cumsum(n_ap) - n_ap, n_ap) + 1
    ap_ch = plan[ap_link] * ap_k / (n_ap[ap_link] + 1)  # from from_node (downstream)
    ap_frac = ap_ch / plan[ap_link]
    p0, p1 = xy[net.from_node[ap_link]], xy[net.to_node[ap_link]]
    ap_ground = _profile_at(off, st, gr, plan, ap_link, ap_ch)
    access = {
        "link": ap_link,
        "chainage_m": ap_ch,
        "x": p0[:, 0] + (p1[:, 0] - p0[:, 0]) * ap_frac,
        "y": p0[:, 1] + (p1[:, 1] - p0[:, 1]) * ap_frac,
        "ground_m": ap_ground,
        "invert_m": _profile_at(off, st, inv_s, plan, ap_link, ap_ch),
    }
    links.update(
        flow_direction=np.full(L, FLOW_TO_FROM, dtype=object),
        manning_n=nn,
        invert_up_m=inv_up,
        invert_down_m=inv_down,
        slope_pct=slope * 100.0,
        min_slope_pct=smin[sub] * 100.0,
        depth_max_m=depth_max,
        cover_min_m=cover_min,
        capacity_lps=q_full * 1000.0,
        velocity_full_mps=v_full,
        velocity_mps=v_act,
        depth_ratio=yd,
        n_access_points=n_ap,
    )
    nodes.update(invert_m=node_inv, depth_m=elev - node_inv)
    pipe_len = np.hypot(plan, inv_up - inv_down)
    mean_depth = _segment_mean(off, st, depth_s) if L else np.zeros(0)
    trench_depth = mean_depth + s.bedding_m
    for k in np.flatnonzero(no_pipe):
        details.append(("link", k, "no_pipe", f"{q_lps[k]:.3g} L/s exceeds the full-pipe capacity {q_full[k] * 1000:.3g} L/s of the largest pipe; add larger pipes to the catalog"))
    for k in np.flatnonzero(flags_l["too_deep"]):
        details.append(("link", k, "too_deep", f"invert {depth_max[k]:.2f} m below ground (> {s.gravity_max_depth_m:g} m); a lift station or another route is needed"))
    for k in np.flatnonzero(flags_l["adverse_grade"]):
        details.append(("link", k, "adverse_grade", f"grade {slope[k] * 100:.3f} % below the minimum {smin[sub][k] * 100:.3f} %"))
    for k in np.flatnonzero(flags_l["low_velocity"]):
        details.append(("link", k, "low_velocity", f"{v_act[k]:.2f} m/s at design flow (< {s.gravity_min_velocity_mps:g} m/s); expect deposits, plan flushing"))
    for k in np.flatnonzero(flags_l["low_cover"]):
        details.append(("link", k, "low_cover", f"cover {cover_min[k]:.2f} m < {s.gravity_cover_m:g} m"))
    for v in np.flatnonzero(flags_n["too_deep"]):
        details.append(("node", v, "too_deep", f"invert {elev[v] - node_inv[v]:.2f} m below ground (> {s.gravity_max_depth_m:g} m)"))
    summary.update(
        outlet_invert_m=node_inv[net.roots].tolist(),
        outlet_depth_m=(elev[net.roots] - node_inv[net.roots]).tolist(),
        max_depth_m=float(np.nanmax(elev - node_inv)) if L else 0.0,
        n_access_points=int(n_ap.sum()),
    )
    return cat_used, pipe, pipe_len, trench_depth, access
