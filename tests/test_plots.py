"""The plots stay readable: robust ranges, one loss kind per axis, empty states, log ticks,
calibration and diagnosis pages; and the real window with a diverged configuration.

Window tests run offscreen with pytest-qt and wait on signals or conditions only.
The references: the stored trials themselves (NumPy means over the stored
histories, the stored out-of-fold predictions), and for the log ticks the
definition of a decade (10^k) and of the 1-2-5 steps.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from workbench.gui.plots import CurvesPanel, HealthPanel, SpreadPanel, log_ticks, robust_range

pytestmark = pytest.mark.gui


# --------------------------------------------------------------------------- robust ranges


def test_a_series_that_would_squeeze_the_others_is_left_out_and_named():
    normal = [np.linspace(0.6, 0.05, 50), np.linspace(0.7, 0.04, 50)]
    wild = np.r_[0.5, 1.5e4, 5.9e4, 2.8e3]
    lo, hi, clipped = robust_range(normal + [wild])
    assert lo == pytest.approx(0.04) and hi == pytest.approx(0.7)
    assert clipped == [2]
    # the same series flagged as diverged is left out even when it would not squeeze
    lo, hi, clipped = robust_range(normal + [np.r_[0.3, 0.9]], flagged=[False, False, True])
    assert hi == pytest.approx(0.7) and clipped == [2]
    # series of one shape are all shown whole, whatever their spread
    lo, hi, clipped = robust_range([np.r_[1.0, 5.0], np.r_[2.0, 9.0], np.r_[0.5, 3.0]])
    assert (lo, hi, clipped) == (0.5, 9.0, [])
    # nothing finite: nothing to range; a single flat value gets some room
    assert robust_range([[None, math.nan], []]) is None
    lo, hi, _ = robust_range([[2.0, 2.0]])
    assert lo < 2.0 < hi
    # everything flagged: shown whole rather than nothing
    assert robust_range([[1.0, 3.0]], flagged=[True])[:2] == (1.0, 3.0)


def test_log_ticks_are_few_and_never_share_a_place():
    for lo, hi in ((-5.0, 2.0), (-1.52, -1.30), (-1.1, -0.2), (-0.01, 0.01), (0.0, 9.0)):
        ticks = log_ticks(lo, hi, 4)
        assert 1 <= len(ticks) <= 4, (lo, hi, ticks)
        places = [v for v, _ in ticks]
        assert places == sorted(set(places))
        assert all(lo - 1e-9 <= v <= hi + 1e-9 for v in places)
        for v, label in ticks:  # the label is the value the place stands for
            assert float(label) == pytest.approx(10.0 ** v, rel=1e-3)
    assert [label for _, label in log_ticks(-3.0, 0.0)] == ["0.001", "0.01", "0.1", "1"]


# --------------------------------------------------------------------------- panels


def _band(values):
    values = list(values)
    return {"x": list(range(1, len(values) + 1)), "mean": values, "lo": values, "hi": values}


def _series(i, loss, *, kind="squared_error:sd", diverged=False, scores=(0.8, 0.82)):
    return {"key": f"k{i}", "label": f"cfg {i}", "number": i + 1, "color": i,
            "loss": _band(loss), "loss_kind": kind, "loss_words": kind, "metric": "r2",
            "fold_scores": list(scores), "mean": float(np.mean(scores)),
            "sd": float(np.std(scores)), "diverged": diverged,
            "health": {"dead": [0.0], "saturated": [0.0], "grad_norm": [0.05, 0.02]},
            "hints": []}


def test_panels_show_a_sentence_before_anything_is_selected(qtbot):
    for cls in (CurvesPanel, SpreadPanel, HealthPanel):
        panel = cls()
        qtbot.addWidget(panel)
        panel.show()
        assert not panel.empty.isHidden() and panel.empty.text()
        assert all(p.isHidden() for p in panel.plots())
        panel.set_series([_series(0, [0.5, 0.2, 0.1])])
        assert panel.empty.isHidden()
        assert any(not p.isHidden() for p in panel.plots())
    from workbench.gui.plot_area import PlotArea

    area = PlotArea()
    qtbot.addWidget(area)
    area.show()
    assert area.legend.isHidden()  # no stray legend box before a selection
    assert "Select rows" in area.diagnosis_text()


def test_one_loss_kind_per_axis_with_a_box_to_pick_it(qtbot):
    panel = CurvesPanel()
    qtbot.addWidget(panel)
    panel.show()
    series = [_series(0, [0.5, 0.1]), _series(1, [3.0, 2.0], kind="poisson:sd"),
              _series(2, [0.6, 0.2])]
    panel.set_series(series)
    assert not panel.kind_box.isHidden() and panel.kind_box.count() == 2
    drawn = [c.getData()[1].tolist() for c in panel.curve_items()]
    assert drawn == [[0.5, 0.1], [0.6, 0.2]]  # the first kind in rank order
    assert "losses differ" in panel.note.text()
    with qtbot.waitSignal(panel.kindChanged):
        panel.kind_box.setCurrentIndex(1)
    assert [c.getData()[1].tolist() for c in panel.curve_items()] == [[3.0, 2.0]]
    panel.set_series(series[:1])
    assert panel.kind_box.isHidden() and "losses differ" not in panel.note.text()


def test_the_fold_score_axis_keeps_the_ordinary_configurations_readable(qtbot):
    panel = SpreadPanel()
    qtbot.addWidget(panel)
    panel.show()
    series = [_series(0, [1, 0.5], scores=(0.41, 0.45, 0.43)),
              _series(1, [1, 0.5], scores=(0.40, 0.38, 0.44)),
              _series(2, [1, 0.5], scores=(-7.0, -2.9, 0.1), diverged=True)]
    panel.set_series(series)
    lo, hi = panel.plot.viewRange()[1]
    assert lo <= 0.38 and hi >= 0.45 and hi - lo < 0.2
    assert panel.clipped["score"] == ["cfg 2"]
    assert "#3 (to -7.000)" in panel.note.text()


def test_health_ticks_and_a_hint_that_scrolls_instead_of_overlapping(qtbot):
    panel = HealthPanel()
    qtbot.addWidget(panel)
    panel.resize(300, 240)
    panel.show()
    s = _series(0, [1, 0.5])
    s["health"] = {"dead": [0.3], "saturated": [0.0], "grad_norm": [0.05, 0.036]}
    s["hints"] = ["cfg 0: " + "dead hidden units " * 30]
    panel.set_series([s])
    ticks = panel.grad_plot.getPlotItem().getAxis("left")._tickLevels[0]
    assert 1 <= len(ticks) <= 3 and len({v for v, _ in ticks}) == len(ticks)
    assert not panel.hint_box.isHidden()
    # the hint's box has a fixed height; the plots keep theirs beneath it
    assert panel.hint_box.maximumHeight() < 60
    assert panel.note.isHidden() or \
        panel.hint_box.geometry().bottom() < panel.note.geometry().top()
    for plot in panel.plots():
        if not plot.isHidden():
            assert not plot.geometry().intersects(panel.hint_box.geometry())


# --------------------------------------------------------------------------- the window


@pytest.fixture(scope="module")
def diverging_sweep(tmp_path_factory):
    """Two ordinary learning rates and one that blows up (8), through the real runner."""
    from workbench.sweep.plan import build_plan
    from workbench.sweep.runner import run_sweep
    from workbench.sweep.store import Store

    d = tmp_path_factory.mktemp("diverging")
    rng = np.random.default_rng(0)
    X = rng.standard_normal((150, 5))
    y = X[:, 0] - 0.5 * X[:, 1] + 0.3 * X[:, 2] ** 2 + 0.1 * rng.standard_normal(150)
    pd.DataFrame(X, columns=[f"x{i}" for i in range(5)]).assign(target=y).to_csv(
        d / "t.csv", index=False)
    plan = build_plan(d / "t.csv", "target", hidden="relu", output="identity", layers=["16"],
                      learning_rates=["0.01", "0.003", "8"], folds=3, repeats=1, epochs=40)
    with Store(d / "s.sqlite") as st:
        out = run_sweep(plan, store=st, backend="inline")
        assert out.state == "finished"
    return str(d / "s.sqlite"), out.sweep_id


@pytest.fixture
def window(qtbot, tmp_path, diverging_sweep):
    from workbench.gui.main_window import MainWindow
    from workbench.gui.settings import Settings

    store, sid = diverging_sweep
    win = MainWindow(settings=Settings(tmp_path / "settings"), store_path=store,
                     theme_choice="light")
    qtbot.addWidget(win)
    win.resize(1280, 800)
    win.show()
    win.reopen_sweep(sid)
    qtbot.waitUntil(lambda: sum(1 for r in win.results_model.rows()
                                if r.get("series")) == 3, timeout=60_000)
    return win


def _select_networks(win):
    rows = [i for i in range(win.proxy.rowCount()) if win.proxy.row_at(i).get("series")]
    win.select_rows(rows)
    return rows


def test_a_diverged_configuration_leaves_the_others_a_readable_axis(qtbot, window):
    from workbench.sweep.store import Store

    win = window
    assert not win.curves.empty.isHidden() or win.selected_rows()  # nothing drawn unselected
    _select_networks(win)
    series = win.plot_area.series()
    assert len(series) == 3
    by_lr = {r["learning_rate"]: r for r in win.selected_rows()}
    wild = by_lr[8.0]["series"]
    assert wild["diverged"] and "diverged" in wild["diagnosis"]["codes"]
    with Store(win.store_path) as st:
        stored = st.trials(win.sweep_id)
    normal = []
    for lr in (0.01, 0.003):
        losses = [t["history"]["loss"] for t in stored
                  if t["config_index"] == by_lr[lr]["index"]]
        n = min(len(x) for x in losses)
        normal.append(np.array([x[:n] for x in losses], float))
    low = min(float(m.min()) for m in normal)
    high = max(float(m.max()) for m in normal)
    lo, hi = win.curves.loss_plot.viewRange()[1]
    # every ordinary curve is inside the axis, and the axis is not much wider than them
    assert lo <= low and hi >= high
    assert hi - lo < 1.5 * (high - low)
    wild_losses = [v for t in stored if t["config_index"] == by_lr[8.0]["index"]
                   for v in t["history"]["loss"] if v is not None]
    assert max(wild_losses) > 10 * hi  # it would have flattened them
    # the selection differs in learning rate, so the labels name it
    label = f"{by_lr[8.0]['hidden']} / {by_lr[8.0]['head']} lr 8"
    assert win.curves.clipped["loss"] == [label]
    assert "Outside the range" in win.curves.note.text() or "outside the range" in \
        win.curves.note.text()
    # the legend is in rank order, outside the plots, and names each diagnosis
    legend = win.plot_area.legend.text()
    numbers = [s["number"] for s in series]
    assert numbers == sorted(numbers)
    assert "diverged" in legend and "trains normally" in legend
    assert win.plot_area.legend.geometry().bottom() <= win.curves.geometry().top() + \
        win.curves.parentWidget().geometry().top()
    # the diagnosis page holds the core's sentences for each
    text = win.plot_area.diagnosis_text()
    for f in wild["diagnosis"]["findings"]:
        assert f["text"] in text


def test_the_calibration_page_draws_the_stored_out_of_fold_predictions(qtbot, window):
    import html

    from workbench.gui import core_adapter as core
    from workbench.sweep.store import Store

    win = window
    _select_networks(win)
    page = win.plot_area.calibration_page
    with qtbot.waitSignal(win.plot_area.calibrationShown, timeout=30_000):
        win.detail_tabs.setCurrentWidget(page)
    panel = win.plot_area.calibration
    assert not panel.waiting() and panel.empty.isHidden()
    series = win.plot_area.series()
    with Store(win.store_path) as st:
        oof = st.out_of_fold(win.sweep_id, configurations=[s["index"] for s in series])
    wild = next(s for s in series if s["diverged"])
    assert panel.clipped["predicted"] == [wild["label"]]  # held at the edge, and said so
    assert "run outside the range" in panel.note.text()
    for j, s in enumerate(series):
        x, y = panel.items[s["key"]].getData()
        first = oof.predictions[0][:, j].astype(float)
        np.testing.assert_allclose(np.sort(y), np.sort(oof.y), rtol=1e-12)
        if s is not wild:  # drawn as stored
            np.testing.assert_allclose(np.sort(x), np.sort(first), rtol=1e-6)
    scores = panel.scores.text()  # beside the plots: each configuration's own figures
    for s in series:
        assert f"#{s['number']}</b>" in scores
        summary = s["index"]
        words = core.calibration_words(panel._data["configurations"][summary]["summary"])
        assert html.escape(words) in scores
    # a new selection is read anew
    win.select_rows([0])
    qtbot.waitUntil(lambda: not panel.waiting(), timeout=30_000)
    assert len(panel.items) == 1


def _cut_axis_titles(win) -> tuple[list[str], int]:
    """The shown plots' axis titles longer than their axis, and how many were checked."""
    cut, checked = [], 0
    for panel in (win.curves, win.spread, win.health):
        for plot in panel.plots():
            if not plot.isVisible():
                continue
            left = plot.getPlotItem().getAxis("left")
            if left.label.isVisible() and left.labelText:
                checked += 1
                # rotated 90 degrees: the title's width runs along the axis's height
                need, have = left.label.boundingRect().width(), left.boundingRect().height()
                if need > have:
                    cut.append(f"{panel.title.text()}: {left.labelText} ({need:.0f} > {have:.0f})")
            bottom = plot.getPlotItem().getAxis("bottom")
            if bottom.label.isVisible() and bottom.labelText:
                if bottom.label.boundingRect().width() > bottom.boundingRect().width():
                    cut.append(f"{panel.title.text()}: {bottom.labelText}")
    return cut, checked


