"""The results of a scenario run: one ScenarioResult per scenario, the ScenarioSet of all."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["ScenarioResult", "ScenarioSet"]

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
        from .tables import format_table
        return format_table(self)
