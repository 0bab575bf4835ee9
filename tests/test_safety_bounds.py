"""Bounded work and plain messages: long/deep expressions, memory budget, stability runs,
check = plan validation, negative or overflowing costs, long sections without ground."""

import os
import re
import signal
import subprocess
import sys

import numpy as np
import pytest

from tests.conftest import run_cli, write_points
from tests.safety_helpers import ROOT, make_sites, one_error_line, run_module, snapshot
from tests.test_cli_rasters import X0, Y0, write_raster


@pytest.fixture
def scene(tmp_path):
    """Six sites on a 1 km raster scene (as in test_cli_rasters), plus rasters of our own."""
    xy = np.array([[512100, 5120900], [512500, 5120900], [512900, 5120900],
                   [512100, 5120100], [512500, 5120100], [512900, 5120100]], float)
    sites = write_points(tmp_path / "s.gpkg", xy, fields={"id": list("ABCDEF")})
    yy, xx = np.mgrid[0:100, 0:100]
    return {"sites": sites, "tmp": tmp_path, "out": tmp_path / "o.gpkg",
            "dem": write_raster(tmp_path / "dem.tif", 200 + 0.05 * xx + 0.02 * yy),
            "cost": write_raster(tmp_path / "cost.tif", np.full((100, 100), 10.0)),
            "neg": write_raster(tmp_path / "neg.tif", np.where(xx > 50, -40.0, 10.0)),
            "allnd": write_raster(tmp_path / "allnd.tif", np.full((100, 100), -9999.0))}


def _refused(args, capsys, needles, *files):
    before = snapshot(*files)
    code, _, err = run_cli(args, capsys)
    assert code == 2, (args, err)
    line = one_error_line(err)
    for n in needles:
        assert n in line, (n, line)
    assert snapshot(*files) == before
    return line


@pytest.mark.parametrize("expr,needle", [
    ("+".join(["base"] * 50000), "characters long"),
    ("+".join(["base"] * 700), "nests deeper"),
    ("(" * 70 + "base" + ")" * 70, "nest deeper"),
    ("1" * 400 + " * base", "too large"),
    ("base * 1e400", "too large"),
])
def test_expression_size_depth_and_overflow_bounded(scene, capsys, expr, needle):
    line = _refused(["plan", "--sites", scene["sites"], "--land-cost", f"base={scene['cost']}",
                     "--cost-expression", expr, "--out", scene["out"]], capsys, [needle])
    assert len(line) < 400                    # the expression is shortened in the message
    assert not scene["out"].exists()


def test_memory_estimate_refuses_before_sampling(scene, capsys):
    line = _refused(["plan", "--sites", scene["sites"], "--terrain", scene["dem"],
                     "--sample-spacing-m", "1e-6", "--out", scene["out"]], capsys,
                     ["dem.tif", "1e-06 m", "memory", "--sample-spacing-m"])
    assert "GiB" in line or "TiB" in line
    _refused(["plan", "--sites", scene["sites"], "--terrain", scene["dem"], "--sample-spacing-m",
              "0.05", "--memory-limit", "1M", "--out", scene["out"]], capsys,
             ["--memory-limit", "1.0 MiB"])
    _refused(["plan", "--sites", scene["sites"], "--memory-limit", "lots",
              "--out", scene["out"]], capsys, ["--memory-limit", "'lots'"])
    # the same run within a sensible budget works
    code, _, err = run_cli(["plan", "--sites", scene["sites"], "--terrain", scene["dem"],
                            "--sample-spacing-m", "0.05", "--memory-limit", "512M",
                            "--out", scene["out"], "--quiet"], capsys)
    assert code == 0, err


def test_check_refuses_what_plan_refuses(scene, capsys):
    """An all-nodata DEM: plan refuses, so check must not say OK."""
    args = ["--sites", scene["sites"], "--terrain", scene["allnd"]]
    line = _refused(["plan", *args, "--out", scene["out"]], capsys, ["nodata"])
    code, out, err = run_cli(["check", *args], capsys)
    assert code == 2, out
    assert "inputs OK" not in out and "problems (1)" in out
    assert line.split("error: ", 1)[1].split(":")[0] in out
    # and where plan succeeds, check says OK after the same (dry) run
    code, out, _ = run_cli(["check", "--sites", scene["sites"], "--terrain", scene["dem"]], capsys)
    assert code == 0 and "dry run" in out and "inputs OK" in out
    assert not scene["out"].exists()


