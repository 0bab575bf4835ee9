"""Outputs never replace inputs or each other; project files write only inside their folder.

Every case goes through the real command line and checks the exit code, the
one-line message and that no file changed (bytes, mtime and mode).
"""

import os

import pytest

from tests.conftest import run_cli
from tests.safety_helpers import make_sites, one_error_line, snapshot


@pytest.fixture
def sites(tmp_path):
    return make_sites(tmp_path / "sites.gpkg")


@pytest.fixture
def planned(tmp_path, sites, capsys):
    out = tmp_path / "layout.gpkg"
    code, _, err = run_cli(["plan", "--sites", sites, "--out", out, "--quiet"], capsys)
    assert code == 0, err
    return out


def _refused(args, capsys, needles, *files):
    before = snapshot(*files)
    code, out, err = run_cli(args, capsys)
    assert code == 2, (args, err)
    line = one_error_line(err)
    for n in needles:
        assert n in line, (n, line)
    assert snapshot(*files) == before, "a file changed"
    return line


def test_output_that_is_an_input_is_refused(tmp_path, sites, planned, capsys):
    # the sites file as --out, even with --overwrite
    _refused(["plan", "--sites", sites, "--out", sites, "--overwrite"], capsys,
             ["--out", "same file as the input sites", "sites.gpkg"], sites)
    # the layout as the report's output, through a symbolic link with an .html name
    link = tmp_path / "view.html"
    os.symlink(planned, link)
    _refused(["report", planned, "--out", link, "--overwrite"], capsys,
             ["view.html", "same file as the input layout", "layout.gpkg"], planned)
    # the layout as an export target
    link2 = tmp_path / "lines.csv"
    os.symlink(planned, link2)
    _refused(["export", planned, "--to", link2, "--overwrite"], capsys,
             ["lines.csv", "same file as the input layout"], planned)
    # the case: report over the GeoPackage itself is refused by its extension
    _refused(["report", planned, "--out", planned, "--overwrite"], capsys,
             [".html or .htm"], planned)


def test_two_outputs_that_are_one_file_are_refused(tmp_path, sites, planned, capsys):
    link = tmp_path / "r.html"
    os.symlink(planned, link)
    line = _refused(["plan", "--sites", sites, "--out", planned, "--report", link,
                     "--overwrite"], capsys, ["--out", "--report", "are the same file"], planned)
    assert "layout.gpkg" in line and "r.html" in line
    # wrong extension for the report (the r.gpkg given as both)
    _refused(["plan", "--sites", sites, "--out", planned, "--report", planned, "--overwrite"],
             capsys, ["--report", ".html"], planned)


def test_missing_or_unwritable_output_folder_refused_before_work(tmp_path, sites, capsys,
                                                                 monkeypatch):
    _refused(["plan", "--sites", sites, "--out", tmp_path / "nope" / "x.gpkg"], capsys,
             ["folder", "does not exist"])
    locked = tmp_path / "ro"
    locked.mkdir()
    real_access = os.access
    # root may write anywhere, so the check is made to see the folder as read-only
    monkeypatch.setattr("mainspan.safeio.os.access",
                        lambda p, m, **kw: False if os.fspath(p) == str(locked)
                        else real_access(p, m, **kw))
    import mainspan.pipeline.layout as layout_mod
    monkeypatch.setattr(layout_mod, "plan_layout", lambda *a, **k: pytest.fail("computed"))
    line = _refused(["plan", "--sites", sites, "--out", tmp_path / "ok.gpkg",
                     "--report", locked / "r.html"], capsys, ["not writable", "ro"])
    assert "--report" in line
    assert not os.path.exists(tmp_path / "ok.gpkg")


def _project(folder, sites, output, extra="", name="p.toml"):
    p = folder / name
    body = f'[sites]\npath = "{os.path.relpath(sites, folder)}"\n{extra}\n[output]\n'
    body += "".join(f'{k} = {v!r}\n' if isinstance(v, str) else f"{k} = {str(v).lower()}\n"
                    for k, v in output.items())
    p.write_text(body.replace("'", '"'))
    return p


def test_project_outputs_stay_inside_its_folder(tmp_path, sites, capsys):
    proj_dir = tmp_path / "proj"
    proj_dir.mkdir()
    victim = tmp_path / "victim"
    victim.mkdir()
    notes = victim / "notes.html"
    notes.write_text("<!DOCTYPE html><html><body>my notes</body></html>")
    p = _project(proj_dir, sites, {"gpkg": "out.gpkg", "report": "../victim/notes.html",
                                   "overwrite": True})
    _refused(["plan", p], capsys, ["[output] report", "outside the project folder",
                                   "--allow-outside-project"], notes)
    assert not (proj_dir / "out.gpkg").exists()
    p2 = _project(proj_dir, sites, {"gpkg": "../../x.gpkg"}, name="p2.toml")
    _refused(["plan", p2], capsys, ["[output] gpkg", "outside the project folder"])
    assert not (tmp_path.parent / "x.gpkg").exists()
    # allowed explicitly, the foreign file is still not replaced by overwrite = true
    _refused(["plan", p, "--allow-outside-project"], capsys,
             ["notes.html", "not written by mainspan", "--overwrite"], notes)
    # the text file: refused by the report key's extension already
    txt = victim / "notes.txt"
    txt.write_text("keep me")
    p3 = _project(proj_dir, sites, {"gpkg": "out.gpkg", "report": "../victim/notes.txt",
                                    "overwrite": True}, name="p3.toml")
    _refused(["plan", p3, "--allow-outside-project", "--overwrite"], capsys,
             ["[output] report", ".html"], txt)


