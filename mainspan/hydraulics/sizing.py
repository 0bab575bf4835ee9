"""Least-cost sizing of branched pressure mains to the head available.

For a rooted tree with fixed link flows, choose each link's pipe from a
catalog -- allowing two consecutive sizes split along a link -- so that the
sum of pipe and trench costs (plus the present value of pumping energy when
the source head is free) is least, while every node keeps its own minimum
pressure head.

The problem
-----------
Each link ``k`` may use any *admissible* catalog pipe ``p`` (velocity within
limits, pressure class not exceeded) over a fraction ``λ_kp`` of its length;
its head loss is ``Σ_p λ_kp·h_kp`` and its cost ``Σ_p λ_kp·c_kp`` (``h_kp``,
``c_kp``: loss and cost of pipe ``p`` laid over the whole link).  Heads obey
``H_child <= H_parent − loss`` and ``H_v >= req_v``.  This is the classic
linear programme of branched-network sizing (Karmeli, Gadish & Meyers,
1968).  Only the lower convex hull of the points ``(h_kp, c_kp)`` can appear
in an optimum, and on the hull an optimal link uses at most two neighbouring
hull pipes -- the two "consecutive sizes" of the split.

The tree method (:func:`least_cost_tree`)
-----------------------------------------
The least cost ``F_v(H)`` of the subtree below node ``v`` as a function of
the head ``H`` at ``v`` is convex, piecewise linear and non-increasing.  A
link turns its child's function into
``G(H) = min_h φ(h) + F_v(H − h)`` (an infimal convolution with the link's
hull ``φ``): the slope sequences merge in slope order.  A node adds its
children's functions (slopes add on common intervals) and cuts the domain at
its own required head.  Both operations work on one balanced search tree of
segments (a treap keyed by position, with lazy slope updates), the smaller
function merged into the larger, so the whole tree takes
``O(N log² N)`` time in the worst case for ``N`` hull segments and about
linear time on real trees.  Every link records where its hull segments
entered its function; a top-down pass then reads each link's head loss at
the head its parent receives, exactly.

Checked against HiGHS (``scipy.optimize.milp``/``linprog``) in the tests;
:func:`least_cost_highs` is the reference and also solves the variants the
tree method cannot (one pipe per link, non-increasing size downstream).

References
----------
.. [1] I. Karmeli, Y. Gadish, S. Meyers, "Design of optimal water
   distribution networks", J. Pipeline Div. ASCE 94(PL1), 1968 (from memory).
.. [2] J. Labye, "Étude des procédés de calcul ayant pour but de rendre
   minimal le coût d'un réseau de distribution d'eau sous pression",
   La Houille Blanche, 1966 (from memory) -- the discontinuous method,
   whose tree recursion this module generalises.
.. [3] R. Seidel, C. Aragon, "Randomized search trees", Algorithmica 16,
   1996 (treaps).
"""

from __future__ import annotations

from typing import NamedTuple

import numba
import numpy as np

from ..errors import InputError

__all__ = [
    "SIZING_METHODS",
    "LeastCostResult",
    "link_hulls",
    "least_cost_tree",
    "least_cost_highs",
    "merge_trees",
    "tree_objectives",
    "korteweg_wave_speed_mps",
    "joukowsky_head_m",
    "surge_head_m",
    "material_modulus_pa",
    "WATER_BULK_MODULUS_PA",
]

#: Sizing rules :func:`mainspan.hydraulics.design_network` offers.
SIZING_METHODS = ("least-cost", "rule")

#: Bulk modulus of water, Pa (2.2 GPa at about 20 °C; from memory, any hydraulics text).
WATER_BULK_MODULUS_PA = 2.2e9

# Elastic moduli for the Korteweg wave speed, Pa, by material name prefix.
# PE100 1.1 GPa and PVC 3 GPa are short-term values (from memory); ductile
# iron 170 GPa, steel 207 GPa, concrete 30 GPa, GRP 20 GPa (from memory,
# common handbook values).  Longest prefix wins; matching ignores case.
_MODULI_PA = {
    "pe100": 1.1e9, "pe80": 0.8e9, "pe": 1.0e9, "hdpe": 1.0e9, "pvc-o": 4.0e9, "pvco": 4.0e9,
    "pvc": 3.0e9, "upvc": 3.0e9, "ductile": 170e9, "di": 170e9, "cast iron": 100e9,
    "steel": 207e9, "concrete": 30e9, "grp": 20e9, "frp": 20e9, "aluminium": 70e9,
    "aluminum": 70e9, "ac": 24e9, "asbestos": 24e9, "copper": 110e9,
}

_TOL_M = 1e-9  # position snap for split points, metres of head


# ---------------------------------------------------------------------------
# surge: Joukowsky with the Korteweg wave speed
# ---------------------------------------------------------------------------

def material_modulus_pa(material):
    """Elastic modulus of pipe wall materials by name (longest known prefix).

    Raises
    ------
    InputError
        When a name matches no known material; the message lists them.
    """
    mats = np.atleast_1d(np.asarray(material, dtype=object))
    out = np.empty(mats.size)
    keys = sorted(_MODULI_PA, key=len, reverse=True)
    for i, m in enumerate(mats):
        name = str(m).strip().lower()
        hit = next((k for k in keys if name.startswith(k)), None)
        if hit is None:
            raise InputError(
                f"pipe material '{m}' has no known elastic modulus for the surge check; give a "
                f"'modulus_gpa' column in the catalog or use one of {', '.join(sorted(_MODULI_PA))}")
        out[i] = _MODULI_PA[hit]
    return out


def korteweg_wave_speed_mps(inner_mm, wall_mm, modulus_pa, *, bulk_modulus_pa=WATER_BULK_MODULUS_PA,
                            density_kgpm3=998.2):
    """Pressure wave speed in a thin-walled elastic pipe (Korteweg).

    ``a = 1 / sqrt(ρ (1/K + D/(E e)))`` with ``D`` the bore and ``e`` the wall.

    Examples
    --------
    PE100 SDR11 110 mm (bore 90 mm, wall 10 mm, D/e = 9), water K = 2.2 GPa,
    E = 1.1 GPa: a ≈ 340 m/s.

    >>> round(float(korteweg_wave_speed_mps(90.0, 10.0, 1.1e9, density_kgpm3=1000.0)))
    340
    """
    d = np.asarray(inner_mm, dtype=np.float64)
    e = np.asarray(wall_mm, dtype=np.float64)
    return 1.0 / np.sqrt(density_kgpm3 * (1.0 / bulk_modulus_pa + d / (np.asarray(modulus_pa, float) * e)))


