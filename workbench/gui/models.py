"""Qt models over what the core produced: results, table preview, column profile.

The results model keeps what the table paints in Qt's own items (a repaint never
calls Python) and sorts itself with NumPy (``argsort`` over a cached key column,
missing values last in both orders); the proxy hands its ``sort`` to it and keeps
the filtering (head, hidden activation, text, tie group only).
"""

from __future__ import annotations

import bisect
import math
import re
from collections.abc import Iterable

import numpy as np
from PySide6.QtCore import (
    QAbstractTableModel,
    QModelIndex,
    QRegularExpression,
    QSortFilterProxyModel,
    Qt,
    Signal,
)
from PySide6.QtGui import QColor, QFont, QStandardItem, QStandardItemModel

#: (key, header, tooltip) of the results table's columns, in order. The engine, the
#: training score and the probabilities behind a decision are in each row's tooltip and
#: in the selection line under the table, so that every column fits at 1280 x 800.
RESULT_COLUMNS = (
    ("rank", "Rank", "Rank by mean score (1 = best); “=” tied with the best at alpha = 0.05 "
                     "(Nadeau–Bengio corrected t-test); “ref”: a baseline"),
    ("hidden", "Hidden", "Hidden-layer activation (for a reference row: the baseline)"),
    ("head", "Head", "Output activation and its matched loss"),
    ("layers", "Layers", "Hidden-layer widths"),
    ("learning_rate", "LR", "Initial learning rate (Adam)"),
    ("alpha", "L2", "L2 penalty (alpha)"),
    ("mean", "Mean ± sd", "Mean and standard deviation of the metric (greater is better) over "
                          "all folds and repeats"),
    ("decision", "Decision",
     "Against the best, Bayesian correlated t-test: ◆ best; ≈ equivalent (P(practically "
     "equivalent) ≥ 0.95); ? undecided (the folds cannot tell); ▼ worse (P(practically "
     "worse) ≥ 0.95). A baseline's decision is its own against the best network"),
    ("p_value", "p", "Corrected resampled t-test p-value against the best configuration"),
    ("gap", "Gap", "Mean training score minus mean test score; “underfit” when the training "
                   "score itself is more than the region of practical equivalence below "
                   "the linear baseline's test score"),
    ("epochs", "Ep.", "Epochs run, mean over folds and repeats"),
    ("dead_pct", "Dead", "Share of hidden units that never activate, %, last epoch, mean "
                         "over trials"),
    ("saturated_pct", "Sat.", "Share of hidden units stuck in a flat region, %, last epoch"),
    ("fit_seconds", "Fit s", "Mean fit time per trial, seconds"),
    ("trials", "Trials", "Finished trials / planned trials"),
)
COLUMN_KEYS = tuple(c[0] for c in RESULT_COLUMNS)
NUMERIC = {"rank", "learning_rate", "alpha", "mean", "p_value", "gap", "epochs",
           "fit_seconds", "dead_pct", "saturated_pct", "trials"}
KEY_ROLE = Qt.UserRole + 3
FILTER_ROLE = Qt.UserRole + 4
#: a cell's sort keys, what Qt's own sort compares (set when the cell is set, so that a sort
#: writes nothing): ascending and descending (the value negated); a missing value is +inf
#: in both, so that it comes last either way, as NumPy's order has it. Text is keyed by a
#: number that keeps its order (:meth:`ResultsModel._text_code`): Qt compares numbers
#: without copying strings (a text column's sort of 10,000 rows: ~140 -> ~40 ms)
UP_ROLE = Qt.UserRole + 5
DOWN_ROLE = Qt.UserRole + 6
#: a row's place in the model's storage (on its first cell; never changes)
STORE_ROLE = Qt.UserRole + 7

#: the decision of a configuration against the best, as the table shows it (a glyph and
#: the word, so that colour never carries the meaning alone); a baseline can be "better"
DECISION_TEXT = {"best": "◆ best", "equivalent": "≈ equivalent", "undecided": "? undecided",
                 "worse": "▼ worse", "better": "▲ better"}
#: order of the decisions when the table is sorted by that column
DECISION_ORDER = {"best": 0, "better": 0.5, "equivalent": 1, "undecided": 2, "worse": 3}


def _num(x) -> float:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return math.nan
    return v


