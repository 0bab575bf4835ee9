"""The wheel must carry every sub-package and the demo data."""

import os
import tomllib

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def test_every_subpackage_is_listed_in_pyproject():
    with open(os.path.join(ROOT, "pyproject.toml"), "rb") as f:
        listed = set(tomllib.load(f)["tool"]["setuptools"]["packages"])
    found = set()
    for dirpath, dirnames, filenames in os.walk(os.path.join(ROOT, "mainspan")):
        dirnames[:] = [d for d in dirnames if d != "__pycache__"]
        if "__init__.py" in filenames:
            found.add(os.path.relpath(dirpath, ROOT).replace(os.sep, "."))
    assert found - listed == set(), "add these packages to [tool.setuptools] packages"
    assert "mainspan.sample_data" in listed


def test_demo_files_are_package_data():
    from mainspan.demo import DEMO_FILES
    for name in DEMO_FILES:
        assert os.path.exists(os.path.join(ROOT, "sample_data", name)), name
