"""Raster surfaces: grid traversal, line integrals, bilinear sampling, CRS handling, windows."""

from __future__ import annotations

import math

import numpy as np
import pyproj
import pytest
import rasterio
import shapely
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st
from rasterio.transform import from_origin

from mainspan.errors import DataFileError, InputError
from mainspan.ground.surfaces import Surface, open_surface, traverse_grid

UTM33 = "EPSG:32633"


def write_raster(path, data, *, transform, crs=UTM33, nodata=None, blocksize=None, tags=None):
    data = np.asarray(data)
    prof = dict(driver="GTiff", width=data.shape[1], height=data.shape[0], count=1,
                dtype=data.dtype.name, transform=transform, nodata=nodata)
    if crs is not None:
        prof["crs"] = crs
    if blocksize:
        prof.update(tiled=True, blockxsize=blocksize, blockysize=blocksize, compress="deflate")
    with rasterio.open(path, "w", **prof) as dst:
        dst.write(data, 1)
        if tags:
            dst.update_tags(**tags)
    return str(path)


# --------------------------------------------------------------------------- traversal

def test_traversal_hand_case():
    # Amanatides & Woo 1987 traversal; the visiting order (0,0),(1,0),(1,1),(2,1) in (x, y)
    # is worked by hand from the algorithm in the paper.  Here cells are (row=y, col=x).
    off, r, c, L, out = traverse_grid([0.5], [0.5], [2.5], [1.5], 3, 2)
    assert list(zip(c.tolist(), r.tolist())) == [(0, 0), (1, 0), (1, 1), (2, 1)]
    # boundaries at t = 1/4, 1/2, 3/4 of sqrt(5): four equal pieces (calc)
    np.testing.assert_allclose(L, [math.sqrt(5) / 4] * 4, rtol=1e-12)
    assert out[0] == 0 and off.tolist() == [0, 4]


def test_traversal_hand_case_through_a_surface(tmp_path):
    # the same case through a Surface whose geotransform is the identity (row = y)
    p = write_raster(tmp_path / "u.tif", np.arange(6, dtype="float64").reshape(2, 3),
                     transform=Affine(1, 0, 0, 0, 1, 0))
    with open_surface(p, working_crs=UTM33) as s:
        off, r, c, L, out = s.traverse([[0.5, 0.5]], [[2.5, 1.5]])
        assert list(zip(c.tolist(), r.tolist())) == [(0, 0), (1, 0), (1, 1), (2, 1)]
        integral, nod, outside = s.line_integral([[0.5, 0.5]], [[2.5, 1.5]])
        # values 0,1,4,5 each over sqrt(5)/4 (calc)
        assert integral[0] == pytest.approx((0 + 1 + 4 + 5) * math.sqrt(5) / 4, rel=1e-12)


def test_traversal_along_edges_and_through_corners():
    # along the boundary y = 1: counted in row 1 (floor convention, documented)
    off, r, c, L, _ = traverse_grid([0.0], [1.0], [3.0], [1.0], 3, 3)
    assert r.tolist() == [1, 1, 1] and c.tolist() == [0, 1, 2]
    np.testing.assert_allclose(L, 1.0)
    # the same edge walked backwards visits the same row in reverse
    off, r, c, L, _ = traverse_grid([3.0], [1.0], [0.0], [1.0], 3, 3)
    assert r.tolist() == [1, 1, 1] and c.tolist() == [2, 1, 0]
    # the last edge of the grid (y = 3) stays inside the last row
    off, r, c, L, out = traverse_grid([0.0], [3.0], [3.0], [3.0], 3, 3)
    assert r.tolist() == [2, 2, 2] and out[0] == 0
    # exactly through cell corners: diagonal steps, no zero-length cells, sqrt(2) each (calc)
    off, r, c, L, _ = traverse_grid([0.0], [0.0], [3.0], [3.0], 3, 3)
    assert list(zip(r.tolist(), c.tolist())) == [(0, 0), (1, 1), (2, 2)]
    np.testing.assert_allclose(L, math.sqrt(2), rtol=1e-12)
    off, r, c, L, _ = traverse_grid([3.0], [0.0], [0.0], [3.0], 3, 3)
    assert list(zip(r.tolist(), c.tolist())) == [(0, 2), (1, 1), (2, 0)]
    # a segment starting exactly on a boundary and moving to lower indices
    off, r, c, L, _ = traverse_grid([2.0], [0.5], [0.5], [0.5], 3, 1)
    assert c.tolist() == [1, 0]
    np.testing.assert_allclose(L, [1.0, 0.5])


