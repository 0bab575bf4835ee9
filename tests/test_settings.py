"""The one settings schema: every front end exposes the same settings, bad ones stop early.

Also the import direction of the package: no module imports the CLI, no cycles.
"""

import argparse
import ast
import dataclasses
import pathlib

import numpy as np
import pytest

import mainspan
from mainspan.errors import InputError
from mainspan.settings import all_settings, format_default, setting

from conftest import run_cli

PKG = pathlib.Path(mainspan.__file__).parent
# a section's primary key takes the section's name as its option
PRIMARY = {"sites.path": "--sites", "crs.working": "--crs", "candidates.method": "--candidates",
           "output.gpkg": "--output"}


def _plan_parser(command="plan"):
    from mainspan.cli import build_parser

    sub = next(a for a in build_parser()._actions if isinstance(a, argparse._SubParsersAction))
    return sub.choices[command]


def _cli_settings(parser):
    """``section.key -> [option strings]`` of every schema option of the parser."""
    out = {}
    for act in parser._actions:
        if "__" in act.dest:
            sec, key = act.dest.split("__")
            out.setdefault(f"{sec}.{key}", []).extend(
                o for o in act.option_strings if act.help != argparse.SUPPRESS)
    return out


def test_cli_project_and_run_info_expose_the_same_settings(tmp_path):
    from mainspan.settings.project import _schema

    schema = {s.name: s for s in all_settings()}
    cli = _cli_settings(_plan_parser())
    file_only = {n for n, s in schema.items() if not s.on_cli}
    # the CLI: every setting but the price-table rows, under the key with dashes
    assert set(cli) == set(schema) - file_only
    assert {schema[n].section for n in file_only} == {"prices"}   # tables: --prices FILE
    for name, opts in cli.items():
        key = name.split(".")[1]
        want = PRIMARY.get(name, "--" + key.replace("_", "-"))
        assert want in opts and f"--no-{key.replace('_', '-')}" not in opts or \
            schema[name].kind == "bool", (name, opts)
    # the project file: exactly the same sections and keys
    proj = _schema()
    assert {f"{sec}.{k}" for sec, keys in proj.items() if sec not in ("scenarios", "stability")
            for k in keys} == set(schema)
    # the compare command's own settings: its options and the project's [stability] keys
    from mainspan.settings.schema import COMPARE_SETTINGS
    compare = _cli_settings(_plan_parser("compare"))
    assert {n for n in compare if n.startswith("stability.")} == \
        {s.name for s in COMPARE_SETTINGS}
    assert set(proj["stability"]) == {s.key for s in COMPARE_SETTINGS}
    assert not any(n.startswith("stability.") for n in cli)
    # run_info: every recorded setting under its entry, by its key inside group entries
    s = mainspan.sites_from_arrays([[0, 0], [100, 0], [100, 120], [0, 100]],
                                   crs="EPSG:32633", demand_lps=[0, 1, 1, 1])
    lay = mainspan.plan_layout(s, system="pressure", k=3, candidates="knn")
    info = lay.run_info
    # the whole-cost limits are recorded by the layout they limit
    whole = mainspan.plan_layout(s, system="pressure", layout="whole-cost",
                                 whole_cost={"max_hops": 3}).run_info
    assert "whole_cost_max_hops=3," in whole["whole_cost_settings"]
    assert "whole_cost_settings" not in info
    info = {**whole, **info}
    recorded = [x for x in schema.values() if x.run_info]
    assert {x.section for x in recorded} >= {"sites", "rasters", "costs", "candidates", "tree",
                                             "design"}
    for x in recorded:
        assert x.run_info in info, x.name
        if x.run_info in ("weights", "design_settings", "whole_cost_settings") and \
                x.section != "prices" and x.key != "catalog":
            assert f"{x.key}=" in info[x.run_info], x.name
    assert info["k"] == "3" and info["candidates"] == "knn" and info["system"] == "pressure"


def test_a_new_design_field_appears_everywhere(monkeypatch):
    """Adding a setting is one edit: a new DesignSettings field reaches the CLI, the
    project-file keys and --help with its unit and default."""
    import mainspan.hydraulics as hyd
    import mainspan.settings as st
    from mainspan.settings.project import _schema

    base = hyd.DesignSettings

    @dataclasses.dataclass(frozen=True)
    class Extended(base):
        """Every option.

        Extra
        -----
        valve_spacing_m : float, default=800.0
            Distance between isolation valves.
        """

        valve_spacing_m: float = 800.0

    monkeypatch.setattr(hyd, "DesignSettings", Extended)
    st.schema._all.cache_clear()
    try:
        s = setting("design", "valve_spacing_m")
        assert (s.option, s.unit, s.default, s.kind) == ("--valve-spacing-m", "m", 800.0, "number")
        assert "design.valve_spacing_m" in _cli_settings(_plan_parser())
        assert "valve_spacing_m" in _schema()["design"]
        assert "valve_spacing_m" in st.design_help() and "default 800" in st.design_help()
    finally:
        monkeypatch.undo()
        st.schema._all.cache_clear()
    with pytest.raises(InputError, match="did you mean 'access_spacing_m'"):
        setting("design", "valve_spacing_m")


