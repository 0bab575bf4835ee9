"""Run the scenarios of a project and compare their layouts.

:func:`run_scenarios` plans the base and every ``[scenarios.NAME]`` of a
project file, doing work that scenarios share only once:

* sites are read once per distinct ``[sites]`` section (and working CRS);
* candidate links are built once per distinct candidate setting;
* each raster is opened once and kept open for the whole run (small rasters
  are then read from disk once, large ones tile by tile through the
  surface's own cache);
* the terrain components (surface length, climb, descent, steep length,
  end elevations) are priced once per candidate set, terrain raster, raster
  CRS, sample spacing, nodata policy and steep-slope threshold;
* the land-cost components are priced once per candidate set, land-cost
  raster set, cost expression, class table, raster CRS and nodata policy;
* each scenario's weights then combine the components into link totals by
  the cost model's formula (see :func:`combine_costs`), without touching a
  raster.

Prim's tree, its optimality certificate and the pipe design then run per
scenario with the same stage functions :func:`mainspan.plan_layout` uses.
Link ids are stable across scenarios that share a candidate set: the
``candidate_index`` of a link is its row in that set.

Comparison
----------
``scenario_summary``
    One row per scenario: totals, the cost split by term, the number of
    links, the Jaccard share of links with the base, links added / removed
    against the base, failed design checks, and the *regret matrix*: column
    ``cost_under_<S>`` holds the cost of this row's layout priced with
    scenario S's link costs (undirected link totals).  On a shared candidate
    set the diagonal is each column's minimum, because each tree is minimum
    under its own costs.
``scenario_links``
    One LineString per link (node pair): ``presence`` is ``all``, ``some``
    or ``none`` of the layouts, ``scenarios`` lists them, ``n_scenarios``
    counts them, ``stability`` is the share of all perturbed runs (over every
    scenario) whose tree holds the link.  All candidate links are written
    when the candidate sets hold at most :data:`ALL_CANDIDATES_MAX` distinct
    links; above that only links in at least one layout are written and the
    summary's ``n_candidates_in_none`` says how many were left out.

Stability
---------
With ``stability_runs = N`` each scenario's tree is grown N more times with
its land-cost component multiplied, link by link, by an independent factor
drawn uniformly from ``[1 - p/100, 1 + p/100]`` (``p = perturb_pct``; a
seeded :func:`numpy.random.default_rng`, one stream per scenario name so
adding a scenario does not change the others).  A factor per link, not per
raster cell, keeps a run to one vectorised recombination and one Prim call;
it models uncertainty in the price of a whole link rather than spatially
correlated error.  ``stability`` in ``links_<scenario>`` is the share of
that scenario's runs whose tree holds the link.

References
----------
.. [1] R. C. Prim, "Shortest connection networks and some generalizations",
   Bell System Technical Journal 36(6):1389-1401, 1957.
.. [2] J. Kleinberg and É. Tardos, *Algorithm Design*, Pearson, 2006, ch. 4
   (the cut and cycle properties; a minimum spanning tree depends only on
   the order of the link costs).
.. [3] P. Jaccard, "The distribution of the flora in the alpine zone",
   New Phytologist 11(2):37-50, 1912 (the share |A ∩ B| / |A ∪ B|).
"""

from __future__ import annotations

import base64
import html
import json
import os
import sys
import zlib
from dataclasses import dataclass, field

import numpy as np

from .errors import CertificateError, DataFileError, InputError

__all__ = ["ScenarioResult", "ScenarioSet", "run_scenarios", "write_scenarios", "difference",
           "combine_costs", "format_table", "report_sections", "layer_names", "compare_cli",
           "ALL_CANDIDATES_MAX"]

#: Up to this many distinct candidate links, ``scenario_links`` holds every candidate.
ALL_CANDIDATES_MAX = 200_000

#: Weighted cost terms, as (summary column, component, weight name).
_SUMMARY_TERMS = (("cost_length", "surface_length_m", "length"), ("cost_land", "land_cost", "land"),
              ("cost_climb", "climb_m", "climb"), ("cost_descent", "descent_m", "descent"),
              ("cost_steep", "steep_length_m", "steep_per_m"))

_TERRAIN_COLS = ("length_m", "surface_length_m", "climb_m", "descent_m", "max_slope_pct",
                 "steep_length_m", "z_from_m", "z_to_m")


