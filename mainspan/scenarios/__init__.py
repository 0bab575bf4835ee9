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

from .compare import compare_cli
from .compute import MAX_STABILITY_RUNS, run_scenarios
from .output import layer_names, write_scenarios
from .pricing import combine_costs
from .report import report_sections
from .results import ScenarioResult, ScenarioSet
from .tables import ALL_CANDIDATES_MAX, difference, format_table, same_candidates, same_sites

__all__ = ["ScenarioResult", "ScenarioSet", "run_scenarios", "write_scenarios", "difference",
           "combine_costs", "format_table", "report_sections", "layer_names", "compare_cli",
           "ALL_CANDIDATES_MAX", "MAX_STABILITY_RUNS", "same_sites", "same_candidates"]
