"""Big repaints in separate turns of the event loop (no timings: the behaviour only).

At the end of a sweep the window selects the best row; its plots come out of their
empty state, and each panel is laid out and painted for the first time. The plot
area then draws one panel per turn (workbench.gui.plot_area.PlotArea.show_rows with
``then``), and the window says the sweep ended after the last one.
"""

from __future__ import annotations

import numpy as np
from PySide6.QtWidgets import QApplication


def _band(values):
    values = list(values)
    return {"x": list(range(1, len(values) + 1)), "mean": values, "lo": values, "hi": values}


def _row(i, loss):
    scores = (0.8 - 0.01 * i, 0.82 - 0.01 * i)
    series = {"loss": _band(loss), "test_score": _band([0.7, 0.75][:len(loss)]),
              "loss_kind": "squared_error:sd",
              "loss_words": "squared error", "metric": "r2", "fold_scores": list(scores),
              "mean": float(np.mean(scores)), "sd": float(np.std(scores)), "diverged": False,
              "health": {"dead": [0.0], "saturated": [0.0], "grad_norm": [0.05, 0.02]},
              "hints": []}
    return {"key": f"k{i}", "index": i, "rank": i + 1, "hidden": "relu", "head": "identity",
            "layers": "8", "series": series}


def _drawn(area) -> tuple[bool, bool, bool]:
    return tuple(bool(p._series) for p in (area.curves, area.spread, area.health))


def _score_lines(area) -> int:
    """The held-out score lines the curves panel draws now (its second part)."""
    return len(area.curves._val_lines.shown())


def _area(qtbot):
    from workbench.gui.plot_area import PlotArea

    area = PlotArea()
    qtbot.addWidget(area)
    area.resize(900, 400)
    area.show()
    QApplication.processEvents()
    return area


def test_staged_show_draws_one_panel_per_turn_then_calls_back(qtbot):
    area = _area(qtbot)
    rows = [_row(0, [0.5, 0.3, 0.2]), _row(1, [0.6, 0.4, 0.35])]
    called = []
    seen = []

    def then():
        called.append(_drawn(area))

    area.show_rows(rows, then=then)
    seen.append(_drawn(area))  # right after the call: the loss curves only (and the legend)
    assert seen == [(True, False, False)] and not called
    assert len(area.curves.curve_items()) == 2 and _score_lines(area) == 0
    qtbot.waitUntil(lambda: _score_lines(area) == 2, timeout=5_000)  # a turn later
    assert _drawn(area) == (True, False, False)  # the fold scores on a turn of their own
    assert not area.legend.isHidden() and area.staging()
    assert not area.spread.empty.isHidden()  # still its empty sentence
    qtbot.waitUntil(lambda: bool(called), timeout=5_000)
    assert called == [(True, True, True)] and not area.staging()
    assert area.spread.empty.isHidden() and area.health.empty.isHidden()
    assert [s["number"] for s in area.series()] == [1, 2]


def test_a_selection_meanwhile_draws_at_once_and_the_callback_still_comes_once(qtbot):
    area = _area(qtbot)
    called = []
    area.show_rows([_row(0, [0.5, 0.3])], then=lambda: called.append(_drawn(area)))
    # a click before the later turns: everything now, the earlier callback after it
    area.show_rows([_row(3, [0.9, 0.7]), _row(4, [0.8, 0.6])])
    assert called == [(True, True, True)]
    assert [s["number"] for s in area.series()] == [4, 5]
    for _ in range(5):
        QApplication.processEvents()
    assert called == [(True, True, True)]  # the stale turns drew nothing more
    assert [s["number"] for s in area.spread._series] == [4, 5]


def test_the_legend_keeps_its_line_while_hidden(qtbot):
    # shown by a selection, it moves nothing below it (the plots keep their place)
    area = _area(qtbot)
    assert area.legend.isHidden()
    top = area.curves.geometry().top()
    area.show_rows([_row(0, [0.5, 0.3])])
    QApplication.processEvents()
    assert not area.legend.isHidden()
    assert area.curves.geometry().top() == top
    area.show_rows([])
    QApplication.processEvents()
    assert area.legend.isHidden() and area.curves.geometry().top() == top


