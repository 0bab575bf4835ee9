"""mainspan: the cheapest network of mains over real ground.

Read point sites in any CRS, build candidate links, price them over terrain
and land-cost rasters, grow the cheapest tree from the source with Prim's
algorithm (certified optimal over the candidates), size it as pressure or
gravity mains, and hand it on as GeoPackage, CAD and report files.

Results are preliminary design aids, to be checked by a licensed engineer
against local codes; locate existing services before digging.
"""

from ._version import __version__
from .errors import (CertificateError, DataFileError, DisconnectedError, InputError,
                     MainspanError, OverwriteError)
from .layout import Layout, plan_layout, read_layout
from .sites import Sites, read_sites, sites_from_arrays
from .spanning import Tree, certify_tree, prim_tree
from .candidates import build_candidates
from .versions import show_versions

__all__ = [
    "__version__", "Layout", "Sites", "Tree", "plan_layout", "read_layout", "read_sites",
    "sites_from_arrays", "prim_tree", "certify_tree", "build_candidates", "show_versions",
    "MainspanError", "InputError", "DataFileError", "DisconnectedError", "CertificateError",
    "OverwriteError",
]
