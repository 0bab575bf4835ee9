"""``mainspan demo OUTDIR``: write the bundled demo scenarios and plan them.

Two invented scenarios ship with the package (``mainspan.sample_data``):
the Kestrel Flats irrigation scheme (pressure mains from a pump station to
about 150 field hydrants) and the Harrow Brook storm drainage catchment
(gravity mains from 60 inlets to one outlet, designed by the Rational method
from invented catchment areas, runoff coefficients and an invented rainfall
table, laid out by the depth-aware arborescence), both on the same
generated terrain and land-cost rasters.
"""

from __future__ import annotations

import os
import shutil
import sys
from importlib import resources

import numpy as np

from .errors import DataFileError, OverwriteError

__all__ = ["run_demo", "demo_files", "DEMO_FILES"]

DEMO_FILES = ("kestrel_outlets.gpkg", "harrow_inlets.gpkg", "terrain.tif", "landcost.tif",
              "kestrel.toml", "harrow.toml")


def _sample_data():
    """The demo folder: the installed ``mainspan.sample_data`` package, or, when mainspan is
    imported from a source checkout (where that package is the top-level ``sample_data/``
    folder mapped in by the build), that folder itself."""
    try:
        return resources.files("mainspan.sample_data")
    except ModuleNotFoundError:
        here = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
        folder = os.path.join(here, "sample_data")
        if not os.path.isdir(folder):
            raise DataFileError("the demo data (mainspan.sample_data) is not installed; "
                                "reinstall mainspan") from None
        from pathlib import Path
        return Path(folder)


def demo_files(dest):
    """Copy the demo inputs into *dest*; return their paths by name."""
    os.makedirs(dest, exist_ok=True)
    src = _sample_data()
    out = {}
    for name in DEMO_FILES:
        item = src / name
        if not item.is_file():
            raise DataFileError(f"demo file {name!r} is missing from the installed package; "
                                "reinstall mainspan")
        target = os.path.join(dest, name)
        with resources.as_file(item) as p:
            shutil.copyfile(p, target)
        out[name] = target
    return out


def run_demo(outdir, *, overwrite=False, quiet=False, write_extras=True):
    """Write the demo inputs to ``OUTDIR/inputs`` and plan both scenarios into OUTDIR."""
    from .messages import CAUTION, print_design
    from .messages import progress as _progress
    from .pipeline.layout import plan_layout
    from .settings.project import load_project, plan_kwargs
    from .sites.read import read_sites

    outdir = os.fspath(outdir)
    outputs = ["kestrel_layout.gpkg", "kestrel_report.html", "kestrel_layout.dxf",
               "kestrel_layout.xml", "kestrel_long_section.png", "harrow_layout.gpkg",
               "harrow_report.html", "harrow_long_section.png", "harrow_layout.xml"]
    if os.path.isdir(outdir) and not overwrite:
        clash = [o for o in outputs if os.path.exists(os.path.join(outdir, o))]
        if clash:
            raise OverwriteError(f"demo folder {outdir!r} already holds {', '.join(clash[:3])}"
                                 f"{' …' if len(clash) > 3 else ''}; pass --overwrite or choose "
                                 "another folder")
    inputs = os.path.join(outdir, "inputs")
    files = demo_files(inputs)
    from .hydraulics.prices import default_prices, write_prices_csv
    files["prices.csv"] = os.path.join(inputs, "prices.csv")   # an editable template (--prices FILE)
    if overwrite or not os.path.exists(files["prices.csv"]):
        write_prices_csv(default_prices(), files["prices.csv"], overwrite=True)
    say = _progress(quiet)

    def plan(project, scenario=None, *, prim_rule=False):
        proj = load_project(project)
        path, read_kw, plan_kw, _ = plan_kwargs(proj.settings_for(scenario))
        if prim_rule:       # whole11: the baseline, Prim's tree of link costs, rule sizing
            plan_kw["layout"] = "tree"
            plan_kw["design"] = _rule_sizing(plan_kw.get("design"))
        return plan_layout(read_sites(path, **read_kw), progress=say, **plan_kw)

    print("Kestrel Flats irrigation scheme (pressure mains, invented demo)")
    # --- whole11: whole-cost layout, compared with Prim's tree under rule sizing ---
    ground = plan(files["kestrel.toml"])
    prim = plan(files["kestrel.toml"], prim_rule=True)
    plain = plan(files["kestrel.toml"], "plain_length")
    k_gpkg = os.path.join(outdir, "kestrel_layout.gpkg")
    ground.write_gpkg(k_gpkg, overwrite=overwrite)
    print(ground.summary())
    print(_whole_cost_vs_prim(ground, prim))
    print(_ground_vs_length(prim, plain))
    # --- end whole11 ---
    print_design(ground)

    print()
    print("Harrow Brook storm drainage catchment (gravity mains, Rational method, invented demo)")
    drain = plan(files["harrow.toml"])
    h_gpkg = os.path.join(outdir, "harrow_layout.gpkg")
    drain.write_gpkg(h_gpkg, overwrite=overwrite)
    print(drain.summary())
    print(_depth_aware_gain(drain))
    print_design(drain)

    written = [k_gpkg, h_gpkg]
    if write_extras:
        from .report.html import write_report
        from .report.plots import save_long_section
        from .writers.dxf import write_dxf
        from .writers.landxml import write_landxml
        for lay, stem in ((ground, "kestrel"), (drain, "harrow")):
            p = os.path.join(outdir, f"{stem}_report.html")
            write_report(lay, p, overwrite=overwrite)
            written.append(p)
            p = os.path.join(outdir, f"{stem}_long_section.png")
            save_long_section(lay, p, overwrite=overwrite)
            written.append(p)
        p = os.path.join(outdir, "kestrel_layout.dxf")
        write_dxf(ground, p, overwrite=overwrite)
        written.append(p)
        for lay, stem in ((ground, "kestrel"), (drain, "harrow")):
            p = os.path.join(outdir, f"{stem}_layout.xml")
            write_landxml(lay, p, overwrite=overwrite)
            written.append(p)
    print()
    print("written:")
    for p in written:
        print(f"  {p}")
    print(f"inputs (rerun with 'mainspan plan {files['kestrel.toml']} --output NEW.gpkg'):")
    print(f"  {inputs}")
    print(CAUTION)
    sys.stdout.flush()
    return 0