def joukowsky_head_m(wave_speed_mps, dv_mps, g=9.80665):
    """Joukowsky head rise ``ΔH = a·ΔV/g`` for a sudden change of velocity.

    Examples
    --------
    >>> round(float(joukowsky_head_m(340.0, 1.34)), 1)
    46.5
    """
    return np.asarray(wave_speed_mps, float) * np.asarray(dv_mps, float) / g


def surge_head_m(wave_speed_mps, velocity_mps, pipeline_length_m, closing_time_s=None, g=9.80665):
    """Surge head for stopping the flow, to add to the static head for the class check.

    With no closing time (``None``) the closure is taken as sudden: the full
    Joukowsky rise ``a·V/g``.  A closure slower than the pipeline's period
    ``2L/a`` is scaled by ``(2L/a)/t_c``, i.e. ``ΔH = 2 L V/(g t_c)`` --
    Michaud's formula for slow closure, the usual hand rule (common practice,
    no single source; it is not a transient analysis).  ``L`` is the length
    of main between the closing valve and the source, where the wave
    reflects.
    """
    a = np.asarray(wave_speed_mps, float)
    dh = joukowsky_head_m(a, velocity_mps, g)
    if closing_time_s is None:
        return dh
    period = 2.0 * np.asarray(pipeline_length_m, float) / a
    return dh * np.minimum(1.0, period / float(closing_time_s))


# ---------------------------------------------------------------------------
# link hulls
# ---------------------------------------------------------------------------

@numba.njit(cache=True)
def _hulls(loss, cost, ok):  # pragma: no cover - compiled
    L, P = loss.shape
    off = np.zeros(L + 1, np.int64)
    hp = np.empty(L * P, np.int64)
    hh = np.empty(L * P)
    hc = np.empty(L * P)
    idx = np.empty(P, np.int64)
    stk = np.empty(P, np.int64)
    pos = 0
    for k in range(L):
        m = 0
        for p in range(P):
            if ok[k, p]:
                idx[m] = p
                m += 1
        # sort the admissible pipes by (loss, cost, catalog index): insertion sort, P is small
        for a in range(1, m):
            v = idx[a]
            b = a - 1
            while b >= 0 and (loss[k, idx[b]] > loss[k, v] or
                              (loss[k, idx[b]] == loss[k, v] and cost[k, idx[b]] > cost[k, v])):
                idx[b + 1] = idx[b]
                b -= 1
            idx[b + 1] = v
        top = 0
        for a in range(m):
            p = idx[a]
            if top > 0 and loss[k, stk[top - 1]] == loss[k, p]:
                continue  # same loss, dearer (sorted): never better
            if top > 0 and cost[k, p] >= cost[k, stk[top - 1]]:
                continue  # more loss, no cheaper: dominated
            # keep the hull lower-convex: drop the last point while it lies on or above the chord
            while top >= 2:
                p1 = stk[top - 2]
                p2 = stk[top - 1]
                cross = ((loss[k, p2] - loss[k, p1]) * (cost[k, p] - cost[k, p1])
                         - (cost[k, p2] - cost[k, p1]) * (loss[k, p] - loss[k, p1]))
                if cross <= 0.0:
                    top -= 1
                else:
                    break
            stk[top] = p
            top += 1
        for a in range(top):
            hp[pos] = stk[a]
            hh[pos] = loss[k, stk[a]]
            hc[pos] = cost[k, stk[a]]
            pos += 1
        off[k + 1] = pos
    return off, hp[:pos], hh[:pos], hc[:pos]


def link_hulls(loss_m, cost, admissible):
    """Lower convex, decreasing hull of (head loss, cost) per link over its admissible pipes.

    Parameters
    ----------
    loss_m, cost : ndarray, shape (L, P)
        Head loss and cost of each catalog pipe laid over each whole link.
    admissible : ndarray of bool, shape (L, P)
        Pipes allowed on each link (at least one per link).

    Returns
    -------
    offsets : int64 (L + 1,)
    pipe, loss_m, cost : arrays in CSR order; per link, ascending loss and descending cost.

    Examples
    --------
    Three pipes; the middle one lies above the chord of the others and drops out.

    >>> off, p, h, c = link_hulls(np.array([[1.0, 2.0, 3.0]]), np.array([[10.0, 8.0, 2.0]]),
    ...                           np.ones((1, 3), bool))
    >>> p.tolist(), h.tolist(), c.tolist()
    ([0, 2], [1.0, 3.0], [10.0, 2.0])
    """
    loss = np.ascontiguousarray(loss_m, dtype=np.float64)
    cost = np.ascontiguousarray(cost, dtype=np.float64)
    ok = np.ascontiguousarray(admissible, dtype=np.bool_)
    if loss.shape != cost.shape or loss.shape != ok.shape:
        raise InputError("link_hulls: loss_m, cost and admissible must have the same (L, P) shape")
    empty = np.flatnonzero(~ok.any(axis=1))
    if empty.size:
        raise InputError(f"link {int(empty[0])} has no admissible pipe; allow at least one pipe per link")
    return _hulls(loss, cost, ok)


# ---------------------------------------------------------------------------
# the treap of segments (numba)
# ---------------------------------------------------------------------------
# Node arrays: ln length, sl slope, lc/rc children, pr priority, cnt size,
# sln sum of lengths, sls sum of length*slope, lz pending slope add for the children.

@numba.njit(cache=True)
def _prio(i):  # pragma: no cover - compiled
    """A deterministic pseudo-random priority for node i (splitmix64 of its id)."""
    z = np.uint64(i) + np.uint64(0x9E3779B97F4A7C15)
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    z = z ^ (z >> np.uint64(31))
    return float(z >> np.uint64(11)) * (1.0 / 9007199254740992.0)


