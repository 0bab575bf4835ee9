"""Pipe catalogs: defaults against the PE100 SDR11 table, CSV reading and its errors."""

from __future__ import annotations

import numpy as np
import pytest

from mainspan.errors import DataFileError, InputError
from mainspan.hydraulics.catalog import PipeCatalog, default_catalog, default_gravity_catalog, read_catalog

# ISO 4427-2:2019 / EN 12201-2, PE100 SDR11: OD -> minimum wall (table of the standard)
PE_SDR11 = {32: 3.0, 40: 3.7, 50: 4.6, 63: 5.8, 75: 6.8, 90: 8.2, 110: 10.0, 125: 11.4,
            140: 12.7, 160: 14.6, 200: 18.2, 250: 22.7, 315: 28.6, 400: 36.3}


def test_default_catalog_dimensions_and_rating():
    cat = default_catalog()
    assert cat.nominal_mm.tolist() == [float(d) for d in PE_SDR11]
    # bore at the mean OD and mean wall: ISO 11922-1 grade B OD tolerance 0.009 d (>= 0.3 mm) and grade V
    # wall tolerance 0.1 e + 0.1 mm, both rounded up to 0.1 mm (from memory); half of each band added
    tol_d = [max(0.3, np.ceil(round(0.009 * d * 10, 9)) / 10) for d in PE_SDR11]
    tol_e = [np.ceil(round((0.1 * w + 0.1) * 10, 9)) / 10 for w in PE_SDR11.values()]
    np.testing.assert_allclose(cat.inner_mm, [d + td / 2 - 2 * (w + te / 2)
                                              for (d, w), td, te in zip(PE_SDR11.items(), tol_d, tol_e)])
    assert cat.inner_mm[6] == pytest.approx(89.4)     # 110 mm: 110.5 - 2 x 10.55
    # SDR = OD / minimum wall ≈ 11 for every size (the series definition, ISO 4065; walls are rounded
    # up to 0.1 mm, so 32 mm is 10.7)
    np.testing.assert_allclose(cat.nominal_mm / np.array(list(PE_SDR11.values())), 11.0, rtol=0.035)
    # PN = 20 MRS / (C (SDR - 1)) = 20 * 10 / (1.25 * 10) = 16 bar (ISO 4427-1 / ISO 12162 design
    # stress MRS/C; from memory) -> head
    pn = 20 * 10.0 / (1.25 * (11 - 1))
    np.testing.assert_allclose(cat.rating_m, pn * 1e5 / (1000 * 9.80665))
    assert np.all(cat.hw_c == 150)  # NRCS practice standard 430: plastic pipe C = 150
    assert np.all(np.diff(cat.inner_mm) > 0) and np.all(np.diff(cat.cost_per_m) > 0)


def test_default_gravity_catalog():
    cat = default_gravity_catalog()
    assert cat.nominal_mm[0] == 200.0  # 8 in minimum sewer, Recommended Standards for Wastewater Facilities
    assert np.all(cat.manning_n == 0.013)
    assert np.all(np.isnan(cat.rating_m))


def write(tmp_path, text, name="pipes.csv"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_read_catalog_roundtrip_and_sorting(tmp_path):
    p = write(tmp_path, "name,nominal_mm,inner_mm,hw_c,pn_bar,cost_per_m,material\n"
                        "big,160,130.8,150,16,30,PE\nsmall,63,51.4,150,16,5,PE\n")
    cat = read_catalog(p)
    assert cat.name.tolist() == ["small", "big"]  # sorted by inner diameter
    assert np.isnan(cat.roughness_mm).all()
    assert cat.rating_m[0] == pytest.approx(16e5 / (1000 * 9.80665))


@pytest.mark.parametrize(
    "text, where",
    [
        ("name,nominal_mm,inner_mm,hw_c,rating_m,cost_per_m,material\na,110,90,150,160,10,PE\nb,125,abc,150,160,12,PE\n",
         "line 3, column 'inner_mm'"),
        ("name,nominal_mm,inner_mm,hw_c,rating_m,cost_per_m,material\na,110,90,-150,160,10,PE\n", "line 2, column 'hw_c'"),
        ("name,nominal_mm,inner_mm,hw_c,rating_m,cost_per_m,material\na,110,90,150,160,,PE\n", "line 2, column 'cost_per_m'"),
        ("name,nominal_mm,inner_mm,hw_c,rating_m,cost_per_m,material\na,110,90,150,160,10,PE\na,125,100,150,160,12,PE\n",
         "line 3, column 'name'"),
        ("name,nominal_mm,inner_mm,hw_c,roughness_mm,cost_per_m,material\na,110,90,,,10,PE\n", "line 2, column 'roughness_mm'"),
        ("name,nominal_mm,inner_mm,rating_m,cost_per_m,material\na,110,90,160,10,PE\n", "line 1, column 'roughness_mm': no friction column"),
        ("name,nominal_mm,hw_c,cost_per_m,material\na,110,150,10,PE\n", "line 1: missing column 'inner_mm'"),
        ("name,nominal_mm,inner_mm,hw_c,cost_per_m,material\na,110,0.09,150,10,PE\nb,0.11,90,150,10,PE\n",
         "line 3, column 'inner_mm'"),
        ("", "empty"),
    ],
)
def test_read_catalog_errors_name_file_line_and_column(tmp_path, text, where):
    p = write(tmp_path, text)
    with pytest.raises(DataFileError) as info:
        read_catalog(p)
    msg = str(info.value)
    assert str(p) in msg and where in msg and "\n" not in msg


def test_read_catalog_missing_file(tmp_path):
    with pytest.raises(DataFileError, match="cannot read"):
        read_catalog(tmp_path / "nope.csv")


def test_catalog_validation():
    with pytest.raises(InputError, match="'inner_mm' of pipe 'x'"):
        PipeCatalog(name=["x"], nominal_mm=[110], inner_mm=[-1], roughness_mm=[0.01], hw_c=[150],
                    rating_m=[100], cost_per_m=[1], material=["PE"])
    with pytest.raises(InputError, match="empty"):
        PipeCatalog(name=[], nominal_mm=[], inner_mm=[], roughness_mm=[], hw_c=[], rating_m=[], cost_per_m=[], material=[])


def test_csv_bore_from_minimum_wall(tmp_path):
    # PE: mean OD and mean wall (ISO 11922-1 tolerance grades, from memory); other materials: OD - 2 wall
    p = write(tmp_path, "name,nominal_mm,min_wall_mm,cost_per_m,material,hw_c,pn_bar\n"
                        "PE 110,110,10.0,14,PE100,150,16\nPVC 110,110,5.3,9,PVC,150,10\n")
    cat = read_catalog(p)
    got = dict(zip(cat.name, cat.inner_mm))
    assert got["PE 110"] == pytest.approx(89.4) and got["PVC 110"] == pytest.approx(99.4)
    assert dict(zip(cat.name, cat.wall_mm))["PE 110"] == pytest.approx(10.55)
    p = write(tmp_path, "name,nominal_mm,cost_per_m,material,hw_c\nA,110,14,PE100,150\n")
    with pytest.raises(DataFileError, match="'inner_mm'"):
        read_catalog(p)
    p = write(tmp_path, "name,nominal_mm,min_wall_mm,inner_mm,cost_per_m,material,hw_c\nA,110,60,,14,PE100,150\n")
    with pytest.raises(DataFileError, match="line 2, column 'min_wall_mm'"):
        read_catalog(p)