def test_traversal_outside_parts_against_shapely():
    # length inside the grid = length of the intersection with the box (shapely, independent)
    rng = np.random.default_rng(5)
    a = rng.uniform(-4, 14, (300, 2))
    b = rng.uniform(-4, 14, (300, 2))
    off, r, c, L, out = traverse_grid(a[:, 0], a[:, 1], b[:, 0], b[:, 1], 10, 7)
    box = shapely.box(0, 0, 10, 7)
    inside = shapely.length(shapely.intersection(shapely.linestrings(
        np.stack([a, b], axis=1)), box))
    sums = np.add.reduceat(np.append(L, 0.0), off[:-1]) * (np.diff(off) > 0)
    np.testing.assert_allclose(sums, inside, atol=1e-9)
    np.testing.assert_allclose(sums + out, np.hypot(*(b - a).T), atol=1e-9)
    assert (r >= 0).all() and (r < 7).all() and (c >= 0).all() and (c < 10).all()


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(0, 20, allow_nan=False), min_size=4, max_size=4))
def test_traversal_lengths_sum_to_segment(coords):
    x0, y0, x1, y1 = coords
    off, r, c, L, out = traverse_grid([x0], [y0], [x1], [y1], 20, 20)
    assert L.sum() + out[0] == pytest.approx(math.hypot(x1 - x0, y1 - y0), abs=1e-9)
    # consecutive cells are 4- or 8-neighbours (a connected walk)
    if len(r) > 1:
        assert (np.abs(np.diff(r)) <= 1).all() and (np.abs(np.diff(c)) <= 1).all()
    assert (L > 0).all()


def test_line_integral_matches_fine_quadrature(tmp_path):
    # independent check: midpoint quadrature with 20 000 points per segment, each point looked
    # up by floor() of its index coordinates (no traversal involved)
    rng = np.random.default_rng(11)
    vals = rng.uniform(1, 100, (40, 50))
    t = from_origin(1000.0, 2000.0, 5.0, 5.0)
    p = write_raster(tmp_path / "v.tif", vals, transform=t)
    a = np.column_stack([rng.uniform(1000, 1250, 40), rng.uniform(1800, 2000, 40)])
    b = np.column_stack([rng.uniform(1000, 1250, 40), rng.uniform(1800, 2000, 40)])
    with open_surface(p, working_crs=UTM33) as s:
        integral, nod, out = s.line_integral(a, b)
    n = 20000
    f = (np.arange(n) + 0.5) / n
    for i in range(len(a)):
        pts = a[i] + f[:, None] * (b[i] - a[i])
        col = np.floor((pts[:, 0] - 1000.0) / 5.0).astype(int)
        row = np.floor((2000.0 - pts[:, 1]) / 5.0).astype(int)
        q = vals[row, col].sum() * np.hypot(*(b[i] - a[i])) / n
        # midpoint error of a step function: at most (crossings) x (step L/n) x max value
        assert integral[i] == pytest.approx(q, rel=2e-3)
    assert (nod == 0).all() and (out == 0).all()


def test_uniform_raster_gives_rate_times_length(tmp_path):
    t = from_origin(500000.0, 5001000.0, 10.0, 10.0)
    p = write_raster(tmp_path / "c.tif", np.full((100, 100), 42.0), transform=t)
    rng = np.random.default_rng(2)
    a = rng.uniform([500000, 5000000], [501000, 5001000], (200, 2))
    b = rng.uniform([500000, 5000000], [501000, 5001000], (200, 2))
    with open_surface(p, working_crs=UTM33) as s:
        integral, nod, out = s.line_integral(a, b)
    np.testing.assert_allclose(integral, 42.0 * np.hypot(*(b - a).T), rtol=1e-12)


