"""Design basis of a gravity network: where its design flows come from.

``gravity_basis`` (a :class:`~mainspan.hydraulics.design.DesignSettings` key)
chooses between two ways of turning what the sites carry into a peak flow
in every link:

``"sanitary"`` (the default)
    A foul sewer.  The average flow of a link is the population drained
    through it times the per-capita flow (``sanitary_per_capita_lpd``) plus
    the sites' own average demands (``demand_lps``).  The peak is the
    average times a peaking factor chosen by ``sanitary_peaking``:

    * ``"fixed"`` -- the ``peaking_factor`` setting (1.0: the given flows are
      the design flows, as before the basis existed);
    * ``"harmon"`` -- PF = 1 + 14 / (4 + sqrt(P));
    * ``"babbitt"`` -- PF = 5 / P^0.2, capped at 5 (its value at 1,000
      persons: the formula grows without bound for very small populations;
      the cap is common practice, no single source);

    with P the population equivalent drained, in thousands (the sites'
    demands count as the population whose per-capita flow makes them).
    Both formulas as quoted by the Recommended Standards for Wastewater
    Facilities family of codes (from memory).

``"storm"``
    A storm drain designed by the Rational method::

        Q = C i A / 360        (Q in m³/s, i in mm/h, A in ha)

    Each site carries a catchment area (``area_ha``) and a runoff
    coefficient (``runoff_c``).  The peak flow in a link uses the sum of C·A
    over every catchment upstream and the rainfall intensity at that link's
    time of concentration: the longest of (inlet time + travel time through
    the pipes) over the catchments upstream.  Travel time in a pipe is its
    length over its full-pipe velocity (the usual hand-calculation
    convention), so flows depend on sizes: :func:`storm_flows` iterates
    flows → sizes → travel times until the sizes repeat (at most
    ``max_iterations`` rounds; if they never settle the larger of the last
    two flows is kept and a note says so).  Intensities come from an IDF
    table (``idf``: pairs of duration in minutes and intensity in mm/h),
    interpolated linearly in log(duration)–log(intensity); below the
    shortest duration the shortest duration's intensity is used, beyond the
    longest the last segment is extended.

The self-cleansing velocity follows the basis: ``gravity_min_velocity_mps``
(0.6 m/s, Recommended Standards for Wastewater Facilities) for sanitary
sewers, ``storm_min_velocity_mps`` (0.9 m/s flowing full, a common storm-drain
figure -- from memory, ASCE/WPCF sewer design manual) for storm drains.

References
----------
.. [1] T. J. Mulvaney, "On the use of self-registering rain and flood gauges",
   Trans. Inst. Civil Eng. Ireland 4, 1851 (the Rational method); E. Kuichling,
   Trans. ASCE 20, 1889.
.. [2] W. G. Harmon, "Forecasting sewage at Toledo under dry-weather
   conditions", Eng. News-Record 80, 1918 (from memory).
.. [3] H. E. Babbitt, *Sewerage and Sewage Treatment*, Wiley (from memory).
.. [4] Great Lakes–Upper Mississippi River Board, *Recommended Standards for
   Wastewater Facilities* (peaking formulas, 100 gal per capita per day).
"""

from __future__ import annotations

from typing import NamedTuple

import numba
import numpy as np

from ..errors import InputError
from ..graph.network import accumulate

__all__ = ["BASES", "PEAKING_METHODS", "BasisFlows", "harmon_peaking_factor",
           "babbitt_peaking_factor", "rational_flow_m3ps", "parse_idf", "idf_intensity_mm_per_h",
           "times_of_concentration_min", "sanitary_flows", "storm_flows", "check_basis_settings"]

#: Design bases of a gravity network.
BASES = ("sanitary", "storm")
#: Peaking of sanitary flows.
PEAKING_METHODS = ("fixed", "harmon", "babbitt")
#: Babbitt's factor is capped at its value for 1,000 persons (common practice, no single source).
BABBITT_CAP = 5.0


