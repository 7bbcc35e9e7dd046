"""Calibration (classifiers) and residuals (regressors) of the selected configurations.

Draws what :func:`workbench.gui.core_adapter.calibration_points` returns (the
core's :func:`workbench.sweep.calibration.points`, from the stored out-of-fold
predictions):

- classifiers: the reliability curve of each configuration (mean predicted
  probability against the observed frequency per bin) over the diagonal of
  perfect calibration, and the Brier score and log-loss in the note;
- regressors: predicted against actual over the line y = x, and residuals
  (actual minus predicted) against predicted with each configuration's binned
  median residual, and RMSE, MAE and the mean residual in the note.

Axis ranges follow :func:`workbench.gui.plots.robust_range`, so a diverged
configuration's predictions do not flatten the others.
"""

from __future__ import annotations

import html

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtGui import QColor
from PySide6.QtWidgets import QHBoxLayout, QLabel

from workbench.gui.plots import _alpha, _held, _Panel, _pen, robust_range


class CalibrationPanel(_Panel):
    """Reliability curves, or predicted-vs-actual and residuals, for the selection."""

    def __init__(self, parent=None):
        super().__init__("Calibration and residuals (out-of-fold predictions)",
                         "Select rows of the results to see how well their predictions "
                         "match the truth on rows they never saw.", parent)
        row = QHBoxLayout()  # side by side: the window has width to spare, not height
        row.setContentsMargins(0, 0, 0, 0)
        self.layout_.addLayout(row, 1)
        self.main_plot = self._plot("observed", "predicted", into=row)
        self.resid_plot = self._plot("residual", "predicted", into=row)
        #: beside the plots: each configuration's colour, rank and scores
        self.scores = QLabel("")
        self.scores.setTextFormat(Qt.RichText)
        self.scores.setWordWrap(True)
        self.scores.setAlignment(Qt.AlignTop | Qt.AlignLeft)
        self.scores.setFixedWidth(250)
        row.addWidget(self.scores)
        self._finish()
        self._data: dict | None = None
        #: items drawn per configuration key: the reliability curve or the scatter
        self.items: dict[str, pg.GraphicsObject] = {}
        self.set_series([])

    def plots(self):
        return [self.main_plot, self.resid_plot]

    def set_series(self, series: list[dict]) -> None:
        """A new selection (rank order): its data is read anew (:meth:`set_data`)."""
        self._series = list(series)
        self._data = None
        self._draw()

    def set_data(self, data: dict) -> None:
        """The selection's data, as :func:`workbench.sweep.calibration.points` returns it."""
        self._data = data
        self._draw()

    def set_theme(self, theme) -> None:
        self._style_axes(theme)
        self._draw()

    def waiting(self) -> bool:
        """Whether the selection's data has not arrived yet."""
        return bool(self._series) and not self._covers()

    def _covers(self) -> bool:
        conf = (self._data or {}).get("configurations") or {}
        return all(s.get("index") in conf for s in self._series)

    def _draw(self) -> None:
        for w in self.plots():
            w.clear()
        self.items = {}
        self.clipped = {}
        if not self._series:
            self._show_empty(True)
            self.empty.setText("Select rows of the results to see how well their predictions "
                               "match the truth on rows they never saw.")
            self._say("")
            self.scores.setText("")
            return
        if not self._covers():
            self._show_empty(True)
            self.empty.setText("Reading the stored out-of-fold predictions…")
            self._say("")
            self.scores.setText("")
            return
        conf = self._data["configurations"]
        task = self._data.get("task")
        have = [s for s in self._series if conf.get(s["index"])]
        if not have:
            self._show_empty(True)
            self.empty.setText("No out-of-fold predictions are stored for these configurations "
                               "(a sweep stored before they were kept, or no trial done).")
            self._say("")
            self.scores.setText("")
            return
        self._show_empty(False)
        if task == "classification":
            self._classification(have, conf)
        else:
            self._regression(have, conf)

    def _words(self, s: dict, summary: dict) -> str:
        """``■ #3 Brier 0.1 · log-loss 0.3`` in the series colour (rich text)."""
        from workbench.gui.core_adapter import calibration_words

        color = self.theme.series_color(s["color"]).name()
        return (f"<span style='color:{color}'>■</span>&nbsp;<b>#{s.get('number')}</b>&nbsp;"
                f"{html.escape(s.get('label', ''))}<br>&nbsp;&nbsp;&nbsp;"
                f"{html.escape(calibration_words(summary))}")

    def _classification(self, have, conf) -> None:
        fg = QColor(self.theme.plot_fg)
        self.main_plot.setLabel("left", "observed")
        self.main_plot.setLabel("bottom", "mean predicted probability")
        self.main_plot.plot([0, 1], [0, 1], pen=_pen(_alpha(fg, 140), 1, Qt.DashLine))
        event = None
        for s in have:
            summ = conf[s["index"]]["summary"]
            event = summ["event_words"]
            rel = summ["reliability"]
            color = self.theme.series_color(s["color"])
            self.items[s["key"]] = self.main_plot.plot(
                rel["predicted"], rel["observed"], pen=_pen(color, 2), symbol="o",
                symbolBrush=color, symbolPen=None, symbolSize=6)
        self.main_plot.setXRange(0, 1, padding=0.02)
        self.main_plot.setYRange(0, 1, padding=0.02)
        self.resid_plot.setVisible(False)
        lines = [self._words(s, conf[s["index"]]["summary"]) for s in have]
        self.scores.setText("<br>".join(lines) + "<br><i>lower is better</i>")
        self._say("", f"Reliability of the {event}, in ten equal bins: on the dashed diagonal "
                      "the predicted probabilities come true as often as they say. Brier score "
                      "and log-loss: lower is better. From the stored out-of-fold predictions, "
                      "pooled over the repeats.")

    def _regression(self, have, conf) -> None:
        fg = QColor(self.theme.plot_fg)
        self.main_plot.setLabel("left", "actual")
        self.main_plot.setLabel("bottom", "predicted")
        self.resid_plot.setVisible(True)
        self.resid_plot.setLabel("left", "residual")
        self.resid_plot.setLabel("bottom", "predicted")
        pts = {s["key"]: (np.asarray(conf[s["index"]]["predicted"], float),
                          np.asarray(conf[s["index"]]["actual"], float)) for s in have}
        flagged = [bool(s.get("diverged")) for s in have]
        act = np.concatenate([pts[s["key"]][1] for s in have])
        act = act[np.isfinite(act)]
        found = robust_range([pts[s["key"]][0] for s in have], flagged)
        lo, hi = (found[0], found[1]) if found else (0.0, 1.0)
        if len(act):  # the actual values are the table's: always shown whole
            lo, hi = min(float(np.min(act)), lo), max(float(np.max(act)), hi)
        self.main_plot.plot([lo, hi], [lo, hi], pen=_pen(_alpha(fg, 160), 1, Qt.DashLine))
        self.resid_plot.plot([lo, hi], [0, 0], pen=_pen(_alpha(fg, 160), 1, Qt.DashLine))
        resid_groups = []
        for s in have:
            p, a = pts[s["key"]]
            color = self.theme.series_color(s["color"])
            sc = pg.ScatterPlotItem(_held(p, lo, hi), a, size=4, pen=None,
                                    brush=_alpha(color, 110))
            self.main_plot.addItem(sc)
            self.items[s["key"]] = sc
            r = a - p
            resid_groups.append(r)
            self.resid_plot.addItem(pg.ScatterPlotItem(_held(p, lo, hi), r, size=4, pen=None,
                                                       brush=_alpha(color, 90)))
            bins = conf[s["index"]]["summary"]["bins"]
            self.resid_plot.plot(bins["predicted"], bins["residual_median"],
                                 pen=_pen(color, 2))
        self.main_plot.setXRange(lo, hi, padding=0.03)
        self.main_plot.setYRange(lo, hi, padding=0.03)
        xs = [(pts[s["key"]][0], r) for s, r in zip(have, resid_groups)]
        clip = self._apply_range(self.resid_plot, "residual", resid_groups, have, flagged, xs)
        lines = [self._words(s, conf[s["index"]]["summary"]) for s in have]
        shown = max(len(pts[s["key"]][0]) for s in have)
        wide = [f"#{have[i].get('number')}" for i in (found[2] if found else [])]
        self.clipped["predicted"] = [have[i]["label"] for i in (found[2] if found else [])]
        self.scores.setText("<br>".join(lines))
        self._say((f"Predictions of {', '.join(wide)} run outside the range (held at its edge)."
                   if wide else "") + (" " + clip if clip else ""),
                  f"Left: each dot a row's out-of-fold prediction (first repeat, up to {shown} "
                  "rows) against its actual value; dashed: perfect prediction. Right: actual "
                  "minus predicted, with each configuration's median residual per bin.")
