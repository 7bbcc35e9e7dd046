"""The window's target: a misspelled target refused, the window asking when no column is
clearly the target, the “Kind” box, ambiguous codes, and Run disabled for a table with
no usable feature. Driven offscreen with pytest-qt (``waitSignal`` / ``waitUntil`` only).

Outside reference: statsmodels' ``anes96`` data, whose ``PID`` (party identification
0..6) is a category stored as whole numbers with code 3 on 37 of 944 rows; as classes
its default score is scikit-learn's ``balanced_accuracy``. The reference for every
message is the core itself (:func:`workbench.data.profiling.analyse_target`,
``check_column``, ``TableProfile.require_features``), phrased by
:func:`workbench.gui.messages.phrase`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from workbench.data.profiling import analyse_target, check_column, profile_table
from workbench.errors import InputError
from workbench.gui.main_window import CANNOT_RUN
from workbench.gui.messages import SETTING_LABELS, phrase
from workbench.sweep.store import Store

pytestmark = pytest.mark.gui




@pytest.fixture(scope="module")
def anes_csv(tmp_path_factory):
    from statsmodels.datasets import anes96

    path = tmp_path_factory.mktemp("anes") / "anes.csv"
    anes96.load_pandas().data.to_csv(path, index=False)
    return path


def _small_csv(path, year_last=False):
    rng = np.random.default_rng(0)
    n = 40
    df = pd.DataFrame({"x": rng.normal(size=n), "w": rng.normal(size=n),
                       "yield_kg": rng.gamma(2, 2, n).round(2)})
    if year_last:
        df["year"] = rng.choice([2007, 2008, 2009], n)
    df.to_csv(path, index=False)
    return path


def _no_sweep_stored(win) -> bool:
    with Store(win.store_path) as st:
        return st.list_sweeps() == []


def _choose_kind(win, kind):
    combo = win.setup.kind_combo
    i = combo.findData(kind)
    assert i >= 0
    combo.setCurrentIndex(i)
    combo.activated.emit(i)  # what a user's pick sends


# --------------------------------------------------------------------------- target


def test_a_target_that_names_no_column_is_refused_and_nothing_runs(qtbot, window, tmp_path):
    path = _small_csv(tmp_path / "t.csv")
    with pytest.raises(InputError) as ref:
        check_column(pd.read_csv(path), "yy")
    with qtbot.waitSignal(window.targetFailed, timeout=20_000) as blocker:
        window.open_path(str(path), "yy")
    assert blocker.args[0].setting == "target"
    assert window.message_text() == phrase(ref.value)
    assert window.message_text().endswith(f"({SETTING_LABELS['target']})")
    # the first column (or the suggestion) is not swept in its place: nothing is chosen
    assert window.setup.target() == "" and window.summary is None
    assert window.setup.target_prompt.isVisible()
    assert window.setup.target_combo.property("attention") is True
    assert not window.run_action.isEnabled() and not window.setup.run_button.isEnabled()
    assert all(c["role"] != "target" for c in window.profile_model.columns())
    window.run_sweep()
    assert not window.sweep_running() and _no_sweep_stored(window)
    # choosing a real column clears the question
    with qtbot.waitSignal(window.targetReady, timeout=20_000):
        window.setup.target_combo.setCurrentText("yield_kg")
    assert not window.setup.target_prompt.isVisible()
    assert not window.setup.target_combo.property("attention")
    qtbot.waitUntil(lambda: window.run_action.isEnabled())


def test_open_with_a_misspelled_target_and_run_exits_2_in_one_line(tmp_path, capsys,
                                                                   monkeypatch):
    from workbench.cli import main

    monkeypatch.setenv("WORKBENCH_SETTINGS_DIR", str(tmp_path / "cfg"))
    path = _small_csv(tmp_path / "t.csv")
    store = tmp_path / "s.sqlite"
    assert main(["open", str(path), "--target", "yy", "--run", "--store", str(store)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert err == ["workbench: no column named 'yy'; the columns are: x, w, yield_kg "
                   "(set with --target)"]
    with Store(store) as st:
        assert st.list_sweeps() == []


def test_when_no_column_is_clearly_the_target_the_window_asks(qtbot, window, tmp_path):
    path = _small_csv(tmp_path / "p.csv", year_last=True)
    prof = profile_table(pd.read_csv(path))
    assert prof.suggested_target is None
    with qtbot.waitSignal(window.targetFailed, timeout=20_000):
        window.open_path(str(path))
    assert window.setup.target() == "" and window.summary is None
    prompt = window.setup.target_prompt
    assert prompt.isVisible() and "'year'" in prompt.text()
    assert prompt.text().startswith("No target suggested")
    assert window.setup.target_combo.property("attention") is True
    assert not window.setup.run_button.isEnabled()
    with qtbot.waitSignal(window.targetReady, timeout=20_000):
        window.setup.target_combo.setCurrentText("yield_kg")
    assert window.summary.target.name == "yield_kg" and not prompt.isVisible()


def test_the_suggested_target_shows_its_reason(qtbot, window, tmp_path):
    path = _small_csv(tmp_path / "s.csv")
    with qtbot.waitSignal(window.targetReady, timeout=20_000):
        window.open_path(str(path))
    assert window.setup.target() == "yield_kg"
    note = window.setup.target_note
    assert note.isVisible() and "last column" in note.text() and "'yield'" in note.text()
    assert not window.setup.target_prompt.isVisible()


# --------------------------------------------------------------------------- kind


def test_ambiguous_codes_are_noted_and_the_kind_box_makes_them_classes(qtbot, window, anes_csv):
    with qtbot.waitSignal(window.targetReady, timeout=20_000):
        window.open_path(str(anes_csv), "PID")
    s = window.setup
    info = window.summary.target
    assert info.kind == "count" and info.ambiguous
    assert s.ambiguity_label.isVisible()
    assert "code 3 holds only 3.9%" in s.ambiguity_label.text()
    assert "Rule: at most 10" in s.ambiguity_label.text()
    assert s.kind_badge.text() == "count" and s.kind() is None
    with qtbot.waitSignal(window.targetReady, timeout=20_000):
        _choose_kind(window, "multiclass")
    info = window.summary.target
    ref = analyse_target(pd.read_csv(anes_csv), "PID", kind="multiclass")
    assert (info.kind, info.task, info.classes) == (ref.kind, ref.task, ref.classes)
    assert s.kind() == "multiclass" and s.kind_badge.text() == "count"  # detected stays shown
    assert s.metric_combo.currentText() == "balanced_accuracy"
    assert s.head_grid.checked() == ["softmax"]
    plan, msg = window._plan()
    assert plan is not None, msg
    assert plan.kind == "multiclass" and plan.task == "classification"
    assert plan.metric == "balanced_accuracy"
    # back to the detected kind
    with qtbot.waitSignal(window.targetReady, timeout=20_000):
        _choose_kind(window, None)
    assert window.summary.target.kind == "count" and window._plan()[0].kind is None


def test_a_kind_the_values_cannot_have_is_refused_and_the_kind_stays(qtbot, window, anes_csv):
    with qtbot.waitSignal(window.targetReady, timeout=20_000):
        window.open_path(str(anes_csv), "PID")
    with qtbot.waitSignal(window.targetReady, timeout=20_000):
        _choose_kind(window, "multiclass")
    with pytest.raises(InputError) as ref:
        analyse_target(pd.read_csv(anes_csv), "PID", kind="binary")
    _choose_kind(window, "binary")
    qtbot.waitUntil(lambda: window.message_text() != "", timeout=20_000)
    assert window.message_text() == phrase(ref.value)
    assert "has 7 distinct values, not 2" in window.message_text()
    assert window.message_text().endswith(f"({SETTING_LABELS['kind']})")
    assert window.summary.target.kind == "multiclass" and window.setup.kind() == "multiclass"
    assert window._plan()[0].kind == "multiclass"


def test_reopening_a_sweep_shows_its_kind(qtbot, window, anes_csv, capsys):
    from workbench.cli import main

    assert main(["sweep", str(anes_csv), "--target", "PID", "--kind", "multiclass",
                 "--hidden", "relu", "--layers", "3", "--epochs", "2", "--folds", "2",
                 "--repeats", "1", "--jobs", "1", "--quiet", "--store", window.store_path]) == 0
    with Store(window.store_path) as st:
        (sw,) = st.list_sweeps()
    window.reopen_sweep(sw["id"])
    qtbot.waitUntil(lambda: window.summary is not None
                    and window.summary.target.kind == "multiclass", timeout=30_000)
    assert window.setup.kind() == "multiclass" and window.setup.target() == "PID"


# --------------------------------------------------------------------------- features


def test_run_is_disabled_with_the_reason_when_no_column_is_a_feature(qtbot, window, tmp_path):
    n = 30
    path = tmp_path / "nofeat.csv"
    df = pd.DataFrame({"sample_id": [f"s{i:03d}" for i in range(n)], "site": "north",
                       "y": np.linspace(0.5, 9.5, n)})
    df.to_csv(path, index=False)
    with pytest.raises(InputError) as ref:
        profile_table(pd.read_csv(path), target="y").require_features()
    with qtbot.waitSignal(window.targetReady, timeout=20_000):
        window.open_path(str(path), "y")
    want = phrase(ref.value)
    qtbot.waitUntil(lambda: window.setup.estimate_label.text() == CANNOT_RUN + want)
    assert want.endswith(f"({SETTING_LABELS['roles']})")
    assert not window.run_action.isEnabled() and not window.setup.run_button.isEnabled()
    window.run_sweep()
    assert not window.sweep_running() and window.message_text() == want
    assert _no_sweep_stored(window)


def test_ignoring_the_last_feature_in_the_profile_disables_run(qtbot, window, tmp_path):
    path = tmp_path / "one.csv"
    pd.DataFrame({"x": np.arange(30) % 7, "y": np.linspace(0.5, 9.5, 30)}).to_csv(path,
                                                                                index=False)
    with qtbot.waitSignal(window.targetReady, timeout=20_000):
        window.open_path(str(path), "y")
    qtbot.waitUntil(lambda: window.setup.run_button.isEnabled())
    model = window.profile_model
    row = next(i for i, c in enumerate(model.columns()) if c["name"] == "x")
    assert model.setData(model.index(row, 4), "ignore")
    assert "no column can be used as a feature" in window.setup.estimate_label.text()
    assert not window.setup.run_button.isEnabled() and not window.run_action.isEnabled()
    assert model.setData(model.index(row, 4), "feature")
    assert window.setup.run_button.isEnabled()