def fmt_float(x, digits: int = 4) -> str:
    v = _num(x)
    if math.isnan(v):
        return "–"
    if v != 0 and (abs(v) < 1e-3 or abs(v) >= 1e5):
        return f"{v:.2e}"
    return f"{v:.{digits}f}"


def fmt_p(x) -> str:
    """A p-value in three decimals; below 0.0005 as "<0.001" (as the command line)."""
    v = _num(x)
    if math.isnan(v):
        return "–"
    return "<0.001" if 0 <= v < 5e-4 else f"{v:.3f}"


def fmt_prob(x) -> str:
    """A probability for a tooltip: two decimals, "> 0.99" / "< 0.01" at the ends."""
    v = _num(x)
    if math.isnan(v):
        return "–"
    if v > 0.99:
        return "> 0.99"
    if v < 0.01:
        return "< 0.01"
    return f"{v:.2f}"


def row_tooltip(row: dict, key: str) -> str | None:
    """A results cell's tooltip: what an abbreviated cell leaves out."""
    if row.get("kind") == "baseline":
        text = (f"Baseline (reference, not exported): {row.get('estimator') or row.get('hidden')}"
                " on the same folds, preprocessing and metric")
        if row.get("difference") is not None:
            text += (f"\nagainst the best network: difference {_num(row['difference']):+.4f}, "
                     f"P(better) {fmt_prob(row.get('p_better'))}, P(equivalent) "
                     f"{fmt_prob(row.get('p_equivalent'))}, P(worse) "
                     f"{fmt_prob(row.get('p_worse'))}")
        if row.get("n_networks_better") is not None:
            text += f"\n{row['n_networks_better']} network(s) practically better than it"
        return text
    if key in ("decision", "mean") and row.get("stop_reason"):
        return (f"stopped by racing: {row['stop_reason']}. Its mean is over its first "
                f"{row.get('n_done', 0)} fold scores only, so it does not compare with the "
                "best's; the decision cell gives its mean paired difference from the "
                "configuration that led when it was stopped.")
    if key == "status" or (key in ("decision", "trials") and row.get("message")):
        return str(row.get("message") or row.get("status") or "") or None
    if key == "mean":
        return (f"mean {row.get('mean')}, sd {row.get('sd')} over {row.get('n_done', 0)} "
                "fold scores")
    if key == "decision" and row.get("p_equivalent") is not None:
        return (f"against the best: P(better) {fmt_prob(row.get('p_better'))}, P(practically "
                f"equivalent) {fmt_prob(row.get('p_equivalent'))}, P(worse) "
                f"{fmt_prob(row.get('p_worse'))}")
    if key == "gap" and row.get("train_mean") is not None:
        return (f"training score {_num(row['train_mean']):.4f}, test score "
                f"{_num(row.get('mean')):.4f}")
    if key in ("hidden", "head", "layers") and row.get("engine"):
        return f"engine: {row['engine']}"
    return None


def fmt_pct(x) -> str:
    v = _num(x)
    return "–" if math.isnan(v) else f"{v:.0f}"


