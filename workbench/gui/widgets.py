"""Small building blocks of the window: sections, the message banner, flow of check boxes."""

from __future__ import annotations

from PySide6.QtCore import QSize, Qt, Signal
from PySide6.QtGui import QPainter
from PySide6.QtWidgets import (
    QCheckBox,
    QFrame,
    QGridLayout,
    QHBoxLayout,
    QLabel,
    QSizePolicy,
    QToolButton,
    QVBoxLayout,
    QWidget,
)


class Section(QFrame):
    """A rounded card with a step number and a title."""

    def __init__(self, number: str, title: str, parent=None):
        super().__init__(parent)
        self.setObjectName("section")
        outer = QVBoxLayout(self)
        outer.setContentsMargins(10, 8, 10, 10)
        outer.setSpacing(6)
        head = QHBoxLayout()
        head.setSpacing(8)
        num = QLabel(number)
        num.setObjectName("stepNumber")
        ttl = QLabel(title)
        ttl.setObjectName("sectionTitle")
        head.addWidget(num)
        head.addWidget(ttl, 1)
        outer.addLayout(head)
        self.body = QVBoxLayout()
        self.body.setSpacing(6)
        outer.addLayout(self.body)


class Banner(QFrame):
    """A dismissible one-line message shown above the work area."""

    dismissed = Signal()

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setObjectName("banner")
        lay = QHBoxLayout(self)
        lay.setContentsMargins(10, 6, 6, 6)
        self.icon = QLabel()
        self.icon.setFixedSize(18, 18)
        self.label = QLabel("")
        self.label.setWordWrap(True)
        self.label.setTextInteractionFlags(Qt.TextSelectableByMouse)
        self.close_btn = QToolButton()
        self.close_btn.setAutoRaise(True)
        self.close_btn.setToolTip("Dismiss")
        self.close_btn.clicked.connect(self.hide_message)
        lay.addWidget(self.icon, 0, Qt.AlignTop)
        lay.addWidget(self.label, 1)
        lay.addWidget(self.close_btn, 0, Qt.AlignTop)
        self.hide()

    def show_message(self, text: str) -> None:
        self.label.setText(text)
        self.show()

    def hide_message(self) -> None:
        self.label.setText("")
        self.hide()
        self.dismissed.emit()


class CheckGrid(QWidget):
    """Check boxes laid out in a fixed number of columns; ``changed`` on any toggle."""

    changed = Signal()

    def __init__(self, columns: int = 2, parent=None):
        super().__init__(parent)
        self._grid = QGridLayout(self)
        self._grid.setContentsMargins(0, 0, 0, 0)
        self._grid.setHorizontalSpacing(12)
        self._grid.setVerticalSpacing(2)
        self._cols = columns
        self.boxes: dict[str, QCheckBox] = {}

    def set_items(self, items: list[tuple[str, str]], checked=()) -> None:
        for box in self.boxes.values():
            self._grid.removeWidget(box)
            box.deleteLater()
        self.boxes = {}
        for i, (name, tip) in enumerate(items):
            box = QCheckBox(name)
            box.setToolTip(tip)
            box.setChecked(name in checked)
            box.toggled.connect(self.changed)
            self._grid.addWidget(box, i // self._cols, i % self._cols)
            self.boxes[name] = box
        self.changed.emit()

    def checked(self) -> list[str]:
        # a box disabled on its own (a refused head) is never in the plan; one greyed only
        # because the set-up column is locked during a sweep still is
        return [n for n, b in self.boxes.items() if b.isChecked() and b.isEnabledTo(self)]

    def set_checked(self, names) -> None:
        names = set(names)
        for n, b in self.boxes.items():
            b.setChecked(n in names and b.isEnabledTo(self))


class ElidedLabel(QLabel):
    """A one-line label that shortens its text with "…" when narrow (whole text as tooltip).

    For lines that must share a row with other controls (the progress line beside the
    tabs); never use it for text the user must read whole.

    It keeps its text itself and paints it: QLabel's own setText asks the layouts above
    to place everything again, and beside the tabs that repainted the whole results page
    at every progress tick. The width it asks for follows the text when the text grows,
    and when it shrinks by more than :data:`STEP` pixels; only then are the layouts asked.
    """

    #: pixels a text may shrink by before the label asks for less room
    STEP = 120

    def __init__(self, text: str = "", parent=None):
        super().__init__("X", parent)  # QLabel's own text only sizes one line
        self._text = ""
        self._hint_text = ""  # the text whose width was last announced to the layouts
        self.setText(text)

    def text(self) -> str:  # noqa: D102 - Qt override
        return self._text

    def setText(self, text: str) -> None:  # noqa: N802 - Qt override
        if text == self._text:
            return
        self._text = text
        self.setToolTip(text)
        fm = self.fontMetrics()
        width, announced = fm.horizontalAdvance(text), fm.horizontalAdvance(self._hint_text)
        if width > announced or width < announced - self.STEP:
            self._hint_text = text
            self.updateGeometry()
        self.update()

    def sizeHint(self) -> QSize:  # noqa: N802 - Qt override
        fm = self.fontMetrics()
        return QSize(fm.horizontalAdvance(self._hint_text) + 8, super().sizeHint().height())

    def minimumSizeHint(self) -> QSize:  # noqa: N802 - Qt override
        return QSize(40, super().minimumSizeHint().height())

    def paintEvent(self, event) -> None:  # noqa: N802 - Qt override
        p = QPainter(self)
        rect = self.contentsRect()
        p.setPen(self.palette().color(self.foregroundRole()))
        p.drawText(rect, int(Qt.AlignLeft | Qt.AlignVCenter),
                   self.fontMetrics().elidedText(self.text(), Qt.ElideRight, rect.width()))
        p.end()



class WrappingLabel(QLabel):
    """A word-wrapped label that never widens its layout and asks for the height its text
    needs at its present width.

    Qt's own word-wrapped label reports sizes measured at a guessed width: a long text in
    a wide row then gets a row several lines too tall. This one hints its height for its
    width (asking again when the width changes) and, as its least size, one line; a box
    layout gives it its height for width (a widget that must never be cut short fixes
    its own height from them, as the verdict strip does).
    """

    def __init__(self, text: str = "", parent=None):
        super().__init__(text, parent)
        self.setWordWrap(True)
        policy = self.sizePolicy()
        policy.setHorizontalPolicy(QSizePolicy.Ignored)
        policy.setHeightForWidth(True)
        self.setSizePolicy(policy)

    def minimumSizeHint(self) -> QSize:  # noqa: N802 - Qt override
        m = self.contentsMargins()
        return QSize(0, self.fontMetrics().height() + m.top() + m.bottom())

    def sizeHint(self) -> QSize:  # noqa: N802 - Qt override
        return QSize(super().sizeHint().width(), self.heightForWidth(max(1, self.width())))

    def setText(self, text: str) -> None:  # noqa: N802 - Qt override
        super().setText(text)
        self.updateGeometry()

    def resizeEvent(self, event) -> None:  # noqa: N802 - Qt override
        super().resizeEvent(event)
        if event.size().width() != event.oldSize().width():
            self.updateGeometry()
