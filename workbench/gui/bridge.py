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

    #: seconds the job waits after the thread starts, so the window can paint the results
    #: tab it just switched to before the core starts loading the table (both need the
    #: interpreter; together they stalled the event loop for over 100 ms)
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

    def cancel(self) -> None:
        """Ask the sweep to stop (thread-safe; call it from any thread)."""
        self.cancel_event.set()

    def _rank(self, force: bool = False) -> None:
        if self._ranker is None or self._sweep_id is None:
            return
        now = time.monotonic()
        # rank at most every `interval` s, and never spend more than a fifth of the time on it
        wait = max(self._interval, 5.0 * self._rank_seconds)
        if not force and (not self._dirty or now - self._last_rank < wait):
            return
        self._last_rank = now
        self._dirty = False
        try:
            rows = self._ranker(self._sweep_id)
        except Exception:  # a ranking hiccup must not end the sweep
            return
        finally:
            self._rank_seconds = time.monotonic() - now
        self.ranked.emit(rows)

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
