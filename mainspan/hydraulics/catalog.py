"""Pipe catalogs: the sizes a design may choose from.

A :class:`PipeCatalog` is a struct of arrays sorted by inner diameter (then
cost, then name), so "the smallest pipe that works" is the first feasible
column of a links × pipes table.

References
----------
.. [1] ISO 4427-2:2019 / EN 12201-2:2011+A1:2013, polyethylene pipes for
   water supply -- dimensions of PE100 SDR11 (PN16) pipes.
.. [2] USDA NRCS Conservation Practice Standard 430, Irrigation Pipeline --
   Hazen–Williams C = 150 for plastic pipe.
.. [3] Great Lakes–Upper Mississippi River Board, *Recommended Standards for
   Wastewater Facilities*, 2014 -- n = 0.013, sewer sizes 200–900 mm.
.. [4] ISO 11922-1, thermoplastics pipes -- dimensions and tolerances: grade
   B mean outside diameter tolerance 0.009·d_n (rounded up to 0.1 mm, at
   least 0.3 mm); grade V wall tolerance 0.1·e + 0.1 mm (rounded up to
   0.1 mm) -- both from memory.

PE bore
-------
ISO 4427-2 / EN 12201-2 tabulate the *minimum* wall; a pipe as made sits
inside the tolerance band, so its hydraulic bore is taken from the *mean*
outside diameter and the *mean* wall (:func:`pe_mean_bore_mm`): each the
nominal value plus half its positive tolerance [4].  A 110 mm SDR11 pipe
(minimum wall 10.0 mm) has a mean bore of 89.4 mm, not 90.0 mm.
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import DataFileError, InputError
from .friction import G

__all__ = ["PipeCatalog", "default_catalog", "default_gravity_catalog", "read_catalog", "pe_mean_bore_mm",
           "pipe_wall_mm"]

#: Water density used to turn a PN rating (bar) into head (m).
_RHO_RATING = 1000.0


@dataclass(frozen=True)
class PipeCatalog:
    """Pipes available to a design (arrays of equal length P).

    Attributes
    ----------
    name : ndarray of str
    nominal_mm : ndarray of float
        Nominal size (outside diameter for PE, bore for sewer pipe).
    inner_mm : ndarray of float
        Hydraulic (inner) diameter.
    roughness_mm : ndarray of float
        Absolute roughness for Darcy–Weisbach (NaN if not known).
    hw_c : ndarray of float
        Hazen–Williams C (NaN if not known).
    rating_m : ndarray of float
        Allowable pressure as head of water, m (NaN for non-pressure pipe).
    cost_per_m : ndarray of float
        Supply-and-lay price per metre.
    material : ndarray of str
    manning_n : ndarray of float
        Manning's n for gravity flow (NaN: use the design default).
    outer_mm : ndarray of float
        Outside diameter (NaN: not given).  Gravity design measures cover
        to the outside of the pipe and prices the trench on it.
    wall_mm : ndarray of float
        Wall thickness used for the surge wave speed (NaN: half of nominal
        minus inner diameter).
    modulus_gpa : ndarray of float
        Elastic modulus of the wall for the surge wave speed (NaN: by
        material name, :func:`mainspan.hydraulics.sizing.material_modulus_pa`).
    """

    name: np.ndarray
    nominal_mm: np.ndarray
    inner_mm: np.ndarray
    roughness_mm: np.ndarray
    hw_c: np.ndarray
    rating_m: np.ndarray
    cost_per_m: np.ndarray
    material: np.ndarray
    manning_n: np.ndarray | None = None
    outer_mm: np.ndarray | None = None   # gravity (grav12): outside diameter
    wall_mm: np.ndarray | None = None
    modulus_gpa: np.ndarray | None = None

    def __post_init__(self):
        arrays = {}
        for f in ("nominal_mm", "inner_mm", "roughness_mm", "hw_c", "rating_m", "cost_per_m"):
            arrays[f] = np.atleast_1d(np.asarray(getattr(self, f), dtype=np.float64))
        name = np.atleast_1d(np.asarray(self.name, dtype=object))
        material = np.atleast_1d(np.asarray(self.material, dtype=object))
        p = name.size
        if p == 0:
            raise InputError("pipe catalog is empty; give at least one pipe")
        mn = self.manning_n
        arrays["manning_n"] = np.full(p, np.nan) if mn is None else np.atleast_1d(np.asarray(mn, dtype=np.float64))
        om = self.outer_mm
        arrays["outer_mm"] = np.full(p, np.nan) if om is None else np.atleast_1d(np.asarray(om, dtype=np.float64))
        for f in ("wall_mm", "modulus_gpa"):
            v = getattr(self, f)
            arrays[f] = np.full(p, np.nan) if v is None else np.atleast_1d(np.asarray(v, dtype=np.float64))
        for f, arr in {**arrays, "material": material}.items():
            if arr.shape != (p,):
                raise InputError(f"pipe catalog field '{f}' has {arr.size} values for {p} pipes; give one per pipe")
        if len(set(name.tolist())) != p:
            raise InputError("pipe catalog repeats a pipe name; give each pipe a unique name")
        for f, allow_nan in (("nominal_mm", False), ("inner_mm", False), ("cost_per_m", False),
                             ("roughness_mm", True), ("hw_c", True), ("rating_m", True), ("manning_n", True),
                             ("outer_mm", True), ("wall_mm", True), ("modulus_gpa", True)):
            arr = arrays[f]
            ok = np.isfinite(arr) & ((arr >= 0) if f in ("roughness_mm", "cost_per_m") else (arr > 0))
            if allow_nan:
                ok |= np.isnan(arr)
            bad = np.flatnonzero(~ok)
            if bad.size:
                raise InputError(
                    f"pipe catalog field '{f}' of pipe '{name[bad[0]]}' is {arr[bad[0]]}; give a positive number"
                )
        thin = np.flatnonzero(arrays["outer_mm"] < arrays["inner_mm"])
        if thin.size:
            raise InputError(f"pipe catalog field 'outer_mm' of pipe '{name[thin[0]]}' is {arrays['outer_mm'][thin[0]]}, "
                             f"below its inner_mm {arrays['inner_mm'][thin[0]]}; give the outside diameter in mm")
        order = np.lexsort((name.astype(str), arrays["cost_per_m"], arrays["inner_mm"]))
        object.__setattr__(self, "name", name[order])
        object.__setattr__(self, "material", material[order])
        for f, arr in arrays.items():
            object.__setattr__(self, f, arr[order])

    def __len__(self):
        return int(self.name.size)


def _ceil_01(x):
    return np.ceil(np.round(np.asarray(x, float) * 10.0, 9)) / 10.0


def pe_mean_bore_mm(od_mm, min_wall_mm):
    """Bore of a PE pipe from its nominal OD and minimum wall, at the mean of both tolerance bands.

    Mean OD = d_n + ½·max(0.3, ⌈0.009·d_n⌉₀.₁); mean wall = e + ½·⌈0.1·e + 0.1⌉₀.₁
    (ISO 11922-1 grades B and V, from memory; ⌈⌉₀.₁ rounds up to 0.1 mm).

    Examples
    --------
    >>> float(pe_mean_bore_mm(110.0, 10.0)), float(pe_mean_bore_mm(32.0, 3.0))
    (89.4, 25.75)
    """
    od = np.asarray(od_mm, float)
    e = np.asarray(min_wall_mm, float)
    mean_od = od + 0.5 * np.maximum(0.3, _ceil_01(0.009 * od))
    mean_e = e + 0.5 * _ceil_01(0.1 * e + 0.1)
    return np.round(mean_od - 2.0 * mean_e, 6)


def pe_mean_wall_mm(min_wall_mm):
    """Mean wall of a PE pipe from its minimum wall (ISO 11922-1 grade V, from memory)."""
    e = np.asarray(min_wall_mm, float)
    return np.round(e + 0.5 * _ceil_01(0.1 * e + 0.1), 6)


def default_catalog() -> PipeCatalog:
    """PE100 SDR11 (PN16) water pipe, 32–400 mm outside diameter.

    Bore from the mean outside diameter and mean wall (:func:`pe_mean_bore_mm`)
    of the ISO 4427-2 / EN 12201-2 minimum walls.
    Hazen–Williams C 150 for plastic pipe (NRCS standard 430).  Roughness
    0.007 mm (common practice for new PE, no single source).  Rating PN16 =
    16 bar = 163.2 m of water.  **Prices are invented placeholders for the
    demo** (2 + 0.00095·OD² per metre); replace them with local rates.

    Examples
    --------
    >>> cat = default_catalog()
    >>> cat.name[0], float(cat.inner_mm[0]), round(float(cat.rating_m[0]), 1)
    ('PE100 SDR11 32', 25.75, 163.2)
    """
    od = np.array([32, 40, 50, 63, 75, 90, 110, 125, 140, 160, 200, 250, 315, 400], dtype=np.float64)
    wall = np.array([3.0, 3.7, 4.6, 5.8, 6.8, 8.2, 10.0, 11.4, 12.7, 14.6, 18.2, 22.7, 28.6, 36.3])
    p = od.size
    return PipeCatalog(
        name=np.array([f"PE100 SDR11 {int(d)}" for d in od], dtype=object),
        nominal_mm=od,
        inner_mm=pe_mean_bore_mm(od, wall),
        wall_mm=pe_mean_wall_mm(wall),
        roughness_mm=np.full(p, 0.007),
        hw_c=np.full(p, 150.0),
        rating_m=np.full(p, 16.0e5 / (_RHO_RATING * G)),
        cost_per_m=np.round(2.0 + 0.00095 * od**2, 2),
        material=np.full(p, "PE100", dtype=object),
        manning_n=np.full(p, 0.010),
    )


# ---- gravity catalog (grav12) -------------------------------------------------------------------------
#: PVC sewer pipe, ASTM D3034 SDR 35 (4-15 in): outside diameters in inches (from memory), by the metric
#: nominal size used for it here.  Minimum wall = OD / 35 (the definition of SDR 35).
_PVC_SDR35_OD_IN = {200: 8.400, 250: 10.500, 300: 12.500, 375: 15.300}


def default_gravity_catalog() -> PipeCatalog:
    """Sewer pipe 200–900 mm nominal for gravity mains, with outside diameters.

    * PVC 200–375 mm: ASTM D3034 SDR 35 pipe of 8, 10, 12 and 15 in; the
      outside diameters (8.400, 10.500, 12.500, 15.300 in) are from memory,
      the wall is OD / 35 (the standard dimension ratio), the bore OD − 2 ×
      wall.  Nominal size is not bore.
    * Concrete 450–900 mm: nominal = bore (how concrete pipe is named);
      wall from ASTM C76 "Wall B" = bore in feet + 1 in (from memory, e.g.
      24 in pipe, 3 in wall).

    Manning's n 0.013 for both (Recommended Standards for Wastewater
    Facilities, 2014).  **Prices are invented placeholders for the demo.**

    Examples
    --------
    >>> cat = default_gravity_catalog()
    >>> cat.nominal_mm.tolist()[:3]
    [200.0, 250.0, 300.0]
    >>> round(float(cat.outer_mm[0]), 1), round(float(cat.inner_mm[0]), 1)   # 8 in SDR 35
    (213.4, 201.2)
    """
    d = np.array([200, 250, 300, 375, 450, 525, 600, 675, 750, 900], dtype=np.float64)
    material = np.where(d <= 375, "PVC", "concrete").astype(object)
    p = d.size
    od_pvc = np.array([_PVC_SDR35_OD_IN.get(int(x), np.nan) * 25.4 for x in d])
    outer = np.where(d <= 375, od_pvc, d + 2.0 * 25.4 * (d / 304.8 + 1.0))
    inner = np.where(d <= 375, od_pvc * (1.0 - 2.0 / 35.0), d)
    return PipeCatalog(
        name=np.array([f"{m} {int(x)}" for m, x in zip(material, d)], dtype=object),
        nominal_mm=d,
        inner_mm=np.round(inner, 1),
        roughness_mm=np.where(d <= 375, 0.0015, 0.3),
        hw_c=np.where(d <= 375, 150.0, 120.0),
        rating_m=np.full(p, np.nan),
        cost_per_m=np.round(15.0 + 0.0005 * d**2, 2),
        material=material,
        manning_n=np.full(p, 0.013),
        outer_mm=np.round(outer, 1),
    )
# ---- end gravity catalog (grav12) ---------------------------------------------------------------------


_REQUIRED = ("name", "nominal_mm", "cost_per_m", "material")


def read_catalog(csv_path) -> PipeCatalog:
    """Read a pipe catalog from a CSV file.

    Columns (header row, any order): ``name``, ``nominal_mm``, ``inner_mm``,
    ``cost_per_m``, ``material`` (all required); ``roughness_mm`` and/or
    ``hw_c`` and/or ``manning_n`` (at least one, per row); ``rating_m`` or
    ``pn_bar`` (optional, empty = not a pressure pipe); ``outer_mm``
    (optional outside diameter, for cover over gravity pipes).  Optional
    ``min_wall_mm``: where ``inner_mm`` is empty the bore is derived from it
    -- for PE pipe at the mean OD and mean wall (:func:`pe_mean_bore_mm`),
    otherwise OD − 2 × wall.  Optional ``wall_mm`` and ``modulus_gpa`` feed
    the surge wave speed.

    Raises
    ------
    DataFileError
        Naming the file, line and column of the first bad value.
    """
    path = Path(csv_path)
    try:
        with path.open(newline="", encoding="utf-8-sig") as fh:
            rows = list(csv.reader(fh))
    except OSError as exc:
        raise DataFileError(f"pipe catalog {path}: cannot read ({exc.strerror or exc}); check the path") from None
    except UnicodeDecodeError:
        raise DataFileError(f"pipe catalog {path}: not UTF-8 text; save the catalog as UTF-8 CSV") from None
    if not rows:
        raise DataFileError(f"pipe catalog {path}: file is empty; add a header row and one row per pipe")
    header = [h.strip().lower() for h in rows[0]]
    col = {h: i for i, h in enumerate(header)}
    for c in _REQUIRED:
        if c not in col:
            raise DataFileError(f"pipe catalog {path}, line 1: missing column '{c}'; the header must include {', '.join(_REQUIRED)}")
    if not ({"roughness_mm", "hw_c", "manning_n"} & col.keys()):
        raise DataFileError(f"pipe catalog {path}, line 1, column 'roughness_mm': no friction column; add 'roughness_mm', 'hw_c' or 'manning_n'")
    if "inner_mm" not in col and "min_wall_mm" not in col:
        raise DataFileError(f"pipe catalog {path}, line 1: missing column 'inner_mm'; give the bore, or 'min_wall_mm' to derive it")
    if "rating_m" in col and "pn_bar" in col:
        raise DataFileError(f"pipe catalog {path}, line 1, column 'pn_bar': both 'rating_m' and 'pn_bar' given; keep one")
    out = {k: [] for k in ("name", "nominal_mm", "inner_mm", "roughness_mm", "hw_c", "rating_m", "cost_per_m", "material",
                           "manning_n", "outer_mm", "wall_mm", "modulus_gpa")}
    seen = {}
    body = [(i + 2, r) for i, r in enumerate(rows[1:]) if any(x.strip() for x in r)]
    if not body:
        raise DataFileError(f"pipe catalog {path}: no pipes after the header; add one row per pipe")
    for line, r in body:
        def cell(c):
            i = col.get(c)
            return r[i].strip() if i is not None and i < len(r) else ""

        def number(c, *, required, positive=True):
            s = cell(c)
            if s == "":
                if required:
                    raise DataFileError(f"pipe catalog {path}, line {line}, column '{c}': empty; give a number")
                return np.nan
            try:
                x = float(s)
            except ValueError:
                raise DataFileError(f"pipe catalog {path}, line {line}, column '{c}': '{s}' is not a number; give a number") from None
            if not np.isfinite(x) or x < 0 or (positive and x == 0):
                raise DataFileError(
                    f"pipe catalog {path}, line {line}, column '{c}': {s} must be {'> 0' if positive else '>= 0'}; fix the value"
                )
            return x

        name = cell("name")
        if not name:
            raise DataFileError(f"pipe catalog {path}, line {line}, column 'name': empty; give each pipe a name")
        if name in seen:
            raise DataFileError(f"pipe catalog {path}, line {line}, column 'name': '{name}' already on line {seen[name]}; use unique names")
        seen[name] = line
        nominal = number("nominal_mm", required=True)
        min_wall = number("min_wall_mm", required=False)
        wall = number("wall_mm", required=False)
        inner = number("inner_mm", required=np.isnan(min_wall))
        if np.isnan(inner):
            if 2 * min_wall >= nominal:
                raise DataFileError(f"pipe catalog {path}, line {line}, column 'min_wall_mm': {min_wall} leaves no bore in "
                                    f"{nominal} mm; check the wall")
            if cell("material").lower().startswith(("pe", "hdpe")):
                inner = float(pe_mean_bore_mm(nominal, min_wall))
                wall = float(pe_mean_wall_mm(min_wall)) if np.isnan(wall) else wall
            else:
                inner = nominal - 2.0 * min_wall
                wall = min_wall if np.isnan(wall) else wall
        if inner > nominal * 1.5:
            raise DataFileError(
                f"pipe catalog {path}, line {line}, column 'inner_mm': {inner} is far above nominal {nominal}; check the units (mm)"
            )
        rough = number("roughness_mm", required=False, positive=False)
        c = number("hw_c", required=False)
        n = number("manning_n", required=False)
        if np.isnan(rough) and np.isnan(c) and np.isnan(n):
            raise DataFileError(f"pipe catalog {path}, line {line}, column 'roughness_mm': no friction value; give roughness_mm, hw_c or manning_n")
        if "pn_bar" in col:
            pn = number("pn_bar", required=False)
            rating = pn * 1e5 / (_RHO_RATING * G)
        else:
            rating = number("rating_m", required=False)
        material = cell("material")
        if not material:
            raise DataFileError(f"pipe catalog {path}, line {line}, column 'material': empty; name the material")
        for k, v in (("name", name), ("nominal_mm", nominal), ("inner_mm", inner), ("roughness_mm", rough), ("hw_c", c),
                     ("rating_m", rating), ("cost_per_m", number("cost_per_m", required=True, positive=False)),
                     ("material", material), ("manning_n", n),
                     ("outer_mm", _outer(number("outer_mm", required=False), inner, path, line)), ("wall_mm", wall),
                     ("modulus_gpa", number("modulus_gpa", required=False))):
            out[k].append(v)
    return PipeCatalog(
        name=np.array(out["name"], dtype=object),
        material=np.array(out["material"], dtype=object),
        **{k: np.array(v, dtype=np.float64) for k, v in out.items() if k not in ("name", "material")},
    )


def _outer(outer, inner, path, line):
    """An optional outer_mm cell must not be below the bore (grav12)."""
    if not np.isnan(outer) and outer < inner:
        raise DataFileError(f"pipe catalog {path}, line {line}, column 'outer_mm': {outer:g} is below inner_mm {inner:g}; "
                            "give the outside diameter in mm")
    return outer


def pipe_wall_mm(cat: PipeCatalog) -> np.ndarray:
    """Wall thickness per pipe: ``wall_mm`` where given, else (nominal − inner) / 2."""
    return np.where(np.isfinite(cat.wall_mm), cat.wall_mm, (cat.nominal_mm - cat.inner_mm) / 2.0)
