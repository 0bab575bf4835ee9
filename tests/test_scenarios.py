"""Scenario runs: shared work, stable link ids, regret matrix, stability, output, CLI.

Outside references: networkx's minimum spanning tree (weights of optimal
trees), the order-invariance of minimum spanning trees (Kleinberg & Tardos,
*Algorithm Design*, 2006, ch. 4: the cut property only compares link costs),
and rasterio (counting dataset opens and window reads).
"""

from __future__ import annotations

import os
import textwrap

import networkx as nx
import numpy as np
import pytest

from conftest import run_cli, write_points

X0, Y0 = 512000.0, 5120000.0
CELL = 50.0
NCELL = 48


def _write_raster(path, arr, nodata=None):
    import rasterio
    from rasterio.transform import from_origin

    with rasterio.open(path, "w", driver="GTiff", height=arr.shape[0], width=arr.shape[1],
                       count=1, dtype="float64", crs="EPSG:32633", nodata=nodata,
                       transform=from_origin(X0, Y0 + NCELL * CELL, CELL, CELL)) as ds:
        ds.write(arr.astype("float64"), 1)
    return str(path)


@pytest.fixture
def project(tmp_path):
    """40 sites, a hilly DEM, two land-cost rasters, and a project with scenarios."""
    rng = np.random.default_rng(11)
    xy = rng.uniform(200, NCELL * CELL - 200, (40, 2)) + [X0, Y0]
    ids = [f"N{i:02d}" for i in range(40)]
    write_points(tmp_path / "sites.gpkg", xy, layer="pts",
                 fields={"id": ids, "role": ["source"] + ["demand"] * 39,
                         "q_lps": np.r_[0.0, np.round(rng.uniform(0.2, 1.0, 39), 2)]})
    r, c = np.mgrid[0:NCELL, 0:NCELL]
    dem = 200 + 25 * np.sin(r / 7.0) * np.cos(c / 9.0) + 0.4 * c
    land_a = 5 + 20 * (np.hypot(r - 20, c - 30) < 9) + 0.1 * r      # a costly patch
    land_b = land_a + 60 * ((c > 14) & (c < 19))                    # plus a costly strip
    _write_raster(tmp_path / "dem.tif", dem)
    _write_raster(tmp_path / "land_a.tif", land_a)
    _write_raster(tmp_path / "land_b.tif", land_b)
    toml = tmp_path / "proj.toml"
    toml.write_text(textwrap.dedent("""
        [sites]
        path = "sites.gpkg"
        layer = "pts"
        id_field = "id"
        role_field = "role"
        demand_field = "q_lps"

        [rasters]
        terrain = "dem.tif"

        [rasters.land_cost]
        base = "land_a.tif"

        [costs]
        length = 10.0
        land = 1.0
        climb = 8.0
        steep_slope_pct = 8.0
        steep_per_m = 5.0

        [candidates]
        method = "delaunay"

        [scenarios.same]
        description = "identical to the base"

        [scenarios.scaled]
        description = "every price x3 plus a fixed cost per link (order-preserving)"
        costs = { length = 30.0, land = 3.0, climb = 24.0, steep_per_m = 15.0, fixed = 500.0 }

        [scenarios.scaled_expr]
        description = "x3 through the cost expression and the other weights"
        costs = { length = 30.0, climb = 24.0, steep_per_m = 15.0 }
        rasters = { cost_expression = "3 * base" }

        [scenarios.strip]
        description = "the costly strip raster"
        rasters = { land_cost = { base = "land_b.tif" } }

        [scenarios.plain]
        description = "length only"
        costs = { land = 0.0, climb = 0.0, steep_per_m = 0.0 }
    """))
    return str(toml)


@pytest.fixture
def sset(project):
    from mainspan.scenarios import run_scenarios

    return run_scenarios(project, stability_runs=4, perturb_pct=15.0, seed=3)


def _nx_mst_weight(layout):
    """Minimum spanning tree weight of the passable candidates, by networkx."""
    c = layout.costs
    g = nx.Graph()
    g.add_nodes_from(range(layout.n_nodes))
    for (a, b), w in zip(layout.candidates.edges[c.passable], c.total[c.passable]):
        g.add_edge(int(a), int(b), weight=float(w))
    return nx.minimum_spanning_tree(g, algorithm="kruskal").size(weight="weight")


