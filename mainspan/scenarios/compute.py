"""Planning the scenarios of a project, sharing the stages they have in common."""

from __future__ import annotations

import os

import numpy as np

from ..errors import DataFileError, InputError
from ..pipeline.stages import candidates_stage, price_stage, site_elevations
from .pricing import _key, combine_costs
from .results import ScenarioResult, ScenarioSet
from .tables import _link_table, _regret_matrix, _summary
from .tasks import _weights, stability_task, tree_task

__all__ = ["run_scenarios", "MAX_STABILITY_RUNS"]

class _Workbench:
    """Caches of the stages scenarios share (sites, candidates, surfaces, components)."""

    def __init__(self, say):
        self.say = say
        self.sites, self.cands, self.surfaces, self.terrain, self.land, self.elev = \
            {}, {}, {}, {}, {}, {}
        self.work = {"sites_reads": 0, "candidate_builds": 0, "terrain_pricings": 0,
                     "land_pricings": 0, "raster_opens": 0}
        self.engine = None      # dask18: large link costings in chunks on this engine

    def close(self):
        for s in self.surfaces.values():
            s.close()
        self.surfaces.clear()

    # sites ---------------------------------------------------------------
    def get_sites(self, path, read_kw):
        from ..sites.read import read_sites

        k = _key(path, read_kw)
        if k not in self.sites:
            self.say("sites", 0, 1)
            self.sites[k] = read_sites(path, **read_kw)
            self.work["sites_reads"] += 1
        return k, self.sites[k]

    # candidates ----------------------------------------------------------
    def get_candidates(self, sites_key, sites, plan):
        opts = {n: plan[n] for n in ("candidates", "k", "max_link_m", "max_complete_nodes")}
        k = _key(sites_key, dict(method=opts["candidates"], k=opts["k"],
                                 max_link_m=opts["max_link_m"],
                                 max_complete_nodes=opts["max_complete_nodes"]))
        if k not in self.cands:
            self.say("candidates", 0, 1)
            self.cands[k] = candidates_stage(sites, opts)
            self.work["candidate_builds"] += 1
        return k, self.cands[k]

    # rasters -------------------------------------------------------------
    def surface(self, path, *, crs, raster_crs, name):
        from ..ground.surfaces import open_surface

        k = _key(os.fspath(path), crs.to_wkt(), raster_crs, name)
        if k not in self.surfaces:
            self.surfaces[k] = open_surface(path, working_crs=crs, raster_crs=raster_crs,
                                            name=name)
            self.work["raster_opens"] += 1
        return self.surfaces[k]

    def terrain_parts(self, edge_key, xy, edges, sites, plan, weights):
        """Terrain components of *edges* (priced once per terrain setting)."""
        from ..ground.costs import CostWeights

        terrain = plan.get("terrain")
        opts = dict(terrain=None if terrain is None else os.fspath(terrain),
                    raster_crs=plan.get("raster_crs"), spacing=plan.get("sample_spacing_m"),
                    on_nodata=plan.get("on_nodata", "barrier"),
                    steep=weights.steep_slope_pct if terrain is not None else None)
        k = _key(edge_key, opts)
        if k not in self.terrain:
            surf = None
            if terrain is not None:
                self.say("terrain", 0, 1)
                surf = self.surface(terrain, crs=sites.crs, raster_crs=opts["raster_crs"],
                                    name="terrain")
                self.work["terrain_pricings"] += 1
            self.terrain[k] = price_stage(     # dask18: tile-aligned chunks on the engine
                sites, edges, {**_NO_LAND, "on_nodata": opts["on_nodata"],
                               "raster_crs": opts["raster_crs"]},
                weights=CostWeights(length=0.0, land=0.0, steep_slope_pct=opts["steep"]),
                terrain_surface=surf, sample_spacing_m=opts["spacing"], refuse_negative=False,
                engine=self.engine)
        return self.terrain[k]

    def land_parts(self, edge_key, xy, edges, sites, plan):
        """Land-cost components of *edges* (priced once per land-cost setting)."""
        from ..ground.costs import CostWeights

        land = plan.get("land_cost")
        named = isinstance(land, dict)
        paths = None if land is None else (
            {n: os.fspath(p) for n, p in land.items()} if named else os.fspath(land))
        opts = dict(land=paths, expr=plan.get("cost_expression"),
                    classes=plan.get("class_costs"), raster_crs=plan.get("raster_crs"),
                    on_nodata=plan.get("on_nodata", "barrier"))
        k = _key(edge_key, opts)
        if k not in self.land:
            src = None
            if land is not None:
                self.say("land cost", 0, 1)
                items = paths.items() if named else [("land_cost", paths)]
                opened = {n: self.surface(p, crs=sites.crs, raster_crs=opts["raster_crs"],
                                          name=n) for n, p in items}
                src = opened if named else opened["land_cost"]
                self.work["land_pricings"] += 1
            self.land[k] = price_stage(        # dask18: tile-aligned chunks on the engine
                sites, edges, {"cost_expression": opts["expr"], "class_costs": opts["classes"],
                               "on_nodata": opts["on_nodata"], "raster_crs": opts["raster_crs"]},
                weights=CostWeights(length=0.0, land=1.0), land_cost=src, engine=self.engine)
        return self.land[k]

    def elevations(self, sites_key, sites, plan):
        terrain = plan.get("terrain")
        if terrain is None:
            return np.full(sites.n, np.nan)
        k = _key(sites_key, os.fspath(terrain), plan.get("raster_crs"))
        if k not in self.elev:
            surf = self.surface(terrain, crs=sites.crs, raster_crs=plan.get("raster_crs"),
                                name="terrain")
            self.elev[k] = surf.sample(sites.xy)
        return self.elev[k].copy()


