"""Execution on Dask: the same bytes embedded, on local workers and on a real cluster.

The cluster is a real ``dask scheduler`` and two ``dask worker`` processes on
127.0.0.1 (free ports, bounded waits, always stopped).  Outside references:
networkx's minimum spanning tree (a stability run's tree is the minimum tree
of its perturbed costs) and Dask's own client (the workers are really there
and ran the tasks).
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import time

import networkx as nx
import numpy as np
import pytest

from conftest import run_cli

distributed = pytest.importorskip("distributed")

BOOT_S = 90.0       # bound on starting the scheduler and two workers on a busy machine


def _free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _stop(procs):
    for p in procs:
        if p.poll() is None:
            p.terminate()
    for p in procs:
        try:
            p.wait(timeout=15)
        except subprocess.TimeoutExpired:
            p.kill()
            p.wait(timeout=15)


@pytest.fixture(scope="module")
def cluster(tmp_path_factory):
    """``tcp://127.0.0.1:PORT`` of a scheduler with two single-threaded workers."""
    d = tmp_path_factory.mktemp("dask")
    dask_cli = os.path.join(os.path.dirname(sys.executable), "dask")
    port = _free_port()
    addr = f"tcp://127.0.0.1:{port}"
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(
        [os.path.dirname(os.path.dirname(os.path.abspath(__file__))),
         os.environ.get("PYTHONPATH", "")]))
    log = open(d / "dask.log", "w")
    procs = [subprocess.Popen([dask_cli, "scheduler", "--host", "127.0.0.1", "--port", str(port),
                               "--no-dashboard"], env=env, stdout=log, stderr=log)]
    try:
        for i in range(2):
            procs.append(subprocess.Popen(
                [dask_cli, "worker", addr, "--nthreads", "1", "--nworkers", "1",
                 "--no-dashboard", "--no-nanny", "--local-directory", str(d / f"w{i}"),
                 "--host", "127.0.0.1"], env=env, stdout=log, stderr=log))
        with distributed.Client(addr, timeout=f"{BOOT_S}s") as c:
            c.wait_for_workers(2, timeout=BOOT_S)
        yield addr
    finally:
        _stop(procs[1:])
        _stop(procs[:1])
        log.close()


@pytest.fixture
def project(tmp_path):
    """The scenario tests' 40 sites and rasters, with two scenarios (base and a strip)."""
    import test_scenarios as ts

    path = ts.project.__wrapped__(tmp_path)
    text = open(path).read()
    keep = text[:text.index("[scenarios.same]")] + text[text.index("[scenarios.strip]"):
                                                        text.index("[scenarios.plain]")]
    open(path, "w").write(keep)
    return path


def _compare(project, out, capsys, *extra):
    code, stdout, err = run_cli(["compare", project, "--out", out, "--stability", "3",
                                 "--perturb-pct", "15", "--seed", "7", *extra], capsys)
    assert code == 0, err
    return stdout.replace(os.path.basename(out), "OUT"), err


def test_compare_same_bytes_embedded_local_workers_and_cluster(project, cluster, tmp_path,
                                                               capsys):
    outs = {k: str(tmp_path / f"{k}.gpkg") for k in ("embedded", "local", "cluster")}
    text_e, _ = _compare(project, outs["embedded"], capsys, "--quiet")
    text_l, err_l = _compare(project, outs["local"], capsys, "--workers", "2")
    text_c, err_c = _compare(project, outs["cluster"], capsys, "--cluster", cluster)
    ref = open(outs["embedded"], "rb").read()
    assert open(outs["local"], "rb").read() == ref
    assert open(outs["cluster"], "rb").read() == ref
    assert text_l == text_e and text_c == text_e
    # the progress of the cluster's tasks reached the progress line, to the last task
    assert "running on 2 local Dask worker processes" in err_l
    assert f"running on Dask cluster at {cluster} (2 workers)" in err_c
    last = [ln for ln in err_c.splitlines() if ln.startswith("[mainspan] stability")][-1]
    done, total = last.split()[-1].split("/")
    assert done == total and int(total) >= 2
    # the cluster's workers really ran tasks (Dask's own record of task streams)
    with distributed.Client(cluster, timeout="30s") as c:
        ran = c.run(lambda dask_worker: len(dask_worker.state.log))
    assert len(ran) == 2 and all(n > 0 for n in ran.values())