def test_identical_scenario_has_empty_difference(sset):
    from mainspan.scenarios import difference

    added, removed = difference(sset["base"], sset["same"])
    assert added.size == 0 and removed.size == 0
    i = sset.names.index("same")
    assert sset.summary["jaccard_base"][i] == 1.0
    assert sset.summary["total_cost"][i] == sset.summary["total_cost"][0]


def test_difference_counts_changed_links(sset):
    from mainspan.scenarios import difference

    added, removed = difference(sset["base"], sset["plain"])
    base = set(sset["base"].links["candidate_index"].tolist())
    plain = set(sset["plain"].links["candidate_index"].tolist())
    assert set(added.tolist()) == plain - base and set(removed.tolist()) == base - plain
    assert len(added) == len(removed) > 0        # both are spanning trees of the same sites


@pytest.mark.parametrize("name", ["scaled", "scaled_expr"])
def test_order_preserving_transform_keeps_the_tree(sset, name):
    # A minimum spanning tree depends only on the order of the link costs (Kleinberg &
    # Tardos, Algorithm Design, ch. 4): costs x3 (+ a constant per link) give the same tree.
    base, other = sset["base"], sset[name]
    tb, to = sset.results["base"].layout.costs.total, other.costs.total
    fixed = 500.0 if name == "scaled" else 0.0
    np.testing.assert_allclose(to[np.isfinite(to)], 3 * tb[np.isfinite(tb)] + fixed, rtol=1e-9)
    np.testing.assert_array_equal(base.tree.parent, other.tree.parent)
    np.testing.assert_array_equal(np.sort(base.links["candidate_index"]),
                                  np.sort(other.links["candidate_index"]))


def test_regret_diagonal_is_column_minimum_and_optimal(sset):
    r = sset.regret
    assert np.isfinite(r).all()
    for j, name in enumerate(sset.names):
        assert r[j, j] <= r[:, j].min() * (1 + 1e-12)
        # the diagonal is the weight of a minimum spanning tree (networkx, Kruskal)
        assert r[j, j] == pytest.approx(_nx_mst_weight(sset[name]), rel=1e-9)
        assert r[j, j] == pytest.approx(sset[name].total("cost"), rel=1e-12)
    # a layout that is not optimal under another scenario's costs shows a positive regret
    i, j = sset.names.index("plain"), sset.names.index("base")
    assert r[i, j] > r[j, j]
    cols = [f"cost_under_{n}" for n in sset.names]
    np.testing.assert_array_equal(np.column_stack([sset.summary[c] for c in cols]), r)


def test_matches_plan_layout_exactly(sset, project):
    from mainspan.pipeline.layout import plan_layout
    from mainspan.settings.project import load_project, plan_kwargs
    from mainspan.sites.read import read_sites

    proj = load_project(project)
    for name in ("base", "strip", "scaled_expr"):
        path, read_kw, plan, _ = plan_kwargs(proj.settings_for(name))
        ref = plan_layout(read_sites(path, **read_kw), **plan)
        mine = sset[name]
        np.testing.assert_array_equal(ref.costs.total, mine.costs.total)
        for k, v in ref.links.items():
            np.testing.assert_array_equal(np.asarray(v), np.asarray(mine.links[k]), err_msg=k)
        for k, v in ref.nodes.items():
            np.testing.assert_array_equal(np.asarray(v), np.asarray(mine.nodes[k]), err_msg=k)


def test_shared_work_counts(sset):
    # six scenarios: one sites read, one candidate set, one terrain pricing (all share the
    # DEM and the slope threshold), three land pricings (land_a, 3*base, land_b)
    assert sset.work["sites_reads"] == 1
    assert sset.work["candidate_builds"] == 1
    assert sset.work["terrain_pricings"] == 1
    assert sset.work["land_pricings"] == 3
    assert sset.work["raster_opens"] == 3