def test_plan_help_lists_every_design_key_with_unit_and_default(capsys):
    with pytest.raises(SystemExit) as ei:
        run_cli(["plan", "--help"], capsys)
    assert ei.value.code == 0
    text = capsys.readouterr().out
    lines = text.splitlines()
    design = all_settings("design")
    assert len(design) > 25
    for s in design:
        row = next((ln for ln in lines if ln.startswith(f"  {s.key} ")), None)
        assert row is not None, s.key
        assert f"default {format_default(s)}" in row, row
        assert f"[{s.unit or '-'}]" in row, row
        assert s.bounds() in row, row          # the range, where the checks have one
        assert s.option in text
    assert "velocity_max_mps             [m/s] default 1.5; > 0" in text
    assert "quality_of_operation         [-] default 0.95; >= 0.5 and < 1" in text
    # the units come from the names (and the docstring): spot checks
    assert setting("design", "velocity_max_mps").unit == "m/s"
    assert setting("design", "headloss_max_m_per_km").unit == "m/km"
    assert setting("design", "min_flow_lps").unit == "L/s"


@pytest.fixture()
def no_work(monkeypatch):
    """Stage functions that must never run: reading sites, building candidates, pricing."""
    calls = []

    def stage(name):
        def f(*a, **k):
            calls.append(name)
            raise AssertionError(f"{name} ran before the settings were checked")
        return f
    monkeypatch.setattr("mainspan.sites.read.read_sites", stage("read_sites"))
    monkeypatch.setattr("mainspan.graph.candidates.build_candidates", stage("build_candidates"))
    monkeypatch.setattr("mainspan.ground.costs.price_links", stage("price_links"))
    # the stage functions themselves, where plan_layout and the scenarios call them
    for mod, names in (("mainspan.pipeline.layout", ("read_stage", "candidates_stage",
                                                     "price_stage", "elevation_stage",
                                                     "grow_tree", "assemble_layout")),
                       ("mainspan.scenarios.compute", ("candidates_stage", "price_stage")),
                       ("mainspan.scenarios.tasks", ("grow_tree", "assemble_layout"))):
        for name in names:
            monkeypatch.setattr(f"{mod}.{name}", stage(name))
    return calls


def test_bad_values_and_combinations_exit_2_before_any_work(tmp_path, capsys, no_work):
    s = ["--sites", tmp_path / "s.gpkg", "--output", tmp_path / "o.gpkg"]
    p = ["--system", "pressure"]
    cases = [
        ([*s, *p, "--design", "velocity_max_mps=fast"], "option --design velocity_max_mps: the "
         "velocity cap must be a number > 0 in m/s, got 'fast'"),
        ([*s, *p, "--quality-of-operation", "1"], "option --quality-of-operation: the "
         "probability that the design flow is not exceeded must be a number >= 0.5 and < 1"),
        ([*s, *p, "--layout", "whole-cost", "--whole-cost-max-hops", "0"],
         "option --whole-cost-max-hops: must be an integer >= 1, got 0"),
        ([*s, *p, "--layout", "whole-cost", "--whole-cost-alphas", "[0, 2]"],
         "option --whole-cost-alphas: whole-cost option 'alphas' must be numbers in [0, 1]"),
        ([*s, *p, "--velocity-max-mps", "-1"], "option --velocity-max-mps"),
        ([*s, *p, "--design", "headloss_method=darcy"], "one of 'colebrook'"),
        ([*s, *p, "--design", "velocity_cap=2"], "did you mean 'velocity_max_mps'"),
        ([*s, "--layout", "gravity"], "add --system gravity"),
        ([*s, "--system", "gravity"], "--terrain"),
        ([*s, "--climb", "5"], "option --climb"),
        ([*s, "--w-steep", "5", "--steep-slope-pct", "10"], "option --steep-per-m"),
        ([*s, "--k", "0"], "option --k: must be an integer >= 1, got 0"),
        ([*s, "--k", "many"], "option --k: must be an integer"),
        ([*s, "--on-nodata", "maybe"], "one of 'barrier'"),
        ([*s, "--candidates", "delauney"], "Did you mean 'delaunay'"),
        ([*s, "--cost-expression", "a + 1"], "--land-cost"),
        ([*s, "--max-link-m", "-5"], "option --max-link-m: must be a number > 0 in m"),
        ([*s, "--land-cost", "a", "--class-costs", "x=1"], "integer class code"),
    ]
    for args, needle in cases:
        code, out, err = run_cli(["plan", *args], capsys)
        assert code == 2, (args, err)
        assert needle in err, (args, err)
        assert err.count("\n") == 1 and err.startswith("mainspan: error: "), err
        code, out, err = run_cli(["check", *[a for a in args if a not in s[2:]]], capsys)
        assert code == 2 and needle in err, (args, err)
    assert no_work == []


