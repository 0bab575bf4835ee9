"""The price table: what the owner pays for everything but the pipe itself.

Pipe supply and lay is priced per metre in the pipe catalog
(:class:`mainspan.hydraulics.catalog.PipeCatalog`, column ``cost_per_m``)
and stays there.  Everything else a design prices comes from one
:class:`PriceTable`:

========================  ===============================================  ======
item                      what it prices                                   unit
========================  ===============================================  ======
excavation                trench volume, by depth band (each slice of the   m3
                          trench depth at the rate of its band)
shoring                   both trench walls, full height, where the trench  m2
                          is deeper than ``shoring_depth_m`` (1.5 m)
bedding                   bedding layer under the pipe (width x thickness)  m3
reinstatement             trench top surface, by surface class (the codes   m2
                          of a land-use raster, or names; ``default``
                          for anything not listed)
fitting                   air valves, washouts, isolation valves, thrust    each
                          blocks, pressure-reducing valves... by size
manhole                   base + per metre of depth; drop manholes extra    each/m
crossing                  lump sum per crossing (road, stream, rail)        each
pump_station              fixed + per kW of shaft power (also lift          each/kW
                          stations)
energy                    price of a kWh                                    kWh
operation                 hours per year, years, discount rate for the      -
                          present value of the energy bill
========================  ===============================================  ======

Every price shipped with mainspan is an **invented placeholder**
(``placeholder=True``, written into ``run_info`` and the report); give your
own table before trusting a cost.

Reading a table
---------------
:func:`read_prices` reads a CSV file with the header
``item,key,size_mm,depth_to_m,value,unit`` (one price per row; blank lines
and lines starting with ``#`` are skipped)::

    item,key,size_mm,depth_to_m,value,unit
    placeholder,,,,0,
    excavation,,,1.5,25,m3            # trench slice 0-1.5 m deep
    excavation,,,3.0,32,m3            # slice 1.5-3 m
    excavation,,,,55,m3               # empty depth_to_m: everything deeper
    shoring,rate,,,18,m2
    shoring,from_depth,,,1.5,m
    bedding,,,,45,m3
    reinstatement,default,,,4,m2
    reinstatement,5,,,65,m2           # land-use class 5 (road)
    fitting,air_valve,50,,450,each    # sizes between rows are interpolated
    manhole,base,,,1500,each
    manhole,per_m,,,600,m
    manhole,drop_extra,,,1200,each
    crossing,,,,5000,each
    pump_station,fixed,,,40000,each
    pump_station,per_kw,,,900,kW
    energy,per_kwh,,,0.15,kWh
    operation,hours_per_year,,,1500,h
    operation,years,,,25,a
    operation,discount_rate,,,0.05,

or the same rows as a TOML table (the project file's ``[prices]`` section,
or a ``.toml`` file holding one)::

    [prices]
    placeholder = false
    excavation = { "1.5" = 25.0, "3.0" = 32.0, deeper = 55.0 }
    shoring = { rate = 18.0, from_depth = 1.5 }
    bedding = 45.0
    reinstatement = { default = 4.0, "5" = 65.0 }
    fitting = { air_valve = { "50" = 450.0, "400" = 2500.0 } }
    manhole = { base = 1500.0, per_m = 600.0, drop_extra = 1200.0 }
    crossing = 5000.0
    pump_station = { fixed = 40000.0, per_kw = 900.0 }
    energy = { per_kwh = 0.15 }
    operation = { hours_per_year = 1500, years = 25, discount_rate = 0.05 }

Items a table leaves out keep the placeholder defaults; they are listed in
``PriceTable.defaulted`` and the table counts as a placeholder.  A bad
value is a one-line :class:`~mainspan.errors.DataFileError` naming the
file, line and column.

References
----------
.. [1] Present value of a uniform annual amount (annuity factor)
   ``(1 - (1 + r)**-n) / r``: any engineering-economics text, e.g. Grant,
   Ireson & Leavenworth, *Principles of Engineering Economy* (from memory).
"""

from __future__ import annotations