def test_changed_raster_is_the_only_one_sampled(project, monkeypatch):
    import rasterio

    import mainspan.ground.surfaces as surfaces
    from mainspan.pipeline.layout import plan_layout
    from mainspan.settings.project import load_project, plan_kwargs
    from mainspan.scenarios import run_scenarios
    from mainspan.sites.read import read_sites

    opens, reads = {}, {}
    real_open, real_read = rasterio.open, surfaces.Surface._read_window

    def counting_open(path, *a, **kw):
        key = os.path.basename(os.fspath(path))
        opens[key] = opens.get(key, 0) + 1
        return real_open(path, *a, **kw)

    def counting_read(self, *a, **kw):
        key = os.path.basename(self.path)
        reads[key] = reads.get(key, 0) + 1
        return real_read(self, *a, **kw)

    monkeypatch.setattr(rasterio, "open", counting_open)
    monkeypatch.setattr(surfaces.Surface, "_read_window", counting_read)

    run_scenarios(project, names=[])
    alone = (dict(opens), dict(reads))
    opens.clear(), reads.clear()
    run_scenarios(project, names=["strip"])
    # the base alone opens and reads the DEM and land_a once each (they fit in memory)
    assert alone == ({"dem.tif": 1, "land_a.tif": 1}, {"dem.tif": 1, "land_a.tif": 1})
    # adding the scenario with one changed raster samples only that raster
    assert opens == {"dem.tif": 1, "land_a.tif": 1, "land_b.tif": 1}
    assert reads == {"dem.tif": 1, "land_a.tif": 1, "land_b.tif": 1}

    # the counters do see repeated work: planning both one by one reads the DEM again
    opens.clear(), reads.clear()
    proj = load_project(project)
    for name in ("base", "strip"):
        path, read_kw, plan, _ = plan_kwargs(proj.settings_for(name))
        plan_layout(read_sites(path, **read_kw), **plan)
    # (one DEM open per plan_layout call: two calls, two opens; the shared run opened it once)
    assert opens["dem.tif"] == 2 and reads["dem.tif"] == 2
    assert reads["land_a.tif"] == 1 and reads["land_b.tif"] == 1


def test_stability(sset, project):
    from mainspan.scenarios import run_scenarios

    for name in sset.names:
        lay = sset[name]
        st = lay.links["stability"]
        assert st.shape == (lay.n_links,) and ((st >= 0) & (st <= 1)).all()
        assert sset.results[name].runs == 4
        # every run is a spanning tree: shares over all candidates sum to n - 1
        assert sset.results[name].stability.sum() == pytest.approx(lay.n_nodes - 1)
    # seeded: the same seed gives the same shares; no perturbation gives certainty
    again = run_scenarios(project, names=["strip"], stability_runs=4, perturb_pct=15.0, seed=3)
    np.testing.assert_array_equal(again.results["strip"].stability,
                                  sset.results["strip"].stability)
    flat = run_scenarios(project, names=[], stability_runs=3, perturb_pct=0.0)
    assert (flat["base"].links["stability"] == 1.0).all()
    assert flat.results["base"].stability.sum() == flat["base"].n_links


def test_scenario_links_table(sset):
    t = sset.links
    k = len(sset.names)
    base_cands = sset["base"].candidates.edges
    # few candidates: every candidate is listed, with its index in the candidate set
    assert len(t["candidate_index"]) == len(base_cands)
    assert (t["candidate_index"] >= 0).all()
    np.testing.assert_array_equal(np.sort(t["candidate_index"]), np.arange(len(base_cands)))
    n = t["n_scenarios"]
    assert ((t["presence"] == "all") == (n == k)).all()
    assert ((t["presence"] == "none") == (n == 0)).all()
    for i in np.flatnonzero(n > 0)[:20]:
        names = t["scenarios"][i].split(",")
        assert len(names) == n[i]
        for s in names:
            assert t["candidate_index"][i] in set(sset[s].links["candidate_index"].tolist())
    assert np.nanmax(t["stability"]) <= 1.0 and np.nanmin(t["stability"]) >= 0.0
    assert sset.summary["n_candidates_in_none"][0] == int((n == 0).sum())