def test_stability_task_is_the_minimum_tree_of_its_perturbed_costs(project):
    """A stability run's tree is the minimum spanning tree (networkx) of its own costs."""
    from mainspan.scenarios import combine_costs
    from mainspan.scenarios.compute import _checked_settings, _prepare, _Workbench
    from mainspan.scenarios.tasks import stability_rng, stability_task
    from mainspan.settings.project import load_project

    proj = load_project(project)
    bench = _Workbench(lambda *a: None)
    try:
        job = _prepare(proj, "base", _checked_settings(proj, "base"), bench, lambda *a: None)
        count = stability_task("base", (5,), 7, 15.0, job["sites"], job["cands"].edges,
                               job["terr"], job["land"], job["weights"], job["elev"],
                               job["sites"].default_roots(), job["plan"], None)
    finally:
        bench.close()
    f = stability_rng(7, "base", 5).uniform(0.85, 1.15, len(job["cands"].edges))
    w = combine_costs(job["terr"], job["land"], job["weights"], land_factor=f).total
    g = nx.Graph()
    for i, (a, b) in enumerate(job["cands"].edges):
        if np.isfinite(w[i]):
            g.add_edge(int(a), int(b), weight=float(w[i]))
    mst = nx.minimum_spanning_tree(g, algorithm="kruskal").size(weight="weight")
    links = np.flatnonzero(count)
    assert count.max() == 1 and len(links) == job["sites"].n - 1
    assert w[links].sum() == pytest.approx(mst, rel=1e-12)
    # the run's own stream: the same run draws the same factors, another run others
    assert np.array_equal(f, stability_rng(7, "base", 5).uniform(0.85, 1.15, len(f)))
    assert not np.array_equal(f, stability_rng(7, "base", 4).uniform(0.85, 1.15, len(f)))


def test_unreachable_cluster_is_one_line_naming_the_address(project, tmp_path, capsys):
    addr = f"tcp://127.0.0.1:{_free_port()}"       # nothing listens there
    t0 = time.monotonic()
    code, out, err = run_cli(["compare", project, "--cluster", addr, "--connect-timeout-s",
                              "1", "--quiet"], capsys)
    assert code == 2 and err.count("\n") == 1, err
    assert addr in err and "--cluster" in err and "dask scheduler" in err
    assert time.monotonic() - t0 < 60          # a short timeout, not Dask's default 30 s x n


def test_workers_and_cluster_exclude_each_other(project, capsys):
    code, _, err = run_cli(["compare", project, "--workers", "2", "--cluster",
                            "tcp://127.0.0.1:1", "--quiet"], capsys)
    assert code == 2 and err.count("\n") == 1 and "--workers" in err and "--cluster" in err
    code, _, err = run_cli(["compare", project, "--workers", "0", "--quiet"], capsys)
    assert code == 2 and err.count("\n") == 1 and "--workers" in err


def test_missing_dask_names_the_pip_command(monkeypatch):
    from mainspan.errors import InputError
    from mainspan.execution import Embedded, open_engine

    assert isinstance(open_engine(), Embedded)
    monkeypatch.setitem(sys.modules, "distributed", None)     # as if not installed
    with pytest.raises(InputError, match=r'pip install "dask\[distributed\]"') as e:
        open_engine(workers=2)
    assert "\n" not in str(e.value) and "--workers" in str(e.value)