@numba.njit(cache=True, inline="always")
def _apply(sl, sls, sln, lz, i, c):  # pragma: no cover - compiled
    if i >= 0:
        sl[i] += c
        sls[i] += c * sln[i]
        lz[i] += c


@numba.njit(cache=True, inline="always")
def _push(sl, sls, sln, lz, lc, rc, i):  # pragma: no cover - compiled
    c = lz[i]
    if c != 0.0:
        _apply(sl, sls, sln, lz, lc[i], c)
        _apply(sl, sls, sln, lz, rc[i], c)
        lz[i] = 0.0


@numba.njit(cache=True, inline="always")
def _pull(ln, sl, lc, rc, cnt, sln, sls, i):  # pragma: no cover - compiled
    a = lc[i]
    b = rc[i]
    c = 1
    s = ln[i]
    t = ln[i] * sl[i]
    if a >= 0:
        c += cnt[a]
        s += sln[a]
        t += sls[a]
    if b >= 0:
        c += cnt[b]
        s += sln[b]
        t += sls[b]
    cnt[i] = c
    sln[i] = s
    sls[i] = t


@numba.njit(cache=True)
def _join(ln, sl, lc, rc, pr, cnt, sln, sls, lz, path, a, b):  # pragma: no cover - compiled
    """Concatenate treaps a (all before) and b."""
    if a < 0:
        return b
    if b < 0:
        return a
    root = -1
    parent = -1
    side = 0
    top = 0
    while a >= 0 and b >= 0:
        if pr[a] > pr[b]:
            _push(sl, sls, sln, lz, lc, rc, a)
            x = a
            nxt_side = 1
        else:
            _push(sl, sls, sln, lz, lc, rc, b)
            x = b
            nxt_side = 0
        if parent < 0:
            root = x
        elif side == 1:
            rc[parent] = x
        else:
            lc[parent] = x
        path[top] = x
        top += 1
        parent = x
        side = nxt_side
        if nxt_side == 1:
            a = rc[x]
        else:
            b = lc[x]
    rest = a if a >= 0 else b
    if side == 1:
        rc[parent] = rest
    else:
        lc[parent] = rest
    for t in range(top - 1, -1, -1):
        _pull(ln, sl, lc, rc, cnt, sln, sls, path[t])
    return root


@numba.njit(cache=True)
def _split_slope(ln, sl, lc, rc, pr, cnt, sln, sls, lz, path, t, sigma):  # pragma: no cover - compiled
    """Split into (slope < sigma, slope >= sigma); slopes are non-decreasing along the sequence."""
    lroot = -1
    rroot = -1
    la = -1
    ra = -1
    top = 0
    while t >= 0:
        _push(sl, sls, sln, lz, lc, rc, t)
        path[top] = t
        top += 1
        if sl[t] < sigma:
            if la < 0:
                lroot = t
            else:
                rc[la] = t
            la = t
            t = rc[t]
        else:
            if ra < 0:
                rroot = t
            else:
                lc[ra] = t
            ra = t
            t = lc[t]
    if la >= 0:
        rc[la] = -1
    if ra >= 0:
        lc[ra] = -1
    for i in range(top - 1, -1, -1):
        _pull(ln, sl, lc, rc, cnt, sln, sls, path[i])
    return lroot, rroot


@numba.njit(cache=True)
def _split_pos(ln, sl, lc, rc, pr, cnt, sln, sls, lz, path, t, p, nxt):  # pragma: no cover - compiled
    """Split off the first p units of length, cutting a segment if needed (new node id nxt)."""
    if t < 0:
        return -1, -1, nxt
    if p <= _TOL_M:
        return -1, t, nxt
    if p >= sln[t] - _TOL_M:
        return t, -1, nxt
    lroot = -1
    rroot = -1
    la = -1
    ra = -1
    cut = -1
    top = 0
    while t >= 0:
        _push(sl, sls, sln, lz, lc, rc, t)
        path[top] = t
        top += 1
        a = lc[t]
        left = sln[a] if a >= 0 else 0.0
        if p <= left + _TOL_M:
            if ra < 0:
                rroot = t
            else:
                lc[ra] = t
            ra = t
            t = a
        elif p >= left + ln[t] - _TOL_M:
            if la < 0:
                lroot = t
            else:
                rc[la] = t
            la = t
            p -= left + ln[t]
            t = rc[t]
        else:
            # cut t: its first part stays in t (left side); the rest becomes a new single node u
            # joined in front of the right side afterwards (a fresh priority keeps the treap balanced)
            u = nxt
            nxt += 1
            ln[u] = ln[t] - (p - left)
            ln[t] = p - left
            sl[u] = sl[t]
            pr[u] = _prio(u)
            lz[u] = 0.0
            lc[u] = -1
            rc[u] = -1
            tail = rc[t]
            rc[t] = -1
            if la < 0:
                lroot = t
            else:
                rc[la] = t
            la = t
            if ra < 0:
                rroot = tail
            else:
                lc[ra] = tail
            cut = u
            break
    if la >= 0:
        rc[la] = -1
    if ra >= 0 and cut < 0:
        lc[ra] = -1
    for i in range(top - 1, -1, -1):
        _pull(ln, sl, lc, rc, cnt, sln, sls, path[i])
    if cut >= 0:
        _pull(ln, sl, lc, rc, cnt, sln, sls, cut)
        rroot = _join(ln, sl, lc, rc, pr, cnt, sln, sls, lz, path, cut, rroot)
    return lroot, rroot, nxt


@numba.njit(cache=True)
def _grow_rows(a, cap):  # pragma: no cover - compiled
    out = np.zeros((cap, a.shape[1]), a.dtype)
    out[: a.shape[0]] = a
    return out


