"""The sweep bridge: runs the core's sweep off the GUI thread, speaks in Qt signals.

:class:`SweepBridge` is a QObject moved to its own :class:`QThread`. Its
``run`` slot calls a *job* (normally :func:`workbench.gui.core_adapter.run_plan`,
which calls :func:`workbench.sweep.runner.run_sweep`; the trials themselves run in
worker processes) with an ``on_event`` callback and a ``threading.Event`` for
cancelling. Each event dict of the core becomes a signal; those signals cross
to the GUI thread as queued connections, so the GUI thread only draws.

While the sweep runs, the bridge also asks the core for the ranking of what
has finished so far (``ranker``), at most every ``rank_interval`` seconds and
once more at the end, and hands the rows over with :attr:`SweepBridge.ranked`.
That work also happens on the bridge's thread.

The ranking itself (:func:`workbench.gui.core_adapter.ranked_rows`: the results
document with its statistics, the bootstrap, every trial's curves) runs in a process
of its own, :func:`rank_in_process`, started once and kept: run on a thread of the
window's process its Python would hold the interpreter lock for tens of milliseconds
at a time, and the window's event loop would stall behind it. Only the finished
rows come back.

The worker processes the sweep starts on this computer are given a lower CPU
priority (``nice`` +10, :data:`WORKER_NICENESS`) as they appear, so that on a
small machine the window keeps getting the processor while every core trains.
"""

from __future__ import annotations

import threading
import time
import traceback
from collections.abc import Callable

from PySide6.QtCore import QObject, QThread, Signal, Slot

from workbench.errors import InputError
from workbench.gui.messages import phrase

#: niceness given to local worker processes (higher = lower priority; never lowered)
WORKER_NICENESS = 10

_RANKER: dict = {}
_RANKER_LOCK = threading.Lock()


def _ranker_pool():
    """The one process that ranks stored sweeps for the window (started on first use)."""
    with _RANKER_LOCK:
        pool = _RANKER.get("pool")
        if pool is None:
            from joblib.externals.loky import ProcessPoolExecutor

            # loky's processes start cleanly under `python -m workbench` as well
            pool = ProcessPoolExecutor(max_workers=1)
            _RANKER["pool"] = pool
        return pool


#: seconds the calibration process stays after its last calibration (then it exits; the
#: next one starts it again)
CALIBRATION_IDLE_SECONDS = 60


def _calibration_pool():
    """The one process that calibrates the window's time estimates (started on first use,
    gone when idle for :data:`CALIBRATION_IDLE_SECONDS`)."""
    with _RANKER_LOCK:
        pool = _RANKER.get("calibration")
        if pool is None:
            from joblib.externals.loky import ProcessPoolExecutor

            pool = ProcessPoolExecutor(max_workers=1, timeout=CALIBRATION_IDLE_SECONDS)
            _RANKER["calibration"] = pool
        return pool


def calibration_pids() -> set[int]:
    """Process ids of the calibration process (empty when it is not running)."""
    pool = _RANKER.get("calibration")
    procs = getattr(pool, "_processes", None) or {}
    return {p.pid for p in procs.values()} if isinstance(procs, dict) else set()


def ranker_pids() -> set[int]:
    """Process ids of the ranking process (empty before its first use)."""
    pool = _RANKER.get("pool")
    procs = getattr(pool, "_processes", None) or {}
    return {p.pid for p in procs.values()} if isinstance(procs, dict) else set()


def _in_kept_process(key: str, pool_of, there, here, *args):
    """``there(*args)`` in the kept process ``pool_of()`` (``_RANKER[key]``); if that process
    died or cannot start, it is dropped (a new one next time) and ``here(*args)`` runs on
    this thread instead. A refusal (InputError) is the caller's."""
    try:
        return pool_of().submit(there, *args).result()
    except InputError:
        raise
    except Exception:  # the process died or could not start: a new one next time
        with _RANKER_LOCK:
            pool = _RANKER.pop(key, None)
        if pool is not None:
            try:
                pool.shutdown(wait=False, kill_workers=True)
            except Exception:  # pragma: no cover - already broken
                pass
        return here(*args)


