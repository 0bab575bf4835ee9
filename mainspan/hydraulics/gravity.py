"""Gravity mains: Manning flow in circular pipes, minimum grades and inverts.

Part-full geometry of a circular pipe of diameter D flowing at depth y::

    theta = 2 arccos(1 - 2 y / D)          (central angle of the wetted arc)
    A     = D² (theta - sin theta) / 8
    P     = theta D / 2,   R = A / P

and Manning's formula (SI) ``V = R^(2/3) S^(1/2) / n``.

The invert walk (:func:`walk_inverts`) is in :mod:`mainspan.hydraulics.invert_walk`.

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

import numpy as np

from .invert_walk import GravityWalk, walk_inverts

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
    "GravityWalk",
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
