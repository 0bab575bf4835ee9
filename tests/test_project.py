"""Project files: validation, relative paths, scenario merging."""

import pytest

from mainspan import InputError
from mainspan.settings.project import load_project, plan_kwargs


def write(tmp_path, text):
    p = tmp_path / "project.toml"
    p.write_text(text)
    return p


def test_paths_relative_to_file_and_kwargs(tmp_path):
    p = write(tmp_path, """
[sites]
path = "in/sites.gpkg"
id_field = "id"
[rasters]
terrain = "dem.tif"
[rasters.land_cost]
base = "cost.tif"
[costs]
length = 2.0
climb = 5.0
[candidates]
method = "knn"
k = 5
[tree]
roots = ["P1"]
[design]
system = "pressure"
[output]
gpkg = "out/layout.gpkg"
""")
    proj = load_project(p)
    path, read, plan, out = plan_kwargs(proj.settings_for(None))
    assert path == str(tmp_path / "in" / "sites.gpkg")
    assert read == {"id_field": "id"}
    assert plan["terrain"] == str(tmp_path / "dem.tif")
    assert plan["land_cost"] == {"base": str(tmp_path / "cost.tif")}
    assert plan["weights"] == {"length": 2.0, "climb": 5.0}
    assert plan["candidates"] == "knn" and plan["k"] == 5 and plan["roots"] == ["P1"]
    assert plan["system"] == "pressure"
    assert out["gpkg"] == str(tmp_path / "out" / "layout.gpkg")


@pytest.mark.parametrize("text,needle", [
    ('[sites]\npath = "s.gpkg"\n[candidate]\nk = 3\n', "did you mean [candidates]"),
    ('[sites]\npath = "s.gpkg"\n[costs]\nclimbing = 3\n', "did you mean 'climb'"),
    ('[sites]\npath = "s.gpkg"\n[candidates]\nk = "many"\n', "must be an integer >= 1"),
    ('[sites]\nlayer = "x"\n', "[sites] path is required"),
    ('[sites\npath=1', "not valid TOML"),
    ('[sites]\npath = "s.gpkg"\n[scenarios.a]\ncosts = { lenght = 1.0 }\n', "did you mean 'length'"),
])
def test_invalid_projects_name_the_key(tmp_path, text, needle):
    with pytest.raises(InputError) as ei:
        load_project(write(tmp_path, text))
    assert needle in str(ei.value) and "project.toml" in str(ei.value)


def test_scenarios_override_only_what_differs(tmp_path):
    p = write(tmp_path, """
[sites]
path = "s.gpkg"
[costs]
length = 1.0
climb = 3.0
[scenarios.steep]
description = "climbing is dear"
costs = { climb = 30.0 }
""")
    proj = load_project(p)
    s = proj.settings_for("steep")
    assert s["costs"] == {"length": 1.0, "climb": 30.0}
    assert proj.settings_for(None)["costs"]["climb"] == 3.0
    with pytest.raises(InputError, match="no scenario 'flat'"):
        proj.settings_for("flat")
