"""Engines that run a list of independent tasks: in this process, or on Dask workers."""

from __future__ import annotations

import contextlib
import contextvars
import os

from ..errors import InputError, MainspanError

__all__ = ["Engine", "Embedded", "DaskEngine", "open_engine", "current", "use",
           "PIP_COMMAND", "CONNECT_TIMEOUT_S", "TASK_RETRIES"]

#: How to install the optional distributed engine (named by every message about it).
PIP_COMMAND = 'pip install "dask[distributed]"'
#: Seconds to wait for a scheduler given by ``--cluster`` before giving up.
CONNECT_TIMEOUT_S = 5.0
#: Extra attempts of a task that raised on a worker (a task whose worker died is
#: rescheduled by the scheduler itself, up to its ``allowed-failures`` setting).
TASK_RETRIES = 1

_CURRENT: contextvars.ContextVar = contextvars.ContextVar("mainspan_engine", default=None)


class Engine:
    """Runs independent tasks and returns their results in the order given.

    Subclasses implement :meth:`map`.  ``local`` is True when tasks run in
    this process (they may then be given open objects instead of paths).
    """

    kind = "embedded"
    local = True
    n_workers = 1
    #: Links per link-costing chunk (None: :data:`mainspan.execution.costing.DEFAULT_CHUNK_LINKS`).
    chunk_links = None

    def share(self, obj):
        """A handle of *obj* to put in task arguments in its place.

        A distributed engine sends *obj* to the cluster once (each worker
        fetches it once, not once per task that uses it) and keeps it there
        until :meth:`release`; the embedded engine returns *obj* itself.
        """
        return obj

    def release(self):
        """Forget the objects given to :meth:`share`."""

    def map(self, fn, items, *, stage=None, say=None):
        """``[fn(*item) for item in items]``, whatever the engine.

        Parameters
        ----------
        fn : callable
            A module-level function (it is sent to the workers by reference).
        items : sequence of tuple
            The positional arguments of each task; handles from :meth:`share`
            stand for the objects they were made from.
        stage : str, optional
            Progress stage name: ``say(stage, done, total)`` after each task.
        say : callable, optional

        Returns
        -------
        list
            One result per item, in the order of *items* (never in the order
            the tasks finished), so that results do not depend on the engine.
        """
        raise NotImplementedError

    def describe(self) -> str:
        return "embedded (this process)"

    def close(self):
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


class Embedded(Engine):
    """Every task in this process, one after another (the default)."""

    def map(self, fn, items, *, stage=None, say=None):
        items = list(items)
        out = []
        for i, item in enumerate(items):
            out.append(fn(*item))
            if say is not None and stage:
                say(stage, i + 1, len(items))
        return out


class DaskEngine(Engine):
    """Tasks on the workers of a Dask cluster (a local one we start, or one we attach to).

    Create with :func:`open_engine`.  Each task is a Dask future with
    ``retries=TASK_RETRIES``; results are gathered by position.
    """

    local = False

    def __init__(self, client, cluster=None, *, address=None):
        self.client = client
        self.cluster = cluster
        self.address = address
        self.kind = "local" if cluster is not None else "cluster"
        self._shared = {}

    def share(self, obj):
        hit = self._shared.get(id(obj))
        if hit is None:      # keep obj alive with its future, so its id stays unique
            # not broadcast: a worker fetches it once, when its first task needs it
            fut = self.client.scatter([obj], hash=False)[0]
            hit = self._shared[id(obj)] = (obj, fut)
        return hit[1]

    def release(self):
        for _, fut in self._shared.values():
            fut.release()
        self._shared.clear()

    @property
    def n_workers(self):
        return max(1, len(self.client.scheduler_info().get("workers", {})))

    def describe(self):
        if self.cluster is not None:
            return f"{len(self.cluster.workers)} local Dask worker processes"
        return f"Dask cluster at {self.address} ({self.n_workers} workers)"

    def map(self, fn, items, *, stage=None, say=None):
        from distributed import as_completed
        from distributed.client import FutureCancelledError
        from distributed.scheduler import KilledWorker

        items = list(items)
        if not items:
            return []
        futures = [self.client.submit(fn, *item, pure=False, retries=TASK_RETRIES,
                                      key=f"{getattr(fn, '__name__', 'task')}-{i}-"
                                          f"{os.urandom(6).hex()}")
                   for i, item in enumerate(items)]
        pos = {f.key: i for i, f in enumerate(futures)}
        out = [None] * len(items)
        failed = {}          # task index -> its exception
        done = 0
        try:
            for fut in as_completed(futures):
                i = pos[fut.key]
                if failed and i > min(failed):
                    continue                 # after a failed task: cancelled or not needed
                try:
                    out[i] = fut.result()
                except (KilledWorker, FutureCancelledError) as exc:
                    raise MainspanError(
                        f"a task was lost on the Dask workers ({type(exc).__name__}: {exc}) "
                        f"after the scheduler's retries; check the workers' logs and "
                        f"memory") from None
                except Exception as exc:  # noqa: BLE001 - raised below, in task order
                    failed[i] = exc
                    for f in futures[i + 1:]:
                        f.cancel()
                    continue
                done += 1
                if say is not None and stage:
                    say(stage, done, len(items))
            if failed:      # the first failing task in task order, as embedded would raise
                raise failed[min(failed)]
        finally:
            for f in futures:
                f.release()
        return out

    def close(self):
        try:
            self.release()
            self.client.close()
        finally:
            if self.cluster is not None:
                self.cluster.close()