# --------------------------------------------------------------------------- sampling

def test_sample_bilinear_against_scipy(tmp_path):
    from scipy.ndimage import map_coordinates

    rng = np.random.default_rng(4)
    vals = rng.normal(200, 20, (30, 40))
    t = from_origin(600000.0, 4000300.0, 10.0, 10.0)
    p = write_raster(tmp_path / "z.tif", vals, transform=t)
    xy = rng.uniform([600005, 4000005], [600395, 4000295], (500, 2))
    with open_surface(p, working_crs=UTM33) as s:
        z = s.sample(xy)
    # scipy's order-1 spline is bilinear interpolation between cell centres (independent)
    rows = (4000300.0 - xy[:, 1]) / 10.0 - 0.5
    cols = (xy[:, 0] - 600000.0) / 10.0 - 0.5
    ref = map_coordinates(vals, [rows, cols], order=1)
    np.testing.assert_allclose(z, ref, rtol=1e-9)  # index round-off at 6e5 m coordinates


def test_sample_nodata_and_outside(tmp_path):
    vals = np.arange(25, dtype="float32").reshape(5, 5)
    vals[2, 2] = -9999
    vals[0, 4] = np.nan
    t = from_origin(0.0, 50.0, 10.0, 10.0)
    p = write_raster(tmp_path / "n.tif", vals, transform=t, nodata=-9999)
    with open_surface(p, working_crs=UTM33) as s:
        z = s.sample([[25.0, 25.0],    # centre of the nodata cell
                      [20.0, 28.0],    # bilinear with the nodata cell as a weighted neighbour
                      [15.0, 45.0],    # centre of cell (0, 1): only that cell weighs
                      [45.0, 45.0],    # NaN cell
                      [-1.0, 25.0],    # outside
                      [2.0, 48.0]])    # outer half cell: clamped to cell (0, 0)
        inside = s.contains([[-1.0, 25.0], [0.0, 0.0], [50.0, 50.0], [50.1, 10.0]])
    assert np.isnan(z[0]) and np.isnan(z[1]) and np.isnan(z[3]) and np.isnan(z[4])
    assert z[2] == 1.0 and z[5] == 0.0
    assert inside.tolist() == [False, True, True, False]


def test_dataset_mask_is_nodata(tmp_path):
    vals = np.full((10, 10), 5.0, dtype="float32")
    p = tmp_path / "m.tif"
    with rasterio.open(p, "w", driver="GTiff", width=10, height=10, count=1, dtype="float32",
                       crs=UTM33, transform=from_origin(0, 100, 10, 10)) as dst:
        dst.write(vals, 1)
        mask = np.full((10, 10), 255, np.uint8)
        mask[:, 5:] = 0
        dst.write_mask(mask)
    with open_surface(p, working_crs=UTM33) as s:
        integral, nod, out = s.line_integral([[5.0, 55.0]], [[95.0, 55.0]])
    assert integral[0] == pytest.approx(5.0 * 45.0) and nod[0] == pytest.approx(45.0)


def test_pixel_is_point_raster_samples_at_centres(tmp_path):
    # GDAL turns a PixelIsPoint GeoTIFF into an area geotransform; the value of a cell must be
    # found at the position GDAL reports for that cell's centre (rasterio's xy(), independent)
    vals = np.arange(12, dtype="float64").reshape(3, 4)
    p = write_raster(tmp_path / "pt.tif", vals, transform=from_origin(100, 200, 10, 10),
                     tags={"AREA_OR_POINT": "Point"})
    with rasterio.open(p) as ds:
        centre = ds.xy(1, 2)
    with open_surface(p, working_crs=UTM33) as s:
        assert s.area_or_point == "Point"
        assert s.sample([centre])[0] == pytest.approx(vals[1, 2])


# --------------------------------------------------------------------------- CRS

def _topobathy():
    from matplotlib.cbook import get_sample_data

    d = get_sample_data("topobathy.npz")
    d = d if hasattr(d, "files") else np.load(d)
    return np.asarray(d["topo"], "float64"), np.asarray(d["longitude"], "float64") - 360.0, \
        np.asarray(d["latitude"], "float64")


