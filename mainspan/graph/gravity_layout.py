"""Depth-aware layout of gravity mains: the arborescence that follows the valleys.

A gravity main that runs uphill towards its outlet must be dug in deeper,
and every metre of extra depth costs more than the one above it: deeper
excavation bands, shoring below 1.5 m, deeper manholes -- and the depth is
carried on down to the outlet.  :func:`depth_arc_costs` prices both flow
directions of every candidate link with the trench the pipe would need;
:func:`depth_aware_tree` grows the minimum arborescence towards the outlet
on those prices, designs it, and re-prices with the depths and flows the
design found, until the tree repeats.

Arc price (flow from the upstream end ``u`` to the downstream end)
------------------------------------------------------------------
* the pipe leaves ``u`` with its invert at the larger of minimum cover
  (cover + outside diameter) and the depth the previous design found at
  ``u`` (the depth carried in from upstream);
* it falls at the flattest grade that keeps minimum cover over the ground
  profile and is at least the pipe's minimum grade (as the design stage's
  single-grade walk does; grade breaks can only make it shallower);
* the pipe is the smallest catalog size whose full-pipe capacity at that
  grade carries the flow leaving ``u`` in the previous design (the flow
  of ``u``'s catchment does not depend on which way ``u`` drains);
* price = the link's direction-free cost (land, length) + pipe supply
  (catalog price per metre) + trench by depth along the profile
  (``trench_cost`` of the price table: excavation by depth band and
  shoring below 1.5 m; width = nominal size + 2 × side clearance; depth to
  the bottom of the bedding) + the manhole at ``u`` and the access points
  the spacing requires, priced by their depth (``manhole_cost``);
* where the design may use lift stations (``lift_stations``), the arc
  takes the cheaper of gravity from the depth the flow arrives at and a
  lift station at ``u`` back to minimum cover (station + energy present
  value for ``ρ g Q H / η``, H = lift + ``lift_head_allowance_m``);
* plus the depth the arc hands on downstream (:class:`CarriedDepth`).

Rounds
------
Round 0 is the earlier layout (:func:`~mainspan.graph.arborescence.profile_directional_costs`:
extra depth below minimum cover at one placeholder price).  Each later
round prices the arcs from the previous round's design (node depths,
flows), grows the arborescence and designs it.  It stops when a tree
repeats (settled when it repeats the last one) or after ``max_rounds``;
the tree whose design costs least (``whole_life_cost`` when the design
reports it, else ``total_cost``; ties to the earlier round) is kept, so the
result is never dearer than round 0 under the design's own pricing.  Same
input, same rounds, same tree.

Prices come from the design's price table (:mod:`mainspan.hydraulics.prices`; its
defaults are placeholders until the user gives theirs).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .arborescence import DirectedLinks, min_arborescence, profile_directional_costs, profile_link_arrays
from ..errors import InputError

__all__ = ["CarriedDepth", "GravityLayoutRounds", "price_table", "depth_arc_costs",
           "depth_aware_tree", "tree_designer"]


def price_table(settings):
    """The price table of a design: ``settings.price_table()`` (the user's prices or the defaults)."""
    return settings.price_table()


@dataclass
class GravityLayoutRounds:
    """What :func:`depth_aware_tree` did.

    Attributes
    ----------
    parents : list of ndarray
        Parent array of each round's tree (round 0 first).
    costs, failures, max_depth_m : list
        Design cost, number of failed checks and deepest invert of each round.
    chosen : int
        Round whose tree is kept.
    settled : bool
        True when the last round repeated the tree before it.
    """

    parents: list = field(default_factory=list)
    costs: list = field(default_factory=list)
    failures: list = field(default_factory=list)
    max_depth_m: list = field(default_factory=list)
    chosen: int = 0
    settled: bool = False

    def summary(self) -> dict:
        """Round 0 (the earlier layout) against the kept tree."""
        b, c = 0, self.chosen
        base = self.costs[b]
        return {
            "rounds": len(self.parents), "settled": self.settled, "chosen_round": c,
            "links_changed": int((self.parents[c] != self.parents[b]).sum()),
            "cost_before": base, "cost_after": self.costs[c],
            "saving_pct": 100.0 * (base - self.costs[c]) / base if base > 0 else 0.0,
            "failures_before": self.failures[b], "failures_after": self.failures[c],
            "max_depth_before_m": self.max_depth_m[b], "max_depth_after_m": self.max_depth_m[c],
        }


def _catalog_arrays(settings):
    from ..hydraulics.catalog import default_gravity_catalog
    from ..hydraulics.gravity import min_slope

    cat = settings.gravity_catalog if settings.gravity_catalog is not None else default_gravity_catalog()
    keep = np.flatnonzero(cat.nominal_mm >= settings.gravity_min_diameter_mm)
    if keep.size == 0:
        raise InputError(f"gravity pipe catalog has no pipe of at least {settings.gravity_min_diameter_mm:g} mm "
                         "nominal; add larger pipes or lower 'gravity_min_diameter_mm'")
    d = cat.inner_mm[keep] / 1000.0
    outer = getattr(cat, "outer_mm", None)
    outer = cat.nominal_mm[keep] / 1000.0 if outer is None else np.asarray(outer, float)[keep] / 1000.0
    outer = np.where(np.isfinite(outer), np.maximum(outer, d), d)
    n = np.where(np.isnan(cat.manning_n[keep]), settings.manning_n, cat.manning_n[keep])
    vmin = settings.gravity_min_velocity_mps
    if getattr(settings, "gravity_basis", "sanitary") == "storm":
        vmin = settings.storm_min_velocity_mps
    smin = min_slope(cat.nominal_mm[keep], cat.inner_mm[keep], n,
                     table_pct=settings.gravity_min_slope_table_pct, min_velocity_mps=vmin)
    return d, outer, n, smin, cat.nominal_mm[keep] / 1000.0, cat.cost_per_m[keep]


@dataclass(frozen=True)
class CarriedDepth:
    """The previous design's tree, to price depth handed on downstream.

    An arc that delivers its flow below the invert the previous design had
    at its downstream node forces the pipes below it deeper: the extra
    depth ``x`` travels down the previous tree, each link absorbing up to
    its slack (its fall beyond the minimum grade over its length) and
    costing ``marginal × (x_start + x_end) / 2`` (``marginal`` = the price of
    one more metre of trench depth over the whole link plus one more metre
    of its downstream manhole).

    Attributes (per node, -1 / 0 at the root)
    ----------
    down : ndarray of int64
        Parent in the previous tree.
    invert_m : ndarray
        Invert the previous design had at the node.
    slack_m, marginal : ndarray
        Of the link from the node to ``down``.
    """

    down: np.ndarray
    invert_m: np.ndarray
    slack_m: np.ndarray
    marginal: np.ndarray

    def cost(self, node, arrival_invert_m):
        """Price of carrying ``invert_m[node] - arrival_invert_m`` (if > 0) down the tree."""
        node = np.asarray(node, dtype=np.int64).copy()
        x = np.maximum(self.invert_m[node] - np.asarray(arrival_invert_m, dtype=np.float64), 0.0)
        x = np.nan_to_num(x, nan=0.0)
        out = np.zeros(node.shape)
        active = np.flatnonzero((x > 0) & (self.down[node] >= 0))
        while active.size:          # one hop per pass: at most the tree's height
            v = node[active]
            xe = np.maximum(x[active] - self.slack_m[v], 0.0)
            out[active] += self.marginal[v] * 0.5 * (x[active] + xe)
            x[active] = xe
            node[active] = self.down[v]
            active = active[(xe > 0) & (self.down[node[active]] >= 0)]
        return out


def depth_arc_costs(edges, base_cost, length_m, profile_offsets, profile_station_m, profile_ground_m,
                    *, settings, start_depth_m, flow_lps, prices=None, carry=None) -> DirectedLinks:
    """Price both flow directions of every candidate link by the trench the pipe needs.

    Parameters
    ----------
    edges : array_like of int, shape (m, 2)
        Candidate links ``(u, v)``.
    base_cost, length_m : array_like of float, shape (m,)
        Direction-free cost and plan length of each link.
    profile_offsets, profile_station_m, profile_ground_m : array_like
        Ground profile of each link (CSR), stations from ``edges[:, 0]``,
        at least two samples (both ends) per link.
    settings : DesignSettings
        Catalog, cover, bedding, clearance, access spacing, minimum grades.
    start_depth_m : array_like, shape (n,)
        Depth to invert each node's outgoing pipe must start at, at least
        (the depth carried in from upstream; 0 = minimum cover).
    flow_lps : array_like, shape (n,)
        Design flow leaving each node.
    prices : PriceTable, optional
        Default: the settings' price table (:mod:`mainspan.hydraulics.prices`).
    carry : CarriedDepth, optional
        The previous design, to price the depth an arc hands on downstream
        (see :class:`CarriedDepth`); None prices each link on its own.

    Returns
    -------
    DirectedLinks
        Arc ``2k`` is ``u → v`` (water flows v to u), ``2k + 1`` is ``v → u``.

    Examples
    --------
    >>> from mainspan.hydraulics import DesignSettings
    >>> d = depth_arc_costs([[0, 1]], [0.0], [100.0], [0, 2], [0.0, 100.0], [10.0, 12.0],
    ...                     settings=DesignSettings(), start_depth_m=[0.0, 0.0], flow_lps=[0.0, 1.0])
    >>> bool(d.weights[0] < d.weights[1])   # flowing downhill (1 -> 0) is cheaper
    True
    """
    s = settings
    e, m, base, L, off, st, g = profile_link_arrays(edges, base_cost, length_m, profile_offsets,
                                                    profile_station_m, profile_ground_m)
    d0 = np.nan_to_num(np.asarray(start_depth_m, dtype=np.float64), nan=0.0)
    q = np.nan_to_num(np.asarray(flow_lps, dtype=np.float64), nan=0.0) / 1000.0
    prices = price_table(s) if prices is None else prices
    dia, outer, nman, smin, nominal, pipe_cost = _catalog_arrays(s)
    P = dia.size
    link = np.repeat(np.arange(m), np.diff(off))
    starts = off[:-1]
    same = link[1:] == link[:-1]
    seg_link = link[1:][same]
    cover = s.gravity_cover_m
    spacing = s.access_spacing_m

    def price(up, s_up, z_up, start):
        # up: upstream node per link; s_up: stations from the upstream end; z_up: its ground;
        # start: depth to invert the pipe must start at, at least
        inv_up = np.empty((m, P))
        grade = np.empty((m, P))
        for j in range(P):
            iu = z_up - np.maximum(start, cover + outer[j])
            with np.errstate(divide="ignore", invalid="ignore"):
                need = np.where(s_up > 1e-9, (iu[link] - (g - cover - outer[j])) / s_up, -np.inf)
            grade[:, j] = np.maximum(smin[j], np.maximum.reduceat(need, starts))
            inv_up[:, j] = iu
        cap = (dia / 4.0) ** (2.0 / 3.0) * np.sqrt(grade) / nman * np.pi * dia * dia / 4.0
        ok = cap >= q[up][:, None]
        pick = np.where(ok.any(axis=1), ok.argmax(axis=1), P - 1)
        rows = np.arange(m)
        iu, sl = inv_up[rows, pick], grade[rows, pick]
        depth = g - (iu[link] - sl[link] * s_up) + s.bedding_m      # to the bottom of the bedding
        seg_len = np.abs(np.diff(s_up))[same]
        seg_depth = 0.5 * (depth[1:] + depth[:-1])[same]
        width = nominal[pick] + 2.0 * s.trench_side_clearance_m
        trench = np.bincount(seg_link, weights=prices.trench_cost(seg_depth, width[seg_link], seg_len,
                                                                 bedding_m=s.bedding_m),
                             minlength=m)
        mean_depth = np.bincount(seg_link, weights=seg_depth * seg_len, minlength=m) / np.maximum(L, 1e-9)
        n_access = np.where(L > spacing, np.ceil(L / spacing - 1e-12) - 1.0, 0.0)
        manholes = (prices.manhole_cost(z_up - iu) + n_access * prices.manhole_cost(mean_depth - s.bedding_m))
        return base + pipe_cost[pick] * L + trench + manholes, iu - sl * L

    lifts = bool(getattr(s, "lift_stations", False))

    def cheaper(up, s_up, z_up):
        # gravity from the depth the flow arrives at, or (when lift stations are allowed) a
        # lift at the upstream node back to minimum cover: whichever costs less
        cost, arrive = price(up, s_up, z_up, d0[up])
        if not lifts:
            return cost, arrive
        lift_m = np.maximum(d0[up] - (cover + outer[0]), 0.0)
        head = lift_m + getattr(s, "lift_head_allowance_m", 1.5)
        kw = np.where(lift_m > 0, 9.81 * q[up] * head / getattr(s, "lift_efficiency", 0.6), 0.0)
        extra = np.asarray(prices.pump_station_cost(kw), float) + np.asarray(prices.energy_cost_pv(kw), float)
        cost_l, arrive_l = price(up, s_up, z_up, np.zeros(m))
        cost_l = cost_l + np.where(kw > 0, extra, np.inf)
        take = cost_l < cost
        return np.where(take, cost_l, cost), np.where(take, arrive_l, arrive)

    z_first = g[starts]
    z_last = g[off[1:] - 1]
    u, v = e[:, 0], e[:, 1]
    tails = np.empty(2 * m, np.int64)
    heads = np.empty(2 * m, np.int64)
    weights = np.empty(2 * m, np.float64)
    w_vu, inv_at_u = cheaper(v, L[link] - st, z_last)      # flow v -> u
    w_uv, inv_at_v = cheaper(u, st, z_first)               # flow u -> v
    if carry is not None:
        w_vu = w_vu + carry.cost(u, inv_at_u - s.junction_drop_m)
        w_uv = w_uv + carry.cost(v, inv_at_v - s.junction_drop_m)
    tails[0::2], heads[0::2], weights[0::2] = u, v, w_vu
    tails[1::2], heads[1::2], weights[1::2] = v, u, w_uv
    return DirectedLinks(tails=tails, heads=heads, weights=weights,
                         link=np.repeat(np.arange(m, dtype=np.int64), 2))


def tree_designer(xy, elevation_m, demand_lps, node_id, edges, length_m, profile_offsets,
                  profile_station_m, profile_ground_m, *, root, settings, surface_length_m=None,
                  land_cost=None, basis_fields=None):
    """A ``design_fn`` for :func:`depth_aware_tree`: designs a tree of candidate links.

    Parameters
    ----------
    xy, elevation_m, demand_lps, node_id : array_like, per node
    edges, length_m : array_like, per candidate link
    profile_offsets, profile_station_m, profile_ground_m : array_like
        Candidate ground profiles (CSR, stations from ``edges[:, 0]``).
    root : int
    settings : DesignSettings
    surface_length_m, land_cost : array_like, per candidate link, optional
    basis_fields : dict, optional
        ``area_ha``, ``runoff_c``, ``population`` per node.

    Returns
    -------
    callable
        ``design_fn(parent, arc_link) -> DesignResult``, links in the order of
        ``np.flatnonzero(parent >= 0)``.
    """
    from ..hydraulics import design_network

    e = np.asarray(edges, dtype=np.int64).reshape(-1, 2)
    off = np.asarray(profile_offsets, dtype=np.int64)
    st = np.asarray(profile_station_m, dtype=np.float64)
    gz = np.asarray(profile_ground_m, dtype=np.float64)
    length = np.asarray(length_m, dtype=np.float64)
    surf = length if surface_length_m is None else np.asarray(surface_length_m, dtype=np.float64)
    basis = dict(basis_fields or {})

    def design_fn(parent, arc_link):
        child = np.flatnonzero(np.asarray(parent) >= 0)
        k = np.asarray(arc_link)[child]
        cnt = np.diff(off)[k]
        sub_off = np.concatenate([[0], np.cumsum(cnt)]).astype(np.int64)
        idx = np.repeat(off[k], cnt) + (np.arange(cnt.sum()) - np.repeat(sub_off[:-1], cnt))
        return design_network(
            "gravity", xy=xy, elevation_m=elevation_m, demand_lps=demand_lps, node_id=node_id,
            from_node=e[k, 0], to_node=e[k, 1], length_m=length[k], surface_length_m=surf[k],
            roots=[root], profile_offsets=sub_off, profile_station_m=st[idx], profile_ground_m=gz[idx],
            land_cost=None if land_cost is None else np.asarray(land_cost, np.float64)[k],
            settings=settings, **basis)

    return design_fn


def _design_cost(summary):
    v = summary.get("whole_life_cost", summary.get("total_cost"))
    return float(v)


def depth_aware_tree(n_nodes, edges, base_cost, length_m, profile_offsets, profile_station_m,
                     profile_ground_m, *, root, settings, design_fn, max_rounds=8, min_slope=None,
                     legacy_price_per_m2=None):
    """Grow, design and re-price the gravity arborescence until the tree repeats.

    Parameters
    ----------
    n_nodes : int
    edges, base_cost, length_m, profile_* :
        As in :func:`depth_arc_costs`.
    root : int
        The outlet.
    settings : DesignSettings
    design_fn : callable
        ``design_fn(parent, arc_link) -> DesignResult`` designs the tree
        with ``parent`` (n,) and, for each node, the candidate link joining
        it to its parent (-1 at the root); the result's links must be in
        the order of ``np.flatnonzero(parent >= 0)`` (one per child node).
    max_rounds : int, default=8
        Rounds after round 0.
    min_slope, legacy_price_per_m2 : float, optional
        Round 0's pricing (the earlier layout); default: the smallest
        tabulated minimum slope and the shallowest excavation price per
        m³ × a 200 mm pipe's trench width.

    Returns
    -------
    arb : Arborescence
        The kept tree.
    arcs : DirectedLinks
        The arcs it was grown on.
    rounds : GravityLayoutRounds
    """
    s = settings
    if min_slope is None:
        min_slope = min(p for _, p in s.gravity_min_slope_table_pct) / 100.0
    if legacy_price_per_m2 is None:
        legacy_price_per_m2 = float(s.price_table().excavation_rate(0.0)) * (0.2 + 2 * s.trench_side_clearance_m)
    e = np.asarray(edges, dtype=np.int64).reshape(-1, 2)
    arcs = profile_directional_costs(e, base_cost, length_m, profile_offsets, profile_station_m,
                                     profile_ground_m, min_slope=min_slope,
                                     extra_depth_cost_per_m2=legacy_price_per_m2)
    prices = price_table(s)
    rounds = GravityLayoutRounds()
    kept = []
    for r in range(max_rounds + 1):
        if r:
            arcs = depth_arc_costs(e, base_cost, length_m, profile_offsets, profile_station_m,
                                   profile_ground_m, settings=s, start_depth_m=depth, flow_lps=flow,
                                   prices=prices, carry=carry)
        arb = min_arborescence(n_nodes, arcs.tails, arcs.heads, arcs.weights, root=root)
        seen = next((k for k, p in enumerate(rounds.parents) if np.array_equal(p, arb.parent)), None)
        if seen is not None:
            rounds.settled = seen == len(rounds.parents) - 1
            break
        arc_link = np.where(arb.parent_edge >= 0, arcs.link[np.maximum(arb.parent_edge, 0)], -1)
        res = design_fn(arb.parent, arc_link)
        child = np.flatnonzero(arb.parent >= 0)
        depth, flow, carry = _node_state(res, arb.parent, np.asarray(length_m, float)[arc_link[child]],
                                         s, prices)
        rounds.parents.append(arb.parent.copy())
        rounds.costs.append(_design_cost(res.summary))
        rounds.failures.append(int(res.summary.get("n_failures", len(res.failures))))
        rounds.max_depth_m.append(float(res.summary.get("max_depth_m", np.nan)))
        kept.append((arb, arcs))
    rounds.chosen = int(np.argmin(rounds.costs))          # first minimum: ties to the earlier round
    arb, arcs = kept[rounds.chosen]
    return arb, arcs, rounds


def _node_state(res, parent, length_m, settings, prices):
    """Start depth, outgoing design flow and the carried-depth model of each node, from a design.

    With lift stations allowed, the start depth of a node is the depth the
    flow arrives at (its lowest invert), and each arc chooses between
    gravity from there and a lift back to minimum cover; without, it is the
    depth the outgoing pipe leaves at.  A lift station absorbs any depth
    carried into it (its extra head is small against a deeper trench
    downstream).
    """
    n = parent.shape[0]
    nf, lf = res.node_fields, res.link_fields
    node_depth = np.asarray(nf.get("depth_m", np.zeros(n)), dtype=np.float64)
    invert = np.asarray(nf.get("invert_m", np.full(n, np.nan)), dtype=np.float64)
    ground = invert + node_depth
    child = np.flatnonzero(parent >= 0)      # the design's links, in this order
    depth = np.where(np.isfinite(node_depth), node_depth, 0.0)
    if not getattr(settings, "lift_stations", False):
        depth[child] = ground[child] - np.asarray(lf["invert_up_m"], dtype=np.float64)
        depth = np.where(np.isfinite(depth), depth, 0.0)
    flow = np.zeros(n)
    flow[child] = np.asarray(lf["design_flow_lps"], dtype=np.float64)
    L = np.asarray(length_m, dtype=np.float64)
    fall = np.asarray(lf["invert_up_m"], float) - np.asarray(lf["invert_down_m"], float)
    slack = np.maximum(fall - np.asarray(lf["min_slope_pct"], float) / 100.0 * L, 0.0)
    lifted = np.asarray(nf.get("lift_m", np.zeros(n)), dtype=np.float64)[child] > 0
    slack = np.where(lifted, np.inf, slack)
    td = np.asarray(lf["trench_depth_m"], dtype=np.float64)
    width = np.asarray(lf["nominal_mm"], dtype=np.float64) / 1000.0 + 2.0 * settings.trench_side_clearance_m
    d_down = np.where(np.isfinite(node_depth), node_depth, 0.0)[parent[child]]
    marginal = (prices.trench_cost(td + 1.0, width, L) - prices.trench_cost(td, width, L)
                + prices.manhole_cost(d_down + 1.0) - prices.manhole_cost(d_down))
    full = {"slack": np.zeros(n), "marginal": np.zeros(n)}
    full["slack"][child] = np.nan_to_num(slack, nan=0.0, posinf=np.inf)
    full["marginal"][child] = np.maximum(np.nan_to_num(marginal, nan=0.0), 0.0)
    carry = CarriedDepth(down=np.asarray(parent, np.int64), invert_m=invert,
                         slack_m=full["slack"], marginal=full["marginal"])
    return depth, flow, carry