def _distributed(option):
    try:
        import distributed  # noqa: F401
    except ImportError:
        raise InputError(f"{option} needs dask.distributed, which is not installed; "
                         f"{PIP_COMMAND}") from None
    return distributed


def open_engine(workers=None, cluster=None, *, connect_timeout_s=None) -> Engine:
    """The engine asked for: embedded, ``workers`` local processes, or a cluster.

    Parameters
    ----------
    workers : int, optional
        Start a local Dask cluster of this many single-threaded worker
        processes on 127.0.0.1 (stopped by :meth:`Engine.close`).
    cluster : str, optional
        Address of a running Dask scheduler, e.g. ``tcp://10.0.0.5:8786``.
    connect_timeout_s : float, default=CONNECT_TIMEOUT_S

    Returns
    -------
    Engine
        Use it as a context manager so a local cluster is always stopped.

    Raises
    ------
    InputError
        Both given; dask.distributed not installed (the message names the pip
        command); the scheduler cannot be reached (the message names the
        address).
    """
    if workers is not None and cluster is not None:
        raise InputError("--workers and --cluster exclude each other: --workers N starts a "
                         "local cluster, --cluster ADDRESS attaches to a running one; give one")
    if workers is None and cluster is None:
        return Embedded()
    t = CONNECT_TIMEOUT_S if connect_timeout_s is None else float(connect_timeout_s)
    if cluster is not None:
        _distributed("--cluster")
        return _attach(str(cluster), t)
    _distributed("--workers")
    return _start_local(int(workers), t)


def _attach(address, timeout_s):
    import logging

    from distributed import Client

    # a refused connection is retried by Dask until the timeout: keep its log quiet, the
    # one-line message below says everything
    quiet = [logging.getLogger(n) for n in ("distributed", "distributed.client",
                                            "distributed.comm", "distributed.core")]
    levels = [q.level for q in quiet]
    for q in quiet:
        q.setLevel(logging.CRITICAL)
    try:
        client = Client(address, timeout=f"{timeout_s}s")
    except Exception as exc:  # noqa: BLE001 - OSError, TimeoutError, ValueError (bad address)
        why = " ".join(str(exc).split())[:160] or type(exc).__name__
        raise InputError(f"option --cluster: cannot reach the Dask scheduler at {address!r} "
                         f"within {timeout_s:g} s ({why}); start one with 'dask scheduler' "
                         "and check the address, or drop --cluster to run here") from None
    finally:
        for q, lv in zip(quiet, levels):
            q.setLevel(lv)
    return DaskEngine(client, address=address)


def _start_local(n, timeout_s):
    import logging

    from distributed import Client, LocalCluster

    if n < 1:
        raise InputError(f"option --workers: must be an integer >= 1, got {n!r}; "
                         "give the number of worker processes, e.g. --workers 2")
    try:
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                               host="127.0.0.1", dashboard_address=":0",
                               silence_logs=logging.CRITICAL)
    except Exception as exc:  # noqa: BLE001
        raise MainspanError(f"cannot start {n} local Dask workers: "
                            f"{' '.join(str(exc).split())[:200]}") from None
    try:
        client = Client(cluster, timeout=f"{max(timeout_s, 30.0)}s")
    except Exception:
        cluster.close()
        raise
    return DaskEngine(client, cluster)


def current() -> Engine:
    """The engine set by :func:`use` (embedded when none)."""
    eng = _CURRENT.get()
    return eng if eng is not None else Embedded()


@contextlib.contextmanager
def use(engine):
    """Make *engine* the one :func:`current` returns inside the ``with`` block."""
    token = _CURRENT.set(engine)
    try:
        yield engine
    finally:
        _CURRENT.reset(token)

