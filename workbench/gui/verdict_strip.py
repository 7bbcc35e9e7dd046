"""The verdict strip at the top of the results: the core's answer, in the core's words.

It shows what :func:`workbench.sweep.results.verdict_statements` says (through
:func:`workbench.gui.core_adapter.ranked_rows`, whose ``meta`` carries the
statements and :func:`~workbench.sweep.results.verdict_heading`): the two rules
of thumb (output head, hidden layers) with their words and numbers, the
recommended configuration and its reason, the winner's honest score (CV mean and
selection-corrected estimate with its interval) and every warning. The factors'
sentence is shown beside its bar chart (:mod:`workbench.gui.factors_chart`), so
the strip leaves it out. Nothing is computed or re-phrased here; every label
wraps, so nothing is clipped at any width the window allows. Export (Ctrl+E) takes
the recommended configuration by default.
"""

from __future__ import annotations

from PySide6.QtCore import QEvent, Qt
from PySide6.QtWidgets import (
    QFrame,
    QHBoxLayout,
    QLabel,
    QSizePolicy,
    QVBoxLayout,
)

from workbench.gui.widgets import WrappingLabel

#: statements of the core shown elsewhere (the factors' sentence: with its chart)
SHOWN_ELSEWHERE = ("factors",)


def _is_warning(label: QLabel) -> bool:
    return label.objectName() == "verdictWarning"


