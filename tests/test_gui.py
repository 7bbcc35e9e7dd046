"""The window, driven offscreen with pytest-qt: drop, choose, run, sort, select, export, stop.

Waiting is done with ``qtbot.waitSignal`` / ``qtbot.waitUntil`` only. The
reference for every loader message is :func:`workbench.data.intake.load_table`
itself (the window must show exactly what the loader says); the reference for
sorting is Python's ``sorted``.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import psutil
import pytest
from PySide6.QtCore import QMimeData, QPoint, QPointF, Qt, QUrl
from PySide6.QtGui import QAction, QDragEnterEvent, QDropEvent
from PySide6.QtWidgets import QApplication

from workbench.data.intake import load_table
from workbench.errors import InputError
from workbench.gui import core_adapter as core
from workbench.gui.main_window import CANNOT_RUN, MainWindow
from workbench.gui.messages import SETTING_LABELS, phrase
from workbench.gui.models import COLUMN_KEYS

pytestmark = [
    pytest.mark.gui,
    # PySide6 6.12 flags the QPoint constructor of QDragEnterEvent, the only one it offers
    pytest.mark.filterwarnings("ignore:Function.*QDragEnterEvent:DeprecationWarning"),
]

SAMPLES = Path(__file__).resolve().parents[1] / "sample_sets"




def drop_file(win: MainWindow, path: Path) -> bool:
    """Send a real drag-enter and drop of a file URL to the window; True if the enter was accepted."""
    mime = QMimeData()
    mime.setUrls([QUrl.fromLocalFile(str(path))])
    centre = QPoint(win.width() // 2, win.height() // 2)
    enter = QDragEnterEvent(centre, Qt.CopyAction, mime, Qt.LeftButton, Qt.NoModifier)
    QApplication.sendEvent(win, enter)
    accepted = enter.isAccepted()
    drop = QDropEvent(QPointF(centre), Qt.CopyAction, mime, Qt.LeftButton, Qt.NoModifier)
    QApplication.sendEvent(win, drop)
    return accepted


def load_by_drop(qtbot, win, path, timeout=20_000):
    with qtbot.waitSignal(win.targetReady, timeout=timeout):
        assert drop_file(win, path)


def small_plan(win, hidden=("relu", "tanh"), epochs=4, folds=2, repeats=1, layers="6",
               learning_rates="0.001", heads=None):
    """A small plan: ``heads`` None keeps the advised head alone (the default ticks one
    alternative beside it)."""
    s = win.setup
    s.hidden_grid.set_checked(hidden)
    s.head_grid.set_checked(heads or [win.summary.advice.output_head])
    s.layers_edit.setText(layers)
    s.lr_edit.setText(learning_rates)  # one rate keeps these sweeps small (the default: tune)
    s.folds_spin.setValue(folds)
    s.repeats_spin.setValue(repeats)
    s.epochs_spin.setValue(epochs)
    s.jobs_spin.setValue(2)


def networks(win) -> list[dict]:
    """The results table's configuration rows (the baselines' reference rows left out)."""
    return [r for r in win.results_model.rows() if r.get("kind") != "baseline"]


def worker_processes() -> list[psutil.Process]:
    """Live child processes that run trials (loky's resource tracker is not a worker, nor
    are the window's ranking process, started once and kept, and its calibration process,
    which stays a minute after its last calibration)."""
    from workbench.gui.bridge import calibration_pids, ranker_pids

    out = []
    ranker = ranker_pids() | calibration_pids()
    for p in psutil.Process().children(recursive=True):
        if p.pid in ranker:
            continue
        try:
            if p.status() == psutil.STATUS_ZOMBIE:
                continue
            cmd = " ".join(p.cmdline())
        except psutil.Error:
            continue
        if "resource_tracker" in cmd:
            continue
        out.append(p)
    return out


# --------------------------------------------------------------------------- the whole job


def test_drop_run_sort_select_export(qtbot, window, tmp_path):
    win = window
    load_by_drop(qtbot, win, SAMPLES / "kiln_batches.csv")
    assert win.table is not None and win.table.name == "kiln_batches.csv"
    assert win.frame_model.rowCount() > 0
    # the target: pick it explicitly, see its kind and the advised head
    with qtbot.waitSignal(win.targetReady, timeout=10_000):
        win.set_target("passes_inspection")
    assert win.summary.target.kind == "binary"
    assert "logistic" in win.setup.advice_label.text()
    assert "common practice" in win.setup.advice_label.text()
    # every activation check box explains itself (formula and range)
    for name, box in win.setup.hidden_grid.boxes.items():
        assert "range" in box.toolTip() and "f(z)" in box.toolTip(), name

    # two hidden activations and one head
    small_plan(win, hidden=("relu", "tanh"))
    win.setup.head_grid.set_checked(["logistic"])
    assert sorted(win.setup.hidden_grid.checked()) == ["relu", "tanh"]
    assert win.setup.head_grid.checked() == ["logistic"]
    assert "2 configurations" in win.setup.estimate_label.text()
    assert "4 trials" in win.setup.estimate_label.text()

    # the sweep's end is said after the best row's plots are all drawn (one panel per turn
    # of the event loop, see PlotArea.show_rows)
    at_end = []
    win.sweepEnded.connect(lambda *_: at_end.append(
        (win.plot_area.staging(), [bool(p._series) for p in win.plot_area.panels()[:3]])))
    with qtbot.waitSignal(win.sweepEnded, timeout=60_000) as blocker:
        win.run_sweep()
        assert win.sweep_running()
    assert blocker.args[0]["state"] == "finished", blocker.args[0]
    assert at_end == [(False, [True, True, True])]
    qtbot.waitUntil(lambda: len(networks(win)) == 2, timeout=5_000)
    rows = networks(win)
    assert {r["hidden"] for r in rows} == {"relu", "tanh"}
    assert all(r["n_done"] == 2 and r["status"] == "done" for r in rows)

    # sort by score, both ways, through the view (header click path)
    col = COLUMN_KEYS.index("mean")
    win.results_view.sortByColumn(col, Qt.DescendingOrder)
    means = [win.proxy.row_at(i)["mean"] for i in range(win.proxy.rowCount())]
    assert means == sorted(means, reverse=True)
    win.results_view.sortByColumn(col, Qt.AscendingOrder)
    means = [win.proxy.row_at(i)["mean"] for i in range(win.proxy.rowCount())]
    assert means == sorted(means)

    # select both configurations: two learning curves, two fold-score sets, health bars
    win.select_rows([i for i in range(win.proxy.rowCount())
                     if win.proxy.row_at(i)["kind"] == "network"])
    assert len(win.selected_rows()) == 2
    curves = win.curves.curve_items()
    assert len(curves) == 2
    for c in curves:
        x, y = c.getData()
        assert len(x) >= 1 and all(math.isfinite(v) for v in y)
    assert len(win.spread.scatter_items()) == 2
    assert win.health.bar_items()
    # what is drawn is what the store holds: the mean over folds of each trial's loss curve,
    # and every fold score (numpy's mean over the stored histories is the reference)
    from workbench.sweep.store import Store

    with Store(win.store_path) as store:
        stored = store.trials(win.sweep_id)
    in_rank_order = sorted(win.selected_rows(), key=lambda r: r["rank"])  # as the plots
    for item, row in zip(curves, in_rank_order):
        trials = [t for t in stored if t["config_index"] == row["index"]]
        losses = np.array([t["history"]["loss"] for t in trials], float)
        np.testing.assert_allclose(item.getData()[1], losses.mean(axis=0), rtol=1e-12)
    for sc, row in zip(win.spread.scatter_items(), in_rank_order):
        scores = sorted(t["test_score"] for t in stored if t["config_index"] == row["index"])
        assert sorted(sc.getData()[1].tolist()) == pytest.approx(scores, rel=1e-12)

    # export the recommended configuration (what Export takes by default)
    win.select_rows([])
    best = win.export_target_row()
    assert best["index"] == win.results_meta["verdict"]["recommended"]["index"]
    out = tmp_path / "export"
    from workbench.export.bundle import FORMATS

    formats = [key for key, *_ in core.export_formats()]
    assert formats == list(FORMATS)  # the dialog lists the registry
    failures, written = [], []
    win.exportFailed.connect(failures.append)
    win.exportDone.connect(written.append)
    win.export_configuration(best, str(out), formats)
    qtbot.waitUntil(lambda: bool(failures or written), timeout=120_000)
    assert not failures, failures
    folder = Path(written[0])
    assert folder == out.absolute() and folder.is_dir()
    for fmt in FORMATS.values():
        for name in fmt.files:
            assert (folder / name).is_file() and (folder / name).stat().st_size > 0, name


# --------------------------------------------------------------------------- bad input


def _bad_files(tmp_path: Path) -> dict[str, Path]:
    d = tmp_path / "bad"
    d.mkdir()
    files = {
        "empty": d / "empty.csv",
        "binary": d / "binary.csv",
        "extension": d / "table.docx",
        "ragged": d / "ragged.csv",
        "header_only": d / "header.csv",
    }
    files["empty"].write_bytes(b"")
    files["binary"].write_bytes(bytes(range(256)) * 8)
    files["extension"].write_text("a,b\n1,2\n3,4\n")
    files["ragged"].write_text("a,b,c\n1,2,3\n4,5\n6,7,8,9\n10,11,12\n")
    files["header_only"].write_text("a,b,c\n")
    return files


def test_bad_files_show_the_loader_message_and_keep_the_table(qtbot, window, tmp_path):
    win = window
    load_by_drop(qtbot, win, SAMPLES / "coffee_roast.csv")
    rows_before = win.frame_model.rowCount()
    path_before = win.table.path
    for case, path in _bad_files(tmp_path).items():
        with pytest.raises(InputError) as ref:
            load_table(path)
        with qtbot.waitSignal(win.loadFailed, timeout=10_000) as blocker:
            drop_file(win, path)
        # the loader's own line, then where the window sets the table
        assert ref.value.setting == "table", case
        assert blocker.args[0] == phrase(ref.value), case
        assert win.message_text() == f"{ref.value} ({SETTING_LABELS['table']})", case
        assert "\n" not in win.message_text()
        assert win.table.path == path_before, case
        assert win.frame_model.rowCount() == rows_before, case
    # and the window still works: a good file loads again and clears the message
    load_by_drop(qtbot, win, SAMPLES / "orchard_water.csv")
    assert win.message_text() == ""
    assert win.table.name == "orchard_water.csv"


def test_a_drag_without_files_is_refused(window):
    mime = QMimeData()
    mime.setText("not a file")
    ev = QDragEnterEvent(QPoint(10, 10), Qt.CopyAction, mime, Qt.LeftButton, Qt.NoModifier)
    QApplication.sendEvent(window, ev)
    assert not ev.isAccepted()


@pytest.mark.parametrize("table, kind, any_refused", [("greenhouse_temp.csv", "signed", True),
                                                      ("kiln_batches.csv", "binary", False)])
def test_refused_heads_are_disabled_with_the_reason(qtbot, window, table, kind, any_refused):
    # the sweep's own guard (workbench.sweep.plan.resolve_heads) decides; the window only shows it
    from workbench.sweep.plan import resolve_heads

    load_by_drop(qtbot, window, SAMPLES / table)
    info = window.summary.target
    assert info.kind == kind
    refused_any = False
    for name, box in window.setup.head_grid.boxes.items():
        try:
            _, refused, _ = resolve_heads(info, [name])
        except InputError as exc:
            refused = {name: str(exc)}
        assert box.isEnabled() == (name not in refused), name
        if name in refused:
            refused_any = True
            assert refused[name] in box.toolTip()
            assert not box.isChecked()
    # a binary target may take logistic or (unusually) a two-unit softmax: none refused
    assert refused_any == any_refused


def test_changed_roles_go_into_the_plan(qtbot, window):
    load_by_drop(qtbot, window, SAMPLES / "coffee_roast.csv")
    model = window.profile_model
    target = window.summary.target.name
    feature = next(c["name"] for c in model.columns() if c["role"] == "feature")
    row = next(i for i, c in enumerate(model.columns()) if c["name"] == feature)
    assert model.setData(model.index(row, 4), "ignore")
    plan, msg = window._plan()
    assert plan is not None, msg
    assert plan.roles == {feature: "ignore"}
    assert target not in plan.roles
    # and the runner applies it: the column leaves the features
    from workbench.sweep.runner import load_data

    data, _ = load_data(plan)
    assert data.profile.column(feature).role == "ignore"


def _profile_row(model, name: str) -> int:
    return next(i for i, c in enumerate(model.columns()) if c["name"] == name)


def test_an_id_made_a_feature_in_the_window_reaches_the_fitted_preprocessing(qtbot, window):
    """The window applies roles with the core's rule (TableProfile.with_roles): an id column
    made a feature shows its base type, and the sweep's data uses it as that type."""
    from workbench.data.preprocessing import build_preprocessor
    from workbench.sweep.runner import load_data

    load_by_drop(qtbot, window, SAMPLES / "coffee_roast.csv")
    model = window.profile_model
    row = _profile_row(model, "roast_id")
    intake = model.columns()[row]
    assert intake["kind"] == "id" and intake["role"] == "ignore"
    assert model.setData(model.index(row, 4), "feature")
    shown = model.columns()[row]
    assert shown["role"] == "feature" and shown["kind"] == "integer"
    assert model.index(row, 1).data() == "integer"  # the Type column the user sees
    plan, msg = window._plan()
    assert plan is not None, msg
    assert plan.roles == {"roast_id": "feature"}
    data, _ = load_data(plan)
    names = build_preprocessor(data.profile, data.target).fit(data.X).get_feature_names_out()
    assert "numeric__roast_id" in list(names)
    # back to ignore: the intake's type and reason return and the plan has no roles
    assert model.setData(model.index(row, 4), "ignore")
    assert model.columns()[row] == intake
    plan, msg = window._plan()
    assert plan is not None and not plan.roles, msg
    # a plan the window cannot make: the estimate shows the phrased message
    window.setup.alpha_edit.setText("0.001 abc")
    plan, msg = window._plan()
    assert plan is None and msg.endswith(f"({SETTING_LABELS['alpha']})")
    qtbot.waitUntil(lambda: window.setup.estimate_label.text() == CANNOT_RUN + msg)


