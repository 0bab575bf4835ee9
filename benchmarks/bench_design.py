"""Design benchmark: least-cost sizing against rule sizing, and the tree method against HiGHS.

    python benchmarks/bench_design.py                 # 10,000 and 100,000 hydrants, then the demo tree
    python benchmarks/bench_design.py --quick         # 2,000 and 20,000 hydrants

Hydrant networks are generated here: random points on a square at about 100 m spacing over
smooth random ground, one source per ~200 hydrants at 0.05 L/s each, and the minimum spanning
forest of their Delaunay links (scipy) as the tree -- a deep, Prim-like tree.  On each,
``design_network`` runs with ``sizing="rule"`` and ``sizing="least-cost"`` in the same run;
the lines give wall time, pipe + trench cost and the whole-life cost (all capital plus the
pumping energy's present value, which least-cost sizing minimises together with the pipes).  The sizing core
(:func:`mainspan.hydraulics.sizing.least_cost_tree`) is timed on its own too, and the time
exponent from the smaller to the larger case is fitted on the number of links (target <= 1.1).

The whole-cost layout block plans the same hydrants twice in the same run: Prim's tree with
rule sizing, and the whole-cost layout (least-cost sizing); it prints both times and
whole-life costs, and how far the bounded search went: above 5,000 hydrants it stops at 120
full designs, above 20,000 after the start trees and one pass of 16 (printed under the line).

The last block plans the Kestrel Flats demo (``mainspan.demo`` inputs), takes its tree and
times the least-cost design with the tree method and with HiGHS (scipy's linear
programming), checking that both reach the same optimum.  Each section is a function so
further design benchmarks can be added beside them.
"""

from __future__ import annotations

import argparse
import math
import tempfile
import time

import numpy as np


