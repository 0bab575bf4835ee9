"""Long sections, plan map and the HTML review report (with a headless-browser check)."""

import hashlib
import os
import subprocess
from html.parser import HTMLParser

import numpy as np
import pyproj
import pytest

try:
    from tests.conftest_layouts import make_layout
except ImportError:
    from conftest_layouts import make_layout

from mainspan.errors import InputError, OverwriteError  # noqa: E402
from mainspan.pipeline.layout import Layout  # noqa: E402
from mainspan.report import plots  # noqa: E402
from mainspan.report.html import CAUTIONS, report_html, write_report  # noqa: E402

CHROMIUM = "/usr/bin/chromium"


def _random_tree(n, seed):
    rng = np.random.default_rng(seed)
    parent = np.r_[-1, [rng.integers(0, i) for i in range(1, n)]]
    ends = np.column_stack([parent[1:], np.arange(1, n)]).astype(np.int64)
    length = rng.uniform(1, 100, n - 1)
    ids = np.array([f"n{i}" for i in range(n)], dtype=object)
    lay = Layout(crs=pyproj.CRS.from_epsg(32633), nodes={"node_id": ids},
                 node_xy=rng.uniform(0, 1000, (n, 2)), links={"length_m": length},
                 link_ends=ends)
    return lay, parent, length


def test_distance_and_longest_path_match_networkx():
    nx = pytest.importorskip("networkx")
    lay, parent, length = _random_tree(3000, seed=7)
    g = nx.Graph()
    g.add_weighted_edges_from((int(a), int(b), w) for (a, b), w in zip(lay.link_ends, length))
    ref = nx.single_source_dijkstra_path_length(g, 0)          # networkx Dijkstra
    ref = np.array([ref[i] for i in range(lay.n_nodes)])
    np.testing.assert_allclose(plots.distance_to_root(lay), ref, rtol=1e-12)
    paths = plots.longest_paths(lay, k=3)
    far = int(np.argmax(ref))
    assert list(paths[0]) == nx.shortest_path(g, 0, far)
    # each branch hangs off what is already covered and is the longest such branch
    covered = set(paths[0].tolist())
    for p in paths[1:]:
        assert p[0] in covered and not covered.intersection(p[1:].tolist())
        gain = ref[p[-1]] - ref[p[0]]
        for leaf in range(lay.n_nodes):
            if leaf in covered:
                continue
            up = nx.shortest_path(g, 0, leaf)
            attach = [v for v in up if v in covered][-1]
            assert ref[leaf] - ref[attach] <= gain + 1e-9
        covered.update(p.tolist())


def test_hillshade_matches_matplotlib_lightsource():
    from matplotlib.colors import LightSource

    y, x = np.mgrid[0:60, 0:80]
    z = 20 * np.sin(x / 9.0) + 15 * np.cos(y / 7.0) + 0.3 * x
    ours = plots.hillshade(z, 10.0, 10.0, azimuth_deg=315, altitude_deg=45)
    # matplotlib's LightSource is an independent hillshade (same illumination model);
    # it stretches its result to the full 0..1 range, so compare after the same stretch
    ref = LightSource(azdeg=315, altdeg=45).hillshade(z, dx=10.0, dy=10.0)
    stretched = (ours - ours.min()) / (ours.max() - ours.min())
    np.testing.assert_allclose(stretched, ref, atol=1e-9)


