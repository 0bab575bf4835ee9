"""``mainspan demo OUTDIR``: write the bundled demo inputs and plan them."""

from __future__ import annotations

__all__ = ["add_parser", "cmd_demo"]


def add_parser(sub):
    dm = sub.add_parser("demo", help="write the demo scenario to OUTDIR and plan it")
    dm.add_argument("outdir")
    dm.add_argument("--overwrite", action="store_true", help="replace existing outputs")
    dm.add_argument("--quiet", action="store_true", help="no progress on stderr")
    dm.set_defaults(func=cmd_demo)


def cmd_demo(a):
    from ..demo import run_demo

    return run_demo(a.outdir, overwrite=a.overwrite, quiet=a.quiet)