def test_every_plot_axis_title_fits_beside_its_axis_at_1280x800(qtbot, window):
    """The layer-health plots were stacked in a short panel: their rotated axis titles
    ("% units", "grad") were longer than the plots were tall and were cut. Every shown
    plot's left-axis title must fit along its axis, and its bottom title under it."""
    win = window
    _select_networks(win)
    win.detail_tabs.setCurrentIndex(0)
    try:  # the plots are laid out on the event loop
        qtbot.waitUntil(lambda: not _cut_axis_titles(win)[0] and _cut_axis_titles(win)[1] >= 3,
                        timeout=3_000)
    except Exception:
        pass
    cut, checked = _cut_axis_titles(win)
    assert cut == [] and checked >= 3, (cut, checked)


# --------------------------------------------------------------------------- in place


def _drawn(panel) -> list:
    """What a panel's plots show: each shown item's kind, data and colours, each plot's
    ranges, axis titles and ticks, and the panel's note (sorted: the order items were made
    in does not show)."""
    import pyqtgraph as pg

    def arr(a):
        return None if a is None else [round(float(v), 12) for v in np.asarray(a, float)]

    out = []
    for k, plot in enumerate(panel.plots()):
        if plot.isHidden():
            out.append((k, "hidden"))
            continue
        pi = plot.getPlotItem()
        out.append((k, "range", [arr(r) for r in plot.viewRange()]))
        for side in ("left", "bottom"):
            ax = pi.getAxis(side)
            out.append((k, side, ax.labelText, repr(getattr(ax, "_tickLevels", None))))
        items = []
        for item in pi.items:
            if not item.isVisible():
                continue
            if isinstance(item, pg.PlotDataItem):
                x, y = item.getData()
                items.append(("line", arr(x), arr(y), item.opts["pen"].color().name()
                              if item.opts["pen"] is not None else None,
                              item.opts["pen"].style() if item.opts["pen"] is not None
                              else None, item.opts["symbol"]))
            elif isinstance(item, pg.ScatterPlotItem):
                x, y = item.getData()
                items.append(("dots", arr(x), arr(y),
                              [(b if b is not None else item.opts["brush"]).color().name()
                               for b in item.data["brush"]],
                              [s if s is not None else item.opts["symbol"]
                               for s in item.data["symbol"]], item.opts["size"]))
            elif isinstance(item, pg.FillBetweenItem):
                items.append(("band", *[arr(v) for c in item.curves for v in c.getData()],
                              item.brush().color().name()))
            elif isinstance(item, pg.BarGraphItem):
                items.append(("bars", arr(item.opts["x"]), arr(item.opts["height"]),
                              item.opts["width"], QBrushName(item.opts["brush"])))
            elif isinstance(item, pg.ErrorBarItem):
                items.append(("error", arr(item.opts["x"]), arr(item.opts["y"]),
                              arr(item.opts["height"])))
            else:
                items.append((type(item).__name__,))
        out.append((k, sorted(items, key=repr)))
    out.append(("note", panel.note.text(), panel.empty.isHidden(), dict(panel.clipped)))
    return out