def write_topobathy(path):
    """matplotlib's real topo/bathymetry grid (lat ascending) as a north-up EPSG:4326 GeoTIFF."""
    topo, lon, lat = _topobathy()
    dlon = (lon[-1] - lon[0]) / (len(lon) - 1)
    dlat = (lat[-1] - lat[0]) / (len(lat) - 1)
    t = from_origin(lon[0] - dlon / 2, lat[-1] + dlat / 2, dlon, dlat)
    write_raster(path, topo[::-1], transform=t, crs="EPSG:4326")
    return topo, lon, lat, dlon, dlat


def test_geographic_raster_sampled_from_utm_against_scipy(tmp_path):
    from scipy.ndimage import map_coordinates

    p = tmp_path / "topo.tif"
    topo, lon, lat, dlon, dlat = write_topobathy(p)
    to_utm = pyproj.Transformer.from_crs("EPSG:4326", "EPSG:32610", always_xy=True)
    a = np.array(to_utm.transform(-125.5, 48.4))
    b = np.array(to_utm.transform(-122.6, 49.7))
    f = np.linspace(0, 1, 400)[:, None]
    xy = a + f * (b - a)
    with open_surface(p, working_crs="EPSG:32610") as s:
        z = s.sample(xy)
        off, station, zp = s.profiles(a[None], b[None])
    lo, la = pyproj.Transformer.from_crs("EPSG:32610", "EPSG:4326", always_xy=True).transform(
        xy[:, 0], xy[:, 1])
    ref = map_coordinates(topo, [(la - lat[0]) / dlat, (lo - lon[0]) / dlon], order=1)
    # both read the grid with the same regular (mean) spacing, so they agree to round-off
    # of the coordinate transforms (elevations are metres, hundreds to thousands)
    np.testing.assert_allclose(z, ref, rtol=1e-9, atol=1e-6)
    # profile stations span the working-CRS length, spacing <= half a cell
    L = float(np.hypot(*(b - a)))
    assert station[0] == 0 and station[-1] == pytest.approx(L)
    assert np.diff(station).max() <= 0.5 * s.cell_size_m + 1e-9
    assert zp[0] == pytest.approx(z[0]) and zp[-1] == pytest.approx(z[-1])


def test_line_integral_in_other_crs(tmp_path):
    # raster in EPSG:4326, working CRS UTM 33N.  A constant raster gives value x working length
    # exactly; a varying one matches a fine quadrature whose points are transformed by pyproj and
    # looked up by floor() (independent of the densify-and-scale scheme).
    rng = np.random.default_rng(8)
    vals = rng.uniform(10, 50, (40, 60))
    t = from_origin(14.0, 46.4, 0.01, 0.01)
    p = write_raster(tmp_path / "g.tif", vals, transform=t, crs="EPSG:4326")
    pc = write_raster(tmp_path / "gc.tif", np.full((40, 60), 7.0), transform=t, crs="EPSG:4326")
    to_utm = pyproj.Transformer.from_crs("EPSG:4326", UTM33, always_xy=True)
    lo = rng.uniform(14.02, 14.58, (30, 2))
    la = rng.uniform(46.02, 46.38, (30, 2))
    a = np.column_stack(to_utm.transform(lo[:, 0], la[:, 0]))
    b = np.column_stack(to_utm.transform(lo[:, 1], la[:, 1]))
    L = np.hypot(*(b - a).T)
    with open_surface(pc, working_crs=UTM33) as s:
        assert not s.same_crs
        ic, _, _ = s.line_integral(a, b)
    np.testing.assert_allclose(ic, 7.0 * L, rtol=1e-12)
    with open_surface(p, working_crs=UTM33) as s:
        integral, nod, out = s.line_integral(a, b)
    back = pyproj.Transformer.from_crs(UTM33, "EPSG:4326", always_xy=True)
    n = 20000
    f = (np.arange(n) + 0.5) / n
    for i in range(len(a)):
        pts = a[i] + f[:, None] * (b[i] - a[i])
        x, y = back.transform(pts[:, 0], pts[:, 1])
        col = np.floor((np.asarray(x) - 14.0) / 0.01).astype(int)
        row = np.floor((46.4 - np.asarray(y)) / 0.01).astype(int)
        q = vals[row, col].sum() * L[i] / n
        # straight sub-segments in lon/lat of <= half a cell vs the true (slightly curved)
        # image of the UTM line: a tiny bend error on top of the quadrature error
        assert integral[i] == pytest.approx(q, rel=3e-3)