# ------------------------------------------------------------------------------ results
@dataclass
class ScenarioResult:
    """One planned scenario.

    Attributes
    ----------
    name, description : str
    settings : dict
        The merged project settings of the scenario.
    layout : Layout
    weights : CostWeights
    stability : ndarray of float64 or None
        Per candidate link, the share of perturbed runs whose tree holds it.
    runs : int
        Number of perturbed runs made.
    """

    name: str
    description: str
    settings: dict
    layout: object
    weights: object
    keys: dict = field(repr=False, default_factory=dict)
    stability: np.ndarray | None = None
    runs: int = 0


@dataclass
class ScenarioSet:
    """The layouts of a project's scenarios and their comparison.

    Attributes
    ----------
    names : list of str
        ``"base"`` first, then the scenarios in project order.
    results : dict of str -> ScenarioResult
    summary : dict of str -> ndarray
        Columns of the ``scenario_summary`` table, one row per name.
    regret : ndarray of float64, shape (k, k)
        ``regret[i, j]``: cost of layout ``names[i]`` under ``names[j]``'s
        link costs (NaN where the two scenarios have different sites).
    links : dict of str -> ndarray
        Columns of the ``scenario_links`` layer.
    links_xy : ndarray of float64, shape (q, 2, 2)
        End coordinates of each ``scenario_links`` row (working CRS).
    crs : pyproj.CRS
        The base scenario's working CRS.
    work : dict of str -> int
        How often each shared stage ran: ``sites_reads``,
        ``candidate_builds``, ``terrain_pricings``, ``land_pricings``,
        ``raster_opens``.
    stability_runs, perturb_pct, seed
        The stability settings used.
    """

    names: list
    results: dict
    summary: dict
    regret: np.ndarray
    links: dict
    links_xy: np.ndarray
    crs: object
    work: dict
    stability_runs: int = 0
    perturb_pct: float = 0.0
    seed: int = 0

    def __getitem__(self, name):
        return self.results[name].layout

    def __iter__(self):
        return iter(self.names)

    def table(self) -> str:
        """The comparison as fixed-width text (one screen for a handful of scenarios)."""
        return format_table(self)


# ------------------------------------------------------------------------------ costs
def combine_costs(terrain, land, weights, *, land_factor=None):
    """Combine priced terrain and land components into link totals with *weights*.

    The cost model of :func:`mainspan.costs.price_links` is applied term by
    term, in the same order, so the totals equal a direct ``price_links`` call
    to the last bit::

        total = fixed + (climb·climb_m + descent·descent_m + steep_per_m·steep_length_m)
                      + land·land_cost + length·surface_length_m

    with ``inf`` for links that are impassable in either part or whose
    weighted term is not finite.  (``costs.py`` has no separate combining
    function, so the formula lives here.)

    Parameters
    ----------
    terrain : LinkCosts
        From ``price_links`` with the terrain only (land weights irrelevant).
    land : LinkCosts
        From ``price_links`` with the land-cost rasters only, same links.
    weights : CostWeights
    land_factor : ndarray of float64, shape (m,), optional
        Multiplies the land component link by link (stability runs).

    Returns
    -------
    LinkCosts

    Examples
    --------
    >>> import numpy as np
    >>> from mainspan.costs import CostWeights, price_links
    >>> xy, e = np.array([[0.0, 0.0], [3.0, 4.0]]), np.array([[0, 1]])
    >>> t = price_links(xy, e, working_crs="EPSG:32633")
    >>> combine_costs(t, t, CostWeights(length=2.0, fixed=1.0)).total.tolist()
    [11.0]
    """
    from .costs import BASE_COMPONENTS, LinkCosts

    w = weights
    tc, lc = terrain.components, land.components
    m = len(terrain)
    land_cost = lc["land_cost"] if land_factor is None else lc["land_cost"] * land_factor
    t_cost = w.climb * tc["climb_m"] + w.descent * tc["descent_m"]
    if w.steep_per_m:
        t_cost = t_cost + w.steep_per_m * tc["steep_length_m"]
    l_cost = w.land * land_cost
    code = np.full(m, -1, np.int16)
    labels: list[str] = []

    def flag(mask, label):
        new = mask & (code < 0)
        if new.any():
            labels.append(label)
            code[new] = len(labels) - 1

    for part, bad_label in ((terrain, "cost term 'terrain' gave a non-finite cost"),
                            (land, "cost term 'land' gave a non-finite cost")):
        for j, lab in enumerate(part.reason_labels):
            flag(part.reason_code == j, lab)
        flag(~np.isfinite(t_cost if part is terrain else l_cost), bad_label)
    total = np.full(m, w.fixed)
    with np.errstate(invalid="ignore"):
        total = total + np.where(np.isfinite(t_cost), t_cost, 0.0)
        total = total + np.where(np.isfinite(l_cost), l_cost, 0.0)
    total = total + w.length * tc["surface_length_m"]
    passable = code < 0
    total[~passable] = np.inf
    comps = {}
    for k in BASE_COMPONENTS:
        if k == "land_cost":
            comps[k] = land_cost
        elif k == "nodata_fraction":
            comps[k] = np.maximum(tc[k], lc[k])
        else:
            comps[k] = tc[k]
    for k, v in lc.items():
        if k not in comps:
            comps[k] = v if land_factor is None else v * land_factor
    labels_t = tuple(labels)
    counts = np.bincount(code[code >= 0], minlength=len(labels_t))
    return LinkCosts(comps, total, passable, int((~passable).sum()),
                     {labels_t[i]: int(c) for i, c in enumerate(counts) if c}, code, labels_t)


