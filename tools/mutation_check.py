"""Plant a fixed list of plausible bugs in the core, one at a time, and see the tests fail.

Run on demand, never as part of the test suite::

    python tools/mutation_check.py                 # every mutation, a table at the end
    python tools/mutation_check.py --list          # the mutations, nothing run
    python tools/mutation_check.py --only prim-tie-lower cert-jmax-skip-jump

The checkout is copied to a work folder (default ``<tmp>/mainspan-mutation``; git and virtual
environments left out; numba's cache is kept there between runs, so only the first run
compiles everything);
each mutation is a textual replacement of one line in that copy, which must match exactly
once, followed by a run of the tests that cover the module (``pytest -x``), with the copy on
``PYTHONPATH``.  A mutation is *caught* when those tests fail; the original file is put back
(with its time stamp, so numba's cache of it stays valid) before the next one.  The tests of
the unchanged copy are run first and must pass, or nothing is reported.  Exit status 0 when
every mutation is caught, 1 otherwise.
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))

# the test files run for each module, fastest to fail first (pytest -x stops at the first)
SPANNING = ("tests/test_certificate.py", "tests/test_spanning.py")
PRIM = ("tests/test_spanning.py", "tests/test_certificate.py")
SURFACES = ("tests/test_surfaces.py", "tests/test_costs.py", "tests/test_cli_rasters.py")
FRICTION = ("tests/test_hydraulics_formulas.py", "tests/test_hydraulics_properties.py")
NETWORK = ("tests/test_network.py",)
CORRIDOR = ("tests/test_search.py", "tests/test_corridor.py")


@dataclass(frozen=True)
class Mutation:
    name: str
    path: str          # file inside the checkout
    old: str           # text replaced (must occur exactly once)
    new: str
    tests: tuple
    what: str


MUTATIONS = [
    # --- certificate (certificate.py, _path_max_check) ---
    Mutation("cert-jmax-skip-jump", "mainspan/graph/certificate.py",
             "jmax[v] = max(wv, max(jmax[p], jmax[jp]))", "jmax[v] = max(wv, jmax[p])",
             SPANNING, "jump maximum leaves out the parent's jump segment"),
    Mutation("cert-jmax-skip-parent", "mainspan/graph/certificate.py",
             "jmax[v] = max(wv, max(jmax[p], jmax[jp]))", "jmax[v] = max(wv, jmax[jp])",
             SPANNING, "jump maximum leaves out the parent's own segment"),
    Mutation("cert-climb-one-side", "mainspan/graph/certificate.py",
             "mx = max(mx, max(up_w[a], up_w[b]))", "mx = max(mx, up_w[a])",
             SPANNING, "final climb to the common ancestor reads only one side"),
    Mutation("cert-jump-one-side", "mainspan/graph/certificate.py",
             "mx = max(mx, max(jmax[a], jmax[b]))", "mx = max(mx, jmax[a])",
             SPANNING, "paired jumps read only one side's maximum"),
    Mutation("cert-ties-rejected", "mainspan/graph/certificate.py",
             "if margin < 0 and bad_k < 0:", "if margin <= 0 and bad_k < 0:",
             SPANNING, "a tie (another minimum tree) counted as a violation"),
    Mutation("cert-first-not-lowest", "mainspan/graph/certificate.py",
             "        if margin < 0 and bad_k < 0:\n            bad_k = k",
             "        if margin < 0:\n            bad_k = k",
             SPANNING, "names the last violating link, not the lowest index"),
    # --- Prim (spanning.py, _prim_kernel) ---
    Mutation("prim-sift-down-3-children", "mainspan/graph/spanning.py",
             "last = min(c + 4, size)", "last = min(c + 3, size)",
             PRIM, "heap sift-down looks at 3 of the 4 children"),
    Mutation("prim-sift-up-binary-parent", "mainspan/graph/spanning.py",
             "q = (i - 1) >> 2", "q = (i - 1) >> 1",
             PRIM, "heap sift-up uses the binary-heap parent slot"),
    Mutation("prim-tie-lower", "mainspan/graph/spanning.py",
             "    if la != lb:\n        return la < lb", "    if la != lb:\n        return la > lb",
             PRIM, "equal weights: higher lower-index wins"),
    Mutation("prim-parallel-link", "mainspan/graph/spanning.py",
             "elif k >= best_edge[v]:", "elif k <= best_edge[v]:",
             PRIM, "parallel links: the higher link index wins"),
    # --- grid traversal and sampling (surfaces.py) ---
    Mutation("traverse-clip-right-edge", "mainspan/ground/raster_kernels.py",
             "p, q = dx, w - x0", "p, q = dx, w - 1 - x0",
             SURFACES, "Liang-Barsky clip one cell short on the right"),
    Mutation("bilinear-half-pixel-col", "mainspan/ground/raster_kernels.py",
             "u = min(max(cf - 0.5, 0.0), w - 1.0)", "u = min(max(cf, 0.0), w - 1.0)",
             SURFACES, "bilinear sampling without the half-pixel shift (columns)"),
    Mutation("bilinear-half-pixel-row", "mainspan/ground/raster_kernels.py",
             "v = min(max(rf - 0.5, 0.0), h - 1.0)", "v = min(max(rf, 0.0), h - 1.0)",
             SURFACES, "bilinear sampling without the half-pixel shift (rows)"),
    Mutation("window-bilinear-same-col", "mainspan/ground/raster_kernels.py",
             "    jb = min(jj + 1, w - 1) - c0\n    if ia < 0",
             "    jb = min(jj, w - 1) - c0\n    if ia < 0",
             SURFACES, "one-pass window sampling reads the left column twice"),
    Mutation("profile-floor-steps", "mainspan/ground/raster_kernels.py",
             "s = max(1, int(math.ceil(length[i] / step)))", "s = max(1, int(length[i] / step))",
             SURFACES, "profile stations rounded down: spacing above the requested step"),
    Mutation("profile-last-station", "mainspan/ground/raster_kernels.py",
             "st[offsets[i] + j] = length[i] * j / s", "st[offsets[i] + j] = length[i] * j / (s + 1)",
             SURFACES, "profile stations stop short of the far end"),
    # --- friction (hydraulics/friction.py) ---
    Mutation("hw-exponent", "mainspan/hydraulics/friction.py",
             "np.abs(q) ** 1.852", "np.abs(q) ** 1.85",
             FRICTION, "Hazen-Williams flow exponent 1.85"),
    Mutation("hw-diameter-exponent", "mainspan/hydraulics/friction.py",
             "np.power(diameter_m, 4.87)", "np.power(diameter_m, 4.871)",
             FRICTION, "Hazen-Williams diameter exponent 4.871"),
    Mutation("colebrook-251", "mainspan/hydraulics/friction.py",
             "a = 2.51 / re", "a = 2.52 / re",
             FRICTION, "Colebrook constant 2.52"),
    Mutation("colebrook-37", "mainspan/hydraulics/friction.py",
             "b = rr / 3.7\n", "b = rr / 3.71\n",
             FRICTION, "Colebrook roughness divisor 3.71"),
    # --- Manning geometry (hydraulics/gravity.py) ---
    Mutation("manning-perimeter", "mainspan/hydraulics/gravity.py",
             "perim = theta * d / 2.0", "perim = theta * d",
             FRICTION, "part-full wetted perimeter doubled"),
    Mutation("manning-area-sin", "mainspan/hydraulics/gravity.py",
             "area = d * d * (theta - np.sin(theta)) / 8.0", "area = d * d * (theta - np.sin(theta)) / 4.0",
             FRICTION, "part-full area doubled"),
    # --- flow accumulation and path sums (network.py) ---
    Mutation("accumulate-order", "mainspan/graph/network.py",
             "for j in range(order.shape[0] - 1, -1, -1):", "for j in range(order.shape[0]):",
             NETWORK, "subtree sums taken root first (children not yet summed)"),
    Mutation("path-sum-link", "mainspan/graph/network.py",
             "out[v] = out[p] + link_values[parent_link[v]]", "out[v] = out[p] + link_values[parent_link[p]]",
             NETWORK, "cost to root adds the parent's link instead of the node's"),
    # --- limits and forced links (capacitated.py, constraints.py; exist15) ---
    Mutation("ew-branch-limit-strict", "mainspan/graph/capacitated.py",
             "fit_join = join & (new_size <= ms)", "fit_join = join & (new_size < ms)",
             ("tests/test_capacitated.py",), "Esau-Williams joins stop one site short of the "
             "branch limit"),
    Mutation("forced-keeps-inner-links", "mainspan/graph/constraints.py",
             "keep = np.flatnonzero((cu != cv) & np.isfinite(w))",
             "keep = np.flatnonzero(np.isfinite(w))",
             ("tests/test_constraints.py",), "links inside a forced group stay in the "
             "contracted graph (self loops)"),
    # --- corridor search and layout (route14) ---
    Mutation("knight-wrong-cell", "mainspan/ground/search.py",
             "s = 0.25 * (va + vb + land[r, c + sc] + land[r2, c + sc])",
             "s = 0.25 * (va + vb + land[r2, c] + land[r2, c + sc])",
             CORRIDOR, "a knight's move reads the wrong intermediate cell"),
    Mutation("bridge-no-step", "mainspan/ground/search.py",
             "out_cost[m] = dist[u] + w + dist[v]", "out_cost[m] = dist[u] + dist[v]",
             CORRIDOR, "Mehlhorn's bridge cost leaves out the step between the regions"),
]


def copy_checkout(dst):
    skip = {".git", ".ci-venv", ".venv", "build", "dist", "__pycache__", ".hypothesis",
            ".pytest_cache", "demo-out"}
    shutil.copytree(ROOT, dst, ignore=lambda d, names: [n for n in names if n in skip
                                                         or n.endswith(".egg-info")])


def run_tests(work, tests, timeout):
    env = dict(os.environ, PYTHONPATH=work,
               NUMBA_CACHE_DIR=os.path.join(os.path.dirname(work), "numba-cache"))
    env.pop("CI", None)
    t0 = time.monotonic()
    try:
        p = subprocess.run([sys.executable, "-m", "pytest", "-x", "-q", "-p", "no:cacheprovider",
                            *tests], cwd=work, env=env, capture_output=True, text=True,
                           timeout=timeout)
        code = p.returncode
        tail = (p.stdout.strip().splitlines() or [""])[-1]
    except subprocess.TimeoutExpired:
        code, tail = -1, f"timed out after {timeout} s"
    return code, tail, time.monotonic() - t0


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--list", action="store_true", help="list the mutations and stop")
    ap.add_argument("--only", nargs="+", metavar="NAME", help="run only these mutations")
    ap.add_argument("--timeout", type=float, default=1200.0, help="seconds per test run")
    ap.add_argument("--skip-baseline", action="store_true",
                    help="do not first run the tests on the unchanged copy (only right after "
                         "a green run of the suite)")
    ap.add_argument("--workdir", default=os.path.join(tempfile.gettempdir(), "mainspan-mutation"),
                    help="folder for the copy and its numba cache (default %(default)s)")
    a = ap.parse_args(argv)
    muts = MUTATIONS
    if a.only:
        unknown = set(a.only) - {m.name for m in MUTATIONS}
        if unknown:
            ap.error(f"unknown mutation(s): {', '.join(sorted(unknown))}")
        muts = [m for m in MUTATIONS if m.name in a.only]
    if a.list:
        for m in muts:
            print(f"{m.name:28s} {m.path:34s} {m.what}")
        return 0
    for m in muts:   # every planted text must match exactly once in the real checkout
        n = open(os.path.join(ROOT, m.path)).read().count(m.old)
        if n != 1:
            print(f"mutation {m.name}: the text to replace occurs {n} times in {m.path}; "
                  "update tools/mutation_check.py", file=sys.stderr)
            return 2
    work = a.workdir
    src = os.path.join(work, "src")
    os.makedirs(work, exist_ok=True)
    shutil.rmtree(src, ignore_errors=True)
    copy_checkout(src)      # copy2 keeps time stamps: numba's cache of unchanged files holds
    try:
        tests = sorted({t for m in muts for t in m.tests})
        code, tail, secs = (0, "skipped (--skip-baseline)", 0.0) if a.skip_baseline else \
            run_tests(src, tests, a.timeout)
        print(f"baseline: {' '.join(tests)}: {tail} ({secs:.0f} s)", flush=True)
        if code != 0:
            print("the unchanged copy does not pass its tests; nothing to report", file=sys.stderr)
            return 2
        rows = []
        for m in muts:
            path = os.path.join(src, m.path)
            keep = path + ".orig"
            shutil.copy2(path, keep)
            text = open(keep).read()
            with open(path, "w") as f:
                f.write(text.replace(m.old, m.new, 1))
            try:
                code, tail, secs = run_tests(src, m.tests, a.timeout)
            finally:
                shutil.copy2(keep, path)
                os.remove(keep)
            caught = "yes" if code == 1 else ("TIMEOUT" if code == -1 else
                                              "no" if code == 0 else f"error {code}")
            rows.append((m, caught, tail, secs))
            print(f"{m.name:28s} caught: {caught:5s} {secs:5.0f} s  {tail}", flush=True)
        print()
        print("| mutation | file | planted bug | caught |")
        print("|---|---|---|---|")
        for m, caught, _, _ in rows:
            print(f"| `{m.name}` | `{m.path}` | {m.what} | {caught} |")
        missed = [m.name for m, c, _, _ in rows if c != "yes"]
        print(f"\n{len(rows) - len(missed)} of {len(rows)} caught"
              + (f"; missed: {', '.join(missed)}" if missed else ""))
        return 1 if missed else 0
    finally:
        for m in muts:    # never leave a planted bug behind, even when interrupted
            keep = os.path.join(src, m.path) + ".orig"
            if os.path.exists(keep):
                shutil.copy2(keep, os.path.join(src, m.path))
                os.remove(keep)


if __name__ == "__main__":
    sys.exit(main())
