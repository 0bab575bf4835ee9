"""The engineering stage: one call that orients, sizes and checks a tree of mains.

:func:`design_network` takes the spanning tree as plain link arrays and
returns per-link and per-node fields, a bill of quantities, a summary and
one line per failed check.  See :class:`DesignSettings` for every option.

Conventions
-----------
* Links are oriented away from the root: ``from_node`` is the end nearer
  the root (the source of a pressure system, the outlet of a gravity
  system).  Links given the other way round are turned (``reversed`` field)
  and their ground profiles flipped.
* Pressure: flow runs from→to; ``hgl_from_m``/``hgl_to_m`` are at those ends.
* Gravity: flow runs to→from; ``invert_up_m`` is at ``to_node`` (upstream)
  and ``invert_down_m`` at ``from_node`` (downstream).
* Pipe length: the surface length for pressure mains (laid at constant
  cover); the true length along the grade line for gravity mains.
* Trench cost = ``trench_cost_per_m3`` × width × depth × length, with width
  = nominal size + 2 × ``trench_side_clearance_m`` and depth to the bottom
  of the bedding (pressure: cover + nominal size + bedding; gravity: mean
  depth to invert along the profile + bedding).  Common practice, no single
  source; prices are placeholders.

Checks
------
Pressure links: ``no_pipe`` (no catalog pipe meets the velocity cap and
head-loss budget; the largest is assigned), ``low_pressure`` (pressure head
below the minimum anywhere along the link's ground profile),
``over_rating`` (the *static* head -- source HGL minus ground, the no-flow
case, which is the highest pressure the pipe sees -- exceeds the pipe's
rating).  Pressure nodes: ``low_pressure``, ``over_rating`` (against the
lowest rating of the links at the node).

Gravity links: ``no_pipe`` (no catalog pipe carries the flow at its minimum
grade at the depth the ground allows: the pipe is steepened to carry it),
``surcharged`` (design flow above the assigned pipe's full capacity),
``too_deep`` (invert deeper than the maximum anywhere along the link: a
lift station or another route is needed), ``adverse_grade`` (grade below the
minimum for the diameter; the invert walk never produces it, the check
guards catalogs and settings), ``low_velocity`` (velocity at the design
flow's normal depth below the minimum -- the full-pipe minimum is already
enforced through the minimum grade; links without flow are not flagged),
``low_cover``, ``smaller_downstream`` (a pipe smaller than one arriving
upstream; the design never produces it, the check guards the rule).
Gravity nodes: ``too_deep``, ``below_outlet`` (mains reach an outlet below
``outlet_invert_m`` and lift stations are off).  Drop manholes and lift
stations are priced structures, not failures (see
:mod:`mainspan.hydraulics.gravity_design`).  A root without links has a NaN
invert.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from statistics import NormalDist

import numpy as np

from ..errors import InputError
from ..graph.network import accumulate, clement_flow_lps, design_flow_lps, rooted_network
from .basis import sanitary_flows, storm_flows
from .design_settings import CAUTION, SYSTEMS, DesignSettings
from .fittings import place_fittings
from .gravity_design import design_gravity
from .pressure_design import design_pressure
from .pump import pump_duty
from .quantities import Item, bill_of_quantities, pipe_rows

__all__ = ["CAUTION", "SYSTEMS", "DesignSettings", "DesignResult", "design_network"]


@dataclass
class DesignResult:
    """Output of :func:`design_network`.

    Attributes
    ----------
    system : str
        "pressure" or "gravity".
    link_fields : dict of str to ndarray (length L, in the input link order)
        Always: from_node, to_node (oriented), reversed, flow_lps,
        design_flow_lps, flow_direction, pipe, material, diameter_mm (inner),
        nominal_mm, velocity_mps, pipe_length_m, trench_depth_m, pipe_cost,
        trench_cost, land_cost, checks.  Pressure adds headloss_m
        (= friction_loss_m + minor_loss_m), hgl_from_m, hgl_to_m,
        pressure_min_m, rating_m, surge_head_m, and for a link split between
        two sizes pipe_2, diameter_2_mm, velocity_2_mps and length_2_m (the
        downstream length; "", NaN, NaN and 0 when not split -- pipe,
        diameter_mm, nominal_mm and velocity_mps then describe the upstream,
        larger pipe, rating_m is the lower rating, surge_head_m the larger
        surge and the costs cover both lengths).  Gravity adds
        manning_n, invert_up_m, invert_down_m, slope_pct, min_slope_pct,
        depth_max_m, cover_min_m, capacity_lps, velocity_full_mps,
        depth_ratio, n_access_points, n_grade_breaks, outer_mm.  With
        ``surface_share``: reinstatement_per_m2.
    node_fields : dict of str to ndarray (length n)
        Always: hops_to_root, checks.  Pressure: hgl_m, pressure_head_m,
        static_head_m, min_pressure_m.  Gravity: invert_m, depth_m, structure ("manhole",
        "drop manhole", "lift station", "outlet"), drop_m, lift_m.
    quantities : dict of str to ndarray
        Bill of quantities (:mod:`mainspan.hydraulics.quantities`): one row
        per catalog pipe used, then priced items (fittings, structures,
        pump station, energy present value), then a final "TOTAL" row:
        category, item, unit, quantity, unit_cost, pipe, material,
        nominal_mm, inner_mm, count, length_m, pipe_cost, trench_cost,
        land_cost, total_cost.
    access_points : dict of str to ndarray
        Gravity only (empty arrays otherwise): link, chainage_m (from the
        link's from_node), x, y, ground_m, invert_m; kind ("grade break",
        "spacing" inside links; "drop manhole", "lift station" at nodes),
        node, depth_m, drop_m, lift_m, power_kw.
    summary : dict
        Totals, source heads or outlet inverts, counts of failing checks by
        kind (``failing_checks``), ``notes`` and the ``caution`` text.
    failures : list of str
        One line per failed check naming the link or node.
    caution : str
        The caution text.
    fittings : dict of str to ndarray
        Pressure only (empty arrays otherwise), one row per fitting
        (:mod:`mainspan.hydraulics.fittings`): type, size_mm, x, y, link,
        chainage_m, node.
    """

    system: str
    link_fields: dict
    node_fields: dict
    quantities: dict
    access_points: dict
    summary: dict
    failures: list = field(default_factory=list)
    caution: str = CAUTION
    fittings: dict = field(default_factory=dict)


def _float_array(name, value, shape, *, allow_nan=False, min_value=None, strict=False):
    try:
        arr = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(f"design input '{name}' must be numeric; pass a float array") from None
    if arr.shape != shape:
        raise InputError(f"design input '{name}' must have shape {shape}, got {arr.shape}; pass one value per entry")
    bad = ~np.isfinite(arr)
    if allow_nan:
        bad &= ~np.isnan(arr)
    if min_value is not None:
        with np.errstate(invalid="ignore"):
            bad |= (arr <= min_value) if strict else (arr < min_value)
    idx = np.flatnonzero(bad)
    if idx.size:
        rule = "finite" if min_value is None else f"finite and {'>' if strict else '>='} {min_value}"
        raise InputError(f"design input '{name}' entry {idx[0]} is {arr[idx[0]]}; it must be {rule}")
    return arr


def _oriented_profiles(net, length_m, ground, profile_offsets, profile_station_m, profile_ground_m):
    """Per-link profile CSR, stations from the oriented from_node, node grounds at both ends, sorted."""
    L = net.n_links
    a, b = net.from_node, net.to_node
    if profile_offsets is None:
        off = np.arange(0, 2 * L + 1, 2, dtype=np.int64)
        st = np.empty(2 * L)
        st[0::2], st[1::2] = 0.0, length_m
        gr = np.empty(2 * L)
        gr[0::2], gr[1::2] = ground[a], ground[b]
        return off, st, gr
    off_in = np.asarray(profile_offsets, dtype=np.int64)
    if off_in.shape != (L + 1,) or off_in[0] != 0 or np.any(np.diff(off_in) < 0):
        raise InputError(
            f"design input 'profile_offsets' must be {L + 1} non-decreasing offsets starting at 0; pass the CSR offsets of the link profiles"
        )
    total = int(off_in[-1])
    st_in = _float_array("profile_station_m", profile_station_m, (total,), min_value=0.0)
    gr_in = _float_array("profile_ground_m", profile_ground_m, (total,))
    link = np.repeat(np.arange(L), np.diff(off_in))
    tol = 1e-6 * np.maximum(length_m, 1.0)
    over = np.flatnonzero(st_in > length_m[link] + tol[link])
    if over.size:
        k = link[over[0]]
        raise InputError(
            f"profile station {st_in[over[0]]} m of link {k} is beyond its plan length {length_m[k]} m; stations run from from_node along the link"
        )
    st_in = np.where(net.reversed[link], length_m[link] - st_in, st_in)
    inner = (st_in > tol[link]) & (st_in < length_m[link] - tol[link])
    link_i, st_i, gr_i = link[inner], st_in[inner], gr_in[inner]
    st_all = np.concatenate([np.zeros(L), length_m, st_i])
    gr_all = np.concatenate([ground[a], ground[b], gr_i])
    link_all = np.concatenate([np.arange(L), np.arange(L), link_i])
    srt = np.lexsort((st_all, link_all))
    off = np.zeros(L + 1, np.int64)
    np.cumsum(np.bincount(link_all, minlength=L), out=off[1:])
    return off, st_all[srt], gr_all[srt]


def design_network(
    system,
    *,
    xy,
    elevation_m,
    demand_lps,
    node_id,
    from_node,
    to_node,
    length_m,
    surface_length_m,
    roots,
    profile_offsets=None,
    profile_station_m=None,
    profile_ground_m=None,
    land_cost=None,
    settings: DesignSettings | None = None,
    area_ha=None,
    runoff_c=None,
    population=None,
    min_pressure_m=None,
    surface_share=None,
    existing_link=None,
) -> DesignResult:
    """Orient, size and check a tree of pressure or gravity mains.

    Parameters
    ----------
    system : {"pressure", "gravity"}
    xy : array_like, shape (n, 2)
        Node coordinates, m (used to place access points).
    elevation_m : array_like, shape (n,)
        Ground level at the nodes.  All NaN: pressure design assumes flat
        ground at 0 m (noted in the summary); gravity design refuses.
    demand_lps : array_like, shape (n,)
        Demand (pressure) or inflow (gravity) at each node, L/s, >= 0.
    node_id : sequence of str, length n
        User ids, for messages.
    from_node, to_node : array_like of int, shape (L,)
        Tree links (either direction; see module notes).
    length_m, surface_length_m : array_like, shape (L,)
        Plan and surface length of each link.
    roots : array_like of int
        Sources (pressure) or outlets (gravity), one per tree.
    profile_offsets, profile_station_m, profile_ground_m : array_like, optional
        Ground profile along each link in CSR form; stations measured from
        the given ``from_node``.  Without them the ground is taken as
        straight between the end nodes.  The node elevations always give
        the ground at both ends (stations at the very ends are replaced).
    land_cost : array_like, shape (L,), optional
        Land or easement cost per link, carried into the quantities.
    settings : DesignSettings, optional
    area_ha, runoff_c, population : array_like, shape (n,), optional
        Catchment area (ha), runoff coefficient and persons served at each
        node, for the gravity design basis (``storm`` needs the first two;
        ``sanitary`` adds the population's flow to ``demand_lps``).
    min_pressure_m : array_like, shape (n,), optional
        Pressure mains: each node's own minimum pressure head, m (NaN: the
        ``settings.min_pressure_m`` default).
    surface_share : tuple of (offsets, class_code, length_m), optional
        Surface classes each link crosses (CSR by link, in the given link
        order): reinstatement is priced by their length-weighted rate.
    existing_link : array_like of bool, shape (L,), optional
        Links that are existing pipes (:mod:`mainspan.pipeline.extend`): they carry flow and
        are sized (the size they would need) but cost nothing and have no bill row.

    Returns
    -------
    DesignResult

    Raises
    ------
    InputError
        On malformed inputs or settings, naming the field and entry.

    Examples
    --------
    >>> r = design_network("gravity", xy=[[0, 0], [100, 0], [200, 0]], elevation_m=[10.0, 10.5, 11.0],
    ...                    demand_lps=[0.0, 2.0, 3.0], node_id=["out", "a", "b"], from_node=[0, 1], to_node=[1, 2],
    ...                    length_m=[100.0, 100.0], surface_length_m=[100.0, 100.0], roots=[0])
    >>> r.link_fields["flow_lps"].tolist(), r.link_fields["invert_up_m"].round(2).tolist()
    ([5.0, 3.0], [9.36, 9.89])
    >>> r.link_fields["checks"].tolist()
    ['low_velocity', 'low_velocity']

    References
    ----------
    .. [1] Recommended Standards for Water Works, §8.2.1 (minimum pressure).
    .. [2] Recommended Standards for Wastewater Facilities, 2014 (gravity sewers).
    """
    s = DesignSettings() if settings is None else settings
    if not isinstance(s, DesignSettings):
        raise InputError(f"design option 'settings' must be a DesignSettings, got {type(s).__name__}; build one with DesignSettings(...)")
    if system not in SYSTEMS:
        raise InputError(f"design option 'system' is {system!r}; choose 'pressure' or 'gravity'")
    xy = np.asarray(xy, dtype=np.float64)
    if xy.ndim != 2 or xy.shape[1] != 2:
        raise InputError(f"design input 'xy' must have shape (n, 2), got {xy.shape}; pass node coordinates in metres")
    n = xy.shape[0]
    xy = _float_array("xy", xy, (n, 2))
    elev = _float_array("elevation_m", elevation_m, (n,), allow_nan=True)
    demand = _float_array("demand_lps", demand_lps, (n,), min_value=0.0)
    ids = np.asarray(node_id, dtype=object).astype(str)
    if ids.shape != (n,):
        raise InputError(f"design input 'node_id' must have {n} entries, got {ids.size}; pass one id per node")
    net = rooted_network(n, from_node, to_node, roots=roots)
    L = net.n_links
    plan = _float_array("length_m", length_m, (L,), min_value=0.0, strict=True)
    surf = _float_array("surface_length_m", surface_length_m, (L,), min_value=0.0, strict=True)
    land = np.zeros(L) if land_cost is None else _float_array("land_cost", land_cost, (L,), min_value=0.0)
    notes = []
    missing = np.isnan(elev)
    if missing.all():
        if system == "gravity":
            raise InputError("gravity design needs ground elevations: give --terrain or site Z")
        elev = np.zeros(n)
        notes.append("no ground elevations given: flat ground at 0 m assumed for pressures")
    elif missing.any():
        k = int(np.flatnonzero(missing)[0])
        raise InputError(f"node '{ids[k]}' has no ground elevation while others do; give its Z or a terrain raster covering it")
    off, st, gr = _oriented_profiles(net, plan, elev, profile_offsets, profile_station_m, profile_ground_m)
    accumulated = accumulate(net, demand)
    q_lps = design_flow_lps(accumulated, peaking_factor=s.peaking_factor, min_flow_lps=s.min_flow_lps)
    # --- pressure demand model (price11): flow leaving each source, for the pump duty ---
    src_flow = s.peaking_factor * np.bincount(net.root_of, weights=demand, minlength=n)[net.roots]
    if system == "pressure" and s.demand_model == "clement":
        r_op = (s.operating_probability if s.operating_probability is not None
                else s.hydrant_hours_per_day / s.network_hours_per_day)
        u_q = NormalDist().inv_cdf(s.quality_of_operation)
        clem, src_flow = clement_flow_lps(net, demand, r_op, quality_u=u_q)
        q_lps = design_flow_lps(clem, min_flow_lps=s.min_flow_lps)
        notes.append(f"on-demand flows by Clément's first formula: r = {r_op:.3g}, U = {u_q:.3f} "
                     f"({100 * s.quality_of_operation:g} % quality of operation)")
    elif system == "gravity" and s.demand_model == "clement":
        raise InputError("design option 'demand_model' 'clement' is for pressure mains; gravity flows follow 'gravity_basis'")
    # --- end of the pressure demand model ---
    basis = None
    if system == "gravity":   # --- the design basis (mainspan.hydraulics.basis) ---
        if s.gravity_basis == "storm":
            s = replace(s, gravity_min_velocity_mps=s.storm_min_velocity_mps)
            if s.idf is None:
                raise InputError("design option 'idf' is missing: gravity_basis 'storm' needs a rainfall "
                                 "intensity table; give [design.idf] duration_min and intensity_mm_per_h lists")

            def velocity_fn(q):    # full-pipe velocities of the network sized for flows q
                scratch = ({}, {}, {}, {}, [], {})
                design_gravity(s, net, xy, elev, plan, off, st, gr, q, *scratch)
                return scratch[0]["velocity_full_mps"]

            basis = storm_flows(net, area_ha=area_ha, runoff_c=runoff_c, length_m=plan, idf=s.idf,
                                inlet_time_min=s.storm_inlet_time_min, velocity_fn=velocity_fn,
                                min_flow_lps=s.min_flow_lps)
        else:
            basis = sanitary_flows(net, demand_lps=demand, population=population,
                                   per_capita_lpd=s.sanitary_per_capita_lpd, peaking=s.sanitary_peaking,
                                   peaking_factor=s.peaking_factor, min_flow_lps=s.min_flow_lps)
            accumulated = basis.average_flow_lps
        q_lps = basis.design_flow_lps
        notes.extend(basis.notes)
    # --- end of the design basis ---
    links = {
        "from_node": net.from_node,
        "to_node": net.to_node,
        "reversed": net.reversed,
        "flow_lps": accumulated,
        "design_flow_lps": q_lps,
    }
    nodes = {"hops_to_root": net.hops_to_root.copy()}
    if basis is not None:   # design-basis fields and totals
        if s.gravity_basis == "storm":
            links.update(ca_ha=basis.ca_ha, tc_min=basis.tc_min, intensity_mm_per_h=basis.intensity_mm_per_h)
        elif s.sanitary_peaking != "fixed":
            links["peaking_factor"] = basis.peaking
    flags_l: dict[str, np.ndarray] = {}
    flags_n: dict[str, np.ndarray] = {}
    details: list[tuple[str, int, str, str]] = []  # (kind, index, check, text)
    summary = {"system": system, "n_nodes": n, "n_links": L, "n_roots": int(net.roots.size)}
    if basis is not None:
        summary["gravity_basis"] = s.gravity_basis
        if s.gravity_basis == "storm":
            summary.update(storm_rounds=basis.iterations, storm_settled=basis.converged,
                           max_tc_min=float(np.nanmax(basis.tc_min)) if np.isfinite(basis.tc_min).any() else 0.0,
                           peak_outlet_flow_lps=float(q_lps[np.isin(net.from_node, net.roots)].sum()))
        else:
            summary["sanitary_peaking"] = s.sanitary_peaking
    access = {k: np.zeros(0) for k in ("chainage_m", "x", "y", "ground_m", "invert_m")}
    access["link"] = np.zeros(0, np.int64)

    pieces = None
    if system == "pressure":
        # --- pressure branch (size11): mainspan/hydraulics/pressure_design.py ---
        pmin = np.full(n, s.min_pressure_m) if min_pressure_m is None else _float_array(
            "min_pressure_m", min_pressure_m, (n,), allow_nan=True, min_value=0.0)
        pmin = np.where(np.isnan(pmin), s.min_pressure_m, pmin)
        cat_used, pieces, pipe = design_pressure(
            s, net, ids, elev, plan, surf, off, st, gr, q_lps, pmin, links, nodes, flags_l, flags_n, details, summary,
            lambda depth, width, length: _trench_cost(s, depth, width, length), src_flow)
        pipe_len = surf.copy()
        trench_depth = np.full(L, s.pressure_cover_m) + cat_used.nominal_mm[pipe] / 1000.0 + s.bedding_m
        # --- end pressure branch ---
    else:
        grav = design_gravity(s, net, xy, elev, plan, off, st, gr, q_lps, links, nodes, flags_l, flags_n, details,
                              summary, ids=ids)
        cat_used, pipe, pipe_len, trench_depth, access = grav[:5]

    trench_len = surf if system == "pressure" else plan
    prices = s.price_table()
    if pieces is None:  # one pipe per link
        pieces = {"link": np.arange(L), "pipe": pipe, "length_m": pipe_len, "trench_depth_m": trench_depth}
    # lengths of one pipe each (a split pressure link has two): priced piece by piece
    pl_, pp_ = pieces["link"], pieces["pipe"]
    share = pieces["length_m"] / np.where(pipe_len[pl_] > 0, pipe_len[pl_], 1.0)
    piece_width = cat_used.nominal_mm[pp_] / 1000.0 + 2.0 * s.trench_side_clearance_m
    reinstate = None
    if surface_share is not None:   # reinstatement by the land-use classes each link crosses (price11)
        sh_off, sh_cls, sh_len = surface_share
        if np.shape(sh_off) != (L + 1,):
            raise InputError(f"design input 'surface_share' must have {L + 1} offsets, one CSR row per link")
        reinstate = prices.mixed_reinstatement_rate(sh_off, sh_cls, sh_len)
        links["reinstatement_per_m2"] = reinstate
    if system == "gravity":      # priced by depth band station by station along the profile (gravity_design)
        piece_parts = dict(grav.trench_parts)   # one piece per gravity link
        if reinstate is not None:   # gravity_design priced the default class: rescale to the crossed classes
            base = dict(prices.reinstatement_per_m2)["default"]
            piece_parts["reinstatement"] = (piece_parts["reinstatement"] * reinstate / base if base > 0
                                            else reinstate * piece_width * trench_len)
    else:
        piece_parts = prices.trench_parts(pieces["trench_depth_m"], piece_width, trench_len[pl_] * share,
                                          bedding_m=s.bedding_m,
                                          reinstatement_per_m2=None if reinstate is None else reinstate[pl_])
    trench_parts = {k: np.bincount(pl_, weights=v, minlength=L) for k, v in piece_parts.items()}
    piece_trench = sum(piece_parts.values())
    piece_pipe = cat_used.cost_per_m[pp_] * pieces["length_m"]
    piece_land = land[pl_] * share
    # --- exist15: existing pipes are in the ground: no pipe, trench or land price, no bill row ---
    if existing_link is not None:
        new_piece = ~np.asarray(existing_link, bool)[pl_]
        piece_pipe, piece_trench, piece_land = (np.where(new_piece, v, 0.0)
                                                for v in (piece_pipe, piece_trench, piece_land))
        trench_parts = {k: np.bincount(pl_, weights=np.where(new_piece, v, 0.0), minlength=L)
                        for k, v in piece_parts.items()}
        land = np.where(np.asarray(existing_link, bool), 0.0, land)
    else:
        new_piece = np.ones(len(pl_), bool)
    # --- end exist15 ---
    trench_cost = np.bincount(pl_, weights=piece_trench, minlength=L)
    pipe_cost = np.bincount(pl_, weights=piece_pipe, minlength=L)
    links.update(
        pipe=cat_used.name[pipe],
        material=cat_used.material[pipe],
        diameter_mm=cat_used.inner_mm[pipe],
        nominal_mm=cat_used.nominal_mm[pipe],
        pipe_length_m=pipe_len,
        trench_depth_m=trench_depth,
        pipe_cost=pipe_cost,
        trench_cost=trench_cost,
        land_cost=land,
    )
    links["checks"] = _checks(L, flags_l)
    nodes["checks"] = _checks(n, flags_n)
    bill_items = []          # priced rows beyond the pipes: quantities.Item(category, item, unit, quantity, unit_cost)
    fittings = {k: np.zeros(0) for k in ("size_mm", "x", "y", "chainage_m")}
    fittings.update(type=np.zeros(0, object), link=np.zeros(0, np.int64), node=np.zeros(0, object))
    energy_pv = 0.0
    if system == "pressure":   # --- pump duty and fittings (price11) ---
        fittings, energy_pv = _pressure_extras(s, prices, net, xy, elev, plan, off, st, gr, links, summary,
                                               src_flow, ids, bill_items)
    # --- end of pump duty and fittings ---
    if system == "gravity":  # manholes, drop manholes, lift stations and their energy (gravity_design)
        bill_items += grav.items
        energy_pv = grav.energy_cost_pv
    nb = new_piece      # exist15: bill rows of new pipes only
    quantities = bill_of_quantities(pipe_rows(cat_used, pp_[nb], pieces["length_m"][nb], piece_pipe[nb],
                                              piece_trench[nb], piece_land[nb]),
                                    bill_items)
    failures = []
    for kind, i, check, text in sorted(details, key=lambda t: (t[0] != "link", t[1], t[2])):
        if kind == "link":
            # numbered like link_id: 1-based, in the order the links were given
            failures.append(f"link {i + 1} ({ids[net.from_node[i]]}–{ids[net.to_node[i]]}): "
                            f"{check}: {text}")
        else:
            failures.append(f"node '{ids[i]}': {check}: {text}")
    counts = {f"link:{k}": int(v.sum()) for k, v in flags_l.items()}
    counts.update({f"node:{k}": int(v.sum()) for k, v in flags_n.items()})
    summary.update(
        total_pipe_length_m=float(pipe_len.sum()),
        pipe_cost=float(pipe_cost.sum()),
        trench_cost=float(trench_cost.sum()),
        land_cost=float(land.sum()),
        trench_breakdown={k: float(v.sum()) for k, v in trench_parts.items()},
        total_cost=float(quantities["total_cost"][-1]) - energy_pv,
        energy_cost_pv=energy_pv,
        whole_life_cost=float(quantities["total_cost"][-1]),
        prices=prices.describe(),
        prices_placeholder=bool(prices.placeholder),
        failing_checks=counts,
        n_failures=len(failures),
        notes=notes,
        caution=CAUTION,
    )
    return DesignResult(system=system, link_fields=links, node_fields=nodes, quantities=quantities,
                        access_points=access, summary=summary, failures=failures, fittings=fittings)


def _trench_cost(s, depth_m, width_m, length_m):
    """Trench price of pipe lengths by the price table in force (the same rule as the bill of quantities)."""
    parts = s.price_table().trench_parts(depth_m, width_m, length_m, bedding_m=s.bedding_m)
    return sum(parts.values())


def _checks(size, flags):
    out = np.full(size, "", dtype=object)
    for name, mask in flags.items():
        m = np.asarray(mask, bool)
        out[m] = np.where(out[m] == "", name, out[m] + ";" + name)
    out[out == ""] = "ok"
    return out


def _pressure_extras(s, prices, net, xy, elev, plan, off, st, gr, links, summary, src_flow, ids, items):
    """Pump duty and fittings of a pressure design; appends their priced rows to *items*.

    Returns the fittings table and the present value of the pumping energy.
    """
    root_hgl = np.asarray(summary["source_hgl_m"], float)
    sump = elev[net.roots] if s.pump_sump_m is None else np.broadcast_to(
        np.asarray(s.pump_sump_m, float), net.roots.shape)
    if sump.shape != net.roots.shape:
        raise InputError(f"design option 'pump_sump_m' has {np.size(s.pump_sump_m)} values for {net.roots.size} sources; "
                         "give one, or one per source")
    duty = pump_duty(src_flow, root_hgl, sump, prices, efficiency=s.pump_efficiency)
    for j in np.flatnonzero(duty["shaft_kw"] > 0):
        # named by source: two stations of nearly equal power would otherwise merge into one row (size11)
        name = f"pump station {duty['shaft_kw'][j]:.1f} kW" + (f" at {ids[net.roots[j]]}" if net.roots.size > 1 else "")
        items.append(Item("pump station", name, "each", 1.0, float(duty["station_cost"][j])))
    annual = float(duty["annual_kwh"].sum())
    if annual > 0:
        items.append(Item("energy (present value)", f"pumping energy, {prices.years:g} years at "
                          f"{100 * prices.discount_rate:g} %", "kWh/a", annual, prices.energy_per_kwh * prices.pv_factor))
    one = net.roots.size == 1
    pump = {k: (float(v[0]) if one else v.tolist()) for k, v in duty.items()}
    pump["efficiency"] = s.pump_efficiency
    summary["pump"] = pump
    summary["pump_duty"] = "; ".join(
        f"{str(ids[r])}: {duty['flow_lps'][j]:.2f} L/s at {duty['head_m'][j]:.1f} m, {duty['hydraulic_kw'][j]:.1f} kW "
        f"hydraulic, {duty['shaft_kw'][j]:.1f} kW shaft (η {s.pump_efficiency:g}), {duty['annual_kwh'][j]:,.0f} kWh/a"
        for j, r in enumerate(net.roots))
    # pressure head along every profile, for the PRVs
    plink = np.repeat(np.arange(net.n_links), np.diff(off))
    frac = np.where(plan[plink] > 0, st / np.where(plan[plink] > 0, plan[plink], 1.0), 0.0)
    p_s = links["hgl_from_m"][plink] - links["headloss_m"][plink] * frac - gr
    p_max = np.maximum.reduceat(p_s, off[:-1]) if net.n_links else np.zeros(0)
    fit = place_fittings(net, xy, plan, off, st, gr, links["nominal_mm"], links["design_flow_lps"],
                         cover_m=s.pressure_cover_m, min_prominence_m=s.fitting_min_prominence_m,
                         bend_angle_deg=s.thrust_bend_angle_deg, max_service_pressure_m=s.max_service_pressure_m,
                         pressure_max_m=p_max, node_id=ids)
    kinds, sizes = fit["type"].astype(str), fit["size_mm"]
    for kind, size in sorted(set(zip(kinds.tolist(), sizes.tolist()))):
        cnt = int(np.sum((kinds == kind) & (sizes == size)))
        items.append(Item("fitting", f"{kind.replace('_', ' ')} {size:g} mm", "each", float(cnt),
                          float(prices.fitting_cost(kind, size)), float(size)))
    summary["fittings"] = {k: int(np.sum(kinds == k)) for k in ("air_valve", "washout", "isolation_valve",
                                                                 "thrust_block", "prv")}
    return fit, float(duty["energy_cost_pv"].sum())
