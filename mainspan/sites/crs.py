"""Choose the working metric CRS and measure its distortion.

Rules (documented choices):

* A projected CRS whose axes are in metres is used as it is.
* A projected CRS in other linear units (feet, US survey feet, …) is used
  with the *same projection* but metre axes, so every coordinate and length
  inside mainspan is in metres; outputs are written in that metre variant.
* A projected CRS whose point scale factor over the sites strays more than
  :data:`MAX_SCALE_ERROR` (1 %) from 1 — Web Mercator away from the equator,
  for example — is not fit for measuring mains; it is replaced like a
  geographic CRS, and the reason says so.
* A geographic CRS is replaced by the UTM zone holding the most sites (WGS 84
  UTM, EPSG 326zz north / 327zz south, the hemisphere of the median latitude;
  ties go to the zone of the median longitude).  The Norway and Svalbard
  zone exceptions are not applied.
* ``crs=`` (``--crs``) overrides all of this; it must be projected.

References
----------
NGA.SIG.0012_2.0.0_UTMUPS, *Universal Grids and Grid Reference Systems*, 2014:
k0 = 0.9996, false easting 500 000 m, central meridian 6·zone − 183°.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyproj

from ..errors import InputError

__all__ = ["WorkingCRS", "choose_working_crs", "to_crs", "parse_crs", "scale_factor_range",
           "utm_epsg", "MAX_SCALE_ERROR"]

#: Largest departure of the grid scale factor from 1 accepted in an input CRS.
MAX_SCALE_ERROR = 0.01


@dataclass(frozen=True)
class WorkingCRS:
    """The metric CRS all computation happens in, and why it was chosen."""

    crs: pyproj.CRS
    reason: str


def parse_crs(value, *, option="--crs"):
    """Convert any user CRS input once, at the boundary."""
    if value is None:
        return None
    if isinstance(value, pyproj.CRS):
        return value
    try:
        return pyproj.CRS.from_user_input(value)
    except pyproj.exceptions.CRSError as exc:
        raise InputError(
            f"option {option}: {value!r} is not a CRS PROJ understands ({exc}); "
            "give an EPSG code such as EPSG:32633, a WKT string or a PROJ string") from None


def utm_epsg(lon, lat) -> int:
    """EPSG code of the WGS 84 UTM zone for a point (NGA.SIG.0012 zone formula)."""
    zone = int(np.clip(np.floor((float(lon) + 180.0) / 6.0) + 1, 1, 60))
    return (32600 if lat >= 0 else 32700) + zone


def _metre_variant(crs: pyproj.CRS) -> pyproj.CRS:
    d = crs.to_json_dict()
    cs = d.get("coordinate_system")
    if cs is None:
        raise InputError(f"CRS {crs.name!r} has no coordinate system description; "
                         "pass --crs with a metric projected CRS")
    for ax in cs["axis"]:
        ax["unit"] = "metre"
    d["name"] = f"{d.get('name', crs.name)} (metre axes)"
    d.pop("id", None)
    return pyproj.CRS.from_json_dict(d)


def _linear_factor(crs: pyproj.CRS) -> float:
    return float(crs.axis_info[0].unit_conversion_factor)


def choose_working_crs(source_crs, xy, *, crs=None) -> WorkingCRS:
    """Pick the working CRS for points *xy* given in *source_crs*.

    Parameters
    ----------
    source_crs : pyproj.CRS
        CRS of the input coordinates.
    xy : ndarray (n, 2)
        Input coordinates (x = easting or longitude).
    crs : CRS-like, optional
        A user override; must be projected.

    Examples
    --------
    >>> import numpy as np, pyproj
    >>> w = choose_working_crs(pyproj.CRS("EPSG:4326"), np.array([[15.1, 46.2], [15.2, 46.3]]))
    >>> w.crs.to_epsg()
    32633
    """
    source_crs = parse_crs(source_crs, option="input CRS")
    if crs is not None:
        user = parse_crs(crs)
        if not user.is_projected:
            raise InputError(f"option --crs: {user.name!r} is not a projected CRS; give a metric "
                             "projected CRS such as a UTM zone (EPSG:326zz)")
        if abs(_linear_factor(user) - 1.0) > 1e-12:
            return WorkingCRS(_metre_variant(user), f"given by --crs, axes converted from "
                              f"{user.axis_info[0].unit_name} to metres")
        return WorkingCRS(user, "given by --crs")
    distorted = ""
    if source_crs.is_projected:
        try:
            kmin, kmax = scale_factor_range(np.asarray(xy, float), source_crs)
        except Exception:  # PROJ cannot give factors: trust the CRS
            kmin = kmax = 1.0
        if np.isfinite(kmin) and max(abs(kmin - 1), abs(kmax - 1)) > MAX_SCALE_ERROR:
            distorted = (f"input CRS {source_crs.name!r} distorts lengths (scale factor "
                         f"{kmin:.3f}–{kmax:.3f}); ")
    if source_crs.is_projected and not distorted:
        f = _linear_factor(source_crs)
        if abs(f - 1.0) > 1e-12:
            return WorkingCRS(_metre_variant(source_crs),
                              f"input CRS with axes converted from "
                              f"{source_crs.axis_info[0].unit_name} to metres")
        return WorkingCRS(source_crs, "input CRS is projected in metres")
    if not source_crs.is_geographic and not distorted:
        raise InputError(f"input CRS {source_crs.name!r} is neither projected nor geographic; "
                         "pass --crs with a metric projected CRS")
    lonlat = to_crs(np.asarray(xy, float), source_crs, pyproj.CRS("EPSG:4326"))
    lon, lat = lonlat[:, 0], lonlat[:, 1]
    zones = np.clip(np.floor((lon + 180.0) / 6.0) + 1, 1, 60).astype(int)
    counts = np.bincount(zones, minlength=61)
    best = np.flatnonzero(counts == counts.max())
    med_zone = int(np.clip(np.floor((np.median(lon) + 180.0) / 6.0) + 1, 1, 60))
    zone = med_zone if med_zone in best else int(best[0])
    epsg = (32600 if np.median(lat) >= 0 else 32700) + zone
    return WorkingCRS(pyproj.CRS.from_epsg(epsg),
                      f"{distorted}{'geographic ' if not distorted else ''}input projected to UTM zone {zone}"
                      f"{'N' if epsg < 32700 else 'S'} (holds {counts[zone]} of {len(lon)} sites)")


def to_crs(xy, src, dst, *, what="sites"):
    """Transform (n, 2) coordinates; refuse transforms that give inf or NaN."""
    xy = np.asarray(xy, dtype=np.float64)
    src = parse_crs(src)
    dst = parse_crs(dst)
    if src == dst:
        return xy.copy()
    t = pyproj.Transformer.from_crs(src, dst, always_xy=True)
    x, y = t.transform(xy[:, 0], xy[:, 1], errcheck=False)
    out = np.column_stack([np.asarray(x, float), np.asarray(y, float)])
    bad = ~np.isfinite(out).all(axis=1)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(
            f"{what}: {int(bad.sum())} point(s) cannot be transformed from {src.name!r} to "
            f"{dst.name!r} (first: row {i}, ({xy[i, 0]:.6g}, {xy[i, 1]:.6g}) gives inf); "
            "check the input CRS or choose another --crs that covers the area")
    return out


def scale_factor_range(xy, crs) -> tuple[float, float]:
    """Minimum and maximum grid (point) scale factor at *xy* in the projected *crs*.

    Uses ``pyproj.Proj.get_factors`` (meridional scale, which equals the
    parallel scale for conformal projections such as UTM).
    """
    crs = parse_crs(crs)
    if not crs.is_projected:
        return (1.0, 1.0)
    xy = np.asarray(xy, float)
    geo = crs.geodetic_crs
    lonlat = to_crs(xy * _linear_factor(crs) / _linear_factor(crs), crs, geo)
    proj = pyproj.Proj(crs)
    f = proj.get_factors(lonlat[:, 0], lonlat[:, 1], errcheck=False)
    k = np.asarray(f.meridional_scale, float)
    k = k[np.isfinite(k)]
    if k.size == 0:
        return (float("nan"), float("nan"))
    return (float(k.min()), float(k.max()))
