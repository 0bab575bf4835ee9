"""The data of the costing stage: :class:`CostWeights`, :class:`LinkCosts`, :class:`CostContext`.

Moved from :mod:`mainspan.ground.costs` (which still exports every name and
documents the cost-term protocol).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields
from typing import Callable

import numpy as np
import pyproj

from ..errors import InputError
from .surfaces import Surface

__all__ = ["OPTION_NAMES", "CostWeights", "LinkCosts", "CostContext"]

# command-line spelling of each weight, for messages (the CLI uses the same names)
OPTION_NAMES = {k: "--" + k.replace("_", "-") for k in
                ("length", "land", "climb", "descent", "steep_slope_pct", "steep_per_m", "fixed")}


@dataclass(frozen=True)
class CostWeights:
    """Prices that turn link components into a total.

    Parameters
    ----------
    length : float, default=1.0
        Price per metre of main (surface length).
    land : float, default=1.0
        Multiplier on the integrated land cost.
    climb : float, default=0.0
        Price per metre climbed (from ``edges[:, 0]`` to ``edges[:, 1]``).
    descent : float, default=0.0
        Price per metre descended.
    steep_slope_pct : float or None, default=None
        Slope threshold in percent; ``None`` switches the steep term off.
    steep_per_m : float, default=0.0
        Price per metre of plan length steeper than ``steep_slope_pct``.
    fixed : float, default=0.0
        Price per link.

    Examples
    --------
    >>> CostWeights(climb=2.0).climb
    2.0
    >>> CostWeights(climb=-1)
    Traceback (most recent call last):
    ...
    mainspan.errors.InputError: --climb (CostWeights.climb) must be a finite number >= 0; got -1
    """

    length: float = 1.0
    land: float = 1.0
    climb: float = 0.0
    descent: float = 0.0
    steep_slope_pct: float | None = None
    steep_per_m: float = 0.0
    fixed: float = 0.0

    def __post_init__(self):
        for f in fields(self):
            v = getattr(self, f.name)
            if f.name == "steep_slope_pct" and v is None:
                continue
            opt = f"{OPTION_NAMES[f.name]} (CostWeights.{f.name})"
            if isinstance(v, bool) or not isinstance(v, (int, float, np.integer, np.floating)) \
                    or not math.isfinite(v) or v < 0:
                raise InputError(f"{opt} must be a finite number >= 0; got {v!r}")
            object.__setattr__(self, f.name, float(v))
        if self.steep_per_m > 0 and self.steep_slope_pct is None:
            raise InputError(f"{OPTION_NAMES['steep_per_m']} is {self.steep_per_m} but no slope "
                             f"threshold is set; give {OPTION_NAMES['steep_slope_pct']} too")


@dataclass
class LinkCosts:
    """Cost components and totals of m candidate links (struct of arrays).

    Attributes
    ----------
    components : dict of str -> ndarray of float64, shape (m,)
        ``length_m, surface_length_m, land_cost, climb_m, descent_m,
        max_slope_pct, steep_length_m, nodata_fraction, z_from_m, z_to_m``,
        then one ``land_cost_<name>`` per named land-cost raster, then the
        columns of extra terms.
    total : ndarray of float64, shape (m,)
        The price of each link; ``inf`` where impassable.
    passable : ndarray of bool, shape (m,)
    n_impassable : int
    reasons : dict of str -> int
        Count of impassable links by reason.
    reason_code : ndarray of int16, shape (m,)
        Index into ``reason_labels`` per link, -1 where passable.
    reason_labels : tuple of str
    """

    components: dict
    total: np.ndarray
    passable: np.ndarray
    n_impassable: int
    reasons: dict
    reason_code: np.ndarray = field(repr=False)
    reason_labels: tuple = ()

    def __len__(self):
        return int(self.total.shape[0])

    def reason(self, i) -> str:
        """Why link *i* is impassable ('' if it is passable)."""
        c = int(self.reason_code[i])
        return "" if c < 0 else self.reason_labels[c]

    def subset(self, idx) -> "LinkCosts":
        """The links selected by *idx* (integer indices or a boolean mask), in that order."""
        idx = np.asarray(idx)
        comps = {k: v[idx] for k, v in self.components.items()}
        code = self.reason_code[idx]
        passable = self.passable[idx]
        return LinkCosts(comps, self.total[idx], passable, int((~passable).sum()),
                         _count_reasons(code, self.reason_labels), code, self.reason_labels)


def _count_reasons(code, labels):
    counts = np.bincount(code[code >= 0], minlength=len(labels))
    return {labels[i]: int(c) for i, c in enumerate(counts) if c}


@dataclass
class CostContext:
    """What a cost term sees (read-only by convention).

    Attributes: ``xy`` (n, 2), ``edges`` (m, 2), ``p0``/``p1`` (m, 2) link ends,
    ``length_m`` (m,), ``weights`` (:class:`CostWeights`), ``working_crs``
    (pyproj CRS), ``terrain`` (:class:`~mainspan.ground.surfaces.Surface` or None),
    ``land`` (dict name -> Surface; the single unnamed raster is called
    ``land_cost``), ``named_land`` (bool: names were given), ``class_tables``
    (dict name -> (codes, costs)), ``expression`` (checked expression or
    None), ``sample_spacing_m`` (float or None), ``components`` (columns so
    far) and ``progress`` (``progress(done, total)`` for this term's work).
    """

    xy: np.ndarray
    edges: np.ndarray
    p0: np.ndarray
    p1: np.ndarray
    length_m: np.ndarray
    weights: CostWeights
    working_crs: pyproj.CRS
    terrain: Surface | None = None
    land: dict = field(default_factory=dict)
    named_land: bool = False
    class_tables: dict = field(default_factory=dict)
    expression: object = None
    sample_spacing_m: float | None = None
    components: dict = field(default_factory=dict)
    progress: Callable | None = None

    @property
    def m(self) -> int:
        return int(self.edges.shape[0])
