"""Scenario link costs: combining the shared terrain and land-cost components with each scenario's weights."""

from __future__ import annotations

import json

import numpy as np

__all__ = ["combine_costs"]

#: Weighted cost terms, as (summary column, component, weight name).
_SUMMARY_TERMS = (("cost_length", "surface_length_m", "length"), ("cost_land", "land_cost", "land"),
              ("cost_climb", "climb_m", "climb"), ("cost_descent", "descent_m", "descent"),
              ("cost_steep", "steep_length_m", "steep_per_m"))

_TERRAIN_COLS = ("length_m", "surface_length_m", "climb_m", "descent_m", "max_slope_pct",
                 "steep_length_m", "z_from_m", "z_to_m")


# ------------------------------------------------------------------------------ costs
def combine_costs(terrain, land, weights, *, land_factor=None):
    """Combine priced terrain and land components into link totals with *weights*.

    The cost model of :func:`mainspan.ground.costs.price_links` is applied term by
    term, in the same order, so the totals equal a direct ``price_links`` call
    to the last bit::

        total = fixed + (climb·climb_m + descent·descent_m + steep_per_m·steep_length_m)
                      + land·land_cost + length·surface_length_m

    with ``inf`` for links that are impassable in either part or whose
    weighted term is not finite.  (``costs.py`` has no separate combining
    function, so the formula lives here.)

    Parameters
    ----------
    terrain : LinkCosts
        From ``price_links`` with the terrain only (land weights irrelevant).
    land : LinkCosts
        From ``price_links`` with the land-cost rasters only, same links.
    weights : CostWeights
    land_factor : ndarray of float64, shape (m,), optional
        Multiplies the land component link by link (stability runs).

    Returns
    -------
    LinkCosts

    Examples
    --------
    >>> import numpy as np
    >>> from mainspan.ground.costs import CostWeights, price_links
    >>> xy, e = np.array([[0.0, 0.0], [3.0, 4.0]]), np.array([[0, 1]])
    >>> t = price_links(xy, e, working_crs="EPSG:32633")
    >>> combine_costs(t, t, CostWeights(length=2.0, fixed=1.0)).total.tolist()
    [11.0]
    """
    from ..ground.costs import BASE_COMPONENTS, LinkCosts

    w = weights
    tc, lc = terrain.components, land.components
    m = len(terrain)
    land_cost = lc["land_cost"] if land_factor is None else lc["land_cost"] * land_factor
    t_cost = w.climb * tc["climb_m"] + w.descent * tc["descent_m"]
    if w.steep_per_m:
        t_cost = t_cost + w.steep_per_m * tc["steep_length_m"]
    l_cost = w.land * land_cost
    code = np.full(m, -1, np.int16)
    labels: list[str] = []

    def flag(mask, label):
        new = mask & (code < 0)
        if new.any():
            labels.append(label)
            code[new] = len(labels) - 1

    for part, bad_label in ((terrain, "cost term 'terrain' gave a non-finite cost"),
                            (land, "cost term 'land' gave a non-finite cost")):
        for j, lab in enumerate(part.reason_labels):
            flag(part.reason_code == j, lab)
        flag(~np.isfinite(t_cost if part is terrain else l_cost), bad_label)
    total = np.full(m, w.fixed)
    with np.errstate(invalid="ignore"):
        total = total + np.where(np.isfinite(t_cost), t_cost, 0.0)
        total = total + np.where(np.isfinite(l_cost), l_cost, 0.0)
    total = total + w.length * tc["surface_length_m"]
    passable = code < 0
    total[~passable] = np.inf
    comps = {}
    for k in BASE_COMPONENTS:
        if k == "land_cost":
            comps[k] = land_cost
        elif k == "nodata_fraction":
            comps[k] = np.maximum(tc[k], lc[k])
        else:
            comps[k] = tc[k]
    for k, v in lc.items():
        if k not in comps:
            comps[k] = v if land_factor is None else v * land_factor
    labels_t = tuple(labels)
    counts = np.bincount(code[code >= 0], minlength=len(labels_t))
    return LinkCosts(comps, total, passable, int((~passable).sum()),
                     {labels_t[i]: int(c) for i, c in enumerate(counts) if c}, code, labels_t)


def _key(*parts):
    return json.dumps(parts, sort_keys=True, default=str)
