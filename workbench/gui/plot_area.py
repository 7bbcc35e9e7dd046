"""The plots of the selected configurations, their legend, calibration and diagnosis.

:class:`PlotArea` takes the selected rows of the results table
(:func:`workbench.gui.core_adapter.ranked_rows`), puts them in rank order, gives
each a colour and its rank as its number, and shows

- a legend strip above the plots (outside the data, wrapping): colour, rank,
  configuration and the core's diagnosis in a few words;
- the learning curves, fold scores and layer health side by side;

and keeps two pages the window places in its tabs beside the plots:
:attr:`PlotArea.calibration_page` (a scroll area holding :attr:`PlotArea.calibration`,
:class:`workbench.gui.calibration_panel.CalibrationPanel`, read from the store in the
background when its tab is shown) and
:attr:`PlotArea.diagnosis` (every finding of each selected configuration, in the
core's sentences, wrapped and scrollable).
"""

from __future__ import annotations

import html

from PySide6.QtCore import QEvent, Qt, Signal
from PySide6.QtWidgets import (
    QFrame,
    QLabel,
    QScrollArea,
    QSizePolicy,
    QSplitter,
    QTextBrowser,
    QVBoxLayout,
    QWidget,
)

from workbench.gui import theme as th
from workbench.gui.calibration_panel import CalibrationPanel
from workbench.gui.plots import CurvesPanel, HealthPanel, SpreadPanel
from workbench.gui.turns import after_paint


def _order(rows: list[dict]) -> list[dict]:
    """Rows in rank order (unranked configurations after the ranked ones, by position)."""
    return sorted(rows, key=lambda r: (r.get("rank") is None, r.get("rank") or 0,
                                       r.get("position") or 0))


def _label(row: dict, rows: list[dict]) -> str:
    """A row's name in the legend: ``hidden / head``, then the layers when the selection
    differs in them (or is one row), and the learning rate and L2 strength when it does."""
    def differs(key):
        return len({str(r.get(key)) for r in rows}) > 1

    words = f"{row['hidden']} / {row['head']}"
    if differs("layers") or len(rows) == 1:
        words += f" [{row['layers']}]"
    for key, word in (("learning_rate", "lr"), ("alpha", "L2")):
        if differs(key) and row.get(key) is not None:
            words += f" {word} {row[key]:g}"
    return words


class _Legend(QLabel):
    """The legend's label: at least one line high, also while hidden (see PlotArea)."""

    def changeEvent(self, event) -> None:  # noqa: N802 - Qt override
        super().changeEvent(event)
        if event.type() in (QEvent.FontChange, QEvent.StyleChange, QEvent.PolishRequest):
            self.hold_line()

    def hold_line(self) -> None:
        text = self.text()
        self.setText("x")
        one = self.heightForWidth(1000)
        self.setText(text)
        if one > 0 and one != self.minimumHeight():
            self.setMinimumHeight(one)


