"""Write the demo rasters of the invented "Kestrel Flats irrigation scheme".

Grid: EPSG:32633 (WGS 84 / UTM 33N), x 512000-515000 m, y 5120000-5122500 m,
5 m cells (600 columns x 500 rows).  Files (float32 unless noted, deflate,
256 x 256 tiles, nodata declared but not used):

``terrain.tif``
    Rolling hills cut by a valley running SW -> NE with a small stream; the
    valley floor falls towards the NE and its lowest point (a shallow basin)
    is near (514800, 5122300), where the drainage demo has its outlet.  The
    pump station of the irrigation demo sits by the stream near
    (512400, 5120600).  Elevations about 180-265 m, rounded to 1 cm.
``landcost.tif``
    Cost per metre of main laid through each cell: cropland about 40, an
    orchard 90, a rock outcrop 180, a wetland 250 and a road corridor 300
    (15 m wide).
``landuse.tif`` (uint8, nodata 0)
    The same land classes as codes, for class-table and expression demos:
    1 cropland, 2 orchard, 3 rock, 4 wetland, 5 road.

Run ``python sample_data/make_rasters.py [OUTDIR]``; the output is the same,
byte for byte, on every run (fixed seed, no timestamps).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

CRS = "EPSG:32633"
X0, Y0, X1, Y1 = 512000.0, 5120000.0, 515000.0, 5122500.0
CELL = 5.0
SEED = 20240611
PUMP_XY = (512400.0, 5120600.0)
LOW_XY = (514800.0, 5122300.0)
CLASS_COST = {1: 40.0, 2: 90.0, 3: 180.0, 4: 250.0, 5: 300.0}
CLASS_NAME = {1: "cropland", 2: "orchard", 3: "rock", 4: "wetland", 5: "road"}


def grid():
    """Cell-centre coordinates (X, Y), shape (rows, cols), north row first."""
    xs = X0 + CELL * (np.arange(int((X1 - X0) / CELL)) + 0.5)
    ys = Y1 - CELL * (np.arange(int((Y1 - Y0) / CELL)) + 0.5)
    return np.meshgrid(xs, ys)


def _valley_frame(X, Y):
    """Along-valley distance s from the SW end and signed distance d across it."""
    ax, ay = 512000.0, 5120317.0            # the valley axis enters at the west edge
    ux, uy = LOW_XY[0] - ax, LOW_XY[1] - ay
    n = np.hypot(ux, uy)
    ux, uy = ux / n, uy / n
    s = (X - ax) * ux + (Y - ay) * uy
    d = -(X - ax) * uy + (Y - ay) * ux
    # a gentle meander (three half-waves) that passes the pump site and the low point
    s_pump = (PUMP_XY[0] - ax) * ux + (PUMP_XY[1] - ay) * uy
    d = d - 30.0 * np.sin(3.0 * np.pi * (s - s_pump) / (n - s_pump))
    return s, d, n


def terrain(X, Y, rng):
    s, d, s_low = _valley_frame(X, Y)
    # valley floor: falls 0.9 % towards the low point, rises gently beyond it
    floor = 216.0 - 0.009 * np.minimum(s, s_low) + 0.012 * np.maximum(s - s_low, 0.0)
    sides = 38.0 * (1.0 - np.exp(-(d / 420.0) ** 2))
    hills = np.zeros_like(X)
    for _ in range(28):
        cx = rng.uniform(X0 - 300, X1 + 300)
        cy = rng.uniform(Y0 - 300, Y1 + 300)
        r = rng.uniform(180.0, 520.0)
        h = rng.uniform(-6.0, 14.0)
        hills += h * np.exp(-(((X - cx) ** 2 + (Y - cy) ** 2) / (2 * r * r)))
    hills += 3.0 * np.sin((X - X0) / 310.0) * np.cos((Y - Y0) / 270.0)
    hills *= 1.0 - np.exp(-(d / 260.0) ** 2)      # keep the valley floor clean
    stream = -1.6 * np.exp(-(d / 9.0) ** 2)
    basin = -4.0 * np.exp(-(((X - LOW_XY[0]) ** 2 + (Y - LOW_XY[1]) ** 2) / (2 * 140.0 ** 2)))
    z = floor + sides + hills + stream + basin
    return np.round(z, 2).astype(np.float32)


def landuse(X, Y):
    s, d, _ = _valley_frame(X, Y)
    cls = np.ones(X.shape, np.uint8)
    # orchard: a block on the south-east slope
    cls[(X > 513900) & (X < 514500) & (Y > 5120150) & (Y < 5120650)] = 2
    # rock outcrop: an ellipse on the northern hills
    cls[((X - 512900) / 160.0) ** 2 + ((Y - 5122050) / 110.0) ** 2 < 1.0] = 3
    # wetland: beside the stream half way down the valley
    cls[((s - 1750.0) / 230.0) ** 2 + ((d - 40.0) / 90.0) ** 2 < 1.0] = 4
    # road: a straight corridor 15 m wide crossing the scheme from NW to SE
    rx0, ry0, rx1, ry1 = 512000.0, 5121900.0, 515000.0, 5120900.0
    n = np.hypot(rx1 - rx0, ry1 - ry0)
    dist = np.abs((X - rx0) * (ry1 - ry0) - (Y - ry0) * (rx1 - rx0)) / n
    cls[dist <= 7.5] = 5
    return cls


def landcost(cls, rng):
    cost = np.zeros(cls.shape, np.float32)
    for code, c in CLASS_COST.items():
        cost[cls == code] = c
    # cropland varies a little with soil (smooth, whole units)
    ny, nx = cls.shape
    yy, xx = np.mgrid[0:ny, 0:nx]
    soil = 4.0 * np.sin(xx / 57.0 + rng.uniform(0, 6.28)) * np.cos(yy / 43.0 + rng.uniform(0, 6.28))
    crop = cls == 1
    cost[crop] = np.round(cost[crop] + soil[crop])
    return cost


def _write(path, data, nodata, predictor):
    import rasterio
    from rasterio.transform import from_origin

    profile = dict(driver="GTiff", width=data.shape[1], height=data.shape[0], count=1,
                   dtype=data.dtype.name, crs=CRS, transform=from_origin(X0, Y1, CELL, CELL),
                   nodata=nodata, tiled=True, blockxsize=256, blockysize=256,
                   compress="deflate", zlevel=9, predictor=predictor, interleave="band")
    # no TIFFTAG_DATETIME is written unless asked for, so the bytes are reproducible
    with rasterio.Env(GTIFF_WRITE_TOWGS84="NO"):
        with rasterio.open(path, "w", **profile) as dst:
            dst.write(data, 1)
            dst.update_tags(AREA_OR_POINT="Area")


def main(outdir=None):
    out = Path(outdir) if outdir else Path(__file__).resolve().parent
    out.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(SEED)
    X, Y = grid()
    z = terrain(X, Y, rng)
    cls = landuse(X, Y)
    cost = landcost(cls, rng)
    _write(out / "terrain.tif", z, -9999.0, 3)
    _write(out / "landcost.tif", cost, -9999.0, 3)
    _write(out / "landuse.tif", cls, 0, 2)
    return out


if __name__ == "__main__":
    d = main(sys.argv[1] if len(sys.argv) > 1 else None)
    for name in ("terrain.tif", "landcost.tif", "landuse.tif"):
        p = d / name
        print(f"{p}  {p.stat().st_size / 1024:.0f} KiB")
