"""Defaults that run: the default plan of every sample set, the metric that follows the heads,
Run disabled with the reason, stale messages cleared, the set-up column locked while a sweep
runs, and a reopened count sweep that shows no stale metric error.

Driven offscreen with pytest-qt; waiting with ``qtbot.waitSignal`` / ``waitUntil`` only.
The outside reference for "the Poisson deviance needs predictions above 0" is
scikit-learn's ``mean_poisson_deviance``, which refuses a prediction of 0.
"""

from __future__ import annotations

import io
from contextlib import redirect_stdout
from pathlib import Path

import numpy as np
import pytest
from PySide6.QtWidgets import QAbstractItemView
from sklearn.metrics import mean_poisson_deviance

from workbench.cli import main
from workbench.gui.app import default_choices
from workbench.gui.main_window import CANNOT_RUN
from workbench.gui.messages import SETTING_LABELS
from workbench.sweep.runner import load_data
from workbench.sweep.store import Store

pytestmark = pytest.mark.gui
NO_EDIT = QAbstractItemView.NoEditTriggers

SAMPLES = Path(__file__).resolve().parents[1] / "sample_sets"
SIX = sorted(p.name for p in SAMPLES.glob("*.csv"))
#: what the default plan must put beside the advised head, per sample set (the first head of
#: the advice's list that the guard accepts, one without a warning first); None: no
#: alternative is accepted for the kind, so the output rule cannot be tested
ALTERNATIVE = {"coffee_roast.csv": None, "greenhouse_temp.csv": None,
               "kiln_batches.csv": "softmax", "orchard_water.csv": "softplus",
               "seed_germination.csv": "identity", "trap_catches.csv": "softplus"}




def load(qtbot, win, name, target=None):
    with qtbot.waitSignal(win.targetReady, timeout=30_000):
        win.open_path(str(SAMPLES / name), target)


def test_the_poisson_deviance_is_undefined_for_a_prediction_of_zero():
    # the outside fact behind the metric rule (scikit-learn refuses y_pred <= 0)
    with pytest.raises(ValueError):
        mean_poisson_deviance([1.0, 2.0], [0.0, 1.0])
    assert mean_poisson_deviance([1.0, 2.0], [1.0, 2.0]) == pytest.approx(0.0)


@pytest.mark.parametrize("name", SIX)
def test_the_default_plan_of_every_sample_set_is_accepted_by_the_core(qtbot, window, name):
    """What `workbench open FILE --run` runs: the advice's hidden activations, the advised
    head and one accepted alternative, the metric for those heads; Run is on, and the core's
    plan and the runner's table check accept it."""
    load(qtbot, window, name)
    default_choices(window)  # the function `open --run` calls
    s, summary = window.setup, window.summary
    adv = summary.advice
    want_heads = [adv.output_head] + ([ALTERNATIVE[name]] if ALTERNATIVE[name] else [])
    assert sorted(s.head_grid.checked()) == sorted(want_heads)
    assert sorted(s.hidden_grid.checked()) == sorted(adv.hidden_to_sweep)
    assert window.run_action.isEnabled() and s.run_button.isEnabled()
    assert not s.estimate_label.text().startswith(CANNOT_RUN)
    plan, msg = window._plan()
    assert plan is not None, msg
    assert sorted(plan.heads) == sorted(want_heads) and sorted(plan.hidden) == sorted(adv.hidden_to_sweep)
    # the Poisson deviance only when every head is exp (its predictions are always > 0)
    poisson = plan.metric == "neg_mean_poisson_deviance"
    assert poisson == (summary.target.kind == "count" and set(plan.heads) == {"exp"})
    assert s.metric_combo.currentText() == plan.metric
    # the trial count stays that of at most two heads
    assert plan.n_configurations == len(plan.hidden) * len(plan.learning_rates) * len(want_heads)
    data, _ = load_data(plan)  # the runner's own reading of the plan's table
    assert len(data.y) == window.table.report.rows


