"""The ``mainspan`` parser and :func:`main`: exit codes, one-line errors, SIGTERM.

Results and a one-screen summary go to stdout, progress to stderr.  Exit codes: 0 success,
2 bad input (one-line message, no traceback), 1 internal error.
"""

from __future__ import annotations

import os
import sys

from .._version import __version__
from ..errors import DataFileError, InputError, MainspanError
from . import check, compare, demo, export, plan, report
from .options import _Parser

__all__ = ["build_parser", "main"]


def build_parser():
    p = _Parser(prog="mainspan", description="Lay out the cheapest network of mains over real "
                "ground and hand it on to design, CAD and review.")
    p.add_argument("--version", action="version", version=f"mainspan {__version__}")
    p.add_argument("--show-versions", action="store_true",
                   help="print mainspan, Python, numpy, GDAL, PROJ and GEOS versions")
    sub = p.add_subparsers(dest="command", parser_class=_Parser)

    for command in (plan, check, demo, export, report, compare):
        command.add_parser(sub)
    return p


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.show_versions:
        from ..versions import show_versions
        show_versions()
        return 0
    if not getattr(args, "command", None):
        parser.print_help()
        return 2
    old_term = _catch_sigterm()
    try:
        from ..safeio import parse_size, set_memory_limit
        ml = getattr(args, "memory_limit", None)
        set_memory_limit(parse_size(ml) if ml is not None else None)
        return int(args.func(args) or 0)
    except _Terminated:
        print("mainspan: terminated; no output was left half-written", file=sys.stderr)
        return 143
    except (InputError, DataFileError) as exc:
        msg = " ".join(str(exc).split())
        print(f"mainspan: error: {msg}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("mainspan: interrupted", file=sys.stderr)
        return 130
    except MainspanError as exc:
        print(f"mainspan: internal error: {' '.join(str(exc).split())}", file=sys.stderr)
        return 1
    except Exception as exc:  # noqa: BLE001 - last resort, keep it to one line
        if os.environ.get("MAINSPAN_DEBUG"):
            raise
        print(f"mainspan: internal error: {type(exc).__name__}: {exc} (set MAINSPAN_DEBUG=1 "
              "for a traceback and please report it)", file=sys.stderr)
        return 1
    finally:
        _restore_sigterm(old_term)


class _Terminated(BaseException):
    """SIGTERM, raised so that temporary files are removed on the way out."""


def _on_sigterm(signum, frame):
    raise _Terminated()


def _catch_sigterm():
    import signal
    import threading
    if threading.current_thread() is not threading.main_thread():
        return None
    try:
        return signal.signal(signal.SIGTERM, _on_sigterm)
    except (ValueError, OSError):
        return None


def _restore_sigterm(old):
    import signal
    if old is not None:
        try:
            signal.signal(signal.SIGTERM, old)
        except (ValueError, OSError):
            pass
