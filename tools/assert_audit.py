"""List the tests that pass without checking anything.

Run on demand (it runs the suite once, with assertion counting)::

    python tools/assert_audit.py                      # the whole suite
    python tools/assert_audit.py tests/test_costs.py  # any pytest arguments

A check is a passing ``assert`` statement in a test module or conftest (pytest's
``pytest_assertion_pass`` hook), a call of a ``numpy.testing.assert_*`` function, or a
``pytest.raises`` / ``pytest.warns`` block.  A test that passes with none of these is
listed; the exit status is 1 if there is any, else pytest's own.
"""

from __future__ import annotations

import functools
import os
import sys
from collections import Counter

import pytest


class AssertAudit:
    def __init__(self):
        self.counts = Counter()
        self.current = None
        self.passed = []

    def _count(self):
        if self.current is not None:
            self.counts[self.current] += 1

    def _wrap(self, fn):
        @functools.wraps(fn)
        def counted(*a, **kw):
            self._count()
            return fn(*a, **kw)
        return counted

    def pytest_configure(self, config):
        import numpy.testing as npt

        for name in dir(npt):
            if name.startswith("assert_") and callable(getattr(npt, name)):
                setattr(npt, name, self._wrap(getattr(npt, name)))
        pytest.raises = self._wrap(pytest.raises)
        pytest.warns = self._wrap(pytest.warns)

    def pytest_assertion_pass(self, item, lineno, orig, expl):
        self.counts[item.nodeid] += 1

    @pytest.hookimpl(hookwrapper=True)
    def pytest_runtest_call(self, item):
        self.current = item.nodeid
        yield
        self.current = None

    def pytest_runtest_logreport(self, report):
        if report.when == "call" and report.passed:
            self.passed.append(report.nodeid)


def main(argv=None):
    argv = list(sys.argv[1:] if argv is None else argv)
    # rewritten test modules must not come from a .pyc written without the pass hook
    sys.dont_write_bytecode = True
    os.environ["PYTHONDONTWRITEBYTECODE"] = "1"
    audit = AssertAudit()
    code = pytest.main(["-q", "-p", "no:cacheprovider", "-o", "enable_assertion_pass_hook=true",
                        *argv], plugins=[audit])
    empty = [t for t in audit.passed if audit.counts[t] == 0]
    print(f"\nassert audit: {len(audit.passed)} tests passed, {len(empty)} without a check")
    for t in empty:
        print(f"  no check: {t}")
    return 1 if empty else int(code)


if __name__ == "__main__":
    sys.exit(main())