def QBrushName(brush) -> str:  # noqa: N802 - a brush's colour and pattern
    return f"{brush.color().name()}:{brush.style().name}"


def _selection_a():
    """Three series, one diverged (clipped, marked), two loss kinds."""
    a = [_series(0, [0.9, 0.5, 0.3]), _series(1, [0.8, 0.6, 0.5], scores=(0.7, 0.75, 0.72)),
         _series(2, [0.5, 80.0, 4e3], diverged=True, scores=(-5.0, -7.0))]
    a[1]["test_loss"] = _band([0.85, 0.7, 0.65])
    a[1]["test_score"] = _band([0.6, 0.7, 0.72])
    a[2]["health"] = {"dead": [0.6, 0.1], "saturated": [0.2, 0.0], "grad_norm": [1e3, 10, 1]}
    return a


def _selection_b():
    """Two other series: fewer items, nothing clipped."""
    b = [_series(0, [0.4, 0.3]), _series(1, [0.45, 0.41], scores=(0.6, 0.61))]
    b[0]["number"], b[1]["number"] = 4, 7
    b[0]["label"], b[1]["label"] = "cfg b0", "cfg b1"
    b[1]["health"] = {"dead": [0.3], "saturated": [0.05], "grad_norm": [0.2, 0.4]}
    return b


