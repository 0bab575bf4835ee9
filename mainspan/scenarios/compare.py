"""The ``mainspan compare`` command: plan every scenario, print and write the comparison."""

from __future__ import annotations

import os
import sys

from .compute import run_scenarios
from .output import layer_names, write_scenarios
from .report import decision_sections, detail_sections

__all__ = ["compare_cli", "execution_settings", "stability_settings"]

# ------------------------------------------------------------------------------ CLI
def _suffixed(path, suffix):
    stem, ext = os.path.splitext(path)
    return f"{stem}{suffix}{ext}"


def execution_settings(args, proj) -> dict:
    """The checked ``[execution]`` settings: the project file's, then the options'."""
    from ..settings import all_settings, check_settings, parse_text

    merged = dict(proj.base.get("execution", {}) or {})
    origin = {}
    for st in all_settings("execution"):
        v = getattr(args, f"{st.section}__{st.key}", None)
        if v is not None:
            where = f"option {st.option}"
            merged[st.key] = parse_text(st, v, where)
            origin[st.key] = where
    where_file = f"project {proj.path!r} [execution]"
    checked = check_settings({"execution": merged},
                             lambda sec, key: origin.get(key, f"{where_file} {key}"))
    return checked["execution"]


def stability_settings(args, proj) -> dict:
    """The checked ``[stability]`` settings: the options', else the project file's."""
    from ..settings import parse_text
    from ..settings.checks import check_stability
    from ..settings.schema import COMPARE_SETTINGS

    merged = dict(proj.stability or {})
    origin = {}
    for st in COMPARE_SETTINGS:
        v = getattr(args, f"{st.section}__{st.key}", None)
        if v is not None:
            origin[st.key] = f"option {st.option}"
            merged[st.key] = parse_text(st, v, origin[st.key])
    return check_stability(merged, lambda key: origin.get(
        key, f"project {proj.path!r} [stability] {key}"))


def compare_cli(args):
    """``mainspan compare PROJECT.toml``: plan every scenario, print and write the comparison.

    Outputs: ``--out`` (GeoPackage), else ``[output] gpkg`` with ``_scenarios``
    added before the extension; ``--report`` (HTML), else ``[output] report``
    with ``_scenarios`` added.  Neither given: only the table is printed.
    Stability settings come from the options, else the project's
    ``[stability]`` section.  Returns 0; bad input raises InputError or
    DataFileError (exit code 2 in the CLI).
    """
    from ..settings.project import load_project
    from ..writers.gpkg import check_layers_free

    proj = load_project(args.project)
    out = proj.base.get("output", {})
    stab = stability_settings(args, proj)
    runs, pct, seed = stab["runs"], stab["perturb_pct"], stab["seed"]
    overwrite = bool(args.overwrite or out.get("overwrite", False))
    gpkg = args.out or (_suffixed(out["gpkg"], "_scenarios") if out.get("gpkg") else None)
    rep = args.report or (_suffixed(out["report"], "_scenarios") if out.get("report") else None)
    # output safety (mainspan.safeio): same-file, project-folder and overwrite rules first
    from ..pipeline.preflight import preflight_compare
    overwrite, rep_overwrite = preflight_compare(args, proj, gpkg, rep)
    if gpkg:
        check_layers_free(gpkg, layer_names(["base", *proj.scenarios]), overwrite=overwrite)
    from ..execution import engine_from_settings
    from ..messages import progress
    say = progress(args.quiet)
    with engine_from_settings(execution_settings(args, proj)) as eng:
        if not eng.local and say is not None:
            say(f"running on {eng.describe()}", 0, 1)
        sset = run_scenarios(proj, progress=say, stability_runs=runs, perturb_pct=pct,
                             seed=seed, engine=eng)
    print(sset.table())
    if gpkg:
        write_scenarios(sset, gpkg, overwrite=overwrite)
        print(f"written         {gpkg} (layers: links_/nodes_/run_info_<scenario>, "
              "scenario_links, scenario_summary)")
    if rep:
        from ..report.html import write_report
        write_report(sset["base"], rep, overwrite=rep_overwrite,
                     title=f"Scenario comparison: {os.path.basename(proj.path)}",
                     lead_sections=decision_sections(sset),
                     extra_sections=detail_sections(sset))
        print(f"report          {rep}")
    if any(sset[n].system for n in sset.names):
        from ..messages import CAUTION
        print(CAUTION)
    sys.stdout.flush()
    return 0
