"""The Cross-check dialog: one configuration of the shown sweep refitted on scikit-learn's MLP.

It presents :func:`workbench.sweep.cross_check.cross_check` (what ``workbench show
SWEEP_ID --cross-check`` prints): per fold the score of the engine in scikit-learn's
mode, the score of scikit-learn's own ``MLPClassifier`` / ``MLPRegressor``, their
difference, whether they agree to the parity tolerance and the score the sweep
stored, then the same sentence as the command line.

The refits are real training, seconds to minutes, so they run in a process of
their own (:func:`workbench.sweep.cross_check.cross_check_stored`, through
loky, as the window's ranking does); the dialog polls it with a timer and the
progress file it writes after each fold, so the window's event loop only draws.
"Stop" ends that process; closing the dialog does too. A configuration
scikit-learn cannot express is answered at once, in words, without a process.
"""

from __future__ import annotations

import math
import os
import tempfile
from pathlib import Path

from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtWidgets import (
    QAbstractItemView,
    QComboBox,
    QDialog,
    QDialogButtonBox,
    QHeaderView,
    QLabel,
    QProgressBar,
    QPushButton,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
)

from workbench.errors import InputError
from workbench.gui.messages import phrase

#: the result table's columns
COLUMNS = ("Repeat", "Fold", "Engine", "scikit-learn", "Difference", "Agree", "Stored")
#: what each column holds, as the header's tooltip
COLUMN_TIPS = ("The cross-validation repeat", "The fold within the repeat",
               "Our engine in scikit-learn's mode (its start and stopping rule, float64)",
               "scikit-learn's own MLPClassifier / MLPRegressor",
               "|Engine - scikit-learn|", "Whether the two agree to the parity tolerance",
               "The score the sweep stored (fair start: differs by design)")
#: how often the dialog looks at the running check (ms)
POLL_MS = 100


def _num(v) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "n/a"
    return f"{v:.6g}"