class ResultsModel(QStandardItemModel):
    """One row per configuration of a sweep.

    Rows are plain dicts (see :func:`workbench.gui.core_adapter.ranked_rows`)
    identified by their ``key``; :meth:`upsert` adds new ones and updates known
    ones in place so that selections survive a sweep's updates.

    What the table paints (each cell's text, alignment, colours, font, tooltip and
    flags) is kept in Qt's own items, worked out once when a row arrives or changes: a
    repaint then never calls Python. (Answered by a Python ``data()``, a repaint of the
    visible rows asked about a thousand questions through Python and took 20-30 ms on a
    quiet machine, 60-80 ms on a busy one, the longest part of the event loop's stalls
    during a sweep.) The model's rows are in the order the views show them: sorting
    moves the items with Qt's own sort, on keys each cell carries (:data:`UP_ROLE`,
    :data:`DOWN_ROLE`).
    """

    rowsUpdated = Signal()

    def __init__(self, parent=None):
        super().__init__(0, len(RESULT_COLUMNS), parent)
        for i, (_key, header, tip) in enumerate(RESULT_COLUMNS):
            item = QStandardItem(header)
            item.setToolTip(tip)
            self.setHorizontalHeaderItem(i, item)
        self.setSortRole(UP_ROLE)
        self._rows: list[dict] = []
        self._index: dict[str, int] = {}
        self._order = np.zeros(0, dtype=np.int64)  # view row -> storage row
        self._keys: dict[str, np.ndarray] = {}
        #: per text column, each (lower-case) text's order-keeping number (_text_code)
        self._codes: dict[str, dict[str, float]] = {}
        self._order_list: list[int] = []
        #: each stored row's items (storage order) and what they show (a cell is set
        #: again only when what it shows changes)
        self._items: list[list[QStandardItem]] = []
        self._shown: list[list[tuple] | None] = []
        #: keys of the rows the last update touched (every row after a reset)
        self.last_changed: set[str] = set()
        self._bold = QFont()
        self._bold.setBold(True)
        self._italic = QFont()
        self._italic.setItalic(True)
        self._sort: tuple[int, Qt.SortOrder] | None = None
        #: row backgrounds by decision (set from the theme; none for undecided / worse)
        self.decision_colors: dict[str, QColor] = {"best": QColor("#f3e2a9"),
                                                   "equivalent": QColor("#d9eed5")}
        #: background of the baselines' reference rows
        self.reference_color = QColor("#ece4d4")
        self.muted_color = QColor("#5d646c")

    # --- Qt interface ---------------------------------------------------------
    def row_at(self, view_row: int) -> dict:
        return self._rows[self._order_list[view_row]]

    _READ_ONLY = Qt.ItemIsEnabled
    _SELECTABLE = Qt.ItemIsEnabled | Qt.ItemIsSelectable

    def set_colors(self, decisions: dict[str, QColor], reference: QColor,
                   muted: QColor) -> None:
        """The theme's row colours (decision backgrounds, reference rows, muted text)."""
        self.decision_colors = dict(decisions)
        self.reference_color = QColor(reference)
        self.muted_color = QColor(muted)
        if self._rows:
            self._refill(range(len(self._rows)))

    def _set_order(self, order: np.ndarray) -> None:
        self._order = order
        self._order_list = order.tolist()

    #: each column's alignment (numbers to the right)
    _ALIGN = tuple(int(Qt.AlignRight | Qt.AlignVCenter) if k in NUMERIC
                   else int(Qt.AlignLeft | Qt.AlignVCenter) for k in COLUMN_KEYS)
    _MEAN = COLUMN_KEYS.index("mean")

    def _look(self, row: dict) -> tuple:
        """A row's (background, foreground, font, font of the mean)."""
        if row.get("kind") == "baseline":
            return (self.reference_color, self.muted_color, self._italic, self._italic)
        return (self.decision_colors.get(row.get("decision")),
                self.muted_color if row.get("status") not in ("done", None) else None,
                None, self._bold if row.get("rank") == 1 else None)

    def _cells(self, row: dict) -> list[tuple]:
        """What each cell of a row shows and sorts on: (text, background, foreground, font,
        tooltip, ascending key, descending key)."""
        bg, fg, font, mean_font = self._look(row)
        return [(self._display(row, k), bg, fg, mean_font if c == self._MEAN else font,
                 row_tooltip(row, k), *self._sort_keys(row, k))
                for c, k in enumerate(COLUMN_KEYS)]

    def _sort_keys(self, row: dict, key: str) -> tuple:
        v = self._sort_value(row, key)
        if isinstance(v, str):
            code = self._text_code(key, v.lower())
            return (code, -code)
        if math.isnan(v):
            return (math.inf, math.inf)
        return (v, -v)

    def _text_code(self, key: str, text: str) -> float:
        """A number for ``text`` in column ``key`` that keeps the texts' order: a new text
        gets the midpoint of its sorted neighbours' codes, so the codes already on the
        cells stay right; when doubles leave no room between two neighbours, the column
        is coded again evenly and its cells' keys rewritten."""
        codes = self._codes.setdefault(key, {})
        code = codes.get(text)
        if code is not None:
            return code
        values = sorted(codes)
        i = bisect.bisect_left(values, text)
        lo = codes[values[i - 1]] if i > 0 else None
        hi = codes[values[i]] if i < len(values) else None
        if lo is None and hi is None:
            code = 0.0
        elif hi is None:
            code = lo + 1.0
        elif lo is None:
            code = hi - 1.0
        else:
            code = lo + (hi - lo) / 2
            if not lo < code < hi:
                self._recode(key, values[:i] + [text] + values[i:])
                return self._codes[key][text]
        codes[text] = code
        return code

    def _recode(self, key: str, values: list[str]) -> None:
        """Code column ``key``'s texts ``values`` (sorted) 0, 1, 2, ... and rewrite the keys
        its cells carry (the model's signals held: a sort-only role)."""
        codes = self._codes[key] = {v: float(i) for i, v in enumerate(values)}
        c = COLUMN_KEYS.index(key)
        blocked = self.blockSignals(True)
        try:
            for i, row in enumerate(self._rows):
                if i >= len(self._items):
                    break
                v = self._sort_value(row, key)
                if not isinstance(v, str):
                    continue
                code = codes[v.lower()]
                self._items[i][c].setData(code, UP_ROLE)
                self._items[i][c].setData(-code, DOWN_ROLE)
                shown = self._shown[i]
                if shown is not None:
                    shown[c] = shown[c][:-2] + (code, -code)
        finally:
            self.blockSignals(blocked)

    _CELL_ROLES = (Qt.DisplayRole, Qt.BackgroundRole, Qt.ForegroundRole, Qt.FontRole,
                   Qt.ToolTipRole, UP_ROLE, DOWN_ROLE)

    def _new_items(self, row: dict) -> list[QStandardItem]:
        """The items of a new row (not yet in the model)."""
        flags = self._READ_ONLY if row.get("kind") == "baseline" else self._SELECTABLE
        cells = self._cells(row)
        items = []
        for c, cell in enumerate(cells):
            # made here, from Python, not copied from an item Qt made: Qt-made items sorted
            # twice as fast, but Qt frees them without the binding hearing of it, and the
            # binding later handed a stale item wrapper back for another object at the same
            # address (a selection model read as an item; a crash of the test process)
            item = QStandardItem()
            # the sort keys first: a cell keeps its roles in a list, in the order they were
            # first set, and Qt's sort looks the key up in that list at every comparison
            # (10,000 rows of nine roles sorted in a median 75 ms against 96 ms with the
            # keys last, nine sorts of each interleaved in one process)
            item.setData(cell[-2], UP_ROLE)
            item.setData(cell[-1], DOWN_ROLE)
            item.setFlags(flags)
            item.setData(self._ALIGN[c], Qt.TextAlignmentRole)
            for role, value in zip(self._CELL_ROLES[:-2], cell[:-2]):
                if value is not None:
                    item.setData(value, role)
            items.append(item)
        items[0].setData(row["key"], KEY_ROLE)
        items[0].setData(self.filter_text(row), FILTER_ROLE)
        items[0].setData(len(self._items), STORE_ROLE)
        self._items.append(items)
        self._shown.append(cells)
        return items

    def _update_items(self, i: int) -> tuple[int, int] | None:
        """Show stored row ``i`` again; the first and last columns that changed (None:
        nothing did). The caller blocks the model's signals and announces the change."""
        row, items, before = self._rows[i], self._items[i], self._shown[i]
        cells = self._cells(row)
        first = last = None
        for c, (new, old) in enumerate(zip(cells, before)):
            if new == old:
                continue
            item = items[c]
            for role, value, was in zip(self._CELL_ROLES, new, old):
                if value != was:
                    item.setData(value, role)
            first = c if first is None else first
            last = c
        self._shown[i] = cells
        text = self.filter_text(row)
        if items[0].data(FILTER_ROLE) != text:  # (the proxy filters again on dataChanged)
            items[0].setData(text, FILTER_ROLE)
            first, last = 0, 0 if last is None else last
        flags = self._READ_ONLY if row.get("kind") == "baseline" else self._SELECTABLE
        if items[0].flags() != flags:
            for item in items:
                item.setFlags(flags)
            first, last = 0, len(items) - 1
        return None if first is None else (first, last)

    def _refill(self, storage_rows) -> None:
        """Show these stored rows again, one dataChanged per row for its changed columns."""
        inverse = {s: v for v, s in enumerate(self._order_list)}
        spans = []
        blocked = self.blockSignals(True)
        try:
            for i in storage_rows:
                span = self._update_items(i)
                if span is not None:
                    spans.append((inverse[i], span))
        finally:
            self.blockSignals(blocked)
        for v, (first, last) in spans:
            self.dataChanged.emit(self.index(v, first), self.index(v, last))

    @staticmethod
    def filter_text(row: dict) -> str:
        """What the proxy's filter expression reads (one line per row)."""
        tied = "1" if row.get("kind") != "baseline" and (
            row.get("tied_with_best") or row.get("rank") == 1) else "0"
        words = " ".join(str(row.get(k, "")) for k in ("hidden", "head", "layers", "engine",
                                                        "status", "decision"))
        return f"head={row.get('head')};hidden={row.get('hidden')};tied={tied};text={words}"

    @staticmethod
    def _display(row: dict, key: str) -> str:
        v = row.get(key)
        baseline = row.get("kind") == "baseline"
        if key == "rank":
            if baseline:
                return "ref =" if row.get("tied_with_best") else "ref"
            if v is None:
                return ""
            return f"{v} =" if row.get("tied_with_best") and v != 1 else str(v)
        if key == "mean":
            m, s = _num(row.get("mean")), _num(row.get("sd"))
            if math.isnan(m):
                return "–"
            return f"{m:.4f} ± {s:.4f}" if not math.isnan(s) else f"{m:.4f}"
        if key == "decision":
            if v is None and row.get("stop_difference") is not None:
                return f"stopped {_num(row['stop_difference']):+.4f}"
            if v is None:  # not judged: the status says why (running, diverged, failed…)
                return "" if row.get("status") in ("done", None) else str(row.get("status"))
            return DECISION_TEXT.get(v, str(v))
        if key == "p_value":
            return "" if row.get("rank") == 1 else fmt_p(v)
        if key == "gap":
            if row.get("underfit"):
                return "underfit"
            g = _num(v)
            return "" if math.isnan(g) else f"{g:+.3f}"
        if key == "epochs":
            e = _num(v)
            return "" if math.isnan(e) else f"{e:.0f}"
        if key in ("learning_rate", "alpha"):
            return f"{_num(v):g}" if not math.isnan(_num(v)) else ("" if baseline else "–")
        if key == "fit_seconds":
            return "" if baseline else fmt_float(v, 2)
        if key in ("dead_pct", "saturated_pct"):
            return "" if baseline else fmt_pct(v)
        if key == "trials":
            return f"{row.get('n_done', 0)}/{row.get('n_total', 0)}"
        return "" if v is None else str(v)

    @staticmethod
    def _sort_value(row: dict, key: str):
        if key == "trials":
            return float(row.get("n_done", 0))
        if key == "decision":
            d = row.get("decision")
            return DECISION_ORDER.get(d, 4.0) if d is not None else math.nan
        if key in NUMERIC:
            v = _num(row.get(key))
            if key == "rank" and row.get(key) is None:
                v = math.inf
            return v
        return str(row.get(key) or "")

    @staticmethod
    def _tooltip(row: dict, key: str) -> str | None:
        return row_tooltip(row, key)

    # --- updates --------------------------------------------------------------
    def _reset(self, rows: list[dict]) -> None:
        self.beginResetModel()
        blocked = self.blockSignals(True)
        try:
            self.setRowCount(0)
            self._rows, self._index = [], {}
            self._items, self._shown = [], []
            self._keys = {}
            if rows:
                self.insertRows(0, len(rows))
            for v, r in enumerate(rows):
                self._index[r["key"]] = v
                self._rows.append(r)
                for c, item in enumerate(self._new_items(r)):
                    self.setItem(v, c, item)
            self._set_order(np.arange(len(self._rows), dtype=np.int64))
        finally:
            self.blockSignals(blocked)
        self.endResetModel()

    def clear(self) -> None:
        self._reset([])
        self.last_changed = set()
        self.rowsUpdated.emit()

    def set_rows(self, rows: Iterable[dict]) -> None:
        self._reset([dict(r) for r in rows])
        if self._sort is not None:
            self.sort(*self._sort)
        self.last_changed = set(self._index)
        self.rowsUpdated.emit()

    @staticmethod
    def signature(row: dict) -> tuple:
        """What identifies a row's content (NaN-safe; a row changes when trials arrive)."""
        return tuple(repr(row.get(k)) for k in (
            "n_done", "status", "rank", "position", "tied_with_best", "mean", "sd", "p_value",
            "decision", "p_better", "p_equivalent", "p_worse", "gap", "underfit", "epochs",
            "fit_seconds", "dead_pct", "saturated_pct", "message"))

    def upsert(self, rows: Iterable[dict]) -> list[str]:
        """Update known configurations in place and append new ones.

        Only the cells whose text, colours, font or tooltip changed are set again and
        announced (one ``dataChanged`` per changed row, over its changed columns).
        Returns the keys of the rows that changed or were added.
        """
        new, changed = [], []
        for r in rows:
            i = self._index.get(r["key"])
            if i is None:
                new.append(dict(r))
            elif self.signature(self._rows[i]) != self.signature(r):
                self._rows[i] = dict(r)
                changed.append(i)
        if changed:
            self._keys = {}
            self._refill(changed)
        if new:
            start = len(self._rows)
            # the rows first (one insertion), then their items (signals blocked), then
            # one dataChanged over them (the proxy filters them on it)
            self.insertRows(start, len(new))
            blocked = self.blockSignals(True)
            try:
                for v, r in enumerate(new, start):
                    self._index[r["key"]] = v
                    self._rows.append(r)
                    for c, item in enumerate(self._new_items(r)):
                        self.setItem(v, c, item)
            finally:
                self.blockSignals(blocked)
            self._set_order(np.concatenate(
                [self._order, np.arange(start, len(self._rows), dtype=np.int64)]))
            self._keys = {}
            self.dataChanged.emit(self.index(start, 0),
                                  self.index(len(self._rows) - 1, len(RESULT_COLUMNS) - 1))
        if (changed or new) and self._sort is not None:
            self.sort(*self._sort)
        keys = [self._rows[i]["key"] for i in changed] + [r["key"] for r in new]
        if keys:
            self.last_changed = set(keys)
            self.rowsUpdated.emit()
        return keys

    def rows(self) -> list[dict]:
        """Rows in the current (sorted) order."""
        return [self._rows[i] for i in self._order_list]


    # --- sorting (NumPy, stable) ----------------------------------------------
    def _key_array(self, key: str) -> np.ndarray:
        arr = self._keys.get(key)
        if arr is None:
            vals = [self._sort_value(r, key) for r in self._rows]
            if key in NUMERIC or key == "decision":
                arr = np.asarray(vals, dtype=np.float64)
            else:
                arr = np.asarray([v.lower() for v in vals], dtype=object)
            self._keys[key] = arr
        return arr

    def sort(self, column: int, order: Qt.SortOrder = Qt.AscendingOrder) -> None:
        if not 0 <= column < len(RESULT_COLUMNS):
            return
        self._sort = (column, order)
        n = len(self._rows)
        if n == 0:
            return
        key = COLUMN_KEYS[column]
        arr = self._key_array(key)
        numeric = arr.dtype != object
        descending = order == Qt.DescendingOrder
        # the keys Qt compares, in the present order: already in order, nothing moves (no
        # relayout and full repaint of the views)
        if numeric:
            keys = np.where(np.isnan(arr), np.inf, -arr if descending else arr)
        else:
            keys = arr  # (lower case already)
        now = keys[self._order] if len(self._order) == n else None
        if now is not None and (bool(np.all(now[:-1] >= now[1:])) if descending and not numeric
                                else bool(np.all(now[:-1] <= now[1:]))):
            return
        # Qt's own sort moves the items (and the persistent indexes: selections follow
        # their rows) in one layout change, on the keys the cells carry: numbers always
        # ascending on the ascending or the negated key (missing values last both ways),
        # text ascending or descending. (Keys written at sort time went through Qt's
        # search for each item's place, stale after a sort: 0.4 s for 10,000 rows.)
        if now is None:  # (not expected) Qt sorts on the cells' keys; the order is read back
            self.setSortRole(DOWN_ROLE if numeric and descending else UP_ROLE)
            QStandardItemModel.sort(self, column, Qt.DescendingOrder if descending and not
                                    numeric else Qt.AscendingOrder)
            self._set_order(self.view_order_from_items())
            return
        perm = _stable_order(now, descending and not numeric)
        # numbers, and text by its order-keeping codes (:meth:`_text_code`): Qt sorts stably
        # on the same order from the present one, so it makes the order computed here
        self.setSortRole(DOWN_ROLE if descending else UP_ROLE)
        QStandardItemModel.sort(self, column, Qt.AscendingOrder)
        # the order Qt made, computed rather than read back from 10,000 items (as long as
        # Qt's sort took): equal keys keep their places (:meth:`view_order_from_items`
        # reads it back; the tests compare the two)
        self._set_order(self._order[perm])

    def view_order_from_items(self) -> np.ndarray:
        """Each view row's stored row, as the items say (for checks)."""
        n = self.rowCount()
        return np.fromiter((self.item(v, 0).data(STORE_ROLE) for v in range(n)),
                           dtype=np.int64, count=n)


