"""Planning the scenarios of a project, sharing the stages they have in common."""

from __future__ import annotations

import os
import zlib

import numpy as np

from ..errors import DataFileError, InputError
from .pricing import _key, combine_costs
from .results import ScenarioResult, ScenarioSet
from .tables import _link_table, _regret_matrix, _summary

__all__ = ["run_scenarios", "MAX_STABILITY_RUNS"]

class _Workbench:
    """Caches of the stages scenarios share (sites, candidates, surfaces, components)."""

    def __init__(self, say):
        self.say = say
        self.sites, self.cands, self.surfaces, self.terrain, self.land, self.elev = \
            {}, {}, {}, {}, {}, {}
        self.work = {"sites_reads": 0, "candidate_builds": 0, "terrain_pricings": 0,
                     "land_pricings": 0, "raster_opens": 0}

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
        from ..graph.candidates import build_candidates

        opts = dict(method=plan.get("candidates", "delaunay"), k=plan.get("k", 8),
                    max_link_m=plan.get("max_link_m"),
                    max_complete_nodes=plan.get("max_complete_nodes", 5000))
        k = _key(sites_key, opts)
        if k not in self.cands:
            self.say("candidates", 0, 1)
            method = opts.pop("method")
            self.cands[k] = build_candidates(sites.xy, method, **opts)
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
        from ..ground.costs import CostWeights, price_links

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
            self.terrain[k] = price_links(
                xy, edges, working_crs=sites.crs, terrain=surf,
                weights=CostWeights(length=0.0, land=0.0, steep_slope_pct=opts["steep"]),
                on_nodata=opts["on_nodata"], sample_spacing_m=opts["spacing"],
                raster_crs=opts["raster_crs"])
        return self.terrain[k]

    def land_parts(self, edge_key, xy, edges, sites, plan):
        """Land-cost components of *edges* (priced once per land-cost setting)."""
        from ..ground.costs import CostWeights, price_links

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
            self.land[k] = price_links(
                xy, edges, working_crs=sites.crs, land_cost=src, cost_expression=opts["expr"],
                class_costs=opts["classes"], weights=CostWeights(length=0.0, land=1.0),
                on_nodata=opts["on_nodata"], raster_crs=opts["raster_crs"],
                node_id=sites.node_id, refuse_negative=True)
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
def _weights(plan):
    from ..ground.costs import OPTION_NAMES, CostWeights

    w = plan.get("weights")
    w = CostWeights() if w is None else (w if isinstance(w, CostWeights) else CostWeights(**w))
    if plan.get("terrain") is None and (w.climb or w.descent or w.steep_per_m):
        opt = next(OPTION_NAMES[k] for k in ("climb", "descent", "steep_per_m") if getattr(w, k))
        raise InputError(f"{opt} prices the terrain but no terrain raster was given; "
                         "pass terrain= (--terrain)")
    return w


def _node_elevations(bench, sites_key, sites, plan):
    """Node elevations as plan_layout sets them (DEM, or the sites' Z when asked)."""
    from ..pipeline.layout import site_elevations

    dem = bench.elevations(sites_key, sites, plan) if plan.get("terrain") is not None else None
    return site_elevations(sites, dem, use_site_z=plan.get("use_site_z", False))


def _grow(sites, edges, costs, elev, root_idx, plan, *, certify=True, node_order=None,
          terrain_surface=None):
    """Tree over the passable candidates: Prim (+ certificate) or the gravity arborescence."""
    from ..pipeline.layout import grow_tree

    return grow_tree(sites, edges, costs, elev, root_idx, layout=plan.get("layout", "tree"),
                     allow_forest=plan.get("allow_forest", False), design=plan.get("design"),
                     certify=certify, node_order=node_order, terrain_surface=terrain_surface,
                     sample_spacing_m=plan.get("sample_spacing_m"), system=plan.get("system"))


def _tree_links(tree):
    """Candidate indices of a tree's links, in grow order."""
    order = np.asarray(tree.order, dtype=np.int64)
    child = order[tree.parent[order] >= 0]
    return child, tree.parent[child], tree.parent_edge[child]