@pytest.mark.parametrize("cls", [CurvesPanel, SpreadPanel, HealthPanel])
def test_a_panel_updated_in_place_shows_what_a_fresh_draw_shows(qtbot, cls):
    """Selecting A, then B, shows on the plots exactly what a new panel drawing B shows
    (items of A not needed by B are hidden, markers of A's clipping gone), and B again
    after A, again after nothing. The reference is a panel that never drew anything else."""
    fresh = cls()
    qtbot.addWidget(fresh)
    fresh.resize(420, 260)
    fresh.show()
    fresh.set_series(_selection_b())
    reused = cls()
    qtbot.addWidget(reused)
    reused.resize(420, 260)
    reused.show()
    reused.set_series(_selection_a())
    before = _drawn(reused)
    reused.set_series(_selection_b())
    assert _drawn(reused) == _drawn(fresh)
    assert _drawn(reused) != before  # (the comparison can tell two selections apart)
    reused.set_series([])
    assert reused.empty.isVisible() and not reused.note.text()
    reused.set_series(_selection_a())
    assert _drawn(reused) == before
    # kept and reused: drawing A once more made no new item
    made = reused.items_made()
    reused.set_series(_selection_b())
    reused.set_series(_selection_a())
    assert reused.items_made() == made


def test_a_new_selection_in_the_window_updates_the_plot_items_in_place(qtbot, window):
    """Wiring: the window's selection goes to the plots without rebuilding their items
    (pyqtgraph items are counted as they are made), and what they then show equals a
    fresh plot area drawing the same rows."""
    from workbench.gui.plot_area import PlotArea

    win = window
    panels = (win.curves, win.spread, win.health)
    _select_networks(win)
    made = [p.items_made() for p in panels]
    shown = [win.plot_area.series()[i]["key"] for i in range(3)]
    rows = [i for i in range(win.proxy.rowCount()) if win.proxy.row_at(i).get("series")]
    lines = win.curves.curve_items()
    for pick in ([rows[1]], [rows[2], rows[0]], rows):
        win.select_rows(pick)
        assert [p.items_made() for p in panels] == made, pick
    assert win.curves.curve_items() == lines  # the very same items, updated in place
    assert [s["key"] for s in win.plot_area.series()] == shown
    # and a fresh plot area given the last-but-one selection shows what the window shows
    win.select_rows([rows[2], rows[0]])
    fresh = PlotArea()
    qtbot.addWidget(fresh)
    fresh.resize(win.plot_area.size())
    fresh.show()
    fresh.show_rows(win.selected_rows())
    for mine, theirs in zip(panels, (fresh.curves, fresh.spread, fresh.health)):
        drawn, expected = _drawn(mine), _drawn(theirs)
        # the ranges depend on the data alone; compare everything
        assert drawn == expected, type(mine).__name__
    assert win.plot_area.legend.text() == fresh.legend.text()