def _stable_order(keys: np.ndarray, descending: bool) -> np.ndarray:
    """The stable sort of ``keys`` (numbers, or text) ascending, or descending with equal
    keys in their present order, as Qt's stable item sort orders them."""
    if keys.dtype == object:
        _, ranks = np.unique(keys, return_inverse=True)
        keys = -ranks if descending else ranks
    return np.argsort(keys, kind="stable")


class ResultsProxy(QSortFilterProxyModel):
    """Filters the results; sorting is delegated to :class:`ResultsModel`.

    Filtering uses Qt's own regular-expression filter on :data:`FILTER_ROLE`,
    so that with no filter set Qt accepts every row without calling Python
    (which keeps re-sorting 10,000 rows fast).
    """

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setFilterKeyColumn(0)
        self.setFilterRole(FILTER_ROLE)

    def sort(self, column, order=Qt.AscendingOrder):  # noqa: D401 - Qt override
        src = self.sourceModel()
        if src is not None:
            src.sort(column, order)

    def set_filters(self, head: str = "", hidden: str = "", text: str = "",
                    tied_only: bool = False) -> None:
        parts = []
        if head:
            parts.append(f"(?=.*(^|;)head={re.escape(head)};)")
        if hidden:
            parts.append(f"(?=.*(^|;)hidden={re.escape(hidden)};)")
        if tied_only:
            parts.append("(?=.*;tied=1;)")
        if text.strip():
            parts.append(f"(?=.*;text=.*{re.escape(text.strip())})")
        rx = QRegularExpression("^" + "".join(parts) if parts else "",
                                QRegularExpression.CaseInsensitiveOption)
        self.setFilterRegularExpression(rx)

    def row_at(self, proxy_row: int) -> dict:
        src = self.mapToSource(self.index(proxy_row, 0))
        return self.sourceModel().row_at(src.row())