def _assemble(bench, sites, cands, costs, elev, plan, *, name, description):
    """A Layout from shared stages, assembled exactly as :func:`plan_layout` does."""
    from ..pipeline.layout import assemble_layout
    from ..settings import run_info_params

    system, layout_kind = plan.get("system"), plan.get("layout", "tree")
    from ..pipeline.layout import LAYOUTS
    if layout_kind not in LAYOUTS:
        raise InputError(f"[tree] layout: must be one of {', '.join(LAYOUTS)}, "
                         f"got {layout_kind!r}")
    if system not in (None, "pressure", "gravity"):
        raise InputError(f"[design] system: must be 'pressure' or 'gravity', got {system!r}")
    roots = plan.get("roots")
    root_idx = sites.index_of(roots) if roots else sites.default_roots()
    terrain = plan.get("terrain")
    surf = None
    if terrain is not None:
        surf = bench.surface(terrain, crs=sites.crs, raster_crs=plan.get("raster_crs"),
                             name="terrain")
    tree, cert, directed = _grow(sites, cands.edges, costs, elev, root_idx, plan,
                                 node_order=cands.node_order, terrain_surface=surf)
    land = plan.get("land_cost")
    land = land if isinstance(land, dict) else ({} if land is None else {"land_cost": land})
    params = {"scenario": name, "scenario_description": description,
              **run_info_params({**plan, "weights": _weights(plan)},
                                candidates_label=cands.method)}
    lay = assemble_layout(sites, cands, costs, elev, tree, cert, directed,
                          terrain_surface=surf, sample_spacing_m=plan.get("sample_spacing_m"),
                          system=system, design=plan.get("design"), params=params,
                          inputs=[("sites", sites.path), ("terrain", terrain), *land.items()])
    return lay, root_idx


def _stability(sites, edges, terrain, land, weights, elev, root_idx, plan, *, runs, pct, rng,
               terrain_surface=None, tick=None):
    """Share of *runs* perturbed trees holding each candidate link (``tick(done, runs)``)."""
    count = np.zeros(len(edges), dtype=np.int64)
    for i in range(runs):
        f = rng.uniform(1.0 - pct / 100.0, 1.0 + pct / 100.0, len(edges))
        costs = combine_costs(terrain, land, weights, land_factor=f)
        tree, _, _ = _grow(sites, edges, costs, elev, root_idx, plan, certify=False,
                           terrain_surface=terrain_surface)
        count[_tree_links(tree)[2]] += 1
        if tick is not None:
            tick(i + 1, runs)
    return count / float(runs)


#: Most perturbed runs per scenario (--stability): shares are then known to about 0.1 %.
MAX_STABILITY_RUNS = 1000


# ------------------------------------------------------------------------------ run
def run_scenarios(project, *, names=None, progress=None, stability_runs=0, perturb_pct=10.0,
                  seed=0):
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
    results = {}
    try:
        for name in order:
            try:
                results[name] = _run_one(project, name, checked[name], bench, say,
                                         stability_runs, perturb_pct, seed)
            except (InputError, DataFileError) as exc:   # keep the class, name the scenario
                exc.args = (f"scenario {name!r}: {exc}",) + exc.args[1:]
                raise
        regret = _regret_matrix(bench, order, results)
    finally:
        bench.close()
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


def _run_one(project, name, ps, bench, say, stability_runs, perturb_pct, seed):
    settings = ps.sections
    desc = "" if name == "base" else project.scenarios[name].get("description", "")
    path, read_kw, plan = ps.sites_path, ps.read_kwargs(), ps.plan_kwargs()
    weights = _weights(plan)
    sk, sites = bench.get_sites(path, read_kw)
    ck, cands = bench.get_candidates(sk, sites, plan)
    terr = bench.terrain_parts(ck, sites.xy, cands.edges, sites, plan, weights)
    land = bench.land_parts(ck, sites.xy, cands.edges, sites, plan)
    costs = combine_costs(terr, land, weights)
    elev = _node_elevations(bench, sk, sites, plan)
    say(f"tree {name}", 0, 1)
    lay, root_idx = _assemble(bench, sites, cands, costs, elev, plan, name=name,
                              description=desc)
    res = ScenarioResult(name, desc, settings, lay, weights,
                         keys={"sites": sk, "candidates": ck, "plan": plan})
    if stability_runs:
        say(f"stability {name}", 0, stability_runs)
        rng = np.random.default_rng([int(seed), zlib.crc32(name.encode())])
        res.stability = _stability(sites, cands.edges, terr, land, weights, elev, root_idx,
                                   plan, runs=int(stability_runs), pct=float(perturb_pct),
                                   rng=rng, terrain_surface=None if plan.get("terrain") is None
                                   else bench.surface(plan["terrain"], crs=sites.crs,
                                                      raster_crs=plan.get("raster_crs"),
                                                      name="terrain"),
                                   tick=lambda d, t: say(f"stability {name}", d, t))
        res.runs = int(stability_runs)
        lay.links["stability"] = res.stability[lay.links["candidate_index"]]
    return res
