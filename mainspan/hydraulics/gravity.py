"""Gravity mains: Manning flow in circular pipes, minimum grades and inverts.

Part-full geometry of a circular pipe of diameter D flowing at depth y::

    theta = 2 arccos(1 - 2 y / D)          (central angle of the wetted arc)
    A     = D² (theta - sin theta) / 8
    P     = theta D / 2,   R = A / P

and Manning's formula (SI) ``V = R^(2/3) S^(1/2) / n``.

Invert walk
-----------
Links are designed from the upstream ends down to the outlet (children
before parents).  In a gravity tree a link's *upstream* end is its child
node (``to_node``) and its *downstream* end the parent (``from_node``,
nearer the outlet); fields are therefore named ``invert_up_m`` and
``invert_down_m``, never from/to.  For each link and each candidate
diameter D (smallest first):

1. upstream invert = min(ground − cover − D at the upstream end;
   every incoming invert − junction drop; every incoming crown − D, so the
   outgoing crown is never above an incoming crown);
2. grade S = max(minimum grade for D, the grade that keeps cover over the
   whole ground profile: ``(invert_up − (ground(s) − cover − D)) / s`` at
   every station s);
3. the first D whose full-pipe capacity at S carries the design flow wins.

The minimum grade for D is the larger of the tabulated minimum slope and
the slope giving the minimum full-pipe velocity.

References
----------
.. [1] R. Manning, "On the flow of water in open channels and pipes",
   Trans. Inst. Civil Eng. Ireland 20, 1891, 161–207.
.. [2] Great Lakes–Upper Mississippi River Board, *Recommended Standards for
   Wastewater Facilities*, 2014 -- minimum slopes, 0.6 m/s flowing full,
   n = 0.013, 200 mm minimum sewer, manholes at most 120 m apart.
"""

from __future__ import annotations

from functools import lru_cache

import numba
import numpy as np

__all__ = [
    "MIN_SLOPE_TABLE_PCT",
    "manning_velocity_mps",
    "full_pipe",
    "part_full_section",
    "part_full_ratio",
    "max_flow_depth_ratio",
    "depth_ratio_for_flow",
    "min_slope",
    "walk_inverts",
]

#: Minimum slope (%) by nominal diameter (mm), Recommended Standards for
#: Wastewater Facilities 2014 (ft/100 ft = %), 8 in ... 36 in.
MIN_SLOPE_TABLE_PCT = (
    (200.0, 0.40), (250.0, 0.28), (300.0, 0.22), (375.0, 0.15), (450.0, 0.12),
    (525.0, 0.10), (600.0, 0.08), (675.0, 0.067), (750.0, 0.058), (900.0, 0.046),
)


def manning_velocity_mps(hydraulic_radius_m, slope, n):
    """Manning velocity ``R^(2/3) S^(1/2) / n`` (SI)."""
    return np.power(hydraulic_radius_m, 2.0 / 3.0) * np.sqrt(slope) / n


def full_pipe(diameter_m, slope, n):
    """Velocity (m/s) and flow (m³/s) of a circular pipe flowing full.

    Examples
    --------
    >>> v, q = full_pipe(0.300, 0.005, 0.013)
    >>> round(float(v), 3), round(float(q), 4)
    (0.967, 0.0684)
    """
    d = np.asarray(diameter_m, dtype=np.float64)
    v = manning_velocity_mps(d / 4.0, slope, n)
    return v, v * np.pi * d * d / 4.0


def part_full_section(y_over_d, diameter_m):
    """Flow area (m²), wetted perimeter (m) and central angle of a part-full pipe."""
    yd = np.clip(np.asarray(y_over_d, dtype=np.float64), 0.0, 1.0)
    d = np.asarray(diameter_m, dtype=np.float64)
    theta = 2.0 * np.arccos(1.0 - 2.0 * yd)
    area = d * d * (theta - np.sin(theta)) / 8.0
    perim = theta * d / 2.0
    return area, perim, theta


def part_full_ratio(y_over_d):
    """Manning flow at depth ratio y/D over the full-pipe flow (same S, n)."""
    yd = np.asarray(y_over_d, dtype=np.float64)
    area, perim, _ = part_full_section(yd, 1.0)
    full_a, full_r = np.pi / 4.0, 0.25
    with np.errstate(invalid="ignore", divide="ignore"):
        r = np.where(perim > 0, area / np.where(perim > 0, perim, 1.0), 0.0)
    return (area / full_a) * np.power(r / full_r, 2.0 / 3.0)


