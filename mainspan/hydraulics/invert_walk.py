"""Gravity mains: the invert walk from the upstream ends down to the outlet.

Moved from :mod:`mainspan.hydraulics.gravity` (which still exports
:func:`walk_inverts` and :class:`GravityWalk`); the Manning formulas and
minimum grades stay there.

Invert walk
-----------
Links are designed from the upstream ends down to the outlet (children
before parents).  In a gravity tree a link's *upstream* end is its child
node (``to_node``) and its *downstream* end the parent (``from_node``,
nearer the outlet); fields are therefore named ``invert_up_m`` and
``invert_down_m``, never from/to.  For each link and each candidate
diameter D (smallest first, never smaller than a pipe arriving upstream):

1. upstream invert = min(ground − cover − top of pipe at the upstream
   end; every incoming invert − junction drop; every incoming crown − D,
   so the outgoing crown is never above an incoming crown).  Cover is
   measured to the *outside* of the pipe: top = bore + wall;
2. the highest pipe the ground allows (dynamic programme over the profile
   stations, :func:`_highest_inverts`): straight segments no flatter than
   the minimum grade, with cover at every station, the grade breaking
   wherever a dip or crest needs it;
3. D is taken when its minimum grade carries the flow, or when the grade
   that carries it costs no depth at the downstream end;
4. where the grade breaks: the cheapest chain of straight segments
   between the link's two ends (shortest path over profile stations and a
   few depths below the highest pipe, priced by trench and access point,
   :func:`_grade_link`).  An access point sits at every break; the access
   spacing only adds access points on the straight segments, so it never
   moves an invert;
5. optionally a lift station at the upstream node (see
   :func:`walk_inverts`).

The minimum grade for D is the larger of the tabulated minimum slope and
the slope giving the minimum full-pipe velocity.

References
----------
.. [1] Great Lakes–Upper Mississippi River Board, *Recommended Standards for
   Wastewater Facilities*, 2014 -- manholes at most 120 m apart.
"""

from __future__ import annotations

from typing import NamedTuple

import numba
import numpy as np

__all__ = ["walk_inverts", "GravityWalk"]


# ---------------------------------------------------------------------------
# Grade breaks: where along a link the grade changes (an access point each)
# ---------------------------------------------------------------------------
@numba.njit(cache=True)
def _excavation_per_m2(depth_m, band_to_m, band_rate):
    """Banded excavation price of a trench *depth_m* deep per m² of plan."""
    out = 0.0
    top = 0.0
    for b in range(band_to_m.shape[0]):
        if depth_m <= top:
            break
        out += (min(depth_m, band_to_m[b]) - top) * band_rate[b]
        top = band_to_m[b]
    return out


@numba.njit(cache=True)
def _trench_rate(depth_inv_m, extra_m, width_m, band_to_m, band_rate, shore_rate, shore_depth_m):
    """Trench price per metre of length where the invert is *depth_inv_m* below ground."""
    d = max(depth_inv_m + extra_m, 0.0)
    r = width_m * _excavation_per_m2(d, band_to_m, band_rate)
    if d > shore_depth_m:
        r += 2.0 * d * shore_rate
    return r


#: Grade breaks are considered at the profile stations that are the lowest or highest ground within
#: this distance either side (the controlling dips and crests) and, between them, at stations at least
#: this far apart (common practice, no single source: access points closer than ~10 m are not built).
GRADE_BREAK_GAP_M = 10.0


@numba.njit(cache=True)
def _break_candidates(s, g, gap, cand):
    """Mark the stations where the grade may break: both ends, dips, crests, and every *gap* metres."""
    C = s.shape[0]
    lo = 0
    hi = 0
    last = -np.inf
    for k in range(C):
        while s[lo] < s[k] - gap:
            lo += 1
        while hi + 1 < C and s[hi + 1] <= s[k] + gap:
            hi += 1
        is_min = True
        is_max = True
        for t in range(lo, hi + 1):
            if g[t] < g[k] or (g[t] == g[k] and t < k):
                is_min = False
            if g[t] > g[k] or (g[t] == g[k] and t < k):
                is_max = False
        cand[k] = k == 0 or k == C - 1 or is_min or is_max or s[k] - last >= gap
        if cand[k]:
            last = s[k]


