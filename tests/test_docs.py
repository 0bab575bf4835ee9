"""Docs that cannot drift: doctests run, docstrings name every parameter, README matches CI."""

import doctest
import importlib
import importlib.util
import inspect
import os
import pkgutil
import re

import pytest

import mainspan

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
MODULES = sorted(m.name for m in pkgutil.walk_packages(mainspan.__path__, "mainspan.")
                 if not m.name.startswith("mainspan.sample_data"))
# the QGIS provider modules import QGIS's own Python modules (tests/test_qgis.py runs them)
if importlib.util.find_spec("qgis") is None:
    from mainspan.qgis import QGIS_MODULES
    MODULES = [m for m in MODULES if m not in QGIS_MODULES]


def _n_examples(name):
    mod = importlib.import_module(name)
    return sum(len(t.examples) for t in doctest.DocTestFinder().find(mod, name))


# only modules that have examples: a module without any would pass without testing anything
DOCTEST_MODULES = [name for name in MODULES if _n_examples(name)]


def test_core_modules_have_examples():
    core = {"mainspan.graph.spanning", "mainspan.ground.surfaces", "mainspan.ground.costs", "mainspan.graph.network",
            "mainspan.hydraulics.friction", "mainspan.graph.candidates"}
    assert core <= set(DOCTEST_MODULES), core - set(DOCTEST_MODULES)


@pytest.mark.parametrize("name", DOCTEST_MODULES)
def test_doctests(name, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)          # examples may write files
    mod = importlib.import_module(name)
    res = doctest.testmod(mod, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert res.attempted > 0 and res.failed == 0


def _documented_parameters(fn):
    """Names in the numpydoc "Parameters" section, or None if there is no such section."""
    doc = inspect.getdoc(fn)
    m = re.search(r"^Parameters\n-+\n(.*?)(?:\n\n[A-Z][a-z]+\n-+\n|\Z)", doc, re.S | re.M)
    if not m:
        return None
    named = set()
    for line in m.group(1).splitlines():
        hit = re.match(r"^([A-Za-z_][\w, ]*?)\s*:", line)
        if hit and not line.startswith(" "):
            named |= {p.strip() for p in hit.group(1).split(",")}
    return named


def _public_callables():
    # only functions with a Parameters section and no **kwargs (which may document any
    # keyword): for the others the check below has nothing to compare
    for name in MODULES:
        mod = importlib.import_module(name)
        for attr in getattr(mod, "__all__", ()):
            obj = getattr(mod, attr, None)
            if not (inspect.isfunction(obj) and obj.__module__ == name and obj.__doc__):
                continue
            if any(p.kind == p.VAR_KEYWORD for p in inspect.signature(obj).parameters.values()):
                continue
            if _documented_parameters(obj) is not None:
                yield f"{name}.{attr}", obj


@pytest.mark.parametrize("qual,fn", list(_public_callables()), ids=lambda v: v
                         if isinstance(v, str) else "")
def test_documented_parameters_exist(qual, fn):
    # a numpydoc "Parameters" section must not name parameters the function does not take
    named = _documented_parameters(fn)
    params = set(inspect.signature(fn).parameters)
    assert named, f"{qual}: a Parameters section that names nothing"
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
