"""The bundled demo end to end through the real CLI, and the hand-off commands on its output."""

import os

import numpy as np
import pytest

from tests.conftest import run_cli


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    from mainspan.cli import main
    out = tmp_path_factory.mktemp("demo") / "demo-out"
    assert main(["demo", str(out), "--quiet"]) == 0
    return out


def _read(path, layer):
    import pyogrio
    return pyogrio.read_dataframe(path, layer=layer)


def test_demo_writes_everything(demo):
    for name in ("kestrel_layout.gpkg", "harrow_layout.gpkg", "kestrel_report.html",
                 "harrow_report.html", "kestrel_long_section.png", "harrow_long_section.png",
                 "kestrel_layout.dxf", "kestrel_layout.prj", "kestrel_layout.xml",
                 "inputs/kestrel.toml", "inputs/terrain.tif"):
        assert os.path.getsize(demo / name) > 0, name
    html = (demo / "kestrel_report.html").read_text()
    assert "licensed engineer" in html and "before any digging" in html.replace("\n", " ")


def test_pressure_demo_is_sized_and_checked(demo):
    import networkx as nx
    links = _read(demo / "kestrel_layout.gpkg", "links")
    nodes = _read(demo / "kestrel_layout.gpkg", "nodes")
    assert len(links) == len(nodes) - 1
    for f in ("flow_lps", "diameter_mm", "velocity_mps", "headloss_m", "checks"):
        assert f in links.columns
    assert "pressure_head_m" in nodes.columns
    # velocity cap 1.5 m/s (common practice, no single source) on every pipe that got one
    ok = ~links.checks.str.contains("no_pipe")
    assert (links.velocity_mps[ok] <= 1.5 + 1e-9).all()
    # minimum pressure 14 m (about 20 psi, Recommended Standards for Water Works §8.2.1)
    good = nodes.checks == "ok"
    assert (nodes.pressure_head_m[good] >= 14.0 - 1e-6).all()
    # flow in every link = demand of everything beyond it; networkx gives the descendants
    g = nx.DiGraph(list(zip(links.from_node, links.to_node)))
    q = dict(zip(nodes.node_id, nodes.demand_lps))
    for a, b, f in zip(links.from_node, links.to_node, links.flow_lps):
        assert f == pytest.approx(q[b] + sum(q[v] for v in nx.descendants(g, b)), abs=1e-9)
    assert len(_read(demo / "kestrel_layout.gpkg", "quantities")) >= 2
    # fittings as a point layer; the editable price template reads back as the flagged placeholders
    fit = _read(demo / "kestrel_layout.gpkg", "fittings")
    assert {"type", "size_mm", "link_id", "chainage_m", "node"} <= set(fit.columns) and len(fit) > 0
    from mainspan.hydraulics.prices import default_prices, read_prices
    tmpl = read_prices(demo / "inputs" / "prices.csv")
    assert tmpl == default_prices() and tmpl.placeholder


def test_gravity_demo_falls_to_the_outlet(demo):
    path = demo / "harrow_layout.gpkg"
    links, nodes = _read(path, "links"), _read(path, "nodes")
    info = dict(zip(*_read(path, "run_info")[["key", "value"]].T.values))
    assert info["layout"] == "gravity" and float(info["gravity_layout_saving_pct"]) >= 0
    ok = ~links.checks.str.contains("adverse")
    # inverts fall towards the outlet: the from_node end is the downstream end
    assert (links.invert_from_m[ok] <= links.invert_to_m[ok] + 1e-9).all()
    assert "invert_m" in nodes.columns
    ap = _read(path, "access_points")
    long = links.length_m > 120.0      # 400 ft spacing, Recommended Standards for Wastewater
    assert len(ap) >= long.sum()


def test_export_and_report_commands(demo, tmp_path, capsys):
    gpkg = demo / "kestrel_layout.gpkg"
    for target, extra in (("a.dxf", ["--by", "diameter", "--origin", "auto"]),
                          ("a2d.dxf", ["--flat"]), ("a.xml", []), ("a.csv", []),
                          ("q.csv", ["--quantities"]), ("s.pdf", []), ("s.svg", ["--node", "H108"])):
        code, out, err = run_cli(["export", gpkg, "--to", tmp_path / target, *extra], capsys)
        assert code == 0, (target, err)
        assert os.path.getsize(tmp_path / target) > 0
    import ezdxf
    doc = ezdxf.readfile(tmp_path / "a.dxf")
    assert len(doc.modelspace().query("POLYLINE LWPOLYLINE")) == len(_read(gpkg, "links"))
    code, out, err = run_cli(["export", gpkg, "--to", tmp_path / "a.xml"], capsys)
    assert code == 2 and "--overwrite" in err
    code, out, err = run_cli(["export", gpkg, "--to", tmp_path / "a.shp"], capsys)
    assert code == 2 and "--to" in err
    code, out, err = run_cli(["report", gpkg, "--out", tmp_path / "r.html"], capsys)
    assert code == 0 and (tmp_path / "r.html").stat().st_size > 10_000
    code, out, err = run_cli(["report", tmp_path / "missing.gpkg", "--out", tmp_path / "x.html"],
                             capsys)
    assert code == 2 and "missing.gpkg" in err