def test_free_text_made_a_feature_is_refused_with_the_core_message(qtbot, window, tmp_path):
    rng = np.random.default_rng(0)
    n = 80
    words = ["dry", "early", "late", "north", "shaded", "wet", "windy", "warm"]
    remark = [" ".join(rng.choice(words, 6)) + f" visit {i}" for i in range(n)]
    path = tmp_path / "notes.csv"
    import pandas as pd

    pd.DataFrame({"x": rng.normal(size=n), "remark": remark,
                  "yield_kg": rng.uniform(1, 9, n).round(2)}).to_csv(path, index=False)
    load_by_drop(qtbot, window, path)
    model = window.profile_model
    row = _profile_row(model, "remark")
    assert model.columns()[row]["role"] == "ignore"
    with pytest.raises(InputError) as ref:
        window.table.profile.with_roles({"remark": "feature"})
    model.setData(model.index(row, 4), "feature")
    assert model.columns()[row]["role"] == "ignore"  # the pick is undone
    assert window.message_text() == phrase(ref.value)
    assert window.message_text().endswith(f"({SETTING_LABELS['roles']})")
    plan, msg = window._plan()
    assert plan is not None and not plan.roles, msg


def test_the_window_has_every_control_its_messages_name(qtbot, window):
    """Each quoted label in SETTING_LABELS is a real label, button, action, tab or header."""
    import re

    from PySide6.QtWidgets import QAbstractButton, QLabel, QTabWidget

    from workbench.gui.dialogs import ExportDialog

    dialog = ExportDialog(window, {"rank": 1, "hidden": "relu", "head": "identity",
                                   "layers": "8", "learning_rate": 0.001, "alpha": 0.0001})
    qtbot.addWidget(dialog)
    texts = set()
    for root in (window, dialog):
        texts |= {w.text() for w in root.findChildren(QLabel)}
        texts |= {w.text() for w in root.findChildren(QAbstractButton)}
        for tabs in root.findChildren(QTabWidget):
            texts |= {tabs.tabText(i) for i in range(tabs.count())}
    texts |= {a.text() for a in window.findChildren(QAction)}
    texts |= set(window.profile_model.HEADERS)
    texts = {t.replace("&", "") for t in texts}
    quoted = [q for words in SETTING_LABELS.values() for q in re.findall("“([^”]+)”", words)]
    assert len(quoted) >= 15
    missing = [q for q in quoted if q not in texts]
    assert missing == []


