"""Shared helpers of the tests/test_safety_*.py files (output safety, issue 10)."""

from __future__ import annotations

import os
import subprocess
import sys

import numpy as np

from tests.conftest import write_points

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def make_sites(path, n=30, seed=3):
    """A small jittered point layer in UTM 33N with one source; returns the path."""
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0, 400, (n, 2)) + [512000.0, 5120000.0]
    return write_points(path, xy, fields={"id": [f"S{i:02d}" for i in range(n)],
                                          "role": ["source"] + ["demand"] * (n - 1),
                                          "demand_lps": np.round(rng.uniform(0.2, 1, n), 2)})


def snapshot(*paths):
    """Bytes, mtime (ns) and mode of each path (None when missing), to prove nothing changed."""
    out = []
    for p in paths:
        p = os.fspath(p)
        if not os.path.exists(p):
            out.append(None)
            continue
        st = os.stat(p)
        with open(p, "rb") as f:
            out.append((f.read(), st.st_mtime_ns, st.st_mode))
    return out


def one_error_line(err):
    """The single 'mainspan: error:' line of stderr (progress and notes aside)."""
    lines = [ln for ln in err.splitlines() if ln.strip() and not ln.startswith("[mainspan] ")
             and not ln.startswith("mainspan: note:") and not ln.startswith("mainspan: waiting")]
    assert len(lines) == 1, err
    assert lines[0].startswith("mainspan: error: "), err
    assert "Traceback" not in err and "np.float64" not in err
    return lines[0]


def run_module(args, *, env=None, **kw):
    """``python -m mainspan ARGS`` in a subprocess importing this checkout."""
    e = dict(os.environ)
    e["PYTHONPATH"] = ROOT + (os.pathsep + e["PYTHONPATH"] if e.get("PYTHONPATH") else "")
    e.update(env or {})
    return subprocess.run([sys.executable, "-m", "mainspan", *map(str, args)], env=e,
                          capture_output=True, text=True, **kw)


def leftovers(folder):
    """Temporary files mainspan left in *folder*."""
    return sorted(n for n in os.listdir(folder) if n.startswith(".mainspan-"))
