"""Start the window: the QApplication, the theme, and the ``workbench open`` flow."""

from __future__ import annotations

import os
import sys
from pathlib import Path

from workbench.errors import EXIT_BAD_INPUT, EXIT_OK


def _headless_if_needed(snapshot: str | None) -> None:
    """Render offscreen for a snapshot when there is no display to draw on."""
    if snapshot and not (os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY")
                         or sys.platform in ("win32", "darwin")):
        os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")


def make_app(argv=None):
    """The QApplication (created once), with our names set."""
    from PySide6.QtWidgets import QApplication

    from workbench import __version__
    from workbench.gui.settings import APPLICATION, ORGANISATION

    app = QApplication.instance()
    if app is None:
        app = QApplication(list(argv or [sys.argv[0]]))
    app.setOrganizationName(ORGANISATION)
    app.setApplicationName(APPLICATION)
    app.setApplicationDisplayName("Activation Workbench")
    app.setApplicationVersion(__version__)
    return app


def default_choices(window) -> None:
    """Tick the advice's hidden activations and heads (the default sweep)."""
    summary = window.summary
    if summary is None:
        return
    from workbench.gui import core_adapter as core

    window.setup.hidden_grid.set_checked(core.default_hidden(summary))
    # the advised head and one alternative the guard accepts (the verdict tests the rule);
    # the metric follows the heads ticked (the set-up column's own rule)
    window.setup.head_grid.set_checked(core.default_heads(summary))
    window.setup._set_metrics(summary.task, summary.target.kind)


def run_app(path: str | None = None, target: str | None = None, run: bool = False,
            snapshot: str | None = None, size=(1280, 800), store: str | None = None,
            settings_dir: str | None = None, sweep_overrides: dict | None = None) -> int:
    """Open the window; optionally load ``path``, run the default sweep, save a PNG and exit.

    Returns the exit status (0, or 2 when the file cannot be loaded in
    snapshot / run mode).
    """
    _headless_if_needed(snapshot)
    app = make_app()
    from workbench.gui.main_window import MainWindow
    from workbench.gui.settings import Settings

    win = MainWindow(settings=Settings(settings_dir), store_path=store)
    if snapshot:
        win.resize(*size)
    win.show()
    status = {"code": EXIT_OK}
    scripted = bool(snapshot or run)

    def finish():
        if snapshot:
            # let queued work land first (the estimate, plot redraws) and the layouts
            # settle, so the picture shows the window as a user would see it
            from PySide6.QtCore import QTimer

            QTimer.singleShot(400, grab_and_quit)
        elif scripted:
            win.close()
            app.quit()

    waited = {"n": 0}

    def grab_and_quit():
        # the set-up column's estimate is timed in the background once the plan settles:
        # wait for it (a few seconds at most) so the picture shows it
        if (win._calibrate_timer.isActive() or win._calibrating) and waited["n"] < 40:
            waited["n"] += 1
            from PySide6.QtCore import QTimer

            QTimer.singleShot(250, grab_and_quit)
            return
        app.processEvents()
        Path(snapshot).parent.mkdir(parents=True, exist_ok=True)
        if not win.grab().save(str(snapshot)):
            print(f"workbench: could not write {snapshot}", file=sys.stderr)
            status["code"] = EXIT_BAD_INPUT
        else:
            print(f"saved {snapshot}")
        win.close()
        app.quit()

    def on_target(_name):
        win.targetReady.disconnect(on_target)
        if run:
            default_choices(win)
            for k, v in (sweep_overrides or {}).items():
                getattr(win.setup, k).setValue(v)
            win.run_sweep()
            if not win.sweep_running():
                print(f"workbench: {win.message_text() or 'the sweep could not start'}",
                      file=sys.stderr)
                status["code"] = EXIT_BAD_INPUT
                finish()
        else:
            finish()

    def on_sweep(summary):
        if summary.get("state") == "failed":
            print(f"workbench: {summary.get('message')}", file=sys.stderr)
            status["code"] = EXIT_BAD_INPUT
        n = win.proxy.rowCount()
        win.select_rows(list(range(min(3, n))))
        finish()

    def on_fail(msg):
        if scripted:
            print(f"workbench: {msg}", file=sys.stderr)
            status["code"] = EXIT_BAD_INPUT
            finish()

    def on_target_failed(exc):
        # --run with no target to sweep: refused like the command line (one line, exit 2);
        # a snapshot alone shows the window asking for the target
        if run:
            status["error"] = exc
        if scripted:
            finish()

    if path:
        win.targetReady.connect(on_target)
        win.sweepEnded.connect(on_sweep)
        win.loadFailed.connect(on_fail)
        win.targetFailed.connect(on_target_failed)
        win.open_path(path, target)
    elif snapshot:
        from PySide6.QtCore import QTimer

        QTimer.singleShot(200, finish)
    app.exec()
    # closing the last window posts a second quit; left queued it would end every later
    # event loop of this application at once (the tests reuse one application)
    from PySide6.QtCore import QEvent

    app.removePostedEvents(app, QEvent.Quit)
    from workbench.gui.tasks import wait_all

    wait_all(5000)
    if status.get("error") is not None:
        raise status["error"]  # the command line phrases it and exits with status 2
    return status["code"]