@numba.njit(cache=True)
def _highest_inverts(s, bound, iu, floor, cand, H):
    """Highest invert reachable at every candidate station by straight segments from *iu*.

    ``H[j]`` is the highest invert a chain of straight segments, breaking
    only at candidate stations (``cand``), can have at station ``s[j]`` when
    each segment falls at least at *floor* and stays at or below ``bound``
    (the deepest invert that keeps minimum cover) at every station it spans.
    With every station a candidate this is the highest pipe with breaks
    anywhere (the ground is straight between stations).  Dynamic programme
    over (from, to) station pairs, O(C²).  Returns ``H[-1]``.
    """
    C = s.shape[0]
    H[0] = iu
    for j in range(1, C):
        H[j] = -np.inf
    for i in range(C - 1):
        if not cand[i] or H[i] == -np.inf:
            continue
        hi = H[i]
        g = floor
        for j in range(i + 1, C):
            ds = s[j] - s[i]
            need = (hi - bound[j]) / ds
            if need > g:
                g = need
            z = hi - g * ds
            if cand[j] and z > H[j]:
                H[j] = z
    return H[C - 1]


#: Depths below the highest pipe (m) at which a grade break may sit: going a little deeper at a
#: break can save the access points a pipe hugging convex ground would need.
BREAK_LEVELS_M = np.array([0.0, 0.1, 0.2, 0.35, 0.5, 0.75, 1.0, 1.5])


