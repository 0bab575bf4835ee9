"""Output CRS and units: a US-survey-feet State Plane layer comes back in its own CRS.

The check layer is libpysal's ``geodanet`` example (schools of a Tucson-area street
network, NAD83 Arizona Central State Plane in US survey feet), shipped inside the
libpysal package.
"""

import os

import numpy as np
import pyproj
import pytest

from mainspan.errors import InputError
from mainspan.writers.output_crs import check_output_settings, output_layout, unit_suffix

try:
    from tests.conftest import run_cli
except ImportError:
    from conftest import run_cli

#: The US survey foot, 1200/3937 m exactly (NIST Special Publication 811, appendix B).
US_FT_M = 1200.0 / 3937.0


@pytest.fixture(scope="module")
def geodanet():
    libpysal = pytest.importorskip("libpysal")
    pyogrio = pytest.importorskip("pyogrio")
    path = os.path.join(os.path.dirname(libpysal.__file__), "examples", "geodanet",
                        "schools.shp")
    if not os.path.exists(path):
        pytest.skip("libpysal's geodanet example is not installed")
    df = pyogrio.read_dataframe(path)
    return path, np.column_stack([df.geometry.x, df.geometry.y]), pyproj.CRS(df.crs)


@pytest.fixture(scope="module")
def planned(geodanet):
    import mainspan

    path, _, _ = geodanet
    sites = mainspan.read_sites(path)
    return mainspan.plan_layout(sites)


def test_input_crs_overlays_the_survey_layer(planned, geodanet):
    _, xy_ft, crs = geodanet
    assert unit_suffix(crs) == ("us_ft", pytest.approx(US_FT_M, rel=1e-15))
    out = output_layout(planned, {"output_crs": "input", "output_lengths": "crs"})
    assert out.crs == crs and planned.crs != crs           # the plan itself stays metric
    # every site back where the surveyor put it, within 0.01 ft
    assert np.abs(out.node_xy - xy_ft).max() < 0.01
    # lengths in US survey feet: the metre length over the NIST foot, and the drawn length
    np.testing.assert_allclose(out.links["length_us_ft"], planned.links["length_m"] / US_FT_M,
                               rtol=1e-12)
    drawn = np.hypot(*(out.node_xy[out.link_ends[:, 1]] - out.node_xy[out.link_ends[:, 0]]).T)
    np.testing.assert_allclose(drawn, out.links["length_us_ft"], rtol=1e-9)
    assert out.run_info["output_crs_choice"] == "input"
    assert "US survey foot" in out.run_info["output_lengths"]
    assert out.links["length_m"] is planned.links["length_m"]    # metres kept


def test_epsg_output_matches_pyproj(planned, geodanet):
    _, xy_ft, crs = geodanet
    out = output_layout(planned, {"output_crs": "EPSG:32612"})
    # pyproj directly from the survey layer to UTM 12N, as an independent reference
    t = pyproj.Transformer.from_crs(crs, 32612, always_xy=True)
    ref = np.column_stack(t.transform(xy_ft[:, 0], xy_ft[:, 1]))
    assert np.abs(out.node_xy - ref).max() < 0.003
    assert out.run_info["output_crs_epsg"] == "32612" and "length_ft" not in out.links
    same = output_layout(planned, {"output_crs": "working"})
    assert same is planned and same.run_info["output_crs_choice"] == "working"


@pytest.mark.parametrize("value, words", [("EPSG:4326", "geographic"),
                                          ("not-a-crs", "not a CRS PROJ understands")])
def test_bad_output_crs_is_one_line(value, words):
    with pytest.raises(InputError, match=words) as e:
        check_output_settings({"output_crs": value}, where="--output-crs")
    assert "--output-crs" in str(e.value) and "\n" not in str(e.value)


def test_cli_writes_the_gpkg_in_feet_and_records_it(tmp_path, geodanet, capsys):
    pyogrio = pytest.importorskip("pyogrio")
    path, xy_ft, crs = geodanet
    gpkg = tmp_path / "a.gpkg"
    code, out, err = run_cli(["plan", "--sites", path, "--output-crs", "input",
                              "--output-lengths", "crs", "--scheme-name", "Schools main",
                              "--out", gpkg, "--quiet"], capsys)
    assert code == 0, err
    nodes = pyogrio.read_dataframe(gpkg, layer="nodes")
    assert pyproj.CRS(nodes.crs) == crs
    assert np.abs(np.column_stack([nodes.geometry.x, nodes.geometry.y]) - xy_ft).max() < 0.01
    info = pyogrio.read_dataframe(gpkg, layer="run_info")
    info = dict(zip(info["key"], info["value"]))
    assert info["output_crs_choice"] == "input" and info["scheme_name"] == "Schools main"
    code, _, err = run_cli(["plan", "--sites", path, "--output-crs", "EPSG:4326",
                            "--out", tmp_path / "b.gpkg", "--quiet"], capsys)
    assert code == 2 and "--output-crs" in err and "geographic" in err
    assert not (tmp_path / "b.gpkg").exists()