import csv
import math
import os
import re
from dataclasses import dataclass, field, replace

import numpy as np

from ..errors import DataFileError, InputError

__all__ = ["PriceTable", "FITTING_KINDS", "default_prices", "read_prices", "prices_from_mapping",
           "write_prices_csv", "annuity_factor"]

#: Fitting kinds the design stage prices (a table may add more).
FITTING_KINDS = ("air_valve", "washout", "isolation_valve", "thrust_block", "prv")

CSV_HEADER = ("item", "key", "size_mm", "depth_to_m", "value", "unit")

# item -> {key -> unit}; key "" for items without keys; "*" for free keys
_SCHEMA = {
    "placeholder": {"": ""},
    "excavation": {"": "m3"},
    "shoring": {"rate": "m2", "from_depth": "m"},
    "bedding": {"": "m3"},
    "reinstatement": {"*": "m2"},
    "fitting": {"*": "each"},
    "manhole": {"base": "each", "per_m": "m", "drop_extra": "each"},
    "crossing": {"": "each"},
    "pump_station": {"fixed": "each", "per_kw": "kW"},
    "energy": {"per_kwh": "kWh"},
    "operation": {"hours_per_year": "h", "years": "a", "discount_rate": ""},
}


def annuity_factor(rate, years):
    """Present value of 1 a year for *years* years at discount *rate*.

    ``(1 - (1 + r)**-n) / r``, and ``n`` when ``r == 0`` (engineering
    economics, from memory).

    Examples
    --------
    >>> round(annuity_factor(0.05, 20), 4)   # annuity tables: 12.4622
    12.4622
    """
    r, n = float(rate), float(years)
    if r == 0.0:
        return n
    return (1.0 - (1.0 + r) ** -n) / r


