"""The results table during a sweep: what a ranking's update and a repaint cost in Python.

The table's cells live in Qt's items (workbench.gui.models.ResultsModel): a repaint
reads them without calling Python, an update sets and announces only what changed,
and sorting moves the items so that each view row shows its own configuration.
No timings here (speed lives in ``workbench bench --gui``); these tests pin the
behaviour the speed comes from.
"""

from __future__ import annotations

import sys

import numpy as np
import pytest
from PySide6.QtCore import QItemSelectionModel, Qt
from PySide6.QtWidgets import QTableView

from workbench.gui.models import COLUMN_KEYS, ResultsModel, ResultsProxy


def _rows(n, seed=0):
    rng = np.random.default_rng(seed)
    names = ["relu", "tanh", "gelu", "elu"]
    out = []
    for i in range(n):
        out.append({"key": f"k{i}", "index": i, "rank": i + 1, "hidden": names[i % 4],
                    "head": "identity", "layers": "8", "learning_rate": 0.001,
                    "alpha": 0.0001, "mean": float(rng.normal()) if i % 5 else None,
                    "sd": 0.1, "p_value": float(rng.uniform()), "tied_with_best": i < 3,
                    "decision": ("best", "equivalent", "undecided", "worse")[min(i, 3)],
                    "fit_seconds": float(rng.uniform()), "dead_pct": float(rng.uniform(0, 100)),
                    "saturated_pct": 0.0, "engine": "numpy", "status": "done", "n_done": 2,
                    "n_total": 2})
    out.append({"key": "baseline:linear", "kind": "baseline", "hidden": "linear model",
                "head": "", "layers": "", "mean": 0.1, "sd": 0.01, "status": "done",
                "n_done": 2, "n_total": 2, "decision": "worse"})
    return out


def _shown_matches_rows(model: ResultsModel) -> None:
    """Every cell shows its own row's text (the items and the row dicts agree)."""
    for v in range(model.rowCount()):
        row = model.row_at(v)
        texts = [model.index(v, c).data() or "" for c in range(len(COLUMN_KEYS))]
        assert texts == [ResultsModel._display(row, k) for k in COLUMN_KEYS], v


@pytest.fixture
def table(qapp):
    model = ResultsModel()
    proxy = ResultsProxy()
    proxy.setSourceModel(model)
    view = QTableView()
    view.setModel(proxy)
    view.resize(900, 400)
    view.show()
    qapp.processEvents()
    yield model, proxy, view
    view.close()


def test_a_repaint_of_the_table_calls_no_python(table, qapp):
    model, proxy, view = table
    model.upsert(_rows(30))
    proxy.sort(COLUMN_KEYS.index("mean"), Qt.DescendingOrder)
    qapp.processEvents()
    view.viewport().repaint()  # (a first paint may build PySide's Python enum types, once)
    calls = []

    def profile(frame, event, arg):
        if event == "call":
            calls.append(frame.f_code.co_qualname)

    sys.setprofile(profile)
    try:
        view.viewport().repaint()
        view.horizontalHeader().viewport().repaint()
    finally:
        sys.setprofile(None)
    # (a model answering data() in Python is asked about every visible cell, 7 roles each)
    assert calls == []
    assert view.rowAt(0) == 0 and view.rowAt(view.viewport().height() - 1) > 5  # rows shown


def test_an_update_sets_and_announces_only_what_changed(table):
    model, proxy, view = table
    rows = _rows(12)
    model.upsert(rows)
    changes, resets, layouts = [], [], []
    model.dataChanged.connect(lambda a, b, roles=(): changes.append(
        (a.row(), a.column(), b.row(), b.column())))
    model.modelReset.connect(lambda: resets.append(1))
    model.layoutChanged.connect(lambda *a: layouts.append(1))
    fit = COLUMN_KEYS.index("fit_seconds")
    updated = dict(rows[4], fit_seconds=7.25)
    assert model.upsert([dict(r) for r in rows[:4]] + [updated]) == ["k4"]
    # one row, one column: the fit time (the other cells keep their items untouched)
    assert changes == [(4, fit, 4, fit)]
    assert not resets and not layouts
    assert model.index(4, fit).data() == "7.25"
    # a decision that changes recolours the whole row: every column is announced
    changes.clear()
    model.upsert([dict(rows[5], decision="equivalent")])
    assert changes == [(5, 0, 5, len(COLUMN_KEYS) - 1)]
    assert model.index(5, 0).data(Qt.BackgroundRole) == model.decision_colors["equivalent"]
    _shown_matches_rows(model)


def test_new_rows_come_in_one_insertion_and_are_filtered(table):
    model, proxy, view = table
    rows = _rows(10)
    model.upsert(rows[:4])
    proxy.set_filters(hidden="gelu")
    inserted = []
    model.rowsInserted.connect(lambda parent, a, b: inserted.append((a, b)))
    model.upsert(rows)
    assert inserted == [(4, len(rows) - 1)]
    assert proxy.rowCount() == sum(r["hidden"] == "gelu" for r in rows)
    assert {proxy.row_at(i)["hidden"] for i in range(proxy.rowCount())} == {"gelu"}


