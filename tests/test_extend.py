"""The network stage end to end: existing mains, forced/forbidden links and limits in a plan.

Outside references: networkx's minimum spanning tree (Kruskal) over the plan's own candidate
links and prices (forced links at weight - 1e9, forbidden links removed), and shapely (GEOS)
``nearest_points`` for where the sites tap the existing main.
"""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
import shapely

import mainspan as ms
from mainspan.errors import InputError
from tests.conftest import run_cli, write_points


def grid(n_side=5, seed=0):
    rng = np.random.default_rng(seed)
    g = np.stack(np.meshgrid(np.arange(n_side), np.arange(n_side)), -1).reshape(-1, 2) * 100.0
    xy = g + rng.uniform(-20, 20, g.shape)
    ids = [f"h{i}" for i in range(len(xy))]
    ids[0] = "S"
    role = ["source"] + ["demand"] * (len(xy) - 1)
    return ms.sites_from_arrays(xy, crs="EPSG:32633", node_id=ids, role=role,
                                demand_lps=[0.0] + [2.0] * (len(xy) - 1))


def nx_total(edges, w, forced=(), forbidden=()):
    g = nx.Graph()
    fs, bs = set(forced), set(forbidden)
    for k, ((a, b), x) in enumerate(zip(edges.tolist(), w.tolist())):
        if k in bs or not np.isfinite(x):
            continue
        g.add_edge(a, b, weight=x - (1e9 if k in fs else 0.0), true=x)
    t = nx.minimum_spanning_tree(g)
    return sum(d["true"] for *_, d in t.edges(data=True))


def test_no_network_settings_plan_is_unchanged():
    s = grid()
    a, b = ms.plan_layout(s), ms.plan_layout(s, tap_fee=0.0)
    np.testing.assert_array_equal(a.link_ends, b.link_ends)
    assert a.run_info["certificate"] == b.run_info["certificate"]
    assert a.links.keys() == b.links.keys() and "existing" not in b.links
    assert b.run_info["network"] == "" and b.run_info["network_result"] == ""


def test_forced_and_forbidden_links_end_to_end():
    s = grid()
    free = ms.plan_layout(s)
    fl = [free.links["from_node"][3], free.links["to_node"][3]]
    lay = ms.plan_layout(s, forced_links=["S:h24"], forbidden_links=[f"{fl[0]}:{fl[1]}"])
    pairs = {frozenset(p) for p in zip(lay.links["from_node"], lay.links["to_node"])}
    assert frozenset(("S", "h24")) in pairs and frozenset(fl) not in pairs
    assert lay.links["forced"].sum() == 1
    assert "forced link(s) contracted" in lay.run_info["certificate"] or \
        "cycle property" in lay.run_info["certificate"]
    # the forced diagonal S-h24 was not a Delaunay candidate: it was added and priced
    e, w = lay.candidates.edges, np.asarray(lay.costs.total, float)
    lookup = {(int(a), int(b)): k for k, (a, b) in enumerate(e.tolist())}
    ix = {v: i for i, v in enumerate(s.node_id)}
    fk = lookup[tuple(sorted((ix["S"], ix["h24"])))]
    bk = lookup[tuple(sorted((ix[fl[0]], ix[fl[1]])))]
    ref = nx_total(e, w, forced=[fk], forbidden=[bk])          # networkx Kruskal
    assert lay.total("cost") == pytest.approx(ref, rel=1e-12)
    assert lay.total("cost") > free.total("cost")


def test_limits_hold_in_the_plan():
    s = grid()
    lay = ms.plan_layout(s, max_branch_sites=9, max_links_per_node=3,
                         candidates="delaunay+knn", k=6)
    parent = {b: a for a, b in zip(lay.links["from_node"], lay.links["to_node"])}

    def head(v):
        while parent.get(v) != "S":
            v = parent[v]
        return v
    heads = [head(v) for v in s.node_id[1:]]
    assert max(heads.count(h) for h in set(heads)) <= 9
    deg = {}
    for a, b in zip(lay.links["from_node"], lay.links["to_node"]):
        deg[a] = deg.get(a, 0) + 1
        deg[b] = deg.get(b, 0) + 1
    assert max(deg.values()) <= 3
    assert "Esau-Williams" in lay.run_info["network_result"]
    assert lay.run_info["certificate"].startswith("not applicable")
    with pytest.raises(InputError, match="max_branch_sites=2 cannot be met"):
        ms.plan_layout(s, max_branch_sites=2)


def main_and_sites():
    # a main along y = 0 from the source; sites in a row 30 m off it, 150 m apart
    xy = np.array([[0.0, 0.0]] + [[150.0 * i, 30.0] for i in range(1, 6)])
    ids = ["S"] + [f"h{i}" for i in range(1, 6)]
    s = ms.sites_from_arrays(xy, crs="EPSG:32633", node_id=ids,
                             role=["source"] + ["demand"] * 5, demand_lps=[0] + [8.0] * 5)
    return s, np.array([[0.0, 0.0], [400.0, 0.0], [800.0, 0.0]])


