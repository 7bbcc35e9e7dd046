"""Work split over turns of the event loop, each part painted in a turn of its own.

Some of the window's updates are too long for one turn of the event loop together with
their paint (the end of a sweep: the last ranking, the set-up column enabled again, the
best row's curves, fold scores and layer health). They are split in steps, and
:func:`after_paint` runs the next step a little later, once the window has had the time
to paint what the step before changed.

Measured on the offscreen platform: a window's paint came 2-3 ms after a change, so a
1 ms timer raced it, and two or three steps' changes were painted together (45 ms of the
window's CPU in one turn). 12 ms leaves the paint the time it takes, and is longer than the
wait other platforms put before a paint (from memory: ``QPlatformWindow::requestUpdate``
waits 5 ms by default). (A version that waited for the paint
itself, with an event filter on the window, crashed the test process now and then when
the windows went away; a timer owned by the widget is deleted with it.)
"""

from __future__ import annotations

from collections.abc import Callable

import shiboken6
from PySide6.QtCore import QTimer
from PySide6.QtWidgets import QWidget

#: the delay of the next step (ms): a paint's 2-3 ms after a change (measured), and longer
#: than the 5 ms some platforms wait before a paint (from memory)
PAINT_GAP_MS = 12


def after_paint(widget: QWidget, fn: Callable[[], None], delay_ms: int = PAINT_GAP_MS) -> None:
    """Call ``fn`` :data:`PAINT_GAP_MS` later on the event loop, unless ``widget`` is
    deleted first (the timer is the widget's)."""
    if shiboken6.isValid(widget):
        QTimer.singleShot(int(delay_ms), widget, fn)