def test_sorting_moves_the_items_with_their_rows_and_the_selection(table):
    model, proxy, view = table
    rows = _rows(25)
    model.upsert(rows)
    sm = view.selectionModel()
    for key in ("mean", "hidden", "fit_seconds", "rank"):
        for order in (Qt.AscendingOrder, Qt.DescendingOrder):
            view.sortByColumn(COLUMN_KEYS.index(key), order)
            _shown_matches_rows(model)
            assert [proxy.row_at(v)["key"] for v in range(proxy.rowCount())] == \
                [r["key"] for r in model.rows()]
    sm.select(proxy.index(3, 0), QItemSelectionModel.ClearAndSelect | QItemSelectionModel.Rows)
    chosen = proxy.row_at(3)["key"]
    # a ranking that puts the chosen row first: it moves, the selection with it
    view.sortByColumn(COLUMN_KEYS.index("fit_seconds"), Qt.DescendingOrder)
    i = int(chosen[1:])
    model.upsert([dict(rows[i], fit_seconds=50.0)])
    assert proxy.row_at(0)["key"] == chosen
    assert [proxy.row_at(ix.row())["key"] for ix in sm.selectedRows()] == [chosen]
    assert proxy.index(0, COLUMN_KEYS.index("fit_seconds")).data() == "50.00"
    _shown_matches_rows(model)


def test_reference_rows_read_only_and_styled_in_their_items(table):
    model, proxy, view = table
    model.set_rows(_rows(6))
    v = next(v for v in range(model.rowCount()) if model.row_at(v).get("kind") == "baseline")
    assert not model.flags(model.index(v, 0)) & Qt.ItemIsSelectable
    assert model.flags(model.index(0, 0)) & Qt.ItemIsSelectable
    assert model.index(v, 2).data(Qt.FontRole).italic()
    assert model.index(v, 0).data(Qt.BackgroundRole) == model.reference_color
    # the best row's mean in bold, right-aligned numbers, left-aligned names
    mean = COLUMN_KEYS.index("mean")
    assert model.index(0, mean).data(Qt.FontRole).bold()
    assert model.index(0, mean).data(Qt.TextAlignmentRole) == int(Qt.AlignRight | Qt.AlignVCenter)
    assert model.index(0, 1).data(Qt.TextAlignmentRole) == int(Qt.AlignLeft | Qt.AlignVCenter)
    # the header's names and tooltips, from the model's own header items
    assert model.headerData(mean, Qt.Horizontal) == "Mean ± sd"
    assert "standard deviation" in model.headerData(mean, Qt.Horizontal, Qt.ToolTipRole)
    # new theme colours reach the rows already shown
    from PySide6.QtGui import QColor

    model.set_colors({"best": QColor("#112233")}, QColor("#445566"), QColor("#778899"))
    assert model.index(0, 0).data(Qt.BackgroundRole) == QColor("#112233")
    assert model.index(v, 0).data(Qt.BackgroundRole) == QColor("#445566")
    assert model.index(1, 0).data(Qt.BackgroundRole) is None  # "equivalent": no colour now


def test_the_computed_order_is_the_one_qt_made_on_every_column_and_tie(table):
    """The model computes the view order with NumPy's stable sort instead of reading it
    back from every item; Qt's own stable sort on the keys the cells carry must make that
    very order: every column, both ways, with ties (four hidden activations, one head)
    and missing values, from orders left by other sorts."""
    model, proxy, view = table
    model.upsert(_rows(60, seed=3))
    for key in ("hidden", "mean", "head", "fit_seconds", "decision", "hidden", "layers",
                "rank", "trials", "learning_rate"):
        for order in (Qt.AscendingOrder, Qt.DescendingOrder):
            view.sortByColumn(COLUMN_KEYS.index(key), order)
            assert list(model.view_order_from_items()) == list(model._order), (key, order)
            _shown_matches_rows(model)
    # text in the order Python sorts it, missing numbers last both ways
    view.sortByColumn(COLUMN_KEYS.index("hidden"), Qt.AscendingOrder)
    shown = [model.row_at(v)["hidden"].lower() for v in range(model.rowCount())]
    assert shown == sorted(shown)


def test_text_codes_keep_the_order_when_room_between_neighbours_runs_out(table):
    """A new text takes the midpoint of its neighbours' codes; after ~50 halvings between
    two neighbours there is no room left and the column is coded again, its cells' keys
    rewritten: the sort stays the text order throughout."""
    model, proxy, view = table
    rows = _rows(8)
    model.upsert(rows)
    col = COLUMN_KEYS.index("hidden")
    # "a", then ever closer to "a" from above: "b", "ab", "aab", ... halves the same gap
    names = ["a", "b"] + ["a" * k + "b" for k in range(1, 70)]
    extra = [dict(rows[0], key=f"t{i}", index=100 + i, hidden=n) for i, n in enumerate(names)]
    model.upsert(extra)
    codes = model._codes["hidden"]
    assert sorted(codes, key=codes.get) == sorted(codes)  # the codes keep the text order
    assert max(codes.values()) <= len(codes)  # it was coded again (0, 1, 2, ...)
    for order in (Qt.AscendingOrder, Qt.DescendingOrder):
        view.sortByColumn(col, order)
        shown = [model.row_at(v)["hidden"].lower() for v in range(model.rowCount())]
        assert shown == sorted(shown, reverse=order == Qt.DescendingOrder)
        assert list(model.view_order_from_items()) == list(model._order)

