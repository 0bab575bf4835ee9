"""Where the work runs: in this process, on local Dask workers, or on a Dask cluster.

One switch (the ``[execution]`` settings, ``--workers N`` / ``--cluster ADDRESS``):

* embedded (default): every task in this process, one after another; no
  Dask needed;
* ``workers = N``: a local Dask cluster of N single-threaded worker
  processes on 127.0.0.1, started for the run and stopped after it;
* ``cluster = "tcp://host:8786"``: the workers of a running Dask scheduler
  (``dask scheduler`` and ``dask worker ADDRESS``; see the README).

Results are the same, byte for byte, whichever engine runs them: tasks are
pure functions of their inputs, random perturbations are seeded per task,
and :meth:`Engine.map` returns results in the order the tasks were given,
never in the order they finished.

What runs as tasks: each scenario's tree (+ certificate + design) and each
stability run of ``mainspan compare``, and the link costing of large jobs in
tile-aligned chunks of links (:mod:`mainspan.execution.costing`).  Workers
read rasters from their paths (:mod:`mainspan.execution.worker`); arrays that
many tasks use are sent to each worker once (:meth:`Engine.share`), never
per link.
"""

from __future__ import annotations

from .engine import (CONNECT_TIMEOUT_S, PIP_COMMAND, DaskEngine, Embedded, Engine,  # noqa: F401
                     current, open_engine, use)

__all__ = ["Engine", "Embedded", "DaskEngine", "open_engine", "current", "use",
           "engine_from_settings", "PIP_COMMAND", "CONNECT_TIMEOUT_S"]


def engine_from_settings(execution: dict | None) -> Engine:
    """The engine of a checked ``[execution]`` section (embedded when empty)."""
    ex = execution or {}
    eng = open_engine(ex.get("workers"), ex.get("cluster"),
                      connect_timeout_s=ex.get("connect_timeout_s"))
    eng.chunk_links = ex.get("chunk_links")
    return eng
