"""The bill of quantities: one table of everything a design prices.

There is one bill per design, built by :func:`bill_of_quantities` from

* the *pipe rows* (:func:`pipe_rows`): one row per catalog pipe used, with
  its count of links, length, pipe (supply and lay), trench and land cost;
* a list of priced :class:`Item` rows appended by any design code
  (fittings, manholes, drop manholes, pump or lift stations, crossings,
  energy present value, ...).  Items of the same category, name and unit
  are merged (quantities added; they must share the unit price).

Columns (all of equal length; the last row is ``TOTAL``):

``category``
    "pipe", "fitting", "manhole", "drop manhole", "pump station",
    "lift station", "crossing", "energy (present value)", ...
``item``, ``unit``, ``quantity``, ``unit_cost``
    What, per what, how many, and the price of one unit.  Pipe rows: the
    pipe name, "m", the pipe length and the catalog supply-and-lay price.
``pipe``, ``material``, ``nominal_mm``, ``inner_mm``, ``count``, ``length_m``
    Pipe rows as before; item rows leave pipe/material empty, give the
    fitting size in ``nominal_mm`` (NaN if unsized) and their number in
    ``count`` when counted "each" (0 otherwise).
``pipe_cost``, ``trench_cost``, ``land_cost``
    Pipe rows only (0 on item rows).
``total_cost``
    Pipe rows: pipe + trench + land.  Item rows: quantity × unit_cost.

The ``TOTAL`` row sums ``count`` of the pipe rows (links), ``length_m`` and
every cost column; its ``total_cost`` is the sum of all rows, so it
includes the energy present value when a row carries it (the design
summary then calls it ``whole_life_cost``; ``total_cost`` in the summary is
capital only).

Examples
--------
>>> import numpy as np
>>> from mainspan.hydraulics.catalog import default_catalog
>>> cat = default_catalog()
>>> rows = pipe_rows(cat, np.array([3, 3]), np.array([10.0, 5.0]), np.array([50.0, 25.0]),
...                  np.array([30.0, 15.0]), np.zeros(2))
>>> q = bill_of_quantities(rows, [Item("fitting", "air_valve 63 mm", "each", 2, 460.0, 63.0)])
>>> q["item"].tolist(), q["total_cost"].tolist()
(['PE100 SDR11 63', 'air_valve 63 mm', 'TOTAL'], [120.0, 920.0, 1040.0])
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

__all__ = ["Item", "pipe_rows", "bill_of_quantities", "COLUMNS"]

COLUMNS = ("category", "item", "unit", "quantity", "unit_cost", "pipe", "material", "nominal_mm", "inner_mm",
           "count", "length_m", "pipe_cost", "trench_cost", "land_cost", "total_cost")


class Item(NamedTuple):
    """One priced row of the bill (not a pipe)."""

    category: str
    item: str
    unit: str
    quantity: float
    unit_cost: float
    size_mm: float = float("nan")


def pipe_rows(cat, pipe, length_m, pipe_cost, trench_cost, land_cost) -> dict:
    """One row per catalog pipe used (no total row), columns as :data:`COLUMNS`."""
    pipe = np.asarray(pipe, np.int64)
    used, inv = np.unique(pipe, return_inverse=True)
    p = used.size

    def total(x):
        return np.bincount(inv, weights=np.asarray(x, float), minlength=p)

    length = total(length_m)
    cols = {
        "category": np.full(p, "pipe", dtype=object),
        "item": cat.name[used].astype(object),
        "unit": np.full(p, "m", dtype=object),
        "quantity": length,
        "unit_cost": cat.cost_per_m[used].astype(float),
        "pipe": cat.name[used].astype(object),
        "material": cat.material[used].astype(object),
        "nominal_mm": cat.nominal_mm[used].astype(float),
        "inner_mm": cat.inner_mm[used].astype(float),
        "count": np.bincount(inv, minlength=p).astype(np.int64),
        "length_m": length,
        "pipe_cost": total(pipe_cost),
        "trench_cost": total(trench_cost),
        "land_cost": total(land_cost),
    }
    cols["total_cost"] = cols["pipe_cost"] + cols["trench_cost"] + cols["land_cost"]
    return cols


def _merge(items):
    merged: dict = {}
    for it in items:
        it = Item(*it)
        if not np.isfinite(it.quantity) or not np.isfinite(it.unit_cost) or it.quantity < 0:
            raise ValueError(f"bill item {it.item!r} has quantity {it.quantity} and unit cost {it.unit_cost}")
        if it.quantity == 0:
            continue
        key = (it.category, it.item, it.unit)
        if key in merged:
            old = merged[key]
            if not np.isclose(old.unit_cost, it.unit_cost):
                raise ValueError(f"bill item {it.item!r} priced {old.unit_cost} and {it.unit_cost}; give one price")
            merged[key] = old._replace(quantity=old.quantity + it.quantity)
        else:
            merged[key] = it
    return list(merged.values())


def bill_of_quantities(pipes: dict, items=()) -> dict:
    """The whole bill: pipe rows, then item rows (in the order first given), then ``TOTAL``.

    Parameters
    ----------
    pipes : dict
        From :func:`pipe_rows`.
    items : iterable of Item
        Further priced rows; zero quantities are dropped.

    Returns
    -------
    dict of str to ndarray
        Columns :data:`COLUMNS`.
    """
    its = _merge(items)
    k = len(its)
    each = np.array([it.unit == "each" for it in its], bool)
    qty = np.array([float(it.quantity) for it in its], float)
    unit_cost = np.array([float(it.unit_cost) for it in its], float)
    extra = {
        "category": np.array([it.category for it in its], dtype=object),
        "item": np.array([it.item for it in its], dtype=object),
        "unit": np.array([it.unit for it in its], dtype=object),
        "quantity": qty,
        "unit_cost": unit_cost,
        "pipe": np.full(k, "", dtype=object),
        "material": np.full(k, "", dtype=object),
        "nominal_mm": np.array([float(it.size_mm) for it in its], float),
        "inner_mm": np.full(k, np.nan),
        "count": np.where(each, np.round(qty), 0).astype(np.int64),
        "length_m": np.zeros(k),
        "pipe_cost": np.zeros(k),
        "trench_cost": np.zeros(k),
        "land_cost": np.zeros(k),
        "total_cost": qty * unit_cost,
    }
    out = {}
    for c in COLUMNS:
        body = np.concatenate([np.asarray(pipes[c]), extra[c]]) if k else np.asarray(pipes[c])
        if c in ("category", "item", "pipe"):
            tot = "TOTAL"
        elif c in ("unit", "material"):
            tot = ""
        elif c == "count":
            tot = int(np.asarray(pipes["count"]).sum())
        elif c in ("length_m", "pipe_cost", "trench_cost", "land_cost", "total_cost"):
            tot = float(body.sum())
        else:
            tot = np.nan
        dtype = object if c in ("category", "item", "unit", "pipe", "material") else (np.int64 if c == "count" else float)
        out[c] = np.append(body, tot).astype(dtype)
    return out
