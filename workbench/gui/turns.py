"""Work split over turns of the event loop, each part painted in a turn of its own.

Some of the window's updates are too long for one turn of the event loop together with
their paint (the end of a sweep: the last ranking, the set-up column enabled again, the
best row's curves, fold scores and layer health). They are split in steps, and
:func:`after_paint` runs the next step once the window has painted what the step before
changed.

A fixed delay cannot promise that: Qt asks for a window's paint with a timer of its own
(5 ms by default, ``QPlatformWindow::requestUpdate``; ``QT_QPA_UPDATE_IDLE_TIME``), a
scene's changes reach its view through posted events, and on a busy machine timers
fire late and together. With a 1 ms delay two or three steps' changes were painted
together (45 ms of the window's CPU in one turn); with 12 ms, still now and then.
"""

from __future__ import annotations

from collections.abc import Callable

import shiboken6
from PySide6.QtCore import QEvent, QObject, QTimer
from PySide6.QtWidgets import QWidget

#: if the window paints nothing (the step changed nothing visible, or the window is not
#: shown), the next step runs after this many milliseconds
FALLBACK_MS = 40
#: the delay after the paint (ms): a timer fires after the pass of posted events that
#: holds the paint, so the next step is a turn of its own
AFTER_PAINT_MS = 1


class _AfterPaint(QObject):
    """Watches a top-level window for its next paint (``UpdateRequest``), then calls ``fn``
    once, :data:`AFTER_PAINT_MS` later; or after :data:`FALLBACK_MS` without a paint."""

    def __init__(self, window: QWidget, fn: Callable[[], None], fallback_ms: int):
        super().__init__(window)
        self._window = window
        self._fn = fn
        self._fired = False
        self._painted = False
        window.installEventFilter(self)
        self._timer = QTimer(self)
        self._timer.setSingleShot(True)
        self._timer.timeout.connect(self._fire)
        self._timer.start(int(fallback_ms))

    def eventFilter(self, obj, event) -> bool:  # noqa: N802 - Qt override
        if obj is self._window and event.type() == QEvent.UpdateRequest \
                and not self._painted:
            self._painted = True
            self._timer.start(AFTER_PAINT_MS)  # the paint is this event; then the step
        return False

    def _fire(self) -> None:
        if self._fired:
            return
        self._fired = True
        if shiboken6.isValid(self._window):
            self._window.removeEventFilter(self)
        fn, self._fn = self._fn, None
        self.deleteLater()
        fn()


def after_paint(widget: QWidget, fn: Callable[[], None],
                fallback_ms: int = FALLBACK_MS) -> None:
    """Call ``fn`` on a later turn of the event loop, once ``widget``'s window has painted
    (or after ``fallback_ms`` when it paints nothing). Nothing happens if the widget is
    deleted first."""
    if not shiboken6.isValid(widget):
        return
    _AfterPaint(widget.window(), fn, fallback_ms)