def write_main(path, line, diameter=None):
    import geopandas as gpd
    cols = {} if diameter is None else {"diameter_mm": [diameter], "material": ["AC"]}
    gpd.GeoDataFrame(cols, geometry=[shapely.LineString(line)], crs="EPSG:32633").to_file(path)
    return str(path)


def test_existing_main_is_extended_where_cheaper(tmp_path):
    s, line = main_and_sites()
    path = write_main(tmp_path / "mains.gpkg", line, diameter=50.0)
    lay = ms.plan_layout(s, existing=path, tap_fee=5.0, system="pressure")
    ex = np.asarray(lay.links["existing"], bool)
    new = ~ex
    # every site connects by a 30 m link to the main: cheaper than 150 m between sites
    assert new.sum() == 5
    assert np.allclose(np.asarray(lay.links["length_m"], float)[new], 30.0)
    assert np.allclose(np.asarray(lay.links["cost"], float)[new], 35.0)   # length + tap fee
    assert np.all(np.asarray(lay.links["cost"], float)[ex] == 0.0)
    # each tap lies where GEOS puts the point of the main nearest the site
    geom = shapely.LineString(line)
    for a, b in zip(lay.link_ends[new, 0], lay.link_ends[new, 1]):
        site, tap = (a, b) if lay.nodes["role"][a] != "junction" else (b, a)
        ref = shapely.ops.nearest_points(geom, shapely.Point(lay.node_xy[site]))[0]
        assert lay.node_xy[tap] == pytest.approx([ref.x, ref.y], abs=1e-9)
        assert lay.nodes["role"][tap] == "junction"
    # the existing 50 mm main carries up to 40 L/s: too small, flagged with the needed size
    under = np.asarray(lay.links["existing_undersized"], bool)
    assert under[ex].any() and not under[new].any()
    need = np.asarray(lay.links["needed_diameter_mm"], float)[under]
    assert (need > 50.0).all()
    # existing pipes are not bought again: the bill's pipe length is the new links' length
    q = lay.tables["quantities"]
    pipe_len = sum(float(x) for c, x in zip(q["category"], q["length_m"]) if c == "pipe")
    assert pipe_len == pytest.approx(float(np.asarray(lay.links["surface_length_m"],
                                                     float)[new].sum()), rel=1e-9)
    assert "existing links too small" in lay.run_info["network_result"]
    assert "network         existing mains: " in lay.summary()
    from mainspan.report.html import report_html
    assert "existing mains, forced links, limits" in report_html(lay)


def test_existing_layer_errors_via_cli(tmp_path, capsys):
    s, line = main_and_sites()
    sites = write_points(tmp_path / "s.gpkg", s.xy, fields={"id": list(s.node_id),
                                                           "role": list(s.role)})
    far = write_main(tmp_path / "far.gpkg", line + [0.0, 500.0])
    o = ["--output", str(tmp_path / "o.gpkg"), "--quiet"]
    code, out, err = run_cli(["plan", "--sites", sites, "--existing", far, *o], capsys)
    assert code == 2 and "reaches no site" in err and len(err.strip().splitlines()) == 1
    code, _, err = run_cli(["plan", "--sites", sites, "--tap-spacing-m", "50", *o], capsys)
    assert code == 2 and "needs --existing" in err
    code, _, err = run_cli(["plan", "--sites", sites, "--forced-links", "S:zz", *o], capsys)
    assert code == 2 and "site id 'zz'" in err
    good = write_main(tmp_path / "good.gpkg", line, diameter=300.0)
    out_gpkg = tmp_path / "out.gpkg"
    code, out, err = run_cli(["plan", "--sites", sites, "--existing", good, "--tap-fee", "5",
                              "--max-branch-sites", "5", "--output", str(out_gpkg)], capsys)
    assert code == 0, err
    import pyogrio
    links = pyogrio.read_dataframe(out_gpkg, layer="links")
    assert links["existing"].sum() >= 2 and "existing_diameter_mm" in links.columns
    info = pyogrio.read_dataframe(out_gpkg, layer="run_info")
    row = dict(zip(info["key"], info["value"]))
    assert "existing=" in row["network"] and "tap_fee=5" in row["network"]


def test_project_file_network_section(tmp_path, capsys):
    s, line = main_and_sites()
    sites = write_points(tmp_path / "s.gpkg", s.xy, fields={"id": list(s.node_id),
                                                           "role": list(s.role)})
    mains = write_main(tmp_path / "m.gpkg", line, diameter=200.0)
    proj = tmp_path / "plan.toml"
    proj.write_text(f"""[sites]
path = "{sites}"
[network]
existing = "{mains}"
tap_fee = 12.5
forbidden_links = ["h1:h2"]
max_branch_sites = 5
source_capacity_lps = {{ S = 100.0 }}
[output]
gpkg = "{tmp_path / 'out.gpkg'}"
""")
    code, out, err = run_cli(["plan", str(proj)], capsys)
    assert code == 0, err
    import pyogrio
    info = pyogrio.read_dataframe(tmp_path / "out.gpkg", layer="run_info")
    row = dict(zip(info["key"], info["value"]))
    assert "tap_fee=12.5" in row["network"] and "max_branch_sites=5" in row["network"]
    assert "source_capacity_lps=S=100" in row["network"]
    assert "limits max_branch_sites=5" in row["network_result"]