# ------------------------------------------------------------------------------ layouts
#: The land options switched off, to price the terrain components alone.
_NO_LAND = {"cost_expression": None, "class_costs": None}


def _node_elevations(bench, sites_key, sites, plan):
    """Node elevations as plan_layout sets them (DEM, or the sites' Z when asked)."""
    dem = bench.elevations(sites_key, sites, plan) if plan["terrain"] is not None else None
    return site_elevations(sites, dem, use_site_z=plan["use_site_z"])



#: Most perturbed runs per scenario (--stability): shares are then known to about 0.1 %.
MAX_STABILITY_RUNS = 1000


# ------------------------------------------------------------------------------ run
def run_scenarios(project, *, names=None, progress=None, stability_runs=0, perturb_pct=10.0,
                  seed=0, engine=None):
    """Plan the base and the scenarios of a project, sharing work between them.

    Parameters
    ----------
    project : Project or path
        From :func:`mainspan.settings.project.load_project`, or the TOML path.
    names : sequence of str, optional
        Scenarios to run (default: all); the base always runs first.
    progress : callable, optional
        ``progress(stage, done, total)``.
    stability_runs : int, default=0
        Perturbed runs per scenario (see the module notes); 0 switches them off.
    perturb_pct : float, default=10.0
        Half-width in percent of the uniform land-cost factor.
    seed : int, default=0
    engine : mainspan.execution.Engine, optional
        Where the trees and the stability runs run (one task each); default
        :func:`mainspan.execution.current` (embedded unless set).  The
        result is the same, byte for byte, on every engine.

    Returns
    -------
    ScenarioSet

    Raises
    ------
    InputError
        An unknown scenario name, bad settings in any scenario.
    """
    from ..settings.project import Project, load_project

    if not isinstance(project, Project):
        project = load_project(project)
    if isinstance(stability_runs, bool) or not isinstance(stability_runs, (int, np.integer)) \
            or not 0 <= stability_runs <= MAX_STABILITY_RUNS:
        raise InputError(f"stability runs (--stability) must be an integer from 0 to "
                         f"{MAX_STABILITY_RUNS}; got {stability_runs!r}")
    if not (isinstance(perturb_pct, (int, float)) and 0 <= perturb_pct < 100):
        raise InputError(f"perturb_pct (--perturb-pct) must be a percentage in [0, 100); got "
                         f"{perturb_pct!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise InputError(f"seed (--seed) must be an integer >= 0; got {seed!r}")
    wanted = list(project.scenarios) if names is None else [n for n in names if n != "base"]
    order = ["base", *dict.fromkeys(wanted)]
    checked = {}
    for name in order:     # every scenario's settings checked before any work
        try:
            checked[name] = _checked_settings(project, name)
        except (InputError, DataFileError) as exc:
            exc.args = (f"scenario {name!r}: {exc}",) + exc.args[1:]
            raise
    say = progress or (lambda *a: None)
    bench = _Workbench(say)
    # --- dask18: shared stages here; trees and stability runs as tasks of the engine ---
    from ..execution import current

    eng = engine if engine is not None else current()
    bench.engine = eng
    try:
        jobs = {}
        for name in order:
            try:
                jobs[name] = _prepare(project, name, checked[name], bench, say)
            except (InputError, DataFileError) as exc:   # keep the class, name the scenario
                exc.args = (f"scenario {name!r}: {exc}",) + exc.args[1:]
                raise
        results = _grow_scenarios(eng, bench, order, jobs, say)
        if stability_runs:
            _stability_runs(eng, bench, order, jobs, results, say, int(stability_runs),
                            float(perturb_pct), int(seed))
        regret = _regret_matrix(bench, order, results)
    finally:
        bench.close()
        eng.release()
    # --- end dask18 ---
    links, links_xy, n_none = _link_table(order, results)
    summary = _summary(order, results, regret, n_none)
    crs = results["base"].layout.crs
    return ScenarioSet(order, results, summary, regret, links, links_xy, crs, dict(bench.work),
                       int(stability_runs), float(perturb_pct), int(seed))


def _checked_settings(project, name):
    """The merged settings of scenario *name*, checked with the settings schema."""
    from ..settings import PlanSettings

    where = f"project {project.path!r}" + ("" if name == "base" else f" [scenarios.{name}]")
    return PlanSettings.from_sections(project.settings_for(name),
                                      lambda sec, key: f"{where} [{sec}] {key}")


# --- dask18: the task split (mainspan.scenarios.tasks holds the tasks) ---
def _prepare(project, name, ps, bench, say):
    """The shared stages of scenario *name* (sites, candidates, link costs, elevations)."""
    settings = ps.sections
    desc = "" if name == "base" else project.scenarios[name].get("description", "")
    path, read_kw, plan = ps.sites_path, ps.read_kwargs(), ps.resolved()
    weights = _weights(plan)
    # --- route14: routes are not shared stages yet: refuse rather than plan straight silently ---
    from ..pipeline.routing import refuse_in_scenarios
    refuse_in_scenarios(plan, name)
    # --- end route14 ---
    sk, sites = bench.get_sites(path, read_kw)
    ck, cands = bench.get_candidates(sk, sites, plan)
    terr = bench.terrain_parts(ck, sites.xy, cands.edges, sites, plan, weights)
    land = bench.land_parts(ck, sites.xy, cands.edges, sites, plan)
    costs = combine_costs(terr, land, weights)
    elev = _node_elevations(bench, sk, sites, plan)
    return dict(settings=settings, desc=desc, plan=plan, weights=weights, sk=sk, sites=sites,
                ck=ck, cands=cands, terr=terr, land=land, costs=costs, elev=elev)


def _terrain_for(eng, bench, job):
    """The terrain raster as a task receives it: open here, or a spec workers open."""
    from ..execution.worker import surface_spec

    plan, sites = job["plan"], job["sites"]
    if plan.get("terrain") is None:
        return None
    if eng.local:
        return bench.surface(plan["terrain"], crs=sites.crs, raster_crs=plan.get("raster_crs"),
                             name="terrain")
    return surface_spec(plan["terrain"], crs=sites.crs, raster_crs=plan.get("raster_crs"),
                        name="terrain")


def _grow_scenarios(eng, bench, order, jobs, say):
    """One task per scenario: tree, certificate, design; results in scenario order."""
    for name in order:
        say(f"tree {name}", 0, 1)
    sh = eng.share
    items = [(name, j["desc"], sh(j["sites"]), sh(j["cands"]), sh(j["costs"]), j["elev"],
              j["plan"], _terrain_for(eng, bench, j)) for name, j in
             ((n, jobs[n]) for n in order)]
    out = eng.map(tree_task, items, stage="trees", say=say)
    results = {}
    for name, (lay, root_idx) in zip(order, out):
        j = jobs[name]
        # a layout made on a worker carries copies: point it back at the shared objects so
        # scenarios that share sites or candidates are seen to share them
        lay.sites, lay.candidates, lay.costs = j["sites"], j["cands"], j["costs"]
        j["root_idx"] = root_idx
        results[name] = ScenarioResult(name, j["desc"], j["settings"], lay, j["weights"],
                                       keys={"sites": j["sk"], "candidates": j["ck"],
                                             "plan": j["plan"]})
    return results


def _run_batches(runs, n_scen, eng):
    """Run numbers per task: tenths of a scenario's runs embedded (a progress step each);
    about four tasks per worker on Dask, whose overhead per task (tens of ms, see
    benchmarks/bench_dask.py) outweighs one run of a small scenario."""
    per = -(-runs // 10) if eng.local else -(-runs // max(1, -(-4 * eng.n_workers // n_scen)))
    return [range(a, min(a + per, runs)) for a in range(0, runs, per)]


def _stability_runs(eng, bench, order, jobs, results, say, runs, pct, seed):
    """Perturbed runs of every scenario in batches of runs, one task each; each run draws
    from its own stream, so the batching changes no result."""
    sh = eng.share
    items, batches = [], _run_batches(runs, len(order), eng)
    for name in order:
        j = jobs[name]
        common = (sh(j["sites"]), sh(j["cands"].edges), sh(j["terr"]), sh(j["land"]),
                  j["weights"], sh(j["elev"]), j["root_idx"], j["plan"],
                  _terrain_for(eng, bench, j))
        items += [(name, b, seed, pct, *common) for b in batches]
    stage = "stability" if len(order) == 1 else f"stability ({len(order)} scenarios)"
    say(stage, 0, len(items))
    out = eng.map(stability_task, items, stage=stage, say=say)
    k = len(batches)
    for s, name in enumerate(order):
        count = np.zeros(len(jobs[name]["cands"].edges), dtype=np.int64)
        for c in out[s * k:(s + 1) * k]:
            count += c
        res = results[name]
        res.stability = count / float(runs)
        res.runs = runs
        res.layout.links["stability"] = res.stability[res.layout.links["candidate_index"]]
# --- end dask18 ---