@lru_cache(maxsize=1)
def max_flow_depth_ratio():
    """Depth ratio of the largest part-full flow, and that flow over full flow.

    Found by golden-section search on :func:`part_full_ratio` (to 1e-12).

    Examples
    --------
    >>> y, r = max_flow_depth_ratio()
    >>> round(y, 3), round(r, 3)
    (0.938, 1.076)
    """
    lo, hi = 0.5, 1.0
    g = (np.sqrt(5.0) - 1.0) / 2.0
    a, b = hi - g * (hi - lo), lo + g * (hi - lo)
    fa, fb = float(part_full_ratio(a)), float(part_full_ratio(b))
    while hi - lo > 1e-12:
        if fa < fb:
            lo, a, fa = a, b, fb
            b = lo + g * (hi - lo)
            fb = float(part_full_ratio(b))
        else:
            hi, b, fb = b, a, fa
            a = hi - g * (hi - lo)
            fa = float(part_full_ratio(a))
    y = (lo + hi) / 2.0
    return float(y), float(part_full_ratio(y))


def depth_ratio_for_flow(flow_m3ps, diameter_m, slope, n, *, iterations=60):
    """Normal-depth ratio y/D carrying a flow, by vectorised bisection.

    Searches the rising branch ``0 <= y/D <= y_max`` (y_max ≈ 0.938, where
    part-full flow peaks).  Flows above the peak cannot run part-full and
    give NaN (the pipe surcharges); zero flow gives 0.

    Examples
    --------
    >>> _, qf = full_pipe(0.3, 0.005, 0.013)
    >>> round(float(depth_ratio_for_flow(qf, 0.3, 0.005, 0.013)), 3)
    0.82
    """
    q = np.asarray(flow_m3ps, dtype=np.float64)
    _, qf = full_pipe(diameter_m, slope, n)
    target = np.broadcast_to(q / qf, np.broadcast_shapes(q.shape, np.shape(qf))).astype(np.float64)
    y_max, r_max = max_flow_depth_ratio()
    lo = np.zeros_like(target)
    hi = np.full_like(target, y_max)
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        low = part_full_ratio(mid) < target
        lo = np.where(low, mid, lo)
        hi = np.where(low, hi, mid)
    out = 0.5 * (lo + hi)
    out = np.where(target <= 0, 0.0, out)
    return np.where(target > r_max, np.nan, out)


def min_slope(nominal_mm, inner_mm, n, *, table_pct=MIN_SLOPE_TABLE_PCT, min_velocity_mps=0.6):
    """Minimum grade (fraction) for each pipe.

    The larger of (a) the tabulated slope of the largest table diameter not
    above the pipe's nominal size (the smallest entry for smaller pipes) --
    conservative between table sizes -- and (b) the slope at which the pipe
    flowing full runs at ``min_velocity_mps``.

    Examples
    --------
    >>> float(min_slope([200.0], [200.0], 0.013)[0])
    0.004
    """
    nom = np.asarray(nominal_mm, dtype=np.float64)
    d = np.asarray(inner_mm, dtype=np.float64) / 1000.0
    tab = np.asarray(table_pct, dtype=np.float64).reshape(-1, 2)
    tab = tab[np.argsort(tab[:, 0])]
    idx = np.clip(np.searchsorted(tab[:, 0], nom, side="right") - 1, 0, tab.shape[0] - 1)
    s_table = tab[idx, 1] / 100.0
    s_vel = (min_velocity_mps * np.asarray(n, dtype=np.float64) / np.power(d / 4.0, 2.0 / 3.0)) ** 2
    return np.maximum(s_table, s_vel)


@numba.njit(cache=True)
def _segment_grades(k, iu, d, smin, cover, prof_off, prof_s, prof_g, length, n_seg, inv_s):
    """Grade each of *n_seg* equal segments of link *k* from upstream invert *iu*.

    Each segment falls at the larger of ``smin`` and the grade that keeps
    cover over the stations it spans; the grade breaks at the access points
    between segments.  Writes the invert at every station into *inv_s* and
    returns (downstream invert, flattest segment grade).
    """
    seg = length / n_seg
    top = iu
    flattest = np.inf
    for t in range(n_seg):
        a = t * seg
        b = (t + 1) * seg
        sl = smin
        for i in range(prof_off[k], prof_off[k + 1]):
            r = prof_s[i] - a
            if r > 1e-9 and prof_s[i] <= b + 1e-9:
                need = (top - (prof_g[i] - cover - d)) / r
                if need > sl:
                    sl = need
        for i in range(prof_off[k], prof_off[k + 1]):
            if prof_s[i] >= a - 1e-9 and (prof_s[i] <= b + 1e-9 or t == n_seg - 1):
                inv_s[i] = top - sl * (prof_s[i] - a)
        if sl < flattest:
            flattest = sl
        top = top - sl * seg
    return top, flattest


