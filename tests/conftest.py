"""Shared fixtures: tiny point layers built in tmp_path, and awkward inputs."""

from __future__ import annotations

import os

import numpy as np
import pytest

LIBPYSAL_EXAMPLES = None
try:  # real open point patterns shipped inside the libpysal wheel
    import libpysal.examples as _ex

    LIBPYSAL_EXAMPLES = os.path.dirname(os.path.dirname(_ex.get_path("baltim.shp")))
except Exception:  # pragma: no cover - libpysal is in the test extra
    pass


def write_points(path, xy, *, crs="EPSG:32633", fields=None, layer=None, driver=None, z=None):
    """Write points (and attribute columns) with pyogrio; returns the path."""
    import geopandas as gpd
    import shapely

    xy = np.asarray(xy, float)
    geom = shapely.points(xy) if z is None else shapely.points(xy[:, 0], xy[:, 1], z)
    gdf = gpd.GeoDataFrame(dict(fields or {}), geometry=geom, crs=crs)
    gdf.to_file(path, layer=layer, driver=driver, engine="pyogrio")
    return str(path)


@pytest.fixture
def points_file(tmp_path):
    def make(xy, name="sites.gpkg", **kw):
        return write_points(tmp_path / name, xy, **kw)
    return make


@pytest.fixture
def grid_sites():
    """A 6 x 5 jittered grid in UTM 33N with a source in the corner."""
    rng = np.random.default_rng(3)
    gx, gy = np.meshgrid(np.arange(6) * 50.0, np.arange(5) * 40.0)
    xy = np.column_stack([gx.ravel(), gy.ravel()]) + rng.uniform(-5, 5, (30, 2))
    xy += [512100.0, 5120100.0]
    ids = [f"S{i:02d}" for i in range(30)]
    role = ["source"] + ["demand"] * 29
    q = np.round(rng.uniform(0.2, 1.0, 30), 2)
    q[0] = 0
    return xy, ids, role, q


def run_cli(args, capsys):
    """Run the real entry point; return (exit code, stdout, stderr)."""
    from mainspan.cli import main

    code = main([str(a) for a in args])
    out = capsys.readouterr()
    return code, out.out, out.err