def _key(*parts):
    return json.dumps(parts, sort_keys=True, default=str)


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
        from .sites import read_sites

        k = _key(path, read_kw)
        if k not in self.sites:
            self.say("sites", 0, 1)
            self.sites[k] = read_sites(path, **read_kw)
            self.work["sites_reads"] += 1
        return k, self.sites[k]

    # candidates ----------------------------------------------------------
    def get_candidates(self, sites_key, sites, plan):
        from .candidates import build_candidates

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
        from .surfaces import open_surface

        k = _key(os.fspath(path), crs.to_wkt(), raster_crs, name)
        if k not in self.surfaces:
            self.surfaces[k] = open_surface(path, working_crs=crs, raster_crs=raster_crs,
                                            name=name)
            self.work["raster_opens"] += 1
        return self.surfaces[k]

    def terrain_parts(self, edge_key, xy, edges, sites, plan, weights):
        """Terrain components of *edges* (priced once per terrain setting)."""
        from .costs import CostWeights, price_links

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
        from .costs import CostWeights, price_links

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
    from .costs import OPTION_NAMES, CostWeights

    w = plan.get("weights")
    w = CostWeights() if w is None else (w if isinstance(w, CostWeights) else CostWeights(**w))
    if plan.get("terrain") is None and (w.climb or w.descent or w.steep_per_m):
        opt = next(OPTION_NAMES[k] for k in ("climb", "descent", "steep_per_m") if getattr(w, k))
        raise InputError(f"{opt} prices the terrain but no terrain raster was given; "
                         "pass terrain= (--terrain)")
    return w


def _node_elevations(bench, sites_key, sites, plan):
    """Node elevations as plan_layout sets them (DEM, or the sites' Z when asked)."""
    from .layout import site_elevations

    dem = bench.elevations(sites_key, sites, plan) if plan.get("terrain") is not None else None
    return site_elevations(sites, dem, use_site_z=plan.get("use_site_z", False))


def _grow(sites, edges, costs, elev, root_idx, plan, *, certify=True, node_order=None,
          terrain_surface=None):
    """Tree over the passable candidates: Prim (+ certificate) or the gravity arborescence."""
    from .layout import grow_tree

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
    from .layout import assemble_layout
    from .settings import run_info_params

    system, layout_kind = plan.get("system"), plan.get("layout", "tree")
    from .layout import LAYOUTS
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
        From :func:`mainspan.project.load_project`, or the TOML path.
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
    from .project import Project, load_project

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
    from .settings import PlanSettings

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


def same_sites(a, b) -> bool:
    """Whether two scenario results have the same sites (ids and coordinates, in order)."""
    if a.keys["sites"] == b.keys["sites"]:
        return True
    sa, sb = a.layout.sites, b.layout.sites
    return (sa.n == sb.n and np.array_equal(sa.node_id.astype(str), sb.node_id.astype(str))
            and np.array_equal(sa.xy, sb.xy))


def same_candidates(a, b) -> bool:
    """Whether two scenario results share one candidate set (so ``candidate_index`` matches)."""
    if a.keys["candidates"] == b.keys["candidates"]:
        return True
    return same_sites(a, b) and np.array_equal(a.layout.candidates.edges,
                                               b.layout.candidates.edges)