class BasisFlows(NamedTuple):
    """Design flows of a gravity network and how they were found (per link, length L).

    Attributes
    ----------
    design_flow_lps : ndarray
        Peak (design) flow.
    average_flow_lps : ndarray
        Sanitary: average dry-weather flow; storm: NaN.
    peaking : ndarray
        Sanitary: peaking factor; storm: NaN.
    tc_min : ndarray
        Storm: time of concentration at the link's upstream end, minutes
        (NaN where nothing drains into the link); sanitary: NaN.
    intensity_mm_per_h : ndarray
        Storm: rainfall intensity at ``tc_min``; sanitary: NaN.
    ca_ha : ndarray
        Storm: sum of C·A upstream, ha; sanitary: NaN.
    iterations : int
        Storm: rounds of flows → sizes → travel times (0 for sanitary).
    converged : bool
    notes : list of str
    """

    design_flow_lps: np.ndarray
    average_flow_lps: np.ndarray
    peaking: np.ndarray
    tc_min: np.ndarray
    intensity_mm_per_h: np.ndarray
    ca_ha: np.ndarray
    iterations: int
    converged: bool
    notes: list


# ---------------------------------------------------------------- formulas
def harmon_peaking_factor(population_thousands):
    """Harmon's peaking factor ``1 + 14 / (4 + sqrt(P))``, P in thousands.

    Examples
    --------
    >>> round(float(harmon_peaking_factor(10.0)), 3)
    2.955
    """
    p = np.maximum(np.asarray(population_thousands, dtype=np.float64), 0.0)
    return 1.0 + 14.0 / (4.0 + np.sqrt(p))


def babbitt_peaking_factor(population_thousands):
    """Babbitt's peaking factor ``5 / P^0.2``, P in thousands, capped at 5.

    Examples
    --------
    >>> round(float(babbitt_peaking_factor(10.0)), 3), float(babbitt_peaking_factor(0.2))
    (3.155, 5.0)
    """
    p = np.asarray(population_thousands, dtype=np.float64)
    with np.errstate(divide="ignore"):
        pf = 5.0 / np.power(np.maximum(p, 0.0), 0.2)
    return np.minimum(pf, BABBITT_CAP)


def rational_flow_m3ps(runoff_c, intensity_mm_per_h, area_ha):
    """Rational-method peak flow ``C i A / 360`` in m³/s (i in mm/h, A in ha).

    Examples
    --------
    >>> round(float(rational_flow_m3ps(0.5, 50.0, 2.0)), 4)
    0.1389
    """
    return (np.asarray(runoff_c, dtype=np.float64) * np.asarray(intensity_mm_per_h, dtype=np.float64)
            * np.asarray(area_ha, dtype=np.float64) / 360.0)