def test_compare_on_demo_project(demo, tmp_path, capsys):
    code, out, err = run_cli(["compare", demo / "inputs" / "kestrel.toml", "--out",
                              tmp_path / "sc.gpkg", "--quiet"], capsys)
    assert code == 0, err
    for name in ("base", "plain_length", "wetland_protected"):
        assert name in out


def test_user_catalog_csv(demo, tmp_path, capsys):
    cat = tmp_path / "cat.csv"
    cat.write_text("name,nominal_mm,inner_mm,hw_c,rating_m,cost_per_m,material\n"
                   "PVC 110,110,101.6,150,100,9.5,PVC\nPVC 160,160,147.6,150,100,19,PVC\n"
                   "PVC 250,250,230.8,150,100,41,PVC\nPVC 400,400,369.4,150,100,98,PVC\n")
    out = tmp_path / "k.gpkg"
    code, o, err = run_cli(["plan", demo / "inputs" / "kestrel.toml", "--out", out,
                            "--catalog", cat, "--design", "headloss_method=hazen_williams",
                            "--quiet"], capsys)
    assert code == 0, err
    links = _read(out, "links")
    assert set(links.material) == {"PVC"}
    assert set(links.nominal_mm) <= {110.0, 160.0, 250.0, 400.0}
    bad = tmp_path / "bad.csv"
    bad.write_text("name,nominal_mm,inner_mm\nX,110,abc\n")
    code, o, err = run_cli(["plan", demo / "inputs" / "kestrel.toml", "--out", tmp_path / "b.gpkg",
                            "--catalog", bad, "--quiet"], capsys)
    assert code == 2 and "bad.csv" in err


def test_exports_do_not_depend_on_the_hash_seed(demo, tmp_path):
    # sets iterate in a per-process order; outputs must not (checked in fresh interpreters)
    import subprocess
    import sys
    outs = []
    for seed in ("1", "7", "12345"):
        out = {}
        for ext in ("dxf", "xml"):
            p = tmp_path / f"s{seed}.{ext}"
            # LandXML carries the time of writing unless SOURCE_DATE_EPOCH fixes it
            env = dict(os.environ, PYTHONHASHSEED=seed, SOURCE_DATE_EPOCH="1767225600")
            subprocess.run([sys.executable, "-m", "mainspan", "export",
                            str(demo / "kestrel_layout.gpkg"), "--to", str(p)], check=True,
                           env=env, capture_output=True)
            out[ext] = p.read_bytes()
        outs.append(out)
    assert outs[0] == outs[1] == outs[2]


def test_storm_demo_basis_and_depth_aware_gain(demo):
    # the drainage demo is a storm catchment: Rational method Q = C i A / 360 (any drainage text)
    path = demo / "harrow_layout.gpkg"
    links, nodes = _read(path, "links"), _read(path, "nodes")
    info = dict(zip(*_read(path, "run_info")[["key", "value"]].T.values))
    assert info["design:gravity_basis"] == "storm"
    out = links[links.from_node == "OUT-1"]
    ca_total = float((nodes.area_ha * nodes.runoff_c).sum())
    assert out.ca_ha.sum() == pytest.approx(ca_total, rel=1e-9)
    q = out.ca_ha * out.intensity_mm_per_h / 0.36          # L/s
    assert np.allclose(out.design_flow_lps, q, rtol=1e-9)
    # the depth-aware layout against the earlier one, same basis and prices
    # (grav12: with grade breaks and lift stations the earlier layout may already pass every check, so
    # the depth-aware one is never worse and stays within the 6 m maximum depth, and is cheaper)
    assert int(info["depth_layout_failures_after"]) <= int(info["depth_layout_failures_before"])
    assert float(info["depth_layout_max_depth_after_m"]) <= 6.0 + 1e-9
    assert float(info["depth_layout_cost_after"]) < float(info["depth_layout_cost_before"])
    from lxml import etree
    root = etree.parse(str(demo / "harrow_layout.xml")).getroot()
    net = root.find("{*}PipeNetworks/{*}PipeNetwork")
    assert net.get("pipeNetType") == "storm"