# --------------------------------------------------------------------------- stop


def test_stop_keeps_finished_rows_and_leaves_no_worker_then_resume(qtbot, window):
    from workbench.gui.dialogs import HistoryDialog

    win = window
    load_by_drop(qtbot, win, SAMPLES / "kiln_batches.csv")
    # enough trials that the sweep is still running after the first ones finish
    small_plan(win, hidden=("relu", "tanh", "gelu"), epochs=25, folds=3, repeats=2)
    finished = []
    with qtbot.waitSignal(win.sweepEnded, timeout=120_000) as blocker:
        win.run_sweep()
        win._sweep.bridge.trialFinished.connect(finished.append, Qt.DirectConnection)
        qtbot.waitUntil(lambda: len(finished) >= 2, timeout=60_000)
        assert win.sweep_running()
        # the workers yield the processor to the window (bridge.WORKER_NICENESS)
        workers = worker_processes()
        assert workers and all(p.nice() >= 10 for p in workers)
        win.stop_sweep()
        # the run must end within 2 seconds of Stop
        qtbot.waitUntil(lambda: not win.sweep_running(), timeout=2_000)
    assert blocker.args[0]["state"] == "cancelled"
    qtbot.waitUntil(lambda: len(networks(win)) > 0, timeout=5_000)
    done = sum(r["n_done"] for r in networks(win))
    assert 2 <= done < 18
    qtbot.waitUntil(lambda: not worker_processes(), timeout=5_000)
    sweep_id = win.sweep_id

    # the history lists it as interrupted; Resume runs only the missing trials
    dlg = HistoryDialog(win, win.store_path)
    qtbot.addWidget(dlg)
    qtbot.waitUntil(lambda: dlg.table.rowCount() > 0, timeout=5_000)
    assert dlg.selected()["sweep_id"] == sweep_id
    assert dlg.selected()["state"] == "interrupted"
    assert dlg.resume_btn.isEnabled()
    dlg.reopenRequested.connect(win.reopen_sweep)
    dlg.resumeRequested.connect(win.resume_sweep)
    with qtbot.waitSignal(win.sweepEnded, timeout=120_000) as blocker:
        dlg.resume_btn.click()
    assert blocker.args[0]["state"] == "finished"
    assert blocker.args[0]["sweep_id"] == sweep_id
    qtbot.waitUntil(lambda: all(r["n_done"] == r["n_total"] == 6
                                for r in networks(win)), timeout=5_000)
    assert len(networks(win)) == 3
    from workbench.sweep.store import Store

    with Store(win.store_path) as store:
        keys = [(t["config_index"], t["repeat"], t["fold"]) for t in store.trials(sweep_id)]
    assert len(keys) == len(set(keys)) == 18  # every trial exactly once


def test_closing_during_a_sweep_asks_then_stops_cleanly(qtbot, window, monkeypatch):
    from PySide6.QtWidgets import QMessageBox

    win = window
    load_by_drop(qtbot, win, SAMPLES / "orchard_water.csv")
    small_plan(win, hidden=("relu", "tanh"), epochs=200, folds=3, repeats=2)
    asked = []

    def answer(*args, **kw):
        asked.append(args)
        return QMessageBox.Yes

    monkeypatch.setattr(QMessageBox, "question", staticmethod(answer))
    with qtbot.waitSignal(win.sweepEnded, timeout=30_000):
        win.run_sweep()
        qtbot.waitUntil(lambda: win._progress["running"] > 0, timeout=20_000)
        win.close()
        assert asked  # the window asked before stopping
    qtbot.waitUntil(lambda: not win.isVisible(), timeout=5_000)
    qtbot.waitUntil(lambda: not worker_processes(), timeout=5_000)
