"""The window keeps the garbage collector's full passes short (:mod:`workbench.gui.heap`).

Reference: CPython's own collector (:func:`gc.freeze`, :func:`gc.get_freeze_count`,
:func:`gc.get_objects`, as the Python library reference documents them): the objects
frozen leave the three generations a full collection walks, and what is made after them
is walked as before.
"""

from __future__ import annotations

import gc

import pytest
from test_gui import SAMPLES, load_by_drop, small_plan

pytestmark = pytest.mark.gui


def _walked() -> int:
    """The objects a full collection walks now (the three generations)."""
    return sum(len(gc.get_objects(generation=g)) for g in range(3))


def test_a_freeze_leaves_a_full_pass_only_the_objects_made_after_it():
    from workbench.gui import heap

    gc.unfreeze()  # (an earlier window test in this process froze what there was)
    assert _walked() > 1_000  # (a test process with Qt and NumPy loaded)
    frozen = heap.freeze()
    assert frozen == gc.get_freeze_count() > 1_000
    assert _walked() < 100
    made = [[i] for i in range(2_000)]  # 2,001 tracked lists, made after the freeze
    assert 2_000 <= _walked() < 2_100
    del made
    gc.collect()  # (still works: the unfrozen objects are collected as before)


def test_the_window_freezes_after_start_up_as_a_table_loads_and_before_a_sweep_runs(
        qtbot, tmp_path, monkeypatch):
    """Wiring: the three moments :mod:`workbench.gui.heap` names, each seen by what the
    window holds at the call (no table yet; a table; a sweep made but not started)."""
    from workbench.gui import main_window as mw
    from workbench.gui.settings import Settings

    seen: list[tuple] = []
    holder: dict = {}

    def freeze():
        win = holder.get("win")
        sweep = None if win is None else win._sweep
        seen.append((win is not None and win.summary is not None,
                     sweep is not None and not sweep.running()))
        return 0

    monkeypatch.setattr(mw.heap, "freeze", freeze)
    win = mw.MainWindow(settings=Settings(tmp_path / "settings"),
                        store_path=str(tmp_path / "store.sqlite"), theme_choice="light")
    holder["win"] = win
    qtbot.addWidget(win)
    win.resize(1280, 800)
    win.show()
    qtbot.waitUntil(lambda: len(seen) >= 1, timeout=30_000)  # the start-up imports done
    assert seen == [(False, False)]
    load_by_drop(qtbot, win, SAMPLES / "kiln_batches.csv")
    assert seen[-1] == (True, False)
    small_plan(win, hidden=("relu",), epochs=2)
    n = len(seen)
    with qtbot.waitSignal(win.sweepEnded, timeout=60_000) as blocker:
        win.run_sweep()
    assert blocker.args[0]["state"] == "finished"
    assert seen[n:] == [(True, True)]  # once, as the sweep started
