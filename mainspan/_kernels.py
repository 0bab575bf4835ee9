"""Small numba kernels shared by the pipeline glue."""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True)
def path_sums(parent, order, link_of_node, link_cost, hops, cost):
    """Hops and summed link cost from every node to its root (parents come first in *order*)."""
    for k in range(order.shape[0]):
        v = order[k]
        p = parent[v]
        if p >= 0:
            hops[v] = hops[p] + 1
            cost[v] = cost[p] + link_cost[link_of_node[v]]
    return hops, cost
