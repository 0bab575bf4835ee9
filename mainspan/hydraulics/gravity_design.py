"""The gravity branch of :func:`mainspan.hydraulics.design.design_network`.

:func:`design_gravity` sizes the pipes, walks the inverts from the upstream
ends down to the outlet (:func:`mainspan.hydraulics.gravity.walk_inverts`:
grade breaks where the ground needs them, lift stations where they pay),
places the access points and runs the gravity checks.  The dispatcher in
:mod:`mainspan.hydraulics.design` validates the inputs, orients the tree
and builds the ground profiles; this module fills in the gravity link/node
fields, the check flags and the failure lines, and hands back what the
common costing needs.  See the module notes of
:mod:`mainspan.hydraulics.design` for the conventions and the checks.

Structures
----------
* Every node with links except an outlet is a **manhole**, priced by its
  depth (ground to the lowest invert there) through
  ``PriceTable.manhole_cost``.
* A manhole where an incoming invert lies more than ``drop_manhole_m``
  (0.6 m) above the outgoing invert is a **drop manhole** (drop pipe
  required at 24 in / 0.6 m and more: Recommended Standards for
  Wastewater Facilities, 2014, manhole chapter -- clause number from
  memory), priced with the drop extra.  A drop is a priced structure, not
  a failure.
* Access points inside a link -- at grade breaks and wherever the spacing
  requires -- are manholes too, priced by depth.
* A **lift station** (at a node) pumps the incoming flow from the invert
  the outgoing main would have by gravity (the lowest incoming invert less
  the junction drop) back up to minimum cover, through a short rising main
  inside the station site, when the gravity link would otherwise be deeper
  than ``gravity_max_depth_m`` or when the station plus the present value
  of its energy costs less than the deeper trench
  (``PriceTable.pump_station_cost`` and ``PriceTable.energy_cost_pv`` at
  ``P = ρ g Q H / η``, H = static lift + ``lift_head_allowance_m``).  A
  lift station is a priced choice, listed in the summary, not a failure.
* A link still too deep after that (a valley or ridge inside it) gets a
  lift station inside it, at the candidate station where both gravity
  parts stay within the maximum depth for the least price (``kind`` "lift
  station" in ``access_points``, named by link and chainage).
* With ``outlet_invert_m`` set (e.g. the receiving water level), mains
  reaching an outlet below it are lifted there by a lift station, or
  flagged ``below_outlet`` when lift stations are off.

Structure rows go into the bill of quantities (manholes and drop manholes
counted by depth band, lift stations each, their energy as a present
value) and into the ``access_points`` table (``kind``: "grade break",
"spacing", "drop manhole", "lift station").
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from ..errors import InputError
from ..graph.network import FLOW_TO_FROM
from .catalog import default_gravity_catalog
from .gravity import depth_ratio_for_flow, full_pipe, min_slope, part_full_section, walk_inverts

__all__ = ["GravityDesign", "design_gravity", "MANHOLE_DEPTH_BANDS_M"]

#: Depth bands (m, upper ends) for counting manholes in the bill of quantities.
MANHOLE_DEPTH_BANDS_M = (1.5, 3.0, 4.5, 6.0, np.inf)


class GravityDesign(NamedTuple):
    """What the common costing in :func:`design_network` needs back."""

    cat_used: object            #: the full gravity catalog
    pipe: np.ndarray            #: (L,) index into ``cat_used``
    pipe_len: np.ndarray        #: (L,) pipe length along the grade line, m
    trench_depth: np.ndarray    #: (L,) mean depth to the trench bottom, m
    access: dict                #: access-point table
    trench_parts: dict          #: (L,) trench cost by part (excavation, shoring, bedding, reinstatement)
    items: list                 #: priced bill rows: (category, item, unit, quantity, unit_cost, size_mm)
    energy_cost_pv: float       #: present value of the lift stations' energy


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


def _segment_integral(off, station, value):
    """Integral of a piecewise-linear profile value along each link (trapezoid rule)."""
    L = off.size - 1
    link = np.repeat(np.arange(L), np.diff(off))
    same = link[1:] == link[:-1]
    ds = np.where(same, np.diff(station), 0.0)
    return np.bincount(link[1:], weights=ds * (value[1:] + value[:-1]) / 2.0, minlength=L)


def _price_table(s):
    get = getattr(s, "price_table", None)
    if callable(get):
        return get()
    from .prices import default_prices

    return s.prices if getattr(s, "prices", None) is not None else default_prices()


def outer_diameters_mm(cat):
    """Outside diameter of every catalog pipe, mm.

    The catalog's ``outer_mm`` where given; otherwise the larger of the
    nominal and inner sizes (the outside diameter for plastic pipe named by
    its outside, a lower bound for pipe named by its bore).
    """
    outer = getattr(cat, "outer_mm", None)
    guess = np.maximum(cat.nominal_mm, cat.inner_mm)
    if outer is None:
        return guess, np.ones(len(cat), bool)
    outer = np.asarray(outer, float)
    missing = np.isnan(outer)
    return np.where(missing, guess, outer), missing


def _band_label(lo, hi):
    return f"{lo:g}–{hi:g} m deep" if np.isfinite(hi) else f"over {lo:g} m deep"


def _count_by_band(category, depth_m, cost, size_mm=float("nan")):
    """Bill rows counting structures by depth band; unit cost = mean cost in the band."""
    rows = []
    edges = (0.0,) + MANHOLE_DEPTH_BANDS_M
    band = np.searchsorted(np.asarray(MANHOLE_DEPTH_BANDS_M), depth_m, side="left")
    for b in range(len(MANHOLE_DEPTH_BANDS_M)):
        m = band == b
        if m.any():
            rows.append((category, f"{category}, {_band_label(edges[b], edges[b + 1])}", "each",
                         float(m.sum()), float(cost[m].sum() / m.sum()), size_mm))
    return rows


def design_gravity(s, net, xy, elev, plan, off, st, gr, q_lps, links, nodes, flags_l, flags_n, details, summary,
                   ids=None) -> GravityDesign:
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
    ids : sequence of str, optional
        Node ids, for the structure names in the bill of quantities.

    Returns
    -------
    GravityDesign
    """
    n = elev.shape[0]
    L = net.n_links
    ids = np.arange(n).astype(str) if ids is None else np.asarray(ids).astype(str)
    prices = _price_table(s)
    full_cat = cat_used = s.gravity_catalog if s.gravity_catalog is not None else default_gravity_catalog()
    keep = np.flatnonzero(full_cat.nominal_mm >= s.gravity_min_diameter_mm)
    if keep.size == 0:
        raise InputError(
            f"gravity pipe catalog has no pipe of at least {s.gravity_min_diameter_mm:g} mm nominal; add larger pipes or lower 'gravity_min_diameter_mm'"
        )
    outer_all_mm, outer_guessed = outer_diameters_mm(full_cat)
    d_m = full_cat.inner_mm[keep] / 1000.0
    outer_m = outer_all_mm[keep] / 1000.0
    wall_m = (outer_m - d_m) / 2.0
    width_m = outer_m + 2.0 * s.trench_side_clearance_m
    n_man = np.where(np.isnan(full_cat.manning_n[keep]), s.manning_n, full_cat.manning_n[keep])
    smin = min_slope(full_cat.nominal_mm[keep], full_cat.inner_mm[keep], n_man,
                     table_pct=s.gravity_min_slope_table_pct, min_velocity_mps=s.gravity_min_velocity_mps)
    plink = np.repeat(np.arange(L), np.diff(off))
    st_up = plan[plink] - st  # stations from the upstream (to_node) end
    q = q_lps / 1000.0
    lifts_on = bool(s.lift_stations)
    kw1 = float(np.asarray(prices.pump_station_cost(1.0)))
    per_kw = float(np.asarray(prices.pump_station_cost(2.0))) - kw1
    energy_per_kw = float(np.asarray(prices.energy_cost_pv(1.0)))
    walk = walk_inverts(
        net, elev, off, st_up, gr, q, d_m, n_man, smin, cover_m=s.gravity_cover_m, drop_m=s.junction_drop_m,
        top_m=d_m + wall_m, trench_width_m=width_m,
        below_invert_m=wall_m + s.bedding_m, excavation_band_to_m=prices.excavation_depth_to_m,
        excavation_per_m3=prices.excavation_per_m3, shoring_per_m2=prices.shoring_per_m2,
        shoring_depth_m=prices.shoring_depth_m, manhole_base=float(np.asarray(prices.manhole_cost(0.0))),
        manhole_per_m=float(np.asarray(prices.manhole_cost(1.0))) - float(np.asarray(prices.manhole_cost(0.0))),
        lift_fixed=(kw1 - per_kw) if lifts_on else None, lift_per_kw=per_kw + energy_per_kw,
        lift_efficiency=s.lift_efficiency, lift_allowance_m=s.lift_head_allowance_m, max_depth_m=s.gravity_max_depth_m)
    sub, inv_up, inv_down, slope, no_pipe, inv_s = (walk.pipe, walk.invert_up_m, walk.invert_down_m, walk.slope,
                                                    walk.no_pipe, walk.station_invert_m)
    pipe = keep[sub]
    d = d_m[sub]
    top = d + wall_m[sub]
    nn = n_man[sub]
    v_full, q_full = full_pipe(d, slope, nn)
    yd = depth_ratio_for_flow(q, d, slope, nn)
    area, _, _ = part_full_section(np.where(np.isnan(yd), 1.0, yd), d)
    with np.errstate(invalid="ignore", divide="ignore"):
        v_act = np.where(q > 0, q / np.where(area > 0, area, np.inf), 0.0)
    v_act = np.where(np.isnan(yd), q / (np.pi * d * d / 4.0), v_act)
    depth_s = gr - inv_s      # the grade may break at access points: use station inverts
    depth_max = np.maximum.reduceat(depth_s, off[:-1]) if L else np.zeros(0)
    cover_min = np.minimum.reduceat(depth_s - top[plink], off[:-1]) if L else np.zeros(0)
    node_inv = np.full(n, np.inf)
    np.minimum.at(node_inv, net.to_node, inv_up)
    np.minimum.at(node_inv, net.from_node, inv_down)
    node_inv[np.isinf(node_inv)] = np.nan

    # ---- structures at nodes: drops, lift stations (walk), outlet invert
    lift_m, lift_head, lift_kw = walk.lift_m.copy(), walk.lift_head_m.copy(), walk.lift_kw.copy()
    out_link = net.parent_link                      # outgoing link of each node (-1 at outlets)
    has_out = out_link >= 0
    drop_in = np.where(has_out[net.from_node], inv_down - inv_up[np.maximum(out_link[net.from_node], 0)], 0.0)
    node_drop = np.zeros(n)
    np.maximum.at(node_drop, net.from_node, drop_in)
    node_drop[lift_kw > 0] = 0.0                   # the flow falls into a wet well
    is_root = np.zeros(n, bool)
    is_root[net.roots] = True
    below_outlet = np.zeros(n, bool)
    outlet_req = np.full(net.roots.size, np.nan)
    if s.outlet_invert_m is not None:
        req = np.atleast_1d(np.asarray(s.outlet_invert_m, np.float64))
        if req.size not in (1, net.roots.size):
            raise InputError(f"design option 'outlet_invert_m' has {req.size} values for {net.roots.size} outlets; "
                             "give one, or one per outlet")
        outlet_req = np.broadcast_to(req, (net.roots.size,)).astype(float)
        q_root = np.zeros(n)
        np.add.at(q_root, net.from_node, np.where(is_root[net.from_node], q, 0.0))
        for r, z in zip(net.roots, outlet_req):
            if np.isnan(node_inv[r]) or node_inv[r] >= z - 1e-9:
                continue
            if lifts_on and q_root[r] > 0:
                lift_m[r] = z - node_inv[r]
                lift_head[r] = lift_m[r] + s.lift_head_allowance_m
                lift_kw[r] = 9.81 * q_root[r] * lift_head[r] / s.lift_efficiency
            else:
                below_outlet[r] = True
    is_lift = lift_kw > 0
    is_drop = (node_drop > s.drop_manhole_m + 1e-9) & ~is_root & ~is_lift
    node_depth = elev - node_inv
    is_manhole = ~is_root & ~np.isnan(node_inv) & ~is_lift
    structure = np.where(is_root, "outlet", "manhole").astype(object)
    structure[is_drop] = "drop manhole"
    structure[is_lift] = "lift station"
    structure[np.isnan(node_inv)] = ""

    # ---- checks
    tol = 1e-9
    in_max_d = np.zeros(n)
    np.maximum.at(in_max_d, net.from_node, d)
    flags_l["no_pipe"] = no_pipe
    flags_l["surcharged"] = q > q_full * (1 + 1e-9)
    flags_l["too_deep"] = depth_max > s.gravity_max_depth_m + tol
    flags_l["adverse_grade"] = (slope <= 0) | (slope < smin[sub] * (1 - 1e-9))
    flags_l["low_velocity"] = (q > 0) & (v_act < s.gravity_min_velocity_mps - tol)
    flags_l["low_cover"] = cover_min < s.gravity_cover_m - 1e-6
    flags_l["smaller_downstream"] = d < in_max_d[net.to_node] - 1e-9
    flags_n["too_deep"] = (elev - node_inv) > s.gravity_max_depth_m + tol
    if s.outlet_invert_m is not None:
        flags_n["below_outlet"] = below_outlet

    # ---- access points inside links: grade breaks, then as the spacing requires
    nst = st.size
    is_end = np.zeros(nst, bool)
    if L:
        is_end[off[:-1]] = True
        is_end[off[1:] - 1] = True
    mark = np.flatnonzero(walk.station_break | is_end)
    a, b_ = mark[:-1], mark[1:]
    same = plink[a] == plink[b_]
    a, b_ = a[same], b_[same]
    seg_len = st[b_] - st[a]
    sp = s.access_spacing_m
    nint = np.maximum(np.ceil(seg_len / sp - 1e-9) - 1, 0).astype(np.int64) if seg_len.size else np.zeros(0, np.int64)
    seg = np.repeat(np.arange(a.size), nint)
    t = np.arange(seg.size) - np.repeat(np.cumsum(nint) - nint, nint) + 1
    sp_link = plink[a][seg]
    sp_ch = st[a][seg] + seg_len[seg] * t / (nint[seg] + 1)
    brk = np.flatnonzero(walk.station_break)
    mid = np.flatnonzero(walk.station_lift_kw > 0)       # lift stations inside links
    ap_link = np.concatenate([plink[brk], sp_link, plink[mid]]).astype(np.int64)
    ap_ch = np.concatenate([st[brk], sp_ch, st[mid]])
    ap_kind = np.concatenate([np.full(brk.size, "grade break", dtype=object), np.full(sp_link.size, "spacing", dtype=object),
                              np.full(mid.size, "lift station", dtype=object)])
    ap_lift = np.concatenate([np.zeros(brk.size + sp_link.size), walk.station_lift_m[mid]])
    ap_kw = np.concatenate([np.zeros(brk.size + sp_link.size), walk.station_lift_kw[mid]])
    order = np.lexsort((ap_ch, ap_link))
    ap_link, ap_ch, ap_kind, ap_lift, ap_kw = ap_link[order], ap_ch[order], ap_kind[order], ap_lift[order], ap_kw[order]
    n_ap = np.bincount(ap_link[ap_kind != "lift station"], minlength=L).astype(np.int64)
    n_breaks = np.bincount(plink[brk], minlength=L).astype(np.int64)
    safe = np.where(plan[ap_link] > 0, plan[ap_link], 1.0)
    ap_frac = ap_ch / safe
    p0, p1 = xy[net.from_node[ap_link]], xy[net.to_node[ap_link]]
    ap_ground = _profile_at(off, st, gr, plan, ap_link, ap_ch)
    ap_inv = _profile_at(off, st, inv_s, plan, ap_link, ap_ch)
    # node structures that are more than a plain manhole, as points too
    special = np.flatnonzero(is_drop | is_lift)
    first_in = np.full(n, -1, np.int64)
    np.maximum.at(first_in, net.from_node, np.arange(L))   # some incoming link (for outlets)
    sp_node_link = np.where(has_out[special], out_link[special], first_in[special])
    sp_node_ch = np.where(has_out[special], plan[np.maximum(out_link[special], 0)], 0.0)
    access = {
        "link": np.concatenate([ap_link, sp_node_link]).astype(np.int64),
        "chainage_m": np.concatenate([ap_ch, sp_node_ch]),
        "x": np.concatenate([p0[:, 0] + (p1[:, 0] - p0[:, 0]) * ap_frac, xy[special, 0]]),
        "y": np.concatenate([p0[:, 1] + (p1[:, 1] - p0[:, 1]) * ap_frac, xy[special, 1]]),
        "ground_m": np.concatenate([ap_ground, elev[special]]),
        "invert_m": np.concatenate([ap_inv, node_inv[special]]),
        "kind": np.concatenate([ap_kind, structure[special]]).astype(object),
        "node": np.concatenate([np.full(ap_link.size, "", dtype=object), ids[special].astype(object)]).astype(object),
        "depth_m": np.concatenate([ap_ground - ap_inv, node_depth[special]]),
        "drop_m": np.concatenate([np.zeros(ap_link.size), node_drop[special]]),
        "lift_m": np.concatenate([ap_lift, lift_m[special]]),
        "power_kw": np.concatenate([ap_kw, lift_kw[special]]),
    }

    # ---- failures
    for k in np.flatnonzero(no_pipe):
        details.append(("link", k, "no_pipe", f"{q_lps[k]:.3g} L/s needs more than the minimum grade of every catalog pipe at the depth the ground allows; the largest useful pipe is steepened to {slope[k] * 100:.3f} %: add larger pipes to the catalog"))
    for k in np.flatnonzero(flags_l["surcharged"]):
        details.append(("link", k, "surcharged", f"{q_lps[k]:.3g} L/s exceeds the full-pipe capacity {q_full[k] * 1000:.3g} L/s"))
    for k in np.flatnonzero(flags_l["too_deep"]):
        details.append(("link", k, "too_deep", f"invert {depth_max[k]:.2f} m below ground (> {s.gravity_max_depth_m:g} m); a lift station or another route is needed"))
    for k in np.flatnonzero(flags_l["adverse_grade"]):
        details.append(("link", k, "adverse_grade", f"grade {slope[k] * 100:.3f} % below the minimum {smin[sub][k] * 100:.3f} %"))
    for k in np.flatnonzero(flags_l["low_velocity"]):
        details.append(("link", k, "low_velocity", f"{v_act[k]:.2f} m/s at design flow (< {s.gravity_min_velocity_mps:g} m/s); expect deposits, plan flushing"))
    for k in np.flatnonzero(flags_l["low_cover"]):
        details.append(("link", k, "low_cover", f"cover {cover_min[k]:.2f} m < {s.gravity_cover_m:g} m"))
    for k in np.flatnonzero(flags_l["smaller_downstream"]):
        details.append(("link", k, "smaller_downstream", f"{d[k] * 1000:.0f} mm bore below a {in_max_d[net.to_node[k]] * 1000:.0f} mm pipe upstream; never reduce the size downstream"))
    for v in np.flatnonzero(flags_n["too_deep"]):
        details.append(("node", v, "too_deep", f"invert {elev[v] - node_inv[v]:.2f} m below ground (> {s.gravity_max_depth_m:g} m)"))
    for v in np.flatnonzero(below_outlet):
        z = outlet_req[np.flatnonzero(net.roots == v)[0]]
        details.append(("node", v, "below_outlet", f"mains arrive at invert {node_inv[v]:.2f} m, below the fixed outlet invert {z:.2f} m; allow lift stations (lift_stations=true) or lower the outlet"))

    # ---- trench (banded, along the profile) and structures in the bill
    pipe_len = np.hypot(plan, inv_up - inv_down)
    trench_s = depth_s + wall_m[sub][plink] + s.bedding_m            # ground to trench bottom at each station
    parts_s = prices.trench_parts(trench_s, width_m[sub][plink], np.ones(nst), bedding_m=s.bedding_m)
    trench_parts = {k: _segment_integral(off, st, np.asarray(v, float)) if L else np.zeros(0) for k, v in parts_s.items()}
    mean_depth = _segment_mean(off, st, depth_s) if L else np.zeros(0)
    trench_depth = mean_depth + wall_m[sub] + s.bedding_m
    items = []
    mh = is_manhole & ~is_drop
    items += _count_by_band("manhole", node_depth[mh], np.asarray(prices.manhole_cost(node_depth[mh]), float))
    items += _count_by_band("drop manhole", node_depth[is_drop],
                            np.asarray(prices.manhole_cost(node_depth[is_drop], drop=True), float))
    ap_depth = ap_ground - ap_inv
    in_link = ap_kind != "lift station"
    items += [(c, it.replace("manhole", "access point (manhole) in a link", 1), u, qn, uc, sz)
              for c, it, u, qn, uc, sz in _count_by_band("manhole", ap_depth[in_link],
                                                         np.asarray(prices.manhole_cost(ap_depth[in_link]), float))]
    lifts = []
    energy_pv = 0.0
    where = [(str(ids[v]), lift_m[v], lift_head[v], lift_kw[v]) for v in np.flatnonzero(is_lift)]
    where += [(f"link {k + 1} at {c:.0f} m from {ids[net.from_node[k]]}", lm, lm + s.lift_head_allowance_m, kw)
              for k, c, lm, kw in zip(ap_link[~in_link], ap_ch[~in_link], ap_lift[~in_link], ap_kw[~in_link])]
    for name, lm, head, kw in where:
        cost = float(np.asarray(prices.pump_station_cost(kw)))
        epv = float(np.asarray(prices.energy_cost_pv(kw)))
        energy_pv += epv
        items.append(("lift station", f"lift station at {name} ({kw:.2f} kW, {lm:.2f} m lift)", "each", 1.0,
                      cost, float("nan")))
        lifts.append({"node": name, "lift_m": float(lm), "head_m": float(head),
                      "flow_lps": float(kw * s.lift_efficiency / (9.81 * head) * 1000.0),
                      "power_kw": float(kw), "station_cost": cost, "energy_cost_pv": epv})
    if where:
        items.append(("energy (present value)", "lift station energy", "kW", float(sum(w[3] for w in where)),
                      energy_per_kw, float("nan")))

    links.update(
        flow_direction=np.full(L, FLOW_TO_FROM, dtype=object),
        manning_n=nn,
        outer_mm=outer_all_mm[pipe],
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
        n_grade_breaks=n_breaks,
    )
    nodes.update(invert_m=node_inv, depth_m=node_depth, structure=structure, drop_m=node_drop, lift_m=lift_m)
    summary.update(
        outlet_invert_m=node_inv[net.roots].tolist(),
        outlet_depth_m=(elev[net.roots] - node_inv[net.roots]).tolist(),
        max_depth_m=float(np.nanmax(elev - node_inv)) if L else 0.0,
        n_access_points=int(n_ap.sum()),
        n_grade_breaks=int(n_breaks.sum()),
        n_manholes=int(is_manhole.sum() + n_ap.sum()),
        n_drop_manholes=int(is_drop.sum()),
        n_lift_stations=len(lifts),
        lift_stations=lifts,
        lift_energy_cost_pv=energy_pv,
        n_pipes_outer_assumed=int(outer_guessed[keep].sum()),   # catalog rows without outer_mm
    )
    if s.outlet_invert_m is not None:
        summary["outlet_required_invert_m"] = outlet_req.tolist()
    return GravityDesign(cat_used, pipe, pipe_len, trench_depth, access, trench_parts, items, energy_pv)