class FrameModel(QAbstractTableModel):
    """Read-only view of the first rows of a pandas DataFrame."""

    def __init__(self, parent=None, max_rows: int = 200):
        super().__init__(parent)
        self._df = None
        self._max = max_rows

    def set_frame(self, df) -> None:
        self.beginResetModel()
        self._df = None if df is None else df.head(self._max)
        self.endResetModel()

    def rowCount(self, parent=QModelIndex()):
        return 0 if parent.isValid() or self._df is None else len(self._df)

    def columnCount(self, parent=QModelIndex()):
        return 0 if parent.isValid() or self._df is None else self._df.shape[1]

    def headerData(self, section, orientation, role=Qt.DisplayRole):
        if self._df is None or role != Qt.DisplayRole:
            return None
        if orientation == Qt.Horizontal:
            return str(self._df.columns[section])
        return str(section + 1)

    def data(self, index, role=Qt.DisplayRole):
        if self._df is None or not index.isValid():
            return None
        if role in (Qt.DisplayRole, Qt.ToolTipRole):
            v = self._df.iat[index.row(), index.column()]
            try:
                if v is None or (isinstance(v, float) and math.isnan(v)):
                    return "" if role == Qt.DisplayRole else "missing"
            except TypeError:
                pass
            if isinstance(v, float):
                return f"{v:.6g}"
            if hasattr(v, "hour") and hasattr(v, "date") and callable(v.date) \
                    and (v.hour, v.minute, v.second, getattr(v, "microsecond", 0)) == (0, 0, 0, 0):
                return str(v.date())  # a date at midnight reads as a date
            return str(v)
        if role == Qt.TextAlignmentRole:
            kind = self._df.dtypes.iloc[index.column()].kind
            if kind in "iufb":
                return int(Qt.AlignRight | Qt.AlignVCenter)
        return None


