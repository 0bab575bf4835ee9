"""The tasks of a scenario run: one tree per scenario, one tree per stability run.

Both are module-level functions of plain data (arrays, settings dicts and
raster specs), so any :class:`~mainspan.execution.Engine` can run them: in
this process, or on Dask workers that open the rasters from their paths.
"""

from __future__ import annotations

import zlib

import numpy as np

from ..errors import DataFileError, InputError
from ..execution.worker import resolve_surface
from ..pipeline.assemble import assemble_layout, plan_inputs
from ..pipeline.stages import cost_weights, grow_tree, root_stage
from .pricing import combine_costs

__all__ = ["tree_task", "stability_task", "stability_rng"]


def _weights(plan):
    """The cost weights of a checked plan (the schema refused terrain weights without terrain)."""
    return cost_weights(plan["weights"])


def _grow(sites, edges, costs, elev, root_idx, plan, *, certify=True, node_order=None,
          terrain_surface=None):
    """Tree over the passable candidates: Prim (+ certificate) or the gravity arborescence."""
    return grow_tree(sites, edges, costs, elev, root_idx, layout=plan["layout"],
                     allow_forest=plan["allow_forest"], design=plan["design"],
                     certify=certify, node_order=node_order, terrain_surface=terrain_surface,
                     sample_spacing_m=plan["sample_spacing_m"], system=plan["system"],
                     whole_cost=plan["whole_cost"])


def _tree_links(tree):
    """Candidate indices of a tree's links, in grow order."""
    order = np.asarray(tree.order, dtype=np.int64)
    child = order[tree.parent[order] >= 0]
    return child, tree.parent[child], tree.parent_edge[child]


def _assemble(surf, sites, cands, costs, elev, plan, *, name, description):
    """A Layout from shared stages, assembled exactly as :func:`plan_layout` does.

    *surf* is the opened terrain Surface (None without terrain); *plan* the
    checked settings (:meth:`mainspan.settings.PlanSettings.resolved`).
    """
    from ..settings import run_info_params

    system = plan["system"]
    root_idx = root_stage(sites, plan["roots"])
    tree, cert, directed = _grow(sites, cands.edges, costs, elev, root_idx, plan,
                                 node_order=cands.node_order, terrain_surface=surf)
    params = {"scenario": name, "scenario_description": description,
              **run_info_params({**plan, "weights": _weights(plan)},
                                candidates_label=cands.method)}
    lay = assemble_layout(sites, cands, costs, elev, tree, cert, directed,
                          terrain_surface=surf, sample_spacing_m=plan["sample_spacing_m"],
                          system=system, design=plan["design"], params=params,
                          inputs=plan_inputs(sites, plan))
    return lay, root_idx


def _named(name, exc):
    """Keep the error's class, and name the scenario in its message."""
    exc.args = (f"scenario {name!r}: {exc}",) + exc.args[1:]
    return exc


def tree_task(name, description, sites, cands, costs, elev, plan, terrain):
    """Scenario *name*'s tree, certificate and design: ``(Layout, root indices)``.

    ``terrain`` is an open Surface (embedded) or a spec from
    :func:`mainspan.execution.worker.surface_spec`.
    """
    try:
        return _assemble(resolve_surface(terrain), sites, cands, costs, elev, plan, name=name,
                         description=description)
    except (InputError, DataFileError) as exc:
        raise _named(name, exc) from None


def stability_rng(seed, name, run):
    """The random stream of stability run *run* of scenario *name*.

    One stream per (seed, scenario, run): a run draws the same factors
    whichever worker runs it and however many runs there are, and adding a
    scenario changes no other scenario's runs.
    """
    return np.random.default_rng([int(seed), zlib.crc32(name.encode()), int(run)])


def stability_task(name, runs, seed, pct, sites, edges, terrain_parts, land_parts, weights,
                   elev, root_idx, plan, terrain):
    """How many of the perturbed trees *runs* (run numbers) hold each candidate link.

    In each run the land-cost component of every link is multiplied by its
    own factor drawn uniformly from ``[1 - pct/100, 1 + pct/100]`` from the
    run's own stream (:func:`stability_rng`), so the counts of a batch of
    runs do not depend on how runs are batched into tasks.

    Returns
    -------
    ndarray of int32, shape (m,)
    """
    surf = resolve_surface(terrain)
    count = np.zeros(len(edges), dtype=np.int32)
    try:
        for run in runs:
            f = stability_rng(seed, name, run).uniform(1.0 - pct / 100.0, 1.0 + pct / 100.0,
                                                       len(edges))
            costs = combine_costs(terrain_parts, land_parts, weights, land_factor=f)
            tree, _, _ = _grow(sites, edges, costs, elev, root_idx, plan, certify=False,
                               terrain_surface=surf)
            count[_tree_links(tree)[2]] += 1
    except (InputError, DataFileError) as exc:
        raise _named(name, exc) from None
    return count
