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

from PySide6.QtCore import Qt
from PySide6.QtWidgets import (
    QFrame,
    QGridLayout,
    QLabel,
    QSizePolicy,
    QVBoxLayout,
)

#: statements of the core shown elsewhere (the factors' sentence: with its chart)
SHOWN_ELSEWHERE = ("factors",)


class VerdictStrip(QFrame):
    """The verdict on the rules of thumb, the recommendation, the honest score, warnings."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setObjectName("verdictStrip")
        self.setSizePolicy(QSizePolicy.Preferred, QSizePolicy.Maximum)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(10, 6, 10, 6)
        lay.setSpacing(3)
        self.heading = QLabel("")
        self.heading.setObjectName("verdictHeading")
        self.heading.setWordWrap(True)
        self.heading.setSizePolicy(QSizePolicy.Ignored, QSizePolicy.Preferred)
        self.heading.hide()
        lay.addWidget(self.heading)
        self._grid = QGridLayout()
        self._grid.setContentsMargins(0, 0, 0, 0)
        self._grid.setHorizontalSpacing(10)
        self._grid.setVerticalSpacing(2)
        self._grid.setColumnStretch(1, 1)
        lay.addLayout(self._grid)
        self._rows: list[tuple[QLabel, QLabel]] = []
        #: the shown statements' labels by key (the core's keys: output, hidden,
        #: recommended, score, and each warning's code)
        self.labels: dict[str, QLabel] = {}
        self.hide()

    # ------------------------------------------------------------------ content
    def clear(self) -> None:
        """No results: the strip is hidden."""
        self._set_statements([])
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
        self.heading.setText("Provisional verdict, from the configurations finished so far"
                             if running else "")
        self.heading.setVisible(running)
        self._set_statements(statements)
        self.setVisible(bool(statements))

    def _set_statements(self, statements: list[dict]) -> None:
        for name, text in self._rows:
            self._grid.removeWidget(name)
            self._grid.removeWidget(text)
            name.deleteLater()
            text.deleteLater()
        self._rows = []
        self.labels = {}
        for i, s in enumerate(statements):
            warning = s["label"] == "Warning"
            name = QLabel(("⚠ " if warning else "") + s["label"])
            name.setObjectName("verdictWarningName" if warning else "verdictName")
            name.setAlignment(Qt.AlignLeft | Qt.AlignTop)
            text = QLabel(s["text"])
            text.setObjectName("verdictWarning" if warning else "verdictText")
            text.setAlignment(Qt.AlignLeft | Qt.AlignTop)
            text.setWordWrap(True)
            text.setTextFormat(Qt.PlainText)
            text.setTextInteractionFlags(Qt.TextSelectableByMouse)
            text.setSizePolicy(QSizePolicy.Ignored, QSizePolicy.Preferred)
            self._grid.addWidget(name, i, 0)
            self._grid.addWidget(text, i, 1)
            self._rows.append((name, text))
            self.labels[s["key"]] = text

    def text(self) -> str:
        """Everything the strip shows, as plain text (for tests and for copying)."""
        parts = [t for t in (self.heading.text(), self.toolTip()) if t]
        parts += [f"{name.text()}: {text.text()}" for name, text in self._rows]
        return "\n".join(parts)
