"""Steiner junctions for straight links: insert a junction where it pays.

Prim's tree joins sites only at sites; a junction between them can be cheaper.
:func:`add_junctions` improves a tree of straight links by the classic
insertion step: wherever two links leave a node ``v`` (towards ``a`` and
``b``) at less than 120 degrees, the Fermat point ``p`` of the triangle
``v, a, b`` (the point of least total distance to the three, found by
Weiszfeld's iteration) is a candidate junction; the links ``v-a`` and ``v-b``
are replaced by ``p-v``, ``p-a`` and ``p-b`` when these cost less, priced
exactly (terrain, land, barriers, crossings: the same costing as every
link).  Candidates are taken greedily by gain, each link used once per pass,
and passes repeat until none pays (or ``max_passes``).  The result is still a
tree; its price never rises.

For three sites at the corners of an equilateral triangle on uniform ground
the tree falls from two sides to sqrt(3) sides, with the junction at the
centroid and 120 degree angles -- the Steiner minimal tree (Gilbert & Pollak
1968).

References
----------
.. [1] E. N. Gilbert and H. O. Pollak, "Steiner minimal trees", SIAM J. Appl.
   Math. 16(1):1-29, 1968.
.. [2] E. Weiszfeld, "Sur le point pour lequel la somme des distances de n
   points donnés est minimum", Tôhoku Math. J. 43:355-386, 1937.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["fermat_points", "add_junctions", "JunctionResult"]


def fermat_points(a, b, c, *, iterations=100):
    """Fermat points of triangles ``(a[i], b[i], c[i])`` (arrays (k, 2)).

    Where an angle is 120 degrees or more the vertex itself is returned.

    Examples
    --------
    >>> p = fermat_points(np.array([[0.0, 0.0]]), np.array([[1.0, 0.0]]),
    ...                   np.array([[0.5, math.sqrt(3) / 2]]))
    >>> np.round(p, 6).tolist()
    [[0.5, 0.288675]]
    """
    a, b, c = (np.asarray(v, dtype=np.float64).reshape(-1, 2) for v in (a, b, c))
    pts = np.stack([a, b, c], axis=1)                      # (k, 3, 2)
    p = pts.mean(axis=1)
    for _ in range(iterations):
        d = np.linalg.norm(pts - p[:, None, :], axis=2)
        d = np.maximum(d, 1e-12)
        w = 1.0 / d
        p = (pts * w[:, :, None]).sum(axis=1) / w.sum(axis=1)[:, None]
    out = p
    for i, (u, v, x) in enumerate(((a, b, c), (b, a, c), (c, a, b))):
        e1, e2 = v - u, x - u
        cosang = (e1 * e2).sum(1) / np.maximum(np.linalg.norm(e1, axis=1) *
                                               np.linalg.norm(e2, axis=1), 1e-300)
        wide = cosang <= -0.5 + 1e-12                      # angle >= 120 degrees
        out = np.where(wide[:, None], u, out)
    return out


@dataclass
class JunctionResult:
    """A tree with junctions: ``junction_xy`` (J, 2) numbered after the sites,
    ``edges`` (L, 2) with ``edges[:, 0] < edges[:, 1]``, sorted, and ``costs``
    (LinkCosts of those straight links); ``n_passes`` run."""

    junction_xy: np.ndarray
    edges: np.ndarray
    costs: object
    n_passes: int


def add_junctions(xy, edges, price, *, max_passes=5, min_gain=1e-9):
    """Insert Steiner junctions into a tree of straight links where they pay.

    Parameters
    ----------
    xy : ndarray float64 (n, 2)
        Node coordinates (working CRS).
    edges : ndarray int64 (n - 1, 2)
        The tree's links.
    price : callable
        ``price(p0, p1) -> (LinkCosts, fixed)`` for straight segments, as
        :func:`mainspan.graph.corridor.segment_pricer`.
    max_passes : int, default 5
    min_gain : float, default 1e-9
        Relative gain below which an insertion is not worth a node.

    Returns
    -------
    JunctionResult
    """
    pos = [tuple(p) for p in np.asarray(xy, dtype=np.float64)]
    n_sites = len(pos)
    links = [tuple(sorted(map(int, e))) for e in np.asarray(edges, np.int64)]
    cost = dict(zip(links, price(np.array([pos[a] for a, _ in links]).reshape(-1, 2),
                                 np.array([pos[b] for _, b in links]).reshape(-1, 2))[0].total))
    passes = 0
    for passes in range(1, max_passes + 1):
        inc = {}
        for a, b in cost:
            inc.setdefault(a, []).append(b)
            inc.setdefault(b, []).append(a)
        cand = []
        for v in sorted(inc):
            nb = sorted(inc[v])
            pv = np.array(pos[v])
            for i in range(len(nb)):
                for j in range(i + 1, len(nb)):
                    a, b = nb[i], nb[j]
                    ea, eb = np.array(pos[a]) - pv, np.array(pos[b]) - pv
                    den = np.linalg.norm(ea) * np.linalg.norm(eb)
                    if den > 0 and (ea @ eb) / den > -0.5 + 1e-9:  # angle below 120 degrees
                        cand.append((v, a, b))
        if not cand:
            break
        v_, a_, b_ = (np.array([pos[t[k]] for t in cand]) for k in range(3))
        fp = fermat_points(v_, a_, b_)
        k = len(cand)
        p0 = np.concatenate([fp, fp, fp])
        p1 = np.concatenate([v_, a_, b_])
        new = price(p0, p1)[0].total.reshape(3, k).sum(axis=0)
        old = np.array([cost[tuple(sorted((v, a)))] + cost[tuple(sorted((v, b)))]
                        for v, a, b in cand])
        with np.errstate(invalid="ignore"):
            gain = old - new
        order = sorted(range(k), key=lambda i: (-gain[i], cand[i]))
        used = set()
        changed = False
        for i in order:
            if not (np.isfinite(gain[i]) and gain[i] > min_gain * max(old[i], 1.0)):
                break
            v, a, b = cand[i]
            ka, kb = tuple(sorted((v, a))), tuple(sorted((v, b)))
            if ka in used or kb in used:
                continue
            dist = [math.dist(fp[i], pos[t]) for t in (v, a, b)]
            if min(dist) <= 1e-6:                  # the Fermat point is a vertex: nothing new
                continue
            used.update((ka, kb))
            j = len(pos)
            pos.append(tuple(fp[i]))
            del cost[ka], cost[kb]
            c3 = price(np.repeat(fp[i][None], 3, axis=0), np.array([pos[v], pos[a], pos[b]]))[0]
            for t, c in zip((v, a, b), c3.total):
                cost[tuple(sorted((t, j)))] = c
                used.add(tuple(sorted((t, j))))
            changed = True
        if not changed:
            break
    _tidy(pos, cost, n_sites, price, max_passes)
    e = np.array(sorted(cost), dtype=np.int64).reshape(-1, 2)
    live = np.unique(e)
    keep_j = live[live >= n_sites]
    remap = np.arange(len(pos))
    remap[keep_j] = n_sites + np.arange(len(keep_j))
    allp = np.array(pos)
    allp = np.concatenate([allp[:n_sites], allp[keep_j]])
    e = np.sort(remap[e], axis=1)
    e = e[np.lexsort((e[:, 1], e[:, 0]))]
    lc = price(allp[e[:, 0]], allp[e[:, 1]])[0]
    return JunctionResult(allp[n_sites:].reshape(-1, 2), e, lc, passes)


def _tidy(pos, cost, n_sites, price, rounds):
    """Dissolve junctions left with two links, and move each three-link junction to the
    Fermat point of its neighbours, while either pays."""
    def key(a, b):
        return (a, b) if a < b else (b, a)

    for _ in range(rounds):
        inc = {}
        for a, b in cost:
            inc.setdefault(a, []).append(b)
            inc.setdefault(b, []).append(a)
        changed = False
        for j in sorted(v for v in inc if v >= n_sites):
            nb = sorted(inc[j])
            old = sum(cost[key(j, t)] for t in nb)
            if len(nb) == 2:
                c = price(np.array([pos[nb[0]]]), np.array([pos[nb[1]]]))[0].total[0]
                if c <= old:
                    del cost[key(j, nb[0])], cost[key(j, nb[1])]
                    cost[key(*nb)] = c
                    inc[nb[0]] = [nb[1] if t == j else t for t in inc[nb[0]]]
                    inc[nb[1]] = [nb[0] if t == j else t for t in inc[nb[1]]]
                    inc[j] = []
                    changed = True
            elif len(nb) == 3:
                p = fermat_points(*(np.array([pos[t]]) for t in nb))[0]
                c3 = price(np.repeat(p[None], 3, axis=0), np.array([pos[t] for t in nb]))[0].total
                if np.isfinite(c3).all() and c3.sum() < old * (1 - 1e-12):
                    pos[j] = tuple(p)
                    for t, c in zip(nb, c3):
                        cost[key(j, t)] = c
                    changed = True
        if not changed:
            break
