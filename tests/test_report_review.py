"""The review report as a reviewer uses it: labelled plan, long sections with data bands,
one total cost, title block, schedules, rounded parameters, capped tables."""

import csv
import re

import numpy as np
import pytest

try:
    from tests.conftest_layouts import make_layout
except ImportError:
    from conftest_layouts import make_layout

from mainspan.report import planmap, section
from mainspan.report import tables as T
from mainspan.report.html import report_html, write_report


def _texts(fig):
    return [t.get_text() for ax in fig.axes for t in ax.texts]


def _legend(fig):
    leg = fig.axes[0].get_legend()
    return {t.get_text(): h for t, h in zip(leg.get_texts(), leg.legend_handles)}


def test_plan_map_carries_ids_sizes_roots_and_check_symbols():
    lay = make_layout("pressure")
    fig = planmap.plan_map(lay, background="none")
    texts = _texts(fig)
    for i in lay.nodes["node_id"]:
        assert i in texts
    for k, lid in enumerate(lay.links["link_id"]):
        assert any(t.startswith(f"L{lid}") for t in texts), lid
    # sizes where legible: the long links carry their DN
    assert any(re.fullmatch(r"L\d+ DN(110|160)", t) for t in texts)
    leg = _legend(fig)
    assert "root (source)" in leg and fig.mainspan_root_from_role
    kinds = [k for k in leg if k.startswith("failed: ")]
    assert kinds == ["failed: low_pressure", "failed: too_deep"]
    # one symbol per check kind
    marks = {leg[k].get_marker() for k in kinds}
    assert len(marks) == 2
    assert "flow direction" in leg
    # the north arrow sits in the corner with the fewest sites
    corners = [(0.93, 0.88), (0.07, 0.88), (0.93, 0.22), (0.07, 0.22)]
    assert fig.mainspan_north_xy in corners


def test_plan_map_says_when_no_site_had_a_source_role():
    lay = make_layout("pressure", fail=False)
    lay.nodes["role"] = np.array(["demand"] * lay.n_nodes, dtype=object)
    fig = planmap.plan_map(lay, background="none")
    assert not fig.mainspan_root_from_role
    assert "root (no site had a source role)" in _legend(fig)
    text = report_html(lay)
    assert "No site had a source or outlet role: the tree was grown from S" in text


def test_gravity_section_bands_match_networkx_and_the_design():
    nx = pytest.importorskip("networkx")
    lay = make_layout("gravity")
    # a drop at A: the pipe from D arrives 0.5 m above the manhole's outgoing invert; the
    # band shows the manhole invert (outgoing pipe), as the node schedule does
    lay.links["invert_from_m"] = lay.links["invert_from_m"].copy()
    lay.links["invert_from_m"][3] += 0.5
    fig = section.long_section(lay, to_node="F")
    d = fig.mainspan_section
    ids = [str(lay.nodes["node_id"][i]) for i in d["path"]]
    assert ids == ["S", "A", "D", "F"]
    g = nx.Graph()
    for (a, b), w in zip(lay.link_ends, lay.links["length_m"]):
        g.add_edge(int(a), int(b), weight=float(w))
    # chainage: plan distance from the root, checked against networkx Dijkstra
    ref = nx.single_source_dijkstra_path_length(g, 0)
    np.testing.assert_allclose(d["node_ch"], [ref[int(i)] for i in d["path"]], rtol=1e-12)
    rows = {name: vals for name, _, vals in section.band_rows(d)}
    assert rows["chainage (m)"] == [f"{ref[int(i)]:.1f}" for i in d["path"]]
    inv = np.asarray(lay.nodes["invert_m"], float)[d["path"]]
    gnd = np.asarray(lay.nodes["elevation_m"], float)[d["path"]]
    assert rows["invert level (m)"] == [f"{v:.2f}" for v in inv]
    assert rows["depth to invert (m)"] == [f"{v:.2f}" for v in gnd - inv]
    slope = np.asarray(lay.links["slope_pct"], float)[d["links"]]
    assert rows["grade (%)"] == [f"{v:.2f}" for v in slope]
    assert rows["size"] == [f"DN{v}" for v in np.asarray(lay.links["nominal_mm"])[d["links"]]]
    # every band value is drawn in the bands axes, and the legend is not clipped
    band_text = {t.get_text() for t in fig.axes[1].texts}
    for vals in rows.values():
        assert set(vals) <= band_text
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    box = fig.axes[0].get_legend().get_window_extent(canvas.get_renderer())
    assert box.x0 >= 0 and box.y0 >= 0 and box.x1 <= fig.bbox.x1 and box.y1 <= fig.bbox.y1


