"""Output checks shared by the commands (plan, check, compare), run before any work.

Turns the output options and ``[output]`` keys of a command into
:class:`mainspan.safeio.OutputSpec` checks; kept below the CLI so that command
modules (``mainspan.scenarios.compare_cli``) use them without importing it.
"""

from __future__ import annotations

__all__ = ["inputs_of", "preflight_outputs", "preflight_compare"]


_INPUT_LABELS = {("sites", "path"): "sites", ("rasters", "terrain"): "terrain",
                 ("design", "catalog"): "pipe catalog", ("design", "prices"): "price table"}


def inputs_of(settings, proj=None):
    """(label, path) of every file a run with *settings* reads (every non-output path key
    of the settings schema)."""
    from ..settings import all_settings

    out = []
    if proj is not None:
        out.append(("project file", proj.path))
    keys = sorted((st.section, st.key) for st in all_settings()
                  if st.kind == "path" and st.section != "output")
    for sec, key in keys:
        v = settings.get(sec, {}).get(key)
        if isinstance(v, str) and v:
            out.append((_INPUT_LABELS.get((sec, key), f"[{sec}] {key}"), v))
    lc = settings.get("rasters", {}).get("land_cost")
    if isinstance(lc, dict):
        out += [(f"land-cost raster {k!r}", v) for k, v in lc.items() if isinstance(v, str)]
    elif isinstance(lc, str):
        out.append(("land-cost raster", lc))
    return out


def _output_specs(a, proj, out, items):
    """OutputSpecs for (option value, project key, kind) triples; the option wins."""
    from ..safeio import OutputSpec

    specs = []
    for opt_val, opt_name, key, kind in items:
        if opt_val:
            specs.append(OutputSpec(opt_name, opt_val, kind, layered=kind == "gpkg"))
        elif out.get(key):
            specs.append(OutputSpec(f"[output] {key}", out[key], kind,
                                    from_project=proj is not None, layered=kind == "gpkg"))
    return specs


def preflight_outputs(a, proj, settings_list, items):
    """Run :func:`mainspan.safeio.preflight` for a command; returns the checked OutputSpecs."""
    from ..safeio import preflight

    out = (proj.base.get("output", {}) if proj is not None else {})
    specs = _output_specs(a, proj, out, items)
    inputs = []
    for st in settings_list:
        inputs += inputs_of(st, proj)
    return preflight(specs, inputs, cli_overwrite=bool(getattr(a, "overwrite", False)),
                     project_overwrite=bool(out.get("overwrite", False)),
                     project_root=proj.root if proj is not None else None,
                     allow_outside=bool(getattr(a, "allow_outside_project", False)))


def preflight_compare(a, proj, gpkg, rep):
    """Output checks of ``mainspan compare``; returns (gpkg overwrite, report overwrite)."""
    from ..safeio import OutputSpec, preflight

    out = proj.base.get("output", {})
    specs = []
    if gpkg:
        specs.append(OutputSpec("--out" if a.out else "[output] gpkg (+ _scenarios)", gpkg,
                                "gpkg", from_project=not a.out, layered=True))
    if rep:
        specs.append(OutputSpec("--report" if a.report else "[output] report (+ _scenarios)",
                                rep, "report", from_project=not a.report))
    inputs = []
    for name in ["base", *proj.scenarios]:
        inputs += inputs_of(proj.settings_for(name), proj)
    preflight(specs, inputs, cli_overwrite=bool(a.overwrite),
              project_overwrite=bool(out.get("overwrite", False)), project_root=proj.root,
              allow_outside=bool(getattr(a, "allow_outside_project", False)))
    over = {o.kind: o.overwrite for o in specs}
    return over.get("gpkg", False), over.get("report", False)
