"""Engineering stage: head loss, capacity, sizing against a pipe catalog, checks.

Modules
-------
friction
    Hazen–Williams, Darcy–Weisbach (Colebrook–White, Swamee–Jain), water properties.
catalog
    Pipe catalogs: defaults and CSV reader.
pressure
    Sizing of pressure mains and the hydraulic grade line.
gravity
    Manning flow, minimum grades, the invert walk.
design
    :func:`design_network`, the one call the pipeline makes.
"""

from .catalog import PipeCatalog, default_catalog, default_gravity_catalog, read_catalog
from .design import CAUTION, SYSTEMS, DesignResult, DesignSettings, design_network
from .friction import (
    colebrook_friction,
    darcy_friction,
    darcy_headloss_m,
    hazen_williams_headloss_m,
    swamee_jain_friction,
    water_kinematic_viscosity_m2ps,
)
from .gravity import MIN_SLOPE_TABLE_PCT, depth_ratio_for_flow, full_pipe, max_flow_depth_ratio, min_slope
from .pressure import hydraulic_grade, size_pressure

__all__ = [
    "CAUTION",
    "SYSTEMS",
    "DesignResult",
    "DesignSettings",
    "design_network",
    "PipeCatalog",
    "default_catalog",
    "default_gravity_catalog",
    "read_catalog",
    "colebrook_friction",
    "darcy_friction",
    "darcy_headloss_m",
    "hazen_williams_headloss_m",
    "swamee_jain_friction",
    "water_kinematic_viscosity_m2ps",
    "MIN_SLOPE_TABLE_PCT",
    "depth_ratio_for_flow",
    "full_pipe",
    "max_flow_depth_ratio",
    "min_slope",
    "hydraulic_grade",
    "size_pressure",
]