def test_pressure_section_draws_pipe_and_grade_line():
    lay = make_layout("pressure")
    lay.links["trench_depth_m"] = np.full(lay.n_links, 1.2)
    fig = section.long_section(lay)
    labels = {ln.get_label() for ln in fig.axes[0].get_lines()}
    assert {"ground", "pipe invert", "pipe crown", "hydraulic grade line"} <= labels
    d = fig.mainspan_section
    rows = {name: vals for name, _, vals in section.band_rows(d)}
    hl = np.asarray(lay.links["headloss_m"], float)[d["links"]]
    ln = np.asarray(lay.links["length_m"], float)[d["links"]]
    assert rows["head loss (m/km)"] == [f"{v:.1f}" for v in 1000 * hl / ln]
    assert rows["grade level (m)"][0] == "240.00"
    # pipe invert: ground less the trench depth plus bedding (0.1 m default)
    pipe = [ln_ for ln_ in fig.axes[0].get_lines() if ln_.get_label() == "pipe invert"][0]
    x, z = pipe.get_data()
    ok = np.isfinite(z)
    gz = np.interp(np.asarray(x, float)[ok], d["ground_x"], d["ground_z"])
    np.testing.assert_allclose(np.asarray(z, float)[ok], gz - 1.1, atol=1e-6)


def test_report_one_exaggeration_title_block_one_total(tmp_path):
    lay = make_layout("gravity")
    lay.run_info.update({"scheme_name": "Harrow Lane drainage", "revision": "B",
                         "issue_date": "2026-11-30", "prepared_by": "A. Surveyor",
                         "checked_by": "C. Checker",
                         "design:outlet_invert_m": "[177.69875331799045]",
                         "design:min_pressure_head_m": "13.999999999999943",
                         "design:storm_settled": "True",
                         "design_settings": "kinematic_viscosity_m2ps=1.0038000689308675e-06, "
                                            "bedding_m=0.1"})
    text = open(write_report(lay, tmp_path / "r.html"), encoding="utf-8").read()
    for key, want in (("scheme-name", "Harrow Lane drainage"), ("revision", "B"),
                      ("issue-date", "2026-11-30"), ("prepared-by", "A. Surveyor"),
                      ("checked-by", "C. Checker")):
        assert f'id="tb-{key}">{want}<' in text
    assert "<title>Harrow Lane drainage</title>" in text
    vx = set(re.findall(r"vertical exaggeration ×([0-9.]+)</figcaption>", text))
    assert len(vx) == 1 and text.count("</figcaption>") >= 4
    # one total cost: every "total cost" label shows the same figure
    q = lay.tables["quantities"]
    total = float(np.sum(q["total_cost"]))
    figures = re.findall(r"total cost \(capital\)</(?:th|td)><td[^>]*>(?:<b>)?([0-9,.]+)", text)
    assert figures and set(figures) == {f"{total:,.2f}"}
    assert "total cost (tree)" not in text
    # parameters rounded and labelled: no raw Python values
    params = text[text.index('id="run-info"'):]
    assert "[177.69875331799045]" not in params and "13.999999999999943" not in params
    assert ">177.7<" in params and ">14<" in params and "e-06" in params
    assert "kinematic viscosity (m²/s)" in params
    for c in ("licensed engineer", "before any digging"):
        assert c in text
    # schedules of nodes (invert and depth) and every site id in the page
    sched = text[text.index('id="node-schedule"'):]
    sched = sched[:sched.index("</table>")]
    for i in lay.nodes["node_id"]:
        assert f"<td>{i}</td>" in sched
    assert "invert (m)" in sched


def test_pump_duty_table():
    lay = make_layout("pressure")
    lay.run_info["design:pump"] = str({"flow_lps": 89.75000000000001, "head_m": 70.71587,
                                       "hydraulic_kw": 62.24, "shaft_kw": 82.987,
                                       "annual_kwh": 124480.7, "energy_cost_pv": 263163.6})
    lay.run_info["roots"] = "S"
    html = T.pump_section(lay)
    assert 'id="pump-duty"' in html and ">89.75<" in html and ">70.72<" in html
    assert ">124,481<" in html and ">263,163.60<" in html


def test_long_tables_capped_with_full_csv_beside(tmp_path, monkeypatch):
    monkeypatch.setattr(T, "MAX_ROWS", 3)
    lay = make_layout("pressure")
    seen = []
    p = write_report(lay, tmp_path / "big.html", progress=seen.append)
    text = open(p, encoding="utf-8").read()
    assert "Showing 3 of 7 rows; the full table is in big_nodes.csv" in text
    with open(tmp_path / "big_nodes.csv", newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))
    assert [r["node_id"] for r in rows] == list(lay.nodes["node_id"])
    assert (tmp_path / "big_links.csv").exists()
    assert any("plan map" in s for s in seen) and any("big_nodes.csv" in s for s in seen)


@pytest.mark.parametrize("value, want", [
    ("[307.04604498947515]", "307"), ("13.999999999999972", "14"), ("True", "yes"),
    ("{'air_valve': 15, 'washout': 2}", "air valve 15; washout 2"), ("delaunay", "delaunay"),
    ("1.0038000689308675e-06", "1.004e-06"), ("2718270.1463029925", "2,718,270"),
    ("min margin 1.47678123", "min margin 1.477")])
def test_pretty_value(value, want):
    assert T.pretty_value(value) == want