@numba.njit(cache=True)
def _inorder(ln, sl, lc, rc, lz, sls, sln, t, out_l, out_s, stack):  # pragma: no cover - compiled
    """Segments of treap t in order into out_l/out_s; returns their number."""
    m = 0
    top = 0
    x = t
    while x >= 0 or top > 0:
        while x >= 0:
            _push(sl, sls, sln, lz, lc, rc, x)
            stack[top] = x
            top += 1
            x = lc[x]
        top -= 1
        x = stack[top]
        out_l[m] = ln[x]
        out_s[m] = sl[x]
        m += 1
        x = rc[x]
    return m


@numba.njit(cache=True)
def _tree_dp(n, order, parent, parent_link, choff, children, is_root, req,
             hoff, hh, hc, root_head, root_weight, root_cap, n_seg_max, n_max, floor_slope, active):  # pragma: no cover - compiled
    """Bottom-up over ``order`` reversed (a preorder: each tree contiguous, roots first), then top-down.

    ``n_seg_max``/``n_max``: hull segments and nodes of the largest tree (sizes the node arrays).
    ``floor_slope``: per node, segments steeper than this are folded into the function's start
    (``-inf``: none); only valid where the root's head is free, priced and not capped.
    ``active``: per node, solve its tree (outputs of the other trees are left NaN/zero).
    """
    L = hoff.size - 1
    cap = max(64, 4 * n_seg_max + 4 * n_max + 64)
    # one row per treap node (all its fields side by side): a node visit touches one or two
    # cache lines instead of nine, which is most of the time on large trees
    F = np.zeros((cap, 6))
    I = np.empty((cap, 3), np.int64)
    ln = F[:, 0]
    sl = F[:, 1]
    lz = F[:, 2]
    sln = F[:, 3]
    sls = F[:, 4]
    pr = F[:, 5]
    lc = I[:, 0]
    rc = I[:, 1]
    cnt = I[:, 2]
    path = np.empty(8192, np.int64)
    nxt = 0
    Tn = np.full(n, -1, np.int64)
    X0 = np.zeros(n)
    F0 = np.zeros(n)
    pstart = np.full(hh.size, np.inf)
    gl = np.empty(16)
    gs = np.empty(16)
    stack = np.empty(16, np.int64)
    root_min = np.full(n, np.nan)
    root_cost = np.full(n, np.nan)
    root_H = np.full(n, np.nan)
    feasible = np.ones(n, np.bool_)
    for idx in range(n - 1, -1, -1):
        u = order[idx]
        if not active[u]:
            continue
        c0 = choff[u]
        c1 = choff[u + 1]
        T = -1
        x0 = req[u]
        f0 = 0.0
        if c1 > c0:
            best = -1
            bc = -1
            for j in range(c0, c1):
                v = children[j]
                cv = cnt[Tn[v]] if Tn[v] >= 0 else 0
                if cv > bc:
                    bc = cv
                    best = v
            T = Tn[best]
            x0 = X0[best]
            f0 = F0[best]
            for j in range(c0, c1):
                v = children[j]
                if v == best:
                    continue
                tv = Tn[v]
                m = cnt[tv] if tv >= 0 else 0
                if m > gl.size:
                    gl = np.empty(2 * m)
                    gs = np.empty(2 * m)
                    stack = np.empty(2 * m, np.int64)
                if m > 0:
                    m = _inorder(ln, sl, lc, rc, lz, sls, sln, tv, gl, gs, stack)
                xg = X0[v]
                fg = F0[v]
                j0 = 0
                if xg > x0:
                    A, B, nxt = _split_pos(ln, sl, lc, rc, pr, cnt, sln, sls, lz, path, T, xg - x0, nxt)
                    if A >= 0:
                        f0 += sls[A]
                    T = B
                    x0 = xg
                elif x0 > xg:
                    need = x0 - xg
                    while j0 < m and need > _TOL_M:
                        if gl[j0] <= need + _TOL_M:
                            fg += gl[j0] * gs[j0]
                            need -= gl[j0]
                            j0 += 1
                        else:
                            fg += need * gs[j0]
                            gl[j0] -= need
                            need = 0.0
                f0 += fg
                if nxt + 2 * (m - j0) + 4 > cap:
                    cap = max(2 * cap, nxt + 2 * (m - j0) + 4)
                    F = _grow_rows(F, cap)
                    I = _grow_rows(I, cap)
                    ln = F[:, 0]
                    sl = F[:, 1]
                    lz = F[:, 2]
                    sln = F[:, 3]
                    sls = F[:, 4]
                    pr = F[:, 5]
                    lc = I[:, 0]
                    rc = I[:, 1]
                    cnt = I[:, 2]
                rest = T
                Tnew = -1
                for jj in range(j0, m):
                    A, rest, nxt = _split_pos(ln, sl, lc, rc, pr, cnt, sln, sls, lz, path, rest, gl[jj], nxt)
                    got = 0.0
                    if A >= 0:
                        got = sln[A]
                        _apply(sl, sls, sln, lz, A, gs[jj])
                        Tnew = _join(ln, sl, lc, rc, pr, cnt, sln, sls, lz, path, Tnew, A)
                    if gl[jj] - got > _TOL_M:
                        # beyond the end of T (slope 0 there): g's segment alone
                        w = nxt
                        nxt += 1
                        pr[w] = _prio(w)
                        ln[w] = gl[jj] - got
                        sl[w] = gs[jj]
                        lz[w] = 0.0
                        lc[w] = -1
                        rc[w] = -1
                        _pull(ln, sl, lc, rc, cnt, sln, sls, w)
                        Tnew = _join(ln, sl, lc, rc, pr, cnt, sln, sls, lz, path, Tnew, w)
                T = _join(ln, sl, lc, rc, pr, cnt, sln, sls, lz, path, Tnew, rest)
        # the node's own required head
        if nxt + 2 > cap:
            cap = 2 * cap
            F = _grow_rows(F, cap)
            I = _grow_rows(I, cap)
            ln = F[:, 0]
            sl = F[:, 1]
            lz = F[:, 2]
            sln = F[:, 3]
            sls = F[:, 4]
            pr = F[:, 5]
            lc = I[:, 0]
            rc = I[:, 1]
            cnt = I[:, 2]
        if req[u] > x0:
            A, B, nxt = _split_pos(ln, sl, lc, rc, pr, cnt, sln, sls, lz, path, T, req[u] - x0, nxt)
            if A >= 0:
                f0 += sls[A]
            T = B
            x0 = req[u]
        if floor_slope[u] > -np.inf and T >= 0:
            # head bought dearer than the source's energy price is always bought: fold the leading
            # segments steeper than the floor into the start (keeps the function short)
            A, B = _split_slope(ln, sl, lc, rc, pr, cnt, sln, sls, lz, path, T, floor_slope[u])
            if A >= 0:
                x0 += sln[A]
                f0 += sls[A]
            T = B
        if is_root[u]:
            # the whole tree below this root is done: choose its head and price it, then reuse the
            # node arrays for the next tree (``order`` is a preorder, so each tree is one run of it
            # and the working set stays the size of one tree, not of the whole forest)
            m = cnt[T] if T >= 0 else 0
            if m > gl.size:
                gl = np.empty(m)
                gs = np.empty(m)
                stack = np.empty(m, np.int64)
            if m > 0:
                m = _inorder(ln, sl, lc, rc, lz, sls, sln, T, gl, gs, stack)
            root_min[u] = x0
            if np.isfinite(root_head[u]):
                h = root_head[u]
                if h < x0 - 1e-9 * max(1.0, abs(x0)):
                    feasible[u] = False
                    h = x0
            else:
                h = x0
                for j in range(m):
                    if gs[j] >= -root_weight[u]:
                        break
                    h += gl[j]
                if h > root_cap[u]:
                    h = max(root_cap[u], x0)
                    if root_cap[u] < x0 - 1e-9 * max(1.0, abs(x0)):
                        feasible[u] = False
            c = f0
            pos = x0
            for j in range(m):
                if pos >= h:
                    break
                c += gs[j] * min(gl[j], h - pos)
                pos += gl[j]
            root_H[u] = h
            root_cost[u] = c
            nxt = 0
            continue
        k = parent_link[u]
        a0 = hoff[k]
        a1 = hoff[k + 1]
        x0 += hh[a0]
        f0 += hc[a0]
        if nxt + (a1 - a0) + 2 > cap:
            cap = max(2 * cap, nxt + (a1 - a0) + 2)
            F = _grow_rows(F, cap)
            I = _grow_rows(I, cap)
            ln = F[:, 0]
            sl = F[:, 1]
            lz = F[:, 2]
            sln = F[:, 3]
            sls = F[:, 4]
            pr = F[:, 5]
            lc = I[:, 0]
            rc = I[:, 1]
            cnt = I[:, 2]
        for i in range(a0, a1 - 1):
            dl = hh[i + 1] - hh[i]
            s = (hc[i + 1] - hc[i]) / dl
            A, B = _split_slope(ln, sl, lc, rc, pr, cnt, sln, sls, lz, path, T, s)
            pstart[i] = x0 + (sln[A] if A >= 0 else 0.0)
            w = nxt
            nxt += 1
            pr[w] = _prio(w)
            ln[w] = dl
            sl[w] = s
            lz[w] = 0.0
            lc[w] = -1
            rc[w] = -1
            _pull(ln, sl, lc, rc, cnt, sln, sls, w)
            T = _join(ln, sl, lc, rc, pr, cnt, sln, sls, lz, path, A, w)
            T = _join(ln, sl, lc, rc, pr, cnt, sln, sls, lz, path, T, B)
        Tn[u] = T
        X0[u] = x0
        F0[u] = f0
    H = root_H.copy()
    # top-down: each link's head loss at the head its parent receives
    hl = np.zeros(L)
    for idx in range(n):
        u = order[idx]
        if is_root[u] or not active[u]:
            continue
        k = parent_link[u]
        hu = H[parent[u]]
        a0 = hoff[k]
        h = hh[a0]
        for i in range(a0, hoff[k + 1] - 1):
            d = hu - pstart[i]
            if d > 0.0:
                h += min(d, hh[i + 1] - hh[i])
        hl[k] = h
        H[u] = hu - h
    return H, hl, root_min, root_cost, feasible