ROLES = ("feature", "target", "ignore")


class ProfileModel(QAbstractTableModel):
    """The column profile: name, type, missing share, role (editable).

    The model only holds what the core said; a role the user picks is applied by the
    core (:func:`workbench.gui.core_adapter.apply_roles`) and the rows it returns are
    shown with :meth:`refresh`, or the pick is undone with :meth:`set_role`.
    """

    roleChanged = Signal(str, str, str)  # column name, new role, previous role
    HEADERS = ("Column", "Type", "Missing", "Distinct", "Role", "Why")

    def __init__(self, parent=None):
        super().__init__(parent)
        self._cols: list[dict] = []
        self._base: dict[str, str] = {}

    def set_columns(self, cols: list[dict]) -> None:
        self.beginResetModel()
        self._cols = [dict(c) for c in cols]
        self._base = {c["name"]: c["role"] for c in self._cols}  # the intake's roles
        self.endResetModel()

    def refresh(self, cols: list[dict]) -> None:
        """Show the core's type and note for each column (the roles stay as they are)."""
        by_name = {c["name"]: c for c in cols}
        for i, c in enumerate(self._cols):
            new = by_name.get(c["name"])
            if new is not None and (new["kind"], new["note"]) != (c.get("kind"), c.get("note")):
                c["kind"], c["note"] = new["kind"], new["note"]
                self.dataChanged.emit(self.index(i, 0), self.index(i, len(self.HEADERS) - 1))

    def set_role(self, name: str, role: str) -> None:
        """Show ``role`` for column ``name`` without announcing it as the user's pick."""
        for i, c in enumerate(self._cols):
            if c["name"] == name and c["role"] != role:
                c["role"] = role
                ix = self.index(i, 4)
                self.dataChanged.emit(ix, ix)

    def columns(self) -> list[dict]:
        return [dict(c) for c in self._cols]

    def roles(self) -> dict[str, str]:
        return {c["name"]: c["role"] for c in self._cols}

    def set_target(self, name: str) -> None:
        """Make ``name`` the target; the former target gets its intake role back (the
        intake's suggested target is a feature when another column is the target)."""
        for i, c in enumerate(self._cols):
            base = self._base.get(c["name"], "feature")
            new = "target" if c["name"] == name else (
                ("feature" if base == "target" else base) if c["role"] == "target"
                else c["role"])
            if new != c["role"]:
                c["role"] = new
                ix = self.index(i, 4)
                self.dataChanged.emit(ix, ix)

    def rowCount(self, parent=QModelIndex()):
        return 0 if parent.isValid() else len(self._cols)

    def columnCount(self, parent=QModelIndex()):
        return 0 if parent.isValid() else len(self.HEADERS)

    def headerData(self, section, orientation, role=Qt.DisplayRole):
        if orientation == Qt.Horizontal and role == Qt.DisplayRole:
            return self.HEADERS[section]
        return None

    def flags(self, index):
        f = super().flags(index)
        if index.column() == 4:
            f |= Qt.ItemIsEditable
        return f

    def data(self, index, role=Qt.DisplayRole):
        if not index.isValid():
            return None
        c = self._cols[index.row()]
        col = index.column()
        if role in (Qt.DisplayRole, Qt.EditRole):
            if col == 0:
                return c["name"]
            if col == 1:
                return c.get("kind", "")
            if col == 2:
                return f"{100.0 * float(c.get('missing', 0.0)):.1f} %"
            if col == 3:
                return "" if c.get("distinct") is None else str(c["distinct"])
            if col == 5:
                return c.get("note") or ""
            return c["role"]
        if role == Qt.ToolTipRole:
            return c.get("note") or None
        if role == Qt.TextAlignmentRole and col in (2, 3):
            return int(Qt.AlignRight | Qt.AlignVCenter)
        if role == Qt.FontRole and c["role"] == "target":
            f = QFont()
            f.setBold(True)
            return f
        return None

    def setData(self, index, value, role=Qt.EditRole):
        if index.column() != 4 or role != Qt.EditRole or value not in ROLES:
            return False
        c = self._cols[index.row()]
        if c["role"] == value:
            return False
        previous, c["role"] = c["role"], value
        self.dataChanged.emit(index, index)
        self.roleChanged.emit(c["name"], value, previous)
        return True