def test_missing_crs_needs_raster_crs(tmp_path):
    p = write_raster(tmp_path / "nocrs.tif", np.ones((4, 4)), transform=from_origin(0, 40, 10, 10),
                     crs=None)
    with pytest.raises(InputError, match=r"nocrs\.tif.*--raster-crs EPSG:xxxx"):
        open_surface(p, working_crs=UTM33)
    with open_surface(p, working_crs=UTM33, raster_crs=UTM33) as s:
        assert s.same_crs and s.sample([[15.0, 15.0]])[0] == 1.0


def test_bad_inputs(tmp_path):
    with pytest.raises(DataFileError, match="nothere.tif"):
        open_surface(tmp_path / "nothere.tif", working_crs=UTM33)
    p = write_raster(tmp_path / "b.tif", np.ones((4, 4)), transform=from_origin(0, 40, 10, 10))
    with pytest.raises(InputError, match="band 2"):
        open_surface(p, working_crs=UTM33, band=2)
    with pytest.raises(InputError, match="max_memory_mb"):
        open_surface(p, working_crs=UTM33, max_memory_mb=0)
    with pytest.raises(InputError, match="working CRS"):
        open_surface(p, working_crs="EPSG:nonsense")
    # lengths are measured in the working CRS, so it must be metric
    with pytest.raises(InputError, match="not projected in metres"):
        open_surface(p, working_crs="EPSG:4326")
    with pytest.raises(InputError, match="not projected in metres"):
        open_surface(p, working_crs="EPSG:2277")  # Texas Central, US survey feet


# --------------------------------------------------------------------------- windowed reads

def test_windowed_reads_equal_whole_reads(tmp_path, monkeypatch):
    rng = np.random.default_rng(21)
    H, W = 300, 260
    yy, xx = np.mgrid[0:H, 0:W]
    vals = (100 + 20 * np.sin(xx / 17.0) * np.cos(yy / 23.0) + rng.normal(0, 1, (H, W)))
    vals = vals.astype("float32")
    vals[140:150, 100:120] = -9999  # a hole crossing tile borders
    t = from_origin(500000.0, 5003000.0, 10.0, 10.0)
    p = write_raster(tmp_path / "big.tif", vals, transform=t, nodata=-9999, blocksize=64)
    a = rng.uniform([500000, 5000000], [502600, 5003000], (400, 2))
    b = a + rng.normal(0, 300, (400, 2))
    pts = rng.uniform([499900, 4999900], [502700, 5003100], (3000, 2))

    whole = open_surface(p, working_crs=UTM33)
    assert whole.tile_shape == (H, W)
    ref = (whole.line_integral(a, b), whole.sample(pts), whole.profiles(a, b), whole.traverse(a, b))
    assert whole.n_window_reads == 1

    shapes = []
    orig = Surface._read_window

    def spy(self, row0, col0, nrows, ncols, **kw):
        shapes.append((nrows, ncols))
        return orig(self, row0, col0, nrows, ncols, **kw)

    monkeypatch.setattr(Surface, "_read_window", spy)
    small = open_surface(p, working_crs=UTM33, max_memory_mb=0.1)
    got = (small.line_integral(a, b), small.sample(pts), small.profiles(a, b), small.traverse(a, b))
    assert small.tile_shape[0] < H and small.tile_shape[1] < W
    assert shapes and max(r * c for r, c in shapes) < H * W / 4
    assert max(r * c for r, c in shapes) <= (small.tile_shape[0] + 1) * (small.tile_shape[1] + 1)
    for x, y in zip(ref[0], got[0]):
        np.testing.assert_allclose(y, x, rtol=1e-12, atol=1e-9)
    np.testing.assert_array_equal(np.isnan(ref[1]), np.isnan(got[1]))
    np.testing.assert_allclose(got[1], ref[1], rtol=1e-12)
    for x, y in zip(ref[2], got[2]):
        np.testing.assert_allclose(y, x, rtol=1e-12)
    for x, y in zip(ref[3], got[3]):
        np.testing.assert_allclose(y, x, rtol=1e-12)
    assert ref[0][1].sum() > 0  # the hole was crossed
    # each needed tile is read once per grouped query: the sample call read no tile twice
    shapes.clear()
    small._cache.clear()
    small._cache_bytes = 0
    small.n_window_reads = 0
    small.sample(pts)
    ntiles = small._ntr * small._ntc
    assert small.n_window_reads <= ntiles
    whole.close()
    small.close()