@numba.njit(cache=True)
def _pieces(hoff, hp, hh, hl):  # pragma: no cover - compiled
    L = hoff.size - 1
    p1 = np.empty(L, np.int64)
    p2 = np.full(L, -1, np.int64)
    f2 = np.zeros(L)
    for k in range(L):
        a0 = hoff[k]
        a1 = hoff[k + 1]
        h = hl[k]
        p1[k] = hp[a0]
        for i in range(a0, a1 - 1):
            if h <= hh[i]:
                break
            if h >= hh[i + 1]:
                p1[k] = hp[i + 1]
                continue
            t = (h - hh[i]) / (hh[i + 1] - hh[i])
            p1[k] = hp[i]
            p2[k] = hp[i + 1]
            f2[k] = t
            break
    return p1, p2, f2


class LeastCostResult(NamedTuple):
    """A least-cost sizing (arrays over links L and nodes n).

    ``pipe`` is used over the fraction ``1 − fraction_2`` of each link at its
    upstream end and ``pipe_2`` (−1: none) over ``fraction_2`` at its
    downstream end; ``pipe`` always has the lower head loss (the larger bore).
    """

    pipe: np.ndarray
    pipe_2: np.ndarray
    fraction_2: np.ndarray
    loss_m: np.ndarray  #: head loss over each link with the chosen pipes
    head_m: np.ndarray  #: head allotted to each node (>= its requirement when feasible)
    root_head_m: np.ndarray  #: chosen head at each root, in the order of ``roots``
    root_min_head_m: np.ndarray  #: least head at each root that can meet every requirement
    feasible: np.ndarray  #: per root: requirements met within the head given or allowed
    cost: float  #: Σ link costs (pipe + trench), without energy
    objective: float  #: cost + Σ root_weight × root head (energy present value)