class CrossCheckDialog(QDialog):
    """Choose a configuration of the shown sweep and cross-check it on scikit-learn's MLP.

    Parameters
    ----------
    parent : QWidget
    store_path : str or None
        The window's store file (None: the default store).
    sweep_id : str
    choices : list of (str, dict)
        The configurations offered, ``(label, row)``, the recommended one first (the
        window passes the same list as its Export dialog).
    task, kind : str
        The sweep's task and target kind, to say at once when scikit-learn cannot
        express a configuration.
    """

    #: the check ended: its :meth:`~workbench.sweep.cross_check.CrossCheck.to_dict`
    checkDone = Signal(dict)
    #: the check failed: the message shown
    checkFailed = Signal(str)

    def __init__(self, parent, store_path, sweep_id: str, choices, task: str,
                 kind: str | None = None):
        super().__init__(parent)
        self.setWindowTitle("Cross-check on scikit-learn's MLP")
        self.setMinimumSize(640, 420)
        self.resize(860, 560)
        self._store, self._sweep, self._task, self._kind = store_path, sweep_id, task, kind
        self._choices = list(choices)
        self._pool = self._future = None
        self._progress_file: Path | None = None
        self.result: dict | None = None

        lay = QVBoxLayout(self)
        intro = QLabel("Refits the configuration on the sweep's own folds and seeds twice: with "
                       "our engine in scikit-learn's mode and with scikit-learn's own MLP. The "
                       "two scores must agree to the parity tolerance.")
        intro.setWordWrap(True)
        lay.addWidget(intro)
        lay.addWidget(QLabel("Configuration"))
        self.config_combo = QComboBox()
        for label, _row in self._choices:
            self.config_combo.addItem(label)
            self.config_combo.setItemData(self.config_combo.count() - 1, label,
                                          Qt.ToolTipRole)
        self.config_combo.currentIndexChanged.connect(self._config_changed)
        lay.addWidget(self.config_combo)

        self.progress = QProgressBar()
        self.progress.setFormat("%v of %m folds")
        self.progress.setVisible(False)
        lay.addWidget(self.progress)

        self.table = QTableWidget(0, len(COLUMNS))
        self.table.setHorizontalHeaderLabels(list(COLUMNS))
        self.table.setEditTriggers(QAbstractItemView.NoEditTriggers)
        self.table.verticalHeader().setVisible(False)
        header = self.table.horizontalHeader()
        for c, tip in enumerate(COLUMN_TIPS):
            self.table.horizontalHeaderItem(c).setToolTip(tip)
            header.setSectionResizeMode(c, QHeaderView.ResizeToContents if c in (0, 1, 5)
                                        else QHeaderView.Stretch)
        lay.addWidget(self.table, 1)

        self.sentence = QLabel("")
        self.sentence.setWordWrap(True)
        self.sentence.setObjectName("crossCheckSentence")
        self.sentence.setMinimumHeight(5 * self.sentence.fontMetrics().lineSpacing())
        self.sentence.setAlignment(Qt.AlignLeft | Qt.AlignTop)
        lay.addWidget(self.sentence)

        buttons = QDialogButtonBox()
        self.check_button = QPushButton("Check")
        self.check_button.setDefault(True)
        self.stop_button = QPushButton("Stop")
        self.stop_button.setEnabled(False)
        buttons.addButton(self.check_button, QDialogButtonBox.ActionRole)
        buttons.addButton(self.stop_button, QDialogButtonBox.ActionRole)
        buttons.addButton(QDialogButtonBox.Close)
        buttons.rejected.connect(self.reject)
        self.check_button.clicked.connect(self.start)
        self.stop_button.clicked.connect(self.stop)
        lay.addWidget(buttons)

        self._timer = QTimer(self)
        self._timer.setInterval(POLL_MS)
        self._timer.timeout.connect(self._poll)
        self._config_changed(0)

    # ------------------------------------------------------------------ state
    def row(self) -> dict:
        """The configuration chosen (a results row)."""
        return self._choices[self.config_combo.currentIndex()][1]

    def running(self) -> bool:
        return self._future is not None

    def _config_changed(self, _index: int) -> None:
        self.table.setRowCount(0)
        self.result = None
        reason = self._reason(self.row())
        self.sentence.setText(f"scikit-learn's MLP cannot train this configuration: {reason}."
                              if reason else "")
        self.check_button.setEnabled(reason is None and not self.running())

    def _reason(self, row: dict) -> str | None:
        from workbench.sweep.cross_check import not_expressible_reason

        return not_expressible_reason(self._task, row["hidden"], row["head"], self._kind)

    # ------------------------------------------------------------------ running
    def start(self) -> None:
        """Start the check of the chosen configuration in a process of its own."""
        if self.running():
            return
        from joblib.externals.loky import ProcessPoolExecutor

        from workbench.sweep.cross_check import cross_check_stored

        fd, name = tempfile.mkstemp(prefix="workbench-crosscheck-", suffix=".txt")
        os.close(fd)
        self._progress_file = Path(name)
        self.table.setRowCount(0)
        self.sentence.setText("Cross-checking…")
        self.progress.setRange(0, 0)  # busy until the first fold reports its total
        self.progress.setVisible(True)
        self.check_button.setEnabled(False)
        self.config_combo.setEnabled(False)
        self.stop_button.setEnabled(True)
        self._pool = ProcessPoolExecutor(max_workers=1)
        self._future = self._pool.submit(cross_check_stored, self._store, self._sweep,
                                         config_index=self.row()["index"],
                                         progress_path=str(self._progress_file))
        self._timer.start()

    def _poll(self) -> None:
        self._read_progress()
        if self._future is None or not self._future.done():
            return
        future = self._future
        self._end()
        try:
            result = future.result()
        except InputError as exc:
            self._fail(phrase(exc))
        except Exception as exc:  # the process died or the check raised: one line
            self._fail(f"the cross-check stopped: {type(exc).__name__}: {exc}")
        else:
            self.show_result(result)
            self.checkDone.emit(result)

    def _read_progress(self) -> None:
        try:
            done, total = (int(x) for x in self._progress_file.read_text().split())
        except (OSError, ValueError, AttributeError):
            return
        if self.progress.maximum() != total:
            self.progress.setRange(0, total)
        self.progress.setValue(done)

    def stop(self) -> None:
        """End a running check (its process is killed; nothing is stored by it)."""
        if not self.running():
            return
        self._end(kill=True)
        self.sentence.setText("Stopped; nothing was changed.")

    def _end(self, kill: bool = False) -> None:
        self._timer.stop()
        pool, self._pool, self._future = self._pool, None, None
        if pool is not None:
            pool.shutdown(wait=False, kill_workers=kill)
        if self._progress_file is not None:
            for p in (self._progress_file, Path(f"{self._progress_file}.tmp")):
                p.unlink(missing_ok=True)
            self._progress_file = None
        self.progress.setVisible(False)
        self.stop_button.setEnabled(False)
        self.config_combo.setEnabled(True)
        self.check_button.setEnabled(self._reason(self.row()) is None)

    def _fail(self, message: str) -> None:
        self.sentence.setText(message)
        self.checkFailed.emit(message)

    # ------------------------------------------------------------------ showing
    def show_result(self, result: dict) -> None:
        """Fill the table and the sentence from a :meth:`CrossCheck.to_dict`."""
        self.result = result
        folds = result.get("folds") or []
        self.table.setRowCount(len(folds))
        for r, f in enumerate(folds):
            cells = (str(f["repeat"] + 1), str(f["fold"] + 1), _num(f["engine_score"]),
                     _num(f["sklearn_score"]), _num(f["difference"]),
                     "yes" if f["agree"] else "NO", _num(f["stored_score"]))
            for c, text in enumerate(cells):
                item = QTableWidgetItem(text)
                if c in (2, 3, 4, 6):  # numbers line up on the right
                    item.setTextAlignment(Qt.AlignRight | Qt.AlignVCenter)
                self.table.setItem(r, c, item)
        self.sentence.setText(result["sentence"])

    def done(self, code: int) -> None:  # Close, Esc or the window's close: end the process
        self._end(kill=True)
        super().done(code)