def _depth_aware_gain(drain) -> str:
    """The depth-aware gravity layout against the earlier layout (round 0), from run_info."""
    ri = drain.run_info
    if not ri.get("depth_layout_rounds"):
        return ""
    f = float
    rows = [
        ("failed checks", ri["depth_layout_failures_before"], ri["depth_layout_failures_after"]),
        ("deepest invert (m)", f"{f(ri['depth_layout_max_depth_before_m']):.2f}",
         f"{f(ri['depth_layout_max_depth_after_m']):.2f}"),
        ("design cost", f"{f(ri['depth_layout_cost_before']):,.0f}",
         f"{f(ri['depth_layout_cost_after']):,.0f}"),
    ]
    out = ["depth-aware layout vs the earlier gravity layout (same design basis, same prices):",
           f"  {'':<20}{'earlier':>12}{'now':>12}"]
    out += [f"  {a:<20}{b:>12}{c:>12}" for a, b, c in rows]
    out.append(f"  {ri['depth_layout_links_changed']} links moved, "
               f"{f(ri['depth_layout_saving_pct']):.1f} % saved, {ri['depth_layout_rounds']} design "
               f"round(s), {'settled' if ri['depth_layout_settled'] == 'true' else 'cheapest kept'}")
    return "\n".join(out)


# --- whole11 ---
def _rule_sizing(design):
    """Design settings (dict) with pipes sized by the velocity and head-loss rule."""
    from .hydraulics import DesignSettings

    d = dict(design or {})
    if "sizing" in DesignSettings.__dataclass_fields__:
        d["sizing"] = "rule"
    return d


def _pump_head(summary):
    """Pump head: the pump duty's head where the design gives one, else the pressure head
    the source must deliver (grade at the source minus its ground)."""
    pump = summary.get("pump")
    if isinstance(pump, dict) and pump.get("head_m") is not None:
        return float(np.max(pump["head_m"]))
    return float(max(summary.get("source_pressure_head_m") or [np.nan]))


def _whole_cost_vs_prim(whole, prim) -> str:
    """What the whole-cost layout saves against Prim's tree of link costs with rule sizing."""
    from .graph.wholecost import whole_life_cost

    sw, sp = whole.design.summary, prim.design.summary
    cw, cp = whole_life_cost(sw), whole_life_cost(sp)
    hw, hp = _pump_head(sw), _pump_head(sp)
    gw, gp = max(sw["source_hgl_m"]), max(sp["source_hgl_m"])
    ri = whole.run_info
    sizing = lambda s: s.get("sizing", "rule")     # noqa: E731
    kind = "whole-cost layout" if ri.get("whole_cost_layout") else f"{ri.get('layout')} layout"
    search = ([f"  search          best start alpha {whole.tree.search['start_alpha']:g}, "
               f"{ri['whole_cost_exchanges']} link exchanges, {ri['whole_cost_designs']} designs; "
               "a local optimum under single link exchanges, not a global one"]
              if ri.get("whole_cost_layout") else [])
    return "\n".join([
        f"{kind} ({sizing(sw)} sizing) vs Prim's tree ({sizing(sp)} sizing):",
        f"  whole-life cost {cw:,.0f} vs {cp:,.0f} (saves {cp - cw:,.0f}, "
        f"{100 * (cp - cw) / max(cp, 1e-9):.1f} %; capital + pump energy present value)",
        f"  pump head       {hw:,.1f} m vs {hp:,.1f} m ({100 * (hp - hw) / max(hp, 1e-9):.0f} % "
        f"less; grade at the pump {gw:,.1f} m vs {gp:,.1f} m)",
        f"  link cost       {whole.total('cost'):,.0f} vs {prim.total('cost'):,.0f} "
        "(Prim's tree is the cheapest in link cost, by its certificate)",
        *search,
    ])
# --- end whole11 ---


def _ground_vs_length(ground, plain) -> str:
    """How pricing the ground changed the layout against plain length."""
    g = set(np.asarray(ground.links["candidate_index"]).tolist())
    p = set(np.asarray(plain.links["candidate_index"]).tolist())
    shared = len(g & p)
    jacc = shared / max(1, len(g | p))
    total = np.asarray(ground.costs.total, float)
    plain_under_ground = float(total[sorted(p)].sum())
    ground_cost = float(total[sorted(g)].sum())
    saving = plain_under_ground - ground_cost
    return "\n".join([
        "ground vs plain length:",
        f"  links shared    {shared} of {len(g)} (Jaccard {jacc:.2f})",
        f"  length          {ground.total('length_m'):,.1f} m vs {plain.total('length_m'):,.1f} m "
        "for the shortest tree",
        f"  ground cost     {ground_cost:,.0f} vs {plain_under_ground:,.0f} for the shortest tree "
        f"priced on the same ground (saves {saving:,.0f}, "
        f"{100 * saving / max(plain_under_ground, 1e-9):.1f} %)",
    ])