def _root_arrays(net, root_head, root_weight, root_cap):
    n = net.n_nodes
    R = net.roots.size

    def per_root(x, default):
        a = np.full(R, default, np.float64) if x is None else np.broadcast_to(np.asarray(x, np.float64), (R,)).copy()
        out = np.full(n, default, np.float64)
        out[net.roots] = a
        return out

    head = per_root(root_head, np.nan)
    weight = per_root(root_weight, 0.0)
    cap = per_root(root_cap, np.inf)
    if np.any(weight < 0):
        raise InputError("root_weight (energy present value per m of head) must be >= 0")
    return head, weight, cap


def least_cost_tree(net, loss_m, cost, admissible, req_head_m, *, root_head_m=None, root_weight=None,
                    root_cap_m=None, solve_roots=None, previous=None) -> LeastCostResult:
    """Exact least-cost sizing with split links by the tree method (see module notes).

    Parameters
    ----------
    net : RootedNetwork
    loss_m, cost : ndarray, shape (L, P)
        Head loss and cost (pipe + trench) of catalog pipe p over the whole of link k.
    admissible : ndarray of bool, shape (L, P)
    req_head_m : ndarray, shape (n,)
        Least hydraulic head (m above datum) each node must receive.
    root_head_m : None, float or array (one per root), default=None
        Given head at each root; NaN or None: free (chosen by the method).
    root_weight : None, float or array, default=None
        Cost per metre of root head (energy present value × flow), for free roots.
    root_cap_m : None, float or array, default=None
        Highest head a free root may take (pressure class), m above datum.
    solve_roots : None or array of bool (one per root), default=None
        Solve only these roots' trees; the others are copied from ``previous``
        (the trees of a forest are independent problems).
    previous : LeastCostResult, default=None
        Result on the same network the unsolved trees are taken from.

    Returns
    -------
    LeastCostResult

    Examples
    --------
    Two links in a row, two pipes: a large one (loss 1 m, cost 10) and a small
    one (loss 3 m, cost 4) per link; 4 m of head to spend: one link large and
    the other small (or any mix losing 4 m) at cost 10 + 4 = 14.

    >>> from mainspan.graph.network import rooted_network
    >>> net = rooted_network(3, [0, 1], [1, 2], roots=[0])
    >>> loss = np.array([[1.0, 3.0], [1.0, 3.0]]); cost = np.array([[10.0, 4.0], [10.0, 4.0]])
    >>> r = least_cost_tree(net, loss, cost, np.ones((2, 2), bool), np.array([0.0, 0.0, 0.0]), root_head_m=4.0)
    >>> round(r.cost, 9), bool(r.feasible[0])
    (14.0, True)
    """
    loss = np.ascontiguousarray(loss_m, dtype=np.float64)
    cst = np.ascontiguousarray(cost, dtype=np.float64)
    L = net.n_links
    if loss.shape[0] != L:
        raise InputError(f"least_cost_tree: loss_m has {loss.shape[0]} rows for {L} links")
    n, R = net.n_nodes, net.roots.size
    hoff, hp, hh, hc = link_hulls(loss, cst, admissible)
    head, weight, cap = _root_arrays(net, root_head_m, root_weight, root_cap_m)
    req = np.ascontiguousarray(req_head_m, dtype=np.float64)
    is_root = np.zeros(n, np.bool_)
    is_root[net.roots] = True
    r = net.roots
    pos = np.empty(n, np.int64)
    pos[r] = np.arange(R)
    todo = np.ones(R, bool) if solve_roots is None else np.asarray(solve_roots, bool).copy()
    if previous is None:
        if not todo.all():
            raise InputError("least_cost_tree: solve_roots leaves trees unsolved; pass the previous result")
        H, hl, rmin, feas = np.full(n, np.nan), np.zeros(L), np.full(n, np.nan), np.ones(n, bool)
        p1, p2, f2 = np.zeros(L, np.int64), np.full(L, -1, np.int64), np.zeros(L)
    else:
        H, hl = previous.head_m.copy(), previous.loss_m.copy()
        rmin, feas = np.full(n, np.nan), np.ones(n, bool)
        rmin[r], feas[r] = previous.root_min_head_m, previous.feasible
        p1, p2, f2 = previous.pipe.copy(), previous.pipe_2.copy(), previous.fraction_2.copy()
    tree_of_link = pos[net.root_of[net.to_node]] if L else np.zeros(0, np.int64)

    def take(done, dH, dhl, dfeas, off, pp, hh_):
        """Copy the trees in ``done`` (per root) from one solve into the result arrays."""
        nodes = done[pos[net.root_of]]
        links = done[tree_of_link]
        H[nodes] = dH[nodes]
        feas[nodes] = dfeas[nodes]
        if links.any():
            q1, q2, g2 = _pieces(off, pp, hh_, dhl)
            hl[links], p1[links], p2[links], f2[links] = dhl[links], q1[links], q2[links], g2[links]

    free = todo & np.isnan(head[r])
    least = _least_head(net, hoff, hh, req)
    # a tree whose least head (largest admissible pipes) is above its cap cannot be served: its
    # first folded answer (the cheapest sizing at the head it needs) is kept, marked infeasible
    with np.errstate(invalid="ignore"):
        hopeless = free & (least[r] > cap[r] + 1e-9 * np.maximum(1.0, np.abs(cap[r])))
    for k in range(3):
        if not (L and free.any()):
            break
        # Free heads: at the optimum no node's head is worth more per metre than its source's
        # (the node prices of the dual add up along the tree to the source's), and a source's price
        # is its energy price w unless its cap binds.  So segments steeper than the source's price
        # are bought in full -- dropped from the link hulls and folded into each node's function as
        # it is built.  Below the fold every slope is steeper than the price, so the folded function
        # is exact wherever its slope is gentler (slopes are <= 0 and add up).  A tree's answer stands
        # when its folded start is within its cap (its optimum lies where the function is exact);
        # otherwise it is solved again with a price 16 times higher, and in full after two tries.
        price = weight[r] if k == 0 else np.maximum(weight[r], 1.0) * 16.0 ** k
        price_n = price[pos[net.root_of]]
        w_link = np.where(free[tree_of_link], price_n[net.to_node], np.inf)
        ph = _prune_hulls(hoff, hp, hh, hc, w_link)
        act = free[pos[net.root_of]]
        dH, dhl, _, _, dfeas = _tree_dp(n, net.preorder, net.parent, net.parent_link, net.children_offsets,
                                        net.children, is_root, req, ph[0], ph[2], ph[3], head, weight, cap,
                                        *_largest_tree(net, ph[0], act), -price_n, act)
        done = free & (dfeas[r] | hopeless)
        take(done, dH, dhl, dfeas, ph[0], ph[1], ph[2])
        rmin[r[done]] = least[r[done]]
        todo &= ~done
        free &= ~done
    if L and todo.any():
        act = todo[pos[net.root_of]]
        dH, dhl, dmin, _, dfeas = _tree_dp(n, net.preorder, net.parent, net.parent_link, net.children_offsets,
                                           net.children, is_root, req, hoff, hh, hc, head, weight, cap,
                                           *_largest_tree(net, hoff, act), np.full(n, -np.inf), act)
        take(todo, dH, dhl, dfeas, hoff, hp, hh)
        rmin[r[todo]] = dmin[r[todo]]
    elif not L:
        H[r] = np.where(np.isnan(head[r]), req[r], head[r])
        rmin[r] = req[r]
        feas[r] = np.isnan(head[r]) | (head[r] >= req[r] - 1e-9 * np.maximum(1.0, np.abs(req[r])))
    return _result(net, loss, cst, p1, p2, f2, H, rmin, feas, weight)


