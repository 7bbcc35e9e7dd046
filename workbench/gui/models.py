"""Qt models over what the core produced: results, table preview, column profile.

The results model sorts itself with NumPy (``argsort`` over a cached key
column) and the proxy hands its ``sort`` to it, because Qt's generic proxy sort
asks Python for every comparison and takes over a second for 10,000 rows. The
proxy keeps the filtering (head, hidden activation, text, tie group only).
"""

from __future__ import annotations

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
from PySide6.QtGui import QColor, QFont

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
SORT_ROLE = Qt.UserRole + 1
ROW_ROLE = Qt.UserRole + 2
KEY_ROLE = Qt.UserRole + 3
FILTER_ROLE = Qt.UserRole + 4

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


class ResultsModel(QAbstractTableModel):
    """One row per configuration of a sweep.

    Rows are plain dicts (see :func:`workbench.gui.core_adapter.ranked_rows`)
    identified by their ``key``; :meth:`upsert` adds new ones and updates known
    ones in place so that selections survive a sweep's updates.
    """

    rowsUpdated = Signal()

    def __init__(self, parent=None):
        super().__init__(parent)
        self._rows: list[dict] = []
        self._index: dict[str, int] = {}
        self._order = np.zeros(0, dtype=np.int64)  # view row -> storage row
        self._keys: dict[str, np.ndarray] = {}
        self._order_list: list[int] = []
        self._disp: list[tuple | None] = []
        self._look: list[tuple | None] = []
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
    def rowCount(self, parent=QModelIndex()):
        return 0 if parent.isValid() else len(self._rows)

    def columnCount(self, parent=QModelIndex()):
        return 0 if parent.isValid() else len(RESULT_COLUMNS)

    def headerData(self, section, orientation, role=Qt.DisplayRole):
        if orientation != Qt.Horizontal:
            return None
        if role == Qt.DisplayRole:
            return RESULT_COLUMNS[section][1]
        if role == Qt.ToolTipRole:
            return RESULT_COLUMNS[section][2]
        return None

    def row_at(self, view_row: int) -> dict:
        return self._rows[self._order_list[view_row]]

    def flags(self, index):
        """Reference rows (baselines) can be read but not selected (nor exported)."""
        if not index.isValid():
            return Qt.NoItemFlags
        if self._rows[self._order_list[index.row()]].get("kind") == "baseline":
            return self._READ_ONLY
        return self._SELECTABLE

    _READ_ONLY = Qt.ItemIsEnabled
    _SELECTABLE = Qt.ItemIsEnabled | Qt.ItemIsSelectable

    def set_colors(self, decisions: dict[str, QColor], reference: QColor,
                   muted: QColor) -> None:
        """The theme's row colours (decision backgrounds, reference rows, muted text)."""
        self.decision_colors = dict(decisions)
        self.reference_color = QColor(reference)
        self.muted_color = QColor(muted)
        self._look = [None] * len(self._rows)
        if self._rows:
            self.dataChanged.emit(self.index(0, 0),
                                  self.index(len(self._rows) - 1, len(RESULT_COLUMNS) - 1))

    def _set_order(self, order: np.ndarray) -> None:
        self._order = order
        self._order_list = order.tolist()

    _ROLES = frozenset({Qt.DisplayRole, SORT_ROLE, ROW_ROLE, KEY_ROLE, FILTER_ROLE,
                        Qt.BackgroundRole,
                        Qt.ForegroundRole, Qt.TextAlignmentRole, Qt.FontRole, Qt.ToolTipRole})
    _RIGHT = int(Qt.AlignRight | Qt.AlignVCenter)
    _LEFT = int(Qt.AlignLeft | Qt.AlignVCenter)

    #: each column's alignment (numbers to the right)
    _ALIGN = tuple(int(Qt.AlignRight | Qt.AlignVCenter) if k in NUMERIC
                   else int(Qt.AlignLeft | Qt.AlignVCenter) for k in COLUMN_KEYS)
    _MEAN = COLUMN_KEYS.index("mean")

    def _look_of(self, i: int) -> tuple:
        """A row's (background, foreground, font, font of the mean), worked out once per
        change of the row (a repaint asks for each of them for every cell)."""
        look = self._look[i]
        if look is None:
            row = self._rows[i]
            if row.get("kind") == "baseline":
                look = (self.reference_color, self.muted_color, self._italic, self._italic)
            else:
                look = (self.decision_colors.get(row.get("decision")),
                        self.muted_color if row.get("status") not in ("done", None) else None,
                        None, self._bold if row.get("rank") == 1 else None)
            self._look[i] = look
        return look

    def data(self, index, role=Qt.DisplayRole):
        if role not in self._ROLES or not index.isValid():
            return None
        i = self._order_list[index.row()]
        col = index.column()
        if role == Qt.DisplayRole:
            disp = self._disp[i]
            if disp is None:
                row = self._rows[i]
                disp = self._disp[i] = tuple(self._display(row, k) for k in COLUMN_KEYS)
                self._look[i] = None
            return disp[col]
        if role == Qt.TextAlignmentRole:
            return self._ALIGN[col]
        if role == Qt.BackgroundRole:
            return self._look_of(i)[0]
        if role == Qt.ForegroundRole:
            return self._look_of(i)[1]
        if role == Qt.FontRole:
            look = self._look_of(i)
            return look[3] if col == self._MEAN else look[2]
        row = self._rows[i]
        key = COLUMN_KEYS[col]
        if role == SORT_ROLE:
            return self._sort_value(row, key)
        if role == ROW_ROLE:
            return row
        if role == KEY_ROLE:
            return row["key"]
        if role == FILTER_ROLE:
            return self.filter_text(row)
        return self._tooltip(row, key)

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
    def clear(self) -> None:
        self.beginResetModel()
        self._rows, self._index = [], {}
        self._set_order(np.zeros(0, dtype=np.int64))
        self._disp = []
        self._look = []
        self._keys = {}
        self.endResetModel()
        self.last_changed = set()
        self.rowsUpdated.emit()

    def set_rows(self, rows: Iterable[dict]) -> None:
        self.beginResetModel()
        self._rows = [dict(r) for r in rows]
        self._index = {r["key"]: i for i, r in enumerate(self._rows)}
        self._set_order(np.arange(len(self._rows), dtype=np.int64))
        self._disp = [None] * len(self._rows)
        self._look = [None] * len(self._rows)
        self._keys = {}
        self.endResetModel()
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

        Returns the keys of the rows that changed or were added.
        """
        new, changed = [], []
        for r in rows:
            i = self._index.get(r["key"])
            if i is None:
                new.append(dict(r))
            elif self.signature(self._rows[i]) != self.signature(r):
                self._rows[i] = dict(r)
                self._disp[i] = None
                self._look[i] = None
                changed.append(i)
        if changed:
            self._keys = {}
            inverse = {s: v for v, s in enumerate(self._order_list)}
            last = len(RESULT_COLUMNS) - 1
            for i in changed:
                v = inverse[i]
                self.dataChanged.emit(self.index(v, 0), self.index(v, last))
        if new:
            start = len(self._rows)
            self.beginInsertRows(QModelIndex(), start, start + len(new) - 1)
            for r in new:
                self._index[r["key"]] = len(self._rows)
                self._rows.append(r)
                self._disp.append(None)
                self._look.append(None)
            self._set_order(np.concatenate(
                [self._order, np.arange(start, len(self._rows), dtype=np.int64)]))
            self._keys = {}
            self.endInsertRows()
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
        if arr.dtype == object:
            idx = np.argsort(arr, kind="stable")
            if order == Qt.DescendingOrder:
                idx = idx[::-1]
        else:
            nan = np.isnan(arr)
            good = np.flatnonzero(~nan)
            g = good[np.argsort(arr[good], kind="stable")]
            if order == Qt.DescendingOrder:
                # stable descending: reverse the ascending order of the negated keys
                g = good[np.argsort(-arr[good], kind="stable")]
            idx = np.concatenate([g, np.flatnonzero(nan)])  # missing values last, always
        idx = idx.astype(np.int64)
        if len(idx) == len(self._order) and np.array_equal(idx, self._order):
            return  # the order stands: no relayout and full repaint of the views
        self.layoutAboutToBeChanged.emit()
        old = self.persistentIndexList()
        stored = [self._order_list[p.row()] for p in old]
        self._set_order(idx)
        inverse = np.empty(n, dtype=np.int64)
        inverse[idx] = np.arange(n)
        self.changePersistentIndexList(
            old, [self.index(int(inverse[s]), p.column()) for s, p in zip(stored, old)])
        self.layoutChanged.emit()


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
