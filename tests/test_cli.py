"""The real command line: plan, check, errors and exit codes, overwrite safety."""

import os
import subprocess
import sys

import numpy as np
import pytest

from tests.conftest import run_cli, write_points


@pytest.fixture
def sites_gpkg(tmp_path, grid_sites):
    xy, ids, role, q = grid_sites
    return write_points(tmp_path / "sites.gpkg", xy, layer="outlets",
                        fields={"id": ids, "role": role, "q_lps": q})


def test_version_and_module_entry_point():
    out = subprocess.run([sys.executable, "-m", "mainspan", "--version"], capture_output=True,
                         text=True, check=True)
    assert out.stdout.startswith("mainspan ")


def test_show_versions(capsys):
    code, out, _ = run_cli(["--show-versions"], capsys)
    assert code == 0
    for key in ("mainspan", "python", "numpy", "GDAL", "PROJ", "GEOS"):
        assert f"{key}:" in out


def test_plan_writes_layers_and_summary(tmp_path, sites_gpkg, capsys):
    out_gpkg = tmp_path / "layout.gpkg"
    code, out, err = run_cli(["plan", "--sites", sites_gpkg, "--out", out_gpkg,
                              "--demand-field", "q_lps"], capsys)
    assert code == 0, err
    assert "tree links      29" in out and "certificate     cycle property holds" in out
    import pyogrio
    names = set(pyogrio.list_layers(out_gpkg)[:, 0])
    assert {"links", "nodes", "run_info"} <= names
    links = pyogrio.read_dataframe(out_gpkg, layer="links")
    nodes = pyogrio.read_dataframe(out_gpkg, layer="nodes")
    assert len(links) == 29 and len(nodes) == 30
    for f in ("link_id", "from_node", "to_node", "grow_order", "length_m", "cost"):
        assert f in links.columns
    for f in ("node_id", "role", "demand_lps", "parent_node", "hops_to_root", "cost_to_root"):
        assert f in nodes.columns
    # from_node is the end nearer the root: its hop count is one less
    hops = dict(zip(nodes.node_id, nodes.hops_to_root))
    assert all(hops[a] + 1 == hops[b] for a, b in zip(links.from_node, links.to_node))
    # the geometry length equals length_m
    np.testing.assert_allclose(links.geometry.length, links.length_m, rtol=1e-12)


def test_refuses_existing_layers_and_keeps_other_layers(tmp_path, sites_gpkg, capsys):
    out_gpkg = tmp_path / "layout.gpkg"
    # a layer of the user's that mainspan must never touch
    write_points(out_gpkg, [[0, 0], [1, 1]], layer="survey_points")
    args = ["plan", "--sites", sites_gpkg, "--out", out_gpkg, "--quiet"]
    assert run_cli(args, capsys)[0] == 0
    before = open(out_gpkg, "rb").read()
    code, out, err = run_cli(args, capsys)
    assert code == 2 and "--overwrite" in err and err.count("\n") == 1
    assert open(out_gpkg, "rb").read() == before          # nothing lost
    assert run_cli(args + ["--overwrite"], capsys)[0] == 0
    import pyogrio
    names = set(pyogrio.list_layers(out_gpkg)[:, 0])
    assert "survey_points" in names
    assert len(pyogrio.read_dataframe(out_gpkg, layer="survey_points")) == 2


def test_same_input_same_bytes(tmp_path, sites_gpkg, capsys):
    a, b = tmp_path / "a.gpkg", tmp_path / "b.gpkg"
    for p in (a, b):
        assert run_cli(["plan", "--sites", sites_gpkg, "--out", p, "--quiet"], capsys)[0] == 0
    assert open(a, "rb").read() == open(b, "rb").read()
    # re-planning over the same file gives the same bytes again
    assert run_cli(["plan", "--sites", sites_gpkg, "--out", a, "--quiet", "--overwrite"],
                   capsys)[0] == 0
    assert open(a, "rb").read() == open(b, "rb").read()