@numba.njit(cache=True)
def _walk(nodes_up_first, parent, parent_link, ground, prof_off, prof_s, prof_g, q,
          cat_d, cat_n, cat_smin, cover, drop, spacing):  # pragma: no cover - compiled
    n_nodes = parent.shape[0]
    n_links = prof_off.shape[0] - 1
    n_pipes = cat_d.shape[0]
    in_drop = np.full(n_nodes, np.inf)
    in_crown = np.full(n_nodes, np.inf)
    pipe = np.full(n_links, -1, np.int64)
    inv_up = np.full(n_links, np.nan)
    inv_down = np.full(n_links, np.nan)
    slope = np.full(n_links, np.nan)
    no_pipe = np.zeros(n_links, np.bool_)
    inv_s = np.full(prof_s.shape[0], np.nan)
    work = np.full(prof_s.shape[0], np.nan)
    for v in nodes_up_first:
        k = parent_link[v]
        if k < 0:
            continue
        length = 0.0
        for i in range(prof_off[k], prof_off[k + 1]):
            if prof_s[i] > length:
                length = prof_s[i]
        n_seg = 1
        if spacing > 0 and length > spacing:
            n_seg = int(np.ceil(length / spacing - 1e-12))
        chosen = -1
        iu = 0.0
        s_best = 0.0
        down = 0.0
        cap = 0.0
        for j in range(n_pipes):
            d = cat_d[j]
            iu = min(ground[v] - cover - d, in_drop[v], in_crown[v] - d)
            for i in range(prof_off[k], prof_off[k + 1]):
                if prof_s[i] <= 1e-9:
                    iu = min(iu, prof_g[i] - cover - d)
            down, s = _segment_grades(k, iu, d, cat_smin[j], cover, prof_off, prof_s, prof_g,
                                      length, n_seg, work)
            # the flattest segment limits what the pipe can carry
            cap = (d / 4.0) ** (2.0 / 3.0) * np.sqrt(s) / cat_n[j] * np.pi * d * d / 4.0
            chosen = j
            s_best = s
            for i in range(prof_off[k], prof_off[k + 1]):
                inv_s[i] = work[i]
            if cap >= q[k]:
                break
        if cap < q[k]:
            no_pipe[k] = True
        pipe[k] = chosen
        inv_up[k] = iu
        slope[k] = s_best
        inv_down[k] = down
        p = parent[v]
        in_drop[p] = min(in_drop[p], inv_down[k] - drop)
        in_crown[p] = min(in_crown[p], inv_down[k] + cat_d[chosen])
    return pipe, inv_up, inv_down, slope, no_pipe, inv_s


def walk_inverts(net, ground_m, profile_offsets, station_up_m, profile_ground_m, flow_m3ps,
                 inner_m, manning_n, slope_min, *, cover_m, drop_m, access_spacing_m=None,
                 return_station_inverts=False):
    """Size gravity links and set their inverts, upstream ends first.

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
        Candidate pipes (ascending diameter) and their minimum grades.
    cover_m : float
        Minimum cover over the crown.
    drop_m : float
        Invert drop across a junction.

    access_spacing_m : float, optional
        Links longer than this get equally spaced access points (manholes)
        and the grade may break at each of them, every segment falling at
        the larger of the minimum grade and the grade that keeps cover over
        its own stretch of ground (manholes at every change of grade:
        Recommended Standards for Wastewater Facilities).  ``None``: one
        straight grade from end to end.
    return_station_inverts : bool, default False
        Also return the pipe invert at every profile station.

    Returns
    -------
    pipe, invert_up_m, invert_down_m, slope, no_pipe : ndarray, shape (L,)
        ``pipe`` indexes the candidate arrays; ``slope`` is a fraction: the
        flattest segment's grade, which limits the capacity.
    station_invert_m : ndarray
        Only with ``return_station_inverts``: invert at each profile station.
    """
    nodes_up_first = net.order[::-1].copy()
    out = _walk(nodes_up_first, net.parent, net.parent_link, np.asarray(ground_m, np.float64),
                 np.asarray(profile_offsets, np.int64), np.asarray(station_up_m, np.float64),
                 np.asarray(profile_ground_m, np.float64), np.asarray(flow_m3ps, np.float64),
                 np.asarray(inner_m, np.float64), np.asarray(manning_n, np.float64),
                 np.asarray(slope_min, np.float64), float(cover_m), float(drop_m),
                 0.0 if access_spacing_m is None else float(access_spacing_m))
    return out if return_station_inverts else out[:5]