def test_open_run_runs_the_default_count_plan_to_the_end(qapp, tmp_path, monkeypatch):
    """trap_catches' one-command run (it once exited 2 on the Poisson metric): the default
    heads and metric reach the store; only folds, repeats and epochs are cut for speed."""
    from workbench.gui.app import run_app

    monkeypatch.setenv("WORKBENCH_SETTINGS_DIR", str(tmp_path / "cfg"))
    store = tmp_path / "s.sqlite"
    code = run_app(str(SAMPLES / "trap_catches.csv"), run=True, store=str(store),
                   sweep_overrides={"folds_spin": 2, "repeats_spin": 1, "epochs_spin": 2})
    assert code == 0
    with Store(store) as st:
        sweeps = st.list_sweeps()
        assert len(sweeps) == 1 and sweeps[0]["state"] == "finished"
    plan = sweeps[0]["plan"]
    assert sorted(plan["heads"]) == ["exp", "softplus"] and plan["metric"] == "r2"
    assert sorted(plan["hidden"]) == sorted(["relu", "tanh", "leaky_relu", "gelu", "silu"])
    assert plan["tune_learning_rate"]


def test_the_metric_follows_the_heads_ticked_by_hand(qtbot, window):
    load(qtbot, window, "trap_catches.csv")
    s = window.setup
    assert s.metric_combo.currentText() == "r2"  # exp and softplus ticked
    s.head_grid.set_checked(["exp"])
    assert s.metric_combo.currentText() == "neg_mean_poisson_deviance"
    assert window._plan()[0].metric == "neg_mean_poisson_deviance"
    s.head_grid.boxes["relu"].click()  # a real click: relu can predict 0
    assert s.head_grid.checked() == ["exp", "relu"]
    assert s.metric_combo.currentText() == "r2"
    assert window.run_action.isEnabled()


def test_a_picked_metric_the_heads_cannot_serve_disables_run_with_why_then_clears(qtbot,
                                                                                window):
    load(qtbot, window, "trap_catches.csv")
    s = window.setup
    s.head_grid.set_checked(["exp"])
    assert window.run_action.isEnabled()
    # the user picks r2 by hand: it stays when heads change
    s.metric_combo.setCurrentText("r2")
    s.metric_combo.activated.emit(s.metric_combo.currentIndex())
    s.head_grid.set_checked(["exp", "softplus"])
    assert s.metric_combo.currentText() == "r2"
    # the user picks the Poisson deviance while softplus is ticked: Run goes off, with why
    s.metric_combo.setCurrentText("neg_mean_poisson_deviance")
    s.metric_combo.activated.emit(s.metric_combo.currentIndex())
    text = s.estimate_label.text()
    assert text.startswith(CANNOT_RUN) and "softplus" in text
    assert text.endswith(f"({SETTING_LABELS['metric']})")
    assert not window.run_action.isEnabled() and not s.run_button.isEnabled()
    window.run_sweep()  # the shortcut still reaches run_sweep: refused in the banner
    assert not window.sweep_running() and "softplus" in window.message_text()
    # unticking softplus makes the plan valid: the footer and the banner clear
    s.head_grid.boxes["softplus"].click()
    assert window.run_action.isEnabled() and s.run_button.isEnabled()
    assert not s.estimate_label.text().startswith(CANNOT_RUN)
    assert "trials" in s.estimate_label.text()
    assert window.message_text() == ""
    # and picking r2 again with softplus ticked keeps it valid
    s.head_grid.boxes["softplus"].click()
    assert not window.run_action.isEnabled()
    s.metric_combo.setCurrentText("r2")
    assert window.run_action.isEnabled()


