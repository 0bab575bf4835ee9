"""Every option of the engineering stage: :class:`DesignSettings`, with its checks.

Moved from :mod:`mainspan.hydraulics.design` (which still exports every name);
the settings schema (:mod:`mainspan.settings.schema`) derives the ``design``
keys from this class's fields and docstring.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ..errors import InputError
from .basis import check_basis_settings
from .catalog import PipeCatalog
from .gravity import MIN_SLOPE_TABLE_PCT
from .pressure import HEADLOSS_METHODS
from .prices import PriceTable, default_prices
from .sizing import SIZING_METHODS

__all__ = ["CAUTION", "SYSTEMS", "DEMAND_MODELS", "DESIGN_BOUNDS", "DesignSettings"]

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

#: The range of each number that the checks of :class:`DesignSettings` enforce on
#: the number alone: ``name -> (lo, hi, lo_open, hi_open)`` (None: unbounded).  The
#: settings schema shows them in ``--help`` and checks them at the boundary;
#: ``tests/test_settings.py`` checks that each is enforced here.  Rules between
#: fields (velocity_min_mps below velocity_max_mps, hydrant hours within network
#: hours, a peaking factor above 1 for the ``peaking`` demand model) stay in the checks.
DESIGN_BOUNDS = {
    "peaking_factor": (0.0, None, True, False),
    "min_flow_lps": (0.0, None, False, False),
    "trench_cost_per_m3": (0.0, None, False, False),
    "trench_side_clearance_m": (0.0, None, False, False),
    "bedding_m": (0.0, None, False, False),
    "water_temperature_c": (0.0, 40.0, False, False),
    "velocity_max_mps": (0.0, None, True, False),
    "headloss_max_m_per_km": (0.0, None, True, False),
    "minor_loss_factor": (0.0, None, False, False),
    "min_pressure_m": (0.0, None, False, False),
    "pressure_cover_m": (0.0, None, False, False),
    "highs_max_links": (0.0, None, False, False),
    "velocity_min_mps": (0.0, None, False, False),
    "valve_closing_time_s": (0.0, None, True, False),
    "energy_pv_per_kw": (0.0, None, False, False),
    "manning_n": (0.0, None, True, False),
    "gravity_min_diameter_mm": (0.0, None, True, False),
    "gravity_min_velocity_mps": (0.0, None, False, False),
    "gravity_cover_m": (0.0, None, False, False),
    "gravity_max_depth_m": (0.0, None, True, False),
    "junction_drop_m": (0.0, None, False, False),
    "access_spacing_m": (0.0, None, True, False),
    "drop_manhole_m": (0.0, None, False, False),
    "lift_efficiency": (0.0, 1.0, True, False),
    "lift_head_allowance_m": (0.0, None, False, False),
    "sanitary_per_capita_lpd": (0.0, None, True, False),
    "storm_inlet_time_min": (0.0, None, True, False),
    "storm_min_velocity_mps": (0.0, None, False, False),
    "operating_probability": (0.0, 1.0, True, False),
    "hydrant_hours_per_day": (0.0, 24.0, True, False),
    "network_hours_per_day": (0.0, 24.0, True, False),
    "quality_of_operation": (0.5, 1.0, False, True),
    "pump_efficiency": (0.0, 1.0, True, False),
    "fitting_min_prominence_m": (0.0, None, False, False),
    "thrust_bend_angle_deg": (0.0, None, False, False),
    "max_service_pressure_m": (0.0, None, True, False),
}


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