def test_write_scenarios(sset, tmp_path):
    import pyogrio

    from mainspan.errors import OverwriteError
    from mainspan.scenarios import write_scenarios

    out = tmp_path / "cmp.gpkg"
    write_scenarios(sset, out)
    layers = set(pyogrio.list_layers(out)[:, 0])
    for name in sset.names:
        assert {f"links_{name}", f"nodes_{name}", f"run_info_{name}"} <= layers
    assert {"scenario_links", "scenario_summary"} <= layers
    summ = pyogrio.read_dataframe(out, layer="scenario_summary")
    assert list(summ["scenario"]) == sset.names
    np.testing.assert_allclose(summ[[f"cost_under_{n}" for n in sset.names]].to_numpy(),
                               sset.regret)
    # the parts of the cost add up to the total
    parts = summ[["cost_length", "cost_land", "cost_climb", "cost_descent", "cost_steep",
                  "cost_fixed"]].sum(axis=1)
    np.testing.assert_allclose(parts, summ["total_cost"], rtol=1e-9)
    links = pyogrio.read_dataframe(out, layer="links_strip")
    assert "stability" in links.columns and "candidate_index" in links.columns
    with pytest.raises(OverwriteError):
        write_scenarios(sset, out)
    write_scenarios(sset, out, overwrite=True)


def test_report_sections(sset, tmp_path):
    from mainspan.report.html import write_report
    from mainspan.scenarios import report_sections
    from mainspan.scenarios.report import decision_sections, detail_sections, regret_table

    secs = report_sections(sset)
    assert [t for t, _ in secs] == ["Scenario comparison: the decision", "Scenario layouts",
                                    "Cost breakdown by scenario", "Scenario parameters"]
    assert secs[1][1].count("data:image/png;base64,") == 1
    path = write_report(sset["base"], tmp_path / "r.html", lead_sections=decision_sections(sset),
                        extra_sections=detail_sections(sset))
    text = open(path, encoding="utf-8").read()
    assert "Scenario layouts" in text and "layout \\ costs" in text
    # the decision comes before the base layout's own report, the parameters last
    assert text.index("the decision") < text.index("<h2>Summary</h2>") \
        < text.index("Scenario parameters")
    # the regret matrix as printed: own cost of the strip layout in bold
    own = sset.regret[sset.names.index("strip"), sset.names.index("strip")]
    assert f"<b>{own:,.0f}</b>" in text
    # no percentage between totals under different cost functions
    assert "vs base" not in text and "not a saving" in text
    # the robust layout named is the one with the least worst-case extra cost, computed here
    # directly from the regret matrix (cost of layout i under j minus j's own)
    reg = np.asarray(sset.regret, float)
    extra = reg - np.diag(reg)[None, :]
    assert np.allclose(regret_table(sset), extra, equal_nan=True)
    worst = np.nanmax(extra, axis=1)
    best = sset.names[int(np.nanargmin(worst))]
    assert f"Most robust layout: {best}</b>" in text


def test_unknown_scenario_name(project):
    from mainspan.errors import InputError
    from mainspan.scenarios import run_scenarios

    with pytest.raises(InputError, match="no scenario 'nope'"):
        run_scenarios(project, names=["nope"])
    with pytest.raises(InputError, match="--stability"):
        run_scenarios(project, stability_runs=-1)


def test_cli_compare(project, tmp_path, capsys):
    out = tmp_path / "x.gpkg"
    rep = tmp_path / "x.html"
    code, stdout, stderr = run_cli(["compare", project, "--out", out, "--report", rep,
                                    "--stability", "2", "--quiet"], capsys)
    assert code == 0, stderr
    assert stdout.splitlines()[0].split()[:2] == ["scenario", "links"]
    for name in ("base", "same", "scaled", "strip", "plain"):
        assert any(line.startswith(name + " ") for line in stdout.splitlines())
    assert out.exists() and rep.exists()
    # again without --overwrite: refused before any work, exit 2
    code, _, stderr = run_cli(["compare", project, "--out", out, "--quiet"], capsys)
    assert code == 2 and "--overwrite" in stderr


def test_cli_bad_scenario_key(project, tmp_path, capsys):
    text = open(project).read() + '\n[scenarios.broken]\ncosts = { lenght = 3.0 }\n'
    bad = tmp_path / "bad.toml"
    bad.write_text(text)
    code, stdout, stderr = run_cli(["compare", bad, "--quiet"], capsys)
    assert code == 2
    lines = stderr.strip().splitlines()
    assert len(lines) == 1 and "lenght" in lines[0] and "length" in lines[0]
    assert "Traceback" not in stderr