def test_the_selection_note_is_shown_whole_in_its_fixed_box(qtbot, window):
    """The note under the table sits in a box of fixed height placed by hand (so that a new
    text does not re-lay out the window): it must still fill the box and get the height
    its text needs at its width, for one line and for several."""
    win = window
    win.tabs.setCurrentIndex(1)
    note, box = win.selection_note, win.selection_box
    qtbot.waitUntil(box.isVisible, timeout=5_000)
    for pick in ([0], list(range(win.proxy.rowCount()))):
        win.select_rows([r for r in pick if win.proxy.row_at(r).get("series")] or [0])
        qtbot.waitUntil(lambda: note.geometry().size() == box.size(), timeout=2_000)
        assert note.isVisible() and note.text().startswith("Selected:")
        assert box.height() >= note.heightForWidth(box.width()) > 0
    box.resize(200, box.height())  # narrow: the text needs more lines, the box follows
    qtbot.waitUntil(lambda: box.height() >= note.heightForWidth(200), timeout=2_000)


def test_the_curves_drawn_in_two_parts_show_what_one_draw_shows(qtbot):
    """The staged selection draws the loss plot, then (a turn later) the score plot: the
    two parts in order leave what one ``set_series`` leaves, and the first part alone
    leaves the score plot as it was (wiring: a part drawing the other plot's items, or
    the note said before the score part's sentences, would differ)."""
    one = CurvesPanel()
    two = CurvesPanel()
    for p in (one, two):
        qtbot.addWidget(p)
        p.resize(420, 260)
        p.show()
    one.set_series(_selection_a())
    two.set_series(_selection_b())
    score_before = [(i.getData()[0].tolist(), i.getData()[1].tolist())
                    for i in two._val_lines.shown()]
    first, second = two.parts(_selection_a())
    first()
    assert [(i.getData()[0].tolist(), i.getData()[1].tolist())
            for i in two._val_lines.shown()] == score_before
    assert _drawn(two)[0] == _drawn(one)[0]  # the loss plot is already the new one
    second()
    assert _drawn(two) == _drawn(one)
    assert two.loss_plot.toolTip() == one.loss_plot.toolTip() != ""
    # and what both show is the selection itself: a solid loss line per configuration of
    # the loss kind shown, a score line per configuration with held-out scores (a part
    # that began or ended the other plot's items would leave extra ones or hide these)
    series = _selection_a()
    for panel in (one, two):
        def visible(pool, plot):
            return sum(1 for i in pool.items if i.isVisible() and i.parentItem() is not None
                       and i.getViewBox() is plot.getPlotItem().getViewBox())

        assert visible(panel._loss_lines, panel.loss_plot) == sum(
            1 for s in series if s.get("loss") and s["loss_kind"] == panel._kind)
        assert visible(panel._val_lines, panel.val_plot) == sum(
            1 for s in series if s.get("test_score"))