def _regret_matrix(bench, order, results):
    """regret[i, j] = cost of layout i's links under scenario j's link costs."""
    k = len(order)
    out = np.full((k, k), np.nan)
    for j, sj in enumerate(order):
        rj = results[sj]
        plan = rj.keys["plan"]
        sites = rj.layout.sites
        for i, si in enumerate(order):
            ri = results[si]
            if not same_sites(ri, rj):
                continue                      # different sites: no common price
            cidx = np.asarray(ri.layout.links["candidate_index"], np.int64)
            if same_candidates(ri, rj):
                total = rj.layout.costs.total[cidx]
            else:                             # price layout i's links with j's settings
                e = ri.layout.candidates.edges[cidx]
                ek = _key("tree", si, ri.keys["candidates"])
                t = bench.terrain_parts(ek, sites.xy, e, sites, plan, rj.weights)
                la = bench.land_parts(ek, sites.xy, e, sites, plan)
                total = combine_costs(t, la, rj.weights).total
            out[i, j] = float(total.sum())
    return out


def _universe(order, results):
    """Global node numbering over the scenarios' sites, and each scenario's map into it."""
    ids, xys, block = [], [], {}
    for name in order:
        s = results[name].layout.sites
        if id(s) not in block:
            block[id(s)] = len(ids)
            ids.append(s.node_id.astype(str))
            xys.append(s.xy)
    all_ids = np.concatenate(ids)
    uniq, first, inv = np.unique(all_ids, return_index=True, return_inverse=True)
    rank = np.empty(len(uniq), np.int64)
    rank[np.argsort(first, kind="stable")] = np.arange(len(uniq))
    glob = rank[inv]
    xy = np.empty((len(uniq), 2))
    xy[glob[::-1]] = np.concatenate(xys)[::-1]      # the first occurrence of an id wins
    node_ids = np.empty(len(uniq), dtype=object)
    node_ids[glob] = all_ids
    offsets = np.cumsum([0] + [len(a) for a in ids])
    maps = {}
    for name in order:
        s = results[name].layout.sites
        b = block[id(s)]
        maps[name] = glob[offsets[b]:offsets[b + 1]]
    return node_ids, xy, maps


def _pair_keys(edges_global, n):
    lo = np.minimum(edges_global[:, 0], edges_global[:, 1])
    hi = np.maximum(edges_global[:, 0], edges_global[:, 1])
    return lo * np.int64(n) + hi


def _lookup(table, queries):
    """Row of each query key in *table* (unique int64 keys), -1 where absent."""
    srt = np.argsort(table, kind="stable")
    pos = np.minimum(np.searchsorted(table[srt], queries), max(len(table) - 1, 0))
    hit = table[srt][pos] == queries if len(table) else np.zeros(len(queries), bool)
    return np.where(hit, srt[pos], -1).astype(np.int64)


def _layout_keys(res, gmap, n):
    e = res.layout.candidates.edges[np.asarray(res.layout.links["candidate_index"], np.int64)]
    return _pair_keys(gmap[e], n)


def _link_table(order, results):
    node_ids, gxy, maps = _universe(order, results)
    n = len(node_ids)
    k = len(order)
    tree_keys = [_layout_keys(results[s], maps[s], n) for s in order]
    cand_keys, seen = [], set()
    for s in order:
        ck = results[s].keys["candidates"]
        if ck not in seen:
            seen.add(ck)
            cand_keys.append(_pair_keys(maps[s][results[s].layout.candidates.edges], n))
    all_cands = np.unique(np.concatenate(cand_keys))
    in_any = np.unique(np.concatenate(tree_keys))
    keys = all_cands if len(all_cands) <= ALL_CANDIDATES_MAX else in_any
    n_none = int(len(all_cands) - np.isin(all_cands, in_any).sum())
    member = np.zeros((len(keys), k), bool)
    for j, tk in enumerate(tree_keys):
        member[:, j] = np.isin(keys, tk)
    cnt = member.sum(axis=1)
    presence = np.where(cnt == k, "all", np.where(cnt > 0, "some", "none")).astype(object)
    scen = _membership_labels(member, order)
    lo, hi = keys // n, keys % n
    base = results["base"]
    bkeys = _pair_keys(maps["base"][base.layout.candidates.edges], n)
    cidx = _lookup(bkeys, keys)
    stab = np.full(len(keys), np.nan)
    runs = sum(results[s].runs for s in order)
    if runs:
        acc = np.zeros(len(keys))
        for s in order:
            r = results[s]
            if r.stability is None:
                continue
            at = _lookup(_pair_keys(maps[s][r.layout.candidates.edges], n), keys)
            ok = at >= 0
            acc[ok] += r.stability[at[ok]] * r.runs
        stab = acc / runs
    length = np.hypot(*(gxy[hi] - gxy[lo]).T) if len(keys) else np.zeros(0)
    table = {"candidate_index": cidx, "from_node": node_ids[lo].astype(str),
             "to_node": node_ids[hi].astype(str), "length_m": length, "presence": presence,
             "scenarios": scen, "n_scenarios": cnt.astype(np.int64), "stability": stab}
    return table, np.stack([gxy[lo], gxy[hi]], axis=1), n_none


