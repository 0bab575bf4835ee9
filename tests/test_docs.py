"""Docs that cannot drift: doctests run, docstrings name every parameter, README matches CI."""

import doctest
import importlib
import inspect
import os
import pkgutil
import re

import pytest

import mainspan

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
MODULES = sorted(m.name for m in pkgutil.walk_packages(mainspan.__path__, "mainspan.")
                 if not m.name.startswith("mainspan.sample_data"))


@pytest.mark.parametrize("name", MODULES)
def test_doctests(name, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)          # examples may write files
    mod = importlib.import_module(name)
    res = doctest.testmod(mod, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert res.failed == 0


def _public_callables():
    for name in MODULES:
        mod = importlib.import_module(name)
        for attr in getattr(mod, "__all__", ()):
            obj = getattr(mod, attr, None)
            if inspect.isfunction(obj) and obj.__module__ == name and obj.__doc__:
                yield f"{name}.{attr}", obj


@pytest.mark.parametrize("qual,fn", list(_public_callables()), ids=lambda v: v
                         if isinstance(v, str) else "")
def test_documented_parameters_exist(qual, fn):
    # a numpydoc "Parameters" section must not name parameters the function does not take
    doc = inspect.getdoc(fn)
    m = re.search(r"^Parameters\n-+\n(.*?)(?:\n\n[A-Z][a-z]+\n-+\n|\Z)", doc, re.S | re.M)
    if not m:
        return
    named = set()
    for line in m.group(1).splitlines():
        hit = re.match(r"^([A-Za-z_][\w, ]*?)\s*:", line)
        if hit and not line.startswith(" "):
            named |= {p.strip() for p in hit.group(1).split(",")}
    params = set(inspect.signature(fn).parameters)
    if any(p.kind == p.VAR_KEYWORD for p in inspect.signature(fn).parameters.values()):
        return
    assert named <= params, f"{qual}: documented but not in the signature: {named - params}"


def test_readme_test_command_is_what_ci_runs():
    readme = open(os.path.join(ROOT, "README.md")).read()
    ci = open(os.path.join(ROOT, ".ci", "run")).read()
    cmd = "pip install '.[test]' && python -m pytest -q"
    assert cmd in readme and cmd in ci.splitlines()[-1]
    assert "pip install . && mainspan demo demo-out" in readme


@pytest.mark.parametrize("name", ["plan_layout", "read_layout", "read_sites", "sites_from_arrays",
                                  "prim_tree", "certify_tree", "build_candidates",
                                  "run_scenarios", "write_scenarios", "load_project"])
def test_top_level_api_documents_every_parameter(name):
    fn = getattr(mainspan, name)
    doc = inspect.getdoc(fn) or ""
    missing = [p for p in inspect.signature(fn).parameters
               if not re.search(rf"^{p}\b.*:|^[\w, ]*\b{p}\b[\w, ]*:", doc, re.M)]
    assert not missing, f"mainspan.{name}: parameters without a docstring entry: {missing}"
