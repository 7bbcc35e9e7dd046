"""The sweep's own pool of local worker processes, kept warm between sweeps.

Kept apart from the runner so that it imports nothing heavy: ``workbench sweep``
starts the workers (:func:`prestart`) before it reads the table and builds the
plan, and each new worker imports what a trial needs (:func:`_start_worker`)
while the parent is still busy, so the first trial does not wait for a cold
interpreter.

Staggered start (``prestart(..., staggered=True)``, what ``workbench sweep`` uses):
the parent, too, spends its first second or two importing NumPy, pandas and
scikit-learn. With every worker importing at the same moment, three or more
processes share the cores and each of them, the first trial's worker included,
is ready later (on 2 cores: 3 importers for 2 cores). So the first worker to
start imports at once and the others wait for :func:`open_gate` (the parent
calls it when its own imports and the table read are done; at most
:data:`GATE_SECONDS`), then import. Which worker runs which trial, and so the
results, does not change: only when the modules are loaded does.

Timeline (measurement): with ``WORKBENCH_TIMELINE=1`` in the environment the
parent and each worker write ``timeline <seconds since the parent started>
<pid> <event>`` lines to stderr (:func:`mark`): the worker's start and its imports
here, the parent's steps in :mod:`workbench.commands.sweep`.
"""

from __future__ import annotations

import os
import sys
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
#: a staggered pool's later workers wait at most this long for :func:`open_gate` before
#: importing what trials need (a safety net: ``workbench sweep`` opens the gate as soon as
#: its own imports and table read are done, usually within two seconds)
GATE_SECONDS = 10.0
#: the environment variable that turns the start-up timeline on (:func:`mark`), and the one
#: that carries the parent's start time to the workers
TIMELINE_ENV, TIMELINE_T0_ENV = "WORKBENCH_TIMELINE", "WORKBENCH_TIMELINE_T0"
#: idle pool workers exit after this many seconds (and are started again when needed)
POOL_IDLE_SECONDS = 300
#: seconds between a pool worker's checks that the process that started it is alive
PARENT_CHECK_SECONDS = 0.5
#: how much lower a new worker's CPU priority is than this process's (``nice`` steps; 0:
#: the same): :func:`set_worker_niceness`
_NICENESS = {"value": 0}


def set_worker_niceness(niceness: int) -> None:
    """Start the pool's workers from now on this many ``nice`` steps below this process
    (a pool of other workers is replaced when next needed). The window asks for it: its
    workers then import and train at a lower priority from their first instruction, so the
    event loop keeps the processor on a small machine (reniced once they had been seen,
    they imported at full priority beside it as a sweep started)."""
    _NICENESS["value"] = max(0, int(niceness))


def mark(event: str) -> None:
    """With ``WORKBENCH_TIMELINE=1``: write ``timeline SECONDS PID EVENT`` to stderr, SECONDS
    counted from the start of the ``workbench`` process (carried to the workers in
    ``WORKBENCH_TIMELINE_T0``). Nothing otherwise."""
    if not os.environ.get(TIMELINE_ENV):
        return
    t0 = os.environ.get(TIMELINE_T0_ENV)
    if t0 is None:  # the first mark of the parent: its start, as the kernel saw it
        t0 = os.environ[TIMELINE_T0_ENV] = repr(_process_start())
    print(f"timeline {time.time() - float(t0):7.3f} {os.getpid()} {event}", file=sys.stderr,
          flush=True)


def _process_start() -> float:
    """This process's start (seconds since the epoch), from /proc where it exists."""
    try:
        with open("/proc/self/stat") as fh:
            ticks = int(fh.read().rsplit(")", 1)[1].split()[19])
        with open("/proc/uptime") as fh:
            uptime = float(fh.read().split()[0])
        return time.time() - uptime + ticks / os.sysconf("SC_CLK_TCK")
    except (OSError, ValueError, IndexError):
        return time.time()


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


class FileGate:
    """The staggered pool's gate and its "first worker" token, as two files in a folder of
    their own: :meth:`set` creates ``open``, :meth:`wait` polls for it, :meth:`acquire`
    takes ``first`` with an exclusive create (one worker wins).

    Plain files rather than loky's ``Event``/``Semaphore``: those are named semaphores
    registered with loky's resource tracker in every worker that unpickles them, and a
    worker killed while holding one (``workbench sweep`` refusing a bad option right after
    prestarting) left a registration the tracker then failed to clean up, with a warning
    on the command's stderr after its one-line message. The folder is removed with the
    pool (:func:`_shutdown`); workers never write in it except ``first``.
    """

    POLL_SECONDS = 0.02

    def __init__(self):
        import atexit
        import tempfile

        self.folder = tempfile.mkdtemp(prefix="workbench-gate-")
        atexit.register(self.remove)  # in the process that made it (unpickling skips this)

    def set(self) -> None:
        open(os.path.join(self.folder, "open"), "w").close()

    def is_set(self) -> bool:
        return os.path.exists(os.path.join(self.folder, "open"))

    def wait(self, timeout: float) -> bool:
        end = time.monotonic() + float(timeout)
        while not self.is_set():
            if time.monotonic() >= end:
                return False
            time.sleep(self.POLL_SECONDS)
        return True

    def acquire(self, blocking: bool = False) -> bool:
        """Take the "first worker" token (never blocks: one worker gets it)."""
        try:
            os.close(os.open(os.path.join(self.folder, "first"), os.O_CREAT | os.O_EXCL))
        except FileExistsError:
            return False
        except OSError:  # the folder is gone (the pool was stopped): nothing to wait for
            return True
        return True

    def remove(self) -> None:
        import shutil

        shutil.rmtree(self.folder, ignore_errors=True)