@dataclass(frozen=True)
class PriceTable:
    """Unit prices for trenches, fittings, structures, pumping and energy.

    Attributes
    ----------
    excavation_depth_to_m : tuple of float
        Upper depth of each excavation band, m, ascending; the last is inf.
    excavation_per_m3 : tuple of float
        Price per m³ of trench in each band.  A trench ``d`` deep pays each
        slice of its depth at the rate of the band the slice lies in
        (continuous in depth; common practice, no single source).
    shoring_per_m2 : float
        Trench support, per m² of trench wall (both walls, full height).
    shoring_depth_m : float
        Trenches deeper than this are shored (1.5 m: most trench-safety
        rules, e.g. US OSHA 29 CFR 1926.652 asks for protection from 5 ft).
    bedding_per_m3 : float
        Imported bedding under the pipe, per m³.
    reinstatement_per_m2 : tuple of (str, float)
        Surface reinstatement per m² of trench top by surface class; the
        class ``"default"`` prices any class not listed.
    fittings : tuple of (str, tuple of (size_mm, price))
        Price each by kind and nominal size; between listed sizes the price
        is interpolated linearly, below the smallest it is the smallest's,
        above the largest it is extrapolated from the last two sizes.
    manhole_base, manhole_per_m, drop_manhole_extra : float
        Manhole = base + per_m × depth (+ drop extra for a drop manhole).
    crossing_lump_sum : float
        Per crossing of a road, stream or railway.
    pump_station_fixed, pump_station_per_kw : float
        Pump or lift station = fixed + per_kw × shaft power; no station, no
        cost.
    energy_per_kwh : float
        Price of electrical energy.
    hours_per_year : float
        Pumping hours a year at the design duty.
    years : float
        Period of the present value.
    discount_rate : float
        Real discount rate a year (0.05 = 5 %).
    placeholder : bool
        True while any price is an invented default.
    defaulted : tuple of str
        Items taken from the placeholder defaults.
    source : str
        Where the table came from.

    Examples
    --------
    >>> p = default_prices()
    >>> p.placeholder, float(p.pump_station_cost(100.0)[()])
    (True, 130000.0)
    """

    excavation_depth_to_m: tuple = (1.5, 3.0, 4.5, math.inf)
    excavation_per_m3: tuple = (25.0, 32.0, 42.0, 55.0)
    shoring_per_m2: float = 18.0
    shoring_depth_m: float = 1.5
    bedding_per_m3: float = 45.0
    reinstatement_per_m2: tuple = (("default", 4.0), ("1", 4.0), ("2", 9.0), ("3", 6.0), ("4", 12.0),
                                   ("5", 65.0))
    fittings: tuple = (
        ("air_valve", ((50.0, 450.0), (400.0, 2500.0))),
        ("washout", ((50.0, 350.0), (400.0, 2000.0))),
        ("isolation_valve", ((32.0, 120.0), (110.0, 450.0), (400.0, 4500.0))),
        ("thrust_block", ((32.0, 60.0), (400.0, 900.0))),
        ("prv", ((50.0, 1800.0), (400.0, 15000.0))),
    )
    manhole_base: float = 1500.0
    manhole_per_m: float = 600.0
    drop_manhole_extra: float = 1200.0
    crossing_lump_sum: float = 5000.0
    pump_station_fixed: float = 40000.0
    pump_station_per_kw: float = 900.0
    energy_per_kwh: float = 0.15
    hours_per_year: float = 1500.0
    years: float = 25.0
    discount_rate: float = 0.05
    placeholder: bool = True
    defaulted: tuple = field(default=(), compare=False)
    source: str = field(default="built-in placeholder defaults", compare=False)

    def __post_init__(self):
        d = np.asarray(self.excavation_depth_to_m, float)
        r = np.asarray(self.excavation_per_m3, float)
        if d.ndim != 1 or d.size == 0 or d.shape != r.shape or np.any(np.diff(d) <= 0) or d[0] <= 0 \
                or not np.isinf(d[-1]) or not np.all(np.isfinite(r)) or np.any(r < 0):
            raise InputError("price table 'excavation': give bands with ascending depth_to_m > 0, the last open "
                             f"(deeper), and prices >= 0; got depths {d.tolist()} and prices {r.tolist()}")
        for name in ("shoring_per_m2", "shoring_depth_m", "bedding_per_m3", "manhole_base", "manhole_per_m",
                     "drop_manhole_extra", "crossing_lump_sum", "pump_station_fixed", "pump_station_per_kw",
                     "energy_per_kwh", "hours_per_year", "years", "discount_rate"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float, np.floating)) and np.isfinite(v) and v >= 0):
                raise InputError(f"price table '{name}' must be a number >= 0, got {v!r}")
        if self.hours_per_year > 8760:
            raise InputError(f"price table 'hours_per_year' is {self.hours_per_year}; a year has 8760 hours")
        classes = dict(self.reinstatement_per_m2)
        if "default" not in classes:
            raise InputError("price table 'reinstatement' has no 'default' class; add one for surfaces not listed")
        for kind, rows in self.fittings:
            s = np.asarray([a for a, _ in rows], float)
            if s.size == 0 or np.any(np.diff(s) <= 0):
                raise InputError(f"price table fitting '{kind}': sizes must be distinct; got {s.tolist()}")

    # ------------------------------------------------------------------ prices
    def excavation_rate(self, depth_m):
        """Marginal excavation price per m³ of the slice at *depth_m* below ground."""
        d = np.asarray(depth_m, float)
        idx = np.searchsorted(np.asarray(self.excavation_depth_to_m), d, side="right")
        return np.asarray(self.excavation_per_m3)[np.minimum(idx, len(self.excavation_per_m3) - 1)]

    def excavation_cost_per_m2(self, depth_m):
        """Excavation price of a trench *depth_m* deep per m² of plan (the banded integral)."""
        d = np.maximum(np.asarray(depth_m, float), 0.0)
        tops = np.concatenate([[0.0], np.asarray(self.excavation_depth_to_m[:-1])])
        bottoms = np.asarray(self.excavation_depth_to_m)
        slice_m = np.clip(d[..., None] - tops, 0.0, bottoms - tops)
        return slice_m @ np.asarray(self.excavation_per_m3)

    def reinstatement_rate(self, surface_class=None, size=None):
        """Reinstatement per m² for each surface class (str or int codes; None: default)."""
        table = dict(self.reinstatement_per_m2)
        if surface_class is None:
            out = np.full(() if size is None else size, table["default"], float)
            return out
        cls = np.asarray(surface_class, dtype=object)
        keys = np.array([str(int(c)) if isinstance(c, (int, np.integer)) or
                         (isinstance(c, (float, np.floating)) and float(c).is_integer()) else str(c)
                         for c in cls.ravel()], dtype=object)
        return np.array([table.get(k, table["default"]) for k in keys], float).reshape(cls.shape)

    def trench_parts(self, depth_m, width_m, length_m, surface_class=None, *, bedding_m=0.1, reinstatement_per_m2=None):
        """Trench cost split into excavation, shoring, bedding and reinstatement (arrays).

        Parameters
        ----------
        depth_m : array_like
            Depth from ground to the bottom of the bedding, m.
        width_m, length_m : array_like
            Trench width and length, m.
        surface_class : array_like or None
            Surface class per trench (land-use code or name); None: ``default``.
        bedding_m : float, default=0.1
            Thickness of the bedding layer, m.
        reinstatement_per_m2 : array_like or None
            Reinstatement rate per trench, replacing the class lookup (e.g. a
            length-weighted mean over the surfaces a link crosses, see
            :meth:`mixed_reinstatement_rate`).
        """
        d, w, L = np.broadcast_arrays(*(np.asarray(a, float) for a in (depth_m, width_m, length_m)))
        plan = w * L
        deep = d > self.shoring_depth_m
        return {
            "excavation": self.excavation_cost_per_m2(d) * plan,
            "shoring": np.where(deep, 2.0 * d * L * self.shoring_per_m2, 0.0),
            "bedding": self.bedding_per_m3 * plan * bedding_m,
            "reinstatement": (self.reinstatement_rate(surface_class, d.shape) if reinstatement_per_m2 is None
                              else np.asarray(reinstatement_per_m2, float)) * plan,
        }

    def mixed_reinstatement_rate(self, offsets, surface_class, length_m):
        """Length-weighted reinstatement rate per trench over the surface classes it crosses.

        Parameters
        ----------
        offsets : array_like of int, shape (L + 1,)
            CSR offsets: trench ``k`` crosses pieces ``offsets[k]:offsets[k+1]``.
        surface_class : array_like, one per piece
            Class code of each piece (NaN or unknown: the ``default`` class).
        length_m : array_like, one per piece
            Length of each piece.

        Examples
        --------
        >>> float(default_prices().mixed_reinstatement_rate([0, 2], [1, 5], [90.0, 10.0])[0])   # 0.9*4 + 0.1*65
        10.1
        """
        off = np.asarray(offsets, np.int64)
        cls = np.asarray(surface_class, float)
        ln = np.asarray(length_m, float)
        codes = np.where(np.isfinite(cls), cls, -1.0)
        table = dict(self.reinstatement_per_m2)
        uniq, inv = np.unique(codes, return_inverse=True)
        rate_u = np.array([table.get(str(int(c)), table["default"]) if c >= 0 and float(c).is_integer()
                           else table["default"] for c in uniq], float)
        piece = np.repeat(np.arange(off.size - 1), np.diff(off))
        L = off.size - 1
        tot = np.bincount(piece, weights=ln, minlength=L)
        wsum = np.bincount(piece, weights=ln * rate_u[inv.ravel()] if ln.size else ln, minlength=L)
        return np.where(tot > 0, wsum / np.where(tot > 0, tot, 1.0), table["default"])

    def trench_cost(self, depth_m, width_m, length_m, surface_class=None, *, bedding_m=0.1):
        """Total trench cost: excavation + shoring + bedding + reinstatement.

        Examples
        --------
        >>> p = default_prices()
        >>> float(p.trench_cost(1.0, 0.5, 10.0, bedding_m=0.0)[()])   # 25*5 + 4*5
        145.0
        """
        parts = self.trench_parts(depth_m, width_m, length_m, surface_class, bedding_m=bedding_m)
        return parts["excavation"] + parts["shoring"] + parts["bedding"] + parts["reinstatement"]

    def manhole_cost(self, depth_m, drop=False):
        """Manhole price: base + per metre of depth, plus the drop extra where *drop*."""
        d = np.maximum(np.asarray(depth_m, float), 0.0)
        return self.manhole_base + self.manhole_per_m * d + np.where(np.asarray(drop, bool), self.drop_manhole_extra, 0.0)

    def fitting_cost(self, kind, size_mm):
        """Price each of a fitting *kind* at nominal *size_mm* (see the ``fittings`` attribute)."""
        table = dict(self.fittings)
        if kind not in table:
            raise InputError(f"price table has no fitting '{kind}'; add rows 'fitting,{kind},SIZE_MM,,PRICE,each' "
                             f"(kinds priced: {', '.join(table)})")
        s = np.asarray([a for a, _ in table[kind]], float)
        p = np.asarray([b for _, b in table[kind]], float)
        x = np.asarray(size_mm, float)
        out = np.interp(x, s, p)
        if s.size >= 2:
            slope = (p[-1] - p[-2]) / (s[-1] - s[-2])
            out = np.where(x > s[-1], np.maximum(p[-1] + slope * (x - s[-1]), 0.0), out)
        return out

    def pump_station_cost(self, power_kw):
        """Pump or lift station price: fixed + per kW; zero where no power is needed."""
        kw = np.asarray(power_kw, float)
        return np.where(kw > 0, self.pump_station_fixed + self.pump_station_per_kw * kw, 0.0)

    @property
    def pv_factor(self) -> float:
        """Annuity factor of the table's years and discount rate."""
        return annuity_factor(self.discount_rate, self.years)

    def energy_cost_pv(self, power_kw, hours_per_year=None):
        """Present value of the energy bill of *power_kw* run *hours_per_year* a year."""
        h = self.hours_per_year if hours_per_year is None else hours_per_year
        return np.asarray(power_kw, float) * np.asarray(h, float) * self.energy_per_kwh * self.pv_factor

    # ------------------------------------------------------------------ rows
    def rows(self):
        """The table as CSV rows (item, key, size_mm, depth_to_m, value, unit)."""
        out = [("placeholder", "", "", "", "1" if self.placeholder else "0", "")]
        for dep, r in zip(self.excavation_depth_to_m, self.excavation_per_m3):
            out.append(("excavation", "", "", "" if math.isinf(dep) else _g(dep), _g(r), "m3"))
        out += [("shoring", "rate", "", "", _g(self.shoring_per_m2), "m2"),
                ("shoring", "from_depth", "", "", _g(self.shoring_depth_m), "m"),
                ("bedding", "", "", "", _g(self.bedding_per_m3), "m3")]
        out += [("reinstatement", k, "", "", _g(v), "m2") for k, v in self.reinstatement_per_m2]
        for kind, rows in self.fittings:
            out += [("fitting", kind, _g(s), "", _g(v), "each") for s, v in rows]
        out += [("manhole", "base", "", "", _g(self.manhole_base), "each"),
                ("manhole", "per_m", "", "", _g(self.manhole_per_m), "m"),
                ("manhole", "drop_extra", "", "", _g(self.drop_manhole_extra), "each"),
                ("crossing", "", "", "", _g(self.crossing_lump_sum), "each"),
                ("pump_station", "fixed", "", "", _g(self.pump_station_fixed), "each"),
                ("pump_station", "per_kw", "", "", _g(self.pump_station_per_kw), "kW"),
                ("energy", "per_kwh", "", "", _g(self.energy_per_kwh), "kWh"),
                ("operation", "hours_per_year", "", "", _g(self.hours_per_year), "h"),
                ("operation", "years", "", "", _g(self.years), "a"),
                ("operation", "discount_rate", "", "", _g(self.discount_rate), "")]
        return out

    def describe(self) -> str:
        """One line for ``run_info``: source and placeholder status."""
        if self.placeholder:
            what = ("all prices are invented placeholders" if not self.defaulted or len(self.defaulted) >= len(_SCHEMA) - 1
                    else "placeholder prices for: " + ", ".join(self.defaulted))
            return f"{self.source}; PLACEHOLDER: {what}; give your own price table (--prices FILE)"
        return f"{self.source}; user prices"


