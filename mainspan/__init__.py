"""mainspan: the cheapest network of mains over real ground.

Read point sites in any CRS, build candidate links, price them over terrain
and land-cost rasters, grow the cheapest tree from the source with Prim's
algorithm (certified optimal over the candidates), size it as pressure or
gravity mains, and hand it on as GeoPackage, CAD and report files.

Results are preliminary design aids, to be checked by a licensed engineer
against local codes; locate existing services before digging.
"""

from importlib import import_module

from . import _numba_setup

_numba_setup.setup()   # before numba is imported: a cache folder this user can write

from ._version import __version__  # noqa: E402
from .errors import (CertificateError, DataFileError, DisconnectedError,  # noqa: E402
                     InputError, MainspanError, OverwriteError)

# Public names are imported on first use, so ``import mainspan`` stays quick and
# the command line pays only for the stages it runs.
_LAZY = {
    "Layout": "pipeline.layout", "plan_layout": "pipeline.layout", "read_layout": "pipeline.layout",
    "Sites": "sites.read", "read_sites": "sites.read", "sites_from_arrays": "sites.read",
    "Tree": "graph.spanning", "prim_tree": "graph.spanning", "certify_tree": "graph.spanning",
    "build_candidates": "graph.candidates", "show_versions": "versions",
    "run_scenarios": "scenarios", "write_scenarios": "scenarios", "load_project": "settings.project",
}

__all__ = sorted([
    "__version__", *_LAZY,
    "MainspanError", "InputError", "DataFileError", "DisconnectedError", "CertificateError",
    "OverwriteError",
])


def __getattr__(name):
    if name in _LAZY:
        value = getattr(import_module(f".{_LAZY[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'mainspan' has no attribute {name!r}")


def __dir__():
    return __all__