def _bad_cases(tmp_path, sites_gpkg):
    import geopandas as gpd
    import shapely
    nocrs = tmp_path / "nocrs.gpkg"
    gpd.GeoDataFrame(geometry=shapely.points([[0, 0], [5, 5]])).to_file(nocrs)
    line = tmp_path / "line.gpkg"
    gpd.GeoDataFrame(geometry=[shapely.LineString([(0, 0), (1, 1)])], crs=32633).to_file(line)
    empty = tmp_path / "empty.gpkg"
    gpd.GeoDataFrame({"id": []}, geometry=[], crs=32633).to_file(empty)
    dup = write_points(tmp_path / "dup.gpkg", [[0, 0], [10, 0]], fields={"id": ["a", "a"]})
    coin = write_points(tmp_path / "coin.gpkg", [[0, 0], [0, 0], [5, 5]])
    one = write_points(tmp_path / "one.gpkg", [[0, 0]])
    csv = tmp_path / "nan.csv"
    csv.write_text("x,y\n0,0\nnan,1\n")
    far = write_points(tmp_path / "far.gpkg", [[0, 0], [10, 0], [5000, 0], [5010, 0]])
    out = tmp_path / "o.gpkg"
    s = ["--sites", sites_gpkg, "--out", out]
    return [
        (["plan", "--sites", nocrs, "--out", out], "has no CRS"),
        (["plan", "--sites", line, "--out", out], "not a point"),
        (["plan", "--sites", empty, "--out", out], "is empty"),
        (["plan", "--sites", dup, "--out", out], "duplicate id"),
        (["plan", "--sites", coin, "--out", out], "--merge-within"),
        (["plan", "--sites", one, "--out", out], "at least 2"),
        (["plan", "--sites", csv, "--sites-crs", "EPSG:32633", "--out", out], "row 2"),
        (["plan", "--sites", tmp_path / "missing.gpkg", "--out", out], "does not exist"),
        (["plan", *s, "--layer", "nope"], "no layer 'nope'"),
        (["plan", *s, "--id-field", "station"], "field 'station'"),
        (["plan", *s, "--root", "ZZZ"], "'ZZZ'"),
        (["plan", *s, "--candidates", "delauney"], "did you mean 'delaunay'"),
        (["plan", *s, "--k", "0"], "k"),
        (["plan", *s, "--crs", "EPSG:4326"], "not a projected CRS"),
        (["plan", "--sites", far, "--out", out, "--candidates", "knn", "--k", "1"],
         "unconnected parts"),
        (["plan", *s, "--max-link-m", "-5"], "max_link_m"),
        (["plan", "--out", out], "no sites given"),
        (["plan", "--sites", sites_gpkg], "no output given"),
        (["plan", *s, "--system", "pressure", "--design", "velocity_cap=2"], "unknown setting"),
        (["plan", *s[:2], "--out", tmp_path / "x.shp"], ".gpkg"),
    ]


def test_every_bad_input_is_one_line_exit_2(tmp_path, sites_gpkg, capsys):
    import warnings
    with warnings.catch_warnings():       # writing the CRS-less test file warns; not ours
        warnings.simplefilter("ignore")
        cases = _bad_cases(tmp_path, sites_gpkg)
    capsys.readouterr()
    for args, needle in cases:
        code, out, err = run_cli(args, capsys)
        assert code == 2, (args, err)
        assert needle.lower() in err.lower(), (args, err)
        errors = [ln for ln in err.splitlines() if not ln.startswith("[mainspan] ")]
        assert len(errors) == 1 and errors[0].startswith("mainspan: error: "), err
        assert "Traceback" not in err


def test_forest_option(tmp_path, capsys):
    far = write_points(tmp_path / "far.gpkg", [[0, 0], [10, 0], [5000, 0], [5010, 0]])
    out = tmp_path / "o.gpkg"
    code, o, err = run_cli(["plan", "--sites", far, "--out", out, "--candidates", "knn", "--k",
                            "1", "--allow-forest"], capsys)
    assert code == 0, err
    assert "from 2 root(s)" in o


def test_check_reports_without_writing(tmp_path, sites_gpkg, capsys):
    code, out, err = run_cli(["check", "--sites", sites_gpkg, "--demand-field", "q_lps"], capsys)
    assert code == 0, err
    assert "count         30" in out and "inputs OK" in out
    assert not any(p.endswith(".gpkg") and p != "sites.gpkg" for p in os.listdir(tmp_path))


def test_project_file_plan_and_unknown_key(tmp_path, sites_gpkg, capsys):
    proj = tmp_path / "p.toml"
    proj.write_text('[sites]\npath = "sites.gpkg"\ndemand_field = "q_lps"\n'
                    '[candidates]\nmethod = "knn"\nk = 6\n[output]\ngpkg = "out.gpkg"\n')
    code, out, err = run_cli(["plan", proj], capsys)
    assert code == 0, err
    assert os.path.exists(tmp_path / "out.gpkg")        # relative to the project file
    proj.write_text('[sites]\npath = "sites.gpkg"\n[candidates]\nmetod = "knn"\n')
    code, out, err = run_cli(["plan", proj, "--out", tmp_path / "o2.gpkg"], capsys)
    assert code == 2 and "did you mean 'method'" in err