def _g(x):
    return f"{float(x):.10g}"


def default_prices() -> PriceTable:
    """The shipped price table: **every price an invented placeholder** (``placeholder=True``).

    Land-use classes follow the demo raster ``landuse.tif``: 1 cropland,
    2 orchard, 3 rock, 4 wetland, 5 road.
    """
    return PriceTable()


# ---------------------------------------------------------------------- reading
def _rows_from_csv(path):
    try:
        with open(path, newline="", encoding="utf-8-sig") as fh:
            text = fh.read()
    except OSError as exc:
        raise DataFileError(f"price table {path}: cannot read ({exc.strerror or exc}); check the path") from None
    except UnicodeDecodeError:
        raise DataFileError(f"price table {path}: not UTF-8 text; save it as UTF-8 CSV") from None
    lines = text.splitlines()
    body = [(i + 1, ln) for i, ln in enumerate(lines) if ln.strip() and not ln.lstrip().startswith("#")]
    if not body:
        raise DataFileError(f"price table {path}: file is empty; start with the header {','.join(CSV_HEADER)}")
    head_line, head = body[0]
    header = [h.strip().lower() for h in next(csv.reader([head]))]
    for c in CSV_HEADER:
        if c not in header:
            raise DataFileError(f"price table {path}, line {head_line}: missing column '{c}'; "
                                f"the header must be {','.join(CSV_HEADER)}")
    col = {h: i for i, h in enumerate(header)}
    out = []
    for line, ln in body[1:]:
        r = next(csv.reader([re.sub(r"\s+#.*$", "", ln)]))
        cell = {c: (r[col[c]].strip() if col[c] < len(r) else "") for c in CSV_HEADER}
        out.append((line, cell))
    return out