#: the warning filter the pool's resource tracker starts with (:func:`_quiet_tracker`)
TRACKER_WARNINGS = "ignore:resource_tracker:UserWarning"


def _quiet_tracker() -> None:
    """Start loky's resource tracker, if it is not running yet, with its own warnings off.

    The tracker is a separate process that outlives this one and writes to its stderr.
    When a pool is stopped with its workers killed (``workbench sweep`` refusing a bad
    option right after prestarting), loky's bookkeeping of its own semaphores can be cut
    between a semaphore's unlink and its unregistration; the tracker, at its exit, then
    warns that it "appears" to have a leaked semaphore and that it cannot unlink it (it
    is gone already). Nothing is left behind, but the two warnings land on the command's
    stderr after its one-line message (seen once in CI). The filter is given to the
    tracker alone (through the environment it is started with, which is restored at
    once); its message prefix is loky's own, so no other warning is touched.
    """
    from joblib.externals.loky.backend import resource_tracker

    tracker = resource_tracker._resource_tracker
    if getattr(tracker, "_fd", None) is not None:  # running already (loky's own attribute)
        return
    before = os.environ.get("PYTHONWARNINGS")
    os.environ["PYTHONWARNINGS"] = ",".join(w for w in (before, TRACKER_WARNINGS) if w)
    try:
        resource_tracker.ensure_running()
    except Exception:  # pragma: no cover - loky starts it itself when it needs it
        pass
    finally:
        if before is None:
            del os.environ["PYTHONWARNINGS"]
        else:
            os.environ["PYTHONWARNINGS"] = before


def _warm_pool(workers: int, staggered: bool = False):
    """The warm pool with ``workers`` processes (a new one when the size differs).

    The sweep keeps its own loky executor rather than the process-wide one that
    joblib (and so scikit-learn's ``n_jobs``) shares, so that neither can
    reconfigure the other's workers. Each worker watches this process
    (:func:`_watch_parent`) and ends with it. A new pool made ``staggered`` holds
    back every worker but the first until :func:`open_gate` (module docstring).
    """
    from joblib.externals.loky import ProcessPoolExecutor

    niceness = _NICENESS["value"]
    with _POOL_LOCK:
        ex = _POOL.get("executor")
        if ex is not None and (_POOL.get("workers") != workers
                               or _POOL.get("niceness", 0) != niceness):
            _shutdown(ex)
            if _POOL.get("gate") is not None:
                _POOL["gate"].remove()
            ex = None
        if ex is None:
            _quiet_tracker()
            gate = first = None
            if staggered and workers > 1:
                gate = first = FileGate()
            ex = ProcessPoolExecutor(max_workers=workers, timeout=POOL_IDLE_SECONDS,
                                     env=dict(_THREAD_ENV), initializer=_start_worker,
                                     initargs=(os.getpid(), gate, first, niceness))
            _POOL.update(executor=ex, workers=workers, gate=gate, niceness=niceness)
        return ex


def stop_pool() -> None:
    """Stop the warm pool now, its workers killed wherever they are (their imports, a
    gate): what ``workbench sweep`` does when it stops on an error before or during a
    sweep. Nothing when there is no pool."""
    with _POOL_LOCK:
        ex = _POOL.get("executor")
    if ex is not None:
        _drop_pool(ex)


def open_gate() -> None:
    """Let a staggered pool's held-back workers import what trials need (and every
    worker started later go straight on). Nothing when there is no such pool."""
    with _POOL_LOCK:
        gate = _POOL.get("gate")
    if gate is not None:
        gate.set()
        mark("gate opened")


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
    gate = None
    with _POOL_LOCK:
        if _POOL.get("executor") is ex:
            gate = _POOL.get("gate")
            _POOL.clear()
    _shutdown(ex)
    if gate is not None:
        gate.remove()


def default_jobs() -> int:
    """The local workers a sweep uses by default: one per core (joblib's count)."""
    from joblib.externals.loky import cpu_count

    return max(1, int(cpu_count()))


def _start_worker(parent_pid: int, gate=None, first=None, niceness: int = 0) -> None:
    """Pool worker initializer: lower its priority by ``niceness`` (:func:`set_worker_niceness`),
    watch the parent, then import what trials need.

    Importing here (not at the first trial) overlaps a new worker's imports
    with the parent's own start-up; the results cannot change, only when the
    modules are loaded does. In a staggered pool (``gate`` and ``first`` given)
    the worker that takes ``first`` imports at once and the others wait for the
    gate (at most :data:`GATE_SECONDS`).
    """
    import importlib

    if niceness:
        try:
            os.nice(int(niceness))
        except OSError:  # pragma: no cover - not allowed here: the worker runs as it is
            pass
    _watch_parent(parent_pid)
    mark("worker started")
    if gate is not None and first is not None and not first.acquire(False):
        gate.wait(GATE_SECONDS)
        mark("worker through the gate")
    for name in TRIAL_MODULES:
        importlib.import_module(name)
    mark("worker imports done")


def _ready() -> int:
    """A job that does nothing: handing one to each worker makes loky start them all."""
    return os.getpid()


def prestart(workers: int, staggered: bool = False) -> None:
    """Start the warm pool's ``workers`` processes now, without waiting for them.

    Called by ``workbench sweep`` first thing, so the workers start (and import)
    while the parent reads the table; a later sweep of the same size reuses them.
    ``staggered``: only the first worker imports at once, the others after
    :func:`open_gate` (module docstring). Failing here is never fatal: the sweep
    starts the pool again when it needs it.
    """
    try:
        ex = _warm_pool(int(workers), staggered=staggered)
        for _ in range(int(workers)):
            ex.submit(_ready)
    except Exception:  # pragma: no cover - the sweep will start (and report on) the pool itself
        pass