def test_project_file_values_are_checked_with_their_place(tmp_path, capsys, no_work):
    proj = tmp_path / "p.toml"
    proj.write_text('[sites]\npath = "s.gpkg"\n[design]\nsystem = "pressure"\n'
                    'velocity_max_mps = "fast"\n[output]\ngpkg = "o.gpkg"\n')
    code, out, err = run_cli(["plan", proj], capsys)
    assert code == 2 and "[design] velocity_max_mps: the velocity cap must be a number" in err
    proj.write_text('[sites]\npath = "s.gpkg"\n[design]\nsystem = "pressure"\n'
                    'velocity_max_mps = -2.0\n[output]\ngpkg = "o.gpkg"\n')
    code, out, err = run_cli(["plan", proj], capsys)
    assert code == 2 and "p.toml' [design] velocity_max_mps:" in err and "> 0" in err
    # an option overrides the file, and the message names the option
    code, out, err = run_cli(["plan", proj, "--velocity-max-mps", "0"], capsys)
    assert code == 2 and "option --velocity-max-mps" in err
    assert no_work == []


def test_design_bounds_are_the_dataclass_checks():
    """Each range shown in --help and checked at the boundary is one DesignSettings enforces:
    just outside it the dataclass refuses the value, at a closed bound it takes it."""
    from mainspan.hydraulics import DesignSettings
    from mainspan.hydraulics.design_settings import DESIGN_BOUNDS

    fields = {s.key: s for s in all_settings("design")}
    assert len(DESIGN_BOUNDS) > 30 and set(DESIGN_BOUNDS) <= set(fields)
    # cross-field rules a single value can trip at a closed bound
    room = {"hydrant_hours_per_day": {"network_hours_per_day": 24.0},
            "velocity_min_mps": {}, "peaking_factor": {}}
    for name, (lo, hi, lo_open, hi_open) in DESIGN_BOUNDS.items():
        step = 1 if fields[name].kind == "integer" else 1e-6
        for bound, is_open, outside in ((lo, lo_open, -step), (hi, hi_open, step)):
            if bound is None:
                continue
            with pytest.raises(InputError, match=name):
                DesignSettings(**{name: bound + (0 if is_open else outside)})
            if not is_open:
                DesignSettings(**{name: bound, **room.get(name, {})})


def test_compare_stability_checked_before_any_work(tmp_path, capsys, no_work):
    proj = tmp_path / "p.toml"
    proj.write_text('[sites]\npath = "s.gpkg"\n[stability]\nruns = 4\n')
    code, out, err = run_cli(["compare", proj, "--stability", "5000"], capsys)
    assert code == 2 and "option --stability: must be an integer >= 0 and <= 1000, got 5000" \
        in err, err
    code, out, err = run_cli(["compare", proj, "--perturb-pct", "100"], capsys)
    assert code == 2 and "option --perturb-pct: must be a number >= 0 and < 100 in %" in err, err
    proj.write_text('[sites]\npath = "s.gpkg"\n[stability]\nseed = -1\n')
    code, out, err = run_cli(["compare", proj], capsys)
    assert code == 2 and "[stability] seed: must be an integer >= 0, got -1" in err, err
    assert no_work == []
    from mainspan.scenarios.compute import MAX_STABILITY_RUNS
    assert setting_of_compare("runs").hi == MAX_STABILITY_RUNS


def setting_of_compare(key):
    from mainspan.settings.schema import COMPARE_SETTINGS

    return next(s for s in COMPARE_SETTINGS if s.key == key)