@numba.njit(cache=True)
def _grade_link(s, g, bound, iu, floor, extra_m, width_m, band_to_m, band_rate, shore_rate,
                shore_depth_m, mh_base, mh_per_m, levels, cand, H, cost_to, pred_i, pred_m, inv, brk):
    """Grade one link: the cheapest chain of straight segments between its two pinned ends.

    Stage 1 (:func:`_highest_inverts`) gives the highest invert ``H`` at
    candidate station; the link's ends are pinned at ``H`` (so the nodes are
    as shallow as the ground allows).  Stage 2 is a shortest path over
    (station, level) states: a grade break may sit at any candidate station
    (``cand``: dips, crests and every :data:`GRADE_BREAK_GAP_M`), at ``H``
    or a little deeper (``levels``, m below ``H``).  A straight segment is
    allowed when it falls at least at *floor* and keeps cover over every
    station it spans; it costs its trench (banded excavation and shoring,
    trapezoid rule over the stations, at most 8 sub-spans per segment) and,
    if it ends inside the link, the access point at its end (priced by
    depth).  Ties go to the first state found (lowest station, then
    shallowest level).  The access spacing plays no part: it only adds
    access points on the straight segments afterwards, so a finer spacing
    never changes the pipe.

    Writes ``inv`` (invert at each station) and ``brk`` (grade breaks inside
    the link); returns (price, flattest grade, downstream invert, deepest
    invert below ground).
    """
    C = s.shape[0]
    M = levels.shape[0]
    _highest_inverts(s, bound, iu, floor, cand, H)
    for j in range(C):
        brk[j] = False
        for m in range(M):
            cost_to[j, m] = np.inf
            pred_i[j, m] = -1
            pred_m[j, m] = -1
    cost_to[0, 0] = 0.0
    for i in range(C - 1):
        if not cand[i]:
            continue
        for m in range(M):
            base = cost_to[i, m]
            if base == np.inf:
                continue
            h = H[i] - levels[m]
            di = g[i] - h
            r_i = _trench_rate(di, extra_m, width_m, band_to_m, band_rate, shore_rate, shore_depth_m)
            need = floor
            for j in range(i + 1, C):
                ds = s[j] - s[i]
                stride = max(1, (j - i + 7) // 8)
                n_hi = M if j < C - 1 else 1      # the downstream end is pinned at H
                if not cand[j] or H[j] == -np.inf:
                    n_hi = 0
                for n in range(n_hi):
                    e = H[j] - levels[n]
                    gr = (h - e) / ds
                    if gr < need * (1.0 - 1e-9) - 1e-12:
                        continue                   # too flat: a deeper end is steeper
                    c = 0.0
                    pr = r_i
                    k0 = i
                    while k0 < j:                  # trapezoid over at most 8 sub-spans of the segment
                        k = min(k0 + stride, j)
                        r = _trench_rate(g[k] - (h - gr * (s[k] - s[i])), extra_m, width_m, band_to_m, band_rate,
                                         shore_rate, shore_depth_m)
                        c += 0.5 * (pr + r) * (s[k] - s[k0])
                        pr = r
                        k0 = k
                    dj = g[j] - e
                    if j < C - 1:
                        c += mh_base + mh_per_m * dj
                    tot = base + c
                    if tot < cost_to[j, n] - 1e-12 * abs(tot):
                        cost_to[j, n] = tot
                        pred_i[j, n] = i
                        pred_m[j, n] = m
                # station j is inside every longer segment from (i, m): keep cover over it
                nd = (h - bound[j]) / ds
                if nd > need:
                    need = nd
    flattest = np.inf
    deepest = -np.inf
    j = C - 1
    n = 0
    while j > 0:
        i = pred_i[j, n]
        m = pred_m[j, n]
        h = H[i] - levels[m]
        e = H[j] - levels[n]
        gr = (h - e) / (s[j] - s[i])
        if gr < flattest:
            flattest = gr
        for k in range(i, j + 1):
            inv[k] = h - gr * (s[k] - s[i])
            if g[k] - inv[k] > deepest:
                deepest = g[k] - inv[k]
        if i > 0:
            brk[i] = True
        j = i
        n = m
    return cost_to[C - 1, 0], flattest, H[C - 1], deepest


@numba.njit(cache=True)
def _walk(nodes_up_first, parent, parent_link, ground, prof_off, prof_s, prof_g, q,
          cat_d, cat_top, cat_n, cat_smin, cat_width, cat_extra, cover, drop,
          band_to_m, band_rate, shore_rate, shore_depth_m, mh_base, mh_per_m,
          lift_on, lift_fixed, lift_per_kw, lift_eta, lift_allowance_m, max_depth, levels):  # pragma: no cover - compiled
    n_nodes = parent.shape[0]
    n_links = prof_off.shape[0] - 1
    n_pipes = cat_d.shape[0]
    in_drop = np.full(n_nodes, np.inf)
    in_crown = np.full(n_nodes, np.inf)
    in_low = np.full(n_nodes, np.inf)
    in_pipe = np.zeros(n_nodes, np.int64)
    pipe = np.full(n_links, -1, np.int64)
    inv_up = np.full(n_links, np.nan)
    inv_down = np.full(n_links, np.nan)
    slope = np.full(n_links, np.nan)
    no_pipe = np.zeros(n_links, np.bool_)
    inv_s = np.full(prof_s.shape[0], np.nan)
    brk_s = np.zeros(prof_s.shape[0], np.bool_)
    lift_m = np.zeros(n_nodes)
    lift_head = np.zeros(n_nodes)
    lift_kw = np.zeros(n_nodes)
    st_lift_m = np.zeros(prof_s.shape[0])
    st_lift_kw = np.zeros(prof_s.shape[0])
    max_c = 1
    for k in range(n_links):
        max_c = max(max_c, prof_off[k + 1] - prof_off[k])
    s_w = np.empty(max_c)
    g_w = np.empty(max_c)
    b_w = np.empty(max_c)
    H = np.empty(max_c)
    M = levels.shape[0]
    cost_to = np.empty((max_c, M))
    pred_i = np.empty((max_c, M), np.int64)
    pred_m = np.empty((max_c, M), np.int64)
    inv_w = np.empty(max_c)
    brk_w = np.empty(max_c, np.bool_)
    uid = np.empty(max_c, np.int64)
    cand_w = np.empty(max_c, np.bool_)
    s2_w = np.empty(max_c)
    for v in nodes_up_first:
        k = parent_link[v]
        if k < 0:
            continue
        # the link's stations from its upstream end, coincident stations merged
        C = 0
        a0 = prof_off[k]
        for o in range(prof_off[k + 1] - 1, a0 - 1, -1):
            if C > 0 and prof_s[o] - s_w[C - 1] <= 1e-6:
                g_w[C - 1] = min(g_w[C - 1], prof_g[o])
            else:
                s_w[C] = prof_s[o]
                g_w[C] = prof_g[o]
                C += 1
            uid[o - a0] = C - 1
        s = s_w[:C]
        g = g_w[:C]
        b = b_w[:C]
        cand = cand_w[:C]
        _break_candidates(s, g, GRADE_BREAK_GAP_M, cand)
        qk = q[k]
        # smallest pipe (never smaller than any pipe upstream) that needs no extra depth to carry the flow
        chosen = -1
        floor = 0.0
        for j in range(in_pipe[v], n_pipes):
            d = cat_d[j]
            for u in range(C):
                b[u] = g[u] - cover - cat_top[j]
            iu = min(b[0], in_drop[v], in_crown[v] - d)
            area = np.pi * d * d / 4.0
            s_cap = (qk * cat_n[j] / (area * (d / 4.0) ** (2.0 / 3.0))) ** 2
            if s_cap <= cat_smin[j]:
                chosen = j
                floor = cat_smin[j]
                break
            e0 = _highest_inverts(s, b, iu, cat_smin[j], cand, H[:C])
            e1 = _highest_inverts(s, b, iu, s_cap, cand, H[:C])
            if e1 >= e0 - 1e-9:
                chosen = j
                floor = s_cap
                break
        if chosen < 0:
            # no pipe carries the flow at the grade the ground gives: steepen the one that stays shallowest
            best = -np.inf
            for j in range(in_pipe[v], n_pipes):
                d = cat_d[j]
                for u in range(C):
                    b[u] = g[u] - cover - cat_top[j]
                iu = min(b[0], in_drop[v], in_crown[v] - d)
                area = np.pi * d * d / 4.0
                fl = max(cat_smin[j], (qk * cat_n[j] / (area * (d / 4.0) ** (2.0 / 3.0))) ** 2)
                e1 = _highest_inverts(s, b, iu, fl, cand, H[:C])
                if e1 > best + 1e-12:
                    best = e1
                    chosen = j
                    floor = fl
            no_pipe[k] = True
        j = chosen
        d = cat_d[j]
        for u in range(C):
            b[u] = g[u] - cover - cat_top[j]
        iu = min(b[0], in_drop[v], in_crown[v] - d)
        args_w = cat_width[j]
        extra_m = cat_extra[j]
        cost_g, flat, down, deep_g = _grade_link(s, g, b, iu, floor, extra_m, args_w, band_to_m,
                                                 band_rate, shore_rate, shore_depth_m, mh_base, mh_per_m, levels, cand,
                                                 H[:C], cost_to[:C], pred_i[:C], pred_m[:C], inv_w[:C], brk_w[:C])
        head = b[0] - min(in_low[v], iu) + lift_allowance_m
        kw = 9.81 * qk * head / lift_eta
        if lift_on and qk > 0.0 and b[0] - iu > 1e-6 and (deep_g > max_depth + 1e-9
                                                         or lift_fixed + lift_per_kw * kw < cost_g):
            # lift station at v: pump from the gravity invert (lowest incoming less the drop) to minimum cover
            cost_l, flat_l, down_l, deep_l = _grade_link(s, g, b, b[0], floor, extra_m, args_w, band_to_m,
                                               band_rate, shore_rate, shore_depth_m, mh_base, mh_per_m, levels, cand,
                                               H[:C], cost_to[:C], pred_i[:C], pred_m[:C], inv_w[:C], brk_w[:C])
            cost_l += lift_fixed + lift_per_kw * kw
            if (deep_g > max_depth + 1e-9 and deep_l <= max_depth + 1e-9) or cost_l < cost_g:
                lift_m[v] = b[0] - min(in_low[v], iu)
                lift_head[v] = head
                lift_kw[v] = kw
                iu = b[0]
                cost_g, flat, down, deep_g = cost_l, flat_l, down_l, deep_l
            else:  # grade the gravity option again into the work arrays
                cost_g, flat, down, deep_g = _grade_link(s, g, b, iu, floor, extra_m, args_w, band_to_m,
                                                     band_rate, shore_rate, shore_depth_m, mh_base, mh_per_m, levels, cand,
                                                     H[:C], cost_to[:C], pred_i[:C], pred_m[:C], inv_w[:C], brk_w[:C])
        mid = -1
        mid_lift = 0.0
        if lift_on and qk > 0.0 and deep_g > max_depth + 1e-9 and C > 2:
            # still too deep: a lift station inside the link, at the candidate station where the two
            # gravity parts both stay within the maximum depth for the least price
            best_c = np.inf
            for c in range(1, C - 1):
                if not cand[c]:
                    continue
                ca, _, za, da = _grade_link(s[:c + 1], g[:c + 1], b[:c + 1], iu, floor, extra_m, args_w, band_to_m,
                                            band_rate, shore_rate, shore_depth_m, mh_base, mh_per_m, levels,
                                            cand[:c + 1], H[:c + 1], cost_to[:c + 1], pred_i[:c + 1], pred_m[:c + 1],
                                            inv_w[:c + 1], brk_w[:c + 1])
                if da > max_depth + 1e-9:
                    continue
                for u in range(c, C):
                    s2_w[u - c] = s[u] - s[c]
                cb, _, _, db = _grade_link(s2_w[:C - c], g[c:], b[c:], b[c], floor, extra_m, args_w, band_to_m,
                                           band_rate, shore_rate, shore_depth_m, mh_base, mh_per_m, levels, cand[c:],
                                           H[:C - c], cost_to[:C - c], pred_i[:C - c], pred_m[:C - c], inv_w[c:], brk_w[c:])
                if db > max_depth + 1e-9:
                    continue
                kw_c = 9.81 * qk * (b[c] - za + lift_allowance_m) / lift_eta
                tot = ca + cb + lift_fixed + lift_per_kw * kw_c
                if tot < best_c - 1e-9:
                    best_c = tot
                    mid = c
            if mid >= 0:
                c = mid
                _, fa, za, da = _grade_link(s[:c + 1], g[:c + 1], b[:c + 1], iu, floor, extra_m, args_w, band_to_m,
                                            band_rate, shore_rate, shore_depth_m, mh_base, mh_per_m, levels,
                                            cand[:c + 1], H[:c + 1], cost_to[:c + 1], pred_i[:c + 1], pred_m[:c + 1],
                                            inv_w[:c + 1], brk_w[:c + 1])
                for u in range(c, C):
                    s2_w[u - c] = s[u] - s[c]
                _, fb, down, db = _grade_link(s2_w[:C - c], g[c:], b[c:], b[c], floor, extra_m, args_w, band_to_m,
                                              band_rate, shore_rate, shore_depth_m, mh_base, mh_per_m, levels, cand[c:],
                                              H[:C - c], cost_to[:C - c], pred_i[:C - c], pred_m[:C - c], inv_w[c:],
                                              brk_w[c:])
                flat = min(fa, fb)
                deep_g = max(da, db)
                mid_lift = b[c] - za
                brk_w[c] = False
            else:  # none fits: grade the link whole again into the work arrays the trials overwrote
                cost_g, flat, down, deep_g = _grade_link(s, g, b, iu, floor, extra_m, args_w, band_to_m, band_rate,
                                                         shore_rate, shore_depth_m, mh_base, mh_per_m, levels, cand,
                                                         H[:C], cost_to[:C], pred_i[:C], pred_m[:C], inv_w[:C],
                                                         brk_w[:C])
        for o in range(a0, prof_off[k + 1]):
            inv_s[o] = inv_w[uid[o - a0]]
        # one break flag per merged station: on its first original station
        for o in range(prof_off[k + 1] - 1, a0 - 1, -1):
            u = uid[o - a0]
            if brk_w[u]:
                brk_s[o] = True
                brk_w[u] = False
        if mid >= 0:
            for o in range(prof_off[k + 1] - 1, a0 - 1, -1):
                if uid[o - a0] == mid:        # the station's first original station carries the lift
                    st_lift_m[o] = mid_lift
                    st_lift_kw[o] = 9.81 * qk * (mid_lift + lift_allowance_m) / lift_eta
                    break
        pipe[k] = j
        inv_up[k] = iu
        inv_down[k] = down
        slope[k] = flat
        p = parent[v]
        in_drop[p] = min(in_drop[p], down - drop)
        in_crown[p] = min(in_crown[p], down + d)
        in_low[p] = min(in_low[p], down)
        in_pipe[p] = max(in_pipe[p], j)
    return pipe, inv_up, inv_down, slope, no_pipe, inv_s, brk_s, lift_m, lift_head, lift_kw, st_lift_m, st_lift_kw


class GravityWalk(NamedTuple):
    """Result of :func:`walk_inverts` (arrays; link order as the network's)."""

    pipe: np.ndarray            #: (L,) index into the candidate pipes
    invert_up_m: np.ndarray     #: (L,) invert at the upstream end (to_node)
    invert_down_m: np.ndarray   #: (L,) invert at the downstream end (from_node)
    slope: np.ndarray           #: (L,) flattest segment grade (fraction): it limits the capacity
    no_pipe: np.ndarray         #: (L,) no pipe carries the flow at the grade the ground gives (largest steepened)
    station_invert_m: np.ndarray  #: (S,) invert at each profile station
    station_break: np.ndarray   #: (S,) the grade breaks at this station (an access point)
    lift_m: np.ndarray          #: (n,) static lift of a lift station at the node (0: none)
    lift_head_m: np.ndarray     #: (n,) pump head of that station (lift + allowance)
    lift_kw: np.ndarray         #: (n,) its hydraulic power / efficiency
    station_lift_m: np.ndarray  #: (S,) static lift of a lift station inside a link at this station (0: none)
    station_lift_kw: np.ndarray  #: (S,) its power


def walk_inverts(net, ground_m, profile_offsets, station_up_m, profile_ground_m, flow_m3ps,
                 inner_m, manning_n, slope_min, *, cover_m, drop_m,
                 top_m=None, trench_width_m=None, below_invert_m=0.0, excavation_band_to_m=(np.inf,),
                 excavation_per_m3=(25.0,), shoring_per_m2=0.0, shoring_depth_m=1.5, manhole_base=0.0,
                 manhole_per_m=0.0, lift_fixed=None, lift_per_kw=0.0, lift_efficiency=0.6,
                 lift_allowance_m=1.5, max_depth_m=np.inf) -> GravityWalk:
    """Size gravity links, set their inverts and place their grade breaks, upstream ends first.

    For each link (children before parents) and each candidate pipe D, not
    smaller than any pipe arriving at its upstream node:

    1. upstream invert = min(ground − cover − top of pipe at the upstream
       end; every incoming invert − junction drop; every incoming crown − D,
       so the outgoing crown is never above an incoming crown);
    2. the highest pipe along the link (:func:`_highest_inverts`): grades no
       flatter than the floor, cover kept at every profile station;
    3. D is taken if its minimum grade carries the flow, or if the grade
       that carries it costs no depth at the downstream end; else the next
       D.  If none, the pipe that stays shallowest is steepened to carry the
       flow and ``no_pipe`` is set;
    4. the grade breaks (:func:`_grade_link`): the cheapest chain of
       straight segments between the link's ends at their highest inverts,
       priced by trench (banded excavation, shoring) and access points by
       depth.  The access spacing is not an input: the caller adds access
       points on the straight segments, so a finer spacing never changes
       any invert.
    5. optionally, a lift station at the upstream node when the link would
       be deeper than *max_depth_m* and lifting keeps it within, or when
       the station, its energy and the shallower link cost less than the
       deep link (greedy: the gain further downstream is not counted);
       and if the link is still too deep (a valley or ridge inside it), a
       lift station at the candidate station inside the link where both
       gravity parts stay within *max_depth_m* for the least price.

    Parameters
    ----------
    net : RootedNetwork
        Rooted at the outlet(s).
    ground_m : ndarray, shape (n,)
        Ground level at nodes.
    profile_offsets : ndarray of int64, shape (L + 1,)
    station_up_m : ndarray
        Profile stations measured from each link's *upstream* end (child);
        the largest station of a link is its plan length.
    profile_ground_m : ndarray
        Ground level at the stations.
    flow_m3ps : ndarray, shape (L,)
        Design flow per link.
    inner_m, manning_n, slope_min : ndarray, shape (P,)
        Candidate pipes (ascending inner diameter) and their minimum grades.
    cover_m : float
        Minimum cover over the top of the pipe.
    drop_m : float
        Invert drop across a junction.
    top_m : ndarray, shape (P,), optional
        Invert to the outside top of each pipe (inner + wall); default the
        inner diameter (cover to the inside of the crown).
    trench_width_m : ndarray, shape (P,), optional
        Trench width per pipe, for pricing the grade breaks (default 1 m).
    below_invert_m : float or ndarray, shape (P,)
        Wall and bedding under the invert (trench bottom = invert − this).
    excavation_band_to_m, excavation_per_m3, shoring_per_m2, shoring_depth_m, manhole_base, manhole_per_m
        Prices for choosing grade breaks (see :class:`mainspan.hydraulics.prices.PriceTable`).
    lift_fixed : float or None
        Fixed price of a lift station; None: no lift stations.
    lift_per_kw : float
        Price per kW of a lift station, its energy present value included.
    lift_efficiency : float
        Wire-to-water efficiency of the lift pumps.
    lift_allowance_m : float
        Head above the static lift (losses in the short rising main, wet-well range).
    max_depth_m : float
        Deepest invert allowed below ground.

    Returns
    -------
    GravityWalk
    """
    inner = np.asarray(inner_m, np.float64)
    P = inner.size
    top = inner if top_m is None else np.asarray(top_m, np.float64)
    width = np.ones(P) if trench_width_m is None else np.asarray(trench_width_m, np.float64)
    band_to = np.asarray(excavation_band_to_m, np.float64).copy()
    band_to[np.isinf(band_to)] = 1e9
    nodes_up_first = net.order[::-1].copy()
    out = _walk(nodes_up_first, net.parent, net.parent_link, np.asarray(ground_m, np.float64),
                np.asarray(profile_offsets, np.int64), np.asarray(station_up_m, np.float64),
                np.asarray(profile_ground_m, np.float64), np.asarray(flow_m3ps, np.float64),
                inner, top, np.asarray(manning_n, np.float64), np.asarray(slope_min, np.float64), width,
                np.broadcast_to(np.asarray(below_invert_m, np.float64), (P,)).copy(),
                float(cover_m), float(drop_m),
                band_to, np.asarray(excavation_per_m3, np.float64), float(shoring_per_m2),
                float(shoring_depth_m), float(manhole_base), float(manhole_per_m), lift_fixed is not None,
                0.0 if lift_fixed is None else float(lift_fixed), float(lift_per_kw), float(lift_efficiency),
                float(lift_allowance_m), float(max_depth_m), BREAK_LEVELS_M)
    return GravityWalk(*out)