def rank_in_process(store_path, sweep_id: str, rope=None) -> dict:
    """:func:`workbench.gui.core_adapter.ranked_rows` of a stored sweep, computed in the
    ranking process (read from the store file: SQLite lets it read while the sweep
    writes). Falls back to this thread when that process cannot run."""
    from workbench.gui.core_adapter import ranked_rows

    return _in_kept_process("pool", _ranker_pool, ranked_rows, ranked_rows, store_path,
                            sweep_id, rope)


def calibrate_in_process(plan, previous=None):
    """:func:`workbench.gui.core_adapter.calibrate` (the time estimate's short timed trials,
    one to two seconds of Python), run in a process of its own (:func:`_calibration_pool`):
    run on a thread of the window's process it held the interpreter lock beside the event
    loop, and a sweep started meanwhile began with the window's paints waiting behind it.
    Not the ranking process: a sweep's rankings would wait behind a calibration. Falls
    back to this thread when that process cannot run."""
    from workbench.gui.core_adapter import calibrate, calibrate_job

    return _in_kept_process("calibration", _calibration_pool, calibrate_job, calibrate,
                            plan, previous)


def lower_worker_priority(seen: set[int], niceness: int = WORKER_NICENESS) -> int:
    """Renice the child processes not yet in ``seen``; return how many were changed."""
    try:
        import psutil

        children = psutil.Process().children(recursive=True)
    except Exception:  # pragma: no cover - psutil missing or process table unreadable
        return 0
    changed = 0
    for child in children:
        if child.pid in seen:
            continue
        seen.add(child.pid)
        try:
            if child.nice() < niceness:
                child.nice(niceness)
                changed += 1
        except Exception:  # gone already, or not ours to change
            continue
    return changed


class SweepBridge(QObject):
    """Runs one sweep job; emits its life cycle as signals.

    Parameters
    ----------
    job : callable
        ``job(on_event, cancel) -> dict``; blocks until the sweep ends and
        returns a summary (at least ``sweep_id``).
    ranker : callable, optional
        ``ranker(sweep_id) -> object`` (the rows to show); called on this thread.
    cleanup : callable, optional
        Called on this thread after the last ranking (e.g. to close a store).
    rank_interval : float
        Least number of seconds between two intermediate rankings.
    """

    sweepStarted = Signal(dict)
    trialStarted = Signal(dict)
    trialFinished = Signal(dict)
    ranked = Signal(object)
    #: the end of the job: {"state": "finished" | "cancelled" | "failed", "message", "sweep_id", ...}
    done = Signal(dict)

    #: seconds the job waits after the thread starts, so the window can
    #: paint the results tab it just switched to before the core starts loading the table
    #: (both need the interpreter; together they stalled the event loop for over 100 ms)
    START_DELAY = 0.08

    def __init__(self, job: Callable, ranker: Callable | None = None, rank_interval: float = 0.3,
                 cleanup: Callable | None = None):
        super().__init__()
        self._job = job
        self._cleanup = cleanup
        self._ranker = ranker
        self._interval = float(rank_interval)
        self.cancel_event = threading.Event()
        self._sweep_id = None
        self._last_rank = 0.0
        self._rank_seconds = 0.0
        self._niced: set[int] = set()
        self._started = 0
        self._dirty = False
        # rankings run one at a time beside the sweep (the runner never waits for them)
        self._rank_pool = None
        self._rank_future = None

    def cancel(self) -> None:
        """Ask the sweep to stop (thread-safe; call it from any thread)."""
        self.cancel_event.set()

    def _rank_now(self, sweep_id) -> None:
        """One ranking, handed over when done (on whichever thread runs it)."""
        t = time.monotonic()
        try:
            rows = self._ranker(sweep_id)
        except Exception:  # a ranking hiccup must not end the sweep
            return
        finally:
            self._rank_seconds = time.monotonic() - t
        self.ranked.emit(rows)

    def _rank(self, force: bool = False) -> None:
        """Rank what has finished: during the sweep in the background, one ranking at a
        time and only when trials finished since the last (the runner goes on handing out
        trials meanwhile); with ``force`` (the end), now, after any ranking under way."""
        if self._ranker is None or self._sweep_id is None:
            return
        busy = self._rank_future is not None and not self._rank_future.done()
        if not force:
            now = time.monotonic()
            # rank at most every `interval` s, and never spend more than a fifth of the time
            wait = max(self._interval, 5.0 * self._rank_seconds)
            if busy or not self._dirty or now - self._last_rank < wait:
                return
        self._last_rank = time.monotonic()
        self._dirty = False
        if self._rank_pool is None:
            from concurrent.futures import ThreadPoolExecutor

            self._rank_pool = ThreadPoolExecutor(max_workers=1,
                                                 thread_name_prefix="sweep-ranking")
        # every ranking is handed over from the one ranking thread, so they arrive in the
        # order they were made: the last one, made after the end, arrives last
        self._rank_future = self._rank_pool.submit(self._rank_now, self._sweep_id)
        if force:
            self._rank_future.result()
            self._rank_pool.shutdown(wait=False)
            self._rank_pool = None

    def _on_event(self, event: dict) -> None:
        kind = event.get("type")
        if kind == "sweep_started":
            self._sweep_id = event.get("sweep_id", self._sweep_id)
            self.sweepStarted.emit(dict(event))
        elif kind == "trial_started":
            self._started += 1
            workers = int(event.get("workers") or 2)
            if self._started <= 2 * workers or self._started % 25 == 0:
                lower_worker_priority(self._niced)  # new (or respawned) workers
            self.trialStarted.emit(dict(event))
        elif kind == "trial_finished":
            self._dirty = True
            self.trialFinished.emit(dict(event))
            self._rank()
        elif kind == "sweep_finished":
            self._sweep_id = event.get("sweep_id", self._sweep_id)

    @Slot()
    def run(self) -> None:
        summary: dict = {"state": "failed", "message": "", "sweep_id": None}
        self.cancel_event.wait(self.START_DELAY)  # returns at once when cancelled
        try:
            result = self._job(self._on_event, self.cancel_event) or {}
            summary.update(result)
            if "state" not in result:
                summary["state"] = "cancelled" if self.cancel_event.is_set() else "finished"
        except InputError as exc:
            summary.update(state="failed", message=phrase(exc))
        except KeyboardInterrupt:
            summary.update(state="cancelled", message="stopped")
        except Exception as exc:  # shown in the window, never a traceback dialog
            last = traceback.format_exception_only(type(exc), exc)[-1].strip()
            summary.update(state="failed", message=f"the sweep stopped with an error: {last}")
        if summary.get("sweep_id") is None:
            summary["sweep_id"] = self._sweep_id
        self._sweep_id = summary["sweep_id"]
        self._rank(force=True)
        if self._cleanup is not None:
            try:
                self._cleanup()
            except Exception:  # pragma: no cover - closing a store is best effort
                pass
        self.done.emit(summary)


