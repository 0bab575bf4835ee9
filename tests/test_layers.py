"""The package's layers: each module imports only its own layer and the layers below.

An AST walk of every module under ``mainspan/`` (imports at module level and
inside functions alike); no dependency beyond the standard library.  The
layers read as the pipeline (see DEVELOPERS.md, "Architecture map"):

    base (errors, messages, safeio, plugins, settings, ...) -> sites, ground -> graph
    -> hydraulics -> layouts priced by the design -> execution -> pipeline
    -> writers, report, scenarios -> front ends (cli, demo, qgis)
"""

import ast
import pathlib
import sys

import mainspan

PKG = pathlib.Path(mainspan.__file__).parent

#: Layers, lowest first: module-name prefixes (the longest matching prefix wins).
LAYERS = (
    ("base", ("mainspan", "mainspan.errors", "mainspan.messages", "mainspan.safeio",
              "mainspan.plugins", "mainspan._numba_setup", "mainspan._version",
              "mainspan.versions", "mainspan.settings")),
    ("sites and ground", ("mainspan.sites", "mainspan.ground")),
    ("graph", ("mainspan.graph",)),
    ("hydraulics", ("mainspan.hydraulics",)),
    # the deliberate loop of the pipeline: these layouts ask the design stage to price trees
    ("layouts priced by the design", ("mainspan.graph.wholecost", "mainspan.graph.gravity_layout")),
    ("execution", ("mainspan.execution",)),
    ("pipeline", ("mainspan.pipeline",)),
    ("outputs", ("mainspan.writers", "mainspan.report", "mainspan.scenarios")),
    ("front ends", ("mainspan.cli", "mainspan.demo", "mainspan.qgis", "mainspan.__main__",
                    "mainspan.sample_data")),
)

#: Imports against the layers that are there by design, each inside a function (so
#: importing the lower module never loads the higher one), with the reason.
ALLOWED_UP = {
    # the schema derives its declarations from the stage dataclasses (CostWeights,
    # DesignSettings, WholeCostSettings in graph.tradeoff) and runs their checks, and the builder
    # registry's, at the boundary, before any work
    "mainspan.settings": ("mainspan.ground.costs", "mainspan.hydraulics",
                          "mainspan.graph.tradeoff", "mainspan.graph.candidates"),
    # Layout.write_gpkg / read_layout hand the result to the GeoPackage writer
    "mainspan.pipeline.result": ("mainspan.writers.gpkg",),
    # the price table writes its CSV template with the table writer's safe CSV
    "mainspan.hydraulics.prices": ("mainspan.writers.tables",),
}


def _modules():
    mods = {}
    for p in PKG.rglob("*.py"):
        parts = list(p.relative_to(PKG.parent).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        mods[".".join(parts)] = p
    return mods


def _imports(mods):
    """``module -> {imported mainspan module: True if imported at module level}``."""
    out = {}
    for name, p in mods.items():
        pkg = name.split(".") if p.name == "__init__.py" else name.split(".")[:-1]
        tree = ast.parse(p.read_text(encoding="utf-8"))
        top = {id(n) for n in tree.body}
        # module level: statements of the body, also inside if/try blocks at the top
        for n in tree.body:
            if isinstance(n, (ast.If, ast.Try)):
                top |= {id(x) for x in ast.walk(n) if isinstance(x, (ast.Import, ast.ImportFrom))}
        found = {}
        for node in ast.walk(tree):
            targets = []
            if isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                if node.level:
                    base = pkg[:len(pkg) - (node.level - 1)]
                    target = ".".join(base + ([node.module] if node.module else []))
                else:
                    target = node.module or ""
                targets = [f"{target}.{a.name}" if f"{target}.{a.name}" in mods else target
                           for a in node.names]
            for t in targets:
                if t in mods and t != name:
                    found[t] = found.get(t, False) or id(node) in top
        out[name] = found
    return out


def _layer(module):
    best, size = None, -1
    for i, (_, prefixes) in enumerate(LAYERS):
        for pre in prefixes:
            if (module == pre or module.startswith(pre + ".")) and len(pre) > size:
                best, size = i, len(pre)
    return best


def _allowed(a, b):
    return any((a == src or a.startswith(src + ".")) and
               any(b == t or b.startswith(t + ".") for t in targets)
               for src, targets in ALLOWED_UP.items())


def test_every_module_has_a_layer():
    missing = sorted(m for m in _modules() if _layer(m) is None)
    assert missing == [], f"add these modules to a layer in LAYERS: {missing}"


def test_imports_follow_the_layers():
    bad, eager = [], []
    for a, deps in _imports(_modules()).items():
        for b, at_top in deps.items():
            if _layer(b) <= _layer(a):
                continue
            if not _allowed(a, b):
                bad.append(f"{a} ({LAYERS[_layer(a)][0]}) imports {b} ({LAYERS[_layer(b)][0]})")
            elif at_top:
                eager.append(f"{a} imports {b} at module level")
    assert bad == [], bad
    assert eager == [], eager


def test_nothing_but_the_front_ends_imports_the_cli():
    users = sorted(a for a, deps in _imports(_modules()).items()
                   if any(b == "mainspan.cli" or b.startswith("mainspan.cli.") for b in deps)
                   and not (a == "mainspan.cli" or a.startswith("mainspan.cli.")))
    assert users == ["mainspan.__main__"], users


def test_the_layer_check_sees_a_wrong_import(tmp_path, monkeypatch):
    """The walk itself: an upward import planted in a copy of a low module is reported."""
    mods = _modules()
    fake = tmp_path / "mainspan" / "sites"
    fake.mkdir(parents=True)
    p = fake / "read.py"
    p.write_text(mods["mainspan.sites.read"].read_text(encoding="utf-8")
                 + "\n\ndef _oops():\n    from ..pipeline.layout import plan_layout\n")
    mods["mainspan.sites.read"] = p
    monkeypatch.setattr(sys.modules[__name__], "_modules", lambda: mods)
    deps = _imports(mods)["mainspan.sites.read"]
    assert deps.get("mainspan.pipeline.layout") is False       # found, inside a function
    try:
        test_imports_follow_the_layers()
    except AssertionError as exc:
        assert "mainspan.sites.read (sites and ground) imports mainspan.pipeline.layout" in str(exc)
    else:
        raise AssertionError("the planted upward import was not reported")