class VerdictStrip(QFrame):
    """The verdict on the rules of thumb, the recommendation, the honest score, warnings."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setObjectName("verdictStrip")
        # never shorter than its wrapped text at its present width (see _hold_height): the
        # table and the tabs below give way instead
        self.setSizePolicy(QSizePolicy.Preferred, QSizePolicy.Fixed)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(10, 6, 10, 6)
        lay.setSpacing(3)
        self.heading = WrappingLabel("")
        self.heading.setObjectName("verdictHeading")
        self.heading.hide()
        lay.addWidget(self.heading)
        # one box row per statement (box layouts follow the labels' height for width;
        # a grid would size its rows from the labels' narrowest wrapping)
        self._list = QVBoxLayout()
        self._list.setContentsMargins(0, 0, 0, 0)
        self._list.setSpacing(2)
        lay.addLayout(self._list)
        self._rows: list[tuple[QLabel, QLabel]] = []
        #: the shown statements' labels by key (the core's keys: output, hidden,
        #: recommended, score, and each warning's code)
        self.labels: dict[str, QLabel] = {}
        self.hide()

    # ------------------------------------------------------------------ content
    def clear(self) -> None:
        """No results: the strip is hidden."""
        self._shown = None
        self._set_statements([])
        self._row_keys = []
        self.heading.setText("")
        self.hide()

    def set_results(self, meta: dict) -> None:
        """Show the statements of a results document (``ranked_rows(...)["meta"]``)."""
        statements = [s for s in meta.get("statements") or []
                      if s["key"] not in SHOWN_ELSEWHERE]
        # how the configurations are judged (long): the strip's tooltip; the legend under
        # the table gives the same rule in short
        self.setToolTip(meta.get("heading") or "")
        running = meta.get("state") == "running"
        shown = (tuple((x["key"], x["label"], x["text"]) for x in statements), running)
        if shown == getattr(self, "_shown", None):
            return  # the same words: nothing to rebuild (a ranking during a sweep often is)
        self._shown = shown
        self.heading.setText("Provisional verdict, from the configurations finished so far"
                             if running else "")
        self.heading.setVisible(running)
        # the rows already built are given their new words (a sweep's next ranking often
        # changes only the numbers, or adds or drops a warning); only missing rows are
        # built and rows no longer needed are dropped: building every row anew (new labels,
        # each styled by the style sheet) cost tens of milliseconds per ranking
        self._set_statements(statements)
        self._row_keys = [(x["key"], x["label"]) for x in statements]
        self.setVisible(bool(statements))
        self._hold_height()

    def event(self, event) -> bool:
        if event.type() == QEvent.LayoutRequest:  # a label's text, font or visibility changed
            self._hold_height()
        return super().event(event)

    def resizeEvent(self, event) -> None:  # noqa: N802 - Qt override
        super().resizeEvent(event)
        if event.size().width() != event.oldSize().width():
            self._hold_height()

    def _hold_height(self) -> None:
        """Fix the strip's height to what its wrapped labels need at its present width. (A
        least height from the labels' own hints would be measured at a guessed width: rows
        spread apart when wide, text cut short or the window grown when narrow.)"""
        width = self.width()
        if width <= 0:
            return
        need = self.layout().totalHeightForWidth(width)
        if need > 0 and need != self.height():
            self.setFixedHeight(need)

    def _set_statements(self, statements: list[dict]) -> None:
        """One row (name, text) per statement: kept rows get the new words, missing rows
        are built, surplus rows dropped. A row that turns into a warning or back is built
        anew: the style sheet's box (a warning's padding) is applied when a label is first
        shown under its name, not when the name changes later."""
        while len(self._rows) > len(statements):
            self._drop_row(len(self._rows) - 1)
        names = [("⚠ " if s["label"] == "Warning" else "") + s["label"] for s in statements]
        name_width = int(max([self.fontMetrics().horizontalAdvance(n) for n in names] + [0])
                         * 1.15) + 8
        self.labels = {}
        for i, (s, title) in enumerate(zip(statements, names)):
            warning = s["label"] == "Warning"
            if i < len(self._rows) and _is_warning(self._rows[i][1]) != warning:
                self._drop_row(i)
            if i >= len(self._rows) or self._rows[i] is None:
                self._new_row(i, warning)
            name, text = self._rows[i]
            if name.text() != title:
                name.setText(title)
            if text.text() != s["text"]:
                text.setText(s["text"])
            # the names' column: as wide as the widest name, in the bold the sheet gives it
            if name.minimumWidth() != name_width or name.maximumWidth() != name_width:
                name.setFixedWidth(name_width)
            self.labels[s["key"]] = text

    def _drop_row(self, i: int) -> None:
        """Remove row ``i``'s labels; the row stays as a gap (None) unless it is the last."""
        name, text = self._rows[i]
        row = self._list.takeAt(i).layout()
        while row is not None and row.count():
            row.takeAt(0)
        for w in (name, text):
            w.hide()
            w.deleteLater()
        if i == len(self._rows) - 1:
            self._rows.pop()
        else:
            self._rows[i] = None

    def _new_row(self, i: int, warning: bool) -> None:
        """Build row ``i`` (named for the style sheet before it is first shown)."""
        name = QLabel("")
        name.setObjectName("verdictWarningName" if warning else "verdictName")
        name.setAlignment(Qt.AlignLeft | Qt.AlignTop)
        text = WrappingLabel("")
        text.setObjectName("verdictWarning" if warning else "verdictText")
        text.setAlignment(Qt.AlignLeft | Qt.AlignTop)
        text.setTextFormat(Qt.PlainText)
        text.setTextInteractionFlags(Qt.TextSelectableByMouse)
        row = QHBoxLayout()
        row.setContentsMargins(0, 0, 0, 0)
        row.setSpacing(10)
        row.addWidget(name, 0, Qt.AlignTop)
        row.addWidget(text, 1)
        if i < len(self._rows):
            self._list.insertLayout(i, row)
            self._rows[i] = (name, text)
        else:
            self._list.addLayout(row)
            self._rows.append((name, text))
        name.show()  # now, not at the next layout pass: the height is measured after
        text.show()

    def text(self) -> str:
        """Everything the strip shows, as plain text (for tests and for copying)."""
        parts = [t for t in (self.heading.text(), self.toolTip()) if t]
        parts += [f"{name.text()}: {text.text()}" for name, text in self._rows]
        return "\n".join(parts)