def test_the_verdict_keeps_its_labels_when_a_ranking_changes_its_statements(qtbot):
    # a sweep's rankings add and drop warnings: the rows already built get the new words
    # (new labels, each styled by the style sheet, were the costly part); a row that turns
    # into a warning or back is built anew, styled as a warning built at once
    from workbench.gui import theme as th
    from workbench.gui.verdict_strip import VerdictStrip

    th.apply(QApplication.instance(), th.LIGHT)  # the style sheet gives a warning its box

    def strip_with(*statements):
        strip = VerdictStrip()
        qtbot.addWidget(strip)
        strip.resize(800, 200)
        strip.show()
        strip.set_results(meta(*statements))
        return strip

    def meta(*statements):
        return {"state": "running", "statements": [
            {"key": k, "label": label, "text": text} for k, label, text in statements]}

    strip = strip_with(("output", "Output", "logistic fits"),
                       ("recommended", "Recommended", "relu / logistic [16]"))
    first = list(strip._rows)
    out = strip.labels["output"]
    strip.set_results(meta(("output", "Output", "logistic fits, P 0.97"),
                           ("few_folds", "Warning", "only 3 folds"),
                           ("recommended", "Recommended", "tanh / logistic [16]")))
    assert strip._rows[0] == first[0]  # the same labels, new words
    assert strip.labels["output"] is out and out.text() == "logistic fits, P 0.97"
    warning = strip.labels["few_folds"]
    assert warning not in first[1] and warning.objectName() == "verdictWarning"
    assert strip._rows[1][0].text() == "⚠ Warning"
    assert strip._rows[1][0].objectName() == "verdictWarningName"
    assert strip.labels["recommended"].objectName() == "verdictText"
    assert strip.labels["recommended"].text() == "tanh / logistic [16]"
    fresh = strip_with(("output", "Output", "x"), ("few_folds", "Warning", "only 3 folds"))
    assert warning.sizeHint() == fresh.labels["few_folds"].sizeHint()  # its padding, too
    # the warning goes: the rows follow the statements, the surplus row goes
    kept = strip._rows[0]
    strip.set_results(meta(("output", "Output", "logistic fits"),
                           ("recommended", "Recommended", "relu / logistic [16]")))
    assert len(strip._rows) == 2 and strip._rows[0] == kept
    assert [w.objectName() for w in strip._rows[1]] == ["verdictName", "verdictText"]
    assert strip._list.count() == 2
    assert strip.text().splitlines()[1:] == ["Output: logistic fits",
                                             "Recommended: relu / logistic [16]"]
    # nothing cut: the strip is as tall as its wrapped rows need (once laid out)
    qtbot.waitUntil(lambda: strip.height() == strip.layout().totalHeightForWidth(strip.width()),
                    timeout=5_000)


def test_after_paint_calls_back_later_and_not_after_its_widget_is_gone(qtbot):
    """workbench.gui.turns.after_paint: never in the same turn, PAINT_GAP_MS later (longer
    than the 5 ms some platforms wait before a window's paint: from memory,
    QPlatformWindow::requestUpdate), and not at all once the widget is deleted (the timer
    is the widget's)."""
    from PySide6.QtWidgets import QLabel

    from workbench.gui import turns

    assert turns.PAINT_GAP_MS > 5
    label = QLabel("one")
    qtbot.addWidget(label)
    called = []
    turns.after_paint(label, lambda: called.append("label"))
    assert called == []
    qtbot.waitUntil(lambda: called == ["label"], timeout=5_000)
    gone = QLabel("gone")
    turns.after_paint(gone, lambda: called.append("gone"))
    gone.deleteLater()
    qtbot.wait(100)
    assert called == ["label"]
