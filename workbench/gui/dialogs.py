"""The export dialog (lists the export registry) and the history of stored sweeps.

The export dialog offers the configurations the window passes, the default first:
the window passes the verdict's recommended configuration first (as ``workbench
export`` takes it by default), then the selected row and the best when they differ.
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import (
    QAbstractItemView,
    QCheckBox,
    QComboBox,
    QDialog,
    QDialogButtonBox,
    QFileDialog,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QLineEdit,
    QPushButton,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
)

from workbench.gui import core_adapter as core
from workbench.gui.tasks import run_task


class ExportDialog(QDialog):
    """Choose the configuration, the formats and the folder of an export.

    Parameters
    ----------
    parent : QWidget
    row : dict
        The configuration exported by default (the window passes the recommended one).
    last_folder : str
        Where the folder box starts.
    choices : list of (str, dict), optional
        The configurations offered, ``(label, row)``, the default first; without it
        only ``row`` is offered.
    """

    def __init__(self, parent, row: dict, last_folder: str = "", choices=None):
        super().__init__(parent)
        self.setWindowTitle("Export configuration")
        self.setMinimumWidth(560)
        self._choices = list(choices) if choices else [(self._describe(row), row)]
        self._base = Path(last_folder or Path.home())
        lay = QVBoxLayout(self)
        lay.addWidget(QLabel("Configuration"))
        self.config_combo = QComboBox()
        for label, r in self._choices:
            self.config_combo.addItem(label, r["key"] if "key" in r else None)
            self.config_combo.setItemData(self.config_combo.count() - 1, label,
                                          Qt.ToolTipRole)
        self.config_combo.setSizeAdjustPolicy(QComboBox.AdjustToMinimumContentsLengthWithIcon)
        self.config_combo.setMinimumContentsLength(40)
        lay.addWidget(self.config_combo)
        self.what = QLabel("")
        self.what.setWordWrap(True)
        lay.addWidget(self.what)
        lay.addWidget(QLabel("Formats"))
        self.boxes: dict[str, QCheckBox] = {}
        for name, label, tip, default in core.export_formats():
            box = QCheckBox(label)
            box.setToolTip(tip)
            box.setChecked(default)
            self.boxes[name] = box
            lay.addWidget(box)
        row_l = QHBoxLayout()
        self.folder_edit = QLineEdit()
        browse = QPushButton("Choose…")
        browse.clicked.connect(self._browse)
        row_l.addWidget(QLabel("Folder"))
        row_l.addWidget(self.folder_edit, 1)
        row_l.addWidget(browse)
        lay.addLayout(row_l)
        note = QLabel("The folder is written under a temporary name and renamed when complete; "
                      "an existing export is never half-overwritten.")
        note.setObjectName("muted")
        note.setWordWrap(True)
        lay.addWidget(note)
        self.open_box = QCheckBox("Open the folder when done")
        self.open_box.setChecked(True)
        lay.addWidget(self.open_box)
        bb = QDialogButtonBox(QDialogButtonBox.Ok | QDialogButtonBox.Cancel)
        bb.button(QDialogButtonBox.Ok).setText("Export")
        bb.accepted.connect(self.accept)
        bb.rejected.connect(self.reject)
        lay.addWidget(bb)
        self._folder_touched = False
        self.folder_edit.textEdited.connect(lambda *_: setattr(self, "_folder_touched", True))
        self.config_combo.currentIndexChanged.connect(self._config_changed)
        self._config_changed(0)

    @staticmethod
    def _describe(row: dict) -> str:
        return (f"Rank {row.get('rank') or '–'}: {row['hidden']} hidden, {row['head']} head, "
                f"layers {row['layers']}")

    def _config_changed(self, _index: int) -> None:
        row = self.row()
        self.what.setText(f"Rank {row.get('rank') or '–'}: <b>{row['hidden']}</b> hidden, "
                          f"<b>{row['head']}</b> head, layers {row['layers']}, "
                          f"learning rate {row['learning_rate']:g}, L2 {row['alpha']:g}")
        if not self._folder_touched:
            self.folder_edit.setText(str(self._base / f"export-{row['hidden']}-{row['head']}"))

    def row(self) -> dict:
        """The configuration chosen (the default: the first offered)."""
        return self._choices[max(0, self.config_combo.currentIndex())][1]

    def _browse(self):
        d = QFileDialog.getExistingDirectory(self, "Export into", self.folder_edit.text())
        if d:
            self.folder_edit.setText(d)

    def folder(self) -> str:
        return self.folder_edit.text().strip()

    def formats(self) -> list[str]:
        return [n for n, b in self.boxes.items() if b.isChecked()]

    def open_when_done(self) -> bool:
        return self.open_box.isChecked()


class HistoryDialog(QDialog):
    """The sweeps in the store; reopen one, or resume an interrupted one."""

    reopenRequested = Signal(str)
    resumeRequested = Signal(str)
    COLUMNS = ("Started", "State", "Table", "Target", "Metric", "Trials stored", "Sweep id")

    def __init__(self, parent, store_path: str | None):
        super().__init__(parent)
        self.setWindowTitle("Stored sweeps")
        self.resize(820, 380)
        lay = QVBoxLayout(self)
        self.table = QTableWidget(0, len(self.COLUMNS))
        self.table.setHorizontalHeaderLabels(list(self.COLUMNS))
        self.table.setSelectionBehavior(QAbstractItemView.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SingleSelection)
        self.table.setEditTriggers(QAbstractItemView.NoEditTriggers)
        self.table.verticalHeader().hide()
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeToContents)
        self.table.horizontalHeader().setStretchLastSection(True)
        self.table.itemSelectionChanged.connect(self._update_buttons)
        self.table.doubleClicked.connect(lambda *_: self._reopen())
        lay.addWidget(self.table, 1)
        self.note = QLabel("Loading…")
        self.note.setObjectName("muted")
        lay.addWidget(self.note)
        bb = QDialogButtonBox(QDialogButtonBox.Close)
        self.reopen_btn = bb.addButton("Show results", QDialogButtonBox.ActionRole)
        self.resume_btn = bb.addButton("Resume", QDialogButtonBox.ActionRole)
        self.reopen_btn.clicked.connect(self._reopen)
        self.resume_btn.clicked.connect(self._resume)
        bb.rejected.connect(self.reject)
        lay.addWidget(bb)
        self._rows: list[dict] = []
        self._update_buttons()
        run_task(lambda: core.history(store_path), self.set_rows, self._failed)

    def _failed(self, msg: str) -> None:
        self.note.setText(msg)

    def set_rows(self, rows: list[dict]) -> None:
        self._rows = rows
        self.table.setRowCount(len(rows))
        for i, r in enumerate(rows):
            vals = (str(r.get("created", ""))[:19].replace("T", " "), r["state"],
                    Path(str(r["table"])).name, r["target"], r["metric"],
                    f"{r['n_stored']} / {r['n_trials']}", r["sweep_id"])
            for j, v in enumerate(vals):
                item = QTableWidgetItem(str(v))
                if j == 2:
                    item.setToolTip(str(r["table"]))
                if j == 1 and r["state"] == "interrupted":
                    item.setToolTip("Stopped before the end; Resume runs only the missing trials")
                self.table.setItem(i, j, item)
        self.note.setText((f"{len(rows)} sweep{'s' if len(rows) != 1 else ''} stored; "
                           "double-click one to show its results.") if rows else
                          "No sweeps stored yet: run one from the main window.")
        if rows:
            self.table.selectRow(0)
        self._update_buttons()

    def selected(self) -> dict | None:
        rows = self.table.selectionModel().selectedRows()
        return self._rows[rows[0].row()] if rows else None

    def _update_buttons(self) -> None:
        r = self.selected()
        self.reopen_btn.setEnabled(r is not None)
        self.resume_btn.setEnabled(r is not None and r["state"] == "interrupted")

    def _reopen(self) -> None:
        r = self.selected()
        if r:
            self.reopenRequested.emit(r["sweep_id"])
            self.accept()

    def _resume(self) -> None:
        r = self.selected()
        if r and r["state"] == "interrupted":
            self.reopenRequested.emit(r["sweep_id"])
            self.resumeRequested.emit(r["sweep_id"])
            self.accept()