def parse_idf(value, *, option="idf"):
    """Validate an IDF table; return ``((duration_min, intensity_mm_per_h), ...)`` sorted.

    Parameters
    ----------
    value : sequence of pairs, or dict
        Pairs ``(duration_min, intensity_mm_per_h)``, or a table with the
        keys ``duration_min`` and ``intensity_mm_per_h`` (lists of equal
        length) as in a project file's ``[design.idf]``.
    option : str
        Name used in error messages.

    Returns
    -------
    tuple of (float, float)

    Examples
    --------
    >>> parse_idf({"duration_min": [10, 5], "intensity_mm_per_h": [100, 140]})
    ((5.0, 140.0), (10.0, 100.0))
    """
    fix = ("give at least two (duration_min, intensity_mm_per_h) pairs, e.g. [[5, 140], [10, 105], "
           "[30, 60]], or a [design.idf] table with lists 'duration_min' and 'intensity_mm_per_h'")
    if isinstance(value, dict):
        extra = set(value) - {"duration_min", "intensity_mm_per_h"}
        if extra or len(value) != 2:
            raise InputError(f"design option '{option}': table keys must be 'duration_min' and "
                             f"'intensity_mm_per_h', got {sorted(value)}; {fix}")
        d, i = value["duration_min"], value["intensity_mm_per_h"]
        try:
            pairs = list(zip(d, i, strict=True))
        except (TypeError, ValueError):
            raise InputError(f"design option '{option}': 'duration_min' and 'intensity_mm_per_h' must "
                             f"be lists of equal length; {fix}") from None
    else:
        pairs = value
    try:
        arr = np.asarray(pairs, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(f"design option '{option}' must be numeric pairs, got {value!r}; {fix}") from None
    if arr.ndim != 2 or arr.shape[1] != 2 or arr.shape[0] < 2:
        raise InputError(f"design option '{option}' must hold at least two pairs, got {value!r}; {fix}")
    bad = np.flatnonzero(~np.isfinite(arr).all(axis=1) | (arr <= 0).any(axis=1))
    if bad.size:
        raise InputError(f"design option '{option}': pair {bad[0] + 1} {arr[bad[0]].tolist()} must be "
                         f"two positive numbers (minutes, mm/h); {fix}")
    arr = arr[np.argsort(arr[:, 0], kind="stable")]
    if np.any(np.diff(arr[:, 0]) <= 0):
        raise InputError(f"design option '{option}': durations repeat; give each duration once")
    up = np.flatnonzero(np.diff(arr[:, 1]) > 0)
    if up.size:
        k = up[0]
        raise InputError(f"design option '{option}': intensity rises from {arr[k, 1]:g} mm/h at "
                         f"{arr[k, 0]:g} min to {arr[k + 1, 1]:g} mm/h at {arr[k + 1, 0]:g} min; an "
                         "IDF curve falls as duration grows, check the table")
    return tuple((float(a), float(b)) for a, b in arr)


def idf_intensity_mm_per_h(duration_min, idf):
    """Rainfall intensity at a duration, interpolated log-log in an IDF table.

    Below the shortest tabulated duration the shortest duration's intensity
    is used; beyond the longest the last log-log segment is extended.

    Examples
    --------
    >>> tab = ((5.0, 150.0), (60.0, 30.0))
    >>> round(float(idf_intensity_mm_per_h(5.0, tab)), 6), round(float(idf_intensity_mm_per_h(20.0, tab)), 2)
    (150.0, 61.11)
    """
    tab = np.asarray(idf, dtype=np.float64)
    ld, li = np.log(tab[:, 0]), np.log(tab[:, 1])
    t = np.log(np.maximum(np.asarray(duration_min, dtype=np.float64), tab[0, 0]))
    out = np.interp(t, ld, li)
    slope = (li[-1] - li[-2]) / (ld[-1] - ld[-2])
    out = np.where(t > ld[-1], li[-1] + slope * (t - ld[-1]), out)
    return np.exp(out)


# ---------------------------------------------------------------- tree passes
@numba.njit(cache=True)
def _tc_pass(order, parent, parent_link, start_min, travel_min):  # pragma: no cover - compiled
    tc = start_min.copy()
    for j in range(order.shape[0] - 1, -1, -1):
        v = order[j]
        p = parent[v]
        if p >= 0 and tc[v] > -np.inf:
            t = tc[v] + travel_min[parent_link[v]]
            if t > tc[p]:
                tc[p] = t
    return tc


def times_of_concentration_min(net, has_catchment, inlet_time_min, travel_min):
    """Time of concentration at every node and at every link's upstream end.

    ``Tc(v) = max(inlet time if v has a catchment, max over children c of
    Tc(c) + travel time of the link c → v)``; -inf where nothing drains.

    Parameters
    ----------
    net : RootedNetwork
        Rooted at the outlet.
    has_catchment : array_like of bool, shape (n,)
    inlet_time_min : float or array_like, shape (n,)
    travel_min : array_like, shape (L,)
        Travel time through each link.

    Returns
    -------
    tc_node, tc_link : ndarray
        ``tc_link[k] = tc_node[to_node[k]]`` (the flow leaving the upstream node).

    Examples
    --------
    >>> from mainspan.graph.network import rooted_network
    >>> net = rooted_network(3, [0, 1], [1, 2], roots=[0])
    >>> times_of_concentration_min(net, [False, True, True], 10.0, [2.0, 3.0])[1].tolist()
    [13.0, 10.0]
    """
    has = np.asarray(has_catchment, bool)
    start = np.where(has, np.broadcast_to(np.asarray(inlet_time_min, np.float64), has.shape), -np.inf)
    tc = _tc_pass(net.order, net.parent, net.parent_link, start.astype(np.float64),
                  np.asarray(travel_min, np.float64))
    return tc, tc[net.to_node]


# ---------------------------------------------------------------- the two bases
def _node_field(name, values, n, *, fix, min_value=0.0, max_value=None):
    if values is None:
        raise InputError(f"gravity_basis needs the site field {name!r}; {fix}")
    arr = np.asarray(values, dtype=np.float64)
    if arr.shape != (n,):
        raise InputError(f"design input {name!r} must have one value per site ({n}), got shape {arr.shape}")
    bad = ~np.isfinite(arr) | (arr < min_value)
    if max_value is not None:
        bad |= arr > max_value
    idx = np.flatnonzero(bad)
    if idx.size:
        rng = f">= {min_value:g}" + (f" and <= {max_value:g}" if max_value is not None else "")
        raise InputError(f"design input {name!r}: site {idx[0]} has {arr[idx[0]]}; it must be {rng}; {fix}")
    return arr


def sanitary_flows(net, *, demand_lps, population=None, per_capita_lpd=380.0, peaking="fixed",
                   peaking_factor=1.0, min_flow_lps=0.0) -> BasisFlows:
    """Sanitary design flows: (population × per-capita + demand) × peaking factor.

    Parameters
    ----------
    net : RootedNetwork
    demand_lps : array_like, shape (n,)
        Average flow each site adds, L/s.
    population : array_like, shape (n,), optional
        Persons served at each site (None: none).
    per_capita_lpd : float, default=380.0
        Average flow per person, L/day (about 100 US gal per capita per day,
        Recommended Standards for Wastewater Facilities; from memory).
    peaking : {"fixed", "harmon", "babbitt"}, default="fixed"
    peaking_factor : float, default=1.0
        The factor of ``"fixed"``.
    min_flow_lps : float, default=0.0
        Floor on every link's design flow.

    Returns
    -------
    BasisFlows

    Examples
    --------
    >>> from mainspan.graph.network import rooted_network
    >>> net = rooted_network(2, [0], [1], roots=[0])
    >>> f = sanitary_flows(net, demand_lps=[0.0, 0.0], population=[0, 10000], peaking="harmon")
    >>> round(float(f.average_flow_lps[0]), 2), round(float(f.peaking[0]), 3)
    (43.98, 2.955)
    """
    n = net.n_nodes
    if peaking not in PEAKING_METHODS:
        raise InputError(f"design option 'sanitary_peaking' is {peaking!r}; choose one of {', '.join(PEAKING_METHODS)}")
    dem = accumulate(net, demand_lps)
    pop = np.zeros(n) if population is None else _node_field(
        "population", population, n, fix="give persons served per site (>= 0)")
    pop_acc = accumulate(net, pop)
    avg = pop_acc * per_capita_lpd / 86400.0 + dem
    if peaking == "fixed":
        pf = np.full(net.n_links, float(peaking_factor))
    else:
        equiv_thousands = (pop_acc + dem * 86400.0 / per_capita_lpd) / 1000.0
        pf = (harmon_peaking_factor if peaking == "harmon" else babbitt_peaking_factor)(equiv_thousands)
    q = np.maximum(avg * pf, float(min_flow_lps))
    nan = np.full(net.n_links, np.nan)
    return BasisFlows(q, avg, pf, nan, nan.copy(), nan.copy(), 0, True, [])


def storm_flows(net, *, area_ha, runoff_c, length_m, idf, inlet_time_min=10.0, velocity_fn=None,
                min_flow_lps=0.0, max_iterations=20) -> BasisFlows:
    """Rational-method design flows with times of concentration accumulated downstream.

    Parameters
    ----------
    net : RootedNetwork
        Rooted at the outlet.
    area_ha, runoff_c : array_like, shape (n,)
        Catchment area draining to each site (ha) and its runoff coefficient (0–1).
    length_m : array_like, shape (L,)
        Pipe length of each link (for the travel time).
    idf : sequence of (duration_min, intensity_mm_per_h)
        As returned by :func:`parse_idf`.
    inlet_time_min : float, default=10.0
        Time for runoff to reach each inlet (common practice, 5–15 min).
    velocity_fn : callable, optional
        ``velocity_fn(design_flow_lps) -> full-pipe velocity per link (m/s)``
        of the network sized for those flows.  None: travel times are 0
        (every link sees the inlet-time intensity; one round).
    min_flow_lps : float, default=0.0
    max_iterations : int, default=20

    Returns
    -------
    BasisFlows

    Examples
    --------
    >>> from mainspan.graph.network import rooted_network
    >>> net = rooted_network(2, [0], [1], roots=[0])
    >>> f = storm_flows(net, area_ha=[0, 2.0], runoff_c=[0, 0.5], length_m=[100.0],
    ...                 idf=((5, 80.0), (10, 50.0)))
    >>> round(float(f.design_flow_lps[0]), 1)
    138.9
    """
    n, L = net.n_nodes, net.n_links
    fix = "give each site its catchment area (ha) and runoff coefficient (0 to 1) for gravity_basis 'storm'"
    area = _node_field("area_ha", area_ha, n, fix=fix)
    c = _node_field("runoff_c", runoff_c, n, fix=fix, max_value=1.0)
    tab = parse_idf(idf)
    length = np.asarray(length_m, dtype=np.float64)
    if length.shape != (L,):
        raise InputError(f"design input 'length_m' must have one value per link ({L}), got shape {length.shape}")
    ca_node = area * c
    has = ca_node > 0
    ca = accumulate(net, ca_node)
    notes = []

    def flows(travel):
        _, tc = times_of_concentration_min(net, has, inlet_time_min, travel)
        i = np.where(np.isfinite(tc), idf_intensity_mm_per_h(np.where(np.isfinite(tc), tc, tab[0][0]), tab), 0.0)
        q = np.maximum(rational_flow_m3ps(1.0, i, ca) * 1000.0, float(min_flow_lps))
        return q, np.where(np.isfinite(tc), tc, np.nan), np.where(np.isfinite(tc), i, np.nan)

    travel = np.zeros(L)
    q, tc, i = flows(travel)
    it, converged = 1, velocity_fn is None
    prev_q = q
    while velocity_fn is not None:
        v = np.asarray(velocity_fn(q), dtype=np.float64)
        with np.errstate(divide="ignore", invalid="ignore"):
            new_travel = np.where(v > 0, length / np.where(v > 0, v, 1.0) / 60.0, 0.0)
        if np.allclose(new_travel, travel, rtol=1e-9, atol=1e-12):
            converged = True
            break
        if it >= max_iterations:
            break
        travel = new_travel
        prev_q = q
        q, tc, i = flows(travel)
        it += 1
    if not converged:
        q = np.maximum(q, prev_q)
        notes.append(f"storm flows did not settle in {max_iterations} rounds of flows -> sizes -> travel "
                     "times; the larger flows of the last two rounds are used")
    longest = np.nanmax(tc) if np.isfinite(tc).any() else np.nan
    if np.isfinite(longest) and longest > tab[-1][0]:
        notes.append(f"time of concentration reaches {longest:.1f} min, beyond the IDF table's longest "
                     f"duration ({tab[-1][0]:g} min); its last segment is extended")
    nan = np.full(L, np.nan)
    return BasisFlows(q, nan, nan.copy(), tc, i, ca, it, converged, notes)


def check_basis_settings(s):
    """Validate the basis keys of a DesignSettings; return the normalised IDF table (or None)."""
    if s.gravity_basis not in BASES:
        raise InputError(f"design option 'gravity_basis' is {s.gravity_basis!r}; choose one of {', '.join(BASES)}")
    if s.sanitary_peaking not in PEAKING_METHODS:
        raise InputError(f"design option 'sanitary_peaking' is {s.sanitary_peaking!r}; choose one of "
                         f"{', '.join(PEAKING_METHODS)}")
    for name, fix in (("storm_inlet_time_min", "use 10 minutes"),
                      ("storm_min_velocity_mps", "use 0.9 m/s"),
                      ("sanitary_per_capita_lpd", "use 380 L per person per day")):
        v = getattr(s, name)
        try:
            x = float(v)
        except (TypeError, ValueError):
            raise InputError(f"design option '{name}' must be a number, got {v!r}; {fix}") from None
        if not np.isfinite(x) or x < 0 or (x == 0 and name != "storm_min_velocity_mps"):
            raise InputError(f"design option '{name}' must be {'>= 0' if name == 'storm_min_velocity_mps' else '> 0'}, "
                             f"got {v!r}; {fix}")
    return None if s.idf is None else parse_idf(s.idf)


# --- schema9: the node columns the design stage takes from the sites (used by layout, wholecost)
def basis_fields(nodes):
    """The sites' design-basis columns present in *nodes* (catchment area, runoff
    coefficient, population, minimum pressure head), as float arrays."""
    return {k: np.asarray(nodes[k], float) for k in ("area_ha", "runoff_c", "population",
                                                     "min_pressure_m") if k in nodes}