def _rows_from_mapping(table, path, text=None):
    """Flatten a TOML-style mapping into CSV-like rows, with best-effort line numbers."""
    def line_of(key):
        if text is None:
            return None
        for i, ln in enumerate(text.splitlines()):
            if re.match(rf"""^\s*["']?{re.escape(str(key))}["']?\s*(=|\.)""", ln) or \
                    re.search(rf"""[{{,]\s*["']?{re.escape(str(key))}["']?\s*=""", ln):
                return i + 1
        return None

    out = []

    def row(item, key="", size="", depth="", value=""):
        return (line_of(item) if not key else (line_of(key) or line_of(item)),
                {"item": item, "key": str(key), "size_mm": str(size), "depth_to_m": str(depth),
                 "value": value if isinstance(value, str) else repr(value), "unit": ""})

    for item, v in table.items():
        if item == "placeholder":
            out.append(row(item, value=str(v).lower()))
        elif item == "excavation" and isinstance(v, dict):
            for dep, price in v.items():
                r = row(item, dep, depth="" if str(dep).lower() in ("deeper", "inf") else dep, value=price)
                r[1]["key"] = ""
                out.append(r)
        elif item == "fitting" and isinstance(v, dict):
            for kind, sizes in v.items():
                if not isinstance(sizes, dict):
                    out.append(row(item, kind, size="?", value=sizes))
                    continue
                for size, price in sizes.items():
                    out.append(row(item, kind, size=size, value=price))
        elif isinstance(v, dict):
            for key, price in v.items():
                out.append(row(item, key, value=price))
        else:
            out.append(row(item, value=v))
    return out


