"""Execute notebooks/walkthrough.ipynb end to end (nbclient, python3 kernel) in a temp folder."""

import os

import pytest

NOTEBOOK = os.path.join(os.path.dirname(__file__), os.pardir, "notebooks", "walkthrough.ipynb")


@pytest.mark.slow
def test_walkthrough_runs(tmp_path):
    nbformat = pytest.importorskip("nbformat")
    nbclient = pytest.importorskip("nbclient")
    pytest.importorskip("ipykernel")
    nb = nbformat.read(NOTEBOOK, as_version=4)
    client = nbclient.NotebookClient(nb, kernel_name="python3", timeout=300,
                                     resources={"metadata": {"path": str(tmp_path)}})
    client.execute()            # raises CellExecutionError naming the failing cell
    errors = [o for c in nb.cells if c.cell_type == "code" for o in c.get("outputs", [])
              if o.get("output_type") == "error"]
    assert not errors
    # the walkthrough wrote the hand-off files where it ran
    out = tmp_path / "out"
    for name in ("kestrel.gpkg", "kestrel.dxf", "kestrel.prj", "kestrel.xml",
                 "kestrel_links.csv", "kestrel_report.html"):
        assert (out / name).stat().st_size > 0, name
    # images were shown (plan map and long sections)
    images = [o for c in nb.cells if c.cell_type == "code" for o in c.get("outputs", [])
              if "image/png" in o.get("data", {})]
    assert len(images) >= 3
