"""--overwrite over our own GeoPackage replaces the whole previous run; mixed files refused."""

import sqlite3

import pyogrio
import pytest

from tests.conftest import run_cli, write_points
from tests.safety_helpers import make_sites, one_error_line, snapshot


@pytest.fixture
def sites(tmp_path):
    return make_sites(tmp_path / "sites.gpkg")


def _descriptions(path):
    con = sqlite3.connect(path)
    try:
        return dict(con.execute("SELECT table_name, description FROM gpkg_contents"))
    finally:
        con.close()


def test_overwrite_drops_every_layer_of_the_previous_run(tmp_path, sites, capsys):
    out = tmp_path / "layout.gpkg"
    write_points(out, [[0, 0], [1, 1]], layer="survey_points")      # the user's own layer
    code, _, err = run_cli(["plan", "--sites", sites, "--out", out, "--quiet",
                            "--system", "pressure"], capsys)
    assert code == 0, err
    first = set(pyogrio.list_layers(out)[:, 0])
    assert "quantities" in first
    # re-plan without design: the old quantities must not survive beside the new links
    code, _, err = run_cli(["plan", "--sites", sites, "--out", out, "--quiet", "--overwrite"],
                           capsys)
    assert code == 0, err
    names = set(pyogrio.list_layers(out)[:, 0])
    assert "quantities" not in names and "survey_points" in names
    assert {"links", "nodes", "run_info", "mainspan_layers"} <= names
    assert len(pyogrio.read_dataframe(out, layer="survey_points")) == 2
    # every layer mainspan wrote carries one run id; the user's layer carries none
    desc = _descriptions(out)
    ids = {desc[n] for n in ("links", "nodes", "run_info")}
    assert len(ids) == 1 and ids.pop().startswith("mainspan run ")
    assert not (desc["survey_points"] or "").startswith("mainspan run")
    # the file is still a valid GeoPackage after the drop: SQLite's own integrity check, and
    # every gpkg_contents / gpkg_geometry_columns row names an existing table (OGC GeoPackage
    # Encoding Standard 1.3, 12-128r18, requirements on those tables; from memory)
    con = sqlite3.connect(out)
    try:
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        tables = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type='table'")}
        for t in ("gpkg_contents", "gpkg_geometry_columns"):
            assert {r[0] for r in con.execute(f"SELECT table_name FROM {t}")} <= tables
        assert not any(t.startswith("rtree_quantities") for t in tables)
    finally:
        con.close()
    manifest = pyogrio.read_dataframe(out, layer="mainspan_layers")
    assert set(manifest["layer"]) == {"links", "nodes", "run_info"}
    # export --quantities now says there is no bill of quantities instead of the stale one
    code, _, err = run_cli(["export", out, "--to", tmp_path / "q.csv", "--quantities"], capsys)
    assert code == 2 and "quantities" in one_error_line(err)


def test_mixed_runs_refused_by_report_export_and_long_section(tmp_path, sites, capsys):
    a, b = tmp_path / "a.gpkg", tmp_path / "b.gpkg"
    other = make_sites(tmp_path / "other.gpkg", n=12, seed=9)
    for s, o in ((sites, a), (other, b)):
        code, _, err = run_cli(["plan", "--sites", s, "--out", o, "--quiet",
                                "--system", "pressure"], capsys)
        assert code == 0, err
    # splice the other run's bill of quantities into a, as a copy between files would
    q = pyogrio.read_dataframe(b, layer="quantities")
    con = sqlite3.connect(a)
    con.execute('DROP TABLE "quantities"')
    con.execute("DELETE FROM gpkg_contents WHERE table_name='quantities'")
    con.execute("DELETE FROM gpkg_ogr_contents WHERE table_name='quantities'")
    con.commit()
    con.close()
    pyogrio.write_dataframe(q, a, layer="quantities", driver="GPKG", append=True,
                            layer_options={"DESCRIPTION": _descriptions(b)["quantities"]})
    before = snapshot(a)
    for args in (["report", a, "--out", tmp_path / "r.html"],
                 ["export", a, "--to", tmp_path / "q.csv", "--quantities"],
                 ["export", a, "--to", tmp_path / "ls.svg"]):
        code, _, err = run_cli(args, capsys)
        assert code == 2, (args, err)
        line = one_error_line(err)
        assert "different mainspan runs" in line and "quantities" in line and "links" in line
    assert snapshot(a) == before
    assert not any((tmp_path / n).exists() for n in ("r.html", "q.csv", "ls.svg"))


def test_layer_without_run_id_beside_ours_is_refused(tmp_path, sites, capsys):
    out = tmp_path / "layout.gpkg"
    assert run_cli(["plan", "--sites", sites, "--out", out, "--quiet"], capsys)[0] == 0
    # a hand-made 'quantities' table added later by someone else
    import pandas as pd
    pyogrio.write_dataframe(pd.DataFrame({"material": ["PVC"], "length_m": [1.0]}), out,
                            layer="quantities", driver="GPKG", append=True)
    code, _, err = run_cli(["report", out, "--out", tmp_path / "r.html"], capsys)
    assert code == 2
    assert "quantities (no mainspan run id)" in one_error_line(err)


def test_legacy_file_without_manifest_is_replaced_whole(tmp_path, sites, capsys):
    """A file from before the manifest: layers are recognised by name beside run_info."""
    out = tmp_path / "old.gpkg"
    assert run_cli(["plan", "--sites", sites, "--out", out, "--quiet", "--system",
                    "pressure"], capsys)[0] == 0
    con = sqlite3.connect(out)         # make it look like an old file: no ids, no manifest
    con.execute("DROP TABLE mainspan_layers")
    for t in ("gpkg_contents", "gpkg_ogr_contents"):
        con.execute(f"DELETE FROM {t} WHERE table_name='mainspan_layers'")
    con.execute("UPDATE gpkg_contents SET description=''")
    con.commit()
    con.close()
    assert run_cli(["plan", "--sites", sites, "--out", out, "--quiet", "--overwrite"],
                   capsys)[0] == 0
    assert "quantities" not in set(pyogrio.list_layers(out)[:, 0])