def test_scenarios_are_all_checked_before_any_work(tmp_path, no_work):
    from mainspan.scenarios import run_scenarios

    proj = tmp_path / "p.toml"
    proj.write_text('[sites]\npath = "s.gpkg"\n[design]\nsystem = "pressure"\n'
                    '[scenarios.ok]\ncosts = { length = 2.0 }\n'
                    '[scenarios.bad]\ntree = { layout = "gravity" }\n')
    with pytest.raises(InputError, match="scenario 'bad': .*add --system gravity"):
        run_scenarios(proj)
    assert no_work == []


def test_plan_layout_keywords_are_checked_by_the_schema(monkeypatch):
    calls = []
    monkeypatch.setattr("mainspan.graph.candidates.build_candidates",
                        lambda *a, **k: calls.append(1))
    s = mainspan.sites_from_arrays([[0, 0], [100, 0], [0, 100]], crs="EPSG:32633")
    for kw, needle in [
        (dict(system="pressure", design={"velocity_max_mps": "fast"}),
         r"plan_layout\(design\['velocity_max_mps'\]\): the velocity cap must be a number"),
        (dict(k=0), r"plan_layout\(k\): must be an integer >= 1"),
        (dict(layout="gravity"), "add --system gravity"),
        (dict(on_nodata="drop"), "one of 'barrier'"),
        (dict(weights={"climb": 2.0}), r"plan_layout\(weights\['climb'\]\)"),
    ]:
        with pytest.raises(InputError, match=needle):
            mainspan.plan_layout(s, **kw)
    with pytest.raises(InputError, match="settings= or the keywords, not both"):
        from mainspan.settings import PlanSettings
        mainspan.plan_layout(s, PlanSettings.from_kwargs(k=3), k=4)
    assert calls == []


def test_plan_layout_same_layout_from_settings_or_keywords():
    from mainspan.settings import PlanSettings

    rng = np.random.default_rng(3)
    s = mainspan.sites_from_arrays(rng.uniform(0, 500, (40, 2)), crs="EPSG:32633")
    a = mainspan.plan_layout(s, candidates="knn", k=5, weights={"fixed": 3.0})
    ps = PlanSettings.from_sections({"candidates": {"method": "knn", "k": 5},
                                     "costs": {"fixed": 3.0}})
    b = mainspan.plan_layout(s, ps)
    assert np.array_equal(a.link_ends, b.link_ends)
    assert {k: v for k, v in a.run_info.items()} == {k: v for k, v in b.run_info.items()}


def test_old_option_spellings_still_work(capsys):
    from mainspan.cli import _flags_to_settings

    p = _plan_parser()
    a = p.parse_args(["--sites", "s.gpkg", "--out", "o.gpkg", "--w-steep", "4",
                      "--steep-slope-pct", "10", "--merge-within", "0.5", "--root", "A",
                      "--root", "B", "--w-length", "2"])
    sets, origin = _flags_to_settings(a)
    assert sets["costs"] == {"steep_per_m": 4.0, "steep_slope_pct": 10.0, "length": 2.0}
    assert sets["output"]["gpkg"] == "o.gpkg" and sets["tree"]["roots"] == ["A", "B"]
    assert sets["sites"]["merge_within_m"] == 0.5
    help_text = p.format_help()
    assert "--w-steep" not in help_text and "--steep-per-m" in help_text


# ------------------------------------------------------------------ import direction
def _import_graph():
    """``module -> set of mainspan modules it imports`` (module level and in functions)."""
    mods = {}
    for p in PKG.rglob("*.py"):
        parts = list(p.relative_to(PKG.parent).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        mods[".".join(parts)] = p
    graph = {}
    for name, p in mods.items():
        pkg = name.split(".") if p.name == "__init__.py" else name.split(".")[:-1]
        out = set()
        for node in ast.walk(ast.parse(p.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Import):
                out |= {a.name for a in node.names}
            elif isinstance(node, ast.ImportFrom):
                if node.level:
                    base = pkg[:len(pkg) - (node.level - 1)]
                    target = ".".join(base + ([node.module] if node.module else []))
                else:
                    target = node.module or ""
                for a in node.names:
                    sub = f"{target}.{a.name}"
                    out.add(sub if sub in mods else target)
        graph[name] = {t for t in out if t in mods and t != name}
    return graph


def test_no_module_imports_the_cli_and_there_are_no_cycles():
    import networkx as nx

    graph = _import_graph()
    assert len(graph) > 30 and "mainspan.settings" in graph["mainspan.pipeline.layout"]
    users = sorted(m for m, deps in graph.items() if "mainspan.cli" in deps)
    assert users == ["mainspan.__main__"], users       # only the entry point
    g = nx.DiGraph([(a, b) for a, deps in graph.items() for b in deps])
    cycles = list(nx.simple_cycles(g))
    assert cycles == [], cycles[:5]
