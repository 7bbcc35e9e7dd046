"""The window's Cross-check: a configuration of the shown sweep refitted on scikit-learn's MLP.

The reference is the core's own answer outside the window,
:func:`workbench.sweep.cross_check.cross_check` on the same stored sweep (itself
tested against scikit-learn's ``MLPClassifier`` in ``tests/test_cross_check.py``),
and the configuration scikit-learn's MLP cannot express is judged by
scikit-learn's documented activations (``MLPClassifier(activation=...)`` offers
identity, logistic, tanh and relu). The real window is driven offscreen: its
Sweep menu action opens the dialog, the dialog's Check button starts the check,
and waiting is done with ``qtbot.waitSignal`` / ``waitUntil``.
"""

from __future__ import annotations

import io
import json
import math
from contextlib import redirect_stdout

import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.neural_network import MLPClassifier
from test_gui_results import make_window, reopen

from workbench.cli import main
from workbench.gui import cross_check_dialog as ccd
from workbench.sweep.cross_check import cross_check
from workbench.sweep.results import sweep_results
from workbench.sweep.store import Store

pytestmark = [pytest.mark.gui,
              pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")]


@pytest.fixture(scope="module")
def swept(tmp_path_factory):
    """Breast cancer, relu and gelu hidden layers, the logistic head, 3 folds x 1 repeat."""
    d = tmp_path_factory.mktemp("cc_gui")
    table = d / "cancer.csv"
    load_breast_cancer(as_frame=True).frame.to_csv(table, index=False)
    store, out = d / "s.sqlite", d / "r.json"
    with redirect_stdout(io.StringIO()):
        rc = main(["sweep", str(table), "--target", "target", "--hidden", "relu,gelu",
                   "--output", "logistic", "--layers", "4", "--learning-rate", "0.01",
                   "--folds", "3", "--repeats", "1", "--epochs", "15", "--jobs", "1",
                   "--quiet", "--store", str(store), "--json", str(out)])
    assert rc == 0
    return {"store": store, "res": json.loads(out.read_text())}


@pytest.fixture
def shown(qtbot, tmp_path, swept):
    win = make_window(qtbot, tmp_path, swept["store"])
    reopen(qtbot, win, swept["res"]["sweep_id"])
    return win


def _open_dialog(qtbot, win, monkeypatch, act):
    """Trigger the window's Cross-check action; ``act(dialog)`` runs in place of exec()."""
    seen = []

    def fake_exec(self):
        seen.append(self)
        act(self)
        return 0

    monkeypatch.setattr(ccd.CrossCheckDialog, "exec", fake_exec)
    assert win.cross_check_action.isEnabled()
    win.cross_check_action.trigger()
    assert len(seen) == 1
    return seen[0]


def _row_index(res, hidden):
    return next(c["index"] for c in res["configurations"] if c["hidden"] == hidden)


def test_the_window_cross_checks_a_configuration_as_the_core_does(qtbot, shown, swept,
                                                                  monkeypatch):
    res = swept["res"]

    def act(dlg):
        # choose the relu configuration (scikit-learn can train it) and check it
        pick = next(i for i, (_label, row) in enumerate(dlg._choices) if row["hidden"] == "relu")
        dlg.config_combo.setCurrentIndex(pick)
        assert dlg.check_button.isEnabled()
        with qtbot.waitSignal(dlg.checkDone, timeout=120_000):
            dlg.check_button.click()

    # the selected row is what the dialog offers besides the recommended one: select relu
    relu = _row_index(res, "relu")
    m = shown.results_model
    r = next(i for i in range(m.rowCount()) if m.row_at(i).get("index") == relu)
    shown.results_view.selectRow(r)
    dlg = _open_dialog(qtbot, shown, monkeypatch, act)

    # the reference: the core's cross-check of the same configuration, outside the window
    with Store(swept["store"]) as st:
        full = sweep_results(st, res["sweep_id"])
        rank = next(n for n, c in enumerate(full["configurations"], 1) if c["index"] == relu)
        ref = cross_check(st, res["sweep_id"], rank=rank, results=full).to_dict()
    got = dlg.result
    assert got["configuration"]["index"] == relu and got["rank"] == rank
    assert got["all_agree"] is True and ref["all_agree"] is True
    assert len(got["folds"]) == len(ref["folds"]) == 3
    for a, b in zip(got["folds"], ref["folds"]):
        assert (a["repeat"], a["fold"]) == (b["repeat"], b["fold"])
        for key in ("engine_score", "sklearn_score", "stored_score"):
            assert a[key] == b[key]  # same folds, same seeds: the same numbers exactly
    # what the dialog shows is that answer: one row per fold, the sentence of the CLI
    assert dlg.table.rowCount() == 3
    for r, f in enumerate(got["folds"]):
        shown_score = float(dlg.table.item(r, 3).text())
        assert math.isclose(shown_score, f["sklearn_score"], rel_tol=1e-5)
        assert dlg.table.item(r, 5).text() == "yes"
    assert dlg.sentence.text() == ref["sentence"]
    assert not dlg.running() and dlg.check_button.isEnabled()


def test_a_configuration_scikit_learn_cannot_train_is_answered_at_once(qtbot, shown, swept,
                                                                      monkeypatch):
    # scikit-learn's documented hidden activations: gelu is not among them
    assert "gelu" not in MLPClassifier._parameter_constraints["activation"][0].options
    gelu = _row_index(swept["res"], "gelu")
    m = shown.results_model
    r = next(i for i in range(m.rowCount()) if m.row_at(i).get("index") == gelu)
    shown.results_view.selectRow(r)

    def act(dlg):
        pick = next(i for i, (_label, row) in enumerate(dlg._choices) if row["hidden"] == "gelu")
        dlg.config_combo.setCurrentIndex(pick)

    dlg = _open_dialog(qtbot, shown, monkeypatch, act)
    assert not dlg.check_button.isEnabled() and not dlg.running()
    assert "gelu" in dlg.sentence.text() and "cannot" in dlg.sentence.text()


def test_stop_ends_the_check_and_leaves_the_dialog_usable(qtbot, shown, swept, monkeypatch):
    relu = _row_index(swept["res"], "relu")

    def act(dlg):
        pick = next(i for i, (_label, row) in enumerate(dlg._choices)
                    if row["index"] == relu)
        dlg.config_combo.setCurrentIndex(pick)
        dlg.check_button.click()
        assert dlg.running() and dlg.stop_button.isEnabled()
        progress = dlg._progress_file
        dlg.stop_button.click()
        assert not dlg.running() and dlg.check_button.isEnabled()
        assert not progress.exists()  # its progress file is removed with it

    m = shown.results_model
    r = next(i for i in range(m.rowCount()) if m.row_at(i).get("index") == relu)
    shown.results_view.selectRow(r)
    dlg = _open_dialog(qtbot, shown, monkeypatch, act)
    assert dlg.sentence.text().startswith("Stopped")
    assert dlg.result is None and dlg.table.rowCount() == 0
