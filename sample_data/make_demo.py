"""Generate the demo sites (invented scenarios, fixed seed, identical output each run).

* Kestrel Flats irrigation scheme — one pump station (``PS-1``) by the stream
  and about 150 field outlets (hydrants) on the fields, demand in L/s.
* Harrow Brook storm drainage catchment — 60 inlets on the lower valley
  sides draining to one outlet near the valley's low end; each inlet drains
  an invented catchment (``area_ha``, hectares) with an invented runoff
  coefficient (``runoff_c``) for the Rational method.

Both are in EPSG:32633 (WGS 84 / UTM 33N) inside the demo terrain's extent
(x 512 000–515 000 m, y 5 120 000–5 122 500 m).  Run from the repository
root::

    python sample_data/make_demo.py

The rasters come from ``sample_data/make_rasters.py``.
"""

from __future__ import annotations

import os

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
CRS = "EPSG:32633"
X0, X1, Y0, Y1 = 512000.0, 515000.0, 5120000.0, 5122500.0


def kestrel_outlets(seed=20261201):
    rng = np.random.default_rng(seed)
    # fields on a 11 x 14 grid of ~210 m x 180 m blocks, one hydrant per field,
    # jittered inside the field; a few fields left out (farmyard, copse).
    xs = np.linspace(X0 + 180, X1 - 180, 14)
    ys = np.linspace(Y0 + 160, Y1 - 160, 11)
    gx, gy = np.meshgrid(xs, ys)
    pts = np.column_stack([gx.ravel(), gy.ravel()])
    pts += rng.uniform(-55, 55, pts.shape)
    keep = rng.random(len(pts)) > 0.03
    pts = pts[keep][:150]
    q = np.round(rng.uniform(0.2, 1.0, len(pts)), 2)          # L/s per hydrant
    ids = [f"H{i + 1:03d}" for i in range(len(pts))]
    roles = ["demand"] * len(pts)
    pts = np.vstack([[[512400.0, 5120600.0]], pts])
    return ["PS-1"] + ids, ["source"] + roles, np.concatenate([[0.0], q]), pts


def harrow_inlets(seed=7031):
    """Inlets on the lower valley sides, within 330 m of the valley axis.

    Each inlet drains an invented catchment of 0.05–0.25 ha with a runoff
    coefficient of 0.30–0.75 (a mix of roofs, roads and gardens), drawn
    from its own seeded stream so the inlet positions stay those of earlier
    versions.
    """
    rng = np.random.default_rng(seed)
    n = 60
    ax, ay = 512000.0, 5120317.0            # valley axis of make_rasters.py, SW end
    bx, by = 514797.5, 5122297.5            # its low point near the NE corner
    ux, uy = bx - ax, by - ay
    length = np.hypot(ux, uy)
    ux, uy = ux / length, uy / length
    pts = []
    while len(pts) < n:
        x, y = rng.uniform(512900, 514850), rng.uniform(5120700, 5122450)
        s = (x - ax) * ux + (y - ay) * uy
        d = -(x - ax) * uy + (y - ay) * ux
        if 0.35 * length < s < length - 60 and 40 < abs(d) < 330:
            pts.append((x, y))
    pts = np.asarray(pts)
    catch = np.random.default_rng(seed + 1)
    area = np.round(catch.uniform(0.05, 0.25, n), 3)
    runoff = np.round(catch.uniform(0.30, 0.75, n), 2)
    ids = [f"IN{i + 1:02d}" for i in range(n)]
    pts = np.vstack([[[514800.0, 5122300.0]], pts])
    fields = {"area_ha": np.concatenate([[0.0], area]), "runoff_c": np.concatenate([[0.0], runoff])}
    return ["OUT-1"] + ids, ["outlet"] + ["demand"] * n, fields, pts


def _write(path, layer, ids, roles, q, pts):
    """Write one point layer; *q* is the demand column (L/s) or a dict of further columns."""
    import geopandas as gpd
    import pyogrio
    import shapely

    pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": "2000-01-01T00:00:00.000Z"})
    cols = dict(q) if isinstance(q, dict) else {"q_lps": q}
    gdf = gpd.GeoDataFrame({"id": ids, "role": roles, **cols},
                           geometry=shapely.points(pts), crs=CRS)
    if os.path.exists(path):
        os.remove(path)
    pyogrio.write_dataframe(gdf, path, layer=layer, driver="GPKG")


def main():
    _write(os.path.join(HERE, "kestrel_outlets.gpkg"), "outlets", *kestrel_outlets())
    _write(os.path.join(HERE, "harrow_inlets.gpkg"), "inlets", *harrow_inlets())


if __name__ == "__main__":
    main()