# --------------------------------------------------------------------------- job windows

@pytest.mark.parametrize("dtype", ["int16", "float32", "float64"])
def test_focus_reads_only_the_job_window_and_matches_scipy(tmp_path, monkeypatch, dtype):
    """focus() narrows reading to the block-aligned box of the sites plus a margin; cells kept
    as float32 only where that is exact; bilinear values equal scipy's map_coordinates
    (order=1, pixel centres at index + 0.5) on the array rasterio reads, to round-off."""
    from scipy.ndimage import map_coordinates

    rng = np.random.default_rng(5)
    H, W = 1400, 1300
    yy, xx = np.mgrid[0:H, 0:W]
    vals = 300 + 50 * np.sin(xx / 37.0) * np.cos(yy / 53.0) + rng.normal(0, 2, (H, W))
    vals = vals.astype(dtype)
    vals[700:705, 600:640] = -999   # a hole inside the job's box
    t = from_origin(500000.0, 5014000.0, 10.0, 10.0)
    p = write_raster(tmp_path / f"dem_{dtype}.tif", vals, transform=t, nodata=-999, blocksize=128)
    # sites in a 3 km box: rows ~ 500..800, cols ~ 500..800
    xy = rng.uniform([505000, 5006000], [508000, 5009000], (60, 2))
    pts = xy[:-1] + rng.uniform(0, 1, (59, 1)) * (xy[1:] - xy[:-1])

    reads = []
    orig = Surface._read_window

    def spy(self, row0, col0, nrows, ncols, **kw):
        reads.append((row0, col0, nrows, ncols))
        return orig(self, row0, col0, nrows, ncols, **kw)

    monkeypatch.setattr(Surface, "_read_window", spy)
    with open_surface(p, working_crs=UTM33) as s:
        assert s.dtype == (np.float64 if dtype == "float64" else np.float32)
        r0, c0, nr, nc = s.focus(xy)
        assert r0 % 128 == 0 and c0 % 128 == 0 and (r0 + nr) % 128 == 0 and (c0 + nc) % 128 == 0
        assert 512 <= nr < 900 and 512 <= nc < 900 and (r0, c0) != (0, 0)
        z = s.sample(pts)
        integral, nod, out = s.line_integral(xy[:-1], xy[1:])
        assert reads == [(r0, c0, nr, nc)]          # one read: the window, nothing else
        assert s.resident_bytes() == nr * nc * s.dtype.itemsize
        assert nod.sum() > 0                          # the hole was crossed
    with open_surface(p, working_crs=UTM33) as whole:   # no focus: the whole raster
        zw = whole.sample(pts)
        iw = whole.line_integral(xy[:-1], xy[1:])
    assert reads[-1] == (0, 0, H, W)
    np.testing.assert_array_equal(z, zw)              # bit for bit: the window changes nothing
    np.testing.assert_array_equal(integral, iw[0])
    # outside reference: scipy.ndimage.map_coordinates, order=1, on the same cells
    ref_arr = vals.astype("float64")
    ref_arr[ref_arr == -999] = np.nan
    col, row = (pts[:, 0] - 500000.0) / 10.0, (5014000.0 - pts[:, 1]) / 10.0
    ref = map_coordinates(ref_arr, [row - 0.5, col - 0.5], order=1, mode="nearest")
    ok = ~np.isnan(z)
    np.testing.assert_allclose(z[ok], ref[ok], rtol=1e-12)
    assert np.isnan(ref[~ok]).all()
