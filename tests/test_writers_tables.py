"""CSV writers (read back with pandas) and every writer on a Layout read back from a GeoPackage."""

import numpy as np
import pandas as pd
import pytest

try:
    from tests.conftest_layouts import make_layout
except ImportError:
    from conftest_layouts import make_layout

from mainspan.errors import InputError, OverwriteError  # noqa: E402
from mainspan.writers.tables import format_value, write_links_csv, write_quantities_csv  # noqa: E402


@pytest.mark.parametrize("system", ["pressure", "gravity", None])
def test_links_csv_round_trip(tmp_path, system):
    lay = make_layout(system)
    p = write_links_csv(lay, tmp_path / "links.csv")
    df = pd.read_csv(p, keep_default_na=False)
    assert len(df) == lay.n_links
    assert list(df.columns[: len(lay.links)]) == list(lay.links)
    for k, v in lay.links.items():
        v = np.asarray(v)
        if v.dtype.kind in "fi":
            # fixed decimals by unit: metres to the millimetre, percent to 0.001, costs to cents
            np.testing.assert_allclose(df[k].to_numpy(float), v.astype(float), atol=0.0051)
        else:
            assert list(df[k].astype(str)) == list(v.astype(str))
    a, b = lay.link_ends.T
    np.testing.assert_allclose(df["from_x_m"], lay.node_xy[a, 0], atol=5e-4)
    np.testing.assert_allclose(df["to_y_m"], lay.node_xy[b, 1], atol=5e-4)
    # deterministic: the same layout gives the same bytes
    q = write_links_csv(lay, tmp_path / "again.csv")
    assert open(p, "rb").read() == open(q, "rb").read()


def test_quantities_csv(tmp_path):
    lay = make_layout("gravity")
    p = write_quantities_csv(lay, tmp_path / "q.csv")
    df = pd.read_csv(p)
    q = lay.tables["quantities"]
    assert list(df.columns) == list(q)
    assert df["length_m"].sum() == pytest.approx(lay.total("length_m"), abs=0.002)
    np.testing.assert_allclose(df["total_cost"], q["total_cost"], atol=0.005)
    with pytest.raises(OverwriteError, match="--overwrite"):
        write_quantities_csv(lay, p)
    with pytest.raises(InputError, match="quantities"):
        write_quantities_csv(make_layout(None), tmp_path / "none.csv")


def test_format_value():
    assert format_value(float("nan"), "length_m") == ""
    assert format_value(-0.0001, "length_m") == "0.000"
    assert format_value(1234.56789, "length_m") == "1234.568"
    assert format_value(2.0, "nominal_mm") == "2.0"
    assert format_value(1 / 3, "pipe_cost") == "0.33"
    assert format_value(np.int64(7), "count") == "7"
    assert format_value(True) == "true"


def test_missing_folder_is_one_line_error(tmp_path):
    from mainspan.errors import DataFileError

    with pytest.raises(DataFileError, match="does not exist") as exc:
        write_links_csv(make_layout(None), tmp_path / "no" / "links.csv")
    assert "\n" not in str(exc.value)


@pytest.mark.parametrize("system", ["pressure", "gravity"])
def test_writers_on_layout_read_from_gpkg(tmp_path, system):
    """A Layout read back with read_layout is all the writers need."""
    pytest.importorskip("pyogrio")
    from mainspan.pipeline.layout import read_layout
    from mainspan.report.html import write_report
    from mainspan.writers.dxf import write_dxf
    from mainspan.writers.landxml import write_landxml

    lay = make_layout(system)
    lay.write_gpkg(str(tmp_path / "lay.gpkg"))
    back = read_layout(str(tmp_path / "lay.gpkg"))
    write_dxf(back, tmp_path / "a.dxf", by="diameter")
    write_dxf(lay, tmp_path / "b.dxf", by="diameter")
    # same drawing from the in-memory layout and from the file
    assert (tmp_path / "a.dxf").read_bytes() == (tmp_path / "b.dxf").read_bytes()
    write_landxml(back, tmp_path / "a.xml")
    write_landxml(lay, tmp_path / "b.xml")
    assert (tmp_path / "a.xml").read_bytes() == (tmp_path / "b.xml").read_bytes()
    write_links_csv(back, tmp_path / "a.csv")
    write_quantities_csv(back, tmp_path / "q.csv")
    write_report(back, tmp_path / "r.html")
    assert (tmp_path / "r.html").stat().st_size > 10_000