# ------------------------------------------------------------------ link costing in chunks
def _costing_inputs(tmp_path):
    """40 sites of the scenario project, a DEM read in 8 x 8 tiles with a nodata hole."""
    import rasterio
    from rasterio.transform import from_origin

    from mainspan.graph.candidates import build_candidates
    from mainspan.ground.costs import CostWeights
    from mainspan.ground.surfaces import open_surface
    from mainspan.sites.read import read_sites

    import test_scenarios as ts

    proj = ts.project.__wrapped__(tmp_path)
    d = os.path.dirname(proj)
    r, c = np.mgrid[0:ts.NCELL, 0:ts.NCELL]
    dem = 200 + 25 * np.sin(r / 7.0) * np.cos(c / 9.0)
    dem[20:26, 30:34] = -9999.0                                    # a hole: impassable links
    path = os.path.join(d, "dem_hole.tif")
    with rasterio.open(path, "w", driver="GTiff", height=ts.NCELL, width=ts.NCELL, count=1,
                       dtype="float64", crs="EPSG:32633", nodata=-9999.0,
                       transform=from_origin(ts.X0, ts.Y0 + ts.NCELL * ts.CELL, ts.CELL,
                                             ts.CELL)) as ds:
        ds.write(dem, 1)
    sites = read_sites(os.path.join(d, "sites.gpkg"), layer="pts", id_field="id")
    cands = build_candidates(sites.xy, "delaunay")
    ter = open_surface(path, working_crs=sites.crs, max_memory_mb=0.004)   # tiled reading
    kw = dict(working_crs=sites.crs, terrain=ter, land_cost={"base": os.path.join(d,
              "land_a.tif")}, weights=CostWeights(climb=3.0), node_id=sites.node_id)
    return sites, cands, ter, kw, proj


def _same_costs(a, b):
    assert list(a.components) == list(b.components)
    for k in a.components:
        np.testing.assert_array_equal(a.components[k], b.components[k], err_msg=k)
    np.testing.assert_array_equal(a.total, b.total)
    np.testing.assert_array_equal(a.reason_code, b.reason_code)
    assert a.reason_labels == b.reason_labels and a.reasons == b.reasons


def test_chunks_are_tile_aligned_and_price_like_one_call(tmp_path):
    from mainspan.execution.costing import plan_chunks, price_links
    from mainspan.ground.costs import price_links as price_once

    sites, cands, ter, kw, _ = _costing_inputs(tmp_path)
    try:
        assert ter.tile_shape == (8, 8) and len(cands.edges) > 100
        parts = plan_chunks(sites.xy, cands.edges, ter, 10)
        assert len(parts) > 5
        # a partition of the links; each chunk holds whole tiles, in tile order
        np.testing.assert_array_equal(np.sort(np.concatenate(parts)),
                                      np.arange(len(cands.edges)))
        mid = 0.5 * (sites.xy[cands.edges[:, 0]] + sites.xy[cands.edges[:, 1]])
        col, row = ter.to_index(mid)
        tile = (row // 8).astype(int) * 6 + (col // 8).astype(int)
        spans = [(tile[p].min(), tile[p].max()) for p in parts]
        assert all(hi < lo2 for (_, hi), (lo2, _) in zip(spans, spans[1:]))
        one = price_once(sites.xy, cands.edges, **kw)
        assert one.n_impassable > 0                       # the hole is crossed
        _same_costs(price_links(sites.xy, cands.edges, chunk_links=10, **kw), one)
    finally:
        ter.close()


def test_chunked_costing_and_plan_on_the_cluster(cluster, tmp_path, capsys):
    """Workers open the rasters from their paths and price their chunks: same values, and
    ``plan --cluster`` writes the same bytes as the embedded plan."""
    from mainspan.execution import open_engine
    from mainspan.execution.costing import price_links
    from mainspan.ground.costs import price_links as price_once

    sites, cands, ter, kw, proj = _costing_inputs(tmp_path)
    try:
        one = price_once(sites.xy, cands.edges, **kw)
        with open_engine(cluster=cluster) as eng:
            assert not eng.local
            _same_costs(price_links(sites.xy, cands.edges, chunk_links=10, engine=eng, **kw),
                        one)
    finally:
        ter.close()
    a, b = tmp_path / "a.gpkg", tmp_path / "b.gpkg"
    assert run_cli(["plan", proj, "--output", a, "--quiet"], capsys)[0] == 0
    code, _, err = run_cli(["plan", proj, "--output", b, "--quiet", "--cluster", cluster,
                            "--chunk-links", "15"], capsys)
    assert code == 0, err
    assert open(a, "rb").read() == open(b, "rb").read()