def hydrant_network(n, seed=0, per_source=200, lps=0.05):
    """Inputs of ``design_network`` for n random hydrants on a minimum spanning forest."""
    import scipy.sparse as sp
    from scipy.sparse.csgraph import breadth_first_order, minimum_spanning_tree
    from scipy.spatial import Delaunay

    rng = np.random.default_rng(seed)
    side = 100.0 * math.sqrt(n)
    xy = rng.random((n, 2)) * side
    k = max(1, n // per_source)
    src = np.arange(k)
    # ground: a few smooth waves, +-15 m
    z = 150.0 + sum(rng.uniform(3, 8) * np.sin(xy @ rng.normal(0, 2 * np.pi / side * 3, 2) + rng.uniform(0, 6))
                    for _ in range(4))
    tri = Delaunay(xy).simplices
    e = np.unique(np.sort(np.concatenate([tri[:, [0, 1]], tri[:, [1, 2]], tri[:, [0, 2]]]), axis=1), axis=0)
    w = np.hypot(*(xy[e[:, 0]] - xy[e[:, 1]]).T)
    # a virtual hub joined to every source at a tiny weight makes the forest one tree
    hub = n
    a = np.concatenate([e[:, 0], np.full(k, hub)])
    b = np.concatenate([e[:, 1], src])
    ww = np.concatenate([w, np.full(k, 1e-9)])
    mst = minimum_spanning_tree(sp.coo_matrix((ww, (a, b)), shape=(n + 1, n + 1))).tocoo()
    keep = (mst.row != hub) & (mst.col != hub)
    f, t = mst.row[keep], mst.col[keep]
    del breadth_first_order
    length = np.hypot(*(xy[f] - xy[t]).T)
    demand = np.where(np.isin(np.arange(n), src), 0.0, lps)
    return dict(xy=xy, elevation_m=z, demand_lps=demand, node_id=[f"H{i}" for i in range(n)], from_node=f,
                to_node=t, length_m=length, surface_length_m=length, roots=src)


def pipe_trench(result):
    return result.summary["pipe_cost"] + result.summary["trench_cost"]


def timed(fn, *args, **kw):
    t = time.perf_counter()
    out = fn(*args, **kw)
    return time.perf_counter() - t, out


class _Clock:
    """Accumulates the time spent in the sizing solvers called by design_network."""

    def __init__(self):
        import mainspan.hydraulics.pressure_design as pd

        self.pd = pd
        self.spent = {"tree": 0.0, "highs": 0.0}
        self.orig = {"tree": pd.least_cost_tree, "highs": pd.least_cost_highs}
        for key, fn in self.orig.items():
            setattr(pd, f"least_cost_{key}", self._wrap(key, fn))

    def _wrap(self, key, fn):
        def run(*a, **k):
            t = time.perf_counter()
            try:
                return fn(*a, **k)
            finally:
                self.spent[key] += time.perf_counter() - t
        return run

    def reset(self):
        self.spent = {"tree": 0.0, "highs": 0.0}

    def close(self):
        for key, fn in self.orig.items():
            setattr(self.pd, f"least_cost_{key}", fn)


def bench_sizing(sizes, seed=0):
    """Least-cost against rule sizing on generated hydrant networks; fitted time exponent."""
    from mainspan.hydraulics import DesignSettings, design_network

    warm = hydrant_network(600, seed)
    design_network("pressure", settings=DesignSettings(), **warm)   # compile the numba kernels
    clock = _Clock()
    rows = []
    print(f"{'hydrants':>9} {'links':>8} | {'rule s':>7} {'pipe+trench':>12} {'whole-life':>12} | {'least-cost s':>12} "
          f"{'(sizing s)':>10} {'pipe+trench':>12} {'whole-life':>12} | {'saving':>7} {'fails':>5}")
    try:
        for n in sizes:
            case = hydrant_network(n, seed)
            t_rule, rule = timed(design_network, "pressure", settings=DesignSettings(sizing="rule"), **case)
            clock.reset()
            t_lc, lc = timed(design_network, "pressure", settings=DesignSettings(), **case)
            core = clock.spent["tree"]
            L = len(case["from_node"])
            w_rule, w_lc = rule.summary["whole_life_cost"], lc.summary["whole_life_cost"]
            print(f"{n:>9,} {L:>8,} | {t_rule:>7.2f} {pipe_trench(rule):>12,.0f} {w_rule:>12,.0f} | {t_lc:>12.2f} "
                  f"{core:>10.2f} {pipe_trench(lc):>12,.0f} {w_lc:>12,.0f} | {(1 - w_lc / w_rule) * 100:>6.1f}% "
                  f"{lc.summary['n_failures']:>5}")
            rows.append((L, t_lc, core))
    finally:
        clock.close()
    if len(rows) >= 2:
        (l0, t0, c0), (l1, t1, c1) = rows[0], rows[-1]
        ex = math.log(t1 / t0) / math.log(l1 / l0)
        exc = math.log(c1 / c0) / math.log(l1 / l0)
        print(f"fitted time exponent {l0:,} -> {l1:,} links: design {ex:.2f}, sizing core {exc:.2f} (target <= 1.1)")
    print("(each design at its own solved source head; saving = on the whole-life cost; fails = failed checks "
          "of the least-cost design)")


def demo_design_inputs():
    """Plan the Kestrel Flats demo; return the design_network inputs of its tree (as the layout passes them)."""
    from mainspan.demo import demo_files
    from mainspan.pipeline.layout import _basis_fields, _design_settings, plan_layout
    from mainspan.settings.project import load_project, plan_kwargs
    from mainspan.sites.read import read_sites

    files = demo_files(tempfile.mkdtemp(prefix="bench_design_"))
    proj = load_project(files["kestrel.toml"])
    path, read_kw, plan_kw, _ = plan_kwargs(proj.settings_for(None))
    lay = plan_layout(read_sites(path, **read_kw), **plan_kw)
    p = lay.profiles
    land = lay.links.get("land_cost")
    inputs = dict(
        xy=lay.node_xy, elevation_m=np.asarray(lay.nodes["elevation_m"], float),
        demand_lps=np.asarray(lay.nodes["demand_lps"], float), node_id=np.asarray(lay.nodes["node_id"]),
        from_node=lay.link_ends[:, 0], to_node=lay.link_ends[:, 1], length_m=np.asarray(lay.links["length_m"], float),
        surface_length_m=np.asarray(lay.links.get("surface_length_m", lay.links["length_m"]), float),
        roots=np.asarray(lay.tree.roots if hasattr(lay, "tree") else [0], np.int64),
        profile_offsets=None if p is None else p.offsets, profile_station_m=None if p is None else p.station_m,
        profile_ground_m=None if p is None else p.ground_m, land_cost=None if land is None else np.asarray(land, float),
        **{k: v for k, v in _basis_fields(lay.nodes).items() if k != "min_pressure_m"})
    base = _design_settings(plan_kw.get("design"), "pressure")
    return inputs, base, lay


def bench_demo(repeat=3):
    """On the demo's tree: the tree method against HiGHS reaching the same optimum."""
    from dataclasses import replace

    from mainspan.hydraulics import design_network

    inputs, base, lay = demo_design_inputs()
    roots = np.flatnonzero(np.asarray(lay.nodes["role"]) == "source")
    inputs["roots"] = roots
    clock = _Clock()
    try:
        out = {}
        for solver in ("tree", "highs"):
            s = replace(base, sizing_solver=solver)
            spent = []
            for _ in range(repeat):
                clock.reset()
                res = design_network("pressure", settings=s, **inputs)
                spent.append(clock.spent[solver])
            out[solver] = (min(spent), res)
        rule = design_network("pressure", settings=replace(base, sizing="rule"), **inputs)
        at_rule = design_network("pressure", settings=replace(base, source_head_m=rule.summary["source_hgl_m"][0]),
                                 **inputs)
    finally:
        clock.close()
    (tt, rt), (th, rh) = out["tree"], out["highs"]
    ot, oh = rt.summary["sizing_optimum"], rh.summary["sizing_optimum"]
    print(f"demo tree ({len(inputs['from_node'])} links, Kestrel Flats): least-cost sizing, split links, free source head")
    print(f"  tree method {tt * 1000:8.1f} ms   optimum {ot:,.4f}")
    print(f"  HiGHS       {th * 1000:8.1f} ms   optimum {oh:,.4f}   (relative difference {abs(ot - oh) / abs(oh):.1e})")
    print(f"  HiGHS / tree time {th / tt:.1f}x")
    cr, cl, ca = pipe_trench(rule), pipe_trench(rt), pipe_trench(at_rule)
    print(f"  pipe + trench: rule {cr:,.0f} (source {rule.summary['source_hgl_m'][0]:.2f} m); least-cost at the same "
          f"source head {ca:,.0f} ({(1 - ca / cr) * 100:.1f} % less); least-cost with free head "
          f"{cl:,.0f} (source {rt.summary['source_hgl_m'][0]:.2f} m)")


# --- whole11: the whole-cost layout at scale ---
def hydrant_sites(n, seed=0, total_lps=100.0):
    """The generated hydrants of :func:`hydrant_network` as sites for ``plan_layout``, with one
    pump station (the whole-cost search prices one pump head) and ``total_lps`` in all, about
    the demo's 90 L/s, so that the largest catalog pipe carries it."""
    import mainspan as ms

    case = hydrant_network(n, seed, per_source=n, lps=total_lps / (n - 1))
    role = np.full(n, "demand", dtype=object)
    role[case["roots"]] = "source"
    xy = case["xy"] + [500_000.0, 5_000_000.0]          # UTM 33N, near its central meridian
    return ms.sites_from_arrays(xy, crs="EPSG:32633", role=role, demand_lps=case["demand_lps"],
                                elevation_m=case["elevation_m"])


def bench_whole_cost(sizes, seed=0, budgets=None):
    """Whole-cost layout (least-cost sizing) against Prim's tree with rule sizing, same run.

    Both plans take the same sites and Delaunay candidates; the lines give wall time and
    whole-life cost (capital + pump energy present value).  The search is bounded: the
    budget of full designs per size is printed, and whether the search converged within it
    (a pass that took no exchange) or stopped at the budget.
    """
    import mainspan as ms
    from mainspan.graph.wholecost import whole_life_cost

    budgets = budgets or {}
    kw = dict(system="pressure", use_site_z=True, candidates="delaunay")
    ms.plan_layout(hydrant_sites(600, seed), layout="whole-cost", **kw)      # compile
    print(f"{'hydrants':>9} {'Prim+rule s':>11} {'whole-life':>14} {'whole-cost s':>12} "
          f"{'whole-life':>14} {'saving':>7} {'designs':>8} {'passes':>6} {'exch.':>6} "
          f"{'converged':>9} {'fails':>9}")
    for n in sizes:
        sites = hydrant_sites(n, seed)
        limits = budgets.get(n, {})
        t_p, prim = timed(ms.plan_layout, sites, layout="tree", design={"sizing": "rule"}, **kw)
        t_w, whole = timed(ms.plan_layout, sites, layout="whole-cost", whole_cost=limits, **kw)
        cp, cw = whole_life_cost(prim.design.summary), whole_life_cost(whole.design.summary)
        sr = whole.tree.search
        print(f"{n:>9,} {t_p:>11.1f} {cp:>14,.0f} {t_w:>12.1f} {cw:>14,.0f} "
              f"{100 * (cp - cw) / cp:>6.1f}% {sr['evaluations']:>8} {sr['passes']:>6} "
              f"{sr['accepted']:>6} {str(sr['converged']):>9} "
              f"{prim.design.summary['n_failures']:>4}->{whole.design.summary['n_failures']:<4}")
        if limits:
            print(f"          (bounded: {', '.join(f'{k}={v}' for k, v in limits.items())}; "
                  "the search stops at that budget of full designs)")
    print("(whole-cost: Prim-Dijkstra start trees + link exchange priced by the full design; "
          "a local optimum under single exchanges within the neighbourhood searched)")
# --- end whole11 ---


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, nargs="*", default=None, help="hydrant counts (default 10000 100000)")
    ap.add_argument("--quick", action="store_true", help="2,000 and 20,000 hydrants")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--skip-demo", action="store_true")
    ap.add_argument("--skip-layout", action="store_true", help="skip the whole-cost layout lines")
    a = ap.parse_args(argv)
    sizes = a.n or ([2000, 20000] if a.quick else [10000, 100000])
    bench_sizing(sizes, a.seed)
    if not a.skip_layout:        # whole11
        print()
        # bounded searches: above 5,000 hydrants 120 full designs in all; above 20,000 the
        # start trees and one pass of 16 exchanges at most 4 links from the added link
        mid = {"max_evaluations": 120}
        big = {"max_evaluations": 24, "per_pass": 16, "max_hops": 4}
        bench_whole_cost(sizes, a.seed, budgets={n: big if n > 20_000 else mid
                                                 for n in sizes if n > 5_000})
    if not a.skip_demo:
        print()
        bench_demo()


if __name__ == "__main__":
    main()