# --------------------------------------------------------------------------- grid lines


def _grid_pixels(widget, axis_cls, bg: str):
    """The pixels of a plot whose only items are its grid (axes of ``axis_cls``)."""
    import pyqtgraph as pg
    from PySide6.QtGui import QColor

    kw = {} if axis_cls is None else {"axisItems": {"left": axis_cls("left"),
                                                    "bottom": axis_cls("bottom")}}
    w = pg.PlotWidget(**kw)
    w.setBackground(bg)
    w.showGrid(x=True, y=True, alpha=0.18)
    for name in ("left", "bottom"):
        ax = w.getPlotItem().getAxis(name)
        ax.setPen(pg.mkPen("#000000" if bg == "#ffffff" else "#e0e0e0"))
        if hasattr(ax, "set_background"):
            ax.set_background(QColor(bg))
            ax.put_under(w.getPlotItem().getViewBox())  # (as the panels do)
    w.setXRange(0, 10, padding=0)
    w.setYRange(0, 1, padding=0)
    w.resize(300, 200)
    widget.append(w)
    img = w.grab().toImage()
    vb = w.getPlotItem().getViewBox().sceneBoundingRect().toRect().adjusted(2, 2, -2, -2)
    return np.array([[img.pixelColor(x, y).getRgb()[:3] for x in range(vb.left(), vb.right())]
                     for y in range(vb.top(), vb.bottom())], dtype=int)