def _membership_labels(member, order):
    """Comma lists of scenario names per row of a boolean (rows, k) matrix, vectorised."""
    if not len(member):
        return np.array([], dtype=object)
    patterns, inv = np.unique(member, axis=0, return_inverse=True)
    names = np.asarray(order, dtype=object)
    labels = np.array([",".join(names[p]) for p in patterns], dtype=object)
    return labels[np.asarray(inv).ravel()]


def difference(a, b):
    """Links added and removed going from layout *a* to layout *b*.

    Links are matched by ``candidate_index``, so *a* and *b* must come from
    the same candidate set (as scenarios sharing candidate settings do).

    Parameters
    ----------
    a, b : Layout

    Returns
    -------
    added, removed : ndarray of int64
        Sorted candidate indices in *b* but not *a*, and in *a* but not *b*.

    Examples
    --------
    >>> import numpy as np
    >>> from types import SimpleNamespace as NS
    >>> a = NS(links={"candidate_index": np.array([0, 2, 5])})
    >>> b = NS(links={"candidate_index": np.array([0, 3, 5])})
    >>> [x.tolist() for x in difference(a, b)]
    [[3], [2]]
    """
    for lay, what in ((a, "a"), (b, "b")):
        if "candidate_index" not in getattr(lay, "links", {}):
            raise InputError(f"difference(): layout {what} has no 'candidate_index' link field; "
                             "compare layouts planned by mainspan (or read from its output)")
    ia = np.asarray(a.links["candidate_index"], np.int64)
    ib = np.asarray(b.links["candidate_index"], np.int64)
    return np.setdiff1d(ib, ia), np.setdiff1d(ia, ib)


def _summary(order, results, regret, n_none):
    k = len(order)
    base = results["base"]
    col = {"scenario": np.asarray(order, dtype=object),
           "description": np.asarray([results[s].description for s in order], dtype=object)}
    rows = {c: np.zeros(k) for c in ("total_length_m", "total_surface_length_m", "total_cost",
                                     *(t[0] for t in _SUMMARY_TERMS), "cost_fixed")}
    n_links = np.zeros(k, np.int64)
    jac = np.full(k, np.nan)
    added = np.full(k, -1, np.int64)
    removed = np.full(k, -1, np.int64)
    failed = np.zeros(k, np.int64)
    n_cand = np.zeros(k, np.int64)
    n_imp = np.zeros(k, np.int64)
    bset = np.asarray(base.layout.links["candidate_index"], np.int64)
    for i, s in enumerate(order):
        r = results[s]
        lay = r.layout
        cidx = np.asarray(lay.links["candidate_index"], np.int64)
        comp = lay.costs.components
        w = r.weights
        rows["total_length_m"][i] = lay.total("length_m")
        rows["total_surface_length_m"][i] = lay.total("surface_length_m")
        rows["total_cost"][i] = lay.total("cost")
        for colname, cname, wname in _SUMMARY_TERMS:
            rows[colname][i] = float(getattr(w, wname) * comp[cname][cidx].sum()) \
                if getattr(w, wname) else 0.0
        rows["cost_fixed"][i] = w.fixed * len(cidx)
        n_links[i] = len(cidx)
        n_cand[i] = len(lay.candidates.edges)
        n_imp[i] = int(lay.costs.n_impassable)
        if same_candidates(r, base):
            union = np.union1d(bset, cidx).size
            jac[i] = np.intersect1d(bset, cidx).size / union if union else 1.0
            ad, rm = difference(base.layout, lay)
            added[i], removed[i] = len(ad), len(rm)
        if lay.design is not None:
            failed[i] = len(getattr(lay.design, "failures", []) or [])
    col.update(rows)
    col.update({"n_links": n_links, "jaccard_base": jac, "n_added": added, "n_removed": removed,
                "failed_checks": failed, "n_candidates": n_cand, "n_impassable": n_imp,
                "n_candidates_in_none": np.full(k, n_none, np.int64),
                "stability_runs": np.asarray([results[s].runs for s in order], np.int64)})
    for j, s in enumerate(order):
        col[f"cost_under_{s}"] = regret[:, j].copy()
    return col