@pytest.mark.parametrize("system", ["pressure", "gravity", None])
def test_long_section_content(system):
    lay = make_layout(system)
    fig = plots.long_section(lay)
    ax = fig.axes[0]
    ground = [ln for ln in ax.get_lines() if ln.get_label() == "ground"][0]
    path = plots.longest_paths(lay, k=1)[0]
    assert [str(lay.nodes["node_id"][i]) for i in path] == ["S", "A", "D", "F"]
    gx, gz = ground.get_data()
    # the ground line is the stored profile, link by link, chained along the path
    parent_link = {int(b): k for k, (a, b) in enumerate(lay.link_ends)}
    want = np.concatenate([lay.profiles.of(parent_link[int(j)])[1] for j in path[1:]])
    np.testing.assert_allclose(gz, want)
    assert gx[-1] == pytest.approx(lay.total("length_m") - lay.links["length_m"][[1, 2, 4]].sum())
    # the stated vertical exaggeration is the true ratio of display scales
    v = fig.mainspan_vertical_exaggeration
    t = ax.transData
    (x0, y0), (x1, y1) = t.transform([(0, 0), (1, 1)])
    assert (y1 - y0) / (x1 - x0) == pytest.approx(v, rel=1e-6)
    assert f"vertical exaggeration ×{v:g}" in ax.get_title()
    labels = {ln.get_label() for ln in ax.get_lines()}
    if system == "gravity":
        assert {"invert", "crown"} <= labels
    if system == "pressure":
        assert "hydraulic grade line" in labels
    with pytest.raises(InputError, match="not a child"):
        plots.long_section(lay, path=[0, 3])


def test_save_long_section_formats_reproducible(tmp_path):
    lay = make_layout("gravity")
    for ext, magic in (("png", b"\x89PNG"), ("svg", b"<?xml"), ("pdf", b"%PDF")):
        a = plots.save_long_section(lay, tmp_path / f"a.{ext}", to_node="C")
        b = plots.save_long_section(lay, tmp_path / f"b.{ext}", to_node="C")
        da, db = open(a, "rb").read(), open(b, "rb").read()
        assert da.startswith(magic) and da == db
    with pytest.raises(OverwriteError):
        plots.save_long_section(lay, tmp_path / "a.png")
    with pytest.raises(InputError, match="extension"):
        plots.save_long_section(lay, tmp_path / "a.jpg")


def test_plan_map_terrain_background(tmp_path):
    rasterio = pytest.importorskip("rasterio")
    from rasterio.transform import from_origin

    lay = make_layout("pressure")
    # a DEM in geographic coordinates, so the map must warp it to the working CRS
    to_ll = pyproj.Transformer.from_crs(32633, 4326, always_xy=True)
    lon0, lat0 = to_ll.transform(499_800, 5_001_000)
    lon1, lat1 = to_ll.transform(501_200, 4_999_500)
    nx_, ny_ = 120, 100
    res_x, res_y = (lon1 - lon0) / nx_, (lat0 - lat1) / ny_
    yy, xx = np.mgrid[0:ny_, 0:nx_]
    dem = (200 + 10 * np.sin(xx / 10) + 0.2 * yy).astype("float32")
    path = tmp_path / "dem.tif"
    with rasterio.open(path, "w", driver="GTiff", width=nx_, height=ny_, count=1, dtype="float32",
                       crs="EPSG:4326", transform=from_origin(lon0, lat0, res_x, res_y)) as dst:
        dst.write(dem, 1)
    lay.run_info["terrain"] = str(path)
    fig = plots.plan_map(lay)
    assert fig.mainspan_background == "terrain"
    imgs = fig.axes[0].get_images()
    assert imgs and np.isfinite(np.asarray(imgs[0].get_array(), float)).mean() > 0.5
    lay.run_info["terrain"] = str(tmp_path / "missing.tif")
    assert plots.plan_map(lay).mainspan_background == "none"


class _Ids(HTMLParser):
    def __init__(self):
        super().__init__()
        self.ids, self.tags, self.external = {}, [], []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append(tag)
        if "id" in a:
            self.ids[a["id"]] = tag
        for k in ("src", "href"):
            if k in a and not str(a[k]).startswith(("data:", "#")):
                self.external.append(a[k])