def _largest_tree(net, hoff, active):
    """Hull segments and nodes of the largest active tree (the tree method's working set)."""
    if net.n_links == 0:
        return 0, 1
    seg = np.bincount(net.root_of[net.to_node], weights=np.diff(hoff) - 1, minlength=net.n_nodes)
    act = active[net.roots]
    return int(seg[net.roots][act].max(initial=0)), int(np.max(net.subtree_size[net.roots][act], initial=1))


def _prune_hulls(hoff, hp, hh, hc, w_link):
    """Drop the leading hull points whose next segment is steeper than −w (CSR arrays in, CSR arrays out)."""
    L = hoff.size - 1
    link = np.repeat(np.arange(L), np.diff(hoff))
    last = np.zeros(hh.size, bool)
    last[hoff[1:] - 1] = True
    nxt = np.minimum(np.arange(hh.size) + 1, hh.size - 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = np.where(last, np.inf, (hc[nxt] - hc) / np.where(last, 1.0, hh[nxt] - hh))
    keep = ~(slope < -w_link[link])
    off = np.zeros(L + 1, np.int64)
    np.cumsum(np.bincount(link[keep], minlength=L), out=off[1:])
    return off, hp[keep], hh[keep], hc[keep]


def _least_head(net, hoff, hh, req):
    """Least head at each root meeting every requirement with the least-loss pipes."""
    from ..graph.network import cost_to_root

    least = hh[hoff[:-1]]
    need = np.full(net.n_nodes, -np.inf)
    np.maximum.at(need, net.root_of, req + cost_to_root(net, least))
    return need


def _result(net, loss, cst, p1, p2, f2, H, rmin, feas, weight):
    L = net.n_links
    k = np.arange(L)
    has2 = p2 >= 0
    q2 = np.where(has2, p2, p1)
    link_loss = (1 - f2) * loss[k, p1] + f2 * loss[k, q2]
    link_cost = (1 - f2) * cst[k, p1] + f2 * cst[k, q2]
    roots = net.roots
    c = float(link_cost.sum())
    return LeastCostResult(pipe=p1, pipe_2=p2, fraction_2=np.where(has2, f2, 0.0), loss_m=link_loss, head_m=H,
                           root_head_m=H[roots].copy(), root_min_head_m=rmin[roots].copy(),
                           feasible=feas[roots].copy(), cost=c,
                           objective=c + float(np.sum(weight[roots] * H[roots])))


def tree_objectives(net, cost, res, root_weight=None):
    """Per root (order of ``net.roots``): its tree's pipe + trench cost plus weight × its head."""
    cst = np.asarray(cost, np.float64)
    L, R = net.n_links, net.roots.size
    pos = np.empty(net.n_nodes, np.int64)
    pos[net.roots] = np.arange(R)
    k = np.arange(L)
    q2 = np.where(res.pipe_2 >= 0, res.pipe_2, res.pipe)
    lc = (1 - res.fraction_2) * cst[k, res.pipe] + res.fraction_2 * cst[k, q2]
    per = np.bincount(pos[net.root_of[net.to_node]], weights=lc, minlength=R) if L else np.zeros(R)
    w = np.zeros(R) if root_weight is None else np.broadcast_to(np.asarray(root_weight, float), (R,))
    return per + w * res.root_head_m


def merge_trees(net, loss_m, cost, a, b, use_b, root_weight=None) -> LeastCostResult:
    """The trees of ``a``, except those of the roots in ``use_b`` taken from ``b`` (same network)."""
    n, R = net.n_nodes, net.roots.size
    pos = np.empty(n, np.int64)
    pos[net.roots] = np.arange(R)
    use_b = np.asarray(use_b, bool)
    nodes = use_b[pos[net.root_of]]
    links = nodes[net.to_node]
    pick = lambda x, y, m: np.where(m, y, x)  # noqa: E731
    H = pick(a.head_m, b.head_m, nodes)
    rmin, feas = np.full(n, np.nan), np.ones(n, bool)
    rmin[net.roots] = pick(a.root_min_head_m, b.root_min_head_m, use_b)
    feas[net.roots] = pick(a.feasible, b.feasible, use_b)
    w = np.zeros(n)
    w[net.roots] = 0.0 if root_weight is None else np.broadcast_to(np.asarray(root_weight, float), (R,))
    return _result(net, np.asarray(loss_m, float), np.asarray(cost, float), pick(a.pipe, b.pipe, links),
                   pick(a.pipe_2, b.pipe_2, links), pick(a.fraction_2, b.fraction_2, links), H, rmin, feas, w)


def least_cost_highs(net, loss_m, cost, admissible, req_head_m, *, root_head_m=None, root_weight=None,
                     root_cap_m=None, split=True, monotone_key=None, time_limit_s=None) -> LeastCostResult:
    """The same sizing as a (mixed-integer) linear programme solved by HiGHS.

    The reference for :func:`least_cost_tree`, and the solver for the
    variants it does not cover: ``split=False`` (one catalog pipe per link,
    binary choice) and ``monotone_key`` (a size per catalog pipe, e.g. the
    nominal size, that must not increase downstream: every piece of a link is
    at least as large as every piece of the links below it).

    Variables: the fraction ``λ_kp`` of link ``k`` laid with pipe ``p`` and
    the head ``H_v`` at each node; ``Σ_p λ_kp = 1``,
    ``H_child − H_parent + Σ_p h_kp λ_kp <= 0``, ``H_v >= req_v``.

    Raises
    ------
    InputError
        When HiGHS finds no solution (the message gives its status).
    """
    from scipy.optimize import Bounds, LinearConstraint, milp
    from scipy.sparse import coo_matrix

    loss = np.asarray(loss_m, dtype=np.float64)
    cst = np.asarray(cost, dtype=np.float64)
    ok = np.asarray(admissible, dtype=bool)
    n, L = net.n_nodes, net.n_links
    head, weight, cap = _root_arrays(net, root_head_m, root_weight, root_cap_m)
    req = np.asarray(req_head_m, dtype=np.float64)
    lk, lp = np.nonzero(ok)
    nv = lk.size
    use_u = monotone_key is not None and split
    nu = nv if use_u else 0
    nvar = nv + n + nu
    c = np.zeros(nvar)
    c[:nv] = cst[lk, lp]
    c[nv + net.roots] = weight[net.roots]
    lb = np.zeros(nvar)
    ub = np.ones(nvar)
    lb[nv:nv + n] = req
    ub[nv:nv + n] = np.inf
    r = net.roots
    fixed = np.isfinite(head[r])
    lb[nv + r[fixed]] = np.maximum(head[r[fixed]], req[r[fixed]])
    ub[nv + r[fixed]] = np.maximum(head[r[fixed]], req[r[fixed]])
    ub[nv + r[~fixed]] = np.maximum(cap[r[~fixed]], req[r[~fixed]])
    rows, cols, vals, lo, hi = [], [], [], [], []
    row = 0
    # one: Σ λ = 1
    rows.append(lk)
    cols.append(np.arange(nv))
    vals.append(np.ones(nv))
    lo.append(np.ones(L))
    hi.append(np.ones(L))
    row += L
    # heads: H_child − H_parent + Σ h λ <= 0
    child = net.to_node
    par = net.from_node
    rows += [row + lk, row + np.arange(L), row + np.arange(L)]
    cols += [np.arange(nv), nv + child, nv + par]
    vals += [loss[lk, lp], np.ones(L), -np.ones(L)]
    lo.append(np.full(L, -np.inf))
    hi.append(np.zeros(L))
    row += L
    integrality = np.zeros(nvar)
    if not split:
        integrality[:nv] = 1
    if monotone_key is not None:
        key = np.asarray(monotone_key, dtype=np.float64)
        ubase = nv if use_u else 0  # binaries: u (split) or λ itself (no split)
        if use_u:
            integrality[nv + n:] = 1
            # λ_kp <= u_kp
            rows += [row + np.arange(nv), row + np.arange(nv)]
            cols += [np.arange(nv), nv + n + np.arange(nv)]
            vals += [np.ones(nv), -np.ones(nv)]
            lo.append(np.full(nv, -np.inf))
            hi.append(np.zeros(nv))
            row += nv
        start = np.zeros(L + 1, np.int64)
        np.cumsum(np.bincount(lk, minlength=L), out=start[1:])
        pl = net.parent_link[net.from_node]  # link above each link (-1 at the roots)
        for b in np.flatnonzero(pl >= 0):
            a = pl[b]
            vb = np.arange(start[b], start[b + 1])
            va = np.arange(start[a], start[a + 1])
            bad = key[lp[vb]][:, None] > key[lp[va]][None, :]
            ib, ia = np.nonzero(bad)
            m = ib.size
            if m == 0:
                continue
            off = (nv + n) if use_u else 0
            rows += [row + np.arange(m), row + np.arange(m)]
            cols += [off + vb[ib] - (0 if use_u else 0), off + va[ia]]
            vals += [np.ones(m), np.ones(m)]
            lo.append(np.full(m, -np.inf))
            hi.append(np.ones(m))
            row += m
        del ubase
    A = coo_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(row, nvar)).tocsr()
    opts = {"presolve": True}
    if time_limit_s is not None:
        opts["time_limit"] = float(time_limit_s)
    res = milp(c, constraints=LinearConstraint(A, np.concatenate(lo), np.concatenate(hi)), bounds=Bounds(lb, ub),
               integrality=integrality, options=opts)
    if res.x is None:
        raise InputError(f"HiGHS found no sizing ({res.message}); check the heads, limits and catalog")
    x = res.x
    lam = np.zeros((L, ok.shape[1]))
    lam[lk, lp] = np.clip(x[:nv], 0.0, 1.0)
    H = x[nv:nv + n].copy()
    p1, p2, f2 = _two_pieces(lam, loss)
    feas = np.ones(n, bool)
    rmin = np.full(n, np.nan)
    return _result(net, loss, cst, p1, p2, f2, H, rmin, feas, weight)


def _two_pieces(lam, loss):
    """At most two pieces per link: the lowest-loss and the highest-loss pipe used, keeping the loss."""
    L = lam.shape[0]
    used = lam > 1e-9
    big = np.where(used, loss, np.inf).argmin(axis=1)
    small = np.where(used, loss, -np.inf).argmax(axis=1)
    k = np.arange(L)
    h = (lam * loss).sum(axis=1)
    span = loss[k, small] - loss[k, big]
    with np.errstate(invalid="ignore", divide="ignore"):
        f2 = np.where(span > 0, (h - loss[k, big]) / np.where(span > 0, span, 1.0), 0.0)
    f2 = np.clip(f2, 0.0, 1.0)
    p2 = np.where((small != big) & (f2 > 0), small, -1)
    return big, p2, np.where(p2 >= 0, f2, 0.0)
