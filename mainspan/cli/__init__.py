"""Command line: ``mainspan plan | demo | check | export | report | compare``.

The CLI only parses, calls the library and prints: one thin module per command
(:mod:`~mainspan.cli.plan`, :mod:`~mainspan.cli.check`, :mod:`~mainspan.cli.demo`,
:mod:`~mainspan.cli.export`, :mod:`~mainspan.cli.report`, :mod:`~mainspan.cli.compare`), the
shared options in :mod:`~mainspan.cli.options`, the parser and exit codes in
:mod:`~mainspan.cli.app`.  Nothing else in mainspan imports this package.
"""

from ..messages import print_design as _print_design  # noqa: F401 - older private name
from ..pipeline.preflight import inputs_of as _inputs_of  # noqa: F401 - older private name
from .app import build_parser, main
from .options import _flags_to_settings  # noqa: F401 - used by tests and older callers

__all__ = ["main", "build_parser"]