@pytest.mark.parametrize("system", ["pressure", "gravity", None])
def test_report_structure(tmp_path, system):
    lay = make_layout(system)
    lay.run_info["note"] = "<script>alert(1)</script>"
    extra = [("Scenarios <A & B>", "<table id='cmp'><tr><td>1</td></tr></table>")]
    p = write_report(lay, tmp_path / "r.html", extra_sections=extra, title="Demo <field>")
    text = open(p, encoding="utf-8").read()
    parser = _Ids()
    parser.feed(text)
    for i in ("cautions", "plan-map", "summary", "quantities", "checks", "long-section-1",
              "run-info", "extra-1", "cmp"):
        assert i in parser.ids, i
    assert parser.ids["plan-map"] == "img" and parser.ids["long-section-1"] == "img"
    assert "long-section-3" in parser.ids                      # longest path + 2 branches
    assert not parser.external and "script" not in parser.tags  # self-contained, no JS
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in text
    assert "Demo &lt;field&gt;" in text and "Scenarios &lt;A &amp; B&gt;" in text
    for c in CAUTIONS:
        assert c in text
    assert "@media print" in text
    if system is not None:
        assert "low_pressure" in text or "too_deep" in text
        assert parser.ids["quantities"] == "table"
    # deterministic bytes
    assert report_html(lay, extra_sections=extra, title="Demo <field>") == text
    with pytest.raises(OverwriteError):
        write_report(lay, p)


def test_quantities_with_own_total_row():
    lay = make_layout("pressure")
    q = lay.tables["quantities"]
    body_total = float(q["total_cost"].sum())
    for k, v in list(q.items()):
        extra = "TOTAL" if v.dtype == object else v.sum()
        q[k] = np.append(v.astype(object) if v.dtype == object else v, extra)
    text = report_html(lay)
    # the summary does not count the table's own total row twice
    assert f"{body_total:,.2f}" in text and f"{2 * body_total:,.2f}" not in text
    quantities = text[text.index('id="quantities"'):]
    quantities = quantities[:quantities.index("</table>")]
    assert quantities.count('class="total"') == 1 and ">TOTAL<" in quantities


@pytest.mark.browser
def test_report_in_headless_chromium(tmp_path):
    if not os.path.exists(CHROMIUM):
        # in CI the browser is part of the environment: its absence is a failure there
        if os.environ.get("CI", "").lower() in ("1", "true", "yes"):
            pytest.fail(f"{CHROMIUM} not installed in CI (CI={os.environ['CI']}); .ci/run "
                        "installs it with apt-get install chromium")
        pytest.skip(f"{CHROMIUM} not installed (apt-get install chromium) — browser check skipped")
    import matplotlib.image as mpimg

    lay = make_layout("pressure")
    page = write_report(lay, tmp_path / "report.html")
    url = "file://" + os.path.abspath(page)
    base = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
            "--no-first-run", "--disable-background-networking", "--disable-component-update",
            "--disable-sync", "--hide-scrollbars", f"--user-data-dir={tmp_path / 'profile'}"]
    shot = tmp_path / "shot.png"
    r = subprocess.run(base + ["--enable-logging=stderr", "--v=0", f"--screenshot={shot}",
                               "--window-size=1280,2000", url],
                       capture_output=True, text=True, timeout=60)
    assert r.returncode == 0, r.stderr[-2000:]
    console = [ln for ln in r.stderr.splitlines()
               if "CONSOLE" in ln or "Uncaught" in ln or "Failed to load resource" in ln]
    assert not console, console
    img = mpimg.imread(str(shot))
    assert img.shape[0] >= 1000 and img.shape[1] >= 1000
    assert float(np.asarray(img[..., :3]).std()) > 0.05        # not a blank page
    dom = subprocess.run(base + ["--dump-dom", url], capture_output=True, text=True, timeout=60)
    assert dom.returncode == 0
    parser = _Ids()
    parser.feed(dom.stdout)
    for i in ("plan-map", "summary", "quantities", "checks", "long-section-1", "run-info",
              "title-block", "cost", "node-schedule"):
        assert i in parser.ids, i
    # every site id is in the rendered page (the node schedule), as the reviewer needs
    for i in lay.nodes["node_id"]:
        assert f"<td>{i}</td>" in dom.stdout, i
