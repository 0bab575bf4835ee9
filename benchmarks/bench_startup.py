"""Start-up time of the command line against a bare interpreter, measured in one run.

    python benchmarks/bench_startup.py            # 5 runs each, median
    python benchmarks/bench_startup.py --repeat 9

Times, each in a fresh process: ``python -c pass`` (the floor), ``python -c "import mainspan"``,
``mainspan --help``, ``mainspan plan --help`` and a bad-input error (``mainspan plan`` on a
missing file, exit 2).  Wall time and the process's CPU time (user + system, from
``os.wait4``) are printed; on a shared machine the CPU time is the steadier figure.  Target:
``--help`` and bad-input errors well under a second.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def run(cmd, env):
    t = time.perf_counter()
    p = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)
    _, status, ru = os.wait4(p.pid, 0)
    wall = time.perf_counter() - t
    return wall, ru.ru_utime + ru.ru_stime, os.waitstatus_to_exitcode(status)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=5)
    a = ap.parse_args(argv)
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    py = sys.executable
    with tempfile.TemporaryDirectory() as tmp:
        missing = os.path.join(tmp, "missing.gpkg")
        cases = [("python -c pass", [py, "-c", "pass"]),
                 ("python -c 'import mainspan'", [py, "-c", "import mainspan"]),
                 ("mainspan --help", [py, "-m", "mainspan", "--help"]),
                 ("mainspan plan --help", [py, "-m", "mainspan", "plan", "--help"]),
                 ("mainspan plan --sites missing (bad input)",
                  [py, "-m", "mainspan", "plan", "--sites", missing, "--output",
                   os.path.join(tmp, "o.gpkg")])]
        res = {name: [] for name, _ in cases}
        codes = {}
        run(cases[2][1], env)                       # warm the file cache once
        for _ in range(a.repeat):                   # interleaved
            for name, cmd in cases:
                wall, cpu, code = run(cmd, env)
                res[name].append((wall, cpu))
                codes[name] = code
    print(f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs (shared machine: wall "
          "times vary with the load, CPU times less so)")
    print(f"{'command':42s} {'wall s':>8s} {'CPU s':>8s} {'CPU - floor':>12s} {'exit':>5s}")
    floor = statistics.median(c for _, c in res["python -c pass"])
    for name, _ in cases:
        wall = statistics.median(w for w, _ in res[name])
        cpu = statistics.median(c for _, c in res[name])
        print(f"{name:42s} {wall:8.3f} {cpu:8.3f} {cpu - floor:12.3f} {codes[name]:>5d}")
    print(f"median of {a.repeat} runs; target: --help and bad-input errors well under 1 s")


if __name__ == "__main__":
    main()
