"""Messages every front end shares: the caution text, progress lines, the design summary.

Below the CLI so that the library (demo, scenarios) and any later front end
print the same words without importing the command line.
"""

from __future__ import annotations

import sys

__all__ = ["CAUTION", "progress", "print_design", "format_quantities"]

CAUTION = ("CAUTION: preliminary design aid only. Check with a licensed engineer against local "
           "codes and utility standards; locate existing services before any digging; trenches "
           "deeper than about 1.5 m need shoring under most safety rules.")


def progress(quiet):
    """A ``progress(stage, done, total)`` callable printing each stage once to stderr
    (stability runs every 10 %); None when *quiet*.
    """
    if quiet:
        return None
    last = {}

    def say(stage, done, total):
        if done == 0 and stage not in last:
            last[stage] = -1.0
            print(f"[mainspan] {stage} …", file=sys.stderr, flush=True)
        elif stage.startswith("stability") and total and done:
            # long, repeated work: a line every 10 % so that the user sees it moving
            step = int(10 * done / total)
            if step > last.get(stage, -1):
                last[stage] = step
                print(f"[mainspan] {stage} {done}/{total}", file=sys.stderr, flush=True)
    return say



def _fmt(v):
    import numpy as np
    if isinstance(v, (list, tuple, np.ndarray)):
        vals = [_fmt(x) for x in v]
        return ", ".join(vals) if vals else "-"
    if isinstance(v, dict):
        items = [f"{k}={_fmt(x)}" for k, x in v.items() if x not in (0, 0.0, None, "")]
        return ", ".join(items) if items else "none"
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (float, np.floating)):
        return f"{v:,.2f}"
    return str(v)


_SKIP = {"caution", "n_nodes", "n_links", "n_roots", "system", "notes"}


def print_design(lay):
    """Design summary, failed checks and the bill of quantities."""
    d = lay.design
    if d is None:
        return
    summ = getattr(d, "summary", {}) or {}
    print(f"design          {lay.system} mains")
    for k, v in summ.items():
        if k in _SKIP:
            continue
        print(f"  {k:<24}{_fmt(v)}")
    for note in summ.get("notes", []) or []:
        print(f"  note: {note}")
    fails = getattr(d, "failures", []) or []
    print(f"failed checks   {len(fails)}")
    for line in fails[:10]:
        print(f"  - {line}")
    if len(fails) > 10:
        print(f"  … and {len(fails) - 10} more (see the links/nodes 'checks' fields)")
    q = lay.tables.get("quantities")
    if q:
        print(format_quantities(q))


def format_quantities(q) -> str:
    """The bill of quantities as a fixed-width text table."""
    import numpy as np
    cols = [c for c in ("category", "item", "material", "nominal_mm", "unit", "quantity", "unit_cost",
                        "length_m", "count", "pipe_cost", "trench_cost", "land_cost", "total_cost")
            if c in q and not (c in ("material", "nominal_mm", "length_m") and "item" in q)]
    rows = [["" if isinstance(v, (float, np.floating)) and np.isnan(v) else
             _fmt(v) if not isinstance(v, (int, np.integer)) else str(v) for v in
             (q[c][i] for c in cols)] for i in range(len(q[cols[0]]))]
    width = [max(len(c), *(len(r[j]) for r in rows)) for j, c in enumerate(cols)]
    lines = ["bill of quantities:",
             "  " + "  ".join(c.rjust(w) for c, w in zip(cols, width))]
    lines += ["  " + "  ".join(v.rjust(w) for v, w in zip(r, width)) for r in rows]
    return "\n".join(lines)