# ------------------------------------------------------------------------------ output
def _frames(sset):
    import geopandas as gpd
    import pandas as pd
    import shapely

    out = {}
    for name in sset.names:
        frames = sset.results[name].layout.to_frames(suffix=f"_{name}")
        out.update({k: v for k, v in frames.items() if not k.startswith("link_profiles")})
    lines = shapely.linestrings(sset.links_xy) if len(sset.links_xy) else np.array([], object)
    out["scenario_links"] = gpd.GeoDataFrame(
        pd.DataFrame({k: (v.astype(str) if np.asarray(v).dtype == object else v)
                      for k, v in sset.links.items()}),
        geometry=np.asarray(lines, dtype=object), crs=sset.crs)
    out["scenario_summary"] = pd.DataFrame(
        {k: (np.asarray(v).astype(str) if np.asarray(v).dtype == object else v)
         for k, v in sset.summary.items()})
    return out


def layer_names(names):
    """Layer names :func:`write_scenarios` writes for scenarios *names* (base included)."""
    out = []
    for n in names:
        out += [f"links_{n}", f"nodes_{n}", f"run_info_{n}"]
    return out + ["scenario_links", "scenario_summary"]


def write_scenarios(sset, path, *, overwrite=False):
    """Write every scenario's layers and the comparison into one GeoPackage.

    Layers: ``links_<scenario>``, ``nodes_<scenario>``, ``run_info_<scenario>``
    (and ``quantities_<scenario>`` when designed) for each scenario, the base
    as ``*_base``; ``scenario_links`` and ``scenario_summary`` (see the module
    notes).  Ground profiles (``link_profiles``) are left out to keep the
    file small; ``mainspan plan`` writes them for one scenario.  Other layers
    in the file are kept; existing layers of these names are refused unless
    ``overwrite=True``.

    Parameters
    ----------
    sset : ScenarioSet
    path : str or os.PathLike
        A ``.gpkg`` file.
    overwrite : bool, default=False

    Returns
    -------
    str
        The path written.
    """
    from .writers.gpkg import write_layers

    path = os.fspath(path)
    write_layers(path, _frames(sset), overwrite=overwrite)
    return path


def format_table(sset) -> str:
    """Fixed-width comparison table: one row per scenario, then the regret matrix."""
    s = sset.summary
    names = list(s["scenario"])
    w = max(8, *(len(n) for n in names))
    base_cost = s["total_cost"][0]
    cost_txt = [f"{v:,.1f}" for v in s["total_cost"]]
    rel_txt = [f"{(v / base_cost - 1.0) * 100:+.1f}%" if base_cost else "n/a"
               for v in s["total_cost"]]
    pm_txt = [f"+{a}/-{r}" if a >= 0 else "n/a" for a, r in zip(s["n_added"], s["n_removed"])]
    cw = max(14, *(len(t) for t in cost_txt))
    rw = max(8, *(len(t) for t in rel_txt))
    pw = max(9, *(len(t) for t in pm_txt))
    head = (f"{'scenario':<{w}} {'links':>6} {'length m':>11} {'cost':>{cw}} "
            f"{'vs base':>{rw}} {'jaccard':>7} {'+/-':>{pw}} {'fails':>5}")
    lines = [head, "-" * len(head)]
    for i, n in enumerate(names):
        jac = s["jaccard_base"][i]
        lines.append(f"{n:<{w}} {s['n_links'][i]:>6d} {s['total_length_m'][i]:>11,.1f} "
                     f"{cost_txt[i]:>{cw}} {rel_txt[i]:>{rw}} "
                     f"{'n/a' if np.isnan(jac) else f'{jac:.3f}':>7} {pm_txt[i]:>{pw}} "
                     f"{s['failed_checks'][i]:>5d}")
    lines += ["", "cost of each layout (row) under each scenario's link costs (column):"]
    cells = [["n/a" if np.isnan(v) else ("impassable" if np.isinf(v) else f"{v:,.0f}")
              for v in row] for row in sset.regret]
    mw = max(10, *(len(n) for n in names), *(len(c) for row in cells for c in row)) + 1
    lines.append(f"{'':<{w}} " + "".join(f"{n:>{mw}} " for n in names))
    for i, n in enumerate(names):
        lines.append(f"{n:<{w}} " + "".join(f"{c:>{mw}}" + ("*" if i == j else " ")
                                            for j, c in enumerate(cells[i])))
    lines.append("(* own costs; a tree is cheapest under its own costs when candidates are shared)")
    wk = sset.work
    lines.append(f"shared work: {wk['sites_reads']} sites read(s), {wk['candidate_builds']} "
                 f"candidate build(s), {wk['terrain_pricings']} terrain and "
                 f"{wk['land_pricings']} land-cost pricing(s) for {len(names)} scenarios")
    if sset.stability_runs:
        lines.append(f"stability: {sset.stability_runs} run(s) per scenario, land cost "
                     f"±{sset.perturb_pct:g} % per link, seed {sset.seed}")
    return "\n".join(line.rstrip() for line in lines)