def test_scenario_links_large_candidate_sets_keep_used_links(project, monkeypatch):
    import mainspan.scenarios as sc

    monkeypatch.setattr(sc.tables, "ALL_CANDIDATES_MAX", 10)   # where the table is built
    s = sc.run_scenarios(project, names=["plain", "strip"])
    t = s.links
    used = np.unique(np.concatenate([s[n].links["candidate_index"] for n in s.names]))
    np.testing.assert_array_equal(np.sort(t["candidate_index"]), used)
    assert (t["n_scenarios"] > 0).all() and "none" not in set(t["presence"])
    assert s.summary["n_candidates_in_none"][0] == len(s["base"].candidates.edges) - len(used)
    assert np.isnan(t["stability"]).all()          # no stability runs were made


def test_regret_across_candidate_sets(project, tmp_path):
    from mainspan.ground.costs import CostWeights, price_links
    from mainspan.scenarios import run_scenarios

    text = open(project).read() + textwrap.dedent("""
        [scenarios.knn]
        candidates = { method = "knn", k = 5 }

        [scenarios.complete]
        candidates = { method = "complete" }

        [scenarios.merged]
        description = "a [sites] change that leaves the sites as they are"
        sites = { merge_within_m = 0.01 }
    """)
    path = tmp_path / "more.toml"
    path.write_text(text)
    s = run_scenarios(path, names=["knn", "complete", "merged"])
    assert s.work["sites_reads"] == 2 and s.work["candidate_builds"] == 4
    r = s.regret
    b, kn, co, me = (s.names.index(n) for n in ("base", "knn", "complete", "merged"))
    # equal content counts as shared: same sites, same candidates, same tree
    assert s.summary["jaccard_base"][me] == 1.0 and r[me, b] == r[b, b]
    # the knn tree priced under the base costs, re-priced by price_links directly
    lay = s["knn"]
    e = np.sort(lay.candidates.edges[lay.links["candidate_index"]], axis=1)
    w = CostWeights(length=10.0, land=1.0, climb=8.0, steep_slope_pct=8.0, steep_per_m=5.0)
    ref = price_links(lay.node_xy, e, working_crs=lay.crs, terrain=str(tmp_path / "dem.tif"),
                      land_cost={"base": str(tmp_path / "land_a.tif")}, weights=w)
    assert r[kn, b] == pytest.approx(ref.total.sum(), rel=1e-12)
    # the complete candidate set holds every tree's links, so its own tree is the cheapest
    # under its costs, and equals networkx's minimum spanning tree over all pairs
    assert r[co, co] <= r[:, co].min() * (1 + 1e-12)
    assert r[co, co] == pytest.approx(_nx_mst_weight(s["complete"]), rel=1e-9)
    assert np.isnan(s.summary["jaccard_base"][kn])       # other candidate ids: no Jaccard


def test_bad_scenario_setting_names_the_scenario(project, tmp_path):
    from mainspan.errors import DataFileError
    from mainspan.scenarios import run_scenarios

    text = open(project).read() + '\n[scenarios.flat]\nrasters = { terrain = "missing.tif" }\n'
    path = tmp_path / "flat.toml"
    path.write_text(text)
    with pytest.raises(DataFileError, match="^scenario 'flat': cannot open raster .*missing.tif"):
        run_scenarios(path, names=["flat"])


def test_designed_scenario_matches_plan_layout(project, tmp_path):
    from mainspan.pipeline.layout import plan_layout
    from mainspan.settings.project import load_project, plan_kwargs
    from mainspan.scenarios import run_scenarios
    from mainspan.sites.read import read_sites

    text = open(project).read() + '\n[scenarios.sized]\ndesign = { system = "pressure" }\n'
    path = tmp_path / "sized.toml"
    path.write_text(text)
    s = run_scenarios(path, names=["sized"])
    p, read_kw, plan, _ = plan_kwargs(load_project(path).settings_for("sized"))
    ref = plan_layout(read_sites(p, **read_kw), **plan)
    mine = s["sized"]
    assert mine.design is not None and "diameter_mm" in mine.links
    for k, v in ref.links.items():
        np.testing.assert_array_equal(np.asarray(v), np.asarray(mine.links[k]), err_msg=k)
    for k, v in ref.nodes.items():
        np.testing.assert_array_equal(np.asarray(v), np.asarray(mine.nodes[k]), err_msg=k)
    i = s.names.index("sized")
    assert s.summary["failed_checks"][i] == len(ref.design.failures)
    assert s.summary["jaccard_base"][i] == 1.0        # sizing does not move the tree