def test_the_set_up_column_is_read_only_while_a_sweep_runs(qtbot, window):
    load(qtbot, window, "greenhouse_temp.csv")
    s = window.setup
    s.hidden_grid.set_checked(["relu"])
    s.layers_edit.setText("4")
    s.lr_edit.setText("0.01")
    s.folds_spin.setValue(2)
    s.repeats_spin.setValue(1)
    s.epochs_spin.setValue(2)
    s.jobs_spin.setValue(1)
    refused = [n for n, b in s.head_grid.boxes.items() if not b.isEnabled()]
    assert refused  # the signed target refuses the positive heads
    blocker = qtbot.waitSignal(window.sweepEnded, timeout=60_000)
    window.run_sweep()
    running = {"running": window.sweep_running(), "locked": s.locked(),
               "enabled": [w.isEnabled() for w in (
                   s.target_combo, s.layers_edit, s.metric_combo, s.folds_spin,
                   s.head_grid.boxes["identity"], s.hidden_grid.boxes["tanh"], s.jobs_spin)],
               # the running plan's choices are still read whole
               "heads": s.choices()["heads"], "hidden": s.choices()["hidden"],
               "roles_editable": window.profile_view.editTriggers() != NO_EDIT}
    blocker.wait()
    assert running == {"running": True, "locked": True, "enabled": [False] * 7,
                       "heads": ["identity"], "hidden": ["relu"], "roles_editable": False}
    assert not s.locked()
    assert s.layers_edit.isEnabled() and s.head_grid.boxes["identity"].isEnabled()
    assert all(not s.head_grid.boxes[n].isEnabled() for n in refused)  # still refused
    assert window.run_action.isEnabled()


def test_reopening_a_count_sweep_shows_no_stale_metric_error(qtbot, window, tmp_path):
    store = window.store_path
    with redirect_stdout(io.StringIO()):
        rc = main(["sweep", str(SAMPLES / "trap_catches.csv"), "--target", "moths_caught",
                   "--hidden", "relu",
                   "--output", "exp,relu,softplus", "--layers", "4", "--learning-rate",
                   "0.01", "--folds", "2", "--repeats", "1", "--epochs", "2", "--jobs", "1",
                   "--quiet", "--store", store])
    assert rc == 0
    with Store(store) as st:
        sweep_id = st.list_sweeps()[0]["id"]
    with qtbot.waitSignal(window.resultsShown, timeout=60_000):
        window.reopen_sweep(sweep_id)
    s = window.setup
    qtbot.waitUntil(lambda: window.summary is not None
                    and s.head_grid.checked() == ["exp", "relu", "softplus"], timeout=30_000)
    assert s.metric_combo.currentText() == "r2"
    assert window.run_action.isEnabled()
    assert not s.estimate_label.text().startswith(CANNOT_RUN)
    assert "neg_mean_poisson_deviance" not in s.estimate_label.text() + window.message_text()
    assert np.isfinite(window.results_model.rows()[0]["mean"])


def test_the_first_eta_waits_for_each_worker_to_finish_two_trials(window, monkeypatch):
    """Before every worker has finished two trials the pace means little: the progress line
    gives the estimate timed on the table; after, the finished trials' pace."""
    import time

    win = window
    monkeypatch.setattr(win, "sweep_running", lambda: True)
    try:
        t0 = time.monotonic() - 10.0
        win._progress = {"done": 3, "total": 103, "best": None, "t0": t0, "running": 2,
                         "stored": 0, "workers": 2, "estimate": 100.0}
        win._update_progress_text()
        text = win.progress_label.text()
        assert "about 1 min 30 s left (estimated)" in text, text  # 100 - 10 s
        win._progress.update(done=4, estimate=None)
        win._update_progress_text()
        # 10 s for 4 trials, 99 to go: about 10 / 4 x 99 = 247.5 s
        text = win.progress_label.text()
        assert "about 4 min 0" in text and "estimated" not in text, text
    finally:  # closing a window that thinks it runs a sweep would ask the user
        monkeypatch.undo()
        win._progress["t0"] = None


def test_the_racing_box_reaches_the_plan_and_comes_back_with_a_stored_one(qtbot, window):
    load(qtbot, window, "kiln_batches.csv")
    s = window.setup
    assert not s.race_check.isChecked() and window._plan()[0].race is False
    s.race_check.click()
    plan = window._plan()[0]
    assert plan.race is True
    s.race_check.click()
    assert window._plan()[0].race is False
    s.apply_plan(plan.to_dict())  # a stored racing sweep shows its box ticked
    assert s.race_check.isChecked()
