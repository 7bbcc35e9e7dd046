"""Run one short core call (load, profile, export, read the store) off the GUI thread.

``run_task(fn, on_done, on_error)`` puts ``fn()`` on Qt's global thread pool and
delivers its result (or its :class:`InputError` message, phrased by
:func:`workbench.gui.messages.phrase`) to the GUI thread
through a queued signal. The returned :class:`TaskHandle` is kept alive until
the result has been delivered.
"""

from __future__ import annotations

import atexit
import traceback
from collections.abc import Callable

from PySide6.QtCore import QObject, QRunnable, QThreadPool, Signal, Slot

from workbench.errors import InputError
from workbench.gui.messages import phrase

_LIVE: set = set()


class TaskHandle(QObject):
    """Lives on the GUI thread; its slots run there (queued from the pool thread)."""

    succeeded = Signal(object)
    failed = Signal(str)

    def __init__(self, on_done: Callable, on_error: Callable | None):
        super().__init__()
        self._on_done, self._on_error = on_done, on_error
        self.succeeded.connect(self._ok)
        self.failed.connect(self._bad)

    @Slot(object)
    def _ok(self, result):
        _LIVE.discard(self)
        self._on_done(result)

    @Slot(str)
    def _bad(self, msg):
        _LIVE.discard(self)
        if self._on_error is not None:
            self._on_error(msg)


class _Runnable(QRunnable):
    def __init__(self, fn: Callable, handle: TaskHandle):
        super().__init__()
        self.fn, self.handle = fn, handle
        self.setAutoDelete(True)

    def run(self):
        try:
            result = self.fn()
        except InputError as exc:
            self._send(self.handle.failed, phrase(exc))
        except Exception as exc:  # shown as one line in the window
            last = traceback.format_exception_only(type(exc), exc)[-1].strip()
            self._send(self.handle.failed, f"unexpected problem: {last}")
        else:
            self._send(self.handle.succeeded, result)

    @staticmethod
    def _send(signal, value):
        try:
            signal.emit(value)
        except RuntimeError:  # the receiver went away (window closed): nobody to tell
            pass


def run_task(fn: Callable, on_done: Callable, on_error: Callable | None = None) -> TaskHandle:
    """Run ``fn()`` on the thread pool; call ``on_done(result)`` or ``on_error(msg)`` on the GUI thread."""
    handle = TaskHandle(on_done, on_error)
    _LIVE.add(handle)
    QThreadPool.globalInstance().start(_Runnable(fn, handle))
    return handle


def wait_all(ms: int = 10_000) -> bool:
    """Wait for every pooled task (used when the window closes)."""
    return QThreadPool.globalInstance().waitForDone(ms)


@atexit.register
def _drain() -> None:
    # a pooled task still running Python while the interpreter finalizes can abort it
    try:
        pool = QThreadPool.globalInstance()
        pool.waitForDone(10_000)
        pool.clear()
    except RuntimeError:  # pragma: no cover - Qt already gone
        pass