def _where(path, line, column):
    return f"price table {path}" + (f", line {line}" if line else "") + f", column '{column}'"


def _build(rows, path, *, default_placeholder):
    """PriceTable from CSV-like rows; missing items keep the placeholder defaults."""
    base = default_prices()
    got: dict = {}
    placeholder = default_placeholder
    seen: dict = {}
    for line, c in rows:
        item = c["item"].strip().lower()
        key = c["key"].strip()
        if item not in _SCHEMA:
            raise DataFileError(f"{_where(path, line, 'item')}: unknown item '{c['item']}'; "
                                f"items are {', '.join(_SCHEMA)}")
        keys = _SCHEMA[item]
        if "*" in keys:
            if not key:
                raise DataFileError(f"{_where(path, line, 'key')}: empty; '{item}' rows need a key "
                                    + ("(a surface class, or 'default')" if item == "reinstatement" else "(the fitting kind)"))
            unit = keys["*"]
        else:
            if key.lower() not in keys:
                want = " or ".join(f"'{k}'" for k in keys) if "" not in keys else "empty"
                raise DataFileError(f"{_where(path, line, 'key')}: '{key}' is not a key of '{item}'; use {want}")
            key = key.lower()
            unit = keys[key]
        if c["unit"] and unit and c["unit"].strip() != unit:
            raise DataFileError(f"{_where(path, line, 'unit')}: '{c['unit']}' but '{item}' is priced per {unit}; "
                                f"convert the price to per {unit}")
        raw = c["value"].strip()
        if item == "placeholder":
            low = raw.lower()
            if low not in ("1", "0", "true", "false", "yes", "no"):
                raise DataFileError(f"{_where(path, line, 'value')}: '{raw}' is not true/false; use 1 or 0")
            placeholder = low in ("1", "true", "yes")
            continue
        value = _number(raw, path, line, "value")
        size = depth = None
        if item == "fitting":
            size = _number(c["size_mm"], path, line, "size_mm", positive=True)
        if item == "excavation":
            depth = math.inf if c["depth_to_m"].strip() == "" else _number(c["depth_to_m"], path, line, "depth_to_m", positive=True)
        if item == "operation" and key == "discount_rate" and value >= 1:
            raise DataFileError(f"{_where(path, line, 'value')}: discount rate {raw} is a fraction; "
                                f"write 5 % as 0.05")
        if item == "operation" and key == "hours_per_year" and value > 8760:
            raise DataFileError(f"{_where(path, line, 'value')}: {raw} hours; a year has 8760")
        ident = (item, key, size, depth)
        if ident in seen:
            raise DataFileError(f"{_where(path, line, 'item')}: '{item}' {key} repeats line {seen[ident]}; keep one")
        seen[ident] = line
        got.setdefault(item, []).append((line, key, size, depth, value))

    kw = {}
    if "excavation" in got:
        bands = sorted((d, v) for _, _, _, d, v in got["excavation"])
        if not math.isinf(bands[-1][0]):
            line = got["excavation"][-1][0]
            raise DataFileError(f"{_where(path, line, 'depth_to_m')}: no open band; add a row with an empty "
                                "depth_to_m for trenches deeper than the last band")
        kw["excavation_depth_to_m"] = tuple(d for d, _ in bands)
        kw["excavation_per_m3"] = tuple(v for _, v in bands)
    scalars = {("shoring", "rate"): "shoring_per_m2", ("shoring", "from_depth"): "shoring_depth_m",
               ("bedding", ""): "bedding_per_m3", ("manhole", "base"): "manhole_base",
               ("manhole", "per_m"): "manhole_per_m", ("manhole", "drop_extra"): "drop_manhole_extra",
               ("crossing", ""): "crossing_lump_sum", ("pump_station", "fixed"): "pump_station_fixed",
               ("pump_station", "per_kw"): "pump_station_per_kw", ("energy", "per_kwh"): "energy_per_kwh",
               ("operation", "hours_per_year"): "hours_per_year", ("operation", "years"): "years",
               ("operation", "discount_rate"): "discount_rate"}
    for item, rows_ in got.items():
        for _, key, _, _, v in rows_:
            if (item, key) in scalars:
                kw[scalars[(item, key)]] = v
    if "reinstatement" in got:
        classes = dict(base.reinstatement_per_m2)
        classes.update({k: v for _, k, _, _, v in got["reinstatement"]})
        kw["reinstatement_per_m2"] = tuple(sorted(classes.items(), key=lambda kv: (kv[0] != "default", kv[0])))
    if "fitting" in got:
        table = dict(base.fittings)
        given: dict = {}
        for _, kind, s, _, v in got["fitting"]:
            given.setdefault(kind, []).append((s, v))
        table.update({k: tuple(sorted(v)) for k, v in given.items()})
        kw["fittings"] = tuple(table.items())
    missing = []
    for item, keys in _SCHEMA.items():
        if item == "placeholder":
            continue
        if item not in got:
            missing.append(item)
        elif "*" not in keys and item != "excavation":
            have = {k for _, k, _, _, _ in got[item]}
            missing += [f"{item} {k}".strip() for k in keys if k not in have]
    try:
        return replace(base, **kw, placeholder=bool(placeholder or missing), defaulted=tuple(missing),
                       source=str(path))
    except InputError as exc:
        raise DataFileError(f"price table {path}: {exc}") from None