class SweepThread(QObject):
    """Owns a :class:`SweepBridge` and the :class:`QThread` it lives in.

    Use :meth:`start`, connect to :attr:`bridge`'s signals, :meth:`stop` to
    cancel and :meth:`wait` to join. ``finished`` fires on the GUI thread
    after the thread has ended.
    """

    finished = Signal(dict)

    def __init__(self, job: Callable, ranker: Callable | None = None, parent=None,
                 rank_interval: float = 0.3, cleanup: Callable | None = None):
        super().__init__(parent)
        self.bridge = SweepBridge(job, ranker, rank_interval, cleanup)
        self.thread = QThread()
        self.thread.setObjectName("sweep-bridge")
        self.bridge.moveToThread(self.thread)
        self.thread.started.connect(self.bridge.run)
        self.bridge.done.connect(self._on_done)
        self._summary: dict | None = None

    def start(self) -> None:
        from workbench.sweep.pool import set_worker_niceness

        # the pool's workers start at a lower priority (and the ones already seen are
        # reniced, lower_worker_priority, in case some were started otherwise)
        set_worker_niceness(WORKER_NICENESS)
        self.thread.start()

    def stop(self) -> None:
        self.bridge.cancel()

    def running(self) -> bool:
        return self.thread.isRunning()

    def wait(self, ms: int = 10_000) -> bool:
        return self.thread.wait(ms)

    @Slot(dict)
    def _on_done(self, summary: dict) -> None:
        # runs on the GUI thread (queued): let the thread finish, then report
        self._summary = summary
        self.thread.quit()
        self.thread.wait(5000)
        self.finished.emit(summary)
