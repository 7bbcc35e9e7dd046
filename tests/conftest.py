"""Shared test set-up: Qt offscreen, no GPU, settings kept out of the user's home."""

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ.setdefault("CUDA_VISIBLE_DEVICES", "")
os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")

import pytest  # noqa: E402


@pytest.fixture(autouse=True)
def _private_home(tmp_path_factory, monkeypatch):
    """Point XDG folders (store, settings) at a temporary place for every test."""
    base = tmp_path_factory.mktemp("home")
    monkeypatch.setenv("XDG_DATA_HOME", str(base / "data"))
    monkeypatch.setenv("XDG_CONFIG_HOME", str(base / "config"))
    monkeypatch.setenv("XDG_CACHE_HOME", str(base / "cache"))
    yield
    # a window's background tasks (a calibration, a load) finish inside the test that
    # started them: one still running while the next test builds its window and Python
    # collects the last one's Qt objects crashed the interpreter once (CI, a calibration
    # thread under garbage collection in theme.apply)
    import sys

    if "PySide6.QtCore" in sys.modules:
        from PySide6.QtCore import QThreadPool

        QThreadPool.globalInstance().waitForDone(120_000)


@pytest.fixture
def window(qtbot, tmp_path):
    """The main window at 1280x800 in the light theme, with its own settings and store;
    a sweep still running at the end is stopped (shared by the window test modules)."""
    from workbench.gui.main_window import MainWindow
    from workbench.gui.settings import Settings

    win = MainWindow(settings=Settings(tmp_path / "settings"),
                     store_path=str(tmp_path / "store.sqlite"), theme_choice="light")
    qtbot.addWidget(win)
    win.resize(1280, 800)
    win.show()
    yield win
    if win.sweep_running():
        win.stop_sweep()
        win._sweep.wait(10_000)