@pytest.mark.parametrize("bg", ["#ffffff", "#25292e"])
def test_opaque_grid_lines_give_the_pixels_of_pyqtgraphs_translucent_ones(qtbot, bg):
    """Reference: pyqtgraph's own axis (translucent grid pens) composited by Qt's raster
    engine. The opaque pens (``opaque_pen``: "source over", Porter & Duff 1984) give the same
    pixels inside the plot, on the light and the dark background, to one unit of
    rounding, except where two grid lines cross (translucent lines darken each other
    there; of two opaque ones the later shows); and the grid is really drawn."""
    from workbench.gui.plots import GridAxis

    keep: list = []
    ref = _grid_pixels(keep, None, bg)
    ours = _grid_pixels(keep, GridAxis, bg)
    for w in keep:
        qtbot.addWidget(w)
    assert ref.shape == ours.shape
    background = np.array([int(bg[i:i + 2], 16) for i in (1, 3, 5)])
    off = np.abs(ref - background).sum(axis=2) > 3
    rows, cols = off.mean(axis=1) > 0.5, off.mean(axis=0) > 0.5  # the grid's lines
    assert rows.sum() >= 3 and cols.sum() >= 3  # (the grid is drawn)
    crossing = rows[:, None] & cols[None, :]
    assert np.abs(ref - ours)[~crossing].max() <= 1
    assert (np.abs(ours - background).sum(axis=2) > 3)[~crossing].sum() == off[~crossing].sum()
    # ... drawn with opaque pens (the point: Qt fills opaque lines fast), pyqtgraph's not
    from PySide6.QtGui import QImage, QPainter

    alphas = []
    for w in keep:
        img = QImage(8, 8, QImage.Format_ARGB32_Premultiplied)
        painter = QPainter(img)
        specs = w.getPlotItem().getAxis("left").generateDrawSpecs(painter)
        painter.end()
        alphas.append({pen.color().alpha() for pen, _, _ in specs[1]})
    assert min(alphas[0]) < 255 and alphas[1] == {255}