def _number(s, path, line, column, *, positive=False):
    s = str(s).strip()
    if s == "":
        raise DataFileError(f"{_where(path, line, column)}: empty; give a number")
    try:
        x = float(s)
    except ValueError:
        raise DataFileError(f"{_where(path, line, column)}: '{s}' is not a number; give a number") from None
    if not math.isfinite(x) or x < 0 or (positive and x == 0):
        raise DataFileError(f"{_where(path, line, column)}: {s} must be {'> 0' if positive else '>= 0'}; fix the value")
    return x


def prices_from_mapping(table, *, where="[prices]", text=None) -> PriceTable:
    """PriceTable from a TOML-style mapping (the project file's ``[prices]`` table).

    Examples
    --------
    >>> p = prices_from_mapping({"placeholder": False, "energy": {"per_kwh": 0.2}})
    >>> p.energy_per_kwh, p.placeholder          # other items keep the placeholders
    (0.2, True)
    """
    if not isinstance(table, dict):
        raise InputError(f"{where} must be a table of prices; see mainspan.hydraulics.prices")
    return _build(_rows_from_mapping(table, where, text), where, default_placeholder=False)


def read_prices(path) -> PriceTable:
    """Read a price table from a CSV file, or a TOML file with a ``[prices]`` table.

    Raises
    ------
    DataFileError
        Naming the file, line and column of the first bad value.
    """
    path = os.fspath(path)
    if path.lower().endswith(".toml"):
        import tomllib
        try:
            with open(path, "rb") as f:
                raw = f.read()
            doc = tomllib.loads(raw.decode("utf-8"))
        except OSError as exc:
            raise DataFileError(f"price table {path}: cannot read ({exc.strerror or exc}); check the path") from None
        except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
            raise DataFileError(f"price table {path}: not valid TOML ({exc})") from None
        table = doc.get("prices", doc)
        return _build(_rows_from_mapping(table, path, raw.decode("utf-8")), path, default_placeholder=False)
    return _build(_rows_from_csv(path), path, default_placeholder=False)


def write_prices_csv(prices: PriceTable, path, *, overwrite=False):
    """Write *prices* as an editable CSV template (the layout :func:`read_prices` reads)."""
    from ..writers.tables import atomic_write

    lines = ["# mainspan price table: one price per row. Pipe supply and lay is priced per metre in the pipe",
             "# catalog. Every value below is an INVENTED PLACEHOLDER: replace them with local rates and set",
             "# placeholder to 0. Units: excavation per m3 of trench by depth band (empty depth_to_m = deeper),",
             "# shoring per m2 of both walls of trenches deeper than from_depth, reinstatement per m2 by land-use class, fittings each",
             "# by nominal size (interpolated), pump station fixed + per kW, energy per kWh.",
             ",".join(CSV_HEADER)]
    lines += [",".join(r) for r in prices.rows()]
    return atomic_write(path, "\n".join(lines) + "\n", overwrite=overwrite, what="price table")