def test_project_overwrite_replaces_only_mainspan_files(tmp_path, sites, capsys):
    d = tmp_path / "proj"
    d.mkdir()
    p = _project(d, sites, {"gpkg": "out.gpkg", "report": "out.html", "overwrite": True})
    code, _, err = run_cli(["plan", p, "--quiet"], capsys)
    assert code == 0, err
    # our own outputs: replaced by the project's overwrite = true
    code, _, err = run_cli(["plan", p, "--quiet"], capsys)
    assert code == 0, err
    # a foreign HTML file under the report's name is not
    (d / "out.html").write_text("<html><body>someone's page</body></html>")
    _refused(["plan", p, "--quiet"], capsys, ["[output] report", "not written by mainspan"],
             d / "out.html", d / "out.gpkg")
    # ... unless the command line says so
    code, _, err = run_cli(["plan", p, "--quiet", "--overwrite"], capsys)
    assert code == 0, err
    from mainspan.safeio import written_by_mainspan
    assert written_by_mainspan(d / "out.html") and written_by_mainspan(d / "out.gpkg")


@pytest.mark.parametrize("key,name", [("gpkg", "a.sqlite"), ("report", "a.txt"),
                                      ("dxf", "a.dwg"), ("landxml", "a.json"),
                                      ("links_csv", "a.txt"), ("quantities_csv", "a.xlsx")])
def test_each_output_key_accepts_only_its_extensions(tmp_path, sites, capsys, key, name):
    d = tmp_path / "proj"
    d.mkdir()
    out = {"gpkg": "o.gpkg", key: name}
    p = _project(d, sites, out)
    _refused(["plan", p], capsys, [f"[output] {key}", "must end in"])
    _refused(["check", p], capsys, [f"[output] {key}"])


def test_recognises_mainspan_files_by_content(tmp_path, sites, planned, capsys):
    from mainspan.safeio import written_by_mainspan
    for ext in ("dxf", "xml"):
        to = tmp_path / f"l.{ext}"
        assert run_cli(["export", planned, "--to", to], capsys)[0] == 0
        assert written_by_mainspan(to)
    assert written_by_mainspan(planned)
    assert not written_by_mainspan(sites)          # a GeoPackage, but not ours
    csv = tmp_path / "l.csv"
    assert run_cli(["export", planned, "--to", csv], capsys)[0] == 0
    assert not written_by_mainspan(csv)            # CSV carries no marker
    fake = tmp_path / "fake.dxf"
    fake.write_text("  0\nSECTION\n  2\nHEADER\n  9\n$ACADVER\n  1\nAC1027\n  0\nENDSEC\n  0\nEOF\n")
    assert not written_by_mainspan(fake)


@pytest.mark.parametrize("kind", ["binary", "folder"])
def test_binary_or_folder_project_file_is_exit_2(tmp_path, capsys, kind):
    p = tmp_path / "p.toml"
    if kind == "folder":
        p.mkdir()
    else:
        p.write_bytes(bytes(range(256)) * 8)
    for cmd in ("plan", "check", "compare"):
        _refused([cmd, p], capsys, ["project file", "p.toml"])


def test_project_hand_off_outputs_are_written_inside_the_folder(tmp_path, sites, capsys):
    d = tmp_path / "proj"
    d.mkdir()
    p = _project(d, sites, {"gpkg": "o.gpkg", "dxf": "o.dxf", "landxml": "o.xml",
                            "links_csv": "links.csv", "quantities_csv": "q.csv"},
                 extra='[design]\nsystem = "pressure"\n')
    code, out, err = run_cli(["plan", p, "--quiet"], capsys)
    assert code == 0, err
    for n in ("o.gpkg", "o.dxf", "o.xml", "links.csv", "q.csv"):
        assert (d / n).stat().st_size > 0, n
    # a second run without --overwrite refuses before computing and changes nothing
    _refused(["plan", p, "--quiet"], capsys, ["already"], d / "o.dxf", d / "q.csv")
    # quantities without a design is refused up front
    p2 = _project(d, sites, {"gpkg": "o2.gpkg", "quantities_csv": "q2.csv"}, name="p2.toml")
    _refused(["plan", p2, "--quiet"], capsys, ["quantities_csv", "[design] system"])
    assert not (d / "o2.gpkg").exists()


def test_compare_outputs_checked_like_plan(tmp_path, sites, capsys):
    d = tmp_path / "proj"
    d.mkdir()
    p = _project(d, sites, {"gpkg": "../out.gpkg"},
                 extra="[scenarios.short]\ncandidates = { method = \"knn\", k = 4 }\n")
    _refused(["compare", p], capsys, ["[output] gpkg", "outside the project folder"])
    assert not (tmp_path / "out_scenarios.gpkg").exists()
    _refused(["compare", p, "--out", sites, "--overwrite"], capsys,
             ["--out", "same file as the input sites"], sites)
    _refused(["compare", p, "--out", d / "c.gpkg", "--report", d / "c.gpkg"], capsys,
             ["--report", ".html"])
    code, _, err = run_cli(["compare", p, "--out", d / "c.gpkg", "--quiet"], capsys)
    assert code == 0, err


def test_every_input_path_key_is_protected(tmp_path, sites, capsys):
    """Inputs come from the project's path keys, so a new key (here the design's
    surface raster) is protected without a list to keep in step."""
    raster = tmp_path / "landuse.tif"
    raster.write_bytes(b"II*\x00 not really a raster")
    link = tmp_path / "r.html"
    os.symlink(raster, link)
    _refused(["plan", "--sites", sites, "--out", tmp_path / "o.gpkg", "--report", link,
              "--overwrite", "--design", f"surface_raster={raster}"], capsys,
             ["--report", "[design] surface_raster", "landuse.tif"], raster)
