"""The engineering stage: one call that orients, sizes and checks a tree of mains.

:func:`design_network` takes the spanning tree as plain link arrays and
returns per-link and per-node fields, a bill of quantities, a summary and
one line per failed check.  See :class:`DesignSettings` for every option.

Conventions
-----------
* Links are oriented away from the root: ``from_node`` is the end nearer
  the root (the source of a pressure system, the outlet of a gravity
  system).  Links given the other way round are turned (``reversed`` field)
  and their ground profiles flipped.
* Pressure: flow runs from→to; ``hgl_from_m``/``hgl_to_m`` are at those ends.
* Gravity: flow runs to→from; ``invert_up_m`` is at ``to_node`` (upstream)
  and ``invert_down_m`` at ``from_node`` (downstream).
* Pipe length: the surface length for pressure mains (laid at constant
  cover); the true length along the grade line for gravity mains.
* Trench cost = ``trench_cost_per_m3`` × width × depth × length, with width
  = nominal size + 2 × ``trench_side_clearance_m`` and depth to the bottom
  of the bedding (pressure: cover + nominal size + bedding; gravity: mean
  depth to invert along the profile + bedding).  Common practice, no single
  source; prices are placeholders.

Checks
------
Pressure links: ``no_pipe`` (no catalog pipe meets the velocity cap and
head-loss budget; the largest is assigned), ``low_pressure`` (pressure head
below the minimum anywhere along the link's ground profile),
``over_rating`` (the *static* head -- source HGL minus ground, the no-flow
case, which is the highest pressure the pipe sees -- exceeds the pipe's
rating).  Pressure nodes: ``low_pressure``, ``over_rating`` (against the
lowest rating of the links at the node).

Gravity links: ``no_pipe`` (no catalog pipe carries the flow at its minimum
grade at the depth the ground allows: the pipe is steepened to carry it),
``surcharged`` (design flow above the assigned pipe's full capacity),
``too_deep`` (invert deeper than the maximum anywhere along the link: a
lift station or another route is needed), ``adverse_grade`` (grade below the
minimum for the diameter; the invert walk never produces it, the check
guards catalogs and settings), ``low_velocity`` (velocity at the design
flow's normal depth below the minimum -- the full-pipe minimum is already
enforced through the minimum grade; links without flow are not flagged),
``low_cover``, ``smaller_downstream`` (a pipe smaller than one arriving
upstream; the design never produces it, the check guards the rule).
Gravity nodes: ``too_deep``, ``below_outlet`` (mains reach an outlet below
``outlet_invert_m`` and lift stations are off).  Drop manholes and lift
stations are priced structures, not failures (see
:mod:`mainspan.hydraulics.gravity_design`).  A root without links has a NaN
invert.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields, replace
from statistics import NormalDist

import numpy as np

from ..errors import InputError
from ..graph.network import FLOW_FROM_TO, accumulate, clement_flow_lps, design_flow_lps, rooted_network
from .prices import PriceTable, default_prices
from .catalog import PipeCatalog, default_catalog
from .friction import water_kinematic_viscosity_m2ps
from .gravity import MIN_SLOPE_TABLE_PCT
from .basis import check_basis_settings, sanitary_flows, storm_flows
from .gravity_design import design_gravity
from .pressure import HEADLOSS_METHODS
from .fittings import place_fittings
from .pump import pump_duty
from .pressure_design import design_pressure
from .quantities import Item, bill_of_quantities, pipe_rows
from .sizing import SIZING_METHODS

__all__ = ["CAUTION", "SYSTEMS", "DesignSettings", "DesignResult", "design_network"]

#: Systems :func:`design_network` can design.
SYSTEMS = ("pressure", "gravity")

CAUTION = (
    "These results are preliminary design aids: have them checked by a licensed engineer against local codes and "
    "utility standards before use. Locate existing services before any digging. Trenches deeper than about 1.5 m "
    "need shoring or battering under most safety rules."
)


@dataclass(frozen=True)
class DesignSettings:
    """Every option of the engineering stage, with defaults.

    Common
    ------
    peaking_factor : float, default=1.0
        Design flow = peaking_factor × accumulated demand.
    min_flow_lps : float, default=0.0
        Floor on every link's design flow.
    trench_cost_per_m3 : float or None, default=None
        A flat excavation price per m³ at every depth, overriding the price
        table's depth bands; None uses ``prices``.
    prices : PriceTable or None, default=None
        Unit prices for trenches (excavation by depth band, shoring, bedding,
        reinstatement), fittings, structures, pump stations and energy; None:
        :func:`mainspan.hydraulics.prices.default_prices` (invented placeholders).  Pipe
        supply and lay stays in the catalog.
    trench_side_clearance_m : float, default=0.3
        Working space each side of the pipe (common practice).
    bedding_m : float, default=0.1
        Bedding below the pipe (common practice).

    Pressure mains
    --------------
    pressure_catalog : PipeCatalog or None, default=None
        None: :func:`default_catalog` (PE100 SDR11 PN16).
    headloss_method : {"colebrook", "swamee_jain", "hazen_williams"}, default="colebrook"
    water_temperature_c : float, default=20.0
        For the viscosity (0–40 °C).
    velocity_max_mps : float, default=1.5
        Velocity cap (≈ 5 ft/s, common practice).
    headloss_max_m_per_km : float or None, default=10.0
        Head-loss gradient budget (common practice for distribution mains,
        no single source); None disables it.
    minor_loss_factor : float, default=0.1
        Minor losses as a fraction of friction loss (common practice).
    min_pressure_m : float, default=14.0
        Minimum service pressure head (20 psi, Recommended Standards for
        Water Works §8.2.1).
    source_head_m : None, float or tuple of float, default=None
        HGL at each source, m above datum; None solves the lowest HGL per
        source meeting ``min_pressure_m`` everywhere.
    pressure_cover_m : float, default=0.9
        Cover over pressure mains, for the trench (common practice).

    Pressure sizing (see :mod:`mainspan.hydraulics.sizing`)
    -------------------------------------------------------
    sizing : {"least-cost", "rule"}, default="least-cost"
        "least-cost": the pipes of least pipe + trench cost (+ energy present
        value when ``source_head_m`` is None) meeting every node's minimum
        pressure, class and velocity limits; "rule": the cheapest pipe within
        ``velocity_max_mps`` and ``headloss_max_m_per_km`` (the budget applies
        to this rule only).
    sizing_split : bool, default=True
        Allow two consecutive sizes along one link (the linear-programming
        form of branched-network sizing; Karmeli, Gadish & Meyers, 1968).
    sizing_monotone : bool, default=False
        Pipe size (nominal) never increases downstream.
    sizing_solver : {"auto", "tree", "highs"}, default="auto"
        "tree": the exact tree method (split, non-monotone) -- used
        otherwise with a stated bound; "highs": scipy's HiGHS (MILP for
        one pipe per link or monotone sizes); "auto": the tree method where
        it is exact, HiGHS up to ``highs_max_links`` links otherwise.
    highs_max_links : int, default=2000
    velocity_min_mps : float, default=0.0
        Least velocity at design flow (0: no limit; 0.3 m/s is a common
        self-cleansing figure, no single source).
    surge_check : bool, default=True
        Add the Joukowsky surge (Korteweg wave speed) to the static head in
        the pressure-class check.
    valve_closing_time_s : float or None, default=None
        None: sudden closure (full Joukowsky rise); a time scales the rise by
        ``(2L/a)/t`` when slower than the pipeline period (Michaud).
    energy_pv_per_kw : float or None, default=None
        Present value of running one kW of shaft power over the design life;
        None: from the price table when it has energy prices, else 0.15 per
        kWh × 2000 h/yr over 20 years at 6 % (invented placeholders).

    Gravity mains
    -------------
    gravity_catalog : PipeCatalog or None, default=None
        None: :func:`default_gravity_catalog` (200–900 mm).
    manning_n : float, default=0.013
        Used for pipes whose catalog n is missing (Recommended Standards for
        Wastewater Facilities).
    gravity_min_diameter_mm : float, default=200.0
        Smallest nominal size allowed (8 in, same standard).
    gravity_min_velocity_mps : float, default=0.6
        Minimum velocity flowing full (2 ft/s, same standard); also the
        self-cleansing check at design flow.
    gravity_min_slope_table_pct : tuple of (mm, %) pairs, default=MIN_SLOPE_TABLE_PCT
        Minimum slope by nominal diameter (same standard).
    gravity_cover_m : float, default=0.9
        Minimum cover over the crown (common practice; local codes differ).
    gravity_max_depth_m : float, default=6.0
        Deeper than this (to invert) flags ``too_deep`` (lift station).
    junction_drop_m : float, default=0.03
        Invert drop across a junction (common practice).
    access_spacing_m : float, default=120.0
        Maximum distance between access points (400 ft, same standard).
        Access points go where the grade breaks (dips and crests of the
        ground) and wherever this spacing needs one; the spacing never
        changes the inverts at the nodes.
    drop_manhole_m : float, default=0.6
        A junction where an incoming invert is more than this above the
        outgoing one is a drop manhole, flagged and priced (24 in: Recommended
        Standards for Wastewater Facilities, from memory for the clause).
    outlet_invert_m : None, float or tuple of float, default=None
        Fixed invert at each outlet (receiving water level), m above datum:
        mains arriving lower are lifted there, or flagged ``below_outlet``.
    lift_stations : bool, default=True
        Allow lift stations where the gravity main would be too deep or where
        lifting costs less than the deeper trench (priced; not a failure).
    lift_efficiency : float, default=0.6
        Wire-to-water efficiency of lift pumps (common practice for small
        sewage pumps, no single source).
    lift_head_allowance_m : float, default=1.5
        Pump head above the static lift: losses in the short rising main and
        the wet-well operating range (common practice, no single source).

    Pressure demand, pump and fittings
    ----------------------------------
    demand_model : {"continuous", "clement", "peaking"}, default="continuous"
        How pressure-main design flows follow from the site demands:
        ``continuous`` -- every site draws its demand at once (× the
        ``peaking_factor``, 1 by default); ``clement`` -- on-demand
        irrigation, the demand of each site is its hydrant's nominal
        discharge and each link carries Clément's first formula over the
        hydrants downstream (:func:`mainspan.graph.network.clement_flow_lps`);
        ``peaking`` -- water supply, the accumulated demand × a
        ``peaking_factor`` that must then be > 1.
    operating_probability : float or None, default=None
        Clément's r, the share of time a hydrant is open; None:
        ``hydrant_hours_per_day / network_hours_per_day``.
    hydrant_hours_per_day : float, default=6.0
        Hours a hydrant must run a day at peak demand (placeholder; from
        the crop water need and the hydrant discharge).
    network_hours_per_day : float, default=18.0
        Hours a day the network is available (common practice, 16–22 h).
    quality_of_operation : float, default=0.95
        Probability that the design flow is not exceeded; U is its standard
        normal quantile (0.95 -> 1.645).
    pump_efficiency : float, default=0.75
        Wire-to-water efficiency of pump and motor (common practice).
    pump_sump_m : None, float or tuple of float, default=None
        Water level the pump lifts from at each source, m above datum;
        None: the ground at the source.
    fitting_min_prominence_m : float, default=1.0
        Smallest rise and fall around a high or low point for an air valve
        or washout (common practice, no single source).
    thrust_bend_angle_deg : float, default=11.25
        Bends deflecting more get a thrust block (the smallest standard
        bend; common practice).
    max_service_pressure_m : float or None, default=None
        Pressure head above which a pressure-reducing valve is placed;
        None places none.
    surface_raster : str or None, default=None
        A land-use class raster (e.g. the demo's ``landuse.tif``): the
        trench reinstatement of each link is priced by the length-weighted
        mean of the price table's rates for the classes it crosses (codes
        not listed and nodata: the ``default`` class).  Read by
        :func:`mainspan.pipeline.layout.plan_layout`; ``design_network`` takes the
        crossings as ``surface_share``.

    Gravity design basis (see :mod:`mainspan.hydraulics.basis`)
    -----------------------------------------------------------
    gravity_basis : {"sanitary", "storm"}, default="sanitary"
        Where gravity design flows come from; also sets the self-cleansing
        velocity and the LandXML ``pipeNetType``.
    sanitary_peaking : {"fixed", "harmon", "babbitt"}, default="fixed"
        Peaking of sanitary flows; "fixed" uses ``peaking_factor``.
    sanitary_per_capita_lpd : float, default=380.0
        Average sewage flow per person, L/day (≈ 100 US gal per capita per
        day, Recommended Standards for Wastewater Facilities; from memory).
    idf : sequence of (duration_min, intensity_mm_per_h) pairs, dict or None, default=None
        Rainfall intensity–duration table for ``storm`` (a project file's
        ``[design.idf]`` with lists ``duration_min`` and
        ``intensity_mm_per_h``); interpolated log-log.
    storm_inlet_time_min : float, default=10.0
        Inlet time of every catchment, min (common practice, 5–15 min).
    storm_min_velocity_mps : float, default=0.9
        Self-cleansing velocity of storm drains flowing full, replacing
        ``gravity_min_velocity_mps`` under ``storm`` (3 ft/s; from memory,
        ASCE/WPCF sewer design manual).
    """

    peaking_factor: float = 1.0
    min_flow_lps: float = 0.0
    trench_cost_per_m3: float | None = None
    prices: PriceTable | None = None
    trench_side_clearance_m: float = 0.3
    bedding_m: float = 0.1
    pressure_catalog: PipeCatalog | None = None
    headloss_method: str = "colebrook"
    water_temperature_c: float = 20.0
    velocity_max_mps: float = 1.5
    headloss_max_m_per_km: float | None = 10.0
    minor_loss_factor: float = 0.1
    min_pressure_m: float = 14.0
    source_head_m: float | tuple | None = None
    pressure_cover_m: float = 0.9
    # --- pressure sizing (size11) ---
    sizing: str = "least-cost"
    sizing_split: bool = True
    sizing_monotone: bool = False
    sizing_solver: str = "auto"
    highs_max_links: int = 2000
    velocity_min_mps: float = 0.0
    surge_check: bool = True
    valve_closing_time_s: float | None = None
    energy_pv_per_kw: float | None = None
    # --- end pressure sizing ---
    gravity_catalog: PipeCatalog | None = None
    manning_n: float = 0.013
    gravity_min_diameter_mm: float = 200.0
    gravity_min_velocity_mps: float = 0.6
    gravity_min_slope_table_pct: tuple = MIN_SLOPE_TABLE_PCT
    gravity_cover_m: float = 0.9
    gravity_max_depth_m: float = 6.0
    junction_drop_m: float = 0.03
    access_spacing_m: float = 120.0
    drop_manhole_m: float = 0.6
    outlet_invert_m: float | tuple | None = None
    lift_stations: bool = True
    lift_efficiency: float = 0.6
    lift_head_allowance_m: float = 1.5
    # --- gravity design basis (mainspan.hydraulics.basis) ---
    gravity_basis: str = "sanitary"
    sanitary_peaking: str = "fixed"
    sanitary_per_capita_lpd: float = 380.0
    idf: tuple | dict | None = None
    storm_inlet_time_min: float = 10.0
    storm_min_velocity_mps: float = 0.9
    # --- end of the design basis ---
    # --- pressure demand, pump and fittings (price11) ---
    demand_model: str = "continuous"
    operating_probability: float | None = None
    hydrant_hours_per_day: float = 6.0
    network_hours_per_day: float = 18.0
    quality_of_operation: float = 0.95
    pump_efficiency: float = 0.75
    pump_sump_m: float | tuple | None = None
    fitting_min_prominence_m: float = 1.0
    thrust_bend_angle_deg: float = 11.25
    max_service_pressure_m: float | None = None
    surface_raster: str | None = None
    # --- end of pressure demand, pump and fittings ---

    def price_table(self) -> PriceTable:
        """The prices in force: ``prices`` (or the defaults), with ``trench_cost_per_m3`` applied."""
        p = self.prices if self.prices is not None else default_prices()
        if self.trench_cost_per_m3 is not None:
            p = replace(p, excavation_depth_to_m=(np.inf,), excavation_per_m3=(float(self.trench_cost_per_m3),))
        return p

    def __post_init__(self):
        object.__setattr__(self, "idf", check_basis_settings(self))  # the design basis keys
        _check_pressure_extras(self)  # demand model, pump and fittings keys
        rules = {
            "peaking_factor": ("> 0", "use 1.0 for no peaking"),
            "min_flow_lps": (">= 0", "use 0 for no floor"),
            "trench_side_clearance_m": (">= 0", "give the working space each side in metres"),
            "bedding_m": (">= 0", "give the bedding depth in metres"),
            "velocity_max_mps": ("> 0", "set a positive velocity"),
            "minor_loss_factor": (">= 0", "use 0 to ignore minor losses"),
            "min_pressure_m": (">= 0", "give the minimum pressure head in metres"),
            "pressure_cover_m": (">= 0", "give the cover in metres"),
            "manning_n": ("> 0", "use 0.013 for sewer pipe"),
            "gravity_min_diameter_mm": ("> 0", "use 200 mm"),
            "gravity_min_velocity_mps": (">= 0", "use 0.6 m/s"),
            "gravity_cover_m": (">= 0", "give the minimum cover in metres"),
            "gravity_max_depth_m": ("> 0", "give the deepest invert allowed in metres"),
            "junction_drop_m": (">= 0", "use 0.03 m"),
            "access_spacing_m": ("> 0", "use 120 m"),
            "drop_manhole_m": (">= 0", "use 0.6 m"),
            "lift_efficiency": ("> 0", "use 0.6"),
            "lift_head_allowance_m": (">= 0", "use 1.5 m"),
        }
        for name, (rule, fix) in rules.items():
            _check_number(name, getattr(self, name), rule, fix)
        if self.trench_cost_per_m3 is not None:
            _check_number("trench_cost_per_m3", self.trench_cost_per_m3, ">= 0", "give a price per cubic metre, or None for the price table")
        if self.prices is not None and not isinstance(self.prices, PriceTable):
            raise InputError(f"design option 'prices' must be a PriceTable or None, got {type(self.prices).__name__}; use read_prices(path)")
        if self.headloss_max_m_per_km is not None:
            _check_number("headloss_max_m_per_km", self.headloss_max_m_per_km, "> 0", "give m per km, or None to disable")
        t = self.water_temperature_c
        _check_number("water_temperature_c", t, ">= 0", "give the water temperature in °C (0 to 40)")
        if t > 40:
            raise InputError(f"design option 'water_temperature_c' must be <= 40 °C, got {t}; the viscosity correlation covers 0 to 40 °C")
        if self.headloss_method not in HEADLOSS_METHODS:
            raise InputError(
                f"design option 'headloss_method' is '{self.headloss_method}'; choose one of {', '.join(HEADLOSS_METHODS)}"
            )
        if self.lift_efficiency > 1:
            raise InputError(f"design option 'lift_efficiency' must be <= 1, got {self.lift_efficiency}; use 0.6")
        if not isinstance(self.lift_stations, (bool, np.bool_)):
            raise InputError(f"design option 'lift_stations' must be true or false, got {self.lift_stations!r}")
        if self.outlet_invert_m is not None:
            vals = np.atleast_1d(np.asarray(self.outlet_invert_m, dtype=np.float64))
            if vals.ndim != 1 or not np.all(np.isfinite(vals)):
                raise InputError(
                    f"design option 'outlet_invert_m' must be a number or one number per outlet, got {self.outlet_invert_m!r}; "
                    "give the invert in metres above datum, or None"
                )
        if self.source_head_m is not None:
            vals = np.atleast_1d(np.asarray(self.source_head_m, dtype=np.float64))
            if vals.ndim != 1 or not np.all(np.isfinite(vals)):
                raise InputError(
                    f"design option 'source_head_m' must be a number or one number per source, got {self.source_head_m!r}; "
                    "give the HGL in metres above datum, or None to solve it"
                )
        # --- pressure sizing (size11) ---
        if self.sizing not in SIZING_METHODS:
            raise InputError(f"design option 'sizing' is {self.sizing!r}; choose one of {', '.join(SIZING_METHODS)}")
        if self.sizing_solver not in ("auto", "tree", "highs"):
            raise InputError(f"design option 'sizing_solver' is {self.sizing_solver!r}; choose auto, tree or highs")
        for name in ("sizing_split", "sizing_monotone", "surge_check"):
            if not isinstance(getattr(self, name), (bool, np.bool_)):
                raise InputError(f"design option '{name}' must be true or false, got {getattr(self, name)!r}")
        _check_number("highs_max_links", self.highs_max_links, ">= 0", "give a number of links")
        _check_number("velocity_min_mps", self.velocity_min_mps, ">= 0", "use 0 for no lower limit")
        if self.velocity_min_mps >= self.velocity_max_mps:
            raise InputError(f"design option 'velocity_min_mps' ({self.velocity_min_mps}) must be below "
                             f"'velocity_max_mps' ({self.velocity_max_mps}); lower it or use 0")
        for name in ("valve_closing_time_s", "energy_pv_per_kw"):
            if getattr(self, name) is not None:
                _check_number(name, getattr(self, name), "> 0" if name == "valve_closing_time_s" else ">= 0",
                              "give a number, or None for the default")
        # --- end pressure sizing ---
        tab = np.asarray(self.gravity_min_slope_table_pct, dtype=np.float64)
        if tab.ndim != 2 or tab.shape[1] != 2 or tab.shape[0] < 1 or not np.all(np.isfinite(tab)) or np.any(tab <= 0):
            raise InputError(
                "design option 'gravity_min_slope_table_pct' must be pairs of (diameter_mm, slope_pct) > 0, "
                f"got {self.gravity_min_slope_table_pct!r}; give e.g. ((200, 0.4), (250, 0.28))"
            )
        for name in ("pressure_catalog", "gravity_catalog"):
            cat = getattr(self, name)
            if cat is not None and not isinstance(cat, PipeCatalog):
                raise InputError(f"design option '{name}' must be a PipeCatalog or None, got {type(cat).__name__}; use read_catalog(path)")


    def energy_pv_per_kw_value(self) -> float:
        """Present value of one kW of shaft power run over the design life (see ``energy_pv_per_kw``)."""
        if self.energy_pv_per_kw is not None:
            return float(self.energy_pv_per_kw)
        table = getattr(self, "price_table", None)
        if table is not None:
            return float(np.asarray(table().energy_cost_pv(1.0)))
        years, rate = 20, 0.06
        return 0.15 * 2000.0 * (1.0 - (1.0 + rate) ** -years) / rate


#: Demand models of pressure mains (DesignSettings.demand_model).
DEMAND_MODELS = ("continuous", "clement", "peaking")


def _check_pressure_extras(s):
    if s.demand_model not in DEMAND_MODELS:
        raise InputError(f"design option 'demand_model' is {s.demand_model!r}; choose one of {', '.join(DEMAND_MODELS)}")
    if s.demand_model == "peaking" and not (isinstance(s.peaking_factor, (int, float)) and s.peaking_factor > 1):
        raise InputError(f"design option 'demand_model' is 'peaking' but 'peaking_factor' is {s.peaking_factor}; "
                         "give the water-supply peaking factor (> 1), e.g. --design peaking_factor=2.5")
    for name in ("hydrant_hours_per_day", "network_hours_per_day", "pump_efficiency"):
        _check_number(name, getattr(s, name), "> 0", "give a positive number")
    if s.hydrant_hours_per_day > s.network_hours_per_day or s.network_hours_per_day > 24:
        raise InputError(f"design options 'hydrant_hours_per_day' ({s.hydrant_hours_per_day}) and 'network_hours_per_day' "
                         f"({s.network_hours_per_day}) must satisfy 0 < hydrant <= network <= 24")
    if s.operating_probability is not None:
        _check_number("operating_probability", s.operating_probability, "> 0", "give r in (0, 1]")
        if s.operating_probability > 1:
            raise InputError(f"design option 'operating_probability' must be <= 1, got {s.operating_probability}; give r in (0, 1]")
    q = s.quality_of_operation
    _check_number("quality_of_operation", q, "> 0", "give a probability such as 0.95")
    if not 0.5 <= q < 1:
        raise InputError(f"design option 'quality_of_operation' must be in [0.5, 1), got {q}; use e.g. 0.95 (U = 1.645)")
    if s.pump_efficiency > 1:
        raise InputError(f"design option 'pump_efficiency' must be <= 1, got {s.pump_efficiency}; give a fraction such as 0.75")
    _check_number("fitting_min_prominence_m", s.fitting_min_prominence_m, ">= 0", "give metres, e.g. 1.0")
    _check_number("thrust_bend_angle_deg", s.thrust_bend_angle_deg, ">= 0", "give degrees, e.g. 11.25")
    if s.max_service_pressure_m is not None:
        _check_number("max_service_pressure_m", s.max_service_pressure_m, "> 0", "give metres of head, or None")
    if s.pump_sump_m is not None:
        v = np.atleast_1d(np.asarray(s.pump_sump_m, dtype=np.float64))
        if v.ndim != 1 or not np.all(np.isfinite(v)):
            raise InputError(f"design option 'pump_sump_m' must be a number or one per source, got {s.pump_sump_m!r}")


def _check_number(name, value, rule, fix):
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise InputError(f"design option '{name}' must be a number, got {value!r}; {fix}") from None
    ok = np.isfinite(x) and (x > 0 if rule == "> 0" else x >= 0)
    if not ok:
        raise InputError(f"design option '{name}' must be {rule}, got {value}; {fix}")


@dataclass
class DesignResult:
    """Output of :func:`design_network`.

    Attributes
    ----------
    system : str
        "pressure" or "gravity".
    link_fields : dict of str to ndarray (length L, in the input link order)
        Always: from_node, to_node (oriented), reversed, flow_lps,
        design_flow_lps, flow_direction, pipe, material, diameter_mm (inner),
        nominal_mm, velocity_mps, pipe_length_m, trench_depth_m, pipe_cost,
        trench_cost, land_cost, checks.  Pressure adds headloss_m
        (= friction_loss_m + minor_loss_m), hgl_from_m, hgl_to_m,
        pressure_min_m, rating_m, surge_head_m, and for a link split between
        two sizes pipe_2, diameter_2_mm, velocity_2_mps and length_2_m (the
        downstream length; "", NaN, NaN and 0 when not split -- pipe,
        diameter_mm, nominal_mm and velocity_mps then describe the upstream,
        larger pipe, rating_m is the lower rating, surge_head_m the larger
        surge and the costs cover both lengths).  Gravity adds
        manning_n, invert_up_m, invert_down_m, slope_pct, min_slope_pct,
        depth_max_m, cover_min_m, capacity_lps, velocity_full_mps,
        depth_ratio, n_access_points, n_grade_breaks, outer_mm.  With
        ``surface_share``: reinstatement_per_m2.
    node_fields : dict of str to ndarray (length n)
        Always: hops_to_root, checks.  Pressure: hgl_m, pressure_head_m,
        static_head_m, min_pressure_m.  Gravity: invert_m, depth_m, structure ("manhole",
        "drop manhole", "lift station", "outlet"), drop_m, lift_m.
    quantities : dict of str to ndarray
        Bill of quantities (:mod:`mainspan.hydraulics.quantities`): one row
        per catalog pipe used, then priced items (fittings, structures,
        pump station, energy present value), then a final "TOTAL" row:
        category, item, unit, quantity, unit_cost, pipe, material,
        nominal_mm, inner_mm, count, length_m, pipe_cost, trench_cost,
        land_cost, total_cost.
    access_points : dict of str to ndarray
        Gravity only (empty arrays otherwise): link, chainage_m (from the
        link's from_node), x, y, ground_m, invert_m; kind ("grade break",
        "spacing" inside links; "drop manhole", "lift station" at nodes),
        node, depth_m, drop_m, lift_m, power_kw.
    summary : dict
        Totals, source heads or outlet inverts, counts of failing checks by
        kind (``failing_checks``), ``notes`` and the ``caution`` text.
    failures : list of str
        One line per failed check naming the link or node.
    caution : str
        The caution text.
    fittings : dict of str to ndarray
        Pressure only (empty arrays otherwise), one row per fitting
        (:mod:`mainspan.hydraulics.fittings`): type, size_mm, x, y, link,
        chainage_m, node.
    """

    system: str
    link_fields: dict
    node_fields: dict
    quantities: dict
    access_points: dict
    summary: dict
    failures: list = field(default_factory=list)
    caution: str = CAUTION
    fittings: dict = field(default_factory=dict)


def _float_array(name, value, shape, *, allow_nan=False, min_value=None, strict=False):
    try:
        arr = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(f"design input '{name}' must be numeric; pass a float array") from None
    if arr.shape != shape:
        raise InputError(f"design input '{name}' must have shape {shape}, got {arr.shape}; pass one value per entry")
    bad = ~np.isfinite(arr)
    if allow_nan:
        bad &= ~np.isnan(arr)
    if min_value is not None:
        with np.errstate(invalid="ignore"):
            bad |= (arr <= min_value) if strict else (arr < min_value)
    idx = np.flatnonzero(bad)
    if idx.size:
        rule = "finite" if min_value is None else f"finite and {'>' if strict else '>='} {min_value}"
        raise InputError(f"design input '{name}' entry {idx[0]} is {arr[idx[0]]}; it must be {rule}")
    return arr


def _oriented_profiles(net, length_m, ground, profile_offsets, profile_station_m, profile_ground_m):
    """Per-link profile CSR, stations from the oriented from_node, node grounds at both ends, sorted."""
    L = net.n_links
    a, b = net.from_node, net.to_node
    if profile_offsets is None:
        off = np.arange(0, 2 * L + 1, 2, dtype=np.int64)
        st = np.empty(2 * L)
        st[0::2], st[1::2] = 0.0, length_m
        gr = np.empty(2 * L)
        gr[0::2], gr[1::2] = ground[a], ground[b]
        return off, st, gr
    off_in = np.asarray(profile_offsets, dtype=np.int64)
    if off_in.shape != (L + 1,) or off_in[0] != 0 or np.any(np.diff(off_in) < 0):
        raise InputError(
            f"design input 'profile_offsets' must be {L + 1} non-decreasing offsets starting at 0; pass the CSR offsets of the link profiles"
        )
    total = int(off_in[-1])
    st_in = _float_array("profile_station_m", profile_station_m, (total,), min_value=0.0)
    gr_in = _float_array("profile_ground_m", profile_ground_m, (total,))
    link = np.repeat(np.arange(L), np.diff(off_in))
    tol = 1e-6 * np.maximum(length_m, 1.0)
    over = np.flatnonzero(st_in > length_m[link] + tol[link])
    if over.size:
        k = link[over[0]]
        raise InputError(
            f"profile station {st_in[over[0]]} m of link {k} is beyond its plan length {length_m[k]} m; stations run from from_node along the link"
        )
    st_in = np.where(net.reversed[link], length_m[link] - st_in, st_in)
    inner = (st_in > tol[link]) & (st_in < length_m[link] - tol[link])
    link_i, st_i, gr_i = link[inner], st_in[inner], gr_in[inner]
    st_all = np.concatenate([np.zeros(L), length_m, st_i])
    gr_all = np.concatenate([ground[a], ground[b], gr_i])
    link_all = np.concatenate([np.arange(L), np.arange(L), link_i])
    srt = np.lexsort((st_all, link_all))
    off = np.zeros(L + 1, np.int64)
    np.cumsum(np.bincount(link_all, minlength=L), out=off[1:])
    return off, st_all[srt], gr_all[srt]


def design_network(
    system,
    *,
    xy,
    elevation_m,
    demand_lps,
    node_id,
    from_node,
    to_node,
    length_m,
    surface_length_m,
    roots,
    profile_offsets=None,
    profile_station_m=None,
    profile_ground_m=None,
    land_cost=None,
    settings: DesignSettings | None = None,
    area_ha=None,
    runoff_c=None,
    population=None,
    min_pressure_m=None,
    surface_share=None,
    existing_link=None,
) -> DesignResult:
    """Orient, size and check a tree of pressure or gravity mains.

    Parameters
    ----------
    system : {"pressure", "gravity"}
    xy : array_like, shape (n, 2)
        Node coordinates, m (used to place access points).
    elevation_m : array_like, shape (n,)
        Ground level at the nodes.  All NaN: pressure design assumes flat
        ground at 0 m (noted in the summary); gravity design refuses.
    demand_lps : array_like, shape (n,)
        Demand (pressure) or inflow (gravity) at each node, L/s, >= 0.
    node_id : sequence of str, length n
        User ids, for messages.
    from_node, to_node : array_like of int, shape (L,)
        Tree links (either direction; see module notes).
    length_m, surface_length_m : array_like, shape (L,)
        Plan and surface length of each link.
    roots : array_like of int
        Sources (pressure) or outlets (gravity), one per tree.
    profile_offsets, profile_station_m, profile_ground_m : array_like, optional
        Ground profile along each link in CSR form; stations measured from
        the given ``from_node``.  Without them the ground is taken as
        straight between the end nodes.  The node elevations always give
        the ground at both ends (stations at the very ends are replaced).
    land_cost : array_like, shape (L,), optional
        Land or easement cost per link, carried into the quantities.
    settings : DesignSettings, optional
    area_ha, runoff_c, population : array_like, shape (n,), optional
        Catchment area (ha), runoff coefficient and persons served at each
        node, for the gravity design basis (``storm`` needs the first two;
        ``sanitary`` adds the population's flow to ``demand_lps``).
    min_pressure_m : array_like, shape (n,), optional
        Pressure mains: each node's own minimum pressure head, m (NaN: the
        ``settings.min_pressure_m`` default).
    surface_share : tuple of (offsets, class_code, length_m), optional
        Surface classes each link crosses (CSR by link, in the given link
        order): reinstatement is priced by their length-weighted rate.
    existing_link : array_like of bool, shape (L,), optional
        Links that are existing pipes (:mod:`mainspan.pipeline.extend`): they carry flow and
        are sized (the size they would need) but cost nothing and have no bill row.

    Returns
    -------
    DesignResult

    Raises
    ------
    InputError
        On malformed inputs or settings, naming the field and entry.

    Examples
    --------
    >>> r = design_network("gravity", xy=[[0, 0], [100, 0], [200, 0]], elevation_m=[10.0, 10.5, 11.0],
    ...                    demand_lps=[0.0, 2.0, 3.0], node_id=["out", "a", "b"], from_node=[0, 1], to_node=[1, 2],
    ...                    length_m=[100.0, 100.0], surface_length_m=[100.0, 100.0], roots=[0])
    >>> r.link_fields["flow_lps"].tolist(), r.link_fields["invert_up_m"].round(2).tolist()
    ([5.0, 3.0], [9.36, 9.89])
    >>> r.link_fields["checks"].tolist()
    ['low_velocity', 'low_velocity']

    References
    ----------
    .. [1] Recommended Standards for Water Works, §8.2.1 (minimum pressure).
    .. [2] Recommended Standards for Wastewater Facilities, 2014 (gravity sewers).
    """
    s = DesignSettings() if settings is None else settings
    if not isinstance(s, DesignSettings):
        raise InputError(f"design option 'settings' must be a DesignSettings, got {type(s).__name__}; build one with DesignSettings(...)")
    if system not in SYSTEMS:
        raise InputError(f"design option 'system' is {system!r}; choose 'pressure' or 'gravity'")
    xy = np.asarray(xy, dtype=np.float64)
    if xy.ndim != 2 or xy.shape[1] != 2:
        raise InputError(f"design input 'xy' must have shape (n, 2), got {xy.shape}; pass node coordinates in metres")
    n = xy.shape[0]
    xy = _float_array("xy", xy, (n, 2))
    elev = _float_array("elevation_m", elevation_m, (n,), allow_nan=True)
    demand = _float_array("demand_lps", demand_lps, (n,), min_value=0.0)
    ids = np.asarray(node_id, dtype=object).astype(str)
    if ids.shape != (n,):
        raise InputError(f"design input 'node_id' must have {n} entries, got {ids.size}; pass one id per node")
    net = rooted_network(n, from_node, to_node, roots=roots)
    L = net.n_links
    plan = _float_array("length_m", length_m, (L,), min_value=0.0, strict=True)
    surf = _float_array("surface_length_m", surface_length_m, (L,), min_value=0.0, strict=True)
    land = np.zeros(L) if land_cost is None else _float_array("land_cost", land_cost, (L,), min_value=0.0)
    notes = []
    missing = np.isnan(elev)
    if missing.all():
        if system == "gravity":
            raise InputError("gravity design needs ground elevations: give --terrain or site Z")
        elev = np.zeros(n)
        notes.append("no ground elevations given: flat ground at 0 m assumed for pressures")
    elif missing.any():
        k = int(np.flatnonzero(missing)[0])
        raise InputError(f"node '{ids[k]}' has no ground elevation while others do; give its Z or a terrain raster covering it")
    off, st, gr = _oriented_profiles(net, plan, elev, profile_offsets, profile_station_m, profile_ground_m)
    accumulated = accumulate(net, demand)
    q_lps = design_flow_lps(accumulated, peaking_factor=s.peaking_factor, min_flow_lps=s.min_flow_lps)
    # --- pressure demand model (price11): flow leaving each source, for the pump duty ---
    src_flow = s.peaking_factor * np.bincount(net.root_of, weights=demand, minlength=n)[net.roots]
    if system == "pressure" and s.demand_model == "clement":
        r_op = (s.operating_probability if s.operating_probability is not None
                else s.hydrant_hours_per_day / s.network_hours_per_day)
        u_q = NormalDist().inv_cdf(s.quality_of_operation)
        clem, src_flow = clement_flow_lps(net, demand, r_op, quality_u=u_q)
        q_lps = design_flow_lps(clem, min_flow_lps=s.min_flow_lps)
        notes.append(f"on-demand flows by Clément's first formula: r = {r_op:.3g}, U = {u_q:.3f} "
                     f"({100 * s.quality_of_operation:g} % quality of operation)")
    elif system == "gravity" and s.demand_model == "clement":
        raise InputError("design option 'demand_model' 'clement' is for pressure mains; gravity flows follow 'gravity_basis'")
    # --- end of the pressure demand model ---
    basis = None
    if system == "gravity":   # --- the design basis (mainspan.hydraulics.basis) ---
        if s.gravity_basis == "storm":
            s = replace(s, gravity_min_velocity_mps=s.storm_min_velocity_mps)
            if s.idf is None:
                raise InputError("design option 'idf' is missing: gravity_basis 'storm' needs a rainfall "
                                 "intensity table; give [design.idf] duration_min and intensity_mm_per_h lists")

            def velocity_fn(q):    # full-pipe velocities of the network sized for flows q
                scratch = ({}, {}, {}, {}, [], {})
                design_gravity(s, net, xy, elev, plan, off, st, gr, q, *scratch)
                return scratch[0]["velocity_full_mps"]

            basis = storm_flows(net, area_ha=area_ha, runoff_c=runoff_c, length_m=plan, idf=s.idf,
                                inlet_time_min=s.storm_inlet_time_min, velocity_fn=velocity_fn,
                                min_flow_lps=s.min_flow_lps)
        else:
            basis = sanitary_flows(net, demand_lps=demand, population=population,
                                   per_capita_lpd=s.sanitary_per_capita_lpd, peaking=s.sanitary_peaking,
                                   peaking_factor=s.peaking_factor, min_flow_lps=s.min_flow_lps)
            accumulated = basis.average_flow_lps
        q_lps = basis.design_flow_lps
        notes.extend(basis.notes)
    # --- end of the design basis ---
    links = {
        "from_node": net.from_node,
        "to_node": net.to_node,
        "reversed": net.reversed,
        "flow_lps": accumulated,
        "design_flow_lps": q_lps,
    }
    nodes = {"hops_to_root": net.hops_to_root.copy()}
    if basis is not None:   # design-basis fields and totals
        if s.gravity_basis == "storm":
            links.update(ca_ha=basis.ca_ha, tc_min=basis.tc_min, intensity_mm_per_h=basis.intensity_mm_per_h)
        elif s.sanitary_peaking != "fixed":
            links["peaking_factor"] = basis.peaking
    flags_l: dict[str, np.ndarray] = {}
    flags_n: dict[str, np.ndarray] = {}
    details: list[tuple[str, int, str, str]] = []  # (kind, index, check, text)
    summary = {"system": system, "n_nodes": n, "n_links": L, "n_roots": int(net.roots.size)}
    if basis is not None:
        summary["gravity_basis"] = s.gravity_basis
        if s.gravity_basis == "storm":
            summary.update(storm_rounds=basis.iterations, storm_settled=basis.converged,
                           max_tc_min=float(np.nanmax(basis.tc_min)) if np.isfinite(basis.tc_min).any() else 0.0,
                           peak_outlet_flow_lps=float(q_lps[np.isin(net.from_node, net.roots)].sum()))
        else:
            summary["sanitary_peaking"] = s.sanitary_peaking
    access = {k: np.zeros(0) for k in ("chainage_m", "x", "y", "ground_m", "invert_m")}
    access["link"] = np.zeros(0, np.int64)

    pieces = None
    if system == "pressure":
        # --- pressure branch (size11): mainspan/hydraulics/pressure_design.py ---
        pmin = np.full(n, s.min_pressure_m) if min_pressure_m is None else _float_array(
            "min_pressure_m", min_pressure_m, (n,), allow_nan=True, min_value=0.0)
        pmin = np.where(np.isnan(pmin), s.min_pressure_m, pmin)
        cat_used, pieces, pipe = design_pressure(
            s, net, ids, elev, plan, surf, off, st, gr, q_lps, pmin, links, nodes, flags_l, flags_n, details, summary,
            lambda depth, width, length: _trench_cost(s, depth, width, length), src_flow)
        pipe_len = surf.copy()
        trench_depth = np.full(L, s.pressure_cover_m) + cat_used.nominal_mm[pipe] / 1000.0 + s.bedding_m
        # --- end pressure branch ---
    else:
        grav = design_gravity(s, net, xy, elev, plan, off, st, gr, q_lps, links, nodes, flags_l, flags_n, details,
                              summary, ids=ids)
        cat_used, pipe, pipe_len, trench_depth, access = grav[:5]

    trench_len = surf if system == "pressure" else plan
    prices = s.price_table()
    if pieces is None:  # one pipe per link
        pieces = {"link": np.arange(L), "pipe": pipe, "length_m": pipe_len, "trench_depth_m": trench_depth}
    # lengths of one pipe each (a split pressure link has two): priced piece by piece
    pl_, pp_ = pieces["link"], pieces["pipe"]
    share = pieces["length_m"] / np.where(pipe_len[pl_] > 0, pipe_len[pl_], 1.0)
    piece_width = cat_used.nominal_mm[pp_] / 1000.0 + 2.0 * s.trench_side_clearance_m
    reinstate = None
    if surface_share is not None:   # reinstatement by the land-use classes each link crosses (price11)
        sh_off, sh_cls, sh_len = surface_share
        if np.shape(sh_off) != (L + 1,):
            raise InputError(f"design input 'surface_share' must have {L + 1} offsets, one CSR row per link")
        reinstate = prices.mixed_reinstatement_rate(sh_off, sh_cls, sh_len)
        links["reinstatement_per_m2"] = reinstate
    if system == "gravity":      # priced by depth band station by station along the profile (gravity_design)
        piece_parts = dict(grav.trench_parts)   # one piece per gravity link
        if reinstate is not None:   # gravity_design priced the default class: rescale to the crossed classes
            base = dict(prices.reinstatement_per_m2)["default"]
            piece_parts["reinstatement"] = (piece_parts["reinstatement"] * reinstate / base if base > 0
                                            else reinstate * piece_width * trench_len)
    else:
        piece_parts = prices.trench_parts(pieces["trench_depth_m"], piece_width, trench_len[pl_] * share,
                                          bedding_m=s.bedding_m,
                                          reinstatement_per_m2=None if reinstate is None else reinstate[pl_])
    trench_parts = {k: np.bincount(pl_, weights=v, minlength=L) for k, v in piece_parts.items()}
    piece_trench = sum(piece_parts.values())
    piece_pipe = cat_used.cost_per_m[pp_] * pieces["length_m"]
    piece_land = land[pl_] * share
    # --- exist15: existing pipes are in the ground: no pipe, trench or land price, no bill row ---
    if existing_link is not None:
        new_piece = ~np.asarray(existing_link, bool)[pl_]
        piece_pipe, piece_trench, piece_land = (np.where(new_piece, v, 0.0)
                                                for v in (piece_pipe, piece_trench, piece_land))
        trench_parts = {k: np.bincount(pl_, weights=np.where(new_piece, v, 0.0), minlength=L)
                        for k, v in piece_parts.items()}
        land = np.where(np.asarray(existing_link, bool), 0.0, land)
    else:
        new_piece = np.ones(len(pl_), bool)
    # --- end exist15 ---
    trench_cost = np.bincount(pl_, weights=piece_trench, minlength=L)
    pipe_cost = np.bincount(pl_, weights=piece_pipe, minlength=L)
    links.update(
        pipe=cat_used.name[pipe],
        material=cat_used.material[pipe],
        diameter_mm=cat_used.inner_mm[pipe],
        nominal_mm=cat_used.nominal_mm[pipe],
        pipe_length_m=pipe_len,
        trench_depth_m=trench_depth,
        pipe_cost=pipe_cost,
        trench_cost=trench_cost,
        land_cost=land,
    )
    links["checks"] = _checks(L, flags_l)
    nodes["checks"] = _checks(n, flags_n)
    bill_items = []          # priced rows beyond the pipes: quantities.Item(category, item, unit, quantity, unit_cost)
    fittings = {k: np.zeros(0) for k in ("size_mm", "x", "y", "chainage_m")}
    fittings.update(type=np.zeros(0, object), link=np.zeros(0, np.int64), node=np.zeros(0, object))
    energy_pv = 0.0
    if system == "pressure":   # --- pump duty and fittings (price11) ---
        fittings, energy_pv = _pressure_extras(s, prices, net, xy, elev, plan, off, st, gr, links, summary,
                                               src_flow, ids, bill_items)
    # --- end of pump duty and fittings ---
    if system == "gravity":  # manholes, drop manholes, lift stations and their energy (gravity_design)
        bill_items += grav.items
        energy_pv = grav.energy_cost_pv
    nb = new_piece      # exist15: bill rows of new pipes only
    quantities = bill_of_quantities(pipe_rows(cat_used, pp_[nb], pieces["length_m"][nb], piece_pipe[nb],
                                              piece_trench[nb], piece_land[nb]),
                                    bill_items)
    failures = []
    for kind, i, check, text in sorted(details, key=lambda t: (t[0] != "link", t[1], t[2])):
        if kind == "link":
            # numbered like link_id: 1-based, in the order the links were given
            failures.append(f"link {i + 1} ({ids[net.from_node[i]]}–{ids[net.to_node[i]]}): "
                            f"{check}: {text}")
        else:
            failures.append(f"node '{ids[i]}': {check}: {text}")
    counts = {f"link:{k}": int(v.sum()) for k, v in flags_l.items()}
    counts.update({f"node:{k}": int(v.sum()) for k, v in flags_n.items()})
    summary.update(
        total_pipe_length_m=float(pipe_len.sum()),
        pipe_cost=float(pipe_cost.sum()),
        trench_cost=float(trench_cost.sum()),
        land_cost=float(land.sum()),
        trench_breakdown={k: float(v.sum()) for k, v in trench_parts.items()},
        total_cost=float(quantities["total_cost"][-1]) - energy_pv,
        energy_cost_pv=energy_pv,
        whole_life_cost=float(quantities["total_cost"][-1]),
        prices=prices.describe(),
        prices_placeholder=bool(prices.placeholder),
        failing_checks=counts,
        n_failures=len(failures),
        notes=notes,
        caution=CAUTION,
    )
    return DesignResult(system=system, link_fields=links, node_fields=nodes, quantities=quantities,
                        access_points=access, summary=summary, failures=failures, fittings=fittings)


def _trench_cost(s, depth_m, width_m, length_m):
    """Trench price of pipe lengths by the price table in force (the same rule as the bill of quantities)."""
    parts = s.price_table().trench_parts(depth_m, width_m, length_m, bedding_m=s.bedding_m)
    return sum(parts.values())


def _checks(size, flags):
    out = np.full(size, "", dtype=object)
    for name, mask in flags.items():
        m = np.asarray(mask, bool)
        out[m] = np.where(out[m] == "", name, out[m] + ";" + name)
    out[out == ""] = "ok"
    return out


def _pressure_extras(s, prices, net, xy, elev, plan, off, st, gr, links, summary, src_flow, ids, items):
    """Pump duty and fittings of a pressure design; appends their priced rows to *items*.

    Returns the fittings table and the present value of the pumping energy.
    """
    root_hgl = np.asarray(summary["source_hgl_m"], float)
    sump = elev[net.roots] if s.pump_sump_m is None else np.broadcast_to(
        np.asarray(s.pump_sump_m, float), net.roots.shape)
    if sump.shape != net.roots.shape:
        raise InputError(f"design option 'pump_sump_m' has {np.size(s.pump_sump_m)} values for {net.roots.size} sources; "
                         "give one, or one per source")
    duty = pump_duty(src_flow, root_hgl, sump, prices, efficiency=s.pump_efficiency)
    for j in np.flatnonzero(duty["shaft_kw"] > 0):
        # named by source: two stations of nearly equal power would otherwise merge into one row (size11)
        name = f"pump station {duty['shaft_kw'][j]:.1f} kW" + (f" at {ids[net.roots[j]]}" if net.roots.size > 1 else "")
        items.append(Item("pump station", name, "each", 1.0, float(duty["station_cost"][j])))
    annual = float(duty["annual_kwh"].sum())
    if annual > 0:
        items.append(Item("energy (present value)", f"pumping energy, {prices.years:g} years at "
                          f"{100 * prices.discount_rate:g} %", "kWh/a", annual, prices.energy_per_kwh * prices.pv_factor))
    one = net.roots.size == 1
    pump = {k: (float(v[0]) if one else v.tolist()) for k, v in duty.items()}
    pump["efficiency"] = s.pump_efficiency
    summary["pump"] = pump
    summary["pump_duty"] = "; ".join(
        f"{str(ids[r])}: {duty['flow_lps'][j]:.2f} L/s at {duty['head_m'][j]:.1f} m, {duty['hydraulic_kw'][j]:.1f} kW "
        f"hydraulic, {duty['shaft_kw'][j]:.1f} kW shaft (η {s.pump_efficiency:g}), {duty['annual_kwh'][j]:,.0f} kWh/a"
        for j, r in enumerate(net.roots))
    # pressure head along every profile, for the PRVs
    plink = np.repeat(np.arange(net.n_links), np.diff(off))
    frac = np.where(plan[plink] > 0, st / np.where(plan[plink] > 0, plan[plink], 1.0), 0.0)
    p_s = links["hgl_from_m"][plink] - links["headloss_m"][plink] * frac - gr
    p_max = np.maximum.reduceat(p_s, off[:-1]) if net.n_links else np.zeros(0)
    fit = place_fittings(net, xy, plan, off, st, gr, links["nominal_mm"], links["design_flow_lps"],
                         cover_m=s.pressure_cover_m, min_prominence_m=s.fitting_min_prominence_m,
                         bend_angle_deg=s.thrust_bend_angle_deg, max_service_pressure_m=s.max_service_pressure_m,
                         pressure_max_m=p_max, node_id=ids)
    kinds, sizes = fit["type"].astype(str), fit["size_mm"]
    for kind, size in sorted(set(zip(kinds.tolist(), sizes.tolist()))):
        cnt = int(np.sum((kinds == kind) & (sizes == size)))
        items.append(Item("fitting", f"{kind.replace('_', ' ')} {size:g} mm", "each", float(cnt),
                          float(prices.fitting_cost(kind, size)), float(size)))
    summary["fittings"] = {k: int(np.sum(kinds == k)) for k in ("air_valve", "washout", "isolation_valve",
                                                                 "thrust_block", "prv")}
    return fit, float(duty["energy_cost_pv"].sum())