def test_opaque_pen_is_the_colour_qt_composites_over_the_background(qtbot):
    """Reference: QPainter filling a pixel with the translucent colour over the background
    (Qt's CompositionMode_SourceOver)."""
    from PySide6.QtGui import QColor, QImage, QPainter, QPen

    from workbench.gui.plots import opaque_pen

    for fg, alpha, bg in [("#000000", 46, "#ffffff"), ("#e0e0e0", 30, "#25292e"),
                          ("#1f77b4", 128, "#fafafa"), ("#000000", 255, "#ffffff")]:
        img = QImage(4, 4, QImage.Format_ARGB32_Premultiplied)
        img.fill(QColor(bg))
        p = QPainter(img)
        c = QColor(fg)
        c.setAlpha(alpha)
        p.fillRect(0, 0, 4, 4, c)
        p.end()
        want = np.array(img.pixelColor(1, 1).getRgb()[:3])
        pen = QPen(c)
        got = opaque_pen(pen, QColor(bg)).color()
        assert got.alpha() == 255
        assert np.abs(np.array(got.getRgb()[:3]) - want).max() <= 1, (fg, alpha, bg)


def test_every_panel_draws_its_grid_under_the_data_on_the_themes_background(qtbot):
    """Wiring: each panel's plots carry the opaque-grid axes, below the view box (opaque
    lines over the curves would cut them), blended over the theme's own plot background
    (a dark theme's grid blended over white would be drawn in bright lines)."""
    from PySide6.QtGui import QColor

    from workbench.gui import theme as th
    from workbench.gui.calibration_panel import CalibrationPanel
    from workbench.gui.plots import GridAxis

    for cls in (CurvesPanel, SpreadPanel, HealthPanel, CalibrationPanel):
        panel = cls()
        qtbot.addWidget(panel)
        for theme in (th.DARK, th.LIGHT):
            panel.set_theme(theme)
            for w in panel.plots():
                item = w.getPlotItem()
                for name in ("left", "bottom"):
                    ax = item.getAxis(name)
                    assert isinstance(ax, GridAxis), (cls.__name__, name)
                    assert ax.zValue() < item.getViewBox().zValue()
                    assert ax.background == QColor(theme.plot_bg), (cls.__name__, theme)


def test_a_long_loss_name_is_shortened_inside_a_narrow_panel_and_whole_in_its_tooltip(qtbot):
    """At 1280 x 800 the curves panel is about 380 pixels wide: the loss line beside the
    title ends inside the panel with "…" (it was cut off at the edge), and says the loss
    whole in its tooltip."""
    from PySide6.QtCore import Qt
    from PySide6.QtWidgets import QApplication

    words = "half squared error, target scaled to [0, 1]"
    panel = CurvesPanel()
    qtbot.addWidget(panel)
    panel.resize(380, 260)
    panel.show()
    s = _series(0, [0.5, 0.2, 0.1])
    s["loss_words"] = words
    panel.set_series([s])
    QApplication.processEvents()
    label = panel.loss_label
    assert label.text() == f"Loss: {words}" and label.toolTip() == words
    assert label.geometry().right() <= panel.contentsRect().right()
    shown = label.fontMetrics().elidedText(label.text(), Qt.ElideRight,
                                           label.contentsRect().width())
    assert shown.endswith("…") and shown != label.text()  # (too narrow for it whole here)
    panel.resize(900, 260)
    QApplication.processEvents()
    assert label.fontMetrics().elidedText(label.text(), Qt.ElideRight,
                                          label.contentsRect().width()) == label.text()
