"""The left-hand column: the table and its target, what to sweep, how to evaluate, where to run."""

from __future__ import annotations

import os

from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtWidgets import (
    QButtonGroup,
    QCheckBox,
    QComboBox,
    QGridLayout,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QPushButton,
    QRadioButton,
    QSpinBox,
    QVBoxLayout,
    QWidget,
)

from workbench.gui import core_adapter as core
from workbench.gui.widgets import CheckGrid, Section
from workbench.sweep.defaults import WINDOW_DEFAULTS as DEFAULTS

#: classification and regression metrics offered (scikit-learn scorer names)
METRICS = {
    "classification": ("accuracy", "balanced_accuracy", "roc_auc", "neg_log_loss"),
    "regression": ("r2", "neg_root_mean_squared_error", "neg_mean_absolute_error",
                   "neg_mean_poisson_deviance"),
}


class SetupPane(QWidget):
    """Everything the user chooses before pressing Run.

    Signals
    -------
    targetChosen(str)
        the user picked another target column.
    kindChosen(object)
        the user picked a target kind in the “Kind” box (a kind name, or None for
        the detected kind).
    planChanged()
        any choice that changes the plan's size changed.
    runRequested()
    """

    targetChosen = Signal(str)
    kindChosen = Signal(object)
    planChanged = Signal()
    runRequested = Signal()

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setObjectName("setupPane")
        lay = QVBoxLayout(self)
        lay.setContentsMargins(8, 8, 8, 8)
        lay.setSpacing(8)

        # 1 -- table and target -------------------------------------------------
        s1 = Section("1", "Table and target")
        self.file_label = QLabel("Drop a CSV, Excel or Parquet file here, or press Ctrl+O.")
        self.file_label.setWordWrap(True)
        self.shape_label = QLabel("")
        self.shape_label.setObjectName("muted")
        self.shape_label.setWordWrap(True)
        row = QHBoxLayout()
        row.addWidget(QLabel("Target"))
        self.target_combo = QComboBox()
        self.target_combo.setMinimumContentsLength(10)
        self.target_combo.setSizeAdjustPolicy(QComboBox.AdjustToMinimumContentsLengthWithIcon)
        self.target_combo.setToolTip("The column to predict")
        self.target_combo.setPlaceholderText("choose the target…")
        self.target_combo.currentTextChanged.connect(self._target_changed)
        row.addWidget(self.target_combo, 1)
        # why this target was suggested (muted), or the question when none was (a hint)
        self.target_note = QLabel("")
        self.target_note.setObjectName("muted")
        self.target_note.setWordWrap(True)
        self.target_note.hide()
        self.target_prompt = QLabel("")
        self.target_prompt.setObjectName("hint")
        self.target_prompt.setWordWrap(True)
        self.target_prompt.hide()
        self.kind_badge = QLabel("")
        self.kind_badge.setObjectName("kindBadge")
        self.kind_badge.hide()
        kind_row = QHBoxLayout()
        # short words: a long kind ("non-negative") must leave the row inside the column
        self.kind_title = QLabel("Detected")
        self.kind_title.setObjectName("muted")
        self.kind_title.hide()
        self.kind_label = QLabel("Kind")
        self.kind_label.hide()
        self.kind_combo = QComboBox()
        self.kind_combo.setSizeAdjustPolicy(QComboBox.AdjustToMinimumContentsLengthWithIcon)
        self.kind_combo.setMinimumContentsLength(5)
        self.kind_combo.setToolTip("Use another target kind than the detected one (refused when "
                                   "the target's values cannot have it)")
        self.kind_combo.hide()
        self.kind_combo.activated.connect(self._kind_activated)
        kind_row.addWidget(self.kind_title)
        kind_row.addWidget(self.kind_badge)
        kind_row.addStretch(1)
        kind_row.addWidget(self.kind_label)
        kind_row.addWidget(self.kind_combo)
        self.ambiguity_label = QLabel("")
        self.ambiguity_label.setObjectName("hint")
        self.ambiguity_label.setWordWrap(True)
        self.ambiguity_label.hide()
        self.evidence_label = QLabel("")
        self.evidence_label.setObjectName("muted")
        self.evidence_label.setWordWrap(True)
        self.advice_label = QLabel("")
        self.advice_label.setWordWrap(True)
        self.advice_label.setTextFormat(Qt.RichText)
        for w in (self.file_label, self.shape_label):
            s1.body.addWidget(w)
        s1.body.addLayout(row)
        s1.body.addWidget(self.target_prompt)
        s1.body.addWidget(self.target_note)
        s1.body.addLayout(kind_row)
        s1.body.addWidget(self.ambiguity_label)
        s1.body.addWidget(self.evidence_label)
        s1.body.addWidget(self.advice_label)
        lay.addWidget(s1)

        # 2 -- activations ------------------------------------------------------
        s2 = Section("2", "Activations to sweep")
        t = QLabel("Hidden layers")
        t.setObjectName("muted")
        s2.body.addWidget(t)
        self.hidden_grid = CheckGrid(columns=3)
        # the advice's hidden activations (the same for every kind): what `open --run` runs
        self.hidden_grid.set_items(core.hidden_tooltips(), checked=core.default_hidden())
        self.hidden_grid.changed.connect(self.planChanged)
        s2.body.addWidget(self.hidden_grid)
        t = QLabel("Output heads")
        t.setObjectName("muted")
        s2.body.addWidget(t)
        self.head_grid = CheckGrid(columns=3)
        self.head_grid.changed.connect(self._heads_changed)
        s2.body.addWidget(self.head_grid)
        self.head_note = QLabel("Pick a target to see which heads can serve it.")
        self.head_note.setObjectName("muted")
        self.head_note.setWordWrap(True)
        s2.body.addWidget(self.head_note)
        lay.addWidget(s2)

        # 3 -- training and evaluation ------------------------------------------
        s3 = Section("3", "Training and evaluation")
        grid = QGridLayout()
        grid.setHorizontalSpacing(6)
        grid.setVerticalSpacing(4)
        self.layers_edit = QLineEdit("; ".join(DEFAULTS["layers"]))
        self.layers_edit.setToolTip("Hidden-layer widths; separate shapes with ';', "
                                    "layers within a shape with ',' (e.g. 64; 64,32)")
        self.lr_edit = QLineEdit("0.001")
        self.lr_edit.setToolTip("Adam's initial learning rates, separated by ';' or spaces")
        self.alpha_edit = QLineEdit(" ".join(f"{v:g}" for v in DEFAULTS["alphas"]))
        self.alpha_edit.setToolTip("L2 penalties (alpha), separated by ';' or spaces")
        self.folds_spin = self._spin(2, 20, DEFAULTS["folds"], "K folds (stratified for classification)")
        self.repeats_spin = self._spin(1, 20, DEFAULTS["repeats"], "Repeats, each with its own fold shuffle")
        self.epochs_spin = self._spin(1, 5000, DEFAULTS["epochs"], "Maximum epochs per trial")
        self.early_check = QCheckBox("stop early")
        self.early_check.setToolTip("Hold out 10 % of each training fold and stop when its "
                                    "score stalls; records a validation curve per epoch")
        from workbench.sweep.racing import rule_text as race_rule

        # a short label: the grid's width is the set-up column's (the tooltip says it all)
        self.race_check = QCheckBox("racing")
        self.race_check.setToolTip(
            "Racing: configurations are " + race_rule() + ". Their remaining trials are not "
            "run; their scores so far are kept, marked partial. Saves time on large grids; "
            "among configurations tied within noise it may keep another of the tied ones "
            "than the full sweep would rank first. Off: every trial runs.")
        self.race_check.setChecked(bool(DEFAULTS.get("race", False)))
        self.race_check.toggled.connect(self.planChanged)
        self.metric_combo = QComboBox()
        self.metric_combo.setToolTip("scikit-learn scorer name (greater is better). Until you "
                                     "pick one, it follows the target's kind and the heads "
                                     "ticked (the Poisson deviance only when every head "
                                     "ticked predicts above 0)")
        # True while the metric is the default for the heads ticked (it then follows them);
        # a metric the user picks stays, and a plan it cannot serve disables Run with why
        self._metric_auto = True
        self.metric_combo.activated.connect(self._metric_picked)
        self.metric_combo.currentTextChanged.connect(self.planChanged)
        self.early_check.toggled.connect(self.planChanged)

        def lab(text):
            w = QLabel(text)
            w.setAlignment(Qt.AlignRight | Qt.AlignVCenter)
            return w

        grid.addWidget(lab("Layers"), 0, 0)
        grid.addWidget(self.layers_edit, 0, 1, 1, 3)
        grid.addWidget(lab("Learning rates"), 1, 0)
        grid.addWidget(self.lr_edit, 1, 1)
        grid.addWidget(lab("L2"), 1, 2)
        grid.addWidget(self.alpha_edit, 1, 3)
        grid.addWidget(lab("Folds"), 2, 0)
        grid.addWidget(self.folds_spin, 2, 1)
        grid.addWidget(lab("Repeats"), 2, 2)
        grid.addWidget(self.repeats_spin, 2, 3)
        grid.addWidget(lab("Epochs"), 3, 0)
        grid.addWidget(self.epochs_spin, 3, 1)
        grid.addWidget(self.early_check, 3, 2, 1, 2)
        grid.addWidget(lab("Metric"), 4, 0)
        grid.addWidget(self.metric_combo, 4, 1, 1, 3)
        grid.addWidget(self.race_check, 5, 1, 1, 3)
        grid.setColumnStretch(1, 1)
        grid.setColumnStretch(3, 1)
        s3.body.addLayout(grid)
        for w in (self.layers_edit, self.lr_edit, self.alpha_edit):
            w.textChanged.connect(self.planChanged)
        for w in (self.folds_spin, self.repeats_spin, self.epochs_spin):
            w.valueChanged.connect(self.planChanged)
        lay.addWidget(s3)

        # 4 -- where to run -----------------------------------------------------
        s4 = Section("4", "Where to run")
        self.local_radio = QRadioButton("This computer")
        self.cluster_radio = QRadioButton("Dask scheduler")
        grp = QButtonGroup(self)
        grp.addButton(self.local_radio)
        grp.addButton(self.cluster_radio)
        self.local_radio.setChecked(True)
        self.jobs_spin = self._spin(1, max(1, os.cpu_count() or 1), max(1, os.cpu_count() or 1),
                                    "Worker processes on this computer")
        self.cluster_edit = QLineEdit()
        self.cluster_edit.setPlaceholderText("tcp://host:8786")
        self.cluster_edit.setEnabled(False)
        self.cluster_radio.toggled.connect(self.cluster_edit.setEnabled)
        self.cluster_radio.toggled.connect(lambda on: self.jobs_spin.setEnabled(not on))
        r1 = QHBoxLayout()
        r1.addWidget(self.local_radio)
        r1.addWidget(self.jobs_spin)
        r1.addWidget(QLabel("workers"))
        r1.addStretch(1)
        r2 = QHBoxLayout()
        r2.addWidget(self.cluster_radio)
        r2.addWidget(self.cluster_edit, 1)
        s4.body.addLayout(r1)
        s4.body.addLayout(r2)
        self.jobs_spin.valueChanged.connect(self.planChanged)
        self.estimate_label = QLabel("")
        self.estimate_label.setObjectName("estimate")
        self.estimate_label.setWordWrap(True)
        # room for three lines always, so a longer estimate never squeezes the footer
        self.estimate_label.setMinimumHeight(3 * self.estimate_label.fontMetrics().lineSpacing() + 4)
        self.run_button = QPushButton("Run sweep")
        self.run_button.setObjectName("primary")
        self.run_button.clicked.connect(self.runRequested)
        self.run_button.setToolTip("Run the sweep (Ctrl+R)")
        lay.addWidget(s4)
        # the estimate and the Run button live in a footer below the scrolling cards
        self.footer = QWidget()
        self.footer.setObjectName("setupFooter")
        fl = QVBoxLayout(self.footer)
        fl.setContentsMargins(8, 6, 8, 8)
        fl.setSpacing(6)
        fl.addWidget(self.estimate_label)
        fl.addWidget(self.run_button)
        lay.addStretch(1)

        self._summary: core.TargetSummary | None = None
        self.cards = (s1, s2, s3, s4)

    def set_locked(self, locked: bool) -> None:
        """Read-only while a sweep runs (the plan it runs stays on show), editable after."""
        for card in self.cards:
            card.setEnabled(not locked)

    def locked(self) -> bool:
        return not self.cards[0].isEnabled()

    def _heads_changed(self) -> None:
        """Heads ticked or unticked: the metric follows them unless the user picked one."""
        if self._metric_auto and self._summary is not None:
            self._pick_default_metric()
        self.planChanged.emit()

    def _metric_picked(self, _index: int) -> None:
        self._metric_auto = self._summary is None or \
            self.metric_combo.currentText() == self._default_metric()

    def _default_metric(self) -> str | None:
        try:
            return core.default_metric_for(self._summary, self.head_grid.checked())
        except Exception:  # an unknown kind: no default
            return None

    def _pick_default_metric(self) -> None:
        metric = self._default_metric()
        if metric is not None and metric != self.metric_combo.currentText():
            self.metric_combo.blockSignals(True)
            self.metric_combo.setCurrentText(metric)
            self.metric_combo.blockSignals(False)

    def resizeEvent(self, event) -> None:
        super().resizeEvent(event)
        self._refit()

    def _refit(self) -> None:
        """Word-wrapped labels need their height for *this* width inside the scroll area."""
        h = self.layout().totalHeightForWidth(self.width())
        if h > 0 and h != self.minimumHeight():
            self.setMinimumHeight(h)

    def _texts_changed(self) -> None:
        QTimer.singleShot(0, self._refit)

    @staticmethod
    def _spin(lo, hi, value, tip) -> QSpinBox:
        s = QSpinBox()
        s.setRange(lo, hi)
        s.setValue(value)
        s.setToolTip(tip)
        s.setMinimumWidth(64)
        return s

    # ------------------------------------------------------------------ table
    def set_table(self, table: core.LoadedTable | None, target: str | None = None) -> None:
        """Show a loaded table and preselect its target.

        The target is ``target`` when it names a column, else the profile's suggested
        target; a ``target`` that names no column, or a table with no suggestion,
        leaves the target box empty (the window then asks, :meth:`ask_for_target`).
        """
        self.target_combo.blockSignals(True)
        self.target_combo.clear()
        self.set_attention(False)
        self.target_note.hide()
        if table is None:
            self.file_label.setText("Drop a CSV, Excel or Parquet file here, or press Ctrl+O.")
            self.shape_label.setText("")
        else:
            rep = table.report
            self.file_label.setText(f"<b>{_escape(table.name)}</b>")
            self.file_label.setToolTip(table.path)
            extra = []
            if getattr(rep, "rows_dropped", 0):
                extra.append(f"{rep.rows_dropped} empty rows dropped")
            extra += list(getattr(rep, "warnings", []) or [])
            self.shape_label.setText(
                f"{rep.rows:,} rows × {rep.columns} columns · {rep.format}"
                + ("" if not extra else " · " + "; ".join(extra)))
            self._texts_changed()
            names = [c["name"] for c in table.columns]
            self.target_combo.addItems(names)
            pick = target if target is not None else table.profile.suggested_target
            if pick in names:
                self.target_combo.setCurrentText(pick)
                if target is None:
                    self.target_note.setText(core.suggestion_text(table))
                    self.target_note.show()
            else:
                self.target_combo.setCurrentIndex(-1)
        self.target_combo.blockSignals(False)

    def ask_for_target(self, text: str) -> None:
        """No target is chosen: highlight the target box and say why in one line."""
        self.target_prompt.setText(text)
        self.target_prompt.show()
        self.target_note.hide()
        self.set_attention(True)
        self._texts_changed()

    def set_attention(self, on: bool) -> None:
        """Highlight the target box (the style sheet's ``attention`` property)."""
        if not on:
            self.target_prompt.hide()
        if bool(self.target_combo.property("attention")) != on:
            self.target_combo.setProperty("attention", on)
            self.target_combo.style().unpolish(self.target_combo)
            self.target_combo.style().polish(self.target_combo)

    def _target_changed(self, name: str) -> None:
        if name:
            self.set_attention(False)
            self.target_note.hide()
            self.targetChosen.emit(name)

    def target(self) -> str:
        return self.target_combo.currentText()

    def kind(self) -> str | None:
        """The kind set in the “Kind” box, or None for the detected kind."""
        return self.kind_combo.currentData()

    def _kind_activated(self, _index: int) -> None:
        self.kindChosen.emit(self.kind())

    def _show_kind(self, info) -> None:
        """The detected kind in the badge, the kind in use in the “Kind” box."""
        self.kind_combo.blockSignals(True)
        self.kind_combo.clear()
        self.kind_combo.addItem("detected", None)
        for k in core.kind_choices():
            self.kind_combo.addItem(k.replace("_", "-"), k)
        if info.kind_set_by_user:
            self.kind_combo.setCurrentIndex(self.kind_combo.findData(info.kind))
        self.kind_combo.blockSignals(False)

    def set_target_summary(self, summary: core.TargetSummary | None) -> None:
        self._summary = summary
        if summary is None:
            for w in (self.kind_badge, self.kind_title, self.kind_label, self.kind_combo,
                      self.ambiguity_label):
                w.hide()
            self.evidence_label.setText("")
            self.advice_label.setText("")
            self.head_grid.set_items([])
            self.head_note.setText("Pick a target to see which heads can serve it.")
            self._set_metrics("classification", None)
            return
        info, adv = summary.target, summary.advice
        self.set_attention(False)
        self.kind_badge.setText(info.detected_kind.replace("_", "-"))
        self.kind_badge.setToolTip(f"{info.task}: detected target kind" if not
                                   info.kind_set_by_user else
                                   f"detected kind; the sweep uses {info.kind} ({info.task}), "
                                   "set in the “Kind” box")
        self._show_kind(info)
        for w in (self.kind_badge, self.kind_title, self.kind_label, self.kind_combo):
            w.show()
        self.ambiguity_label.setText(core.ambiguity_text(info))
        self.ambiguity_label.setVisible(bool(info.ambiguous))
        self.evidence_label.setText(core.evidence_text(info))
        self.advice_label.setText(
            f"Advised head: <b>{_escape(adv.output_head)}</b> with {_escape(adv.loss.replace('_', ' '))}"
            f" <i>(common practice)</i><br><span>{_escape(adv.reason)}</span>")
        items, checked = [], core.default_heads(summary)
        refused = []
        for name, chk in summary.heads:
            tip = core.head_tooltip(info.task, name)
            if not chk.allowed:
                tip = f"Not available: {chk.reason}\n\n{tip}"
                refused.append(name)
            elif chk.warning:
                tip = f"Allowed, but: {chk.reason}\n\n{tip}"
            items.append((name, tip))
        self.head_grid.set_items(items, checked=checked)
        for name in refused:
            self.head_grid.boxes[name].setEnabled(False)
            self.head_grid.boxes[name].setChecked(False)
        note = "Hover a head for its formula, its loss and the guard's verdict."
        if refused:
            note = f"Refused for this target: {', '.join(refused)} (hover for why). " + note
        self.head_note.setText(note)
        self._set_metrics(info.task, info.kind)
        self._texts_changed()

    def _set_metrics(self, task: str, kind: str | None) -> None:
        """Offer the task's metrics and pick the default for the kind and heads ticked."""
        from workbench.sweep.plan import default_metric

        self.metric_combo.blockSignals(True)
        self.metric_combo.clear()
        self.metric_combo.addItems(list(METRICS[task]))
        if kind is not None:
            try:
                self.metric_combo.setCurrentText(default_metric(kind, self.head_grid.checked()))
            except Exception:  # an unknown kind keeps the first metric
                pass
        self.metric_combo.blockSignals(False)
        self._metric_auto = True

    # ------------------------------------------------------------------ choices
    def choices(self) -> dict:
        """The user's choices as plain data (parsed by the core's plan)."""
        return {
            "target": self.target(),
            "hidden": self.hidden_grid.checked(),
            "heads": self.head_grid.checked(),
            "layers": [s.strip() for s in self.layers_edit.text().split(";") if s.strip()],
            "learning_rates": _numbers(self.lr_edit.text()),
            "alphas": _numbers(self.alpha_edit.text()),
            "folds": self.folds_spin.value(),
            "repeats": self.repeats_spin.value(),
            "epochs": self.epochs_spin.value(),
            "early_stopping": self.early_check.isChecked(),
            "race": self.race_check.isChecked(),
            "metric": self.metric_combo.currentText() or None,
            "jobs": self.jobs_spin.value(),
            "cluster": self.cluster_edit.text().strip() if self.cluster_radio.isChecked() else None,
        }

    def apply_plan(self, plan: dict) -> None:
        """Show a stored plan's choices (the sweep's hidden activations, heads, grid, CV)."""
        self.hidden_grid.set_checked(plan.get("hidden") or [])
        self.head_grid.set_checked(plan.get("heads") or [])
        self.layers_edit.setText("; ".join(",".join(str(w) for w in shape)
                                           for shape in plan.get("layers") or [[32]]))
        if plan.get("tune_learning_rate"):
            self.lr_edit.setText(core.DEFAULT_LEARNING_RATES)
        else:
            self.lr_edit.setText(" ".join(f"{v:g}" for v in plan.get("learning_rates") or [0.001]))
        self.alpha_edit.setText(" ".join(f"{v:g}" for v in plan.get("alphas") or [0.0001]))
        self.folds_spin.setValue(int(plan.get("folds", 5)))
        self.repeats_spin.setValue(int(plan.get("repeats", 2)))
        self.epochs_spin.setValue(int(plan.get("epochs", 100)))
        self.early_check.setChecked(bool(plan.get("early_stopping")))
        self.race_check.setChecked(bool(plan.get("race")))
        if plan.get("metric"):
            self.metric_combo.setCurrentText(plan["metric"])
            # the stored metric follows later head changes only if it was the default
            self._metric_auto = self.metric_combo.currentText() == self._default_metric()

    def set_estimate(self, text: str, ok: bool) -> None:
        self.estimate_label.setText(text)
        self.run_button.setEnabled(ok)


def _numbers(text: str) -> list:
    out = []
    for part in text.replace(",", " ").replace(";", " ").split():
        try:
            out.append(float(part))
        except ValueError:
            out.append(part)  # the plan reports it in one line
    return out


def _escape(s) -> str:
    import html

    return html.escape(str(s))