# ------------------------------------------------------------------------------ report
def _png(fig):
    from .report.plots import figure_bytes

    import matplotlib.pyplot as plt

    data = figure_bytes(fig, "png")
    plt.close(fig)
    return ('<img alt="" style="max-width:100%" src="data:image/png;base64,'
            + base64.b64encode(data).decode("ascii") + '">')


def _maps_html(sset):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.collections import LineCollection

    k = len(sset.names)
    ncol = min(3, k)
    nrow = -(-k // ncol)
    fig, axes = plt.subplots(nrow, ncol, figsize=(4.2 * ncol, 4.0 * nrow), squeeze=False)
    base = sset["base"]
    bset = np.asarray(base.links["candidate_index"])
    for ax in axes.ravel()[k:]:
        ax.set_axis_off()
    for ax, name in zip(axes.ravel(), sset.names):
        lay = sset[name]
        r = sset.results[name]
        seg = lay.node_xy[lay.link_ends]
        cidx = np.asarray(lay.links["candidate_index"])
        shared = same_candidates(r, sset.results["base"])
        new = ~np.isin(cidx, bset) if shared else np.zeros(len(cidx), bool)
        ax.add_collection(LineCollection(seg[~new], colors="#1f3b73", linewidths=1.0))
        if new.any():
            ax.add_collection(LineCollection(seg[new], colors="#e07b00", linewidths=2.0))
        if shared and name != "base":
            gone = np.setdiff1d(np.asarray(base.links["candidate_index"]), cidx)
            if gone.size:
                e = lay.candidates.edges[gone]
                ax.add_collection(LineCollection(lay.node_xy[e], colors="#b00020",
                                                 linewidths=0.8, linestyles="dashed"))
        roots = np.asarray(lay.tree.roots, np.int64)
        ax.plot(lay.node_xy[:, 0], lay.node_xy[:, 1], ".", ms=2, color="#555555")
        ax.plot(lay.node_xy[roots, 0], lay.node_xy[roots, 1], "s", ms=6, color="#000000")
        ax.set_aspect("equal")
        ax.autoscale_view()
        ax.set_title(name, fontsize=10)
        ax.ticklabel_format(useOffset=False, style="plain")
        ax.tick_params(labelsize=6)
    fig.suptitle("Layouts (orange: links not in the base; dashed red: base links left out)",
                 fontsize=10)
    fig.tight_layout()
    return _png(fig)


def _bars_html(sset):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    s = sset.summary
    names = list(s["scenario"])
    parts = [c for c, _, _ in _SUMMARY_TERMS] + ["cost_fixed"]
    fig, ax = plt.subplots(figsize=(max(5.0, 1.3 * len(names) + 2), 3.8))
    bottom = np.zeros(len(names))
    for c in parts:
        v = np.asarray(s[c], float)
        if not v.any():
            continue
        ax.bar(names, v, bottom=bottom, label=c.replace("cost_", ""))
        bottom += v
    ax.set_ylabel("cost")
    ax.set_title("Cost of each layout by term", fontsize=10)
    ax.legend(fontsize=8)
    ax.tick_params(axis="x", labelsize=8, rotation=20)
    fig.tight_layout()
    return _png(fig)


def _table_html(sset):
    s = sset.summary
    names = list(s["scenario"])
    esc = html.escape

    def num(v, fmt="{:,.1f}"):
        v = float(v)
        return "n/a" if np.isnan(v) else ("impassable" if np.isinf(v) else fmt.format(v))

    desc = "".join(f"<li><b>{esc(n)}</b>: {esc(str(d)) or '(no description)'}</li>"
                   for n, d in zip(names, s["description"]))
    cols = ("scenario", "links", "length m", "cost", "vs base", "Jaccard", "added",
            "removed", "failed checks")
    rows = []
    base_cost = float(s["total_cost"][0])
    for i, n in enumerate(names):
        rel = (float(s["total_cost"][i]) / base_cost - 1) * 100 if base_cost else float("nan")
        added = s["n_added"][i]
        cells = (esc(n), str(s["n_links"][i]), num(s["total_length_m"][i]),
                 num(s["total_cost"][i]), num(rel, "{:+.1f} %"),
                 num(s["jaccard_base"][i], "{:.3f}"),
                 str(added) if added >= 0 else "n/a",
                 str(s["n_removed"][i]) if added >= 0 else "n/a", str(s["failed_checks"][i]))
        rows.append("<tr>" + "".join(f"<td>{c}</td>" for c in cells) + "</tr>")
    summary = (f"<ul>{desc}</ul><div style=\"overflow-x:auto\"><table><thead><tr>"
               + "".join(f"<th>{c}</th>" for c in cols) + "</tr></thead><tbody>"
               + "".join(rows) + "</tbody></table></div>")
    head = "".join(f"<th>{esc(n)}</th>" for n in names)
    body = "".join(
        f"<tr><th>{esc(a)}</th>" + "".join(
            (f"<td><b>{num(sset.regret[i, j], '{:,.0f}')}</b></td>" if i == j else
             f"<td>{num(sset.regret[i, j], '{:,.0f}')}</td>") for j in range(len(names)))
        + "</tr>" for i, a in enumerate(names))
    regret = ("<p>Cost of each layout (row) priced with each scenario's link costs (column); "
              "the own costs are in bold. Where scenarios share candidate links, each "
              "scenario's own layout is the cheapest in its column, so the difference down a "
              "column is what choosing another scenario's layout would cost.</p>"
              f"<div style=\"overflow-x:auto\"><table><thead><tr><th>layout \\ costs</th>"
              f"{head}</tr></thead><tbody>{body}</tbody></table></div>")
    return summary + regret


def report_sections(sset):
    """``(title, html)`` sections comparing the scenarios, for ``write_report``."""
    return [("Scenario comparison", _table_html(sset)),
            ("Scenario layouts", _maps_html(sset)),
            ("Cost breakdown by scenario", _bars_html(sset))]


# ------------------------------------------------------------------------------ CLI
def _suffixed(path, suffix):
    stem, ext = os.path.splitext(path)
    return f"{stem}{suffix}{ext}"


def compare_cli(args):
    """``mainspan compare PROJECT.toml``: plan every scenario, print and write the comparison.

    Outputs: ``--out`` (GeoPackage), else ``[output] gpkg`` with ``_scenarios``
    added before the extension; ``--report`` (HTML), else ``[output] report``
    with ``_scenarios`` added.  Neither given: only the table is printed.
    Stability settings come from the options, else the project's
    ``[stability]`` section.  Returns 0; bad input raises InputError or
    DataFileError (exit code 2 in the CLI).
    """
    from .project import load_project
    from .writers.gpkg import check_layers_free

    proj = load_project(args.project)
    out = proj.base.get("output", {})
    stab = proj.stability or {}
    runs = args.stability if args.stability is not None else stab.get("runs", 0)
    pct = args.perturb_pct if args.perturb_pct is not None else stab.get("perturb_pct", 10.0)
    seed = args.seed if args.seed is not None else stab.get("seed", 0)
    overwrite = bool(args.overwrite or out.get("overwrite", False))
    gpkg = args.out or (_suffixed(out["gpkg"], "_scenarios") if out.get("gpkg") else None)
    rep = args.report or (_suffixed(out["report"], "_scenarios") if out.get("report") else None)
    # output safety (mainspan.safeio): same-file, project-folder and overwrite rules first
    from .preflight import preflight_compare
    overwrite, rep_overwrite = preflight_compare(args, proj, gpkg, rep)
    if gpkg:
        check_layers_free(gpkg, layer_names(["base", *proj.scenarios]), overwrite=overwrite)
    from .messages import progress
    sset = run_scenarios(proj, progress=progress(args.quiet), stability_runs=runs,
                         perturb_pct=pct, seed=seed)
    print(sset.table())
    if gpkg:
        write_scenarios(sset, gpkg, overwrite=overwrite)
        print(f"written         {gpkg} (layers: links_/nodes_/run_info_<scenario>, "
              "scenario_links, scenario_summary)")
    if rep:
        from .report.html import write_report
        write_report(sset["base"], rep, overwrite=rep_overwrite,
                     title=f"Scenario comparison: {os.path.basename(proj.path)}",
                     extra_sections=report_sections(sset))
        print(f"report          {rep}")
    if any(sset[n].system for n in sset.names):
        from .messages import CAUTION
        print(CAUTION)
    sys.stdout.flush()
    return 0