def test_negative_land_cost_names_raster_link_and_sites(scene, capsys):
    line = _refused(["plan", "--sites", scene["sites"], "--land-cost", scene["neg"],
                     "--out", scene["out"]], capsys, ["neg.tif", "negative cost", "sites "])
    assert "np.float64" not in line
    line = _refused(["plan", "--sites", scene["sites"], "--land-cost", f"base={scene['cost']}",
                     "--cost-expression", "base - 500", "--out", scene["out"]], capsys,
                    ["cost expression 'base - 500'", "negative cost", "max("])


def test_negative_cost_in_subprocess_has_no_stray_stderr(scene):
    r = run_module(["plan", "--sites", scene["sites"], "--land-cost", scene["neg"],
                    "--out", scene["out"], "--quiet"], timeout=300)
    assert r.returncode == 2
    assert [ln for ln in r.stderr.splitlines() if ln.strip()] == [one_error_line(r.stderr)]


def test_huge_weights_are_an_overflow_not_unconnected_parts(scene, capsys):
    line = _refused(["plan", "--sites", scene["sites"], "--w-length", "1e308",
                     "--out", scene["out"]], capsys, ["overflows", "--length 1e+308"])
    assert "unconnected" not in line


def test_long_section_needs_ground(tmp_path, capsys):
    sites = make_sites(tmp_path / "s.gpkg", n=8)
    lay = tmp_path / "flat.gpkg"
    assert run_cli(["plan", "--sites", sites, "--out", lay, "--quiet"], capsys)[0] == 0
    _refused(["export", lay, "--to", tmp_path / "ls.svg"], capsys,
             ["no ground levels", "--terrain"], lay)
    assert not (tmp_path / "ls.svg").exists()


def test_sites_crs_help_says_it_overrides(capsys):
    from mainspan.cli import build_parser
    p = build_parser()
    sub = next(a for a in p._actions if a.dest == "command").choices["plan"]
    text = sub.format_help()
    assert "overrides the file's own CRS" in " ".join(text.split())


def _compare_project(tmp_path, n=200):
    sites = make_sites(tmp_path / "s.gpkg", n=n, seed=5)
    land = write_raster(tmp_path / "c.tif", np.full((120, 120), 10.0), x0=511900.0,
                        y0=5120500.0, cell=5.0)
    p = tmp_path / "p.toml"
    p.write_text(f'[sites]\npath = "s.gpkg"\n[rasters.land_cost]\nbase = "c.tif"\n'
                 '[scenarios.dear]\ncosts = { land = 3.0 }\n')
    return p, land


def test_stability_runs_bounded_with_progress(tmp_path, capsys):
    p, _ = _compare_project(tmp_path, n=20)
    _refused(["compare", p, "--stability", "1000000000"], capsys, ["--stability", "1000"])
    code, out, err = run_cli(["compare", p, "--stability", "10"], capsys)
    assert code == 0, err
    # one progress line over both scenarios' stability tasks (batches of runs), counted as
    # tasks finish, up to all done
    done = re.findall(r"\[mainspan\] stability \(2 scenarios\) (\d+)/(\d+)\n", err)
    assert len(done) >= 2 and done[-1][0] == done[-1][1], err


def test_stability_runs_are_interruptible(tmp_path):
    p, _ = _compare_project(tmp_path, n=300)
    env = dict(os.environ, PYTHONPATH=ROOT)
    proc = subprocess.Popen([sys.executable, "-m", "mainspan", "compare", str(p),
                             "--stability", "1000"], env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    for line in proc.stderr:
        if re.match(r"\[mainspan\] stability \(2 scenarios\) [1-9]\d*/\d+$", line.strip()):
            proc.send_signal(signal.SIGINT)
            break
    _, rest = proc.communicate(timeout=120)
    assert proc.returncode == 130, rest
    assert "interrupted" in rest and "Traceback" not in rest


def test_numeric_field_values_shown_plainly(tmp_path, capsys):
    s = write_points(tmp_path / "neg.gpkg", [[512000, 5120000], [512100, 5120000],
                                             [512200, 5120050]],
                     fields={"id": [1, 2, 3], "role": ["source", "demand", "demand"],
                             "demand_lps": [0.0, -2.5, 1.0]})
    line = _refused(["plan", "--sites", s, "--out", tmp_path / "o.gpkg"], capsys,
                    ["site '2' has demand -2.5 in field 'demand_lps'"])
    assert "np." not in line
