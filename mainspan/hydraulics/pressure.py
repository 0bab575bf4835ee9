"""Pressure mains: pipe sizing against a catalog and the hydraulic grade line.

References
----------
.. [1] Great Lakes–Upper Mississippi River Board, *Recommended Standards for
   Water Works*, §8.2.1 -- minimum 20 psi (140 kPa, ~14 m) at all points of
   the distribution system under design flow.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from ..graph.network import RootedNetwork, cost_to_root
from .catalog import PipeCatalog
from .friction import darcy_headloss_m, hazen_williams_headloss_m

__all__ = ["HEADLOSS_METHODS", "PressureSizing", "pipe_headloss_m", "size_pressure", "hydraulic_grade"]

#: Head-loss formulas for pressure mains.
HEADLOSS_METHODS = ("colebrook", "swamee_jain", "hazen_williams")

_CHUNK = 16384


class PressureSizing(NamedTuple):
    """Result of :func:`size_pressure` (arrays of length L)."""

    pipe: np.ndarray  #: catalog index per link
    no_pipe: np.ndarray  #: True where no catalog pipe meets the limits (largest assigned)
    velocity_mps: np.ndarray
    headloss_m: np.ndarray  #: friction plus minor losses over the link
    friction_loss_m: np.ndarray = None  #: friction loss over the link
    minor_loss_m: np.ndarray = None  #: minor losses (fittings, valves, bends): headloss_m - friction_loss_m


def pipe_headloss_m(flow_m3ps, length_m, inner_m, roughness_m, hw_c, *, method, nu_m2ps, minor_loss_factor):
    """Friction loss times ``(1 + minor_loss_factor)`` by the chosen formula.

    Minor losses (fittings, valves, bends) are carried as a fraction of the
    friction loss, the usual allowance at layout stage when fittings are not
    yet known (common practice, no single source).
    """
    if method == "hazen_williams":
        hf = hazen_williams_headloss_m(flow_m3ps, inner_m, length_m, hw_c)
    else:
        hf = darcy_headloss_m(flow_m3ps, inner_m, length_m, roughness_m, nu_m2ps, method=method)
    return hf * (1.0 + minor_loss_factor)


def size_pressure(
    flow_lps,
    length_m,
    catalog: PipeCatalog,
    *,
    velocity_max_mps=1.5,
    headloss_max_m_per_km=10.0,
    method="colebrook",
    nu_m2ps=1.0034e-6,
    minor_loss_factor=0.1,
) -> PressureSizing:
    """Smallest catalog pipe per link meeting a velocity cap and a loss budget.

    Every link is tested against every catalog pipe at once (a links × pipes
    table, in chunks); a pipe is feasible when its velocity is at most
    ``velocity_max_mps`` and its head-loss gradient (friction plus minor
    losses) is at most ``headloss_max_m_per_km``.  The catalog is sorted by
    inner diameter, so the first feasible column is the smallest pipe (ties
    by lower price).  Links that no pipe can carry get the largest pipe and
    ``no_pipe``.

    Parameters
    ----------
    flow_lps : array_like, shape (L,)
        Design flow per link, L/s.
    length_m : array_like, shape (L,)
        Pipe length per link, m.
    catalog : PipeCatalog
    velocity_max_mps : float, default=1.5
        Velocity cap (1.5 m/s ≈ 5 ft/s, common practice).
    headloss_max_m_per_km : float or None, default=10.0
        Head-loss gradient budget, m per km; ``None`` disables it.
    method : {"colebrook", "swamee_jain", "hazen_williams"}, default="colebrook"
    nu_m2ps : float, default=1.0034e-6
        Kinematic viscosity (water at 20 °C).
    minor_loss_factor : float, default=0.1

    Examples
    --------
    >>> from mainspan.hydraulics.catalog import default_catalog
    >>> s = size_pressure([5.0], [100.0], default_catalog())
    >>> default_catalog().name[s.pipe[0]], bool(s.no_pipe[0])
    ('PE100 SDR11 110', False)
    """
    q = np.asarray(flow_lps, dtype=np.float64) / 1000.0
    length = np.asarray(length_m, dtype=np.float64)
    d = catalog.inner_mm / 1000.0
    eps = catalog.roughness_mm / 1000.0
    area = np.pi * d * d / 4.0
    n_links, n_pipes = q.size, d.size
    pipe = np.empty(n_links, np.int64)
    no_pipe = np.empty(n_links, bool)
    for s in range(0, n_links, _CHUNK):
        qc = q[s : s + _CHUNK, None]
        ok = qc / area[None, :] <= velocity_max_mps
        if headloss_max_m_per_km is not None:
            grad = pipe_headloss_m(qc, 1000.0, d[None, :], eps[None, :], catalog.hw_c[None, :], method=method,
                                   nu_m2ps=nu_m2ps, minor_loss_factor=minor_loss_factor)
            ok &= grad <= headloss_max_m_per_km
        any_ok = ok.any(axis=1)
        pipe[s : s + _CHUNK] = np.where(any_ok, np.argmax(ok, axis=1), n_pipes - 1)
        no_pipe[s : s + _CHUNK] = ~any_ok
    velocity = q / area[pipe] if n_links else np.zeros(0)
    friction = np.asarray(pipe_headloss_m(q, length, d[pipe], eps[pipe], catalog.hw_c[pipe], method=method,
                                          nu_m2ps=nu_m2ps, minor_loss_factor=0.0), np.float64)
    minor = friction * minor_loss_factor
    return PressureSizing(pipe=pipe, no_pipe=no_pipe, velocity_mps=velocity, headloss_m=friction + minor,
                          friction_loss_m=friction, minor_loss_m=minor)


def hydraulic_grade(net: RootedNetwork, headloss_m, ground_m, *, source_head_m=None, min_pressure_m=14.0):
    """Hydraulic grade line at every node from the source(s).

    Parameters
    ----------
    net : RootedNetwork
        Rooted at the sources.
    headloss_m : array_like, shape (L,)
        Head loss along each link in the flow direction (root outward).
    ground_m : array_like, shape (n,)
        Ground level at the nodes (service pressure is taken at ground).
    source_head_m : None, float or sequence of float, default=None
        HGL at each root, m above datum (one value, or one per root in the
        order of ``net.roots``).  ``None`` solves, per root, the lowest HGL
        keeping every node of its tree at ``>= min_pressure_m``.
    min_pressure_m : float, default=14.0
        Minimum service pressure head (20 psi, Recommended Standards for
        Water Works §8.2.1).

    Returns
    -------
    hgl_m : ndarray, shape (n,)
    root_hgl_m : ndarray, shape (len(roots),)

    Examples
    --------
    >>> from mainspan.graph.network import rooted_network
    >>> net = rooted_network(3, [0, 1], [1, 2], roots=[0])
    >>> hgl, src = hydraulic_grade(net, [1.0, 2.0], [10.0, 12.0, 5.0], min_pressure_m=14.0)
    >>> hgl.tolist(), src.tolist()
    ([27.0, 26.0, 24.0], [27.0])
    """
    loss_to = cost_to_root(net, headloss_m)
    ground = np.asarray(ground_m, dtype=np.float64)
    if source_head_m is None:
        need = ground + min_pressure_m + loss_to
        per_node_root = np.full(net.n_nodes, -np.inf)
        np.maximum.at(per_node_root, net.root_of, need)
        root_hgl = per_node_root[net.roots]
    else:
        root_hgl = np.broadcast_to(np.asarray(source_head_m, dtype=np.float64), net.roots.shape).copy()
        per_node_root = np.empty(net.n_nodes)
        per_node_root[net.roots] = root_hgl
    hgl = per_node_root[net.root_of] - loss_to
    return hgl, root_hgl
