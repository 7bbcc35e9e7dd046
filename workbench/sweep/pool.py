"""The sweep's own pool of local worker processes, kept warm between sweeps.

Kept apart from the runner so that it imports nothing heavy: ``workbench sweep``
starts the workers (:func:`prestart`) before it reads the table and builds the
plan, and each new worker imports what a trial needs (:func:`_start_worker`)
while the parent is still busy, so the first trial does not wait for a cold
interpreter.
"""

from __future__ import annotations

import os
import threading
import time

#: the modules a trial uses, imported by each new worker when it starts
TRIAL_MODULES = ("workbench.sweep.trials", "workbench.data.profiling",
                 "workbench.data.preprocessing", "workbench.nets.engine", "sklearn.metrics",
                 "sklearn.pipeline", "joblib")

_THREAD_ENV = {v: "1" for v in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
                                "BLIS_NUM_THREADS", "VECLIB_MAXIMUM_THREADS")}

#: the sweep's own loky pool, kept warm between sweeps: {"executor", "workers"}
_POOL: dict = {}
_POOL_LOCK = threading.Lock()
#: idle pool workers exit after this many seconds (and are started again when needed)
POOL_IDLE_SECONDS = 300
#: seconds between a pool worker's checks that the process that started it is alive
PARENT_CHECK_SECONDS = 0.5


def _watch_parent(parent_pid: int, period: float = PARENT_CHECK_SECONDS) -> None:
    """Pool worker initializer: end this worker as soon as its parent is gone.

    A worker whose parent was killed (SIGKILL, or SIGTERM without cleanup) is
    adopted by another process (init or a sub-reaper), so its parent id
    changes; a daemon thread notices within ``period`` seconds and ends the
    worker at once, whatever trial it is running (nobody is left to store it).
    """
    def watch():
        while True:
            if os.getppid() != parent_pid:
                os._exit(1)
            time.sleep(period)

    threading.Thread(target=watch, name="workbench-parent-watch", daemon=True).start()


def _warm_pool(workers: int):
    """The warm pool with ``workers`` processes (a new one when the size differs).

    The sweep keeps its own loky executor rather than the process-wide one that
    joblib (and so scikit-learn's ``n_jobs``) shares, so that neither can
    reconfigure the other's workers. Each worker watches this process
    (:func:`_watch_parent`) and ends with it.
    """
    from joblib.externals.loky import ProcessPoolExecutor

    with _POOL_LOCK:
        ex = _POOL.get("executor")
        if ex is not None and _POOL.get("workers") != workers:
            _shutdown(ex)
            ex = None
        if ex is None:
            ex = ProcessPoolExecutor(max_workers=workers, timeout=POOL_IDLE_SECONDS,
                                     env=dict(_THREAD_ENV), initializer=_start_worker,
                                     initargs=(os.getpid(),))
            _POOL.update(executor=ex, workers=workers)
        return ex


def _shutdown(ex):
    """Stop a pool and its workers now.

    loky's ``shutdown(kill_workers=True)`` drops its pending work items but leaves
    their ids in its queue of work ids, and its manager thread then dies on a
    ``KeyError`` with a traceback on stderr (seen when a sweep stopped on a full disk
    right after handing out a trial). Nothing is handed out any more when a pool is
    stopped, so the queued ids are drained first (``_work_ids``, loky's own queue;
    left alone if a later loky renames it).
    """
    import queue

    ids = getattr(ex, "_work_ids", None)
    if ids is not None:
        try:
            while True:
                ids.get_nowait()
        except (queue.Empty, AttributeError):
            pass
    try:
        ex.shutdown(wait=False, kill_workers=True)
    except Exception:  # pragma: no cover - a pool already broken
        pass


def _drop_pool(ex):
    """Stop a pool (after a worker death or a cancel) and forget it if it is the warm one."""
    with _POOL_LOCK:
        if _POOL.get("executor") is ex:
            _POOL.clear()
    _shutdown(ex)


def default_jobs() -> int:
    """The local workers a sweep uses by default: one per core (joblib's count)."""
    from joblib.externals.loky import cpu_count

    return max(1, int(cpu_count()))


def _start_worker(parent_pid: int) -> None:
    """Pool worker initializer: watch the parent, then import what trials need.

    Importing here (not at the first trial) overlaps a new worker's imports
    with the parent's own start-up; the results cannot change, only when the
    modules are loaded does.
    """
    import importlib

    _watch_parent(parent_pid)
    for name in TRIAL_MODULES:
        importlib.import_module(name)


def _ready() -> int:
    """A job that does nothing: handing one to each worker makes loky start them all."""
    return os.getpid()


def prestart(workers: int) -> None:
    """Start the warm pool's ``workers`` processes now, without waiting for them.

    Called by ``workbench sweep`` first thing, so the workers start (and import)
    while the parent reads the table; a later sweep of the same size reuses them.
    Failing here is never fatal: the sweep starts the pool again when it needs it.
    """
    try:
        ex = _warm_pool(int(workers))
        for _ in range(int(workers)):
            ex.submit(_ready)
    except Exception:  # pragma: no cover - the sweep will start (and report on) the pool itself
        pass