class PlotArea(QWidget):
    """Legend strip, plot tabs and diagnosis for the selected configurations.

    Parameters
    ----------
    calibration_source : callable, optional
        ``calibration_source(indices) -> dict`` (the core's calibration points for
        those configurations); called on a worker thread when the calibration tab
        is shown.
    """

    #: the calibration panel drew the data of the current selection
    calibrationShown = Signal()

    def __init__(self, calibration_source=None, parent=None):
        super().__init__(parent)
        self.theme = th.LIGHT
        self.calibration_source = calibration_source
        self._series: list[dict] = []
        self._generation = 0
        self._stage = 0
        self._then = None
        self._tabs = None
        self._diagnosis_stale = True  # written when its page is shown (or read)
        # an explicit least size: the layout would otherwise take the height its wrapped
        # legend needs at the narrowest width, and a scroll area around it would scroll
        # early; the height for the actual width (heightForWidth) still holds
        self.setMinimumSize(300, 150)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.setSpacing(2)
        self.legend = _Legend("")
        self.legend.setObjectName("legend")
        self.legend.setWordWrap(True)
        self.legend.setTextFormat(Qt.RichText)
        self.legend.setSizePolicy(QSizePolicy.Preferred, QSizePolicy.Minimum)
        self.legend.setContentsMargins(6, 2, 6, 0)
        # hidden (nothing selected), it keeps its line: the plots below are not laid out
        # again when a selection shows it (at the end of a sweep that moved all of them)
        policy = self.legend.sizePolicy()
        policy.setRetainSizeWhenHidden(True)
        self.legend.setSizePolicy(policy)
        self.legend.hold_line()
        lay.addWidget(self.legend)
        self.curves = CurvesPanel()
        self.spread = SpreadPanel()
        self.health = HealthPanel()
        split = QSplitter(Qt.Horizontal)
        split.setChildrenCollapsible(False)
        for p in (self.curves, self.spread, self.health):
            p.setMinimumWidth(150)
            split.addWidget(p)
        split.setSizes([430, 250, 300])
        lay.addWidget(split, 1)
        self.calibration = CalibrationPanel()
        # the page the window places in a tab: scrolls rather than squeezing the table above
        self.calibration_page = QScrollArea()
        self.calibration_page.setWidget(self.calibration)
        self.calibration_page.setWidgetResizable(True)
        self.calibration_page.setFrameShape(QFrame.NoFrame)
        self.calibration_page.setHorizontalScrollBarPolicy(Qt.ScrollBarAlwaysOff)
        self.diagnosis = QTextBrowser()
        self.diagnosis.setOpenLinks(False)
        self.diagnosis.setObjectName("diagnosis")
        self.show_rows([])

    def watch_tabs(self, tabs) -> None:
        """Read the calibration data when ``tabs`` shows the calibration page."""
        self._tabs = tabs
        tabs.currentChanged.connect(lambda *_: self._page_shown())

    def _page_shown(self) -> None:
        if self._diagnosis_stale and self._tabs.currentWidget() is self.diagnosis:
            self._diagnosis()
        self._fetch_calibration()

    def panels(self):
        return [self.curves, self.spread, self.health, self.calibration]

    def series(self) -> list[dict]:
        """The series now shown, in rank order."""
        return list(self._series)

    # ------------------------------------------------------------------ selection
    def show_rows(self, rows: list[dict], then=None) -> None:
        """Show the selected rows (any order; shown by rank).

        With ``then`` (a callable), the panels are drawn one per turn of the event loop
        (legend and loss curves, score curves, fold scores, layer health, the rest), then
        ``then()`` is called: showing the plots from their empty state lays each one out,
        and the three laid out and painted in one turn held the loop for 60-100 ms (at the
        end of a sweep, when the best row is selected). A call meanwhile draws everything at
        once and still calls the earlier ``then``.
        """
        series = []
        rows = _order([r for r in rows if r.get("series")])
        for i, r in enumerate(rows):
            s = dict(r["series"])
            s["color"] = i
            s["number"] = r.get("rank") or r.get("position") or i + 1
            s.setdefault("index", r.get("index"))
            s["label"] = _label(r, rows)
            # the health panel's hints, short (the Diagnosis tab has the sentences)
            s["hints"] = [f"#{s['number']} {f['label']}: " + ", ".join(
                f"layer {x['layer']} {x['share']:.0%}" for x in f["layers"])
                for f in (s.get("diagnosis") or {}).get("findings") or [] if f.get("layers")]
            series.append(s)
        self._series = series
        earlier, self._then = self._then, None
        self._stage += 1
        first, *more = self.curves.parts(series)
        steps = [lambda: (self._legend(), first()), *more,
                 lambda: self.spread.set_series(series),
                 lambda: self.health.set_series(series),
                 lambda: self._show_rest(series)]
        if then is None:
            for step in steps:
                step()
        else:
            self._then = then
            self._staged(self._stage, steps)
        if earlier is not None:
            earlier()

    def _staged(self, stage: int, steps: list) -> None:
        """The first step now, the others on the event loop's next turns (unless a newer
        :meth:`show_rows` came first), then the caller's ``then``."""
        if stage != self._stage:
            return
        steps[0]()
        if len(steps) > 1:
            after_paint(self, lambda: self._staged(stage, steps[1:]))
        else:
            then, self._then = self._then, None
            if then is not None:
                then()

    def staging(self) -> bool:
        """True while a staged :meth:`show_rows` has panels left to draw."""
        return self._then is not None

    def _show_rest(self, series: list[dict]) -> None:
        self.calibration.set_series(series)
        self._legend()
        self._diagnosis_later()
        self._generation += 1
        self._fetch_calibration()

    def _legend(self) -> None:
        if not self._series:
            if self.legend.text():
                self.legend.setText("")
            self.legend.hide()
            return
        items = []
        for s in self._series:
            color = self.theme.series_color(s["color"]).name()
            d = s.get("diagnosis") or {}
            # what is wrong, in the core's short words; "trains normally" is said once below
            words = "" if d.get("codes") == ["normal"] else (d.get("text") or "")
            items.append(f"<span style='color:{color}'>■</span>&nbsp;<b>#{s['number']}</b>"
                         f"&nbsp;{html.escape(s['label'])}"
                         + (f" <span style='color:{self.theme.warn}'>⚠&nbsp;"
                            f"{html.escape(words)}</span>" if words else ""))
        normal = sum(1 for s in self._series
                     if (s.get("diagnosis") or {}).get("codes") == ["normal"])
        if not normal:
            tail = ""
        elif normal == len(self._series):
            tail = " &nbsp;<i>(all train normally)</i>"
        else:
            tail = (f" &nbsp;<i>(the other{'s' if normal > 1 else ''} train"
                    f"{'' if normal > 1 else 's'} normally)</i>")
        text = "&nbsp;&nbsp; ".join(items) + tail
        if self.legend.text() != text:  # (a new text re-lays out the plots below)
            self.legend.setText(text)
        self.legend.show()

    def _diagnosis_later(self) -> None:
        """The Diagnosis page is written now when it is shown, else when it is next shown
        or read (a selection would otherwise lay out its rich text unseen)."""
        self._diagnosis_stale = True
        if self._tabs is None or self._tabs.currentWidget() is self.diagnosis:
            self._diagnosis()

    def _diagnosis(self) -> None:
        self._diagnosis_stale = False
        if not self._series:
            self.diagnosis.setHtml("<p>Select rows of the results to read why each "
                                   "configuration trains as it does.</p>")
            return
        parts = ["<p>What the stored curves, layer health, fold scores and out-of-fold "
                 "predictions say about each selected configuration (thresholds and their "
                 "sources: <i>workbench.sweep.diagnosis</i>).</p>"]
        for s in self._series:
            color = self.theme.series_color(s["color"]).name()
            d = s.get("diagnosis") or {}
            parts.append(f"<p><span style='color:{color}'>■</span> <b>#{s['number']} "
                         f"{html.escape(s['label'])}</b></p><ul>")
            for f in d.get("findings") or []:
                parts.append(f"<li>{html.escape(f['text'])}</li>")
            parts.append("</ul>")
        self.diagnosis.setHtml("".join(parts))

    def diagnosis_text(self) -> str:
        if self._diagnosis_stale:
            self._diagnosis()
        return self.diagnosis.toPlainText()

    # ------------------------------------------------------------------ calibration
    def _fetch_calibration(self) -> None:
        """Read the selection's calibration data when its tab is shown (once per selection)."""
        if self._tabs is None or self._tabs.currentWidget() is not self.calibration_page:
            return
        if not self.calibration.waiting():
            return
        if self.calibration_source is None:
            return
        from workbench.gui.tasks import run_task

        gen = self._generation
        indices = [s["index"] for s in self._series]
        source = self.calibration_source

        def done(data):
            if gen == self._generation:
                self.calibration.set_data(data)
                self.calibrationShown.emit()

        def failed(msg):
            if gen == self._generation:
                self.calibration.empty.setText(f"The predictions could not be read: {msg}")

        run_task(lambda: source(indices), done, failed)

    # ------------------------------------------------------------------ look
    def set_theme(self, theme: th.Theme) -> None:
        self.theme = theme
        for p in self.panels():
            p.set_theme(theme)
        self._legend()
        self._diagnosis_later()
