""""What matters on this table": the factors' shares of the spread as a small bar chart.

Draws the results document's ``factors`` (``[{factor, share}]``, largest first),
``factors_rest`` (the interactions, or the rest on an unbalanced grid) and
``factors_noise`` (the share the folds' own noise alone would give, for
scale), with the core's sentence (``factors_sentence``) above the bars. The
shares are the core's (:mod:`workbench.sweep.factors`); the factor names are the
core's words (``meta["factor_words"]``). Nothing is computed here but bar lengths.
"""

from __future__ import annotations

import math

from PySide6.QtCore import QRectF, QSize, Qt
from PySide6.QtGui import QColor, QFontMetrics, QPainter, QPen
from PySide6.QtWidgets import QLabel, QSizePolicy, QVBoxLayout, QWidget

from workbench.gui import theme as th

#: height of one bar row, pixels
ROW = 22


class _Bars(QWidget):
    """The bars: one row per ``(label, share, style)``; style "factor", "rest" or "noise"."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.rows: list[tuple[str, float, str]] = []
        self.theme = th.LIGHT
        self.setSizePolicy(QSizePolicy.Expanding, QSizePolicy.Fixed)

    def set_rows(self, rows) -> None:
        if list(rows) == self.rows:
            return  # unchanged (a ranking during a sweep often is): no relayout, no repaint
        self.rows = list(rows)
        self.setFixedHeight(max(1, len(self.rows)) * ROW + 4)
        self.updateGeometry()
        self.update()

    def sizeHint(self) -> QSize:
        return QSize(360, max(1, len(self.rows)) * ROW + 4)

    def label_width(self) -> int:
        fm = QFontMetrics(self.font())
        return max([fm.horizontalAdvance(r[0]) for r in self.rows] + [40]) + 10

    def paintEvent(self, event) -> None:  # noqa: N802 - Qt override
        if not self.rows:
            return
        p = QPainter(self)
        p.setRenderHint(QPainter.Antialiasing)
        fm = QFontMetrics(self.font())
        lw = self.label_width()
        pct_w = fm.horizontalAdvance("100%") + 10
        span = max(20, self.width() - lw - pct_w - 8)
        text = QColor(self.theme.text)
        muted = QColor(self.theme.muted)
        for i, (label, share, style) in enumerate(self.rows):
            y = i * ROW + 2
            p.setPen(muted if style != "factor" else text)
            p.drawText(QRectF(0, y, lw - 8, ROW), Qt.AlignRight | Qt.AlignVCenter, label)
            share = 0.0 if share is None or not math.isfinite(share) else max(0.0, share)
            w = span * min(1.0, share)
            rect = QRectF(lw, y + 4, max(w, 1.0), ROW - 8)
            if style == "factor":
                p.setPen(Qt.NoPen)
                p.setBrush(QColor(self.theme.accent))
            elif style == "rest":
                p.setPen(Qt.NoPen)
                p.setBrush(QColor(self.theme.muted))
            else:  # the noise: an outline, it is a yardstick, not a factor
                pen = QPen(QColor(self.theme.muted))
                pen.setStyle(Qt.DashLine)
                pen.setWidthF(1.2)
                p.setPen(pen)
                p.setBrush(Qt.NoBrush)
            p.drawRect(rect)
            p.setPen(muted if style != "factor" else text)
            p.drawText(QRectF(lw + w + 6, y, pct_w, ROW), Qt.AlignLeft | Qt.AlignVCenter,
                       f"{100 * share:.0f}%")
        p.end()


class FactorsChart(QWidget):
    """The sentence and the bars of what matters on this table."""

    def __init__(self, parent=None):
        super().__init__(parent)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(8, 6, 8, 6)
        lay.setSpacing(6)
        self.sentence = QLabel("")
        self.sentence.setWordWrap(True)
        self.sentence.setTextFormat(Qt.PlainText)
        self.sentence.setTextInteractionFlags(Qt.TextSelectableByMouse)
        lay.addWidget(self.sentence)
        self.bars = _Bars()
        lay.addWidget(self.bars)
        self.note = QLabel("")
        self.note.setObjectName("muted")
        self.note.setWordWrap(True)
        lay.addWidget(self.note)
        lay.addStretch(1)
        self.set_results({})

    def set_theme(self, theme: th.Theme) -> None:
        self.bars.theme = theme
        self.bars.update()

    def set_results(self, meta: dict) -> None:
        """Show a results document's factors (``ranked_rows(...)["meta"]``)."""
        words = meta.get("factor_words") or {}
        factors = meta.get("factors") or []
        rows = [(_short(words.get(f["factor"], f["factor"])), f["share"], "factor")
                for f in factors]
        rest = meta.get("factors_rest") or {}
        if rows and rest.get("share") is not None:
            rows.append((str(rest.get("label") or "rest"), rest["share"], "rest"))
        noise = meta.get("factors_noise") or {}
        if rows and noise.get("share") is not None:
            rows.append(("folds' own noise", noise["share"], "noise"))
        self.bars.set_rows(rows)
        self.bars.setVisible(bool(rows))
        # texts set only when they change: each setting re-lays out the page
        _set_text(self.sentence, meta.get("factors_sentence") or (
            "" if meta else "Run or reopen a sweep to see which of its settings matter."))
        if rows:
            _set_text(self.note,
                      "Share of the spread between the configurations' mean scores explained by "
                      "each swept factor (main effects of the grid, type-II sums of squares). The "
                      "dashed bar, for scale, is the share the folds' own noise alone would give.")
        elif meta:
            _set_text(self.note, "No factor was swept with more than one value.")
        else:
            _set_text(self.note, "")


def _set_text(label: QLabel, text: str) -> None:
    if label.text() != text:
        label.setText(text)


def _short(words: str) -> str:
    """"the hidden activation" -> "hidden activation" (a bar's label)."""
    return words[4:] if words.startswith("the ") else words
