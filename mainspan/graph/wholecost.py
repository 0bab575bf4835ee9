"""Flow-aware layout: the tree of mains chosen for what the owner pays (``layout="whole-cost"``).

Prim's tree is the cheapest tree of *per-metre link prices*.  The owner pays for
pipes sized by the flow they carry, for trenches, fittings, the pump station and
the energy it burns over the years.  A tree that funnels nearly all the flow down
one long chain needs large pipes and a high pump head even when its links are
cheap.  This stage searches for the tree of least *whole-life cost*
(``DesignResult.summary["whole_life_cost"]``; where the design stage does not
give it, ``total_cost`` plus ``energy_cost_pv``) by asking the design stage to
price candidate trees.  It is a pipeline stage that calls
:func:`mainspan.hydraulics.design_network`, never the other way round.

The search
----------
1. **Start trees.**  Prim's tree and Prim–Dijkstra trade-off trees [1]_ over the
   same candidates, for the values of α in :attr:`WholeCostSettings.alphas`: node
   *v* joins the growing tree from *u* with the key ``α·d(u) + w(u, v)``, where
   ``d(u)`` is the link-cost path length from the root to *u*.  α = 0 is Prim's
   tree, α = 1 the shortest-path tree (Dijkstra); ties are broken by
   ``(key, lower node, higher node, link index)``, as in :mod:`mainspan.graph.spanning`.
   Each start is designed in full; the best (fewest failing design checks, then
   lowest whole-life cost, then lowest α) is kept.
2. **Link exchange.**  A move adds a candidate link (a, b) not in the tree and
   drops a tree link on the cycle it closes; the part cut off is re-hung through
   the new link and the path inside it turned round.  Every move of the
   neighbourhood is *ranked* by a cheap estimate (below); the ``per_pass``
   best-ranked ones are then *priced by a full design* in rank order, each on the
   tree as it stands, and every one that lowers the whole-life cost without adding
   a failing check is taken (a move an earlier one of the same pass made invalid
   is skipped).  Passes repeat until a pass takes no move or the evaluation budget
   is spent.

The estimate prices a move in O(length of the cycle): pipes for the changed flows
chosen link by link (each the catalog pipe of least price + price of head × its
loss, between the smallest within the velocity cap and the rule's; the rule's
pipe when there is no pump energy to price), trench as in the design stage, land
cost, plus the change in the
required source head (maximum over the sites of ground + minimum pressure +
head loss from the source, kept exact under the estimate's pipes with a
sparse table of range maxima over a depth-first order) times the price of a
metre of head taken from the starting design (energy present value per metre of
pump head; zero when the design reports no pump energy).  The estimate only
orders the moves; every accepted move is priced by the real design stage.

What it proves
--------------
The result is a *local* optimum: no move of the neighbourhood searched, among
the ``per_pass`` best ranked by the estimate, lowers the whole-life cost.  It is
not a global optimum (the problem is NP-hard in general).  Limits (see
:class:`WholeCostSettings`): a dropped link lies at most ``max_hops`` links from
an end of the added link on the cycle; at most ``per_pass`` full designs per
pass; at most ``max_evaluations`` full designs in all.  The work per pass is
O(m · max_hops · cycle length) for the estimate plus ``per_pass`` designs.

References
----------
.. [1] C. J. Alpert, T. C. Hu, J. H. Huang, A. B. Kahng and D. Karger,
   "Prim-Dijkstra tradeoffs for improved performance-driven routing tree
   design", IEEE Trans. Computer-Aided Design 14(7):890-896, 1995 (from memory).
.. [2] R. C. Prim, "Shortest connection networks and some generalizations",
   Bell System Technical Journal 36(6):1389-1401, 1957.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numba
import numpy as np

from ..errors import InputError
from .spanning import Tree

__all__ = ["WholeCostSettings", "tradeoff_tree", "tree_from_parents", "exchange_search",
           "RuleEstimate", "DesignPricer", "whole_cost_tree", "whole_life_cost", "WholeCostTree",
           "grow_whole_cost", "estimate_moves", "apply_exchange"]

# settings and the trade-off start trees live in .tradeoff (re-exported here)
from .tradeoff import (WholeCostSettings, tradeoff_tree,  # noqa: F401,E402
                       tree_from_parents, whole_life_cost)


# ----------------------------------------------------------------------------- the estimate
@dataclass(frozen=True)
class RuleEstimate:
    """Cheap price of a tree used to *rank* exchanges (never to accept them).

    Link cost = ``unit_cost[p] · length[e] + fixed[e]``; head loss = ``length[e]``
    × gradient of pipe ``p`` at the link's design flow, interpolated log-log in
    ``grad_table`` over ``q_grid``.  Source head required = max over nodes of
    ``need_m`` + head loss from the root; ``head_price`` prices a metre of it.
    With ``head_price`` 0, pipe ``p`` is the rule's: the first catalog row whose
    ``qmax_m3ps`` holds the flow (the last row if none).  With a price of head,
    ``p`` is the row of least ``unit_cost · L + head_price · loss`` from the
    smallest within the velocity cap to one above the rule's -- the trade
    least-cost sizing makes where the loss sets the pump head.

    Attributes
    ----------
    demand_lps : ndarray (n,)
    need_m : ndarray (n,)
        Ground + minimum pressure head at each node.
    length_m, fixed : ndarray (m,)
        Per candidate: pipe length and flow-independent cost (land).
    qmax_m3ps, unit_cost : ndarray (P,)
    qmaxv_m3ps : ndarray (P,) or None
        Largest flow within the velocity cap alone (None: ``qmax_m3ps``).
    q_grid : ndarray (G,)
    grad_table : ndarray (P, G)
        Head-loss gradient (m/m) of each pipe at each grid flow.
    peaking_factor, min_flow_lps, head_price : float
    clement_r, clement_u : float
        Clément's operating probability and quality quantile for on-demand
        flows; ``clement_r = 0``: flows are accumulated demand × peaking.
    """

    demand_lps: np.ndarray
    need_m: np.ndarray
    length_m: np.ndarray
    fixed: np.ndarray
    qmax_m3ps: np.ndarray
    unit_cost: np.ndarray
    q_grid: np.ndarray
    grad_table: np.ndarray
    peaking_factor: float = 1.0
    min_flow_lps: float = 0.0
    head_price: float = 0.0
    clement_r: float = 0.0
    clement_u: float = 0.0
    qmaxv_m3ps: np.ndarray | None = None

    @classmethod
    def from_design(cls, settings, *, demand_lps, elevation_m, length_m, land_cost=None,
                    min_pressure_m=None, head_price=0.0):
        """The rule-sizing estimate for pressure mains under :class:`DesignSettings`."""
        from ..hydraulics import DesignSettings
        from ..hydraulics.catalog import default_catalog
        from ..hydraulics.friction import water_kinematic_viscosity_m2ps
        from ..hydraulics.pressure import pipe_headloss_m

        s = DesignSettings() if settings is None else settings
        cat = s.pressure_catalog if s.pressure_catalog is not None else default_catalog()
        nu = float(water_kinematic_viscosity_m2ps(s.water_temperature_c))
        d = cat.inner_mm / 1000.0
        eps = np.nan_to_num(cat.roughness_mm / 1000.0)
        hwc = np.nan_to_num(cat.hw_c, nan=150.0)
        area = np.pi * d * d / 4.0

        def grad(q):                         # (G,) x (P,) -> (P, G)
            return pipe_headloss_m(q[None, :], 1.0, d[:, None], eps[:, None], hwc[:, None],
                                   method=s.headloss_method, nu_m2ps=nu,
                                   minor_loss_factor=s.minor_loss_factor)

        cr = cu = 0.0
        if getattr(s, "demand_model", "continuous") == "clement":
            from statistics import NormalDist
            cr = float(s.operating_probability if s.operating_probability is not None
                       else s.hydrant_hours_per_day / s.network_hours_per_day)
            cu = float(NormalDist().inv_cdf(s.quality_of_operation))
        demand = np.asarray(demand_lps, float)
        qtop = max(float(demand.sum()) * s.peaking_factor, s.min_flow_lps, 1.0) / 1000.0
        q_grid = np.geomspace(qtop * 1e-6, qtop * 4.0, 96)
        table = np.asarray(grad(q_grid), float)
        # largest flow each pipe takes under the rule (velocity cap and loss budget)
        lo, hi = np.zeros(d.size), np.full(d.size, qtop * 64.0)
        budget = np.inf if s.headloss_max_m_per_km is None else s.headloss_max_m_per_km / 1000.0
        for _ in range(80):
            mid = 0.5 * (lo + hi)
            g = np.asarray(pipe_headloss_m(mid, 1.0, d, eps, hwc, method=s.headloss_method,
                                           nu_m2ps=nu, minor_loss_factor=s.minor_loss_factor))
            ok = (mid / area <= s.velocity_max_mps) & (g <= budget)
            lo, hi = np.where(ok, mid, lo), np.where(ok, hi, mid)
        nom = cat.nominal_mm / 1000.0
        width = nom + 2 * s.trench_side_clearance_m
        depth = s.pressure_cover_m + nom + s.bedding_m
        # trench per metre of main, priced as the design stage prices it (default surface)
        trench = np.asarray(s.price_table().trench_cost(depth, width, 1.0, bedding_m=s.bedding_m),
                            float)
        elev = np.nan_to_num(np.asarray(elevation_m, float))
        pmin = s.min_pressure_m if min_pressure_m is None else np.asarray(min_pressure_m, float)
        length = np.asarray(length_m, float)
        return cls(demand_lps=demand, need_m=elev + pmin, length_m=length,
                   fixed=np.zeros(length.size) if land_cost is None else
                   np.asarray(land_cost, float),
                   qmax_m3ps=lo, unit_cost=np.asarray(cat.cost_per_m, float) + trench,
                   q_grid=q_grid, grad_table=table, peaking_factor=float(s.peaking_factor),
                   min_flow_lps=float(s.min_flow_lps), head_price=float(head_price),
                   clement_r=cr, clement_u=cu, qmaxv_m3ps=s.velocity_max_mps * area)


@numba.njit(cache=True, inline="always")
def _grad(p, q, lq, lgrad, gzero):
    """Head-loss gradient (m/m) of pipe p at flow q (m3/s), log-log interpolated."""
    x = np.log(q)
    G = lq.shape[0]
    if x <= lq[0]:
        return gzero[p] * q / np.exp(lq[0])          # below the table: linear in q
    k = np.searchsorted(lq, x) - 1
    if k >= G - 1:
        k = G - 2
    t = (x - lq[k]) / (lq[k + 1] - lq[k])
    return np.exp(lgrad[p, k] + t * (lgrad[p, k + 1] - lgrad[p, k]))


@numba.njit(cache=True, inline="always")
def _link(e, d_lps, d2, length, fixed, qmax, qmaxv, unit, lq, lgrad, gzero, peak, qmin, cr, cu,
          lam):
    """(cost, head loss) of candidate e carrying subtree demand d_lps.

    ``d2`` is the subtree sum of squared demands; with ``cr > 0`` the flow is
    Clément's ``min(r·Σq + U·sqrt(r(1-r)·Σq²), Σq)`` (r = cr, U = cu).  The pipe is
    the rule's (first row whose ``qmax`` holds the flow) when ``lam`` is 0; with a
    price of head ``lam`` > 0 it is the row, from the smallest within the velocity
    cap (``qmaxv``) to one above the rule's, of least ``unit·L + lam·loss`` -- the
    choice least-cost sizing makes on the path that sets the pump head.
    """
    if cr > 0.0:
        f = min(cr * d_lps + cu * np.sqrt(max(cr * (1.0 - cr) * d2, 0.0)), d_lps)
        q = max(f, qmin) / 1000.0
    else:
        q = max(peak * d_lps, qmin) / 1000.0
    P = qmax.shape[0]
    p = P - 1
    for j in range(P):
        if q <= qmax[j]:
            p = j
            break
    if q <= 0.0:
        return unit[p] * length[e] + fixed[e], 0.0
    if lam <= 0.0:
        return unit[p] * length[e] + fixed[e], _grad(p, q, lq, lgrad, gzero) * length[e]
    pv = p
    for j in range(p + 1):
        if q <= qmaxv[j]:
            pv = j
            break
    best = np.inf
    pb = p
    gb = 0.0
    for j in range(pv, min(p + 1, P - 1) + 1):
        g = _grad(j, q, lq, lgrad, gzero)
        c = (unit[j] + lam * g) * length[e]
        if c < best:
            best = c
            pb = j
            gb = g
    return unit[pb] * length[e] + fixed[e], gb * length[e]


@numba.njit(cache=True)
def _prepare(n, parent, pedge, roots, demand, need, length, fixed, qmax, qmaxv, unit, lq, lgrad,
             gzero, peak, qmin, cr, cu, lam):  # pragma: no cover - compiled
    """Depth-first order, subtree demand, rule cost/head loss and a range-max table."""
    nchild = np.zeros(n + 1, np.int64)
    for v in range(n):
        if parent[v] >= 0:
            nchild[parent[v] + 1] += 1
    off = np.cumsum(nchild)
    fill = off[:-1].copy()
    kids = np.empty(max(off[-1], 1), np.int64)
    for v in range(n):                 # children by node index: deterministic
        if parent[v] >= 0:
            kids[fill[parent[v]]] = v
            fill[parent[v]] += 1
    pre = np.empty(n, np.int64)
    tin = np.empty(n, np.int64)
    depth = np.zeros(n, np.int64)
    stack = np.empty(n, np.int64)
    pos = 0
    for r in roots:
        top = 0
        stack[0] = r
        top = 1
        while top > 0:
            top -= 1
            v = stack[top]
            pre[pos] = v
            tin[v] = pos
            pos += 1
            for k in range(off[v + 1] - 1, off[v] - 1, -1):
                c = kids[k]
                depth[c] = depth[v] + 1
                stack[top] = c
                top += 1
    size = np.ones(n, np.int64)
    dem = demand.copy()
    dem2 = demand * demand
    for i in range(n - 1, -1, -1):
        v = pre[i]
        p = parent[v]
        if p >= 0:
            size[p] += size[v]
            dem[p] += dem[v]
            dem2[p] += dem2[v]
    tout = tin + size
    lcost = np.zeros(n)
    lloss = np.zeros(n)
    hl = np.zeros(n)
    capital = 0.0
    for i in range(n):
        v = pre[i]
        p = parent[v]
        if p >= 0:
            c, h = _link(pedge[v], dem[v], dem2[v], length, fixed, qmax, qmaxv, unit, lq, lgrad,
                         gzero, peak, qmin, cr, cu, lam)
            lcost[v] = c
            lloss[v] = h
            hl[v] = hl[p] + h
            capital += c
    lev = 1
    while (1 << lev) <= n:
        lev += 1
    table = np.empty((lev, n))
    for i in range(n):
        table[0, i] = need[pre[i]] + hl[pre[i]]
    for k in range(1, lev):
        half = 1 << (k - 1)
        for i in range(n):
            j = i + half
            table[k, i] = table[k - 1, i] if j >= n else max(table[k - 1, i], table[k - 1, j])
    return tin, tout, depth, dem, dem2, lcost, lloss, hl, table, capital


@numba.njit(cache=True, inline="always")
def _rmax(table, lo, hi):
    """max over preorder positions [lo, hi); -inf when empty."""
    if hi <= lo:
        return -np.inf
    k = 0
    while (1 << (k + 1)) <= hi - lo:
        k += 1
    return max(table[k, lo], table[k, hi - (1 << k)])


@numba.njit(cache=True)
def _scan(n, edges, cand, parent, pedge, tin, tout, depth, dem, dem2, lcost, lloss, hl, table,
          length, fixed, qmax, qmaxv, unit, lq, lgrad, gzero, peak, qmin, cr, cu, head_price,
          max_hops, root_of):  # pragma: no cover - compiled
    """Estimated change of every exchange: (delta, added link, child end of dropped link)."""
    cap = 1024
    out_d = np.empty(cap)
    out_e = np.empty(cap, np.int64)
    out_c = np.empty(cap, np.int64)
    cnt = 0
    lam = head_price
    H0 = _rmax(table, 0, n)
    pa = np.empty(n, np.int64)
    pb = np.empty(n, np.int64)
    hA = np.empty(n)
    hB = np.empty(n)
    hS = np.empty(n)
    for ci in range(cand.shape[0]):
        e = cand[ci]
        x0 = edges[e, 0]
        y0 = edges[e, 1]
        if root_of[x0] != root_of[y0]:
            continue
        # the two paths up to the lowest common ancestor
        la = 0
        lb = 0
        x = x0
        y = y0
        while depth[x] > depth[y]:
            pa[la] = x
            la += 1
            x = parent[x]
        while depth[y] > depth[x]:
            pb[lb] = y
            lb += 1
            y = parent[y]
        while x != y:
            pa[la] = x
            la += 1
            x = parent[x]
            pb[lb] = y
            lb += 1
            y = parent[y]
        lca = x
        for side in range(2):
            if side == 1:      # drop on b's side: swap the roles of the two paths
                for t in range(max(la, lb)):
                    s_ = pa[t]
                    pa[t] = pb[t]
                    pb[t] = s_
                s_ = la
                la = lb
                lb = s_
            if la == 0:
                continue
            a = pa[0]
            b = pb[0] if lb > 0 else lca
            for j in range(min(la, max_hops)):
                c = pa[j]
                DS = dem[c]
                DS2 = dem2[c]
                delta = 0.0
                # links above c on a's side lose the cut-off demand
                for t in range(j + 1, la):
                    v = pa[t]
                    cc, hh = _link(pedge[v], dem[v] - DS, dem2[v] - DS2, length, fixed, qmax,
                                   qmaxv, unit, lq, lgrad, gzero, peak, qmin, cr, cu, lam)
                    delta += cc - lcost[v]
                    hA[t] = hh
                # links on b's side gain it
                for t in range(lb):
                    v = pb[t]
                    cc, hh = _link(pedge[v], dem[v] + DS, dem2[v] + DS2, length, fixed, qmax,
                                   qmaxv, unit, lq, lgrad, gzero, peak, qmin, cr, cu, lam)
                    delta += cc - lcost[v]
                    hB[t] = hh
                # the cut-off path c .. a turns round; a hangs from b through e
                for t in range(j + 1):
                    delta -= lcost[pa[t]]
                ce, he_ = _link(e, DS, DS2, length, fixed, qmax, qmaxv, unit, lq, lgrad, gzero,
                                peak, qmin, cr, cu, lam)
                delta += ce
                for t in range(1, j + 1):
                    cc, hh = _link(pedge[pa[t - 1]], DS - dem[pa[t - 1]], DS2 - dem2[pa[t - 1]],
                                   length, fixed, qmax, qmaxv, unit, lq, lgrad, gzero, peak, qmin,
                                   cr, cu, lam)
                    delta += cc
                    hS[t] = hh
                if head_price > 0.0:
                    # parts whose path to the root is unchanged
                    ia0, ia1 = tin[pa[la - 1]], tout[pa[la - 1]]
                    if lb > 0:
                        ib0, ib1 = tin[pb[lb - 1]], tout[pb[lb - 1]]
                    else:
                        ib0, ib1 = ia1, ia1
                    if ib0 < ia0:
                        lo0, hi0, lo1, hi1 = ib0, ib1, ia0, ia1
                    else:
                        lo0, hi0, lo1, hi1 = ia0, ia1, ib0, ib1
                    H = max(_rmax(table, 0, lo0), max(_rmax(table, hi0, lo1), _rmax(table, hi1, n)))
                    # a's side above c, from the top down
                    h = hl[lca]
                    for t in range(la - 1, j, -1):
                        v = pa[t]
                        h += hA[t]
                        s_ = h - hl[v]
                        nxt = pa[t - 1]
                        H = max(H, max(_rmax(table, tin[v], tin[nxt]),
                                       _rmax(table, tout[nxt], tout[v])) + s_)
                    # b's side
                    h = hl[lca]
                    for t in range(lb - 1, -1, -1):
                        v = pb[t]
                        h += hB[t]
                        s_ = h - hl[v]
                        if t > 0:
                            nxt = pb[t - 1]
                            H = max(H, max(_rmax(table, tin[v], tin[nxt]),
                                           _rmax(table, tout[nxt], tout[v])) + s_)
                        else:
                            H = max(H, _rmax(table, tin[v], tout[v]) + s_)
                    hb = h if lb > 0 else hl[lca]
                    # the cut-off part, re-hung at b
                    h = hb + he_
                    H = max(H, _rmax(table, tin[a], tout[a]) + h - hl[a])
                    for t in range(1, j + 1):
                        v = pa[t]
                        prv = pa[t - 1]
                        h += hS[t]
                        H = max(H, max(_rmax(table, tin[v], tin[prv]),
                                       _rmax(table, tout[prv], tout[v])) + h - hl[v])
                    delta += head_price * (H - H0)
                if cnt == cap:
                    cap *= 2
                    nd = np.empty(cap)
                    ne = np.empty(cap, np.int64)
                    nc = np.empty(cap, np.int64)
                    nd[:cnt] = out_d[:cnt]
                    ne[:cnt] = out_e[:cnt]
                    nc[:cnt] = out_c[:cnt]
                    out_d, out_e, out_c = nd, ne, nc
                out_d[cnt] = delta
                out_e[cnt] = e
                out_c[cnt] = c
                cnt += 1
    return out_d[:cnt], out_e[:cnt], out_c[:cnt]


def _estimate_arrays(est):
    lq = np.log(est.q_grid)
    with np.errstate(divide="ignore"):
        lgrad = np.log(np.maximum(est.grad_table, 1e-300))
    qv = est.qmax_m3ps if est.qmaxv_m3ps is None else est.qmaxv_m3ps
    return (np.ascontiguousarray(est.length_m, float), np.ascontiguousarray(est.fixed, float),
            np.ascontiguousarray(est.qmax_m3ps, float), np.ascontiguousarray(qv, float),
            np.ascontiguousarray(est.unit_cost, float),
            lq, np.ascontiguousarray(lgrad), np.ascontiguousarray(est.grad_table[:, 0]),
            float(est.peaking_factor), float(est.min_flow_lps), float(est.clement_r),
            float(est.clement_u))


def estimate_moves(n, edges, parent, parent_edge, roots, root_of, est, *, max_hops=12):
    """Every exchange of the neighbourhood with its estimated change of cost.

    Returns
    -------
    delta : ndarray (k,)
    added : ndarray of int64 (k,)
        Candidate link added.
    cut : ndarray of int64 (k,)
        Child end of the tree link dropped (the link is ``parent_edge[cut]``).
    base : float
        Estimated cost of the tree itself (capital + head price × source head).
    """
    parent = np.ascontiguousarray(parent, np.int64)
    pedge = np.ascontiguousarray(parent_edge, np.int64)
    roots = np.ascontiguousarray(roots, np.int64)
    arr = _estimate_arrays(est)
    hp = float(est.head_price) if len(roots) == 1 else 0.0
    tin, tout, depth, dem, dem2, lcost, lloss, hl, table, capital = _prepare(
        n, parent, pedge, roots, np.ascontiguousarray(est.demand_lps, float),
        np.ascontiguousarray(est.need_m, float), *arr, hp)
    in_tree = np.zeros(len(edges), bool)
    in_tree[pedge[pedge >= 0]] = True
    cand = np.flatnonzero(~in_tree & (arr[1] < np.inf) & (arr[0] < np.inf))
    d, a, c = _scan(n, np.ascontiguousarray(edges, np.int64), cand, parent, pedge, tin, tout,
                    depth, dem, dem2, lcost, lloss, hl, table, *arr, hp, int(max_hops),
                    np.ascontiguousarray(root_of, np.int64))
    base = capital + hp * (_rmax_py(table, n))
    return d, a, c, base


def _rmax_py(table, n):
    return float(table[0, :n].max()) if n else 0.0


def _valid_exchange(tree, edges, added, cut):
    """Whether adding *added* and dropping the link above *cut* still gives a tree."""
    if tree.parent[cut] < 0 or bool(np.any(tree.parent_edge == added)):
        return False

    def below(v):
        while v >= 0:
            if v == cut:
                return True
            v = int(tree.parent[v])
        return False

    return below(int(edges[added, 0])) != below(int(edges[added, 1]))


def apply_exchange(parent, parent_edge, edges, added, cut):
    """The tree after adding link *added* and dropping the link above node *cut*.

    The end of *added* inside the cut-off part hangs from the other end; the
    path from it up to *cut* turns round.
    """
    parent = np.array(parent, np.int64)
    pe = np.array(parent_edge, np.int64)
    a, b = int(edges[added, 0]), int(edges[added, 1])
    # which end is in the subtree of cut?
    x = a
    while x >= 0 and x != cut:
        x = int(parent[x])
    if x != cut:
        a, b = b, a
    path = [a]
    while path[-1] != cut:
        path.append(int(parent[path[-1]]))
    for t in range(len(path) - 1, 0, -1):      # path[t] now hangs from path[t-1]
        parent[path[t]] = path[t - 1]
        pe[path[t]] = pe[path[t - 1]]
    parent[a] = b
    pe[a] = int(added)
    return parent, pe


# --------------------------------------------------------------------------------- the search
def exchange_search(n, edges, weights, start, evaluate, est, *, settings=None,
                    start_score=None, budget_used=0):
    """Improve *start* by single link exchanges until no priced move lowers the cost.

    Parameters
    ----------
    n : int
    edges : ndarray (m, 2)
    weights : ndarray (m,)
        Link prices (for ``Tree.weight`` only).
    start : Tree
    evaluate : callable
        ``evaluate(tree) -> (n_failures, cost, payload)``: the real price.
    est : RuleEstimate
        Ranks the moves.
    settings : WholeCostSettings, optional
    start_score : tuple, optional
        ``evaluate(start)`` if already known (saves one evaluation).
    budget_used : int
        Full evaluations already spent (start trees).

    Returns
    -------
    tree : Tree
    score : (n_failures, cost, payload) of *tree*
    stats : dict
        ``passes``, ``accepted``, ``evaluations``, ``moves_last_pass``,
        ``converged`` (False when the budget ran out).
    """
    s = WholeCostSettings() if settings is None else settings
    tree = start
    score = evaluate(tree) if start_score is None else start_score
    used = budget_used + (start_score is None)
    stats = {"passes": 0, "accepted": 0, "evaluations": used, "moves_last_pass": 0,
             "converged": False}
    while True:
        if used >= s.max_evaluations:
            break
        d, a, c, _ = estimate_moves(n, edges, tree.parent, tree.parent_edge, tree.roots,
                                    tree.root_of, est, max_hops=s.max_hops)
        stats["passes"] += 1
        stats["moves_last_pass"] = int(d.size)
        rank = np.lexsort((c, a, d))[: s.per_pass]
        took = False
        complete = True
        for k in rank:
            if used >= s.max_evaluations:
                complete = False
                break
            if took and not _valid_exchange(tree, edges, int(a[k]), int(c[k])):
                continue          # an earlier exchange of this pass changed that cycle
            par, pe = apply_exchange(tree.parent, tree.parent_edge, edges, int(a[k]), int(c[k]))
            cand = tree_from_parents(par, pe, tree.roots, weights)
            got = evaluate(cand)
            used += 1
            tol = 1e-9 * max(abs(score[1]), 1.0)
            if got[0] <= score[0] and got[1] < score[1] - tol:
                tree, score, took = cand, got, True
                stats["accepted"] += 1
        if not took:
            stats["converged"] = complete
            break
    stats["evaluations"] = used
    return tree, score, stats


class DesignPricer:
    """Price a tree over the candidates with the full design stage.

    Links are handed over exactly as :func:`mainspan.pipeline.layout.assemble_layout`
    hands them (grow order, oriented from the root, ground profiles sampled
    from the parent end), so the price of the chosen tree is the price of the
    layout written.

    Parameters
    ----------
    system : str
    design_kwargs : dict
        Node arrays and settings for :func:`design_network` (``xy``,
        ``elevation_m``, ``demand_lps``, ``node_id``, ``settings`` ...).
    edges : ndarray (m, 2)
    length_m, surface_length_m, land_cost : ndarray (m,) or None
    profiles : tuple or None
        ``(offsets, station_m, ground_m)`` of every candidate sampled from
        ``edges[:, 0]`` and the same from ``edges[:, 1]``.
    """

    def __init__(self, system, design_kwargs, edges, length_m, surface_length_m, land_cost=None,
                 profiles=None):
        self.system = system
        self.kw = dict(design_kwargs)
        self.edges = np.asarray(edges, np.int64)
        self.length_m = np.asarray(length_m, float)
        self.surface_length_m = np.asarray(surface_length_m, float)
        self.land_cost = None if land_cost is None else np.asarray(land_cost, float)
        self.profiles = profiles
        self.calls = 0

    def links(self, tree):
        order = np.asarray(tree.order, np.int64)
        child = order[tree.parent[order] >= 0]
        return child, tree.parent[child], tree.parent_edge[child]

    def __call__(self, tree):
        from ..hydraulics import design_network

        child, par, eidx = self.links(tree)
        kw = dict(self.kw)
        if self.profiles is not None:
            (off_f, st_f, z_f), (off_r, st_r, z_r) = self.profiles
            flip = self.edges[eidx, 0] != par           # sampled from the other end
            off_s = np.where(flip, off_r[eidx], off_f[eidx])
            cnt = np.where(flip, off_r[eidx + 1], off_f[eidx + 1]) - off_s
            offs = np.zeros(len(eidx) + 1, np.int64)
            np.cumsum(cnt, out=offs[1:])
            idx = np.arange(offs[-1]) - np.repeat(offs[:-1] - off_s, cnt)
            fl = np.repeat(flip, cnt)
            st, z = np.empty(offs[-1]), np.empty(offs[-1])
            st[fl], z[fl] = st_r[idx[fl]], z_r[idx[fl]]
            st[~fl], z[~fl] = st_f[idx[~fl]], z_f[idx[~fl]]
            kw.update(profile_offsets=offs, profile_station_m=st, profile_ground_m=z)
        res = design_network(
            self.system, from_node=par, to_node=child, length_m=self.length_m[eidx],
            surface_length_m=self.surface_length_m[eidx],
            roots=np.asarray(tree.roots, np.int64),
            land_cost=None if self.land_cost is None else self.land_cost[eidx], **kw)
        self.calls += 1
        return int(res.summary.get("n_failures", 0)), whole_life_cost(res.summary), res


def _head_price(summary, prices=None):
    """Price of one metre of pump head from a design summary (0 when it reports no pump).

    Energy present value per metre of head, plus the pump station's price per kW
    times the shaft power per metre of head when *prices* (a PriceTable) is given.
    """
    pump = summary.get("pump")
    if isinstance(pump, dict):
        h = pump.get("head_m", 0.0)
        h = float(np.sum(h)) if h is not None else 0.0
        pv = float(np.sum(pump.get("energy_cost_pv", 0.0) or 0.0))
        kw = float(np.sum(pump.get("shaft_kw", 0.0) or 0.0))
        per_kw = float(getattr(prices, "pump_station_per_kw", 0.0) or 0.0)
        if h > 0 and (pv > 0 or kw > 0):
            return (pv + per_kw * kw) / h
    return 0.0


def whole_cost_tree(n, edges, weights, roots, pricer, est, *, settings=None, prim=None,
                    allow_forest=False, prices=None):
    """Start trees over the α values, then link exchange from the best.

    Parameters
    ----------
    n, edges, weights, roots
        As for :func:`tradeoff_tree` (weights: link prices, ``inf`` impassable).
    pricer : callable
        ``pricer(tree) -> (n_failures, whole_life_cost, payload)``.
    est : RuleEstimate
        Its ``head_price`` is replaced by the one the best start's design gives
        (when the payload is a DesignResult reporting a pump).
    settings : WholeCostSettings, optional
    prim : Tree, optional
        Prim's tree if already grown (must equal ``tradeoff_tree(.., 0)``).
    allow_forest : bool, default False
    prices : PriceTable, optional
        For the pump station's price per kW in the estimate's price of head.

    Returns
    -------
    tree : Tree
    info : dict
        ``prim_cost``, ``prim_failures``, ``prim_payload``, ``start_alpha``,
        ``start_costs`` (α -> cost), ``cost``, ``failures``, ``payload`` and
        the search statistics.
    """
    from dataclasses import replace

    s = WholeCostSettings() if settings is None else settings
    starts = []
    seen = {}
    for alpha in sorted(set(s.alphas) | {0.0}):
        t = prim if (alpha == 0.0 and prim is not None) else tradeoff_tree(
            n, edges, weights, alpha, roots=roots, allow_forest=allow_forest)
        key = tuple(np.asarray(t.parent_edge).tolist())
        if key in seen:
            starts.append((alpha, t, seen[key]))
            continue
        sc = pricer(t)
        seen[key] = sc
        starts.append((alpha, t, sc))
    n_eval = len(seen)
    prim_sc = starts[0][2]
    best = min(starts, key=lambda x: (x[2][0], x[2][1], x[0]))
    alpha0, tree0, sc0 = best
    payload = sc0[2]
    hp = _head_price(getattr(payload, "summary", {}) or {}, prices)
    est = replace(est, head_price=hp if hp > 0 else est.head_price)
    tree, score, stats = exchange_search(n, edges, weights, tree0, pricer, est, settings=s,
                                         start_score=sc0, budget_used=n_eval)
    info = dict(stats)
    info.update(prim_cost=prim_sc[1], prim_failures=prim_sc[0], prim_payload=prim_sc[2],
                start_alpha=alpha0, start_cost=sc0[1],
                start_costs={a: sc[1] for a, _, sc in starts},
                cost=score[1], failures=score[0], payload=score[2], head_price=est.head_price,
                settings=s)
    return tree, info


# ------------------------------------------------------------------------------ pipeline stage
@dataclass(frozen=True, eq=False)
class WholeCostTree(Tree):
    """A :class:`~mainspan.graph.spanning.Tree` with the record of the search that chose it.

    ``search`` holds what :func:`whole_cost_tree` returns as ``info``, plus
    ``n_candidates_searched``; ``run_info`` reports it.
    """

    search: dict = field(default_factory=dict)


def _searched(tree, search):
    return WholeCostTree(parent=tree.parent, parent_edge=tree.parent_edge, order=tree.order,
                         roots=tree.roots, root_of=tree.root_of, weight=tree.weight,
                         search=search)


def grow_whole_cost(sites, edges, costs, elev, root_idx, prim_sub, keep, *, design=None,
                    terrain_surface=None, sample_spacing_m=None, allow_forest=False,
                    settings=None, system="pressure", progress=None):
    """The whole-cost tree over the passable candidates (``layout="whole-cost"``).

    Parameters
    ----------
    sites : Sites
    edges : ndarray (m, 2)
        All candidates.
    costs : LinkCosts
    elev : ndarray (n,)
        Node elevations (NaN: flat ground, as the design stage assumes).
    root_idx : ndarray of int
    prim_sub : Tree
        Prim's tree over the passable subset ``keep`` (its roots are used).
    keep : ndarray of int
        Indices of the passable candidates.
    design : DesignSettings or dict, optional
    terrain_surface : Surface, optional
        For the ground profile of every candidate (sampled from both ends).
    settings : WholeCostSettings or dict, optional

    Returns
    -------
    Tree over the passable subset, with a ``search`` dict (see
    :func:`whole_cost_tree`, plus ``n_moves`` and ``prim_tree``).
    """
    from ..hydraulics.basis import basis_fields as _basis_fields
    from ..settings import design_settings as _design_settings

    if system != "pressure":
        raise InputError("option --layout whole-cost sizes pressure mains to price each tree; "
                         "add --system pressure (use --layout gravity for gravity mains)")
    if isinstance(settings, dict):
        settings = WholeCostSettings(**settings)
    s = WholeCostSettings() if settings is None else settings
    ds = _design_settings(design, "pressure")
    n = sites.n
    sub = np.asarray(edges, np.int64)[keep]
    w = np.asarray(costs.total, float)[keep]
    comp = costs.components
    length = np.asarray(comp["length_m"], float)[keep]
    surf = np.asarray(comp.get("surface_length_m", comp["length_m"]), float)[keep]
    land = comp.get("land_cost")
    land = None if land is None else np.asarray(land, float)[keep]
    prof = None
    if terrain_surface is not None and len(sub):
        xy = sites.xy
        fwd = terrain_surface.profiles(xy[sub[:, 0]], xy[sub[:, 1]], spacing_m=sample_spacing_m)
        rev = terrain_surface.profiles(xy[sub[:, 1]], xy[sub[:, 0]], spacing_m=sample_spacing_m)
        prof = tuple(tuple(np.asarray(a) for a in p) for p in (fwd, rev))
    kw = {"xy": sites.xy, "elevation_m": np.asarray(elev, float),
          "demand_lps": np.asarray(sites.demand, float), "node_id": np.asarray(sites.node_id),
          "settings": ds}
    # the sites' own design fields, passed exactly as the layout's design step passes them
    cols = {k: np.asarray(getattr(sites, k), float)
            for k in ("area_ha", "runoff_c", "population", "min_pressure_m")
            if getattr(sites, k, None) is not None}
    kw.update(_basis_fields(cols))
    pmin = None
    if "min_pressure_m" in kw:
        own = np.asarray(kw["min_pressure_m"], float)
        pmin = np.where(np.isfinite(own), own, ds.min_pressure_m)
    pricer = DesignPricer("pressure", kw, sub, length, surf, land, prof)
    est = RuleEstimate.from_design(ds, demand_lps=sites.demand, elevation_m=elev,
                                   length_m=surf, land_cost=land, min_pressure_m=pmin)
    tree, info = whole_cost_tree(n, sub, w, np.asarray(prim_sub.roots, np.int64), pricer, est,
                                 settings=s, prim=prim_sub, allow_forest=allow_forest,
                                 prices=ds.price_table())
    info["n_candidates_searched"] = int(len(sub))
    return _searched(tree, info)


def _grade_at_source(summary):
    """(pump head m or None, grade at the source m or None) from a design summary."""
    pump = summary.get("pump")
    head = None
    if isinstance(pump, dict) and pump.get("head_m") is not None:
        head = float(np.max(pump["head_m"]))          # the largest, with several sources
    src = summary.get("source_hgl_m")
    grade = float(np.max(src)) if src is not None and len(src) else None
    return head, grade


def search_run_info(search, design=None):
    """``run_info`` entries saying what a whole-cost layout proves and what it saved.

    Parameters
    ----------
    search : dict
        ``WholeCostTree.search``.
    design : DesignResult, optional
        The chosen layout's own design (its whole-life cost is reported; it
        equals the searched price, the links being handed over the same way).
    """
    s = search["settings"]
    chosen = whole_life_cost(design.summary) if design is not None else search["cost"]
    prim = search["prim_cost"]
    info = {
        "whole_cost_layout": (
            "local optimum under single link exchanges within the neighbourhood searched, not a "
            f"global optimum: started from Prim's tree and Prim-Dijkstra trade-off trees "
            f"(alpha {', '.join(f'{a:g}' for a in sorted(search['start_costs']))}; best start "
            f"alpha {search['start_alpha']:g}); a move adds a candidate link and drops a tree "
            f"link at most {s.max_hops} links from its ends on the cycle; each pass prices the "
            f"{s.per_pass} moves ranked best by a cheap sizing estimate with the full design and "
            "takes each that lowers the whole-life cost without adding a failing check; "
            + ("in the last pass none of them lowered it" if search["converged"] else
               f"stopped at the budget of {s.max_evaluations} designs before convergence")),
        "whole_life_cost": f"{chosen:.3f}",
        "prim_whole_life_cost": f"{prim:.3f}",
        "whole_cost_saving_pct": f"{100 * (prim - chosen) / prim:.2f}" if prim > 0 else "0",
        "prim_failing_checks": str(search["prim_failures"]),
        "whole_cost_start_costs": "; ".join(f"alpha {a:g}: {c:.3f}"
                                           for a, c in sorted(search["start_costs"].items())),
        "whole_cost_passes": str(search["passes"]),
        "whole_cost_exchanges": str(search["accepted"]),
        "whole_cost_designs": str(search["evaluations"]),
        "whole_cost_moves_last_pass": str(search["moves_last_pass"]),
        "whole_cost_converged": str(bool(search["converged"])).lower(),
    }
    ph, pg = _grade_at_source(getattr(search.get("prim_payload"), "summary", {}) or {})
    ch, cg = _grade_at_source(design.summary if design is not None else
                              getattr(search.get("payload"), "summary", {}) or {})
    if ph is not None and ch is not None:
        info["pump_head_m"], info["prim_pump_head_m"] = f"{ch:.3f}", f"{ph:.3f}"
    if pg is not None and cg is not None:
        info["source_grade_m"], info["prim_source_grade_m"] = f"{cg:.3f}", f"{pg:.3f}"
    return info
